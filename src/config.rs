//! The station's configuration: one TOML file, read into typed sections.
//!
//! Every section has defaults a station would expect, so a config only needs
//! what differs. Unknown keys are refused (`deny_unknown_fields`): a typo such
//! as `debounse_ms` must not silently fall back to a default next to a
//! kilowatt amplifier. [`Config::load`] names the file, the key and, where the
//! TOML parser gives them, the line and column of every error; [`Config::validate`]
//! checks what the types cannot (limits in order, bands that do not overlap,
//! enough calibration points).

use std::fmt;
use std::path::{Path, PathBuf};

use serde::Deserialize;

use crate::calibrate::{ModelKind, Point};
use crate::error::{Located, Place};

/// Everything one station needs.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Config {
    #[serde(default)]
    pub rig: RigConfig,
    #[serde(default)]
    pub tuner: TunerConfig,
    #[serde(default)]
    pub follow: FollowConfig,
    #[serde(default)]
    pub calibration: CalibrationConfig,
    /// Bands the tuner follows in; outside all of them it holds.
    #[serde(default, rename = "band")]
    pub bands: Vec<BandConfig>,
    /// The antenna's dimensions, for bandwidth and voltage estimates.
    #[serde(default)]
    pub antenna: AntennaConfig,
    /// The transmit-inhibit output.
    #[serde(default)]
    pub inhibit: InhibitConfig,
    /// The hardware transmit-sense input (the rig's send/amplifier-key
    /// output), when wired.
    #[serde(default)]
    pub transmit_sense: SenseConfig,
    /// Named places the operator can send the capacitor to
    /// (`tuneward ctl preset NAME`).
    #[serde(default, rename = "preset")]
    pub presets: Vec<PresetConfig>,
    /// The operator's control socket.
    #[serde(default)]
    pub control: ControlConfig,
    /// State and commands on an MQTT broker (off unless configured).
    #[serde(default)]
    pub mqtt: Option<MqttConfig>,
    /// The live web page (off unless `listen` is given).
    #[serde(default)]
    pub web: WebConfig,
    /// Watching the rig's SWR meter while it transmits (off unless
    /// `action` says otherwise).
    #[serde(default)]
    pub swr_watch: SwrWatchConfig,
    /// Where the config was read from; relative paths inside it are resolved
    /// against this file's folder.
    #[serde(skip)]
    pub source: Option<PathBuf>,
}

/// `[rig]`: the transceiver's control port.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RigConfig {
    /// A built-in dialect name (`binary-bcd`, `text-semicolon`,
    /// `text-semicolon-9`) or a path to a dialect TOML file.
    #[serde(default = "default_protocol")]
    pub protocol: String,
    /// Serial device of the rig's control port (used by the live service).
    #[serde(default)]
    pub port: Option<String>,
    #[serde(default = "default_baud")]
    pub baud: u32,
    /// Binary family: only reports from this rig address count. Absent: any
    /// address except the controller's own.
    #[serde(default)]
    pub address: Option<u8>,
    /// Serial framing of the rig's port: data bits (5 to 8).
    #[serde(default = "default_data_bits")]
    pub data_bits: u8,
    /// `"none"`, `"odd"` or `"even"`.
    #[serde(default)]
    pub parity: SerialParity,
    /// 1 or 2.
    #[serde(default = "default_stop_bits")]
    pub stop_bits: u8,
    /// `"none"`, `"software"` (XON/XOFF) or `"hardware"` (RTS/CTS).
    #[serde(default)]
    pub flow_control: SerialFlow,
    /// How the live service uses the port: `"listen"` (read only),
    /// `"poll"` (ask every `poll_ms`) or `"proxy"` (share it through a
    /// pseudo-terminal at `proxy_link`).
    #[serde(default)]
    pub mode: RigMode,
    /// `mode = "poll"` (default 250, below the debounce it feeds) or `"proxy"` (no polling unless set):
    /// ask for the frequency and transmit state every this many ms (the
    /// interval stretches while the rig does not answer).
    #[serde(default)]
    pub poll_ms: Option<u64>,
    /// `mode = "proxy"`: tuneward opens `port` and puts a symlink to a
    /// pseudo-terminal here for the other program to open (relative to the
    /// config's folder).
    #[serde(default)]
    pub proxy_link: Option<PathBuf>,
    /// `"off"` (default), `"on"` or `"keep"`: DTR of the rig's port, set
    /// at open before the first byte and held. An interface that keys the
    /// transmitter (or CW) by DTR must have it `"off"`.
    #[serde(default)]
    pub dtr: ModemLineSetting,
    /// The same for RTS. Unset, it is `"off"`, or left to the kernel under
    /// `flow_control = "hardware"` (which drives RTS itself; setting it
    /// there is refused).
    #[serde(default)]
    pub rts: Option<ModemLineSetting>,
}

/// What a modem-control line of the rig's port is driven to at open.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ModemLineSetting {
    On,
    #[default]
    Off,
    Keep,
}

/// How the live service uses the rig's port.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RigMode {
    /// Read only: never write (a shared one-wire bus, a rig that reports
    /// on its own).
    #[default]
    Listen,
    /// Send the dialect's frequency and transmit-state queries every
    /// `poll_ms`.
    Poll,
    /// Share the port with another program through a pseudo-terminal.
    Proxy,
}

/// How the rig's port is used, from a validated `[rig]`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum RigUse {
    /// Read only.
    Listen,
    /// Query every `every_ms` (positive).
    Poll { every_ms: u64 },
    /// Shared through a pseudo-terminal whose symlink goes at `link`
    /// (resolved against the config's folder); queries every `poll_ms`
    /// (positive) when set.
    Proxy { link: PathBuf, poll_ms: Option<u64> },
}

/// `poll_ms` when `mode = "poll"` does not say.
/// Below the default debounce (400 ms) with room for the answer's latency:
/// a poll slower than the debounce makes each polled report of a slow tune
/// a settle of its own (a move per poll).
pub const DEFAULT_POLL_MS: u64 = 250;

impl RigConfig {
    /// The polling interval the mode asks for: always in `poll`, only when
    /// `poll_ms` is set in `proxy`, never in `listen`.
    pub fn poll_every_ms(&self) -> Option<u64> {
        match self.mode {
            RigMode::Listen => None,
            RigMode::Poll => Some(self.poll_ms.unwrap_or(DEFAULT_POLL_MS)),
            RigMode::Proxy => self.poll_ms,
        }
    }
}

/// Parity of a serial port.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SerialParity {
    #[default]
    None,
    Odd,
    Even,
}

/// Flow control of a serial port.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SerialFlow {
    #[default]
    None,
    Software,
    Hardware,
}

fn default_data_bits() -> u8 {
    8
}
fn default_stop_bits() -> u8 {
    1
}

fn default_protocol() -> String {
    "binary-bcd".to_string()
}
fn default_baud() -> u32 {
    19_200
}

impl Default for RigConfig {
    fn default() -> Self {
        RigConfig {
            protocol: default_protocol(),
            port: None,
            baud: default_baud(),
            address: None,
            data_bits: default_data_bits(),
            parity: SerialParity::None,
            stop_bits: default_stop_bits(),
            flow_control: SerialFlow::None,
            mode: RigMode::Listen,
            poll_ms: None,
            proxy_link: None,
            dtr: ModemLineSetting::Off,
            rts: None,
        }
    }
}

/// Which side the final approach comes from: a core setting, read here.
pub use crate::follow::policy::Approach;

