//! The virtual-time driver: feeds a capture through a decoder into the
//! follow core and carries the core's actions out on a simulated tuner, as
//! fast as the CPU allows.
//!
//! Time comes from the capture; between two records the driver jumps from
//! one deadline to the next (the core's own, or the simulated tuner's
//! arrival), so a day's capture replays in a moment and every decision
//! happens at the virtual time it would have happened live.
//!
//! Besides driving, the replay keeps its own count of the safety rules (no
//! `GOTO` while the rig transmits or without the inhibit, nothing outside the
//! limits): an independent check on the core, reported as `violations`.

use std::sync::Arc;
use std::time::Duration;

use crate::calibrate::StepMap;
use crate::follow::{station, Effects, Follower, HoldReason, Policy, WhileUnknown};
use crate::rig::{Decode, Direction, RigEvent};
use crate::timeline::{Entry, Summary, Timeline};
use crate::tuner::sim::{SimParams, SimTuner};

/// What a replay needs besides its input.
pub struct ReplaySetup {
    pub policy: Policy,
    pub map: Arc<dyn StepMap>,
    pub decoder: Box<dyn Decode>,
    pub tuner: SimParams,
    /// Where the motor starts; `None` = unknown (nothing will move).
    pub start_steps: Option<i64>,
    /// The station has a hardware transmit-sense line (`[transmit_sense]`):
    /// the capture's `sense` records are the authority for transmissions.
    pub sense_wired: bool,
}

/// One chunk of bytes on the rig port, at a time since any origin.
#[derive(Debug, Clone)]
pub struct Chunk<'a> {
    pub t: Duration,
    pub dir: Direction,
    pub bytes: &'a [u8],
}

/// Drives one replay. Feed it chunks in time order with [`Replay::feed`],
/// then call [`Replay::finish`].
pub struct Replay<'t> {
    core: Follower,
    decoder: Box<dyn Decode>,
    tuner: SimTuner,
    /// When the simulated tuner will report that it is at rest.
    arrival: Option<Duration>,
    timeline: &'t mut dyn Timeline,
    origin: Option<Duration>,
    now: Duration,
    events: Vec<RigEvent>,
    summary: Summary,
    inhibit: bool,
    transmitting: bool,
    /// The sense line's last reading, for the independent count: while it
    /// reads transmitting, nothing else ends the transmission.
    sense_on: bool,
    transmit_since: Option<Duration>,
    /// An inhibit line is wired (the policy moves under it while the
    /// transmit state is unknown): a transmit command that reaches the rig
    /// while the line has been set for `inhibit_lead` cannot put it on the
    /// air.
    line_wired: bool,
    /// Since when the inhibit line is set, while it is.
    inhibit_since: Option<Duration>,
    /// A transmit command is held off by the line: on the air (for the
    /// independent count) only once the line is released.
    command_held: bool,
}

impl<'t> Replay<'t> {
    pub fn new(setup: ReplaySetup, timeline: &'t mut dyn Timeline) -> Self {
        let start = setup.start_steps;
        let tuner = SimTuner::new(setup.tuner, start.unwrap_or(setup.policy.min_steps));
        let line_wired = setup.policy.while_unknown == WhileUnknown::MoveUnderInhibit
            && setup.policy.line_holds_commands;
        let mut core = Follower::new(setup.policy, setup.map, start);
        if setup.sense_wired {
            core.expect_sense_line();
        }
        Replay {
            core,
            decoder: setup.decoder,
            tuner,
            arrival: None,
            timeline,
            origin: None,
            now: Duration::ZERO,
            events: Vec::with_capacity(16),
            summary: Summary::default(),
            inhibit: false,
            transmitting: false,
            sense_on: false,
            transmit_since: None,
            line_wired,
            inhibit_since: None,
            command_held: false,
        }
    }

    /// A reading of the hardware sense line at capture time `t` (a
    /// capture's `sense` record): the rig transmits (`on`) or not.
    pub fn feed_sense(&mut self, t: Duration, on: bool) -> std::io::Result<()> {
        let origin = *self.origin.get_or_insert(t);
        let t = t.saturating_sub(origin).max(self.now);
        self.advance_to(t)?;
        self.now = t;
        self.sense_on = on;
        self.timeline.entry(t, &Entry::Transmit { on })?;
        self.count_transmit(on);
        self.core.handle_station(
            t,
            station::StationEvent::Transmit {
                on,
                source: station::Source::SenseLine,
            },
        );
        self.apply_actions()
    }

    /// Keeps the independent count of time on the air: a transmission
    /// starts on any source's word and ends on a receive, except that while
    /// the sense line reads transmitting only the line ends it.
    fn count_transmit(&mut self, on: bool) {
        self.command_held = false;
        let now = self.now;
        let on = on || self.sense_on;
        if on != self.transmitting {
            self.transmitting = on;
            if on {
                self.transmit_since = Some(now);
            } else if let Some(since) = self.transmit_since.take() {
                self.summary.transmit_s += now.saturating_sub(since).as_secs_f64();
            }
        }
    }

