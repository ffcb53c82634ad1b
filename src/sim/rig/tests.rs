//! `SimRig` against frames worked by hand from the families' published
//! layouts. Binary family: the CI-V reference guide's frame layout
//! (`FE FE <to> <from> <command> [data] FD`, frequencies as little-endian
//! packed BCD, `FB` OK / `FA` NG); the command codes 05, 07, 0F, 1C 00 and
//! 25 are recalled. Text family: the PC control command reference's
//! message layout (two letters, payload, `;`; `?;` for a refused command;
//! sets answered silently); FR/FT/MD/AI and the status fields past the
//! transmit flag are recalled.

use super::*;
use crate::rig::{Direction, RigEvent};

fn ms(n: u64) -> Duration {
    Duration::from_millis(n)
}

fn rig(dialect: &str) -> SimRig {
    SimRig::new(
        &Dialect::builtin(dialect).expect("built-in dialect"),
        &SimOptions::default(),
    )
}

fn exchange(r: &mut SimRig, now: Duration, bytes: &[u8]) -> Vec<u8> {
    r.handle_bytes(now, bytes);
    r.poll_output().unwrap_or_default()
}

fn truths(r: &mut SimRig) -> Vec<Truth> {
    std::iter::from_fn(|| r.poll_truth()).collect()
}

/// What tuneward's own decoder makes of bytes from the rig.
fn decoded(dialect: &str, bytes: &[u8]) -> Vec<RigEvent> {
    let mut d = Dialect::builtin(dialect).unwrap().decoder(None);
    let mut out = Vec::new();
    d.feed(Direction::Rx, bytes, &mut out);
    out
}

// ---- binary family ----

#[test]
fn binary_frequency_read_answers_the_operating_frequency_to_the_asker() {
    let mut r = rig("binary-bcd");
    // 14 074 000 Hz = digits 00 14 07 40 00, least significant pair first:
    // 00 40 07 14 00 (worked by hand). Answer goes to E0 from 94.
    let got = exchange(&mut r, ms(1), &[0xFE, 0xFE, 0x94, 0xE0, 0x03, 0xFD]);
    assert_eq!(
        got,
        [0xFE, 0xFE, 0xE0, 0x94, 0x03, 0x00, 0x40, 0x07, 0x14, 0x00, 0xFD]
    );
    assert_eq!(
        decoded("binary-bcd", &got),
        [RigEvent::Frequency { hz: 14_074_000 }]
    );
    // Another controller address gets the answer addressed to it.
    let got = exchange(&mut r, ms(2), &[0xFE, 0xFE, 0x94, 0x70, 0x03, 0xFD]);
    assert_eq!(got.get(2..4), Some(&[0x70, 0x94][..]));
}

#[test]
fn binary_four_byte_dialect_answers_with_four_bytes() {
    let mut r = rig("binary-bcd-4");
    let got = exchange(&mut r, ms(1), &[0xFE, 0xFE, 0x94, 0xE0, 0x03, 0xFD]);
    assert_eq!(
        got,
        [0xFE, 0xFE, 0xE0, 0x94, 0x03, 0x00, 0x40, 0x07, 0x14, 0xFD]
    );
}

#[test]
fn binary_set_is_acknowledged_and_changes_what_it_receives() {
    let mut r = rig("binary-bcd");
    truths(&mut r);
    // 7 074 000 Hz: 00 40 07 07 00.
    let set = [
        0xFE, 0xFE, 0x94, 0xE0, 0x05, 0x00, 0x40, 0x07, 0x07, 0x00, 0xFD,
    ];
    assert_eq!(
        exchange(&mut r, ms(5), &set),
        [0xFE, 0xFE, 0xE0, 0x94, 0xFB, 0xFD]
    );
    assert_eq!(r.state().rx_hz(), 7_074_000);
    let t = truths(&mut r);
    assert_eq!(t.len(), 1);
    assert_eq!(
        (t[0].rx_hz, t[0].tx_hz, t[0].cause),
        (7_074_000, 7_074_000, Cause::Cat)
    );
    assert_eq!(t[0].t_ms, 5.0);
    // A nibble above 9, a short field, and a frequency outside the
    // coverage (99 MHz: 00 00 00 99 00) are not good and change nothing.
    for bad in [
        &[
            0xFE, 0xFE, 0x94, 0xE0, 0x05, 0x00, 0x4A, 0x07, 0x07, 0x00, 0xFD,
        ][..],
        &[0xFE, 0xFE, 0x94, 0xE0, 0x05, 0x00, 0x40, 0x07, 0xFD][..],
        &[
            0xFE, 0xFE, 0x94, 0xE0, 0x05, 0x00, 0x00, 0x00, 0x99, 0x00, 0xFD,
        ][..],
    ] {
        assert_eq!(
            exchange(&mut r, ms(6), bad),
            [0xFE, 0xFE, 0xE0, 0x94, 0xFA, 0xFD],
            "{bad:02X?}"
        );
    }
    assert_eq!(r.state().rx_hz(), 7_074_000);
    assert!(truths(&mut r).is_empty());
}

