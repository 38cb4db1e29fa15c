//! `arcwright parse`: stdin (CoNLL-U, plain text or tokens) to CoNLL-U on stdout, or a shard of
//! a file list to one CoNLL-U object per input file.
//!
//! With `--files LIST --out PREFIX --shard INDEX/COUNT`, each process parses the list entries
//! whose 0-based position modulo COUNT is INDEX (round robin: deterministic, needs no
//! coordination, and every process can check the whole list for clashing output names). Inputs
//! and outputs are paths or store URLs (`s3://bucket/key`), so a Kubernetes Indexed Job can
//! spread a corpus over pods that read the model from the same store the service follows.
//! Each output object is written whole, in one put, after its file is parsed: a pod that dies
//! leaves complete outputs or none, and a retried pod overwrites with identical bytes. When the
//! shard is done, `PREFIX/_shards/INDEX-of-COUNT.json` records what it did.

use std::collections::HashMap;
use std::io::{Read, Write};
use std::path::PathBuf;
use std::time::Instant;

use arcwright_parser::conllu::{self, Item, Sentence};
use arcwright_parser::model::Model;
use arcwright_parser::pipeline;
use arcwright_parser::tokenize::{self, Abbreviations};
use arcwright_store::{ObjectUrl, Store, StoreError, join_url};
use rayon::prelude::*;

use super::Failure;
use super::store::{failure as store_failure, version_or_live};
use crate::cli::{InputFormat, ParseOptions, Shard};

pub fn run(options: &ParseOptions) -> Result<(), Failure> {
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(Failure::runtime)?;
    let (model, model_id) = runtime.block_on(load_model(options))?;
    let threads = options.threads.unwrap_or(0);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(Failure::runtime)?;
    let parse_options = pipeline::ParseOptions {
        decoder: options.decoder.map(Into::into),
        confidence: options.confidence,
        ..pipeline::ParseOptions::default()
    };
    match (&options.files, &options.out) {
        (Some(list), Some(out)) => runtime.block_on(parse_files(
            &model,
            &model_id,
            &pool,
            &parse_options,
            options,
            list,
            out,
        )),
        _ => {
            let mut input = Vec::new();
            std::io::stdin()
                .read_to_end(&mut input)
                .map_err(|e| Failure::runtime(format!("stdin: {e}")))?;
            let mut sentences =
                read_sentences("<stdin>", &input, options.input, &model.abbreviations)?;
            pool.install(|| parse_all(&model, &mut sentences, &parse_options));
            std::io::stdout()
                .write_all(write_sentences(&sentences).as_bytes())
                .map_err(|e| Failure::runtime(format!("stdout: {e}")))
        }
    }
}

/// The model and a name for it (`name@version` from a store, the directory otherwise).
async fn load_model(options: &ParseOptions) -> Result<(Model, String), Failure> {
    let (dir, id): (PathBuf, String) = match (&options.model, &options.store, &options.name) {
        (Some(dir), _, _) => (dir.clone(), dir.display().to_string()),
        (None, Some(url), Some(name)) => {
            let store = Store::open_existing(url).map_err(store_failure)?;
            let version = version_or_live(&store, name, options.version.as_deref()).await?;
            let (dir, _) = store
                .fetch(name, &version, &options.cache)
                .await
                .map_err(store_failure)?;
            (dir, format!("{name}@{version}"))
        }
        (None, Some(url), None) => {
            return Err(Failure::bad_input(format!(
                "the store {url} needs --name NAME: which model of the store to parse with"
            )));
        }
        (None, None, _) => {
            return Err(Failure::bad_input(
                "give --model DIR, or --store URL (or ARCWRIGHT_STORE) with --name NAME",
            ));
        }
    };
    if options.model.is_some() && (options.name.is_some() || options.version.is_some()) {
        return Err(Failure::bad_input(
            "--name and --version choose a model in a store; with --model DIR give neither",
        ));
    }
    let model = Model::load(&dir).map_err(Failure::bad_input)?;
    Ok((model, id))
}

/// Whether the first line that is neither blank nor a comment has no tab: text, not CoNLL-U.
fn looks_like_plain_text(bytes: &[u8]) -> bool {
    String::from_utf8_lossy(bytes)
        .lines()
        .find(|line| !line.trim().is_empty() && !line.starts_with('#'))
        .is_some_and(|line| !line.contains('\t'))
}

