//! Prometheus metrics (names per the contract), recorded on the one request path.

use std::sync::{LazyLock, OnceLock};

use arcwright_parser::decode::Algorithm;

use prometheus::{
    Encoder, Histogram, HistogramOpts, HistogramVec, IntCounter, IntCounterVec, IntGauge,
    IntGaugeVec, Opts, Registry, TextEncoder,
};

pub static REGISTRY: LazyLock<Registry> = LazyLock::new(Registry::new);

fn register<T: prometheus::core::Collector + Clone + 'static>(metric: T) -> T {
    // Registration fails only for duplicate names, which the names below rule out.
    let _ = REGISTRY.register(Box::new(metric.clone()));
    metric
}

/// Per-stage durations by decoder and power-of-two length bucket.
pub static STAGE_DURATION: LazyLock<HistogramVec> = LazyLock::new(|| {
    let buckets = prometheus::exponential_buckets(0.000_005, 2.0, 22).unwrap_or_default();
    register(
        HistogramVec::new(
            HistogramOpts::new(
                "arcwright_stage_duration_seconds",
                "Time spent per parsing stage, by decoder and sentence length bucket",
            )
            .buckets(buckets),
            &["stage", "decoder", "length_bucket"],
        )
        .expect("valid metric"),
    )
});

/// The parsing stages, in the order a sentence goes through them.
#[derive(Debug, Clone, Copy)]
pub enum Stage {
    Tokenize,
    Tag,
    Score,
    Decode,
    Total,
}

/// The stages' label values, indexed by [`Stage`].
pub const STAGES: [&str; 5] = ["tokenize", "tag", "score", "decode", "total"];

impl Stage {
    pub fn name(self) -> &'static str {
        STAGES[self as usize]
    }
}

/// Decoders as indexed in the handle tables below.
fn decoder_index(decoder: Algorithm) -> usize {
    match decoder {
        Algorithm::Projective => 0,
        Algorithm::NonProjective => 1,
    }
}

/// The label of a sentence length's bucket.
pub fn length_bucket(tokens: usize) -> &'static str {
    LENGTH_BUCKETS
        .iter()
        .find(|(bound, _)| tokens <= *bound)
        .map_or("+Inf", |b| b.1)
}

/// Length buckets: upper bounds and their labels.
pub const LENGTH_BUCKETS: [(usize, &str); 8] = [
    (8, "8"),
    (16, "16"),
    (32, "32"),
    (64, "64"),
    (128, "128"),
    (256, "256"),
    (512, "512"),
    (usize::MAX, "+Inf"),
];

/// Handles of the stage histograms by (stage, decoder, length bucket), each looked up in the
/// vector once, when first used (a series appears in `/metrics` once it has a sample). Looking a
/// labelled child up takes a lock and hashes its labels; two parsing threads doing that five
/// times per sentence cost measurably more than the observations themselves.
static STAGE_HANDLES: LazyLock<Vec<OnceLock<Histogram>>> = LazyLock::new(|| {
    (0..STAGES.len() * 2 * LENGTH_BUCKETS.len())
        .map(|_| OnceLock::new())
        .collect()
});
/// Handles of the sentence and token counters by decoder.
static SENTENCE_HANDLES: [OnceLock<(IntCounter, IntCounter, prometheus::Counter)>; 2] =
    [OnceLock::new(), OnceLock::new()];