#[test]
fn binary_unknown_commands_are_refused_and_other_addresses_ignored() {
    let mut r = rig("binary-bcd");
    assert_eq!(
        exchange(&mut r, ms(1), &[0xFE, 0xFE, 0x94, 0xE0, 0x7E, 0x01, 0xFD]),
        [0xFE, 0xFE, 0xE0, 0x94, 0xFA, 0xFD]
    );
    // Addressed to another rig, or a collision: silence.
    assert!(exchange(&mut r, ms(2), &[0xFE, 0xFE, 0x88, 0xE0, 0x03, 0xFD]).is_empty());
    assert!(exchange(&mut r, ms(3), &[0xFE, 0xFE, 0x94, 0xE0, 0xFC, 0xFD]).is_empty());
    // A frame cut short by a new preamble is dropped; the next one counts.
    let got = exchange(
        &mut r,
        ms(4),
        &[
            0x11, 0xFE, 0xFE, 0x94, 0xE0, 0xFE, 0xFE, 0xFE, 0x94, 0xE0, 0x03, 0xFD,
        ],
    );
    assert_eq!(got.len(), 11);
    assert_eq!(got.get(4), Some(&0x03));
}

#[test]
fn binary_vfo_select_split_and_transmit_follow_the_layout() {
    let mut r = rig("binary-bcd");
    // VFO B to 14 079 000 Hz through the unselected-VFO set: 25 01 + BCD.
    let ok = [0xFE, 0xFE, 0xE0, 0x94, 0xFB, 0xFD];
    let set_b = [
        0xFE, 0xFE, 0x94, 0xE0, 0x25, 0x01, 0x00, 0x90, 0x07, 0x14, 0x00, 0xFD,
    ];
    assert_eq!(exchange(&mut r, ms(1), &set_b), ok);
    assert_eq!(r.state().vfo_b, 14_079_000);
    // Reading it back.
    let read_b = [0xFE, 0xFE, 0x94, 0xE0, 0x25, 0x01, 0xFD];
    assert_eq!(
        exchange(&mut r, ms(2), &read_b),
        [0xFE, 0xFE, 0xE0, 0x94, 0x25, 0x01, 0x00, 0x90, 0x07, 0x14, 0x00, 0xFD]
    );
    // Split on (0F 01), read back (0F -> 0F 01).
    assert_eq!(
        exchange(&mut r, ms(3), &[0xFE, 0xFE, 0x94, 0xE0, 0x0F, 0x01, 0xFD]),
        ok
    );
    assert_eq!(
        exchange(&mut r, ms(4), &[0xFE, 0xFE, 0x94, 0xE0, 0x0F, 0xFD]),
        [0xFE, 0xFE, 0xE0, 0x94, 0x0F, 0x01, 0xFD]
    );
    truths(&mut r);
    // Key (1C 00 01): transmits on B while receiving on A.
    assert_eq!(
        exchange(
            &mut r,
            ms(5),
            &[0xFE, 0xFE, 0x94, 0xE0, 0x1C, 0x00, 0x01, 0xFD]
        ),
        ok
    );
    let t = truths(&mut r);
    assert_eq!(t.len(), 1);
    assert!(t[0].transmitting && t[0].split);
    assert_eq!((t[0].rx_hz, t[0].tx_hz), (14_074_000, 14_079_000));
    // Transmit state read, and the display (frequency read) on the
    // transmit VFO while transmitting.
    let tx = exchange(&mut r, ms(6), &[0xFE, 0xFE, 0x94, 0xE0, 0x1C, 0x00, 0xFD]);
    assert_eq!(tx, [0xFE, 0xFE, 0xE0, 0x94, 0x1C, 0x00, 0x01, 0xFD]);
    assert_eq!(
        decoded("binary-bcd", &tx),
        [RigEvent::Transmit { on: true }]
    );
    let f = exchange(&mut r, ms(7), &[0xFE, 0xFE, 0x94, 0xE0, 0x03, 0xFD]);
    assert_eq!(
        decoded("binary-bcd", &f),
        [RigEvent::Frequency { hz: 14_079_000 }]
    );
    // Unkey, select B (07 01): with split on, it now transmits on A.
    assert_eq!(
        exchange(
            &mut r,
            ms(8),
            &[0xFE, 0xFE, 0x94, 0xE0, 0x1C, 0x00, 0x00, 0xFD]
        ),
        ok
    );
    assert_eq!(
        exchange(&mut r, ms(9), &[0xFE, 0xFE, 0x94, 0xE0, 0x07, 0x01, 0xFD]),
        ok
    );
    assert_eq!((r.state().rx_vfo, r.state().tx_vfo), (Vfo::B, Vfo::A));
    // Mode read: 04 -> 04 <mode> <filter>; USB is 01.
    assert_eq!(
        exchange(&mut r, ms(10), &[0xFE, 0xFE, 0x94, 0xE0, 0x04, 0xFD]),
        [0xFE, 0xFE, 0xE0, 0x94, 0x04, 0x01, 0x01, 0xFD]
    );
    // A transmit set with a value other than 00/01 is not good.
    assert_eq!(
        exchange(
            &mut r,
            ms(11),
            &[0xFE, 0xFE, 0x94, 0xE0, 0x1C, 0x00, 0x07, 0xFD]
        ),
        [0xFE, 0xFE, 0xE0, 0x94, 0xFA, 0xFD]
    );
}

