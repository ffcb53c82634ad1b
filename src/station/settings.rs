//! Config becomes runtime settings: the one place that turns a parsed,
//! validated [`Config`] into the plain settings the lower layers take (the
//! follow [`Policy`], the fitted calibration, the rig's port and poll, the
//! controller link, the inhibit line, the journal). The pure layers know
//! nothing of config files, keys or paths; every relative path is resolved
//! by [`Config::resolve_path`], every rule checked once in the config's
//! validation, and errors name the file and key.

use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::time::Duration;

use crate::antenna::BandSpan;
use crate::calibrate::cli::FitStation;
use crate::calibrate::CalibrationSet;
use crate::calibrate::{Calibration, FitOptions, Point};
use crate::config::{
    Config, ConfigError, Hysteresis, InhibitConfig, InhibitKind, ModemLineSetting, RigConfig,
    RigUse, SenseConfig, SenseKind, SerialFlow, SerialParity, TunerConfig, DEFAULT_HYSTERESIS_HZ,
};
use crate::error::{Located, Place};
use crate::follow::session::HomeSettings;
use crate::follow::{Band, Calibrations, Follower, Jump, Policy, Preset, PresetGoal, WhileUnknown};
use crate::inhibit::{self, InhibitLine};
use crate::journal::{Journal, SetPositionOptions, DEFAULT_STATE_FILE};
use crate::port::link::LinkConfig;
use crate::port::proxy::ProxyConfig;
use crate::sense::{self, SenseInput, StatusSignal};
use crate::service::{RigSource, ServiceParts};
use crate::station::error::Error;
use crate::tuner::client::ClientConfig;

use super::Station;

/// Resolves the policy from a validated config. `"auto"` dead bands are
/// resolved through `auto_hysteresis`, which is given a band's centre in
/// Hz and answers with a dead band in Hz, or `None` if it cannot estimate
/// one (no antenna described).
pub fn policy_from_config(
    config: &Config,
    auto_hysteresis: impl Fn(f64) -> Option<u64>,
) -> Result<Policy, ConfigError> {
    let path = config.path_for_errors();
    let f = &config.follow;
    let mut bands = Vec::with_capacity(config.bands.len());
    for (i, b) in config.bands.iter().enumerate() {
        let centre = (b.low_hz as f64 + b.high_hz as f64) / 2.0;
        let (key, setting) = match b.hysteresis_hz {
            Some(h) => (format!("band[{i}] ({}).hysteresis_hz", b.name), h),
            None => ("follow.hysteresis_hz".to_string(), f.hysteresis_hz),
        };
        let hysteresis_hz = match setting {
            Hysteresis::Hz(hz) => hz,
            Hysteresis::Unset => auto_hysteresis(centre).unwrap_or(DEFAULT_HYSTERESIS_HZ),
            Hysteresis::Auto(_) => {
                auto_hysteresis(centre).ok_or_else(|| ConfigError::Invalid(Located::new(
                    Place::key(path.clone(), key),
                    "a number of Hz, or \"auto\" with [antenna] loop_diameter_m and conductor_diameter_m set",
                    "\"auto\" without an antenna description",
                )))?
            }
        };
        bands.push(Band {
            name: b.name.clone(),
            low_hz: b.low_hz,
            high_hz: b.high_hz,
            guard_hz: b.guard_hz,
            hysteresis_hz,
            debounce: Duration::from_millis(b.debounce_ms.unwrap_or(f.debounce_ms)),
        });
    }
    let t = &config.tuner;
    Ok(Policy {
        bands,
        min_steps: t.min_steps,
        max_steps: t.max_steps,
        backlash_steps: t.backlash_steps,
        approach: t.approach,
        debounce: Duration::from_millis(f.debounce_ms),
        min_move_steps: f.min_move_steps,
        inhibit_lead: Duration::from_millis(f.inhibit_lead_ms),
        inhibit_while_detuned: f.inhibit_while_detuned,
        inhibit_tail: Duration::from_millis(f.inhibit_tail_ms),
        candidate_dwell: Duration::from_millis(f.candidate_dwell_ms),
        jump: (f.jump_hz > 0).then(|| Jump {
            min_hz: f.jump_hz,
            quiet: Duration::from_millis(f.jump_quiet_ms),
        }),
        sweep_settle: (f.sweep_settle_intervals > 0).then_some(f64::from(f.sweep_settle_intervals)),
        tune_for: f.tune_for.into(),
        while_unknown: while_unknown(&config.inhibit),
        line_holds_commands: config.inhibit.holds_cat_keying
            && config.inhibit.line != InhibitKind::None,
        inhibit_until_tuned: true,
        cover_alternate: f.cover_other_vfo,
        burst_gap: burst_gap(config.rig.baud),
    })
}

/// Bits a byte takes on an asynchronous serial line with one start bit,
/// eight data bits and two stop bits (8N2, the longest framing rigs'
/// control ports use; 8N1 takes 10).
const BITS_PER_BYTE: u64 = 11;

/// A program's command and what comes back before its next, at most, in
/// bytes: a binary-family frequency, split or VFO frame of up to 12 bytes,
/// echoed on the family's one-wire bus, and the rig's 6-byte answer (30);
/// a text-family frequency set of 14 bytes, which has no answer; rounded
/// up to 40 (frame lengths recalled from the families' published command
/// references).
const BURST_STEP_BYTES: u64 = 40;

/// Time a program takes between reading the rig's answer to one command of
/// a burst and writing the next, and the rig between a command and its
/// answer (common practice, no source).
const BURST_ALLOWANCE: Duration = Duration::from_millis(30);

/// The longest a program leaves between two commands of one burst on a rig
/// port at `baud`: a command and the rig's answer on the wire (a program
/// may wait for the answer before its next command), plus
/// `BURST_ALLOWANCE`. 19 200 baud: 440 bits in 22.9 ms, so 52.9 ms.
pub fn burst_gap(baud: u32) -> Duration {
    let bits = BURST_STEP_BYTES * BITS_PER_BYTE;
    let wire = Duration::from_micros(bits * 1_000_000 / u64::from(baud.max(1)));
    wire + BURST_ALLOWANCE
}

