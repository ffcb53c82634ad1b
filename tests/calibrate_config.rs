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
    let base = tuneward::station::fit_base(&config).unwrap();
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
    let cal = tuneward::station::fit_base(&config).unwrap();
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

/// The station's base calibration is the one inside its profile set (fitted
/// once), and it is the config's base fit.
#[test]
fn station_base_is_the_sets_base() {
    let config = station();
    let own = tuneward::station::fit_base(&config).unwrap();
    let st = tuneward::station::Station::from_config(config).unwrap();
    let in_set = st.profiles.base().expect("base points");
    assert!(std::sync::Arc::ptr_eq(&st.calibration, in_set));
    for hz in [7.0e6, 7.15e6, 10.12e6, 14.2e6] {
        assert_eq!(st.calibration.steps_at(hz), own.steps_at(hz), "{hz}");
    }
}

/// With every point in a profile there is no base: that is what is
/// reported, by key, whatever the profiles' own points say.
#[test]
fn a_station_without_base_points_says_so() {
    let text = r#"
[calibration]
model = "interpolate"
points = [
  { hz = 7000000, steps = 4000, profile = "wet" },
  { hz = 7300000, steps = 3600, profile = "wet" },
  { hz = 7100000, steps = 3900, profile = "dry" },
]

[[band]]
name = "40m"
low_hz = 7000000
high_hz = 7300000
"#;
    let path = PathBuf::from("/stations/all-profiled.toml");
    let config = Config::parse(text, &path).unwrap();
    let direct = tuneward::station::fit_base(&config)
        .unwrap_err()
        .to_string();
    let err = match tuneward::station::Station::from_config(config) {
        Ok(_) => panic!("a station without base points was accepted"),
        Err(e) => e.to_string(),
    };
    assert_eq!(err, direct);
    assert!(
        err.contains("key `calibration`")
            && err.contains("points without a profile")
            && err.contains("3 points, every one of them in a profile"),
        "{err}"
    );
}
