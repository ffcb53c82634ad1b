//! A rig port at the wrong speed: `tuneward capture` and `tuneward run`
//! poll `tuneward sim-rig` (which answers garbage when the opener's speed
//! differs from its `--baud`, as a real port would: a pseudo-terminal
//! itself keeps whatever speed the opener sets); capture's progress line
//! and run's log (at warn level, once) say why nothing is readable, naming
//! the likely causes with the counts; at the right speed they say nothing
//! of the kind.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

mod common;

use common::{forty_metres, Logged, Proc, BIN};

/// `sim-rig` speaking `text-semicolon` at 9600 baud on `dir/rig`, its
/// truth log in `dir/truth.jsonl`, running `script` (none: its built-in
/// demo operator); the link.
fn sim_rig(dir: &Path, script: Option<&str>) -> (Proc, PathBuf) {
    let link = dir.join("rig");
    let mut cmd = Command::new(BIN);
    cmd.args([
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
    .stderr(Stdio::null());
    if let Some(script) = script {
        let file = dir.join("script.jsonl");
        std::fs::write(&file, script).unwrap();
        cmd.arg("--script").arg(file);
    }
    let sim = Proc(cmd.spawn().unwrap());
    common::wait_symlink(&link);
    (sim, link)
}

/// Runs sim-rig at 9600 baud and a 4 s capture polling it at `baud`;
/// returns capture's stderr.
fn capture_at(dir: &Path, baud: u32) -> String {
    let (_sim, link) = sim_rig(dir, None);
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

/// `tuneward run` polling the 9600-baud sim-rig at `baud` every 100 ms
/// (the in-process simulated controller; 40 m, 100 Hz a step from
/// 7.000 MHz, invented); the operator tunes to 7.100 MHz at 300 ms.
fn run_at(dir: &Path, baud: u32) -> (Proc, Logged) {
    let (sim, link) = sim_rig(
        dir,
        Some(
            r#"{"at_ms": 300, "op": "tune", "hz": 7100000}
"#,
        ),
    );
    let config = dir.join("station.toml");
    let text = format!(
        "[rig]\nprotocol = \"text-semicolon\"\nport = \"{}\"\nbaud = {baud}\nmode = \"poll\"\npoll_ms = 100\n\n[tuner]\nlink = \"sim\"\nmin_steps = 0\nmax_steps = 3000\nstate_file = \"motor.state\"\n\n[inhibit]\nunprotected_ok = true\n{}",
        link.display(),
        forty_metres(&[(7_000_000, 0), (7_300_000, 3000)])
    );
    std::fs::write(&config, text).unwrap();
    (sim, Logged::run(&config))
}

/// The log lines of the silent-port warning.
fn warnings(run: &Logged) -> Vec<String> {
    run.log()
        .into_iter()
        .filter(|l| l.contains("no readable report"))
        .collect()
}

/// The number after `word` in `line` (`... sent 123 bytes`, `bytes=123`).
fn number_after(line: &str, word: &str) -> Option<u64> {
    let rest = &line[line.find(word)? + word.len()..];
    let digits: String = rest.chars().take_while(char::is_ascii_digit).collect();
    digits.parse().ok()
}

#[test]
fn run_warns_once_at_the_wrong_baud_rate_naming_the_causes_with_counts() {
    let dir = tempfile::tempdir().unwrap();
    let (_sim, run) = run_at(dir.path(), 115_200);
    let line = run.wait_log(&["no readable report"]);
    assert!(line.contains("WARN"), "not at warn level: {line}");
    for words in [
        "baud rate",
        "parity",
        "wrong dialect",
        "auto-report",
        "rejected:",
        "garbage",
    ] {
        assert!(line.contains(words), "{words:?} missing from {line}");
    }
    // The counts: the spell's length (at least the 3 s it waits for) and
    // the bytes the rig sent in it, in the message and as fields.
    let sent = number_after(&line, "although it sent ").unwrap_or_else(|| panic!("{line}"));
    assert!(sent > 0, "{line}");
    assert_eq!(number_after(&line, "bytes="), Some(sent), "{line}");
    assert!(
        number_after(&line, "seconds=").is_some_and(|s| s >= 3),
        "{line}"
    );
    // Once a spell: the rig keeps sending garbage for as long again and
    // more, and nothing more is said.
    let until = Instant::now() + Duration::from_secs(5);
    while Instant::now() < until {
        assert_eq!(warnings(&run).len(), 1, "{}", run.log().join("\n"));
        std::thread::sleep(Duration::from_millis(100));
    }
    // Nothing was followed: no report was ever read.
    assert!(
        !run.log().iter().any(|l| l.contains("INFO move")),
        "{}",
        run.log().join("\n")
    );
}

#[test]
fn run_at_the_right_baud_rate_follows_the_rig_and_never_warns() {
    let dir = tempfile::tempdir().unwrap();
    let (_sim, run) = run_at(dir.path(), 9600);
    // The rig is read: 7.100 MHz followed, 1000 steps by hand.
    let moved = run.wait_log(&["INFO move"]);
    assert!(moved.contains("1000"), "{moved}");
    // Watched for longer than the warning waits (3 s) and more.
    let until = Instant::now() + Duration::from_secs(5);
    while Instant::now() < until {
        assert!(warnings(&run).is_empty(), "{}", run.log().join("\n"));
        std::thread::sleep(Duration::from_millis(100));
    }
}
