//! The rig side: decoding what a transceiver says on its control port.
//!
//! Two families of wire protocol are understood, each by one decoder type;
//! what differs between rigs of one family (addresses, command codes, digit
//! widths, offsets, poll queries) is data, a *dialect* loaded from TOML.
//! Decoders are incremental and sans-IO: they take chunks of any size, keep a
//! small bounded buffer per direction, and push [`RigEvent`]s.

use std::fmt;

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

/// What a decoder makes of the bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RigEvent {
    /// The rig's operating frequency (the active VFO), in Hz.
    Frequency { hz: u64 },
    /// The rig started (`true`) or stopped (`false`) transmitting.
    Transmit { on: bool },
    /// Bytes that were not a believable report, and why.
    Reject { reason: RejectReason, bytes: usize },
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
pub trait Decode: Send {
    /// Takes the next chunk of bytes travelling in `dir` and pushes whatever
    /// it completes onto `out`. Never panics, whatever the bytes.
    fn feed(&mut self, dir: Direction, chunk: &[u8], out: &mut Vec<RigEvent>);
}

pub mod link;
pub mod proxy;
