//! The one request path shared by gRPC and HTTP: validate → take a model snapshot → tokenize →
//! tag, score, decode, label (on the compute pool) → results that name the model version.
//! The front doors only decode their wire format into [`ParseJob`] and encode [`ParseOutcome`].

use std::sync::Arc;
use std::time::{Duration, Instant};

use arcwright_parser::decode::Algorithm;
use arcwright_parser::pipeline::{self, ParseOptions, StageObserver};
use arcwright_parser::tokenize::{self, Abbreviations};
use tokio::sync::Semaphore;

use super::config::Limits;
use super::cpu_clock;
use super::errors::{ApiError, ErrorCode};
use super::metrics::{self, Stage};
use super::registry::{Registry, Served};

/// One input: raw text (may hold several sentences) or tokens (one sentence), optional tags.
#[derive(Debug, Clone, Default)]
pub struct SentenceInput {
    pub text: Option<String>,
    pub tokens: Option<Vec<String>>,
    pub tags: Option<Vec<String>>,
}

/// A parse request in core terms.
#[derive(Debug, Clone, Default)]
pub struct ParseJob {
    pub model: Option<String>,
    /// `None`: the model's default decoder.
    pub decoder: Option<Algorithm>,
    pub confidence: bool,
    pub inputs: Vec<SentenceInput>,
}

/// One parsed word.
#[derive(Debug, Clone, serde::Serialize, utoipa::ToSchema)]
#[schema(as = Token)]
pub struct TokenOut {
    /// Position in the sentence, from 1.
    #[schema(minimum = 1)]
    pub id: usize,
    pub form: String,
    pub tag: String,
    /// The head word's id; 0 = the root.
    pub head: usize,
    pub label: String,
    /// P(head → word) under the model's tree distribution, when asked for (left out for a word
    /// whose marginals could not be computed accurately within the effort bound).
    /// In JSON rounded to 6 decimals (gRPC carries the full double).
    #[serde(
        skip_serializing_if = "Option::is_none",
        serialize_with = "six_decimals"
    )]
    #[schema(minimum = 0.0, maximum = 1.0)]
    pub confidence: Option<f64>,
}

/// Rounds to 6 decimals through the correctly rounded decimal rendering, so the JSON shows
/// `0.981234` rather than seventeen digits whose tail means nothing to a reader.
fn six_decimals<S: serde::Serializer>(
    value: &Option<f64>,
    serializer: S,
) -> Result<S::Ok, S::Error> {
    match value {
        Some(p) => {
            let rounded: f64 = format!("{p:.6}").parse().unwrap_or(*p);
            serializer.serialize_f64(rounded)
        }
        None => serializer.serialize_none(),
    }
}

/// Results per input, each a list of sentences of tokens, in input order.
#[derive(Debug, Clone)]
pub struct ParseOutcome {
    pub model_name: String,
    pub model_version: String,
    pub results: Vec<Vec<Vec<TokenOut>>>,
}

/// Shared state of the request path.
#[derive(Debug)]
pub struct Engine {
    pub registry: Arc<Registry>,
    pub pool: rayon::ThreadPool,
    pub limits: Limits,
    pub permits: Arc<Semaphore>,
    pub rollout: Arc<super::rollout::Rollout>,
}

/// A validated sentence ready for the pool.
struct Work {
    input: usize,
    forms: Vec<String>,
    tags: Option<Vec<String>>,
}

fn has_control(text: &str, allow_line_breaks: bool) -> Option<char> {
    text.chars()
        .find(|c| c.is_control() && !(allow_line_breaks && matches!(c, '\n' | '\r' | '\t')))
}

/// The decoder a client named (absent or empty: the model's default).
pub fn decoder_from_name(name: Option<&str>) -> Result<Option<Algorithm>, ApiError> {
    match name.filter(|n| !n.is_empty()) {
        None => Ok(None),
        Some(n) => Algorithm::from_name(n).map(Some).ok_or_else(|| {
            ApiError::new(
                ErrorCode::UnknownDecoder,
                format!("unknown decoder {n:?}; use \"projective\" or \"non-projective\""),
            )
        }),
    }
}

