//! The probe on virtual time against rigs written here by hand. Answers are
//! worked from each family's published layout (recalled, as the dialect
//! files say): block, `00 00 00 00 03` answered by four bytes of big-endian
//! BCD in 10 Hz units and a mode byte, `00 00 00 00 F7` by one status byte
//! (bit 7 clear while transmitting); binary, `FE FE <to> <from> 03 <five
//! BCD bytes, least significant first> FD`.

use std::time::Duration;

use super::*;

fn ms(n: u64) -> Duration {
    Duration::from_millis(n)
}

/// Runs the probe to its end against `rig` (given the speed and what was
/// sent, what it answers); every write is recorded.
fn run(mut p: Probe, rig: impl Fn(u32, &[u8]) -> Vec<u8>) -> (Finding, Vec<(u32, Vec<u8>)>) {
    let mut now = Duration::ZERO;
    let mut speed = 0;
    let mut sent = Vec::new();
    for _ in 0..10_000 {
        while let Some(o) = p.poll_output(now) {
            match o {
                ProbeOutput::Speed(b) => speed = b,
                ProbeOutput::Send(bytes) => {
                    let answer = rig(speed, &bytes);
                    sent.push((speed, bytes));
                    if !answer.is_empty() {
                        p.handle_bytes(now + ms(5), &answer);
                    }
                }
            }
        }
        if let Some(f) = p.finding() {
            return (f.clone(), sent);
        }
        now = p.poll_timeout().expect("a deadline while trying").max(now);
        p.handle_timeout(now);
    }
    panic!("the probe never ended");
}

/// Noise a rig at the wrong speed sends back: as many bytes, none framed.
fn noise(bytes: &[u8]) -> Vec<u8> {
    bytes
        .iter()
        .map(|b| 0x80 | (b.wrapping_mul(7) & 0x3F))
        .collect()
}

fn block() -> Dialect {
    Dialect::builtin("block-5").unwrap()
}

/// A block rig at `baud` on 7.100 MHz, receiving.
fn block_rig(baud: u32) -> impl Fn(u32, &[u8]) -> Vec<u8> {
    move |speed, sent| {
        if speed != baud {
            return noise(sent);
        }
        let mut out = Vec::new();
        for b in sent.chunks(5) {
            match b[4] {
                // 7 100 000 Hz = 710 000 tens -> 00 71 00 00, mode 01.
                0x03 => out.extend_from_slice(&[0x00, 0x71, 0x00, 0x00, 0x01]),
                // Bit 7 set: receive.
                0xF7 => out.push(0x80),
                _ => {}
            }
        }
        out
    }
}

#[test]
fn finds_the_block_rigs_speed_trying_the_configured_one_first() {
    let p = Probe::new(block(), 38_400, None, ms(300));
    let (f, sent) = run(p, block_rig(9_600));
    let tried: Vec<u32> = f.tried.iter().map(|h| h.baud).collect();
    assert_eq!(tried, vec![38_400, 19_200, 9_600]);
    let found = f.found.unwrap();
    assert_eq!(found.baud, 9_600);
    assert_eq!(found.hz, Some(7_100_000));
    assert!(f.tried[0].rejected > 0, "{:?}", f.tried[0]);
    // Only the two reads, whole blocks, ever sent.
    for (_, bytes) in &sent {
        for b in bytes.chunks(5) {
            assert!(
                b == [0, 0, 0, 0, 0x03] || b == [0, 0, 0, 0, 0xF7],
                "{b:02X?}"
            );
        }
    }
    assert_eq!(
        config_lines(&block(), &found),
        vec!["[rig]", "protocol = \"block-5\"", "baud = 9600"]
    );
}

#[test]
fn noise_that_frames_as_a_report_is_not_a_match() {
    // At the wrong speed this rig's noise happens to be valid BCD five bytes
    // long after every read (95 95 95 95 8D: 959.5 MHz), but the status
    // read's noise is five bytes where one is expected.
    let rig = |speed: u32, sent: &[u8]| -> Vec<u8> {
        if speed == 4_800 {
            block_rig(4_800)(speed, sent)
        } else {
            sent.iter().map(|_| 0x95).collect()
        }
    };
    let (f, _) = run(Probe::new(block(), 38_400, None, ms(300)), rig);
    assert_eq!(f.found.unwrap().baud, 4_800);
    assert!(
        f.tried.iter().take(3).all(|h| !h.matches()),
        "{:?}",
        f.tried
    );
}

