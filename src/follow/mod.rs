//! The follow core: a pure, synchronous state machine that owns every
//! decision about moving the tuner.
//!
//! It does no IO and never reads a clock. A driver hands it events through
//! the `handle_*` methods, each with the current time `now` (a [`Duration`]
//! since the driver's own origin, virtual or real), then drains
//! [`Follower::poll_action`] and carries the actions out, and asks
//! [`Follower::poll_timeout`] when it next needs to call
//! [`Follower::handle_timeout`]. The replay, the demo, the tests and the live
//! service all drive this same type; only the driver differs.
//!
//! The safety rules live here, below every driver, so that nothing that asks
//! for a move can get around them:
//! - no target outside `min_steps..=max_steps` is ever issued (clamped, and
//!   reported as a hold with reason `limit`);
//! - no move starts while the rig reports transmit (deferred, reason
//!   `transmitting`) or while its port is down (`rig-silent`); either during
//!   a move stops the motor;
//! - the inhibit is asserted before the first step of every move (and
//!   `inhibit_lead` ahead of it) and released only `inhibit_tail` after the
//!   final arrival;
//! - while the position is unknown nothing moves and the inhibit stays on.

pub mod command;
pub mod effects;
pub mod peak;
pub mod policy;
pub mod quiet;
pub mod session;
pub mod station;
pub mod sweep;
pub mod swr_watch;

use std::collections::VecDeque;
use std::fmt;
use std::sync::Arc;
use std::time::Duration;

use crate::antenna::SmallLoop;
use crate::calibrate::swr_curve::swr_curve;
pub use crate::calibrate::swr_curve::{SwrCurve, SwrPoint};
use crate::calibrate::StepMap;
pub use command::{
    Calibrations, Command, Preset, PresetGoal, Refusal, Reply, Status, Wait, BASE_PROFILE,
};
pub use effects::{apply, Effects};
pub use policy::{Approach, Band, Jump, Legs, Placement, Policy, WhileUnknown};
pub use station::{
    Source, Station, StationEvent, TransmitKnowledge, TransmitState, TuneFor, Vfo, Which,
};

/// How long a frequency set seen going to the rig (another program's)
/// waits before it settles: such a set is often followed at once by the
/// program keying the rig (a band-map click, then a call), and the proxy
/// forwards those bytes to the rig before the core has seen them, so a
/// move started at the set could be under way when the rig keys. Common
/// practice for logging programs, no source; the sets of one burst (VFO A,
/// VFO B, split) settle once, on where they end. Shorter where the line
/// holds that keying off (`Follower::set_grace`).
pub const SET_GRACE: Duration = Duration::from_millis(100);

/// A command another program sent to the rig, as far as following goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum SeenCommand {
    /// A VFO's frequency set.
    Set,
    /// A VFO select, a transmit VFO, split on or off, the A/B toggle: which
    /// VFO counts changes, not a frequency.
    Vfo,
}

/// Whether `ev` is a command seen going to the rig about its frequencies
/// or VFOs, and which kind.
fn command_seen(ev: &StationEvent) -> Option<SeenCommand> {
    match ev {
        StationEvent::Frequency {
            source: Source::CommandSeen,
            ..
        } => Some(SeenCommand::Set),
        StationEvent::ReceiveVfo {
            source: Source::CommandSeen,
            ..
        }
        | StationEvent::TransmitVfo {
            source: Source::CommandSeen,
            ..
        }
        | StationEvent::Split {
            source: Source::CommandSeen,
            ..
        }
        | StationEvent::ToggleVfo {
            source: Source::CommandSeen,
        } => Some(SeenCommand::Vfo),
        _ => None,
    }
}

/// Why the core decided not to move (or not to move as asked).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum HoldReason {
    /// Within the dead band of the frequency the tuner is tuned for, or a
    /// move smaller than `min_move_steps`.
    DeadBand,
    /// Outside every band and guard margin.
    OutOfBand,
    /// The rig is transmitting; the move waits for receive.
    Transmitting,
    /// The target lay beyond the travel limits and was clamped.
    Limit,
    /// Where the capacitor is, is not known; nothing moves until it is.
    PositionUnknown,
    /// The controller link is down or misbehaved.
    Fault,
    /// The operator paused following.
    Paused,
    /// The calibration gave no usable position for this frequency.
    Calibration,
    /// The rig's port is down: a transmission could start unheard, so the
    /// move waits for the port to come back.
    RigSilent,
    /// Nothing says whether the rig transmits, no inhibit line is wired and
    /// the station has not written down that moves may go ahead unprotected.
    TransmitUnknown,
    /// The rig transmits split on a VFO whose frequency nothing has told
    /// (the block family cannot read the other VFO without switching the
    /// operator's): held, inhibit asserted, rather than tuned for a guess,
    /// until split is off or that VFO's frequency is known.
    TransmitVfoUnknown,
}

impl HoldReason {
    pub fn as_str(self) -> &'static str {
        match self {
            HoldReason::DeadBand => "dead-band",
            HoldReason::OutOfBand => "out-of-band",
            HoldReason::Transmitting => "transmitting",
            HoldReason::Limit => "limit",
            HoldReason::PositionUnknown => "position-unknown",
            HoldReason::Fault => "fault",
            HoldReason::Paused => "paused",
            HoldReason::Calibration => "calibration",
            HoldReason::RigSilent => "rig-silent",
            HoldReason::TransmitUnknown => "transmit-unknown",
            HoldReason::TransmitVfoUnknown => "transmit-vfo-unknown",
        }
    }

    /// The reason in words, for the operator.
    pub fn words(self) -> &'static str {
        match self {
            HoldReason::DeadBand => "already tuned close enough",
            HoldReason::OutOfBand => "outside every followed band",
            HoldReason::Transmitting => "the rig is transmitting; waiting for receive",
            HoldReason::Limit => "the target lies beyond the travel limits",
            HoldReason::PositionUnknown => "the capacitor's position is not known",
            HoldReason::Fault => "the controller link is in fault",
            HoldReason::Paused => "following is paused",
            HoldReason::Calibration => "the calibration gives no position here",
            HoldReason::RigSilent => "the rig's port is silent",
            HoldReason::TransmitUnknown => {
                "nothing says whether the rig transmits, and no inhibit protects a move"
            }
            HoldReason::TransmitVfoUnknown => {
                "split to a VFO whose frequency nothing has told; held rather than guessed"
            }
        }
    }
}

impl fmt::Display for HoldReason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// What the core asks its driver to do, in order.
#[derive(Debug, Clone, PartialEq)]
pub enum Action {
    /// The operator has settled on `hz` (it stayed the latest report for the
    /// debounce time): a decision follows.
    Settled { hz: u64 },
    /// Set the transmit-inhibit output.
    Inhibit { on: bool },
    /// A decision not to move (or a clamped one), for the log.
    Hold { hz: u64, reason: HoldReason },
    /// A repositioning begins: from `from` to the final position `to`, for
    /// the settled frequency `hz`, tuning the loop for `tune_hz` (the same,
    /// or the nearest band edge from a guard margin). Record the intent
    /// before the first leg.
    Move {
        from: i64,
        to: i64,
        hz: u64,
        tune_hz: u64,
    },
    /// Command the controller to go to `steps` (one leg of a move).
    Goto { steps: i64 },
    /// Command the controller to stop where it is.
    Stop,
    /// The operator touched the tuning up by hand at `hz` and stayed, or a
    /// noise-peak search found a clear peak there (`fit`: the fitted
    /// resonance curve): a candidate calibration point.
    Candidate {
        hz: u64,
        steps: i64,
        profile: Option<String>,
        fit: Option<crate::calibrate::resonance::ResonanceFit>,
    },
    /// A noise-peak search began at `hz`, reading `positions` positions
    /// from `low` to `high` steps (its first pass).
    PeakStarted {
        hz: u64,
        low: i64,
        high: i64,
        positions: usize,
    },
    /// A noise-peak search ended (the candidate, if any, came first).
    PeakEnded { outcome: peak::PeakOutcome },
    /// Set the rig's `vfo` (the one it receives on) to `hz`: a calibration
    /// sweep's point, or the operator's frequency given back. Only a sweep
    /// the operator consented to asks for it.
    SetRigFrequency { vfo: Vfo, hz: u64 },
    /// A calibration sweep of `band` began; it searches `points`.
    SweepStarted { band: String, points: Vec<u64> },
    /// A calibration sweep ended (its candidates came before).
    SweepEnded { outcome: sweep::SweepOutcome },
}

/// A noise-peak search under way: the core hands its moves to the same
/// `try_start` as every other and its meter reads to the driver.
#[derive(Debug)]
struct PeakRun {
    search: peak::PeakSearch,
    /// The receive frequency it is for.
    hz: u64,
    /// The profile its candidate is for.
    profile: Option<String>,
    /// What the loop was tuned for when it began (it returns there).
    tuned_before: Option<u64>,
    waiting: PeakWait,
    /// While a reading is awaited: when the search gives up on the meter.
    meter_due: Option<Duration>,
}

