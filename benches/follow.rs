//! The follow core alone, in events per second: an invented day of reports
//! (already decoded) through `Follower`, with its deadlines and a tuner that
//! arrives 50 ms after each leg is commanded. No decoder, no timeline.

use std::hint::black_box;
use std::path::Path;
use std::sync::Arc;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use tuneward::config::Config;
use tuneward::follow::{Action, Follower};
use tuneward::scenario::{random_evening_repeating, Happening};
use tuneward::station::{Station, DEMO_CONFIG};

#[derive(Clone, Copy)]
enum Ev {
    Frequency(u64),
    Transmit(bool),
}

fn drive(station: &Station, events: &[(Duration, Ev)]) -> u64 {
    let mut core = Follower::new(
        station.policy.clone(),
        Arc::clone(&station.map),
        Some(station.map.steps_at(7_074_000.0).round() as i64),
    );
    let mut arrival: Option<(Duration, i64)> = None;
    let mut moves = 0;
    let mut drain = |core: &mut Follower, now: Duration, arrival: &mut Option<(Duration, i64)>| {
        while let Some(a) = core.poll_action() {
            match a {
                Action::Goto { steps } => *arrival = Some((now + Duration::from_millis(50), steps)),
                Action::Move { .. } => moves += 1,
                _ => {}
            }
        }
    };
    for &(t, ev) in events {
        loop {
            let next = [core.poll_timeout(), arrival.map(|a| a.0)]
                .into_iter()
                .flatten()
                .min();
            let Some(next) = next.filter(|n| *n <= t) else {
                break;
            };
            match arrival {
                Some((at, steps)) if at <= next => {
                    arrival = None;
                    core.handle_arrived(at, steps);
                }
                _ => core.handle_timeout(next),
            }
            drain(&mut core, next, &mut arrival);
        }
        match ev {
            Ev::Frequency(hz) => core.handle_frequency(t, hz),
            Ev::Transmit(on) => core.handle_transmit(t, on),
        }
        drain(&mut core, t, &mut arrival);
    }
    moves
}

fn bench(c: &mut Criterion) {
    let config = Config::parse(DEMO_CONFIG, Path::new("config/demo.toml")).expect("demo config");
    let station = Station::from_config(config).expect("demo station");
    let bands = station.policy.band_ranges();
    let sc = random_evening_repeating(24, 24.0, &bands, Some(Duration::from_millis(300)));
    let events: Vec<(Duration, Ev)> = sc
        .steps
        .iter()
        .filter_map(|(t, h)| match h {
            Happening::Report { hz } => Some((*t, Ev::Frequency(*hz))),
            Happening::Transmit { on } => Some((*t, Ev::Transmit(*on))),
            Happening::Noise { .. } | Happening::Station(_) => None,
        })
        .collect();
    let mut group = c.benchmark_group("follow");
    group.sample_size(10);
    group.warm_up_time(Duration::from_secs(1));
    group.measurement_time(Duration::from_secs(4));
    group.throughput(Throughput::Elements(events.len() as u64));
    group.bench_function("core-24h", |b| {
        b.iter(|| black_box(drive(&station, black_box(&events))))
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
