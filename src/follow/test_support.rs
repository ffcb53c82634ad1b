//! What the core's unit tests share: the invented straight-line
//! calibration (steps = 10 000 - (hz - 7 MHz) / 100, so 100 Hz is one step,
//! for the rules only), a millisecond helper, and the test station's
//! policy (40 m with a guard, 30 m) that each test file starts from and
//! changes where its rules need; and for the noise-peak search and the
//! calibration sweep, a core on the demo station's simulated loop with
//! its meters.

use super::*;
use crate::rig::meter::{binary_signal_scale, binary_swr_scale};
use crate::sim::meters::{demo_station_loop, Band as Noise, SimLoop, SimMeters};

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

/// The demo station's loop (`sim::meters::demo_station_loop`, invented).
pub(super) fn sim_loop() -> SimLoop {
    demo_station_loop().expect("the demo loop resonates through its points")
}

/// One half-power half-width of `l` at `hz`, in steps (`Δf = f/Q_u` for
/// the matched loop, `peak::predicted_half_width_steps`).
pub(super) fn half_width(l: &SimLoop, hz: u64) -> f64 {
    crate::sim::sweep_trial::half_width(l, hz as f64, l.q_unloaded(hz as f64))
}

/// A core on 40 m (backlash 30, travel to 400 000 steps) at the demo
/// loop's position for `hz`, calibrated by that loop, and the loop's
/// meters (binary-family scales) reading it moved by `offset_steps` (the
/// "rain" the calibration does not know), with band noise at `noise_dbm`
/// over a -115 dBm floor and 1 dB scatter; and that start position.
pub(super) fn metered_core(
    hz: u64,
    offset_steps: f64,
    noise_dbm: f64,
    seed: u64,
) -> (Follower, SimMeters, i64) {
    let base = sim_loop();
    let mut truth = base;
    truth.offset_steps = offset_steps;
    let mut p = policy();
    p.bands = vec![band_40m()];
    p.max_steps = 400_000;
    p.backlash_steps = 30;
    let start = base.steps_for(hz as f64).round() as i64;
    let core = Follower::new(p, Arc::new(base), Some(start)).with_loop(Some(base.small_loop));
    let mut meters = SimMeters::new(
        truth,
        Noise {
            floor_dbm: -115.0,
            noise_dbm,
            scatter_db: 1.0,
        },
        binary_signal_scale(),
        binary_swr_scale(),
        seed,
    );
    meters.set_position(start as f64);
    (core, meters, start)
}

/// What a metered bench records of the core's motor and inhibit actions:
/// every `Goto` and where the motor rests or heads, the inhibit, the
/// candidates offered, and the two things never allowed.
#[derive(Debug, Default)]
pub(super) struct MotorLog {
    pub inhibit: bool,
    pub gotos: Vec<i64>,
    /// A `Goto` sent with the inhibit off, or while the rig transmitted.
    pub unguarded: usize,
    pub candidates: Vec<(u64, i64)>,
    /// The inhibit went off while a search or sweep ran.
    pub released_during: bool,
    /// The motor's position and the leg under way.
    pub at: i64,
    pub heading: Option<i64>,
}

impl MotorLog {
    pub fn at(start: i64) -> MotorLog {
        MotorLog {
            at: start,
            ..MotorLog::default()
        }
    }

    /// Records `a` if it is about the motor, the inhibit or a candidate
    /// (`searching`: a search or sweep runs; `on_air`: the rig transmits),
    /// and says whether it was.
    pub fn take(&mut self, a: &Action, searching: bool, on_air: bool) -> bool {
        match *a {
            Action::Inhibit { on } => {
                if !on && searching {
                    self.released_during = true;
                }
                self.inhibit = on;
            }
            Action::Goto { steps } => {
                if !self.inhibit || on_air {
                    self.unguarded += 1;
                }
                self.gotos.push(steps);
                self.heading = Some(steps);
            }
            Action::Stop => self.heading = None,
            Action::Candidate { hz, steps, .. } => self.candidates.push((hz, steps)),
            _ => return false,
        }
        true
    }
}
