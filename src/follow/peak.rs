//! The noise-peak search as a sans-IO procedure: find where the loop is
//! resonant at the receive frequency by peaking the band noise on the
//! signal meter, without transmitting.
//!
//! The procedure only asks: [`PeakRequest::Goto`] (a move, which the caller
//! hands to the follow core as a request so that it becomes the core's
//! normal `Move`/`Goto` actions: limits, backlash approach, inhibit,
//! journal, transmit deferral are the core's) and [`PeakRequest::ReadMeter`]
//! (one signal-meter read, after the move has arrived and settled). It steps
//! through a window of positions in rising order around the predicted one
//! (a few 3 dB bandwidths wide, from the loop physics), reads the meter
//! several times at each, averages robustly
//! ([`crate::calibrate::resonance::robust_average`]), fits the resonance
//! curve ([`crate::calibrate::resonance::fit_peak`]), optionally reads a
//! second, finer pass around that fit's peak and fits again, and moves to the
//! fitted peak, giving a [`PeakCandidate`]. It aborts on a transmission, a
//! frequency change, a fault or an operator stop by returning to where it
//! started, and records nothing; "no clear peak" also returns to the start
//! and records nothing.

use crate::calibrate::resonance::{
    fit_peak, robust_average, Reading, ResonanceFit, Verdict, WidthRange,
};

/// The fine pass reaches this many of the first fit's half-widths either
/// side of its peak: the curve's slope in dB, and so what a reading says
/// about the peak's position, is largest near 0.6 half-widths.
pub const FINE_REACH: f64 = 1.5;

/// What a search is asked to do.
#[derive(Debug, Clone, PartialEq)]
pub struct PeakPlan {
    /// The receive frequency (Hz) the search is for.
    pub hz: u64,
    /// The calibration profile the candidate is for.
    pub profile: String,
    /// Where the motor is when the search starts (steps).
    pub start_steps: i64,
    /// The calibration's predicted position for `hz` (steps).
    pub predicted_steps: i64,
    /// The loop physics' half-width at half power (steps); see
    /// [`predicted_half_width_steps`].
    pub half_width_steps: f64,
    /// The window reaches this many half-widths either side of the
    /// prediction (4: four 3 dB bandwidths in all).
    pub window_half_widths: f64,
    /// Positions read across the window.
    pub points: usize,
    /// Meter reads at each position.
    pub reads_per_point: usize,
    /// A second, finer pass after a clear first fit: this many positions
    /// across the first fit's peak ± [`FINE_REACH`] half-widths (0: no second pass),
    /// with `fine_reads_per_point` reads each. The peak is then fitted to
    /// both passes' points: the second pass reads where the curve's slope,
    /// and so its information about the peak's position, is largest.
    pub fine_points: usize,
    pub fine_reads_per_point: usize,
    /// The travel limits (the core enforces them too).
    pub min_steps: i64,
    pub max_steps: i64,
}

/// The window and passes of [`PeakPlan::standard`]: four half-widths
/// either side, 9 positions × 4 reads, then 15 × 20 around the first fit
/// (measured with `cargo run --release --example noise_peak`,
/// docs/measurements.md).
pub const STANDARD_WINDOW_HALF_WIDTHS: f64 = 4.0;
pub const STANDARD_PASSES: [usize; 4] = [9, 4, 15, 20];

impl PeakPlan {
    /// The plan an operator's "find resonance here" runs: the standard
    /// window and passes around the calibration's prediction.
    pub fn standard(
        hz: u64,
        profile: String,
        start_steps: i64,
        predicted_steps: i64,
        half_width_steps: f64,
        limits: (i64, i64),
    ) -> PeakPlan {
        let [points, reads_per_point, fine_points, fine_reads_per_point] = STANDARD_PASSES;
        PeakPlan {
            hz,
            profile,
            start_steps,
            predicted_steps,
            half_width_steps,
            window_half_widths: STANDARD_WINDOW_HALF_WIDTHS,
            points,
            reads_per_point,
            fine_points,
            fine_reads_per_point,
            min_steps: limits.0,
            max_steps: limits.1,
        }
    }
}

/// The half-width at half power in steps for a loop of unloaded Q `q_u` at
/// `hz` with the calibration moving `steps_per_hz` steps per Hz: the loaded
/// half-power points are at `2 Q_L δ = 1`, `Q_L = Q_u/2` for a matched
/// loop, so `Δf = f/Q_u`.
pub fn predicted_half_width_steps(hz: f64, q_u: f64, steps_per_hz: f64) -> f64 {
    (hz / q_u * steps_per_hz).abs()
}

/// Why a plan cannot run.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanError {
    pub expected: &'static str,
    pub found: String,
}

