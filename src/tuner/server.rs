//! A stand-alone controller simulator speaking the line protocol
//! (`protocols/tuner-line.md`), for trying the live service without a motor.
//!
//! [`SimController`] is the sans-IO part: it takes requests with the current
//! time and answers them, using [`SimTuner`] for the mechanics (speed, settle
//! time, backlash, end stops) and refusing targets outside its limits.
//! [`serve_connection`] runs it over any byte stream; [`run_tcp`] and
//! [`run_pty`] put it on a loopback socket or a pseudo-terminal. Like a real
//! controller on a serial port it serves one host: a new TCP connection
//! replaces the previous one.

use std::io;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use bytes::BytesMut;
use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt};
use tokio::net::TcpListener;
use tokio::sync::watch;
use tokio::time::Instant;

use super::line::{HomeSide, LineFramer, Reply, Request};
use super::sim::{SimParams, SimTuner};
use crate::error::{Located, Place};
use crate::port::pty::PtyLink;
use crate::shutdown::Shutdown;
use crate::timing::sleep_until_opt;

/// The simulated controller: mechanics plus protocol rules.
#[derive(Debug, Clone)]
pub struct SimController {
    tuner: SimTuner,
    /// The move under way: how it ends and when it will have settled.
    moving: Option<(Ending, Duration)>,
    /// The simulated switches, as counts in the controller's present count
    /// (they move with it on `ZERO` and `HOMED`: the switches stay where
    /// they are on the mechanics, the count is what changes).
    switches: Switches,
    /// How far `ZERO` and `HOMED` have moved the count from the start's.
    renumbered: i64,
    /// This power-on's number, the answer to `BOOT` (a new one each time
    /// the simulator starts, as a controller picks one at each power-on).
    boot: i64,
}

/// How the move under way ends.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Ending {
    /// `AT target`.
    Arrive(i64),
    /// At the home switch: the count becomes `position`, `HOMED position`.
    Homed { position: i64 },
    /// Stopped by an end-stop switch: `LIMIT side count`.
    Limit(HomeSide, i64),
}

/// Where the simulated switches close, in the controller's count.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Switches {
    /// The home switch (`None`: this controller has none and answers `HOME`
    /// with `ERR`, as a version 1 controller does).
    pub home: Option<i64>,
    /// The end-stop switches below and above the travel.
    pub end_stops: Option<(i64, i64)>,
}

impl Switches {
    fn shifted(self, by: i64) -> Switches {
        Switches {
            home: self.home.map(|h| h.saturating_add(by)),
            end_stops: self
                .end_stops
                .map(|(lo, hi)| (lo.saturating_add(by), hi.saturating_add(by))),
        }
    }
}

impl SimController {
    /// A controller at rest at `start`; `start` must be within the limits.
    pub fn new(params: SimParams, start: i64) -> Result<SimController, Located> {
        if params.min_steps >= params.max_steps {
            return Err(Located::named(
                "limits",
                "min below max",
                format!("{}..{}", params.min_steps, params.max_steps),
            ));
        }
        if !(params.steps_per_second.is_finite() && params.steps_per_second >= 0.001) {
            return Err(Located::named(
                "steps per second",
                "a number of at least 0.001",
                params.steps_per_second.to_string(),
            ));
        }
        // The mechanics compute travel times as Durations; keep the longest
        // travel representable (and sane: under a year).
        let longest = params.min_steps.abs_diff(params.max_steps) as f64 / params.steps_per_second;
        if longest > 3.0e7 {
            return Err(Located::named(
                "limits and speed",
                "a full travel under a year",
                format!(
                    "{longest:.3e} s for {}..{} at {} steps/s",
                    params.min_steps, params.max_steps, params.steps_per_second
                ),
            ));
        }
        if !(params.min_steps..=params.max_steps).contains(&start) {
            return Err(Located::named(
                "start",
                format!(
                    "a position within {}..{}",
                    params.min_steps, params.max_steps
                ),
                start.to_string(),
            ));
        }
        Ok(SimController {
            tuner: SimTuner::new(params, start),
            moving: None,
            switches: Switches::default(),
            renumbered: 0,
            boot: fastrand::i64(1..=999_999_999_999_999_999),
        })
    }

    /// The same controller answering `BOOT` with `id` (a test's controller
    /// that restarts, or one that does not).
    pub fn with_boot(mut self, id: i64) -> Self {
        self.boot = id;
        self
    }

