//! The fixed-block family: every command is a block of `block.length` bytes
//! (four parameter bytes, then the opcode, in the built-in dialect), with no
//! framing bytes at all, and the rig never speaks unless asked. So blocks
//! are framed by count, each answer is paired with the request that
//! prompted it (its opcode says how long the answer is), and a quiet gap
//! longer than `block.gap_ms` inside a block or an answer, or between a
//! request and its answer, starts afresh: that is the only way back into
//! step after a lost byte. The decoder is still sans-IO: it is given the
//! time the bytes were read ([`Decode::feed_at`]); fed without times it
//! never resynchronises on a gap.
//!
//! Answers: the frequency read gives packed BCD (digit order and unit from
//! the dialect) then a mode byte; the transmit-status read gives one byte,
//! whose masked bit(s) and polarity say whether the rig transmits.
//! Going to the rig (proxy mode, station decoder): a frequency set (its
//! parameters carry the same packed-BCD field as the read's answer) is the
//! frequency of the VFO in use, [`RigEvent::SelectedFrequency`] seen as a
//! command, at once; the keying opcodes are transmit commands, the split
//! opcodes (where the dialect names them) split on and off. The A/B toggle
//! names no VFO and carries no frequency: it is [`RigEvent::VfoToggle`],
//! and the core holds, the loop untuned, until the next set or frequency
//! read tells the new VFO's frequency. With split on, the transmit VFO's
//! frequency is not known at all (the family cannot read the other VFO
//! without switching the operator's): the core holds (see
//! `Follower::handle_station`).

use std::collections::VecDeque;
use std::time::Duration;

mod dialect;
pub use dialect::{BlockMeter, BlockSpec, DigitOrder};

use super::{plausible, Decode, DecodeStats, Direction, RejectReason, RejectRun, RigEvent, Seen};

/// Requests awaiting their answers, at most (older ones are given up).
const MAX_PENDING: usize = 8;

/// What a request sent to the rig waits for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Pending {
    opcode: u8,
    /// When its last byte was seen.
    at: Duration,
}

/// One direction's partial block or answer.
#[derive(Debug, Default)]
struct Part {
    buf: Vec<u8>,
    /// When its last byte came.
    last: Duration,
    run: RejectRun,
}

/// Decoder for the block family.
#[derive(Debug)]
pub struct BlockDecoder {
    spec: BlockSpec,
    station: bool,
    tx: Part,
    rx: Part,
    pending: VecDeque<Pending>,
    /// The latest time given (for `feed` without one).
    now: Duration,
    stats: DecodeStats,
}

impl BlockDecoder {
    /// The reporting decoder: frequency and transmit answers.
    pub fn new(spec: BlockSpec) -> BlockDecoder {
        BlockDecoder {
            spec,
            station: false,
            tx: Part::default(),
            rx: Part::default(),
            pending: VecDeque::with_capacity(MAX_PENDING),
            now: Duration::ZERO,
            stats: DecodeStats::default(),
        }
    }

    /// Also emits the other program's keying as transmit commands.
    pub fn station(spec: BlockSpec) -> BlockDecoder {
        BlockDecoder {
            station: true,
            ..BlockDecoder::new(spec)
        }
    }

    fn gap(&self) -> Duration {
        Duration::from_millis(self.spec.gap_ms)
    }

    fn request(&mut self, at: Duration, out: &mut Vec<RigEvent>) {
        let block = std::mem::take(&mut self.tx.buf);
        let op = block.get(self.spec.opcode_offset).copied().unwrap_or(0);
        self.stats.frames += 1;
        let spec = &self.spec;
        if spec.answer_length(op) > 0 {
            if self.pending.len() == MAX_PENDING {
                self.pending.pop_front();
            }
            self.pending.push_back(Pending { opcode: op, at });
            self.stats.ignored += 1;
        } else if self.station && op == spec.set_frequency {
            // The other program sets the frequency of the VFO in use (the
            // only one a set can reach: the block names no VFO).
            match spec.read_set(&block) {
                Ok(hz) => {
                    out.push(RigEvent::SelectedFrequency {
                        hz,
                        seen: Seen::Command,
                    });
                    self.stats.reports += 1;
                }
                Err(reason) => self.tx.run.add(reason, block.len(), out, &mut self.stats),
            }
        } else if self.station && (op == spec.transmit_on || op == spec.transmit_off) {
            out.push(RigEvent::TransmitCommand {
                on: op == spec.transmit_on,
            });
            self.stats.reports += 1;
        } else if self.station && spec.vfo_toggle == Some(op) {
            out.push(RigEvent::VfoToggle {
                seen: Seen::Command,
            });
            self.stats.reports += 1;
        } else if self.station && (spec.split_on == Some(op) || spec.split_off == Some(op)) {
            out.push(RigEvent::Split {
                on: spec.split_on == Some(op),
                seen: Seen::Command,
            });
            self.stats.reports += 1;
        } else {
            self.stats.ignored += 1;
        }
        self.tx.buf = block;
        self.tx.buf.clear();
    }

