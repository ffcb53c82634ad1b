//! Direct drive: a step/direction stepper driver on GPIO lines, fed by the
//! acceleration ramp in [`super::ramp`].
//!
//! The driver is blocking and meant for a thread of its own (pulse timing in
//! the tens of microseconds has no place on an async executor). The pins and
//! the clock are traits, so tests record every edge against virtual time;
//! [`GpioPins`] drives real lines through the Linux GPIO character device.
//!
//! Timing on the pins, for each move:
//!
//! ```text
//! DIR  ──┐______________________________   (set, then wait dir_setup)
//! STEP ───────────┐▔▔┐_______┐▔▔┐_______
//!        │ setup  │pw│       │pw│
//!                 ◀── d0 ───▶◀── d1 ...    (rising edge to rising edge)
//! ```
//!
//! The first delay counts from the end of the direction set-up time, so the
//! first rising edge comes `dir_setup + d0` after the direction changes.
//! The limits are checked here, before any pulse: this is the lowest layer.

use std::io;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use super::ramp::RampProfile;

/// The two outputs of a step/direction driver.
pub trait StepDirPins: Send {
    /// Direction: `true` for increasing positions.
    fn set_dir(&mut self, up: bool) -> io::Result<()>;
    /// Step line level; the driver steps on the rising edge.
    fn set_step(&mut self, high: bool) -> io::Result<()>;
}

/// Waiting, so tests can run on virtual time.
pub trait Pause: Send {
    fn pause(&mut self, d: Duration);
}

/// Real time: sleeps for the bulk and spins the last stretch, since a thread
/// sleep can overshoot by a scheduler tick.
#[derive(Debug, Default)]
pub struct RealPause;

impl Pause for RealPause {
    fn pause(&mut self, d: Duration) {
        let end = Instant::now() + d;
        // Common practice, no source: leave ~200 µs to spin.
        let spin = Duration::from_micros(200);
        if d > spin {
            std::thread::sleep(d - spin);
        }
        while Instant::now() < end {
            std::hint::spin_loop();
        }
    }
}

/// Pulse timing the driver chip needs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PulseTiming {
    /// How long the step line stays high.
    pub step_pulse: Duration,
    /// How long the direction must be stable before the first step.
    pub dir_setup: Duration,
}

/// Why a move did not happen or did not finish.
#[derive(Debug, thiserror::Error)]
pub enum DriveError {
    #[error("target {target} outside limits {min}..{max}; nothing moved")]
    OutsideLimits { target: i64, min: i64, max: i64 },
    #[error("step pulse {pulse:?} does not fit the shortest step period {period:?} at the maximum speed")]
    PulseTooLong { pulse: Duration, period: Duration },
    #[error("pin error after {done} steps (position {position}): {source}")]
    Pins {
        done: u64,
        position: i64,
        #[source]
        source: io::Error,
    },
}

/// A stepper on step/direction pins, with its position count and limits.
pub struct StepDirDriver<P: StepDirPins, C: Pause> {
    pins: P,
    clock: C,
    profile: RampProfile,
    timing: PulseTiming,
    position: i64,
    min: i64,
    max: i64,
    dir: Option<bool>,
}

impl<P: StepDirPins, C: Pause> StepDirDriver<P, C> {
    /// A driver believing the motor is at `position`.
    pub fn new(
        pins: P,
        clock: C,
        profile: RampProfile,
        timing: PulseTiming,
        limits: (i64, i64),
        position: i64,
    ) -> Result<Self, DriveError> {
        let period = Duration::try_from_secs_f64(profile.cruise_delay()).unwrap_or(Duration::MAX);
        if timing.step_pulse * 2 > period {
            return Err(DriveError::PulseTooLong {
                pulse: timing.step_pulse,
                period,
            });
        }
        Ok(StepDirDriver {
            pins,
            clock,
            profile,
            timing,
            position,
            min: limits.0,
            max: limits.1,
            dir: None,
        })
    }

    /// Where the step count says the motor is.
    pub fn position(&self) -> i64 {
        self.position
    }

    /// Defines the current position (nothing moves).
    pub fn zero(&mut self, position: i64) {
        self.position = position;
    }