impl Engine {
    /// Checks every input against the limits and splits it into sentences to parse (no model
    /// needed yet), taking the tokens over rather than copying them.
    fn validate(
        &self,
        inputs: Vec<SentenceInput>,
        abbreviations: &Abbreviations,
    ) -> Result<Vec<Work>, ApiError> {
        let limits = &self.limits;
        let batch = inputs.len() > 1;
        if inputs.is_empty() {
            return Err(ApiError::new(ErrorCode::EmptyBatch, "no sentences given"));
        }
        if inputs.len() > limits.max_sentences {
            return Err(ApiError::new(
                ErrorCode::BatchTooLarge,
                format!(
                    "{} sentences in the batch; the limit is {}",
                    inputs.len(),
                    limits.max_sentences
                ),
            ));
        }
        let mut work = Vec::with_capacity(inputs.len());
        for (index, input) in inputs.into_iter().enumerate() {
            let invalid = |code: ErrorCode, message: String| {
                if batch {
                    ApiError::new(code, format!("sentence {index}: {message}"))
                } else {
                    ApiError::new(code, message)
                }
            };
            match (input.text, input.tokens) {
                (Some(_), Some(_)) => {
                    return Err(invalid(
                        ErrorCode::TextAndTokens,
                        "give either text or tokens, not both".into(),
                    ));
                }
                (None, None) => {
                    return Err(invalid(ErrorCode::NoInput, "give text or tokens".into()));
                }
                (Some(text), None) => {
                    if input.tags.is_some() {
                        return Err(invalid(
                            ErrorCode::TagsWithoutTokens,
                            "tags can only be given with tokens".into(),
                        ));
                    }
                    if let Some(c) = has_control(&text, true) {
                        return Err(invalid(
                            ErrorCode::ControlCharacter,
                            format!("text contains the control character {c:?}"),
                        ));
                    }
                    let sentences: Vec<Vec<String>> = tokenize::split(&text, abbreviations)
                        .into_iter()
                        .map(|s| s.tokens)
                        .collect();
                    if sentences.is_empty() {
                        return Err(invalid(ErrorCode::EmptyText, "text has no words".into()));
                    }
                    if sentences.len() > limits.max_sentences {
                        return Err(invalid(
                            ErrorCode::TooManySentences,
                            format!(
                                "text holds {} sentences; the limit is {}",
                                sentences.len(),
                                limits.max_sentences
                            ),
                        ));
                    }
                    for forms in sentences {
                        if forms.len() > limits.max_tokens {
                            return Err(invalid(
                                ErrorCode::SentenceTooLong,
                                format!(
                                    "a sentence has {} tokens; the limit is {}",
                                    forms.len(),
                                    limits.max_tokens
                                ),
                            ));
                        }
                        work.push(Work {
                            input: index,
                            forms,
                            tags: None,
                        });
                    }
                }
                (None, Some(tokens)) => {
                    if tokens.is_empty() {
                        return Err(invalid(
                            ErrorCode::EmptyTokens,
                            "tokens is an empty list".into(),
                        ));
                    }
                    if tokens.len() > limits.max_tokens {
                        return Err(invalid(
                            ErrorCode::SentenceTooLong,
                            format!(
                                "{} tokens; the limit is {}",
                                tokens.len(),
                                limits.max_tokens
                            ),
                        ));
                    }
                    for (i, token) in tokens.iter().enumerate() {
                        if token.trim().is_empty() {
                            return Err(invalid(
                                ErrorCode::EmptyToken,
                                format!("token {i} is empty"),
                            ));
                        }
                        if let Some(c) = has_control(token, false) {
                            return Err(invalid(
                                ErrorCode::ControlCharacter,
                                format!("token {i} contains the control character {c:?}"),
                            ));
                        }
                    }
                    if let Some(tags) = &input.tags {
                        if tags.len() != tokens.len() {
                            return Err(invalid(
                                ErrorCode::TagsMismatch,
                                format!(
                                    "{} tags for {} tokens; give one tag per token",
                                    tags.len(),
                                    tokens.len()
                                ),
                            ));
                        }
                        if let Some((i, _)) = tags
                            .iter()
                            .enumerate()
                            .find(|(_, t)| t.trim().is_empty() || has_control(t, false).is_some())
                        {
                            return Err(invalid(
                                ErrorCode::BadTag,
                                format!("tag {i} is empty or has control characters"),
                            ));
                        }
                    }
                    work.push(Work {
                        input: index,
                        forms: tokens,
                        tags: input.tags,
                    });
                }
            }
        }
        Ok(work)
    }

