//! The rig side: decoding what a transceiver says on its control port.
//!
//! Two families of wire protocol are understood, each by one decoder type;
//! what differs between rigs of one family (addresses, command codes, digit
//! widths, offsets, poll queries) is data, a *dialect* loaded from TOML.
//! Decoders are incremental and sans-IO: they take chunks of any size, keep a
//! small bounded buffer per direction, and push [`RigEvent`]s.

use std::fmt;

pub mod bcd;
mod binary;
pub mod block;
pub mod dialect;
mod keys;
pub mod meter;
pub mod probe;
mod swar;
mod text;

pub use binary::{Binary, BinaryDecoder};
pub use dialect::{Dialect, DialectError, Family};
pub use text::{Text, TextDecoder};

/// Lowest frequency a report may carry and still be believed.
pub const MIN_PLAUSIBLE_HZ: u64 = 100_000;
/// Highest frequency a report may carry and still be believed.
pub const MAX_PLAUSIBLE_HZ: u64 = 500_000_000;

/// Which way bytes travel on the rig's control port.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Direction {
    /// From the rig (its reports and answers).
    Rx,
    /// To the rig (requests from us or from the station's other software).
    Tx,
}

impl Direction {
    pub fn as_str(self) -> &'static str {
        match self {
            Direction::Rx => "rx",
            Direction::Tx => "tx",
        }
    }
}

/// One of the rig's two VFOs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Vfo {
    A,
    B,
}

/// A message about the station's VFOs or transmit state, for encoding
/// (scenarios, tests, demos): the rig's report of the VFO it operates on,
/// or a command another program sends to the rig.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum StationMessage {
    /// The rig reports the frequency of `vfo`, the VFO it receives on.
    Operating { vfo: Vfo, hz: u64 },
    /// To the rig: set `vfo` to `hz`; `selected`: it is the VFO in use (the
    /// binary family names VFOs by use, not A/B).
    SetFrequency { vfo: Vfo, selected: bool, hz: u64 },
    /// To the rig: receive (and, without split, transmit) on `vfo`.
    SelectVfo { vfo: Vfo },
    /// To the rig: split on (transmit on the VFO other than `rx`) or off.
    Split { on: bool, rx: Vfo },
    /// To the rig: transmit (`true`) or receive.
    Transmit { on: bool },
}

impl StationMessage {
    /// Whether the message travels to the rig (a command) rather than from it.
    pub fn to_rig(&self) -> bool {
        !matches!(self, StationMessage::Operating { .. })
    }
}

/// Where a station event was learnt: from the rig itself, or from a command
/// another program sent to the rig (seen in `proxy` mode or as an echo on a
/// shared bus). A command is the operator's intent, not yet the rig's state.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Seen {
    /// The rig said so: an unsolicited report or an answer to a read.
    Report,
    /// A set command travelling to the rig.
    Command,
}

/// Which receive/transmit offset an [`RigEvent::Offset`] is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum OffsetKind {
    /// Receive incremental tuning: moves the receive frequency only.
    Rit,
    /// Transmit incremental tuning: moves the transmit frequency only.
    Xit,
}

