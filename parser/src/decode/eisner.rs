//! Eisner's (1996) O(n³) dynamic program for the best projective tree.
//!
//! Four charts over spans `[s, t]` of positions `0..=n` (Eisner 1996; the "complete / incomplete"
//! formulation of McDonald, Crammer & Pereira 2005):
//! - complete right `CR[s][t]`: `s` heads everything in `(s, t]`, `t`'s subtree is closed;
//! - complete left `CL[s][t]`: the mirror image, headed by `t`;
//! - incomplete right `IR[s][t]`: contains the arc `s → t`, with `t`'s right side still open;
//! - incomplete left `IL[s][t]`: contains the arc `t → s`.
//!
//! Memory layout, chosen so that every max over a split point `r` reads two *contiguous* runs of
//! doubles (and so vectorizes; see [`super::max_plus`]):
//!
//! | recurrence | left operand | right operand |
//! |---|---|---|
//! | `IR/IL[s][t] = max_r CR[s][r] + CL[r+1][t]` | row `s` of `CR` | row `t` of `CLᵀ` |
//! | `CR[s][t] = max_r IR[s][r] + CR[r][t]` | row `s` of `IR` | row `t` of `CRᵀ` |
//! | `CL[s][t] = max_r CL[s][r] + IL[r][t]` | row `s` of `CL` | row `t` of `ILᵀ` |
//!
//! so each chart that is read down a column is also kept transposed. No back-pointers are stored:
//! the inner loops are pure max-plus reductions, and the back-trace recomputes the O(n) split
//! points it needs (O(n²) in total), taking the smallest split point that reaches the maximum.
//!
//! Root: position 0 never receives an arc. With [`RootConstraint::SingleRoot`], the incomplete
//! spans `IR[0][t]` may only be built with the split `r = 0`, i.e. the root takes exactly one
//! child (the standard single-root adaptation; see Zmigrod, Vieira & Cotterell 2020, §2).

use super::kernel::{has_avx2, max_plus_inline};
use super::{RootConstraint, ScoreMatrix};

/// The six charts of one sentence, as views into one buffer.
#[derive(Debug)]
pub(crate) struct Charts<'a> {
    side: usize,
    complete_right: &'a mut [f64],
    complete_right_t: &'a mut [f64],
    complete_left: &'a mut [f64],
    complete_left_t: &'a mut [f64],
    incomplete_right: &'a mut [f64],
    incomplete_left_t: &'a mut [f64],
}

impl<'a> Charts<'a> {
    /// Splits `buffer` (at least six `side × side` charts) into the charts.
    fn new(buffer: &'a mut [f64], side: usize) -> Self {
        let size = side * side;
        let (complete_right, rest) = buffer.split_at_mut(size);
        let (complete_right_t, rest) = rest.split_at_mut(size);
        let (complete_left, rest) = rest.split_at_mut(size);
        let (complete_left_t, rest) = rest.split_at_mut(size);
        let (incomplete_right, rest) = rest.split_at_mut(size);
        let incomplete_left_t = &mut rest[..size];
        Charts {
            side,
            complete_right,
            complete_right_t,
            complete_left,
            complete_left_t,
            incomplete_right,
            incomplete_left_t,
        }
    }

    #[inline(always)]
    fn at(&self, chart: &[f64], row: usize, col: usize) -> f64 {
        chart[row * self.side + col]
    }
}

