//! The binary framed family: `FE FE <to> <from> <command> [<data>…] FD`.
//!
//! Framing is check-then-parse over one bounded buffer per direction (or in
//! place, when nothing is held): find where a frame starts (two preamble
//! bytes followed by something else), check that it is complete, then parse
//! the header with nom and interpret the command. Anything between frames
//! is one run of garbage; a frame longer than the dialect allows is
//! rejected as overlong and skipped up to the next preamble; a preamble
//! inside a frame abandons the frame so far (garbage) and starts again
//! there. The usual frame, whole within the next 16 bytes and with nothing
//! odd inside, is recognised in one look at two words ([`plain_frame`]);
//! everything else takes the general path, which decides such a frame the
//! same way (a property test feeds streams whole and byte by byte).

use nom::bytes::take;
use nom::{IResult, Parser};

mod dialect;
pub use dialect::{BinaryMeter, BinarySpec, Slot, StationCodes};

use super::swar::{broadcast, equal_to_any, find_either};
use super::{
    bcd, plausible, DecodeStats, Direction, Outcome, RejectReason, RejectRun, RigEvent, Seen,
    Stream, Vfo,
};
use super::{FamilyDecoder, Framing};

/// The binary framed family's framing: its dialect and the rig it listens to.
#[derive(Debug)]
pub struct Binary {
    spec: BinarySpec,
    rig_address: Option<u8>,
    station: bool,
}

/// Decoder for the binary framed family.
pub type BinaryDecoder = FamilyDecoder<Binary>;

impl BinaryDecoder {
    /// `rig_address`: only reports from that address count; None: any address
    /// except our controller's.
    pub fn new(spec: BinarySpec, rig_address: Option<u8>) -> BinaryDecoder {
        let cap = spec.max_frame + 1 + TOP_UP;
        FamilyDecoder::with_framing(
            Binary {
                spec,
                rig_address,
                station: false,
            },
            cap,
        )
    }

    /// A decoder that also emits station events: VFO select, split, the
    /// selected/unselected VFO's frequency, from the rig (`Seen::Report`)
    /// and from commands going to it or echoed on the bus from our
    /// controller address (`Seen::Command`): frequency sets, transmit
    /// on/off ([`RigEvent::TransmitCommand`]). Its `Frequency` and
    /// `Transmit` events are exactly the reporting decoder's.
    pub fn station(spec: BinarySpec, rig_address: Option<u8>) -> BinaryDecoder {
        let cap = spec.max_frame + 1 + TOP_UP;
        FamilyDecoder::with_framing(
            Binary {
                spec,
                rig_address,
                station: true,
            },
            cap,
        )
    }
}

/// How many bytes beyond the longest frame the buffer takes in at once when
/// something is held, so that a read goes through one pass (rather than a
/// frame's worth at a time, each pass shifting the rest down). The buffer
/// is allocated once at this size; what stays held between calls is still
/// at most a partial frame.
const TOP_UP: usize = 4096;

