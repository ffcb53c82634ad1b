//! The noise-peak search end to end on the real binary: `tuneward run`
//! polling `tuneward sim-rig` (binary family) whose simulated loop is
//! "rained on" (its resonance moved by a hidden offset the station's
//! calibration does not know), a controller of the tests' own that writes
//! where the capacitor is for sim-rig's loop to read (`common::truth`), and
//! `tuneward ctl peak`. What is judged comes from outside tuneward: the
//! simulated loop's truth (`sim::meters`, read from the same meters file
//! sim-rig reads), the SWR there from the matched-resonator formula
//! (`antenna::swr_at`, whose source is named there), the rig's truth log
//! and the controller's own record of every `GOTO`.

use std::path::Path;
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

mod common;

use common::truth::{controller_at, wait_truth};
use common::{jsonl, Logged, Proc, BIN};
use tuneward::sim::meters::{SimLoop, SimMetersSpec};

const HZ: f64 = 7_100_000.0;

/// The loop of the demo station (config/demo.toml, invented) through two
/// of its points; the rain and the band noise are each test's.
fn meters_toml(rain: f64, noise_dbm: f64) -> String {
    format!(
        "loop_diameter_m = 1.0\nconductor_diameter_m = 0.022\n\
         through = [[7100000, 312420], [14175000, 66401]]\nrain_steps = {rain}\n\
         floor_dbm = -115.0\nnoise_dbm = {noise_dbm}\nscatter_db = 1.0\nseed = 5\n"
    )
}

/// The simulated loop as sim-rig sees it (its rain included).
fn truth_loop(meters: &str) -> SimLoop {
    SimMetersSpec::parse(meters, "meters.toml")
        .unwrap()
        .sim_loop()
        .unwrap()
}

/// The loop without its rain: what the calibration was measured on.
fn dry_loop(meters: &str) -> SimLoop {
    let mut l = truth_loop(meters);
    l.offset_steps = 0.0;
    l
}

/// One half-power half-width at 7.1 MHz, in steps.
fn half_width(l: &SimLoop) -> f64 {
    let slope = (l.steps_for(HZ + 1.0) - l.steps_for(HZ - 1.0)).abs() / 2.0;
    HZ / l.q_unloaded(HZ) * slope
}

fn position(path: &Path) -> f64 {
    std::fs::read_to_string(path)
        .ok()
        .and_then(|t| t.trim().parse().ok())
        .unwrap_or(f64::NAN)
}

fn ctl(config: &Path, args: &[&str]) -> Output {
    Command::new(BIN)
        .args(["ctl", "--json", "-c"])
        .arg(config)
        .args(args)
        .output()
        .unwrap()
}

/// `tuneward ctl` that must succeed; its answer.
fn ctl_ok(config: &Path, args: &[&str]) -> String {
    let out = ctl(config, args);
    let answer = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(out.status.success(), "ctl {args:?}: {answer}");
    answer
}

/// Waits for the scripted over to begin, then for the log line `ended`
/// (30 s at most) saying the over ended what it ended; that line.
fn over_ends(s: &Station, ended: &str) -> String {
    wait_truth(&s.truth, "the over", |t| t["transmitting"] == true);
    let line = s.run.wait_log_for(&[ended], Duration::from_secs(30));
    assert!(line.contains("transmitted"), "{line}");
    line
}

struct Station {
    dir: tempfile::TempDir,
    config: std::path::PathBuf,
    position: std::path::PathBuf,
    truth: std::path::PathBuf,
    motor: std::sync::Arc<std::sync::Mutex<common::truth::Motor>>,
    run: Logged,
    _rig: Proc,
}

/// The station: 40 m, calibrated (interpolated) through four points of
/// the dry loop, the rig polled every 20 ms, the capacitor at the
/// calibration's position for 7.1 MHz; sim-rig's operator keys as
/// `script` says.
fn station(meters: &str, script: &str) -> Station {
    station_speaking("binary-bcd", meters, script)
}

