//! Validation of model, alias and version names: they become object keys and file names.

use crate::StoreError;

const MAX_NAME: usize = 64;

/// A model or alias name: 1–64 characters from `a–z 0–9 . _ -`, starting with a letter or digit,
/// without `..`.
pub fn validate_name(kind: &str, name: &str) -> Result<(), StoreError> {
    let invalid = |reason: String| {
        Err(StoreError::InvalidName {
            kind: kind.to_string(),
            name: printable(name),
            reason,
        })
    };
    if name.is_empty() {
        return invalid("it is empty".to_string());
    }
    if name.chars().count() > MAX_NAME {
        return invalid(format!(
            "it has {} characters; the limit is {MAX_NAME}",
            name.chars().count()
        ));
    }
    if let Some(c) = name
        .chars()
        .find(|c| !(c.is_ascii_lowercase() || c.is_ascii_digit() || matches!(c, '.' | '_' | '-')))
    {
        return invalid(format!(
            "it contains {c:?}; allowed are a-z, 0-9, '.', '_' and '-'"
        ));
    }
    if !name.starts_with(|c: char| c.is_ascii_alphanumeric()) {
        return invalid("it must start with a letter or a digit".to_string());
    }
    if name.contains("..") {
        return invalid("it contains '..'".to_string());
    }
    Ok(())
}

/// A version id as the store makes them (`YYYYMMDDTHHMMSS.ffffffZ-xxxxxxxx`).
pub fn validate_version(version: &str) -> Result<(), StoreError> {
    let bytes = version.as_bytes();
    let shape_ok = bytes.len() == 32
        && bytes[..8].iter().all(u8::is_ascii_digit)
        && bytes[8] == b'T'
        && bytes[9..15].iter().all(u8::is_ascii_digit)
        && bytes[15] == b'.'
        && bytes[16..22].iter().all(u8::is_ascii_digit)
        && &bytes[22..24] == b"Z-"
        && bytes[24..]
            .iter()
            .all(|b| b.is_ascii_hexdigit() && !b.is_ascii_uppercase());
    if shape_ok {
        Ok(())
    } else {
        Err(StoreError::InvalidName {
            kind: "version".to_string(),
            name: printable(version),
            reason: "versions look like 20261201T101500.000000Z-1a2b3c4d".to_string(),
        })
    }
}

/// The name with control characters escaped, for messages.
fn printable(name: &str) -> String {
    let shown: String = name.chars().take(80).flat_map(char::escape_debug).collect();
    if name.chars().count() > 80 {
        format!("{shown}…")
    } else {
        shown
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn check(name: &str, expected: Option<&str>) {
        let result = validate_name("model", name);
        match expected {
            None => assert!(result.is_ok(), "{name:?} should be accepted: {result:?}"),
            Some(fragment) => {
                let message = result.expect_err("should be rejected").to_string();
                assert!(message.contains(fragment), "{name:?}: {message}");
            }
        }
    }

    #[test]
    fn names_are_checked_with_clear_messages() {
        check("turkish", None);
        check("tr-web.v2_b", None);
        check("", Some("it is empty"));
        check("../x", Some("contains '/'"));
        check("a..b", Some("contains '..'"));
        check(&"a".repeat(300), Some("300 characters; the limit is 64"));
        check("bad\u{7}name", Some("contains '\\u{7}'"));
        check("Upper", Some("contains 'U'"));
        check("-lead", Some("must start with a letter or a digit"));
        assert!(validate_version("20261201T101500.000000Z-1a2b3c4d").is_ok());
        assert!(validate_version("../../etc").is_err());
    }
}
