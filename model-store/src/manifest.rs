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

/// What the publisher says about an artifact, copied into its manifest. The store does not read
/// the artifact's files to find it: it knows bytes, and the caller knows the format.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ArtifactInfo {
    /// The artifact's own format name and version.
    pub format: Option<String>,
    /// Settings worth listing (free-form JSON).
    pub settings: serde_json::Value,
    pub labels: Vec<String>,
    /// Fingerprint of the training data.
    pub training_fingerprint: Option<String>,
    /// Evaluation scores (free-form JSON, e.g. `arcwright eval` output).
    pub scores: Option<serde_json::Value>,
}

/// Everything known about a version; written last when publishing.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    pub schema: String,
    pub name: String,
    pub version: String,
    /// UTC, RFC 3339.
    pub created: String,
    /// The artifact's own format, as the publisher gave it ([`ArtifactInfo`]).
    pub artifact_format: Option<String>,
    /// Settings as the publisher gave them.
    pub settings: serde_json::Value,
    pub labels: Vec<String>,
    /// Fingerprint of the training data, as the publisher gave it.
    pub training_fingerprint: Option<String>,
    /// Evaluation scores given at publishing.
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