/// [`station`], the rig speaking `protocol` (a built-in dialect).
fn station_speaking(protocol: &str, meters: &str, script: &str) -> Station {
    let dir = tempfile::tempdir().unwrap();
    let meters_file = dir.path().join("meters.toml");
    std::fs::write(&meters_file, meters).unwrap();
    let dry = dry_loop(meters);
    let mut csv = String::from("hz,steps\n");
    for hz in [7_000_000.0, 7_050_000.0, 7_150_000.0, 7_200_000.0] {
        csv.push_str(&format!("{hz},{}\n", dry.steps_for(hz).round()));
    }
    std::fs::write(dir.path().join("loop.csv"), csv).unwrap();
    let position = dir.path().join("capacitor");
    let truth = dir.path().join("truth.jsonl");
    let script_file = dir.path().join("script.jsonl");
    std::fs::write(&script_file, script).unwrap();
    let link = dir.path().join("rig");
    let rig = Proc(
        Command::new(BIN)
            .args([
                "sim-rig",
                "--protocol",
                protocol,
                "--vfo-a",
                "7100000",
                "--no-reports",
                "--script-from-first-byte",
                "--pty",
            ])
            .arg(&link)
            .arg("--script")
            .arg(&script_file)
            .arg("--truth")
            .arg(&truth)
            .arg("--meters")
            .arg(&meters_file)
            .arg("--tuner-position")
            .arg(&position)
            .arg("--meter-truth")
            .arg(dir.path().join("meters.jsonl"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap(),
    );
    common::wait_symlink(&link);
    let start = dry.steps_for(HZ).round() as i64;
    let (addr, motor) = controller_at(start, 200_000.0, truth.clone(), Some(position.clone()));
    let config = dir.path().join("station.toml");
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "{protocol}"
port = "{rig}"
mode = "poll"
poll_ms = 20
{address}

[tuner]
link = "tcp://{addr}"
min_steps = 0
max_steps = 400000
steps_per_second = 200000
backlash_steps = 40
approach = "up"
settle_ms = 5
state_file = "motor.state"

[follow]
debounce_ms = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20

[calibration]
model = "interpolate"
file = "loop.csv"

[antenna]
loop_diameter_m = 1.0
conductor_diameter_m = 0.022

# No inhibit line on this bench (a pseudo-terminal has none).
[inhibit]
unprotected_ok = true

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7200000
"#,
            rig = link.display(),
            address = if protocol.starts_with("binary") {
                "address = 0x94"
            } else {
                ""
            },
        ),
    )
    .unwrap();
    std::fs::write(
        dir.path().join("motor.state"),
        format!("format=2\nstate=at\nposition={start}\n"),
    )
    .unwrap();
    let run = Logged::run(&config);
    run.wait_log(&["control socket ready"]);
    // Following first: the rig's frequency settled and the loop tuned for
    // it through the calibration (the inhibit released).
    run.wait_log(&["settled on 7.100000 MHz"]);
    run.wait_log(&["transmit inhibit released"]);
    Station {
        dir,
        config,
        position,
        truth,
        motor,
        run,
        _rig: rig,
    }
}

/// Rain of one and a half half-widths: the loop is far outside 1.5:1 at
/// the calibrated position. `ctl peak` finds the rained resonance from the
/// signal meter alone (nothing transmitted), the candidate goes to the
/// candidates file with how it was fitted, `fit --accept` and `ctl
/// reload` take it, and following then keeps the loop within 1.5:1.
#[test]
fn a_noise_peak_finds_the_rained_on_loop_and_the_accepted_point_keeps_it_tuned() {
    let dry = dry_loop(&meters_toml(0.0, -105.0));
    let rain = 1.5 * half_width(&dry);
    let meters = meters_toml(rain, -105.0);
    let wet = truth_loop(&meters);
    let s = station(&meters, "");
    // Where the calibration (interpolated through the dry loop's points)
    // puts 7.1 MHz: within a step or so of the dry loop's resonance.
    let calibrated = position(&s.position);
    assert!(
        (calibrated - dry.steps_for(HZ)).abs() < 0.1 * half_width(&dry),
        "{calibrated}"
    );
    let before = wet.swr(HZ, calibrated);
    assert!(before > 2.0, "the rain must matter: SWR {before}");

    let out = ctl(&s.config, &["peak"]);
    let answer = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{answer}");
    let found = s
        .run
        .wait_log_for(&["noise-peak search: peak at"], Duration::from_secs(60));
    let candidates = s.dir.path().join("loop.candidates.csv");
    let text = std::fs::read_to_string(&candidates).unwrap();
    let line = text
        .lines()
        .find(|l| l.starts_with("7100000,"))
        .unwrap_or_else(|| panic!("{text}\n{found}"));
    assert!(text.contains("# noise peak: half-width"), "{text}");
    let steps: f64 = line.split(',').nth(1).unwrap().parse().unwrap();
    // Judged on the simulated loop's truth: the candidate is where the
    // rained loop resonates, much nearer than the calibration was.
    let bandwidth = tuneward::antenna::swr_bandwidth_hz(HZ, wet.q_unloaded(HZ), 1.5);
    let error_hz = (wet.resonance_hz(steps) - HZ).abs();
    assert!(
        error_hz <= bandwidth / 4.0,
        "{error_hz:.0} Hz off, bandwidth {bandwidth:.0}"
    );
    assert_eq!(
        position(&s.position),
        steps,
        "the capacitor rests at the peak"
    );
    assert!(wet.swr(HZ, steps) <= 1.5);
    // Nothing was transmitted, and every GOTO stayed in the limits.
    {
        let m = s.motor.lock().unwrap();
        assert!(m.violations.is_empty(), "{:?}", m.violations);
        assert!(m.gotos.len() > 20, "{:?}", m.gotos);
        assert!(m.gotos.iter().all(|g| (0..=400_000).contains(g)));
    }
    assert!(!std::fs::read_to_string(&s.truth)
        .unwrap_or_default()
        .contains("\"transmitting\":true"));

    // Back to where the old calibration puts 7.1 MHz (far off again), then
    // accept the candidate and read the calibration again: the service
    // re-tunes 7.1 MHz through the new one, and the loop is within 1.5:1.
    ctl_ok(&s.config, &["goto", &format!("{calibrated}")]);
    wait_position(&s.position, calibrated);
    let fit = Command::new(BIN)
        .args(["fit", "--accept", "-c"])
        .arg(&s.config)
        .arg(s.dir.path().join("loop.csv"))
        .output()
        .unwrap();
    assert!(
        fit.status.success(),
        "{}",
        String::from_utf8_lossy(&fit.stderr)
    );
    let points = std::fs::read_to_string(s.dir.path().join("loop.csv")).unwrap();
    assert!(points.contains(&format!("7100000,{steps}")), "{points}");
    ctl_ok(&s.config, &["reload"]);
    wait_position(&s.position, steps);
    assert!(wet.swr(HZ, steps) <= 1.5);
}

