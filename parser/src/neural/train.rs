//! Training the neural scorer: per-word head selection (a softmax over every candidate head of
//! each word, cross-entropy against the gold head) plus cross-entropy of the gold arc's label,
//! minimised with AdamW over length-sorted mini-batches; early stopping on dev UAS.
//!
//! The head-selection loss makes the scores log-probabilities up to a per-word constant, so the
//! tree marginals computed from them (Matrix-Tree Theorem, inside-outside) are close to
//! calibrated from the start; the model's temperature is still fitted on dev afterwards, as for
//! the linear kind.
//!
//! Reproducibility: initial weights, batch order and dropout masks all come from the seed through
//! our own generator, so the same seed and thread count give the same weights.

use std::collections::HashMap;
use std::time::Instant;

use candle_core::{D, DType, Device, Tensor, Var};
use candle_nn::{AdamW, Optimizer, ParamsAdamW};

use crate::decode::{self, Algorithm, RootConstraint};
use crate::hashing::{SplitMix64, shuffle};
use crate::scorer::{ScoredSentence, TaggedSentence};
use crate::text;
use crate::train::{Example, sorted_unique};

use super::network::{self, Dropout, Network, Parameters};
use super::{
    NeuralConfig, NeuralError, NeuralScorer, SentenceIds, Shape, Vocabulary, batch_inputs,
};

/// Settings of a neural training run.
#[derive(Debug, Clone)]
pub struct NeuralOptions {
    pub shape: Shape,
    /// Most epochs to run.
    pub epochs: usize,
    /// Stop after this many epochs without a better dev UAS.
    pub patience: usize,
    pub seed: u64,
    /// Sentences per mini-batch.
    pub batch_sentences: usize,
    pub learning_rate: f64,
    /// Dropout on embeddings, BiLSTM outputs and MLP outputs.
    pub dropout: f32,
    /// A training word is replaced by the unknown word with probability α / (α + its count)
    /// (Kiperwasser & Goldberg 2016), so the unknown row learns from real contexts.
    pub word_dropout_alpha: f64,
    /// Forms seen fewer times than this share the unknown word's embedding.
    pub min_word_count: usize,
    /// Global gradient norm above which a step is scaled down.
    pub clip_norm: f64,
    /// The learning rate is multiplied by this after every epoch without a better dev UAS.
    pub plateau_decay: f64,
}

impl Default for NeuralOptions {
    fn default() -> Self {
        NeuralOptions {
            shape: Shape::default(),
            epochs: 30,
            patience: 3,
            seed: 1,
            batch_sentences: 32,
            learning_rate: 2e-3,
            dropout: 0.33,
            word_dropout_alpha: 0.25,
            min_word_count: 2,
            clip_norm: 5.0,
            plateau_decay: 0.5,
        }
    }
}

/// What happened in one epoch.
#[derive(Debug, Clone)]
pub struct NeuralEpoch {
    pub epoch: usize,
    /// Mean training loss per word (arc + label cross-entropy).
    pub loss: f64,
    pub dev_uas: Option<f64>,
    pub dev_las: Option<f64>,
    pub seconds: f64,
}

/// The vocabularies of a training set, and each kept word's count.
pub fn vocabulary(
    train: &[Example],
    min_word_count: usize,
) -> (Vocabulary, HashMap<String, usize>) {
    let mut counts: HashMap<String, usize> = HashMap::new();
    for e in train {
        for f in &e.forms {
            *counts.entry(text::lowercase(f)).or_default() += 1;
        }
    }
    let mut words: Vec<String> = counts
        .iter()
        .filter(|&(_, &c)| c >= min_word_count)
        .map(|(w, _)| w.clone())
        .collect();
    words.sort();
    let vocabulary = Vocabulary {
        words,
        tags: sorted_unique(train.iter().flat_map(|e| e.tags.iter().cloned())),
        morph_features: sorted_unique(train.iter().flat_map(|e| {
            e.morph
                .iter()
                .flat_map(|m| m.split('|').filter(|f| f.contains('=')).map(str::to_string))
                .collect::<Vec<_>>()
        })),
        labels: sorted_unique(train.iter().flat_map(|e| e.labels.iter().cloned())),
    };
    (vocabulary, counts)
}

