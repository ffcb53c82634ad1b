//! The rig's serial control port, watched by one tokio task.
//!
//! The task opens the port by path (a stable `/dev/serial/by-id/...` symlink
//! is best: it is re-resolved on every reconnect, so a rig that comes back
//! under a new device name is found again), reads chunks as they come and
//! forwards them, with the direction and the time they arrived, as
//! [`LinkEvent::Bytes`]. A read error or an unplugged cable is a
//! [`LinkEvent::Down`]; the task retries with a backoff that doubles up to a
//! cap (about 2 s) and reports [`LinkEvent::Up`] when the port is back.
//! Each change of state is logged once.
//!
//! For rigs that only answer when asked, the task can poll: it writes a
//! query every `every`, and while no answer comes it stretches the interval
//! (doubling up to `max_every`) so that a switched-off rig is not hammered.
//! The query bytes are forwarded too (as [`Direction::Tx`]), so the decoder
//! sees the conversation as it happened on the wire.
//!
//! The port's modem-control outputs (DTR, RTS) are set as [`PortSettings`]
//! says right after the port opens, before the first byte is written, and
//! are not touched again: many CAT interfaces key the transmitter or send CW
//! on one of them, and Linux raises both when a port opens. (The kernel's
//! own blip at open, before any program can act, cannot be helped from
//! here: an interface that keys on it needs its lines wired inactive-high.)

use std::path::{Path, PathBuf};
use std::time::Duration;

use bytes::{Bytes, BytesMut};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::mpsc;
use tokio::task::JoinHandle;
use tokio::time::Instant;

use crate::error::Located;
use crate::shutdown::Shutdown;
use crate::timing::sleep_until_opt;
pub use tokio_serial::{DataBits, FlowControl, Parity, StopBits};

use crate::inhibit::ModemControl;
use crate::rig::Direction;

/// How to open the port.
#[derive(Debug, Clone, PartialEq)]
pub struct PortSettings {
    pub path: PathBuf,
    pub baud: u32,
    pub data_bits: DataBits,
    pub parity: Parity,
    pub stop_bits: StopBits,
    pub flow: FlowControl,
    /// What DTR is driven to at open.
    pub dtr: LineLevel,
    /// What RTS is driven to at open (`Keep` under hardware flow control,
    /// where the kernel drives it).
    pub rts: LineLevel,
}

/// What a modem-control output of the rig's port is driven to at open.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum LineLevel {
    /// Asserted (some interfaces take their power from it).
    On,
    /// Dropped: the safe level where an interface keys by this line.
    #[default]
    Off,
    /// Left as the driver opened it.
    Keep,
}

impl LineLevel {
    fn level(self) -> Option<bool> {
        match self {
            LineLevel::On => Some(true),
            LineLevel::Off => Some(false),
            LineLevel::Keep => None,
        }
    }
}

/// What [`set_modem_lines`] did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LinesSet {
    /// Every line asked for is at its level.
    Done,
    /// The device has no modem-control lines (a pseudo-terminal refuses
    /// them): there is nothing that could key a transmitter.
    NoLines,
}

/// Drives DTR, then RTS, as `settings` asks. A device without modem lines
/// at all (its line state cannot even be read) is [`LinesSet::NoLines`]; a
/// device that has them but refuses the change is an error, because the
/// port must not be used with a line in an unknown state.
pub fn set_modem_lines(
    port: &mut impl ModemControl,
    settings: &PortSettings,
) -> Result<LinesSet, Located> {
    let steps = [("DTR", settings.dtr), ("RTS", settings.rts)];
    for (name, want) in steps {
        let Some(level) = want.level() else { continue };
        let r = if name == "DTR" {
            port.write_dtr(level)
        } else {
            port.write_rts(level)
        };
        if let Err(e) = r {
            if !port.has_lines() {
                return Ok(LinesSet::NoLines);
            }
            return Err(Located::named(
                settings.path.display().to_string(),
                format!("to drive {name} {}", if level { "on" } else { "off" }),
                format!("the device refusing it ({e}); not using the port with {name} in an unknown state"),
            ));
        }
    }
    Ok(LinesSet::Done)
}