/// How long a search waits for a signal-meter reading before it ends
/// (the rig stopped answering its meter read, say): it returns to where
/// it began rather than hold the inhibit for ever. Several poll intervals
/// at any sensible rate; common practice, no source.
pub const PEAK_METER_WAIT: Duration = Duration::from_secs(5);

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum PeakWait {
    /// A move it asked for.
    Arrival,
    /// A meter reading; `fresh`: the first after an arrival was dropped
    /// (a read the poll sent before the motor came to rest).
    Meter { fresh: bool },
}

/// A target the core wants to reach.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Target {
    /// The settled frequency that asked for it (reported in `Move`).
    hz: u64,
    /// The frequency the tuner is tuned for there (a band edge in a guard).
    tune_hz: u64,
    steps: i64,
    /// Asked by the operator (a command), not by a settled frequency: it
    /// goes while following is paused, but not once the core is closing.
    manual: bool,
    /// Reaching it tunes the loop for `tune_hz` (not so for an operator
    /// move while the loop was tuned for nothing known).
    retunes: bool,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Motion {
    Idle,
    /// Inhibit asserted, waiting `inhibit_lead` before the first step.
    Arming {
        until: Duration,
    },
    /// A leg is under way; `then` is the final leg still to come, if any.
    Moving {
        then: Option<i64>,
        target: Target,
    },
    /// A `Stop` was sent; waiting for the controller to say where it stopped.
    Stopping,
}

#[derive(Debug, Clone, Copy)]
struct Pending {
    hz: u64,
    deadline: Duration,
}

#[derive(Debug, Clone, Copy)]
struct Touchup {
    hz: u64,
    due: Option<Duration>,
}

/// Counters for a summary.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Stats {
    pub moves: u64,
    pub steps: u64,
    pub holds: u64,
    /// Reports taken for jumps and acted on without the debounce.
    pub jumps: u64,
}

/// The follow core. See the module documentation.
pub struct Follower {
    policy: Policy,
    map: Arc<dyn StepMap>,
    profile: Option<String>,
    /// What the rig is doing: VFOs, split, the transmit state.
    station: Station,
    /// The inhibit is held until the loop is known to be tuned for the
    /// rig's frequency (at start, after a fault, after a rig-port
    /// reconnect), with `policy.inhibit_until_tuned`.
    untuned: bool,
    /// The rig's port is down (see [`Follower::handle_rig_link`]).
    rig_silent: bool,
    paused: bool,
    /// Shutting down: nothing new moves, not even for the operator.
    closing: bool,
    fault: bool,
    /// The move a fault interrupted (its target steps) and how many faults
    /// in a row have interrupted a move to that target: a recovery decides
    /// the settled frequency again, but a target faulted twice in a row
    /// (a controller that refuses it, an end stop before it) waits for a
    /// new frequency instead of being asked for again and again.
    faulted: Option<(i64, u32)>,
    pending: Option<Pending>,
    settled_hz: Option<u64>,
    position: Option<i64>,
    tuned_hz: Option<u64>,
    want: Option<Target>,
    motion: Motion,
    inhibit: bool,
    /// When the inhibit was last asserted: a move waits `inhibit_lead`
    /// from then, however the inhibit came to be on.
    inhibit_since: Duration,
    /// When the driver confirmed that the inhibit line is set
    /// ([`Follower::handle_inhibit_set`]), while the core keeps it on:
    /// `None` until confirmed, and again once released or after a fault.
    line_set_at: Option<Duration>,
    /// The transmit state is "transmit" only by a command seen going to
    /// the rig while the wired inhibit line was set and its lead had
    /// passed: the rig cannot be on the air, so the core takes it as
    /// unknown (moves go ahead under the line) until the line is released,
    /// when the command's transmission is in force (see
    /// [`Follower::transmit_state`]).
    command_held_off: bool,
    release_at: Option<Duration>,
    /// The running tail (`release_at`) follows a move's arrival (not the
    /// first report of a position).
    tail_after_move: bool,
    /// The inhibit is held for a detuned report that has not settled yet.
    detune_hold: bool,
    /// The SWR watch's alarm holds the inhibit (`[swr_watch] action =
    /// "inhibit"`) until the over it ended is over: no release meanwhile.
    swr_hold: bool,
    /// A release the SWR hold kept back: given when the hold ends.
    release_after_swr_hold: bool,
    touchup: Option<Touchup>,
    /// The last frequency reported that differed from the one before it,
    /// and when it came: what a jump is told from.
    last_report: Option<(u64, Duration)>,
    /// The gap between the last two different reports, while they came
    /// closer together than the debounce (a knob sweep's report interval);
    /// `None` after a quiet spell.
    sweep_gap: Option<Duration>,
    /// The last hold reported, so that a repeated identical decision is
    /// logged once, not on every report.
    last_hold: Option<(u64, HoldReason)>,
    actions: VecDeque<Action>,
    stats: Stats,
    presets: Vec<Preset>,
    calibrations: Calibrations,
    /// The loop's physics (`[antenna]`), for the status's SWR estimate
    /// and the noise-peak search's window.
    small_loop: Option<SmallLoop>,
    /// A noise-peak search under way.
    peak: Option<PeakRun>,
    /// The calibration changed while the motor moved for a target of the
    /// old one: decide the settled frequency again once at rest.
    recheck: bool,
    /// How the last one ended, in words (for the status).
    last_peak: Option<String>,
    /// A calibration sweep under way (see [`sweep`]).
    sweep: Option<sweep::SweepRun>,
    /// How the last sweep ended, in words.
    last_sweep: Option<String>,
}

/// How many samples the status's SWR curve has (odd: one at resonance).
pub const SWR_CURVE_POINTS: usize = 41;

/// Where to start looking for the resonance when no frequency is known:
/// the middle of the band of `hz`, or of the first band.
fn band_guess(policy: &Policy, hz: Option<u64>) -> Option<f64> {
    let band = hz
        .and_then(|hz| {
            policy
                .bands
                .iter()
                .find(|b| (b.low_hz..=b.high_hz).contains(&hz))
        })
        .or(policy.bands.first());
    band.map(|b| (b.low_hz as f64 + b.high_hz as f64) / 2.0)
}

impl fmt::Debug for Follower {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Follower")
            .field("position", &self.position)
            .field("tuned_hz", &self.tuned_hz)
            .field("motion", &self.motion)
            .field("inhibit", &self.inhibit)
            .field("transmit", &self.station.transmit().state)
            .finish_non_exhaustive()
    }
}

impl Follower {
    /// A core for `policy` with calibration `map`. `position` is where the
    /// motor is, if known; if it is not, the inhibit is asserted at once and
    /// nothing moves until [`Follower::handle_arrived`] reports a position.
    pub fn new(policy: Policy, map: Arc<dyn StepMap>, position: Option<i64>) -> Self {
        let mut f = Follower {
            policy,
            map,
            profile: None,
            station: Station::new(false),
            untuned: false,
            rig_silent: false,
            paused: false,
            closing: false,
            fault: false,
            faulted: None,
            pending: None,
            settled_hz: None,
            position,
            tuned_hz: None,
            want: None,
            motion: Motion::Idle,
            inhibit: false,
            inhibit_since: Duration::ZERO,
            line_set_at: None,
            command_held_off: false,
            release_at: None,
            tail_after_move: false,
            detune_hold: false,
            swr_hold: false,
            release_after_swr_hold: false,
            touchup: None,
            last_report: None,
            sweep_gap: None,
            last_hold: None,
            actions: VecDeque::new(),
            stats: Stats::default(),
            presets: Vec::new(),
            calibrations: Calibrations::default(),
            small_loop: None,
            peak: None,
            last_peak: None,
            recheck: false,
            sweep: None,
            last_sweep: None,
        };
        if position.is_none() {
            f.set_inhibit(true);
        }
        if f.policy.inhibit_until_tuned {
            f.untuned = true;
            f.set_inhibit(true);
        }
        f
    }

    /// A hardware transmit-sense line will report (it is the authority for
    /// "the rig transmits"). Call before the first event.
    pub fn expect_sense_line(&mut self) {
        self.station = Station::new(true);
    }

    // ----- events in -------------------------------------------------------

    /// The rig reported its (receive VFO's) frequency. A report that is
    /// part of a sweep waits for the debounce; a jump (see [`Jump`]) is
    /// acted on at once.
    pub fn handle_frequency(&mut self, now: Duration, hz: u64) {
        self.handle_station(
            now,
            StationEvent::Frequency {
                which: Which::Receive,
                hz,
                source: Source::RigReport,
            },
        );
    }

    /// A frequency known to be where the operator is going, not a step of a
    /// sweep: a frequency set seen going to the rig from another program, or
    /// an operator's command. Acted on at once, under the same rules as a
    /// settled report (bands, dead band, limits, transmit deferral, inhibit).
    pub fn handle_frequency_set(&mut self, now: Duration, hz: u64) {
        self.station.apply(
            now,
            StationEvent::Frequency {
                which: Which::Receive,
                hz,
                source: Source::CommandSeen,
            },
        );
        if let Some(hz) = self.station.tune_hz(self.policy.tune_for) {
            self.note_report(now, hz);
            self.report(now, hz, Some(now));
        }
        self.handle_timeout(now);
    }

