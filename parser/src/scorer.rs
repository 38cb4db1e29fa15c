//! Arc and label scoring: the one interface every kind of model implements for the parse
//! pipeline ([`crate::pipeline`]), and the linear kind (hashed features × averaged weights).
//!
//! The models are arc-factored: a sentence's arc scores are computed once, as a full
//! [`ScoreMatrix`], and the decoders and marginals read only that matrix. A scorer therefore
//! never sees a decoder, and a decoder never sees a scorer; a new kind of scorer (a neural one,
//! say) is a new variant of [`ArcScorer`] and touches nothing downstream.

use crate::decode::{Heads, ScoreMatrix};
use crate::features::{FeatureConfig, SentenceFeatures, TokenView};
use crate::hashing::bucket;
use crate::neural::NeuralScorer;
use crate::perceptron::{best_class, prefetch};

/// What a scorer reads of one sentence: word forms, their tags and morphology summaries (empty
/// when the model does not use morphology).
#[derive(Debug, Clone, Copy)]
pub struct TaggedSentence<'a> {
    pub forms: &'a [String],
    pub tags: &'a [String],
    pub morph: &'a [String],
}

/// One sentence, scored: the arc matrix, and label choices for arcs of the chosen tree.
pub trait ScoredSentence {
    /// `scores.get(h, m)` = score of the arc h → m (0 = the root).
    fn arc_scores(&self) -> &ScoreMatrix;
    /// Index (into the scorer's label inventory) of the best label of the arc `head → modifier`.
    fn best_label(&self, head: usize, modifier: usize) -> usize;
    /// Tags predicted while scoring, for a scorer that tags (the neural kind with a tag head).
    fn predicted_tags(&self) -> Option<Vec<String>> {
        None
    }
    /// Label ids of every arc of a tree (`[m - 1]` for word m); scorers that label faster
    /// together override this.
    fn best_labels(&self, heads: &Heads) -> Vec<usize> {
        heads.arcs().map(|(m, h)| self.best_label(h, m)).collect()
    }
}

/// The kinds of arc scorer a model can carry.
#[derive(Debug, Clone)]
pub enum ArcScorer {
    /// Hashed first-order features with perceptron-trained weights.
    Linear(LinearScorer),
    /// A BiLSTM encoder with biaffine arc and label scorers.
    Neural(Box<NeuralScorer>),
}

impl ArcScorer {
    /// Scores one sentence (the pipeline's `score` stage).
    pub fn score<'a>(&'a self, sentence: TaggedSentence<'a>) -> Box<dyn ScoredSentence + 'a> {
        match self {
            ArcScorer::Linear(linear) => Box::new(linear.score(sentence)),
            // Shapes were checked when the scorer was built or loaded; a tensor error here is a
            // bug, not bad input.
            ArcScorer::Neural(neural) => Box::new(
                neural
                    .score(sentence)
                    .expect("neural scoring of a checked model"),
            ),
        }
    }

    /// Scores several sentences (together, for a kind that is faster that way).
    pub fn score_many<'a>(
        &'a self,
        sentences: &[TaggedSentence<'a>],
    ) -> Vec<Box<dyn ScoredSentence + 'a>> {
        match self {
            ArcScorer::Linear(_) => sentences.iter().map(|s| self.score(*s)).collect(),
            // Shapes were checked when the scorer was built or loaded.
            ArcScorer::Neural(neural) => neural
                .score_batch(sentences)
                .expect("neural scoring of a checked model")
                .into_iter()
                .map(|s| Box::new(s) as Box<dyn ScoredSentence + 'a>)
                .collect(),
        }
    }

    /// Whether [`ArcScorer::score_many`] is faster than scoring one sentence at a time.
    pub fn scores_faster_together(&self) -> bool {
        matches!(self, ArcScorer::Neural(_))
    }

    /// The label inventory that [`ScoredSentence::best_label`] indexes.
    pub fn labels(&self) -> &[String] {
        match self {
            ArcScorer::Linear(linear) => &linear.labels,
            ArcScorer::Neural(neural) => neural.labels(),
        }
    }

