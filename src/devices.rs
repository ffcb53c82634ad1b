//! Device names as the config gives them, turned into paths: shared by every
//! output that drives hardware (the inhibit line, direct step/dir drive), so
//! neither needs the other.

use std::path::PathBuf;

/// `gpiochip0` → `/dev/gpiochip0`; a path is kept as it is.
pub fn gpio_chip_path(chip: &str) -> PathBuf {
    if chip.contains('/') {
        PathBuf::from(chip)
    } else {
        PathBuf::from("/dev").join(chip)
    }
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
}
