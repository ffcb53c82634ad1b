//! The calibration sweep (`ctl calibrate BAND`): the noise-peak search of
//! [`super::peak`] run at a few frequencies across a band, the core setting
//! the rig's receive frequency for each, only with the operator's explicit
//! consent, and setting it back afterwards.
//!
//! The sweep is decided here like every command. It asks the driver to set
//! the rig's frequency ([`super::Action::SetRigFrequency`]: the VFO it
//! receives on, never the other one), waits until the rig itself reports
//! that frequency (a poll answer or a report, not the set it sent), then
//! runs the same search `ctl peak` runs there, through the same `try_start`
//! (limits, legs, inhibit lead, journal, transmit deferral). The inhibit is
//! held from the first set to the last restore: the loop is tuned for none
//! of the frequencies the rig is taken to. Each clear peak is a candidate
//! like a single search's.
//!
//! How it ends:
//! - every point searched: the VFO is set back to the frequency it had, and
//!   following resumes once the rig reports it;
//! - a transmission (any source), an operator stop, a fault or a point the
//!   rig did not take: the search under way returns to where it began, and
//!   the VFO is set back as soon as the rig is known to receive;
//! - a frequency the sweep did not set (the operator turned the knob, or
//!   another program set one): the sweep ends where it is and the rig is
//!   left alone, since the operator has chosen where to be;
//! - shutdown: the VFO is set back without waiting for the rig to confirm.

use std::fmt;
use std::time::Duration;

use super::peak::{AbortReason, PeakOutcome};
use super::{Action, Follower, Refusal, Reply, TransmitState, Vfo};

/// Points searched per band: the band's low end, middle and high end
/// regions (at 1/6, 1/2 and 5/6 of its width), enough for the physics
/// model's two parameters per band with one to spare. Common practice for
/// a loop's calibration, no source.
pub const SWEEP_POINTS: usize = 3;

/// How long the sweep waits for the rig to report a frequency it set (or
/// set back) before it gives up on it: several poll intervals at any
/// sensible rate. Common practice, no source.
pub const SWEEP_SET_WAIT: Duration = Duration::from_secs(5);

/// The frequencies a sweep of the band `low_hz..=high_hz` searches: `n`
/// points at `(k + ½)/n` of its width, on whole kHz.
pub fn sweep_points(low_hz: u64, high_hz: u64, n: usize) -> Vec<u64> {
    let (low, high) = (low_hz.min(high_hz), low_hz.max(high_hz));
    let width = (high - low) as f64;
    let mut points: Vec<u64> = (0..n)
        .map(|k| {
            let hz = low as f64 + width * (k as f64 + 0.5) / n as f64;
            ((hz / 1000.0).round() * 1000.0).clamp(low as f64, high as f64) as u64
        })
        .collect();
    points.dedup();
    points
}

/// Why a sweep ended when the rig went to `hz`, a frequency it did not set.
fn moved_to(hz: u64) -> String {
    format!("the rig's frequency changed to {hz} Hz")
}

/// How a sweep ended.
#[derive(Debug, Clone, PartialEq)]
pub enum SweepEnd {
    /// Every point was searched.
    Completed,
    /// It was ended early, for this reason.
    Stopped(String),
}

/// What became of the rig's frequency.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Restore {
    /// Set back, and the rig reported it.
    Confirmed,
    /// Set back, and the rig did not report it in time (or the service
    /// was shutting down): check the rig.
    Unconfirmed,
    /// Left where the operator (or another program) put it.
    LeftToOperator,
}

/// A finished sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct SweepOutcome {
    pub band: String,
    /// Candidates recorded: frequency and steps.
    pub found: Vec<(u64, i64)>,
    /// Points without a candidate, and why.
    pub missed: Vec<(u64, String)>,
    pub end: SweepEnd,
    /// The VFO set back and the frequency it was set back to.
    pub restored_to: (Vfo, u64),
    pub restore: Restore,
}

