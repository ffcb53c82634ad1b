//! The operator's hands on the real binary: `tuneward run` with a rig on a
//! pseudo-terminal and `tuneward sim-tuner` on loopback, steered with
//! `tuneward ctl` over the control socket; one instance per station
//! (a second `run` and `set-position` refused while it runs) and SIGHUP
//! handled as a clean stop.
//!
//! The invariants are read from outside the service: the journal on disk
//! and what `ctl status` reports; the controller is asked only after the
//! service has stopped (a new connection would take it over).

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::time::{Duration, Instant};

use tokio::io::AsyncWriteExt;
use tuneward::journal::{Journal, Recorded};
use tuneward::rig::dialect::Dialect;

mod common;

use common::{rig_behind_symlink, wait_journal, Logged, BIN};

fn ctl(config: &Path, args: &[&str]) -> Output {
    Command::new(BIN)
        .arg("ctl")
        .arg("-c")
        .arg(config)
        .args(args)
        .output()
        .unwrap()
}

/// `ctl --json ARGS`: the exit status and the answer.
fn ctl_json(config: &Path, args: &[&str]) -> (bool, serde_json::Value) {
    let out = ctl(config, &[&["--json"], args].concat());
    let text = String::from_utf8_lossy(&out.stdout);
    let first = text.lines().next().unwrap_or_default().to_string();
    let v: serde_json::Value = serde_json::from_str(&first).unwrap_or_else(|e| {
        panic!(
            "ctl {args:?}: {e}: {text} / {}",
            String::from_utf8_lossy(&out.stderr)
        )
    });
    (out.status.success(), v)
}

fn state(config: &Path) -> serde_json::Value {
    let (ok, v) = ctl_json(config, &["status"]);
    assert!(ok, "{v}");
    v["state"].clone()
}

fn controller_where(addr: &str) -> String {
    let mut s = std::net::TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    std::io::Write::write_all(&mut s, b"WHERE\n").unwrap();
    let mut line = String::new();
    BufReader::new(s).read_line(&mut line).unwrap();
    line.trim_end().to_string()
}

struct Station {
    run: Logged,
    _sim: common::Proc,
    addr: String,
    config: PathBuf,
    journal: Journal,
    rig: tokio_serial::SerialStream,
    _far: tokio_serial::SerialStream,
    dialect: Dialect,
    _dir: tempfile::TempDir,
}

impl Station {
    async fn say(&mut self, bytes: &[u8]) {
        self.rig.write_all(bytes).await.unwrap();
        self.rig.flush().await.unwrap();
    }
}

