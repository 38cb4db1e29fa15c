//! Sentences to send: the demo generator at fixed lengths or a long-tailed mix, or the sentences
//! of a CoNLL-U file (e.g. the Turkish test split).

use arcwright_parser::{conllu, demo};

/// One request's sentences, as tokens.
pub type Sentence = Vec<String>;

pub fn demo_fixed(words: usize, count: usize, seed: u64) -> Vec<Sentence> {
    (0..count)
        .map(|i| {
            demo::sentence(seed.wrapping_add(i as u64), words)
                .words()
                .take(words)
                .map(|w| w.form.clone())
                .collect()
        })
        .collect()
}

/// Long-tailed lengths: mostly 5–30 words, a quarter 25–55, one in twenty up to `max_words`.
pub fn demo_mix(count: usize, seed: u64, max_words: usize) -> Vec<Sentence> {
    demo::corpus(count, seed, None, max_words)
        .iter()
        .map(|s| s.words().map(|w| w.form.clone()).collect())
        .collect()
}

pub fn conllu_file(path: &str) -> anyhow::Result<Vec<Sentence>> {
    let bytes = std::fs::read(path)?;
    let document = conllu::read_bytes(path, &bytes)?;
    Ok(document
        .sentences
        .iter()
        .filter(|s| !s.is_empty())
        .map(|s| s.words().map(|w| w.form.clone()).collect())
        .collect())
}

/// Power-of-two length bucket, as the service's metrics use.
pub fn bucket(tokens: usize) -> usize {
    tokens.max(1).next_power_of_two().max(8)
}
