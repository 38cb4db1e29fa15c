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
//! Numerical stability, in two parts:
//! - *Scale.* Every entry of column `m` is an arc into `m`, so the column can be multiplied by
//!   `exp(−c_m)` (`c_m` = best score into `m`) without changing the marginals; `log Z` gains
//!   `Σ c_m`. Weights then lie in [0, 1] whatever the magnitude of the scores. (Single-root: `c_m`
//!   ranges over word heads, and the root row gets one shift of its own, since the determinant
//!   is linear in that row.)
//! - *Cancellation.* With peaked scores the Laplacian is nearly singular (a strongly preferred
//!   cycle of heads has almost no weight entering it) and ordinary LU loses every digit of the
//!   determinant to cancellation. The Laplacian is a column diagonally dominant M-matrix, and is
//!   stored as its off-diagonal entries plus each column's *excess* (column sum: the root
//!   weight). Gaussian elimination in that representation — the GTH variant (Grassmann, Taksar &
//!   Heyman 1985; O'Cinneide 1993 for its accuracy) — updates excesses and off-diagonals by
//!   additions of same-signed terms only and recomputes each pivot as a sum of non-negative
//!   terms, so the pivots, hence `log Z`, keep high relative accuracy. The single-root root row
//!   is eliminated last; its entries stay non-negative and are likewise only ever added to.
//!
//! Marginals come from the inverse of that factorisation, as `A[h][m]·(L⁻¹[m][m] − L⁻¹[m][h])`.
//! That difference cancels when the distribution is extremely peaked (a strongly preferred cycle
//! makes `L⁻¹` huge while the difference stays O(1)): a word's column can then be wrong even when
//! it still sums to 1. Each column's risk is measured as the size of the terms, `A·|L⁻¹|`; a
//! column at risk (or not summing to 1) is recomputed arc by arc as a ratio of two Laplacian
//! determinants, subtraction-free (see `exact_column`), starting with the best tree's arc,
//! until the column's mass is accounted for. The brute-force checks compare every marginal to
//! 1e−9 for scores of magnitude up to 1e3 on up to 6 words; the stability test checks the sums
//! at 512 words with scores uniform in [−1e3, 1e3]. Probabilities are clamped to [0, 1]. When
//! the scaled doubles underflow outright, the determinants come from the log-space elimination.

use super::Marginals;
use crate::decode::{RootConstraint, ScoreMatrix};

/// The elimination of an M-matrix (rows `0..q`) plus, optionally, one extra non-negative row
/// (index `q`, the single-root root row) eliminated last. Stored as unit-lower multipliers and an
/// upper factor, row-major, for solves.
struct Factorisation {
    size: usize,
    factors: Vec<f64>,
    log_det: f64,
}

impl Factorisation {
    /// `matrix` holds the off-diagonal entries (≤ 0) of the M-matrix rows and the entries of the
    /// extra row (≥ 0, diagonal included); `excess[j]` is column j's sum over the M-matrix rows.
    fn eliminate(
        size: usize,
        mut a: Vec<f64>,
        mut excess: Vec<f64>,
        extra_row: bool,
    ) -> Factorisation {
        let m_rows = if extra_row { size - 1 } else { size };
        let mut log_det = 0.0;
        for k in 0..size {
            let pivot = if k < m_rows {
                // Pivot = excess + |off-diagonals below| (column sum over the remaining M rows).
                let below: f64 = (k + 1..m_rows).map(|i| -a[i * size + k]).sum();
                excess[k] + below
            } else {
                a[k * size + k]
            };
            a[k * size + k] = pivot;
            log_det += pivot.ln();
            if pivot <= 0.0 {
                continue;
            }
            for i in k + 1..size {
                a[i * size + k] /= pivot;
            }
            for j in k + 1..size {
                let u = a[k * size + j];
                if u == 0.0 {
                    continue;
                }
                if j < m_rows {
                    excess[j] += -u * excess[k] / pivot;
                }
                for i in k + 1..size {
                    // Off-diagonal M entries: l ≤ 0, u ≤ 0, so this adds a negative amount to a
                    // non-positive entry; root-row entries: l ≥ 0, so it adds a positive amount.
                    // The M rows' diagonal is never read (it is recomputed from the excess).
                    if i != j || i >= m_rows {
                        a[i * size + j] -= a[i * size + k] * u;
                    }
                }
            }
        }
        Factorisation {
            size,
            factors: a,
            log_det,
        }
    }

