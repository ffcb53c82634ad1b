//! The noise-peak search through the core: every move it asks for goes
//! through `try_start` (limits, legs, inhibit lead), the inhibit is held
//! from its first move to its end, and anything but "the rig receives"
//! ends it back where it began with nothing recorded. The meter readings
//! come from the simulated loop (`sim::meters`: the resonator's response
//! through the loop physics, band noise over the receiver's floor), whose
//! true resonance is moved by a hidden "rain" offset the calibration does
//! not know; the landing is judged against that truth, not against the
//! search's own fit.

use super::test_support::{band_40m, half_width, metered_core, ms, policy, sim_loop, MotorLog};
use super::*;
use crate::antenna::swr_bandwidth_hz;
use crate::sim::meters::SimMeters;

const HZ: u64 = 7_100_000;

/// A core at the calibrated position for 7.1 MHz, the rig known to
/// receive there; the meters read the loop moved by `rain` steps.
struct Bench {
    core: Follower,
    meters: SimMeters,
    now: Duration,
    motor: MotorLog,
    ended: Vec<peak::PeakOutcome>,
    /// The rig answers no meter read.
    mute: bool,
}

impl Bench {
    fn new(rain: f64, noise_dbm: f64, seed: u64) -> Bench {
        let (core, meters, start) = metered_core(HZ, rain, noise_dbm, seed);
        let mut b = Bench {
            core,
            meters,
            now: Duration::ZERO,
            motor: MotorLog::at(start),
            ended: Vec::new(),
            mute: false,
        };
        b.core.handle_transmit(b.now, false);
        b.core.handle_frequency(b.now, HZ);
        b.advance(ms(500));
        assert!(
            b.motor.gotos.is_empty(),
            "already tuned: {:?}",
            b.motor.gotos
        );
        b
    }

    fn drain(&mut self) {
        while let Some(a) = self.core.poll_action() {
            if self.motor.take(&a, self.core.peak.is_some(), false) {
                continue;
            }
            if let Action::PeakEnded { outcome } = a {
                self.ended.push(outcome);
            }
        }
    }

    /// Runs the clock `d` on, 10 ms at a time: a leg arrives 10 ms after
    /// its `Goto`, a meter reading comes every 10 ms while one is wanted.
    fn advance(&mut self, d: Duration) {
        let end = self.now + d;
        while self.now < end {
            self.now += ms(10);
            self.drain();
            if let Some(t) = self.motor.heading.take() {
                self.motor.at = t;
                self.meters.set_position(t as f64);
                self.core.handle_arrived(self.now, t);
            } else if self.core.wants_signal_meter() && !self.mute {
                let r = self.meters.read_signal(HZ as f64);
                self.core.handle_signal_meter(self.now, r.value);
            }
            self.core.handle_timeout(self.now);
            self.drain();
        }
    }

    fn run_to_end(&mut self) {
        for _ in 0..2_000 {
            if !self.ended.is_empty() {
                break;
            }
            self.advance(ms(100));
        }
        self.advance(ms(300));
    }
}

