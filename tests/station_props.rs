//! The station decoder against the reporting decoder, on any stream: what
//! the follow core decides on today (`Frequency`, `Transmit`) is the same,
//! in the same order, whatever else the station decoder adds, and rejects
//! are the same too on rig streams made of the reporting decoder's own
//! messages and noise. Both stay bounded and chunking-independent.
//! The block family is left out, as in tests/rig_props.rs: these streams
//! run in one direction, and a block answer means nothing without the read
//! before it (its properties are in src/rig/block/tests.rs).

use proptest::prelude::*;
use tuneward::rig::{Decode, Dialect, Direction, RigEvent};

fn run(dec: &mut dyn Decode, dir: Direction, chunks: &[Vec<u8>]) -> Vec<RigEvent> {
    let mut out = Vec::new();
    for c in chunks {
        dec.feed(dir, c, &mut out);
        assert!(dec.buffered() <= 4200, "buffer grew to {}", dec.buffered());
    }
    dec.finish(&mut out);
    out
}

fn old_kinds(events: &[RigEvent], with_rejects: bool) -> Vec<RigEvent> {
    events
        .iter()
        .copied()
        .filter(|e| !e.is_station_event())
        .filter(|e| with_rejects || !matches!(e, RigEvent::Reject { .. }))
        .collect()
}

/// Pieces a station's port carries: the reporting decoder's messages,
/// reads, malformed ones, noise, in both families; with `station_pieces`,
/// messages only the station decoder reports too (the inactive VFO, the
/// receive/transmit VFO, meter answers, cut short).
fn piece(station_pieces: bool) -> impl Strategy<Value = Vec<u8>> {
    let mut texts: Vec<&'static [u8]> = vec![
        b"FA00014074000;",
        b"FA014074000;",
        b"FA;",
        b"IF;",
        b"TX;",
        b"RX;",
        b"TX0;",
        b"FA0001407400;",
        b";",
        b"IF00014074000000000000000000000000000;",
        b"IF00007074000000000000000000010000000;",
        b"\xFE\xFE\xE0\x5A\x00\x00\x40\x07\x14\x00\xFD",
        b"\xFE\xFE\x5A\xE0\x1C\x00\x01\xFD",
    ];
    if station_pieces {
        texts.extend_from_slice(&[
            b"\xFE\xFE\x5A\xE0\x05\x00\x00\x20\x14\x00\xFD",
            b"\xFE\xFE\x5A\xE0\x07\x01\xFD",
            b"\xFE\xFE\xE0\x5A\x0F\x01\xFD",
            b"\xFE\xFE\xE0\x5A\x25\x00\x00\x40\x07\x07\x00\xFD",
            b"\xFE\xFE\x5A\xE0\x25\x01\x00\x40\x07\x07\x0A\xFD",
            b"\xFE\xFE\x5A\xE0\x1C\x00\x01\xFD",
            b"\xFE\xFE\x5A\xE0\x1C\x00\x00\xFD",
            b"IF0001419500000000+015010000020010000;",
            b"FB00007074000;",
            b"FR0;",
            b"FR1;",
            b"FT0;",
            b"FT1;",
            b"FR;",
            b"FT2;",
            b"FRx",
            b"FT",
            // Meter reads and their answers (the dialects' [meter]),
            // malformed ones and another meter's.
            b"\xFE\xFE\x5A\xE0\x15\x02\xFD",
            b"\xFE\xFE\xE0\x5A\x15\x02\x01\x20\xFD",
            b"\xFE\xFE\xE0\x5A\x15\x12\x00\x48\xFD",
            b"\xFE\xFE\xE0\x5A\x15\x02\x0A\x20\xFD",
            b"\xFE\xFE\xE0\x5A\x15\x11\x01\xFD",
            b"SM0;",
            b"SM00015;",
            b"SM0120;",
            b"RM10005;",
            b"RM6064;",
            b"RM20005;",
            b"SM0001x;",
        ]);
    }
    prop_oneof![
        3 => proptest::sample::select(texts).prop_map(|t| t.to_vec()),
        1 => proptest::collection::vec(any::<u8>(), 0..6),
        1 => proptest::collection::vec(0x20u8..0x7F, 0..6),
    ]
}

fn stream(station_pieces: bool) -> impl Strategy<Value = Vec<u8>> {
    proptest::collection::vec(piece(station_pieces), 0..40).prop_map(|v| v.concat())
}

fn chunked(bytes: &[u8], size: usize) -> Vec<Vec<u8>> {
    bytes.chunks(size.max(1)).map(<[u8]>::to_vec).collect()
}

proptest! {
    #[test]
    fn station_decoder_decides_like_the_reporting_one(
        name in proptest::sample::select(Dialect::builtin_names().iter().copied().filter(|n| !n.starts_with("block")).collect::<Vec<_>>()),
        rx in any::<bool>(),
        bytes in stream(true),
        size in 1usize..50,
    ) {
        let d = Dialect::builtin(name).expect("built-in");
        let dir = if rx { Direction::Rx } else { Direction::Tx };
        let old = run(d.decoder(None).as_mut(), dir, &chunked(&bytes, size));
        let new_whole = run(d.station_decoder(None).as_mut(), dir, std::slice::from_ref(&bytes));
        let new = run(d.station_decoder(None).as_mut(), dir, &chunked(&bytes, size));
        prop_assert_eq!(&new, &new_whole, "chunking changed the station events");
        prop_assert_eq!(old_kinds(&new, false), old_kinds(&old, false));
        if dir == Direction::Tx {
            // Nothing from the rig is reported from bytes going to it.
            let from_rig = new
                .iter()
                .filter(|e| matches!(e, RigEvent::Frequency { .. } | RigEvent::Transmit { .. }))
                .count();
            prop_assert_eq!(from_rig, 0);
        }
    }

    #[test]
    fn station_decoder_rejects_like_the_reporting_one_on_its_messages(
        name in proptest::sample::select(Dialect::builtin_names().iter().copied().filter(|n| !n.starts_with("block")).collect::<Vec<_>>()),
        bytes in stream(false),
        size in 1usize..50,
    ) {
        let d = Dialect::builtin(name).expect("built-in");
        let old = run(d.decoder(None).as_mut(), Direction::Rx, &chunked(&bytes, size));
        let new = run(d.station_decoder(None).as_mut(), Direction::Rx, &chunked(&bytes, size));
        prop_assert_eq!(old_kinds(&new, true), old);
    }
}

proptest! {
    #[test]
    fn station_decoder_takes_any_bytes_and_stays_bounded(
        name in proptest::sample::select(Dialect::builtin_names().iter().copied().filter(|n| !n.starts_with("block")).collect::<Vec<_>>()),
        rx in any::<bool>(),
        bytes in proptest::collection::vec(any::<u8>(), 0..600),
        size in 1usize..40,
    ) {
        let d = Dialect::builtin(name).expect("built-in");
        let dir = if rx { Direction::Rx } else { Direction::Tx };
        let whole = run(d.station_decoder(Some(0x5A)).as_mut(), dir, std::slice::from_ref(&bytes));
        let pieces = run(d.station_decoder(Some(0x5A)).as_mut(), dir, &chunked(&bytes, size));
        prop_assert_eq!(whole, pieces);
    }
}
