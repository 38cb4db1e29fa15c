//! Part-of-speech tagger: greedy left-to-right averaged perceptron (Collins 2002) over hashed
//! features of the word, its affixes and shape, its neighbours and the two previous tags.

use crate::hashing::{hash_str, mix};
use crate::perceptron::{Trainee, best_class};
use crate::text;

/// A trained tagger.
#[derive(Debug, Clone)]
pub struct Tagger {
    pub tags: Vec<String>,
    pub bits: u32,
    pub weights: Vec<f32>,
}

/// What the features read of each word of a sentence, computed once per sentence: a word's
/// lowercase form, its hash and its 3-character suffix's hash are read by its own features and
/// by those of the two words either side.
struct Words {
    lower: Vec<String>,
    hash: Vec<u64>,
    suffix3: Vec<u64>,
    /// The same two hashes for positions outside the sentence ("<edge>").
    edge: (u64, u64),
}

impl Words {
    fn new(forms: &[String]) -> Words {
        let lower: Vec<String> = forms.iter().map(|f| text::lowercase(f)).collect();
        let hash = lower.iter().map(|w| hash_str(w)).collect();
        let suffix3 = lower.iter().map(|w| hash_str(text::suffix(w, 3))).collect();
        const EDGE: &str = "<edge>";
        Words {
            lower,
            hash,
            suffix3,
            edge: (hash_str(EDGE), hash_str(text::suffix(EDGE, 3))),
        }
    }

    /// (hash, suffix-3 hash) of position `j`, which may lie outside the sentence.
    fn at(&self, j: isize) -> (u64, u64) {
        match usize::try_from(j) {
            Ok(j) if j < self.lower.len() => (self.hash[j], self.suffix3[j]),
            _ => self.edge,
        }
    }
}

fn word_features(forms: &[String], words: &Words, i: usize, out: &mut Vec<u64>) {
    let word = words.lower[i].as_str();
    let at = |offset: isize| words.at(i as isize + offset);
    let ((word_hash, word_suffix3), (prev, prev_suffix3), (next, next_suffix3)) =
        (at(0), at(-1), at(1));
    out.push(mix(1, word_hash));
    out.push(mix(2, hash_str(text::suffix(word, 1))));
    out.push(mix(3, hash_str(text::suffix(word, 2))));
    out.push(mix(4, word_suffix3));
    out.push(mix(5, hash_str(text::suffix(word, 4))));
    out.push(mix(6, hash_str(text::prefix(word, 2))));
    out.push(mix(7, hash_str(&text::shape(&forms[i]))));
    out.push(mix(8, prev));
    out.push(mix(9, next));
    out.push(mix(10, next_suffix3));
    out.push(mix(11, prev_suffix3));
    out.push(mix(12, u64::from(i == 0)));
    out.push(13);
    out.push(mix(14, hash_str(text::suffix(word, 5))));
    out.push(mix(15, at(2).0));
    out.push(mix(16, at(-2).0));
    out.push(mix(17, mix(word_suffix3, prev)));
    out.push(mix(18, mix(word_hash, next)));
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
        let words = Words::new(forms);
        for i in 0..forms.len() {
            features.clear();
            word_features(forms, &words, i, &mut features);
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
            crate::hashing::shuffle(&mut order, seed ^ ((epoch as u64 + 1) * 0x51));
            for &s in &order {
                let (forms, gold) = &sentences[s];
                let (mut prev, mut prev2) = (START, START);
                let words = Words::new(forms);
                for i in 0..forms.len() {
                    trainee.tick();
                    features.clear();
                    word_features(forms, &words, i, &mut features);
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

#[cfg(test)]
mod tests {
    use super::*;

    /// The features as first written: every neighbour lowercased and hashed where it is read.
    /// The per-sentence tables must give exactly these hashes (a trained model depends on them).
    fn word_features_direct(forms: &[String], i: usize, out: &mut Vec<u64>) {
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

    #[test]
    fn per_sentence_word_tables_give_the_direct_features() {
        let sentences: Vec<Vec<&str>> = vec![
            vec!["Kitaplığı"],
            vec!["İstanbul'da", "iki", "GEMİ"],
            vec!["The", "crane", "lifted", "2025", "boxes", "."],
            vec!["a", "bé", "ÇAY", "ŞEKER", "x"],
        ];
        for sentence in sentences {
            let forms: Vec<String> = sentence.iter().map(|w| w.to_string()).collect();
            let words = Words::new(&forms);
            for i in 0..forms.len() {
                let (mut tabled, mut direct) = (Vec::new(), Vec::new());
                word_features(&forms, &words, i, &mut tabled);
                word_features_direct(&forms, i, &mut direct);
                assert_eq!(tabled, direct, "word {i} of {forms:?}");
            }
        }
    }
}
