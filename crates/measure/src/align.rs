//! Sub-sample beat alignment and sample-wise median beats.
//!
//! Beats are aligned jointly on all leads (the leads of one record share one time
//! base): each beat's QRS region is cross-correlated with a template over integer
//! lags, the correlation peak is refined by parabolic interpolation, and the beat
//! is then resampled at the fractional position by linear or windowed-sinc
//! (Lanczos) interpolation. Positions are in samples (fractional), indices outside
//! a signal read its nearest edge sample.

use serde::{Deserialize, Serialize};
use tendline_dsp::colmedian::{column_median, median_rows};

/// How a beat is resampled at a fractional position.
#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq, Default)]
#[serde(rename_all = "snake_case")]
pub enum Interpolation {
    /// Straight line between the two neighbouring samples.
    Linear,
    /// Lanczos-windowed sinc with 4 lobes: close to ideal band-limited resampling.
    #[default]
    Sinc,
}

const LANCZOS_A: i64 = 4;

fn at(x: &[f64], i: i64) -> f64 {
    let n = x.len() as i64;
    x[i.clamp(0, n - 1) as usize]
}

fn lanczos(t: f64) -> f64 {
    let a = LANCZOS_A as f64;
    if t.abs() < 1e-12 {
        1.0
    } else if t.abs() >= a {
        0.0
    } else {
        let pt = std::f64::consts::PI * t;
        a * pt.sin() * (pt / a).sin() / (pt * pt)
    }
}

/// Value of `x` at fractional position `t` (samples). `x` must not be empty.
pub fn sample_at(x: &[f64], t: f64, interp: Interpolation) -> f64 {
    let i0 = t.floor() as i64;
    let fr = t - i0 as f64;
    match interp {
        Interpolation::Linear => at(x, i0) * (1.0 - fr) + at(x, i0 + 1) * fr,
        Interpolation::Sinc => {
            if fr.abs() < 1e-12 {
                return at(x, i0);
            }
            let mut s = 0.0;
            let mut w = 0.0;
            for i in (i0 - LANCZOS_A + 1)..=(i0 + LANCZOS_A) {
                let k = lanczos(t - i as f64);
                s += at(x, i) * k;
                w += k;
            }
            // Normalising by the kernel sum keeps a constant signal exactly constant.
            s / w
        }
    }
}

/// `before + after + 1` samples of `x` centred on fractional position `center`.
pub fn extract(
    x: &[f64],
    center: f64,
    before: usize,
    after: usize,
    interp: Interpolation,
) -> Vec<f64> {
    let mut out = Vec::with_capacity(before + after + 1);
    extract_into(x, center, before, after, interp, &mut out);
    out
}

/// [`extract`] into a reused buffer (cleared first).
pub fn extract_into(
    x: &[f64],
    center: f64,
    before: usize,
    after: usize,
    interp: Interpolation,
    out: &mut Vec<f64>,
) {
    extract_with(
        x,
        center,
        before,
        after,
        interp,
        out,
        &mut LanczosCache::default(),
    );
}

/// The Lanczos weights of the last fractional offset [`extract_with`] saw.
///
/// The weights depend only on the fractional part of a segment's start, and
/// the leads of one beat, its template and correlation segments and its
/// final segment mostly share it bit for bit: reusing them saves sixteen
/// sines per repeat, and equal input bits give equal weights.
#[derive(Debug, Clone, Default)]
pub struct LanczosCache {
    fr_bits: Option<u64>,
    weights: [f64; 2 * LANCZOS_A as usize],
    wsum: f64,
}

impl LanczosCache {
    fn get(&mut self, fr: f64) -> ([f64; 2 * LANCZOS_A as usize], f64) {
        if self.fr_bits != Some(fr.to_bits()) {
            for (w, j) in self.weights.iter_mut().zip((1 - LANCZOS_A)..=LANCZOS_A) {
                *w = lanczos(fr - j as f64);
            }
            self.wsum = self.weights.iter().sum();
            self.fr_bits = Some(fr.to_bits());
        }
        (self.weights, self.wsum)
    }
}

