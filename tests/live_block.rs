//! The fixed-block family end to end on the real binary: `tuneward run`
//! polling `tuneward sim-rig --protocol block-5`, and in proxy mode between
//! it and a scripted client (the station's other program); a controller of
//! this test's own (tests/common/truth.rs) checks every `GOTO` and every
//! moment of motion against the simulator's truth log, never against
//! tuneward's account of itself.
//!
//! Blocks are written here from the family's published CAT command table
//! (recalled, as protocols/block-5.toml says): five bytes, four parameters
//! then the opcode; `03` reads frequency and mode (four bytes of
//! big-endian packed BCD in 10 Hz units, then the mode byte), `F7` reads
//! the transmit status, `01` sets the frequency, `08`/`88` key and unkey.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use tokio::io::AsyncWriteExt;
use tokio_serial::SerialStream;

mod common;

use common::truth::{controller, last_truth, wait_motor, wait_truth};
use common::{forty_metres, open_port, Logged, Proc, BIN};

/// Motor speed of the test controller and of the config.
const SPEED: f64 = 2_000.0;

/// A block: four parameter bytes, then the opcode.
fn block(params: [u8; 4], opcode: u8) -> Vec<u8> {
    [&params[..], &[opcode]].concat()
}

/// `hz` as the set's four parameter bytes: 10 Hz units, eight digits, two
/// a byte, most significant first (high nibble the higher digit), worked
/// digit by digit here rather than with tuneward's encoder.
fn bcd(hz: u64) -> [u8; 4] {
    let d: Vec<u8> = format!("{:08}", hz / 10)
        .bytes()
        .map(|b| b - b'0')
        .collect();
    [
        (d[0] << 4) | d[1],
        (d[2] << 4) | d[3],
        (d[4] << 4) | d[5],
        (d[6] << 4) | d[7],
    ]
}

fn set_frequency(hz: u64) -> Vec<u8> {
    block(bcd(hz), 0x01)
}
fn read_frequency() -> Vec<u8> {
    block([0; 4], 0x03)
}
fn read_status() -> Vec<u8> {
    block([0; 4], 0xF7)
}
fn key(on: bool) -> Vec<u8> {
    block([0; 4], if on { 0x08 } else { 0x88 })
}

#[test]
fn bcd_is_worked_as_the_table_shows() {
    // 7 150 000 Hz = 715 000 tens = digits 00715000 -> 00 71 50 00.
    assert_eq!(bcd(7_150_000), [0x00, 0x71, 0x50, 0x00]);
    // The table's own example: 14 074 000 Hz -> 01 40 74 00.
    assert_eq!(bcd(14_074_000), [0x01, 0x40, 0x74, 0x00]);
}

fn wait_for(path: &Path) {
    let until = Instant::now() + Duration::from_secs(10);
    while std::fs::symlink_metadata(path).is_err() {
        assert!(Instant::now() < until, "no {}", path.display());
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// `tuneward sim-rig --protocol block-5` on a pty at `dir/rig` running
/// `script` (JSON lines, times from the first byte it hears); its link
/// and truth log.
fn sim_rig(dir: &Path, script: &str) -> (Proc, PathBuf, PathBuf) {
    let link = dir.join("rig");
    let truth = dir.join("truth.jsonl");
    let file = dir.join("script.jsonl");
    std::fs::write(&file, script).unwrap();
    let child = Command::new(BIN)
        .args([
            "sim-rig",
            "--protocol",
            "block-5",
            "--script-from-first-byte",
            "--pty",
        ])
        .arg(&link)
        .arg("--script")
        .arg(&file)
        .arg("--truth")
        .arg(&truth)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let proc = Proc(child);
    wait_for(&link);
    (proc, link, truth)
}

/// A 40 m station (100 Hz a step from 7.000 MHz, invented) on the block
/// rig at `rig` with `[rig]` keys `mode_keys`; no inhibit line and nothing
/// said about moving unprotected, so nothing moves while the transmit
/// state is unknown; every report waits for the debounce (`jump_hz = 0`).
fn config(dir: &Path, rig: &Path, controller: &str, mode_keys: &str) -> PathBuf {
    let config = dir.join("station.toml");
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "block-5"
port = "{rig}"
baud = 38400
{mode_keys}

[tuner]
link = "tcp://{controller}"
min_steps = 0
max_steps = 3000
steps_per_second = {SPEED}
settle_ms = 0
state_file = "motor.state"

[follow]
debounce_ms = 300
hysteresis_hz = 100
jump_hz = 0
inhibit_lead_ms = 5
inhibit_tail_ms = 20
{bands}"#,
            rig = rig.display(),
            bands = forty_metres(&[(7_000_000, 0), (7_300_000, 3000)]),
        ),
    )
    .unwrap();
    config
}

async fn say(port: &mut SerialStream, bytes: &[u8]) {
    AsyncWriteExt::write_all(port, bytes).await.unwrap();
    AsyncWriteExt::flush(port).await.unwrap();
}

