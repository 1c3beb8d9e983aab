//! Dyadic stationary (à trous, undecimated) wavelet transform with the
//! quadratic spline wavelet, the multiscale derivative used by wave
//! delineation.
//!
//! The wavelet is the one of Mallat & Zhong (IEEE PAMI 1992) as used by
//! Li, Zheng & Tai (IEEE TBME 1995) and Martínez et al. (IEEE TBME 2004):
//!
//! * low-pass `H(e^jω) = e^{jω/2} cos³(ω/2)`, i.e. `h[-2..=1] = [1, 3, 3, 1] / 8`,
//! * high-pass `G(e^jω) = 4j e^{jω/2} sin(ω/2)`, i.e. `g[-1..=0] = [2, -2]`.
//!
//! At scale `2^k` (k = 1..=n_scales) both filters are upsampled by inserting
//! `2^(k-1) - 1` zeros between taps:
//! `A_0 = x`, `W_k = g_k * A_{k-1}`, `A_k = h_k * A_{k-1}`.
//! `W_k` is proportional to the derivative of `x` smoothed by a kernel whose
//! width doubles with k; its zero crossings mark wave peaks and its modulus
//! maxima mark the steepest slopes.
//!
//! # Conventions
//!
//! * **Delay.** Every upsampled filter above is centred half a tap to the
//!   left of sample 0, so the raw cascade output at `n` is centred at
//!   `n + (2^k - 1) / 2`. The integer part `2^(k-1) - 1` is compensated; the
//!   returned `W_k[n]` is the smoothed derivative centred at **`n + 1/2`**
//!   (half a sample after `x[n]`). Consequently a sign change between
//!   `W_k[n-1]` and `W_k[n]` means an extremum of the smoothed `x` nearest
//!   to sample `n`.
//! * **Edges.** The input is extended by half-sample symmetric reflection
//!   (`x[-1] = x[0]`, `x[-2] = x[1]`, ..., periodic with period `2N` for
//!   very short inputs), so a constant input gives exactly zero details and
//!   no edge step is created.
//! * **Gain.** No normalisation: a unit-slope ramp gives `W_k = 2^k` inside
//!   the signal (the high-pass has gain 2 per sample of difference and the
//!   low-pass has unit DC gain).
//! * Output arrays have the same length as the input.

/// Low-pass taps at offsets -2..=1 (Mallat & Zhong 1992).
const H: [f64; 4] = [1.0 / 8.0, 3.0 / 8.0, 3.0 / 8.0, 1.0 / 8.0];
const H_FIRST_OFFSET: isize = -2;
/// High-pass taps at offsets -1..=0 (Mallat & Zhong 1992).
const G: [f64; 2] = [2.0, -2.0];
const G_FIRST_OFFSET: isize = -1;

/// Index into a half-sample symmetric extension of a length-`n` signal.
fn mirror(i: isize, n: usize) -> usize {
    let n = n as isize;
    let period = 2 * n;
    let mut m = i.rem_euclid(period);
    if m >= n {
        m = period - 1 - m;
    }
    m as usize
}

/// The stationary quadratic-spline wavelet transform of `x`.
///
/// Returns `n_scales` detail arrays `W_1..W_{n_scales}` (index 0 is scale
/// 2^1), each of `x.len()` samples, aligned as described in the module docs.
/// An empty input gives `n_scales` empty arrays. `n_scales` above 12 is
/// capped at 12 (the filters would be longer than any ECG beat).
///
/// The taps are applied in the same order with the same arithmetic as the
/// direct definition ([`swt_quadratic_spline_reference`], kept as the test
/// oracle), so the two agree bit for bit; this version only drops the
/// per-tap bounds tests in the interior, writes the cropped details straight
/// into the outputs and skips the approximation nobody reads.
pub fn swt_quadratic_spline(x: &[f64], n_scales: usize) -> Vec<Vec<f64>> {
    swt_extended(x, n_scales, false, false)
}

