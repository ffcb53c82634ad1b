//! Operator commands as core events: what the operator asks through any
//! front end (the control socket, `tuneward ctl`, the web page, MQTT), the
//! core's answer, and a snapshot of its state.
//!
//! Commands are decided here, in the core, so that every rule (limits,
//! transmit deferral, the inhibit, the journal) applies to them exactly as
//! to the rig's reports: a command that moves the capacitor becomes the same
//! `Move`/`Goto` actions as a settled frequency, through the same
//! `try_start`. Front ends only translate.

use std::collections::BTreeMap;
use std::fmt;
use std::sync::Arc;

use crate::calibrate::StepMap;
use crate::error::IoFailure;

/// A named place to go: a frequency (tuned through the calibration in use)
/// or a step position.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Preset {
    pub name: String,
    pub goal: PresetGoal,
}

/// Where a preset goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PresetGoal {
    Hz(u64),
    Steps(i64),
}

/// The calibrations the core can switch between at run time: the base
/// (points without a profile, if any) and each named profile.
#[derive(Clone, Default)]
pub struct Calibrations {
    pub base: Option<Arc<dyn StepMap>>,
    pub profiles: BTreeMap<String, Arc<dyn StepMap>>,
}

impl fmt::Debug for Calibrations {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Calibrations")
            .field("base", &self.base.is_some())
            .field("profiles", &self.profiles.keys().collect::<Vec<_>>())
            .finish()
    }
}

impl Calibrations {
    /// The map for `profile` (`None`: the base).
    pub fn get(&self, profile: Option<&str>) -> Option<Arc<dyn StepMap>> {
        match profile {
            None => self.base.clone(),
            Some(name) => self.profiles.get(name).cloned(),
        }
    }

    /// The names that can be switched to (`base` first when there is one).
    pub fn names(&self) -> Vec<String> {
        let mut names = Vec::new();
        if self.base.is_some() {
            names.push(BASE_PROFILE.to_string());
        }
        names.extend(self.profiles.keys().cloned());
        names
    }
}

/// The name the operator uses for the base calibration.
pub const BASE_PROFILE: &str = "base";

/// What the operator asks of the core.
#[derive(Debug, Clone)]
pub enum Command {
    /// The state, with nothing changed.
    Status,
    /// Stop following the rig (the capacitor stays where it is; reports are
    /// still tracked). Operator moves still go.
    Pause,
    /// Follow the rig again (the current frequency is decided at once).
    Resume,
    /// Move by this many steps from where the motor is (or is heading).
    Nudge { steps: i64 },
    /// Move to this step position.
    Goto { steps: i64 },
    /// Go to the preset of this name.
    Preset { name: String },
    /// Switch the calibration to this profile (`base` for the base); the
    /// current frequency is tuned through it at once.
    Profile { name: String },
    /// "The loop is resonant at the rig's current frequency, at the current
    /// position": a calibration point candidate.
    Mark,
    /// "Find resonance here": a noise-peak search at the rig's receive
    /// frequency (see [`super::peak`]), the rig receiving.
    Peak,
    /// Stop the noise-peak search under way (it returns to where it began),
    /// or the sweep it is part of.
    PeakStop,
    /// A calibration sweep of the band named `band` (see
    /// [`super::sweep`]): the core sets the rig's receive frequency to
    /// each of a few points across the band, runs the noise-peak search
    /// there, and sets the rig back. `consent`: the operator said yes to
    /// the rig's frequency being changed; without it the sweep is refused.
    Calibrate { band: String, consent: bool },
    /// Stop the sweep under way (the rig is set back).
    CalibrateStop,
    /// The calibration file read again (by the driver); an `Err` says why
    /// it could not be.
    Reload {
        calibrations: Result<Calibrations, IoFailure>,
    },
}

impl Command {
    /// The command's name, for the log.
    pub fn name(&self) -> &'static str {
        match self {
            Command::Status => "status",
            Command::Pause => "pause",
            Command::Resume => "resume",
            Command::Nudge { .. } => "nudge",
            Command::Goto { .. } => "goto",
            Command::Preset { .. } => "preset",
            Command::Profile { .. } => "profile",
            Command::Mark => "mark",
            Command::Peak => "peak",
            Command::PeakStop => "peak-stop",
            Command::Calibrate { .. } => "calibrate",
            Command::CalibrateStop => "calibrate-stop",
            Command::Reload { .. } => "reload",
        }
    }
}

