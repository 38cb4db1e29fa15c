//! The two front doors as clients: HTTP/JSON (reqwest) and gRPC (tonic client generated from
//! `proto/`), with unary, batch and streaming calls.

use std::time::Duration;

use anyhow::anyhow;

pub use arcwright_proto as proto;

use proto::parser_client::ParserClient;

/// Which API and call to exercise.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize, clap::ValueEnum,
)]
pub enum Api {
    HttpParse,
    HttpBatch,
    GrpcParse,
    GrpcBatch,
    GrpcStream,
}

/// The outcome of one request.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Outcome {
    /// Parsed; the model version that answered.
    Ok(String),
    /// Refused by load shedding (HTTP 429 / RESOURCE_EXHAUSTED).
    Shed,
    /// Anything else: a failed request.
    Error(String),
}

#[derive(Debug, Clone)]
pub struct Client {
    api: Api,
    http: reqwest::Client,
    http_base: String,
    channel: Option<tonic::transport::Channel>,
    decoder: Option<String>,
    confidence: bool,
    model: Option<String>,
}

impl Client {
    /// Sends requests to a named model instead of the server's default.
    pub fn set_model(&mut self, model: Option<String>) {
        self.model = model;
    }

    pub async fn connect(
        api: Api,
        http_base: &str,
        grpc_addr: &str,
        decoder: Option<String>,
        confidence: bool,
    ) -> anyhow::Result<Client> {
        let channel = match api {
            Api::GrpcParse | Api::GrpcBatch | Api::GrpcStream => {
                let channel =
                    tonic::transport::Endpoint::from_shared(format!("http://{grpc_addr}"))?
                        .tcp_nodelay(true)
                        .connect()
                        .await?;
                Some(channel)
            }
            _ => None,
        };
        let http = reqwest::Client::builder()
            .tcp_nodelay(true)
            .pool_max_idle_per_host(256)
            .timeout(Duration::from_secs(60))
            .build()?;
        Ok(Client {
            api,
            http,
            http_base: http_base.trim_end_matches('/').to_string(),
            model: None,
            channel,
            decoder,
            confidence,
        })
    }

    fn grpc_decoder(&self) -> i32 {
        match self.decoder.as_deref() {
            Some("projective") => proto::Decoder::Projective as i32,
            Some("non-projective") => proto::Decoder::NonProjective as i32,
            _ => proto::Decoder::Unspecified as i32,
        }
    }

    fn input(tokens: &[String]) -> proto::SentenceInput {
        proto::SentenceInput {
            input: Some(proto::sentence_input::Input::Tokens(proto::TokenList {
                tokens: tokens.to_vec(),
            })),
            tags: vec![],
        }
    }

    /// Sends one request carrying `sentences` (one for unary calls).
    pub async fn send(&self, sentences: &[Vec<String>]) -> Outcome {
        match self.send_inner(sentences).await {
            Ok(outcome) => outcome,
            Err(e) => Outcome::Error(e.to_string()),
        }
    }

