//! Capture files on disk: the documented example reads and decodes, and a
//! file with one mistake a line is reported line by line.

use std::path::{Path, PathBuf};
use std::time::Duration;

use tuneward::capture::{CaptureError, CaptureReader};
use tuneward::rig::{Dialect, Direction, RigEvent};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/capture")
        .join(name)
}

#[test]
fn example_reads_and_decodes() {
    let recs: Vec<_> = CaptureReader::open(&fixture("example.cap"))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(recs.len(), 5);
    assert_eq!(recs[0].dir, Direction::Tx);
    assert_eq!(recs[4].t, Duration::new(3, 500_900_000));
    assert_eq!(recs[4].line, 7);
    let mut dec = Dialect::builtin("binary-bcd").unwrap().decoder(None);
    let mut out = Vec::new();
    for r in &recs {
        dec.feed(r.dir, &r.bytes, &mut out);
    }
    dec.finish(&mut out);
    // The echo is ignored; the answer (00 40 07 14 00) and the split
    // broadcast (00 50 07 14 00) are 14 074 000 and 14 075 000 Hz by hand.
    assert_eq!(
        out,
        vec![
            RigEvent::Frequency { hz: 14_074_000 },
            RigEvent::Frequency { hz: 14_075_000 }
        ]
    );
}

#[test]
fn malformed_lines_are_each_named() {
    let path = fixture("malformed.cap");
    let items: Vec<_> = CaptureReader::open(&path).unwrap().collect();
    let mut ok_lines = Vec::new();
    let mut errors = Vec::new();
    for item in items {
        match item {
            Ok(r) => ok_lines.push(r.line),
            Err(CaptureError::Line { line, found, .. }) => errors.push((line, found)),
            Err(e) => panic!("{e}"),
        }
    }
    assert_eq!(ok_lines, vec![2, 14]);
    let expected: Vec<(usize, String)> = vec![
        (3, "`RX`".into()),
        (4, "`0` as byte 3".into()),
        (5, "`FE,FE` as byte 1".into()),
        (6, "`-3`".into()),
        (7, "`3.0000000001`".into()),
        (8, "0.5 s".into()),
        (9, "the end of the line".into()),
        (10, "two spaces in a row".into()),
        (11, "leading whitespace".into()),
    ];
    assert_eq!(errors, expected);
}

#[test]
fn error_message_names_file_line_expected_found() {
    let path = fixture("malformed.cap");
    let first_err = CaptureReader::open(&path)
        .unwrap()
        .find_map(|r| r.err())
        .unwrap();
    let msg = first_err.to_string();
    assert!(
        msg.contains("malformed.cap, line 3: expected `rx` or `tx`"),
        "{msg}"
    );
    assert!(msg.ends_with("found `RX`"), "{msg}");
}

#[test]
fn missing_file_names_the_path() {
    let e = CaptureReader::open(Path::new("/nonexistent/dir/x.cap"))
        .err()
        .unwrap();
    assert!(matches!(e, CaptureError::Io { .. }));
    assert!(e.to_string().contains("/nonexistent/dir/x.cap"), "{e}");
}