/// `[tuner]`: the motor and its safe travel.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TunerConfig {
    /// `"sim"`: the in-process simulator.
    #[serde(default = "default_link")]
    pub link: String,
    #[serde(default)]
    pub min_steps: i64,
    #[serde(default = "default_max_steps")]
    pub max_steps: i64,
    #[serde(default = "default_steps_per_second")]
    pub steps_per_second: f64,
    #[serde(default)]
    pub backlash_steps: i64,
    #[serde(default = "default_approach")]
    pub approach: Approach,
    /// Time the mechanics need to come to rest after the last step.
    #[serde(default = "default_settle_ms")]
    pub settle_ms: u64,
    /// The position journal, relative to the config's folder (default:
    /// `tuneward-position.state` beside the config).
    #[serde(default)]
    pub state_file: Option<PathBuf>,
    /// At a clean shutdown, after a move that ended with the final approach,
    /// back off by half the backlash toward the approach side so that the
    /// drive train does not stand under tension while the service is off.
    #[serde(default)]
    pub relax_on_exit: bool,
    /// A home switch: with it, a position found unknown at start (or after
    /// an end stop) is recovered by a slow run to the switch, the inhibit
    /// held.
    #[serde(default)]
    pub home: Option<HomeConfig>,
}

/// `[tuner] home = { switch = …, side = "low" | "high", position = N }`.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct HomeConfig {
    /// `"controller"`: the controller has the switch and homes when asked
    /// (`HOME`, line protocol version 2). A number: the GPIO input line the
    /// switch is on, on the direct drive's chip (`gpio://` links only; a
    /// closed switch reads at the link's `closed` level).
    pub switch: HomeSwitch,
    /// The end of the travel the switch is at.
    pub side: HomeSideConfig,
    /// The count the switch's position is given (within the limits).
    pub position: i64,
    /// Homing speed in steps/s; default a quarter of `steps_per_second`.
    #[serde(default)]
    pub speed: Option<u32>,
}

/// Where the home switch is read.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(untagged)]
pub enum HomeSwitch {
    /// A GPIO line offset on the direct drive's chip.
    Line(u32),
    /// `"controller"`.
    Named(String),
}

/// `"low"` or `"high"`.
#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum HomeSideConfig {
    Low,
    High,
}

fn default_link() -> String {
    "sim".to_string()
}
fn default_max_steps() -> i64 {
    10_000
}
fn default_steps_per_second() -> f64 {
    800.0
}
fn default_approach() -> Approach {
    Approach::Up
}
fn default_settle_ms() -> u64 {
    50
}

impl Default for TunerConfig {
    fn default() -> Self {
        TunerConfig {
            link: default_link(),
            min_steps: 0,
            max_steps: default_max_steps(),
            steps_per_second: default_steps_per_second(),
            backlash_steps: 0,
            approach: default_approach(),
            settle_ms: default_settle_ms(),
            state_file: None,
            relax_on_exit: false,
            home: None,
        }
    }
}

/// `[follow]`: when the tuner moves.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FollowConfig {
    /// A frequency must stay the latest report this long before it is acted on.
    #[serde(default = "default_debounce_ms")]
    pub debounce_ms: u64,
    /// No move while the settled frequency is within this many Hz of the
    /// frequency the tuner is tuned for.
    #[serde(default = "default_hysteresis_hz")]
    pub hysteresis_hz: Hysteresis,
    /// No move smaller than this.
    #[serde(default = "default_min_move_steps")]
    pub min_move_steps: i64,
    /// Inhibit stays asserted this long after arrival, while the mechanics settle.
    #[serde(default = "default_inhibit_tail_ms")]
    pub inhibit_tail_ms: u64,
    /// Time between asserting the inhibit and the first step, so that a relay
    /// or the rig's own inhibit input has taken effect before anything moves.
    #[serde(default = "default_inhibit_lead_ms")]
    pub inhibit_lead_ms: u64,
    /// After a hand touch-up, the operator must stay this long on the
    /// frequency before the new position is offered as a calibration point.
    #[serde(default = "default_candidate_dwell_ms")]
    pub candidate_dwell_ms: u64,
    /// Assert the inhibit as soon as the rig reports a frequency the loop is
    /// not tuned for (beyond the dead band), not only while the motor moves:
    /// an operator who calls at once after tuning cannot transmit into a
    /// mistuned loop.
    #[serde(default = "default_true")]
    pub inhibit_while_detuned: bool,
    /// A report at least this far from the one before it (or in another
    /// band), after `jump_quiet_ms` without another frequency, is a jump (a
    /// band change, a memory recall, a band-map click) and is acted on at
    /// once, without the debounce. 0: every report waits for the debounce.
    #[serde(default = "default_jump_hz")]
    pub jump_hz: u64,
    /// How long without another frequency before a report can be a jump:
    /// longer than a knob's report interval, so a sweep is not mistaken
    /// for jumps.
    #[serde(default = "default_jump_quiet_ms")]
    pub jump_quiet_ms: u64,
    /// A knob sweep's report settles after this many of the sweep's own
    /// report intervals without another report (when that is shorter than
    /// the debounce): a knob that has been quiet for a few of its own
    /// intervals has stopped. 0: every report waits for the debounce.
    #[serde(default = "default_sweep_settle_intervals")]
    pub sweep_settle_intervals: u32,
    /// Which frequency the loop is tuned for: `"transmit"` (default: the
    /// transmit VFO, XIT included, where the power goes) or `"receive"`.
    #[serde(default)]
    pub tune_for: TuneForConfig,
    /// When the other VFO (the one a split toggle or an A/B swap would
    /// bring) is close enough that one position of the loop serves both
    /// within the dead band, tune for the point between them, so that the
    /// toggle needs no move. `false`: always tune for the frequency itself.
    #[serde(default = "default_true")]
    pub cover_other_vfo: bool,
}

/// `[follow] tune_for`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TuneForConfig {
    #[default]
    Transmit,
    Receive,
}

impl From<TuneForConfig> for crate::follow::station::TuneFor {
    fn from(t: TuneForConfig) -> Self {
        match t {
            TuneForConfig::Transmit => crate::follow::station::TuneFor::Transmit,
            TuneForConfig::Receive => crate::follow::station::TuneFor::Receive,
        }
    }
}

/// The shortest `follow.jump_quiet_ms`: a knob reports every 20 to 100 ms
/// (common practice, no source), and a shorter quiet time would take the
/// steps of a fast sweep for jumps.
pub const MIN_JUMP_QUIET_MS: u64 = 50;

fn default_true() -> bool {
    true
}

fn default_debounce_ms() -> u64 {
    400
}
fn default_hysteresis_hz() -> Hysteresis {
    Hysteresis::Unset
}
fn default_min_move_steps() -> i64 {
    2
}
fn default_inhibit_tail_ms() -> u64 {
    150
}
fn default_inhibit_lead_ms() -> u64 {
    20
}
fn default_candidate_dwell_ms() -> u64 {
    20_000
}
fn default_jump_hz() -> u64 {
    3_000
}
fn default_jump_quiet_ms() -> u64 {
    300
}
/// Four of a knob's report intervals: a knob's reports come at an uneven
/// rate (common practice, no source), so a pause of a few intervals is
/// still the same sweep; chosen for that margin, not on the bench (which
/// sweeps at an even rate and measured 2 to 5 alike in moves).
fn default_sweep_settle_intervals() -> u32 {
    4
}

impl Default for FollowConfig {
    fn default() -> Self {
        FollowConfig {
            debounce_ms: default_debounce_ms(),
            hysteresis_hz: default_hysteresis_hz(),
            min_move_steps: default_min_move_steps(),
            inhibit_tail_ms: default_inhibit_tail_ms(),
            inhibit_lead_ms: default_inhibit_lead_ms(),
            candidate_dwell_ms: default_candidate_dwell_ms(),
            inhibit_while_detuned: true,
            jump_hz: default_jump_hz(),
            sweep_settle_intervals: default_sweep_settle_intervals(),
            jump_quiet_ms: default_jump_quiet_ms(),
            tune_for: TuneForConfig::Transmit,
            cover_other_vfo: true,
        }
    }
}

