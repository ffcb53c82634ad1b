//! `tuneward probe`: the station's rig port tried at each common speed with
//! the dialect's reads only, and what was found printed with the config
//! lines to use. The decisions are the pure [`crate::rig::probe::Probe`]'s,
//! the IO [`crate::port::probe::probe_port`]'s.

use std::io::Write;
use std::time::Duration;

use super::error::Error;
use super::settings::port_settings;
use super::Station;
use crate::error::Place;
use crate::rig::probe::{config_lines, Heard, Probe};

/// Probes the rig `station` names, listening `listen` at each speed;
/// `Ok(true)` when it was found.
pub fn probe(station: &Station, listen: Duration, out: &mut dyn Write) -> Result<bool, Error> {
    let config = &station.config;
    let file = config.path_for_errors().display().to_string();
    let port = config.rig.port.clone().ok_or_else(|| {
        Error::invalid(
            Place::key(&file, "rig.port"),
            "the rig's serial device to probe",
            "none",
        )
    })?;
    let settings = port_settings(&config.rig, port).map_err(|e| e.within(&file))?;
    let dialect = station.dialect.clone();
    let p = Probe::new(dialect.clone(), config.rig.baud, config.rig.address, listen);
    let write = |out: &mut dyn Write, line: String| {
        writeln!(out, "{line}").map_err(|e| {
            Error::invalid(
                Place::Named("standard output".to_string()),
                "a writable output",
                e.to_string(),
            )
        })
    };
    let speeds: Vec<String> = p.bauds().iter().map(u32::to_string).collect();
    write(
        out,
        format!(
            "probe: {} on {}, reads only, at {} baud in turn",
            dialect.name,
            settings.path.display(),
            speeds.join(", ")
        ),
    )?;
    let finding = crate::port::probe::probe_port(&settings, p)?;
    for h in &finding.tried {
        write(out, format!("  {}", describe(h)))?;
    }
    match &finding.found {
        Some(h) => {
            let address = h
                .address
                .map(|a| format!(", address 0x{a:02X}"))
                .unwrap_or_default();
            write(out, format!("found the rig at {} baud{address}", h.baud))?;
            write(out, "config lines to use:".to_string())?;
            for line in config_lines(&dialect, h) {
                write(out, line)?;
            }
            Ok(true)
        }
        None => {
            write(
                out,
                "no speed gave a clean answer: check the cable, the rig's CAT port setting (speed, and auto-report if it has one), the parity and stop bits in [rig], and the dialect".to_string(),
            )?;
            Ok(false)
        }
    }
}

fn describe(h: &Heard) -> String {
    let hz =
        h.hz.map(|hz| format!(" (last {hz} Hz)"))
            .unwrap_or_default();
    format!(
        "{} baud: {} bytes heard, {} frequency reports{hz}, {} bytes not understood{}",
        h.baud,
        h.bytes,
        h.reports,
        h.rejected,
        if h.matches() { ": found" } else { "" }
    )
}
