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

/// Length buckets: upper bounds and their labels.
const LENGTH_BUCKETS: [(usize, &str); 8] = [
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
static SENTENCE_HANDLES: [OnceLock<(IntCounter, IntCounter)>; 2] =
    [OnceLock::new(), OnceLock::new()];

/// Records one parsed sentence: its stage durations in seconds (indexed by [`Stage`]) in the
/// stage histograms and the scaling tracker, and the sentence and token counters.
pub fn record_sentence(seconds: &[f64; STAGES.len()], decoder: Algorithm, tokens: usize) {
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
    super::scaling::record_stages(seconds, label, tokens, bucket);
    let (sentences, token_count) = SENTENCE_HANDLES[d].get_or_init(|| {
        (
            SENTENCES.with_label_values(&[label]),
            TOKENS.with_label_values(&[label]),
        )
    });
    sentences.inc();
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
}

/// The text exposition of every metric (scaling fits are computed at scrape time).
pub fn render() -> String {
    let fits = super::scaling::TRACKER
        .lock()
        .map(|t| t.fits())
        .unwrap_or_default();
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
