//! `arcwright eval`: a model against a gold treebank.

use arcwright_parser::eval::Evaluator;
use arcwright_parser::model::Model;
use arcwright_parser::train::Example;

use super::{Failure, read_treebank};
use crate::cli::EvalOptions;

pub fn run(options: &EvalOptions) -> Result<(), Failure> {
    let load_started = std::time::Instant::now();
    let model = Model::load(&options.model).map_err(Failure::bad_input)?;
    let load_seconds = load_started.elapsed().as_secs_f64();
    let document = read_treebank(&options.gold)?;
    if !document
        .sentences
        .iter()
        .any(|s| Example::from_sentence(s).is_some())
    {
        return Err(Failure::bad_input(format!(
            "{}: no annotated sentence to evaluate against (every word needs HEAD and DEPREL)",
            options.gold.display()
        )));
    }
    let decoder = options.decoder.map(Into::into);
    let mut evaluator = Evaluator::excluding_labels(&options.exclude_labels);
    let started = std::time::Instant::now();
    for example in document.sentences.iter().filter_map(Example::from_sentence) {
        let parsed = if options.gold_tags {
            model.parse(
                &example.forms,
                Some(&example.tags),
                Some(&example.morph),
                decoder,
            )
        } else {
            model.parse(&example.forms, None, None, decoder)
        };
        evaluator.add(
            &example.heads,
            &example.labels,
            &parsed.heads,
            &parsed.labels,
            &example.tags,
            &parsed.tags,
        );
    }
    let elapsed = started.elapsed().as_secs_f64();
    let mut report = evaluator.report();
    report["decoder"] = serde_json::json!(decoder.unwrap_or(model.default_decoder).name());
    report["tags"] = serde_json::json!(if options.gold_tags {
        "gold"
    } else {
        "predicted"
    });
    report["seconds"] = serde_json::json!(elapsed);
    report["model_load_seconds"] = serde_json::json!(load_seconds);
    report["sentences_per_second"] =
        serde_json::json!(report["sentences"].as_f64().unwrap_or(0.0) / elapsed.max(1e-9));
    eprint!("{}", evaluator.table());
    println!("{report}");
    Ok(())
}
