//! A station assembled from its config: the policy, the calibration, the rig
//! dialect and the tuner's mechanics, ready for a driver ([`settings`] turns
//! each part of the config into the plain settings its layer takes). Also the `replay`,
//! `demo` and `check` commands, which are thin uses of it.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use crate::calibrate::{Calibration, CalibrationSet, StepMap};
use crate::capture::{CaptureError, CaptureReader, Item};
use crate::config::{Config, ConfigError};
use crate::follow::Policy;
use crate::replay::{Chunk, Replay, ReplaySetup};
use crate::rig::{Dialect, DialectError};
use crate::timeline::{Human, JsonLines, Summary, Timeline};
use crate::tuner::sim::SimParams;

pub mod check;
pub mod error;
pub mod probe;
pub mod settings;
pub use check::{check, check_with, CheckOptions, Finding, Grade};
pub use settings::{
    burst_gap, calibrations_of, check_base_points, control_setup, control_socket_for, fit_base,
    fit_options, journal_for, lock_path_for, policy_from_config, port_settings,
    presets_from_config, rig_source, station_token, token_path_for, web_setup,
};

/// Anything that stops a command, worded for the operator.
#[derive(Debug, thiserror::Error)]
pub enum StationError {
    #[error(transparent)]
    Config(#[from] ConfigError),
    #[error(transparent)]
    Capture(#[from] CaptureError),
    #[error("{path}: key `rig.protocol`: {source}")]
    Dialect {
        path: PathBuf,
        #[source]
        source: DialectError,
    },
    /// `tuneward check` found errors (or, strict, warnings) in a config.
    #[error("{path}: refused by check: {summary}")]
    Refused { path: PathBuf, summary: String },
    #[error("cannot write output: {0}")]
    Output(#[from] std::io::Error),
}

/// Everything a driver needs, resolved from one config.
pub struct Station {
    pub config: Config,
    pub policy: Policy,
    /// The base calibration (points without a profile).
    pub calibration: Arc<Calibration>,
    /// The base and every profile.
    pub profiles: CalibrationSet,
    /// The map in use at start: `[calibration] profile`, or the base.
    pub map: Arc<dyn StepMap>,
    pub dialect: Dialect,
}

impl Station {
    /// Loads and resolves the config at `path`.
    pub fn load(path: &Path) -> Result<Station, StationError> {
        Station::from_config(Config::load(path)?)
    }

    /// Resolves an already parsed and validated config.
    pub fn from_config(config: Config) -> Result<Station, StationError> {
        let policy = policy_from_config(&config, |centre| {
            crate::antenna::auto_hysteresis_hz(&config.antenna, centre)
        })?;
        let calibration_error = |source| ConfigError::Calibration {
            path: config.path_for_errors(),
            source,
        };
        let points = config.calibration_points()?;
        // No base points is the error to report, before anything a
        // profile's points might say.
        check_base_points(&config, &points)?;
        let profiles =
            CalibrationSet::fit_with(fit_options(&config), &points).map_err(calibration_error)?;
        // The base is fitted once, inside the set; without one there were
        // no points at all, which the base fit reports.
        let calibration = match profiles.base() {
            Some(base) => Arc::clone(base),
            None => Arc::new(fit_base(&config)?),
        };
        let map = profiles
            .map(config.calibration.profile.as_deref())
            .map_err(calibration_error)?;
        let dialect =
            Dialect::resolve(&config.rig.protocol, config.folder()).map_err(|source| {
                StationError::Dialect {
                    path: config.path_for_errors(),
                    source,
                }
            })?;
        Ok(Station {
            config,
            policy,
            calibration,
            profiles,
            map,
            dialect,
        })
    }

    /// The simulated mechanics this config describes.
    pub fn sim_params(&self) -> SimParams {
        let t = &self.config.tuner;
        SimParams {
            steps_per_second: t.steps_per_second,
            settle_ms: t.settle_ms,
            backlash_steps: t.backlash_steps,
            min_steps: t.min_steps,
            max_steps: t.max_steps,
        }
    }

    /// A replay setup for this station, starting at `start_steps` (the lower
    /// limit when not given).
    pub fn replay_setup(&self, start_steps: Option<i64>) -> ReplaySetup {
        ReplaySetup {
            policy: self.policy.clone(),
            map: Arc::clone(&self.map),
            decoder: self.dialect.station_decoder(self.config.rig.address),
            tuner: self.sim_params(),
            start_steps: Some(start_steps.unwrap_or(self.config.tuner.min_steps)),
            sense_wired: self.config.transmit_sense.line != crate::config::SenseKind::None,
        }
    }
}

/// How `tuneward replay` runs.
#[derive(Debug, Clone, Copy, Default)]
pub struct ReplayOptions {
    /// Where the simulated motor starts [default: `tuner.min_steps`].
    pub start_steps: Option<i64>,
    /// Pass over malformed capture lines (each warned about) instead of
    /// stopping at the first; they are counted as `bad_lines`.
    pub skip_bad_lines: bool,
}

/// `tuneward replay`: a capture file through the station's core, in virtual
/// time. Stops at the first malformed capture line.
pub fn replay_file(
    config: &Path,
    capture: &Path,
    start_steps: Option<i64>,
    timeline: &mut dyn Timeline,
) -> Result<Summary, StationError> {
    let options = ReplayOptions {
        start_steps,
        skip_bad_lines: false,
    };
    replay_file_with(config, capture, options, timeline, &mut std::io::sink())
}

/// `tuneward replay` with its options. With `skip_bad_lines`, each malformed
/// line (its file, line, what was expected and what was found; never the
/// line itself, which may be megabytes) is written to `warnings` and the
/// replay carries on at the next line; an I/O error still stops it.
pub fn replay_file_with(
    config: &Path,
    capture: &Path,
    options: ReplayOptions,
    timeline: &mut dyn Timeline,
    warnings: &mut dyn Write,
) -> Result<Summary, StationError> {
    let station = Station::load(config)?;
    let reader = CaptureReader::open(capture)?;
    let mut replay = Replay::new(station.replay_setup(options.start_steps), timeline);
    for record in reader.items() {
        let record = match record {
            Ok(r) => r,
            Err(e @ CaptureError::Line { .. }) if options.skip_bad_lines => {
                writeln!(warnings, "tuneward: warning: {e}; line skipped")?;
                replay.skip_bad_line();
                continue;
            }
            Err(e) => return Err(e.into()),
        };
        match record {
            Item::Bytes(record) => replay.feed(Chunk {
                t: record.t,
                dir: record.dir,
                bytes: &record.bytes,
            })?,
            Item::Sense(s) => replay.feed_sense(s.t, s.on)?,
        }
    }
    Ok(replay.finish()?)
}

/// The demo's config, compiled in.
pub const DEMO_CONFIG: &str = include_str!("../config/demo.toml");

/// `tuneward demo`: the bundled evening through the demo station.
pub fn demo(out: &mut dyn Write, json: bool) -> Result<Summary, StationError> {
    let config = Config::parse(DEMO_CONFIG, Path::new("config/demo.toml"))?;
    config.validate()?;
    let station = Station::from_config(config)?;
    let scenario = crate::scenario::demo_evening();
    let chunks = scenario.chunks(&DialectWire {
        dialect: &station.dialect,
        address: 0x94,
    });
    if !json {
        writeln!(
            out,
            "An invented evening at a station with a small loop on 40 m, 30 m and 20 m,\n\
             replayed against a simulated tuner. Times are seconds from the start.\n"
        )?;
    }
    let start = station.map.steps_at(7_074_000.0).round() as i64;
    let summary = {
        let mut human;
        let mut lines;
        let timeline: &mut dyn Timeline = if json {
            lines = JsonLines(&mut *out);
            &mut lines
        } else {
            human = Human::new(&mut *out, false);
            &mut human
        };
        let mut replay = Replay::new(station.replay_setup(Some(start)), timeline);
        for (t, dir, bytes) in &chunks {
            replay.feed(Chunk {
                t: *t,
                dir: *dir,
                bytes,
            })?;
        }
        replay.finish()?
    };
    if !json {
        let tx_overs = scenario.transmit.len();
        let n = |count: u64, one: &str, many: &str| check::plural(count as usize, one, many);
        writeln!(
            out,
            "\n{} of operating, {}, {} the operator stayed.\n\
             The tuner moved {} ({} in all) and never while the rig transmitted;\n\
             {} of line noise {} ignored. Try `tuneward demo --json` for the\n\
             machine-readable timeline, or `tuneward replay` on a capture of your own.",
            n(scenario.end.as_secs() / 60, "minute", "minutes"),
            n(tx_overs as u64, "transmission", "transmissions"),
            n(scenario.dwells.len() as u64, "place", "places"),
            n(summary.moves, "time", "times"),
            n(summary.steps, "step", "steps"),
            n(summary.rejected, "stretch", "stretches"),
            if summary.rejected == 1 { "was" } else { "were" },
        )?;
    }
    Ok(summary)
}

/// A rig dialect as a [`crate::scenario::Wire`], for generating captures.
pub struct DialectWire<'a> {
    pub dialect: &'a Dialect,
    pub address: u8,
}

impl crate::scenario::Wire for DialectWire<'_> {
    fn frequency(&self, hz: u64) -> Vec<u8> {
        self.dialect.encode_frequency(hz, self.address)
    }
    fn transmit(&self, on: bool) -> Vec<u8> {
        self.dialect.encode_transmit(on, self.address)
    }
    fn station(&self, m: &crate::rig::StationMessage) -> Vec<u8> {
        self.dialect.encode_station(m, self.address)
    }
    /// The block family answers only when asked: its frequency read before
    /// a frequency, its transmit-status read before a transmit state.
    fn request(&self, what: &crate::scenario::Happening) -> Vec<u8> {
        use crate::scenario::Happening;
        if self.dialect.family() != crate::rig::Family::Block {
            return Vec::new();
        }
        match what {
            Happening::Report { .. } => self.dialect.poll_frequency(self.address),
            Happening::Transmit { .. } => self.dialect.poll_transmit(self.address),
            Happening::Noise { .. } | Happening::Station(_) => Vec::new(),
        }
    }
}

/// `tuneward demo --live`: the demo station live, without hardware. A
/// simulated rig ([`crate::sim::driver`], its built-in scripted operator)
/// on a pseudo-terminal in a scratch folder, the in-process simulated
/// controller (`link = "sim"`), and the live service with the web page on
/// `listen` (loopback only); `on_url` is told the page's address. Runs
/// until SIGINT, SIGTERM or SIGHUP; the scratch folder is removed at the
/// end.
pub fn demo_live(
    listen: std::net::SocketAddr,
    on_url: Box<dyn FnOnce(String) + Send>,
) -> Result<(), crate::station::error::Error> {
    use crate::station::error::Error;
    if !listen.ip().is_loopback() {
        return Err(Error::invalid(
            crate::error::Place::Named("demo --listen".into()),
            "a loopback address such as 127.0.0.1:7720 (the demo takes no token)",
            listen.to_string(),
        ));
    }
    let dir = std::env::temp_dir().join(format!("tuneward-demo-{}", std::process::id()));
    std::fs::create_dir_all(&dir).map_err(|e| {
        Error::invalid(
            crate::error::Place::Named(dir.display().to_string()),
            "a scratch folder for the demo",
            e.to_string(),
        )
    })?;
    let result = demo_live_in(&dir, listen, on_url);
    let _ = std::fs::remove_dir_all(&dir);
    result
}

fn demo_live_in(
    dir: &Path,
    listen: std::net::SocketAddr,
    on_url: Box<dyn FnOnce(String) + Send>,
) -> Result<(), crate::station::error::Error> {
    use crate::station::error::Error;
    let mut config = Config::parse(DEMO_CONFIG, Path::new("config/demo.toml"))?;
    let rig_link = dir.join("rig");
    config.rig.port = Some(rig_link.display().to_string());
    // Polled, so the simulated rig's transmit state is always known.
    config.rig.mode = crate::config::RigMode::Poll;
    config.rig.poll_ms = Some(200);
    config.rig.address = Some(crate::sim::rig::SimOptions::default().address);
    config.tuner.state_file = Some(dir.join("motor.state"));
    config.control.socket = Some(dir.join("control.sock"));
    // A simulated rig and controller: no inhibit line to wire.
    config.inhibit.unprotected_ok = true;
    config.validate()?;
    let station = Station::from_config(config)?;

    // The simulated rig is `tuneward sim-rig` itself, as a child: the
    // same program an operator would start, with its own signal handling.
    let demo = || crate::error::Place::Named("tuneward demo --live".into());
    let exe = std::env::current_exe().map_err(|e| {
        Error::invalid(
            demo(),
            "this program's path, to start sim-rig",
            e.to_string(),
        )
    })?;
    let mut sim = std::process::Command::new(exe)
        .arg("sim-rig")
        .arg("--protocol")
        .arg(&station.config.rig.protocol)
        .arg("--pty")
        .arg(&rig_link)
        .arg("--script-from-first-byte")
        .arg("--truth")
        .arg(dir.join("truth.jsonl"))
        .stdin(std::process::Stdio::null())
        .stdout(std::process::Stdio::null())
        .spawn()
        .map_err(|e| Error::invalid(demo(), "sim-rig started", e.to_string()))?;
    let result = demo_live_with(&station, &rig_link, listen, on_url);
    let _ = sim.kill();
    let _ = sim.wait();
    result
}

fn demo_live_with(
    station: &Station,
    rig_link: &Path,
    listen: std::net::SocketAddr,
    on_url: Box<dyn FnOnce(String) + Send>,
) -> Result<(), crate::station::error::Error> {
    use crate::station::error::Error;
    // The service reconnects to a port that is not there yet, but a
    // demo should not start with a warning about it.
    let until = std::time::Instant::now() + std::time::Duration::from_secs(5);
    while std::fs::symlink_metadata(rig_link).is_err() && std::time::Instant::now() < until {
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    let parts = crate::service::ServiceParts::from_station(station)?;
    let control = crate::service::ControlSetup {
        socket: settings::control_socket_for(&station.config),
        listen: None,
        web: Some(crate::control::web::WebSetup {
            listen,
            token: None,
            host_names: Vec::new(),
        }),
        reload: None,
        mqtt: None,
        on_web_ready: Some(Box::new(move |addr| on_url(format!("http://{addr}/")))),
    };
    crate::service::run_until_signal(parts, Some(control)).map_err(|e| {
        Error::invalid(
            crate::error::Place::Named("tuneward demo --live".into()),
            "the live service to run",
            e.to_string(),
        )
    })?;
    Ok(())
}
