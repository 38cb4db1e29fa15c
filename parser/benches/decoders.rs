//! Decoder benchmarks (criterion): decode time against sentence length for the fast decoders and
//! the straightforward references, plus a pure max-plus streaming kernel as the machine's peak.
//!
//! Run: `cargo bench -p arcwright-parser --bench decoders` (add `-- --quick` for a fast pass).
//! After criterion's own report, a summary prints the fitted log-log exponent of each decoder
//! (least squares of ln time against ln n for n ≥ 32), the speed-up over the reference at the
//! sizes named in the targets, and Eisner's inner-loop rate as a share of the kernel's peak.

use std::collections::BTreeMap;
use std::hint::black_box;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use arcwright_parser::decode::{self, Algorithm, RootConstraint, ScoreMatrix, reference};
use criterion::{BenchmarkId, Criterion, SamplingMode};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

const SIZES: [usize; 12] = [8, 16, 24, 32, 48, 64, 96, 128, 192, 256, 384, 512];

/// Mean time per call of every sample criterion took, by (series, n).
static SAMPLES: Mutex<BTreeMap<(String, usize), Vec<f64>>> = Mutex::new(BTreeMap::new());

fn record(series: &str, n: usize, per_call: f64) {
    SAMPLES
        .lock()
        .expect("samples lock")
        .entry((series.to_string(), n))
        .or_default()
        .push(per_call);
}

fn median(series: &str, n: usize) -> Option<f64> {
    let samples = SAMPLES.lock().expect("samples lock");
    let mut values = samples.get(&(series.to_string(), n))?.clone();
    values.sort_by(f64::total_cmp);
    Some(values[values.len() / 2])
}

/// Uniform random scores in [-1, 1].
fn random_scores(n: usize, seed: u64) -> ScoreMatrix {
    let mut rng = StdRng::seed_from_u64(seed);
    ScoreMatrix::from_fn(n, |_, _| rng.random_range(-1.0..1.0)).expect("valid")
}

/// Scores whose greedy heads form n/2 two-cycles (words 2k−1 and 2k prefer each other), so the
/// contract-and-expand reference recurses about n/2 times: its O(n³) worst case.
fn cyclic_scores(n: usize, seed: u64) -> ScoreMatrix {
    let mut rng = StdRng::seed_from_u64(seed);
    ScoreMatrix::from_fn(n, |h, m| {
        let partners = h > 0 && m > 0 && h.div_ceil(2) == m.div_ceil(2);
        if partners {
            5.0 + rng.random_range(0.0..1.0)
        } else {
            rng.random_range(-1.0..1.0) - if h == 0 { 1.0 } else { 0.0 }
        }
    })
    .expect("valid")
}

fn bench_series(
    c: &mut Criterion,
    group_name: &str,
    series: &str,
    sizes: &[usize],
    mut run: impl FnMut(usize) -> Box<dyn FnMut()>,
) {
    let mut group = c.benchmark_group(group_name);
    group
        .sampling_mode(SamplingMode::Flat)
        .sample_size(10)
        .warm_up_time(Duration::from_millis(300))
        .measurement_time(Duration::from_secs(1));
    for &n in sizes {
        let mut call = run(n);
        group.bench_with_input(BenchmarkId::new(series, n), &n, |b, _| {
            b.iter_custom(|iters| {
                let start = Instant::now();
                for _ in 0..iters {
                    call();
                }
                let elapsed = start.elapsed();
                record(
                    &format!("{group_name}/{series}"),
                    n,
                    elapsed.as_secs_f64() / iters as f64,
                );
                elapsed
            })
        });
    }
    group.finish();
}

fn benches(c: &mut Criterion) {
    let up_to = |limit: usize| {
        SIZES
            .iter()
            .copied()
            .filter(|&n| n <= limit)
            .collect::<Vec<_>>()
    };
    for (root, root_name) in [
        (RootConstraint::SingleRoot, "single-root"),
        (RootConstraint::MultiRoot, "multi-root"),
    ] {
        bench_series(c, "eisner", &format!("fast {root_name}"), &SIZES, |n| {
            let s = random_scores(n, n as u64);
            Box::new(move || {
                black_box(decode::eisner::decode(black_box(&s), root));
            })
        });
    }
    bench_series(c, "eisner", "reference single-root", &up_to(256), |n| {
        let s = random_scores(n, n as u64);
        Box::new(move || {
            black_box(reference::eisner(black_box(&s), RootConstraint::SingleRoot));
        })
    });
    for (family, make) in [
        ("random", random_scores as fn(usize, u64) -> ScoreMatrix),
        ("cyclic", cyclic_scores),
    ] {
        for (root, root_name) in [
            (RootConstraint::SingleRoot, "single-root"),
            (RootConstraint::MultiRoot, "multi-root"),
        ] {
            bench_series(
                c,
                "chu-liu-edmonds",
                &format!("fast {root_name} {family}"),
                &SIZES,
                |n| {
                    let s = make(n, n as u64);
                    Box::new(move || {
                        black_box(decode::chu_liu_edmonds::decode(black_box(&s), root));
                    })
                },
            );
        }
        bench_series(
            c,
            "chu-liu-edmonds",
            &format!("reference multi-root {family}"),
            &up_to(512),
            |n| {
                let s = make(n, n as u64);
                Box::new(move || {
                    black_box(reference::chu_liu_edmonds(
                        black_box(&s),
                        RootConstraint::MultiRoot,
                    ));
                })
            },
        );
    }
    // Peak: one long max-plus stream, the same operation as Eisner's inner loop, from L1-sized
    // vectors (no chart traffic).
    bench_series(c, "max-plus", "stream 1024", &[1024], |_| {
        let a: Vec<f64> = (0..1024).map(|i| (i as f64).sin()).collect();
        let b: Vec<f64> = (0..1024).map(|i| (i as f64).cos()).collect();
        Box::new(move || {
            black_box(decode::max_plus(black_box(&a), black_box(&b)));
        })
    });
    let _ = Algorithm::Projective;
}

