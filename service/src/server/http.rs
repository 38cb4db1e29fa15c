//! The HTTP/JSON front door (axum). Decodes requests into the core request path and encodes its
//! results; errors are `{"error": {"code", "message"}}` with a 4xx for bad input.

use std::sync::Arc;

use axum::body::{Body, Bytes};
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, Request, StatusCode};
use axum::middleware::{self, Next};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

use super::AppState;
use subtle::ConstantTimeEq;

use super::errors::{ApiError, ErrorCode, ErrorResponse};
use super::metrics;
use super::request::{ParseJob, ParseOutcome, SentenceInput, TokenOut, decoder_from_name};

// Request and reply bodies. The OpenAPI document (`openapi.rs`) is derived from these types and
// the handlers' annotations, so it cannot drift from what the server reads and writes.

/// The decoders a request may name (absent: the model's default).
#[derive(Debug, ToSchema)]
#[schema(rename_all = "kebab-case")]
#[allow(dead_code)] // documents the accepted strings; requests carry them as text
pub enum DecoderName {
    Projective,
    NonProjective,
}

/// `POST /v1/parse`: exactly one of `text` (one or more sentences) or `tokens` (one sentence).
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[schema(as = ParseRequest)]
pub struct ParseBody {
    /// Model name (default: the service's default model).
    model: Option<String>,
    #[schema(value_type = Option<DecoderName>)]
    decoder: Option<String>,
    #[schema(min_length = 1)]
    text: Option<String>,
    #[schema(min_items = 1)]
    tokens: Option<Vec<String>>,
    /// One part-of-speech tag per token (only with `tokens`); skips the tagger.
    #[schema(min_items = 1)]
    tags: Option<Vec<String>>,
    /// Also return each arc's marginal probability.
    #[serde(default)]
    confidence: bool,
}

/// One input of a batch: `text` or `tokens` (with optional `tags`).
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[schema(as = SentenceInput)]
pub struct SentenceBody {
    #[schema(min_length = 1)]
    text: Option<String>,
    #[schema(min_items = 1)]
    tokens: Option<Vec<String>>,
    #[schema(min_items = 1)]
    tags: Option<Vec<String>>,
}

/// `POST /v1/parse/batch`.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[schema(as = BatchRequest)]
pub struct BatchBody {
    model: Option<String>,
    #[schema(value_type = Option<DecoderName>)]
    decoder: Option<String>,
    #[serde(default)]
    confidence: bool,
    #[schema(min_items = 1)]
    sentences: Vec<SentenceBody>,
}

/// `POST /v1/models/{name}/activate`.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[schema(as = ActivateRequest)]
pub struct ActivateBody {
    version: String,
}

/// The model version that made a reply.
#[derive(Debug, Serialize, ToSchema)]
pub struct ModelRef {
    name: String,
    version: String,
}

/// One parsed sentence.
#[derive(Debug, Serialize, ToSchema)]
pub struct Sentence {
    tokens: Vec<TokenOut>,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct ParseResponse {
    model: ModelRef,
    sentences: Vec<Sentence>,
}

/// The sentences of one batch input, in order.
#[derive(Debug, Serialize, ToSchema)]
pub struct BatchResult {
    sentences: Vec<Sentence>,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct BatchResponse {
    model: ModelRef,
    /// One result per input, in input order.
    results: Vec<BatchResult>,
}

#[derive(Debug, Serialize, ToSchema)]
pub struct ActivateResponse {
    model: ModelRef,
    previous_version: Option<String>,
}

/// `GET /v1/models` (each model's versions, aliases, serving version and swap history).
#[derive(Debug, ToSchema)]
#[allow(dead_code)] // the reply is assembled as JSON in `models_status`; this documents it
pub struct ModelsResponse {
    models: Vec<serde_json::Value>,
    /// Whether this replica has an admin token, i.e. whether promote and rollback can work
    /// through it (the console hides its admin controls otherwise).
    admin_routes: bool,
}

/// The error replies of the parse routes (documentation only: every error is an `ApiError`).
#[derive(utoipa::IntoResponses)]
#[allow(dead_code)]
enum ParseErrors {
    #[response(status = 400, description = "Bad input")]
    BadInput(ErrorResponse),
    #[response(status = 404, description = "Unknown model")]
    UnknownModel(ErrorResponse),
    #[response(status = 413, description = "Body over the limit")]
    TooLarge(ErrorResponse),
    #[response(
        status = 429,
        description = "Too many requests in flight (load shedding)"
    )]
    Overloaded(ErrorResponse),
    #[response(status = 503, description = "No model loaded yet, or shutting down")]
    Unavailable(ErrorResponse),
    #[response(status = 504, description = "Deadline exceeded")]
    Deadline(ErrorResponse),
}

