//! Arbitrary text as a dialect file: an error or a dialect whose encoders
//! and decoder work, never a panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tuneward::rig::{Dialect, Direction};

fuzz_target!(|text: &str| {
    if let Ok(d) = Dialect::parse(text, std::path::Path::new("fuzz.toml")) {
        let mut dec = d.decoder(None);
        let mut out = Vec::new();
        for bytes in [
            d.encode_frequency(14_074_000, 0x5A),
            d.encode_transmit(true, 0x5A),
            d.poll_frequency(0x5A),
            d.poll_transmit(0x5A),
        ] {
            dec.feed(Direction::Rx, &bytes, &mut out);
        }
        dec.finish(&mut out);
    }
});
