//! The transmit-inhibit output: a line that keeps the rig (or its amplifier)
//! from transmitting while the capacitor moves.
//!
//! Every kind of line sits behind [`InhibitLine`], so the service does not
//! care which one a station wired up, and tests can observe what it did
//! with [`RecordingLine`] (pseudo-terminals refuse modem-control changes,
//! so a real RTS/DTR cannot be watched in a test).
//!
//! The station layer opens the line `[inhibit]` names
//! (`crate::station::open_inhibit`); its keys:
//!
//! | key           | meaning                                                      |
//! |---------------|--------------------------------------------------------------|
//! | `line`        | `"none"` (log only, the default), `"rts"`, `"dtr"`, `"gpio"` |
//! | `port`        | serial device whose RTS or DTR is the inhibit (`rts`/`dtr`)  |
//! | `chip`        | GPIO chip, `gpiochip0` or `/dev/gpiochip0` (`gpio`)          |
//! | `offset`      | line number on that chip (`gpio`)                            |
//! | `active_high` | `true` (default): inhibit on = line asserted / high          |
//!
//! Every line is driven to *on* (inhibited) as soon as it is opened: a line
//! needs a defined level at once (opening a serial port on Linux asserts RTS
//! and DTR), and until the service has decided, the rig is held off. The
//! service releases it as soon as the position is trusted.

use std::io;
use std::sync::{Arc, Mutex};

/// An output that inhibits transmission while `on`.
pub trait InhibitLine: Send {
    /// Drives the line. An error means the station is *not* protected: the
    /// caller must not start a move after a failed `set(true)`.
    fn set(&mut self, on: bool) -> io::Result<()>;
}

/// No output: the service only logs. For stations whose rig cannot be
/// inhibited (the follow core still refuses to move while transmitting).
#[derive(Debug, Default)]
pub struct NoLine;

impl InhibitLine for NoLine {
    fn set(&mut self, on: bool) -> io::Result<()> {
        tracing::debug!(on, "transmit inhibit (no output line configured)");
        Ok(())
    }
}

/// Which modem-control signal of a serial port carries the inhibit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModemSignal {
    Rts,
    Dtr,
}

/// The two modem-control outputs of a serial port.
pub trait ModemControl: Send {
    fn write_rts(&mut self, level: bool) -> io::Result<()>;
    fn write_dtr(&mut self, level: bool) -> io::Result<()>;
    /// Whether the device has modem-control lines at all: their state can
    /// be read (a pseudo-terminal cannot even do that).
    fn has_lines(&mut self) -> bool;
}

impl ModemControl for Box<dyn tokio_serial::SerialPort> {
    fn write_rts(&mut self, level: bool) -> io::Result<()> {
        self.write_request_to_send(level).map_err(io::Error::from)
    }
    fn write_dtr(&mut self, level: bool) -> io::Result<()> {
        self.write_data_terminal_ready(level)
            .map_err(io::Error::from)
    }
    fn has_lines(&mut self) -> bool {
        self.read_clear_to_send().is_ok()
    }
}

impl ModemControl for tokio_serial::SerialStream {
    fn write_rts(&mut self, level: bool) -> io::Result<()> {
        use tokio_serial::SerialPort;
        self.write_request_to_send(level).map_err(io::Error::from)
    }
    fn write_dtr(&mut self, level: bool) -> io::Result<()> {
        use tokio_serial::SerialPort;
        self.write_data_terminal_ready(level)
            .map_err(io::Error::from)
    }
    fn has_lines(&mut self) -> bool {
        use tokio_serial::SerialPort;
        self.read_clear_to_send().is_ok()
    }
}

/// RTS or DTR of a serial port as the inhibit.
pub struct ModemLine<P: ModemControl> {
    port: P,
    signal: ModemSignal,
    active_high: bool,
}

impl<P: ModemControl> ModemLine<P> {
    /// Takes the port and drives the signal to *on* (inhibited) at once:
    /// until the service has decided, the rig is held off.
    pub fn new(port: P, signal: ModemSignal, active_high: bool) -> io::Result<ModemLine<P>> {
        let mut line = ModemLine {
            port,
            signal,
            active_high,
        };
        line.set(true)?;
        Ok(line)
    }
}

impl<P: ModemControl> InhibitLine for ModemLine<P> {
    fn set(&mut self, on: bool) -> io::Result<()> {
        let level = on == self.active_high;
        match self.signal {
            ModemSignal::Rts => self.port.write_rts(level),
            ModemSignal::Dtr => self.port.write_dtr(level),
        }
    }
}

/// Opens the serial device `port` and uses its RTS or DTR as the inhibit.
pub fn open_modem_line(
    port: &str,
    signal: ModemSignal,
    active_high: bool,
) -> io::Result<ModemLine<Box<dyn tokio_serial::SerialPort>>> {
    let tty = crate::devices::open_modem_port(port, "inhibit")?;
    ModemLine::new(tty, signal, active_high).map_err(|e| {
        io::Error::new(
            e.kind(),
            format!("cannot drive {signal:?} of inhibit port {port}: {e}"),
        )
    })
}

