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

/// A gRPC endpoint for `--grpc ADDR` (an address, or a URL) with connect and call timeouts of
/// `timeout_seconds`; also returns the URL it connects to, for messages.
pub fn grpc_endpoint(
    grpc: &str,
    timeout_seconds: f64,
) -> Result<(tonic::transport::Endpoint, String), Failure> {
    if !(timeout_seconds > 0.0 && timeout_seconds <= 3600.0) {
        return Err(Failure::bad_input(format!(
            "--timeout {timeout_seconds}: expected seconds in (0, 3600]"
        )));
    }
    let timeout = std::time::Duration::from_secs_f64(timeout_seconds);
    let address = if grpc.contains("://") {
        grpc.to_string()
    } else {
        format!("http://{grpc}")
    };
    let endpoint = tonic::transport::Endpoint::from_shared(address.clone())
        .map_err(|e| Failure::bad_input(format!("--grpc {grpc}: {e}")))?
        .connect_timeout(timeout)
        .timeout(timeout);
    Ok((endpoint, address))
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
