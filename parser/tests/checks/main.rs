//! Integration checks of the parsing core, one module per topic. Each outside source is named
//! beside the check that uses it.

mod brute_force;
mod conllu_errors;
mod counting;
mod neural;
mod properties;
mod reproducibility;
mod stability;

use arcwright_parser::decode::ScoreMatrix;
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

/// Random scores uniform in `[-range, range]`, reproducible from `seed`.
pub fn random_scores(words: usize, range: f64, seed: u64) -> ScoreMatrix {
    let mut rng = StdRng::seed_from_u64(seed);
    ScoreMatrix::from_fn(words, |_, _| rng.random_range(-range..=range)).expect("valid matrix")
}

/// Random small integer scores (many ties).
pub fn integer_scores(words: usize, seed: u64) -> ScoreMatrix {
    let mut rng = StdRng::seed_from_u64(seed);
    ScoreMatrix::from_fn(words, |_, _| rng.random_range(-2..=2) as f64).expect("valid matrix")
}

pub fn assert_close(actual: f64, expected: f64, tolerance: f64, what: &str) {
    let scale = expected.abs().max(1.0);
    assert!(
        (actual - expected).abs() <= tolerance * scale,
        "{what}: got {actual}, expected {expected} (tolerance {tolerance} relative)"
    );
}
