//! Sample-wise (column) medians of equal-length rows: a median beat from its
//! aligned beats, a detection template from its beats.
//!
//! Every column is the median in the order of `f64::total_cmp` (the mean of
//! the two middle values for an even count), bit for bit the value of
//! [`crate::select::median_of_keys`] on that column; [`column_median_keys`]
//! computes it that way and is the test oracle.

use crate::select::{median_of_keys, total_key};

/// Sample-wise median of equal-length segments (mean of the two middle values for even counts).
///
/// Every column is the median in the order of `f64::total_cmp`, bit for bit the
/// same as [`column_median_keys`] (the test oracle). For 2 to [`NET_MAX`]
/// segments the columns are sorted all at once by a comparator network
/// (Batcher's odd–even merge sort, pruned to the median ranks) applied row
/// against row: each comparator is a branch-free SIMD min/max over whole
/// rows instead of a small sort with data-dependent branches per column.
/// Without NaN, plain `<` agrees with `total_cmp` except that it ties −0 and
/// +0, so a column holding NaN or an infinity, or with a zero among its
/// middle values, is taken again by the key path ([`median_rows`]).
pub fn column_median<S: AsRef<[f64]>>(segments: &[S]) -> Vec<f64> {
    let n = segments.len();
    if !(2..=NET_MAX).contains(&n) {
        return column_median_keys(segments);
    }
    let len = segments[0].as_ref().len();
    let mut rows = Vec::with_capacity(n * len);
    for s in segments {
        rows.extend_from_slice(&s.as_ref()[..len]);
    }
    median_rows(&mut rows, n, len)
}

/// Largest segment count [`column_median`] sorts by a comparator network.
pub const NET_MAX: usize = 32;

/// [`column_median`] of `n` segments of `len` values stored one after the other
/// in `rows` (reordered in place: each column is permuted).
pub fn median_rows(rows: &mut [f64], n: usize, len: usize) -> Vec<f64> {
    assert_eq!(rows.len(), n * len, "{n} rows of {len} values");
    if !(2..=NET_MAX).contains(&n) {
        return column_median_keys(&rows.chunks_exact(len.max(1)).collect::<Vec<_>>());
    }
    // A column holding NaN or an infinity ends with a NaN sum here (v · 0).
    let mut nonfinite = vec![0.0f64; len];
    for r in rows.chunks_exact(len.max(1)) {
        for (acc, v) in nonfinite.iter_mut().zip(r) {
            *acc += v * 0.0;
        }
    }
    for &(i, j) in median_network(n) {
        let (lo, hi) = rows.split_at_mut(j as usize * len);
        compare_rows(
            &mut lo[i as usize * len..(i as usize + 1) * len],
            &mut hi[..len],
        );
    }
    let m = n / 2;
    let mid = &rows[m * len..(m + 1) * len];
    // The value below the middle for even `n`; the middle itself for odd `n`.
    let lo = m + n % 2 - 1;
    let below = &rows[lo * len..(lo + 1) * len];
    let mut out: Vec<f64> = if n % 2 == 1 {
        mid.to_vec()
    } else {
        below.iter().zip(mid).map(|(b, c)| 0.5 * (b + c)).collect()
    };
    // Without NaN, `<` orders as `total_cmp` except that it ties −0 and +0,
    // so the network's middle values are exact unless one of them is a zero
    // (of either sign), or the column holds a NaN. Infinities take the key
    // path as well (a rare case not worth a finer test).
    let mut col = Vec::with_capacity(n);
    for k in 0..len {
        if nonfinite[k] == 0.0 && mid[k] != 0.0 && below[k] != 0.0 {
            continue;
        }
        col.clear();
        col.extend((0..n).map(|r| total_key(rows[r * len + k])));
        out[k] = median_of_keys(&mut col).unwrap_or(f64::NAN);
    }
    out
}

/// One comparator over two whole rows: per column, `(p, q)` becomes
/// `(p, q)` if `p < q` and `(q, p)` otherwise (also when unordered, so a
/// column stays a permutation of its values, NaN included).
fn compare_rows(a: &mut [f64], b: &mut [f64]) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: the CPU supports AVX (checked just above).
            unsafe { compare_rows_avx(a, b) };
        } else {
            compare_rows_sse2(a, b);
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    compare_rows_scalar(a, b);
}

/// [`compare_rows`] column by column: the plain form and the SIMD forms' oracle.
fn compare_rows_scalar(a: &mut [f64], b: &mut [f64]) {
    for (x, y) in a.iter_mut().zip(b.iter_mut()) {
        let (p, q) = (*x, *y);
        if p < q {
            continue;
        }
        *x = q;
        *y = p;
    }
}

