//! Sharing the rig's control port with the station's other software.
//!
//! A serial port has one owner. The proxy takes the real port, creates a
//! pseudo-terminal, and puts a symlink to it at a configured path for the
//! other program to open instead. Every byte is forwarded both ways
//! unchanged and in order, and both directions are handed to the decoder
//! channel as [`LinkEvent::Bytes`] (`Rx`: from the rig, `Tx`: from the other
//! program), so tuneward hears the whole conversation without saying
//! anything.
//!
//! If the rig needs polling, the proxy's own query is only sent between the
//! other program's messages: a [`Boundary`] (from the decoder's family: a
//! text frame ends in `;`, a binary frame in its end byte, a block is a
//! count of bytes) says after each chunk whether that program's stream is
//! at a message boundary. A query that falls due in the middle of a
//! message waits until it is complete, or, for framing by count, until
//! the message is given up after a quiet gap ([`every`]).
//! The rig's answer to our query reaches the other program too (the proxy
//! changes nothing on the wire); programs that share a port expect that.
//!
//! The pseudo-terminal outlives rig reconnects: when the rig's port goes
//! away the other program simply hears nothing (what it writes meanwhile is
//! dropped and logged at debug level) until the rig is back.

use std::path::PathBuf;
use std::time::{Duration, Instant as StdInstant};

use bytes::{Bytes, BytesMut};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::sync::mpsc;
use tokio::task::JoinHandle;
use tokio::time::Instant;
use tokio_serial::SerialStream;

use super::link::{
    open_port, read_failure, write_all_timeout, LinkEvent, PollConfig, Poller, PortSettings,
    Transitions,
};
use super::pty::PtyLink;
use crate::error::Located;
use crate::rig::Direction;
use crate::shutdown::Shutdown;
use crate::timing::sleep_until_opt;

/// Says whether the other program's byte stream is at a message boundary
/// after `chunk` (the latest bytes it wrote, read at `at`).
pub trait Boundary: Send {
    fn at_boundary(&mut self, at: StdInstant, chunk: &[u8]) -> bool;
    /// When, with nothing more from the other program, a message it left
    /// unfinished is given up (its stream counts as at a boundary again):
    /// `None` when nothing is unfinished or the framing never gives up.
    fn gives_up_at(&self) -> Option<StdInstant> {
        None
    }
    /// Called at [`gives_up_at`](Boundary::gives_up_at): the unfinished
    /// message is given up.
    fn give_up(&mut self) {}
}

impl<F: FnMut(&[u8]) -> bool + Send> Boundary for F {
    fn at_boundary(&mut self, _at: StdInstant, chunk: &[u8]) -> bool {
        self(chunk)
    }
}

/// A boundary after every message that ends in `end` (`;` for the text
/// family, the end-of-frame byte for the binary family).
pub fn ends_with(end: u8) -> impl Boundary {
    move |chunk: &[u8]| chunk.last() == Some(&end)
}

/// A boundary after every `n` bytes (the block family: framed by count,
/// with no end byte), counted afresh after a quiet gap longer than `gap`
/// inside a block: a block cut short by a lost byte is given up, as the
/// decoder gives it up (`block.gap_ms`, the same rule), instead of the
/// count staying one byte off for ever. The gap is the dialect's, not one
/// block's time at the baud (1.3 ms at 38 400 baud): a USB adapter or a
/// pseudo-terminal hands a block over in pieces that far apart (common
/// practice, no source), which would resynchronise in the middle of whole
/// blocks.
pub fn every(n: usize, gap: Duration) -> Every {
    Every {
        n: n.max(1),
        gap,
        seen: 0,
        last: None,
    }
}

/// [`every`]'s counter.
#[derive(Debug, Clone)]
pub struct Every {
    n: usize,
    gap: Duration,
    /// Bytes of the block under way.
    seen: usize,
    /// When its latest byte came.
    last: Option<StdInstant>,
}

impl Boundary for Every {
    fn at_boundary(&mut self, at: StdInstant, chunk: &[u8]) -> bool {
        if self.seen != 0
            && self
                .last
                .is_some_and(|l| at.saturating_duration_since(l) > self.gap)
        {
            self.seen = 0;
        }
        self.last = Some(at);
        self.seen = (self.seen + chunk.len()) % self.n;
        self.seen == 0
    }

    fn gives_up_at(&self) -> Option<StdInstant> {
        match (self.seen, self.last) {
            (0, _) | (_, None) => None,
            (_, Some(l)) => l.checked_add(self.gap),
        }
    }

    fn give_up(&mut self) {
        self.seen = 0;
    }
}