    /// Runs a job: validation, admission (load shedding), the model snapshot, parsing on the
    /// pool within `deadline`. `api` and `method` label the metrics.
    pub async fn parse(
        &self,
        job: ParseJob,
        deadline: Duration,
        api: &str,
        method: &str,
    ) -> Result<ParseOutcome, ApiError> {
        let started = Instant::now();
        let result = self.parse_inner(job, deadline, api).await;
        if result.is_ok() {
            metrics::REQUEST_DURATION
                .with_label_values(&[api, method])
                .observe(started.elapsed().as_secs_f64());
        }
        let code = match &result {
            Ok(_) => "ok",
            Err(e) => e.code.as_str(),
        };
        metrics::REQUESTS
            .with_label_values(&[api, method, code])
            .inc();
        result
    }

    async fn parse_inner(
        &self,
        job: ParseJob,
        deadline: Duration,
        api: &str,
    ) -> Result<ParseOutcome, ApiError> {
        let started = Instant::now();
        let options = ParseOptions {
            decoder: job.decoder,
            confidence: job.confidence,
            ..ParseOptions::default()
        };
        let Ok(permit) = self.permits.clone().try_acquire_owned() else {
            metrics::SHED.with_label_values(&[api]).inc();
            return Err(ApiError::new(
                ErrorCode::Overloaded,
                format!(
                    "{} requests in flight; retry later",
                    self.limits.max_in_flight
                ),
            ));
        };
        metrics::IN_FLIGHT.inc();
        let _in_flight = scopeguard(|| metrics::IN_FLIGHT.dec());
        let served: Arc<Served> = self.registry.snapshot(job.model.as_deref())?;
        let outcome: Result<ParseOutcome, ApiError> = async {
            let inputs = job.inputs.len();
            let tokenize_started = Instant::now();
            let work = self.validate(job.inputs, &served.model.abbreviations)?;
            // Each sentence's share of the request's checking and tokenizing, so that a batch's
            // sentences do not each report the whole batch's time.
            let tokenize_seconds =
                tokenize_started.elapsed().as_secs_f64() / work.len().max(1) as f64;
            // A sample of the requests to a model with a candidate is copied for shadow parses
            // (never waited for).
            self.rollout.offer(
                &served,
                self.registry.candidate(&served.name),
                job.decoder,
                || {
                    work.iter()
                        .map(|w| (w.forms.clone(), w.tags.clone()))
                        .collect()
                },
            );
            let (sender, receiver) = tokio::sync::oneshot::channel();
            let snapshot = served.clone();
            let cutoff = started + deadline;
            let span = tracing::Span::current();
            let queued = Instant::now();
            self.pool.spawn(move || {
                metrics::QUEUE_WAIT.observe(queued.elapsed().as_secs_f64());
                let _request = span.enter(); // stage spans on the pool belong to the request's span
                use rayon::prelude::*;
                let parsed: Vec<Option<(usize, Vec<TokenOut>)>> =
                    if snapshot.model.scorer.scores_faster_together() && work.len() > 1 {
                        // Sentences of similar lengths scored together, one group per parsing
                        // thread (at most GROUP_SENTENCES each).
                        let mut work = work;
                        work.sort_by_key(|w| w.forms.len());
                        let threads = rayon::current_num_threads().max(1);
                        let size = work.len().div_ceil(threads).clamp(1, GROUP_SENTENCES);
                        let mut groups: Vec<Vec<Work>> = Vec::new();
                        for w in work {
                            match groups.last_mut() {
                                Some(g) if g.len() < size => g.push(w),
                                _ => groups.push(vec![w]),
                            }
                        }
                        groups
                            .into_par_iter()
                            .flat_map_iter(|group| {
                                if Instant::now() > cutoff {
                                    return vec![None; group.len()];
                                }
                                parse_group(&snapshot, group, &options, tokenize_seconds)
                                    .into_iter()
                                    .map(Some)
                                    .collect()
                            })
                            .collect()
                    } else {
                        work.into_par_iter()
                            .map(|w| {
                                if Instant::now() > cutoff {
                                    return None; // the caller has given up; skip the work
                                }
                                Some((
                                    w.input,
                                    parse_sentence(&snapshot, w, &options, tokenize_seconds, true),
                                ))
                            })
                            .collect()
                    };
                let _ = sender.send(parsed);
                drop(permit);
            });
            let remaining = deadline.saturating_sub(started.elapsed());
            let parsed = match tokio::time::timeout(remaining, receiver).await {
                Ok(Ok(parsed)) => parsed,
                Ok(Err(_)) => {
                    return Err(ApiError::new(
                        ErrorCode::Internal,
                        "the parsing task ended unexpectedly",
                    ));
                }
                Err(_) => {
                    return Err(ApiError::new(
                        ErrorCode::DeadlineExceeded,
                        format!(
                            "not finished within the deadline of {:.3} s",
                            deadline.as_secs_f64()
                        ),
                    ));
                }
            };
            let mut results: Vec<Vec<Vec<TokenOut>>> = vec![Vec::new(); inputs];
            for entry in parsed {
                let Some((input, sentence)) = entry else {
                    return Err(ApiError::new(
                        ErrorCode::DeadlineExceeded,
                        "not finished within the deadline",
                    ));
                };
                results[input].push(sentence);
            }
            if self.rollout.inject_failure(&served.version) {
                return Err(ApiError::new(
                    ErrorCode::Internal,
                    "injected failure (test switch --inject-failures)",
                ));
            }
            Ok(ParseOutcome {
                model_name: served.name.clone(),
                model_version: served.version.clone(),
                results,
            })
        }
        .await;
        // What the model answered, for the rollback band (bad input is not the model's doing).
        match &outcome {
            Ok(_) => super::rollout::record_request(&served, false),
            Err(e) if matches!(e.code, ErrorCode::Internal | ErrorCode::DeadlineExceeded) => {
                super::rollout::record_request(&served, true)
            }
            Err(_) => {}
        }
        outcome
    }
}

