//! The control protocol's messages (see `protocols/control.md`, the
//! contract): one JSON object a line each way. Pure: serde types and the
//! translation between them and the core's commands and replies; no IO.

use serde::{Deserialize, Serialize};

use crate::error::Located;
use crate::follow::{Command, PresetGoal, Refusal, Reply, Status};

/// The longest request line taken; a longer one is answered with an error
/// and the connection closed.
pub const MAX_REQUEST_BYTES: usize = 4096;

/// One request, `{"do": "...", ...}`.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "do", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Request {
    Status,
    /// Answered once, then a `{"state": ...}` line at every change.
    Watch,
    Pause,
    Resume,
    Nudge {
        steps: i64,
    },
    Goto {
        steps: i64,
    },
    Preset {
        name: String,
    },
    Profile {
        name: String,
    },
    Mark,
    /// "Find resonance here": a noise-peak search at the receive frequency.
    Peak,
    /// Stop the search under way (or the sweep it is part of).
    PeakStop,
    /// A calibration sweep of the band named `band`: the rig's receive
    /// frequency is set to each of a few points across it and the noise
    /// peaked there. `consent` must be `true`: the operator agrees to the
    /// rig's frequency being changed (and set back afterwards).
    Calibrate {
        band: String,
        #[serde(default)]
        consent: bool,
    },
    /// Stop the sweep under way (the rig is set back).
    CalibrateStop,
    Reload,
}

/// What the driver is asked for: a command for the core, or a reload,
/// whose file reading is the driver's before the core decides.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Ask {
    Command(CoreAsk),
    Reload,
}

/// The core commands a request can carry (all but `Reload`, which carries
/// the calibrations read by the driver).
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum CoreAsk {
    Status,
    Pause,
    Resume,
    Nudge { steps: i64 },
    Goto { steps: i64 },
    Preset { name: String },
    Profile { name: String },
    Mark,
    Peak,
    PeakStop,
    Calibrate { band: String, consent: bool },
    CalibrateStop,
}

impl CoreAsk {
    pub fn into_command(self) -> Command {
        match self {
            CoreAsk::Status => Command::Status,
            CoreAsk::Pause => Command::Pause,
            CoreAsk::Resume => Command::Resume,
            CoreAsk::Nudge { steps } => Command::Nudge { steps },
            CoreAsk::Goto { steps } => Command::Goto { steps },
            CoreAsk::Preset { name } => Command::Preset { name },
            CoreAsk::Profile { name } => Command::Profile { name },
            CoreAsk::Mark => Command::Mark,
            CoreAsk::Peak => Command::Peak,
            CoreAsk::PeakStop => Command::PeakStop,
            CoreAsk::Calibrate { band, consent } => Command::Calibrate { band, consent },
            CoreAsk::CalibrateStop => Command::CalibrateStop,
        }
    }
}

impl Request {
    /// What the driver is asked for (`None` for `watch`, which the front
    /// end serves from the state it is sent).
    pub fn ask(&self) -> Option<Ask> {
        let c = match self {
            Request::Watch => return None,
            Request::Reload => return Some(Ask::Reload),
            Request::Status => CoreAsk::Status,
            Request::Pause => CoreAsk::Pause,
            Request::Resume => CoreAsk::Resume,
            Request::Nudge { steps } => CoreAsk::Nudge { steps: *steps },
            Request::Goto { steps } => CoreAsk::Goto { steps: *steps },
            Request::Preset { name } => CoreAsk::Preset { name: name.clone() },
            Request::Profile { name } => CoreAsk::Profile { name: name.clone() },
            Request::Mark => CoreAsk::Mark,
            Request::Peak => CoreAsk::Peak,
            Request::PeakStop => CoreAsk::PeakStop,
            Request::Calibrate { band, consent } => CoreAsk::Calibrate {
                band: band.clone(),
                consent: *consent,
            },
            Request::CalibrateStop => CoreAsk::CalibrateStop,
        };
        Some(Ask::Command(c))
    }
}

/// A calibration sweep's progress, as the state shows it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SweepView {
    pub band: String,
    /// The point under way (from 1) of `of`.
    pub point: usize,
    pub of: usize,
    /// That point's frequency (while restoring: the frequency set back).
    pub hz: u64,
    /// Candidates found so far.
    pub found: usize,
    /// `setting`, `searching` or `restoring`.
    pub doing: String,
}

