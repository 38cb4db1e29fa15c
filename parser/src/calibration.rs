//! Calibrated confidences: the expected calibration error of arc marginals, temperature
//! scaling (Guo, Pleiss, Sun & Weinberger 2017, "On Calibration of Modern Neural Networks") and a
//! logistic map of the confidences after it (Platt 1999, "Probabilistic Outputs for Support Vector
//! Machines and Comparisons to Regularized Likelihood Methods").
//!
//! A model's confidence in an arc is its marginal probability under the model's distribution
//! over trees, P(tree) ∝ exp(score(tree) / T). A linear model trained with perceptron updates
//! has scores on an arbitrary scale — large margins make nearly every marginal 1.000 — so one
//! temperature T is fitted on held-out data and stored with the model. T does not change any
//! decoded tree (dividing every arc score by the same positive number keeps the argmax). A
//! single temperature cannot bend the curve: a model over-confident at the top and
//! under-confident in the middle (the neural kind) is straightened by a second, monotone map of
//! the chosen head's marginal p: σ(a · logit p + b), fitted on the same held-out data.

use crate::decode::{self, Algorithm, Heads, RootConstraint, ScoreMatrix};
use crate::marginals;

/// One value per decoder: the projective decoder's distribution (inside-outside over
/// projective trees) is more peaked than the non-projective one (Matrix-Tree over all trees) for
/// the same scores, so each is fitted on its own.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PerDecoder<T> {
    pub projective: T,
    #[serde(rename = "non-projective")]
    pub non_projective: T,
}

impl<T: Copy> PerDecoder<T> {
    pub fn get(&self, decoder: Algorithm) -> T {
        match decoder {
            Algorithm::Projective => self.projective,
            Algorithm::NonProjective => self.non_projective,
        }
    }

    pub fn get_mut(&mut self, decoder: Algorithm) -> &mut T {
        match decoder {
            Algorithm::Projective => &mut self.projective,
            Algorithm::NonProjective => &mut self.non_projective,
        }
    }
}

/// The temperature per decoder that arc scores are divided by before the marginals.
pub type Temperatures = PerDecoder<f64>;

impl Default for Temperatures {
    fn default() -> Self {
        PerDecoder {
            projective: 1.0,
            non_projective: 1.0,
        }
    }
}

impl Temperatures {
    /// Whether both are positive finite numbers.
    pub fn valid(&self) -> bool {
        [self.projective, self.non_projective]
            .iter()
            .all(|t| t.is_finite() && *t > 0.0)
    }
}

/// The map σ(slope · logit p + offset) applied to a chosen head's marginal p. Monotone for a
/// positive slope, so it keeps the order of confidences; the identity is slope 1, offset 0.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct LogitMap {
    pub slope: f64,
    pub offset: f64,
}

impl Default for LogitMap {
    fn default() -> Self {
        LogitMap::IDENTITY
    }
}

/// Marginals are kept this far from 0 and 1 before the logit (ln of 1e-12 is about −27.6), so
/// the map is finite everywhere; it changes no confidence the service prints by a visible digit.
const LOGIT_EDGE: f64 = 1e-12;

fn logit(p: f64) -> f64 {
    let p = p.clamp(LOGIT_EDGE, 1.0 - LOGIT_EDGE);
    (p / (1.0 - p)).ln()
}

fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

impl LogitMap {
    pub const IDENTITY: LogitMap = LogitMap {
        slope: 1.0,
        offset: 0.0,
    };

    /// The calibrated confidence, in [0, 1] (the identity returns `p` itself, clamped).
    pub fn apply(&self, p: f64) -> f64 {
        if *self == LogitMap::IDENTITY {
            return p.clamp(0.0, 1.0);
        }
        sigmoid(self.slope * logit(p) + self.offset).clamp(0.0, 1.0)
    }

    /// Whether it is a finite, increasing map.
    pub fn valid(&self) -> bool {
        self.slope.is_finite() && self.slope > 0.0 && self.offset.is_finite()
    }
}

/// The logistic map per decoder, applied after the temperature.
pub type LogitMaps = PerDecoder<LogitMap>;

