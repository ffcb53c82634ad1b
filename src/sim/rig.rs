//! `SimRig`: a transceiver's control port as a sans-IO state machine.
//!
//! Bytes from the controller go in with the time ([`SimRig::handle_bytes`]),
//! the scripted operator acts when [`SimRig::poll_timeout`] says
//! ([`SimRig::handle_timeout`]); what the rig sends back is taken with
//! [`SimRig::poll_output`], and every change of what it really does (receive
//! and transmit frequency, transmitting or not) with [`SimRig::poll_truth`].
//! Time is a `Duration` since the driver's origin; nothing here reads a clock
//! or does IO.
//!
//! Frames follow each family's published frame layout (the binary family's
//! CI-V reference guide; the text family's PC control command reference);
//! the command codes beyond those in the dialect file (VFO select, split,
//! mode, the selected/unselected VFO read) are recalled, as noted beside
//! each. Frames are encoded here, from the dialect's fields, not with the
//! decoders' helpers, so a test that decodes what the simulator says checks
//! one against the other.

use std::collections::{BTreeMap, VecDeque};
use std::time::Duration;

use serde::{Deserialize, Serialize};

use crate::error::{Located, Place};
use crate::rig::bcd;
use crate::rig::dialect::{BinarySpec, BlockSpec, Dialect, Spec, TextSpec};
use crate::rig::meter::{MeterKind, MeterScale};
use crate::sim::meters::SimMeters;

/// One of the rig's two VFOs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Vfo {
    A,
    B,
}

impl Vfo {
    pub fn other(self) -> Vfo {
        match self {
            Vfo::A => Vfo::B,
            Vfo::B => Vfo::A,
        }
    }
}

/// Operating mode, in our own words; each family has its own codes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Mode {
    Lsb,
    Usb,
    Cw,
    Am,
    Fm,
    Data,
}

impl Mode {
    /// Binary family's mode byte (recalled: 00 LSB, 01 USB, 02 AM, 03 CW,
    /// 04 RTTY, 05 FM).
    fn binary_code(self) -> u8 {
        match self {
            Mode::Lsb => 0x00,
            Mode::Usb => 0x01,
            Mode::Am => 0x02,
            Mode::Cw => 0x03,
            Mode::Data => 0x04,
            Mode::Fm => 0x05,
        }
    }

    fn from_binary(code: u8) -> Option<Mode> {
        [
            Mode::Lsb,
            Mode::Usb,
            Mode::Am,
            Mode::Cw,
            Mode::Data,
            Mode::Fm,
        ]
        .into_iter()
        .find(|m| m.binary_code() == code)
    }

    /// Text family's mode digit (recalled: 1 LSB, 2 USB, 3 CW, 4 FM, 5 AM,
    /// 6 FSK).
    fn text_code(self) -> u8 {
        match self {
            Mode::Lsb => b'1',
            Mode::Usb => b'2',
            Mode::Cw => b'3',
            Mode::Fm => b'4',
            Mode::Am => b'5',
            Mode::Data => b'6',
        }
    }

    fn from_text(code: u8) -> Option<Mode> {
        [
            Mode::Lsb,
            Mode::Usb,
            Mode::Cw,
            Mode::Fm,
            Mode::Am,
            Mode::Data,
        ]
        .into_iter()
        .find(|m| m.text_code() == code)
    }
}

/// What the rig is doing.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RigState {
    pub vfo_a: u64,
    pub vfo_b: u64,
    /// The VFO the rig receives on (the selected VFO).
    pub rx_vfo: Vfo,
    /// The VFO the rig transmits on: the receive VFO unless split.
    pub tx_vfo: Vfo,
    pub mode: Mode,
    pub transmitting: bool,
}

impl RigState {
    pub fn split(&self) -> bool {
        self.rx_vfo != self.tx_vfo
    }

    pub fn hz(&self, vfo: Vfo) -> u64 {
        match vfo {
            Vfo::A => self.vfo_a,
            Vfo::B => self.vfo_b,
        }
    }

    fn set_hz(&mut self, vfo: Vfo, hz: u64) {
        match vfo {
            Vfo::A => self.vfo_a = hz,
            Vfo::B => self.vfo_b = hz,
        }
    }

    pub fn rx_hz(&self) -> u64 {
        self.hz(self.rx_vfo)
    }

    pub fn tx_hz(&self) -> u64 {
        self.hz(self.tx_vfo)
    }

    /// What the display (and a frequency read) shows: the transmit VFO while
    /// transmitting, the receive VFO otherwise.
    pub fn operating_hz(&self) -> u64 {
        if self.transmitting {
            self.tx_hz()
        } else {
            self.rx_hz()
        }
    }

    fn select(&mut self, vfo: Vfo) {
        let split = self.split();
        self.rx_vfo = vfo;
        self.tx_vfo = if split { vfo.other() } else { vfo };
    }

    fn set_split(&mut self, on: bool) {
        self.tx_vfo = if on { self.rx_vfo.other() } else { self.rx_vfo };
    }
}

/// Who made a change the truth log records.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Cause {
    /// The state the simulator started in.
    Start,
    /// The scripted operator (knob, key, buttons).
    Operator,
    /// A command on the control port.
    Cat,
}

/// One line of the truth log: the rig's state after a change, with the
/// simulator's own clock.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Truth {
    /// Milliseconds since the simulator started (microsecond resolution).
    pub t_ms: f64,
    /// What the receiver is tuned to.
    pub rx_hz: u64,
    /// Where the rig transmits (or would).
    pub tx_hz: u64,
    pub transmitting: bool,
    pub split: bool,
    pub rx_vfo: Vfo,
    pub mode: Mode,
    pub cause: Cause,
}

