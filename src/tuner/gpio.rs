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

/// The switch inputs of a directly driven stepper (a home switch, end-stop
/// switches), read before every step. A trait, so tests drive them from
/// the motor's simulated position.
pub trait SwitchInputs: Send {
    /// The raw levels now (`true`: closed), before debouncing.
    fn read(&mut self) -> io::Result<SwitchLevels>;
}

/// Raw switch levels.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SwitchLevels {
    pub home: bool,
    pub low_stop: bool,
    pub high_stop: bool,
}

/// A switch counts as closed only after this many readings in a row say
/// so (one reading per step): contact bounce and a noisy line do not stop
/// or home the motor, and a closed switch is acted on within as many
/// steps. Common practice, no source.
pub const SWITCH_DEBOUNCE_READS: u32 = 3;

/// Consecutive-reading debounce of the three switches.
#[derive(Debug, Clone, Copy, Default)]
struct Debounced {
    runs: [u32; 3],
}

impl Debounced {
    /// Takes a reading; the debounced levels.
    fn take(&mut self, raw: SwitchLevels) -> SwitchLevels {
        let levels = [raw.home, raw.low_stop, raw.high_stop];
        for (run, closed) in self.runs.iter_mut().zip(levels) {
            *run = if closed { run.saturating_add(1) } else { 0 };
        }
        let closed = |i: usize| self.runs[i] >= SWITCH_DEBOUNCE_READS;
        SwitchLevels {
            home: closed(0),
            low_stop: closed(1),
            high_stop: closed(2),
        }
    }
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
    #[error("end-stop switch at the {side} end closed at count {position}; the motor was stopped")]
    EndStop {
        side: super::HomeSide,
        position: i64,
    },
    #[error(
        "home switch not found within {steps} steps toward the {side} end (position {position})"
    )]
    HomeNotFound {
        side: super::HomeSide,
        steps: u64,
        position: i64,
    },
    #[error("no home switch is wired to this drive")]
    NoHomeSwitch,
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
    /// The switch inputs, if any are wired.
    switches: Option<Box<dyn SwitchInputs>>,
    /// Whether a home switch is among them.
    has_home: bool,
    debounce: Debounced,
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
            switches: None,
            has_home: false,
            debounce: Debounced::default(),
        })
    }

    /// The same driver with switch inputs (`has_home`: a home switch is
    /// among them).
    pub fn with_switches(mut self, switches: Box<dyn SwitchInputs>, has_home: bool) -> Self {
        self.switches = Some(switches);
        self.has_home = has_home;
        self
    }

    /// A home switch is wired.
    pub fn has_home(&self) -> bool {
        self.has_home
    }

    /// The debounced switches now (all open without inputs).
    fn switches(&mut self, done: u64) -> Result<SwitchLevels, DriveError> {
        let Some(sw) = self.switches.as_mut() else {
            return Ok(SwitchLevels::default());
        };
        let raw = sw.read().map_err(|source| DriveError::Pins {
            done,
            position: self.position,
            source,
        })?;
        Ok(self.debounce.take(raw))
    }

    /// The end stop in the direction of travel has closed: stop at once
    /// (no deceleration: the mechanics are at their end).
    fn end_stop(&mut self, up: bool, done: u64) -> Result<(), DriveError> {
        let sw = self.switches(done)?;
        self.end_stop_in(sw, up)
    }

    /// `Err` when the end stop toward which `up` runs is closed in `sw`.
    fn end_stop_in(&self, sw: SwitchLevels, up: bool) -> Result<(), DriveError> {
        let (closed, side) = if up {
            (sw.high_stop, super::HomeSide::High)
        } else {
            (sw.low_stop, super::HomeSide::Low)
        };
        if closed {
            return Err(DriveError::EndStop {
                side,
                position: self.position,
            });
        }
        Ok(())
    }

    fn set_direction(&mut self, up: bool) -> Result<(), DriveError> {
        if self.dir != Some(up) {
            self.pins.set_dir(up).map_err(|source| DriveError::Pins {
                done: 0,
                position: self.position,
                source,
            })?;
            self.dir = Some(up);
        }
        self.clock.pause(self.timing.dir_setup);
        Ok(())
    }

    /// One step pulse (after `wait`) in direction `up`.
    fn step(&mut self, up: bool, wait: Duration, done: u64) -> Result<(), DriveError> {
        let pin_err = |done, position, source| DriveError::Pins {
            done,
            position,
            source,
        };
        self.clock.pause(wait);
        self.pins
            .set_step(true)
            .map_err(|e| pin_err(done, self.position, e))?;
        self.position += if up { 1 } else { -1 };
        self.clock.pause(self.timing.step_pulse);
        self.pins
            .set_step(false)
            .map_err(|e| pin_err(done + 1, self.position, e))
    }

    /// Runs toward `side` at a constant `speed` (steps/s, at most the
    /// cruise speed) until the home switch reads closed (debounced), then
    /// calls that position `position`. The end stops still stop it; the
    /// run gives up after twice the travel. Blocking; `stop` ends it early
    /// (an error: not homed).
    pub fn home(
        &mut self,
        side: super::HomeSide,
        position: i64,
        speed: f64,
        stop: &AtomicBool,
    ) -> Result<i64, DriveError> {
        if !self.has_home {
            return Err(DriveError::NoHomeSwitch);
        }
        let up = side == super::HomeSide::High;
        let cruise = 1.0 / self.profile.cruise_delay();
        let speed = if speed.is_finite() && speed > 0.0 {
            speed.min(cruise)
        } else {
            cruise
        };
        let period = Duration::try_from_secs_f64(1.0 / speed).unwrap_or(Duration::MAX);
        let bound = self.min.abs_diff(self.max).saturating_mul(2).max(1);
        self.debounce = Debounced::default();
        self.set_direction(up)?;
        let mut done = 0u64;
        loop {
            let sw = self.switches(done)?;
            if sw.home {
                self.zero(position);
                return Ok(position);
            }
            self.end_stop_in(sw, up)?;
            if done >= bound || stop.load(Ordering::Relaxed) {
                return Err(DriveError::HomeNotFound {
                    side,
                    steps: done,
                    position: self.position,
                });
            }
            self.step(up, period.saturating_sub(self.timing.step_pulse), done)?;
            done += 1;
        }
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
            // The lowest layer: an end stop stops the motor whatever
            // asked for the move.
            self.end_stop(up, done)?;
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
        let request = crate::devices::request_gpio_lines(
            chip,
            &[step, dir],
            "tuneward-stepper",
            &format!("lines {step} (step) and {dir} (dir)"),
            crate::devices::GpioUse::Output {
                start_active: false,
            },
            true,
        )?;
        Ok(GpioPins {
            request,
            step,
            dir,
            up_is_high,
        })
    }

    fn set(&mut self, line: u32, high: bool) -> io::Result<()> {
        crate::devices::set_gpio(&self.request, line, high)
    }
}