/// Records one parsed sentence: its stage durations in seconds (indexed by [`Stage`]) in the
/// stage histograms and the scaling tracker, its parsing thread's CPU seconds in the CPU counter
/// and the tracker (as the pseudo-stage [`CPU_STAGE`]), and the sentence and token counters.
pub fn record_sentence(
    seconds: &[f64; STAGES.len()],
    cpu_seconds: f64,
    decoder: Algorithm,
    tokens: usize,
) {
    let (d, label) = (decoder_index(decoder), decoder.name());
    let b = LENGTH_BUCKETS
        .iter()
        .position(|(bound, _)| tokens <= *bound)
        .unwrap_or(LENGTH_BUCKETS.len() - 1);
    let bucket = LENGTH_BUCKETS[b].1;
    for (s, (stage, &value)) in STAGES.iter().zip(seconds).enumerate() {
        STAGE_HANDLES[(s * 2 + d) * LENGTH_BUCKETS.len() + b]
            .get_or_init(|| STAGE_DURATION.with_label_values(&[stage, label, bucket]))
            .observe(value);
    }
    super::scaling::record_stages(seconds, cpu_seconds, label, tokens, bucket);
    let (sentences, token_count, cpu) = SENTENCE_HANDLES[d].get_or_init(|| {
        (
            SENTENCES.with_label_values(&[label]),
            TOKENS.with_label_values(&[label]),
            PARSE_CPU.with_label_values(&[label]),
        )
    });
    sentences.inc();
    cpu.inc_by(cpu_seconds.max(0.0));
    token_count.inc_by(tokens as u64);
}

pub static REQUESTS: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new(
                "arcwright_requests_total",
                "Requests by API, method and status code",
            ),
            &["api", "method", "code"],
        )
        .expect("valid metric"),
    )
});

/// Time a request spends in the server, from admission to its answer being ready (wire
/// decoding and encoding excluded), by API and method: what the server adds to a caller's latency.
pub static REQUEST_DURATION: LazyLock<HistogramVec> = LazyLock::new(|| {
    // Steps of 1.5× from 25 µs to about 8 s: fine enough to tell a p99 from a p50 apart.
    let buckets = prometheus::exponential_buckets(0.000_025, 1.5, 32).unwrap_or_default();
    register(
        HistogramVec::new(
            HistogramOpts::new(
                "arcwright_request_duration_seconds",
                "Time from admission to answer inside the server, by API and method",
            )
            .buckets(buckets),
            &["api", "method"],
        )
        .expect("valid metric"),
    )
});

/// Time an admitted request waits for a parsing thread: the queueing part of the server's
/// latency, apart from the computing part in `arcwright_stage_duration_seconds`.
pub static QUEUE_WAIT: LazyLock<Histogram> = LazyLock::new(|| {
    let buckets = prometheus::exponential_buckets(0.000_005, 1.5, 36).unwrap_or_default();
    register(
        Histogram::with_opts(
            HistogramOpts::new(
                "arcwright_queue_wait_seconds",
                "Time an admitted request waits for a parsing thread",
            )
            .buckets(buckets),
        )
        .expect("valid metric"),
    )
});

/// The name under which the scaling tracker keeps a sentence's CPU seconds beside its stages.
pub const CPU_STAGE: &str = "cpu";

/// CPU seconds of the parsing threads per decoder: with `arcwright_sentences_total`, what a
/// sentence costs a core, whatever else the machine was doing.
pub static PARSE_CPU: LazyLock<prometheus::CounterVec> = LazyLock::new(|| {
    register(
        prometheus::CounterVec::new(
            Opts::new(
                "arcwright_parse_cpu_seconds_total",
                "CPU seconds the parsing threads spent on sentences (tag, score, decode, confidences, labels)",
            ),
            &["decoder"],
        )
        .expect("valid metric"),
    )
});

pub static SENTENCES: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new("arcwright_sentences_total", "Sentences parsed"),
            &["decoder"],
        )
        .expect("valid metric"),
    )
});

pub static TOKENS: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new("arcwright_tokens_total", "Tokens parsed"),
            &["decoder"],
        )
        .expect("valid metric"),
    )
});

pub static IN_FLIGHT: LazyLock<IntGauge> = LazyLock::new(|| {
    register(
        IntGauge::new(
            "arcwright_in_flight_requests",
            "Requests being parsed or queued",
        )
        .expect("valid metric"),
    )
});

pub static SHED: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new(
                "arcwright_shed_requests_total",
                "Requests refused because too many were in flight",
            ),
            &["api"],
        )
        .expect("valid metric"),
    )
});

pub static MODEL_INFO: LazyLock<IntGaugeVec> = LazyLock::new(|| {
    register(
        IntGaugeVec::new(
            Opts::new(
                "arcwright_model_info",
                "1 for each model version being served",
            ),
            &["name", "version"],
        )
        .expect("valid metric"),
    )
});

