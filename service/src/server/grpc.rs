//! The gRPC front door (tonic): `arcwright.v1.Parser` and `arcwright.v1.ModelAdmin`. Decodes
//! protobuf messages into the core request path and encodes its results.

use std::pin::Pin;
use std::sync::Arc;
use std::time::Duration;

use futures::Stream;
use futures::StreamExt;
use tonic::{Request, Response, Status, Streaming};

use super::AppState;
use arcwright_parser::decode::Algorithm;

use super::errors::{ApiError, ErrorCode};
use super::request::{ParseJob, ParseOutcome, SentenceInput, TokenOut};

pub use arcwright_proto as proto;

use proto::model_admin_server::ModelAdmin;
use proto::parser_server::Parser;

#[derive(Debug, Clone)]
pub struct ParserService {
    pub state: Arc<AppState>,
}

#[derive(Debug, Clone)]
pub struct AdminService {
    pub state: Arc<AppState>,
}

fn decoder(value: i32) -> Result<Option<Algorithm>, ApiError> {
    match proto::Decoder::try_from(value) {
        Ok(proto::Decoder::Unspecified) => Ok(None),
        Ok(proto::Decoder::Projective) => Ok(Some(Algorithm::Projective)),
        Ok(proto::Decoder::NonProjective) => Ok(Some(Algorithm::NonProjective)),
        Err(_) => Err(ApiError::new(
            ErrorCode::UnknownDecoder,
            format!("unknown decoder value {value}"),
        )),
    }
}

fn input(message: Option<proto::SentenceInput>) -> SentenceInput {
    let Some(message) = message else {
        return SentenceInput::default();
    };
    let tags = (!message.tags.is_empty()).then_some(message.tags);
    match message.input {
        Some(proto::sentence_input::Input::Text(text)) => SentenceInput {
            text: Some(text),
            tokens: None,
            tags,
        },
        Some(proto::sentence_input::Input::Tokens(list)) => SentenceInput {
            text: None,
            tokens: Some(list.tokens),
            tags,
        },
        None => SentenceInput {
            text: None,
            tokens: None,
            tags,
        },
    }
}

fn sentence(tokens: Vec<TokenOut>) -> proto::ParsedSentence {
    proto::ParsedSentence {
        tokens: tokens
            .into_iter()
            .map(|t| proto::Token {
                id: t.id as u32,
                form: t.form,
                tag: t.tag,
                head: t.head as u32,
                label: t.label,
                confidence: t.confidence,
            })
            .collect(),
    }
}

fn model_ref(outcome: &ParseOutcome) -> proto::ModelRef {
    proto::ModelRef {
        name: outcome.model_name.clone(),
        version: outcome.model_version.clone(),
    }
}

/// The request's deadline: the server's, or less if the client sent `grpc-timeout`.
fn deadline<T>(state: &AppState, request: &Request<T>) -> Duration {
    let configured = state.engine.limits.deadline;
    let Some(value) = request
        .metadata()
        .get("grpc-timeout")
        .and_then(|v| v.to_str().ok())
    else {
        return configured;
    };
    let (digits, unit) = value.split_at(value.len().saturating_sub(1));
    let Ok(amount) = digits.parse::<u64>() else {
        return configured;
    };
    let asked = match unit {
        "H" => Duration::from_secs(amount * 3600),
        "M" => Duration::from_secs(amount * 60),
        "S" => Duration::from_secs(amount),
        "m" => Duration::from_millis(amount),
        "u" => Duration::from_micros(amount),
        "n" => Duration::from_nanos(amount),
        _ => return configured,
    };
    asked.min(configured)
}

async fn parse_one(
    state: &AppState,
    message: proto::ParseRequest,
    deadline: Duration,
    method: &str,
) -> Result<proto::ParseResponse, ApiError> {
    let span = tracing::info_span!("grpc", method, request_id = %super::new_request_id());
    tracing::Instrument::instrument(parse_one_inner(state, message, deadline, method), span).await
}

