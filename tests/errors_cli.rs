//! Errors a person can act on, through the real binary: every config and
//! capture mistake names the file, the key or line, what was expected and
//! what was found, and the command exits non-zero.

use std::fs;
use std::path::{Path, PathBuf};
use std::process::Command;

fn demo_config() -> String {
    fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo.toml")).unwrap()
}

/// Runs `tuneward args…`; returns stderr, asserting a failure exit.
fn fails(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_tuneward"))
        .args(args)
        .output()
        .unwrap();
    assert!(!out.status.success(), "{args:?} succeeded");
    assert_eq!(out.status.code(), Some(1), "{args:?}");
    String::from_utf8(out.stderr).unwrap()
}

fn assert_all(text: &str, parts: &[&str]) {
    for p in parts {
        assert!(text.contains(p), "`{p}` missing from: {text}");
    }
    // Said once: no cause repeated on a `because:` line.
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 1, "one line expected: {text}");
    assert!(text.starts_with("tuneward: "), "{text}");
}

/// The demo config with `from` replaced by `to`, written as `name`.
fn config_with(dir: &Path, name: &str, from: &str, to: &str) -> PathBuf {
    let demo = demo_config();
    assert!(demo.contains(from), "{from}");
    let path = dir.join(name);
    fs::write(&path, demo.replacen(from, to, 1)).unwrap();
    path
}

fn check(config: &Path) -> String {
    fails(&["check", "--config", config.to_str().unwrap()])
}

#[test]
fn config_errors_name_file_key_expected_and_found() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();

    let p = config_with(
        d,
        "unknown.toml",
        "debounce_ms = 400",
        "debounce_ms = 400\nsettle_time = 3",
    );
    let err = check(&p);
    assert_all(
        &err,
        &[
            "unknown.toml:21:1",
            "`follow.settle_time`",
            "expected one of",
            "`debounce_ms`",
        ],
    );

    let p = config_with(
        d,
        "type.toml",
        "debounce_ms = 400",
        "debounce_ms = \"slow\"",
    );
    let err = check(&p);
    assert_all(
        &err,
        &[
            "type.toml:20:15",
            "`follow.debounce_ms`",
            "expected a whole number, 0 or more",
            "found string \"slow\"",
        ],
    );
    assert!(!err.contains("u64"), "{err}");

    let p = config_with(
        d,
        "float.toml",
        "steps_per_second = 32000",
        "steps_per_second = \"fast\"",
    );
    assert_all(
        &check(&p),
        &[
            "float.toml:14:20",
            "`tuner.steps_per_second`",
            "expected a number",
            "found string \"fast\"",
        ],
    );

    let p = config_with(d, "band.toml", "high_hz = 7200000", "high_hz = 6900000");
    assert_all(
        &check(&p),
        &[
            "band.toml",
            "`band[0] (40m).high_hz`",
            "expected a value above low_hz",
            "found low_hz = 7000000, high_hz = 6900000",
        ],
    );

    let demo = demo_config();
    let (start, end) = (
        demo.find("[calibration]").unwrap(),
        demo.find("# Band edges").unwrap(),
    );
    let p = d.join("nocal.toml");
    fs::write(&p, format!("{}{}", &demo[..start], &demo[end..])).unwrap();
    assert_all(
        &check(&p),
        &[
            "nocal.toml",
            "`calibration.points`",
            "expected at least two measured points",
            "found none",
        ],
    );

    let p = config_with(
        d,
        "dialect.toml",
        "protocol = \"binary-bcd\"",
        "protocol = \"binary-bdc\"",
    );
    assert_all(
        &check(&p),
        &[
            "dialect.toml",
            "`rig.protocol`",
            "unknown dialect `binary-bdc`",
            "expected a built-in dialect (binary-bcd,",
        ],
    );

    let p = config_with(d, "limits.toml", "min_steps = 4000", "min_steps = 500000");
    assert_all(
        &check(&p),
        &[
            "limits.toml",
            "`tuner.max_steps`",
            "expected a value above tuner.min_steps",
            "found min_steps = 500000",
        ],
    );

    let err = fails(&["check", "--config", d.join("absent.toml").to_str().unwrap()]);
    assert_all(&err, &["cannot read config", "absent.toml", "No such file"]);
}

fn replay_fails(dir: &Path, name: &str, text: &[u8]) -> String {
    let cap = dir.join(name);
    fs::write(&cap, text).unwrap();
    let config = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo.toml");
    fails(&[
        "replay",
        cap.to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
    ])
}

