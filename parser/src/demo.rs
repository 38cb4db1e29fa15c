//! Demo sentences with gold trees, from an invented scenario: shipping notes of a harbour crew
//! ("The crane operator moved a blue container to the north dock"). For demos, quick starts,
//! scaling curves and load tests only — never evidence for accuracy claims.
//!
//! Sentences are built from clauses joined by "and" until they reach the requested length, so
//! lengths up to 512 tokens are possible. About one sentence in four has an extraposed relative
//! clause ("A container arrived yesterday that held spare parts"), whose arc from the subject
//! noun crosses the arc from the root to the verb: a non-projective tree.

use crate::conllu::{Item, Sentence, Word};
use crate::hashing::scramble as mix;

const DETERMINERS: [&str; 4] = ["the", "a", "every", "this"];
const ADJECTIVES: [&str; 8] = [
    "blue", "heavy", "small", "rusty", "new", "empty", "second", "cold",
];
const NOUNS: [&str; 12] = [
    "operator",
    "container",
    "crane",
    "dock",
    "pallet",
    "ship",
    "pilot",
    "manifest",
    "crate",
    "tug",
    "clerk",
    "forklift",
];
const VERBS: [&str; 8] = [
    "moved",
    "loaded",
    "checked",
    "lifted",
    "stacked",
    "towed",
    "signed",
    "inspected",
];
const PREPOSITIONS: [&str; 5] = ["to", "near", "behind", "from", "beside"];
const ADVERBS: [&str; 4] = ["yesterday", "slowly", "again", "early"];

/// A reproducible pseudo-random source (SplitMix64).
struct Dice(u64);

impl Dice {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        mix(self.0, 0)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }
    fn pick<'a>(&mut self, items: &[&'a str]) -> &'a str {
        items[self.below(items.len())]
    }
    fn chance(&mut self, percent: u64) -> bool {
        self.next() % 100 < percent
    }
}

/// Tokens with 0-based heads (`usize::MAX` = root) while a sentence is built.
struct Builder {
    forms: Vec<String>,
    tags: Vec<&'static str>,
    heads: Vec<usize>,
    labels: Vec<&'static str>,
}

const ROOT: usize = usize::MAX;

impl Builder {
    fn push(&mut self, form: &str, tag: &'static str, head: usize, label: &'static str) -> usize {
        self.forms.push(form.to_string());
        self.tags.push(tag);
        self.heads.push(head);
        self.labels.push(label);
        self.forms.len() - 1
    }

    /// A noun phrase "det adj* noun (prep det noun)?" attached to `head` with `label`; returns
    /// the noun's index. Heads are patched once the noun's index is known.
    fn noun_phrase(&mut self, dice: &mut Dice, head: usize, label: &'static str) -> usize {
        let det = self.push(dice.pick(&DETERMINERS), "DET", 0, "det");
        let mut adjectives = Vec::new();
        for _ in 0..dice.below(3) {
            adjectives.push(self.push(dice.pick(&ADJECTIVES), "ADJ", 0, "amod"));
        }
        let noun = self.push(dice.pick(&NOUNS), "NOUN", head, label);
        self.heads[det] = noun;
        for a in adjectives {
            self.heads[a] = noun;
        }
        if dice.chance(25) {
            let prep = self.push(dice.pick(&PREPOSITIONS), "ADP", 0, "case");
            let inner = self.noun_phrase(dice, noun, "nmod");
            self.heads[prep] = inner;
        }
        noun
    }

    /// "NP verb NP (prep NP)? (adverb)? (that verb NP)?" — the relative clause, when present, is
    /// extraposed after the verb phrase and attached to the subject noun.
    fn clause(&mut self, dice: &mut Dice, head: usize, label: &'static str) -> usize {
        let subject = self.noun_phrase(dice, 0, "nsubj");
        let verb = self.push(dice.pick(&VERBS), "VERB", head, label);
        self.heads[subject] = verb;
        self.noun_phrase(dice, verb, "obj");
        if dice.chance(40) {
            let prep = self.push(dice.pick(&PREPOSITIONS), "ADP", 0, "case");
            let noun = self.noun_phrase(dice, verb, "obl");
            self.heads[prep] = noun;
        }
        if dice.chance(40) {
            self.push(dice.pick(&ADVERBS), "ADV", verb, "advmod");
        }
        if dice.chance(25) {
            self.push("that", "PRON", 0, "nsubj");
            let that = self.forms.len() - 1;
            let relative = self.push(dice.pick(&VERBS), "VERB", subject, "acl:relcl");
            self.heads[that] = relative;
            self.noun_phrase(dice, relative, "obj");
        }
        verb
    }
}

/// A sentence of at least `min_words` words (most are a little longer), from `seed`.
pub fn sentence(seed: u64, min_words: usize) -> Sentence {
    let mut dice = Dice(seed);
    let mut b = Builder {
        forms: Vec::new(),
        tags: Vec::new(),
        heads: Vec::new(),
        labels: Vec::new(),
    };
    let main = b.clause(&mut dice, ROOT, "root");
    while b.forms.len() + 1 < min_words {
        let cc = b.push("and", "CCONJ", 0, "cc");
        let next = b.clause(&mut dice, main, "conj");
        b.heads[cc] = next;
    }
    b.push(".", "PUNCT", main, "punct");
    let mut text_forms = b.forms.clone();
    if let Some(first) = text_forms.first_mut() {
        let mut chars = first.chars();
        if let Some(c) = chars.next() {
            *first = c.to_uppercase().chain(chars).collect();
        }
    }
    let items = (0..b.forms.len())
        .map(|i| {
            let mut word = Word::bare(i + 1, text_forms[i].clone());
            word.lemma = b.forms[i].clone();
            word.upos = b.tags[i].to_string();
            word.head = Some(if b.heads[i] == ROOT {
                0
            } else {
                b.heads[i] + 1
            });
            word.deprel = b.labels[i].to_string();
            Item::Word(word)
        })
        .collect();
    let mut sentence = Sentence {
        items,
        first_line: 0,
    };
    sentence
        .items
        .insert(0, Item::Comment(format!("# sent_id = harbour-{seed}")));
    sentence
}

/// `count` sentences with lengths drawn from a long-tailed mix (mostly 5–30 words, some up to
/// `max_words`) unless `fixed_words` is given.
pub fn corpus(
    count: usize,
    seed: u64,
    fixed_words: Option<usize>,
    max_words: usize,
) -> Vec<Sentence> {
    let mut dice = Dice(seed ^ 0xD3);
    (0..count)
        .map(|i| {
            let words = fixed_words.unwrap_or_else(|| {
                let roll = dice.below(100);
                match roll {
                    0..=69 => 5 + dice.below(20),
                    70..=94 => 25 + dice.below(30),
                    _ => 55 + dice.below(max_words.saturating_sub(55).max(1)),
                }
            });
            sentence(seed.wrapping_mul(1_000_003).wrapping_add(i as u64), words)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::decode::{check_tree, is_projective};

    #[test]
    fn demo_sentences_are_single_rooted_trees_of_the_requested_length() {
        let mut non_projective = 0;
        for seed in 0..200 {
            let s = sentence(seed, 10 + (seed as usize % 60));
            let heads = s.heads().expect("annotated");
            assert_eq!(check_tree(&heads), Ok(1), "seed {seed}");
            assert!(s.len() >= 10 + (seed as usize % 60));
            non_projective += usize::from(!is_projective(&heads));
        }
        assert!(
            non_projective > 20,
            "some trees have crossing arcs ({non_projective}/200)"
        );
        assert!(sentence(1, 512).len() >= 512);
    }
}
