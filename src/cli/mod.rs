//! The command line: clap options, validated into plain configurations, handed to the library.
//!
//! `main` only parses and maps errors to exit codes; every subcommand is a `run_*` function
//! returning `anyhow::Result`. No science lives here.

use clap::Parser;
use std::process::ExitCode;

/// Sutura: measure fossil specimens in CT scans.
#[derive(Debug, Parser)]
#[command(name = "sutura", version, about, long_about = None)]
pub struct Cli {}

/// Parses the command line, runs it, and maps the outcome to an exit code.
#[must_use]
pub fn main() -> ExitCode {
    let _cli = Cli::parse();
    ExitCode::SUCCESS
}