    /// Moves to `target` along the ramp, blocking until done. When `stop`
    /// becomes true the motor decelerates and stops short; the position
    /// returned is where it stopped.
    pub fn move_to(&mut self, target: i64, stop: &AtomicBool) -> Result<i64, DriveError> {
        if !(self.min..=self.max).contains(&target) {
            return Err(DriveError::OutsideLimits {
                target,
                min: self.min,
                max: self.max,
            });
        }
        if target == self.position || stop.load(Ordering::Relaxed) {
            return Ok(self.position);
        }
        let up = target > self.position;
        let distance = self.position.abs_diff(target);
        let mut done = 0u64;
        let pin_err = |done, position, source| DriveError::Pins {
            done,
            position,
            source,
        };
        if self.dir != Some(up) {
            self.pins
                .set_dir(up)
                .map_err(|e| pin_err(0, self.position, e))?;
            self.dir = Some(up);
        }
        // Always honour the set-up time: the driver may have been idle with
        // the line just changed by another program or a power cycle.
        self.clock.pause(self.timing.dir_setup);
        let mut ramp = self.profile.ramp(distance);
        let mut stopping = false;
        loop {
            if !stopping && stop.load(Ordering::Relaxed) {
                stopping = true;
                ramp.stop();
            }
            let Some(delay) = ramp.next_secs() else { break };
            let delay = Duration::try_from_secs_f64(delay).unwrap_or(Duration::MAX);
            let wait = if done == 0 {
                delay
            } else {
                delay.saturating_sub(self.timing.step_pulse)
            };
            self.clock.pause(wait);
            self.pins
                .set_step(true)
                .map_err(|e| pin_err(done, self.position, e))?;
            self.position += if up { 1 } else { -1 };
            done += 1;
            self.clock.pause(self.timing.step_pulse);
            self.pins
                .set_step(false)
                .map_err(|e| pin_err(done, self.position, e))?;
        }
        Ok(self.position)
    }
}

/// Step and direction on two lines of one GPIO chip.
#[cfg(target_os = "linux")]
pub struct GpioPins {
    request: gpiocdev::Request,
    step: u32,
    dir: u32,
    /// Direction level for increasing positions.
    up_is_high: bool,
}

#[cfg(target_os = "linux")]
impl GpioPins {
    /// Requests the `step` and `dir` lines of `chip` as outputs, both low.
    pub fn open(chip: &str, step: u32, dir: u32, up_is_high: bool) -> io::Result<GpioPins> {
        let path = crate::inhibit::chip_path(chip);
        let request = gpiocdev::Request::builder()
            .on_chip(&path)
            .with_consumer("tuneward-stepper")
            .with_lines(&[step, dir])
            .as_output(gpiocdev::line::Value::Inactive)
            .request()
            .map_err(|e| {
                io::Error::other(format!(
                    "cannot request GPIO lines {step} (step) and {dir} (dir) on {}: {e}",
                    path.display()
                ))
            })?;
        Ok(GpioPins {
            request,
            step,
            dir,
            up_is_high,
        })
    }

    fn set(&mut self, line: u32, high: bool) -> io::Result<()> {
        let v = if high {
            gpiocdev::line::Value::Active
        } else {
            gpiocdev::line::Value::Inactive
        };
        self.request
            .set_value(line, v)
            .map_err(|e| io::Error::other(format!("GPIO line {line}: {e}")))
    }
}