/// Why a search stopped without a result.
#[derive(Debug, Clone, PartialEq)]
pub enum AbortReason {
    Transmit,
    FrequencyChanged { hz: u64 },
    Fault(String),
    OperatorStop,
}

/// A calibration candidate from a clear peak.
#[derive(Debug, Clone, PartialEq)]
pub struct PeakCandidate {
    pub hz: u64,
    pub steps: i64,
    pub profile: String,
    pub fit: ResonanceFit,
}

/// How a search ended.
#[derive(Debug, Clone, PartialEq)]
pub enum PeakOutcome {
    Candidate(PeakCandidate),
    NoClearPeak {
        fit: Option<ResonanceFit>,
        why: &'static str,
    },
    Aborted(AbortReason),
}

impl std::fmt::Display for AbortReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            AbortReason::Transmit => f.write_str("the rig transmitted (or may have)"),
            AbortReason::FrequencyChanged { hz } => {
                write!(f, "the receive frequency changed to {hz} Hz")
            }
            AbortReason::Fault(what) => write!(f, "a fault: {what}"),
            AbortReason::OperatorStop => f.write_str("stopped by the operator"),
        }
    }
}

impl std::fmt::Display for PeakOutcome {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            PeakOutcome::Candidate(c) => write!(
                f,
                "peak at {} steps for {} Hz: half-width {:.1} steps, {:.1} dB over the floor, fit residual {:.2} dB over {} points",
                c.steps, c.hz, c.fit.half_width_steps, c.fit.rise_db, c.fit.rms_residual_db, c.fit.points
            ),
            PeakOutcome::NoClearPeak { why, .. } => {
                write!(f, "no clear peak ({why}); nothing recorded")
            }
            PeakOutcome::Aborted(r) => {
                write!(f, "search stopped ({r}); nothing recorded")
            }
        }
    }
}

/// What the search asks for next.
#[derive(Debug, Clone, PartialEq)]
pub enum PeakRequest {
    /// Move to `steps` (through the core), then report [`PeakSearch::arrived`].
    Goto { steps: i64 },
    /// Read the signal meter once, then report [`PeakSearch::meter`].
    ReadMeter,
    /// Nothing until the awaited input (an arrival or a reading).
    Wait,
    /// Finished: nothing more will be asked.
    Done(PeakOutcome),
}

#[derive(Debug, Clone, PartialEq)]
enum State {
    NotStarted,
    MovingTo(usize),
    Reading { index: usize, at: i64 },
    ToPeak(PeakCandidate),
    Returning(PeakOutcome),
    Done(PeakOutcome),
}

/// The search.
#[derive(Debug)]
pub struct PeakSearch {
    plan: PeakPlan,
    widths: WidthRange,
    targets: Vec<i64>,
    reads: Vec<f64>,
    points: Vec<Reading>,
    state: State,
    fine: bool,
}

impl PeakSearch {
    /// A search for `plan`; the window is clipped to the travel limits.
    pub fn new(plan: PeakPlan) -> Result<PeakSearch, PlanError> {
        let w = plan.half_width_steps;
        if !(w.is_finite() && w >= 0.5) {
            return Err(PlanError {
                expected: "a half-width of at least half a step",
                found: format!("{w}"),
            });
        }
        if plan.points < crate::calibrate::resonance::MIN_POINTS || plan.reads_per_point == 0 {
            return Err(PlanError {
                expected: "at least 7 points and one read per point",
                found: format!("{} points, {} reads", plan.points, plan.reads_per_point),
            });
        }
        let reach = (w * plan.window_half_widths.max(1.0)).round() as i64;
        let lo = plan
            .predicted_steps
            .saturating_sub(reach)
            .max(plan.min_steps);
        let hi = plan
            .predicted_steps
            .saturating_add(reach)
            .min(plan.max_steps);
        let n = plan.points as i64;
        if hi - lo < n - 1 {
            return Err(PlanError {
                expected: "a window inside the limits with a step between points",
                found: format!("{lo}..={hi} for {n} points"),
            });
        }
        let mut targets: Vec<i64> = (0..n).map(|i| lo + (hi - lo) * i / (n - 1)).collect();
        targets.dedup();
        Ok(PeakSearch {
            widths: WidthRange::around(w, 2.5),
            targets,
            reads: Vec::new(),
            points: Vec::new(),
            state: State::NotStarted,
            fine: false,
            plan,
        })
    }

    /// The positions the search reads, in order.
    pub fn targets(&self) -> &[i64] {
        &self.targets
    }

    /// The averaged points read so far.
    pub fn points(&self) -> &[Reading] {
        &self.points
    }

    /// Begins: the move to the first position.
    pub fn start(&mut self) -> PeakRequest {
        if self.state != State::NotStarted {
            return self.current();
        }
        self.move_to(0)
    }

