//! Calibrated confidences: the expected calibration error of arc marginals, and temperature
//! scaling (Guo, Pleiss, Sun & Weinberger 2017, "On Calibration of Modern Neural Networks").
//!
//! A model's confidence in an arc is its marginal probability under the model's distribution
//! over trees, P(tree) ∝ exp(score(tree) / T). A linear model trained with perceptron updates
//! has scores on an arbitrary scale — large margins make nearly every marginal 1.000 — so one
//! temperature T is fitted on held-out data to minimise the negative log-likelihood of the gold
//! heads' marginals, and stored with the model. T does not change any decoded tree (dividing
//! every arc score by the same positive number keeps the argmax).

use crate::decode::{self, Algorithm, Heads, RootConstraint, ScoreMatrix};
use crate::marginals;

/// One temperature per decoder: the projective decoder's distribution (inside-outside over
/// projective trees) is more peaked than the non-projective one (Matrix-Tree over all trees) for
/// the same scores, so each is fitted on its own.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Temperatures {
    pub projective: f64,
    #[serde(rename = "non-projective")]
    pub non_projective: f64,
}

impl Default for Temperatures {
    fn default() -> Self {
        Temperatures {
            projective: 1.0,
            non_projective: 1.0,
        }
    }
}

impl Temperatures {
    pub fn get(&self, decoder: Algorithm) -> f64 {
        match decoder {
            Algorithm::Projective => self.projective,
            Algorithm::NonProjective => self.non_projective,
        }
    }

    /// Whether both are positive finite numbers.
    pub fn valid(&self) -> bool {
        [self.projective, self.non_projective]
            .iter()
            .all(|t| t.is_finite() && *t > 0.0)
    }
}

/// Number of equal-width confidence bins for the expected calibration error (Guo et al. 2017
/// use 15; the trade's common choice for reporting is 10).
pub const BINS: usize = 10;

/// One confidence bin `(lower, upper]` (the first also takes 0).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Bin {
    pub lower: f64,
    pub upper: f64,
    pub count: usize,
    /// Mean confidence of the arcs in the bin (0 when empty).
    pub confidence: f64,
    /// Share of the arcs in the bin that are right (0 when empty).
    pub accuracy: f64,
}

/// Calibration of a set of (confidence, right) pairs.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Calibration {
    /// Σ_b (n_b / N) · |accuracy_b − confidence_b|.
    pub expected_calibration_error: f64,
    /// The largest |accuracy_b − confidence_b| over non-empty bins.
    pub maximum_calibration_error: f64,
    pub arcs: usize,
    pub mean_confidence: f64,
    pub accuracy: f64,
    pub bins: Vec<Bin>,
}

/// Expected calibration error over `bins` equal-width bins of confidence.
pub fn calibration(pairs: &[(f64, bool)], bins: usize) -> Calibration {
    let bins = bins.max(1);
    let mut count = vec![0usize; bins];
    let mut confidence = vec![0f64; bins];
    let mut right = vec![0usize; bins];
    for &(p, ok) in pairs {
        let p = p.clamp(0.0, 1.0);
        // (i/M, (i+1)/M], with 0 in the first bin.
        let b = ((p * bins as f64).ceil() as usize)
            .saturating_sub(1)
            .min(bins - 1);
        count[b] += 1;
        confidence[b] += p;
        right[b] += usize::from(ok);
    }
    let total = pairs.len();
    let mut ece = 0.0;
    let mut mce: f64 = 0.0;
    let bins_out = (0..bins)
        .map(|b| {
            let n = count[b];
            let (conf, acc) = if n == 0 {
                (0.0, 0.0)
            } else {
                (confidence[b] / n as f64, right[b] as f64 / n as f64)
            };
            if n > 0 {
                ece += n as f64 / total as f64 * (acc - conf).abs();
                mce = mce.max((acc - conf).abs());
            }
            Bin {
                lower: b as f64 / bins as f64,
                upper: (b + 1) as f64 / bins as f64,
                count: n,
                confidence: conf,
                accuracy: acc,
            }
        })
        .collect();
    let mean =
        |f: &dyn Fn(&(f64, bool)) -> f64| pairs.iter().map(f).sum::<f64>() / total.max(1) as f64;
    Calibration {
        expected_calibration_error: ece,
        maximum_calibration_error: mce,
        arcs: total,
        mean_confidence: mean(&|p| p.0.clamp(0.0, 1.0)),
        accuracy: mean(&|p| f64::from(u8::from(p.1))),
        bins: bins_out,
    }
}

/// A sentence for fitting: the model's arc scores and the gold heads (`heads[0]` unused).
#[derive(Debug, Clone)]
pub struct Held {
    pub scores: ScoreMatrix,
    pub heads: Vec<usize>,
}

