//! `arcwright demo-data`: demo sentences with gold trees (invented scenario; demos only).

use std::io::Write;

use arcwright_parser::conllu::Document;
use arcwright_parser::demo;

use super::Failure;
use crate::cli::DemoDataOptions;

pub fn run(options: &DemoDataOptions) -> Result<(), Failure> {
    let sentences = demo::corpus(
        options.sentences,
        options.seed,
        options.words.map(|w| w as usize),
        options.max_words.max(6),
    );
    let document = Document {
        sentences,
        ..Document::default()
    };
    std::io::stdout()
        .write_all(document.to_conllu().as_bytes())
        .map_err(|e| Failure::runtime(format!("stdout: {e}")))
}
