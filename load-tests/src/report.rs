//! The report: JSON results → Markdown summary and SVG plots (plotters).

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;

use plotters::prelude::*;
use serde::{Deserialize, Serialize};

use crate::openloop::{CpuShares, RunResult};

/// Everything a suite measured.
#[derive(Debug, Clone, Serialize, Deserialize, Default)]
pub struct Suite {
    pub machine: String,
    pub steady: BTreeMap<String, RunResult>,
    pub lengths: BTreeMap<usize, RunResult>,
    #[serde(default)]
    pub lengths_non_projective_confidence: BTreeMap<usize, RunResult>,
    pub step_up: Vec<RunResult>,
    #[serde(default)]
    pub step_up_other: BTreeMap<String, Vec<RunResult>>,
    /// Highest sentences/s within the p99 budget, per API.
    #[serde(default)]
    pub knees: BTreeMap<String, f64>,
    pub knee_rate: Option<f64>,
    /// Steady run at half the gRPC Parse knee.
    #[serde(default)]
    pub half_knee: Option<RunResult>,
    /// Further steady runs at half the knee, made right after the first (the machine is shared
    /// and noisy; each run's ratio is its own).
    #[serde(default)]
    pub half_knee_repeats: Vec<RunResult>,
    /// Server-side total parse time (p50, p99 in ms) of the 25-word sentences of the first
    /// half-knee run, from `/v1/scaling`: the part of the latency spent computing.
    #[serde(default)]
    pub half_knee_server_ms: Option<(f64, f64)>,
    /// A thread's wake-up lateness with nothing else running (`openloop::wake_probe`), measured
    /// just before the half-knee runs.
    #[serde(default)]
    pub wake_probe_idle: Option<crate::openloop::Latency>,
    /// The server's own latency for the first half-knee run, from its /metrics.
    #[serde(default)]
    pub half_knee_server: Option<ServerView>,
    /// Closed-loop capacity runs: API name → runs at increasing numbers of open requests.
    #[serde(default)]
    pub capacity: BTreeMap<String, Vec<Capacity>>,
    /// Parsing the same sentences in-process on all cores: the median of the rounds.
    #[serde(default)]
    pub in_process_sentences_per_second: Option<f64>,
    /// The in-process rate measured right after each round of capacity runs.
    #[serde(default)]
    pub in_process_rounds: Vec<f64>,
    pub budget_ms: f64,
    pub swap: Option<RunResult>,
    pub swaps_done: usize,
    pub shed: Option<RunResult>,
    pub soak: Option<RunResult>,
    pub rss_kib: BTreeMap<String, u64>,
    pub scaling: serde_json::Value,
    pub accounting: serde_json::Value,
}

/// What the server measured of a run (ms; estimated from its histogram buckets).
#[derive(Debug, Clone, Serialize, Deserialize, Default)]
pub struct ServerView {
    /// gRPC Parse requests, from admission to answer.
    pub request_p50_ms: f64,
    pub request_p99_ms: f64,
    /// Wait for a parsing thread.
    pub queue_wait_p50_ms: f64,
    pub queue_wait_p99_ms: f64,
}

/// One closed-loop run: `open` requests of `batch` sentences kept in flight.
#[derive(Debug, Clone, Serialize, Deserialize, Default)]
pub struct Capacity {
    pub open: usize,
    pub batch: usize,
    /// Which round of capacity runs (each followed by an in-process measurement).
    #[serde(default)]
    pub round: usize,
    pub run: RunResult,
}

/// The median of `values` (the mean of the middle two for an even count); none when empty.
pub fn median(values: &[f64]) -> Option<f64> {
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    match n {
        0 => None,
        _ if n % 2 == 1 => Some(sorted[n / 2]),
        _ => Some((sorted[n / 2 - 1] + sorted[n / 2]) / 2.0),
    }
}