/// Sentences of one input in the chosen format; errors name the source (and line, for CoNLL-U).
fn read_sentences(
    source: &str,
    bytes: &[u8],
    format: InputFormat,
    abbreviations: &Abbreviations,
) -> Result<Vec<Sentence>, Failure> {
    let text = || {
        std::str::from_utf8(bytes)
            .map_err(|e| Failure::bad_input(format!("{source}: invalid UTF-8: {e}")))
    };
    Ok(match format {
        InputFormat::Conllu => {
            conllu::read_bytes(source, bytes)
                .map_err(|e| {
                    if looks_like_plain_text(bytes) {
                        Failure::bad_input(format!(
                            "{source}: the input is not CoNLL-U (no tab-separated fields); \
                             for raw text use --input text, for one sentence of space-separated \
                             tokens per line --input tokens"
                        ))
                    } else {
                        Failure::bad_input(e)
                    }
                })?
                .sentences
        }
        InputFormat::Text => tokenize::split(text()?, abbreviations)
            .into_iter()
            .enumerate()
            .map(|(i, s)| with_comments(Sentence::from_forms(s.tokens), i, &s.text))
            .collect(),
        InputFormat::Tokens => text()?
            .lines()
            .filter(|l| !l.trim().is_empty())
            .enumerate()
            .map(|(i, l)| with_comments(Sentence::from_forms(l.split_whitespace()), i, l))
            .collect(),
    })
}

/// Fills UPOS, HEAD and DEPREL of every sentence (and, with confidences, an
/// `ArcConfidence=P` entry in MISC), in parallel on the current rayon pool.
fn parse_all(model: &Model, sentences: &mut [Sentence], options: &pipeline::ParseOptions) {
    sentences.par_iter_mut().for_each(|sentence| {
        if sentence.is_empty() {
            return;
        }
        let forms: Vec<String> = sentence.words().map(|w| w.form.clone()).collect();
        let parsed = model.parse_observed(&forms, None, options, &mut pipeline::Unobserved);
        let confidences = parsed.confidences.as_deref();
        for (i, (word, (_, head))) in sentence.words_mut().zip(parsed.heads.arcs()).enumerate() {
            word.upos = parsed.tags[i].clone();
            word.head = Some(head);
            word.deprel = parsed.labels[i].clone();
            if let Some(p) = confidences.and_then(|c| c[i]) {
                // Rust prints the shortest decimal that reads back as the same f64.
                let entry = format!("ArcConfidence={p}");
                word.misc = match word.misc.as_str() {
                    "_" | "" => entry,
                    other => format!("{other}|{entry}"),
                };
            }
        }
    });
}

/// `# sent_id = N` (from 1, per input) and `# text = …` (white space runs as one space, so the
/// comment stays on one line) before the words of a sentence read from text.
fn with_comments(mut sentence: Sentence, index: usize, text: &str) -> Sentence {
    let text = text.split_whitespace().collect::<Vec<_>>().join(" ");
    sentence.items.splice(
        0..0,
        [
            Item::Comment(format!("# sent_id = {}", index + 1)),
            Item::Comment(format!("# text = {text}")),
        ],
    );
    sentence
}

fn write_sentences(sentences: &[Sentence]) -> String {
    let mut out = String::new();
    for sentence in sentences {
        sentence.write_to(&mut out);
    }
    out
}

/// One entry of a file list: where it was listed, where it is, where its parse goes.
#[derive(Debug)]
struct Entry {
    line: usize,
    input: String,
    output_name: String,
}

/// Reads a file list: one path or URL per line; blank lines and `#` comments skipped. Output
/// names (`<input name without extension>.conllu`) must be unique over the whole list, so that
/// every shard agrees and no shard overwrites another's output.
fn entries(list_url: &str, text: &str) -> Result<Vec<Entry>, Failure> {
    let mut entries = Vec::new();
    let mut first_line_of: HashMap<String, usize> = HashMap::new();
    for (i, raw) in text.lines().enumerate() {
        let line = i + 1;
        let input = raw.trim();
        if input.is_empty() || input.starts_with('#') {
            continue;
        }
        let name = input.rsplit('/').next().unwrap_or(input);
        let stem = match name.rsplit_once('.') {
            Some((stem, _)) if !stem.is_empty() => stem,
            _ => name,
        };
        if stem.is_empty() || stem.starts_with('_') {
            return Err(Failure::bad_input(format!(
                "{list_url}:{line}: {input:?} has no usable file name (names starting with _ \
                 are reserved for shard reports)"
            )));
        }
        let output_name = format!("{stem}.conllu");
        if let Some(first) = first_line_of.insert(output_name.clone(), line) {
            return Err(Failure::bad_input(format!(
                "{list_url}:{line}: {input:?} would be written to {output_name}, like the entry \
                 on line {first}; rename one of them"
            )));
        }
        entries.push(Entry {
            line,
            input: input.to_string(),
            output_name,
        });
    }
    Ok(entries)
}