#[test]
fn binary_transceive_broadcast_when_the_operator_tunes() {
    let mut r = rig("binary-bcd");
    truths(&mut r);
    r.load_script(
        Script::parse(
            r#"{"at_ms": 100, "op": "tune", "hz": 7100000}
{"at_ms": 200, "op": "tune", "vfo": "b", "hz": 7105000}
{"at_ms": 300, "op": "key"}"#,
            "t",
        )
        .unwrap(),
        Some(ms(0)),
    );
    assert_eq!(r.poll_timeout(), Some(ms(100)));
    r.handle_timeout(ms(99));
    assert!(r.poll_output().is_none());
    r.handle_timeout(ms(100));
    // Broadcast: to 00 from 94, command 00, 7 100 000 Hz = 00 00 10 07 00.
    let got = r.poll_output().unwrap();
    assert_eq!(
        got,
        [0xFE, 0xFE, 0x00, 0x94, 0x00, 0x00, 0x00, 0x10, 0x07, 0x00, 0xFD]
    );
    assert_eq!(
        decoded("binary-bcd", &got),
        [RigEvent::Frequency { hz: 7_100_000 }]
    );
    // The unselected VFO and keying are not announced by this family.
    r.handle_timeout(ms(300));
    assert!(r.poll_output().is_none());
    let t = truths(&mut r);
    let at: Vec<f64> = t.iter().map(|t| t.t_ms).collect();
    assert_eq!(at, [100.0, 200.0, 300.0]);
    assert!(t.iter().all(|t| t.cause == Cause::Operator));
    assert!(t[2].transmitting && t[2].tx_hz == 7_100_000);
}

// ---- text family ----

#[test]
fn text_reads_sets_and_refusals() {
    let mut r = rig("text-semicolon");
    assert_eq!(exchange(&mut r, ms(1), b"FA;"), b"FA00014074000;");
    // A set is answered with nothing; the read after it shows it.
    assert!(exchange(&mut r, ms(2), b"FA00007074000;").is_empty());
    assert_eq!(
        exchange(&mut r, ms(3), b"FA;FB;"),
        b"FA00007074000;FB00014074000;"
    );
    // Unknown commands, wrong widths, lower case, out of coverage: `?;`.
    for bad in [&b"ZZ;"[..], b"FA7074000;", b"fa;", b"FA00099000000;", b";"] {
        assert_eq!(
            exchange(&mut r, ms(4), bad),
            b"?;",
            "{}",
            String::from_utf8_lossy(bad)
        );
    }
    assert_eq!(r.state().vfo_a, 7_074_000);
    // Split by FR/FT (receive A, transmit B), then keyed by CAT.
    assert!(exchange(&mut r, ms(5), b"FB00007079000;FR0;FT1;TX;").is_empty());
    assert_eq!(exchange(&mut r, ms(6), b"FR;FT;"), b"FR0;FT1;");
    let s = r.state();
    assert!(s.transmitting && s.split());
    assert_eq!((s.rx_hz(), s.tx_hz()), (7_074_000, 7_079_000));
    assert!(exchange(&mut r, ms(7), b"RX;").is_empty());
    assert!(!r.state().transmitting);
    // FR alone ends the split (recalled).
    assert!(exchange(&mut r, ms(8), b"FR1;").is_empty());
    assert_eq!((r.state().rx_vfo, r.state().tx_vfo), (Vfo::B, Vfo::B));
    assert_eq!(exchange(&mut r, ms(9), b"MD;MD3;MD;"), b"MD2;MD3;");
}

