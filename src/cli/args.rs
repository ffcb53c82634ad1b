//! The arguments of the commands whose work lives in one library function:
//! clap types here, plain option structs in the library, and the mapping
//! between them. Flags, defaults and help text are the command line's
//! contract (tests read them); the library never sees clap.

use std::path::PathBuf;
use std::time::Duration;

use tuneward::calibrate::cli::FitCommandOptions;
use tuneward::calibrate::{ModelKind, DEFAULT_POLY_DEGREE};
use tuneward::journal::SetPositionOptions;
use tuneward::recorder::CaptureOptions;
use tuneward::service::LogFormat;
use tuneward::tuner::server::SimTunerOptions;

/// How `tuneward run` writes its log (stderr).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, clap::ValueEnum)]
pub enum LogFormatArg {
    /// One readable line per decision.
    #[default]
    Text,
    /// One JSON object per line (for a log collector).
    Json,
}

impl From<LogFormatArg> for LogFormat {
    fn from(f: LogFormatArg) -> Self {
        match f {
            LogFormatArg::Text => LogFormat::Text,
            LogFormatArg::Json => LogFormat::Json,
        }
    }
}

/// Arguments of `tuneward run`.
#[derive(Debug, clap::Args)]
pub struct RunArgs {
    /// The station's config (TOML; see config/example.toml).
    #[arg(long, short)]
    pub config: PathBuf,
    /// How to write the log on stderr.
    #[arg(long, value_enum, default_value_t = LogFormatArg::Text)]
    pub log_format: LogFormatArg,
}

/// Arguments of `tuneward capture`.
#[derive(Debug, clap::Args)]
pub struct CaptureArgs {
    /// The station's config (TOML); `[rig]` says which port and how.
    #[arg(long, short)]
    pub config: PathBuf,
    /// The capture file to write (replaced if it exists).
    #[arg(long, value_name = "FILE.cap")]
    pub out: PathBuf,
    /// Stop after this many seconds (e.g. 90 or 2.5) [default: until Ctrl-C].
    #[arg(long, value_name = "S", value_parser = parse_duration)]
    pub duration: Option<Duration>,
}

// clap's `value_parser` takes a function whose error is displayable and
// prints it beside the argument's name; a String is what it expects, so the
// clap value parsers stay String while the rest of the crate is typed.
fn parse_duration(s: &str) -> Result<Duration, String> {
    tuneward::capture::parse_seconds(s).map_err(|e| format!("expected {e}, found `{s}`"))
}

impl CaptureArgs {
    /// What the recorder takes; the config is the station layer's to read.
    pub fn options(&self) -> CaptureOptions {
        CaptureOptions {
            out: self.out.clone(),
            duration: self.duration,
        }
    }
}

/// Which model a calibration uses (the command line's names for
/// [`ModelKind`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ModelArg {
    /// Monotone piecewise cubic through the points (Fritsch–Carlson).
    Interpolate,
    /// steps = a + b / f² (+ c / f⁴ where the data call for it), least squares.
    Physics,
    /// A polynomial in frequency of a chosen degree, least squares.
    Poly,
    /// Whichever of the above predicts left-out points best.
    Auto,
}

impl From<ModelArg> for ModelKind {
    fn from(m: ModelArg) -> Self {
        match m {
            ModelArg::Interpolate => ModelKind::Interpolate,
            ModelArg::Physics => ModelKind::Physics,
            ModelArg::Poly => ModelKind::Poly,
            ModelArg::Auto => ModelKind::Auto,
        }
    }
}

/// Fit a calibration (frequency to motor steps) to measured points and
/// report how well it holds.
///
/// POINTS is a CSV file with a header row: frequency in Hz, motor steps, and
/// optionally `profile` and `weight` columns. Lines starting with `#` are
/// comments. Candidate points learned from touch-ups are read from
/// `<stem>.candidates.csv` beside it and shown marked with `*`.
///
/// Exit status: 0 when a calibration was fitted (warnings included), 2 on
/// any error, with the file, line and column named on standard error.
#[derive(Debug, Clone, clap::Args)]
pub struct FitArgs {
    /// The points file (CSV: hz,steps[,profile][,weight]).
    pub points: PathBuf,
    /// Model to fit; `auto` picks by leave-one-out error [default: the
    /// station's `[calibration] model` with --config, else auto].
    #[arg(long, value_enum)]
    pub model: Option<ModelArg>,
    /// Polynomial degree for `--model poly`.
    #[arg(long, default_value_t = DEFAULT_POLY_DEGREE)]
    pub degree: usize,
    /// Print the result as JSON instead of the text report.
    #[arg(long)]
    pub json: bool,
    /// Also draw points, curve and residuals into this SVG file.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
    /// Station config: its bands and `[antenna]` make the report per band and
    /// give residuals as a share of the loop's bandwidth.
    #[arg(long, short, value_name = "FILE.toml")]
    pub config: Option<PathBuf>,
    /// Move the candidate points into the points file (atomically) before
    /// fitting, and clear the candidates file.
    #[arg(long)]
    pub accept: bool,
}