// MINPD(p, q) is `p < q ? p : q` and MAXPD(q, p) is `q > p ? q : p` lane by
// lane (Intel SDM, MINPD/MAXPD: the second operand when unordered or
// equal): exactly the scalar rule above.
#[cfg(target_arch = "x86_64")]
fn compare_rows_sse2(a: &mut [f64], b: &mut [f64]) {
    use std::arch::x86_64::{_mm_loadu_pd, _mm_max_pd, _mm_min_pd, _mm_storeu_pd};
    let n = a.len().min(b.len());
    let mut k = 0;
    while k + 2 <= n {
        // SAFETY: SSE2 is part of x86_64; `k + 2 <= n` keeps the two lanes in
        // both slices, which do not overlap (two `&mut`).
        unsafe {
            let p = _mm_loadu_pd(a.as_ptr().add(k));
            let q = _mm_loadu_pd(b.as_ptr().add(k));
            _mm_storeu_pd(a.as_mut_ptr().add(k), _mm_min_pd(p, q));
            _mm_storeu_pd(b.as_mut_ptr().add(k), _mm_max_pd(q, p));
        }
        k += 2;
    }
    compare_rows_scalar(&mut a[k..n], &mut b[k..n]);
}

/// [`compare_rows_sse2`] four lanes at a time.
///
/// # Safety
/// The CPU must support AVX.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
unsafe fn compare_rows_avx(a: &mut [f64], b: &mut [f64]) {
    use std::arch::x86_64::{_mm256_loadu_pd, _mm256_max_pd, _mm256_min_pd, _mm256_storeu_pd};
    let n = a.len().min(b.len());
    let mut k = 0;
    while k + 4 <= n {
        // SAFETY: as in `compare_rows_sse2`, with four lanes; AVX is
        // guaranteed by the caller.
        unsafe {
            let p = _mm256_loadu_pd(a.as_ptr().add(k));
            let q = _mm256_loadu_pd(b.as_ptr().add(k));
            _mm256_storeu_pd(a.as_mut_ptr().add(k), _mm256_min_pd(p, q));
            _mm256_storeu_pd(b.as_mut_ptr().add(k), _mm256_max_pd(q, p));
        }
        k += 4;
    }
    compare_rows_sse2(&mut a[k..n], &mut b[k..n]);
}

/// Comparators `(i, j)`, `i < j`, that leave the median rank(s) of `n`
/// inputs (`n / 2`, and `n / 2 − 1` for even `n`) in place, smaller value
/// at `i`: Batcher's odd–even merge sort (AFIPS SJCC 1968) for the next
/// power of two, without the comparators that touch an input beyond `n`
/// (padding with +∞ makes them no-ops) and without those whose outputs never
/// reach a median position. Built once per `n`.
fn median_network(n: usize) -> &'static [(u8, u8)] {
    use std::sync::OnceLock;
    static NETS: [OnceLock<Vec<(u8, u8)>>; NET_MAX + 1] = [const { OnceLock::new() }; NET_MAX + 1];
    NETS[n].get_or_init(|| {
        let full = batcher_network(n);
        let mut needed = vec![false; n];
        // The middle rank, and the one below it for even `n`.
        needed[n / 2] = true;
        needed[(n - 1) / 2] = true;
        let mut keep: Vec<(u8, u8)> = Vec::new();
        for &(i, j) in full.iter().rev() {
            if needed[i as usize] || needed[j as usize] {
                needed[i as usize] = true;
                needed[j as usize] = true;
                keep.push((i, j));
            }
        }
        keep.reverse();
        keep
    })
}

/// Batcher's odd–even merge sort network for `n` inputs (`n <= 256`).
fn batcher_network(n: usize) -> Vec<(u8, u8)> {
    let size = n.next_power_of_two();
    let mut net = Vec::new();
    let mut p = 1;
    while p < size {
        let mut k = p;
        while k >= 1 {
            let mut j = k % p;
            while j + k < size {
                for i in 0..k.min(size - j - k) {
                    if (i + j) / (2 * p) == (i + j + k) / (2 * p) && i + j + k < n {
                        net.push(((i + j) as u8, (i + j + k) as u8));
                    }
                }
                j += 2 * k;
            }
            k /= 2;
        }
        p *= 2;
    }
    net
}

