//! Store operations: open, publish, list, aliases (promote / rollback), verify, fetch, prune.

use std::path::{Path as FsPath, PathBuf};
use std::sync::Arc;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use futures::TryStreamExt;
use object_store::aws::{AmazonS3Builder, S3ConditionalPut};
use object_store::local::LocalFileSystem;
use object_store::path::Path;
use object_store::{ObjectStore, PutMode, PutOptions, PutPayload, RetryConfig, UpdateVersion};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::layout;
use crate::manifest::{ArtifactInfo, FileEntry, Manifest, SCHEMA_MAJOR, SCHEMA_VERSION};
use crate::names::{validate_name, validate_version};

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

/// Where an alias points, and where it pointed before (most recent first).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct AliasRecord {
    pub version: String,
    #[serde(default)]
    pub history: Vec<String>,
    pub updated: String,
}

/// One listed version.
#[derive(Debug, Clone)]
pub struct VersionSummary {
    pub manifest: Manifest,
    /// Aliases of this model that point at this version.
    pub aliases: Vec<String>,
}

/// A model store.
#[derive(Debug, Clone)]
pub struct Store {
    objects: Arc<dyn ObjectStore>,
    root: Path,
    url: String,
    /// Backend supports create-only and compare-and-swap puts.
    conditional: bool,
}

fn backend(operation: &'static str, key: &Path) -> impl FnOnce(object_store::Error) -> StoreError {
    let key = key.to_string();
    move |source| StoreError::Backend {
        operation,
        key,
        source,
    }
}

/// RFC 3339 UTC time (milliseconds) and the compact form used in version ids (microseconds),
/// from the system clock.
fn now() -> (String, String) {
    timestamps(SystemTime::now())
}

fn timestamps(time: SystemTime) -> (String, String) {
    let micros = humantime::format_rfc3339_micros(time).to_string();
    let compact: String = micros.chars().filter(|c| !matches!(c, '-' | ':')).collect();
    (humantime::format_rfc3339_millis(time).to_string(), compact)
}

/// Maps an I/O error on `path` to `StoreError::Io`.
fn io(path: &FsPath) -> impl FnOnce(std::io::Error) -> StoreError {
    let path = path.display().to_string();
    move |source| StoreError::Io { path, source }
}

fn sha256_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}

/// The S3-compatible bucket `bucket`: credentials, region and endpoint from the standard
/// `AWS_*` variables; plain HTTP only for endpoints on loopback.
pub(crate) fn s3_bucket(
    url: &str,
    bucket: &str,
) -> Result<object_store::aws::AmazonS3, StoreError> {
    let mut builder = AmazonS3Builder::from_env()
        .with_bucket_name(bucket)
        .with_conditional_put(S3ConditionalPut::ETagMatch)
        .with_retry(RetryConfig {
            max_retries: 3,
            retry_timeout: Duration::from_secs(15),
            ..RetryConfig::default()
        });
    // The one place environment variables are read for the store: the standard
    // AWS_ENDPOINT_URL (the crate itself reads AWS_ENDPOINT and the credentials).
    if let Ok(endpoint) = std::env::var("AWS_ENDPOINT_URL") {
        let loopback = ["http://127.", "http://localhost", "http://[::1]"]
            .iter()
            .any(|p| endpoint.starts_with(p));
        builder = builder.with_endpoint(endpoint).with_allow_http(loopback);
    }
    builder.build().map_err(|e| StoreError::BadUrl {
        url: url.to_string(),
        reason: e.to_string(),
    })
}

/// Where a store URL points: an S3 bucket and the path after it, or a local path.
pub(crate) enum Location<'a> {
    S3 { bucket: &'a str, rest: &'a str },
    Local(PathBuf),
}

