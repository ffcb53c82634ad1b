//! The whole station's truth, end to end on the real binary: `tuneward run`
//! in proxy mode, `tuneward sim-rig` behind it, a scripted client (the
//! station's other program) in front, and a controller of this test's own
//! on loopback TCP that logs every line it is sent.
//!
//! The invariants are checked from the simulator's truth log (what the rig
//! really did) and from this controller's log (what the motor really did),
//! never from tuneward's own account of itself; only the inhibit, which has
//! no wired line on this bench, is read from tuneward's log.
//!
//! Text-family messages are written from the family's published PC control
//! command reference (`FA`/`FB` with eleven digits in Hz, `FR1;`/`FT1;`
//! receive/transmit on VFO B, `TX;`/`RX;`, `IF;` the status read;
//! recalled); binary-family frames from its published CI-V reference guide
//! (`05` set frequency, `07` VFO select, `0F` split, `25 01` unselected VFO
//! frequency, `1C 00` transmit state; recalled). Nine-digit text messages
//! from that family's CAT operation reference (`FA`/`FB` with nine digits,
//! `VS1;` receive on VFO B, `FT1;` transmit on VFO B, `TX;` the transmit
//! state read answered `TX0;` receive, `TX1;`/`TX0;` keying; recalled, as
//! protocols/text-semicolon-9.toml says); fixed-block commands from the
//! published CAT command table of that family (five bytes, four parameters
//! then the opcode: `01` set frequency, `03` read frequency, `F7` read
//! transmit status, `08`/`88` key and unkey, `81` VFO A/B toggle; recalled,
//! as protocols/block-5.toml says).

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use tokio::io::AsyncWriteExt;
use tokio_serial::SerialStream;

mod common;

use common::truth::{last_truth, rig_transmits, wait_motor, Motor};
use common::{forty_metres, open_port, Logged, Proc, BIN};

/// Motor speed of the test controller (and of the config, which times the
/// controller's answers from it).
const SPEED: f64 = 2_000.0;

/// The shared truth-checking controller (tests/common/truth.rs) at `SPEED`,
/// starting at `start`; every 2 ms of a move it checks the rig's truth log.
fn controller(start: i64, truth: PathBuf) -> (String, Arc<Mutex<Motor>>) {
    common::truth::controller(start, SPEED, truth)
}

/// `tuneward sim-rig` speaking `protocol` on a pty at `dir/rig`, truth log
/// at `dir/truth.jsonl`, no operator script of its own.
fn sim_rig(dir: &Path, protocol: &str) -> (Proc, PathBuf, PathBuf) {
    sim_rig_scripted(
        dir,
        protocol,
        "# the operator works through the other program\n",
    )
}

