//! The host end of the controller line protocol: one tokio task that owns the
//! connection to the stepper controller.
//!
//! The controller is named by a URL (`tuner.link`): `serial:///dev/PORT?baud=N`,
//! `tcp://HOST:PORT`, `sim` (the simulator, in process) or
//! `gpio://CHIP?step=N&dir=N` (a step/direction driver on GPIO lines, run
//! in process behind the same protocol; see [`GpioWiring`]).
//!
//! The rest of the service talks to it through two channels: it takes
//! [`TunerCommand`]s and sends back [`TunerEvent`]s. The task is the lowest
//! layer before the motor, so it is where the last checks live:
//!
//! - a `GOTO` or `ZERO` outside the configured limits is refused here, never
//!   sent;
//! - while the rig transmits (the optional `transmit` watch is `true`) a
//!   `GOTO` is refused, and a move under way is stopped;
//! - every request must be answered within a margin, and a move must end
//!   (`AT`) within the travel time for its distance plus settle time plus
//!   the margin. A missing answer is a fault: it is reported, the
//!   connection is dropped and reopened, and the task asks `WHERE`.
//!
//! Reconnection backs off from 100 ms doubling up to a cap (2 s by default).
//! Each change of link state is logged once; retries while down are logged
//! at debug level only.

use std::fmt;
use std::path::PathBuf;
use std::str::FromStr;
use std::time::Duration;

use bytes::BytesMut;
use tokio::io::{AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt};
use tokio::sync::{mpsc, watch};
use tokio::task::JoinHandle;
use tokio::time::Instant;

use super::line::{LineFramer, Reply, Request};
use super::server::{serve_connection, SharedController, SimController};
use super::sim::SimParams;
use crate::error::{Located, Place};
use crate::shutdown::Shutdown;
use crate::timing::sleep_until_opt;

/// Where the controller is.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ControllerUrl {
    /// `serial:///dev/ttyACM0?baud=115200` (baud defaults to 115200).
    Serial { path: PathBuf, baud: u32 },
    /// `tcp://127.0.0.1:7300`.
    Tcp { addr: String },
    /// `sim`: a simulated controller inside this process.
    Sim,
    /// `gpio://gpiochip0?step=17&dir=27`: drive a step/direction stepper
    /// driver directly from two GPIO lines (see [`GpioWiring`]).
    Gpio(GpioWiring),
}

/// Wiring and timing of a directly driven stepper. URL parameters: `step`
/// and `dir` (line offsets, required), `up` (`high` or `low`: the direction
/// level for increasing positions, default `high`), `accel` (steps/s²,
/// default four times the speed: full speed in a quarter second), `pulse_us`
/// (step pulse width, default 5) and `setup_us` (direction set-up time,
/// default 20). The defaults are common practice, no source: generous for
/// the usual driver chips; check the driver's datasheet. End-stop switches:
/// `low_stop` and `high_stop` (input line offsets), read before every step;
/// `closed` (`low` or `high`: the level a closed switch puts on its line,
/// default `low`, a switch to ground against a pull-up: common practice, no
/// source). The home switch's line is `tuner.home.switch`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct GpioWiring {
    pub chip: String,
    pub step: u32,
    pub dir: u32,
    pub up_is_high: bool,
    pub accel: Option<u32>,
    pub pulse_us: u32,
    pub setup_us: u32,
    pub low_stop: Option<u32>,
    pub high_stop: Option<u32>,
    /// A closed switch reads high.
    pub closed_high: bool,
}

/// Baud rate of a `serial://` URL without `?baud=`.
pub const DEFAULT_CONTROLLER_BAUD: u32 = 115_200;

/// A `tuner.link` that is not a controller URL: what was expected and what
/// was found. Where it was read (a config's key) is the reader's to add:
/// [`UrlError::at`].
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("expected {expected}, found {found}")]
pub struct UrlError {
    pub expected: String,
    pub found: String,
}

impl UrlError {
    fn new(expected: impl Into<String>, found: impl Into<String>) -> UrlError {
        UrlError {
            expected: expected.into(),
            found: found.into(),
        }
    }

    /// The located error, read at `at`.
    pub fn at(self, at: Place) -> Located {
        Located::new(at, self.expected, self.found)
    }
}

/// Every form of controller URL, for the error that finds none of them.
const URL_FORMS: &str =
    "`serial:///dev/PORT?baud=N`, `tcp://HOST:PORT`, `gpio://CHIP?step=N&dir=N` or `sim`";

impl FromStr for ControllerUrl {
    type Err = UrlError;

