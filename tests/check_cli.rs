//! `tuneward check` on the real binary: each config a station might write
//! gives its graded finding (error, warning, note), the exit status that
//! goes with it, and a message naming the key and what to do.

use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

fn repo(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tuneward"))
}

/// `tuneward check -c config [extra…]`: exit status, stdout, stderr.
fn check(config: &Path, extra: &[&str]) -> (Option<i32>, String, String) {
    let out: Output = bin()
        .arg("check")
        .arg("-c")
        .arg(config)
        .args(extra)
        .output()
        .unwrap();
    (
        out.status.code(),
        String::from_utf8(out.stdout).unwrap(),
        String::from_utf8(out.stderr).unwrap(),
    )
}

/// The finding of `grade` about `key` in check's output (its two lines),
/// asserting it is there and says what to do.
fn finding(stdout: &str, grade: &str, key: &str) -> String {
    let lines: Vec<&str> = stdout.lines().collect();
    let head = format!("{grade}: key `{key}`:");
    let at = lines
        .iter()
        .position(|l| l.trim_start().starts_with(&head))
        .unwrap_or_else(|| panic!("no `{head}` in:\n{stdout}"));
    let next = lines.get(at + 1).copied().unwrap_or("");
    assert!(
        next.trim_start().starts_with("what to do: ") && next.len() > "    what to do: ".len() + 5,
        "{head} says nothing to do:\n{stdout}"
    );
    format!("{}\n{next}", lines[at])
}

/// Every finding of `grade` about `key`, each with its line of what to do.
fn findings(stdout: &str, grade: &str, key: &str) -> Vec<String> {
    let head = format!("{grade}: key `{key}`:");
    let lines: Vec<&str> = stdout.lines().collect();
    lines
        .iter()
        .enumerate()
        .filter(|(_, l)| l.trim_start().starts_with(&head))
        .map(|(i, l)| format!("{l}\n{}", lines.get(i + 1).copied().unwrap_or("")))
        .collect()
}

fn has_finding(stdout: &str, grade: &str, key: &str) -> bool {
    let head = format!("{grade}: key `{key}`:");
    stdout.lines().any(|l| l.trim_start().starts_with(&head))
}

/// The demo station with `from` replaced by `to`, written into `dir`.
fn demo_with(dir: &Path, name: &str, edits: &[(&str, &str)]) -> PathBuf {
    let mut text = fs::read_to_string(repo("config/demo.toml")).unwrap();
    for (from, to) in edits {
        assert!(text.contains(from), "{from}");
        text = text.replacen(from, to, 1);
    }
    let path = dir.join(name);
    fs::write(&path, text).unwrap();
    path
}

/// The invented typo station (fixtures/calibration) in `dir`, with its
/// points file edited.
fn typo_station(dir: &Path, point_edit: (&str, &str), extra: &str) -> PathBuf {
    let csv = fs::read_to_string(repo("fixtures/calibration/typo.csv")).unwrap();
    assert!(csv.contains(point_edit.0));
    fs::write(
        dir.join("typo.csv"),
        csv.replacen(point_edit.0, point_edit.1, 1),
    )
    .unwrap();
    let toml = fs::read_to_string(repo("fixtures/calibration/typo-station.toml")).unwrap();
    let path = dir.join("station.toml");
    fs::write(&path, format!("{toml}\n{extra}")).unwrap();
    path
}

