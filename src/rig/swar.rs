//! Eight bytes at a time in one `u64` (SIMD within a register): the
//! searches and the digit reading that both decoder families do on every
//! frame. Messages are a dozen bytes, too short for a library search or
//! vector instructions to pay off, and this needs no `unsafe`.
//!
//! The one trick: for a word `x`, `(x - 0x01…) & !x & 0x80…` sets the top
//! bit of every byte of `x` that is zero, and of no byte below the first
//! zero one (a borrow only runs upward), so the lowest set bit is always
//! the first zero byte. `x = w ^ broadcast(a)` is zero exactly where `w`
//! holds `a`. The same holds with `0x20…` in place of `0x01…` for "byte
//! below 0x20" among bytes below 0x80. Every search here takes the lowest
//! set bit of an OR of such masks, and each mask is exact at its lowest
//! bit, so the result is exact.

const ONES: u64 = 0x0101_0101_0101_0101;
const TOPS: u64 = 0x8080_8080_8080_8080;

#[inline(always)]
fn zero_bytes(x: u64) -> u64 {
    x.wrapping_sub(ONES) & !x & TOPS
}

/// The top bit of every byte of `x` that is zero, and of no other byte
/// (no borrow crosses a byte: each byte's low seven bits plus 0x7F stay
/// within it). A step more than [`zero_bytes`], for when every flagged
/// byte counts, not only the first.
#[inline(always)]
fn zero_bytes_exact(x: u64) -> u64 {
    const LOWS: u64 = 0x7F7F_7F7F_7F7F_7F7F;
    !(((x & LOWS) + LOWS) | x | LOWS)
}

/// The bytes of `w` equal to `a`, `b` or `c` (given as broadcast words,
/// `0x0101… * byte`), as the top bit of each such byte, exactly.
#[inline(always)]
pub(crate) fn equal_to_any(w: u64, a: u64, b: u64, c: u64) -> u64 {
    zero_bytes_exact(w ^ a) | zero_bytes_exact(w ^ b) | zero_bytes_exact(w ^ c)
}

/// `byte` in every lane of a word.
#[inline(always)]
pub(crate) const fn broadcast(byte: u8) -> u64 {
    ONES * byte as u64
}

#[inline(always)]
fn word(chunk: &[u8]) -> u64 {
    let mut b = [0u8; 8];
    b.copy_from_slice(chunk);
    u64::from_le_bytes(b)
}

/// Offset of the first byte of `hay` for which `hits` (a mask as above
/// over one little-endian word) flags it, or for which `plain` holds in the
/// last few bytes.
#[inline(always)]
fn first(hay: &[u8], hits: impl Fn(u64) -> u64, plain: impl Fn(u8) -> bool) -> Option<usize> {
    let mut at = 0;
    let mut words = hay.chunks_exact(8);
    for chunk in words.by_ref() {
        let h = hits(word(chunk));
        if h != 0 {
            return Some(at + (h.trailing_zeros() / 8) as usize);
        }
        at += 8;
    }
    words
        .remainder()
        .iter()
        .position(|&c| plain(c))
        .map(|p| at + p)
}

/// Offset of the first byte equal to `a` or `b`.
#[inline(always)]
pub(crate) fn find_either(hay: &[u8], a: u8, b: u8) -> Option<usize> {
    let (wa, wb) = (ONES * u64::from(a), ONES * u64::from(b));
    first(
        hay,
        |w| zero_bytes(w ^ wa) | zero_bytes(w ^ wb),
        |c| c == a || c == b,
    )
}

/// Offset of the first byte that is `stop` or not printable ASCII
/// (outside 0x20..=0x7E).
#[inline(always)]
pub(crate) fn find_stop_or_unprintable(hay: &[u8], stop: u8) -> Option<usize> {
    let (ws, wdel) = (ONES * u64::from(stop), ONES * 0x7F);
    first(
        hay,
        |w| {
            let high = w & TOPS;
            let control = w.wrapping_sub(ONES * 0x20) & !w & TOPS;
            high | control | zero_bytes(w ^ wdel) | zero_bytes(w ^ ws)
        },
        |c| c == stop || !(0x20..0x7F).contains(&c),
    )
}

