//! The text family: `<two upper-case letters><payload>;`.
//!
//! A message is the printable ASCII run ending at the terminator. Bytes that
//! are not printable ASCII (line noise: 0x00, 0xFF, anything with the high bit
//! set, control characters) cannot belong to a message: they and the
//! printable bytes before them since the last terminator are one run of
//! garbage, and a new message may start right after them. A printable run
//! that does not parse (or reads as a command we do not know) is searched for
//! the last place where a report of a known command starts and runs to its
//! end: printable noise, or a message cut short, glued to the front of a
//! report costs the noise, not the report. A message longer than the
//! dialect allows is rejected as overlong and skipped to the next terminator,
//! keeping only its last bytes (the longest message's worth) for that search,
//! without growing the buffer.
//!
//! Complete messages are parsed with nom: the two-letter command, then the
//! payload according to the command.

use nom::number::complete::be_u16;
use nom::IResult;

mod dialect;
pub use dialect::{StatusFlags, TextMeter, TextSpec, TransmitDigits, Vfo};

use super::swar::{ascii_digits, find_stop_or_unprintable};
use super::RejectRun;
use super::{
    plausible, Batch, DecodeStats, Direction, FamilyDecoder, Framing, OffsetKind, Outcome,
    RejectReason, RigEvent, Seen, Stream,
};

/// The text family's framing: its dialect, and whether station events are
/// wanted (see [`TextDecoder::station`]).
#[derive(Debug)]
pub struct Text {
    spec: TextSpec,
    station: bool,
}

/// Decoder for the text family.
pub type TextDecoder = FamilyDecoder<Text>;

impl TextDecoder {
    pub fn new(spec: TextSpec) -> TextDecoder {
        let cap = spec.max_message;
        FamilyDecoder::with_framing(
            Text {
                spec,
                station: false,
            },
            cap,
        )
    }

    /// A decoder that also emits station events: every VFO's frequency,
    /// the receive and transmit VFOs, from the rig (`Seen::Report`) and from
    /// sets going to it (`Seen::Command`), and transmit/receive commands
    /// going to the rig ([`RigEvent::TransmitCommand`]). Its `Frequency` and
    /// `Transmit` events are exactly the reporting decoder's.
    pub fn station(spec: TextSpec) -> TextDecoder {
        let cap = spec.max_message;
        FamilyDecoder::with_framing(
            Text {
                spec,
                station: true,
            },
            cap,
        )
    }
}

impl Framing for Text {
    fn feed_stream(
        &self,
        dir: Direction,
        s: &mut Stream,
        chunk: &[u8],
        out: &mut Vec<RigEvent>,
        stats: &mut DecodeStats,
    ) {
        let spec = &self.spec;
        let station = self.station;
        let term = spec.terminator;
        let mut rest = chunk;
        while !rest.is_empty() {
            if s.skipping {
                // Everything up to and including the terminator is overlong,
                // except a valid message at its end: the last bytes (as many
                // as the longest message) are held to be searched for one.
                let end = rest.iter().position(|&b| b == term);
                let seg = rest.get(..end.unwrap_or(rest.len())).unwrap_or_default();
                hold_tail(&mut s.buf, seg, spec.max_message, &mut s.run, out, stats);
                let Some(i) = end else { break };
                rest = rest.get(i + 1..).unwrap_or_default();
                s.skipping = false;
                match resync(spec, station, dir, &s.buf) {
                    Some((at, outcome)) => {
                        s.run.add(RejectReason::Overlong, at, out, stats);
                        outcome.emit(s.buf.len() - at + 1, &mut s.run, out, stats);
                    }
                    None => s
                        .run
                        .add(RejectReason::Overlong, s.buf.len() + 1, out, stats),
                }
                s.buf.clear();
                continue;
            }
            // The printable run up to the next terminator or noise byte is
            // taken whole: a message that arrives in one chunk is
            // interpreted where it lies, without copying it.
            let stop = find_stop_or_unprintable(rest, term);
            let span = rest.get(..stop.unwrap_or(rest.len())).unwrap_or_default();
            let room = spec.max_message.saturating_sub(s.buf.len());
            if span.len() > room {
                // A printable byte beyond the longest message: what is held,
                // the bytes that fill it, and that byte are overlong.
                // The last of them are held, in case a message starts there.
                let seg = span.get(..room + 1).unwrap_or_default();
                hold_tail(&mut s.buf, seg, spec.max_message, &mut s.run, out, stats);
                s.skipping = true;
                rest = rest.get(room + 1..).unwrap_or_default();
                continue;
            }
            let Some(i) = stop else {
                s.buf.extend_from_slice(span);
                break;
            };
            let b = rest.get(i).copied().unwrap_or(term);
            rest = rest.get(i + 1..).unwrap_or_default();
            if b == term {
                let msg: &[u8] = if s.buf.is_empty() {
                    span
                } else {
                    s.buf.extend_from_slice(span);
                    &s.buf
                };
                let outcome = interpret(spec, station, dir, msg);
                let len = msg.len() + 1;
                // A run that did not parse, or that reads as a command we
                // do not know (a message cut short, glued to the next one).
                let unparsed = match outcome {
                    Outcome::Reject(_) => true,
                    Outcome::Ignored => {
                        command(msg).is_some_and(|(_, c)| !spec.known_commands().any(|k| *k == c))
                    }
                    _ => false,
                };
                match outcome {
                    _ if unparsed => match resync(spec, station, dir, msg) {
                        // Noise glued to the front of a message costs the
                        // noise, not the message.
                        Some((at, found)) => {
                            s.run.add(RejectReason::Garbage, at, out, stats);
                            found.emit(len - at, &mut s.run, out, stats);
                        }
                        None => outcome.emit(len, &mut s.run, out, stats),
                    },
                    _ => outcome.emit(len, &mut s.run, out, stats),
                }
                s.buf.clear();
            } else {
                s.run.add(
                    RejectReason::Garbage,
                    s.buf.len() + span.len() + 1,
                    out,
                    stats,
                );
                s.buf.clear();
            }
        }
    }
}

