//! The real `tuneward run` and `tuneward capture` binaries against a rig on
//! a pseudo-terminal and `tuneward sim-tuner` on loopback TCP: signals,
//! a crash in the middle of a move, and capture files that replay.
//!
//! Every wait has a deadline; a child left behind is killed on drop.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use tokio::io::AsyncWriteExt;
use tokio_serial::SerialPort;
use tuneward::journal::{Journal, Recorded};
use tuneward::rig::dialect::Dialect;

mod common;

use common::{
    assert_success, pty_pair, read_exactly, rig_behind_symlink, wait_journal, Logged, Proc, BIN,
};

/// `tuneward sim-tuner` on `listen` (port 0: a free one), 1000 steps/s,
/// 0 to 3000, counting from `start`; its address.
fn sim_tuner(listen: &str, start: i64) -> (Proc, String) {
    common::sim_tuner(&[
        "--listen",
        listen,
        "--steps-per-second",
        "1000",
        "--settle-ms",
        "10",
        "--max",
        "3000",
        "--start",
        &start.to_string(),
    ])
}

/// Asks a controller where its motor is (a new connection takes over).
fn controller_where(addr: &str) -> String {
    let mut s = std::net::TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    std::io::Write::write_all(&mut s, b"WHERE\n").unwrap();
    let mut line = String::new();
    BufReader::new(s).read_line(&mut line).unwrap();
    line.trim_end().to_string()
}

/// The demo station at 1000 steps/s: the rig on `rig`, the controller at
/// `controller`.
fn write_config(dir: &Path, rig: &Path, controller: &str, extra_rig: &str) -> PathBuf {
    common::station_config(dir, rig, controller, 1000, extra_rig)
}

async fn say(rig: &mut tokio_serial::SerialStream, bytes: &[u8]) {
    rig.write_all(bytes).await.unwrap();
    rig.flush().await.unwrap();
}

/// `tuneward run` with the controller simulator, told 7.15 MHz from 0:
/// half way between the two calibration points, 1500 steps, 1.5 s at
/// 1000 steps/s. Returned once the move is journalled as under way.
struct MidMove {
    run: Logged,
    sim: Proc,
    addr: String,
    rig: tokio_serial::SerialStream,
    rig_link: PathBuf,
    journal: Journal,
    dialect: Dialect,
    _far: tokio_serial::SerialStream,
    dir: tempfile::TempDir,
}

async fn mid_move() -> MidMove {
    let dir = tempfile::tempdir().unwrap();
    let (mut rig, far, rig_link) = rig_behind_symlink(dir.path());
    let (sim, addr) = sim_tuner("127.0.0.1:0", 0);
    let config = write_config(dir.path(), &rig_link, &addr, "");
    let journal = Journal::new(dir.path().join("motor.state"));
    let run = Logged::run(&config);
    wait_journal(&journal, Recorded::Known(0));
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    say(&mut rig, &dialect.encode_frequency(7_150_000, 0)).await;
    wait_journal(&journal, Recorded::Unknown { from: 0, to: 1500 });
    MidMove {
        run,
        sim,
        addr,
        rig,
        rig_link,
        journal,
        dialect,
        _far: far,
        dir,
    }
}

/// SIGTERM in the middle of a move: the move finishes, the position is on
/// disk and equal to the controller's, the inhibit is released, exit 0.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigterm_mid_move_finishes_it_and_exits_cleanly() {
    let mut m = mid_move().await;
    m.run.proc.signal(libc::SIGTERM);
    // A frequency after the signal is no new target.
    say(&mut m.rig, &m.dialect.encode_frequency(7_250_000, 0)).await;
    let status = m.run.proc.wait_exit(Duration::from_secs(10));
    assert_eq!(status.code(), Some(0), "{}", m.run.log().join("\n"));

    assert_eq!(m.journal.load().unwrap(), Some(Recorded::Known(1500)));
    assert_eq!(controller_where(&m.addr), "AT 1500");
    let log = m.run.log();
    assert!(log
        .iter()
        .any(|l| l.contains("letting the move under way finish")));
    assert_eq!(log.iter().filter(|l| l.contains(" INFO move ")).count(), 1);
    // The last word on the inhibit is a release, after the arrival.
    let last = log
        .iter()
        .rev()
        .find(|l| l.contains("transmit inhibit"))
        .unwrap();
    assert!(last.contains("released"), "{last}");
}

