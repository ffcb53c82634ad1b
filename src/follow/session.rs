//! The live service's decisions, sans IO: the follow core plus everything
//! the live driver has to decide around it.
//!
//! [`Session`] owns the [`Follower`], the rig's decoder and the
//! controller's protocol state: bringing the journal and the controller's
//! count into line when the link comes up (`ZERO` after a restart, nothing
//! moves after an unfinished move), refusing a move's `GOTO`s when its
//! journal or inhibit write failed, asking `WHERE` again after a fault, the
//! legs under way (for the shutdown's bound on them), relax-on-exit and the
//! whole shutdown sequence. It never reads a clock and does no IO; it
//! imports no async runtime, no command-line parser and no config
//! settings (only `Approach`, which the policy carries).
//!
//! How a driver uses it:
//! - feed every input with the time since the driver's origin: rig bytes
//!   and link state (`handle_rig_*`), controller events
//!   ([`Session::handle_tuner`], [`Session::handle_tuner_gone`]), the
//!   shutdown request, and [`Session::handle_timeout`] once
//!   [`Session::poll_timeout`] is due. Times earlier than one already seen
//!   count as that one: the session's clock never runs backwards;
//! - then drain [`Session::poll_output`] and carry each [`Output`] out in
//!   order. [`Output::Inhibit`], [`Output::JournalIntent`] and
//!   [`Output::JournalPosition`] are writes whose result decides what comes
//!   next: the driver does them synchronously and reports with
//!   [`Session::handle_inhibit_result`] or
//!   [`Session::handle_journal_result`] before it polls again (until then
//!   `poll_output` gives nothing). A driver without a journal answers `Ok`;
//! - stop when [`Session::is_finished`]; [`Session::outcome`] says how it
//!   ended.

use std::collections::VecDeque;
use std::time::Duration;

use super::station::{self, StationEvent};
use super::Approach;
use super::{Command, Effects, Follower, HoldReason, Policy, Refusal, Reply};
use crate::error::IoFailure;
use crate::journal::Recorded;
use crate::rig::{Decode, Direction, RigEvent, Vfo};
use crate::tuner::{HomeSide, TunerCommand, TunerEvent};

/// Why a search or sweep cannot read the band noise here.
const NO_SIGNAL_METER: &str = "the rig's signal meter cannot be read here: it needs a polled rig (mode = \"poll\", or \"proxy\" with poll_ms) whose dialect has a signal-meter read";

/// How long after a fault the session asks `WHERE` again.
pub const RETRY_AFTER: Duration = Duration::from_secs(2);
/// How long shutdown (and relax-on-exit) waits for a stopping motor to
/// report where it is.
pub const STOP_WAIT: Duration = Duration::from_secs(3);
/// The longest travel the session ever waits for.
const TRAVEL_CAP: Duration = Duration::from_secs(3600);

/// What the session needs to know of the controller and the station.
#[derive(Debug, Clone, Copy)]
pub struct SessionSettings {
    pub steps_per_second: f64,
    /// The motor's settle time after the last step.
    pub settle: Duration,
    /// The controller link's allowance on every reply.
    pub reply_margin: Duration,
    /// At a clean shutdown after a completed approach, back off half the
    /// backlash toward the approach side.
    pub relax_on_exit: bool,
    /// The counts this controller can report after a restart (power-on
    /// counts: 0 for a controller board, the lower limit for the direct
    /// drive, the simulator's start). Only a differing count among these
    /// is taken for a restart and given the journal's position with `ZERO`.
    pub restart_counts: [i64; 3],
    /// The station's home switch (`[tuner] home`), if it has one: with it,
    /// a position found unknown is recovered by a homing run.
    pub home: Option<HomeSettings>,
}

/// A home switch: where it is and how to run to it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct HomeSettings {
    /// The end of the travel the switch is at.
    pub side: HomeSide,
    /// The count the switch's position is given.
    pub position: i64,
    /// Homing speed, steps/s (slow: the switch must not be overrun).
    pub speed: u32,
}

/// How many homing runs the session tries before it leaves the position
/// to the operator (a run that fails by a fault, not by `ERR`: a
/// controller answering `ERR` has no switch and is not asked again).
pub const HOME_ATTEMPTS: u32 = 3;

impl SessionSettings {
    /// Time to travel `distance` steps and settle, plus the reply margin.
    fn travel(&self, distance: u64) -> Duration {
        crate::tuner::travel_time(distance, self.steps_per_second, TRAVEL_CAP)
            + self.settle
            + self.reply_margin
    }
}

/// What the driver is asked to do, in order.
#[derive(Debug, Clone, PartialEq)]
pub enum Output {
    /// Send to the controller link.
    Command(TunerCommand),
    /// Set the inhibit output; answer with [`Session::handle_inhibit_result`].
    Inhibit { on: bool },
    /// Record (fsync) the intent of the leg about to be sent (an unfinished
    /// move: [`Recorded::Unknown`] or [`Recorded::Approach`]), or
    /// [`Recorded::Lost`] before a homing run and after an end stop;
    /// answer with [`Session::handle_journal_result`].
    JournalIntent(Recorded),
    /// Record (fsync) the position at rest; answer with
    /// [`Session::handle_journal_result`].
    JournalPosition { steps: i64 },
    /// Tell the controller link's interlock whether the rig transmits (or
    /// cannot be heard).
    Transmit { on: bool },
    /// Store a calibration point candidate, if there is somewhere to.
    Candidate {
        hz: u64,
        steps: i64,
        profile: Option<String>,
        /// From a noise-peak search: the fitted resonance curve.
        fit: Option<crate::calibrate::resonance::ResonanceFit>,
    },
    /// The controller said which power-on it is in (`BOOT`; `None`: it
    /// cannot say): every journal record from now on carries it.
    ControllerBoot { id: Option<i64> },
    /// Write to the rig's port (in `poll` mode between polls; in `proxy`
    /// mode between the other program's messages): a calibration sweep's
    /// frequency set, `hz` on `vfo`, already encoded in the rig's dialect.
    RigWrite { bytes: Vec<u8>, vfo: Vfo, hz: u64 },
    /// A log line.
    Log(Note),
}

/// Encodes "set `vfo` (the VFO the rig receives on) to `hz`" in the rig's
/// dialect (see [`Session::with_frequency_set`]).
pub type FrequencySet = Box<dyn Fn(Vfo, u64) -> Vec<u8> + Send>;

/// How loud a note is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Level {
    Debug,
    Info,
    Warn,
    Error,
}

/// One log line, as data: the driver writes it (with tracing, fields as
/// fields).
#[derive(Debug, Clone, PartialEq)]
pub enum Note {
    /// A line without fields.
    Plain {
        level: Level,
        text: &'static str,
    },
    JournalKnown {
        position: i64,
    },
    JournalUnfinished {
        unfinished: Recorded,
    },
    /// The controller's report after an unfinished move is trusted.
    Trusted {
        steps: i64,
        why: &'static str,
    },
    /// At exit the motor was not confirmed at rest: the inhibit stays on.
    InhibitKept,
    /// The position is unknown and the station has a home switch: a
    /// homing run starts (the inhibit held).
    HomeBegin {
        side: HomeSide,
        position: i64,
        speed: u32,
        attempt: u32,
    },
    /// The controller says the home switch closed: the count is `steps`.
    Homed {
        steps: i64,
    },
    /// The controller has no home switch (it answered `ERR`), or the
    /// homing runs failed: the position stays unknown.
    HomeGivenUp {
        why: String,
    },
    /// An `AT` nobody asked for, at rest, differing from the known
    /// position: the count changed behind the session's back.
    CountChanged {
        known: i64,
        controller: i64,
    },
    /// An end-stop switch stopped the motor: the count is not trusted.
    LimitHit {
        side: HomeSide,
        steps: i64,
    },
    Inhibit {
        on: bool,
    },
    InhibitFailed {
        on: bool,
        error: IoFailure,
    },
    /// The sense line could not be read: taken as transmitting.
    SenseFailed {
        error: IoFailure,
    },
    ReleaseFailed {
        error: IoFailure,
    },
    Settled {
        hz: u64,
    },
    Hold {
        hz: u64,
        reason: HoldReason,
    },
    Move {
        from: i64,
        to: i64,
        hz: u64,
        tune_hz: u64,
    },
    IntentFailed {
        error: IoFailure,
    },
    GotoBlocked {
        steps: i64,
    },
    GotoWithoutInhibit {
        steps: i64,
    },
    Candidate {
        hz: u64,
        steps: i64,
        profile: Option<String>,
    },
    /// A noise-peak search began at `hz` over `low..=high` steps.
    PeakStarted {
        hz: u64,
        low: i64,
        high: i64,
        positions: usize,
    },
    /// A noise-peak search ended; `found`: with a candidate.
    PeakEnded {
        words: String,
        found: bool,
    },
    /// The controller's answer to `BOOT`, against the journal's.
    Boot {
        controller: Option<i64>,
        journal: Option<i64>,
    },
    /// The rig is asked to set `vfo` to `hz` (a calibration sweep).
    RigSet {
        vfo: Vfo,
        hz: u64,
    },
    /// A calibration sweep of `band` began, to search `points`.
    SweepStarted {
        band: String,
        points: Vec<u64>,
    },
    /// A calibration sweep ended; `clean`: every point searched and the
    /// rig's frequency given back as it was.
    SweepEnded {
        words: String,
        clean: bool,
    },
    PositionFailed {
        error: IoFailure,
    },
    /// Bytes the decoder held when the port dropped.
    RigRejectedAtDrop {
        reason: &'static str,
        bytes: usize,
    },
    RigRejected {
        reason: &'static str,
        bytes: usize,
    },
    /// Only rejects from the rig for a while: the likely causes, once per
    /// spell (a warning).
    OnlyRejects {
        hint: super::quiet::QuietHint,
    },
    LinkDown {
        reason: String,
    },
    Accepted {
        target: i64,
    },
    LinkError {
        text: String,
    },
    ZeroNotTaken {
        wanted: i64,
        got: i64,
    },
    Untrusted {
        steps: i64,
    },
    CountDiffers {
        journal: i64,
        controller: i64,
    },
    /// The controller's count differs from a clean journal and is no count
    /// it restarts from: position unknown.
    CountNoRestart {
        journal: i64,
        controller: i64,
    },
    PositionUnknown {
        from: i64,
        to: i64,
        controller: i64,
    },
    ShutdownFinishing {
        wait_ms: u64,
    },
    LinkDownInShutdown {
        reason: String,
    },
    RelaxNothing {
        tensioned: bool,
        backlash: i64,
    },
    RelaxInhibitFailed {
        error: IoFailure,
    },
    RelaxIntentFailed {
        error: IoFailure,
    },
    RelaxBegin {
        from: i64,
        to: i64,
    },
    /// The rig started or stopped transmitting (as its reports say).
    Transmit {
        on: bool,
    },
    /// A move ended with the motor at rest here.
    Arrived {
        steps: i64,
    },
    /// The SWR watch's alarm: the SWR stayed above `[swr_watch] alarm` for
    /// the hold; `inhibit`: the inhibit is asserted to end the over.
    SwrAlarm {
        swr: f64,
        inhibit: bool,
    },
    /// An over ended: the SWR seen.
    SwrOver {
        hz: Option<u64>,
        reads: usize,
        max_swr: Option<f64>,
        median_swr: Option<f64>,
    },
    /// Overs running read more than the model predicts: re-peak.
    SwrDrift {
        overs: usize,
        seen: f64,
        predicted: f64,
    },
    /// An operator command and what became of it (`Status` is not noted).
    Command {
        name: &'static str,
        reply: Reply,
    },
}