/// [`extract_into`] with the Lanczos weights taken from `cache` when the
/// fractional offset repeats (the same result bit for bit).
pub fn extract_with(
    x: &[f64],
    center: f64,
    before: usize,
    after: usize,
    interp: Interpolation,
    out: &mut Vec<f64>,
    cache: &mut LanczosCache,
) {
    out.clear();
    let start = center - before as f64;
    let i0 = start.floor() as i64;
    let fr = start - i0 as f64;
    if interp == Interpolation::Sinc && fr == 0.0 {
        // An integer start: `sample_at` reads every sample unchanged.
        out.extend((0..before + after + 1).map(|k| at(x, i0 + k as i64)));
        return;
    }
    if interp == Interpolation::Linear || fr.abs() < 1e-12 {
        out.extend((0..before + after + 1).map(|k| sample_at(x, start + k as f64, interp)));
        return;
    }
    // Every output sample has the same fractional offset, so the Lanczos weights are
    // computed once per beat instead of once per sample (the same result as
    // `sample_at`, which the tests use as the oracle).
    let (weights, wsum) = cache.get(fr);
    let n = x.len() as i64;
    let len = before + after + 1;
    // Output `k` reads `x[i0 + k + j]`, j in 1−A..=A: inside the signal for
    // `k` in `[k_lo, k_hi)`, clamped at the edges elsewhere.
    let k_lo = (LANCZOS_A - 1 - i0).clamp(0, len as i64) as usize;
    let k_hi = (n - LANCZOS_A - i0).clamp(k_lo as i64, len as i64) as usize;
    let edge = |k: usize| -> f64 {
        let base = i0 + k as i64;
        let s: f64 = weights
            .iter()
            .zip((1 - LANCZOS_A)..=LANCZOS_A)
            .map(|(w, j)| w * at(x, base + j))
            .sum();
        s / wsum
    };
    out.extend((0..k_lo).map(edge));
    if k_hi > k_lo {
        // Tap by tap over blocks of the interior: every output still adds its
        // products in tap order onto the same start value as `Iterator::sum`,
        // so each equals the per-sample dot product bit for bit
        // ([`extract_into_reference`]), and the inner loop runs over
        // independent outputs, which the compiler vectorises.
        let s0: f64 = std::iter::empty::<f64>().sum();
        let m = k_hi - k_lo;
        let lo = (i0 + k_lo as i64 + 1 - LANCZOS_A) as usize;
        let src = &x[lo..lo + m + weights.len() - 1];
        let at0 = out.len();
        out.resize(at0 + m, s0);
        interior_taps(&mut out[at0..], src, &weights, wsum, s0);
    }
    out.extend((k_hi..len).map(edge));
}

type Taps = [f64; 2 * LANCZOS_A as usize];

/// `acc[k] = (s0 + Σ_j weights[j]·src[k + j]) / wsum`, the products added in
/// tap order (the interior of [`extract_with`]); with AVX where the CPU has
/// it. Only multiplications and additions in the same order: the SIMD width
/// does not change a bit (no fused multiply–add is enabled).
fn interior_taps(acc: &mut [f64], src: &[f64], weights: &Taps, wsum: f64, s0: f64) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx") {
        // SAFETY: the CPU supports AVX (checked just above).
        unsafe { interior_taps_avx(acc, src, weights, wsum, s0) };
        return;
    }
    interior_taps_body(acc, src, weights, wsum, s0);
}

/// [`interior_taps`] compiled for AVX.
///
/// # Safety
/// The CPU must support AVX.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
unsafe fn interior_taps_avx(acc: &mut [f64], src: &[f64], weights: &Taps, wsum: f64, s0: f64) {
    interior_taps_body(acc, src, weights, wsum, s0);
}

#[inline(always)]
fn interior_taps_body(acc: &mut [f64], src: &[f64], weights: &Taps, wsum: f64, s0: f64) {
    // Blocks of eight outputs kept in registers through all taps (one load
    // and store per output instead of one per tap), then the rest.
    const B: usize = 8;
    let mut blocks = acc.chunks_exact_mut(B);
    let mut base = 0;
    for block in &mut blocks {
        let mut t = [s0; B];
        for (j, &w) in weights.iter().enumerate() {
            let v: &[f64; B] = src[base + j..base + j + B]
                .try_into()
                .expect("slice of B values");
            for (a, &v) in t.iter_mut().zip(v) {
                *a += w * v;
            }
        }
        for (o, a) in block.iter_mut().zip(t) {
            *o = a / wsum;
        }
        base += B;
    }
    let rest = blocks.into_remainder();
    let r = rest.len();
    rest.fill(s0);
    for (j, &w) in weights.iter().enumerate() {
        for (a, &v) in rest.iter_mut().zip(&src[base + j..base + j + r]) {
            *a += w * v;
        }
    }
    for a in rest.iter_mut() {
        *a /= wsum;
    }
}