impl From<FitArgs> for FitCommandOptions {
    fn from(a: FitArgs) -> Self {
        FitCommandOptions {
            points: a.points,
            model: a.model.map(Into::into),
            degree: a.degree,
            json: a.json,
            plot: a.plot,
            config: a.config,
            accept: a.accept,
        }
    }
}

/// `tuneward sim-tuner`: a controller simulator on a socket or a pseudo-terminal.
#[derive(Debug, Clone, clap::Args)]
pub struct SimTunerArgs {
    /// Listen for the host on this TCP address, e.g. 127.0.0.1:7300 (port 0
    /// picks a free port; the address is printed).
    #[arg(
        long,
        value_name = "ADDR",
        conflicts_with = "pty",
        required_unless_present = "pty"
    )]
    pub listen: Option<std::net::SocketAddr>,
    /// Create a pseudo-terminal and put a symlink to it at LINK; point the
    /// host's `serial://LINK` at it.
    #[arg(long, value_name = "LINK")]
    pub pty: Option<PathBuf>,
    /// Motor speed.
    #[arg(long, default_value_t = 800.0)]
    pub steps_per_second: f64,
    /// Time the mechanics take to come to rest after the last step.
    #[arg(long, default_value_t = 50)]
    pub settle_ms: u64,
    /// Lost motion on a reversal, in steps (shows in the capacitor, not in
    /// the reported motor position).
    #[arg(long, default_value_t = 0)]
    pub backlash: i64,
    /// Lowest position the controller accepts.
    #[arg(long, default_value_t = 0, allow_hyphen_values = true)]
    pub min: i64,
    /// Highest position the controller accepts.
    #[arg(long, default_value_t = 10_000, allow_hyphen_values = true)]
    pub max: i64,
    /// Where the motor is when the simulator starts.
    #[arg(long, default_value_t = 0, allow_hyphen_values = true)]
    pub start: i64,
    /// Simulate a home switch closing at this count (as the simulator
    /// counts at start): `HOME` runs to it and gives it the host's
    /// position. Without it `HOME` is answered `ERR` (no switch).
    #[arg(long, value_name = "COUNT", allow_hyphen_values = true)]
    pub home_switch: Option<i64>,
    /// Simulate end-stop switches at these counts (`LOW,HIGH`, as the
    /// simulator counts at start): a move that reaches one stops there and
    /// is reported `LIMIT`.
    #[arg(long, value_name = "LOW,HIGH", allow_hyphen_values = true, value_parser = parse_end_stops)]
    pub end_stops: Option<(i64, i64)>,
    /// Keep FILE holding the capacitor's position in steps (one number,
    /// renamed into place whenever it changes), for `sim-rig
    /// --tuner-position FILE`.
    #[arg(long, value_name = "FILE")]
    pub position_file: Option<PathBuf>,
}

/// `LOW,HIGH`, two counts with LOW below HIGH. (A clap value parser: its
/// error is the message clap prints after the argument's name.)
fn parse_end_stops(s: &str) -> Result<(i64, i64), String> {
    let bad = || format!("expected two counts `LOW,HIGH` with LOW below HIGH, found `{s}`");
    let (lo, hi) = s.split_once(',').ok_or_else(bad)?;
    let lo: i64 = lo.trim().parse().map_err(|_| bad())?;
    let hi: i64 = hi.trim().parse().map_err(|_| bad())?;
    if lo >= hi {
        return Err(bad());
    }
    Ok((lo, hi))
}

impl From<SimTunerArgs> for SimTunerOptions {
    fn from(a: SimTunerArgs) -> Self {
        SimTunerOptions {
            listen: a.listen,
            pty: a.pty,
            steps_per_second: a.steps_per_second,
            settle_ms: a.settle_ms,
            home_switch: a.home_switch,
            end_stops: a.end_stops,
            position_file: a.position_file,
            backlash: a.backlash,
            min: a.min,
            max: a.max,
            start: a.start,
        }
    }
}

