//! The simulator's meters (pure): a simulated loop with a hidden true
//! calibration, the signal meter it gives a receiver (band noise through
//! the loop's resonance over the receiver's own floor, random scatter,
//! quantised to the family's scale) and the SWR meter while transmitting
//! (`antenna::swr_at` at the capacitor's actual position). Every reading
//! comes with its truth, for the log.
//!
//! The capacitor position is told to the simulator by its user
//! ([`SimMeters::set_position`]): tests and the `noise_peak` example drive
//! it from their simulated controller; `tuneward sim-rig --meters FILE
//! --tuner-position FILE` reads it from a file the simulated controller
//! writes (`sim-tuner --position-file`), and [`SimMetersSpec`] is the
//! `--meters` file.

use crate::antenna::{self, SmallLoop};
use crate::calibrate::StepMap;
use crate::rig::meter::MeterScale;

/// A loop tuned by a capacitor driven through the motor's travel,
/// `C = c0 + c1 · x + c2 · x²` with `x = steps + offset` (linear unless
/// `c2` is set: a gear train or a plate shape that is not), resonating with
/// the loop's inductance; `offset_steps` is the hidden error (rain,
/// temperature) the calibration does not know.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SimLoop {
    pub small_loop: SmallLoop,
    pub inductance_h: f64,
    pub c0_f: f64,
    pub c1_f_per_step: f64,
    /// The law's curvature (F per step²); 0: linear.
    pub c2_f_per_step2: f64,
    pub offset_steps: f64,
}

/// The loop as a calibration: where it resonates at each frequency (its
/// offset included), for the core, the search and bench-follow's truth.
impl StepMap for SimLoop {
    fn steps_at(&self, hz: f64) -> f64 {
        self.steps_for(hz)
    }
}

/// The demo station's loop (config/demo.toml, invented): 1 m of 22 mm
/// copper tube, the capacitance linear in the steps through two of its
/// points (7.1 MHz at step 312 420, 14.175 MHz at 66 401).
pub fn demo_station_loop() -> Option<SimLoop> {
    SimLoop::through(
        SmallLoop {
            loop_diameter_m: 1.0,
            conductor_diameter_m: 0.022,
            conductor: antenna::Conductor::Copper,
        },
        (7_100_000.0, 312_420.0),
        (14_175_000.0, 66_401.0),
    )
}

impl SimLoop {
    /// The loop whose (error-free) resonance passes through `(hz, steps)`
    /// at `a` and `b`; `None` if the two do not give a capacitance rising
    /// with the steps, or the loop has no finite inductance.
    pub fn through(small_loop: SmallLoop, a: (f64, f64), b: (f64, f64)) -> Option<SimLoop> {
        let l =
            antenna::loop_inductance_h(small_loop.loop_diameter_m, small_loop.conductor_diameter_m);
        let ca = antenna::resonating_capacitance_f(a.0, l);
        let cb = antenna::resonating_capacitance_f(b.0, l);
        let c1 = (cb - ca) / (b.1 - a.1);
        let c0 = ca - c1 * a.1;
        (l.is_finite() && c1.is_finite() && c1 > 0.0 && c0.is_finite()).then_some(SimLoop {
            small_loop,
            inductance_h: l,
            c0_f: c0,
            c1_f_per_step: c1,
            c2_f_per_step2: 0.0,
            offset_steps: 0.0,
        })
    }

    /// True resonance with the capacitor at `steps`.
    pub fn resonance_hz(&self, steps: f64) -> f64 {
        let x = steps + self.offset_steps;
        let c = self.c0_f + self.c1_f_per_step * x + self.c2_f_per_step2 * x * x;
        antenna::resonant_frequency_hz(self.inductance_h, c)
    }

    /// The true position resonating at `hz` (the root of the law nearest
    /// the linear one: `x = 2Δc / (c1 + √(c1² + 4·c2·Δc))`, which is the
    /// linear `Δc/c1` when `c2` is 0 and stays exact as it grows).
    pub fn steps_for(&self, hz: f64) -> f64 {
        let dc = antenna::resonating_capacitance_f(hz, self.inductance_h) - self.c0_f;
        let c1 = self.c1_f_per_step;
        let disc = (c1 * c1 + 4.0 * self.c2_f_per_step2 * dc).max(0.0);
        2.0 * dc / (c1 + disc.sqrt()) - self.offset_steps
    }