/// The per-sample form of [`extract_into`] (test oracle for its interior loop).
#[cfg(test)]
fn extract_into_reference(
    x: &[f64],
    center: f64,
    before: usize,
    after: usize,
    interp: Interpolation,
    out: &mut Vec<f64>,
) {
    out.clear();
    let start = center - before as f64;
    let i0 = start.floor() as i64;
    let fr = start - i0 as f64;
    if interp == Interpolation::Sinc && fr == 0.0 {
        out.extend((0..before + after + 1).map(|k| at(x, i0 + k as i64)));
        return;
    }
    if interp == Interpolation::Linear || fr.abs() < 1e-12 {
        out.extend((0..before + after + 1).map(|k| sample_at(x, start + k as f64, interp)));
        return;
    }
    let mut weights = [0.0; 2 * LANCZOS_A as usize];
    for (w, j) in weights.iter_mut().zip((1 - LANCZOS_A)..=LANCZOS_A) {
        *w = lanczos(fr - j as f64);
    }
    let wsum: f64 = weights.iter().sum();
    let n = x.len() as i64;
    out.extend((0..before + after + 1).map(|k| {
        let base = i0 + k as i64;
        let s: f64 = if base + 1 - LANCZOS_A >= 0 && base + LANCZOS_A < n {
            // Inside the signal: no edge clamping, same taps in the same order.
            let lo = (base + 1 - LANCZOS_A) as usize;
            weights
                .iter()
                .zip(&x[lo..lo + weights.len()])
                .map(|(w, v)| w * v)
                .sum()
        } else {
            weights
                .iter()
                .zip((1 - LANCZOS_A)..=LANCZOS_A)
                .map(|(w, j)| w * at(x, base + j))
                .sum()
        };
        s / wsum
    }));
}

/// Sample-wise median of equal-length segments (mean of the two middle values
/// for even counts), in the order of `f64::total_cmp`: the column median of
/// [`tendline_dsp::colmedian`] (a comparator network over whole rows).
pub fn median_beat<S: AsRef<[f64]>>(segments: &[S]) -> Vec<f64> {
    column_median(segments)
}

/// Median of a slice (reorders it); NaN for an empty slice.
///
/// By selection rather than a full sort: the k-th value in the total order of
/// `f64::total_cmp` is unique bit for bit, so the result equals the middle of
/// the sorted slice ([`median_sorted`], the test oracle).
pub fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    let n = v.len();
    let m = n / 2;
    let (left, mid, _) = v.select_nth_unstable_by(m, |a, b| a.total_cmp(b));
    let mid = *mid;
    if n % 2 == 1 {
        mid
    } else {
        let below = left
            .iter()
            .copied()
            .max_by(|a, b| a.total_cmp(b))
            .expect("n even and > 0: left half not empty");
        0.5 * (below + mid)
    }
}

