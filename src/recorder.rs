//! `tuneward capture`: records what crosses the rig's control port into a
//! capture file (protocols/capture.md) that `tuneward replay` reads back.
//!
//! The port is opened the way the live service would open it (`[rig]`
//! `port`, framing and `mode`), so a capture shows exactly what the service
//! would have heard: in `poll` mode our own queries are recorded as `tx`,
//! in `proxy` mode both directions of the other program's conversation
//! are. The rig link's ups and downs go into the file as comments; a
//! configured transmit-sense line's readings as `sense` records.
//!
//! It runs until `--duration` has passed or it is interrupted (Ctrl-C,
//! SIGTERM); either way the file is flushed to disk before it exits. A
//! progress line on stderr is refreshed at most once a second; it also
//! decodes what the rig says with the configured dialect and, when only
//! rejects have come for a few seconds, shows why that may be
//! ([`crate::follow::quiet`]).

use std::io::Write;
use std::path::PathBuf;
use std::time::Duration;

use tokio::sync::mpsc;
use tokio::time::Instant;

use crate::capture::CaptureWriter;
use crate::error::Located;
use crate::port::link::LinkEvent;
use crate::rig::Direction;
use crate::sense::{SenseChange, SenseInput, SenseWatch};
use crate::service::RigSource;
use crate::shutdown;
use crate::timing::sleep_until_opt;

/// What `tuneward capture` is asked to do.
#[derive(Debug, Clone)]
pub struct CaptureOptions {
    /// The capture file to write (replaced if it exists).
    pub out: PathBuf,
    /// Stop after this long; `None`: until interrupted.
    pub duration: Option<Duration>,
}

/// What a capture recorded (not to be confused with the journal's
/// [`crate::journal::Recorded`], a position record).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct CaptureCounts {
    pub records: u64,
    pub rx_bytes: u64,
    pub tx_bytes: u64,
    /// Sense-line readings recorded (`sense on|off` records).
    pub sense: u64,
}

/// Runs `tuneward capture` on the rig port `source` (the station layer
/// makes it from `[rig]`: `station::rig_source`); `header` is the file's
/// first comment, naming the port, protocol and mode; `decoder` (the
/// station's dialect) only serves the progress line's hint when nothing the
/// rig sends is readable.
///
/// With `sense` (the station's `[transmit_sense]` input, opened by the
/// station layer), its first reading and every change go into the file as
/// `sense` records, read every [`crate::sense::POLL_EVERY`].
pub fn run_capture(
    source: RigSource,
    header: &str,
    decoder: Option<Box<dyn crate::rig::Decode>>,
    sense: Option<Box<dyn SenseInput>>,
    args: &CaptureOptions,
) -> Result<CaptureCounts, Located> {
    let out = args.out.display().to_string();
    let file = std::fs::File::create(&args.out).map_err(|e| {
        Located::named(
            format!("capture file {out}"),
            "a file that can be created",
            e.to_string(),
        )
    })?;
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| Located::named("capture", "a tokio runtime that starts", e.to_string()))?;
    rt.block_on(async move {
        if let RigSource::Events(_) = source {
            return Err(Located::named(
                "capture",
                "a rig port to capture",
                "events from inside the program",
            ));
        }
        let (stop_trigger, stop) = shutdown::channel();
        let (task, rx) = source.spawn(stop)?;
        let mut w = CaptureWriter::new(std::io::BufWriter::new(file));
        w.comment(header).map_err(|e| write_failure(&out, e))?;
        let result = record(
            rx,
            &mut w,
            args.duration,
            &out,
            decoder,
            sense,
            crate::signals::interrupted(),
        )
        .await;
        stop_trigger.trigger();
        if let Some(task) = task {
            let _ = tokio::time::timeout(Duration::from_secs(3), task).await;
        }
        let flushed = w
            .flush()
            .and_then(|()| {
                w.into_inner()
                    .into_inner()
                    .map_err(|e| e.into_error())?
                    .sync_all()
            })
            .map_err(|e| {
                Located::named(
                    format!("capture file {out}"),
                    "the capture flushed to disk",
                    e.to_string(),
                )
            });
        let got = result?;
        flushed?;
        let sense = match got.sense {
            0 => String::new(),
            n => format!(" and {n} sense-line readings"),
        };
        eprintln!(
            "captured {} records ({} bytes from the rig, {} to it){sense} into {out}",
            got.records, got.rx_bytes, got.tx_bytes
        );
        Ok(got)
    })
}

/// A write to the capture file `name` that failed.
fn write_failure(name: &str, e: std::io::Error) -> Located {
    Located::named(
        format!("capture file {name}"),
        "a record written",
        e.to_string(),
    )
}

