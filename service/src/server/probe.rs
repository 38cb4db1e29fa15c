//! The decoder probe: each replica times its own decoders on synthetic sentences, so that the
//! growth of decoding time with length can be confirmed whatever lengths the traffic has.
//!
//! Traffic alone cannot confirm cubic decoding: over the 10–60 tokens real sentences have,
//! fixed and quadratic costs weigh as much as the cubic term, and the length mix decides what a
//! fit over traffic sees. The probe decodes seeded random score matrices at 32 … 512 words with
//! both decoders, at start and then every `interval`, and fits each decoder's exponent over the
//! lengths where its leading term dominates (measured: docs/decisions/decoder-probe.md).
//!
//! It runs on a thread of its own in the kernel's idle scheduling class (`SCHED_IDLE`): it gets a
//! core only when no parsing thread (or anything else) wants it, and the kernel takes the core
//! back as soon as one does, so a request never waits for a probe decode to finish, as it
//! would if the probe ran as a task on a parsing thread. Each decode is timed by the thread's
//! own CPU clock, which does not advance while the probe is preempted; the minimum over a few
//! repetitions is kept.

use std::sync::{LazyLock, Mutex};
use std::time::{Duration, Instant};

use arcwright_parser::decode::{self, Algorithm, RootConstraint, ScoreMatrix, reference};
use arcwright_parser::hashing::SplitMix64;
use serde::Serialize;

use super::cpu_clock::{become_idle_class, thread_seconds};

/// Sentence lengths decoded by the probe.
pub const LENGTHS: [usize; 5] = [32, 64, 128, 256, 512];
/// Decodes per length and decoder; the fastest counts.
pub const REPEATS: usize = 3;

/// What a decoder is expected to show: its order, the shortest length fitted, the band a fitted
/// exponent must fall in, how many seeded matrices are timed per length, and how much faster
/// than the textbook version it must be at `speedup_tokens` words. Chosen from measurements
/// on 2-core virtual machines (docs/decisions/decoder-probe.md): Eisner's time hardly depends on
/// the scores, and its O(n²) part weighs little from 128 words on; Chu-Liu-Edmonds' time depends
/// on how many cycles the scores make, so it is averaged over more matrices, and its fixed
/// per-word costs still show below 64 words.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Expectation {
    pub order: f64,
    pub fitted_from: usize,
    pub band: [f64; 2],
    pub instances: usize,
    pub speedup_tokens: usize,
    pub minimum_speedup: f64,
}

pub fn expectation(decoder: Algorithm) -> Expectation {
    match decoder {
        Algorithm::Projective => Expectation {
            order: 3.0,
            fitted_from: 128,
            band: [2.6, 3.4],
            instances: 2,
            speedup_tokens: 128,
            minimum_speedup: 2.0,
        },
        Algorithm::NonProjective => Expectation {
            order: 2.0,
            fitted_from: 64,
            band: [1.6, 2.4],
            instances: 8,
            speedup_tokens: 256,
            minimum_speedup: 2.0,
        },
    }
}

/// How the probe runs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ProbeSettings {
    /// Time between runs (the first runs at start); zero turns the probe off.
    pub interval: Duration,
    /// For tests of the alerting path only: the textbook decoder, run ⌈n / 128⌉ times per matrix,
    /// stands in for the shipped one: a build one order slower and no faster than the textbook
    /// loops (the verdict must flip).
    pub slowed: bool,
}

/// One length's time.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Point {
    pub tokens: usize,
    /// The fastest decode's CPU time on the probe thread.
    pub cpu_seconds: f64,
    /// The same decode's wall time (longer when the probe was preempted).
    pub wall_seconds: f64,
}

/// One decoder's result.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DecoderResult {
    pub decoder: &'static str,
    pub expected: Expectation,
    /// Least-squares slope of ln(CPU seconds) against ln(tokens) over the lengths from
    /// `expected.fitted_from` on.
    pub exponent: f64,
    /// The textbook version's time over the shipped one's at `expected.speedup_tokens` words.
    pub speedup_over_textbook: f64,
    /// Whether the exponent lies in the expected band and the speedup reaches its minimum.
    pub consistent: bool,
    pub points: Vec<Point>,
}

/// One run of the probe over both decoders.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Run {
    pub decoders: Vec<DecoderResult>,
    /// CPU time the run took on the probe thread.
    pub cpu_seconds: f64,
    /// Unix time the run finished.
    pub finished_unix_seconds: f64,
    pub slowed: bool,
}