fn sentences(results: Vec<Vec<TokenOut>>) -> Vec<Sentence> {
    results
        .into_iter()
        .map(|tokens| Sentence { tokens })
        .collect()
}

fn model_ref(outcome: &ParseOutcome) -> ModelRef {
    ModelRef {
        name: outcome.model_name.clone(),
        version: outcome.model_version.clone(),
    }
}

/// The router; tests call it without a socket.
pub fn router(state: Arc<AppState>) -> Router {
    Router::new()
        .route("/v1/parse", post(parse))
        .route("/v1/parse/batch", post(parse_batch))
        .route("/v1/models", get(models))
        .route("/v1/models/{name}/activate", post(activate))
        .route("/v1/models/{name}/rollout", get(rollout))
        .route("/v1/openapi.json", get(openapi))
        .route("/v1/scaling", get(scaling))
        .merge(super::ui::routes())
        .route("/healthz", get(healthz))
        .route("/readyz", get(ready))
        .route("/metrics", get(prometheus_metrics))
        .fallback(|| async {
            ApiError::new(ErrorCode::NoRoute, "no such route; see /v1/openapi.json")
        })
        // A known route called with a method it does not take: the JSON error body, with the
        // `Allow` header the router adds.
        .method_not_allowed_fallback(|method: axum::http::Method| async move {
            ApiError::new(
                ErrorCode::MethodNotAllowed,
                format!(
                    "this route does not take {method} (the Allow header lists the methods it \
                     takes); see /v1/openapi.json"
                ),
            )
        })
        .layer(middleware::from_fn(request_id))
        .with_state(state)
}

/// Accepts and echoes `x-request-id` (one is made when absent) and records it on the span.
async fn request_id(mut request: Request<Body>, next: Next) -> Response {
    let id = request
        .headers()
        .get("x-request-id")
        .and_then(|v| v.to_str().ok())
        .filter(|v| !v.is_empty() && v.len() <= 128)
        .map(str::to_string)
        .unwrap_or_else(super::new_request_id);
    if let Ok(value) = HeaderValue::from_str(&id) {
        request.headers_mut().insert("x-request-id", value.clone());
        // The request id (never the request text) on every log line of this request.
        let span = tracing::info_span!("http", request_id = %id, method = %request.method(), path = %request.uri().path());
        let mut response = tracing::Instrument::instrument(next.run(request), span).await;
        response.headers_mut().insert("x-request-id", value);
        return response;
    }
    next.run(request).await
}

/// Reads a JSON body with the configured size limit; every failure is a clear 4xx.
fn decode_json<T: for<'de> Deserialize<'de>>(
    state: &AppState,
    body: &Bytes,
) -> Result<T, ApiError> {
    if body.len() > state.engine.limits.max_body_bytes {
        return Err(ApiError::new(
            ErrorCode::BodyTooLarge,
            format!(
                "body of {} bytes; the limit is {}",
                body.len(),
                state.engine.limits.max_body_bytes
            ),
        ));
    }
    if body.is_empty() {
        return Err(ApiError::new(
            ErrorCode::EmptyBody,
            "the request body is empty; send a JSON object",
        ));
    }
    if let Err(e) = std::str::from_utf8(body) {
        return Err(ApiError::new(
            ErrorCode::InvalidUtf8,
            format!("the body is not valid UTF-8 (byte {})", e.valid_up_to()),
        ));
    }
    serde_json::from_slice(body).map_err(|e| {
        ApiError::new(
            ErrorCode::MalformedJson,
            format!("invalid JSON request: {e}"),
        )
    })
}

#[utoipa::path(post, path = "/v1/parse", request_body = ParseBody,
    summary = "Parse one text (one or more sentences) or one tokenized sentence",
    responses((status = 200, description = "Parsed", body = ParseResponse),
        ParseErrors))]
pub(super) async fn parse(
    State(state): State<Arc<AppState>>,
    body: Bytes,
) -> Result<Json<ParseResponse>, ApiError> {
    let request: ParseBody = decode_json(&state, &body).inspect_err(|e| count("parse", e))?;
    let input = SentenceInput {
        text: request.text,
        tokens: request.tokens,
        tags: request.tags,
    };
    let job = parse_job(
        "parse",
        request.model,
        request.decoder,
        request.confidence,
        vec![input],
    )?;
    let mut outcome = state
        .engine
        .parse(job, state.engine.limits.deadline, "http", "parse")
        .await?;
    let results = outcome.results.pop().unwrap_or_default();
    Ok(Json(ParseResponse {
        model: model_ref(&outcome),
        sentences: sentences(results),
    }))
}