/// What a move may do while the transmit state is unknown: go ahead under a
/// wired inhibit line, go ahead unprotected where the station wrote that
/// down (`[inhibit] unprotected_ok = true`), or wait.
pub fn while_unknown(inhibit: &InhibitConfig) -> WhileUnknown {
    match (inhibit.line, inhibit.unprotected_ok) {
        (InhibitKind::None, true) => WhileUnknown::MoveUnprotected,
        (InhibitKind::None, false) => WhileUnknown::Hold,
        _ => WhileUnknown::MoveUnderInhibit,
    }
}

/// How `[calibration]` asks for its points to be fitted.
pub fn fit_options(config: &Config) -> FitOptions {
    FitOptions {
        kind: config.calibration.model,
        degree: config
            .calibration
            .degree
            .unwrap_or(crate::calibrate::DEFAULT_POLY_DEGREE),
    }
}

/// Points, all of them in a profile, leave no base calibration for the
/// profiles to be offsets from: that is an error of its own.
pub fn check_base_points(config: &Config, points: &[Point]) -> Result<(), ConfigError> {
    if points.is_empty() || points.iter().any(|p| p.profile.is_none()) {
        return Ok(());
    }
    Err(config.invalid(
        "calibration",
        "points without a profile (the base calibration, which profiles are offsets from)",
        format!("{} points, every one of them in a profile", points.len()),
    ))
}

/// The fitted base calibration this config describes (points without a
/// profile; [`crate::calibrate::CalibrationSet`] handles profiles).
pub fn fit_base(config: &Config) -> Result<Calibration, ConfigError> {
    let mut points = config.calibration_points()?;
    check_base_points(config, &points)?;
    points.retain(|p| p.profile.is_none());
    Calibration::fit_with(fit_options(config), &points).map_err(|source| ConfigError::Calibration {
        path: config.path_for_errors(),
        source,
    })
}

/// The position journal a config names (`tuner.state_file`, relative to the
/// config's folder), or [`DEFAULT_STATE_FILE`] beside the config.
pub fn journal_for(config: &Config) -> Journal {
    let name = config
        .tuner
        .state_file
        .clone()
        .unwrap_or_else(|| PathBuf::from(DEFAULT_STATE_FILE));
    Journal::new(config.resolve_path(&name))
}

/// The presets of `[[preset]]` (validated: one of `hz` and `steps` each).
pub fn presets_from_config(config: &Config) -> Vec<Preset> {
    config
        .presets
        .iter()
        .filter_map(|p| {
            let goal = match (p.hz, p.steps) {
                (Some(hz), None) => PresetGoal::Hz(hz),
                (None, Some(steps)) => PresetGoal::Steps(steps),
                _ => return None,
            };
            Some(Preset {
                name: p.name.clone(),
                goal,
            })
        })
        .collect()
}

/// Every calibration of a fitted set, for the core's profile switch.
pub fn calibrations_of(set: &CalibrationSet) -> Calibrations {
    Calibrations {
        base: set.map(None).ok(),
        profiles: set
            .profiles()
            .into_iter()
            .filter_map(|name| set.map(Some(&name)).ok().map(|m| (name, m)))
            .collect(),
    }
}

/// The operator's control for `run`: the socket, `[control] listen`, and
/// `reload` reading the station's config at `config_path` again.
pub fn control_setup(
    station: &Station,
    config_path: &Path,
) -> Result<crate::service::ControlSetup, Error> {
    let config = &station.config;
    let listen = config.control_listen()?;
    let path = config_path.to_path_buf();
    Ok(crate::service::ControlSetup {
        socket: control_socket_for(config),
        listen,
        mqtt: mqtt_settings(config)?,
        web: web_setup(config)?,
        on_web_ready: None,
        reload: Some(Box::new(move || {
            Station::load(&path)
                .map(|s| calibrations_of(&s.profiles))
                .map_err(|e| crate::error::IoFailure::new("the station's config", e))
        })),
    })
}

/// `[mqtt]` as the MQTT front end takes it (`None`: not configured); the
/// password is read from `password_file` here, at start.
pub fn mqtt_settings(
    config: &Config,
) -> Result<Option<crate::control::mqtt::MqttSettings>, ConfigError> {
    let (Some(m), Some((broker, prefix, client_id))) = (&config.mqtt, config.mqtt_broker()?) else {
        return Ok(None);
    };
    let login = match (&m.username, &m.password_file) {
        (Some(user), Some(file)) => {
            let path = config.resolve_path(file);
            let text = std::fs::read_to_string(&path).map_err(|e| {
                config.invalid(
                    "mqtt.password_file",
                    "a readable file holding the broker password",
                    format!("{}: {e}", path.display()),
                )
            })?;
            let password = text.lines().next().unwrap_or_default().to_string();
            Some((user.clone(), password))
        }
        _ => None,
    };
    Ok(Some(crate::control::mqtt::MqttSettings {
        host: broker.host,
        port: broker.port,
        prefix,
        client_id,
        commands: m.commands,
        login,
    }))
}

/// `[web]`: where the page listens and, beyond loopback, the station's
/// token (read from, or made on first use in, [`token_path_for`]).
pub fn web_setup(config: &Config) -> Result<Option<crate::control::web::WebSetup>, Error> {
    let Some(listen) = config.web_listen()? else {
        return Ok(None);
    };
    let token = if listen.ip().is_loopback() {
        None
    } else {
        Some(station_token(&token_path_for(config))?)
    };
    Ok(Some(crate::control::web::WebSetup {
        listen,
        token,
        host_names: config.web.host_names.clone(),
    }))
}

/// The web page's token file: the journal's name with `.token`, beside it.
pub fn token_path_for(config: &Config) -> PathBuf {
    beside_journal(config, ".token")
}