    /// Whether the scorer reads morphology summaries (so they must be tagged when not given).
    pub fn uses_morphology(&self) -> bool {
        match self {
            ArcScorer::Linear(linear) => linear.features.morphology,
            ArcScorer::Neural(_) => true,
        }
    }

    /// Whether scoring predicts the tags itself (so the tagger need not run).
    pub fn tags_itself(&self) -> bool {
        match self {
            ArcScorer::Linear(_) => false,
            ArcScorer::Neural(neural) => neural.config.tag_head,
        }
    }

    /// The kind's name, as in model listings.
    pub fn kind(&self) -> &'static str {
        match self {
            ArcScorer::Linear(_) => "linear",
            ArcScorer::Neural(_) => "neural",
        }
    }
}

/// The linear scorer: McDonald et al. (2005) style arc features hashed into a weight table, and
/// a second table for the labeler.
#[derive(Debug, Clone)]
pub struct LinearScorer {
    pub features: FeatureConfig,
    /// Part-of-speech inventory (ids for the in-between features), sorted.
    pub tags: Vec<String>,
    /// Dependency labels, sorted.
    pub labels: Vec<String>,
    pub label_bits: u32,
    pub arc_weights: Vec<f32>,
    pub label_weights: Vec<f32>,
}

/// A sentence scored by the linear scorer.
#[derive(Debug)]
pub struct LinearSentence<'a> {
    scorer: &'a LinearScorer,
    pub features: SentenceFeatures,
    pub scores: ScoreMatrix,
}

impl ScoredSentence for LinearSentence<'_> {
    fn arc_scores(&self) -> &ScoreMatrix {
        &self.scores
    }

    fn best_label(&self, head: usize, modifier: usize) -> usize {
        LinearScorer::best_label(
            &self.features,
            head,
            modifier,
            &self.scorer.label_weights,
            self.scorer.label_bits,
            self.scorer.labels.len(),
        )
    }
}

impl LinearScorer {
    /// Features and arc scores of one sentence under the scorer's own weights.
    pub fn score<'a>(&'a self, sentence: TaggedSentence<'_>) -> LinearSentence<'a> {
        let features = self.sentence_features(sentence.forms, sentence.tags, sentence.morph);
        let scores =
            LinearScorer::arc_scores(&features, &self.arc_weights, self.features.hash_bits);
        LinearSentence {
            scorer: self,
            features,
            scores,
        }
    }

    fn tag_id(&self, tag: &str) -> usize {
        self.tags
            .binary_search_by(|t| t.as_str().cmp(tag))
            .unwrap_or(self.tags.len())
    }

    /// Per-sentence features for given tags and morphology summaries.
    pub fn sentence_features(
        &self,
        forms: &[String],
        tags: &[String],
        morph: &[String],
    ) -> SentenceFeatures {
        let views: Vec<TokenView<'_>> = forms
            .iter()
            .enumerate()
            .map(|(i, form)| TokenView {
                form,
                tag: &tags[i],
                morph: morph.get(i).map_or("", String::as_str),
            })
            .collect();
        SentenceFeatures::new(
            &views,
            &|tag| self.tag_id(tag),
            self.tags.len() + 1,
            self.features,
        )
    }

