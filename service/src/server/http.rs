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
use serde::Deserialize;

use super::AppState;
use subtle::ConstantTimeEq;

use super::errors::{ApiError, ErrorCode};
use super::metrics;
use super::request::{ParseJob, ParseOutcome, SentenceInput, TokenOut, decoder_from_name};

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ParseBody {
    model: Option<String>,
    decoder: Option<String>,
    text: Option<String>,
    tokens: Option<Vec<String>>,
    tags: Option<Vec<String>>,
    #[serde(default)]
    confidence: bool,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct SentenceBody {
    text: Option<String>,
    tokens: Option<Vec<String>>,
    tags: Option<Vec<String>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct BatchBody {
    model: Option<String>,
    decoder: Option<String>,
    #[serde(default)]
    confidence: bool,
    sentences: Vec<SentenceBody>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ActivateBody {
    version: String,
}

/// The router; tests call it without a socket.
pub fn router(state: Arc<AppState>) -> Router {
    Router::new()
        .route("/v1/parse", post(parse))
        .route("/v1/parse/batch", post(parse_batch))
        .route("/v1/models", get(models))
        .route("/v1/models/{name}/activate", post(activate))
        .route("/v1/openapi.json", get(openapi))
        .route(
            "/v1/scaling",
            get(|| async {
                Json(
                    super::scaling::TRACKER
                        .lock()
                        .map(|t| t.report())
                        .unwrap_or_default(),
                )
            }),
        )
        .merge(super::ui::routes())
        .route("/healthz", get(|| async { "ok" }))
        .route("/readyz", get(ready))
        .route(
            "/metrics",
            get(|| async {
                (
                    [("content-type", "text/plain; version=0.0.4")],
                    metrics::render(),
                )
            }),
        )
        .fallback(|| async {
            ApiError::new(ErrorCode::NoRoute, "no such route; see /v1/openapi.json")
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

fn sentences_json(sentences: Vec<Vec<TokenOut>>) -> serde_json::Value {
    serde_json::Value::Array(
        sentences
            .into_iter()
            .map(|tokens| serde_json::json!({ "tokens": tokens }))
            .collect(),
    )
}

fn model_json(outcome: &ParseOutcome) -> serde_json::Value {
    serde_json::json!({"name": outcome.model_name, "version": outcome.model_version})
}

async fn parse(State(state): State<Arc<AppState>>, body: Bytes) -> Result<Response, ApiError> {
    let request: ParseBody = decode_json(&state, &body).inspect_err(|e| count("parse", e))?;
    let job = ParseJob {
        model: request.model,
        decoder: decoder_from_name(request.decoder.as_deref())
            .inspect_err(|e| count("parse", e))?,
        confidence: request.confidence,
        inputs: vec![SentenceInput {
            text: request.text,
            tokens: request.tokens,
            tags: request.tags,
        }],
    };
    let mut outcome = state
        .engine
        .parse(job, state.engine.limits.deadline, "http", "parse")
        .await?;
    let sentences = outcome.results.pop().unwrap_or_default();
    Ok(Json(
        serde_json::json!({"model": model_json(&outcome), "sentences": sentences_json(sentences)}),
    )
    .into_response())
}

async fn parse_batch(
    State(state): State<Arc<AppState>>,
    body: Bytes,
) -> Result<Response, ApiError> {
    let request: BatchBody = decode_json(&state, &body).inspect_err(|e| count("parse_batch", e))?;
    let job = ParseJob {
        model: request.model,
        decoder: decoder_from_name(request.decoder.as_deref())
            .inspect_err(|e| count("parse_batch", e))?,
        confidence: request.confidence,
        inputs: request
            .sentences
            .into_iter()
            .map(|s| SentenceInput {
                text: s.text,
                tokens: s.tokens,
                tags: s.tags,
            })
            .collect(),
    };
    let outcome = state
        .engine
        .parse(job, state.engine.limits.deadline, "http", "parse_batch")
        .await?;
    let model = model_json(&outcome);
    let results: Vec<serde_json::Value> = outcome
        .results
        .into_iter()
        .map(|sentences| serde_json::json!({"sentences": sentences_json(sentences)}))
        .collect();
    Ok(Json(serde_json::json!({"model": model, "results": results})).into_response())
}

fn count(method: &str, error: &ApiError) {
    metrics::REQUESTS
        .with_label_values(&["http", method, error.code.as_str()])
        .inc();
}

async fn models(State(state): State<Arc<AppState>>) -> Result<Json<serde_json::Value>, ApiError> {
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

async fn activate(
    State(state): State<Arc<AppState>>,
    Path(name): Path<String>,
    headers: HeaderMap,
    body: Bytes,
) -> Result<Response, ApiError> {
    check_admin(
        &state,
        headers.get("authorization").and_then(|v| v.to_str().ok()),
    )?;
    let request: ActivateBody = decode_json(&state, &body)?;
    let (version, previous) = super::activate(&state, &name, &request.version).await?;
    Ok(Json(serde_json::json!({"model": {"name": name, "version": version}, "previous_version": previous})).into_response())
}

async fn ready(State(state): State<Arc<AppState>>) -> Response {
    if state.engine.registry.is_ready()
        && !state.draining.load(std::sync::atomic::Ordering::Relaxed)
    {
        (StatusCode::OK, "ready").into_response()
    } else {
        ApiError::new(ErrorCode::NotReady, "no model loaded yet, or shutting down").into_response()
    }
}

async fn openapi(State(state): State<Arc<AppState>>) -> Json<serde_json::Value> {
    Json(super::openapi::document(&state.engine.limits))
}
