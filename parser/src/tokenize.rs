//! Raw text to sentences of tokens, with the Unicode text segmentation rules of UAX #29 (word
//! and sentence boundaries) from the `unicode-segmentation` crate, corrected by abbreviations a
//! model learned from its training data.
//!
//! UAX #29 alone breaks after an abbreviation followed by a capitalised word ("Dr. Aras" → two
//! sentences) and splits the abbreviation's full stop off ("Dr", "."). With [`Abbreviations`]
//! (tokens ending in a full stop that occur inside training sentences, kept in the model), such a
//! token stays one token and does not end a sentence. Words keep internal apostrophes and full
//! stops ("Ankara'da", "3.5"), which matches treebanks that do not split clitics; every other
//! punctuation mark is its own token. No language-specific rules beyond what the data teaches.

use std::collections::{BTreeMap, BTreeSet};

use unicode_segmentation::UnicodeSegmentation;

/// Tokens ending in a full stop that do not end a sentence ("Dr.", "vb.", "19.").
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Abbreviations(BTreeSet<String>);

/// Longest abbreviation learned, in characters (longer tokens ending in "." are words the
/// treebank left attached to their full stop, not abbreviations).
const MAX_ABBREVIATION_CHARS: usize = 8;

impl Abbreviations {
    /// Learns from tokenised sentences: every token of at most eight characters that ends in
    /// one full stop after a letter or digit ("Dr.", "v.b.", "19.", not "..."), seen inside a
    /// sentence (not as its last token) at least once and more often inside than last.
    pub fn learn<'a>(sentences: impl IntoIterator<Item = &'a [String]>) -> Abbreviations {
        let mut inside: BTreeMap<&str, (usize, usize)> = BTreeMap::new();
        for sentence in sentences {
            for (i, form) in sentence.iter().enumerate() {
                if Self::shaped_like_one(form) {
                    let entry = inside.entry(form.as_str()).or_default();
                    if i + 1 < sentence.len() {
                        entry.0 += 1;
                    } else {
                        entry.1 += 1;
                    }
                }
            }
        }
        Abbreviations(
            inside
                .into_iter()
                .filter(|(_, (within, last))| *within > 0 && within > last)
                .map(|(form, _)| form.to_string())
                .collect(),
        )
    }

    fn shaped_like_one(form: &str) -> bool {
        let Some(stem) = form.strip_suffix('.') else {
            return false;
        };
        form.chars().count() <= MAX_ABBREVIATION_CHARS
            && stem.chars().last().is_some_and(char::is_alphanumeric)
    }

    /// From a stored list.
    pub fn from_list(forms: impl IntoIterator<Item = String>) -> Abbreviations {
        Abbreviations(forms.into_iter().collect())
    }

    /// The forms, sorted.
    pub fn to_list(&self) -> Vec<String> {
        self.0.iter().cloned().collect()
    }

    pub fn contains(&self, form: &str) -> bool {
        self.0.contains(form)
    }
}

/// One sentence of raw text: the text as it appeared (trimmed) and its tokens.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TextSentence {
    pub text: String,
    pub tokens: Vec<String>,
}

/// A stretch of text by byte offsets: a sentence being built, with its tokens' spans.
struct Piece {
    start: usize,
    end: usize,
    tokens: Vec<(usize, usize)>,
}

/// Splits text into sentences of non-blank tokens with the abbreviations' corrections; empty
/// sentences are dropped.
pub fn split(text: &str, abbreviations: &Abbreviations) -> Vec<TextSentence> {
    let mut pieces: Vec<Piece> = Vec::new();
    for (start, piece) in text.split_sentence_bound_indices() {
        let mut tokens: Vec<(usize, usize)> = Vec::new();
        for (offset, token) in piece.split_word_bound_indices() {
            if token.trim().is_empty() {
                continue;
            }
            let (begin, end) = (start + offset, start + offset + token.len());
            // "Dr" + "." → "Dr." when the joined form is a known abbreviation.
            if token == "."
                && let Some(last) = tokens.last_mut()
                && last.1 == begin
                && abbreviations.contains(&text[last.0..end])
            {
                last.1 = end;
                continue;
            }
            tokens.push((begin, end));
        }
        if tokens.is_empty() {
            continue;
        }
        let ends_in_abbreviation = |p: &Piece| {
            p.tokens
                .last()
                .is_some_and(|&(b, e)| abbreviations.contains(&text[b..e]))
        };
        match pieces.last_mut() {
            Some(previous) if ends_in_abbreviation(previous) => {
                previous.end = start + piece.len();
                previous.tokens.extend(tokens);
            }
            _ => pieces.push(Piece {
                start,
                end: start + piece.len(),
                tokens,
            }),
        }
    }
    pieces
        .into_iter()
        .map(|Piece { start, end, tokens }| TextSentence {
            text: text[start..end].trim().to_string(),
            tokens: tokens
                .into_iter()
                .map(|(b, e)| text[b..e].to_string())
                .collect(),
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// UAX #29 behaviour on Turkish text (expected splits worked out from the UAX #29 rules).
    #[test]
    fn splits_sentences_and_words_by_uax29() {
        let sentences = |text: &str| -> Vec<Vec<String>> {
            split(text, &Abbreviations::default())
                .into_iter()
                .map(|s| s.tokens)
                .collect()
        };
        let got = sentences("Ankara'da 3.5 derece vardı. Yarın yağmur yağacak!");
        assert_eq!(
            got,
            vec![
                vec!["Ankara'da", "3.5", "derece", "vardı", "."],
                vec!["Yarın", "yağmur", "yağacak", "!"],
            ]
        );
        assert!(sentences("  \n ").is_empty());
    }

    fn forms(words: &[&str]) -> Vec<String> {
        words.iter().map(|w| w.to_string()).collect()
    }

    #[test]
    fn abbreviations_are_learned_from_inside_sentences_only() {
        let training = [
            forms(&["Dr.", "Aras", "geldi", "."]),
            forms(&["19.", "yüzyıl", "..."]),
            forms(&["Bitti", "vb."]),
            forms(&["Kitap", "vb.", "aldı", "."]),
            forms(&["Sonunda", "geldi."]),
        ];
        let learned = Abbreviations::learn(training.iter().map(Vec::as_slice));
        assert_eq!(learned.to_list(), vec!["19.", "Dr."]);
    }

    #[test]
    fn a_known_abbreviation_stays_one_token_and_does_not_end_the_sentence() {
        let abbreviations = Abbreviations::from_list(["Dr.".to_string()]);
        let text = "Dr. Aras gemiyi bağladı.  Sonra   Kpt. Mira geldi.";
        let got = split(text, &abbreviations);
        assert_eq!(
            got,
            vec![
                TextSentence {
                    text: "Dr. Aras gemiyi bağladı.".to_string(),
                    tokens: forms(&["Dr.", "Aras", "gemiyi", "bağladı", "."]),
                },
                // Unknown: UAX #29 decides ("Kpt" "." then a new sentence).
                TextSentence {
                    text: "Sonra   Kpt.".to_string(),
                    tokens: forms(&["Sonra", "Kpt", "."]),
                },
                TextSentence {
                    text: "Mira geldi.".to_string(),
                    tokens: forms(&["Mira", "geldi", "."]),
                },
            ]
        );
    }
}
