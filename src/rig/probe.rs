//! `tuneward probe`'s decisions: which port speeds to try in what order,
//! what to send at each (the dialect's own poll reads, nothing else), what
//! answer counts as finding the rig, and when to stop. Sans-IO: the driver
//! opens the port at the speed asked for ([`ProbeOutput::Speed`]), writes
//! what it is handed ([`ProbeOutput::Send`]), feeds every byte heard with
//! its time ([`Probe::handle_bytes`]) and wakes at [`Probe::poll_timeout`].
//!
//! Only reads are ever sent: [`Dialect::poll_frequency`] and
//! [`Dialect::poll_transmit`], which the dialect loader has already checked
//! are safe to poll (never a set, never a keying command). For the binary
//! family without a configured address the frequency read goes to every
//! rig address in turn (a read: every device on the bus may hear it), and
//! the rig's address is taken from the answer's sender field.
//!
//! A speed counts as found when, over its listening window, the rig gave
//! at least one believable frequency report and every byte heard was
//! understood (no rejects): at a wrong speed the rig hears noise and its
//! answers, if any, are noise too, and a noise byte that happens to frame
//! as a report (the block family has no framing bytes) comes with others
//! that do not.

use std::time::Duration;

use super::dialect::Spec;
use super::{Decode, Dialect, Direction, RigEvent};

/// Port speeds tried after the configured one, most common first (common
/// practice, no source).
pub const COMMON_BAUDS: [u32; 7] = [38_400, 19_200, 9_600, 4_800, 57_600, 115_200, 2_400];

/// Rig addresses the binary family's read goes to when none is configured:
/// every address below the controllers' (recalled: controllers use E0 and
/// above, 00 is the broadcast).
pub const ADDRESSES: std::ops::RangeInclusive<u8> = 0x01..=0xDF;

/// What the probe wants done.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ProbeOutput {
    /// (Re)open the port at this speed before anything else.
    Speed(u32),
    /// Write these bytes.
    Send(Vec<u8>),
}

/// What one speed gave.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Heard {
    pub baud: u32,
    /// Bytes from the rig.
    pub bytes: usize,
    /// Believable frequency reports.
    pub reports: usize,
    /// Bytes rejected.
    pub rejected: usize,
    /// The last frequency reported.
    pub hz: Option<u64>,
    /// The binary family: the sender of the first answer to us.
    pub address: Option<u8>,
}

impl Heard {
    /// A clean answer: a believable frequency and nothing not understood.
    pub fn matches(&self) -> bool {
        self.reports > 0 && self.rejected == 0
    }
}

/// The probe's result.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Finding {
    /// Every speed tried, in order.
    pub tried: Vec<Heard>,
    /// The speed (and address) found, if any.
    pub found: Option<Heard>,
}

struct Trying {
    heard: Heard,
    decoder: Box<dyn Decode>,
    /// When the window ends.
    until: Duration,
    /// When the second round of reads goes.
    again: Option<Duration>,
    /// Bytes of the binary family's frames being looked at for the sender.
    frame: Vec<u8>,
}

/// The probe state machine.
pub struct Probe {
    dialect: Dialect,
    address: Option<u8>,
    bauds: Vec<u32>,
    next: usize,
    listen: Duration,
    trying: Option<Trying>,
    out: std::collections::VecDeque<ProbeOutput>,
    tried: Vec<Heard>,
    done: Option<Finding>,
    events: Vec<RigEvent>,
}

impl Probe {
    /// Tries `configured` first, then the other [`COMMON_BAUDS`], listening
    /// `listen` (plus the time the reads take to send) at each. `address`:
    /// the binary family's configured rig address, if any.
    pub fn new(dialect: Dialect, configured: u32, address: Option<u8>, listen: Duration) -> Probe {
        let mut bauds = vec![configured];
        for b in COMMON_BAUDS {
            if !bauds.contains(&b) {
                bauds.push(b);
            }
        }
        Probe {
            dialect,
            address,
            bauds,
            next: 0,
            listen,
            trying: None,
            out: Default::default(),
            tried: Vec::new(),
            done: None,
            events: Vec::new(),
        }
    }

    /// The speeds in the order they are tried.
    pub fn bauds(&self) -> &[u32] {
        &self.bauds
    }

    /// The reads for one round: the frequency and transmit reads, or for
    /// the binary family without an address the frequency read to every
    /// address.
    fn reads(&self) -> Vec<u8> {
        match (&self.dialect.spec, self.address) {
            (Spec::Binary(_), None) => ADDRESSES
                .flat_map(|a| self.dialect.poll_frequency(a))
                .collect(),
            (_, a) => {
                let a = a.unwrap_or(0);
                let mut q = self.dialect.poll_frequency(a);
                q.extend(self.dialect.poll_transmit(a));
                q
            }
        }
    }

    /// Time the reads take on the wire at `baud` (ten bits a byte).
    fn send_time(bytes: usize, baud: u32) -> Duration {
        Duration::from_micros((bytes as u64 * 10 * 1_000_000) / u64::from(baud.max(1)))
    }

