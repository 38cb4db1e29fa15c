//! Command-line definitions (clap). Only parsing and validation of what the user typed; the
//! commands themselves live in `commands/`.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand, ValueEnum};

#[derive(Debug, Parser)]
#[command(
    name = "arcwright",
    version,
    about = "Dependency parsing: train, evaluate, decode and serve"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Decode the best tree of a JSON arc-score matrix read from stdin.
    #[command(
        after_help = "Example:\n  echo '{\"scores\": [[0, 0, 0], [5, 0, 1], [1, 4, 0]]}' | arcwright decode --decoder non-projective --marginals"
    )]
    Decode(DecodeOptions),
    /// Check, inspect, split or rewrite CoNLL-U files.
    Conllu(ConlluOptions),
    /// Train a tagger and a labeled parser from CoNLL-U; write a model directory.
    #[command(
        after_help = "Example:\n  arcwright train --train split/train.conllu --dev split/dev.conllu --out my-model --epochs 8"
    )]
    Train(TrainOptions),
    /// Evaluate a model on a gold CoNLL-U file (JSON on stdout, a table on stderr).
    #[command(
        after_help = "Example:\n  arcwright eval --model my-model --gold split/test.conllu --exclude-label punct > scores.json"
    )]
    Eval(EvalOptions),
    /// Refit a model's confidence calibration on held-out CoNLL-U; write the model again.
    #[command(
        after_help = "Example:\n  arcwright calibrate --model my-model --held-out split/dev.conllu --out my-model-calibrated"
    )]
    Calibrate(CalibrateOptions),
    /// Parse stdin (CoNLL-U or text) to CoNLL-U on stdout.
    #[command(
        after_help = "Example:\n  echo \"The pilot signed the manifest.\" | arcwright parse --model my-model --input text"
    )]
    Parse(ParseOptions),
    /// Write demo sentences with gold trees (an invented harbour-crew scenario) as CoNLL-U.
    #[command(
        after_help = "Example:\n  arcwright demo-data --sentences 500 --seed 7 > demo.conllu"
    )]
    DemoData(DemoDataOptions),
    /// Publish, list, promote, roll back, verify, fetch and prune model versions.
    Store(StoreOptions),
    /// Serve every live model of a store over gRPC and HTTP/JSON, following model changes.
    #[command(
        after_help = "Example:\n  arcwright serve --store ./arcwright-store --http 127.0.0.1:8080 --grpc 127.0.0.1:50051"
    )]
    Serve(crate::server::config::ServeArgs),
    /// Ask a running service whether it is serving (grpc.health.v1); exit 0 if so, 1 if not.
    /// For container health checks, where the runtime image has no other client.
    #[command(after_help = "Example:\n  arcwright health --grpc 127.0.0.1:50051 --timeout 2")]
    Health(HealthOptions),
    /// Time both decoders on synthetic sentences of 32-512 words and judge their growth, as
    /// every replica of `serve` does in the background (JSON on stdout, one object per run).
    #[command(after_help = "Example:\n  arcwright probe --runs 5")]
    Probe(ProbeOptions),
    /// Parse text with a running service over gRPC (the client generated from proto/); prints
    /// CoNLL-U, or the reply as JSON with --json.
    Query(QueryOptions),
}

#[derive(Debug, Args)]
#[command(
    after_help = "Example:\n  arcwright query --grpc 127.0.0.1:50051 --confidence \"The pilot signed the manifest.\""
)]
pub struct QueryOptions {
    /// The text to parse (one or more sentences); read from stdin when absent.
    pub text: Option<String>,
    /// The service's gRPC address.
    #[arg(long, env = "ARCWRIGHT_GRPC", default_value = "127.0.0.1:50051")]
    pub grpc: String,
    /// Model name (default: the service's default model).
    #[arg(long)]
    pub model: Option<String>,
    /// Decoder (default: the model's own).
    #[arg(long, value_enum)]
    pub decoder: Option<AlgorithmArg>,
    /// Ask for each arc's marginal probability (written to MISC as ArcConfidence=P).
    #[arg(long)]
    pub confidence: bool,
    /// Print the reply as JSON instead of CoNLL-U.
    #[arg(long)]
    pub json: bool,
    /// Give up after this many seconds.
    #[arg(long, default_value_t = 10.0)]
    pub timeout: f64,
}

#[derive(Debug, Args)]
pub struct ProbeOptions {
    /// Runs, one after the other.
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..=100))]
    pub runs: u32,
    /// Test switch: time the textbook decoders with an extra linear factor instead.
    #[arg(long, hide = true)]
    pub slowed: bool,
}

