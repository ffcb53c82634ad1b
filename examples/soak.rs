//! A long seeded soak of the real `tuneward run` (issue 11, item 6):
//! the adversarial controller double of the tests (late, dropping,
//! garbage, disconnected, power-cycled to 0 or to a foreign count; a home
//! switch at physical 0), a rig on a pseudo-terminal with scripted faults
//! (overs, noise and cut frames before a report), and the service itself
//! stopped with SIGTERM or killed with `kill -9` now and then. The
//! invariants are the tests' (`tests/common/invariants.rs`), read from
//! outside the binary.
//!
//! ```sh
//! cargo build --release && cargo run --release --example soak -- --minutes 10 --seed 1
//! ```
//!
//! It prints the `GOTO`s, the faults injected, the recoveries (from a fault
//! to the journal exact again) and their times, the service's peak RSS,
//! its CPU while idle at the end, and the invariant violations (which must
//! be 0; the exit status is 1 otherwise).

#[allow(dead_code)]
#[path = "../tests/common/controller.rs"]
mod controller;
#[allow(dead_code)]
#[path = "../tests/common/invariants.rs"]
mod invariants;

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant, SystemTime};

use tokio::io::AsyncWriteExt;
use tokio_serial::{SerialPort, SerialStream};
use tuneward::journal::{Journal, Recorded};
use tuneward::rig::dialect::Dialect;

use controller::{Fault, FaultyController};
use invariants::{goto_violations, JournalWatch};

const LIMITS: (i64, i64) = (0, 3000);

struct Args {
    minutes: f64,
    seed: u64,
    bin: PathBuf,
}

fn args() -> Result<Args, String> {
    let mut minutes = 10.0;
    let mut seed = 1;
    let mut bin = std::env::current_exe()
        .map_err(|e| e.to_string())?
        .parent()
        .and_then(Path::parent)
        .map(|p| p.join("tuneward"))
        .ok_or("cannot find the target folder")?;
    let mut it = std::env::args().skip(1);
    while let Some(a) = it.next() {
        let mut value = || it.next().ok_or(format!("{a}: expected a value"));
        match a.as_str() {
            "--minutes" => {
                minutes = value()?
                    .parse()
                    .map_err(|_| "--minutes: expected a number")?
            }
            "--seed" => {
                seed = value()?
                    .parse()
                    .map_err(|_| "--seed: expected a whole number")?
            }
            "--bin" => bin = PathBuf::from(value()?),
            other => {
                return Err(format!(
                    "expected --minutes, --seed or --bin, found {other}"
                ))
            }
        }
    }
    if !bin.exists() {
        return Err(format!(
            "{}: not built (cargo build --release first, or --bin PATH)",
            bin.display()
        ));
    }
    Ok(Args { minutes, seed, bin })
}

fn config(dir: &Path, rig: &Path, controller: &str) -> PathBuf {
    let path = dir.join("station.toml");
    let text = format!(
        r#"
[rig]
protocol = "text-semicolon"
port = "{rig}"
baud = 38400

[tuner]
link = "tcp://{controller}"
min_steps = 0
max_steps = 3000
steps_per_second = 1000
backlash_steps = 60
approach = "up"
settle_ms = 10
state_file = "motor.state"
home = {{ switch = "controller", side = "low", position = 0, speed = 1000 }}

[follow]
debounce_ms = 30
hysteresis_hz = 100
inhibit_lead_ms = 5
inhibit_tail_ms = 20

[inhibit]
unprotected_ok = true

[calibration]
model = "interpolate"
points = [{{ hz = 7000000, steps = 0 }}, {{ hz = 7300000, steps = 3000 }}]

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7300000
guard_hz = 0
"#,
        rig = rig.display(),
    );
    std::fs::write(&path, text).expect("write the config");
    path
}