/// The token in `path`, or a new one (32 random bytes from the system,
/// hex) written there first with mode 0600. A file that is readable by
/// others, empty or not hex is refused rather than used.
pub fn station_token(path: &Path) -> Result<String, Error> {
    use std::io::{Read, Write};
    use std::os::unix::fs::{OpenOptionsExt, PermissionsExt};
    let place = || Place::Named(format!("token file {}", path.display()));
    match std::fs::read_to_string(path) {
        Ok(text) => {
            let mode = std::fs::metadata(path)
                .map(|m| m.permissions().mode() & 0o777)
                .unwrap_or(0);
            if mode & 0o077 != 0 {
                return Err(Error::invalid(
                    place(),
                    "a file only its owner can read (mode 0600)",
                    format!("mode {mode:o}"),
                ));
            }
            let token = text.trim();
            if token.len() < 16 || !token.bytes().all(|b| b.is_ascii_hexdigit()) {
                return Err(Error::invalid(
                    place(),
                    "at least 16 hexadecimal digits",
                    format!("{} characters that are not", token.len()),
                ));
            }
            Ok(token.to_string())
        }
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
            let mut bytes = [0u8; 32];
            std::fs::File::open("/dev/urandom")
                .and_then(|mut f| f.read_exact(&mut bytes))
                .map_err(|e| {
                    Error::invalid(place(), "random bytes for a new token", e.to_string())
                })?;
            let token: String = bytes.iter().map(|b| format!("{b:02x}")).collect();
            let mut file = std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .mode(0o600)
                .open(path)
                .map_err(|e| Error::invalid(place(), "a new file created", e.to_string()))?;
            file.write_all(format!("{token}\n").as_bytes())
                .and_then(|_| file.sync_all())
                .map_err(|e| Error::invalid(place(), "the token written", e.to_string()))?;
            // Whatever the umask did, only the owner reads it.
            let _ = std::fs::set_permissions(path, std::fs::Permissions::from_mode(0o600));
            tracing::info!(file = %path.display(), "web page token made (give it to the page once)");
            Ok(token)
        }
        Err(e) => Err(Error::invalid(place(), "a readable file", e.to_string())),
    }
}

/// A path beside the journal: its name with `suffix` added.
fn beside_journal(config: &Config, suffix: &str) -> PathBuf {
    let journal = journal_for(config);
    let mut name = journal.path().as_os_str().to_owned();
    name.push(suffix);
    PathBuf::from(name)
}

/// The control socket: `[control] socket`, or the journal's name with
/// `.sock` beside it.
pub fn control_socket_for(config: &Config) -> PathBuf {
    match &config.control.socket {
        Some(p) => config.resolve_path(p),
        None => beside_journal(config, ".sock"),
    }
}

/// The one-instance lock: the journal's name with `.lock`, beside it.
pub fn lock_path_for(config: &Config) -> PathBuf {
    beside_journal(config, ".lock")
}

/// What `tuneward fit --config` takes from a station: the loop and the bands.
pub fn fit_station(config: &Config) -> FitStation {
    FitStation {
        antenna: config.antenna.clone(),
        bands: config
            .bands
            .iter()
            .map(|b| BandSpan {
                name: b.name.clone(),
                low_hz: b.low_hz,
                high_hz: b.high_hz,
            })
            .collect(),
        limits: Some((config.tuner.min_steps, config.tuner.max_steps)),
        fit: fit_options(config),
        calibration_file: config.calibration_file(),
    }
}

/// The station a `tuneward fit --config` names, if any.
pub fn load_fit_station(config: Option<&Path>) -> Result<Option<FitStation>, ConfigError> {
    Ok(config
        .map(Config::load)
        .transpose()?
        .as_ref()
        .map(fit_station))
}

/// The controller link's settings from `[tuner]`: `link` is the URL.
pub fn controller_settings(t: &TunerConfig) -> Result<ClientConfig, Error> {
    let url = t
        .link
        .parse()
        .map_err(|e: crate::tuner::client::UrlError| e.at(Place::bare_key("tuner.link")))?;
    let home_line = match t.home.as_ref().map(|h| &h.switch) {
        Some(crate::config::HomeSwitch::Line(n)) => Some(*n),
        _ => None,
    };
    if let (Some(n), crate::tuner::client::ControllerUrl::Gpio(w)) = (home_line, &url) {
        let taken = [
            ("step", Some(w.step)),
            ("dir", Some(w.dir)),
            ("low_stop", w.low_stop),
            ("high_stop", w.high_stop),
        ];
        if let Some((name, _)) = taken.iter().find(|(_, l)| *l == Some(n)) {
            return Err(Located::new(
                Place::bare_key("tuner.home.switch"),
                format!("a line of its own (tuner.link uses {n} for `{name}`)"),
                n.to_string(),
            )
            .into());
        }
    }
    Ok(ClientConfig {
        url,
        min_steps: t.min_steps,
        max_steps: t.max_steps,
        steps_per_second: t.steps_per_second,
        settle: Duration::from_millis(t.settle_ms),
        reply_margin: Duration::from_secs(1),
        backoff_cap: Duration::from_secs(2),
        sim_start: t.min_steps,
        sim_backlash: t.backlash_steps,
        home_line,
    })
}

/// The home switch `tuner.home` describes, as the session takes it (the
/// config is validated: the position is within the limits).
pub fn home_settings(t: &TunerConfig) -> Option<HomeSettings> {
    let h = t.home.as_ref()?;
    let quarter = (t.steps_per_second / 4.0).clamp(1.0, f64::from(u32::MAX)) as u32;
    Some(HomeSettings {
        side: match h.side {
            crate::config::HomeSideConfig::Low => crate::tuner::HomeSide::Low,
            crate::config::HomeSideConfig::High => crate::tuner::HomeSide::High,
        },
        position: h.position,
        speed: h.speed.unwrap_or(quarter).max(1),
    })
}

/// The inhibit output `[inhibit]` describes, checked but not opened: what
/// `run` opens and `check` reports.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum InhibitSettings {
    /// No output: the service only logs.
    None,
    /// A modem-control line (RTS or DTR) of a serial device.
    Modem {
        port: String,
        signal: inhibit::ModemSignal,
        active_high: bool,
    },
    /// A GPIO line.
    Gpio {
        chip: String,
        offset: u32,
        active_high: bool,
    },
}

