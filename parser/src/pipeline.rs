//! The parse pipeline, the one place a sentence becomes a tree: tag → score → decode →
//! confidences → label. The command line, training's dev evaluation and the service all call
//! [`parse`]; the service times each stage through a [`StageObserver`] instead of re-implementing
//! the stages. (Tokenizing raw text is [`crate::tokenize::split`], which callers run first
//! because they check its output against their limits.)

use std::time::Instant;

use crate::decode::{self, Algorithm, Heads, RootConstraint, ScoreMatrix};
use crate::marginals::{self, matrix_tree::Effort};
use crate::model::Model;
use crate::scorer::{ScoredSentence, TaggedSentence};

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
        // Filled in from the scorer after scoring.
        None if model.scorer.tags_itself() => Vec::new(),
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
    let started = Instant::now();
    let (tags, morph) = tag(model, forms, tags, morph);
    let tagged = Instant::now();
    observer.stage_done(Stage::Tag, tagged.duration_since(started).as_secs_f64());
    let scored = model.scorer.score(TaggedSentence {
        forms,
        tags: &tags,
        morph: &morph,
    });
    observer.stage_done(Stage::Score, tagged.elapsed().as_secs_f64());
    let (predicted_tags, finished) = finish(model, scored.as_ref(), options, observer);
    drop(scored); // it borrows the tags
    finished.with_tags(predicted_tags.unwrap_or(tags))
}

/// One sentence for [`parse_many`]: its words, and its tags when the caller has them.
#[derive(Debug, Clone, Copy)]
pub struct Input<'a> {
    pub forms: &'a [String],
    pub tags: Option<&'a [String]>,
}

/// Parses several sentences, each as [`parse`] would, but scores them together when the model's
/// scorer is faster that way (the neural kind: one padded batch through the encoder). Each
/// sentence's observer is told an equal share of the joint scoring time. Results in input order.
pub fn parse_many(
    model: &Model,
    inputs: &[Input<'_>],
    options: &ParseOptions,
    observers: &mut [&mut dyn StageObserver],
) -> Vec<Parsed> {
    assert_eq!(inputs.len(), observers.len(), "one observer per sentence");
    let mut tagged = Vec::with_capacity(inputs.len());
    for (input, observer) in inputs.iter().zip(observers.iter_mut()) {
        let started = Instant::now();
        tagged.push(tag(model, input.forms, input.tags, None));
        observer.stage_done(Stage::Tag, started.elapsed().as_secs_f64());
    }
    let sentences: Vec<TaggedSentence<'_>> = inputs
        .iter()
        .zip(&tagged)
        .map(|(input, (tags, morph))| TaggedSentence {
            forms: input.forms,
            tags,
            morph,
        })
        .collect();
    let started = Instant::now();
    let scored = model.scorer.score_many(&sentences);
    let share = started.elapsed().as_secs_f64() / inputs.len().max(1) as f64;
    scored
        .iter()
        .zip(observers.iter_mut())
        .zip(&tagged)
        .map(|((scored, observer), (tags, _))| {
            observer.stage_done(Stage::Score, share);
            let (predicted_tags, finished) = finish(model, scored.as_ref(), options, *observer);
            finished.with_tags(predicted_tags.unwrap_or_else(|| tags.clone()))
        })
        .collect()
}

/// A parse before its tags are known (they may come from the scorer).
struct Untagged {
    heads: Heads,
    labels: Vec<String>,
    decoder: Algorithm,
    score: f64,
    confidences: Option<Vec<Option<f64>>>,
}

impl Untagged {
    fn with_tags(self, tags: Vec<String>) -> Parsed {
        Parsed {
            tags,
            heads: self.heads,
            labels: self.labels,
            decoder: self.decoder,
            score: self.score,
            confidences: self.confidences,
        }
    }
}

/// Decode → confidences → labels for a scored sentence; also the tags the scorer predicted, if
/// it tags.
fn finish(
    model: &Model,
    scored: &dyn ScoredSentence,
    options: &ParseOptions,
    observer: &mut dyn StageObserver,
) -> (Option<Vec<String>>, Untagged) {
    let mut clock = Instant::now();
    let mut lap = |observer: &mut dyn StageObserver, stage: Stage| {
        let now = Instant::now();
        observer.stage_done(stage, now.duration_since(clock).as_secs_f64());
        clock = now;
    };
    let scores = scored.arc_scores();
    let decoder = options.decoder.unwrap_or(model.default_decoder);
    let decoded = decode::decode(scores, decoder, RootConstraint::SingleRoot);
    lap(observer, Stage::Decode);
    let confidences = options.confidence.then(|| {
        // Confidences from the calibrated distribution: scores divided by the model's fitted
        // temperature (the decoded tree is the same at any temperature), then the chosen head's
        // marginal through the model's logistic map (which keeps it in [0, 1]).
        let temperature = model.confidence_temperatures.get(decoder);
        let confidence_map = model.confidence_maps.get(decoder);
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
                    .then(|| confidence_map.apply(p.probability(head, m)))
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
    (
        scored.predicted_tags(),
        Untagged {
            heads: decoded.heads,
            labels,
            decoder,
            score: decoded.score,
            confidences,
        },
    )
}