    /// The same controller with simulated switches.
    pub fn with_switches(mut self, switches: Switches) -> SimController {
        self.switches = switches;
        self
    }

    /// Where the switches are now, in the present count.
    pub fn switches(&self) -> Switches {
        self.switches
    }

    /// Redefines the count at rest: the switches keep their place.
    fn recount(&mut self, now: Duration, steps: i64) {
        let by = steps.saturating_sub(self.tuner.position_at(now));
        self.switches = self.switches.shifted(by);
        self.renumbered = self.renumbered.saturating_add(by);
        self.tuner = SimTuner::new(*self.tuner.params(), steps);
    }

    /// How a move from `from` to `target` ends: at the target, or at an
    /// end stop on the way.
    fn ending(&self, from: i64, target: i64) -> (i64, Ending) {
        match self.switches.end_stops {
            Some((lo, _)) if target < from && target <= lo => {
                (lo, Ending::Limit(HomeSide::Low, lo))
            }
            Some((_, hi)) if target > from && target >= hi => {
                (hi, Ending::Limit(HomeSide::High, hi))
            }
            _ => (target, Ending::Arrive(target)),
        }
    }

    fn within(&self, steps: i64) -> bool {
        let p = self.tuner.params();
        (p.min_steps..=p.max_steps).contains(&steps)
    }

    fn limits(&self) -> String {
        let p = self.tuner.params();
        format!("{}..{}", p.min_steps, p.max_steps)
    }

    /// Answers one request at time `now`.
    pub fn handle(&mut self, now: Duration, req: Request) -> Reply {
        self.poll_arrival(now);
        match req {
            Request::Goto(target) => {
                if !self.within(target) {
                    return Reply::Err(format!("target {target} outside limits {}", self.limits()));
                }
                let from = self.tuner.position_at(now);
                let (to, ending) = self.ending(from, target);
                let arrive = self.tuner.goto(now, to);
                self.moving = Some((ending, arrive));
                Reply::Moving(target)
            }
            Request::Boot => Reply::Boot(self.boot),
            Request::Where => match self.moving {
                Some((Ending::Arrive(target), _)) => Reply::Moving(target),
                Some((Ending::Homed { .. }, _)) => Reply::Homing,
                Some((Ending::Limit(..), _)) => Reply::Moving(self.tuner.position_at(now)),
                None => Reply::At(self.tuner.position_at(now)),
            },
            Request::Home {
                side,
                position,
                speed,
            } => {
                let Some(switch) = self.switches.home else {
                    return Reply::Err("no home switch".to_string());
                };
                if !self.within(position) {
                    return Reply::Err(format!(
                        "home position {position} outside limits {}",
                        self.limits()
                    ));
                }
                // Toward the side named; a switch found closed already is
                // left and found again (the simulator goes straight to it).
                let _ = side;
                self.tuner.stop(now);
                let arrive = self.tuner.goto_at_speed(now, switch, f64::from(speed));
                self.moving = Some((Ending::Homed { position }, arrive));
                Reply::Homing
            }
            Request::Stop => {
                self.moving = None;
                Reply::At(self.tuner.stop(now))
            }
            Request::Zero(steps) => {
                if self.moving.is_some() {
                    return Reply::Err("busy: ZERO refused while moving".to_string());
                }
                if !self.within(steps) {
                    return Reply::Err(format!(
                        "position {steps} outside limits {}",
                        self.limits()
                    ));
                }
                self.recount(now, steps);
                Reply::At(steps)
            }
        }
    }

    /// The `AT` of a move that has settled by `now`, once.
    pub fn poll_arrival(&mut self, now: Duration) -> Option<Reply> {
        match self.moving {
            Some((ending, arrive)) if now >= arrive => {
                self.moving = None;
                Some(match ending {
                    Ending::Arrive(target) => Reply::At(target),
                    Ending::Homed { position } => {
                        self.recount(now, position);
                        Reply::Homed(position)
                    }
                    Ending::Limit(side, steps) => Reply::Limit { side, steps },
                })
            }
            _ => None,
        }
    }

    /// When the move under way will have settled.
    pub fn next_arrival(&self) -> Option<Duration> {
        self.moving.map(|(_, arrive)| arrive)
    }

    /// Where the motor is at `now`.
    pub fn position_at(&self, now: Duration) -> i64 {
        self.tuner.position_at(now)
    }