/// [`sim_rig`], with an operator script (protocols/sim-rig.md) of its own.
fn sim_rig_scripted(dir: &Path, protocol: &str, operator: &str) -> (Proc, PathBuf, PathBuf) {
    let link = dir.join("rig");
    let truth = dir.join("truth.jsonl");
    let script = dir.join("script.jsonl");
    std::fs::write(&script, operator).unwrap();
    let child = Command::new(BIN)
        .args(["sim-rig", "--protocol", protocol, "--pty"])
        .arg(&link)
        .arg("--script")
        .arg(&script)
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

fn wait_for(path: &Path) {
    let until = Instant::now() + Duration::from_secs(10);
    while std::fs::symlink_metadata(path).is_err() {
        assert!(Instant::now() < until, "no {}", path.display());
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// `tuneward run` in proxy mode between the rig at `rig` and the other
/// program's link `dir/shared`; the log lines are collected (the shared
/// `Logged` child of tests/common).
type Run = Logged;

fn run(dir: &Path, protocol: &str, rig: &Path, controller: &str) -> (Run, PathBuf) {
    let shared = dir.join("shared");
    let config = dir.join("station.toml");
    // 40 m, 100 Hz a step from 7.000 MHz (invented); no inhibit line wired
    // and nothing written down about moving unprotected: while the rig's
    // transmit state is unknown, nothing moves.
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "{protocol}"
port = "{rig}"
baud = 38400
mode = "proxy"
proxy_link = "{shared}"

[tuner]
link = "tcp://{controller}"
min_steps = 0
max_steps = 3000
steps_per_second = {SPEED}
settle_ms = 0
state_file = "motor.state"

[follow]
debounce_ms = 150
hysteresis_hz = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20
{bands}"#,
            rig = rig.display(),
            shared = shared.display(),
            bands = forty_metres(&[(7_000_000, 0), (7_300_000, 3000)]),
        ),
    )
    .unwrap();
    let run = Logged::run(&config);
    wait_for(&shared);
    (run, shared)
}

/// `tuneward run` in poll mode on the rig at `rig` (binary family: the
/// simulator's address 0x94), polling every 50 ms; nothing else on the
/// port.
fn run_polled(dir: &Path, family: Family, rig: &Path, controller: &str) -> Run {
    let config = dir.join("station.toml");
    let address = match family {
        Family::Binary => "address = 0x94",
        Family::Text | Family::Nine | Family::Block => "",
    };
    std::fs::write(
        &config,
        format!(
            r#"
[rig]
protocol = "{protocol}"
port = "{rig}"
baud = 38400
mode = "poll"
poll_ms = 50
{address}

[tuner]
link = "tcp://{controller}"
min_steps = 0
max_steps = 3000
steps_per_second = {SPEED}
settle_ms = 0
state_file = "motor.state"

[follow]
debounce_ms = 150
hysteresis_hz = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20
{bands}"#,
            protocol = family.protocol(),
            rig = rig.display(),
            bands = forty_metres(&[(7_000_000, 0), (7_300_000, 3000)]),
        ),
    )
    .unwrap();
    Logged::run(&config)
}

async fn say(port: &mut SerialStream, bytes: &[u8]) {
    AsyncWriteExt::write_all(port, bytes).await.unwrap();
    AsyncWriteExt::flush(port).await.unwrap();
}

/// What the other program sends, in each family's words.
#[derive(Clone, Copy)]
enum Family {
    Text,
    Binary,
    /// The nine-digit text dialect, `text-semicolon-9`.
    Nine,
    /// The fixed-block family, `block-5`.
    Block,
}

/// A fixed-block command: four parameter bytes, then the opcode.
fn block(params: [u8; 4], opcode: u8) -> Vec<u8> {
    [&params[..], &[opcode]].concat()
}

/// The block family's frequency field: packed BCD of the frequency in
/// 10 Hz units, eight digits, most significant pair first, high nibble the
/// higher digit (recalled), worked digit by digit: 7 150 000 Hz is
/// 00715000 tens, 00 71 50 00.
fn bcd_be(hz: u64) -> [u8; 4] {
    let digits: Vec<u8> = format!("{:08}", hz / 10)
        .bytes()
        .map(|b| b - b'0')
        .collect();
    let mut out = [0; 4];
    for (o, p) in out.iter_mut().zip(digits.chunks(2)) {
        *o = (p[0] << 4) | p[1];
    }
    out
}

/// The block family's two reads: the frequency, then the transmit status.
fn block_reads() -> Vec<u8> {
    [block([0; 4], 0x03), block([0; 4], 0xF7)].concat()
}

/// A binary-family frame from the program (address E0) to the rig (94):
/// `FE FE <to> <from> <command> [data] FD` (recalled).
fn frame(body: &[u8]) -> Vec<u8> {
    [&[0xFE, 0xFE, 0x94, 0xE0][..], body, &[0xFD]].concat()
}

/// Packed BCD, ten digits, least significant pair first, low nibble the
/// lower digit (the binary family's frequency field; recalled), worked
/// here digit by digit rather than with tuneward's own encoder.
fn bcd(hz: u64) -> Vec<u8> {
    let digits: Vec<u8> = format!("{hz:010}").bytes().map(|b| b - b'0').collect();
    digits.chunks(2).rev().map(|p| (p[0] << 4) | p[1]).collect()
}

impl Family {
    fn protocol(self) -> &'static str {
        match self {
            Family::Text => "text-semicolon",
            Family::Binary => "binary-bcd",
            Family::Nine => "text-semicolon-9",
            Family::Block => "block-5",
        }
    }
    /// Sets the VFO the rig receives on (text: VFO A).
    fn set_receive(self, hz: u64) -> Vec<u8> {
        match self {
            Family::Text => format!("FA{hz:011};").into_bytes(),
            // 0x05: set the operating (selected) VFO's frequency.
            Family::Binary => frame(&[&[0x05][..], &bcd(hz)].concat()),
            Family::Nine => format!("FA{hz:09};").into_bytes(),
            // 01: set the frequency of the VFO in use (the block names no
            // VFO: the set goes to the one in use).
            Family::Block => block(bcd_be(hz), 0x01),
        }
    }
    /// Split with the other VFO (text: VFO B) at `hz` for transmit.
    fn split_up(self, hz: u64) -> Vec<u8> {
        match self {
            Family::Text => format!("FB{hz:011};FT1;").into_bytes(),
            // 0x25 01: the unselected VFO's frequency; 0x0F 01: split on.
            Family::Binary => [
                frame(&[&[0x25, 0x01][..], &bcd(hz)].concat()),
                frame(&[0x0F, 0x01]),
            ]
            .concat(),
            Family::Nine => format!("FB{hz:09};FT1;").into_bytes(),
            // 02: split on (the program set the other VFO beforehand by
            // switching to it, which this family's reads cannot see).
            Family::Block => block([0; 4], 0x02),
        }
    }
    /// Operate on VFO B at `hz`.
    fn vfo_b(self, hz: u64) -> Vec<u8> {
        match self {
            Family::Text => format!("FB{hz:011};FR1;FT1;").into_bytes(),
            // 0x07 01: select VFO B; then set its frequency.
            Family::Binary => [
                frame(&[0x07, 0x01]),
                frame(&[&[0x05][..], &bcd(hz)].concat()),
            ]
            .concat(),
            // VS1: receive (and so transmit) on VFO B.
            Family::Nine => format!("FB{hz:09};VS1;").into_bytes(),
            // 81: toggle to the other VFO (B, from the start on A); then
            // set the frequency of the VFO now in use, which is VFO B's.
            Family::Block => [block([0; 4], 0x81), block(bcd_be(hz), 0x01)].concat(),
        }
    }
    /// A read whose answer carries the transmit state.
    fn read_state(self) -> Vec<u8> {
        match self {
            Family::Text => b"IF;".to_vec(),
            Family::Binary => frame(&[0x1C, 0x00]),
            // The bare TX is a read in this family; IF carries no flag.
            Family::Nine => b"TX;".to_vec(),
            // The frequency read too, as a program watching the rig does.
            Family::Block => block_reads(),
        }
    }
    /// A read of the transmit state that does not read the frequency back
    /// where the family has one (the block family's status read alone;
    /// the text family's `IF;` carries both, the frequency set before).
    fn read_transmit(self) -> Vec<u8> {
        match self {
            Family::Block => block([0; 4], 0xF7),
            _ => self.read_state(),
        }
    }
    fn key(self, on: bool) -> Vec<u8> {
        match (self, on) {
            (Family::Text, true) => b"TX;".to_vec(),
            (Family::Text, false) => b"RX;".to_vec(),
            (Family::Binary, on) => frame(&[0x1C, 0x00, u8::from(on)]),
            (Family::Nine, true) => b"TX1;".to_vec(),
            (Family::Nine, false) => b"TX0;".to_vec(),
            (Family::Block, true) => block([0; 4], 0x08),
            (Family::Block, false) => block([0; 4], 0x88),
        }
    }
}

