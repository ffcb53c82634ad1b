//! The noise-peak search against the simulated loop and meters, for a few
//! seeds: the verdicts, not the timing (the share and the time per point
//! are the `noise_peak` example's).

use std::time::Duration;

use tuneward::antenna::{Conductor, SmallLoop};
use tuneward::follow::peak::PeakOutcome;
use tuneward::rig::meter::{binary_signal_scale, binary_swr_scale, text_signal_scale};
use tuneward::sim::meters::{noise_peak_trial, Band, SimLoop, TrialSetup};

/// An invented loop like the demo station's (config/demo.toml), on a drive
/// eight times coarser (4000 steps/s below).
fn demo_loop() -> SimLoop {
    SimLoop::through(
        SmallLoop {
            loop_diameter_m: 1.0,
            conductor_diameter_m: 0.022,
            conductor: Conductor::Copper,
        },
        (7_100_000.0, 39049.0),
        (14_175_000.0, 8301.0),
    )
    .expect("the loop resonates through its points")
}

fn setup(hz: f64, offset_steps: f64, noise_over_floor_db: f64, seed: u64) -> TrialSetup {
    TrialSetup {
        hz,
        offset_steps,
        band: Band {
            floor_dbm: -115.0,
            noise_dbm: -115.0 + noise_over_floor_db,
            scatter_db: 1.0,
        },
        seed,
        steps_per_second: 4000.0,
        settle: Duration::from_millis(80),
        meter_period: Duration::from_millis(50),
        points: 9,
        reads_per_point: 4,
        fine_points: 15,
        fine_reads_per_point: 20,
    }
}

#[test]
fn a_rained_on_loop_is_found_within_a_quarter_of_its_bandwidth() {
    let l = demo_loop();
    for (seed, hz, offset) in [
        (1, 7_050_000.0, 60.0),
        (2, 7_150_000.0, -45.0),
        (3, 14_100_000.0, 12.0),
        (4, 14_300_000.0, -9.0),
    ] {
        let r = noise_peak_trial(
            l,
            binary_signal_scale(),
            binary_swr_scale(),
            &setup(hz, offset, 10.0, seed),
        )
        .expect("the search runs");
        assert!(
            matches!(r.outcome, PeakOutcome::Candidate(_)),
            "seed {seed}: {:?}",
            r.outcome
        );
        // Checked against the simulated truth, not the fit: the true
        // resonance at the landing position. Each search within a quarter
        // of the 1.5:1 bandwidth; the share within an eighth (the target)
        // is a statistic, measured by the `noise_peak` example.
        assert!(
            r.error_hz <= r.bandwidth_1_5_hz / 4.0,
            "seed {seed}: landed {} Hz off, bandwidth {} Hz",
            r.error_hz,
            r.bandwidth_1_5_hz
        );
        // It moved away from the (wrong) prediction toward the truth.
        assert!((r.landed_steps as f64 - r.true_steps).abs() < offset.abs());
    }
}

#[test]
fn a_coarse_text_family_meter_still_finds_the_peak() {
    // 3.6 dB per raw step below S9: the scatter dithers across the steps
    // and the trimmed mean averages between them.
    let l = demo_loop();
    let r = noise_peak_trial(
        l,
        text_signal_scale(),
        binary_swr_scale(),
        &setup(7_100_000.0, 40.0, 10.0, 9),
    )
    .expect("the search runs");
    assert!(
        matches!(r.outcome, PeakOutcome::Candidate(_)),
        "{:?}",
        r.outcome
    );
    assert!(r.error_hz <= r.bandwidth_1_5_hz / 4.0, "{r:?}");
}

#[test]
fn a_quiet_band_says_no_clear_peak_and_returns_to_the_start() {
    let l = demo_loop();
    for seed in 20..24 {
        let s = setup(14_175_000.0, 10.0, -3.0, seed);
        let r = noise_peak_trial(l, binary_signal_scale(), binary_swr_scale(), &s)
            .expect("the search runs");
        assert!(
            matches!(r.outcome, PeakOutcome::NoClearPeak { .. }),
            "seed {seed}: {:?}",
            r.outcome
        );
        // Back at the prediction it started from (the error-free loop's).
        let start = demo_loop().steps_for(14_175_000.0).round() as i64;
        assert_eq!(r.landed_steps, start);
    }
}
