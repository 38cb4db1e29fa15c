//! Inside-outside over the Eisner chart, in log space.
//!
//! The inside pass is Eisner's recurrence with max replaced by log-sum-exp. The outside pass
//! propagates adjoints `∂ log Z / ∂ chart cell` from the full span back to the single words; each
//! log-sum-exp passes its adjoint to its terms in proportion to their softmax weight, so every
//! quantity stays in [0, 1] and nothing overflows whatever the scale of the scores. An arc's
//! marginal is the adjoint of its score.

use super::{Marginals, log_sum_exp};
use crate::decode::{RootConstraint, ScoreMatrix};

struct Inside {
    side: usize,
    complete_right: Vec<f64>,
    complete_left: Vec<f64>,
    /// log-sum over split points, before the arc score is added.
    inner: Vec<f64>,
    incomplete_right: Vec<f64>,
    incomplete_left: Vec<f64>,
}

fn inside(scores: &ScoreMatrix, root: RootConstraint) -> Inside {
    let side = scores.side();
    let blank = vec![f64::NEG_INFINITY; side * side];
    let mut chart = Inside {
        side,
        complete_right: blank.clone(),
        complete_left: blank.clone(),
        inner: blank.clone(),
        incomplete_right: blank.clone(),
        incomplete_left: blank,
    };
    let at = |s: usize, t: usize| s * side + t;
    for s in 0..side {
        chart.complete_right[at(s, s)] = 0.0;
        chart.complete_left[at(s, s)] = 0.0;
    }
    let single_root = root == RootConstraint::SingleRoot;
    for width in 1..side {
        for s in 0..side - width {
            let t = s + width;
            let last_split = if s == 0 && single_root { 0 } else { t - 1 };
            let (cr, cl) = (&chart.complete_right, &chart.complete_left);
            let inner = log_sum_exp((s..=last_split).map(|r| cr[at(s, r)] + cl[at(r + 1, t)]));
            chart.inner[at(s, t)] = inner;
            chart.incomplete_right[at(s, t)] = inner + scores.get(s, t);
            chart.incomplete_left[at(s, t)] = if s == 0 {
                f64::NEG_INFINITY
            } else {
                inner + scores.get(t, s)
            };
            let (ir, cr) = (&chart.incomplete_right, &chart.complete_right);
            chart.complete_right[at(s, t)] =
                log_sum_exp((s + 1..=t).map(|r| ir[at(s, r)] + cr[at(r, t)]));
            let (cl, il) = (&chart.complete_left, &chart.incomplete_left);
            chart.complete_left[at(s, t)] =
                log_sum_exp((s..t).map(|r| cl[at(s, r)] + il[at(r, t)]));
        }
    }
    chart
}

/// log Σ over projective trees of exp(score).
pub fn log_partition(scores: &ScoreMatrix, root: RootConstraint) -> f64 {
    inside(scores, root).complete_right[scores.words()]
}

/// Marginals over projective trees.
pub fn marginals(scores: &ScoreMatrix, root: RootConstraint) -> Marginals {
    let chart = inside(scores, root);
    let side = chart.side;
    let at = |s: usize, t: usize| s * side + t;
    let single_root = root == RootConstraint::SingleRoot;
    let mut d_complete_right = vec![0.0; side * side];
    let mut d_complete_left = vec![0.0; side * side];
    let mut d_incomplete_right = vec![0.0; side * side];
    let mut d_incomplete_left = vec![0.0; side * side];
    let mut probabilities = vec![0.0; side * side];
    d_complete_right[at(0, side - 1)] = 1.0;
    // Reverse of the inside order: widest spans first; within a span, undo CL, then CR, then the
    // incomplete spans (the forward pass built them in the opposite order).
    for width in (1..side).rev() {
        for s in 0..side - width {
            let t = s + width;
            let grad = d_complete_left[at(s, t)];
            let total = chart.complete_left[at(s, t)];
            if grad != 0.0 && total > f64::NEG_INFINITY {
                for r in s..t {
                    let term = chart.complete_left[at(s, r)] + chart.incomplete_left[at(r, t)];
                    let share = grad * (term - total).exp();
                    d_complete_left[at(s, r)] += share;
                    d_incomplete_left[at(r, t)] += share;
                }
            }
            let grad = d_complete_right[at(s, t)];
            let total = chart.complete_right[at(s, t)];
            if grad != 0.0 && total > f64::NEG_INFINITY {
                for r in s + 1..=t {
                    let term = chart.incomplete_right[at(s, r)] + chart.complete_right[at(r, t)];
                    let share = grad * (term - total).exp();
                    d_incomplete_right[at(s, r)] += share;
                    d_complete_right[at(r, t)] += share;
                }
            }
            let grad_right = d_incomplete_right[at(s, t)];
            let grad_left = if s == 0 {
                0.0
            } else {
                d_incomplete_left[at(s, t)]
            };
            probabilities[at(s, t)] = grad_right;
            if s != 0 {
                probabilities[at(t, s)] = grad_left;
            }
            let grad = grad_right + grad_left;
            let total = chart.inner[at(s, t)];
            if grad != 0.0 && total > f64::NEG_INFINITY {
                let last_split = if s == 0 && single_root { 0 } else { t - 1 };
                for r in s..=last_split {
                    let term = chart.complete_right[at(s, r)] + chart.complete_left[at(r + 1, t)];
                    let share = grad * (term - total).exp();
                    d_complete_right[at(s, r)] += share;
                    d_complete_left[at(r + 1, t)] += share;
                }
            }
        }
    }
    Marginals::new(side, probabilities, chart.complete_right[at(0, side - 1)])
}
