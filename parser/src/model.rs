//! A trained model: arc weights, label weights, the taggers, and the settings they were trained
//! with; saved as a directory in a format of our own (`arcwright-model/1`): `model.json`
//! (settings, tag and label inventories) plus three little-endian f32 weight files.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::calibration::{LogitMaps, Temperatures};
use crate::decode::Algorithm;
use crate::features::FeatureConfig;
use crate::neural::{NeuralConfig, NeuralScorer, Vocabulary};
use crate::pipeline::{self, ParseOptions, Parsed, StageObserver, Unobserved};
use crate::scorer::{ArcScorer, LinearScorer};
use crate::tagger::Tagger;
use crate::tokenize::Abbreviations;

pub const FORMAT: &str = "arcwright-model/1";

/// A trained parser with its taggers.
#[derive(Debug, Clone)]
pub struct Model {
    /// Arc and label scoring.
    pub scorer: ArcScorer,
    pub tagger: Tagger,
    /// Predicts the morphology summary (Case, Possessive) when FEATS are not given.
    pub morph_tagger: Option<Tagger>,
    /// Decoder matching the training data (non-projective when it has crossing arcs).
    pub default_decoder: Algorithm,
    /// Tokens ending in a full stop that do not end a sentence, for splitting raw text.
    pub abbreviations: Abbreviations,
    /// Arc scores are divided by the decoder's temperature before confidences are computed
    /// (fitted on dev data so that they are calibrated; 1 when not fitted). Decoding does not
    /// use them.
    pub confidence_temperatures: Temperatures,
    /// Then each chosen head's marginal goes through the decoder's logistic map (fitted on dev
    /// after the temperature; the identity when not fitted).
    pub confidence_maps: LogitMaps,
    /// Free-form facts about the training run (data fingerprint, epochs, scores).
    pub training: serde_json::Value,
}

/// Errors loading or saving a model directory.
#[derive(Debug, thiserror::Error)]
pub enum ModelError {
    #[error("{path}: {source}")]
    Io {
        path: String,
        source: std::io::Error,
    },
    #[error("{path}: not a model description: {message}")]
    Format { path: String, message: String },
}

/// What a model directory says about itself, read from `model.json` alone (no weights): for
/// listings and store manifests.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelSummary {
    pub format: String,
    /// `linear` or `neural`.
    pub kind: String,
    /// Feature and decoder settings.
    pub settings: serde_json::Value,
    pub labels: Vec<String>,
    /// FNV-64 fingerprint of the training data, when the training facts record it.
    pub training_fingerprint: Option<String>,
}

fn linear_kind() -> String {
    "linear".to_string()
}

/// What a neural model adds to the description: its network's shape and the vocabularies that
/// are not shared with the linear kind.
#[derive(Serialize, Deserialize)]
struct NeuralDescription {
    config: NeuralConfig,
    words: Vec<String>,
    morph_features: Vec<String>,
}

#[derive(Serialize, Deserialize)]
struct Description {
    format: String,
    /// `linear` (absent in models written before there was a second kind) or `neural`.
    #[serde(default = "linear_kind")]
    kind: String,
    /// Linear kind only (0 in a neural model).
    #[serde(default)]
    hash_bits: u32,
    morphology: bool,
    tags: Vec<String>,
    labels: Vec<String>,
    /// Linear kind only (0 in a neural model).
    #[serde(default)]
    label_bits: u32,
    tagger_tags: Vec<String>,
    tagger_bits: u32,
    morph_tags: Option<Vec<String>>,
    default_decoder: String,
    /// Absent in models written before abbreviations were learned: none.
    #[serde(default)]
    abbreviations: Vec<String>,
    /// Absent in models written before confidences were calibrated: 1 for both decoders.
    #[serde(default)]
    confidence_temperatures: Temperatures,
    /// Absent in models written before the logistic maps: the identity for both decoders.
    #[serde(default)]
    confidence_logit_maps: LogitMaps,
    /// The neural kind's network and vocabularies; its weights are in `neural.safetensors`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    neural: Option<NeuralDescription>,
    training: serde_json::Value,
}

