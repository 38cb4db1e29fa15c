//! The store and its operations on versions: open, publish, list, prune. Aliases live in
//! `aliases.rs`, verification and fetching in `fetch.rs`.

use std::path::{Path as FsPath, PathBuf};
use std::sync::Arc;
use std::time::{SystemTime, UNIX_EPOCH};

use futures::TryStreamExt;
use object_store::local::LocalFileSystem;
use object_store::path::Path;
use object_store::{ObjectStore, PutMode, PutOptions, PutPayload};
use sha2::{Digest, Sha256};

use crate::StoreError;
use crate::backends::{Location, locate, s3_bucket};
use crate::error::{backend, io};
use crate::layout;
use crate::manifest::{ArtifactInfo, FileEntry, Manifest, SCHEMA_MAJOR, SCHEMA_VERSION};
use crate::names::{validate_name, validate_version};
use crate::time::now;

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
    pub(crate) objects: Arc<dyn ObjectStore>,
    pub(crate) root: Path,
    url: String,
    /// Backend supports create-only and compare-and-swap puts.
    pub(crate) conditional: bool,
}

pub(crate) fn sha256_hex(bytes: &[u8]) -> String {
    hex::encode(Sha256::digest(bytes))
}

impl Store {
    /// Opens a store from a URL: a path (`./model-store`, `file:///abs/path`) or
    /// `s3://bucket/prefix` (credentials, region and endpoint from the standard `AWS_*`
    /// variables, e.g. `AWS_ENDPOINT_URL`; plain HTTP is allowed for endpoints on loopback).
    pub fn open(url: &str) -> Result<Store, StoreError> {
        Store::open_with(url, true)
    }

    /// Like [`Store::open`], but a local store must exist already (for commands that only
    /// read: a mistyped path is an error that names it, not a new empty store).
    pub fn open_existing(url: &str) -> Result<Store, StoreError> {
        Store::open_with(url, false)
    }

    fn open_with(url: &str, create: bool) -> Result<Store, StoreError> {
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
        if !create && !path.is_dir() {
            return Err(StoreError::NotFound {
                what: format!("store directory {}", path.display()),
            });
        }
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

    pub(crate) async fn get_bytes(
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
    pub(crate) async fn put_new(&self, key: &Path, bytes: Vec<u8>) -> Result<(), StoreError> {
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
            Err(object_store::Error::AlreadyExists { .. }) => Err(StoreError::Exists {
                what: key.to_string(),
            }),
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

    /// The versions [`Store::prune`] would delete: all but the newest `keep`, except those an
    /// alias points at, oldest first.
    pub async fn prunable(&self, name: &str, keep: usize) -> Result<Vec<String>, StoreError> {
        let protected: Vec<String> = self
            .aliases(name)
            .await?
            .into_iter()
            .map(|(_, r)| r.version)
            .collect();
        let versions = self.versions(name).await?;
        let cutoff = versions.len().saturating_sub(keep);
        Ok(versions[..cutoff]
            .iter()
            .filter(|v| !protected.contains(v))
            .cloned()
            .collect())
    }

    /// Deletes all but the newest `keep` versions, never one an alias points at. Returns the
    /// deleted versions. The manifest goes first, so a version being deleted is invisible at once.
    pub async fn prune(&self, name: &str, keep: usize) -> Result<Vec<String>, StoreError> {
        let mut deleted = Vec::new();
        for version in &self.prunable(name, keep).await? {
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
