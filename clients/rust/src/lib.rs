//! A client for the arcwright service over gRPC (the API in `proto/arcwright/v1/parser.proto`).
//!
//! What it adds to the generated stubs: sentences sent in batches of a chosen size (one
//! `ParseBatch` call each, replies in input order), a deadline per call, and retries with
//! exponential backoff when the service answers `UNAVAILABLE` (starting, draining, a replica
//! gone behind a load balancer) or `RESOURCE_EXHAUSTED` (shedding load). Other errors — bad
//! input, an unknown model — are returned at once: retrying cannot fix them.
//!
//! ```no_run
//! # async fn run() -> Result<(), arcwright_client::ClientError> {
//! use arcwright_client::{Client, Input, Settings};
//! let mut client = Client::connect("http://127.0.0.1:50051", Settings::default()).await?;
//! let parsed = client
//!     .parse_all(vec![Input::Text("The pilot signed the manifest.".into())])
//!     .await?;
//! for sentence in &parsed[0].sentences {
//!     for token in &sentence.tokens {
//!         println!("{} {} → {} {}", token.id, token.form, token.head, token.label);
//!     }
//! }
//! # Ok(())
//! # }
//! ```

use std::time::Duration;

use arcwright_proto::parser_client::ParserClient;
use arcwright_proto::{
    Decoder, ParseBatchRequest, ParsedSentence, SentenceInput, TokenList, sentence_input,
};
use tonic::transport::{Channel, Endpoint};
use tonic::{Code, Status};

/// How the client calls the service.
#[derive(Debug, Clone)]
pub struct Settings {
    /// Model name; empty = the service's default model.
    pub model: String,
    /// `None`: the model's default decoder.
    pub decoder: Option<Decoder>,
    /// Ask for per-arc confidences.
    pub confidence: bool,
    /// Inputs per `ParseBatch` call (keep within the service's sentence limit, 64 by default).
    pub batch_size: usize,
    /// Deadline of each call, sent to the service as `grpc-timeout`.
    pub deadline: Duration,
    /// Attempts per batch, the first included (1 = no retries).
    pub attempts: u32,
    /// Wait before the first retry; doubled after each, up to `max_backoff`.
    pub backoff: Duration,
    pub max_backoff: Duration,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            model: String::new(),
            decoder: None,
            confidence: false,
            batch_size: 32,
            deadline: Duration::from_secs(10),
            attempts: 5,
            backoff: Duration::from_millis(100),
            max_backoff: Duration::from_secs(2),
        }
    }
}

/// One input: raw text (the service splits it into sentences and words) or one sentence's
/// tokens.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Input {
    Text(String),
    Tokens(Vec<String>),
}

/// The parse of one input: its sentences (several for a text of several sentences).
#[derive(Debug, Clone, PartialEq)]
pub struct Parsed {
    pub sentences: Vec<ParsedSentence>,
    /// `name@version` of the model that parsed it.
    pub model: String,
}

#[derive(Debug, thiserror::Error)]
pub enum ClientError {
    #[error("invalid address {address:?}: {source}")]
    Address {
        address: String,
        source: tonic::transport::Error,
    },
    /// The service refused the batch (the status names why), or kept refusing it after every
    /// attempt.
    #[error("batch of inputs {first}..{end}: {status_code:?}: {message} (after {attempts} attempt(s))", status_code = .status.code(), message = .status.message())]
    Refused {
        first: usize,
        end: usize,
        attempts: u32,
        status: Status,
    },
}

/// Whether a status is worth another attempt.
pub fn is_retryable(code: Code) -> bool {
    matches!(code, Code::Unavailable | Code::ResourceExhausted)
}

/// A connection to one service address (or a load balancer in front of many).
#[derive(Debug, Clone)]
pub struct Client {
    inner: ParserClient<Channel>,
    settings: Settings,
}

impl Client {
    /// Connects lazily: the first call opens the connection, so a service that is still starting
    /// is retried like any other `UNAVAILABLE`.
    pub async fn connect(address: &str, settings: Settings) -> Result<Client, ClientError> {
        let endpoint =
            Endpoint::from_shared(address.to_string()).map_err(|source| ClientError::Address {
                address: address.to_string(),
                source,
            })?;
        let channel = endpoint.connect_timeout(settings.deadline).connect_lazy();
        Ok(Client {
            inner: ParserClient::new(channel),
            settings,
        })
    }

    pub fn settings(&self) -> &Settings {
        &self.settings
    }

