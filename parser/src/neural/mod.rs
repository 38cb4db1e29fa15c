//! The neural kind of arc scorer: a BiLSTM encoder with biaffine arc and bilinear label scorers
//! ([`network`]), trained with a per-word head-selection loss ([`train`]). It is still
//! arc-factored: a sentence's arc scores form one [`ScoreMatrix`], read by the same decoders and
//! marginals as the linear kind's.
//!
//! Inputs per word: an embedding of its lowercased form when the form was frequent enough in
//! training (else a shared unknown row), the sum of hashed embeddings of its suffixes of 1 to 5
//! characters and prefixes of 3 and 4 (suffixes carry most of the morphology of a suffixing
//! language, prefixes its stem; together they give rare and unseen words a representation), an
//! embedding of its predicted tag, and the sum of embeddings
//! of its predicted morphological features.

pub mod lstm;
pub mod network;
pub mod train;

use std::collections::HashMap;
use std::path::Path;

use candle_core::{D, DType, Device, Tensor};
use serde::{Deserialize, Serialize};

use crate::decode::{Heads, ScoreMatrix};
use crate::hashing::{bucket, hash_str, mix};
use crate::scorer::{ScoredSentence, TaggedSentence};
use crate::text;

use network::{AFFIXES, BatchInputs, MORPH_SLOTS, Network, Parameters};

/// Word and tag ids 0 and 1 are reserved.
const UNKNOWN: u32 = 0;
const ROOT: u32 = 1;
const RESERVED: usize = 2;
const ROOT_FORM: &str = "<root>";

/// The network's shape; stored with the model so that it loads on its own.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NeuralConfig {
    pub word_rows: usize,
    pub word_dim: usize,
    pub suffix_bits: u32,
    pub suffix_dim: usize,
    pub tag_rows: usize,
    pub tag_dim: usize,
    pub morph_rows: usize,
    pub morph_dim: usize,
    /// LSTM state size per direction.
    pub hidden: usize,
    /// Stacked BiLSTM layers.
    pub layers: usize,
    pub arc_dim: usize,
    pub label_dim: usize,
    pub labels: usize,
    /// Tags are predicted by a second head on the encoder's first layer (multi-task), and the
    /// encoder reads no tags (its tag input is the unknown tag throughout). Absent in models
    /// that read the linear tagger's tags: false.
    #[serde(default)]
    pub tag_head: bool,
}

impl NeuralConfig {
    pub fn input_dim(&self) -> usize {
        self.word_dim + self.suffix_dim + self.tag_dim + self.morph_dim
    }
}

/// The sizes a new model is trained with (the vocabulary sizes come from the data).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Shape {
    pub word_dim: usize,
    pub suffix_bits: u32,
    pub suffix_dim: usize,
    pub tag_dim: usize,
    pub morph_dim: usize,
    pub hidden: usize,
    pub layers: usize,
    pub arc_dim: usize,
    pub label_dim: usize,
    /// Predict tags with a second head on the encoder instead of reading the tagger's.
    pub tag_head: bool,
}

impl Default for Shape {
    fn default() -> Self {
        Shape {
            word_dim: 100,
            suffix_bits: 15,
            suffix_dim: 64,
            tag_dim: 32,
            morph_dim: 32,
            hidden: 200,
            layers: 2,
            arc_dim: 256,
            label_dim: 96,
            tag_head: true,
        }
    }
}

/// The vocabularies that map a sentence to the network's ids.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Vocabulary {
    /// Lowercased forms with an embedding of their own (id = index + 2).
    pub words: Vec<String>,
    /// Tags (id = index + 2).
    pub tags: Vec<String>,
    /// Morphological features such as `Case=Dat` (id = index + 1; 0 = none).
    pub morph_features: Vec<String>,
    /// Dependency labels, sorted.
    pub labels: Vec<String>,
}