/// Per round: the best gRPC batch capacity with nothing shed or failed, against the in-process
/// rate measured right after it.
fn batch_rounds(s: &Suite) -> Vec<(usize, &Capacity, f64)> {
    let Some(runs) = s.capacity.get("grpc-batch (32)") else {
        return Vec::new();
    };
    // Reports written before the rounds existed hold one in-process figure, after all runs.
    let locals: Vec<f64> = if s.in_process_rounds.is_empty() {
        s.in_process_sentences_per_second.into_iter().collect()
    } else {
        s.in_process_rounds.clone()
    };
    locals
        .into_iter()
        .enumerate()
        .filter_map(|(round, local)| {
            runs.iter()
                .filter(|c| c.round == round && c.run.errors == 0 && c.run.shed == 0)
                .max_by(|a, b| {
                    a.run
                        .sentences_per_second
                        .total_cmp(&b.run.sentences_per_second)
                })
                .map(|c| (round, c, local))
        })
        .collect()
}

fn cpu_cell(cpu: Option<CpuShares>) -> String {
    cpu.map_or("–".to_string(), |c| {
        format!("{:.0} / {:.0} / {:.0}", c.busy, c.idle, c.steal)
    })
}

fn fmt(x: f64) -> String {
    if x >= 100.0 {
        format!("{x:.0}")
    } else if x >= 10.0 {
        format!("{x:.1}")
    } else {
        format!("{x:.2}")
    }
}

pub fn markdown(s: &Suite) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "# arcwright load-test report\n\n{}\n", s.machine);
    let _ = writeln!(
        out,
        "Open-loop load (latency from each request's scheduled send time). Generator and server share the machine.\n"
    );
    steady_rate(&mut out, s);
    latency_by_length(&mut out, s);
    scaling_exponents(&mut out, s);
    step_up(&mut out, s);
    capacity(&mut out, s);
    half_knee_target(&mut out, s);
    batch_throughput_target(&mut out, s);
    swap_target(&mut out, s);
    hot_swap(&mut out, s);
    shedding(&mut out, s);
    soak(&mut out, s);
    memory(&mut out, s);
    accounting(&mut out, s);
    out
}

/// Steady rate by API.
fn steady_rate(out: &mut String, s: &Suite) {
    let _ = writeln!(
        out,
        "## Steady rate by API\n\n| API | offered req/s | sent | ok | shed | errors | sentences/s | p50 ms | p99 ms |\n| --- | --- | --- | --- | --- | --- | --- | --- | --- |"
    );
    for (api, r) in &s.steady {
        let _ = writeln!(
            out,
            "| {api} | {} | {} | {} | {} | {} | {} | {} | {} |",
            fmt(r.offered_rate),
            r.sent,
            r.ok,
            r.shed,
            r.errors,
            fmt(r.sentences_per_second),
            fmt(r.latency.p50_ms),
            fmt(r.latency.p99_ms)
        );
    }
}

/// Latency by sentence length, both decoders.
fn latency_by_length(out: &mut String, s: &Suite) {
    let _ = writeln!(
        out,
        "\n## Latency by sentence length (gRPC Parse, low rate)\n\n| words | projective p50 ms | p99 ms | non-projective + confidences p50 ms | p99 ms | errors |\n| --- | --- | --- | --- | --- | --- |"
    );
    for (words, r) in &s.lengths {
        let other = s.lengths_non_projective_confidence.get(words);
        let cell = |v: Option<f64>| v.map_or("-".to_string(), fmt);
        let _ = writeln!(
            out,
            "| {words} | {} | {} | {} | {} | {} |",
            fmt(r.latency.p50_ms),
            fmt(r.latency.p99_ms),
            cell(other.map(|o| o.latency.p50_ms)),
            cell(other.map(|o| o.latency.p99_ms)),
            r.errors + other.map_or(0, |o| o.errors)
        );
    }
    let _ = writeln!(
        out,
        "\n![Median latency against sentence length on log-log axes: the client's total per \
         length and the server's stages per length bucket, with fitted slopes]\
         (latency-by-length.svg)"
    );
}

/// The server's own exponent fits from `/v1/scaling`.
fn scaling_exponents(out: &mut String, s: &Suite) {
    if let Some(fits) = s.scaling.get("fits").and_then(|f| f.as_array()) {
        let _ = writeln!(
            out,
            "\n## Server-side scaling exponents (`/v1/scaling`)\n\n| stage | decoder | exponent | R² | samples |\n| --- | --- | --- | --- | --- |"
        );
        for f in fits {
            let _ = writeln!(
                out,
                "| {} | {} | {:.2} | {:.3} | {} |",
                f["stage"].as_str().unwrap_or(""),
                f["decoder"].as_str().unwrap_or(""),
                f["exponent"].as_f64().unwrap_or(f64::NAN),
                f["r_squared"].as_f64().unwrap_or(f64::NAN),
                f["samples"]
            );
        }
    }
}