/// One meter reading the rig answered, with its truth: a line of the
/// meter truth log (`sim-rig --meter-truth FILE`, protocols/sim-rig.md).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MeterLine {
    /// Milliseconds since the simulator started (microsecond resolution).
    pub t_ms: f64,
    /// `signal`, `swr` or `power`.
    pub kind: &'static str,
    /// The frequency the reading is for: the receive frequency for the
    /// signal meter, the transmit frequency for SWR and power.
    pub hz: u64,
    pub transmitting: bool,
    /// What the rig sent, and what it means on the dialect's scale.
    pub raw: u16,
    pub value: f64,
    /// The level (dBm) or SWR without scatter or quantisation; `null` where
    /// the meter reads nothing (SWR and power on receive, the signal meter
    /// while transmitting) or the capacitor's position is not known yet.
    pub true_value: Option<f64>,
    /// The simulated loop's true resonance at the capacitor, and the
    /// capacitor position the reading was made at (`null`: not known yet).
    pub resonance_hz: Option<f64>,
    pub steps: Option<f64>,
}

/// The simulator's fixed settings.
#[derive(Debug, Clone)]
pub struct SimOptions {
    /// The binary family's rig address (ignored by the text family).
    pub address: u8,
    pub vfo_a_hz: u64,
    pub vfo_b_hz: u64,
    pub mode: Mode,
    /// Transceive / auto-information reports when the operator acts.
    pub reports: bool,
    /// The coverage: sets outside it are refused, the knob stops at it.
    pub min_hz: u64,
    pub max_hz: u64,
}

impl Default for SimOptions {
    fn default() -> Self {
        SimOptions {
            address: 0x94,
            vfo_a_hz: 14_074_000,
            vfo_b_hz: 14_074_000,
            mode: Mode::Usb,
            reports: true,
            // An HF-and-6-m rig's receive coverage: common practice, no source.
            min_hz: 30_000,
            max_hz: 60_000_000,
        }
    }
}

/// What the scripted operator does.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Action {
    /// Turn VFO `vfo` (None: the receive VFO) to `hz`.
    Tune {
        vfo: Option<Vfo>,
        hz: u64,
    },
    /// Turn the knob from `from_hz` (None: where the VFO is) to `to_hz`
    /// in steps of `step_hz` spread evenly over `over`.
    Sweep {
        vfo: Option<Vfo>,
        from_hz: Option<u64>,
        to_hz: u64,
        step_hz: u64,
        over: Duration,
    },
    Key,
    Unkey,
    Split(bool),
    Select(Vfo),
    /// Swap the two VFOs' frequencies.
    Swap,
    Mode(Mode),
    /// Transceive reports on or off.
    Reports(bool),
}

/// A script: actions at times counted from the script's start.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Script {
    pub steps: Vec<(Duration, Action)>,
}

/// One line of a script file (JSON lines), as written.
#[derive(Debug, Deserialize)]
#[serde(tag = "op", rename_all = "lowercase", deny_unknown_fields)]
enum Line {
    Tune {
        at_ms: u64,
        vfo: Option<Vfo>,
        hz: u64,
    },
    Sweep {
        at_ms: u64,
        vfo: Option<Vfo>,
        from_hz: Option<u64>,
        to_hz: u64,
        over_ms: u64,
        step_hz: Option<u64>,
    },
    Key {
        at_ms: u64,
    },
    Unkey {
        at_ms: u64,
    },
    Split {
        at_ms: u64,
        on: bool,
    },
    Select {
        at_ms: u64,
        vfo: Vfo,
    },
    Swap {
        at_ms: u64,
    },
    Mode {
        at_ms: u64,
        mode: Mode,
    },
    Reports {
        at_ms: u64,
        on: bool,
    },
}

/// Knob step of a sweep when the script does not say (a fine-tuning
/// knob's step: common practice, no source).
pub const DEFAULT_SWEEP_STEP_HZ: u64 = 10;
/// Most knob steps one sweep may take.
pub const MAX_SWEEP_STEPS: u64 = 100_000;

/// A demo evening in miniature, used when `sim-rig` is given no script.
pub const DEFAULT_SCRIPT: &str = r#"# The built-in demo operator (JSON lines; protocols/sim-rig.md).
{"at_ms": 2000, "op": "tune", "hz": 14074000}
{"at_ms": 4000, "op": "key"}
{"at_ms": 5000, "op": "unkey"}
{"at_ms": 7000, "op": "sweep", "to_hz": 14076000, "over_ms": 2000, "step_hz": 50}
{"at_ms": 12000, "op": "tune", "hz": 7074000}
{"at_ms": 14000, "op": "tune", "vfo": "b", "hz": 7079000}
{"at_ms": 15000, "op": "split", "on": true}
{"at_ms": 17000, "op": "key"}
{"at_ms": 19000, "op": "unkey"}
{"at_ms": 21000, "op": "split", "on": false}
{"at_ms": 23000, "op": "select", "vfo": "b"}
{"at_ms": 25000, "op": "mode", "mode": "cw"}
{"at_ms": 26000, "op": "tune", "vfo": "b", "hz": 7030000}
{"at_ms": 28000, "op": "key"}
{"at_ms": 29500, "op": "unkey"}
"#;

