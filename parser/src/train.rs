//! Training: averaged structured perceptron (Collins 2002) over arc-factored scores, decoded with
//! the decoder that fits the treebank, run on all cores by iterative parameter mixing (McDonald,
//! Hall & Mann 2010); a second-stage arc labeler and the taggers are trained in the same run.
//!
//! Labels are a second stage: the tree is decoded first, then each chosen arc takes its best
//! label from a multiclass averaged perceptron. Scoring labels jointly would multiply the arc
//! scoring work by the number of labels (dozens) for every one of the n² arcs; the second stage
//! scores labels only on the n chosen arcs.
//!
//! Reproducibility: the data order of every epoch comes from the seed, shards are fixed by
//! position, and mixing averages in shard order, so the same seed and thread count give
//! bit-identical weights.

use crate::calibration;
use crate::conllu::Sentence;
use crate::decode::{self, Algorithm, RootConstraint, is_projective};
use crate::features::FeatureConfig;
use crate::hashing::{bucket, mix};
use crate::model::Model;
use crate::neural::{self, NeuralError, train::NeuralOptions};
use crate::perceptron::{self, Trainee, weight_table, weight_table_from};
use crate::scorer::{ArcScorer, LinearScorer, TaggedSentence};
use crate::tagger::Tagger;
use crate::text;
use crate::tokenize::Abbreviations;

/// One training sentence.
#[derive(Debug, Clone)]
pub struct Example {
    pub forms: Vec<String>,
    pub tags: Vec<String>,
    /// Morphology summaries (Case, Possessive) per word; "_" when none.
    pub morph: Vec<String>,
    /// `heads[0] = 0`, then the head of each word.
    pub heads: Vec<usize>,
    pub labels: Vec<String>,
}

impl Example {
    /// What a scorer reads of this sentence: its forms, tags and morphology.
    pub fn tagged(&self) -> TaggedSentence<'_> {
        TaggedSentence {
            forms: &self.forms,
            tags: &self.tags,
            morph: &self.morph,
        }
    }

    /// From an annotated CoNLL-U sentence; `None` if it has no words or no complete tree.
    pub fn from_sentence(sentence: &Sentence) -> Option<Example> {
        let heads = sentence.heads()?;
        if heads.len() < 2 {
            return None;
        }
        let words: Vec<_> = sentence.words().collect();
        Some(Example {
            forms: words.iter().map(|w| w.form.clone()).collect(),
            tags: words.iter().map(|w| w.upos.clone()).collect(),
            morph: words.iter().map(|w| morph_summary(&w.feats)).collect(),
            heads,
            labels: words.iter().map(|w| w.deprel.clone()).collect(),
        })
    }
}

/// The morphology the parser conditions on (Case and Possessive), or "_".
pub fn morph_summary(feats: &str) -> String {
    let case = text::feature_value(feats, "Case");
    let possessive = text::feature_value(feats, "Possessive");
    match (case.is_empty(), possessive.is_empty()) {
        (true, true) => "_".to_string(),
        _ => format!("Case={case}|Possessive={possessive}"),
    }
}

/// How the arc weights move after a wrong tree.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Update {
    /// +1 on the gold arcs' features, −1 on the predicted arcs' (Collins 2002).
    Perceptron,
    /// Passive-aggressive, PA-I (Crammer et al. 2006): the smallest step that gives the gold tree
    /// a margin of (number of wrong heads) over the prediction, capped at `aggressiveness`.
    PassiveAggressive { aggressiveness: f32 },
}

/// Training settings.
#[derive(Debug, Clone)]
pub struct TrainOptions {
    pub update: Update,
    pub epochs: usize,
    pub seed: u64,
    pub threads: usize,
    /// `None`: non-projective if any training tree has crossing arcs, else projective.
    pub decoder: Option<Algorithm>,
    pub features: FeatureConfig,
    pub label_bits: u32,
    pub tagger_bits: u32,
    pub tagger_epochs: usize,
    /// Stop after this many epochs without a better dev UAS.
    pub patience: usize,
    /// Train the parser on tags and morphology predicted by taggers trained on the other folds
    /// (jackknifing), so training sees the tagging errors it will meet at parse time. 0 or 1 =
    /// train on gold tags.
    pub jackknife_folds: usize,
}

