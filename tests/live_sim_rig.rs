//! Runs the real `tuneward sim-rig` on a pseudo-terminal and talks to it as
//! a controller would: a raw-mode port opened through the symlink.
//!
//! Expected frames are worked by hand from the families' published layouts:
//! the binary family's CI-V reference guide (`FE FE <to> <from> <command>
//! [data] FD`, little-endian packed BCD, `FB` OK / `FA` NG; codes recalled)
//! and the text family's PC control command reference (`FA<11 digits>;`,
//! sets answered silently, `?;` for a refusal; recalled).

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio_serial::SerialStream;
use tuneward::rig::{Dialect, Direction, RigEvent};

mod common;

use common::{open_port, read_exactly, Proc, BIN};

/// `tuneward sim-rig` with `args`, its link and its truth log in `dir`;
/// returns once the symlink is there.
fn start(dir: &Path, protocol: &str, script: &str, extra: &[&str]) -> (Proc, PathBuf, PathBuf) {
    let link = dir.join("rig");
    let truth = dir.join("truth.jsonl");
    let script_file = dir.join("script.jsonl");
    std::fs::write(&script_file, script).unwrap();
    let child = Command::new(BIN)
        .args(["sim-rig", "--protocol", protocol, "--pty"])
        .arg(&link)
        .arg("--script")
        .arg(&script_file)
        .arg("--truth")
        .arg(&truth)
        .arg("--script-from-first-byte")
        .args(extra)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let sim = Proc(child);
    common::wait_symlink(&link);
    (sim, link, truth)
}

/// Nothing more arrives within `quiet`.
async fn assert_quiet(port: &mut SerialStream, quiet: Duration) {
    let mut b = [0u8; 64];
    if let Ok(r) = tokio::time::timeout(quiet, port.read(&mut b)).await {
        let n = r.unwrap();
        panic!("expected silence, got {:02X?}", &b[..n]);
    }
}

fn decode(protocol: &str, bytes: &[u8]) -> Vec<RigEvent> {
    let mut d = Dialect::builtin(protocol).unwrap().decoder(None);
    let mut out = Vec::new();
    d.feed(Direction::Rx, bytes, &mut out);
    out
}

#[tokio::test]
async fn binary_rig_answers_reads_acknowledges_sets_and_reports_the_knob() {
    let dir = tempfile::tempdir().unwrap();
    let (mut sim, link, truth) = start(
        dir.path(),
        "binary-bcd",
        "{\"at_ms\": 700, \"op\": \"tune\", \"hz\": 7100000}\n{\"at_ms\": 900, \"op\": \"key\"}\n",
        &[],
    );
    let mut port = open_port(&link, 115_200);
    // Frequency read from controller E0 to rig 94; 14 074 000 Hz is
    // 00 40 07 14 00 (low pair first).
    port.write_all(&[0xFE, 0xFE, 0x94, 0xE0, 0x03, 0xFD])
        .await
        .unwrap();
    assert_eq!(
        read_exactly(&mut port, 11).await,
        [0xFE, 0xFE, 0xE0, 0x94, 0x03, 0x00, 0x40, 0x07, 0x14, 0x00, 0xFD]
    );
    // Set 7 074 000 Hz (00 40 07 07 00): OK.
    port.write_all(&[
        0xFE, 0xFE, 0x94, 0xE0, 0x05, 0x00, 0x40, 0x07, 0x07, 0x00, 0xFD,
    ])
    .await
    .unwrap();
    assert_eq!(
        read_exactly(&mut port, 6).await,
        [0xFE, 0xFE, 0xE0, 0x94, 0xFB, 0xFD]
    );
    // An unknown command: not good.
    port.write_all(&[0xFE, 0xFE, 0x94, 0xE0, 0x7E, 0xFD])
        .await
        .unwrap();
    assert_eq!(
        read_exactly(&mut port, 6).await,
        [0xFE, 0xFE, 0xE0, 0x94, 0xFA, 0xFD]
    );
    // The scripted knob: a transceive broadcast to 00 of 7 100 000 Hz.
    let report = read_exactly(&mut port, 11).await;
    assert_eq!(
        report,
        [0xFE, 0xFE, 0x00, 0x94, 0x00, 0x00, 0x00, 0x10, 0x07, 0x00, 0xFD]
    );
    assert_eq!(
        decode("binary-bcd", &report),
        [RigEvent::Frequency { hz: 7_100_000 }]
    );
    // Keying is not announced by this family, but the truth log says it.
    let log = common::jsonl_until(&truth, |l| l.iter().any(|t| t["transmitting"] == true));
    let causes: Vec<&str> = log.iter().map(|t| t["cause"].as_str().unwrap()).collect();
    assert_eq!(causes, ["start", "cat", "operator", "operator"]);
    let hz: Vec<u64> = log.iter().map(|t| t["rx_hz"].as_u64().unwrap()).collect();
    assert_eq!(hz, [14_074_000, 7_074_000, 7_100_000, 7_100_000]);
    // The operator's knob 700 ms after our first byte; the set before it.
    let t: Vec<f64> = log.iter().map(|t| t["t_ms"].as_f64().unwrap()).collect();
    assert!(t[1] <= t[2] && t[2] + 200.0 <= t[3] + 0.001, "{t:?}");
    assert_eq!(log[3]["tx_hz"], 7_100_000);

    sim.signal(libc::SIGINT);
    assert!(sim.wait_exit(Duration::from_secs(5)).success());
    assert!(std::fs::symlink_metadata(&link).is_err());
}