#[test]
fn bcd_is_worked_as_the_reference_shows() {
    // 7 105 000 Hz = digits 0007105000 -> 00 50 10 07 00, by hand.
    assert_eq!(bcd(7_105_000), vec![0x00, 0x50, 0x10, 0x07, 0x00]);
    // Block family: 7 150 000 Hz = 715 000 tens = 00715000 -> 00 71 50 00,
    // by hand (and 01 40 74 00 is 14 074 000 Hz, the dialect file's
    // example).
    assert_eq!(bcd_be(7_150_000), [0x00, 0x71, 0x50, 0x00]);
    assert_eq!(bcd_be(14_074_000), [0x01, 0x40, 0x74, 0x00]);
}

/// The program keys the rig for half a second and unkeys it; the rig, by
/// its truth log, was on the air, and the motor broke no invariant. The
/// motor's record, locked, for the caller's own checks.
async fn an_over<'m>(
    client: &mut SerialStream,
    family: Family,
    truth: &Path,
    motor: &'m Mutex<Motor>,
) -> std::sync::MutexGuard<'m, Motor> {
    say(client, &family.key(true)).await;
    std::thread::sleep(Duration::from_millis(500));
    assert!(rig_transmits(truth), "the rig should be on the air");
    say(client, &family.key(false)).await;
    std::thread::sleep(Duration::from_millis(300));
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    m
}