/// `tuneward set-position`: the operator says where the motor is.
#[derive(Debug, Clone, clap::Args)]
pub struct SetPositionArgs {
    /// The motor's position in steps, as the operator has established it
    /// (after homing, or by reading a scale).
    #[arg(allow_hyphen_values = true)]
    pub steps: i64,
    /// The station's config file; its `tuner.state_file` (default
    /// `tuneward-position.state` beside the config) is written.
    #[arg(long, short, value_name = "FILE")]
    pub config: PathBuf,
}

impl From<SetPositionArgs> for SetPositionOptions {
    fn from(a: SetPositionArgs) -> Self {
        SetPositionOptions {
            steps: a.steps,
            config: a.config,
        }
    }
}

/// Arguments of `tuneward ctl`.
#[derive(Debug, clap::Args)]
pub struct CtlArgs {
    /// The station's config: the control socket is found from it (beside
    /// the journal, or `[control] socket`).
    #[arg(long, short, global = true, value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// Print the service's answer (and, with `watch`, each state) as JSON
    /// lines (protocols/control.md) instead of words.
    #[arg(long, global = true)]
    pub json: bool,
    #[command(subcommand)]
    pub what: CtlCommand,
}

/// What `tuneward ctl` asks of the running service.
#[derive(Debug, Clone, clap::Subcommand)]
pub enum CtlCommand {
    /// Show the rig's frequency, what the loop is tuned for, the capacitor
    /// and the state.
    Status,
    /// Show the state now and at every change, until Ctrl-C.
    Watch,
    /// Stop following the rig (operator moves still go).
    Pause,
    /// Follow the rig again.
    Resume,
    /// Move the capacitor by this many steps (`+20`, `-5`).
    Nudge {
        #[arg(allow_hyphen_values = true)]
        steps: i64,
    },
    /// Move the capacitor to this step position.
    Goto {
        #[arg(allow_hyphen_values = true)]
        steps: i64,
    },
    /// Go to a `[[preset]]` by name.
    Preset { name: String },
    /// Switch the calibration profile (`base` for the base).
    Profile { name: String },
    /// The loop is resonant now: store the rig's frequency at this position
    /// as a calibration point candidate (review with `tuneward fit`).
    Mark,
    /// Find resonance here, without transmitting: step the capacitor
    /// through a window around the calibration's prediction, read the
    /// rig's signal meter (the band noise peaks at resonance), move to the
    /// fitted peak and store it as a candidate. `--stop` ends a search.
    Peak {
        #[arg(long)]
        stop: bool,
    },
    /// Calibrate a band without an analyzer: set the rig's receive
    /// frequency to three points across BAND in turn, find resonance at
    /// each (as `peak`), store each clear peak as a candidate, and set the
    /// rig back where it was. It changes the rig's frequency, so it runs
    /// only with `--set-rig`, after a confirmation (`--yes` answers it).
    /// `--stop` ends a sweep.
    Calibrate {
        /// The band's name, as in the config's `[[band]]`.
        #[arg(required_unless_present = "stop")]
        band: Option<String>,
        /// Consent to the rig's frequency being set (and set back).
        #[arg(long)]
        set_rig: bool,
        /// Answer the confirmation with yes (for scripts).
        #[arg(long)]
        yes: bool,
        /// End the sweep under way (the search returns, the rig is set back).
        #[arg(long, conflicts_with_all = ["band", "set_rig", "yes"])]
        stop: bool,
    },
    /// Read the calibration again (after `fit --accept`).
    Reload,
}

impl CtlCommand {
    pub fn request(&self) -> tuneward::control::Request {
        use tuneward::control::Request;
        match self {
            CtlCommand::Status => Request::Status,
            CtlCommand::Watch => Request::Watch,
            CtlCommand::Pause => Request::Pause,
            CtlCommand::Resume => Request::Resume,
            CtlCommand::Nudge { steps } => Request::Nudge { steps: *steps },
            CtlCommand::Goto { steps } => Request::Goto { steps: *steps },
            CtlCommand::Preset { name } => Request::Preset { name: name.clone() },
            CtlCommand::Profile { name } => Request::Profile { name: name.clone() },
            CtlCommand::Mark => Request::Mark,
            CtlCommand::Peak { stop: false } => Request::Peak,
            CtlCommand::Peak { stop: true } => Request::PeakStop,
            CtlCommand::Calibrate { stop: true, .. } => Request::CalibrateStop,
            CtlCommand::Calibrate { band, set_rig, .. } => Request::Calibrate {
                band: band.clone().unwrap_or_default(),
                consent: *set_rig,
            },
            CtlCommand::Reload => Request::Reload,
        }
    }
}

