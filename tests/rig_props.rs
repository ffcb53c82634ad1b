//! Properties of the rig decoders, for every built-in dialect: no input makes
//! them panic or grow, chunking never changes what they say, valid frames
//! survive splitting and line noise, and corruption never invents a
//! frequency beyond what the protocol itself cannot detect.

use proptest::prelude::*;
use tuneward::rig::dialect::Spec;
use tuneward::rig::{
    Decode, Dialect, Direction, Family, RejectReason, RigEvent, MAX_PLAUSIBLE_HZ, MIN_PLAUSIBLE_HZ,
};

const RIG: u8 = 0x5A;

/// The self-reporting families' built-ins: the block family answers only
/// requests, so its properties live with its decoder (src/rig/block/).
/// The scenario writer's reads (`Wire::request`) do not make these
/// applicable: they feed the rig's bytes alone, and a block answer means
/// nothing without the read before it and its time (the family's only
/// resynchronisation is a quiet gap).
fn reporting() -> Vec<&'static str> {
    Dialect::builtin_names()
        .iter()
        .copied()
        .filter(|n| Dialect::builtin(n).is_some_and(|d| d.family() != Family::Block))
        .collect()
}

fn dialect(i: usize) -> Dialect {
    let names = reporting();
    Dialect::builtin(names[i % names.len()]).expect("built-in dialect")
}

fn dialect_index() -> impl Strategy<Value = usize> {
    0..reporting().len()
}

/// Per-direction buffer bound promised by the decoders.
fn per_direction_bound(d: &Dialect) -> usize {
    match &d.spec {
        Spec::Binary(s) => s.max_frame + 1,
        Spec::Text(s) => s.max_message,
        Spec::Block(_) => unreachable!("not among the reporting dialects"),
    }
}

/// Largest frequency the dialect's field can carry, capped at plausibility.
fn max_hz(d: &Dialect) -> u64 {
    let digits = match &d.spec {
        Spec::Binary(s) => 2 * s.frequency_bytes as u32,
        Spec::Text(s) => s.digits as u32,
        Spec::Block(_) => unreachable!("not among the reporting dialects"),
    };
    (10u64.pow(digits) - 1).min(MAX_PLAUSIBLE_HZ)
}

fn split<'a>(data: &'a [u8], cuts: &[usize]) -> Vec<&'a [u8]> {
    let mut points: Vec<usize> = cuts.iter().map(|c| c % (data.len() + 1)).collect();
    points.sort_unstable();
    let mut out = Vec::new();
    let mut from = 0;
    for p in points {
        out.push(&data[from..p]);
        from = p;
    }
    out.push(&data[from..]);
    out
}

fn run(dec: &mut dyn Decode, dir: Direction, chunks: &[&[u8]]) -> Vec<RigEvent> {
    let mut out = Vec::new();
    for c in chunks {
        dec.feed(dir, c, &mut out);
    }
    dec.finish(&mut out);
    out
}

fn reports(events: &[RigEvent]) -> Vec<RigEvent> {
    events
        .iter()
        .copied()
        .filter(|e| !matches!(e, RigEvent::Reject { .. }))
        .collect()
}

#[derive(Debug, Clone, Copy)]
enum Item {
    Freq(u64),
    Transmit(bool),
}

fn items() -> impl Strategy<Value = Vec<(Item, Vec<u8>)>> {
    let item = prop_oneof![
        4 => (MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ).prop_map(Item::Freq),
        1 => any::<bool>().prop_map(Item::Transmit),
    ];
    // Garbage bytes drawn from 0..=0xFF and later mapped per family into
    // bytes that cannot start a frame.
    prop::collection::vec((item, prop::collection::vec(any::<u8>(), 0..12)), 0..8)
}

/// Maps an arbitrary byte into one that cannot be part of a frame start:
/// binary, anything but the preamble; text, non-printable bytes (noise).
fn noise(d: &Dialect, b: u8) -> u8 {
    match &d.spec {
        Spec::Binary(s) => {
            if b == s.preamble {
                0x00
            } else {
                b
            }
        }
        Spec::Block(_) => unreachable!("not among the reporting dialects"),
        Spec::Text(_) => {
            if (0x20..0x7F).contains(&b) {
                b | 0x80
            } else {
                b
            }
        }
    }
}

