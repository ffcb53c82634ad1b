//! The demo station config's calibration, as the service would build it.

use std::path::PathBuf;

use tuneward::antenna::{auto_hysteresis_hz, check_band, SmallLoop};
use tuneward::calibrate::{CalibrationSet, FitOptions, ModelKind, StepMap};
use tuneward::config::Config;

fn station() -> Config {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("fixtures/calibration/station.toml");
    Config::load(&path).unwrap()
}

#[test]
fn config_calibration_fits_the_base_points_only() {
    let config = station();
    let base = config.calibration().unwrap();
    assert_eq!(base.kind(), ModelKind::Physics);
    assert!(base.points().iter().all(|p| p.profile.is_none()));
    let all = config.calibration_points().unwrap();
    let set = CalibrationSet::fit_with(FitOptions::new(config.calibration.model), &all).unwrap();
    assert_eq!(set.profiles(), vec!["wet".to_string()]);
    let wet = set.map(Some("wet")).unwrap();
    let shift = wet.steps_at(7.15e6) - base.steps_at(7.15e6);
    // The demo's wet points sit about 14 steps below the dry curve.
    assert!((-16.0..-12.0).contains(&shift), "{shift}");
}

#[test]
fn auto_hysteresis_and_band_checks_for_the_demo_station() {
    let config = station();
    let cal = config.calibration().unwrap();
    let lp = SmallLoop::from_config(&config.antenna).unwrap();
    for band in &config.bands {
        let centre = (band.low_hz + band.high_hz) as f64 / 2.0;
        let h = auto_hysteresis_hz(&config.antenna, centre).unwrap();
        let bw = lp.at(centre).bandwidth_1_5_hz;
        assert!(
            ((h as f64) - bw / 4.0).abs() <= 0.5,
            "{}: {h} vs {bw}",
            band.name
        );
        let check = check_band(&config.antenna, band, &cal).unwrap();
        assert!(check.hz_per_step > 0.0);
    }
    // Higher bands: lower Q, wider bandwidth, wider dead band.
    let h40 = auto_hysteresis_hz(&config.antenna, 7.15e6).unwrap();
    let h20 = auto_hysteresis_hz(&config.antenna, 14.175e6).unwrap();
    assert!(h20 > h40);
}
