//! A controller of the tests' own that checks the rig's truth log while the
//! motor moves (the station-truth, block and probe tests share it):
//! it speaks `protocols/tuner-line.md` on loopback TCP at a fixed speed,
//! logs every `GOTO`, and records each moment the rig transmitted (by
//! `tuneward sim-rig`'s truth log, never by tuneward's account) while the
//! motor moved or a `GOTO` came.

use std::io::{BufRead, BufReader, Write};
use std::net::{TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// What the controller saw and did.
#[derive(Debug, Default)]
pub struct Motor {
    /// Every `GOTO` target, in order.
    pub gotos: Vec<i64>,
    /// When each `GOTO` arrived.
    pub goto_times: Vec<Instant>,
    /// Where the motor is (at rest) or is heading.
    pub at: i64,
    pub moving: bool,
    /// Each moment the rig transmitted while the motor moved or a `GOTO`
    /// came, described.
    pub violations: Vec<String>,
}

/// The rig's state as its truth log last said.
pub fn last_truth(path: &Path) -> Option<serde_json::Value> {
    let text = std::fs::read_to_string(path).ok()?;
    text.lines()
        .rev()
        .find_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
}

pub fn rig_transmits(truth: &Path) -> bool {
    last_truth(truth).is_some_and(|v| v["transmitting"] == true)
}

/// Starts the controller at `start` steps moving `speed` steps/s; its
/// address and its record.
pub fn controller(start: i64, speed: f64, truth: PathBuf) -> (String, Arc<Mutex<Motor>>) {
    controller_at(start, speed, truth, None)
}

/// [`controller`], also writing where the capacitor is (at rest, or on
/// its way) to `position` as `sim-tuner --position-file` does, for
/// `sim-rig --tuner-position` to read its simulated loop there.
pub fn controller_at(
    start: i64,
    speed: f64,
    truth: PathBuf,
    position: Option<PathBuf>,
) -> (String, Arc<Mutex<Motor>>) {
    if let Some(p) = &position {
        write_position(p, start as f64);
    }
    let listener = TcpListener::bind("127.0.0.1:0").unwrap();
    let addr = listener.local_addr().unwrap().to_string();
    let motor = Arc::new(Mutex::new(Motor {
        at: start,
        ..Motor::default()
    }));
    let m = Arc::clone(&motor);
    std::thread::spawn(move || {
        for conn in listener.incoming() {
            let Ok(conn) = conn else { return };
            serve(conn, speed, &m, &truth, position.as_deref());
        }
    });
    (addr, motor)
}

/// Writes `steps` to `path` whole (a temporary file renamed over it), so a
/// reader never sees half a number.
fn write_position(path: &Path, steps: f64) {
    let tmp = path.with_extension("tmp");
    std::fs::write(&tmp, format!("{steps}\n")).unwrap();
    std::fs::rename(&tmp, path).unwrap();
}

fn serve(conn: TcpStream, speed: f64, motor: &Mutex<Motor>, truth: &Path, position: Option<&Path>) {
    conn.set_read_timeout(Some(Duration::from_millis(2)))
        .unwrap();
    let mut out = conn.try_clone().unwrap();
    let mut reader = BufReader::new(conn);
    let mut line = String::new();
    let mut run: Option<(i64, i64, Instant)> = None;
    let mut written = f64::NAN;
    loop {
        if let Some(p) = position {
            let m = motor.lock().unwrap();
            let now = match run {
                Some((from, to, _)) if from == to => to as f64,
                Some((from, to, since)) => {
                    let gone = since.elapsed().as_secs_f64() * speed;
                    from as f64 + (to - from) as f64 * (gone / from.abs_diff(to) as f64).min(1.0)
                }
                None => m.at as f64,
            };
            drop(m);
            if now.round() != written {
                written = now.round();
                write_position(p, written);
            }
        }
        if let Some((from, to, since)) = run {
            let done = from.abs_diff(to) as f64 / speed;
            let mut m = motor.lock().unwrap();
            if rig_transmits(truth) {
                m.violations
                    .push(format!("moving {from}->{to} while transmitting"));
            }
            if since.elapsed().as_secs_f64() >= done {
                run = None;
                m.at = to;
                m.moving = false;
                if writeln!(out, "AT {to}").is_err() {
                    return;
                }
            }
        }
        match reader.read_line(&mut line) {
            Ok(0) => return,
            Ok(_) => {}
            Err(e)
                if matches!(
                    e.kind(),
                    std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut
                ) =>
            {
                continue
            }
            Err(_) => return,
        }
        if !line.ends_with('\n') {
            continue;
        }
        let words: Vec<String> = line.split_whitespace().map(str::to_string).collect();
        line.clear();
        let mut m = motor.lock().unwrap();
        let answer = match words.iter().map(String::as_str).collect::<Vec<_>>()[..] {
            ["WHERE"] => match run {
                Some((_, to, _)) => format!("MOVING {to}"),
                None => format!("AT {}", m.at),
            },
            ["GOTO", n] => {
                let to: i64 = n.parse().unwrap();
                if rig_transmits(truth) {
                    m.violations.push(format!("GOTO {to} while transmitting"));
                }
                m.gotos.push(to);
                m.goto_times.push(Instant::now());
                m.moving = true;
                run = Some((m.at, to, Instant::now()));
                format!("MOVING {to}")
            }
            ["STOP"] => {
                if let Some((from, to, since)) = run.take() {
                    let gone = (since.elapsed().as_secs_f64() * speed) as i64;
                    m.at = from + (to - from).clamp(-gone, gone);
                }
                m.moving = false;
                format!("AT {}", m.at)
            }
            ["ZERO", n] => {
                m.at = n.parse().unwrap();
                format!("AT {}", m.at)
            }
            _ => "ERR unknown".to_string(),
        };
        drop(m);
        if writeln!(out, "{answer}").is_err() {
            return;
        }
    }
}

/// Waits (10 s at most) until `done` holds for the motor.
pub fn wait_motor(motor: &Mutex<Motor>, what: &str, done: impl Fn(&Motor) -> bool) {
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        {
            let m = motor.lock().unwrap();
            if done(&m) {
                return;
            }
            assert!(Instant::now() < until, "{what}: {m:?}");
        }
        std::thread::sleep(Duration::from_millis(10));
    }
}

/// Waits (10 s at most) until the truth log's last line satisfies `done`.
pub fn wait_truth(truth: &Path, what: &str, done: impl Fn(&serde_json::Value) -> bool) {
    let until = Instant::now() + Duration::from_secs(10);
    loop {
        if last_truth(truth).is_some_and(|t| done(&t)) {
            return;
        }
        assert!(
            Instant::now() < until,
            "{what}: truth {:?}",
            last_truth(truth)
        );
        std::thread::sleep(Duration::from_millis(10));
    }
}
