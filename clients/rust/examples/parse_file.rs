//! Parses a CoNLL-U or text file through a running arcwright service in batches and writes
//! CoNLL-U to stdout.
//!
//! ```text
//! cargo run --release -p arcwright-client --example parse_file -- \
//!     --grpc http://127.0.0.1:50051 --input conllu test.conllu > parsed.conllu
//! cargo run --release -p arcwright-client --example parse_file -- --input text notes.txt
//! ```
//!
//! CoNLL-U input: each sentence's word forms are sent as tokens. Text input: each paragraph
//! (blank-line separated) is sent as text, and the service splits it into sentences.

use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Duration;

use arcwright_client::{Client, Input, Settings, write_conllu};
use arcwright_proto::Decoder;
use clap::{Parser, ValueEnum};

#[derive(Debug, Clone, Copy, ValueEnum)]
enum Format {
    /// CoNLL-U: the forms of each sentence are sent as tokens.
    Conllu,
    /// Raw text: each blank-line separated paragraph is sent as text.
    Text,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum DecoderArg {
    Projective,
    NonProjective,
}

#[derive(Debug, Parser)]
#[command(about = "Parse a file through an arcwright service over gRPC; CoNLL-U on stdout")]
struct Args {
    /// The file to parse.
    file: PathBuf,
    /// What the file holds.
    #[arg(long, value_enum, default_value = "conllu")]
    input: Format,
    /// The service (or load balancer) address.
    #[arg(long, default_value = "http://127.0.0.1:50051")]
    grpc: String,
    /// Model name (default: the service's default model).
    #[arg(long, default_value = "")]
    model: String,
    /// Decoder (default: the model's).
    #[arg(long, value_enum)]
    decoder: Option<DecoderArg>,
    /// Add ArcConfidence=P to MISC.
    #[arg(long)]
    confidence: bool,
    /// Inputs per call.
    #[arg(long, default_value_t = 32)]
    batch: usize,
    /// Deadline per call, in seconds.
    #[arg(long, default_value_t = 10.0)]
    deadline: f64,
    /// Attempts per batch when the service is unavailable or shedding load.
    #[arg(long, default_value_t = 5)]
    attempts: u32,
}

fn inputs(args: &Args) -> Result<Vec<Input>, String> {
    let text =
        std::fs::read_to_string(&args.file).map_err(|e| format!("{}: {e}", args.file.display()))?;
    Ok(match args.input {
        Format::Conllu => {
            let name = args.file.display().to_string();
            let document =
                arcwright_parser::conllu::read_str(&name, &text).map_err(|e| e.to_string())?;
            document
                .sentences
                .iter()
                .map(|s| Input::Tokens(s.words().map(|w| w.form.clone()).collect()))
                .collect()
        }
        Format::Text => text
            .split("\n\n")
            .map(str::trim)
            .filter(|p| !p.is_empty())
            .map(|p| Input::Text(p.to_string()))
            .collect(),
    })
}

#[tokio::main(flavor = "current_thread")]
async fn main() -> ExitCode {
    let args = Args::parse();
    let inputs = match inputs(&args) {
        Ok(inputs) => inputs,
        Err(message) => {
            eprintln!("parse_file: {message}");
            return ExitCode::from(2);
        }
    };
    let settings = Settings {
        model: args.model.clone(),
        decoder: args.decoder.map(|d| match d {
            DecoderArg::Projective => Decoder::Projective,
            DecoderArg::NonProjective => Decoder::NonProjective,
        }),
        confidence: args.confidence,
        batch_size: args.batch,
        deadline: Duration::from_secs_f64(args.deadline),
        attempts: args.attempts,
        ..Settings::default()
    };
    let parsed = match Client::connect(&args.grpc, settings).await {
        Ok(mut client) => client.parse_all(inputs).await,
        Err(e) => Err(e),
    };
    match parsed {
        Ok(parsed) => {
            let mut out = String::new();
            let mut next_id = 1;
            for result in &parsed {
                write_conllu(&result.sentences, next_id, &mut out);
                next_id += result.sentences.len();
            }
            print!("{out}");
            if let Some(first) = parsed.first() {
                eprintln!("parse_file: {} sentences by {}", next_id - 1, first.model);
            }
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("parse_file: {e}");
            ExitCode::from(1)
        }
    }
}
