//! `tuneward probe`'s IO: the rig's port opened at each speed the probe
//! state machine ([`crate::rig::probe::Probe`]) asks for, its reads
//! written, every byte heard handed back with its time. It decides
//! nothing.

use std::time::Duration;

use tokio::io::AsyncReadExt;
use tokio::time::Instant;

use super::link::{open_port, write_all_timeout, PortSettings};
use crate::error::Located;
use crate::rig::probe::{Finding, Probe, ProbeOutput};
use crate::timing::sleep_until_opt;

/// Runs `probe` on the port `settings` names (its speed replaced by each
/// the probe asks for; modem lines as configured) until it has a finding.
pub fn probe_port(settings: &PortSettings, probe: Probe) -> Result<Finding, Located> {
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .map_err(|e| {
            Located::named(
                "the probe's runtime",
                "a started tokio runtime",
                e.to_string(),
            )
        })?;
    rt.block_on(drive(settings, probe))
}

async fn drive(settings: &PortSettings, mut probe: Probe) -> Result<Finding, Located> {
    let start = Instant::now();
    let mut port: Option<tokio_serial::SerialStream> = None;
    let mut buf = [0u8; 1024];
    loop {
        while let Some(out) = probe.poll_output(start.elapsed()) {
            match out {
                ProbeOutput::Speed(baud) => {
                    // Closed first: one owner of the port at a time.
                    drop(port.take());
                    let at = PortSettings {
                        baud,
                        ..settings.clone()
                    };
                    port = Some(open_port(&at)?.0);
                }
                ProbeOutput::Send(bytes) => {
                    if let Some(p) = port.as_mut() {
                        write_all_timeout(p, &settings.path, &bytes).await?;
                    }
                }
            }
        }
        if let Some(f) = probe.finding() {
            return Ok(f.clone());
        }
        let deadline = probe.poll_timeout().map(|d| start + d);
        tokio::select! {
            r = async {
                match port.as_mut() {
                    Some(p) => p.read(&mut buf).await,
                    None => std::future::pending().await,
                }
            } => match r {
                Ok(0) => tokio::time::sleep(Duration::from_millis(10)).await,
                Ok(n) => {
                    if let Some(chunk) = buf.get(..n) {
                        probe.handle_bytes(start.elapsed(), chunk);
                    }
                }
                Err(e) => {
                    return Err(Located::named(
                        settings.path.display().to_string(),
                        "bytes from the rig's port",
                        format!("a read error: {e}"),
                    ))
                }
            },
            _ = sleep_until_opt(deadline) => probe.handle_timeout(start.elapsed()),
        }
    }
}
