//! Device names as the config gives them, turned into paths, and the
//! requests for the lines behind them: shared by every line that touches
//! hardware (the inhibit output, the transmit-sense input, the direct
//! step/dir drive and its switches), so none needs another.

use std::io;
use std::path::PathBuf;

/// `gpiochip0` → `/dev/gpiochip0`; a path is kept as it is.
pub fn gpio_chip_path(chip: &str) -> PathBuf {
    if chip.contains('/') {
        PathBuf::from(chip)
    } else {
        PathBuf::from("/dev").join(chip)
    }
}

/// What a GPIO request's lines are for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GpioUse {
    /// Inputs (switches, the transmit-sense line).
    Input,
    /// Outputs, set to *active* (`true`) or *inactive* at the request.
    Output { start_active: bool },
}

/// Requests `offsets` of `chip` for `consumer` (the name the kernel shows
/// for the lines). With `active_high = false` the kernel inverts every
/// level (active low). `what` names the lines in the error, e.g. "line 5"
/// or "lines 17 (step) and 27 (dir)".
#[cfg(target_os = "linux")]
pub fn request_gpio_lines(
    chip: &str,
    offsets: &[u32],
    consumer: &str,
    what: &str,
    use_: GpioUse,
    active_high: bool,
) -> io::Result<gpiocdev::Request> {
    let path = gpio_chip_path(chip);
    let mut b = gpiocdev::Request::builder();
    b.on_chip(&path).with_consumer(consumer).with_lines(offsets);
    match use_ {
        GpioUse::Input => b.as_input(),
        GpioUse::Output { start_active } => b.as_output(gpio_value(start_active)),
    };
    if active_high {
        b.as_active_high();
    } else {
        b.as_active_low();
    }
    b.request().map_err(|e| {
        let role = match use_ {
            GpioUse::Input => " as input",
            GpioUse::Output { .. } => " as output",
        };
        io::Error::other(format!(
            "cannot request GPIO {what} on {}{role}: {e}",
            path.display()
        ))
    })
}

#[cfg(target_os = "linux")]
fn gpio_value(active: bool) -> gpiocdev::line::Value {
    if active {
        gpiocdev::line::Value::Active
    } else {
        gpiocdev::line::Value::Inactive
    }
}

/// Sets line `offset` of `request` to *active* or *inactive*.
#[cfg(target_os = "linux")]
pub fn set_gpio(request: &gpiocdev::Request, offset: u32, active: bool) -> io::Result<()> {
    request
        .set_value(offset, gpio_value(active))
        .map_err(|e| io::Error::other(format!("GPIO line {offset}: {e}")))
}

/// Whether line `offset` of `request` is *active*.
#[cfg(target_os = "linux")]
pub fn gpio_active(request: &gpiocdev::Request, offset: u32) -> io::Result<bool> {
    let v = request
        .value(offset)
        .map_err(|e| io::Error::other(format!("GPIO line {offset}: {e}")))?;
    Ok(v == gpiocdev::line::Value::Active)
}

/// Opens the serial device `port` for its modem lines only (nothing is
/// sent, so the speed does not matter); `role` names it in the error
/// ("inhibit", "sense").
pub fn open_modem_port(port: &str, role: &str) -> io::Result<Box<dyn tokio_serial::SerialPort>> {
    tokio_serial::new(port, 9600)
        .open()
        .map_err(|e| io::Error::other(format!("cannot open {role} port {port}: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_chip_name_is_under_dev_and_a_path_stays() {
        assert_eq!(gpio_chip_path("gpiochip1"), PathBuf::from("/dev/gpiochip1"));
        assert_eq!(
            gpio_chip_path("/sys/x/gpiochip2"),
            PathBuf::from("/sys/x/gpiochip2")
        );
    }

    #[test]
    fn a_port_that_is_not_there_is_named_with_its_role() {
        let Err(e) = open_modem_port("/nonexistent/tty-for-a-test", "inhibit") else {
            panic!("opened a device that is not there");
        };
        let text = e.to_string();
        assert!(
            text.contains("inhibit port /nonexistent/tty-for-a-test"),
            "{text}"
        );
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn a_chip_that_is_not_there_is_named_with_the_lines() {
        let Err(e) = request_gpio_lines(
            "/nonexistent/gpiochip9",
            &[4],
            "tuneward-test",
            "line 4 (home)",
            GpioUse::Input,
            false,
        ) else {
            panic!("requested lines of a chip that is not there");
        };
        let text = e.to_string();
        assert!(
            text.contains("GPIO line 4 (home) on /nonexistent/gpiochip9 as input"),
            "{text}"
        );
    }
}
