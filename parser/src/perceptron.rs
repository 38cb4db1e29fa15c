//! Averaged perceptron weights over a hashed feature table (Collins 2002), with the usual
//! lazy-averaging trick: alongside the weights `w` keep `u += c·Δ` for every update made at step
//! `c`; after `C` steps the average of the weights over all steps is `w − u / C`.

use crate::features::mix;

/// Index of a feature hash in a table of `2^bits` entries (the top bits: the best mixed).
#[inline(always)]
pub fn bucket(hash: u64, bits: u32) -> usize {
    (hash >> (64 - bits)) as usize
}

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
        Trainee::from_weights(bits, vec![0.0; 1 << bits])
    }

    /// Starts from existing weights (iterative parameter mixing).
    pub fn from_weights(bits: u32, weights: Vec<f32>) -> Self {
        let size = weights.len();
        Trainee {
            bits,
            weights,
            accumulated: vec![0.0; size],
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
            return self.weights.clone();
        }
        let scale = (1.0 / self.steps) as f32;
        self.weights
            .iter()
            .zip(&self.accumulated)
            .map(|(w, u)| w - u * scale)
            .collect()
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
    let mut out = vec![0.0f32; vectors.first().map_or(0, Vec::len)];
    for v in vectors {
        for (o, x) in out.iter_mut().zip(v) {
            *o += x * scale;
        }
    }
    out
}
