//! `tuneward sim-rig`: [`SimRig`] on a pseudo-terminal.
//!
//! IO and timers only: bytes from the far end go to the state machine with
//! the time since start, its answers and reports go back, its truth records
//! go out as JSON lines. With a fixed port speed (`baud`), a far end opened
//! at another speed hears garbage and is not understood, as on a real port.

use std::io;
use std::path::PathBuf;
use std::time::Duration;

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::time::Instant;

use super::meters::{SimMeters, SimMetersSpec};
use super::rig::{misclocked, Script, SimOptions, SimRig};
use crate::error::Located;
use crate::port::pty::PtyLink;
use crate::rig::meter::{binary_signal_scale, binary_swr_scale, MeterKind};
use crate::rig::Dialect;
use crate::shutdown::Shutdown;
use crate::timing::sleep_until_opt;

/// What `sim-rig` was asked to do.
#[derive(Debug, Clone)]
pub struct SimRigSettings {
    pub dialect: Dialect,
    /// Where the symlink to the pseudo-terminal goes.
    pub link: PathBuf,
    /// The operator's script (None: the built-in demo script).
    pub script: Option<PathBuf>,
    /// Count the script's times from the first byte the controller sends,
    /// not from start-up.
    pub script_from_first_byte: bool,
    /// Truth log file (None: standard error).
    pub truth: Option<PathBuf>,
    /// The port speed the rig is set to (None: any).
    pub baud: Option<u32>,
    pub options: SimOptions,
    /// The simulated loop and band behind the meter reads (a TOML file,
    /// [`SimMetersSpec`]); None: meter reads are refused.
    pub meters: Option<PathBuf>,
    /// A file holding the capacitor's position in steps, read before every
    /// chunk of requests.
    pub tuner_position: Option<PathBuf>,
    /// Where the meter readings and their truth go (JSON lines).
    pub meter_truth: Option<PathBuf>,
}

/// The capacitor position in `path` (one number of steps, as
/// `sim-tuner --position-file` writes it); None while the file is missing
/// or half written.
fn read_position(path: &std::path::Path) -> Option<f64> {
    let text = std::fs::read_to_string(path).ok()?;
    text.split_whitespace()
        .next()?
        .parse::<f64>()
        .ok()
        .filter(|v| v.is_finite())
}

/// Runs the simulator until interrupted (Ctrl-C or SIGTERM).
pub fn run_sim_rig(settings: &SimRigSettings) -> Result<(), Located> {
    let script = match &settings.script {
        Some(path) => {
            let text = std::fs::read_to_string(path).map_err(|e| {
                Located::named(
                    format!("--script {}", path.display()),
                    "a script file that can be read",
                    e.to_string(),
                )
            })?;
            Script::parse(&text, &path.display().to_string())?
        }
        None => Script::demo(),
    };
    let mut truth: Box<dyn io::Write> = match &settings.truth {
        Some(path) => Box::new(std::fs::File::create(path).map_err(|e| {
            Located::named(
                format!("--truth {}", path.display()),
                "a truth log that can be created",
                e.to_string(),
            )
        })?),
        None => Box::new(io::stderr()),
    };
    let meters = match &settings.meters {
        Some(path) => {
            let name = format!("--meters {}", path.display());
            let text = std::fs::read_to_string(path).map_err(|e| {
                Located::named(
                    name.clone(),
                    "a meters file that can be read",
                    e.to_string(),
                )
            })?;
            let spec = SimMetersSpec::parse(&text, &name)?;
            let sim_loop = spec.sim_loop().ok_or_else(|| {
                Located::named(name.clone(), "a loop through its two points", "none")
            })?;
            // The dialect's own scales; a meter the dialect lacks is never
            // read, so its stand-in scale is never used.
            let d = &settings.dialect;
            let scale = |kind, fallback: fn() -> crate::rig::meter::MeterScale| {
                d.meter_scale(kind).cloned().unwrap_or_else(fallback)
            };
            Some(SimMeters::new(
                sim_loop,
                spec.band(),
                scale(MeterKind::Signal, binary_signal_scale),
                scale(MeterKind::Swr, binary_swr_scale),
                spec.seed,
            ))
        }
        None => None,
    };
    let mut meter_truth: Option<Box<dyn io::Write>> = match &settings.meter_truth {
        Some(path) => Some(Box::new(std::fs::File::create(path).map_err(|e| {
            Located::named(
                format!("--meter-truth {}", path.display()),
                "a meter truth log that can be created",
                e.to_string(),
            )
        })?)),
        None => None,
    };
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| Located::named("sim-rig", "a tokio runtime that starts", e.to_string()))?;
    rt.block_on(async move {
        let stop = crate::signals::stop_flag();
        let (pty, master) = PtyLink::create(&settings.link).map_err(|e| {
            Located::named(
                format!("--pty {}", settings.link.display()),
                "a pseudo-terminal and its symlink",
                e.to_string(),
            )
        })?;
        println!(
            "sim-rig: {} at {} ({})",
            settings.dialect.name,
            settings.link.display(),
            pty.slave_path().display()
        );
        let start = Instant::now();
        let mut rig = SimRig::new(&settings.dialect, &settings.options);
        if let Some(m) = meters {
            rig = rig.with_meters(m);
        }
        let origin = (!settings.script_from_first_byte).then_some(Duration::ZERO);
        rig.load_script(script, origin);
        let logs = Logs {
            truth: &mut truth,
            meter_truth: meter_truth.as_deref_mut(),
            tuner_position: settings.tuner_position.as_deref(),
        };
        serve(&mut rig, &pty, master, start, settings.baud, logs, stop)
            .await
            .map_err(|e| {
                Located::named(
                    format!("sim-rig on {}", settings.link.display()),
                    "the rig served until stopped",
                    e.to_string(),
                )
            })
    })
}

