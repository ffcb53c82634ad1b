//! The real binary replaying captures: an unseen evening in both rig
//! families and both calibration models, random bytes, a hand-worked capture,
//! the demo and the config check.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Duration;

use serde_json::Value;
use tuneward::capture::CaptureWriter;
use tuneward::config::AntennaConfig;
use tuneward::rig::{Dialect, Direction};
use tuneward::scenario::{fewest_moves, random_evening, Scenario};

mod common;

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tuneward"))
}

/// An invented station: a 1 m copper loop on 40, 30 and 20 m. The points
/// lie on the loop's resonance curve with a few steps of scatter.
fn station_toml(protocol: &str, model: &str) -> String {
    format!(
        r#"
[rig]
protocol = "{protocol}"

[tuner]
min_steps = 500
max_steps = 48000
steps_per_second = 4000
backlash_steps = 40
approach = "up"
settle_ms = 80

[follow]
debounce_ms = 400
hysteresis_hz = "auto"
min_move_steps = 3

[calibration]
model = "{model}"
points = [
  {{ hz = 7000000, steps = 40236 }},
  {{ hz = 7050000, steps = 39640 }},
  {{ hz = 7100000, steps = 39049 }},
  {{ hz = 7150000, steps = 38478 }},
  {{ hz = 7200000, steps = 37923 }},
  {{ hz = 10100000, steps = 18290 }},
  {{ hz = 10125000, steps = 18186 }},
  {{ hz = 10150000, steps = 18085 }},
  {{ hz = 14000000, steps = 8556 }},
  {{ hz = 14100000, steps = 8410 }},
  {{ hz = 14200000, steps = 8262 }},
  {{ hz = 14350000, steps = 8052 }},
]

[antenna]
loop_diameter_m = 1.0
conductor_diameter_m = 0.022

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7200000
guard_hz = 5000

[[band]]
name = "30m"
low_hz = 10100000
high_hz = 10150000
guard_hz = 5000

[[band]]
name = "20m"
low_hz = 14000000
high_hz = 14350000
guard_hz = 5000
"#
    )
}

const BANDS: [(u64, u64); 3] = [
    (7_000_000, 7_200_000),
    (10_100_000, 10_150_000),
    (14_000_000, 14_350_000),
];

fn write_capture(path: &Path, scenario: &Scenario, dialect: &Dialect) {
    let wire = tuneward::station::DialectWire {
        dialect,
        address: 0x94,
    };
    let file = std::fs::File::create(path).unwrap();
    let mut w = CaptureWriter::new(std::io::BufWriter::new(file));
    w.comment("an invented evening, generated for a test")
        .unwrap();
    for (t, dir, bytes) in scenario.chunks(&wire) {
        w.write_record(t, dir, &bytes).unwrap();
    }
    w.flush().unwrap();
}

fn replay_json(capture: &Path, config: &Path, start: i64) -> Vec<Value> {
    let out = bin()
        .args(["replay", "--json", "--start-steps", &start.to_string()])
        .arg(capture)
        .arg("--config")
        .arg(config)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "replay failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout)
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect()
}

fn in_band_or_guard(hz: u64) -> bool {
    BANDS
        .iter()
        .any(|(lo, hi)| hz + 5_000 >= *lo && hz <= hi + 5_000)
}

/// Checks every safety rule on a timeline; returns the number of moves.
fn assert_safe(timeline: &[Value]) -> u64 {
    let (mut tx, mut inhibit, mut moving) = (false, false, false);
    let mut moves = 0;
    for (i, e) in timeline.iter().enumerate() {
        let kind = e["kind"].as_str().unwrap();
        match kind {
            "transmit" => {
                tx = e["on"].as_bool().unwrap();
                if tx && moving {
                    // The rig transmitted during a move (the simulated rig
                    // ignores the inhibit): the motor must stop at once.
                    let next = &timeline[i + 1];
                    assert_eq!(next["kind"], "stop", "no stop at {e}");
                    assert_eq!(next["t"], e["t"]);
                }
            }
            "move" => {
                assert!(!tx, "move while transmitting: {e}");
                assert!(inhibit, "move without the inhibit: {e}");
                let to = e["to"].as_i64().unwrap();
                assert!((500..=48_000).contains(&to), "beyond the limits: {e}");
                let hz = e["hz"].as_u64().unwrap();
                assert!(in_band_or_guard(hz), "moved for {hz} Hz");
                moving = true;
                moves += 1;
            }
            "arrive" => moving = false,
            "inhibit" => {
                let on = e["on"].as_bool().unwrap();
                assert!(on || !moving, "inhibit released during motion: {e}");
                inhibit = on;
            }
            _ => {}
        }
    }
    let summary = timeline.last().unwrap();
    assert_eq!(summary["kind"], "summary");
    assert_eq!(summary["violations"], 0);
    assert_eq!(summary["moves"], moves);
    moves
}

