//! Trapezoidal acceleration ramp for driving a stepper directly: the delay
//! before each step pulse, computed step by step without a table.
//!
//! Source: D. Austin, "Generate stepper-motor speed profiles in real time",
//! Embedded Systems Programming, January 2005. In its terms, with the step
//! angle α taken as one step and the timer counting seconds (f = 1):
//!
//! - exact time of step n from rest at constant acceleration ω̇:
//!   t_n = sqrt(2nα/ω̇), so the exact delay is c_n = t_{n+1} − t_n;
//! - first delay, with the paper's correction factor for the recurrence
//!   below: c_0 = 0.676 · f · sqrt(2α/ω̇);
//! - recurrence: c_n = c_{n−1} − 2c_{n−1}/(4n+1);
//! - steps needed to reach speed ω: n = ω²/(2αω̇);
//! - deceleration is the acceleration run backwards; the recurrence inverts
//!   exactly as c_{n−1} = c_n · (4n+1)/(4n−1), so no table is kept.
//!
//! A move of `steps` accelerates for min(ω²/(2ω̇), steps/2) steps, cruises,
//! and decelerates symmetrically. [`Ramp::stop`] turns the ramp into a
//! deceleration from whatever speed it has reached.

use std::time::Duration;

use crate::error::Located;

/// Austin's correction of the first delay (see the module docs).
pub const FIRST_STEP_FACTOR: f64 = 0.676;

/// How fast the motor may go and how quickly it may get there.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RampProfile {
    /// Acceleration, steps per second².
    pub accel: f64,
    /// Cruising speed, steps per second.
    pub max_speed: f64,
}

impl RampProfile {
    /// Checks both are positive and finite.
    pub fn new(accel: f64, max_speed: f64) -> Result<RampProfile, Located> {
        for (name, v) in [("acceleration", accel), ("maximum speed", max_speed)] {
            if !(v.is_finite() && v > 0.0) {
                return Err(Located::named(name, "a positive number", v.to_string()));
            }
        }
        Ok(RampProfile { accel, max_speed })
    }

    /// First delay from rest, corrected: 0.676·sqrt(2/ω̇) (Austin 2005).
    pub fn first_delay(&self) -> f64 {
        FIRST_STEP_FACTOR * (2.0 / self.accel).sqrt()
    }

    /// Delay at cruising speed.
    pub fn cruise_delay(&self) -> f64 {
        1.0 / self.max_speed
    }

    /// Steps to reach cruising speed: ω²/(2ω̇) (Austin 2005), rounded down.
    pub fn steps_to_speed(&self) -> u64 {
        let n = self.max_speed * self.max_speed / (2.0 * self.accel);
        if n.is_finite() && n >= 0.0 {
            n.floor().min(u64::MAX as f64 / 4.0) as u64
        } else {
            0
        }
    }

