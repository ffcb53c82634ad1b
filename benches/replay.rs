//! `tuneward replay` of a generated 24-hour capture: an invented day at the
//! demo station, the rig polled about three times a second (some 300 000
//! frames, 15 MB of capture text), streamed from a file through the capture
//! reader, the decoder, the follow core and the simulated tuner. The
//! timeline is discarded (its formatting is not the replay).
//!
//! Peak memory is measured separately: `examples/replay_day.rs`.

use std::hint::black_box;
use std::path::Path;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use tuneward::rig::Dialect;
use tuneward::scenario::{random_evening_repeating, write_capture};
use tuneward::station::{replay_file_with, DialectWire, ReplayOptions};
use tuneward::timeline::Discard;

const BANDS: [(u64, u64); 3] = [
    (7_000_000, 7_200_000),
    (10_100_000, 10_150_000),
    (14_000_000, 14_350_000),
];

fn bench(c: &mut Criterion) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let config = root.join("config/demo.toml");
    let dir = tempfile::tempdir().expect("temporary folder");
    let capture = dir.path().join("day.cap");
    let sc = random_evening_repeating(24, 24.0, &BANDS, Some(Duration::from_millis(300)));
    let dialect = Dialect::builtin("binary-bcd").expect("built-in dialect");
    let wire = DialectWire {
        dialect: &dialect,
        address: 0x94,
    };
    let file = std::io::BufWriter::new(std::fs::File::create(&capture).expect("capture file"));
    write_capture(&sc, &wire, file).expect("capture written");
    drop(sc);
    let run = || {
        replay_file_with(
            &config,
            &capture,
            ReplayOptions::default(),
            &mut Discard,
            &mut std::io::sink(),
        )
        .expect("replay")
    };
    let frames = run().frames;
    let mut group = c.benchmark_group("replay");
    group.sample_size(10);
    group.warm_up_time(Duration::from_secs(1));
    group.measurement_time(Duration::from_secs(5));
    group.throughput(Throughput::Elements(frames));
    group.bench_function("day-24h", |b| b.iter(|| black_box(run())));
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
