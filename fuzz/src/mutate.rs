//! Mutation operators on bytes: flips, interesting bytes, inserts, deletes, copies, splices with another
//! input, dictionary tokens, number swaps and line shuffles. One call stacks one to four of them.

use crate::engine::Rng;
use rand::RngExt;

/// Bytes that often change how text is read: line ends, delimiters, signs, quotes, the lead bytes of
/// `µ`, `Ω`, `°` in UTF-8 and Latin-1, a byte-order mark's bytes, invalid UTF-8.
const INTERESTING: &[u8] = &[
    0x00, 0xff, 0x7f, 0x80, b'\n', b'\r', b'\t', b' ', b',', b';', b'.', b'-', b'+', b'e', b'E',
    b'"', b'\'', b'0', b'9', b'#', b'(', b')', 0xb5, 0xb0, 0xc2, 0xce, 0xa9, 0xef, 0xbb, 0xbf,
];

/// Number texts that sit on edges: zero with a sign, the ends of `f64`, subnormals, overflow, words
/// `str::parse` accepts, hex, decimal commas, a lone exponent.
pub const AWKWARD_NUMBERS: &[&[u8]] = &[
    b"0",
    b"-0",
    b"1",
    b"-1",
    b"1e308",
    b"1.7976931348623157e308",
    b"1e309",
    b"-1e308",
    b"1e-300",
    b"5e-324",
    b"1e-400",
    b"2.2250738585072014e-308",
    b"NaN",
    b"nan",
    b"inf",
    b"-inf",
    b"infinity",
    b"0x10",
    b"1,5",
    b"1.2.3",
    b"e5",
    b"1e",
    b".",
    b"-",
    b"99999999999999999999999999",
    b"18446744073709551616",
    b"4294967296",
];

/// Applies one to four random operators to `data`, keeping it at most `max_len` bytes. `other` is a
/// second input for splices; `dict` the target's tokens.
pub fn mutate(data: &mut Vec<u8>, other: &[u8], dict: &[&[u8]], max_len: usize, rng: &mut Rng) {
    let n = 1 + rng.random_range(0..4);
    for _ in 0..n {
        apply(data, other, dict, rng);
    }
    data.truncate(max_len);
}

fn pos(rng: &mut Rng, len: usize) -> usize {
    rng.random_range(0..=len)
}

fn token<'a>(dict: &[&'a [u8]], rng: &mut Rng) -> &'a [u8] {
    if !dict.is_empty() && rng.random_ratio(3, 4) {
        dict[rng.random_range(0..dict.len())]
    } else {
        AWKWARD_NUMBERS[rng.random_range(0..AWKWARD_NUMBERS.len())]
    }
}

fn is_number_byte(b: u8) -> bool {
    b.is_ascii_digit() || matches!(b, b'.' | b'e' | b'E' | b'+' | b'-')
}

/// Line ranges (each with its `\n`, if any).
fn lines(data: &[u8]) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let mut start = 0;
    for (i, &b) in data.iter().enumerate() {
        if b == b'\n' {
            out.push((start, i + 1));
            start = i + 1;
        }
    }
    if start < data.len() {
        out.push((start, data.len()));
    }
    out
}

