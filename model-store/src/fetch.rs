//! Verifying a version's files against its manifest and fetching it into a local cache.

use std::path::{Path as FsPath, PathBuf};

use crate::error::io;
use crate::layout;
use crate::manifest::{FileEntry, Manifest};
use crate::store::sha256_hex;
use crate::{Store, StoreError};

impl Store {
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
}
