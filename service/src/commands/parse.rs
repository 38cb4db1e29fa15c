//! `arcwright parse`: stdin (CoNLL-U or plain text) to CoNLL-U on stdout.

use std::io::{Read, Write};

use arcwright_parser::conllu::{self, Sentence};
use arcwright_parser::model::Model;
use arcwright_parser::tokenize;

use super::Failure;
use crate::cli::{InputFormat, ParseOptions};

pub fn run(options: &ParseOptions) -> Result<(), Failure> {
    let model = Model::load(&options.model).map_err(Failure::bad_input)?;
    let mut input = Vec::new();
    std::io::stdin()
        .read_to_end(&mut input)
        .map_err(|e| Failure::runtime(format!("stdin: {e}")))?;
    let mut sentences: Vec<Sentence> = match options.input {
        InputFormat::Conllu => {
            conllu::read_bytes("<stdin>", &input)
                .map_err(Failure::bad_input)?
                .sentences
        }
        InputFormat::Text => {
            let text = String::from_utf8(input)
                .map_err(|e| Failure::bad_input(format!("<stdin>: invalid UTF-8: {e}")))?;
            tokenize::sentences(&text)
                .into_iter()
                .map(Sentence::from_forms)
                .collect()
        }
        InputFormat::Tokens => {
            let text = String::from_utf8(input)
                .map_err(|e| Failure::bad_input(format!("<stdin>: invalid UTF-8: {e}")))?;
            text.lines()
                .filter(|l| !l.trim().is_empty())
                .map(|l| Sentence::from_forms(l.split_whitespace()))
                .collect()
        }
    };
    let decoder = options.decoder.map(Into::into);
    let mut out = String::new();
    for sentence in &mut sentences {
        if !sentence.is_empty() {
            let forms: Vec<String> = sentence.words().map(|w| w.form.clone()).collect();
            let parsed = model.parse(&forms, None, None, decoder);
            for (i, word) in sentence.words_mut().enumerate() {
                word.upos = parsed.tags[i].clone();
                word.head = Some(parsed.heads[i]);
                word.deprel = parsed.labels[i].clone();
            }
        }
        sentence.write_to(&mut out);
    }
    std::io::stdout()
        .write_all(out.as_bytes())
        .map_err(|e| Failure::runtime(format!("stdout: {e}")))
}
