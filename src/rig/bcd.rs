//! Packed BCD as the binary family carries frequencies: two decimal digits per
//! byte, the lower digit in the low nibble, the least significant byte first.
//!
//! Pure functions, no allocation on the decode side.

/// Why a BCD field could not be read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BcdError {
    /// A nibble above 9 at byte `index` of the field.
    BadDigit { index: usize },
}

/// Reads a little-endian packed BCD field (`bytes[0]` holds the two lowest
/// digits). The value saturates rather than overflows on absurd widths; the
/// dialect loader keeps widths at 9 bytes (18 digits) or fewer.
#[inline(always)]
pub fn decode_le(bytes: &[u8]) -> Result<u64, BcdError> {
    if bytes.len() <= 8 {
        // Up to 16 digits, all at once: every byte is a lane of a u64. The
        // usual widths are loaded whole (no loop over the bytes).
        let word = match *bytes {
            [a, b, c, d, e] => u64::from_le_bytes([a, b, c, d, e, 0, 0, 0]),
            [a, b, c, d] => u64::from(u32::from_le_bytes([a, b, c, d])),
            _ => bytes
                .iter()
                .rev()
                .fold(0u64, |w, &b| (w << 8) | u64::from(b)),
        };
        if let Some(value) = swar_le(word) {
            return Ok(value);
        }
    }
    if bytes.len() <= 9 {
        // At most 18 digits: below 10^18 < 2^64, so plain arithmetic cannot
        // overflow. Also finds which byte holds a bad digit.
        let mut value: u64 = 0;
        for (index, &b) in bytes.iter().enumerate().rev() {
            let (hi, lo) = (b >> 4, b & 0x0F);
            if hi > 9 || lo > 9 {
                return Err(BcdError::BadDigit { index });
            }
            value = value * 100 + u64::from(hi * 10 + lo);
        }
        return Ok(value);
    }
    let mut value: u64 = 0;
    for (index, &b) in bytes.iter().enumerate().rev() {
        let hi = u64::from(b >> 4);
        let lo = u64::from(b & 0x0F);
        if hi > 9 || lo > 9 {
            return Err(BcdError::BadDigit { index });
        }
        value = value.saturating_mul(100).saturating_add(hi * 10 + lo);
    }
    Ok(value)
}

/// Eight bytes of little-endian packed BCD at once (SIMD within a
/// register), or `None` if a nibble is above 9. Each step keeps every lane
/// below its width, so no lane carries into the next: a nibble plus 6
/// reaches 16 only when the nibble is above 9; hi·10 + lo ≤ 99 in a byte;
/// then pairs of lanes are merged base 100 (≤ 9 999 in 16 bits), base 10⁴
/// (≤ 99 999 999 in 32 bits) and base 10⁸.
#[inline(always)]
fn swar_le(x: u64) -> Option<u64> {
    const NIBBLES: u64 = 0x0F0F_0F0F_0F0F_0F0F;
    const SIX: u64 = 0x0606_0606_0606_0606;
    const HIGH: u64 = 0xF0F0_F0F0_F0F0_F0F0;
    let lo = x & NIBBLES;
    let hi = (x >> 4) & NIBBLES;
    if ((lo + SIX) | (hi + SIX)) & HIGH != 0 {
        return None;
    }
    // Byte i holds digits 2i+1, 2i: value hi·10 + lo, weight 100^i.
    let pairs = hi * 10 + lo;
    let by16 = (pairs & 0x00FF_00FF_00FF_00FF) + ((pairs >> 8) & 0x00FF_00FF_00FF_00FF) * 100;
    let by32 = (by16 & 0x0000_FFFF_0000_FFFF) + ((by16 >> 16) & 0x0000_FFFF_0000_FFFF) * 10_000;
    Some((by32 & 0xFFFF_FFFF) + (by32 >> 32) * 100_000_000)
}

/// Writes `value` as `out.len()` bytes of little-endian packed BCD. Returns
/// `false` (leaving `out` partly written) when the value needs more digits
/// than the field holds.
pub fn encode_le_into(mut value: u64, out: &mut [u8]) -> bool {
    for b in out.iter_mut() {
        let lo = (value % 10) as u8;
        value /= 10;
        let hi = (value % 10) as u8;
        value /= 10;
        *b = (hi << 4) | lo;
    }
    value == 0
}