    /// The schedule for a move of `steps` steps from rest to rest.
    pub fn ramp(&self, steps: u64) -> Ramp {
        Ramp::new(*self, steps)
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Phase {
    Accel,
    Cruise,
    Decel,
}

/// The delays (in seconds) before each step pulse of one move. Yields
/// exactly as many delays as steps (fewer after [`stop`](Ramp::stop)).
#[derive(Debug, Clone)]
pub struct Ramp {
    profile: RampProfile,
    phase: Phase,
    /// Steps still to yield.
    remaining: u64,
    /// Acceleration steps planned.
    accel_steps: u64,
    /// Cruise steps still to yield.
    cruise_left: u64,
    cruise_delay: f64,
    /// Ramp level: how many acceleration steps the current speed took.
    level: u64,
    /// The delay for `level` (c_level), from the recurrence.
    c: f64,
}

impl Ramp {
    pub fn new(profile: RampProfile, steps: u64) -> Ramp {
        let accel_steps = profile.steps_to_speed().min(steps / 2);
        let cruise = steps - 2 * accel_steps;
        // c_{accel_steps}: the delay the ramp would have reached next.
        let mut c = profile.first_delay();
        for n in 1..=accel_steps {
            c = next_delay(c, n);
        }
        let cruise_delay = c.max(profile.cruise_delay());
        Ramp {
            profile,
            phase: if accel_steps > 0 {
                Phase::Accel
            } else if cruise > 0 {
                Phase::Cruise
            } else {
                Phase::Decel
            },
            remaining: steps,
            accel_steps,
            cruise_left: cruise,
            cruise_delay,
            level: 0,
            c: profile.first_delay(),
        }
    }

    /// Steps still to come.
    pub fn remaining(&self) -> u64 {
        self.remaining
    }

    /// Decelerate from the current speed now: the remaining steps become the
    /// deceleration ramp (as many steps as the speed took to reach). The
    /// move ends short of its target; the caller counts the steps taken.
    pub fn stop(&mut self) {
        if self.phase == Phase::Decel {
            return;
        }
        self.remaining = self.level.min(self.remaining);
        self.cruise_left = 0;
        self.phase = Phase::Decel;
        // Next delay yielded is c_{level-1}.
        if self.level > 0 {
            self.c = prev_delay(self.c, self.level);
        }
    }

    /// The next delay in seconds (the iterator yields [`Duration`]s).
    pub fn next_secs(&mut self) -> Option<f64> {
        if self.remaining == 0 {
            return None;
        }
        self.remaining -= 1;
        match self.phase {
            Phase::Accel => {
                let d = self.c;
                self.level += 1;
                self.c = next_delay(self.c, self.level);
                if self.level >= self.accel_steps {
                    self.phase = if self.cruise_left > 0 {
                        Phase::Cruise
                    } else {
                        Phase::Decel
                    };
                    if self.phase == Phase::Decel {
                        self.c = prev_delay(self.c, self.level);
                    }
                }
                Some(d)
            }
            Phase::Cruise => {
                self.cruise_left = self.cruise_left.saturating_sub(1);
                if self.cruise_left == 0 {
                    self.phase = Phase::Decel;
                    if self.level > 0 {
                        self.c = prev_delay(self.c, self.level);
                    }
                }
                Some(self.cruise_delay)
            }
            Phase::Decel => {
                // Yields c_{level-1}, ..., c_0.
                let d = if self.level == 0 {
                    // Only reachable for a ramp with no acceleration steps,
                    // which yields at most one step: from rest.
                    self.profile.first_delay().max(self.cruise_delay)
                } else {
                    self.c
                };
                if self.level > 1 {
                    self.level -= 1;
                    self.c = prev_delay(self.c, self.level);
                } else {
                    self.level = 0;
                }
                Some(d)
            }
        }
    }
}

impl Iterator for Ramp {
    type Item = Duration;

    fn next(&mut self) -> Option<Duration> {
        self.next_secs()
            .map(|s| Duration::try_from_secs_f64(s).unwrap_or(Duration::MAX))
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        let n = usize::try_from(self.remaining).unwrap_or(usize::MAX);
        (n, Some(n))
    }
}

/// c_n from c_{n−1}: c_n = c_{n−1} − 2c_{n−1}/(4n+1) (Austin 2005).
fn next_delay(c_prev: f64, n: u64) -> f64 {
    let k = 4.0 * n as f64 + 1.0;
    c_prev - 2.0 * c_prev / k
}

/// c_{n−1} from c_n, the exact inverse of [`next_delay`].
fn prev_delay(c_n: f64, n: u64) -> f64 {
    let n = n as f64;
    c_n * (4.0 * n + 1.0) / (4.0 * n - 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn exact_delay(accel: f64, n: u64) -> f64 {
        // c_n = t_{n+1} − t_n with t_n = sqrt(2n/ω̇) (Austin 2005, exact
        // time for constant acceleration from rest).
        let t = |n: u64| (2.0 * n as f64 / accel).sqrt();
        t(n + 1) - t(n)
    }

    fn profile() -> RampProfile {
        RampProfile::new(1000.0, 1000.0).unwrap()
    }

    #[test]
    fn uncorrected_first_step_is_off_by_the_known_0_44() {
        // Austin 2005: with the exact c_0, the recurrence's c_1 is about 0.44
        // (44 %) too long; hence the 0.676 factor.
        let a: f64 = 1000.0;
        let c0 = (2.0 / a).sqrt();
        let c1 = next_delay(c0, 1);
        let err = c1 / exact_delay(a, 1) - 1.0;
        assert!((0.44..0.45).contains(&err), "{err}");
    }

    #[test]
    fn corrected_ramp_tracks_the_exact_delays() {
        let p = profile();
        let delays: Vec<f64> = {
            let mut r = p.ramp(2 * p.steps_to_speed());
            std::iter::from_fn(|| r.next_secs()).collect()
        };
        let a = p.accel;
        // c_1 within about 2 % with the correction, every later step
        // within 1 % (Austin 2005 shows the error falling off like 1/n²).
        let e1 = (delays[1] / exact_delay(a, 1) - 1.0).abs();
        assert!(e1 < 0.025, "c1 error {e1}");
        for (n, d) in delays.iter().enumerate().take(500).skip(2) {
            let e = (d / exact_delay(a, n as u64) - 1.0).abs();
            assert!(e < 0.01, "c{n} error {e}");
        }
        // Far out the recurrence converges to the exact delay.
        let e = (delays[499] / exact_delay(a, 499) - 1.0).abs();
        assert!(e < 1e-4, "c499 error {e}");
    }

    #[test]
    fn trapezoid_total_time_matches_the_analytic_profile() {
        let p = profile();
        // 1000 steps/s at 1000 steps/s²: 500 steps to speed.
        assert_eq!(p.steps_to_speed(), 500);
        let d = 5000u64;
        let total: f64 = {
            let mut r = p.ramp(d);
            std::iter::from_fn(|| r.next_secs()).sum()
        };
        // Analytic trapezoid from rest to rest: T = d/v + v/a.
        let analytic = d as f64 / p.max_speed + p.max_speed / p.accel;
        // The schedule is short by the first-step correction at each end,
        // 2·(1 − 0.676)·sqrt(2/a), plus a small recurrence residue.
        let correction = 2.0 * (1.0 - FIRST_STEP_FACTOR) * (2.0 / p.accel).sqrt();
        let diff = analytic - total;
        assert!(diff > 0.0, "{total} vs {analytic}");
        assert!(
            (diff - correction).abs() < 0.002,
            "diff {diff}, correction {correction}"
        );
    }

    #[test]
    fn triangle_total_time_matches_the_analytic_profile() {
        let p = RampProfile::new(400.0, 5000.0).unwrap();
        let d = 800u64;
        let mut r = p.ramp(d);
        let delays: Vec<f64> = std::iter::from_fn(|| r.next_secs()).collect();
        assert_eq!(delays.len(), 800);
        // Speed never reached: T = 2·sqrt(d/a).
        let analytic = 2.0 * (d as f64 / p.accel).sqrt();
        let correction = 2.0 * (1.0 - FIRST_STEP_FACTOR) * (2.0 / p.accel).sqrt();
        let total: f64 = delays.iter().sum();
        assert!(
            ((analytic - total) - correction).abs() < 0.002,
            "{total} vs {analytic}"
        );
    }

    #[test]
    fn ramp_is_symmetric_monotonic_and_never_too_fast() {
        let p = RampProfile::new(2000.0, 1500.0).unwrap();
        for steps in [0u64, 1, 2, 3, 7, 100, 1125, 1126, 1127, 4001] {
            let mut r = p.ramp(steps);
            let d: Vec<f64> = std::iter::from_fn(|| r.next_secs()).collect();
            assert_eq!(d.len() as u64, steps);
            for (i, x) in d.iter().enumerate() {
                let mirror = d[d.len() - 1 - i];
                assert!((x - mirror).abs() <= 1e-9 * x, "steps {steps} i {i}");
                assert!(*x >= p.cruise_delay() * (1.0 - 1e-12), "too fast at {i}");
            }
            let half = d.len() / 2;
            for w in d[..half].windows(2) {
                assert!(w[1] <= w[0], "steps {steps}: not accelerating");
            }
        }
    }

    #[test]
    fn stop_decelerates_from_the_speed_reached() {
        let p = profile();
        let mut r = p.ramp(5000);
        let taken: Vec<f64> = (0..100).map(|_| r.next_secs().unwrap()).collect();
        r.stop();
        assert_eq!(r.remaining(), 100);
        let rest: Vec<f64> = std::iter::from_fn(|| r.next_secs()).collect();
        assert_eq!(rest.len(), 100);
        for (i, d) in rest.iter().enumerate() {
            let mirror = taken[taken.len() - 1 - i];
            assert!((d - mirror).abs() <= 1e-9 * d, "{i}: {d} vs {mirror}");
        }
        // Stopping while cruising takes the full deceleration.
        let mut r = p.ramp(5000);
        for _ in 0..2000 {
            r.next_secs();
        }
        r.stop();
        assert_eq!(r.remaining(), 500);
    }

    #[test]
    fn bad_profiles_are_refused() {
        assert_eq!(
            RampProfile::new(0.0, 10.0).unwrap_err().to_string(),
            "acceleration: expected a positive number, found 0"
        );
        assert_eq!(
            RampProfile::new(10.0, f64::NAN).unwrap_err().to_string(),
            "maximum speed: expected a positive number, found NaN"
        );
        assert_eq!(
            RampProfile::new(-1.0, 10.0).unwrap_err().to_string(),
            "acceleration: expected a positive number, found -1"
        );
    }
}
