//! Decoder throughput on a stream of frames mixed with line noise, fed in
//! serial-port-sized chunks. Invented data.

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use tuneward::rig::{Dialect, Direction};

fn stream(d: &Dialect) -> Vec<u8> {
    let mut s = Vec::new();
    let mut x: u32 = 12345;
    for i in 0..20_000u64 {
        s.extend(d.encode_frequency(7_000_000 + i * 10, 0x5A));
        // A little pseudo-random noise every few frames (xorshift).
        if i % 4 == 0 {
            for _ in 0..5 {
                x ^= x << 13;
                x ^= x >> 17;
                x ^= x << 5;
                s.push((x & 0x7F) as u8 | 0x80);
            }
        }
    }
    s
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("rig_decode");
    for name in ["binary-bcd", "text-semicolon"] {
        let d = Dialect::builtin(name).unwrap();
        let data = stream(&d);
        g.throughput(Throughput::Bytes(data.len() as u64));
        g.bench_function(name, |b| {
            let mut out = Vec::with_capacity(64 * 1024);
            b.iter(|| {
                let mut dec = d.decoder(None);
                out.clear();
                for chunk in data.chunks(64) {
                    dec.feed(Direction::Rx, black_box(chunk), &mut out);
                }
                dec.finish(&mut out);
                black_box(out.len())
            })
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
