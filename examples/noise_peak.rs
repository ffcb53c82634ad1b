//! Noise-peak benchmark (not a test): 200 seeded searches on the demo
//! station's simulated loop (config/demo.toml, invented), on 40 m and 20 m.
//!
//! `cargo run --release --example noise_peak` (the search was developed on
//! these seeds); `cargo run --release --example noise_peak -- --first-seed
//! 5000` for seeds kept for judging only.
//!
//! Targets: with band noise 10 dB above the receiver's floor and 1 dB rms
//! meter scatter, ≥ 95 % of searches land within 1/8 of the loop's 1.5:1
//! bandwidth of the true resonance, in under 20 s per calibration point (one
//! whole search) at the demo motor speed (32 000 steps/s, 80 ms settle) with
//! one meter read per 50 ms (the simulator's reads are independent; a real
//! meter's own averaging makes close reads alike, so count on fewer
//! independent reads in the same time);
//! with band noise 3 dB below the floor, ≥ 95 % say "no clear peak".

use std::time::Duration;

use tuneward::follow::peak::{PeakOutcome, STANDARD_PASSES};
use tuneward::rig::meter::{binary_signal_scale, binary_swr_scale};
use tuneward::sim::meters::{demo_station_loop, noise_peak_trial, Band, SimLoop, TrialSetup};

mod common;

const TRIALS: u64 = 200;

/// The seeds the search was developed on start here.
const DEVELOPMENT_SEEDS: u64 = 1000;

fn setup(first: u64, i: u64, sim_loop: &SimLoop, noise_over_floor_db: f64) -> TrialSetup {
    let mut rng = fastrand::Rng::with_seed(first + i);
    let hz = if i % 2 == 0 {
        7_000_000.0 + rng.f64() * 200_000.0
    } else {
        14_000_000.0 + rng.f64() * 350_000.0
    };
    // The hidden error: up to two half-power half-widths either way.
    let q = sim_loop.q_unloaded(hz);
    let slope = (sim_loop.steps_for(hz + 1.0) - sim_loop.steps_for(hz - 1.0)).abs() / 2.0;
    let w = hz / q * slope;
    // The passes `ctl peak` runs (PeakPlan::standard).
    let [points, reads_per_point, fine_points, fine_reads_per_point] = STANDARD_PASSES;
    TrialSetup {
        hz,
        offset_steps: (rng.f64() * 2.0 - 1.0) * 2.0 * w,
        band: Band {
            floor_dbm: -115.0,
            noise_dbm: -115.0 + noise_over_floor_db,
            scatter_db: 1.0,
        },
        seed: first + i,
        steps_per_second: 32000.0,
        settle: Duration::from_millis(80),
        meter_period: Duration::from_millis(50),
        points,
        reads_per_point,
        fine_points,
        fine_reads_per_point,
    }
}

fn main() {
    let first = common::first_seed("noise_peak", DEVELOPMENT_SEEDS);
    let Some(sim_loop) = demo_station_loop() else {
        eprintln!("noise_peak: the demo loop does not resonate through its points");
        std::process::exit(1);
    };
    let (mut within, mut clear, mut time, mut points) = (0u64, 0u64, Duration::ZERO, 0usize);
    let mut worst: f64 = 0.0;
    for i in 0..TRIALS {
        let s = setup(first, i, &sim_loop, 10.0);
        let Some(r) = noise_peak_trial(sim_loop, binary_signal_scale(), binary_swr_scale(), &s)
        else {
            eprintln!("trial {i}: the search did not run");
            continue;
        };
        time += r.elapsed;
        points += r.points;
        if let PeakOutcome::Candidate(_) = r.outcome {
            clear += 1;
            let share = r.error_hz / r.bandwidth_1_5_hz;
            worst = worst.max(share);
            if share <= 0.125 {
                within += 1;
            } else if std::env::var_os("NOISE_PEAK_VERBOSE").is_some() {
                println!(
                    "trial {i}: {:.0} Hz, landed {} for {:.2}, {:.3} of the bandwidth",
                    s.hz, r.landed_steps, r.true_steps, share
                );
            }
        }
    }
    let per_point = time.as_secs_f64() / TRIALS as f64;
    let per_position = time.as_secs_f64() / points.max(1) as f64;
    println!("seeds {first} to {}", first + TRIALS - 1);
    println!(
        "band noise 10 dB over the floor, 1 dB scatter: {within}/{TRIALS} ({:.1} %) within 1/8 of the 1.5:1 bandwidth \
         ({clear} clear peaks; worst landing {:.3} of the bandwidth); {per_point:.1} s per calibration point \
         ({per_position:.2} s per position read)",
        100.0 * within as f64 / TRIALS as f64,
        worst
    );
    let mut quiet = 0u64;
    for i in 0..TRIALS {
        let s = setup(first, i, &sim_loop, -3.0);
        if let Some(r) = noise_peak_trial(sim_loop, binary_signal_scale(), binary_swr_scale(), &s) {
            if matches!(r.outcome, PeakOutcome::NoClearPeak { .. }) {
                quiet += 1;
            }
        }
    }
    println!(
        "band noise 3 dB under the floor: {quiet}/{TRIALS} ({:.1} %) no clear peak",
        100.0 * quiet as f64 / TRIALS as f64
    );
}
