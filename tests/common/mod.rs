//! Scaffolding shared by the live end-to-end tests and the latency bench:
//! the invented demo station (calibration, policy, config file), child
//! processes killed on drop, pseudo-terminal rigs, and readers with
//! deadlines for link events and port bytes.

// Every test binary compiles this file and uses only some of it.
#![allow(dead_code)]

pub mod actions;
pub mod actions_table;
pub mod broker;
pub mod controller;
pub mod http;
pub mod invariants;
pub mod truth;

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Output, Stdio};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use tokio::io::AsyncReadExt;
use tokio::sync::mpsc;
use tokio_serial::{SerialPort, SerialStream};
use tuneward::calibrate::StepMap;
use tuneward::config::Approach;
use tuneward::follow::{Band, Policy, TuneFor, WhileUnknown};
use tuneward::port::link::LinkEvent;
use tuneward::rig::Direction;

/// The `tuneward` binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_tuneward");

/// Invented demo calibration: 7.000 MHz at step 0, 100 Hz per step.
pub struct Linear;

impl StepMap for Linear {
    fn steps_at(&self, hz: f64) -> f64 {
        (hz - 7_000_000.0) / 100.0
    }
}

/// The demo station's policy for [`Linear`]: 40 m, 0 to 3000 steps, no
/// backlash, `debounce` on the band and overall, 5 ms inhibit lead and
/// 20 ms tail.
pub fn policy(debounce: Duration) -> Policy {
    Policy {
        bands: vec![Band {
            name: "40m".into(),
            low_hz: 7_000_000,
            high_hz: 7_300_000,
            guard_hz: 0,
            hysteresis_hz: 200,
            debounce,
        }],
        min_steps: 0,
        max_steps: 3000,
        backlash_steps: 0,
        approach: Approach::Up,
        debounce,
        min_move_steps: 1,
        inhibit_lead: Duration::from_millis(5),
        inhibit_tail: Duration::from_millis(20),
        candidate_dwell: Duration::from_secs(60),
        inhibit_while_detuned: false,
        jump: None,
        sweep_settle: None,
        // A station with its inhibit wired; the hold until tuned is tested
        // on the real binary with a config.
        tune_for: TuneFor::Transmit,
        while_unknown: WhileUnknown::MoveUnderInhibit,
        line_holds_commands: false,
        inhibit_until_tuned: false,
        cover_alternate: false,
        burst_gap: std::time::Duration::from_millis(100),
    }
}

/// The `[calibration]` and `[[band]]` tables of an invented 40 m station
/// whose calibration interpolates between `points` (Hz, steps).
pub fn forty_metres(points: &[(u64, i64)]) -> String {
    let points: Vec<String> = points
        .iter()
        .map(|(hz, steps)| format!("{{ hz = {hz}, steps = {steps} }}"))
        .collect();
    format!(
        r#"
[calibration]
model = "interpolate"
points = [{}]

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7300000
"#,
        points.join(", ")
    )
}

/// Writes `station.toml` in `dir` for an invented station: the rig on
/// `rig_link`, the controller at `controller` (host:port) moving
/// `steps_per_second`, 0 to 3000 steps over 7.0 to 7.3 MHz, the journal in
/// `motor.state`; `extra_rig` adds keys to `[rig]`.
pub fn station_config(
    dir: &Path,
    rig_link: &Path,
    controller: &str,
    steps_per_second: u32,
    extra_rig: &str,
) -> PathBuf {
    let config = dir.join("station.toml");
    let text = format!(
        r#"
[rig]
protocol = "text-semicolon"
port = "{rig}"
baud = 38400
{extra_rig}

[tuner]
link = "tcp://{controller}"
min_steps = 0
max_steps = 3000
steps_per_second = {steps_per_second}
settle_ms = 10
state_file = "motor.state"

[follow]
debounce_ms = 30
hysteresis_hz = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20

# No inhibit line on this test bench, and its rig scripts do not always say
# whether the rig transmits: moves may go ahead while that is unknown. The
# tests of the transmit truth write configs of their own.
[inhibit]
unprotected_ok = true
{bands}"#,
        rig = rig_link.display(),
        bands = forty_metres(&[(7_000_000, 0), (7_300_000, 3000)]),
    );
    std::fs::write(&config, text).unwrap();
    config
}