/// What a decoder makes of the bytes.
///
/// [`Dialect::decoder`] emits only `Frequency`, `Transmit` and `Reject`
/// (reports from the rig). [`Dialect::station_decoder`] emits those same
/// events, in the same order, and in addition the station events below
/// (`Vfo` to `TransmitCommand`), from both directions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RigEvent {
    /// The rig's operating frequency (the active VFO), in Hz.
    Frequency { hz: u64 },
    /// The rig started (`true`) or stopped (`false`) transmitting.
    Transmit { on: bool },
    /// Bytes that were not a believable report, and why.
    Reject { reason: RejectReason, bytes: usize },
    /// One VFO's frequency, whichever VFO is in use: a report or answer
    /// (`Seen::Report`), or a set going to the rig (`Seen::Command`).
    Vfo { vfo: Vfo, hz: u64, seen: Seen },
    /// The VFO the rig receives on.
    ReceiveVfo { vfo: Vfo, seen: Seen },
    /// The A/B toggle: the rig now works on the other VFO (both ways in
    /// split), whose frequency the message does not carry.
    VfoToggle { seen: Seen },
    /// The VFO the rig transmits on.
    TransmitVfo { vfo: Vfo, seen: Seen },
    /// Split operation (transmit on the other VFO) on or off.
    Split { on: bool, seen: Seen },
    /// A RIT or XIT state: whether it is on and, where the message carries
    /// it, the offset in Hz (signed; `None` when not carried).
    Offset {
        kind: OffsetKind,
        on: bool,
        hz: Option<i32>,
        seen: Seen,
    },
    /// The frequency of the VFO in use, whichever it is: for a family that
    /// names VFOs as selected/unselected rather than A/B (binary `0x25 00`
    /// answers, and `0x05`/`0x00`/`0x25 00` sets going to the rig), or
    /// names none (the block family's set going to the rig).
    SelectedFrequency { hz: u64, seen: Seen },
    /// The frequency of the VFO not in use (binary `0x25 01`).
    UnselectedFrequency { hz: u64, seen: Seen },
    /// A command going to the rig to transmit (`true`) or receive
    /// (`false`): another program keying the rig over the control port.
    /// Fail safe: it counts as a transmission from the moment it is seen.
    TransmitCommand { on: bool },
    /// A meter reading from the rig, as the rig gives it (`raw`, 0 up to
    /// the family's full scale): the answer to one of the dialect's meter
    /// reads (`[meter]`). [`Dialect::meter_scale`] turns it into dBm, the
    /// SWR or watts.
    Meter { kind: meter::MeterKind, raw: u16 },
}

impl RigEvent {
    /// Whether this is one of the events only the station decoder emits.
    pub fn is_station_event(&self) -> bool {
        !matches!(
            self,
            RigEvent::Frequency { .. } | RigEvent::Transmit { .. } | RigEvent::Reject { .. }
        )
    }
}

/// Why bytes were not taken as a report.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum RejectReason {
    /// Bytes outside any frame (line noise, a partial frame, resynchronisation).
    Garbage,
    /// A frame longer than the dialect allows.
    Overlong,
    /// A digit that is not a digit (BCD nibble above 9, non-ASCII digit).
    BadDigit,
    /// A payload of the wrong length for its command.
    BadLength,
    /// A frequency outside 100 kHz to 500 MHz.
    OutOfRange,
    /// A collision marker on a shared bus.
    Collision,
    /// A frame that is well formed but not understood.
    Unknown,
}

impl RejectReason {
    pub fn as_str(self) -> &'static str {
        match self {
            RejectReason::Garbage => "garbage",
            RejectReason::Overlong => "overlong",
            RejectReason::BadDigit => "bad-digit",
            RejectReason::BadLength => "bad-length",
            RejectReason::OutOfRange => "out-of-range",
            RejectReason::Collision => "collision",
            RejectReason::Unknown => "unknown",
        }
    }
}

impl fmt::Display for RejectReason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// An incremental decoder for one rig family.
///
/// Each direction has its own bounded buffer. Only [`Direction::Rx`] bytes
/// (from the rig) yield `Frequency` and `Transmit` events; `Tx` bytes are
/// framed the same way and may yield `Reject`s for framing (line noise,
/// overlong runs; the caller knows which direction it fed) and, from the
/// station decoder, station events with `Seen::Command`, nothing else.
///
/// What a decoder emits depends only on the bytes of each direction, never on
/// how they were split into chunks: a run of rejected bytes is reported once
/// it ends (or every [`REJECT_REPORT_BYTES`] bytes while it lasts).
pub trait Decode: Send {
    /// Takes the next chunk of bytes travelling in `dir` and pushes whatever
    /// it completes onto `out`. Never panics, whatever the bytes.
    fn feed(&mut self, dir: Direction, chunk: &[u8], out: &mut Vec<RigEvent>);

    /// [`Decode::feed`] with the time the chunk was read (a capture
    /// record's time, a live read's): families framed by count need it to
    /// resynchronise on a quiet gap. The others ignore it.
    fn feed_at(
        &mut self,
        _at: std::time::Duration,
        dir: Direction,
        chunk: &[u8],
        out: &mut Vec<RigEvent>,
    ) {
        self.feed(dir, chunk, out)
    }