impl Framing for Binary {
    fn feed_stream(
        &self,
        dir: Direction,
        stream: &mut Stream,
        chunk: &[u8],
        out: &mut Vec<RigEvent>,
        stats: &mut DecodeStats,
    ) {
        let cap = self.spec.max_frame + 1;
        let mut rest = chunk;
        loop {
            if stream.buf.is_empty() {
                // Nothing held: decode in place and keep only the tail (a
                // partial frame or a trailing preamble byte, always shorter
                // than the longest frame). Same decisions as going through
                // the buffer, without copying every byte twice.
                let ctx = Ctx {
                    spec: &self.spec,
                    rig_address: self.rig_address,
                    station: self.station,
                    dir,
                };
                let used = process(
                    &ctx,
                    rest,
                    &mut stream.skipping,
                    &mut stream.run,
                    out,
                    stats,
                );
                let tail = rest.get(used..).unwrap_or_default();
                if tail.len() < cap {
                    stream.buf.extend_from_slice(tail);
                    break;
                }
                // Cannot happen (see below); the buffered path copes.
                rest = tail;
            }
            // Room for the rest of a small read (or a good part of a large
            // one) beside the held frame: one pass decides the lot.
            let room = (cap + TOP_UP).saturating_sub(stream.buf.len());
            let (now, later) = rest.split_at(room.min(rest.len()));
            stream.buf.extend_from_slice(now);
            rest = later;
            let ctx = Ctx {
                spec: &self.spec,
                rig_address: self.rig_address,
                station: self.station,
                dir,
            };
            let mut used = process(
                &ctx,
                &stream.buf,
                &mut stream.skipping,
                &mut stream.run,
                out,
                stats,
            );
            if used == 0 && stream.buf.len() >= cap {
                // Cannot happen (a full buffer always holds an overlong
                // frame); kept so that a mistake here can never stall.
                stream
                    .run
                    .add(RejectReason::Garbage, stream.buf.len(), out, stats);
                used = stream.buf.len();
            }
            stream.buf.drain(..used.min(stream.buf.len()));
            if rest.is_empty() {
                break;
            }
        }
    }
}

struct Ctx<'a> {
    spec: &'a BinarySpec,
    rig_address: Option<u8>,
    station: bool,
    dir: Direction,
}

/// The usual case, decided in one look: a frame starting at `rest[0]` and
/// ending within its first 16 bytes, with no preamble or collision byte
/// between the preamble and the terminator, and no longer than the longest
/// frame. Its length, terminator included; `None` for anything else (the
/// general path decides those, and would decide these the same way).
#[inline(always)]
fn plain_frame(spec: &BinarySpec, rest: &[u8]) -> Option<usize> {
    let (pre, term, col) = (spec.preamble, spec.terminator, spec.collision);
    let first: &[u8; 16] = rest.first_chunk()?;
    if first[0] != pre || first[1] != pre || first[2] == pre {
        return None;
    }
    let (head, tail) = first.split_at(8);
    let w0 = u64::from_le_bytes(head.try_into().ok()?);
    let w1 = u64::from_le_bytes(tail.try_into().ok()?);
    let (wp, wt, wc) = (broadcast(pre), broadcast(term), broadcast(col));
    // Bytes 2.. of the first word, then the second word.
    let s0 = equal_to_any(w0, wp, wt, wc) & !0xFFFF;
    let k = if s0 != 0 {
        (s0.trailing_zeros() / 8) as usize
    } else {
        let s1 = equal_to_any(w1, wp, wt, wc);
        if s1 == 0 {
            return None;
        }
        8 + (s1.trailing_zeros() / 8) as usize
    };
    (first.get(k) == Some(&term) && k < spec.max_frame).then_some(k + 1)
}

/// Where the frame at the start of a buffer ends, as far as can be told.
enum Scan {
    /// Not all there yet.
    Incomplete,
    /// A whole frame of this many bytes, terminator included.
    Complete(usize),
    /// A new preamble at this offset abandons the frame before it.
    Restart(usize),
    /// No terminator within the longest frame; reject this many bytes.
    Overlong(usize),
}

/// Offset of the first two consecutive preamble bytes.
fn find_pair(input: &[u8], pair: &[u8; 2]) -> Option<usize> {
    // Frames usually follow each other, so the pair is most often at 0: a
    // plain scan beats a general substring search here.
    input.windows(2).position(|w| w == pair)
}