/// Step-up ladders and the knee.
fn step_up(out: &mut String, s: &Suite) {
    let _ = writeln!(
        out,
        "\n## Step-up (gRPC Parse, 25 words)\n\n| offered req/s | achieved req/s | shed | errors | skipped (client) | p50 ms | p99 ms |\n| --- | --- | --- | --- | --- | --- | --- |"
    );
    for r in &s.step_up {
        let _ = writeln!(
            out,
            "| {} | {} | {} | {} | {} | {} | {} |",
            fmt(r.offered_rate),
            fmt(r.ok as f64 / r.seconds.max(1e-9)),
            r.shed,
            r.errors,
            r.client_overloaded,
            fmt(r.latency.p50_ms),
            fmt(r.latency.p99_ms)
        );
    }
    let _ = writeln!(
        out,
        "\nKnee (highest rate with p99 ≤ {} ms, nothing shed, no errors): {}",
        s.budget_ms,
        s.knee_rate
            .map_or("not reached".to_string(), |k| format!("{} req/s", fmt(k)))
    );
    let _ = writeln!(
        out,
        "\n![Achieved requests/s and p99 latency (log axis) against offered load, knee and \
         budget marked](step-up.svg)"
    );
    for (name, runs) in &s.step_up_other {
        let _ = writeln!(
            out,
            "\n### Step-up, {name}\n\n| offered req/s | sentences/s | shed | errors | p50 ms | p99 ms |\n| --- | --- | --- | --- | --- | --- |"
        );
        for r in runs {
            let _ = writeln!(
                out,
                "| {} | {} | {} | {} | {} | {} |",
                fmt(r.offered_rate),
                fmt(r.sentences_per_second),
                r.shed,
                r.errors,
                fmt(r.latency.p50_ms),
                fmt(r.latency.p99_ms)
            );
        }
    }
    if !s.knees.is_empty() {
        let knees: Vec<String> = s
            .knees
            .iter()
            .map(|(k, v)| format!("{k} {}", fmt(*v)))
            .collect();
        let _ = writeln!(
            out,
            "\nSentences/s at the knee (25-word demo sentences unless a file is named; a batch's budget scales with its size): {}",
            knees.join(", ")
        );
    }
}

/// Closed-loop capacity rounds.
fn capacity(out: &mut String, s: &Suite) {
    if !s.capacity.is_empty() {
        let _ = writeln!(
            out,
            "\n## Capacity (closed loop)\n\nEach answer sends the next request, with a fixed number \
             of requests open: the completion rate when the service is never idle and never \
             overloaded. Latency from each actual send.\n"
        );
        let _ = writeln!(
            out,
            "| API | round | requests open | sentences/s | shed | errors | p50 ms | p99 ms | CPU busy / idle / stolen % |\n| --- | --- | --- | --- | --- | --- | --- | --- | --- |"
        );
        for (name, runs) in &s.capacity {
            for c in runs {
                let _ = writeln!(
                    out,
                    "| {name} | {} | {} | {} | {} | {} | {} | {} | {} |",
                    c.round + 1,
                    c.open,
                    fmt(c.run.sentences_per_second),
                    c.run.shed,
                    c.run.errors,
                    fmt(c.run.latency.p50_ms),
                    fmt(c.run.latency.p99_ms),
                    cpu_cell(c.run.cpu)
                );
            }
        }
        if !s.in_process_rounds.is_empty() {
            let rounds: Vec<String> = s.in_process_rounds.iter().map(|r| fmt(*r)).collect();
            let _ = writeln!(
                out,
                "\nIn-process, same sentences, all cores, right after each round: {} sentences/s.",
                rounds.join(", ")
            );
        } else if let Some(local) = s.in_process_sentences_per_second {
            let _ = writeln!(
                out,
                "\nIn-process, same sentences, all cores, right after these runs: {} sentences/s.",
                fmt(local)
            );
        }
    }
}

