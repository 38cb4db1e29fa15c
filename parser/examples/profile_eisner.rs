use arcwright_parser::decode::*;
fn main() {
    let n: usize = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(32);
    let reps: usize = std::env::args()
        .nth(2)
        .and_then(|a| a.parse().ok())
        .unwrap_or(20000);
    let mut x = 1u64;
    let s = ScoreMatrix::from_fn(n, |_, _| {
        x = x
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (x >> 11) as f64 / (1u64 << 53) as f64
    })
    .unwrap();
    let mut total = 0;
    let t = std::time::Instant::now();
    for _ in 0..reps {
        total += eisner::decode(std::hint::black_box(&s), RootConstraint::SingleRoot)[1];
    }
    println!("{total} {:?} per decode", t.elapsed() / reps as u32);
}
