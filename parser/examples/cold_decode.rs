//! Eisner decode time with cold and with hot caches, per sentence length: what the service sees
//! (scoring walks the weight tables between two decodes and evicts the chart memory) against
//! what a loop of decodes sees.
//!
//! Run: `cargo run --release -p arcwright-parser --example cold_decode [REPEATS]`
//! Each size is decoded REPEATS times (default 200) right after a 64 MB sweep ("cold") and
//! again at once ("hot"); the medians are printed with the log-log slope between sizes.

use std::hint::black_box;
use std::time::Instant;

use arcwright_parser::decode::{RootConstraint, ScoreMatrix, eisner};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

const SIZES: [usize; 7] = [16, 24, 32, 48, 64, 128, 256];

fn median(mut values: Vec<f64>) -> f64 {
    values.sort_by(f64::total_cmp);
    values[values.len() / 2]
}

fn main() {
    let repeats: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(200);
    let mut rng = StdRng::seed_from_u64(7);
    let matrices: Vec<ScoreMatrix> = SIZES
        .iter()
        .map(|&n| ScoreMatrix::from_fn(n, |_, _| rng.random_range(-1.0..1.0)).expect("valid"))
        .collect();
    // The per-thread chart buffer at the largest size first, as in a long-running server.
    eisner::decode(&matrices[SIZES.len() - 1], RootConstraint::SingleRoot);
    let mut sweep = vec![0u64; 8 << 20];
    let mut previous: Option<(usize, f64, f64)> = None;
    println!(
        "{:>5} {:>12} {:>12} {:>11} {:>11}",
        "n", "cold p50", "hot p50", "cold slope", "hot slope"
    );
    for (&n, scores) in SIZES.iter().zip(&matrices) {
        let (mut cold, mut hot) = (Vec::new(), Vec::new());
        for round in 0..repeats {
            for cell in sweep.iter_mut().step_by(8) {
                *cell = cell.wrapping_add(round as u64);
            }
            for times in [&mut cold, &mut hot] {
                let start = Instant::now();
                black_box(eisner::decode(
                    black_box(scores),
                    RootConstraint::SingleRoot,
                ));
                times.push(start.elapsed().as_secs_f64() * 1e6);
            }
        }
        let (cold, hot) = (median(cold), median(hot));
        let slope = |from: f64, to: f64, m: usize| (to / from).ln() / (n as f64 / m as f64).ln();
        let (cold_slope, hot_slope) =
            previous.map_or((String::new(), String::new()), |(m, c, h)| {
                (
                    format!("{:.2}", slope(c, cold, m)),
                    format!("{:.2}", slope(h, hot, m)),
                )
            });
        println!("{n:>5} {cold:>10.2}µs {hot:>10.2}µs {cold_slope:>11} {hot_slope:>11}");
        previous = Some((n, cold, hot));
    }
    black_box(sweep[7]);
}