#[cfg(target_os = "linux")]
impl StepDirPins for GpioPins {
    fn set_dir(&mut self, up: bool) -> io::Result<()> {
        let level = up == self.up_is_high;
        self.set(self.dir, level)
    }
    fn set_step(&mut self, high: bool) -> io::Result<()> {
        self.set(self.step, high)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::{Arc, Mutex};

    #[derive(Debug, Clone, Copy, PartialEq)]
    enum Edge {
        Dir(bool),
        Step(bool),
    }

    /// Virtual time shared by the recording pins and the clock.
    #[derive(Clone, Default)]
    struct Bench {
        now: Arc<Mutex<Duration>>,
        edges: Arc<Mutex<Vec<(Duration, Edge)>>>,
        fail_after: Option<usize>,
        /// Raise this flag once this many steps have been taken.
        stop_after: Option<(usize, Arc<AtomicBool>)>,
    }

    impl StepDirPins for Bench {
        fn set_dir(&mut self, up: bool) -> io::Result<()> {
            let t = *self.now.lock().unwrap();
            self.edges.lock().unwrap().push((t, Edge::Dir(up)));
            Ok(())
        }
        fn set_step(&mut self, high: bool) -> io::Result<()> {
            let mut e = self.edges.lock().unwrap();
            if self.fail_after.is_some_and(|n| e.len() >= n) {
                return Err(io::Error::other("line gone"));
            }
            let t = *self.now.lock().unwrap();
            e.push((t, Edge::Step(high)));
            if let Some((n, flag)) = &self.stop_after {
                if high && e.iter().filter(|(_, x)| *x == Edge::Step(true)).count() == *n {
                    flag.store(true, Ordering::Relaxed);
                }
            }
            Ok(())
        }
    }

    impl Pause for Bench {
        fn pause(&mut self, d: Duration) {
            *self.now.lock().unwrap() += d;
        }
    }

    fn timing() -> PulseTiming {
        PulseTiming {
            step_pulse: Duration::from_micros(5),
            dir_setup: Duration::from_micros(20),
        }
    }

    fn driver(bench: &Bench, position: i64) -> StepDirDriver<Bench, Bench> {
        let profile = RampProfile::new(20_000.0, 4000.0).unwrap();
        StepDirDriver::new(
            bench.clone(),
            bench.clone(),
            profile,
            timing(),
            (0, 10_000),
            position,
        )
        .unwrap()
    }

    fn rising(edges: &[(Duration, Edge)]) -> Vec<Duration> {
        edges
            .iter()
            .filter(|(_, e)| *e == Edge::Step(true))
            .map(|(t, _)| *t)
            .collect()
    }

    #[test]
    fn pulses_follow_the_ramp_with_set_up_and_width() {
        let bench = Bench::default();
        let mut d = driver(&bench, 100);
        let never = AtomicBool::new(false);
        assert_eq!(d.move_to(1100, &never).unwrap(), 1100);
        let edges = bench.edges.lock().unwrap().clone();
        assert_eq!(edges[0], (Duration::ZERO, Edge::Dir(true)));
        let rise = rising(&edges);
        assert_eq!(rise.len(), 1000);
        // First rising edge: set-up time plus the first ramp delay.
        let profile = RampProfile::new(20_000.0, 4000.0).unwrap();
        let delays: Vec<Duration> = profile.ramp(1000).collect();
        assert_eq!(rise[0], timing().dir_setup + delays[0]);
        for (i, w) in rise.windows(2).enumerate() {
            let period = w[1] - w[0];
            assert!(
                period.abs_diff(delays[i + 1]) <= Duration::from_nanos(1),
                "{i}"
            );
        }
        // Every pulse is exactly the configured width.
        for pair in edges[1..].chunks(2) {
            assert!(matches!(pair[0].1, Edge::Step(true)));
            assert!(matches!(pair[1].1, Edge::Step(false)));
            assert_eq!(pair[1].0 - pair[0].0, timing().step_pulse);
        }
    }

    #[test]
    fn direction_changes_only_on_reversal_and_is_set_before_stepping() {
        let bench = Bench::default();
        let mut d = driver(&bench, 500);
        let never = AtomicBool::new(false);
        d.move_to(400, &never).unwrap();
        d.move_to(300, &never).unwrap();
        d.move_to(350, &never).unwrap();
        let edges = bench.edges.lock().unwrap().clone();
        let dirs: Vec<_> = edges
            .iter()
            .enumerate()
            .filter(|(_, (_, e))| matches!(e, Edge::Dir(_)))
            .map(|(i, (t, e))| (i, *t, *e))
            .collect();
        assert_eq!(dirs.len(), 2);
        assert_eq!(dirs[0].2, Edge::Dir(false));
        assert_eq!(dirs[1].2, Edge::Dir(true));
        // The step after the reversal comes at least dir_setup later.
        let (i, t, _) = dirs[1];
        let next_step = edges[i + 1].0;
        assert!(next_step - t >= timing().dir_setup);
        assert_eq!(d.position(), 350);
        assert_eq!(rising(&edges).len(), 100 + 100 + 50);
    }

    #[test]
    fn targets_outside_limits_move_nothing() {
        let bench = Bench::default();
        let mut d = driver(&bench, 0);
        let never = AtomicBool::new(false);
        assert!(matches!(
            d.move_to(10_001, &never),
            Err(DriveError::OutsideLimits { target: 10_001, .. })
        ));
        assert!(d.move_to(-1, &never).is_err());
        assert!(bench.edges.lock().unwrap().is_empty());
        assert_eq!(d.position(), 0);
    }

    #[test]
    fn stop_decelerates_and_reports_the_steps_taken() {
        let bench = Bench::default();
        let mut d = driver(&bench, 0);
        // Stop already asked: nothing moves.
        assert_eq!(d.move_to(5000, &AtomicBool::new(true)).unwrap(), 0);
        assert!(bench.edges.lock().unwrap().is_empty());

        let flag = Arc::new(AtomicBool::new(false));
        let bench = Bench {
            stop_after: Some((50, flag.clone())),
            ..Bench::default()
        };
        let mut d = driver(&bench, 0);
        // Stopped after 50 accelerating steps: 50 more to slow down, then rest.
        assert_eq!(d.move_to(5000, &flag).unwrap(), 100);
        let rise = rising(&bench.edges.lock().unwrap());
        assert_eq!(rise.len(), 100);
        let p: Vec<Duration> = rise.windows(2).map(|w| w[1] - w[0]).collect();
        // Mirror image: the slowing periods repeat the speeding-up ones
        // (delays c0..c49 then c49..c0; the periods start at c1).
        for i in 0..48 {
            assert!(
                p[i].abs_diff(p[p.len() - 2 - i]) <= Duration::from_nanos(2),
                "{i}"
            );
        }
        assert!(p[0] < p[p.len() - 1]);
    }

    #[test]
    fn a_pin_failure_reports_where_the_count_stands() {
        let bench = Bench {
            fail_after: Some(1 + 2 * 10),
            ..Bench::default()
        };
        let mut d = driver(&bench, 0);
        let never = AtomicBool::new(false);
        match d.move_to(100, &never) {
            Err(DriveError::Pins { done, position, .. }) => {
                assert_eq!((done, position), (10, 10));
            }
            other => panic!("expected a pin error, got {other:?}"),
        }
    }

    #[test]
    fn a_pulse_too_long_for_the_speed_is_refused() {
        let bench = Bench::default();
        let profile = RampProfile::new(1000.0, 200_000.0).unwrap();
        let r = StepDirDriver::new(bench.clone(), bench, profile, timing(), (0, 1), 0);
        assert!(matches!(r, Err(DriveError::PulseTooLong { .. })));
    }
}