    /// Unloaded Q at `hz`, from the loop physics.
    pub fn q_unloaded(&self, hz: f64) -> f64 {
        self.small_loop.at(hz).q_unloaded
    }

    /// Share of the band's power the matched loop passes at `hz` with the
    /// capacitor at `steps`: `1 − |Γ|² = 1 / (1 + (Q_u δ)²)` (the same model
    /// as `antenna::swr_at`; the loaded Q is `Q_u/2`).
    pub fn response(&self, hz: f64, steps: f64) -> f64 {
        let f0 = self.resonance_hz(steps);
        let x = self.q_unloaded(hz) * (hz - f0) / f0;
        1.0 / (1.0 + x * x)
    }

    /// SWR at `hz` with the capacitor at `steps`.
    pub fn swr(&self, hz: f64, steps: f64) -> f64 {
        antenna::swr_at(hz, self.resonance_hz(steps), self.q_unloaded(hz))
    }
}

/// The band and the receiver, as the signal meter sees them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Band {
    /// The receiver's own noise floor at the meter (dBm).
    pub floor_dbm: f64,
    /// Band noise through a resonant loop (dBm); below `floor_dbm` for a
    /// quiet band.
    pub noise_dbm: f64,
    /// Rms scatter of one reading (dB, Gaussian).
    pub scatter_db: f64,
}

/// One reading and its truth.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MeterTruth {
    /// What the meter sends.
    pub raw: u16,
    /// What the raw reading means on the family's scale.
    pub value: f64,
    /// The level (dBm) or SWR without scatter or quantisation.
    pub true_value: f64,
    /// The loop's true resonance at the position (Hz).
    pub resonance_hz: f64,
    pub steps: f64,
}

/// The simulated meters.
#[derive(Debug)]
pub struct SimMeters {
    pub sim_loop: SimLoop,
    pub band: Band,
    signal_scale: MeterScale,
    swr_scale: MeterScale,
    rng: fastrand::Rng,
    steps: f64,
}

impl SimMeters {
    pub fn new(
        sim_loop: SimLoop,
        band: Band,
        signal_scale: MeterScale,
        swr_scale: MeterScale,
        seed: u64,
    ) -> SimMeters {
        SimMeters {
            sim_loop,
            band,
            signal_scale,
            swr_scale,
            rng: fastrand::Rng::with_seed(seed),
            steps: 0.0,
        }
    }

    /// Where the capacitor is now (steps).
    pub fn set_position(&mut self, steps: f64) {
        self.steps = steps;
    }

    pub fn position(&self) -> f64 {
        self.steps
    }

    /// A standard normal deviate (Box–Muller).
    fn gauss(&mut self) -> f64 {
        let u1 = self.rng.f64().max(f64::MIN_POSITIVE);
        let u2 = self.rng.f64();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }

    /// A signal-meter reading while receiving on `hz`.
    pub fn read_signal(&mut self, hz: f64) -> MeterTruth {
        let r = self.sim_loop.response(hz, self.steps);
        let mw =
            10f64.powf(self.band.floor_dbm / 10.0) + 10f64.powf(self.band.noise_dbm / 10.0) * r;
        let true_dbm = 10.0 * mw.log10();
        let read = true_dbm + self.band.scatter_db * self.gauss();
        let raw = self.signal_scale.raw(read);
        MeterTruth {
            raw,
            value: self.signal_scale.value(raw),
            true_value: true_dbm,
            resonance_hz: self.sim_loop.resonance_hz(self.steps),
            steps: self.steps,
        }
    }

    /// An SWR-meter reading while transmitting on `hz` (no scatter: the
    /// bridge reads a steady carrier).
    pub fn read_swr(&mut self, hz: f64) -> MeterTruth {
        let swr = self.sim_loop.swr(hz, self.steps);
        let raw = self.swr_scale.raw(swr);
        MeterTruth {
            raw,
            value: self.swr_scale.value(raw),
            true_value: swr,
            resonance_hz: self.sim_loop.resonance_hz(self.steps),
            steps: self.steps,
        }
    }
}

