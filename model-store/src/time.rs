//! Timestamps: RFC 3339 for people (manifests, aliases) and the compact form in version ids.

use std::time::SystemTime;

/// RFC 3339 UTC time (milliseconds) and the compact form used in version ids (microseconds),
/// from the system clock.
pub(crate) fn now() -> (String, String) {
    timestamps(SystemTime::now())
}

fn timestamps(time: SystemTime) -> (String, String) {
    let micros = humantime::format_rfc3339_micros(time).to_string();
    let compact: String = micros.chars().filter(|c| !matches!(c, '-' | ':')).collect();
    (humantime::format_rfc3339_millis(time).to_string(), compact)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::{Duration, UNIX_EPOCH};

    /// Fixed instants, their RFC 3339 form worked out by hand.
    #[test]
    fn timestamps_are_rfc3339_and_the_compact_version_stamp() {
        let check = |seconds: u64, micros: u64, rfc3339: &str, compact: &str| {
            let time = UNIX_EPOCH + Duration::from_secs(seconds) + Duration::from_micros(micros);
            assert_eq!(timestamps(time), (rfc3339.to_string(), compact.to_string()));
        };
        check(0, 0, "1970-01-01T00:00:00.000Z", "19700101T000000.000000Z");
        // 2024-02-29 (a leap day) 23:59:59 UTC = 1709251199 s.
        check(
            1_709_251_199,
            123_456,
            "2024-02-29T23:59:59.123Z",
            "20240229T235959.123456Z",
        );
    }
}