async fn parse_one_inner(
    state: &AppState,
    message: proto::ParseRequest,
    deadline: Duration,
    method: &str,
) -> Result<proto::ParseResponse, ApiError> {
    let job = ParseJob {
        model: Some(message.model),
        decoder: decoder(message.decoder)?,
        confidence: message.confidence,
        inputs: vec![input(message.input)],
    };
    let mut outcome = state.engine.parse(job, deadline, "grpc", method).await?;
    let sentences = outcome
        .results
        .pop()
        .unwrap_or_default()
        .into_iter()
        .map(sentence)
        .collect();
    Ok(proto::ParseResponse {
        model: Some(model_ref(&outcome)),
        sentences,
        id: message.id,
        error: None,
    })
}

/// Messages of one ParseStream call parsed at the same time, at most.
const STREAM_CONCURRENCY: usize = 8;

/// The in-stream answer to a message that failed with `status`.
fn message_error(id: String, status: Status) -> proto::ParseResponse {
    proto::ParseResponse {
        model: None,
        sentences: Vec::new(),
        id,
        error: Some(proto::MessageError {
            code: status.code() as i32,
            message: status.message().to_string(),
        }),
    }
}

type ResponseStream = Pin<Box<dyn Stream<Item = Result<proto::ParseResponse, Status>> + Send>>;

#[tonic::async_trait]
impl Parser for ParserService {
    async fn parse(
        &self,
        request: Request<proto::ParseRequest>,
    ) -> Result<Response<proto::ParseResponse>, Status> {
        let deadline = deadline(&self.state, &request);
        Ok(Response::new(
            parse_one(&self.state, request.into_inner(), deadline, "parse").await?,
        ))
    }

    async fn parse_batch(
        &self,
        request: Request<proto::ParseBatchRequest>,
    ) -> Result<Response<proto::ParseBatchResponse>, Status> {
        let deadline = deadline(&self.state, &request);
        let message = request.into_inner();
        let job = ParseJob {
            model: Some(message.model),
            decoder: decoder(message.decoder)?,
            confidence: message.confidence,
            inputs: message
                .sentences
                .into_iter()
                .map(|s| input(Some(s)))
                .collect(),
        };
        let outcome = self
            .state
            .engine
            .parse(job, deadline, "grpc", "parse_batch")
            .await?;
        let model = Some(model_ref(&outcome));
        let results = outcome
            .results
            .into_iter()
            .map(|sentences| proto::BatchResult {
                sentences: sentences.into_iter().map(sentence).collect(),
            })
            .collect();
        Ok(Response::new(proto::ParseBatchResponse { model, results }))
    }

    type ParseStreamStream = ResponseStream;

    async fn parse_stream(
        &self,
        request: Request<Streaming<proto::ParseRequest>>,
    ) -> Result<Response<ResponseStream>, Status> {
        let deadline = deadline(&self.state, &request);
        let incoming = request.into_inner();
        let state = self.state.clone();
        let (sender, receiver) = tokio::sync::mpsc::channel(16);
        tokio::spawn(async move {
            // Up to STREAM_CONCURRENCY messages of the stream are parsed at once (each still
            // admitted or shed by the engine like any request); replies go out as they finish.
            let replies = incoming
                .map(move |message| {
                    let state = state.clone();
                    async move {
                        match message {
                            // A message that fails (shed, invalid, unknown model) is answered in
                            // the stream, so one busy moment or one bad sentence does not end a
                            // long stream.
                            Ok(message) => {
                                let id = message.id.clone();
                                match parse_one(&state, message, deadline, "parse_stream").await {
                                    Ok(reply) => Ok(reply),
                                    Err(error) => Ok(message_error(id, Status::from(error))),
                                }
                            }
                            Err(status) => Err(status),
                        }
                    }
                })
                .buffer_unordered(STREAM_CONCURRENCY);
            let mut replies = std::pin::pin!(replies);
            while let Some(reply) = replies.next().await {
                let broken = reply.is_err();
                if sender.send(reply).await.is_err() || broken {
                    break;
                }
            }
        });
        Ok(Response::new(Box::pin(
            tokio_stream::wrappers::ReceiverStream::new(receiver),
        )))
    }
}

fn admin_check<T>(state: &AppState, request: &Request<T>) -> Result<(), Status> {
    let header = request
        .metadata()
        .get("authorization")
        .and_then(|v| v.to_str().ok());
    super::http::check_admin(state, header).map_err(Status::from)
}

