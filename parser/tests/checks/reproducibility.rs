//! Training is reproducible as documented (`TrainOptions`, ARCHITECTURE.md): the same data, seed and
//! thread count give bit-identical weights — arcs, labels, both taggers — and a different seed
//! gives different ones (so the comparison can fail).

use arcwright_parser::demo;
use arcwright_parser::model::Model;
use arcwright_parser::train::{self, Example, TrainOptions};

fn train_demo(seed: u64, threads: usize) -> Model {
    let examples: Vec<Example> = demo::corpus(300, 20261201, None, 40)
        .iter()
        .filter_map(Example::from_sentence)
        .collect();
    let (train_set, dev_set) = examples.split_at(250);
    let options = TrainOptions {
        epochs: 3,
        seed,
        threads,
        jackknife_folds: 3,
        features: arcwright_parser::features::FeatureConfig {
            hash_bits: 18,
            morphology: true,
        },
        label_bits: 16,
        tagger_bits: 16,
        tagger_epochs: 2,
        ..TrainOptions::default()
    };
    train::train(train_set, dev_set, &options, &mut |_, _| {})
}

/// Every weight table of a model as raw bits, so that NaN and signed zeros compare exactly.
fn weight_bits(model: &Model) -> Vec<Vec<u32>> {
    let linear = model.linear().expect("a linear model");
    let mut tables = vec![
        &linear.arc_weights,
        &linear.label_weights,
        &model.tagger.weights,
    ];
    if let Some(morph) = &model.morph_tagger {
        tables.push(&morph.weights);
    }
    tables
        .into_iter()
        .map(|t| t.iter().map(|w| w.to_bits()).collect())
        .collect()
}

#[test]
fn same_seed_and_threads_give_identical_weights() {
    for threads in [1, 2] {
        let first = weight_bits(&train_demo(7, threads));
        let second = weight_bits(&train_demo(7, threads));
        assert!(
            first == second,
            "{threads} threads: weights differ between runs"
        );
        assert!(
            first[0].iter().any(|&w| w != 0),
            "{threads} threads: training left the arc weights at zero"
        );
    }
    let other_seed = weight_bits(&train_demo(8, 2));
    assert!(
        other_seed != weight_bits(&train_demo(7, 2)),
        "a different seed gave the same weights"
    );
}
