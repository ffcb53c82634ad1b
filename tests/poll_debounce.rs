//! Poll interval against debounce: a polled rig during a slow tune. The
//! default poll interval must keep a 10 s turn of the knob to one move at
//! its end; a poll slower than the debounce (which `check` refuses) gives a
//! move per poll. The core is driven by hand with the config's own policy.

use std::sync::Arc;
use std::time::Duration;

use tuneward::calibrate::StepMap;
use tuneward::config::{Config, DEFAULT_POLL_MS};
use tuneward::follow::{Action, Follower};
use tuneward::station::settings::policy_from_config;

/// Invented straight-line calibration: 100 Hz a step.
struct Line;
impl StepMap for Line {
    fn steps_at(&self, hz: f64) -> f64 {
        10_000.0 - (hz - 7_000_000.0) / 100.0
    }
}

const STATION: &str = r#"
[calibration]
points = [{ hz = 7000000, steps = 10000 }, { hz = 7200000, steps = 8000 }]
[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7200000
hysteresis_hz = 300
"#;

/// Moves made while the operator tunes from 7.050 to 7.060 MHz over 10 s,
/// seen by polls every `poll_ms`, then stays.
fn moves_for_slow_tune(poll_ms: u64) -> usize {
    let config = Config::parse(STATION, std::path::Path::new("s.toml")).unwrap();
    config.validate().unwrap();
    let policy = policy_from_config(&config, |_| None).unwrap();
    let mut core = Follower::new(policy, Arc::new(Line), Some(9_500));
    // Polling reads the transmit state too: the first answer says receive
    // (without it this station, with no inhibit line, would hold every move
    // while the transmit state is unknown).
    core.handle_transmit(Duration::ZERO, false);
    let mut moves = 0;
    let mut next_poll = 0u64;
    for t_ms in (0..15_000u64).step_by(5) {
        let now = Duration::from_millis(t_ms);
        if t_ms == next_poll {
            // The knob: 1 kHz a second for 10 s, then still.
            let hz = 7_050_000 + t_ms.min(10_000);
            core.handle_frequency(now, hz);
            next_poll += poll_ms;
        }
        if core.poll_timeout().is_some_and(|d| d <= now) {
            core.handle_timeout(now);
        }
        while let Some(a) = core.poll_action() {
            match a {
                Action::Move { .. } => moves += 1,
                // An instant controller: arrived as soon as asked.
                Action::Goto { steps } => core.handle_arrived(now, steps),
                _ => {}
            }
        }
    }
    moves
}

#[test]
fn the_default_poll_keeps_a_slow_tune_to_one_move() {
    assert_eq!(moves_for_slow_tune(DEFAULT_POLL_MS), 1);
}

#[test]
fn a_poll_slower_than_the_debounce_moves_on_every_poll() {
    // The symptom `check` now refuses: 500 ms polls against 400 ms debounce.
    assert!(moves_for_slow_tune(500) >= 10);
}
