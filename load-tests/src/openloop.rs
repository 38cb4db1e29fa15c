//! The open-loop runner: requests leave on a fixed schedule at the target rate whatever the
//! server does, and each latency is measured from the request's *scheduled* send time, so
//! queueing (in the client or the server) shows up in the numbers instead of slowing the load
//! down (the coordinated-omission trap of closed-loop generators). Bounded by duration, request
//! count and the number of requests outstanding at once.

use std::collections::BTreeMap;
use std::sync::{Arc, Mutex, OnceLock};
use std::time::{Duration, Instant};

use bytes::Bytes;
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
    /// How the machine's CPU time went during the run (Linux), all processes together.
    #[serde(default)]
    pub cpu: Option<CpuShares>,
}

/// Shares of the machine's CPU time over a run, in percent, from `/proc/stat`. `steal` is time
/// a virtual CPU was ready to run but the hypervisor ran something else: on a virtual machine
/// it delays every wake-up in the request path, and nothing inside the machine controls it.
#[derive(Debug, Clone, Copy, Serialize, serde::Deserialize, Default, PartialEq)]
pub struct CpuShares {
    pub busy: f64,
    pub idle: f64,
    pub steal: f64,
}

/// The machine-wide CPU time counters (user, nice, system, idle, iowait, irq, softirq, steal),
/// in clock ticks.
fn cpu_counters() -> Option<[u64; 8]> {
    let stat = std::fs::read_to_string("/proc/stat").ok()?;
    parse_cpu_line(stat.lines().next()?)
}

fn parse_cpu_line(line: &str) -> Option<[u64; 8]> {
    let mut fields = line.strip_prefix("cpu ")?.split_whitespace();
    let mut out = [0u64; 8];
    for slot in &mut out {
        *slot = fields.next()?.parse().ok()?;
    }
    Some(out)
}