impl fmt::Display for SweepOutcome {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let (vfo, hz) = self.restored_to;
        match &self.end {
            SweepEnd::Completed => write!(f, "sweep of {} done", self.band)?,
            SweepEnd::Stopped(why) => write!(f, "sweep of {} stopped ({why})", self.band)?,
        }
        write!(
            f,
            ": {} candidate(s) of {} point(s)",
            self.found.len(),
            self.found.len() + self.missed.len()
        )?;
        for (hz, why) in &self.missed {
            write!(f, "; {hz} Hz: {why}")?;
        }
        match self.restore {
            Restore::Confirmed => write!(f, "; VFO {vfo:?} set back to {hz} Hz"),
            Restore::Unconfirmed => write!(
                f,
                "; VFO {vfo:?} set back to {hz} Hz but the rig did not confirm it: check the rig"
            ),
            Restore::LeftToOperator => {
                f.write_str("; the rig's frequency was changed by someone else and left alone")
            }
        }
    }
}

/// Where a sweep is, for the status.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SweepProgress {
    pub band: String,
    /// The point under way (1-based) and how many there are.
    pub point: usize,
    pub of: usize,
    /// The frequency of that point (or, while setting the rig back, the
    /// frequency being restored).
    pub hz: u64,
    pub found: usize,
    /// What it is doing, in a word: `setting`, `searching`, `restoring`.
    pub doing: &'static str,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Phase {
    /// The rig was asked to go to `hz` from `was` (the VFO's frequency
    /// when the set went: a poll answer of it may still be on its way);
    /// its report is awaited until `due`.
    Setting { hz: u64, was: u64, due: Duration },
    /// The search at `hz` is under way.
    Searching { hz: u64 },
    /// The VFO is to be set back (`due: None`: not yet sent, waiting for
    /// the rig to be known to receive; then its report is awaited).
    Restoring { due: Option<Duration> },
}

/// A sweep under way.
#[derive(Debug, Clone)]
pub(super) struct SweepRun {
    band: String,
    points: Vec<u64>,
    /// Index of the point under way.
    next: usize,
    /// The VFO the sweep sets, and its frequency before the sweep.
    restore: (Vfo, u64),
    pub(super) phase: Phase,
    found: Vec<(u64, i64)>,
    missed: Vec<(u64, String)>,
    /// Why it ends early, once it does.
    stopped: Option<String>,
}

impl SweepRun {
    fn progress(&self) -> SweepProgress {
        let (point, hz, doing) = match self.phase {
            Phase::Setting { hz, .. } => (self.next + 1, hz, "setting"),
            Phase::Searching { hz } => (self.next + 1, hz, "searching"),
            Phase::Restoring { .. } => (self.points.len(), self.restore.1, "restoring"),
        };
        SweepProgress {
            band: self.band.clone(),
            point: point.min(self.points.len()),
            of: self.points.len(),
            hz,
            found: self.found.len(),
            doing,
        }
    }

    fn deadline(&self) -> Option<Duration> {
        match self.phase {
            Phase::Setting { due, .. } => Some(due),
            Phase::Restoring { due } => due,
            Phase::Searching { .. } => None,
        }
    }
}

impl Follower {
    /// Whether a search or a sweep has the motor (and holds the inhibit).
    pub(super) fn searching(&self) -> bool {
        self.peak.is_some() || self.sweep.is_some()
    }

    /// The sweep's progress, for the status.
    pub(super) fn sweep_progress(&self) -> Option<SweepProgress> {
        self.sweep.as_ref().map(SweepRun::progress)
    }

    /// When the sweep next needs [`Follower::handle_timeout`].
    pub(super) fn sweep_deadline(&self) -> Option<Duration> {
        self.sweep.as_ref().and_then(SweepRun::deadline)
    }