    fn move_to(&mut self, index: usize) -> PeakRequest {
        match self.targets.get(index) {
            Some(&steps) => {
                self.state = State::MovingTo(index);
                PeakRequest::Goto { steps }
            }
            None => self.finish_sweep(),
        }
    }

    /// What is being waited for now (for a caller that lost track).
    fn current(&self) -> PeakRequest {
        match &self.state {
            State::Done(o) => PeakRequest::Done(o.clone()),
            State::Reading { .. } => PeakRequest::ReadMeter,
            _ => PeakRequest::Wait,
        }
    }

    /// The move asked for has arrived (settled) at `steps`.
    pub fn arrived(&mut self, steps: i64) -> PeakRequest {
        match std::mem::replace(&mut self.state, State::NotStarted) {
            State::MovingTo(index) => {
                self.reads.clear();
                self.state = State::Reading { index, at: steps };
                PeakRequest::ReadMeter
            }
            State::ToPeak(mut c) => {
                c.steps = steps;
                let o = PeakOutcome::Candidate(c);
                self.state = State::Done(o.clone());
                PeakRequest::Done(o)
            }
            State::Returning(o) => {
                self.state = State::Done(o.clone());
                PeakRequest::Done(o)
            }
            other => {
                self.state = other;
                self.current()
            }
        }
    }

    /// One signal-meter reading (dB on the meter's scale). A reading not
    /// asked for (during a move) is ignored.
    pub fn meter(&mut self, db: f64) -> PeakRequest {
        let State::Reading { index, at } = self.state else {
            return self.current();
        };
        self.reads.push(db);
        let wanted = if self.fine {
            self.plan.fine_reads_per_point.max(1)
        } else {
            self.plan.reads_per_point
        };
        if self.reads.len() < wanted {
            return PeakRequest::ReadMeter;
        }
        if let Some(avg) = robust_average(&self.reads) {
            self.points.push(Reading {
                steps: at as f64,
                db: avg,
                weight: self.reads.len() as f64,
            });
        }
        self.move_to(index + 1)
    }

    fn finish_sweep(&mut self) -> PeakRequest {
        match fit_peak(&self.points, self.widths) {
            Verdict::Clear(fit) if !self.fine && self.plan.fine_points >= 2 => {
                let reach = FINE_REACH * fit.half_width_steps;
                let lo = ((fit.peak_steps - reach).round() as i64).max(self.plan.min_steps);
                let hi = ((fit.peak_steps + reach).round() as i64).min(self.plan.max_steps);
                let n = self.plan.fine_points as i64;
                let mut t: Vec<i64> = (0..n).map(|i| lo + (hi - lo) * i / (n - 1)).collect();
                t.dedup();
                self.fine = true;
                self.targets = t;
                self.move_to(0)
            }
            Verdict::Clear(fit) => {
                let steps =
                    (fit.peak_steps.round() as i64).clamp(self.plan.min_steps, self.plan.max_steps);
                self.state = State::ToPeak(PeakCandidate {
                    hz: self.plan.hz,
                    steps,
                    profile: self.plan.profile.clone(),
                    fit,
                });
                PeakRequest::Goto { steps }
            }
            Verdict::NoClearPeak { fit, why } => {
                self.return_with(PeakOutcome::NoClearPeak { fit, why })
            }
        }
    }

    fn return_with(&mut self, outcome: PeakOutcome) -> PeakRequest {
        self.state = State::Returning(outcome);
        PeakRequest::Goto {
            steps: self.plan.start_steps,
        }
    }

    fn abort(&mut self, reason: AbortReason) -> PeakRequest {
        match self.state {
            State::Done(_) | State::Returning(_) => self.current(),
            _ => self.return_with(PeakOutcome::Aborted(reason)),
        }
    }

    /// The rig transmits (any source).
    pub fn transmit(&mut self) -> PeakRequest {
        self.abort(AbortReason::Transmit)
    }

    /// The rig reports its receive frequency; a change aborts.
    pub fn frequency(&mut self, hz: u64) -> PeakRequest {
        if hz == self.plan.hz {
            return self.current();
        }
        self.abort(AbortReason::FrequencyChanged { hz })
    }

    /// A fault (tuner, rig link).
    pub fn fault(&mut self, what: &str) -> PeakRequest {
        self.abort(AbortReason::Fault(what.to_string()))
    }

