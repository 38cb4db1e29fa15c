//! `arcwright query`: parse text with a running service over gRPC, through the client generated
//! from `proto/` — the quickest way to try a deployment without another tool.

use std::io::Read;

use arcwright_parser::decode::Algorithm;
use arcwright_proto::parser_client::ParserClient;
use arcwright_proto::{Decoder, ParseRequest, SentenceInput, sentence_input};

use super::Failure;
use crate::cli::QueryOptions;

pub fn run(options: &QueryOptions) -> Result<(), Failure> {
    let text = match &options.text {
        Some(text) => text.clone(),
        None => {
            let mut text = String::new();
            std::io::stdin()
                .read_to_string(&mut text)
                .map_err(|e| Failure::bad_input(format!("stdin: {e}")))?;
            text
        }
    };
    let (endpoint, address) = super::grpc_endpoint(&options.grpc, options.timeout)?;
    let decoder = match options.decoder.map(Algorithm::from) {
        None => Decoder::Unspecified,
        Some(Algorithm::Projective) => Decoder::Projective,
        Some(Algorithm::NonProjective) => Decoder::NonProjective,
    };
    let request = ParseRequest {
        model: options.model.clone().unwrap_or_default(),
        decoder: decoder as i32,
        confidence: options.confidence,
        input: Some(SentenceInput {
            input: Some(sentence_input::Input::Text(text)),
            tags: Vec::new(),
        }),
        id: String::new(),
    };
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(Failure::runtime)?;
    let reply = runtime.block_on(async {
        let channel = endpoint
            .connect()
            .await
            .map_err(|e| Failure::runtime(format!("{address}: cannot connect: {e}")))?;
        ParserClient::new(channel)
            .parse(request)
            .await
            .map(tonic::Response::into_inner)
            .map_err(|status| match status.code() {
                tonic::Code::InvalidArgument | tonic::Code::NotFound => {
                    Failure::bad_input(status.message())
                }
                _ => Failure::runtime(format!("{address}: {}", status.message())),
            })
    })?;
    let model = reply.model.unwrap_or_default();
    let output = if options.json {
        let sentences: Vec<serde_json::Value> = reply
            .sentences
            .iter()
            .map(|s| {
                let tokens: Vec<serde_json::Value> = s
                    .tokens
                    .iter()
                    .map(|t| {
                        serde_json::json!({"id": t.id, "form": t.form, "tag": t.tag,
                            "head": t.head, "label": t.label, "confidence": t.confidence})
                    })
                    .collect();
                serde_json::json!({ "tokens": tokens })
            })
            .collect();
        let json = serde_json::json!({
            "model": {"name": model.name, "version": model.version},
            "sentences": sentences,
        });
        format!("{json:#}\n")
    } else {
        let mut out = format!("# model = {} {}\n", model.name, model.version);
        for (index, sentence) in reply.sentences.iter().enumerate() {
            out.push_str(&format!("# sent_id = {}\n", index + 1));
            let forms: Vec<&str> = sentence.tokens.iter().map(|t| t.form.as_str()).collect();
            out.push_str(&format!("# text = {}\n", forms.join(" ")));
            for t in &sentence.tokens {
                let misc = t
                    .confidence
                    .map_or("_".to_string(), |p| format!("ArcConfidence={p}"));
                out.push_str(&format!(
                    "{}\t{}\t_\t{}\t_\t_\t{}\t{}\t_\t{misc}\n",
                    t.id, t.form, t.tag, t.head, t.label
                ));
            }
            out.push('\n');
        }
        out
    };
    print!("{output}");
    Ok(())
}