    /// `ctl calibrate BAND`: the checks, then the first set.
    pub(super) fn start_sweep(&mut self, now: Duration, band: &str, consent: bool) -> Reply {
        let cannot = |why: &str| {
            Reply::Refused(Refusal::CannotSweep {
                why: why.to_string(),
            })
        };
        if !consent {
            return Reply::Refused(Refusal::NeedsConsent);
        }
        if self.searching() {
            return Reply::Refused(Refusal::Searching);
        }
        let Some(b) = self.policy.bands.iter().find(|b| b.name == band) else {
            return Reply::Refused(Refusal::UnknownBand {
                name: band.to_string(),
                known: self.policy.bands.iter().map(|b| b.name.clone()).collect(),
            });
        };
        let points = sweep_points(b.low_hz, b.high_hz, SWEEP_POINTS);
        if let Err(r) = self.move_base() {
            return Reply::Refused(r);
        }
        if self.is_moving() || self.want.is_some() {
            return Reply::Refused(Refusal::Moving);
        }
        if self.rig_silent || self.station.transmit().state != TransmitState::Receive {
            return cannot("the rig must be known to receive (the search reads the band's noise)");
        }
        if self.station.split() {
            return cannot(
                "the rig works split; the sweep sets only the receive VFO, so leave split first",
            );
        }
        if self.small_loop.is_none() {
            return cannot("[antenna] does not describe the loop, so the search has no window");
        }
        let vfo = self.station.receive_vfo();
        let Some(before) = self.station.vfo_hz(vfo) else {
            return Reply::Refused(Refusal::NoFrequency);
        };
        self.touchup = None;
        self.last_hold = None;
        // Nothing follows the rig while the sweep has it.
        self.pending = None;
        self.actions.push_back(Action::SweepStarted {
            band: band.to_string(),
            points: points.clone(),
        });
        self.sweep = Some(SweepRun {
            band: band.to_string(),
            points,
            next: 0,
            restore: (vfo, before),
            phase: Phase::Restoring { due: None },
            found: Vec::new(),
            missed: Vec::new(),
            stopped: None,
        });
        self.assert_inhibit(now);
        self.sweep_set_point(now);
        Reply::Done
    }

    /// Asks the rig to go to the point under way, or, after the last, to
    /// go back.
    fn sweep_set_point(&mut self, now: Duration) {
        let Some(run) = self.sweep.as_mut() else {
            return;
        };
        let Some(&hz) = run.points.get(run.next).filter(|_| run.stopped.is_none()) else {
            run.phase = Phase::Restoring { due: None };
            self.sweep_restore(now);
            return;
        };
        let vfo = run.restore.0;
        let was = self.station.vfo_hz(vfo).unwrap_or(run.restore.1);
        run.phase = Phase::Setting {
            hz,
            was,
            due: now + SWEEP_SET_WAIT,
        };
        self.actions.push_back(Action::SetRigFrequency { vfo, hz });
    }

    /// Sets the VFO back once the rig is known to receive (a set while it
    /// transmits could be refused, or retune an over).
    fn sweep_restore(&mut self, now: Duration) {
        let receiving = !self.rig_silent && self.station.transmit().state == TransmitState::Receive;
        let Some(run) = self.sweep.as_mut() else {
            return;
        };
        if run.phase != (Phase::Restoring { due: None }) || !receiving {
            return;
        }
        let (vfo, hz) = run.restore;
        if self.station.vfo_hz(vfo) == Some(hz) && self.station.receive_vfo() == vfo {
            // Never moved (stopped before the first set was taken), or
            // already back: nothing to send.
            self.sweep_end(now, Restore::Confirmed);
            return;
        }
        run.phase = Phase::Restoring {
            due: Some(now + SWEEP_SET_WAIT),
        };
        self.actions.push_back(Action::SetRigFrequency { vfo, hz });
    }

