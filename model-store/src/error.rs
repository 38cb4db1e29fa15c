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
    #[error("store {operation} failed for {key}: {source}")]
    Backend {
        operation: &'static str,
        key: String,
        source: object_store::Error,
    },
    #[error("alias {alias} of model {name} changed while it was being moved; try again")]
    Conflict { name: String, alias: String },
    #[error("{0}")]
    Invalid(String),
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
