//! The live driver: the follow core on real time, wired to the rig's port,
//! the controller link, the inhibit output and the position journal.
//!
//! Each resource is owned by one task (the rig link or proxy, the controller
//! link); this driver owns the core, the decoder, the inhibit line and the
//! journal, and joins them with channels. It feeds the core events stamped
//! with the time since its start, carries out the core's actions in order,
//! and sleeps until the core's next deadline.
//!
//! Shutdown is the driver's: on the request (a [`Shutdown`], set by
//! SIGINT/SIGTERM in `tuneward run`) it stops taking new targets, lets the
//! move under way finish (or stops it when it overruns), relaxes the drive
//! train if asked, journals the position and releases the inhibit. Only
//! then are the rig and controller tasks told to stop, through a
//! [`Shutdown`] of their own, so that a transmission is still heard and the
//! controller still answers until the end.
//!
//! What the driver adds to the core, all on the side of caution:
//!
//! - **Journal first.** The intent of every move is on disk (fsynced) before
//!   its first `GOTO` leaves; the position after its final arrival. A
//!   journal that cannot be written stops moves (a fault) rather than let
//!   the position go untracked.
//! - **Inhibit confirmed.** A `GOTO` is only sent while the inhibit output
//!   has accepted *on*; a failed inhibit is a fault.
//! - **Resynchronising the position** whenever the controller link comes up
//!   (it answers the link's `WHERE`): a clean journal record that differs
//!   from the controller's count means the controller restarted, and it is
//!   told the journal's position with `ZERO`; a journal that shows a move
//!   that never finished leaves the position unknown (nothing moves) unless
//!   the controller reports the move's target, until the operator runs
//!   `tuneward set-position` and restarts.
//! - **Deaf means no moves.** While the rig's port is down the core is told
//!   (`handle_rig_link`: it holds with reason `rig-silent`), and the
//!   controller link treats the rig as transmitting, so nothing moves while
//!   we cannot hear it.
//!
//! The journal is written synchronously on this task (a few milliseconds
//! per fsync): ordering matters more than latency here, and the events come
//! at human rates.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use tokio::sync::{mpsc, watch};
use tokio::time::Instant;

use crate::calibrate::{append_candidate, candidates_path, Point};
use crate::config::{Approach, Config, RigConfig, RigMode, SerialFlow, SerialParity};
use crate::follow::{Action, Follower};
use crate::inhibit::{self, InhibitLine};
use crate::journal::{Journal, Recorded};
use crate::port::link::{
    DataBits, FlowControl, LinkConfig, LinkEvent, Parity, PollConfig, PortSettings, StopBits,
};
use crate::port::proxy::{ends_with, Boundary, ProxyConfig};
use crate::port::{link, proxy};
use crate::rig::dialect::Spec;
use crate::rig::{Decode, Family, RigEvent};
use crate::shutdown::{self, Shutdown};
use crate::signals;
use crate::station::Station;
use crate::timing::{sleep_until_opt, sleep_until_precise};
use crate::tuner::client::{self, ClientConfig, TunerCommand, TunerEvent};

/// Where the rig's bytes come from.
pub enum RigSource {
    /// The rig's port, owned by tuneward.
    Link(LinkConfig),
    /// The rig's port shared with another program through a pseudo-terminal.
    Proxy {
        config: ProxyConfig,
        boundary: Box<dyn Boundary>,
    },
    /// Events from elsewhere (tests, or a driver that owns the port itself).
    Events(mpsc::Receiver<LinkEvent>),
}

/// Everything the live service drives.
pub struct ServiceParts {
    /// The core; give it `position: None` (the position comes from the
    /// controller and the journal once the link is up).
    pub follower: Follower,
    pub decoder: Box<dyn Decode>,
    pub rig: RigSource,
    pub controller: ClientConfig,
    pub inhibit: Box<dyn InhibitLine>,
    /// `None`: no journal (the position is never trusted across restarts
    /// beyond what the controller says). Meant for tests and demos.
    pub journal: Option<Journal>,
    /// `tuner.relax_on_exit`: at a clean shutdown after a completed
    /// approach, back off half the backlash toward the approach side.
    pub relax_on_exit: bool,
    /// Where touch-up candidates go (beside `[calibration] file`); `None`
    /// with inline points: candidates are only logged.
    pub candidates: Option<PathBuf>,
}

/// How a run ended.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct RunSummary {
    /// Where the motor was at rest at the end, if known.
    pub position: Option<i64>,
    /// Moves the core started.
    pub moves: u64,
    /// Faults seen (controller link, inhibit, journal).
    pub faults: u64,
    /// Times the driver woke for a timer of its own (a core deadline or a
    /// `WHERE` retry); with no traffic and nothing due this stays 0.
    pub timer_wakeups: u64,
}

