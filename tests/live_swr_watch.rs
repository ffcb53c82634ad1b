//! `[swr_watch]` end to end on the real binary: `tuneward run` polling
//! `tuneward sim-rig --meters` (text family), whose simulated loop's
//! capacitor this test places off resonance (the position file sim-rig
//! reads), so the rig's SWR meter reads high while the scripted operator
//! transmits. The SWR the simulator really showed is read from its own
//! meter truth log, never from tuneward's account.
//!
//! No inhibit line can be wired here (a pseudo-terminal has no modem
//! lines), so the alarm is `action = "log"`; the inhibit it asserts with a
//! line wired is tested on virtual time in `follow::session::tests`.

use std::process::{Command, Stdio};

mod common;

use common::truth::{controller, wait_truth};
use common::{forty_metres, jsonl, Logged, Proc, BIN};

/// An invented loop like the demo station's (config/demo.toml), on a drive
/// eight times coarser, through two points; no rain, no scatter.
const METERS: &str = "loop_diameter_m = 1.0\nconductor_diameter_m = 0.022\n\
    through = [[7100000, 39049], [14175000, 8301]]\n\
    floor_dbm = -115.0\nnoise_dbm = -105.0\nscatter_db = 0.0\n";

#[test]
fn a_high_swr_over_raises_the_alarm_from_the_rigs_own_meter() {
    let dir = tempfile::tempdir().unwrap();
    let meters = dir.path().join("meters.toml");
    let position = dir.path().join("capacitor");
    let meter_truth = dir.path().join("meters.jsonl");
    std::fs::write(&meters, METERS).unwrap();
    // 300 steps off the true resonance at 7.1 MHz: far outside 2:1.
    std::fs::write(&position, "39349\n").unwrap();
    let script = dir.path().join("script.jsonl");
    std::fs::write(
        &script,
        "{\"at_ms\": 1500, \"op\": \"key\"}\n{\"at_ms\": 3500, \"op\": \"unkey\"}\n",
    )
    .unwrap();
    let link = dir.path().join("rig");
    let truth = dir.path().join("truth.jsonl");
    let _rig = Proc(
        Command::new(BIN)
            .args([
                "sim-rig",
                "--protocol",
                "text-semicolon",
                "--vfo-a",
                "7100000",
                "--script-from-first-byte",
                "--pty",
            ])
            .arg(&link)
            .arg("--script")
            .arg(&script)
            .arg("--truth")
            .arg(&truth)
            .arg("--meters")
            .arg(&meters)
            .arg("--tuner-position")
            .arg(&position)
            .arg("--meter-truth")
            .arg(&meter_truth)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap(),
    );
    common::wait_symlink(&link);
    let (addr, _motor) = controller(1000, 20_000.0, truth.clone());
    let config = dir.path().join("station.toml");
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "text-semicolon"
port = "{rig}"
mode = "poll"
poll_ms = 100

[tuner]
link = "tcp://{addr}"
min_steps = 0
max_steps = 3000
steps_per_second = 20000
settle_ms = 0
state_file = "motor.state"

[swr_watch]
action = "log"
alarm = 2.0
hold_ms = 300
{bands}"#,
            rig = link.display(),
            bands = forty_metres(&[(7_000_000, 0), (7_300_000, 3000)]),
        ),
    )
    .unwrap();
    let run = Logged::run(&config);
    run.wait_log(&["SWR watch: the SWR meter is read"]);
    wait_truth(&truth, "the over", |t| t["transmitting"] == true);
    let alarm = run.wait_log(&["SWR alarm"]);
    assert!(alarm.contains("logged only"), "{alarm}");
    wait_truth(&truth, "the over's end", |t| t["transmitting"] == false);
    run.wait_log(&["over ended: SWR seen"]);
    // What the simulator really showed: SWR readings while transmitting,
    // above the alarm (antenna::swr_at at the capacitor's position), and
    // none asked for on receive.
    let lines = jsonl(&meter_truth);
    let swr: Vec<&serde_json::Value> = lines.iter().filter(|l| l["kind"] == "swr").collect();
    assert!(swr.len() >= 3, "{lines:?}");
    assert!(swr.iter().all(|l| l["transmitting"] == true), "{swr:?}");
    assert!(
        swr.iter().all(|l| l["true_value"].as_f64().unwrap() > 2.0),
        "{swr:?}"
    );
    // Nothing was asserted against the over: no inhibit line is wired.
    let log = run.log().join("\n");
    assert!(!log.contains("inhibit asserted to end the over"), "{log}");
}
