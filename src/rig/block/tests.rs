//! The block family against its published layout (recalled; see
//! protocols/block-5.toml): five-byte blocks, opcode last; the frequency
//! read `03` answered with four bytes of big-endian packed BCD in 10 Hz
//! units and a mode byte; the transmit-status read `F7` answered with one
//! byte whose bit 7 is clear while transmitting. Worked by hand:
//! 14 074 000 Hz = 1 407 400 tens of Hz = digits 01 40 74 00.

use super::*;
use crate::rig::Seen;

fn ms(v: u64) -> Duration {
    Duration::from_millis(v)
}

fn spec() -> BlockSpec {
    BlockSpec::builtin().expect("the built-in block dialect loads")
}

const READ_F: [u8; 5] = [0, 0, 0, 0, 0x03];
const READ_TX: [u8; 5] = [0, 0, 0, 0, 0xF7];

fn run(dec: &mut BlockDecoder, steps: &[(u64, Direction, &[u8])]) -> Vec<RigEvent> {
    let mut out = Vec::new();
    for (t, dir, bytes) in steps {
        dec.feed_at(ms(*t), *dir, bytes, &mut out);
    }
    dec.finish(&mut out);
    out
}

use Direction::{Rx, Tx};

#[test]
fn answers_pair_with_their_requests() {
    let mut d = BlockDecoder::new(spec());
    let out = run(
        &mut d,
        &[
            (0, Tx, &READ_F),
            (10, Rx, &[0x01, 0x40, 0x74, 0x00, 0x01]),
            (20, Tx, &READ_TX),
            (30, Rx, &[0x80]),
            (40, Tx, &READ_TX),
            (50, Rx, &[0x1F]),
            (60, Tx, &[READ_F, READ_TX].concat()),
            // Both answers in one read, byte boundaries anywhere.
            (70, Rx, &[0x00, 0x70, 0x30, 0x00, 0x00, 0x80]),
        ],
    );
    assert_eq!(
        out,
        [
            RigEvent::Frequency { hz: 14_074_000 },
            RigEvent::Transmit { on: false },
            RigEvent::Transmit { on: true },
            RigEvent::Frequency { hz: 7_030_000 },
            RigEvent::Transmit { on: false },
        ]
    );
}

#[test]
fn chunks_split_anywhere_decode_the_same() {
    let stream: Vec<(Direction, Vec<u8>)> = vec![
        (Tx, READ_F.to_vec()),
        (Rx, vec![0x01, 0x40, 0x74, 0x00, 0x01]),
        (Tx, READ_TX.to_vec()),
        (Rx, vec![0x00]),
    ];
    let whole = {
        let mut d = BlockDecoder::new(spec());
        let steps: Vec<(u64, Direction, &[u8])> = stream
            .iter()
            .map(|(dir, b)| (0, *dir, b.as_slice()))
            .collect();
        run(&mut d, &steps)
    };
    let mut d = BlockDecoder::new(spec());
    let mut out = Vec::new();
    for (dir, b) in &stream {
        for byte in b {
            d.feed_at(ms(0), *dir, std::slice::from_ref(byte), &mut out);
        }
    }
    d.finish(&mut out);
    assert_eq!(out, whole);
    assert_eq!(whole.len(), 2);
}

#[test]
fn a_lost_byte_costs_one_answer_and_the_gap_resynchronises() {
    let mut d = BlockDecoder::new(spec());
    let out = run(
        &mut d,
        &[
            (0, Tx, &READ_F),
            // Four of the five answer bytes, then nothing for 300 ms.
            (10, Rx, &[0x01, 0x40, 0x74, 0x00]),
            (310, Tx, &READ_F),
            (320, Rx, &[0x01, 0x40, 0x75, 0x00, 0x01]),
        ],
    );
    assert_eq!(
        out,
        [
            RigEvent::Reject {
                reason: RejectReason::Garbage,
                bytes: 4
            },
            RigEvent::Frequency { hz: 14_075_000 },
        ]
    );
}

