//! The network of the neural scorer: token embeddings → a stacked bidirectional LSTM → biaffine
//! arc scores and bilinear-plus-linear label scores (Kiperwasser & Goldberg 2016 for the BiLSTM
//! encoder; Dozat & Manning 2017 for the biaffine scorers).
//!
//! Everything is batched: a batch is B sentences padded to T positions (position 0 = the root),
//! and the LSTM runs over the B sequences together, one time step at a time, on position-major
//! tensors `(T, B, …)`. The input projections of every step are one matrix product before the
//! recurrence. Padding sits at the end of each sentence, so it never reaches a real position
//! going forward; the backward direction runs the same recurrence over each sentence reversed
//! within its own length, so it starts from zero at the sentence's last word.

use std::collections::BTreeMap;

use candle_core::{DType, Device, Result, Tensor};

use crate::hashing::SplitMix64;

use super::NeuralConfig;

/// The network's parameters by name (a `Var`'s tensor while training, a plain tensor once
/// trained).
pub type Parameters = BTreeMap<String, Tensor>;

/// Token inputs of a batch, as ids, each `batch × positions` long (row-major by sentence).
#[derive(Debug, Clone)]
pub struct BatchInputs {
    pub batch: usize,
    pub positions: usize,
    /// Real positions of each sentence (its words + 1 for the root).
    pub lengths: Vec<usize>,
    pub words: Vec<u32>,
    pub tags: Vec<u32>,
    /// `AFFIXES` hashed affix ids per position.
    pub suffixes: Vec<u32>,
    /// `MORPH_SLOTS` morphology feature ids per position.
    pub morph: Vec<u32>,
}

/// Hashed affixes per token: the suffixes of 1 to 5 characters and the prefixes of 3 and 4
/// characters of the lowercased form (a suffixing language's stem starts the word).
pub const AFFIXES: usize = 7;
/// Morphological features per token (Case and Possessive).
pub const MORPH_SLOTS: usize = 2;

/// The encoder's outputs, each `(batch, positions, dim)`.
#[derive(Debug)]
pub struct Encoded {
    pub arc_dependent: Tensor,
    pub arc_head: Tensor,
    pub label_dependent: Tensor,
    pub label_head: Tensor,
    /// Tag scores `(batch, positions, tag_rows)` from the first layer, when the model has a tag
    /// head.
    pub tag_scores: Option<Tensor>,
}

/// Dropout masks drawn from our own seeded generator (the tensor library's CPU generator cannot
/// be seeded), so that training is reproducible.
#[derive(Debug)]
pub struct Dropout {
    pub rng: SplitMix64,
    pub rate: f32,
}

impl Dropout {
    fn apply(&mut self, x: &Tensor) -> Result<Tensor> {
        if self.rate <= 0.0 {
            return Ok(x.clone());
        }
        let keep = 1.0 / (1.0 - self.rate);
        let threshold = (self.rate as f64 * (1u64 << 53) as f64) as u64;
        let mask: Vec<f32> = (0..x.elem_count())
            .map(|_| {
                if (self.rng.next_u64() >> 11) < threshold {
                    0.0
                } else {
                    keep
                }
            })
            .collect();
        let mask = Tensor::from_vec(mask, x.shape(), x.device())?.to_dtype(x.dtype())?;
        x.mul(&mask)
    }
}

/// Glorot-uniform values for a `rows × cols` weight, from the seeded generator.
fn glorot(rng: &mut SplitMix64, rows: usize, cols: usize) -> Vec<f32> {
    let bound = (6.0 / (rows + cols) as f64).sqrt();
    (0..rows * cols)
        .map(|_| (rng.next_f64() * 2.0 - 1.0) * bound)
        .map(|x| x as f32)
        .collect()
}

