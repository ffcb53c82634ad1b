//! The live driver: the follow core on real time, wired to the rig's port,
//! the controller link, the inhibit output and the position journal.
//!
//! Each resource is owned by one task (the rig link or proxy, the controller
//! link); this driver owns the core, the decoder, the inhibit line and the
//! journal, and joins them with channels. It feeds the core events stamped
//! with the time since its start, carries out the core's actions in order,
//! and sleeps until the core's next deadline. Shutdown is a `watch` flag
//! every task honours.
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
//! - **Deaf means transmitting.** While the rig's port is down the core is
//!   told the rig transmits, so nothing moves while we cannot hear it.
//!
//! The journal is written synchronously on this task (a few milliseconds
//! per fsync): ordering matters more than latency here, and the events come
//! at human rates.

use std::time::Duration;

use tokio::sync::{mpsc, watch};
use tokio::time::Instant;

use crate::follow::{Action, Follower};
use crate::inhibit::InhibitLine;
use crate::journal::{Journal, Recorded};
use crate::rig::link::{LinkConfig, LinkEvent};
use crate::rig::proxy::{Boundary, ProxyConfig};
use crate::rig::{Decode, RigEvent};
use crate::tuner::client::{ClientConfig, TunerCommand, TunerEvent};

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
pub struct Service {
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
}

/// How a run ended.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Outcome {
    /// Where the motor was at rest at the end, if known.
    pub position: Option<i64>,
    /// Moves the core started.
    pub moves: u64,
    /// Faults seen (controller link, inhibit, journal).
    pub faults: u64,
}

impl Service {
    /// The live service a station's config describes: the rig's port from
    /// `[rig]` (`port`, `baud`; 8 data bits, no parity, one stop bit), the
    /// controller from `tuner.link`, the inhibit from `[inhibit]`, the
    /// journal from `tuner.state_file`.
    pub fn from_station(station: &crate::station::Station) -> Result<Service, String> {
        let config = &station.config;
        let file = config
            .source
            .as_deref()
            .map(|p| p.display().to_string())
            .unwrap_or_else(|| "<config>".to_string());
        let port = config.rig.port.clone().ok_or_else(|| {
            format!("{file}: key `rig.port`: expected the rig's serial device (e.g. /dev/serial/by-id/...), found none")
        })?;
        let controller =
            ClientConfig::from_tuner(&config.tuner).map_err(|e| format!("{file}: {e}"))?;
        let inhibit = crate::inhibit::open(&config.inhibit).map_err(|e| format!("{file}: {e}"))?;
        let settings = port_settings(&config.rig, port).map_err(|e| format!("{file}: {e}"))?;
        let poll = match config.rig.poll_ms {
            None => None,
            Some(0) => {
                return Err(format!(
                    "{file}: key `rig.poll_ms`: expected a positive number of ms, found 0"
                ))
            }
            Some(ms) => {
                let address = match (station.dialect.family(), config.rig.address) {
                    (crate::rig::Family::Binary, None) => {
                        return Err(format!(
                            "{file}: key `rig.address`: polling a binary-family rig needs its address, found none"
                        ))
                    }
                    (_, a) => a.unwrap_or(0),
                };
                let mut query = station.dialect.poll_frequency(address);
                query.extend(station.dialect.poll_transmit(address));
                let every = Duration::from_millis(ms);
                Some(crate::rig::link::PollConfig {
                    query,
                    every,
                    max_every: every.max(Duration::from_secs(4)),
                })
            }
        };
        let rig = match &config.rig.share_as {
            Some(link) => {
                let link = match config.source.as_deref().and_then(std::path::Path::parent) {
                    Some(dir) if link.is_relative() => dir.join(link),
                    _ => link.clone(),
                };
                let end = match &station.dialect.spec {
                    crate::rig::dialect::Spec::Binary(b) => b.terminator,
                    crate::rig::dialect::Spec::Text(t) => t.terminator,
                };
                RigSource::Proxy {
                    config: ProxyConfig {
                        port: settings,
                        link,
                        poll,
                        backoff_cap: Duration::from_secs(2),
                    },
                    boundary: Box::new(crate::rig::proxy::ends_with(end)),
                }
            }
            None => RigSource::Link(LinkConfig {
                port: settings,
                poll,
                backoff_cap: Duration::from_secs(2),
            }),
        };
        Ok(Service {
            follower: Follower::new(
                station.policy.clone(),
                std::sync::Arc::clone(&station.map),
                None,
            ),
            decoder: station.dialect.decoder(config.rig.address),
            rig,
            controller,
            inhibit,
            journal: Some(Journal::for_config(config)),
        })
    }
}