impl Default for TrainOptions {
    fn default() -> Self {
        TrainOptions {
            update: Update::Perceptron,
            epochs: 10,
            seed: 1,
            threads: 2,
            decoder: None,
            features: FeatureConfig::default(),
            label_bits: 20,
            tagger_bits: 20,
            tagger_epochs: 6,
            patience: 3,
            jackknife_folds: 5,
        }
    }
}

/// What happened in one epoch.
#[derive(Debug, Clone)]
pub struct EpochReport {
    pub epoch: usize,
    pub train_errors: usize,
    pub train_tokens: usize,
    /// Dev UAS (percent, gold tags) with the averaged weights so far, if a dev set was given.
    pub dev_uas: Option<f64>,
    /// Dev LAS (percent), alongside `dev_uas`.
    pub dev_las: Option<f64>,
    /// Mean training loss per word (the neural kind; the linear kind counts errors instead).
    pub loss: Option<f64>,
    /// Whether the dev scores are with predicted tags (the neural kind) or gold ones.
    pub dev_tags_predicted: bool,
}

/// The distinct values, sorted (tag and label inventories).
pub(crate) fn sorted_unique(values: impl Iterator<Item = String>) -> Vec<String> {
    let mut v: Vec<String> = values.collect();
    v.sort();
    v.dedup();
    v
}

/// What both kinds of model train on: the decoder, the taggers, and the training set with tags
/// as they will be predicted at parse time.
struct Prepared {
    decoder: Algorithm,
    tags: Vec<String>,
    labels: Vec<String>,
    tagger: Tagger,
    morph_tagger: Option<Tagger>,
    /// Jackknifed when `jackknife_folds` > 1, else the gold-tagged input.
    train: Vec<Example>,
}

fn prepare(
    train: &[Example],
    options: &TrainOptions,
    progress: &mut dyn FnMut(&str, Option<&EpochReport>),
) -> Prepared {
    let decoder = options.decoder.unwrap_or_else(|| {
        if train.iter().all(|e| is_projective(&e.heads)) {
            Algorithm::Projective
        } else {
            Algorithm::NonProjective
        }
    });
    let tags = sorted_unique(train.iter().flat_map(|e| e.tags.iter().cloned()));
    let labels = sorted_unique(train.iter().flat_map(|e| e.labels.iter().cloned()));
    progress(
        &format!("training taggers on {} sentences", train.len()),
        None,
    );
    let tag_pairs: Vec<(Vec<String>, Vec<String>)> = train
        .iter()
        .map(|e| (e.forms.clone(), e.tags.clone()))
        .collect();
    let tagger = Tagger::train(
        &tag_pairs,
        options.tagger_epochs,
        options.seed,
        options.tagger_bits,
    );
    let morph_tagger = options.features.morphology.then(|| {
        let pairs: Vec<(Vec<String>, Vec<String>)> = train
            .iter()
            .map(|e| (e.forms.clone(), e.morph.clone()))
            .collect();
        Tagger::train(
            &pairs,
            options.tagger_epochs,
            options.seed ^ 0x77,
            options.tagger_bits,
        )
    });
    let train = if options.jackknife_folds > 1 {
        progress(
            &format!("jackknifing tags over {} folds", options.jackknife_folds),
            None,
        );
        jackknife(train, options)
    } else {
        train.to_vec()
    };
    Prepared {
        decoder,
        tags,
        labels,
        tagger,
        morph_tagger,
        train,
    }
}

