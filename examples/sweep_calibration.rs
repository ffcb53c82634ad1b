//! Sweep-calibration benchmark (not a test): on loops the code has not
//! seen (`tuneward::sim::sweep_trial::unseen_loop`, invented), a
//! calibration made only by the sweep (`ctl calibrate` on every band of the
//! bench-follow station, three points a band, the standard noise-peak
//! search at each) is followed through on bench-follow's invented evenings,
//! every family, and judged on the loop itself.
//!
//! `cargo run --release --example sweep_calibration` (loops 1-10, where the
//! invented loops' sizes were chosen); `-- --first-seed 1000` for loops
//! kept for judging only. The evenings are bench-follow's judging seeds
//! (101-105) in both.
//!
//! Target: 100 % of the time on the air at SWR <= 1.5 and at most 1.3x
//! the offline optimum's moves, on every loop, in all and on every family.

use tuneward::config::Config;
use tuneward::quality::{BenchOptions, Family, JUDGING_SEEDS, QUALITY_CONFIG};
use tuneward::sim::sweep_trial::sweep_trial;
use tuneward::station::Station;

mod common;

const LOOPS: u64 = 10;

/// The family with the most moves against the optimum, in words.
fn worst_family(report: &tuneward::quality::BenchReport) -> String {
    report
        .families
        .iter()
        .filter_map(|fam| {
            let row = |p: &str| fam.rows.iter().find(|r| r.policy == p);
            let (f, o) = (row("follow")?, row("optimum")?);
            Some((
                fam.family,
                f.moves as f64 / o.moves.max(1) as f64,
                fam.target_met(),
            ))
        })
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map_or(String::new(), |(name, r, met)| {
            format!("{name} {r:.2}x{}", if met { "" } else { " over" })
        })
}

fn main() {
    let first = common::first_seed("sweep_calibration", 1);
    let path = std::path::Path::new("fixtures/quality/station.toml");
    let station = match Config::parse(QUALITY_CONFIG, path)
        .map_err(tuneward::station::StationError::from)
        .and_then(Station::from_config)
    {
        Ok(s) => s,
        Err(e) => {
            eprintln!("sweep_calibration: {e}");
            std::process::exit(1);
        }
    };
    let options = BenchOptions {
        families: Family::ALL.to_vec(),
        seeds: (JUDGING_SEEDS..JUDGING_SEEDS + 5).collect(),
        // The loop itself is the truth: no hidden error on top.
        error_steps: 0.0,
        ..BenchOptions::default()
    };
    println!(
        "{:>5} {:>5} {:>6} {:>8} {:>9} {:>8} {:>9} {:>9} {:>7}  worst family (with the loop's exact positions)",
        "loop", "found", "missed", "old_hw", "new_err", "sweep_s", "swr<=1.5", "worst", "moves/x"
    );
    let mut met = 0;
    let mut every = 0;
    let mut ran = 0;
    for seed in first..first + LOOPS {
        let t = match sweep_trial(&station, seed, &options) {
            Ok(Some(t)) => t,
            Ok(None) => {
                println!("{seed:>5} (no loop drawn)");
                continue;
            }
            Err(e) => {
                println!("{seed:>5} the sweep's calibration was refused: {e}");
                ran += 1;
                continue;
            }
        };
        ran += 1;
        let (Some(f), Some(o)) = (t.report.row("follow"), t.report.row("optimum")) else {
            continue;
        };
        let ratio = f.moves as f64 / o.moves.max(1) as f64;
        // bench-follow's target is on all families together; each family
        // alone is shown too (its worst moves ratio).
        let ok = t.report.target_met();
        met += usize::from(ok);
        let worst = worst_family(&t.report);
        let exact = worst_family(&t.exact_report);
        every += usize::from(t.report.families.iter().all(|f| f.target_met()));
        println!(
            "{:>5} {:>5} {:>6} {:>8.2} {:>7.0}Hz {:>8.1} {:>8.2}% {:>9.2} {:>6.2}x  {} ({}){}",
            seed,
            t.found.len(),
            t.missed.len(),
            t.old_error_half_widths,
            t.new_error_hz,
            t.sweep_time.as_secs_f64(),
            f.swr_1_5_pct,
            f.worst_swr,
            ratio,
            worst,
            exact,
            if ok { "" } else { "  missed" }
        );
    }
    println!(
        "{met} of {ran} loops met the target (100% at SWR <= 1.5, moves <= 1.3x the optimum, all families together); {every} of {ran} on every family alone"
    );
}
