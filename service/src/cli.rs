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
    Decode(DecodeOptions),
    /// Check, inspect or rewrite CoNLL-U files.
    Conllu(ConlluOptions),
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
    /// Which decoder to run.
    #[arg(long, value_enum, default_value = "projective")]
    pub algorithm: AlgorithmArg,
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
    Check {
        files: Vec<PathBuf>,
        /// Keep reading after a broken sentence and report all problems.
        #[arg(long)]
        lenient: bool,
    },
    /// Print the basic words of a file as JSON lines, one sentence per line.
    Fields { file: PathBuf },
    /// Read a file and write it back to stdout (byte-identical for a valid file).
    Rewrite { file: PathBuf },
}