    /// Where the capacitor really is at `now` (the motor less the lost
    /// motion of the last reversal), counted as at start: a `ZERO` or a
    /// homing run renumbers the count, not the mechanics.
    pub fn capacitor_at(&self, now: Duration) -> f64 {
        self.tuner.capacitor_at(now) - self.renumbered as f64
    }
}

/// A controller shared by the connections of one server, with the instant
/// its clock counts from.
#[derive(Debug, Clone)]
pub struct SharedController {
    inner: Arc<Mutex<SimController>>,
    origin: Instant,
}

impl SharedController {
    pub fn new(ctl: SimController) -> SharedController {
        SharedController {
            inner: Arc::new(Mutex::new(ctl)),
            origin: Instant::now(),
        }
    }

    /// Where the capacitor is now ([`SimController::capacitor_at`]).
    pub fn capacitor_now(&self) -> f64 {
        self.with(|c, now| c.capacitor_at(now))
    }

    fn with<T>(&self, f: impl FnOnce(&mut SimController, Duration) -> T) -> T {
        let now = self.origin.elapsed();
        // A poisoned lock means a panic elsewhere; the state is still usable.
        let mut guard = self.inner.lock().unwrap_or_else(|p| p.into_inner());
        f(&mut guard, now)
    }
}

/// Serves the protocol on one byte stream until the peer closes it, an IO
/// error occurs, or `stop` changes.
pub async fn serve_connection<S>(
    stream: S,
    ctl: SharedController,
    mut stop: watch::Receiver<u64>,
) -> io::Result<()>
where
    S: AsyncRead + AsyncWrite + Unpin,
{
    let (mut rd, mut wr) = tokio::io::split(stream);
    let mut framer = LineFramer::new();
    let mut inbuf = BytesMut::with_capacity(256);
    let mut out = BytesMut::with_capacity(256);
    loop {
        let deadline = ctl.with(|c, _| c.next_arrival()).map(|d| ctl.origin + d);
        tokio::select! {
            n = rd.read_buf(&mut inbuf) => {
                if n? == 0 {
                    return Ok(());
                }
                while let Some(line) = framer.next_line(&mut inbuf) {
                    let reply = match line.and_then(|l| Request::parse(&l)) {
                        Ok(req) => {
                            tracing::debug!(%req, "request");
                            ctl.with(|c, now| {
                                // An arrival due before this request is reported first.
                                if let Some(at) = c.poll_arrival(now) {
                                    at.encode(&mut out);
                                }
                                c.handle(now, req)
                            })
                        }
                        Err(e) => Reply::Err(e.to_string()),
                    };
                    reply.encode(&mut out);
                }
            }
            _ = sleep_until_opt(deadline) => {
                if let Some(at) = ctl.with(|c, now| c.poll_arrival(now)) {
                    at.encode(&mut out);
                }
            }
            _ = stop.changed() => return Ok(()),
        }
        if !out.is_empty() {
            wr.write_all(&out).await?;
            wr.flush().await?;
            out.clear();
        }
    }
}

/// Accepts connections on `listener` until `shutdown` becomes true; each new
/// connection replaces the one before.
pub async fn run_tcp(
    listener: TcpListener,
    ctl: SimController,
    shutdown: impl Into<Shutdown>,
) -> io::Result<()> {
    run_tcp_shared(listener, SharedController::new(ctl), shutdown).await
}

/// [`run_tcp`] on a controller shared with another task.
pub async fn run_tcp_shared(
    listener: TcpListener,
    ctl: SharedController,
    shutdown: impl Into<Shutdown>,
) -> io::Result<()> {
    let mut shutdown: Shutdown = shutdown.into();
    let (gen_tx, _) = watch::channel(0u64);
    let mut generation = 0u64;
    loop {
        tokio::select! {
            accepted = listener.accept() => {
                let (stream, peer) = accepted?;
                generation += 1;
                gen_tx.send_replace(generation);
                tracing::info!(%peer, "host connected");
                let stop = gen_tx.subscribe();
                let ctl = ctl.clone();
                tokio::spawn(async move {
                    match serve_connection(stream, ctl, stop).await {
                        Ok(()) => tracing::info!(%peer, "host disconnected"),
                        Err(e) => tracing::info!(%peer, error = %e, "host connection lost"),
                    }
                });
            }
            _ = shutdown.wait() => {
                gen_tx.send_replace(u64::MAX);
                return Ok(());
            }
        }
    }
}

