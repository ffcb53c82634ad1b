//! Invariants of issue 11, checked from outside the binary: from the
//! controller double's own record of what it received (with when, and
//! where the motor physically was), the service's log (the inhibit lines,
//! with their timestamps) and what the test itself made the rig do. None
//! of it asks the code under test what it believes.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use tuneward::journal::{Journal, Recorded};

use super::controller::{Probe, Received};

/// A log line's timestamp (the text log's RFC 3339 prefix, UTC), if any.
pub fn log_time(line: &str) -> Option<SystemTime> {
    // 2026-12-02T14:55:01.123456Z
    let stamp = line.split_whitespace().next()?;
    let stamp = stamp.strip_suffix('Z')?;
    let (date, time) = stamp.split_once('T')?;
    let mut d = date.split('-').map(|p| p.parse::<i64>().ok());
    let (y, m, day) = (d.next()??, d.next()??, d.next()??);
    let (hms, frac) = time.split_once('.').unwrap_or((time, "0"));
    let mut t = hms.split(':').map(|p| p.parse::<u64>().ok());
    let (h, min, s) = (t.next()??, t.next()??, t.next()??);
    let nanos: u64 = format!("{frac:0<9}").get(..9)?.parse().ok()?;
    // Days from the civil date (the proleptic Gregorian algorithm in
    // Howard Hinnant's "chrono-Compatible Low-Level Date Algorithms").
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + day - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    let days = era * 146_097 + doe - 719_468;
    let secs = u64::try_from(days).ok()? * 86_400 + h * 3600 + min * 60 + s;
    Some(UNIX_EPOCH + Duration::from_secs(secs) + Duration::from_nanos(nanos))
}

/// The inhibit's state over time as the log says it: each change, in order.
pub fn inhibit_changes(log: &str) -> Vec<(SystemTime, bool)> {
    log.lines()
        .filter_map(|l| {
            let on = if l.contains("transmit inhibit asserted") {
                true
            } else if l.contains("transmit inhibit released") {
                false
            } else {
                return None;
            };
            Some((log_time(l)?, on))
        })
        .collect()
}

/// How late the double may stamp a line it received (its thread reads
/// every 5 ms and shares two cores with the build): a `GOTO` sent just
/// before an over began can be stamped inside it. Common practice, no
/// source: an allowance for this machine's scheduling, not a rule of the
/// service.
pub const RECEIPT_SLACK: Duration = Duration::from_millis(50);

/// What a run broke, in words (empty: nothing).
///
/// - every `GOTO` the double received names a target within `limits`;
/// - none came while the rig transmitted (`transmitting`: the spans the
///   test keyed the rig, from its own clock; a `GOTO` stamped within
///   [`RECEIPT_SLACK`] of an over's start is given the benefit of the
///   doubt);
/// - none came without the inhibit on: the line opens asserted, so before
///   the first change in the log it is on; after that, the last change
///   before the `GOTO` must be "asserted". A `GOTO` needs its inhibit
///   asserted at least as early as the log line's stamp, which is written
///   after the line was set, so this errs on the strict side.
pub fn goto_violations(
    received: &[Received],
    log: &str,
    limits: (i64, i64),
    transmitting: &[(SystemTime, SystemTime)],
) -> Vec<String> {
    let changes = inhibit_changes(log);
    let mut out = Vec::new();
    for r in received {
        let Some(target) = r
            .line
            .strip_prefix("GOTO ")
            .and_then(|n| n.trim().parse::<i64>().ok())
        else {
            continue;
        };
        if !(limits.0..=limits.1).contains(&target) {
            out.push(format!("GOTO {target} outside {limits:?}"));
        }
        if transmitting
            .iter()
            .any(|(from, to)| *from + RECEIPT_SLACK <= r.at && r.at <= *to)
        {
            out.push(format!("GOTO {target} while the rig transmitted"));
        }
        let on = changes
            .iter()
            .rev()
            .find(|(t, _)| *t <= r.at)
            .is_none_or(|(_, on)| *on);
        if !on {
            out.push(format!("GOTO {target} with the inhibit released"));
        }
    }
    out
}

/// Watches the journal against the double's truth until dropped: whenever
/// the file says `at N`, the motor (read *before* the file, so a move
/// cannot have started in between: its intent is written before its
/// `GOTO`) must be at rest at the physical position `N`.
pub struct JournalWatch {
    stop: Arc<AtomicBool>,
    found: Arc<Mutex<Vec<String>>>,
    samples: Arc<Mutex<u64>>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl JournalWatch {
    pub fn start(journal: &std::path::Path, probe: Probe) -> JournalWatch {
        let journal = Journal::new(journal);
        let stop = Arc::new(AtomicBool::new(false));
        let found = Arc::new(Mutex::new(Vec::new()));
        let samples = Arc::new(Mutex::new(0));
        let thread = {
            let (stop, found, samples) = (stop.clone(), found.clone(), samples.clone());
            std::thread::spawn(move || {
                while !stop.load(Ordering::SeqCst) {
                    let (physical, at_rest) = probe.physical_at_rest();
                    if let Ok(Some(Recorded::Known(n))) = journal.load() {
                        *samples.lock().unwrap() += 1;
                        if !at_rest || physical != n {
                            let at = SystemTime::now()
                                .duration_since(UNIX_EPOCH)
                                .unwrap_or_default()
                                .as_secs_f64();
                            found.lock().unwrap().push(format!(
                                "journal says at {n}; the motor is {} at {physical} (unix time {at:.3})",
                                if at_rest { "at rest" } else { "moving" }
                            ));
                        }
                    }
                    std::thread::sleep(Duration::from_millis(3));
                }
            })
        };
        JournalWatch {
            stop,
            found,
            samples,
            thread: Some(thread),
        }
    }

    /// Stops watching; what it found wrong, and how many samples it took.
    pub fn finish(mut self) -> (Vec<String>, u64) {
        self.stop.store(true, Ordering::SeqCst);
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
        let found = self.found.lock().unwrap().clone();
        let n = *self.samples.lock().unwrap();
        (found, n)
    }
}

impl Drop for JournalWatch {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::SeqCst);
    }
}