/// Where a request's error is: the place every `error` answer names.
pub const REQUEST_PLACE: &str = "request line";

/// A request line that is not one: `request line: expected …, found …`.
pub fn bad_request(expected: impl Into<String>, found: impl Into<String>) -> Located {
    Located::named(REQUEST_PLACE, expected, found)
}

/// Reads one request line. The error says where (the request line), what
/// was expected and what was found; the control socket answers with its
/// words.
pub fn parse_request(line: &str) -> Result<Request, Located> {
    let line = line.trim();
    if line.is_empty() {
        return Err(bad_request(
            "a JSON object such as {\"do\":\"status\"}",
            "an empty line",
        ));
    }
    let shown: String = line.chars().take(80).collect();
    let expected = "a request such as {\"do\":\"nudge\",\"steps\":20} (do: status, watch, pause, resume, nudge, goto, preset, profile, mark, peak, peak-stop, calibrate, calibrate-stop, reload)";
    let value: serde_json::Value =
        serde_json::from_str(line).map_err(|e| bad_request(expected, format!("`{shown}`: {e}")))?;
    let request: Request = serde_json::from_value(value.clone())
        .map_err(|e| bad_request(expected, format!("`{shown}`: {e}")))?;
    // serde lets a command without fields pass with extra ones; the
    // contract does not: every field given must be one the command takes.
    let taken = serde_json::to_value(&request).unwrap_or_default();
    if let (Some(given), Some(taken)) = (value.as_object(), taken.as_object()) {
        if let Some(extra) = given.keys().find(|k| !taken.contains_key(*k)) {
            return Err(bad_request(
                expected,
                format!(
                    "`{shown}`: field `{extra}` is not one `{}` takes",
                    given.get("do").and_then(|d| d.as_str()).unwrap_or("?")
                ),
            ));
        }
    }
    Ok(request)
}

/// One answer line.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Answer {
    /// Carried out or accepted (`true`), or refused / not understood.
    pub ok: bool,
    /// `done`, `queued`, `watching`, `refused` or `error`.
    pub outcome: String,
    /// With `queued`: what the move waits for (`receive`, `rig-heard`,
    /// `rest`, `resume`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub waits_for: Option<String>,
    /// With `refused`: a short code (`outside-limits`, …).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub refused: Option<String>,
    /// Why, in words, with `queued`, `refused` and `error`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    /// With `status` (and `watch`): the state.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub state: Option<StateView>,
}

impl Answer {
    pub fn error(reason: impl Into<String>) -> Answer {
        Answer {
            ok: false,
            outcome: "error".into(),
            waits_for: None,
            refused: None,
            reason: Some(reason.into()),
            state: None,
        }
    }

    fn plain(ok: bool, outcome: &str) -> Answer {
        Answer {
            ok,
            outcome: outcome.into(),
            ..Answer::error("")
        }
        .without_reason()
    }

    fn without_reason(mut self) -> Answer {
        self.reason = None;
        self
    }

    pub fn watching(state: StateView) -> Answer {
        Answer {
            state: Some(state),
            ..Answer::plain(true, "watching")
        }
    }

    /// The core's reply as an answer.
    pub fn from_reply(reply: &Reply) -> Answer {
        match reply {
            Reply::Done => Answer::plain(true, "done"),
            Reply::Queued { until } => Answer {
                waits_for: Some(until.as_str().into()),
                reason: Some(match until {
                    crate::follow::Wait::Receive => {
                        "the rig is transmitting: queued until receive".into()
                    }
                    crate::follow::Wait::RigHeard => {
                        "the rig's port is silent: queued until it is heard again".into()
                    }
                    crate::follow::Wait::Rest => {
                        "the motor is moving: queued until it is at rest".into()
                    }
                    crate::follow::Wait::Resume => {
                        "following is paused: taken when it resumes".into()
                    }
                }),
                ..Answer::plain(true, "queued")
            },
            Reply::Refused(r) => Answer::refused(r),
            Reply::Status(s) => Answer {
                state: Some(StateView::from_status(s)),
                ..Answer::plain(true, "done")
            },
        }
    }

    pub fn refused(r: &Refusal) -> Answer {
        Answer {
            refused: Some(r.code().into()),
            reason: Some(r.to_string()),
            ..Answer::plain(false, "refused")
        }
    }
}

/// A line of the `watch` stream after its answer.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct StateLine {
    pub state: StateView,
}

