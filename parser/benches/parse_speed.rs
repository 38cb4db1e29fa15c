//! Parse speed by stage on one core (criterion): tag (part of speech + morphology), score (arc
//! features × weights for all n² arcs), decode (Eisner / Chu-Liu-Edmonds), label (second stage),
//! for demo sentences of 10, 25, 50 and 100 words, with a model trained on demo data at start-up
//! (demo data only measures speed, never accuracy).
//!
//! Run: `cargo bench -p arcwright-parser --bench parse_speed`

use std::hint::black_box;
use std::time::Duration;

use arcwright_parser::decode::{self, Algorithm, RootConstraint};
use arcwright_parser::demo;
use arcwright_parser::model::Model;
use arcwright_parser::scorer::LinearScorer;
use arcwright_parser::train::{self, Example, TrainOptions};
use criterion::{BenchmarkId, Criterion};

fn main() {
    let corpus: Vec<Example> = demo::corpus(1500, 5, None, 120)
        .iter()
        .filter_map(Example::from_sentence)
        .collect();
    let options = TrainOptions {
        epochs: 2,
        threads: 2,
        jackknife_folds: 0,
        ..TrainOptions::default()
    };
    let started = std::time::Instant::now();
    let model = train::train(&corpus, &[], &options, &mut |_, _| {});
    eprintln!(
        "demo model trained in {:.1} s",
        started.elapsed().as_secs_f64()
    );
    let dir = std::env::temp_dir().join(format!("arcwright-bench-model-{}", std::process::id()));
    model.save(&dir).expect("save model");
    let load_started = std::time::Instant::now();
    let model = Model::load(&dir).expect("load model");
    eprintln!(
        "model loaded in {:.1} ms",
        load_started.elapsed().as_secs_f64() * 1e3
    );
    std::fs::remove_dir_all(&dir).ok();

    let mut c = Criterion::default().configure_from_args();
    let mut group = c.benchmark_group("parse");
    group
        .sample_size(20)
        .warm_up_time(Duration::from_millis(300))
        .measurement_time(Duration::from_secs(2));
    for words in [10usize, 25, 50, 100] {
        let sentence =
            Example::from_sentence(&demo::sentence(99 + words as u64, words)).expect("annotated");
        let forms: Vec<String> = sentence.forms.iter().take(words).cloned().collect();
        let n = forms.len();
        let tags = model.tagger.tag(&forms);
        let morph = model
            .morph_tagger
            .as_ref()
            .map(|t| t.tag(&forms))
            .unwrap_or_default();
        let linear = model.linear().expect("a linear model");
        let features = linear.sentence_features(&forms, &tags, &morph);
        let scores =
            LinearScorer::arc_scores(&features, &linear.arc_weights, linear.features.hash_bits);
        let heads =
            decode::decode(&scores, Algorithm::Projective, RootConstraint::SingleRoot).heads;
        group.bench_with_input(BenchmarkId::new("tag", n), &n, |b, _| {
            b.iter(|| {
                let t = model.tagger.tag(black_box(&forms));
                let m = model.morph_tagger.as_ref().map(|m| m.tag(&forms));
                black_box((t, m))
            })
        });
        group.bench_with_input(BenchmarkId::new("score", n), &n, |b, _| {
            b.iter(|| {
                let f = linear.sentence_features(black_box(&forms), &tags, &morph);
                black_box(LinearScorer::arc_scores(
                    &f,
                    &linear.arc_weights,
                    linear.features.hash_bits,
                ))
            })
        });
        for algorithm in [Algorithm::Projective, Algorithm::NonProjective] {
            group.bench_with_input(
                BenchmarkId::new(format!("decode {algorithm}"), n),
                &n,
                |b, _| {
                    b.iter(|| {
                        black_box(decode::decode(
                            black_box(&scores),
                            algorithm,
                            RootConstraint::SingleRoot,
                        ))
                    })
                },
            );
        }
        group.bench_with_input(BenchmarkId::new("label", n), &n, |b, _| {
            b.iter(|| {
                let labels: Vec<usize> = (1..=n)
                    .map(|m| {
                        LinearScorer::best_label(
                            &features,
                            heads[m],
                            m,
                            &linear.label_weights,
                            linear.label_bits,
                            linear.labels.len(),
                        )
                    })
                    .collect();
                black_box(labels)
            })
        });
        group.bench_with_input(
            BenchmarkId::new("total (parse, projective)", n),
            &n,
            |b, _| {
                b.iter(|| {
                    black_box(model.parse(
                        black_box(&forms),
                        None,
                        None,
                        Some(Algorithm::Projective),
                    ))
                })
            },
        );
    }
    group.finish();
    c.final_summary();
}