fn plain(level: Level, text: &'static str) -> Output {
    Output::Log(Note::Plain { level, text })
}

/// How a session ended.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct RunSummary {
    /// Where the motor was at rest at the end, if known.
    pub position: Option<i64>,
    /// Moves the core started.
    pub moves: u64,
    /// Faults seen (controller link, inhibit, journal).
    pub faults: u64,
    /// Times a timer of the session's own was due (a core deadline or a
    /// `WHERE` retry); with no traffic and nothing due this stays 0.
    pub timer_wakeups: u64,
    /// The journal keeps an unfinished move: where the motor is was not
    /// confirmed by the controller (the exit status says so).
    pub unconfirmed: bool,
}

/// Where the session is in bringing its position in line with the
/// controller's.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Resync {
    Idle,
    /// The next `At` answers a `WHERE`. After the link came (back) up the
    /// controller may have restarted, so its answer is checked against the
    /// journal; after a fault with the link up all along it is taken.
    AwaitWhere {
        after_link_up: bool,
    },
    /// `ZERO p` was sent; waiting for `At p`.
    AwaitZero(i64),
    /// The position cannot be trusted (unfinished move in the journal):
    /// positions reported are ignored until the link comes up again.
    Blocked,
}

/// One leg sent to the controller.
#[derive(Debug, Clone, Copy)]
struct Leg {
    from: i64,
    to: i64,
    sent: Duration,
}

/// The write whose result the session waits for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Awaiting {
    CoreInhibit {
        on: bool,
    },
    StartRelease,
    MoveIntent(Recorded),
    /// The final leg's intent; its `GOTO` goes once it is on disk.
    LegIntent {
        intent: Recorded,
        steps: i64,
    },
    Position {
        steps: i64,
    },
    /// `state=lost` before a homing run (its `HOME` goes once on disk), or
    /// after an end stop (`home: false`).
    LostIntent {
        home: bool,
    },
    RelaxInhibit {
        from: i64,
        to: i64,
    },
    RelaxIntent {
        from: i64,
        to: i64,
    },
    FinalRelease,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Phase {
    /// The core's first actions, then the inhibit synced to it.
    Starting,
    Running,
    /// Shutdown asked: no new targets; the move under way may finish.
    Finishing {
        since: Duration,
        announced: bool,
    },
    /// Shutdown sent `STOP`; waiting for where the motor stopped.
    StopWait {
        until: Duration,
    },
    /// The move is over (or given up on): relax, or close.
    AfterMove,
    RelaxStart,
    /// The inhibit was asserted for the relaxing move; its lead runs.
    RelaxLead {
        until: Duration,
        from: i64,
        to: i64,
    },
    /// A write for the relaxing move is out; its result decides.
    RelaxAsked,
    /// The relaxing `GOTO` is under way.
    RelaxMoving {
        until: Duration,
    },
    /// The relaxing move overran and was stopped.
    RelaxStopWait {
        until: Duration,
    },
    /// Record the position.
    Closing,
    /// The inhibit tail of the last move's arrival runs out.
    Tail {
        until: Duration,
    },
    /// Release the inhibit.
    Release,
    Finished,
}

impl Phase {
    /// The core's actions are carried out (and its timers run) only until
    /// the shutdown has given up on the move under way.
    fn follows(self) -> bool {
        matches!(
            self,
            Phase::Starting | Phase::Running | Phase::Finishing { .. }
        )
    }
}

/// The state beside the core (split off so that the core's actions can be
/// applied to it through [`Effects`] while the core is borrowed).
struct Shell {
    settings: SessionSettings,
    /// How to set the rig's frequency, where it can be (a sweep).
    frequency_set: Option<FrequencySet>,
    /// The controller's power-on number the journal on disk was written
    /// in (from the file at start, then from each write).
    journal_boot: Option<i64>,
    /// The controller's answer to `BOOT` on this connection (`None`: not
    /// answered yet, or it has none).
    controller_boot: Option<i64>,
    /// The core's policy (for a move's legs).
    policy: Policy,
    inhibit_lead: Duration,
    /// When the inhibit output last returned from being set *on*: no
    /// `GOTO` leaves earlier than `inhibit_lead` after it.
    inhibit_set_at: Option<Duration>,
    /// A `GOTO` held back until the inhibit's lead has passed.
    pending_goto: Option<(i64, Duration)>,
    /// The controller's last word was `AT` (the motor at rest) and no
    /// `GOTO` has been sent since.
    at_rest: bool,
    /// When the last move of the core ended with its arrival.
    last_arrival: Option<Duration>,
    /// Since the link came up, the controller said (`MOVING`) that the
    /// motor was on its way to this target: a stop on that leg's path
    /// (the link's interlock `STOP`) then lands on the path.
    resync_moving_to: Option<i64>,
    /// The inhibit output has accepted *on* and not been set off since.
    inhibit_on: bool,
    /// The core held a transmit command off under the inhibit line when
    /// last asked: its release puts the command's transmission in force.
    command_held: bool,
    /// What the journal says (kept in step with every write).
    recorded: Option<Recorded>,
    resync: Resync,
    /// Set after a failed journal or inhibit write: the `GOTO`s of that
    /// move are not sent.
    block_gotos: bool,
    retry_where: Option<Duration>,
    unknown_reported: bool,
    leg: Option<Leg>,
    final_to: Option<i64>,
    /// The last move ended with its final approach: the drive train is
    /// under tension toward the approach side.
    tensioned: bool,
    /// Shutdown requested: frequencies are no longer acted on.
    stopping: bool,
    /// The position is unknown and a homing run is to start as soon as the
    /// rig is known to receive, the inhibit is on and its lead has passed.
    home_wanted: bool,
    /// A `HOME` was sent; its `HOMED` is awaited.
    homing: bool,
    /// Homing runs started.
    home_attempts: u32,
    /// The controller answered `ERR` to `HOME` (it has no switch), or every
    /// attempt failed: not asked again.
    home_refused: bool,
    /// The controller link's task is gone.
    link_gone: bool,
    phase: Phase,
    now: Duration,
    /// The core's position when the action being applied was taken.
    core_position: Option<i64>,
    /// A fault raised while applying an action (`ask_again`).
    fault_request: Option<bool>,
    out: VecDeque<(Output, Option<Awaiting>)>,
    awaiting: Option<Awaiting>,
    outcome: RunSummary,
}

impl Shell {
    fn push(&mut self, o: Output) {
        self.out.push_back((o, None));
    }
    fn ask(&mut self, o: Output, a: Awaiting) {
        self.out.push_back((o, Some(a)));
    }
    fn note(&mut self, n: Note) {
        self.push(Output::Log(n));
    }

