//! Eisner's (1996) O(n³) dynamic program for the best projective tree.
//!
//! Four charts over spans `[s, t]` of positions `0..=n` (Eisner 1996; the "complete / incomplete"
//! formulation of McDonald, Crammer & Pereira 2005):
//! - complete right `CR[s][t]`: `s` heads everything in `(s, t]`, `t`'s subtree is closed;
//! - complete left `CL[s][t]`: the mirror image, headed by `t`;
//! - incomplete right `IR[s][t]`: contains the arc `s → t`, with `t`'s right side still open;
//! - incomplete left `IL[s][t]`: contains the arc `t → s`.
//!
//! The spans are filled in two phases, because what makes a span cheap depends on its width.
//!
//! **Narrow spans** (width below [`NARROW`]) are most of a sentence's spans, and each needs only
//! a few terms, so any cost paid per span dominates them. They are computed a block of
//! [`LANES`] consecutive starts at a time, vectorized *across spans*. With `w = t − s` and the
//! split's offset `k = r − s`, every recurrence's left operand is a span starting at `s` and its
//! right operand a span ending at `t`, so the narrow spans are also kept in tables indexed by
//! (width, start) and (width, end), where a block's operands are contiguous runs of `LANES`
//! doubles and its maxima stay in vector registers: no reduction and no set-up per span. Blocks
//! go from the last start to the first and, within a block, widths upwards: a span needs only
//! narrower spans starting at or after its start. The rows a block reads stay in the first-level
//! cache while its widths grow — which is also why the phase stops at [`NARROW`]: beyond it they
//! no longer fit, and the second phase's access pattern is the better one.
//!
//! **Wide spans** are computed one at a time, right end outermost and start descending, each
//! max over split points `r` being one contiguous max-plus reduction (see [`super::max_plus`])
//! over two rows, laid out so that both are contiguous:
//!
//! | recurrence | left operand | right operand |
//! |---|---|---|
//! | `IR/IL[s][t] = max_r CR[s][r] + CL[r+1][t]` | row `s` of `CR` | row `t` of `CLᵀ` |
//! | `CR[s][t] = max_r IR[s][r] + CR[r][t]` | row `s` of `IR` | row `t` of `CRᵀ` |
//! | `CL[s][t] = max_r CL[s][r] + IL[r][t]` | row `s` of `CL` | row `t` of `ILᵀ` |
//!
//! so each chart that is read down a column is also kept transposed; the rows `t` stay in cache
//! for the whole inner loop. The first phase writes its spans into these charts too.
//!
//! Every chart value is a max of single additions of other chart values, so neither phase's
//! order of taking the maximum changes it. No back-pointers are stored: the back-trace
//! recomputes the O(n) split points it needs (O(n²) in total) with the same additions, taking
//! the smallest split point that reaches the maximum.
//!
//! Root: position 0 never receives an arc. With [`RootConstraint::SingleRoot`], the incomplete
//! spans `IR[0][t]` may only be built with the split `r = 0`, i.e. the root takes exactly one
//! child (the standard single-root adaptation; see Zmigrod, Vieira & Cotterell 2020, §2).

use super::kernel::{has_avx2, max_plus_inline};

/// Spans narrower than this are computed in blocks across starts (the first phase).
const NARROW: usize = 48;

/// Starts computed together in the first phase: two AVX2 vectors of doubles.
const LANES: usize = 8;
use super::{RootConstraint, ScoreMatrix};

/// The six charts of one sentence and the first phase's six narrow tables, as views into one
/// buffer.
#[derive(Debug)]
pub(crate) struct Charts<'a> {
    side: usize,
    complete_right: &'a mut [f64],
    complete_right_t: &'a mut [f64],
    complete_left: &'a mut [f64],
    complete_left_t: &'a mut [f64],
    incomplete_right: &'a mut [f64],
    incomplete_left_t: &'a mut [f64],
    narrow: NarrowTables<'a>,
}