#[test]
fn an_unseen_evening_is_followed_safely_in_both_families_and_models() {
    let dir = tempfile::tempdir().unwrap();
    // A seed the code was not tuned on.
    let scenario = random_evening(20_261_201, 3.0, &BANDS);
    let antenna = AntennaConfig {
        loop_diameter_m: Some(1.0),
        conductor_diameter_m: Some(0.022),
        ..AntennaConfig::default()
    };
    // The fewest moves that keep every in-band dwell inside the loop's 1.5:1
    // window, knowing the whole evening in advance.
    let optimum = fewest_moves(&scenario.dwells, |hz| {
        BANDS
            .iter()
            .any(|(lo, hi)| (*lo..=*hi).contains(&hz))
            .then(|| tuneward::antenna::bandwidth_1_5_hz(&antenna, hz as f64))
            .flatten()
    });
    assert!(optimum > 10, "the evening is too quiet to test: {optimum}");
    // block-5: the writer puts each read before its answer (the family
    // never speaks unasked).
    for protocol in [
        "binary-bcd",
        "text-semicolon",
        "text-semicolon-9",
        "block-5",
    ] {
        let dialect = Dialect::builtin(protocol).unwrap();
        let capture = dir.path().join(format!("{protocol}.cap"));
        write_capture(&capture, &scenario, &dialect);
        for model in ["physics", "interpolate"] {
            let config = dir.path().join(format!("{protocol}-{model}.toml"));
            std::fs::write(&config, station_toml(protocol, model)).unwrap();
            let timeline = replay_json(&capture, &config, 24_000);
            let moves = assert_safe(&timeline);
            let reports = timeline.iter().filter(|e| e["kind"] == "frequency").count();
            assert!(reports > 100, "{protocol}: only {reports} reports decoded");
            let ratio = moves as f64 / optimum as f64;
            eprintln!("{protocol} {model}: {moves} moves, optimum {optimum}, ratio {ratio:.2}");
            assert!(
                ratio <= 1.5,
                "{protocol} {model}: {moves} moves against an optimum of {optimum}"
            );
        }
    }
}

#[test]
fn a_megabyte_of_random_bytes_moves_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = fastrand::Rng::with_seed(99);
    for protocol in ["binary-bcd", "text-semicolon"] {
        let capture = dir.path().join(format!("{protocol}-random.cap"));
        let file = std::fs::File::create(&capture).unwrap();
        let mut w = CaptureWriter::new(std::io::BufWriter::new(file));
        for i in 0..1024u64 {
            let bytes: Vec<u8> = (0..1024).map(|_| rng.u8(..)).collect();
            w.write_record(Duration::from_millis(i * 10), Direction::Rx, &bytes)
                .unwrap();
        }
        w.flush().unwrap();
        let config = dir.path().join(format!("{protocol}.toml"));
        std::fs::write(&config, station_toml(protocol, "physics")).unwrap();
        let timeline = replay_json(&capture, &config, 24_000);
        let summary = timeline.last().unwrap();
        assert_eq!(summary["moves"], 0, "{protocol}: {summary}");
        assert!(summary["rejected"].as_u64().unwrap() > 0);
        assert!(!timeline.iter().any(|e| e["kind"] == "move"));
    }
}

