//! Outside check: published counting sequences. With every score 0, each tree has weight 1 and
//! exp(log-partition) is the number of trees:
//! - non-projective, multi-root: (n+1)^(n−1), Cayley's formula (rooted labelled trees);
//! - non-projective, single-root: n^(n−1) (the root's child r, then a tree on n vertices rooted
//!   at r: n choices times n^(n−2) by Cayley);
//! - projective, multi-root: OEIS A001764, C(3n, n)/(2n+1): 1, 3, 12, 55, 273, 1428, …
//! - projective, single-root: OEIS A006013, C(3n−2, n−1)/n: 1, 2, 7, 30, 143, 728, …

use arcwright_parser::decode::{RootConstraint, ScoreMatrix};
use arcwright_parser::marginals::{inside_outside, matrix_tree};

use crate::assert_close;

fn zeros(n: usize) -> ScoreMatrix {
    ScoreMatrix::from_fn(n, |_, _| 0.0).expect("valid")
}

/// ln C(a, b), summed term by term (exact enough for these sizes).
fn ln_binomial(a: u64, b: u64) -> f64 {
    (0..b)
        .map(|i| ((a - i) as f64).ln() - ((i + 1) as f64).ln())
        .sum()
}

#[test]
fn projective_counts_match_oeis_a001764_and_a006013() {
    // First terms written out from the OEIS entries (n = 1..6).
    let multi_root = [1.0, 3.0, 12.0, 55.0, 273.0, 1428.0];
    let single_root = [1.0, 2.0, 7.0, 30.0, 143.0, 728.0];
    for n in 1..=6 {
        let z = inside_outside::log_partition(&zeros(n), RootConstraint::MultiRoot).exp();
        assert_close(z, multi_root[n - 1], 1e-12, &format!("A001764 n={n}"));
        let z = inside_outside::log_partition(&zeros(n), RootConstraint::SingleRoot).exp();
        assert_close(z, single_root[n - 1], 1e-12, &format!("A006013 n={n}"));
    }
    // Further terms from the closed forms, compared in log space.
    for n in [10u64, 25, 60, 128] {
        let expected = ln_binomial(3 * n, n) - ((2 * n + 1) as f64).ln();
        let got = inside_outside::log_partition(&zeros(n as usize), RootConstraint::MultiRoot);
        assert_close(got, expected, 1e-10, &format!("A001764 n={n}"));
        let expected = ln_binomial(3 * n - 2, n - 1) - (n as f64).ln();
        let got = inside_outside::log_partition(&zeros(n as usize), RootConstraint::SingleRoot);
        assert_close(got, expected, 1e-10, &format!("A006013 n={n}"));
    }
}

#[test]
fn non_projective_counts_match_cayley() {
    for n in [1usize, 2, 3, 4, 5, 6, 10, 50, 200] {
        let expected_multi = (n as f64 - 1.0) * ((n + 1) as f64).ln();
        let got = matrix_tree::log_partition(&zeros(n), RootConstraint::MultiRoot);
        assert_close(
            got,
            expected_multi,
            1e-9,
            &format!("Cayley (n+1)^(n-1), n={n}"),
        );
        let expected_single = (n as f64 - 1.0) * (n as f64).ln();
        let got = matrix_tree::log_partition(&zeros(n), RootConstraint::SingleRoot);
        assert_close(got, expected_single, 1e-9, &format!("n^(n-1), n={n}"));
    }
}