/// The configuration for a vocabulary and shape.
pub fn config_for(vocabulary: &Vocabulary, shape: &Shape) -> NeuralConfig {
    NeuralConfig {
        word_rows: vocabulary.words.len() + super::RESERVED,
        word_dim: shape.word_dim,
        suffix_bits: shape.suffix_bits,
        suffix_dim: shape.suffix_dim,
        tag_rows: vocabulary.tags.len() + super::RESERVED,
        tag_dim: shape.tag_dim,
        morph_rows: vocabulary.morph_features.len() + 1,
        morph_dim: shape.morph_dim,
        hidden: shape.hidden,
        layers: shape.layers,
        arc_dim: shape.arc_dim,
        label_dim: shape.label_dim,
        labels: vocabulary.labels.len(),
        tag_head: shape.tag_head,
    }
}

/// One training sentence as ids, with its gold heads and label ids.
#[derive(Debug, Clone)]
pub struct Gold {
    pub ids: SentenceIds,
    /// `heads[m]` for m ≥ 1 (index 0 unused).
    pub heads: Vec<usize>,
    /// `labels[m - 1]`: label id of word m.
    pub labels: Vec<u32>,
    /// `tags[m - 1]`: tag id of word m (what a tag head learns).
    pub tags: Vec<u32>,
}

/// Turns examples into ids under a scorer's vocabulary.
pub fn gold(scorer: &NeuralScorer, examples: &[Example]) -> Vec<Gold> {
    examples
        .iter()
        .map(|e| Gold {
            ids: scorer.ids(e.tagged()),
            heads: e.heads.clone(),
            labels: e
                .labels
                .iter()
                .map(|l| scorer.vocabulary.labels.binary_search(l).unwrap_or(0) as u32)
                .collect(),
            tags: e
                .tags
                .iter()
                .map(|t| {
                    scorer
                        .vocabulary
                        .tags
                        .binary_search(t)
                        .map_or(super::UNKNOWN, |i| (i + super::RESERVED) as u32)
                })
                .collect(),
        })
        .collect()
}

/// The summed training loss of a batch (arc and label cross-entropies of every word) and its
/// number of words, with dropout when `dropout` is given. `ids` are the sentences' inputs as the
/// network sees them (after word dropout, and with ids into `parameters`' embedding tables).
/// Public for the gradient checks.
pub fn batch_loss(
    config: &NeuralConfig,
    parameters: &Parameters,
    batch: &[&Gold],
    ids: &[&SentenceIds],
    dropout: &mut Option<Dropout>,
) -> candle_core::Result<(Tensor, usize)> {
    let inputs = batch_inputs(ids);
    let network = Network {
        config,
        p: parameters,
    };
    let encoded = network.encode(&inputs, dropout)?;
    let t = inputs.positions;
    let dtype = encoded.arc_head.dtype();
    // Rows = every real word of every sentence, as (sentence × positions + word).
    let mut rows = Vec::new();
    let mut gold_heads = Vec::new();
    let mut gold_head_rows = Vec::new();
    let mut gold_labels = Vec::new();
    let mut gold_tags = Vec::new();
    let mut mask = Vec::new();
    for (s, g) in batch.iter().enumerate() {
        let len = g.ids.len();
        for m in 1..len {
            rows.push((s * t + m) as u32);
            gold_heads.push(g.heads[m] as u32);
            gold_head_rows.push((s * t + g.heads[m]) as u32);
            gold_labels.push(g.labels[m - 1]);
            gold_tags.push(g.tags.get(m - 1).copied().unwrap_or(super::UNKNOWN));
            mask.extend((0..t).map(|h| if h < len && h != m { 0.0f32 } else { -1e9 }));
        }
    }
    let n = rows.len();
    let device = Device::Cpu;
    let rows = Tensor::from_vec(rows, n, &device)?;
    let mask = Tensor::from_vec(mask, (n, t), &device)?.to_dtype(dtype)?;
    let arcs = network
        .arc_scores(&encoded)?
        .reshape((inputs.batch * t, t))?
        .index_select(&rows, 0)?
        .add(&mask)?;
    let gold_heads = Tensor::from_vec(gold_heads, (n, 1), &device)?;
    let arc_loss = candle_nn::ops::log_softmax(&arcs, D::Minus1)?
        .gather(&gold_heads, 1)?
        .sum_all()?;
    let labels = network.label_scores(
        &encoded.label_dependent.flatten_to(1)?,
        &encoded.label_head.flatten_to(1)?,
        &rows,
        &Tensor::from_vec(gold_head_rows, n, &device)?,
    )?;
    let gold_labels = Tensor::from_vec(gold_labels, (n, 1), &device)?;
    let label_loss = candle_nn::ops::log_softmax(&labels, D::Minus1)?
        .gather(&gold_labels, 1)?
        .sum_all()?;
    let mut total = (arc_loss + label_loss)?;
    if let Some(tag_scores) = &encoded.tag_scores {
        let tags = tag_scores
            .reshape((inputs.batch * t, config.tag_rows))?
            .index_select(&rows, 0)?;
        let gold_tags = Tensor::from_vec(gold_tags, (n, 1), &device)?;
        let tag_loss = candle_nn::ops::log_softmax(&tags, D::Minus1)?
            .gather(&gold_tags, 1)?
            .sum_all()?;
        total = (total + tag_loss)?;
    }
    Ok((total.neg()?, n))
}

