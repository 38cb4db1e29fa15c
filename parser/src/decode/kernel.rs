//! The max-plus kernel at the heart of Eisner's algorithm, and the CPU dispatch around it.
//!
//! `max_plus(a, b) = max_i a[i] + b[i]` over two contiguous slices. Written with eight
//! independent accumulators and a branch-free select so that LLVM turns it into packed
//! `maxpd` instructions; compiled twice — once for the baseline x86-64 target (SSE2) and once
//! with AVX2 enabled — and chosen at run time, so a plain `cargo build --release` binary uses
//! AVX2 where the CPU has it.

use std::sync::OnceLock;

/// Which instruction set the chart kernels use on this machine.
pub fn simd_level() -> &'static str {
    if has_avx2() { "avx2" } else { "baseline" }
}

pub(crate) fn has_avx2() -> bool {
    static AVX2: OnceLock<bool> = OnceLock::new();
    *AVX2.get_or_init(|| {
        #[cfg(target_arch = "x86_64")]
        {
            std::is_x86_feature_detected!("avx2")
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            false
        }
    })
}

/// `max_i a[i] + b[i]` over the common length; −∞ for empty slices.
pub fn max_plus(a: &[f64], b: &[f64]) -> f64 {
    #[cfg(target_arch = "x86_64")]
    if has_avx2() {
        // SAFETY: the CPU supports AVX2 (checked above).
        #[allow(unsafe_code)] // calling a #[target_feature] function after runtime detection
        return unsafe { max_plus_avx2(a, b) };
    }
    max_plus_inline(a, b)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn max_plus_avx2(a: &[f64], b: &[f64]) -> f64 {
    max_plus_inline(a, b)
}

/// The kernel itself; `#[inline(always)]` so each caller compiled with a wider target feature
/// gets its own vector code.
///
/// Short inputs dominate Eisner's chart (half the spans are narrower than n/2), so the tail is
/// not done one element at a time: since max is idempotent, the last full block is simply read
/// again, overlapping the previous one.
#[inline(always)]
pub(crate) fn max_plus_inline(a: &[f64], b: &[f64]) -> f64 {
    let len = a.len().min(b.len());
    let (a, b) = (&a[..len], &b[..len]);
    if len >= 8 {
        let mut acc = [f64::NEG_INFINITY; 8];
        let mut chunks_a = a.chunks_exact(8);
        let mut chunks_b = b.chunks_exact(8);
        for (ca, cb) in (&mut chunks_a).zip(&mut chunks_b) {
            accumulate(&mut acc, ca, cb);
        }
        if !chunks_a.remainder().is_empty() {
            accumulate(&mut acc, &a[len - 8..], &b[len - 8..]);
        }
        return reduce(&acc);
    }
    if len >= 4 {
        let mut acc = [f64::NEG_INFINITY; 4];
        accumulate(&mut acc, &a[..4], &b[..4]);
        accumulate(&mut acc, &a[len - 4..], &b[len - 4..]);
        return reduce(&acc);
    }
    let mut best = f64::NEG_INFINITY;
    for (x, y) in a.iter().zip(b) {
        let sum = x + y;
        best = if sum > best { sum } else { best };
    }
    best
}

/// `acc[i] = max(acc[i], a[i] + b[i])` for one block of `N` lanes.
#[inline(always)]
fn accumulate<const N: usize>(acc: &mut [f64; N], a: &[f64], b: &[f64]) {
    let (a, b) = (&a[..N], &b[..N]);
    for lane in 0..N {
        let sum = a[lane] + b[lane];
        // `if >` rather than f64::max: inputs are finite or −∞ (no NaN), and this form maps
        // onto a single vector max instruction.
        acc[lane] = if sum > acc[lane] { sum } else { acc[lane] };
    }
}

/// Horizontal max as a tree (8 → 4 → 2 → 1): three dependent steps instead of seven; this
/// latency chain is paid once per span, and short spans are most of Eisner's chart.
#[inline(always)]
fn reduce<const N: usize>(values: &[f64; N]) -> f64 {
    let pick = |x: f64, y: f64| if x > y { x } else { y };
    let mut width = N;
    let mut v = *values;
    while width > 1 {
        width /= 2;
        for lane in 0..width {
            v[lane] = pick(v[lane], v[lane + width]);
        }
    }
    v[0]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn max_plus_matches_scalar_for_every_length_and_position() {
        for len in 0..40 {
            for peak in 0..len.max(1) {
                let a: Vec<f64> = (0..len).map(|i| (i as f64 * 0.37).sin()).collect();
                let mut b: Vec<f64> = (0..len).map(|i| (i as f64 * 0.11).cos()).collect();
                if len > 0 {
                    b[peak] += 10.0;
                }
                let expected = a
                    .iter()
                    .zip(&b)
                    .map(|(x, y)| x + y)
                    .fold(f64::NEG_INFINITY, f64::max);
                assert_eq!(max_plus(&a, &b), expected, "len {len} peak {peak}");
                assert_eq!(max_plus_inline(&a, &b), expected);
            }
        }
    }

    #[test]
    fn max_plus_handles_negative_infinity() {
        let a = [f64::NEG_INFINITY; 9];
        let b = [1.0; 9];
        assert_eq!(max_plus(&a, &b), f64::NEG_INFINITY);
    }
}