/// What a move asked by a command waits for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Wait {
    /// The rig transmits: the move starts on receive.
    Receive,
    /// The rig's port is silent: the move starts when it is heard again.
    RigHeard,
    /// The motor is finishing a move: this one follows at rest.
    Rest,
    /// Following is paused: the new target is taken on resume.
    Resume,
}

impl Wait {
    pub fn as_str(self) -> &'static str {
        match self {
            Wait::Receive => "receive",
            Wait::RigHeard => "rig-heard",
            Wait::Rest => "rest",
            Wait::Resume => "resume",
        }
    }
}

/// Why a command was refused.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Refusal {
    /// The position asked for lies beyond the travel limits.
    OutsideLimits {
        wanted: i64,
        min: i64,
        max: i64,
    },
    /// Where the capacitor is, is not known: nothing moves.
    PositionUnknown,
    /// The controller link is down or misbehaved.
    Fault,
    UnknownPreset {
        name: String,
        known: Vec<String>,
    },
    UnknownProfile {
        name: String,
        known: Vec<String>,
    },
    /// No frequency has been heard from the rig yet.
    NoFrequency,
    /// The frequency is outside every followed band.
    OutOfBand {
        hz: u64,
    },
    /// The calibration gave no usable position for this frequency.
    Calibration {
        hz: u64,
    },
    /// The motor is moving: a mark needs it at rest.
    Moving,
    /// The service is shutting down.
    ShuttingDown,
    /// The calibration could not be read again; the old one stays.
    Reload {
        error: String,
    },
    /// A noise-peak search is under way: it has the motor until it ends.
    Searching,
    /// A noise-peak search cannot run now, for this reason.
    CannotPeak {
        why: String,
    },
    /// A sweep changes the rig's frequency: it needs the operator's
    /// explicit consent.
    NeedsConsent,
    UnknownBand {
        name: String,
        known: Vec<String>,
    },
    /// A calibration sweep cannot run now, for this reason.
    CannotSweep {
        why: String,
    },
}

impl Refusal {
    /// A short code for scripts (the control protocol's `refused` field).
    pub fn code(&self) -> &'static str {
        match self {
            Refusal::OutsideLimits { .. } => "outside-limits",
            Refusal::PositionUnknown => "position-unknown",
            Refusal::Fault => "fault",
            Refusal::UnknownPreset { .. } => "unknown-preset",
            Refusal::UnknownProfile { .. } => "unknown-profile",
            Refusal::NoFrequency => "no-frequency",
            Refusal::OutOfBand { .. } => "out-of-band",
            Refusal::Calibration { .. } => "calibration",
            Refusal::Moving => "moving",
            Refusal::ShuttingDown => "shutting-down",
            Refusal::Reload { .. } => "reload-failed",
            Refusal::Searching => "searching",
            Refusal::CannotPeak { .. } => "cannot-peak",
            Refusal::NeedsConsent => "needs-consent",
            Refusal::UnknownBand { .. } => "unknown-band",
            Refusal::CannotSweep { .. } => "cannot-sweep",
        }
    }
}

/// "no `what` named `name`", then the names there are, or `none` when
/// there are none.
fn unknown_name(
    f: &mut fmt::Formatter<'_>,
    what: &str,
    name: &str,
    known: &[String],
    none: &str,
) -> fmt::Result {
    write!(f, "no {what} named `{name}`")?;
    if known.is_empty() {
        f.write_str(none)
    } else {
        write!(f, " (known: {})", known.join(", "))
    }
}