/// Trains a model of the neural kind ([`crate::neural`]): the same taggers and jackknifed
/// training tags as the linear kind, then the network, then the confidence temperatures.
/// `progress` is called after every epoch and stage; the epoch reports carry the training loss
/// and dev scores with predicted tags.
pub fn train_neural(
    train: &[Example],
    dev: &[Example],
    options: &TrainOptions,
    neural_options: &NeuralOptions,
    progress: &mut dyn FnMut(&str, Option<&EpochReport>),
) -> Result<Model, NeuralError> {
    let threads = options.threads.max(1);
    let prepared = prepare(train, options, progress);
    let tag_as_in_use = |e: &Example| Example {
        tags: prepared.tagger.tag(&e.forms),
        morph: prepared
            .morph_tagger
            .as_ref()
            .map_or_else(|| e.morph.clone(), |t| t.tag(&e.forms)),
        ..e.clone()
    };
    let dev_tagged: Vec<Example> = dev.iter().map(tag_as_in_use).collect();
    // A tag head learns the gold tags; the morphology stays as predicted.
    let training: Vec<Example> = if neural_options.shape.tag_head {
        prepared
            .train
            .iter()
            .zip(train)
            .map(|(predicted, gold)| Example {
                tags: gold.tags.clone(),
                ..predicted.clone()
            })
            .collect()
    } else {
        prepared.train.clone()
    };
    progress("training the network", None);
    let scorer = neural::train::train(
        &training,
        &dev_tagged,
        prepared.decoder,
        neural_options,
        threads,
        &mut |epoch| {
            progress(
                "epoch",
                Some(&EpochReport {
                    epoch: epoch.epoch,
                    train_errors: 0,
                    train_tokens: 0,
                    loss: Some(epoch.loss),
                    dev_uas: epoch.dev_uas,
                    dev_las: epoch.dev_las,
                    dev_tags_predicted: true,
                }),
            )
        },
    )?;
    let mut model = Model {
        scorer: ArcScorer::Neural(Box::new(scorer)),
        tagger: prepared.tagger,
        morph_tagger: prepared.morph_tagger,
        default_decoder: prepared.decoder,
        abbreviations: Abbreviations::learn(train.iter().map(|e| e.forms.as_slice())),
        confidence_temperatures: calibration::Temperatures::default(),
        confidence_maps: calibration::LogitMaps::default(),
        training: serde_json::Value::Null,
    };
    if !dev.is_empty() {
        progress("calibrating the confidences on dev", None);
        calibrate_confidences(&mut model, dev, threads);
    }
    Ok(model)
}

