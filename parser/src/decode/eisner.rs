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
//! right operand a span ending at `t`. The narrow spans are also kept in tables indexed by
//! (width, start), one per chart. A block's left operands are then a contiguous run of `LANES`
//! doubles in row `k`; a right operand of width `j` ends at `t` and so starts at `t − j`, which
//! makes the block's right operands the run at column `first + w − j` of row `j`, contiguous
//! too. The maxima stay in vector registers: no reduction and no set-up per span. Blocks go
//! from the last start to the first and, within a block, widths upwards: a span needs only
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
//! for the whole inner loop. The first phase writes into these charts the spans a wide span
//! reads: those in rows that start a wide span and, transposed, in rows that end one.
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

/// The narrow spans by (width, start): cell `w * row + s` holds span `[s, s + w]`. Rows are
/// padded by [`LANES`] columns for the lanes past the sentence's end; what those lanes compute
/// is never read by a lane inside the sentence.
#[derive(Debug)]
struct NarrowTables<'a> {
    /// Length of a row: `side + LANES`.
    row: usize,
    complete_right: &'a mut [f64],
    complete_left: &'a mut [f64],
    incomplete_right: &'a mut [f64],
    incomplete_left: &'a mut [f64],
    /// `score(s, s + w)`: the arc of `IR[s][s + w]`.
    right_arc: &'a mut [f64],
    /// `score(s + w, s)`: the arc of `IL[s][s + w]`.
    left_arc: &'a mut [f64],
}

/// Doubles of one narrow table for `side` positions.
fn narrow_len(side: usize) -> usize {
    side.min(NARROW) * (side + LANES)
}

/// Doubles of chart memory for `side` positions.
fn buffer_len(side: usize) -> usize {
    6 * side * side + 6 * narrow_len(side)
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
        let (narrow_complete_right, rest) = rest.split_at_mut(narrow);
        let (narrow_complete_left, rest) = rest.split_at_mut(narrow);
        let (narrow_incomplete_right, rest) = rest.split_at_mut(narrow);
        let (narrow_incomplete_left, rest) = rest.split_at_mut(narrow);
        let (right_arc, rest) = rest.split_at_mut(narrow);
        let left_arc = &mut rest[..narrow];
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
                complete_right: narrow_complete_right,
                complete_left: narrow_complete_left,
                incomplete_right: narrow_incomplete_right,
                incomplete_left: narrow_incomplete_left,
                right_arc,
                left_arc,
            },
        }
    }

    /// Span `[s, t]` of `chart`, from whichever phase computed it: a narrow span from its
    /// narrow table, a wide one from its row chart (`IL` is kept transposed).
    fn value(&self, chart: Chart, s: usize, t: usize) -> f64 {
        let w = t - s;
        if w < NARROW {
            return self.narrow.value(chart, s, t);
        }
        match chart {
            Chart::CompleteRight => self.complete_right[s * self.side + t],
            Chart::CompleteLeft => self.complete_left[s * self.side + t],
            Chart::IncompleteRight => self.incomplete_right[s * self.side + t],
            Chart::IncompleteLeft => self.incomplete_left_t[t * self.side + s],
        }
    }
}