#[test]
fn text_status_carries_frequency_and_transmit_flag_at_the_dialect_offsets() {
    // The nine-digit family's status has no transmit flag: its own test
    // below.
    {
        let dialect = "text-semicolon";
        let Spec::Text(s) = Dialect::builtin(dialect).unwrap().spec else {
            panic!("{dialect} is a text dialect");
        };
        let mut r = rig(dialect);
        assert!(exchange(&mut r, ms(1), b"TX;").is_empty());
        let got = exchange(&mut r, ms(2), b"IF;");
        // "IF", the payload, ";".
        assert_eq!(got.len(), 2 + s.status_length + 1, "{dialect}");
        let payload = &got[2..got.len() - 1];
        let f = s.status_frequency_offset;
        let digits = format!("{:0w$}", 14_074_000, w = s.digits);
        assert_eq!(&payload[f..f + s.digits], digits.as_bytes(), "{dialect}");
        let t = s.status_transmit_offset.expect("a transmit flag");
        assert_eq!(payload[t], b'1', "{dialect}");
        let events = decoded(dialect, &got);
        assert!(
            events.contains(&RigEvent::Transmit { on: true })
                && events.contains(&RigEvent::Frequency { hz: 14_074_000 }),
            "{dialect}: {events:?}"
        );
    }
}

#[test]
fn text_status_layout_of_the_eleven_digit_family() {
    // The 11-digit layout worked by hand from the family's reference
    // (recalled): frequency 0..11, step 11..15, offset 15..21, RIT 21,
    // XIT 22, bank 23, channel 24..26, transmit 26, mode 27, VFO 28, scan
    // 29, split 30, then tone fields to 35.
    let mut r = rig("text-semicolon");
    assert!(exchange(&mut r, ms(1), b"FB00007079000;FT1;").is_empty());
    let got = exchange(&mut r, ms(2), b"IF;");
    let expected = b"IF00014074000000000000000000020010000;";
    assert_eq!(
        String::from_utf8_lossy(&got),
        String::from_utf8_lossy(expected)
    );
}

#[test]
fn text_auto_information_when_the_operator_acts_and_off_when_asked() {
    let mut r = rig("text-semicolon");
    r.load_script(
        Script::parse(
            r#"{"at_ms": 10, "op": "tune", "hz": 7100000}
{"at_ms": 20, "op": "key"}
{"at_ms": 30, "op": "unkey"}
{"at_ms": 40, "op": "reports", "on": false}
{"at_ms": 50, "op": "tune", "hz": 7101000}"#,
            "t",
        )
        .unwrap(),
        Some(ms(1000)),
    );
    r.handle_timeout(ms(1035));
    assert_eq!(r.poll_output().unwrap(), b"FA00007100000;TX;RX;");
    r.handle_timeout(ms(1050));
    assert!(r.poll_output().is_none());
    assert_eq!(r.state().vfo_a, 7_101_000);
    // AI reads and sets the same switch.
    assert_eq!(exchange(&mut r, ms(1060), b"AI;AI2;AI;"), b"AI0;AI2;");
    assert!(r.reports());
}

#[test]
fn overlong_text_is_refused_once_at_its_end() {
    let mut r = rig("text-semicolon");
    let mut long = vec![b'F'; 200];
    long.push(b';');
    assert_eq!(exchange(&mut r, ms(1), &long), b"?;");
    assert_eq!(exchange(&mut r, ms(2), b"FA;"), b"FA00014074000;");
}

// ---- both ----

#[test]
fn answers_do_not_depend_on_how_the_bytes_are_split() {
    let streams: [(&str, &[u8]); 2] = [
        (
            "binary-bcd",
            &[
                0xFE, 0xFE, 0x94, 0xE0, 0x03, 0xFD, 0x00, 0xFE, 0xFE, 0x94, 0xE0, 0x05, 0x00, 0x40,
                0x07, 0x07, 0x00, 0xFD, 0xFE, 0xFE, 0x94, 0xE0, 0x0F, 0xFD, 0xFE, 0xFE, 0x94, 0xE0,
                0x7E, 0xFD,
            ],
        ),
        ("text-semicolon", b"FA;FA00007074000;IF;XX;FR1;FB;"),
    ];
    for (dialect, bytes) in streams {
        let mut whole = rig(dialect);
        let all = exchange(&mut whole, ms(1), bytes);
        let mut split = rig(dialect);
        let mut one = Vec::new();
        for b in bytes {
            one.extend(exchange(&mut split, ms(1), std::slice::from_ref(b)));
        }
        assert_eq!(all, one, "{dialect}");
        assert!(!all.is_empty());
        assert_eq!(whole.state(), split.state());
    }
}