/// The state as the protocol shows it. Absent values are left out.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct StateView {
    /// The rig's receive and transmit frequencies (they differ with split).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rx_hz: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tx_hz: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub position: Option<i64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub heading: Option<i64>,
    pub min_steps: i64,
    pub max_steps: i64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rig_hz: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub band: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tuned_hz: Option<u64>,
    pub moving: bool,
    pub inhibit: bool,
    pub transmitting: bool,
    pub rig_silent: bool,
    pub paused: bool,
    pub fault: bool,
    /// The profile in use; `base` for the base calibration.
    pub profile: String,
    pub profiles: Vec<String>,
    /// The followed bands' names (what `calibrate` takes).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub bands: Vec<String>,
    pub presets: Vec<PresetView>,
    pub shutting_down: bool,
    /// The loop's estimated SWR where the capacitor is at rest (with
    /// `[antenna]` describing the loop).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub swr: Option<SwrView>,
    /// With `[swr_watch]`: the rig's SWR meter's last reading in the
    /// current (or last) over, and the SWR of that over's alarm, if any.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub swr_read: Option<Ratio>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub swr_alarm: Option<Ratio>,
    /// With `[swr_watch]` and the loop described: drift, the SWR the rig's
    /// meter read over the last overs and what the model predicted.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub swr_drift: Option<DriftView>,
    /// The receive frequency a noise-peak search is under way at.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub peak_hz: Option<u64>,
    /// How the last noise-peak search ended, in words.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub last_peak: Option<String>,
    /// A calibration sweep under way: where it is.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sweep: Option<SweepView>,
    /// How the last calibration sweep ended, in words.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub last_sweep: Option<String>,
    /// The last few decisions, in words, oldest first (set by the driver).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub recent: Vec<String>,
}

/// Drift as the protocol shows it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct DriftView {
    pub seen: Ratio,
    pub predicted: Ratio,
}

/// An SWR in hundredths, shown as a number (`1.25`); an SWR beyond
/// [`Ratio::MAX`] (or infinite) is shown as that.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Ratio(pub u32);

impl Ratio {
    /// 999.99: the largest SWR shown.
    pub const MAX: Ratio = Ratio(99_999);

    pub fn of(swr: f64) -> Ratio {
        if swr.is_nan() {
            return Ratio::MAX;
        }
        let h = (swr * 100.0).round();
        if h >= Ratio::MAX.0 as f64 {
            Ratio::MAX
        } else {
            Ratio(h.max(100.0) as u32)
        }
    }

    pub fn value(self) -> f64 {
        self.0 as f64 / 100.0
    }
}

impl Serialize for Ratio {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_f64(self.value())
    }
}

impl<'de> Deserialize<'de> for Ratio {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Ratio, D::Error> {
        f64::deserialize(d).map(Ratio::of)
    }
}

/// The estimated SWR curve as the protocol shows it: whole hertz, SWR to
/// two decimals.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SwrView {
    /// Where the calibration in use says the loop is resonant.
    pub resonance_hz: u64,
    /// The estimated SWR at the transmit frequency.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub at_tx: Option<Ratio>,
    /// `[hz, swr]` pairs from low to high frequency.
    pub curve: Vec<(u64, Ratio)>,
}

impl SwrView {
    pub fn from_curve(c: &crate::follow::SwrCurve) -> SwrView {
        let hz = |f: f64| f.round().max(0.0) as u64;
        SwrView {
            resonance_hz: hz(c.resonance_hz),
            at_tx: c.at.map(|p| Ratio::of(p.swr)),
            curve: c
                .points
                .iter()
                .map(|p| (hz(p.hz), Ratio::of(p.swr)))
                .collect(),
        }
    }
}

#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct PresetView {
    pub name: String,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hz: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub steps: Option<i64>,
}