/// Eight ASCII decimal digits, most significant first (the first byte in
/// the lowest lane of a little-endian word), as a number; `None` if any
/// byte is not a digit.
#[inline(always)]
pub(crate) fn ascii_digits8(w: u64) -> Option<u64> {
    // A digit is 0x30..=0x39: high nibble 3, and the low nibble plus 6
    // stays below 16.
    const NIBBLES: u64 = 0x0F0F_0F0F_0F0F_0F0F;
    if w & !NIBBLES != 0x30 * ONES || (w & NIBBLES).wrapping_add(6 * ONES) & !NIBBLES != 0 {
        return None;
    }
    let d = w & NIBBLES;
    // Merge neighbouring lanes, the lower lane being the more significant:
    // 2 digits in 16 bits (≤ 99), 4 in 32 (≤ 9 999), then the two halves.
    let by16 = (d & 0x00FF_00FF_00FF_00FF) * 10 + ((d >> 8) & 0x00FF_00FF_00FF_00FF);
    let by32 = (by16 & 0x0000_FFFF_0000_FFFF) * 100 + ((by16 >> 16) & 0x0000_FFFF_0000_FFFF);
    Some((by32 & 0xFFFF_FFFF) * 10_000 + (by32 >> 32))
}

const POW10: [u64; 9] = [
    1,
    10,
    100,
    1_000,
    10_000,
    100_000,
    1_000_000,
    10_000_000,
    100_000_000,
];

/// The low `k` bytes of a word, for k = 0..=8.
const OVERLAP: [u64; 9] = [
    0,
    0xFF,
    0xFFFF,
    0xFF_FFFF,
    0xFFFF_FFFF,
    0xFF_FFFF_FFFF,
    0xFFFF_FFFF_FFFF,
    0xFF_FFFF_FFFF_FFFF,
    u64::MAX,
];