/// [`swt_quadratic_spline`] of an input that may begin and end with long
/// runs of one value (the padding of a tiled median beat), with the same
/// result bit for bit, and the range outside which every detail is exactly
/// zero.
///
/// Why the runs can be skipped: where every input within a filter's reach
/// is the same finite value `c`, every approximation of a level is computed
/// from equal inputs by the same operations, hence equal, and the detail
/// `2a - 2a` is exactly `+0.0`. At scale `2^k` a detail reaches `2^k - 1`
/// samples ahead and `2^k - 2` back, so details more than `2^K` (K =
/// `n_scales`) samples inside a run are zero. The transform runs on the
/// input cut `2^K` samples inside each run of at least `2^K + 4·2^K`
/// samples (a run that long makes the full input's reflected extension
/// constant too), with that side extended by repeating its edge value
/// instead of reflecting: every kept detail then sees the same values as in
/// the full transform. The zero details of the cut parts are filled in.
/// ([`swt_quadratic_spline`] is the test oracle.)
pub fn swt_quadratic_spline_flat_ends(
    x: &[f64],
    n_scales: usize,
) -> (Vec<Vec<f64>>, std::ops::Range<usize>) {
    let k = n_scales.min(12);
    let n = x.len();
    let whole = |x: &[f64]| (swt_quadratic_spline(x, n_scales), 0..x.len());
    if n == 0 {
        return whole(x);
    }
    let (pad, keep) = (4usize << k, 1usize << k);
    // Bounded values only: a NaN or infinite run gives NaN details, and
    // values near the largest f64 could overflow in `2a`.
    let flat = |c: f64| c.abs() < 1e300;
    let run = |it: &mut dyn Iterator<Item = &f64>, c: f64| {
        it.take_while(|v| v.to_bits() == c.to_bits()).count()
    };
    let lead = run(&mut x.iter(), x[0]);
    if lead == n {
        return whole(x);
    }
    let trail = run(&mut x.iter().rev(), x[n - 1]);
    let cut = |len: usize, c: f64| {
        if len >= pad + keep && flat(c) {
            len - keep
        } else {
            0
        }
    };
    let (c0, c1) = (cut(lead, x[0]), cut(trail, x[n - 1]));
    // The reflected side of a cut input must not wrap around (at least
    // `pad` samples, as in the full input).
    if (c0 == 0 && c1 == 0) || n - c0 - c1 < pad {
        return whole(x);
    }
    let inner = swt_extended(&x[c0..n - c1], n_scales, c0 > 0, c1 > 0);
    let w = inner
        .into_iter()
        .map(|v| {
            let mut full = Vec::with_capacity(n);
            full.resize(c0, 0.0);
            full.extend_from_slice(&v);
            full.resize(n, 0.0);
            full
        })
        .collect();
    (w, c0..n - c1)
}

/// The transform with each side extended by reflection, or by repeating the
/// edge value (`clamp_start`, `clamp_end`); compiled for AVX as well and run
/// that way where the processor has it (twice the vector width for the same
/// multiplications and additions in the same order, hence the same bits: no
/// fused multiply-add is enabled).
fn swt_extended(x: &[f64], n_scales: usize, clamp_start: bool, clamp_end: bool) -> Vec<Vec<f64>> {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx") {
        // SAFETY: the CPU supports AVX (checked just above).
        return unsafe { swt_extended_avx(x, n_scales, clamp_start, clamp_end) };
    }
    swt_extended_body(x, n_scales, clamp_start, clamp_end)
}

/// [`swt_extended`] compiled for AVX.
///
/// # Safety
/// The CPU must support AVX.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
unsafe fn swt_extended_avx(
    x: &[f64],
    n_scales: usize,
    clamp_start: bool,
    clamp_end: bool,
) -> Vec<Vec<f64>> {
    swt_extended_body(x, n_scales, clamp_start, clamp_end)
}

#[inline(always)]
fn swt_extended_body(
    x: &[f64],
    n_scales: usize,
    clamp_start: bool,
    clamp_end: bool,
) -> Vec<Vec<f64>> {
    let n_scales = n_scales.min(12);
    let n = x.len();
    if n == 0 {
        return vec![Vec::new(); n_scales];
    }
    let pad = 4usize << n_scales;
    let len = n + 2 * pad;
    // The extension: `x` itself in the middle, the index arithmetic of
    // `mirror` only for the pads.
    let mut approx: Vec<f64> = Vec::with_capacity(len);
    if clamp_start {
        approx.resize(pad, x[0]);
    } else {
        approx.extend((0..pad).map(|i| x[mirror(i as isize - pad as isize, n)]));
    }
    approx.extend_from_slice(x);
    if clamp_end {
        approx.resize(len, x[n - 1]);
    } else {
        approx.extend((pad + n..len).map(|i| x[mirror(i as isize - pad as isize, n)]));
    }
    // Every sample of `next` is written each scale: no zero fill needed.
    let mut next: Vec<f64> = Vec::with_capacity(len);
    let mut out = Vec::with_capacity(n_scales);
    for k in 1..=n_scales {
        let s = 1usize << (k - 1);
        let delay = s - 1;
        // Details of the kept samples: every tap index is inside the padded
        // buffer (pad = 4·2^n_scales exceeds both the delay and the reach).
        let a = &approx[pad - delay..pad - delay + n + s];
        let w: Vec<f64> = a[s..]
            .iter()
            .zip(&a[..n])
            .map(|(&ahead, &here)| {
                let mut d = 0.0;
                d += G[0] * ahead;
                d += G[1] * here;
                d
            })
            .collect();
        out.push(w);
        if k == n_scales {
            break;
        }
        // Approximation for the next scale over the whole padded buffer; the
        // zero extension beyond it only matters within 2s samples of its ends.
        let get = |v: &[f64], i: isize| -> f64 {
            if i < 0 || i >= len as isize {
                0.0
            } else {
                v[i as usize]
            }
        };
        let lo = s.min(len);
        let hi = len.saturating_sub(2 * s).max(lo);
        let edge = |i: usize, approx: &[f64]| -> f64 {
            let mut v = 0.0;
            for (t, &c) in H.iter().enumerate() {
                v += c * get(
                    approx,
                    i as isize - (H_FIRST_OFFSET + t as isize) * s as isize,
                );
            }
            v
        };
        next.clear();
        next.extend((0..lo).map(|i| edge(i, &approx)));
        let (p2, p1, p0, m1) = (
            &approx[lo + 2 * s..hi + 2 * s],
            &approx[lo + s..hi + s],
            &approx[lo..hi],
            &approx[lo - s..hi - s],
        );
        next.extend(
            p2.iter()
                .zip(p1)
                .zip(p0)
                .zip(m1)
                .map(|(((&a2, &a1), &a0), &am)| {
                    let mut v = 0.0;
                    v += H[0] * a2;
                    v += H[1] * a1;
                    v += H[2] * a0;
                    v += H[3] * am;
                    v
                }),
        );
        next.extend((hi..len).map(|i| edge(i, &approx)));
        debug_assert_eq!(next.len(), len);
        std::mem::swap(&mut approx, &mut next);
    }
    out
}