/// The config's file name for error messages.
fn config_name(config: &Config) -> String {
    config.path_for_errors().display().to_string()
}

/// The rig's port as `[rig]` describes it: `port`, `baud` and framing, and
/// the `mode`: `listen` (read only), `poll` (queries every `poll_ms`) or
/// `proxy` (shared through a pseudo-terminal at `proxy_link`, which is
/// relative to the config's folder).
pub fn rig_source(station: &Station) -> Result<RigSource, String> {
    let config = &station.config;
    let file = config_name(config);
    let port = config.rig.port.clone().ok_or_else(|| {
            format!("{file}: key `rig.port`: expected the rig's serial device (e.g. /dev/serial/by-id/...), found none")
        })?;
    let settings = port_settings(&config.rig, port).map_err(|e| format!("{file}: {e}"))?;
    // Which queries (if any) go to the rig is the mode's business:
    // `listen` never writes to the port.
    let poll = match config.rig.poll_every_ms() {
        None => None,
        Some(0) => {
            return Err(format!(
                "{file}: key `rig.poll_ms`: expected a positive number of ms, found 0"
            ))
        }
        Some(ms) => {
            let address = match (station.dialect.family(), config.rig.address) {
                    (Family::Binary, None) => {
                        return Err(format!(
                            "{file}: key `rig.address`: polling a binary-family rig needs its address, found none"
                        ))
                    }
                    (_, a) => a.unwrap_or(0),
                };
            let mut query = station.dialect.poll_frequency(address);
            query.extend(station.dialect.poll_transmit(address));
            let every = Duration::from_millis(ms);
            Some(PollConfig {
                query,
                every,
                max_every: every.max(Duration::from_secs(4)),
            })
        }
    };
    let proxy_link = match config.rig.mode {
            RigMode::Proxy => Some(config.rig.proxy_link.clone().ok_or_else(|| {
                format!("{file}: key `rig.proxy_link`: expected the path for the shared pseudo-terminal's symlink (mode = \"proxy\"), found none")
            })?),
            _ => None,
        };
    let rig = match &proxy_link {
        Some(link) => {
            let link = match config.source.as_deref().and_then(Path::parent) {
                Some(dir) if link.is_relative() => dir.join(link),
                _ => link.clone(),
            };
            let end = match &station.dialect.spec {
                Spec::Binary(b) => b.terminator,
                Spec::Text(t) => t.terminator,
            };
            RigSource::Proxy {
                config: ProxyConfig {
                    port: settings,
                    link,
                    poll,
                    backoff_cap: Duration::from_secs(2),
                },
                boundary: Box::new(ends_with(end)),
            }
        }
        None => RigSource::Link(LinkConfig {
            port: settings,
            poll,
            backoff_cap: Duration::from_secs(2),
        }),
    };
    Ok(rig)
}

impl ServiceParts {
    /// The live service a station's config describes: the rig's port from
    /// `[rig]` (see [`rig_source`]), the controller from `tuner.link`, the
    /// inhibit from `[inhibit]`, the journal from `tuner.state_file`.
    pub fn from_station(station: &Station) -> Result<ServiceParts, String> {
        let config = &station.config;
        let file = config_name(config);
        let rig = rig_source(station)?;
        let controller =
            ClientConfig::from_tuner(&config.tuner).map_err(|e| format!("{file}: {e}"))?;
        let inhibit = inhibit::open(&config.inhibit).map_err(|e| format!("{file}: {e}"))?;
        Ok(ServiceParts {
            follower: Follower::new(station.policy.clone(), Arc::clone(&station.map), None),
            decoder: station.dialect.decoder(config.rig.address),
            rig,
            controller,
            inhibit,
            journal: Some(Journal::for_config(config)),
            relax_on_exit: config.tuner.relax_on_exit,
            candidates: config
                .calibration_file()
                .map(|points| candidates_path(&points)),
        })
    }
}

/// The rig port's settings from `[rig]`, with the keys named in errors.
pub fn port_settings(rig: &RigConfig, port: String) -> Result<PortSettings, String> {
    if rig.baud == 0 {
        return Err("key `rig.baud`: expected a positive baud rate, found 0".to_string());
    }
    let mut s = PortSettings::new(port, rig.baud);
    s.data_bits = match rig.data_bits {
        5 => DataBits::Five,
        6 => DataBits::Six,
        7 => DataBits::Seven,
        8 => DataBits::Eight,
        n => {
            return Err(format!(
                "key `rig.data_bits`: expected 5, 6, 7 or 8, found {n}"
            ))
        }
    };
    s.stop_bits = match rig.stop_bits {
        1 => StopBits::One,
        2 => StopBits::Two,
        n => return Err(format!("key `rig.stop_bits`: expected 1 or 2, found {n}")),
    };
    s.parity = match rig.parity {
        SerialParity::None => Parity::None,
        SerialParity::Odd => Parity::Odd,
        SerialParity::Even => Parity::Even,
    };
    s.flow = match rig.flow_control {
        SerialFlow::None => FlowControl::None,
        SerialFlow::Software => FlowControl::Software,
        SerialFlow::Hardware => FlowControl::Hardware,
    };
    Ok(s)
}