/// Appends `seg` to the bytes held while skipping an overlong run, keeping
/// only the last `max` of them; the older ones are reported as overlong.
fn hold_tail(
    buf: &mut Vec<u8>,
    seg: &[u8],
    max: usize,
    run: &mut RejectRun,
    out: &mut Vec<RigEvent>,
    stats: &mut DecodeStats,
) {
    let total = buf.len() + seg.len();
    let drop = total.saturating_sub(max);
    if drop >= buf.len() {
        run.add(RejectReason::Overlong, drop, out, stats);
        buf.clear();
        buf.extend_from_slice(seg.get(drop - (total - seg.len())..).unwrap_or_default());
    } else {
        run.add(RejectReason::Overlong, drop, out, stats);
        buf.drain(..drop);
        buf.extend_from_slice(seg);
    }
}

/// In a run that did not parse (terminator stripped), the last position
/// after its first byte where a report of a known command starts and runs
/// to the end, and what that report is. Only printable bytes can be part of
/// it, and only a report counts (not a request, nor anything ignored).
///
/// The station decoder first looks where the reporting decoder would (and
/// takes what it finds there as a station decoder), and only if there is
/// nothing for the reporting decoder, for its own reports: so its
/// `Frequency` and `Transmit` events are always the reporting decoder's.
fn resync(spec: &TextSpec, station: bool, dir: Direction, run: &[u8]) -> Option<(usize, Outcome)> {
    let printable_from = run
        .iter()
        .rposition(|b| !(0x20..0x7F).contains(b))
        .map_or(1, |i| (i + 1).max(1));
    let search = |as_station: bool| {
        (printable_from..run.len().saturating_sub(1))
            .rev()
            .filter(|&at| {
                run.get(at..at + 2).is_some_and(|c| {
                    spec.known_commands().any(|k| k == c)
                        || (as_station && spec.station_commands().any(|k| k == c))
                })
            })
            .find_map(|at| {
                let outcome = interpret(spec, as_station, dir, run.get(at..)?);
                matches!(
                    outcome,
                    Outcome::One(_) | Outcome::Two(..) | Outcome::Many(_)
                )
                .then_some(at)
            })
    };
    let at = match search(false) {
        Some(at) => at,
        None if station => search(true)?,
        None => return None,
    };
    Some((at, interpret(spec, station, dir, run.get(at..)?)))
}