    /// Whether the controller is in the same power-on as when the journal
    /// was written: `None` when either side cannot say (a version 2
    /// controller, a journal without `boot=`).
    fn same_boot(&self) -> Option<bool> {
        Some(self.journal_boot? == self.controller_boot?)
    }

    /// `steps` lies on the straight path of `r`'s leg under way, past its
    /// start, and is no count a controller starts from after a restart
    /// ([`SessionSettings::restart_counts`]): a controller that
    /// reports the leg's start never moved or lost its count, and one that
    /// reports a power-on count may have restarted, so neither is proof.
    fn on_leg_path(&self, r: Recorded, steps: i64) -> bool {
        r.leg_path()
            .is_some_and(|p| p.contains(steps) && steps != p.start)
            && !self.settings.restart_counts.contains(&steps)
    }

    /// Sends a leg's `GOTO`, or holds it back until `inhibit_lead` has
    /// passed since the inhibit line was actually set.
    fn send_goto(&mut self, now: Duration, steps: i64) {
        let due = self.inhibit_set_at.map_or(now, |t| t + self.inhibit_lead);
        if now < due {
            self.pending_goto = Some((steps, due));
            return;
        }
        self.leg = Some(Leg {
            from: self.core_position.unwrap_or(steps),
            to: steps,
            sent: now,
        });
        self.at_rest = false;
        self.push(Output::Command(TunerCommand::Goto(steps)));
    }
}

/// The live service's decisions. See the module documentation.
pub struct Session {
    core: Follower,
    decoder: Box<dyn Decode>,
    events: Vec<RigEvent>,
    quiet: super::quiet::RejectWatch,
    st: Shell,
    /// The SWR watch (`[swr_watch]`), with the dialect's SWR-meter scale.
    swr: Option<SwrWatching>,
    /// The dialect's signal-meter scale, where the rig's signal meter can
    /// be read (for the noise-peak search).
    signal: Option<crate::rig::meter::MeterScale>,
}

/// The SWR watch as the session runs it.
#[derive(Debug)]
struct SwrWatching {
    watch: super::swr_watch::SwrWatch,
    scale: crate::rig::meter::MeterScale,
    /// The last reading of the current (or last) over.
    last: Option<f64>,
    /// The alarm of the current (or last) over.
    alarm: Option<f64>,
    /// Drift reported (seen, predicted), until an over reads within the
    /// margin or a noise peak finds the loop.
    drift: Option<(f64, f64)>,
    /// The watch's drift margin (SWR over the prediction).
    margin: f64,
}

impl Session {
    /// A session for `core` (made with `position: None`: the position comes
    /// from the controller and the journal), decoding the rig's bytes with
    /// `decoder`; `recorded` is what the journal said at start (`None`:
    /// none yet, or no journal). The inhibit line is taken to have opened
    /// asserted.
    pub fn new(
        core: Follower,
        decoder: Box<dyn Decode>,
        recorded: Option<Recorded>,
        settings: SessionSettings,
    ) -> Session {
        let inhibit_lead = core.policy().inhibit_lead;
        let mut st = Shell {
            settings,
            frequency_set: None,
            journal_boot: None,
            controller_boot: None,
            policy: core.policy().clone(),
            inhibit_lead,
            // Opened asserted before the session began.
            inhibit_set_at: Some(Duration::ZERO),
            pending_goto: None,
            at_rest: false,
            last_arrival: None,
            resync_moving_to: None,
            inhibit_on: true,
            command_held: false,
            recorded,
            resync: Resync::Idle,
            block_gotos: false,
            retry_where: None,
            unknown_reported: false,
            leg: None,
            final_to: None,
            tensioned: false,
            stopping: false,
            home_wanted: false,
            homing: false,
            home_attempts: 0,
            home_refused: false,
            link_gone: false,
            phase: Phase::Starting,
            now: Duration::ZERO,
            core_position: None,
            fault_request: None,
            out: VecDeque::new(),
            awaiting: None,
            outcome: RunSummary::default(),
        };
        st.note(match recorded {
            Some(Recorded::Known(p)) => Note::JournalKnown { position: p },
            Some(unfinished) => Note::JournalUnfinished { unfinished },
            None => Note::Plain {
                level: Level::Info,
                text: "journal: none yet; the controller's count will be taken",
            },
        });
        if core.rig_may_transmit() {
            // Nothing says the rig receives and nothing protects a move:
            // the controller link's own interlock refuses moves too.
            st.push(Output::Transmit { on: true });
        }
        Session {
            core,
            decoder,
            events: Vec::with_capacity(16),
            quiet: super::quiet::RejectWatch::new(),
            st,
            swr: None,
            signal: None,
        }
    }

    /// The rig's signal meter can be read (a polled rig whose dialect has
    /// the read): the driver reads it while [`Session::poll_signal_meter`]
    /// says so, and the readings (raw, through `scale`) go to the core's
    /// noise-peak search.
    pub fn with_signal_meter(mut self, scale: crate::rig::meter::MeterScale) -> Session {
        self.signal = Some(scale);
        self
    }

    /// The journal at start was written while the controller was in its
    /// power-on `boot` (a `format=3` journal's `boot=`).
    pub fn with_journal_boot(mut self, boot: Option<i64>) -> Session {
        self.st.journal_boot = boot;
        self
    }

    /// The rig's frequency can be set (a polled rig whose dialect has a
    /// frequency set): a calibration sweep may run, with the operator's
    /// consent; `set` encodes each set.
    pub fn with_frequency_set(mut self, set: FrequencySet) -> Session {
        self.st.frequency_set = Some(set);
        self
    }

    /// Whether the rig's signal meter should be read now: a noise-peak
    /// search waits for a reading.
    pub fn poll_signal_meter(&self) -> bool {
        self.signal.is_some() && self.core.wants_signal_meter()
    }

    /// Watches the SWR during every transmission (`[swr_watch]`): the
    /// driver reads the SWR meter while [`Session::poll_swr_meter`] says
    /// so, and the session hands the readings (raw, through `scale`, the
    /// dialect's) to the watch. An alarm is logged; with `action =
    /// Inhibit` and a line wired the core asserts the inhibit, held until
    /// the over is over.
    pub fn with_swr_watch(
        mut self,
        settings: super::swr_watch::SwrWatchSettings,
        scale: crate::rig::meter::MeterScale,
    ) -> Session {
        self.swr = Some(SwrWatching {
            margin: settings.drift_margin,
            watch: super::swr_watch::SwrWatch::new(settings),
            scale,
            last: None,
            alarm: None,
            drift: None,
        });
        self
    }

    /// Whether the rig's SWR meter should be read now: an SWR watch runs
    /// and the rig transmits.
    pub fn poll_swr_meter(&self) -> bool {
        self.swr.is_some() && self.core.transmitting()
    }

    /// A report of the SWR watch: logged; an alarm asking for the inhibit
    /// goes to the core.
    fn swr_report(&mut self, now: Duration, report: super::swr_watch::SwrReport) {
        use super::swr_watch::SwrReport;
        match report {
            SwrReport::Alarm { swr, inhibit, .. } => {
                if let Some(w) = self.swr.as_mut() {
                    w.alarm = Some(swr);
                }
                self.st.note(Note::SwrAlarm { swr, inhibit });
                if inhibit {
                    self.core.handle_swr_alarm(now);
                }
            }
            SwrReport::Over(o) => {
                if let (Some(w), Some(m), Some(p)) = (self.swr.as_mut(), o.median_swr, o.predicted)
                {
                    if o.reads >= 3 && m - p <= w.margin {
                        w.drift = None;
                    }
                }
                self.st.note(Note::SwrOver {
                    hz: o.hz,
                    reads: o.reads,
                    max_swr: o.max_swr,
                    median_swr: o.median_swr,
                })
            }
            SwrReport::Drift {
                overs,
                seen,
                predicted,
            } => {
                if let Some(w) = self.swr.as_mut() {
                    w.drift = Some((seen, predicted));
                }
                self.st.note(Note::SwrDrift {
                    overs,
                    seen,
                    predicted,
                })
            }
        }
    }

    /// The rig started or stopped transmitting: the watch's over begins or
    /// ends (and with it an alarm's hold on the inhibit).
    fn swr_transmit(&mut self, now: Duration, on: bool) {
        if self.swr.is_none() {
            return;
        }
        if on {
            let hz = self.core.station().transmit_hz();
            let predicted = self.core.status().swr.and_then(|c| c.at.map(|p| p.swr));
            if let Some(w) = self.swr.as_mut() {
                w.last = None;
                w.alarm = None;
                w.watch.handle_transmit_on(now, hz, predicted);
            }
        } else {
            let reports = match self.swr.as_mut() {
                Some(w) => w.watch.handle_transmit_off(now),
                None => Vec::new(),
            };
            for r in reports {
                self.swr_report(now, r);
            }
            self.core.end_swr_hold();
        }
    }