/// Checks `[inhibit]` and says which line `run` will open, without opening
/// it.
pub fn inhibit_settings(cfg: &InhibitConfig) -> Result<InhibitSettings, Error> {
    let need_port = |signal: &str| {
        cfg.port.clone().ok_or_else(|| {
            Error::invalid(
                Place::bare_key("inhibit.port"),
                format!("the serial device whose {signal} is the inhibit"),
                "none",
            )
        })
    };
    let active_high = cfg.active_high;
    match cfg.line {
        InhibitKind::None => Ok(InhibitSettings::None),
        InhibitKind::Rts => Ok(InhibitSettings::Modem {
            port: need_port("RTS")?,
            signal: inhibit::ModemSignal::Rts,
            active_high,
        }),
        InhibitKind::Dtr => Ok(InhibitSettings::Modem {
            port: need_port("DTR")?,
            signal: inhibit::ModemSignal::Dtr,
            active_high,
        }),
        InhibitKind::Gpio => {
            let chip = cfg.chip.clone().ok_or_else(|| {
                Error::invalid(
                    Place::bare_key("inhibit.chip"),
                    "a GPIO chip such as `gpiochip0`",
                    "none",
                )
            })?;
            let offset = cfg.offset.ok_or_else(|| {
                Error::invalid(
                    Place::bare_key("inhibit.offset"),
                    "the line number on the chip",
                    "none",
                )
            })?;
            if cfg!(not(target_os = "linux")) {
                return Err(gpio_needs_linux());
            }
            Ok(InhibitSettings::Gpio {
                chip,
                offset,
                active_high,
            })
        }
    }
}

/// `inhibit.line = "gpio"` on a system without GPIO character devices.
fn gpio_needs_linux() -> Error {
    Error::invalid(
        Place::bare_key("inhibit.line"),
        "`none`, `rts` or `dtr` (`gpio` needs Linux)",
        "`gpio`",
    )
}

/// Opens the line `[inhibit]` describes, driven on (inhibited).
pub fn open_inhibit(cfg: &InhibitConfig) -> Result<Box<dyn InhibitLine>, Error> {
    match inhibit_settings(cfg)? {
        InhibitSettings::None => Ok(Box::new(inhibit::NoLine)),
        InhibitSettings::Modem {
            port,
            signal,
            active_high,
        } => Ok(Box::new(
            inhibit::open_modem_line(&port, signal, active_high).map_err(|e| {
                Error::invalid(
                    Place::Named(format!("inhibit port {port}")),
                    "a serial device whose modem line can be driven",
                    e.to_string(),
                )
            })?,
        )),
        #[cfg(target_os = "linux")]
        InhibitSettings::Gpio {
            chip,
            offset,
            active_high,
        } => Ok(Box::new(
            inhibit::GpioLine::open(&chip, offset, active_high).map_err(|e| {
                Error::invalid(
                    Place::Named(format!("inhibit GPIO {chip} line {offset}")),
                    "a GPIO line this user may drive",
                    e.to_string(),
                )
            })?,
        )),
        #[cfg(not(target_os = "linux"))]
        InhibitSettings::Gpio { .. } => Err(gpio_needs_linux()),
    }
}

/// The sense input `[transmit_sense]` describes, checked but not opened:
/// what `run` opens and `check` reports.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SenseSettings {
    /// No sense input: only the rig's port tells about transmissions.
    None,
    /// A modem-status input (CTS, DSR, DCD or RI) of a serial device.
    Modem {
        port: String,
        signal: StatusSignal,
        active_high: bool,
    },
    /// A GPIO line read as an input.
    Gpio {
        chip: String,
        offset: u32,
        active_high: bool,
    },
}

/// Checks `[transmit_sense]` (its keys, and that its serial device is
/// neither the rig's port nor the inhibit's: one device is opened once)
/// and says which input `run` will read, without opening it.
pub fn sense_settings(config: &Config) -> Result<SenseSettings, Error> {
    let cfg: &SenseConfig = &config.transmit_sense;
    let active_high = cfg.active_high;
    let signal = match cfg.line {
        SenseKind::None => return Ok(SenseSettings::None),
        SenseKind::Gpio => {
            let chip = cfg.chip.clone().ok_or_else(|| {
                Error::invalid(
                    Place::bare_key("transmit_sense.chip"),
                    "a GPIO chip such as `gpiochip0`",
                    "none",
                )
            })?;
            let offset = cfg.offset.ok_or_else(|| {
                Error::invalid(
                    Place::bare_key("transmit_sense.offset"),
                    "the line number on the chip",
                    "none",
                )
            })?;
            if cfg!(not(target_os = "linux")) {
                return Err(Error::invalid(
                    Place::bare_key("transmit_sense.line"),
                    "`none`, `cts`, `dsr`, `dcd` or `ri` (`gpio` needs Linux)",
                    "`gpio`",
                ));
            }
            return Ok(SenseSettings::Gpio {
                chip,
                offset,
                active_high,
            });
        }
        SenseKind::Cts => StatusSignal::Cts,
        SenseKind::Dsr => StatusSignal::Dsr,
        SenseKind::Dcd => StatusSignal::Dcd,
        SenseKind::Ri => StatusSignal::Ri,
    };
    let port = cfg.port.clone().ok_or_else(|| {
        Error::invalid(
            Place::bare_key("transmit_sense.port"),
            format!(
                "the serial device whose {} the rig's transmit output drives",
                signal.name()
            ),
            "none",
        )
    })?;
    let inhibit_port = match config.inhibit.line {
        InhibitKind::Rts | InhibitKind::Dtr => config.inhibit.port.as_deref(),
        _ => None,
    };
    for (key, other) in [
        ("rig.port", config.rig.port.as_deref()),
        ("inhibit.port", inhibit_port),
    ] {
        if other == Some(port.as_str()) {
            return Err(Error::invalid(
                Place::bare_key("transmit_sense.port"),
                format!("a serial device other than {key} (a device is opened once, and tuneward cannot share it yet)"),
                format!("`{port}`, the same as {key}"),
            ));
        }
    }
    Ok(SenseSettings::Modem {
        port,
        signal,
        active_high,
    })
}