#[test]
fn a_hand_worked_capture_gives_the_expected_timeline() {
    // Frames worked by hand from the binary frame layout
    // (FE FE <to> <from> <cmd> <data> FD, frequency in BCD, least significant
    // byte first, low nibble the lower digit):
    //   7 100 000 Hz = digits 0007100000 -> bytes 00 00 10 07 00
    //   7 200 000 Hz = digits 0007200000 -> bytes 00 00 20 07 00
    //   transmit on  = 1C 00 01, off = 1C 00 00
    let dir = tempfile::tempdir().unwrap();
    let capture = dir.path().join("hand.cap");
    std::fs::write(
        &capture,
        "# hand-worked\n\
         10.000 rx FE FE 00 94 00 00 00 10 07 00 FD\n\
         20.000 rx FE FE E0 94 1C 00 01 FD\n\
         20.100 rx FE FE 00 94 00 00 00 20 07 00 FD\n\
         30.000 rx FE FE E0 94 1C 00 00 FD\n",
    )
    .unwrap();
    let config = dir.path().join("station.toml");
    // A straight-line calibration through two points: 7.1 MHz -> 1000 steps,
    // 7.2 MHz -> 2000 steps.
    let text = format!(
        r#"
[tuner]
min_steps = 0
max_steps = 5000
steps_per_second = 1000
settle_ms = 0
[follow]
debounce_ms = 500
hysteresis_hz = 100
inhibit_lead_ms = 0
inhibit_tail_ms = 200
# The timeline worked by hand is the debounce's: the 100 kHz step after a
# quiet spell would otherwise be a jump, settled at once (jumps have their
# own tests in src/follow/jump_tests.rs).
jump_hz = 0
# Broadcasts of this family carry no transmit state and nothing is wired:
# this station has written down that moves may go ahead regardless.
[inhibit]
unprotected_ok = true
{}"#,
        common::forty_metres(&[(7_100_000, 1000), (7_200_000, 2000)])
    );
    std::fs::write(&config, text).unwrap();
    let timeline = replay_json(&capture, &config, 500);
    let brief: Vec<String> = timeline
        .iter()
        .filter(|e| e["kind"] != "summary")
        .map(|e| {
            let mut e = e.as_object().unwrap().clone();
            let t = e.remove("t").unwrap();
            let kind = e.remove("kind").unwrap();
            let rest: Vec<String> = e.iter().map(|(k, v)| format!("{k}={v}")).collect();
            format!("{t} {} {}", kind.as_str().unwrap(), rest.join(" "))
        })
        .collect();
    assert_eq!(
        brief,
        vec![
            "0.0 frequency hz=7100000",
            // The loop is not tuned for the report: inhibited at once.
            "0.0 inhibit on=true",
            "0.5 settle hz=7100000",
            "0.5 move from=500 hz=7100000 to=1000 tune_hz=7100000",
            "1.0 arrive steps=1000",
            "1.2 inhibit on=false",
            "10.0 transmit on=true",
            // Reported while transmitting: no inhibit against a transmission.
            "10.1 frequency hz=7200000",
            "10.6 settle hz=7200000",
            "10.6 hold hz=7200000 reason=\"transmitting\"",
            "20.0 transmit on=false",
            "20.0 inhibit on=true",
            "20.0 move from=1000 hz=7200000 to=2000 tune_hz=7200000",
            "21.0 arrive steps=2000",
            "21.2 inhibit on=false",
        ]
    );
    let summary = timeline.last().unwrap();
    assert_eq!(summary["moves"], 2);
    assert_eq!(summary["steps"], 1_500);
    assert_eq!(summary["frames"], 4);
    assert_eq!(summary["transmit_s"], 10.0);
}

/// A capture with the hardware sense line's readings (`sense` records)
/// replays with the line as the authority: the rig's own report of receive
/// does not end a transmission the line sees, so the move waits for the
/// line to drop. Hand-made records of an invented moment.
#[test]
fn a_capture_with_sense_records_replays_with_the_move_deferred() {
    let dir = tempfile::tempdir().unwrap();
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    let config = dir.path().join("sense.toml");
    let toml = format!(
        "{}\n[transmit_sense]\nline = \"cts\"\nport = \"/dev/ttyUSB-sense\"\n",
        station_toml("text-semicolon", "interpolate")
    );
    std::fs::write(&config, toml).unwrap();
    let capture = dir.path().join("sense.cap");
    let mut w = CaptureWriter::new(Vec::new());
    w.write_sense(Duration::ZERO, true).unwrap();
    w.write_record(
        Duration::from_millis(100),
        Direction::Rx,
        &dialect.encode_transmit(false, 0),
    )
    .unwrap();
    w.write_record(
        Duration::from_millis(200),
        Direction::Rx,
        &dialect.encode_frequency(14_100_000, 0),
    )
    .unwrap();
    w.write_sense(Duration::from_secs(3), false).unwrap();
    w.write_record(
        Duration::from_secs(5),
        Direction::Rx,
        &dialect.encode_frequency(14_100_000, 0),
    )
    .unwrap();
    std::fs::write(&capture, w.into_inner()).unwrap();
    let timeline = replay_json(&capture, &config, 20_000);
    let moves: Vec<f64> = timeline
        .iter()
        .filter(|e| e["kind"] == "move")
        .map(|e| e["t"].as_f64().unwrap())
        .collect();
    assert!(!moves.is_empty(), "never moved: {timeline:?}");
    assert!(
        moves.iter().all(|t| *t >= 3.0),
        "moved while the sense line read transmitting: {moves:?}"
    );
    let summary = timeline.last().unwrap();
    assert_eq!(summary["violations"], 0);
    // Without the line in the config the same capture moves at once: the
    // rig's report of receive is believed, and the line's readings only
    // count when they say transmit.
    let plain = dir.path().join("plain.toml");
    std::fs::write(&plain, station_toml("text-semicolon", "interpolate")).unwrap();
    let early = replay_json(&capture, &plain, 20_000)
        .iter()
        .filter(|e| e["kind"] == "move")
        .filter_map(|e| e["t"].as_f64())
        .filter(|t| *t < 3.0)
        .count();
    assert_eq!(early, 1);
}