/// Rain moving the resonance by one and a half half-power half-widths:
/// the search lands within an eighth of the loop's 1.5:1 bandwidth of the
/// true resonance, records it as a candidate, holds the inhibit from its
/// first move to its end and releases it after the tail. The eighth is
/// the target for the search; SWR bandwidth from the matched
/// resonator (`antenna::swr_bandwidth_hz`, whose source is named there).
#[test]
fn a_rained_on_loop_is_found_and_recorded_under_the_inhibit() {
    let base = sim_loop();
    let q = base.q_unloaded(HZ as f64);
    let half_width = half_width(&base, HZ);
    for seed in [1, 2, 3] {
        let mut b = Bench::new(1.5 * half_width, -105.0, seed);
        let start = b.motor.at;
        assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
        assert_eq!(b.core.status().peak_hz, Some(HZ));
        b.run_to_end();
        let [peak::PeakOutcome::Candidate(c)] = b.ended.as_slice() else {
            panic!("seed {seed}: {:?}", b.ended);
        };
        assert_eq!(b.motor.candidates, vec![(HZ, c.steps)]);
        assert_eq!(
            b.motor.at, c.steps,
            "seed {seed}: the motor rests at the peak"
        );
        let error_hz = (b.meters.sim_loop.resonance_hz(b.motor.at as f64) - HZ as f64).abs();
        let bandwidth = swr_bandwidth_hz(HZ as f64, q, 1.5);
        assert!(
            error_hz <= bandwidth / 8.0,
            "seed {seed}: {error_hz:.0} Hz off, bandwidth {bandwidth:.0} Hz"
        );
        assert!(b.motor.at != start);
        assert!(b.motor.gotos.len() > 20, "{:?}", b.motor.gotos);
        assert_eq!(b.motor.unguarded, 0);
        assert!(!b.motor.released_during);
        assert!(!b.motor.inhibit, "released after the search's tail");
        assert_eq!(b.core.tuned_hz(), Some(HZ));
        assert_eq!(b.core.status().peak_hz, None);
        assert!(b.core.status().last_peak.unwrap().starts_with("peak at"));
        // Following afterwards: the settled frequency stays in the dead band.
        b.core.handle_frequency(b.now, HZ + 100);
        let before = b.motor.gotos.len();
        b.advance(ms(600));
        assert_eq!(b.motor.gotos.len(), before);
    }
}

/// A quiet band (its noise 3 dB under the receiver's floor): "no clear
/// peak", back where it began, nothing recorded.
#[test]
fn a_quiet_band_records_nothing_and_returns() {
    let mut b = Bench::new(0.0, -118.0, 7);
    let start = b.motor.at;
    assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
    b.run_to_end();
    assert!(
        matches!(b.ended.as_slice(), [peak::PeakOutcome::NoClearPeak { .. }]),
        "{:?}",
        b.ended
    );
    assert!(b.motor.candidates.is_empty());
    assert_eq!(b.motor.at, start);
    assert!(!b.motor.inhibit);
    assert_eq!(b.motor.unguarded, 0);
}

/// A transmission during the search (a CAT-keyed over, say): the leg under
/// way is stopped, nothing moves during the over, the search ends with
/// nothing recorded and the capacitor goes back where it began once the
/// rig receives, tuned for what it was tuned for before.
#[test]
fn a_transmission_ends_the_search_with_nothing_recorded() {
    let mut b = Bench::new(0.0, -105.0, 3);
    let start = b.motor.at;
    let tuned = b.core.tuned_hz();
    assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
    b.advance(ms(400));
    assert!(b.motor.gotos.len() >= 2 && b.ended.is_empty());
    b.core.handle_transmit(b.now, true);
    b.drain();
    let during = b.motor.gotos.len();
    b.motor.heading = None; // stopped where it was
    b.advance(ms(2_000));
    assert_eq!(b.motor.gotos.len(), during, "nothing moves during the over");
    assert!(!b.core.wants_signal_meter());
    assert!(b.motor.inhibit || b.core.transmitting());
    b.core.handle_transmit(b.now, false);
    b.run_to_end();
    assert_eq!(
        b.ended,
        vec![peak::PeakOutcome::Aborted(peak::AbortReason::Transmit)]
    );
    assert!(b.motor.candidates.is_empty());
    assert_eq!(b.motor.at, start);
    assert_eq!(b.core.tuned_hz(), tuned);
    assert_eq!(b.motor.unguarded, 0);
}

/// The receive frequency changes mid-search: it ends, returns, and the new
/// frequency is then decided like any other.
#[test]
fn a_new_frequency_ends_the_search_and_is_then_followed() {
    let mut b = Bench::new(0.0, -105.0, 4);
    assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
    b.advance(ms(300));
    b.core.handle_frequency(b.now, 7_150_000);
    b.run_to_end();
    assert!(matches!(
        b.ended.as_slice(),
        [peak::PeakOutcome::Aborted(
            peak::AbortReason::FrequencyChanged { hz: 7_150_000 }
        )]
    ));
    b.advance(ms(1_000));
    let want = sim_loop().steps_for(7_150_000.0).round() as i64;
    assert_eq!(b.motor.at, want, "{:?}", b.motor.gotos);
    assert!(b.motor.candidates.is_empty());
}

