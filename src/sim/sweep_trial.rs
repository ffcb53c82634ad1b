//! A calibration made by the sweep alone, judged on the loop it was made
//! on: `cargo run --release --example sweep_calibration`.
//!
//! A trial invents a loop the code has not seen ([`unseen_loop`]): another
//! geometry, another capacitor law (its two anchors moved, a curvature the
//! physics model does not have, a rain offset), near enough to the
//! station's old calibration that a search window centred on its
//! prediction holds the resonance (the search looks four half-widths either
//! side; the invented loops stay within about two). The sweep is then
//! simulated as `ctl calibrate` runs it: at each band's
//! [`crate::follow::sweep::sweep_points`], the standard noise-peak search
//! ([`crate::sim::meters::peak_trial`], the plan `ctl peak` runs) centred on
//! the old calibration's prediction, with the signal meter read from the
//! unseen loop. Only the sweep's candidates make the new calibration (the
//! station's model, fitted to them alone); bench-follow then replays the
//! invented evenings with the station following through it while the SWR
//! is worked out from the unseen loop itself
//! ([`crate::quality::bench_follow_against`]).

use std::time::Duration;

use crate::antenna::{Conductor, SmallLoop};
use crate::calibrate::StepMap;
use crate::config::PointConfig;
use crate::follow::peak::{PeakOutcome, STANDARD_PASSES};
use crate::follow::sweep::{sweep_points, SWEEP_POINTS};
use crate::quality::{bench_follow_against, BenchOptions, BenchReport, Truth};
use crate::rig::meter::{binary_signal_scale, binary_swr_scale};
use crate::sim::meters::{peak_trial, Band, Prediction, SimLoop, TrialSetup};
use crate::station::{Station, StationError};

/// The frequencies a loop's two anchors are moved at.
const ANCHORS: [f64; 2] = [7_100_000.0, 14_175_000.0];

/// One half-power half-width at `hz` in steps, for a calibration `map` and
/// a loop of unloaded Q `q`.
pub fn half_width(map: &dyn StepMap, hz: f64, q: f64) -> f64 {
    crate::follow::peak::predicted_half_width_steps(hz, q, map.steps_per_hz(hz))
}

/// An invented loop the code has not seen, near the station's calibration
/// `old` (described by `physics`): a diameter of 0.9-1.1 m of 18-26 mm
/// copper tube; the capacitor law through the old calibration's positions
/// at 7.1 and 14.175 MHz, each moved by up to one half-width; a curvature
/// moving the 40 m positions by up to about 0.7 of a half-width; and a
/// rain offset of up to half a 20 m half-width. Every size is ours
/// (invented, no source); `None` if the draw gives no resonating law.
pub fn unseen_loop(seed: u64, old: &dyn StepMap, physics: SmallLoop) -> Option<SimLoop> {
    let mut rng = fastrand::Rng::with_seed(seed);
    let mut sym = |r: f64| (rng.f64() * 2.0 - 1.0) * r;
    let geometry = SmallLoop {
        loop_diameter_m: 1.0 + sym(0.1),
        conductor_diameter_m: 0.022 + sym(0.004),
        conductor: Conductor::Copper,
    };
    let moved =
        |hz: f64, by: f64| old.steps_at(hz) + by * half_width(old, hz, physics.at(hz).q_unloaded);
    let (da, db, k, rain) = (sym(1.0), sym(1.0), sym(0.001), sym(0.5));
    let mut l = SimLoop::through(
        geometry,
        (ANCHORS[0], moved(ANCHORS[0], da)),
        (ANCHORS[1], moved(ANCHORS[1], db)),
    )?;
    let x40 = l.steps_for(ANCHORS[0]);
    l.c2_f_per_step2 = k * l.c1_f_per_step / x40;
    l.offset_steps = rain * half_width(old, ANCHORS[1], physics.at(ANCHORS[1]).q_unloaded);
    l.steps_for(ANCHORS[0]).is_finite().then_some(l)
}

/// One sweep-made calibration and how following through it went.
#[derive(Debug)]
pub struct SweepTrial {
    pub seed: u64,
    /// The sweep's candidates (frequency, steps).
    pub found: Vec<(u64, i64)>,
    /// Points without a clear peak.
    pub missed: Vec<u64>,
    /// The old calibration's largest error at a sweep point, in
    /// half-widths (what the search's window had to hold).
    pub old_error_half_widths: f64,
    /// The new calibration's largest error at a sweep point's frequency
    /// and at each band's edges, in Hz of resonance.
    pub new_error_hz: f64,
    /// Time the simulated sweep took (every point, at the station's motor
    /// speed and settle, a meter read per 50 ms).
    pub sweep_time: Duration,
    /// bench-follow through the sweep's calibration.
    pub report: BenchReport,
    /// The same through a calibration of the loop's exact positions at the
    /// same frequencies (a perfect sweep): what the policy itself gives on
    /// this loop, for comparison.
    pub exact_report: BenchReport,
    /// How the model was fitted to the sweep's points.
    pub calibration: String,
}