#[test]
fn a_sweep_reports_every_knob_step_and_ends_where_it_was_told() {
    let mut r = rig("text-semicolon");
    truths(&mut r);
    r.load_script(
        Script::parse(
            r#"{"at_ms": 0, "op": "sweep", "from_hz": 7000000, "to_hz": 7001000, "over_ms": 1000, "step_hz": 100}"#,
            "t",
        )
        .unwrap(),
        None,
    );
    assert_eq!(r.poll_timeout(), None, "waits for its start");
    r.start_script(ms(500));
    let mut now = ms(500);
    let mut out = Vec::new();
    while let Some(t) = r.poll_timeout() {
        assert!(t >= now);
        now = t;
        r.handle_timeout(now);
        out.extend(r.poll_output().unwrap_or_default());
    }
    assert_eq!(now, ms(1500));
    let reports: Vec<RigEvent> = decoded("text-semicolon", &out);
    let hz: Vec<u64> = reports
        .iter()
        .map(|e| match e {
            RigEvent::Frequency { hz } => *hz,
            other => panic!("{other:?}"),
        })
        .collect();
    let expected: Vec<u64> = (0..=10).map(|i| 7_000_000 + i * 100).collect();
    assert_eq!(hz, expected);
    assert_eq!(truths(&mut r).len(), 11);
}

#[test]
fn truth_is_logged_once_per_change_not_per_command() {
    let mut r = rig("text-semicolon");
    let first = truths(&mut r);
    assert_eq!(first.len(), 1);
    assert_eq!(first[0].cause, Cause::Start);
    // Reads and a set to the same frequency change nothing.
    exchange(&mut r, ms(1), b"FA;IF;FA00014074000;RX;");
    assert!(truths(&mut r).is_empty());
    exchange(&mut r, ms(2), b"TX;TX;");
    assert_eq!(truths(&mut r).len(), 1);
}

#[test]
fn scripts_are_checked_with_line_numbers() {
    let bad = [
        ("\n{\"at_ms\": 1, \"op\": \"dance\"}", "line 2"),
        ("{\"at_ms\": 1, \"op\": \"tune\"}", "line 1"),
        ("{\"at_ms\": 1, \"op\": \"key\", \"hz\": 3}", "line 1"),
        ("not json", "line 1"),
        (
            "{\"at_ms\": 0, \"op\": \"sweep\", \"from_hz\": 1000000, \"to_hz\": 30000000, \"over_ms\": 1, \"step_hz\": 1}",
            "at most",
        ),
        ("{\"at_ms\": 0, \"op\": \"sweep\", \"to_hz\": 3, \"over_ms\": 1, \"step_hz\": 0}", "step_hz"),
    ];
    for (text, want) in bad {
        let e = Script::parse(text, "s.jsonl").unwrap_err().to_string();
        assert!(
            e.starts_with("s.jsonl, line ") && e.contains(": expected ") && e.contains(want),
            "{text}: {e}"
        );
    }
    let s = Script::parse(
        "# c\n\n{\"at_ms\": 5, \"op\": \"unkey\"}\n{\"at_ms\": 1, \"op\": \"split\", \"on\": true}",
        "s",
    )
    .unwrap();
    assert_eq!(
        s.steps,
        [(ms(1), Action::Split(true)), (ms(5), Action::Unkey)]
    );
}

#[test]
fn the_built_in_script_parses_and_plays_on_both_families() {
    let demo = Script::parse(DEFAULT_SCRIPT, "demo").unwrap();
    assert!(demo.steps.len() > 10);
    for dialect in Dialect::builtin_names() {
        let mut r = rig(dialect);
        r.load_script(Script::demo(), Some(ms(0)));
        while let Some(t) = r.poll_timeout() {
            r.handle_timeout(t);
        }
        let t = truths(&mut r);
        assert!(t.iter().any(|t| t.transmitting && t.split), "{dialect}");
        assert!(!r.state().transmitting, "{dialect} ends receiving");
    }
}

#[test]
fn misclocked_bytes_are_never_framed_by_either_family() {
    let all: Vec<u8> = (0..=255).collect();
    let g = misclocked(&all);
    assert_eq!(g.len(), 256);
    assert!(g.iter().all(|b| (0x80..=0xBF).contains(b)));
    for dialect in Dialect::builtin_names() {
        assert!(decoded(dialect, &g)
            .iter()
            .all(|e| matches!(e, RigEvent::Reject { .. })));
    }
}

