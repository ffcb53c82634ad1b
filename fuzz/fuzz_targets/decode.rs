//! Arbitrary bytes, arbitrary chunking, any built-in dialect and direction:
//! the decoder must not panic, must stay within its buffer bound, must say
//! the same whatever the chunking, and must never report from `tx` bytes.
#![no_main]

use libfuzzer_sys::fuzz_target;
use tuneward::rig::dialect::Spec;
use tuneward::rig::{Dialect, Direction, RigEvent, MAX_PLAUSIBLE_HZ, MIN_PLAUSIBLE_HZ};

fuzz_target!(|data: &[u8]| {
    let Some((&head, rest)) = data.split_first() else {
        return;
    };
    let names = Dialect::builtin_names();
    let d = Dialect::builtin(names[usize::from(head) % names.len()]).unwrap();
    let dir = if head & 0x10 != 0 { Direction::Tx } else { Direction::Rx };
    let addr = (head & 0x20 != 0).then_some(0x5A);
    let bound = match &d.spec {
        Spec::Binary(s) => s.max_frame + 1,
        Spec::Text(s) => s.max_message,
    };
    // Chunk boundaries wherever the byte 0x0A occurs (kept in the data).
    let mut whole = Vec::new();
    let mut dec = d.decoder(addr);
    dec.feed(dir, rest, &mut whole);
    dec.finish(&mut whole);
    let mut pieces = Vec::new();
    let mut dec = d.decoder(addr);
    for chunk in rest.split_inclusive(|&b| b == 0x0A) {
        dec.feed(dir, chunk, &mut pieces);
        assert!(dec.buffered() <= bound);
    }
    dec.finish(&mut pieces);
    assert_eq!(whole, pieces);
    for e in &whole {
        match e {
            RigEvent::Frequency { hz } => {
                assert!(dir == Direction::Rx);
                assert!((MIN_PLAUSIBLE_HZ..=MAX_PLAUSIBLE_HZ).contains(hz));
            }
            RigEvent::Transmit { .. } => assert!(dir == Direction::Rx),
            RigEvent::Reject { bytes, .. } => assert!(*bytes > 0),
        }
    }
});
