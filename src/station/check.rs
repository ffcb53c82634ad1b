//! `tuneward check`: everything `run` would build from a config, short of
//! opening a port, and what is wrong with it, graded.
//!
//! The parts are built by the same functions `run` uses
//! ([`super::settings`]: the rig's port and poll, the controller link, the
//! inhibit line, the journal), so a config `run` refuses is refused here.
//! Each finding is an *error* (check refuses the config and exits
//! non-zero), a *warning* (printed; an error with `--strict`) or a *note*,
//! and names the key and what to do.

use std::fmt;
use std::io::Write;
use std::path::Path;

use super::{settings, Station, StationError};
use crate::antenna::{bandwidth_1_5_hz, BandSpan, SmallLoop};
use crate::calibrate::{outlier, report, Calibration, FitSpec, ProfileMap};
use crate::config::{Approach, Config, Hysteresis};
use crate::journal::Recorded;
use crate::rig::Family;
use crate::timeline;

use settings::{InhibitSettings, SenseSettings};

/// How much a finding matters.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Grade {
    /// `check` refuses the config.
    Error,
    /// Printed; refused with `--strict`.
    Warning,
    /// Worth knowing.
    Note,
}

impl fmt::Display for Grade {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Grade::Error => "error",
            Grade::Warning => "warning",
            Grade::Note => "note",
        })
    }
}

/// One thing `check` found: the key it is about, what is wrong and what to
/// do about it.
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    pub grade: Grade,
    pub key: String,
    pub problem: String,
    pub fix: String,
}

impl Finding {
    fn new(
        grade: Grade,
        key: impl Into<String>,
        problem: impl Into<String>,
        fix: impl Into<String>,
    ) -> Self {
        Finding {
            grade,
            key: key.into(),
            problem: problem.into(),
            fix: fix.into(),
        }
    }
}

impl fmt::Display for Finding {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}: key `{}`: {}\n    what to do: {}",
            self.grade, self.key, self.problem, self.fix
        )
    }
}

/// How `tuneward check` judges.
#[derive(Debug, Clone, Copy, Default)]
pub struct CheckOptions {
    /// Warnings refuse the config as errors do.
    pub strict: bool,
}

/// `tuneward check` with the default options.
pub fn check(config: &Path, out: &mut dyn Write) -> Result<Vec<Finding>, StationError> {
    check_with(config, CheckOptions::default(), out)
}

/// `tuneward check`: loads the station (a config, dialect or calibration
/// that cannot be built is an error at once), describes what `run` would
/// do, and lists the findings. Refuses (`StationError::Refused`) when there
/// is an error, or with `strict` a warning; else returns the findings.
pub fn check_with(
    config: &Path,
    options: CheckOptions,
    out: &mut dyn Write,
) -> Result<Vec<Finding>, StationError> {
    let station = Station::load(config)?;
    let mut findings = Vec::new();
    let mut text = Vec::new();
    describe(&station, &mut findings, &mut text);
    findings.sort_by_key(|f| f.grade);
    let count = |g: Grade| findings.iter().filter(|f| f.grade == g).count();
    let (errors, warnings, notes) = (
        count(Grade::Error),
        count(Grade::Warning),
        count(Grade::Note),
    );
    let refused = errors > 0 || (options.strict && warnings > 0);
    writeln!(
        out,
        "{}: {}",
        config.display(),
        if refused { "refused" } else { "valid" }
    )?;
    for line in &text {
        writeln!(out, "{line}")?;
    }
    writeln!(
        out,
        "findings: {}, {}, {}",
        plural(errors, "error", "errors"),
        plural(warnings, "warning", "warnings"),
        plural(notes, "note", "notes")
    )?;
    for f in &findings {
        writeln!(out, "  {f}")?;
    }
    if refused {
        let mut summary = if options.strict && warnings > 0 {
            format!(
                "{} and {} (--strict refuses warnings too)",
                plural(errors, "error", "errors"),
                plural(warnings, "warning", "warnings")
            )
        } else {
            plural(errors, "error", "errors")
        };
        for f in findings
            .iter()
            .filter(|f| f.grade == Grade::Error || (options.strict && f.grade == Grade::Warning))
        {
            summary.push_str(&format!("\n  {}: key `{}`: {}", f.grade, f.key, f.problem));
        }
        return Err(StationError::Refused {
            path: config.to_path_buf(),
            summary,
        });
    }
    Ok(findings)
}