pub static MODEL_LOAD_SECONDS: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_model_load_seconds",
                "Fetch, verify and load time of the served version",
            ),
            &["name"],
        )
        .expect("valid metric"),
    )
});

pub static SWAPS: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new(
                "arcwright_model_swaps_total",
                "Model swap attempts by result",
            ),
            &["name", "result"],
        )
        .expect("valid metric"),
    )
});

pub static SCALING_EXPONENT: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(prometheus::GaugeVec::new(Opts::new("arcwright_scaling_exponent", "Slope of ln(duration) against ln(tokens) over recent sentences of at least 8 tokens"), &["stage", "decoder"]).expect("valid metric"))
});

pub static SCALING_SAMPLES: LazyLock<IntGaugeVec> = LazyLock::new(|| {
    register(
        IntGaugeVec::new(
            Opts::new(
                "arcwright_scaling_samples",
                "Sentences in the scaling fit's window",
            ),
            &["stage", "decoder"],
        )
        .expect("valid metric"),
    )
});

pub static SCALING_R_SQUARED: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new("arcwright_scaling_r_squared", "R² of the scaling fit"),
            &["stage", "decoder"],
        )
        .expect("valid metric"),
    )
});

/// The decoder probe's last fitted exponent per decoder.
pub static PROBE_EXPONENT: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_probe_exponent",
                "Decoder probe: slope of ln(CPU time) against ln(words) over the lengths where the decoder's leading term dominates",
            ),
            &["decoder"],
        )
        .expect("valid metric"),
    )
});

/// 1 when the last probe's exponent was inside the decoder's expected band, else 0.
pub static PROBE_CONSISTENT: LazyLock<IntGaugeVec> = LazyLock::new(|| {
    register(
        IntGaugeVec::new(
            Opts::new(
                "arcwright_probe_consistent",
                "Decoder probe verdict: 1 when the fitted exponent is inside the expected band (3 projective, 2 non-projective), else 0",
            ),
            &["decoder"],
        )
        .expect("valid metric"),
    )
});

/// Consecutive runs, up to the last, whose verdict was inconsistent (0 after a consistent one):
/// what alerts wait on, so that one disturbed run does not page.
pub static PROBE_STREAK: LazyLock<IntGaugeVec> = LazyLock::new(|| {
    register(
        IntGaugeVec::new(
            Opts::new(
                "arcwright_probe_inconsistent_streak",
                "Decoder probe: consecutive runs up to the last whose verdict was inconsistent",
            ),
            &["decoder"],
        )
        .expect("valid metric"),
    )
});

/// The expected band's bounds, for dashboards.
pub static PROBE_BAND: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_probe_band",
                "Decoder probe: the band its exponent is expected in",
            ),
            &["decoder", "bound"],
        )
        .expect("valid metric"),
    )
});

/// CPU seconds of one decode per probed length.
pub static PROBE_SECONDS: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_probe_seconds",
                "Decoder probe: CPU seconds of the fastest of its decodes of a synthetic sentence of this many words",
            ),
            &["decoder", "tokens"],
        )
        .expect("valid metric"),
    )
});

/// Probe runs per decoder and verdict.
pub static PROBE_RUNS: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new(
                "arcwright_probe_runs_total",
                "Decoder probe runs by verdict",
            ),
            &["decoder", "verdict"],
        )
        .expect("valid metric"),
    )
});

/// CPU time the probe has used.
pub static PROBE_CPU: LazyLock<prometheus::Counter> = LazyLock::new(|| {
    register(
        prometheus::Counter::new(
            "arcwright_probe_cpu_seconds_total",
            "CPU seconds used by the decoder probe",
        )
        .expect("valid metric"),
    )
});