/// Splits a store URL (`s3://bucket/rest`, `file:///path` or a plain path); `forms` names the
/// accepted forms in the error for any other scheme.
pub(crate) fn locate<'a>(url: &'a str, forms: &str) -> Result<Location<'a>, StoreError> {
    if let Some(after) = url.strip_prefix("s3://") {
        let (bucket, rest) = after.split_once('/').unwrap_or((after, ""));
        if bucket.is_empty() {
            return Err(StoreError::BadUrl {
                url: url.to_string(),
                reason: "no bucket name after s3://".to_string(),
            });
        }
        return Ok(Location::S3 { bucket, rest });
    }
    match url.strip_prefix("file://") {
        Some(path) => Ok(Location::Local(PathBuf::from(path))),
        None if url.contains("://") => Err(StoreError::BadUrl {
            url: url.to_string(),
            reason: format!("supported are {forms}"),
        }),
        None => Ok(Location::Local(PathBuf::from(url))),
    }
}

impl Store {
    /// Opens a store from a URL: a path (`./model-store`, `file:///abs/path`) or
    /// `s3://bucket/prefix` (credentials, region and endpoint from the standard `AWS_*`
    /// variables, e.g. `AWS_ENDPOINT_URL`; plain HTTP is allowed for endpoints on loopback).
    pub fn open(url: &str) -> Result<Store, StoreError> {
        let bad = |reason: &str| StoreError::BadUrl {
            url: url.to_string(),
            reason: reason.to_string(),
        };
        let path = match locate(url, "a path, file:///path and s3://bucket/prefix")? {
            Location::S3 { bucket, rest } => {
                return Ok(Store {
                    objects: Arc::new(s3_bucket(url, bucket)?),
                    root: Path::from(rest),
                    url: url.to_string(),
                    conditional: true,
                });
            }
            Location::Local(path) => path,
        };
        std::fs::create_dir_all(&path).map_err(|source| StoreError::Io {
            path: path.display().to_string(),
            source,
        })?;
        let objects = LocalFileSystem::new_with_prefix(&path).map_err(|e| bad(&e.to_string()))?;
        Ok(Store {
            objects: Arc::new(objects),
            root: Path::default(),
            url: url.to_string(),
            conditional: false,
        })
    }

    /// A store over any object store (for tests that need a backend that fails on demand).
    /// `conditional`: the backend supports create-only and compare-and-swap puts.
    pub fn from_objects(objects: Arc<dyn ObjectStore>, url: &str, conditional: bool) -> Store {
        Store {
            objects,
            root: Path::default(),
            url: url.to_string(),
            conditional,
        }
    }

    pub fn url(&self) -> &str {
        &self.url
    }

    async fn get_bytes(
        &self,
        key: &Path,
        operation: &'static str,
    ) -> Result<Option<bytes::Bytes>, StoreError> {
        match self.objects.get(key).await {
            Ok(result) => Ok(Some(result.bytes().await.map_err(backend(operation, key))?)),
            Err(object_store::Error::NotFound { .. }) => Ok(None),
            Err(e) => Err(backend(operation, key)(e)),
        }
    }

    /// Writes an object that must not exist yet (create-only where supported).
    async fn put_new(&self, key: &Path, bytes: Vec<u8>) -> Result<(), StoreError> {
        let mode = if self.conditional {
            PutMode::Create
        } else {
            PutMode::Overwrite
        };
        let options = PutOptions {
            mode,
            ..PutOptions::default()
        };
        match self
            .objects
            .put_opts(key, PutPayload::from(bytes.clone()), options)
            .await
        {
            Ok(_) => Ok(()),
            Err(object_store::Error::NotImplemented) => self
                .objects
                .put(key, PutPayload::from(bytes))
                .await
                .map(|_| ())
                .map_err(backend("write", key)),
            Err(e) => Err(backend("write", key)(e)),
        }
    }