    fn from_str(s: &str) -> Result<ControllerUrl, UrlError> {
        if s == "sim" {
            return Ok(ControllerUrl::Sim);
        }
        if let Some(rest) = s.strip_prefix("gpio://") {
            return parse_gpio(s, rest).map(ControllerUrl::Gpio);
        }
        if let Some(rest) = s.strip_prefix("serial://") {
            let (path, query) = rest.split_once('?').unwrap_or((rest, ""));
            if !path.starts_with('/') {
                return Err(UrlError::new(
                    format!("{URL_FORMS} (the port path must be absolute)"),
                    format!("`{s}`"),
                ));
            }
            let mut baud = DEFAULT_CONTROLLER_BAUD;
            for pair in query.split('&').filter(|p| !p.is_empty()) {
                match pair.split_once('=') {
                    Some(("baud", v)) => {
                        baud = v.parse().ok().filter(|b| *b > 0).ok_or_else(|| {
                            UrlError::new(
                                format!("a positive baud rate in `{s}`"),
                                format!("`{v}`"),
                            )
                        })?
                    }
                    _ => {
                        return Err(UrlError::new(
                            format!("only `baud=N` after `?` in `{s}`"),
                            format!("`{pair}`"),
                        ))
                    }
                }
            }
            return Ok(ControllerUrl::Serial {
                path: PathBuf::from(path),
                baud,
            });
        }
        if let Some(addr) = s.strip_prefix("tcp://") {
            let ok = addr
                .rsplit_once(':')
                .is_some_and(|(host, port)| !host.is_empty() && port.parse::<u16>().is_ok());
            if !ok {
                return Err(UrlError::new(
                    format!("{URL_FORMS} (expected HOST:PORT)"),
                    format!("`{s}`"),
                ));
            }
            return Ok(ControllerUrl::Tcp {
                addr: addr.to_string(),
            });
        }
        Err(UrlError::new(URL_FORMS, format!("`{s}`")))
    }
}

fn parse_gpio(whole: &str, rest: &str) -> Result<GpioWiring, UrlError> {
    let (chip, query) = rest.split_once('?').unwrap_or((rest, ""));
    if chip.is_empty() {
        return Err(UrlError::new(
            format!("a GPIO chip such as `gpiochip0` after gpio:// in `{whole}`"),
            "nothing",
        ));
    }
    let mut w = GpioWiring {
        chip: chip.to_string(),
        step: u32::MAX,
        dir: u32::MAX,
        up_is_high: true,
        accel: None,
        pulse_us: 5,
        setup_us: 20,
        low_stop: None,
        high_stop: None,
        closed_high: false,
    };
    let (mut step, mut dir) = (None, None);
    for pair in query.split('&').filter(|p| !p.is_empty()) {
        let (key, value) = pair.split_once('=').ok_or_else(|| {
            UrlError::new(format!("`key=value` in `{whole}`"), format!("`{pair}`"))
        })?;
        // `high` or `low`, for the key `k`.
        let high = |k: &str| match value {
            "high" => Ok(true),
            "low" => Ok(false),
            _ => Err(UrlError::new(
                format!("`high` or `low` for `{k}` in `{whole}`"),
                format!("`{value}`"),
            )),
        };
        let number = || {
            value.parse::<u32>().map_err(|_| {
                UrlError::new(
                    format!("a whole number for `{key}` in `{whole}`"),
                    format!("`{value}`"),
                )
            })
        };
        match key {
            "step" => step = Some(number()?),
            "dir" => dir = Some(number()?),
            "accel" => w.accel = Some(number()?).filter(|a| *a > 0),
            "pulse_us" => w.pulse_us = number()?,
            "setup_us" => w.setup_us = number()?,
            "low_stop" => w.low_stop = Some(number()?),
            "high_stop" => w.high_stop = Some(number()?),
            "closed" => w.closed_high = high(key)?,
            "up" => w.up_is_high = high(key)?,
            _ => {
                return Err(UrlError::new(
                    format!(
                        "keys step, dir, up, accel, pulse_us, setup_us, low_stop, high_stop, closed in `{whole}`"
                    ),
                    format!("`{key}`"),
                ))
            }
        }
    }
    let missing = |what: &str| UrlError::new(format!("{what} in `{whole}`"), "none");
    w.step = step.ok_or_else(|| missing("`step=N` (the step line's offset)"))?;
    w.dir = dir.ok_or_else(|| missing("`dir=N` (the direction line's offset)"))?;
    if w.step == w.dir {
        return Err(UrlError::new(
            format!("different lines for step and dir in `{whole}`"),
            format!("{} for both", w.step),
        ));
    }
    let outputs = [("step", w.step), ("dir", w.dir)];
    let inputs = [("low_stop", w.low_stop), ("high_stop", w.high_stop)];
    for (name, line) in inputs {
        if let Some((out, _)) = line.and_then(|l| outputs.iter().find(|(_, o)| *o == l)) {
            return Err(UrlError::new(
                format!("a line for `{name}` other than the {out} line in `{whole}`"),
                format!("{} for both", line.unwrap_or_default()),
            ));
        }
    }
    if w.low_stop.is_some() && w.low_stop == w.high_stop {
        return Err(UrlError::new(
            format!("different lines for low_stop and high_stop in `{whole}`"),
            format!("{} for both", w.low_stop.unwrap_or_default()),
        ));
    }
    Ok(w)
}

