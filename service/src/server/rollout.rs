//! Safe rollout: a model's `candidate` version judged on a sample of the live traffic, off the
//! reply path, and promoted automatically once it has shown itself no worse.
//!
//! **Shadow parses.** For a model that has a candidate (its `candidate` alias points at another
//! version than `live`), a request is sampled with probability `shadow-sample`; its sentences are
//! copied into a bounded queue before the live parse is dispatched, and nothing else: the reply
//! never waits for them. One thread in the kernel's idle scheduling class takes them from the
//! queue and parses each sentence with the live and the candidate version, timing both by its
//! CPU clock (same thread, same conditions: a fair latency ratio). It only ever runs on a core
//! nothing else wants, so when the replica is busy the queue fills and further samples are shed
//! first — before any request is. A candidate that panics or returns a malformed tree is counted
//! as an error, never seen by a client.
//!
//! **What is recorded**, per model and length bucket, since the candidate was loaded: sentences,
//! words, words whose head agrees with live's, words whose head and label agree, live and
//! candidate CPU seconds, errors; plus samples shed.
//!
//! **Gate.** With `rollout = "automatic"`, once `rollout-min-sentences` sentences were compared,
//! the candidate is promoted if its head agreement is at least `rollout-min-agreement` and its
//! CPU time is at most `rollout-max-latency-ratio` times live's (overall, and in every bucket of
//! at least 50 sentences), and refused otherwise; either way once per candidate and live version,
//! through [`arcwright_store::Store::decide_move`] / `record_refusal_once`, so replicas sharing a
//! store take the decision once and log it once.

use std::collections::BTreeMap;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::mpsc::{Receiver, SyncSender, TrySendError, sync_channel};
use std::sync::{Arc, Mutex};
use std::time::SystemTime;

use arcwright_parser::decode::Algorithm;
use arcwright_parser::hashing::SplitMix64;
use arcwright_parser::pipeline::{self, ParseOptions, Unobserved};
use arcwright_store::{Action, Decided, Decision};
use serde::Serialize;

use super::cpu_clock;
use super::metrics;
use super::registry::{Registry, Served};

/// Sentences waiting for a shadow parse at most (more are shed).
const QUEUE: usize = 256;
/// A bucket's latency ratio counts for the gate from this many sentences.
const BUCKET_MIN_SENTENCES: u64 = 50;

/// How a replica judges candidates.
#[derive(Debug, Clone, PartialEq)]
pub struct RolloutSettings {
    /// Share of requests also parsed by the candidate (0 = no shadow parses).
    pub sample: f64,
    /// Promote (or refuse) automatically once the evidence is in.
    pub automatic: bool,
    pub min_sentences: u64,
    /// Least share of words whose head agrees with live's.
    pub min_agreement: f64,
    /// Most candidate CPU time per live CPU time.
    pub max_latency_ratio: f64,
    /// This replica's name in the audit log.
    pub replica: String,
    /// How long a new live version must stay outside its band before it is rolled back
    /// automatically (zero: never).
    pub rollback_hold: std::time::Duration,
    /// Test switch: requests served by this version fail with this probability.
    pub inject_failures: Option<(String, f64)>,
}

impl Default for RolloutSettings {
    fn default() -> Self {
        RolloutSettings {
            sample: 0.1,
            automatic: false,
            min_sentences: 500,
            min_agreement: 0.9,
            max_latency_ratio: 1.5,
            replica: "replica".to_string(),
            rollback_hold: std::time::Duration::from_secs(60),
            inject_failures: None,
        }
    }
}

/// Counts of one length bucket.
#[derive(Debug, Clone, Default, Serialize, PartialEq)]
pub struct BucketCounts {
    pub sentences: u64,
    pub words: u64,
    pub equal_heads: u64,
    pub equal_heads_and_labels: u64,
    pub live_cpu_seconds: f64,
    pub candidate_cpu_seconds: f64,
    pub errors: u64,
}

impl BucketCounts {
    fn add(&mut self, other: &BucketCounts) {
        self.sentences += other.sentences;
        self.words += other.words;
        self.equal_heads += other.equal_heads;
        self.equal_heads_and_labels += other.equal_heads_and_labels;
        self.live_cpu_seconds += other.live_cpu_seconds;
        self.candidate_cpu_seconds += other.candidate_cpu_seconds;
        self.errors += other.errors;
    }