    /// Publishes the files of `dir` as a new version of `name`, described by `info`; returns
    /// its manifest. Payload first, manifest last: until the manifest exists the version does
    /// not exist.
    pub async fn publish(
        &self,
        name: &str,
        dir: &FsPath,
        info: ArtifactInfo,
    ) -> Result<Manifest, StoreError> {
        validate_name("model", name)?;
        let mut entries: Vec<PathBuf> = std::fs::read_dir(dir)
            .map_err(io(dir))?
            .map(|e| e.map(|e| e.path()))
            .collect::<Result<_, _>>()
            .map_err(io(dir))?;
        // Hidden files (such as the fetch cache's `.verified` marker) are not payload.
        entries.retain(|p| {
            p.is_file()
                && !p
                    .file_name()
                    .and_then(|n| n.to_str())
                    .is_some_and(|n| n.starts_with('.'))
        });
        entries.sort();
        if entries.is_empty() {
            return Err(StoreError::Invalid(format!(
                "{}: no files to publish",
                dir.display()
            )));
        }
        let (created, stamp) = now();
        let mut files = Vec::new();
        let mut contents = Vec::new();
        let mut hasher = Sha256::new();
        for path in &entries {
            let file = path
                .file_name()
                .and_then(|n| n.to_str())
                .unwrap_or_default()
                .to_string();
            if file == "manifest.json" {
                return Err(StoreError::Invalid(format!(
                    "{}: a payload file may not be called manifest.json",
                    path.display()
                )));
            }
            validate_name("file", &file.to_ascii_lowercase())?;
            let bytes = std::fs::read(path).map_err(io(path))?;
            let sha256 = sha256_hex(&bytes);
            hasher.update(file.as_bytes());
            hasher.update(sha256.as_bytes());
            files.push(FileEntry {
                path: file,
                size: bytes.len() as u64,
                sha256,
            });
            contents.push(bytes);
        }
        // Version id: publishing time plus 8 hex digits of a digest of the content, the clock's
        // nanoseconds and the process id, so concurrent publishes get distinct ids.
        let nanos = SystemTime::now()
            .duration_since(UNIX_EPOCH)
            .unwrap_or_default()
            .as_nanos();
        hasher.update(nanos.to_le_bytes());
        hasher.update(std::process::id().to_le_bytes());
        let version = format!("{stamp}-{}", &hex::encode(hasher.finalize())[..8]);
        let manifest = Manifest {
            schema: SCHEMA_VERSION.to_string(),
            name: name.to_string(),
            version: version.clone(),
            created,
            artifact_format: info.format,
            settings: info.settings,
            labels: info.labels,
            training_fingerprint: info.training_fingerprint,
            scores: info.scores,
            files,
        };
        for (entry, bytes) in manifest.files.iter().zip(contents) {
            self.put_new(
                &layout::payload(&self.root, name, &version, &entry.path),
                bytes,
            )
            .await?;
        }
        let json =
            serde_json::to_vec_pretty(&manifest).map_err(|e| StoreError::Invalid(e.to_string()))?;
        self.put_new(&layout::manifest(&self.root, name, &version), json)
            .await?;
        Ok(manifest)
    }

    /// Model names that have at least one object.
    pub async fn names(&self) -> Result<Vec<String>, StoreError> {
        let prefix = layout::models(&self.root);
        let listing = self
            .objects
            .list_with_delimiter(Some(&prefix))
            .await
            .map_err(backend("list", &prefix))?;
        let mut names: Vec<String> = listing
            .common_prefixes
            .iter()
            .filter_map(|p| p.filename().map(str::to_string))
            .collect();
        names.sort();
        Ok(names)
    }

