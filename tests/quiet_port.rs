//! A rig port at the wrong speed: `tuneward capture` polls `tuneward
//! sim-rig` (which answers garbage when the opener's speed differs from its
//! `--baud`, as a real port would) and its progress line says why nothing
//! is readable; at the right speed it says nothing of the kind.

use std::path::Path;
use std::process::{Command, Stdio};

mod common;

use common::{forty_metres, Proc, BIN};

/// Runs sim-rig at 9600 baud and a 4 s capture polling it at `baud`;
/// returns capture's stderr.
fn capture_at(dir: &Path, baud: u32) -> String {
    let link = dir.join("rig");
    let sim = Command::new(BIN)
        .args([
            "sim-rig",
            "--protocol",
            "text-semicolon",
            "--baud",
            "9600",
            "--pty",
        ])
        .arg(&link)
        .arg("--truth")
        .arg(dir.join("truth.jsonl"))
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let _sim = Proc(sim);
    common::wait_symlink(&link);
    let config = dir.join("station.toml");
    let text = format!(
        "[rig]\nprotocol = \"text-semicolon\"\nport = \"{}\"\nbaud = {baud}\nmode = \"poll\"\n{}",
        link.display(),
        forty_metres(&[(7_000_000, 0), (7_300_000, 3000)])
    );
    std::fs::write(&config, text).unwrap();
    let out = Command::new(BIN)
        .args(["capture", "--duration", "5", "--config"])
        .arg(&config)
        .arg("--out")
        .arg(dir.join("cap.txt"))
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    String::from_utf8_lossy(&out.stderr).into_owned()
}

#[test]
fn the_wrong_baud_rate_is_named_as_a_likely_cause() {
    let dir = tempfile::tempdir().unwrap();
    let err = capture_at(dir.path(), 115_200);
    let line = err
        .lines()
        .find(|l| l.contains("no readable report"))
        .unwrap_or_else(|| panic!("no hint in:\n{err}"));
    for word in [
        "capturing:",
        "baud rate",
        "parity",
        "dialect",
        "auto-report",
    ] {
        assert!(line.contains(word), "{word} missing from {line}");
    }
}

#[test]
fn the_right_baud_rate_gives_no_hint() {
    let dir = tempfile::tempdir().unwrap();
    let err = capture_at(dir.path(), 9600);
    assert!(err.contains("capturing:"), "{err}");
    assert!(!err.contains("no readable report"), "{err}");
    // Not quiet for want of answers: the rig did answer.
    let done = err.lines().find(|l| l.starts_with("captured")).unwrap();
    let rx: u64 = done
        .split('(')
        .nth(1)
        .and_then(|r| r.split(' ').next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("{done}"));
    assert!(rx > 100, "{done}");
}