/// `n thing` or `n things`.
pub fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// The key a message from the settings names (`key `rig.baud``), if any.
fn key_in(message: &str) -> Option<String> {
    let (_, rest) = message.split_once("key `")?;
    let (key, _) = rest.split_once('`')?;
    Some(key.to_string())
}

/// The message without a leading `FILE: key `…`: ` (the finding names both).
fn without_key(message: &str) -> String {
    match message.split_once("`: ") {
        Some((head, rest)) if head.contains("key `") => rest.to_string(),
        _ => message.to_string(),
    }
}

/// A settings error as a finding about the key it names.
fn settings_error(e: &crate::Error, fallback_key: &str, fix: &str) -> Finding {
    let message = e.to_string();
    Finding::new(
        Grade::Error,
        key_in(&message).unwrap_or_else(|| fallback_key.to_string()),
        format!("{} (`run` refuses this config)", without_key(&message)),
        fix,
    )
}

fn describe(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    describe_rig(station, findings, text);
    describe_tuner(station, findings, text);
    describe_sense(station, findings, text);
    describe_inhibit(station, findings, text);
    describe_journal(station, findings, text);
    describe_mqtt(station, findings, text);
    let p = &station.policy;
    text.push(format!(
        "follow    debounce {} ms, min move {} steps",
        p.debounce.as_millis(),
        p.min_move_steps,
    ));
    describe_calibration(station, findings, text);
    describe_bands(station, findings, text);
}

fn describe_rig(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let c = &station.config;
    let family = station.dialect.family();
    let addresses = match (family, c.rig.address) {
        (Family::Binary, Some(a)) => format!(", reports from address 0x{a:02X} only"),
        (Family::Binary, None) => ", reports from any rig address".to_string(),
        (_, Some(_)) => {
            findings.push(Finding::new(
                Grade::Note,
                "rig.address",
                format!(
                    "`{}` is not a binary-family dialect, and only that family has addresses: the key is ignored",
                    station.dialect.name
                ),
                "remove it",
            ));
            String::new()
        }
        (_, None) => String::new(),
    };
    text.push(format!(
        "rig       {} ({} at {} baud){addresses}",
        station.dialect.name,
        c.rig.port.as_deref().unwrap_or("no port set"),
        c.rig.baud,
    ));
    let port = match &c.rig.port {
        Some(p) => p.clone(),
        None => {
            findings.push(Finding::new(
                Grade::Warning,
                "rig.port",
                "not set: `run` and `capture` refuse to start without it (replay and demo do not need it)",
                "set it to the rig's control port, preferably a stable /dev/serial/by-id/... path",
            ));
            "<rig.port>".to_string()
        }
    };
    if let Err(e) = settings::rig_source_on(station, port) {
        findings.push(settings_error(
            &e,
            "rig",
            "correct the key as the message says (see config/example.toml)",
        ));
    }
    match settings::swr_watch_parts(station) {
        Err(e) => findings.push(settings_error(
            &e,
            "swr_watch",
            "use a dialect with an SWR-meter read ([meter.swr]) or set swr_watch.action = \"off\"",
        )),
        Ok(Some(w)) => text.push(format!(
            "          SWR watch: alarm above {:.2} for {} ms, {}",
            w.settings.alarm,
            w.settings.hold.as_millis(),
            match (w.settings.action, w.settings.inhibit_wired) {
                (crate::follow::swr_watch::SwrAction::Inhibit, true) => {
                    "then the inhibit is asserted (it cuts the over short)"
                }
                (crate::follow::swr_watch::SwrAction::Inhibit, false) => {
                    "logged only (no inhibit line is wired)"
                }
                _ => "logged and shown",
            }
        )),
        Ok(None) => {}
    }
    let how = match c.rig.poll_every_ms() {
        Some(ms) => {
            let d = &station.dialect;
            let split = if d.poll_split(0).is_some() {
                ", split state"
            } else {
                ""
            };
            let other = if d.poll_other_vfo(0).is_some() {
                "; the other VFO too while split"
            } else {
                "; not the other VFO while split (the dialect names no read for it): split is followed only as far as the reads above show it"
            };
            format!("polled every {ms} ms (frequency, transmit state{split}{other})")
        }
        None if c.rig.mode == crate::config::RigMode::Proxy => {
            "what the other program's reads bring back (set rig.poll_ms to poll between them)"
                .to_string()
        }
        None if family == Family::Binary => "only what the rig reports on its own: turn its auto-report (transceive) on; the binary family's reports carry the frequency, not the transmit state, so only the inhibit line stops a transmission during a move".to_string(),
        None => "only what the rig reports on its own: turn its auto-report (transceive) on".to_string(),
    };
    if let Some(caveat) = settings::rig_caveat(station) {
        findings.push(Finding::new(
            Grade::Note,
            "rig.mode",
            caveat,
            "set rig.poll_ms (below the debounce) so that a VFO toggle is followed without waiting for the program's own set or read",
        ));
    }
    let mode = match c.rig.mode {
        crate::config::RigMode::Listen => "listen",
        crate::config::RigMode::Poll => "poll",
        crate::config::RigMode::Proxy => "proxy",
    };
    text.push(format!("          mode {mode}: {how}"));
}

