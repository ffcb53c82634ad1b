//! Properties of the capture reader and writer: no text makes the reader
//! panic, every error is located, and what the writer writes reads back.

use std::io::BufReader;
use std::time::Duration;

use proptest::prelude::*;
use tuneward::capture::{parse_seconds, CaptureError, CaptureReader, CaptureWriter, Record};
use tuneward::rig::Direction;

/// Text made of the pieces captures are made of, so that the reader gets
/// past the first field often.
fn capture_like() -> impl Strategy<Value = String> {
    let piece = prop_oneof![
        Just("rx".to_string()),
        Just("tx".to_string()),
        Just(" ".to_string()),
        Just("\n".to_string()),
        Just("\r\n".to_string()),
        Just("#".to_string()),
        Just(".".to_string()),
        "[0-9]{1,12}",
        "[0-9A-Fa-f]{1,3}",
        any::<char>().prop_map(|c| c.to_string()),
    ];
    prop::collection::vec(piece, 0..80).prop_map(|v| v.concat())
}

fn check_reader(bytes: &[u8]) -> Result<(), TestCaseError> {
    let lines = bytes.split(|&b| b == b'\n').count();
    let mut last_line = 0;
    let mut last_t = Duration::ZERO;
    // Small buffer so that lines span many refills.
    for item in CaptureReader::new(BufReader::with_capacity(7, bytes), "p.cap") {
        match item {
            Ok(r) => {
                prop_assert!(r.line > last_line && r.line <= lines);
                prop_assert!(r.t >= last_t);
                prop_assert!(!r.bytes.is_empty());
                last_line = r.line;
                last_t = r.t;
            }
            Err(CaptureError::Line { line, ref path, .. }) => {
                prop_assert!(line > last_line && line <= lines);
                prop_assert_eq!(path.to_str(), Some("p.cap"));
                last_line = line;
            }
            Err(e) => prop_assert!(false, "unexpected error {}", e),
        }
    }
    Ok(())
}

fn record() -> impl Strategy<Value = (u64, bool, Vec<u8>)> {
    (
        0u64..5_000_000,
        any::<bool>(),
        prop::collection::vec(any::<u8>(), 1..40),
    )
}

proptest! {
    #[test]
    fn reader_never_panics_on_arbitrary_bytes(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        check_reader(&bytes)?;
    }

    #[test]
    fn reader_never_panics_on_capture_like_text(text in capture_like()) {
        check_reader(text.as_bytes())?;
    }

    #[test]
    fn writer_output_reads_back(records in prop::collection::vec(record(), 0..30), note in ".{0,40}") {
        let mut w = CaptureWriter::new(Vec::new());
        w.comment(&note).unwrap();
        let mut t = Duration::ZERO;
        let mut expected = Vec::new();
        for (step_us, rx, bytes) in &records {
            t += Duration::from_micros(*step_us);
            let dir = if *rx { Direction::Rx } else { Direction::Tx };
            w.write_record(t, dir, bytes).unwrap();
            expected.push((t, dir, bytes.clone()));
        }
        let text = w.into_inner();
        let back: Vec<Record> = CaptureReader::new(text.as_slice(), "w.cap")
            .collect::<Result<_, _>>()
            .map_err(|e| TestCaseError::fail(e.to_string()))?;
        let back: Vec<_> = back.into_iter().map(|r| (r.t, r.dir, r.bytes)).collect();
        prop_assert_eq!(back, expected);
    }

    #[test]
    fn seconds_parse_exactly(secs in 0u64..=u64::MAX, nanos in 0u32..1_000_000_000, trim in any::<bool>()) {
        let mut text = format!("{secs}.{nanos:09}");
        if trim {
            text = text.trim_end_matches('0').trim_end_matches('.').to_string();
            if text.is_empty() || text.ends_with('.') {
                text.push('0');
            }
        }
        prop_assert_eq!(parse_seconds(&text), Ok(Duration::new(secs, nanos)));
    }
}