/// `[calibration]`: the map from frequency to motor steps.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationConfig {
    #[serde(default)]
    pub model: ModelKind,
    /// Measured points, inline.
    #[serde(default)]
    pub points: Vec<PointConfig>,
    /// Or a CSV file of points (`hz,steps` header), relative to the config.
    #[serde(default)]
    pub file: Option<PathBuf>,
    /// Polynomial degree for `model = "poly"` (default 2).
    #[serde(default)]
    pub degree: Option<usize>,
    /// Profile in use at start (`None`: the base, points without a profile).
    #[serde(default)]
    pub profile: Option<String>,
    /// The largest leave-one-out prediction error (RMS over a band's
    /// points, in Hz) `tuneward check` accepts. Where `[antenna]` describes
    /// the loop the bound is the loop's 1.5:1 half-window (this key, when
    /// set, can only make it stricter); without it, this key, or by default
    /// twice the band's dead band (the half-window a dead band of a quarter
    /// of the 1.5:1 bandwidth implies).
    #[serde(default)]
    pub max_loo_error_hz: Option<f64>,
}

/// `[[preset]]`: a name and either a frequency (`hz`, tuned through the
/// calibration in use) or a step position (`steps`).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PresetConfig {
    pub name: String,
    #[serde(default)]
    pub hz: Option<u64>,
    #[serde(default)]
    pub steps: Option<i64>,
}

/// `[control]`: the operator's control socket (JSON lines, see
/// protocols/control.md).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ControlConfig {
    /// The Unix socket's path (relative to the config); by default beside
    /// the journal, named after it with `.sock`.
    #[serde(default)]
    pub socket: Option<PathBuf>,
    /// Also listen on TCP at this address; loopback addresses only.
    #[serde(default)]
    pub listen: Option<String>,
}

/// `[mqtt]`: the state on an MQTT broker, and optionally its commands
/// (topics and payloads: protocols/mqtt.md).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MqttConfig {
    /// The broker: `mqtt://HOST:PORT` (or `tcp://`; port 1883 when left
    /// out). No TLS: a broker beyond this machine is reached through a
    /// tunnel or on a trusted network.
    pub url: String,
    /// The topic prefix; by default `tuneward/` and the config file's
    /// name without its extension.
    #[serde(default)]
    pub topic: Option<String>,
    /// The client id; by default `tuneward-` and the config file's name.
    #[serde(default)]
    pub client_id: Option<String>,
    /// Take commands on `<topic>/command` (false by default: the topic is
    /// not even subscribed to).
    #[serde(default)]
    pub commands: bool,
    /// A user name for the broker; with `password_file`.
    #[serde(default)]
    pub username: Option<String>,
    /// A file holding the broker password (its first line).
    #[serde(default)]
    pub password_file: Option<PathBuf>,
}

/// `[swr_watch]`: read the rig's SWR meter during every transmission
/// (`poll` or `proxy` mode with polling, a dialect with an SWR read), keep
/// per over the SWR seen, raise an alarm when it stays above `alarm` for
/// `hold_ms`, and with `action = "inhibit"` (and an inhibit line wired)
/// assert the inhibit, which ends the over.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SwrWatchConfig {
    /// SWR above which the alarm's hold starts.
    #[serde(default = "default_swr_alarm")]
    pub alarm: f64,
    /// How long the SWR must stay above `alarm` before the alarm.
    #[serde(default = "default_swr_hold_ms")]
    pub hold_ms: u64,
    /// `"off"` (the default: no watch), `"log"` (log and show an alarm) or
    /// `"inhibit"` (also assert the inhibit).
    #[serde(default)]
    pub action: SwrActionConfig,
    /// An over's median SWR above the model's prediction by more than this
    /// counts toward drift.
    #[serde(default = "default_drift_margin")]
    pub drift_margin: f64,
    /// Overs running with that excess before drift is reported.
    #[serde(default = "default_drift_overs")]
    pub drift_overs: usize,
}

/// `[swr_watch] action`.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SwrActionConfig {
    #[default]
    Off,
    Log,
    Inhibit,
}

impl Default for SwrWatchConfig {
    fn default() -> Self {
        SwrWatchConfig {
            alarm: default_swr_alarm(),
            hold_ms: default_swr_hold_ms(),
            action: SwrActionConfig::Off,
            drift_margin: default_drift_margin(),
            drift_overs: default_drift_overs(),
        }
    }
}

impl SwrWatchConfig {
    /// Whether the watch runs.
    pub fn on(&self) -> bool {
        self.action != SwrActionConfig::Off
    }
}

/// Common practice, no source: 2:1 is where many rigs begin to fold back
/// their power.
fn default_swr_alarm() -> f64 {
    2.0
}

/// Common practice, no source: long enough that a tuning peak or a
/// keying transient does not cut an over, short enough to spare a loop
/// that arcs.
fn default_swr_hold_ms() -> u64 {
    1000
}

fn default_drift_margin() -> f64 {
    0.3
}

fn default_drift_overs() -> usize {
    3
}

/// `[mqtt] url`, read: the broker's host and port.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MqttBroker {
    pub host: String,
    pub port: u16,
}

/// `[web]`: the live web page (see README, "The web page").
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WebConfig {
    /// Serve the page here, e.g. "127.0.0.1:7720". Off when absent. Beyond
    /// loopback every request needs the station's token (made on first
    /// use, beside the journal with `.token`, mode 0600).
    #[serde(default)]
    pub listen: Option<String>,
    /// Other names the page is reached by (`Host` without the port, e.g.
    /// "shack.local"); requests naming any other host are refused.
    #[serde(default)]
    pub host_names: Vec<String>,
}

/// One measured calibration point: at `hz` the loop was resonant at `steps`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PointConfig {
    pub hz: f64,
    pub steps: f64,
    #[serde(default)]
    pub profile: Option<String>,
    #[serde(default)]
    pub weight: Option<f64>,
}

/// `[[band]]`: a range the tuner follows in.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BandConfig {
    pub name: String,
    pub low_hz: u64,
    pub high_hz: u64,
    /// Just outside the band, within this margin, the tuner is tuned for the
    /// nearest band edge instead of holding.
    #[serde(default)]
    pub guard_hz: u64,
    #[serde(default)]
    pub hysteresis_hz: Option<Hysteresis>,
    #[serde(default)]
    pub debounce_ms: Option<u64>,
}

impl crate::antenna::BandEdges for BandConfig {
    fn name(&self) -> &str {
        &self.name
    }
    fn low_hz(&self) -> u64 {
        self.low_hz
    }
    fn high_hz(&self) -> u64 {
        self.high_hz
    }
}

/// A dead band in Hz, or `"auto"`: a share of the loop's 1.5:1 SWR bandwidth
/// at the band's centre, estimated from `[antenna]`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(untagged)]
pub enum Hysteresis {
    Hz(u64),
    Auto(AutoWord),
    /// Not set in the config: `"auto"` where `[antenna]` describes the loop,
    /// else [`DEFAULT_HYSTERESIS_HZ`]. (A fixed default cannot suit every
    /// loop: `tuneward bench-follow` measured 2000 Hz as too wide for a
    /// high-Q loop on 40 m, where the 1.5:1 window is about 1 kHz.)
    #[serde(skip_deserializing)]
    Unset,
}

/// The dead band when none is set and the loop is not described.
pub const DEFAULT_HYSTERESIS_HZ: u64 = 2_000;

/// The literal word `auto`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum AutoWord {
    Auto,
}

/// `[antenna]` and its conductor: plain descriptions owned by the physics.
pub use crate::antenna::{Conductor, LoopDescription as AntennaConfig};

