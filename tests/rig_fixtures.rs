//! Hostile captures of our own (fixtures/rig/): RF-style corruption fed
//! through the decoders record by record. The expected events are worked out
//! by hand from each record's comment in the fixture, not taken from a run.

use std::path::Path;

use tuneward::capture::CaptureReader;
use tuneward::rig::RejectReason::{
    BadDigit, BadLength, Collision, Garbage, OutOfRange, Overlong, Unknown,
};
use tuneward::rig::{Dialect, RejectReason, RigEvent};

fn decode_fixture(dialect: &str, file: &str) -> Vec<RigEvent> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/rig")
        .join(file);
    let mut dec = Dialect::builtin(dialect).unwrap().decoder(None);
    let mut out = Vec::new();
    for rec in CaptureReader::open(&path).unwrap() {
        let rec = rec.unwrap();
        dec.feed(rec.dir, &rec.bytes, &mut out);
    }
    dec.finish(&mut out);
    out
}

fn f(hz: u64) -> RigEvent {
    RigEvent::Frequency { hz }
}

fn tx(on: bool) -> RigEvent {
    RigEvent::Transmit { on }
}

fn r(reason: RejectReason, bytes: usize) -> RigEvent {
    RigEvent::Reject { reason, bytes }
}

#[test]
fn binary_bcd_noise() {
    let out = decode_fixture("binary-bcd", "binary-bcd-noise.cap");
    assert_eq!(
        out,
        vec![
            f(7_074_000),
            r(Garbage, 24),
            f(7_074_100),
            r(BadDigit, 11),
            r(Garbage, 2),
            f(7_075_000),
            r(Garbage, 8),
            f(7_076_000),
            r(Overlong, 44),
            tx(true),
            r(Collision, 6),
            f(7_077_000),
            tx(false),
            r(OutOfRange, 11),
            r(BadLength, 10),
            r(Garbage, 6),
        ]
    );
}

#[test]
fn text_semicolon_noise() {
    let out = decode_fixture("text-semicolon", "text-semicolon-noise.cap");
    assert_eq!(
        out,
        vec![
            f(14_074_000),
            r(Garbage, 5),
            f(14_075_000),
            r(Unknown, 14),
            r(Garbage, 10),
            r(Unknown, 6),
            r(BadLength, 13),
            f(14_074_000),
            tx(true),
            tx(false),
            r(Overlong, 101),
            f(14_078_000),
            // Was one BadLength of 28 before the decoder resynchronised
            // inside a run (issue 10, item 8): the second message is whole
            // and is the rig's latest word.
            r(Garbage, 14),
            f(14_080_000),
            r(OutOfRange, 14),
            r(Garbage, 6),
        ]
    );
}

#[test]
fn wrong_dialect_of_the_family_rejects_rather_than_invents() {
    // Through the 4-byte dialect every 5-byte frequency frame is a wrong
    // length; the one frame that is one byte short for 5-byte rigs is a
    // well-formed 4-byte frame (00 40 07 07 = 7 074 000 Hz, by hand).
    let out = decode_fixture("binary-bcd-4", "binary-bcd-noise.cap");
    let freqs: Vec<_> = out
        .iter()
        .filter(|e| matches!(e, RigEvent::Frequency { .. }))
        .collect();
    assert_eq!(freqs, vec![&f(7_074_000)]);
    assert_eq!(
        out.iter()
            .filter(|e| matches!(
                e,
                RigEvent::Reject {
                    reason: BadLength,
                    ..
                }
            ))
            .count(),
        7
    );
    // Through the 9-digit dialect every 11-digit message is a wrong length.
    let out = decode_fixture("text-semicolon-9", "text-semicolon-noise.cap");
    assert!(
        out.iter().all(|e| !matches!(e, RigEvent::Frequency { .. })),
        "{out:?}"
    );
}