/// What the hardware sense line adds to what tells tuneward about
/// transmissions.
fn describe_sense(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let every = crate::sense::POLL_EVERY.as_millis();
    let line = match settings::sense_settings(&station.config) {
        Err(e) => {
            findings.push(settings_error(
                &e,
                "transmit_sense.line",
                "give the key the input needs (see config/example.toml, [transmit_sense])",
            ));
            return text.push("sense     not usable (see the findings)".to_string());
        }
        Ok(SenseSettings::None) => {
            return text.push(
                "sense     none: transmissions are known only from the rig's port (above)"
                    .to_string(),
            )
        }
        Ok(SenseSettings::Modem {
            port,
            signal,
            active_high,
        }) => format!(
            "{} of {port}, transmitting = {} {}",
            signal.name(),
            signal.name(),
            if active_high { "asserted" } else { "released" }
        ),
        Ok(SenseSettings::Gpio {
            chip,
            offset,
            active_high,
        }) => format!(
            "GPIO {chip} line {offset}, transmitting = line {}",
            if active_high { "high" } else { "low" }
        ),
    };
    text.push(format!("sense     {line}, read every {every} ms"));
    text.push(
        "          the authority for transmissions: any source saying transmit means transmit, only this line ends one early; an unreadable line counts as transmitting"
            .to_string(),
    );
}

fn describe_tuner(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let c = &station.config;
    let p = &station.policy;
    text.push(format!(
        "tuner     {}, travel {}..={} steps at {} steps/s, backlash {} approached from {}",
        c.tuner.link,
        p.min_steps,
        p.max_steps,
        c.tuner.steps_per_second,
        p.backlash_steps,
        match p.approach {
            Approach::Up => "below",
            Approach::Down => "above",
        }
    ));
    if let Err(e) = settings::controller_settings(&c.tuner) {
        findings.push(settings_error(
            &e,
            "tuner.link",
            "write the controller's URL in one of the forms expected (config/example.toml lists them)",
        ));
    }
}

/// `[mqtt]`: what `run` connects to, read as `run` reads it (the password
/// file included); no connection is made.
fn describe_mqtt(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    match settings::mqtt_settings(&station.config) {
        Ok(None) => {}
        Ok(Some(m)) => text.push(format!(
            "mqtt      {}:{} as {}, topics {}/..., commands {}",
            m.host,
            m.port,
            m.client_id,
            m.prefix,
            if m.commands { "taken" } else { "off" }
        )),
        Err(e) => findings.push(settings_error(
            &e.into(),
            "mqtt",
            "fix the [mqtt] table as the message says (protocols/mqtt.md lists the keys)",
        )),
    }
}

/// Whether a real motor moves: anything but the built-in simulator.
fn real_tuner(config: &Config) -> bool {
    config.tuner.link.trim() != "sim"
}