/// Sample-wise median by integer keys, one small sort per column: the form
/// [`column_median`] replaces and its test oracle.
pub fn column_median_keys<S: AsRef<[f64]>>(segments: &[S]) -> Vec<f64> {
    let Some(first) = segments.first() else {
        return Vec::new();
    };
    let mut col = Vec::with_capacity(segments.len());
    (0..first.as_ref().len())
        .map(|k| {
            col.clear();
            col.extend(segments.iter().map(|s| total_key(s.as_ref()[k])));
            median_of_keys(&mut col).unwrap_or(f64::NAN)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lcg(state: &mut u64) -> f64 {
        *state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((*state >> 11) as f64) / ((1u64 << 53) as f64)
    }

    // The comparator networks sort by the 0-1 principle (Knuth, TAOCP vol. 3,
    // 5.3.4): a network puts the right value at an output for every input iff
    // it does so for every input of zeros and ones. Full networks are checked
    // at every position, the pruned ones at the median position(s).
    #[test]
    fn networks_sort_every_zero_one_input() {
        for n in 1..=16usize {
            let full = batcher_network(n);
            let med = median_network(n);
            assert!(med.len() <= full.len());
            for bits in 0u32..(1 << n) {
                let input: Vec<u8> = (0..n).map(|i| ((bits >> i) & 1) as u8).collect();
                let mut sorted = input.clone();
                sorted.sort_unstable();
                let run = |net: &[(u8, u8)]| {
                    let mut v = input.clone();
                    for &(i, j) in net {
                        let (i, j) = (i as usize, j as usize);
                        if v[i] > v[j] {
                            v.swap(i, j);
                        }
                    }
                    v
                };
                assert_eq!(run(&full), sorted, "n={n} bits={bits:b}");
                let m = run(med);
                assert_eq!(m[n / 2], sorted[n / 2], "n={n} bits={bits:b}");
                if n % 2 == 0 {
                    assert_eq!(m[n / 2 - 1], sorted[n / 2 - 1], "n={n} bits={bits:b}");
                }
            }
        }
        // Larger counts: random 0-1 inputs.
        let mut s = 5u64;
        for n in 17..=NET_MAX {
            let med = median_network(n);
            for _ in 0..20_000 {
                let input: Vec<u8> = (0..n).map(|_| (lcg(&mut s) < 0.5) as u8).collect();
                let mut sorted = input.clone();
                sorted.sort_unstable();
                let mut v = input.clone();
                for &(i, j) in med {
                    let (i, j) = (i as usize, j as usize);
                    if v[i] > v[j] {
                        v.swap(i, j);
                    }
                }
                assert_eq!(v[n / 2], sorted[n / 2], "n={n}");
                if n % 2 == 0 {
                    assert_eq!(v[n / 2 - 1], sorted[n / 2 - 1], "n={n}");
                }
            }
        }
    }

    // The SIMD comparators against the scalar rule (oracle), bit for bit:
    // ties, signed zeros, NaN on either side, infinities, every tail length.
    #[test]
    fn simd_comparator_equals_scalar_rule() {
        let mut s = 3u64;
        let pick = |r: f64| -> f64 {
            match (r * 10.0) as u32 {
                0 => 0.0,
                1 => -0.0,
                2 => f64::NAN,
                3 => f64::INFINITY,
                4 => f64::NEG_INFINITY,
                5 => 1.0,
                _ => r - 0.5,
            }
        };
        for len in 0..23 {
            for _ in 0..50 {
                let a: Vec<f64> = (0..len).map(|_| pick(lcg(&mut s))).collect();
                let b: Vec<f64> = (0..len).map(|_| pick(lcg(&mut s))).collect();
                let (mut fa, mut fb) = (a.clone(), b.clone());
                let (mut sa, mut sb) = (a.clone(), b.clone());
                compare_rows(&mut fa, &mut fb);
                compare_rows_scalar(&mut sa, &mut sb);
                let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                assert_eq!(
                    (bits(&fa), bits(&fb)),
                    (bits(&sa), bits(&sb)),
                    "{a:?} {b:?}"
                );
                #[cfg(target_arch = "x86_64")]
                {
                    let (mut ta, mut tb) = (a.clone(), b.clone());
                    compare_rows_sse2(&mut ta, &mut tb);
                    assert_eq!((bits(&ta), bits(&tb)), (bits(&sa), bits(&sb)));
                }
            }
        }
    }

    // The network median against one key sort per column (oracle), bit for
    // bit: 1 to 40 segments (network and key paths), ties, signed zeros,
    // NaN and infinities in some columns, values of mixed magnitudes.
    #[test]
    fn network_median_equals_key_median() {
        let mut s = 17u64;
        for n in 1..=40usize {
            for round in 0..6 {
                let len: usize = 1 + (round * 37) % 90;
                let segs: Vec<Vec<f64>> = (0..n)
                    .map(|_| {
                        (0..len)
                            .map(|k| {
                                let r = lcg(&mut s);
                                match (k + round) % 11 {
                                    0 if r < 0.3 => 0.0,
                                    1 if r < 0.3 => -0.0,
                                    2 if r < 0.05 => f64::NAN,
                                    3 if r < 0.05 => f64::INFINITY,
                                    4 if r < 0.05 => f64::NEG_INFINITY,
                                    5 => (r * 4.0).floor() - 2.0, // many ties
                                    _ => (r - 0.5) * 10f64.powi((k % 5) as i32 - 2),
                                }
                            })
                            .collect()
                    })
                    .collect();
                let fast = column_median(&segs);
                let slow = column_median_keys(&segs);
                let fb: Vec<u64> = fast.iter().map(|v| v.to_bits()).collect();
                let sb: Vec<u64> = slow.iter().map(|v| v.to_bits()).collect();
                assert_eq!(fb, sb, "n={n} len={len}");
            }
        }
        let empty: Vec<Vec<f64>> = Vec::new();
        assert!(column_median(&empty).is_empty());
    }
}