/// Publishes one probe run.
pub fn record_probe(run: &super::probe::Run) {
    for d in &run.decoders {
        PROBE_EXPONENT
            .with_label_values(&[d.decoder])
            .set(d.exponent);
        PROBE_CONSISTENT
            .with_label_values(&[d.decoder])
            .set(i64::from(d.consistent));
        let streak = PROBE_STREAK.with_label_values(&[d.decoder]);
        if d.consistent {
            streak.set(0);
        } else {
            streak.inc();
        }
        PROBE_BAND
            .with_label_values(&[d.decoder, "lower"])
            .set(d.expected.band[0]);
        PROBE_BAND
            .with_label_values(&[d.decoder, "upper"])
            .set(d.expected.band[1]);
        for p in &d.points {
            PROBE_SECONDS
                .with_label_values(&[d.decoder, &p.tokens.to_string()])
                .set(p.cpu_seconds);
        }
        for verdict in ["consistent", "inconsistent"] {
            let runs = PROBE_RUNS.with_label_values(&[d.decoder, verdict]);
            if (verdict == "consistent") == d.consistent {
                runs.inc();
            }
        }
    }
    PROBE_CPU.inc_by(run.cpu_seconds.max(0.0));
}

/// The traffic cost models' coefficients (a in seconds, b per squared token, c per cubed token).
pub static COST_MODEL_COEFFICIENT: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_cost_model_coefficient",
                "Cost model t(n) = a + l*n + b*n^2 + c*n^3 fitted to the length buckets' medians: its coefficients",
            ),
            &["stage", "decoder", "term"],
        )
        .expect("valid metric"),
    )
});

/// The cost models' predicted seconds at a few reference lengths.
pub static COST_MODEL_SECONDS: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_cost_model_seconds",
                "Cost model's predicted seconds for a sentence of this many tokens",
            ),
            &["stage", "decoder", "tokens"],
        )
        .expect("valid metric"),
    )
});

/// How far the farthest observed bucket median is from its cost model, as |ln(model/observed)|
/// (symmetric: twice and half are both ln 2).
pub static COST_MODEL_ERROR: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_cost_model_log_error",
                "Largest |ln(model / observed)| over the length buckets' medians",
            ),
            &["stage", "decoder"],
        )
        .expect("valid metric"),
    )
});

/// How far a replica's speed moved over its window (the same work at different times), relative.
pub static COST_MODEL_SPEED_DRIFT: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_cost_model_speed_drift",
                "Spread of the median residual ln(observed / cost model) between time segments of the window, as e^spread - 1",
            ),
            &["stage", "decoder"],
        )
        .expect("valid metric"),
    )
});

/// Shadow parses of candidates, by model and outcome (compared, error, shed).
pub static SHADOW_SENTENCES: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new(
                "arcwright_shadow_sentences_total",
                "Sentences of sampled live requests also parsed by the model's candidate version: compared, error (the candidate failed), shed (the shadow queue was full)",
            ),
            &["model", "outcome"],
        )
        .expect("valid metric"),
    )
});

/// Agreement of a candidate's trees with the live ones, per length bucket.
pub static SHADOW_AGREEMENT: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_shadow_agreement",
                "Share of words whose head (kind=heads) or head and label (kind=heads_and_labels) from the candidate equals the live version's, since the candidate was loaded",
            ),
            &["model", "length_bucket", "kind"],
        )
        .expect("valid metric"),
    )
});

/// Candidate CPU time per live CPU time on the same sentences, per length bucket.
pub static SHADOW_LATENCY_RATIO: LazyLock<prometheus::GaugeVec> = LazyLock::new(|| {
    register(
        prometheus::GaugeVec::new(
            Opts::new(
                "arcwright_shadow_latency_ratio",
                "Candidate CPU seconds per live CPU seconds on the same shadowed sentences",
            ),
            &["model", "length_bucket"],
        )
        .expect("valid metric"),
    )
});

/// Automatic rollout decisions this replica took.
pub static ROLLOUT_DECISIONS: LazyLock<IntCounterVec> = LazyLock::new(|| {
    register(
        IntCounterVec::new(
            Opts::new(
                "arcwright_rollout_decisions_total",
                "Automatic rollout decisions taken by this replica (promoted, refused, rolled-back)",
            ),
            &["model", "decision"],
        )
        .expect("valid metric"),
    )
});

pub fn record_rollout_decision(model: &str, decision: &str) {
    ROLLOUT_DECISIONS
        .with_label_values(&[model, decision])
        .inc();
}