    /// Something was learnt about the station: a VFO's frequency, the VFO
    /// selection, split, XIT/RIT, the transmit state, from any source. The
    /// loop follows the frequency `policy.tune_for` names (the transmit
    /// frequency by default), so a change of the other one moves nothing.
    /// A set seen going to the rig that changes that frequency settles
    /// `Follower::set_grace` later, and a split or VFO select seen going to
    /// the rig that changes it to a VFO whose frequency is known settles
    /// [`SET_GRACE`] later (the rest of a program's burst may follow);
    /// either never later than a report's debounce. A report settles after
    /// the debounce unless it is a jump.
    ///
    /// A transmit command seen going to the rig while the wired inhibit
    /// line is set (confirmed, and its lead passed) is held off by the
    /// line: see [`Follower::transmit_state`].
    pub fn handle_station(&mut self, now: Duration, ev: StationEvent) {
        let before = self.station.tune_hz(self.policy.tune_for);
        let state_before = self.transmit_state();
        let held_before = self.command_held_off;
        self.station.apply(now, ev);
        self.command_held_off = match ev {
            StationEvent::Transmit {
                on: true,
                source: Source::CommandSeen,
            } => {
                // Only a command that found the rig not already on the air
                // (a report, a poll answer or the line said so) is held off.
                (state_before != TransmitState::Transmit || held_before)
                    && self.station.transmit().state == TransmitState::Transmit
                    && self.station.transmit().source == Some(Source::CommandSeen)
                    && self.line_holds_off(now)
            }
            // Any other word on the transmit state is what holds now.
            StationEvent::Transmit { .. } | StationEvent::TransmitUnknown => false,
            _ => self.command_held_off,
        };
        if self.transmit_state() != state_before {
            self.transmit_changed(now);
        }
        if let Some(hz) = self.station.receive_hz() {
            if self.peak.as_ref().is_some_and(|r| r.hz != hz) {
                self.peak_event(now, |s| s.frequency(hz));
            }
        }
        if self.sweep.is_some() {
            // The rig's own word on its frequency (not a set seen going to
            // it, the sweep's own included).
            let reported = match ev {
                StationEvent::Frequency { source, .. } if source != Source::CommandSeen => {
                    self.station.vfo_hz(self.station.receive_vfo())
                }
                _ => None,
            };
            self.sweep_station(now, reported);
        }
        let about_transmit = matches!(
            ev,
            StationEvent::Transmit { .. } | StationEvent::TransmitUnknown
        );
        if !about_transmit {
            if let Some(hz) = self.station.tune_hz(self.policy.tune_for) {
                // A command seen going to the rig that changes the tuned-for
                // frequency says where the rig is going: a set, or a split
                // or VFO select to a VFO whose frequency is known. No knob
                // step: it settles after a grace, not the debounce.
                let command = command_seen(&ev);
                let set = command.is_some() && before != Some(hz);
                let jump = set || self.policy.is_jump(now, hz, self.last_report);
                if command.is_some() {
                    self.note_command(hz);
                } else {
                    self.note_report(now, hz);
                }
                if jump
                    && !set
                    && self.pending.is_none_or(|p| p.hz != hz)
                    && self.settled_hz != Some(hz)
                {
                    self.stats.jumps += 1;
                }
                let due = if set {
                    let grace = match command {
                        Some(SeenCommand::Set) => self.set_grace(),
                        // A step of a program's burst (the other VFO set
                        // and split on; split off and a set; a select and
                        // the rig's report): the rest of the burst may
                        // follow, so it waits for that even where the line
                        // holds the keying off.
                        _ => self.burst_grace(),
                    };
                    Some(now + grace.min(self.policy.debounce_for(hz)))
                } else {
                    jump.then_some(now)
                };
                let settle = self.sweep_settle(hz);
                self.report_after(now, hz, due, settle);
                self.handle_timeout(now);
                return;
            }
            // The frequency the loop follows is no longer known (split to
            // a VFO nothing has told, or an A/B toggle that carries no
            // frequency): hold, untuned, rather than guess.
            if before.is_some()
                && (self.station.split() || matches!(ev, StationEvent::ToggleVfo { .. }))
            {
                self.transmit_vfo_lost(now);
            }
        }
        self.handle_timeout(now);
    }

    /// Split went on to a VFO whose frequency nothing has told: where the
    /// rig transmits is not known, so nothing is guessed. A settle still
    /// waiting is dropped, a move under way stops, and the loop counts as
    /// untuned (the inhibit asserted where the policy holds it until tuned)
    /// until the tuned-for frequency is known again and settles.
    fn transmit_vfo_lost(&mut self, now: Duration) {
        self.pending = None;
        self.settled_hz = None;
        self.stand_down(HoldReason::TransmitVfoUnknown);
        self.want = self.want.filter(|t| t.manual);
        self.untuned = true;
        self.release_at = None;
        if self.policy.inhibit_until_tuned {
            self.assert_inhibit(now);
        }
        let hz = self.station.receive_hz().unwrap_or(0);
        self.hold(hz, HoldReason::TransmitVfoUnknown);
    }

    fn note_report(&mut self, now: Duration, hz: u64) {
        if self.last_report.is_none_or(|(last, _)| last != hz) {
            let gap = self.last_report.map(|(_, at)| now.saturating_sub(at));
            self.sweep_gap = gap.filter(|g| *g < self.policy.debounce_for(hz));
            self.last_report = Some((hz, now));
        }
    }

    /// A command seen going to the rig changed the tuned-for frequency to
    /// `hz`: what the next report is told from as a jump (its distance),
    /// but no knob step: the quiet spell a jump needs runs on from the
    /// last report (a program's split off, then a band change on the rig
    /// 50 ms later, is a jump), and no sweep rate is taken from it.
    fn note_command(&mut self, hz: u64) {
        if self.last_report.is_none_or(|(last, _)| last != hz) {
            let at = self.last_report.map_or(Duration::ZERO, |(_, at)| at);
            self.sweep_gap = None;
            self.last_report = Some((hz, at));
        }
    }

    /// How long a report of `hz` that is not a jump waits to settle: the
    /// debounce, or, once a sweep's reports have shown their interval,
    /// `policy.sweep_settle` of those intervals (never longer than the
    /// debounce): a knob that has not reported for a few of its own
    /// intervals has stopped.
    fn sweep_settle(&self, hz: u64) -> Duration {
        let debounce = self.policy.debounce_for(hz);
        match (self.sweep_gap, self.policy.sweep_settle) {
            (Some(gap), Some(k)) => gap.mul_f64(k).min(debounce),
            _ => debounce,
        }
    }

    /// A report that the loop is to be tuned for `hz`, settled after the
    /// debounce or (`at_once`) now.
    fn report(&mut self, now: Duration, hz: u64, due: Option<Duration>) {
        let settle = self.policy.debounce_for(hz);
        self.report_after(now, hz, due, settle);
    }

    /// [`Follower::report`], settling `settle` after `now` unless `due`.
    fn report_after(&mut self, now: Duration, hz: u64, due: Option<Duration>, settle: Duration) {
        let at_once = due.is_some();
        match self.pending {
            Some(p) if p.hz == hz && !at_once => return,
            None if self.settled_hz == Some(hz) => return,
            _ => {}
        }
        let deadline = due.unwrap_or(now + settle);
        self.pending = Some(Pending { hz, deadline });
        // In the tail of a move the inhibit is still on: a detuned report
        // then keeps it on (whatever `inhibit_while_detuned` says), so that
        // the rig is not let go onto a loop tuned for the old frequency.
        let in_tail = self.inhibit && self.release_at.is_some() && self.tail_after_move;
        if (self.policy.inhibit_while_detuned || in_tail)
            && self.transmit_state() != TransmitState::Transmit
            && self.position.is_some()
            && self.detuned_for(hz)
        {
            // The loop is wrong for this frequency from now on: no
            // transmitting into it until it has been tuned. (A running
            // inhibit tail is kept, and ends no earlier than the settle.)
            self.detune_hold = true;
            self.assert_inhibit(now);
        }
    }

    /// Whether the loop, tuned for `tuned_hz`, is outside its dead band for
    /// a report of `hz` in a followed band.
    fn detuned_for(&self, hz: u64) -> bool {
        let (tune_hz, band) = match self.policy.place(hz) {
            Placement::Inside { band } => (hz, band),
            Placement::Guard { band, edge_hz } => (edge_hz, band),
            Placement::Outside => return false,
        };
        let hysteresis = self.policy.bands.get(band).map_or(0, |b| b.hysteresis_hz);
        self.heading()
            .is_none_or(|t| t.abs_diff(tune_hz) > hysteresis)
    }

    /// What the loop is tuned for, or will be when the move under way
    /// arrives: derived from where the capacitor rests (a move's target
    /// counts only once the controller says it is there).
    fn heading(&self) -> Option<u64> {
        match self.motion {
            Motion::Moving { target, .. } => Some(target.tune_hz),
            _ => self.tuned_hz,
        }
    }

    /// The rig reported that it started (`true`) or stopped transmitting.
    pub fn handle_transmit(&mut self, now: Duration, on: bool) {
        self.handle_station(
            now,
            StationEvent::Transmit {
                on,
                source: Source::RigReport,
            },
        );
    }