/// Median by a full sort: the obvious definition [`median`] is tested against.
pub fn median_sorted(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(|a, b| a.total_cmp(b));
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Parameters of [`align`], in samples.
#[derive(Debug, Clone, Copy)]
pub struct AlignParams {
    /// Half width of the QRS region that is correlated.
    pub half_width: usize,
    /// Largest integer lag searched either side of the detected fiducial.
    pub max_lag: usize,
    /// Template-refinement passes (≥ 1).
    pub passes: usize,
    pub interp: Interpolation,
}

fn demeaned(mut v: Vec<f64>) -> Vec<f64> {
    let m = v.iter().sum::<f64>() / v.len().max(1) as f64;
    v.iter_mut().for_each(|x| *x -= m);
    v
}

/// Cross-correlation, summed over leads, of the beat region at integer lag `lag`
/// with the template (both de-meaned so a baseline offset does not move the peak).
/// `buf` is scratch space reused across calls.
#[allow(clippy::too_many_arguments)]
fn xcorr(
    leads: &[&[f64]],
    weights: &[f64],
    templ: &[Vec<f64>],
    center: f64,
    lag: i64,
    h: usize,
    interp: Interpolation,
    buf: &mut Vec<f64>,
    cache: &mut LanczosCache,
) -> f64 {
    let mut c = 0.0;
    for ((x, w), t) in leads.iter().zip(weights).zip(templ) {
        if *w <= 0.0 {
            continue;
        }
        extract_with(x, center + lag as f64, h, h, interp, buf, cache);
        // The segment de-meaned on the fly: the same operations as `demeaned`.
        let m = buf.iter().sum::<f64>() / buf.len().max(1) as f64;
        c += w * buf.iter().zip(t).map(|(a, b)| (a - m) * b).sum::<f64>();
    }
    c
}

/// All lags of [`xcorr`] for the beat at `center` from one segment per lead
/// that covers every lag, pushed to `cc` (lags `-l-1..=l+1`).
///
/// Lag `L`'s segment is the long segment shifted by `L` samples exactly when
/// every lag's start has the same integer step and the same fractional offset
/// bit for bit (then the Lanczos weights, taps and summation order are the
/// same); this holds unless `center ± lag` crosses a power of two. Returns
/// false, with `cc` untouched, when it does not hold or the
/// interpolation is not windowed sinc, so the caller computes lag by lag.
#[allow(clippy::too_many_arguments)]
fn xcorr_shared(
    leads: &[&[f64]],
    weights: &[f64],
    templ: &[Vec<f64>],
    center: f64,
    l: i64,
    h: usize,
    interp: Interpolation,
    long: &mut [Vec<f64>],
    cc: &mut Vec<f64>,
    cache: &mut LanczosCache,
) -> bool {
    if interp != Interpolation::Sinc {
        return false;
    }
    let split = |lag: i64| {
        let start = (center + lag as f64) - h as f64;
        let i0 = start.floor() as i64;
        (i0, (start - i0 as f64).to_bits())
    };
    let (i00, fr0) = split(-l - 1);
    let fr = f64::from_bits(fr0);
    // Starts within 1e-12 of an integer but not on it take `sample_at`'s path.
    if fr != 0.0 && fr.abs() < 1e-12 {
        return false;
    }
    if !(-l - 1..=l + 1).all(|lag| split(lag) == (i00 + lag + l + 1, fr0)) {
        return false;
    }
    let span = 2 * h + 1;
    let extra = 2 * (l as usize + 1);
    for ((x, w), seg) in leads.iter().zip(weights).zip(long.iter_mut()) {
        if *w > 0.0 {
            extract_with(
                x,
                center + (-l - 1) as f64,
                h,
                h + extra,
                interp,
                seg,
                cache,
            );
        }
    }
    // Four lags at a time, one lane per lag: each lane adds its terms in the
    // same order as the one-lag form below, so the values are the same bit
    // for bit, while the lanes run side by side.
    let mut off = 0;
    while off + LAGS <= extra + 1 {
        let mut c = [0.0; LAGS];
        for (((_, w), t), seg) in leads.iter().zip(weights).zip(templ).zip(long.iter()) {
            if *w <= 0.0 {
                continue;
            }
            let d = lag_block(&seg[off..off + span + LAGS - 1], &t[..span]);
            for (c, d) in c.iter_mut().zip(d) {
                *c += w * d;
            }
        }
        cc.extend_from_slice(&c);
        off += LAGS;
    }
    for off in off..=extra {
        let mut c = 0.0;
        for (((_, w), t), seg) in leads.iter().zip(weights).zip(templ).zip(long.iter()) {
            if *w <= 0.0 {
                continue;
            }
            let seg = &seg[off..off + span];
            let m = seg.iter().sum::<f64>() / span as f64;
            c += w * seg.iter().zip(t).map(|(a, b)| (a - m) * b).sum::<f64>();
        }
        cc.push(c);
    }
    true
}

/// Lags computed side by side by [`lag_block`].
const LAGS: usize = 4;

/// For `q` in `0..LAGS`: the de-meaned correlation of `seg[q..q + t.len()]`
/// with `t`, `Σ (a − m)·b` with `m` the segment's mean, both sums in index
/// order from the start value of `Iterator::sum` (the one-lag form of
/// [`xcorr_shared`]); with AVX where the CPU has it (no fused
/// multiply–add: the same operations).
fn lag_block(seg: &[f64], t: &[f64]) -> [f64; LAGS] {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx") {
        // SAFETY: the CPU supports AVX (checked just above).
        return unsafe { lag_block_avx(seg, t) };
    }
    lag_block_body(seg, t)
}

/// [`lag_block`] compiled for AVX.
///
/// # Safety
/// The CPU must support AVX.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx")]
unsafe fn lag_block_avx(seg: &[f64], t: &[f64]) -> [f64; LAGS] {
    lag_block_body(seg, t)
}

#[inline(always)]
fn lag_block_body(seg: &[f64], t: &[f64]) -> [f64; LAGS] {
    let span = t.len();
    assert!(seg.len() >= span + LAGS - 1, "segment covers every lag");
    let s0: f64 = std::iter::empty::<f64>().sum();
    let mut sum = [s0; LAGS];
    for k in 0..span {
        let v: &[f64; LAGS] = seg[k..k + LAGS].try_into().expect("LAGS values");
        for (a, &v) in sum.iter_mut().zip(v) {
            *a += v;
        }
    }
    let m = sum.map(|a| a / span as f64);
    let mut dot = [s0; LAGS];
    for (k, &b) in t.iter().enumerate() {
        let v: &[f64; LAGS] = seg[k..k + LAGS].try_into().expect("LAGS values");
        for ((a, &v), &m) in dot.iter_mut().zip(v).zip(&m) {
            *a += (v - m) * b;
        }
    }
    dot
}