/// Decides what it can about `buf`, emits, and returns how many bytes are
/// done with. What remains is a partial frame or a trailing preamble byte.
fn process(
    ctx: &Ctx,
    buf: &[u8],
    skipping: &mut bool,
    run: &mut RejectRun,
    out: &mut Vec<RigEvent>,
    stats: &mut DecodeStats,
) -> usize {
    let pre = ctx.spec.preamble;
    let pair = [pre, pre];
    let mut pos = 0;
    loop {
        let rest = buf.get(pos..).unwrap_or_default();
        if rest.is_empty() {
            return pos;
        }
        if let Some(len) = plain_frame(ctx.spec, rest) {
            *skipping = false;
            let body = rest.get(2..len - 1).unwrap_or_default();
            interpret_clean(ctx, body).emit(len, run, out, stats);
            pos += len;
            continue;
        }
        let reason = if *skipping {
            RejectReason::Overlong
        } else {
            RejectReason::Garbage
        };
        // Most often a frame starts right here: skip the search.
        let here = matches!(rest, [a, b, c, ..] if *a == pre && *b == pre && *c != pre);
        let found = if here {
            Some(0)
        } else {
            find_pair(rest, &pair)
        };
        let Some(at) = found else {
            // No frame start here. A last preamble byte may begin one.
            let keep = usize::from(rest.last() == Some(&pre));
            run.add(reason, rest.len() - keep, out, stats);
            return pos + rest.len() - keep;
        };
        let run_len = if here {
            2
        } else {
            rest.get(at..)
                .unwrap_or_default()
                .iter()
                .take_while(|&&b| b == pre)
                .count()
        };
        let after = at + run_len;
        // A frame starts with the last two of a run of preamble bytes;
        // extra ones before them are not part of any frame.
        let start = after - 2;
        run.add(reason, start, out, stats);
        pos += start;
        if after == rest.len() {
            return pos;
        }
        *skipping = false;
        let frame = buf.get(pos..).unwrap_or_default();
        match scan(ctx.spec, frame) {
            Scan::Incomplete => return pos,
            Scan::Complete(len) => {
                let body = frame.get(2..len - 1).unwrap_or_default();
                interpret(ctx, body).emit(len, run, out, stats);
                pos += len;
            }
            Scan::Restart(n) => {
                run.add(RejectReason::Garbage, n, out, stats);
                pos += n;
            }
            Scan::Overlong(n) => {
                run.add(RejectReason::Overlong, n, out, stats);
                *skipping = true;
                pos += n;
            }
        }
    }
}

/// `frame` starts with two preamble bytes and a third, different byte.
fn scan(spec: &BinarySpec, frame: &[u8]) -> Scan {
    // Byte k may belong to the frame while k + 1 <= max_frame.
    let window = frame
        .get(2..spec.max_frame.min(frame.len()))
        .unwrap_or_default();
    // The first terminator or preamble byte decides; bytes before it are
    // plain frame content.
    let (term, pre) = (spec.terminator, spec.preamble);
    let mut from = 0;
    while let Some(i) = window.get(from..).and_then(|w| find_either(w, term, pre)) {
        let k = from + i + 2;
        if window.get(from + i) == Some(&term) {
            return Scan::Complete(k + 1);
        }
        match frame.get(k + 1) {
            None => return Scan::Incomplete,
            Some(&n) if n == pre => return Scan::Restart(k),
            Some(_) => {}
        }
        from += i + 1;
    }
    if frame.len() >= spec.max_frame {
        Scan::Overlong(spec.max_frame.max(2))
    } else {
        Scan::Incomplete
    }
}

/// `<to> <from> <command>`, then the data. The parser's error type is `()`:
/// a short header is all there is to say, and nothing is built per frame.
#[inline(always)]
fn header(body: &[u8]) -> Option<(&[u8], [u8; 3])> {
    // One `take` rather than three single-byte parsers: one split of the
    // slice per frame instead of three.
    let parsed: IResult<&[u8], &[u8], ()> = take(3usize).parse_complete(body);
    match parsed {
        Ok((data, &[to, from, cmd])) => Some((data, [to, from, cmd])),
        _ => None,
    }
}

/// What a complete frame (between preamble and terminator) amounts to.
fn interpret(ctx: &Ctx, body: &[u8]) -> Outcome {
    let s = ctx.spec;
    let collision = find_either(body, s.collision, s.collision).is_some();
    if collision {
        return Outcome::Reject(RejectReason::Collision);
    }
    interpret_clean(ctx, body)
}

