//! How latency grows with sentence length, measured in production.
//!
//! For each (stage, decoder), an ordinary least-squares fit of ln(duration) against ln(tokens)
//! over a sliding window of the most recent sentences: the slope is the scaling exponent (≈3 for
//! projective decoding, ≈2 for non-projective decoding and arc scoring). Recording is O(1); each
//! fit is recomputed from the window's samples when asked for (O(window)), so no running sum
//! drifts with rounding however long the process lives.
//!
//! Beside the single exponent, a cost model per (stage, decoder): t(n) = a + l·n + b·n² + c·n³ fitted
//! by non-negative least squares to the length buckets' medians (at each bucket's median length,
//! weighted by its sentence count). Over the lengths real traffic has, fixed and quadratic
//! per-sentence costs weigh as much as the cubic term, so one exponent mixes them; the model
//! separates them, says from which length the cubic term is the larger part, gives the local
//! slope d ln t / d ln n at the traffic's median and 99th-percentile lengths, and predicts the time
//! of any length (`/v1/scaling?tokens=N`) with the model's error on the observed buckets.
//!
//! Sentences under 8 tokens are left out: their time is dominated by fixed per-sentence costs
//! (allocation, tagging setup, the call itself), which would flatten the fitted slope and hide the
//! algorithm's growth; from about 8 tokens on the power law holds (see the decoder benchmark).
//! Per length bucket, the most recent durations are kept for quantiles.

use std::collections::{BTreeMap, VecDeque};
use std::sync::{LazyLock, Mutex};

use serde::Serialize;

use super::metrics::{CPU_STAGE, STAGES};

/// Sentences kept per (stage, decoder) for the fit.
pub const WINDOW: usize = 4096;
/// Durations kept per (stage, decoder, length bucket) for quantiles.
const BUCKET_WINDOW: usize = 1024;
/// Shortest sentence used in fits.
pub const MIN_TOKENS: usize = 8;

/// (tokens, seconds, arrival number) per sentence, oldest first.
type Samples = VecDeque<(usize, f64, u64)>;

#[derive(Debug, Default)]
struct Series {
    /// (ln tokens, ln seconds) of the most recent sentences.
    points: VecDeque<(f64, f64)>,
}

/// A fitted exponent.
#[derive(Debug, Clone, Copy, Serialize, PartialEq)]
pub struct Fit {
    pub exponent: f64,
    pub r_squared: f64,
    pub samples: usize,
}

impl Series {
    fn push(&mut self, x: f64, y: f64) {
        self.points.push_back((x, y));
        if self.points.len() > WINDOW {
            self.points.pop_front();
        }
    }

    /// Least squares from the samples themselves, centred first (two passes), so the result
    /// does not depend on how many samples came and went before.
    fn fit(&self) -> Option<Fit> {
        let n = self.points.len() as f64;
        if self.points.len() < 3 {
            return None;
        }
        let mx = self.points.iter().map(|p| p.0).sum::<f64>() / n;
        let my = self.points.iter().map(|p| p.1).sum::<f64>() / n;
        let (mut vxx, mut vxy, mut vyy) = (0.0, 0.0, 0.0);
        for &(x, y) in &self.points {
            vxx += (x - mx) * (x - mx);
            vxy += (x - mx) * (y - my);
            vyy += (y - my) * (y - my);
        }
        if vxx <= 1e-12 {
            return None; // all sentences the same length: no slope to fit
        }
        let exponent = vxy / vxx;
        let r_squared = if vyy > 1e-18 {
            (vxy * vxy / (vxx * vyy)).clamp(0.0, 1.0)
        } else {
            1.0
        };
        Some(Fit {
            exponent,
            r_squared,
            samples: self.points.len(),
        })
    }
}