/// What the search needs, refused with the reason when missing; the
/// operator's other moves are refused while it runs; `peak-stop` ends it.
#[test]
fn refusals_and_the_operators_stop() {
    // The transmit state unknown (no report yet): no search.
    let base = sim_loop();
    let mut p = policy();
    p.bands = vec![band_40m()];
    p.max_steps = 400_000;
    let start = base.steps_for(HZ as f64).round() as i64;
    let mut core =
        Follower::new(p.clone(), Arc::new(base), Some(start)).with_loop(Some(base.small_loop));
    core.handle_frequency(Duration::ZERO, HZ);
    let r = core.handle_command(ms(1), Command::Peak);
    assert!(
        matches!(&r, Reply::Refused(Refusal::CannotPeak { why }) if why.contains("receive")),
        "{r:?}"
    );
    // No loop described: no window.
    let mut core = Follower::new(p, Arc::new(base), Some(start));
    core.handle_transmit(Duration::ZERO, false);
    core.handle_frequency(Duration::ZERO, HZ);
    let r = core.handle_command(ms(1), Command::Peak);
    assert!(
        matches!(&r, Reply::Refused(Refusal::CannotPeak { why }) if why.contains("[antenna]")),
        "{r:?}"
    );
    // Running: other moves refused, a second search refused, stop returns.
    let mut b = Bench::new(0.0, -105.0, 5);
    let start = b.motor.at;
    assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
    b.advance(ms(200));
    for cmd in [
        Command::Nudge { steps: 5 },
        Command::Goto { steps: 1000 },
        Command::Mark,
        Command::Peak,
    ] {
        assert_eq!(
            b.core.handle_command(b.now, cmd),
            Reply::Refused(Refusal::Searching)
        );
    }
    assert_eq!(b.core.handle_command(b.now, Command::PeakStop), Reply::Done);
    b.run_to_end();
    assert_eq!(
        b.ended,
        vec![peak::PeakOutcome::Aborted(peak::AbortReason::OperatorStop)]
    );
    assert_eq!(b.motor.at, start);
    assert!(matches!(
        b.core.handle_command(b.now, Command::PeakStop),
        Reply::Refused(Refusal::CannotPeak { .. })
    ));
}

/// A controller fault ends the search where it is (no position to return
/// from); the recovery decides the settled frequency again.
#[test]
fn a_fault_ends_the_search_and_the_recovery_retunes() {
    let mut b = Bench::new(0.0, -105.0, 6);
    assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
    b.advance(ms(300));
    b.core.handle_fault(b.now);
    b.drain();
    b.motor.heading = None;
    assert!(matches!(
        b.ended.as_slice(),
        [peak::PeakOutcome::Aborted(peak::AbortReason::Fault(_))]
    ));
    assert!(b.motor.candidates.is_empty());
    assert!(b.motor.inhibit);
    // The controller says where the motor is: back to the frequency.
    let here = b.motor.at;
    b.core.handle_arrived(b.now, here);
    b.advance(ms(1_000));
    let want = sim_loop().steps_for(HZ as f64).round() as i64;
    assert_eq!(b.motor.at, want);
    assert!(!b.motor.inhibit);
}

/// A rig that stops answering its meter read: the search does not hold
/// the inhibit for ever; after `PEAK_METER_WAIT` without a reading it ends
/// and returns to where it began, nothing recorded.
#[test]
fn a_silent_meter_ends_the_search_and_returns() {
    let mut b = Bench::new(0.0, -105.0, 8);
    let start = b.motor.at;
    assert_eq!(b.core.handle_command(b.now, Command::Peak), Reply::Done);
    b.advance(ms(200));
    b.mute = true;
    b.advance(PEAK_METER_WAIT - ms(500));
    assert!(b.ended.is_empty(), "gave up early: {:?}", b.ended);
    b.run_to_end();
    assert!(
        matches!(
            b.ended.as_slice(),
            [peak::PeakOutcome::Aborted(peak::AbortReason::Fault(why))] if why.contains("signal-meter")
        ),
        "{:?}",
        b.ended
    );
    assert_eq!(b.motor.at, start);
    assert!(b.motor.candidates.is_empty());
    assert!(!b.motor.inhibit);
}