/// [`interpret`] for a frame known to hold no collision byte.
#[inline(always)]
fn interpret_clean(ctx: &Ctx, body: &[u8]) -> Outcome {
    let s = ctx.spec;
    let Some((data, [_to, from, cmd])) = header(body) else {
        return Outcome::Reject(RejectReason::BadLength);
    };
    if ctx.dir == Direction::Tx || from == s.controller {
        // Going to the rig, or a request echoed on the shared bus (ours or
        // another program's from the same address): only the station
        // decoder makes anything of it.
        return if ctx.station {
            interpret_command(s, cmd, data)
        } else {
            Outcome::Ignored
        };
    }
    // Acknowledgements.
    if cmd == s.ack_ok || cmd == s.ack_ng {
        return Outcome::Ignored;
    }
    if ctx.rig_address.is_some_and(|a| a != from) {
        return Outcome::Ignored;
    }
    if cmd == s.frequency_broadcast || cmd == s.frequency_read {
        if data.is_empty() {
            // A read request (from another controller): not a report.
            return Outcome::Ignored;
        }
        if data.len() != s.frequency_bytes {
            return Outcome::Reject(RejectReason::BadLength);
        }
        return match bcd::decode_le(data) {
            Err(_) => Outcome::Reject(RejectReason::BadDigit),
            Ok(hz) => match plausible(hz) {
                Ok(e) => Outcome::One(e),
                Err(r) => Outcome::Reject(r),
            },
        };
    }
    if cmd == s.transmit {
        return match data {
            // A read, with or without the sub-command.
            [] | [_] => Outcome::Ignored,
            [sub, ..] if *sub != s.transmit_sub => Outcome::Ignored,
            [_, 0x00] => Outcome::One(RigEvent::Transmit { on: false }),
            [_, 0x01] => Outcome::One(RigEvent::Transmit { on: true }),
            [_, _] => Outcome::Reject(RejectReason::Unknown),
            _ => Outcome::Reject(RejectReason::BadLength),
        };
    }
    if ctx.station {
        if let Some(outcome) = meter_answer(s, cmd, data) {
            return outcome;
        }
        return station_frame(s, cmd, data, Seen::Report).unwrap_or(Outcome::Ignored);
    }
    Outcome::Ignored
}

/// A meter read's answer from the rig (station decoder): the meter's
/// command and sub-command, then two BCD bytes, most significant first.
/// None: not a meter's command and sub-command.
fn meter_answer(s: &BinarySpec, cmd: u8, data: &[u8]) -> Option<Outcome> {
    let (sub, field) = data.split_first()?;
    let m = s
        .meters
        .iter()
        .find(|m| m.command == cmd && m.sub == *sub)?;
    Some(match field {
        // A read echoed by the rig: nothing to report.
        [] => Outcome::Ignored,
        [hi, lo] => match bcd::decode_le(&[*lo, *hi]) {
            Ok(raw) => Outcome::One(RigEvent::Meter {
                kind: m.kind,
                // Four BCD digits are at most 9999.
                raw: u16::try_from(raw).unwrap_or(u16::MAX),
            }),
            Err(_) => Outcome::Reject(RejectReason::BadDigit),
        },
        _ => Outcome::Reject(RejectReason::BadLength),
    })
}

/// A frequency field of the dialect's width, as a plausible frequency.
fn bcd_frequency(s: &BinarySpec, data: &[u8]) -> Result<u64, RejectReason> {
    if data.len() != s.frequency_bytes {
        return Err(RejectReason::BadLength);
    }
    let hz = bcd::decode_le(data).map_err(|_| RejectReason::BadDigit)?;
    match plausible(hz)? {
        RigEvent::Frequency { hz } => Ok(hz),
        _ => Err(RejectReason::OutOfRange),
    }
}