/// A field of 1 to 16 ASCII decimal digits, most significant first, as a
/// number; `None` if any byte is not a digit or the field is empty or
/// longer than 16.
#[inline(always)]
pub(crate) fn ascii_digits(field: &[u8]) -> Option<u64> {
    let n = field.len();
    match n {
        1..=7 => {
            // Leading zeros in front, then one word.
            let mut b = [b'0'; 8];
            b.get_mut(8 - n..)?.copy_from_slice(field);
            ascii_digits8(u64::from_le_bytes(b))
        }
        8..=16 => {
            // The first eight, then the last eight with the ones already
            // read (the overlap) turned into leading zeros.
            let head = u64::from_le_bytes(*field.first_chunk::<8>()?);
            let tail = u64::from_le_bytes(*field.last_chunk::<8>()?);
            let overlap = OVERLAP[(16 - n).min(8)];
            let tail = (tail & !overlap) | ((0x30 * ONES) & overlap);
            let low = ascii_digits8(tail)?;
            let high = ascii_digits8(head)?;
            Some(high * POW10[(n - 8).min(8)] + low)
        }
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A small alphabet so that matches, repeats and near-misses (bytes
    /// one above or below, borrows across 0x00, 0x20, 0x7F and 0x80) are
    /// common.
    const ALPHABET: [u8; 16] = [
        0x00, 0x01, 0x1F, 0x20, 0x21, 0x30, 0x39, 0x3A, 0x3B, 0x7E, 0x7F, 0x80, 0x81, 0xFD, 0xFE,
        0xFF,
    ];

    fn random_hay(rng: &mut fastrand::Rng) -> Vec<u8> {
        let len = rng.usize(0..40);
        (0..len)
            .map(|_| ALPHABET[rng.usize(0..ALPHABET.len())])
            .collect()
    }

    #[test]
    fn find_either_agrees_with_a_plain_search() {
        let mut rng = fastrand::Rng::with_seed(5);
        for _ in 0..20_000 {
            let hay = random_hay(&mut rng);
            let (a, b) = (
                ALPHABET[rng.usize(0..ALPHABET.len())],
                ALPHABET[rng.usize(0..ALPHABET.len())],
            );
            let plain = hay.iter().position(|&c| c == a || c == b);
            assert_eq!(find_either(&hay, a, b), plain, "{hay:02X?} {a:02X} {b:02X}");
        }
    }

    #[test]
    fn equal_to_any_flags_exactly_the_equal_bytes() {
        let mut rng = fastrand::Rng::with_seed(9);
        for _ in 0..50_000 {
            let bytes: [u8; 8] = std::array::from_fn(|_| ALPHABET[rng.usize(0..ALPHABET.len())]);
            let (a, b, c) = (
                rng.u8(..),
                ALPHABET[rng.usize(0..16)],
                ALPHABET[rng.usize(0..16)],
            );
            let got = equal_to_any(
                u64::from_le_bytes(bytes),
                broadcast(a),
                broadcast(b),
                broadcast(c),
            );
            for (i, &x) in bytes.iter().enumerate() {
                let flagged = got >> (8 * i + 7) & 1 == 1;
                assert_eq!(flagged, x == a || x == b || x == c, "{bytes:02X?} {i}");
            }
            assert_eq!(got & !TOPS, 0);
        }
    }

    #[test]
    fn find_stop_agrees_with_a_plain_search() {
        let mut rng = fastrand::Rng::with_seed(6);
        for _ in 0..20_000 {
            let hay = random_hay(&mut rng);
            let stop = ALPHABET[rng.usize(0..ALPHABET.len())];
            let plain = hay
                .iter()
                .position(|&c| c == stop || !(0x20..=0x7E).contains(&c));
            assert_eq!(
                find_stop_or_unprintable(&hay, stop),
                plain,
                "{hay:02X?} {stop:02X}"
            );
        }
        // Every single byte value, alone in a word and after seven
        // printable ones.
        for b in 0..=255u8 {
            let mut hay = *b"ABCDEFG?";
            hay[7] = b;
            let want = (b == b';' || !(0x20..=0x7E).contains(&b)).then_some(7);
            assert_eq!(find_stop_or_unprintable(&hay, b';'), want, "{b:02X}");
        }
    }

    #[test]
    fn digits_agree_with_str_parse() {
        let mut rng = fastrand::Rng::with_seed(7);
        for n in [
            0u64, 1, 9, 10, 99_999_999, 12_345_678, 7_074_000, 10_000_000,
        ] {
            let text = format!("{n:08}");
            let bytes: [u8; 8] = text.as_bytes().try_into().unwrap();
            assert_eq!(ascii_digits8(u64::from_le_bytes(bytes)), Some(n), "{text}");
        }
        for text in [
            "7",
            "00014074000",
            "9999999999999999",
            "0000000000000001",
            "123456789",
        ] {
            assert_eq!(ascii_digits(text.as_bytes()), text.parse().ok(), "{text}");
        }
        assert_eq!(ascii_digits(b""), None);
        assert_eq!(ascii_digits(b"00000000000000000"), None);
        for _ in 0..100_000 {
            let len = rng.usize(0..19);
            let field: Vec<u8> = (0..len)
                .map(|_| match rng.u8(0..12) {
                    // Mostly digits, sometimes a neighbour of the digit
                    // range or any byte at all.
                    10 => [b'/', b':', b' ', 0xB0, 0x00, b'A'][rng.usize(0..6)],
                    11 => rng.u8(..),
                    d => b'0' + d.min(9),
                })
                .collect();
            let plain = std::str::from_utf8(&field)
                .ok()
                .filter(|s| (1..=16).contains(&s.len()) && s.bytes().all(|c| c.is_ascii_digit()))
                .and_then(|s| s.parse::<u64>().ok());
            assert_eq!(ascii_digits(&field), plain, "{field:02X?}");
        }
    }
}
