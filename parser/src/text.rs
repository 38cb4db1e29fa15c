//! Small text helpers shared by the tagger and the feature extractor.

/// Unicode lowercase (full case mapping).
pub fn lowercase(form: &str) -> String {
    form.to_lowercase()
}

/// The last `chars` characters (whole string if shorter).
pub fn suffix(text: &str, chars: usize) -> &str {
    let start = text
        .char_indices()
        .rev()
        .nth(chars.saturating_sub(1))
        .map_or(0, |(i, _)| i);
    &text[start..]
}

/// The first `chars` characters (whole string if shorter).
pub fn prefix(text: &str, chars: usize) -> &str {
    let end = text
        .char_indices()
        .nth(chars)
        .map_or(text.len(), |(i, _)| i);
    &text[..end]
}

/// Word shape: runs of upper-case → "X", lower-case → "x", digits → "d", other → itself;
/// consecutive repeats collapsed ("Ankara'da" → "Xx'x", "2025" → "d").
pub fn shape(form: &str) -> String {
    let mut out = String::new();
    let mut last = None;
    for c in form.chars() {
        let class = if c.is_uppercase() {
            'X'
        } else if c.is_lowercase() {
            'x'
        } else if c.is_numeric() {
            'd'
        } else {
            c
        };
        if last != Some(class) {
            out.push(class);
            last = Some(class);
        }
    }
    out
}

/// Value of `name` in a FEATS string ("" when absent); the last occurrence wins.
pub fn feature_value<'a>(feats: &'a str, name: &str) -> &'a str {
    feats
        .split('|')
        .filter_map(|pair| pair.split_once('='))
        .filter(|(key, _)| *key == name)
        .map(|(_, value)| value)
        .next_back()
        .unwrap_or("")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn helpers_handle_multibyte_text() {
        assert_eq!(
            suffix("kitaplığı", 3),
            "ğı".to_string().replace("ğı", "ığı")
        );
        assert_eq!(prefix("İstanbul", 2), "İs");
        assert_eq!(shape("Ankara'da"), "Xx'x");
        assert_eq!(shape("2025"), "d");
        assert_eq!(
            feature_value(
                "Case=Bare|PersonNumber=A3sg|PersonNumber=V3sg",
                "PersonNumber"
            ),
            "V3sg"
        );
    }
}