/// Vocabulary lookups.
#[derive(Debug, Clone)]
struct Index {
    words: HashMap<String, u32>,
    tags: HashMap<String, u32>,
    morph: HashMap<String, u32>,
}

impl Index {
    fn new(v: &Vocabulary) -> Index {
        let ids = |items: &[String], offset: usize| {
            items
                .iter()
                .enumerate()
                .map(|(i, s)| (s.clone(), (i + offset) as u32))
                .collect()
        };
        Index {
            words: ids(&v.words, RESERVED),
            tags: ids(&v.tags, RESERVED),
            morph: ids(&v.morph_features, 1),
        }
    }
}

/// A trained neural scorer.
#[derive(Debug, Clone)]
pub struct NeuralScorer {
    pub config: NeuralConfig,
    pub vocabulary: Vocabulary,
    pub parameters: Parameters,
    index: Index,
}

/// Errors of the neural scorer's tensors (shape mismatches, a missing parameter in a file).
#[derive(Debug, thiserror::Error)]
#[error("neural scorer: {0}")]
pub struct NeuralError(#[from] pub candle_core::Error);

/// One sentence's ids before batching.
#[derive(Debug, Clone)]
pub struct SentenceIds {
    pub words: Vec<u32>,
    pub tags: Vec<u32>,
    pub suffixes: Vec<u32>,
    pub morph: Vec<u32>,
}

impl SentenceIds {
    /// Positions, the root included.
    pub fn len(&self) -> usize {
        self.words.len()
    }

    pub fn is_empty(&self) -> bool {
        self.words.is_empty()
    }
}

/// Pads sentences to one length and flattens them into a batch.
pub fn batch_inputs(sentences: &[&SentenceIds]) -> BatchInputs {
    let positions = sentences.iter().map(|s| s.len()).max().unwrap_or(1);
    let batch = sentences.len();
    let mut inputs = BatchInputs {
        batch,
        positions,
        lengths: sentences.iter().map(|s| s.len()).collect(),
        words: Vec::with_capacity(batch * positions),
        tags: Vec::with_capacity(batch * positions),
        suffixes: Vec::with_capacity(batch * positions * AFFIXES),
        morph: Vec::with_capacity(batch * positions * MORPH_SLOTS),
    };
    for s in sentences {
        let pad = positions - s.len();
        inputs.words.extend(
            s.words
                .iter()
                .copied()
                .chain(std::iter::repeat_n(UNKNOWN, pad)),
        );
        inputs.tags.extend(
            s.tags
                .iter()
                .copied()
                .chain(std::iter::repeat_n(UNKNOWN, pad)),
        );
        inputs.suffixes.extend(
            s.suffixes
                .iter()
                .copied()
                .chain(std::iter::repeat_n(0, pad * AFFIXES)),
        );
        inputs.morph.extend(
            s.morph
                .iter()
                .copied()
                .chain(std::iter::repeat_n(0, pad * MORPH_SLOTS)),
        );
    }
    inputs
}

impl NeuralScorer {
    pub fn new(config: NeuralConfig, vocabulary: Vocabulary, parameters: Parameters) -> Self {
        let index = Index::new(&vocabulary);
        NeuralScorer {
            config,
            vocabulary,
            parameters,
            index,
        }
    }

    /// The dependency labels, sorted (what label ids index).
    pub fn labels(&self) -> &[String] {
        &self.vocabulary.labels
    }

    /// A sentence's ids: the root at position 0, then its words.
    pub fn ids(&self, sentence: TaggedSentence<'_>) -> SentenceIds {
        let n = sentence.forms.len() + 1;
        let mut ids = SentenceIds {
            words: Vec::with_capacity(n),
            tags: Vec::with_capacity(n),
            suffixes: Vec::with_capacity(n * AFFIXES),
            morph: Vec::with_capacity(n * MORPH_SLOTS),
        };
        let bits = self.config.suffix_bits;
        ids.words.push(ROOT);
        ids.tags.push(ROOT);
        for k in 1..=AFFIXES {
            ids.suffixes
                .push(bucket(mix(k as u64, hash_str(ROOT_FORM)), bits) as u32);
        }
        ids.morph.extend([0; MORPH_SLOTS]);
        for (i, form) in sentence.forms.iter().enumerate() {
            let lower = text::lowercase(form);
            for k in 1..=5 {
                let suffix = text::suffix(&lower, k);
                ids.suffixes
                    .push(bucket(mix(k as u64, hash_str(suffix)), bits) as u32);
            }
            for (k, chars) in [(6u64, 3), (7, 4)] {
                let prefix = text::prefix(&lower, chars);
                ids.suffixes
                    .push(bucket(mix(k, hash_str(prefix)), bits) as u32);
            }
            ids.words
                .push(self.index.words.get(&lower).copied().unwrap_or(UNKNOWN));
            let tag = sentence.tags.get(i).map_or("", String::as_str);
            ids.tags.push(if self.config.tag_head {
                UNKNOWN
            } else {
                self.index.tags.get(tag).copied().unwrap_or(UNKNOWN)
            });
            let morph = sentence.morph.get(i).map_or("_", String::as_str);
            let mut slots = [0u32; MORPH_SLOTS];
            for (slot, feature) in slots
                .iter_mut()
                .zip(morph.split('|').filter(|f| f.contains('=')))
            {
                *slot = self.index.morph.get(feature).copied().unwrap_or(0);
            }
            ids.morph.extend(slots);
        }
        ids
    }

    fn network(&self) -> Network<'_> {
        Network {
            config: &self.config,
            p: &self.parameters,
        }
    }

    /// Scores sentences together (one padded batch through the encoder).
    pub fn score_batch(
        &self,
        sentences: &[TaggedSentence<'_>],
    ) -> Result<Vec<NeuralSentence<'_>>, NeuralError> {
        if sentences.is_empty() {
            return Ok(Vec::new());
        }
        let ids: Vec<SentenceIds> = sentences.iter().map(|s| self.ids(*s)).collect();
        let refs: Vec<&SentenceIds> = ids.iter().collect();
        let inputs = batch_inputs(&refs);
        let network = self.network();
        let encoded = network.encode(&inputs, &mut None)?;
        let arcs = network.arc_scores(&encoded)?; // (batch, modifier, head)
        let t = inputs.positions;
        let arcs: Vec<f32> = arcs.flatten_all()?.to_vec1()?;
        let tag_ids: Option<Vec<u32>> = match &encoded.tag_scores {
            Some(t) => Some(t.argmax(D::Minus1)?.flatten_all()?.to_vec1()?),
            None => None,
        };
        let label_dependent = encoded.label_dependent.flatten_to(1)?;
        let label_head = encoded.label_head.flatten_to(1)?;
        let mut out = Vec::with_capacity(sentences.len());
        for (s, &len) in inputs.lengths.iter().enumerate() {
            let base = s * t * t;
            let mut flat = vec![0.0f64; len * len];
            for m in 1..len {
                for h in 0..len {
                    flat[h * len + m] = f64::from(arcs[base + m * t + h]);
                }
            }
            let scores = ScoreMatrix::from_row_major(len - 1, flat)
                .map_err(|e| NeuralError(candle_core::Error::Msg(e.to_string())))?;
            let tags = tag_ids.as_ref().map(|ids| {
                (1..len)
                    .map(|m| {
                        let id = ids[s * t + m] as usize;
                        let tag = id
                            .checked_sub(RESERVED)
                            .and_then(|i| self.vocabulary.tags.get(i));
                        tag.or(self.vocabulary.tags.first())
                            .cloned()
                            .unwrap_or_default()
                    })
                    .collect()
            });
            out.push(NeuralSentence {
                scorer: self,
                scores,
                tags,
                label_dependent: label_dependent.narrow(0, s * t, len)?,
                label_head: label_head.narrow(0, s * t, len)?,
            });
        }
        Ok(out)
    }

    /// Scores one sentence.
    pub fn score(&self, sentence: TaggedSentence<'_>) -> Result<NeuralSentence<'_>, NeuralError> {
        Ok(self
            .score_batch(&[sentence])?
            .pop()
            .expect("one sentence in, one out"))
    }

    /// Writes the parameters in the safetensors format.
    pub fn save_parameters(&self, path: &Path) -> Result<(), NeuralError> {
        let map: HashMap<String, Tensor> = self.parameters.clone().into_iter().collect();
        candle_core::safetensors::save(&map, path)?;
        Ok(())
    }

    /// Reads parameters and checks each one's shape against the configuration.
    pub fn load_parameters(config: &NeuralConfig, path: &Path) -> Result<Parameters, String> {
        let loaded =
            candle_core::safetensors::load(path, &Device::Cpu).map_err(|e| e.to_string())?;
        let expected = network::initial(config, 0, DType::F32).map_err(|e| e.to_string())?;
        let mut parameters = Parameters::new();
        for (name, template) in &expected {
            let tensor = loaded
                .get(name)
                .ok_or_else(|| format!("parameter {name} is missing"))?;
            if tensor.dims() != template.dims() {
                return Err(format!(
                    "parameter {name} has shape {:?}, the configuration says {:?}",
                    tensor.dims(),
                    template.dims()
                ));
            }
            if tensor.dtype() != DType::F32 {
                return Err(format!(
                    "parameter {name} is {:?}, expected f32",
                    tensor.dtype()
                ));
            }
            parameters.insert(name.clone(), tensor.clone());
        }
        if let Some(extra) = loaded.keys().find(|k| !expected.contains_key(*k)) {
            return Err(format!("unexpected parameter {extra}"));
        }
        Ok(parameters)
    }
}

/// A sentence scored by the neural scorer.
#[derive(Debug)]
pub struct NeuralSentence<'a> {
    scorer: &'a NeuralScorer,
    pub scores: ScoreMatrix,
    /// The tag head's tags, when the model has one.
    pub tags: Option<Vec<String>>,
    /// `(positions, label_dim)` rows of the label MLPs.
    label_dependent: Tensor,
    label_head: Tensor,
}