mod props {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Whatever arrives, in whatever chunks, the rig never panics, keeps
        /// its buffer bounded and stays inside its coverage.
        #[test]
        fn any_bytes_any_chunks(
            dialect in prop::sample::select(Dialect::builtin_names().to_vec()),
            chunks in prop::collection::vec(prop::collection::vec(any::<u8>(), 0..40), 0..40),
        ) {
            let mut r = rig(dialect);
            for (i, c) in chunks.iter().enumerate() {
                r.handle_bytes(ms(i as u64), c);
                prop_assert!(r.inbuf.len() <= 4096 + 40);
                let s = *r.state();
                prop_assert!((30_000..=60_000_000).contains(&s.vfo_a));
                prop_assert!((30_000..=60_000_000).contains(&s.vfo_b));
            }
        }
    }
}

/// The nine-digit family as its CAT operation reference lays it out
/// (recalled): `TX;` reads the transmit state (`TX0;` receive, `TX1;`
/// keyed over the port), `TX1;`/`TX0;` key and unkey silently, and `IF;`
/// answers a 3-digit memory channel, then the 9-digit frequency, in 25
/// characters with no transmit flag.
#[test]
fn nine_digit_rig_reads_its_transmit_state_with_tx_and_has_no_flag_in_its_status() {
    let d = "text-semicolon-9";
    let mut r = rig(d);
    assert_eq!(exchange(&mut r, ms(1), b"TX;"), b"TX0;");
    assert!(!r.state().transmitting, "a read must not key the rig");
    assert!(exchange(&mut r, ms(2), b"TX1;").is_empty());
    assert!(r.state().transmitting);
    assert_eq!(exchange(&mut r, ms(3), b"TX;"), b"TX1;");
    let status = exchange(&mut r, ms(4), b"IF;");
    assert_eq!(status.len(), 2 + 25 + 1, "{status:?}");
    // IF, memory channel 000, frequency 014074000, then the other fields.
    assert_eq!(&status[..14], b"IF000014074000");
    assert_eq!(
        decoded(d, &status),
        [RigEvent::Frequency { hz: 14_074_000 }]
    );
    assert!(exchange(&mut r, ms(5), b"TX0;").is_empty());
    assert!(!r.state().transmitting);
    // A digit without a meaning is refused the family's way.
    assert_eq!(exchange(&mut r, ms(6), b"TX7;"), b"?;");
    // VFO select: VS1; puts the rig on VFO B for receive and transmit.
    assert!(exchange(&mut r, ms(7), b"VS1;").is_empty());
    assert_eq!((r.state().rx_vfo, r.state().tx_vfo), (Vfo::B, Vfo::B));
}

// ---- meters ----

/// An invented loop like the demo station's (config/demo.toml), on a drive
/// eight times coarser, through two points, with a hidden "rain" offset of 40 steps.
const METERS: &str = "loop_diameter_m = 1.0\nconductor_diameter_m = 0.022\n\
    through = [[7100000, 39049], [14175000, 8301]]\nrain_steps = 40\n\
    floor_dbm = -115.0\nnoise_dbm = -105.0\nscatter_db = 0.0\nseed = 3\n";

fn metered(dialect: &str) -> (SimRig, crate::sim::meters::SimLoop) {
    use crate::rig::meter::MeterKind;
    let spec = crate::sim::meters::SimMetersSpec::parse(METERS, "meters.toml").unwrap();
    let l = spec.sim_loop().unwrap();
    let d = Dialect::builtin(dialect).unwrap();
    let scale = |k| {
        d.meter_scale(k)
            .cloned()
            .unwrap_or_else(crate::rig::meter::binary_swr_scale)
    };
    let m = SimMeters::new(
        l,
        spec.band(),
        scale(MeterKind::Signal),
        scale(MeterKind::Swr),
        spec.seed,
    );
    (rig(dialect).with_meters(m), l)
}

/// What the station decoder makes of `request` going to the rig and the
/// rig's answer `bytes` (the block family pairs answers with requests).
fn station_decoded(dialect: &str, request: &[u8], bytes: &[u8]) -> Vec<RigEvent> {
    let mut d = Dialect::builtin(dialect).unwrap().station_decoder(None);
    let mut out = Vec::new();
    d.feed(Direction::Tx, request, &mut out);
    d.feed(Direction::Rx, bytes, &mut out);
    out
}