/// Series and per-bucket durations, keyed by (stage, decoder). The names are static, so
/// recording allocates nothing.
#[derive(Debug, Default)]
pub struct Tracker {
    series: BTreeMap<(&'static str, &'static str), Series>,
    /// (tokens, seconds, arrival) of the most recent sentences per (stage, decoder, length
    /// bucket).
    buckets: BTreeMap<(&'static str, &'static str, &'static str), Samples>,
    /// Arrival number of the next sample: orders samples of different buckets in time.
    arrivals: u64,
}

impl Tracker {
    pub fn record(
        &mut self,
        stage: &'static str,
        decoder: &'static str,
        tokens: usize,
        bucket: &'static str,
        seconds: f64,
    ) {
        let durations = self.buckets.entry((stage, decoder, bucket)).or_default();
        durations.push_back((tokens, seconds, self.arrivals));
        self.arrivals += 1;
        if durations.len() > BUCKET_WINDOW {
            durations.pop_front();
        }
        if tokens >= MIN_TOKENS && seconds > 0.0 {
            self.series
                .entry((stage, decoder))
                .or_default()
                .push((tokens as f64).ln(), seconds.ln());
        }
    }

    pub fn fits(&self) -> Vec<(String, String, Fit)> {
        self.series
            .iter()
            .filter_map(|((stage, decoder), s)| {
                s.fit().map(|f| (stage.to_string(), decoder.to_string(), f))
            })
            .collect()
    }

    /// JSON for `/v1/scaling`; with `tokens`, also each stage's predicted time for that length
    /// and the model's largest relative error on the observed buckets.
    pub fn report(&self, tokens: Option<usize>) -> serde_json::Value {
        let fits: Vec<serde_json::Value> = self
            .fits()
            .into_iter()
            .map(|(stage, decoder, f)| serde_json::json!({"stage": stage, "decoder": decoder, "exponent": f.exponent, "r_squared": f.r_squared, "samples": f.samples}))
            .collect();
        let buckets: Vec<serde_json::Value> = self
            .buckets
            .iter()
            .map(|((stage, decoder, bucket), durations)| {
                let mut sorted: Vec<f64> = durations.iter().map(|d| d.1).collect();
                sorted.sort_by(f64::total_cmp);
                let q = |p: f64| sorted[((sorted.len() - 1) as f64 * p).round() as usize];
                serde_json::json!({"stage": stage, "decoder": decoder, "length_bucket": bucket, "count": sorted.len(),
                                   "p50_seconds": q(0.5), "p90_seconds": q(0.9), "p99_seconds": q(0.99)})
            })
            .collect();
        let models = self.cost_models();
        let cost_models: Vec<serde_json::Value> = models
            .iter()
            .map(|(stage, decoder, m)| {
                serde_json::json!({"stage": stage, "decoder": decoder, "model": m})
            })
            .collect();
        let mut report = serde_json::json!({"window": WINDOW, "min_tokens": MIN_TOKENS, "fits": fits,
                                            "buckets": buckets, "cost_models": cost_models});
        if let Some(tokens) = tokens {
            let predictions: Vec<serde_json::Value> = models
                .iter()
                .map(|(stage, decoder, m)| {
                    serde_json::json!({"stage": stage, "decoder": decoder, "tokens": tokens,
                                       "seconds": m.seconds(tokens as f64),
                                       "relative_error": m.max_relative_error,
                                       "interpolation_relative_error": m.interpolation_relative_error,
                                       "extrapolation_relative_error": m.extrapolation_relative_error,
                                       "speed_drift": m.speed_drift,
                                       "held_out_relative_error": m.held_out_relative_error(tokens as f64)})
                })
                .collect();
            report["prediction"] =
                serde_json::json!({ "tokens": tokens, "predictions": predictions });
        }
        report
    }