impl Script {
    /// Parses JSON lines: one action per line; blank lines and lines
    /// starting with `#` are skipped. `file` only names errors.
    pub fn parse(text: &str, file: &str) -> Result<Script, Located> {
        let mut steps = Vec::new();
        for (n, raw) in text.lines().enumerate() {
            let line = raw.trim();
            if line.is_empty() || line.starts_with('#') {
                continue;
            }
            let at = |expected: &str, found: String| {
                Located::new(
                    Place::Line {
                        file: file.into(),
                        line: n + 1,
                    },
                    expected,
                    found,
                )
            };
            let parsed: Line = serde_json::from_str(line).map_err(|e| {
                at(
                    "an object like {\"at_ms\": 1200, \"op\": \"tune\", \"hz\": 14074000}",
                    format!("`{line}` ({e})"),
                )
            })?;
            let (at_ms, action) = match parsed {
                Line::Tune { at_ms, vfo, hz } => (at_ms, Action::Tune { vfo, hz }),
                Line::Sweep {
                    at_ms,
                    vfo,
                    from_hz,
                    to_hz,
                    over_ms,
                    step_hz,
                } => {
                    let step_hz = step_hz.unwrap_or(DEFAULT_SWEEP_STEP_HZ);
                    if step_hz == 0 {
                        return Err(at("a sweep's step_hz of 1 or more", "0".into()));
                    }
                    if let Some(from) = from_hz {
                        let steps = from.abs_diff(to_hz).div_ceil(step_hz);
                        if steps > MAX_SWEEP_STEPS {
                            return Err(at(
                                &format!("a sweep of at most {MAX_SWEEP_STEPS} knob steps (raise step_hz)"),
                                steps.to_string(),
                            ));
                        }
                    }
                    let over = Duration::from_millis(over_ms);
                    (
                        at_ms,
                        Action::Sweep {
                            vfo,
                            from_hz,
                            to_hz,
                            step_hz,
                            over,
                        },
                    )
                }
                Line::Key { at_ms } => (at_ms, Action::Key),
                Line::Unkey { at_ms } => (at_ms, Action::Unkey),
                Line::Split { at_ms, on } => (at_ms, Action::Split(on)),
                Line::Select { at_ms, vfo } => (at_ms, Action::Select(vfo)),
                Line::Swap { at_ms } => (at_ms, Action::Swap),
                Line::Mode { at_ms, mode } => (at_ms, Action::Mode(mode)),
                Line::Reports { at_ms, on } => (at_ms, Action::Reports(on)),
            };
            steps.push((Duration::from_millis(at_ms), action));
        }
        // Stable: actions at the same time keep their order in the file.
        steps.sort_by_key(|(t, _)| *t);
        Ok(Script { steps })
    }

    /// The built-in demo script.
    pub fn demo() -> Script {
        // Checked by a unit test; an empty script rather than a panic.
        Script::parse(DEFAULT_SCRIPT, "<built-in script>").unwrap_or_default()
    }
}

/// The family being spoken, with its dialect's parameters.
#[derive(Debug, Clone)]
enum Wire {
    Binary(BinarySpec),
    Text(TextSpec),
    /// Answers reads only; never reports on its own.
    Block(BlockSpec),
}

// Binary-family command codes not in the dialect file (recalled from the
// family's CI-V reference guide).
/// Mode broadcast / set mode without reply.
const BIN_MODE_NO_REPLY: u8 = 0x01;
const BIN_READ_MODE: u8 = 0x04;
const BIN_SET_FREQUENCY: u8 = 0x05;
const BIN_SET_MODE: u8 = 0x06;
/// VFO select: sub 00 VFO A, 01 VFO B, B0 exchange A and B.
const BIN_SELECT_VFO: u8 = 0x07;
/// Split: no data reads it; 00 off, 01 on.
const BIN_SPLIT: u8 = 0x0F;
/// Selected (sub 00) / unselected (sub 01) VFO frequency, read or set.
const BIN_VFO_FREQUENCY: u8 = 0x25;
/// Filter byte sent with a mode answer (filter 1).
const BIN_FILTER: u8 = 0x01;

// Text-family commands not in the dialect file (recalled from the family's
// PC control command reference); the receive and transmit VFO commands are
// the dialect's (`frequency.receive_vfo`, `transmit_vfo`), their payloads
// 0 for A and 1 for B in both built-in dialects.
const TXT_MODE: [u8; 2] = *b"MD";
/// Auto information: 0 off, 1 or 2 on.
const TXT_AUTO_INFO: [u8; 2] = *b"AI";
/// The family's answer to a command it does not take.
pub const TXT_REFUSAL: &[u8] = b"?;";

/// The simulated rig.
#[derive(Debug)]
pub struct SimRig {
    wire: Wire,
    address: u8,
    state: RigState,
    reports: bool,
    min_hz: u64,
    max_hz: u64,
    /// Bytes of an unfinished frame or message (bounded by the dialect).
    inbuf: Vec<u8>,
    /// Text family: inside an overlong message, until its terminator.
    overlong: bool,
    out: Vec<u8>,
    truth: VecDeque<Truth>,
    /// Operator actions still to come, by time (then by order of arrival).
    pending: BTreeMap<(Duration, u64), Action>,
    seq: u64,
    /// Script not started yet (waits for [`SimRig::start_script`]).
    unstarted: Vec<(Duration, Action)>,
    last: Option<RigState>,
    /// The simulated loop and band behind the meters (None: the meter
    /// reads are refused like any unknown command).
    meters: Option<SimMeters>,
    /// Whether the capacitor's position has been told.
    position_known: bool,
    meter_lines: VecDeque<MeterLine>,
}

impl SimRig {
    /// A rig speaking `dialect`, in the state `options` describe; the first
    /// truth record (cause `start`) is ready at once.
    pub fn new(dialect: &Dialect, options: &SimOptions) -> SimRig {
        let wire = match &dialect.spec {
            Spec::Binary(s) => Wire::Binary(s.clone()),
            Spec::Text(s) => Wire::Text(s.clone()),
            Spec::Block(s) => Wire::Block(s.clone()),
        };
        let (min_hz, max_hz) = (
            options.min_hz.min(options.max_hz),
            options.max_hz.max(options.min_hz),
        );
        let mut rig = SimRig {
            wire,
            address: options.address,
            state: RigState {
                vfo_a: options.vfo_a_hz.clamp(min_hz, max_hz),
                vfo_b: options.vfo_b_hz.clamp(min_hz, max_hz),
                rx_vfo: Vfo::A,
                tx_vfo: Vfo::A,
                mode: options.mode,
                transmitting: false,
            },
            reports: options.reports,
            min_hz,
            max_hz,
            inbuf: Vec::new(),
            overlong: false,
            out: Vec::new(),
            truth: VecDeque::new(),
            pending: BTreeMap::new(),
            seq: 0,
            unstarted: Vec::new(),
            last: None,
            meters: None,
            position_known: false,
            meter_lines: VecDeque::new(),
        };
        rig.record(Duration::ZERO, Cause::Start);
        rig
    }

