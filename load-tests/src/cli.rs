//! Command-line definitions of `arcwright-load` (clap): what each subcommand takes.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

use crate::client::Api;

#[derive(Debug, Parser)]
#[command(
    name = "arcwright-load",
    about = "Open-loop load tests for the arcwright service"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Args, Clone)]
pub struct Target {
    /// The service's HTTP base URL.
    #[arg(long, default_value = "http://127.0.0.1:8080")]
    pub http: String,
    /// The service's gRPC address (host:port).
    #[arg(long, default_value = "127.0.0.1:50051")]
    pub grpc: String,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// One open-loop run.
    #[command(
        after_help = "Example:\n  arcwright-load run --api http-batch --batch 8 --rate 40 --seconds 10"
    )]
    Run {
        #[command(flatten)]
        target: Target,
        /// Which endpoint to call.
        #[arg(long, value_enum, default_value = "grpc-parse")]
        api: Api,
        /// Requests started per second, on a fixed schedule whatever the replies do.
        #[arg(long, default_value_t = 50.0)]
        rate: f64,
        /// How long to send, in seconds.
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
        /// Stop after this many requests even if time remains.
        #[arg(long, default_value_t = 100_000)]
        max_requests: usize,
        /// Words per demo sentence (default: the long-tailed mix).
        #[arg(long)]
        words: Option<usize>,
        /// Sentences from a CoNLL-U file instead of demo sentences.
        #[arg(long)]
        conllu: Option<String>,
        /// Sentences per request (batch endpoints; the stream sends them as separate messages).
        #[arg(long, default_value_t = 1)]
        batch: usize,
        /// Decoder to ask for: projective or non-projective (default: the model's).
        #[arg(long)]
        decoder: Option<String>,
        /// Ask for per-arc confidences too.
        #[arg(long)]
        confidence: bool,
        /// Closed loop instead: keep this many requests open at all times and report the
        /// completion rate (capacity); --rate is then ignored.
        #[arg(long)]
        closed: Option<usize>,
    },
    /// All scenarios; writes results.json, REPORT.md and plots to --out.
    #[command(
        after_help = "Example:\n  arcwright-load suite --quick --out load-results --server-pid \"$(pgrep -f 'arcwright serve')\""
    )]
    Suite(SuiteArgs),
    /// In-process parse throughput on every core (no server): the ceiling for batch capacity.
    #[command(after_help = "Example:\n  arcwright-load local --model-dir my-model --words 40")]
    Local {
        /// Model directory.
        #[arg(long)]
        model_dir: PathBuf,
        /// Words per demo sentence.
        #[arg(long, default_value_t = 25)]
        words: usize,
        /// How long to parse, in seconds.
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
    },
    /// How late a sleeping thread wakes on this machine (run it with nothing else running):
    /// the floor under every hop of a request's latency.
    #[command(after_help = "Example:\n  arcwright-load probe --seconds 5")]
    Probe {
        /// How long to measure, in seconds.
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
    },
    /// Sentences per second per core for a length distribution, predicted by a running
    /// service's cost models (`/v1/scaling`), per decoder.
    #[command(
        after_help = "Example:\n  arcwright-load plan --http http://127.0.0.1:8080 --conllu corpus.conllu"
    )]
    Plan {
        /// The service's HTTP base URL.
        #[arg(long, default_value = "http://127.0.0.1:8080")]
        http: String,
        /// The lengths of this CoNLL-U file's sentences.
        #[arg(long, conflicts_with = "lengths", required_unless_present = "lengths")]
        conllu: Option<String>,
        /// A file of sentence lengths (whole numbers separated by white space or commas).
        #[arg(long)]
        lengths: Option<PathBuf>,
    },
    /// Regenerate REPORT.md and the plots from a results.json.
    #[command(
        after_help = "Example:\n  arcwright-load report --input load-tests/results.json --out load-tests"
    )]
    Report {
        /// The results.json a suite wrote.
        #[arg(long)]
        input: PathBuf,
        /// Folder for REPORT.md and the plots.
        #[arg(long)]
        out: PathBuf,
    },
}

/// Settings of the scenario suite.
#[derive(Debug, Args)]
pub struct SuiteArgs {
    #[command(flatten)]
    pub target: Target,
    /// Folder for results.json, REPORT.md and the plots.
    #[arg(long)]
    pub out: PathBuf,
    /// Short durations (seconds per scenario) for smoke runs.
    #[arg(long)]
    pub quick: bool,
    /// p99 budget for the knee, in milliseconds.
    #[arg(long, default_value_t = 50.0)]
    pub budget_ms: f64,
    /// Admin token and versions to activate in turn during the swap scenario.
    #[arg(long)]
    pub admin_token: Option<String>,
    /// The model whose versions the swap scenario activates in turn.
    #[arg(long)]
    pub model: Option<String>,
    /// Versions (comma-separated) the swap scenario activates in turn.
    #[arg(long, value_delimiter = ',')]
    pub swap_versions: Vec<String>,
    /// Server process id, for resident-memory readings.
    #[arg(long)]
    pub server_pid: Option<u32>,
    /// Also run the steady scenario on the sentences of this CoNLL-U file (e.g. the Turkish
    /// test split, with a Turkish model served as --conllu-model).
    #[arg(long)]
    pub conllu: Option<String>,
    /// The served model that parses the --conllu sentences.
    #[arg(long)]
    pub conllu_model: Option<String>,
    /// Model directory of the served default model: measures in-process parse throughput on
    /// the same sentences (all cores), for the batch-throughput ratio.
    #[arg(long)]
    pub model_dir: Option<PathBuf>,
    /// Description of the machine for the report.
    #[arg(
        long,
        default_value = "2 cores; generator and server on the same machine"
    )]
    pub machine: String,
}

#[cfg(test)]
mod tests {
    use clap::CommandFactory;

    /// Every flag has help text and every subcommand ends its `--help` with an example.
    #[test]
    fn every_flag_has_help_and_every_command_an_example() {
        let mut missing = Vec::new();
        for command in super::Cli::command().get_subcommands() {
            if command.get_name() == "help" {
                continue;
            }
            for arg in command.get_arguments() {
                let id = arg.get_id().as_str();
                if id != "help" && arg.get_help().is_none() {
                    missing.push(format!("{} {id}: no help", command.get_name()));
                }
            }
            let example = command
                .get_after_help()
                .is_some_and(|h| h.to_string().starts_with("Example:\n  arcwright-load "));
            if !example {
                missing.push(format!("{}: no example", command.get_name()));
            }
        }
        assert!(missing.is_empty(), "{missing:#?}");
    }
}