    async fn send_inner(&self, sentences: &[Vec<String>]) -> anyhow::Result<Outcome> {
        match self.api {
            Api::HttpParse | Api::HttpBatch => {
                let (path, body) = if self.api == Api::HttpParse {
                    (
                        "/v1/parse",
                        serde_json::json!({"model": self.model, "tokens": sentences[0], "decoder": self.decoder, "confidence": self.confidence}),
                    )
                } else {
                    let inputs: Vec<_> = sentences
                        .iter()
                        .map(|s| serde_json::json!({"tokens": s}))
                        .collect();
                    (
                        "/v1/parse/batch",
                        serde_json::json!({"model": self.model, "sentences": inputs, "decoder": self.decoder, "confidence": self.confidence}),
                    )
                };
                let response = self
                    .http
                    .post(format!("{}{path}", self.http_base))
                    .json(&body)
                    .send()
                    .await?;
                let status = response.status();
                let value: serde_json::Value = response.json().await.unwrap_or_default();
                if status.as_u16() == 429 {
                    return Ok(Outcome::Shed);
                }
                if !status.is_success() {
                    return Ok(Outcome::Error(format!("HTTP {status}: {value}")));
                }
                Ok(Outcome::Ok(
                    value["model"]["version"]
                        .as_str()
                        .unwrap_or_default()
                        .to_string(),
                ))
            }
            Api::GrpcParse | Api::GrpcBatch | Api::GrpcStream => {
                let mut client = ParserClient::new(
                    self.channel
                        .clone()
                        .ok_or_else(|| anyhow!("no gRPC channel"))?,
                );
                let result = match self.api {
                    Api::GrpcParse => client
                        .parse(proto::ParseRequest {
                            model: self.model.clone().unwrap_or_default(),
                            decoder: self.grpc_decoder(),
                            confidence: self.confidence,
                            input: Some(Client::input(&sentences[0])),
                            id: String::new(),
                        })
                        .await
                        .map(|r| r.into_inner().model.map(|m| m.version).unwrap_or_default()),
                    Api::GrpcBatch => client
                        .parse_batch(proto::ParseBatchRequest {
                            model: self.model.clone().unwrap_or_default(),
                            decoder: self.grpc_decoder(),
                            confidence: self.confidence,
                            sentences: sentences.iter().map(|s| Client::input(s)).collect(),
                        })
                        .await
                        .map(|r| r.into_inner().model.map(|m| m.version).unwrap_or_default()),
                    _ => {
                        // One stream per request: each sentence is a message, all replies awaited.
                        let messages: Vec<proto::ParseRequest> = sentences
                            .iter()
                            .enumerate()
                            .map(|(i, s)| proto::ParseRequest {
                                model: self.model.clone().unwrap_or_default(),
                                decoder: self.grpc_decoder(),
                                confidence: self.confidence,
                                input: Some(Client::input(s)),
                                id: i.to_string(),
                            })
                            .collect();
                        let expected = messages.len();
                        match client.parse_stream(tokio_stream::iter(messages)).await {
                            Ok(response) => {
                                let mut stream = response.into_inner();
                                let mut version = String::new();
                                let mut received = 0;
                                // A failed message is answered in the stream: the request counts
                                // as shed (or failed) once every reply is in.
                                let mut failed = None;
                                loop {
                                    match stream.message().await {
                                        Ok(Some(reply)) => {
                                            received += 1;
                                            match reply.error {
                                                Some(e) => {
                                                    failed.get_or_insert(tonic::Status::new(
                                                        tonic::Code::from_i32(e.code),
                                                        e.message,
                                                    ));
                                                }
                                                None => {
                                                    version = reply
                                                        .model
                                                        .map(|m| m.version)
                                                        .unwrap_or_default()
                                                }
                                            }
                                        }
                                        Ok(None) => break,
                                        Err(status) => return Ok(classify(status)),
                                    }
                                }
                                if received != expected {
                                    return Ok(Outcome::Error(format!(
                                        "stream answered {received} of {expected}"
                                    )));
                                }
                                if let Some(status) = failed {
                                    return Ok(classify(status));
                                }
                                Ok(version)
                            }
                            Err(status) => Err(status),
                        }
                    }
                };
                Ok(match result {
                    Ok(version) => Outcome::Ok(version),
                    Err(status) => classify(status),
                })
            }
        }
    }
}

/// What the generator reads of a Parse or ParseBatch answer: the model that answered and how
/// many sentences (Parse) or results (ParseBatch) came back — field 2 of both messages, kept as
/// undecoded bytes. Decoding every token of every answer made the generator spend about three
/// times the CPU per sentence, taken from the server it shares the machine with.
#[derive(Clone, PartialEq, prost::Message)]
pub struct AnswerSummary {
    #[prost(message, optional, tag = "1")]
    pub model: Option<proto::ModelRef>,
    #[prost(bytes = "bytes", repeated, tag = "2")]
    pub items: Vec<bytes::Bytes>,
}

