//! Single objects by URL, for data that is not a model: corpora to parse and their parses.
//!
//! The same URL forms as a store: a path (`corpus/a.txt`), `file:///abs/path/a.txt`, or
//! `s3://bucket/key` (credentials and endpoint from the standard `AWS_*` variables, as for
//! [`crate::Store::open`]). Writes replace the whole object at once: S3 puts are atomic, and
//! the local backend writes a temporary file and renames it, so a reader never sees half an
//! output and a retried job simply overwrites.

use std::path::PathBuf;
use std::sync::Arc;

use object_store::local::LocalFileSystem;
use object_store::path::Path;
use object_store::{ObjectStore, PutPayload};

use crate::StoreError;
use crate::backends::{Location, locate, s3_bucket};

/// A backend and the object's key in it.
type Backend<'a> = (Arc<dyn ObjectStore>, &'a Path);

/// One object: the backend holding it and its key there.
#[derive(Debug, Clone)]
pub struct ObjectUrl {
    url: String,
    place: Place,
}

#[derive(Debug, Clone)]
enum Place {
    Remote {
        objects: Arc<dyn ObjectStore>,
        key: Path,
    },
    /// A local file: its (absolute) folder and its name in it.
    Local { folder: PathBuf, key: Path },
}

impl ObjectUrl {
    /// Parses an object URL. Local folders are created on write, not here.
    pub fn parse(url: &str) -> Result<ObjectUrl, StoreError> {
        let bad = |reason: &str| StoreError::BadUrl {
            url: url.to_string(),
            reason: reason.to_string(),
        };
        let path = match locate(url, "a path, file:///path and s3://bucket/key")? {
            Location::S3 { bucket, rest: key } => {
                if key.is_empty() || key.ends_with('/') {
                    return Err(bad("expected s3://bucket/key"));
                }
                let key = Path::parse(key).map_err(|e| bad(&e.to_string()))?;
                return Ok(ObjectUrl {
                    url: url.to_string(),
                    place: Place::Remote {
                        objects: Arc::new(s3_bucket(url, bucket)?),
                        key,
                    },
                });
            }
            Location::Local(path) => path,
        };
        let Some(file_name) = path.file_name().and_then(|n| n.to_str()) else {
            return Err(bad("not a file path"));
        };
        let key = Path::parse(file_name).map_err(|e| bad(&e.to_string()))?;
        let parent = match path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        let folder = std::path::absolute(&parent).map_err(|source| StoreError::Io {
            path: parent.display().to_string(),
            source,
        })?;
        Ok(ObjectUrl {
            url: url.to_string(),
            place: Place::Local { folder, key },
        })
    }

    /// The URL as given.
    pub fn url(&self) -> &str {
        &self.url
    }

    /// The backend and key; `create` makes a missing local folder (for writes).
    fn backend(&self, create: bool) -> Result<Option<Backend<'_>>, StoreError> {
        match &self.place {
            Place::Remote { objects, key } => Ok(Some((objects.clone(), key))),
            Place::Local { folder, key } => {
                if !folder.is_dir() {
                    if !create {
                        return Ok(None);
                    }
                    std::fs::create_dir_all(folder).map_err(|source| StoreError::Io {
                        path: folder.display().to_string(),
                        source,
                    })?;
                }
                let objects =
                    LocalFileSystem::new_with_prefix(folder).map_err(|e| StoreError::BadUrl {
                        url: self.url.clone(),
                        reason: e.to_string(),
                    })?;
                Ok(Some((Arc::new(objects), key)))
            }
        }
    }

    /// The object's whole content.
    pub async fn read(&self) -> Result<bytes::Bytes, StoreError> {
        let not_found = || StoreError::NotFound {
            what: self.url.clone(),
        };
        let Some((objects, key)) = self.backend(false)? else {
            return Err(not_found());
        };
        let result = match objects.get(key).await {
            Ok(result) => result,
            Err(object_store::Error::NotFound { .. }) => return Err(not_found()),
            Err(source) => return Err(self.failed("read", source)),
        };
        result.bytes().await.map_err(|e| self.failed("read", e))
    }

    /// Whether the object exists.
    pub async fn exists(&self) -> Result<bool, StoreError> {
        let Some((objects, key)) = self.backend(false)? else {
            return Ok(false);
        };
        match objects.head(key).await {
            Ok(_) => Ok(true),
            Err(object_store::Error::NotFound { .. }) => Ok(false),
            Err(source) => Err(self.failed("read", source)),
        }
    }

    /// Replaces the object's content in one step.
    pub async fn write(&self, bytes: Vec<u8>) -> Result<(), StoreError> {
        let Some((objects, key)) = self.backend(true)? else {
            return Err(StoreError::Invalid(format!(
                "{}: no place to write",
                self.url
            )));
        };
        objects
            .put(key, PutPayload::from(bytes))
            .await
            .map(|_| ())
            .map_err(|e| self.failed("write", e))
    }

    fn failed(&self, operation: &'static str, source: object_store::Error) -> StoreError {
        StoreError::Backend {
            operation,
            key: self.url.clone(),
            source,
        }
    }
}

/// Joins an output prefix URL (a folder path or `s3://bucket/prefix`) and a file name.
pub fn join_url(prefix: &str, name: &str) -> String {
    if prefix.ends_with('/') {
        format!("{prefix}{name}")
    } else {
        format!("{prefix}/{name}")
    }
}
