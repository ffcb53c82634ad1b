//! The one place where the core's [`Action`]s are told apart: every driver
//! (the replay against its simulated tuner, the live session) implements
//! [`Effects`] and hands each action to [`apply`], so the match over the
//! actions is written once.

use std::time::Duration;

use super::peak::PeakOutcome;
use super::sweep::SweepOutcome;
use super::{Action, HoldReason, Vfo};
use crate::calibrate::resonance::ResonanceFit;

/// What a driver does with each kind of action. `Error` is what carrying
/// one out can fail with (a timeline that cannot be written, say).
pub trait Effects {
    type Error;
    /// Set the transmit-inhibit output.
    fn inhibit(&mut self, now: Duration, on: bool) -> Result<(), Self::Error>;
    /// The operator settled on `hz`.
    fn settled(&mut self, now: Duration, hz: u64) -> Result<(), Self::Error>;
    /// A decision not to move.
    fn hold(&mut self, now: Duration, hz: u64, reason: HoldReason) -> Result<(), Self::Error>;
    /// A repositioning begins (record its intent before the first leg).
    fn begin_move(
        &mut self,
        now: Duration,
        from: i64,
        to: i64,
        hz: u64,
        tune_hz: u64,
    ) -> Result<(), Self::Error>;
    /// One leg for the controller.
    fn goto(&mut self, now: Duration, steps: i64) -> Result<(), Self::Error>;
    /// Stop the motor where it is.
    fn stop(&mut self, now: Duration) -> Result<(), Self::Error>;
    /// A candidate calibration point (`fit`: from a noise-peak search).
    fn candidate(
        &mut self,
        now: Duration,
        hz: u64,
        steps: i64,
        profile: Option<String>,
        fit: Option<ResonanceFit>,
    ) -> Result<(), Self::Error>;
    /// A noise-peak search began or ended (for the log and the state).
    fn peak(&mut self, now: Duration, news: PeakNews) -> Result<(), Self::Error>;
    /// Set the rig's `vfo` to `hz` (a calibration sweep the operator
    /// consented to).
    fn set_rig_frequency(&mut self, now: Duration, vfo: Vfo, hz: u64) -> Result<(), Self::Error>;
    /// A calibration sweep began or ended.
    fn sweep(&mut self, now: Duration, news: SweepNews) -> Result<(), Self::Error>;
}

/// What became of a calibration sweep.
#[derive(Debug, Clone, PartialEq)]
pub enum SweepNews {
    Started { band: String, points: Vec<u64> },
    Ended(SweepOutcome),
}

/// What became of a noise-peak search.
#[derive(Debug, Clone, PartialEq)]
pub enum PeakNews {
    Started {
        hz: u64,
        low: i64,
        high: i64,
        positions: usize,
    },
    Ended(PeakOutcome),
}

/// Carries out one action on `fx`.
pub fn apply<E: Effects + ?Sized>(
    fx: &mut E,
    now: Duration,
    action: Action,
) -> Result<(), E::Error> {
    match action {
        Action::Inhibit { on } => fx.inhibit(now, on),
        Action::Settled { hz } => fx.settled(now, hz),
        Action::Hold { hz, reason } => fx.hold(now, hz, reason),
        Action::Move {
            from,
            to,
            hz,
            tune_hz,
        } => fx.begin_move(now, from, to, hz, tune_hz),
        Action::Goto { steps } => fx.goto(now, steps),
        Action::Stop => fx.stop(now),
        Action::Candidate {
            hz,
            steps,
            profile,
            fit,
        } => fx.candidate(now, hz, steps, profile, fit),
        Action::PeakStarted {
            hz,
            low,
            high,
            positions,
        } => fx.peak(
            now,
            PeakNews::Started {
                hz,
                low,
                high,
                positions,
            },
        ),
        Action::PeakEnded { outcome } => fx.peak(now, PeakNews::Ended(outcome)),
        Action::SetRigFrequency { vfo, hz } => fx.set_rig_frequency(now, vfo, hz),
        Action::SweepStarted { band, points } => fx.sweep(now, SweepNews::Started { band, points }),
        Action::SweepEnded { outcome } => fx.sweep(now, SweepNews::Ended(outcome)),
    }
}