    fn transmit_changed(&mut self, now: Duration) {
        self.peak_abort_unless_receiving(now);
        match self.transmit_state() {
            TransmitState::Transmit => self.stand_down(HoldReason::Transmitting),
            TransmitState::Receive => self.try_start(now),
            TransmitState::Unknown => {
                if !self.policy.while_unknown.moves() {
                    self.stand_down(HoldReason::TransmitUnknown);
                }
            }
        }
    }

    /// What keeps a move from starting on the rig's side, if anything.
    fn rig_blocks(&self) -> Option<HoldReason> {
        match self.transmit_state() {
            TransmitState::Transmit => Some(HoldReason::Transmitting),
            TransmitState::Unknown if !self.policy.while_unknown.moves() => {
                Some(HoldReason::TransmitUnknown)
            }
            _ if self.rig_silent => Some(HoldReason::RigSilent),
            _ => None,
        }
    }

    /// The rig's port went down (`up == false`) or came back. While it is
    /// down a transmission could start unheard, so the core acts as for a
    /// transmission: no move starts (hold `rig-silent`), a move under way
    /// is stopped, and the rest waits until the port is back.
    pub fn handle_rig_link(&mut self, now: Duration, up: bool) {
        if self.rig_silent != up {
            return;
        }
        self.rig_silent = !up;
        if up {
            if self.policy.inhibit_until_tuned {
                // The rig's state is unknown again: inhibit until its
                // frequency has been heard and the loop is tuned for it.
                // The next report settles afresh even if unchanged.
                self.untuned = true;
                self.release_at = None;
                self.pending = None;
                self.settled_hz = None;
                if self.transmit_state() != TransmitState::Transmit {
                    self.set_inhibit(true);
                }
            }
            self.try_start(now);
        } else {
            self.stand_down(HoldReason::RigSilent);
            // A transmission could start unheard: the readings are no
            // longer the band's noise for sure.
            self.peak_event(now, |s| s.fault("the rig's port went down"));
        }
        self.sweep_station(now, None);
        self.handle_timeout(now);
    }

    /// The controller reported that the motor is at rest at `steps`: after
    /// arriving, after a stop, or in answer to a position query.
    pub fn handle_arrived(&mut self, now: Duration, steps: i64) {
        let was_unknown = self.position.is_none();
        self.position = Some(steps);
        match self.motion {
            Motion::Moving {
                then: Some(next), ..
            } => {
                // First leg done (the overshoot); the final approach follows.
                // A leg never starts while transmitting: a transmit report
                // during the move has already turned this into Stopping.
                if let Motion::Moving { target, .. } = self.motion {
                    self.motion = Motion::Moving { then: None, target };
                }
                self.actions.push_back(Action::Goto { steps: next });
            }
            Motion::Moving { then: None, .. } | Motion::Stopping => {
                if let Motion::Moving { target, .. } = self.motion {
                    if target.steps == steps {
                        self.faulted = None;
                    }
                    if target.steps == steps && target.retunes {
                        // Tuned for the target only once it is reached (an
                        // operator's move by steps tunes for nothing known).
                        self.tuned_hz = Some(target.tune_hz);
                        self.untuned = false;
                    }
                }
                self.motion = Motion::Idle;
                self.tail_after_move = true;
                if let Some(t) = &mut self.touchup {
                    if t.due.is_none() {
                        t.due = Some(now + self.policy.candidate_dwell);
                    }
                }
                if std::mem::take(&mut self.recheck) {
                    // A move stopped short is wanted again, but for the
                    // old calibration's target: decide it afresh too.
                    if self.want.is_some_and(|w| !w.manual) {
                        self.want = None;
                    }
                    if self.want.is_none() {
                        self.tuned_hz = None;
                        if let Some(hz) = self.settled_hz {
                            self.decide(now, hz);
                        }
                    }
                }
                // A search's move came to rest where it asked (not stopped
                // short: a stopped move is wanted again).
                if self.want.is_none() {
                    if let Some(run) = self
                        .peak
                        .as_mut()
                        .filter(|r| r.waiting == PeakWait::Arrival)
                    {
                        let req = run.search.arrived(steps);
                        self.peak_step(now, req);
                    }
                }
                // Unless one of those started the next move: its tail
                // comes after it.
                if !self.is_moving() {
                    self.after_rest(now);
                }
            }
            Motion::Idle | Motion::Arming { .. } => {
                if was_unknown || self.fault {
                    self.tail_after_move = false;
                    self.fault = false;
                    self.tuned_hz = None;
                    // The frequency settled on before the fault is still
                    // where the rig is (a lost rig clears it): decide it
                    // again from the confirmed position now, rather than
                    // leave the loop untuned and the inhibit on until the
                    // next retune; a target already faulted twice in a row
                    // is held instead (see `faulted`).
                    if self.want.is_none() && !self.closing && !self.paused {
                        if let Some(hz) = self.settled_hz {
                            self.redecide(now, hz);
                        }
                    }
                    if !self.is_moving() {
                        self.after_rest(now);
                    }
                }
            }
        }
        self.handle_timeout(now);
    }

    /// The controller link failed or answered nonsense: the position can no
    /// longer be trusted. Nothing moves and the inhibit stays asserted until
    /// a position is reported again.
    pub fn handle_fault(&mut self, now: Duration) {
        // A search cannot go on, nor return, without a position: it ends
        // here, and the recovery decides the settled frequency again.
        if self.peak_dropped("the controller link") && self.want.is_some_and(|t| t.manual) {
            self.want = None;
        }
        self.sweep_fault(now, "the controller link");
        if let Motion::Moving { target, .. } = self.motion {
            self.faulted = match self.faulted {
                Some((steps, n)) if steps == target.steps => Some((steps, n + 1)),
                _ => Some((target.steps, 1)),
            };
        }
        self.fault = true;
        // What was confirmed of the line is no longer trusted (the fault may
        // be the line's own write): a command is not held off by it again
        // until the line is confirmed set anew.
        self.line_set_at = None;
        self.position = None;
        self.tuned_hz = None;
        if self.policy.inhibit_until_tuned {
            self.untuned = true;
        }
        self.motion = Motion::Idle;
        self.release_at = None;
        self.assert_inhibit(now);
        if let Some(hz) = self.settled_hz {
            self.hold(hz, HoldReason::Fault);
        }
        self.handle_timeout(now);
    }

    /// Pauses (`true`) or resumes following. A paused core finishes the move
    /// under way but starts no new one.
    pub fn handle_pause(&mut self, now: Duration, paused: bool) {
        self.paused = paused;
        if !paused {
            if let Some(hz) = self.settled_hz {
                self.decide(now, hz);
            }
        }
        self.handle_timeout(now);
    }

    /// Switches the calibration (a new profile, say), and re-tunes the
    /// current frequency through it.
    pub fn handle_calibration(
        &mut self,
        now: Duration,
        profile: Option<String>,
        map: Arc<dyn StepMap>,
    ) {
        self.peak_event(now, |s| s.stop());
        self.map = map;
        self.profile = profile;
        self.tuned_hz = None;
        self.last_hold = None;
        // A move under way went for the old calibration's target: what the
        // loop is tuned for is decided again when it has come to rest.
        self.recheck = self.is_moving();
        if let Some(hz) = self.settled_hz {
            self.decide(now, hz);
        }
        self.handle_timeout(now);
    }

    /// The operator moves the tuner by `delta` steps by hand, to touch up the
    /// tuning at the current frequency. The move obeys the same limits and
    /// interlock as any other; if the operator then stays on the frequency
    /// for `candidate_dwell`, the position is offered as a calibration point.
    pub fn handle_nudge(&mut self, now: Duration, delta: i64) {
        let Some(base) = self.want.map(|t| t.steps).or(self.position) else {
            self.hold(self.settled_hz.unwrap_or(0), HoldReason::PositionUnknown);
            return;
        };
        let wanted = base.saturating_add(delta);
        let steps = self.policy.clamp(wanted);
        let hz = self.settled_hz.or(self.tuned_hz).unwrap_or(0);
        if steps != wanted {
            self.hold(hz, HoldReason::Limit);
        }
        self.want = Some(Target {
            hz,
            tune_hz: self.tuned_hz.unwrap_or(hz),
            steps,
            manual: true,
            retunes: true,
        });
        self.touchup = (hz != 0).then_some(Touchup { hz, due: None });
        self.try_start(now);
        self.handle_timeout(now);
    }

    /// The service is shutting down: following stops and no operator
    /// move starts any more (one still waiting for receive is dropped).
    pub fn handle_closing(&mut self, now: Duration) {
        self.closing = true;
        self.peak_dropped("the service is shutting down");
        self.sweep_closing(now);
        if self.want.is_some_and(|t| t.manual) {
            self.want = None;
        }
        self.handle_pause(now, true);
    }

