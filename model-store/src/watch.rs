//! The change feed: follow an alias and report each new target — of one model
//! ([`AliasWatcher`], for `arcwright store watch`) or of every model in the store ([`AliasFeed`],
//! which the service follows to hot-swap).
//!
//! Polling, because object stores have no portable notifications: each poll reads one small
//! alias object (a few hundred bytes) per model, so an unchanged store costs one LIST and one GET
//! per model per interval. Failed polls back off exponentially ([`Backoff`]: interval × 2ⁿ, at
//! most 8× the interval) and are reported to the caller, which keeps serving what it has.

use std::collections::BTreeMap;
use std::time::Duration;

use crate::{AliasRecord, Store, StoreError};

/// The longest wait after failures, as a multiple of the polling interval.
pub const MAX_BACKOFF_FACTOR: u32 = 8;

/// How long to wait before the next poll: the interval, doubled after each consecutive failure
/// up to [`MAX_BACKOFF_FACTOR`]× the interval, and back to the interval after a success.
#[derive(Debug, Clone)]
pub struct Backoff {
    interval: Duration,
    failures: u32,
}

impl Backoff {
    pub fn new(interval: Duration) -> Self {
        Backoff {
            interval,
            failures: 0,
        }
    }

    /// The wait before the next poll.
    pub fn delay(&self) -> Duration {
        let factor = 1u32 << self.failures.min(MAX_BACKOFF_FACTOR.trailing_zeros());
        self.interval * factor
    }

    /// Consecutive failed polls so far.
    pub fn failures(&self) -> u32 {
        self.failures
    }

    fn record<T, E>(&mut self, outcome: &Result<T, E>) {
        if outcome.is_ok() {
            self.failures = 0;
        } else {
            self.failures = self.failures.saturating_add(1);
        }
    }
}

/// Follows `alias` of `name`.
#[derive(Debug)]
pub struct AliasWatcher {
    store: Store,
    name: String,
    alias: String,
    backoff: Backoff,
    last: Option<String>,
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
            backoff: Backoff::new(interval),
            last,
        }
    }

    /// Waits for the alias to point somewhere new (returns `Ok`) or for a failed poll (returns
    /// `Err`, after which the next call waits longer).
    pub async fn next_change(&mut self) -> Result<AliasRecord, StoreError> {
        loop {
            tokio::time::sleep(self.backoff.delay()).await;
            if let Some(record) = self.poll_now().await? {
                return Ok(record);
            }
        }
    }

    /// Checks once, now, without waiting.
    pub async fn poll_now(&mut self) -> Result<Option<AliasRecord>, StoreError> {
        let outcome = self.store.alias(&self.name, &self.alias).await;
        self.backoff.record(&outcome);
        match outcome? {
            Some(r) if self.last.as_deref() != Some(r.version.as_str()) => {
                self.last = Some(r.version.clone());
                Ok(Some(r))
            }
            _ => Ok(None),
        }
    }
}

/// Follows one alias (such as `live`) of every model in the store, including models published
/// after the feed started.
#[derive(Debug)]
pub struct AliasFeed {
    store: Store,
    alias: String,
    backoff: Backoff,
    /// The last target reported per model.
    seen: BTreeMap<String, String>,
}

impl AliasFeed {
    pub fn new(store: Store, alias: &str, interval: Duration) -> Self {
        AliasFeed {
            store,
            alias: alias.to_string(),
            backoff: Backoff::new(interval),
            seen: BTreeMap::new(),
        }
    }

    /// The wait before the next poll of [`AliasFeed::next_changes`].
    pub fn delay(&self) -> Duration {
        self.backoff.delay()
    }

    /// Consecutive failed polls so far.
    pub fn failures(&self) -> u32 {
        self.backoff.failures()
    }

    /// Checks every model now: the models whose alias points somewhere it did not at the last
    /// report, in name order. A failed poll reports nothing as seen, so its changes come again.
    pub async fn poll_now(&mut self) -> Result<Vec<(String, AliasRecord)>, StoreError> {
        let outcome = self.read_targets().await;
        self.backoff.record(&outcome);
        let mut changes = Vec::new();
        for (name, record) in outcome? {
            if self.seen.get(&name) != Some(&record.version) {
                self.seen.insert(name.clone(), record.version.clone());
                changes.push((name, record));
            }
        }
        Ok(changes)
    }

    /// Waits the interval (longer after failures), then polls.
    pub async fn next_changes(&mut self) -> Result<Vec<(String, AliasRecord)>, StoreError> {
        tokio::time::sleep(self.backoff.delay()).await;
        self.poll_now().await
    }

    async fn read_targets(&self) -> Result<Vec<(String, AliasRecord)>, StoreError> {
        let mut targets = Vec::new();
        for name in self.store.names().await? {
            if let Some(record) = self.store.alias(&name, &self.alias).await? {
                targets.push((name, record));
            }
        }
        Ok(targets)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn backoff_doubles_up_to_eight_times_and_resets() {
        let mut backoff = Backoff::new(Duration::from_secs(5));
        let mut delays = vec![backoff.delay().as_secs()];
        for _ in 0..5 {
            backoff.record(&Err::<(), ()>(()));
            delays.push(backoff.delay().as_secs());
        }
        assert_eq!(delays, [5, 10, 20, 40, 40, 40]);
        backoff.record(&Ok::<(), ()>(()));
        assert_eq!(backoff.delay().as_secs(), 5);
    }
}