/// The frames only the station decoder understands, in either direction:
/// VFO select, split, and the selected/unselected VFO's frequency. None:
/// not one of them, or a read (no data).
fn station_frame(s: &BinarySpec, cmd: u8, data: &[u8], seen: Seen) -> Option<Outcome> {
    let st = &s.station;
    let one = |e| Some(Outcome::One(e));
    if cmd == st.select_vfo {
        return match data {
            [] => None,
            [d] if *d == st.vfo_a => one(RigEvent::ReceiveVfo { vfo: Vfo::A, seen }),
            [d] if *d == st.vfo_b => one(RigEvent::ReceiveVfo { vfo: Vfo::B, seen }),
            // Exchange, equalise, main/sub: not a VFO named.
            _ => Some(Outcome::Ignored),
        };
    }
    if cmd == st.split {
        return match data {
            [] => None,
            [d] if *d == st.split_off => one(RigEvent::Split { on: false, seen }),
            [d] if *d == st.split_on => one(RigEvent::Split { on: true, seen }),
            // Duplex and other settings of the same command.
            _ => Some(Outcome::Ignored),
        };
    }
    if cmd == st.vfo_frequency {
        let (sub, field) = data.split_first()?;
        if field.is_empty() {
            // A read of one VFO's frequency.
            return None;
        }
        if *sub != st.selected_sub && *sub != st.unselected_sub {
            return Some(Outcome::Ignored);
        }
        return Some(match bcd_frequency(s, field) {
            Ok(hz) if *sub == st.selected_sub => {
                Outcome::One(RigEvent::SelectedFrequency { hz, seen })
            }
            Ok(hz) => Outcome::One(RigEvent::UnselectedFrequency { hz, seen }),
            Err(reason) => Outcome::Reject(reason),
        });
    }
    None
}