    /// Ends the sweep early for `why`: a search under way returns to where
    /// it began first; the VFO is set back as soon as it may be.
    fn sweep_stop(&mut self, now: Duration, why: String) {
        let Some(run) = self.sweep.as_mut() else {
            return;
        };
        if run.stopped.is_none() {
            run.stopped = Some(why);
        }
        match run.phase {
            Phase::Searching { .. } => self.peak_event(now, |s| s.stop()),
            Phase::Setting { hz, .. } => {
                run.missed.push((hz, "not searched".to_string()));
                run.phase = Phase::Restoring { due: None };
                self.sweep_restore(now);
            }
            Phase::Restoring { .. } => self.sweep_restore(now),
        }
    }

    /// The sweep is over: the outcome, the inhibit no longer held by it,
    /// and following takes the rig's frequency again.
    fn sweep_end(&mut self, now: Duration, restore: Restore) {
        let Some(run) = self.sweep.take() else {
            return;
        };
        let outcome = SweepOutcome {
            band: run.band,
            found: run.found,
            missed: run.missed,
            end: match run.stopped {
                None => SweepEnd::Completed,
                Some(why) => SweepEnd::Stopped(why),
            },
            restored_to: run.restore,
            restore,
        };
        self.last_sweep = Some(outcome.to_string());
        self.actions.push_back(Action::SweepEnded { outcome });
        if self.closing {
            return;
        }
        // The loop is tuned for none of the sweep's frequencies: the rig's
        // frequency now is decided at once.
        self.tuned_hz = None;
        self.settled_hz = None;
        self.last_hold = None;
        if !self.is_moving() {
            self.after_rest(now);
        }
        if let Some(hz) = self.station.tune_hz(self.policy.tune_for) {
            self.report(now, hz, Some(now));
        }
    }

    /// A search the sweep started ended with `outcome`.
    pub(super) fn sweep_search_ended(&mut self, now: Duration, outcome: &PeakOutcome) {
        let Some(run) = self.sweep.as_mut() else {
            return;
        };
        let Phase::Searching { hz } = run.phase else {
            return;
        };
        match outcome {
            PeakOutcome::Candidate(c) => run.found.push((c.hz, c.steps)),
            PeakOutcome::NoClearPeak { why, .. } => {
                run.missed.push((hz, format!("no clear peak ({why})")))
            }
            PeakOutcome::Aborted(r) => run.missed.push((hz, r.to_string())),
        }
        match outcome {
            PeakOutcome::Aborted(AbortReason::FrequencyChanged { hz: now_hz }) => {
                // Someone else chose a frequency: leave it.
                run.stopped = Some(moved_to(*now_hz));
                self.sweep_end(now, Restore::LeftToOperator);
            }
            PeakOutcome::Aborted(r) => {
                if run.stopped.is_none() {
                    run.stopped = Some(r.to_string());
                }
                run.phase = Phase::Restoring { due: None };
                self.sweep_restore(now);
            }
            _ => {
                run.next += 1;
                self.sweep_set_point(now);
            }
        }
    }

    /// What the station said, for the sweep: a report of the frequency it
    /// set starts the search there; one of a frequency it did not set ends
    /// it; receive again lets a restore go.
    pub(super) fn sweep_station(&mut self, now: Duration, reported: Option<u64>) {
        let Some(run) = self.sweep.as_ref() else {
            return;
        };
        let (vfo, before) = run.restore;
        let phase = run.phase;
        if self.station.transmit().state != TransmitState::Receive || self.rig_silent {
            if let Phase::Setting { .. } = phase {
                self.sweep_stop(now, AbortReason::Transmit.to_string());
            }
            return;
        }
        let on_vfo = self.station.receive_vfo() == vfo;
        match phase {
            Phase::Setting { hz, was, .. } => match reported {
                Some(r) if r == hz && on_vfo => self.sweep_search(now, hz),
                // The rig's answer from before the set (the point before,
                // or the operator's frequency), or our own set seen.
                Some(r) if r == was || r == before || r == hz => {}
                Some(r) => {
                    if let Some(run) = self.sweep.as_mut() {
                        run.missed.push((hz, "not searched".to_string()));
                        run.stopped = Some(moved_to(r));
                    }
                    self.sweep_end(now, Restore::LeftToOperator);
                }
                None => {}
            },
            Phase::Restoring { due: Some(_) } => {
                if reported == Some(before) && on_vfo {
                    self.sweep_end(now, Restore::Confirmed);
                }
            }
            Phase::Restoring { due: None } => self.sweep_restore(now),
            Phase::Searching { .. } => {}
        }
    }

