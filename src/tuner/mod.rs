//! The tuner side: controllers that move the capacitor.
//!
//! This module itself is pure (no tokio): the link's commands and events
//! and the one travel-time rule every layer uses.
pub mod client;
pub mod gpio;
pub mod line;
pub mod ramp;
pub mod server;
pub mod sim;

use std::fmt;
use std::time::Duration;

/// Which end of the travel a switch is at: `LOW` (the lower limit's side)
/// or `HIGH`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HomeSide {
    Low,
    High,
}

impl fmt::Display for HomeSide {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            HomeSide::Low => "LOW",
            HomeSide::High => "HIGH",
        })
    }
}

/// What the service asks of the controller.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TunerCommand {
    Goto(i64),
    Where,
    Stop,
    Zero(i64),
    /// Run toward the home switch on `side` at `speed` steps/s and call the
    /// switch's position `position` (protocol version 2).
    Home {
        side: HomeSide,
        position: i64,
        speed: u32,
    },
}

/// What the controller link reports.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TunerEvent {
    /// A move was accepted (`MOVING`).
    Accepted { target: i64 },
    /// The motor is at rest here (`AT`).
    At { steps: i64 },
    /// A command was refused (by the controller or by this layer), or the
    /// controller misbehaved.
    Error { text: String },
    /// The link is down; the position is not known until `At` after `LinkUp`.
    LinkDown { reason: String },
    /// The link is up again (a `WHERE` has been sent).
    LinkUp,
    /// The rig started transmitting during a move and this layer sent
    /// `STOP`; an `At` with where the motor stopped follows.
    InterlockStop,
    /// A `HOME` was accepted (`HOMING`): the motor runs toward the switch.
    Homing,
    /// The home switch closed: at rest, the count is now `steps` (`HOMED`).
    Homed { steps: i64 },
    /// An end-stop switch closed and the motor was stopped (`LIMIT`): the
    /// count cannot be trusted.
    Limit { side: HomeSide, steps: i64 },
    /// The controller's answer to `BOOT`, asked at every connection before
    /// `WHERE`: its power-on's number, or `None` from a controller that
    /// has none (version 2 or older answers `ERR`).
    Boot { id: Option<i64> },
}

/// Time to travel `distance` steps at `steps_per_second`, at most `cap`.
///
/// The one rule for every layer that bounds or predicts a move (the
/// simulated mechanics, the controller link's arrival deadline, the
/// session's shutdown waits); each passes the cap it needs. A speed that
/// gives no finite, non-negative time (zero, negative, NaN) gives `cap`,
/// so no input makes this panic.
pub fn travel_time(distance: u64, steps_per_second: f64, cap: Duration) -> Duration {
    let secs = distance as f64 / steps_per_second;
    if secs.is_finite() && secs >= 0.0 {
        Duration::try_from_secs_f64(secs).map_or(cap, |d| d.min(cap))
    } else {
        cap
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn travel_is_distance_over_speed_within_the_cap() {
        let cap = Duration::from_secs(3600);
        // 1000 steps at 2000 steps/s: half a second (hand calculation).
        assert_eq!(travel_time(1000, 2000.0, cap), Duration::from_millis(500));
        assert_eq!(travel_time(0, 2000.0, cap), Duration::ZERO);
        // Ten million steps at one step a second is past the hour.
        assert_eq!(travel_time(10_000_000, 1.0, cap), cap);
    }

    #[test]
    fn a_speed_that_gives_no_time_gives_the_cap() {
        let cap = Duration::from_secs(7);
        assert_eq!(travel_time(10, 0.0, cap), cap);
        assert_eq!(travel_time(0, 0.0, cap), cap);
        assert_eq!(travel_time(10, -5.0, cap), cap);
        assert_eq!(travel_time(10, f64::NAN, cap), cap);
        assert_eq!(travel_time(u64::MAX, f64::MIN_POSITIVE, cap), cap);
    }
}