fn describe_inhibit(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let c = &station.config;
    let p = &station.policy;
    let i = &c.inhibit;
    let line = match settings::inhibit_settings(i) {
        Err(e) => {
            findings.push(settings_error(
                &e,
                "inhibit.line",
                "give the key the line needs (see config/example.toml, [inhibit])",
            ));
            "not usable (see the findings)".to_string()
        }
        Ok(InhibitSettings::None) => {
            if real_tuner(c) && !i.unprotected_ok {
                findings.push(Finding::new(
                    Grade::Error,
                    "inhibit.line",
                    "\"none\" with a real tuner: nothing stops the rig transmitting while the capacitor moves, and tuneward cannot always know that it does (at start, after the rig's port comes back, and in listen mode when the rig's reports do not carry the transmit state)",
                    "wire an inhibit line fail-safe (README, Wiring) and set line = \"rts\", \"dtr\" or \"gpio\"; or, to run unprotected knowingly, write `unprotected_ok = true` in [inhibit]",
                ));
            } else {
                let why = if i.unprotected_ok {
                    " (stated with unprotected_ok = true)"
                } else {
                    " (no motor moves with tuner.link = \"sim\")"
                };
                findings.push(Finding::new(
                    Grade::Warning,
                    "inhibit.line",
                    format!("\"none\": nothing stops the rig transmitting while the capacitor moves{why}"),
                    "wire an inhibit line fail-safe (README, Wiring) before the loop is tuned by a real motor",
                ));
            }
            "none: nothing inhibits the rig (log only)".to_string()
        }
        Ok(InhibitSettings::Modem {
            port,
            signal,
            active_high,
        }) => {
            let name = match signal {
                crate::inhibit::ModemSignal::Rts => "RTS",
                crate::inhibit::ModemSignal::Dtr => "DTR",
            };
            if active_high {
                findings.push(Finding::new(
                    Grade::Warning,
                    "inhibit.active_high",
                    format!("true with {name}: not fail-safe; the kernel drops {name} when tuneward dies or the adapter is unplugged, and that releases the inhibit"),
                    "wire the rig's inhibit input asserted at rest, released only while the line is driven, and set active_high = false (README, Wiring)",
                ));
            }
            format!(
                "{name} of {port}, inhibit on = {name} {} (active_high = {active_high}{})",
                if active_high { "asserted" } else { "released" },
                if active_high {
                    ", not fail-safe"
                } else {
                    ", fail-safe with the README's wiring"
                }
            )
        }
        Ok(InhibitSettings::Gpio {
            chip,
            offset,
            active_high,
        }) => {
            findings.push(Finding::new(
                Grade::Note,
                "inhibit.line",
                "a GPIO line is let go when tuneward ends; whether it keeps its level or floats depends on the board",
                "put a pull resistor to the inhibited level on the line (README, Wiring)",
            ));
            format!(
                "GPIO {chip} line {offset}, inhibit on = line {} (active_high = {active_high})",
                if active_high { "high" } else { "low" }
            )
        }
    };
    if i.unprotected_ok && i.line != crate::config::InhibitKind::None {
        findings.push(Finding::new(
            Grade::Note,
            "inhibit.unprotected_ok",
            "has no effect with an inhibit line wired",
            "remove it",
        ));
    }
    if i.holds_cat_keying && i.line == crate::config::InhibitKind::None {
        findings.push(Finding::new(
            Grade::Note,
            "inhibit.holds_cat_keying",
            "has no effect without an inhibit line wired",
            "remove it, or wire a line to the rig's own transmit-inhibit input",
        ));
    }
    text.push(format!("inhibit   {line}"));
    if p.line_holds_commands {
        text.push(
            "          holds the rig off against CAT keying too (holds_cat_keying): a transmit command seen while it is set lets a move go ahead under it"
                .to_string(),
        );
    }
    text.push(format!(
        "          on from start until the position is known, {} ms before every move and {} ms after it{}",
        p.inhibit_lead.as_millis(),
        p.inhibit_tail.as_millis(),
        if p.inhibit_while_detuned {
            ", and from the first report of a frequency the loop is not tuned for"
        } else {
            " (not while merely detuned: follow.inhibit_while_detuned = false)"
        }
    ));
}