/// The neural kind's weight file.
const NEURAL_WEIGHTS: &str = "neural.safetensors";

fn write_f32(path: &Path, values: &[f32]) -> Result<(), ModelError> {
    let bytes: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    std::fs::write(path, bytes).map_err(|source| ModelError::Io {
        path: path.display().to_string(),
        source,
    })
}

fn read_f32(path: &Path, expected: usize) -> Result<Vec<f32>, ModelError> {
    let bytes = std::fs::read(path).map_err(|source| ModelError::Io {
        path: path.display().to_string(),
        source,
    })?;
    if bytes.len() != expected * 4 {
        return Err(ModelError::Format {
            path: path.display().to_string(),
            message: format!(
                "{} bytes, expected {} ({} weights)",
                bytes.len(),
                expected * 4,
                expected
            ),
        });
    }
    Ok(crate::perceptron::weight_table_from(
        bytes
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])),
    ))
}

fn read_description(dir: &Path) -> Result<Description, ModelError> {
    let path = dir.join("model.json");
    let text = std::fs::read_to_string(&path).map_err(|source| ModelError::Io {
        path: path.display().to_string(),
        source,
    })?;
    let format_error = |message: String| ModelError::Format {
        path: path.display().to_string(),
        message,
    };
    let d: Description = serde_json::from_str(&text).map_err(|e| format_error(e.to_string()))?;
    if d.format != FORMAT {
        return Err(format_error(format!(
            "format {:?}; this build reads {FORMAT:?}",
            d.format
        )));
    }
    Ok(d)
}

/// The vocabulary sizes a neural configuration promises, and sizes a loader can afford.
fn check_neural(config: &NeuralConfig, vocabulary: &Vocabulary) -> Result<(), String> {
    let expect = |what: &str, found: usize, expected: usize| {
        if found == expected {
            Ok(())
        } else {
            Err(format!(
                "neural {what} is {found}, the vocabulary gives {expected}"
            ))
        }
    };
    expect("word_rows", config.word_rows, vocabulary.words.len() + 2)?;
    expect("tag_rows", config.tag_rows, vocabulary.tags.len() + 2)?;
    expect(
        "morph_rows",
        config.morph_rows,
        vocabulary.morph_features.len() + 1,
    )?;
    expect("labels", config.labels, vocabulary.labels.len())?;
    if config.labels == 0 {
        return Err("neural model without labels".to_string());
    }
    if !(8..=22).contains(&config.suffix_bits) {
        return Err(format!(
            "neural suffix_bits {} outside 8..=22",
            config.suffix_bits
        ));
    }
    // Each dimension at most 4096 and at least 1, at most 8 layers: enough for any model this
    // build trains, and a bound on what a damaged file can make the loader allocate.
    for (what, value) in [
        ("word_dim", config.word_dim),
        ("suffix_dim", config.suffix_dim),
        ("tag_dim", config.tag_dim),
        ("morph_dim", config.morph_dim),
        ("hidden", config.hidden),
        ("arc_dim", config.arc_dim),
        ("label_dim", config.label_dim),
    ] {
        if !(1..=4096).contains(&value) {
            return Err(format!("neural {what} {value} outside 1..=4096"));
        }
    }
    if !(1..=8).contains(&config.layers) {
        return Err(format!("neural layers {} outside 1..=8", config.layers));
    }
    Ok(())
}

impl Model {
    /// Reads `model.json` of a model directory (not the weights).
    pub fn summary(dir: &Path) -> Result<ModelSummary, ModelError> {
        let d = read_description(dir)?;
        Ok(ModelSummary {
            format: d.format,
            kind: d.kind.clone(),
            settings: serde_json::json!({
                "kind": d.kind,
                "hash_bits": d.hash_bits,
                "morphology": d.morphology,
                "label_bits": d.label_bits,
                "default_decoder": d.default_decoder,
            }),
            labels: d.labels,
            training_fingerprint: d
                .training
                .get("train_fingerprint_fnv64")
                .and_then(|f| f.as_str())
                .map(str::to_string),
        })
    }

