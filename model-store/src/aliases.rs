//! Aliases (`live`, `candidate`, …): where each points, moving one (promote), moving it back
//! (rollback), with compare-and-swap writes where the backend supports them.

use futures::TryStreamExt;
use object_store::{PutMode, PutOptions, PutPayload, UpdateVersion};
use serde::{Deserialize, Serialize};

use crate::error::backend;
use crate::layout;
use crate::names::validate_name;
use crate::time::now;
use crate::{Store, StoreError};

/// Where an alias points, and where it pointed before (most recent first).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct AliasRecord {
    pub version: String,
    #[serde(default)]
    pub history: Vec<String>,
    pub updated: String,
}

impl Store {
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

    pub(crate) async fn alias_with_tag(
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

    pub(crate) async fn write_alias(
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
}
