//! A station assembled from its config: the policy, the calibration, the rig
//! dialect and the tuner's mechanics, ready for a driver ([`settings`] turns
//! each part of the config into the plain settings its layer takes). Also the `replay`,
//! `demo` and `check` commands, which are thin uses of it.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use crate::calibrate::{Calibration, CalibrationSet, StepMap};
use crate::capture::{CaptureError, CaptureReader};
use crate::config::{Config, ConfigError};
use crate::follow::Policy;
use crate::replay::{Chunk, Replay, ReplaySetup};
use crate::rig::{Dialect, DialectError};
use crate::timeline::{self, Human, JsonLines, Summary, Timeline};
use crate::tuner::sim::SimParams;

pub mod error;
pub mod settings;
pub use settings::{
    check_base_points, fit_base, fit_options, journal_for, policy_from_config, port_settings,
    rig_source,
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
    #[error("{path}: {source}")]
    Antenna {
        path: PathBuf,
        #[source]
        source: crate::antenna::AntennaError,
    },
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
            decoder: self.dialect.decoder(self.config.rig.address),
            tuner: self.sim_params(),
            start_steps: Some(start_steps.unwrap_or(self.config.tuner.min_steps)),
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
    for record in reader {
        let record = match record {
            Ok(r) => r,
            Err(e @ CaptureError::Line { .. }) if options.skip_bad_lines => {
                writeln!(warnings, "tuneward: warning: {e}; line skipped")?;
                replay.skip_bad_line();
                continue;
            }
            Err(e) => return Err(e.into()),
        };
        replay.feed(Chunk {
            t: record.t,
            dir: record.dir,
            bytes: &record.bytes,
        })?;
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
        writeln!(
            out,
            "\n{} minutes of operating, {} transmissions, {} places the operator stayed.\n\
             The tuner moved {} times ({} steps in all) and never while the rig transmitted;\n\
             {} stretches of line noise were ignored. Try `tuneward demo --json` for the\n\
             machine-readable timeline, or `tuneward replay` on a capture of your own.",
            scenario.end.as_secs() / 60,
            tx_overs,
            scenario.dwells.len(),
            summary.moves,
            summary.steps,
            summary.rejected,
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
}

/// `tuneward check`: validates a config and describes what it will do.
pub fn check(config: &Path, out: &mut dyn Write) -> Result<(), StationError> {
    let station = Station::load(config)?;
    let c = &station.config;
    let p = &station.policy;
    writeln!(out, "{}: valid", config.display())?;
    writeln!(
        out,
        "rig       {} ({}), {}",
        station.dialect.name,
        c.rig.port.as_deref().unwrap_or("no port set"),
        match c.rig.address {
            Some(a) => format!("reports from address 0x{a:02X} only"),
            None => "reports from any rig address".to_string(),
        }
    )?;
    writeln!(
        out,
        "tuner     {}, travel {}..={} steps at {} steps/s, backlash {} approached from {}",
        c.tuner.link,
        p.min_steps,
        p.max_steps,
        c.tuner.steps_per_second,
        p.backlash_steps,
        match p.approach {
            crate::config::Approach::Up => "below",
            crate::config::Approach::Down => "above",
        }
    )?;
    writeln!(
        out,
        "follow    debounce {} ms, min move {} steps, inhibit {} ms before and {} ms after",
        p.debounce.as_millis(),
        p.min_move_steps,
        p.inhibit_lead.as_millis(),
        p.inhibit_tail.as_millis()
    )?;
    writeln!(out, "calibration")?;
    writeln!(
        out,
        "  {} from {} points; {}",
        station.calibration.spec().label(),
        station.calibration.points().len(),
        station.calibration.note()
    )?;
    let coefficients: Vec<String> = station
        .calibration
        .coefficients()
        .iter()
        .map(|c| format!("{c:.6e}"))
        .collect();
    if !coefficients.is_empty() {
        writeln!(out, "  coefficients {}", coefficients.join(", "))?;
    }
    if let Some(loo) = station.calibration.loo_rms() {
        writeln!(out, "  leave-one-out error {loo:.2} steps (RMS)")?;
    }
    let profiles = station.profiles.profiles();
    if !profiles.is_empty() {
        writeln!(
            out,
            "  profiles {} (in use: {})",
            profiles.join(", "),
            c.calibration.profile.as_deref().unwrap_or("base")
        )?;
    }
    writeln!(out, "bands")?;
    let mut refusal = None;
    for (b, bc) in p.bands.iter().zip(&c.bands) {
        let lo = station.map.steps_at(b.low_hz as f64);
        let hi = station.map.steps_at(b.high_hz as f64);
        let within = |s: f64| (p.min_steps as f64..=p.max_steps as f64).contains(&s);
        writeln!(
            out,
            "  {:<8} {} to {} (guard {} Hz), dead band {} Hz, debounce {} ms, steps {:.0} to {:.0}{}",
            b.name,
            timeline::mhz(b.low_hz),
            timeline::mhz(b.high_hz),
            b.guard_hz,
            b.hysteresis_hz,
            b.debounce.as_millis(),
            lo,
            hi,
            if within(lo) && within(hi) {
                ""
            } else {
                "  (beyond the travel limits: will be clamped)"
            }
        )?;
        match crate::antenna::check_band(&c.antenna, bc, station.map.as_ref()) {
            Ok(check) => {
                let mut line = format!("           {:.0} Hz per step", check.hz_per_step);
                if let Some(e) = &check.estimate {
                    line.push_str(&format!(
                        "; 1.5:1 bandwidth about {:.0} Hz, 2:1 about {:.0} Hz (Q {:.0})",
                        e.bandwidth_1_5_hz, e.bandwidth_2_hz, e.q_unloaded
                    ));
                }
                if let (Some(v), Some(r)) = (check.capacitor_v_peak, check.capacitor_rating_v) {
                    line.push_str(&format!(
                        "; capacitor about {v:.0} V peak of {r:.0} V rated"
                    ));
                } else if let Some(v) = check.capacitor_v_peak {
                    line.push_str(&format!("; capacitor about {v:.0} V peak"));
                }
                writeln!(out, "{line}")?;
                for w in &check.warnings {
                    writeln!(out, "           note: {w}")?;
                }
            }
            Err(e) => {
                writeln!(out, "           REFUSED: {e}")?;
                refusal.get_or_insert(e);
            }
        }
    }
    if let Some(source) = refusal {
        return Err(StationError::Antenna {
            path: config.to_path_buf(),
            source,
        });
    }
    Ok(())
}
