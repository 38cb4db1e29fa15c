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

/// What an automatic decision came to.
#[derive(Debug, Clone, PartialEq)]
pub enum Decided {
    /// The alias moved; the entry was written once (by whichever decider got there first).
    Moved(AliasRecord),
    /// The alias already pointed at the target: another decider moved it.
    AlreadyThere,
    /// The alias no longer pointed at the version the decision was taken on; nothing was done.
    Stale { current: Option<String> },
}

impl Store {
    /// Moves `alias` from `expected` to `to` for a decider that is one of several (replicas):
    /// a compare-and-swap against the alias state it read, where the backend supports it, and
    /// an audit entry keyed by that state, so replicas deciding the same thing at once leave
    /// one move and one entry. `to` is verified first. On a backend without conditional writes
    /// (a local directory) two deciders that read the same state both write the same target,
    /// and the log still holds one entry.
    pub async fn decide_move(
        &self,
        name: &str,
        alias: &str,
        expected: &str,
        to: &str,
        action: Action,
        decision: Decision,
    ) -> Result<Decided, StoreError> {
        self.verify(name, to).await?;
        let Some((record, tag)) = self.alias_with_tag(name, alias).await? else {
            return Ok(Decided::Stale { current: None });
        };
        if record.version == to {
            return Ok(Decided::AlreadyThere);
        }
        if record.version != expected {
            return Ok(Decided::Stale {
                current: Some(record.version),
            });
        }
        let history = if record.history.first().map(String::as_str) == Some(to) {
            record.history[1..].to_vec()
        } else {
            let mut history = vec![record.version.clone()];
            history.extend(record.history.iter().cloned());
            history.truncate(20);
            history
        };
        let state = record.updated.clone();
        let moved = match self
            .write_alias(
                name,
                alias,
                AliasRecord {
                    version: to.to_string(),
                    history,
                    updated: now().0,
                },
                Some(tag),
            )
            .await
        {
            Ok(moved) => moved,
            Err(StoreError::Conflict { .. }) => {
                let current = self.alias(name, alias).await?.map(|r| r.version);
                return Ok(if current.as_deref() == Some(to) {
                    Decided::AlreadyThere
                } else {
                    Decided::Stale { current }
                });
            }
            Err(e) => return Err(e),
        };
        let entry = AuditEntry {
            time: now().0,
            model: name.to_string(),
            alias: alias.to_string(),
            action,
            from: Some(expected.to_string()),
            to: to.to_string(),
            actor: decision.actor,
            reason: decision.reason,
            evidence: decision.evidence,
        };
        self.append_audit_once(&entry, &state).await.map_err(|e| {
            StoreError::Invalid(format!(
                "alias {alias} of model {name}: {action:?} to {to} took effect, but its audit entry \
                 could not be written: {e}"
            ))
        })?;
        Ok(Decided::Moved(moved))
    }

    /// Records a refusal several deciders may reach at once (keyed by the refused version and
    /// the alias state, so one entry); returns whether this call wrote it.
    pub async fn record_refusal_once(
        &self,
        name: &str,
        alias: &str,
        version: &str,
        decision: Decision,
    ) -> Result<bool, StoreError> {
        let current = self.alias(name, alias).await?;
        let state = current
            .as_ref()
            .map_or(String::new(), |r| r.updated.clone());
        let entry = AuditEntry {
            time: now().0,
            model: name.to_string(),
            alias: alias.to_string(),
            action: Action::Refused,
            from: current.map(|r| r.version),
            to: version.to_string(),
            actor: decision.actor,
            reason: decision.reason,
            evidence: decision.evidence,
        };
        self.append_audit_once(&entry, &state).await
    }

    /// Appends one entry to a model's audit log; returns its key's file name.
    pub async fn append_audit(&self, entry: &AuditEntry) -> Result<String, StoreError> {
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
        self.put_audit(entry, &file, bytes).await?;
        Ok(file)
    }

    /// Appends the entry of a decision that several deciders may take at once (replicas that
    /// read the same state): its key is made from the decision and the state it was taken on,
    /// so the first writer's entry is kept and the others' are the same key. Returns whether
    /// this call wrote it.
    pub async fn append_audit_once(
        &self,
        entry: &AuditEntry,
        state: &str,
    ) -> Result<bool, StoreError> {
        let bytes =
            serde_json::to_vec_pretty(entry).map_err(|e| StoreError::Invalid(e.to_string()))?;
        let mut hasher = Sha256::new();
        for part in [
            entry.alias.as_str(),
            &format!("{:?}", entry.action),
            entry.from.as_deref().unwrap_or("-"),
            &entry.to,
            state,
        ] {
            hasher.update(part.as_bytes());
            hasher.update([0]);
        }
        let file = format!("decision-{}.json", &hex::encode(hasher.finalize())[..16]);
        match self.put_audit(entry, &file, bytes).await {
            Ok(()) => Ok(true),
            Err(StoreError::Exists { .. }) => Ok(false),
            Err(e) => Err(e),
        }
    }

    async fn put_audit(
        &self,
        entry: &AuditEntry,
        file: &str,
        bytes: Vec<u8>,
    ) -> Result<(), StoreError> {
        validate_name("model", &entry.model)?;
        let key = layout::model(&self.root, &entry.model)
            .child("audit")
            .child(file);
        self.put_new(&key, bytes).await
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
        // Oldest first: by the decision's time (keys of decisions taken once do not sort by
        // time), the key breaking ties.
        entries.sort_by(|a: &AuditEntry, b: &AuditEntry| a.time.cmp(&b.time));
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
