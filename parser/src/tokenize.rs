//! Raw text to sentences of tokens, with the Unicode text segmentation rules of UAX #29 (word
//! and sentence boundaries) from the `unicode-segmentation` crate.
//!
//! Limits (documented for users): sentence boundaries follow UAX #29, which breaks after an
//! abbreviation followed by a capitalised word ("Dr. Yılmaz" → two sentences) and does not break
//! after a full stop followed by a lower-case word; words keep internal apostrophes and full
//! stops ("Ankara'da", "3.5"), which matches treebanks that do not split clitics, and split
//! every punctuation mark into its own token. No language-specific rules.

use unicode_segmentation::UnicodeSegmentation;

/// Splits text into sentences of non-blank tokens; empty sentences are dropped.
pub fn sentences(text: &str) -> Vec<Vec<String>> {
    text.unicode_sentences()
        .map(|sentence| {
            sentence
                .split_word_bounds()
                .filter(|token| !token.trim().is_empty())
                .map(str::to_string)
                .collect::<Vec<_>>()
        })
        .filter(|tokens| !tokens.is_empty())
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// UAX #29 behaviour on Turkish text (expected splits worked out from the UAX #29 rules).
    #[test]
    fn splits_sentences_and_words_by_uax29() {
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
}