    /// The next chunk of the capture. Times before the previous chunk's are
    /// taken as equal to it (the capture reader refuses them anyway).
    pub fn feed(&mut self, chunk: Chunk<'_>) -> std::io::Result<()> {
        let origin = *self.origin.get_or_insert(chunk.t);
        let t = chunk.t.saturating_sub(origin).max(self.now);
        self.advance_to(t)?;
        self.now = t;
        let mut events = std::mem::take(&mut self.events);
        events.clear();
        self.decoder.feed_at(t, chunk.dir, chunk.bytes, &mut events);
        for (i, ev) in events.iter().enumerate() {
            self.rig_event(*ev, events.get(i + 1))?;
        }
        // A set seen going to the rig is due now: it settles once, on where
        // the chunk's messages left the station.
        self.core.handle_timeout(self.now);
        self.events = events;
        self.apply_actions()
    }

    /// Runs out every deadline still pending (a settling frequency, a move,
    /// the inhibit tail), writes the summary and returns it.
    pub fn finish(mut self) -> std::io::Result<Summary> {
        // Bytes the decoder still holds at the end of the input (a pending run
        // of rejected bytes, an unfinished frame) are reported, not lost.
        let mut events = std::mem::take(&mut self.events);
        events.clear();
        self.decoder.finish(&mut events);
        for (i, ev) in events.iter().enumerate() {
            self.rig_event(*ev, events.get(i + 1))?;
        }
        self.events = events;
        self.apply_actions()?;
        // Every pending deadline is finite: debounce, lead, travel, tail,
        // candidate dwell. Bound the loop all the same.
        for _ in 0..10_000 {
            let Some(next) = self.next_deadline() else {
                break;
            };
            self.advance_to(next)?;
        }
        if let Some(since) = self.transmit_since.take() {
            self.summary.transmit_s += (self.now.saturating_sub(since)).as_secs_f64();
        }
        let stats = self.core.stats();
        self.summary.moves = stats.moves;
        self.summary.steps = self.tuner.travelled();
        let summary = self.summary.clone();
        self.timeline
            .entry(self.now, &Entry::Summary(summary.clone()))?;
        Ok(summary)
    }

    /// Counts one malformed capture line passed over (reported in the
    /// summary as `bad_lines`).
    pub fn skip_bad_line(&mut self) {
        self.summary.bad_lines += 1;
    }

    /// Runs every deadline up to capture time `t` (as given to
    /// [`Replay::feed`]) without new input, so that a caller can look at the
    /// state in between records. Earlier times do nothing.
    pub fn advance(&mut self, t: Duration) -> std::io::Result<()> {
        let Some(origin) = self.origin else {
            return Ok(());
        };
        let t = t.saturating_sub(origin);
        if t <= self.now {
            return Ok(());
        }
        self.advance_to(t)?;
        self.now = t;
        Ok(())
    }

    /// The simulated tuner, for inspection (where the capacitor is).
    pub fn tuner(&self) -> &SimTuner {
        &self.tuner
    }

    /// The replay's current time since the capture's first record.
    pub fn now(&self) -> Duration {
        self.now
    }

    /// The core, for inspection.
    pub fn core(&self) -> &Follower {
        &self.core
    }

    fn next_deadline(&self) -> Option<Duration> {
        [self.core.poll_timeout(), self.arrival]
            .into_iter()
            .flatten()
            .min()
    }

    /// Handles every deadline up to and including `t`, in time order.
    fn advance_to(&mut self, t: Duration) -> std::io::Result<()> {
        while let Some(next) = self.next_deadline().filter(|n| *n <= t) {
            self.now = next.max(self.now);
            if self.arrival.is_some_and(|a| a <= next) {
                self.arrival = None;
                let steps = self.tuner.position_at(self.now);
                self.core.handle_arrived(self.now, steps);
                // A backlash overshoot is internal: only a motor that stays at
                // rest is reported as arrived.
                if self.arrival_is_final() {
                    self.timeline.entry(self.now, &Entry::Arrive { steps })?;
                }
            } else {
                self.core.handle_timeout(self.now);
            }
            self.apply_actions()?;
        }
        Ok(())
    }

    fn arrival_is_final(&self) -> bool {
        !self.core.is_moving()
    }