    /// A meter reading from the rig.
    fn meter(&mut self, now: Duration, kind: crate::rig::meter::MeterKind, raw: u16) {
        use crate::rig::meter::MeterKind;
        if kind == MeterKind::Signal {
            if let Some(scale) = &self.signal {
                let db = scale.value(raw);
                self.core.handle_signal_meter(now, db);
            }
            return;
        }
        if kind != MeterKind::Swr {
            return;
        }
        let report = match self.swr.as_mut() {
            Some(w) => {
                let swr = w.scale.value(raw);
                w.last = Some(swr);
                w.watch.handle_reading(now, swr)
            }
            None => None,
        };
        if let Some(r) = report {
            self.swr_report(now, r);
        }
    }

    fn clock(&mut self, now: Duration) -> Duration {
        self.st.now = self.st.now.max(now);
        self.st.now
    }

    // ----- events in -------------------------------------------------------

    /// Bytes from the rig's port, read at `now`.
    pub fn handle_rig_bytes(&mut self, now: Duration, dir: Direction, bytes: &[u8]) {
        let now = self.clock(now);
        let mut out = std::mem::take(&mut self.events);
        out.clear();
        self.decoder.feed_at(now, dir, bytes, &mut out);
        if dir == Direction::Rx {
            // Bytes from the rig and never a report: say why it may be
            // (once a spell). The other program's unknown commands in
            // proxy mode say nothing about the port's settings.
            if let Some(hint) = self.quiet.chunk(now, bytes.len(), &out) {
                self.st.note(Note::OnlyRejects { hint });
            }
        }
        for (i, ev) in out.iter().enumerate() {
            if let RigEvent::Reject { reason, bytes } = *ev {
                self.st.note(Note::RigRejected {
                    reason: reason.as_str(),
                    bytes,
                });
                continue;
            }
            if let RigEvent::Meter { kind, raw } = *ev {
                self.meter(now, kind, raw);
                continue;
            }
            let Some(sev) = station::from_rig(ev, out.get(i + 1), false) else {
                continue;
            };
            // Shutting down: no new targets (what the rig transmits, and
            // which VFO transmits, still counts).
            if self.st.stopping && matches!(sev, StationEvent::Frequency { .. }) {
                continue;
            }
            self.set_station(now, sev);
        }
        // Whatever the chunk made due now (a set seen going to the rig)
        // settles once, on where the chunk's messages left the station.
        self.core.handle_timeout(now);
        self.events = out;
    }

    /// The rig's port went down: the core holds (`rig-silent`) and the
    /// controller link refuses and stops moves as if the rig transmitted.
    pub fn handle_rig_down(&mut self, now: Duration) {
        let now = self.clock(now);
        self.st.push(Output::Transmit { on: true });
        self.core.handle_rig_link(now, false);
    }

    /// The rig's port is (back) up.
    pub fn handle_rig_up(&mut self, now: Duration) {
        let now = self.clock(now);
        // Bytes the decoder still holds belong to the connection that
        // ended: `finish` turns them into rejects, so that a frame torn by
        // the drop is never joined to the new connection's bytes. Rejects
        // decide nothing; they are logged as on any read.
        let mut stale = Vec::new();
        self.decoder.finish(&mut stale);
        // A new connection: its rejects start a spell of their own.
        self.quiet.report();
        for ev in &stale {
            if let RigEvent::Reject { reason, bytes } = *ev {
                self.st.note(Note::RigRejectedAtDrop {
                    reason: reason.as_str(),
                    bytes,
                });
            }
        }
        // Whatever the rig did while the port was down went unheard: its
        // transmit state is unknown (never taken as receive) until a report,
        // a poll answer or the sense line says otherwise.
        self.core.handle_station(now, StationEvent::TransmitUnknown);
        self.core.handle_rig_link(now, true);
        // An over the watch saw is no longer known to go on.
        if !self.core.transmitting() {
            self.swr_transmit(now, false);
        }
        self.st.push(Output::Transmit {
            on: self.core.rig_may_transmit(),
        });
    }

    /// The hardware transmit-sense line read at `now`: `Ok(on)` its level
    /// (transmitting or not), `Err` a failed read, taken as transmitting
    /// until the line reads again (fail-safe). The core takes the line as
    /// the authority for "the rig transmits" (see `follow::station`).
    pub fn handle_sense(&mut self, now: Duration, reading: Result<bool, IoFailure>) {
        let now = self.clock(now);
        let on = match reading {
            Ok(on) => on,
            Err(error) => {
                self.st.note(Note::SenseFailed { error });
                true
            }
        };
        self.set_station(
            now,
            StationEvent::Transmit {
                on,
                source: station::Source::SenseLine,
            },
        );
    }

    /// Whether a poll should read the other VFO too: the rig works split,
    /// so the transmit VFO is not the one the plain poll reads.
    pub fn poll_other_vfo(&self) -> bool {
        self.core.station().split()
    }

    /// The rig's source ended for good: nothing moves from now on.
    pub fn handle_rig_ended(&mut self, now: Duration) {
        self.st.push(plain(
            Level::Warn,
            "rig source ended; nothing moves from now on",
        ));
        self.handle_rig_down(now);
    }

    /// Hands the core what was learnt of the station; the controller
    /// link's own interlock is told whether the rig transmits, or may.
    fn set_station(&mut self, now: Duration, ev: StationEvent) {
        let before = self.core.rig_may_transmit();
        let was_transmitting = self.core.transmitting();
        self.core.handle_station(now, ev);
        let after = self.core.rig_may_transmit();
        let transmitting = self.core.transmitting();
        if transmitting != was_transmitting {
            self.st.note(Note::Transmit { on: transmitting });
            self.swr_transmit(now, transmitting);
        }
        if matches!(ev, StationEvent::Transmit { .. }) || before != after {
            self.st.push(Output::Transmit { on: after });
        }
        self.st.command_held = self.core.command_held_off();
    }

    /// After one of the core's actions: a transmit command the core held
    /// off under the inhibit line is in force once the line is released,
    /// so the rig transmits (if still keyed) from then on, for the log,
    /// the SWR watch and the controller link's own interlock.
    fn held_command_released(&mut self, now: Duration) {
        if !self.st.command_held || self.core.command_held_off() {
            return;
        }
        self.st.command_held = false;
        if self.core.transmitting() {
            self.st.note(Note::Transmit { on: true });
            self.swr_transmit(now, true);
            self.st.push(Output::Transmit {
                on: self.core.rig_may_transmit(),
            });
        }
    }

    /// An event from the controller link.
    pub fn handle_tuner(&mut self, now: Duration, ev: TunerEvent) {
        let now = self.clock(now);
        match ev {
            TunerEvent::At { .. } | TunerEvent::Homed { .. } | TunerEvent::Limit { .. } => {
                self.st.at_rest = true
            }
            TunerEvent::Accepted { .. } | TunerEvent::Homing => self.st.at_rest = false,
            _ => {}
        }
        match self.st.phase {
            p if p.follows() => self.tuner_event(now, ev),
            Phase::StopWait { .. } | Phase::RelaxMoving { .. } | Phase::RelaxStopWait { .. } => {
                match ev {
                    TunerEvent::At { steps } => self.waited(now, Some(steps)),
                    TunerEvent::LinkDown { reason } => {
                        self.st.note(Note::LinkDownInShutdown { reason });
                        self.waited(now, None);
                    }
                    TunerEvent::Error { text } => {
                        self.st.note(Note::LinkError { text });
                        self.waited(now, None);
                    }
                    _ => {}
                }
            }
            // Nothing is asked of the controller now.
            _ => {}
        }
    }

    /// The controller link's task ended (its channel closed).
    pub fn handle_tuner_gone(&mut self, now: Duration) {
        let now = self.clock(now);
        self.st.link_gone = true;
        if matches!(self.st.phase, Phase::Starting | Phase::Running) {
            self.st
                .push(plain(Level::Error, "controller link task ended"));
            self.st.phase = Phase::Release;
        }
        let _ = now;
    }

    /// SIGINT/SIGTERM: stop acting on frequencies; let the move under way
    /// finish (or stop it once its leg's travel time has passed); relax if
    /// asked; record the position; release the inhibit.
    pub fn handle_shutdown(&mut self, now: Duration) {
        let now = self.clock(now);
        if self.st.stopping {
            return;
        }
        self.st.stopping = true;
        self.core.handle_closing(now);
        if matches!(self.st.phase, Phase::Starting | Phase::Running) {
            self.st.phase = Phase::Finishing {
                since: now,
                announced: false,
            };
        }
    }

    /// An operator command, from any front end: the core decides it (see
    /// [`Follower::handle_command`]); once shutdown was asked only `Status`
    /// is answered. Drain [`Session::poll_output`] afterwards as after any
    /// event: a move it asked for comes out as the same outputs as any other.
    pub fn handle_command(&mut self, now: Duration, cmd: Command) -> Reply {
        let now = self.clock(now);
        let name = cmd.name();
        let reply = match cmd {
            Command::Status => return Reply::Status(Box::new(self.status())),
            _ if self.st.stopping || !self.st.phase.follows() => {
                Reply::Refused(Refusal::ShuttingDown)
            }
            Command::Peak if self.signal.is_none() => Reply::Refused(Refusal::CannotPeak {
                why: NO_SIGNAL_METER.to_string(),
            }),
            // Consent first: nothing else is worth saying without it.
            Command::Calibrate { consent: false, .. } => Reply::Refused(Refusal::NeedsConsent),
            Command::Calibrate { .. } if self.signal.is_none() => {
                Reply::Refused(Refusal::CannotSweep {
                    why: NO_SIGNAL_METER.to_string(),
                })
            }
            Command::Calibrate { .. } if self.st.frequency_set.is_none() => {
                Reply::Refused(Refusal::CannotSweep {
                    why: "this rig's dialect has no frequency set the sweep could send (the fixed-block family names no VFO)".to_string(),
                })
            }
            cmd => self.core.handle_command(now, cmd),
        };
        self.st.note(Note::Command {
            name,
            reply: reply.clone(),
        });
        reply
    }