#[test]
fn a_typed_wrong_point_is_named_and_refused() {
    let dir = tempfile::tempdir().unwrap();
    let config = typo_station(dir.path(), ("14200000,24448", "14200000,2448"), "");
    let (code, out, err) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}{err}");
    assert!(
        out.starts_with(&format!("{}: refused", config.display())),
        "{out}"
    );
    // The point is named, with the value it was most likely meant to be.
    let named = finding(&out, "warning", "calibration.file");
    assert!(
        named.contains("measured 2448 steps at 14.200 MHz"),
        "{named}"
    );
    assert!(named.contains("24 448"), "{named}");
    // The error is the leave-one-out error beyond the loop's half-window,
    // and says to fix that point.
    finding(&out, "error", "calibration.file");
    let refusals = findings(&out, "error", "calibration.file");
    let refusal = refusals
        .iter()
        .find(|f| f.contains("band[1] (20m)"))
        .unwrap_or_else(|| panic!("20 m not refused:\n{out}"));
    assert!(refusal.contains("1.5:1 half-window"), "{refusal}");
    assert!(
        refusal.contains("measured 2448 steps at 14.200 MHz"),
        "{refusal}"
    );
    assert!(err.contains("refused by check: "), "{err}");
    assert!(err.contains("calibration.file"), "{err}");

    // Corrected, the same station is valid.
    let config = typo_station(dir.path(), ("14200000,24448", "14200000,24448"), "");
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    assert!(!out.contains("likely wrong"), "{out}");
}

#[test]
fn a_band_wholly_beyond_the_travel_limits_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    // 80 m has no calibration points: the physics curve puts it at about
    // 430 000 steps, far above max_steps = 120 000.
    let band = "[[band]]\nname = \"80m\"\nlow_hz = 3500000\nhigh_hz = 3800000\n";
    let config = typo_station(dir.path(), ("14200000,24448", "14200000,24448"), band);
    let (code, out, err) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}{err}");
    let f = finding(&out, "error", "band[3] (80m)");
    assert!(
        f.contains("beyond tuner.min_steps..=max_steps (0..=120000)"),
        "{f}"
    );
    assert!(f.contains("measure calibration points in this band"), "{f}");
    // The band also has fewer than three points: a warning of its own.
    assert!(out.contains("80m: only 0 point(s)"), "{out}");
}

#[test]
fn a_link_run_refuses_is_refused_by_check_too() {
    let dir = tempfile::tempdir().unwrap();
    let config = demo_with(
        dir.path(),
        "link.toml",
        &[
            ("link = \"sim\"", "link = \"tcp:/127.0.0.1:7300\""),
            ("baud = 19200", "baud = 19200\nport = \"/dev/null-rig\""),
            ("[[band]]", "[inhibit]\nunprotected_ok = true\n\n[[band]]"),
        ],
    );
    let (code, out, err) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}{err}");
    let f = finding(&out, "error", "tuner.link");
    assert!(f.contains("found `tcp:/127.0.0.1:7300`"), "{f}");
    assert!(f.contains("tcp://HOST:PORT"), "{f}");
    // `run` refuses the same config before it opens anything.
    let run = bin()
        .args(["run", "-c"])
        .arg(&config)
        .stdin(Stdio::null())
        .output()
        .unwrap();
    assert!(!run.status.success());
    assert!(String::from_utf8_lossy(&run.stderr).contains("tuner.link"));
}

#[test]
fn no_inhibit_with_a_real_tuner_must_be_stated() {
    let dir = tempfile::tempdir().unwrap();
    let real = ("link = \"sim\"", "link = \"tcp://127.0.0.1:7300\"");
    let config = demo_with(dir.path(), "bare.toml", &[real]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}");
    let f = finding(&out, "error", "inhibit.line");
    assert!(f.contains("unprotected_ok = true"), "{f}");
    assert!(f.contains("Wiring"), "{f}");

    // Stated explicitly: valid, with the warning still printed.
    let config = demo_with(
        dir.path(),
        "stated.toml",
        &[
            real,
            ("[[band]]", "[inhibit]\nunprotected_ok = true\n\n[[band]]"),
        ],
    );
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    let f = finding(&out, "warning", "inhibit.line");
    assert!(f.contains("stated with unprotected_ok = true"), "{f}");
    // --strict refuses the warning.
    let (code, _, err) = check(&config, &["--strict"]);
    assert_eq!(code, Some(1));
    assert!(err.contains("--strict"), "{err}");
}

