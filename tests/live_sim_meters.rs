//! The real `tuneward sim-rig` answering meter reads from its simulated
//! loop, at the capacitor position the real `tuneward sim-tuner` writes
//! (`--position-file`, read by `sim-rig --tuner-position`). Checked from
//! outside: the position the controller reported, the loop physics, and
//! the answer decoded by tuneward's own station decoder.
//!
//! Meter frames: the binary family's read-meter command 15 with
//! sub-command 02 (signal), answered with two BCD bytes, most significant
//! first (recalled; `protocols/binary-bcd.toml`).

use std::io::{BufRead, BufReader, Write};
use std::net::TcpStream;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use tokio::io::AsyncWriteExt;
use tuneward::rig::meter::MeterKind;
use tuneward::rig::{Dialect, Direction, RigEvent};

mod common;

use common::{open_port, read_exactly, Proc, BIN};

/// An invented loop like the demo station's (config/demo.toml), on a drive
/// eight times coarser, through two points, resonance moved by 40 steps of "rain"; no scatter.
const METERS: &str = "loop_diameter_m = 1.0\nconductor_diameter_m = 0.022\n\
    through = [[7100000, 39049], [14175000, 8301]]\nrain_steps = 40\n\
    floor_dbm = -115.0\nnoise_dbm = -105.0\nscatter_db = 0.0\n";

fn goto(w: &mut TcpStream, r: &mut BufReader<TcpStream>, steps: i64) {
    w.write_all(format!("GOTO {steps}\n").as_bytes()).unwrap();
    let mut line = String::new();
    while line.trim_end() != format!("AT {steps}") {
        line.clear();
        r.read_line(&mut line).unwrap();
        assert!(!line.is_empty(), "controller closed");
    }
}

/// The meter truth log's `n`-th line once it has that many (5 s at most).
fn nth_line(path: &Path, n: usize) -> serde_json::Value {
    common::jsonl_until(path, |l| l.len() >= n)[n - 1].clone()
}

/// The position file says the controller's position once it has settled
/// there (sim-tuner keeps it current every 20 ms).
fn wait_position(path: &Path, steps: i64) {
    let until = Instant::now() + Duration::from_secs(5);
    while std::fs::read_to_string(path)
        .ok()
        .and_then(|t| t.trim().parse::<f64>().ok())
        != Some(steps as f64)
    {
        assert!(Instant::now() < until, "position file never said {steps}");
        std::thread::sleep(Duration::from_millis(10));
    }
}

#[tokio::test]
async fn sim_rig_reads_the_loop_at_the_capacitor_sim_tuner_reports() {
    let dir = tempfile::tempdir().unwrap();
    let position = dir.path().join("capacitor");
    let meters = dir.path().join("meters.toml");
    let meter_truth = dir.path().join("meters.jsonl");
    std::fs::write(&meters, METERS).unwrap();
    let (_tuner, addr) = common::sim_tuner(&[
        "--listen",
        "127.0.0.1:0",
        "--steps-per-second",
        "200000",
        "--settle-ms",
        "5",
        "--min",
        "0",
        "--max",
        "50000",
        "--start",
        "20000",
        "--position-file",
        position.to_str().unwrap(),
    ]);
    let link = dir.path().join("rig");
    let _rig = Proc(
        Command::new(BIN)
            .args([
                "sim-rig",
                "--protocol",
                "binary-bcd",
                "--vfo-a",
                "14175000",
                "--pty",
            ])
            .arg(&link)
            .arg("--meters")
            .arg(&meters)
            .arg("--tuner-position")
            .arg(&position)
            .arg("--meter-truth")
            .arg(&meter_truth)
            .arg("--truth")
            .arg(dir.path().join("truth.jsonl"))
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap(),
    );
    common::wait_symlink(&link);
    let mut port = open_port(&link, 115_200);
    let mut w = TcpStream::connect(&addr).unwrap();
    w.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    let mut r = BufReader::new(w.try_clone().unwrap());
    let dialect = Dialect::builtin("binary-bcd").unwrap();
    let read = dialect.meter_read(MeterKind::Signal, 0x94).unwrap();

    // The true resonance at 14.175 MHz is at 8301 - 40 steps (the rain);
    // then 2000 steps off it.
    let mut raws = Vec::new();
    for (n, steps) in [(1, 8261i64), (2, 10_261)] {
        goto(&mut w, &mut r, steps);
        wait_position(&position, steps);
        AsyncWriteExt::write_all(&mut port, &read).await.unwrap();
        let answer = read_exactly(&mut port, 9).await;
        let mut dec = dialect.station_decoder(None);
        let mut events = Vec::new();
        dec.feed(Direction::Rx, &answer, &mut events);
        let line = nth_line(&meter_truth, n);
        assert_eq!(line["kind"], "signal");
        assert_eq!(line["steps"], steps as f64, "{line}");
        let raw = line["raw"].as_u64().unwrap() as u16;
        assert_eq!(
            events,
            [RigEvent::Meter {
                kind: MeterKind::Signal,
                raw
            }]
        );
        raws.push((raw, line));
    }
    let (peak, off) = (&raws[0], &raws[1]);
    // At resonance the band noise adds to the floor as power:
    // 10 log10(10^-11.5 + 10^-10.5) = -104.59 dBm; 2000 steps off, the
    // floor alone (-115 dBm).
    let resonance = peak.1["resonance_hz"].as_f64().unwrap();
    assert!((resonance - 14_175_000.0).abs() < 1.0, "{}", peak.1);
    assert!((peak.1["true_value"].as_f64().unwrap() - -104.586).abs() < 1e-3);
    assert!((off.1["true_value"].as_f64().unwrap() - -115.0).abs() < 0.1);
    // 10 dB on the recalled scale (120 raw steps for 54 dB) is 22 steps.
    assert!(peak.0 >= off.0 + 20, "{peak:?} {off:?}");
}
