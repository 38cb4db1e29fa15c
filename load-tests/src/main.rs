//! `arcwright-load`: open-loop load generator and performance report for `arcwright serve`.
//!
//! - `arcwright-load run …`: one open-loop run (one API, one rate) printed as JSON;
//! - `arcwright-load suite …`: the scenarios — steady rate per API, latency by length, step-up
//!   to the knee, hot swap under load, shedding at twice the knee, a bounded soak — written as
//!   `results.json`, `REPORT.md` and SVG plots;
//! - `arcwright-load report --input results.json --out DIR`: regenerate the Markdown and plots.
//!
//! Every loop is bounded in time and request count; targets default to loopback.

mod client;
mod openloop;
mod report;
mod workload;

use std::path::PathBuf;
use std::time::Duration;

use clap::{Args, Parser, Subcommand};

use client::{Api, Client};
use openloop::Plan;
use workload::Sentence;

/// Requests the server counts for `sent` generator requests: one per message of a stream.
fn server_requests_for(api: Api, batch: usize, sent: u64) -> u64 {
    if api == Api::GrpcStream {
        sent * batch as u64
    } else {
        sent
    }
}

/// One step-up scenario: an API, its workload and the rates to climb.
struct Ladder<'a> {
    api: Api,
    name: String,
    /// Sentences per request.
    batch: usize,
    rates: Vec<f64>,
    sentences: &'a [Sentence],
    /// The model to ask for (the server's default when `None`).
    model: Option<String>,
}

#[derive(Debug, Parser)]
#[command(
    name = "arcwright-load",
    about = "Open-loop load tests for the arcwright service"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Args, Clone)]
struct Target {
    #[arg(long, default_value = "http://127.0.0.1:8080")]
    http: String,
    #[arg(long, default_value = "127.0.0.1:50051")]
    grpc: String,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// One open-loop run.
    Run {
        #[command(flatten)]
        target: Target,
        #[arg(long, value_enum, default_value = "grpc-parse")]
        api: Api,
        #[arg(long, default_value_t = 50.0)]
        rate: f64,
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
        #[arg(long, default_value_t = 100_000)]
        max_requests: usize,
        /// Words per demo sentence (default: the long-tailed mix).
        #[arg(long)]
        words: Option<usize>,
        /// Sentences from a CoNLL-U file instead of demo sentences.
        #[arg(long)]
        conllu: Option<String>,
        #[arg(long, default_value_t = 1)]
        batch: usize,
        #[arg(long)]
        decoder: Option<String>,
        #[arg(long)]
        confidence: bool,
        /// Closed loop instead: keep this many requests open at all times and report the
        /// completion rate (capacity); --rate is then ignored.
        #[arg(long)]
        closed: Option<usize>,
    },
    /// All scenarios; writes results.json, REPORT.md and plots to --out.
    Suite {
        #[command(flatten)]
        target: Target,
        #[arg(long)]
        out: PathBuf,
        /// Short durations (seconds per scenario) for smoke runs.
        #[arg(long)]
        quick: bool,
        /// p99 budget for the knee, in milliseconds.
        #[arg(long, default_value_t = 50.0)]
        budget_ms: f64,
        /// Admin token and versions to activate in turn during the swap scenario.
        #[arg(long)]
        admin_token: Option<String>,
        #[arg(long)]
        model: Option<String>,
        #[arg(long, value_delimiter = ',')]
        swap_versions: Vec<String>,
        /// Server process id, for resident-memory readings.
        #[arg(long)]
        server_pid: Option<u32>,
        /// Also run the steady scenario on the sentences of this CoNLL-U file (e.g. the Turkish
        /// test split, with a Turkish model served as --conllu-model).
        #[arg(long)]
        conllu: Option<String>,
        #[arg(long)]
        conllu_model: Option<String>,
        /// Model directory of the served default model: measures in-process parse throughput on
        /// the same sentences (all cores), for the batch-throughput ratio.
        #[arg(long)]
        model_dir: Option<PathBuf>,
        /// Description of the machine for the report.
        #[arg(
            long,
            default_value = "2 cores; generator and server on the same machine"
        )]
        machine: String,
    },
    /// In-process parse throughput on every core (no server): the ceiling for batch capacity.
    Local {
        /// Model directory.
        #[arg(long)]
        model_dir: PathBuf,
        #[arg(long, default_value_t = 25)]
        words: usize,
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
    },
    /// How late a sleeping thread wakes on this machine (run it with nothing else running):
    /// the floor under every hop of a request's latency.
    Probe {
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
    },
    /// Regenerate REPORT.md and the plots from a results.json.
    Report {
        #[arg(long)]
        input: PathBuf,
        #[arg(long)]
        out: PathBuf,
    },
}