async fn split_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let (_rig, rig_link, truth) = sim_rig(dir.path(), family.protocol());
    let (addr, motor) = controller(0, truth.clone());
    let (run, shared) = run(dir.path(), family.protocol(), &rig_link, &addr);
    let mut client = open_port(&shared, 38400);
    // The other program: receive 7.100 MHz, transmit 7.105 MHz on the
    // other VFO, then it reads the state (the rig says receive).
    let script = [
        family.set_receive(7_100_000),
        family.split_up(7_105_000),
        family.read_state(),
    ]
    .concat();
    say(&mut client, &script).await;
    // 7.105 MHz: (7 105 000 - 7 000 000) / 100 = 1050 steps, by hand.
    wait_motor(&motor, "tuned for the transmit VFO", |m| {
        m.at == 1050 && !m.moving
    });
    std::thread::sleep(Duration::from_millis(300));
    // The rig, by its own account, is split as the program set it.
    let t = last_truth(&truth).unwrap();
    assert_eq!(t["rx_hz"], 7_100_000, "{t}");
    assert_eq!(t["tx_hz"], 7_105_000, "{t}");
    let m = an_over(&mut client, family, &truth, &motor).await;
    // The motor ended on the transmit VFO before the over and stayed
    // there. (A set is acted on at once and the proxy hands the program's
    // messages over one by one, so the receive VFO's set, before split was
    // on, may have started a move of its own.)
    assert_eq!(m.gotos.last(), Some(&1050), "{:?}", m.gotos);
    assert_eq!(m.at, 1050);
    drop(m);
    // The inhibit was on from start until the loop was tuned: no release
    // before the move.
    let log = run.log();
    let first_release = log
        .iter()
        .position(|l| l.contains("transmit inhibit released"));
    let the_move = log.iter().position(|l| l.contains("INFO move")).unwrap();
    assert!(
        first_release.is_none_or(|r| r > the_move),
        "inhibit released before the loop was tuned:\n{}",
        log.join("\n")
    );
}

async fn set_then_key_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let (_rig, rig_link, truth) = sim_rig(dir.path(), family.protocol());
    // At rest at 1000 (7.100 MHz).
    let (addr, motor) = controller(1000, truth.clone());
    let (_run, shared) = run(dir.path(), family.protocol(), &rig_link, &addr);
    let mut client = open_port(&shared, 38400);
    say(
        &mut client,
        &[family.set_receive(7_100_000), family.read_transmit()].concat(),
    )
    .await;
    std::thread::sleep(Duration::from_millis(600));
    assert!(motor.lock().unwrap().gotos.is_empty());
    // A band-map click: a set, and the program keys the rig 20 ms later.
    // The set may start a move at once; the transmit command must stop it
    // before the rig is on the air, and nothing may start until the over
    // ends. The program never reads the new frequency back: the set alone
    // says where the loop must be once the over ends.
    say(&mut client, &family.set_receive(7_150_000)).await;
    std::thread::sleep(Duration::from_millis(20));
    let keyed = Instant::now();
    say(&mut client, &family.key(true)).await;
    std::thread::sleep(Duration::from_millis(1_000));
    assert!(rig_transmits(&truth), "the rig should be on the air");
    let unkeyed = Instant::now();
    say(&mut client, &family.key(false)).await;
    // 7.150 MHz: 1500 steps, by hand.
    wait_motor(&motor, "tuned after the over", |m| {
        m.at == 1500 && !m.moving
    });
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert!(
        !m.goto_times.iter().any(|t| *t >= keyed && *t <= unkeyed),
        "a GOTO during the over: {m:?}"
    );
    assert!(m.gotos.iter().all(|g| *g == 1500), "{:?}", m.gotos);
}