fn describe_journal(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let journal = settings::journal_for(&station.config);
    let path = journal.path().to_path_buf();
    let state = match journal.load() {
        Ok(None) => "none yet".to_string(),
        Ok(Some(Recorded::Known(n))) => format!("at rest at {n} steps"),
        Ok(Some(Recorded::Lost)) => {
            findings.push(Finding::new(
                Grade::Warning,
                "tuner.state_file",
                format!("{} says the count was lost (an end stop, or a homing run that did not finish): `run` will not move the tuner until a homing run (`tuner.home`) or the operator gives the position", path.display()),
                "with a home switch `run` homes by itself; otherwise establish where the motor is, then `tuneward set-position STEPS -c CONFIG`",
            ));
            "count lost: position unknown".to_string()
        }
        Ok(Some(Recorded::Unknown { from, to } | Recorded::Approach { from, to, .. })) => {
            findings.push(Finding::new(
                Grade::Warning,
                "tuner.state_file",
                format!("{} records a move from {from} to {to} steps that never finished: `run` will not move the tuner until the controller reports a point of that move's legs or the position is known", path.display()),
                "check the antenna, establish where the motor is, then `tuneward set-position STEPS -c CONFIG`",
            ));
            format!("unfinished move from {from} to {to} steps: position unknown")
        }
        Err(e) => {
            findings.push(Finding::new(
                Grade::Error,
                "tuner.state_file",
                format!("{e} (`run` refuses to start on it)"),
                "establish where the motor is, then `tuneward set-position STEPS -c CONFIG` writes a clean journal",
            ));
            "unreadable".to_string()
        }
    };
    if let Some(folder) = path.parent().filter(|f| !f.as_os_str().is_empty()) {
        if !folder.is_dir() {
            findings.push(Finding::new(
                Grade::Warning,
                "tuner.state_file",
                format!("the folder {} does not exist: `run` cannot write the position journal", folder.display()),
                "create it (or let systemd's StateDirectory= create it), or point state_file elsewhere",
            ));
        }
    }
    text.push(format!("journal   {} ({state})", path.display()));
}

/// Where the points come from, for findings about them.
fn points_key(config: &Config) -> &'static str {
    if config.calibration.file.is_some() {
        "calibration.file"
    } else {
        "calibration.points"
    }
}

fn describe_calibration(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let c = &station.config;
    let cal = &station.calibration;
    text.push("calibration".to_string());
    text.push(format!(
        "  {} from {}; {}",
        cal.spec().label(),
        plural(cal.points().len(), "point", "points"),
        cal.note()
    ));
    let coefficients: Vec<String> = cal
        .coefficients()
        .iter()
        .map(|c| format!("{c:.6e}"))
        .collect();
    if !coefficients.is_empty() {
        text.push(format!("  coefficients {}", coefficients.join(", ")));
    }
    if let Some(loo) = cal.loo_rms() {
        text.push(format!("  leave-one-out error {loo:.2} steps (RMS)"));
    }
    let spans: Vec<BandSpan> = c
        .bands
        .iter()
        .map(|b| BandSpan {
            name: b.name.clone(),
            low_hz: b.low_hz,
            high_hz: b.high_hz,
        })
        .collect();
    let described = SmallLoop::from_config(&c.antenna).is_some();
    let rep = report::build(cal, described.then_some(&c.antenna), &spans, &[]);
    let key = points_key(c);
    if let Some(o) = &rep.outlier {
        text.push(format!("  likely wrong: {}", o.message()));
        findings.push(Finding::new(
            Grade::Warning,
            key,
            format!("likely wrong: {}", o.message()),
            "correct the reading (or remeasure it) and check again",
        ));
    }
    for w in &rep.warnings {
        findings.push(Finding::new(
            Grade::Warning,
            key,
            format!("fit: {w}"),
            "measure or remeasure as it says; `tuneward fit POINTS -c CONFIG` shows every point",
        ));
    }
    judge_loo(
        station,
        cal,
        "base calibration",
        rep.outlier.as_ref(),
        findings,
    );
    let profiles = station.profiles.profiles();
    if !profiles.is_empty() {
        text.push(format!(
            "  profiles {} (in use: {})",
            profiles.join(", "),
            c.calibration.profile.as_deref().unwrap_or("base")
        ));
    }
    for name in &profiles {
        if let Some(ProfileMap::Own(own)) = station.profiles.profile(name) {
            let found = outlier::find(own);
            judge_loo(
                station,
                own,
                &format!("profile {name}"),
                found.as_ref(),
                findings,
            );
        }
    }
}