#[test]
fn nothing_answering_tries_every_speed_once_then_stops() {
    let (f, sent) = run(Probe::new(block(), 9_600, None, ms(200)), |_, _| Vec::new());
    assert_eq!(f.found, None);
    let tried: Vec<u32> = f.tried.iter().map(|h| h.baud).collect();
    assert_eq!(
        tried,
        vec![9_600, 38_400, 19_200, 4_800, 57_600, 115_200, 2_400]
    );
    // Two rounds of reads at each speed, at that speed.
    for b in tried {
        assert_eq!(sent.iter().filter(|(s, _)| *s == b).count(), 2);
    }
}

/// Packed BCD, ten digits, least significant pair first (binary family),
/// worked digit by digit.
fn bcd10(hz: u64) -> Vec<u8> {
    let d: Vec<u8> = format!("{hz:010}").bytes().map(|b| b - b'0').collect();
    d.chunks(2).rev().map(|p| (p[0] << 4) | p[1]).collect()
}

#[test]
fn finds_a_binary_rigs_address_from_its_answer() {
    let d = Dialect::builtin("binary-bcd").unwrap();
    // A rig at address 5A, 19 200 baud, answering a frequency read sent to
    // it (FE FE 5A E0 03 FD) with FE FE E0 5A 03 <bcd> FD.
    let rig = |speed: u32, sent: &[u8]| -> Vec<u8> {
        if speed != 19_200 {
            return noise(sent);
        }
        let asks = sent
            .windows(6)
            .any(|w| w == [0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD]);
        if asks {
            [
                &[0xFE, 0xFE, 0xE0, 0x5A, 0x03][..],
                &bcd10(7_074_000),
                &[0xFD],
            ]
            .concat()
        } else {
            Vec::new()
        }
    };
    let (f, sent) = run(Probe::new(d.clone(), 9_600, None, ms(300)), rig);
    let found = f.found.unwrap();
    assert_eq!((found.baud, found.address), (19_200, Some(0x5A)));
    assert_eq!(found.hz, Some(7_074_000));
    assert!(config_lines(&d, &found).contains(&"address = 0x5A".to_string()));
    // Only frequency reads, one per address below the controllers'.
    let (_, first) = &sent[0];
    assert_eq!(first.len(), 6 * 0xDF);
    for (i, frame) in first.chunks(6).enumerate() {
        assert_eq!(frame, [0xFE, 0xFE, i as u8 + 1, 0xE0, 0x03, 0xFD]);
    }
}

#[test]
fn a_configured_binary_address_is_the_only_one_asked() {
    let d = Dialect::builtin("binary-bcd").unwrap();
    let (_, sent) = run(Probe::new(d.clone(), 9_600, Some(0x5A), ms(100)), |_, _| {
        Vec::new()
    });
    let want = [d.poll_frequency(0x5A), d.poll_transmit(0x5A)].concat();
    assert!(sent.iter().all(|(_, b)| *b == want), "{sent:02X?}");
}

#[test]
fn a_one_wire_bus_echo_of_our_reads_is_not_noise() {
    // On the binary family's shared one-wire bus every frame sent comes
    // back as it went (recalled); the rig at 5A answers after it.
    let d = Dialect::builtin("binary-bcd").unwrap();
    let rig = |speed: u32, sent: &[u8]| -> Vec<u8> {
        if speed != 9_600 {
            return noise(sent);
        }
        let mut out = sent.to_vec();
        if sent
            .windows(6)
            .any(|w| w == [0xFE, 0xFE, 0x5A, 0xE0, 0x03, 0xFD])
        {
            out.extend(
                [
                    &[0xFE, 0xFE, 0xE0, 0x5A, 0x03][..],
                    &bcd10(3_573_000),
                    &[0xFD],
                ]
                .concat(),
            );
        }
        out
    };
    let (f, _) = run(Probe::new(d, 9_600, None, ms(300)), rig);
    let found = f.found.unwrap();
    assert_eq!((found.baud, found.address), (9_600, Some(0x5A)));
    assert_eq!(found.rejected, 0, "{found:?}");
}