#[test]
fn bytes_nobody_asked_for_and_bad_digits_are_rejected() {
    let mut d = BlockDecoder::new(spec());
    let out = run(
        &mut d,
        &[
            (0, Rx, &[0x55, 0x66]),
            (10, Tx, &READ_F),
            (20, Rx, &[0x01, 0x4A, 0x74, 0x00, 0x01]),
            // An answer long after its request: the request was given up.
            (30, Tx, &READ_TX),
            (500, Rx, &[0x00]),
        ],
    );
    assert_eq!(
        out,
        [
            RigEvent::Reject {
                reason: RejectReason::Garbage,
                bytes: 2
            },
            RigEvent::Reject {
                reason: RejectReason::BadDigit,
                bytes: 5
            },
            RigEvent::Reject {
                reason: RejectReason::Garbage,
                bytes: 1
            },
        ]
    );
}

#[test]
fn the_station_decoder_sees_the_other_programs_keying_at_once() {
    let mut d = BlockDecoder::station(spec());
    let out = run(
        &mut d,
        &[
            // A frequency set, then keying 10 ms later, unkeyed later.
            (0, Tx, &[0x01, 0x40, 0x74, 0x00, 0x01]),
            (10, Tx, &[0, 0, 0, 0, 0x08]),
            (500, Tx, &[0, 0, 0, 0, 0x88]),
        ],
    );
    assert_eq!(
        out,
        [
            RigEvent::SelectedFrequency {
                hz: 14_074_000,
                seen: Seen::Command
            },
            RigEvent::TransmitCommand { on: true },
            RigEvent::TransmitCommand { on: false },
        ]
    );
    // The reporting decoder emits no station events.
    let mut d = BlockDecoder::new(spec());
    assert!(run(&mut d, &[(10, Tx, &[0, 0, 0, 0, 0x08])]).is_empty());
    // The A/B toggle (`81`, recalled, as protocols/block-5.toml says)
    // names no VFO and carries no frequency.
    let mut d = BlockDecoder::station(spec());
    let out = run(&mut d, &[(0, Tx, &[0, 0, 0, 0, 0x81])]);
    assert_eq!(
        out,
        [RigEvent::VfoToggle {
            seen: Seen::Command
        }]
    );
}

/// The set `01`: four parameter bytes of packed BCD, 10 Hz units, most
/// significant pair first, high nibble the higher digit, then the opcode
/// (the family's published CAT command table, recalled, as
/// protocols/block-5.toml says). Worked by hand:
/// 7 150 000 Hz = 715 000 tens = 00715000 -> 00 71 50 00;
/// 145 500 000 Hz = 14 550 000 tens = 14550000 -> 14 55 00 00;
/// 1 840 000 Hz = 184 000 tens = 00184000 -> 00 18 40 00.
#[test]
fn the_other_programs_frequency_set_is_the_vfo_in_use_at_once() {
    let set = |hz| RigEvent::SelectedFrequency {
        hz,
        seen: Seen::Command,
    };
    let mut d = BlockDecoder::station(spec());
    let out = run(
        &mut d,
        &[
            (0, Tx, &[0x00, 0x71, 0x50, 0x00, 0x01]),
            // Split over two reads, inside the gap.
            (100, Tx, &[0x14, 0x55]),
            (120, Tx, &[0x00, 0x00, 0x01]),
            (300, Tx, &[0x00, 0x18, 0x40, 0x00, 0x01]),
        ],
    );
    assert_eq!(out, [set(7_150_000), set(145_500_000), set(1_840_000)]);
    // What the dialect writes for a set is what the table shows.
    assert_eq!(spec().encode_set(7_150_000), [0x00, 0x71, 0x50, 0x00, 0x01]);
    // The reporting decoder takes nothing going to the rig.
    let mut d = BlockDecoder::new(spec());
    assert!(run(&mut d, &[(0, Tx, &[0x00, 0x71, 0x50, 0x00, 0x01])]).is_empty());
}

