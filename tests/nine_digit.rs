//! The nine-digit text dialect against the layout of its family's CAT
//! operation reference (recalled, not checked against the document here):
//! `FA` + 9 digits; the status answer `IF` + 25 characters, a 3-digit
//! memory channel first, then the frequency, and no transmit flag; the
//! transmit state read with `TX;` and reported as `TX0;` (receive), `TX1;`
//! (keyed over the port) or `TX2;` (keyed by the rig's own PTT).
//! The fixture (fixtures/rig/text-semicolon-9-evening.cap) is a scenario
//! of our own; the expected events are worked by hand from its comments.

use std::path::Path;

use tuneward::capture::CaptureReader;
use tuneward::rig::RejectReason::{BadDigit, BadLength, Overlong};
use tuneward::rig::{Decode, Dialect, RigEvent, Seen, Vfo};

mod common;

const D9: &str = "text-semicolon-9";

fn fixture(station: bool) -> Vec<RigEvent> {
    let path =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/rig/text-semicolon-9-evening.cap");
    let d = Dialect::builtin(D9).unwrap();
    let mut dec: Box<dyn Decode> = if station {
        d.station_decoder(None)
    } else {
        d.decoder(None)
    };
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
fn r(reason: tuneward::rig::RejectReason, bytes: usize) -> RigEvent {
    RigEvent::Reject { reason, bytes }
}

#[test]
fn the_fixture_follows_the_rig_and_sees_every_transmission() {
    assert_eq!(
        fixture(false),
        vec![
            f(7_074_000),
            tx(false),
            f(7_076_000),
            f(7_076_500),
            tx(true),
            tx(false),
            tx(true),
            r(Overlong, 37),
            r(BadDigit, 4),
            tx(false),
        ]
    );
}

#[test]
fn the_station_decoder_also_sees_the_other_programs_keying() {
    let out = fixture(true);
    let commands: Vec<&RigEvent> = out
        .iter()
        .filter(|e| {
            matches!(
                e,
                RigEvent::TransmitCommand { .. }
                    | RigEvent::Vfo {
                        seen: Seen::Command,
                        ..
                    }
            )
        })
        .collect();
    assert_eq!(
        commands,
        [
            &RigEvent::Vfo {
                vfo: Vfo::A,
                hz: 7_080_000,
                seen: Seen::Command
            },
            &RigEvent::TransmitCommand { on: true },
            &RigEvent::TransmitCommand { on: false },
        ]
    );
    // Our own reads (`FA;TX;`, the first record) are no commands: the list
    // above is exact, so no poll counted as keying.
}

fn load(text: &str) -> Result<Dialect, String> {
    Dialect::parse(text, Path::new("mine.toml")).map_err(|e| e.to_string())
}

const BUILTIN: &str = include_str!("../protocols/text-semicolon-9.toml");

#[test]
fn the_loader_knows_which_transmit_commands_key_the_rig_in_this_family() {
    // The bare read may be polled...
    load(BUILTIN).unwrap();
    // ...but with a digit it keys (1, 2) or unkeys (0) the rig.
    for q in ["TX1;", "TX2;", "TX0;"] {
        let text = BUILTIN.replace("transmit = \"TX;\"", &format!("transmit = \"{q}\""));
        let e = load(&text).unwrap_err();
        assert!(e.contains("poll.transmit") && e.contains(q), "{q}: {e}");
    }
    // Without `bare_is_read` the bare command is a key too.
    let text = BUILTIN.replace("bare_is_read = true", "bare_is_read = false");
    let e = load(&text).unwrap_err();
    assert!(e.contains("poll.transmit") && e.contains("TX;"), "{e}");
    // A digit cannot mean both.
    let text = BUILTIN.replace("transmit_digits = \"12\"", "transmit_digits = \"02\"");
    let e = load(&text).unwrap_err();
    assert!(e.contains("transmit.transmit_digits"), "{e}");
    // Nothing that tells of receive: refused.
    let text = BUILTIN
        .replace("receive_digits = \"0\"\n", "")
        .replace("transmit_digits = \"12\"\n", "")
        .replace("bare_is_read = true\n", "")
        .replace("transmit = \"TX;\"", "transmit = \"IF;\"");
    let e = load(&text).unwrap_err();
    assert!(e.contains("transmit.off"), "{e}");
}

#[test]
fn the_eleven_digit_family_still_refuses_its_transmit_and_receive_commands_as_polls() {
    let text = include_str!("../protocols/text-semicolon.toml");
    for q in ["TX;", "RX;"] {
        let e =
            load(&text.replace("transmit = \"IF;\"", &format!("transmit = \"{q}\""))).unwrap_err();
        assert!(e.contains("poll.transmit"), "{q}: {e}");
    }
}

#[test]
fn a_status_answer_of_the_wrong_length_is_refused() {
    let mut dec = Dialect::builtin(D9).unwrap().decoder(None);
    let mut out = Vec::new();
    // 23 characters where the layout has 25 (IF, 23, terminator: 26 bytes).
    dec.feed(
        tuneward::rig::Direction::Rx,
        b"IF01200707650+00000020000;",
        &mut out,
    );
    dec.finish(&mut out);
    assert_eq!(out, [r(BadLength, 26)]);
}

#[test]
fn the_dialect_writes_what_such_a_rig_sends() {
    let d = Dialect::builtin(D9).unwrap();
    assert_eq!(d.encode_frequency(7_074_000, 0), b"FA007074000;");
    assert_eq!(d.encode_transmit(true, 0), b"TX1;");
    assert_eq!(d.encode_transmit(false, 0), b"TX0;");
    assert_eq!(
        [d.poll_frequency(0), d.poll_transmit(0)].concat(),
        b"FA;TX;"
    );
}

#[test]
fn a_replay_with_the_transmit_state_unheard_at_first_holds_until_it_is_known() {
    // fixtures/rig/text-semicolon-9-unknown-start.cap, through the binary:
    // TX answers lost until 1.02 s (TX0, receive); the rig's PTT keyed
    // (TX2) 1.42 to 2.02 s.
    common::assert_holds_on_unknown(D9, "text-semicolon-9-unknown-start.cap", 1.02, (1.42, 2.02));
}