/// The narrow spans by (width, start) and by (width, end): row `w` holds the spans of width
/// `w`, rows padded by [`LANES`] columns for the lanes past the sentence's end.
#[derive(Debug)]
struct NarrowTables<'a> {
    /// Length of a row: `side + LANES`.
    row: usize,
    complete_right_by_start: &'a mut [f64],
    complete_right_by_end: &'a mut [f64],
    complete_left_by_start: &'a mut [f64],
    complete_left_by_end: &'a mut [f64],
    incomplete_right_by_start: &'a mut [f64],
    incomplete_left_by_end: &'a mut [f64],
    /// `score(s, t)` of the narrow spans by start, −∞ past the end.
    right_arc_by_start: &'a mut [f64],
    /// `score(t, s)` of the narrow spans by end, −∞ past the end.
    left_arc_by_end: &'a mut [f64],
}

/// Doubles of one narrow table for `side` positions.
fn narrow_len(side: usize) -> usize {
    side.min(NARROW) * (side + LANES)
}

/// Doubles of chart memory for `side` positions.
fn buffer_len(side: usize) -> usize {
    6 * side * side + 8 * narrow_len(side)
}

impl<'a> Charts<'a> {
    /// Splits `buffer` (at least [`buffer_len`] doubles) into the charts.
    fn new(buffer: &'a mut [f64], side: usize) -> Self {
        let size = side * side;
        let (complete_right, rest) = buffer.split_at_mut(size);
        let (complete_right_t, rest) = rest.split_at_mut(size);
        let (complete_left, rest) = rest.split_at_mut(size);
        let (complete_left_t, rest) = rest.split_at_mut(size);
        let (incomplete_right, rest) = rest.split_at_mut(size);
        let (incomplete_left_t, rest) = rest.split_at_mut(size);
        let narrow = narrow_len(side);
        let (complete_right_by_start, rest) = rest.split_at_mut(narrow);
        let (complete_right_by_end, rest) = rest.split_at_mut(narrow);
        let (complete_left_by_start, rest) = rest.split_at_mut(narrow);
        let (complete_left_by_end, rest) = rest.split_at_mut(narrow);
        let (incomplete_right_by_start, rest) = rest.split_at_mut(narrow);
        let (incomplete_left_by_end, rest) = rest.split_at_mut(narrow);
        let (right_arc_by_start, rest) = rest.split_at_mut(narrow);
        let left_arc_by_end = &mut rest[..narrow];
        Charts {
            side,
            complete_right,
            complete_right_t,
            complete_left,
            complete_left_t,
            incomplete_right,
            incomplete_left_t,
            narrow: NarrowTables {
                row: side + LANES,
                complete_right_by_start,
                complete_right_by_end,
                complete_left_by_start,
                complete_left_by_end,
                incomplete_right_by_start,
                incomplete_left_by_end,
                right_arc_by_start,
                left_arc_by_end,
            },
        }
    }

    /// Span `[s, t]` of `chart`, from whichever phase computed it: a narrow span from its
    /// narrow table, a wide one from its row chart (`IL` is kept transposed).
    fn value(&self, chart: Chart, s: usize, t: usize) -> f64 {
        let w = t - s;
        let n = &self.narrow;
        if w < NARROW {
            let (table, column) = match chart {
                Chart::CompleteRight => (&n.complete_right_by_start, s),
                Chart::CompleteLeft => (&n.complete_left_by_start, s),
                Chart::IncompleteRight => (&n.incomplete_right_by_start, s),
                Chart::IncompleteLeft => (&n.incomplete_left_by_end, t),
            };
            return table[w * n.row + column];
        }
        match chart {
            Chart::CompleteRight => self.complete_right[s * self.side + t],
            Chart::CompleteLeft => self.complete_left[s * self.side + t],
            Chart::IncompleteRight => self.incomplete_right[s * self.side + t],
            Chart::IncompleteLeft => self.incomplete_left_t[t * self.side + s],
        }
    }
}

/// The four charts, for the back-trace's reads.
#[derive(Clone, Copy)]
enum Chart {
    CompleteRight,
    CompleteLeft,
    IncompleteRight,
    IncompleteLeft,
}

