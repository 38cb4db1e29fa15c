//! The open-loop runner: requests leave on a fixed schedule at the target rate whatever the
//! server does, and each latency is measured from the request's *scheduled* send time, so
//! queueing (in the client or the server) shows up in the numbers instead of slowing the load
//! down (the coordinated-omission trap of closed-loop generators). Bounded by duration, request
//! count and the number of requests outstanding at once.

use std::collections::BTreeMap;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use hdrhistogram::Histogram;
use serde::Serialize;

use crate::client::{Client, Outcome};
use crate::workload::{Sentence, bucket};

#[derive(Debug, Clone)]
pub struct Plan {
    pub rate: f64,
    pub duration: Duration,
    pub max_requests: usize,
    pub max_outstanding: usize,
    /// Sentences per request (1 for unary calls).
    pub batch: usize,
}

/// Latency summary in milliseconds.
#[derive(Debug, Clone, Serialize, serde::Deserialize, Default)]
pub struct Latency {
    pub count: u64,
    pub p50_ms: f64,
    pub p90_ms: f64,
    pub p99_ms: f64,
    pub max_ms: f64,
}

impl Latency {
    fn from(h: &Histogram<u64>) -> Latency {
        let ms = |v: u64| v as f64 / 1000.0;
        Latency {
            count: h.len(),
            p50_ms: ms(h.value_at_quantile(0.5)),
            p90_ms: ms(h.value_at_quantile(0.9)),
            p99_ms: ms(h.value_at_quantile(0.99)),
            max_ms: ms(h.max()),
        }
    }
}

/// What one run measured.
#[derive(Debug, Clone, Serialize, serde::Deserialize, Default)]
pub struct RunResult {
    pub offered_rate: f64,
    pub seconds: f64,
    pub sent: u64,
    pub ok: u64,
    pub shed: u64,
    pub errors: u64,
    /// Scheduled sends skipped because `max_outstanding` requests were already open.
    pub client_overloaded: u64,
    pub sentences_per_second: f64,
    pub latency: Latency,
    /// Latency of accepted (non-shed) requests by power-of-two length bucket of the longest
    /// sentence in the request.
    pub by_bucket: BTreeMap<usize, Latency>,
    /// How late the generator itself was: from each request's scheduled time to the moment its
    /// task began sending. It is part of every latency above; reported so that the generator's
    /// own delays (it shares the machine) can be told apart from the server's.
    #[serde(default)]
    pub send_lag: Latency,
    pub versions: BTreeMap<String, u64>,
    pub first_errors: Vec<String>,
}

struct Tally {
    all: Histogram<u64>,
    lag: Histogram<u64>,
    buckets: BTreeMap<usize, Histogram<u64>>,
    result: RunResult,
}

fn histogram() -> Histogram<u64> {
    Histogram::new_with_bounds(1, 600_000_000, 3).expect("valid histogram bounds")
}

impl Tally {
    fn new() -> Tally {
        Tally {
            all: histogram(),
            lag: histogram(),
            buckets: BTreeMap::new(),
            result: RunResult::default(),
        }
    }

    /// One answered request: `lag` from its scheduled to its actual send (none without a
    /// schedule), `micros` from its scheduled (or actual) send to its answer.
    fn record(&mut self, request: &[Sentence], lag: Option<u64>, micros: u64, outcome: Outcome) {
        let longest = request.iter().map(Vec::len).max().unwrap_or(1);
        if let Some(lag) = lag {
            let _ = self.lag.record(lag);
        }
        match outcome {
            Outcome::Ok(version) => {
                self.result.ok += 1;
                *self.result.versions.entry(version).or_default() += 1;
                let _ = self.all.record(micros);
                let _ = self
                    .buckets
                    .entry(bucket(longest))
                    .or_insert_with(histogram)
                    .record(micros);
                self.result.sentences_per_second += request.len() as f64;
            }
            Outcome::Shed => self.result.shed += 1,
            Outcome::Error(message) => {
                self.result.errors += 1;
                if self.result.first_errors.len() < 5 {
                    self.result.first_errors.push(message);
                }
            }
        }
    }

    /// The run's summary; `sentences_per_second` so far holds the count of sentences parsed.
    fn finish(&self, seconds: f64, sent: u64) -> RunResult {
        let mut result = self.result.clone();
        result.seconds = seconds;
        result.sent = sent;
        result.sentences_per_second /= seconds.max(1e-9);
        result.latency = Latency::from(&self.all);
        result.send_lag = Latency::from(&self.lag);
        result.by_bucket = self
            .buckets
            .iter()
            .map(|(b, h)| (*b, Latency::from(h)))
            .collect();
        result
    }
}