impl StateView {
    pub fn from_status(s: &Status) -> StateView {
        StateView {
            rx_hz: s.rx_hz,
            tx_hz: s.tx_hz,
            position: s.position,
            heading: s.heading,
            min_steps: s.min_steps,
            max_steps: s.max_steps,
            rig_hz: s.rig_hz,
            band: s.band.clone(),
            tuned_hz: s.tuned_hz,
            moving: s.moving,
            inhibit: s.inhibit,
            transmitting: s.transmitting,
            rig_silent: s.rig_silent,
            paused: s.paused,
            fault: s.fault,
            profile: s
                .profile
                .clone()
                .unwrap_or_else(|| crate::follow::BASE_PROFILE.to_string()),
            profiles: s.profiles.clone(),
            bands: s.bands.clone(),
            presets: s
                .presets
                .iter()
                .map(|p| PresetView {
                    name: p.name.clone(),
                    hz: match p.goal {
                        PresetGoal::Hz(hz) => Some(hz),
                        PresetGoal::Steps(_) => None,
                    },
                    steps: match p.goal {
                        PresetGoal::Steps(s) => Some(s),
                        PresetGoal::Hz(_) => None,
                    },
                })
                .collect(),
            shutting_down: s.shutting_down,
            swr: s.swr.as_ref().map(SwrView::from_curve),
            swr_read: s.swr_read.map(Ratio::of),
            swr_alarm: s.swr_alarm.map(Ratio::of),
            swr_drift: s.swr_drift.map(|(seen, predicted)| DriftView {
                seen: Ratio::of(seen),
                predicted: Ratio::of(predicted),
            }),
            peak_hz: s.peak_hz,
            last_peak: s.last_peak.clone(),
            sweep: s.sweep.as_ref().map(|p| SweepView {
                band: p.band.clone(),
                point: p.point,
                of: p.of,
                hz: p.hz,
                found: p.found,
                doing: p.doing.to_string(),
            }),
            last_sweep: s.last_sweep.clone(),
            recent: Vec::new(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::error::Place;
    use crate::follow::Wait;

    #[test]
    fn requests_read_from_their_json_lines() {
        assert_eq!(
            parse_request(r#"{"do":"nudge","steps":-20}"#),
            Ok(Request::Nudge { steps: -20 })
        );
        assert_eq!(
            parse_request(r#" {"do":"preset","name":"ssb-40"} "#),
            Ok(Request::Preset {
                name: "ssb-40".into()
            })
        );
        assert_eq!(parse_request(r#"{"do":"watch"}"#), Ok(Request::Watch));
        assert_eq!(Request::Watch.ask(), None);
        assert_eq!(Request::Reload.ask(), Some(Ask::Reload));
    }

    #[test]
    fn bad_requests_say_what_was_expected_and_found() {
        for bad in [
            "",
            "nudge 20",
            r#"{"do":"nudge"}"#,
            r#"{"do":"nudge","steps":"x"}"#,
            r#"{"do":"launch"}"#,
            r#"{"do":"mark","extra":1}"#,
            r#"{"do":"nudge","steps":99999999999999999999999}"#,
            "\u{0}\u{ffff}",
        ] {
            let e = parse_request(bad).unwrap_err();
            assert_eq!(e.at, Place::Named(REQUEST_PLACE.into()), "{bad}: {e}");
            assert!(!e.expected.is_empty() && !e.found.is_empty(), "{bad}: {e}");
        }
        assert_eq!(
            parse_request("").unwrap_err().to_string(),
            "request line: expected a JSON object such as {\"do\":\"status\"}, found an empty line"
        );
        let e = parse_request(r#"{"do":"mark","extra":1}"#)
            .unwrap_err()
            .to_string();
        assert!(
            e.starts_with("request line: expected a request such as")
                && e.ends_with(
                    r#"found `{"do":"mark","extra":1}`: field `extra` is not one `mark` takes"#
                ),
            "{e}"
        );
    }

    #[test]
    fn answers_carry_codes_and_words_and_leave_absent_values_out() {
        let a = Answer::from_reply(&Reply::Queued {
            until: Wait::Receive,
        });
        let text = serde_json::to_string(&a).unwrap();
        assert_eq!(
            text,
            r#"{"ok":true,"outcome":"queued","waits_for":"receive","reason":"the rig is transmitting: queued until receive"}"#
        );
        let a = Answer::from_reply(&Reply::Refused(Refusal::OutsideLimits {
            wanted: 13_000,
            min: 0,
            max: 12_000,
        }));
        assert!(!a.ok);
        assert_eq!(a.refused.as_deref(), Some("outside-limits"));
        assert!(a.reason.unwrap().contains("13000"));
        assert_eq!(
            serde_json::to_string(&Answer::from_reply(&Reply::Done)).unwrap(),
            r#"{"ok":true,"outcome":"done"}"#
        );
    }
}
