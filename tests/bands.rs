//! The band edges shipped in the configs, against the published allocation.
//!
//! Source: ITU Radio Regulations, Article 5 (Table of Frequency Allocations),
//! allocations to the amateur service in Region 1. Values recalled from the
//! table (edition of 2020), not copied from a file: 7 000–7 200 kHz (amateur,
//! primary), 10 100–10 150 kHz (amateur, secondary), 14 000–14 350 kHz
//! (amateur; 14 000–14 250 kHz also amateur-satellite). Regions 2 and 3 differ
//! on 40 m (to 7 300 kHz in Region 2); a station configures its own licence's
//! band plan.

use std::collections::BTreeMap;
use std::path::Path;

use tuneward::config::Config;

fn itu_region_1() -> BTreeMap<&'static str, (u64, u64)> {
    BTreeMap::from([
        ("40m", (7_000_000, 7_200_000)),
        ("30m", (10_100_000, 10_150_000)),
        ("20m", (14_000_000, 14_350_000)),
    ])
}

fn bands_of(path: &str) -> Vec<(String, u64, u64)> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join(path);
    Config::load(&path)
        .unwrap()
        .bands
        .into_iter()
        .map(|b| (b.name, b.low_hz, b.high_hz))
        .collect()
}

#[test]
fn shipped_band_edges_match_itu_region_1() {
    let table = itu_region_1();
    for file in ["config/example.toml", "config/demo.toml"] {
        let bands = bands_of(file);
        assert!(!bands.is_empty());
        for (name, low, high) in bands {
            let (l, h) = table
                .get(name.as_str())
                .unwrap_or_else(|| panic!("{file}: band {name} is not in the table"));
            assert_eq!((low, high), (*l, *h), "{file}: band {name}");
        }
    }
}

#[test]
fn demo_frequencies_fall_where_the_table_says() {
    // 7.074 MHz and 14.250 MHz are amateur frequencies; 9.650 MHz lies in
    // the 31 m broadcasting band (9 400–9 900 kHz, Article 5, recalled), and
    // the demo's tuner must hold there.
    let config =
        Config::load(&Path::new(env!("CARGO_MANIFEST_DIR")).join("config/demo.toml")).unwrap();
    let station = tuneward::station::Station::from_config(config).unwrap();
    use tuneward::follow::Placement;
    assert!(matches!(
        station.policy.place(7_074_000),
        Placement::Inside { .. }
    ));
    assert!(matches!(
        station.policy.place(14_250_000),
        Placement::Inside { .. }
    ));
    assert_eq!(station.policy.place(9_650_000), Placement::Outside);
}
