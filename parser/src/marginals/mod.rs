//! Arc marginals and the log-partition function of the tree distribution
//! `P(tree) ∝ exp(Σ_{arcs} score(h, m))`.
//!
//! - Projective trees: inside-outside over the Eisner chart ([`inside_outside`]), in log space;
//!   the outside pass is written as the reverse-mode derivative of the inside pass (Eisner 2016,
//!   "Inside-Outside and Forward-Backward Algorithms Are Just Backprop"), since
//!   `P(h → m) = ∂ log Z / ∂ score(h, m)`.
//! - Trees of any shape: the Matrix-Tree Theorem (Koo, Globerson, Carreras & Collins 2007;
//!   Smith & Smith 2007), both root variants ([`matrix_tree`]).
//!
//! Both are O(n³). The marginals become per-arc confidences in the service.

pub mod inside_outside;
pub mod matrix_tree;

use crate::decode::{Algorithm, RootConstraint, ScoreMatrix};

/// Arc marginals of one sentence: `probability(h, m)` = P(h → m) under the tree distribution.
#[derive(Debug, Clone, PartialEq)]
pub struct Marginals {
    side: usize,
    probabilities: Vec<f64>,
    /// log Σ_trees exp(score(tree)).
    pub log_partition: f64,
    /// Words whose incoming marginals may be inaccurate (a bounded computation ran out of its
    /// [`matrix_tree::Effort`]); empty for unbounded computations.
    unreliable: Vec<usize>,
}

impl Marginals {
    pub(crate) fn new(side: usize, probabilities: Vec<f64>, log_partition: f64) -> Self {
        Marginals {
            side,
            probabilities,
            log_partition,
            unreliable: Vec::new(),
        }
    }

    pub(crate) fn mark_unreliable(&mut self, words: &[usize]) {
        self.unreliable.extend_from_slice(words);
    }

    /// Whether the marginals of the arcs into word `modifier` are accurate (always, unless a
    /// bounded computation ran out of effort for this word).
    pub fn reliable(&self, modifier: usize) -> bool {
        !self.unreliable.contains(&modifier)
    }

    /// P(h → m); 0 for arcs that cannot exist.
    pub fn probability(&self, head: usize, modifier: usize) -> f64 {
        self.probabilities[head * self.side + modifier]
    }

    /// The (n+1)×(n+1) matrix as rows, like the score matrix.
    pub fn to_rows(&self) -> Vec<Vec<f64>> {
        self.probabilities
            .chunks(self.side)
            .map(|row| row.to_vec())
            .collect()
    }
}

/// Arc marginals and log-partition for the trees the given decoder ranges over.
pub fn marginals(scores: &ScoreMatrix, algorithm: Algorithm, root: RootConstraint) -> Marginals {
    match algorithm {
        Algorithm::Projective => inside_outside::marginals(scores, root),
        Algorithm::NonProjective => matrix_tree::marginals(scores, root),
    }
}

/// [`marginals`] with a bound on the extra work the Matrix-Tree recomputation may take; words
/// it could not afford are marked unreliable (inside-outside needs no such work).
pub fn marginals_within(
    scores: &ScoreMatrix,
    algorithm: Algorithm,
    root: RootConstraint,
    effort: matrix_tree::Effort,
) -> Marginals {
    match algorithm {
        Algorithm::Projective => inside_outside::marginals(scores, root),
        Algorithm::NonProjective => matrix_tree::marginals_within(scores, root, effort),
    }
}

/// log Σ exp(x_i), stable for any mix of large and −∞ values.
pub(crate) fn log_sum_exp(values: impl Iterator<Item = f64> + Clone) -> f64 {
    let max = values.clone().fold(f64::NEG_INFINITY, f64::max);
    if max == f64::NEG_INFINITY {
        return f64::NEG_INFINITY;
    }
    max + values.map(|v| (v - max).exp()).sum::<f64>().ln()
}
