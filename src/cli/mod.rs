//! The command line: every clap type of `tuneward` lives in this module of
//! the binary (the library takes plain option structs and knows nothing of
//! clap), and `execute` is the one place a command's outcome becomes an
//! error to report.

mod args;

use std::io::Write;
use std::path::PathBuf;

use clap::{Parser, Subcommand};

use tuneward::timeline::{Human, JsonLines, Timeline};

use args::{CaptureArgs, CtlArgs, FitArgs, RunArgs, SetPositionArgs, SimRigArgs, SimTunerArgs};

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
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
pub enum Command {
    /// Replay an invented evening at a demo station: no hardware, no arguments.
    ///
    /// With --live, run the demo station live instead: a simulated rig
    /// with a scripted operator, a simulated controller and the service
    /// with its web page on loopback; the page's address is printed. Runs
    /// until Ctrl-C.
    Demo {
        /// Write JSON lines instead of text.
        #[arg(long, conflicts_with = "live")]
        json: bool,
        /// Run the demo station live, with its web page.
        #[arg(long)]
        live: bool,
        /// With --live: where the web page listens (loopback).
        #[arg(
            long,
            value_name = "ADDR",
            default_value = "127.0.0.1:7720",
            requires = "live"
        )]
        listen: std::net::SocketAddr,
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
    /// Check a config: build everything `run` would (rig port settings,
    /// controller link, inhibit line, journal, calibration per profile,
    /// bands) without opening a port, describe it, and grade what is wrong.
    ///
    /// Exit status 0 when the config is valid (warnings and notes are
    /// printed), 1 when it is refused: an error, or with --strict a
    /// warning. Every finding names the key and says what to do.
    Check {
        /// The station's config (TOML).
        #[arg(long, short)]
        config: PathBuf,
        /// Refuse on warnings too.
        #[arg(long)]
        strict: bool,
    },
    /// Find the rig's port speed (and a binary-family rig's address): open
    /// `rig.port` at the configured speed, then at the other common ones,
    /// send the dialect's reads only (never a set or a keying command) and
    /// listen; print what each speed gave and the `[rig]` lines to use.
    ///
    /// Exit status 0 when a speed gave a clean answer, 1 when none did.
    Probe {
        /// The station's config (TOML).
        #[arg(long, short)]
        config: PathBuf,
        /// How long to listen at each speed, in ms.
        #[arg(long, default_value_t = 400, value_name = "MS")]
        listen_ms: u64,
    },
    /// Follow the rig and drive the tuner controller: the live service.
    ///
    /// Runs until SIGINT (Ctrl-C) or SIGTERM, then lets the move under way
    /// finish, records the position and releases the transmit inhibit; exit
    /// status 0 after a clean shutdown. Exit status 3: it stopped without
    /// the controller confirming where the motor is (the journal keeps the
    /// unfinished move, the inhibit stays asserted); 1: it could not start;
    /// 130: a second interrupt. Logs one line per decision on stderr.
    Run(RunArgs),
    /// Record the rig's control port into a capture file for `replay`.
    Capture(CaptureArgs),
    /// Fit a calibration to measured points and report how well it holds.
    Fit(FitArgs),
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
        /// Invented evenings to replay per scenario family, one per seed
        /// (FIRST to FIRST + N - 1).
        #[arg(long, default_value_t = 5, value_name = "N")]
        evenings: u64,
        /// The first seed. Seeds from 101 on are kept for judging: the
        /// policy's defaults were chosen on seeds 1 to 5 only.
        #[arg(long, default_value_t = 1, value_name = "FIRST")]
        first_seed: u64,
        /// Length of each evening, in hours.
        #[arg(long, default_value_t = 4.0)]
        hours: f64,
        /// Amplitude of the hidden calibration error, in motor steps.
        #[arg(long, default_value_t = 3.0, value_name = "STEPS")]
        error_steps: f64,
        /// A scenario family to run (classic, spotting, split, programs, or
        /// all); repeat for several [default: classic and spotting].
        #[arg(long = "family", value_name = "NAME", value_parser = parse_family)]
        families: Vec<Vec<tuneward::quality::Family>>,
        /// Write one JSON object instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Simulate a stepper controller speaking the line protocol
    /// (protocols/tuner-line.md) on a loopback socket or a pseudo-terminal.
    SimTuner(SimTunerArgs),
    /// Simulate a transceiver's control port on a pseudo-terminal: test
    /// equipment for tuneward and the programs beside it.
    ///
    /// Keeps VFO A and B, split, mode and transmit state; answers reads and
    /// takes sets in the chosen dialect's family; a scripted operator
    /// (JSON lines, see protocols/sim-rig.md; a built-in demo by default)
    /// turns the knob and keys, with transceive reports. Every change of
    /// what it really receives and transmits on is logged as a JSON line
    /// (the truth log). Runs until SIGINT or SIGTERM.
    SimRig(SimRigArgs),
    /// Record the motor's position (after homing or checking it by eye) in
    /// the position journal, e.g. after the journal reported a move that
    /// never finished.
    SetPosition(SetPositionArgs),
    /// Talk to the running service: see its state, nudge, go to a preset,
    /// switch profile, pause, mark a calibration point.
    ///
    /// Speaks the control protocol (protocols/control.md) on the station's
    /// control socket, found from its config. Exit status 1 when the
    /// service refused (the reason is printed) or none is running.
    Ctl(CtlArgs),
}

