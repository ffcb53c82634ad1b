//! Costs on the live path: the ramp's per-step delay (computed between two
//! step pulses, so it must be far below the shortest step period) and the
//! controller line framing.

use bytes::BytesMut;
use criterion::{black_box, criterion_group, criterion_main, Criterion};
use tuneward::tuner::line::{LineFramer, Reply, Request};
use tuneward::tuner::ramp::RampProfile;

fn ramp(c: &mut Criterion) {
    let profile = RampProfile::new(20_000.0, 5_000.0).unwrap();
    c.bench_function("ramp: 10000-step move, all delays", |b| {
        b.iter(|| {
            let mut r = profile.ramp(black_box(10_000));
            let mut total = 0.0;
            while let Some(d) = r.next_secs() {
                total += d;
            }
            total
        })
    });
}

fn framing(c: &mut Criterion) {
    let mut wire = BytesMut::new();
    for i in 0..1000 {
        Reply::Moving(i).encode(&mut wire);
        Reply::At(i).encode(&mut wire);
    }
    let wire = wire.freeze();
    c.bench_function("line framing: 2000 replies in 64-byte chunks", |b| {
        b.iter(|| {
            let mut framer = LineFramer::new();
            let mut buf = BytesMut::new();
            let mut n = 0;
            for chunk in wire.chunks(64) {
                buf.extend_from_slice(chunk);
                while let Some(Ok(l)) = framer.next_line(&mut buf) {
                    if Reply::parse(&l).is_ok() {
                        n += 1;
                    }
                }
            }
            n
        })
    });
    c.bench_function("line encode+parse: GOTO", |b| {
        b.iter(|| {
            let mut buf = BytesMut::new();
            Request::Goto(black_box(123_456)).encode(&mut buf);
            let l = LineFramer::new().next_line(&mut buf);
            l.and_then(|l| l.ok()).map(|l| Request::parse(&l))
        })
    });
}

criterion_group!(benches, ramp, framing);
criterion_main!(benches);
