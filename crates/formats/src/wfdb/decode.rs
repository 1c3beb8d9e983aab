//! Decoding of WFDB signal-file byte streams into digital samples.
//!
//! A signal file holds frames; the samples of all signals of the file are
//! interleaved in one stream, and packed formats (212, 310, 311) pack that
//! stream without regard to signal boundaries. These routines therefore decode
//! the stream; de-interleaving happens in the caller.
//!
//! Format definitions (WFDB signal(5) specification, from memory):
//! - 8: 8-bit first differences (two's complement), accumulated from the initial value;
//! - 16: 16-bit two's complement, little-endian; 61: the same, big-endian;
//! - 24, 32: 24/32-bit two's complement, little-endian;
//! - 80: 8-bit offset binary; 160: 16-bit offset binary (little-endian);
//! - 212: two 12-bit samples in three bytes (low 8 bits of the first in byte 0,
//!   its high 4 bits in the low nibble of byte 1; high 4 bits of the second in
//!   the high nibble of byte 1, its low 8 bits in byte 2);
//! - 310: three 10-bit samples in two 16-bit little-endian words, bit 0 of each
//!   word unused, the third sample split over bits 11-15 of both words;
//! - 311: three 10-bit samples in one 32-bit little-endian word (bits 0-9, 10-19, 20-29).
//!
//! The FLAC-compressed formats 508, 516, 524 are no byte stream of samples;
//! the `flac` module reads them (their invalid values are given here).

/// Whether this module can decode `format` (the byte-stream formats; see also
/// [`super::is_flac`]).
pub fn is_supported(format: u32) -> bool {
    matches!(format, 8 | 16 | 24 | 32 | 61 | 80 | 160 | 212 | 310 | 311)
}

/// Human explanation for a format code this reader does not decode.
pub fn unsupported_reason(format: u32) -> String {
    match format {
        0 => "signal format 0 (null signal without samples) is not supported by this reader".into(),
        _ => format!("unknown signal format code {format}"),
    }
}

/// Value that marks an invalid (missing) sample in `format`, if the format has one
/// (WFDB convention; the `wfdb` Python package maps these to NaN). For the FLAC
/// formats it is the most negative value of the format's width (8, 16, 24 bits),
/// whatever the width of the stream itself (`INVALID_SAMPLE_VALUE` in
/// wfdb-python's `wfdb/io/_signal.py`).
pub fn invalid_value(format: u32) -> Option<i32> {
    match format {
        80 | 508 => Some(-(1 << 7)),
        310 | 311 => Some(-(1 << 9)),
        212 => Some(-(1 << 11)),
        16 | 61 | 160 | 516 => Some(-(1 << 15)),
        24 | 524 => Some(-(1 << 23)),
        32 => Some(i32::MIN),
        _ => None,
    }
}

/// Bytes needed to hold the first `n` samples of a stream, `None` on overflow.
///
/// Partial groups of the packed formats need only the bytes that hold their
/// samples (e.g. one sample of a 310 group needs 2 bytes).
pub fn bytes_for_samples(format: u32, n: u64) -> Option<u64> {
    let (group, bytes, partial): (u64, u64, &[u64]) = match format {
        8 | 80 => (1, 1, &[]),
        16 | 61 | 160 => (1, 2, &[]),
        24 => (1, 3, &[]),
        32 => (1, 4, &[]),
        212 => (2, 3, &[0, 2]),
        310 => (3, 4, &[0, 2, 4]),
        311 => (3, 4, &[0, 2, 3]),
        _ => return None,
    };
    let full = (n / group).checked_mul(bytes)?;
    let rem = (n % group) as usize;
    full.checked_add(if rem == 0 { 0 } else { partial[rem] })
}

/// Number of complete samples in `nbytes` bytes of a stream.
pub fn samples_in_bytes(format: u32, nbytes: u64) -> u64 {
    match format {
        8 | 80 => nbytes,
        16 | 61 | 160 => nbytes / 2,
        24 => nbytes / 3,
        32 => nbytes / 4,
        212 => nbytes / 3 * 2 + if nbytes % 3 >= 2 { 1 } else { 0 },
        310 => nbytes / 4 * 3 + [0, 0, 1, 1][(nbytes % 4) as usize],
        311 => nbytes / 4 * 3 + [0, 0, 1, 2][(nbytes % 4) as usize],
        _ => 0,
    }
}

#[inline(always)]
fn sext(v: u32, bits: u32) -> i32 {
    ((v << (32 - bits)) as i32) >> (32 - bits)
}