impl fmt::Display for ControllerUrl {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ControllerUrl::Serial { path, baud } => {
                write!(f, "serial://{}?baud={baud}", path.display())
            }
            ControllerUrl::Tcp { addr } => write!(f, "tcp://{addr}"),
            ControllerUrl::Sim => f.write_str("sim"),
            ControllerUrl::Gpio(w) => {
                write!(
                    f,
                    "gpio://{}?step={}&dir={}&up={}",
                    w.chip,
                    w.step,
                    w.dir,
                    if w.up_is_high { "high" } else { "low" }
                )?;
                if let Some(a) = w.accel {
                    write!(f, "&accel={a}")?;
                }
                write!(f, "&pulse_us={}&setup_us={}", w.pulse_us, w.setup_us)?;
                if let Some(l) = w.low_stop {
                    write!(f, "&low_stop={l}")?;
                }
                if let Some(l) = w.high_stop {
                    write!(f, "&high_stop={l}")?;
                }
                if w.closed_high {
                    f.write_str("&closed=high")?;
                }
                Ok(())
            }
        }
    }
}

// The link's commands and events are pure data, defined in `tuner` so
// that the sans-IO session can use them without this task's tokio.
pub use super::{TunerCommand, TunerEvent};

/// How the link behaves.
#[derive(Debug, Clone)]
pub struct ClientConfig {
    pub url: ControllerUrl,
    pub min_steps: i64,
    pub max_steps: i64,
    pub steps_per_second: f64,
    pub settle: Duration,
    /// Allowance on top of every expected reply time.
    pub reply_margin: Duration,
    /// Longest wait between reconnection attempts.
    pub backoff_cap: Duration,
    /// Where the in-process simulator (`sim`) starts.
    pub sim_start: i64,
    /// Backlash of the in-process simulator.
    pub sim_backlash: i64,
    /// The direct drive's home-switch input line (`tuner.home.switch`).
    pub home_line: Option<u32>,
}

impl ClientConfig {
    /// Travel time for `distance`, capped at a quarter of `Duration::MAX`
    /// so that adding settle time and margin cannot overflow.
    fn travel(&self, distance: u64) -> Duration {
        super::travel_time(distance, self.steps_per_second, Duration::MAX / 4)
    }
}

/// The channels to a running controller link.
pub struct ClientHandle {
    pub commands: mpsc::Sender<TunerCommand>,
    pub events: mpsc::Receiver<TunerEvent>,
    pub task: JoinHandle<()>,
}

/// Starts the controller link task. `transmit` is the rig's transmit state
/// (`None`: no interlock at this layer); the task ends when `shutdown`
/// becomes true or the command sender is dropped.
pub fn spawn(
    config: ClientConfig,
    transmit: Option<watch::Receiver<bool>>,
    shutdown: impl Into<Shutdown>,
) -> ClientHandle {
    let (cmd_tx, cmd_rx) = mpsc::channel(32);
    let (ev_tx, ev_rx) = mpsc::channel(64);
    let sim = match config.url {
        ControllerUrl::Sim => {
            let params = SimParams {
                steps_per_second: config.steps_per_second,
                settle_ms: config.settle.as_millis().try_into().unwrap_or(u64::MAX),
                backlash_steps: config.sim_backlash,
                min_steps: config.min_steps,
                max_steps: config.max_steps,
            };
            SimController::new(params, config.sim_start)
                .ok()
                .map(SharedController::new)
        }
        _ => None,
    };
    let link = Link {
        config,
        commands: cmd_rx,
        events: ev_tx,
        transmit,
        shutdown: shutdown.into(),
        sim,
        up: None,
        direct: std::sync::Mutex::new(None),
    };
    let task = tokio::spawn(link.keep_connected());
    ClientHandle {
        commands: cmd_tx,
        events: ev_rx,
        task,
    }
}