impl NarrowTables<'_> {
    /// Narrow span `[s, t]` (`t − s < NARROW`) of `chart`.
    fn value(&self, chart: Chart, s: usize, t: usize) -> f64 {
        let table: &[f64] = match chart {
            Chart::CompleteRight => self.complete_right,
            Chart::CompleteLeft => self.complete_left,
            Chart::IncompleteRight => self.incomplete_right,
            Chart::IncompleteLeft => self.incomplete_left,
        };
        table[(t - s) * self.row + s]
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
    /// and 6 × 48 × 521 for the narrow tables (13.8 MB) per parsing thread.
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
/// to the narrow tables and, for a sentence that also has wide spans, to the charts.
#[inline(always)]
fn fill_narrow(charts: &mut Charts<'_>, scores: &ScoreMatrix, single_root: bool) {
    let side = charts.side;
    let NarrowTables {
        row,
        complete_right: cr,
        complete_left: cl,
        incomplete_right: ir,
        incomplete_left: il,
        right_arc,
        left_arc,
    } = &mut charts.narrow;
    let row = *row;
    // Width 0: the one-position spans (padding included).
    cr[..row].fill(0.0);
    cl[..row].fill(0.0);
    // The arc scores of each width in the tables' layout, so that a block adds them as vectors:
    // score(s, s + w) and score(s + w, s) are the matrix's diagonals `w` above and below the main
    // one (stride side + 1). Arcs into the root (s = 0 below) score −∞ already.
    let flat = scores.as_slice();
    for w in 1..side.min(NARROW) {
        let count = side - w;
        let (above, below) = (&flat[w..], &flat[w * side..]);
        let rights = &mut right_arc[w * row..w * row + count];
        let lefts = &mut left_arc[w * row..w * row + count];
        for s in 0..count {
            rights[s] = above[s * (side + 1)];
            lefts[s] = below[s * (side + 1)];
        }
    }
    for first in (0..side).step_by(LANES).rev() {
        // Starts first..first + LANES, widths up to the last narrow one with a span at `first`.
        for w in 1..(side - first).min(NARROW) {
            let here = w * row + first;

            // Incomplete spans: max over k in 0..w of CR[s][s + k] + CL[s + k + 1][t].
            // k = 0..w: cr at k·row + first, cl at (w − 1 − k)·row + first + k + 1.
            let inner = block_max(
                w,
                cr,
                Strided::up(first, row),
                cl,
                Strided::down((w - 1) * row + first + 1, row - 1),
            );
            *lanes_mut(ir, here) = lanes_add(&inner, lanes(right_arc, here));
            *lanes_mut(il, here) = lanes_add(&inner, lanes(left_arc, here));
            if single_root && first == 0 {
                // The root's one child: only the split r = 0 (CR[0][0] = 0). IL[0][t] would be
                // an arc into the root, −∞ either way.
                ir[here] = cr[0] + cl[(w - 1) * row + 1] + right_arc[here];
            }

            // Complete right: max over k in 1..=w of IR[s][s + k] + CR[s + k][t].
            // k = 1..=w: ir at k·row + first, cr at (w − k)·row + first + k.
            let right = block_max(
                w,
                ir,
                Strided::up(row + first, row),
                cr,
                Strided::down((w - 1) * row + first + 1, row - 1),
            );
            *lanes_mut(cr, here) = right;

            // Complete left: max over k in 0..w of CL[s][s + k] + IL[s + k][t].
            // k = 0..w: cl at k·row + first, il at (w − k)·row + first + k.
            let left = block_max(
                w,
                cl,
                Strided::up(first, row),
                il,
                Strided::down(w * row + first, row - 1),
            );
            *lanes_mut(cl, here) = left;

            // The same spans into the charts the second phase reads (a sentence with only narrow
            // spans has no second phase; the back-trace reads the narrow tables).
            if side > NARROW {
                // Span (s, s + w) sits at s·side + s + w in a chart and at (s + w)·side + s in a
                // transposed one: for the block's starts, runs with stride side + 1. Only what
                // a wide span reads is copied: rows s that start a wide span
                // (s < side − NARROW) and, transposed, ends t that end one (t ≥ NARROW).
                let valid = LANES.min(side - w - first);
                let rows = valid.min((side - NARROW).saturating_sub(first));
                let ends = NARROW.saturating_sub(first + w).min(valid);
                let (forward, backward) = (first * (side + 1) + w, (first + w) * side + first);
                let step = side + 1;
                let last = valid.saturating_sub(1);
                // One check per block instead of one per cell (a per-cell check costs as much
                // as the store); the six charts have the same length.
                assert!(forward.max(backward) + last * step < charts.complete_right.len());
                for lane in 0..valid {
                    let (f, b) = (forward + lane * step, backward + lane * step);
                    // SAFETY: lane ≤ last, so f and b are at most forward/backward + last·step,
                    // in bounds of every chart (asserted above).
                    #[allow(unsafe_code)] // bounds checked per block above
                    unsafe {
                        if lane < rows {
                            *charts.incomplete_right.get_unchecked_mut(f) = ir[here + lane];
                            *charts.complete_right.get_unchecked_mut(f) = right[lane];
                            *charts.complete_left.get_unchecked_mut(f) = left[lane];
                        }
                        if lane >= ends {
                            *charts.incomplete_left_t.get_unchecked_mut(b) = il[here + lane];
                            *charts.complete_right_t.get_unchecked_mut(b) = right[lane];
                            *charts.complete_left_t.get_unchecked_mut(b) = left[lane];
                        }
                    }
                }
            }
        }
    }
}

/// The [`LANES`] cells of one block at `at`.
#[inline(always)]
fn lanes(table: &[f64], at: usize) -> &[f64; LANES] {
    table[at..at + LANES]
        .try_into()
        .expect("a range of LANES cells")
}

/// The [`LANES`] cells of one block at `at`, to write.
#[inline(always)]
fn lanes_mut(table: &mut [f64], at: usize) -> &mut [f64; LANES] {
    (&mut table[at..at + LANES])
        .try_into()
        .expect("a range of LANES cells")
}

#[inline(always)]
fn lanes_add(a: &[f64; LANES], b: &[f64; LANES]) -> [f64; LANES] {
    std::array::from_fn(|lane| a[lane] + b[lane])
}

/// Positions `start, start ± step, start ± 2·step, …` in a table: one operand of a block
/// reduction. Linear by construction, so the positions of a walk's first and last terms bound
/// every position in between.
#[derive(Clone, Copy)]
struct Strided {
    start: usize,
    step: isize,
}

impl Strided {
    /// `start, start + step, …`
    #[inline(always)]
    fn up(start: usize, step: usize) -> Strided {
        Strided {
            start,
            step: step as isize,
        }
    }

    /// `start, start − step, …`
    #[inline(always)]
    fn down(start: usize, step: usize) -> Strided {
        Strided {
            start,
            step: -(step as isize),
        }
    }

    /// The position of term `i`, or `None` if it would be negative.
    #[inline(always)]
    fn at(self, i: usize) -> Option<usize> {
        usize::try_from(self.start as isize + self.step * i as isize).ok()
    }

    /// Whether terms `0..terms` each have [`LANES`] cells in a table of `len` cells.
    #[inline(always)]
    fn fits(self, terms: usize, len: usize) -> bool {
        match (self.at(0), self.at(terms - 1)) {
            (Some(first), Some(last)) => first.max(last) + LANES <= len,
            _ => false,
        }
    }
}

/// `acc[lane] = max over i in 0..terms of a[a_walk(i) + lane] + b[b_walk(i) + lane]` for one
/// block of starts (−∞ when `terms` is 0).
#[inline(always)]
fn block_max(terms: usize, a: &[f64], a_walk: Strided, b: &[f64], b_walk: Strided) -> [f64; LANES] {
    let mut acc = [f64::NEG_INFINITY; LANES];
    if terms == 0 {
        return acc;
    }
    // One check per block instead of two per term: a per-term check costs as much as the term.
    assert!(a_walk.fits(terms, a.len()) && b_walk.fits(terms, b.len()));
    let (mut a_first, mut b_first) = (a_walk.start as isize, b_walk.start as isize);
    for _ in 0..terms {
        for lane in 0..LANES {
            // SAFETY: a walk is linear, so term i's position lies between those of terms 0 and
            // terms − 1, which `fits` bounds to 0..=len − LANES for both tables.
            #[allow(unsafe_code)] // bounds checked per block above
            let sum = unsafe {
                a.get_unchecked(a_first as usize + lane) + b.get_unchecked(b_first as usize + lane)
            };
            // `if >` rather than f64::max: inputs are finite or −∞ (no NaN), and this form maps
            // onto a single vector max instruction.
            acc[lane] = if sum > acc[lane] { sum } else { acc[lane] };
        }
        a_first += a_walk.step;
        b_first += b_walk.step;
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

impl Span {
    fn ends(self) -> (usize, usize) {
        match self {
            Span::CompleteRight(s, t)
            | Span::CompleteLeft(s, t)
            | Span::IncompleteRight(s, t)
            | Span::IncompleteLeft(s, t) => (s, t),
        }
    }
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

/// First split point in `range` whose sum equals `target`, the span's own chart value: a
/// complete span's value is exactly the best of these sums, so the search can stop there.
/// (Incomplete spans store the best sum plus the arc's score, which may round, so they use
/// [`first_best`].) Falls back to [`first_best`] if no sum matches, which the fill rules out.
#[inline(always)]
fn first_reaching(
    range: std::ops::Range<usize>,
    target: f64,
    value: impl Fn(usize) -> f64,
) -> usize {
    match range.clone().find(|&r| value(r) == target) {
        Some(r) => r,
        None => first_best(range, value),
    }
}

fn backtrace(charts: &Charts<'_>, scores: &ScoreMatrix, root: RootConstraint) -> Vec<usize> {
    let side = charts.side;
    let single_root = root == RootConstraint::SingleRoot;
    let mut heads = vec![0usize; side];
    let mut stack = vec![Span::CompleteRight(0, side - 1)];
    while let Some(span) = stack.pop() {
        let (s, t) = span.ends();
        if s == t {
            // A one-position complete span (incomplete spans hold an arc, so s < t).
            continue;
        }
        let r = if t - s < NARROW {
            // Every part of a narrow span is narrow: read the narrow tables directly.
            best_split(span, single_root, |chart, a, b| {
                charts.narrow.value(chart, a, b)
            })
        } else {
            best_split(span, single_root, |chart, a, b| charts.value(chart, a, b))
        };
        match span {
            Span::CompleteRight(s, t) => {
                stack.push(Span::IncompleteRight(s, r));
                stack.push(Span::CompleteRight(r, t));
            }
            Span::CompleteLeft(s, t) => {
                stack.push(Span::CompleteLeft(s, r));
                stack.push(Span::IncompleteLeft(r, t));
            }
            Span::IncompleteRight(s, t) | Span::IncompleteLeft(s, t) => {
                match span {
                    Span::IncompleteRight(..) => heads[t] = s,
                    _ => heads[s] = t,
                }
                stack.push(Span::CompleteRight(s, r));
                stack.push(Span::CompleteLeft(r + 1, t));
            }
        }
    }
    let _ = scores;
    heads
}

/// The split point of `span` that the fill's recurrence took, reading chart values through
/// `value(chart, s, t)`.
#[inline(always)]
fn best_split(span: Span, single_root: bool, value: impl Fn(Chart, usize, usize) -> f64) -> usize {
    match span {
        Span::CompleteRight(s, t) => {
            first_reaching(s + 1..t + 1, value(Chart::CompleteRight, s, t), |r| {
                value(Chart::IncompleteRight, s, r) + value(Chart::CompleteRight, r, t)
            })
        }
        Span::CompleteLeft(s, t) => first_reaching(s..t, value(Chart::CompleteLeft, s, t), |r| {
            value(Chart::CompleteLeft, s, r) + value(Chart::IncompleteLeft, r, t)
        }),
        Span::IncompleteRight(s, t) | Span::IncompleteLeft(s, t) => {
            if s == 0 && single_root {
                0
            } else {
                first_best(s..t, |r| {
                    value(Chart::CompleteRight, s, r) + value(Chart::CompleteLeft, r + 1, t)
                })
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The block reduction's one bounds check covers every term: a walk that would leave the
    /// table at either end, or go below 0, is refused before any unchecked read.
    #[test]
    fn strided_walks_are_bounded_by_their_two_ends() {
        let table = vec![0.0; 10 * LANES];
        assert!(Strided::up(0, LANES).fits(10, table.len()));
        assert!(!Strided::up(0, LANES).fits(11, table.len()));
        assert!(Strided::down(9 * LANES, LANES).fits(10, table.len()));
        assert!(
            !Strided::down(9 * LANES, LANES).fits(11, table.len()),
            "below 0"
        );
        assert_eq!(Strided::down(5, 2).at(2), Some(1));
        assert_eq!(Strided::down(5, 2).at(3), None);
        let values: Vec<f64> = (0..table.len()).map(|i| i as f64).collect();
        let zeros = vec![0.0; values.len()];
        // Terms at 0, LANES, 2·LANES: the maximum is the last, lane by lane.
        let best = block_max(3, &values, Strided::up(0, LANES), &zeros, Strided::up(0, 0));
        assert_eq!(best, std::array::from_fn(|lane| (2 * LANES + lane) as f64));
        assert_eq!(
            block_max(0, &values, Strided::up(0, LANES), &zeros, Strided::up(0, 0)),
            [f64::NEG_INFINITY; LANES]
        );
    }
}