#[test]
fn polled_block_rig_is_followed_and_a_transmission_defers_the_move() {
    let dir = tempfile::tempdir().unwrap();
    // The operator tunes to 7.100 MHz; later tunes to 7.150 MHz and calls
    // 50 ms after, well inside the debounce, for 1.5 s.
    let script = r#"{"at_ms": 200, "op": "tune", "hz": 7100000}
{"at_ms": 2000, "op": "tune", "hz": 7150000}
{"at_ms": 2050, "op": "key"}
{"at_ms": 3550, "op": "unkey"}
"#;
    let (_rig, link, truth) = sim_rig(dir.path(), script);
    let (addr, motor) = controller(0, SPEED, truth.clone());
    let config = config(dir.path(), &link, &addr, "mode = \"poll\"\npoll_ms = 100");
    let _run = Logged::run(&config);
    // 7.100 MHz: (7 100 000 - 7 000 000) / 100 = 1000 steps, by hand.
    wait_motor(&motor, "the first tune followed", |m| {
        m.at == 1000 && !m.moving
    });
    wait_truth(&truth, "the over", |t| t["transmitting"] == true);
    assert_eq!(motor.lock().unwrap().gotos, vec![1000]);
    wait_truth(&truth, "the over's end", |t| {
        t["transmitting"] == false && t["rx_hz"] == 7_150_000
    });
    // 7.150 MHz: 1500 steps, by hand; only once the rig receives again.
    wait_motor(&motor, "tuned after the over", |m| {
        m.at == 1500 && !m.moving
    });
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos, vec![1000, 1500]);
}

/// `tuneward run` in proxy mode on the block rig at `rig`: the log and
/// the other program's link.
fn run_proxy(dir: &Path, rig: &Path, controller: &str) -> (Logged, PathBuf) {
    let shared = dir.join("shared");
    let keys = format!("mode = \"proxy\"\nproxy_link = \"{}\"", shared.display());
    let config = config(dir, rig, controller, &keys);
    let run = Logged::run(&config);
    wait_for(&shared);
    (run, shared)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn proxied_block_rig_is_followed_from_the_other_programs_reads() {
    let dir = tempfile::tempdir().unwrap();
    // The operator turns the rig's own knob to 7.150 MHz 300 ms after the
    // other program's first block: no set says it, only a read can.
    let (_rig, link, truth) = sim_rig(
        dir.path(),
        r#"{"at_ms": 300, "op": "tune", "hz": 7150000}
"#,
    );
    let (addr, motor) = controller(0, SPEED, truth.clone());
    let (run, shared) = run_proxy(dir.path(), &link, &addr);
    let mut client = open_port(&shared, 38400);
    // The program reads the status (receive), then waits.
    say(&mut client, &read_status()).await;
    wait_truth(&truth, "the knob turned", |t| t["rx_hz"] == 7_150_000);
    std::thread::sleep(Duration::from_millis(600));
    // Nothing has told the frequency yet: no move.
    assert!(motor.lock().unwrap().gotos.is_empty());
    say(&mut client, &[read_frequency(), read_status()].concat()).await;
    // 7.150 MHz: 1500 steps, by hand.
    wait_motor(&motor, "followed from the read", |m| {
        m.at == 1500 && !m.moving
    });
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos, vec![1500]);
    drop(m);
    // The log said once what the family's VFO toggle cannot tell.
    let said = run
        .log()
        .iter()
        .filter(|l| l.contains("VFO toggle carries no frequency"))
        .count();
    assert_eq!(said, 1, "{}", run.log().join("\n"));
}

/// The other program's set followed in the same write by its keying block
/// (a band-map click with no gap at all), and never a read: the set alone
/// says where the loop must go (the VFO in use), the keying that the rig
/// is on the air. Nothing moves from the keying block to the unkeying one;
/// the loop is tuned for the set's frequency after the over, though no
/// frequency was ever read.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn proxied_block_set_and_keying_tune_after_the_over_without_any_read() {
    let dir = tempfile::tempdir().unwrap();
    let (_rig, link, truth) = sim_rig(
        dir.path(),
        "# the operator works through the other program\n",
    );
    // At rest at 1000 (7.100 MHz).
    let (addr, motor) = controller(1000, SPEED, truth.clone());
    // No rig.poll_ms: tuneward sends the rig nothing of its own.
    let (_run, shared) = run_proxy(dir.path(), &link, &addr);
    let mut client = open_port(&shared, 38400);
    // The status read only: the rig receives. No frequency read, ever.
    say(&mut client, &read_status()).await;
    std::thread::sleep(Duration::from_millis(400));
    assert!(motor.lock().unwrap().gotos.is_empty());
    let keyed = Instant::now();
    say(&mut client, &[set_frequency(7_150_000), key(true)].concat()).await;
    wait_truth(&truth, "the over", |t| {
        t["transmitting"] == true && t["rx_hz"] == 7_150_000
    });
    std::thread::sleep(Duration::from_millis(1_000));
    assert!(
        motor.lock().unwrap().gotos.is_empty(),
        "moved during the over: {:?}",
        motor.lock().unwrap()
    );
    let unkeyed = Instant::now();
    say(&mut client, &key(false)).await;
    // 7.150 MHz: (7 150 000 - 7 000 000) / 100 = 1500 steps, by hand.
    wait_motor(&motor, "tuned after the over", |m| {
        m.at == 1500 && !m.moving
    });
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert!(
        !m.goto_times.iter().any(|t| *t >= keyed && *t <= unkeyed),
        "a GOTO during the over: {m:?}"
    );
    assert_eq!(m.gotos, vec![1500]);
}