/// The simulated loop and band as `sim-rig --meters FILE` reads them (TOML
/// of our own, every key named in `protocols/sim-rig.md`): the loop's
/// size, two `[hz, steps]` points its error-free resonance passes through,
/// the hidden "rain" offset, the receiver's floor, the band noise, the
/// scatter and the seed.
#[derive(Debug, Clone, PartialEq, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimMetersSpec {
    pub loop_diameter_m: f64,
    pub conductor_diameter_m: f64,
    #[serde(default)]
    pub conductor: antenna::Conductor,
    pub through: [[f64; 2]; 2],
    #[serde(default)]
    pub rain_steps: f64,
    pub floor_dbm: f64,
    pub noise_dbm: f64,
    #[serde(default = "default_scatter_db")]
    pub scatter_db: f64,
    #[serde(default)]
    pub seed: u64,
}

fn default_scatter_db() -> f64 {
    1.0
}

impl SimMetersSpec {
    /// Reads the TOML text; `file` names errors.
    pub fn parse(text: &str, file: &str) -> Result<SimMetersSpec, crate::error::Located> {
        let spec: SimMetersSpec = toml::from_str(text).map_err(|e| {
            crate::error::Located::named(
                file.to_string(),
                "a simulated loop and band (protocols/sim-rig.md)",
                e.message().trim_end().replace('\n', " "),
            )
        })?;
        let finite = [
            spec.loop_diameter_m,
            spec.conductor_diameter_m,
            spec.rain_steps,
            spec.floor_dbm,
            spec.noise_dbm,
            spec.scatter_db,
        ]
        .iter()
        .chain(spec.through.iter().flatten())
        .all(|v| v.is_finite());
        if !finite || spec.scatter_db < 0.0 {
            return Err(crate::error::Located::named(
                file.to_string(),
                "finite numbers, scatter_db 0 or more",
                format!("{spec:?}"),
            ));
        }
        spec.sim_loop().ok_or_else(|| {
            crate::error::Located::named(
                format!("{file}: through"),
                "two points of a loop whose capacitance rises with the steps",
                format!("{:?}", spec.through),
            )
        })?;
        Ok(spec)
    }

    /// The loop, with its hidden offset.
    pub fn sim_loop(&self) -> Option<SimLoop> {
        let [[fa, sa], [fb, sb]] = self.through;
        let mut l = SimLoop::through(
            SmallLoop {
                loop_diameter_m: self.loop_diameter_m,
                conductor_diameter_m: self.conductor_diameter_m,
                conductor: self.conductor,
            },
            (fa, sa),
            (fb, sb),
        )?;
        l.offset_steps = self.rain_steps;
        Some(l)
    }

    pub fn band(&self) -> Band {
        Band {
            floor_dbm: self.floor_dbm,
            noise_dbm: self.noise_dbm,
            scatter_db: self.scatter_db,
        }
    }
}

/// One simulated noise-peak search, for the `noise_peak` example and the
/// tests: the search of [`crate::follow::peak`] against [`SimMeters`] on
/// virtual time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrialSetup {
    pub hz: f64,
    /// The hidden error of the calibration (steps).
    pub offset_steps: f64,
    pub band: Band,
    pub seed: u64,
    pub steps_per_second: f64,
    pub settle: std::time::Duration,
    /// Time for one meter read (a poll of the rig).
    pub meter_period: std::time::Duration,
    pub points: usize,
    pub reads_per_point: usize,
    pub fine_points: usize,
    pub fine_reads_per_point: usize,
}

/// What a trial gave.
#[derive(Debug, Clone, PartialEq)]
pub struct TrialResult {
    pub outcome: crate::follow::peak::PeakOutcome,
    /// Where the search left the motor.
    pub landed_steps: i64,
    /// The true position resonating at the frequency.
    pub true_steps: f64,
    /// |true resonance at the landing − frequency| (Hz).
    pub error_hz: f64,
    /// The loop's full 1.5:1 bandwidth at the frequency (Hz).
    pub bandwidth_1_5_hz: f64,
    /// Virtual time the search took (one calibration point), and the
    /// positions it read.
    pub elapsed: std::time::Duration,
    pub points: usize,
}