    fn start_next(&mut self, now: Duration) {
        let Some(&baud) = self.bauds.get(self.next) else {
            self.done = Some(Finding {
                tried: std::mem::take(&mut self.tried),
                found: None,
            });
            return;
        };
        self.next += 1;
        let reads = self.reads();
        let wire = Self::send_time(reads.len(), baud);
        self.out.push_back(ProbeOutput::Speed(baud));
        self.out.push_back(ProbeOutput::Send(reads));
        self.trying = Some(Trying {
            heard: Heard {
                baud,
                ..Heard::default()
            },
            decoder: self.dialect.decoder(self.address),
            until: now + wire * 2 + self.listen,
            again: Some(now + wire + self.listen / 2),
            frame: Vec::new(),
        });
    }

    /// What to do next; `None` once [`Probe::finding`] is ready or while
    /// waiting. The first call starts the first speed.
    pub fn poll_output(&mut self, now: Duration) -> Option<ProbeOutput> {
        if self.trying.is_none() && self.done.is_none() && self.next == 0 {
            self.start_next(now);
        }
        let out = self.out.pop_front();
        if let (Some(ProbeOutput::Send(bytes)), Some(t)) = (&out, self.trying.as_mut()) {
            // The decoder pairs answers with requests (the block family):
            // it hears what we send, as it would on a shared port.
            self.events.clear();
            t.decoder
                .feed_at(now, Direction::Tx, bytes, &mut self.events);
        }
        out
    }

    /// Bytes heard from the rig at `now`.
    pub fn handle_bytes(&mut self, now: Duration, bytes: &[u8]) {
        let Some(t) = self.trying.as_mut() else {
            return;
        };
        t.heard.bytes += bytes.len();
        self.events.clear();
        t.decoder
            .feed_at(now, Direction::Rx, bytes, &mut self.events);
        for e in &self.events {
            match e {
                RigEvent::Frequency { hz } => {
                    t.heard.reports += 1;
                    t.heard.hz = Some(*hz);
                }
                RigEvent::Reject { bytes, .. } => t.heard.rejected += bytes,
                _ => {}
            }
        }
        if let Spec::Binary(s) = &self.dialect.spec {
            if t.heard.address.is_none() {
                t.frame.extend_from_slice(bytes);
                t.heard.address = sender(&t.frame, s.preamble, s.controller, s.terminator);
                if t.frame.len() > 4096 {
                    t.frame.drain(..2048);
                }
            }
        }
    }

    /// Time passed: the second round of reads, or the window's end.
    pub fn handle_timeout(&mut self, now: Duration) {
        let Some(t) = self.trying.as_mut() else {
            return;
        };
        if t.again.is_some_and(|a| now >= a) {
            t.again = None;
            let reads = self.reads();
            self.out.push_back(ProbeOutput::Send(reads));
            return;
        }
        if now < t.until {
            return;
        }
        let Some(mut t) = self.trying.take() else {
            return;
        };
        self.events.clear();
        t.decoder.finish(&mut self.events);
        for e in &self.events {
            if let RigEvent::Reject { bytes, .. } = e {
                t.heard.rejected += bytes;
            }
        }
        let heard = t.heard;
        self.tried.push(heard);
        if heard.matches() {
            self.done = Some(Finding {
                tried: std::mem::take(&mut self.tried),
                found: Some(heard),
            });
        } else {
            self.start_next(now);
        }
    }

    /// When to call [`Probe::handle_timeout`] next.
    pub fn poll_timeout(&self) -> Option<Duration> {
        let t = self.trying.as_ref()?;
        Some(t.again.unwrap_or(t.until).min(t.until))
    }

    /// The result, once every speed was tried or one was found.
    pub fn finding(&self) -> Option<&Finding> {
        self.done.as_ref()
    }
}

/// The sender of the first whole binary-family frame addressed to
/// `controller` in `bytes`: `<pre> <pre> <to> <from> ... <end>`.
fn sender(bytes: &[u8], preamble: u8, controller: u8, end: u8) -> Option<u8> {
    let mut i = 0;
    while i + 4 < bytes.len() {
        if bytes[i] == preamble && bytes[i + 1] == preamble && bytes[i + 2] != preamble {
            let (to, from) = (bytes[i + 2], bytes[i + 3]);
            let whole = bytes[i + 4..].contains(&end);
            if whole && to == controller && from != controller && from != preamble {
                return Some(from);
            }
        }
        i += 1;
    }
    None
}

/// The config lines `[rig]` needs for what was found.
pub fn config_lines(dialect: &Dialect, found: &Heard) -> Vec<String> {
    let mut lines = vec![
        "[rig]".to_string(),
        format!("protocol = \"{}\"", dialect.name),
        format!("baud = {}", found.baud),
    ];
    if let (Spec::Binary(_), Some(a)) = (&dialect.spec, found.address) {
        lines.push(format!("address = 0x{a:02X}"));
    }
    lines
}

#[cfg(test)]
mod tests;