/// Trains a full model of the linear kind. `progress` is called after every epoch and stage.
pub fn train(
    train: &[Example],
    dev: &[Example],
    options: &TrainOptions,
    progress: &mut dyn FnMut(&str, Option<&EpochReport>),
) -> Model {
    let threads = options.threads.max(1);
    let Prepared {
        decoder,
        tags,
        labels,
        tagger,
        morph_tagger,
        train: prepared_train,
    } = prepare(train, options, progress);
    let train: &[Example] = &prepared_train;
    let mut model = Model {
        scorer: ArcScorer::Linear(LinearScorer {
            features: options.features,
            tags,
            labels,
            label_bits: options.label_bits,
            arc_weights: weight_table(1 << options.features.hash_bits),
            label_weights: weight_table(1 << options.label_bits),
        }),
        tagger,
        morph_tagger,
        default_decoder: decoder,
        abbreviations: Abbreviations::learn(train.iter().map(|e| e.forms.as_slice())),
        confidence_temperatures: calibration::Temperatures::default(),
        confidence_maps: calibration::LogitMaps::default(),
        training: serde_json::Value::Null,
    };
    let label_index = |label: &str| {
        model
            .linear()
            .expect("a linear model in training")
            .labels
            .binary_search_by(|l| l.as_str().cmp(label))
            .unwrap_or(0)
    };
    let label_ids: Vec<Vec<usize>> = train
        .iter()
        .map(|e| e.labels.iter().map(|l| label_index(l)).collect())
        .collect();

    let bits = options.features.hash_bits;
    let label_bits = options.label_bits;
    let mut current_arcs = weight_table(1 << bits);
    let mut current_labels = weight_table(1 << label_bits);
    let mut average_sum_arcs = weight_table(1 << bits);
    let mut average_sum_labels = weight_table(1 << label_bits);
    let mut best: Option<(f64, Vec<f32>, Vec<f32>)> = None;
    let mut since_best = 0;
    let mut order: Vec<usize> = (0..train.len()).collect();
    for epoch in 1..=options.epochs {
        crate::hashing::shuffle(
            &mut order,
            options
                .seed
                .wrapping_mul(1_000_003)
                .wrapping_add(epoch as u64),
        );
        let shards: Vec<Vec<usize>> = (0..threads)
            .map(|k| order.iter().copied().skip(k).step_by(threads).collect())
            .collect();
        let model_ref = &model;
        let label_ids_ref = &label_ids;
        let results: Vec<(Trainee, Trainee, usize, usize)> = std::thread::scope(|scope| {
            let handles: Vec<_> = shards
                .iter()
                .map(|shard| {
                    let (arcs, labels) = (
                        weight_table_from(current_arcs.iter().copied()),
                        weight_table_from(current_labels.iter().copied()),
                    );
                    let update = options.update;
                    scope.spawn(move || {
                        train_shard(
                            model_ref,
                            train,
                            label_ids_ref,
                            shard,
                            arcs,
                            labels,
                            decoder,
                            update,
                        )
                    })
                })
                .collect();
            handles
                .into_iter()
                .map(|h| h.join().expect("training thread"))
                .collect()
        });
        let train_errors = results.iter().map(|r| r.2).sum();
        let train_tokens = results.iter().map(|r| r.3).sum();
        current_arcs = perceptron::mean(
            &results
                .iter()
                .map(|r| r.0.weights.clone())
                .collect::<Vec<_>>(),
        );
        current_labels = perceptron::mean(
            &results
                .iter()
                .map(|r| r.1.weights.clone())
                .collect::<Vec<_>>(),
        );
        let epoch_arcs =
            perceptron::mean(&results.iter().map(|r| r.0.averaged()).collect::<Vec<_>>());
        let epoch_labels =
            perceptron::mean(&results.iter().map(|r| r.1.averaged()).collect::<Vec<_>>());
        for (sum, x) in average_sum_arcs.iter_mut().zip(&epoch_arcs) {
            *sum += x;
        }
        for (sum, x) in average_sum_labels.iter_mut().zip(&epoch_labels) {
            *sum += x;
        }
        let scale = 1.0 / epoch as f32;
        model
            .linear_mut()
            .expect("a linear model in training")
            .arc_weights = weight_table_from(average_sum_arcs.iter().map(|x| x * scale));
        model
            .linear_mut()
            .expect("a linear model in training")
            .label_weights = weight_table_from(average_sum_labels.iter().map(|x| x * scale));
        let dev_scores = (!dev.is_empty()).then(|| dev_attachment(&model, dev, decoder));
        let dev_uas = dev_scores.map(|(uas, _)| uas);
        let report = EpochReport {
            epoch,
            train_errors,
            train_tokens,
            dev_uas,
            dev_las: dev_scores.map(|(_, las)| las),
            loss: None,
            dev_tags_predicted: false,
        };
        progress("epoch", Some(&report));
        if let Some(uas) = dev_uas {
            if best.as_ref().is_none_or(|(b, _, _)| uas > *b) {
                best = Some((
                    uas,
                    weight_table_from(
                        model
                            .linear()
                            .expect("a linear model in training")
                            .arc_weights
                            .iter()
                            .copied(),
                    ),
                    weight_table_from(
                        model
                            .linear()
                            .expect("a linear model in training")
                            .label_weights
                            .iter()
                            .copied(),
                    ),
                ));
                since_best = 0;
            } else {
                since_best += 1;
                if since_best >= options.patience {
                    progress(
                        &format!("early stop: no better dev UAS for {since_best} epochs"),
                        None,
                    );
                    break;
                }
            }
        }
    }
    if let Some((_, arcs, labels)) = best {
        model
            .linear_mut()
            .expect("a linear model in training")
            .arc_weights = arcs;
        model
            .linear_mut()
            .expect("a linear model in training")
            .label_weights = labels;
    }
    if !dev.is_empty() {
        progress("calibrating the confidences on dev", None);
        calibrate_confidences(&mut model, dev, threads);
    }
    model
}