#[derive(Debug, Args)]
pub struct HealthOptions {
    /// The service's gRPC address.
    #[arg(long, env = "ARCWRIGHT_GRPC", default_value = "127.0.0.1:50051")]
    pub grpc: String,
    /// The health service name to ask about ("" = the whole server).
    #[arg(long, default_value = "")]
    pub service: String,
    /// Give up after this many seconds.
    #[arg(long, default_value_t = 3.0)]
    pub timeout: f64,
}

#[derive(Debug, Args)]
pub struct StoreOptions {
    /// Store URL: a path, file:///abs/path, or s3://bucket/prefix (AWS_* variables for S3).
    #[arg(long, global = true, env = "ARCWRIGHT_STORE", default_value = crate::server::config::DEFAULT_STORE)]
    pub store: String,
    #[command(subcommand)]
    pub action: StoreAction,
}

#[derive(Debug, Subcommand)]
pub enum StoreAction {
    /// Publish a model directory as a new version; prints the version id.
    #[command(
        after_help = "Example:\n  arcwright store publish --store ./arcwright-store --name harbour my-model --scores scores.json"
    )]
    Publish {
        /// Model name.
        #[arg(long)]
        name: String,
        /// The model directory (as written by `arcwright train`).
        dir: PathBuf,
        /// Evaluation scores to record in the manifest (a JSON file, e.g. `arcwright eval` output).
        #[arg(long)]
        scores: Option<PathBuf>,
    },
    /// List models, or one model's versions with sizes, scores and aliases.
    #[command(
        after_help = "Example:\n  arcwright store list --store ./arcwright-store --name harbour"
    )]
    List {
        /// One model\'s versions (default: every model).
        #[arg(long)]
        name: Option<String>,
        /// One JSON document instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Point an alias (default `live`) at a version, after verifying it.
    #[command(
        after_help = "Example:\n  arcwright store promote --store ./arcwright-store --name harbour --version 20261203T101500.123456Z-3f2a9c1d"
    )]
    Promote {
        /// Model name.
        #[arg(long)]
        name: String,
        /// Version id (as `store publish` printed it).
        #[arg(long)]
        version: String,
        /// Alias name.
        #[arg(long, default_value = "live")]
        alias: String,
        /// Refuse a version whose manifest LAS or UAS is more than this many points below the
        /// version the alias points at now, scored on the same evaluation data.
        #[arg(long, default_value_t = 0.5, value_name = "POINTS")]
        max_drop: f64,
        /// Promote even when the score gate refuses (recorded as forced in the audit log).
        #[arg(long)]
        force: bool,
        /// Why, for the audit log.
        #[arg(long, default_value = "")]
        reason: String,
    },
    /// Move an alias (default `live`) back to its previous target.
    #[command(
        after_help = "Example:\n  arcwright store rollback --store ./arcwright-store --name harbour"
    )]
    Rollback {
        /// Model name.
        #[arg(long)]
        name: String,
        /// Alias name.
        #[arg(long, default_value = "live")]
        alias: String,
        /// Why, for the audit log.
        #[arg(long, default_value = "")]
        reason: String,
    },
    /// Show or set a model's rollout policy (how replicas judge its candidates; what it leaves
    /// out, each replica's own settings fill).
    #[command(
        after_help = "Example:\n  arcwright store policy --store s3://models/fleet --name harbour --mode automatic --min-agreement 0.92"
    )]
    Policy {
        /// Model name.
        #[arg(long)]
        name: String,
        /// Candidates promoted by hand or by the gates.
        #[arg(long, value_parser = ["manual", "automatic"])]
        mode: Option<String>,
        /// Share of requests the candidate also parses.
        #[arg(long)]
        shadow_sample: Option<f64>,
        /// Sentences compared before an automatic decision.
        #[arg(long)]
        min_sentences: Option<u64>,
        /// Least share of words with live's head.
        #[arg(long)]
        min_agreement: Option<f64>,
        /// Most candidate CPU time per live CPU time.
        #[arg(long)]
        max_latency_ratio: Option<f64>,
        /// Seconds outside the band before an automatic rollback (0 = never).
        #[arg(long)]
        rollback_seconds: Option<f64>,
        /// Start from an empty policy (the replicas' own settings) instead of the current one.
        #[arg(long)]
        clear: bool,
    },
    /// The audit log of a model: every alias move and refusal, oldest first.
    #[command(
        after_help = "Example:\n  arcwright store history --store ./arcwright-store --name harbour"
    )]
    History {
        /// Model name.
        #[arg(long)]
        name: String,
        /// One JSON document instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Re-check the checksums of one version, or of every version of a model.
    #[command(
        after_help = "Example:\n  arcwright store verify --store s3://models/arcwright --name harbour"
    )]
    Verify {
        /// Model name.
        #[arg(long)]
        name: String,
        /// Version id (default: every version for verify, the `live` one for fetch).
        #[arg(long)]
        version: Option<String>,
    },
    /// Download and verify a version (default: the `live` one) into a local directory.
    #[command(
        after_help = "Example:\n  arcwright store fetch --store s3://models/arcwright --name harbour --cache /var/cache/arcwright"
    )]
    Fetch {
        /// Model name.
        #[arg(long)]
        name: String,
        /// Version id (default: every version for verify, the `live` one for fetch).
        #[arg(long)]
        version: Option<String>,
        /// Cache directory; the model lands in <cache>/<name>/<version>/.
        #[arg(long, default_value = ".cache/models")]
        cache: PathBuf,
    },
    /// Follow an alias and print each new target as it appears (the service's change feed).
    #[command(
        after_help = "Example:\n  arcwright store watch --store ./arcwright-store --name harbour --count 1"
    )]
    Watch {
        /// Model name.
        #[arg(long)]
        name: String,
        /// Alias name.
        #[arg(long, default_value = "live")]
        alias: String,
        /// Seconds between polls.
        #[arg(long, default_value_t = 5.0)]
        interval: f64,
        /// Exit after this many changes.
        #[arg(long)]
        count: Option<usize>,
    },
    /// Delete all but the newest N versions, never one an alias points at.
    #[command(
        after_help = "Example:\n  arcwright store prune --store ./arcwright-store --name harbour --keep 5 --yes"
    )]
    Prune {
        /// Model name.
        #[arg(long)]
        name: String,
        /// How many of the newest versions to keep (versions an alias points at are always kept).
        #[arg(long)]
        keep: usize,
        /// Delete; without it, only list what would be deleted.
        #[arg(long)]
        yes: bool,
    },
}