/// The leave-one-out error of `cal` per band, in Hz, against the bound:
/// the loop's 1.5:1 half-window where `[antenna]` describes it (or
/// `calibration.max_loo_error_hz` if stricter), else that key, else twice
/// the band's dead band.
fn judge_loo(
    station: &Station,
    cal: &Calibration,
    what: &str,
    named: Option<&outlier::Outlier>,
    findings: &mut Vec<Finding>,
) {
    let c = &station.config;
    let points = cal.points();
    let Some(errors) = outlier::loo_errors(cal.spec(), points) else {
        findings.push(Finding::new(
            Grade::Note,
            points_key(c),
            format!("{what}: too few points ({}) to predict one from the others, so check cannot say how well it holds between them", points.len()),
            "measure more points (three or more per band)",
        ));
        return;
    };
    // An interpolation's end points are extrapolated when left out: that
    // says nothing about them (as in the outlier test).
    let lowest = points.iter().map(|p| p.hz).fold(f64::INFINITY, f64::min);
    let highest = points
        .iter()
        .map(|p| p.hz)
        .fold(f64::NEG_INFINITY, f64::max);
    let judged =
        |hz: f64| !matches!(cal.spec(), FitSpec::Interpolate) || (hz > lowest && hz < highest);
    for (i, (band, b)) in station.policy.bands.iter().zip(&c.bands).enumerate() {
        let lo = band.low_hz.saturating_sub(band.guard_hz) as f64;
        let hi = band.high_hz.saturating_add(band.guard_hz) as f64;
        let hz_errors: Vec<f64> = points
            .iter()
            .zip(&errors)
            .filter(|(p, _)| p.hz >= lo && p.hz <= hi && judged(p.hz))
            .map(|(p, e)| e / cal.slope_at(p.hz))
            .filter(|e| e.is_finite())
            .collect();
        if hz_errors.is_empty() {
            continue;
        }
        let rms = (hz_errors.iter().map(|e| e * e).sum::<f64>() / hz_errors.len() as f64).sqrt();
        let centre = (band.low_hz as f64 + band.high_hz as f64) / 2.0;
        let half_window = bandwidth_1_5_hz(&c.antenna, centre).map(|bw| bw / 2.0);
        let set = c.calibration.max_loo_error_hz;
        let (bound, named_bound) = match (half_window, set) {
            (Some(h), Some(s)) if s < h => (s, format!("calibration.max_loo_error_hz = {s:.0} Hz")),
            (Some(h), _) => (h, format!("the loop's 1.5:1 half-window here, {h:.0} Hz")),
            (None, Some(s)) => (s, format!("calibration.max_loo_error_hz = {s:.0} Hz")),
            (None, None) => {
                let d = 2.0 * band.hysteresis_hz as f64;
                (d, format!("twice the band's dead band, {d:.0} Hz (no [antenna] description and no calibration.max_loo_error_hz)"))
            }
        };
        if rms > bound {
            let fix = match named {
                Some(o) => format!(
                    "fix the point named as likely wrong (measured {:.0} steps at {:.3} MHz) and check again",
                    o.measured,
                    o.hz / 1e6
                ),
                None => "remeasure this band's points, add points, or try another [calibration] model (`tuneward fit POINTS -c CONFIG --model ...`)".to_string(),
            };
            findings.push(Finding::new(
                Grade::Error,
                points_key(c),
                format!(
                    "{what}, band[{i}] ({}): leave-one-out error {rms:.0} Hz (RMS over {} in the band) is beyond {named_bound}: tuned by it, the loop would often be outside 1.5:1",
                    b.name,
                    plural(hz_errors.len(), "point", "points")
                ),
                fix,
            ));
        }
    }
}