    /// Answers the dialect's meter reads from `meters` (a simulated loop
    /// and band; its scales should be the dialect's). Until
    /// [`SimRig::set_capacitor`] is called the meters read 0.
    pub fn with_meters(mut self, meters: SimMeters) -> SimRig {
        self.meters = Some(meters);
        self
    }

    /// Where the simulated loop's capacitor is now (steps), as the
    /// simulated controller says.
    pub fn set_capacitor(&mut self, steps: f64) {
        if let Some(m) = self.meters.as_mut() {
            m.set_position(steps);
            self.position_known = steps.is_finite();
        }
    }

    /// The next line of the meter truth log.
    pub fn poll_meter_line(&mut self) -> Option<MeterLine> {
        self.meter_lines.pop_front()
    }

    /// The dialect's scale of meter `kind`.
    fn meter_scale(&self, kind: MeterKind) -> Option<&MeterScale> {
        match &self.wire {
            Wire::Binary(s) => s.meters.iter().find(|m| m.kind == kind).map(|m| &m.scale),
            Wire::Text(s) => s.meters.iter().find(|m| m.kind == kind).map(|m| &m.scale),
            Wire::Block(s) => s.meter(kind).map(|m| &m.scale),
        }
    }

    /// A reading of meter `kind` now, logged with its truth; None without
    /// simulated meters. The signal meter reads the band at the receive
    /// frequency while receiving; SWR (`antenna::swr_at` at the
    /// capacitor) and forward power (the scale's full power) read while
    /// transmitting; each reads 0 otherwise, as a rig's meters do.
    fn meter_reading(&mut self, now: Duration, kind: MeterKind) -> Option<u16> {
        let scale = self.meter_scale(kind).cloned();
        let full_power = scale.as_ref().map(MeterScale::full_scale);
        let st = self.state;
        let known = self.position_known;
        let meters = self.meters.as_mut()?;
        let (hz, truth) = match (kind, st.transmitting) {
            (MeterKind::Signal, false) => (
                st.rx_hz(),
                known.then(|| meters.read_signal(st.rx_hz() as f64)),
            ),
            (MeterKind::Swr, true) => (
                st.tx_hz(),
                known.then(|| meters.read_swr(st.tx_hz() as f64)),
            ),
            (MeterKind::Signal, true) => (st.rx_hz(), None),
            _ => (st.tx_hz(), None),
        };
        let raw = match (kind, st.transmitting, truth) {
            (_, _, Some(t)) => t.raw,
            (MeterKind::Power, true, _) => full_power.unwrap_or(0),
            _ => 0,
        };
        let steps = known.then(|| meters.position());
        let resonance = steps.map(|p| meters.sim_loop.resonance_hz(p));
        let line = MeterLine {
            t_ms: now.as_micros() as f64 / 1000.0,
            kind: kind.as_str(),
            hz,
            transmitting: st.transmitting,
            raw,
            value: scale.as_ref().map_or(f64::NAN, |sc| sc.value(raw)),
            true_value: truth.map(|t| t.true_value),
            resonance_hz: resonance,
            steps,
        };
        self.meter_lines.push_back(line);
        Some(raw)
    }

    /// Loads a script whose times count from `origin` (None: from a later
    /// [`SimRig::start_script`]).
    pub fn load_script(&mut self, script: Script, origin: Option<Duration>) {
        match origin {
            Some(t0) => {
                for (at, action) in script.steps {
                    self.schedule(t0.saturating_add(at), action);
                }
            }
            None => self.unstarted = script.steps,
        }
    }

    /// Starts a loaded script now, if it waits for a start.
    pub fn start_script(&mut self, now: Duration) {
        for (at, action) in std::mem::take(&mut self.unstarted) {
            self.schedule(now.saturating_add(at), action);
        }
    }

    pub fn state(&self) -> &RigState {
        &self.state
    }

    /// Whether transceive reports are on.
    pub fn reports(&self) -> bool {
        self.reports
    }

    /// When the operator next acts.
    pub fn poll_timeout(&self) -> Option<Duration> {
        self.pending.keys().next().map(|(t, _)| *t)
    }

    /// Carries out every operator action due by `now`.
    pub fn handle_timeout(&mut self, now: Duration) {
        while let Some(entry) = self.pending.first_entry() {
            if entry.key().0 > now {
                break;
            }
            let ((at, _), action) = entry.remove_entry();
            self.operate(at, action);
        }
    }

    /// Takes bytes from the controller at `now`.
    pub fn handle_bytes(&mut self, now: Duration, bytes: &[u8]) {
        self.handle_timeout(now);
        self.inbuf.extend_from_slice(bytes);
        match self.wire.clone() {
            Wire::Binary(s) => self.binary_frames(now, &s),
            Wire::Text(s) => self.text_messages(now, &s),
            Wire::Block(s) => self.block_frames(now, &s),
        }
    }

    /// Everything the rig has sent since the last call.
    pub fn poll_output(&mut self) -> Option<Vec<u8>> {
        (!self.out.is_empty()).then(|| std::mem::take(&mut self.out))
    }

    /// The next truth record.
    pub fn poll_truth(&mut self) -> Option<Truth> {
        self.truth.pop_front()
    }

    fn schedule(&mut self, at: Duration, action: Action) {
        self.seq += 1;
        self.pending.insert((at, self.seq), action);
    }