/// A child process killed (SIGKILL) when dropped.
pub struct Proc(pub Child);

impl Drop for Proc {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

impl Proc {
    pub fn signal(&self, sig: libc::c_int) {
        let pid = libc::pid_t::try_from(self.0.id()).unwrap();
        // SAFETY: kill(2) on our own child's pid; no memory is involved.
        assert_eq!(unsafe { libc::kill(pid, sig) }, 0);
    }

    pub fn wait_exit(&mut self, within: Duration) -> ExitStatus {
        let until = Instant::now() + within;
        loop {
            if let Some(status) = self.0.try_wait().unwrap() {
                return status;
            }
            assert!(Instant::now() < until, "process did not exit in {within:?}");
            std::thread::sleep(Duration::from_millis(20));
        }
    }
}

/// `tuneward sim-tuner` with `args` (which give it a `--listen` address);
/// the process and the address it says it listens on.
pub fn sim_tuner(args: &[&str]) -> (Proc, String) {
    let mut child = Command::new(BIN)
        .arg("sim-tuner")
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut out = BufReader::new(child.stdout.take().unwrap());
    let mut line = String::new();
    out.read_line(&mut line).unwrap();
    let addr = line
        .trim()
        .strip_prefix("listening on ")
        .unwrap_or_else(|| panic!("sim-tuner said {line:?}"))
        .to_string();
    (Proc(child), addr)
}

/// Asserts that a finished child succeeded, showing its stderr if not.
#[track_caller]
pub fn assert_success(out: &Output) {
    assert!(
        out.status.success(),
        "{}: {}",
        out.status,
        String::from_utf8_lossy(&out.stderr)
    );
}

/// A pseudo-terminal pair whose descriptors children do not inherit (an
/// inherited master would keep an "unplugged" rig alive).
pub fn pty_pair() -> (SerialStream, SerialStream) {
    use std::os::fd::AsRawFd;
    let (a, b) = SerialStream::pair().unwrap();
    for fd in [a.as_raw_fd(), b.as_raw_fd()] {
        // SAFETY: fcntl on descriptors we own; no memory is involved.
        assert_eq!(
            unsafe { libc::fcntl(fd, libc::F_SETFD, libc::FD_CLOEXEC) },
            0
        );
    }
    (a, b)
}

/// The rig: one end of a pseudo-terminal pair, the other end behind the
/// symlink `dir/rig` that a config names. The rig's end, the far end and
/// the symlink.
pub fn rig_behind_symlink(dir: &Path) -> (SerialStream, SerialStream, PathBuf) {
    let (rig, far) = pty_pair();
    let link = dir.join("rig");
    tuneward::port::pty::place_symlink(&link, Path::new(&far.name().unwrap())).unwrap();
    (rig, far, link)
}

/// Opens `path` (a symlink to a port, as another program would) at `baud`.
/// Waits (10 s at most) until a simulator has placed its pseudo-terminal's
/// symlink at `link`.
pub fn wait_symlink(link: &Path) {
    let until = Instant::now() + Duration::from_secs(10);
    while std::fs::symlink_metadata(link).is_err() {
        assert!(Instant::now() < until, "no symlink at {}", link.display());
        std::thread::sleep(Duration::from_millis(20));
    }
}

/// A JSON-lines log's lines (a simulator's truth or meter log) as they
/// are now, parsed; none while it does not exist, and a line cut short by
/// a write under way is left out.
pub fn jsonl(path: &Path) -> Vec<serde_json::Value> {
    jsonl_text(&std::fs::read_to_string(path).unwrap_or_default())
}

fn jsonl_text(text: &str) -> Vec<serde_json::Value> {
    text.lines()
        .filter_map(|l| serde_json::from_str(l).ok())
        .collect()
}

/// [`jsonl`], once `done` holds for the lines (within 5 s).
pub fn jsonl_until(
    path: &Path,
    done: impl Fn(&[serde_json::Value]) -> bool,
) -> Vec<serde_json::Value> {
    let until = Instant::now() + Duration::from_secs(5);
    loop {
        let text = std::fs::read_to_string(path).unwrap_or_default();
        let lines = jsonl_text(&text);
        if done(&lines) {
            return lines;
        }
        assert!(Instant::now() < until, "{} so far: {text}", path.display());
        std::thread::sleep(Duration::from_millis(20));
    }
}

pub fn open_port(path: &Path, baud: u32) -> SerialStream {
    SerialStream::open(&tokio_serial::new(path.to_string_lossy(), baud)).unwrap()
}

/// Exactly `n` bytes from `port`, within 5 s.
pub async fn read_exactly(port: &mut SerialStream, n: usize) -> Vec<u8> {
    let mut got = vec![0u8; n];
    tokio::time::timeout(Duration::from_secs(5), port.read_exact(&mut got))
        .await
        .expect("bytes within 5 s")
        .unwrap();
    got
}

/// The next link event, within 5 s.
pub async fn next_event(ev: &mut mpsc::Receiver<LinkEvent>) -> LinkEvent {
    tokio::time::timeout(Duration::from_secs(5), ev.recv())
        .await
        .expect("an event within 5 s")
        .expect("the task sending events alive")
}

/// Collects `n` bytes of direction `dir` from the events (skipping others).
pub async fn collect(ev: &mut mpsc::Receiver<LinkEvent>, dir: Direction, n: usize) -> Vec<u8> {
    let mut got = Vec::new();
    while got.len() < n {
        if let LinkEvent::Bytes { dir: d, bytes, .. } = next_event(ev).await {
            if d == dir {
                got.extend_from_slice(&bytes);
            }
        }
    }
    got
}

/// A child whose stderr is collected line by line.
pub struct Logged {
    pub proc: Proc,
    lines: Arc<Mutex<Vec<String>>>,
}

impl Logged {
    pub fn start(args: &[&str]) -> Logged {
        let mut child = Command::new(BIN)
            .args(args)
            .env("RUST_LOG", "info")
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        let err = child.stderr.take().unwrap();
        let lines = Arc::new(Mutex::new(Vec::new()));
        let sink = Arc::clone(&lines);
        std::thread::spawn(move || {
            for line in BufReader::new(err).lines().map_while(Result::ok) {
                eprintln!("  | {line}");
                sink.lock().unwrap().push(line);
            }
        });
        Logged {
            proc: Proc(child),
            lines,
        }
    }
    /// `tuneward run --config <config>`.
    pub fn run(config: &Path) -> Logged {
        Logged::start(&["run", "--config", config.to_str().unwrap()])
    }
    /// `tuneward capture --config <config> --out <out>` with `extra` flags.
    pub fn capture(config: &Path, out: &Path, extra: &[&str]) -> Logged {
        let args = ["capture", "--config", config.to_str().unwrap()];
        let out = ["--out", out.to_str().unwrap()];
        Logged::start(&[&args[..], &out, extra].concat())
    }
    pub fn log(&self) -> Vec<String> {
        self.lines.lock().unwrap().clone()
    }
    /// Waits (10 s at most) until a log line contains every one of `words`.
    pub fn wait_log(&self, words: &[&str]) -> String {
        self.wait_log_for(words, Duration::from_secs(10))
    }
    /// [`Logged::wait_log`], waiting `within` at most.
    pub fn wait_log_for(&self, words: &[&str], within: Duration) -> String {
        let until = Instant::now() + within;
        loop {
            if let Some(l) = self
                .log()
                .into_iter()
                .find(|l| words.iter().all(|w| l.contains(w)))
            {
                return l;
            }
            assert!(
                Instant::now() < until,
                "no log line with {words:?} in:\n{}",
                self.log().join("\n")
            );
            std::thread::sleep(Duration::from_millis(20));
        }
    }
}

/// Waits (10 s at most) until the journal on disk says `want`.
pub fn wait_journal(journal: &tuneward::journal::Journal, want: tuneward::journal::Recorded) {
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        let got = journal.load().ok().flatten();
        if got == Some(want) {
            return;
        }
        assert!(Instant::now() < until, "journal {got:?}, wanted {want:?}");
        std::thread::sleep(Duration::from_millis(10));
    }
}