    pub fn head_agreement(&self) -> Option<f64> {
        (self.words > 0).then(|| self.equal_heads as f64 / self.words as f64)
    }

    pub fn label_agreement(&self) -> Option<f64> {
        (self.words > 0).then(|| self.equal_heads_and_labels as f64 / self.words as f64)
    }

    pub fn latency_ratio(&self) -> Option<f64> {
        (self.live_cpu_seconds > 0.0 && self.sentences > self.errors)
            .then(|| self.candidate_cpu_seconds / self.live_cpu_seconds)
    }
}

/// The comparison of one candidate with one live version.
#[derive(Debug, Clone, Serialize)]
pub struct Comparison {
    pub live_version: String,
    pub candidate_version: String,
    pub started_unix_ms: u128,
    pub buckets: BTreeMap<&'static str, BucketCounts>,
    pub shed: u64,
    /// What the gate decided, once it has (`promoted`, `refused`, or what another decider did).
    pub decision: Option<String>,
    pub reason: Option<String>,
}

impl Comparison {
    fn new(live: &str, candidate: &str) -> Self {
        Comparison {
            live_version: live.to_string(),
            candidate_version: candidate.to_string(),
            started_unix_ms: SystemTime::now()
                .duration_since(SystemTime::UNIX_EPOCH)
                .map_or(0, |d| d.as_millis()),
            buckets: BTreeMap::new(),
            shed: 0,
            decision: None,
            reason: None,
        }
    }

    pub fn total(&self) -> BucketCounts {
        let mut total = BucketCounts::default();
        for b in self.buckets.values() {
            total.add(b);
        }
        total
    }
}

/// What the gate makes of a comparison.
#[derive(Debug, Clone, PartialEq)]
pub enum Judgement {
    /// Not enough sentences yet.
    Waiting,
    Promote(String),
    Refuse(String),
}

/// The gate: promote when agreement and latency are inside their thresholds.
pub fn judge(comparison: &Comparison, settings: &RolloutSettings) -> Judgement {
    let total = comparison.total();
    if total.sentences < settings.min_sentences {
        return Judgement::Waiting;
    }
    let mut failures = Vec::new();
    if total.errors > 0 {
        failures.push(format!(
            "{} of {} sentences failed",
            total.errors, total.sentences
        ));
    }
    let agreement = total.head_agreement().unwrap_or(0.0);
    if agreement < settings.min_agreement {
        failures.push(format!(
            "head agreement {agreement:.4} below {}",
            settings.min_agreement
        ));
    }
    let ratio = total.latency_ratio().unwrap_or(f64::INFINITY);
    if ratio > settings.max_latency_ratio {
        failures.push(format!(
            "latency ratio {ratio:.3} above {}",
            settings.max_latency_ratio
        ));
    }
    for (bucket, counts) in &comparison.buckets {
        if counts.sentences >= BUCKET_MIN_SENTENCES
            && let Some(r) = counts.latency_ratio()
            && r > settings.max_latency_ratio
            && ratio <= settings.max_latency_ratio
        {
            failures.push(format!(
                "latency ratio {r:.3} above {} in length bucket {bucket}",
                settings.max_latency_ratio
            ));
        }
    }
    let summary = format!(
        "{} sentences shadowed: head agreement {agreement:.4}, label agreement {:.4}, latency ratio {ratio:.3}",
        total.sentences,
        total.label_agreement().unwrap_or(0.0)
    );
    if failures.is_empty() {
        Judgement::Promote(format!("automatic: gates passed ({summary})"))
    } else {
        Judgement::Refuse(format!("automatic: {} ({summary})", failures.join("; ")))
    }
}

/// One sampled request's sentences for the shadow thread.
struct ShadowJob {
    live: Arc<Served>,
    candidate: Arc<Served>,
    decoder: Option<Algorithm>,
    sentences: Vec<(Vec<String>, Option<Vec<String>>)>,
}

/// The rollout state of a replica.
#[derive(Debug)]
pub struct Rollout {
    pub settings: RolloutSettings,
    /// Per model: the comparison in progress (or decided).
    comparisons: Mutex<BTreeMap<String, Comparison>>,
    sender: Mutex<Option<SyncSender<ShadowJob>>>,
    sampler: AtomicU64,
    /// Set by `start`: where per-model policies are read.
    registry: std::sync::OnceLock<Arc<Registry>>,
}