/// `tuneward run`: logging, the station from its config, its instance
/// lock and control socket, then the live driver on the station's parts
/// until SIGINT, SIGTERM or SIGHUP.
fn run_live(args: &RunArgs) -> Result<(), Failure> {
    use tuneward::service::{init_logging, run_until_signal, ServiceParts};
    init_logging(args.log_format.into());
    tracing::info!(config = %args.config.display(), version = env!("CARGO_PKG_VERSION"), "starting");
    let plain = |e: &dyn std::fmt::Display| Failure::plain(e.to_string());
    let station = tuneward::station::Station::load(&args.config).map_err(|e| plain(&e))?;
    // One instance per station: before anything is opened.
    let _lock = tuneward::lock::acquire(&tuneward::station::lock_path_for(&station.config))
        .map_err(|e| plain(&e))?;
    let control =
        tuneward::station::control_setup(&station, &args.config).map_err(|e| plain(&e))?;
    let parts = ServiceParts::from_station(&station).map_err(|e| plain(&e))?;
    if let Some(caveat) = tuneward::station::settings::rig_caveat(&station) {
        tracing::info!("{caveat}");
    }
    let summary = run_until_signal(parts, Some(control)).map_err(|e| plain(&e))?;
    if summary.unconfirmed {
        return Err(Failure {
            status: tuneward::service::EXIT_UNCONFIRMED,
            ..Failure::plain(
                "stopped without the controller confirming where the motor is: the journal keeps the unfinished move and the next start checks it".to_string(),
            )
        });
    }
    Ok(())
}

/// `tuneward capture`: the station's rig port from its config, recorded
/// into the capture file.
fn capture(args: &CaptureArgs) -> Result<(), Failure> {
    tuneward::service::init_logging(tuneward::service::LogFormat::Text);
    let plain = |e: &dyn std::fmt::Display| Failure::plain(e.to_string());
    let station = tuneward::station::Station::load(&args.config).map_err(|e| plain(&e))?;
    let source = tuneward::station::rig_source(&station).map_err(|e| plain(&e))?;
    let rig = &station.config.rig;
    let header = format!(
        "tuneward capture of {} ({}, mode {:?})",
        rig.port.as_deref().unwrap_or("?"),
        rig.protocol,
        rig.mode
    )
    .to_lowercase();
    let decoder = station.dialect.decoder(rig.address);
    let sense = tuneward::station::settings::open_sense(&station.config).map_err(|e| plain(&e))?;
    tuneward::recorder::run_capture(source, &header, Some(decoder), sense, &args.options())
        .map(|_| ())
        .map_err(|e| plain(&e))
}

/// Why a command failed, ready to print: `tuneward: message` (or the
/// command's own prefix) on standard error, and the exit status.
#[derive(Debug)]
pub struct Failure {
    prefix: &'static str,
    status: u8,
    message: String,
    /// The reader of standard output went away (`| head`): not a failure
    /// of the command, which ends quietly, as filters do.
    closed_pipe: bool,
}

/// Whether `e`, or an error it was caused by, is a write to a closed pipe.
fn closed_pipe<'a>(e: &'a (dyn std::error::Error + 'static)) -> bool {
    let mut next = Some(e);
    while let Some(err) = next {
        if err
            .downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
        {
            return true;
        }
        next = err.source();
    }
    false
}

impl Failure {
    /// A message that already says everything.
    fn plain(message: String) -> Self {
        Failure {
            prefix: "tuneward",
            status: 1,
            message,
            closed_pipe: false,
        }
    }