/// A frame going to the rig (or echoed from our controller address):
/// frequency sets, transmit on/off, and the station frames. Reads (no data)
/// are queries, nothing; a malformed set is rejected with its reason.
fn interpret_command(s: &BinarySpec, cmd: u8, data: &[u8]) -> Outcome {
    if cmd == s.ack_ok || cmd == s.ack_ng || data.is_empty() {
        return Outcome::Ignored;
    }
    if cmd == s.station.frequency_set || cmd == s.frequency_broadcast {
        return match bcd_frequency(s, data) {
            Ok(hz) => Outcome::One(RigEvent::SelectedFrequency {
                hz,
                seen: Seen::Command,
            }),
            Err(reason) => Outcome::Reject(reason),
        };
    }
    if cmd == s.transmit {
        return match data {
            [sub, ..] if *sub != s.transmit_sub => Outcome::Ignored,
            [_] => Outcome::Ignored,
            [_, 0x00] => Outcome::One(RigEvent::TransmitCommand { on: false }),
            [_, 0x01] => Outcome::One(RigEvent::TransmitCommand { on: true }),
            [_, _] => Outcome::Reject(RejectReason::Unknown),
            _ => Outcome::Reject(RejectReason::BadLength),
        };
    }
    station_frame(s, cmd, data, Seen::Command).unwrap_or(Outcome::Ignored)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rig::Dialect;

    fn decode_with(addr: Option<u8>, dir: Direction, bytes: &[u8]) -> Vec<RigEvent> {
        let mut d = Dialect::builtin("binary-bcd").unwrap().decoder(addr);
        let mut out = Vec::new();
        d.feed(dir, bytes, &mut out);
        d.finish(&mut out);
        out
    }

    fn decode(bytes: &[u8]) -> Vec<RigEvent> {
        decode_with(None, Direction::Rx, bytes)
    }

    fn freq(hz: u64) -> RigEvent {
        RigEvent::Frequency { hz }
    }

    fn reject(reason: RejectReason, bytes: usize) -> RigEvent {
        RigEvent::Reject { reason, bytes }
    }

    const F14074: [u8; 11] = [
        0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x00, 0x40, 0x07, 0x14, 0x00, 0xFD,
    ];

    #[test]
    fn broadcast_and_answer() {
        assert_eq!(decode(&F14074), vec![freq(14_074_000)]);
        // Answer to a read: cmd 03, to the controller E0. 7 074 000 Hz by
        // hand: 00 40 07 07 00.
        let answer = [
            0xFE, 0xFE, 0xE0, 0x5A, 0x03, 0x00, 0x40, 0x07, 0x07, 0x00, 0xFD,
        ];
        assert_eq!(decode(&answer), vec![freq(7_074_000)]);
    }

    #[test]
    fn transmit_state() {
        let on = [0xFE, 0xFE, 0xE0, 0x5A, 0x1C, 0x00, 0x01, 0xFD];
        let off = [0xFE, 0xFE, 0xE0, 0x5A, 0x1C, 0x00, 0x00, 0xFD];
        let odd = [0xFE, 0xFE, 0xE0, 0x5A, 0x1C, 0x00, 0x07, 0xFD];
        assert_eq!(decode(&on), vec![RigEvent::Transmit { on: true }]);
        assert_eq!(decode(&off), vec![RigEvent::Transmit { on: false }]);
        assert_eq!(decode(&odd), vec![reject(RejectReason::Unknown, 8)]);
    }

    #[test]
    fn echoes_requests_and_acks_are_ignored() {
        let mut d = Dialect::builtin("binary-bcd").unwrap().decoder(None);
        let mut out = Vec::new();
        // Our read request echoed (from E0), another controller's read
        // (no data), an OK acknowledgement.
        d.feed(
            Direction::Rx,
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD],
            &mut out,
        );
        d.feed(
            Direction::Rx,
            &[0xFE, 0xFE, 0x5A, 0xE4, 0x03, 0xFD],
            &mut out,
        );
        d.feed(
            Direction::Rx,
            &[0xFE, 0xFE, 0xE0, 0x5A, 0xFB, 0xFD],
            &mut out,
        );
        // A frequency *from* the controller address (a set, echoed).
        let mut from_us = F14074;
        from_us[3] = 0xE0;
        d.feed(Direction::Rx, &from_us, &mut out);
        assert_eq!(out, vec![]);
        let s = d.stats();
        assert_eq!((s.frames, s.ignored, s.reports, s.rejects), (4, 4, 0, 0));
    }

    #[test]
    fn rig_address_filters() {
        assert_eq!(
            decode_with(Some(0x5A), Direction::Rx, &F14074),
            vec![freq(14_074_000)]
        );
        assert_eq!(decode_with(Some(0x94), Direction::Rx, &F14074), vec![]);
    }

    #[test]
    fn tx_direction_yields_no_reports() {
        assert_eq!(decode_with(None, Direction::Tx, &F14074), vec![]);
        assert_eq!(
            decode_with(None, Direction::Tx, &[0x11, 0x22]),
            vec![reject(RejectReason::Garbage, 2)]
        );
    }

    #[test]
    fn collision_bad_digit_bad_length_out_of_range() {
        let mut f = F14074;
        f[3] = 0xFC;
        assert_eq!(decode(&f), vec![reject(RejectReason::Collision, 11)]);
        let mut f = F14074;
        f[6] = 0x4A;
        assert_eq!(decode(&f), vec![reject(RejectReason::BadDigit, 11)]);
        let short = [0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x40, 0x07, 0x14, 0xFD];
        assert_eq!(decode(&short), vec![reject(RejectReason::BadLength, 9)]);
        let tiny = [0xFE, 0xFE, 0x00, 0xFD];
        assert_eq!(decode(&tiny), vec![reject(RejectReason::BadLength, 4)]);
        // 50 000 Hz: 00 00 05 00 00 by hand; below 100 kHz.
        let low = [
            0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x00, 0x00, 0x05, 0x00, 0x00, 0xFD,
        ];
        assert_eq!(decode(&low), vec![reject(RejectReason::OutOfRange, 11)]);
    }

    #[test]
    fn garbage_is_one_run_per_stretch() {
        let mut bytes = vec![0x00, 0xFF, 0x13, 0xFD, 0xFE];
        bytes.extend_from_slice(&F14074);
        bytes.extend_from_slice(&[0xFF; 7]);
        bytes.extend_from_slice(&F14074);
        assert_eq!(
            decode(&bytes),
            vec![
                // The lone FE before the frame's preamble makes a run of
                // three; only the last two start the frame.
                reject(RejectReason::Garbage, 5),
                freq(14_074_000),
                reject(RejectReason::Garbage, 7),
                freq(14_074_000),
            ]
        );
    }

    #[test]
    fn restarted_preamble_abandons_the_partial_frame() {
        let mut bytes = vec![0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x00];
        bytes.extend_from_slice(&F14074);
        assert_eq!(
            decode(&bytes),
            vec![reject(RejectReason::Garbage, 6), freq(14_074_000)]
        );
    }

    #[test]
    fn overlong_is_rejected_and_skipped_to_next_preamble() {
        let mut bytes = vec![0xFE, 0xFE, 0x00];
        bytes.extend_from_slice(&[0x11; 100]);
        bytes.push(0xFD);
        bytes.extend_from_slice(&F14074);
        // 32-byte frames at most: 104 bytes of overlong run, then the frame.
        assert_eq!(
            decode(&bytes),
            vec![reject(RejectReason::Overlong, 104), freq(14_074_000)]
        );
    }

    #[test]
    fn split_anywhere_gives_the_same() {
        let mut bytes = vec![0x42, 0xFE];
        bytes.extend_from_slice(&F14074);
        bytes.extend_from_slice(&[0xFE, 0xFE, 0xE0, 0x5A, 0x1C, 0x00, 0x01, 0xFD]);
        let whole = decode(&bytes);
        for cut in 0..=bytes.len() {
            let mut d = Dialect::builtin("binary-bcd").unwrap().decoder(None);
            let mut out = Vec::new();
            d.feed(Direction::Rx, &bytes[..cut], &mut out);
            d.feed(Direction::Rx, &bytes[cut..], &mut out);
            d.finish(&mut out);
            assert_eq!(out, whole, "cut at {cut}");
        }
    }

    #[test]
    fn four_byte_dialect() {
        let d = Dialect::builtin("binary-bcd-4").unwrap();
        let bytes = d.encode_frequency(14_074_000, 0x5A);
        assert_eq!(
            bytes,
            vec![0xFE, 0xFE, 0x00, 0x5A, 0x00, 0x00, 0x40, 0x07, 0x14, 0xFD]
        );
        let mut dec = d.decoder(None);
        let mut out = Vec::new();
        dec.feed(Direction::Rx, &bytes, &mut out);
        assert_eq!(out, vec![freq(14_074_000)]);
    }

    fn station(dir: Direction, bytes: &[u8]) -> Vec<RigEvent> {
        let mut d = Dialect::builtin("binary-bcd")
            .unwrap()
            .station_decoder(Some(0x5A));
        let mut out = Vec::new();
        d.feed(dir, bytes, &mut out);
        d.finish(&mut out);
        out
    }

    // Frames worked by hand from the family's published frame layout
    // (FE FE <to> <from> <cmd> [<data>] FD, BCD least significant byte
    // first). The command codes (05 set frequency, 07 VFO select with 00 =
    // A / 01 = B, 0F split with 00 off / 01 on, 25 00/01 selected/unselected
    // VFO frequency, 1C 00 transmit) are recalled from the manufacturer's
    // CI-V reference guide, not checked against it here.

    #[test]
    fn station_sees_another_programs_commands_going_to_the_rig() {
        let frames: [&[u8]; 10] = [
            // 05: set 14 200 000 Hz (00 00 20 14 00).
            &[
                0xFE, 0xFE, 0x5A, 0xE0, 0x05, 0x00, 0x00, 0x20, 0x14, 0x00, 0xFD,
            ],
            // 07 01: select VFO B.
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x07, 0x01, 0xFD],
            // 0F 01: split on.
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x0F, 0x01, 0xFD],
            // 25 01: unselected VFO at 14 195 000 Hz (00 50 19 14 00).
            &[
                0xFE, 0xFE, 0x5A, 0xE0, 0x25, 0x01, 0x00, 0x50, 0x19, 0x14, 0x00, 0xFD,
            ],
            // 1C 00 01: transmit; 1C 00 00: receive.
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x1C, 0x00, 0x01, 0xFD],
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x1C, 0x00, 0x00, 0xFD],
            // Reads: 03, 1C 00, 0F, 25 00: queries, nothing.
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD],
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x1C, 0x00, 0xFD],
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x0F, 0xFD],
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x25, 0x00, 0xFD],
        ];
        let cmds = &frames.concat();
        let want = vec![
            RigEvent::SelectedFrequency {
                hz: 14_200_000,
                seen: Seen::Command,
            },
            RigEvent::ReceiveVfo {
                vfo: Vfo::B,
                seen: Seen::Command,
            },
            RigEvent::Split {
                on: true,
                seen: Seen::Command,
            },
            RigEvent::UnselectedFrequency {
                hz: 14_195_000,
                seen: Seen::Command,
            },
            RigEvent::TransmitCommand { on: true },
            RigEvent::TransmitCommand { on: false },
        ];
        assert_eq!(station(Direction::Tx, cmds), want);
        // The same frames echoed on the shared bus (from our controller
        // address) are commands too; the reporting decoder ignores both.
        assert_eq!(station(Direction::Rx, cmds), want);
        assert_eq!(decode_with(Some(0x5A), Direction::Rx, cmds), vec![]);
        assert_eq!(decode_with(Some(0x5A), Direction::Tx, cmds), vec![]);
    }

    #[test]
    fn station_reads_the_rigs_answers() {
        let frames: [&[u8]; 4] = [
            // 0F 00: split off.
            &[0xFE, 0xFE, 0xE0, 0x5A, 0x0F, 0x00, 0xFD],
            // 25 00: selected VFO at 7 074 000 Hz (00 40 07 07 00).
            &[
                0xFE, 0xFE, 0xE0, 0x5A, 0x25, 0x00, 0x00, 0x40, 0x07, 0x07, 0x00, 0xFD,
            ],
            // 1C 00 01: transmitting; FB: OK.
            &[0xFE, 0xFE, 0xE0, 0x5A, 0x1C, 0x00, 0x01, 0xFD],
            &[0xFE, 0xFE, 0xE0, 0x5A, 0xFB, 0xFD],
        ];
        let answers = &frames.concat();
        assert_eq!(
            station(Direction::Rx, answers),
            vec![
                RigEvent::Split {
                    on: false,
                    seen: Seen::Report
                },
                RigEvent::SelectedFrequency {
                    hz: 7_074_000,
                    seen: Seen::Report
                },
                RigEvent::Transmit { on: true },
            ]
        );
        // A bad digit in a VFO frequency answer is named; exchange (07 B0)
        // names no VFO.
        let bad: [&[u8]; 2] = [
            &[
                0xFE, 0xFE, 0xE0, 0x5A, 0x25, 0x01, 0x0A, 0x40, 0x07, 0x07, 0x00, 0xFD,
            ],
            &[0xFE, 0xFE, 0x5A, 0xE0, 0x07, 0xB0, 0xFD],
        ];
        assert_eq!(
            station(Direction::Rx, &bad.concat()),
            vec![RigEvent::Reject {
                reason: RejectReason::BadDigit,
                bytes: 12
            }]
        );
    }
}