/// Fractional offset of the maximum of a parabola through (−1,a), (0,b), (1,c).
pub fn parabolic_peak(a: f64, b: f64, c: f64) -> f64 {
    let den = a - 2.0 * b + c;
    if den.abs() < 1e-300 || den >= 0.0 {
        return 0.0;
    }
    (0.5 * (a - c) / den).clamp(-0.5, 0.5)
}

/// Refined fiducial positions (fractional samples) of `fiducials` on `leads`.
///
/// Leads with `weights[i] <= 0` are ignored. The result is re-centred so that its
/// mean correction is zero: the aligned positions keep the detector's average
/// fiducial, only the beat-to-beat jitter is removed.
pub fn align(leads: &[&[f64]], weights: &[f64], fiducials: &[usize], p: &AlignParams) -> Vec<f64> {
    align_impl(leads, weights, fiducials, p, true)
}

/// [`align`], with the shared-segment correlation switched off for the tests'
/// oracle (`share_segments == false` extracts every lag separately).
fn align_impl(
    leads: &[&[f64]],
    weights: &[f64],
    fiducials: &[usize],
    p: &AlignParams,
    share_segments: bool,
) -> Vec<f64> {
    let mut pos: Vec<f64> = fiducials.iter().map(|&f| f as f64).collect();
    if fiducials.len() < 2 || leads.is_empty() {
        return pos;
    }
    let h = p.half_width;
    let l = p.max_lag as i64;
    let span = 2 * h + 1;
    let nb = pos.len();
    let mut rows: Vec<Vec<f64>> = vec![Vec::with_capacity(nb * span); leads.len()];
    let mut buf = Vec::with_capacity(span);
    let mut cc = Vec::with_capacity(2 * p.max_lag + 3);
    let mut long: Vec<Vec<f64>> = vec![Vec::new(); leads.len()];
    for _ in 0..p.passes.max(1) {
        // Beat by beat, so that the leads of a beat and then its correlation
        // segments reuse the beat's Lanczos weights. Leads without weight are
        // never correlated: their templates stay empty.
        let mut caches = vec![LanczosCache::default(); nb];
        rows.iter_mut().for_each(Vec::clear);
        for (&c, cache) in pos.iter().zip(caches.iter_mut()) {
            for ((x, w), r) in leads.iter().zip(weights).zip(rows.iter_mut()) {
                if *w > 0.0 {
                    extract_with(x, c, h, h, p.interp, &mut buf, cache);
                    r.extend_from_slice(&buf);
                }
            }
        }
        let templ: Vec<Vec<f64>> = rows
            .iter_mut()
            .map(|r| {
                if r.is_empty() {
                    Vec::new()
                } else {
                    demeaned(median_rows(r, nb, span))
                }
            })
            .collect();
        let mut new = Vec::with_capacity(pos.len());
        for (&c, cache) in pos.iter().zip(caches.iter_mut()) {
            cc.clear();
            if !(share_segments
                && xcorr_shared(
                    leads, weights, &templ, c, l, h, p.interp, &mut long, &mut cc, cache,
                ))
            {
                cc.extend((-l - 1..=l + 1).map(|lag| {
                    xcorr(leads, weights, &templ, c, lag, h, p.interp, &mut buf, cache)
                }));
            }
            // Peak over the searched lags; the extra lag each side feeds the parabola.
            let (mut best, mut bi) = (f64::NEG_INFINITY, 1usize);
            for (i, &v) in cc.iter().enumerate().take(cc.len() - 1).skip(1) {
                if v > best {
                    best = v;
                    bi = i;
                }
            }
            let d = parabolic_peak(cc[bi - 1], cc[bi], cc[bi + 1]);
            new.push(c + (bi as f64 - 1.0 - l as f64) + d);
        }
        let mean_shift = new
            .iter()
            .zip(fiducials)
            .map(|(n, &f)| n - f as f64)
            .sum::<f64>()
            / new.len() as f64;
        pos = new.into_iter().map(|n| n - mean_shift).collect();
    }
    pos
}

#[cfg(test)]
mod tests {
    use super::*;

    // Analytic beat: narrow QRS-like and broad T-like Gaussians (invented shape for the test).
    fn wave(t: f64) -> f64 {
        let g = |c: f64, w: f64, a: f64| a * (-(t - c).powi(2) / (2.0 * w * w)).exp();
        g(0.0, 2.5, 1.0) + g(-6.0, 2.0, -0.2) + g(60.0, 12.0, 0.3) + g(-40.0, 6.0, 0.1)
    }

    fn lcg(state: &mut u64) -> f64 {
        *state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((*state >> 11) as f64) / ((1u64 << 53) as f64)
    }