#[utoipa::path(post, path = "/v1/parse/batch", request_body = BatchBody,
    summary = "Parse several inputs; results keep input order",
    responses((status = 200, description = "Parsed, in input order", body = BatchResponse),
        ParseErrors))]
pub(super) async fn parse_batch(
    State(state): State<Arc<AppState>>,
    body: Bytes,
) -> Result<Json<BatchResponse>, ApiError> {
    let request: BatchBody = decode_json(&state, &body).inspect_err(|e| count("parse_batch", e))?;
    let inputs = request
        .sentences
        .into_iter()
        .map(|s| SentenceInput {
            text: s.text,
            tokens: s.tokens,
            tags: s.tags,
        })
        .collect();
    let job = parse_job(
        "parse_batch",
        request.model,
        request.decoder,
        request.confidence,
        inputs,
    )?;
    let outcome = state
        .engine
        .parse(job, state.engine.limits.deadline, "http", "parse_batch")
        .await?;
    Ok(Json(BatchResponse {
        model: model_ref(&outcome),
        results: outcome
            .results
            .into_iter()
            .map(|results| BatchResult {
                sentences: sentences(results),
            })
            .collect(),
    }))
}

/// A parse job from a request's fields; an unknown decoder is counted as the method's error.
fn parse_job(
    method: &str,
    model: Option<String>,
    decoder: Option<String>,
    confidence: bool,
    inputs: Vec<SentenceInput>,
) -> Result<ParseJob, ApiError> {
    Ok(ParseJob {
        model,
        decoder: decoder_from_name(decoder.as_deref()).inspect_err(|e| count(method, e))?,
        confidence,
        inputs,
    })
}

fn count(method: &str, error: &ApiError) {
    metrics::REQUESTS
        .with_label_values(&["http", method, error.code.as_str()])
        .inc();
}

#[utoipa::path(get, path = "/v1/models",
    summary = "Models, versions, aliases and the version being served",
    responses((status = 200, description = "Models", body = ModelsResponse),
        (status = 503, description = "Store unavailable", body = ErrorResponse)))]
pub(super) async fn models(
    State(state): State<Arc<AppState>>,
) -> Result<Json<serde_json::Value>, ApiError> {
    Ok(Json(super::models_status(&state).await?))
}

/// Checks `Authorization: Bearer <token>` against the admin token (constant-time comparison).
pub fn check_admin(state: &AppState, presented: Option<&str>) -> Result<(), ApiError> {
    let Some(expected) = &state.admin_token else {
        return Err(ApiError::new(
            ErrorCode::AdminDisabled,
            "admin routes are off: no admin token is configured",
        ));
    };
    let presented = presented
        .and_then(|h| h.strip_prefix("Bearer "))
        .unwrap_or("");
    // `subtle` compares in time independent of where the bytes differ (only the length shows).
    let same: bool = presented.as_bytes().ct_eq(expected.as_bytes()).into();
    if same {
        Ok(())
    } else {
        Err(ApiError::new(
            ErrorCode::Unauthenticated,
            "missing or wrong admin token (Authorization: Bearer …)",
        ))
    }
}

#[utoipa::path(post, path = "/v1/models/{name}/activate", request_body = ActivateBody,
    summary = "Point the store's live alias at a version and swap this replica (admin)",
    params(("name" = String, Path, description = "Model name")),
    security(("admin_token" = [])),
    responses((status = 200, description = "Activated", body = ActivateResponse),
        (status = 400, description = "Bad input", body = ErrorResponse),
        (status = 401, description = "Missing or wrong admin token", body = ErrorResponse),
        (status = 403, description = "Admin routes are off", body = ErrorResponse),
        (status = 404, description = "Unknown version", body = ErrorResponse),
        (status = 413, description = "Body over the limit", body = ErrorResponse),
        (status = 500, description = "The alias moved but this replica could not load the version", body = ErrorResponse),
        (status = 503, description = "Store unavailable", body = ErrorResponse)))]
