//! The live driver: IO and timers for the sans-IO [`Session`], wired to
//! the rig's port, the controller link, the inhibit output and the
//! position journal.
//!
//! Each resource is owned by one task (the rig link or proxy, the controller
//! link); this driver holds the inhibit line and the journal, joins them
//! with channels, feeds every event into the session stamped with the time
//! since its start, carries out the session's outputs in order (the
//! journal's fsync and the inhibit write synchronously, their results
//! reported straight back) and sleeps until the session's next deadline.
//! Every decision (journal first, inhibit confirmed, the resync with the
//! controller, deaf means no moves, relax-on-exit, the shutdown sequence)
//! is the session's: see `follow::session`. The shutdown request (a [`Shutdown`], set by
//! SIGINT/SIGTERM in `tuneward run`) is handed to the session; the link
//! tasks are told to stop only once the
//! session has finished (a [`Shutdown`] of their own), so that a
//! transmission is still heard and the controller still answers until the
//! end.

use std::path::PathBuf;
use std::time::Duration;

use tokio::sync::{mpsc, watch};
use tokio::task::JoinHandle;
use tokio::time::Instant;

use crate::calibrate::{append_candidate, Point};
use crate::control::protocol::{Ask, StateView};
use crate::control::OperatorPort;
use crate::error::{IoFailure, Located};
pub use crate::follow::session::RunSummary;
use crate::follow::session::{Level, Note, Output, Session, SessionSettings};
use crate::follow::Follower;
use crate::follow::{Calibrations, Command};
use crate::inhibit::InhibitLine;
use crate::journal::{Journal, JournalError, Recorded};
use crate::port::link::{LinkConfig, LinkEvent};
use crate::port::proxy::{Boundary, ProxyConfig};
use crate::port::{link, proxy};
use crate::rig::Decode;
use crate::sense::{SenseChange, SenseInput, SenseWatch};
use crate::shutdown::{self, Shutdown};
use crate::signals;
use crate::timing::sleep_until_precise;
use crate::tuner::client::{self, ClientConfig, TunerCommand};

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

impl RigSource {
    /// Starts the task that watches the rig's port (none for
    /// [`RigSource::Events`]) and returns it with the receiver of what it
    /// hears. Errs when the proxy's symlink cannot be placed.
    pub fn spawn(
        self,
        shutdown: Shutdown,
    ) -> Result<(Option<JoinHandle<()>>, mpsc::Receiver<LinkEvent>), Located> {
        let (tx, rx) = mpsc::channel(256);
        let task = match self {
            RigSource::Link(cfg) => link::spawn(cfg, tx, shutdown),
            RigSource::Proxy { config, boundary } => proxy::spawn(config, boundary, tx, shutdown)?,
            RigSource::Events(rx) => return Ok((None, rx)),
        };
        Ok((Some(task), rx))
    }
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
    /// The hardware transmit-sense input, when one is wired: read every
    /// [`crate::sense::POLL_EVERY`], each change handed to the session.
    pub sense: Option<Box<dyn SenseInput>>,
    /// `None`: no journal (the position is never trusted across restarts
    /// beyond what the controller says). Meant for tests and demos.
    pub journal: Option<Journal>,
    /// `tuner.relax_on_exit`: at a clean shutdown after a completed
    /// approach, back off half the backlash toward the approach side.
    pub relax_on_exit: bool,
    /// `tuner.home`: the station's home switch, if it has one.
    pub home: Option<crate::follow::session::HomeSettings>,
    /// Where touch-up candidates go (beside `[calibration] file`); `None`
    /// with inline points: candidates are only logged.
    pub candidates: Option<PathBuf>,
    /// `[swr_watch]`: the SWR meter read during transmissions.
    pub swr_watch: Option<SwrWatchParts>,
    /// The signal-meter read, for the noise-peak search: where the rig is
    /// polled and its dialect has one.
    pub signal_meter: Option<MeterReadParts>,
    /// How to set the rig's frequency (a calibration sweep, with the
    /// operator's consent): where the rig is polled and its dialect has a
    /// frequency set. The set goes ahead of the next poll.
    pub frequency_set: Option<crate::follow::session::FrequencySet>,
}

/// A meter the rig's poll can carry: the dialect's read and scale.
#[derive(Debug, Clone)]
pub struct MeterReadParts {
    pub scale: crate::rig::meter::MeterScale,
    pub read: Vec<u8>,
}