/// `tuneward ctl`: `Ok(false)` when the service refused.
pub fn run_ctl(args: CtlArgs, out: &mut dyn std::io::Write) -> Result<bool, tuneward::Error> {
    use std::io::Write;
    use tuneward::control::client::{describe, describe_state, Client};
    let Some(config) = &args.config else {
        return Err(tuneward::Error::invalid(
            tuneward::error::Place::Named("ctl".into()),
            "`-c CONFIG` (the station's config, which says where the control socket is)",
            "none",
        ));
    };
    let config = tuneward::config::Config::load(config)?;
    if let CtlCommand::Calibrate {
        band: Some(band),
        set_rig: true,
        yes,
        stop: false,
    } = &args.what
    {
        if !*yes && !confirm_sweep(band, out)? {
            let _ = writeln!(out, "not confirmed; nothing asked of the service");
            return Ok(false);
        }
    }
    let socket = tuneward::station::control_socket_for(&config);
    let mut client = Client::connect(&socket)?;
    let request = args.what.request();
    let json = args.json;
    if let CtlCommand::Watch = args.what {
        // Both callbacks print as the lines come, through stdout itself.
        let print = |line: String| {
            let stdout = std::io::stdout();
            let mut lock = stdout.lock();
            let _ = writeln!(lock, "{line}");
            let _ = lock.flush();
        };
        let mut ok = true;
        client.watch(
            |a| {
                ok = a.ok;
                print(if json { to_json(a) } else { describe(a) });
            },
            |s| {
                print(if json {
                    to_json(&tuneward::control::protocol::StateLine { state: s.clone() })
                } else {
                    format!("--\n{}", describe_state(s))
                });
                true
            },
        )?;
        let _ = out.flush();
        return Ok(ok);
    }
    let answer = client.request(&request)?;
    let text = if json {
        to_json(&answer)
    } else {
        describe(&answer)
    };
    let _ = writeln!(out, "{text}");
    Ok(answer.ok)
}

/// Asks the operator on the terminal before a sweep sets the rig's
/// frequency: `true` only for an answer of `yes`. Without a terminal to ask
/// on it answers `false` (a script says `--yes`).
fn confirm_sweep(band: &str, out: &mut dyn std::io::Write) -> Result<bool, tuneward::Error> {
    use std::io::{BufRead, IsTerminal};
    let stdin = std::io::stdin();
    if !stdin.is_terminal() {
        let _ = writeln!(
            out,
            "the sweep sets the rig's frequency: confirm on a terminal, or add --yes"
        );
        return Ok(false);
    }
    let _ = write!(
        out,
        "This sets the rig's receive frequency to three points across {band} in turn, \
         with the transmit inhibit held, and then sets it back.\n\
         Do not transmit meanwhile. Go ahead? Type yes: "
    );
    let _ = out.flush();
    let mut line = String::new();
    stdin.lock().read_line(&mut line).map_err(|e| {
        tuneward::Error::invalid(
            tuneward::error::Place::Named("ctl calibrate".into()),
            "an answer on the terminal",
            e.to_string(),
        )
    })?;
    Ok(line.trim().eq_ignore_ascii_case("yes"))
}

fn to_json<T: serde::Serialize>(v: &T) -> String {
    // Our own plain types: serialising cannot fail.
    serde_json::to_string(v).unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::ValueEnum;

    /// Every model the library knows has a command-line name, and each
    /// name maps to the model of the same name (the config's spelling).
    #[test]
    fn model_names_on_the_command_line_are_the_library_names() {
        // A model added to the library must get a name here: this match
        // stops compiling until it does.
        fn named(kind: ModelKind) -> ModelArg {
            match kind {
                ModelKind::Interpolate => ModelArg::Interpolate,
                ModelKind::Physics => ModelArg::Physics,
                ModelKind::Poly => ModelArg::Poly,
                ModelKind::Auto => ModelArg::Auto,
            }
        }
        for arg in ModelArg::value_variants() {
            let name = arg.to_possible_value().map(|v| v.get_name().to_string());
            let kind = ModelKind::from(*arg);
            assert_eq!(name.as_deref(), Some(kind.name()));
            assert_eq!(named(kind), *arg);
        }
    }

    #[test]
    fn log_format_names_map_to_the_library_formats() {
        assert_eq!(
            LogFormat::from(LogFormatArg::from_str("json", false).unwrap()),
            LogFormat::Json
        );
        assert_eq!(
            LogFormat::from(LogFormatArg::from_str("text", false).unwrap()),
            LogFormat::Text
        );
    }
}