impl Default for LogitMaps {
    fn default() -> Self {
        PerDecoder {
            projective: LogitMap::IDENTITY,
            non_projective: LogitMap::IDENTITY,
        }
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

/// Held-out sentences with the trees a decoder chose for them. The tree does not depend on the
/// temperature, so it is decoded once, however many temperatures are then tried.
#[derive(Debug)]
pub struct Chosen<'a> {
    held: &'a [Held],
    decoder: Algorithm,
    heads: Vec<Heads>,
}

impl<'a> Chosen<'a> {
    pub fn decode(held: &'a [Held], decoder: Algorithm) -> Chosen<'a> {
        let heads = held
            .iter()
            .map(|h| decode::decode(&h.scores, decoder, RootConstraint::SingleRoot).heads)
            .collect();
        Chosen {
            held,
            decoder,
            heads,
        }
    }

    /// For each word, the marginal p at temperature `t` of the head the decoder chose, and
    /// whether that head is the gold one: exactly the pairs the expected calibration error bins.
    /// Computed on `threads` threads, returned in sentence order whatever the thread count.
    pub fn pairs(&self, t: f64, threads: usize) -> Vec<(f64, bool)> {
        let decoder = self.decoder;
        let sentence_pairs = |(h, chosen): (&Held, &Heads)| -> Vec<(f64, bool)> {
            let scaled = h.scores.scaled(1.0 / t);
            let p = marginals::marginals(&scaled, decoder, RootConstraint::SingleRoot);
            chosen
                .arcs()
                .map(|(m, head)| (p.probability(head, m).clamp(0.0, 1.0), head == h.heads[m]))
                .collect()
        };
        let held = self.held;
        let threads = threads.clamp(1, held.len().max(1));
        let mut per_sentence = vec![Vec::new(); held.len()];
        let chunk = held.len().div_ceil(threads).max(1);
        std::thread::scope(|scope| {
            for ((sentences, trees), out) in held
                .chunks(chunk)
                .zip(self.heads.chunks(chunk))
                .zip(per_sentence.chunks_mut(chunk))
            {
                scope.spawn(move || {
                    for ((h, tree), slot) in sentences.iter().zip(trees).zip(out.iter_mut()) {
                        *slot = sentence_pairs((h, tree));
                    }
                });
            }
        });
        per_sentence.into_iter().flatten().collect()
    }

    /// Mean binary log-loss of the chosen arcs at temperature `t` ([`Chosen::pairs`],
    /// [`log_loss`]). This is a proper scoring rule of exactly what the expected calibration
    /// error measures (the chosen heads' confidences against their correctness); the likelihood
    /// of the gold heads, which the first fits minimised, is also pulled by how little mass gold
    /// heads the decoder missed receive, and left a neural model under-confident in its middle
    /// bins (measured in docs/decisions/confidence-temperature.md). Does not depend on the
    /// thread count.
    pub fn log_loss(&self, t: f64, threads: usize) -> f64 {
        log_loss(&self.pairs(t, threads))
    }

    /// The temperature in [1/50, 50] minimising [`Chosen::log_loss`]: golden-section search on
    /// ln T (the loss is smooth and, in practice, unimodal in ln T), to a relative precision of
    /// about 1% (finer changes no confidence by more than a fraction of a percent).
    pub fn fit_temperature(&self, threads: usize) -> f64 {
        if self.held.is_empty() {
            return 1.0;
        }
        let f = |log_t: f64| self.log_loss(log_t.exp(), threads);
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
}

/// Mean binary log-loss of (confidence, right) pairs: −ln p for a right arc, −ln(1 − p) for a
/// wrong one (p kept 1e-12 away from 0 and 1).
pub fn log_loss(pairs: &[(f64, bool)]) -> f64 {
    let total: f64 = pairs
        .iter()
        .map(|&(p, right)| {
            let q = p.clamp(LOGIT_EDGE, 1.0 - LOGIT_EDGE);
            if right { -q.ln() } else { -(1.0 - q).ln() }
        })
        .sum();
    total / pairs.len().max(1) as f64
}

/// The logistic map minimising the [`log_loss`] of `pairs` after it: a one-feature logistic
/// regression on logit p (Platt 1999), which is convex, solved by Newton's method with step
/// halving. Fewer than 50 pairs, or pairs all right or all wrong, give the identity: there is
/// nothing to fit a slope to.
pub fn fit_logit_map(pairs: &[(f64, bool)]) -> LogitMap {
    let rights = pairs.iter().filter(|p| p.1).count();
    if pairs.len() < 50 || rights == 0 || rights == pairs.len() {
        return LogitMap::IDENTITY;
    }
    let features: Vec<(f64, f64)> = pairs
        .iter()
        .map(|&(p, right)| (logit(p), f64::from(u8::from(right))))
        .collect();
    let loss = |m: LogitMap| -> f64 {
        let mapped: Vec<(f64, bool)> = features
            .iter()
            .map(|&(x, y)| (sigmoid(m.slope * x + m.offset), y > 0.5))
            .collect();
        log_loss(&mapped)
    };
    let mut map = LogitMap::IDENTITY;
    let mut current = loss(map);
    for _ in 0..50 {
        // Gradient and Hessian of the summed loss in (slope, offset).
        let (mut ga, mut gb, mut haa, mut hab, mut hbb) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for &(x, y) in &features {
            let q = sigmoid(map.slope * x + map.offset);
            let w = (q * (1.0 - q)).max(1e-12);
            ga += (q - y) * x;
            gb += q - y;
            haa += w * x * x;
            hab += w * x;
            hbb += w;
        }
        let det = haa * hbb - hab * hab;
        if !det.is_finite() || det <= 0.0 {
            break;
        }
        let step_a = (hbb * ga - hab * gb) / det;
        let step_b = (haa * gb - hab * ga) / det;
        let mut scale = 1.0;
        let mut improved = false;
        while scale > 1e-6 {
            let next = LogitMap {
                slope: map.slope - scale * step_a,
                offset: map.offset - scale * step_b,
            };
            let value = loss(next);
            if next.valid() && value <= current {
                improved = current - value > 1e-12;
                map = next;
                current = value;
                break;
            }
            scale /= 2.0;
        }
        if !improved {
            break;
        }
    }
    map
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

    /// Pairs whose true probability of being right is σ(0.6 · logit p + 0.4) (drawn with our
    /// SplitMix64) give back a map near that one; the fitted map lowers the log-loss and keeps
    /// the order of confidences.
    #[test]
    fn the_fitted_logit_map_recovers_the_one_the_data_came_from() {
        use crate::hashing::SplitMix64;
        let truth = LogitMap {
            slope: 0.6,
            offset: 0.4,
        };
        let mut rng = SplitMix64::new(5);
        let pairs: Vec<(f64, bool)> = (0..20_000)
            .map(|_| {
                let p = 0.02 + 0.97 * rng.next_f64();
                (p, rng.next_f64() < truth.apply(p))
            })
            .collect();
        let fitted = fit_logit_map(&pairs);
        assert!((fitted.slope - 0.6).abs() < 0.05, "{fitted:?}");
        assert!((fitted.offset - 0.4).abs() < 0.05, "{fitted:?}");
        let mapped: Vec<(f64, bool)> = pairs.iter().map(|&(p, r)| (fitted.apply(p), r)).collect();
        assert!(log_loss(&mapped) < log_loss(&pairs));
        assert!(fitted.apply(0.3) < fitted.apply(0.31));
    }

    #[test]
    fn logit_maps_stay_probabilities_and_degenerate_data_give_the_identity() {
        let steep = LogitMap {
            slope: 40.0,
            offset: -3.0,
        };
        for p in [0.0, 1e-300, 0.5, 1.0 - 1e-16, 1.0, 1.0000000000000016] {
            let q = steep.apply(p);
            assert!((0.0..=1.0).contains(&q), "{p} -> {q}");
        }
        assert_eq!(LogitMap::IDENTITY.apply(1.0000000000000016), 1.0);
        assert_eq!(fit_logit_map(&[(0.9, true); 100]), LogitMap::IDENTITY);
        assert_eq!(
            fit_logit_map(&[(0.9, true), (0.2, false)]),
            LogitMap::IDENTITY
        );
        assert!(
            !LogitMap {
                slope: 0.0,
                offset: 0.0
            }
            .valid()
        );
        assert!(
            !LogitMap {
                slope: 1.0,
                offset: f64::NAN
            }
            .valid()
        );
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
        let chosen = Chosen::decode(&held, Algorithm::NonProjective);
        let t = chosen.fit_temperature(2);
        assert_eq!(
            chosen.log_loss(t, 1),
            chosen.log_loss(t, 3),
            "the same at any thread count"
        );
        assert!((2.5..3.6).contains(&t), "fitted {t}");
    }
}