/// A second interrupt during the shutdown stops at once (status 130),
/// leaving the unfinished move in the journal, as a crash would.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_second_interrupt_stops_at_once() {
    let mut m = mid_move().await;
    m.run.proc.signal(libc::SIGTERM);
    m.run.wait_log(&["shutting down"]);
    m.run.proc.signal(libc::SIGINT);
    let status = m.run.proc.wait_exit(Duration::from_secs(10));
    assert_eq!(status.code(), Some(130), "{}", m.run.log().join("\n"));
    // Stopped before the move could finish: its intent is still on disk.
    assert_eq!(
        m.journal.load().unwrap(),
        Some(Recorded::Unknown { from: 0, to: 1500 })
    );
    assert!(m
        .run
        .log()
        .iter()
        .any(|l| l.contains("second interrupt: stopping at once")));
}

/// `kill -9` in the middle of a move, and a controller that lost its count
/// too: at restart the position is unknown, nothing moves and the inhibit
/// stays asserted, until the controller reports the move's target.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn killed_mid_move_restarts_with_the_position_unknown() {
    let MidMove {
        run,
        sim: sim_a,
        mut rig,
        rig_link,
        journal,
        dialect,
        _far,
        dir,
        ..
    } = mid_move().await;
    drop(run); // SIGKILL mid-move
    drop(sim_a); // and the controller is power-cycled: its count is gone

    let (sim_b, addr_b) = sim_tuner("127.0.0.1:0", 0);
    let config = write_config(dir.path(), &rig_link, &addr_b, "");
    let mut run = Logged::run(&config);
    run.wait_log(&["journal: a move did not finish", "from=0", "to=1500"]);
    run.wait_log(&["position unknown", "controller=0"]);
    say(&mut rig, &dialect.encode_frequency(7_200_000, 0)).await;
    run.wait_log(&["hold", "hz=7200000", "reason=position-unknown"]);
    assert_eq!(
        journal.load().unwrap(),
        Some(Recorded::Unknown { from: 0, to: 1500 })
    );
    let log = run.log();
    assert!(!log.iter().any(|l| l.contains(" INFO move ")), "{log:?}");
    let inhibit: Vec<&String> = log
        .iter()
        .filter(|l| l.contains("transmit inhibit"))
        .collect();
    assert!(
        inhibit.len() == 1 && inhibit[0].contains("asserted"),
        "{inhibit:?}"
    );

    // The operator finds the capacitor where the move was going and the
    // controller comes back reporting it (on the same address).
    drop(sim_b);
    let (_sim_c, _) = sim_tuner(&addr_b, 1500);
    // Its answer is the move's target: the position is trusted again and
    // following resumes from there; the frequency that waited is tuned.
    run.wait_log(&["INFO move", "from=1500", "to=2000"]);
    wait_journal(&journal, Recorded::Known(2000));
    run.proc.signal(libc::SIGTERM);
    let status = run.proc.wait_exit(Duration::from_secs(10));
    assert_eq!(status.code(), Some(0));
    assert_eq!(journal.load().unwrap(), Some(Recorded::Known(2000)));
}

/// `tuneward capture` until Ctrl-C, then `tuneward replay` of the file
/// sees the frequencies the rig reported.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn capture_until_interrupted_then_replay() {
    let dir = tempfile::tempdir().unwrap();
    let (mut rig, _far, rig_link) = rig_behind_symlink(dir.path());
    let config = write_config(dir.path(), &rig_link, "127.0.0.1:9", "");
    let cap = dir.path().join("evening.cap");
    let mut capture = Logged::capture(&config, &cap, &[]);
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    // The port is open once the link says so.
    capture.wait_log(&["rig port up"]);
    let mut total = 0;
    for hz in [7_050_000, 7_120_000, 7_180_000] {
        let report = dialect.encode_frequency(hz, 0);
        total += report.len();
        say(&mut rig, &report).await;
    }
    capture.wait_log(&["capturing:", &format!(" {total} bytes from the rig")]);
    capture.proc.signal(libc::SIGINT);
    let status = capture.proc.wait_exit(Duration::from_secs(10));
    assert_eq!(status.code(), Some(0));
    capture.wait_log(&[
        "captured",
        &format!("({total} bytes from the rig, 0 to it)"),
    ]);

    let out = Command::new(BIN)
        .args(["replay", cap.to_str().unwrap(), "--config"])
        .arg(&config)
        .args(["--json", "--verbose"])
        .output()
        .unwrap();
    assert_success(&out);
    let heard: Vec<u64> = String::from_utf8_lossy(&out.stdout)
        .lines()
        .filter_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
        .filter(|v| v["kind"] == "frequency")
        .filter_map(|v| v["hz"].as_u64())
        .collect();
    assert_eq!(heard, vec![7_050_000, 7_120_000, 7_180_000]);
}