impl PortSettings {
    /// 8 data bits, no parity, one stop bit, no flow control.
    pub fn new(path: impl Into<PathBuf>, baud: u32) -> PortSettings {
        PortSettings {
            path: path.into(),
            baud,
            data_bits: DataBits::Eight,
            parity: Parity::None,
            stop_bits: StopBits::One,
            flow: FlowControl::None,
            dtr: LineLevel::Off,
            rts: LineLevel::Off,
        }
    }
}

/// Opens the port at `settings.path`, resolving a symlink first. Returns the
/// stream and the device it resolved to.
pub fn open_port(
    settings: &PortSettings,
) -> Result<(tokio_serial::SerialStream, PathBuf), Located> {
    let device = std::fs::canonicalize(&settings.path).map_err(|e| {
        Located::named(
            settings.path.display().to_string(),
            "a path to a device",
            format!("none ({e})"),
        )
    })?;
    let builder = tokio_serial::new(device.to_string_lossy(), settings.baud)
        .data_bits(settings.data_bits)
        .parity(settings.parity)
        .stop_bits(settings.stop_bits)
        .flow_control(settings.flow);
    let mut stream = tokio_serial::SerialStream::open(&builder).map_err(|e| {
        Located::named(
            format!("{} ({})", settings.path.display(), device.display()),
            "a serial port that opens",
            e.to_string(),
        )
    })?;
    // Before anything is written: an interface that keys by DTR or RTS
    // must see them dropped at once.
    if set_modem_lines(&mut stream, settings)? == LinesSet::NoLines {
        tracing::debug!(port = %settings.path.display(), "the rig's port has no modem-control lines (a pseudo-terminal?); DTR/RTS not set");
    }
    Ok((stream, device))
}

/// What the link reports.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LinkEvent {
    /// The port is open; `device` is what its path resolved to.
    Up { device: PathBuf },
    /// The port is gone or failed; the task is retrying.
    Down { reason: String },
    /// Bytes seen on the wire, in order.
    Bytes {
        dir: Direction,
        bytes: Bytes,
        at: Instant,
    },
}

/// Polling for rigs that do not report on their own.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PollConfig {
    /// Bytes to send (a frequency query in the rig's dialect).
    pub query: Vec<u8>,
    /// Interval while the rig answers.
    pub every: Duration,
    /// Longest interval while it does not.
    pub max_every: Duration,
    /// Sent after `query` while the rig works split (the other VFO's
    /// frequency read, where the dialect has one); empty: nothing.
    pub while_split: Vec<u8>,
}

/// The link task's settings.
#[derive(Debug, Clone)]
pub struct LinkConfig {
    pub port: PortSettings,
    pub poll: Option<PollConfig>,
    /// Longest wait between reopening attempts.
    pub backoff_cap: Duration,
    /// Whether the rig works split, as the session knows it (the driver
    /// keeps it current): then the poll adds [`PollConfig::while_split`].
    /// `None`: never.
    pub split: Option<tokio::sync::watch::Receiver<bool>>,
    /// Meter reads to append to every poll while not empty (the driver
    /// keeps it current from the session: the SWR meter while the rig
    /// transmits, with `[swr_watch]`). `None`: never.
    pub meters: Option<tokio::sync::watch::Receiver<Vec<u8>>>,
    /// A write for the rig (a calibration sweep's frequency set), sent
    /// ahead of the next poll, which is brought forward to now: the latest
    /// value is what goes (a newer set makes an unsent older one moot).
    /// `None`: never.
    pub writes: Option<tokio::sync::watch::Receiver<Vec<u8>>>,
}

impl LinkConfig {
    pub fn new(port: PortSettings) -> LinkConfig {
        LinkConfig {
            port,
            poll: None,
            backoff_cap: Duration::from_secs(2),
            split: None,
            meters: None,
            writes: None,
        }
    }
}

/// Reports link state changes once each, and logs them.
#[derive(Debug, Default)]
pub(crate) struct Transitions {
    up: Option<bool>,
}

impl Transitions {
    /// `Some(event)` if this is a change of state.
    pub(crate) fn up(&mut self, what: &str, device: &Path) -> Option<LinkEvent> {
        if self.up == Some(true) {
            return None;
        }
        self.up = Some(true);
        tracing::info!(port = what, device = %device.display(), "rig port up");
        Some(LinkEvent::Up {
            device: device.to_path_buf(),
        })
    }