/// The proxy's settings.
#[derive(Debug, Clone)]
pub struct ProxyConfig {
    /// The rig's real port.
    pub port: PortSettings,
    /// Where the symlink to the pseudo-terminal goes.
    pub link: PathBuf,
    pub poll: Option<PollConfig>,
    /// Longest wait between reopening attempts of the real port.
    pub backoff_cap: Duration,
    /// Meter reads to append to every poll while not empty (as
    /// [`super::link::LinkConfig::meters`]).
    pub meters: Option<tokio::sync::watch::Receiver<Vec<u8>>>,
    /// Writes for the rig (as [`super::link::LinkConfig::writes`]): sent
    /// with the next poll, which waits for the other program's message
    /// boundary as every poll does.
    pub writes: Option<tokio::sync::watch::Receiver<Vec<u8>>>,
}

/// Creates the pseudo-terminal and its symlink now (so that a bad path is
/// an error at start-up) and starts the proxy task. The symlink is removed
/// when the task ends.
pub fn spawn(
    config: ProxyConfig,
    boundary: Box<dyn Boundary>,
    events: mpsc::Sender<LinkEvent>,
    shutdown: impl Into<Shutdown>,
) -> Result<JoinHandle<()>, Located> {
    let (pty, master) = PtyLink::create(&config.link).map_err(|e| {
        Located::named(
            format!("proxy link {}", config.link.display()),
            "a pseudo-terminal and its symlink",
            e.to_string(),
        )
    })?;
    tracing::info!(link = %config.link.display(), device = %pty.slave_path().display(), "proxy port ready for the other program");
    // One receiver across the rig port's reconnections (a write goes once).
    let config_writes = config.writes.clone();
    let proxy = Proxy {
        config,
        boundary,
        events,
        shutdown: shutdown.into(),
        master,
        _pty: pty,
        other_at_boundary: true,
        writes: config_writes,
    };
    Ok(tokio::spawn(proxy.relay()))
}

struct Proxy {
    config: ProxyConfig,
    boundary: Box<dyn Boundary>,
    events: mpsc::Sender<LinkEvent>,
    shutdown: Shutdown,
    master: SerialStream,
    _pty: PtyLink,
    other_at_boundary: bool,
    writes: Option<tokio::sync::watch::Receiver<Vec<u8>>>,
}

enum End {
    Shutdown,
    RigDown(Located),
}

impl Proxy {
    async fn relay(mut self) {
        let name = self.config.port.path.display().to_string();
        let mut state = Transitions::default();
        let mut backoff = Duration::from_millis(100);
        loop {
            let reason = match open_port(&self.config.port) {
                Ok((rig, device)) => {
                    backoff = Duration::from_millis(100);
                    if let Some(ev) = state.up(&name, &device) {
                        if self.events.send(ev).await.is_err() {
                            return;
                        }
                    }
                    match self.session(rig).await {
                        End::Shutdown => return,
                        End::RigDown(reason) => reason,
                    }
                }
                Err(reason) => reason,
            };
            if let Some(ev) = state.down(&name, &reason.to_string()) {
                if self.events.send(ev).await.is_err() {
                    return;
                }
            }
            if self.wait_discarding(backoff).await {
                return;
            }
            backoff = (backoff * 2).min(self.config.backoff_cap);
        }
    }

    /// Waits `d` while the rig is away, dropping what the other program
    /// writes. `true` on shutdown.
    async fn wait_discarding(&mut self, d: Duration) -> bool {
        let until = Instant::now() + d;
        let mut scratch = [0u8; 512];
        loop {
            tokio::select! {
                _ = tokio::time::sleep_until(until) => return false,
                _ = self.shutdown.wait() => return true,
                r = self.master.read(&mut scratch) => match r {
                    Ok(n) => tracing::debug!(bytes = n, "rig port down: dropped bytes from the other program"),
                    Err(e) => {
                        tracing::warn!(error = %e, "proxy pseudo-terminal failed");
                        return true;
                    }
                },
            }
        }
    }

    async fn emit(&mut self, dir: Direction, bytes: Bytes) -> bool {
        let ev = LinkEvent::Bytes {
            dir,
            bytes,
            at: Instant::now(),
        };
        self.events.send(ev).await.is_ok()
    }

