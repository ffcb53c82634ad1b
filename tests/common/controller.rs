//! A stepper controller double of the tests' own: it speaks
//! `protocols/tuner-line.md` on loopback TCP, moves at a fixed speed, keeps
//! every line it received, and can be told to misbehave. It is written
//! from the protocol document, apart from the simulator it stands beside,
//! so that a test's view of "where the motor is" does not come from the
//! code under test.

use std::io::{BufRead, BufReader, Write};
use std::net::{TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// How the double misbehaves.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fault {
    /// Answers as the protocol says.
    None,
    /// Answers the next `GOTO` with `MOVING`, then ignores every line
    /// (`STOP` included) and sends nothing more, but finishes the move.
    SilentAfterGoto,
}

#[derive(Debug)]
struct Motor {
    position: i64,
    /// A move under way: from, target, started.
    moving: Option<(i64, i64, Instant)>,
    steps_per_second: f64,
    fault: Fault,
    silent: bool,
    received: Vec<String>,
}

impl Motor {
    /// Where the motor is now; finishes a move whose time is up (`true`
    /// when it has just arrived).
    fn update(&mut self) -> bool {
        let Some((from, to, start)) = self.moving else {
            return false;
        };
        let need = from.abs_diff(to) as f64 / self.steps_per_second;
        let done = start.elapsed().as_secs_f64();
        if done >= need {
            self.position = to;
            self.moving = None;
            true
        } else {
            let part = (done * self.steps_per_second) as i64;
            self.position = if to >= from { from + part } else { from - part };
            false
        }
    }

    fn answer(&mut self, line: &str) -> Option<String> {
        self.received.push(line.to_string());
        self.update();
        if self.silent {
            return None;
        }
        let mut words = line.split_whitespace();
        let number = |w: Option<&str>| w.and_then(|n| n.parse::<i64>().ok());
        Some(match words.next() {
            Some("WHERE") => match self.moving {
                Some((_, to, _)) => format!("MOVING {to}"),
                None => format!("AT {}", self.position),
            },
            Some("GOTO") => match number(words.next()) {
                Some(to) => {
                    self.moving = Some((self.position, to, Instant::now()));
                    if self.fault == Fault::SilentAfterGoto {
                        self.silent = true;
                    }
                    format!("MOVING {to}")
                }
                None => "ERR bad target".to_string(),
            },
            Some("STOP") => {
                self.moving = None;
                format!("AT {}", self.position)
            }
            Some("ZERO") => match (number(words.next()), self.moving) {
                (Some(n), None) => {
                    self.position = n;
                    format!("AT {n}")
                }
                (_, Some(_)) => "ERR moving".to_string(),
                (None, _) => "ERR bad position".to_string(),
            },
            _ => "ERR unknown".to_string(),
        })
    }
}

/// The double, listening on loopback until dropped. A new connection takes
/// over from the last one.
pub struct FaultyController {
    pub addr: String,
    motor: Arc<Mutex<Motor>>,
    stop: Arc<AtomicBool>,
}

impl FaultyController {
    pub fn start(position: i64, steps_per_second: f64, fault: Fault) -> FaultyController {
        let listener = TcpListener::bind("127.0.0.1:0").unwrap();
        let addr = listener.local_addr().unwrap().to_string();
        let motor = Arc::new(Mutex::new(Motor {
            position,
            moving: None,
            steps_per_second,
            fault,
            silent: false,
            received: Vec::new(),
        }));
        let stop = Arc::new(AtomicBool::new(false));
        let generation = Arc::new(AtomicU64::new(0));
        {
            let (motor, stop) = (Arc::clone(&motor), Arc::clone(&stop));
            std::thread::spawn(move || {
                for conn in listener.incoming() {
                    if stop.load(Ordering::SeqCst) {
                        return;
                    }
                    let Ok(conn) = conn else { continue };
                    let mine = generation.fetch_add(1, Ordering::SeqCst) + 1;
                    let (motor, stop, generation) = (
                        Arc::clone(&motor),
                        Arc::clone(&stop),
                        Arc::clone(&generation),
                    );
                    std::thread::spawn(move || {
                        serve(conn, &motor, &stop, || {
                            generation.load(Ordering::SeqCst) == mine
                        })
                    });
                }
            });
        }
        FaultyController { addr, motor, stop }
    }

    /// Where the motor really is (the double's truth).
    pub fn position(&self) -> i64 {
        let mut m = self.motor.lock().unwrap();
        m.update();
        m.position
    }

    /// The motor is at rest.
    pub fn at_rest(&self) -> bool {
        let mut m = self.motor.lock().unwrap();
        m.update();
        m.moving.is_none()
    }

    /// Every line received so far.
    pub fn received(&self) -> Vec<String> {
        self.motor.lock().unwrap().received.clone()
    }

    /// Behaves as `fault` says from now on (and speaks again if silent).
    pub fn set_fault(&self, fault: Fault) {
        let mut m = self.motor.lock().unwrap();
        m.fault = fault;
        m.silent = false;
    }
}

impl Drop for FaultyController {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::SeqCst);
        let _ = TcpStream::connect(&self.addr);
    }
}

fn serve(conn: TcpStream, motor: &Mutex<Motor>, stop: &AtomicBool, current: impl Fn() -> bool) {
    let _ = conn.set_read_timeout(Some(Duration::from_millis(5)));
    let Ok(mut out) = conn.try_clone() else {
        return;
    };
    let mut reader = BufReader::new(conn);
    let mut line = String::new();
    loop {
        if stop.load(Ordering::SeqCst) || !current() {
            return;
        }
        // An arrival is reported unless the double has gone silent.
        let arrived = {
            let mut m = motor.lock().unwrap();
            let was = m.moving.map(|(_, to, _)| to);
            (m.update() && !m.silent).then_some(was).flatten()
        };
        if let Some(to) = arrived {
            if writeln!(out, "AT {to}").is_err() {
                return;
            }
        }
        match reader.read_line(&mut line) {
            Ok(0) => return,
            Ok(_) if line.ends_with('\n') => {
                let reply = motor.lock().unwrap().answer(line.trim());
                line.clear();
                if let Some(r) = reply {
                    if writeln!(out, "{r}").is_err() {
                        return;
                    }
                }
            }
            Ok(_) => {}
            Err(e)
                if matches!(
                    e.kind(),
                    std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut
                ) => {}
            Err(_) => return,
        }
    }
}
