//! The store's errors, with the identifiers a person needs, and the mappings from backend and
//! file-system errors.

use std::path::Path as FsPath;

use object_store::path::Path;

/// What can go wrong, with the identifiers a person needs.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("invalid {kind} name {name:?}: {reason}")]
    InvalidName {
        kind: String,
        name: String,
        reason: String,
    },
    #[error("store URL {url:?}: {reason}")]
    BadUrl { url: String, reason: String },
    #[error("{what} not found")]
    NotFound { what: String },
    #[error("model {name} version {version}: {problem}")]
    Corrupt {
        name: String,
        version: String,
        problem: String,
    },
    #[error(
        "model {name} version {version}: manifest schema {found}; this build reads schema {supported}.x"
    )]
    UnknownSchema {
        name: String,
        version: String,
        found: String,
        supported: u32,
    },
    #[error("{path}: {source}")]
    Io {
        path: String,
        source: std::io::Error,
    },
    #[error("store {operation} failed for {key}: {source}{}", credential_hint(.source))]
    Backend {
        operation: &'static str,
        key: String,
        source: object_store::Error,
    },
    #[error("alias {alias} of model {name} changed while it was being moved; try again")]
    Conflict { name: String, alias: String },
    #[error("{what} exists already")]
    Exists { what: String },
    #[error("{0}")]
    Invalid(String),
}

/// Without credentials in the environment, the S3 client asks the cloud instance-metadata
/// service for some, and its failure (a metadata URL, a 403 or a refused connection) says
/// nothing about the cause. Name the cause and the variables that fix it.
fn credential_hint(source: &object_store::Error) -> String {
    let text = source.to_string();
    let asked_metadata = ["/latest/api/token", "/latest/meta-data", "169.254.169.254"]
        .iter()
        .any(|marker| text.contains(marker));
    let has_keys = std::env::var_os("AWS_ACCESS_KEY_ID").is_some();
    if !asked_metadata || has_keys {
        return String::new();
    }
    "\n  no S3 credentials were found in the environment, so the client asked the cloud \
     instance-metadata service (which only a cloud machine has).\n  set AWS_ACCESS_KEY_ID and \
     AWS_SECRET_ACCESS_KEY (plus AWS_SESSION_TOKEN for temporary keys), or \
     AWS_WEB_IDENTITY_TOKEN_FILE with AWS_ROLE_ARN; for an S3-compatible store also \
     AWS_ENDPOINT_URL (its address) and AWS_REGION."
        .to_string()
}

pub(crate) fn backend(
    operation: &'static str,
    key: &Path,
) -> impl FnOnce(object_store::Error) -> StoreError {
    let key = key.to_string();
    move |source| StoreError::Backend {
        operation,
        key,
        source,
    }
}

/// Maps an I/O error on `path` to `StoreError::Io`.
pub(crate) fn io(path: &FsPath) -> impl FnOnce(std::io::Error) -> StoreError {
    let path = path.display().to_string();
    move |source| StoreError::Io { path, source }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn generic(message: &str) -> object_store::Error {
        object_store::Error::Generic {
            store: "S3",
            source: message.to_string().into(),
        }
    }

    #[test]
    fn a_failed_metadata_call_names_the_missing_credentials() {
        // The process's own environment decides; the test suite runs without AWS keys.
        if std::env::var_os("AWS_ACCESS_KEY_ID").is_some() {
            return;
        }
        let error = StoreError::Backend {
            operation: "list",
            key: "models".to_string(),
            source: generic(
                "Error performing PUT http://169.254.169.254/latest/api/token in 1s - 403",
            ),
        };
        let message = error.to_string();
        assert!(
            message.contains("no S3 credentials were found")
                && message.contains("AWS_ACCESS_KEY_ID")
                && message.contains("AWS_ENDPOINT_URL"),
            "{message}"
        );
        let other = StoreError::Backend {
            operation: "get",
            key: "models/a".to_string(),
            source: generic("connection refused"),
        };
        assert!(!other.to_string().contains("credentials"));
    }
}