#[tokio::test]
async fn text_rig_answers_reads_takes_sets_silently_refuses_and_reports() {
    let dir = tempfile::tempdir().unwrap();
    let (_sim, link, truth) = start(
        dir.path(),
        "text-semicolon",
        "{\"at_ms\": 700, \"op\": \"tune\", \"hz\": 7100000}\n{\"at_ms\": 800, \"op\": \"key\"}\n{\"at_ms\": 900, \"op\": \"unkey\"}\n",
        &[],
    );
    let mut port = open_port(&link, 38_400);
    port.write_all(b"FA;").await.unwrap();
    assert_eq!(read_exactly(&mut port, 14).await, b"FA00014074000;");
    // The set is silent: the next thing heard is the read after it.
    port.write_all(b"FA00007074000;FA;").await.unwrap();
    assert_eq!(read_exactly(&mut port, 14).await, b"FA00007074000;");
    port.write_all(b"QQ;").await.unwrap();
    assert_eq!(read_exactly(&mut port, 2).await, b"?;");
    // Auto information: the knob, then transmit and receive.
    let reports = read_exactly(&mut port, 14 + 3 + 3).await;
    assert_eq!(reports, b"FA00007100000;TX;RX;");
    assert_eq!(
        decode("text-semicolon", &reports),
        [
            RigEvent::Frequency { hz: 7_100_000 },
            RigEvent::Transmit { on: true },
            RigEvent::Transmit { on: false }
        ]
    );
    let log = common::jsonl_until(&truth, |l| l.len() >= 5);
    let tx: Vec<bool> = log.iter().map(|t| t["transmitting"] == true).collect();
    assert_eq!(tx, [false, false, false, true, false]);
    assert_eq!(log[2]["rx_hz"], 7_100_000);
    assert_eq!(log[2]["cause"], "operator");
}

#[tokio::test]
async fn a_port_at_the_wrong_speed_hears_garbage_and_the_right_one_an_answer() {
    let dir = tempfile::tempdir().unwrap();
    let (_sim, link, _truth) = start(dir.path(), "text-semicolon", "", &["--baud", "9600"]);
    let mut wrong = open_port(&link, 115_200);
    wrong.write_all(b"FA;").await.unwrap();
    let heard = read_exactly(&mut wrong, 3).await;
    assert!(
        decode("text-semicolon", &heard)
            .iter()
            .all(|e| matches!(e, RigEvent::Reject { .. })),
        "{heard:02X?}"
    );
    assert_quiet(&mut wrong, Duration::from_millis(200)).await;
    drop(wrong);
    let mut right = open_port(&link, 9600);
    right.write_all(b"FA;").await.unwrap();
    assert_eq!(read_exactly(&mut right, 14).await, b"FA00014074000;");
}

#[test]
fn bad_arguments_are_refused_with_a_reason() {
    let dir = tempfile::tempdir().unwrap();
    let script = dir.path().join("bad.jsonl");
    std::fs::write(&script, "{\"at_ms\": 1, \"op\": \"dance\"}\n").unwrap();
    let cases: [(&[&str], &str); 3] = [
        (&["--protocol", "no-such-rig"], "no-such-rig"),
        (&["--protocol", "binary-bcd", "--address", "0x1FF"], "0x1FF"),
        (
            &[
                "--protocol",
                "text-semicolon",
                "--script",
                script.to_str().unwrap(),
            ],
            "line 1",
        ),
    ];
    for (args, want) in cases {
        let out = Command::new(BIN)
            .arg("sim-rig")
            .arg("--pty")
            .arg(dir.path().join("rig"))
            .args(args)
            .output()
            .unwrap();
        assert!(!out.status.success(), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(
            err.contains(want) && err.contains("expected"),
            "{args:?}: {err}"
        );
    }
}
