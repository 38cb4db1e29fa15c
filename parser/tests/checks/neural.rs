//! The neural scorer: its gradients against central finite differences, its LSTM recurrence
//! against the cell equations evaluated directly, reproducible training, and a model that saves
//! and loads to the same scores.
//!
//! Finite differences: (L(θ + ε) − L(θ − ε)) / 2ε, whose error is O(ε²) (the standard central
//! difference formula); in f64 with ε = 1e-5 it agrees with an exact gradient to about 1e-8
//! relative, far below the tolerance used.

use arcwright_parser::demo;
use arcwright_parser::hashing::SplitMix64;
use arcwright_parser::model::Model;
use arcwright_parser::neural::network::{self, Parameters};
use arcwright_parser::neural::train::{self as neural_train, Gold, NeuralOptions};
use arcwright_parser::neural::{NeuralConfig, SentenceIds, Shape, lstm};
use arcwright_parser::scorer::{ArcScorer, TaggedSentence};
use arcwright_parser::train::{self, Example, TrainOptions};
use candle_core::{DType, Device, Tensor, Var};

fn tiny_config(tag_head: bool) -> NeuralConfig {
    NeuralConfig {
        word_rows: 6,
        word_dim: 3,
        suffix_bits: 8,
        suffix_dim: 2,
        tag_rows: 5,
        tag_dim: 2,
        morph_rows: 3,
        morph_dim: 2,
        hidden: 3,
        layers: 2,
        arc_dim: 4,
        label_dim: 3,
        labels: 3,
        tag_head,
    }
}

fn uniform(rng: &mut SplitMix64) -> f64 {
    rng.next_f64() * 2.0 - 1.0
}

/// Parameters in f64 with every entry away from zero (the biaffine weights start at zero).
fn tiny_parameters(config: &NeuralConfig) -> Parameters {
    let mut rng = SplitMix64::new(99);
    network::initial(config, 5, DType::F64)
        .expect("initial parameters")
        .into_iter()
        .map(|(name, t)| {
            let noise: Vec<f64> = (0..t.elem_count())
                .map(|_| 0.5 * uniform(&mut rng))
                .collect();
            let noise = Tensor::from_vec(noise, t.shape(), &Device::Cpu).expect("noise");
            (name, t.add(&noise).expect("perturbed"))
        })
        .collect()
}

/// Two sentences of different lengths, so padding and the per-sentence reversal are exercised.
fn tiny_batch() -> Vec<Gold> {
    let sentence = |words: &[u32], tags: &[u32], heads: &[usize], labels: &[u32]| Gold {
        ids: SentenceIds {
            words: words.to_vec(),
            tags: tags.to_vec(),
            suffixes: words
                .iter()
                .flat_map(|&w| (0..7).map(move |k| (w * 7 + k * 13) % 256))
                .collect(),
            morph: words.iter().flat_map(|&w| [w % 3, (w + 1) % 3]).collect(),
        },
        heads: heads.to_vec(),
        labels: labels.to_vec(),
        tags: tags[1..].to_vec(),
    };
    vec![
        sentence(
            &[1, 2, 3, 4, 5],
            &[1, 2, 3, 4, 2],
            &[0, 2, 0, 2, 3],
            &[0, 1, 2, 1],
        ),
        sentence(&[1, 5, 0], &[1, 3, 0], &[0, 0, 1], &[2, 0]),
    ]
}

fn loss(config: &NeuralConfig, parameters: &Parameters, batch: &[Gold]) -> Tensor {
    let golds: Vec<&Gold> = batch.iter().collect();
    let ids: Vec<&SentenceIds> = batch.iter().map(|g| &g.ids).collect();
    neural_train::batch_loss(config, parameters, &golds, &ids, &mut None)
        .expect("loss")
        .0
}

#[test]
fn gradients_of_the_whole_network_match_central_differences() {
    for tag_head in [false, true] {
        check_gradients(tiny_config(tag_head));
    }
}

