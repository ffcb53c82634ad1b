//! A simulated tuner: a stepper that takes time to move, settles, and has
//! backlash in its drive train. Used by `replay`, `demo` and the controller
//! simulator; arrival times follow from distance and speed.

use std::time::Duration;

/// How the simulated mechanics behave.
#[derive(Debug, Clone, Copy)]
pub struct SimParams {
    pub steps_per_second: f64,
    pub settle_ms: u64,
    /// Lost motion when the direction reverses: the capacitor lags the motor
    /// by this many steps on a reversal.
    pub backlash_steps: i64,
    pub min_steps: i64,
    pub max_steps: i64,
}

/// The simulated motor's motion under way: one leg, from start to last step.
#[derive(Debug, Clone, Copy)]
struct Motion {
    from: i64,
    to: i64,
    start: Duration,
    /// When the last step is taken (arrival is this plus the settle time).
    end: Duration,
}

/// The simulated motor and capacitor.
#[derive(Debug, Clone)]
pub struct SimTuner {
    params: SimParams,
    /// Motor position at rest, or where the current leg started.
    rest: i64,
    leg: Option<Motion>,
    /// +1 if the last motion was upward, -1 downward, 0 none yet.
    last_dir: i64,
    travelled: u64,
}

impl SimTuner {
    pub fn new(params: SimParams, position: i64) -> Self {
        SimTuner {
            params,
            rest: position.clamp(params.min_steps, params.max_steps),
            leg: None,
            last_dir: 0,
            travelled: 0,
        }
    }

    /// Time to travel `distance` steps at the configured speed
    /// ([`super::travel_time`], uncapped).
    pub fn travel_time(&self, distance: u64) -> Duration {
        super::travel_time(distance, self.params.steps_per_second, Duration::MAX)
    }

    /// Starts a move to `target` (clamped to the limits: the mechanics have end
    /// stops too) and returns when it will have arrived and settled.
    pub fn goto(&mut self, now: Duration, target: i64) -> Duration {
        self.goto_at_speed(now, target, self.params.steps_per_second)
    }

    /// Starts a move to `target` at `speed` steps/s (at most the configured
    /// speed; homing runs slowly) and returns when it will have settled.
    pub fn goto_at_speed(&mut self, now: Duration, target: i64, speed: f64) -> Duration {
        let speed = if speed.is_finite() && speed > 0.0 {
            speed.min(self.params.steps_per_second)
        } else {
            self.params.steps_per_second
        };
        let from = self.position_at(now);
        let to = target.clamp(self.params.min_steps, self.params.max_steps);
        let distance = from.abs_diff(to);
        let end = now + super::travel_time(distance, speed, Duration::MAX);
        if to != from {
            self.last_dir = (to - from).signum();
        }
        self.travelled += distance;
        self.rest = from;
        self.leg = Some(Motion {
            from,
            to,
            start: now,
            end,
        });
        end + Duration::from_millis(self.params.settle_ms)
    }

    /// Stops at once; returns where the motor stopped.
    pub fn stop(&mut self, now: Duration) -> i64 {
        let here = self.position_at(now);
        if let Some(leg) = self.leg.take() {
            // Only the part actually travelled counts.
            let planned = leg.from.abs_diff(leg.to);
            let done = leg.from.abs_diff(here);
            self.travelled = self.travelled.saturating_sub(planned - done.min(planned));
        }
        self.rest = here;
        here
    }

    /// Motor position at `now`, moving linearly along the current leg.
    pub fn position_at(&self, now: Duration) -> i64 {
        match self.leg {
            None => self.rest,
            Some(leg) if now >= leg.end => leg.to,
            Some(leg) if now <= leg.start => leg.from,
            Some(leg) => {
                let span = (leg.end - leg.start).as_secs_f64();
                let frac = (now - leg.start).as_secs_f64() / span;
                leg.from + ((leg.to - leg.from) as f64 * frac).round() as i64
            }
        }
    }

    /// Where the capacitor really is: the motor position less the lost
    /// motion of the last reversal. A controller that always approaches from
    /// one side sees a constant offset, which the calibration absorbs.
    pub fn capacitor_at(&self, now: Duration) -> f64 {
        let motor = self.position_at(now) as f64;
        motor - self.last_dir as f64 * self.params.backlash_steps as f64 / 2.0
    }

    /// Total steps the motor has travelled.
    pub fn travelled(&self) -> u64 {
        self.travelled
    }

    pub fn params(&self) -> &SimParams {
        &self.params
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn params() -> SimParams {
        SimParams {
            steps_per_second: 1000.0,
            settle_ms: 50,
            backlash_steps: 20,
            min_steps: 0,
            max_steps: 10_000,
        }
    }

    #[test]
    fn arrival_follows_distance_and_speed() {
        let mut t = SimTuner::new(params(), 1000);
        let arrive = t.goto(Duration::from_secs(1), 3000);
        // 2000 steps at 1000 steps/s = 2 s, plus 50 ms settle.
        assert_eq!(arrive, Duration::from_millis(3050));
        assert_eq!(t.position_at(Duration::from_secs(2)), 2000);
        assert_eq!(t.position_at(Duration::from_secs(4)), 3000);
        assert_eq!(t.travelled(), 2000);
    }

    #[test]
    fn stop_counts_only_travelled_steps() {
        let mut t = SimTuner::new(params(), 0);
        t.goto(Duration::ZERO, 1000);
        assert_eq!(t.stop(Duration::from_millis(250)), 250);
        assert_eq!(t.travelled(), 250);
        assert_eq!(t.position_at(Duration::from_secs(9)), 250);
    }

    #[test]
    fn targets_beyond_end_stops_are_clamped() {
        let mut t = SimTuner::new(params(), 9_990);
        t.goto(Duration::ZERO, 20_000);
        assert_eq!(t.position_at(Duration::from_secs(60)), 10_000);
    }

    #[test]
    fn backlash_shows_in_capacitor_position_by_direction() {
        let mut t = SimTuner::new(params(), 500);
        t.goto(Duration::ZERO, 600);
        let up = t.capacitor_at(Duration::from_secs(5));
        t.goto(Duration::from_secs(5), 600 - 100);
        t.goto(Duration::from_secs(10), 600);
        let up_again = t.capacitor_at(Duration::from_secs(15));
        assert_eq!(up, up_again);
        t.goto(Duration::from_secs(15), 700);
        t.goto(Duration::from_secs(20), 600);
        let down = t.capacitor_at(Duration::from_secs(25));
        assert_eq!(up - down, -20.0);
    }
}