/// Opens the input `[transmit_sense]` describes; `None` when there is none.
pub fn open_sense(config: &Config) -> Result<Option<Box<dyn SenseInput>>, Error> {
    match sense_settings(config)? {
        SenseSettings::None => Ok(None),
        SenseSettings::Modem {
            port,
            signal,
            active_high,
        } => Ok(Some(Box::new(
            sense::open_modem_sense(&port, signal, active_high).map_err(|e| {
                Error::invalid(
                    Place::Named(format!("sense port {port}")),
                    format!("a serial device whose {} can be read", signal.name()),
                    e.to_string(),
                )
            })?,
        ))),
        #[cfg(target_os = "linux")]
        SenseSettings::Gpio {
            chip,
            offset,
            active_high,
        } => Ok(Some(Box::new(
            sense::GpioSense::open(&chip, offset, active_high).map_err(|e| {
                Error::invalid(
                    Place::Named(format!("sense GPIO {chip} line {offset}")),
                    "a GPIO line this user may read",
                    e.to_string(),
                )
            })?,
        ))),
        #[cfg(not(target_os = "linux"))]
        SenseSettings::Gpio { .. } => Err(Error::invalid(
            Place::bare_key("transmit_sense.line"),
            "`none`, `cts`, `dsr`, `dcd` or `ri` (`gpio` needs Linux)",
            "`gpio`",
        )),
    }
}

/// Writes a clean record of `steps` to the journal `config` names, after
/// checking `steps` against the config's limits. Returns the journal's path.
pub fn set_position(config: &Config, steps: i64) -> Result<PathBuf, Error> {
    let (min, max) = (config.tuner.min_steps, config.tuner.max_steps);
    if !(min..=max).contains(&steps) {
        return Err(Error::invalid(
            Place::Named("position".to_string()),
            format!("a value within tuner.min_steps..tuner.max_steps ({min}..{max})"),
            steps.to_string(),
        ));
    }
    let lock = lock_path_for(config);
    match crate::lock::holder(&lock) {
        Ok(None) => {}
        Ok(Some(pid)) => {
            return Err(Error::invalid(
                Place::Named(format!("lock {}", lock.display())),
                "no tuneward run driving this station (its journal is not written behind its back: stop it first, or move the capacitor with `tuneward ctl goto STEPS`)",
                format!(
                    "tuneward run (pid {}) holding it",
                    pid.map_or("unknown".to_string(), |p| p.to_string())
                ),
            ))
        }
        Err(e) => {
            return Err(Error::invalid(
                Place::Named(format!("lock {}", lock.display())),
                "a readable lock file or none",
                e.to_string(),
            ))
        }
    }
    let journal = journal_for(config);
    journal.record_position(steps).map_err(|e| {
        Error::invalid(
            Place::Named(format!("position journal {}", journal.path().display())),
            "a journal the record can be written to",
            e.to_string(),
        )
    })?;
    Ok(journal.path().to_path_buf())
}

/// Runs `tuneward set-position`.
pub fn run_set_position(args: &SetPositionOptions) -> Result<(), Error> {
    let config = Config::load(&args.config)?;
    let path = set_position(&config, args.steps)?;
    // The record is written; a reader that went away (`| head -0`) is no
    // failure of it.
    let mut out = std::io::stdout();
    match writeln!(
        out,
        "position {} recorded in {}",
        args.steps,
        path.display()
    ) {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(Error::invalid(
            Place::Named("standard output".to_string()),
            "a writable output",
            e.to_string(),
        )),
        _ => Ok(()),
    }
}

/// The config's file name for error messages.
fn config_name(config: &Config) -> String {
    config.path_for_errors().display().to_string()
}

/// What the rig's family cannot tell tuneward in the configured mode, said
/// once by `check` (a note) and by `run` (its log) from this one sentence:
/// in proxy mode the block family's A/B toggle (where the dialect names
/// one) carries no frequency, and the family cannot read the other VFO
/// without switching the operator's, so after the other program toggles,
/// the loop counts as untuned (nothing moves; the inhibit is held where
/// the policy holds it until tuned) until a set or a frequency read tells.
/// (The program's frequency sets are taken at once: they go to the VFO in
/// use.)
pub fn rig_caveat(station: &Station) -> Option<&'static str> {
    let proxy = matches!(station.config.rig_use(), Ok(RigUse::Proxy { .. }));
    let toggles = matches!(
        &station.dialect.spec,
        crate::rig::dialect::Spec::Block(k) if k.vfo_toggle.is_some()
    );
    (proxy && toggles).then_some(
        "the block family's VFO toggle carries no frequency, so after the other program toggles VFOs tuneward holds, the loop untuned (inhibited until tuned), until the next frequency set or read (the program's own, or rig.poll_ms) gives the new VFO's frequency; its frequency sets are taken at once",
    )
}

/// The rig's port as `[rig]` describes it: `port`, `baud` and framing, and
/// the `mode`: `listen` (read only), `poll` (queries every `poll_ms`) or
/// `proxy` (shared through a pseudo-terminal at `proxy_link`, which is
/// relative to the config's folder).
pub fn rig_source(station: &Station) -> Result<RigSource, Error> {
    let config = &station.config;
    let file = config_name(config);
    let port = config.rig.port.clone().ok_or_else(|| {
        Error::invalid(
            Place::key(&file, "rig.port"),
            "the rig's serial device (e.g. /dev/serial/by-id/...)",
            "none",
        )
    })?;
    rig_source_on(station, port)
}