/// Decode the first `out.len()` samples of the stream in `bytes`.
///
/// For format 8 the output holds the raw first differences. The caller must
/// supply at least [`bytes_for_samples`] bytes; missing bytes of a trailing
/// partial group are read as zero. Unsupported formats leave `out` untouched and
/// return false.
pub fn decode_into(format: u32, bytes: &[u8], out: &mut [i32]) -> bool {
    let n = out.len();
    match format {
        8 => {
            for (o, &b) in out.iter_mut().zip(bytes) {
                *o = b as i8 as i32;
            }
        }
        80 => {
            for (o, &b) in out.iter_mut().zip(bytes) {
                *o = b as i32 - 128;
            }
        }
        16 => {
            for (o, c) in out.iter_mut().zip(bytes.chunks_exact(2)) {
                *o = i16::from_le_bytes([c[0], c[1]]) as i32;
            }
        }
        61 => {
            for (o, c) in out.iter_mut().zip(bytes.chunks_exact(2)) {
                *o = i16::from_be_bytes([c[0], c[1]]) as i32;
            }
        }
        160 => {
            for (o, c) in out.iter_mut().zip(bytes.chunks_exact(2)) {
                *o = u16::from_le_bytes([c[0], c[1]]) as i32 - 32768;
            }
        }
        24 => {
            for (o, c) in out.iter_mut().zip(bytes.chunks_exact(3)) {
                *o = sext(c[0] as u32 | (c[1] as u32) << 8 | (c[2] as u32) << 16, 24);
            }
        }
        32 => {
            for (o, c) in out.iter_mut().zip(bytes.chunks_exact(4)) {
                *o = i32::from_le_bytes([c[0], c[1], c[2], c[3]]);
            }
        }
        212 => {
            let pairs = n / 2;
            for (o, c) in out
                .chunks_exact_mut(2)
                .zip(bytes.chunks_exact(3))
                .take(pairs)
            {
                let (b0, b1, b2) = (c[0] as u32, c[1] as u32, c[2] as u32);
                o[0] = sext(b0 | (b1 & 0x0f) << 8, 12);
                o[1] = sext(b2 | (b1 & 0xf0) << 4, 12);
            }
            if n % 2 == 1 {
                let c = tail::<3>(bytes, pairs * 3);
                out[n - 1] = sext(c[0] as u32 | (c[1] as u32 & 0x0f) << 8, 12);
            }
        }
        310 => {
            let groups = n / 3;
            let f = |c: [u8; 4], o: &mut [i32]| {
                let w0 = u16::from_le_bytes([c[0], c[1]]) as u32;
                let w1 = u16::from_le_bytes([c[2], c[3]]) as u32;
                let s = [
                    (w0 >> 1) & 0x3ff,
                    (w1 >> 1) & 0x3ff,
                    (w0 >> 11) | (w1 >> 11) << 5,
                ];
                for (d, v) in o.iter_mut().zip(s) {
                    *d = sext(v, 10);
                }
            };
            for (o, c) in out
                .chunks_exact_mut(3)
                .zip(bytes.chunks_exact(4))
                .take(groups)
            {
                f([c[0], c[1], c[2], c[3]], o);
            }
            if !n.is_multiple_of(3) {
                f(tail::<4>(bytes, groups * 4), &mut out[groups * 3..]);
            }
        }
        311 => {
            let groups = n / 3;
            let f = |c: [u8; 4], o: &mut [i32]| {
                let w = u32::from_le_bytes(c);
                let s = [w & 0x3ff, (w >> 10) & 0x3ff, (w >> 20) & 0x3ff];
                for (d, v) in o.iter_mut().zip(s) {
                    *d = sext(v, 10);
                }
            };
            for (o, c) in out
                .chunks_exact_mut(3)
                .zip(bytes.chunks_exact(4))
                .take(groups)
            {
                f([c[0], c[1], c[2], c[3]], o);
            }
            if !n.is_multiple_of(3) {
                f(tail::<4>(bytes, groups * 4), &mut out[groups * 3..]);
            }
        }
        _ => return false,
    }
    true
}

/// The `N` bytes from `start`, zero-padded past the end of `bytes`.
fn tail<const N: usize>(bytes: &[u8], start: usize) -> [u8; N] {
    let mut c = [0u8; N];
    for (i, d) in c.iter_mut().enumerate() {
        *d = bytes.get(start + i).copied().unwrap_or(0);
    }
    c
}