/// An embedding table trained with sparse ("lazy") Adam: a batch reads only a few hundred of its
/// rows, so only those rows are copied into the graph, get gradients and move (the moments of
/// the other rows wait). Dense updates of the whole tables cost more than the rest of a step.
#[derive(Debug)]
struct SparseTable {
    name: &'static str,
    dim: usize,
    values: Vec<f32>,
    first_moment: Vec<f32>,
    second_moment: Vec<f32>,
}

impl SparseTable {
    fn new(name: &'static str, tensor: &Tensor) -> candle_core::Result<SparseTable> {
        let (rows, dim) = tensor.dims2()?;
        Ok(SparseTable {
            name,
            dim,
            values: tensor.flatten_all()?.to_vec1()?,
            first_moment: vec![0.0; rows * dim],
            second_moment: vec![0.0; rows * dim],
        })
    }

    /// The rows `ids` uses, as a fresh variable, and `ids` renumbered into it.
    fn gather(&self, ids: &[u32]) -> candle_core::Result<(Var, Vec<u32>, Vec<u32>)> {
        let mut used: Vec<u32> = ids.to_vec();
        used.sort_unstable();
        used.dedup();
        let local: HashMap<u32, u32> = used
            .iter()
            .enumerate()
            .map(|(i, &r)| (r, i as u32))
            .collect();
        let mut rows = Vec::with_capacity(used.len() * self.dim);
        for &r in &used {
            let r = r as usize * self.dim;
            rows.extend_from_slice(&self.values[r..r + self.dim]);
        }
        let var = Var::from_vec(rows, (used.len(), self.dim), &Device::Cpu)?;
        Ok((var, used, ids.iter().map(|i| local[i]).collect()))
    }

    /// One Adam step on the rows `used` with their gradients `grad` (`used.len() × dim`).
    fn step(&mut self, used: &[u32], grad: &[f32], adam: &ParamsAdamW, step: i32, scale: f32) {
        let correct1 = 1.0 / (1.0 - adam.beta1.powi(step));
        let correct2 = 1.0 / (1.0 - adam.beta2.powi(step));
        let (b1, b2) = (adam.beta1 as f32, adam.beta2 as f32);
        for (k, &r) in used.iter().enumerate() {
            let base = r as usize * self.dim;
            for j in 0..self.dim {
                let g = grad[k * self.dim + j] * scale;
                let m = &mut self.first_moment[base + j];
                let v = &mut self.second_moment[base + j];
                *m = b1 * *m + (1.0 - b1) * g;
                *v = b2 * *v + (1.0 - b2) * g * g;
                let m_hat = f64::from(*m) * correct1;
                let v_hat = f64::from(*v) * correct2;
                self.values[base + j] -= (adam.lr * m_hat / (v_hat.sqrt() + adam.eps)) as f32;
            }
        }
    }