#[test]
fn replay_names_the_file_and_line_of_a_malformed_capture() {
    let dir = tempfile::tempdir().unwrap();
    let capture = dir.path().join("bad.cap");
    std::fs::write(&capture, "0.0 rx FE FE\n1.0 sideways FE\n").unwrap();
    let config = dir.path().join("s.toml");
    std::fs::write(&config, station_toml("binary-bcd", "physics")).unwrap();
    let out = bin()
        .arg("replay")
        .arg(&capture)
        .arg("--config")
        .arg(&config)
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bad.cap") && err.contains('2'), "{err}");
    assert!(err.contains("sideways"), "{err}");
}

#[test]
fn the_demo_runs_without_arguments_and_breaks_no_rule() {
    let out = bin().args(["demo", "--json"]).output().unwrap();
    assert!(out.status.success());
    let timeline: Vec<Value> = String::from_utf8(out.stdout)
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let moves = timeline.iter().filter(|e| e["kind"] == "move").count();
    assert!(moves >= 5, "{moves}");
    let kinds = |k: &str| timeline.iter().filter(|e| e["kind"] == k).count();
    assert!(
        kinds("reject") > 0,
        "the demo's line noise was not rejected"
    );
    assert!(timeline
        .iter()
        .any(|e| e["kind"] == "hold" && e["reason"] == "out-of-band"));
    assert!(timeline
        .iter()
        .any(|e| e["kind"] == "hold" && e["reason"] == "transmitting"));
    assert!(timeline
        .iter()
        .any(|e| e["kind"] == "hold" && e["reason"] == "dead-band"));
    assert_eq!(timeline.last().unwrap()["violations"], 0);

    let text = bin().arg("demo").output().unwrap();
    assert!(text.status.success());
    let text = String::from_utf8(text.stdout).unwrap();
    assert!(text.contains("summary"), "{text}");
    assert!(text.contains("move"), "{text}");
}

fn repo(path: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(path)
}

#[test]
fn check_accepts_the_shipped_configs() {
    for config in ["config/example.toml", "config/demo.toml"] {
        let out = bin()
            .args(["check", "--config"])
            .arg(repo(config))
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{config}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("40m"), "{text}");
        assert!(text.contains("valid"), "{text}");
    }
}

#[test]
fn check_names_the_key_line_and_column_of_an_error() {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("station.toml");
    let text = station_toml("binary-bcd", "physics")
        .replace("min_move_steps = 3", "min_move_steps = \"three\"");
    std::fs::write(&config, &text).unwrap();
    let out = bin()
        .args(["check", "--config"])
        .arg(&config)
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    let line = text.lines().position(|l| l.contains("\"three\"")).unwrap() + 1;
    assert!(err.contains(&format!("station.toml:{line}:")), "{err}");
    assert!(err.contains("follow.min_move_steps"), "{err}");
}

#[test]
fn check_refuses_a_capacitor_that_the_voltage_would_exceed() {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("station.toml");
    let text = station_toml("binary-bcd", "physics").replace(
        "conductor_diameter_m = 0.022",
        "conductor_diameter_m = 0.022\npower_w = 400\ncapacitor_rating_v = 5000",
    );
    std::fs::write(&config, text).unwrap();
    let out = bin()
        .args(["check", "--config"])
        .arg(&config)
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("HIGH VOLTAGE"), "{err}");
}