/// Writes link events into `w` until `duration` has passed, `stop`
/// resolves or the link ends. With a `decoder`, the rig's bytes are also
/// decoded, only to tell in the progress line when nothing is readable.
/// With `sense`, the sense line's readings are written as they change (a
/// failed read as `sense on`, the fail-safe reading, with a comment).
pub async fn record<W: Write>(
    mut events: mpsc::Receiver<LinkEvent>,
    w: &mut CaptureWriter<W>,
    duration: Option<Duration>,
    name: &str,
    mut decoder: Option<Box<dyn crate::rig::Decode>>,
    mut sense: Option<Box<dyn SenseInput>>,
    stop: impl std::future::Future<Output = ()>,
) -> Result<CaptureCounts, Located> {
    let mut sense_watch = SenseWatch::new();
    let mut sense_tick = tokio::time::interval(crate::sense::POLL_EVERY);
    sense_tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut quiet = crate::follow::quiet::RejectWatch::new();
    let mut decoded = Vec::new();
    let origin = Instant::now();
    let until = duration.map(|d| origin + d);
    let mut got = CaptureCounts::default();
    let mut last = Duration::ZERO;
    let mut progress =
        tokio::time::interval_at(origin + Duration::from_secs(1), Duration::from_secs(1));
    progress.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut shown = false;
    let terminal = {
        use std::io::IsTerminal;
        std::io::stderr().is_terminal()
    };
    tokio::pin!(stop);
    let io = |e: std::io::Error| write_failure(name, e);
    loop {
        tokio::select! {
            _ = &mut stop => break,
            _ = sleep_until_opt(until) => break,
            _ = sense_tick.tick(), if sense.is_some() => {
                let Some(input) = sense.as_mut() else { continue };
                let at = Instant::now();
                if let Some(change) = sense_watch.reading(input.transmitting()) {
                    let t = at.saturating_duration_since(origin).max(last);
                    last = t;
                    let on = match change {
                        SenseChange::Level(on) => on,
                        SenseChange::Failed(e) => {
                            w.comment(&format!("{:.3} s: sense line cannot be read ({e}): taken as transmitting", t.as_secs_f64())).map_err(io)?;
                            true
                        }
                    };
                    w.write_sense(t, on).map_err(io)?;
                    got.sense += 1;
                }
            }
            _ = progress.tick() => {
                let mut line = format!(
                    "capturing: {} s, {} records, {} bytes from the rig, {} to it",
                    origin.elapsed().as_secs(),
                    got.records,
                    got.rx_bytes,
                    got.tx_bytes
                );
                if let Some(hint) = quiet.hint(origin.elapsed()) {
                    line.push_str("; ");
                    line.push_str(&hint.to_string());
                }
                // One line rewritten in place on a terminal; whole lines in
                // a log file.
                if terminal {
                    eprint!("\r{line}   ");
                    shown = true;
                } else {
                    eprintln!("{line}");
                }
            }
            ev = events.recv() => match ev {
                None => break,
                Some(LinkEvent::Bytes { dir, bytes, at }) => {
                    if bytes.is_empty() {
                        continue;
                    }
                    // Chunks come in order; a clock that steps back still
                    // gives a readable file.
                    let t = at.saturating_duration_since(origin).max(last);
                    last = t;
                    w.write_record(t, dir, &bytes).map_err(io)?;
                    got.records += 1;
                    match dir {
                        Direction::Rx => got.rx_bytes += bytes.len() as u64,
                        Direction::Tx => got.tx_bytes += bytes.len() as u64,
                    }
                    if let Some(d) = decoder.as_mut() {
                        decoded.clear();
                        d.feed_at(t, dir, &bytes, &mut decoded);
                        if dir == Direction::Rx {
                            // The hint goes in the progress line (below).
                            let _ = quiet.chunk(t, bytes.len(), &decoded);
                        }
                    }
                }
                Some(LinkEvent::Up { device }) => {
                    let t = origin.elapsed().as_secs_f64();
                    w.comment(&format!("{t:.3} s: rig port open ({})", device.display())).map_err(io)?;
                }
                Some(LinkEvent::Down { reason }) => {
                    let t = origin.elapsed().as_secs_f64();
                    w.comment(&format!("{t:.3} s: rig port down: {reason}")).map_err(io)?;
                }
            },
        }
    }
    if shown {
        eprintln!();
    }
    Ok(got)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::capture::{CaptureReader, Item};
    use crate::sense::ScriptedSense;

    /// The sense line's first reading and each change land in the capture
    /// as `sense` records, between the port's bytes, in time order; a read
    /// that fails is recorded as transmitting. Paused clock: the times are
    /// virtual, exact to the poll interval.
    #[tokio::test(start_paused = true)]
    async fn sense_readings_are_recorded_as_they_change() {
        let line = ScriptedSense::new();
        line.set(true);
        let (tx, rx) = mpsc::channel(8);
        let flip = line.clone();
        let script = tokio::spawn(async move {
            tokio::time::sleep(Duration::from_millis(305)).await;
            tx.send(LinkEvent::Bytes {
                dir: Direction::Rx,
                bytes: bytes::Bytes::from_static(b"FA00007100000;"),
                at: Instant::now(),
            })
            .await
            .unwrap();
            flip.set(false);
            tokio::time::sleep(Duration::from_millis(300)).await;
            flip.set_failing(true);
            tokio::time::sleep(Duration::from_millis(300)).await;
            tx
        });
        let mut w = CaptureWriter::new(Vec::new());
        let got = record(
            rx,
            &mut w,
            Some(Duration::from_millis(1000)),
            "t.cap",
            None,
            Some(Box::new(line)),
            std::future::pending(),
        )
        .await
        .unwrap();
        drop(script.await.unwrap());
        assert_eq!((got.records, got.sense), (1, 3));
        let text = w.into_inner();
        let items: Vec<Item> = CaptureReader::new(text.as_slice(), "t.cap")
            .items()
            .map(|r| r.unwrap())
            .collect();
        let kinds: Vec<String> = items
            .iter()
            .map(|i| match i {
                Item::Sense(s) => format!("{} sense {}", s.t.as_millis(), s.on),
                Item::Bytes(r) => format!("{} bytes", r.t.as_millis()),
            })
            .collect();
        assert_eq!(
            kinds,
            [
                "0 sense true",
                "305 bytes",
                "310 sense false",
                "610 sense true"
            ],
            "{}",
            String::from_utf8_lossy(&text)
        );
        assert!(String::from_utf8_lossy(&text).contains("cannot be read"));
    }
}