/// Fits the confidence calibration on `dev` for each decoder, parsed as in use (tags and
/// morphology predicted by the model's own taggers): first the temperature, then the logistic
/// map of the chosen heads' marginals at that temperature.
pub fn calibrate_confidences(model: &mut Model, dev: &[Example], threads: usize) {
    let held: Vec<calibration::Held> = dev
        .iter()
        .map(|example| calibration::Held {
            scores: model.arc_scores(&example.forms),
            heads: example.heads.clone(),
        })
        .collect();
    for decoder in [Algorithm::Projective, Algorithm::NonProjective] {
        let chosen = calibration::Chosen::decode(&held, decoder);
        let t = chosen.fit_temperature(threads);
        let pairs = chosen.pairs(t, threads);
        *model.confidence_temperatures.get_mut(decoder) = t;
        *model.confidence_maps.get_mut(decoder) = calibration::fit_logit_map(&pairs);
    }
}

/// The training set with tags and morphology predicted by taggers trained on the other folds
/// (fold of sentence i = i mod folds). Folds are tagged in parallel; the result does not depend
/// on the thread count.
fn jackknife(train: &[Example], options: &TrainOptions) -> Vec<Example> {
    let folds = options.jackknife_folds;
    let threads = options.threads.max(1);
    let tag_fold = |fold: usize| -> Vec<(usize, Vec<String>, Vec<String>)> {
        let rest: Vec<&Example> = train
            .iter()
            .enumerate()
            .filter(|(i, _)| i % folds != fold)
            .map(|(_, e)| e)
            .collect();
        let pairs: Vec<(Vec<String>, Vec<String>)> = rest
            .iter()
            .map(|e| (e.forms.clone(), e.tags.clone()))
            .collect();
        let tagger = Tagger::train(
            &pairs,
            options.tagger_epochs,
            options.seed ^ fold as u64,
            options.tagger_bits,
        );
        let morph_tagger = options.features.morphology.then(|| {
            let pairs: Vec<(Vec<String>, Vec<String>)> = rest
                .iter()
                .map(|e| (e.forms.clone(), e.morph.clone()))
                .collect();
            Tagger::train(
                &pairs,
                options.tagger_epochs,
                options.seed ^ 0x77 ^ fold as u64,
                options.tagger_bits,
            )
        });
        train
            .iter()
            .enumerate()
            .filter(|(i, _)| i % folds == fold)
            .map(|(i, e)| {
                let morph = morph_tagger
                    .as_ref()
                    .map_or_else(|| e.morph.clone(), |t| t.tag(&e.forms));
                (i, tagger.tag(&e.forms), morph)
            })
            .collect()
    };
    let mut tagged: Vec<(usize, Vec<String>, Vec<String>)> = Vec::with_capacity(train.len());
    for batch in (0..folds).collect::<Vec<_>>().chunks(threads) {
        let results: Vec<_> = std::thread::scope(|scope| {
            let handles: Vec<_> = batch
                .iter()
                .map(|&fold| scope.spawn(move || tag_fold(fold)))
                .collect();
            handles
                .into_iter()
                .map(|h| h.join().expect("tagging thread"))
                .collect()
        });
        for r in results {
            tagged.extend(r);
        }
    }
    tagged.sort_by_key(|(i, _, _)| *i);
    train
        .iter()
        .zip(tagged)
        .map(|(e, (_, tags, morph))| Example {
            tags,
            morph,
            ..e.clone()
        })
        .collect()
}

