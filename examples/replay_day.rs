//! A day at an active station, for measuring the replay's memory.
//!
//! ```sh
//! cargo run --release --example replay_day -- day.cap          # write a 24 h capture
//! /usr/bin/time -v target/release/tuneward replay day.cap --config config/demo.toml --json > /dev/null
//! cargo run --release --example replay_day -- day.cap --replay # peak heap of the replay itself
//! ```
//!
//! The capture is an invented 24-hour `random_evening` of the demo station's
//! bands, the rig repeating its frequency every 300 ms (a rig polled about three times a second). With `--replay` the
//! file is replayed through the library (timeline discarded) under a
//! counting allocator, and the peak heap in use during the replay is printed.

use std::alloc::{GlobalAlloc, Layout, System};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Duration;

use tuneward::rig::Dialect;
use tuneward::station::{replay_file_with, DialectWire, ReplayOptions};
use tuneward::timeline::Discard;

struct Counting;

static LIVE: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        let p = System.alloc(layout);
        if !p.is_null() {
            let now = LIVE.fetch_add(layout.size(), Ordering::Relaxed) + layout.size();
            PEAK.fetch_max(now, Ordering::Relaxed);
        }
        p
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        System.dealloc(ptr, layout);
        LIVE.fetch_sub(layout.size(), Ordering::Relaxed);
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

const BANDS: [(u64, u64); 3] = [
    (7_000_000, 7_200_000),
    (10_100_000, 10_150_000),
    (14_000_000, 14_350_000),
];

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let path = PathBuf::from(args.first().map(String::as_str).unwrap_or("day.cap"));
    let replay = args.iter().any(|a| a == "--replay");
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    if !path.exists() {
        let sc = tuneward::scenario::random_evening_repeating(
            24,
            24.0,
            &BANDS,
            Some(Duration::from_millis(300)),
        );
        let dialect = Dialect::builtin("binary-bcd").ok_or("no binary-bcd dialect")?;
        let wire = DialectWire {
            dialect: &dialect,
            address: 0x94,
        };
        let file = std::io::BufWriter::new(std::fs::File::create(&path)?);
        let n = tuneward::scenario::write_capture(&sc, &wire, file)?;
        eprintln!("wrote {} records to {}", n, path.display());
    }
    if replay {
        let config = root.join("config/demo.toml");
        let before = LIVE.load(Ordering::Relaxed);
        PEAK.store(before, Ordering::Relaxed);
        let summary = replay_file_with(
            &config,
            &path,
            ReplayOptions::default(),
            &mut Discard,
            &mut std::io::sink(),
        )?;
        let peak = PEAK.load(Ordering::Relaxed) - before;
        println!(
            "{} frames, {} moves, {} rejected; peak heap during the replay {} bytes ({:.2} MiB)",
            summary.frames,
            summary.moves,
            summary.rejected,
            peak,
            peak as f64 / (1024.0 * 1024.0)
        );
    }
    Ok(())
}