    fn tensor(&self) -> candle_core::Result<Tensor> {
        Tensor::from_vec(
            self.values.clone(),
            (self.values.len() / self.dim, self.dim),
            &Device::Cpu,
        )
    }
}

/// The four embedding tables, in the order their ids sit in [`SentenceIds`].
const TABLES: [&str; 4] = ["embed.word", "embed.tag", "embed.suffix", "embed.morph"];

fn table_ids(ids: &SentenceIds, table: usize) -> &[u32] {
    match table {
        0 => &ids.words,
        1 => &ids.tags,
        2 => &ids.suffixes,
        _ => &ids.morph,
    }
}

fn table_ids_mut(ids: &mut SentenceIds, table: usize) -> &mut Vec<u32> {
    match table {
        0 => &mut ids.words,
        1 => &mut ids.tags,
        2 => &mut ids.suffixes,
        _ => &mut ids.morph,
    }
}

/// Dev UAS and LAS (percent, all words) of a scorer on examples tagged as in use.
pub fn attachment(
    scorer: &NeuralScorer,
    dev: &[Example],
    decoder: Algorithm,
) -> Result<(f64, f64), NeuralError> {
    let (mut words, mut heads_right, mut both_right) = (0usize, 0usize, 0usize);
    for chunk in dev.chunks(64) {
        let sentences: Vec<TaggedSentence<'_>> = chunk.iter().map(Example::tagged).collect();
        for (scored, e) in scorer.score_batch(&sentences)?.iter().zip(chunk) {
            let tree = decode::decode(scored.arc_scores(), decoder, RootConstraint::SingleRoot);
            let labels = scored.best_labels(&tree.heads);
            for (m, head) in tree.heads.arcs() {
                words += 1;
                if head == e.heads[m] {
                    heads_right += 1;
                    if scorer.vocabulary.labels[labels[m - 1]] == e.labels[m - 1] {
                        both_right += 1;
                    }
                }
            }
        }
    }
    let pct = |x: usize| 100.0 * x as f64 / words.max(1) as f64;
    Ok((pct(heads_right), pct(both_right)))
}

fn detached(vars: &[(String, Var)], deep: bool) -> candle_core::Result<Parameters> {
    vars.iter()
        .map(|(name, var)| {
            let t = if deep {
                var.as_tensor().copy()?
            } else {
                var.as_tensor().detach()
            };
            Ok((name.clone(), t))
        })
        .collect()
}

