//! The models being served and the hot-swap machinery.
//!
//! Mutable host, immutable snapshots: each model name has an `ArcSwap<Served>`; a request takes
//! one `Arc<Served>` at its start and keeps it to the end, so a swap never affects a request in
//! flight. A new version is fetched (every checksum verified), loaded and smoke-parsed in the
//! background before the atomic swap; any failure leaves the old version serving and is logged
//! and counted. The registry follows the store through its change feed
//! ([`arcwright_store::AliasFeed`]), which backs off while the store fails.

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::sync::{Arc, Mutex, RwLock};
use std::time::{Duration, Instant, SystemTime};

use arc_swap::ArcSwap;
use arcwright_parser::model::{Model, ModelError};
use arcwright_store::{AliasFeed, Store, StoreError};

use super::errors::{ApiError, ErrorCode};

/// Why a version could not be loaded; the version being served keeps serving.
#[derive(Debug, thiserror::Error)]
pub enum LoadError {
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error(transparent)]
    Model(#[from] ModelError),
    #[error("smoke parse failed: {0}")]
    SmokeParse(#[from] arcwright_parser::decode::TreeError),
    #[error("the loading task failed: {0}")]
    Task(#[from] tokio::task::JoinError),
    #[error("the registry's lock is poisoned")]
    Poisoned,
}

/// One loaded model version (immutable).
#[derive(Debug)]
pub struct Served {
    pub name: String,
    pub version: String,
    pub model: Model,
    pub loaded_at: SystemTime,
    pub load_seconds: f64,
}

/// A swap attempt, for `/v1/models` and the operator console.
#[derive(Debug, Clone, serde::Serialize)]
pub struct SwapEvent {
    pub name: String,
    pub from: Option<String>,
    pub to: String,
    pub ok: bool,
    pub message: String,
    pub at_unix_ms: u128,
}

#[derive(Debug)]
pub struct Registry {
    store: Store,
    /// The store's `live` aliases, as they change.
    feed: tokio::sync::Mutex<AliasFeed>,
    /// The store's `candidate` aliases, as they change.
    candidate_feed: tokio::sync::Mutex<AliasFeed>,
    /// Candidate versions loaded for shadow parses, by model name.
    candidates: RwLock<BTreeMap<String, Arc<Served>>>,
    /// Rollout policies kept in the store, by model name (read with the candidates).
    policies: RwLock<BTreeMap<String, arcwright_store::RolloutPolicy>>,
    cache: PathBuf,
    configured_default: Option<String>,
    models: RwLock<BTreeMap<String, Arc<ArcSwap<Served>>>>,
    swaps: Mutex<Vec<SwapEvent>>,
    /// Serializes loads of the same model (the follower and an admin activation).
    loading: tokio::sync::Mutex<()>,
}

fn unix_ms() -> u128 {
    SystemTime::now()
        .duration_since(SystemTime::UNIX_EPOCH)
        .map_or(0, |d| d.as_millis())
}

impl Registry {
    /// `poll`: the interval at which the store's aliases are checked.
    pub fn new(
        store: Store,
        cache: PathBuf,
        configured_default: Option<String>,
        poll: Duration,
    ) -> Self {
        Registry {
            feed: tokio::sync::Mutex::new(AliasFeed::new(store.clone(), "live", poll)),
            candidate_feed: tokio::sync::Mutex::new(AliasFeed::new(
                store.clone(),
                "candidate",
                poll,
            )),
            candidates: RwLock::new(BTreeMap::new()),
            policies: RwLock::new(BTreeMap::new()),
            store,
            cache,
            configured_default,
            models: RwLock::new(BTreeMap::new()),
            swaps: Mutex::new(Vec::new()),
            loading: tokio::sync::Mutex::new(()),
        }
    }

    pub fn store(&self) -> &Store {
        &self.store
    }

    /// The default model's name: the configured one, else the only one, else the first by name.
    pub fn default_name(&self) -> Option<String> {
        if let Some(name) = &self.configured_default {
            return Some(name.clone());
        }
        self.models.read().ok()?.keys().next().cloned()
    }

    /// The snapshot to use for a request.
    pub fn snapshot(&self, name: Option<&str>) -> Result<Arc<Served>, ApiError> {
        let name = match name.filter(|n| !n.is_empty()) {
            Some(n) => n.to_string(),
            None => self
                .default_name()
                .ok_or_else(|| ApiError::new(ErrorCode::NoModel, "no model is loaded yet"))?,
        };
        let models = self
            .models
            .read()
            .map_err(|_| ApiError::new(ErrorCode::Internal, "registry lock poisoned"))?;
        match models.get(&name) {
            Some(slot) => Ok(slot.load_full()),
            None => {
                let known: Vec<&str> = models.keys().map(String::as_str).collect();
                Err(ApiError::new(
                    ErrorCode::UnknownModel,
                    format!("unknown model {name:?}; serving: {}", known.join(", ")),
                ))
            }
        }
    }

    /// Names and serving versions.
    pub fn serving(&self) -> Vec<(String, Arc<Served>)> {
        self.models
            .read()
            .map(|m| m.iter().map(|(k, v)| (k.clone(), v.load_full())).collect())
            .unwrap_or_default()
    }

    pub fn swaps(&self) -> Vec<SwapEvent> {
        self.swaps.lock().map(|s| s.clone()).unwrap_or_default()
    }

    pub fn is_ready(&self) -> bool {
        self.models.read().is_ok_and(|m| !m.is_empty())
    }

    fn record(&self, event: SwapEvent) {
        if event.ok {
            tracing::info!(model = %event.name, from = ?event.from, to = %event.to, "model swapped");
        } else {
            tracing::warn!(model = %event.name, to = %event.to, error = %event.message, "model swap failed; previous version keeps serving");
        }
        super::metrics::record_swap(&event.name, event.ok);
        if let Ok(mut swaps) = self.swaps.lock() {
            swaps.push(event);
            let excess = swaps.len().saturating_sub(50);
            swaps.drain(..excess);
        }
    }

    /// Fetches, verifies, loads and smoke-parses `version`, then swaps it in. The old version
    /// keeps serving if anything fails.
    pub async fn load_and_swap(&self, name: &str, version: &str) -> Result<Arc<Served>, LoadError> {
        let _guard = self.loading.lock().await;
        let previous = self
            .models
            .read()
            .ok()
            .and_then(|m| m.get(name).map(|s| s.load().version.clone()));
        if previous.as_deref() == Some(version)
            && let Some(slot) = self.models.read().ok().and_then(|m| m.get(name).cloned())
        {
            return Ok(slot.load_full());
        }
        let started = Instant::now();
        let outcome = self.load_model(name, version).await;
        match outcome {
            Ok(model) => {
                let served = Arc::new(Served {
                    name: name.to_string(),
                    version: version.to_string(),
                    model,
                    loaded_at: SystemTime::now(),
                    load_seconds: started.elapsed().as_secs_f64(),
                });
                {
                    let mut models = self.models.write().map_err(|_| LoadError::Poisoned)?;
                    match models.get(name) {
                        Some(slot) => slot.store(served.clone()),
                        None => {
                            models.insert(name.to_string(), Arc::new(ArcSwap::new(served.clone())));
                        }
                    }
                }
                super::metrics::set_model_info(
                    name,
                    previous.as_deref(),
                    version,
                    served.load_seconds,
                );
                self.record(SwapEvent {
                    name: name.into(),
                    from: previous,
                    to: version.into(),
                    ok: true,
                    message: String::new(),
                    at_unix_ms: unix_ms(),
                });
                Ok(served)
            }
            Err(error) => {
                self.record(SwapEvent {
                    name: name.into(),
                    from: previous,
                    to: version.into(),
                    ok: false,
                    message: error.to_string(),
                    at_unix_ms: unix_ms(),
                });
                Err(error)
            }
        }
    }

    /// Fetches (every checksum verified), loads and smoke-parses a version.
    async fn load_model(&self, name: &str, version: &str) -> Result<Model, LoadError> {
        let (dir, _) = self.store.fetch(name, version, &self.cache).await?;
        tokio::task::spawn_blocking(move || -> Result<Model, LoadError> {
            let model = Model::load(&dir)?;
            // Smoke test: a parse must produce a tree.
            let words: Vec<String> = ["a", "small", "test", "."]
                .iter()
                .map(|s| s.to_string())
                .collect();
            let parsed = model.parse(&words, None, None, None);
            arcwright_parser::decode::check_tree(&parsed.heads)?;
            Ok(model)
        })
        .await?
    }

    /// The candidate version of a model, when one is loaded.
    pub fn candidate(&self, name: &str) -> Option<Arc<Served>> {
        self.candidates.read().ok()?.get(name).cloned()
    }

    /// The rollout policy the store keeps for a model, if any.
    pub fn rollout_policy(&self, name: &str) -> Option<arcwright_store::RolloutPolicy> {
        self.policies.read().ok()?.get(name).cloned()
    }

    /// Reads the rollout policy of every model served (an unreadable one is logged and the
    /// last one read kept).
    async fn follow_policies(&self) {
        for (name, _) in self.serving() {
            match self.store.rollout_policy(&name).await {
                Ok(Some(policy)) => {
                    if let Ok(mut policies) = self.policies.write() {
                        policies.insert(name, policy);
                    }
                }
                Ok(None) => {
                    if let Ok(mut policies) = self.policies.write() {
                        policies.remove(&name);
                    }
                }
                Err(e) => {
                    tracing::warn!(model = %name, error = %e, "cannot read the rollout policy; keeping the last one")
                }
            }
        }
    }

    /// Loads the candidates whose `candidate` alias moved (a version that fails to load is
    /// logged and left out: shadow parses are never worth a failed start).
    async fn follow_candidates(&self) {
        self.follow_policies().await;
        let changes = match self.candidate_feed.lock().await.poll_now().await {
            Ok(changes) => changes,
            Err(e) => {
                tracing::warn!(error = %e, "cannot read the store's candidate aliases; will retry");
                return;
            }
        };
        for (name, record) in changes {
            if self
                .candidate(&name)
                .is_some_and(|c| c.version == record.version)
            {
                continue;
            }
            let started = Instant::now();
            match self.load_model(&name, &record.version).await {
                Ok(model) => {
                    tracing::info!(model = %name, version = %record.version, "candidate loaded for shadow parses");
                    let served = Arc::new(Served {
                        name: name.clone(),
                        version: record.version.clone(),
                        model,
                        loaded_at: SystemTime::now(),
                        load_seconds: started.elapsed().as_secs_f64(),
                    });
                    if let Ok(mut candidates) = self.candidates.write() {
                        candidates.insert(name, served);
                    }
                }
                Err(e) => {
                    tracing::warn!(model = %name, version = %record.version, error = %e, "candidate could not be loaded; not shadowed")
                }
            }
        }
    }

    /// Loads or swaps every model whose `live` alias moved since the last pass. A version that
    /// failed to load is not tried again until the alias moves.
    async fn apply(&self, changes: Vec<(String, arcwright_store::AliasRecord)>) {
        for (name, record) in changes {
            // Failures are logged, counted and listed in the swap history by `load_and_swap`.
            let _ = self.load_and_swap(&name, &record.version).await;
        }
    }

    /// One pass of following the store, now: every model with a `live` alias is loaded or
    /// swapped to the alias's target. Returns how many models are serving.
    pub async fn follow_once(&self) -> usize {
        let polled = self.feed.lock().await.poll_now().await;
        match polled {
            Ok(changes) => self.apply(changes).await,
            Err(e) => {
                tracing::warn!(error = %e, "cannot read the store's live aliases; will retry")
            }
        }
        self.follow_candidates().await;
        self.serving().len()
    }

    /// Follows the store until the task is dropped: a pass every polling interval, backing off
    /// (up to 8× the interval) while the store fails; what is loaded keeps serving meanwhile.
    pub async fn follow(self: Arc<Self>) {
        loop {
            let mut feed = self.feed.lock().await;
            let polled = feed.next_changes().await;
            let retry_in = feed.delay();
            drop(feed);
            match polled {
                Ok(changes) => {
                    self.apply(changes).await;
                    self.follow_candidates().await;
                }
                Err(e) => tracing::warn!(
                    error = %e,
                    retry_in_seconds = retry_in.as_secs_f64(),
                    "cannot read the store's live aliases; still serving what is loaded"
                ),
            }
        }
    }
}