    /// The linear scorer, when the model is of the linear kind.
    pub fn linear(&self) -> Option<&LinearScorer> {
        match &self.scorer {
            ArcScorer::Linear(linear) => Some(linear),
            ArcScorer::Neural(_) => None,
        }
    }

    /// The linear scorer, for training.
    pub fn linear_mut(&mut self) -> Option<&mut LinearScorer> {
        match &mut self.scorer {
            ArcScorer::Linear(linear) => Some(linear),
            ArcScorer::Neural(_) => None,
        }
    }

    pub fn save(&self, dir: &Path) -> Result<(), ModelError> {
        let io = |source| ModelError::Io {
            path: dir.display().to_string(),
            source,
        };
        std::fs::create_dir_all(dir).map_err(io)?;
        let mut description = Description {
            format: FORMAT.to_string(),
            kind: self.scorer.kind().to_string(),
            hash_bits: 0,
            morphology: self.scorer.uses_morphology(),
            tags: Vec::new(),
            labels: self.scorer.labels().to_vec(),
            label_bits: 0,
            tagger_tags: self.tagger.tags.clone(),
            tagger_bits: self.tagger.bits,
            morph_tags: self.morph_tagger.as_ref().map(|t| t.tags.clone()),
            default_decoder: self.default_decoder.name().to_string(),
            abbreviations: self.abbreviations.to_list(),
            confidence_temperatures: self.confidence_temperatures,
            confidence_logit_maps: self.confidence_maps,
            neural: None,
            training: self.training.clone(),
        };
        match &self.scorer {
            ArcScorer::Linear(linear) => {
                description.hash_bits = linear.features.hash_bits;
                description.tags = linear.tags.clone();
                description.label_bits = linear.label_bits;
                write_f32(&dir.join("arcs.f32"), &linear.arc_weights)?;
                write_f32(&dir.join("labels.f32"), &linear.label_weights)?;
            }
            ArcScorer::Neural(neural) => {
                description.tags = neural.vocabulary.tags.clone();
                description.neural = Some(NeuralDescription {
                    config: neural.config.clone(),
                    words: neural.vocabulary.words.clone(),
                    morph_features: neural.vocabulary.morph_features.clone(),
                });
                let path = dir.join(NEURAL_WEIGHTS);
                neural
                    .save_parameters(&path)
                    .map_err(|e| ModelError::Format {
                        path: path.display().to_string(),
                        message: e.to_string(),
                    })?;
            }
        }
        let json = serde_json::to_string_pretty(&description).map_err(|e| ModelError::Format {
            path: dir.display().to_string(),
            message: e.to_string(),
        })?;
        let path = dir.join("model.json");
        std::fs::write(&path, json).map_err(|source| ModelError::Io {
            path: path.display().to_string(),
            source,
        })?;
        write_f32(&dir.join("tagger.f32"), &self.tagger.weights)?;
        if let Some(morph) = &self.morph_tagger {
            write_f32(&dir.join("morph.f32"), &morph.weights)?;
        }
        Ok(())
    }

