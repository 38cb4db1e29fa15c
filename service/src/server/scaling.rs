//! How latency grows with sentence length, measured in production.
//!
//! For each (stage, decoder), an ordinary least-squares fit of ln(duration) against ln(tokens)
//! over a sliding window of the most recent sentences: the slope is the scaling exponent (≈3 for
//! projective decoding, ≈2 for non-projective decoding and arc scoring). Running sums of x, y,
//! x², xy and y² are updated as samples enter and leave the window, so recording is O(1) and a
//! fit is O(1) too.
//!
//! Sentences under 8 tokens are left out: their time is dominated by fixed per-sentence costs
//! (allocation, tagging setup, the call itself), which would flatten the fitted slope and hide the
//! algorithm's growth; from about 8 tokens on the power law holds (see the decoder benchmark).
//! Per length bucket, the most recent durations are kept for quantiles.

use std::collections::{BTreeMap, VecDeque};
use std::sync::{LazyLock, Mutex};

use serde::Serialize;

use super::metrics::STAGES;

/// Sentences kept per (stage, decoder) for the fit.
pub const WINDOW: usize = 4096;
/// Durations kept per (stage, decoder, length bucket) for quantiles.
const BUCKET_WINDOW: usize = 1024;
/// Shortest sentence used in fits.
pub const MIN_TOKENS: usize = 8;

#[derive(Debug, Default)]
struct Series {
    points: VecDeque<(f64, f64)>,
    sx: f64,
    sy: f64,
    sxx: f64,
    sxy: f64,
    syy: f64,
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
        self.add(x, y, 1.0);
        if self.points.len() > WINDOW
            && let Some((ox, oy)) = self.points.pop_front()
        {
            self.add(ox, oy, -1.0);
        }
    }

    fn add(&mut self, x: f64, y: f64, sign: f64) {
        self.sx += sign * x;
        self.sy += sign * y;
        self.sxx += sign * x * x;
        self.sxy += sign * x * y;
        self.syy += sign * y * y;
    }

    fn fit(&self) -> Option<Fit> {
        let n = self.points.len() as f64;
        if self.points.len() < 3 {
            return None;
        }
        let vxx = self.sxx - self.sx * self.sx / n;
        let vxy = self.sxy - self.sx * self.sy / n;
        let vyy = self.syy - self.sy * self.sy / n;
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
    buckets: BTreeMap<(&'static str, &'static str, &'static str), VecDeque<f64>>,
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
        durations.push_back(seconds);
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

    /// JSON for `/v1/scaling`.
    pub fn report(&self) -> serde_json::Value {
        let fits: Vec<serde_json::Value> = self
            .fits()
            .into_iter()
            .map(|(stage, decoder, f)| serde_json::json!({"stage": stage, "decoder": decoder, "exponent": f.exponent, "r_squared": f.r_squared, "samples": f.samples}))
            .collect();
        let buckets: Vec<serde_json::Value> = self
            .buckets
            .iter()
            .map(|((stage, decoder, bucket), durations)| {
                let mut sorted: Vec<f64> = durations.iter().copied().collect();
                sorted.sort_by(f64::total_cmp);
                let q = |p: f64| sorted[((sorted.len() - 1) as f64 * p).round() as usize];
                serde_json::json!({"stage": stage, "decoder": decoder, "length_bucket": bucket, "count": sorted.len(),
                                   "p50_seconds": q(0.5), "p90_seconds": q(0.9), "p99_seconds": q(0.99)})
            })
            .collect();
        serde_json::json!({"window": WINDOW, "min_tokens": MIN_TOKENS, "fits": fits, "buckets": buckets})
    }
}

pub static TRACKER: LazyLock<Mutex<Tracker>> = LazyLock::new(|| Mutex::new(Tracker::default()));

/// Records one sentence's stage durations under one lock (the parsing threads share the tracker).
pub fn record_stages(
    seconds: &[f64; STAGES.len()],
    decoder: &'static str,
    tokens: usize,
    bucket: &'static str,
) {
    if let Ok(mut tracker) = TRACKER.lock() {
        for (stage, &value) in STAGES.iter().zip(seconds) {
            tracker.record(stage, decoder, tokens, bucket, value);
        }
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
        assert_eq!(tracker.report()["buckets"][0]["count"], 1);
    }
}