    /// Time has passed: act on whatever is due.
    pub fn handle_timeout(&mut self, now: Duration) {
        let now = self.clock(now);
        match self.st.phase {
            p if p.follows() => {
                let mut woke = false;
                if self.st.retry_where.is_some_and(|t| now >= t) {
                    self.st.retry_where = None;
                    self.st.push(Output::Command(TunerCommand::Where));
                    woke = true;
                }
                if let Some((steps, due)) = self.st.pending_goto {
                    if now >= due {
                        self.st.pending_goto = None;
                        woke = true;
                        if self.core.is_moving() && self.st.inhibit_on && !self.st.block_gotos {
                            self.st.send_goto(now, steps);
                        }
                    }
                }
                if self.core.poll_timeout().is_some_and(|t| now >= t) {
                    self.core.handle_timeout(now);
                    woke = true;
                }
                let alarm = self
                    .swr
                    .as_mut()
                    .filter(|w| w.watch.poll_timeout().is_some_and(|t| now >= t))
                    .and_then(|w| w.watch.handle_timeout(now));
                if let Some(r) = alarm {
                    self.swr_report(now, r);
                    woke = true;
                }
                if woke {
                    self.st.outcome.timer_wakeups += 1;
                }
                if matches!(p, Phase::Finishing { .. })
                    && self.core.is_moving()
                    && now >= self.move_deadline()
                {
                    self.overrun();
                }
            }
            Phase::StopWait { until }
            | Phase::RelaxMoving { until }
            | Phase::RelaxStopWait { until }
                if now >= until =>
            {
                self.waited(now, None)
            }
            Phase::RelaxLead { until, from, to } if now >= until => {
                self.st.phase = Phase::RelaxAsked;
                self.st.ask(
                    Output::JournalIntent(Recorded::Unknown { from, to }),
                    Awaiting::RelaxIntent { from, to },
                );
            }
            Phase::Tail { until } if now >= until => self.st.phase = Phase::Release,
            _ => {}
        }
    }

    /// The result of the last [`Output::Inhibit`].
    pub fn handle_inhibit_result(&mut self, now: Duration, result: Result<(), IoFailure>) {
        let now = self.clock(now);
        let Some(a) = self.st.awaiting.take() else {
            return;
        };
        match (a, result) {
            (Awaiting::CoreInhibit { on }, Ok(())) => {
                if on && !self.st.inhibit_on {
                    // The lead counts from here, when the line is set.
                    self.st.inhibit_set_at = Some(now);
                }
                self.st.inhibit_on = on;
                if on {
                    // The core's own lead for a transmit command held off
                    // by the line counts from the same moment.
                    self.core
                        .handle_inhibit_set(self.st.inhibit_set_at.unwrap_or(now));
                }
                self.st.note(Note::Inhibit { on });
            }
            (Awaiting::CoreInhibit { on }, Err(error)) => {
                self.st.inhibit_on = false;
                self.st.note(Note::InhibitFailed { on, error });
                if on {
                    self.st.block_gotos = true;
                    self.fault(now, true);
                }
            }
            (Awaiting::StartRelease, Ok(())) | (Awaiting::FinalRelease, Ok(())) => {
                self.st.inhibit_on = false;
                self.st.note(Note::Inhibit { on: false });
            }
            (Awaiting::StartRelease, Err(error)) => {
                self.st.note(Note::InhibitFailed { on: false, error })
            }
            (Awaiting::FinalRelease, Err(error)) => self.st.note(Note::ReleaseFailed { error }),
            (Awaiting::RelaxInhibit { from, to }, Ok(())) => {
                self.st.inhibit_on = true;
                self.st.inhibit_set_at = Some(now);
                self.st.note(Note::Inhibit { on: true });
                self.st.phase = Phase::RelaxLead {
                    until: now + self.st.inhibit_lead,
                    from,
                    to,
                };
            }
            (Awaiting::RelaxInhibit { .. }, Err(error)) => {
                self.st.note(Note::RelaxInhibitFailed { error });
                self.st.phase = Phase::Closing;
            }
            // Not an answer to an inhibit write: still waiting for that.
            (other, _) => self.st.awaiting = Some(other),
        }
    }

    /// The result of the last [`Output::JournalIntent`] or
    /// [`Output::JournalPosition`].
    pub fn handle_journal_result(&mut self, now: Duration, result: Result<(), IoFailure>) {
        let now = self.clock(now);
        let Some(a) = self.st.awaiting.take() else {
            return;
        };
        if result.is_ok()
            && matches!(
                a,
                Awaiting::MoveIntent(_)
                    | Awaiting::LegIntent { .. }
                    | Awaiting::Position { .. }
                    | Awaiting::LostIntent { .. }
                    | Awaiting::RelaxIntent { .. }
            )
        {
            // Every record is written with the controller's power-on now.
            self.st.journal_boot = self.st.controller_boot;
        }
        match (a, result) {
            (Awaiting::MoveIntent(intent), Ok(())) => {
                self.st.recorded = Some(intent);
                if self.st.inhibit_on {
                    self.st.block_gotos = false;
                } else {
                    self.st.push(plain(
                        Level::Error,
                        "move without a confirmed transmit inhibit; not moving",
                    ));
                    self.st.block_gotos = true;
                    self.fault(now, true);
                }
            }
            (Awaiting::MoveIntent(_) | Awaiting::LegIntent { .. }, Err(error)) => {
                self.st.note(Note::IntentFailed { error });
                self.st.block_gotos = true;
                self.fault(now, true);
            }
            (Awaiting::LegIntent { intent, steps }, Ok(())) => {
                self.st.recorded = Some(intent);
                if self.st.inhibit_on && !self.st.block_gotos && self.core.is_moving() {
                    self.st.send_goto(now, steps);
                } else if !self.st.inhibit_on {
                    self.st.note(Note::GotoWithoutInhibit { steps });
                    self.st.block_gotos = true;
                    self.fault(now, true);
                }
            }
            (Awaiting::LostIntent { home }, Ok(())) => {
                self.st.recorded = Some(Recorded::Lost);
                if let Some(h) = self.st.settings.home.filter(|_| home) {
                    self.st.home_attempts += 1;
                    self.st.note(Note::HomeBegin {
                        side: h.side,
                        position: h.position,
                        speed: h.speed,
                        attempt: self.st.home_attempts,
                    });
                    self.st.homing = true;
                    self.st.at_rest = false;
                    self.st.push(Output::Command(TunerCommand::Home {
                        side: h.side,
                        position: h.position,
                        speed: h.speed,
                    }));
                }
            }
            (Awaiting::LostIntent { home }, Err(error)) => {
                self.st.note(Note::IntentFailed { error });
                if home {
                    // No homing run without its record on disk.
                    self.st.home_refused = true;
                    self.st.note(Note::HomeGivenUp {
                        why: "the journal could not be written".to_string(),
                    });
                }
            }
            (Awaiting::Position { steps }, Ok(())) => {
                self.st.recorded = Some(Recorded::Known(steps))
            }
            // What is on disk is unchanged (atomic rename): still the
            // intent, which is the cautious reading.
            (Awaiting::Position { .. }, Err(error)) => self.st.note(Note::PositionFailed { error }),
            (Awaiting::RelaxIntent { from, to }, Ok(())) => {
                self.st.recorded = Some(Recorded::Unknown { from, to });
                self.st.note(Note::RelaxBegin { from, to });
                self.st.tensioned = false;
                self.st.at_rest = false;
                self.st.push(Output::Command(TunerCommand::Goto(to)));
                self.st.phase = Phase::RelaxMoving {
                    until: now + self.st.settings.travel(from.abs_diff(to)),
                };
            }
            (Awaiting::RelaxIntent { .. }, Err(error)) => {
                self.st.note(Note::RelaxIntentFailed { error });
                self.st.phase = Phase::Closing;
            }
            (other, _) => self.st.awaiting = Some(other),
        }
    }

    // ----- work out --------------------------------------------------------

    /// The next thing for the driver to do, in order. `None` when there is
    /// nothing (or while a write's result is awaited).
    pub fn poll_output(&mut self) -> Option<Output> {
        loop {
            if self.st.awaiting.is_some() {
                return None;
            }
            if let Some((o, a)) = self.st.out.pop_front() {
                self.st.awaiting = a;
                return Some(o);
            }
            if self.st.phase.follows() {
                if let Some(action) = self.core.poll_action() {
                    let now = self.st.now;
                    self.st.core_position = self.core.position();
                    // A noise peak found the loop where it resonates: the
                    // drift reported against the old calibration is over.
                    if matches!(
                        action,
                        super::Action::PeakEnded {
                            outcome: super::peak::PeakOutcome::Candidate(_)
                        }
                    ) {
                        if let Some(w) = self.swr.as_mut() {
                            w.drift = None;
                        }
                    }
                    let Ok(()) = super::apply(&mut self.st, now, action);
                    if let Some(ask_again) = self.st.fault_request.take() {
                        self.fault(now, ask_again);
                    }
                    self.held_command_released(now);
                    continue;
                }
            }
            if self.maybe_home() {
                continue;
            }
            if !self.advance() {
                return None;
            }
        }
    }