fn rss_kib(pid: u32) -> Option<u64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    status
        .lines()
        .find(|l| l.starts_with("VmRSS:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

/// The server's total stage time (p50, p99, in ms) for sentences in the length bucket of
/// `words`, from `/v1/scaling` (the bucket's recent window, any decoder: the fullest).
async fn server_compute_ms(http: &str, words: usize) -> Option<(f64, f64)> {
    let scaling: serde_json::Value = reqwest::get(format!("{http}/v1/scaling"))
        .await
        .ok()?
        .json()
        .await
        .ok()?;
    let bucket = words.next_power_of_two().to_string();
    scaling["buckets"]
        .as_array()?
        .iter()
        .filter(|b| b["stage"] == "total" && b["length_bucket"] == bucket.as_str())
        .max_by_key(|b| b["count"].as_u64().unwrap_or(0))
        .and_then(|b| {
            Some((
                b["p50_seconds"].as_f64()? * 1e3,
                b["p99_seconds"].as_f64()? * 1e3,
            ))
        })
}

/// The cumulative bucket counts of one histogram series in a Prometheus text exposition:
/// `name` with exactly the labels `labels` (besides `le`), as (upper bound, count) pairs.
fn histogram_buckets(text: &str, name: &str, labels: &[(&str, &str)]) -> Vec<(f64, f64)> {
    let prefix = format!("{name}_bucket{{");
    let mut out = Vec::new();
    for line in text.lines().filter(|l| l.starts_with(&prefix)) {
        let Some((inside, value)) = line[prefix.len()..].split_once("} ") else {
            continue;
        };
        let mut le = None;
        let mut others = Vec::new();
        for (key, quoted) in inside.split(',').filter_map(|pair| pair.split_once('=')) {
            let value = quoted.trim_matches('"');
            if key == "le" {
                le = Some(if value == "+Inf" {
                    f64::INFINITY
                } else {
                    value.parse().unwrap_or(f64::NAN)
                });
            } else {
                others.push((key, value));
            }
        }
        let same_series = others.len() == labels.len() && labels.iter().all(|l| others.contains(l));
        if let (Some(le), Ok(count), true) = (le, value.trim().parse::<f64>(), same_series) {
            out.push((le, count));
        }
    }
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    out
}

/// The `q` quantile (in ms) of the observations between two readings of the same histogram
/// series, interpolating linearly within a bucket as Prometheus's `histogram_quantile` does.
fn quantile_between(before: &[(f64, f64)], after: &[(f64, f64)], q: f64) -> Option<f64> {
    let delta: Vec<(f64, f64)> = after
        .iter()
        .map(|&(le, count)| {
            let earlier = before
                .iter()
                .find(|(l, _)| *l == le)
                .map_or(0.0, |(_, c)| *c);
            (le, count - earlier)
        })
        .collect();
    let total = delta.last()?.1;
    if total <= 0.0 {
        return None;
    }
    let rank = q * total;
    let (mut lower, mut below) = (0.0, 0.0);
    for &(le, count) in &delta {
        if count >= rank {
            if le.is_infinite() {
                return Some(lower * 1e3);
            }
            let share = (rank - below) / (count - below).max(1e-9);
            return Some((lower + (le - lower) * share) * 1e3);
        }
        (lower, below) = (le, count);
    }
    None
}

/// The server's own view of a run from its /metrics before and after: p50 and p99 (ms) of the
/// gRPC Parse request duration and of the wait for a parsing thread.
fn server_view(before: &str, after: &str) -> Option<report::ServerView> {
    let request = |text| {
        histogram_buckets(
            text,
            "arcwright_request_duration_seconds",
            &[("api", "grpc"), ("method", "parse")],
        )
    };
    let wait = |text| histogram_buckets(text, "arcwright_queue_wait_seconds", &[]);
    let (r0, r1, w0, w1) = (request(before), request(after), wait(before), wait(after));
    Some(report::ServerView {
        request_p50_ms: quantile_between(&r0, &r1, 0.5)?,
        request_p99_ms: quantile_between(&r0, &r1, 0.99)?,
        queue_wait_p50_ms: quantile_between(&w0, &w1, 0.5)?,
        queue_wait_p99_ms: quantile_between(&w0, &w1, 0.99)?,
    })
}

async fn metrics_text(http: &str) -> Option<String> {
    reqwest::get(format!("{http}/metrics"))
        .await
        .ok()?
        .text()
        .await
        .ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_come_from_the_difference_of_two_histogram_readings() {
        let before = "# TYPE x histogram\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.001\"} 10\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.002\"} 10\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"+Inf\"} 10\n\
            x_bucket{api=\"http\",method=\"Parse\",le=\"0.001\"} 99\n";
        let after = "x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.001\"} 60\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"0.002\"} 110\n\
            x_bucket{api=\"grpc\",method=\"Parse\",le=\"+Inf\"} 110\n";
        let labels = [("api", "grpc"), ("method", "Parse")];
        let b = histogram_buckets(before, "x", &labels);
        let a = histogram_buckets(after, "x", &labels);
        assert_eq!(b, vec![(0.001, 10.0), (0.002, 10.0), (f64::INFINITY, 10.0)]);
        // 100 new observations: 50 at or below 1 ms, 50 in (1, 2] ms. The median is the top
        // of the first bucket; the 99th percentile 49/50 of the way through the second.
        let p50 = quantile_between(&b, &a, 0.5).expect("p50");
        let p99 = quantile_between(&b, &a, 0.99).expect("p99");
        assert!((p50 - 1.0).abs() < 1e-9, "{p50}");
        assert!((p99 - 1.98).abs() < 1e-9, "{p99}");
        assert_eq!(quantile_between(&b, &b, 0.5), None);
        assert!(histogram_buckets(before, "x", &[("api", "grpc")]).is_empty());
    }
}

/// Sum of `arcwright_requests_total` per api from the server's /metrics.
async fn server_requests(http: &str) -> anyhow::Result<std::collections::BTreeMap<String, f64>> {
    let text = metrics_text(http)
        .await
        .ok_or_else(|| anyhow::anyhow!("could not read {http}/metrics"))?;
    let mut out = std::collections::BTreeMap::new();
    for line in text
        .lines()
        .filter(|l| l.starts_with("arcwright_requests_total{"))
    {
        let api = line
            .split("api=\"")
            .nth(1)
            .and_then(|r| r.split('"').next())
            .unwrap_or("?")
            .to_string();
        let value: f64 = line
            .rsplit(' ')
            .next()
            .and_then(|v| v.parse().ok())
            .unwrap_or(0.0);
        *out.entry(api).or_default() += value;
    }
    Ok(out)
}

/// Sentences per second parsing `sentences` in a loop on every core for `span`, with nothing
/// else running: the ceiling the server's batch capacity is compared with. Long enough (seconds,
/// not a burst) to be the sustained rate, not a short burst at boost clock.
fn in_process_rate(
    model: &arcwright_parser::model::Model,
    sentences: &[Sentence],
    span: Duration,
) -> f64 {
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    let parsed = std::sync::atomic::AtomicUsize::new(0);
    let started = std::time::Instant::now();
    std::thread::scope(|scope| {
        for t in 0..threads {
            let parsed = &parsed;
            scope.spawn(move || {
                let mut i = 0;
                while started.elapsed() < span && i < 1_000_000 {
                    std::hint::black_box(model.parse(
                        &sentences[(i + t) % sentences.len()],
                        None,
                        None,
                        None,
                    ));
                    i += 1;
                }
                parsed.fetch_add(i, std::sync::atomic::Ordering::Relaxed);
            });
        }
    });
    parsed.into_inner() as f64 / started.elapsed().as_secs_f64()
}

/// The same allocator as the service, so that the in-process figure compares like with like.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

#[tokio::main(flavor = "multi_thread", worker_threads = 2)]
async fn main() -> anyhow::Result<()> {
    match Cli::parse().command {
        Command::Run {
            target,
            api,
            rate,
            seconds,
            max_requests,
            words,
            conllu,
            batch,
            decoder,
            confidence,
            closed,
        } => {
            let sentences = match (conllu, words) {
                (Some(path), _) => workload::conllu_file(&path)?,
                (None, Some(w)) => workload::demo_fixed(w, 200, 1),
                (None, None) => workload::demo_mix(500, 1, 120),
            };
            let client =
                Client::connect(api, &target.http, &target.grpc, decoder, confidence).await?;
            let plan = Plan {
                rate,
                duration: Duration::from_secs_f64(seconds),
                max_requests,
                max_outstanding: 512,
                batch: batch.max(1),
            };
            let result = match closed {
                Some(concurrency) => {
                    openloop::saturate(
                        &client,
                        &sentences,
                        plan.batch,
                        concurrency,
                        plan.duration,
                        max_requests,
                    )
                    .await
                }
                None => openloop::run(&client, &sentences, &plan).await,
            };
            println!("{}", serde_json::to_string_pretty(&result)?);
        }
        Command::Local {
            model_dir,
            words,
            seconds,
        } => {
            let model = arcwright_parser::model::Model::load(&model_dir)?;
            let sentences = workload::demo_fixed(words, 200, 3);
            let rate = in_process_rate(&model, &sentences, Duration::from_secs_f64(seconds));
            println!("{}", serde_json::json!({ "sentences_per_second": rate }));
        }
        Command::Probe { seconds } => {
            let span = Duration::from_secs_f64(seconds.clamp(0.0, 60.0));
            let lateness = tokio::task::spawn_blocking(move || openloop::wake_probe(span)).await?;
            println!("{}", serde_json::to_string_pretty(&lateness)?);
        }
        Command::Report { input, out } => {
            let suite: report::Suite = serde_json::from_str(&std::fs::read_to_string(&input)?)?;
            report::write_all(&suite, &out)?;
            println!("wrote {}", out.join("REPORT.md").display());
        }
        Command::Suite {
            target,
            out,
            quick,
            budget_ms,
            admin_token,
            model,
            swap_versions,
            server_pid,
            conllu,
            conllu_model,
            model_dir,
            machine,
        } => {
            let seconds = if quick { 1.5 } else { 10.0 };
            let plan = |rate: f64, secs: f64, batch: usize| Plan {
                rate,
                duration: Duration::from_secs_f64(secs),
                max_requests: 200_000,
                max_outstanding: 256,
                batch,
            };
            let mut suite = report::Suite {
                machine,
                budget_ms,
                ..Default::default()
            };
            let before = server_requests(&target.http).await.unwrap_or_default();
            let mut generated = 0u64;
            let medium = workload::demo_fixed(25, 200, 3);
            if let Some(pid) = server_pid.and_then(rss_kib) {
                suite.rss_kib.insert("start".into(), pid);
            }
            // Steady rate on every API.
            for (api, name, rate, batch) in [
                (Api::GrpcParse, "grpc-parse", 100.0, 1),
                (Api::HttpParse, "http-parse", 100.0, 1),
                (Api::GrpcBatch, "grpc-batch (32)", 10.0, 32),
                (Api::HttpBatch, "http-batch (32)", 10.0, 32),
                (Api::GrpcStream, "grpc-stream (8)", 20.0, 8),
            ] {
                let client = Client::connect(api, &target.http, &target.grpc, None, false).await?;
                let r = openloop::run(&client, &medium, &plan(rate, seconds, batch)).await;
                generated += server_requests_for(api, batch, r.sent);
                suite.steady.insert(name.to_string(), r);
            }
            // Latency by length, projective decoding; then the same lengths non-projective with
            // confidences (marginals) on.
            let lengths: &[usize] = if quick {
                &[10, 25, 50, 100]
            } else {
                &[10, 25, 50, 100, 200, 400]
            };
            for (decoder, confidence) in [("projective", false), ("non-projective", true)] {
                let grpc = Client::connect(
                    Api::GrpcParse,
                    &target.http,
                    &target.grpc,
                    Some(decoder.into()),
                    confidence,
                )
                .await?;
                for &words in lengths {
                    let rate = if words > 100 { 5.0 } else { 20.0 };
                    let r = openloop::run(
                        &grpc,
                        &workload::demo_fixed(words, 50, 9),
                        &plan(rate, seconds, 1),
                    )
                    .await;
                    generated += r.sent;
                    if confidence {
                        suite.lengths_non_projective_confidence.insert(words, r);
                    } else {
                        suite.lengths.insert(words, r);
                    }
                }
            }
            // The real test sentences, for a steady run and a step-up with their own model.
            let real = match &conllu {
                Some(path) => Some((
                    format!("grpc-parse, {}", path.rsplit('/').next().unwrap_or(path)),
                    workload::conllu_file(path)?,
                )),
                None => None,
            };
            if let Some((name, sentences)) = &real {
                let mut client =
                    Client::connect(Api::GrpcParse, &target.http, &target.grpc, None, false)
                        .await?;
                client.set_model(conllu_model.clone());
                let r = openloop::run(&client, sentences, &plan(50.0, seconds, 1)).await;
                generated += r.sent;
                suite.steady.insert(name.clone(), r);
            }
            suite.scaling = reqwest::get(format!("{}/v1/scaling", target.http))
                .await?
                .json()
                .await
                .unwrap_or_default();
            // Step-up until the p99 budget breaks (or shedding / errors / client saturation), for
            // unary gRPC (the reference knee), unary HTTP, gRPC and HTTP batches of 32, gRPC
            // streams of 8 and, given a CoNLL-U file, unary gRPC on its sentences.
            let full_rates = vec![
                100.0, 200.0, 400.0, 800.0, 1200.0, 1600.0, 2400.0, 3200.0, 4000.0,
            ];
            let ladders = [
                (
                    Api::GrpcParse,
                    "grpc-parse",
                    1,
                    if quick {
                        vec![50.0, 200.0, 800.0]
                    } else {
                        full_rates.clone()
                    },
                ),
                (
                    Api::HttpParse,
                    "http-parse",
                    1,
                    if quick {
                        vec![50.0, 200.0]
                    } else {
                        full_rates.clone()
                    },
                ),
                (
                    Api::GrpcBatch,
                    "grpc-batch (32)",
                    32,
                    if quick {
                        vec![5.0, 20.0]
                    } else {
                        vec![
                            10.0, 20.0, 40.0, 60.0, 80.0, 100.0, 120.0, 160.0, 200.0, 240.0, 280.0,
                            320.0,
                        ]
                    },
                ),
                (
                    Api::HttpBatch,
                    "http-batch (32)",
                    32,
                    if quick {
                        vec![5.0]
                    } else {
                        vec![
                            10.0, 20.0, 40.0, 60.0, 80.0, 100.0, 120.0, 160.0, 200.0, 240.0, 280.0,
                            320.0,
                        ]
                    },
                ),
                // Streams of 8 messages; a shed message is answered in the stream, so every
                // message is counted by the server and the accounting holds past the knee too.
                (
                    Api::GrpcStream,
                    "grpc-stream (8)",
                    8,
                    if quick {
                        vec![10.0, 40.0]
                    } else {
                        vec![
                            20.0, 40.0, 80.0, 160.0, 240.0, 320.0, 400.0, 480.0, 560.0, 640.0,
                        ]
                    },
                ),
            ];
            let mut ladders: Vec<Ladder> = ladders
                .into_iter()
                .map(|(api, name, batch, rates)| Ladder {
                    api,
                    name: name.to_string(),
                    batch,
                    rates,
                    sentences: &medium,
                    model: None,
                })
                .collect();
            // The real test sentences with their model: the knee a replica reaches on text of
            // the treebank's own length mix.
            if let Some((name, sentences)) = &real {
                ladders.push(Ladder {
                    api: Api::GrpcParse,
                    name: name.clone(),
                    batch: 1,
                    rates: if quick {
                        vec![50.0, 200.0]
                    } else {
                        [&full_rates[..], &[4800.0]].concat()
                    },
                    sentences,
                    model: conllu_model.clone(),
                });
            }
            for Ladder {
                api,
                name,
                batch,
                rates,
                sentences,
                model: ladder_model,
            } in ladders
            {
                let mut client =
                    Client::connect(api, &target.http, &target.grpc, None, false).await?;
                client.set_model(ladder_model);
                // The reference knee: unary gRPC on the 25-word demo sentences.
                let reference = name == "grpc-parse";
                // Up the ladder until a step fails; then (full runs) halve the gap between the
                // last good and the first failing rate twice, so the knee is known to within a
                // quarter of the last step rather than a whole step.
                let mut last_good: Option<f64> = None;
                let mut first_bad: Option<f64> = None;
                let mut queue: std::collections::VecDeque<f64> = rates.into_iter().collect();
                let mut refinements = if quick { 0 } else { 2 };
                let mut runs = Vec::new();
                while let Some(rate) = queue.pop_front() {
                    let r = openloop::run(&client, sentences, &plan(rate, seconds, batch)).await;
                    generated += server_requests_for(api, batch, r.sent);
                    let within = r.latency.p99_ms <= budget_ms * batch as f64
                        && r.errors == 0
                        && r.shed == 0
                        && r.client_overloaded == 0;
                    runs.push(r);
                    if within {
                        last_good = Some(last_good.map_or(rate, |g: f64| g.max(rate)));
                    } else {
                        first_bad = Some(first_bad.map_or(rate, |b: f64| b.min(rate)));
                        queue.clear(); // past the knee: no higher step
                    }
                    if let (true, Some(good), Some(bad)) =
                        (queue.is_empty() && refinements > 0, last_good, first_bad)
                    {
                        let middle = ((good + bad) / 2.0).round();
                        if middle > good && middle < bad {
                            refinements -= 1;
                            queue.push_back(middle);
                        }
                    }
                }
                runs.sort_by(|a, b| a.offered_rate.total_cmp(&b.offered_rate));
                if let Some(good) = last_good {
                    suite.knees.insert(name.clone(), good * batch as f64);
                    if reference {
                        suite.knee_rate = Some(good);
                    }
                }
                if reference {
                    suite.step_up.extend(runs);
                } else {
                    suite.step_up_other.entry(name).or_default().extend(runs);
                }
            }
            let grpc =
                Client::connect(Api::GrpcParse, &target.http, &target.grpc, None, false).await?;
            // Hot swap under load: activate each version in turn through the admin API.
            if let (Some(token), false) = (&admin_token, swap_versions.is_empty()) {
                let name = model.clone().unwrap_or_else(|| "demo".into());
                let rate = suite.knee_rate.unwrap_or(50.0) / 2.0;
                let swap_plan = plan(
                    rate,
                    seconds.max(1.0) * (swap_versions.len() as f64 + 1.0),
                    1,
                );
                let http = reqwest::Client::new();
                let (token, versions, base) =
                    (token.clone(), swap_versions.clone(), target.http.clone());
                let interval = swap_plan.duration / (versions.len() as u32 + 1);
                let swapper = tokio::spawn(async move {
                    let mut done = 0;
                    for version in versions {
                        tokio::time::sleep(interval).await;
                        let response = http
                            .post(format!("{base}/v1/models/{name}/activate"))
                            .bearer_auth(&token)
                            .json(&serde_json::json!({"version": version}))
                            .send()
                            .await;
                        if response.map(|r| r.status().is_success()).unwrap_or(false) {
                            done += 1;
                        }
                    }
                    done
                });
                let r = openloop::run(&grpc, &medium, &swap_plan).await;
                generated += r.sent;
                suite.swaps_done = swapper.await.unwrap_or(0);
                suite.swap = Some(r);
            }
            // Half the knee: p99 should stay within 3× p50. The server's own compute time for
            // the same sentences comes from /v1/scaling right after the first run (its windows
            // then hold that run's last sentences); the repeats show the machine's run-to-run
            // spread.
            if let Some(knee) = suite.knee_rate {
                // First the machine's own wake-up lateness with nothing else running.
                let span = Duration::from_secs_f64(if quick { 1.0 } else { 5.0 });
                suite.wake_probe_idle =
                    tokio::task::spawn_blocking(move || openloop::wake_probe(span))
                        .await
                        .ok();
                let before = metrics_text(&target.http).await;
                let r = openloop::run(&grpc, &medium, &plan(knee / 2.0, seconds, 1)).await;
                let after = metrics_text(&target.http).await;
                suite.half_knee_server = before
                    .zip(after)
                    .and_then(|(before, after)| server_view(&before, &after));
                generated += r.sent;
                suite.half_knee = Some(r);
                suite.half_knee_server_ms = server_compute_ms(&target.http, medium[0].len()).await;
                for _ in 0..if quick { 1 } else { 2 } {
                    let r = openloop::run(&grpc, &medium, &plan(knee / 2.0, seconds, 1)).await;
                    generated += r.sent;
                    suite.half_knee_repeats.push(r);
                }
            }
            // Capacity: closed loop with a fixed number of batches open, each round followed at
            // once by the in-process rate on the same sentences (all cores, nothing else
            // running). The machine's speed drifts by tens of percent over minutes, so the
            // ratio is taken within each round and the rounds' median is the figure.
            let model = match &model_dir {
                Some(dir) => Some(arcwright_parser::model::Model::load(dir)?),
                None => None,
            };
            let rounds = if quick { 1 } else { 3 };
            for round in 0..rounds {
                for (api, name) in [
                    (Api::GrpcBatch, "grpc-batch (32)"),
                    (Api::HttpBatch, "http-batch (32)"),
                ] {
                    let client =
                        Client::connect(api, &target.http, &target.grpc, None, false).await?;
                    let opens: &[usize] = match (quick, round) {
                        (true, _) => &[4],
                        (false, 0) => &[2, 4, 8],
                        (false, _) => &[8],
                    };
                    for &open in opens {
                        let run = openloop::saturate(
                            &client,
                            &medium,
                            32,
                            open,
                            Duration::from_secs_f64(if quick { 1.0 } else { 6.0 }),
                            100_000,
                        )
                        .await;
                        generated += server_requests_for(api, 32, run.sent);
                        suite.capacity.entry(name.to_string()).or_default().push(
                            report::Capacity {
                                open,
                                batch: 32,
                                round,
                                run,
                            },
                        );
                    }
                }
                if let Some(model) = &model {
                    let span = Duration::from_secs_f64(if quick { 0.5 } else { 5.0 });
                    suite
                        .in_process_rounds
                        .push(in_process_rate(model, &medium, span));
                }
            }
            suite.in_process_sentences_per_second = report::median(&suite.in_process_rounds);
            // Shedding: twice the knee.
            let knee = suite.knee_rate.unwrap_or(100.0);
            let r = openloop::run(
                &grpc,
                &workload::demo_fixed(100, 50, 4),
                &plan(knee * 2.0, seconds, 1),
            )
            .await;
            generated += r.sent;
            suite.shed = Some(r);
            if let Some(kib) = server_pid.and_then(rss_kib) {
                suite.rss_kib.insert("after shedding".into(), kib);
            }
            // Bounded soak.
            let r = openloop::run(
                &grpc,
                &workload::demo_mix(500, 11, 120),
                &plan(knee / 2.0, seconds * 2.0, 1),
            )
            .await;
            generated += r.sent;
            suite.soak = Some(r);
            if let Some(kib) = server_pid.and_then(rss_kib) {
                suite.rss_kib.insert("after soak".into(), kib);
            }
            // The generator's accounting against the server's request counters.
            let after = server_requests(&target.http).await.unwrap_or_default();
            let server_total: f64 = after.values().sum::<f64>() - before.values().sum::<f64>();
            suite.accounting = serde_json::json!({
                "generator_sent": generated,
                "server_counted": server_total,
                "match": (server_total - generated as f64).abs() < 0.5,
            });
            report::write_all(&suite, &out)?;
            println!("{}", serde_json::to_string(&suite.accounting)?);
        }
    }
    Ok(())
}