    /// An error and its chain of causes, each cause on a line of its own
    /// unless the message already ends with it.
    fn with_causes(e: &(dyn std::error::Error + 'static)) -> Self {
        let mut message = e.to_string();
        let mut source = e.source();
        while let Some(s) = source {
            // Most messages already end with their cause: say it once.
            let why = s.to_string();
            if !message.contains(&why) {
                message.push_str("\n  because: ");
                message.push_str(&why);
            }
            source = s.source();
        }
        Failure {
            prefix: "tuneward",
            status: 1,
            message,
            closed_pipe: closed_pipe(e),
        }
    }

    /// `tuneward fit` reports under its own name with status 2.
    fn fit(e: &dyn std::fmt::Display) -> Self {
        Failure {
            prefix: "tuneward fit",
            status: 2,
            message: e.to_string(),
            closed_pipe: false,
        }
    }

    /// Prints the failure on standard error; the exit status to end with.
    pub fn report(&self) -> u8 {
        eprintln!("{}: {}", self.prefix, self.message);
        self.status
    }
}

/// Runs the command `cli` names; what it prints goes to standard output,
/// flushed before this returns.
pub fn execute(cli: Cli) -> Result<(), Failure> {
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
            .map_err(|e| Failure::with_causes(&e))
        }
        Command::Demo {
            live: true, listen, ..
        } => {
            tuneward::service::init_logging(tuneward::service::LogFormat::Text);
            tuneward::station::demo_live(
                listen,
                Box::new(|url| {
                    use std::io::Write as _;
                    let mut out = std::io::stdout();
                    let _ = writeln!(
                        out,
                        "tuneward demo: the live page is at {url} (Ctrl-C stops)"
                    );
                    let _ = out.flush();
                }),
            )
            .map_err(|e| Failure::with_causes(&e))
        }
        Command::Demo { json, .. } => tuneward::station::demo(&mut out, json)
            .map(|_| ())
            .map_err(|e| Failure::with_causes(&e)),
        Command::BenchFollow {
            config,
            evenings,
            first_seed,
            hours,
            error_steps,
            families,
            json,
        } => {
            let mut options = tuneward::quality::BenchOptions {
                seeds: (first_seed..first_seed.saturating_add(evenings)).collect(),
                hours,
                error_steps,
                ..Default::default()
            };
            if !families.is_empty() {
                options.families = families.concat();
            }
            tuneward::quality::run_bench(config.as_deref(), &options, json, &mut out)
                .map(|_| ())
                .map_err(|e| Failure::with_causes(&e))
        }
        Command::Probe { config, listen_ms } => {
            let plain = |e: &dyn std::fmt::Display| Failure::plain(e.to_string());
            let station = tuneward::station::Station::load(&config).map_err(|e| plain(&e))?;
            let listen = std::time::Duration::from_millis(listen_ms);
            match tuneward::station::probe::probe(&station, listen, &mut out) {
                Ok(true) => Ok(()),
                Ok(false) => Err(Failure::plain(
                    "probe: the rig was not found at any speed tried".to_string(),
                )),
                Err(e) => Err(plain(&e)),
            }
        }
        Command::Check { config, strict } => {
            let options = tuneward::station::CheckOptions { strict };
            tuneward::station::check_with(&config, options, &mut out)
                .map(|_| ())
                .map_err(|e| Failure::with_causes(&e))
        }
        Command::Fit(args) => {
            let options: tuneward::calibrate::cli::FitCommandOptions = args.into();
            let failure = |e| Failure::fit(&e);
            match tuneward::station::settings::load_fit_station(options.config.as_deref()) {
                Err(e) => Err(Failure::fit(&e)),
                Ok(station) => tuneward::calibrate::cli::fit_command(&options, station.as_ref())
                    .and_then(|report| {
                        match out.write_all(report.as_bytes()).and_then(|()| out.flush()) {
                            // A reader that stopped early (`| head`) is not a
                            // failure of the fit: end quietly, as filters do.
                            Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
                            r => r.map_err(tuneward::calibrate::cli::FitFailure::Stdout),
                        }
                    })
                    .map_err(failure),
            }
        }
        Command::SimTuner(args) => tuneward::tuner::server::run_sim_tuner(&args.into())
            .map_err(|e| Failure::plain(e.to_string())),
        Command::SimRig(args) => args::run_sim_rig(args).map_err(|e| Failure::with_causes(&e)),
        Command::Run(args) => run_live(&args),
        Command::Capture(args) => capture(&args),
        Command::Ctl(args) => match args::run_ctl(args, &mut out) {
            Ok(true) => Ok(()),
            Ok(false) => Err(Failure {
                prefix: "tuneward ctl",
                status: 1,
                message: "refused (see above)".into(),
                closed_pipe: false,
            }),
            Err(e) => Err(Failure::with_causes(&e)),
        },
        Command::SetPosition(args) => tuneward::station::settings::run_set_position(&args.into())
            .map_err(|e| Failure::with_causes(&e)),
    };
    let _ = out.flush();
    match result {
        Err(f) if f.closed_pipe => Ok(()),
        r => r,
    }
}

/// A `--family` of bench-follow (clap's value parsers return a `String`
/// error).
fn parse_family(name: &str) -> Result<Vec<tuneward::quality::Family>, String> {
    use tuneward::quality::Family;
    if name == "all" {
        return Ok(Family::ALL.to_vec());
    }
    Family::from_name(name).map(|f| vec![f]).ok_or_else(|| {
        format!("expected classic, spotting, split, programs or all, found {name:?}")
    })
}
