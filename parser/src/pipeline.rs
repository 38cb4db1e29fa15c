//! The parse pipeline, the one place a sentence becomes a tree: tag → score → decode →
//! confidences → label. The command line, training's dev evaluation and the service all call
//! [`parse`]; the service times each stage through a [`StageObserver`] instead of re-implementing
//! the stages. (Tokenizing raw text is [`crate::tokenize::split`], which callers run first
//! because they check its output against their limits.)

use std::time::Instant;

use crate::decode::{self, Algorithm, Heads, RootConstraint, ScoreMatrix};
use crate::marginals::{self, matrix_tree::Effort};
use crate::model::Model;
use crate::scorer::TaggedSentence;

/// The largest extra work one sentence's confidences may take to repair cancelled Matrix-Tree
/// columns (multiply-adds; about 10 ms on a 2-core development machine). Peaked scores on long
/// sentences can need an elimination per word; past this, a word's confidence is left out rather
/// than guessed.
pub const DEFAULT_CONFIDENCE_EFFORT: Effort = Effort {
    operations: 5_000_000,
};

/// How to parse a sentence.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParseOptions {
    /// `None`: the model's default decoder.
    pub decoder: Option<Algorithm>,
    /// Also compute each chosen arc's marginal probability.
    pub confidence: bool,
    /// Bound on the confidence repair work ([`Effort::UNLIMITED`] for none).
    pub confidence_effort: Effort,
}

impl Default for ParseOptions {
    fn default() -> Self {
        ParseOptions {
            decoder: None,
            confidence: false,
            confidence_effort: DEFAULT_CONFIDENCE_EFFORT,
        }
    }
}

/// The pipeline's stages, in the order they run.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stage {
    Tag,
    Score,
    Decode,
    Confidence,
    Label,
}

/// Told how long each stage took (seconds), as it finishes. Stages that do not run (confidence,
/// when not asked for) are not reported.
pub trait StageObserver {
    fn stage_done(&mut self, stage: Stage, seconds: f64);
}

/// An observer that ignores everything.
#[derive(Debug, Clone, Copy, Default)]
pub struct Unobserved;

impl StageObserver for Unobserved {
    fn stage_done(&mut self, _: Stage, _: f64) {}
}

/// A parse of one sentence.
#[derive(Debug, Clone, PartialEq)]
pub struct Parsed {
    pub tags: Vec<String>,
    pub heads: Heads,
    /// `labels[m - 1]` is the label of word m's arc.
    pub labels: Vec<String>,
    pub decoder: Algorithm,
    pub score: f64,
    /// `confidences[m - 1]`: P(head → m) of word m's chosen arc under the model's tree
    /// distribution, when asked for; `None` for a word whose marginals could not be computed
    /// accurately within the effort bound.
    pub confidences: Option<Vec<Option<f64>>>,
}

/// Tags (unless given) and the morphology summaries a scorer that reads them needs.
fn tag(
    model: &Model,
    forms: &[String],
    tags: Option<&[String]>,
    morph: Option<&[String]>,
) -> (Vec<String>, Vec<String>) {
    let tags: Vec<String> = match tags {
        Some(t) => t.to_vec(),
        None => model.tagger.tag(forms),
    };
    // Morphology is tagged only for a scorer that reads it.
    let morph: Vec<String> = match (model.scorer.uses_morphology(), morph, &model.morph_tagger) {
        (false, _, _) | (true, None, None) => Vec::new(),
        (true, Some(m), _) => m.to_vec(),
        (true, None, Some(tagger)) => tagger.tag(forms),
    };
    (tags, morph)
}

/// The model's arc scores for a sentence, tagged by the model's own taggers (as in use): what
/// confidences are computed from, for fitting and checking their calibration.
pub fn arc_scores(model: &Model, forms: &[String]) -> ScoreMatrix {
    let (tags, morph) = tag(model, forms, None, None);
    let scored = model.scorer.score(TaggedSentence {
        forms,
        tags: &tags,
        morph: &morph,
    });
    scored.arc_scores().clone()
}

/// Tags (unless `tags` are given) and parses one sentence of at least one word.
pub fn parse(
    model: &Model,
    forms: &[String],
    tags: Option<&[String]>,
    morph: Option<&[String]>,
    options: &ParseOptions,
    observer: &mut dyn StageObserver,
) -> Parsed {
    let mut clock = Instant::now();
    let mut lap = |observer: &mut dyn StageObserver, stage: Stage| {
        let now = Instant::now();
        observer.stage_done(stage, now.duration_since(clock).as_secs_f64());
        clock = now;
    };
    let (tags, morph) = tag(model, forms, tags, morph);
    lap(observer, Stage::Tag);
    let scored = model.scorer.score(TaggedSentence {
        forms,
        tags: &tags,
        morph: &morph,
    });
    let scores = scored.arc_scores();
    lap(observer, Stage::Score);
    let decoder = options.decoder.unwrap_or(model.default_decoder);
    let decoded = decode::decode(scores, decoder, RootConstraint::SingleRoot);
    lap(observer, Stage::Decode);
    let confidences = options.confidence.then(|| {
        // Confidences from the calibrated distribution: scores divided by the model's fitted
        // temperature (the decoded tree is the same at any temperature).
        let temperature = model.confidence_temperatures.get(decoder);
        let calibrated;
        let for_marginals = if temperature == 1.0 {
            scores
        } else {
            calibrated = scores.scaled(1.0 / temperature);
            &calibrated
        };
        let p = marginals::marginals_within(
            for_marginals,
            decoder,
            RootConstraint::SingleRoot,
            options.confidence_effort,
        );
        let confidences = decoded
            .heads
            .arcs()
            .map(|(m, head)| {
                // A guard: the marginals recompute any column that loses digits to
                // cancellation, so every column should sum to 1; one that does not is left out
                // rather than reported wrong.
                let total: f64 = (0..decoded.heads.len()).map(|h| p.probability(h, m)).sum();
                // Probabilities, whatever rounding did: never outside [0, 1].
                (p.reliable(m) && (total - 1.0).abs() <= 1e-6)
                    .then(|| p.probability(head, m).clamp(0.0, 1.0))
            })
            .collect();
        lap(observer, Stage::Confidence);
        confidences
    });
    let inventory = model.scorer.labels();
    let labels = scored
        .best_labels(&decoded.heads)
        .into_iter()
        .map(|l| inventory[l].clone())
        .collect();
    lap(observer, Stage::Label);
    drop(scored); // it borrows the tags
    Parsed {
        tags,
        heads: decoded.heads,
        labels,
        decoder,
        score: decoded.score,
        confidences,
    }
}