/// Serves the protocol on a pseudo-terminal reachable at `link` until
/// `shutdown` becomes true.
pub async fn run_pty(
    link: &Path,
    ctl: SimController,
    shutdown: impl Into<Shutdown>,
) -> io::Result<()> {
    run_pty_shared(link, SharedController::new(ctl), shutdown).await
}

/// [`run_pty`] on a controller shared with another task.
pub async fn run_pty_shared(
    link: &Path,
    ctl: SharedController,
    shutdown: impl Into<Shutdown>,
) -> io::Result<()> {
    let mut shutdown: Shutdown = shutdown.into();
    let (pty, master) = PtyLink::create(link)?;
    tracing::info!(link = %link.display(), device = %pty.slave_path().display(), "controller simulator on pseudo-terminal");
    let (stop_tx, stop) = watch::channel(0u64);
    tokio::select! {
        r = serve_connection(master, ctl, stop) => r,
        _ = shutdown.wait() => { stop_tx.send_replace(1); Ok(()) }
    }
}

/// How often the position file is brought up to date.
pub const POSITION_FILE_EVERY: Duration = Duration::from_millis(20);

/// Keeps `path` holding the capacitor's position (steps, one number and a
/// newline; [`SimController::capacitor_at`]) until `shutdown`: written
/// whenever it changed, to a temporary file renamed over it, so a reader
/// never sees half a number. Test equipment: `sim-rig --tuner-position`
/// reads it to answer its meters.
pub async fn keep_position_file(
    ctl: SharedController,
    path: PathBuf,
    shutdown: impl Into<Shutdown>,
) -> io::Result<()> {
    let mut shutdown: Shutdown = shutdown.into();
    let mut tmp = path.clone().into_os_string();
    tmp.push(".tmp");
    let tmp = PathBuf::from(tmp);
    let mut last: Option<f64> = None;
    loop {
        let here = ctl.capacitor_now();
        if last != Some(here) {
            tokio::fs::write(&tmp, format!("{here}\n")).await?;
            tokio::fs::rename(&tmp, &path).await?;
            last = Some(here);
        }
        tokio::select! {
            _ = tokio::time::sleep(POSITION_FILE_EVERY) => {}
            _ = shutdown.wait() => return Ok(()),
        }
    }
}

/// What `tuneward sim-tuner` is asked to do: a controller simulator on a
/// socket or a pseudo-terminal (exactly one of `listen` and `pty`).
#[derive(Debug, Clone)]
pub struct SimTunerOptions {
    /// Listen for the host on this TCP address (port 0 picks a free port;
    /// the address is printed).
    pub listen: Option<std::net::SocketAddr>,
    /// Create a pseudo-terminal and put a symlink to it here.
    pub pty: Option<PathBuf>,
    /// Motor speed.
    pub steps_per_second: f64,
    /// Time the mechanics take to come to rest after the last step.
    pub settle_ms: u64,
    /// Lost motion on a reversal, in steps.
    pub backlash: i64,
    /// Lowest position the controller accepts.
    pub min: i64,
    /// Highest position the controller accepts.
    pub max: i64,
    /// Where the motor is when the simulator starts.
    pub start: i64,
    /// A simulated home switch at this count (as counted at start).
    pub home_switch: Option<i64>,
    /// Simulated end-stop switches at these counts (as counted at start).
    pub end_stops: Option<(i64, i64)>,
    /// Keep this file holding the capacitor's position
    /// ([`keep_position_file`]).
    pub position_file: Option<PathBuf>,
}