/// How `tuneward run` writes its log (stderr).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum LogFormat {
    /// One readable line per decision.
    #[default]
    Text,
    /// One JSON object per line (for a log collector).
    Json,
}

/// Installs the log for the live commands: `info` and above by default,
/// `RUST_LOG` (e.g. `tuneward=debug`) to change it. A second call does
/// nothing.
pub fn init_logging(format: LogFormat) {
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_target(false);
    let _ = match format {
        LogFormat::Text => {
            use std::io::IsTerminal;
            builder
                .with_ansi(std::io::stderr().is_terminal())
                .try_init()
        }
        LogFormat::Json => builder.json().try_init(),
    };
}

/// What `tuneward run` is asked to do.
#[derive(Debug, Clone)]
pub struct RunOptions {
    /// The station's config (TOML; see config/example.toml).
    pub config: PathBuf,
    /// How to write the log on stderr.
    pub log_format: LogFormat,
}

/// `tuneward run`: logging, then [`run_config`] until SIGINT/SIGTERM.
pub fn run_command(args: &RunOptions) -> Result<(), String> {
    init_logging(args.log_format);
    tracing::info!(config = %args.config.display(), version = env!("CARGO_PKG_VERSION"), "starting");
    run_config(&args.config).map(|_| ())
}

/// Runs the live service for the config at `config` until interrupted
/// (Ctrl-C or SIGTERM), on a runtime of its own.
pub fn run_config(config: &Path) -> Result<RunSummary, String> {
    let station = Station::load(config).map_err(|e| e.to_string())?;
    let service = ServiceParts::from_station(&station)?;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| format!("cannot start the runtime: {e}"))?;
    rt.block_on(async move { run(service, signals::stop_flag()).await })
}

/// How long a failed resource waits before the driver asks `WHERE` again.
const RETRY_AFTER: Duration = Duration::from_secs(2);
/// How long shutdown waits for a stopping motor to report where it is.
const STOP_WAIT: Duration = Duration::from_secs(3);

/// Runs the service until `shutdown` becomes true. Errors only for what
/// stops it from starting (a proxy symlink that cannot be placed, a journal
/// that cannot be read); everything after start-up is retried and logged.
pub async fn run(
    service: ServiceParts,
    shutdown: impl Into<Shutdown>,
) -> Result<RunSummary, String> {
    let shutdown = shutdown.into();
    let recorded = match &service.journal {
        Some(j) => j.load().map_err(|e| e.to_string())?,
        None => None,
    };
    match recorded {
        Some(Recorded::Known(p)) => tracing::info!(position = p, "journal: motor at rest"),
        Some(Recorded::Unknown { from, to }) => tracing::warn!(
            from,
            to,
            "journal: a move did not finish; the position is unknown unless the controller reports its target"
        ),
        None => tracing::info!("journal: none yet; the controller's count will be taken"),
    }
    // The link tasks outlive the shutdown request: the move under way must
    // finish (or be stopped) over the controller link, and the rig must
    // still be heard (a transmission stops the motor; a proxied program
    // keeps its port) until the driver has persisted and released.
    let (tasks_stop, tasks_shutdown) = shutdown::channel();
    let (rig_tx, rig_rx) = mpsc::channel(256);
    let (rig_task, rig_rx) = match service.rig {
        RigSource::Link(cfg) => (
            Some(link::spawn(cfg, rig_tx, tasks_shutdown.clone())),
            rig_rx,
        ),
        RigSource::Proxy { config, boundary } => (
            Some(proxy::spawn(
                config,
                boundary,
                rig_tx,
                tasks_shutdown.clone(),
            )?),
            rig_rx,
        ),
        RigSource::Events(rx) => (None, rx),
    };
    let (transmit_tx, transmit_rx) = watch::channel(false);
    let timing = StopTiming {
        steps_per_second: service.controller.steps_per_second,
        settle: service.controller.settle,
        margin: service.controller.reply_margin,
    };
    let client = client::spawn(
        service.controller,
        Some(transmit_rx),
        tasks_shutdown.clone(),
    );
    let mut driver = Driver {
        core: service.follower,
        decoder: service.decoder,
        inhibit: service.inhibit,
        // Lines are opened asserted (fail-safe); synced to the core below.
        inhibit_on: true,
        journal: service.journal,
        recorded,
        commands: client.commands,
        transmit: transmit_tx,
        origin: Instant::now(),
        floor: std::cell::Cell::new(Duration::ZERO),
        resync: Resync::Idle,
        block_gotos: false,
        retry_where: None,
        unknown_reported: false,
        outcome: RunSummary::default(),
        events: Vec::with_capacity(16),
        timing,
        relax_on_exit: service.relax_on_exit,
        candidates: service.candidates,
        leg: None,
        final_to: None,
        tensioned: false,
        stopping: false,
    };
    driver.apply_actions().await;
    if !driver.core.inhibit() {
        // The journal gave a trusted position: nothing to hold the rig off for.
        match driver.inhibit.set(false) {
            Ok(()) => {
                driver.inhibit_on = false;
                tracing::info!(on = false, "transmit inhibit");
            }
            Err(e) => tracing::error!(error = %e, "transmit inhibit output failed"),
        }
    }
    let result = driver.drive(rig_rx, client.events, shutdown).await;
    tasks_stop.trigger();
    // Let the tasks close their ports (and the proxy its symlink).
    let _ = tokio::time::timeout(TASK_END_WAIT, client.task).await;
    if let Some(t) = rig_task {
        let _ = tokio::time::timeout(TASK_END_WAIT, t).await;
    }
    tracing::info!(
        position = ?result.position,
        moves = result.moves,
        faults = result.faults,
        "stopped"
    );
    Ok(result)
}