/// The probe's state, as `/v1/scaling` and the metrics show it.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Status {
    /// Seconds between runs; 0 when the probe is off.
    pub interval_seconds: f64,
    pub runs: u64,
    /// CPU time of all runs so far, and its share of one core since the probe started.
    pub cpu_seconds_total: f64,
    pub cpu_share_of_one_core: f64,
    pub last: Option<Run>,
}

pub static STATUS: LazyLock<Mutex<Status>> = LazyLock::new(|| Mutex::new(Status::default()));

/// A seeded random score matrix of `words` words (uniform in [−5, 5)).
pub fn synthetic_scores(words: usize, seed: u64) -> ScoreMatrix {
    let mut rng = SplitMix64::new(seed ^ words as u64);
    let side = words + 1;
    let values = (0..side * side)
        .map(|_| 10.0 * rng.next_f64() - 5.0)
        .collect();
    ScoreMatrix::from_row_major(words, values).expect("finite scores")
}

/// Least-squares slope of ln y against ln x.
pub fn log_log_slope(points: &[(f64, f64)]) -> f64 {
    let n = points.len() as f64;
    if points.len() < 2 {
        return f64::NAN;
    }
    let (xs, ys): (Vec<f64>, Vec<f64>) = points.iter().map(|&(x, y)| (x.ln(), y.ln())).unzip();
    let mx = xs.iter().sum::<f64>() / n;
    let my = ys.iter().sum::<f64>() / n;
    let sxy: f64 = xs.iter().zip(&ys).map(|(x, y)| (x - mx) * (y - my)).sum();
    let sxx: f64 = xs.iter().map(|x| (x - mx) * (x - mx)).sum();
    sxy / sxx
}

/// The mean over `instances` seeded matrices of `words` words of the fastest of [`REPEATS`]
/// runs of `decode` on each, timed by the thread's CPU clock.
fn time_decodes(words: usize, instances: usize, decode: &dyn Fn(&ScoreMatrix)) -> Point {
    let mut total = Point {
        tokens: words,
        cpu_seconds: 0.0,
        wall_seconds: 0.0,
    };
    for instance in 0..instances {
        let scores = synthetic_scores(words, 0x0a7c_5eed + instance as u64);
        let mut best: Option<(f64, f64)> = None;
        for _ in 0..REPEATS {
            let (cpu, wall) = (thread_seconds(), Instant::now());
            decode(std::hint::black_box(&scores));
            let time = (thread_seconds() - cpu, wall.elapsed().as_secs_f64());
            if best.is_none_or(|b| time.0 < b.0) {
                best = Some(time);
            }
        }
        let (cpu, wall) = best.unwrap_or_default();
        total.cpu_seconds += cpu / instances as f64;
        total.wall_seconds += wall / instances as f64;
    }
    total
}

/// The textbook version of a decoder (`decode::reference`): Eisner's chart with stored
/// back-pointers, single-root; Chu-Liu-Edmonds by repeated contraction, multi-root (its
/// single-root form tries every root child, one order more, which would make the comparison
/// say nothing about the contraction).
fn textbook(decoder: Algorithm, scores: &ScoreMatrix) -> Vec<usize> {
    match decoder {
        Algorithm::Projective => reference::eisner(scores, RootConstraint::SingleRoot),
        Algorithm::NonProjective => reference::chu_liu_edmonds(scores, RootConstraint::MultiRoot),
    }
}

/// Times one decoder over [`LENGTHS`] and against its textbook version, and judges it.
pub fn probe_decoder(decoder: Algorithm, slowed: bool) -> DecoderResult {
    let expected = expectation(decoder);
    let shipped = |scores: &ScoreMatrix| {
        if slowed {
            for _ in 0..scores.words().div_ceil(128) {
                std::hint::black_box(textbook(decoder, scores));
            }
        } else {
            std::hint::black_box(decode::decode(scores, decoder, RootConstraint::SingleRoot));
        }
    };
    let points: Vec<Point> = LENGTHS
        .iter()
        .map(|&words| time_decodes(words, expected.instances, &shipped))
        .collect();
    let fitted: Vec<(f64, f64)> = points
        .iter()
        .filter(|p| p.tokens >= expected.fitted_from && p.cpu_seconds > 0.0)
        .map(|p| (p.tokens as f64, p.cpu_seconds))
        .collect();
    let exponent = log_log_slope(&fitted);
    let reference = time_decodes(expected.speedup_tokens, expected.instances, &|scores| {
        std::hint::black_box(textbook(decoder, scores));
    });
    let at_speedup_length = points
        .iter()
        .find(|p| p.tokens == expected.speedup_tokens)
        .map_or(f64::NAN, |p| p.cpu_seconds);
    let speedup_over_textbook = reference.cpu_seconds / at_speedup_length;
    DecoderResult {
        decoder: decoder.name(),
        expected,
        exponent,
        speedup_over_textbook,
        consistent: (expected.band[0]..=expected.band[1]).contains(&exponent)
            && speedup_over_textbook >= expected.minimum_speedup,
        points,
    }
}