    /// An operator command (see [`command`]): decided here, under the same
    /// rules as the rig's reports; a move it asks for comes out as the
    /// same actions. The reply says what became of it.
    pub fn handle_command(&mut self, now: Duration, cmd: Command) -> Reply {
        let reply = match cmd {
            Command::Status => return Reply::Status(Box::new(self.status())),
            Command::Nudge { .. }
            | Command::Goto { .. }
            | Command::Preset { .. }
            | Command::Profile { .. }
            | Command::Mark
            | Command::Peak
                if self.searching() =>
            {
                Reply::Refused(Refusal::Searching)
            }
            Command::Pause => {
                self.handle_pause(now, true);
                Reply::Done
            }
            Command::Resume => {
                self.handle_pause(now, false);
                self.pending_reply()
            }
            Command::Nudge { steps } => match self.move_base() {
                Err(r) => Reply::Refused(r),
                Ok(base) => {
                    let hz = self.settled_hz.or(self.tuned_hz);
                    let reply = self.operator_move(now, base.saturating_add(steps), hz, None);
                    if matches!(reply, Reply::Done | Reply::Queued { .. }) {
                        self.touchup = hz.map(|hz| Touchup { hz, due: None });
                    }
                    reply
                }
            },
            Command::Goto { steps } => {
                let hz = self.settled_hz.or(self.tuned_hz);
                self.operator_move(now, steps, hz, None)
            }
            Command::Preset { name } => self.preset(now, &name),
            Command::Profile { name } => {
                let profile = (name != BASE_PROFILE).then_some(name);
                match self.calibrations.get(profile.as_deref()) {
                    None => Reply::Refused(Refusal::UnknownProfile {
                        name: profile.unwrap_or_else(|| BASE_PROFILE.to_string()),
                        known: self.calibrations.names(),
                    }),
                    Some(map) => {
                        self.handle_calibration(now, profile, map);
                        self.pending_reply()
                    }
                }
            }
            Command::Peak => self.start_peak(now),
            Command::Calibrate { band, consent } => self.start_sweep(now, &band, consent),
            Command::CalibrateStop => self.stop_sweep(now),
            // Stop means stop: a sweep's search ends the sweep.
            Command::PeakStop if self.sweep.is_some() => self.stop_sweep(now),
            Command::PeakStop if self.peak.is_none() => Reply::Refused(Refusal::CannotPeak {
                why: "no search is under way".to_string(),
            }),
            Command::PeakStop => {
                self.peak_event(now, |s| s.stop());
                Reply::Done
            }
            Command::Mark => self.mark(),
            Command::Reload { calibrations } => match calibrations {
                Err(error) => Reply::Refused(Refusal::Reload {
                    error: error.to_string(),
                }),
                Ok(cals) => match cals.get(self.profile.as_deref()) {
                    None => Reply::Refused(Refusal::Reload {
                        error: format!(
                            "the profile in use, `{}`, is no longer in it",
                            self.profile.as_deref().unwrap_or(BASE_PROFILE)
                        ),
                    }),
                    Some(map) => {
                        self.calibrations = cals;
                        let profile = self.profile.clone();
                        self.handle_calibration(now, profile, map);
                        self.pending_reply()
                    }
                },
            },
        };
        self.handle_timeout(now);
        reply
    }

    /// Where an operator move counts from: where the motor is heading, or
    /// resting.
    fn move_base(&self) -> Result<i64, Refusal> {
        if self.closing {
            return Err(Refusal::ShuttingDown);
        }
        match (
            self.want.filter(|t| t.manual).map(|t| t.steps),
            self.position,
        ) {
            (_, None) if self.fault => Err(Refusal::Fault),
            (_, None) => Err(Refusal::PositionUnknown),
            (Some(w), Some(_)) => Ok(w),
            (None, Some(p)) => Ok(match self.motion {
                Motion::Moving { target, .. } => target.steps,
                _ => p,
            }),
        }
    }

    /// A move the operator asked for, to `steps`, for `hz` (the rig's
    /// frequency, if known) tuning the loop for `tune_hz` (`None`: it stays
    /// tuned for what it was).
    fn operator_move(
        &mut self,
        now: Duration,
        steps: i64,
        hz: Option<u64>,
        tune_hz: Option<u64>,
    ) -> Reply {
        if let Err(r) = self.move_base() {
            return Reply::Refused(r);
        }
        let (min, max) = (self.policy.min_steps, self.policy.max_steps);
        if !(min..=max).contains(&steps) {
            return Reply::Refused(Refusal::OutsideLimits {
                wanted: steps,
                min,
                max,
            });
        }
        let hz = hz.unwrap_or(0);
        self.touchup = None;
        self.last_hold = None;
        let tune = tune_hz.or(self.tuned_hz);
        self.want = Some(Target {
            hz,
            tune_hz: tune.unwrap_or(hz),
            steps,
            manual: true,
            retunes: tune.is_some(),
        });
        if tune_hz.is_some() {
            // Tuned for the preset from now on; the rig's next settled
            // frequency is decided against it.
            self.tuned_hz = tune_hz;
        }
        self.try_start(now);
        self.pending_reply()
    }

    fn preset(&mut self, now: Duration, name: &str) -> Reply {
        let Some(preset) = self.presets.iter().find(|p| p.name == name).cloned() else {
            return Reply::Refused(Refusal::UnknownPreset {
                name: name.to_string(),
                known: self.presets.iter().map(|p| p.name.clone()).collect(),
            });
        };
        match preset.goal {
            PresetGoal::Steps(steps) => {
                let hz = self.settled_hz.or(self.tuned_hz);
                self.operator_move(now, steps, hz, None)
            }
            PresetGoal::Hz(hz) => {
                let tune_hz = match self.policy.place(hz) {
                    Placement::Inside { .. } => hz,
                    Placement::Guard { edge_hz, .. } => edge_hz,
                    Placement::Outside => return Reply::Refused(Refusal::OutOfBand { hz }),
                };
                let raw = self.map.steps_at(tune_hz as f64);
                if !raw.is_finite() || raw.abs() > 1e15 {
                    return Reply::Refused(Refusal::Calibration { hz });
                }
                self.operator_move(now, raw.round() as i64, Some(hz), Some(tune_hz))
            }
        }
    }

    fn mark(&mut self) -> Reply {
        let Some(steps) = self.position else {
            return Reply::Refused(if self.fault {
                Refusal::Fault
            } else {
                Refusal::PositionUnknown
            });
        };
        if self.is_moving() {
            return Reply::Refused(Refusal::Moving);
        }
        let Some(hz) = self.pending.map(|p| p.hz).or(self.settled_hz) else {
            return Reply::Refused(Refusal::NoFrequency);
        };
        self.actions.push_back(Action::Candidate {
            hz,
            steps,
            profile: self.profile.clone(),
            fit: None,
        });
        Reply::Done
    }

    /// What a move just asked for waits for, if anything.
    fn pending_reply(&self) -> Reply {
        let Some(t) = self.want else {
            return Reply::Done;
        };
        let until = if self.paused && !t.manual {
            Wait::Resume
        } else if matches!(self.motion, Motion::Moving { .. } | Motion::Stopping) {
            Wait::Rest
        } else if let Some(blocked) = self.rig_blocks() {
            match blocked {
                HoldReason::RigSilent => Wait::RigHeard,
                _ => Wait::Receive,
            }
        } else if self.position.is_none() {
            return Reply::Refused(if self.fault {
                Refusal::Fault
            } else {
                Refusal::PositionUnknown
            });
        } else {
            // Arming: the inhibit's lead runs, the first step follows.
            return Reply::Done;
        };
        Reply::Queued { until }
    }

    /// The state, for the operator.
    pub fn status(&self) -> Status {
        let rig_hz = self.pending.map(|p| p.hz).or(self.settled_hz);
        let band = rig_hz.and_then(|hz| match self.policy.place(hz) {
            Placement::Inside { band } | Placement::Guard { band, .. } => {
                self.policy.bands.get(band).map(|b| b.name.clone())
            }
            Placement::Outside => None,
        });
        let tx_hz = self.station.transmit_hz();
        Status {
            rx_hz: self.station.receive_hz(),
            tx_hz,
            swr: self.swr_estimate(tx_hz.or(rig_hz), band_guess(&self.policy, rig_hz)),
            position: self.position,
            heading: match self.motion {
                Motion::Moving { target, .. } => Some(target.steps),
                _ => None,
            },
            min_steps: self.policy.min_steps,
            max_steps: self.policy.max_steps,
            rig_hz,
            band,
            tuned_hz: self.tuned_hz,
            moving: self.is_moving(),
            inhibit: self.inhibit,
            transmitting: self.transmitting(),
            rig_silent: self.rig_silent,
            paused: self.paused,
            fault: self.fault,
            profile: self.profile.clone(),
            profiles: self.calibrations.names(),
            bands: self.policy.bands.iter().map(|b| b.name.clone()).collect(),
            presets: self.presets.clone(),
            shutting_down: self.closing,
            swr_read: None,
            swr_alarm: None,
            swr_drift: None,
            peak_hz: self.peak.as_ref().map(|r| r.hz),
            last_peak: self.last_peak.clone(),
            sweep: self.sweep_progress(),
            last_sweep: self.last_sweep.clone(),
        }
    }

    /// The loop's estimated SWR curve where the capacitor is at rest, with
    /// `hz` (the transmit frequency) marked: the resonance the calibration
    /// in use maps the position to, and the loop physics' Q there. `None`
    /// while moving, with the position unknown or the loop not described.
    fn swr_estimate(&self, hz: Option<u64>, guess_hz: Option<f64>) -> Option<SwrCurve> {
        let small_loop = self.small_loop?;
        if self.is_moving() {
            return None;
        }
        let steps = self.position? as f64;
        let hz = hz.map(|h| h as f64);
        swr_curve(
            self.map.as_ref(),
            steps,
            hz,
            hz.or(guess_hz)?,
            |f0| small_loop.at(f0).q_unloaded,
            SWR_CURVE_POINTS,
        )
    }