#[test]
fn meters_file_is_checked_and_names_what_it_found() {
    use crate::sim::meters::SimMetersSpec;
    let e = SimMetersSpec::parse("loop_diameter_m = 1.0\ncolour = 3\n", "m.toml").unwrap_err();
    assert!(
        e.to_string()
            .starts_with("m.toml: expected a simulated loop"),
        "{e}"
    );
    let falling = METERS.replace("[14175000, 8301]", "[14175000, 39049]");
    let e = SimMetersSpec::parse(&falling, "m.toml").unwrap_err();
    assert!(e.to_string().contains("through"), "{e}");
    let spec = SimMetersSpec::parse(METERS, "m.toml").unwrap();
    assert_eq!(spec.sim_loop().unwrap().offset_steps, 40.0);
}

/// Each family's meter reads answered from the simulated loop at the
/// capacitor's position, decoded by tuneward's own station decoder, and
/// logged with their truth: the signal meter peaks where the loop (with its
/// hidden offset) resonates at the receive frequency; the SWR meter reads
/// `antenna::swr_at` there while transmitting.
#[test]
fn every_family_answers_its_meter_reads_from_the_simulated_loop() {
    use crate::rig::meter::MeterKind;
    for (dialect, addr) in [
        ("binary-bcd", 0x94u8),
        ("text-semicolon", 0),
        ("text-semicolon-9", 0),
        ("block-5", 0),
    ] {
        let d = Dialect::builtin(dialect).unwrap();
        let (mut r, l) = metered(dialect);
        let hz = r.state().rx_hz() as f64;
        let signal = d.meter_read(MeterKind::Signal, addr).unwrap();
        // Until the position is told, the meters read 0 and say so.
        let got = exchange(&mut r, ms(1), &signal);
        assert_eq!(
            station_decoded(dialect, &signal, &got).last(),
            Some(&RigEvent::Meter {
                kind: MeterKind::Signal,
                raw: 0
            }),
            "{dialect}"
        );
        let line = r.poll_meter_line().unwrap();
        assert_eq!((line.steps, line.true_value), (None, None));
        let true_peak = l.steps_for(hz);
        let read_at = |r: &mut SimRig, steps: f64| {
            r.set_capacitor(steps);
            let got = exchange(r, ms(2), &signal);
            let ev = station_decoded(dialect, &signal, &got);
            let line = r.poll_meter_line().unwrap();
            assert_eq!(
                ev.last(),
                Some(&RigEvent::Meter {
                    kind: MeterKind::Signal,
                    raw: line.raw
                })
            );
            line
        };
        let peak = read_at(&mut r, true_peak);
        let off = read_at(&mut r, true_peak + 2000.0);
        assert_eq!(peak.kind, "signal");
        assert!((peak.resonance_hz.unwrap() - hz).abs() < 1.0, "{peak:?}");
        // Floor and band noise add as power at resonance:
        // 10 log10(10^-11.5 + 10^-10.5) = -104.59 dBm; far off, the floor.
        assert!(
            (peak.true_value.unwrap() - -104.586).abs() < 1e-3,
            "{peak:?}"
        );
        assert!((off.true_value.unwrap() - -115.0).abs() < 0.1, "{off:?}");
        assert!(peak.raw >= off.raw, "{dialect}: {peak:?} {off:?}");
        match d.meter_read(MeterKind::Swr, addr) {
            Some(swr_read) => {
                r.operate(ms(3), Action::Key);
                r.set_capacitor(true_peak + 30.0);
                let got = exchange(&mut r, ms(4), &swr_read);
                let line = r.poll_meter_line().unwrap();
                let want =
                    crate::antenna::swr_at(hz, l.resonance_hz(true_peak + 30.0), l.q_unloaded(hz));
                assert!((line.true_value.unwrap() - want).abs() < 1e-9, "{line:?}");
                assert_eq!(
                    station_decoded(dialect, &swr_read, &got).last(),
                    Some(&RigEvent::Meter {
                        kind: MeterKind::Swr,
                        raw: line.raw
                    })
                );
                assert!(line.transmitting && line.raw > 0, "{dialect}: {line:?}");
            }
            None => assert_eq!(dialect, "block-5"),
        }
    }
}