async fn vfo_b_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let (_rig, rig_link, truth) = sim_rig(dir.path(), family.protocol());
    let (addr, motor) = controller(1000, truth.clone());
    let (_run, shared) = run(dir.path(), family.protocol(), &rig_link, &addr);
    let mut client = open_port(&shared, 38400);
    say(
        &mut client,
        &[
            family.set_receive(7_100_000),
            family.vfo_b(7_220_000),
            family.read_state(),
        ]
        .concat(),
    )
    .await;
    // 7.220 MHz: 2200 steps, by hand.
    wait_motor(&motor, "VFO B followed", |m| m.at == 2200 && !m.moving);
    let t = last_truth(&truth).unwrap();
    assert_eq!(t["rx_vfo"], "b", "{t}");
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos.last(), Some(&2200), "{:?}", m.gotos);
}

/// VFO B chosen on the rig itself (the simulator's operator script),
/// tuneward polling: VFO A at 7.100 MHz first, VFO B set to 7.220 MHz
/// behind the operator's back, then the operator switches to VFO B. The
/// loop follows VFO A, then VFO B; nothing moves on VFO B's frequency
/// before the switch.
fn polled_vfo_b_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let operator = r#"{"at_ms": 0, "op": "reports", "on": false}
{"at_ms": 300, "op": "tune", "hz": 7100000}
{"at_ms": 300, "op": "tune", "vfo": "b", "hz": 7220000}
{"at_ms": 3000, "op": "select", "vfo": "b"}
"#;
    let (_rig, rig_link, truth) = sim_rig_scripted(dir.path(), family.protocol(), operator);
    let (addr, motor) = controller(0, truth.clone());
    let _run = run_polled(dir.path(), family, &rig_link, &addr);
    // 7.100 MHz: 1000 steps; 7.220 MHz: 2200 steps, by hand.
    wait_motor(&motor, "VFO A followed", |m| m.at == 1000 && !m.moving);
    assert_ne!(last_truth(&truth).unwrap()["rx_vfo"], "b");
    wait_motor(&motor, "VFO B followed", |m| m.at == 2200 && !m.moving);
    let t = last_truth(&truth).unwrap();
    assert_eq!(
        (t["rx_vfo"].clone(), t["rx_hz"].clone()),
        ("b".into(), 7_220_000.into()),
        "{t}"
    );
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos, vec![1000, 2200], "{:?}", m.gotos);
}

