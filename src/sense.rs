//! The hardware transmit-sense input: a line wired to the rig's transmit
//! ("send", amplifier-key) output, read to learn that the rig transmits
//! whoever keyed it (the operator's foot switch, a data-mode program, the
//! rig's own VOX).
//!
//! Every kind of input sits behind [`SenseInput`], read synchronously: the
//! live service polls it at a short interval ([`POLL_EVERY`]) and hands each
//! change to the session, which gives the core a
//! [`crate::follow::station::Source::SenseLine`] event. Tests use
//! [`ScriptedSense`], a double whose level they set (a pseudo-terminal has no
//! modem-status lines to read).
//!
//! The station layer opens the input `[transmit_sense]` names
//! (`crate::station::settings::open_sense`); its keys:
//!
//! | key           | meaning                                                          |
//! |---------------|------------------------------------------------------------------|
//! | `line`        | `"none"` (the default), `"cts"`, `"dsr"`, `"dcd"`, `"ri"`, `"gpio"` |
//! | `port`        | serial device whose modem-status input is read (`cts` … `ri`)    |
//! | `chip`        | GPIO chip, `gpiochip0` or `/dev/gpiochip0` (`gpio`)              |
//! | `offset`      | line number on that chip (`gpio`)                                |
//! | `active_high` | `true` (default): transmitting = input asserted / high           |
//!
//! Modem-status inputs are read with the serial library's status reads
//! (TIOCMGET on Linux); a GPIO line is requested as an input and its value
//! read. Both are polled, not waited on: one short ioctl every
//! [`POLL_EVERY`] costs nothing, works the same on every adapter, and keeps
//! one code path for both kinds.

use std::io;
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// How often the live service reads the sense input. A transmission seen
/// 10 ms late still finds every move under the inhibit (a move is inhibited
/// from `inhibit_lead_ms` before its first step); common practice for
/// polling a keying line, no source.
pub const POLL_EVERY: Duration = Duration::from_millis(10);

/// An input that says whether the rig transmits.
pub trait SenseInput: Send {
    /// Whether the rig transmits now (the configured polarity applied). An
    /// error means the line could not be read: the caller must treat the
    /// rig as possibly transmitting.
    fn transmitting(&mut self) -> io::Result<bool>;

    /// What the input is, for the log (`CTS of /dev/ttyUSB1`).
    fn describe(&self) -> String;
}

/// Which modem-status input of a serial port carries the sense.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StatusSignal {
    Cts,
    Dsr,
    Dcd,
    Ri,
}

impl StatusSignal {
    pub fn name(self) -> &'static str {
        match self {
            StatusSignal::Cts => "CTS",
            StatusSignal::Dsr => "DSR",
            StatusSignal::Dcd => "DCD",
            StatusSignal::Ri => "RI",
        }
    }
}

/// The four modem-status inputs of a serial port.
pub trait ModemStatus: Send {
    fn read(&mut self, signal: StatusSignal) -> io::Result<bool>;
}

impl ModemStatus for Box<dyn tokio_serial::SerialPort> {
    fn read(&mut self, signal: StatusSignal) -> io::Result<bool> {
        let r = match signal {
            StatusSignal::Cts => self.read_clear_to_send(),
            StatusSignal::Dsr => self.read_data_set_ready(),
            StatusSignal::Dcd => self.read_carrier_detect(),
            StatusSignal::Ri => self.read_ring_indicator(),
        };
        r.map_err(io::Error::from)
    }
}

/// A modem-status input of a serial port as the sense.
pub struct ModemSense<P: ModemStatus> {
    port: P,
    signal: StatusSignal,
    active_high: bool,
    name: String,
}

impl<P: ModemStatus> ModemSense<P> {
    /// Reads `signal` of `port` (named `name` in the log).
    pub fn new(port: P, signal: StatusSignal, active_high: bool, name: &str) -> ModemSense<P> {
        ModemSense {
            port,
            signal,
            active_high,
            name: name.to_string(),
        }
    }
}

impl<P: ModemStatus> SenseInput for ModemSense<P> {
    fn transmitting(&mut self) -> io::Result<bool> {
        Ok(self.port.read(self.signal)? == self.active_high)
    }
    fn describe(&self) -> String {
        format!("{} of {}", self.signal.name(), self.name)
    }
}

/// Opens the serial device `port` to read one of its modem-status inputs.
/// Fails, naming the port, where the device has no status lines to read (a
/// pseudo-terminal).
pub fn open_modem_sense(
    port: &str,
    signal: StatusSignal,
    active_high: bool,
) -> io::Result<ModemSense<Box<dyn tokio_serial::SerialPort>>> {
    let tty = crate::devices::open_modem_port(port, "sense")?;
    let mut sense = ModemSense::new(tty, signal, active_high, port);
    sense.transmitting().map_err(|e| {
        io::Error::new(
            e.kind(),
            format!("cannot read {} of sense port {port}: {e}", signal.name()),
        )
    })?;
    Ok(sense)
}

/// A GPIO line (Linux GPIO character device) as the sense input.
#[cfg(target_os = "linux")]
pub struct GpioSense {
    request: gpiocdev::Request,
    offset: u32,
    name: String,
}

#[cfg(target_os = "linux")]
impl GpioSense {
    /// Requests `offset` on `chip` as an input. With `active_high = false`
    /// the kernel inverts the level (active low).
    pub fn open(chip: &str, offset: u32, active_high: bool) -> io::Result<GpioSense> {
        use crate::devices::{gpio_chip_path, request_gpio_lines, GpioUse};
        let request = request_gpio_lines(
            chip,
            &[offset],
            "tuneward-sense",
            &format!("line {offset}"),
            GpioUse::Input,
            active_high,
        )?;
        Ok(GpioSense {
            request,
            offset,
            name: gpio_chip_path(chip).display().to_string(),
        })
    }
}