impl fmt::Display for Refusal {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Refusal::OutsideLimits { wanted, min, max } => write!(
                f,
                "step {wanted} is outside the travel limits {min}..={max}"
            ),
            Refusal::PositionUnknown => {
                f.write_str("the capacitor's position is not known, so nothing moves")
            }
            Refusal::Fault => f.write_str(
                "the controller link is in fault; nothing moves until it reports a position",
            ),
            Refusal::UnknownPreset { name, known } => {
                unknown_name(f, "preset", name, known, " (none configured)")
            }
            Refusal::UnknownProfile { name, known } => {
                unknown_name(f, "calibration profile", name, known, " (none)")
            }
            Refusal::NoFrequency => f.write_str("no frequency has been heard from the rig yet"),
            Refusal::OutOfBand { hz } => write!(f, "{hz} Hz is outside every followed band"),
            Refusal::Calibration { hz } => {
                write!(f, "the calibration gives no usable position for {hz} Hz")
            }
            Refusal::Moving => f.write_str("the motor is moving; mark again once it is at rest"),
            Refusal::ShuttingDown => f.write_str("the service is shutting down"),
            Refusal::Reload { error } => {
                write!(
                    f,
                    "the calibration could not be read again ({error}); the old one stays"
                )
            }
            Refusal::Searching => f.write_str(
                "a noise-peak search is under way; stop it first (peak-stop) or let it end",
            ),
            Refusal::CannotPeak { why } => write!(f, "no noise-peak search now: {why}"),
            Refusal::NeedsConsent => f.write_str(
                "a calibration sweep sets the rig's frequency; it runs only when the operator consents (ctl calibrate BAND --set-rig)",
            ),
            Refusal::UnknownBand { name, known } => {
                unknown_name(f, "band", name, known, " (none configured)")
            }
            Refusal::CannotSweep { why } => write!(f, "no calibration sweep now: {why}"),
        }
    }
}

/// The core's answer to a command.
#[derive(Debug, Clone, PartialEq)]
pub enum Reply {
    /// Carried out (a move it asked for has started, or was not needed).
    Done,
    /// Accepted; the move it asks for waits.
    Queued {
        until: Wait,
    },
    Refused(Refusal),
    Status(Box<Status>),
}

/// The core's state, as the operator sees it. Plain data: the front ends
/// turn it into JSON, a page, MQTT topics.
#[derive(Debug, Clone, PartialEq)]
pub struct Status {
    /// The rig's receive frequency (its receive VFO), if known.
    pub rx_hz: Option<u64>,
    /// The rig's transmit frequency (with split, the other VFO), if known.
    pub tx_hz: Option<u64>,
    /// The loop's estimated SWR around where the capacitor is at rest, the
    /// transmit frequency marked (with `[antenna]` describing the loop).
    pub swr: Option<crate::calibrate::swr_curve::SwrCurve>,
    /// Where the motor was last at rest, if known.
    pub position: Option<i64>,
    /// Where the motor is heading, while it moves.
    pub heading: Option<i64>,
    pub min_steps: i64,
    pub max_steps: i64,
    /// The rig's latest reported frequency.
    pub rig_hz: Option<u64>,
    /// The band `rig_hz` lies in (or is in the guard of).
    pub band: Option<String>,
    /// The frequency the loop is tuned (or being tuned) for.
    pub tuned_hz: Option<u64>,
    pub moving: bool,
    pub inhibit: bool,
    pub transmitting: bool,
    pub rig_silent: bool,
    pub paused: bool,
    pub fault: bool,
    /// The calibration profile in use (`None`: the base).
    pub profile: Option<String>,
    pub profiles: Vec<String>,
    /// The followed bands' names (what a sweep can calibrate).
    pub bands: Vec<String>,
    pub presets: Vec<Preset>,
    /// Set by the session once a shutdown was asked.
    pub shutting_down: bool,
    /// The SWR meter's last reading in the current (or last) over, with
    /// `[swr_watch]` (set by the session).
    pub swr_read: Option<f64>,
    /// The SWR of the current (or last) over's alarm, if it raised one.
    pub swr_alarm: Option<f64>,
    /// With `[swr_watch]` and the loop described: the SWR the rig's meter
    /// read over the last overs and what the model predicted there, while
    /// that excess stands (set by the session; a good over or a noise peak
    /// that found the loop clears it).
    pub swr_drift: Option<(f64, f64)>,
    /// The receive frequency a noise-peak search is under way at.
    pub peak_hz: Option<u64>,
    /// How the last noise-peak search ended, in words.
    pub last_peak: Option<String>,
    /// A calibration sweep under way: where it is.
    pub sweep: Option<super::sweep::SweepProgress>,
    /// How the last sweep ended, in words.
    pub last_sweep: Option<String>,
}