/// How long the driver waits for a link task to close its port at the end.
const TASK_END_WAIT: Duration = Duration::from_secs(3);

/// What the driver needs to know about the motor's speed to bound a wait
/// for the end of a move.
#[derive(Debug, Clone, Copy)]
struct StopTiming {
    steps_per_second: f64,
    settle: Duration,
    margin: Duration,
}

impl StopTiming {
    /// Time to travel `distance` steps and settle, plus the reply margin.
    fn travel(&self, distance: u64) -> Duration {
        let run =
            crate::tuner::travel_time(distance, self.steps_per_second, Duration::from_secs(3600));
        run + self.settle + self.margin
    }
}

/// One leg sent to the controller: where it started, where it goes, when
/// it was sent.
#[derive(Debug, Clone, Copy)]
struct Leg {
    from: i64,
    to: i64,
    sent: Instant,
}

/// What one turn of the driver's loop did.
enum Step {
    Shutdown,
    TunerGone,
    Deadline,
    Worked,
}

/// Where the driver is in bringing its position in line with the
/// controller's.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Resync {
    /// Nothing to check.
    Idle,
    /// The next `At` answers a `WHERE`. After the link came (back) up the
    /// controller may have restarted, so its answer is checked against the
    /// journal; after a fault with the link up all along it is taken.
    AwaitWhere { after_link_up: bool },
    /// `ZERO p` was sent; waiting for `At p`.
    AwaitZero(i64),
    /// The position cannot be trusted (unfinished move in the journal):
    /// positions reported are ignored until the link comes up again.
    Blocked,
}

struct Driver {
    core: Follower,
    decoder: Box<dyn Decode>,
    inhibit: Box<dyn InhibitLine>,
    /// The inhibit output has accepted *on* and not been set off since.
    inhibit_on: bool,
    journal: Option<Journal>,
    /// What the journal on disk says (kept in step with every write).
    recorded: Option<Recorded>,
    commands: mpsc::Sender<TunerCommand>,
    transmit: watch::Sender<bool>,
    origin: Instant,
    /// The latest time handed out by [`Driver::now`] or
    /// [`Driver::arrival_time`]: the core's clock never runs backwards.
    floor: std::cell::Cell<Duration>,
    resync: Resync,
    /// Set after a failed journal or inhibit write: the `GOTO`s of that move
    /// are not sent.
    block_gotos: bool,
    retry_where: Option<Instant>,
    unknown_reported: bool,
    outcome: RunSummary,
    events: Vec<RigEvent>,
    timing: StopTiming,
    relax_on_exit: bool,
    candidates: Option<PathBuf>,
    /// The leg under way, for the shutdown's bound on the remaining travel.
    leg: Option<Leg>,
    /// The final target of the move under way.
    final_to: Option<i64>,
    /// The last move ended with its final approach: the drive train is
    /// under tension toward the approach side.
    tensioned: bool,
    /// Shutdown requested: frequencies are no longer acted on.
    stopping: bool,
}

impl Driver {
    fn now(&self) -> Duration {
        let t = self.origin.elapsed().max(self.floor.get());
        self.floor.set(t);
        t
    }