    /// The cost model of every (stage, decoder) with at least two length buckets.
    pub fn cost_models(&self) -> Vec<(&'static str, &'static str, CostModel)> {
        let mut grouped: BTreeMap<(&'static str, &'static str), Vec<&Samples>> = BTreeMap::new();
        for ((stage, decoder, _), samples) in &self.buckets {
            grouped.entry((stage, decoder)).or_default().push(samples);
        }
        grouped
            .into_iter()
            .filter_map(|((stage, decoder), buckets)| {
                let points: Vec<BucketPoint> = buckets
                    .iter()
                    .filter(|b| !b.is_empty())
                    .map(|b| {
                        let mut tokens: Vec<usize> = b.iter().map(|s| s.0).collect();
                        let mut seconds: Vec<f64> = b.iter().map(|s| s.1).collect();
                        tokens.sort_unstable();
                        seconds.sort_by(f64::total_cmp);
                        BucketPoint {
                            tokens: tokens[tokens.len() / 2] as f64,
                            median_seconds: seconds[seconds.len() / 2],
                            count: b.len(),
                        }
                    })
                    .collect();
                let mut lengths: Vec<usize> =
                    buckets.iter().flat_map(|b| b.iter().map(|s| s.0)).collect();
                lengths.sort_unstable();
                let mut model = CostModel::fit(&points, &lengths)?;
                let samples: Vec<(usize, f64, u64)> =
                    buckets.iter().flat_map(|b| b.iter().copied()).collect();
                model.speed_drift = speed_drift(&model, samples);
                Some((stage, decoder, model))
            })
            .collect()
    }
}

/// One length bucket as the cost model sees it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BucketPoint {
    /// Median length of the bucket's sentences.
    pub tokens: f64,
    pub median_seconds: f64,
    pub count: usize,
}

/// t(n) = a + l·n + b·n² + c·n³ with a, l, b, c ≥ 0, and what it says.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CostModel {
    /// Seconds per sentence whatever its length.
    pub a: f64,
    /// Seconds per token (tagging, features and labels are per word).
    pub l: f64,
    /// Seconds per squared token.
    pub b: f64,
    /// Seconds per cubed token.
    pub c: f64,
    /// The shortest length from which c·n³ ≥ a + l·n + b·n² (none when c = 0 or beyond 4096).
    pub cubic_dominates_from: Option<usize>,
    /// Median and 99th-percentile sentence length of the window.
    pub median_tokens: usize,
    pub p99_tokens: usize,
    /// d ln t / d ln n of the model at those lengths.
    pub slope_at_median: f64,
    pub slope_at_p99: f64,
    /// Per bucket: (median tokens, observed median seconds, model seconds, relative error).
    pub buckets: Vec<(f64, f64, f64, f64)>,
    /// The largest |model − observed| / observed over the buckets.
    pub max_relative_error: f64,
    /// How well the model's shape predicts a length it has not seen between the shortest and the
    /// longest bucket: each inner bucket left out in turn, the model refitted on the others, and
    /// that bucket predicted; the largest |model − observed| / observed (none with fewer than
    /// three buckets).
    pub interpolation_relative_error: Option<f64>,
    /// The same for the two end buckets, each predicted from the others: what to expect of a
    /// length beyond the traffic's range.
    pub extrapolation_relative_error: Option<f64>,
    /// How far this replica's speed moved over the window, the same work measured at different
    /// times: see [`speed_drift`] (none with too few samples).
    pub speed_drift: Option<f64>,
}

impl CostModel {
    /// The largest |ln(model / observed)| over the buckets (0 when there are none).
    pub fn max_log_error(&self) -> f64 {
        self.buckets
            .iter()
            .filter(|b| b.1 > 0.0 && b.2 > 0.0)
            .map(|b| (b.2 / b.1).ln().abs())
            .fold(0.0, f64::max)
    }

    /// The shortest and the longest bucket's median length.
    pub fn length_range(&self) -> (f64, f64) {
        self.buckets
            .iter()
            .fold((f64::MAX, f64::MIN), |(lo, hi), b| {
                (lo.min(b.0), hi.max(b.0))
            })
    }

    /// The stated error of a prediction for `n` tokens measured later: the leave-one-bucket-out
    /// error that applies (interpolation within the buckets' lengths, extrapolation beyond)
    /// compounded with the speed drift, (1 + e)·(1 + drift) − 1.
    pub fn held_out_relative_error(&self, n: f64) -> Option<f64> {
        let (shortest, longest) = self.length_range();
        let shape = if (shortest..=longest).contains(&n) {
            self.interpolation_relative_error
        } else {
            self.extrapolation_relative_error
        }?;
        Some((1.0 + shape) * (1.0 + self.speed_drift.unwrap_or(0.0)) - 1.0)
    }

    pub fn seconds(&self, n: f64) -> f64 {
        self.a + self.l * n + self.b * n * n + self.c * n * n * n
    }