/// The direct definition of [`swt_quadratic_spline`] (every tap bounds-checked,
/// full cascade): the slow, obvious oracle its tests compare with bit for bit.
pub fn swt_quadratic_spline_reference(x: &[f64], n_scales: usize) -> Vec<Vec<f64>> {
    let n_scales = n_scales.min(12);
    let n = x.len();
    if n == 0 {
        return vec![Vec::new(); n_scales];
    }
    // Reach of the whole cascade: the largest scale's filters span less than
    // 3 * 2^(k-1) samples to the right and 2^(k-1) to the left; pad so the
    // cropped part never sees the zero beyond the padded buffer.
    let pad = 4usize << n_scales;
    let len = n + 2 * pad;
    // The reflected extension: `x` itself in the middle, the index
    // arithmetic of `mirror` only for the pads.
    let mut approx: Vec<f64> = Vec::with_capacity(len);
    approx.extend((0..pad).map(|i| x[mirror(i as isize - pad as isize, n)]));
    approx.extend_from_slice(x);
    approx.extend((pad + n..len).map(|i| x[mirror(i as isize - pad as isize, n)]));
    let mut out = Vec::with_capacity(n_scales);
    let mut next = vec![0.0; len];
    let mut detail = vec![0.0; len];
    for k in 1..=n_scales {
        let step = 1isize << (k - 1);
        let get = |v: &[f64], i: isize| -> f64 {
            if i < 0 || i >= len as isize {
                0.0
            } else {
                v[i as usize]
            }
        };
        for i in 0..len as isize {
            let mut d = 0.0;
            for (t, &c) in G.iter().enumerate() {
                d += c * get(&approx, i - (G_FIRST_OFFSET + t as isize) * step);
            }
            detail[i as usize] = d;
            let mut a = 0.0;
            for (t, &c) in H.iter().enumerate() {
                a += c * get(&approx, i - (H_FIRST_OFFSET + t as isize) * step);
            }
            next[i as usize] = a;
        }
        // y[n] = sum_m f[m] x[n - m] with f at negative offsets reads ahead;
        // the raw output at n is centred at n + (2^k - 1)/2: shift right by
        // the integer part.
        let delay = (1usize << (k - 1)) - 1;
        let w: Vec<f64> = (0..n).map(|i| detail[pad + i - delay]).collect();
        out.push(w);
        std::mem::swap(&mut approx, &mut next);
    }
    out
}

/// Integer part of the group delay compensated at scale `2^k` (samples).
pub fn compensated_delay(k: usize) -> usize {
    (1usize << (k.max(1) - 1)) - 1
}

#[cfg(test)]
mod tests {
    use super::*;

    // The base-target body against the direct definition (oracle), bit for
    // bit: on a processor with AVX the public functions take the AVX copy,
    // which the tests in tests/wavelet_swt.rs compare; this covers the other.
    #[test]
    fn base_target_body_equals_reference() {
        for n in [1usize, 5, 200, 3001] {
            let x: Vec<f64> = (0..n)
                .map(|i| ((i * 37 % 101) as f64 * 0.07).sin() + 0.002 * i as f64)
                .collect();
            for scales in [1usize, 3, 5] {
                let fast = swt_extended_body(&x, scales, false, false);
                let slow = swt_quadratic_spline_reference(&x, scales);
                for (a, b) in fast.iter().zip(&slow) {
                    assert!(a.iter().zip(b).all(|(p, q)| p.to_bits() == q.to_bits()));
                    assert_eq!(a.len(), b.len());
                }
                let dispatched = swt_extended(&x, scales, false, false);
                assert_eq!(dispatched, fast);
            }
        }
    }
}