    /// The core's time for bytes that the rig link read at `at`: then, not
    /// when this task got to them, so that a debounce runs from the
    /// report's arrival at the port and the hand-over between tasks does
    /// not delay the move it releases. Never earlier than a time the core
    /// has already seen (bytes read while this task was busy count from
    /// when it was done).
    fn arrival_time(&self, at: Instant) -> Duration {
        let t = at
            .saturating_duration_since(self.origin)
            .max(self.floor.get());
        self.floor.set(t);
        t
    }

    async fn drive(
        &mut self,
        mut rig: mpsc::Receiver<LinkEvent>,
        mut tuner: mpsc::Receiver<TunerEvent>,
        mut shutdown: Shutdown,
    ) -> RunSummary {
        let mut rig_open = true;
        loop {
            match self
                .step(
                    &mut rig,
                    &mut rig_open,
                    &mut tuner,
                    Some(&mut shutdown),
                    None,
                )
                .await
            {
                Step::Shutdown => {
                    self.shut_down(&mut rig, &mut rig_open, &mut tuner).await;
                    break;
                }
                Step::TunerGone => {
                    tracing::error!("controller link task ended");
                    self.release_inhibit();
                    break;
                }
                Step::Deadline | Step::Worked => {}
            }
        }
        self.outcome.position = self.core.position();
        self.outcome.moves = self.core.stats().moves;
        self.outcome.clone()
    }

    /// Waits for the next thing to do (an event, a deadline of the core's,
    /// a retry, `shutdown` if given, `until` if given), does it, and carries
    /// out the core's actions.
    async fn step(
        &mut self,
        rig: &mut mpsc::Receiver<LinkEvent>,
        rig_open: &mut bool,
        tuner: &mut mpsc::Receiver<TunerEvent>,
        shutdown: Option<&mut Shutdown>,
        until: Option<Instant>,
    ) -> Step {
        let wake = self.core.poll_timeout().map(|d| self.origin + d);
        let retry = self.retry_where;
        let watch_shutdown = shutdown.is_some();
        let mut spare = Shutdown::from(watch::channel(false).1);
        let shutdown = shutdown.unwrap_or(&mut spare);
        let step = tokio::select! {
            _ = shutdown.wait(), if watch_shutdown => return Step::Shutdown,
            ev = rig.recv(), if *rig_open => {
                match ev {
                    Some(ev) => self.rig_event(ev),
                    None => {
                        *rig_open = false;
                        tracing::warn!("rig source ended; nothing moves from now on");
                        let now = self.now();
                        self.rig_deaf(now);
                    }
                }
                Step::Worked
            }
            ev = tuner.recv() => match ev {
                Some(ev) => {
                    self.tuner_event(ev).await;
                    Step::Worked
                }
                None => return Step::TunerGone,
            },
            _ = sleep_until_precise(wake) => {
                self.outcome.timer_wakeups += 1;
                let now = self.now();
                self.core.handle_timeout(now);
                Step::Worked
            }
            _ = sleep_until_opt(retry) => {
                self.outcome.timer_wakeups += 1;
                self.retry_where = None;
                self.send(TunerCommand::Where).await;
                Step::Worked
            }
            _ = sleep_until_opt(until) => Step::Deadline,
        };
        self.apply_actions().await;
        step
    }

    /// The shutdown: no new targets; the move under way finishes (or is
    /// stopped once the time its remaining travel needs has passed); the
    /// drive train is relaxed if asked; the position is on disk; the
    /// inhibit is released last, with the motor at rest.
    async fn shut_down(
        &mut self,
        rig: &mut mpsc::Receiver<LinkEvent>,
        rig_open: &mut bool,
        tuner: &mut mpsc::Receiver<TunerEvent>,
    ) {
        self.stopping = true;
        let now = self.now();
        self.core.handle_pause(now, true);
        self.apply_actions().await;
        if self.core.is_moving() {
            let until = self.move_deadline();
            tracing::info!(
                wait_ms = until.saturating_duration_since(Instant::now()).as_millis() as u64,
                "shutting down: no new targets; letting the move under way finish"
            );
            while self.core.is_moving() {
                let until = self.move_deadline();
                match self.step(rig, rig_open, tuner, None, Some(until)).await {
                    Step::Worked => {}
                    Step::Deadline | Step::TunerGone | Step::Shutdown => break,
                }
            }
            if self.core.is_moving() {
                tracing::warn!(
                    "shutting down: the move did not finish in time; stopping the motor"
                );
                self.tensioned = false;
                self.send(TunerCommand::Stop).await;
                if let Some(steps) = self.wait_at(tuner, Instant::now() + STOP_WAIT).await {
                    let now = self.now();
                    self.core.handle_arrived(now, steps);
                    self.record_position(steps);
                } else {
                    tracing::error!("shutting down: the controller did not say where the motor stopped; the journal keeps the unfinished move (position unknown at next start)");
                }
            }
        } else {
            tracing::info!("shutting down: no new targets; the motor is at rest");
        }
        if self.relax_on_exit {
            self.relax(tuner).await;
        }
        if let Some(p) = self.core.position() {
            self.record_position(p);
        }
        self.release_inhibit();
    }

