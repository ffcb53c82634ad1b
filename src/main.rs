//! The `tuneward` command: argument parsing only; the work is in the library.

use clap::{Parser, Subcommand};

/// Keeps a remotely tuned antenna (a small transmitting loop, say) tuned to
/// wherever the operator puts the transceiver's VFO.
#[derive(Parser)]
#[command(name = "tuneward", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    Fit(tuneward::calibrate::cli::FitArgs),
}

fn main() -> std::process::ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Fit(args) => tuneward::calibrate::cli::run_fit(args),
    }
}