#[test]
fn without_meters_the_reads_are_refused_like_unknown_commands() {
    use crate::rig::meter::MeterKind;
    let d = Dialect::builtin("binary-bcd").unwrap();
    let mut r = rig("binary-bcd");
    let got = exchange(
        &mut r,
        ms(1),
        &d.meter_read(MeterKind::Signal, 0x94).unwrap(),
    );
    assert_eq!(got, [0xFE, 0xFE, 0xE0, 0x94, 0xFA, 0xFD]);
    let d = Dialect::builtin("text-semicolon").unwrap();
    let mut r = rig("text-semicolon");
    let got = exchange(&mut r, ms(1), &d.meter_read(MeterKind::Signal, 0).unwrap());
    assert_eq!(got, TXT_REFUSAL);
    assert!(r.poll_meter_line().is_none());
}

/// The block family's transmit-status answer carries the power meter in
/// its low bits beside the transmit bit (recalled), and still reads as
/// transmitting.
#[test]
fn block_transmit_status_carries_the_power_meter() {
    use crate::rig::meter::MeterKind;
    let (mut r, _) = metered("block-5");
    r.set_capacitor(8000.0);
    r.operate(ms(1), Action::Key);
    let got = exchange(&mut r, ms(2), &[0, 0, 0, 0, 0xF7]);
    let mut d = Dialect::builtin("block-5").unwrap().station_decoder(None);
    let mut out = Vec::new();
    d.feed(Direction::Tx, &[0, 0, 0, 0, 0xF7], &mut out);
    d.feed(Direction::Rx, &got, &mut out);
    assert_eq!(
        out,
        [
            RigEvent::Transmit { on: true },
            RigEvent::Meter {
                kind: MeterKind::Power,
                raw: 15
            }
        ]
    );
}

// ---- block family ----

/// The block family's A/B toggle (`00 00 00 00 81`, recalled, as
/// protocols/block-5.toml says): a set goes to the VFO in use, the
/// frequency read reports the VFO in use, and a toggle with split on takes
/// the transmit VFO to the other side too. Blocks and answers worked by
/// hand: 7 100 000 Hz is 710 000 tens, 00 71 00 00; 7 220 000 Hz is
/// 00 72 20 00; the answer is those four bytes and a mode byte.
#[test]
fn block_vfo_toggle_switches_the_vfo_the_reads_report() {
    let mut r = rig("block-5");
    let read = [0x00, 0x00, 0x00, 0x00, 0x03];
    assert!(exchange(&mut r, ms(1), &[0x00, 0x71, 0x00, 0x00, 0x01]).is_empty());
    assert_eq!(
        exchange(&mut r, ms(2), &read),
        [0x00, 0x71, 0x00, 0x00, 0x00]
    );
    // Toggle to B (the default 14.074 MHz there), then set B.
    assert!(exchange(&mut r, ms(3), &[0, 0, 0, 0, 0x81]).is_empty());
    assert_eq!(
        exchange(&mut r, ms(4), &read),
        [0x01, 0x40, 0x74, 0x00, 0x00]
    );
    exchange(&mut r, ms(5), &[0x00, 0x72, 0x20, 0x00, 0x01]);
    assert_eq!(
        exchange(&mut r, ms(6), &read),
        [0x00, 0x72, 0x20, 0x00, 0x00]
    );
    assert_eq!((r.state().vfo_a, r.state().vfo_b), (7_100_000, 7_220_000));
    assert_eq!((r.state().rx_vfo, r.state().tx_vfo), (Vfo::B, Vfo::B));
    // Split on (02), then toggle back to A: receive on A, transmit on B.
    exchange(&mut r, ms(7), &[0, 0, 0, 0, 0x02]);
    assert_eq!((r.state().rx_vfo, r.state().tx_vfo), (Vfo::B, Vfo::A));
    exchange(&mut r, ms(8), &[0, 0, 0, 0, 0x81]);
    assert_eq!((r.state().rx_vfo, r.state().tx_vfo), (Vfo::A, Vfo::B));
    assert_eq!(
        exchange(&mut r, ms(9), &read),
        [0x00, 0x71, 0x00, 0x00, 0x00]
    );
    let t = truths(&mut r);
    let last = t.last().unwrap();
    assert_eq!(
        (last.rx_vfo, last.rx_hz, last.tx_hz),
        (Vfo::A, 7_100_000, 7_220_000)
    );
    assert!(t.iter().all(|t| t.cause != Cause::Operator));
    // Tuneward's station decoder takes the toggle for what it is (the
    // block names no VFO and carries no frequency): only the reads'
    // answers tell the new VFO's frequency.
    let mut d = Dialect::builtin("block-5").unwrap().station_decoder(None);
    let mut out = Vec::new();
    d.feed(Direction::Tx, &[0, 0, 0, 0, 0x81], &mut out);
    assert_eq!(
        out,
        [RigEvent::VfoToggle {
            seen: crate::rig::Seen::Command
        }]
    );
}
