//! Decoder throughput per family, in MB/s and frames/s, on a realistic mix:
//! an invented four-hour evening (frequency reports repeated by a polled rig,
//! transmit reports, line noise) in each family's built-in dialect, fed in
//! 32-byte reads (as a serial port delivers them) and 4 KiB reads (a file).

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use tuneward::rig::{Decode, Dialect, Direction, RigEvent};
use tuneward::scenario::random_evening_repeating;
use tuneward::station::DialectWire;

const BANDS: [(u64, u64); 3] = [
    (7_000_000, 7_200_000),
    (10_100_000, 10_150_000),
    (14_000_000, 14_350_000),
];

/// The evening's bytes and how many reports they decode to.
fn stream(dialect: &Dialect) -> (Vec<u8>, u64) {
    let sc = random_evening_repeating(9, 4.0, &BANDS, Some(Duration::from_millis(300)));
    let wire = DialectWire {
        dialect,
        address: 0x94,
    };
    let bytes: Vec<u8> = sc.chunks(&wire).into_iter().flat_map(|c| c.2).collect();
    let mut out = Vec::new();
    let reports = decode(dialect.decoder(None).as_mut(), &bytes, 32, &mut out);
    (bytes, reports)
}

fn decode(dec: &mut dyn Decode, bytes: &[u8], read: usize, out: &mut Vec<RigEvent>) -> u64 {
    let mut reports = 0;
    for chunk in bytes.chunks(read) {
        out.clear();
        dec.feed(Direction::Rx, chunk, out);
        reports += out
            .iter()
            .filter(|e| !matches!(e, RigEvent::Reject { .. }))
            .count() as u64;
    }
    out.clear();
    dec.finish(out);
    reports
}

fn bench(c: &mut Criterion) {
    for name in ["binary-bcd", "text-semicolon"] {
        let dialect = Dialect::builtin(name).expect("built-in dialect");
        let (bytes, reports) = stream(&dialect);
        let mut out = Vec::with_capacity(64);
        let mut group = c.benchmark_group(format!("decode/{name}"));
        group.sample_size(20);
        group.warm_up_time(Duration::from_secs(1));
        group.measurement_time(Duration::from_secs(4));
        group.throughput(Throughput::BytesDecimal(bytes.len() as u64));
        for read in [32, 4096] {
            group.bench_function(format!("bytes-read-{read}"), |b| {
                b.iter(|| {
                    let mut dec = dialect.decoder(None);
                    black_box(decode(dec.as_mut(), black_box(&bytes), read, &mut out))
                })
            });
        }
        group.throughput(Throughput::Elements(reports));
        group.bench_function("frames-read-32", |b| {
            b.iter(|| {
                let mut dec = dialect.decoder(None);
                black_box(decode(dec.as_mut(), black_box(&bytes), 32, &mut out))
            })
        });
        group.finish();
    }
}

criterion_group!(benches, bench);
criterion_main!(benches);
