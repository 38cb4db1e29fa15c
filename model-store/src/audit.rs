//! The audit log: every decision that moved (or refused to move) an alias — who or what took it,
//! from which version to which, why, and on what evidence.
//!
//! One object per entry under `models/<name>/audit/`, keyed by the time of the decision and 8 hex
//! digits of a digest of the entry (and of a nonce), written create-only: appending never reads or rewrites
//! another entry, so replicas and operators appending at the same moment never lose one.
//! Listing sorts the keys, which sort by time.

use futures::TryStreamExt;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::error::backend;
use crate::layout;
use crate::names::validate_name;
use crate::time::now;
use crate::{AliasRecord, Store, StoreError};

/// What a decision did.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Action {
    /// The alias was pointed at a version.
    Promote,
    /// The alias was moved back to its previous version.
    Rollback,
    /// A move was asked for and refused by a gate; the alias did not move.
    Refused,
}

/// One decision.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuditEntry {
    /// UTC, RFC 3339 (milliseconds).
    pub time: String,
    pub model: String,
    pub alias: String,
    pub action: Action,
    /// Where the alias pointed before (none when it did not exist).
    pub from: Option<String>,
    /// Where it points now (for a refusal: the version that was refused).
    pub to: String,
    /// Who or what decided: `cli:<user>`, `admin-api`, `replica:<id>`, …
    pub actor: String,
    /// Why, in words.
    pub reason: String,
    /// The figures behind the decision (free-form JSON; null when there were none).
    #[serde(default)]
    pub evidence: serde_json::Value,
}

/// Who decided and why, given by the caller of a move.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Decision {
    pub actor: String,
    pub reason: String,
    pub evidence: serde_json::Value,
}

impl Store {
    /// Appends one entry to a model's audit log; returns its key's file name.
    pub async fn append_audit(&self, entry: &AuditEntry) -> Result<String, StoreError> {
        validate_name("model", &entry.model)?;
        let bytes =
            serde_json::to_vec_pretty(entry).map_err(|e| StoreError::Invalid(e.to_string()))?;
        // The digest also takes the clock's nanoseconds, the process id and a counter, so two
        // identical decisions in the same millisecond still get two keys.
        static APPENDS: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
        let mut hasher = Sha256::new();
        hasher.update(&bytes);
        hasher.update(
            std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .unwrap_or_default()
                .as_nanos()
                .to_le_bytes(),
        );
        hasher.update(std::process::id().to_le_bytes());
        hasher.update(
            APPENDS
                .fetch_add(1, std::sync::atomic::Ordering::Relaxed)
                .to_le_bytes(),
        );
        let digest = hex::encode(hasher.finalize());
        let stamp: String = entry
            .time
            .chars()
            .filter(|c| !matches!(c, '-' | ':'))
            .collect();
        let file = format!("{stamp}-{}.json", &digest[..8]);
        let key = layout::model(&self.root, &entry.model)
            .child("audit")
            .child(file.as_str());
        self.put_new(&key, bytes).await?;
        Ok(file)
    }

    /// A model's audit log, oldest first. An entry that cannot be read is an error naming it:
    /// the log is evidence, and a gap in it must be seen.
    pub async fn history(&self, name: &str) -> Result<Vec<AuditEntry>, StoreError> {
        validate_name("model", name)?;
        let prefix = layout::model(&self.root, name).child("audit");
        let mut objects: Vec<_> = self
            .objects
            .list(Some(&prefix))
            .try_collect()
            .await
            .map_err(backend("list", &prefix))?;
        objects.sort_by(|a, b| a.location.cmp(&b.location));
        let mut entries = Vec::with_capacity(objects.len());
        for meta in objects {
            let bytes = self
                .objects
                .get(&meta.location)
                .await
                .map_err(backend("read audit entry", &meta.location))?
                .bytes()
                .await
                .map_err(backend("read audit entry", &meta.location))?;
            let entry = serde_json::from_slice(&bytes).map_err(|e| {
                StoreError::Invalid(format!(
                    "audit entry {} of model {name} is not readable: {e}",
                    meta.location
                ))
            })?;
            entries.push(entry);
        }
        Ok(entries)
    }

    /// Points `alias` at `version` ([`Store::set_alias`]) and records the decision. The alias
    /// moves first: if the audit entry cannot be written afterwards, the error says that the
    /// alias did move.
    pub async fn promote(
        &self,
        name: &str,
        alias: &str,
        version: &str,
        decision: Decision,
    ) -> Result<AliasRecord, StoreError> {
        let before = self.alias(name, alias).await?.map(|r| r.version);
        let record = self.set_alias(name, alias, version).await?;
        if before.as_deref() == Some(version) {
            return Ok(record); // nothing moved, nothing to record
        }
        // The version it moved from is the one the compare-and-swap replaced.
        let from = record.history.first().cloned();
        self.record(name, alias, Action::Promote, from, version, decision)
            .await?;
        Ok(record)
    }

    /// Moves `alias` back ([`Store::rollback`]) and records the decision.
    pub async fn roll_back(
        &self,
        name: &str,
        alias: &str,
        decision: Decision,
    ) -> Result<AliasRecord, StoreError> {
        let before = self.alias(name, alias).await?.map(|r| r.version);
        let record = self.rollback(name, alias).await?;
        self.record(
            name,
            alias,
            Action::Rollback,
            before,
            &record.version,
            decision,
        )
        .await?;
        Ok(record)
    }

    /// Records a refused move (the alias stays where it is).
    pub async fn record_refusal(
        &self,
        name: &str,
        alias: &str,
        version: &str,
        decision: Decision,
    ) -> Result<(), StoreError> {
        let current = self.alias(name, alias).await?.map(|r| r.version);
        self.record(name, alias, Action::Refused, current, version, decision)
            .await
    }

    async fn record(
        &self,
        name: &str,
        alias: &str,
        action: Action,
        from: Option<String>,
        to: &str,
        decision: Decision,
    ) -> Result<(), StoreError> {
        let entry = AuditEntry {
            time: now().0,
            model: name.to_string(),
            alias: alias.to_string(),
            action,
            from,
            to: to.to_string(),
            actor: decision.actor,
            reason: decision.reason,
            evidence: decision.evidence,
        };
        let effect = if action == Action::Refused {
            "was refused"
        } else {
            "took effect"
        };
        self.append_audit(&entry).await.map(|_| ()).map_err(|e| {
            StoreError::Invalid(format!(
                "alias {alias} of model {name}: {action:?} to {to} {effect}, but its audit entry \
                 could not be written: {e}"
            ))
        })
    }
}