    /// The inverse, row-major.
    fn inverse(&self) -> Vec<f64> {
        let n = self.size;
        let mut inverse = vec![0.0; n * n];
        let mut column = vec![0.0; n];
        for j in 0..n {
            column.fill(0.0);
            column[j] = 1.0;
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

/// The scaled problem in elimination order. Word `w` (0-based) sits at position `position[w]`;
/// single-root puts word 0 (whose Laplacian row is replaced by the root row) last.
struct Scaled {
    n: usize,
    position: Vec<usize>,
    /// Scaled word-to-word weights `arcs[h * n + m]` and root weights, by word index.
    arcs: Vec<f64>,
    root: Vec<f64>,
    log_scale: f64,
    /// The shift taken out of each column (log units) and, single-root, out of the root row:
    /// a scaled weight is `exp(score − shift[m] (− root_shift))`, kept so that weights too small
    /// for a double can still be used as logarithms.
    shift: Vec<f64>,
    root_shift: f64,
}

fn scale(scores: &ScoreMatrix, root: RootConstraint) -> Scaled {
    let n = scores.words();
    let single = root == RootConstraint::SingleRoot;
    let mut arcs = vec![0.0; n * n];
    let mut root_weights = vec![0.0; n];
    let mut log_scale = 0.0;
    let mut root_scores = vec![0.0; n];
    let mut shifts = vec![0.0; n];
    let mut root_shift = 0.0;
    for m in 0..n {
        let best_word = (1..=n)
            .filter(|&h| h != m + 1)
            .map(|h| scores.get(h, m + 1))
            .fold(f64::NEG_INFINITY, f64::max);
        let shift = if single {
            if best_word.is_finite() {
                best_word
            } else {
                0.0
            }
        } else {
            best_word.max(scores.get(0, m + 1))
        };
        log_scale += shift;
        shifts[m] = shift;
        for h in 0..n {
            if h != m {
                arcs[h * n + m] = (scores.get(h + 1, m + 1) - shift).exp();
            }
        }
        root_scores[m] = scores.get(0, m + 1) - shift;
    }
    if single {
        // The root row is scaled as a whole: the determinant is linear in it.
        let row_shift = root_scores
            .iter()
            .copied()
            .fold(f64::NEG_INFINITY, f64::max);
        log_scale += row_shift;
        root_shift = row_shift;
        for m in 0..n {
            root_weights[m] = (root_scores[m] - row_shift).exp();
        }
    } else {
        for m in 0..n {
            root_weights[m] = root_scores[m].exp();
        }
    }
    let position = if single {
        (0..n).map(|w| if w == 0 { n - 1 } else { w - 1 }).collect()
    } else {
        (0..n).collect()
    };
    Scaled {
        n,
        position,
        arcs,
        root: root_weights,
        log_scale,
        shift: shifts,
        root_shift,
    }
}

fn factorise(scaled: &Scaled, root: RootConstraint) -> Factorisation {
    let n = scaled.n;
    let single = root == RootConstraint::SingleRoot;
    let mut a = vec![0.0; n * n];
    let mut excess = vec![0.0; n];
    for m in 0..n {
        let pm = scaled.position[m];
        for h in 0..n {
            if h == m {
                continue;
            }
            let ph = scaled.position[h];
            if !(single && h == 0) {
                a[ph * n + pm] = -scaled.arcs[h * n + m];
            }
        }
        // Column excess over the M rows: the weight entering m from outside them — the root in
        // the multi-root case; in the single-root case, word 0, whose row is not an M row.
        excess[pm] = if single {
            if m == 0 { 0.0 } else { scaled.arcs[m] }
        } else {
            scaled.root[m]
        };
        if single {
            a[(n - 1) * n + pm] = scaled.root[m];
        }
    }
    Factorisation::eliminate(n, a, excess, single)
}

/// log Σ over all spanning trees rooted at 0 (of the given root kind) of exp(score).
///
/// Runs the same GTH elimination entirely in log space: every update is a product or a sum of
/// same-signed terms, so it can be carried out on logarithms with log-sum-exp, and neither
/// underflow (root arcs far below word arcs make the scaled Laplacian singular in doubles) nor
/// cancellation can occur. About 2× the cost of the linear-space elimination.
pub fn log_partition(scores: &ScoreMatrix, root: RootConstraint) -> f64 {
    log_partition_by(scores.words(), root, |h, m| scores.get(h, m))
}

/// [`log_partition`] over `n` words with arc scores from `score(h, m)` (may be −∞).
fn log_partition_by(n: usize, root: RootConstraint, score: impl Fn(usize, usize) -> f64) -> f64 {
    let single = root == RootConstraint::SingleRoot;
    // Elimination order: single-root moves word 0 (whose row becomes the root row) last.
    let position: Vec<usize> = if single {
        (0..n).map(|w| if w == 0 { n - 1 } else { w - 1 }).collect()
    } else {
        (0..n).collect()
    };
    let m_rows = if single { n - 1 } else { n };
    // log-magnitudes: M rows hold −A (stored as log A), the root row holds +root weights.
    let mut a = vec![f64::NEG_INFINITY; n * n];
    let mut excess = vec![f64::NEG_INFINITY; n];
    for m in 0..n {
        let pm = position[m];
        for h in 0..n {
            if h != m && !(single && h == 0) {
                a[position[h] * n + pm] = score(h + 1, m + 1);
            }
        }
        excess[pm] = match (single, m) {
            (false, _) => score(0, m + 1),
            (true, 0) => f64::NEG_INFINITY,
            (true, _) => score(1, m + 1),
        };
        if single {
            a[(n - 1) * n + pm] = score(0, m + 1);
        }
    }
    let mut log_det = 0.0;
    for k in 0..n {
        let log_pivot = if k < m_rows {
            log_add_all(std::iter::once(excess[k]).chain((k + 1..m_rows).map(|i| a[i * n + k])))
        } else {
            a[k * n + k]
        };
        log_det += log_pivot;
        if log_pivot == f64::NEG_INFINITY {
            return f64::NEG_INFINITY;
        }
        for i in k + 1..n {
            a[i * n + k] -= log_pivot;
        }
        for j in k + 1..n {
            let log_u = a[k * n + j];
            if log_u == f64::NEG_INFINITY {
                continue;
            }
            if j < m_rows {
                excess[j] = log_add(excess[j], log_u + excess[k] - log_pivot);
            }
            for i in k + 1..n {
                if i != j || i >= m_rows {
                    a[i * n + j] = log_add(a[i * n + j], a[i * n + k] + log_u);
                }
            }
        }
    }
    log_det
}

fn log_add(a: f64, b: f64) -> f64 {
    let (hi, lo) = if a > b { (a, b) } else { (b, a) };
    if lo == f64::NEG_INFINITY {
        hi
    } else {
        hi + (lo - hi).exp().ln_1p()
    }
}

fn log_add_all(values: impl Iterator<Item = f64> + Clone) -> f64 {
    super::log_sum_exp(values)
}

/// How far a column of marginals may be from summing to 1 before it is recomputed exactly.
const COLUMN_TOLERANCE: f64 = 1e-9;

/// Largest `A[h][m]·|L⁻¹|` term size accepted from the inverse: with doubles' 1.1e−16 rounding
/// and up to a few hundred operations per entry, the absolute error stays below about 1e−10.
const CANCELLATION_LIMIT: f64 = 1e4;

/// A recomputed column stops once the arcs done so far hold all but this much probability.
const REMAINING_MASS: f64 = 1e-12;

/// Recomputes the marginals of the arcs into word `m` (0-based) without cancellation.
///
/// Every weight of an arc into `m` sits in column `m` of the Laplacian and nowhere else, and the
/// determinant is linear in that column, so `∂Z/∂A[h][m]` is the determinant of the Laplacian
/// whose column `m` holds only the coefficients of `A[h][m]` — the Laplacian of the graph in
/// which `m`'s one incoming arc is `h → m`, with weight 1. That is again a Laplacian, so the GTH
/// elimination computes its determinant to high relative accuracy, and
/// `P(h → m) = A[h][m] · det(L_{h→m}) / det(L)` needs no subtraction. (Single-root, root arc:
/// that column has no entry in the word rows; its determinant is the minor of the word
/// Laplacian at `m` — the trees over the words rooted at `m` — by the all-minors Matrix-Tree
/// Theorem (Chaiken 1982), itself a multi-root Laplacian with the arcs out of `m` as root
/// weights.) Weights enter as logarithms, so an arc whose weight underflows a double, but which
/// every likely tree must use, still gets its probability.
///
/// One elimination per arc, O(n³) each, in order: the best tree's arc first, then by score,
/// until all but [`REMAINING_MASS`] of the column is accounted for; in the peaked cases that
/// need this (one tree holds nearly all the mass) that is one or two eliminations per column.
/// Arcs not reached keep their inverse-based value, capped by the mass left.
fn exact_column(
    scores: &ScoreMatrix,
    root: RootConstraint,
    scaled: &Scaled,
    base: &Factorisation,
    best_head: usize,
    m: usize,
    log_z: f64,
    probabilities: &mut [f64],
    effort: &mut Effort,
) -> bool {
    let n = scaled.n;
    let elimination = (n as u64).pow(3) / 3 + 1;
    let side = n + 1;
    let single = root == RootConstraint::SingleRoot;
    let mut heads: Vec<usize> = (0..=n).filter(|&h| h != m + 1).collect();
    heads.sort_by(|&a, &b| {
        (b == best_head)
            .cmp(&(a == best_head))
            .then(scores.get(b, m + 1).total_cmp(&scores.get(a, m + 1)))
            .then(a.cmp(&b))
    });
    let mut covered = 0.0;
    let mut done = vec![false; side];
    for &head in &heads {
        if covered >= 1.0 - REMAINING_MASS {
            break;
        }
        let score = scores.get(head, m + 1);
        if score == f64::NEG_INFINITY {
            probabilities[head * side + m + 1] = 0.0;
            done[head] = true;
            continue;
        }
        // log of the scaled weight, the same units as the scaled determinants.
        let log_weight = score
            - scaled.shift[m]
            - if single && head == 0 {
                scaled.root_shift
            } else {
                0.0
            };
        let mut probability = f64::NAN;
        if base.log_det.is_finite() {
            if !effort.spend(elimination) {
                return false;
            }
            let log_det = restricted_log_det(scaled, root, head, m);
            if log_det.is_finite() {
                probability = (log_weight + log_det - base.log_det).exp();
            }
        }
        if !probability.is_finite() {
            let log_space = LOG_SPACE_COST * elimination;
            if !effort.spend(log_space) {
                return false;
            }
            // A pivot of the scaled doubles underflowed to zero (in the single-root case the word
            // rows can lose all their excess, which then sits in the root row alone): the same
            // ratio from the log-space elimination.
            probability = (score + restricted_log_partition(scores, root, head, m) - log_z).exp();
        }
        let probability = if probability.is_finite() {
            probability.clamp(0.0, 1.0)
        } else {
            0.0
        };
        probabilities[head * side + m + 1] = probability;
        covered += probability;
        done[head] = true;
    }
    let left = (1.0 - covered).max(0.0);
    for head in heads {
        if !done[head] {
            let p = &mut probabilities[head * side + m + 1];
            *p = if p.is_finite() { p.min(left) } else { 0.0 };
        }
    }
    true
}

/// Relative cost of one elimination in log space (a log-add per step) against linear space.
const LOG_SPACE_COST: u64 = 20;

/// How much extra work the recomputation of cancelled columns may take, counted in
/// multiply-adds (one elimination of an n×n Laplacian is n³/3; in log space 20× that).
/// Columns that would exceed it are marked unreliable instead ([`Marginals::reliable`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Effort {
    pub operations: u64,
}

impl Effort {
    /// No limit: every column exact, whatever it costs (O(n⁴) on the most peaked inputs).
    pub const UNLIMITED: Effort = Effort {
        operations: u64::MAX,
    };

    fn spend(&mut self, cost: u64) -> bool {
        if cost > self.operations {
            return false;
        }
        self.operations -= cost;
        true
    }
}

/// log det of the scaled Laplacian in which word `m`'s only incoming arc is `head → m` (weight
/// 1); for the single-root root arc, the minor at `m` (see [`exact_column`]).
fn restricted_log_det(scaled: &Scaled, root: RootConstraint, head: usize, m: usize) -> f64 {
    let n = scaled.n;
    if root == RootConstraint::SingleRoot && head == 0 {
        let others: Vec<usize> = (0..n).filter(|&k| k != m).collect();
        let k = others.len();
        if k == 0 {
            return 0.0;
        }
        let mut arcs = vec![0.0; k * k];
        let mut root_weights = vec![0.0; k];
        for (i, &a) in others.iter().enumerate() {
            root_weights[i] = scaled.arcs[m * n + a];
            for (j, &b) in others.iter().enumerate() {
                if i != j {
                    arcs[i * k + j] = scaled.arcs[a * n + b];
                }
            }
        }
        let minor = Scaled {
            n: k,
            position: (0..k).collect(),
            arcs,
            root: root_weights,
            log_scale: 0.0,
            shift: vec![0.0; k],
            root_shift: 0.0,
        };
        return factorise(&minor, RootConstraint::MultiRoot).log_det;
    }
    let mut only = Scaled {
        n,
        position: scaled.position.clone(),
        arcs: scaled.arcs.clone(),
        root: scaled.root.clone(),
        log_scale: 0.0,
        shift: Vec::new(),
        root_shift: 0.0,
    };
    for h in 0..n {
        if h != m {
            only.arcs[h * n + m] = 0.0;
        }
    }
    only.root[m] = 0.0;
    if head == 0 {
        only.root[m] = 1.0;
    } else {
        only.arcs[(head - 1) * n + m] = 1.0;
    }
    factorise(&only, root).log_det
}

/// log of ∂Z/∂A[head][m] · A-free: the log partition of the trees in which `m`'s only incoming
/// arc is `head → m` with score 0 (single-root root arc: the trees over the words rooted at m).
fn restricted_log_partition(
    scores: &ScoreMatrix,
    root: RootConstraint,
    head: usize,
    m: usize,
) -> f64 {
    let n = scores.words();
    if root == RootConstraint::SingleRoot && head == 0 {
        let others: Vec<usize> = (0..n).filter(|&k| k != m).collect();
        if others.is_empty() {
            return 0.0;
        }
        return log_partition_by(others.len(), RootConstraint::MultiRoot, |h, d| {
            let from = if h == 0 { m } else { others[h - 1] };
            scores.get(from + 1, others[d - 1] + 1)
        });
    }
    log_partition_by(n, root, |h, d| {
        if d != m + 1 {
            scores.get(h, d)
        } else if h == head {
            0.0
        } else {
            f64::NEG_INFINITY
        }
    })
}

/// Marginals over all spanning trees rooted at 0, every column exact.
pub fn marginals(scores: &ScoreMatrix, root: RootConstraint) -> Marginals {
    marginals_within(scores, root, Effort::UNLIMITED)
}

/// Marginals over all spanning trees rooted at 0, recomputing cancelled columns only within
/// `effort`; columns left over are marked unreliable (for a service that must bound the cost
/// of a request: peaked scores on long sentences can need an elimination per column).
pub fn marginals_within(scores: &ScoreMatrix, root: RootConstraint, effort: Effort) -> Marginals {
    let mut effort = effort;
    let mut unreliable = Vec::new();
    let n = scores.words();
    let side = n + 1;
    let scaled = scale(scores, root);
    let factorisation = factorise(&scaled, root);
    let mut log_z = factorisation.log_det + scaled.log_scale;
    if !log_z.is_finite() {
        // Underflow in the scaled doubles (e.g. root arcs hundreds below word arcs): the
        // log-space elimination has no such limit.
        log_z = log_partition(scores, root);
    }
    let inverse = factorisation.inverse();
    let pos = &scaled.position;
    // Inverse of the Laplacian in word indices: (L⁻¹)[a][b].
    let inv = |a: usize, b: usize| inverse[pos[a] * n + pos[b]];
    let mut probabilities = vec![0.0; side * side];
    let single = root == RootConstraint::SingleRoot;
    let clamp = |p: f64| p.clamp(0.0, 1.0);
    for m in 0..n {
        // ∂ log det / ∂ L[i][j] = (L⁻¹)[j][i]. Root weight of m: at L[m][m] (multi-root) or at
        // the root row, which is word 0's row (single-root).
        let root_position = if single { inv(m, 0) } else { inv(m, m) };
        probabilities[m + 1] = clamp(scaled.root[m] * root_position);
        for h in 0..n {
            if h == m {
                continue;
            }
            // A[h][m] sits at L[m][m] (+) and at L[h][m] (−), except in the replaced row.
            let on_diagonal = if single && m == 0 { 0.0 } else { inv(m, m) };
            let off_diagonal = if single && h == 0 { 0.0 } else { inv(m, h) };
            probabilities[(h + 1) * side + m + 1] =
                clamp(scaled.arcs[h * n + m] * (on_diagonal - off_diagonal));
        }
    }
    // Columns whose marginals lost their digits to cancellation (they no longer sum to 1):
    // recompute their arcs one by one, each as a ratio of two Laplacian determinants, which the
    // subtraction-free elimination gets to full relative accuracy (see `exact_column`).
    let mut best_tree: Option<Vec<usize>> = None;
    for m in 0..n {
        let column_sum: f64 = (0..side).map(|h| probabilities[h * side + m + 1]).sum();
        // Digits lost to cancellation in A·(L⁻¹[m][m] − L⁻¹[m][h]): about the size of the
        // terms, A·|L⁻¹|, times the rounding error. A column can sum to 1 with wrong entries
        // (the sum is an identity of the computed inverse too), so the sizes decide.
        let inverse_size = (0..n).map(|h| inv(m, h).abs()).fold(0.0, f64::max);
        let largest_weight = (0..n)
            .filter(|&h| h != m)
            .map(|h| scaled.arcs[h * n + m])
            .fold(scaled.root[m], f64::max);
        let at_risk = largest_weight * inverse_size > CANCELLATION_LIMIT;
        let sums_to_one = (column_sum - 1.0).abs() <= COLUMN_TOLERANCE; // false for NaN
        if at_risk || !sums_to_one {
            let best = best_tree
                .get_or_insert_with(|| crate::decode::chu_liu_edmonds::decode(scores, root));
            let exact = exact_column(
                scores,
                root,
                &scaled,
                &factorisation,
                best[m + 1],
                m,
                log_z,
                &mut probabilities,
                &mut effort,
            );
            if !exact {
                unreliable.push(m + 1);
            }
        }
    }
    if probabilities.iter().any(|p| p.is_nan()) {
        // The scaled Laplacian underflowed (zero or vanishing pivots): score gaps of hundreds of
        // nats, where the best tree holds all but a vanishing share of the mass. Report that
        // tree with probability 1.
        let best = crate::decode::chu_liu_edmonds::decode(scores, root);
        probabilities.fill(0.0);
        for m in 1..side {
            probabilities[best[m] * side + m] = 1.0;
        }
    }
    let mut marginals = Marginals::new(side, probabilities, log_z);
    marginals.mark_unreliable(&unreliable);
    marginals
}
