//! Scores the sentences of a CoNLL-U file REPEATS times with a saved model (features and arc
//! scores, no tagging or decoding): a loop for counting the scoring stage's instructions with
//! valgrind. Run: `valgrind --tool=callgrind --callgrind-out-file=/dev/null \
//!   target/release/examples/score_instructions MODEL_DIR FILE.conllu REPEATS`; the per-pass
//! count is the difference of two runs' totals over the difference of their REPEATS.

use arcwright_parser::model::Model;
use arcwright_parser::scorer::LinearScorer;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [model_dir, file, repeats] = args.as_slice() else {
        eprintln!("usage: score_instructions MODEL_DIR FILE.conllu REPEATS");
        std::process::exit(2);
    };
    let repeats: usize = repeats.parse().expect("REPEATS is a number");
    let model = Model::load(std::path::Path::new(model_dir)).expect("model");
    let bytes = std::fs::read(file).expect("read");
    let document = arcwright_parser::conllu::read_bytes(file, &bytes).expect("CoNLL-U");
    let sentences: Vec<(Vec<String>, Vec<String>)> = document
        .sentences
        .iter()
        .filter(|s| !s.is_empty())
        .take(100)
        .map(|s| {
            (
                s.words().map(|w| w.form.clone()).collect(),
                s.words().map(|w| w.upos.clone()).collect(),
            )
        })
        .collect();
    let linear = model.linear().expect("a linear model");
    let mut total = 0.0;
    for _ in 0..repeats {
        for (forms, tags) in &sentences {
            let features = linear.sentence_features(forms, tags, &[]);
            let scores =
                LinearScorer::arc_scores(&features, &linear.arc_weights, linear.features.hash_bits);
            total += scores.get(0, 1);
        }
    }
    println!("{total}");
}