    fn record(&mut self, now: Duration, cause: Cause) {
        if self.last == Some(self.state) {
            return;
        }
        self.last = Some(self.state);
        let s = self.state;
        self.truth.push_back(Truth {
            t_ms: now.as_micros() as f64 / 1000.0,
            rx_hz: s.rx_hz(),
            tx_hz: s.tx_hz(),
            transmitting: s.transmitting,
            split: s.split(),
            rx_vfo: s.rx_vfo,
            mode: s.mode,
            cause,
        });
    }

    fn in_coverage(&self, hz: u64) -> bool {
        (self.min_hz..=self.max_hz).contains(&hz)
    }

    // ---- the operator ----

    fn operate(&mut self, now: Duration, action: Action) {
        let before = self.state;
        match action {
            Action::Tune { vfo, hz } => {
                let vfo = vfo.unwrap_or(self.state.rx_vfo);
                self.state.set_hz(vfo, hz.clamp(self.min_hz, self.max_hz));
                if self.state != before {
                    self.report_tune(vfo);
                }
            }
            Action::Sweep {
                vfo,
                from_hz,
                to_hz,
                step_hz,
                over,
            } => {
                let vfo = vfo.unwrap_or(self.state.rx_vfo);
                let from = from_hz.unwrap_or(self.state.hz(vfo));
                let span = from.abs_diff(to_hz);
                // A sweep from "here" was not checked at load: keep it bounded.
                let step = step_hz.max(span.div_ceil(MAX_SWEEP_STEPS)).max(1);
                let n = span.div_ceil(step);
                self.operate(
                    now,
                    Action::Tune {
                        vfo: Some(vfo),
                        hz: from,
                    },
                );
                for i in 1..=n {
                    let hz = if i == n {
                        to_hz
                    } else if to_hz >= from {
                        from + i * step
                    } else {
                        from - i * step
                    };
                    let at = now + over.mul_f64(i as f64 / n as f64);
                    self.schedule(at, Action::Tune { vfo: Some(vfo), hz });
                }
                return;
            }
            Action::Key => {
                self.state.transmitting = true;
                if before != self.state {
                    self.report_transmit();
                }
            }
            Action::Unkey => {
                self.state.transmitting = false;
                if before != self.state {
                    self.report_transmit();
                }
            }
            Action::Split(on) => {
                self.state.set_split(on);
                if before != self.state {
                    self.report_vfos();
                }
            }
            Action::Select(vfo) => {
                self.state.select(vfo);
                if before != self.state {
                    self.report_vfos();
                }
            }
            Action::Swap => {
                let (a, b) = (self.state.vfo_a, self.state.vfo_b);
                self.state.vfo_a = b;
                self.state.vfo_b = a;
                if before != self.state {
                    self.report_vfos();
                }
            }
            Action::Mode(mode) => self.state.mode = mode,
            Action::Reports(on) => self.reports = on,
        }
        self.record(now, Cause::Operator);
    }

    /// Transceive report after the knob moved VFO `vfo`.
    fn report_tune(&mut self, vfo: Vfo) {
        if !self.reports {
            return;
        }
        match self.wire.clone() {
            // The binary family broadcasts the operating frequency; a change
            // to the VFO not shown is not announced.
            Wire::Binary(s) => {
                if vfo == self.state.rx_vfo && !self.state.transmitting
                    || vfo == self.state.tx_vfo && self.state.transmitting
                {
                    self.binary_broadcast(&s);
                }
            }
            Wire::Text(s) => {
                let code = match vfo {
                    Vfo::A => s.vfo_a,
                    Vfo::B => s.vfo_b,
                };
                let msg = text_frequency(&s, code, self.state.hz(vfo));
                self.out.extend_from_slice(&msg);
            }
            // The block family never reports on its own.
            Wire::Block(_) => {}
        }
    }

    /// Report after keying or unkeying: the text family announces it; the
    /// binary family does not announce transmit state (recalled).
    fn report_transmit(&mut self) {
        if !self.reports {
            return;
        }
        if let Wire::Text(s) = &self.wire {
            let report = s.encode_transmit(self.state.transmitting);
            self.out.extend_from_slice(&report);
        }
    }

    /// Report after the VFO selection or split changed.
    fn report_vfos(&mut self) {
        if !self.reports {
            return;
        }
        match self.wire.clone() {
            Wire::Binary(s) => self.binary_broadcast(&s),
            Wire::Text(s) => {
                let msg = text_status(&s, &self.state);
                self.out.extend_from_slice(&msg);
            }
            Wire::Block(_) => {}
        }
    }

    // ---- the block family ----