#[test]
fn a_malformed_set_is_rejected_and_the_next_block_still_counts() {
    let mut d = BlockDecoder::station(spec());
    let out = run(
        &mut d,
        &[
            // A nibble above 9 (0x7A).
            (0, Tx, &[0x00, 0x7A, 0x50, 0x00, 0x01]),
            // 00 00 00 01 tens = 10 Hz: no rig tunes there.
            (50, Tx, &[0x00, 0x00, 0x00, 0x01, 0x01]),
            (100, Tx, &[0, 0, 0, 0, 0x08]),
        ],
    );
    assert_eq!(
        out,
        [
            RigEvent::Reject {
                reason: RejectReason::BadDigit,
                bytes: 5
            },
            RigEvent::Reject {
                reason: RejectReason::OutOfRange,
                bytes: 5
            },
            RigEvent::TransmitCommand { on: true },
        ]
    );
}

#[test]
fn a_set_is_read_in_the_dialects_digit_order_and_opcode_place() {
    // An invented dialect: opcode first, then the BCD field least
    // significant pair first. 7 150 000 Hz = 00715000 tens -> 00 50 71 00
    // reversed pair by pair, by hand.
    let base = include_str!("../../../protocols/block-5.toml");
    let text = base
        .replace("opcode_offset = 4", "opcode_offset = 0")
        .replace(
            "digit_order = \"big-endian\"",
            "digit_order = \"little-endian\"",
        )
        .replace(
            "frequency = [0x00, 0x00, 0x00, 0x00, 0x03]",
            "frequency = [0x03, 0x00, 0x00, 0x00, 0x00]",
        )
        .replace(
            "transmit = [0x00, 0x00, 0x00, 0x00, 0xF7]",
            "transmit = [0xF7, 0x00, 0x00, 0x00, 0x00]",
        );
    let s = load(&text).unwrap();
    assert_eq!(s.encode_set(7_150_000), [0x01, 0x00, 0x50, 0x71, 0x00]);
    let mut d = BlockDecoder::station(s);
    let out = run(&mut d, &[(0, Tx, &[0x01, 0x00, 0x50, 0x71, 0x00])]);
    assert_eq!(
        out,
        [RigEvent::SelectedFrequency {
            hz: 7_150_000,
            seen: Seen::Command
        }]
    );
    // A field that the set's parameters cannot carry is refused.
    let text = base
        .replace("answer_length = 5", "answer_length = 6")
        .replace("bytes = 4", "bytes = 5");
    let e = load(&text).unwrap_err();
    assert!(e.contains("frequency.bytes"), "{e}");
}

mod props {
    use super::*;
    use proptest::prelude::*;

    /// The set block for `hz`, worked digit by digit as the table shows
    /// (not with the dialect's encoder): eight digits of tens of Hz, two a
    /// byte, most significant first, then `01`.
    fn set_block(hz: u64) -> Vec<u8> {
        let d: Vec<u8> = format!("{:08}", hz / 10)
            .bytes()
            .map(|b| b - b'0')
            .collect();
        let mut out: Vec<u8> = d.chunks(2).map(|p| (p[0] << 4) | p[1]).collect();
        out.push(0x01);
        out
    }