/// [`rig_source`] for the device `port`, whatever `rig.port` says: `check`
/// uses it to judge the rest of `[rig]` when the port is not set.
pub fn rig_source_on(station: &Station, port: String) -> Result<RigSource, Error> {
    let config = &station.config;
    let file = config_name(config);
    let settings = port_settings(&config.rig, port).map_err(|e| e.within(&file))?;
    // Which queries (if any) go to the rig is the mode's business:
    // `listen` never writes to the port. The rules are the config's
    // (checked once, in `Config::rig_use`).
    let rig_use = config.rig_use()?;
    if station.dialect.family() == crate::rig::Family::Block && matches!(rig_use, RigUse::Listen) {
        return Err(Error::invalid(
            Place::key(&file, "rig.mode"),
            format!(
                "\"poll\" or \"proxy\" for the block-family dialect `{}`",
                station.dialect.name
            ),
            "\"listen\" (this family never reports on its own)",
        ));
    }
    let (every_ms, proxy_link) = match rig_use {
        RigUse::Listen => (None, None),
        RigUse::Poll { every_ms } => (Some(every_ms), None),
        RigUse::Proxy { link, poll_ms } => (poll_ms, Some(link)),
    };
    let poll = match every_ms {
        None => None,
        Some(ms) => {
            let address = match (station.dialect.family(), config.rig.address) {
                (crate::rig::Family::Binary, None) => {
                    return Err(Error::invalid(
                        Place::key(&file, "rig.address"),
                        "the rig's address (polling a binary-family rig needs it)",
                        "none",
                    ))
                }
                (_, a) => a.unwrap_or(0),
            };
            let mut query = station.dialect.poll_frequency(address);
            query.extend(station.dialect.poll_transmit(address));
            query.extend(station.dialect.poll_split(address).unwrap_or_default());
            let every = Duration::from_millis(ms);
            Some(crate::port::link::PollConfig {
                query,
                every,
                max_every: every.max(Duration::from_secs(4)),
                while_split: station.dialect.poll_other_vfo(address).unwrap_or_default(),
            })
        }
    };
    let rig = match &proxy_link {
        Some(link) => {
            let link = link.clone();
            let boundary: Box<dyn crate::port::proxy::Boundary> = match &station.dialect.spec {
                crate::rig::dialect::Spec::Binary(b) => {
                    Box::new(crate::port::proxy::ends_with(b.terminator))
                }
                crate::rig::dialect::Spec::Text(t) => {
                    Box::new(crate::port::proxy::ends_with(t.terminator))
                }
                crate::rig::dialect::Spec::Block(k) => Box::new(crate::port::proxy::every(
                    k.block_length,
                    Duration::from_millis(k.gap_ms),
                )),
            };
            RigSource::Proxy {
                config: ProxyConfig {
                    port: settings,
                    link,
                    poll,
                    backoff_cap: Duration::from_secs(2),
                    meters: None,
                    writes: None,
                },
                boundary,
            }
        }
        None => RigSource::Link(LinkConfig {
            port: settings,
            poll,
            backoff_cap: Duration::from_secs(2),
            split: None,
            meters: None,
            writes: None,
        }),
    };
    Ok(rig)
}

impl ServiceParts {
    /// The live service a station's config describes: the rig's port from
    /// `[rig]` (see [`rig_source`]), the controller from `tuner.link`, the
    /// inhibit from `[inhibit]`, the journal from `tuner.state_file`. (An
    /// impl of the driver's type, kept here with the rest of the config's
    /// reading.)
    pub fn from_station(station: &Station) -> Result<ServiceParts, Error> {
        let config = &station.config;
        let file = config_name(config);
        let rig = rig_source(station)?;
        let controller = controller_settings(&config.tuner).map_err(|e| e.within(&file))?;
        let inhibit = open_inhibit(&config.inhibit).map_err(|e| e.within(&file))?;
        let sense = open_sense(config).map_err(|e| e.within(&file))?;
        Ok(ServiceParts {
            follower: Follower::new(
                station.policy.clone(),
                std::sync::Arc::clone(&station.map),
                None,
            )
            .with_operator(
                presets_from_config(config),
                calibrations_of(&station.profiles),
                config.calibration.profile.clone(),
            )
            .with_loop(crate::antenna::SmallLoop::from_config(&config.antenna)),
            decoder: station.dialect.station_decoder(config.rig.address),
            rig,
            controller,
            inhibit,
            sense,
            journal: Some(journal_for(config)),
            relax_on_exit: config.tuner.relax_on_exit,
            home: home_settings(&config.tuner),
            candidates: config
                .calibration_file()
                .map(|points| crate::calibrate::candidates_path(&points)),
            swr_watch: swr_watch_parts(station)?,
            signal_meter: signal_meter_parts(station),
            frequency_set: frequency_set_of(station),
        })
    }
}

/// The rig's frequency set for a calibration sweep: only where the rig is
/// polled (listen mode never writes) and its dialect can name the VFO in
/// use (the fixed-block family's set is not one we send).
pub fn frequency_set_of(station: &Station) -> Option<crate::follow::session::FrequencySet> {
    use crate::rig::{Family, StationMessage};
    station.config.rig.poll_every_ms()?;
    if station.dialect.family() == Family::Block {
        return None;
    }
    let dialect = station.dialect.clone();
    let address = station.config.rig.address.unwrap_or(0);
    Some(Box::new(move |vfo, hz| {
        dialect.encode_station(
            &StationMessage::SetFrequency {
                vfo,
                selected: true,
                hz,
            },
            address,
        )
    }))
}

/// The signal-meter read for the noise-peak search: only where the rig is
/// polled (listen mode never writes to the port) and its dialect has the
/// read and its scale.
pub fn signal_meter_parts(station: &Station) -> Option<crate::service::MeterReadParts> {
    station.config.rig.poll_every_ms()?;
    meter_parts(station, crate::rig::meter::MeterKind::Signal)
}

/// The dialect's read of meter `kind` (to the configured rig address) and
/// its scale, where the dialect has both.
fn meter_parts(
    station: &Station,
    kind: crate::rig::meter::MeterKind,
) -> Option<crate::service::MeterReadParts> {
    let address = station.config.rig.address.unwrap_or(0);
    Some(crate::service::MeterReadParts {
        read: station.dialect.meter_read(kind, address)?,
        scale: station.dialect.meter_scale(kind)?.clone(),
    })
}

