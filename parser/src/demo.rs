//! Demo sentences with gold trees, from an invented scenario: shipping notes of a harbour crew
//! ("The crane operator moved a blue container to the north dock"). For demos, quick starts,
//! scaling curves and load tests only — never evidence for accuracy claims.
//!
//! Sentences are built from clauses joined by "and" until they reach the requested length, so
//! lengths up to 512 tokens are possible. The clauses cover what the README and the console show:
//! noun compounds ("the crane operator"), transitive and intransitive verbs ("A tug moved"),
//! auxiliaries, pronoun and name subjects, prepositional phrases of place and time ("to the quay
//! before the storm"), adverbs, subordinate clauses ("when the ship docked") and relative clauses
//! right after their noun ("the container that held the crates"). Every tree is projective, so a
//! model trained on this data decodes with Eisner's algorithm by default.

use crate::conllu::{Item, Sentence, Word};
use crate::hashing::scramble as mix;

const DETERMINERS: [&str; 4] = ["the", "a", "every", "this"];
const ADJECTIVES: [&str; 8] = [
    "blue", "heavy", "small", "rusty", "new", "empty", "second", "cold",
];
const NOUNS: [&str; 18] = [
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
    "quay",
    "storm",
    "shift",
    "barge",
    "berth",
    "captain",
];
/// Nouns that also modify another noun ("crane operator", "cargo manifest").
const MODIFIER_NOUNS: [&str; 6] = ["crane", "dock", "cargo", "harbour", "night", "deck"];
const NAMES: [&str; 4] = ["Aras", "Mira", "Tomas", "Selin"];
const PRONOUNS: [&str; 4] = ["she", "they", "we", "he"];
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
/// Verbs without an object ("A tug moved.").
const INTRANSITIVE: [&str; 6] = ["moved", "arrived", "left", "docked", "sailed", "waited"];
const AUXILIARIES: [&str; 2] = ["has", "had"];
/// Prepositions of a verb's place or time ("moved it to the quay before the storm").
const PREPOSITIONS: [&str; 5] = ["to", "onto", "behind", "before", "after"];
/// Prepositions inside a noun phrase ("the crate from the ship"); kept apart from the verb's
/// so that the attachment is learnable from the words.
const NOUN_PREPOSITIONS: [&str; 4] = ["from", "near", "beside", "of"];
/// Words that open a subordinate clause; none of them is also a preposition here.
const SUBORDINATORS: [&str; 3] = ["when", "because", "while"];
const ADVERBS: [&str; 6] = [
    "yesterday",
    "slowly",
    "again",
    "early",
    "carefully",
    "today",
];

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

    /// A noun phrase "det adj* (modifier-noun)? noun" attached to `head` with `label`; returns
    /// the noun's index. Heads are patched once the noun's index is known.
    fn noun_phrase(&mut self, dice: &mut Dice, head: usize, label: &'static str) -> usize {
        let det = self.push(dice.pick(&DETERMINERS), "DET", 0, "det");
        let mut modifiers = Vec::new();
        for _ in 0..dice.below(3) {
            modifiers.push(self.push(dice.pick(&ADJECTIVES), "ADJ", 0, "amod"));
        }
        if dice.chance(20) {
            modifiers.push(self.push(dice.pick(&MODIFIER_NOUNS), "NOUN", 0, "compound"));
        }
        let noun = self.push(dice.pick(&NOUNS), "NOUN", head, label);
        self.heads[det] = noun;
        for m in modifiers {
            self.heads[m] = noun;
        }
        noun
    }

    /// A subject: a noun phrase (sometimes with a relative clause right after its noun), a
    /// name or a pronoun. Returns the head word's index; its head is patched by the caller.
    fn subject(&mut self, dice: &mut Dice, depth: usize) -> usize {
        match dice.below(10) {
            0 => self.push(dice.pick(&NAMES), "PROPN", 0, "nsubj"),
            1 => self.push(dice.pick(&PRONOUNS), "PRON", 0, "nsubj"),
            _ => {
                let noun = self.noun_phrase(dice, 0, "nsubj");
                // A prepositional phrase inside the noun phrase only here, before the verb: after
                // an object it would be attached to the verb or the noun by meaning alone, which
                // a first-order model of this data cannot see.
                if dice.chance(20) {
                    let prep = self.push(dice.pick(&NOUN_PREPOSITIONS), "ADP", 0, "case");
                    let inner = self.noun_phrase(dice, noun, "nmod");
                    self.heads[prep] = inner;
                } else if depth == 0 && dice.chance(20) {
                    let that = self.push("that", "PRON", 0, "nsubj");
                    let relative = self.push(dice.pick(&VERBS), "VERB", noun, "acl:relcl");
                    self.heads[that] = relative;
                    self.noun_phrase(dice, relative, "obj");
                }
                noun
            }
        }
    }

    /// "subject (aux)? verb (object)? (prep NP)? (adverb)? (subordinator clause)?" with the verb
    /// attached to `head` with `label`; returns the verb's index.
    fn clause(&mut self, dice: &mut Dice, head: usize, label: &'static str, depth: usize) -> usize {
        let subject = self.subject(dice, depth);
        let auxiliary = dice
            .chance(15)
            .then(|| self.push(dice.pick(&AUXILIARIES), "AUX", 0, "aux"));
        let transitive = dice.chance(75);
        let verb_form = if transitive {
            dice.pick(&VERBS)
        } else {
            dice.pick(&INTRANSITIVE)
        };
        let verb = self.push(verb_form, "VERB", head, label);
        self.heads[subject] = verb;
        if let Some(aux) = auxiliary {
            self.heads[aux] = verb;
        }
        if transitive {
            self.noun_phrase(dice, verb, "obj");
        }
        for _ in 0..1 + usize::from(dice.chance(25)) {
            if dice.chance(40) {
                let prep = self.push(dice.pick(&PREPOSITIONS), "ADP", 0, "case");
                let noun = self.noun_phrase(dice, verb, "obl");
                self.heads[prep] = noun;
            }
        }
        if dice.chance(30) {
            self.push(dice.pick(&ADVERBS), "ADV", verb, "advmod");
        }
        if depth == 0 && dice.chance(15) {
            let mark = self.push(dice.pick(&SUBORDINATORS), "SCONJ", 0, "mark");
            let inner = self.clause(dice, verb, "advcl", depth + 1);
            self.heads[mark] = inner;
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
    let main = b.clause(&mut dice, ROOT, "root", 0);
    while b.forms.len() + 1 < min_words {
        let cc = b.push("and", "CCONJ", 0, "cc");
        let next = b.clause(&mut dice, main, "conj", 0);
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
    fn demo_sentences_are_projective_single_rooted_trees_of_the_requested_length() {
        for seed in 0..300 {
            let s = sentence(seed, 10 + (seed as usize % 60));
            let heads = s.heads().expect("annotated");
            assert_eq!(check_tree(&heads), Ok(1), "seed {seed}");
            assert!(s.len() >= 10 + (seed as usize % 60));
            assert!(is_projective(&heads), "seed {seed}");
        }
        assert!(sentence(1, 512).len() >= 512);
    }

    #[test]
    fn the_shown_constructions_occur() {
        let words: Vec<(String, String)> = corpus(500, 3, None, 60)
            .iter()
            .flat_map(|s| {
                s.words()
                    .map(|w| (w.lemma.clone(), w.deprel.clone()))
                    .collect::<Vec<_>>()
            })
            .collect();
        for (lemma, label) in [
            ("crane", "compound"),
            ("quay", "obl"),
            ("before", "case"),
            ("when", "mark"),
            ("that", "nsubj"),
            ("has", "aux"),
        ] {
            assert!(
                words.iter().any(|(l, d)| l == lemma && d == label),
                "{lemma} as {label}"
            );
        }
    }
}