    proptest! {
        /// Every set in range, however the reads cut the stream, is the
        /// frequency it carries, in order, followed by the keying at once;
        /// the reporting decoder takes none of it.
        #[test]
        fn every_set_is_taken_whatever_the_chunks(
            tens in proptest::collection::vec(10_000u64..50_000_000, 1..6),
            cuts in proptest::collection::vec(1usize..7, 1..40),
        ) {
            let hz: Vec<u64> = tens.iter().map(|t| t * 10).collect();
            let mut stream: Vec<u8> = hz.iter().flat_map(|h| set_block(*h)).collect();
            stream.extend([0, 0, 0, 0, 0x08]);
            let mut want: Vec<RigEvent> = hz
                .iter()
                .map(|&hz| RigEvent::SelectedFrequency { hz, seen: Seen::Command })
                .collect();
            want.push(RigEvent::TransmitCommand { on: true });
            let mut d = BlockDecoder::station(spec());
            let mut plain = BlockDecoder::new(spec());
            let (mut out, mut none) = (Vec::new(), Vec::new());
            let mut rest = stream.as_slice();
            let mut cut = cuts.iter().cycle();
            while !rest.is_empty() {
                let n = (*cut.next().unwrap()).min(rest.len());
                let (chunk, tail) = rest.split_at(n);
                d.feed_at(ms(0), Tx, chunk, &mut out);
                plain.feed_at(ms(0), Tx, chunk, &mut none);
                rest = tail;
            }
            d.finish(&mut out);
            plain.finish(&mut none);
            prop_assert_eq!(out, want);
            prop_assert!(none.is_empty(), "{:?}", none);
        }
    }
}

#[test]
fn the_dialect_encodes_what_such_a_rig_answers() {
    let s = spec();
    assert_eq!(
        s.encode_frequency(14_074_000),
        [0x01, 0x40, 0x74, 0x00, 0x00]
    );
    assert_eq!(s.encode_transmit(true), [0x00]);
    assert_eq!(s.encode_transmit(false), [0x80]);
    assert_eq!(s.poll_frequency, READ_F);
    assert_eq!(s.poll_transmit, READ_TX);
}

fn load(text: &str) -> Result<BlockSpec, String> {
    BlockSpec::parse(text, std::path::Path::new("mine.toml")).map_err(|e| e.to_string())
}

#[test]
fn the_loader_refuses_set_and_keying_opcodes_as_polls() {
    let base = include_str!("../../../protocols/block-5.toml");
    load(base).unwrap();
    for op in ["0x08", "0x88", "0x01", "0x81"] {
        let text = base.replace(
            "transmit = [0x00, 0x00, 0x00, 0x00, 0xF7]",
            &format!("transmit = [0x00, 0x00, 0x00, 0x00, {op}]"),
        );
        let e = load(&text).unwrap_err();
        assert!(e.contains("poll.transmit"), "{op}: {e}");
    }
    // The VFO toggle is a set even when other_sets leaves it out.
    let text = base.replace("0x8F, 0x81, 0xF5", "0x8F, 0xF5").replace(
        "transmit = [0x00, 0x00, 0x00, 0x00, 0xF7]",
        "transmit = [0x00, 0x00, 0x00, 0x00, 0x81]",
    );
    assert!(!text.contains("0x8F, 0x81"));
    let e = load(&text).unwrap_err();
    assert!(e.contains("poll.transmit"), "{e}");
    assert_eq!(spec().vfo_toggle, Some(0x81));
    let text = base.replace("read = 0x03", "read = 0x08");
    let e = load(&text).unwrap_err();
    assert!(e.contains("frequency.read"), "{e}");
    let text = base.replace("opcode_offset = 4", "opcode_offset = 5");
    assert!(load(&text).unwrap_err().contains("block.opcode_offset"));
}

#[test]
fn the_station_decoder_reports_the_other_programs_split() {
    // 02 split on, 82 split off (recalled, protocols/block-5.toml).
    let mut d = BlockDecoder::station(spec());
    let out = run(
        &mut d,
        &[(0, Tx, &[0, 0, 0, 0, 0x02]), (50, Tx, &[0, 0, 0, 0, 0x82])],
    );
    assert_eq!(
        out,
        [
            RigEvent::Split {
                on: true,
                seen: crate::rig::Seen::Command
            },
            RigEvent::Split {
                on: false,
                seen: crate::rig::Seen::Command
            },
        ]
    );
    // The reporting decoder takes nothing from them.
    let mut d = BlockDecoder::new(spec());
    assert!(run(&mut d, &[(0, Tx, &[0, 0, 0, 0, 0x02])]).is_empty());
}