    /// Reads and checks a version's manifest (schema major version, name and version match).
    pub async fn manifest(&self, name: &str, version: &str) -> Result<Manifest, StoreError> {
        validate_name("model", name)?;
        validate_version(version)?;
        let key = layout::manifest(&self.root, name, version);
        let bytes = self
            .get_bytes(&key, "read manifest")
            .await?
            .ok_or_else(|| StoreError::NotFound {
                what: format!("model {name} version {version} (no manifest)"),
            })?;
        let corrupt = |problem: String| StoreError::Corrupt {
            name: name.to_string(),
            version: version.to_string(),
            problem,
        };
        let raw: serde_json::Value = serde_json::from_slice(&bytes)
            .map_err(|e| corrupt(format!("manifest is not JSON: {e}")))?;
        let schema = raw
            .get("schema")
            .and_then(|s| s.as_str())
            .unwrap_or("")
            .to_string();
        if Manifest::schema_major(&schema) != Some(SCHEMA_MAJOR) {
            return Err(StoreError::UnknownSchema {
                name: name.into(),
                version: version.into(),
                found: schema,
                supported: SCHEMA_MAJOR,
            });
        }
        let manifest: Manifest =
            serde_json::from_value(raw).map_err(|e| corrupt(format!("manifest: {e}")))?;
        if manifest.name != name || manifest.version != version {
            return Err(corrupt(format!(
                "manifest names {} {}",
                manifest.name, manifest.version
            )));
        }
        Ok(manifest)
    }

    /// Published versions of a model (those with a manifest), oldest first.
    pub async fn versions(&self, name: &str) -> Result<Vec<String>, StoreError> {
        validate_name("model", name)?;
        let prefix = layout::versions(&self.root, name);
        let listing = self
            .objects
            .list_with_delimiter(Some(&prefix))
            .await
            .map_err(backend("list", &prefix))?;
        let mut versions = Vec::new();
        for p in listing.common_prefixes {
            let Some(version) = p.filename().map(str::to_string) else {
                continue;
            };
            if validate_version(&version).is_err() {
                continue;
            }
            let key = layout::manifest(&self.root, name, &version);
            match self.objects.head(&key).await {
                Ok(_) => versions.push(version),
                Err(object_store::Error::NotFound { .. }) => {} // a publish in progress, or abandoned
                Err(e) => return Err(backend("list", &key)(e)),
            }
        }
        versions.sort();
        Ok(versions)
    }

    /// Every version of a model with its manifest and the aliases pointing at it.
    pub async fn list(&self, name: &str) -> Result<Vec<VersionSummary>, StoreError> {
        let aliases = self.aliases(name).await?;
        let mut out = Vec::new();
        for version in self.versions(name).await? {
            let manifest = self.manifest(name, &version).await?;
            let pointing = aliases
                .iter()
                .filter(|(_, r)| r.version == version)
                .map(|(a, _)| a.clone())
                .collect();
            out.push(VersionSummary {
                manifest,
                aliases: pointing,
            });
        }
        Ok(out)
    }

    /// All aliases of a model.
    pub async fn aliases(&self, name: &str) -> Result<Vec<(String, AliasRecord)>, StoreError> {
        validate_name("model", name)?;
        let prefix = layout::model(&self.root, name).child("aliases");
        let objects: Vec<_> = self
            .objects
            .list(Some(&prefix))
            .try_collect()
            .await
            .map_err(backend("list", &prefix))?;
        let mut out = Vec::new();
        for meta in objects {
            let Some(alias) = meta
                .location
                .filename()
                .and_then(|f| f.strip_suffix(".json"))
                .map(str::to_string)
            else {
                continue;
            };
            if let Some(record) = self.alias(name, &alias).await? {
                out.push((alias, record));
            }
        }
        out.sort_by(|a, b| a.0.cmp(&b.0));
        Ok(out)
    }

    /// Where an alias points, if it exists.
    pub async fn alias(&self, name: &str, alias: &str) -> Result<Option<AliasRecord>, StoreError> {
        Ok(self
            .alias_with_tag(name, alias)
            .await?
            .map(|(record, _)| record))
    }