    /// Whole blocks, framed by count (the family has no framing bytes):
    /// reads answered from the published layout (see
    /// protocols/block-5.toml), the frequency set (on the VFO in use),
    /// keying, split and the A/B toggle obeyed, other opcodes taken
    /// silently. The frequency read reports the VFO in use.
    fn block_frames(&mut self, now: Duration, s: &BlockSpec) {
        let n = s.block_length.max(1);
        while self.inbuf.len() >= n {
            let block: Vec<u8> = self.inbuf.drain(..n).collect();
            let op = block.get(s.opcode_offset).copied().unwrap_or(0);
            let before = self.state;
            let meter = s.meters.iter().find(|m| m.read == op).map(|m| m.kind);
            if op == s.read_frequency {
                let answer = s.encode_frequency(self.state.operating_hz());
                self.out.extend_from_slice(&answer);
            } else if op == s.read_transmit {
                let mut answer = s.encode_transmit(self.state.transmitting);
                // The meter the same answer carries (forward power), in its
                // own bits.
                if let Some(kind) = meter.filter(|_| self.meters.is_some()) {
                    let raw = self.meter_reading(now, kind).unwrap_or(0);
                    let bits = s.encode_meter(kind, raw).unwrap_or_default();
                    if let (Some(a), Some(b)) = (answer.first_mut(), bits.first()) {
                        *a |= *b;
                    }
                }
                self.out.extend_from_slice(&answer);
            } else if let Some(kind) = meter.filter(|_| self.meters.is_some()) {
                let raw = self.meter_reading(now, kind).unwrap_or(0);
                let answer = s.encode_meter(kind, raw).unwrap_or_default();
                self.out.extend_from_slice(&answer);
            } else if op == s.transmit_on {
                self.state.transmitting = true;
            } else if op == s.transmit_off {
                self.state.transmitting = false;
            } else if s.split_on == Some(op) {
                // Split: transmit on the VFO not received on.
                self.state.tx_vfo = self.state.rx_vfo.other();
            } else if s.split_off == Some(op) {
                self.state.tx_vfo = self.state.rx_vfo;
            } else if s.vfo_toggle == Some(op) {
                // A/B toggle: the other VFO is in use (with split, the
                // transmit VFO goes with it to the other side).
                let other = self.state.rx_vfo.other();
                self.state.select(other);
            } else if op == s.set_frequency {
                let field = block.get(..s.frequency_bytes).unwrap_or_default();
                if let Some(v) = s.read_bcd(field) {
                    let hz = v.saturating_mul(s.unit_hz);
                    if (self.min_hz..=self.max_hz).contains(&hz) {
                        let vfo = self.state.rx_vfo;
                        self.state.set_hz(vfo, hz);
                    }
                }
            }
            if self.state != before {
                self.record(now, Cause::Cat);
            }
        }
    }

    // ---- the binary family ----

    fn binary_broadcast(&mut self, s: &BinarySpec) {
        let mut payload = vec![s.frequency_broadcast];
        if push_bcd(&mut payload, self.state.operating_hz(), s.frequency_bytes) {
            let to = s.broadcast;
            self.binary_send(s, to, &payload);
        }
    }

    fn binary_send(&mut self, s: &BinarySpec, to: u8, payload: &[u8]) {
        self.out
            .extend_from_slice(&[s.preamble, s.preamble, to, self.address]);
        self.out.extend_from_slice(payload);
        self.out.push(s.terminator);
    }

    /// Frames out of the input buffer: `FE FE <to> <from> <cmd> [data] FD`
    /// (frame layout from the family's CI-V reference guide).
    fn binary_frames(&mut self, now: Duration, s: &BinarySpec) {
        loop {
            let Some(start) = self.inbuf.iter().position(|&b| b == s.preamble) else {
                self.inbuf.clear();
                return;
            };
            self.inbuf.drain(..start);
            match self.inbuf.get(1) {
                None => return,
                Some(&b) if b != s.preamble => {
                    self.inbuf.drain(..1);
                    continue;
                }
                Some(_) => {}
            }
            // Extra preamble copies are discarded.
            let body_at = self
                .inbuf
                .iter()
                .position(|&b| b != s.preamble)
                .unwrap_or(self.inbuf.len());
            let rest = self.inbuf.get(body_at..).unwrap_or(&[]);
            match rest
                .iter()
                .position(|&b| b == s.terminator || b == s.preamble)
            {
                None => {
                    if rest.len() + 2 > s.max_frame {
                        // Overlong: a rig drops it and waits for a preamble.
                        self.inbuf.clear();
                    }
                    return;
                }
                Some(end) => {
                    let ended = rest.get(end) == Some(&s.terminator);
                    let body = rest.get(..end).unwrap_or(&[]).to_vec();
                    self.inbuf.drain(..body_at + end + usize::from(ended));
                    if ended && body.len() + 3 <= s.max_frame {
                        self.binary_frame(now, s, &body);
                    }
                }
            }
        }
    }

    fn binary_frame(&mut self, now: Duration, s: &BinarySpec, body: &[u8]) {
        let [to, from, cmd, data @ ..] = body else {
            return;
        };
        if *to != self.address || *cmd == s.collision {
            // For another station on the bus (or our own words coming back).
            return;
        }
        let (to, cmd) = (*from, *cmd);
        let before = self.state;
        let meter = s
            .meters
            .iter()
            .find(|m| m.command == cmd && data == [m.sub])
            .map(|m| (m.kind, m.sub));
        let answer: Option<Vec<u8>> = match meter {
            // A meter read: the command, the sub-command and two BCD bytes,
            // most significant first; refused without simulated meters.
            Some((kind, sub)) => Some(match self.meter_reading(now, kind) {
                Some(raw) => {
                    let raw = raw.min(9999);
                    let bcd2 = |v: u16| ((v / 10) << 4 | (v % 10)) as u8;
                    vec![cmd, sub, bcd2(raw / 100), bcd2(raw % 100)]
                }
                None => vec![s.ack_ng],
            }),
            None => self.binary_command(s, cmd, data),
        };
        if let Some(payload) = answer {
            self.binary_send(s, to, &payload);
        }
        if self.state != before {
            self.record(now, Cause::Cat);
        }
    }