/// Mean binary log-loss of the chosen arcs at temperature `t`: for each word, the marginal p of
/// the head the decoder chose, scored −ln p when that head is the gold one and −ln(1 − p) when
/// not. This is a proper scoring rule of exactly what the expected calibration error measures
/// (the chosen heads' confidences against their correctness); the likelihood of the gold heads,
/// which the first fits minimised, is also pulled by how little mass gold heads the decoder
/// missed receive, and left a neural model under-confident in its middle bins (measured in
/// docs/decisions/confidence-temperature.md). Computed on `threads` threads; the sum is taken in
/// sentence order, so the result does not depend on the thread count.
pub fn chosen_arc_log_loss(held: &[Held], decoder: Algorithm, t: f64, threads: usize) -> f64 {
    let sentence_loss = |(h, chosen): &(&Held, Heads)| -> f64 {
        let scaled = h.scores.scaled(1.0 / t);
        let p = marginals::marginals(&scaled, decoder, RootConstraint::SingleRoot);
        chosen
            .arcs()
            .map(|(m, head)| {
                let q = p.probability(head, m).clamp(1e-12, 1.0 - 1e-12);
                if head == h.heads[m] {
                    -q.ln()
                } else {
                    -(1.0 - q).ln()
                }
            })
            .sum()
    };
    // The tree does not depend on the temperature: decode once.
    let decoded: Vec<(&Held, Heads)> = held
        .iter()
        .map(|h| {
            let tree = decode::decode(&h.scores, decoder, RootConstraint::SingleRoot);
            (h, tree.heads)
        })
        .collect();
    let threads = threads.clamp(1, held.len().max(1));
    let mut per_sentence = vec![0.0; held.len()];
    let chunk = held.len().div_ceil(threads).max(1);
    std::thread::scope(|scope| {
        for (sentences, out) in decoded.chunks(chunk).zip(per_sentence.chunks_mut(chunk)) {
            scope.spawn(move || {
                for (h, slot) in sentences.iter().zip(out.iter_mut()) {
                    *slot = sentence_loss(h);
                }
            });
        }
    });
    let words: usize = held.iter().map(|h| h.heads.len().saturating_sub(1)).sum();
    per_sentence.iter().sum::<f64>() / words.max(1) as f64
}

/// The temperature in [1/50, 50] minimising [`chosen_arc_log_loss`]: golden-section search on
/// ln T (the loss is smooth and, in practice, unimodal in ln T), to a relative precision of
/// about 1% (finer changes no confidence by more than a fraction of a percent).
pub fn fit_temperature(held: &[Held], decoder: Algorithm, threads: usize) -> f64 {
    if held.is_empty() {
        return 1.0;
    }
    let f = |log_t: f64| chosen_arc_log_loss(held, decoder, log_t.exp(), threads);
    let (mut a, mut b) = ((1.0f64 / 50.0).ln(), 50f64.ln());
    let ratio = (5f64.sqrt() - 1.0) / 2.0;
    let mut c = b - ratio * (b - a);
    let mut d = a + ratio * (b - a);
    let (mut fc, mut fd) = (f(c), f(d));
    while b - a > 1e-2 {
        if fc < fd {
            b = d;
            d = c;
            fd = fc;
            c = b - ratio * (b - a);
            fc = f(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + ratio * (b - a);
            fd = f(d);
        }
    }
    ((a + b) / 2.0).exp()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Worked by hand: bins of width 0.1; 0.95 ×4 with 3 right → |0.75 − 0.95| = 0.2 on 4 of 6
    /// arcs; 0.55 ×2 with 1 right → |0.5 − 0.55| = 0.05 on 2 of 6. ECE = (4·0.2 + 2·0.05)/6.
    #[test]
    fn expected_calibration_error_by_hand() {
        let pairs = [
            (0.95, true),
            (0.95, true),
            (0.95, true),
            (0.95, false),
            (0.55, true),
            (0.55, false),
        ];
        let c = calibration(&pairs, 10);
        assert!((c.expected_calibration_error - (4.0 * 0.2 + 2.0 * 0.05) / 6.0).abs() < 1e-12);
        assert!((c.maximum_calibration_error - 0.2).abs() < 1e-12);
        assert_eq!(c.bins[9].count, 4);
        assert_eq!(c.bins[5].count, 2);
        // Edges: 0 goes to the first bin, 1.0 to the last, 0.1 to the first ((0, 0.1]).
        let edges = calibration(&[(0.0, false), (0.1, true), (1.0, true)], 10);
        assert_eq!(edges.bins[0].count, 2);
        assert_eq!(edges.bins[9].count, 1);
    }

    /// Data drawn from the model's own distribution at temperature 3 are best explained by a
    /// temperature near 3: scores s/3 sampled exactly are what "calibrated" means.
    #[test]
    fn the_fitted_temperature_recovers_the_one_the_data_came_from() {
        use crate::hashing::SplitMix64;
        let mut rng = SplitMix64::new(11);
        let mut held = Vec::new();
        for _ in 0..400 {
            let words = 4;
            let side = words + 1;
            let scores: Vec<f64> = (0..side * side)
                .map(|_| (rng.next_u64() % 2000) as f64 / 100.0 - 10.0)
                .collect();
            let scores = ScoreMatrix::from_row_major(words, scores).expect("finite");
            // One gold head per word, drawn from the true marginals (a per-word draw: enough
            // for the marginals, which is what is fitted: the chosen head is right with the
            // probability its true marginal gives).
            let truth = marginals::marginals(
                &scores.scaled(1.0 / 3.0),
                Algorithm::NonProjective,
                RootConstraint::SingleRoot,
            );
            let mut heads = vec![0; side];
            for (m, head) in heads.iter_mut().enumerate().skip(1) {
                let u = (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64;
                let mut acc = 0.0;
                for h in 0..side {
                    acc += truth.probability(h, m);
                    if u < acc || h == side - 1 {
                        *head = h;
                        break;
                    }
                }
            }
            held.push(Held { scores, heads });
        }
        let t = fit_temperature(&held, Algorithm::NonProjective, 2);
        assert_eq!(
            chosen_arc_log_loss(&held, Algorithm::NonProjective, t, 1),
            chosen_arc_log_loss(&held, Algorithm::NonProjective, t, 3),
            "the same at any thread count"
        );
        assert!((2.5..3.6).contains(&t), "fitted {t}");
    }
}