    fn synth(n_beats: usize, rr: f64, seed: u64) -> (Vec<f64>, Vec<f64>, Vec<usize>) {
        let mut s = seed;
        let mut times = Vec::new();
        let mut t = 150.0;
        for _ in 0..n_beats {
            times.push(t + (lcg(&mut s) - 0.5) * 3.0);
            t += rr;
        }
        let n = (t + 150.0) as usize;
        let x: Vec<f64> = (0..n)
            .map(|i| times.iter().map(|&c| wave(i as f64 - c)).sum())
            .collect();
        // Detected fiducials: rounded and off by up to ±2 samples, as a detector may be.
        let fid: Vec<usize> = times
            .iter()
            .map(|&c| (c.round() as i64 + (lcg(&mut s) * 5.0) as i64 - 2) as usize)
            .collect();
        (x, times, fid)
    }

    #[test]
    fn interpolation_of_sampled_smooth_signal() {
        let x: Vec<f64> = (0..200).map(|i| (i as f64 * 0.1).sin()).collect();
        for t in [50.3f64, 77.77, 120.5] {
            let exact = (t * 0.1).sin();
            assert!((sample_at(&x, t, Interpolation::Sinc) - exact).abs() < 1e-3);
            assert!((sample_at(&x, t, Interpolation::Linear) - exact).abs() < 2e-3);
        }
        assert_eq!(sample_at(&x, 10.0, Interpolation::Sinc), x[10]);
        // The per-beat fast path of `extract` equals sample-by-sample interpolation.
        for &c in &[20.0, 20.25, 31.7, 3.4, 45.9] {
            let fast = extract(&x, c, 8, 12, Interpolation::Sinc);
            for (k, v) in fast.iter().enumerate() {
                let slow = sample_at(&x, c + k as f64 - 8.0, Interpolation::Sinc);
                assert!((v - slow).abs() < 1e-12, "c={c} k={k}");
            }
        }
        assert_eq!(sample_at(&x, -5.0, Interpolation::Linear), x[0]);
    }