/// One run over both decoders.
pub fn run_once(slowed: bool) -> Run {
    let cpu = thread_seconds();
    let decoders = [Algorithm::Projective, Algorithm::NonProjective]
        .into_iter()
        .map(|d| probe_decoder(d, slowed))
        .collect();
    Run {
        decoders,
        cpu_seconds: thread_seconds() - cpu,
        finished_unix_seconds: std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0.0, |d| d.as_secs_f64()),
        slowed,
    }
}

/// Starts the probe thread (nothing when the interval is zero). The thread lives as long as the
/// process.
pub fn start(settings: ProbeSettings) -> std::io::Result<()> {
    if settings.interval.is_zero() {
        return Ok(());
    }
    if let Ok(mut status) = STATUS.lock() {
        status.interval_seconds = settings.interval.as_secs_f64();
    }
    std::thread::Builder::new()
        .name("decoder-probe".to_string())
        .spawn(move || {
            if !become_idle_class() {
                tracing::warn!(
                    "decoder probe: cannot enter the idle scheduling class; it runs at normal priority"
                );
            }
            let started = Instant::now();
            loop {
                let run = run_once(settings.slowed);
                for d in &run.decoders {
                    tracing::info!(
                        decoder = d.decoder,
                        exponent = d.exponent,
                        consistent = d.consistent,
                        cpu_seconds = run.cpu_seconds,
                        "decoder probe"
                    );
                }
                super::metrics::record_probe(&run);
                if let Ok(mut status) = STATUS.lock() {
                    status.runs += 1;
                    status.cpu_seconds_total += run.cpu_seconds;
                    status.cpu_share_of_one_core = status.cpu_seconds_total
                        / (started.elapsed() + settings.interval).as_secs_f64();
                    status.last = Some(run);
                }
                std::thread::sleep(settings.interval);
            }
        })
        .map(|_| ())
}

/// The probe's state as JSON.
pub fn report() -> serde_json::Value {
    STATUS
        .lock()
        .map(|s| serde_json::to_value(&*s).unwrap_or_default())
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked by hand: y = 3·x² gives slope 2 whatever the points.
    #[test]
    fn the_slope_of_a_power_law_is_its_exponent() {
        let points: Vec<(f64, f64)> = [4.0, 9.0, 100.0]
            .iter()
            .map(|&x: &f64| (x, 3.0 * x.powi(2)))
            .collect();
        assert!((log_log_slope(&points) - 2.0).abs() < 1e-12);
        assert!(log_log_slope(&points[..1]).is_nan());
    }

    #[test]
    fn synthetic_scores_are_seeded() {
        let a = synthetic_scores(16, 1);
        assert_eq!(a, synthetic_scores(16, 1));
        assert_ne!(a, synthetic_scores(16, 2));
        assert_eq!(a.words(), 16);
    }

    /// The expected bands exclude the next order up and down: a quadratic decoder cannot pass
    /// for a cubic one, nor a quartic for either.
    #[test]
    fn the_bands_tell_the_orders_apart() {
        for decoder in [Algorithm::Projective, Algorithm::NonProjective] {
            let e = expectation(decoder);
            assert!(e.band[0] > e.order - 1.0 && e.band[1] < e.order + 1.0);
            assert!((e.band[0]..=e.band[1]).contains(&e.order));
            assert!(LENGTHS.iter().filter(|&&n| n >= e.fitted_from).count() >= 3);
            assert!(LENGTHS.contains(&e.speedup_tokens) && e.minimum_speedup > 1.0);
        }
    }
}