    /// d ln t / d ln n = (l·n + 2b·n² + 3c·n³) / t(n).
    pub fn slope(&self, n: f64) -> f64 {
        let t = self.seconds(n);
        if t <= 0.0 {
            return 0.0;
        }
        (self.l * n + 2.0 * self.b * n * n + 3.0 * self.c * n * n * n) / t
    }

    /// Fits the model to bucket medians (weighted by counts); `None` with fewer than two
    /// buckets.
    pub fn fit(points: &[BucketPoint], sorted_lengths: &[usize]) -> Option<CostModel> {
        if points.len() < 2 || sorted_lengths.is_empty() {
            return None;
        }
        let [a, l, b, c] = nnls(points);
        let mut model = CostModel {
            a,
            l,
            b,
            c,
            cubic_dominates_from: None,
            median_tokens: sorted_lengths[sorted_lengths.len() / 2],
            p99_tokens: sorted_lengths[((sorted_lengths.len() - 1) as f64 * 0.99).round() as usize],
            slope_at_median: 0.0,
            slope_at_p99: 0.0,
            buckets: Vec::new(),
            max_relative_error: 0.0,
            interpolation_relative_error: None,
            extrapolation_relative_error: None,
            speed_drift: None,
        };
        model.cubic_dominates_from = (c > 0.0)
            .then(|| {
                (1..=4096).find(|&n| {
                    let n = n as f64;
                    c * n * n * n >= a + l * n + b * n * n
                })
            })
            .flatten();
        model.slope_at_median = model.slope(model.median_tokens as f64);
        model.slope_at_p99 = model.slope(model.p99_tokens as f64);
        model.buckets = points
            .iter()
            .map(|p| {
                let predicted = model.seconds(p.tokens);
                let error = (predicted - p.median_seconds) / p.median_seconds.max(1e-12);
                (p.tokens, p.median_seconds, predicted, error)
            })
            .collect();
        model.max_relative_error = model.buckets.iter().map(|b| b.3.abs()).fold(0.0, f64::max);
        if points.len() >= 3 {
            let held_out = |k: usize| {
                let rest: Vec<BucketPoint> = points
                    .iter()
                    .enumerate()
                    .filter(|&(i, _)| i != k)
                    .map(|(_, p)| *p)
                    .collect();
                let [a, l, b, c] = nnls(&rest);
                let n = points[k].tokens;
                let predicted = a + l * n + b * n * n + c * n * n * n;
                (predicted - points[k].median_seconds).abs() / points[k].median_seconds.max(1e-12)
            };
            let (shortest, longest) = model.length_range();
            let (mut inner, mut outer) = (None::<f64>, None::<f64>);
            for (k, p) in points.iter().enumerate() {
                let side = if p.tokens <= shortest || p.tokens >= longest {
                    &mut outer
                } else {
                    &mut inner
                };
                *side = Some(side.unwrap_or(0.0).max(held_out(k)));
            }
            model.interpolation_relative_error = inner;
            model.extrapolation_relative_error = outer;
        }
        Some(model)
    }
}

/// Samples per time segment of [`speed_drift`] at least, and segments at most.
const DRIFT_SEGMENT: usize = 64;
const DRIFT_SEGMENTS: usize = 8;

/// How much the replica's speed moved over the window: every sample's residual
/// ln(observed / model(n)) takes the sentence's length out, the samples are cut in arrival order
/// into up to eight segments of at least 64, and the spread of the segments' median residuals,
/// e^(max − min) − 1, is the drift. It includes the sampling noise of a median of that many
/// sentences, which a bucket measured later has too. `None` with fewer than two segments.
pub fn speed_drift(model: &CostModel, mut samples: Vec<(usize, f64, u64)>) -> Option<f64> {
    samples.retain(|s| s.1 > 0.0 && model.seconds(s.0 as f64) > 0.0);
    let segments = (samples.len() / DRIFT_SEGMENT).min(DRIFT_SEGMENTS);
    if segments < 2 {
        return None;
    }
    samples.sort_unstable_by_key(|s| s.2);
    let residuals: Vec<f64> = samples
        .iter()
        .map(|s| (s.1 / model.seconds(s.0 as f64)).ln())
        .collect();
    let medians = (0..segments).map(|k| {
        let mut part = residuals
            [k * residuals.len() / segments..(k + 1) * residuals.len() / segments]
            .to_vec();
        part.sort_by(f64::total_cmp);
        part[part.len() / 2]
    });
    let (low, high) = medians.fold((f64::MAX, f64::MIN), |(lo, hi), m| (lo.min(m), hi.max(m)));
    Some((high - low).exp() - 1.0)
}