    /// The answer's payload (command onwards); None for a command that
    /// gets no answer.
    fn binary_command(&mut self, s: &BinarySpec, cmd: u8, data: &[u8]) -> Option<Vec<u8>> {
        let ok = Some(vec![s.ack_ok]);
        let ng = Some(vec![s.ack_ng]);
        let width = s.frequency_bytes;
        if cmd == s.frequency_read && data.is_empty() {
            let mut p = vec![cmd];
            return if push_bcd(&mut p, self.state.operating_hz(), width) {
                Some(p)
            } else {
                ng
            };
        }
        if cmd == s.transmit && data.first() == Some(&s.transmit_sub) {
            return match data.get(1..) {
                Some([]) => Some(vec![cmd, s.transmit_sub, u8::from(self.state.transmitting)]),
                Some([on @ (0 | 1)]) => {
                    self.state.transmitting = *on == 1;
                    ok
                }
                _ => ng,
            };
        }
        if cmd == s.frequency_broadcast && !data.is_empty() {
            // Set without an answer.
            if let Some(hz) = self.bcd_in_coverage(data, width) {
                let vfo = self.state.rx_vfo;
                self.state.set_hz(vfo, hz);
            }
            return None;
        }
        match (cmd, data) {
            (BIN_SET_FREQUENCY, _) => match self.bcd_in_coverage(data, width) {
                Some(hz) => {
                    let vfo = self.state.rx_vfo;
                    self.state.set_hz(vfo, hz);
                    ok
                }
                None => ng,
            },
            (BIN_READ_MODE, []) => Some(vec![cmd, self.state.mode.binary_code(), BIN_FILTER]),
            (BIN_SET_MODE, [m, ..]) | (BIN_MODE_NO_REPLY, [m, ..]) if data.len() <= 2 => {
                let known = Mode::from_binary(*m);
                if let Some(mode) = known {
                    self.state.mode = mode;
                }
                match (cmd, known) {
                    (BIN_MODE_NO_REPLY, _) => None,
                    (_, Some(_)) => ok,
                    (_, None) => ng,
                }
            }
            (BIN_SELECT_VFO, [0x00]) => {
                self.state.select(Vfo::A);
                ok
            }
            (BIN_SELECT_VFO, [0x01]) => {
                self.state.select(Vfo::B);
                ok
            }
            (BIN_SELECT_VFO, [0xB0]) => {
                let (a, b) = (self.state.vfo_a, self.state.vfo_b);
                self.state.vfo_a = b;
                self.state.vfo_b = a;
                ok
            }
            (BIN_SPLIT, []) => Some(vec![cmd, u8::from(self.state.split())]),
            (BIN_SPLIT, [on @ (0 | 1)]) => {
                self.state.set_split(*on == 1);
                ok
            }
            (BIN_VFO_FREQUENCY, [which @ (0 | 1), rest @ ..]) => {
                let vfo = if *which == 0 {
                    self.state.rx_vfo
                } else {
                    self.state.rx_vfo.other()
                };
                if rest.is_empty() {
                    let mut p = vec![cmd, *which];
                    return if push_bcd(&mut p, self.state.hz(vfo), width) {
                        Some(p)
                    } else {
                        ng
                    };
                }
                match self.bcd_in_coverage(rest, width) {
                    Some(hz) => {
                        self.state.set_hz(vfo, hz);
                        ok
                    }
                    None => ng,
                }
            }
            _ => ng,
        }
    }

    fn bcd_in_coverage(&self, field: &[u8], width: usize) -> Option<u64> {
        if field.len() != width {
            return None;
        }
        let hz = bcd::decode_le(field).ok()?;
        self.in_coverage(hz).then_some(hz)
    }

    // ---- the text family ----

    /// Messages out of the input buffer: two letters, a payload, the
    /// terminator (layout from the family's PC control command reference).
    fn text_messages(&mut self, now: Duration, s: &TextSpec) {
        while let Some(end) = self.inbuf.iter().position(|&b| b == s.terminator) {
            let msg: Vec<u8> = self.inbuf.drain(..=end).take(end).collect();
            if std::mem::take(&mut self.overlong) {
                self.out.extend_from_slice(TXT_REFUSAL);
                continue;
            }
            self.text_message(now, s, &msg);
        }
        if self.inbuf.len() > s.max_message {
            self.inbuf.clear();
            self.overlong = true;
        }
    }

    fn text_message(&mut self, now: Duration, s: &TextSpec, msg: &[u8]) {
        let before = self.state;
        let meter = s
            .meters
            .iter()
            .find(|m| m.read.strip_suffix(&[s.terminator]) == Some(msg))
            .map(|m| m.kind);
        if let Some(kind) = meter {
            // A meter read: answered from the simulated meters, refused
            // without them.
            let answer = self
                .meter_reading(now, kind)
                .and_then(|raw| s.encode_meter(kind, raw));
            match answer {
                Some(bytes) => self.out.extend_from_slice(&bytes),
                None => self.out.extend_from_slice(TXT_REFUSAL),
            }
            return;
        }
        let answer = match msg {
            [a, b, payload @ ..] if a.is_ascii_uppercase() && b.is_ascii_uppercase() => {
                self.text_command(s, [*a, *b], payload)
            }
            _ => Err(()),
        };
        match answer {
            Ok(Some(bytes)) => self.out.extend_from_slice(&bytes),
            Ok(None) => {}
            Err(()) => self.out.extend_from_slice(TXT_REFUSAL),
        }
        if self.state != before {
            self.record(now, Cause::Cat);
        }
    }