impl std::fmt::Debug for ShadowJob {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ShadowJob")
            .field("sentences", &self.sentences.len())
            .finish()
    }
}

impl Rollout {
    pub fn new(settings: RolloutSettings) -> Self {
        Rollout {
            settings,
            comparisons: Mutex::new(BTreeMap::new()),
            sender: Mutex::new(None),
            sampler: AtomicU64::new(0x5eed),
            registry: std::sync::OnceLock::new(),
        }
    }

    /// This replica's settings with the model's policy from the store laid over them.
    pub fn settings_for(&self, name: &str) -> RolloutSettings {
        let mut settings = self.settings.clone();
        let Some(policy) = self.registry.get().and_then(|r| r.rollout_policy(name)) else {
            return settings;
        };
        if let Some(mode) = &policy.mode {
            settings.automatic = mode == "automatic";
        }
        if let Some(v) = policy.shadow_sample {
            settings.sample = v;
        }
        if let Some(v) = policy.min_sentences {
            settings.min_sentences = v;
        }
        if let Some(v) = policy.min_agreement {
            settings.min_agreement = v;
        }
        if let Some(v) = policy.max_latency_ratio {
            settings.max_latency_ratio = v;
        }
        if let Some(v) = policy.rollback_seconds {
            settings.rollback_hold = std::time::Duration::from_secs_f64(v);
        }
        settings
    }

    /// Starts the shadow thread (idle scheduling class) and the decisions' runtime handle.
    pub fn start(self: &Arc<Self>, registry: Arc<Registry>) {
        let _ = self.registry.set(registry.clone());
        let (sender, receiver) = sync_channel(QUEUE);
        if let Ok(mut slot) = self.sender.lock() {
            *slot = Some(sender);
        }
        let rollout = self.clone();
        let runtime = tokio::runtime::Handle::current();
        let spawned = std::thread::Builder::new()
            .name("shadow".to_string())
            .spawn(move || rollout.shadow_thread(receiver, registry, runtime));
        if let Err(e) = spawned {
            tracing::warn!(error = %e, "cannot start the shadow thread; candidates are not judged");
        }
    }

    /// Whether the test switch fails this request to `version`.
    pub fn inject_failure(&self, version: &str) -> bool {
        match &self.settings.inject_failures {
            Some((v, share)) if v == version => self.draw() < *share,
            _ => false,
        }
    }

    /// A uniform draw in [0, 1) from a shared SplitMix64 stream (no lock).
    fn draw(&self) -> f64 {
        let state = self
            .sampler
            .fetch_add(0x9e37_79b9_7f4a_7c15, Ordering::Relaxed);
        SplitMix64::new(state).next_f64()
    }

    /// Called on the request path before the live parse: samples the request and queues a copy
    /// of its sentences for the shadow thread, or counts it shed when the queue is full. Never
    /// blocks.
    pub fn offer(
        &self,
        live: &Arc<Served>,
        candidate: Option<Arc<Served>>,
        decoder: Option<Algorithm>,
        sentences: impl FnOnce() -> Vec<(Vec<String>, Option<Vec<String>>)>,
    ) {
        let Some(candidate) = candidate.filter(|c| c.version != live.version) else {
            return;
        };
        let sample = self.settings_for(&live.name).sample;
        if sample <= 0.0 || self.draw() >= sample {
            return;
        }
        let Ok(guard) = self.sender.lock() else {
            return;
        };
        let Some(sender) = guard.as_ref() else {
            return;
        };
        let sentences = sentences();
        let count = sentences.len() as u64;
        let job = ShadowJob {
            live: live.clone(),
            candidate,
            decoder,
            sentences,
        };
        match sender.try_send(job) {
            Ok(()) => {}
            Err(TrySendError::Full(job)) | Err(TrySendError::Disconnected(job)) => {
                metrics::SHADOW_SENTENCES
                    .with_label_values(&[&live.name, "shed"])
                    .inc_by(count);
                self.with_comparison(&job.live, &job.candidate, |c| c.shed += count);
            }
        }
    }

    /// Runs `f` on the comparison of this live and candidate version (a new one when either
    /// changed).
    fn with_comparison<T>(
        &self,
        live: &Served,
        candidate: &Served,
        f: impl FnOnce(&mut Comparison) -> T,
    ) -> Option<T> {
        let mut comparisons = self.comparisons.lock().ok()?;
        let entry = comparisons
            .entry(live.name.clone())
            .or_insert_with(|| Comparison::new(&live.version, &candidate.version));
        if entry.live_version != live.version || entry.candidate_version != candidate.version {
            *entry = Comparison::new(&live.version, &candidate.version);
        }
        Some(f(entry))
    }