/// What the SWR watch needs: its settings and the dialect's SWR-meter
/// read and scale, which the rig's poll carries while the session says so.
#[derive(Debug, Clone)]
pub struct SwrWatchParts {
    pub settings: crate::follow::swr_watch::SwrWatchSettings,
    pub meter: MeterReadParts,
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

/// The exit status of `tuneward run` when it stopped without the
/// controller confirming where the motor is: the journal keeps the
/// unfinished move (and the inhibit stays asserted).
pub const EXIT_UNCONFIRMED: u8 = 3;

/// Where the operator's front ends listen, and how `reload` reads the
/// calibration again (the station layer builds it: `station::control_setup`).
pub struct ControlSetup {
    /// The Unix control socket (created 0600, removed at the end).
    pub socket: PathBuf,
    /// Also TCP here (loopback only).
    pub listen: Option<std::net::SocketAddr>,
    /// The live web page (`[web]`), if configured.
    pub web: Option<crate::control::web::WebSetup>,
    pub reload: Option<Reloader>,
    /// The MQTT front end (`[mqtt]`), if configured.
    pub mqtt: Option<crate::control::mqtt::MqttSettings>,
    /// Told the page's address once it listens (`demo --live` prints it).
    pub on_web_ready: Option<Box<dyn FnOnce(std::net::SocketAddr) + Send>>,
}

/// Runs the live service from its parts (the station layer assembles them:
/// `ServiceParts::from_station`) until interrupted (Ctrl-C, SIGTERM or
/// SIGHUP), on a runtime of its own; with `control`, the control socket
/// (and loopback TCP) take the operator's commands.
pub fn run_until_signal(
    service: ServiceParts,
    control: Option<ControlSetup>,
) -> Result<RunSummary, ServiceError> {
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Located::named("the service", "a tokio runtime that starts", e.to_string()))?;
    rt.block_on(async move {
        let Some(control) = control else {
            return run(service, signals::stop_flag()).await;
        };
        let (link, port) = crate::control::operator_channel();
        let (fronts_stop, fronts) = shutdown::channel();
        let socket = control.socket;
        let unix =
            crate::control::socket::serve_unix(socket.clone(), link.clone(), fronts.clone())?;
        tracing::info!(socket = %socket.display(), "control socket ready (`tuneward ctl`)");
        let tcp = match control.listen {
            Some(addr) => {
                let (bound, task) =
                    crate::control::socket::serve_tcp(addr, link.clone(), fronts.clone()).await?;
                tracing::info!(address = %bound, "control on TCP (loopback)");
                Some(task)
            }
            None => None,
        };
        let mqtt = control.mqtt.map(|settings| {
            tracing::info!(
                broker = %format!("{}:{}", settings.host, settings.port),
                prefix = %settings.prefix,
                commands = settings.commands,
                "mqtt: front end started"
            );
            crate::control::mqtt::spawn(settings, link.clone(), fronts.clone())
        });
        let web = match control.web {
            Some(setup) => {
                let (bound, task) = crate::control::web::serve(setup, link.clone(), fronts.clone())
                    .await
                    .map_err(|e| {
                        Located::named("the web page", "an address to listen on", e.to_string())
                    })?;
                tracing::info!(url = %format!("http://{bound}/"), "web page ready");
                if let Some(tell) = control.on_web_ready {
                    tell(bound);
                }
                Some(task)
            }
            None => None,
        };
        drop(link);
        let operator = Operator {
            port,
            reload: control.reload,
        };
        let result = run_with_operator(service, Some(operator), signals::stop_flag()).await;
        fronts_stop.trigger();
        let _ = tokio::time::timeout(TASK_END_WAIT, unix).await;
        for t in [tcp, web].into_iter().flatten() {
            let _ = tokio::time::timeout(TASK_END_WAIT, t).await;
        }
        if let Some(t) = mqtt {
            let _ = tokio::time::timeout(TASK_END_WAIT, t).await;
        }
        result
    })
}

/// Runs the service until `shutdown` becomes true. Errors only for what
/// stops it from starting (a proxy symlink that cannot be placed, a journal
/// that cannot be read); everything after start-up is retried and logged.
///
/// Every decision is the [`Session`]'s; this loop only feeds it the
/// events, carries out its outputs and sleeps until its next deadline.
pub async fn run(
    service: ServiceParts,
    shutdown: impl Into<Shutdown>,
) -> Result<RunSummary, ServiceError> {
    run_with_operator(service, None, shutdown).await
}