/// Slope of ln(time) against ln(n) over the measured sizes ≥ `from`.
fn exponent(series: &str, from: usize) -> Option<(f64, usize)> {
    let points: Vec<(f64, f64)> = SIZES
        .iter()
        .filter(|&&n| n >= from)
        .filter_map(|&n| median(series, n).map(|t| ((n as f64).ln(), t.ln())))
        .collect();
    if points.len() < 3 {
        return None;
    }
    let k = points.len() as f64;
    let (mx, my) = (
        points.iter().map(|p| p.0).sum::<f64>() / k,
        points.iter().map(|p| p.1).sum::<f64>() / k,
    );
    let sxy: f64 = points.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    let sxx: f64 = points.iter().map(|p| (p.0 - mx).powi(2)).sum();
    Some((sxy / sxx, points.len()))
}

/// Number of max-plus terms Eisner evaluates for n words (3 reductions of width w per span).
fn eisner_terms(n: usize) -> f64 {
    let side = n + 1;
    (1..side).map(|w| ((side - w) * 3 * w) as f64).sum()
}

fn summary() {
    println!(
        "\n== summary (medians of criterion's samples; SIMD level: {}) ==",
        decode::simd_level()
    );
    let series: Vec<String> = {
        let samples = SAMPLES.lock().expect("samples lock");
        let mut names: Vec<String> = samples.keys().map(|(s, _)| s.clone()).collect();
        names.dedup();
        names
    };
    println!(
        "{:<48} {:>10} {:>10} {:>10} {:>10} {:>10}  exponent (n≥32)",
        "series", "n=32", "n=128", "n=256", "n=512", "exp n≥128"
    );
    for name in &series {
        if name.starts_with("max-plus") {
            continue;
        }
        let cell =
            |n: usize| median(name, n).map_or("-".to_string(), |t| format!("{:.1}µs", t * 1e6));
        let fit =
            exponent(name, 32).map_or("-".to_string(), |(e, k)| format!("{e:.2} ({k} sizes)"));
        let fit_large = exponent(name, 128).map_or("-".to_string(), |(e, _)| format!("{e:.2}"));
        println!(
            "{:<48} {:>10} {:>10} {:>10} {:>10} {:>10}  {}",
            name,
            cell(32),
            cell(128),
            cell(256),
            cell(512),
            fit_large,
            fit
        );
    }
    let ratio = |fast: &str, slow: &str, n: usize| match (median(fast, n), median(slow, n)) {
        (Some(f), Some(s)) => format!("{:.1}×", s / f),
        _ => "-".to_string(),
    };
    println!(
        "eisner fast vs reference (single-root) at n=128: {}",
        ratio(
            "eisner/fast single-root",
            "eisner/reference single-root",
            128
        )
    );
    for family in ["random", "cyclic"] {
        println!(
            "chu-liu-edmonds fast vs reference (multi-root, {family}) at n=256: {}",
            ratio(
                &format!("chu-liu-edmonds/fast multi-root {family}"),
                &format!("chu-liu-edmonds/reference multi-root {family}"),
                256
            )
        );
    }
    if let (Some(peak), Some(eisner)) = (
        median("max-plus/stream 1024", 1024),
        median("eisner/fast single-root", 512),
    ) {
        let peak_rate = 1024.0 / peak;
        let eisner_rate = eisner_terms(512) / eisner;
        println!(
            "max-plus peak: {:.2} G terms/s; Eisner at n=512: {:.2} G terms/s ({:.0}% of peak)",
            peak_rate / 1e9,
            eisner_rate / 1e9,
            100.0 * eisner_rate / peak_rate
        );
    }
}

fn main() {
    let mut criterion = Criterion::default().configure_from_args();
    benches(&mut criterion);
    criterion.final_summary();
    summary();
}
