//! The `arcwright` binary: parses the command line, then hands over to one command.
//!
//! Exit codes: 0 success, 1 failure while working (I/O, internal), 2 bad input or bad usage.

mod cli;
mod commands;

use std::process::ExitCode;

use clap::Parser as _;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    let outcome = match args.command {
        cli::Command::Decode(options) => commands::decode::run(&options),
        cli::Command::Conllu(options) => commands::conllu::run(&options),
        cli::Command::Train(options) => commands::train::run(&options),
        cli::Command::Eval(options) => commands::eval::run(&options),
        cli::Command::Parse(options) => commands::parse::run(&options),
        cli::Command::DemoData(options) => commands::demo::run(&options),
        cli::Command::Store(options) => commands::store::run(&options),
    };
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            eprintln!("arcwright: {}", failure.message);
            ExitCode::from(failure.exit_code)
        }
    }
}