/// In proxy mode the capture holds both directions: the other program's
/// query (`tx`) and the rig's answer (`rx`), and `--duration` ends it.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn capture_in_proxy_mode_records_both_directions() {
    let dir = tempfile::tempdir().unwrap();
    let (mut rig, _far, rig_link) = rig_behind_symlink(dir.path());
    let config = write_config(
        dir.path(),
        &rig_link,
        "127.0.0.1:9",
        "mode = \"proxy\"\nproxy_link = \"shared\"",
    );
    let cap = dir.path().join("shared.cap");
    let mut capture = Logged::capture(&config, &cap, &["--duration", "4"]);
    let shared = dir.path().join("shared");
    let until = Instant::now() + Duration::from_secs(5);
    while std::fs::symlink_metadata(&shared).is_err() {
        assert!(Instant::now() < until, "no proxy link");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let mut other = common::open_port(&shared, 38_400);
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    let query = dialect.poll_frequency(0);
    other.write_all(&query).await.unwrap();
    assert_eq!(read_exactly(&mut rig, query.len()).await, query);
    let answer = dialect.encode_frequency(7_074_000, 0);
    say(&mut rig, &answer).await;
    assert_eq!(read_exactly(&mut other, answer.len()).await, answer);

    let status = capture.proc.wait_exit(Duration::from_secs(10));
    assert_eq!(status.code(), Some(0), "{}", capture.log().join("\n"));
    let records = tuneward::capture::CaptureReader::open(&cap)
        .unwrap()
        .collect::<Result<Vec<_>, _>>();
    let records = records.unwrap();
    let bytes = |dir| -> Vec<u8> {
        records
            .iter()
            .filter(|r| r.dir == dir)
            .flat_map(|r| r.bytes.clone())
            .collect()
    };
    assert_eq!(bytes(tuneward::rig::Direction::Tx), query);
    assert_eq!(bytes(tuneward::rig::Direction::Rx), answer);
}

/// The rig is unplugged and comes back on a new device behind the same
/// symlink; then the controller drops out and comes back. Each transition
/// is logged once, the inhibit is asserted the whole time the controller is
/// away, and following resumes both times.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn rig_unplug_and_controller_drop_both_recover() {
    let dir = tempfile::tempdir().unwrap();
    let (rig_a, far_a, rig_link) = rig_behind_symlink(dir.path());
    let dialect = Dialect::builtin("text-semicolon").unwrap();
    let journal = Journal::new(dir.path().join("motor.state"));
    let (sim, addr) = sim_tuner("127.0.0.1:0", 0);
    let config = write_config(dir.path(), &rig_link, &addr, "");
    let mut run = Logged::run(&config);
    wait_journal(&journal, Recorded::Known(0));

    // Unplug: both ends of the first pseudo-terminal go away.
    drop(rig_a);
    drop(far_a);
    run.wait_log(&["rig port down"]);
    let (mut rig_b, far_b) = pty_pair();
    let device_b = far_b.name().unwrap();
    tuneward::port::pty::place_symlink(&rig_link, Path::new(&device_b)).unwrap();
    run.wait_log(&["rig port up", &device_b]);
    say(&mut rig_b, &dialect.encode_frequency(7_030_000, 0)).await;
    wait_journal(&journal, Recorded::Known(300));
    let downs = run
        .log()
        .iter()
        .filter(|l| l.contains("rig port down"))
        .count();
    assert_eq!(downs, 1, "{:?}", run.log());

    // The controller goes away; a frequency meanwhile only holds.
    drop(sim);
    run.wait_log(&["controller link down"]);
    let since = run.log().len();
    say(&mut rig_b, &dialect.encode_frequency(7_060_000, 0)).await;
    run.wait_log(&["hold", "hz=7060000", "reason=fault"]);
    let (_sim2, _) = sim_tuner(&addr, 300);
    run.wait_log(&["INFO move", "from=300", "to=600"]);
    wait_journal(&journal, Recorded::Known(600));
    let log = run.log();
    let after: Vec<&String> = log[since..]
        .iter()
        .filter(|l| l.contains("transmit inhibit"))
        .collect();
    // Asserted at the drop (before `since`) and not released until the
    // move after the controller came back.
    let first_release = log[since..]
        .iter()
        .position(|l| l.contains("transmit inhibit released"));
    let the_move = log[since..]
        .iter()
        .position(|l| l.contains("INFO move"))
        .unwrap();
    assert!(
        first_release.is_none_or(|r| r > the_move),
        "inhibit released while the controller was away: {after:?}"
    );
    assert!(log[..since]
        .iter()
        .rev()
        .find(|l| l.contains("transmit inhibit"))
        .is_some_and(|l| l.contains("asserted")));
    run.proc.signal(libc::SIGTERM);
    assert_eq!(run.proc.wait_exit(Duration::from_secs(10)).code(), Some(0));
}