trait ByteStream: AsyncRead + AsyncWrite + Unpin + Send {}
impl<T: AsyncRead + AsyncWrite + Unpin + Send> ByteStream for T {}

struct Link {
    config: ClientConfig,
    commands: mpsc::Receiver<TunerCommand>,
    events: mpsc::Sender<TunerEvent>,
    transmit: Option<watch::Receiver<bool>>,
    shutdown: Shutdown,
    sim: Option<SharedController>,
    /// The direct drive, once its lines have been opened.
    direct: std::sync::Mutex<Option<super::gpio::DirectController>>,
    /// Last logged link state (`None`: not yet known).
    up: Option<bool>,
}

enum End {
    Shutdown,
    Fault(Located),
}

/// What the open connection is waiting for.
#[derive(Default)]
struct Waiting {
    /// Requests sent and not yet answered, and when the oldest is due.
    unanswered: u32,
    reply_due: Option<Instant>,
    /// A move under way: its target and when it must have ended.
    arrival: Option<(i64, Instant)>,
    /// Last position reported at rest.
    position: Option<i64>,
    /// The speed of the `HOME` under way, if one was sent.
    home_speed: Option<f64>,
    /// `BOOT` was sent and its answer is the next line.
    boot_asked: bool,
}

impl Link {
    /// Connects, serves commands until the connection fails, and
    /// reconnects (with a growing pause) until shutdown.
    async fn keep_connected(mut self) {
        let mut backoff = Duration::from_millis(100);
        loop {
            if self.shutdown.is_set() {
                return;
            }
            let mut shutdown = self.shutdown.clone();
            let opened = tokio::select! {
                r = self.open() => r,
                _ = shutdown.wait() => return,
            };
            match opened {
                Ok(stream) => {
                    backoff = Duration::from_millis(100);
                    self.set_up(true, "").await;
                    match self.session(stream).await {
                        End::Shutdown => return,
                        End::Fault(reason) => self.set_up(false, &reason.to_string()).await,
                    }
                }
                Err(reason) => {
                    let reason = reason.to_string();
                    self.set_up(false, &reason).await;
                    tracing::debug!(url = %self.config.url, %reason, "controller still unreachable");
                }
            }
            // Wait before retrying, refusing commands meanwhile.
            let until = Instant::now() + backoff;
            backoff = (backoff * 2).min(self.config.backoff_cap);
            loop {
                tokio::select! {
                    _ = tokio::time::sleep_until(until) => break,
                    _ = self.shutdown.wait() => return,
                    cmd = self.commands.recv() => match cmd {
                        None => return,
                        Some(c) => self.emit(TunerEvent::Error {
                            text: format!("controller link down: {} not sent", Request::from(c)),
                        }).await,
                    },
                }
            }
        }
    }

    async fn emit(&mut self, ev: TunerEvent) {
        // A receiver that has gone away means the service is shutting down.
        let _ = self.events.send(ev).await;
    }

    async fn set_up(&mut self, up: bool, reason: &str) {
        if self.up == Some(up) {
            return;
        }
        self.up = Some(up);
        if up {
            tracing::info!(url = %self.config.url, "controller link up");
            self.emit(TunerEvent::LinkUp).await;
        } else {
            tracing::warn!(url = %self.config.url, %reason, "controller link down");
            self.emit(TunerEvent::LinkDown {
                reason: reason.to_string(),
            })
            .await;
        }
    }

    /// A failure of the link to the controller: at its URL.
    fn failure(&self, expected: impl Into<String>, found: impl Into<String>) -> Located {
        Located::named(self.config.url.to_string(), expected, found)
    }