/// Split set on the rig itself (the simulator's operator script; no other
/// program, its reports off), tuneward polling: the poll learns split (the
/// text family's status answer, the binary family's `0F` read) and then
/// reads the other VFO (`FB;`, `25 01`), so the loop is tuned for the
/// transmit VFO, 5 kHz up, before the first over.
fn polled_split_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let operator = r#"{"at_ms": 0, "op": "reports", "on": false}
{"at_ms": 300, "op": "tune", "hz": 7100000}
{"at_ms": 300, "op": "tune", "vfo": "b", "hz": 7105000}
{"at_ms": 1500, "op": "split", "on": true}
{"at_ms": 6000, "op": "key"}
{"at_ms": 7000, "op": "unkey"}
"#;
    let (_rig, rig_link, truth) = sim_rig_scripted(dir.path(), family.protocol(), operator);
    let (addr, motor) = controller(0, truth.clone());
    let run = run_polled(dir.path(), family, &rig_link, &addr);
    // 7.105 MHz: (7 105 000 - 7 000 000) / 100 = 1050 steps, by hand.
    wait_motor(&motor, "tuned for the transmit VFO", |m| {
        m.at == 1050 && !m.moving
    });
    let transmitted = |truth: &Path| {
        std::fs::read_to_string(truth).unwrap().lines().any(|l| {
            serde_json::from_str::<serde_json::Value>(l).is_ok_and(|v| v["transmitting"] == true)
        })
    };
    assert!(
        !transmitted(&truth),
        "tuned for the transmit VFO only after the first over"
    );
    let t = last_truth(&truth).unwrap();
    assert_eq!(
        (t["rx_hz"].clone(), t["tx_hz"].clone()),
        (7_100_000.into(), 7_105_000.into()),
        "{t}"
    );
    // The over comes and goes; nothing moves.
    let until = Instant::now() + Duration::from_secs(15);
    while !transmitted(&truth) || rig_transmits(&truth) {
        assert!(Instant::now() < until, "the scripted over never ended");
        std::thread::sleep(Duration::from_millis(20));
    }
    // tuneward has heard the over end; the answers read against the old
    // transmit state come in the next poll cycles (the bug this case
    // caught moved within 10 ms of the unkey being heard). Watch 20 cycles
    // of 50 ms for a move: an absence takes a while to see.
    run.wait_log(&["rig back on receive"]);
    let watch = Instant::now() + Duration::from_secs(1);
    while Instant::now() < watch {
        let m = motor.lock().unwrap();
        assert_eq!(
            m.gotos.last(),
            Some(&1050),
            "moved after the over: {:?}",
            m.gotos
        );
        drop(m);
        std::thread::sleep(Duration::from_millis(20));
    }
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    // Nothing after the move for the transmit VFO.
    let first = m.gotos.iter().position(|&g| g == 1050);
    assert_eq!(first, Some(m.gotos.len() - 1), "{:?}", m.gotos);
    assert_eq!(m.at, 1050);
}

#[test]
fn text_polled_split_set_on_the_rig_tunes_for_the_transmit_vfo() {
    polled_split_case(Family::Text);
}

#[test]
fn binary_polled_split_set_on_the_rig_tunes_for_the_transmit_vfo() {
    polled_split_case(Family::Binary);
}