/// The latency target at half the knee, with where the time goes.
fn half_knee_target(out: &mut String, s: &Suite) {
    let _ = writeln!(out, "\n## Targets\n");
    match (&s.half_knee, s.knee_rate) {
        (Some(r), Some(knee)) => {
            let ratio = |r: &RunResult| r.latency.p99_ms / r.latency.p50_ms.max(1e-9);
            let _ = writeln!(
                out,
                "- p99 at half the knee ({} req/s) ≤ 3 × p50: p50 {} ms, p99 {} ms, ratio {:.2} — **{}**",
                fmt(knee / 2.0),
                fmt(r.latency.p50_ms),
                fmt(r.latency.p99_ms),
                ratio(r),
                if ratio(r) <= 3.0 { "met" } else { "not met" }
            );
            if !s.half_knee_repeats.is_empty() {
                let all: Vec<String> = s
                    .half_knee_repeats
                    .iter()
                    .map(|r| {
                        format!(
                            "p50 {} ms, p99 {} ms, ratio {:.2}",
                            fmt(r.latency.p50_ms),
                            fmt(r.latency.p99_ms),
                            ratio(r)
                        )
                    })
                    .collect();
                let met = std::iter::once(r)
                    .chain(&s.half_knee_repeats)
                    .filter(|r| ratio(r) <= 3.0)
                    .count();
                let _ = writeln!(
                    out,
                    "  - the same run repeated at once: {}; met in {met} of {} runs",
                    all.join("; "),
                    s.half_knee_repeats.len() + 1
                );
            }
            if r.send_lag.count > 0 {
                let _ = writeln!(
                    out,
                    "  - of which the generator's own send lag (scheduled time to send, included \
                     above): p50 {} ms, p99 {} ms",
                    fmt(r.send_lag.p50_ms),
                    fmt(r.send_lag.p99_ms)
                );
            }
            if let Some(v) = &s.half_knee_server {
                let _ = writeln!(
                    out,
                    "  - of which inside the server (its `arcwright_request_duration_seconds`, \
                     admission to answer): p50 {} ms, p99 {} ms; waiting for a parsing thread \
                     (`arcwright_queue_wait_seconds`): p50 {} ms, p99 {} ms",
                    fmt(v.request_p50_ms),
                    fmt(v.request_p99_ms),
                    fmt(v.queue_wait_p50_ms),
                    fmt(v.queue_wait_p99_ms)
                );
            }
            if let Some((p50, p99)) = s.half_knee_server_ms {
                let _ = writeln!(
                    out,
                    "  - of which computing (the server's own total stage time for these sentences, \
                     `/v1/scaling`): p50 {} ms, p99 {} ms; the rest is transport, queueing and \
                     scheduling on the shared cores",
                    fmt(p50),
                    fmt(p99)
                );
            }
            if let Some(w) = &s.wake_probe_idle {
                let _ = writeln!(
                    out,
                    "  - the machine's floor: a thread sleeping until each next millisecond, with \
                     nothing else running, woke late by p50 {} ms, p99 {} ms, max {} ms ({} \
                     wake-ups, just before these runs); a request's path holds at least five \
                     such wake-ups (generator, network thread, parsing thread, network thread, \
                     generator)",
                    fmt(w.p50_ms),
                    fmt(w.p99_ms),
                    fmt(w.max_ms),
                    w.count
                );
            }
            if let Some(cpu) = r.cpu {
                let _ = writeln!(
                    out,
                    "  - the machine's CPU time during the first run: {:.0}% busy, {:.0}% idle, \
                     {:.0}% stolen by the hypervisor (a virtual CPU ready to run but not running: \
                     each such wait lands on some request's latency)",
                    cpu.busy, cpu.idle, cpu.steal
                );
            }
        }
        _ => {
            let _ = writeln!(out, "- p99 at half the knee: no knee found");
        }
    }
}

