//! Cost of recording metrics on the parse path: a 25-word labeled parse exactly as the service
//! does it, with and without the metrics (stage histograms, scaling fits, counters). Demo model
//! trained at start-up (speed only). Target: overhead under 2% of the parse.
//!
//! Run: `cargo bench -p arcwright --bench metrics_overhead`

use std::hint::black_box;
use std::time::{Duration, SystemTime};

use arcwright::server::metrics;
use arcwright::server::registry::Served;
use arcwright::server::request::parse_for_benchmark;
use arcwright_parser::decode::Algorithm;
use arcwright_parser::demo;
use arcwright_parser::train::{self, Example, TrainOptions};
use criterion::Criterion;

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
    let model = train::train(&corpus, &[], &options, &mut |_, _| {});
    let served = Served {
        name: "demo".into(),
        version: "bench".into(),
        model,
        loaded_at: SystemTime::now(),
        load_seconds: 0.0,
    };
    let forms: Vec<String> = Example::from_sentence(&demo::sentence(7, 25))
        .expect("annotated")
        .forms
        .into_iter()
        .take(25)
        .collect();
    let mut c = Criterion::default().configure_from_args();
    let mut group = c.benchmark_group("parse 25 words");
    group
        .sample_size(50)
        .measurement_time(Duration::from_secs(4));
    group.bench_function("without metrics", |b| {
        b.iter(|| black_box(parse_for_benchmark(&served, black_box(&forms), false)))
    });
    group.bench_function("with metrics", |b| {
        b.iter(|| black_box(parse_for_benchmark(&served, black_box(&forms), true)))
    });
    // The recording alone (five stage histograms, the scaling tracker, two counters), which is
    // smaller than the two runs above differ by on a noisy machine.
    let seconds = [2e-6, 2e-5, 9e-5, 3e-6, 1.3e-4]; // tokenize, tag, score, decode, total
    group.bench_function("recording alone", |b| {
        b.iter(|| metrics::record_sentence(black_box(&seconds), 1e-3, Algorithm::Projective, 25))
    });
    group.finish();
    c.final_summary();
}
