//! The `arcwright` binary's library half: command-line definitions, the commands, and the
//! parsing service. Split from `main.rs` so integration tests can build the service in-process.

pub mod cli;
pub mod commands;
pub mod server;
