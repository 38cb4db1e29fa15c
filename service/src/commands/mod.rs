//! One module per subcommand. Each returns `Result<(), Failure>`; `main` prints the message and
//! exits with the failure's code.

pub mod conllu;
pub mod decode;
pub mod demo;
pub mod eval;
pub mod health;
pub mod parse;
pub mod query;
pub mod store;
pub mod train;

/// A command's failure: what to tell the user and which exit code to use.
#[derive(Debug)]
pub struct Failure {
    pub message: String,
    pub exit_code: u8,
}

impl Failure {
    /// The user's input is wrong (exit 2).
    pub fn bad_input(message: impl std::fmt::Display) -> Self {
        Failure {
            message: message.to_string(),
            exit_code: 2,
        }
    }

    /// Something failed while working (exit 1).
    pub fn runtime(message: impl std::fmt::Display) -> Self {
        Failure {
            message: message.to_string(),
            exit_code: 1,
        }
    }
}

/// Reads a CoNLL-U file strictly (errors name file, line and column).
pub fn read_treebank(
    path: &std::path::Path,
) -> Result<arcwright_parser::conllu::Document, Failure> {
    let bytes = std::fs::read(path)
        .map_err(|e| Failure::runtime(format!("{}: cannot read: {e}", path.display())))?;
    arcwright_parser::conllu::read_bytes(&path.display().to_string(), &bytes)
        .map_err(Failure::bad_input)
}

/// Peak resident memory of this process in MiB (Linux), if known.
pub fn peak_memory_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}