/// Encode samples as format 16 (little-endian two's complement).
pub fn encode_16(samples: &[i16], out: &mut Vec<u8>) {
    out.reserve(samples.len() * 2);
    for s in samples {
        out.extend_from_slice(&s.to_le_bytes());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slow bit-by-bit oracle: reads the stream as the specification describes
    /// each format, one sample at a time.
    fn oracle(format: u32, bytes: &[u8], n: usize) -> Vec<i32> {
        let bit = |byte: usize, b: u32| -> u32 {
            (bytes.get(byte).copied().unwrap_or(0) as u32 >> b) & 1
        };
        let mut out = Vec::new();
        for i in 0..n {
            let v: i64 = match format {
                212 => {
                    let g = i / 2 * 3;
                    let mut v = 0u32;
                    for k in 0..12u32 {
                        let b = if i % 2 == 0 {
                            if k < 8 {
                                bit(g, k)
                            } else {
                                bit(g + 1, k - 8)
                            }
                        } else if k < 8 {
                            bit(g + 2, k)
                        } else {
                            bit(g + 1, k - 4)
                        };
                        v |= b << k;
                    }
                    if v >= 2048 {
                        v as i64 - 4096
                    } else {
                        v as i64
                    }
                }
                310 | 311 => {
                    let g = i / 3 * 4;
                    let word_bit = |wb: u32| bit(g + (wb / 8) as usize, wb % 8);
                    let positions: Vec<u32> = match (format, i % 3) {
                        (310, 0) => (1..11).collect(),
                        (310, 1) => (17..27).collect(),
                        (310, _) => (11..16).chain(27..32).collect(),
                        (_, r) => (r as u32 * 10..r as u32 * 10 + 10).collect(),
                    };
                    let mut v = 0u32;
                    for (k, &p) in positions.iter().enumerate() {
                        v |= word_bit(p) << k;
                    }
                    if v >= 512 {
                        v as i64 - 1024
                    } else {
                        v as i64
                    }
                }
                16 => bytes[2 * i] as i64 + 256 * (bytes[2 * i + 1] as i8 as i64),
                61 => bytes[2 * i + 1] as i64 + 256 * (bytes[2 * i] as i8 as i64),
                160 => bytes[2 * i] as i64 + 256 * bytes[2 * i + 1] as i64 - 32768,
                24 => {
                    bytes[3 * i] as i64
                        + 256 * bytes[3 * i + 1] as i64
                        + 65536 * (bytes[3 * i + 2] as i8 as i64)
                }
                32 => {
                    bytes[4 * i] as i64
                        + (bytes[4 * i + 1] as i64) * 256
                        + (bytes[4 * i + 2] as i64) * 65536
                        + (bytes[4 * i + 3] as i8 as i64) * 16777216
                }
                80 => bytes[i] as i64 - 128,
                8 => bytes[i] as i8 as i64,
                _ => unreachable!(),
            };
            out.push(v as i32);
        }
        out
    }

    #[test]
    fn fast_decoders_match_bitwise_oracle() {
        // Deterministic pseudo-random bytes (xorshift), every format, every tail length.
        let mut x = 0x9e3779b97f4a7c15u64;
        let bytes: Vec<u8> = (0..4099)
            .map(|_| {
                x ^= x << 13;
                x ^= x >> 7;
                x ^= x << 17;
                x as u8
            })
            .collect();
        for format in [8, 16, 24, 32, 61, 80, 160, 212, 310, 311] {
            let max = samples_in_bytes(format, bytes.len() as u64) as usize;
            for n in [0, 1, 2, 3, 4, 5, 6, 7, max - 1, max] {
                let need = bytes_for_samples(format, n as u64).unwrap() as usize;
                assert!(need <= bytes.len());
                let mut out = vec![0; n];
                assert!(decode_into(format, &bytes[..need], &mut out));
                assert_eq!(out, oracle(format, &bytes, n), "format {format}, n {n}");
            }
        }
    }

    #[test]
    fn sizes_are_consistent() {
        for format in [8, 16, 24, 32, 61, 80, 160, 212, 310, 311] {
            for n in 0..50u64 {
                let b = bytes_for_samples(format, n).unwrap();
                assert!(samples_in_bytes(format, b) >= n, "format {format} n {n}");
                if n > 0 {
                    assert!(samples_in_bytes(format, b - 1) < n, "format {format} n {n}");
                }
            }
        }
        assert_eq!(bytes_for_samples(16, u64::MAX), None);
    }
}