proptest! {
    #[test]
    fn arbitrary_bytes_never_panic_and_stay_bounded(
        di in dialect_index(),
        data in prop::collection::vec(any::<u8>(), 0..600),
        cuts in prop::collection::vec(any::<usize>(), 0..20),
        tx in any::<bool>(),
        addr in prop::option::of(any::<u8>()),
    ) {
        let d = dialect(di);
        let dir = if tx { Direction::Tx } else { Direction::Rx };
        let mut dec = d.decoder(addr);
        let mut out = Vec::new();
        for c in split(&data, &cuts) {
            dec.feed(dir, c, &mut out);
            prop_assert!(dec.buffered() <= per_direction_bound(&d));
        }
        dec.finish(&mut out);
        prop_assert_eq!(dec.buffered(), 0);
        if dir == Direction::Tx {
            prop_assert!(reports(&out).is_empty(), "{:?}", out);
        }
        let rejected: usize = out.iter().map(|e| match e { RigEvent::Reject { bytes, .. } => *bytes, _ => 0 }).sum();
        prop_assert!(rejected <= data.len());
        for e in &out {
            if let RigEvent::Frequency { hz } = e {
                prop_assert!((MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ).contains(hz));
            }
            if let RigEvent::Reject { bytes, .. } = e {
                prop_assert!(*bytes > 0);
            }
        }
        let s = dec.stats();
        prop_assert_eq!(s.rejects as usize, out.len() - reports(&out).len());
        prop_assert_eq!(s.reports as usize, reports(&out).len());
    }

    #[test]
    fn chunking_never_changes_the_outcome(
        di in dialect_index(),
        data in prop::collection::vec(any::<u8>(), 0..400),
        seed in prop::collection::vec(any::<u8>(), 0..400),
        cuts in prop::collection::vec(any::<usize>(), 0..30),
    ) {
        // Mix arbitrary bytes with pieces of valid frames so that frames,
        // restarts and overlong runs all occur.
        let d = dialect(di);
        let mut stream = data.clone();
        for (i, b) in seed.iter().enumerate() {
            if b % 7 == 0 {
                let at = (i * 31) % (stream.len() + 1);
                let f = d.encode_frequency(14_074_000 + u64::from(*b), RIG);
                stream.splice(at..at, f);
            }
        }
        let whole = run(d.decoder(None).as_mut(), Direction::Rx, &[&stream]);
        let pieces = run(d.decoder(None).as_mut(), Direction::Rx, &split(&stream, &cuts));
        prop_assert_eq!(pieces, whole);
    }

    /// The decoders take a frame that lies whole in a long read in one look
    /// (a fast path) and one that arrives byte by byte through the general
    /// path: both must decide alike, on streams thick with the bytes that
    /// matter (frame starts and ends, collision bytes, frames cut short or
    /// run together).
    #[test]
    fn the_fast_path_decides_as_the_general_one(
        di in dialect_index(),
        picks in prop::collection::vec((any::<u8>(), any::<u16>()), 0..300),
    ) {
        let d = dialect(di);
        let frame = d.encode_frequency(14_074_000, RIG);
        let tx = d.encode_transmit(true, RIG);
        // Every byte that appears in a frame, and a few that do not.
        let mut alphabet: Vec<u8> = frame.iter().chain(&tx).copied().collect();
        alphabet.extend([0x00, 0xFF, 0xFC, 0x80, b';', b'0']);
        let mut stream = Vec::new();
        for (kind, x) in picks {
            let x = usize::from(x);
            match kind % 8 {
                0 => stream.extend_from_slice(&d.encode_frequency(7_000_000 + x as u64 * 100, RIG)),
                1 => stream.extend_from_slice(&tx),
                // A frame cut short, or with one byte replaced.
                2 => stream.extend_from_slice(&frame[..x % frame.len()]),
                3 => {
                    let mut f = frame.clone();
                    let at = x % f.len();
                    f[at] = alphabet[(x >> 8) % alphabet.len()];
                    stream.extend_from_slice(&f);
                }
                _ => stream.push(alphabet[x % alphabet.len()]),
            }
        }
        let whole = run(d.decoder(None).as_mut(), Direction::Rx, &[&stream]);
        let bytes: Vec<&[u8]> = stream.chunks(1).collect();
        let one_by_one = run(d.decoder(None).as_mut(), Direction::Rx, &bytes);
        prop_assert_eq!(one_by_one, whole);
    }

    #[test]
    fn valid_frames_survive_splits_and_noise(
        di in dialect_index(),
        items in items(),
        lead in prop::collection::vec(any::<u8>(), 0..12),
        cuts in prop::collection::vec(any::<usize>(), 0..30),
    ) {
        let d = dialect(di);
        let mut stream: Vec<u8> = lead.iter().map(|&b| noise(&d, b)).collect();
        let mut stretches = usize::from(!lead.is_empty());
        let mut expected = Vec::new();
        for (item, garbage) in &items {
            match *item {
                Item::Freq(hz) => {
                    let hz = MIN_PLAUSIBLE_HZ + hz % (max_hz(&d) - MIN_PLAUSIBLE_HZ + 1);
                    stream.extend(d.encode_frequency(hz, RIG));
                    expected.push(RigEvent::Frequency { hz });
                }
                Item::Transmit(on) => {
                    stream.extend(d.encode_transmit(on, RIG));
                    expected.push(RigEvent::Transmit { on });
                }
            }
            stream.extend(garbage.iter().map(|&b| noise(&d, b)));
            stretches += usize::from(!garbage.is_empty());
        }
        let out = run(d.decoder(Some(RIG)).as_mut(), Direction::Rx, &split(&stream, &cuts));
        prop_assert_eq!(reports(&out), expected);
        let garbage_rejects = out.iter().filter(|e| matches!(e, RigEvent::Reject { reason: RejectReason::Garbage, .. })).count();
        prop_assert_eq!(out.len() - reports(&out).len(), garbage_rejects, "only garbage rejects: {:?}", out);
        // Adjacent stretches merge only when nothing separates them, which
        // cannot happen here: each is followed by a frame or the end.
        prop_assert_eq!(garbage_rejects, stretches);
    }

    #[test]
    fn encoded_frequency_decodes_to_itself(di in dialect_index(), hz in 0u64..1_000_000_000) {
        let d = dialect(di);
        let hz = hz % (max_hz(&d) + 1);
        let frame = d.encode_frequency(hz, RIG);
        let out = run(d.decoder(None).as_mut(), Direction::Rx, &[&frame]);
        if (MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ).contains(&hz) {
            prop_assert_eq!(out, vec![RigEvent::Frequency { hz }]);
        } else {
            prop_assert_eq!(out, vec![RigEvent::Reject { reason: RejectReason::OutOfRange, bytes: frame.len() }]);
        }
        // Sent to the rig, the same bytes are not a report.
        let out = run(d.decoder(None).as_mut(), Direction::Tx, &[&frame]);
        prop_assert!(reports(&out).is_empty());
    }

    #[test]
    fn flipped_bit_never_invents_a_frequency(
        di in dialect_index(),
        a in MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ,
        b in MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ,
        at in any::<usize>(),
        bit in 0u8..8,
    ) {
        let d = dialect(di);
        let span = max_hz(&d) - MIN_PLAUSIBLE_HZ + 1;
        let (a, b) = (MIN_PLAUSIBLE_HZ + a % span, MIN_PLAUSIBLE_HZ + b % span);
        let fa = d.encode_frequency(a, RIG);
        let fb = d.encode_frequency(b, RIG);
        let mut stream = [fa.clone(), fb.clone()].concat();
        let at = at % stream.len();
        stream[at] ^= 1 << bit;
        // Where the digits sit: binary, the BCD field before the terminator;
        // text, after the two command letters.
        let digits = |frame: &[u8]| match d.family() {
            Family::Binary => 5..frame.len() - 1,
            Family::Text => 2..frame.len() - 1,
            Family::Block => unreachable!("not among the reporting dialects"),
        };
        let in_digits = digits(&fa).contains(&at) || digits(&fb).map(|i| i + fa.len()).any(|i| i == at);
        let out = run(d.decoder(None).as_mut(), Direction::Rx, &[&stream]);
        let freqs: Vec<u64> = out.iter().filter_map(|e| match e { RigEvent::Frequency { hz } => Some(*hz), _ => None }).collect();
        prop_assert!(freqs.len() <= 2);
        for hz in freqs {
            if hz == a || hz == b {
                continue;
            }
            // Neither family carries a checksum: a flip that turns one digit
            // into another valid digit cannot be detected by any decoder.
            // Everything else must be caught.
            prop_assert!(in_digits, "flip at {} outside the digits produced {}", at, hz);
            let one_digit_off = |sent: u64| {
                let (x, y) = (format!("{sent:020}"), format!("{hz:020}"));
                x.bytes().zip(y.bytes()).filter(|(p, q)| p != q).count() == 1
            };
            prop_assert!(one_digit_off(a) || one_digit_off(b), "{} from {} / {}", hz, a, b);
        }
    }

    #[test]
    fn rig_address_filter_keeps_only_that_rig(
        addrs in prop::collection::vec(prop_oneof![Just(0x5Au8), Just(0x94u8), Just(0xE0u8), Just(0x00u8)], 1..10),
        filter in prop::option::of(prop_oneof![Just(0x5Au8), Just(0x94u8)]),
    ) {
        let d = Dialect::builtin("binary-bcd").unwrap();
        let mut stream = Vec::new();
        let mut expected = Vec::new();
        for (i, &addr) in addrs.iter().enumerate() {
            let hz = 7_000_000 + i as u64 * 1000;
            stream.extend(d.encode_frequency(hz, addr));
            let counts = addr != 0xE0 && filter.is_none_or(|f| f == addr);
            if counts {
                expected.push(RigEvent::Frequency { hz });
            }
        }
        let out = run(d.decoder(filter).as_mut(), Direction::Rx, &[&stream]);
        prop_assert_eq!(out, expected);
    }

    /// Whatever came before (line noise, a frame or message cut short, a
    /// long run with no terminator), a whole report after it is decoded:
    /// binary by the preamble, text by the search for where a report of a
    /// known command starts (issue 10 item 8, issue 11). Text noise has no
    /// capital letters, so it cannot itself spell a command.
    #[test]
    fn a_report_after_anything_is_decoded(
        di in dialect_index(),
        prefix in prop::collection::vec(any::<u8>(), 0..3200),
        cut in any::<usize>(),
        hz in MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ,
        transmit in prop::option::of(any::<bool>()),
        cuts in prop::collection::vec(any::<usize>(), 0..20),
    ) {
        let d = dialect(di);
        let hz = MIN_PLAUSIBLE_HZ + hz % (max_hz(&d) - MIN_PLAUSIBLE_HZ + 1);
        let (frame, want) = match transmit {
            Some(on) => (d.encode_transmit(on, RIG), RigEvent::Transmit { on }),
            None => (d.encode_frequency(hz, RIG), RigEvent::Frequency { hz }),
        };
        let mut stream: Vec<u8> = match d.family() {
            Family::Binary => prefix,
            Family::Text => prefix.iter().map(|b| if b.is_ascii_uppercase() { b.to_ascii_lowercase() } else { *b }).collect(),
            Family::Block => unreachable!("not among the reporting dialects"),
        };
        // Half the time, the start of a frame cut short just before it.
        if cut % 2 == 0 {
            let other = d.encode_frequency(7_074_000, RIG);
            stream.extend_from_slice(&other[..(cut / 2) % other.len()]);
        }
        stream.extend_from_slice(&frame);
        let out = run(d.decoder(None).as_mut(), Direction::Rx, &split(&stream, &cuts));
        let got = reports(&out);
        prop_assert_eq!(got.last(), Some(&want), "{:?}", out);
        let rejected: usize = out.iter().map(|e| match e { RigEvent::Reject { bytes, .. } => *bytes, _ => 0 }).sum();
        prop_assert!(rejected <= stream.len() - frame.len());
    }
}