#[cfg(target_os = "linux")]
impl SenseInput for GpioSense {
    fn transmitting(&mut self) -> io::Result<bool> {
        crate::devices::gpio_active(&self.request, self.offset)
    }
    fn describe(&self) -> String {
        format!("GPIO {} line {}", self.name, self.offset)
    }
}

/// A test double: reads whatever level the test last set, and can be told
/// to fail. Clones share the level.
#[derive(Debug, Clone, Default)]
pub struct ScriptedSense {
    level: Arc<Mutex<(bool, bool)>>,
}

impl ScriptedSense {
    /// Reads receive until told otherwise.
    pub fn new() -> ScriptedSense {
        ScriptedSense::default()
    }

    /// The rig transmits (`true`) or receives, as the line will read.
    pub fn set(&self, transmitting: bool) {
        self.level.lock().unwrap_or_else(|p| p.into_inner()).0 = transmitting;
    }

    /// Makes later reads fail (`true`) or succeed again.
    pub fn set_failing(&self, fail: bool) {
        self.level.lock().unwrap_or_else(|p| p.into_inner()).1 = fail;
    }
}

impl SenseInput for ScriptedSense {
    fn transmitting(&mut self) -> io::Result<bool> {
        let (on, fail) = *self.level.lock().unwrap_or_else(|p| p.into_inner());
        if fail {
            return Err(io::Error::other("scripted sense line told to fail"));
        }
        Ok(on)
    }
    fn describe(&self) -> String {
        "a scripted sense line".to_string()
    }
}

/// What a run of readings says, change by change: the first reading, each
/// change, and a failed read taken as "transmitting" (fail-safe) until the
/// line reads again. Kept apart from the timer so it can be tested alone.
#[derive(Debug, Default)]
pub struct SenseWatch {
    last: Option<bool>,
    failing: bool,
}

/// A reading worth telling the core.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum SenseChange {
    /// The line reads transmitting (`true`) or receive.
    Level(bool),
    /// The line could not be read: taken as transmitting.
    Failed(String),
}

impl SenseWatch {
    pub fn new() -> SenseWatch {
        SenseWatch::default()
    }

    /// One reading; `Some` when it changes what the core was told.
    pub fn reading(&mut self, r: io::Result<bool>) -> Option<SenseChange> {
        match r {
            Ok(on) => {
                let changed = self.failing || self.last != Some(on);
                self.failing = false;
                self.last = Some(on);
                changed.then_some(SenseChange::Level(on))
            }
            Err(e) => {
                if self.failing {
                    return None;
                }
                self.failing = true;
                self.last = Some(true);
                Some(SenseChange::Failed(e.to_string()))
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Status(bool);
    impl ModemStatus for Arc<Mutex<Status>> {
        fn read(&mut self, signal: StatusSignal) -> io::Result<bool> {
            assert_eq!(signal, StatusSignal::Dsr);
            Ok(self.lock().unwrap().0)
        }
    }

    #[test]
    fn modem_sense_maps_polarity() {
        let s = Arc::new(Mutex::new(Status(true)));
        let mut high = ModemSense::new(s.clone(), StatusSignal::Dsr, true, "/dev/x");
        let mut low = ModemSense::new(s.clone(), StatusSignal::Dsr, false, "/dev/x");
        assert!(high.transmitting().unwrap());
        assert!(!low.transmitting().unwrap());
        s.lock().unwrap().0 = false;
        assert!(!high.transmitting().unwrap());
        assert!(low.transmitting().unwrap());
        assert_eq!(high.describe(), "DSR of /dev/x");
    }

    #[test]
    fn the_watch_tells_changes_and_fails_safe() {
        let mut w = SenseWatch::new();
        assert_eq!(w.reading(Ok(false)), Some(SenseChange::Level(false)));
        assert_eq!(w.reading(Ok(false)), None);
        assert_eq!(w.reading(Ok(true)), Some(SenseChange::Level(true)));
        assert_eq!(w.reading(Ok(true)), None);
        assert_eq!(w.reading(Ok(false)), Some(SenseChange::Level(false)));
        let failed = w.reading(Err(io::Error::other("gone")));
        assert_eq!(failed, Some(SenseChange::Failed("gone".into())));
        assert_eq!(w.reading(Err(io::Error::other("gone"))), None);
        // Back: the reading is told again even if it matches the last.
        assert_eq!(w.reading(Ok(false)), Some(SenseChange::Level(false)));
    }

    #[tokio::test]
    async fn a_pseudo_terminal_has_no_status_lines_and_says_so() {
        use tokio_serial::SerialPort;
        let (_master, slave) = tokio_serial::SerialStream::pair().unwrap();
        let name = slave.name().unwrap();
        let e = open_modem_sense(&name, StatusSignal::Cts, true)
            .err()
            .expect("a pseudo-terminal has no CTS to read");
        let e = e.to_string();
        assert!(e.contains(&name) && e.contains("cannot read CTS"), "{e}");
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn missing_gpio_chip_is_named() {
        let e = GpioSense::open("/nonexistent/gpiochip9", 4, true)
            .err()
            .unwrap();
        assert!(e.to_string().contains("/nonexistent/gpiochip9"), "{e}");
    }
}