async fn parse_files(
    model: &Model,
    model_id: &str,
    pool: &rayon::ThreadPool,
    parse_options: &pipeline::ParseOptions,
    options: &ParseOptions,
    list: &str,
    out: &str,
) -> Result<(), Failure> {
    let started = Instant::now();
    let Shard { index, count } = options.shard;
    let list_bytes = ObjectUrl::parse(list)
        .map_err(store_failure)?
        .read()
        .await
        .map_err(store_failure)?;
    let list_text = std::str::from_utf8(&list_bytes)
        .map_err(|e| Failure::bad_input(format!("{list}: invalid UTF-8: {e}")))?;
    let all = entries(list, list_text)?;
    // Parse every URL of the shard before the first input is read: a typo fails fast.
    let mut mine = Vec::new();
    for entry in all.iter().skip(index).step_by(count) {
        let input = ObjectUrl::parse(&entry.input)
            .map_err(|e| Failure::bad_input(format!("{list}:{}: {e}", entry.line)))?;
        let output = ObjectUrl::parse(&join_url(out, &entry.output_name)).map_err(store_failure)?;
        mine.push((entry, input, output));
    }
    let (mut sentences_done, mut tokens_done) = (0usize, 0usize);
    let mut outputs = Vec::new();
    for (entry, input, output) in &mine {
        let bytes = input.read().await.map_err(|e| match e {
            StoreError::NotFound { .. } => {
                Failure::bad_input(format!("{list}:{}: {e}", entry.line))
            }
            other => store_failure(other),
        })?;
        let mut sentences =
            read_sentences(input.url(), &bytes, options.input, &model.abbreviations)?;
        pool.install(|| parse_all(model, &mut sentences, parse_options));
        sentences_done += sentences.len();
        tokens_done += sentences.iter().map(|s| s.words().count()).sum::<usize>();
        output
            .write(write_sentences(&sentences).into_bytes())
            .await
            .map_err(store_failure)?;
        outputs.push(output.url().to_string());
    }
    let seconds = started.elapsed().as_secs_f64();
    let report = serde_json::json!({
        "shard": format!("{index}/{count}"),
        "model": model_id,
        "list": list,
        "listed": all.len(),
        "files": outputs.len(),
        "outputs": outputs,
        "sentences": sentences_done,
        "tokens": tokens_done,
        "seconds": seconds,
    });
    let report_url = join_url(out, &format!("_shards/{index}-of-{count}.json"));
    ObjectUrl::parse(&report_url)
        .map_err(store_failure)?
        .write(serde_json::to_vec_pretty(&report).map_err(Failure::runtime)?)
        .await
        .map_err(store_failure)?;
    eprintln!(
        "shard {index}/{count}: {} of {} files, {sentences_done} sentences, {tokens_done} tokens \
         in {seconds:.2} s ({:.0} sentences/s); report {report_url}",
        outputs.len(),
        all.len(),
        sentences_done as f64 / seconds.max(1e-9),
    );
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn entries_skip_comments_and_name_outputs() {
        let list = "# corpus\n\ncorpus/a.txt\ns3://bucket/in/b.conllu\nc\n";
        let got = entries("list", list).unwrap();
        let names: Vec<_> = got
            .iter()
            .map(|e| (e.line, e.output_name.as_str()))
            .collect();
        assert_eq!(names, [(3, "a.conllu"), (4, "b.conllu"), (5, "c.conllu")]);
    }

    #[test]
    fn clashing_output_names_name_both_lines() {
        let error = entries("list.txt", "x/a.txt\ny/a.conllu\n").unwrap_err();
        assert_eq!(error.exit_code, 2);
        assert!(error.message.contains("list.txt:2"), "{}", error.message);
        assert!(error.message.contains("line 1"), "{}", error.message);
    }

    #[test]
    fn reserved_names_are_refused() {
        let error = entries("list.txt", "ok.txt\n_shards.txt\n").unwrap_err();
        assert!(error.message.contains("list.txt:2"), "{}", error.message);
    }
}