/// Which output carries the transmit inhibit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum InhibitKind {
    /// No output; the service only logs.
    #[default]
    None,
    /// RTS of the serial device `port`.
    Rts,
    /// DTR of the serial device `port`.
    Dtr,
    /// Line `offset` of GPIO `chip`.
    Gpio,
}

/// `[inhibit]`: the output that keeps the rig from transmitting while the
/// capacitor moves (see `inhibit.rs`).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InhibitConfig {
    #[serde(default)]
    pub line: InhibitKind,
    #[serde(default)]
    pub port: Option<String>,
    #[serde(default)]
    pub chip: Option<String>,
    #[serde(default)]
    pub offset: Option<u32>,
    /// `true`: inhibit on = line asserted (high); `false`: inverted.
    #[serde(default = "default_active_high")]
    pub active_high: bool,
    /// With `line = "none"` and a real tuner, the station states that it
    /// runs with nothing that stops the rig transmitting during a move;
    /// `tuneward check` refuses that choice unless it is written down here.
    #[serde(default)]
    pub unprotected_ok: bool,
    /// The station states that the line keeps the rig itself off the air,
    /// also against a transmission keyed by a CAT command (the rig's own
    /// transmit-inhibit input, not only an amplifier's or the PTT jack's):
    /// a transmit command seen while the line is set then lets a move go
    /// ahead under it. Default `false`.
    #[serde(default)]
    pub holds_cat_keying: bool,
}

fn default_active_high() -> bool {
    true
}

impl Default for InhibitConfig {
    fn default() -> Self {
        InhibitConfig {
            line: InhibitKind::None,
            port: None,
            chip: None,
            offset: None,
            active_high: true,
            unprotected_ok: false,
            holds_cat_keying: false,
        }
    }
}

/// Which input tells tuneward that the rig transmits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SenseKind {
    /// No sense input: only what the rig's port says.
    #[default]
    None,
    /// CTS of the serial device `port`.
    Cts,
    /// DSR of the serial device `port`.
    Dsr,
    /// DCD (carrier detect) of the serial device `port`.
    Dcd,
    /// RI (ring indicator) of the serial device `port`.
    Ri,
    /// Line `offset` of GPIO `chip`, as an input.
    Gpio,
}

impl SenseKind {
    pub fn as_str(self) -> &'static str {
        match self {
            SenseKind::None => "none",
            SenseKind::Cts => "cts",
            SenseKind::Dsr => "dsr",
            SenseKind::Dcd => "dcd",
            SenseKind::Ri => "ri",
            SenseKind::Gpio => "gpio",
        }
    }
}

/// `[transmit_sense]`: an input wired to the rig's transmit ("send",
/// amplifier-key) output. When set, it is the authority for "the rig
/// transmits": any source saying transmit means transmit, and only this
/// line may end a transmission early (see `follow::station`).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SenseConfig {
    #[serde(default)]
    pub line: SenseKind,
    /// Serial device whose modem-status input is read (`cts` … `ri`).
    #[serde(default)]
    pub port: Option<String>,
    /// GPIO chip (`gpio`).
    #[serde(default)]
    pub chip: Option<String>,
    /// Line number on the chip (`gpio`).
    #[serde(default)]
    pub offset: Option<u32>,
    /// `true` (default): the rig transmits while the input is asserted /
    /// high; `false`: while it is released / low.
    #[serde(default = "default_active_high")]
    pub active_high: bool,
}

impl Default for SenseConfig {
    fn default() -> Self {
        SenseConfig {
            line: SenseKind::None,
            port: None,
            chip: None,
            offset: None,
            active_high: true,
        }
    }
}

/// A config error that a person can act on: where, what was expected, what was found.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("cannot read config {path}: {source}")]
    Read {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{path}{location}: {message}")]
    Parse {
        path: PathBuf,
        location: Location,
        message: String,
    },
    /// A value that is not what it should be, at `file: key `k``.
    #[error(transparent)]
    Invalid(Located),
    #[error("{path}: key `calibration`: {source}")]
    Calibration {
        path: PathBuf,
        #[source]
        source: crate::calibrate::CalibrationError,
    },
}

/// Line and column (1-based) inside a file, when known.
#[derive(Debug, Clone, Copy, Default)]
pub struct Location(pub Option<(usize, usize)>);

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.0 {
            Some((line, col)) => write!(f, ":{line}:{col}"),
            None => Ok(()),
        }
    }
}

/// 1-based line and column of a byte offset in `text`.
pub fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = text.get(..offset).unwrap_or(text);
    let line = before.matches('\n').count() + 1;
    let col = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, col)
}

/// The dotted key assigned on `line` (1-based), prefixed by the table it is
/// in: `band.guard_hz`. `None` where the line assigns nothing.
fn key_at_line(text: &str, line: usize) -> Option<String> {
    let lines: Vec<&str> = text.lines().collect();
    let this = lines.get(line.checked_sub(1)?)?;
    let (key, _) = this.split_once('=')?;
    let key = key.trim();
    if key.is_empty() || key.starts_with('#') || key.starts_with('[') {
        return None;
    }
    let table = lines
        .get(..line - 1)?
        .iter()
        .rev()
        .map(|l| l.trim())
        .find(|l| l.starts_with('['))
        .map(|l| l.trim_matches(|c| c == '[' || c == ']').trim().to_string());
    Some(match table {
        Some(t) => format!("{t}.{key}"),
        None => key.to_string(),
    })
}

/// A type name from the TOML reader, in words a station owner reads.
fn plain_type(rust: &str) -> Option<&'static str> {
    Some(match rust {
        "u8" | "u16" | "u32" | "u64" | "usize" => "a whole number, 0 or more",
        "i8" | "i16" | "i32" | "i64" | "isize" => "a whole number",
        "f32" | "f64" => "a number",
        _ => return None,
    })
}

/// Rewrites the TOML reader's `invalid type: <found>, expected <type>` (and
/// `invalid value: …`) as `expected <in words>, found <found>`, the form
/// every other config error has. Other messages pass unchanged.
fn plain_words(message: &str) -> String {
    for lead in ["invalid type: ", "invalid value: "] {
        let Some(rest) = message.strip_prefix(lead) else {
            continue;
        };
        let Some((found, expected)) = rest.rsplit_once(", expected ") else {
            continue;
        };
        let expected = plain_type(expected.trim()).unwrap_or(expected.trim());
        return format!("expected {expected}, found {found}");
    }
    message.to_string()
}