    async fn open(&self) -> Result<Box<dyn ByteStream>, Located> {
        let timeout = self.config.reply_margin.max(Duration::from_millis(500));
        match &self.config.url {
            ControllerUrl::Gpio(w) => {
                let existing = self
                    .direct
                    .lock()
                    .unwrap_or_else(|p| p.into_inner())
                    .clone();
                let direct = match existing {
                    Some(d) => d,
                    None => {
                        let d = open_direct(&self.config, w)?;
                        *self.direct.lock().unwrap_or_else(|p| p.into_inner()) = Some(d.clone());
                        d
                    }
                };
                direct
                    .connect()
                    .await
                    .map(|s| Box::new(s) as Box<dyn ByteStream>)
                    .map_err(|e| self.failure("a connection to the direct drive", e.to_string()))
            }
            ControllerUrl::Serial { path, baud } => {
                let builder = tokio_serial::new(path.to_string_lossy(), *baud);
                tokio_serial::SerialStream::open(&builder)
                    .map(|s| Box::new(s) as Box<dyn ByteStream>)
                    .map_err(|e| self.failure("a serial port that opens", e.to_string()))
            }
            ControllerUrl::Tcp { addr } => {
                match tokio::time::timeout(timeout, tokio::net::TcpStream::connect(addr)).await {
                    Ok(Ok(s)) => {
                        let _ = s.set_nodelay(true);
                        Ok(Box::new(s))
                    }
                    Ok(Err(e)) => Err(self.failure("a controller that accepts", e.to_string())),
                    Err(_) => Err(self.failure(
                        "a controller that accepts",
                        format!("no answer in {timeout:?}"),
                    )),
                }
            }
            ControllerUrl::Sim => {
                let Some(ctl) = self.sim.clone() else {
                    return Err(self.failure(
                        format!(
                            "a simulator start within the limits {}..{}",
                            self.config.min_steps, self.config.max_steps
                        ),
                        self.config.sim_start.to_string(),
                    ));
                };
                let (ours, theirs) = tokio::io::duplex(1024);
                let stop = self.shutdown_generation();
                tokio::spawn(async move {
                    let _ = serve_connection(theirs, ctl, stop).await;
                });
                Ok(Box::new(ours))
            }
        }
    }

    /// A stop signal for the in-process simulator's connection that fires
    /// when this link shuts down (the simulator also ends when our end of
    /// the duplex is dropped).
    fn shutdown_generation(&self) -> watch::Receiver<u64> {
        let (tx, rx) = watch::channel(0u64);
        let mut shutdown = self.shutdown.clone();
        tokio::spawn(async move {
            tokio::select! {
                _ = shutdown.wait() => { tx.send_replace(1); }
                _ = tx.closed() => {}
            }
        });
        rx
    }

    async fn session(&mut self, stream: Box<dyn ByteStream>) -> End {
        let (mut rd, mut wr) = tokio::io::split(stream);
        let mut framer = LineFramer::new();
        let mut inbuf = BytesMut::with_capacity(256);
        // Which power-on of the controller this is (version 3; an older
        // one answers ERR), then where it is.
        let mut w = Waiting {
            boot_asked: true,
            ..Waiting::default()
        };
        for req in [Request::Boot, Request::Where] {
            if let Err(e) = self.send(&mut wr, &mut w, req).await {
                return End::Fault(e);
            }
        }
        loop {
            let deadline = match (w.reply_due, w.arrival.map(|a| a.1)) {
                (Some(a), Some(b)) => Some(a.min(b)),
                (a, b) => a.or(b),
            };
            let transmit_watch = self.transmit.as_mut();
            tokio::select! {
                _ = self.shutdown.wait() => return End::Shutdown,
                n = rd.read_buf(&mut inbuf) => {
                    match n {
                        Ok(0) => return End::Fault(self.failure("lines from the controller", "the connection closed")),
                        Err(e) => return End::Fault(self.failure("lines from the controller", format!("a read error ({e})"))),
                        Ok(_) => {}
                    }
                    while let Some(line) = framer.next_line(&mut inbuf) {
                        self.take_line(&mut w, line).await;
                    }
                }
                cmd = self.commands.recv() => {
                    let Some(cmd) = cmd else { return End::Shutdown };
                    if let Err(e) = self.command(&mut wr, &mut w, cmd).await {
                        return End::Fault(e);
                    }
                }
                changed = changed_or_pending(transmit_watch) => {
                    match changed {
                        Err(()) => {
                            tracing::warn!("transmit state no longer reported; interlock at the controller link off");
                            self.transmit = None;
                        }
                        Ok(true) if w.arrival.is_some() => {
                            tracing::warn!("the rig transmits (or cannot be heard) while the motor moves: stopping it");
                            self.emit(TunerEvent::InterlockStop).await;
                            if let Err(e) = self.send(&mut wr, &mut w, Request::Stop).await {
                                return End::Fault(e);
                            }
                        }
                        Ok(_) => {}
                    }
                }
                _ = sleep_until_opt(deadline) => {
                    let (expected, found) = match (w.reply_due, w.arrival) {
                        (Some(due), _) if Instant::now() >= due => {
                            (format!("an answer within {:?}", self.config.reply_margin), "none")
                        }
                        (_, Some((i64::MIN, _))) => {
                            ("the homing run to end in time".to_string(), "it still under way")
                        }
                        (_, Some((target, _))) => {
                            (format!("the move to {target} to end in time"), "it still under way")
                        }
                        _ => ("an answer in time".to_string(), "none"),
                    };
                    let fault = self.failure(expected, found);
                    let text = format!("controller fault: {fault}; reconnecting");
                    self.emit(TunerEvent::Error { text }).await;
                    return End::Fault(fault);
                }
            }
        }
    }

