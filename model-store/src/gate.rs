//! The score gate of a promote: a version whose manifest scores are worse than the live
//! version's, on the same evaluation data, by more than a threshold is refused.
//!
//! Scores are compared only when they can be: both manifests carry scores (an `arcwright eval`
//! report: `uas`, `las` in percent, `decoder`, `gold_fingerprint_fnv64`), measured on the same
//! evaluation file (same fingerprint) with the same decoder. Otherwise the gate says why it could
//! not compare, and the caller decides (the command line promotes and says so).

use serde_json::{Value, json};

use crate::Manifest;

/// What the gate found.
#[derive(Debug, Clone, PartialEq)]
pub enum Verdict {
    /// Comparable, and within the threshold.
    Pass { evidence: Value },
    /// Comparable, and worse by more than the threshold.
    Worse { reason: String, evidence: Value },
    /// Not comparable, and why.
    NotComparable { reason: String },
}

/// The scores a gate compares, read from a manifest.
#[derive(Debug, Clone, PartialEq)]
struct Scores<'a> {
    uas: f64,
    las: f64,
    decoder: Option<&'a str>,
    fingerprint: &'a str,
}

fn scores(manifest: &Manifest) -> Result<Scores<'_>, String> {
    let v = manifest
        .scores
        .as_ref()
        .ok_or_else(|| format!("version {} has no scores", manifest.version))?;
    let number = |key: &str| {
        v[key]
            .as_f64()
            .filter(|x| x.is_finite())
            .ok_or_else(|| format!("the scores of version {} have no {key}", manifest.version))
    };
    Ok(Scores {
        uas: number("uas")?,
        las: number("las")?,
        decoder: v["decoder"].as_str(),
        fingerprint: v["gold_fingerprint_fnv64"].as_str().ok_or_else(|| {
            format!(
                "the scores of version {} do not say which evaluation data they were measured on \
                 (gold_fingerprint_fnv64)",
                manifest.version
            )
        })?,
    })
}

/// Compares a candidate with the live version: refused when its LAS or UAS is more than
/// `max_drop` points below live's.
pub fn compare(live: Option<&Manifest>, candidate: &Manifest, max_drop: f64) -> Verdict {
    let Some(live) = live else {
        return Verdict::NotComparable {
            reason: "there is no live version to compare with".to_string(),
        };
    };
    let (old, new) = match (scores(live), scores(candidate)) {
        (Ok(old), Ok(new)) => (old, new),
        (Err(reason), _) | (_, Err(reason)) => return Verdict::NotComparable { reason },
    };
    if old.fingerprint != new.fingerprint {
        return Verdict::NotComparable {
            reason: format!(
                "the two versions were scored on different evaluation data (fingerprints {} and {})",
                old.fingerprint, new.fingerprint
            ),
        };
    }
    if old.decoder != new.decoder {
        return Verdict::NotComparable {
            reason: format!(
                "the two versions were scored with different decoders ({} and {})",
                old.decoder.unwrap_or("unnamed"),
                new.decoder.unwrap_or("unnamed")
            ),
        };
    }
    let evidence = json!({
        "gold_fingerprint_fnv64": new.fingerprint,
        "decoder": new.decoder,
        "max_drop_points": max_drop,
        "live": {"version": live.version, "uas": old.uas, "las": old.las},
        "candidate": {"version": candidate.version, "uas": new.uas, "las": new.las},
    });
    let drops: Vec<String> = [("LAS", old.las, new.las), ("UAS", old.uas, new.uas)]
        .into_iter()
        .filter(|(_, old, new)| new < &(old - max_drop))
        .map(|(what, old, new)| {
            format!(
                "{what} {new:.2} against live's {old:.2} ({:.2} points lower)",
                old - new
            )
        })
        .collect();
    if drops.is_empty() {
        Verdict::Pass { evidence }
    } else {
        Verdict::Worse {
            reason: format!(
                "version {} scores worse than live version {} on the same evaluation data by more \
                 than {max_drop} points: {}",
                candidate.version,
                live.version,
                drops.join(", ")
            ),
            evidence,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn manifest(version: &str, scores: Option<Value>) -> Manifest {
        Manifest {
            schema: crate::SCHEMA_VERSION.to_string(),
            name: "m".to_string(),
            version: version.to_string(),
            created: String::new(),
            artifact_format: None,
            settings: Value::Null,
            labels: Vec::new(),
            training_fingerprint: None,
            scores,
            files: Vec::new(),
        }
    }

    fn scored(version: &str, uas: f64, las: f64, fingerprint: &str) -> Manifest {
        manifest(
            version,
            Some(json!({"uas": uas, "las": las, "decoder": "projective",
                        "gold_fingerprint_fnv64": fingerprint})),
        )
    }

    /// The threshold is inclusive: exactly `max_drop` lower passes, more is refused, and the
    /// reason names the score and both figures.
    #[test]
    fn worse_by_more_than_the_threshold_is_refused() {
        let live = scored("v1", 80.0, 72.0, "ab");
        assert!(matches!(
            compare(Some(&live), &scored("v2", 79.5, 71.5, "ab"), 0.5),
            Verdict::Pass { .. }
        ));
        match compare(Some(&live), &scored("v3", 80.0, 71.0, "ab"), 0.5) {
            Verdict::Worse { reason, evidence } => {
                assert!(
                    reason.contains("LAS 71.00 against live's 72.00"),
                    "{reason}"
                );
                assert!(!reason.contains("UAS"), "{reason}");
                assert_eq!(evidence["live"]["las"], 72.0);
            }
            other => panic!("{other:?}"),
        }
        // Better is always fine.
        assert!(matches!(
            compare(Some(&live), &scored("v4", 90.0, 85.0, "ab"), 0.0),
            Verdict::Pass { .. }
        ));
    }

    /// Scores on other data, with another decoder, missing or without a fingerprint are not
    /// compared, and the reason says which.
    #[test]
    fn incomparable_scores_say_why() {
        let live = scored("v1", 80.0, 72.0, "ab");
        let reason = |v: Verdict| match v {
            Verdict::NotComparable { reason } => reason,
            other => panic!("{other:?}"),
        };
        assert!(reason(compare(None, &live, 0.5)).contains("no live version"));
        assert!(
            reason(compare(Some(&live), &scored("v2", 1.0, 1.0, "cd"), 0.5))
                .contains("different evaluation data")
        );
        assert!(reason(compare(Some(&live), &manifest("v2", None), 0.5)).contains("no scores"));
        let other_decoder = manifest(
            "v2",
            Some(json!({"uas": 1.0, "las": 1.0, "decoder": "non-projective",
                        "gold_fingerprint_fnv64": "ab"})),
        );
        assert!(reason(compare(Some(&live), &other_decoder, 0.5)).contains("different decoders"));
        let unmarked = manifest("v2", Some(json!({"uas": 1.0, "las": 1.0})));
        assert!(reason(compare(Some(&live), &unmarked, 0.5)).contains("gold_fingerprint_fnv64"));
    }
}