/// The rig port's settings from `[rig]`, with the keys named in errors.
pub fn port_settings(
    rig: &crate::config::RigConfig,
    port: String,
) -> Result<crate::rig::link::PortSettings, String> {
    use crate::config::{SerialFlow, SerialParity};
    use crate::rig::link::{DataBits, FlowControl, Parity, PortSettings, StopBits};
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

/// Runs the live service for the config at `config` until interrupted
/// (Ctrl-C or SIGTERM), on a runtime of its own.
pub fn run_config(config: &std::path::Path) -> Result<Outcome, String> {
    let station = crate::station::Station::load(config).map_err(|e| e.to_string())?;
    let service = Service::from_station(&station)?;
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| format!("cannot start the runtime: {e}"))?;
    rt.block_on(async move {
        let (stop_tx, stop_rx) = watch::channel(false);
        tokio::spawn(async move {
            let term = async {
                match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
                    Ok(mut s) => {
                        s.recv().await;
                    }
                    Err(_) => std::future::pending::<()>().await,
                }
            };
            tokio::select! {
                _ = tokio::signal::ctrl_c() => {}
                _ = term => {}
            }
            tracing::info!("shutting down");
            stop_tx.send_replace(true);
        });
        run(service, stop_rx).await
    })
}

/// How long a failed resource waits before the driver asks `WHERE` again.
const RETRY_AFTER: Duration = Duration::from_secs(2);
/// How long shutdown waits for a stopping motor to report where it is.
const STOP_WAIT: Duration = Duration::from_secs(3);

/// Runs the service until `shutdown` becomes true. Errors only for what
/// stops it from starting (a proxy symlink that cannot be placed, a journal
/// that cannot be read); everything after start-up is retried and logged.
pub async fn run(service: Service, shutdown: watch::Receiver<bool>) -> Result<Outcome, String> {
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
    let (rig_tx, rig_rx) = mpsc::channel(256);
    let rig_rx = match service.rig {
        RigSource::Link(cfg) => {
            crate::rig::link::spawn(cfg, rig_tx, shutdown.clone());
            rig_rx
        }
        RigSource::Proxy { config, boundary } => {
            crate::rig::proxy::spawn(config, boundary, rig_tx, shutdown.clone())?;
            rig_rx
        }
        RigSource::Events(rx) => rx,
    };
    let (transmit_tx, transmit_rx) = watch::channel(false);
    let client =
        crate::tuner::client::spawn(service.controller, Some(transmit_rx), shutdown.clone());
    let mut driver = Driver {
        core: service.follower,
        decoder: service.decoder,
        inhibit: service.inhibit,
        inhibit_on: false,
        journal: service.journal,
        recorded,
        commands: client.commands,
        transmit: transmit_tx,
        origin: Instant::now(),
        resync: Resync::Idle,
        block_gotos: false,
        retry_where: None,
        unknown_reported: false,
        outcome: Outcome::default(),
        events: Vec::with_capacity(16),
    };
    driver.apply_actions().await;
    let result = driver.run(rig_rx, client.events, shutdown).await;
    Ok(result)
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
    resync: Resync,
    /// Set after a failed journal or inhibit write: the `GOTO`s of that move
    /// are not sent.
    block_gotos: bool,
    retry_where: Option<Instant>,
    unknown_reported: bool,
    outcome: Outcome,
    events: Vec<RigEvent>,
}