    async fn alias_with_tag(
        &self,
        name: &str,
        alias: &str,
    ) -> Result<Option<(AliasRecord, UpdateVersion)>, StoreError> {
        validate_name("model", name)?;
        validate_name("alias", alias)?;
        let key = layout::alias(&self.root, name, alias);
        let result = match self.objects.get(&key).await {
            Ok(result) => result,
            Err(object_store::Error::NotFound { .. }) => return Ok(None),
            Err(e) => return Err(backend("read alias", &key)(e)),
        };
        let tag = UpdateVersion {
            e_tag: result.meta.e_tag.clone(),
            version: result.meta.version.clone(),
        };
        let bytes = result.bytes().await.map_err(backend("read alias", &key))?;
        let record = serde_json::from_slice(&bytes).map_err(|e| {
            StoreError::Invalid(format!(
                "alias {alias} of model {name} is not readable: {e}"
            ))
        })?;
        Ok(Some((record, tag)))
    }

    /// Checks every payload file of a version against its manifest (size and SHA-256).
    pub async fn verify(&self, name: &str, version: &str) -> Result<Manifest, StoreError> {
        let manifest = self.manifest(name, version).await?;
        for entry in &manifest.files {
            self.verified_payload(&manifest, entry).await?;
        }
        Ok(manifest)
    }

    async fn verified_payload(
        &self,
        manifest: &Manifest,
        entry: &FileEntry,
    ) -> Result<bytes::Bytes, StoreError> {
        let (name, version) = (&manifest.name, &manifest.version);
        let corrupt = |problem: String| StoreError::Corrupt {
            name: name.clone(),
            version: version.clone(),
            problem,
        };
        let key = layout::payload(&self.root, name, version, &entry.path);
        let bytes = self
            .get_bytes(&key, "read")
            .await?
            .ok_or_else(|| corrupt(format!("file {} is missing", entry.path)))?;
        if bytes.len() as u64 != entry.size {
            return Err(corrupt(format!(
                "file {} has {} bytes; the manifest says {}",
                entry.path,
                bytes.len(),
                entry.size
            )));
        }
        let actual = sha256_hex(&bytes);
        if actual != entry.sha256 {
            return Err(corrupt(format!(
                "file {} has SHA-256 {actual}; the manifest says {}",
                entry.path, entry.sha256
            )));
        }
        Ok(bytes)
    }