#[test]
fn modem_line_polarity_is_judged_and_printed() {
    let dir = tempfile::tempdir().unwrap();
    let inhibit = |high: bool| {
        format!("[inhibit]\nline = \"rts\"\nport = \"/dev/null-inhibit\"\nactive_high = {high}\n\n[[band]]")
    };
    let high = inhibit(true);
    let config = demo_with(dir.path(), "high.toml", &[("[[band]]", &high)]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    let f = finding(&out, "warning", "inhibit.active_high");
    assert!(f.contains("not fail-safe"), "{f}");
    assert!(f.contains("active_high = false"), "{f}");
    assert!(
        out.contains("RTS of /dev/null-inhibit, inhibit on = RTS asserted"),
        "{out}"
    );
    assert_eq!(check(&config, &["--strict"]).0, Some(1));

    let low = inhibit(false);
    let config = demo_with(dir.path(), "low.toml", &[("[[band]]", &low)]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        !has_finding(&out, "warning", "inhibit.active_high"),
        "{out}"
    );
    assert!(!has_finding(&out, "warning", "inhibit.line"), "{out}");
    assert!(
        out.contains("inhibit on = RTS released (active_high = false, fail-safe"),
        "{out}"
    );

    // A line that needs a port and has none is an error, as in `run`.
    let config = demo_with(
        dir.path(),
        "noport.toml",
        &[("[[band]]", "[inhibit]\nline = \"dtr\"\n\n[[band]]")],
    );
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}");
    finding(&out, "error", "inhibit.port");
}

#[test]
fn a_line_said_to_hold_cat_keying_is_printed_and_without_a_line_noted() {
    let dir = tempfile::tempdir().unwrap();
    let with_line = "[inhibit]\nline = \"rts\"\nport = \"/dev/null-inhibit\"\nactive_high = false\nholds_cat_keying = true\n\n[[band]]";
    let config = demo_with(dir.path(), "cat.toml", &[("[[band]]", with_line)]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains("holds the rig off against CAT keying too"),
        "{out}"
    );
    assert!(
        !has_finding(&out, "note", "inhibit.holds_cat_keying"),
        "{out}"
    );
    // Left out (the default): nothing said.
    let plain =
        "[inhibit]\nline = \"rts\"\nport = \"/dev/null-inhibit\"\nactive_high = false\n\n[[band]]";
    let config = demo_with(dir.path(), "plain.toml", &[("[[band]]", plain)]);
    let (_, out, _) = check(&config, &[]);
    assert!(!out.contains("CAT keying"), "{out}");
    // Without a line it does nothing, and check says so.
    let no_line = "[inhibit]\nholds_cat_keying = true\n\n[[band]]";
    let config = demo_with(dir.path(), "none.toml", &[("[[band]]", no_line)]);
    let (_, out, _) = check(&config, &[]);
    let f = finding(&out, "note", "inhibit.holds_cat_keying");
    assert!(f.contains("no effect without an inhibit line"), "{f}");
    assert!(
        !out.contains("holds the rig off against CAT keying too"),
        "{out}"
    );
}

#[test]
fn a_fixed_dead_band_wider_than_a_quarter_of_the_window_is_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let config = demo_with(
        dir.path(),
        "wide.toml",
        &[("hysteresis_hz = \"auto\"", "hysteresis_hz = 2000")],
    );
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    let f = finding(&out, "warning", "follow.hysteresis_hz");
    // The demo loop's 1.5:1 bandwidth on 40 m is about 988 Hz (check
    // prints it): a quarter is about 247 Hz.
    assert!(f.contains("2000 Hz in 40m"), "{f}");
    assert!(f.contains("\"auto\""), "{f}");
    // On 20 m (about 3721 Hz, a quarter 930 Hz) 2000 Hz is too wide as well;
    // a band's own narrower value is not flagged.
    let config = demo_with(
        dir.path(),
        "own.toml",
        &[("guard_hz = 5000", "guard_hz = 5000\nhysteresis_hz = 200")],
    );
    let (_, out, _) = check(&config, &[]);
    assert!(
        !has_finding(&out, "warning", "band[0] (40m).hysteresis_hz"),
        "{out}"
    );
}