#[derive(Debug, Args)]
pub struct DemoDataOptions {
    /// Number of sentences.
    #[arg(long, default_value_t = 1000)]
    pub sentences: usize,
    /// Every sentence at least this many words (default: a long-tailed mix).
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=4096))]
    pub words: Option<u64>,
    /// Longest sentence of the mix.
    #[arg(long, default_value_t = 120)]
    pub max_words: usize,
    /// Seed of the sentence generator; the same seed gives the same sentences.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum UpdateArg {
    /// Averaged structured perceptron (Collins 2002).
    Perceptron,
    /// Passive-aggressive (PA-I) update, loss = wrong heads (Crammer et al. 2006).
    PassiveAggressive,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum KindArg {
    /// Hashed arc features with perceptron-trained weights: fast to train and to parse.
    Linear,
    /// A BiLSTM encoder with biaffine arc and label scorers: more accurate, slower.
    Neural,
}

#[derive(Debug, Args)]
pub struct TrainOptions {
    /// Training treebank (CoNLL-U).
    #[arg(long)]
    pub train: PathBuf,
    /// Development treebank for early stopping and per-epoch UAS.
    #[arg(long)]
    pub dev: Option<PathBuf>,
    /// Output model directory.
    #[arg(long)]
    pub out: PathBuf,
    /// Kind of model to train.
    #[arg(long, value_enum, default_value = "linear")]
    pub kind: KindArg,
    /// Most passes over the training data; fewer when the dev score stops improving (default:
    /// 10 for the linear kind, 30 for the neural kind).
    #[arg(long)]
    pub epochs: Option<usize>,
    /// Neural kind: LSTM state size per direction.
    #[arg(long, default_value_t = 200, value_parser = clap::value_parser!(u32).range(8..=1024))]
    pub hidden: u32,
    /// Neural kind: stacked BiLSTM layers.
    #[arg(long, default_value_t = 2, value_parser = clap::value_parser!(u32).range(1..=4))]
    pub layers: u32,
    /// Neural kind: read the linear tagger's tags instead of predicting tags with a second
    /// output of the network trained together with the arcs (the default, and more accurate).
    #[arg(long)]
    pub linear_tags: bool,
    /// Neural kind: sentences per mini-batch.
    #[arg(long, default_value_t = 32, value_parser = clap::value_parser!(u32).range(1..=1024))]
    pub batch_sentences: u32,
    /// Seed of the training order; the same seed and thread count give the same model.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Training threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Decoder used in training and as the model's default (default: non-projective when the
    /// training trees have crossing arcs).
    #[arg(long, value_enum)]
    pub decoder: Option<AlgorithmArg>,
    /// log2 of the arc weight table size (10..=28).
    #[arg(long, default_value_t = 22, value_parser = clap::value_parser!(u32).range(10..=28))]
    pub hash_bits: u32,
    /// Do not use FEATS morphology.
    #[arg(long)]
    pub no_morphology: bool,
    /// Weight update rule.
    #[arg(long, value_enum, default_value = "perceptron")]
    pub update: UpdateArg,
    /// Train the parser on gold tags instead of jackknifed predicted tags.
    #[arg(long)]
    pub gold_train_tags: bool,
}