/// The batch-throughput target against the in-process rate.
fn batch_throughput_target(out: &mut String, s: &Suite) {
    let rounds = batch_rounds(s);
    let ratios: Vec<f64> = rounds
        .iter()
        .map(|(_, c, local)| c.run.sentences_per_second / local)
        .collect();
    match median(&ratios) {
        Some(ratio) => {
            let each: Vec<String> = rounds
                .iter()
                .map(|(round, c, local)| {
                    format!(
                        "round {}: {} sentences/s ({} batches of {} open) vs {} = {:.0}%",
                        round + 1,
                        fmt(c.run.sentences_per_second),
                        c.open,
                        c.batch,
                        fmt(*local),
                        100.0 * c.run.sentences_per_second / local
                    )
                })
                .collect();
            let _ = writeln!(
                out,
                "- gRPC batch throughput ≥ 80% of in-process: median of {} rounds {:.0}% — **{}**; \
                 closed loop, nothing shed, each round against the in-process rate on all cores \
                 measured right after it ({})",
                ratios.len(),
                100.0 * ratio,
                if ratio >= 0.8 { "met" } else { "not met" },
                each.join("; ")
            );
            if let (Some(knee), Some(local)) = (
                s.knees.get("grpc-batch (32)"),
                s.in_process_sentences_per_second,
            ) {
                let _ = writeln!(
                    out,
                    "  - open loop, the highest step within the latency budget with nothing shed: \
                     {} sentences/s = {:.0}% of the median in-process rate",
                    fmt(*knee),
                    100.0 * knee / local
                );
            }
        }
        None => {
            let _ = writeln!(
                out,
                "- gRPC batch vs in-process: not measured (give --model-dir)"
            );
        }
    }
}

/// The zero-errors-across-swaps target.
fn swap_target(out: &mut String, s: &Suite) {
    if let Some(r) = &s.swap {
        let _ = writeln!(
            out,
            "- 0 errors across swaps: **{}** ({} errors)",
            if r.errors == 0 { "met" } else { "not met" },
            r.errors
        );
    }
}

/// Hot swap under load.
fn hot_swap(out: &mut String, s: &Suite) {
    if let Some(r) = &s.swap {
        let _ = writeln!(
            out,
            "\n## Hot swap under load\n\n{} promotes during {:.0} s at {} req/s: {} ok, **{} errors**, versions seen: {}",
            s.swaps_done,
            r.seconds,
            fmt(r.offered_rate),
            r.ok,
            r.errors,
            r.versions.len()
        );
    }
}

/// Shedding at twice the knee.
fn shedding(out: &mut String, s: &Suite) {
    if let Some(r) = &s.shed {
        let _ = writeln!(
            out,
            "\n## Shedding\n\nOffered {} req/s: {} ok, {} shed (429 / RESOURCE_EXHAUSTED), {} errors; admitted p50 {} ms, p99 {} ms.",
            fmt(r.offered_rate),
            r.ok,
            r.shed,
            r.errors,
            fmt(r.latency.p50_ms),
            fmt(r.latency.p99_ms)
        );
    }
}

/// The bounded soak.
fn soak(out: &mut String, s: &Suite) {
    if let Some(r) = &s.soak {
        let _ = writeln!(
            out,
            "\n## Soak\n\n{:.0} s at {} req/s: {} ok, {} errors, p99 {} ms.",
            r.seconds,
            fmt(r.offered_rate),
            r.ok,
            r.errors,
            fmt(r.latency.p99_ms)
        );
    }
}

/// Server resident memory.
fn memory(out: &mut String, s: &Suite) {
    if !s.rss_kib.is_empty() {
        let _ = writeln!(
            out,
            "\nServer resident memory (KiB): {}",
            s.rss_kib
                .iter()
                .map(|(k, v)| format!("{k} {v}"))
                .collect::<Vec<_>>()
                .join(", ")
        );
    }
}

/// Request accounting against the server's counters.
fn accounting(out: &mut String, s: &Suite) {
    let _ = writeln!(
        out,
        "\n## Accounting\n\n```\n{}\n```",
        serde_json::to_string_pretty(&s.accounting).unwrap_or_default()
    );
}

