//! The `tuneward` command: argument parsing only (in [`cli`]); the work is
//! in the library.

use std::process::ExitCode;

use clap::Parser;

mod cli;

fn main() -> ExitCode {
    match cli::execute(cli::Cli::parse()) {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => ExitCode::from(failure.report()),
    }
}