/// Sets the shadow gauges of a model from its comparison.
pub fn set_shadow(model: &str, comparison: &super::rollout::Comparison) {
    let total = comparison.total();
    let rows = comparison
        .buckets
        .iter()
        .map(|(b, c)| (*b, c))
        .chain(std::iter::once(("all", &total)));
    for (bucket, counts) in rows {
        if let Some(a) = counts.head_agreement() {
            SHADOW_AGREEMENT
                .with_label_values(&[model, bucket, "heads"])
                .set(a);
        }
        if let Some(a) = counts.label_agreement() {
            SHADOW_AGREEMENT
                .with_label_values(&[model, bucket, "heads_and_labels"])
                .set(a);
        }
        if let Some(r) = counts.latency_ratio() {
            SHADOW_LATENCY_RATIO
                .with_label_values(&[model, bucket])
                .set(r);
        }
    }
}

/// Lengths at which the cost models' predictions are exported.
pub const COST_MODEL_LENGTHS: [usize; 7] = [8, 16, 32, 64, 128, 256, 512];

pub fn record_swap(name: &str, ok: bool) {
    SWAPS
        .with_label_values(&[name, if ok { "ok" } else { "failed" }])
        .inc();
}

pub fn set_model_info(name: &str, previous: Option<&str>, version: &str, load_seconds: f64) {
    if let Some(previous) = previous {
        let _ = MODEL_INFO.remove_label_values(&[name, previous]);
    }
    MODEL_INFO.with_label_values(&[name, version]).set(1);
    MODEL_LOAD_SECONDS
        .with_label_values(&[name])
        .set(load_seconds);
}

/// Touches every metric family so that `/metrics` lists them before the first request.
pub fn init() {
    LazyLock::force(&STAGE_DURATION);
    LazyLock::force(&REQUESTS);
    LazyLock::force(&SENTENCES);
    LazyLock::force(&TOKENS);
    LazyLock::force(&IN_FLIGHT);
    LazyLock::force(&SHED);
    LazyLock::force(&MODEL_INFO);
    LazyLock::force(&MODEL_LOAD_SECONDS);
    LazyLock::force(&SWAPS);
    LazyLock::force(&SCALING_EXPONENT);
    LazyLock::force(&SCALING_SAMPLES);
    LazyLock::force(&SCALING_R_SQUARED);
    LazyLock::force(&PROBE_CPU);
}

/// The text exposition of every metric (scaling fits and cost models are computed at scrape
/// time).
pub fn render() -> String {
    let (fits, models) = super::scaling::TRACKER
        .lock()
        .map(|t| (t.fits(), t.cost_models()))
        .unwrap_or_default();
    for (stage, decoder, model) in models {
        for (term, value) in [
            ("a", model.a),
            ("l", model.l),
            ("b", model.b),
            ("c", model.c),
        ] {
            COST_MODEL_COEFFICIENT
                .with_label_values(&[stage, decoder, term])
                .set(value);
        }
        for tokens in COST_MODEL_LENGTHS {
            COST_MODEL_SECONDS
                .with_label_values(&[stage, decoder, &tokens.to_string()])
                .set(model.seconds(tokens as f64));
        }
        COST_MODEL_ERROR
            .with_label_values(&[stage, decoder])
            .set(model.max_log_error());
        if let Some(drift) = model.speed_drift {
            COST_MODEL_SPEED_DRIFT
                .with_label_values(&[stage, decoder])
                .set(drift);
        }
    }
    for (stage, decoder, fit) in fits {
        SCALING_EXPONENT
            .with_label_values(&[&stage, &decoder])
            .set(fit.exponent);
        SCALING_SAMPLES
            .with_label_values(&[&stage, &decoder])
            .set(fit.samples as i64);
        SCALING_R_SQUARED
            .with_label_values(&[&stage, &decoder])
            .set(fit.r_squared);
    }
    let mut buffer = Vec::new();
    let _ = TextEncoder::new().encode(&REGISTRY.gather(), &mut buffer);
    String::from_utf8(buffer).unwrap_or_default()
}