fn describe_bands(station: &Station, findings: &mut Vec<Finding>, text: &mut Vec<String>) {
    let c = &station.config;
    let p = &station.policy;
    text.push("bands".to_string());
    let (min, max) = (p.min_steps as f64, p.max_steps as f64);
    for (i, (b, bc)) in p.bands.iter().zip(&c.bands).enumerate() {
        let key = format!("band[{i}] ({})", b.name);
        let lo = station.map.steps_at(b.low_hz as f64);
        let hi = station.map.steps_at(b.high_hz as f64);
        let within = |s: f64| (min..=max).contains(&s);
        let wholly_beyond =
            (lo < min && hi < min) || (lo > max && hi > max) || !lo.is_finite() || !hi.is_finite();
        let limits = format!(
            "tuner.min_steps..=max_steps ({}..={})",
            p.min_steps, p.max_steps
        );
        text.push(format!(
            "  {:<8} {} to {} (guard {} Hz), dead band {} Hz, debounce {} ms, steps {:.0} to {:.0}{}",
            b.name,
            timeline::mhz(b.low_hz),
            timeline::mhz(b.high_hz),
            b.guard_hz,
            b.hysteresis_hz,
            b.debounce.as_millis(),
            lo,
            hi,
            if wholly_beyond {
                "  (wholly beyond the travel limits)"
            } else if within(lo) && within(hi) {
                ""
            } else {
                "  (partly beyond the travel limits: clamped there)"
            }
        ));
        if wholly_beyond {
            findings.push(Finding::new(
                Grade::Error,
                key.clone(),
                format!("the calibration puts the whole band at steps {lo:.0} to {hi:.0}, beyond {limits}: every move there would stop at a limit, with the loop tuned for some other frequency"),
                "measure calibration points in this band (the curve is extrapolated there), correct the limits, or remove the band",
            ));
        } else if !(within(lo) && within(hi)) {
            findings.push(Finding::new(
                Grade::Warning,
                key.clone(),
                format!("the calibration puts the band at steps {lo:.0} to {hi:.0}, partly beyond {limits}: that part is tuned to the limit"),
                "measure points at the band's edges, or narrow the band to what the capacitor reaches",
            ));
        }
        let fixed = match bc.hysteresis_hz {
            Some(Hysteresis::Hz(h)) => Some((format!("{key}.hysteresis_hz"), h)),
            Some(_) => None,
            None => match c.follow.hysteresis_hz {
                Hysteresis::Hz(h) => Some(("follow.hysteresis_hz".to_string(), h)),
                _ => None,
            },
        };
        let centre = (b.low_hz as f64 + b.high_hz as f64) / 2.0;
        if let (Some((hkey, h)), Some(bw)) = (fixed, bandwidth_1_5_hz(&c.antenna, centre)) {
            if h as f64 > bw / 4.0 {
                findings.push(Finding::new(
                    Grade::Warning,
                    hkey,
                    format!("{h} Hz in {} is wider than a quarter of the loop's 1.5:1 bandwidth there ({:.0} Hz of {bw:.0} Hz): after a small retune the SWR can pass 1.5:1 without a move", b.name, bw / 4.0),
                    "lower it, or set it to \"auto\"",
                ));
            }
        }
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
                text.push(line);
                for w in &check.warnings {
                    findings.push(Finding::new(
                        Grade::Note,
                        "antenna",
                        w.clone(),
                        "take the estimates for this band as rough",
                    ));
                }
            }
            Err(e) => {
                text.push(format!("           REFUSED: {e}"));
                let (ekey, fix) = match &e {
                    crate::antenna::AntennaError::HighVoltage { .. } => (
                        "antenna.power_w",
                        "lower antenna.power_w, or fit a capacitor rated above the peak voltage",
                    ),
                    crate::antenna::AntennaError::FlatCalibration { .. } => (
                        points_key(c),
                        "check this band's calibration points: the steps must change with frequency",
                    ),
                };
                findings.push(Finding::new(Grade::Error, ekey, e.to_string(), fix));
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_settings_message_gives_its_key_once() {
        let m = "s.toml: key `rig.baud`: expected a positive baud rate, found 0";
        assert_eq!(key_in(m).as_deref(), Some("rig.baud"));
        assert_eq!(without_key(m), "expected a positive baud rate, found 0");
        assert_eq!(key_in("no key here"), None);
        assert_eq!(without_key("no key here"), "no key here");
    }

    #[test]
    fn counts_read_as_counts() {
        assert_eq!(plural(1, "error", "errors"), "1 error");
        assert_eq!(plural(0, "error", "errors"), "0 errors");
        assert_eq!(plural(2, "stretch", "stretches"), "2 stretches");
    }
}