    /// Arc scores of a sentence under `weights` (the scorer's, or weights being trained).
    ///
    /// The head-side and modifier-side features depend on one token and the arc's
    /// direction-distance code only, so they are summed once per (token, code) into small tables;
    /// only the pair features are looked up per arc.
    pub fn arc_scores(features: &SentenceFeatures, weights: &[f32], bits: u32) -> ScoreMatrix {
        let side = features.side();
        let codes = SentenceFeatures::DD_CODES;
        let mut head_table = vec![0.0f32; side * codes];
        let mut modifier_table = vec![0.0f32; side * codes];
        for token in 0..side {
            for direction in 0..2u64 {
                for bin in 1..=7u64 {
                    let dd = 1 + direction * 8 + bin;
                    let slot = token * codes + dd as usize;
                    let mut total = 0.0f32;
                    features.unary_features(token, true, dd, |hash| {
                        total += weights[bucket(hash, bits)]
                    });
                    head_table[slot] = total;
                    let mut total = 0.0f32;
                    features.unary_features(token, false, dd, |hash| {
                        total += weights[bucket(hash, bits)]
                    });
                    modifier_table[slot] = total;
                }
            }
        }
        let mut flat = vec![0.0f64; side * side];
        // Software pipelining: the pair features' weights are random reads in a table much
        // larger than the caches, so each arc's buckets are computed and prefetched one arc
        // ahead of the sum that reads them. The sum adds the same weights in the same order.
        let arcs = (0..side).flat_map(|h| (1..side).filter(move |&m| m != h).map(move |m| (h, m)));
        let (mut current, mut next) = (Vec::with_capacity(64), Vec::with_capacity(64));
        let mut previous: Option<(usize, usize)> = None;
        let mut finish = |(h, m): (usize, usize), buckets: &[usize]| {
            let dd = SentenceFeatures::dd_code(h, m) as usize;
            let mut total = head_table[h * codes + dd] + modifier_table[m * codes + dd];
            for &b in buckets {
                total += weights[b];
            }
            flat[h * side + m] = f64::from(total);
        };
        for (h, m) in arcs {
            next.clear();
            features.pair_features(h, m, |hash| {
                let b = bucket(hash, bits);
                prefetch(weights, b);
                next.push(b);
            });
            if let Some(arc) = previous {
                finish(arc, &current);
            }
            std::mem::swap(&mut current, &mut next);
            previous = Some((h, m));
        }
        if let Some(arc) = previous {
            finish(arc, &current);
        }
        ScoreMatrix::from_row_major(side - 1, flat).expect("a sentence of at least one word")
    }

    /// Best label id of the arc under `weights`.
    pub fn best_label(
        features: &SentenceFeatures,
        head: usize,
        modifier: usize,
        weights: &[f32],
        bits: u32,
        labels: usize,
    ) -> usize {
        let mut hashes = Vec::with_capacity(16);
        features.label_features(head, modifier, |h| hashes.push(h));
        best_class(&hashes, labels, weights, bits)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::hashing::hash_str;

    /// The pipelined scoring (buckets prefetched one arc ahead) must give bit-identical scores to
    /// the direct loop it replaced: same weights, added in the same order.
    #[test]
    fn pipelined_arc_scores_equal_the_direct_sum_bit_for_bit() {
        let bits = 14;
        let weights: Vec<f32> = (0..1u64 << bits)
            .map(|i| (hash_str(&i.to_string()) % 2001) as f32 / 1000.0 - 1.0)
            .collect();
        for (seed, words, morphology) in [(1, 1, true), (2, 2, false), (3, 9, true), (4, 40, true)]
        {
            let sentence = crate::demo::sentence(seed, words);
            let forms: Vec<String> = sentence.words().map(|w| w.form.clone()).collect();
            let tags: Vec<String> = sentence.words().map(|w| w.upos.clone()).collect();
            let views: Vec<TokenView<'_>> = forms
                .iter()
                .zip(&tags)
                .map(|(form, tag)| TokenView {
                    form,
                    tag,
                    morph: "Case=Dat",
                })
                .collect();
            let config = FeatureConfig {
                hash_bits: bits,
                morphology,
            };
            let features = SentenceFeatures::new(&views, &|t| t.len() % 7, 8, config);
            let scores = LinearScorer::arc_scores(&features, &weights, bits);
            let side = features.side();
            for h in 0..side {
                for m in 1..side {
                    if h == m {
                        continue;
                    }
                    let dd = SentenceFeatures::dd_code(h, m);
                    let mut total = 0.0f32;
                    features.unary_features(h, true, dd, |x| total += weights[bucket(x, bits)]);
                    let mut modifier = 0.0f32;
                    features.unary_features(m, false, dd, |x| modifier += weights[bucket(x, bits)]);
                    let mut total = total + modifier;
                    features.pair_features(h, m, |x| total += weights[bucket(x, bits)]);
                    assert_eq!(
                        scores.get(h, m).to_bits(),
                        f64::from(total).to_bits(),
                        "arc {h} → {m} of {words} words"
                    );
                }
            }
        }
    }
}