    /// The loop's physics, for the status's SWR estimate (`[antenna]`).
    pub fn with_loop(mut self, small_loop: Option<SmallLoop>) -> Self {
        self.small_loop = small_loop;
        self
    }

    /// The presets and calibrations the operator's commands can choose from,
    /// and the profile in use at start (its map is the one given to
    /// [`Follower::new`]).
    pub fn with_operator(
        mut self,
        presets: Vec<Preset>,
        calibrations: Calibrations,
        profile: Option<String>,
    ) -> Self {
        self.presets = presets;
        self.calibrations = calibrations;
        self.profile = profile;
        self
    }

    /// Time has passed: act on whatever deadline is due.
    pub fn handle_timeout(&mut self, now: Duration) {
        self.sweep_timeout(now);
        if let Some(run) = self.peak.as_mut() {
            if run.meter_due.is_some_and(|due| now >= due) {
                run.meter_due = None;
                let why = format!("no signal-meter reading in {} s", PEAK_METER_WAIT.as_secs());
                self.peak_event(now, |s| s.fault(&why));
            }
        }
        if let Some(p) = self.pending {
            if now >= p.deadline {
                self.pending = None;
                self.settle(now, p.hz);
            }
        }
        if let Motion::Arming { until } = self.motion {
            if now >= until {
                self.start_legs();
            }
        }
        if let Some(at) = self.release_at {
            if now >= at && !self.detune_hold && !self.untuned {
                self.release_at = None;
                self.set_inhibit(false);
            }
        }
        if let Some(t) = self.touchup {
            if t.due.is_some_and(|due| now >= due) {
                self.touchup = None;
                if let Some(steps) = self.position {
                    self.actions.push_back(Action::Candidate {
                        hz: t.hz,
                        steps,
                        profile: self.profile.clone(),
                        fit: None,
                    });
                }
            }
        }
    }

    /// The driver confirms that the inhibit line took the last
    /// [`Action::Inhibit`] it was given, *on*, at `set_at` (when the line
    /// was set). Taken only when that is the core's last word on the line
    /// (no later `Inhibit` still waits in [`Follower::poll_action`]) and
    /// the core still wants it on. From `inhibit_lead` after `set_at` a
    /// transmit command seen going to the rig is held off by the line
    /// ([`Follower::transmit_state`]); a driver that never confirms gets
    /// the fail-safe reading (every transmit command is a transmission).
    pub fn handle_inhibit_set(&mut self, set_at: Duration) {
        let later = self
            .actions
            .iter()
            .any(|a| matches!(a, Action::Inhibit { .. }));
        if self.inhibit && !later && self.line_set_at.is_none() {
            self.line_set_at = Some(set_at);
        }
    }

    /// The SWR watch raised its alarm with `action = "inhibit"` and a line
    /// wired: assert the inhibit now, against the transmission in progress
    /// (the one exception to "never against an over": the loop may be
    /// arcing or its feed broken, and the operator asked for it), and hold
    /// it until [`Follower::end_swr_hold`]. A release the core decides
    /// meanwhile is given when the hold ends.
    pub fn handle_swr_alarm(&mut self, now: Duration) {
        if self.swr_hold {
            return;
        }
        let was_on = self.inhibit;
        self.assert_inhibit(now);
        self.swr_hold = true;
        self.release_after_swr_hold = !was_on;
    }

    /// The over the SWR alarm ended is over (the rig receives): the hold
    /// ends, and the inhibit goes off if the core had released it (or never
    /// wanted it) meanwhile.
    pub fn end_swr_hold(&mut self) {
        if !std::mem::take(&mut self.swr_hold) {
            return;
        }
        if std::mem::take(&mut self.release_after_swr_hold) {
            self.set_inhibit(false);
        }
    }

    /// The SWR alarm holds the inhibit.
    pub fn swr_hold(&self) -> bool {
        self.swr_hold
    }

    // ----- the noise-peak search ------------------------------------------

    /// Whether the driver should read the rig's signal meter now: a search
    /// waits for a reading, the motor at rest and the rig receiving.
    pub fn wants_signal_meter(&self) -> bool {
        self.peak
            .as_ref()
            .is_some_and(|r| matches!(r.waiting, PeakWait::Meter { .. }))
            && matches!(self.motion, Motion::Idle)
            && self.station.transmit().state == TransmitState::Receive
            && !self.rig_silent
    }

    /// A signal-meter reading (dB on the meter's scale, from the dialect's
    /// scale). Taken only while [`Follower::wants_signal_meter`]; the first
    /// after each arrival is dropped (the poll may have sent it before the
    /// motor came to rest).
    pub fn handle_signal_meter(&mut self, now: Duration, db: f64) {
        if !self.wants_signal_meter() || !db.is_finite() {
            return;
        }
        let Some(run) = self.peak.as_mut() else {
            return;
        };
        run.meter_due = Some(now + PEAK_METER_WAIT);
        if run.waiting == (PeakWait::Meter { fresh: true }) {
            run.waiting = PeakWait::Meter { fresh: false };
            return;
        }
        let req = run.search.meter(db);
        self.peak_step(now, req);
        self.handle_timeout(now);
    }

    /// "Find resonance here": the checks, the plan, the first move.
    fn start_peak(&mut self, now: Duration) -> Reply {
        let cannot = |why: &str| {
            Reply::Refused(Refusal::CannotPeak {
                why: why.to_string(),
            })
        };
        if self.peak.is_some() {
            return Reply::Refused(Refusal::Searching);
        }
        let from = match self.move_base() {
            Err(r) => return Reply::Refused(r),
            Ok(b) => b,
        };
        if self.is_moving() || self.want.is_some() {
            return Reply::Refused(Refusal::Moving);
        }
        if self.rig_silent || self.station.transmit().state != TransmitState::Receive {
            return cannot("the rig must be known to receive (the search reads the band's noise)");
        }
        let Some(hz) = self.station.receive_hz() else {
            return Reply::Refused(Refusal::NoFrequency);
        };
        if !matches!(self.policy.place(hz), Placement::Inside { .. }) {
            return Reply::Refused(Refusal::OutOfBand { hz });
        }
        let Some(small_loop) = self.small_loop else {
            return cannot("[antenna] does not describe the loop, so the search has no window");
        };
        let predicted = self.map.steps_at(hz as f64);
        let slope = self.map.steps_per_hz(hz as f64);
        let q = small_loop.at(hz as f64).q_unloaded;
        if !(predicted.is_finite() && predicted.abs() < 1e15 && slope.is_finite()) {
            return Reply::Refused(Refusal::Calibration { hz });
        }
        let half = peak::predicted_half_width_steps(hz as f64, q, slope);
        let plan = peak::PeakPlan::standard(
            hz,
            self.profile.clone().unwrap_or_default(),
            from,
            self.policy.clamp(predicted.round() as i64),
            half,
            (self.policy.min_steps, self.policy.max_steps),
        );
        let mut search = match peak::PeakSearch::new(plan) {
            Ok(s) => s,
            Err(e) => return cannot(&format!("expected {}, found {}", e.expected, e.found)),
        };
        let (low, high) = match search.targets() {
            [first, .., last] => (*first, *last),
            _ => return cannot("the window has no positions"),
        };
        self.actions.push_back(Action::PeakStarted {
            hz,
            low,
            high,
            positions: search.targets().len(),
        });
        self.touchup = None;
        self.last_hold = None;
        let req = search.start();
        self.peak = Some(PeakRun {
            search,
            hz,
            profile: self.profile.clone(),
            tuned_before: self.tuned_hz,
            waiting: PeakWait::Arrival,
            meter_due: None,
        });
        self.assert_inhibit(now);
        self.peak_step(now, req);
        self.pending_reply()
    }

    /// Carries out what the search asks, until it waits.
    fn peak_step(&mut self, now: Duration, mut req: peak::PeakRequest) {
        use peak::PeakRequest;
        loop {
            let Some(run) = self.peak.as_mut() else {
                return;
            };
            match req {
                PeakRequest::Goto { steps } => {
                    run.waiting = PeakWait::Arrival;
                    run.meter_due = None;
                    if self.position == Some(steps) && matches!(self.motion, Motion::Idle) {
                        req = run.search.arrived(steps);
                        continue;
                    }
                    let hz = run.hz;
                    self.want = Some(Target {
                        hz,
                        tune_hz: hz,
                        steps,
                        manual: true,
                        retunes: false,
                    });
                    self.try_start(now);
                    return;
                }
                PeakRequest::ReadMeter => {
                    if !matches!(run.waiting, PeakWait::Meter { .. }) {
                        run.waiting = PeakWait::Meter { fresh: true };
                    }
                    run.meter_due = Some(now + PEAK_METER_WAIT);
                    return;
                }
                PeakRequest::Wait => return,
                PeakRequest::Done(outcome) => {
                    let Some(run) = self.peak.take() else {
                        return;
                    };
                    match &outcome {
                        peak::PeakOutcome::Candidate(c) => {
                            // Resonant at the frequency by measurement.
                            self.tuned_hz = Some(c.hz);
                            self.untuned = false;
                            self.actions.push_back(Action::Candidate {
                                hz: c.hz,
                                steps: c.steps,
                                profile: run.profile.clone(),
                                fit: Some(c.fit),
                            });
                        }
                        _ => self.tuned_hz = run.tuned_before,
                    }
                    let ended = outcome.clone();
                    self.peak_ended(outcome);
                    self.sweep_search_ended(now, &ended);
                    if !self.is_moving() {
                        self.after_rest(now);
                    }
                    if let Some(hz) = self.settled_hz {
                        self.decide(now, hz);
                    }
                    return;
                }
            }
        }
    }