    #[test]
    fn median_is_sample_wise() {
        let s = vec![vec![1.0, 5.0], vec![3.0, -1.0], vec![2.0, 100.0]];
        assert_eq!(median_beat(&s), vec![2.0, 5.0]);
        let e = vec![
            vec![1.0, -0.0],
            vec![4.0, 0.0],
            vec![2.0, -0.0],
            vec![3.0, 7.0],
        ];
        assert_eq!(median_beat(&e)[0], 2.5);
        // Column [-0, 0, -0, 7] sorts as -0, -0, 0, 7: (−0 + 0)/2 = +0.
        assert_eq!(median_beat(&e)[1].to_bits(), 0.0f64.to_bits());
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), 2.5);
    }

    // Four lags side by side against the one-lag sums (oracle), bit for
    // bit, dispatched and base-target forms.
    #[test]
    fn lag_block_equals_one_lag_sums() {
        let mut s = 21u64;
        for span in [1usize, 2, 7, 31, 33] {
            let t: Vec<f64> = (0..span).map(|_| lcg(&mut s) - 0.5).collect();
            let seg: Vec<f64> = (0..span + LAGS + 2)
                .map(|_| lcg(&mut s) * 4.0 - 1.0)
                .collect();
            let slow: Vec<u64> = (0..LAGS)
                .map(|q| {
                    let w = &seg[q..q + span];
                    let m = w.iter().sum::<f64>() / span as f64;
                    w.iter()
                        .zip(&t)
                        .map(|(a, b)| (a - m) * b)
                        .sum::<f64>()
                        .to_bits()
                })
                .collect();
            let fast: Vec<u64> = lag_block(&seg, &t).iter().map(|v| v.to_bits()).collect();
            let base: Vec<u64> = lag_block_body(&seg, &t)
                .iter()
                .map(|v| v.to_bits())
                .collect();
            assert_eq!(fast, slow, "span={span}");
            assert_eq!(base, slow, "span={span}");
        }
    }

    // The interior taps as dispatched (AVX where the CPU has it) against the
    // body compiled for the base target, bit for bit, blocks and tails.
    #[test]
    fn dispatched_taps_equal_base_taps() {
        let mut s = 11u64;
        let w: Taps = std::array::from_fn(|_| lcg(&mut s) - 0.3);
        let wsum: f64 = w.iter().sum();
        for m in 0..40 {
            let src: Vec<f64> = (0..m + w.len() - 1)
                .map(|_| lcg(&mut s) * 3.0 - 1.0)
                .collect();
            let (mut a, mut b) = (vec![7.0; m], vec![-3.0; m]);
            interior_taps(&mut a, &src, &w, wsum, -0.0);
            interior_taps_body(&mut b, &src, &w, wsum, -0.0);
            let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&a), bits(&b), "m={m}");
        }
    }

    // Selection against the full sort (oracle), bit for bit, odd and even counts,
    // ties and signed zeros included.
    #[test]
    fn median_by_selection_equals_sorted_median() {
        let mut s = 99u64;
        for n in 1..40 {
            for round in 0..20 {
                let v: Vec<f64> = (0..n)
                    .map(|i| match (i + round) % 7 {
                        0 => 0.0,
                        1 => -0.0,
                        2 => 1.5,
                        _ => lcg(&mut s) - 0.5,
                    })
                    .collect();
                let (mut a, mut b) = (v.clone(), v.clone());
                assert_eq!(
                    median(&mut a).to_bits(),
                    median_sorted(&mut b).to_bits(),
                    "{v:?}"
                );
            }
        }
        assert!(median(&mut []).is_nan());
    }

    // Alignment with one shared segment per beat and lead against extracting
    // every lag separately (oracle): equal bit for bit, one and two leads,
    // beats near the record ends, fiducials in the 4096..8192 range where
    // `center ± lag` can cross a power of two.
    #[test]
    fn shared_segment_alignment_equals_lag_by_lag() {
        for (seed, n_beats, rr) in [(7u64, 12usize, 220.0), (5, 40, 205.3)] {
            let (x, _, mut fid) = synth(n_beats, rr, seed);
            fid[0] = 3;
            let y: Vec<f64> = x.iter().map(|v| 0.5 * v + 0.01).collect();
            for p in [
                AlignParams {
                    half_width: 15,
                    max_lag: 5,
                    passes: 2,
                    interp: Interpolation::Sinc,
                },
                AlignParams {
                    half_width: 7,
                    max_lag: 2,
                    passes: 3,
                    interp: Interpolation::Sinc,
                },
                AlignParams {
                    half_width: 15,
                    max_lag: 5,
                    passes: 2,
                    interp: Interpolation::Linear,
                },
            ] {
                for (leads, w) in [
                    (vec![&x[..]], vec![1.0]),
                    (vec![&x[..], &y[..]], vec![1.0, 0.5]),
                ] {
                    let fast = align_impl(&leads, &w, &fid, &p, true);
                    let slow = align_impl(&leads, &w, &fid, &p, false);
                    let fb: Vec<u64> = fast.iter().map(|v| v.to_bits()).collect();
                    let sb: Vec<u64> = slow.iter().map(|v| v.to_bits()).collect();
                    assert_eq!(fb, sb, "{p:?}");
                }
            }
        }
    }

    // The in-bounds fast path and the clamped edge path of `extract` against
    // `sample_at` (oracle) near both ends of a short signal.
    #[test]
    fn extract_at_the_edges_equals_sample_by_sample() {
        let x: Vec<f64> = (0..40).map(|i| ((i * i) % 11) as f64 - 3.0).collect();
        for &c in &[0.3, 2.6, 5.0, 5.5, 20.125, 34.9, 38.7, 39.2, 39.0] {
            let fast = extract(&x, c, 6, 6, Interpolation::Sinc);
            for (k, v) in fast.iter().enumerate() {
                let slow = sample_at(&x, c + k as f64 - 6.0, Interpolation::Sinc);
                assert!((v - slow).abs() < 1e-12, "c={c} k={k}");
            }
        }
    }

    #[test]
    fn parabola_vertex() {
        // y = -(x - 0.3)^2 sampled at -1, 0, 1.
        let y = |x: f64| -(x - 0.3f64).powi(2);
        assert!((parabolic_peak(y(-1.0), y(0.0), y(1.0)) - 0.3).abs() < 1e-12);
    }

    #[test]
    fn alignment_recovers_subsample_jitter() {
        let (x, times, fid) = synth(12, 220.0, 7);
        let p = AlignParams {
            half_width: 15,
            max_lag: 5,
            passes: 2,
            interp: Interpolation::Sinc,
        };
        let pos = align(&[&x], &[1.0], &fid, &p);
        let mt = times.iter().sum::<f64>() / times.len() as f64;
        let mp = pos.iter().sum::<f64>() / pos.len() as f64;
        for (p, t) in pos.iter().zip(&times) {
            assert!(((p - mp) - (t - mt)).abs() < 0.1, "aligned {p} true {t}");
        }
    }

    // Slow oracle: for each beat, search the shift on a 0.005-sample grid that
    // maximises the correlation with the same template, by direct resampling.
    #[test]
    fn alignment_matches_fine_grid_oracle() {
        let (x, _times, fid) = synth(8, 230.0, 11);
        let p = AlignParams {
            half_width: 15,
            max_lag: 4,
            passes: 1,
            interp: Interpolation::Sinc,
        };
        let pos = align(&[&x], &[1.0], &fid, &p);
        let h = 15;
        let templ = demeaned(median_beat(
            &fid.iter()
                .map(|&c| extract(&x, c as f64, h, h, Interpolation::Sinc))
                .collect::<Vec<_>>(),
        ));
        let mut oracle = Vec::new();
        for &f in &fid {
            let (mut best, mut bt) = (f64::NEG_INFINITY, 0.0);
            let mut tau = -4.0;
            while tau <= 4.0 {
                let seg = demeaned(extract(&x, f as f64 + tau, h, h, Interpolation::Sinc));
                let c: f64 = seg.iter().zip(&templ).map(|(a, b)| a * b).sum();
                if c > best {
                    best = c;
                    bt = tau;
                }
                tau += 0.005;
            }
            oracle.push(f as f64 + bt);
        }
        let shift = oracle
            .iter()
            .zip(&fid)
            .map(|(o, &f)| o - f as f64)
            .sum::<f64>()
            / fid.len() as f64;
        for (p, o) in pos.iter().zip(&oracle) {
            assert!(
                (p - (o - shift)).abs() < 0.15,
                "fast {p} oracle {}",
                o - shift
            );
        }
    }

    #[test]
    fn median_beat_equals_template() {
        let (x, times, fid) = synth(15, 210.0, 3);
        for interp in [Interpolation::Sinc, Interpolation::Linear] {
            let p = AlignParams {
                half_width: 15,
                max_lag: 5,
                passes: 2,
                interp,
            };
            let pos = align(&[&x], &[1.0], &fid, &p);
            let segs: Vec<Vec<f64>> = pos
                .iter()
                .map(|&c| extract(&x, c, 60, 100, interp))
                .collect();
            let m = median_beat(&segs);
            // The aligned fiducial sits at mean(detected) + the jitter-free offset: compare with
            // the template placed at the mean true-minus-aligned offset.
            let off = times.iter().zip(&pos).map(|(t, p)| t - p).sum::<f64>() / pos.len() as f64;
            let tol = if interp == Interpolation::Sinc {
                0.01
            } else {
                0.02
            };
            for (k, v) in m.iter().enumerate() {
                let t = k as f64 - 60.0 - off;
                let expect = wave(t) + wave(t + 210.0) + wave(t - 210.0);
                assert!(
                    (v - expect).abs() < tol,
                    "{interp:?} k={k} got {v} want {expect}"
                );
            }
        }
    }

    // Extraction with weights reused from the cache against fresh weights
    // for every segment (oracle), bit for bit: repeated and changing
    // fractional offsets, integer starts, both interpolations.
    #[test]
    fn cached_weights_equal_fresh_weights() {
        let x: Vec<f64> = (0..400).map(|i| (i as f64 * 0.21).cos() * 0.8).collect();
        let mut cache = LanczosCache::default();
        let centres = [
            100.3, 150.3, 150.3, 151.3, 200.0, 200.7, 10.7, 390.7, 3.25, 3.25, 120.3,
        ];
        for interp in [Interpolation::Sinc, Interpolation::Linear] {
            for &c in &centres {
                let (mut a, mut b) = (Vec::new(), Vec::new());
                extract_with(&x, c, 20, 35, interp, &mut a, &mut cache);
                extract_into(&x, c, 20, 35, interp, &mut b);
                let ab: Vec<u64> = a.iter().map(|v| v.to_bits()).collect();
                let bb: Vec<u64> = b.iter().map(|v| v.to_bits()).collect();
                assert_eq!(ab, bb, "c={c} {interp:?}");
            }
        }
    }

    // The tap-by-tap interior of `extract` against the per-sample dot
    // products (oracle), bit for bit: fractional and integer centres, beats
    // cut by either end of the signal, a signal shorter than the kernel.
    #[test]
    fn extract_interior_equals_per_sample_products() {
        let x: Vec<f64> = (0..300)
            .map(|i| (i as f64 * 0.37).sin() * 1.7 + ((i * 7) % 5) as f64 * 0.01)
            .collect();
        let short = [0.5, -1.0, 2.0];
        for sig in [&x[..], &short[..]] {
            for &c in &[0.2, 3.5, 4.0, 100.375, 150.9, 296.6, 299.1, -2.3, 310.4] {
                for (before, after) in [(6usize, 6usize), (40, 120), (0, 0)] {
                    let mut fast = Vec::new();
                    let mut slow = Vec::new();
                    extract_into(sig, c, before, after, Interpolation::Sinc, &mut fast);
                    extract_into_reference(sig, c, before, after, Interpolation::Sinc, &mut slow);
                    assert_eq!(fast.len(), slow.len());
                    for (k, (a, b)) in fast.iter().zip(&slow).enumerate() {
                        assert_eq!(a.to_bits(), b.to_bits(), "c={c} k={k}");
                    }
                }
            }
        }
    }
}