/// The operator readies split by hand: the other VFO a little above the
/// receive VFO, beyond the 100 Hz dead band but within twice it, then
/// split on. With `[follow] cover_other_vfo` (default on) the loop is
/// tuned for the point between the two, so split on moves nothing and the
/// call goes out at once; the rig, by its own account, transmits on the
/// other VFO with the loop there.
async fn split_near_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let (_rig, rig_link, truth) = sim_rig(dir.path(), family.protocol());
    let (addr, motor) = controller(0, truth.clone());
    let (_run, shared) = run(dir.path(), family.protocol(), &rig_link, &addr);
    let mut client = open_port(&shared, 38400);
    let (other, split_on) = match family {
        Family::Text => (b"FB00007100150;".to_vec(), b"FT1;".to_vec()),
        // 0x25 01: the unselected VFO's frequency; 0x0F 01: split on.
        _ => (
            frame(&[&[0x25, 0x01][..], &bcd(7_100_150)].concat()),
            frame(&[0x0F, 0x01]),
        ),
    };
    let script = [other, family.set_receive(7_100_000), family.read_state()].concat();
    say(&mut client, &script).await;
    // Halfway, 7.100075 MHz: 1000.75 steps, rounded to 1001, by hand.
    wait_motor(&motor, "tuned between the two VFOs", |m| {
        m.at == 1001 && !m.moving
    });
    let before = motor.lock().unwrap().gotos.len();
    say(&mut client, &[split_on, family.read_state()].concat()).await;
    std::thread::sleep(Duration::from_millis(400));
    let t = last_truth(&truth).unwrap();
    assert_eq!(t["tx_hz"], 7_100_150, "{t}");
    let m = an_over(&mut client, family, &truth, &motor).await;
    assert_eq!(
        m.gotos.len(),
        before,
        "split on moved the loop: {:?}",
        m.gotos
    );
    assert_eq!(m.at, 1001);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn text_split_to_a_vfo_close_by_moves_nothing() {
    split_near_case(Family::Text).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn binary_split_to_a_vfo_close_by_moves_nothing() {
    split_near_case(Family::Binary).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn text_split_tunes_for_the_transmit_vfo_before_the_first_over() {
    split_case(Family::Text).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn binary_split_tunes_for_the_transmit_vfo_before_the_first_over() {
    split_case(Family::Binary).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn text_set_then_cat_transmit_moves_nothing_until_the_over_ends() {
    set_then_key_case(Family::Text).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn binary_set_then_cat_transmit_moves_nothing_until_the_over_ends() {
    set_then_key_case(Family::Binary).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn text_vfo_b_is_followed() {
    vfo_b_case(Family::Text).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn binary_vfo_b_is_followed() {
    vfo_b_case(Family::Binary).await;
}

/// Every `rig port up` line so far.
fn ups(run: &Run) -> usize {
    run.log()
        .iter()
        .filter(|l| l.contains("rig port up"))
        .count()
}

fn wait_ups(run: &Run, n: usize) {
    let until = Instant::now() + Duration::from_secs(10);
    while ups(run) < n {
        assert!(Instant::now() < until, "{}", run.log().join("\n"));
        std::thread::sleep(Duration::from_millis(20));
    }
}

async fn unplugged_case(family: Family) {
    let dir = tempfile::tempdir().unwrap();
    let (rig, rig_link, truth) = sim_rig(dir.path(), family.protocol());
    let (addr, motor) = controller(1000, truth.clone());
    let (run, shared) = run(dir.path(), family.protocol(), &rig_link, &addr);
    let mut client = open_port(&shared, 38400);
    say(
        &mut client,
        &[family.set_receive(7_100_000), family.read_state()].concat(),
    )
    .await;
    std::thread::sleep(Duration::from_millis(400));
    say(&mut client, &family.key(true)).await;
    std::thread::sleep(Duration::from_millis(200));
    assert!(rig_transmits(&truth));
    // The USB cable drops mid-over: the rig (and its port) is gone.
    drop(rig);
    let _ = std::fs::remove_file(&rig_link);
    std::thread::sleep(Duration::from_millis(300));
    // It comes back (a fresh simulator writing the truth log afresh: it
    // starts receiving, but tuneward cannot know that).
    let truth2 = truth.clone();
    let script = dir.path().join("script.jsonl");
    let _rig2 = Proc(
        Command::new(BIN)
            .args(["sim-rig", "--protocol", family.protocol(), "--pty"])
            .arg(&rig_link)
            .arg("--script")
            .arg(&script)
            .arg("--truth")
            .arg(&truth2)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap(),
    );
    wait_ups(&run, 2);
    // The program sets a new frequency; nothing says whether the rig
    // transmits, no inhibit is wired: nothing may move.
    say(&mut client, &family.set_receive(7_150_000)).await;
    std::thread::sleep(Duration::from_millis(1_000));
    assert!(
        motor.lock().unwrap().gotos.is_empty(),
        "moved with the transmit state unknown: {:?}",
        motor.lock().unwrap()
    );
    // The program reads the transmit state: the rig says receive. Now it
    // moves; 7.150 MHz is 1500 steps, by hand.
    say(&mut client, &family.read_state()).await;
    wait_motor(&motor, "tuned once the state is known", |m| {
        m.at == 1500 && !m.moving
    });
    let t = last_truth(&truth2).unwrap();
    assert_eq!(t["transmitting"], false, "{t}");
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos, vec![1500]);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn text_rig_unplugged_during_an_over_nothing_moves_until_its_state_is_known() {
    unplugged_case(Family::Text).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn binary_rig_unplugged_during_an_over_nothing_moves_until_its_state_is_known() {
    unplugged_case(Family::Binary).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn nine_digit_split_tunes_for_the_transmit_vfo_before_the_first_over() {
    split_case(Family::Nine).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn nine_digit_set_then_cat_transmit_moves_nothing_until_the_over_ends() {
    set_then_key_case(Family::Nine).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn nine_digit_vfo_b_is_followed() {
    vfo_b_case(Family::Nine).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn nine_digit_rig_unplugged_during_an_over_nothing_moves_until_its_state_is_known() {
    unplugged_case(Family::Nine).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn block_set_then_cat_transmit_moves_nothing_until_the_over_ends() {
    set_then_key_case(Family::Block).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn block_rig_unplugged_during_an_over_nothing_moves_until_its_state_is_known() {
    unplugged_case(Family::Block).await;
}

/// The block family's VFO B: the other program toggles to VFO B (`81`)
/// and sets it (proxy mode), and the operator selects VFO B on the rig
/// (poll mode). The family's frequency read reports the VFO in use, so in
/// both modes the loop follows VFO B once a read says where it is.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn block_vfo_b_is_followed() {
    vfo_b_case(Family::Block).await;
    polled_vfo_b_case(Family::Block);
}

/// Split on the block family: the rig now transmits on the other VFO,
/// which this family cannot read without switching the operator's VFO.
/// Issue 14: say so and hold rather than guess. The loop stays where it
/// was tuned for the receive VFO, the inhibit is asserted, the log says it
/// once, and split off lets it go again.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn block_split_holds_with_the_inhibit_on_rather_than_guess() {
    let family = Family::Block;
    let dir = tempfile::tempdir().unwrap();
    let (_rig, rig_link, truth) = sim_rig(dir.path(), family.protocol());
    let (addr, motor) = controller(0, truth.clone());
    let (run, shared) = run(dir.path(), family.protocol(), &rig_link, &addr);
    let mut client = open_port(&shared, 38400);
    say(
        &mut client,
        &[family.set_receive(7_100_000), family.read_state()].concat(),
    )
    .await;
    // 7.100 MHz: 1000 steps, by hand.
    wait_motor(&motor, "tuned for 7.100", |m| m.at == 1000 && !m.moving);
    run.wait_log(&["transmit inhibit released"]);
    // Split on, then the program keeps reading (the receive VFO).
    say(&mut client, &family.split_up(7_105_000)).await;
    for _ in 0..4 {
        say(&mut client, &family.read_state()).await;
        std::thread::sleep(Duration::from_millis(150));
    }
    // The rig, by its own account, is split: it would transmit on VFO B,
    // far from the receive VFO the loop is tuned for.
    let t = last_truth(&truth).unwrap();
    assert_eq!(t["split"], true, "{t}");
    assert_ne!(t["tx_hz"], 7_100_000, "{t}");
    let log = run.log();
    let said: Vec<&String> = log
        .iter()
        .filter(|l| l.contains("transmit-vfo-unknown"))
        .collect();
    assert_eq!(said.len(), 1, "{}", log.join("\n"));
    let last_inhibit = log
        .iter()
        .rev()
        .find(|l| l.contains("transmit inhibit"))
        .unwrap();
    assert!(last_inhibit.contains("asserted"), "{}", log.join("\n"));
    assert_eq!(motor.lock().unwrap().gotos, vec![1000]);
    // Split off (82): the receive VFO is the transmit VFO again; the loop
    // is tuned for it, so the inhibit goes and nothing moves.
    say(
        &mut client,
        &[block([0; 4], 0x82), family.read_state()].concat(),
    )
    .await;
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        let log = run.log();
        let last = log.iter().rev().find(|l| l.contains("transmit inhibit"));
        if last.is_some_and(|l| l.contains("released")) {
            break;
        }
        assert!(Instant::now() < until, "{}", log.join("\n"));
        std::thread::sleep(Duration::from_millis(20));
    }
    let m = motor.lock().unwrap();
    assert!(m.violations.is_empty(), "{:?}", m.violations);
    assert_eq!(m.gotos, vec![1000]);
}
