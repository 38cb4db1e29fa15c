//! The model store: versioned, verified model artifacts on a local directory or an
//! S3-compatible object store, with aliases (`live`, …) and a change feed.
//!
//! **Invariants.** This crate knows artifacts and bytes, not parsing: a model is a directory of
//! files; the manifest records each file's size and SHA-256, plus the metadata its publisher
//! gives ([`ArtifactInfo`]); nothing here reads a payload file's contents. A published version is immutable (its objects are
//! written once, with create-only puts where the backend supports them). A version is visible
//! only once its manifest exists, and the manifest is written last, so a partial publish is never
//! listed or loaded. An alias only ever points at a version whose every file was verified.
//!
//! Layout under the store's root:
//!
//! ```text
//! models/<name>/versions/<version>/<payload files…>
//! models/<name>/versions/<version>/manifest.json      (written last)
//! models/<name>/aliases/<alias>.json                  ({"version", "history", "updated"})
//! models/<name>/audit/<time>-<digest>.json            (one decision each, create-only)
//! models/<name>/rollout-policy.json                   (optional: how candidates are judged)
//! ```
//!
//! Every alias move made through [`Store::promote`] / [`Store::roll_back`] (and every refusal
//! recorded with [`Store::record_refusal`]) appends an [`AuditEntry`]: who, from what to what,
//! why, on which evidence.
//!
//! Names (models and aliases): 1–64 characters from `a–z 0–9 . _ -`, starting with a letter or
//! digit, no `..`. Version ids are made by the store:
//! `YYYYMMDDTHHMMSS.ffffffZ-xxxxxxxx` (UTC time of publishing to the microsecond, then 8 hex
//! digits), so they sort by time and two concurrent publishes differ.

mod aliases;
mod audit;
mod backends;
mod error;
mod fetch;
pub mod gate;
mod layout;
mod manifest;
mod names;
mod objects;
mod policy;
mod store;
mod time;
mod watch;

pub use aliases::AliasRecord;
pub use audit::{Action, AuditEntry, Decided, Decision};
pub use error::StoreError;
pub use manifest::{ArtifactInfo, FileEntry, Manifest, SCHEMA_MAJOR, SCHEMA_VERSION};
pub use names::{validate_name, validate_version};
pub use objects::{ObjectUrl, join_url};
pub use policy::RolloutPolicy;
pub use store::{Store, VersionSummary};
pub use watch::{AliasFeed, AliasWatcher, Backoff, MAX_BACKOFF_FACTOR};