    /// When the move under way should have ended: the current leg's travel
    /// at the configured speed from when it was sent, plus settle time and
    /// half the reply margin, so that our `STOP` goes out before the
    /// controller link would call the slow move a fault (at the full
    /// margin). Before the first leg (the inhibit lead), the lead plus the
    /// margin. Recomputed for every leg.
    fn move_deadline(&self) -> Instant {
        let t = self.timing;
        match self.leg {
            Some(leg) => {
                let run = t.travel(leg.from.abs_diff(leg.to));
                leg.sent + run.saturating_sub(t.margin / 2)
            }
            None => Instant::now() + self.core.policy().inhibit_lead + t.margin,
        }
    }

    /// Waits for the controller's next `At` until `until`; `None` if it
    /// does not come (or the link goes down).
    async fn wait_at(
        &mut self,
        tuner: &mut mpsc::Receiver<TunerEvent>,
        until: Instant,
    ) -> Option<i64> {
        loop {
            match tokio::time::timeout_at(until, tuner.recv()).await {
                Ok(Some(TunerEvent::At { steps })) => return Some(steps),
                Ok(Some(TunerEvent::LinkDown { reason })) => {
                    tracing::warn!(%reason, "controller link down during shutdown");
                    return None;
                }
                Ok(Some(TunerEvent::Error { text })) => {
                    tracing::warn!(%text, "controller link");
                    return None;
                }
                Ok(Some(_)) => {}
                Ok(None) | Err(_) => return None,
            }
        }
    }

    /// `relax_on_exit`: after a move that ended with its final approach,
    /// back off half the backlash toward the approach side (within the
    /// limits), under the inhibit and through the journal like any move.
    async fn relax(&mut self, tuner: &mut mpsc::Receiver<TunerEvent>) {
        let policy = self.core.policy();
        let half = policy.backlash_steps / 2;
        let Some(p) = self.core.position() else {
            tracing::info!("relax on exit: skipped, position unknown");
            return;
        };
        if !self.tensioned || half == 0 {
            tracing::info!(
                tensioned = self.tensioned,
                backlash = policy.backlash_steps,
                "relax on exit: nothing to relax"
            );
            return;
        }
        if self.core.transmitting() {
            tracing::info!("relax on exit: skipped, the rig is transmitting");
            return;
        }
        let to = policy.clamp(match policy.approach {
            Approach::Up => p - half,
            Approach::Down => p + half,
        });
        let lead = policy.inhibit_lead;
        if to == p {
            return;
        }
        if !self.inhibit_on {
            if let Err(e) = self.inhibit.set(true) {
                tracing::error!(error = %e, "relax on exit: skipped, the transmit inhibit failed");
                return;
            }
            self.inhibit_on = true;
            tracing::info!(on = true, "transmit inhibit");
            tokio::time::sleep(lead).await;
        }
        if let Some(j) = &self.journal {
            if let Err(e) = j.record_intent(p, to) {
                tracing::error!(error = %e, "relax on exit: skipped, could not record the intent");
                return;
            }
        }
        self.recorded = Some(Recorded::Unknown { from: p, to });
        tracing::info!(from = p, to, "relax on exit: backing off half the backlash");
        self.tensioned = false;
        self.send(TunerCommand::Goto(to)).await;
        let until = Instant::now() + self.timing.travel(p.abs_diff(to));
        let mut at = self.wait_at(tuner, until).await;
        if at.is_none() {
            tracing::warn!("relax on exit: no arrival in time; stopping the motor");
            self.send(TunerCommand::Stop).await;
            at = self.wait_at(tuner, Instant::now() + STOP_WAIT).await;
        }
        match at {
            Some(steps) => {
                let now = self.now();
                self.core.handle_arrived(now, steps);
                self.record_position(steps);
            }
            None => tracing::error!(
                "relax on exit: the controller did not say where the motor is; the journal keeps the unfinished move"
            ),
        }
    }

    /// Releases the inhibit at the very end (the motor is at rest or the
    /// service cannot move it any more).
    fn release_inhibit(&mut self) {
        if self.inhibit_on || self.core.inhibit() {
            match self.inhibit.set(false) {
                Ok(()) => {
                    self.inhibit_on = false;
                    tracing::info!(on = false, "transmit inhibit");
                }
                Err(e) => {
                    tracing::error!(error = %e, "could not release the transmit inhibit at shutdown")
                }
            }
        }
    }

    /// The rig's port is down: the core holds (`rig-silent`), and the
    /// controller link refuses and stops moves as if the rig transmitted.
    fn rig_deaf(&mut self, now: Duration) {
        self.transmit.send_replace(true);
        self.core.handle_rig_link(now, false);
    }