#[test]
fn few_points_and_fit_warnings_appear_in_check() {
    // The demo station with its middle 30 m point left out: 30 m measured
    // at its two edges only.
    let dir = tempfile::tempdir().unwrap();
    let config = demo_with(
        dir.path(),
        "edges.toml",
        &[("  { hz = 10125000, steps = 145502 },\n", "")],
    );
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    let f = finding(&out, "warning", "calibration.points");
    assert!(out.contains("30m: only 2 point(s)"), "{f}\n{out}");
}

#[test]
fn without_an_antenna_the_configured_bound_judges_the_calibration() {
    let dir = tempfile::tempdir().unwrap();
    let drop_antenna = (
        "[antenna]\nloop_diameter_m = 1.0\nconductor_diameter_m = 0.022\nconductor = \"copper\"\npower_w = 100\ncapacitor_rating_v = 15000\n",
        "",
    );
    let tight = demo_with(
        dir.path(),
        "tight.toml",
        &[
            drop_antenna,
            ("hysteresis_hz = \"auto\"", "hysteresis_hz = 200"),
            (
                "model = \"physics\"",
                "model = \"physics\"\nmax_loo_error_hz = 100",
            ),
        ],
    );
    let (code, out, _) = check(&tight, &[]);
    assert_eq!(code, Some(1), "{out}");
    let f = finding(&out, "error", "calibration.points");
    assert!(f.contains("calibration.max_loo_error_hz = 100 Hz"), "{f}");
    // Without the key, twice the dead band (2 × 50 Hz) is the bound.
    let default = demo_with(
        dir.path(),
        "default.toml",
        &[
            drop_antenna,
            ("hysteresis_hz = \"auto\"", "hysteresis_hz = 50"),
        ],
    );
    let (code, out, _) = check(&default, &[]);
    assert_eq!(code, Some(1), "{out}");
    let f = finding(&out, "error", "calibration.points");
    assert!(f.contains("twice the band's dead band, 100 Hz"), "{f}");
    // A generous bound passes.
    let loose = demo_with(
        dir.path(),
        "loose.toml",
        &[
            drop_antenna,
            ("hysteresis_hz = \"auto\"", "hysteresis_hz = 200"),
            (
                "model = \"physics\"",
                "model = \"physics\"\nmax_loo_error_hz = 5000",
            ),
        ],
    );
    let (code, out, _) = check(&loose, &[]);
    assert_eq!(code, Some(0), "{out}");
}

#[test]
fn rig_addresses_are_spoken_of_only_for_the_binary_family() {
    let dir = tempfile::tempdir().unwrap();
    let (_, out, _) = check(&repo("config/demo.toml"), &[]);
    assert!(out.contains("reports from any rig address"), "{out}");
    // What tells tuneward of transmissions, for this family and mode.
    assert!(
        out.contains("mode listen: only what the rig reports on its own")
            && out.contains("not the transmit state"),
        "{out}"
    );
    let text = demo_with(
        dir.path(),
        "text.toml",
        &[("protocol = \"binary-bcd\"", "protocol = \"text-semicolon\"")],
    );
    let (code, out, _) = check(&text, &[]);
    assert_eq!(code, Some(0), "{out}");
    assert!(!out.contains("address"), "{out}");
    assert!(!out.contains("not the transmit state"), "{out}");
    let addressed = demo_with(
        dir.path(),
        "addressed.toml",
        &[(
            "protocol = \"binary-bcd\"",
            "protocol = \"text-semicolon\"\naddress = 0x94",
        )],
    );
    let (_, out, _) = check(&addressed, &[]);
    let f = finding(&out, "note", "rig.address");
    assert!(f.contains("ignored"), "{f}");
}