    /// When [`Session::handle_timeout`] is next needed, if ever.
    pub fn poll_timeout(&self) -> Option<Duration> {
        match self.st.phase {
            p if p.follows() => {
                let finishing = match p {
                    Phase::Finishing { .. } if self.core.is_moving() => Some(self.move_deadline()),
                    _ => None,
                };
                [
                    self.core.poll_timeout(),
                    self.st.retry_where,
                    finishing,
                    self.st.pending_goto.map(|(_, due)| due),
                    self.home_due().filter(|due| *due > self.st.now),
                    self.swr.as_ref().and_then(|w| w.watch.poll_timeout()),
                ]
                .into_iter()
                .flatten()
                .min()
            }
            Phase::StopWait { until }
            | Phase::RelaxMoving { until }
            | Phase::RelaxStopWait { until }
            | Phase::RelaxLead { until, .. }
            | Phase::Tail { until } => Some(until),
            _ => None,
        }
    }

    /// The shutdown is complete (or the controller link is gone and the
    /// inhibit released): the driver can stop.
    pub fn is_finished(&self) -> bool {
        self.st.phase == Phase::Finished && self.st.out.is_empty() && self.st.awaiting.is_none()
    }

    /// How the session stands (final once [`Session::is_finished`]).
    pub fn outcome(&self) -> RunSummary {
        RunSummary {
            position: self.core.position(),
            moves: self.core.stats().moves,
            unconfirmed: self.st.recorded.is_some_and(|r| r.is_unfinished())
                || self.st.resync == Resync::Blocked,
            ..self.st.outcome.clone()
        }
    }

    /// The state, as `Status` answers it.
    pub fn status(&self) -> super::Status {
        let mut s = self.core.status();
        s.shutting_down |= self.st.stopping;
        if let Some(w) = &self.swr {
            s.swr_read = w.last;
            s.swr_alarm = w.alarm;
            s.swr_drift = w.drift;
        }
        s
    }

    /// The core, for inspection.
    pub fn core(&self) -> &Follower {
        &self.core
    }

    /// What the session takes the journal to say.
    pub fn recorded(&self) -> Option<Recorded> {
        self.st.recorded
    }

    /// The inhibit output has accepted *on* and not been set off since.
    pub fn inhibit_on(&self) -> bool {
        self.st.inhibit_on
    }

    /// The last move ended with its final approach.
    pub fn tensioned(&self) -> bool {
        self.st.tensioned
    }

    // ----- decisions ---------------------------------------------------------

    fn tuner_event(&mut self, now: Duration, ev: TunerEvent) {
        match ev {
            TunerEvent::Boot { id } => {
                self.st.controller_boot = id;
                self.st.note(Note::Boot {
                    controller: id,
                    journal: self.st.journal_boot,
                });
                self.st.push(Output::ControllerBoot { id });
            }
            TunerEvent::LinkUp => {
                self.st.controller_boot = None;
                self.st.resync_moving_to = None;
                self.st.resync = Resync::AwaitWhere {
                    after_link_up: true,
                }
            }
            TunerEvent::LinkDown { reason } => {
                self.st.note(Note::LinkDown { reason });
                // A homing run cut short is tried again once the link is
                // back and the journal (`lost`) is checked again.
                self.st.homing = false;
                self.fault(now, false);
            }
            TunerEvent::Accepted { target } => {
                if self.st.resync
                    == (Resync::AwaitWhere {
                        after_link_up: true,
                    })
                {
                    self.st.resync_moving_to = Some(target);
                }
                self.st.note(Note::Accepted { target })
            }
            TunerEvent::InterlockStop => self.st.push(plain(
                Level::Warn,
                "rig transmitted during a move; the controller link stopped the motor",
            )),
            TunerEvent::Error { text }
                if self.st.homing && text.starts_with("controller refused") =>
            {
                // A version 1 controller, or one without a switch.
                self.st.homing = false;
                self.st.home_refused = true;
                self.st.note(Note::HomeGivenUp {
                    why: format!("the controller has no home switch ({text})"),
                });
            }
            TunerEvent::Error { text } => {
                self.st.note(Note::LinkError { text });
                if self.core.is_moving() {
                    // A refused or failed leg: the core would wait for an
                    // arrival that will not come.
                    self.fault(now, true);
                }
            }
            TunerEvent::At { steps } => self.tuner_at(now, steps),
            ev @ (TunerEvent::Homing | TunerEvent::Homed { .. } | TunerEvent::Limit { .. }) => {
                self.home_event(now, ev)
            }
        }
    }

    fn tuner_at(&mut self, now: Duration, steps: i64) {
        {
            match self.st.resync {
                Resync::AwaitWhere {
                    after_link_up: true,
                } => self.resync_where(now, steps),
                Resync::AwaitWhere {
                    after_link_up: false,
                } => {
                    self.st.resync = Resync::Idle;
                    self.accept(now, steps);
                }
                Resync::AwaitZero(p) => {
                    self.st.resync = Resync::Idle;
                    if steps == p {
                        self.accept(now, steps);
                    } else {
                        self.st.note(Note::ZeroNotTaken {
                            wanted: p,
                            got: steps,
                        });
                        // Check against the journal again (and re-send ZERO).
                        self.st.resync = Resync::AwaitWhere {
                            after_link_up: true,
                        };
                        self.fault(now, true);
                    }
                }
                Resync::Blocked => self.st.note(Note::Untrusted { steps }),
                Resync::Idle
                    if !self.core.is_moving()
                        && self.core.position().is_some_and(|p| p != steps) =>
                {
                    // Nothing was asked and nothing moves, yet the count
                    // changed: a restart or lost steps. Neither the count
                    // nor the old position is taken; the journal keeps the
                    // last confirmed one.
                    let known = self.core.position().unwrap_or(steps);
                    self.st.note(Note::CountChanged {
                        known,
                        controller: steps,
                    });
                    self.fault(now, false);
                    self.position_lost();
                }
                Resync::Idle => {
                    let was_moving = self.core.is_moving();
                    self.core.handle_arrived(now, steps);
                    if was_moving && !self.core.is_moving() {
                        self.st.note(Note::Arrived { steps });
                    }
                    if !self.core.is_moving() {
                        if was_moving {
                            self.st.last_arrival = Some(now);
                        }
                        self.st.tensioned = self.st.final_to == Some(steps);
                        self.st.leg = None;
                        self.st.final_to = None;
                        self.record_position(steps);
                    }
                }
            }
        }
    }

    fn resync_where(&mut self, now: Duration, steps: i64) {
        self.st.resync = Resync::Idle;
        match self.st.recorded {
            Some(Recorded::Known(p))
                if p != steps
                    && self.st.settings.restart_counts.contains(&steps)
                    && self.st.same_boot() != Some(true) =>
            {
                self.st.note(Note::CountDiffers {
                    journal: p,
                    controller: steps,
                });
                self.st.resync = Resync::AwaitZero(p);
                self.st.push(Output::Command(TunerCommand::Zero(p)));
            }
            Some(Recorded::Known(p)) if p != steps => {
                // Not a count it restarts from: it lost steps, or the motor
                // was moved while we were away. No ZERO: nothing moves.
                if !self.st.unknown_reported {
                    self.st.unknown_reported = true;
                    self.st.note(Note::CountNoRestart {
                        journal: p,
                        controller: steps,
                    });
                }
                self.position_lost();
            }
            Some(r) if r.is_unfinished() => self.check_unfinished(now, steps),
            _ => self.accept(now, steps),
        }
    }