/// Trains a neural scorer on `train` (tags and morphology as they will be predicted at parse
/// time, e.g. jackknifed) with early stopping on `dev` (tagged by the model's taggers).
///
/// With `threads` > 1 each mini-batch is split into that many parts by sentence, whose losses and
/// gradients are computed on their own threads and summed (data parallelism): a step's matrices
/// are too small for a parallel matrix product to pay.
pub fn train(
    train: &[Example],
    dev: &[Example],
    decoder: Algorithm,
    options: &NeuralOptions,
    threads: usize,
    progress: &mut dyn FnMut(&NeuralEpoch),
) -> Result<NeuralScorer, NeuralError> {
    let threads = threads.max(1);
    let (vocabulary, counts) = vocabulary(train, options.min_word_count);
    let config = config_for(&vocabulary, &options.shape);
    let initial = network::initial(&config, options.seed, DType::F32)?;
    let mut tables: Vec<SparseTable> = TABLES
        .iter()
        .map(|&name| SparseTable::new(name, &initial[name]))
        .collect::<candle_core::Result<_>>()?;
    let vars: Vec<(String, Var)> = initial
        .iter()
        .filter(|(name, _)| !TABLES.contains(&name.as_str()))
        .map(|(name, t)| Ok((name.clone(), Var::from_tensor(t)?)))
        .collect::<candle_core::Result<_>>()?;
    let mut scorer = NeuralScorer::new(config.clone(), vocabulary.clone(), initial);
    let examples = gold(&scorer, train);
    // The chance of dropping each word id to the unknown word.
    let mut drop_chance = vec![0.0f64; config.word_rows];
    for (i, w) in vocabulary.words.iter().enumerate() {
        let c = counts[w] as f64;
        drop_chance[i + super::RESERVED] =
            options.word_dropout_alpha / (options.word_dropout_alpha + c);
    }
    let mut adam = ParamsAdamW {
        lr: options.learning_rate,
        beta1: 0.9,
        beta2: 0.9,
        eps: 1e-8,
        weight_decay: 0.0,
    };
    let mut optimizer = AdamW::new(vars.iter().map(|(_, v)| v.clone()).collect(), adam.clone())?;
    let mut rng = SplitMix64::new(options.seed ^ 0x6e65_7572_616c);
    let mut best: Option<(f64, Parameters)> = None;
    let mut since_best = 0;
    let mut step = 0i32;
    let current = |tables: &[SparseTable],
                   vars: &[(String, Var)],
                   deep: bool|
     -> candle_core::Result<Parameters> {
        let mut p = detached(vars, deep)?;
        for table in tables {
            p.insert(table.name.to_string(), table.tensor()?);
        }
        Ok(p)
    };
    for epoch in 1..=options.epochs {
        let started = Instant::now();
        // Length-sorted batches with a fresh random order among equal lengths, then the batches
        // themselves in random order.
        let mut order: Vec<usize> = (0..examples.len()).collect();
        shuffle(
            &mut order,
            options.seed.wrapping_mul(7_919).wrapping_add(epoch as u64),
        );
        order.sort_by_key(|&i| examples[i].ids.len());
        let mut batches: Vec<&[usize]> = order.chunks(options.batch_sentences.max(1)).collect();
        shuffle(
            &mut batches,
            options
                .seed
                .wrapping_mul(104_729)
                .wrapping_add(epoch as u64),
        );
        let (mut loss_sum, mut loss_words) = (0.0f64, 0usize);
        for batch in batches {
            step += 1;
            let golds: Vec<&Gold> = batch.iter().map(|&i| &examples[i]).collect();
            let mut ids: Vec<SentenceIds> = golds.iter().map(|g| g.ids.clone()).collect();
            for sentence in ids.iter_mut() {
                for w in sentence.words.iter_mut() {
                    let chance = drop_chance[*w as usize];
                    if chance > 0.0 && (rng.next_f64()) < chance {
                        *w = super::UNKNOWN;
                    }
                }
            }
            // The rows of each table this batch reads, as variables; ids renumbered into them.
            let mut parameters: Parameters = vars
                .iter()
                .map(|(name, var)| (name.clone(), var.as_tensor().clone()))
                .collect();
            let mut gathered = Vec::with_capacity(TABLES.len());
            for (k, table) in tables.iter().enumerate() {
                let all: Vec<u32> = ids
                    .iter()
                    .flat_map(|s| table_ids(s, k).iter().copied())
                    .collect();
                let (var, used, local) = table.gather(&all)?;
                let mut at = 0;
                for sentence in ids.iter_mut() {
                    let slot = table_ids_mut(sentence, k);
                    let len = slot.len();
                    slot.copy_from_slice(&local[at..at + len]);
                    at += len;
                }
                parameters.insert(table.name.to_string(), var.as_tensor().clone());
                gathered.push((var, used));
            }
            // Parts of about equal word counts, one per thread.
            let total_words: usize = golds.iter().map(|g| g.ids.len() - 1).sum();
            let mut parts: Vec<Vec<usize>> = vec![Vec::new(); threads];
            let mut filled = 0usize;
            for (i, g) in golds.iter().enumerate() {
                let part = (filled * threads / total_words.max(1)).min(threads - 1);
                parts[part].push(i);
                filled += g.ids.len() - 1;
            }
            let seeds: Vec<u64> = parts.iter().map(|_| rng.next_u64()).collect();
            let run_part = |part: &[usize],
                            seed: u64|
             -> candle_core::Result<
                Option<(f64, candle_core::backprop::GradStore)>,
            > {
                if part.is_empty() {
                    return Ok(None);
                }
                let part_golds: Vec<&Gold> = part.iter().map(|&i| golds[i]).collect();
                let part_ids: Vec<&SentenceIds> = part.iter().map(|&i| &ids[i]).collect();
                let mut dropout = Some(Dropout {
                    rng: SplitMix64::new(seed),
                    rate: options.dropout,
                });
                let (loss, _) =
                    batch_loss(&config, &parameters, &part_golds, &part_ids, &mut dropout)?;
                let value = f64::from(loss.to_scalar::<f32>()?);
                Ok(Some((value, loss.backward()?)))
            };
            let results: Vec<candle_core::Result<Option<(f64, candle_core::backprop::GradStore)>>> =
                if threads == 1 {
                    vec![run_part(&parts[0], seeds[0])]
                } else {
                    std::thread::scope(|scope| {
                        let handles: Vec<_> = parts
                            .iter()
                            .zip(&seeds)
                            .map(|(part, &seed)| scope.spawn(move || run_part(part, seed)))
                            .collect();
                        handles
                            .into_iter()
                            .map(|h| h.join().expect("training thread"))
                            .collect()
                    })
                };
            let mut stores = Vec::with_capacity(threads);
            for r in results {
                if let Some((value, grads)) = r? {
                    loss_sum += value;
                    stores.push(grads);
                }
            }
            loss_words += total_words;
            // Gradients of the mean loss per word, summed over the parts.
            let scale = 1.0 / total_words.max(1) as f64;
            let sum_of = |t: &Tensor| -> candle_core::Result<Option<Tensor>> {
                let mut total: Option<Tensor> = None;
                for store in &stores {
                    if let Some(g) = store.get(t) {
                        total = Some(match total {
                            None => g.clone(),
                            Some(sum) => sum.add(g)?,
                        });
                    }
                }
                total.map(|g| g.affine(scale, 0.0)).transpose()
            };
            let mut dense = candle_core::backprop::GradStore::default();
            let mut norm_sq = 0.0f64;
            for (_, var) in &vars {
                if let Some(g) = sum_of(var.as_tensor())? {
                    norm_sq += f64::from(g.sqr()?.sum_all()?.to_scalar::<f32>()?);
                    dense.insert(var.as_tensor(), g);
                }
            }
            let mut sparse = Vec::with_capacity(gathered.len());
            for (var, _) in &gathered {
                let g: Vec<f32> = match sum_of(var.as_tensor())? {
                    Some(g) => g.flatten_all()?.to_vec1()?,
                    None => vec![0.0; var.elem_count()],
                };
                norm_sq += g.iter().map(|x| f64::from(*x) * f64::from(*x)).sum::<f64>();
                sparse.push(g);
            }
            let norm = norm_sq.sqrt();
            let clip = if norm > options.clip_norm {
                options.clip_norm / norm
            } else {
                1.0
            };
            if clip < 1.0 {
                for (_, var) in &vars {
                    if let Some(g) = dense.remove(var.as_tensor()) {
                        dense.insert(var.as_tensor(), g.affine(clip, 0.0)?);
                    }
                }
            }
            optimizer.step(&dense)?;
            for ((table, (_, used)), g) in tables.iter_mut().zip(&gathered).zip(&sparse) {
                table.step(used, g, &adam, step, clip as f32);
            }
        }
        scorer.parameters = current(&tables, &vars, false)?;
        let dev_scores = if dev.is_empty() {
            None
        } else {
            Some(attachment(&scorer, dev, decoder)?)
        };
        let report = NeuralEpoch {
            epoch,
            loss: loss_sum / loss_words.max(1) as f64,
            dev_uas: dev_scores.map(|s| s.0),
            dev_las: dev_scores.map(|s| s.1),
            seconds: started.elapsed().as_secs_f64(),
        };
        progress(&report);
        match report.dev_uas {
            Some(uas) if best.as_ref().is_none_or(|(b, _)| uas > *b) => {
                best = Some((uas, current(&tables, &vars, true)?));
                since_best = 0;
            }
            Some(_) => {
                since_best += 1;
                if since_best >= options.patience {
                    break;
                }
                // A plateau: smaller steps from here on (common practice).
                adam.lr *= options.plateau_decay;
                optimizer.set_learning_rate(adam.lr);
            }
            None => {}
        }
    }
    let parameters = match best {
        Some((_, p)) => p,
        None => current(&tables, &vars, true)?,
    };
    Ok(NeuralScorer::new(config, vocabulary, parameters))
}