#[test]
fn the_example_ships_the_fail_safe_polarity() {
    let (code, out, _) = check(&repo("config/example.toml"), &[]);
    assert_eq!(code, Some(0), "{out}");
    let config = tuneward::config::Config::load(&repo("config/example.toml")).unwrap();
    assert!(!config.inhibit.active_high);
    assert!(out.contains("inhibit   none"), "{out}");
}

#[test]
fn an_unfinished_move_in_the_journal_is_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let config = demo_with(dir.path(), "station.toml", &[]);
    let journal = tuneward::journal::Journal::new(dir.path().join("tuneward-position.state"));
    journal.record_intent(1000, 2000).unwrap();
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    let f = finding(&out, "warning", "tuner.state_file");
    assert!(f.contains("from 1000 to 2000"), "{f}");
    assert!(f.contains("set-position"), "{f}");
    journal.record_position(1500).unwrap();
    let (_, out, _) = check(&config, &[]);
    assert!(out.contains("at rest at 1500 steps"), "{out}");
}

/// A command whose reader goes away (`| head`) ends quietly: status 0 and
/// nothing on standard error.
#[test]
fn a_closed_pipe_ends_every_printing_command_quietly() {
    let demo = repo("config/demo.toml");
    let capture = repo("fixtures/capture/example.cap");
    let runs: Vec<Vec<String>> = vec![
        vec!["demo".into()],
        vec!["check".into(), "-c".into(), demo.display().to_string()],
        vec![
            "replay".into(),
            capture.display().to_string(),
            "-c".into(),
            demo.display().to_string(),
        ],
        vec![
            "bench-follow".into(),
            "--evenings".into(),
            "1".into(),
            "--hours".into(),
            "0.05".into(),
        ],
    ];
    for args in runs {
        let mut child = bin()
            .args(&args)
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        // Close the reading end before anything is read.
        drop(child.stdout.take());
        let out = child.wait_with_output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(0), "{args:?}: {err}");
        assert!(err.is_empty(), "{args:?}: {err}");
    }
}

#[test]
fn check_reads_the_mqtt_table_as_run_does() {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("shack.toml");
    std::fs::write(
        &config,
        "[calibration]\npoints = [{ hz = 7000000, steps = 4000 }, { hz = 7200000, steps = 3000 }]\n\
         [[band]]\nname = \"40m\"\nlow_hz = 7000000\nhigh_hz = 7200000\n\
         [mqtt]\nurl = \"mqtt://127.0.0.1:1884\"\nusername = \"shack\"\npassword_file = \"gone.txt\"\n",
    )
    .unwrap();
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}");
    assert!(out.contains("mqtt.password_file"), "{out}");
    std::fs::write(dir.path().join("gone.txt"), "pw\n").unwrap();
    let (_, out, _) = check(&config, &[]);
    assert!(
        out.contains(
            "mqtt      127.0.0.1:1884 as tuneward-shack, topics tuneward/shack/..., commands off"
        ),
        "{out}"
    );
}