/// [`encode_le_into`] into a fresh vector of `width` bytes; `None` when the
/// value does not fit.
pub fn encode_le(value: u64, width: usize) -> Option<Vec<u8>> {
    let mut out = vec![0u8; width];
    encode_le_into(value, &mut out).then_some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The plain digit-by-digit reading, to compare the fast path against.
    fn slow(bytes: &[u8]) -> Result<u64, BcdError> {
        let mut value: u64 = 0;
        for (index, &b) in bytes.iter().enumerate().rev() {
            let (hi, lo) = (u64::from(b >> 4), u64::from(b & 0x0F));
            if hi > 9 || lo > 9 {
                return Err(BcdError::BadDigit { index });
            }
            value = value.saturating_mul(100).saturating_add(hi * 10 + lo);
        }
        Ok(value)
    }

    #[test]
    fn fast_path_agrees_with_the_digit_by_digit_reading() {
        let mut rng = fastrand::Rng::with_seed(42);
        for _ in 0..200_000 {
            let len = rng.usize(0..=10);
            let bytes: Vec<u8> = (0..len)
                .map(|_| {
                    if rng.u8(0..8) == 0 {
                        rng.u8(..)
                    } else {
                        (rng.u8(0..10) << 4) | rng.u8(0..10)
                    }
                })
                .collect();
            assert_eq!(decode_le(&bytes), slow(&bytes), "{bytes:02X?}");
        }
        // Every nibble value in every lane.
        for lane in 0..8 {
            for b in 0..=255u8 {
                let mut bytes = [0x99u8; 8];
                bytes[lane] = b;
                assert_eq!(decode_le(&bytes), slow(&bytes), "{bytes:02X?}");
            }
        }
        assert_eq!(decode_le(&[0x99; 8]), Ok(9_999_999_999_999_999));
    }

    // Expected bytes worked by hand from the frame layout (packed BCD, two
    // digits per byte, low nibble = lower digit, least significant byte
    // first), not produced by this code:
    //   14 074 000 Hz = digits 00 14 07 40 00 → bytes 00 40 07 14 00
    //    7 074 000 Hz = digits 00 07 07 40 00 → bytes 00 40 07 07 00
    //  145 500 000 Hz = digits 01 45 50 00 00 → bytes 00 00 50 45 01
    //    3 573 000 Hz = digits 00 03 57 30 00 → bytes 00 30 57 03 00
    //  432 100 000 Hz = digits 04 32 10 00 00 → bytes 00 00 10 32 04
    const WORKED: &[(u64, [u8; 5])] = &[
        (14_074_000, [0x00, 0x40, 0x07, 0x14, 0x00]),
        (7_074_000, [0x00, 0x40, 0x07, 0x07, 0x00]),
        (145_500_000, [0x00, 0x00, 0x50, 0x45, 0x01]),
        (3_573_000, [0x00, 0x30, 0x57, 0x03, 0x00]),
        (432_100_000, [0x00, 0x00, 0x10, 0x32, 0x04]),
    ];

    #[test]
    fn worked_examples_encode() {
        for (hz, bytes) in WORKED {
            assert_eq!(encode_le(*hz, 5).as_deref(), Some(&bytes[..]), "{hz}");
        }
    }

    #[test]
    fn worked_examples_decode() {
        for (hz, bytes) in WORKED {
            assert_eq!(decode_le(bytes), Ok(*hz), "{bytes:02X?}");
        }
    }

    #[test]
    fn four_byte_field() {
        // 14 074 000 in 8 digits: 14 07 40 00 → 00 40 07 14 (by hand).
        assert_eq!(encode_le(14_074_000, 4), Some(vec![0x00, 0x40, 0x07, 0x14]));
        assert_eq!(decode_le(&[0x00, 0x40, 0x07, 0x14]), Ok(14_074_000));
    }

    #[test]
    fn too_wide_for_field() {
        assert_eq!(encode_le(100_000_000, 4), None);
        assert_eq!(encode_le(99_999_999, 4), Some(vec![0x99; 4]));
    }

    #[test]
    fn nibble_above_nine_is_named() {
        assert_eq!(
            decode_le(&[0x00, 0x4A, 0x07]),
            Err(BcdError::BadDigit { index: 1 })
        );
        assert_eq!(decode_le(&[0xA0]), Err(BcdError::BadDigit { index: 0 }));
    }

    #[test]
    fn empty_field_is_zero() {
        assert_eq!(decode_le(&[]), Ok(0));
    }
}
