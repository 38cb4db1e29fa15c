//! `arcwright train`: CoNLL-U in, model directory out.

use std::io::IsTerminal;
use std::time::Instant;

use arcwright_parser::decode::Algorithm;
use arcwright_parser::features::FeatureConfig;
use arcwright_parser::model::Model;
use arcwright_parser::neural::Shape;
use arcwright_parser::neural::train::NeuralOptions;
use arcwright_parser::train::{self, Example, TrainOptions};

use super::{Failure, peak_memory_mib, read_treebank};
use crate::cli;

fn examples(path: &std::path::Path) -> Result<(Vec<Example>, u64), Failure> {
    let bytes = std::fs::read(path)
        .map_err(|e| Failure::runtime(format!("{}: cannot read: {e}", path.display())))?;
    let fingerprint = arcwright_parser::hashing::fingerprint(&bytes);
    let document = read_treebank(path)?;
    let examples: Vec<Example> = document
        .sentences
        .iter()
        .filter_map(Example::from_sentence)
        .collect();
    if examples.is_empty() {
        return Err(Failure::bad_input(format!(
            "{}: no annotated sentences (every HEAD is _)",
            path.display()
        )));
    }
    Ok((examples, fingerprint))
}

pub fn run(options: &cli::TrainOptions) -> Result<(), Failure> {
    let started = Instant::now();
    let (train_set, fingerprint) = examples(&options.train)?;
    let dev_set = match &options.dev {
        Some(path) => examples(path)?.0,
        None => Vec::new(),
    };
    let threads = options
        .threads
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
        .max(1);
    let neural = options.kind == cli::KindArg::Neural;
    let epochs = options.epochs.unwrap_or(if neural { 30 } else { 10 });
    let settings = TrainOptions {
        epochs,
        seed: options.seed,
        threads,
        decoder: options.decoder.map(Into::into),
        features: FeatureConfig {
            hash_bits: options.hash_bits,
            morphology: !options.no_morphology,
        },
        update: match options.update {
            cli::UpdateArg::Perceptron => train::Update::Perceptron,
            cli::UpdateArg::PassiveAggressive => train::Update::PassiveAggressive {
                aggressiveness: 1.0,
            },
        },
        jackknife_folds: if options.gold_train_tags {
            0
        } else {
            TrainOptions::default().jackknife_folds
        },
        ..TrainOptions::default()
    };
    eprintln!(
        "training a {} model on {} sentences ({} dev), {} threads, seed {}",
        if neural { "neural" } else { "linear" },
        train_set.len(),
        dev_set.len(),
        threads,
        options.seed
    );
    // A progress bar on a terminal; one plain line per epoch otherwise (CI, job logs).
    let terminal = std::io::stderr().is_terminal();
    let bar = if terminal {
        indicatif::ProgressBar::new(epochs as u64)
    } else {
        indicatif::ProgressBar::hidden()
    };
    bar.set_style(
        indicatif::ProgressStyle::with_template(
            "{prefix} [{bar:30}] epoch {pos}/{len} {msg} ({elapsed})",
        )
        .map_err(Failure::runtime)?
        .progress_chars("=> "),
    );
    bar.set_prefix("training");
    let say = |line: String| {
        if terminal {
            bar.println(line);
        } else {
            eprintln!("{line}");
        }
    };
    let mut progress = |stage: &str, report: Option<&train::EpochReport>| {
        let Some(r) = report else {
            say(stage.to_string());
            return;
        };
        let tags = if r.dev_tags_predicted {
            "predicted tags"
        } else {
            "gold tags"
        };
        let dev = match (r.dev_uas, r.dev_las) {
            (Some(uas), Some(las)) => format!(", dev UAS {uas:.2}% LAS {las:.2}% ({tags})"),
            _ => String::new(),
        };
        let train = match r.loss {
            Some(loss) => format!("train loss {loss:.4}"),
            None => format!(
                "train errors {:.2}%",
                100.0 * r.train_errors as f64 / r.train_tokens.max(1) as f64
            ),
        };
        say(format!(
            "epoch {:>2}/{}: {train}{dev}  [{:.1} s]",
            r.epoch,
            epochs,
            started.elapsed().as_secs_f64()
        ));
        bar.set_message(
            r.dev_uas
                .map_or(String::new(), |u| format!("dev UAS {u:.2}%")),
        );
        bar.inc(1);
    };
    let neural_settings = NeuralOptions {
        shape: Shape {
            hidden: options.hidden as usize,
            layers: options.layers as usize,
            tag_head: !options.linear_tags,
            ..Shape::default()
        },
        epochs,
        seed: options.seed,
        batch_sentences: options.batch_sentences as usize,
        ..NeuralOptions::default()
    };
    let mut model = if neural {
        train::train_neural(
            &train_set,
            &dev_set,
            &settings,
            &neural_settings,
            &mut progress,
        )
        .map_err(Failure::runtime)?
    } else {
        train::train(&train_set, &dev_set, &settings, &mut progress)
    };
    bar.finish_and_clear();
    model.training = serde_json::json!({
        "train_file": options.train.display().to_string(),
        "train_fingerprint_fnv64": format!("{fingerprint:016x}"),
        "train_sentences": train_set.len(),
        "kind": model.scorer.kind(),
        "epochs": epochs,
        "seed": options.seed,
        "threads": threads,
        "decoder": model.default_decoder.name(),
        "update": if neural { "AdamW".to_string() } else { format!("{:?}", settings.update) },
        "jackknife_folds": settings.jackknife_folds,
    });
    model.save(&options.out).map_err(Failure::runtime)?;
    eprintln!(
        "model written to {} in {:.1} s; peak memory {}",
        options.out.display(),
        started.elapsed().as_secs_f64(),
        peak_memory_mib().map_or("unknown".to_string(), |m| format!("{m:.0} MiB"))
    );
    Ok(())
}

/// `arcwright calibrate`: the model's confidence temperatures and logistic maps fitted again on
/// held-out data (the decoded trees do not change); everything else is written as it was read.
pub fn calibrate(options: &cli::CalibrateOptions) -> Result<(), Failure> {
    let started = Instant::now();
    let mut model = Model::load(&options.model).map_err(Failure::bad_input)?;
    let (held_out, fingerprint) = examples(&options.held_out)?;
    let threads = options
        .threads
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
        .max(1);
    train::calibrate_confidences(&mut model, &held_out, threads);
    if let serde_json::Value::Object(facts) = &mut model.training {
        facts.insert(
            "calibration_file".to_string(),
            options.held_out.display().to_string().into(),
        );
        facts.insert(
            "calibration_fingerprint_fnv64".to_string(),
            format!("{fingerprint:016x}").into(),
        );
    }
    model.save(&options.out).map_err(Failure::runtime)?;
    for decoder in [Algorithm::NonProjective, Algorithm::Projective] {
        let map = model.confidence_maps.get(decoder);
        eprintln!(
            "{}: temperature {:.3}, logistic map {:.3} · logit p + {:.3}",
            decoder.name(),
            model.confidence_temperatures.get(decoder),
            map.slope,
            map.offset
        );
    }
    eprintln!(
        "model written to {} in {:.1} s ({} held-out sentences)",
        options.out.display(),
        started.elapsed().as_secs_f64(),
        held_out.len()
    );
    Ok(())
}