    async fn session(&mut self, mut rig: SerialStream) -> End {
        let mut from_rig = BytesMut::with_capacity(1024);
        let mut from_other = BytesMut::with_capacity(1024);
        let mut poll = self.config.poll.clone().map(Poller::new);
        // A query that fell due mid-message waits here for the boundary.
        let mut pending = false;
        loop {
            let next_poll = if pending {
                None
            } else {
                poll.as_ref().map(|p| p.due)
            };
            // A query waiting on a message the other program left
            // unfinished goes once that message is given up.
            let give_up = if pending {
                self.boundary.gives_up_at().map(Instant::from_std)
            } else {
                None
            };
            tokio::select! {
                _ = self.shutdown.wait() => return End::Shutdown,
                Some(bytes) = super::link::next_write(&mut self.writes) => {
                    // With the next poll, which is due now; it waits for
                    // the other program's boundary like any poll.
                    if let Some(p) = poll.as_mut() {
                        p.write_first(&bytes, Instant::now());
                    }
                }
                r = rig.read_buf(&mut from_rig) => {
                    match r {
                        Ok(0) | Err(_) => {
                            return End::RigDown(read_failure(&self.config.port.path, r))
                        }
                        Ok(_) => {}
                    }
                    let bytes = from_rig.split().freeze();
                    if let Some(p) = poll.as_mut() {
                        p.answered();
                    }
                    if let Err(e) = self.master.write_all(&bytes).await {
                        tracing::warn!(error = %e, "proxy pseudo-terminal write failed");
                    }
                    if !self.emit(Direction::Rx, bytes).await {
                        return End::Shutdown;
                    }
                }
                r = self.master.read_buf(&mut from_other) => {
                    match r {
                        Ok(0) => {
                            // Cannot happen while we hold the far end open;
                            // do not spin if it does.
                            tokio::time::sleep(Duration::from_millis(50)).await;
                            continue;
                        }
                        Err(e) => {
                            tracing::warn!(error = %e, "proxy pseudo-terminal read failed");
                            tokio::time::sleep(Duration::from_millis(50)).await;
                            continue;
                        }
                        Ok(_) => {}
                    }
                    let bytes = from_other.split().freeze();
                    if let Err(e) = write_all_timeout(&mut rig, &self.config.port.path, &bytes).await {
                        return End::RigDown(e);
                    }
                    self.other_at_boundary = self.boundary.at_boundary(StdInstant::now(), &bytes);
                    if !self.emit(Direction::Tx, bytes).await {
                        return End::Shutdown;
                    }
                    if pending && self.other_at_boundary {
                        pending = false;
                        if let Some(p) = poll.as_mut() {
                            if let Err(e) = self.inject(&mut rig, p).await {
                                return e;
                            }
                        }
                    }
                }
                _ = sleep_until_opt(give_up) => {
                    self.boundary.give_up();
                    self.other_at_boundary = true;
                    pending = false;
                    tracing::debug!("the other program's unfinished message given up: polling");
                    if let Some(p) = poll.as_mut() {
                        if let Err(e) = self.inject(&mut rig, p).await {
                            return e;
                        }
                    }
                }
                _ = sleep_until_opt(next_poll) => {
                    if let Some(p) = poll.as_mut() {
                        if self.other_at_boundary {
                            if let Err(e) = self.inject(&mut rig, p).await {
                                return e;
                            }
                        } else {
                            pending = true;
                        }
                    }
                }
            }
        }
    }

    async fn inject(&mut self, rig: &mut SerialStream, p: &mut Poller) -> Result<(), End> {
        let mut query = p.fire(Instant::now(), false);
        if let Some(m) = &self.config.meters {
            query.extend_from_slice(&m.borrow());
        }
        write_all_timeout(rig, &self.config.port.path, &query)
            .await
            .map_err(End::RigDown)?;
        if self.emit(Direction::Tx, Bytes::from(query)).await {
            Ok(())
        } else {
            Err(End::Shutdown)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ms(n: u64) -> Duration {
        Duration::from_millis(n)
    }

    #[test]
    fn every_counts_blocks_in_any_pieces() {
        let t0 = StdInstant::now();
        let mut b = every(5, ms(100));
        assert!(!b.at_boundary(t0, &[0, 0]));
        assert!(!b.at_boundary(t0 + ms(2), &[0, 0]));
        assert!(b.at_boundary(t0 + ms(4), &[3]));
        assert_eq!(b.gives_up_at(), None);
        // Two blocks at once, then one and a half.
        assert!(b.at_boundary(t0 + ms(5), &[0; 10]));
        assert!(!b.at_boundary(t0 + ms(6), &[0; 7]));
        assert!(b.at_boundary(t0 + ms(7), &[0; 3]));
    }

    #[test]
    fn a_lost_byte_is_forgotten_after_a_quiet_gap() {
        let t0 = StdInstant::now();
        let mut b = every(5, ms(100));
        // A block with a byte lost on the way: four bytes, then quiet.
        assert!(!b.at_boundary(t0, &[0, 0, 0, 0xF7]));
        assert_eq!(b.gives_up_at(), Some(t0 + ms(100)));
        // The next whole block, after the gap, is a block again.
        assert!(b.at_boundary(t0 + ms(101), &[0, 0, 0, 0, 3]));
        assert!(b.at_boundary(t0 + ms(102), &[0, 0, 0, 0, 3]));
        // Without the gap the count stays one byte off.
        let mut b = every(5, ms(100));
        assert!(!b.at_boundary(t0, &[0, 0, 0, 0xF7]));
        assert!(!b.at_boundary(t0 + ms(50), &[0, 0, 0, 0, 3]));
    }

    #[test]
    fn giving_up_puts_the_stream_at_a_boundary() {
        let t0 = StdInstant::now();
        let mut b = every(5, ms(100));
        assert!(!b.at_boundary(t0, &[0, 0]));
        b.give_up();
        assert_eq!(b.gives_up_at(), None);
        assert!(b.at_boundary(t0 + ms(1), &[0, 0, 0, 0, 3]));
    }
}