/// The demo station (0 to 3000 steps over 7.0 to 7.3 MHz, 1000 steps/s)
/// with two presets, running, at rest at 0.
fn start() -> Station {
    let dir = tempfile::tempdir().unwrap();
    let (rig, far, rig_link) = rig_behind_symlink(dir.path());
    let (sim, addr) = common::sim_tuner(&[
        "--listen",
        "127.0.0.1:0",
        "--steps-per-second",
        "1000",
        "--settle-ms",
        "10",
        "--max",
        "3000",
        "--start",
        "0",
    ]);
    let config = common::station_config(dir.path(), &rig_link, &addr, 1000, "");
    let mut text = std::fs::read_to_string(&config).unwrap();
    text.push_str(
        r#"
[[preset]]
name = "cw-40"
hz = 7030000

[[preset]]
name = "parked"
steps = 2500
"#,
    );
    std::fs::write(&config, text).unwrap();
    let journal = Journal::new(dir.path().join("motor.state"));
    let run = Logged::run(&config);
    wait_journal(&journal, Recorded::Known(0));
    run.wait_log(&["control socket ready"]);
    Station {
        run,
        _sim: sim,
        addr,
        config,
        journal,
        rig,
        _far: far,
        dialect: Dialect::builtin("text-semicolon").unwrap(),
        _dir: dir,
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_command_through_ctl_under_the_cores_rules() {
    let mut s = start();
    let c = s.config.clone();
    let st = state(&c);
    assert_eq!(st["position"], 0);
    assert_eq!(st["min_steps"], 0);
    assert_eq!(st["max_steps"], 3000);
    assert_eq!(st["paused"], false);
    assert!(
        st.get("rig_hz").is_none(),
        "absent values are left out: {st}"
    );

    // goto: a move like any other, journalled.
    let (ok, a) = ctl_json(&c, &["goto", "1200"]);
    assert!(ok, "{a}");
    assert_eq!(a["outcome"], "done");
    wait_journal(&s.journal, Recorded::Known(1200));

    // Beyond the limits: refused with the reason, exit status 1, nothing moves.
    let (ok, a) = ctl_json(&c, &["goto", "5000"]);
    assert!(!ok);
    assert_eq!(a["refused"], "outside-limits");
    assert!(a["reason"].as_str().unwrap().contains("0..=3000"), "{a}");
    let (ok, a) = ctl_json(&c, &["nudge", "-1201"]);
    assert!(!ok);
    assert_eq!(a["refused"], "outside-limits");

    // A preset by frequency: 7.03 MHz is step 300 on this calibration.
    let (ok, a) = ctl_json(&c, &["preset", "cw-40"]);
    assert!(ok, "{a}");
    wait_journal(&s.journal, Recorded::Known(300));
    let (ok, a) = ctl_json(&c, &["preset", "nowhere"]);
    assert!(!ok);
    assert_eq!(a["refused"], "unknown-preset");
    assert!(
        a["reason"].as_str().unwrap().contains("cw-40, parked"),
        "{a}"
    );

    // A nudge during a transmission waits for receive.
    let tx = s.dialect.encode_transmit(true, 0);
    s.say(&tx).await;
    let until = Instant::now() + Duration::from_secs(5);
    while state(&c)["transmitting"] != true {
        assert!(Instant::now() < until, "transmission not seen");
        std::thread::sleep(Duration::from_millis(20));
    }
    let (ok, a) = ctl_json(&c, &["nudge", "+20"]);
    assert!(ok, "{a}");
    assert_eq!(a["outcome"], "queued");
    assert_eq!(a["waits_for"], "receive");
    std::thread::sleep(Duration::from_millis(300));
    assert_eq!(s.journal.load().unwrap(), Some(Recorded::Known(300)));
    assert_eq!(state(&c)["moving"], false);
    let rx = s.dialect.encode_transmit(false, 0);
    s.say(&rx).await;
    wait_journal(&s.journal, Recorded::Known(320));

    // Pause: a new frequency is tracked but not followed; resume follows it.
    let (ok, _) = ctl_json(&c, &["pause"]);
    assert!(ok);
    let f = s.dialect.encode_frequency(7_150_000, 0);
    s.say(&f).await;
    s.run.wait_log(&["hold", "paused"]);
    let st = state(&c);
    assert_eq!(st["rig_hz"], 7_150_000);
    assert_eq!(st["band"], "40m");
    assert_eq!(st["paused"], true);
    assert_eq!(s.journal.load().unwrap(), Some(Recorded::Known(320)));
    let (ok, _) = ctl_json(&c, &["resume"]);
    assert!(ok);
    wait_journal(&s.journal, Recorded::Known(1500));

    // Mark: the rig's frequency at the position (inline points: logged).
    let (ok, a) = ctl_json(&c, &["mark"]);
    assert!(ok, "{a}");
    s.run
        .wait_log(&["calibration point candidate", "hz=7150000", "steps=1500"]);

    // Profiles: none but the base here; reload reads the config again.
    let (ok, a) = ctl_json(&c, &["profile", "wet"]);
    assert!(!ok);
    assert_eq!(a["refused"], "unknown-profile");
    let (ok, a) = ctl_json(&c, &["profile", "base"]);
    assert!(ok, "{a}");
    let (ok, a) = ctl_json(&c, &["reload"]);
    assert!(ok, "{a}");

    // Readable output by default.
    let out = ctl(&c, &["status"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("7.150000 MHz (40m)"), "{text}");
    assert!(text.contains("step 1500"), "{text}");

    // watch: the state now, then a line at the change.
    let mut watch = std::process::Command::new(BIN)
        .args(["ctl", "--json", "-c"])
        .arg(&c)
        .arg("watch")
        .stdout(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let mut lines = BufReader::new(watch.stdout.take().unwrap()).lines();
    let first: serde_json::Value = serde_json::from_str(&lines.next().unwrap().unwrap()).unwrap();
    assert_eq!(first["outcome"], "watching");
    assert_eq!(first["state"]["position"], 1500);
    ctl_json(&c, &["preset", "parked"]);
    let mut saw_heading = false;
    for line in lines.by_ref() {
        let v: serde_json::Value = serde_json::from_str(&line.unwrap()).unwrap();
        if v["state"]["heading"] == 2500 {
            saw_heading = true;
        }
        if v["state"]["position"] == 2500 && v["state"]["moving"] == false {
            break;
        }
    }
    assert!(saw_heading);
    let _ = watch.kill();
    let _ = watch.wait();

    // The log says what happened in words: transmissions, arrivals.
    s.run.wait_log(&["rig transmitting"]);
    s.run.wait_log(&["rig back on receive"]);
    s.run.wait_log(&["arrived", "steps=1200"]);
    s.run.wait_log(&["transmit inhibit released"]);
    assert!(
        !s.run
            .log()
            .iter()
            .any(|l| l.contains("Some(") || l.contains("None")),
        "Debug formatting in the log"
    );

    // A line that is not a request: the `error` answer says where, what
    // was expected and what was found (protocols/control.md).
    let socket = s.journal.path().with_file_name("motor.state.sock");
    let mut raw = std::os::unix::net::UnixStream::connect(&socket).unwrap();
    std::io::Write::write_all(&mut raw, b"{\"do\":\"mark\",\"extra\":1}\n").unwrap();
    let mut answer = String::new();
    std::io::BufRead::read_line(&mut std::io::BufReader::new(&raw), &mut answer).unwrap();
    let a: serde_json::Value = serde_json::from_str(&answer).unwrap();
    assert_eq!(a["ok"], false, "{a}");
    assert_eq!(a["outcome"], "error", "{a}");
    let reason = a["reason"].as_str().unwrap();
    assert!(
        reason.starts_with(
            "request line: expected a request such as {\"do\":\"nudge\",\"steps\":20}"
        ) && reason.ends_with(
            ", found `{\"do\":\"mark\",\"extra\":1}`: field `extra` is not one `mark` takes"
        ),
        "{reason}"
    );
    drop(raw);

    // The log names the commands and their outcomes.
    s.run
        .wait_log(&["operator command refused", "outside-limits"]);
    s.run.wait_log(&["operator command", "nudge", "queued"]);

    s.run.proc.signal(libc::SIGTERM);
    assert_eq!(
        s.run.proc.wait_exit(Duration::from_secs(10)).code(),
        Some(0)
    );
    assert_eq!(controller_where(&s.addr), "AT 2500");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn one_instance_per_station_and_sighup_stops_cleanly() {
    let mut s = start();
    let c = s.config.clone();
    let pid = s.run.proc.0.id().to_string();

    // A second run on the same station is refused, naming the first.
    let second = Command::new(BIN)
        .args(["run", "--config"])
        .arg(&c)
        .output()
        .unwrap();
    assert!(!second.status.success());
    let err = String::from_utf8_lossy(&second.stderr);
    assert!(err.contains(&format!("pid {pid}")), "{err}");
    // It took nothing over: the first still answers and still drives.
    assert_eq!(state(&c)["fault"], false);

    // set-position refuses while the service holds the station.
    let set = Command::new(BIN)
        .args(["set-position", "100", "--config"])
        .arg(&c)
        .output()
        .unwrap();
    assert!(!set.status.success());
    let err = String::from_utf8_lossy(&set.stderr);
    assert!(err.contains(&format!("pid {pid}")), "{err}");
    assert_eq!(s.journal.load().unwrap(), Some(Recorded::Known(0)));

    // SIGHUP mid-move: like SIGTERM, the move finishes and is journalled.
    let f = s.dialect.encode_frequency(7_150_000, 0);
    s.say(&f).await;
    wait_journal(&s.journal, Recorded::Unknown { from: 0, to: 1500 });
    s.run.proc.signal(libc::SIGHUP);
    let status = s.run.proc.wait_exit(Duration::from_secs(10));
    assert_eq!(status.code(), Some(0), "{}", s.run.log().join("\n"));
    assert_eq!(s.journal.load().unwrap(), Some(Recorded::Known(1500)));
    assert_eq!(controller_where(&s.addr), "AT 1500");

    // Now nobody runs: ctl says so, and set-position works again.
    let out = ctl(&c, &["status"]);
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("no tuneward service is running"), "{err}");
    let set = Command::new(BIN)
        .args(["set-position", "1400", "--config"])
        .arg(&c)
        .output()
        .unwrap();
    assert!(
        set.status.success(),
        "{}",
        String::from_utf8_lossy(&set.stderr)
    );
    assert_eq!(s.journal.load().unwrap(), Some(Recorded::Known(1400)));
}