/// Parses `forms` exactly as a request would, with or without recording metrics: the
/// benchmark of metrics overhead (`cargo bench -p arcwright --bench metrics_overhead`) compares
/// the two.
pub fn parse_for_benchmark(served: &Served, forms: &[String], record_metrics: bool) -> usize {
    let work = Work {
        input: 0,
        forms: forms.to_vec(),
        tags: None,
    };
    let options = ParseOptions {
        decoder: Some(Algorithm::Projective),
        ..ParseOptions::default()
    };
    parse_sentence(served, work, &options, 0.0, record_metrics).len()
}

/// Collects the pipeline's stage times into the service's stage metrics (recorded together at
/// the end of the sentence: one lock, no per-stage label lookups).
struct StageTimes {
    seconds: [f64; metrics::STAGES.len()],
    /// Confidences and labels, which have no metric stage of their own.
    untracked: f64,
}

impl StageObserver for StageTimes {
    fn stage_done(&mut self, stage: pipeline::Stage, seconds: f64) {
        let stage = match stage {
            pipeline::Stage::Tag => Stage::Tag,
            pipeline::Stage::Score => Stage::Score,
            pipeline::Stage::Decode => Stage::Decode,
            // Confidences and labels count towards the total only.
            pipeline::Stage::Confidence | pipeline::Stage::Label => {
                self.untracked += seconds;
                return;
            }
        };
        tracing::debug!(stage = stage.name(), seconds, "stage done");
        self.seconds[stage as usize] = seconds;
    }
}

