//! `arcwright conllu check|fields|rewrite`: the CoNLL-U reader and writer from the command line,
//! used by the outside checks against other CoNLL-U implementations.

use std::io::Write;
use std::path::Path;

use arcwright_parser::conllu::{self, Document};
use serde_json::json;

use super::Failure;
use crate::cli::{ConlluAction, ConlluOptions};

pub fn run(options: &ConlluOptions) -> Result<(), Failure> {
    match &options.action {
        ConlluAction::Check { files, lenient } => check(files, *lenient),
        ConlluAction::Fields { file } => fields(file),
        ConlluAction::Rewrite { file } => rewrite(file),
        ConlluAction::Split { files, out } => split(files, out),
    }
}

fn read_file(path: &Path) -> Result<Vec<u8>, Failure> {
    std::fs::read(path)
        .map_err(|e| Failure::runtime(format!("{}: cannot read: {e}", path.display())))
}

fn read_strict(path: &Path) -> Result<Document, Failure> {
    let bytes = read_file(path)?;
    conllu::read_bytes(&path.display().to_string(), &bytes).map_err(Failure::bad_input)
}

fn check(files: &[std::path::PathBuf], lenient: bool) -> Result<(), Failure> {
    let mut problems = 0usize;
    for path in files {
        let bytes = read_file(path)?;
        let name = path.display().to_string();
        if lenient {
            let read = conllu::read_bytes_lenient(&name, &bytes).map_err(Failure::bad_input)?;
            for error in &read.errors {
                eprintln!("{error}");
            }
            problems += read.errors.len();
            let words: usize = read.document.sentences.iter().map(|s| s.len()).sum();
            println!(
                "{name}: {} sentences, {words} words read; {} problems",
                read.document.sentences.len(),
                read.errors.len()
            );
        } else {
            match conllu::read_bytes(&name, &bytes) {
                Ok(document) => {
                    let words: usize = document.sentences.iter().map(|s| s.len()).sum();
                    println!(
                        "{name}: {} sentences, {words} words, no problems",
                        document.sentences.len()
                    );
                }
                Err(error) => {
                    eprintln!("{error}");
                    problems += 1;
                }
            }
        }
    }
    match problems {
        0 => Ok(()),
        n => Err(Failure::bad_input(format!("{n} problem(s) found"))),
    }
}

fn fields(path: &Path) -> Result<(), Failure> {
    let document = read_strict(path)?;
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    for sentence in &document.sentences {
        let words: Vec<_> = sentence
            .words()
            .map(|w| {
                json!({
                    "id": w.id, "form": w.form, "lemma": w.lemma, "upos": w.upos, "xpos": w.xpos,
                    "feats": w.feature_pairs(), "head": w.head, "deprel": w.deprel,
                    "deps": w.deps, "misc": w.misc,
                })
            })
            .collect();
        let comments: Vec<_> = sentence
            .items
            .iter()
            .filter_map(|item| match item {
                conllu::Item::Comment(text) => Some(text.as_str()),
                _ => None,
            })
            .collect();
        let line = json!({"line": sentence.first_line, "comments": comments, "words": words});
        writeln!(out, "{line}").map_err(Failure::runtime)?;
    }
    out.flush().map_err(Failure::runtime)
}

fn rewrite(path: &Path) -> Result<(), Failure> {
    let document = read_strict(path)?;
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    out.write_all(document.to_conllu().as_bytes())
        .map_err(Failure::runtime)?;
    out.flush().map_err(Failure::runtime)
}

fn split(files: &[std::path::PathBuf], out: &Path) -> Result<(), Failure> {
    let mut parts = [
        Document::default(),
        Document::default(),
        Document::default(),
    ];
    let mut index = 0usize;
    for path in files {
        for sentence in read_strict(path)?.sentences {
            if sentence.is_empty() {
                continue;
            }
            let part = match index % 10 {
                0 => 2,
                1 => 1,
                _ => 0,
            };
            parts[part].sentences.push(sentence);
            index += 1;
        }
    }
    std::fs::create_dir_all(out)
        .map_err(|e| Failure::runtime(format!("{}: {e}", out.display())))?;
    for (name, document) in ["train", "dev", "test"].iter().zip(&parts) {
        let path = out.join(format!("{name}.conllu"));
        std::fs::write(&path, document.to_conllu())
            .map_err(|e| Failure::runtime(format!("{}: {e}", path.display())))?;
        println!("{}: {} sentences", path.display(), document.sentences.len());
    }
    Ok(())
}