    fn transmitting(&self) -> bool {
        self.transmit.as_ref().is_some_and(|t| *t.borrow())
    }

    async fn command(
        &mut self,
        wr: &mut (impl AsyncWrite + Unpin),
        w: &mut Waiting,
        cmd: TunerCommand,
    ) -> Result<(), Located> {
        let (min, max) = (self.config.min_steps, self.config.max_steps);
        let refuse = match cmd {
            TunerCommand::Goto(t) if !(min..=max).contains(&t) => {
                Some(format!("GOTO {t} refused: outside limits {min}..{max}"))
            }
            TunerCommand::Zero(t) if !(min..=max).contains(&t) => {
                Some(format!("ZERO {t} refused: outside limits {min}..{max}"))
            }
            TunerCommand::Goto(t) if self.transmitting() => {
                Some(format!("GOTO {t} refused: rig transmitting or not heard"))
            }
            TunerCommand::Home { position, .. } if !(min..=max).contains(&position) => Some(
                format!("HOME refused: position {position} outside limits {min}..{max}"),
            ),
            TunerCommand::Home { .. } if self.transmitting() => {
                Some("HOME refused: rig transmitting or not heard".to_string())
            }
            _ => None,
        };
        if let Some(text) = refuse {
            tracing::warn!(%text);
            self.emit(TunerEvent::Error { text }).await;
            return Ok(());
        }
        if let TunerCommand::Home { speed, .. } = cmd {
            w.home_speed = Some(f64::from(speed));
        }
        self.send(wr, w, Request::from(cmd)).await
    }

    async fn send(
        &mut self,
        wr: &mut (impl AsyncWrite + Unpin),
        w: &mut Waiting,
        req: Request,
    ) -> Result<(), Located> {
        let mut out = BytesMut::with_capacity(32);
        req.encode(&mut out);
        let margin = self.config.reply_margin;
        match tokio::time::timeout(margin, async {
            wr.write_all(&out).await?;
            wr.flush().await
        })
        .await
        {
            Ok(Ok(())) => {}
            Ok(Err(e)) => {
                return Err(self.failure(format!("{req} sent"), format!("a write error ({e})")))
            }
            Err(_) => {
                return Err(self.failure(
                    format!("{req} sent within {margin:?}"),
                    "the write still waiting",
                ))
            }
        }
        tracing::debug!(%req, "sent");
        w.unanswered += 1;
        if w.reply_due.is_none() {
            w.reply_due = Some(Instant::now() + margin);
        }
        Ok(())
    }

    async fn take_line(&mut self, w: &mut Waiting, line: Result<String, super::line::LineError>) {
        let reply = match line.and_then(|l| Reply::parse(&l)) {
            Ok(r) => r,
            Err(e) => {
                let text = format!("controller sent an unreadable line: {e}");
                tracing::warn!(%text);
                self.emit(TunerEvent::Error { text }).await;
                return;
            }
        };
        tracing::debug!(%reply, "received");
        // `LIMIT` answers nothing: the controller says it of its own accord.
        if w.unanswered > 0 && !matches!(reply, Reply::Limit { .. }) {
            w.unanswered -= 1;
            w.reply_due = (w.unanswered > 0).then(|| Instant::now() + self.config.reply_margin);
        }
        if std::mem::take(&mut w.boot_asked) {
            match reply {
                Reply::Boot(id) => {
                    self.emit(TunerEvent::Boot { id: Some(id) }).await;
                    return;
                }
                Reply::Err(text) => {
                    tracing::info!(%text, "the controller has no BOOT (protocol version 2 or older): a restart of it cannot be told apart");
                    self.emit(TunerEvent::Boot { id: None }).await;
                    return;
                }
                // Not the answer to BOOT (a controller out of step): no
                // number, and the line is taken as it is.
                _ => self.emit(TunerEvent::Boot { id: None }).await,
            }
        }
        let ev = match reply {
            Reply::Boot(id) => TunerEvent::Error {
                text: format!("controller sent BOOT {id} unasked"),
            },
            Reply::Moving(target) => {
                let distance = match (w.position, w.arrival) {
                    (Some(p), None) => p.abs_diff(target),
                    // Unknown start or a move already under way: allow the
                    // whole travel.
                    _ => self.config.min_steps.abs_diff(self.config.max_steps),
                };
                let due = Instant::now()
                    + self.config.travel(distance)
                    + self.config.settle
                    + self.config.reply_margin;
                w.arrival = Some((target, due));
                TunerEvent::Accepted { target }
            }
            Reply::At(steps) => {
                w.arrival = None;
                w.position = Some(steps);
                TunerEvent::At { steps }
            }
            Reply::Err(text) => TunerEvent::Error {
                text: format!("controller refused: {text}"),
            },
            Reply::Homing => {
                // The switch may be anywhere on the travel: the whole
                // travel at the homing speed, plus settle and margin.
                let speed = w.home_speed.unwrap_or(self.config.steps_per_second);
                let whole = self.config.min_steps.abs_diff(self.config.max_steps);
                let run = super::travel_time(whole, speed, Duration::MAX / 4);
                let due = Instant::now() + run + self.config.settle + self.config.reply_margin;
                w.arrival = Some((i64::MIN, due));
                TunerEvent::Homing
            }
            Reply::Homed(steps) => {
                w.arrival = None;
                w.home_speed = None;
                w.position = Some(steps);
                TunerEvent::Homed { steps }
            }
            Reply::Limit { side, steps } => {
                // Unsolicited: the controller stopped the motor itself.
                w.arrival = None;
                w.position = None;
                TunerEvent::Limit { side, steps }
            }
        };
        self.emit(ev).await;
    }
}