    fn answer(&mut self, opcode: u8, out: &mut Vec<RigEvent>) {
        let spec = &self.spec;
        let buf = std::mem::take(&mut self.rx.buf);
        self.stats.frames += 1;
        let n = buf.len();
        let status = buf.first().copied().unwrap_or(0);
        let event = if opcode == spec.read_frequency {
            let field = buf.get(..spec.frequency_bytes).unwrap_or_default();
            match spec.read_bcd(field) {
                None => Err(RejectReason::BadDigit),
                Some(v) => plausible(v.saturating_mul(spec.unit_hz)).map(Some),
            }
        } else if opcode == spec.read_transmit {
            let set = status & spec.transmit_mask != 0;
            Ok(Some(RigEvent::Transmit {
                on: set == spec.transmit_active_high,
            }))
        } else {
            // A meter's own read: only the station decoder reports it.
            Ok(None)
        };
        match event {
            Ok(e) => {
                self.rx.run.flush(out, &mut self.stats);
                let before = out.len();
                out.extend(e);
                if self.station {
                    // Every meter this read's answer carries (the
                    // transmit status carries the power meter's bits).
                    out.extend(spec.meters.iter().filter(|m| m.read == opcode).map(|m| {
                        RigEvent::Meter {
                            kind: m.kind,
                            raw: m.raw(status),
                        }
                    }));
                }
                let emitted = out.len() - before;
                if emitted == 0 {
                    self.stats.ignored += 1;
                }
                self.stats.reports += emitted as u64;
            }
            Err(reason) => self.rx.run.add(reason, n, out, &mut self.stats),
        }
        self.rx.buf = buf;
        self.rx.buf.clear();
    }

    fn feed_tx(&mut self, at: Duration, chunk: &[u8], out: &mut Vec<RigEvent>) {
        if !self.tx.buf.is_empty() && at.saturating_sub(self.tx.last) > self.gap() {
            // A block cut short: what came is garbage; start afresh.
            let n = self.tx.buf.len();
            self.tx.buf.clear();
            self.tx
                .run
                .add(RejectReason::Garbage, n, out, &mut self.stats);
        }
        self.tx.last = at;
        for &b in chunk {
            self.tx.buf.push(b);
            if self.tx.buf.len() >= self.spec.block_length {
                self.tx.run.flush(out, &mut self.stats);
                self.request(at, out);
            }
        }
    }

    fn feed_rx(&mut self, at: Duration, chunk: &[u8], out: &mut Vec<RigEvent>) {
        let gap = self.gap();
        if !self.rx.buf.is_empty() && at.saturating_sub(self.rx.last) > gap {
            // An answer cut short: its request is given up.
            let n = self.rx.buf.len();
            self.rx.buf.clear();
            self.pending.pop_front();
            self.rx
                .run
                .add(RejectReason::Garbage, n, out, &mut self.stats);
        }
        self.rx.last = at;
        for &b in chunk {
            if self.rx.buf.is_empty() {
                // A new answer starts: only for a request still fresh.
                while self
                    .pending
                    .front()
                    .is_some_and(|p| at.saturating_sub(p.at) > gap)
                {
                    self.pending.pop_front();
                }
            }
            let Some(p) = self.pending.front().copied() else {
                // Nobody asked: the rig never speaks on its own.
                self.rx
                    .run
                    .add(RejectReason::Garbage, 1, out, &mut self.stats);
                continue;
            };
            self.rx.buf.push(b);
            if self.rx.buf.len() >= self.spec.answer_length(p.opcode) {
                self.pending.pop_front();
                self.answer(p.opcode, out);
            }
        }
    }
}

impl Decode for BlockDecoder {
    fn feed(&mut self, dir: Direction, chunk: &[u8], out: &mut Vec<RigEvent>) {
        let now = self.now;
        self.feed_at(now, dir, chunk, out);
    }

    fn feed_at(&mut self, at: Duration, dir: Direction, chunk: &[u8], out: &mut Vec<RigEvent>) {
        // Times never go back, whatever the caller hands in.
        let at = at.max(self.now);
        self.now = at;
        match dir {
            Direction::Tx => self.feed_tx(at, chunk, out),
            Direction::Rx => self.feed_rx(at, chunk, out),
        }
    }

    fn finish(&mut self, out: &mut Vec<RigEvent>) {
        for part in [&mut self.tx, &mut self.rx] {
            let n = part.buf.len();
            part.buf.clear();
            part.run.add(RejectReason::Garbage, n, out, &mut self.stats);
            part.run.flush(out, &mut self.stats);
        }
        self.pending.clear();
    }

    fn buffered(&self) -> usize {
        self.tx.buf.len() + self.rx.buf.len()
    }

    fn stats(&self) -> DecodeStats {
        self.stats
    }
}

#[cfg(test)]
mod tests;