#[tonic::async_trait]
impl ModelAdmin for AdminService {
    async fn list_models(
        &self,
        _request: Request<proto::ListModelsRequest>,
    ) -> Result<Response<proto::ListModelsResponse>, Status> {
        let status = super::models_status(&self.state).await?;
        let models = status["models"]
            .as_array()
            .map(|models| {
                models
                    .iter()
                    .map(|m| proto::ModelStatus {
                        name: m["name"].as_str().unwrap_or_default().to_string(),
                        live_version: m["live"].as_str().unwrap_or_default().to_string(),
                        serving_version: m["serving"]["version"]
                            .as_str()
                            .unwrap_or_default()
                            .to_string(),
                        is_default: m["default"].as_bool().unwrap_or(false),
                        serving_kind: m["serving"]["kind"]
                            .as_str()
                            .unwrap_or_default()
                            .to_string(),
                        versions: m["versions"]
                            .as_array()
                            .map(|vs| {
                                vs.iter()
                                    .map(|v| proto::ModelVersion {
                                        version: v["version"]
                                            .as_str()
                                            .unwrap_or_default()
                                            .to_string(),
                                        size_bytes: v["size_bytes"].as_u64().unwrap_or(0),
                                        kind: v["kind"].as_str().unwrap_or_default().to_string(),
                                        created: v["created"]
                                            .as_str()
                                            .unwrap_or_default()
                                            .to_string(),
                                        aliases: v["aliases"]
                                            .as_array()
                                            .map(|a| {
                                                a.iter()
                                                    .filter_map(|x| x.as_str().map(str::to_string))
                                                    .collect()
                                            })
                                            .unwrap_or_default(),
                                    })
                                    .collect()
                            })
                            .unwrap_or_default(),
                    })
                    .collect()
            })
            .unwrap_or_default();
        Ok(Response::new(proto::ListModelsResponse { models }))
    }

    async fn activate_model(
        &self,
        request: Request<proto::ActivateModelRequest>,
    ) -> Result<Response<proto::ActivateModelResponse>, Status> {
        admin_check(&self.state, &request)?;
        let message = request.into_inner();
        let (version, previous) =
            super::activate(&self.state, &message.name, &message.version).await?;
        Ok(Response::new(proto::ActivateModelResponse {
            model: Some(proto::ModelRef {
                name: message.name,
                version,
            }),
            previous_version: previous.unwrap_or_default(),
        }))
    }

    async fn get_rollout(
        &self,
        request: Request<proto::GetRolloutRequest>,
    ) -> Result<Response<proto::GetRolloutResponse>, Status> {
        let name = request.into_inner().name;
        let status = super::rollout_status(&self.state, &name).await?;
        let text = |v: &serde_json::Value| v.as_str().unwrap_or_default().to_string();
        let bucket = |b: &serde_json::Value| proto::RolloutBucket {
            length_bucket: text(&b["length_bucket"]),
            sentences: b["sentences"].as_u64().unwrap_or(0),
            words: b["words"].as_u64().unwrap_or(0),
            errors: b["errors"].as_u64().unwrap_or(0),
            head_agreement: b["head_agreement"].as_f64().unwrap_or(0.0),
            label_agreement: b["label_agreement"].as_f64().unwrap_or(0.0),
            latency_ratio: b["latency_ratio"].as_f64().unwrap_or(0.0),
        };
        let shadow = &status["shadow"];
        Ok(Response::new(proto::GetRolloutResponse {
            name,
            live_version: text(&status["live_version"]),
            candidate_version: text(&status["candidate_version"]),
            shadowing: status["shadowing"].as_bool().unwrap_or(false),
            mode: text(&status["policy"]["mode"]),
            sample: status["policy"]["sample"].as_f64().unwrap_or(0.0),
            shed: shadow["shed"].as_u64().unwrap_or(0),
            total: shadow.get("total").filter(|t| !t.is_null()).map(bucket),
            buckets: shadow["buckets"]
                .as_array()
                .map(|bs| bs.iter().map(bucket).collect())
                .unwrap_or_default(),
            verdict: text(&shadow["gates"]["verdict"]),
            decision: text(&shadow["decision"]),
            reason: text(&shadow["reason"]),
        }))
    }
}
