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
    /// Simulate a stepper controller speaking the line protocol
    /// (protocols/tuner-line.md) on a loopback socket or a pseudo-terminal.
    SimTuner(tuneward::tuner::server::SimTunerArgs),
    /// Record the motor's position (after homing or checking it by eye) in
    /// the position journal, e.g. after the journal reported a move that
    /// never finished.
    SetPosition(tuneward::journal::SetPositionArgs),
}

fn main() -> std::process::ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Fit(args) => tuneward::calibrate::cli::run_fit(args),
        Command::SimTuner(args) => report(tuneward::tuner::server::run_sim_tuner(&args)),
        Command::SetPosition(args) => report(tuneward::journal::run_set_position(&args)),
    }
}

/// Prints an error and turns the outcome into the exit code.
fn report(result: Result<(), String>) -> std::process::ExitCode {
    match result {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("tuneward: {e}");
            std::process::ExitCode::FAILURE
        }
    }
}