fn check_gradients(config: NeuralConfig) {
    let base = tiny_parameters(&config);
    let batch = tiny_batch();
    let vars: Vec<(String, Var)> = base
        .iter()
        .map(|(n, t)| (n.clone(), Var::from_tensor(t).expect("var")))
        .collect();
    let tracked: Parameters = vars
        .iter()
        .map(|(n, v)| (n.clone(), v.as_tensor().clone()))
        .collect();
    let grads = loss(&config, &tracked, &batch)
        .backward()
        .expect("backward");
    let mut rng = SplitMix64::new(3);
    let epsilon = 1e-5;
    let mut checked = 0;
    for (name, var) in &vars {
        let values: Vec<f64> = base[name].flatten_all().unwrap().to_vec1().unwrap();
        let analytic: Vec<f64> = match grads.get(var.as_tensor()) {
            Some(g) => g.flatten_all().unwrap().to_vec1().unwrap(),
            None => vec![0.0; values.len()],
        };
        // Every entry of small tensors; eight random ones of the embedding tables.
        let entries: Vec<usize> = if values.len() <= 64 {
            (0..values.len()).collect()
        } else {
            (0..8).map(|_| rng.below(values.len())).collect()
        };
        for i in entries {
            let at = |delta: f64| {
                let mut v = values.clone();
                v[i] += delta;
                let mut p = base.clone();
                p.insert(
                    name.clone(),
                    Tensor::from_vec(v, base[name].shape(), &Device::Cpu).unwrap(),
                );
                loss(&config, &p, &batch).to_scalar::<f64>().unwrap()
            };
            let numeric = (at(epsilon) - at(-epsilon)) / (2.0 * epsilon);
            let difference = (analytic[i] - numeric).abs();
            assert!(
                difference <= 1e-6 + 1e-5 * numeric.abs(),
                "{name}[{i}]: autograd {} vs central difference {numeric}",
                analytic[i]
            );
            checked += 1;
        }
    }
    assert!(checked > 300, "only {checked} entries checked");
}

/// The recurrence op against the LSTM cell equations (input, forget, output gates σ, candidate
/// tanh; c_t = f·c_{t−1} + i·g, h_t = o·tanh(c_t)) evaluated one scalar at a time.
#[test]
fn the_recurrence_op_computes_the_lstm_cell_equations() {
    let (steps, batch, hidden) = (4, 2, 3);
    let mut rng = SplitMix64::new(11);
    let pre: Vec<f64> = (0..steps * batch * 4 * hidden)
        .map(|_| uniform(&mut rng))
        .collect();
    let w: Vec<f64> = (0..hidden * 4 * hidden)
        .map(|_| uniform(&mut rng))
        .collect();
    let out = Tensor::from_vec(pre.clone(), (steps, batch, 4 * hidden), &Device::Cpu)
        .unwrap()
        .apply_op2(
            &Tensor::from_vec(w.clone(), (hidden, 4 * hidden), &Device::Cpu).unwrap(),
            lstm::Recurrence,
        )
        .unwrap();
    let out: Vec<f64> = out.flatten_all().unwrap().to_vec1().unwrap();
    let sigmoid = |x: f64| 1.0 / (1.0 + (-x).exp());
    for b in 0..batch {
        let (mut h, mut c) = (vec![0.0; hidden], vec![0.0; hidden]);
        for t in 0..steps {
            let gate = |k: usize| {
                pre[(t * batch + b) * 4 * hidden + k]
                    + (0..hidden)
                        .map(|j| h[j] * w[j * 4 * hidden + k])
                        .sum::<f64>()
            };
            let gates: Vec<f64> = (0..4 * hidden).map(gate).collect();
            for k in 0..hidden {
                let (i, f) = (sigmoid(gates[k]), sigmoid(gates[hidden + k]));
                let g = gates[3 * hidden + k].tanh();
                c[k] = f * c[k] + i * g;
            }
            for k in 0..hidden {
                h[k] = sigmoid(gates[2 * hidden + k]) * c[k].tanh();
                let got = out[(t * batch + b) * 6 * hidden + k];
                assert!(
                    (got - h[k]).abs() < 1e-12,
                    "step {t}, sentence {b}, unit {k}: {got} vs {}",
                    h[k]
                );
            }
        }
    }
}

fn demo_examples() -> Vec<Example> {
    demo::corpus(160, 20261203, None, 30)
        .iter()
        .filter_map(Example::from_sentence)
        .collect()
}

fn train_tiny(seed: u64, threads: usize) -> Model {
    let examples = demo_examples();
    let (train_set, dev_set) = examples.split_at(130);
    let options = TrainOptions {
        seed,
        threads,
        jackknife_folds: 2,
        tagger_bits: 14,
        tagger_epochs: 2,
        ..TrainOptions::default()
    };
    let neural = NeuralOptions {
        shape: Shape {
            word_dim: 8,
            suffix_bits: 10,
            suffix_dim: 8,
            tag_dim: 4,
            morph_dim: 4,
            hidden: 8,
            layers: 1,
            arc_dim: 8,
            label_dim: 8,
            tag_head: false,
        },
        epochs: 2,
        seed,
        batch_sentences: 16,
        ..NeuralOptions::default()
    };
    train::train_neural(train_set, dev_set, &options, &neural, &mut |_, _| {}).expect("training")
}

