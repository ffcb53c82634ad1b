//! A stepper controller double of the tests' own: it speaks
//! `protocols/tuner-line.md` (version 2) on loopback TCP, moves at a fixed
//! speed, keeps every line it received (with when), and can be told to
//! misbehave. It is written from the protocol document, apart from the
//! simulator it stands beside, so that a test's view of "where the motor
//! is" does not come from the code under test.
//!
//! Its truth has two parts: the *count* (what it reports, and what `ZERO`
//! and `HOMED` redefine) and the *physical* position, in the frame the
//! double started in. They differ after [`FaultyController::restart`]
//! with another count, and agree again only when the host gives it the
//! right count (`ZERO`) or homes it on a switch placed where the station's
//! `home.position` says. A journal that is exact holds the physical
//! position.
//!
//! A connection that drops (the host's, or [`FaultyController::disconnect`])
//! leaves the motor moving on to the end of the move it accepted.

use std::collections::VecDeque;
use std::io::{BufRead, BufReader, Write};
use std::net::{Shutdown, TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant, SystemTime};

/// How the double misbehaves.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fault {
    /// Answers as the protocol says.
    None,
    /// Answers the next `GOTO` with `MOVING`, then ignores every line
    /// (`STOP` included) and sends nothing more, but finishes the move.
    SilentAfterGoto,
    /// The next `count` lines it sends (answers and arrivals) go `ms`
    /// milliseconds late; then it is on time again.
    Late { ms: u64, count: u32 },
    /// Every `every`-th line received is dropped unread: not acted on, not
    /// answered.
    Dropping { every: u32 },
    /// Before each line it sends, a line of noise (bytes that are no line
    /// of the protocol: control bytes, an overlong run, an unknown word),
    /// chosen by a seeded generator.
    Garbage { seed: u64 },
}

/// What the double has seen and done, for the test's invariants.
#[derive(Debug, Clone, PartialEq)]
pub struct Received {
    pub at: SystemTime,
    pub line: String,
    /// The physical position when the line came.
    pub physical: i64,
}

#[derive(Debug)]
struct Motor {
    /// The count, as reported.
    position: i64,
    /// Physical position less the count.
    offset: i64,
    /// A move under way: from, target (counts), started, homing to this
    /// count.
    moving: Option<(i64, i64, Instant, Option<i64>)>,
    steps_per_second: f64,
    fault: Fault,
    silent: bool,
    received: Vec<Received>,
    /// Lines received since the fault was set (for `Dropping`).
    heard: u32,
    /// Lines still to be sent late (for `Late`).
    late_left: u32,
    /// The home switch's physical position, if it has one.
    home_switch: Option<i64>,
    homing_speed: f64,
    noise: fastrand::Rng,
    /// Lines to send, with the connection they are for and when due: a
    /// line written while no host is connected is lost, as on a real
    /// link, and never reaches the next connection.
    outbox: VecDeque<(u64, Instant, Vec<u8>)>,
    /// The connection now being served.
    generation: u64,
    /// Its answer to `BOOT` (protocol version 3): `None` answers `ERR`,
    /// as an older controller does.
    boot: Option<i64>,
}

impl Motor {
    fn physical(&self) -> i64 {
        self.position + self.offset
    }

    /// Where the motor is now; finishes a move whose time is up, queueing
    /// its `AT` or `HOMED` unless silent.
    fn update(&mut self) {
        let Some((from, to, start, homing)) = self.moving else {
            return;
        };
        let speed = if homing.is_some() {
            self.homing_speed
        } else {
            self.steps_per_second
        };
        let need = from.abs_diff(to) as f64 / speed;
        let done = start.elapsed().as_secs_f64();
        if done >= need {
            self.position = to;
            self.moving = None;
            let line = match homing {
                Some(n) => {
                    // The count at the switch becomes the host's.
                    self.offset += self.position - n;
                    self.position = n;
                    format!("HOMED {n}")
                }
                None => format!("AT {to}"),
            };
            if !self.silent {
                self.send(line);
            }
        } else {
            let part = (done * speed) as i64;
            self.position = if to >= from { from + part } else { from - part };
        }
    }