#[test]
fn check_notes_once_that_the_other_programs_vfo_toggle_carries_no_frequency() {
    let dir = tempfile::tempdir().unwrap();
    let shared = dir.path().join("shared");
    let keys = format!("mode = \"proxy\"\nproxy_link = \"{}\"", shared.display());
    let proxied = config(dir.path(), Path::new("/dev/null"), "127.0.0.1:1", &keys);
    let out = Command::new(BIN)
        .args(["check", "--config"])
        .arg(&proxied)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    let notes: Vec<&str> = text
        .lines()
        .filter(|l| l.contains("VFO toggle carries no frequency"))
        .collect();
    assert_eq!(notes.len(), 1, "{text}");
    assert!(notes[0].contains("rig.mode"), "{text}");
    // In poll mode there is no other program: nothing to say.
    let polled = config(
        dir.path(),
        Path::new("/dev/null"),
        "127.0.0.1:1",
        "mode = \"poll\"",
    );
    let out = Command::new(BIN)
        .args(["check", "--config"])
        .arg(&polled)
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(!text.contains("carries no frequency"), "{text}");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn in_proxy_mode_the_other_programs_keying_block_defers_at_once() {
    let dir = tempfile::tempdir().unwrap();
    let (_rig, link, truth) = sim_rig(
        dir.path(),
        "# the operator works through the other program\n",
    );
    // At rest at 1000 (7.100 MHz).
    let (addr, motor) = controller(1000, SPEED, truth.clone());
    let (_run, shared) = run_proxy(dir.path(), &link, &addr);
    let mut client = open_port(&shared, 38400);
    say(
        &mut client,
        &[set_frequency(7_100_000), read_frequency(), read_status()].concat(),
    )
    .await;
    std::thread::sleep(Duration::from_millis(600));
    assert!(motor.lock().unwrap().gotos.is_empty());
    // A band-map click: a set and a read (7.150 MHz is heard), and the
    // program keys the rig 20 ms later, inside the debounce, with no
    // status read during the over: only the keying block says it.
    say(
        &mut client,
        &[set_frequency(7_150_000), read_frequency()].concat(),
    )
    .await;
    std::thread::sleep(Duration::from_millis(20));
    say(&mut client, &key(true)).await;
    std::thread::sleep(Duration::from_millis(1_000));
    assert_eq!(last_truth(&truth).unwrap()["transmitting"], true);
    assert!(
        motor.lock().unwrap().gotos.is_empty(),
        "moved during the over: {:?}",
        motor.lock().unwrap()
    );
    say(&mut client, &key(false)).await;
    // 7.150 MHz: 1500 steps, by hand.
    wait_motor(&motor, "tuned after the over", |m| {
        m.at == 1500 && !m.moving
    });
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos, vec![1500]);
}

fn listen_config(dir: &Path) -> PathBuf {
    let config = dir.join("station.toml");
    std::fs::write(
        &config,
        format!(
            "[rig]\nprotocol = \"block-5\"\nport = \"/dev/null\"\nmode = \"listen\"\n\n[tuner]\nlink = \"sim\"\nmin_steps = 0\nmax_steps = 3000\nstate_file = \"motor.state\"\n{}",
            forty_metres(&[(7_000_000, 0), (7_300_000, 3000)])
        ),
    )
    .unwrap();
    config
}

#[test]
fn listen_mode_is_refused_by_check_and_run_with_the_key_named() {
    let dir = tempfile::tempdir().unwrap();
    let config = listen_config(dir.path());
    for cmd in ["check", "run"] {
        let out = Command::new(BIN)
            .args([cmd, "--config"])
            .arg(&config)
            .output()
            .unwrap();
        let all = format!(
            "{}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
        assert!(!out.status.success(), "{cmd} succeeded:\n{all}");
        for words in [
            "rig.mode",
            "expected \"poll\" or \"proxy\"",
            "found \"listen\"",
            "station.toml",
        ] {
            assert!(all.contains(words), "{cmd}: {words:?} missing in:\n{all}");
        }
    }
}
