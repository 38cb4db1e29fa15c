//! Outside check: brute force. For n ≤ 7 every head assignment is enumerated; the best score and
//! the log-partition of each of the four tree families (projective / non-projective × single /
//! multi-root) must match the decoders and the marginal computations, and each arc's marginal must
//! equal the total probability of the trees that contain it.

use arcwright_parser::decode::{
    self, Algorithm, RootConstraint, ScoreMatrix, is_projective, reference,
};
use arcwright_parser::marginals;

use crate::{assert_close, integer_scores, random_scores};

const VARIANTS: [(Algorithm, RootConstraint); 4] = [
    (Algorithm::Projective, RootConstraint::SingleRoot),
    (Algorithm::Projective, RootConstraint::MultiRoot),
    (Algorithm::NonProjective, RootConstraint::SingleRoot),
    (Algorithm::NonProjective, RootConstraint::MultiRoot),
];

/// All trees of one family, from one enumeration of every tree.
fn family(all: &[Vec<usize>], algorithm: Algorithm, root: RootConstraint) -> Vec<&Vec<usize>> {
    all.iter()
        .filter(|heads| algorithm == Algorithm::NonProjective || is_projective(heads))
        .filter(|heads| {
            root == RootConstraint::MultiRoot
                || heads.iter().skip(1).filter(|&&h| h == 0).count() == 1
        })
        .collect()
}

fn check_against_brute_force(scores: &ScoreMatrix, all: &[Vec<usize>], exact_marginals: bool) {
    let n = scores.words();
    for (algorithm, root) in VARIANTS {
        let trees = family(all, algorithm, root);
        let tree_scores: Vec<f64> = trees.iter().map(|t| scores.tree_score(t)).collect();
        let best = tree_scores
            .iter()
            .copied()
            .fold(f64::NEG_INFINITY, f64::max);
        let what = format!("n={n} {algorithm} {root:?}");

        let fast = decode::decode(scores, algorithm, root);
        assert!(
            trees.contains(&&fast.heads.to_vec()),
            "{what}: fast decoder returned a tree outside the family: {:?}",
            fast.heads
        );
        assert_close(fast.score, best, 1e-12, &format!("{what} fast decoder"));
        let slow = match algorithm {
            Algorithm::Projective => reference::eisner(scores, root),
            Algorithm::NonProjective => reference::chu_liu_edmonds(scores, root),
        };
        assert!(
            trees.contains(&&slow),
            "{what}: reference returned a tree outside the family"
        );
        assert_close(
            scores.tree_score(&slow),
            best,
            1e-12,
            &format!("{what} reference decoder"),
        );

        let max = best;
        let partition: f64 = tree_scores.iter().map(|s| (s - max).exp()).sum();
        let log_partition = max + partition.ln();
        let computed = marginals::marginals(scores, algorithm, root);
        assert_close(
            computed.log_partition,
            log_partition,
            1e-10,
            &format!("{what} log-partition"),
        );
        let direct = match algorithm {
            Algorithm::Projective => marginals::inside_outside::log_partition(scores, root),
            Algorithm::NonProjective => marginals::matrix_tree::log_partition(scores, root),
        };
        assert_close(
            direct,
            log_partition,
            1e-10,
            &format!("{what} log-partition (log-space)"),
        );
        if exact_marginals {
            for h in 0..=n {
                for m in 1..=n {
                    let mass: f64 = trees
                        .iter()
                        .zip(&tree_scores)
                        .filter(|(t, _)| t[m] == h && h != m)
                        .map(|(_, s)| (s - log_partition).exp())
                        .sum();
                    let got = computed.probability(h, m);
                    assert!(
                        (got - mass).abs() < 1e-9,
                        "{what}: P({h}→{m}) = {got}, brute force {mass}; scores {:?}",
                        (0..=n)
                            .map(|a| (0..=n).map(|b| scores.get(a, b)).collect::<Vec<_>>())
                            .collect::<Vec<_>>()
                    );
                }
            }
        }
    }
}

#[test]
fn decoders_and_partition_functions_match_brute_force_up_to_seven_words() {
    for n in 1..=7usize {
        let all = reference::all_trees(n, false, RootConstraint::MultiRoot);
        let cases = match n {
            1..=4 => 40,
            5 | 6 => 12,
            _ => 3,
        };
        for case in 0..cases {
            let seed = (n * 1000 + case) as u64;
            check_against_brute_force(&random_scores(n, 5.0, seed), &all, n <= 6);
            // Integer scores produce ties: any optimal tree is accepted, the score must match.
            check_against_brute_force(&integer_scores(n, seed), &all, false);
            // Peaked scores (magnitude up to 1e3): decoders, log Z and marginals still exact
            // (Matrix-Tree columns that cancel are recomputed by determinant ratios).
            for magnitude in [50.0, 300.0, 1000.0] {
                check_against_brute_force(&random_scores(n, magnitude, seed), &all, n <= 6);
            }
        }
    }
}

#[test]
fn brute_force_enumeration_counts_match_cayley() {
    // Cayley's formula: (n+1)^(n-1) labelled trees on n+1 vertices, i.e. arborescences rooted at 0.
    for n in 1..=6usize {
        let all = reference::all_trees(n, false, RootConstraint::MultiRoot);
        assert_eq!(all.len(), (n + 1).pow(n as u32 - 1), "n={n}");
    }
}