/// Latency against length on log-log axes (client p50 per fixed length, and server-side
/// per-stage p50 per bucket from `/v1/scaling`), with the fitted slopes in the legend.
pub fn plot_lengths(s: &Suite, path: &Path) -> anyhow::Result<()> {
    let root = SVGBackend::new(path, (800, 500)).into_drawing_area();
    root.fill(&WHITE)?;
    let mut series: BTreeMap<String, Vec<(f64, f64)>> = BTreeMap::new();
    for (words, r) in &s.lengths {
        if r.latency.count > 0 {
            series
                .entry("client total (p50)".into())
                .or_default()
                .push((*words as f64, r.latency.p50_ms));
        }
    }
    let slopes: BTreeMap<String, f64> = s
        .scaling
        .get("fits")
        .and_then(|f| f.as_array())
        .map(|fits| {
            fits.iter()
                .map(|f| {
                    (
                        format!(
                            "{} {}",
                            f["stage"].as_str().unwrap_or(""),
                            f["decoder"].as_str().unwrap_or("")
                        ),
                        f["exponent"].as_f64().unwrap_or(f64::NAN),
                    )
                })
                .collect()
        })
        .unwrap_or_default();
    if let Some(buckets) = s.scaling.get("buckets").and_then(|b| b.as_array()) {
        for b in buckets {
            let stage = b["stage"].as_str().unwrap_or("");
            if !matches!(stage, "score" | "decode" | "total") {
                continue;
            }
            let Ok(bound) = b["length_bucket"].as_str().unwrap_or("").parse::<f64>() else {
                continue;
            };
            let key = format!("{stage} {}", b["decoder"].as_str().unwrap_or(""));
            series
                .entry(key)
                .or_default()
                .push((bound * 0.75, b["p50_seconds"].as_f64().unwrap_or(0.0) * 1e3));
        }
    }
    let points: Vec<(f64, f64)> = series
        .values()
        .flatten()
        .copied()
        .filter(|p| p.0 > 0.0 && p.1 > 0.0)
        .collect();
    if points.is_empty() {
        return Ok(());
    }
    let (xmin, xmax) = points
        .iter()
        .fold((f64::MAX, f64::MIN), |a, p| (a.0.min(p.0), a.1.max(p.0)));
    let (ymin, ymax) = points
        .iter()
        .fold((f64::MAX, f64::MIN), |a, p| (a.0.min(p.1), a.1.max(p.1)));
    let mut chart = ChartBuilder::on(&root)
        .caption(
            "latency against sentence length (log-log)",
            ("sans-serif", 20),
        )
        .margin(15)
        .x_label_area_size(40)
        .y_label_area_size(60)
        .build_cartesian_2d(
            (xmin * 0.8..xmax * 1.25).log_scale(),
            (ymin * 0.5..ymax * 2.0).log_scale(),
        )?;
    chart
        .configure_mesh()
        .x_desc("tokens")
        .y_desc("milliseconds")
        .draw()?;
    for (i, (name, mut pts)) in series.into_iter().enumerate() {
        pts.sort_by(|a, b| a.0.total_cmp(&b.0));
        let color = Palette99::pick(i).to_rgba();
        let label = match slopes.get(&name) {
            Some(k) => format!("{name} (slope {k:.2})"),
            None => name.clone(),
        };
        chart
            .draw_series(LineSeries::new(pts.clone(), color.stroke_width(2)))?
            .label(label)
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], color));
        chart.draw_series(pts.iter().map(|p| Circle::new(*p, 3, color.filled())))?;
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperLeft)
        .background_style(WHITE.mix(0.9))
        .border_style(BLACK)
        .draw()?;
    root.present()?;
    Ok(())
}