    /// Ok(Some(answer)) for a read, Ok(None) for a set (answered silently),
    /// Err for a refusal.
    fn text_command(
        &mut self,
        s: &TextSpec,
        cmd: [u8; 2],
        payload: &[u8],
    ) -> Result<Option<Vec<u8>>, ()> {
        let vfo = if cmd == s.vfo_a {
            Some(Vfo::A)
        } else if cmd == s.vfo_b {
            Some(Vfo::B)
        } else {
            None
        };
        if let Some(vfo) = vfo {
            if payload.is_empty() {
                return Ok(Some(text_frequency(s, cmd, self.state.hz(vfo))));
            }
            let hz = ascii_number(payload, s.digits).ok_or(())?;
            if !self.in_coverage(hz) {
                return Err(());
            }
            self.state.set_hz(vfo, hz);
            return Ok(None);
        }
        if cmd == s.status && payload.is_empty() {
            return Ok(Some(text_status(s, &self.state)));
        }
        if let (true, Some(meaning)) = (cmd == s.transmit_on, &s.transmit_digits) {
            // The transmit-state command whose digit says (recalled): alone
            // a read, answered with the digit; with a digit a set.
            return match payload {
                [] if meaning.bare_is_read => Ok(Some(s.encode_transmit(self.state.transmitting))),
                [d] => {
                    self.state.transmitting = meaning.means_transmit(*d).ok_or(())?;
                    Ok(None)
                }
                _ => Err(()),
            };
        }
        if cmd == s.transmit_on || Some(cmd) == s.transmit_off {
            // An optional one-digit payload (which source keys: recalled).
            if !matches!(payload, [] | [b'0'..=b'9']) {
                return Err(());
            }
            self.state.transmitting = cmd == s.transmit_on;
            return Ok(None);
        }
        let (rx_vfo, tx_vfo) = (s.receive_vfo, s.transmit_vfo);
        match (cmd, payload) {
            (c, []) if c == rx_vfo || c == tx_vfo => {
                let vfo = if cmd == rx_vfo {
                    self.state.rx_vfo
                } else {
                    self.state.tx_vfo
                };
                Ok(Some(text_simple(s, cmd, vfo_digit(vfo))))
            }
            (c, [d @ (b'0' | b'1')]) if c == rx_vfo => {
                // Choosing the receive VFO also transmits on it (recalled).
                let vfo = digit_vfo(*d);
                self.state.rx_vfo = vfo;
                self.state.tx_vfo = vfo;
                Ok(None)
            }
            (c, [d @ (b'0' | b'1')]) if c == tx_vfo => {
                self.state.tx_vfo = digit_vfo(*d);
                Ok(None)
            }
            (TXT_MODE, []) => Ok(Some(text_simple(s, cmd, self.state.mode.text_code()))),
            (TXT_MODE, [d]) => {
                self.state.mode = Mode::from_text(*d).ok_or(())?;
                Ok(None)
            }
            (TXT_AUTO_INFO, []) => Ok(Some(text_simple(
                s,
                cmd,
                if self.reports { b'2' } else { b'0' },
            ))),
            (TXT_AUTO_INFO, [d @ b'0'..=b'2']) => {
                self.reports = *d != b'0';
                Ok(None)
            }
            _ => Err(()),
        }
    }
}

/// Appends `hz` as `width` bytes of little-endian packed BCD; false when it
/// does not fit.
fn push_bcd(out: &mut Vec<u8>, hz: u64, width: usize) -> bool {
    match bcd::encode_le(hz, width) {
        Some(field) => {
            out.extend_from_slice(&field);
            true
        }
        None => false,
    }
}

/// `payload` as a number when it is exactly `digits` ASCII digits.
fn ascii_number(payload: &[u8], digits: usize) -> Option<u64> {
    if payload.len() != digits || !payload.iter().all(u8::is_ascii_digit) {
        return None;
    }
    payload.iter().try_fold(0u64, |v, d| {
        v.checked_mul(10)?.checked_add(u64::from(d - b'0'))
    })
}

fn vfo_digit(vfo: Vfo) -> u8 {
    match vfo {
        Vfo::A => b'0',
        Vfo::B => b'1',
    }
}

fn digit_vfo(d: u8) -> Vfo {
    if d == b'1' {
        Vfo::B
    } else {
        Vfo::A
    }
}

fn text_simple(s: &TextSpec, cmd: [u8; 2], value: u8) -> Vec<u8> {
    vec![cmd[0], cmd[1], value, s.terminator]
}

fn text_frequency(s: &TextSpec, cmd: [u8; 2], hz: u64) -> Vec<u8> {
    let mut msg = cmd.to_vec();
    msg.extend_from_slice(zero_padded(hz, s.digits).as_bytes());
    msg.push(s.terminator);
    msg
}

fn zero_padded(hz: u64, digits: usize) -> String {
    let modulus = 10u64.saturating_pow(digits.min(19) as u32);
    let value = if modulus == u64::MAX {
        hz
    } else {
        hz % modulus
    };
    format!("{value:0digits$}")
}

/// The status answer: the dialect's length, the operating frequency and the
/// transmit flag at the dialect's offsets, `0` elsewhere. Past the transmit
/// flag the family's layout (recalled) has the mode, the VFO in use and the
/// split flag at +1, +2 and +4; those are filled where the payload has room.
fn text_status(s: &TextSpec, state: &RigState) -> Vec<u8> {
    let mut payload = vec![b'0'; s.status_length];
    let digits = zero_padded(state.operating_hz(), s.digits);
    let f = s.status_frequency_offset;
    if let Some(field) = payload.get_mut(f..f + s.digits) {
        field.copy_from_slice(digits.as_bytes());
    }
    // A status answer without a transmit flag (the nine-digit family's)
    // gets nothing past the frequency: its other fields are `0` here.
    let Some(t) = s.status_transmit_offset else {
        let mut msg = s.status.to_vec();
        msg.extend_from_slice(&payload);
        msg.push(s.terminator);
        return msg;
    };
    let extras = [
        (0, if state.transmitting { b'1' } else { b'0' }),
        (1, state.mode.text_code()),
        (2, vfo_digit(state.rx_vfo)),
        (4, if state.split() { b'1' } else { b'0' }),
    ];
    for (at, value) in extras {
        let i = t + at;
        // Never over the frequency field.
        if (f..f + s.digits).contains(&i) {
            continue;
        }
        if let Some(c) = payload.get_mut(i) {
            *c = value;
        }
    }
    let mut msg = s.status.to_vec();
    msg.extend_from_slice(&payload);
    msg.push(s.terminator);
    msg
}

/// What a rig's answer looks like to a controller whose port speed is
/// wrong: every byte turned into one that no family frames (0x80 to 0xBF:
/// no ASCII, no preamble, terminator or collision byte).
pub fn misclocked(bytes: &[u8]) -> Vec<u8> {
    bytes
        .iter()
        .map(|b| 0x80 | (b.rotate_left(3) ^ 0x15) & 0x3F)
        .collect()
}

#[cfg(test)]
mod tests;
