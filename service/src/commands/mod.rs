//! One module per subcommand. Each returns `Result<(), Failure>`; `main` prints the message and
//! exits with the failure's code.

pub mod conllu;
pub mod decode;

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