    pub(crate) fn down(&mut self, what: &str, reason: &str) -> Option<LinkEvent> {
        if self.up == Some(false) {
            tracing::debug!(port = what, %reason, "rig port still down");
            return None;
        }
        self.up = Some(false);
        tracing::warn!(port = what, %reason, "rig port down; retrying");
        Some(LinkEvent::Down {
            reason: reason.to_string(),
        })
    }
}

/// Starts the link task. It ends when `shutdown` becomes true or the event
/// receiver is dropped.
pub fn spawn(
    config: LinkConfig,
    events: mpsc::Sender<LinkEvent>,
    shutdown: impl Into<Shutdown>,
) -> JoinHandle<()> {
    tokio::spawn(keep_link(config, events, shutdown.into()))
}

/// Opens the port, reads it until it fails, and opens it again (with a
/// growing pause) until shutdown.
async fn keep_link(config: LinkConfig, events: mpsc::Sender<LinkEvent>, mut shutdown: Shutdown) {
    let name = config.port.path.display().to_string();
    let mut state = Transitions::default();
    let mut backoff = Duration::from_millis(100);
    // One receiver across reconnections: a write is sent once, not again
    // on every new connection.
    let mut writes = config.writes.clone();
    loop {
        let reason = match open_port(&config.port) {
            Ok((stream, device)) => {
                backoff = Duration::from_millis(100);
                if let Some(ev) = state.up(&name, &device) {
                    if events.send(ev).await.is_err() {
                        return;
                    }
                }
                match session(&config, stream, &events, &mut shutdown, &mut writes).await {
                    Ok(()) => return,
                    Err(reason) => reason,
                }
            }
            Err(reason) => reason,
        };
        if let Some(ev) = state.down(&name, &reason.to_string()) {
            if events.send(ev).await.is_err() {
                return;
            }
        }
        tokio::select! {
            _ = tokio::time::sleep(backoff) => {}
            _ = shutdown.wait() => return,
        }
        backoff = (backoff * 2).min(config.backoff_cap);
    }
}

/// Reads (and polls) until the port fails (`Err(reason)`) or shutdown
/// (`Ok`).
async fn session(
    config: &LinkConfig,
    mut stream: tokio_serial::SerialStream,
    events: &mpsc::Sender<LinkEvent>,
    shutdown: &mut Shutdown,
    writes: &mut Option<tokio::sync::watch::Receiver<Vec<u8>>>,
) -> Result<(), Located> {
    let path = config.port.path.as_path();
    let mut buf = BytesMut::with_capacity(1024);
    let mut poll = config.poll.as_ref().map(|p| Poller::new(p.clone()));
    loop {
        let next_poll = poll.as_ref().map(|p| p.due);
        tokio::select! {
            _ = shutdown.wait() => return Ok(()),
            Some(bytes) = next_write(writes) => {
                if let Some(p) = poll.as_mut() {
                    p.write_first(&bytes, Instant::now());
                }
            }
            r = stream.read_buf(&mut buf) => {
                match r {
                    Ok(0) | Err(_) => return Err(read_failure(path, r)),
                    Ok(_) => {
                        let at = Instant::now();
                        if let Some(p) = poll.as_mut() {
                            p.answered();
                        }
                        let bytes = buf.split().freeze();
                        if events.send(LinkEvent::Bytes { dir: Direction::Rx, bytes, at }).await.is_err() {
                            return Ok(());
                        }
                        if buf.capacity() < 256 {
                            buf.reserve(1024);
                        }
                    }
                }
            }
            _ = sleep_until_opt(next_poll) => {
                if let Some(p) = poll.as_mut() {
                    let split = config.split.as_ref().is_some_and(|s| *s.borrow());
                    let mut query = p.fire(Instant::now(), split);
                    if let Some(m) = &config.meters {
                        query.extend_from_slice(&m.borrow());
                    }
                    write_all_timeout(&mut stream, path, &query).await?;
                    let ev = LinkEvent::Bytes { dir: Direction::Tx, bytes: Bytes::from(query), at: Instant::now() };
                    if events.send(ev).await.is_err() {
                        return Ok(());
                    }
                }
            }
        }
    }
}