    /// Starts the search at the point the rig has reached.
    fn sweep_search(&mut self, now: Duration, hz: u64) {
        if let Some(run) = self.sweep.as_mut() {
            run.phase = Phase::Searching { hz };
        }
        if let Reply::Refused(r) = self.start_peak(now) {
            if let Some(run) = self.sweep.as_mut() {
                run.missed.push((hz, r.to_string()));
                run.next += 1;
            }
            self.sweep_set_point(now);
        }
    }

    /// The sweep's deadlines.
    pub(super) fn sweep_timeout(&mut self, now: Duration) {
        let Some(run) = self.sweep.as_ref() else {
            return;
        };
        match run.phase {
            Phase::Setting { hz, due, .. } if now >= due => {
                let why = format!(
                    "the rig did not report {hz} Hz within {} s of the set",
                    SWEEP_SET_WAIT.as_secs()
                );
                self.sweep_stop(now, why);
            }
            Phase::Restoring { due: Some(due) } if now >= due => {
                self.sweep_end(now, Restore::Unconfirmed)
            }
            _ => {}
        }
    }

    /// `calibrate --stop`.
    pub(super) fn stop_sweep(&mut self, now: Duration) -> Reply {
        if self.sweep.is_none() {
            return Reply::Refused(Refusal::CannotSweep {
                why: "no sweep is under way".to_string(),
            });
        }
        self.sweep_stop(now, AbortReason::OperatorStop.to_string());
        Reply::Done
    }

    /// A controller fault: the search under way ended where it is (no
    /// position to return from); the rig is set back once it receives.
    pub(super) fn sweep_fault(&mut self, now: Duration, what: &str) {
        if let Some(run) = self.sweep.as_mut() {
            if let Phase::Searching { hz } = run.phase {
                run.missed.push((hz, format!("a fault: {what}")));
                run.phase = Phase::Restoring { due: None };
            }
        }
        self.sweep_stop(now, format!("a fault: {what}"));
    }

    /// The service is closing: the VFO is set back without waiting.
    pub(super) fn sweep_closing(&mut self, now: Duration) {
        let Some(run) = self.sweep.as_mut() else {
            return;
        };
        if run.stopped.is_none() {
            run.stopped = Some("the service is shutting down".to_string());
        }
        if let Phase::Searching { hz } | Phase::Setting { hz, .. } = run.phase {
            run.missed.push((hz, "not finished".to_string()));
        }
        let (vfo, hz) = run.restore;
        let moved = self.station.vfo_hz(vfo) != Some(hz);
        if moved {
            self.actions.push_back(Action::SetRigFrequency { vfo, hz });
        }
        self.sweep_end(
            now,
            if moved {
                Restore::Unconfirmed
            } else {
                Restore::Confirmed
            },
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn three_points_spread_across_each_band_on_whole_kilohertz() {
        // 40 m of ITU Region 1 (7.0-7.2 MHz), 30 m, 20 m.
        assert_eq!(
            sweep_points(7_000_000, 7_200_000, 3),
            vec![7_033_000, 7_100_000, 7_167_000]
        );
        assert_eq!(
            sweep_points(10_100_000, 10_150_000, 3),
            vec![10_108_000, 10_125_000, 10_142_000]
        );
        assert_eq!(
            sweep_points(14_000_000, 14_350_000, 3),
            vec![14_058_000, 14_175_000, 14_292_000]
        );
        // Reversed ends and a band narrower than the rounding.
        assert_eq!(sweep_points(7_200_000, 7_000_000, 1), vec![7_100_000]);
        assert_eq!(sweep_points(5_351_500, 5_351_900, 3), vec![5_351_900]);
    }
}