/// Opens the GPIO lines and starts the direct drive. Its step count starts
/// at the lower limit: a direct drive has no memory, so the service sets it
/// from the journal (`ZERO`) when the link comes up.
#[cfg(target_os = "linux")]
fn open_direct(
    config: &ClientConfig,
    w: &GpioWiring,
) -> Result<super::gpio::DirectController, Located> {
    use super::gpio::{DirectController, GpioPins, PulseTiming, RealPause, StepDirDriver};
    let url = config.url.to_string();
    let pins = GpioPins::open(&w.chip, w.step, w.dir, w.up_is_high).map_err(|e| {
        Located::named(
            &url,
            "step and direction lines this user may drive",
            e.to_string(),
        )
    })?;
    let accel = w
        .accel
        .map(f64::from)
        .unwrap_or(config.steps_per_second * 4.0);
    let profile =
        super::ramp::RampProfile::new(accel, config.steps_per_second).map_err(|e| Located {
            at: Place::Named(format!("{url}: {}", e.at)),
            ..e
        })?;
    let timing = PulseTiming {
        step_pulse: Duration::from_micros(w.pulse_us.into()),
        dir_setup: Duration::from_micros(w.setup_us.into()),
    };
    let driver = StepDirDriver::new(
        pins,
        RealPause,
        profile,
        timing,
        (config.min_steps, config.max_steps),
        config.min_steps,
    )
    .map_err(|e| Located::named(&url, "a direct drive within its limits", e.to_string()))?;
    let lines = super::gpio::SwitchLines {
        home: config.home_line,
        low_stop: w.low_stop,
        high_stop: w.high_stop,
    };
    let driver = match super::gpio::GpioSwitches::open(&w.chip, lines, w.closed_high)
        .map_err(|e| Located::named(&url, "switch input lines this user may read", e.to_string()))?
    {
        Some(switches) => driver.with_switches(Box::new(switches), lines.home.is_some()),
        None => driver,
    };
    Ok(DirectController::start(driver, config.settle))
}

#[cfg(not(target_os = "linux"))]
fn open_direct(
    _config: &ClientConfig,
    _w: &GpioWiring,
) -> Result<super::gpio::DirectController, Located> {
    Err(Located::named(
        _config.url.to_string(),
        "Linux, for a direct GPIO drive",
        std::env::consts::OS,
    ))
}

impl From<TunerCommand> for Request {
    fn from(c: TunerCommand) -> Request {
        match c {
            TunerCommand::Goto(s) => Request::Goto(s),
            TunerCommand::Where => Request::Where,
            TunerCommand::Stop => Request::Stop,
            TunerCommand::Zero(s) => Request::Zero(s),
            TunerCommand::Home {
                side,
                position,
                speed,
            } => Request::Home {
                side,
                position,
                speed,
            },
        }
    }
}