pub(super) async fn activate(
    State(state): State<Arc<AppState>>,
    Path(name): Path<String>,
    headers: HeaderMap,
    body: Bytes,
) -> Result<Json<ActivateResponse>, ApiError> {
    check_admin(
        &state,
        headers.get("authorization").and_then(|v| v.to_str().ok()),
    )?;
    let request: ActivateBody = decode_json(&state, &body)?;
    let (version, previous) = super::activate(&state, &name, &request.version).await?;
    Ok(Json(ActivateResponse {
        model: ModelRef { name, version },
        previous_version: previous,
    }))
}

#[utoipa::path(get, path = "/v1/models/{name}/rollout",
    summary = "The model's candidate judged on shadow traffic: agreement with live, latency ratio and errors per length bucket, the gates and their decision, and the audit log's latest entries",
    params(("name" = String, Path, description = "Model name")),
    responses((status = 200, description = "Rollout state", body = Object),
        (status = 404, description = "Unknown model", body = ErrorResponse),
        (status = 503, description = "Store unavailable", body = ErrorResponse)))]
pub(super) async fn rollout(
    State(state): State<Arc<AppState>>,
    Path(name): Path<String>,
) -> Result<Json<serde_json::Value>, ApiError> {
    Ok(Json(super::rollout_status(&state, &name).await?))
}

#[utoipa::path(get, path = "/readyz", summary = "Readiness: a model is loaded",
    responses((status = 200, description = "Ready", body = String, content_type = "text/plain"),
        (status = 503, description = "Not ready", body = ErrorResponse)))]
pub(super) async fn ready(State(state): State<Arc<AppState>>) -> Response {
    if state.engine.registry.is_ready()
        && !state.draining.load(std::sync::atomic::Ordering::Relaxed)
    {
        (StatusCode::OK, "ready").into_response()
    } else {
        ApiError::new(ErrorCode::NotReady, "no model loaded yet, or shutting down").into_response()
    }
}

#[utoipa::path(get, path = "/healthz", summary = "Liveness",
    responses((status = 200, description = "Alive", body = String, content_type = "text/plain")))]
pub(super) async fn healthz() -> &'static str {
    "ok"
}

#[utoipa::path(get, path = "/metrics", summary = "Prometheus text exposition",
    responses((status = 200, description = "Metrics", body = String, content_type = "text/plain")))]
pub(super) async fn prometheus_metrics() -> impl IntoResponse {
    (
        [("content-type", "text/plain; version=0.0.4")],
        metrics::render(),
    )
}

#[utoipa::path(get, path = "/v1/scaling",
    summary = "Latency against sentence length: exponent fits, cost models t(n) = a + l·n + b·n² + c·n³ and per-bucket quantiles per decoder and stage, and the decoder probe's last run; with `tokens`, the predicted time of that length",
    params(("tokens" = Option<usize>, Query, minimum = 1, maximum = 4096,
        description = "Predict each stage's time for a sentence of this many tokens")),
    responses((status = 200, description = "Fits, cost models and buckets", body = Object),
        (status = 400, description = "Bad query parameter", body = ErrorResponse)))]
pub(super) async fn scaling(
    axum::extract::RawQuery(query): axum::extract::RawQuery,
) -> Result<Json<serde_json::Value>, ApiError> {
    let mut tokens = None;
    for pair in query
        .as_deref()
        .unwrap_or("")
        .split('&')
        .filter(|p| !p.is_empty())
    {
        match pair.split_once('=') {
            Some(("tokens", value)) => {
                let n = value
                    .parse::<usize>()
                    .ok()
                    .filter(|n| (1..=4096).contains(n))
                    .ok_or_else(|| {
                        ApiError::new(
                            ErrorCode::BadQuery,
                            format!("tokens={value:?}: expected a whole number from 1 to 4096"),
                        )
                    })?;
                tokens = Some(n);
            }
            _ => {
                return Err(ApiError::new(
                    ErrorCode::BadQuery,
                    format!("unknown query parameter {pair:?}; this route takes tokens=N"),
                ));
            }
        }
    }
    let mut report = super::scaling::TRACKER
        .lock()
        .map_err(|_| ApiError::new(ErrorCode::Internal, "scaling tracker unavailable"))?
        .report(tokens);
    report["probe"] = super::probe::report();
    Ok(Json(report))
}

#[utoipa::path(get, path = "/v1/openapi.json", summary = "This document",
    responses((status = 200, description = "OpenAPI document", body = Object)))]
pub(super) async fn openapi(State(state): State<Arc<AppState>>) -> Json<serde_json::Value> {
    Json(super::openapi::document(&state.engine.limits))
}
