//! Averaged perceptron weights over a hashed feature table (Collins 2002), with the usual
//! lazy-averaging trick: alongside the weights `w` keep `u += c·Δ` for every update made at step
//! `c`; after `C` steps the average of the weights over all steps is `w − u / C`.

use crate::hashing::{bucket, mix};

/// The class with the highest score `Σ_f weights[bucket(mix(f, class))]` over `features`, the
/// first among equal scores (the tagger's and the labeler's decision). Prefetching every bucket
/// first was tried and was slower here: these loops are short and their tables (4 MB) mostly
/// cached, so the out-of-order core already overlaps the reads.
pub fn best_class(features: &[u64], classes: usize, weights: &[f32], bits: u32) -> usize {
    let mut best = (f32::NEG_INFINITY, 0);
    for class in 0..classes {
        let score: f32 = features
            .iter()
            .map(|&f| weights[bucket(mix(f, class as u64), bits)])
            .sum();
        if score > best.0 {
            best = (score, class);
        }
    }
    best.1
}

/// Asks the CPU to bring `table[index]` into the cache (a hint: no effect on results; nothing
/// is read if `index` is out of range).
#[inline(always)]
pub(crate) fn prefetch(table: &[f32], index: usize) {
    #[cfg(target_arch = "x86_64")]
    if let Some(cell) = table.get(index) {
        use std::arch::x86_64::{_MM_HINT_T0, _mm_prefetch};
        // SAFETY: SSE is part of every x86-64 CPU (the target's baseline), and a prefetch
        // reads nothing architecturally; the pointer is to a live element anyway.
        #[allow(unsafe_code)] // a cache hint through the SSE intrinsic
        unsafe {
            _mm_prefetch::<_MM_HINT_T0>(std::ptr::from_ref(cell).cast::<i8>())
        };
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = (table, index);
}

/// A zeroed weight table of `len` entries, backed by huge pages where the system offers them.
///
/// Every lookup lands on a pseudo-random entry (a hashed feature), so with 4 KiB pages a table
/// of megabytes costs a TLB miss — a page walk — on nearly every lookup; a parse makes tens of
/// thousands. On Linux the table is advised as transparent huge pages (`MADV_HUGEPAGE`, 2 MiB)
/// before its first write, so the kernel backs it with a few TLB entries instead of thousands
/// (a 25-word parse on the demo model ran 15–20% faster;
/// docs/decisions/allocator-and-huge-pages.md). Only a hint: where huge pages are off, or
/// elsewhere, the table is an ordinary zeroed vector.
pub fn weight_table(len: usize) -> Vec<f32> {
    // Zeroed memory of this size comes straight from the kernel (calloc → mmap) and is not
    // touched until written, so the advice applies before any page is faulted in.
    let mut table = vec![0.0f32; len];
    advise_huge_pages(&mut table);
    table
}

/// A weight table (as [`weight_table`]) holding `values`.
pub fn weight_table_from(values: impl ExactSizeIterator<Item = f32>) -> Vec<f32> {
    let mut table = weight_table(values.len());
    for (cell, value) in table.iter_mut().zip(values) {
        *cell = value;
    }
    table
}

#[cfg(target_os = "linux")]
fn advise_huge_pages(table: &mut [f32]) {
    const PAGE: usize = 4096;
    const HUGE_PAGE: usize = 2 << 20;
    let start = table.as_mut_ptr() as usize;
    let end = start + std::mem::size_of_val(table);
    let first = start.next_multiple_of(PAGE);
    if end < first + HUGE_PAGE {
        return; // too small to hold a huge page
    }
    let length = (end - first) / PAGE * PAGE;
    // SAFETY: [first, first + length) lies inside `table`, memory this function borrows
    // mutably, and is page-aligned as madvise requires. MADV_HUGEPAGE changes only how the
    // kernel backs those pages, never their contents or validity; a failure is harmless.
    #[allow(unsafe_code)] // one advisory system call on memory we own
    let _ = unsafe { libc::madvise(first as *mut libc::c_void, length, libc::MADV_HUGEPAGE) };
}

#[cfg(not(target_os = "linux"))]
fn advise_huge_pages(_table: &mut [f32]) {}

/// Weights being trained, with their averaging accumulator.
#[derive(Debug, Clone)]
pub struct Trainee {
    pub bits: u32,
    pub weights: Vec<f32>,
    accumulated: Vec<f32>,
    steps: f64,
}

impl Trainee {
    pub fn new(bits: u32) -> Self {
        Trainee::from_weights(bits, weight_table(1 << bits))
    }

    /// Starts from existing weights (iterative parameter mixing).
    pub fn from_weights(bits: u32, weights: Vec<f32>) -> Self {
        let size = weights.len();
        Trainee {
            bits,
            weights,
            accumulated: weight_table(size),
            steps: 0.0,
        }
    }

    /// Moves to the next training instance.
    pub fn tick(&mut self) {
        self.steps += 1.0;
    }

    #[inline]
    pub fn update(&mut self, hash: u64, delta: f32) {
        let i = bucket(hash, self.bits);
        self.weights[i] += delta;
        self.accumulated[i] += (self.steps as f32) * delta;
    }

    /// Average of the weights over the steps taken so far (the weights themselves if none).
    pub fn averaged(&self) -> Vec<f32> {
        if self.steps == 0.0 {
            return weight_table_from(self.weights.iter().copied());
        }
        let scale = (1.0 / self.steps) as f32;
        weight_table_from(
            self.weights
                .iter()
                .zip(&self.accumulated)
                .map(|(w, u)| w - u * scale),
        )
    }
}

/// Sum of the weights of `hashes`.
#[inline]
pub fn score(weights: &[f32], bits: u32, hashes: impl IntoIterator<Item = u64>) -> f32 {
    hashes.into_iter().map(|h| weights[bucket(h, bits)]).sum()
}

/// Element-wise mean of several weight vectors of the same length.
pub fn mean(vectors: &[Vec<f32>]) -> Vec<f32> {
    let scale = 1.0 / vectors.len() as f32;
    let mut out = weight_table(vectors.first().map_or(0, Vec::len));
    for v in vectors {
        for (o, x) in out.iter_mut().zip(v) {
            *o += x * scale;
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Huge-page advice or not, a weight table is an ordinary zeroed vector of the asked size
    /// (sizes below, at and above one huge page, and not a multiple of a page).
    #[test]
    fn weight_tables_are_zeroed_and_sized() {
        for len in [0, 1, 1000, (2 << 20) / 4, (5 << 20) / 4 + 3] {
            let mut table = weight_table(len);
            assert_eq!(table.len(), len);
            assert!(table.iter().all(|&w| w == 0.0));
            if let Some(last) = table.last_mut() {
                *last = 1.5; // writable to the end
            }
        }
    }
}