fn apply(data: &mut Vec<u8>, other: &[u8], dict: &[&[u8]], rng: &mut Rng) {
    let len = data.len();
    match rng.random_range(0..12) {
        // Flip one bit.
        0 if len > 0 => {
            let i = rng.random_range(0..len);
            data[i] ^= 1 << rng.random_range(0..8);
        }
        // Overwrite one byte with an interesting one.
        1 if len > 0 => {
            let i = rng.random_range(0..len);
            data[i] = INTERESTING[rng.random_range(0..INTERESTING.len())];
        }
        // Insert one to four random or interesting bytes.
        2 => {
            let at = pos(rng, len);
            let k = 1 + rng.random_range(0..4);
            for _ in 0..k {
                let b = if rng.random_bool(0.5) {
                    rng.random()
                } else {
                    INTERESTING[rng.random_range(0..INTERESTING.len())]
                };
                data.insert(at, b);
            }
        }
        // Delete a range of up to 16 bytes.
        3 if len > 0 => {
            let at = rng.random_range(0..len);
            let k = 1 + rng.random_range(0..16.min(len - at));
            data.drain(at..at + k);
        }
        // Copy a range to another place.
        4 if len > 0 => {
            let from = rng.random_range(0..len);
            let k = 1 + rng.random_range(0..64.min(len - from));
            let piece: Vec<u8> = data[from..from + k].to_vec();
            let at = pos(rng, len);
            data.splice(at..at, piece);
        }
        // Splice: a prefix of this input, then a suffix of the other.
        5 if !other.is_empty() => {
            let a = pos(rng, len);
            let b = rng.random_range(0..other.len());
            data.truncate(a);
            data.extend_from_slice(&other[b..]);
        }
        // Insert a token.
        6 => {
            let t = token(dict, rng);
            let at = pos(rng, len);
            data.splice(at..at, t.iter().copied());
        }
        // Overwrite a few bytes with a token.
        7 if len > 0 => {
            let t = token(dict, rng);
            let at = rng.random_range(0..len);
            let k = (1 + rng.random_range(0..8)).min(len - at);
            data.splice(at..at + k, t.iter().copied());
        }
        // Replace one number (a run of digits, points, signs and exponents) by an awkward one.
        8 if len > 0 => {
            let at = rng.random_range(0..len);
            if let Some(s) = (at..len).find(|&i| data[i].is_ascii_digit()) {
                let mut a = s;
                while a > 0 && is_number_byte(data[a - 1]) {
                    a -= 1;
                }
                let mut b = s;
                while b < len && is_number_byte(data[b]) {
                    b += 1;
                }
                let t = AWKWARD_NUMBERS[rng.random_range(0..AWKWARD_NUMBERS.len())];
                data.splice(a..b, t.iter().copied());
            }
        }
        // Delete, repeat or swap whole lines.
        9 => {
            let ls = lines(data);
            if ls.is_empty() {
                return;
            }
            let (a0, a1) = ls[rng.random_range(0..ls.len())];
            match rng.random_range(0..3) {
                0 => {
                    data.drain(a0..a1);
                }
                1 => {
                    let piece: Vec<u8> = data[a0..a1].to_vec();
                    let times = 1 + rng.random_range(0..3);
                    for _ in 0..times {
                        data.splice(a1..a1, piece.iter().copied());
                    }
                }
                _ => {
                    let (b0, b1) = ls[rng.random_range(0..ls.len())];
                    if b0 > a1 {
                        let second: Vec<u8> = data[b0..b1].to_vec();
                        let first: Vec<u8> = data[a0..a1].to_vec();
                        data.splice(b0..b1, first);
                        data.splice(a0..a1, second);
                    }
                }
            }
        }
        // Insert random digits.
        10 => {
            let at = pos(rng, len);
            let k = 1 + rng.random_range(0..6);
            for _ in 0..k {
                data.insert(at, b'0' + rng.random_range(0..10u8));
            }
        }
        // Repeat a short range many times (long tokens, deep nesting, wide lines).
        _ if len > 0 => {
            let from = rng.random_range(0..len);
            let k = 1 + rng.random_range(0..4.min(len - from));
            let piece: Vec<u8> = data[from..from + k].to_vec();
            let times = 2 + rng.random_range(0..64);
            let at = pos(rng, len);
            let repeated: Vec<u8> = piece.iter().copied().cycle().take(k * times).collect();
            data.splice(at..at, repeated);
        }
        _ => {}
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::rng;

    #[test]
    fn mutations_stay_within_the_length_limit_and_change_the_input() {
        let mut r = rng(7);
        let base = b"R0 + Rct|Qdl{n=0.9 fixed}\nrole Rct = charge-transfer\n".to_vec();
        let mut changed = 0;
        for _ in 0..5000 {
            let mut d = base.clone();
            mutate(&mut d, b"L0 + C1", &[b"|", b"(("], 64, &mut r);
            assert!(d.len() <= 64);
            changed += usize::from(d != base);
        }
        // Almost every call changes something (a swap of equal lines or an empty splice may not).
        assert!(
            changed > 4500,
            "only {changed} of 5000 mutations changed the input"
        );
    }

    #[test]
    fn lines_cover_the_input() {
        assert_eq!(lines(b"a\nbc\n\nd"), vec![(0, 2), (2, 5), (5, 6), (6, 7)]);
        assert_eq!(lines(b""), vec![]);
    }
}