/// Waits (10 s at most) for the capacitor to rest at `steps`.
fn wait_position(path: &Path, steps: f64) {
    let until = Instant::now() + Duration::from_secs(10);
    while position(path) != steps {
        assert!(
            Instant::now() < until,
            "never at {steps}: {}",
            position(path)
        );
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// The operator keys (the rig's own PTT, scripted) while the search reads
/// the meter: the search ends, nothing is recorded, nothing moves during
/// the over (the controller's own record against the rig's truth log), and
/// the capacitor goes back where it began.
#[test]
fn a_transmission_during_the_search_ends_it_with_nothing_recorded() {
    let meters = meters_toml(0.0, -105.0);
    let dry = dry_loop(&meters);
    // Keyed 3 s after the first poll, 1 s long: the search (about 7 s)
    // is under way by then.
    let s = station(
        &meters,
        "{\"at_ms\": 3000, \"op\": \"key\"}\n{\"at_ms\": 4000, \"op\": \"unkey\"}\n",
    );
    let start = position(&s.position);
    assert!(
        (start - dry.steps_for(HZ)).abs() < 0.1 * half_width(&dry),
        "{start}"
    );
    ctl_ok(&s.config, &["peak"]);
    over_ends(&s, "noise-peak search: search stopped");
    wait_truth(&s.truth, "the over's end", |t| t["transmitting"] == false);
    wait_position(&s.position, start);
    assert!(!s.dir.path().join("loop.candidates.csv").exists());
    let m = s.motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
}

/// The receive frequencies the rig was set to over its control port, in
/// order, by its own truth log.
fn set_over_the_port(truth: &[serde_json::Value]) -> Vec<u64> {
    truth
        .iter()
        .filter(|t| t["cause"] == "cat")
        .filter_map(|t| t["rx_hz"].as_u64())
        .collect()
}

/// The rig's receive frequency changed over the control port only while
/// it received, by the rig's own truth log.
fn no_set_while_transmitting(truth: &[serde_json::Value]) {
    for w in truth.windows(2) {
        if w[1]["cause"] == "cat" && w[1]["rx_hz"] != w[0]["rx_hz"] {
            assert_eq!(
                w[0]["transmitting"], false,
                "a set while transmitting: {w:?}"
            );
        }
    }
}

/// `ctl calibrate 40m` on the rained-on loop: refused without consent
/// (nothing set on the rig), then with `--set-rig --yes` the rig is set to
/// 7.033, 7.100 and 7.167 MHz in turn (its truth log), the state shows the
/// sweep's progress, each point's candidate is where the rained loop truly
/// resonates there (the simulated loop's truth; a quarter of the 1.5:1
/// bandwidth, as the single search's live test, the poll's timing being
/// real), nothing was transmitted, no GOTO left the limits, and VFO A is
/// set back to 7.1 MHz.
#[test]
fn a_sweep_calibrates_the_band_from_its_noise_and_gives_the_rig_back() {
    let dry = dry_loop(&meters_toml(0.0, -105.0));
    let meters = meters_toml(1.5 * half_width(&dry), -105.0);
    let wet = truth_loop(&meters);
    let s = station(&meters, "");

    let out = ctl(&s.config, &["calibrate", "40m"]);
    assert!(!out.status.success());
    let answer = String::from_utf8_lossy(&out.stdout);
    assert!(answer.contains("needs-consent"), "{answer}");
    let out = Command::new(BIN)
        .args(["ctl", "-c"])
        .arg(&s.config)
        .args(["calibrate", "40m", "--set-rig"])
        .stdin(Stdio::null())
        .output()
        .unwrap();
    assert!(
        !out.status.success(),
        "no terminal, no --yes: not confirmed"
    );
    std::thread::sleep(Duration::from_millis(300));
    assert!(jsonl(&s.truth).iter().all(|t| t["rx_hz"] == 7_100_000));

    ctl_ok(&s.config, &["calibrate", "40m", "--set-rig", "--yes"]);
    s.run
        .wait_log(&["calibration sweep: setting the rig's frequency to 7.033000 MHz"]);
    let status = ctl(&s.config, &["status"]);
    let state = String::from_utf8_lossy(&status.stdout);
    assert!(state.contains("\"sweep\":{\"band\":\"40m\""), "{state}");
    let done = s.run.wait_log_for(
        &["calibration sweep: sweep of 40m done"],
        Duration::from_secs(120),
    );
    assert!(done.contains("3 candidate(s) of 3"), "{done}");
    assert!(done.contains("set back to 7100000 Hz"), "{done}");
    let truth = jsonl(&s.truth);
    let visited = set_over_the_port(&truth);
    assert_eq!(
        visited,
        vec![7_033_000, 7_100_000, 7_167_000, 7_100_000],
        "the rig's own record of its frequency"
    );
    assert_eq!(truth.last().unwrap()["rx_hz"], 7_100_000);
    assert!(truth.iter().all(|t| t["transmitting"] == false));
    no_set_while_transmitting(&truth);

    let text = std::fs::read_to_string(s.dir.path().join("loop.candidates.csv")).unwrap();
    for hz in [7_033_000u64, 7_100_000, 7_167_000] {
        let line = text
            .lines()
            .find(|l| l.starts_with(&format!("{hz},")))
            .unwrap_or_else(|| panic!("no candidate for {hz}: {text}"));
        let steps: f64 = line.split(',').nth(1).unwrap().parse().unwrap();
        let f = hz as f64;
        let bandwidth = tuneward::antenna::swr_bandwidth_hz(f, wet.q_unloaded(f), 1.5);
        let error_hz = (wet.resonance_hz(steps) - f).abs();
        assert!(
            error_hz <= bandwidth / 4.0,
            "{hz}: {error_hz:.0} Hz off, bandwidth {bandwidth:.0}"
        );
    }
    let m = s.motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert!(m.gotos.iter().all(|g| (0..=400_000).contains(g)));
}

/// The operator keys (the rig's own PTT, scripted) while the sweep's first
/// point is being searched: the search ends, nothing is recorded, nothing
/// moves and nothing is set during the over (the controller's record and
/// the rig's truth log), and once the rig receives again it is set back to
/// 7.1 MHz and the sweep says it stopped.
#[test]
fn a_transmission_during_a_sweep_stops_it_and_the_rig_is_set_back_after_the_over() {
    let meters = meters_toml(0.0, -105.0);
    let s = station(
        &meters,
        "{\"at_ms\": 3000, \"op\": \"key\"}\n{\"at_ms\": 4500, \"op\": \"unkey\"}\n",
    );
    ctl_ok(&s.config, &["calibrate", "40m", "--set-rig", "--yes"]);
    let ended = over_ends(&s, "calibration sweep: sweep of 40m stopped");
    assert!(ended.contains("set back to 7100000 Hz"), "{ended}");
    let truth = jsonl(&s.truth);
    assert_eq!(truth.last().unwrap()["rx_hz"], 7_100_000);
    assert!(
        truth
            .iter()
            .any(|t| t["rx_hz"] == 7_033_000 && t["transmitting"] == true),
        "keyed on the sweep's first point: {truth:?}"
    );
    no_set_while_transmitting(&truth);
    assert!(!s.dir.path().join("loop.candidates.csv").exists());
    let m = s.motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
}

/// The same sweep with a rig of the text family: the set names the VFO
/// (`FA`), sim-rig takes it, and the VFO is given back.
#[test]
fn a_sweep_on_a_text_family_rig_sets_vfo_a_and_gives_it_back() {
    let meters = meters_toml(0.0, -105.0);
    let s = station_speaking("text-semicolon", &meters, "");
    ctl_ok(&s.config, &["calibrate", "40m", "--set-rig", "--yes"]);
    let done = s.run.wait_log_for(
        &["calibration sweep: sweep of 40m done"],
        Duration::from_secs(120),
    );
    assert!(done.contains("3 candidate(s) of 3"), "{done}");
    let truth = jsonl(&s.truth);
    let visited = set_over_the_port(&truth);
    assert_eq!(visited, vec![7_033_000, 7_100_000, 7_167_000, 7_100_000]);
    assert!(truth.iter().all(|t| t["rx_vfo"] == "a"), "{truth:?}");
    let m = s.motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
}
