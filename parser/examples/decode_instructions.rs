//! Decodes one random score matrix REPEATS times and prints the time per decode: a loop for
//! profilers, and for counting the instructions of a decode with valgrind — a measure of the
//! decoder's work that the machine's noise and caches do not move.
//!
//! Run: `valgrind --tool=callgrind --callgrind-out-file=/dev/null \
//!   target/release/examples/decode_instructions DECODER WORDS REPEATS`
//! with DECODER `eisner` (the fast projective decoder), `reference-eisner` (the textbook
//! O(n³) loops of `decode::reference`) or `chu-liu-edmonds`. The per-decode count is the
//! difference of two runs' totals divided by the difference of their REPEATS (setup cancels).
//! `tools/measure/measure_decode_instructions.sh` does this for 16 … 256 words and fits the
//! log-log slope.

use arcwright_parser::decode::{RootConstraint, ScoreMatrix, chu_liu_edmonds, eisner, reference};

fn main() {
    let mut args = std::env::args().skip(1);
    let usage = "usage: decode_instructions eisner|reference-eisner|chu-liu-edmonds WORDS REPEATS";
    let (Some(decoder), Some(words), Some(repeats)) = (
        args.next(),
        args.next().and_then(|a| a.parse::<usize>().ok()),
        args.next().and_then(|a| a.parse::<usize>().ok()),
    ) else {
        eprintln!("{usage}");
        std::process::exit(2);
    };
    let decode: fn(&ScoreMatrix, RootConstraint) -> Vec<usize> = match decoder.as_str() {
        "eisner" => eisner::decode,
        "reference-eisner" => reference::eisner,
        "chu-liu-edmonds" => chu_liu_edmonds::decode,
        _ => {
            eprintln!("{usage}");
            std::process::exit(2);
        }
    };
    // Uniform scores in [0, 1) from a fixed 64-bit LCG (Knuth's MMIX constants): the same
    // matrix on every machine.
    let mut state = 1u64;
    let scores = ScoreMatrix::from_fn(words, |_, _| {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    })
    .expect("a valid score matrix");
    let mut checksum = 0;
    let started = std::time::Instant::now();
    for _ in 0..repeats {
        checksum += decode(std::hint::black_box(&scores), RootConstraint::SingleRoot)[1];
    }
    let per_decode = started.elapsed() / repeats.max(1) as u32;
    println!("{per_decode:?} per decode (checksum {checksum})");
}
