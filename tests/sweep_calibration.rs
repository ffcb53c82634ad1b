//! A calibration made only by the sweep, on a loop the code has not seen,
//! followed through on bench-follow's invented evenings and judged on that
//! loop (`tuneward::sim::sweep_trial`; the full run over twenty loops is
//! `cargo run --release --example sweep_calibration`). The loop's
//! resonance and Q come from its physics (`antenna`, whose sources are
//! named there); the SWR from the matched-resonator model
//! (`antenna::swr_at`); the target is bench-follow's (100 % of the time on
//! the air at SWR <= 1.5, at most 1.3x the offline optimum's moves).

use tuneward::config::Config;
use tuneward::quality::{BenchOptions, Family, JUDGING_SEEDS, QUALITY_CONFIG};
use tuneward::sim::sweep_trial::sweep_trial;
use tuneward::station::Station;

#[test]
fn a_calibration_made_only_by_the_sweep_keeps_an_unseen_loop_within_1_5_to_1() {
    let config = Config::parse(
        QUALITY_CONFIG,
        std::path::Path::new("fixtures/quality/station.toml"),
    )
    .unwrap();
    let station = Station::from_config(config).unwrap();
    let options = BenchOptions {
        families: Family::ALL.to_vec(),
        seeds: vec![JUDGING_SEEDS],
        error_steps: 0.0,
        ..BenchOptions::default()
    };
    // A loop kept for judging (the example's --first-seed 1000 range).
    let t = sweep_trial(&station, 1004, &options).unwrap().unwrap();
    assert_eq!(
        t.found.len(),
        9,
        "three points on each of three bands: {t:?}"
    );
    assert!(t.missed.is_empty());
    // The old calibration was off on this loop; the sweep's is not.
    let follow = t.report.row("follow").unwrap();
    let optimum = t.report.row("optimum").unwrap();
    assert_eq!(follow.swr_1_5_pct, 100.0, "{:?}", t.report.short_dwells);
    assert!(
        follow.moves as f64 <= 1.3 * optimum.moves as f64,
        "{} moves against the optimum's {}",
        follow.moves,
        optimum.moves
    );
    assert!(t.report.target_met());
    assert_eq!(follow.violations, 0);
    // As good as the loop's exact positions at the same frequencies.
    let exact = t.exact_report.row("follow").unwrap();
    assert!(
        follow.worst_swr <= exact.worst_swr + 0.1,
        "{follow:?} {exact:?}"
    );
}