/// Microseconds since `instant`, within the histograms' bounds.
fn micros_since(instant: Instant) -> u64 {
    instant.elapsed().as_micros().clamp(1, 600_000_000) as u64
}

/// Runs the plan against `client`, cycling through `sentences`.
pub async fn run(client: &Client, sentences: &[Sentence], plan: &Plan) -> RunResult {
    let tally = Arc::new(Mutex::new(Tally::new()));
    let outstanding = Arc::new(tokio::sync::Semaphore::new(plan.max_outstanding));
    let interval = Duration::from_secs_f64(1.0 / plan.rate.max(0.001));
    let started = Instant::now();
    // The schedule is kept by a thread of its own sleeping on the OS clock (tens of
    // microseconds late at most), not by the async runtime's timer, whose 1 ms ticks would make
    // every request up to a millisecond late — lateness that the latency, measured from the
    // scheduled time, would then charge to the server.
    let (ticks, mut due) = tokio::sync::mpsc::unbounded_channel::<Instant>();
    let (duration, max_ticks) = (plan.duration, plan.max_requests);
    let pacer = std::thread::Builder::new()
        .name("load-pacer".into())
        .spawn(move || {
            let mut next = started;
            let mut count = 0usize;
            while next.duration_since(started) < duration && count < max_ticks {
                let now = Instant::now();
                if next > now {
                    std::thread::sleep(next - now);
                }
                if ticks.send(next).is_err() {
                    break;
                }
                count += 1;
                next += interval;
            }
        });
    if pacer.is_err() {
        return RunResult {
            offered_rate: plan.rate,
            first_errors: vec!["could not start the pacing thread".to_string()],
            ..RunResult::default()
        };
    }
    let mut tasks = Vec::new();
    let mut index = 0usize;
    let mut sent = 0u64;
    let mut skipped = 0u64;
    while let Some(scheduled) = due.recv().await {
        let Ok(permit) = outstanding.clone().try_acquire_owned() else {
            skipped += 1;
            continue;
        };
        let request: Vec<Sentence> = (0..plan.batch)
            .map(|i| sentences[(index + i) % sentences.len()].clone())
            .collect();
        index += plan.batch;
        sent += 1;
        let (client, tally) = (client.clone(), tally.clone());
        tasks.push(tokio::spawn(async move {
            let lag = micros_since(scheduled);
            let outcome = client.send(&request).await;
            let micros = micros_since(scheduled);
            tally
                .lock()
                .expect("tally lock")
                .record(&request, Some(lag), micros, outcome);
            drop(permit);
        }));
    }
    for task in tasks {
        let _ = task.await;
    }
    let seconds = started.elapsed().as_secs_f64();
    let mut result = tally.lock().expect("tally lock").finish(seconds, sent);
    result.offered_rate = plan.rate;
    result.client_overloaded = skipped;
    result
}

/// The closed-loop counterpart, for capacity: `concurrency` requests of `batch` sentences are
/// kept open at all times (each answer sends the next), for `duration` or `max_requests`
/// requests. The completion rate is the service's throughput when it is never idle and never
/// overloaded — what an offline client with a fixed number of connections gets. Latency here is
/// from each request's actual send (there is no schedule); `offered_rate` is 0.
pub async fn saturate(
    client: &Client,
    sentences: &[Sentence],
    batch: usize,
    concurrency: usize,
    duration: Duration,
    max_requests: usize,
) -> RunResult {
    let tally = Arc::new(Mutex::new(Tally::new()));
    let issued = Arc::new(std::sync::atomic::AtomicUsize::new(0));
    let sentences: Arc<[Sentence]> = sentences.into();
    let started = Instant::now();
    let mut tasks = Vec::new();
    for worker in 0..concurrency.max(1) {
        let (client, tally, issued, sentences) = (
            client.clone(),
            tally.clone(),
            issued.clone(),
            sentences.clone(),
        );
        tasks.push(tokio::spawn(async move {
            let mut index = worker * batch;
            while started.elapsed() < duration
                && issued.fetch_add(1, std::sync::atomic::Ordering::Relaxed) < max_requests
            {
                let request: Vec<Sentence> = (0..batch)
                    .map(|i| sentences[(index + i) % sentences.len()].clone())
                    .collect();
                index += batch * concurrency;
                let sent_at = Instant::now();
                let outcome = client.send(&request).await;
                let micros = micros_since(sent_at);
                tally
                    .lock()
                    .expect("tally lock")
                    .record(&request, None, micros, outcome);
            }
        }));
    }
    for task in tasks {
        let _ = task.await;
    }
    let seconds = started.elapsed().as_secs_f64();
    let t = tally.lock().expect("tally lock");
    // Every request sent was awaited, so each has exactly one outcome.
    t.finish(seconds, t.result.ok + t.result.shed + t.result.errors)
}