/// `[swr_watch]` for the live service: the watch's settings, the dialect's
/// SWR read and scale (a dialect without one is refused, naming the key),
/// and whether an inhibit line is wired. The mode rule (a polled rig) is
/// `Config::validate`'s.
pub fn swr_watch_parts(station: &Station) -> Result<Option<crate::service::SwrWatchParts>, Error> {
    use crate::config::SwrActionConfig;
    use crate::follow::swr_watch::{SwrAction, SwrWatchSettings};
    use crate::rig::meter::MeterKind;
    let config = &station.config;
    let w = &config.swr_watch;
    if !w.on() {
        return Ok(None);
    }
    let file = config_name(config);
    let Some(meter) = meter_parts(station, MeterKind::Swr) else {
        return Err(Error::invalid(
            Place::key(&file, "swr_watch"),
            format!(
                "a rig dialect with an SWR-meter read ([meter.swr]); `{}` has none",
                station.dialect.name
            ),
            format!("swr_watch.action = {:?}", w.action).to_lowercase(),
        ));
    };
    let inhibit_wired = !matches!(inhibit_settings(&config.inhibit), Ok(InhibitSettings::None));
    Ok(Some(crate::service::SwrWatchParts {
        settings: SwrWatchSettings {
            alarm: w.alarm,
            hold: Duration::from_millis(w.hold_ms),
            action: match w.action {
                SwrActionConfig::Inhibit => SwrAction::Inhibit,
                SwrActionConfig::Log | SwrActionConfig::Off => SwrAction::Log,
            },
            inhibit_wired,
            drift_margin: w.drift_margin,
            drift_overs: w.drift_overs,
        },
        meter,
    }))
}

/// The rig port's settings from `[rig]`, with the keys named in errors.
pub fn port_settings(
    rig: &RigConfig,
    port: String,
) -> Result<crate::port::link::PortSettings, Error> {
    use crate::port::link::{DataBits, FlowControl, LineLevel, Parity, PortSettings, StopBits};
    if rig.baud == 0 {
        return Err(Error::invalid(
            Place::bare_key("rig.baud"),
            "a positive baud rate",
            "0",
        ));
    }
    let mut s = PortSettings::new(port, rig.baud);
    s.data_bits = match rig.data_bits {
        5 => DataBits::Five,
        6 => DataBits::Six,
        7 => DataBits::Seven,
        8 => DataBits::Eight,
        n => {
            return Err(Error::invalid(
                Place::bare_key("rig.data_bits"),
                "5, 6, 7 or 8",
                n.to_string(),
            ))
        }
    };
    s.stop_bits = match rig.stop_bits {
        1 => StopBits::One,
        2 => StopBits::Two,
        n => {
            return Err(Error::invalid(
                Place::bare_key("rig.stop_bits"),
                "1 or 2",
                n.to_string(),
            ))
        }
    };
    s.parity = match rig.parity {
        SerialParity::None => Parity::None,
        SerialParity::Odd => Parity::Odd,
        SerialParity::Even => Parity::Even,
    };
    s.flow = match rig.flow_control {
        SerialFlow::None => FlowControl::None,
        SerialFlow::Software => FlowControl::Software,
        SerialFlow::Hardware => FlowControl::Hardware,
    };
    s.dtr = line_level(rig.dtr);
    s.rts = match (rig.rts, rig.flow_control) {
        (None, SerialFlow::Hardware) => LineLevel::Keep,
        (None, _) => LineLevel::Off,
        (Some(ModemLineSetting::Keep), _) => LineLevel::Keep,
        (Some(r), SerialFlow::Hardware) => {
            return Err(Error::invalid(
                Place::bare_key("rig.rts"),
                "no rts setting with flow_control = \"hardware\" (the kernel drives RTS for flow control), or \"keep\"",
                format!("rts = \"{}\"", format!("{r:?}").to_lowercase()),
            ))
        }
        (Some(r), _) => line_level(r),
    };
    Ok(s)
}