    /// The controller, at rest, says `steps` after the link came up; the
    /// journal holds an unfinished move. A target of its legs is where the
    /// motor can be. A point on the straight path of the leg under way is
    /// trusted only when the controller was seen moving along that leg
    /// since the link came up (`MOVING` to its target) and then stopped
    /// (the link's interlock `STOP`): a motor found already at rest part
    /// way along is no proof, since a controller restarted with another
    /// count, or one that lost steps, reports just that. Anything else is
    /// evidence that counts were lost (or the controller restarted), and
    /// the position stays unknown.
    fn check_unfinished(&mut self, now: Duration, steps: i64) {
        let Some(r) = self.st.recorded.filter(|r| r.is_unfinished()) else {
            self.accept(now, steps);
            return;
        };
        // A count a controller has after a restart proves nothing when it
        // happens to be a leg target too (a move to the lower limit, and a
        // board that restarted mid-move counting from 0): trusted only when
        // the controller was seen moving to it since the link came up.
        // The same power-on of the controller as when the journal was
        // written (`BOOT` says so): its count went on from the move's start,
        // so where it rests is where the motor is.
        let same_boot = self.st.same_boot() == Some(true);
        let power_on = self.st.settings.restart_counts.contains(&steps)
            && self.st.resync_moving_to != Some(steps)
            && !same_boot;
        if r.leg_targets().contains(&steps) && !power_on {
            self.st.note(Note::Trusted {
                steps,
                why: "the controller reports a target of the unfinished move's legs",
            });
            self.accept(now, steps);
        } else if self.st.on_leg_path(r, steps)
            && r.leg_path().map(|p| p.end) == self.st.resync_moving_to
        {
            self.st.note(Note::Trusted {
                steps,
                why: "stopped on the straight path of the leg under way, seen moving along it",
            });
            self.accept(now, steps);
        } else if same_boot && self.st.on_leg_path(r, steps) {
            self.st.note(Note::Trusted {
                steps,
                why: "at rest on the straight path of the leg under way, in the same power-on of the controller (BOOT) as the journal",
            });
            self.accept(now, steps);
        } else {
            if !self.st.unknown_reported {
                self.st.unknown_reported = true;
                match r {
                    Recorded::Unknown { from, to } | Recorded::Approach { from, to, .. } => {
                        self.st.note(Note::PositionUnknown {
                            from,
                            to,
                            controller: steps,
                        })
                    }
                    Recorded::Known(_) | Recorded::Lost => self.st.push(plain(
                        Level::Error,
                        "position unknown: the journal says the count was lost (an end stop, or a homing run that did not finish)",
                    )),
                }
            }
            self.position_lost();
        }
    }

    /// The position cannot be trusted: nothing moves until the operator
    /// says where the motor is, or, with a home switch, a homing run has.
    fn position_lost(&mut self) {
        self.st.resync = Resync::Blocked;
        if self.st.settings.home.is_none() || self.st.home_refused || self.st.homing {
            return;
        }
        if self.st.home_attempts >= HOME_ATTEMPTS {
            self.st.home_refused = true;
            self.st.note(Note::HomeGivenUp {
                why: format!("{HOME_ATTEMPTS} homing runs did not end with HOMED"),
            });
            return;
        }
        self.st.home_wanted = true;
    }

    /// When a wanted homing run may go: the inhibit's lead after the line
    /// was set.
    fn home_due(&self) -> Option<Duration> {
        self.st
            .home_wanted
            .then(|| self.st.inhibit_set_at.map(|t| t + self.st.inhibit_lead))
            .flatten()
    }

    /// Starts the wanted homing run once it may go ahead: running, not
    /// shutting down, the inhibit on (and its lead passed), the rig known
    /// not to transmit (or moves allowed while that is unknown), no move
    /// under way. The journal says `lost` before the `HOME` leaves.
    fn maybe_home(&mut self) -> bool {
        let st = &self.st;
        if !st.home_wanted
            || st.stopping
            || st.link_gone
            || st.phase != Phase::Running
            || !st.inhibit_on
            || self.core.rig_may_transmit()
            || self.core.is_moving()
            || self.home_due().is_some_and(|due| st.now < due)
        {
            return false;
        }
        self.st.home_wanted = false;
        self.st.ask(
            Output::JournalIntent(Recorded::Lost),
            Awaiting::LostIntent { home: true },
        );
        true
    }

    /// The controller's word on a homing run, or an end stop.
    fn home_event(&mut self, now: Duration, ev: TunerEvent) {
        match ev {
            TunerEvent::Homing => self.st.push(plain(
                Level::Info,
                "homing: the controller runs toward the home switch",
            )),
            TunerEvent::Homed { steps } if self.st.homing => {
                self.st.homing = false;
                self.st.resync = Resync::Idle;
                self.st.unknown_reported = false;
                self.st.home_attempts = 0;
                self.st.note(Note::Homed { steps });
                // The homed position goes on disk, confirmed, before the
                // core acts on it.
                self.st.block_gotos = false;
                self.record_position(steps);
                self.core.handle_arrived(now, steps);
            }
            TunerEvent::Homed { steps } => self.st.note(Note::Untrusted { steps }),
            TunerEvent::Limit { side, steps } => {
                self.st.homing = false;
                self.st.note(Note::LimitHit { side, steps });
                self.fault(now, false);
                self.st.ask(
                    Output::JournalIntent(Recorded::Lost),
                    Awaiting::LostIntent { home: false },
                );
                self.position_lost();
            }
            _ => {}
        }
    }

    /// The position is trusted again.
    fn accept(&mut self, now: Duration, steps: i64) {
        self.st.block_gotos = false;
        self.core.handle_arrived(now, steps);
        if !self.core.is_moving() {
            self.record_position(steps);
        }
    }

    fn record_position(&mut self, steps: i64) {
        // Written again when only the controller's power-on changed, so
        // that the next start compares with this one.
        if self.st.recorded != Some(Recorded::Known(steps))
            || self.st.journal_boot != self.st.controller_boot
        {
            self.st.ask(
                Output::JournalPosition { steps },
                Awaiting::Position { steps },
            );
        }
    }

    /// Something failed: the core stops trusting the position; with
    /// `ask_again` the session asks `WHERE` after a pause.
    fn fault(&mut self, now: Duration, ask_again: bool) {
        let st = &mut self.st;
        st.outcome.faults += 1;
        st.pending_goto = None;
        st.leg = None;
        st.final_to = None;
        st.tensioned = false;
        self.core.handle_fault(now);
        if ask_again {
            // Keep a stricter check already pending.
            if matches!(st.resync, Resync::Idle) {
                st.resync = Resync::AwaitWhere {
                    after_link_up: false,
                };
            }
            st.retry_where = Some(now + RETRY_AFTER);
        }
    }

    /// When the move under way should have ended: the current leg's travel
    /// from when it was sent, plus settle time and half the reply margin,
    /// so that our `STOP` goes out before the controller link would call
    /// the slow move a fault (at the full margin). Before the first leg
    /// (the inhibit lead), the lead plus the margin from when shutdown was
    /// asked.
    fn move_deadline(&self) -> Duration {
        let s = self.st.settings;
        match (self.st.leg, self.st.phase) {
            (Some(leg), _) => {
                let run = s.travel(leg.from.abs_diff(leg.to));
                leg.sent + run.saturating_sub(s.reply_margin / 2)
            }
            (None, Phase::Finishing { since, .. }) => since + self.st.inhibit_lead + s.reply_margin,
            (None, _) => self.st.now + self.st.inhibit_lead + s.reply_margin,
        }
    }

    /// Shutdown gave up waiting for the move under way.
    fn overrun(&mut self) {
        self.st.push(plain(
            Level::Warn,
            "shutting down: the move did not finish in time; stopping the motor",
        ));
        self.st.tensioned = false;
        self.st.pending_goto = None;
        self.st.push(Output::Command(TunerCommand::Stop));
        // A controller that does not take the STOP may still finish the
        // leg and say so: wait out the leg's remaining travel time plus the
        // margin (at least STOP_WAIT) before giving up on knowing.
        let s = self.st.settings;
        let leg_end = self.st.leg.map_or(Duration::ZERO, |leg| {
            leg.sent + s.travel(leg.from.abs_diff(leg.to)) + s.reply_margin
        });
        self.st.phase = Phase::StopWait {
            until: (self.st.now + STOP_WAIT).max(leg_end),
        };
    }

    /// A shutdown wait for `At` ended: with where the motor is, or not.
    fn waited(&mut self, now: Duration, at: Option<i64>) {
        match (self.st.phase, at) {
            (Phase::StopWait { .. }, Some(steps)) => {
                // The motor came to rest now: the tail counts from here.
                self.st.last_arrival = Some(now);
                self.core.handle_arrived(now, steps);
                self.record_position(steps);
                self.st.phase = Phase::AfterMove;
            }
            (Phase::StopWait { .. }, None) => {
                self.st.push(plain(Level::Error, "shutting down: the controller did not say where the motor stopped; the journal keeps the unfinished move (position unknown at next start)"));
                // The core still holds the position the move started from;
                // recording that at the close would hide the unfinished move.
                self.fault(now, false);
                self.st.phase = Phase::AfterMove;
            }
            (Phase::RelaxMoving { .. } | Phase::RelaxStopWait { .. }, Some(steps)) => {
                // The relaxing move is a move: its tail is honoured too.
                self.st.last_arrival = Some(now);
                self.core.handle_arrived(now, steps);
                self.record_position(steps);
                self.st.phase = Phase::Closing;
            }
            (Phase::RelaxMoving { .. }, None) => {
                self.st.push(plain(
                    Level::Warn,
                    "relax on exit: no arrival in time; stopping the motor",
                ));
                self.st.push(Output::Command(TunerCommand::Stop));
                self.st.phase = Phase::RelaxStopWait {
                    until: now + STOP_WAIT,
                };
            }
            (Phase::RelaxStopWait { .. }, None) => {
                self.st.push(plain(Level::Error, "relax on exit: the controller did not say where the motor is; the journal keeps the unfinished move"));
                self.fault(now, false);
                self.st.phase = Phase::Closing;
            }
            _ => {}
        }
    }

