//! A trained model: arc weights, label weights, the taggers, and the settings they were trained
//! with; saved as a directory in a format of our own (`arcwright-model/1`): `model.json`
//! (settings, tag and label inventories) plus three little-endian f32 weight files.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::decode::{self, Algorithm, RootConstraint, ScoreMatrix};
use crate::features::{FeatureConfig, SentenceFeatures, TokenView};
use crate::perceptron::{best_class, bucket, prefetch};
use crate::tagger::Tagger;

pub const FORMAT: &str = "arcwright-model/1";

/// A trained parser with its taggers.
#[derive(Debug, Clone)]
pub struct Model {
    pub features: FeatureConfig,
    /// Part-of-speech inventory (ids for the in-between features).
    pub tags: Vec<String>,
    pub labels: Vec<String>,
    pub label_bits: u32,
    pub arc_weights: Vec<f32>,
    pub label_weights: Vec<f32>,
    pub tagger: Tagger,
    /// Predicts the morphology summary (Case, Possessive) when FEATS are not given.
    pub morph_tagger: Option<Tagger>,
    /// Decoder matching the training data (non-projective when it has crossing arcs).
    pub default_decoder: Algorithm,
    /// Free-form facts about the training run (data fingerprint, epochs, scores).
    pub training: serde_json::Value,
}

/// A parse of one sentence.
#[derive(Debug, Clone, PartialEq)]
pub struct Parsed {
    pub tags: Vec<String>,
    /// `heads[i]` is the head of word i+1 (0 = root).
    pub heads: Vec<usize>,
    pub labels: Vec<String>,
    pub score: f64,
    /// P(head → word) of each chosen arc under the model's tree distribution, when asked for.
    pub confidences: Option<Vec<f64>>,
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

#[derive(Serialize, Deserialize)]
struct Description {
    format: String,
    hash_bits: u32,
    morphology: bool,
    tags: Vec<String>,
    labels: Vec<String>,
    label_bits: u32,
    tagger_tags: Vec<String>,
    tagger_bits: u32,
    morph_tags: Option<Vec<String>>,
    default_decoder: String,
    training: serde_json::Value,
}

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

impl Model {
    pub fn save(&self, dir: &Path) -> Result<(), ModelError> {
        let io = |source| ModelError::Io {
            path: dir.display().to_string(),
            source,
        };
        std::fs::create_dir_all(dir).map_err(io)?;
        let description = Description {
            format: FORMAT.to_string(),
            hash_bits: self.features.hash_bits,
            morphology: self.features.morphology,
            tags: self.tags.clone(),
            labels: self.labels.clone(),
            label_bits: self.label_bits,
            tagger_tags: self.tagger.tags.clone(),
            tagger_bits: self.tagger.bits,
            morph_tags: self.morph_tagger.as_ref().map(|t| t.tags.clone()),
            default_decoder: self.default_decoder.name().to_string(),
            training: self.training.clone(),
        };
        let json = serde_json::to_string_pretty(&description).map_err(|e| ModelError::Format {
            path: dir.display().to_string(),
            message: e.to_string(),
        })?;
        let path = dir.join("model.json");
        std::fs::write(&path, json).map_err(|source| ModelError::Io {
            path: path.display().to_string(),
            source,
        })?;
        write_f32(&dir.join("arcs.f32"), &self.arc_weights)?;
        write_f32(&dir.join("labels.f32"), &self.label_weights)?;
        write_f32(&dir.join("tagger.f32"), &self.tagger.weights)?;
        if let Some(morph) = &self.morph_tagger {
            write_f32(&dir.join("morph.f32"), &morph.weights)?;
        }
        Ok(())
    }

    pub fn load(dir: &Path) -> Result<Model, ModelError> {
        let path = dir.join("model.json");
        let text = std::fs::read_to_string(&path).map_err(|source| ModelError::Io {
            path: path.display().to_string(),
            source,
        })?;
        let format_error = |message: String| ModelError::Format {
            path: path.display().to_string(),
            message,
        };
        let d: Description =
            serde_json::from_str(&text).map_err(|e| format_error(e.to_string()))?;
        if d.format != FORMAT {
            return Err(format_error(format!(
                "format {:?}; this build reads {FORMAT:?}",
                d.format
            )));
        }
        if !(10..=30).contains(&d.hash_bits)
            || !(10..=30).contains(&d.label_bits)
            || !(10..=30).contains(&d.tagger_bits)
        {
            return Err(format_error("hash bits outside 10..=30".to_string()));
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
        Ok(Model {
            features: FeatureConfig {
                hash_bits: d.hash_bits,
                morphology: d.morphology,
            },
            arc_weights: read_f32(&dir.join("arcs.f32"), 1 << d.hash_bits)?,
            label_weights: read_f32(&dir.join("labels.f32"), 1 << d.label_bits)?,
            tags: d.tags,
            labels: d.labels,
            label_bits: d.label_bits,
            tagger,
            morph_tagger,
            default_decoder,
            training: d.training,
        })
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

    /// Arc scores of a sentence under `weights` (the model's, or weights being trained).
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

    /// Tags (unless given) and parses one sentence of at least one word.
    pub fn parse(
        &self,
        forms: &[String],
        tags: Option<&[String]>,
        morph: Option<&[String]>,
        decoder: Option<Algorithm>,
    ) -> Parsed {
        self.parse_with(forms, tags, morph, decoder, false)
    }

    /// Like [`Model::parse`]; with `confidence`, also the marginal probability of each chosen arc
    /// (inside-outside for the projective decoder, Matrix-Tree for the non-projective one).
    pub fn parse_with(
        &self,
        forms: &[String],
        tags: Option<&[String]>,
        morph: Option<&[String]>,
        decoder: Option<Algorithm>,
        confidence: bool,
    ) -> Parsed {
        let tags: Vec<String> = match tags {
            Some(t) => t.to_vec(),
            None => self.tagger.tag(forms),
        };
        let morph: Vec<String> = match (morph, &self.morph_tagger, self.features.morphology) {
            (_, _, false) => Vec::new(),
            (Some(m), _, true) => m.to_vec(),
            (None, Some(tagger), true) => tagger.tag(forms),
            (None, None, true) => Vec::new(),
        };
        let features = self.sentence_features(forms, &tags, &morph);
        let scores = Model::arc_scores(&features, &self.arc_weights, self.features.hash_bits);
        let algorithm = decoder.unwrap_or(self.default_decoder);
        let decoded = decode::decode(&scores, algorithm, RootConstraint::SingleRoot);
        let confidences = confidence.then(|| {
            let marginals =
                crate::marginals::marginals(&scores, algorithm, RootConstraint::SingleRoot);
            (1..decoded.heads.len())
                .map(|m| marginals.probability(decoded.heads[m], m))
                .collect()
        });
        let labels = (1..decoded.heads.len())
            .map(|m| {
                let id = Model::best_label(
                    &features,
                    decoded.heads[m],
                    m,
                    &self.label_weights,
                    self.label_bits,
                    self.labels.len(),
                );
                self.labels[id].clone()
            })
            .collect();
        Parsed {
            tags,
            heads: decoded.heads[1..].to_vec(),
            labels,
            confidences,
            score: decoded.score,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::features::hash_str;

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
            let scores = Model::arc_scores(&features, &weights, bits);
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