/// Runs the simulator until interrupted (Ctrl-C or SIGTERM).
pub fn run_sim_tuner(args: &SimTunerOptions) -> Result<(), Located> {
    let params = SimParams {
        steps_per_second: args.steps_per_second,
        settle_ms: args.settle_ms,
        backlash_steps: args.backlash,
        min_steps: args.min,
        max_steps: args.max,
    };
    if args.backlash < 0 {
        return Err(Located::named(
            "--backlash",
            "0 or more steps",
            args.backlash.to_string(),
        ));
    }
    let ctl = SimController::new(params, args.start)
        .map_err(|e| Located {
            at: Place::Named(format!("sim-tuner: {}", e.at)),
            ..e
        })?
        .with_switches(Switches {
            home: args.home_switch,
            end_stops: args.end_stops,
        });
    let _ = tracing_subscriber::fmt()
        .with_writer(std::io::stderr)
        .try_init();
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| Located::named("sim-tuner", "a tokio runtime that starts", e.to_string()))?;
    rt.block_on(async move {
        let stop_rx = crate::signals::stop_flag();
        let ctl = SharedController::new(ctl);
        if let Some(path) = &args.position_file {
            let (ctl, path, stop) = (ctl.clone(), path.clone(), stop_rx.clone());
            tokio::spawn(async move {
                if let Err(e) = keep_position_file(ctl, path.clone(), stop).await {
                    tracing::warn!(file = %path.display(), error = %e, "position file not written");
                }
            });
        }
        if let Some(addr) = args.listen {
            let listening = |e: io::Error| {
                Located::named(
                    format!("--listen {addr}"),
                    "an address to listen on",
                    e.to_string(),
                )
            };
            let listener = TcpListener::bind(addr).await.map_err(listening)?;
            let local = listener.local_addr().map_err(listening)?;
            println!("listening on {local}");
            run_tcp_shared(listener, ctl, stop_rx).await.map_err(|e| {
                Located::named(
                    format!("sim-tuner on {local}"),
                    "connections served until stopped",
                    e.to_string(),
                )
            })
        } else if let Some(link) = &args.pty {
            let r = run_pty_shared(link, ctl, stop_rx).await;
            r.map_err(|e| {
                Located::named(
                    format!("--pty {}", link.display()),
                    "a pseudo-terminal served until stopped",
                    e.to_string(),
                )
            })
        } else {
            Err(Located::named(
                "sim-tuner",
                "--listen ADDR or --pty LINK",
                "neither",
            ))
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn params() -> SimParams {
        SimParams {
            steps_per_second: 1000.0,
            settle_ms: 50,
            backlash_steps: 10,
            min_steps: 0,
            max_steps: 10_000,
        }
    }

    fn ms(n: u64) -> Duration {
        Duration::from_millis(n)
    }

    #[test]
    fn goto_answers_moving_then_at_after_travel_and_settle() {
        let mut c = SimController::new(params(), 1000).unwrap();
        assert_eq!(c.handle(ms(0), Request::Goto(1500)), Reply::Moving(1500));
        // 500 steps at 1000 steps/s + 50 ms settle.
        assert_eq!(c.next_arrival(), Some(ms(550)));
        assert_eq!(c.poll_arrival(ms(549)), None);
        assert_eq!(c.handle(ms(300), Request::Where), Reply::Moving(1500));
        assert_eq!(c.poll_arrival(ms(550)), Some(Reply::At(1500)));
        assert_eq!(c.poll_arrival(ms(600)), None);
        assert_eq!(c.handle(ms(600), Request::Where), Reply::At(1500));
    }

    #[test]
    fn targets_and_zero_outside_limits_are_refused_without_moving() {
        let mut c = SimController::new(params(), 100).unwrap();
        let r = c.handle(ms(0), Request::Goto(10_001));
        assert!(matches!(&r, Reply::Err(t) if t.contains("10001") && t.contains("0..10000")));
        assert_eq!(
            c.handle(ms(0), Request::Goto(-1)).to_string().get(..3),
            Some("ERR")
        );
        assert!(matches!(c.handle(ms(0), Request::Zero(-5)), Reply::Err(_)));
        assert_eq!(c.next_arrival(), None);
        assert_eq!(c.handle(ms(0), Request::Where), Reply::At(100));
    }

    #[test]
    fn stop_reports_where_it_stopped_and_cancels_the_arrival() {
        let mut c = SimController::new(params(), 0).unwrap();
        c.handle(ms(0), Request::Goto(1000));
        assert_eq!(c.handle(ms(250), Request::Stop), Reply::At(250));
        assert_eq!(c.poll_arrival(ms(5000)), None);
    }

    #[test]
    fn zero_refused_while_moving_and_redefines_at_rest() {
        let mut c = SimController::new(params(), 0).unwrap();
        c.handle(ms(0), Request::Goto(100));
        assert!(
            matches!(c.handle(ms(10), Request::Zero(5)), Reply::Err(t) if t.contains("moving"))
        );
        assert_eq!(c.poll_arrival(ms(200)), Some(Reply::At(100)));
        assert_eq!(c.handle(ms(200), Request::Zero(5000)), Reply::At(5000));
        assert_eq!(c.handle(ms(200), Request::Where), Reply::At(5000));
    }

    #[test]
    fn a_new_goto_replaces_the_target() {
        let mut c = SimController::new(params(), 0).unwrap();
        c.handle(ms(0), Request::Goto(1000));
        assert_eq!(c.handle(ms(100), Request::Goto(50)), Reply::Moving(50));
        // From 100 back to 50: 50 ms + 50 ms settle.
        assert_eq!(c.next_arrival(), Some(ms(200)));
        assert_eq!(c.poll_arrival(ms(200)), Some(Reply::At(50)));
    }

    #[test]
    fn home_runs_slowly_to_the_switch_and_gives_it_the_hosts_count() {
        let home = |position| Request::Home {
            side: HomeSide::Low,
            position,
            speed: 100,
        };
        // Without a switch: ERR, as a version 1 controller answers.
        let mut c = SimController::new(params(), 700).unwrap();
        assert!(matches!(c.handle(ms(0), home(0)), Reply::Err(t) if t.contains("home")));
        // The switch at count 200; the motor at 700 (its count is off by
        // 200 from what the host gives the switch, 0).
        let mut c = SimController::new(params(), 700)
            .unwrap()
            .with_switches(Switches {
                home: Some(200),
                end_stops: Some((150, 9000)),
            });
        assert_eq!(c.handle(ms(0), home(0)), Reply::Homing);
        assert_eq!(c.handle(ms(1000), Request::Where), Reply::Homing);
        // 500 steps at 100 steps/s (not 1000), plus 50 ms settle.
        assert_eq!(c.next_arrival(), Some(ms(5050)));
        assert_eq!(c.poll_arrival(ms(5050)), Some(Reply::Homed(0)));
        assert_eq!(c.handle(ms(5100), Request::Where), Reply::At(0));
        // The switches kept their place on the mechanics.
        assert_eq!(
            c.switches(),
            Switches {
                home: Some(0),
                end_stops: Some((-50, 8800)),
            }
        );
        assert!(matches!(c.handle(ms(0), home(20_000)), Reply::Err(_)));
    }

    #[test]
    fn a_move_into_an_end_stop_stops_there_and_says_limit() {
        let mut c = SimController::new(params(), 1000)
            .unwrap()
            .with_switches(Switches {
                home: None,
                end_stops: Some((100, 2000)),
            });
        assert_eq!(c.handle(ms(0), Request::Goto(3000)), Reply::Moving(3000));
        // 1000 steps to the stop at 1000 steps/s, plus settle.
        assert_eq!(
            c.poll_arrival(ms(1050)),
            Some(Reply::Limit {
                side: HomeSide::High,
                steps: 2000
            })
        );
        assert_eq!(c.handle(ms(1100), Request::Where), Reply::At(2000));
        // A ZERO that misplaces the count moves the stops with it.
        assert_eq!(c.handle(ms(1100), Request::Zero(1500)), Reply::At(1500));
        c.handle(ms(1100), Request::Goto(0));
        assert_eq!(c.poll_arrival(ms(60_000)), Some(Reply::At(0)));
        // The high stop is now at count 1500: a GOTO 1800 inside the
        // limits runs into it.
        c.handle(ms(60_000), Request::Goto(1800));
        assert_eq!(
            c.poll_arrival(ms(120_000)),
            Some(Reply::Limit {
                side: HomeSide::High,
                steps: 1500
            })
        );
    }

    #[test]
    fn bad_start_or_limits_are_refused() {
        assert_eq!(
            SimController::new(params(), 20_000)
                .unwrap_err()
                .to_string(),
            "start: expected a position within 0..10000, found 20000"
        );
        let mut slow = params();
        slow.steps_per_second = 1e-300;
        assert_eq!(
            SimController::new(slow, 0).unwrap_err().at,
            Place::Named("steps per second".into())
        );
        let mut wide = params();
        wide.min_steps = i64::MIN;
        wide.max_steps = i64::MAX;
        let e = SimController::new(wide, 0).unwrap_err();
        assert_eq!(e.expected, "a full travel under a year", "{e}");
        let mut p = params();
        p.max_steps = p.min_steps;
        assert_eq!(
            SimController::new(p, 0).unwrap_err().to_string(),
            "limits: expected min below max, found 0..0"
        );
    }
}