    fn peak_ended(&mut self, outcome: peak::PeakOutcome) {
        self.last_peak = Some(outcome.to_string());
        self.actions.push_back(Action::PeakEnded { outcome });
    }

    /// Anything but "the rig receives" ends a search (it returns to where
    /// it began once the rig receives again).
    fn peak_abort_unless_receiving(&mut self, now: Duration) {
        if self.station.transmit().state != TransmitState::Receive {
            self.peak_event(now, |s| s.transmit());
        }
    }

    /// Tells the search under way, if any, of an event (`tell` hands it to
    /// the search) and carries out what it asks.
    fn peak_event(
        &mut self,
        now: Duration,
        tell: impl FnOnce(&mut peak::PeakSearch) -> peak::PeakRequest,
    ) {
        if let Some(run) = self.peak.as_mut() {
            let req = tell(&mut run.search);
            self.peak_step(now, req);
        }
    }

    /// Ends the search under way, if any, where it is (no position to
    /// return from, or the service is closing), for `why`; whether one was.
    fn peak_dropped(&mut self, why: &str) -> bool {
        if self.peak.take().is_none() {
            return false;
        }
        self.peak_ended(peak::PeakOutcome::Aborted(peak::AbortReason::Fault(
            why.to_string(),
        )));
        true
    }

    // ----- work out -------------------------------------------------------

    /// The next action for the driver, in order.
    pub fn poll_action(&mut self) -> Option<Action> {
        self.actions.pop_front()
    }

    /// When the core next needs [`Follower::handle_timeout`], if ever.
    pub fn poll_timeout(&self) -> Option<Duration> {
        let arming = match self.motion {
            Motion::Arming { until } => Some(until),
            _ => None,
        };
        [
            self.pending.map(|p| p.deadline),
            arming,
            self.release_at.filter(|_| !self.detune_hold),
            self.touchup.and_then(|t| t.due),
            self.peak.as_ref().and_then(|r| r.meter_due),
            self.sweep_deadline(),
        ]
        .into_iter()
        .flatten()
        .min()
    }

    // ----- getters ----------------------------------------------------------

    /// Motor position when last at rest, if known.
    pub fn position(&self) -> Option<i64> {
        self.position
    }
    /// The frequency the tuner is tuned (or being tuned) for.
    pub fn tuned_hz(&self) -> Option<u64> {
        self.heading()
    }
    pub fn is_moving(&self) -> bool {
        !matches!(self.motion, Motion::Idle)
    }
    pub fn inhibit(&self) -> bool {
        self.inhibit
    }
    /// The rig is known to transmit.
    pub fn transmitting(&self) -> bool {
        self.transmit_state() == TransmitState::Transmit
    }
    /// What the core knows of the rig.
    pub fn station(&self) -> &Station {
        &self.station
    }
    /// The transmit state, its source and since when, as the station
    /// model has it (a command held off by the line still reads
    /// "transmit" here; [`Follower::transmit_state`] is what the core acts
    /// on).
    pub fn transmit(&self) -> TransmitKnowledge {
        self.station.transmit()
    }

    /// The transmit state the core acts on: the station model's, except
    /// that a transmit command seen going to the rig while the wired
    /// inhibit line was set and its lead had passed counts as unknown
    /// until the line is released. Such a command cannot put the rig on
    /// the air (the line holds it off), so a move may go ahead under the
    /// line, as it may whenever the state is unknown with a line wired;
    /// a rig report, a poll answer or the sense line saying transmit ends
    /// that at once (a real transmission stops every move), and at the
    /// release the command's transmission is in force (the rig goes on the
    /// air if the key is still held). Without a wired line
    /// ([`WhileUnknown::MoveUnderInhibit`]), or with one the station has
    /// not said holds the rig against CAT keying
    /// (`policy.line_holds_commands`), nothing is held off.
    pub fn transmit_state(&self) -> TransmitState {
        match self.station.transmit().state {
            TransmitState::Transmit if self.command_held_off => TransmitState::Unknown,
            state => state,
        }
    }

    /// How long a frequency set seen going to the rig waits before it
    /// settles: [`SET_GRACE`], so that a program keying the rig right
    /// after its set finds no move under way. Where the wired line holds
    /// the rig against CAT keying (`policy.line_holds_commands`) that
    /// keying is held off by the line, which the move waits for anyway (it
    /// starts `inhibit_lead` after the line is set): the set then waits
    /// only that lead, never longer than [`SET_GRACE`].
    fn set_grace(&self) -> Duration {
        if self.policy.line_holds_cat_keying() {
            SET_GRACE.min(self.policy.inhibit_lead)
        } else {
            SET_GRACE
        }
    }

    /// How long a program's split or VFO command that moves the tuned-for
    /// frequency waits before it settles, for the rest of its burst:
    /// [`SET_GRACE`], or where the wired line holds CAT keying (so a
    /// keying right after it is no danger) the program's longest gap
    /// between two commands of a burst at the port's speed,
    /// `policy.burst_gap`, if that is shorter.
    fn burst_grace(&self) -> Duration {
        if self.policy.line_holds_cat_keying() {
            SET_GRACE.min(self.policy.burst_gap)
        } else {
            SET_GRACE
        }
    }

    /// A transmit command seen going to the rig now could not put it on
    /// the air: a line is wired that holds the rig itself off
    /// (`policy.line_holds_commands`), the core keeps it on, and the driver
    /// confirmed it set at least `inhibit_lead` ago.
    fn line_holds_off(&self, now: Duration) -> bool {
        self.policy.line_holds_cat_keying()
            && self.inhibit
            && self
                .line_set_at
                .is_some_and(|t| now >= t + self.policy.inhibit_lead)
    }

    /// A transmit command is being held off by the inhibit line.
    pub fn command_held_off(&self) -> bool {
        self.command_held_off
    }
    /// Whether nothing may move for want of knowing whether the rig
    /// transmits, or because it does: what the controller link's own
    /// interlock is told.
    pub fn rig_may_transmit(&self) -> bool {
        match self.transmit_state() {
            TransmitState::Transmit => true,
            TransmitState::Unknown => !self.policy.while_unknown.moves(),
            TransmitState::Receive => false,
        }
    }
    /// The inhibit is held until the loop is tuned for the rig's frequency.
    pub fn untuned(&self) -> bool {
        self.untuned
    }
    /// The rig's port is down.
    pub fn rig_silent(&self) -> bool {
        self.rig_silent
    }
    pub fn stats(&self) -> Stats {
        self.stats
    }
    pub fn policy(&self) -> &Policy {
        &self.policy
    }
    pub fn profile(&self) -> Option<&str> {
        self.profile.as_deref()
    }

    // ----- inside -----------------------------------------------------------

    fn settle(&mut self, now: Duration, hz: u64) {
        if self.touchup.is_some_and(|t| t.hz != hz) {
            self.touchup = None;
        }
        self.settled_hz = Some(hz);
        self.actions.push_back(Action::Settled { hz });
        let held = std::mem::take(&mut self.detune_hold);
        let was_untuned = self.untuned;
        self.decide(now, hz);
        let held = held || (was_untuned && !self.untuned);
        // Asserted for a detuned report, and no move came of it (dead band,
        // out of band, paused): let the rig transmit again, at once or when
        // a running tail ends.
        if held
            && self.inhibit
            && matches!(self.motion, Motion::Idle)
            && (self.want.is_none() || self.paused)
            && self.release_at.is_none()
            && self.position.is_some()
            && !self.fault
        {
            self.set_inhibit(false);
        }
    }

    /// [`Self::decide`] after a recovery, unless the target it would move
    /// to has been faulted twice in a row.
    fn redecide(&mut self, now: Duration, hz: u64) {
        self.decide_after(now, hz, true);
    }

    /// Decides what the settled frequency `hz` asks for.
    fn decide(&mut self, now: Duration, hz: u64) {
        self.decide_after(now, hz, false);
    }

