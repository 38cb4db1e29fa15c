//! Numerical range: marginals and log-partition for 512 words with scores of magnitude up to 1e3.
//! Bounds used: max-tree score ≤ log Z ≤ max-tree score + ln(number of trees), and the counts of
//! `counting.rs` (Cayley; OEIS A001764 / A006013) give ln(number of trees).

use arcwright_parser::decode::{self, Algorithm, RootConstraint};
use arcwright_parser::marginals;

use crate::random_scores;

#[test]
fn marginals_stay_finite_and_normalised_at_512_words_and_scores_of_1e3() {
    let n = 512;
    let scores = random_scores(n, 1000.0, 512);
    for algorithm in [Algorithm::Projective, Algorithm::NonProjective] {
        for root in [RootConstraint::SingleRoot, RootConstraint::MultiRoot] {
            let best = decode::decode(&scores, algorithm, root).score;
            let m = marginals::marginals(&scores, algorithm, root);
            // ln(#trees) ≤ (n−1)·ln(n+1) for every family (Cayley bounds them all).
            let ln_trees = (n as f64 - 1.0) * ((n + 1) as f64).ln();
            assert!(
                m.log_partition.is_finite(),
                "{algorithm} {root:?}: log Z = {}",
                m.log_partition
            );
            assert!(
                m.log_partition >= best - 1e-6 * best.abs(),
                "{algorithm} {root:?}: log Z {} < best {best}",
                m.log_partition
            );
            assert!(m.log_partition <= best + ln_trees + 1e-6 * best.abs());
            for modifier in 1..=n {
                let total: f64 = (0..=n).map(|h| m.probability(h, modifier)).sum();
                assert!(
                    (total - 1.0).abs() < 1e-6,
                    "{algorithm} {root:?}: word {modifier} sums to {total}"
                );
            }
        }
    }
}

#[test]
fn adding_a_constant_to_every_arc_into_a_word_shifts_log_z_and_keeps_marginals() {
    let n = 20;
    let scores = random_scores(n, 4.0, 9);
    let shifted = arcwright_parser::decode::ScoreMatrix::from_fn(n, |h, m| {
        scores.get(h, m) + if m == 7 { 250.0 } else { 0.0 }
    })
    .expect("valid");
    for algorithm in [Algorithm::Projective, Algorithm::NonProjective] {
        for root in [RootConstraint::SingleRoot, RootConstraint::MultiRoot] {
            let a = marginals::marginals(&scores, algorithm, root);
            let b = marginals::marginals(&shifted, algorithm, root);
            assert!((b.log_partition - a.log_partition - 250.0).abs() < 1e-8);
            for h in 0..=n {
                for m in 1..=n {
                    assert!((a.probability(h, m) - b.probability(h, m)).abs() < 1e-9);
                }
            }
        }
    }
}

#[test]
fn bounded_marginals_are_exact_or_marked_unreliable() {
    // Peaked scores on short sentences: the regime where Matrix-Tree columns cancel.
    let mut left_unreliable = 0;
    for seed in 0..40u64 {
        let n = 4 + (seed as usize % 9);
        let scores = random_scores(n, 1000.0, seed);
        let exact = marginals::matrix_tree::marginals(&scores, RootConstraint::SingleRoot);
        assert!((1..=n).all(|m| exact.reliable(m)));
        for operations in [0, 50, 5_000_000] {
            let bounded = marginals::matrix_tree::marginals_within(
                &scores,
                RootConstraint::SingleRoot,
                marginals::matrix_tree::Effort { operations },
            );
            for m in 1..=n {
                if !bounded.reliable(m) {
                    left_unreliable += usize::from(operations == 0);
                    continue;
                }
                for h in 0..=n {
                    let (a, b) = (bounded.probability(h, m), exact.probability(h, m));
                    assert!(
                        (a - b).abs() < 1e-9,
                        "seed {seed}, effort {operations}: P({h}→{m}) {a} vs {b}"
                    );
                }
            }
        }
    }
    assert!(
        left_unreliable > 0,
        "with no effort some cancelled column must be marked unreliable"
    );
}