    /// Queues a line (late, noisy, as the fault says).
    fn send(&mut self, line: String) {
        let mut due = Instant::now();
        if let Fault::Late { ms, .. } = self.fault {
            if self.late_left > 0 {
                self.late_left -= 1;
                due += Duration::from_millis(ms);
            }
        }
        if let Fault::Garbage { .. } = self.fault {
            let noise: Vec<u8> = match self.noise.u8(0..3) {
                0 => vec![0x00, 0xff, 0x07, b'#', b'\n'],
                1 => {
                    let mut v = vec![b'9'; 200];
                    v.push(b'\n');
                    v
                }
                _ => b"BEEP 12\n".to_vec(),
            };
            self.outbox.push_back((self.generation, due, noise));
        }
        let mut bytes = line.into_bytes();
        bytes.push(b'\n');
        self.outbox.push_back((self.generation, due, bytes));
    }

    fn answer(&mut self, line: &str) {
        self.update();
        self.received.push(Received {
            at: SystemTime::now(),
            line: line.to_string(),
            physical: self.physical(),
        });
        if self.silent {
            return;
        }
        if let Fault::Dropping { every } = self.fault {
            self.heard += 1;
            if every > 0 && self.heard % every == 0 {
                return;
            }
        }
        let mut words = line.split_whitespace();
        let number = |w: Option<&str>| w.and_then(|n| n.parse::<i64>().ok());
        let reply = match words.next() {
            Some("WHERE") => match self.moving {
                Some((_, _, _, Some(_))) => "HOMING".to_string(),
                Some((_, to, _, None)) => format!("MOVING {to}"),
                None => format!("AT {}", self.position),
            },
            Some("GOTO") => match number(words.next()) {
                Some(to) => {
                    self.moving = Some((self.position, to, Instant::now(), None));
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
                    self.offset += self.position - n;
                    self.position = n;
                    format!("AT {n}")
                }
                (_, Some(_)) => "ERR moving".to_string(),
                (None, _) => "ERR bad position".to_string(),
            },
            Some("BOOT") => match self.boot {
                Some(id) => format!("BOOT {id}"),
                None => "ERR unknown".to_string(),
            },
            Some("HOME") => {
                let side = words.next();
                let n = number(words.next());
                let speed = number(words.next()).filter(|s| *s > 0);
                match (self.home_switch, side, n, speed) {
                    (None, ..) => "ERR no home switch".to_string(),
                    (Some(switch), Some("LOW" | "HIGH"), Some(n), Some(speed)) => {
                        // Straight to the switch, from wherever it is.
                        let target = switch - self.offset;
                        self.homing_speed = (speed as f64).min(self.steps_per_second);
                        self.moving = Some((self.position, target, Instant::now(), Some(n)));
                        "HOMING".to_string()
                    }
                    _ => "ERR bad HOME".to_string(),
                }
            }
            _ => "ERR unknown".to_string(),
        };
        self.send(reply);
    }
}

/// The double, listening on loopback until dropped. A new connection takes
/// over from the last one.
pub struct FaultyController {
    pub addr: String,
    motor: Arc<Mutex<Motor>>,
    stop: Arc<AtomicBool>,
    generation: Arc<AtomicU64>,
}

impl FaultyController {
    pub fn start(position: i64, steps_per_second: f64, fault: Fault) -> FaultyController {
        FaultyController::with_home_switch(position, steps_per_second, fault, None)
    }