/// The two-letter command, and the payload after it. The parser's error
/// type is `()`: nothing is built per message.
#[inline(always)]
fn command(msg: &[u8]) -> Option<(&[u8], [u8; 2])> {
    // The two letters read as one big-endian `u16` and then checked: nom's
    // number parsers inline to a load, where `take` and `take_while_m_n`
    // each cost a call per message.
    let parsed: IResult<&[u8], u16, ()> = be_u16(msg);
    let (payload, code) = parsed.ok()?;
    let [a, b] = code.to_be_bytes();
    (a.is_ascii_uppercase() && b.is_ascii_uppercase()).then_some((payload, [a, b]))
}

/// Exactly `n` decimal digits, as a number.
#[inline(always)]
fn digits(field: &[u8], n: usize) -> Result<u64, RejectReason> {
    if field.len() != n {
        return Err(RejectReason::BadLength);
    }
    if let Some(value) = ascii_digits(field) {
        // Up to 16 digits, a word at a time.
        return Ok(value);
    }
    // Not digits, or a width the word reader does not take: one pass,
    // checking and accumulating. Up to 19 digits cannot overflow (10^19 −
    // 1 < 2^64; the dialect loader allows 18).
    let mut value: u64 = 0;
    let mut bad = false;
    for &d in field {
        let digit = d.wrapping_sub(b'0');
        bad |= digit > 9;
        value = value.wrapping_mul(10).wrapping_add(u64::from(digit));
    }
    if bad {
        return Err(RejectReason::BadDigit);
    }
    if n > 19 {
        // Not reachable with a loaded dialect; saturate as before.
        return Ok(field.iter().fold(0u64, |v, &d| {
            v.saturating_mul(10).saturating_add(u64::from(d - b'0'))
        }));
    }
    Ok(value)
}

#[inline(always)]
fn frequency(field: &[u8], n: usize) -> Result<RigEvent, RejectReason> {
    plausible(digits(field, n)?)
}

/// A transmit/receive message: no payload, or one digit.
fn transmit_payload(payload: &[u8], on: bool) -> Outcome {
    match payload {
        [] => Outcome::One(RigEvent::Transmit { on }),
        [d] if d.is_ascii_digit() => Outcome::One(RigEvent::Transmit { on }),
        [_] => Outcome::Reject(RejectReason::BadDigit),
        _ => Outcome::Reject(RejectReason::BadLength),
    }
}

/// A transmit-state message whose digit says (`TX0;` receive in a family
/// that gives the digits meanings); no digit is a read, not a report.
fn transmit_state(meaning: &TransmitDigits, payload: &[u8]) -> Outcome {
    match payload {
        [] if meaning.bare_is_read => Outcome::Ignored,
        [] => Outcome::One(RigEvent::Transmit { on: true }),
        [d] => match meaning.means_transmit(*d) {
            Some(on) => Outcome::One(RigEvent::Transmit { on }),
            None => Outcome::Reject(RejectReason::BadDigit),
        },
        _ => Outcome::Reject(RejectReason::BadLength),
    }
}

