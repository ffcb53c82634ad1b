//! What the core's unit tests share: the invented straight-line
//! calibration (steps = 10 000 - (hz - 7 MHz) / 100, so 100 Hz is one step,
//! for the rules only), a millisecond helper, and the test station's
//! policy (40 m with a guard, 30 m) that each test file starts from and
//! changes where its rules need.

use super::*;

pub(super) struct Line;
impl StepMap for Line {
    fn steps_at(&self, hz: f64) -> f64 {
        10_000.0 - (hz - 7_000_000.0) / 100.0
    }
}

pub(super) fn ms(v: u64) -> Duration {
    Duration::from_millis(v)
}

/// The 40 m band (7.000 to 7.200 MHz, 10 kHz guard, 1 kHz dead band).
pub(super) fn band_40m() -> Band {
    Band {
        name: "40m".into(),
        low_hz: 7_000_000,
        high_hz: 7_200_000,
        guard_hz: 10_000,
        hysteresis_hz: 1_000,
        debounce: ms(300),
    }
}

/// Two bands, backlash 30 approached from below, a 20 ms lead and 100 ms
/// tail; a station with its inhibit wired, so moves go ahead under it while
/// the transmit state is unknown.
pub(super) fn policy() -> Policy {
    Policy {
        bands: vec![
            band_40m(),
            Band {
                name: "30m".into(),
                low_hz: 10_100_000,
                high_hz: 10_150_000,
                guard_hz: 0,
                hysteresis_hz: 500,
                debounce: ms(300),
            },
        ],
        min_steps: 0,
        max_steps: 12_000,
        backlash_steps: 30,
        approach: Approach::Up,
        debounce: ms(500),
        min_move_steps: 3,
        inhibit_lead: ms(20),
        inhibit_tail: ms(100),
        candidate_dwell: ms(5_000),
        tune_for: TuneFor::Transmit,
        while_unknown: WhileUnknown::MoveUnderInhibit,
        line_holds_commands: true,
        inhibit_until_tuned: false,
        cover_alternate: false,
        burst_gap: std::time::Duration::from_millis(100),
        inhibit_while_detuned: false,
        jump: None,
        sweep_settle: None,
    }
}