    /// The comparison of a model, if one has started.
    pub fn comparison(&self, name: &str) -> Option<Comparison> {
        self.comparisons.lock().ok()?.get(name).cloned()
    }

    fn shadow_thread(
        self: Arc<Self>,
        receiver: Receiver<ShadowJob>,
        registry: Arc<Registry>,
        runtime: tokio::runtime::Handle,
    ) {
        if !cpu_clock::become_idle_class() {
            tracing::warn!("the shadow thread could not enter the idle scheduling class");
        }
        while let Ok(job) = receiver.recv() {
            let counts = shadow_parse(&job);
            let name = job.live.name.as_str();
            for c in counts.values() {
                metrics::SHADOW_SENTENCES
                    .with_label_values(&[name, "compared"])
                    .inc_by(c.sentences - c.errors);
                metrics::SHADOW_SENTENCES
                    .with_label_values(&[name, "error"])
                    .inc_by(c.errors);
            }
            let settings = self.settings_for(&job.live.name);
            let judgement = self.with_comparison(&job.live, &job.candidate, |comparison| {
                for (bucket, c) in counts {
                    comparison.buckets.entry(bucket).or_default().add(&c);
                }
                metrics::set_shadow(&job.live.name, comparison);
                if !settings.automatic || comparison.decision.is_some() {
                    return Judgement::Waiting;
                }
                let judgement = judge(comparison, &settings);
                if judgement != Judgement::Waiting {
                    comparison.decision = Some("deciding".to_string());
                }
                judgement
            });
            // The evidence (a copy of the comparison) only once there is a decision to take.
            let Some(judgement) = judgement.filter(|j| *j != Judgement::Waiting) else {
                continue;
            };
            let Some(evidence) = self
                .comparison(&job.live.name)
                .and_then(|c| serde_json::to_value(&c).ok())
            else {
                continue;
            };
            let rollout = self.clone();
            let registry = registry.clone();
            let (live, candidate) = (job.live.clone(), job.candidate.clone());
            runtime.spawn(async move {
                let (decision, reason) = decide(
                    &rollout.settings,
                    &registry,
                    &live,
                    &candidate,
                    judgement,
                    evidence,
                )
                .await;
                rollout.with_comparison(&live, &candidate, |c| {
                    c.decision = Some(decision);
                    c.reason = Some(reason);
                });
            });
        }
    }
}

/// Parses each sentence of a job with both versions; counts per length bucket.
fn shadow_parse(job: &ShadowJob) -> BTreeMap<&'static str, BucketCounts> {
    let options = ParseOptions {
        decoder: job.decoder,
        ..ParseOptions::default()
    };
    let mut counts: BTreeMap<&'static str, BucketCounts> = BTreeMap::new();
    for (forms, tags) in &job.sentences {
        let bucket = counts
            .entry(metrics::length_bucket(forms.len()))
            .or_default();
        bucket.sentences += 1;
        let timed = |served: &Served| {
            let started = cpu_clock::thread_seconds();
            let parsed = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                pipeline::parse(
                    &served.model,
                    forms,
                    tags.as_deref(),
                    None,
                    &options,
                    &mut Unobserved,
                )
            }));
            (parsed, cpu_clock::thread_seconds() - started)
        };
        let (live, live_seconds) = timed(&job.live);
        let (candidate, candidate_seconds) = timed(&job.candidate);
        let (Ok(live), Ok(candidate)) = (live, candidate) else {
            bucket.errors += 1;
            continue;
        };
        if arcwright_parser::decode::check_tree(&candidate.heads).is_err()
            || candidate.heads.len() != live.heads.len()
            || candidate.labels.len() != live.labels.len()
        {
            bucket.errors += 1;
            continue;
        }
        bucket.words += forms.len() as u64;
        for ((m, head), label) in candidate.heads.arcs().zip(&candidate.labels) {
            if live.heads[m] == head {
                bucket.equal_heads += 1;
                if live.labels[m - 1] == *label {
                    bucket.equal_heads_and_labels += 1;
                }
            }
        }
        bucket.live_cpu_seconds += live_seconds;
        bucket.candidate_cpu_seconds += candidate_seconds;
    }
    counts
}

