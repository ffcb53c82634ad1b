//! `tuneward probe` on the real binary against `tuneward sim-rig --baud N`
//! (which answers noise to a far end opened at another speed, as a real
//! port would: a pseudo-terminal itself keeps whatever speed the opener
//! sets). The probe must name the simulator's speed (and a binary-family
//! rig's address) and print the config lines to use. That it sent nothing
//! but reads is checked from the simulator's truth log: a set or a keying
//! command would change the rig's state and log a `cat` line.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

mod common;

use common::{forty_metres, Proc, BIN};

/// `sim-rig` speaking `protocol` at `baud` on `dir/rig` with `extra`
/// flags; its truth log.
fn sim_rig(dir: &Path, protocol: &str, baud: u32, extra: &[&str]) -> (Proc, PathBuf) {
    let link = dir.join("rig");
    let truth = dir.join("truth.jsonl");
    let child = Command::new(BIN)
        .args([
            "sim-rig",
            "--protocol",
            protocol,
            "--baud",
            &baud.to_string(),
        ])
        .args(extra)
        .arg("--pty")
        .arg(&link)
        .arg("--truth")
        .arg(&truth)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let proc = Proc(child);
    common::wait_symlink(&link);
    (proc, truth)
}

/// `tuneward probe` on a station whose `[rig]` says `protocol` at `baud`
/// (wrongly, as a rule) with `extra` keys.
fn probe(dir: &Path, protocol: &str, baud: u32, extra: &str) -> Output {
    let config = dir.join("station.toml");
    std::fs::write(
        &config,
        format!(
            "[rig]\nprotocol = \"{protocol}\"\nport = \"{}\"\nbaud = {baud}\nmode = \"poll\"\n{extra}\n\n[tuner]\nlink = \"sim\"\nmin_steps = 0\nmax_steps = 3000\nstate_file = \"motor.state\"\n{}",
            dir.join("rig").display(),
            forty_metres(&[(7_000_000, 0), (7_300_000, 3000)])
        ),
    )
    .unwrap();
    Command::new(BIN)
        .args(["probe", "--listen-ms", "300", "--config"])
        .arg(&config)
        .output()
        .unwrap()
}

/// Only the truth log's first line (`start`): nothing the probe sent
/// changed the rig.
fn untouched(truth: &Path) {
    let text = std::fs::read_to_string(truth).unwrap();
    let causes: Vec<String> = text
        .lines()
        .map(|l| serde_json::from_str::<serde_json::Value>(l).unwrap()["cause"].to_string())
        .collect();
    assert!(causes.iter().all(|c| c != "\"cat\""), "{text}");
}

fn stdout(out: &Output) -> String {
    String::from_utf8_lossy(&out.stdout).into_owned()
}

#[test]
fn probe_names_a_block_rigs_speed_and_the_lines_to_use() {
    let dir = tempfile::tempdir().unwrap();
    let (_sim, truth) = sim_rig(dir.path(), "block-5", 9_600, &[]);
    let out = probe(dir.path(), "block-5", 38_400, "");
    let text = stdout(&out);
    assert!(out.status.success(), "{out:?}");
    assert!(text.contains("found the rig at 9600 baud\n"), "{text}");
    let lines: Vec<&str> = text.lines().collect();
    let at = lines
        .iter()
        .position(|l| *l == "config lines to use:")
        .unwrap();
    assert_eq!(
        &lines[at + 1..],
        ["[rig]", "protocol = \"block-5\"", "baud = 9600"],
        "{text}"
    );
    // The configured speed was tried first, and heard only noise.
    let first = lines
        .iter()
        .find(|l| l.trim_start().starts_with("38400 baud"))
        .unwrap();
    assert!(first.contains("0 frequency reports"), "{text}");
    untouched(&truth);
}

#[test]
fn probe_finds_a_binary_rigs_address_and_speed() {
    let dir = tempfile::tempdir().unwrap();
    // A rig at address 0x5A, 19 200 baud; the config names neither.
    let (_sim, truth) = sim_rig(dir.path(), "binary-bcd", 19_200, &["--address", "0x5A"]);
    let out = probe(dir.path(), "binary-bcd", 9_600, "");
    let text = stdout(&out);
    assert!(out.status.success(), "{out:?}");
    assert!(
        text.contains("found the rig at 19200 baud, address 0x5A\n"),
        "{text}"
    );
    assert!(
        text.ends_with("[rig]\nprotocol = \"binary-bcd\"\nbaud = 19200\naddress = 0x5A\n"),
        "{text}"
    );
    untouched(&truth);
}

#[test]
fn probe_says_so_when_no_speed_answers() {
    let dir = tempfile::tempdir().unwrap();
    // 300 baud: not among the speeds tried.
    let (_sim, truth) = sim_rig(dir.path(), "text-semicolon", 300, &[]);
    let out = probe(dir.path(), "text-semicolon", 38_400, "");
    assert_eq!(out.status.code(), Some(1), "{out:?}");
    let text = stdout(&out);
    assert!(text.contains("no speed gave a clean answer"), "{text}");
    assert!(!text.contains("config lines"), "{text}");
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("not found"),
        "{out:?}"
    );
    untouched(&truth);
}