    /// A double with a home switch at the physical position `home_switch`
    /// (`None`: without, it answers `HOME` with `ERR` as version 1 does).
    pub fn with_home_switch(
        position: i64,
        steps_per_second: f64,
        fault: Fault,
        home_switch: Option<i64>,
    ) -> FaultyController {
        let listener = TcpListener::bind("127.0.0.1:0").unwrap();
        let addr = listener.local_addr().unwrap().to_string();
        let seed = match fault {
            Fault::Garbage { seed } => seed,
            _ => 0,
        };
        let motor = Arc::new(Mutex::new(Motor {
            position,
            offset: 0,
            moving: None,
            steps_per_second,
            fault,
            silent: false,
            received: Vec::new(),
            heard: 0,
            late_left: match fault {
                Fault::Late { count, .. } => count,
                _ => 0,
            },
            home_switch,
            homing_speed: steps_per_second,
            noise: fastrand::Rng::with_seed(seed),
            outbox: VecDeque::new(),
            generation: 0,
            boot: None,
        }));
        let stop = Arc::new(AtomicBool::new(false));
        let generation = Arc::new(AtomicU64::new(0));
        {
            let (motor, stop, generation) = (
                Arc::clone(&motor),
                Arc::clone(&stop),
                Arc::clone(&generation),
            );
            std::thread::spawn(move || {
                for conn in listener.incoming() {
                    if stop.load(Ordering::SeqCst) {
                        return;
                    }
                    let Ok(conn) = conn else { continue };
                    let mine = generation.fetch_add(1, Ordering::SeqCst) + 1;
                    {
                        let mut m = motor.lock().unwrap();
                        m.generation = mine;
                        m.outbox.clear();
                    }
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
        FaultyController {
            addr,
            motor,
            stop,
            generation,
        }
    }

    /// A handle on the double's truth for another thread.
    pub fn probe(&self) -> Probe {
        Probe(Arc::clone(&self.motor))
    }

    /// The count the motor is at (what it reports).
    /// Answer `BOOT` with `id` from now on (`None`: with `ERR`, as a
    /// version 2 controller does).
    #[allow(dead_code)]
    pub fn set_boot(&self, id: Option<i64>) {
        self.motor.lock().unwrap().boot = id;
    }

    pub fn position(&self) -> i64 {
        let mut m = self.motor.lock().unwrap();
        m.update();
        m.position
    }

    /// Where the motor physically is, in the frame the double started in.
    pub fn physical(&self) -> i64 {
        let mut m = self.motor.lock().unwrap();
        m.update();
        m.physical()
    }

    /// The motor is at rest.
    pub fn at_rest(&self) -> bool {
        let mut m = self.motor.lock().unwrap();
        m.update();
        m.moving.is_none()
    }

    /// Every line received so far.
    pub fn received(&self) -> Vec<String> {
        let m = self.motor.lock().unwrap();
        m.received.iter().map(|r| r.line.clone()).collect()
    }

    /// Every line received so far, with when and where the motor was.
    pub fn received_at(&self) -> Vec<Received> {
        self.motor.lock().unwrap().received.clone()
    }

    /// Behaves as `fault` says from now on (and speaks again if silent).
    pub fn set_fault(&self, fault: Fault) {
        let mut m = self.motor.lock().unwrap();
        m.fault = fault;
        m.silent = false;
        m.heard = 0;
        m.late_left = match fault {
            Fault::Late { count, .. } => count,
            _ => 0,
        };
        if let Fault::Garbage { seed } = fault {
            m.noise = fastrand::Rng::with_seed(seed);
        }
    }

    /// Drops the host's connection (a cable pulled): the motor moves on to
    /// the end of its move; lines not yet sent are lost.
    pub fn disconnect(&self) {
        let gone = self.generation.fetch_add(1, Ordering::SeqCst) + 1;
        let mut m = self.motor.lock().unwrap();
        // No one is connected until the host comes back.
        m.generation = gone;
        m.outbox.clear();
    }

    /// A power cycle: the motor stops where it is and counts from `count`
    /// (the physical position stays); the connection drops.
    pub fn restart(&self, count: i64) {
        self.disconnect();
        let mut m = self.motor.lock().unwrap();
        m.update();
        if let Some((from, to, start, _)) = m.moving.take() {
            // Stopped where it was.
            let done = (start.elapsed().as_secs_f64() * m.steps_per_second) as i64;
            let dist = from.abs_diff(to) as i64;
            m.position = if to >= from {
                from + done.min(dist)
            } else {
                from - done.min(dist)
            };
        }
        let physical = m.physical();
        // A power cycle: a controller that says its power-on says a new one.
        m.boot = m.boot.map(|b| b.wrapping_add(1));
        m.position = count;
        m.offset = physical - count;
        m.silent = false;
    }
}

/// The double's truth, shareable with a watching thread.
#[derive(Clone)]
pub struct Probe(Arc<Mutex<Motor>>);

impl Probe {
    /// The physical position and whether the motor is at rest, read at once.
    pub fn physical_at_rest(&self) -> (i64, bool) {
        let mut m = self.0.lock().unwrap();
        m.update();
        (m.physical(), m.moving.is_none())
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
            let _ = out.shutdown(Shutdown::Both);
            return;
        }
        // Arrivals, and whatever is due to be sent.
        let due: Vec<Vec<u8>> = {
            let mut m = motor.lock().unwrap();
            m.update();
            let now = Instant::now();
            let mut ready = Vec::new();
            while m.outbox.front().is_some_and(|(_, t, _)| *t <= now) {
                if let Some((g, _, bytes)) = m.outbox.pop_front() {
                    if g == m.generation {
                        ready.push(bytes);
                    }
                }
            }
            ready
        };
        for bytes in due {
            if out.write_all(&bytes).is_err() {
                return;
            }
        }
        match reader.read_line(&mut line) {
            Ok(0) => return,
            Ok(_) if line.ends_with('\n') => {
                motor.lock().unwrap().answer(line.trim());
                line.clear();
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