    /// Parses every input, `batch_size` at a time, and returns the results in input order.
    pub async fn parse_all(&mut self, inputs: Vec<Input>) -> Result<Vec<Parsed>, ClientError> {
        let mut out = Vec::with_capacity(inputs.len());
        let size = self.settings.batch_size.max(1);
        let mut first = 0;
        let mut rest = inputs;
        while !rest.is_empty() {
            let tail = rest.split_off(rest.len().min(size));
            let batch = std::mem::replace(&mut rest, tail);
            let count = batch.len();
            out.extend(self.parse_batch(first, batch).await?);
            first += count;
        }
        Ok(out)
    }

    async fn parse_batch(
        &mut self,
        first: usize,
        batch: Vec<Input>,
    ) -> Result<Vec<Parsed>, ClientError> {
        let message = ParseBatchRequest {
            model: self.settings.model.clone(),
            decoder: self.settings.decoder.unwrap_or(Decoder::Unspecified) as i32,
            confidence: self.settings.confidence,
            sentences: batch.iter().map(to_wire).collect(),
        };
        let mut wait = self.settings.backoff;
        let attempts = self.settings.attempts.max(1);
        for attempt in 1..=attempts {
            let mut request = tonic::Request::new(message.clone());
            request.set_timeout(self.settings.deadline);
            match self.inner.parse_batch(request).await {
                Ok(reply) => {
                    let reply = reply.into_inner();
                    let model = reply
                        .model
                        .map(|m| format!("{}@{}", m.name, m.version))
                        .unwrap_or_default();
                    return Ok(reply
                        .results
                        .into_iter()
                        .map(|r| Parsed {
                            sentences: r.sentences,
                            model: model.clone(),
                        })
                        .collect());
                }
                Err(status) if is_retryable(status.code()) && attempt < attempts => {
                    tokio::time::sleep(wait).await;
                    wait = (wait * 2).min(self.settings.max_backoff);
                }
                Err(status) => {
                    return Err(ClientError::Refused {
                        first,
                        end: first + batch.len(),
                        attempts: attempt,
                        status,
                    });
                }
            }
        }
        unreachable!("the last attempt returns")
    }
}

fn to_wire(input: &Input) -> SentenceInput {
    SentenceInput {
        input: Some(match input {
            Input::Text(text) => sentence_input::Input::Text(text.clone()),
            Input::Tokens(tokens) => sentence_input::Input::Tokens(TokenList {
                tokens: tokens.clone(),
            }),
        }),
        tags: Vec::new(),
    }
}

/// Writes parsed sentences as CoNLL-U: `# sent_id` (numbered from `first_id`) and `# text`
/// (the forms joined by spaces), then ID, FORM, UPOS, HEAD, DEPREL and, with confidences,
/// `ArcConfidence=P` in MISC.
pub fn write_conllu(sentences: &[ParsedSentence], first_id: usize, out: &mut String) {
    use std::fmt::Write;
    for (i, sentence) in sentences.iter().enumerate() {
        let text: Vec<&str> = sentence.tokens.iter().map(|t| t.form.as_str()).collect();
        let _ = writeln!(out, "# sent_id = {}", first_id + i);
        let _ = writeln!(out, "# text = {}", text.join(" "));
        for t in &sentence.tokens {
            let misc = t
                .confidence
                .map_or("_".to_string(), |p| format!("ArcConfidence={p}"));
            let _ = writeln!(
                out,
                "{}\t{}\t_\t{}\t_\t_\t{}\t{}\t_\t{}",
                t.id, t.form, t.tag, t.head, t.label, misc
            );
        }
        out.push('\n');
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_unavailable_and_resource_exhausted_are_retried() {
        for code in [Code::Unavailable, Code::ResourceExhausted] {
            assert!(is_retryable(code), "{code:?}");
        }
        for code in [
            Code::InvalidArgument,
            Code::NotFound,
            Code::DeadlineExceeded,
            Code::Unauthenticated,
            Code::Internal,
        ] {
            assert!(!is_retryable(code), "{code:?}");
        }
    }

    #[test]
    fn conllu_has_ids_text_and_confidence() {
        let sentence = ParsedSentence {
            tokens: vec![
                arcwright_proto::Token {
                    id: 1,
                    form: "Tugs".into(),
                    tag: "NOUN".into(),
                    head: 2,
                    label: "nsubj".into(),
                    confidence: Some(0.75),
                },
                arcwright_proto::Token {
                    id: 2,
                    form: "wait".into(),
                    tag: "VERB".into(),
                    head: 0,
                    label: "root".into(),
                    confidence: None,
                },
            ],
        };
        let mut out = String::new();
        write_conllu(&[sentence], 7, &mut out);
        assert_eq!(
            out,
            "# sent_id = 7\n# text = Tugs wait\n\
             1\tTugs\t_\tNOUN\t_\t_\t2\tnsubj\t_\tArcConfidence=0.75\n\
             2\twait\t_\tVERB\t_\t_\t0\troot\t_\t_\n\n"
        );
    }
}
