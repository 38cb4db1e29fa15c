//! Speed of the neural scorer on one core (criterion): encoder + arc and label scores for
//! 25-word sentences, one sentence at a time and in batches of 8 and 32 sentences scored
//! together, at the default network shape with vocabulary sizes of a Turkish model. The weights
//! are random (speed does not depend on their values) and the sentences demo data.
//!
//! Run: `cargo bench -p arcwright-parser --bench neural_speed` (matrix products on the calling
//! thread: `RAYON_NUM_THREADS=1`, as the `arcwright` binary sets it).

use std::hint::black_box;
use std::time::Duration;

use arcwright_parser::demo;
use arcwright_parser::neural::train::config_for;
use arcwright_parser::neural::{NeuralScorer, Shape, Vocabulary, network};
use arcwright_parser::scorer::TaggedSentence;
use arcwright_parser::train::Example;
use candle_core::DType;
use criterion::{BenchmarkId, Criterion, Throughput};

fn main() {
    // Sizes of the vocabularies a Turkish model learns (about 9,000 frequent forms, 17 tags,
    // 20 morphological features, 40 labels).
    let vocabulary = Vocabulary {
        words: (0..9000).map(|i| format!("w{i}")).collect(),
        tags: (0..17).map(|i| format!("T{i}")).collect(),
        morph_features: (0..20).map(|i| format!("Case=C{i}")).collect(),
        labels: (0..40).map(|i| format!("l{i}")).collect(),
    };
    let config = config_for(&vocabulary, &Shape::default());
    let parameters = network::initial(&config, 1, DType::F32).expect("parameters");
    let scorer = NeuralScorer::new(config, vocabulary, parameters);
    let sentences: Vec<Example> = (0..32)
        .map(|i| {
            let e = Example::from_sentence(&demo::sentence(500 + i, 25)).expect("annotated");
            Example {
                forms: e.forms[..25].to_vec(),
                tags: e.tags[..25].to_vec(),
                morph: e.morph[..25].to_vec(),
                ..e
            }
        })
        .collect();
    let tagged: Vec<TaggedSentence<'_>> = sentences.iter().map(Example::tagged).collect();

    let mut c = Criterion::default().configure_from_args();
    let mut group = c.benchmark_group("neural score, 25 words");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3));
    for batch in [1usize, 8, 32] {
        group.throughput(Throughput::Elements(batch as u64));
        group.bench_with_input(
            BenchmarkId::new("sentences together", batch),
            &batch,
            |b, &batch| {
                b.iter(|| {
                    black_box(
                        scorer
                            .score_batch(black_box(&tagged[..batch]))
                            .expect("scores"),
                    )
                })
            },
        );
    }
    group.finish();
    c.final_summary();
}