    /// The operator stopped the search.
    pub fn stop(&mut self) -> PeakRequest {
        self.abort(AbortReason::OperatorStop)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn plan() -> PeakPlan {
        PeakPlan {
            hz: 14_175_000,
            profile: "default".into(),
            start_steps: 8290,
            predicted_steps: 8300,
            half_width_steps: 20.0,
            window_half_widths: 4.0,
            points: 13,
            reads_per_point: 3,
            fine_points: 0,
            fine_reads_per_point: 0,
            min_steps: 500,
            max_steps: 48000,
        }
    }

    /// A noiseless meter: floor −115 dBm, band −105 dBm, peak at `peak`,
    /// half-width 20 steps. Runs the search, feeding `interrupt` after
    /// `after` requests; the outcome and every move asked for.
    fn drive(
        peak: f64,
        after: Option<usize>,
        interrupt: fn(&mut PeakSearch) -> PeakRequest,
    ) -> (PeakOutcome, Vec<i64>) {
        let mut s = PeakSearch::new(plan()).unwrap();
        let mut pos = plan().start_steps;
        let mut moves = Vec::new();
        let mut req = s.start();
        for n in 0..1000 {
            if Some(n) == after {
                // An input that changes nothing leaves the request outstanding.
                let r = interrupt(&mut s);
                if r != PeakRequest::Wait && r != PeakRequest::ReadMeter {
                    req = r;
                }
            }
            req = match req {
                PeakRequest::Goto { steps } => {
                    moves.push(steps);
                    pos = steps;
                    s.arrived(pos)
                }
                PeakRequest::ReadMeter => {
                    let u = (pos as f64 - peak) / 20.0;
                    let mw = 10f64.powf(-11.5) + 10f64.powf(-10.5) / (1.0 + u * u);
                    s.meter(10.0 * mw.log10())
                }
                PeakRequest::Wait => panic!("the search waits with nothing outstanding"),
                PeakRequest::Done(o) => return (o, moves),
            };
        }
        panic!("the search did not end");
    }

    #[test]
    fn a_clear_peak_is_found_and_moved_to() {
        let (o, moves) = drive(8317.0, None, |s| s.stop());
        let PeakOutcome::Candidate(c) = o else {
            panic!("expected a candidate, found {o:?}");
        };
        assert_eq!(c.steps, 8317);
        assert_eq!(c.hz, 14_175_000);
        assert!((c.fit.half_width_steps - 20.0).abs() < 0.5, "{c:?}");
        // Window: ±80 steps around the prediction, rising, then the peak.
        assert_eq!(moves.first(), Some(&8220));
        assert_eq!(moves.get(12), Some(&8380));
        assert!(moves[..13].windows(2).all(|w| w[0] < w[1]));
        assert_eq!(moves.last(), Some(&8317));
    }

    #[test]
    fn a_transmission_or_a_stop_returns_to_the_start_with_nothing_recorded() {
        for (after, f) in [
            (
                5usize,
                (|s: &mut PeakSearch| s.transmit()) as fn(&mut PeakSearch) -> PeakRequest,
            ),
            (9, |s| s.stop()),
            (2, |s| s.frequency(14_180_000)),
            (20, |s| s.fault("controller silent")),
        ] {
            let (o, moves) = drive(8317.0, Some(after), f);
            assert!(matches!(o, PeakOutcome::Aborted(_)), "{o:?}");
            assert_eq!(moves.last(), Some(&plan().start_steps), "after {after}");
        }
        // The same frequency again is no change.
        let (o, _) = drive(8317.0, Some(4), |s| s.frequency(14_175_000));
        assert!(matches!(o, PeakOutcome::Candidate(_)));
    }

    #[test]
    fn no_clear_peak_returns_to_the_start() {
        // The peak far outside the window: the readings only fall.
        let (o, moves) = drive(9000.0, None, |s| s.stop());
        assert!(matches!(o, PeakOutcome::NoClearPeak { .. }), "{o:?}");
        assert_eq!(moves.last(), Some(&plan().start_steps));
    }

    #[test]
    fn readings_during_a_move_are_ignored_and_bad_plans_refused() {
        let mut s = PeakSearch::new(plan()).unwrap();
        assert!(matches!(s.start(), PeakRequest::Goto { .. }));
        assert_eq!(s.meter(-100.0), PeakRequest::Wait);
        assert!(s.points().is_empty());
        let mut p = plan();
        p.half_width_steps = f64::NAN;
        assert!(PeakSearch::new(p).is_err());
        let mut p = plan();
        p.points = 3;
        assert!(PeakSearch::new(p).is_err());
        let mut p = plan();
        p.predicted_steps = 40;
        p.min_steps = 0;
        p.max_steps = 10;
        assert!(PeakSearch::new(p).is_err());
    }

    #[test]
    fn the_half_width_follows_the_loaded_q() {
        // Q_u 400 at 14 MHz: Δf = 35 kHz; at 1.44 steps per kHz, 50.4 steps.
        let w = predicted_half_width_steps(14e6, 400.0, 1.44e-3);
        assert!((w - 50.4).abs() < 1e-9);
    }
}
