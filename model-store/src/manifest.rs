//! The manifest of a published version.

use serde::{Deserialize, Serialize};

/// Current manifest schema, `major.minor`. Readers refuse another major version.
pub const SCHEMA_VERSION: &str = "1.0";
pub const SCHEMA_MAJOR: u32 = 1;

/// One payload file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileEntry {
    pub path: String,
    pub size: u64,
    pub sha256: String,
}

/// Everything known about a version; written last when publishing.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    pub schema: String,
    pub name: String,
    pub version: String,
    /// UTC, RFC 3339.
    pub created: String,
    /// The model directory's own format (from its `model.json`), if it has one.
    pub artifact_format: Option<String>,
    /// Feature and decoder settings copied from `model.json`.
    pub settings: serde_json::Value,
    pub labels: Vec<String>,
    /// Fingerprint of the training data, from `model.json`'s training facts.
    pub training_fingerprint: Option<String>,
    /// Evaluation scores given at publishing (free-form JSON, e.g. `arcwright eval` output).
    pub scores: Option<serde_json::Value>,
    pub files: Vec<FileEntry>,
}

impl Manifest {
    /// Total payload size in bytes.
    pub fn size(&self) -> u64 {
        self.files.iter().map(|f| f.size).sum()
    }

    /// The schema's major version, if the string is well formed.
    pub fn schema_major(schema: &str) -> Option<u32> {
        schema.split('.').next()?.parse().ok()
    }
}