/// Terms of the cost model: 1, n, n², n³.
const TERMS: usize = 4;

/// Non-negative least squares for t ≈ a + l·n + b·n² + c·n³, weighted by counts: the solution
/// of a convex problem is the unconstrained least-squares solution on its support, so every
/// support (15 non-empty subsets of four terms) is solved and the best feasible one kept.
/// Lengths are scaled by 1/100 inside, so the normal equations stay well conditioned. Returns
/// [a, l, b, c].
pub fn nnls(points: &[BucketPoint]) -> [f64; TERMS] {
    const SCALE: f64 = 100.0;
    let basis = |n: f64| {
        let x = n / SCALE;
        [1.0, x, x * x, x * x * x]
    };
    let mut best: Option<(f64, [f64; TERMS])> = None;
    for support in 1u32..(1 << TERMS) {
        let terms: Vec<usize> = (0..TERMS).filter(|k| support & (1 << k) != 0).collect();
        let k = terms.len();
        // Normal equations on the support: (XᵀWX) β = XᵀWy.
        let mut matrix = [[0.0f64; TERMS + 1]; TERMS];
        for p in points {
            let row = basis(p.tokens);
            let w = p.count as f64;
            for (i, &ti) in terms.iter().enumerate() {
                for (j, &tj) in terms.iter().enumerate() {
                    matrix[i][j] += w * row[ti] * row[tj];
                }
                matrix[i][TERMS] += w * row[ti] * p.median_seconds;
            }
        }
        let Some(solution) = solve(&mut matrix, k) else {
            continue;
        };
        if solution[..k].iter().any(|&v| v < 0.0) {
            continue;
        }
        let mut beta = [0.0; TERMS];
        for (i, &t) in terms.iter().enumerate() {
            beta[t] = solution[i];
        }
        let error: f64 = points
            .iter()
            .map(|p| {
                let row = basis(p.tokens);
                let fitted: f64 = row.iter().zip(&beta).map(|(x, b)| x * b).sum();
                let r = fitted - p.median_seconds;
                p.count as f64 * r * r
            })
            .sum();
        if best.is_none_or(|(e, _)| error < e) {
            best = Some((error, beta));
        }
    }
    let beta = best.map_or([0.0; TERMS], |(_, b)| b);
    [
        beta[0],
        beta[1] / SCALE,
        beta[2] / (SCALE * SCALE),
        beta[3] / (SCALE * SCALE * SCALE),
    ]
}

/// Gaussian elimination with partial pivoting on the first k rows and columns, the right-hand
/// side in the last column.
fn solve(m: &mut [[f64; TERMS + 1]; TERMS], k: usize) -> Option<[f64; TERMS]> {
    for col in 0..k {
        let pivot = (col..k).max_by(|&i, &j| m[i][col].abs().total_cmp(&m[j][col].abs()))?;
        if m[pivot][col].abs() < 1e-300 {
            return None;
        }
        m.swap(col, pivot);
        for row in col + 1..k {
            let f = m[row][col] / m[col][col];
            for c in (col..k).chain(std::iter::once(TERMS)) {
                m[row][c] -= f * m[col][c];
            }
        }
    }
    let mut x = [0.0; TERMS];
    for row in (0..k).rev() {
        let mut v = m[row][TERMS];
        for c in row + 1..k {
            v -= m[row][c] * x[c];
        }
        x[row] = v / m[row][row];
    }
    x.iter().take(k).all(|v| v.is_finite()).then_some(x)
}

pub static TRACKER: LazyLock<Mutex<Tracker>> = LazyLock::new(|| Mutex::new(Tracker::default()));