    fn set_transmit(&mut self, now: Duration, on: bool) {
        self.transmit.send_replace(on);
        self.core.handle_transmit(now, on);
    }

    fn rig_event(&mut self, ev: LinkEvent) {
        match ev {
            LinkEvent::Bytes { dir, bytes, at } => {
                let now = self.arrival_time(at);
                let mut out = std::mem::take(&mut self.events);
                out.clear();
                self.decoder.feed(dir, &bytes, &mut out);
                for ev in &out {
                    match *ev {
                        // Shutting down: no new targets (transmit still counts).
                        RigEvent::Frequency { .. } if self.stopping => {}
                        RigEvent::Frequency { hz } => self.core.handle_frequency(now, hz),
                        RigEvent::Transmit { on } => self.set_transmit(now, on),
                        RigEvent::Reject { reason, bytes } => {
                            tracing::debug!(%reason, bytes, "rig bytes rejected")
                        }
                    }
                }
                self.events = out;
            }
            LinkEvent::Down { .. } => {
                let now = self.now();
                self.rig_deaf(now)
            }
            LinkEvent::Up { .. } => {
                let now = self.now();
                // Bytes the decoder still holds belong to the connection
                // that ended: `finish` turns them into rejects, so that a
                // frame torn by the drop is never joined to the new
                // connection's bytes. Rejects decide nothing; they are
                // logged as on any read.
                let mut out = Vec::new();
                self.decoder.finish(&mut out);
                for ev in &out {
                    if let RigEvent::Reject { reason, bytes } = *ev {
                        tracing::debug!(%reason, bytes, "rig bytes rejected (held across a port drop)")
                    }
                }
                // A transmission that ended while the port was down went
                // unheard: the rig is taken to be receiving until it says
                // otherwise.
                self.set_transmit(now, false);
                self.core.handle_rig_link(now, true);
            }
        }
    }

    async fn tuner_event(&mut self, ev: TunerEvent) {
        let now = self.now();
        match ev {
            TunerEvent::LinkUp => {
                self.resync = Resync::AwaitWhere {
                    after_link_up: true,
                }
            }
            TunerEvent::LinkDown { reason } => {
                tracing::warn!(%reason, "controller link down: position not trusted until it is back");
                self.fault(now, false);
            }
            TunerEvent::Accepted { target } => tracing::debug!(target, "controller accepted"),
            TunerEvent::InterlockStop => {
                tracing::warn!(
                    "rig transmitted during a move; the controller link stopped the motor"
                )
            }
            TunerEvent::Error { text } => {
                tracing::warn!(%text, "controller link");
                if self.core.is_moving() {
                    // A refused or failed leg: the core would wait for an
                    // arrival that will not come.
                    self.fault(now, true);
                }
            }
            TunerEvent::At { steps } => match self.resync {
                Resync::AwaitWhere {
                    after_link_up: true,
                } => self.resync_where(now, steps).await,
                Resync::AwaitWhere {
                    after_link_up: false,
                } => {
                    self.resync = Resync::Idle;
                    self.accept(now, steps);
                }
                Resync::AwaitZero(p) => {
                    self.resync = Resync::Idle;
                    if steps == p {
                        self.accept(now, steps);
                    } else {
                        tracing::error!(
                            wanted = p,
                            got = steps,
                            "controller did not take the journal's position; asking again"
                        );
                        // Check against the journal again (and re-send ZERO).
                        self.resync = Resync::AwaitWhere {
                            after_link_up: true,
                        };
                        self.fault(now, true);
                    }
                }
                Resync::Blocked => {
                    tracing::debug!(steps, "position reported while untrusted; ignored")
                }
                Resync::Idle => {
                    self.core.handle_arrived(now, steps);
                    if !self.core.is_moving() {
                        self.tensioned = self.final_to == Some(steps);
                        self.leg = None;
                        self.final_to = None;
                        self.record_position(steps);
                    }
                }
            },
        }
    }

    async fn resync_where(&mut self, now: Duration, steps: i64) {
        self.resync = Resync::Idle;
        match self.recorded {
            Some(Recorded::Known(p)) if p != steps => {
                tracing::warn!(
                    journal = p,
                    controller = steps,
                    "controller's count differs from the journal (restarted?): setting it to the journal's"
                );
                self.resync = Resync::AwaitZero(p);
                self.send(TunerCommand::Zero(p)).await;
            }
            Some(Recorded::Unknown { from, to }) if steps != to => {
                self.resync = Resync::Blocked;
                if !self.unknown_reported {
                    self.unknown_reported = true;
                    tracing::error!(
                        from,
                        to,
                        controller = steps,
                        "position unknown: a move did not finish; nothing will move. Check the antenna, run `tuneward set-position STEPS`, then restart"
                    );
                }
            }
            _ => self.accept(now, steps),
        }
    }

