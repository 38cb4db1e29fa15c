//! The Matrix-Tree Theorem for directed spanning trees rooted at 0 (Tutte 1984; applied to
//! dependency parsing by Koo, Globerson, Carreras & Collins 2007 and Smith & Smith 2007).
//!
//! With arc weights `A[h][m] = exp(score(h, m))` between words and root weights
//! `r[m] = exp(score(0, m))`, over the n words:
//! - multi-root: `L[m][m] = r[m] + Σ_h A[h][m]`, `L[h][m] = −A[h][m]`; `Z = det L`;
//! - single-root (Koo et al. 2007, §3.3): the same Laplacian without `r` on the diagonal, with
//!   its first row replaced by `r`; `Z = det L̂`.
//!
//! Since `∂ log det L / ∂ L[i][j] = (L⁻¹)[j][i]`, each arc marginal is its weight times the sum of
//! the inverse entries at the positions the weight occupies.
//!
//! Numerical stability: every entry of column `m` is an arc *into* `m`, so multiplying the
//! column by `exp(−c_m)`, with `c_m` the best score into `m`, scales `Z` by `exp(−c_m)` and leaves
//! the marginals unchanged. After this shift every weight lies in [0, 1] and each column has a 1,
//! so nothing overflows for scores of any magnitude; `log Z = log |det| + Σ c_m`, with the
//! determinant taken as the sum of the logs of the LU pivots (no underflow of the product).

use super::Marginals;
use crate::decode::{RootConstraint, ScoreMatrix};

/// LU factorisation with partial pivoting of a dense n×n row-major matrix, in place.
struct Lu {
    size: usize,
    factors: Vec<f64>,
    permutation: Vec<usize>,
    log_abs_det: f64,
    negative: bool,
}

impl Lu {
    fn factor(size: usize, mut a: Vec<f64>) -> Lu {
        let mut permutation: Vec<usize> = (0..size).collect();
        let mut negative = false;
        let mut log_abs_det = 0.0;
        for k in 0..size {
            let mut pivot_row = k;
            let mut pivot_abs = a[k * size + k].abs();
            for i in k + 1..size {
                let v = a[i * size + k].abs();
                if v > pivot_abs {
                    pivot_abs = v;
                    pivot_row = i;
                }
            }
            if pivot_row != k {
                for j in 0..size {
                    a.swap(k * size + j, pivot_row * size + j);
                }
                permutation.swap(k, pivot_row);
                negative = !negative;
            }
            let pivot = a[k * size + k];
            if pivot < 0.0 {
                negative = !negative;
            }
            log_abs_det += pivot.abs().ln();
            if pivot == 0.0 {
                continue;
            }
            let (upper, lower) = a.split_at_mut((k + 1) * size);
            let pivot_row_values = &upper[k * size + k + 1..(k + 1) * size];
            for i in 0..size - k - 1 {
                let row = &mut lower[i * size..(i + 1) * size];
                let factor = row[k] / pivot;
                row[k] = factor;
                if factor != 0.0 {
                    for (x, &p) in row[k + 1..].iter_mut().zip(pivot_row_values) {
                        *x -= factor * p;
                    }
                }
            }
        }
        Lu {
            size,
            factors: a,
            permutation,
            log_abs_det,
            negative,
        }
    }

    /// The inverse, row-major.
    fn inverse(&self) -> Vec<f64> {
        let n = self.size;
        let mut inverse = vec![0.0; n * n];
        let mut column = vec![0.0; n];
        for j in 0..n {
            // Solve L U x = P e_j.
            for i in 0..n {
                column[i] = if self.permutation[i] == j { 1.0 } else { 0.0 };
            }
            for i in 0..n {
                let row = &self.factors[i * n..i * n + i];
                let dot: f64 = row.iter().zip(&column[..i]).map(|(a, b)| a * b).sum();
                column[i] -= dot;
            }
            for i in (0..n).rev() {
                let row = &self.factors[i * n + i + 1..(i + 1) * n];
                let dot: f64 = row.iter().zip(&column[i + 1..]).map(|(a, b)| a * b).sum();
                column[i] = (column[i] - dot) / self.factors[i * n + i];
            }
            for i in 0..n {
                inverse[i * n + j] = column[i];
            }
        }
        inverse
    }
}

/// Shifted weights: `(shift per word, A[h][m] for words, r[m])`, all word indices 0-based.
fn shifted_weights(scores: &ScoreMatrix) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let n = scores.words();
    let mut shift = vec![0.0; n];
    let mut arcs = vec![0.0; n * n];
    let mut root = vec![0.0; n];
    for m in 0..n {
        let best = (0..=n)
            .map(|h| scores.get(h, m + 1))
            .fold(f64::NEG_INFINITY, f64::max);
        shift[m] = best;
        root[m] = (scores.get(0, m + 1) - best).exp();
        for h in 0..n {
            if h != m {
                arcs[h * n + m] = (scores.get(h + 1, m + 1) - best).exp();
            }
        }
    }
    (shift, arcs, root)
}

fn laplacian(n: usize, arcs: &[f64], root_weights: &[f64], root: RootConstraint) -> Vec<f64> {
    let mut l = vec![0.0; n * n];
    for m in 0..n {
        let mut incoming = 0.0;
        for h in 0..n {
            if h != m {
                l[h * n + m] = -arcs[h * n + m];
                incoming += arcs[h * n + m];
            }
        }
        l[m * n + m] = incoming;
    }
    match root {
        RootConstraint::MultiRoot => {
            for m in 0..n {
                l[m * n + m] += root_weights[m];
            }
        }
        RootConstraint::SingleRoot => l[..n].copy_from_slice(root_weights),
    }
    l
}

/// log Σ over all spanning trees rooted at 0 (of the given root kind) of exp(score).
pub fn log_partition(scores: &ScoreMatrix, root: RootConstraint) -> f64 {
    let n = scores.words();
    let (shift, arcs, root_weights) = shifted_weights(scores);
    let lu = Lu::factor(n, laplacian(n, &arcs, &root_weights, root));
    lu.log_abs_det + shift.iter().sum::<f64>()
}

/// Marginals over all spanning trees rooted at 0.
pub fn marginals(scores: &ScoreMatrix, root: RootConstraint) -> Marginals {
    let n = scores.words();
    let side = n + 1;
    let (shift, arcs, root_weights) = shifted_weights(scores);
    let lu = Lu::factor(n, laplacian(n, &arcs, &root_weights, root));
    debug_assert!(!lu.negative || lu.log_abs_det == f64::NEG_INFINITY);
    let log_partition = lu.log_abs_det + shift.iter().sum::<f64>();
    let inv = lu.inverse();
    let mut probabilities = vec![0.0; side * side];
    let single = root == RootConstraint::SingleRoot;
    for m in 0..n {
        // Root arc: multi-root at L[m][m]; single-root at L̂[0][m].
        let root_position = if single { inv[m * n] } else { inv[m * n + m] };
        probabilities[m + 1] = root_weights[m] * root_position;
        for h in 0..n {
            if h == m {
                continue;
            }
            // A[h][m] sits at L[m][m] (+) unless that row was replaced, and at L[h][m] (−)
            // unless that row was replaced.
            let on_diagonal = if single && m == 0 {
                0.0
            } else {
                inv[m * n + m]
            };
            let off_diagonal = if single && h == 0 {
                0.0
            } else {
                inv[m * n + h]
            };
            probabilities[(h + 1) * side + m + 1] = arcs[h * n + m] * (on_diagonal - off_diagonal);
        }
    }
    Marginals::new(side, probabilities, log_partition)
}