#[test]
fn capture_errors_name_file_line_expected_and_found() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let good = "0.5 rx FE FE 00 94 00 00 40 07 07 00 FD\n";

    let err = replay_fails(d, "time.cap", format!("{good}1,5 rx FE\n").as_bytes());
    assert_all(
        &err,
        &[
            "time.cap, line 2",
            "expected seconds as digits",
            "found `1,5`",
        ],
    );

    let err = replay_fails(d, "order.cap", format!("{good}0.25 rx FE\n").as_bytes());
    assert_all(
        &err,
        &[
            "order.cap, line 2",
            "expected a time no earlier than 0.5 s (line 1)",
            "found 0.25 s",
        ],
    );

    let err = replay_fails(d, "dir.cap", format!("# c\n{good}1 to FE\n").as_bytes());
    assert_all(
        &err,
        &[
            "dir.cap, line 3",
            "expected `rx` or `tx` (or `sense`) after the time",
            "found `to`",
        ],
    );

    let err = replay_fails(d, "hex.cap", format!("{good}1 rx FE F\n").as_bytes());
    assert_all(
        &err,
        &[
            "hex.cap, line 2",
            "expected a byte as two hex digits",
            "found `F` as byte 2",
        ],
    );

    let err = replay_fails(d, "text.cap", b"1 rx \xC3\x28\n");
    assert_all(
        &err,
        &[
            "text.cap, line 1",
            "expected UTF-8 text",
            "found the byte 0xC3 at column 6",
        ],
    );

    // A 3 MB line of hex text: refused by length, not echoed.
    let mut big = Vec::from(good.as_bytes());
    big.extend_from_slice(b"1 rx");
    big.extend(std::iter::repeat_n(b" FE", 1_000_000).flatten());
    big.push(b'\n');
    let err = replay_fails(d, "long.cap", &big);
    assert_all(
        &err,
        &[
            "long.cap, line 2",
            "expected a line of at most 1048576 bytes",
            "found a line of 3000004 bytes",
        ],
    );
    assert!(err.len() < 200, "{} bytes of error", err.len());

    let config = Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo.toml");
    let err = fails(&[
        "replay",
        d.join("absent.cap").to_str().unwrap(),
        "--config",
        config.to_str().unwrap(),
    ]);
    assert_all(
        &err,
        &["absent.cap", "cannot read the capture", "No such file"],
    );
}

/// The one line `tuneward` prints for `args`, with a failure exit.
fn one_line(args: &[&str]) -> String {
    let err = fails(args);
    assert_eq!(err.lines().count(), 1, "one line expected: {err}");
    err.trim_end().to_string()
}

#[test]
fn command_line_and_start_up_errors_say_where_expected_and_found() {
    assert_eq!(
        one_line(&["ctl", "status"]),
        "tuneward: ctl: expected `-c CONFIG` (the station's config, which says where the control socket is), found none"
    );
    // The simulator's limits default to 0..10000.
    assert_eq!(
        one_line(&["sim-tuner", "--listen", "127.0.0.1:0", "--start", "20000"]),
        "tuneward: sim-tuner: start: expected a position within 0..10000, found 20000"
    );
    assert_eq!(
        one_line(&["sim-tuner", "--listen", "127.0.0.1:0", "--backlash=-1"]),
        "tuneward: --backlash: expected 0 or more steps, found -1"
    );
    let err = one_line(&[
        "sim-rig",
        "--protocol",
        "morse",
        "--pty",
        "/nonexistent/rig",
    ]);
    assert!(
        err.starts_with(
            "tuneward: --protocol: unknown dialect `morse`: expected a built-in dialect ("
        ),
        "{err}"
    );

    // A family that never reports on its own cannot be only listened to:
    // `run` refuses before it opens the port, naming the file and key.
    let dir = tempfile::tempdir().unwrap();
    let config = config_with(
        dir.path(),
        "block.toml",
        "protocol = \"binary-bcd\"",
        "protocol = \"block-5\"\nport = \"/dev/null\"",
    );
    let err = fails(&["run", "-c", config.to_str().unwrap()]);
    let last = err.lines().last().unwrap_or_default();
    assert_eq!(
        last,
        format!(
            "tuneward: {}: key `rig.mode`: expected \"poll\" or \"proxy\" for the block-family dialect `block-5`, found \"listen\" (this family never reports on its own)",
            config.display()
        )
    );
}