/// What one complete message (printable, terminator stripped) amounts to.
fn interpret(spec: &TextSpec, station: bool, dir: Direction, msg: &[u8]) -> Outcome {
    if msg.is_empty() {
        // A bare terminator: harmless, used to clear a rig's input.
        return Outcome::Ignored;
    }
    if dir == Direction::Tx {
        return if station {
            interpret_command(spec, msg)
        } else {
            Outcome::Ignored
        };
    }
    let Some((payload, cmd)) = command(msg) else {
        return Outcome::Reject(if msg.len() < 2 {
            RejectReason::BadLength
        } else {
            RejectReason::Unknown
        });
    };
    let as_outcome = |r: Result<RigEvent, RejectReason>| match r {
        Ok(e) => Outcome::One(e),
        Err(reason) => Outcome::Reject(reason),
    };
    if cmd == spec.vfo_a || cmd == spec.vfo_b {
        let vfo = if cmd == spec.vfo_a { Vfo::A } else { Vfo::B };
        if payload.is_empty() {
            // A read request.
            return Outcome::Ignored;
        }
        if vfo != spec.active_vfo {
            // The VFO the operator is not on: only the station decoder
            // reports it, and a malformed one is ignored, as by the
            // reporting decoder.
            return match frequency(payload, spec.digits) {
                Ok(RigEvent::Frequency { hz }) if station => Outcome::One(RigEvent::Vfo {
                    vfo,
                    hz,
                    seen: Seen::Report,
                }),
                _ => Outcome::Ignored,
            };
        }
        return match frequency(payload, spec.digits) {
            Ok(e @ RigEvent::Frequency { hz }) if station => Outcome::Two(
                e,
                RigEvent::Vfo {
                    vfo,
                    hz,
                    seen: Seen::Report,
                },
            ),
            r => as_outcome(r),
        };
    }
    if station {
        if let Some(e) = select_vfo(spec, cmd, payload, Seen::Report) {
            return Outcome::One(e);
        }
        if let Some(outcome) = meter_answer(spec, cmd, payload) {
            return outcome;
        }
    }
    if cmd == spec.status {
        if payload.is_empty() {
            return Outcome::Ignored;
        }
        if payload.len() != spec.status_length {
            return Outcome::Reject(RejectReason::BadLength);
        }
        let f0 = spec.status_frequency_offset;
        let field = payload.get(f0..f0 + spec.digits).unwrap_or_default();
        let freq = match frequency(field, spec.digits) {
            Ok(e) => e,
            Err(reason) => return Outcome::Reject(reason),
        };
        // `None`: this family's status answer does not say.
        let on = match spec.status_transmit_offset.map(|at| payload.get(at)) {
            None => None,
            Some(Some(b'0')) => Some(false),
            Some(Some(b'1')) => Some(true),
            Some(_) => return Outcome::Reject(RejectReason::BadDigit),
        };
        if station {
            return status_station(spec, payload, freq, on);
        }
        return match on {
            Some(on) => Outcome::Two(freq, RigEvent::Transmit { on }),
            None => Outcome::One(freq),
        };
    }
    if cmd == spec.transmit_on {
        return match &spec.transmit_digits {
            Some(meaning) => transmit_state(meaning, payload),
            None => transmit_payload(payload, true),
        };
    }
    if Some(cmd) == spec.transmit_off {
        return transmit_payload(payload, false);
    }
    Outcome::Ignored
}

/// A status answer read by the station decoder: the reporting decoder's
/// frequency and transmit events first, then what the dialect's status
/// flags say (the VFO in use and its frequency, split, RIT and XIT with
/// their shared offset). A flag that is not one the dialect names is left
/// out, never a reason to lose the frequency and transmit state.
fn status_station(spec: &TextSpec, payload: &[u8], freq: RigEvent, on: Option<bool>) -> Outcome {
    let mut b = Batch::new();
    b.push(freq);
    if let Some(on) = on {
        b.push(RigEvent::Transmit { on });
    }
    let seen = Seen::Report;
    let flag = |at: usize| match payload.get(at) {
        Some(b'0') => Some(false),
        Some(b'1') => Some(true),
        _ => None,
    };
    let st = &spec.status_station;
    let vfo = match st.vfo.and_then(|at| payload.get(at)) {
        Some(c) if *c == spec.select_a => Some(Vfo::A),
        Some(c) if *c == spec.select_b => Some(Vfo::B),
        _ => None,
    };
    if let (Some(vfo), RigEvent::Frequency { hz }) = (vfo, freq) {
        b.push(RigEvent::Vfo { vfo, hz, seen });
        b.push(RigEvent::ReceiveVfo { vfo, seen });
    }
    if let Some(on) = st.split.and_then(flag) {
        b.push(RigEvent::Split { on, seen });
    }
    let hz = offset_hz(payload, st.offset, st.offset_digits);
    for (kind, at) in [(OffsetKind::Rit, st.rit), (OffsetKind::Xit, st.xit)] {
        if let Some(on) = flag(at) {
            b.push(RigEvent::Offset { kind, on, hz, seen });
        }
    }
    Outcome::Many(b)
}

/// A meter read's answer from the rig (station decoder): the answer's
/// letters and prefix, then the meter's digits. None: not a meter's answer
/// (another command, or the same letters with another prefix, such as
/// another meter of a rig that reads one at a time).
fn meter_answer(spec: &TextSpec, cmd: [u8; 2], payload: &[u8]) -> Option<Outcome> {
    let (m, field) = spec.meters.iter().find_map(|m| {
        let field = payload.strip_prefix(m.prefix.as_slice())?;
        (m.command == cmd).then_some((m, field))
    })?;
    if field.is_empty() {
        // The read itself, echoed: nothing to report.
        return Some(Outcome::Ignored);
    }
    Some(match digits(field, m.digits) {
        Ok(raw) => Outcome::One(RigEvent::Meter {
            kind: m.kind,
            // At most four digits (the loader's limit): below 10 000.
            raw: u16::try_from(raw).unwrap_or(u16::MAX),
        }),
        Err(reason) => Outcome::Reject(reason),
    })
}