/// Takes the gate's decision through the store: promote by compare-and-swap against the live
/// version compared with, or record the refusal; once across replicas. Returns the decision's
/// name and reason for the rollout report.
async fn decide(
    settings: &RolloutSettings,
    registry: &Registry,
    live: &Served,
    candidate: &Served,
    judgement: Judgement,
    evidence: serde_json::Value,
) -> (String, String) {
    let store = registry.store();
    let actor = format!("replica:{}", settings.replica);
    let thresholds = serde_json::json!({
        "min_sentences": settings.min_sentences,
        "min_agreement": settings.min_agreement,
        "max_latency_ratio": settings.max_latency_ratio,
    });
    let evidence = serde_json::json!({"shadow": evidence, "thresholds": thresholds});
    match judgement {
        Judgement::Waiting => ("waiting".to_string(), String::new()),
        Judgement::Promote(reason) => {
            let decision = Decision {
                actor,
                reason: reason.clone(),
                evidence,
            };
            match store
                .decide_move(
                    &live.name,
                    "live",
                    &live.version,
                    &candidate.version,
                    Action::Promote,
                    decision,
                )
                .await
            {
                Ok(Decided::Moved(_)) => {
                    tracing::info!(model = %live.name, from = %live.version, to = %candidate.version, "candidate promoted: gates passed");
                    metrics::record_rollout_decision(&live.name, "promoted");
                    // Swap at once rather than at the next poll.
                    let _ = registry.load_and_swap(&live.name, &candidate.version).await;
                    ("promoted".to_string(), reason)
                }
                Ok(Decided::AlreadyThere) => ("promoted by another replica".to_string(), reason),
                Ok(Decided::Stale { current }) => (
                    "not promoted: live moved meanwhile".to_string(),
                    format!(
                        "live is now {}",
                        current.unwrap_or_else(|| "gone".to_string())
                    ),
                ),
                Err(e) => {
                    tracing::warn!(model = %live.name, error = %e, "automatic promote failed");
                    ("promote failed".to_string(), e.to_string())
                }
            }
        }
        Judgement::Refuse(reason) => {
            let decision = Decision {
                actor,
                reason: reason.clone(),
                evidence,
            };
            match store
                .record_refusal_once(&live.name, "live", &candidate.version, decision)
                .await
            {
                Ok(written) => {
                    if written {
                        tracing::info!(model = %live.name, candidate = %candidate.version, %reason, "candidate refused");
                    }
                    metrics::record_rollout_decision(&live.name, "refused");
                    ("refused".to_string(), reason)
                }
                Err(e) => ("refusal not recorded".to_string(), e.to_string()),
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn health(requests: u64, failed: u64, buckets: &[(&'static str, u64, f64)]) -> VersionHealth {
        VersionHealth {
            requests,
            failed,
            buckets: buckets.iter().map(|&(b, n, s)| (b, (n, s))).collect(),
        }
    }

    /// Worked by hand: 5 of 100 requests failing against none before is outside the band
    /// (0.05 > max(0, 0.01)); 1 of 200 (0.005) is inside; 2% against 1.5% is inside
    /// (0.02 ≤ max(0.03, 0.025)); 1.6 ms per sentence against 1 ms is outside a 1.5 band;
    /// fewer than 50 requests or 30 sentences in a bucket say nothing.
    #[test]
    fn the_rollback_band() {
        let before = health(1000, 0, &[("16", 500, 0.5)]);
        let reason = breach(&health(100, 5, &[]), &before, 1.5).expect("breach");
        assert!(reason.contains("failure rate 0.0500 (5 of 100"), "{reason}");
        assert_eq!(breach(&health(200, 1, &[]), &before, 1.5), None);
        assert_eq!(
            breach(&health(1000, 20, &[]), &health(1000, 15, &[]), 1.5),
            None
        );
        let reason = breach(&health(100, 0, &[("16", 40, 0.064)]), &before, 1.5).expect("slow");
        assert!(
            reason.contains("1.60 times") && reason.contains("bucket 16"),
            "{reason}"
        );
        assert_eq!(breach(&health(49, 49, &[]), &before, 1.5), None);
        assert_eq!(
            breach(&health(100, 0, &[("16", 29, 1.0)]), &before, 1.5),
            None
        );
    }

    fn comparison(buckets: &[(&'static str, u64, u64, u64, f64, f64)]) -> Comparison {
        let mut c = Comparison::new("v1", "v2");
        for &(bucket, sentences, words, equal, live, candidate) in buckets {
            c.buckets.insert(
                bucket,
                BucketCounts {
                    sentences,
                    words,
                    equal_heads: equal,
                    equal_heads_and_labels: equal,
                    live_cpu_seconds: live,
                    candidate_cpu_seconds: candidate,
                    errors: 0,
                },
            );
        }
        c
    }

    /// Worked by hand: 600 sentences, 9,500 of 10,000 heads equal (0.95 ≥ 0.9), CPU 1.2 / 1.0
    /// (≤ 1.5) → promote; 8,500 equal → refused for agreement; candidate CPU 2.0 → refused for
    /// latency; 400 sentences → waiting; one slow bucket of 60 sentences refuses even when the
    /// overall ratio passes.
    #[test]
    fn the_gate_promotes_refuses_and_waits_by_its_thresholds() {
        let settings = RolloutSettings::default();
        let good = comparison(&[
            ("16", 300, 5000, 4750, 0.5, 0.6),
            ("32", 300, 5000, 4750, 0.5, 0.6),
        ]);
        assert!(matches!(judge(&good, &settings), Judgement::Promote(_)));
        let disagreeing = comparison(&[("16", 600, 10000, 8500, 1.0, 1.2)]);
        match judge(&disagreeing, &settings) {
            Judgement::Refuse(reason) => {
                assert!(
                    reason.contains("head agreement 0.8500 below 0.9"),
                    "{reason}"
                );
                assert!(!reason.contains("latency ratio 1.200 above"), "{reason}");
            }
            other => panic!("{other:?}"),
        }
        let slow = comparison(&[("16", 600, 10000, 9500, 1.0, 2.0)]);
        assert!(
            matches!(judge(&slow, &settings), Judgement::Refuse(r) if r.contains("latency ratio 2.000 above 1.5"))
        );
        let early = comparison(&[("16", 400, 8000, 8000, 1.0, 1.0)]);
        assert_eq!(judge(&early, &settings), Judgement::Waiting);
        let one_slow_bucket = comparison(&[
            ("16", 540, 9000, 9000, 1.0, 1.0),
            ("128", 60, 6000, 6000, 0.5, 1.0),
        ]);
        assert!(
            matches!(judge(&one_slow_bucket, &settings), Judgement::Refuse(r) if r.contains("length bucket 128"))
        );
    }
}

/// How a version has served since it was loaded: per length bucket, sentences and parsing-thread
/// CPU seconds; per version, requests and requests that failed for a reason of the model's own
/// (an internal error or the deadline).
#[derive(Debug, Clone, Default, Serialize, PartialEq)]
pub struct VersionHealth {
    pub requests: u64,
    pub failed: u64,
    /// Per length bucket: (sentences, CPU seconds).
    pub buckets: BTreeMap<&'static str, (u64, f64)>,
}

impl VersionHealth {
    pub fn failure_rate(&self) -> Option<f64> {
        (self.requests > 0).then(|| self.failed as f64 / self.requests as f64)
    }
}

/// Health per (model, version), recorded by the request path.
pub static HEALTH: std::sync::LazyLock<Mutex<BTreeMap<(String, String), VersionHealth>>> =
    std::sync::LazyLock::new(|| Mutex::new(BTreeMap::new()));

/// Records one parsed sentence of a version.
pub fn record_sentence(served: &Served, tokens: usize, cpu_seconds: f64) {
    if let Ok(mut health) = HEALTH.lock() {
        let entry = health
            .entry((served.name.clone(), served.version.clone()))
            .or_default();
        let bucket = entry
            .buckets
            .entry(metrics::length_bucket(tokens))
            .or_default();
        bucket.0 += 1;
        bucket.1 += cpu_seconds;
    }
}

/// Records one request a version answered (failed: for a reason of the model's own).
pub fn record_request(served: &Served, failed: bool) {
    if let Ok(mut health) = HEALTH.lock() {
        let entry = health
            .entry((served.name.clone(), served.version.clone()))
            .or_default();
        entry.requests += 1;
        entry.failed += u64::from(failed);
    }
}

/// What the rollback band makes of a new live version against the previous one: `None` when
/// within the band (or too little traffic to tell), else the reason.
pub fn breach(
    new: &VersionHealth,
    previous: &VersionHealth,
    max_latency_ratio: f64,
) -> Option<String> {
    const MIN_REQUESTS: u64 = 50;
    const MIN_BUCKET_SENTENCES: u64 = 30;
    if new.requests < MIN_REQUESTS {
        return None;
    }
    let new_rate = new.failure_rate().unwrap_or(0.0);
    let old_rate = previous.failure_rate().unwrap_or(0.0);
    if new_rate > (2.0 * old_rate).max(old_rate + 0.01) {
        return Some(format!(
            "failure rate {new_rate:.4} ({} of {} requests) against {old_rate:.4} for the previous version",
            new.failed, new.requests
        ));
    }
    for (bucket, &(sentences, seconds)) in &new.buckets {
        let Some(&(old_sentences, old_seconds)) = previous.buckets.get(bucket) else {
            continue;
        };
        if sentences < MIN_BUCKET_SENTENCES
            || old_sentences < MIN_BUCKET_SENTENCES
            || old_seconds <= 0.0
        {
            continue;
        }
        let ratio = (seconds / sentences as f64) / (old_seconds / old_sentences as f64);
        if ratio > max_latency_ratio {
            return Some(format!(
                "CPU time per sentence {ratio:.2} times the previous version's in length bucket {bucket} \
                 (band {max_latency_ratio})"
            ));
        }
    }
    None
}

/// Watches every model after a promote: if the new live version's failure rate or CPU time per
/// length bucket stays outside its band against the previous version's for `hold`, moves `live`
/// back (compare-and-swap against the new version, once per fleet), records why, and swaps.
pub async fn watch_for_rollback(registry: Arc<Registry>, rollout: Arc<Rollout>) {
    // (model, version) → when its breach began; versions already rolled back.
    let mut breaching: BTreeMap<(String, String), std::time::Instant> = BTreeMap::new();
    let mut done: std::collections::BTreeSet<(String, String)> = Default::default();
    let mut tick = tokio::time::interval(std::time::Duration::from_millis(500));
    loop {
        tick.tick().await;
        let swaps = registry.swaps();
        for (name, served) in registry.serving() {
            let key = (name.clone(), served.version.clone());
            let settings = rollout.settings_for(&name);
            let hold = settings.rollback_hold;
            if done.contains(&key) || hold.is_zero() {
                continue;
            }
            // The version this one replaced, from the last successful swap to it.
            let Some(previous) = swaps
                .iter()
                .rev()
                .find(|e| e.ok && e.name == name && e.to == served.version)
                .and_then(|e| e.from.clone())
            else {
                continue;
            };
            let (new, old) = match HEALTH.lock() {
                Ok(health) => (
                    health.get(&key).cloned().unwrap_or_default(),
                    health
                        .get(&(name.clone(), previous.clone()))
                        .cloned()
                        .unwrap_or_default(),
                ),
                Err(_) => continue,
            };
            let Some(reason) = breach(&new, &old, settings.max_latency_ratio) else {
                breaching.remove(&key);
                continue;
            };
            let since = *breaching
                .entry(key.clone())
                .or_insert_with(std::time::Instant::now);
            if since.elapsed() < hold {
                continue;
            }
            done.insert(key.clone());
            let reason = format!(
                "automatic rollback: {reason}, for {:.0} s",
                since.elapsed().as_secs_f64()
            );
            let evidence = serde_json::json!({"new": new, "previous": old,
                "hold_seconds": hold.as_secs_f64(), "max_latency_ratio": settings.max_latency_ratio});
            let decision = Decision {
                actor: format!("replica:{}", settings.replica),
                reason: reason.clone(),
                evidence,
            };
            match registry
                .store()
                .decide_move(
                    &name,
                    "live",
                    &served.version,
                    &previous,
                    Action::Rollback,
                    decision,
                )
                .await
            {
                Ok(Decided::Moved(_)) => {
                    tracing::warn!(model = %name, from = %served.version, to = %previous, %reason, "rolled back");
                    metrics::record_rollout_decision(&name, "rolled-back");
                    let _ = registry.load_and_swap(&name, &previous).await;
                }
                Ok(Decided::AlreadyThere) => {
                    let _ = registry.load_and_swap(&name, &previous).await;
                }
                Ok(Decided::Stale { .. }) => {}
                Err(e) => {
                    tracing::warn!(model = %name, error = %e, "automatic rollback failed; will retry");
                    done.remove(&key);
                }
            }
        }
    }
}
