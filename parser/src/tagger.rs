//! Part-of-speech tagger: greedy left-to-right averaged perceptron (Collins 2002) over hashed
//! features of the word, its affixes and shape, its neighbours and the two previous tags.

use crate::features::{hash_str, mix};
use crate::perceptron::{Trainee, best_class};
use crate::text;

/// A trained tagger.
#[derive(Debug, Clone)]
pub struct Tagger {
    pub tags: Vec<String>,
    pub bits: u32,
    pub weights: Vec<f32>,
}

fn word_features(forms: &[String], i: usize, out: &mut Vec<u64>) {
    let get = |j: isize| -> String {
        if j < 0 || j as usize >= forms.len() {
            "<edge>".to_string()
        } else {
            text::lowercase(&forms[j as usize])
        }
    };
    let i = i as isize;
    let word = get(i);
    out.push(mix(1, hash_str(&word)));
    out.push(mix(2, hash_str(text::suffix(&word, 1))));
    out.push(mix(3, hash_str(text::suffix(&word, 2))));
    out.push(mix(4, hash_str(text::suffix(&word, 3))));
    out.push(mix(5, hash_str(text::suffix(&word, 4))));
    out.push(mix(6, hash_str(text::prefix(&word, 2))));
    out.push(mix(7, hash_str(&text::shape(&forms[i as usize]))));
    out.push(mix(8, hash_str(&get(i - 1))));
    out.push(mix(9, hash_str(&get(i + 1))));
    out.push(mix(10, hash_str(text::suffix(&get(i + 1), 3))));
    out.push(mix(11, hash_str(text::suffix(&get(i - 1), 3))));
    out.push(mix(12, u64::from(i == 0)));
    out.push(13);
    out.push(mix(14, hash_str(text::suffix(&word, 5))));
    out.push(mix(15, hash_str(&get(i + 2))));
    out.push(mix(16, hash_str(&get(i - 2))));
    out.push(mix(
        17,
        mix(hash_str(text::suffix(&word, 3)), hash_str(&get(i - 1))),
    ));
    out.push(mix(18, mix(hash_str(&word), hash_str(&get(i + 1)))));
    out.push(mix(19, u64::from(word.chars().count().min(8) as u8)));
}

fn history_features(
    prev: usize,
    prev2: usize,
    word_hash: u64,
    suffix_hash: u64,
    out: &mut Vec<u64>,
) {
    out.push(mix(20, prev as u64));
    out.push(mix(21, mix(prev as u64, prev2 as u64)));
    out.push(mix(22, mix(prev as u64, word_hash)));
    out.push(mix(23, mix(prev as u64, suffix_hash)));
}

const START: usize = usize::MAX - 1;

impl Tagger {
    /// Tags a sentence.
    pub fn tag(&self, forms: &[String]) -> Vec<String> {
        let mut out = Vec::with_capacity(forms.len());
        let (mut prev, mut prev2) = (START, START);
        let mut features = Vec::with_capacity(32);
        for i in 0..forms.len() {
            features.clear();
            word_features(forms, i, &mut features);
            let (word_hash, suffix_hash) = (features[0], features[3]);
            history_features(prev, prev2, word_hash, suffix_hash, &mut features);
            let best = self.best_tag(&features, &self.weights);
            out.push(self.tags[best].clone());
            prev2 = prev;
            prev = best;
        }
        out
    }

    fn best_tag(&self, features: &[u64], weights: &[f32]) -> usize {
        best_class(features, self.tags.len(), weights, self.bits)
    }

    /// Trains on (forms, gold tags) pairs; the order of `sentences` is shuffled per epoch by
    /// `seed`, so equal inputs give equal taggers.
    pub fn train(
        sentences: &[(Vec<String>, Vec<String>)],
        epochs: usize,
        seed: u64,
        bits: u32,
    ) -> Tagger {
        let mut tags: Vec<String> = sentences
            .iter()
            .flat_map(|(_, t)| t.iter().cloned())
            .collect();
        tags.sort();
        tags.dedup();
        let index = |tag: &str| tags.binary_search_by(|t| t.as_str().cmp(tag)).unwrap_or(0);
        let mut tagger = Tagger {
            tags: tags.clone(),
            bits,
            weights: Vec::new(),
        };
        let mut trainee = Trainee::new(bits);
        let mut order: Vec<usize> = (0..sentences.len()).collect();
        let mut features = Vec::with_capacity(32);
        for epoch in 0..epochs {
            crate::train::shuffle(&mut order, seed ^ ((epoch as u64 + 1) * 0x51));
            for &s in &order {
                let (forms, gold) = &sentences[s];
                let (mut prev, mut prev2) = (START, START);
                for i in 0..forms.len() {
                    trainee.tick();
                    features.clear();
                    word_features(forms, i, &mut features);
                    let (word_hash, suffix_hash) = (features[0], features[3]);
                    history_features(prev, prev2, word_hash, suffix_hash, &mut features);
                    let guess = tagger.best_tag(&features, &trainee.weights);
                    let truth = index(&gold[i]);
                    if guess != truth {
                        for &f in &features {
                            trainee.update(mix(f, truth as u64), 1.0);
                            trainee.update(mix(f, guess as u64), -1.0);
                        }
                    }
                    // Condition on the gold history during training (standard for greedy taggers).
                    prev2 = prev;
                    prev = truth;
                }
            }
        }
        tagger.weights = trainee.averaged();
        tagger
    }
}