/// Which GPIO lines of the direct drive's chip the switches are on (any
/// may be absent).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SwitchLines {
    pub home: Option<u32>,
    pub low_stop: Option<u32>,
    pub high_stop: Option<u32>,
}

impl SwitchLines {
    /// The wired lines, each once, with what each is for (for the request
    /// and its error).
    pub fn wired(&self) -> Vec<(u32, &'static str)> {
        let mut out: Vec<(u32, &'static str)> = Vec::new();
        for (line, name) in [
            (self.home, "home"),
            (self.low_stop, "low end stop"),
            (self.high_stop, "high end stop"),
        ] {
            if let Some(l) = line {
                if !out.iter().any(|(o, _)| *o == l) {
                    out.push((l, name));
                }
            }
        }
        out
    }

    /// The switch levels from a reading of each wired line (`closed(line)`).
    pub fn levels(
        &self,
        mut closed: impl FnMut(u32) -> io::Result<bool>,
    ) -> io::Result<SwitchLevels> {
        let mut read = |line: Option<u32>| line.map(&mut closed).transpose();
        Ok(SwitchLevels {
            home: read(self.home)?.unwrap_or(false),
            low_stop: read(self.low_stop)?.unwrap_or(false),
            high_stop: read(self.high_stop)?.unwrap_or(false),
        })
    }
}

/// The direct drive's switches on GPIO input lines of its chip.
#[cfg(target_os = "linux")]
pub struct GpioSwitches {
    request: gpiocdev::Request,
    lines: SwitchLines,
}

#[cfg(target_os = "linux")]
impl GpioSwitches {
    /// Requests the wired lines of `chip` as inputs. `closed_high`: a
    /// closed switch reads high (else low: a switch to ground against a
    /// pull-up; the kernel inverts the level so that *active* is closed).
    /// `None` when no switch is wired.
    pub fn open(
        chip: &str,
        lines: SwitchLines,
        closed_high: bool,
    ) -> io::Result<Option<GpioSwitches>> {
        let wired = lines.wired();
        if wired.is_empty() {
            return Ok(None);
        }
        let offsets: Vec<u32> = wired.iter().map(|(l, _)| *l).collect();
        let what = wired
            .iter()
            .map(|(l, n)| format!("{l} ({n})"))
            .collect::<Vec<_>>()
            .join(", ");
        let request = crate::devices::request_gpio_lines(
            chip,
            &offsets,
            "tuneward-switches",
            &format!("lines {what}"),
            crate::devices::GpioUse::Input,
            closed_high,
        )?;
        Ok(Some(GpioSwitches { request, lines }))
    }
}

#[cfg(target_os = "linux")]
impl SwitchInputs for GpioSwitches {
    fn read(&mut self) -> io::Result<SwitchLevels> {
        let request = &self.request;
        self.lines
            .levels(|line| crate::devices::gpio_active(request, line))
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

/// What the driver thread is asked to do.
#[derive(Debug)]
enum Job {
    Move(i64),
    Zero(i64),
    Home {
        side: super::HomeSide,
        position: i64,
        speed: u32,
    },
}

/// What the driver thread reports back.
#[derive(Debug)]
enum Done {
    /// A move ended (arrived, or stopped short) at this position.
    Moved(i64),
    /// A move failed part way; the position is the step count at failure.
    Failed { position: i64, text: String },
    /// An end stop closed and stopped the motor here (`LIMIT`).
    EndStop {
        side: super::HomeSide,
        position: i64,
    },
    /// The home switch closed; the count is now this (`HOMED`).
    Homed(i64),
}

/// A step/direction driver served through the line protocol, so that the
/// controller link (with its limits, interlock and deadlines) drives it like
/// any controller. The driver runs on a thread of its own; one protocol task
/// answers lines, and a new connection replaces the previous one.
#[derive(Clone)]
pub struct DirectController {
    conns: tokio::sync::mpsc::Sender<tokio::io::DuplexStream>,
}

impl DirectController {
    /// Starts the driver thread and the protocol task. `settle` is the wait
    /// after the last step before `AT` is reported.
    pub fn start<P, C>(driver: StepDirDriver<P, C>, settle: Duration) -> DirectController
    where
        P: StepDirPins + 'static,
        C: Pause + 'static,
    {
        let (conn_tx, conn_rx) = tokio::sync::mpsc::channel(2);
        let (job_tx, job_rx) = std::sync::mpsc::channel::<Job>();
        let (done_tx, done_rx) = tokio::sync::mpsc::unbounded_channel::<Done>();
        let stop = std::sync::Arc::new(AtomicBool::new(false));
        let position = driver.position();
        let (min, max) = (driver.min, driver.max);
        let has_home = driver.has_home();
        let thread_stop = stop.clone();
        std::thread::spawn(move || {
            let mut driver = driver;
            while let Ok(job) = job_rx.recv() {
                match job {
                    Job::Zero(n) => driver.zero(n),
                    Job::Move(t) => {
                        let done = match driver.move_to(t, &thread_stop) {
                            Ok(p) => Done::Moved(p),
                            Err(DriveError::EndStop { side, position }) => {
                                Done::EndStop { side, position }
                            }
                            Err(e) => Done::Failed {
                                position: driver.position(),
                                text: e.to_string(),
                            },
                        };
                        if done_tx.send(done).is_err() {
                            return;
                        }
                    }
                    Job::Home {
                        side,
                        position,
                        speed,
                    } => {
                        let done = match driver.home(side, position, f64::from(speed), &thread_stop)
                        {
                            Ok(p) => Done::Homed(p),
                            Err(DriveError::EndStop { side, position }) => {
                                Done::EndStop { side, position }
                            }
                            Err(e) => Done::Failed {
                                position: driver.position(),
                                text: e.to_string(),
                            },
                        };
                        if done_tx.send(done).is_err() {
                            return;
                        }
                    }
                }
            }
        });
        let task = DirectTask {
            jobs: job_tx,
            done: done_rx,
            stop,
            min,
            max,
            settle,
            position,
            moving: None,
            next_target: None,
            answer_stop: false,
            settle_until: None,
            has_home,
            homing: false,
            boot: fastrand::i64(1..=999_999_999_999_999_999),
        };
        tokio::spawn(task.serve(conn_rx));
        DirectController { conns: conn_tx }
    }

    /// A new connection to the controller (replacing any previous one).
    pub async fn connect(&self) -> io::Result<tokio::io::DuplexStream> {
        let (ours, theirs) = tokio::io::duplex(1024);
        self.conns
            .send(theirs)
            .await
            .map_err(|_| io::Error::other("direct drive task has ended"))?;
        Ok(ours)
    }
}

struct DirectTask {
    jobs: std::sync::mpsc::Sender<Job>,
    done: tokio::sync::mpsc::UnboundedReceiver<Done>,
    stop: std::sync::Arc<AtomicBool>,
    min: i64,
    max: i64,
    settle: Duration,
    /// Position at rest (or where the last move ended).
    position: i64,
    /// Target reported to the host while a move (or its settling) is under way.
    moving: Option<i64>,
    /// A new target to go to once the current move has stopped.
    next_target: Option<i64>,
    /// The host asked STOP: answer `AT` when the move has ended.
    answer_stop: bool,
    /// The move has ended; `AT` is due at this instant.
    settle_until: Option<tokio::time::Instant>,
    /// A home switch is wired.
    has_home: bool,
    /// A homing run is under way (`HOMED` or `LIMIT` ends it).
    homing: bool,
    /// This process's number for `BOOT`: the direct drive counts in the
    /// process, so every start of it is a new power-on.
    boot: i64,
}

impl DirectTask {
    async fn serve(mut self, mut conns: tokio::sync::mpsc::Receiver<tokio::io::DuplexStream>) {
        use super::line::{LineFramer, Reply, Request};
        use tokio::io::{AsyncReadExt, AsyncWriteExt};
        let mut stream: Option<tokio::io::DuplexStream> = None;
        let mut framer = LineFramer::new();
        let mut inbuf = bytes::BytesMut::with_capacity(256);
        loop {
            let mut out = bytes::BytesMut::new();
            let settle_until = self.settle_until;
            tokio::select! {
                c = conns.recv() => match c {
                    Some(c) => {
                        stream = Some(c);
                        framer = LineFramer::new();
                        inbuf.clear();
                    }
                    None => {
                        // No one can connect any more: stop the motor and end.
                        self.stop.store(true, Ordering::Relaxed);
                        return;
                    }
                },
                r = async {
                    match stream.as_mut() {
                        Some(s) => s.read_buf(&mut inbuf).await,
                        None => std::future::pending().await,
                    }
                } => {
                    match r {
                        Ok(0) | Err(_) => stream = None,
                        Ok(_) => {
                            while let Some(line) = framer.next_line(&mut inbuf) {
                                let reply = match line.and_then(|l| Request::parse(&l)) {
                                    Ok(req) => self.request(req),
                                    Err(e) => Some(Reply::Err(e.to_string())),
                                };
                                if let Some(r) = reply {
                                    r.encode(&mut out);
                                }
                            }
                        }
                    }
                }
                d = self.done.recv() => match d {
                    None => return,
                    Some(Done::Moved(p)) => {
                        self.position = p;
                        if let Some(t) = self.next_target.take() {
                            self.start_move(t);
                        } else if self.answer_stop {
                            self.answer_stop = false;
                            self.moving = None;
                            Reply::At(p).encode(&mut out);
                        } else {
                            self.settle_until = Some(tokio::time::Instant::now() + self.settle);
                        }
                    }
                    Some(Done::EndStop { side, position }) => {
                        self.position = position;
                        self.moving = None;
                        self.next_target = None;
                        self.answer_stop = false;
                        self.homing = false;
                        Reply::Limit { side, steps: position }.encode(&mut out);
                    }
                    Some(Done::Homed(p)) => {
                        self.position = p;
                        self.moving = None;
                        self.homing = false;
                        Reply::Homed(p).encode(&mut out);
                    }
                    Some(Done::Failed { position, text }) => {
                        self.homing = false;
                        self.position = position;
                        self.moving = None;
                        self.next_target = None;
                        if std::mem::take(&mut self.answer_stop) {
                            // A STOP ended a homing run: it is at rest here.
                            Reply::At(position).encode(&mut out);
                        } else {
                            Reply::Err(text).encode(&mut out);
                        }
                    }
                },
                _ = async {
                    match settle_until {
                        Some(d) => tokio::time::sleep_until(d).await,
                        None => std::future::pending().await,
                    }
                } => {
                    self.settle_until = None;
                    self.moving = None;
                    Reply::At(self.position).encode(&mut out);
                }
            }
            if !out.is_empty() {
                if let Some(s) = stream.as_mut() {
                    if s.write_all(&out).await.is_err() {
                        stream = None;
                    }
                }
            }
        }
    }

    fn start_move(&mut self, target: i64) {
        self.stop.store(false, Ordering::Relaxed);
        self.moving = Some(target);
        if self.jobs.send(Job::Move(target)).is_err() {
            tracing::error!("direct drive thread has ended");
        }
    }

    fn request(&mut self, req: super::line::Request) -> Option<super::line::Reply> {
        use super::line::{Reply, Request};
        let busy = self.moving.is_some();
        let limits = format!("{}..{}", self.min, self.max);
        match req {
            Request::Boot => Some(Reply::Boot(self.boot)),
            Request::Goto(t) if !(self.min..=self.max).contains(&t) => {
                Some(Reply::Err(format!("target {t} outside limits {limits}")))
            }
            Request::Goto(t) => {
                if busy && self.settle_until.is_none() {
                    // Slow down, then head for the new target.
                    self.next_target = Some(t);
                    self.answer_stop = false;
                    self.moving = Some(t);
                    self.stop.store(true, Ordering::Relaxed);
                } else {
                    self.settle_until = None;
                    self.start_move(t);
                }
                Some(Reply::Moving(t))
            }
            Request::Where => Some(match self.moving {
                Some(_) if self.homing => Reply::Homing,
                Some(t) => Reply::Moving(t),
                None => Reply::At(self.position),
            }),
            Request::Stop => {
                if busy && self.settle_until.is_none() {
                    self.next_target = None;
                    self.answer_stop = true;
                    self.stop.store(true, Ordering::Relaxed);
                    None
                } else {
                    self.settle_until = None;
                    self.moving = None;
                    Some(Reply::At(self.position))
                }
            }
            Request::Home { .. } if !self.has_home => {
                Some(Reply::Err("no home switch".to_string()))
            }
            Request::Home { .. } if busy => {
                Some(Reply::Err("busy: HOME refused while moving".to_string()))
            }
            Request::Home { position, .. } if !(self.min..=self.max).contains(&position) => Some(
                Reply::Err(format!("home position {position} outside limits {limits}")),
            ),
            Request::Home {
                side,
                position,
                speed,
            } => {
                self.stop.store(false, Ordering::Relaxed);
                self.settle_until = None;
                self.homing = true;
                // Reported as moving (to an unknown place) until HOMED.
                self.moving = Some(position);
                if self
                    .jobs
                    .send(Job::Home {
                        side,
                        position,
                        speed,
                    })
                    .is_err()
                {
                    return Some(Reply::Err("direct drive thread has ended".to_string()));
                }
                Some(Reply::Homing)
            }
            Request::Zero(_) if busy => {
                Some(Reply::Err("busy: ZERO refused while moving".to_string()))
            }
            Request::Zero(n) if !(self.min..=self.max).contains(&n) => {
                Some(Reply::Err(format!("position {n} outside limits {limits}")))
            }
            Request::Zero(n) => {
                self.position = n;
                if self.jobs.send(Job::Zero(n)).is_err() {
                    return Some(Reply::Err("direct drive thread has ended".to_string()));
                }
                Some(Reply::At(n))
            }
        }
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
        /// Also wait in real time (for tests that interrupt a move).
        real: bool,
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
            if self.real {
                std::thread::sleep(d);
            }
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

    /// Switch levels by read number: each switch closes from its read on
    /// (`None`: never); `bounce` reads before that it flickers closed once.
    #[derive(Clone)]
    struct Switchboard {
        reads: Arc<Mutex<u32>>,
        home_from: Option<u32>,
        high_from: Option<u32>,
        bounce: Option<u32>,
    }

    impl SwitchInputs for Switchboard {
        fn read(&mut self) -> io::Result<SwitchLevels> {
            let mut n = self.reads.lock().unwrap();
            *n += 1;
            let at = |from: Option<u32>| {
                from.is_some_and(|f| *n >= f || self.bounce.is_some_and(|b| *n + b == f))
            };
            Ok(SwitchLevels {
                home: at(self.home_from),
                low_stop: false,
                high_stop: at(self.high_from),
            })
        }
    }

    #[test]
    fn an_end_stop_stops_the_motor_in_the_lowest_layer_after_debouncing() {
        let bench = Bench::default();
        let board = Switchboard {
            reads: Arc::default(),
            home_from: None,
            high_from: Some(40),
            // A single closed reading 10 reads earlier: contact bounce.
            bounce: Some(10),
        };
        let mut d = driver(&bench, 0).with_switches(Box::new(board.clone()), false);
        let never = AtomicBool::new(false);
        match d.move_to(5000, &never) {
            Err(DriveError::EndStop { side, position }) => {
                assert_eq!(side, super::super::HomeSide::High);
                // Closed from the 40th read (before the 40th step): three
                // reads in a row stop it before the 42nd step.
                assert_eq!(position, 41);
            }
            other => panic!("expected an end stop, got {other:?}"),
        }
        assert_eq!(rising(&bench.edges.lock().unwrap()).len(), 41);
        // Downward, away from the high stop, it moves.
        assert_eq!(d.move_to(0, &never).unwrap(), 0);
    }

    #[test]
    fn switch_lines_are_requested_once_each_and_read_into_their_switch() {
        let lines = SwitchLines {
            home: Some(5),
            low_stop: Some(5),
            high_stop: Some(9),
        };
        // One switch may serve as home and end stop: one line, asked once.
        assert_eq!(lines.wired(), vec![(5, "home"), (9, "high end stop")]);
        assert!(SwitchLines::default().wired().is_empty());
        let closed = [9u32];
        let levels = lines.levels(|l| Ok(closed.contains(&l))).unwrap();
        assert_eq!(
            levels,
            SwitchLevels {
                home: false,
                low_stop: false,
                high_stop: true
            }
        );
        let only_home = SwitchLines {
            home: Some(3),
            ..SwitchLines::default()
        };
        let levels = only_home.levels(|l| Ok(l == 3)).unwrap();
        assert!(levels.home && !levels.low_stop && !levels.high_stop);
        // A failed read is the driver's error to report, not "open".
        assert!(lines
            .levels(|_| Err(io::Error::other("line gone")))
            .is_err());
    }

    #[test]
    fn homing_runs_slowly_to_the_switch_and_takes_its_count() {
        let bench = Bench::default();
        let board = Switchboard {
            reads: Arc::default(),
            home_from: Some(101),
            high_from: None,
            bounce: None,
        };
        let mut d = driver(&bench, 7000).with_switches(Box::new(board), true);
        let never = AtomicBool::new(false);
        let side = super::super::HomeSide::Low;
        assert_eq!(d.home(side, 0, 200.0, &never).unwrap(), 0);
        assert_eq!(d.position(), 0);
        let edges = bench.edges.lock().unwrap().clone();
        assert_eq!(edges[0].1, Edge::Dir(false));
        let rise = rising(&edges);
        // Closed from read 101: reads 101..103, two more steps after 100.
        assert_eq!(rise.len(), 102);
        // At 200 steps/s: 5 ms from rising edge to rising edge.
        for w in rise.windows(2) {
            assert_eq!(w[1] - w[0], Duration::from_millis(5));
        }
        // Without a switch: refused, nothing moves.
        let bench = Bench::default();
        let mut d = driver(&bench, 10);
        assert!(matches!(
            d.home(side, 0, 200.0, &never),
            Err(DriveError::NoHomeSwitch)
        ));
        assert!(bench.edges.lock().unwrap().is_empty());
        // A switch that never closes: given up after twice the travel.
        let bench = Bench::default();
        let board = Switchboard {
            reads: Arc::default(),
            home_from: None,
            high_from: None,
            bounce: None,
        };
        let mut d = driver(&bench, 10).with_switches(Box::new(board), true);
        assert!(matches!(
            d.home(side, 0, 4000.0, &never),
            Err(DriveError::HomeNotFound { steps: 20_000, .. })
        ));
    }

    #[test]
    fn a_pulse_too_long_for_the_speed_is_refused() {
        let bench = Bench::default();
        let profile = RampProfile::new(1000.0, 200_000.0).unwrap();
        let r = StepDirDriver::new(bench.clone(), bench, profile, timing(), (0, 1), 0);
        assert!(matches!(r, Err(DriveError::PulseTooLong { .. })));
    }

    mod direct {
        use super::*;
        use tokio::io::{AsyncBufReadExt, AsyncWriteExt, BufReader, DuplexStream};

        struct Host(BufReader<DuplexStream>);

        impl Host {
            async fn say(&mut self, line: &str) {
                self.0
                    .get_mut()
                    .write_all(format!("{line}\n").as_bytes())
                    .await
                    .unwrap();
            }
            async fn hear(&mut self) -> String {
                let mut l = String::new();
                tokio::time::timeout(Duration::from_secs(10), self.0.read_line(&mut l))
                    .await
                    .expect("a reply within 10 s")
                    .unwrap();
                l.trim_end().to_string()
            }
            async fn ask(&mut self, line: &str) -> String {
                self.say(line).await;
                self.hear().await
            }
        }

        /// 500 steps/s, full speed after 250 steps: 1000 steps take about 2.5 s.
        fn slow(bench: &Bench, position: i64) -> DirectController {
            let profile = RampProfile::new(500.0, 500.0).unwrap();
            let d = StepDirDriver::new(
                bench.clone(),
                bench.clone(),
                profile,
                timing(),
                (0, 10_000),
                position,
            )
            .unwrap();
            DirectController::start(d, Duration::from_millis(20))
        }

        #[tokio::test]
        async fn home_and_end_stops_speak_the_protocol() {
            let bench = Bench::default();
            // A version 1 answer without a switch.
            let ctl = DirectController::start(driver(&bench, 100), Duration::from_millis(5));
            let mut h = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert!(h.ask("HOME LOW 0 500").await.starts_with("ERR "));
            let board = Switchboard {
                reads: Arc::default(),
                home_from: Some(51),
                high_from: None,
                bounce: None,
            };
            let d = driver(&bench, 300).with_switches(Box::new(board), true);
            let ctl = DirectController::start(d, Duration::from_millis(5));
            let mut h = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert_eq!(h.ask("HOME LOW 0 4000").await, "HOMING");
            assert_eq!(h.hear().await, "HOMED 0");
            assert_eq!(h.ask("WHERE").await, "AT 0");
            let board = Switchboard {
                reads: Arc::default(),
                home_from: None,
                high_from: Some(20),
                bounce: None,
            };
            let d = driver(&bench, 0).with_switches(Box::new(board), false);
            let ctl = DirectController::start(d, Duration::from_millis(5));
            let mut h = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert_eq!(h.ask("GOTO 900").await, "MOVING 900");
            assert_eq!(h.hear().await, "LIMIT HIGH 21");
            assert_eq!(h.ask("WHERE").await, "AT 21");
        }

        #[tokio::test]
        async fn moves_refuses_and_redefines_like_any_controller() {
            let bench = Bench::default();
            let ctl = DirectController::start(driver(&bench, 100), Duration::from_millis(5));
            let mut h = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert_eq!(h.ask("WHERE").await, "AT 100");
            assert_eq!(h.ask("GOTO 400").await, "MOVING 400");
            assert_eq!(h.hear().await, "AT 400");
            assert_eq!(rising(&bench.edges.lock().unwrap()).len(), 300);
            assert!(h.ask("GOTO 10001").await.starts_with("ERR "));
            assert!(h.ask("ZERO -1").await.starts_with("ERR "));
            assert!(h.ask("FLY").await.starts_with("ERR "));
            assert_eq!(h.ask("ZERO 5000").await, "AT 5000");
            assert_eq!(h.ask("GOTO 4990").await, "MOVING 4990");
            assert_eq!(h.hear().await, "AT 4990");
            assert_eq!(rising(&bench.edges.lock().unwrap()).len(), 310);
            // A new connection finds the same motor.
            let mut h2 = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert_eq!(h2.ask("WHERE").await, "AT 4990");
        }

        #[tokio::test]
        async fn stop_slows_down_and_reports_where_it_stopped() {
            let bench = Bench {
                real: true,
                ..Bench::default()
            };
            let ctl = slow(&bench, 0);
            let mut h = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert_eq!(h.ask("GOTO 1000").await, "MOVING 1000");
            tokio::time::sleep(Duration::from_millis(300)).await;
            assert_eq!(h.ask("WHERE").await, "MOVING 1000");
            let at = h.ask("STOP").await;
            let p: i64 = at.strip_prefix("AT ").unwrap().parse().unwrap();
            assert!((1..1000).contains(&p), "{at}");
            // Every step taken is counted.
            assert_eq!(rising(&bench.edges.lock().unwrap()).len() as i64, p);
            assert_eq!(h.ask("WHERE").await, format!("AT {p}"));
        }

        #[tokio::test]
        async fn a_new_target_mid_move_gets_the_only_arrival() {
            let bench = Bench {
                real: true,
                ..Bench::default()
            };
            let ctl = slow(&bench, 0);
            let mut h = Host(BufReader::new(ctl.connect().await.unwrap()));
            assert_eq!(h.ask("GOTO 1000").await, "MOVING 1000");
            // Retarget once the motor is well on its way: wait for the steps
            // themselves (bounded), not for a fixed time, so a loaded machine
            // that runs the stepper thread late cannot change the scenario.
            for _ in 0..500 {
                if rising(&bench.edges.lock().unwrap()).len() >= 25 {
                    break;
                }
                tokio::time::sleep(Duration::from_millis(10)).await;
            }
            assert!(rising(&bench.edges.lock().unwrap()).len() >= 25);
            assert_eq!(h.ask("GOTO 20").await, "MOVING 20");
            assert_eq!(h.hear().await, "AT 20");
            let edges = bench.edges.lock().unwrap().clone();
            let dirs: Vec<_> = edges
                .iter()
                .filter_map(|(_, e)| match e {
                    Edge::Dir(up) => Some(*up),
                    _ => None,
                })
                .collect();
            assert_eq!(dirs, vec![true, false]);
            // Up n steps, then down n - 20.
            let n = rising(&edges).len() as i64;
            assert!(n > 40 && (n - 20) % 2 == 0, "{n}");
        }
    }
}