impl Driver {
    fn now(&self) -> Duration {
        self.origin.elapsed()
    }

    async fn run(
        &mut self,
        mut rig: mpsc::Receiver<LinkEvent>,
        mut tuner: mpsc::Receiver<TunerEvent>,
        mut shutdown: watch::Receiver<bool>,
    ) -> Outcome {
        let mut rig_open = true;
        loop {
            let wake = self.core.poll_timeout().map(|d| self.origin + d);
            let retry = self.retry_where;
            tokio::select! {
                _ = crate::rig::link::wait_true(&mut shutdown) => break,
                ev = rig.recv(), if rig_open => match ev {
                    Some(ev) => self.rig_event(ev),
                    None => {
                        rig_open = false;
                        tracing::warn!("rig source ended; treating the rig as transmitting");
                        let now = self.now();
                        self.set_transmit(now, true);
                    }
                },
                ev = tuner.recv() => match ev {
                    Some(ev) => self.tuner_event(ev).await,
                    None => {
                        tracing::error!("controller link task ended");
                        break;
                    }
                },
                _ = crate::rig::link::sleep_until_opt(wake) => {
                    let now = self.now();
                    self.core.handle_timeout(now);
                }
                _ = crate::rig::link::sleep_until_opt(retry) => {
                    self.retry_where = None;
                    self.send(TunerCommand::Where).await;
                }
            }
            self.apply_actions().await;
        }
        self.shut_down(&mut tuner).await;
        self.outcome.position = self.core.position();
        self.outcome.moves = self.core.stats().moves;
        self.outcome.clone()
    }

    /// Stops a move under way (waiting a little for where it stopped) and
    /// releases the inhibit.
    async fn shut_down(&mut self, tuner: &mut mpsc::Receiver<TunerEvent>) {
        if self.core.is_moving() {
            tracing::info!("shutting down during a move: stopping the motor");
            self.send(TunerCommand::Stop).await;
            let until = Instant::now() + STOP_WAIT;
            while let Ok(Some(ev)) = tokio::time::timeout_at(until, tuner.recv()).await {
                if let TunerEvent::At { steps } = ev {
                    let now = self.now();
                    self.core.handle_arrived(now, steps);
                    self.record_position(steps);
                    break;
                }
            }
        }
        if self.inhibit_on || self.core.inhibit() {
            if let Err(e) = self.inhibit.set(false) {
                tracing::error!(error = %e, "could not release the transmit inhibit at shutdown");
            }
        }
    }

    fn set_transmit(&mut self, now: Duration, on: bool) {
        self.transmit.send_replace(on);
        self.core.handle_transmit(now, on);
    }

    fn rig_event(&mut self, ev: LinkEvent) {
        let now = self.now();
        match ev {
            LinkEvent::Bytes { dir, bytes, .. } => {
                let mut out = std::mem::take(&mut self.events);
                out.clear();
                self.decoder.feed(dir, &bytes, &mut out);
                for ev in &out {
                    match *ev {
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
                // Deaf: we would not hear the rig start transmitting.
                self.set_transmit(now, true);
            }
            LinkEvent::Up { .. } => {
                let mut out = Vec::new();
                self.decoder.finish(&mut out);
                self.set_transmit(now, false);
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
                        tracing::debug!(on, "inhibit");
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
                        self.send(TunerCommand::Goto(steps)).await;
                    }
                }
                Action::Stop => self.send(TunerCommand::Stop).await,
                Action::Candidate { hz, steps, profile } => {
                    tracing::info!(
                        hz,
                        steps,
                        profile = profile.as_deref().unwrap_or("-"),
                        "calibration point candidate"
                    )
                }
            }
        }
    }
}