/// `tuneward replay --json --start-steps 0` of `fixtures/rig/<fixture>`
/// with `protocol` on the invented 40 m calibration (100 Hz a step from
/// 7.000 MHz), a 300 ms debounce and `extra` config text appended (an
/// `[inhibit]` table, say): the timeline, one JSON value a line.
pub fn replay_fixture(protocol: &str, fixture: &str, extra: &str) -> Vec<serde_json::Value> {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("station.toml");
    std::fs::write(
        &config,
        format!(
            "[rig]\nprotocol = \"{protocol}\"\n\n[tuner]\nmin_steps = 0\nmax_steps = 3000\nsteps_per_second = 10000\nsettle_ms = 0\n\n[follow]\ndebounce_ms = 300\nhysteresis_hz = 100\njump_hz = 0\ninhibit_lead_ms = 5\ninhibit_tail_ms = 20\n{}\n{extra}",
            forty_metres(&[(7_000_000, 0), (7_300_000, 3000)])
        ),
    )
    .unwrap();
    let capture = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/rig")
        .join(fixture);
    let out = Command::new(BIN)
        .args(["replay", "--json", "--start-steps", "0", "--config"])
        .arg(&config)
        .arg(&capture)
        .output()
        .unwrap();
    assert_success(&out);
    String::from_utf8(out.stdout)
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect()
}