/// One epoch over one shard, from the given weights.
fn train_shard(
    model: &Model,
    train: &[Example],
    label_ids: &[Vec<usize>],
    shard: &[usize],
    arcs: Vec<f32>,
    labels: Vec<f32>,
    decoder: Algorithm,
    update: Update,
) -> (Trainee, Trainee, usize, usize) {
    let linear = model.linear().expect("a linear model in training");
    let bits = linear.features.hash_bits;
    let label_bits = linear.label_bits;
    let mut arc_trainee = Trainee::from_weights(bits, arcs);
    let mut label_trainee = Trainee::from_weights(label_bits, labels);
    let (mut errors, mut tokens) = (0, 0);
    let mut hashes = Vec::with_capacity(128);
    for &index in shard {
        let example = &train[index];
        arc_trainee.tick();
        label_trainee.tick();
        let features = linear.sentence_features(&example.forms, &example.tags, &example.morph);
        let scores = LinearScorer::arc_scores(&features, &arc_trainee.weights, bits);
        let predicted = decode::decode(&scores, decoder, RootConstraint::SingleRoot).heads;
        let wrong: Vec<usize> = (1..example.heads.len())
            .filter(|&m| example.heads[m] != predicted[m])
            .collect();
        tokens += example.heads.len() - 1;
        errors += wrong.len();
        let step = match update {
            Update::Perceptron => 1.0,
            Update::PassiveAggressive { aggressiveness } if !wrong.is_empty() => {
                // Δφ = φ(gold) − φ(predicted), per weight bucket; only wrong words differ.
                let mut delta: std::collections::HashMap<usize, f32> =
                    std::collections::HashMap::new();
                let mut margin = 0.0f64;
                for &m in &wrong {
                    margin += scores.get(example.heads[m], m) - scores.get(predicted[m], m);
                    features.arc_features(example.heads[m], m, |h| {
                        *delta.entry(bucket(h, bits)).or_default() += 1.0
                    });
                    features.arc_features(predicted[m], m, |h| {
                        *delta.entry(bucket(h, bits)).or_default() -= 1.0
                    });
                }
                let norm: f32 = delta.values().map(|d| d * d).sum();
                let loss = wrong.len() as f64 - margin;
                if norm > 0.0 {
                    ((loss as f32) / norm).clamp(0.0, aggressiveness)
                } else {
                    0.0
                }
            }
            Update::PassiveAggressive { .. } => 0.0,
        };
        for &m in &wrong {
            hashes.clear();
            features.arc_features(example.heads[m], m, |h| hashes.push(h));
            for &h in &hashes {
                arc_trainee.update(h, step);
            }
            hashes.clear();
            features.arc_features(predicted[m], m, |h| hashes.push(h));
            for &h in &hashes {
                arc_trainee.update(h, -step);
            }
        }
        for m in 1..example.heads.len() {
            let gold = example.heads[m];
            // Labeler: trained on the gold arcs.
            let truth = label_ids[index][m - 1];
            let guess_label = LinearScorer::best_label(
                &features,
                gold,
                m,
                &label_trainee.weights,
                label_bits,
                linear.labels.len(),
            );
            if guess_label != truth {
                hashes.clear();
                features.label_features(gold, m, |h| hashes.push(h));
                for &h in &hashes {
                    label_trainee.update(mix(h, truth as u64), 1.0);
                    label_trainee.update(mix(h, guess_label as u64), -1.0);
                }
            }
        }
    }
    (arc_trainee, label_trainee, errors, tokens)
}

/// Dev UAS and LAS in percent with gold tags and morphology.
fn dev_attachment(model: &Model, dev: &[Example], decoder: Algorithm) -> (f64, f64) {
    let (mut attached, mut labeled, mut total) = (0usize, 0usize, 0usize);
    for example in dev {
        let parsed = model.parse(
            &example.forms,
            Some(&example.tags),
            Some(&example.morph),
            Some(decoder),
        );
        for (word, head) in parsed.heads.arcs() {
            total += 1;
            if head == example.heads[word] {
                attached += 1;
                labeled += usize::from(parsed.labels[word - 1] == example.labels[word - 1]);
            }
        }
    }
    let percent = |n: usize| 100.0 * n as f64 / total.max(1) as f64;
    (percent(attached), percent(labeled))
}