#[derive(Debug, Args)]
pub struct EvalOptions {
    /// Model directory (as written by `arcwright train`).
    #[arg(long)]
    pub model: PathBuf,
    /// Gold CoNLL-U file (every word with HEAD and DEPREL).
    #[arg(long)]
    pub gold: PathBuf,
    /// Decoder (default: the one the model was trained for).
    #[arg(long, value_enum)]
    pub decoder: Option<AlgorithmArg>,
    /// Also score the tokens whose gold label is not LABEL (repeatable: none of the labels).
    #[arg(long = "exclude-label", value_name = "LABEL")]
    pub exclude_labels: Vec<String>,
    /// Use the gold UPOS and FEATS instead of predicting them.
    #[arg(long)]
    pub gold_tags: bool,
    /// Write a reliability diagram of the arc confidences (SVG) to this file.
    #[arg(long, value_name = "FILE.svg")]
    pub reliability: Option<PathBuf>,
    /// Write each scored arc's confidence and whether its head is right (TSV) to this file.
    #[arg(long, value_name = "FILE.tsv")]
    pub arc_confidences: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct CalibrateOptions {
    /// Model directory (as written by `arcwright train`).
    #[arg(long)]
    pub model: PathBuf,
    /// Held-out CoNLL-U with gold heads (not the training data), parsed with predicted tags.
    #[arg(long, value_name = "FILE")]
    pub held_out: PathBuf,
    /// Directory to write the recalibrated model to (may be the model directory itself).
    #[arg(long)]
    pub out: PathBuf,
    /// Threads for the fit (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum InputFormat {
    /// CoNLL-U; FORM is read, UPOS/HEAD/DEPREL are filled in.
    Conllu,
    /// Raw text: split into sentences and tokens by Unicode rules (UAX #29).
    Text,
    /// Pre-tokenized: one sentence per line, tokens separated by white space.
    Tokens,
}

#[derive(Debug, Args)]
pub struct ParseOptions {
    /// Model directory (as written by `arcwright train`). Takes precedence over a store given
    /// by ARCWRIGHT_STORE.
    #[arg(long)]
    pub model: Option<PathBuf>,
    /// Take the model from a store instead (a path, file:///abs/path or s3://bucket/prefix):
    /// the version that alias `live` of `--name` points at, or `--version`.
    #[arg(long, env = "ARCWRIGHT_STORE")]
    pub store: Option<String>,
    /// Model name in the store.
    #[arg(long)]
    pub name: Option<String>,
    /// A version id instead of the `live` alias.
    #[arg(long)]
    pub version: Option<String>,
    /// Where models taken from a store are kept after verification.
    #[arg(long, default_value = ".cache/models")]
    pub cache: PathBuf,
    /// Decoder (default: the one the model was trained for).
    #[arg(long, value_enum)]
    pub decoder: Option<AlgorithmArg>,
    /// Also write each arc's marginal probability into MISC as `ArcConfidence=P` (the same
    /// figure the service's `confidence` option returns).
    #[arg(long)]
    pub confidence: bool,
    /// What stdin (or each listed file) holds.
    #[arg(long, value_enum, default_value = "conllu")]
    pub input: InputFormat,
    /// Parse the files listed in this file (a path or URL; one input path or URL per line,
    /// blank lines and `#` comments skipped) instead of stdin.
    #[arg(long, requires = "out")]
    pub files: Option<String>,
    /// Where parses of `--files` go (a folder or s3://bucket/prefix): `<input name>.conllu`
    /// per input file, plus `_shards/<INDEX>-of-<COUNT>.json` when the shard is done.
    #[arg(long, requires = "files")]
    pub out: Option<String>,
    /// Parse only this shard of the list: entries whose 0-based position modulo COUNT equals
    /// INDEX, e.g. `--shard 3/8` (in a Kubernetes Indexed Job: `$(JOB_COMPLETION_INDEX)/8`).
    #[arg(long, value_parser = parse_shard, requires = "files", default_value = "0/1")]
    pub shard: Shard,
    /// Parsing threads (default: one per core).
    #[arg(long)]
    pub threads: Option<usize>,
}

/// Which part of a file list one process parses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

fn parse_shard(value: &str) -> Result<Shard, String> {
    let bad = || format!("{value:?}: expected INDEX/COUNT with 0 <= INDEX < COUNT, e.g. 2/8");
    let (index, count) = value.split_once('/').ok_or_else(bad)?;
    let index: usize = index.trim().parse().map_err(|_| bad())?;
    let count: usize = count.trim().parse().map_err(|_| bad())?;
    if count == 0 || index >= count {
        return Err(bad());
    }
    Ok(Shard { index, count })
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum AlgorithmArg {
    /// Eisner's algorithm: best tree without crossing arcs.
    Projective,
    /// Chu-Liu-Edmonds: best tree of any shape.
    NonProjective,
}

impl From<AlgorithmArg> for arcwright_parser::decode::Algorithm {
    fn from(arg: AlgorithmArg) -> Self {
        match arg {
            AlgorithmArg::Projective => Self::Projective,
            AlgorithmArg::NonProjective => Self::NonProjective,
        }
    }
}

#[derive(Debug, Args)]
pub struct DecodeOptions {
    /// Which decoder to run (`--algorithm` is accepted too).
    #[arg(long, alias = "algorithm", value_enum, default_value = "projective")]
    pub decoder: AlgorithmArg,
    /// Allow several words to attach to the root (default: exactly one).
    #[arg(long)]
    pub multi_root: bool,
    /// Also print the arc marginals and the log-partition function.
    #[arg(long)]
    pub marginals: bool,
}

#[derive(Debug, Args)]
pub struct ConlluOptions {
    #[command(subcommand)]
    pub action: ConlluAction,
}

#[derive(Debug, Subcommand)]
pub enum ConlluAction {
    /// Check files; print every problem with file, line and column. Exit 2 if any.
    #[command(after_help = "Example:\n  arcwright conllu check train.conllu dev.conllu")]
    Check {
        /// CoNLL-U files to check.
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Keep reading after a broken sentence and report all problems.
        #[arg(long)]
        lenient: bool,
    },
    /// Print the basic words of a file as JSON lines, one sentence per line.
    #[command(after_help = "Example:\n  arcwright conllu fields test.conllu | head -3")]
    Fields {
        /// The CoNLL-U file to read.
        file: PathBuf,
    },
    /// Read a file and write it back to stdout (byte-identical for a valid file).
    #[command(after_help = "Example:\n  arcwright conllu rewrite mine.conllu | cmp - mine.conllu")]
    Rewrite {
        /// The CoNLL-U file to read.
        file: PathBuf,
    },
    /// Split files into train/dev/test by sentence index modulo 10 (0 → test, 1 → dev, rest →
    /// train), counting sentences across the files in the order given.
    #[command(
        after_help = "Example:\n  arcwright conllu split part1.conllu part2.conllu --out split"
    )]
    Split {
        /// CoNLL-U files, counted as one sequence of sentences in the order given.
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Folder for train.conllu, dev.conllu and test.conllu.
        #[arg(long)]
        out: PathBuf,
    },
}