/// What stops the live service from starting.
#[derive(Debug, thiserror::Error)]
pub enum ServiceError {
    /// A part that could not be started, opened or bound (the runtime, the
    /// control socket, the proxy's symlink): where, expected, found.
    #[error(transparent)]
    Invalid(#[from] Located),
    /// The position journal could not be read.
    #[error(transparent)]
    Journal(#[from] JournalError),
}

/// Reads the calibration again (for `reload`): IO the driver does before
/// the core decides on what it read.
pub type Reloader = Box<dyn Fn() -> Result<Calibrations, IoFailure> + Send>;

/// The operator's front ends, joined to the driver.
pub struct Operator {
    pub port: OperatorPort,
    /// `None`: `reload` is answered with a refusal saying there is nothing
    /// to read again.
    pub reload: Option<Reloader>,
}

/// [`run`], with the operator's commands taken from `operator`: each is
/// handed to the session as a core event and its reply sent back; the
/// state is published after every event.
pub async fn run_with_operator(
    service: ServiceParts,
    operator: Option<Operator>,
    shutdown: impl Into<Shutdown>,
) -> Result<RunSummary, ServiceError> {
    let mut shutdown = shutdown.into();
    let (mut asks, state, reload) = match operator {
        Some(op) => (Some(op.port.asks), Some(op.port.state), op.reload),
        None => (None, None, None),
    };
    let (recorded, journal_boot) = match &service.journal {
        Some(j) => match j.load_entry()? {
            Some((r, boot)) => (Some(r), boot),
            None => (None, None),
        },
        None => (None, None),
    };
    // The link tasks outlive the shutdown request: the move under way must
    // finish (or be stopped) over the controller link, and the rig must
    // still be heard (a transmission stops the motor; a proxied program
    // keeps its port) until the session has persisted and released.
    let (tasks_stop, tasks_shutdown) = shutdown::channel();
    // The poll reads the other VFO while the session knows the rig works
    // split; the link task is kept told.
    let (split_tx, split_rx) = watch::channel(false);
    // The poll carries the SWR-meter read while the session asks for it.
    let (meters_tx, meters_rx) = watch::channel(Vec::new());
    // A sweep's frequency sets go to the rig with the next poll.
    let (writes_tx, writes_rx) = watch::channel(Vec::new());
    let meters =
        (service.swr_watch.is_some() || service.signal_meter.is_some()).then_some(meters_rx);
    let writes = service.frequency_set.is_some().then_some(writes_rx);
    let mut rig = service.rig;
    match &mut rig {
        RigSource::Link(cfg) => {
            cfg.split = Some(split_rx);
            cfg.meters = meters;
            cfg.writes = writes;
        }
        RigSource::Proxy { config, .. } => {
            config.meters = meters;
            config.writes = writes;
        }
        _ => {}
    }
    let (rig_task, mut rig_rx) = rig.spawn(tasks_shutdown.clone())?;
    let (transmit_tx, transmit_rx) = watch::channel(false);
    let settings = SessionSettings {
        steps_per_second: service.controller.steps_per_second,
        settle: service.controller.settle,
        reply_margin: service.controller.reply_margin,
        relax_on_exit: service.relax_on_exit,
        restart_counts: restart_counts(&service.controller),
        home: service.home,
    };
    let client = client::spawn(
        service.controller,
        Some(transmit_rx),
        tasks_shutdown.clone(),
    );
    let mut follower = service.follower;
    let (sense_tx, mut sense_rx) = mpsc::channel(16);
    let sense_task = service.sense.map(|input| {
        follower.expect_sense_line();
        tracing::info!(input = %input.describe(), "transmit sense line read");
        tokio::spawn(watch_sense(input, sense_tx, tasks_shutdown.clone()))
    });
    let mut sense_open = sense_task.is_some();
    let mut session =
        Session::new(follower, service.decoder, recorded, settings).with_journal_boot(journal_boot);
    let swr_read = match service.swr_watch {
        Some(w) => {
            tracing::info!(
                alarm = w.settings.alarm,
                hold_ms = w.settings.hold.as_millis() as u64,
                action = ?w.settings.action,
                inhibit_wired = w.settings.inhibit_wired,
                "SWR watch: the SWR meter is read with every poll while the rig transmits"
            );
            session = session.with_swr_watch(w.settings, w.meter.scale);
            w.meter.read
        }
        None => Vec::new(),
    };
    if let Some(set) = service.frequency_set {
        session = session.with_frequency_set(set);
    }
    let signal_read = match service.signal_meter {
        Some(m) => {
            session = session.with_signal_meter(m.scale);
            m.read
        }
        None => Vec::new(),
    };
    let mut io = Io {
        // Lines are opened asserted (fail-safe); the session syncs them.
        inhibit: service.inhibit,
        journal: service.journal,
        candidates: service.candidates,
        commands: client.commands,
        transmit: transmit_tx,
        rig_writes: writes_tx,
        origin: Instant::now(),
        recent: std::collections::VecDeque::new(),
    };
    let mut tuner = client.events;
    io.carry_out(&mut session).await;
    publish(&state, &session, &io.recent);
    let (mut rig_open, mut tuner_open, mut asked) = (true, true, false);
    while !session.is_finished() {
        let origin = io.origin;
        let wake = session.poll_timeout().and_then(|d| origin.checked_add(d));
        tokio::select! {
            _ = shutdown.wait(), if !asked => {
                asked = true;
                session.handle_shutdown(io.now());
            }
            ev = rig_rx.recv(), if rig_open => match ev {
                Some(LinkEvent::Bytes { dir, bytes, at }) => {
                    // Counted from when the link read them (see DEVELOPERS.md).
                    session.handle_rig_bytes(at.saturating_duration_since(origin), dir, &bytes)
                }
                Some(LinkEvent::Down { .. }) => session.handle_rig_down(io.now()),
                Some(LinkEvent::Up { .. }) => session.handle_rig_up(io.now()),
                None => {
                    rig_open = false;
                    session.handle_rig_ended(io.now());
                }
            },
            ev = sense_rx.recv(), if sense_open => match ev {
                Some((at, change)) => {
                    let at = at.saturating_duration_since(origin);
                    session.handle_sense(at, match change {
                        SenseChange::Level(on) => Ok(on),
                        SenseChange::Failed(e) => Err(IoFailure::new("transmit-sense line", e)),
                    });
                }
                None => {
                    // The reader ended (only at shutdown): nothing reads
                    // the line any more, so the rig may transmit.
                    sense_open = false;
                    session.handle_sense(io.now(), Err(IoFailure::new("transmit-sense line", "its reader ended")));
                }
            },
            ev = tuner.recv(), if tuner_open => match ev {
                Some(ev) => session.handle_tuner(io.now(), ev),
                None => {
                    tuner_open = false;
                    session.handle_tuner_gone(io.now());
                }
            },
            ask = next_ask(&mut asks) => match ask {
                Some((ask, answer)) => {
                    let cmd = match ask {
                        Ask::Command(c) => c.into_command(),
                        Ask::Reload => Command::Reload {
                            calibrations: match &reload {
                                Some(read) => read(),
                                None => Err(IoFailure::new(
                                    "reload",
                                    "this service was started without a calibration to read again",
                                )),
                            },
                        },
                    };
                    let reply = session.handle_command(io.now(), cmd);
                    // The asker may have gone; the command stands.
                    let _ = answer.send(reply);
                }
                None => asks = None,
            },
            _ = sleep_until_precise(wake) => session.handle_timeout(io.now()),
        }
        io.carry_out(&mut session).await;
        publish(&state, &session, &io.recent);
        let split = session.poll_other_vfo();
        split_tx.send_if_modified(|s| std::mem::replace(s, split) != split);
        // Told only on a change (this runs after every event): no copy of
        // a read unless the poll is to start carrying it. The SWR read
        // while transmitting, the signal read while a search waits for
        // one (never both: a search needs the rig receiving).
        let read: &[u8] = if session.poll_swr_meter() {
            &swr_read
        } else if session.poll_signal_meter() {
            &signal_read
        } else {
            &[]
        };
        meters_tx.send_if_modified(|m| {
            if m.as_slice() == read {
                return false;
            }
            *m = read.to_vec();
            true
        });
    }
    let result = session.outcome();
    tasks_stop.trigger();
    // Let the tasks close their ports (and the proxy its symlink).
    let _ = tokio::time::timeout(TASK_END_WAIT, client.task).await;
    if let Some(t) = rig_task {
        let _ = tokio::time::timeout(TASK_END_WAIT, t).await;
    }
    if let Some(t) = sense_task {
        let _ = tokio::time::timeout(TASK_END_WAIT, t).await;
    }
    tracing::info!(
        position = result.position,
        moves = result.moves,
        faults = result.faults,
        unconfirmed = result.unconfirmed,
        "stopped"
    );
    Ok(result)
}

/// Reads the sense input every [`crate::sense::POLL_EVERY`] until
/// `shutdown`, sending the first reading and every change (a failed read
/// as [`SenseChange::Failed`]) with the time it was read.
async fn watch_sense(
    mut input: Box<dyn SenseInput>,
    tx: mpsc::Sender<(Instant, SenseChange)>,
    mut shutdown: Shutdown,
) {
    let mut watch = SenseWatch::new();
    let mut tick = tokio::time::interval(crate::sense::POLL_EVERY);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    loop {
        tokio::select! {
            _ = shutdown.wait() => return,
            _ = tick.tick() => {
                let at = Instant::now();
                if let Some(change) = watch.reading(input.transmitting()) {
                    if tx.send((at, change)).await.is_err() {
                        return;
                    }
                }
            }
        }
    }
}

/// The counts the controller can have after a restart: a board counts from
/// 0 (`protocols/tuner-line.md`), the direct drive from the lower limit,
/// the in-process simulator from its start.
fn restart_counts(c: &ClientConfig) -> [i64; 3] {
    let sim = match c.url {
        client::ControllerUrl::Sim => c.sim_start,
        _ => 0,
    };
    [0, c.min_steps, sim]
}

/// The next operator ask, or never without front ends.
async fn next_ask(
    asks: &mut Option<tokio::sync::mpsc::Receiver<crate::control::AskWithReply>>,
) -> Option<crate::control::AskWithReply> {
    match asks {
        Some(rx) => rx.recv().await,
        None => std::future::pending().await,
    }
}

/// Publishes the session's state to the front ends when it changed.
fn publish(
    state: &Option<watch::Sender<Option<StateView>>>,
    session: &Session,
    recent: &std::collections::VecDeque<String>,
) {
    if let Some(tx) = state {
        let mut view = StateView::from_status(&session.status());
        view.recent = recent.iter().cloned().collect();
        let view = Some(view);
        tx.send_if_modified(|s| {
            let changed = *s != view;
            if changed {
                *s = view;
            }
            changed
        });
    }
}

/// How long the driver waits for a link task to close its port at the end.
const TASK_END_WAIT: Duration = Duration::from_secs(3);

/// The driver's handles: what the session's outputs are carried out on.
struct Io {
    inhibit: Box<dyn InhibitLine>,
    journal: Option<Journal>,
    candidates: Option<PathBuf>,
    commands: mpsc::Sender<TunerCommand>,
    transmit: watch::Sender<bool>,
    /// Writes for the rig's port task (see `LinkConfig::writes`).
    rig_writes: watch::Sender<Vec<u8>>,
    origin: Instant,
    /// The last few decisions in words, for the front ends.
    recent: std::collections::VecDeque<String>,
}

/// How many decisions the front ends are shown.
const RECENT_DECISIONS: usize = 8;

impl Io {
    fn now(&self) -> Duration {
        self.origin.elapsed()
    }

    /// Carries out every output the session has, in order, answering its
    /// writes as they are done.
    async fn carry_out(&mut self, session: &mut Session) {
        while let Some(out) = session.poll_output() {
            match out {
                Output::Command(cmd) => {
                    if self.commands.send(cmd).await.is_err() {
                        tracing::error!("controller link task gone; a command was not sent");
                    }
                }
                Output::Inhibit { on } => {
                    let r = self
                        .inhibit
                        .set(on)
                        .map_err(|e| IoFailure::new("transmit-inhibit line", e));
                    session.handle_inhibit_result(self.now(), r);
                }
                Output::JournalIntent(intent) => {
                    let r = match &self.journal {
                        Some(j) => j.record(&intent).map_err(|e| journal_failure(j, e)),
                        None => Ok(()),
                    };
                    session.handle_journal_result(self.now(), r);
                }
                Output::JournalPosition { steps } => {
                    let r = match &self.journal {
                        Some(j) => j.record_position(steps).map_err(|e| journal_failure(j, e)),
                        None => Ok(()),
                    };
                    session.handle_journal_result(self.now(), r);
                }
                Output::Transmit { on } => {
                    self.transmit.send_replace(on);
                }
                Output::ControllerBoot { id } => {
                    if let Some(j) = &mut self.journal {
                        j.set_boot(id);
                    }
                }
                Output::RigWrite { bytes, vfo, hz } => {
                    tracing::debug!(
                        ?vfo,
                        hz,
                        bytes = bytes.len(),
                        "frequency set queued for the rig's port"
                    );
                    self.rig_writes.send_replace(bytes);
                }
                Output::Candidate {
                    hz,
                    steps,
                    profile,
                    fit,
                } => {
                    if let Some(path) = &self.candidates {
                        let point =
                            Point::new(hz as f64, steps as f64).with_profile(profile.as_deref());
                        let note = fit.map(|f| {
                            format!(
                                "noise peak: half-width {:.1} steps, {:.1} dB over the floor, fit residual {:.2} dB over {} points",
                                f.half_width_steps, f.rise_db, f.rms_residual_db, f.points
                            )
                        });
                        match append_candidate(path, &point, note.as_deref()) {
                            Ok(()) => tracing::info!(
                                file = %path.display(),
                                "candidate stored; review it with `tuneward fit`"
                            ),
                            Err(e) => tracing::error!(error = %e, "could not store the candidate"),
                        }
                    }
                }
                Output::Log(note) => {
                    let status = session.status();
                    let at = Where::of(&status);
                    if let Some(words) = decision_words(&note, &at) {
                        if self.recent.len() == RECENT_DECISIONS {
                            self.recent.pop_front();
                        }
                        let secs = self.now().as_secs();
                        self.recent.push_back(format!(
                            "+{:02}:{:02}:{:02} {words}",
                            secs / 3600,
                            secs / 60 % 60,
                            secs % 60
                        ));
                    }
                    log(note, &at)
                }
            }
        }
    }
}

/// An unfinished move's start, final target, overshoot and leg, for the log.
fn unfinished_parts(r: Recorded) -> (i64, i64, Option<i64>, &'static str) {
    match r {
        Recorded::Known(p) => (p, p, None, "none"),
        Recorded::Lost => (0, 0, None, "lost"),
        Recorded::Unknown { from, to } => (from, to, None, "only"),
        Recorded::Approach {
            from,
            via,
            to,
            final_leg,
        } => (
            from,
            to,
            Some(via),
            if final_leg { "final" } else { "first" },
        ),
    }
}

/// Where the rig is when a note is written: its receive and transmit
/// frequencies and the band, for the decision's words and log fields.
struct Where {
    rx_hz: Option<u64>,
    tx_hz: Option<u64>,
    band: Option<String>,
}

impl Where {
    fn of(s: &crate::follow::Status) -> Where {
        Where {
            rx_hz: s.rx_hz.or(s.rig_hz),
            tx_hz: s.tx_hz.or(s.rig_hz),
            band: s.band.clone(),
        }
    }

    /// "7.150000 MHz (40m)", the transmit frequency named too when it
    /// differs (split).
    fn words(&self, hz: u64) -> String {
        let band = match &self.band {
            Some(b) => format!(" ({b})"),
            None => " (outside the bands)".to_string(),
        };
        let split = match (self.rx_hz, self.tx_hz) {
            (Some(rx), Some(tx)) if rx != tx => {
                format!(", receive {} / transmit {}", mhz(rx), mhz(tx))
            }
            _ => String::new(),
        };
        format!("{}{band}{split}", mhz(hz))
    }
}

/// `7.150000 MHz`.
fn mhz(hz: u64) -> String {
    format!("{}.{:06} MHz", hz / 1_000_000, hz % 1_000_000)
}

/// A decision in words for the front ends' "last decisions" (`None` for
/// the notes that are not decisions the operator follows).
fn decision_words(note: &Note, at: &Where) -> Option<String> {
    Some(match note {
        Note::Settled { hz } => format!("settled on {}", at.words(*hz)),
        Note::Hold { hz, reason } => format!("holding for {}: {}", at.words(*hz), reason.words()),
        Note::Move {
            from, to, tune_hz, ..
        } => {
            format!("moving from step {from} to {to} for {}", at.words(*tune_hz))
        }
        Note::Arrived { steps } => format!("arrived at step {steps}"),
        Note::Transmit { on: true } => match at.tx_hz {
            Some(hz) => format!("rig transmitting on {}", at.words(hz)),
            None => "rig transmitting".to_string(),
        },
        Note::Transmit { on: false } => "rig back on receive".to_string(),
        Note::Command { name, reply } => {
            let a = crate::control::Answer::from_reply(reply);
            match a.reason {
                Some(r) => format!("operator {name}: {} ({r})", a.outcome),
                None => format!("operator {name}: {}", a.outcome),
            }
        }
        Note::PositionUnknown { .. } | Note::CountNoRestart { .. } => {
            "position unknown: nothing moves until it is set".to_string()
        }
        Note::LinkDown { reason } => format!("controller link down ({reason})"),
        Note::SwrAlarm { swr, inhibit } => match inhibit {
            true => format!("SWR alarm at {swr:.2}: transmit inhibit asserted"),
            false => format!("SWR alarm at {swr:.2}"),
        },
        Note::SwrDrift {
            seen, predicted, ..
        } => format!("the loop reads SWR {seen:.2} where it should read {predicted:.2}: re-peak?"),
        Note::PeakStarted { hz, .. } => format!("noise-peak search at {}", at.words(*hz)),
        Note::PeakEnded { words, .. } => words.clone(),
        Note::RigSet { vfo, hz } => format!("setting the rig's VFO {vfo:?} to {}", mhz(*hz)),
        Note::SweepStarted { band, points } => format!(
            "calibration sweep of {band}: {} points, the rig's frequency set for each",
            points.len()
        ),
        Note::SweepEnded { words, .. } => words.clone(),
        _ => return None,
    })
}

/// Writes one of the session's notes with tracing, its fields as fields;
/// decisions name the rig's frequencies and band (`at`).
fn log(note: Note, at: &Where) {
    let band = at.band.as_deref();
    let (rx_hz, tx_hz) = (at.rx_hz, at.tx_hz);
    use tracing::{debug, error, info, warn};
    match note {
        Note::Plain { level, text } => match level {
            Level::Debug => debug!("{text}"),
            Level::Info => info!("{text}"),
            Level::Warn => warn!("{text}"),
            Level::Error => error!("{text}"),
        },
        Note::JournalKnown { position } => info!(position, "journal: motor at rest"),
        Note::JournalUnfinished { unfinished } => warn!(
            from = unfinished_parts(unfinished).0,
            to = unfinished_parts(unfinished).1,
            via = unfinished_parts(unfinished).2,
            leg = unfinished_parts(unfinished).3,
            "journal: a move did not finish; the position is unknown unless the controller reports a target of its legs or a point on the leg's path"
        ),
        Note::HomeBegin {
            side,
            position,
            speed,
            attempt,
        } => warn!(
            side = %side,
            position,
            speed,
            attempt,
            "position unknown: homing toward the home switch, the transmit inhibit held"
        ),
        Note::Homed { steps } => info!(steps, "homed: the controller found the home switch; position confirmed"),
        Note::PeakStarted {
            hz,
            low,
            high,
            positions,
        } => info!(
            hz,
            low,
            high,
            positions,
            "noise-peak search: reading the signal meter across the window, the transmit inhibit held"
        ),
        Note::PeakEnded { words, found: true } => info!("noise-peak search: {words}"),
        Note::PeakEnded { words, found: false } => warn!("noise-peak search: {words}"),
        Note::RigSet { vfo, hz } => info!(vfo = ?vfo, hz, "calibration sweep: setting the rig's frequency to {}", mhz(hz)),
        Note::SweepStarted { band, points } => info!(
            band,
            points = ?points,
            "calibration sweep: the rig's receive frequency is set to each point in turn, the transmit inhibit held"
        ),
        Note::SweepEnded { words, clean: true } => info!("calibration sweep: {words}"),
        Note::SweepEnded { words, clean: false } => warn!("calibration sweep: {words}"),
        Note::HomeGivenUp { why } => error!(
            %why,
            "homing given up: position unknown; nothing will move. Run `tuneward set-position STEPS`, then restart"
        ),
        Note::CountChanged { known, controller } => error!(
            known,
            controller,
            "position unknown: the controller reports another count at rest, unasked (restarted, or steps lost?); nothing will move until it is homed or the position is known"
        ),
        Note::LimitHit { side, steps } => error!(
            side = %side,
            steps,
            "an end-stop switch stopped the motor: the count is not trusted (journal: lost)"
        ),
        Note::Boot {
            controller: Some(c),
            journal: Some(j),
        } if c == j => info!(boot = c, "controller: the same power-on as when the journal was written"),
        Note::Boot {
            controller: Some(c),
            journal: Some(j),
        } => info!(boot = c, journal_boot = j, "controller: restarted since the journal was written"),
        Note::Boot {
            controller: Some(c),
            journal: None,
        } => info!(boot = c, "controller: power-on number noted (the journal had none)"),
        Note::Boot {
            controller: None, ..
        } => info!("controller: no power-on number (protocol version 2 or older); a restart of it cannot be told"),
        Note::Trusted { steps, why } => info!(steps, why, "position trusted after the unfinished move"),
        Note::InhibitKept => error!(
            "the motor was not confirmed at rest: the transmit inhibit stays asserted (wire it fail-safe, see README)"
        ),
        Note::Inhibit { on: true } => info!("transmit inhibit asserted"),
        Note::Inhibit { on: false } => info!("transmit inhibit released"),
        Note::Transmit { on: true } => match tx_hz {
            Some(hz) => info!(tx_hz, band, "rig transmitting on {}", at.words(hz)),
            None => info!("rig transmitting"),
        },
        Note::Transmit { on: false } => info!("rig back on receive"),
        Note::Arrived { steps } => info!(steps, "arrived"),
        Note::InhibitFailed { on, error } => {
            let doing = if on { "asserting" } else { "releasing" };
            error!(error = %error, "transmit inhibit output failed while {doing} it")
        }
        Note::SenseFailed { error } => error!(
            error = %error,
            "transmit sense line cannot be read: taken as transmitting until it reads again"
        ),
        Note::ReleaseFailed { error } => {
            error!(error = %error, "could not release the transmit inhibit at shutdown")
        }
        Note::Settled { hz } => info!(hz, band, rx_hz, tx_hz, "settled on {}", at.words(hz)),
        Note::Hold { hz, reason } => info!(
            hz,
            band,
            rx_hz,
            tx_hz,
            %reason,
            "hold for {}: {}",
            at.words(hz),
            reason.words()
        ),
        Note::Move {
            from,
            to,
            hz,
            tune_hz,
        } => info!(
            from,
            to,
            hz,
            tune_hz,
            band,
            rx_hz,
            tx_hz,
            "move from step {from} to {to} for {}",
            at.words(tune_hz)
        ),
        Note::IntentFailed { error } => {
            error!(error = %error, "could not record the move's intent; not moving")
        }
        Note::GotoBlocked { steps } => warn!(steps, "GOTO not sent (move refused above)"),
        Note::GotoWithoutInhibit { steps } => {
            error!(steps, "GOTO without a confirmed transmit inhibit; not sent")
        }
        Note::Candidate { hz, steps, profile } => info!(
            hz,
            steps,
            profile = profile.as_deref().unwrap_or("-"),
            "calibration point candidate"
        ),
        Note::PositionFailed { error } => error!(error = %error, "could not record the position"),
        Note::RigRejected { reason, bytes } => debug!(%reason, bytes, "rig bytes rejected"),
        Note::OnlyRejects { hint } => warn!(
            seconds = hint.lasted.as_secs(),
            bytes = hint.bytes,
            "{hint}"
        ),
        Note::RigRejectedAtDrop { reason, bytes } => {
            debug!(%reason, bytes, "rig bytes rejected (held across a port drop)")
        }
        Note::LinkDown { reason } => warn!(
            %reason,
            "controller link down: position not trusted until it is back"
        ),
        Note::Accepted { target } => debug!(target, "controller accepted"),
        Note::LinkError { text } => warn!(%text, "controller link"),
        Note::ZeroNotTaken { wanted, got } => error!(
            wanted,
            got, "controller did not take the journal's position; asking again"
        ),
        Note::Untrusted { steps } => debug!(steps, "position reported while untrusted; ignored"),
        Note::CountNoRestart {
            journal,
            controller,
        } => error!(
            journal,
            controller,
            "position unknown: the controller's count differs from the journal and is not one it restarts from (steps lost, or moved by hand?); nothing will move. Check the antenna, run `tuneward set-position STEPS`, then restart"
        ),
        Note::CountDiffers {
            journal,
            controller,
        } => warn!(
            journal,
            controller,
            "controller's count differs from the journal (restarted?): setting it to the journal's"
        ),
        Note::PositionUnknown {
            from,
            to,
            controller,
        } => error!(
            from,
            to,
            controller,
            "position unknown: a move did not finish; nothing will move. Check the antenna, run `tuneward set-position STEPS`, then restart"
        ),
        Note::ShutdownFinishing { wait_ms } => info!(
            wait_ms,
            "shutting down: no new targets; letting the move under way finish"
        ),
        Note::LinkDownInShutdown { reason } => {
            warn!(%reason, "controller link down during shutdown")
        }
        Note::RelaxNothing {
            tensioned,
            backlash,
        } => info!(tensioned, backlash, "relax on exit: nothing to relax"),
        Note::RelaxInhibitFailed { error } => error!(
            error = %error,
            "relax on exit: skipped, the transmit inhibit failed"
        ),
        Note::RelaxIntentFailed { error } => error!(
            error = %error,
            "relax on exit: skipped, could not record the intent"
        ),
        Note::RelaxBegin { from, to } => {
            info!(from, to, "relax on exit: backing off half the backlash")
        }
        Note::SwrAlarm { swr, inhibit: true } => warn!(
            swr,
            "SWR alarm: the SWR stayed above the alarm level; transmit inhibit asserted to end the over"
        ),
        Note::SwrAlarm { swr, inhibit: false } => warn!(
            swr,
            "SWR alarm: the SWR stayed above the alarm level (logged only)"
        ),
        Note::SwrOver {
            hz,
            reads,
            max_swr,
            median_swr,
        } => info!(hz, reads, max_swr, median_swr, "over ended: SWR seen"),
        Note::SwrDrift {
            overs,
            seen,
            predicted,
        } => warn!(
            overs,
            seen,
            predicted,
            "SWR drift: the loop reads {seen:.2} where it should read {predicted:.2}: re-peak?"
        ),
        Note::Command { name, reply } => {
            let answer = crate::control::Answer::from_reply(&reply);
            let reason = answer.reason.as_deref();
            if answer.ok {
                info!(command = name, outcome = %answer.outcome, reason, "operator command")
            } else {
                warn!(command = name, refused = answer.refused.as_deref(), reason, "operator command refused")
            }
        }
    }
}

/// A journal write that failed, for the session: the journal named once.
fn journal_failure(journal: &Journal, e: JournalError) -> IoFailure {
    let what = format!("position journal {}", journal.path().display());
    match e {
        JournalError::Io { action, source, .. } => {
            IoFailure::new(what, format!("{action}: {source}"))
        }
        // A write never finds the file corrupt; said as the journal words it.
        corrupt => IoFailure::new("position journal", corrupt),
    }
}