    /// Downloads and verifies a version into `cache/<name>/<version>/`; nothing is left there
    /// unless every file verified. Returns the directory and the manifest.
    pub async fn fetch(
        &self,
        name: &str,
        version: &str,
        cache: &FsPath,
    ) -> Result<(PathBuf, Manifest), StoreError> {
        let manifest = self.manifest(name, version).await?;
        let target = cache.join(name).join(version);
        if target.join(".verified").exists() {
            return Ok((target, manifest));
        }
        let staging = cache
            .join(name)
            .join(format!(".{version}.partial-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&staging);
        std::fs::create_dir_all(&staging).map_err(io(&staging))?;
        for entry in &manifest.files {
            let bytes = match self.verified_payload(&manifest, entry).await {
                Ok(bytes) => bytes,
                Err(e) => {
                    let _ = std::fs::remove_dir_all(&staging);
                    return Err(e);
                }
            };
            let path = staging.join(&entry.path);
            std::fs::write(&path, &bytes).map_err(io(&path))?;
        }
        let marker = staging.join(".verified");
        std::fs::write(&marker, manifest.version.as_bytes()).map_err(io(&marker))?;
        match std::fs::rename(&staging, &target) {
            Ok(()) => {}
            Err(_) if target.join(".verified").exists() => {
                let _ = std::fs::remove_dir_all(&staging); // another fetch won the race
            }
            Err(source) => {
                return Err(StoreError::Io {
                    path: target.display().to_string(),
                    source,
                });
            }
        }
        Ok((target, manifest))
    }

    /// Points `alias` at `version` after verifying the version completely. Atomic: a single
    /// object write, compare-and-swap on the previous state where the backend supports it.
    pub async fn set_alias(
        &self,
        name: &str,
        alias: &str,
        version: &str,
    ) -> Result<AliasRecord, StoreError> {
        self.verify(name, version).await?;
        let current = self.alias_with_tag(name, alias).await?;
        let mut history = Vec::new();
        if let Some((record, _)) = &current {
            if record.version == version {
                return Ok(record.clone());
            }
            history.push(record.version.clone());
            history.extend(record.history.iter().cloned());
            history.truncate(20);
        }
        self.write_alias(
            name,
            alias,
            AliasRecord {
                version: version.to_string(),
                history,
                updated: now().0,
            },
            current.map(|c| c.1),
        )
        .await
    }

    /// Moves `alias` back to the version it pointed at before (verified first).
    pub async fn rollback(&self, name: &str, alias: &str) -> Result<AliasRecord, StoreError> {
        let (record, tag) =
            self.alias_with_tag(name, alias)
                .await?
                .ok_or_else(|| StoreError::NotFound {
                    what: format!("alias {alias} of model {name}"),
                })?;
        let Some(previous) = record.history.first().cloned() else {
            return Err(StoreError::Invalid(format!(
                "alias {alias} of model {name} has no earlier target"
            )));
        };
        self.verify(name, &previous).await?;
        let history = record.history[1..].to_vec();
        self.write_alias(
            name,
            alias,
            AliasRecord {
                version: previous,
                history,
                updated: now().0,
            },
            Some(tag),
        )
        .await
    }

    async fn write_alias(
        &self,
        name: &str,
        alias: &str,
        record: AliasRecord,
        expected: Option<UpdateVersion>,
    ) -> Result<AliasRecord, StoreError> {
        let key = layout::alias(&self.root, name, alias);
        let bytes =
            serde_json::to_vec_pretty(&record).map_err(|e| StoreError::Invalid(e.to_string()))?;
        let mode = match (&expected, self.conditional) {
            (Some(tag), true) if tag.e_tag.is_some() || tag.version.is_some() => {
                PutMode::Update(tag.clone())
            }
            (None, true) => PutMode::Create,
            _ => PutMode::Overwrite,
        };
        let options = PutOptions {
            mode,
            ..PutOptions::default()
        };
        match self
            .objects
            .put_opts(&key, PutPayload::from(bytes.clone()), options)
            .await
        {
            Ok(_) => Ok(record),
            Err(
                object_store::Error::Precondition { .. }
                | object_store::Error::AlreadyExists { .. },
            ) => Err(StoreError::Conflict {
                name: name.to_string(),
                alias: alias.to_string(),
            }),
            Err(object_store::Error::NotImplemented) => {
                // Backends without conditional writes: a plain single-object write (atomic
                // rename on a local disk), last writer wins.
                self.objects
                    .put(&key, PutPayload::from(bytes))
                    .await
                    .map_err(backend("write alias", &key))?;
                Ok(record)
            }
            Err(e) => Err(backend("write alias", &key)(e)),
        }
    }

    /// Deletes all but the newest `keep` versions, never one an alias points at. Returns the
    /// deleted versions. The manifest goes first, so a version being deleted is invisible at once.
    pub async fn prune(&self, name: &str, keep: usize) -> Result<Vec<String>, StoreError> {
        let protected: Vec<String> = self
            .aliases(name)
            .await?
            .into_iter()
            .map(|(_, r)| r.version)
            .collect();
        let versions = self.versions(name).await?;
        let cutoff = versions.len().saturating_sub(keep);
        let mut deleted = Vec::new();
        for version in &versions[..cutoff] {
            if protected.contains(version) {
                continue;
            }
            let manifest_key = layout::manifest(&self.root, name, version);
            self.objects
                .delete(&manifest_key)
                .await
                .map_err(backend("delete", &manifest_key))?;
            let prefix = layout::version(&self.root, name, version);
            let objects: Vec<_> = self
                .objects
                .list(Some(&prefix))
                .try_collect()
                .await
                .map_err(backend("list", &prefix))?;
            for meta in objects {
                self.objects
                    .delete(&meta.location)
                    .await
                    .map_err(backend("delete", &meta.location))?;
            }
            deleted.push(version.clone());
        }
        Ok(deleted)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
