//! Arbitrary bytes as a capture file: every line yields a record or a
//! located error, never a panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tuneward::capture::CaptureReader;

fuzz_target!(|data: &[u8]| {
    let mut last = 0;
    for item in CaptureReader::new(std::io::BufReader::with_capacity(16, data), "fuzz.cap") {
        let line = match item {
            Ok(r) => r.line,
            Err(tuneward::capture::CaptureError::Line { line, .. }) => line,
            Err(e) => panic!("unexpected {e}"),
        };
        assert!(line > last);
        last = line;
    }
});