/// Parses one sentence through the library's pipeline and records its stage times.
fn parse_sentence(
    served: &Served,
    work: Work,
    options: &ParseOptions,
    tokenize_seconds: f64,
    record_metrics: bool,
) -> Vec<TokenOut> {
    let model = &served.model;
    let decoder = options.decoder.unwrap_or(model.default_decoder);
    let tokens = work.forms.len();
    let _span = tracing::debug_span!("sentence", tokens, decoder = decoder.name()).entered();
    let mut times = StageTimes {
        seconds: [0.0; metrics::STAGES.len()],
        untracked: 0.0,
    };
    times.seconds[Stage::Tokenize as usize] = tokenize_seconds;
    let (total, cpu) = (Instant::now(), cpu_clock::thread_seconds());
    let parsed = model.parse_observed(&work.forms, work.tags.as_deref(), options, &mut times);
    times.seconds[Stage::Total as usize] = total.elapsed().as_secs_f64();
    let cpu = cpu_clock::thread_seconds() - cpu;
    if record_metrics {
        metrics::record_sentence(&times.seconds, cpu, parsed.decoder, tokens);
        super::rollout::record_sentence(served, tokens, cpu);
    }
    tokens_out(work.forms, parsed)
}

/// Sentences scored together by a model whose scorer is faster that way
/// ([`pipeline::parse_many`]); each records its own stages, with an equal share of the joint
/// scoring time, and a total that is the sum of its stages.
fn parse_group(
    served: &Served,
    group: Vec<Work>,
    options: &ParseOptions,
    tokenize_seconds: f64,
) -> Vec<(usize, Vec<TokenOut>)> {
    let _span = tracing::debug_span!("sentences", count = group.len()).entered();
    let mut times: Vec<StageTimes> = group
        .iter()
        .map(|_| StageTimes {
            seconds: [0.0; metrics::STAGES.len()],
            untracked: 0.0,
        })
        .collect();
    let inputs: Vec<pipeline::Input<'_>> = group
        .iter()
        .map(|w| pipeline::Input {
            forms: &w.forms,
            tags: w.tags.as_deref(),
        })
        .collect();
    let mut observers: Vec<&mut dyn StageObserver> = times
        .iter_mut()
        .map(|t| t as &mut dyn StageObserver)
        .collect();
    let cpu = cpu_clock::thread_seconds();
    let parsed = pipeline::parse_many(&served.model, &inputs, options, &mut observers);
    // The group's CPU time in equal shares, as its joint scoring time.
    let cpu = (cpu_clock::thread_seconds() - cpu) / group.len().max(1) as f64;
    drop(observers);
    group
        .into_iter()
        .zip(parsed)
        .zip(times.iter_mut())
        .map(|((work, parsed), times)| {
            times.seconds[Stage::Tokenize as usize] = tokenize_seconds;
            times.seconds[Stage::Total as usize] = times.seconds[Stage::Tag as usize]
                + times.seconds[Stage::Score as usize]
                + times.seconds[Stage::Decode as usize]
                + times.untracked;
            metrics::record_sentence(&times.seconds, cpu, parsed.decoder, work.forms.len());
            super::rollout::record_sentence(served, work.forms.len(), cpu);
            (work.input, tokens_out(work.forms, parsed))
        })
        .collect()
}

/// The reply's tokens of one parsed sentence.
fn tokens_out(forms: Vec<String>, parsed: pipeline::Parsed) -> Vec<TokenOut> {
    let mut confidences = parsed.confidences.map(Vec::into_iter);
    forms
        .into_iter()
        .zip(parsed.tags)
        .zip(parsed.labels)
        .zip(parsed.heads.arcs())
        .map(|(((form, tag), label), (id, head))| TokenOut {
            id,
            form,
            tag,
            head,
            label,
            confidence: confidences.as_mut().and_then(|c| c.next().flatten()),
        })
        .collect()
}

/// The most sentences scored together in one group (a padded batch through a neural encoder):
/// 8 scored 1.6× faster per sentence than one at a time, 32 only 1.2× (`neural_speed` bench,
/// docs/performance.md).
const GROUP_SENTENCES: usize = 8;

/// Runs `f` when dropped.
fn scopeguard(f: impl FnOnce()) -> impl Drop {
    struct Guard<F: FnOnce()>(Option<F>);
    impl<F: FnOnce()> Drop for Guard<F> {
        fn drop(&mut self) {
            if let Some(f) = self.0.take() {
                f();
            }
        }
    }
    Guard(Some(f))
}