impl NeuralSentence<'_> {
    fn labels_of(&self, arcs: &[(usize, usize)]) -> Result<Vec<usize>, NeuralError> {
        if arcs.is_empty() {
            return Ok(Vec::new());
        }
        let ids = |f: fn(&(usize, usize)) -> usize| {
            Tensor::from_vec(
                arcs.iter().map(|a| f(a) as u32).collect::<Vec<u32>>(),
                arcs.len(),
                &Device::Cpu,
            )
        };
        let heads = ids(|a| a.0)?;
        let modifiers = ids(|a| a.1)?;
        let scores = self.scorer.network().label_scores(
            &self.label_dependent,
            &self.label_head,
            &modifiers,
            &heads,
        )?;
        let best: Vec<u32> = scores.argmax(D::Minus1)?.to_vec1()?;
        Ok(best.into_iter().map(|b| b as usize).collect())
    }
}

impl ScoredSentence for NeuralSentence<'_> {
    fn arc_scores(&self) -> &ScoreMatrix {
        &self.scores
    }

    fn best_label(&self, head: usize, modifier: usize) -> usize {
        self.labels_of(&[(head, modifier)])
            .ok()
            .and_then(|l| l.first().copied())
            .unwrap_or(0)
    }

    fn predicted_tags(&self) -> Option<Vec<String>> {
        self.tags.clone()
    }

    fn best_labels(&self, heads: &Heads) -> Vec<usize> {
        let arcs: Vec<(usize, usize)> = heads.arcs().map(|(m, h)| (h, m)).collect();
        self.labels_of(&arcs)
            .unwrap_or_else(|_| arcs.iter().map(|_| 0).collect())
    }
}