/// The timeline's moves: (t, hz, to).
pub fn replay_moves(tl: &[serde_json::Value]) -> Vec<(f64, i64, i64)> {
    tl.iter()
        .filter(|v| v["kind"] == "move")
        .map(|v| {
            (
                v["t"].as_f64().unwrap(),
                v["hz"].as_i64().unwrap(),
                v["to"].as_i64().unwrap(),
            )
        })
        .collect()
}

/// Checks a start-unknown fixture's replay (fixtures/rig/*-unknown-start.cap):
/// with nothing protecting the rig, the settled 7.100 MHz is held as
/// `transmit-unknown` until the first receive report at `known` s, then
/// followed (1000 steps, by hand); the over `over` is seen and moves
/// nothing; 7.150 MHz (1500 steps) follows after it. With
/// `unprotected_ok = true` written down the same 7.100 MHz goes at once,
/// before `known`: the hold was the unknown state's, not the debounce's.
pub fn assert_holds_on_unknown(protocol: &str, fixture: &str, known: f64, over: (f64, f64)) {
    let tl = replay_fixture(protocol, fixture, "");
    let moves = replay_moves(&tl);
    let targets: Vec<(i64, i64)> = moves.iter().map(|m| (m.1, m.2)).collect();
    assert_eq!(
        targets,
        vec![(7_100_000, 1000), (7_150_000, 1500)],
        "{tl:#?}"
    );
    assert!(moves[0].0 >= known, "moved while unknown: {moves:?}");
    assert!(moves[1].0 >= over.1, "moved during the over: {moves:?}");
    let holds: Vec<&serde_json::Value> = tl
        .iter()
        .filter(|v| v["kind"] == "hold" && v["reason"] == "transmit-unknown")
        .collect();
    assert_eq!(holds.len(), 1, "{tl:#?}");
    assert_eq!(holds[0]["hz"], 7_100_000);
    let held_at = holds[0]["t"].as_f64().unwrap();
    assert!(held_at < known, "{held_at}");
    // The transmission seen: on at the first TX report, off at receive.
    let txs: Vec<(f64, bool)> = tl
        .iter()
        .filter(|v| v["kind"] == "transmit")
        .map(|v| (v["t"].as_f64().unwrap(), v["on"].as_bool().unwrap()))
        .collect();
    assert!(txs.contains(&(over.0, true)), "{txs:?}");
    assert!(txs.contains(&(over.1, false)), "{txs:?}");
    let summary = tl.last().unwrap();
    assert_eq!(summary["kind"], "summary");
    assert_eq!(summary["violations"], 0, "{summary}");
    // Unprotected moves written down: nothing waits for the state.
    let tl = replay_fixture(protocol, fixture, "[inhibit]\nunprotected_ok = true\n");
    let moves = replay_moves(&tl);
    assert_eq!(moves.first().map(|m| (m.1, m.2)), Some((7_100_000, 1000)));
    assert!(moves[0].0 < known, "{moves:?}");
    assert!(
        !tl.iter().any(|v| v["reason"] == "transmit-unknown"),
        "{tl:#?}"
    );
}