    fn rig_event(&mut self, ev: RigEvent, next: Option<&RigEvent>) -> std::io::Result<()> {
        let now = self.now;
        match ev {
            RigEvent::Frequency { hz } => {
                self.summary.frames += 1;
                self.timeline.entry(now, &Entry::Frequency { hz })?;
            }
            RigEvent::TransmitCommand { on: true } if self.holds_off() => {
                // The line holds the rig off: on the air at the release.
                self.summary.frames += 1;
                self.timeline.entry(now, &Entry::Transmit { on: true })?;
                self.command_held = true;
            }
            RigEvent::Transmit { on } | RigEvent::TransmitCommand { on } => {
                self.summary.frames += 1;
                self.timeline.entry(now, &Entry::Transmit { on })?;
                self.count_transmit(on);
            }
            RigEvent::Reject { reason, bytes } => {
                self.summary.rejected += 1;
                *self.summary.rejects.entry(reason.as_str()).or_default() += 1;
                self.timeline.entry(
                    now,
                    &Entry::Reject {
                        reason: reason.as_str(),
                        bytes,
                    },
                )?;
            }
            // Station events: counted with the report they came with.
            _ => {}
        }
        if let Some(sev) = station::from_rig(&ev, next, false) {
            self.core.handle_station(now, sev);
        }
        self.apply_actions()
    }

    /// A transmit command reaching the rig now is held off by the inhibit
    /// line: one is wired, it has been set for the policy's `inhibit_lead`
    /// and the rig is not already on the air. The replay's own reading of
    /// its own line, for the independent count.
    fn holds_off(&self) -> bool {
        let lead = self.core.policy().inhibit_lead;
        self.line_wired
            && !self.transmitting
            && self.inhibit_since.is_some_and(|t| self.now >= t + lead)
    }

    fn apply_actions(&mut self) -> std::io::Result<()> {
        while let Some(action) = self.core.poll_action() {
            let now = self.now;
            crate::follow::apply(&mut Sink { replay: self }, now, action)?;
        }
        Ok(())
    }
}

/// The replay's side of [`crate::follow::Effects`]: the simulated tuner,
/// the timeline and the summary's independent safety count.
struct Sink<'r, 't> {
    replay: &'r mut Replay<'t>,
}

impl Effects for Sink<'_, '_> {
    type Error = std::io::Error;

    fn inhibit(&mut self, now: Duration, on: bool) -> std::io::Result<()> {
        let r = &mut *self.replay;
        if !on && r.arrival.is_some() {
            r.summary.violations += 1;
        }
        if on && !r.inhibit {
            r.inhibit_since = Some(now);
        }
        r.inhibit = on;
        if on {
            // The simulated line is set at once.
            r.core.handle_inhibit_set(now);
        } else {
            r.inhibit_since = None;
            if r.command_held {
                // Released under a held transmit command: on the air now.
                r.count_transmit(true);
            }
        }
        r.timeline.entry(now, &Entry::Inhibit { on })
    }

    fn settled(&mut self, now: Duration, hz: u64) -> std::io::Result<()> {
        self.replay.timeline.entry(now, &Entry::Settle { hz })
    }

    fn hold(&mut self, now: Duration, hz: u64, reason: HoldReason) -> std::io::Result<()> {
        let r = &mut *self.replay;
        *r.summary.holds.entry(reason.as_str()).or_default() += 1;
        r.timeline.entry(
            now,
            &Entry::Hold {
                hz,
                reason: reason.as_str(),
            },
        )
    }

    fn begin_move(
        &mut self,
        now: Duration,
        from: i64,
        to: i64,
        hz: u64,
        tune_hz: u64,
    ) -> std::io::Result<()> {
        self.replay.timeline.entry(
            now,
            &Entry::Move {
                from,
                to,
                hz,
                tune_hz,
            },
        )
    }

    fn goto(&mut self, now: Duration, steps: i64) -> std::io::Result<()> {
        let r = &mut *self.replay;
        let p = r.core.policy();
        if !r.inhibit || r.transmitting || !(p.min_steps..=p.max_steps).contains(&steps) {
            r.summary.violations += 1;
        }
        r.arrival = Some(r.tuner.goto(now, steps));
        Ok(())
    }

    fn stop(&mut self, now: Duration) -> std::io::Result<()> {
        let r = &mut *self.replay;
        r.tuner.stop(now);
        r.arrival = Some(now + Duration::from_millis(r.tuner.params().settle_ms));
        r.timeline.entry(now, &Entry::Stop)
    }

    fn candidate(
        &mut self,
        now: Duration,
        hz: u64,
        steps: i64,
        profile: Option<String>,
        _fit: Option<crate::calibrate::resonance::ResonanceFit>,
    ) -> std::io::Result<()> {
        self.replay
            .timeline
            .entry(now, &Entry::Candidate { hz, steps, profile })
    }

    /// A replay carries no operator commands, so no search runs in one.
    fn peak(
        &mut self,
        _now: Duration,
        _news: crate::follow::effects::PeakNews,
    ) -> std::io::Result<()> {
        Ok(())
    }

    /// Nor a sweep, so nothing asks to set the rig.
    fn set_rig_frequency(
        &mut self,
        _now: Duration,
        _vfo: crate::follow::Vfo,
        _hz: u64,
    ) -> std::io::Result<()> {
        Ok(())
    }

    fn sweep(
        &mut self,
        _now: Duration,
        _news: crate::follow::effects::SweepNews,
    ) -> std::io::Result<()> {
        Ok(())
    }
}