/// The next write the driver asks for (see [`LinkConfig::writes`]);
/// pending for ever without a channel, or once it is closed.
pub(crate) async fn next_write(
    writes: &mut Option<tokio::sync::watch::Receiver<Vec<u8>>>,
) -> Option<Vec<u8>> {
    let Some(rx) = writes.as_mut() else {
        return std::future::pending().await;
    };
    loop {
        if rx.changed().await.is_err() {
            *writes = None;
            return std::future::pending().await;
        }
        let bytes = rx.borrow_and_update().clone();
        if !bytes.is_empty() {
            return Some(bytes);
        }
    }
}

/// Why a read of the port at `path` that gave `r` (an end of file or an
/// error) ends the session.
pub(crate) fn read_failure(path: &Path, r: std::io::Result<usize>) -> Located {
    let found = match r {
        Err(e) => format!("a read error ({e})"),
        Ok(_) => "the port closed (end of file)".to_string(),
    };
    Located::named(path.display().to_string(), "bytes or a quiet port", found)
}

/// Writes to the port at `path`, giving up after a second (a port stuck in
/// hardware flow control must not hang the task).
pub(crate) async fn write_all_timeout(
    stream: &mut tokio_serial::SerialStream,
    path: &Path,
    bytes: &[u8],
) -> Result<(), Located> {
    match tokio::time::timeout(Duration::from_secs(1), async {
        stream.write_all(bytes).await?;
        stream.flush().await
    })
    .await
    {
        Ok(Ok(())) => Ok(()),
        Ok(Err(e)) => Err(Located::named(
            path.display().to_string(),
            "a write that completes",
            format!("a write error ({e})"),
        )),
        Err(_) => Err(Located::named(
            path.display().to_string(),
            "a write that completes within 1 s",
            "none (flow control?)",
        )),
    }
}

/// When to send the next query, stretching the interval while unanswered.
#[derive(Debug, Clone)]
pub(crate) struct Poller {
    config: PollConfig,
    interval: Duration,
    pub(crate) due: Instant,
    answered: bool,
    /// Bytes to send ahead of the next query (a frequency set).
    first: Vec<u8>,
}

impl Poller {
    pub(crate) fn new(config: PollConfig) -> Poller {
        Poller {
            interval: config.every,
            due: Instant::now(),
            answered: true,
            first: Vec::new(),
            config,
        }
    }

    /// `bytes` go ahead of the next query, which is due at once (so the
    /// query's answer tells what the rig made of them).
    pub(crate) fn write_first(&mut self, bytes: &[u8], now: Instant) {
        self.first.extend_from_slice(bytes);
        self.due = self.due.min(now);
    }

    /// The rig said something.
    pub(crate) fn answered(&mut self) {
        if !self.answered && self.interval > self.config.every {
            tracing::info!(
                "rig answers polls again; polling every {:?}",
                self.config.every
            );
        }
        self.answered = true;
    }