/// Fresh parameters for a configuration, from a seed.
pub fn initial(config: &NeuralConfig, seed: u64, dtype: DType) -> Result<Parameters> {
    let device = Device::Cpu;
    let mut rng = SplitMix64::new(seed);
    let mut p = Parameters::new();
    let add = |p: &mut Parameters, name: String, values: Vec<f32>, shape: &[usize]| {
        let t = Tensor::from_vec(values, shape, &device)?.to_dtype(dtype)?;
        p.insert(name, t);
        Result::Ok(())
    };
    let embedding = |rng: &mut SplitMix64, rows: usize, dim: usize| -> Vec<f32> {
        let bound = (3.0 / dim as f64).sqrt();
        (0..rows * dim)
            .map(|_| ((rng.next_f64() * 2.0 - 1.0) * bound) as f32)
            .collect()
    };
    let c = config;
    add(
        &mut p,
        "embed.word".into(),
        embedding(&mut rng, c.word_rows, c.word_dim),
        &[c.word_rows, c.word_dim],
    )?;
    add(
        &mut p,
        "embed.tag".into(),
        embedding(&mut rng, c.tag_rows, c.tag_dim),
        &[c.tag_rows, c.tag_dim],
    )?;
    let suffix_rows = 1usize << c.suffix_bits;
    add(
        &mut p,
        "embed.suffix".into(),
        embedding(&mut rng, suffix_rows, c.suffix_dim),
        &[suffix_rows, c.suffix_dim],
    )?;
    add(
        &mut p,
        "embed.morph".into(),
        embedding(&mut rng, c.morph_rows, c.morph_dim),
        &[c.morph_rows, c.morph_dim],
    )?;
    let h = c.hidden;
    let mut input = c.input_dim();
    for layer in 0..c.layers {
        for direction in ["forward", "backward"] {
            let name = format!("lstm.{layer}.{direction}");
            // Gates in the order input, forget, output (sigmoid), then the candidate (tanh).
            add(
                &mut p,
                format!("{name}.input"),
                glorot(&mut rng, input, 4 * h),
                &[input, 4 * h],
            )?;
            add(
                &mut p,
                format!("{name}.recurrent"),
                glorot(&mut rng, h, 4 * h),
                &[h, 4 * h],
            )?;
            // Forget-gate bias 1 (Jozefowicz et al. 2015): remember by default.
            let bias: Vec<f32> = (0..4 * h)
                .map(|i| if (h..2 * h).contains(&i) { 1.0 } else { 0.0 })
                .collect();
            add(&mut p, format!("{name}.bias"), bias, &[4 * h])?;
        }
        input = 2 * h;
    }
    for (name, dim) in [
        ("arc_dependent", c.arc_dim),
        ("arc_head", c.arc_dim),
        ("label_dependent", c.label_dim),
        ("label_head", c.label_dim),
    ] {
        add(
            &mut p,
            format!("mlp.{name}.weight"),
            glorot(&mut rng, 2 * h, dim),
            &[2 * h, dim],
        )?;
        add(&mut p, format!("mlp.{name}.bias"), vec![0.0; dim], &[dim])?;
    }
    // The biaffine arc weights start at zero (Dozat & Manning 2017): every head equally likely.
    add(
        &mut p,
        "arc.bilinear".into(),
        vec![0.0; c.arc_dim * c.arc_dim],
        &[c.arc_dim, c.arc_dim],
    )?;
    add(
        &mut p,
        "arc.head_bias".into(),
        vec![0.0; c.arc_dim],
        &[c.arc_dim, 1],
    )?;
    if c.tag_head {
        add(
            &mut p,
            "tagger.weight".into(),
            glorot(&mut rng, 2 * h, c.tag_rows),
            &[2 * h, c.tag_rows],
        )?;
        add(
            &mut p,
            "tagger.bias".into(),
            vec![0.0; c.tag_rows],
            &[c.tag_rows],
        )?;
    }
    let (l, d) = (c.labels, c.label_dim);
    add(&mut p, "label.bilinear".into(), vec![0.0; d * l], &[d, l])?;
    add(
        &mut p,
        "label.linear".into(),
        glorot(&mut rng, 2 * d, l),
        &[2 * d, l],
    )?;
    add(&mut p, "label.bias".into(), vec![0.0; l], &[l])?;
    Ok(p)
}