    /// End of input (a capture's last line, a closed port): reports what is
    /// still held, a pending reject run and any unfinished frame, and starts
    /// afresh.
    fn finish(&mut self, _out: &mut Vec<RigEvent>) {}

    /// Bytes currently held in the buffers (both directions); never more
    /// than the dialect's longest frame plus one per direction.
    fn buffered(&self) -> usize {
        0
    }

    /// Counters since the decoder was made.
    fn stats(&self) -> DecodeStats {
        DecodeStats::default()
    }
}

/// One family's framing: how the bytes of one direction become events. The
/// stream and counters are the [`FamilyDecoder`]'s; a family keeps only its
/// dialect.
pub(crate) trait Framing: Send {
    /// Decodes `chunk` travelling in `dir` on `stream`, pushing onto `out`.
    fn feed_stream(
        &self,
        dir: Direction,
        stream: &mut Stream,
        chunk: &[u8],
        out: &mut Vec<RigEvent>,
        stats: &mut DecodeStats,
    );
}

/// A decoder: one family's framing over one bounded stream per
/// direction, with the counters every family keeps. The end of input, the
/// bytes held and the counters work alike for every family, so they are
/// written once, here.
#[derive(Debug)]
pub struct FamilyDecoder<F> {
    framing: F,
    rx: Stream,
    tx: Stream,
    stats: DecodeStats,
}

impl<F> FamilyDecoder<F> {
    /// `cap`: the capacity of each direction's buffer, allocated once.
    pub(crate) fn with_framing(framing: F, cap: usize) -> FamilyDecoder<F> {
        FamilyDecoder {
            framing,
            rx: Stream::new(cap),
            tx: Stream::new(cap),
            stats: DecodeStats::default(),
        }
    }
}

impl<F: Framing> Decode for FamilyDecoder<F> {
    fn feed(&mut self, dir: Direction, chunk: &[u8], out: &mut Vec<RigEvent>) {
        let stream = match dir {
            Direction::Rx => &mut self.rx,
            Direction::Tx => &mut self.tx,
        };
        self.framing
            .feed_stream(dir, stream, chunk, out, &mut self.stats);
    }

    fn finish(&mut self, out: &mut Vec<RigEvent>) {
        self.rx.finish(out, &mut self.stats);
        self.tx.finish(out, &mut self.stats);
    }

    fn buffered(&self) -> usize {
        self.rx.buf.len() + self.tx.buf.len()
    }

    fn stats(&self) -> DecodeStats {
        self.stats
    }
}

/// What a decoder has seen, for diagnostics.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct DecodeStats {
    /// Complete frames or messages, both directions, whatever became of them.
    pub frames: u64,
    /// Well-formed frames that are not reports: echoes of requests,
    /// requests, acknowledgements, other commands, other rigs, the inactive
    /// VFO, anything sent to the rig.
    pub ignored: u64,
    /// Events emitted other than `Reject` (with the station decoder, its
    /// station events too).
    pub reports: u64,
    /// `Reject` events emitted.
    pub rejects: u64,
}

/// A long run of rejected bytes is reported in pieces of this size, so that
/// endless noise still shows up while it lasts.
pub const REJECT_REPORT_BYTES: usize = 64 * 1024;

/// One direction of a decoder: the bytes not yet decided on, whether an
/// overlong frame or message is being skipped, and the run of rejected bytes
/// not yet reported. Both families keep one per direction.
#[derive(Debug)]
pub(crate) struct Stream {
    /// At most a partial frame or message (and, in the binary family, a
    /// trailing preamble byte). Capacity fixed at creation, allocated once.
    pub(crate) buf: Vec<u8>,
    /// Inside an overlong frame or message: reject up to where the next one
    /// can start.
    pub(crate) skipping: bool,
    pub(crate) run: RejectRun,
}

impl Stream {
    pub(crate) fn new(cap: usize) -> Stream {
        Stream {
            buf: Vec::with_capacity(cap),
            skipping: false,
            run: RejectRun::default(),
        }
    }

    /// End of input: what is still held is rejected (as overlong while
    /// skipping, else as garbage), the pending run reported, and the stream
    /// starts afresh.
    pub(crate) fn finish(&mut self, out: &mut Vec<RigEvent>, stats: &mut DecodeStats) {
        let reason = if self.skipping {
            RejectReason::Overlong
        } else {
            RejectReason::Garbage
        };
        self.run.add(reason, self.buf.len(), out, stats);
        self.run.flush(out, stats);
        self.buf.clear();
        self.skipping = false;
    }
}