/// Where the rig's truth goes, and where it learns the capacitor.
struct Logs<'a> {
    truth: &'a mut dyn io::Write,
    meter_truth: Option<&'a mut (dyn io::Write + 'static)>,
    tuner_position: Option<&'a std::path::Path>,
}

async fn serve(
    rig: &mut SimRig,
    pty: &PtyLink,
    mut master: tokio_serial::SerialStream,
    start: Instant,
    baud: Option<u32>,
    logs: Logs<'_>,
    mut stop: Shutdown,
) -> io::Result<()> {
    let Logs {
        truth,
        mut meter_truth,
        tuner_position,
    } = logs;
    let mut buf = [0u8; 1024];
    let mut started = false;
    loop {
        // Asked afresh each time: the far end may change its speed whenever.
        let wrong_speed =
            |pty: &PtyLink| baud.is_some_and(|want| pty.far_end_baud().map_or(true, |b| b != want));
        if let Some(bytes) = rig.poll_output() {
            let bytes = if wrong_speed(pty) {
                misclocked(&bytes)
            } else {
                bytes
            };
            AsyncWriteExt::write_all(&mut master, &bytes).await?;
        }
        while let Some(t) = rig.poll_truth() {
            let line = serde_json::to_string(&t).map_err(io::Error::other)?;
            writeln!(truth, "{line}")?;
            truth.flush()?;
        }
        while let Some(m) = rig.poll_meter_line() {
            if let Some(log) = meter_truth.as_mut() {
                let line = serde_json::to_string(&m).map_err(io::Error::other)?;
                writeln!(log, "{line}")?;
                log.flush()?;
            }
        }
        let deadline = rig.poll_timeout().map(|d| start + d);
        tokio::select! {
            r = master.read(&mut buf) => {
                let n = r?;
                let now = start.elapsed();
                let Some(chunk) = buf.get(..n) else { continue };
                if n == 0 {
                    // Nothing open at the far end for a moment; try again.
                    tokio::time::sleep(Duration::from_millis(20)).await;
                    continue;
                }
                if !started {
                    started = true;
                    rig.start_script(now);
                }
                if wrong_speed(pty) {
                    // The rig cannot read a request at the wrong speed; its
                    // line hears noise. Nothing is understood.
                    AsyncWriteExt::write_all(&mut master, &misclocked(chunk)).await?;
                    rig.handle_timeout(now);
                } else {
                    if let Some(p) = tuner_position.and_then(read_position) {
                        rig.set_capacitor(p);
                    }
                    rig.handle_bytes(now, chunk);
                }
            }
            _ = sleep_until_opt(deadline) => rig.handle_timeout(start.elapsed()),
            _ = stop.wait() => return Ok(()),
        }
    }
}