impl Config {
    /// Reads, parses and validates a config file.
    pub fn load(path: &Path) -> Result<Config, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let mut config = Config::parse(&text, path)?;
        config.source = Some(path.to_path_buf());
        config.validate()?;
        Ok(config)
    }

    /// Parses TOML text; `path` is only used to name the file in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Config, ConfigError> {
        toml::from_str::<Config>(text).map_err(|e| {
            let at = e.span().map(|s| line_col(text, s.start));
            let message = plain_words(e.message().trim());
            let message = match at.and_then(|(line, _)| key_at_line(text, line)) {
                Some(key) if !message.contains(&key) => format!("key `{key}`: {message}"),
                _ => message,
            };
            ConfigError::Parse {
                path: path.to_path_buf(),
                location: Location(at),
                message,
            }
        })
    }

    /// The config's file, or `<config>` when it was not read from one:
    /// what every error about it names.
    pub fn path_for_errors(&self) -> PathBuf {
        self.source
            .clone()
            .unwrap_or_else(|| PathBuf::from("<config>"))
    }

    pub(crate) fn invalid(&self, key: &str, expected: &str, found: String) -> ConfigError {
        ConfigError::Invalid(Located::new(
            Place::key(self.path_for_errors(), key),
            expected,
            found,
        ))
    }

    /// Checks what the types cannot.
    pub fn validate(&self) -> Result<(), ConfigError> {
        let t = &self.tuner;
        if t.min_steps >= t.max_steps {
            return Err(self.invalid(
                "tuner.max_steps",
                "a value above tuner.min_steps",
                format!("min_steps = {}, max_steps = {}", t.min_steps, t.max_steps),
            ));
        }
        if !(t.steps_per_second.is_finite() && t.steps_per_second > 0.0) {
            return Err(self.invalid(
                "tuner.steps_per_second",
                "a positive number",
                t.steps_per_second.to_string(),
            ));
        }
        if t.backlash_steps < 0 || t.backlash_steps > (t.max_steps - t.min_steps) / 2 {
            return Err(self.invalid(
                "tuner.backlash_steps",
                "0 up to half the travel",
                t.backlash_steps.to_string(),
            ));
        }
        if let Some(h) = &t.home {
            self.validate_home(h)?;
        }
        self.validate_rig()?;
        if self.swr_watch.on() {
            self.validate_swr_watch(&self.swr_watch)?;
        }
        if self.follow.min_move_steps < 0 {
            return Err(self.invalid(
                "follow.min_move_steps",
                "0 or more",
                self.follow.min_move_steps.to_string(),
            ));
        }
        if self.follow.jump_hz > 0 && self.follow.jump_quiet_ms < MIN_JUMP_QUIET_MS {
            return Err(self.invalid(
                "follow.jump_quiet_ms",
                "at least 50 ms (longer than a knob's report interval) while follow.jump_hz is set",
                self.follow.jump_quiet_ms.to_string(),
            ));
        }
        if self.bands.is_empty() {
            return Err(self.invalid("band", "at least one [[band]] table", "none".to_string()));
        }
        for (i, b) in self.bands.iter().enumerate() {
            let key = format!("band[{i}] ({})", b.name);
            if b.low_hz >= b.high_hz {
                return Err(self.invalid(
                    &format!("{key}.high_hz"),
                    "a value above low_hz",
                    format!("low_hz = {}, high_hz = {}", b.low_hz, b.high_hz),
                ));
            }
            if b.low_hz.saturating_sub(b.guard_hz) < crate::rig::MIN_PLAUSIBLE_HZ
                || b.high_hz.saturating_add(b.guard_hz) > crate::rig::MAX_PLAUSIBLE_HZ
            {
                return Err(self.invalid(
                    &key,
                    "a band with its guard inside 100 kHz to 500 MHz",
                    format!("{} to {} Hz, guard {} Hz", b.low_hz, b.high_hz, b.guard_hz),
                ));
            }
        }
        let mut sorted: Vec<&BandConfig> = self.bands.iter().collect();
        sorted.sort_by_key(|b| b.low_hz);
        for pair in sorted.windows(2) {
            if let [a, b] = pair {
                if a.high_hz.saturating_add(a.guard_hz) >= b.low_hz.saturating_sub(b.guard_hz) {
                    return Err(self.invalid(
                        &format!("band ({} and {})", a.name, b.name),
                        "bands whose ranges and guards do not overlap",
                        format!(
                            "{} ends at {} Hz + guard {}, {} starts at {} Hz - guard {}",
                            a.name, a.high_hz, a.guard_hz, b.name, b.low_hz, b.guard_hz
                        ),
                    ));
                }
            }
        }
        self.calibration_points()?;
        self.validate_presets()?;
        self.control_listen()?;
        self.mqtt_broker()?;
        self.web_listen()?;
        Ok(())
    }

    /// `[[preset]]`: unique names, exactly one of `hz` and `steps`, steps
    /// within the travel limits.
    /// `[swr_watch]`'s own keys, and a rig mode that polls (the meter is
    /// read by a poll; listen mode never writes to the port). Whether the
    /// dialect has an SWR read is the station's to check (it loads it).
    fn validate_swr_watch(&self, w: &SwrWatchConfig) -> Result<(), ConfigError> {
        if !(w.alarm.is_finite() && w.alarm > 1.0) {
            return Err(self.invalid(
                "swr_watch.alarm",
                "an SWR above 1 (e.g. 2.0)",
                w.alarm.to_string(),
            ));
        }
        if w.hold_ms == 0 || w.hold_ms > 60_000 {
            return Err(self.invalid("swr_watch.hold_ms", "1 to 60000 ms", w.hold_ms.to_string()));
        }
        if !(w.drift_margin.is_finite() && w.drift_margin > 0.0) {
            return Err(self.invalid(
                "swr_watch.drift_margin",
                "a positive SWR difference",
                w.drift_margin.to_string(),
            ));
        }
        if w.drift_overs == 0 {
            return Err(self.invalid("swr_watch.drift_overs", "1 or more", "0".into()));
        }
        let polls = match self.rig_use()? {
            RigUse::Listen => false,
            RigUse::Poll { .. } => true,
            RigUse::Proxy { poll_ms, .. } => poll_ms.is_some(),
        };
        if !polls {
            return Err(self.invalid(
                "swr_watch",
                "a rig that is polled (mode = \"poll\", or \"proxy\" with poll_ms): the SWR meter is read by a poll, and listen mode never writes to the port",
                format!("mode = {:?}", self.rig.mode).to_lowercase(),
            ));
        }
        Ok(())
    }

    fn validate_home(&self, h: &HomeConfig) -> Result<(), ConfigError> {
        let t = &self.tuner;
        if !(t.min_steps..=t.max_steps).contains(&h.position) {
            return Err(self.invalid(
                "tuner.home.position",
                &format!("a count within {}..{}", t.min_steps, t.max_steps),
                h.position.to_string(),
            ));
        }
        if h.speed == Some(0) {
            return Err(self.invalid(
                "tuner.home.speed",
                "a positive number of steps/s",
                "0".to_string(),
            ));
        }
        let gpio = t.link.starts_with("gpio://");
        match &h.switch {
            HomeSwitch::Named(n) if n == "controller" && !gpio => Ok(()),
            HomeSwitch::Named(n) if n == "controller" => Err(self.invalid(
                "tuner.home.switch",
                "the GPIO line the switch is on (a number) with a `gpio://` link",
                "\"controller\"".to_string(),
            )),
            HomeSwitch::Named(n) => Err(self.invalid(
                "tuner.home.switch",
                "\"controller\" or a GPIO line number",
                format!("\"{n}\""),
            )),
            HomeSwitch::Line(n) if !gpio => Err(self.invalid(
                "tuner.home.switch",
                "\"controller\" (a line number needs a `gpio://` link)",
                n.to_string(),
            )),
            HomeSwitch::Line(_) => Ok(()),
        }
    }

    fn validate_presets(&self) -> Result<(), ConfigError> {
        let t = &self.tuner;
        for (i, p) in self.presets.iter().enumerate() {
            let key = format!("preset[{i}] ({})", p.name);
            if p.name.trim().is_empty() {
                return Err(self.invalid(
                    &format!("preset[{i}].name"),
                    "a name",
                    "an empty one".into(),
                ));
            }
            if self.presets[..i].iter().any(|q| q.name == p.name) {
                return Err(self.invalid(
                    &key,
                    "a name used by one preset only",
                    format!("`{}` twice", p.name),
                ));
            }
            match (p.hz, p.steps) {
                (Some(_), None) => {}
                (None, Some(steps)) if (t.min_steps..=t.max_steps).contains(&steps) => {}
                (None, Some(steps)) => {
                    return Err(self.invalid(
                        &format!("{key}.steps"),
                        &format!(
                            "a position within tuner.min_steps..=max_steps ({}..={})",
                            t.min_steps, t.max_steps
                        ),
                        steps.to_string(),
                    ))
                }
                (hz, steps) => {
                    return Err(self.invalid(
                        &key,
                        "exactly one of `hz` and `steps`",
                        if hz.is_some() && steps.is_some() {
                            "both"
                        } else {
                            "neither"
                        }
                        .to_string(),
                    ))
                }
            }
        }
        Ok(())
    }

    /// `[control] listen`, parsed; only loopback addresses are taken (the
    /// control socket has no token: beyond loopback anyone could move the
    /// motor).
    pub fn control_listen(&self) -> Result<Option<std::net::SocketAddr>, ConfigError> {
        let Some(text) = &self.control.listen else {
            return Ok(None);
        };
        match text.parse::<std::net::SocketAddr>() {
            Ok(addr) if addr.ip().is_loopback() => Ok(Some(addr)),
            Ok(addr) => Err(self.invalid(
                "control.listen",
                "a loopback address such as \"127.0.0.1:7719\" (the control socket takes no token)",
                addr.to_string(),
            )),
            Err(_) => Err(self.invalid(
                "control.listen",
                "an address and port such as \"127.0.0.1:7719\"",
                format!("\"{text}\""),
            )),
        }
    }

    /// `[mqtt]`, checked: the broker's address, the topic prefix and client
    /// id in force (defaults filled in), and the credentials' keys. A
    /// command topic on a broker beyond loopback needs a user name and
    /// password (the broker's login stands in for the control token).
    pub fn mqtt_broker(&self) -> Result<Option<(MqttBroker, String, String)>, ConfigError> {
        let Some(m) = &self.mqtt else {
            return Ok(None);
        };
        let shown = format!("\"{}\"", m.url);
        let rest = ["mqtt://", "tcp://"]
            .iter()
            .find_map(|scheme| m.url.strip_prefix(scheme))
            .ok_or_else(|| {
                self.invalid(
                    "mqtt.url",
                    "a broker URL such as \"mqtt://127.0.0.1:1883\" (mqtt:// or tcp://; no TLS)",
                    shown.clone(),
                )
            })?;
        let rest = rest.strip_suffix('/').unwrap_or(rest);
        // `[v6]:port`, `host:port`, or either without the port.
        let (host, port) = match rest.strip_prefix('[') {
            Some(v6) => match v6.split_once(']') {
                Some((h, "")) => (h, None),
                Some((h, p)) => (h, Some(p.strip_prefix(':').unwrap_or(p))),
                None => ("", None),
            },
            None => match rest.rsplit_once(':') {
                Some((h, p)) => (h, Some(p)),
                None => (rest, None),
            },
        };
        let port = match port {
            None => 1883,
            Some(p) => match p.parse::<u16>() {
                Ok(port) if port > 0 => port,
                _ => {
                    return Err(self.invalid(
                        "mqtt.url",
                        "a port from 1 to 65535 after the host",
                        shown,
                    ))
                }
            },
        };
        if host.is_empty() || host.contains(['/', '@', '?', '#', ' ']) {
            return Err(self.invalid(
                "mqtt.url",
                "a host name or address after mqtt:// (no user, path or query)",
                shown,
            ));
        }
        let stem = self
            .source
            .as_deref()
            .and_then(Path::file_stem)
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "station".to_string());
        let topic = m
            .topic
            .clone()
            .unwrap_or_else(|| format!("tuneward/{stem}"));
        if topic.is_empty()
            || topic.starts_with('/')
            || topic.ends_with('/')
            || topic.contains(['+', '#', '\0'])
            || topic.len() > 1000
        {
            return Err(self.invalid(
                "mqtt.topic",
                "a topic prefix such as \"tuneward/shack\" (no wildcards, no leading or trailing /)",
                format!("\"{topic}\""),
            ));
        }
        let client_id = m
            .client_id
            .clone()
            .unwrap_or_else(|| format!("tuneward-{stem}"));
        if client_id.is_empty() || client_id.len() > 256 || client_id.contains('\0') {
            return Err(self.invalid(
                "mqtt.client_id",
                "a client id of 1 to 256 bytes",
                format!("\"{client_id}\""),
            ));
        }
        match (&m.username, &m.password_file) {
            (Some(_), Some(_)) | (None, None) => {}
            (Some(_), None) => {
                return Err(self.invalid(
                    "mqtt.password_file",
                    "a password file with `username`",
                    "none".into(),
                ))
            }
            (None, Some(_)) => {
                return Err(self.invalid(
                    "mqtt.username",
                    "a user name with `password_file`",
                    "none".into(),
                ))
            }
        }
        let loopback = host == "localhost"
            || host
                .parse::<std::net::IpAddr>()
                .map(|ip| ip.is_loopback())
                .unwrap_or(false);
        if m.commands && !loopback && m.username.is_none() {
            return Err(self.invalid(
                "mqtt.username",
                "a broker login (`username` and `password_file`) for commands from a broker beyond loopback",
                format!("commands = true on {host} without one"),
            ));
        }
        Ok(Some((
            MqttBroker {
                host: host.to_string(),
                port,
            },
            topic,
            client_id,
        )))
    }

    /// `[web] listen`, parsed (any address; beyond loopback the page
    /// requires the token).
    pub fn web_listen(&self) -> Result<Option<std::net::SocketAddr>, ConfigError> {
        let Some(text) = &self.web.listen else {
            return Ok(None);
        };
        text.parse::<std::net::SocketAddr>().map(Some).map_err(|_| {
            self.invalid(
                "web.listen",
                "an address and port such as \"127.0.0.1:7720\"",
                format!("\"{text}\""),
            )
        })
    }

    /// `[rig]`: the mode and the keys that go with it.
    fn validate_rig(&self) -> Result<(), ConfigError> {
        self.rig_use()?;
        self.check_poll_against_debounce()
    }

    /// A polled report restarts the debounce; a poll interval not shorter
    /// than the debounce it feeds lets every poll of a slow tune settle on
    /// its own, so a 10 s turn of the knob becomes a move per poll. We refuse
    /// that rather than treat an unchanged polled answer as a repeat: the
    /// core would still see a changed answer per poll during the tune, and
    /// the debounce is the one rule that says "the operator has stopped".
    fn check_poll_against_debounce(&self) -> Result<(), ConfigError> {
        let Some(every) = self.rig.poll_every_ms() else {
            return Ok(());
        };
        let mut feeds = vec![("follow.debounce_ms".to_string(), self.follow.debounce_ms)];
        for (i, b) in self.bands.iter().enumerate() {
            if let Some(d) = b.debounce_ms {
                feeds.push((format!("band[{i}] ({}).debounce_ms", b.name), d));
            }
        }
        match feeds.into_iter().min_by_key(|(_, d)| *d) {
            Some((key, debounce)) if every >= debounce => Err(self.invalid(
                "rig.poll_ms",
                &format!(
                    "a poll interval shorter than the debounce it feeds ({key} = {debounce}); otherwise each poll during a slow tune settles and moves on its own"
                ),
                format!(
                    "poll_ms = {every}{}",
                    if self.rig.poll_ms.is_none() { " (the default)" } else { "" }
                ),
            )),
            _ => Ok(()),
        }
    }

    /// How `[rig]` asks for the port to be used, with every rule about
    /// `mode`, `poll_ms` and `proxy_link` checked here and nowhere else;
    /// the proxy's link is resolved against the config's folder.
    pub fn rig_use(&self) -> Result<RigUse, ConfigError> {
        let r = &self.rig;
        if r.poll_ms == Some(0) {
            return Err(self.invalid("rig.poll_ms", "a positive number of ms", "0".into()));
        }
        match (r.mode, &r.proxy_link) {
            (RigMode::Listen, _) if r.poll_ms.is_some() => Err(self.invalid(
                "rig.poll_ms",
                "no poll_ms with mode = \"listen\" (listen never writes to the port; use mode = \"poll\")",
                format!("poll_ms = {}", r.poll_ms.unwrap_or(0)),
            )),
            (RigMode::Listen | RigMode::Poll, Some(_)) => Err(self.invalid(
                "rig.proxy_link",
                "proxy_link only with mode = \"proxy\"",
                format!("mode = {:?}", r.mode).to_lowercase(),
            )),
            (RigMode::Proxy, None) => Err(self.invalid(
                "rig.proxy_link",
                "the path where the shared pseudo-terminal's symlink goes (mode = \"proxy\")",
                "none".into(),
            )),
            (RigMode::Listen, None) => Ok(RigUse::Listen),
            (RigMode::Poll, None) => Ok(RigUse::Poll {
                every_ms: r.poll_ms.unwrap_or(DEFAULT_POLL_MS),
            }),
            (RigMode::Proxy, Some(link)) => Ok(RigUse::Proxy {
                link: self.resolve_path(link),
                poll_ms: r.poll_ms,
            }),
        }
    }

    /// The config's folder, against which every relative path in it is
    /// read; `None` for a config not read from a file (the working folder).
    pub fn folder(&self) -> Option<&Path> {
        self.source.as_deref().and_then(Path::parent)
    }

    /// A path the config names, resolved against the config's folder (an
    /// absolute path, or a config not read from a file, leaves it as it is).
    /// The one place relative paths in a config are resolved.
    pub fn resolve_path(&self, path: &Path) -> PathBuf {
        match self.folder() {
            Some(dir) if path.is_relative() => dir.join(path),
            _ => path.to_path_buf(),
        }
    }

    /// The points file `[calibration] file` names, resolved against the
    /// config's folder; `None` with inline points.
    pub fn calibration_file(&self) -> Option<PathBuf> {
        let file = self.calibration.file.as_ref()?;
        Some(self.resolve_path(file))
    }

    /// The calibration points, inline or from the file named in the config.
    pub fn calibration_points(&self) -> Result<Vec<Point>, ConfigError> {
        let c = &self.calibration;
        match (&c.file, c.points.is_empty()) {
            (Some(_), false) => Err(self.invalid(
                "calibration",
                "either `points` or `file`, not both",
                "both".to_string(),
            )),
            (None, true) => Err(self.invalid(
                "calibration.points",
                "at least two measured points (or `file`)",
                "none".to_string(),
            )),
            (None, false) => Ok(c
                .points
                .iter()
                .map(|p| {
                    Point::new(p.hz, p.steps)
                        .with_profile(p.profile.as_deref())
                        .with_weight(p.weight.unwrap_or(1.0))
                })
                .collect()),
            (Some(file), true) => {
                let path = self.calibration_file().unwrap_or_else(|| file.clone());
                crate::calibrate::read_points_csv(&path).map_err(|source| {
                    ConfigError::Calibration {
                        path: self.path_for_errors(),
                        source,
                    }
                })
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = r#"
[calibration]
model = "interpolate"
points = [{ hz = 7000000, steps = 4000 }, { hz = 7300000, steps = 3600 }]

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7300000
guard_hz = 10000
"#;

    #[test]
    fn a_home_switch_is_read_and_checked_with_the_key_named() {
        let with = |home: &str, link: &str| {
            let text = format!("{MINIMAL}\n[tuner]\nlink = \"{link}\"\nhome = {home}\n");
            Config::parse(&text, Path::new("s.toml")).and_then(|c| c.validate().map(|()| c))
        };
        let c = with(
            r#"{ switch = "controller", side = "high", position = 10000 }"#,
            "tcp://127.0.0.1:7300",
        )
        .unwrap();
        let h = c.tuner.home.unwrap();
        assert_eq!(h.side, HomeSideConfig::High);
        assert_eq!((h.position, h.speed), (10_000, None));
        for (home, link, key, found) in [
            (
                r#"{ switch = "controller", side = "low", position = -1 }"#,
                "sim",
                "tuner.home.position",
                "-1",
            ),
            (
                r#"{ switch = "controller", side = "low", position = 0, speed = 0 }"#,
                "sim",
                "tuner.home.speed",
                "0",
            ),
            (
                r#"{ switch = "relay", side = "low", position = 0 }"#,
                "sim",
                "tuner.home.switch",
                "relay",
            ),
            (
                r#"{ switch = 22, side = "low", position = 0 }"#,
                "tcp://127.0.0.1:1",
                "tuner.home.switch",
                "22",
            ),
            (
                r#"{ switch = "controller", side = "low", position = 0 }"#,
                "gpio://gpiochip0?step=1&dir=2",
                "tuner.home.switch",
                "controller",
            ),
        ] {
            let msg = with(home, link).unwrap_err().to_string();
            assert!(msg.contains(key) && msg.contains(found), "{home}: {msg}");
            assert!(msg.contains("expected"), "{msg}");
        }
        let msg = with(
            r#"{ switch = "controller", side = "up", position = 0 }"#,
            "sim",
        )
        .unwrap_err()
        .to_string();
        assert!(msg.contains("up"), "{msg}");
        // The direct drive reads its home switch on a line of its chip.
        let c = with(
            r#"{ switch = 22, side = "low", position = 0 }"#,
            "gpio://gpiochip0?step=1&dir=2",
        )
        .unwrap();
        assert_eq!(c.tuner.home.map(|h| h.switch), Some(HomeSwitch::Line(22)));
    }

    #[test]
    fn minimal_config_gets_defaults() {
        let c = Config::parse(MINIMAL, Path::new("t.toml")).unwrap();
        c.validate().unwrap();
        assert_eq!(c.rig.protocol, "binary-bcd");
        assert_eq!(c.tuner.link, "sim");
        assert_eq!(c.follow.debounce_ms, 400);
        assert_eq!(c.bands.len(), 1);
    }

    #[test]
    fn unknown_key_is_named_with_line_and_column() {
        let text = format!("{MINIMAL}\n[follow]\ndebounse_ms = 5\n");
        let err = Config::parse(&text, Path::new("station.toml")).unwrap_err();
        let msg = err.to_string();
        assert!(msg.starts_with("station.toml:"), "{msg}");
        assert!(msg.contains("debounse_ms"), "{msg}");
        let line = text
            .lines()
            .position(|l| l.starts_with("debounse"))
            .unwrap()
            + 1;
        assert!(msg.contains(&format!(":{line}:")), "{msg}");
    }

    #[test]
    fn wrong_type_names_the_key() {
        let text = MINIMAL.replace("guard_hz = 10000", "guard_hz = \"wide\"");
        let msg = Config::parse(&text, Path::new("s.toml"))
            .unwrap_err()
            .to_string();
        assert!(msg.contains("key `band.guard_hz`"), "{msg}");
        assert!(msg.contains("\"wide\""), "{msg}");
    }

    #[test]
    fn a_poll_not_shorter_than_the_debounce_it_feeds_is_refused() {
        let check = |extra: &str| {
            let text = format!("{MINIMAL}\n{extra}");
            Config::parse(&text, Path::new("s.toml"))
                .and_then(|c| c.validate())
                .map_err(|e| e.to_string())
        };
        // The defaults pass: poll below the debounce.
        assert!(DEFAULT_POLL_MS < default_debounce_ms());
        check("[rig]\nmode = \"poll\"\n").unwrap();
        let e = check("[rig]\nmode = \"poll\"\npoll_ms = 400\n").unwrap_err();
        assert!(
            e.contains("rig.poll_ms") && e.contains("follow.debounce_ms = 400"),
            "{e}"
        );
        // The shortest debounce counts, a band's own included.
        let e = check("[rig]\nmode = \"poll\"\n[follow]\ndebounce_ms = 200\n").unwrap_err();
        assert!(e.contains("poll_ms = 250 (the default)"), "{e}");
        let banded = MINIMAL.replace("guard_hz = 10000", "guard_hz = 10000\ndebounce_ms = 300");
        let c = Config::parse(
            &format!("{banded}\n[rig]\nmode = \"poll\"\npoll_ms = 300\n"),
            Path::new("s.toml"),
        )
        .unwrap();
        let e = c.validate().unwrap_err().to_string();
        assert!(e.contains(").debounce_ms = 300"), "{e}");
        // Listen and unpolled proxy feed nothing by polling.
        check("[follow]\ndebounce_ms = 100\n").unwrap();
    }

    #[test]
    fn inverted_limits_are_refused() {
        let text = format!("{MINIMAL}\n[tuner]\nmin_steps = 500\nmax_steps = 100\n");
        let c = Config::parse(&text, Path::new("s.toml")).unwrap();
        let msg = c.validate().unwrap_err().to_string();
        assert!(msg.contains("tuner.max_steps"), "{msg}");
        assert!(msg.contains("min_steps = 500"), "{msg}");
    }

    #[test]
    fn overlapping_bands_are_refused() {
        let text =
            format!("{MINIMAL}\n[[band]]\nname = \"x\"\nlow_hz = 7290000\nhigh_hz = 7400000\n");
        let c = Config::parse(&text, Path::new("s.toml")).unwrap();
        let msg = c.validate().unwrap_err().to_string();
        assert!(msg.contains("40m and x"), "{msg}");
    }

    #[test]
    fn rig_mode_and_its_keys_are_checked_by_name() {
        let parse = |rig: &str| {
            let c = Config::parse(&format!("[rig]\n{rig}\n{MINIMAL}"), Path::new("s.toml"))?;
            c.validate().map(|()| c)
        };
        let c = parse("").unwrap();
        assert_eq!(c.rig.mode, RigMode::Listen);
        assert_eq!(c.rig.poll_every_ms(), None);
        let c = parse("mode = \"poll\"").unwrap();
        assert_eq!(c.rig.poll_every_ms(), Some(DEFAULT_POLL_MS));
        let c = parse("mode = \"proxy\"\nproxy_link = \"x\"\npoll_ms = 80").unwrap();
        assert_eq!(c.rig.poll_every_ms(), Some(80));
        let c = parse("mode = \"proxy\"\nproxy_link = \"x\"").unwrap();
        assert_eq!(c.rig.poll_every_ms(), None);
        for (rig, key) in [
            ("poll_ms = 100", "rig.poll_ms"),
            ("mode = \"poll\"\npoll_ms = 0", "rig.poll_ms"),
            ("mode = \"proxy\"", "rig.proxy_link"),
            ("proxy_link = \"x\"", "rig.proxy_link"),
            ("mode = \"shout\"", "rig.mode"),
            ("share_as = \"x\"", "share_as"),
        ] {
            let msg = parse(rig).unwrap_err().to_string();
            assert!(msg.contains(key), "{rig}: {msg}");
        }
    }

    #[test]
    fn jump_settings_default_and_a_quiet_time_too_short_for_a_knob_is_refused() {
        let c = Config::parse(MINIMAL, Path::new("t.toml")).unwrap();
        assert_eq!((c.follow.jump_hz, c.follow.jump_quiet_ms), (3_000, 300));
        assert!(c.follow.cover_other_vfo);
        let off = format!("{MINIMAL}\n[follow]\ncover_other_vfo = false\n");
        let off = Config::parse(&off, Path::new("o.toml")).unwrap();
        assert!(!off.follow.cover_other_vfo);
        let policy = crate::station::policy_from_config(&off, |_| None).unwrap();
        assert!(!policy.cover_alternate);
        let text = format!("{MINIMAL}\n[follow]\njump_quiet_ms = 20\n");
        let c = Config::parse(&text, Path::new("s.toml")).unwrap();
        let msg = c.validate().unwrap_err().to_string();
        assert!(msg.contains("follow.jump_quiet_ms"), "{msg}");
        assert!(
            msg.contains("at least 50 ms") && msg.contains("20"),
            "{msg}"
        );
        // With jumps off, the quiet time is not used and not checked.
        let text = format!("{MINIMAL}\n[follow]\njump_hz = 0\njump_quiet_ms = 20\n");
        let c = Config::parse(&text, Path::new("s.toml")).unwrap();
        c.validate().unwrap();
    }

    #[test]
    fn line_col_counts_from_one() {
        assert_eq!(line_col("ab\ncd", 0), (1, 1));
        assert_eq!(line_col("ab\ncd", 4), (2, 2));
        assert_eq!(line_col("ab", 99), (1, 3));
    }

    fn mqtt(table: &str) -> Result<Option<(MqttBroker, String, String)>, ConfigError> {
        let text = format!("{MINIMAL}\n[mqtt]\n{table}\n");
        let mut c = Config::parse(&text, Path::new("/etc/tuneward/shack.toml"))?;
        c.source = Some("/etc/tuneward/shack.toml".into());
        c.mqtt_broker()
    }

    #[test]
    fn mqtt_defaults_follow_the_config_file_name() {
        let (broker, topic, id) = mqtt(r#"url = "mqtt://127.0.0.1""#).unwrap().unwrap();
        assert_eq!(
            broker,
            MqttBroker {
                host: "127.0.0.1".into(),
                port: 1883
            }
        );
        assert_eq!(topic, "tuneward/shack");
        assert_eq!(id, "tuneward-shack");
        let (broker, _, _) = mqtt(r#"url = "tcp://[::1]:1884/""#).unwrap().unwrap();
        assert_eq!((broker.host.as_str(), broker.port), ("::1", 1884));
        let c = Config::parse(MINIMAL, Path::new("t.toml")).unwrap();
        assert!(c.mqtt_broker().unwrap().is_none());
    }

    #[test]
    fn bad_mqtt_tables_are_refused_with_the_key() {
        for (table, key, words) in [
            (r#"url = "mqtts://broker:8883""#, "mqtt.url", "no TLS"),
            (r#"url = "127.0.0.1:1883""#, "mqtt.url", "mqtt://"),
            (r#"url = "mqtt://broker:0""#, "mqtt.url", "port"),
            (r#"url = "mqtt://broker:http""#, "mqtt.url", "port"),
            (r#"url = "mqtt://user@broker""#, "mqtt.url", "no user"),
            (r#"url = "mqtt://""#, "mqtt.url", "host"),
            (
                "url = \"mqtt://b\"\ntopic = \"tuneward/#\"",
                "mqtt.topic",
                "wildcards",
            ),
            (
                "url = \"mqtt://b\"\ntopic = \"tuneward/\"",
                "mqtt.topic",
                "trailing",
            ),
            (
                "url = \"mqtt://b\"\nclient_id = \"\"",
                "mqtt.client_id",
                "1 to 256",
            ),
            (
                "url = \"mqtt://b\"\nusername = \"u\"",
                "mqtt.password_file",
                "password file",
            ),
            (
                "url = \"mqtt://192.0.2.7\"\ncommands = true",
                "mqtt.username",
                "broker login",
            ),
        ] {
            let msg = mqtt(table).unwrap_err().to_string();
            assert!(msg.contains(key), "{table}: {msg}");
            assert!(msg.contains(words), "{table}: {msg}");
            assert!(msg.contains("shack.toml"), "{table}: {msg}");
        }
        // Commands from a loopback broker need no login; beyond it, with one.
        assert!(mqtt("url = \"mqtt://localhost\"\ncommands = true").is_ok());
        assert!(mqtt(
            "url = \"mqtt://192.0.2.7\"\ncommands = true\nusername = \"u\"\npassword_file = \"p\""
        )
        .is_ok());
    }
}