    /// The position is trusted again.
    fn accept(&mut self, now: Duration, steps: i64) {
        self.block_gotos = false;
        self.core.handle_arrived(now, steps);
        if !self.core.is_moving() {
            self.record_position(steps);
        }
    }

    fn record_position(&mut self, steps: i64) {
        if self.recorded == Some(Recorded::Known(steps)) {
            return;
        }
        if let Some(j) = &self.journal {
            if let Err(e) = j.record_position(steps) {
                tracing::error!(error = %e, "could not record the position");
                // What is on disk is unchanged (atomic rename): still the
                // intent, which is the cautious reading.
                return;
            }
        }
        self.recorded = Some(Recorded::Known(steps));
    }

    /// Something failed: the core stops trusting the position; with
    /// `ask_again` the driver asks `WHERE` after a pause.
    fn fault(&mut self, now: Duration, ask_again: bool) {
        self.outcome.faults += 1;
        self.leg = None;
        self.final_to = None;
        self.tensioned = false;
        self.core.handle_fault(now);
        if ask_again {
            // Keep a stricter check already pending.
            if matches!(self.resync, Resync::Idle) {
                self.resync = Resync::AwaitWhere {
                    after_link_up: false,
                };
            }
            self.retry_where = Some(Instant::now() + RETRY_AFTER);
        }
    }

    async fn send(&mut self, cmd: TunerCommand) {
        if self.commands.send(cmd).await.is_err() {
            tracing::error!(?cmd, "controller link task gone");
        }
    }

    async fn apply_actions(&mut self) {
        while let Some(action) = self.core.poll_action() {
            let now = self.now();
            match action {
                Action::Inhibit { on } => match self.inhibit.set(on) {
                    Ok(()) => {
                        self.inhibit_on = on;
                        tracing::info!(on, "transmit inhibit");
                    }
                    Err(e) => {
                        self.inhibit_on = false;
                        tracing::error!(on, error = %e, "transmit inhibit output failed");
                        if on {
                            self.block_gotos = true;
                            self.fault(now, true);
                        }
                    }
                },
                Action::Settled { hz } => tracing::info!(hz, "settled"),
                Action::Hold { hz, reason } => tracing::info!(hz, %reason, "hold"),
                Action::Move {
                    from,
                    to,
                    hz,
                    tune_hz,
                } => {
                    tracing::info!(from, to, hz, tune_hz, "move");
                    self.final_to = Some(to);
                    self.tensioned = false;
                    let written = match &self.journal {
                        Some(j) => j.record_intent(from, to).map_err(|e| e.to_string()),
                        None => Ok(()),
                    };
                    match written {
                        Ok(()) if self.inhibit_on => {
                            self.recorded = Some(Recorded::Unknown { from, to });
                            self.block_gotos = false;
                        }
                        Ok(()) => {
                            self.recorded = Some(Recorded::Unknown { from, to });
                            tracing::error!(
                                "move without a confirmed transmit inhibit; not moving"
                            );
                            self.block_gotos = true;
                            self.fault(now, true);
                        }
                        Err(e) => {
                            tracing::error!(error = %e, "could not record the move's intent; not moving");
                            self.block_gotos = true;
                            self.fault(now, true);
                        }
                    }
                }
                Action::Goto { steps } => {
                    if self.block_gotos {
                        tracing::warn!(steps, "GOTO not sent (move refused above)");
                    } else if !self.inhibit_on {
                        tracing::error!(
                            steps,
                            "GOTO without a confirmed transmit inhibit; not sent"
                        );
                        self.block_gotos = true;
                        self.fault(now, true);
                    } else {
                        self.leg = Some(Leg {
                            from: self.core.position().unwrap_or(steps),
                            to: steps,
                            sent: Instant::now(),
                        });
                        self.send(TunerCommand::Goto(steps)).await;
                    }
                }
                Action::Stop => {
                    self.tensioned = false;
                    self.leg = None;
                    self.send(TunerCommand::Stop).await
                }
                Action::Candidate { hz, steps, profile } => {
                    tracing::info!(
                        hz,
                        steps,
                        profile = profile.as_deref().unwrap_or("-"),
                        "calibration point candidate"
                    );
                    if let Some(path) = &self.candidates {
                        let point =
                            Point::new(hz as f64, steps as f64).with_profile(profile.as_deref());
                        match append_candidate(path, &point) {
                            Ok(()) => tracing::info!(
                                file = %path.display(),
                                "candidate stored; review it with `tuneward fit`"
                            ),
                            Err(e) => tracing::error!(error = %e, "could not store the candidate"),
                        }
                    }
                }
            }
        }
    }
}