#[cfg(test)]
mod tests {
    use clap::CommandFactory;

    /// Every option and argument has help text, and every command a user runs ends its
    /// `--help` with an example.
    fn check(command: &clap::Command, path: &str, missing: &mut Vec<String>) {
        for arg in command.get_arguments() {
            let id = arg.get_id().as_str();
            if id == "help" || id == "version" {
                continue;
            }
            if arg.get_help().is_none() && arg.get_long_help().is_none() {
                missing.push(format!("{path} {id}: no help"));
            }
        }
        let subcommands: Vec<&clap::Command> = command
            .get_subcommands()
            .filter(|c| c.get_name() != "help")
            .collect();
        if subcommands.is_empty() {
            let example = command
                .get_after_help()
                .map(|h| h.to_string())
                .is_some_and(|h| h.starts_with("Example:\n  ") && h.contains("arcwright "));
            if !example {
                missing.push(format!("{path}: no example"));
            }
        }
        for sub in subcommands {
            check(sub, &format!("{path} {}", sub.get_name()), missing);
        }
    }

    #[test]
    fn every_option_has_help_and_every_command_an_example() {
        let mut missing = Vec::new();
        check(&super::Cli::command(), "arcwright", &mut missing);
        assert!(missing.is_empty(), "{missing:#?}");
    }
}