/// Runs one trial: the unseen loop of `seed`, the sweep over every band of
/// `station`, the calibration from the sweep's candidates alone, and
/// bench-follow with `options` against the loop itself.
pub fn sweep_trial(
    station: &Station,
    seed: u64,
    options: &BenchOptions,
) -> Result<Option<SweepTrial>, StationError> {
    let Some(physics) = SmallLoop::from_config(&station.config.antenna) else {
        return Ok(None);
    };
    let old = station.map.as_ref();
    let Some(truth) = unseen_loop(seed, old, physics) else {
        return Ok(None);
    };
    let mech = station.sim_params();
    let [points, reads_per_point, fine_points, fine_reads_per_point] = STANDARD_PASSES;
    let mut found = Vec::new();
    let mut missed = Vec::new();
    let mut old_error: f64 = 0.0;
    let mut sweep_time = Duration::ZERO;
    for (i, band) in station.policy.bands.iter().enumerate() {
        for (j, hz) in sweep_points(band.low_hz, band.high_hz, SWEEP_POINTS)
            .into_iter()
            .enumerate()
        {
            let f = hz as f64;
            let q = physics.at(f).q_unloaded;
            let slope = old.steps_per_hz(f);
            let predicted = old.steps_at(f);
            let half = crate::follow::peak::predicted_half_width_steps(f, q, slope);
            old_error = old_error.max((truth.steps_for(f) - predicted).abs() / half);
            let setup = TrialSetup {
                hz: f,
                offset_steps: 0.0,
                // Band noise 10 dB over the receiver's floor, 1 dB rms
                // scatter: the benchmark condition.
                band: Band {
                    floor_dbm: -115.0,
                    noise_dbm: -105.0,
                    scatter_db: 1.0,
                },
                seed: seed.wrapping_mul(1000) + (i * 10 + j) as u64,
                steps_per_second: mech.steps_per_second,
                settle: Duration::from_millis(mech.settle_ms),
                meter_period: Duration::from_millis(50),
                points,
                reads_per_point,
                fine_points,
                fine_reads_per_point,
            };
            let prediction = Prediction {
                steps: predicted,
                steps_per_hz: slope,
                q_unloaded: q,
            };
            let Some(r) = peak_trial(
                truth,
                prediction,
                binary_signal_scale(),
                binary_swr_scale(),
                &setup,
            ) else {
                missed.push(hz);
                continue;
            };
            // The set and the rig's report of it: a poll's round trip,
            // 200 ms assumed (no source).
            sweep_time += r.elapsed + Duration::from_millis(200);
            match r.outcome {
                PeakOutcome::Candidate(c) => found.push((hz, c.steps)),
                _ => missed.push(hz),
            }
        }
    }
    let exact: Vec<(u64, i64)> = found
        .iter()
        .map(|&(hz, _)| hz)
        .chain(missed.iter().copied())
        .map(|hz| (hz, truth.steps_for(hz as f64).round() as i64))
        .collect();
    let (made, new_error, report) = follow_through(station, &found, truth, options, seed)?;
    let (_, _, exact_report) = follow_through(station, &exact, truth, options, seed)?;
    Ok(Some(SweepTrial {
        seed,
        found,
        missed,
        old_error_half_widths: old_error,
        new_error_hz: new_error,
        sweep_time,
        report,
        exact_report,
        calibration: made.calibration.note().to_string(),
    }))
}

/// The station's model fitted to `points` alone, its largest error on the
/// loop at each band's sweep points and edges (Hz of resonance), and
/// bench-follow through it against the loop.
fn follow_through(
    station: &Station,
    points: &[(u64, i64)],
    truth: SimLoop,
    options: &BenchOptions,
    seed: u64,
) -> Result<(Station, f64, BenchReport), StationError> {
    let mut config = station.config.clone();
    config.calibration.points = points
        .iter()
        .map(|&(hz, steps)| PointConfig {
            hz: hz as f64,
            steps: steps as f64,
            profile: None,
            weight: None,
        })
        .collect();
    config.calibration.file = None;
    config.calibration.profile = None;
    let made = Station::from_config(config)?;
    let mut new_error: f64 = 0.0;
    for band in &station.policy.bands {
        let mut check: Vec<u64> = sweep_points(band.low_hz, band.high_hz, SWEEP_POINTS);
        check.extend([band.low_hz, band.high_hz]);
        for hz in check {
            let f = hz as f64;
            let at = made.map.steps_at(f);
            new_error = new_error.max((truth.resonance_hz(at) - f).abs());
        }
    }
    let report = bench_follow_against(
        &made,
        &format!("sweep-made calibration of unseen loop {seed}"),
        options,
        &Truth {
            map: &truth,
            physics: truth.small_loop,
        },
    )?;
    Ok((made, new_error, report))
}