/// A GPIO line (Linux GPIO character device) as the inhibit.
#[cfg(target_os = "linux")]
pub struct GpioLine {
    request: gpiocdev::Request,
    offset: u32,
}

#[cfg(target_os = "linux")]
impl GpioLine {
    /// Requests `offset` on `chip` as an output, starting active (inhibited):
    /// until the service has decided, the rig is held off.
    /// With `active_high = false` the kernel inverts the level (active low).
    pub fn open(chip: &str, offset: u32, active_high: bool) -> io::Result<GpioLine> {
        use crate::devices::{request_gpio_lines, GpioUse};
        let request = request_gpio_lines(
            chip,
            &[offset],
            "tuneward-inhibit",
            &format!("line {offset}"),
            GpioUse::Output { start_active: true },
            active_high,
        )?;
        Ok(GpioLine { request, offset })
    }
}

#[cfg(target_os = "linux")]
impl InhibitLine for GpioLine {
    fn set(&mut self, on: bool) -> io::Result<()> {
        crate::devices::set_gpio(&self.request, self.offset, on)
    }
}

/// A test double: records every level it is set to, and can be told to fail.
#[derive(Debug, Clone, Default)]
pub struct RecordingLine {
    log: Arc<Mutex<Vec<bool>>>,
    fail: Arc<Mutex<bool>>,
}

impl RecordingLine {
    pub fn new() -> RecordingLine {
        RecordingLine::default()
    }

    /// Every level set so far, oldest first.
    pub fn levels(&self) -> Vec<bool> {
        self.log.lock().unwrap_or_else(|p| p.into_inner()).clone()
    }

    /// Makes later `set` calls fail (`true`) or succeed again.
    pub fn set_failing(&self, fail: bool) {
        *self.fail.lock().unwrap_or_else(|p| p.into_inner()) = fail;
    }
}

impl InhibitLine for RecordingLine {
    fn set(&mut self, on: bool) -> io::Result<()> {
        if *self.fail.lock().unwrap_or_else(|p| p.into_inner()) {
            return Err(io::Error::other("recording line told to fail"));
        }
        self.log.lock().unwrap_or_else(|p| p.into_inner()).push(on);
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Default)]
    struct Lines {
        rts: Vec<bool>,
        dtr: Vec<bool>,
    }

    impl ModemControl for Arc<Mutex<Lines>> {
        fn write_rts(&mut self, level: bool) -> io::Result<()> {
            self.lock().unwrap().rts.push(level);
            Ok(())
        }
        fn write_dtr(&mut self, level: bool) -> io::Result<()> {
            self.lock().unwrap().dtr.push(level);
            Ok(())
        }
        fn has_lines(&mut self) -> bool {
            true
        }
    }

    #[test]
    fn modem_line_starts_inhibited_and_maps_polarity() {
        let lines = Arc::new(Mutex::new(Lines::default()));
        let mut rts = ModemLine::new(lines.clone(), ModemSignal::Rts, true).unwrap();
        rts.set(true).unwrap();
        rts.set(false).unwrap();
        let mut dtr = ModemLine::new(lines.clone(), ModemSignal::Dtr, false).unwrap();
        dtr.set(true).unwrap();
        let l = lines.lock().unwrap();
        assert_eq!(l.rts, vec![true, true, false]);
        // Active low: on = low, whether at open or set.
        assert_eq!(l.dtr, vec![false, false]);
    }

    #[tokio::test]
    async fn rts_on_a_pseudo_terminal_fails_with_the_port_named() {
        use tokio_serial::SerialPort;
        let (_master, slave) = tokio_serial::SerialStream::pair().unwrap();
        let name = slave.name().unwrap();
        let e = open_modem_line(&name, ModemSignal::Rts, true)
            .err()
            .expect("a pseudo-terminal has no RTS");
        let e = e.to_string();
        assert!(e.contains(&name) && e.contains("cannot drive Rts"), "{e}");
    }

    #[test]
    fn recording_line_records_and_can_fail() {
        let rec = RecordingLine::new();
        let mut line: Box<dyn InhibitLine> = Box::new(rec.clone());
        line.set(true).unwrap();
        line.set(false).unwrap();
        rec.set_failing(true);
        assert!(line.set(true).is_err());
        assert_eq!(rec.levels(), vec![true, false]);
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn missing_gpio_chip_is_named() {
        let e = GpioLine::open("/nonexistent/gpiochip9", 4, true)
            .err()
            .unwrap();
        assert!(e.to_string().contains("/nonexistent/gpiochip9"), "{e}");
        assert_eq!(
            crate::devices::gpio_chip_path("gpiochip1"),
            std::path::PathBuf::from("/dev/gpiochip1")
        );
    }
}