    /// `relax_on_exit`: after a move that ended with its final approach,
    /// back off half the backlash toward the approach side (within the
    /// limits), under the inhibit and through the journal like any move.
    fn relax_start(&mut self) {
        self.st.phase = Phase::Closing;
        let policy = self.core.policy();
        let half = policy.backlash_steps / 2;
        let Some(p) = self.core.position() else {
            self.st.push(plain(
                Level::Info,
                "relax on exit: skipped, position unknown",
            ));
            return;
        };
        if !self.st.tensioned || half == 0 {
            let backlash = policy.backlash_steps;
            self.st.note(Note::RelaxNothing {
                tensioned: self.st.tensioned,
                backlash,
            });
            return;
        }
        if self.core.rig_may_transmit() {
            self.st.push(plain(
                Level::Info,
                "relax on exit: skipped, the rig is transmitting (or may be)",
            ));
            return;
        }
        let to = policy.clamp(match policy.approach {
            Approach::Up => p - half,
            Approach::Down => p + half,
        });
        if to == p {
            return;
        }
        if self.st.inhibit_on {
            self.st.ask(
                Output::JournalIntent(Recorded::Unknown { from: p, to }),
                Awaiting::RelaxIntent { from: p, to },
            );
        } else {
            self.st.ask(
                Output::Inhibit { on: true },
                Awaiting::RelaxInhibit { from: p, to },
            );
        }
        self.st.phase = Phase::RelaxAsked;
    }

    /// Moves the phase on once nothing else is to be done; `false` when it
    /// stays as it is.
    fn advance(&mut self) -> bool {
        let now = self.st.now;
        match self.st.phase {
            Phase::Starting => {
                self.st.phase = Phase::Running;
                if !self.core.inhibit() {
                    // The journal gave a trusted position: nothing to hold
                    // the rig off for.
                    self.st
                        .ask(Output::Inhibit { on: false }, Awaiting::StartRelease);
                }
                true
            }
            Phase::Running => false,
            Phase::Finishing {
                since,
                announced: false,
            } => {
                self.st.phase = Phase::Finishing {
                    since,
                    announced: true,
                };
                if self.core.is_moving() {
                    let wait_ms = self.move_deadline().saturating_sub(now).as_millis() as u64;
                    self.st.note(Note::ShutdownFinishing { wait_ms });
                } else {
                    self.st.push(plain(
                        Level::Info,
                        "shutting down: no new targets; the motor is at rest",
                    ));
                    self.st.phase = Phase::AfterMove;
                }
                true
            }
            Phase::Finishing { .. } if !self.core.is_moving() => {
                self.st.phase = Phase::AfterMove;
                true
            }
            Phase::Finishing { .. } if self.st.link_gone => {
                self.overrun();
                true
            }
            Phase::StopWait { .. } | Phase::RelaxMoving { .. } | Phase::RelaxStopWait { .. }
                if self.st.link_gone =>
            {
                self.waited(now, None);
                true
            }
            Phase::AfterMove => {
                self.st.phase = if self.st.settings.relax_on_exit {
                    Phase::RelaxStart
                } else {
                    Phase::Closing
                };
                true
            }
            Phase::RelaxStart => {
                self.relax_start();
                true
            }
            Phase::Closing => {
                // The tail after the last move's arrival is honoured.
                let tail = self
                    .st
                    .last_arrival
                    .map(|t| t + self.core.policy().inhibit_tail)
                    .filter(|until| *until > now);
                self.st.phase = match tail {
                    Some(until) if self.st.inhibit_on => Phase::Tail { until },
                    _ => Phase::Release,
                };
                if let Some(p) = self.core.position() {
                    self.record_position(p);
                }
                true
            }
            Phase::Tail { .. } if self.st.link_gone => {
                self.st.phase = Phase::Release;
                true
            }
            Phase::Release => {
                self.st.phase = Phase::Finished;
                if (self.st.inhibit_on || self.core.inhibit()) && !self.st.at_rest {
                    // The motor may still be turning: a fail-safe line
                    // stays asserted when the process lets go of it.
                    self.st.note(Note::InhibitKept);
                } else if self.st.inhibit_on || self.core.inhibit() {
                    self.st
                        .ask(Output::Inhibit { on: false }, Awaiting::FinalRelease);
                }
                true
            }
            _ => false,
        }
    }
}

/// The core's actions turned into the session's outputs and decisions.
impl Effects for Shell {
    type Error = std::convert::Infallible;

    fn inhibit(&mut self, _now: Duration, on: bool) -> Result<(), Self::Error> {
        self.ask(Output::Inhibit { on }, Awaiting::CoreInhibit { on });
        Ok(())
    }

    fn settled(&mut self, _now: Duration, hz: u64) -> Result<(), Self::Error> {
        self.note(Note::Settled { hz });
        Ok(())
    }

    fn hold(&mut self, _now: Duration, hz: u64, reason: HoldReason) -> Result<(), Self::Error> {
        self.note(Note::Hold { hz, reason });
        Ok(())
    }

    fn begin_move(
        &mut self,
        _now: Duration,
        from: i64,
        to: i64,
        hz: u64,
        tune_hz: u64,
    ) -> Result<(), Self::Error> {
        self.note(Note::Move {
            from,
            to,
            hz,
            tune_hz,
        });
        self.final_to = Some(to);
        self.tensioned = false;
        // The first leg's intent: every leg target and the move's start.
        let legs = self.policy.legs(from, to);
        let intent = match legs.then {
            Some(_) => Recorded::Approach {
                from,
                via: legs.first,
                to,
                final_leg: false,
            },
            None => Recorded::Unknown { from, to },
        };
        self.ask(Output::JournalIntent(intent), Awaiting::MoveIntent(intent));
        Ok(())
    }

    fn goto(&mut self, now: Duration, steps: i64) -> Result<(), Self::Error> {
        if self.block_gotos {
            self.note(Note::GotoBlocked { steps });
        } else if !self.inhibit_on {
            self.note(Note::GotoWithoutInhibit { steps });
            self.block_gotos = true;
            self.fault_request = Some(true);
        } else if let Some(Recorded::Approach {
            from,
            via,
            to,
            final_leg: false,
        }) = self.recorded.filter(|_| self.final_to == Some(steps))
        {
            // The final leg: the controller has said the motor is at the
            // overshoot; that goes on disk before the leg is sent.
            let intent = Recorded::Approach {
                from,
                via,
                to,
                final_leg: true,
            };
            self.ask(
                Output::JournalIntent(intent),
                Awaiting::LegIntent { intent, steps },
            );
        } else {
            self.send_goto(now, steps);
        }
        Ok(())
    }

    fn stop(&mut self, _now: Duration) -> Result<(), Self::Error> {
        self.tensioned = false;
        self.pending_goto = None;
        self.leg = None;
        self.push(Output::Command(TunerCommand::Stop));
        Ok(())
    }

    fn candidate(
        &mut self,
        _now: Duration,
        hz: u64,
        steps: i64,
        profile: Option<String>,
        fit: Option<crate::calibrate::resonance::ResonanceFit>,
    ) -> Result<(), Self::Error> {
        self.note(Note::Candidate {
            hz,
            steps,
            profile: profile.clone(),
        });
        self.push(Output::Candidate {
            hz,
            steps,
            profile,
            fit,
        });
        Ok(())
    }

    fn peak(
        &mut self,
        _now: Duration,
        news: crate::follow::effects::PeakNews,
    ) -> Result<(), Self::Error> {
        use crate::follow::effects::PeakNews;
        self.note(match news {
            PeakNews::Started {
                hz,
                low,
                high,
                positions,
            } => Note::PeakStarted {
                hz,
                low,
                high,
                positions,
            },
            PeakNews::Ended(outcome) => Note::PeakEnded {
                found: matches!(outcome, crate::follow::peak::PeakOutcome::Candidate(_)),
                words: outcome.to_string(),
            },
        });
        Ok(())
    }

    fn set_rig_frequency(&mut self, _now: Duration, vfo: Vfo, hz: u64) -> Result<(), Self::Error> {
        let bytes = self.frequency_set.as_ref().map(|set| set(vfo, hz));
        match bytes.filter(|b| !b.is_empty()) {
            Some(bytes) => {
                self.note(Note::RigSet { vfo, hz });
                self.push(Output::RigWrite { bytes, vfo, hz });
            }
            // The session refuses a sweep without a way to set the rig;
            // nothing is sent if one asks all the same.
            None => self.note(Note::Plain {
                level: Level::Error,
                text:
                    "a frequency set was asked, but this rig link cannot set the rig; nothing sent",
            }),
        }
        Ok(())
    }

    fn sweep(
        &mut self,
        _now: Duration,
        news: crate::follow::effects::SweepNews,
    ) -> Result<(), Self::Error> {
        use crate::follow::effects::SweepNews;
        use crate::follow::sweep::{Restore, SweepEnd};
        self.note(match news {
            SweepNews::Started { band, points } => Note::SweepStarted { band, points },
            SweepNews::Ended(outcome) => Note::SweepEnded {
                clean: outcome.end == SweepEnd::Completed && outcome.restore == Restore::Confirmed,
                words: outcome.to_string(),
            },
        });
        Ok(())
    }
}

#[cfg(test)]
#[path = "session_tests.rs"]
mod tests;