thread_local! {
    /// Chart memory kept per thread between sentences. Every cell the fill or the back-trace
    /// reads is written first (spans are built from narrower spans only), so a reused buffer
    /// needs no clearing: decoding a sentence costs no allocation, no zeroing and no page
    /// faults. The buffer keeps the size of the longest sentence seen: at most 6 × 513² doubles
    /// and 8 × 48 × 521 for the narrow tables (14.2 MB) per parsing thread.
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
        if buffer.len() < buffer_len(side) {
            buffer.resize(buffer_len(side), 0.0);
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
    // The one-position spans of the row charts, read only by the wide phase (a short sentence
    // touches none of that memory).
    if side > NARROW {
        for s in 0..side {
            let diagonal = s * side + s;
            charts.complete_right[diagonal] = 0.0;
            charts.complete_right_t[diagonal] = 0.0;
            charts.complete_left[diagonal] = 0.0;
            charts.complete_left_t[diagonal] = 0.0;
        }
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
    fill_narrow(charts, scores, single_root);
    let Charts {
        complete_right: cr,
        complete_right_t: cr_t,
        complete_left: cl,
        complete_left_t: cl_t,
        incomplete_right: ir,
        incomplete_left_t: il_t,
        ..
    } = charts;
    // Right end outermost, start descending: every wide span (s, t) needs only narrow spans and
    // wide spans ending before t or starting after s, and the transposed rows `t` it reads stay
    // in cache for the whole inner loop.
    for t in NARROW..side {
        for s in (0..=t - NARROW).rev() {
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

/// The first phase: every span narrower than [`NARROW`], in blocks of [`LANES`] starts, written
/// to the narrow tables and to the charts.
#[inline(always)]
fn fill_narrow(charts: &mut Charts<'_>, scores: &ScoreMatrix, single_root: bool) {
    let side = charts.side;
    let NarrowTables {
        row,
        complete_right_by_start: cr_s,
        complete_right_by_end: cr_e,
        complete_left_by_start: cl_s,
        complete_left_by_end: cl_e,
        incomplete_right_by_start: ir_s,
        incomplete_left_by_end: il_e,
        right_arc_by_start: right_arc,
        left_arc_by_end: left_arc,
    } = &mut charts.narrow;
    let row = *row;
    // Width 0: the one-position spans (padding included).
    for table in [&mut *cr_s, &mut *cr_e, &mut *cl_s, &mut *cl_e] {
        table[..row].fill(0.0);
    }
    // The arc scores of each width in the tables' layout, so that a block adds them as vectors.
    for w in 1..side.min(NARROW) {
        let right_row = &mut right_arc[w * row..(w + 1) * row];
        for (s, cell) in right_row[..side - w].iter_mut().enumerate() {
            *cell = scores.get(s, s + w);
        }
        right_row[side - w..].fill(f64::NEG_INFINITY);
        let left_row = &mut left_arc[w * row..(w + 1) * row];
        for (t, cell) in left_row[w..side].iter_mut().enumerate() {
            // Arcs into the root (t − w = 0) score −∞ already.
            *cell = scores.get(t + w, t);
        }
        left_row[side..].fill(f64::NEG_INFINITY);
    }
    for first in (0..side).step_by(LANES).rev() {
        // Starts first..first + LANES, widths up to the last narrow one with a span at `first`.
        for w in 1..(side - first).min(NARROW) {
            let (here, end) = (w * row + first, w * row + first + w);

            // Incomplete spans: max over k in 0..w of CR[k][s] + CL[w−1−k][t].
            let mut inner = block_max(
                0..w,
                cr_s,
                |k| k * row + first,
                cl_e,
                |k| (w - 1 - k) * row + first + w,
            );
            if single_root && first == 0 {
                // The root's one child: only the split r = 0 (CR[0][0] = 0).
                inner[0] = cr_s[0] + cl_e[(w - 1) * row + w];
            }
            let arcs = &right_arc[here..here + LANES];
            for ((cell, value), arc) in ir_s[here..here + LANES].iter_mut().zip(inner).zip(arcs) {
                *cell = value + arc;
            }
            let arcs = &left_arc[end..end + LANES];
            for ((cell, value), arc) in il_e[end..end + LANES].iter_mut().zip(inner).zip(arcs) {
                *cell = value + arc;
            }

            // Complete right: max over k in 1..=w of IR[k][s] + CR[w−k][t].
            let right = block_max(
                1..w + 1,
                ir_s,
                |k| k * row + first,
                cr_e,
                |k| (w - k) * row + first + w,
            );
            cr_s[here..here + LANES].copy_from_slice(&right);
            cr_e[end..end + LANES].copy_from_slice(&right);

            // Complete left: max over k in 0..w of CL[k][s] + IL[w−k][t].
            let left = block_max(
                0..w,
                cl_s,
                |k| k * row + first,
                il_e,
                |k| (w - k) * row + first + w,
            );
            cl_s[here..here + LANES].copy_from_slice(&left);
            cl_e[end..end + LANES].copy_from_slice(&left);

            // The same spans into the charts the second phase reads (a sentence with only narrow
            // spans has no second phase; the back-trace reads the narrow tables).
            let valid = if side > NARROW {
                LANES.min((side - w).saturating_sub(first))
            } else {
                0
            };
            for lane in 0..valid {
                let (s, t) = (first + lane, first + lane + w);
                let (forward, backward) = (s * side + t, t * side + s);
                charts.incomplete_right[forward] = ir_s[here + lane];
                charts.incomplete_left_t[backward] = il_e[end + lane];
                charts.complete_right[forward] = right[lane];
                charts.complete_right_t[backward] = right[lane];
                charts.complete_left[forward] = left[lane];
                charts.complete_left_t[backward] = left[lane];
            }
        }
    }
}

/// `acc[lane] = max over k in ks of a[a_at(k) + lane] + b[b_at(k) + lane]` for one block of
/// starts (−∞ for an empty range). `a_at` and `b_at` must be linear in `k` (rows of a table, up
/// or down), so that checking the range's two ends bounds every read.
#[inline(always)]
fn block_max(
    ks: std::ops::Range<usize>,
    a: &[f64],
    a_at: impl Fn(usize) -> usize,
    b: &[f64],
    b_at: impl Fn(usize) -> usize,
) -> [f64; LANES] {
    let mut acc = [f64::NEG_INFINITY; LANES];
    let Some(last) = ks.end.checked_sub(1).filter(|&last| last >= ks.start) else {
        return acc;
    };
    // One check per block instead of two per term: a per-term check costs as much as the term.
    assert!(a_at(ks.start).max(a_at(last)) + LANES <= a.len());
    assert!(b_at(ks.start).max(b_at(last)) + LANES <= b.len());
    for k in ks {
        let (a_first, b_first) = (a_at(k), b_at(k));
        for lane in 0..LANES {
            // SAFETY: a_at and b_at are linear in k, so a_at(k) and b_at(k) lie between their
            // values at the range's two ends, which the asserts above bound by len − LANES.
            #[allow(unsafe_code)] // bounds checked per block above
            let sum = unsafe { a.get_unchecked(a_first + lane) + b.get_unchecked(b_first + lane) };
            // `if >` rather than f64::max: inputs are finite or −∞ (no NaN), and this form maps
            // onto a single vector max instruction.
            acc[lane] = if sum > acc[lane] { sum } else { acc[lane] };
        }
    }
    acc
}

#[derive(Clone, Copy)]
enum Span {
    CompleteRight(usize, usize),
    CompleteLeft(usize, usize),
    IncompleteRight(usize, usize),
    IncompleteLeft(usize, usize),
}

/// First split point in `range` whose sum is the best (the sums are recomputed with the same
/// floating-point additions as the fill, so equality is exact).
#[inline(always)]
fn first_best(range: std::ops::Range<usize>, value: impl Fn(usize) -> f64) -> usize {
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
}

fn backtrace(charts: &Charts<'_>, scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    let side = charts.side;
    let single_root = root == RootConstraint::SingleRoot;
    let mut heads = vec![0usize; side];
    let mut stack = vec![Span::CompleteRight(0, side - 1)];
    while let Some(span) = stack.pop() {
        match span {
            Span::CompleteRight(s, t) => {
                if s == t {
                    continue;
                }
                let r = first_best(s + 1..t + 1, |r| {
                    charts.value(Chart::IncompleteRight, s, r)
                        + charts.value(Chart::CompleteRight, r, t)
                });
                stack.push(Span::IncompleteRight(s, r));
                stack.push(Span::CompleteRight(r, t));
            }
            Span::CompleteLeft(s, t) => {
                if s == t {
                    continue;
                }
                let r = first_best(s..t, |r| {
                    charts.value(Chart::CompleteLeft, s, r)
                        + charts.value(Chart::IncompleteLeft, r, t)
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
                    first_best(s..t, |r| {
                        charts.value(Chart::CompleteRight, s, r)
                            + charts.value(Chart::CompleteLeft, r + 1, t)
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
