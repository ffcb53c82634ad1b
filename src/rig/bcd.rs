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
pub fn decode_le(bytes: &[u8]) -> Result<u64, BcdError> {
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
