//! The change feed: follow one alias of one model and report each new target.
//!
//! Polling, because object stores have no portable notifications: each poll reads one small
//! alias object (a few hundred bytes), so an unchanged alias costs one GET per interval. Errors
//! back off exponentially (interval × 2ⁿ, at most 8× the interval) and are reported to the caller,
//! which keeps serving what it has.

use std::time::Duration;

use crate::{AliasRecord, Store, StoreError};

/// Follows `alias` of `name`.
#[derive(Debug)]
pub struct AliasWatcher {
    store: Store,
    name: String,
    alias: String,
    interval: Duration,
    last: Option<String>,
    failures: u32,
}

impl AliasWatcher {
    /// `last`: the version already being served (not reported again).
    pub fn new(
        store: Store,
        name: &str,
        alias: &str,
        interval: Duration,
        last: Option<String>,
    ) -> Self {
        AliasWatcher {
            store,
            name: name.to_string(),
            alias: alias.to_string(),
            interval,
            last,
            failures: 0,
        }
    }

    /// Waits for the alias to point somewhere new (returns `Ok`) or for a failed poll (returns
    /// `Err`, after which the next call waits longer).
    pub async fn next_change(&mut self) -> Result<AliasRecord, StoreError> {
        loop {
            let backoff = self.interval * 2u32.pow(self.failures.min(3));
            tokio::time::sleep(backoff).await;
            match self.store.alias(&self.name, &self.alias).await {
                Ok(Some(record)) if self.last.as_deref() != Some(record.version.as_str()) => {
                    self.failures = 0;
                    self.last = Some(record.version.clone());
                    return Ok(record);
                }
                Ok(_) => self.failures = 0,
                Err(e) => {
                    self.failures += 1;
                    return Err(e);
                }
            }
        }
    }

    /// Checks once, now, without waiting.
    pub async fn poll_now(&mut self) -> Result<Option<AliasRecord>, StoreError> {
        let record = self.store.alias(&self.name, &self.alias).await?;
        match record {
            Some(r) if self.last.as_deref() != Some(r.version.as_str()) => {
                self.last = Some(r.version.clone());
                Ok(Some(r))
            }
            _ => Ok(None),
        }
    }
}
