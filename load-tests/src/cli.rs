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
    #[arg(long, default_value = "http://127.0.0.1:8080")]
    pub http: String,
    #[arg(long, default_value = "127.0.0.1:50051")]
    pub grpc: String,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// One open-loop run.
    Run {
        #[command(flatten)]
        target: Target,
        #[arg(long, value_enum, default_value = "grpc-parse")]
        api: Api,
        #[arg(long, default_value_t = 50.0)]
        rate: f64,
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
        #[arg(long, default_value_t = 100_000)]
        max_requests: usize,
        /// Words per demo sentence (default: the long-tailed mix).
        #[arg(long)]
        words: Option<usize>,
        /// Sentences from a CoNLL-U file instead of demo sentences.
        #[arg(long)]
        conllu: Option<String>,
        #[arg(long, default_value_t = 1)]
        batch: usize,
        #[arg(long)]
        decoder: Option<String>,
        #[arg(long)]
        confidence: bool,
        /// Closed loop instead: keep this many requests open at all times and report the
        /// completion rate (capacity); --rate is then ignored.
        #[arg(long)]
        closed: Option<usize>,
    },
    /// All scenarios; writes results.json, REPORT.md and plots to --out.
    Suite(SuiteArgs),
    /// In-process parse throughput on every core (no server): the ceiling for batch capacity.
    Local {
        /// Model directory.
        #[arg(long)]
        model_dir: PathBuf,
        #[arg(long, default_value_t = 25)]
        words: usize,
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
    },
    /// How late a sleeping thread wakes on this machine (run it with nothing else running):
    /// the floor under every hop of a request's latency.
    Probe {
        #[arg(long, default_value_t = 5.0)]
        seconds: f64,
    },
    /// Regenerate REPORT.md and the plots from a results.json.
    Report {
        #[arg(long)]
        input: PathBuf,
        #[arg(long)]
        out: PathBuf,
    },
}

/// Settings of the scenario suite.
#[derive(Debug, Args)]
pub struct SuiteArgs {
    #[command(flatten)]
    pub target: Target,
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
    #[arg(long)]
    pub model: Option<String>,
    #[arg(long, value_delimiter = ',')]
    pub swap_versions: Vec<String>,
    /// Server process id, for resident-memory readings.
    #[arg(long)]
    pub server_pid: Option<u32>,
    /// Also run the steady scenario on the sentences of this CoNLL-U file (e.g. the Turkish
    /// test split, with a Turkish model served as --conllu-model).
    #[arg(long)]
    pub conllu: Option<String>,
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