/// The network over a set of parameters.
#[derive(Debug)]
pub struct Network<'a> {
    pub config: &'a NeuralConfig,
    pub p: &'a Parameters,
}

impl Network<'_> {
    fn get(&self, name: &str) -> Result<&Tensor> {
        self.p
            .get(name)
            .ok_or_else(|| candle_core::Error::Msg(format!("missing parameter {name}")))
    }

    fn ids(values: &[u32], shape: &[usize]) -> Result<Tensor> {
        Tensor::from_vec(values.to_vec(), shape, &Device::Cpu)
    }

    /// `x` (…, in) · W + b for a `(in, out)` weight.
    fn affine(&self, x: &Tensor, weight: &str, bias: &str) -> Result<Tensor> {
        x.broadcast_matmul(self.get(weight)?)?
            .broadcast_add(self.get(bias)?)
    }

    /// Embeds every position, time-major: `(positions, batch, input_dim)`.
    fn embed(&self, inputs: &BatchInputs, dropout: &mut Option<Dropout>) -> Result<Tensor> {
        let (b, t) = (inputs.batch, inputs.positions);
        let n = b * t;
        // Ids reordered from sentence-major to position-major.
        let column = |values: &[u32], per: usize| -> Result<Tensor> {
            let ids: Vec<u32> = (0..t)
                .flat_map(|step| {
                    (0..b).flat_map(move |s| {
                        values[(s * t + step) * per..(s * t + step + 1) * per]
                            .iter()
                            .copied()
                    })
                })
                .collect();
            Self::ids(&ids, &[n * per])
        };
        let words = self
            .get("embed.word")?
            .index_select(&column(&inputs.words, 1)?, 0)?;
        let tags = self
            .get("embed.tag")?
            .index_select(&column(&inputs.tags, 1)?, 0)?;
        let suffixes = self
            .get("embed.suffix")?
            .index_select(&column(&inputs.suffixes, AFFIXES)?, 0)?
            .reshape((n, AFFIXES, self.config.suffix_dim))?
            .sum(1)?;
        let morph = self
            .get("embed.morph")?
            .index_select(&column(&inputs.morph, MORPH_SLOTS)?, 0)?
            .reshape((n, MORPH_SLOTS, self.config.morph_dim))?
            .sum(1)?;
        let x = Tensor::cat(&[&words, &suffixes, &tags, &morph], 1)?.reshape((
            t,
            b,
            self.config.input_dim(),
        ))?;
        match dropout {
            Some(d) => d.apply(&x),
            None => Ok(x),
        }
    }

    /// One LSTM direction over `x` `(positions, batch, in)` from zero state: `(positions,
    /// batch, hidden)`. The input projections of all steps are one product; the recurrence is
    /// one operation ([`super::lstm::Recurrence`]).
    fn lstm(&self, x: &Tensor, name: &str) -> Result<Tensor> {
        let pre = self
            .affine(x, &format!("{name}.input"), &format!("{name}.bias"))?
            .contiguous()?;
        let recurrent = self.get(&format!("{name}.recurrent"))?;
        pre.apply_op2(recurrent, super::lstm::Recurrence)?
            .narrow(2, 0, self.config.hidden)
    }

    /// The row permutation, over position-major rows `position × batch + sentence`, that reverses
    /// each sentence within its own length and leaves its padding in place (an involution).
    fn reversal(inputs: &BatchInputs) -> Result<Tensor> {
        let b = inputs.batch;
        let mut index = Vec::with_capacity(b * inputs.positions);
        for step in 0..inputs.positions {
            for (s, &len) in inputs.lengths.iter().enumerate() {
                let from = if step < len { len - 1 - step } else { step };
                index.push((from * b + s) as u32);
            }
        }
        Self::ids(&index, &[b * inputs.positions])
    }

    /// Runs the encoder and the four MLPs.
    pub fn encode(&self, inputs: &BatchInputs, dropout: &mut Option<Dropout>) -> Result<Encoded> {
        let (b, t) = (inputs.batch, inputs.positions);
        let reverse = Self::reversal(inputs)?;
        let flip = |x: &Tensor| -> Result<Tensor> {
            let dim = x.dim(2)?;
            x.reshape((t * b, dim))?
                .index_select(&reverse, 0)?
                .reshape((t, b, dim))
        };
        let dtype = self.get("arc.bilinear")?.dtype();
        let mut x = self.embed(inputs, dropout)?.to_dtype(dtype)?;
        let mut tag_scores = None;
        for layer in 0..self.config.layers {
            let forward = self.lstm(&x, &format!("lstm.{layer}.forward"))?;
            let backward = flip(&self.lstm(&flip(&x)?, &format!("lstm.{layer}.backward"))?)?;
            x = Tensor::cat(&[&forward, &backward], 2)?;
            if let Some(d) = dropout {
                x = d.apply(&x)?;
            }
            if layer == 0 && self.config.tag_head {
                // Tags from the first layer, the arcs from the last (multi-task).
                let first = x.transpose(0, 1)?.contiguous()?;
                tag_scores = Some(self.affine(&first, "tagger.weight", "tagger.bias")?);
            }
        }
        // Back to sentence-major for the scorers: (batch, positions, 2·hidden).
        let x = x.transpose(0, 1)?.contiguous()?;
        let mut mlp = |name: &str| -> Result<Tensor> {
            let y = self
                .affine(
                    &x,
                    &format!("mlp.{name}.weight"),
                    &format!("mlp.{name}.bias"),
                )?
                .relu()?;
            match dropout {
                Some(d) => d.apply(&y),
                None => Ok(y),
            }
        };
        Ok(Encoded {
            arc_dependent: mlp("arc_dependent")?,
            arc_head: mlp("arc_head")?,
            label_dependent: mlp("label_dependent")?,
            label_head: mlp("label_head")?,
            tag_scores,
        })
    }

    /// Biaffine arc scores `(batch, modifier, head)`: dep_m · W · head_h + head_h · u.
    pub fn arc_scores(&self, encoded: &Encoded) -> Result<Tensor> {
        let dep = encoded
            .arc_dependent
            .broadcast_matmul(self.get("arc.bilinear")?)?;
        let pair = dep.matmul(&encoded.arc_head.transpose(1, 2)?.contiguous()?)?;
        // (batch, positions, 1) → (batch, 1, positions): one bias per head.
        let head_bias = encoded
            .arc_head
            .broadcast_matmul(self.get("arc.head_bias")?)?
            .transpose(1, 2)?;
        pair.broadcast_add(&head_bias)
    }

    /// Label scores `(rows, labels)` for arcs given as row indices into `dependent_rows` and
    /// `head_rows` (the label MLPs' outputs flattened to `(batch × positions, label_dim)`).
    pub fn label_scores(
        &self,
        dependent_rows: &Tensor,
        head_rows: &Tensor,
        dependents: &Tensor,
        heads: &Tensor,
    ) -> Result<Tensor> {
        let dep = dependent_rows.index_select(dependents, 0)?;
        let head = head_rows.index_select(heads, 0)?;
        // A diagonal bilinear term per label, Σ_i dep_i · U_l,i · head_i: a full d × d matrix
        // per label would materialise a rows × labels × d tensor in every step.
        let bilinear = dep.mul(&head)?.matmul(self.get("label.bilinear")?)?;
        let linear = Tensor::cat(&[&dep, &head], 1)?.matmul(self.get("label.linear")?)?;
        bilinear
            .add(&linear)?
            .broadcast_add(self.get("label.bias")?)
    }
}