fn parameter_bits(model: &Model) -> Vec<(String, Vec<u32>)> {
    let ArcScorer::Neural(neural) = &model.scorer else {
        panic!("a neural model was trained");
    };
    neural
        .parameters
        .iter()
        .map(|(name, t)| {
            let v: Vec<f32> = t.flatten_all().unwrap().to_vec1().unwrap();
            (name.clone(), v.into_iter().map(f32::to_bits).collect())
        })
        .collect()
}

#[test]
fn neural_training_is_reproducible_per_seed_and_thread_count() {
    for threads in [1, 2] {
        assert!(
            parameter_bits(&train_tiny(4, threads)) == parameter_bits(&train_tiny(4, threads)),
            "{threads} threads: parameters differ between runs"
        );
    }
    assert!(
        parameter_bits(&train_tiny(4, 2)) != parameter_bits(&train_tiny(5, 2)),
        "a different seed gave the same parameters"
    );
}

#[test]
fn a_saved_neural_model_loads_to_the_same_scores_and_parses() {
    let model = train_tiny(4, 2);
    let dir = tempfile::tempdir().unwrap();
    model.save(dir.path()).unwrap();
    let loaded = Model::load(dir.path()).unwrap();
    assert_eq!(loaded.scorer.kind(), "neural");
    assert_eq!(Model::summary(dir.path()).unwrap().kind, "neural");
    for e in demo_examples().iter().skip(130).take(10) {
        let before = model.arc_scores(&e.forms);
        let after = loaded.arc_scores(&e.forms);
        for h in 0..=e.forms.len() {
            for m in 1..=e.forms.len() {
                if h != m {
                    assert_eq!(
                        before.get(h, m).to_bits(),
                        after.get(h, m).to_bits(),
                        "arc {h} → {m}"
                    );
                }
            }
        }
        let parsed = loaded.parse(&e.forms, None, None, None);
        assert_eq!(parsed.heads.len(), e.forms.len() + 1);
        assert_eq!(parsed.labels.len(), e.forms.len());
    }
}

#[test]
fn a_damaged_neural_model_is_refused_with_the_file_named() {
    let model = train_tiny(4, 1);
    let dir = tempfile::tempdir().unwrap();
    model.save(dir.path()).unwrap();
    // A weight file cut short.
    let weights = dir.path().join("neural.safetensors");
    let bytes = std::fs::read(&weights).unwrap();
    std::fs::write(&weights, &bytes[..bytes.len() / 2]).unwrap();
    let error = Model::load(dir.path()).unwrap_err().to_string();
    assert!(error.contains("neural.safetensors"), "{error}");
    // A configuration that does not match the weights.
    std::fs::write(&weights, &bytes).unwrap();
    let description = dir.path().join("model.json");
    let text = std::fs::read_to_string(&description).unwrap();
    let mut json: serde_json::Value = serde_json::from_str(&text).unwrap();
    json["neural"]["config"]["hidden"] = serde_json::json!(9);
    std::fs::write(&description, json.to_string()).unwrap();
    let error = Model::load(dir.path()).unwrap_err().to_string();
    assert!(
        error.contains("parameter lstm.0.") && error.contains("shape"),
        "{error}"
    );
}

#[test]
fn scoring_sentences_together_gives_each_its_own_scores() {
    let model = train_tiny(4, 2);
    let ArcScorer::Neural(neural) = &model.scorer else {
        panic!("a neural model was trained");
    };
    let examples = demo_examples();
    let chosen: Vec<&Example> = examples.iter().skip(130).take(6).collect();
    let sentences: Vec<TaggedSentence<'_>> = chosen.iter().map(|e| e.tagged()).collect();
    let together = neural.score_batch(&sentences).unwrap();
    for (sentence, batched) in sentences.iter().zip(&together) {
        let alone = neural.score(*sentence).unwrap();
        for h in 0..=sentence.forms.len() {
            for m in 1..=sentence.forms.len() {
                if h != m {
                    let (a, b) = (alone.scores.get(h, m), batched.scores.get(h, m));
                    assert!(
                        (a - b).abs() <= 1e-4 * a.abs().max(1.0),
                        "arc {h} → {m}: {a} alone, {b} in a batch"
                    );
                }
            }
        }
    }
}