fn line_level(setting: ModemLineSetting) -> crate::port::link::LineLevel {
    use crate::port::link::LineLevel;
    match setting {
        ModemLineSetting::On => LineLevel::On,
        ModemLineSetting::Off => LineLevel::Off,
        ModemLineSetting::Keep => LineLevel::Keep,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_bursts_gap_is_a_command_and_its_answer_on_the_wire_plus_the_allowance() {
        // 40 bytes of 11 bits: 440 bits; at 19 200 baud 22.917 ms, at
        // 4 800 baud 91.667 ms; plus 30 ms. Worked by hand (to the
        // microsecond below).
        assert_eq!(burst_gap(19_200), Duration::from_micros(22_916 + 30_000));
        assert_eq!(burst_gap(4_800), Duration::from_micros(91_666 + 30_000));
        assert_eq!(burst_gap(115_200), Duration::from_micros(3_819 + 30_000));
        // A zero baud rate (refused by the config check) does not divide by zero.
        assert!(burst_gap(0) > Duration::from_secs(1));
    }

    #[test]
    fn unset_dead_band_is_auto_for_a_described_loop_else_the_fixed_default() {
        let text = "[calibration]\npoints = [{ hz = 7000000, steps = 4000 }, { hz = 7200000, steps = 3000 }]\n\
                    [[band]]\nname = \"40m\"\nlow_hz = 7000000\nhigh_hz = 7200000\n\
                    [[band]]\nname = \"30m\"\nlow_hz = 10100000\nhigh_hz = 10150000\nhysteresis_hz = 700\n";
        let config = Config::parse(text, std::path::Path::new("t.toml")).unwrap();
        // No loop described: the fixed default; a band's own value wins.
        let p = policy_from_config(&config, |_| None).unwrap();
        assert_eq!(p.bands[0].hysteresis_hz, DEFAULT_HYSTERESIS_HZ);
        assert_eq!(p.bands[1].hysteresis_hz, 700);
        // A described loop: whatever "auto" gives at the band's centre.
        let p = policy_from_config(&config, |centre| Some(centre as u64 / 10_000)).unwrap();
        assert_eq!(p.bands[0].hysteresis_hz, 710);
        assert_eq!(p.bands[1].hysteresis_hz, 700);
        // Set explicitly, a number stays a number.
        let fixed = format!("[follow]\nhysteresis_hz = 1500\n{text}");
        let config = Config::parse(&fixed, std::path::Path::new("t.toml")).unwrap();
        let p = policy_from_config(&config, |_| Some(1)).unwrap();
        assert_eq!(p.bands[0].hysteresis_hz, 1500);
    }

    #[test]
    fn a_transmit_command_is_held_off_only_by_a_wired_line_said_to_hold_cat_keying() {
        let text = "[calibration]\npoints = [{ hz = 7000000, steps = 4000 }, { hz = 7200000, steps = 3000 }]\n\
                    [[band]]\nname = \"40m\"\nlow_hz = 7000000\nhigh_hz = 7200000\n";
        let held = |inhibit: &str| {
            let c = Config::parse(
                &format!("[inhibit]\n{inhibit}\n{text}"),
                std::path::Path::new("t.toml"),
            )
            .unwrap();
            policy_from_config(&c, |_| None)
                .unwrap()
                .line_holds_commands
        };
        let rts = "line = \"rts\"\nport = \"/dev/ttyUSB9\"\nactive_high = false";
        assert!(held(&format!("{rts}\nholds_cat_keying = true")));
        // The default: a line may hold only an amplifier or the PTT jack.
        assert!(!held(rts));
        // Without a line nothing holds anything off.
        assert!(!held("line = \"none\"\nholds_cat_keying = true"));
        assert!(!held(
            "line = \"none\"\nunprotected_ok = true\nholds_cat_keying = true"
        ));
    }

    #[test]
    fn a_direct_drive_reads_its_home_switch_on_a_line_of_its_own() {
        let tuner = |link: &str, home: &str| {
            let text = format!("[tuner]\nlink = \"{link}\"\nhome = {home}\n");
            let c = Config::parse(&text, std::path::Path::new("t.toml")).unwrap();
            controller_settings(&c.tuner)
        };
        let home = r#"{ switch = 22, side = "low", position = 0 }"#;
        let c = tuner("gpio://gpiochip0?step=1&dir=2&low_stop=23", home).unwrap();
        assert_eq!(c.home_line, Some(22));
        // A controller with its own switch: no line for us to read.
        let c = tuner(
            "tcp://127.0.0.1:7300",
            r#"{ switch = "controller", side = "low", position = 0 }"#,
        )
        .unwrap();
        assert_eq!(c.home_line, None);
        // The home switch on a line the link drives or reads already.
        for (link, name) in [
            ("gpio://gpiochip0?step=22&dir=2", "step"),
            ("gpio://gpiochip0?step=1&dir=22", "dir"),
            ("gpio://gpiochip0?step=1&dir=2&high_stop=22", "high_stop"),
        ] {
            let Err(e) = tuner(link, home) else {
                panic!("{link}: the taken line was accepted");
            };
            let e = e.to_string();
            assert!(e.contains("tuner.home.switch"), "{e}");
            assert!(e.contains(&format!("uses 22 for `{name}`")), "{e}");
            assert!(e.contains("found 22"), "{e}");
        }
    }

    #[test]
    fn modem_lines_default_off_and_hardware_flow_keeps_rts() {
        use crate::port::link::LineLevel;
        let parse = |text: &str| {
            let c = Config::parse(text, std::path::Path::new("t.toml")).unwrap();
            port_settings(&c.rig, "/dev/null".into())
        };
        let s = parse("[rig]\nport = \"/dev/null\"\n").unwrap();
        assert_eq!((s.dtr, s.rts), (LineLevel::Off, LineLevel::Off));
        let s = parse("[rig]\ndtr = \"on\"\nrts = \"keep\"\n").unwrap();
        assert_eq!((s.dtr, s.rts), (LineLevel::On, LineLevel::Keep));
        let s = parse("[rig]\nflow_control = \"hardware\"\n").unwrap();
        assert_eq!((s.dtr, s.rts), (LineLevel::Off, LineLevel::Keep));
        let e = parse("[rig]\nflow_control = \"hardware\"\nrts = \"off\"\n")
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("rig.rts") && e.contains("rts = \"off\""), "{e}");
        assert!(Config::parse("[rig]\ndtr = \"low\"\n", std::path::Path::new("t.toml")).is_err());
    }

    #[test]
    fn config_without_needed_keys_names_them() {
        let mut c = InhibitConfig {
            line: InhibitKind::Rts,
            ..InhibitConfig::default()
        };
        let e = open_inhibit(&c).err().unwrap().to_string();
        assert!(e.contains("inhibit.port"), "{e}");
        c.line = InhibitKind::Gpio;
        let e = open_inhibit(&c).err().unwrap().to_string();
        assert!(e.contains("inhibit.chip"), "{e}");
        c.chip = Some("gpiochip0".into());
        let e = open_inhibit(&c).err().unwrap().to_string();
        assert!(e.contains("inhibit.offset"), "{e}");
        c.line = InhibitKind::None;
        assert!(open_inhibit(&c).unwrap().set(true).is_ok());
    }

    #[test]
    fn mqtt_settings_read_the_password_file_or_say_which_is_missing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("shack.toml");
        let text = "[calibration]\npoints = [{ hz = 7000000, steps = 4000 }, { hz = 7200000, steps = 3000 }]\n\
                    [[band]]\nname = \"40m\"\nlow_hz = 7000000\nhigh_hz = 7200000\n\
                    [mqtt]\nurl = \"mqtt://192.0.2.7:1884\"\ncommands = true\n\
                    username = \"shack\"\npassword_file = \"mqtt.password\"\n";
        std::fs::write(&path, text).unwrap();
        let config = Config::load(&path).unwrap();
        let e = mqtt_settings(&config).unwrap_err().to_string();
        assert!(e.contains("mqtt.password_file"), "{e}");
        assert!(e.contains("mqtt.password"), "{e}");
        std::fs::write(dir.path().join("mqtt.password"), "s3cret\nignored\n").unwrap();
        let m = mqtt_settings(&config).unwrap().unwrap();
        assert_eq!((m.host.as_str(), m.port), ("192.0.2.7", 1884));
        assert_eq!(m.prefix, "tuneward/shack");
        assert_eq!(m.state_topic(), "tuneward/shack/state");
        assert_eq!(m.login, Some(("shack".into(), "s3cret".into())));
        assert!(m.commands);
    }
}
