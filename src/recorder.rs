//! `tuneward capture`: records what crosses the rig's control port into a
//! capture file (protocols/capture.md) that `tuneward replay` reads back.
//!
//! The port is opened the way the live service would open it (`[rig]`
//! `port`, framing and `mode`), so a capture shows exactly what the service
//! would have heard: in `poll` mode our own queries are recorded as `tx`,
//! in `proxy` mode both directions of the other program's conversation
//! are. The rig link's ups and downs go into the file as comments.
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
}

/// Runs `tuneward capture` on the rig port `source` (the station layer
/// makes it from `[rig]`: `station::rig_source`); `header` is the file's
/// first comment, naming the port, protocol and mode; `decoder` (the
/// station's dialect) only serves the progress line's hint when nothing the
/// rig sends is readable.
pub fn run_capture(
    source: RigSource,
    header: &str,
    decoder: Option<Box<dyn crate::rig::Decode>>,
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
        eprintln!(
            "captured {} records ({} bytes from the rig, {} to it) into {out}",
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
pub async fn record<W: Write>(
    mut events: mpsc::Receiver<LinkEvent>,
    w: &mut CaptureWriter<W>,
    duration: Option<Duration>,
    name: &str,
    mut decoder: Option<Box<dyn crate::rig::Decode>>,
    stop: impl std::future::Future<Output = ()>,
) -> Result<CaptureCounts, Located> {
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