/// A signed offset field: `+` or `-`, then `digits` decimal digits.
fn offset_hz(payload: &[u8], at: usize, digits: usize) -> Option<i32> {
    let (sign, field) = payload.get(at..at + 1 + digits)?.split_first()?;
    let magnitude = i32::try_from(self::digits(field, digits).ok()?).ok()?;
    match sign {
        b'+' => Some(magnitude),
        b'-' => Some(-magnitude),
        _ => None,
    }
}

/// A receive- or transmit-VFO message naming VFO A or B: the station
/// event, or None (a read, another payload such as a memory channel, or
/// another command). None leaves the message to be handled as by the
/// reporting decoder, to which these commands are unknown.
fn select_vfo(spec: &TextSpec, cmd: [u8; 2], payload: &[u8], seen: Seen) -> Option<RigEvent> {
    let vfo = match payload {
        [c] if *c == spec.select_a => Vfo::A,
        [c] if *c == spec.select_b => Vfo::B,
        _ => return None,
    };
    if cmd == spec.receive_vfo {
        Some(RigEvent::ReceiveVfo { vfo, seen })
    } else if cmd == spec.transmit_vfo {
        Some(RigEvent::TransmitVfo { vfo, seen })
    } else {
        None
    }
}

/// What a complete message going to the rig amounts to (station decoder):
/// a frequency set, a receive/transmit VFO set, a transmit or receive
/// command. Reads (a command without payload) are queries, not sets. A
/// malformed set is rejected with its reason; the reporting decoder's other
/// commands and unknown ones are ignored.
fn interpret_command(spec: &TextSpec, msg: &[u8]) -> Outcome {
    let Some((payload, cmd)) = command(msg) else {
        return Outcome::Reject(if msg.len() < 2 {
            RejectReason::BadLength
        } else {
            RejectReason::Unknown
        });
    };
    if cmd == spec.vfo_a || cmd == spec.vfo_b {
        if payload.is_empty() {
            return Outcome::Ignored;
        }
        let vfo = if cmd == spec.vfo_a { Vfo::A } else { Vfo::B };
        return match frequency(payload, spec.digits) {
            Ok(RigEvent::Frequency { hz }) => Outcome::One(RigEvent::Vfo {
                vfo,
                hz,
                seen: Seen::Command,
            }),
            Ok(_) => Outcome::Ignored,
            Err(reason) => Outcome::Reject(reason),
        };
    }
    if let Some(e) = select_vfo(spec, cmd, payload, Seen::Command) {
        return Outcome::One(e);
    }
    if cmd == spec.transmit_on || Some(cmd) == spec.transmit_off {
        // In a family whose digit says (`TX0;` receive, `TX;` a read), the
        // digit decides here too.
        let outcome = match (&spec.transmit_digits, cmd == spec.transmit_on) {
            (Some(meaning), true) => transmit_state(meaning, payload),
            (_, on) => transmit_payload(payload, on),
        };
        return match outcome {
            Outcome::One(RigEvent::Transmit { on }) => {
                Outcome::One(RigEvent::TransmitCommand { on })
            }
            other => other,
        };
    }
    Outcome::Ignored
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rig::Dialect;

    fn decode_in(dialect: &str, dir: Direction, bytes: &[u8]) -> Vec<RigEvent> {
        let mut d = Dialect::builtin(dialect).unwrap().decoder(None);
        let mut out = Vec::new();
        d.feed(dir, bytes, &mut out);
        d.finish(&mut out);
        out
    }

    fn decode(bytes: &[u8]) -> Vec<RigEvent> {
        decode_in("text-semicolon", Direction::Rx, bytes)
    }

    fn freq(hz: u64) -> RigEvent {
        RigEvent::Frequency { hz }
    }

    fn reject(reason: RejectReason, bytes: usize) -> RigEvent {
        RigEvent::Reject { reason, bytes }
    }

    /// A status payload of the built-in 11-digit layout (35 characters,
    /// frequency at 0, transmit flag at 26), filled with invented values.
    fn status(hz: u64, tx: bool) -> Vec<u8> {
        let mut p = format!("{hz:011}").into_bytes();
        p.resize(35, b'0');
        p[26] = if tx { b'1' } else { b'0' };
        let mut m = b"IF".to_vec();
        m.extend_from_slice(&p);
        m.push(b';');
        m
    }

    #[test]
    fn vfo_a_transmit_receive() {
        assert_eq!(decode(b"FA00014074000;"), vec![freq(14_074_000)]);
        assert_eq!(
            decode(b"TX;TX0;RX;"),
            vec![
                RigEvent::Transmit { on: true },
                RigEvent::Transmit { on: true },
                RigEvent::Transmit { on: false }
            ]
        );
    }

    #[test]
    fn vfo_b_ignored_when_a_is_active() {
        assert_eq!(decode(b"FB00007074000;"), vec![]);
    }

    #[test]
    fn vfo_b_counts_when_the_dialect_says_b_is_active() {
        let text = include_str!("../../../protocols/text-semicolon.toml")
            .replace("active_vfo = \"A\"", "active_vfo = \"B\"");
        let d = Dialect::parse(&text, std::path::Path::new("b.toml")).unwrap();
        assert_eq!(d.encode_frequency(7_074_000, 0), b"FB00007074000;".to_vec());
        let mut dec = d.decoder(None);
        let mut out = Vec::new();
        dec.feed(Direction::Rx, b"FA00014074000;FB00007074000;", &mut out);
        assert_eq!(out, vec![freq(7_074_000)]);
    }

    #[test]
    fn status_carries_frequency_and_transmit() {
        assert_eq!(
            decode(&status(7_074_000, true)),
            vec![freq(7_074_000), RigEvent::Transmit { on: true }]
        );
        let mut bad_flag = status(7_074_000, false);
        bad_flag[2 + 26] = b'x';
        assert_eq!(decode(&bad_flag), vec![reject(RejectReason::BadDigit, 38)]);
    }

    #[test]
    fn requests_other_commands_and_tx_are_ignored() {
        assert_eq!(decode(b"FA;IF;MD2;;"), vec![]);
        assert_eq!(
            decode_in("text-semicolon", Direction::Tx, b"FA00014074000;TX;"),
            vec![]
        );
    }

    #[test]
    fn rejects_with_reasons() {
        assert_eq!(
            decode(b"FA0001407400;"),
            vec![reject(RejectReason::BadLength, 13)]
        );
        assert_eq!(
            decode(b"FA0001407400O;"),
            vec![reject(RejectReason::BadDigit, 14)]
        );
        assert_eq!(
            decode(b"fa00014074000;"),
            vec![reject(RejectReason::Unknown, 14)]
        );
        assert_eq!(decode(b"F;"), vec![reject(RejectReason::BadLength, 2)]);
        assert_eq!(
            decode(b"FA00000050000;"),
            vec![reject(RejectReason::OutOfRange, 14)]
        );
        assert_eq!(decode(b"TX12;"), vec![reject(RejectReason::BadLength, 5)]);
    }

    #[test]
    fn noise_before_a_message_is_one_garbage_run() {
        let mut bytes = vec![0xFF, 0x00, b'F', b'A', b'0', 0x80];
        bytes.extend_from_slice(b"FA00014074000;");
        assert_eq!(
            decode(&bytes),
            vec![reject(RejectReason::Garbage, 6), freq(14_074_000)]
        );
    }

    #[test]
    fn long_run_without_terminator_stays_bounded() {
        let mut d = Dialect::builtin("text-semicolon").unwrap().decoder(None);
        let mut out = Vec::new();
        let run = vec![b'7'; 10_000];
        for _ in 0..10 {
            d.feed(Direction::Rx, &run, &mut out);
            assert!(d.buffered() <= 48);
        }
        d.feed(Direction::Rx, b";FA00014074000;", &mut out);
        // 100 001 bytes of overlong run: one full report piece, then the rest.
        assert_eq!(
            out,
            vec![
                reject(RejectReason::Overlong, 65_536),
                reject(RejectReason::Overlong, 100_001 - 65_536),
                freq(14_074_000)
            ]
        );
    }

    #[test]
    fn printable_noise_glued_to_a_report_costs_only_the_noise() {
        // Regression (issue 10): five bytes of noise without a terminator
        // straight before a report made the whole run one Unknown.
        assert_eq!(
            decode(b"k7#q2FA00021074000;"),
            vec![reject(RejectReason::Garbage, 5), freq(21_074_000)]
        );
        // Glued to a transmit report and to a status answer.
        assert_eq!(
            decode(b"zz9TX;"),
            vec![
                reject(RejectReason::Garbage, 3),
                RigEvent::Transmit { on: true }
            ]
        );
        let mut glued = b"0x".to_vec();
        glued.extend_from_slice(&status(7_074_000, false));
        assert_eq!(
            decode(&glued),
            vec![
                reject(RejectReason::Garbage, 2),
                freq(7_074_000),
                RigEvent::Transmit { on: false }
            ]
        );
    }

    #[test]
    fn a_report_after_a_truncated_message_is_decoded() {
        // Regression (issue 11): the first message lost its end.
        assert_eq!(
            decode(b"FA000140FA00014074000;"),
            vec![reject(RejectReason::Garbage, 8), freq(14_074_000)]
        );
        // A request and unknown text are not reports: nothing to resync to.
        assert_eq!(decode(b"xyFA;"), vec![reject(RejectReason::Unknown, 5)]);
    }

    #[test]
    fn a_report_after_a_long_run_without_terminator_is_decoded() {
        // Regression (issue 11): 3000 printable bytes, no terminator, then a
        // report glued on; in pieces of every size the report survives.
        let mut bytes = vec![b'5'; 3000];
        bytes.extend_from_slice(b"FA00014074000;");
        let want = vec![reject(RejectReason::Overlong, 3000), freq(14_074_000)];
        assert_eq!(decode(&bytes), want);
        for piece in [1, 7, 48, 49, 500] {
            let mut d = Dialect::builtin("text-semicolon").unwrap().decoder(None);
            let mut out = Vec::new();
            for c in bytes.chunks(piece) {
                d.feed(Direction::Rx, c, &mut out);
                assert!(d.buffered() <= 48);
            }
            d.finish(&mut out);
            assert_eq!(out, want, "pieces of {piece}");
        }
        // Line noise inside the long run does not spoil the report after it.
        let mut noisy = vec![b'5'; 100];
        noisy.extend_from_slice(&[0xFF, 0x00]);
        noisy.extend_from_slice(&[b'5'; 100]);
        noisy.extend_from_slice(b"TX;");
        let out = decode(&noisy);
        assert_eq!(out.last(), Some(&RigEvent::Transmit { on: true }));
    }

    fn station_in(dir: Direction, bytes: &[u8]) -> Vec<RigEvent> {
        let mut d = Dialect::builtin("text-semicolon")
            .unwrap()
            .station_decoder(None);
        let mut out = Vec::new();
        d.feed(dir, bytes, &mut out);
        d.finish(&mut out);
        out
    }

    fn vfo(vfo: Vfo, hz: u64, seen: Seen) -> RigEvent {
        RigEvent::Vfo { vfo, hz, seen }
    }

    // The messages below are worked by hand from the text family's frame
    // layout (two letters, payload, `;`); command letters FA/FB/FR/FT/TX/RX
    // and the 0 = VFO A, 1 = VFO B payloads are recalled from the family's
    // published PC command reference.

    #[test]
    fn station_reports_both_vfos_and_the_selected_ones() {
        assert_eq!(
            station_in(Direction::Rx, b"FA00014195000;FB00014200000;FR0;FT1;TX;RX;"),
            vec![
                freq(14_195_000),
                vfo(Vfo::A, 14_195_000, Seen::Report),
                vfo(Vfo::B, 14_200_000, Seen::Report),
                RigEvent::ReceiveVfo {
                    vfo: Vfo::A,
                    seen: Seen::Report
                },
                RigEvent::TransmitVfo {
                    vfo: Vfo::B,
                    seen: Seen::Report
                },
                RigEvent::Transmit { on: true },
                RigEvent::Transmit { on: false },
            ]
        );
        // Reads and a memory-channel selection are not VFO reports.
        assert_eq!(station_in(Direction::Rx, b"FA;FB;FR;FT;FR2;"), vec![]);
    }

    #[test]
    fn station_sees_sets_and_keying_going_to_the_rig() {
        assert_eq!(
            station_in(Direction::Tx, b"FA;FA00021074000;FT1;TX;IF;RX0;"),
            vec![
                vfo(Vfo::A, 21_074_000, Seen::Command),
                RigEvent::TransmitVfo {
                    vfo: Vfo::B,
                    seen: Seen::Command
                },
                RigEvent::TransmitCommand { on: true },
                RigEvent::TransmitCommand { on: false },
            ]
        );
        // A malformed set is rejected with its reason; a set glued to noise
        // is found after it.
        assert_eq!(
            station_in(Direction::Tx, b"FA0002107400;k7#FB00007074000;"),
            vec![
                reject(RejectReason::BadLength, 13),
                reject(RejectReason::Garbage, 3),
                vfo(Vfo::B, 7_074_000, Seen::Command),
            ]
        );
    }

    #[test]
    fn station_keeps_the_reporting_decoders_resync() {
        // A receive-VFO message with a payload it does not understand is
        // unknown, as to the reporting decoder: the report glued to it is
        // still found.
        let bytes = b"FRxFA00014074000;";
        assert_eq!(
            decode(bytes),
            vec![reject(RejectReason::Garbage, 3), freq(14_074_000)]
        );
        assert_eq!(
            station_in(Direction::Rx, bytes),
            vec![
                reject(RejectReason::Garbage, 3),
                freq(14_074_000),
                vfo(Vfo::A, 14_074_000, Seen::Report)
            ]
        );
    }

    #[test]
    fn station_reads_the_status_answers_flags() {
        // A status answer laid out by hand at the built-in dialect's
        // offsets (recalled from the family's published PC command
        // reference): frequency, 5 unused, RIT/XIT offset +0150, RIT on,
        // XIT off, memory 000, receive, mode 2, VFO A, scan 0, split on,
        // 4 unused.
        let msg = [
            "IF",
            "00014195000",
            "00000",
            "+0150",
            "1",
            "0",
            "000",
            "0",
            "2",
            "0",
            "0",
            "1",
            "0000",
            ";",
        ]
        .concat();
        let seen = Seen::Report;
        assert_eq!(
            station_in(Direction::Rx, msg.as_bytes()),
            vec![
                freq(14_195_000),
                RigEvent::Transmit { on: false },
                vfo(Vfo::A, 14_195_000, seen),
                RigEvent::ReceiveVfo { vfo: Vfo::A, seen },
                RigEvent::Split { on: true, seen },
                RigEvent::Offset {
                    kind: OffsetKind::Rit,
                    on: true,
                    hz: Some(150),
                    seen
                },
                RigEvent::Offset {
                    kind: OffsetKind::Xit,
                    on: false,
                    hz: Some(150),
                    seen
                },
            ]
        );
        // The reporting decoder reads frequency and transmit only.
        assert_eq!(
            decode(msg.as_bytes()),
            vec![freq(14_195_000), RigEvent::Transmit { on: false }]
        );
        // Flags it cannot read (a memory channel in the VFO field, a
        // negative offset, junk in split) are left out, not the answer.
        let odd = [
            "IF",
            "00007074000",
            "00000",
            "-0020",
            "0",
            "1",
            "000",
            "1",
            "2",
            "2",
            "0",
            "x",
            "0000",
            ";",
        ]
        .concat();
        assert_eq!(
            station_in(Direction::Rx, odd.as_bytes()),
            vec![
                freq(7_074_000),
                RigEvent::Transmit { on: true },
                RigEvent::Offset {
                    kind: OffsetKind::Rit,
                    on: false,
                    hz: Some(-20),
                    seen
                },
                RigEvent::Offset {
                    kind: OffsetKind::Xit,
                    on: true,
                    hz: Some(-20),
                    seen
                },
            ]
        );
    }

    #[test]
    fn nine_digit_dialect() {
        assert_eq!(
            decode_in("text-semicolon-9", Direction::Rx, b"FA014074000;"),
            vec![freq(14_074_000)]
        );
        assert_eq!(
            decode_in("text-semicolon-9", Direction::Rx, b"FA00014074000;"),
            vec![reject(RejectReason::BadLength, 14)]
        );
    }
}