    /// A query is being sent at `now` (`split`: the rig works split, so the
    /// other VFO is read too): returns it and plans the next one.
    pub(crate) fn fire(&mut self, now: Instant, split: bool) -> Vec<u8> {
        self.interval = if self.answered {
            self.config.every
        } else {
            if self.interval == self.config.every {
                // Logged once per silence, not per query.
                tracing::warn!(
                    "rig does not answer polls; backing off (up to every {:?})",
                    self.config.max_every.max(self.config.every)
                );
            }
            (self.interval * 2).min(self.config.max_every.max(self.config.every))
        };
        self.answered = false;
        self.due = now + self.interval;
        let mut q = std::mem::take(&mut self.first);
        q.extend_from_slice(&self.config.query);
        if split {
            q.extend_from_slice(&self.config.while_split);
        }
        q
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn poller_stretches_while_unanswered_and_resets_on_an_answer() {
        let t0 = Instant::now();
        let mut p = Poller::new(PollConfig {
            query: b"Q;".to_vec(),
            every: Duration::from_millis(100),
            max_every: Duration::from_millis(500),
            while_split: b"B;".to_vec(),
        });
        let mut gaps = Vec::new();
        let mut now = t0;
        for _ in 0..5 {
            assert_eq!(p.fire(now, false), b"Q;");
            gaps.push(p.due - now);
            now = p.due;
        }
        let ms: Vec<u128> = gaps.iter().map(|g| g.as_millis()).collect();
        assert_eq!(ms, vec![100, 200, 400, 500, 500]);
        p.answered();
        p.fire(now, false);
        assert_eq!(p.due - now, Duration::from_millis(100));
        // While split, the other VFO's read follows the query.
        assert_eq!(p.fire(now, true), b"Q;B;");
    }

    /// A port double: records every line change in order; can refuse
    /// changes, with or without having lines at all.
    struct Double {
        log: Vec<(&'static str, bool)>,
        refuse: bool,
        lines: bool,
    }

    impl ModemControl for Double {
        fn write_rts(&mut self, level: bool) -> std::io::Result<()> {
            if self.refuse {
                return Err(std::io::Error::other("refused"));
            }
            self.log.push(("RTS", level));
            Ok(())
        }
        fn write_dtr(&mut self, level: bool) -> std::io::Result<()> {
            if self.refuse {
                return Err(std::io::Error::other("refused"));
            }
            self.log.push(("DTR", level));
            Ok(())
        }
        fn has_lines(&mut self) -> bool {
            self.lines
        }
    }

    fn double(refuse: bool, lines: bool) -> Double {
        Double {
            log: Vec::new(),
            refuse,
            lines,
        }
    }

    #[test]
    fn modem_lines_are_driven_as_set_and_keep_leaves_a_line_alone() {
        let mut s = PortSettings::new("/dev/x", 9600);
        let mut d = double(false, true);
        assert_eq!(set_modem_lines(&mut d, &s), Ok(LinesSet::Done));
        // The default drops both: nothing keys at open.
        assert_eq!(d.log, vec![("DTR", false), ("RTS", false)]);
        s.dtr = LineLevel::Keep;
        s.rts = LineLevel::On;
        let mut d = double(false, true);
        set_modem_lines(&mut d, &s).unwrap();
        assert_eq!(d.log, vec![("RTS", true)]);
    }

    #[test]
    fn a_refused_line_change_fails_the_open_unless_the_device_has_no_lines() {
        let s = PortSettings::new("/dev/x", 9600);
        let e = set_modem_lines(&mut double(true, true), &s).unwrap_err();
        assert_eq!(
            e.to_string(),
            "/dev/x: expected to drive DTR off, found the device refusing it (refused); not using the port with DTR in an unknown state"
        );
        assert_eq!(
            set_modem_lines(&mut double(true, false), &s),
            Ok(LinesSet::NoLines)
        );
        let mut keep = s.clone();
        keep.dtr = LineLevel::Keep;
        keep.rts = LineLevel::Keep;
        assert_eq!(
            set_modem_lines(&mut double(true, true), &keep),
            Ok(LinesSet::Done)
        );
    }

    /// Linux pseudo-terminals have no modem-control lines: TIOCMGET (and
    /// TIOCMBIS/TIOCMBIC) answer ENOTTY on either end, so DTR/RTS cannot be
    /// read back from one; the order and levels are checked through the
    /// double above, and here that the rig's port still opens on a pty.
    #[tokio::test]
    async fn a_pseudo_terminal_reports_no_lines_and_still_opens() {
        use tokio_serial::SerialPort;
        let (mut master, slave) = tokio_serial::SerialStream::pair().unwrap();
        let name = slave.name().unwrap();
        assert!(!ModemControl::has_lines(&mut master));
        let mut tiocm: libc::c_int = 0;
        // SAFETY: TIOCMGET writes one c_int through the pointer given.
        let r = unsafe {
            libc::ioctl(
                std::os::fd::AsRawFd::as_raw_fd(&slave),
                libc::TIOCMGET,
                &mut tiocm,
            )
        };
        assert_eq!(r, -1, "a pty reported modem lines: read them back instead");
        let (_port, device) = open_port(&PortSettings::new(&name, 9600)).unwrap();
        assert_eq!(device, std::fs::canonicalize(&name).unwrap());
    }

    #[test]
    fn transitions_are_reported_once() {
        let mut t = Transitions::default();
        assert!(t.down("p", "gone").is_some());
        assert!(t.down("p", "gone").is_none());
        assert!(t.up("p", Path::new("/dev/x")).is_some());
        assert!(t.up("p", Path::new("/dev/x")).is_none());
        assert!(t.down("p", "gone").is_some());
    }
}