/// Runs one trial on `sim_loop` (its offset is set from the setup): the
/// calibration is the loop without that offset.
pub fn noise_peak_trial(
    mut sim_loop: SimLoop,
    signal_scale: MeterScale,
    swr_scale: MeterScale,
    setup: &TrialSetup,
) -> Option<TrialResult> {
    let hz = setup.hz;
    let predicted = sim_loop.steps_for(hz);
    let slope = sim_loop.steps_per_hz(hz);
    let q = sim_loop.q_unloaded(hz);
    sim_loop.offset_steps = setup.offset_steps;
    peak_trial(
        sim_loop,
        Prediction {
            steps: predicted,
            steps_per_hz: slope,
            q_unloaded: q,
        },
        signal_scale,
        swr_scale,
        setup,
    )
}

/// What the station's calibration and `[antenna]` predict at the trial's
/// frequency: where the search centres its window and how wide it is.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Prediction {
    pub steps: f64,
    pub steps_per_hz: f64,
    pub q_unloaded: f64,
}

/// One search against the true loop `sim_loop` (`setup.offset_steps` is
/// not applied: `sim_loop` is the loop as it is), centred on `predicted`,
/// the motor starting there.
pub fn peak_trial(
    sim_loop: SimLoop,
    predicted: Prediction,
    signal_scale: MeterScale,
    swr_scale: MeterScale,
    setup: &TrialSetup,
) -> Option<TrialResult> {
    use crate::follow::peak::{
        predicted_half_width_steps, PeakPlan, PeakRequest, PeakSearch, STANDARD_WINDOW_HALF_WIDTHS,
    };
    let hz = setup.hz;
    let q = sim_loop.q_unloaded(hz);
    let slope = predicted.steps_per_hz;
    let start = predicted.steps.round() as i64;
    let plan = PeakPlan {
        hz: hz.round() as u64,
        profile: "default".into(),
        start_steps: start,
        predicted_steps: start,
        half_width_steps: predicted_half_width_steps(hz, predicted.q_unloaded, slope),
        window_half_widths: STANDARD_WINDOW_HALF_WIDTHS,
        points: setup.points,
        reads_per_point: setup.reads_per_point,
        fine_points: setup.fine_points,
        fine_reads_per_point: setup.fine_reads_per_point,
        min_steps: 0,
        max_steps: i64::MAX / 4,
    };
    let mut search = PeakSearch::new(plan).ok()?;
    let mut meters = SimMeters::new(sim_loop, setup.band, signal_scale, swr_scale, setup.seed);
    meters.set_position(start as f64);
    let mut elapsed = std::time::Duration::ZERO;
    let mut req = search.start();
    let outcome = loop {
        req = match req {
            PeakRequest::Goto { steps } => {
                let d = (meters.position() as i64).abs_diff(steps);
                elapsed += crate::tuner::travel_time(
                    d,
                    setup.steps_per_second,
                    std::time::Duration::from_secs(3600),
                ) + setup.settle;
                meters.set_position(steps as f64);
                search.arrived(steps)
            }
            PeakRequest::ReadMeter => {
                elapsed += setup.meter_period;
                let r = meters.read_signal(hz);
                search.meter(r.value)
            }
            PeakRequest::Wait => return None,
            PeakRequest::Done(o) => break o,
        };
    };
    let landed = meters.position();
    Some(TrialResult {
        outcome,
        landed_steps: landed as i64,
        true_steps: sim_loop.steps_for(hz),
        error_hz: (sim_loop.resonance_hz(landed) - hz).abs(),
        bandwidth_1_5_hz: antenna::swr_bandwidth_hz(hz, q, 1.5),
        elapsed,
        points: setup.points + setup.fine_points,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::antenna::Conductor;
    use crate::rig::meter::{binary_signal_scale, binary_swr_scale};

    pub(crate) fn demo_loop() -> SimLoop {
        // An invented loop like the demo station's (config/demo.toml), on
        // a drive eight times coarser, through two points.
        SimLoop::through(
            SmallLoop {
                loop_diameter_m: 1.0,
                conductor_diameter_m: 0.022,
                conductor: Conductor::Copper,
            },
            (7_100_000.0, 39049.0),
            (14_175_000.0, 8301.0),
        )
        .unwrap()
    }

    #[test]
    fn the_loop_resonates_through_its_points_and_the_offset_moves_it() {
        let mut l = demo_loop();
        assert!((l.resonance_hz(39049.0) - 7_100_000.0).abs() < 1e-3);
        assert!((l.steps_for(14_175_000.0) - 8301.0).abs() < 1e-6);
        // More capacitance, lower frequency.
        assert!(l.resonance_hz(20000.0) < l.resonance_hz(10000.0));
        l.offset_steps = 25.0;
        assert!((l.steps_for(14_175_000.0) - 8276.0).abs() < 1e-6);
    }

    /// A curved law: `steps_for` is the inverse of `resonance_hz` (the
    /// stable root), and with the curvature at 0 it is the linear law.
    #[test]
    fn a_curved_capacitor_law_inverts_exactly() {
        let linear = demo_loop();
        let mut curved = linear;
        curved.c2_f_per_step2 = 2e-4 * linear.c1_f_per_step / 40_000.0;
        curved.offset_steps = -12.0;
        for hz in [7_000_000.0, 7_100_000.0, 10_125_000.0, 14_350_000.0] {
            let p = curved.steps_for(hz);
            assert!((curved.resonance_hz(p) - hz).abs() < 1e-3, "{hz}");
            // More capacitance per step at the top of the travel: the
            // same frequency sits lower than on the linear law.
            assert!(p < linear.steps_for(hz) + 12.0, "{hz}: {p}");
        }
        curved.c2_f_per_step2 = 0.0;
        curved.offset_steps = 0.0;
        assert_eq!(curved.steps_for(7_100_000.0), linear.steps_for(7_100_000.0));
    }

    #[test]
    fn swr_is_the_model_at_the_actual_position() {
        let l = demo_loop();
        let hz = 14_175_000.0;
        let p = l.steps_for(hz);
        let mut m = SimMeters::new(
            l,
            Band {
                floor_dbm: -115.0,
                noise_dbm: -105.0,
                scatter_db: 0.0,
            },
            binary_signal_scale(),
            binary_swr_scale(),
            1,
        );
        m.set_position(p);
        let at = m.read_swr(hz);
        assert!((at.true_value - 1.0).abs() < 1e-9);
        assert_eq!(at.raw, 0);
        // Off resonance by the 1.5:1 half-bandwidth the model reads 1.5.
        let bw = antenna::swr_bandwidth_hz(hz, l.q_unloaded(hz), 1.5);
        let f_off = hz + bw / 2.0;
        // The position resonating there.
        m.set_position(l.steps_for(f_off));
        let off = m.read_swr(hz);
        assert!((off.true_value - 1.5).abs() < 0.01, "{off:?}");
        assert_eq!(off.raw, 48);
    }

    #[test]
    fn the_signal_meter_peaks_at_resonance_over_the_floor() {
        let l = demo_loop();
        let hz = 7_100_000.0;
        let band = Band {
            floor_dbm: -115.0,
            noise_dbm: -105.0,
            scatter_db: 0.0,
        };
        let mut m = SimMeters::new(l, band, binary_signal_scale(), binary_swr_scale(), 2);
        m.set_position(l.steps_for(hz));
        let peak = m.read_signal(hz);
        // Floor and band noise add as power: 10 log10(10^-11.5 + 10^-10.5).
        assert!((peak.true_value - -104.586).abs() < 1e-3, "{peak:?}");
        // Quantised to the scale: within half a raw step (0.225 dB).
        assert!((peak.value - peak.true_value).abs() <= 0.2251);
        m.set_position(l.steps_for(hz) + 5000.0);
        let far = m.read_signal(hz);
        assert!((far.true_value - -115.0).abs() < 0.05, "{far:?}");
    }
}