/// The new value once the watch changes; `Err` if its sender is gone;
/// never resolves without a watch.
async fn changed_or_pending(w: Option<&mut watch::Receiver<bool>>) -> Result<bool, ()> {
    match w {
        Some(w) => match w.changed().await {
            Ok(()) => Ok(*w.borrow_and_update()),
            Err(_) => Err(()),
        },
        None => std::future::pending().await,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn urls_parse_with_defaults_and_refusals_say_what_was_expected() {
        assert_eq!(
            "serial:///dev/ttyACM0?baud=57600".parse(),
            Ok(ControllerUrl::Serial {
                path: "/dev/ttyACM0".into(),
                baud: 57_600
            })
        );
        assert_eq!(
            "serial:///dev/serial/by-id/usb-x".parse(),
            Ok(ControllerUrl::Serial {
                path: "/dev/serial/by-id/usb-x".into(),
                baud: DEFAULT_CONTROLLER_BAUD
            })
        );
        assert_eq!(
            "tcp://127.0.0.1:7300".parse(),
            Ok(ControllerUrl::Tcp {
                addr: "127.0.0.1:7300".into()
            })
        );
        assert_eq!("sim".parse(), Ok(ControllerUrl::Sim));
        assert_eq!(
            "gpio://gpiochip0?step=17&dir=27&up=low&accel=3000".parse(),
            Ok(ControllerUrl::Gpio(GpioWiring {
                chip: "gpiochip0".into(),
                step: 17,
                dir: 27,
                up_is_high: false,
                accel: Some(3000),
                pulse_us: 5,
                setup_us: 20,
                low_stop: None,
                high_stop: None,
                closed_high: false,
            }))
        );
        assert_eq!(
            "gpio://gpiochip1?step=5&dir=6&low_stop=12&high_stop=13&closed=high".parse(),
            Ok(ControllerUrl::Gpio(GpioWiring {
                chip: "gpiochip1".into(),
                step: 5,
                dir: 6,
                up_is_high: true,
                accel: None,
                pulse_us: 5,
                setup_us: 20,
                low_stop: Some(12),
                high_stop: Some(13),
                closed_high: true,
            }))
        );
        // Each refusal: (URL, words of what was expected, what was found).
        for (bad, expected, found) in [
            ("serial://ttyACM0", "must be absolute", "`serial://ttyACM0`"),
            ("serial:///dev/x?baud=fast", "positive baud rate", "`fast`"),
            (
                "serial:///dev/x?parity=odd",
                "only `baud=N`",
                "`parity=odd`",
            ),
            ("tcp://127.0.0.1", "HOST:PORT", "`tcp://127.0.0.1`"),
            ("tcp://:80", "HOST:PORT", "`tcp://:80`"),
            ("udp://1.2.3.4:5", "`sim`", "`udp://1.2.3.4:5`"),
            ("gpio://gpiochip0?step=17", "`dir=N`", "none"),
            (
                "gpio://gpiochip0?step=4&dir=4",
                "different lines",
                "4 for both",
            ),
            ("gpio://?step=1&dir=2", "GPIO chip", "nothing"),
            (
                "gpio://gpiochip0?step=1&dir=2&up=sideways",
                "`high` or `low`",
                "`sideways`",
            ),
            (
                "gpio://gpiochip0?step=1&dir=2&speed=9",
                "keys step, dir",
                "`speed`",
            ),
            (
                "gpio://gpiochip0?step=1&dir=2&high_stop=2",
                "other than the dir line",
                "2 for both",
            ),
            (
                "gpio://gpiochip0?step=1&dir=2&low_stop=7&high_stop=7",
                "different lines for low_stop and high_stop",
                "7 for both",
            ),
            (
                "gpio://gpiochip0?step=1&dir=2&closed=open",
                "`high` or `low` for `closed`",
                "`open`",
            ),
            ("", "`tcp://HOST:PORT`", "``"),
        ] {
            let e = bad.parse::<ControllerUrl>().unwrap_err();
            assert!(e.expected.contains(expected), "{bad}: {e}");
            assert_eq!(e.found, found, "{bad}: {e}");
            let located = e.at(Place::bare_key("tuner.link")).to_string();
            assert!(
                located.starts_with("key `tuner.link`: expected ")
                    && located.ends_with(&format!(", found {found}")),
                "{bad}: {located}"
            );
        }
    }

    #[test]
    fn url_display_parses_back() {
        for s in [
            "serial:///dev/ttyUSB1?baud=9600",
            "tcp://localhost:1",
            "sim",
            "gpio://gpiochip0?step=17&dir=27&up=high&pulse_us=5&setup_us=20",
            "gpio://gpiochip0?step=17&dir=27&up=low&accel=900&pulse_us=4&setup_us=9&low_stop=3&high_stop=4&closed=high",
        ] {
            let u: ControllerUrl = s.parse().unwrap();
            assert_eq!(u.to_string(), s);
        }
    }
}