/// A run of rejected bytes (garbage, an overlong frame) not yet reported:
/// adjacent bytes rejected for the same reason are one run, one event.
#[derive(Debug, Default)]
pub(crate) struct RejectRun {
    reason: Option<RejectReason>,
    bytes: usize,
}

impl RejectRun {
    #[inline]
    pub(crate) fn add(
        &mut self,
        reason: RejectReason,
        n: usize,
        out: &mut Vec<RigEvent>,
        stats: &mut DecodeStats,
    ) {
        if n == 0 {
            return;
        }
        if self.reason != Some(reason) {
            self.flush(out, stats);
            self.reason = Some(reason);
        }
        self.bytes = self.bytes.saturating_add(n);
        while self.bytes >= REJECT_REPORT_BYTES {
            out.push(RigEvent::Reject {
                reason,
                bytes: REJECT_REPORT_BYTES,
            });
            stats.rejects += 1;
            self.bytes -= REJECT_REPORT_BYTES;
        }
        if self.bytes == 0 {
            self.reason = None;
        }
    }

    #[inline]
    pub(crate) fn flush(&mut self, out: &mut Vec<RigEvent>, stats: &mut DecodeStats) {
        if let Some(reason) = self.reason.take() {
            if self.bytes > 0 {
                out.push(RigEvent::Reject {
                    reason,
                    bytes: self.bytes,
                });
                stats.rejects += 1;
            }
        }
        self.bytes = 0;
    }
}

/// What one complete frame or message amounts to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Outcome {
    /// Not a report; counted, nothing emitted.
    Ignored,
    /// One report.
    One(RigEvent),
    /// Two reports (a status answer: frequency and transmit state).
    Two(RigEvent, RigEvent),
    /// Up to [`Batch::CAP`] reports (a status answer read by the station
    /// decoder).
    Many(Batch),
    /// Rejected for this reason; the caller knows the length.
    Reject(RejectReason),
}

/// A few events from one message, kept without allocating.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Batch {
    len: usize,
    events: [RigEvent; Batch::CAP],
}

impl Batch {
    pub(crate) const CAP: usize = 8;

    pub(crate) fn new() -> Batch {
        Batch {
            len: 0,
            events: [RigEvent::Transmit { on: false }; Batch::CAP],
        }
    }

    /// Adds `e`; beyond [`Batch::CAP`] events it is dropped (no message of
    /// either family yields that many).
    pub(crate) fn push(&mut self, e: RigEvent) {
        if let Some(slot) = self.events.get_mut(self.len) {
            *slot = e;
            self.len += 1;
        }
    }

    pub(crate) fn events(&self) -> &[RigEvent] {
        self.events.get(..self.len).unwrap_or_default()
    }
}

/// Checks a frequency against the plausible range.
#[inline]
pub(crate) fn plausible(hz: u64) -> Result<RigEvent, RejectReason> {
    if (MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ).contains(&hz) {
        Ok(RigEvent::Frequency { hz })
    } else {
        Err(RejectReason::OutOfRange)
    }
}

impl Outcome {
    /// Emits the outcome of a complete frame of `len` bytes, after the reject
    /// run before it.
    #[inline(always)]
    pub(crate) fn emit(
        self,
        len: usize,
        run: &mut RejectRun,
        out: &mut Vec<RigEvent>,
        stats: &mut DecodeStats,
    ) {
        run.flush(out, stats);
        stats.frames += 1;
        match self {
            Outcome::Ignored => stats.ignored += 1,
            Outcome::One(e) => {
                out.push(e);
                stats.reports += 1;
            }
            Outcome::Two(a, b) => {
                out.push(a);
                out.push(b);
                stats.reports += 2;
            }
            Outcome::Many(batch) => {
                out.extend_from_slice(batch.events());
                stats.reports += batch.events().len() as u64;
            }
            Outcome::Reject(reason) => {
                out.push(RigEvent::Reject { reason, bytes: len });
                stats.rejects += 1;
            }
        }
    }
}