/// Records one sentence's stage durations and CPU seconds under one lock (the parsing threads
/// share the tracker).
pub fn record_stages(
    seconds: &[f64; STAGES.len()],
    cpu_seconds: f64,
    decoder: &'static str,
    tokens: usize,
    bucket: &'static str,
) {
    if let Ok(mut tracker) = TRACKER.lock() {
        for (stage, &value) in STAGES.iter().zip(seconds) {
            tracker.record(stage, decoder, tokens, bucket, value);
        }
        tracker.record(CPU_STAGE, decoder, tokens, bucket, cpu_seconds);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Synthetic durations t = c·n^k with known k (and a little multiplicative noise) must give
    /// back k; the window forgets old samples.
    #[test]
    fn the_fit_recovers_known_exponents() {
        for k in [1.0, 2.0, 3.0] {
            let mut tracker = Tracker::default();
            let mut noise = 0.37f64;
            for i in 0..2000 {
                let n = 8 + (i * 37) % 249;
                noise = (noise * 3.9 * (1.0 - noise)).clamp(0.01, 0.99); // deterministic jitter
                let t = 1e-7 * (n as f64).powf(k) * (1.0 + 0.05 * (noise - 0.5));
                tracker.record("decode", "projective", n, "x", t);
            }
            let (_, _, fit) = tracker.fits()[0];
            assert!((fit.exponent - k).abs() < 0.02, "k={k}: {fit:?}");
            assert!(fit.r_squared > 0.99);
            assert_eq!(fit.samples, 2000);
        }
        let mut tracker = Tracker::default();
        for i in 0..(WINDOW + 500) {
            let n = 8 + i % 100;
            let k = if i < 500 { 1.0 } else { 2.0 }; // the old regime leaves the window
            tracker.record("score", "projective", n, "x", (n as f64).powf(k) * 1e-6);
        }
        let (_, _, fit) = tracker.fits()[0];
        assert!(
            (fit.exponent - 2.0).abs() < 1e-6 && fit.samples == WINDOW,
            "{fit:?}"
        );
        // Short sentences are not fitted.
        let mut tracker = Tracker::default();
        tracker.record("decode", "projective", 5, "8", 1e-6);
        assert!(tracker.fits().is_empty());
        assert_eq!(tracker.report(None)["buckets"][0]["count"], 1);
    }
}

#[cfg(test)]
mod cost_model_tests {
    use super::*;

    fn points(f: impl Fn(f64) -> f64) -> Vec<BucketPoint> {
        [6.0, 12.0, 24.0, 48.0, 96.0, 192.0, 384.0]
            .iter()
            .map(|&n| BucketPoint {
                tokens: n,
                median_seconds: f(n),
                count: 10,
            })
            .collect()
    }

    /// Exact data of a known model give its coefficients back, and what the model says follows
    /// from them (worked by hand: a = 1e-5, l = 1e-8, b = c = 1e-9 → c·n³ ≥ a + l·n + b·n² from
    /// n = 22: 22³·1e-9 = 1.0648e-5 ≥ 1e-5 + 22e-8 + 484e-9 = 1.0704e-5 fails, so from 23:
    /// 23³·1e-9 = 1.2167e-5 ≥ 1e-5 + 23e-8 + 529e-9 = 1.0759e-5).
    #[test]
    fn known_coefficients_are_recovered() {
        let truth = |n: f64| 1e-5 + 1e-8 * n + 1e-9 * n * n + 1e-9 * n * n * n;
        let [a, l, b, c] = nnls(&points(truth));
        assert!(
            (a - 1e-5).abs() < 1e-12 && (l - 1e-8).abs() < 1e-13,
            "{a} {l}"
        );
        assert!(
            (b - 1e-9).abs() < 1e-15 && (c - 1e-9).abs() < 1e-16,
            "{b} {c}"
        );
        let lengths: Vec<usize> = (6..=384).collect();
        let m = CostModel::fit(&points(truth), &lengths).expect("fit");
        assert_eq!(m.cubic_dominates_from, Some(23));
        assert!(m.max_relative_error < 1e-9);
        // Exact data: every bucket left out is predicted exactly by the others.
        assert!(m.interpolation_relative_error.is_some_and(|e| e < 1e-6));
        assert!(m.extrapolation_relative_error.is_some_and(|e| e < 1e-6));
        // Local slope at n: (l n + 2b n² + 3c n³) / t(n).
        let n = 195.0;
        let expected = (1e-8 * n + 2e-9 * n * n + 3e-9 * n * n * n) / truth(n);
        assert!((m.slope(n) - expected).abs() < 1e-12);
        assert_eq!(m.median_tokens, 195);
    }

    /// The drift is the spread of the segments' median residuals: none at a steady speed, e^0.2
    /// − 1 when the second half of the window ran 20% (in log) slower, whatever the lengths;
    /// the stated held-out error compounds it with the leave-one-out error.
    #[test]
    fn speed_drift_sees_the_machine_slow_down() {
        let truth = |n: f64| 1e-5 + 1e-8 * n + 1e-9 * n * n + 1e-9 * n * n * n;
        let steady = |slow: f64| {
            let mut tracker = Tracker::default();
            for i in 0..1024 {
                let n = 6 + (i * 37) % 120;
                let bucket = ["16", "32", "64", "128"]
                    [(n > 16) as usize + (n > 32) as usize + (n > 64) as usize];
                let factor = if i >= 512 { slow } else { 1.0 };
                tracker.record("total", "projective", n, bucket, truth(n as f64) * factor);
            }
            tracker.cost_models().remove(0).2
        };
        let m = steady(1.0);
        assert!(m.speed_drift.is_some_and(|d| d.abs() < 1e-9), "{m:?}");
        let (stated, inner) = (
            m.held_out_relative_error(50.0),
            m.interpolation_relative_error,
        );
        assert!(
            stated.zip(inner).is_some_and(|(s, i)| (s - i).abs() < 1e-9),
            "{m:?}"
        );
        let m = steady(0.2f64.exp());
        let drift = m.speed_drift.expect("drift");
        assert!((drift - (0.2f64.exp() - 1.0)).abs() < 0.02, "{drift}");
        // Within the buckets' lengths the interpolation error applies, beyond them the
        // extrapolation error.
        let inner = m.interpolation_relative_error.expect("interpolation");
        let outer = m.extrapolation_relative_error.expect("extrapolation");
        let stated = m.held_out_relative_error(50.0).expect("stated");
        assert!((stated - ((1.0 + inner) * (1.0 + drift) - 1.0)).abs() < 1e-12);
        let beyond = m.held_out_relative_error(500.0).expect("stated");
        assert!((beyond - ((1.0 + outer) * (1.0 + drift) - 1.0)).abs() < 1e-12);
        // Too few samples for two segments: no drift stated.
        assert_eq!(speed_drift(&m, vec![(10, 1e-3, 0); 100]), None);
    }

    /// Where the unconstrained fit would make a coefficient negative, NNLS sets it to zero; the
    /// result matches a brute-force search over a fine grid of non-negative coefficients.
    #[test]
    fn negative_terms_are_clipped_like_brute_force() {
        // Convex data with a dip the n² term would fit with a negative sign.
        let data =
            points(|n| 2e-6 + 3e-10 * n * n * n - 1e-9 * n * n + 1e-6 * (n / 50.0).sin().abs());
        let [a, l, b, c] = nnls(&data);
        assert!(a >= 0.0 && l >= 0.0 && b >= 0.0 && c >= 0.0);
        let error = |a: f64, l: f64, b: f64, c: f64| -> f64 {
            data.iter()
                .map(|p| {
                    let n = p.tokens;
                    let r = a + l * n + b * n * n + c * n.powi(3) - p.median_seconds;
                    p.count as f64 * r * r
                })
                .sum()
        };
        let ours = error(a, l, b, c);
        let mut brute = f64::MAX;
        for i in 0..=30 {
            for h in 0..=30 {
                for j in 0..=30 {
                    for k in 0..=30 {
                        let (ga, gl, gb, gc) = (
                            f64::from(i) * 2e-7,
                            f64::from(h) * 5e-9,
                            f64::from(j) * 1e-10,
                            f64::from(k) * 2e-11,
                        );
                        brute = brute.min(error(ga, gl, gb, gc));
                    }
                }
            }
        }
        assert!(ours <= brute * (1.0 + 1e-9), "nnls {ours} vs grid {brute}");
    }
}