/// The service's resident set in kB and CPU ticks (user + system).
fn rss_kb(pid: u32) -> Option<u64> {
    let s = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    s.lines()
        .find(|l| l.starts_with("VmRSS:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

fn cpu_ticks(pid: u32) -> Option<u64> {
    let s = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    // After the command name's closing parenthesis: fields 3.. ; utime is
    // field 14, stime 15 (proc(5)).
    let rest = s.rsplit_once(')')?.1;
    let f: Vec<&str> = rest.split_whitespace().collect();
    Some(f.get(11)?.parse::<u64>().ok()? + f.get(12)?.parse::<u64>().ok()?)
}

struct Service {
    child: Child,
}

impl Service {
    fn start(bin: &Path, config: &Path, log: &Path) -> Service {
        let err = std::fs::File::create(log).expect("log file");
        let child = Command::new(bin)
            .args(["run", "--config", &config.to_string_lossy()])
            .env("RUST_LOG", "info")
            .stdout(Stdio::null())
            .stderr(err)
            .spawn()
            .expect("start tuneward run");
        Service { child }
    }
    fn pid(&self) -> u32 {
        self.child.id()
    }
    fn term(&mut self) -> Option<i32> {
        // SAFETY: kill(2) on our own child's pid; no memory is involved.
        unsafe { libc::kill(self.child.id() as libc::pid_t, libc::SIGTERM) };
        let until = Instant::now() + Duration::from_secs(30);
        while Instant::now() < until {
            if let Ok(Some(s)) = self.child.try_wait() {
                return s.code();
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        let _ = self.child.kill();
        let _ = self.child.wait();
        None
    }
    fn kill9(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

#[derive(Debug, Clone, Copy)]
enum Injected {
    Late,
    Dropping,
    Garbage,
    Disconnect,
    RestartZero,
    RestartForeign,
    Kill9,
    Term,
}

fn main() {
    let args = match args() {
        Ok(a) => a,
        Err(e) => {
            eprintln!("soak: {e}");
            std::process::exit(2);
        }
    };
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(1)
        .enable_all()
        .build()
        .expect("runtime");
    let code = rt.block_on(soak(args));
    std::process::exit(code);
}

async fn soak(args: Args) -> i32 {
    let mut rng = fastrand::Rng::with_seed(args.seed);
    let dir = tempfile::tempdir().expect("temp dir");
    let (mut rig, far) = SerialStream::pair().expect("pty pair");
    let link = dir.path().join("rig");
    tuneward::port::pty::place_symlink(&link, Path::new(&far.name().expect("pty name")))
        .expect("symlink");
    let ctl = FaultyController::with_home_switch(0, 1000.0, Fault::None, Some(0));
    // A controller of protocol version 3: it answers BOOT, with a new
    // number at each of its restarts.
    ctl.set_boot(Some(args.seed as i64));
    let config = config(dir.path(), &link, &ctl.addr);
    let journal = Journal::new(dir.path().join("motor.state"));
    journal.record_position(0).expect("journal");
    let dialect = Dialect::builtin("text-semicolon").expect("dialect");
    let watch = JournalWatch::start(journal.path(), ctl.probe());

    let mut logs = Vec::new();
    let mut next_log = || {
        let p = dir.path().join(format!("run{}.log", logs.len()));
        logs.push(p.clone());
        p
    };
    let mut service = Service::start(&args.bin, &config, &next_log());
    let started = Instant::now();
    let end = started + Duration::from_secs_f64(args.minutes * 60.0);
    let mut transmitting: Vec<(SystemTime, SystemTime)> = Vec::new();
    let mut injected: Vec<(Injected, Instant)> = Vec::new();
    let mut open_faults: Vec<(Injected, Instant)> = Vec::new();
    // Each recovery: the fault, its time to exact, and how many faults
    // were open together when the journal became exact (they share that
    // end, so a time may span more than one fault).
    let mut recoveries: Vec<(Injected, f64, usize)> = Vec::new();
    let mut clear_fault_at: Option<Instant> = None;
    let mut rss_peak = 0u64;
    let mut rss_first = None;
    let mut restarts = 0u32;
    let mut unclean_exits = 0u32;
    let mut next_restart = Instant::now() + Duration::from_secs(rng.u64(40..80));
    let mut retunes = 0u32;
    let mut overs = 0u32;
    let mut rig_noise = 0u32;

    while Instant::now() < end {
        // Recoveries: the journal exact (at rest at the double's physical
        // position) after a fault.
        if !open_faults.is_empty() {
            let (physical, at_rest) = ctl.probe().physical_at_rest();
            if at_rest && journal.load().ok().flatten() == Some(Recorded::Known(physical)) {
                let now = Instant::now();
                let together = open_faults.len();
                for (what, at) in open_faults.drain(..) {
                    recoveries.push((what, now.duration_since(at).as_secs_f64(), together));
                }
            }
        }
        if clear_fault_at.is_some_and(|t| Instant::now() >= t) {
            ctl.set_fault(Fault::None);
            clear_fault_at = None;
        }
        if let Some(kb) = rss_kb(service.pid()) {
            rss_peak = rss_peak.max(kb);
            if started.elapsed() > Duration::from_secs(5) {
                rss_first.get_or_insert(kb);
            }
        }
        if Instant::now() >= next_restart {
            let what = if rng.bool() {
                service.kill9();
                Injected::Kill9
            } else {
                if service.term() != Some(0) {
                    unclean_exits += 1;
                }
                Injected::Term
            };
            injected.push((what, Instant::now()));
            open_faults.push((what, Instant::now()));
            restarts += 1;
            service = Service::start(&args.bin, &config, &next_log());
            next_restart = Instant::now() + Duration::from_secs(rng.u64(40..80));
            tokio::time::sleep(Duration::from_millis(500)).await;
            continue;
        }
        let roll = rng.u32(0..100);
        if roll < 55 {
            let hz = 7_000_000 + u64::from(rng.u32(0..300)) * 1000;
            let _ = rig.write_all(&dialect.encode_frequency(hz, 0)).await;
            retunes += 1;
        } else if roll < 70 {
            let on = dialect.encode_transmit(true, 0);
            let _ = rig.write_all(&on).await;
            let from = SystemTime::now();
            tokio::time::sleep(Duration::from_millis(rng.u64(200..800))).await;
            let to = SystemTime::now();
            let _ = rig.write_all(&dialect.encode_transmit(false, 0)).await;
            transmitting.push((from, to));
            overs += 1;
        } else if roll < 80 {
            // Noise, a cut frame, then a valid report.
            let mut bytes: Vec<u8> = (0..rng.usize(1..400)).map(|_| rng.u8(..)).collect();
            bytes.extend_from_slice(b"FA0000710");
            let hz = 7_000_000 + u64::from(rng.u32(0..300)) * 1000;
            bytes.extend(dialect.encode_frequency(hz, 0));
            let _ = rig.write_all(&bytes).await;
            rig_noise += 1;
        } else if clear_fault_at.is_none() {
            let what = match rng.u32(0..6) {
                0 => {
                    ctl.set_fault(Fault::Late { ms: 1600, count: 1 });
                    Injected::Late
                }
                1 => {
                    ctl.set_fault(Fault::Dropping {
                        every: rng.u32(2..6),
                    });
                    Injected::Dropping
                }
                2 => {
                    ctl.set_fault(Fault::Garbage { seed: rng.u64(..) });
                    Injected::Garbage
                }
                3 => {
                    ctl.disconnect();
                    Injected::Disconnect
                }
                4 => {
                    ctl.restart(0);
                    Injected::RestartZero
                }
                _ => {
                    ctl.restart(rng.i64(100..2900));
                    Injected::RestartForeign
                }
            };
            injected.push((what, Instant::now()));
            open_faults.push((what, Instant::now()));
            clear_fault_at = Some(Instant::now() + Duration::from_secs(rng.u64(2..8)));
        }
        let _ = rig.flush().await;
        tokio::time::sleep(Duration::from_millis(rng.u64(600..2500))).await;
    }

    // Quiet: no faults, the rig on one frequency; then measure idle CPU.
    ctl.set_fault(Fault::None);
    let _ = rig.write_all(&dialect.encode_frequency(7_150_000, 0)).await;
    let _ = rig.flush().await;
    tokio::time::sleep(Duration::from_secs(15)).await;
    let pid = service.pid();
    let (t0, c0) = (Instant::now(), cpu_ticks(pid));
    tokio::time::sleep(Duration::from_secs(20)).await;
    let (t1, c1) = (Instant::now(), cpu_ticks(pid));
    // SAFETY: sysconf has no memory effects.
    let hz = unsafe { libc::sysconf(libc::_SC_CLK_TCK) }.max(1) as f64;
    let idle_cpu = match (c0, c1) {
        (Some(a), Some(b)) => Some((b - a) as f64 / hz / (t1 - t0).as_secs_f64() * 100.0),
        _ => None,
    };
    let rss_end = rss_kb(pid);
    {
        let (physical, at_rest) = ctl.probe().physical_at_rest();
        if at_rest && journal.load().ok().flatten() == Some(Recorded::Known(physical)) {
            let now = Instant::now();
            let together = open_faults.len();
            for (what, at) in open_faults.drain(..) {
                recoveries.push((what, now.duration_since(at).as_secs_f64(), together));
            }
        }
    }
    let last_exit = service.term();
    let (journal_wrong, samples) = watch.finish();
    let log: String = logs
        .iter()
        .map(|l| std::fs::read_to_string(l).unwrap_or_default())
        .collect::<Vec<_>>()
        .join("\n");
    let received = ctl.received_at();
    let goto_wrong = goto_violations(&received, &log, LIMITS, &transmitting);
    let gotos = received
        .iter()
        .filter(|r| r.line.starts_with("GOTO"))
        .count();
    let homes = received
        .iter()
        .filter(|r| r.line.starts_with("HOME"))
        .count();
    let zeros = received
        .iter()
        .filter(|r| r.line.starts_with("ZERO"))
        .count();

    println!(
        "soak: {:.1} min, seed {}, {} restarts of the service ({} exits not 0 on SIGTERM, last exit {:?})",
        args.minutes, args.seed, restarts, unclean_exits, last_exit
    );
    println!(
        "rig: {retunes} retunes, {overs} overs, {rig_noise} noise bursts; controller received {gotos} GOTO, {homes} HOME, {zeros} ZERO"
    );
    // Per kind of fault: its name, how many were injected, and each
    // recovery's time with the number of faults that shared its end.
    type Kind = (String, usize, Vec<(f64, usize)>);
    let mut kinds: Vec<Kind> = Vec::new();
    for (what, _) in &injected {
        let name = format!("{what:?}");
        if !kinds.iter().any(|k| k.0 == name) {
            let n = injected
                .iter()
                .filter(|(w, _)| format!("{w:?}") == name)
                .count();
            let mut times: Vec<(f64, usize)> = recoveries
                .iter()
                .filter(|(w, _, _)| format!("{w:?}") == name)
                .map(|(_, t, k)| (*t, *k))
                .collect();
            times.sort_by(|a, b| a.0.total_cmp(&b.0));
            kinds.push((name, n, times));
        }
    }
    println!(
        "faults injected: {}, recovered (journal exact again): {}, still open at the end: {}",
        injected.len(),
        recoveries.len(),
        open_faults.len()
    );
    for (name, n, times) in &kinds {
        let p = |q: f64| {
            times
                .get(((times.len() as f64 - 1.0) * q).round() as usize)
                .map_or(f64::NAN, |x| x.0)
        };
        let shared = times.last().map_or(0, |x| x.1.saturating_sub(1));
        println!(
            "  {name:<15} injected {n:>3}  recovered {:>3}  time to exact p50 {:>6.2} s  max {:>6.2} s{}",
            times.len(),
            p(0.5),
            p(1.0),
            if shared > 0 {
                format!(" (its end shared with {shared} other fault(s))")
            } else {
                String::new()
            }
        );
    }
    println!(
        "service RSS: 5 s after start {} kB, peak {} kB, at the end {} kB; CPU while idle {}",
        rss_first.unwrap_or(0),
        rss_peak,
        rss_end.unwrap_or(0),
        idle_cpu.map_or("?".to_string(), |c| format!("{c:.2} %"))
    );
    println!(
        "invariant violations: {} (GOTO checks: {}, journal checks over {} samples: {})",
        goto_wrong.len() + journal_wrong.len(),
        goto_wrong.len(),
        samples,
        journal_wrong.len()
    );
    for v in goto_wrong.iter().chain(journal_wrong.iter()).take(20) {
        println!("  {v}");
    }
    if goto_wrong.is_empty() && journal_wrong.is_empty() {
        0
    } else {
        // Keep the service's logs and the controller's record for a look.
        let kept = dir.keep();
        let record: String = received
            .iter()
            .map(|r| format!("{:?} {} physical={}\n", r.at, r.line, r.physical))
            .collect();
        let _ = std::fs::write(kept.join("controller.txt"), record);
        println!("logs kept in {}", kept.display());
        1
    }
}