/// Sends requests already encoded (each distinct request is encoded once per run and then
/// reused) and reads answers as [`AnswerSummary`].
#[derive(Debug, Clone, Copy, Default)]
struct PreEncoded;

impl tonic::codec::Codec for PreEncoded {
    type Encode = bytes::Bytes;
    type Decode = AnswerSummary;
    type Encoder = PreEncoded;
    type Decoder = tonic_prost::ProstDecoder<AnswerSummary>;

    fn encoder(&mut self) -> Self::Encoder {
        PreEncoded
    }

    fn decoder(&mut self) -> Self::Decoder {
        tonic_prost::ProstCodec::<bytes::Bytes, AnswerSummary>::default().decoder()
    }
}

impl tonic::codec::Encoder for PreEncoded {
    type Item = bytes::Bytes;
    type Error = tonic::Status;

    fn encode(
        &mut self,
        item: bytes::Bytes,
        dst: &mut tonic::codec::EncodeBuf<'_>,
    ) -> Result<(), tonic::Status> {
        use bytes::BufMut;
        dst.put_slice(&item);
        Ok(())
    }
}

impl Client {
    /// The request for `sentences` encoded once, for the calls that can be sent pre-encoded
    /// (gRPC Parse and ParseBatch); none for the others.
    pub fn encode(&self, sentences: &[Vec<String>]) -> Option<bytes::Bytes> {
        use prost::Message;
        let model = self.model.clone().unwrap_or_default();
        match self.api {
            Api::GrpcParse => Some(
                proto::ParseRequest {
                    model,
                    decoder: self.grpc_decoder(),
                    confidence: self.confidence,
                    input: Some(Client::input(&sentences[0])),
                    id: String::new(),
                }
                .encode_to_vec()
                .into(),
            ),
            Api::GrpcBatch => Some(
                proto::ParseBatchRequest {
                    model,
                    decoder: self.grpc_decoder(),
                    confidence: self.confidence,
                    sentences: sentences.iter().map(|s| Client::input(s)).collect(),
                }
                .encode_to_vec()
                .into(),
            ),
            _ => None,
        }
    }

    /// Sends a request made by [`Client::encode`] for `expected` sentences (Parse) or inputs
    /// (ParseBatch); an answer with a different count is an error.
    pub async fn send_encoded(&self, body: bytes::Bytes, expected: usize) -> Outcome {
        let path = match self.api {
            Api::GrpcParse => "/arcwright.v1.Parser/Parse",
            Api::GrpcBatch => "/arcwright.v1.Parser/ParseBatch",
            _ => return Outcome::Error("this call cannot be sent pre-encoded".into()),
        };
        let Some(channel) = self.channel.clone() else {
            return Outcome::Error("no gRPC channel".into());
        };
        let mut grpc = tonic::client::Grpc::new(channel);
        if let Err(e) = grpc.ready().await {
            return Outcome::Error(format!("channel not ready: {e}"));
        }
        let path = tonic::codegen::http::uri::PathAndQuery::from_static(path);
        match grpc
            .unary(tonic::Request::new(body), path, PreEncoded)
            .await
        {
            Ok(answer) => {
                let answer = answer.into_inner();
                if answer.items.len() != expected {
                    return Outcome::Error(format!(
                        "answered {} of {expected} sentences",
                        answer.items.len()
                    ));
                }
                Outcome::Ok(answer.model.map(|m| m.version).unwrap_or_default())
            }
            Err(status) => classify(status),
        }
    }
}

fn classify(status: tonic::Status) -> Outcome {
    if status.code() == tonic::Code::ResourceExhausted {
        Outcome::Shed
    } else {
        Outcome::Error(format!("{:?}: {}", status.code(), status.message()))
    }
}