/// The shares between two readings of `cpu_counters`.
fn cpu_shares(before: Option<[u64; 8]>, after: Option<[u64; 8]>) -> Option<CpuShares> {
    let (before, after) = (before?, after?);
    let d: Vec<f64> = before
        .iter()
        .zip(&after)
        .map(|(b, a)| a.saturating_sub(*b) as f64)
        .collect();
    let total: f64 = d.iter().sum();
    (total > 0.0).then(|| CpuShares {
        busy: 100.0 * (d[0] + d[1] + d[2] + d[5] + d[6]) / total,
        idle: 100.0 * (d[3] + d[4]) / total,
        steal: 100.0 * d[7] / total,
    })
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

    /// One answered request of `sentences` sentences, the longest `longest` tokens long: `lag`
    /// from its scheduled to its actual send (none without a schedule), `micros` from its
    /// scheduled (or actual) send to its answer.
    fn record(
        &mut self,
        (sentences, longest): (usize, usize),
        lag: Option<u64>,
        micros: u64,
        outcome: Outcome,
    ) {
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
                self.result.sentences_per_second += sentences as f64;
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

/// The requests of a run: `batch` consecutive sentences of the workload from a start position,
/// wrapping around. Workloads cycle, so the same requests recur: each distinct one is encoded at
/// most once (for the calls that can be sent pre-encoded), keeping the generator's own CPU use
/// — taken from the server it shares the machine with — low.
struct Requests {
    sentences: Arc<[Sentence]>,
    batch: usize,
    encoded: Vec<OnceLock<Option<Bytes>>>,
}

impl Requests {
    fn new(sentences: &[Sentence], batch: usize) -> Arc<Requests> {
        Arc::new(Requests {
            sentences: sentences.into(),
            batch: batch.max(1),
            encoded: (0..sentences.len()).map(|_| OnceLock::new()).collect(),
        })
    }

    /// The sentences of the request starting at position `start` (any value: it wraps).
    fn members(&self, start: usize) -> impl Iterator<Item = &Sentence> {
        (0..self.batch).map(move |i| &self.sentences[(start + i) % self.sentences.len()])
    }

    /// (sentences, tokens in the longest) of the request at `start`.
    fn shape(&self, start: usize) -> (usize, usize) {
        let longest = self.members(start).map(Vec::len).max().unwrap_or(1);
        (self.batch, longest)
    }

    async fn send(&self, client: &Client, start: usize) -> Outcome {
        let owned = || self.members(start).cloned().collect::<Vec<_>>();
        let slot = &self.encoded[start % self.sentences.len()];
        match slot.get_or_init(|| client.encode(&owned())) {
            Some(body) => client.send_encoded(body.clone(), self.batch).await,
            None => client.send(&owned()).await,
        }
    }
}

fn no_sentences(rate: f64) -> RunResult {
    RunResult {
        offered_rate: rate,
        first_errors: vec!["the workload has no sentences".to_string()],
        ..RunResult::default()
    }
}

/// Microseconds since `instant`, within the histograms' bounds.
fn micros_since(instant: Instant) -> u64 {
    instant.elapsed().as_micros().clamp(1, 600_000_000) as u64
}

/// Runs the plan against `client`, cycling through `sentences`.
pub async fn run(client: &Client, sentences: &[Sentence], plan: &Plan) -> RunResult {
    if sentences.is_empty() {
        return no_sentences(plan.rate);
    }
    let requests = Requests::new(sentences, plan.batch);
    let counters = cpu_counters();
    let tally = Arc::new(Mutex::new(Tally::new()));
    let outstanding = Arc::new(tokio::sync::Semaphore::new(plan.max_outstanding));
    let interval = Duration::from_secs_f64(1.0 / plan.rate.max(0.001));
    let started = Instant::now();
    // The schedule is kept by a thread of its own sleeping on the OS clock with no timer slack
    // (typically tens of microseconds late; `wake_probe` measures the machine's tail), not by
    // the async runtime's timer, whose 1 ms ticks would make every request up to a millisecond
    // late — lateness that the latency, measured from the scheduled time, would then charge to
    // the server.
    let (ticks, mut due) = tokio::sync::mpsc::unbounded_channel::<Instant>();
    let (duration, max_ticks) = (plan.duration, plan.max_requests);
    let pacer = std::thread::Builder::new()
        .name("load-pacer".into())
        .spawn(move || {
            precise_timers();
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
        let start = index;
        index += plan.batch;
        sent += 1;
        let (client, tally, requests) = (client.clone(), tally.clone(), requests.clone());
        tasks.push(tokio::spawn(async move {
            let lag = micros_since(scheduled);
            let outcome = requests.send(&client, start).await;
            let micros = micros_since(scheduled);
            tally.lock().expect("tally lock").record(
                requests.shape(start),
                Some(lag),
                micros,
                outcome,
            );
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
    result.cpu = cpu_shares(counters, cpu_counters());
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
    if sentences.is_empty() {
        return no_sentences(0.0);
    }
    let requests = Requests::new(sentences, batch);
    let counters = cpu_counters();
    let tally = Arc::new(Mutex::new(Tally::new()));
    let issued = Arc::new(std::sync::atomic::AtomicUsize::new(0));
    let started = Instant::now();
    let mut tasks = Vec::new();
    for worker in 0..concurrency.max(1) {
        let (client, tally, issued, requests) = (
            client.clone(),
            tally.clone(),
            issued.clone(),
            requests.clone(),
        );
        tasks.push(tokio::spawn(async move {
            let mut index = worker * batch;
            while started.elapsed() < duration
                && issued.fetch_add(1, std::sync::atomic::Ordering::Relaxed) < max_requests
            {
                let start = index;
                index += batch * concurrency;
                let sent_at = Instant::now();
                let outcome = requests.send(&client, start).await;
                let micros = micros_since(sent_at);
                tally.lock().expect("tally lock").record(
                    requests.shape(start),
                    None,
                    micros,
                    outcome,
                );
            }
        }));
    }
    for task in tasks {
        let _ = task.await;
    }
    let seconds = started.elapsed().as_secs_f64();
    let t = tally.lock().expect("tally lock");
    // Every request sent was awaited, so each has exactly one outcome.
    let mut result = t.finish(seconds, t.result.ok + t.result.shed + t.result.errors);
    result.cpu = cpu_shares(counters, cpu_counters());
    result
}

/// Asks the kernel to wake this thread on time: by default Linux may defer a sleeping
/// thread's wake-up by up to 50 µs (its timer slack) to batch timers, which for the pacing
/// thread would make every send that much late — lateness the latency would charge to the
/// server. Elsewhere a no-op.
fn precise_timers() {
    #[cfg(target_os = "linux")]
    {
        // SAFETY: PR_SET_TIMERSLACK takes an integer argument and changes only this thread's
        // timer slack; no memory is passed to the kernel.
        #[allow(unsafe_code)] // one prctl call with plain integer arguments
        let _ = unsafe { libc::prctl(libc::PR_SET_TIMERSLACK, 1 as libc::c_ulong, 0, 0, 0) };
    }
}

/// How late a thread wakes on this machine: a thread sleeps until each next millisecond for
/// `duration` (at most 60,000 wake-ups) and records how late it woke. Run with nothing else
/// running, this is the floor under every hop of a request's path (generator → network thread →
/// parsing thread → network thread → generator are each such a wake-up): on a virtual machine
/// it includes the hypervisor's delay in running a halted virtual CPU again.
pub fn wake_probe(duration: Duration) -> Latency {
    precise_timers();
    let mut lateness = histogram();
    let started = Instant::now();
    let mut next = started;
    for _ in 0..60_000 {
        next += Duration::from_millis(1);
        if next.duration_since(started) > duration {
            break;
        }
        let now = Instant::now();
        if next > now {
            std::thread::sleep(next - now);
        }
        let _ = lateness.record(micros_since(next));
    }
    Latency::from(&lateness)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cpu_shares_come_from_the_differences_of_two_readings() {
        // Format of /proc/stat's first line (proc(5)): user nice system idle iowait irq softirq
        // steal guest guest_nice, in clock ticks.
        let before = parse_cpu_line("cpu  100 0 50 800 10 0 5 20 0 0");
        let after = parse_cpu_line("cpu  160 0 70 900 10 0 10 45 0 0");
        let shares = cpu_shares(before, after).expect("shares");
        // Differences: busy 60+20+5 = 85, idle 100, steal 25, of 210 ticks.
        assert!((shares.busy - 100.0 * 85.0 / 210.0).abs() < 1e-9);
        assert!((shares.idle - 100.0 * 100.0 / 210.0).abs() < 1e-9);
        assert!((shares.steal - 100.0 * 25.0 / 210.0).abs() < 1e-9);
        assert_eq!(parse_cpu_line("cpu0 1 2 3 4 5 6 7 8"), None);
        assert_eq!(parse_cpu_line("cpu  1 2 3"), None);
        assert_eq!(cpu_shares(before, before), None);
    }

    #[test]
    fn the_wake_probe_counts_one_wake_up_per_millisecond() {
        let probe = wake_probe(Duration::from_millis(50));
        // 50 deadlines at 1..=50 ms; lateness is at least the histogram's 1 µs floor.
        assert_eq!(probe.count, 50);
        assert!(probe.p50_ms > 0.0 && probe.p50_ms <= probe.p99_ms && probe.p99_ms <= probe.max_ms);
    }
}