/// `[transmit_sense]`: check prints the input as what tells tuneward about
/// transmissions, and names the key of an input that `run` would refuse.
#[test]
fn the_sense_line_is_printed_and_its_keys_judged() {
    let dir = tempfile::tempdir().unwrap();
    let sense = |keys: &str| format!("[transmit_sense]\n{keys}\n\n[[band]]");
    let ok = sense("line = \"dsr\"\nport = \"/dev/null-sense\"\nactive_high = false");
    let config = demo_with(dir.path(), "ok.toml", &[("[[band]]", &ok)]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(0), "{out}");
    assert!(
        out.contains("sense     DSR of /dev/null-sense, transmitting = DSR released"),
        "{out}"
    );
    assert!(out.contains("the authority for transmissions"), "{out}");

    let (code, out, _) = check(&repo("config/demo.toml"), &[]);
    assert_eq!(code, Some(0), "{out}");
    assert!(out.contains("sense     none"), "{out}");

    let noport = sense("line = \"cts\"");
    let config = demo_with(dir.path(), "noport.toml", &[("[[band]]", &noport)]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}");
    let f = finding(&out, "error", "transmit_sense.port");
    assert!(f.contains("CTS"), "{f}");

    let nochip = sense("line = \"gpio\"\noffset = 4");
    let config = demo_with(dir.path(), "nochip.toml", &[("[[band]]", &nochip)]);
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}");
    finding(&out, "error", "transmit_sense.chip");

    // One device for the rig's port and the sense: refused, both named.
    let same = sense("line = \"cts\"\nport = \"/dev/ttyUSB7\"");
    let config = demo_with(
        dir.path(),
        "same.toml",
        &[
            ("[rig]", "[rig]\nport = \"/dev/ttyUSB7\""),
            ("[[band]]", &same),
        ],
    );
    let (code, out, _) = check(&config, &[]);
    assert_eq!(code, Some(1), "{out}");
    let f = finding(&out, "error", "transmit_sense.port");
    assert!(f.contains("rig.port"), "{f}");

    let typo = sense("line = \"cts\"\nport = \"/dev/x\"\nactive_hi = true");
    let config = demo_with(dir.path(), "typo.toml", &[("[[band]]", &typo)]);
    let (code, _, err) = check(&config, &[]);
    assert_ne!(code, Some(0));
    assert!(err.contains("active_hi"), "{err}");
}

/// The configs we ship pass `check` without an error: a newcomer copying
/// either starts from a station `run` would take.
#[test]
fn the_shipped_example_and_demo_configs_have_no_error() {
    for config in ["config/example.toml", "config/demo.toml"] {
        let (code, out, err) = check(&repo(config), &[]);
        assert_eq!(code, Some(0), "{config}: {out}{err}");
        let summary = out
            .lines()
            .find(|l| l.starts_with("findings: "))
            .unwrap_or_else(|| panic!("{config}: no findings line in {out}"));
        assert!(
            summary.starts_with("findings: 0 errors,"),
            "{config}: {summary}"
        );
    }
}

/// `[swr_watch]` needs a polled rig (listen mode never writes to the port,
/// so no meter can be read) and a dialect with an SWR-meter read (the
/// block family has none); `check` says what the watch will do.
#[test]
fn the_swr_watch_is_refused_where_no_meter_can_be_read_and_said_where_it_runs() {
    let dir = tempfile::tempdir().unwrap();
    let watch = ("[[band]]", "[swr_watch]\naction = \"log\"\n\n[[band]]");
    let listen = demo_with(dir.path(), "listen.toml", &[watch]);
    let (code, _, err) = check(&listen, &[]);
    assert_eq!(code, Some(1), "{err}");
    assert!(
        err.contains("key `swr_watch`") && err.contains("listen mode never writes"),
        "{err}"
    );
    let block = demo_with(
        dir.path(),
        "block.toml",
        &[
            watch,
            (
                "protocol = \"binary-bcd\"",
                "protocol = \"block-5\"\nmode = \"poll\"",
            ),
        ],
    );
    let (code, out, _) = check(&block, &[]);
    assert_eq!(code, Some(1));
    let f = finding(&out, "error", "swr_watch");
    assert!(f.contains("`block-5` has none"), "{f}");
    let polled = demo_with(
        dir.path(),
        "polled.toml",
        &[
            ("[[band]]", "[swr_watch]\naction = \"inhibit\"\n\n[[band]]"),
            (
                "protocol = \"binary-bcd\"",
                "protocol = \"binary-bcd\"\nmode = \"poll\"\naddress = 0x94",
            ),
        ],
    );
    let (_, out, _) = check(&polled, &[]);
    assert!(!has_finding(&out, "error", "swr_watch"), "{out}");
    assert!(
        out.contains(
            "SWR watch: alarm above 2.00 for 1000 ms, logged only (no inhibit line is wired)"
        ),
        "{out}"
    );
}