    /// [`Self::decide`]; with `after_fault`, a target faulted twice in a row
    /// is held instead (see `faulted`).
    fn decide_after(&mut self, now: Duration, hz: u64, after_fault: bool) {
        if self.searching() {
            // The search (or sweep) has the motor; its end decides this again.
            return;
        }
        let (tune_hz, band) = match self.policy.place(hz) {
            Placement::Inside { band } => (hz, band),
            Placement::Guard { band, edge_hz } => (edge_hz, band),
            Placement::Outside => {
                // Listening outside the bands must not drive the tuner; a
                // move still waiting for receive is dropped too.
                self.want = None;
                self.untuned = false;
                self.hold(hz, HoldReason::OutOfBand);
                return;
            }
        };
        let hysteresis = self.policy.bands.get(band).map_or(0, |b| b.hysteresis_hz);
        if self
            .heading()
            .is_some_and(|t| t.abs_diff(tune_hz) <= hysteresis)
            && self.position.is_some()
        {
            self.want = None;
            if !self.is_moving() {
                self.untuned = false;
            }
            self.hold(hz, HoldReason::DeadBand);
            return;
        }
        let tune_hz = self.aim(tune_hz, band, hysteresis);
        let raw = self.map.steps_at(tune_hz as f64);
        if !raw.is_finite() || raw.abs() > 1e15 {
            self.hold(hz, HoldReason::Calibration);
            return;
        }
        let wanted = raw.round() as i64;
        let steps = self.policy.clamp(wanted);
        if steps != wanted {
            self.hold(hz, HoldReason::Limit);
        }
        // Compare against where the motor is heading, or resting.
        let reference = match self.motion {
            Motion::Moving { target, .. } => Some(target.steps),
            _ => self.position,
        };
        if let Some(r) = reference {
            if r.abs_diff(steps) < self.policy.min_move_steps.unsigned_abs() || r == steps {
                self.want = None;
                if !self.is_moving() {
                    self.tuned_hz = Some(tune_hz);
                    self.untuned = false;
                }
                self.hold(hz, HoldReason::DeadBand);
                return;
            }
        }
        if after_fault && self.faulted.is_some_and(|(t, n)| t == steps && n >= 2) {
            self.hold(hz, HoldReason::Fault);
            return;
        }
        if self.faulted.is_some_and(|(t, _)| t != steps) {
            self.faulted = None;
        }
        self.want = Some(Target {
            hz,
            tune_hz,
            steps,
            manual: false,
            retunes: true,
        });
        self.try_start(now);
    }

    /// Where to tune the loop for `tune_hz` in `band`: halfway to the
    /// frequency a split toggle or an A/B swap would bring
    /// ([`Station::alternate_hz`]) when that lies in the same band and both
    /// are then within the dead band (`hysteresis`) of the point, so the
    /// toggle finds the loop already tuned; else `tune_hz` itself. Off
    /// unless `policy.cover_alternate`.
    fn aim(&self, tune_hz: u64, band: usize, hysteresis: u64) -> u64 {
        if !self.policy.cover_alternate {
            return tune_hz;
        }
        let Some(alternate) = self.station.alternate_hz(self.policy.tune_for) else {
            return tune_hz;
        };
        let alternate = match self.policy.place(alternate) {
            Placement::Inside { band: b } if b == band => alternate,
            Placement::Guard { band: b, edge_hz } if b == band => edge_hz,
            _ => return tune_hz,
        };
        if alternate.abs_diff(tune_hz) > hysteresis.saturating_mul(2) {
            return tune_hz;
        }
        tune_hz.midpoint(alternate)
    }

    /// Starts the wanted move if everything allows it now.
    fn try_start(&mut self, now: Duration) {
        let Some(target) = self.want else { return };
        if self.paused && (!target.manual || self.closing) {
            self.hold(target.hz, HoldReason::Paused);
            return;
        }
        if self.position.is_none() {
            self.hold(
                target.hz,
                if self.fault {
                    HoldReason::Fault
                } else {
                    HoldReason::PositionUnknown
                },
            );
            return;
        }
        if !matches!(self.motion, Motion::Idle) {
            // Picked up when the motor comes to rest.
            return;
        }
        if let Some(reason) = self.rig_blocks() {
            self.defer(reason);
            return;
        }
        if self.inhibit {
            // Already asserted (in the tail of the last move, or for a
            // detuned report): go once it has been on for the lead.
            self.release_at = None;
            let ready = self.inhibit_since + self.policy.inhibit_lead;
            if now >= ready {
                self.start_legs();
            } else {
                self.motion = Motion::Arming { until: ready };
            }
        } else {
            self.assert_inhibit(now);
            self.motion = Motion::Arming {
                until: now + self.policy.inhibit_lead,
            };
            if self.policy.inhibit_lead.is_zero() {
                self.start_legs();
            }
        }
    }

    fn start_legs(&mut self) {
        let (Some(target), Some(from)) = (self.want.take(), self.position) else {
            self.motion = Motion::Idle;
            return;
        };
        if self.rig_blocks().is_some() || !self.inhibit {
            // Not reachable through the public events; kept as a last guard.
            self.want = Some(target);
            self.motion = Motion::Idle;
            return;
        }
        let to = self.policy.clamp(target.steps);
        if to == from {
            self.tuned_hz = Some(target.tune_hz);
            self.untuned = false;
            self.motion = Motion::Idle;
            self.release_at = None;
            self.set_inhibit(false);
            return;
        }
        let legs = self.policy.legs(from, to);
        self.stats.moves += 1;
        self.stats.steps += legs.distance(from);
        self.last_hold = None;
        self.actions.push_back(Action::Move {
            from,
            to,
            hz: target.hz,
            tune_hz: target.tune_hz,
        });
        self.actions.push_back(Action::Goto { steps: legs.first });
        // The capacitor leaves where it was tuned; what it is tuned for is
        // known again when the controller says it reached the target.
        self.tuned_hz = None;
        self.motion = Motion::Moving {
            then: legs.then,
            target: Target {
                steps: to,
                ..target
            },
        };
    }

    /// The motor is at rest: start the next wanted move, or begin the
    /// inhibit tail.
    fn after_rest(&mut self, now: Duration) {
        let may_go = self
            .want
            .is_some_and(|t| !self.paused || (t.manual && !self.closing));
        if may_go && self.rig_blocks().is_none() {
            self.try_start(now);
            if self.is_moving() {
                return;
            }
        }
        // Stopped short of a move that still waits (the rig transmitted or
        // fell silent): the loop is detuned, so with `inhibit_while_detuned`
        // the inhibit stays on until the move is done.
        let stopped_short = self.policy.inhibit_while_detuned && self.want.is_some();
        if self.inhibit
            && self.position.is_some()
            && !self.fault
            && !stopped_short
            && !self.untuned
            && !self.searching()
        {
            self.release_at = Some(now + self.policy.inhibit_tail);
        }
    }

    /// The rig transmits, or cannot be heard: nothing may move. A move
    /// still arming stands down (nothing has moved; the inhibit is never
    /// held against a transmission in progress); a move under way is
    /// stopped (the inhibit did not hold the rig off, or is not wired:
    /// better than moving a capacitor under RF) and its rest waits.
    fn stand_down(&mut self, reason: HoldReason) {
        match self.motion {
            Motion::Arming { .. } => {
                self.motion = Motion::Idle;
                // Nothing has moved; with `inhibit_while_detuned` the loop
                // is still wrong for the frequency, so the inhibit stays;
                // so it does while the loop is known untuned (start, fault,
                // reconnect) or the transmit state is unknown.
                if !self.policy.inhibit_while_detuned
                    && !self.untuned
                    && reason != HoldReason::TransmitUnknown
                {
                    self.set_inhibit(false);
                }
                self.defer(reason);
            }
            Motion::Moving { target, .. } => {
                self.actions.push_back(Action::Stop);
                self.motion = Motion::Stopping;
                if self.want.is_none() {
                    self.want = Some(target);
                }
                self.defer(reason);
            }
            Motion::Idle | Motion::Stopping => {}
        }
    }

    fn defer(&mut self, reason: HoldReason) {
        if let Some(t) = self.want {
            self.hold(t.hz, reason);
        }
    }

    fn hold(&mut self, hz: u64, reason: HoldReason) {
        if self.last_hold == Some((hz, reason)) {
            return;
        }
        self.last_hold = Some((hz, reason));
        self.stats.holds += 1;
        self.actions.push_back(Action::Hold { hz, reason });
    }

    /// Asserts the inhibit, noting when (for the lead before a move).
    fn assert_inhibit(&mut self, now: Duration) {
        if !self.inhibit {
            self.inhibit_since = now;
        }
        self.set_inhibit(true);
    }

    fn set_inhibit(&mut self, on: bool) {
        if !on && self.searching() {
            // A search (a sweep) holds the inhibit from its first move
            // (set) to its end.
            return;
        }
        if self.swr_hold {
            // The alarm's hold decides the line until the over has ended;
            // whatever the core decides meanwhile is given then.
            self.release_after_swr_hold = !on;
            return;
        }
        if self.inhibit != on {
            self.inhibit = on;
            self.actions.push_back(Action::Inhibit { on });
            if !on {
                self.line_set_at = None;
                if std::mem::take(&mut self.command_held_off) {
                    // The line let go: the command's transmission is in
                    // force (the rig goes on the air if still keyed).
                    self.stand_down(HoldReason::Transmitting);
                }
            }
        }
    }
}

#[cfg(test)]
mod held_tests;
#[cfg(test)]
mod jump_tests;
#[cfg(test)]
mod peak_tests;
#[cfg(test)]
mod sweep_tests;
#[cfg(test)]
mod test_support;
#[cfg(test)]
mod tests;
#[cfg(test)]
mod truth_tests;

#[cfg(test)]
#[path = "command_tests.rs"]
mod command_tests;