thread_local! {
    /// Chart memory kept per thread between sentences. Every cell the fill or the back-trace
    /// reads is written first (spans are built from narrower spans only), so a reused buffer
    /// needs no clearing: decoding a sentence costs no allocation, no zeroing and no page
    /// faults. The buffer keeps the size of the longest sentence seen: at most 6 × 513² doubles
    /// (12.6 MB) per parsing thread.
    static CHART_MEMORY: std::cell::RefCell<Vec<f64>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Runs `work` on charts for `side` positions, in this thread's reusable buffer.
fn with_charts<T>(side: usize, work: impl FnOnce(&mut Charts<'_>) -> T) -> T {
    CHART_MEMORY.with(|memory| {
        // A re-entrant call (not made today) gets a fresh buffer rather than a panic.
        let mut fresh = Vec::new();
        let mut borrowed = memory.try_borrow_mut().ok();
        let buffer = match borrowed.as_deref_mut() {
            Some(buffer) => buffer,
            None => &mut fresh,
        };
        if buffer.len() < 6 * side * side {
            buffer.resize(6 * side * side, 0.0);
        }
        let mut charts = Charts::new(buffer, side);
        work(&mut charts)
    })
}

/// Best projective tree: `heads[m]` for `m` in `1..=n` (`heads[0] = 0`).
pub fn decode(scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    with_charts(scores.side(), |charts| {
        fill(charts, scores, root);
        backtrace(charts, scores, root)
    })
}

/// Score of the best projective tree, without the back-trace.
pub fn best_score(scores: &ScoreMatrix, root: RootConstraint) -> f64 {
    with_charts(scores.side(), |charts| {
        fill(charts, scores, root);
        charts.complete_right[scores.words()]
    })
}

fn fill(charts: &mut Charts<'_>, scores: &ScoreMatrix, root: RootConstraint) {
    let side = scores.side();
    for s in 0..side {
        let diagonal = s * side + s;
        charts.complete_right[diagonal] = 0.0;
        charts.complete_right_t[diagonal] = 0.0;
        charts.complete_left[diagonal] = 0.0;
        charts.complete_left_t[diagonal] = 0.0;
    }
    #[cfg(target_arch = "x86_64")]
    if has_avx2() {
        // SAFETY: the CPU supports AVX2 (checked above).
        #[allow(unsafe_code)] // calling a #[target_feature] function after runtime detection
        unsafe {
            fill_avx2(charts, scores, root)
        };
        return;
    }
    fill_inline(charts, scores, root);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn fill_avx2(charts: &mut Charts<'_>, scores: &ScoreMatrix, root: RootConstraint) {
    fill_inline(charts, scores, root)
}

#[inline(always)]
fn fill_inline(charts: &mut Charts<'_>, scores: &ScoreMatrix, root: RootConstraint) {
    let side = charts.side;
    let single_root = root == RootConstraint::SingleRoot;
    let Charts {
        complete_right: cr,
        complete_right_t: cr_t,
        complete_left: cl,
        complete_left_t: cl_t,
        incomplete_right: ir,
        incomplete_left_t: il_t,
        ..
    } = charts;
    // Right end outermost, start descending: every span (s, t) needs only spans ending before t
    // or starting after s, and the transposed rows `t` it reads stay in cache for the whole
    // inner loop.
    for t in 1..side {
        for s in (0..t).rev() {
            // Incomplete spans: split r in s..t, CR[s][r] + CL[r+1][t].
            let inner = if s == 0 && single_root {
                cr[0] + cl_t[t * side + 1]
            } else {
                max_plus_inline(
                    &cr[s * side + s..s * side + t],
                    &cl_t[t * side + s + 1..t * side + t + 1],
                )
            };
            ir[s * side + t] = inner + scores.get(s, t);
            // Arcs into the root do not exist (the score is −∞ already); keep the chart honest.
            il_t[t * side + s] = if s == 0 {
                f64::NEG_INFINITY
            } else {
                inner + scores.get(t, s)
            };

            // Complete right: r in s+1..=t, IR[s][r] + CR[r][t].
            let right = max_plus_inline(
                &ir[s * side + s + 1..s * side + t + 1],
                &cr_t[t * side + s + 1..t * side + t + 1],
            );
            cr[s * side + t] = right;
            cr_t[t * side + s] = right;

            // Complete left: r in s..t, CL[s][r] + IL[r][t].
            let left = max_plus_inline(
                &cl[s * side + s..s * side + t],
                &il_t[t * side + s..t * side + t],
            );
            cl[s * side + t] = left;
            cl_t[t * side + s] = left;
        }
    }
}

#[derive(Clone, Copy)]
enum Span {
    CompleteRight(usize, usize),
    CompleteLeft(usize, usize),
    IncompleteRight(usize, usize),
    IncompleteLeft(usize, usize),
}

fn backtrace(charts: &Charts<'_>, scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    let side = charts.side;
    let single_root = root == RootConstraint::SingleRoot;
    let mut heads = vec![0usize; side];
    let mut stack = vec![Span::CompleteRight(0, side - 1)];
    // First split point whose sum equals the best (the sums are recomputed with the same
    // floating-point additions as the fill, so equality is exact).
    let first_best = |range: std::ops::Range<usize>, value: &dyn Fn(usize) -> f64| -> usize {
        let mut best = f64::NEG_INFINITY;
        let mut best_r = range.start;
        for r in range {
            let v = value(r);
            if v > best {
                best = v;
                best_r = r;
            }
        }
        best_r
    };
    while let Some(span) = stack.pop() {
        match span {
            Span::CompleteRight(s, t) => {
                if s == t {
                    continue;
                }
                let r = first_best(s + 1..t + 1, &|r| {
                    charts.at(charts.incomplete_right, s, r)
                        + charts.at(charts.complete_right_t, t, r)
                });
                stack.push(Span::IncompleteRight(s, r));
                stack.push(Span::CompleteRight(r, t));
            }
            Span::CompleteLeft(s, t) => {
                if s == t {
                    continue;
                }
                let r = first_best(s..t, &|r| {
                    charts.at(charts.complete_left, s, r)
                        + charts.at(charts.incomplete_left_t, t, r)
                });
                stack.push(Span::CompleteLeft(s, r));
                stack.push(Span::IncompleteLeft(r, t));
            }
            Span::IncompleteRight(s, t) | Span::IncompleteLeft(s, t) => {
                match span {
                    Span::IncompleteRight(..) => heads[t] = s,
                    _ => heads[s] = t,
                }
                let r = if s == 0 && single_root {
                    0
                } else {
                    first_best(s..t, &|r| {
                        charts.at(charts.complete_right, s, r)
                            + charts.at(charts.complete_left_t, t, r + 1)
                    })
                };
                stack.push(Span::CompleteRight(s, r));
                stack.push(Span::CompleteLeft(r + 1, t));
            }
        }
    }
    let _ = scores;
    heads
}
