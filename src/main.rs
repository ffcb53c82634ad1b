//! The `tuneward` command: argument parsing only; the work is in the library.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use tuneward::timeline::{Human, JsonLines, Timeline};

/// Keeps a remotely tuned antenna (a small transmitting loop, say) tuned to
/// wherever the operator puts the transceiver's VFO.
///
/// tuneward listens to the rig's control port, waits until the operator has
/// settled on a frequency, maps it through the station's calibration to a
/// motor position and moves the tuner: never while the rig transmits, with
/// the transmit inhibit asserted around every move, and never beyond the
/// travel limits.
#[derive(Parser)]
#[command(name = "tuneward", version, about, long_about, max_term_width = 100)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Replay an invented evening at a demo station: no hardware, no arguments.
    Demo {
        /// Write JSON lines instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Replay a capture of a rig's control port through a station's config,
    /// against a simulated tuner, and print what would have happened.
    ///
    /// Runs in virtual time, as fast as the machine allows. The timeline is
    /// readable text by default; --json writes one JSON object per line
    /// (see protocols/timeline.md).
    Replay {
        /// Capture file (format: protocols/capture.md).
        capture: PathBuf,
        /// The station's config (TOML; see config/example.toml).
        #[arg(long, short)]
        config: PathBuf,
        /// Write JSON lines instead of text.
        #[arg(long)]
        json: bool,
        /// Where the simulated motor starts, in steps [default: tuner.min_steps].
        #[arg(long, value_name = "N", allow_negative_numbers = true)]
        start_steps: Option<i64>,
        /// Also show every frequency report and ignored stretch of bytes.
        #[arg(long, short)]
        verbose: bool,
        /// Warn about each malformed capture line (on standard error) and
        /// carry on with the next, instead of stopping at the first. The
        /// summary counts them as `bad_lines`.
        #[arg(long)]
        skip_bad_lines: bool,
    },
    /// Check a config and show the bands, limits and calibration it describes.
    Check {
        /// The station's config (TOML).
        #[arg(long, short)]
        config: PathBuf,
    },
    /// Follow the rig and drive the tuner controller: the live service.
    ///
    /// Runs until SIGINT (Ctrl-C) or SIGTERM, then lets the move under way
    /// finish, records the position and releases the transmit inhibit; exit
    /// status 0 after a clean shutdown. Logs one line per decision on
    /// stderr.
    Run(tuneward::service::RunArgs),
    /// Record the rig's control port into a capture file for `replay`.
    Capture(tuneward::recorder::CaptureArgs),
    /// Fit a calibration to measured points and report how well it holds.
    Fit(tuneward::calibrate::cli::FitArgs),
    /// Measure how well the follow policy keeps the loop tuned.
    ///
    /// Replays invented evenings at a station (by default the bundled
    /// quality station, fixtures/quality/station.toml) against a simulated
    /// loop whose resonance differs from the calibration by a small hidden
    /// error, and reports for the station's policy, a naive one that moves on
    /// every report, and the offline optimum: moves, motor travel, and the
    /// share of the time on the air at SWR <= 1.5 and <= 2. The station must
    /// describe its loop in [antenna].
    BenchFollow {
        /// The station's config [default: the bundled quality station].
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Invented evenings to replay, one per seed (1 to N).
        #[arg(long, default_value_t = 5, value_name = "N")]
        evenings: u64,
        /// Length of each evening, in hours.
        #[arg(long, default_value_t = 4.0)]
        hours: f64,
        /// Amplitude of the hidden calibration error, in motor steps.
        #[arg(long, default_value_t = 3.0, value_name = "STEPS")]
        error_steps: f64,
        /// Write one JSON object instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Simulate a stepper controller speaking the line protocol
    /// (protocols/tuner-line.md) on a loopback socket or a pseudo-terminal.
    SimTuner(tuneward::tuner::server::SimTunerArgs),
    /// Record the motor's position (after homing or checking it by eye) in
    /// the position journal, e.g. after the journal reported a move that
    /// never finished.
    SetPosition(tuneward::journal::SetPositionArgs),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    let result = match cli.command {
        Command::Replay {
            capture,
            config,
            json,
            start_steps,
            verbose,
            skip_bad_lines,
        } => {
            let mut json_out;
            let mut human_out;
            let timeline: &mut dyn Timeline = if json {
                json_out = JsonLines(&mut out);
                &mut json_out
            } else {
                human_out = Human::new(&mut out, verbose);
                &mut human_out
            };
            let options = tuneward::station::ReplayOptions {
                start_steps,
                skip_bad_lines,
            };
            let stderr = std::io::stderr();
            tuneward::station::replay_file_with(
                &config,
                &capture,
                options,
                timeline,
                &mut stderr.lock(),
            )
            .map(|_| ())
        }
        Command::Demo { json } => tuneward::station::demo(&mut out, json).map(|_| ()),
        Command::BenchFollow {
            config,
            evenings,
            hours,
            error_steps,
            json,
        } => {
            let options = tuneward::quality::BenchOptions {
                seeds: (1..=evenings).collect(),
                hours,
                error_steps,
                ..Default::default()
            };
            tuneward::quality::run(config.as_deref(), &options, json, &mut out).map(|_| ())
        }
        Command::Check { config } => tuneward::station::check(&config, &mut out),
        Command::Fit(args) => {
            drop(out);
            return tuneward::calibrate::cli::run_fit(args);
        }
        Command::SimTuner(args) => {
            drop(out);
            return report(tuneward::tuner::server::run_sim_tuner(&args));
        }
        Command::Run(args) => {
            drop(out);
            return report(tuneward::service::run_command(&args));
        }
        Command::Capture(args) => {
            drop(out);
            tuneward::service::init_logging(tuneward::service::LogFormat::Text);
            return report(tuneward::recorder::run_capture(&args).map(|_| ()));
        }
        Command::SetPosition(args) => {
            drop(out);
            return report(tuneward::journal::run_set_position(&args));
        }
    };
    let _ = out.flush();
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            let message = e.to_string();
            eprintln!("tuneward: {message}");
            let mut source = std::error::Error::source(&e);
            while let Some(s) = source {
                // Most messages already end with their cause: say it once.
                let why = s.to_string();
                if !message.contains(&why) {
                    eprintln!("  because: {why}");
                }
                source = s.source();
            }
            ExitCode::FAILURE
        }
    }
}

/// Prints an error and turns the outcome into the exit code.
fn report(result: Result<(), String>) -> ExitCode {
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("tuneward: {e}");
            ExitCode::FAILURE
        }
    }
}