/// Step-up in two panels over the same offered-load axis: achieved against offered requests/s
/// (linear, with the offered = achieved diagonal), and p99 latency on its own logarithmic axis
/// with the budget; the knee is marked in both. Legends sit in the upper left, which the data
/// of a step-up (rising to the right) leaves empty.
pub fn plot_step_up(s: &Suite, path: &Path) -> anyhow::Result<()> {
    if s.step_up.is_empty() {
        return Ok(());
    }
    let root = SVGBackend::new(path, (800, 700)).into_drawing_area();
    root.fill(&WHITE)?;
    let root = root.titled("step-up: gRPC Parse, 25-word sentences", ("sans-serif", 20))?;
    let (upper, lower) = root.split_vertically(330);
    let xmax = s.step_up.iter().map(|r| r.offered_rate).fold(1.0, f64::max) * 1.1;
    let throughput: Vec<(f64, f64)> = s
        .step_up
        .iter()
        .map(|r| (r.offered_rate, r.ok as f64 / r.seconds.max(1e-9)))
        .collect();
    let ymax = throughput.iter().map(|p| p.1).fold(xmax, f64::max) * 1.05;
    let mut top = ChartBuilder::on(&upper)
        .margin(15)
        .x_label_area_size(35)
        .y_label_area_size(60)
        .build_cartesian_2d(0.0..xmax, 0.0..ymax)?;
    top.configure_mesh()
        .x_desc("offered requests/s")
        .y_desc("achieved requests/s")
        .draw()?;
    top.draw_series(LineSeries::new(
        vec![(0.0, 0.0), (xmax, xmax)],
        BLACK.mix(0.3).stroke_width(1),
    ))?
    .label("offered = achieved")
    .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLACK.mix(0.3)));
    top.draw_series(LineSeries::new(throughput.clone(), BLUE.stroke_width(2)))?
        .label("achieved")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLUE));
    top.draw_series(throughput.iter().map(|p| Circle::new(*p, 3, BLUE.filled())))?;
    let p99: Vec<(f64, f64)> = s
        .step_up
        .iter()
        .filter(|r| r.latency.p99_ms > 0.0)
        .map(|r| (r.offered_rate, r.latency.p99_ms))
        .collect();
    let (lmin, lmax) = p99.iter().fold((s.budget_ms, s.budget_ms), |a, p| {
        (a.0.min(p.1), a.1.max(p.1))
    });
    let mut bottom = ChartBuilder::on(&lower)
        .margin(15)
        .x_label_area_size(40)
        .y_label_area_size(60)
        .build_cartesian_2d(0.0..xmax, (lmin * 0.5..lmax * 2.0).log_scale())?;
    bottom
        .configure_mesh()
        .x_desc("offered requests/s")
        .y_desc("p99 ms (log)")
        .draw()?;
    bottom
        .draw_series(LineSeries::new(
            vec![(0.0, s.budget_ms), (xmax, s.budget_ms)],
            RED.mix(0.4).stroke_width(1),
        ))?
        .label(format!("budget {} ms", fmt(s.budget_ms)))
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], RED.mix(0.4)));
    bottom
        .draw_series(LineSeries::new(p99.clone(), RED.stroke_width(2)))?
        .label("p99 latency")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], RED));
    bottom.draw_series(p99.iter().map(|p| Circle::new(*p, 3, RED.filled())))?;
    if let Some(knee) = s.knee_rate {
        let mark = BLACK.stroke_width(1);
        top.draw_series(std::iter::once(PathElement::new(
            vec![(knee, 0.0), (knee, ymax)],
            mark,
        )))?;
        top.draw_series(std::iter::once(Text::new(
            format!("knee {} req/s", fmt(knee)),
            (knee, ymax * 0.08),
            ("sans-serif", 14).into_font(),
        )))?;
        bottom.draw_series(std::iter::once(PathElement::new(
            vec![(knee, lmin * 0.5), (knee, lmax * 2.0)],
            mark,
        )))?;
    }
    top.configure_series_labels()
        .position(SeriesLabelPosition::UpperLeft)
        .background_style(WHITE.mix(0.9))
        .border_style(BLACK)
        .draw()?;
    bottom
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperLeft)
        .background_style(WHITE.mix(0.9))
        .border_style(BLACK)
        .draw()?;
    root.present()?;
    Ok(())
}

pub fn write_all(s: &Suite, dir: &Path) -> anyhow::Result<()> {
    std::fs::create_dir_all(dir)?;
    std::fs::write(dir.join("results.json"), serde_json::to_string_pretty(s)?)?;
    std::fs::write(dir.join("REPORT.md"), markdown(s))?;
    plot_lengths(s, &dir.join("latency-by-length.svg"))?;
    plot_step_up(s, &dir.join("step-up.svg"))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_of_odd_even_and_empty_lists() {
        assert_eq!(median(&[3.0, 1.0, 2.0]), Some(2.0));
        assert_eq!(median(&[4.0, 1.0, 3.0, 2.0]), Some(2.5));
        assert_eq!(median(&[]), None);
    }
}