    pub fn load(dir: &Path) -> Result<Model, ModelError> {
        let d = read_description(dir)?;
        let format_error = |message: String| ModelError::Format {
            path: dir.join("model.json").display().to_string(),
            message,
        };
        if !(10..=30).contains(&d.tagger_bits) {
            return Err(format_error("tagger_bits outside 10..=30".to_string()));
        }
        if !d.confidence_temperatures.valid() {
            return Err(format_error(format!(
                "confidence_temperatures {:?}: each must be a positive number",
                d.confidence_temperatures
            )));
        }
        let maps = d.confidence_logit_maps;
        if !(maps.projective.valid() && maps.non_projective.valid()) {
            return Err(format_error(format!(
                "confidence_logit_maps {maps:?}: each slope must be a positive number and each \
                 offset a number"
            )));
        }
        let default_decoder = Algorithm::from_name(&d.default_decoder)
            .ok_or_else(|| format_error(format!("unknown decoder {:?}", d.default_decoder)))?;
        let tagger = Tagger {
            tags: d.tagger_tags,
            bits: d.tagger_bits,
            weights: read_f32(&dir.join("tagger.f32"), 1 << d.tagger_bits)?,
        };
        let morph_tagger = match d.morph_tags {
            Some(tags) => Some(Tagger {
                tags,
                bits: d.tagger_bits,
                weights: read_f32(&dir.join("morph.f32"), 1 << d.tagger_bits)?,
            }),
            None => None,
        };
        let scorer = match (d.kind.as_str(), d.neural) {
            ("linear", None) => {
                if !(10..=30).contains(&d.hash_bits) || !(10..=30).contains(&d.label_bits) {
                    return Err(format_error(
                        "hash_bits and label_bits must lie in 10..=30".to_string(),
                    ));
                }
                ArcScorer::Linear(LinearScorer {
                    features: FeatureConfig {
                        hash_bits: d.hash_bits,
                        morphology: d.morphology,
                    },
                    arc_weights: read_f32(&dir.join("arcs.f32"), 1 << d.hash_bits)?,
                    label_weights: read_f32(&dir.join("labels.f32"), 1 << d.label_bits)?,
                    tags: d.tags,
                    labels: d.labels,
                    label_bits: d.label_bits,
                })
            }
            ("neural", Some(neural)) => {
                let vocabulary = Vocabulary {
                    words: neural.words,
                    tags: d.tags,
                    morph_features: neural.morph_features,
                    labels: d.labels,
                };
                check_neural(&neural.config, &vocabulary).map_err(format_error)?;
                let path = dir.join(NEURAL_WEIGHTS);
                let parameters =
                    NeuralScorer::load_parameters(&neural.config, &path).map_err(|message| {
                        ModelError::Format {
                            path: path.display().to_string(),
                            message,
                        }
                    })?;
                ArcScorer::Neural(Box::new(NeuralScorer::new(
                    neural.config,
                    vocabulary,
                    parameters,
                )))
            }
            ("neural", None) => {
                return Err(format_error(
                    "kind \"neural\" without its \"neural\" description".to_string(),
                ));
            }
            ("linear", Some(_)) => {
                return Err(format_error(
                    "kind \"linear\" with a \"neural\" description".to_string(),
                ));
            }
            (other, _) => {
                return Err(format_error(format!(
                    "unknown kind {other:?}; this build reads \"linear\" and \"neural\""
                )));
            }
        };
        Ok(Model {
            scorer,
            tagger,
            morph_tagger,
            default_decoder,
            abbreviations: Abbreviations::from_list(d.abbreviations),
            confidence_temperatures: d.confidence_temperatures,
            confidence_maps: d.confidence_logit_maps,
            training: d.training,
        })
    }

    /// Tags (unless given) and parses one sentence of at least one word with the model's
    /// default options and no confidences.
    pub fn parse(
        &self,
        forms: &[String],
        tags: Option<&[String]>,
        morph: Option<&[String]>,
        decoder: Option<Algorithm>,
    ) -> Parsed {
        let options = ParseOptions {
            decoder,
            ..ParseOptions::default()
        };
        pipeline::parse(self, forms, tags, morph, &options, &mut Unobserved)
    }

    /// Arc scores of a sentence tagged by the model's own taggers ([`pipeline::arc_scores`]).
    pub fn arc_scores(&self, forms: &[String]) -> crate::decode::ScoreMatrix {
        pipeline::arc_scores(self, forms)
    }

    /// The full pipeline ([`pipeline::parse`]) with explicit options and a stage observer.
    pub fn parse_observed(
        &self,
        forms: &[String],
        tags: Option<&[String]>,
        options: &ParseOptions,
        observer: &mut dyn StageObserver,
    ) -> Parsed {
        pipeline::parse(self, forms, tags, None, options, observer)
    }
}