/// `tuneward sim-rig`'s arguments.
#[derive(Debug, Clone, clap::Args)]
pub struct SimRigArgs {
    /// Dialect to speak: a built-in name (binary-bcd, binary-bcd-4,
    /// text-semicolon, text-semicolon-9) or a dialect TOML file.
    #[arg(long, value_name = "NAME")]
    protocol: String,
    /// Create a pseudo-terminal and put a symlink to it at LINK.
    #[arg(long, value_name = "LINK")]
    pty: PathBuf,
    /// The operator's script (JSON lines) [default: a built-in demo].
    #[arg(long, value_name = "FILE")]
    script: Option<PathBuf>,
    /// Count the script's times from the first byte a controller sends
    /// instead of from start-up.
    #[arg(long)]
    script_from_first_byte: bool,
    /// The rig's address (binary family), decimal or 0x hex.
    #[arg(long, value_name = "N", default_value = "0x94", value_parser = parse_byte)]
    address: u8,
    /// Write the truth log (JSON lines) to FILE [default: standard error].
    #[arg(long, value_name = "FILE")]
    truth: Option<PathBuf>,
    /// No transceive / auto-information reports (a script can still turn
    /// them on).
    #[arg(long)]
    no_reports: bool,
    /// The rig's fixed port speed: a controller whose port is set to
    /// another speed hears garbage [default: any speed].
    #[arg(long, value_name = "N")]
    baud: Option<u32>,
    /// VFO A at start, in Hz.
    #[arg(long, default_value_t = 14_074_000, value_name = "HZ")]
    vfo_a: u64,
    /// VFO B at start, in Hz.
    #[arg(long, default_value_t = 14_074_000, value_name = "HZ")]
    vfo_b: u64,
    /// Answer the dialect's meter reads from a simulated loop and band
    /// described in FILE (TOML; keys in protocols/sim-rig.md). Without it,
    /// meter reads are refused like any unknown command.
    #[arg(long, value_name = "FILE")]
    meters: Option<PathBuf>,
    /// Where the simulated loop's capacitor is: a file holding a number of
    /// steps (`sim-tuner --position-file` writes one), read before every
    /// request. Needs --meters.
    #[arg(long, value_name = "FILE", requires = "meters")]
    tuner_position: Option<PathBuf>,
    /// Write every meter reading with its truth (JSON lines) to FILE.
    /// Needs --meters.
    #[arg(long, value_name = "FILE", requires = "meters")]
    meter_truth: Option<PathBuf>,
}

// A clap value parser: String error, as for `parse_duration`.
fn parse_byte(s: &str) -> Result<u8, String> {
    let parsed = match s.strip_prefix("0x").or_else(|| s.strip_prefix("0X")) {
        Some(hex) => u8::from_str_radix(hex, 16),
        None => s.parse::<u8>(),
    };
    parsed.map_err(|_| format!("expected a byte (0 to 255, or 0x00 to 0xFF), found {s:?}"))
}

/// `tuneward sim-rig`: the arguments mapped onto the simulator's settings.
pub fn run_sim_rig(args: SimRigArgs) -> Result<(), tuneward::Error> {
    let dialect = tuneward::rig::Dialect::resolve(&args.protocol, None).map_err(|source| {
        tuneward::Error::Dialect {
            option: "--protocol",
            source,
        }
    })?;
    let options = tuneward::sim::rig::SimOptions {
        address: args.address,
        vfo_a_hz: args.vfo_a,
        vfo_b_hz: args.vfo_b,
        reports: !args.no_reports,
        ..Default::default()
    };
    tuneward::sim::driver::run_sim_rig(&tuneward::sim::driver::SimRigSettings {
        dialect,
        link: args.pty,
        script: args.script,
        script_from_first_byte: args.script_from_first_byte,
        truth: args.truth,
        baud: args.baud,
        options,
        meters: args.meters,
        tuner_position: args.tuner_position,
        meter_truth: args.meter_truth,
    })?;
    Ok(())
}
