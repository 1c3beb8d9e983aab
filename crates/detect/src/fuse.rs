//! Multi-lead fusion: lead masks (flat, saturation), local lead scales and
//! quality weights, the combined Pan–Tompkins run, fiducial points and the
//! unreadable stretches.
//!
//! Blocks: the record is cut into blocks of `fusion_block_ms`; per-block
//! values (lead scale, lead weight) are placed at block centres and linearly
//! interpolated in between, so the combined signal has no steps at block
//! edges.

use crate::label;
use crate::pt::{self, LeadFeatures};
use crate::{Beat, DetectConfig, Detection, Span};
use tendline_dsp::select::{from_total_key, total_key};

/// Index of the largest value in `x[a..b]` (clamped to the array; first on ties).
pub(crate) fn argmax_in(x: &[f64], a: usize, b: usize) -> usize {
    let b = b.min(x.len());
    let a = a.min(b.saturating_sub(1));
    let mut best = a;
    for i in a..b {
        if x[i] > x[best] {
            best = i;
        }
    }
    best
}

/// Per-sample state of a lead.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum LeadState {
    Ok,
    Flat,
    Saturated,
}

#[cfg(test)]
fn ptp(x: &[f64]) -> f64 {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for &v in x {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if hi >= lo {
        hi - lo
    } else {
        0.0
    }
}

/// Smallest and largest of `c` (`(inf, -inf)` when empty) by plain
/// comparisons in four independent lanes, which the compiler turns into
/// vector min/max. For values without NaN this is the same pair as a fold
/// with `f64::min`/`f64::max` (the test oracle), up to the sign of a zero
/// extreme, which neither a difference of extremes nor a comparison with a
/// threshold sees. NaN is never passed here (the callers' signals are
/// finite).
fn min_max(c: &[f64]) -> (f64, f64) {
    let mut lo = [f64::INFINITY; 4];
    let mut hi = [f64::NEG_INFINITY; 4];
    let mut quads = c.chunks_exact(4);
    for q in &mut quads {
        for k in 0..4 {
            lo[k] = if q[k] < lo[k] { q[k] } else { lo[k] };
            hi[k] = if q[k] > hi[k] { q[k] } else { hi[k] };
        }
    }
    for &v in quads.remainder() {
        lo[0] = if v < lo[0] { v } else { lo[0] };
        hi[0] = if v > hi[0] { v } else { hi[0] };
    }
    let l = lo
        .iter()
        .fold(f64::INFINITY, |a, &b| if b < a { b } else { a });
    let h = hi
        .iter()
        .fold(f64::NEG_INFINITY, |a, &b| if b > a { b } else { a });
    (l, h)
}

/// Minimum and maximum of each run of `hop` samples, so that the peak-to-peak
/// value of a window starting on a multiple of `hop` costs a few operations
/// instead of a pass over the window. The extremes of finite values do not
/// depend on the order they are taken in (a zero's sign aside, which no
/// comparison with a threshold sees), so [`HopRanges::ptp`] equals [`ptp`].
struct HopRanges {
    hop: usize,
    lo: Vec<f64>,
    hi: Vec<f64>,
}

impl HopRanges {
    fn new(x: &[f64], hop: usize) -> Self {
        let (lo, hi) = x.chunks(hop).map(min_max).unzip();
        Self { hop, lo, hi }
    }

    /// Peak-to-peak of `x[start..end]`; `start` is a multiple of `hop`.
    fn ptp(&self, x: &[f64], start: usize, end: usize) -> f64 {
        debug_assert_eq!(start % self.hop, 0);
        let (c0, c1) = (start / self.hop, end / self.hop);
        let mut lo = f64::INFINITY;
        let mut hi = f64::NEG_INFINITY;
        for c in c0..c1 {
            lo = lo.min(self.lo[c]);
            hi = hi.max(self.hi[c]);
        }
        for &v in &x[(c1 * self.hop).max(start)..end] {
            lo = lo.min(v);
            hi = hi.max(v);
        }
        if hi >= lo {
            hi - lo
        } else {
            0.0
        }
    }
}

/// Flat and saturated samples of one lead. `raw` may hold non-finite gaps.
pub(crate) fn lead_mask(
    raw: &[f64],
    x: &[f64],
    bp: &[f64],
    fs: f64,
    cfg: &DetectConfig,
) -> Vec<LeadState> {
    let n = x.len();
    let mut m = vec![LeadState::Ok; n];
    let w = pt::ms_to_samples(cfg.flat_window_ms, fs).min(n.max(1));
    let hop = (w / 4).max(1);
    // Windows start on multiples of `hop`: their extremes come from per-hop
    // extremes plus the few samples after the last whole hop.
    let (xr, bpr) = (HopRanges::new(x, hop), HopRanges::new(bp, hop));
    let mut start = 0usize;
    loop {
        let end = (start + w).min(n);
        if end > start {
            let state = if xr.ptp(x, start, end) < cfg.flat_ptp_mv {
                Some(LeadState::Flat)
            } else if bpr.ptp(bp, start, end) < cfg.saturation_bp_ptp_mv {
                Some(LeadState::Saturated)
            } else {
                None
            };
            if let Some(s) = state {
                for v in &mut m[start..end] {
                    if *v == LeadState::Ok {
                        *v = s;
                    }
                }
            }
        }
        if end >= n {
            break;
        }
        start += hop;
    }
    // Clipping: identical samples at the lead's extreme value for a long run.
    // Without gaps `x` is `raw` sample for sample, so the extremes are those
    // of the per-hop extremes already taken (equal to a fold over the
    // samples up to a zero's sign, which neither `hi > lo` nor the equality
    // tests below see). With gaps, the extremes of the finite samples in one
    // pass (each fold sees the same values in the same order as two separate
    // folds would).
    let gaps = raw.iter().fold(false, |g, v| g | !v.is_finite());
    let (mut hi, mut lo) = (f64::NEG_INFINITY, f64::INFINITY);
    if gaps {
        for &v in raw {
            if v.is_finite() {
                hi = hi.max(v);
                lo = lo.min(v);
            }
        }
    } else {
        lo = xr.lo.iter().fold(lo, |a, &b| a.min(b));
        hi = xr.hi.iter().fold(hi, |a, &b| a.max(b));
    }
    let run_min = pt::ms_to_samples(cfg.saturation_run_ms, fs);
    if hi > lo {
        // Only runs at an extreme can be clipping: jump from one extreme
        // sample to the next. A run found this way is a whole run of equal
        // values (the sample before it is either not extreme or the end of
        // the previous run), so the marks equal those of a walk over every
        // run ([`saturation_runs_reference`] is the test oracle).
        let mut i = 0;
        while let Some(k) = raw[i..].iter().position(|&v| v == hi || v == lo) {
            let a = i + k;
            let v = raw[a];
            let mut j = a + 1;
            while j < n && raw[j] == v {
                j += 1;
            }
            if j - a >= run_min {
                for s in &mut m[a..j] {
                    *s = LeadState::Saturated;
                }
            }
            i = j;
        }
    }
    if gaps {
        for (s, v) in m.iter_mut().zip(raw) {
            if !v.is_finite() {
                *s = LeadState::Flat;
            }
        }
    }
    m
}

/// [`lead_mask`] walking every run of equal samples and taking window
/// extremes by `f64::min`/`f64::max` folds (the form it replaced; test oracle).
#[cfg(test)]
fn saturation_runs_reference(
    raw: &[f64],
    x: &[f64],
    bp: &[f64],
    fs: f64,
    cfg: &DetectConfig,
) -> Vec<LeadState> {
    let n = x.len();
    let mut m = vec![LeadState::Ok; n];
    let w = pt::ms_to_samples(cfg.flat_window_ms, fs).min(n.max(1));
    let hop = (w / 4).max(1);
    // Windows start on multiples of `hop`: their extremes come from per-hop
    // extremes plus the few samples after the last whole hop.
    let (xr, bpr) = (
        HopRangesReference::new(x, hop),
        HopRangesReference::new(bp, hop),
    );
    let mut start = 0usize;
    loop {
        let end = (start + w).min(n);
        if end > start {
            let state = if xr.ptp(x, start, end) < cfg.flat_ptp_mv {
                Some(LeadState::Flat)
            } else if bpr.ptp(bp, start, end) < cfg.saturation_bp_ptp_mv {
                Some(LeadState::Saturated)
            } else {
                None
            };
            if let Some(s) = state {
                for v in &mut m[start..end] {
                    if *v == LeadState::Ok {
                        *v = s;
                    }
                }
            }
        }
        if end >= n {
            break;
        }
        start += hop;
    }
    // Clipping: identical samples at the lead's extreme value for a long run.
    // Extremes of the finite samples in one pass (each fold sees the same
    // values in the same order as two separate folds would).
    let (mut hi, mut lo, mut gaps) = (f64::NEG_INFINITY, f64::INFINITY, false);
    for &v in raw {
        if v.is_finite() {
            hi = hi.max(v);
            lo = lo.min(v);
        } else {
            gaps = true;
        }
    }
    let run_min = pt::ms_to_samples(cfg.saturation_run_ms, fs);
    let mut i = 0;
    while i < n {
        let v = raw[i];
        let mut j = i + 1;
        while j < n && raw[j] == v {
            j += 1;
        }
        if v.is_finite() && (v == hi || v == lo) && hi > lo && j - i >= run_min {
            for s in &mut m[i..j] {
                *s = LeadState::Saturated;
            }
        }
        i = j;
    }
    if gaps {
        for (s, v) in m.iter_mut().zip(raw) {
            if !v.is_finite() {
                *s = LeadState::Flat;
            }
        }
    }
    m
}

/// [`HopRanges`] with extremes by `f64::min`/`f64::max` folds (test oracle).
#[cfg(test)]
struct HopRangesReference(HopRanges);

#[cfg(test)]
impl HopRangesReference {
    fn new(x: &[f64], hop: usize) -> Self {
        let (lo, hi) = x
            .chunks(hop)
            .map(|c| {
                c.iter()
                    .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| {
                        (l.min(v), h.max(v))
                    })
            })
            .unzip();
        Self(HopRanges { hop, lo, hi })
    }
    fn ptp(&self, x: &[f64], start: usize, end: usize) -> f64 {
        self.0.ptp(x, start, end)
    }
}

/// How the samples of one run of [`Blocks::runs`] get a per-block value.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Run {
    /// The value of this block.
    Const(usize),
    /// Linear between the centres of this block and the next.
    Lerp(usize),
}

/// Block geometry and interpolation of per-block values.
struct Blocks {
    len: usize,
    count: usize,
    n: usize,
}

impl Blocks {
    fn new(n: usize, fs: f64, cfg: &DetectConfig) -> Self {
        let len = pt::ms_to_samples(cfg.fusion_block_ms, fs).min(n.max(1));
        Self {
            len,
            count: n.div_ceil(len).max(1),
            n,
        }
    }
    fn range(&self, b: usize) -> (usize, usize) {
        (b * self.len, ((b + 1) * self.len).min(self.n))
    }
    /// Centre of block `b` (samples, possibly half-integer).
    fn centre(&self, b: usize) -> f64 {
        let (a, e) = self.range(b);
        (a + e) as f64 / 2.0
    }

    /// The samples cut into runs that share one rule of
    /// [`Blocks::interpolate_reference`]: a constant block value before the
    /// first centre, after the last one and when there is one block, else
    /// the line between the centres of blocks `b` and `b + 1`. In order,
    /// covering `0..n`.
    fn runs(&self) -> Vec<(usize, usize, Run)> {
        if self.count == 1 {
            return vec![(0, self.n, Run::Const(0))];
        }
        let (first, last) = (self.centre(0), self.centre(self.count - 1));
        // Samples `i as f64 <= first` are the integers up to `floor(first)`,
        // samples `i as f64 < last` those below `ceil(last)`.
        let head = ((first.floor() as usize) + 1).min(self.n);
        let end = (last.ceil() as usize).clamp(head, self.n);
        let mut out = vec![(0, head, Run::Const(0))];
        let mut i = head;
        while i < end {
            let b = self.segment(i).min(self.count - 2);
            // First sample of the next segment: 2j − len ≥ 2(b+1)·len.
            let run_end = if b == self.count - 2 {
                end
            } else {
                ((2 * b + 3) * self.len).div_ceil(2).min(end)
            };
            out.push((i, run_end, Run::Lerp(b)));
            i = run_end;
        }
        out.push((end, self.n, Run::Const(self.count - 1)));
        out
    }

    /// Per-sample linear interpolation between block centres, walking the
    /// samples in [`Blocks::runs`]; against the direct per-sample definition
    /// [`Blocks::interpolate_reference`] it checks the runs (tests only:
    /// [`combine`] interpolates inline).
    #[cfg(test)]
    fn interpolate(&self, v: &[f64]) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.n);
        for (a, e, run) in self.runs() {
            match run {
                Run::Const(b) => out.extend(std::iter::repeat_n(v[b], e - a)),
                Run::Lerp(b) => {
                    let (c0, c1) = (self.centre(b), self.centre(b + 1));
                    out.extend((a..e).map(|t| {
                        let f = ((t as f64 - c0) / (c1 - c0)).clamp(0.0, 1.0);
                        v[b] * (1.0 - f) + v[b + 1] * f
                    }))
                }
            }
        }
        out
    }

    /// The direct per-sample definition of [`Blocks::interpolate`] (test oracle).
    #[cfg(test)]
    fn interpolate_reference(&self, v: &[f64]) -> Vec<f64> {
        let c = |b: usize| {
            let (a, e) = self.range(b);
            (a + e) as f64 / 2.0
        };
        let mut out = vec![0.0; self.n];
        for (i, o) in out.iter_mut().enumerate() {
            let t = i as f64;
            if self.count == 1 || t <= c(0) {
                *o = v[0];
            } else if t >= c(self.count - 1) {
                *o = v[self.count - 1];
            } else {
                let b = ((t - self.len as f64 / 2.0) / self.len as f64).floor() as usize;
                let b = b.min(self.count - 2);
                let (c0, c1) = (c(b), c(b + 1));
                let f = ((t - c0) / (c1 - c0)).clamp(0.0, 1.0);
                *o = v[b] * (1.0 - f) + v[b + 1] * f;
            }
        }
        out
    }

    /// `floor((i − len/2) / len)` for a sample past the first block centre, in
    /// integers: `(2i − len) div 2·len`. Equal to the float expression, whose
    /// operands are exact and whose quotient's rounding error (relative 2⁻⁵³)
    /// is far below the 1/(2·len) gap to the next integer.
    fn segment(&self, i: usize) -> usize {
        (2 * i).saturating_sub(self.len) / (2 * self.len)
    }

    /// The float expression [`Blocks::segment`] replaces (test oracle).
    #[cfg(test)]
    fn segment_float(&self, i: usize) -> usize {
        let t = i as f64;
        ((t - self.len as f64 / 2.0) / self.len as f64).floor() as usize
    }
}

fn median(v: &mut [f64]) -> Option<f64> {
    (!v.is_empty()).then(|| crate::label::median(v))
}

/// Largest value (of `|x|` when `abs`) of the unmasked samples of each
/// block; `None` for a block without one. A block with no masked sample
/// (the usual case) takes its maximum by plain comparisons without the
/// per-sample mask test; for the finite signals of detection that is the
/// value of an `f64::max` fold ([`block_maxima_reference`], the test
/// oracle), up to the sign of a zero maximum, which no caller sees (the
/// scale drops maxima that are not positive, and a zero peak gives a zero
/// peakiness whatever its sign).
fn block_maxima(x: &[f64], abs: bool, mask: &[LeadState], blocks: &Blocks) -> Vec<Option<f64>> {
    (0..blocks.count)
        .map(|b| {
            let (a, e) = blocks.range(b);
            if a < e && mask[a..e].iter().all(|&m| m == LeadState::Ok) {
                let (lo, hi) = min_max(&x[a..e]);
                Some(if abs { hi.max(-lo) } else { hi })
            } else {
                let mut best: Option<f64> = None;
                for i in a..e {
                    if mask[i] == LeadState::Ok {
                        let v = if abs { x[i].abs() } else { x[i] };
                        best = Some(best.map_or(v, |m: f64| m.max(v)));
                    }
                }
                best
            }
        })
        .collect()
}

/// [`block_maxima`] sample by sample (test oracle).
#[cfg(test)]
fn block_maxima_reference(
    x: &[f64],
    abs: bool,
    mask: &[LeadState],
    blocks: &Blocks,
) -> Vec<Option<f64>> {
    (0..blocks.count)
        .map(|b| {
            let (a, e) = blocks.range(b);
            (a..e)
                .filter(|&i| mask[i] == LeadState::Ok)
                .map(|i| if abs { x[i].abs() } else { x[i] })
                .reduce(f64::max)
        })
        .collect()
}

/// Local beat level of a signal from its [`block_maxima`]: median of the
/// positive block maxima over neighbouring blocks. `None` where no block
/// has usable samples.
fn local_scale(maxima: &[Option<f64>], cfg: &DetectConfig) -> Vec<Option<f64>> {
    let maxima: Vec<Option<f64>> = maxima.iter().map(|m| m.filter(|m| *m > 0.0)).collect();
    let count = maxima.len();
    let k = cfg.fusion_scale_blocks / 2;
    (0..count)
        .map(|b| {
            let lo = b.saturating_sub(k);
            let hi = (b + k + 1).min(count);
            let mut v: Vec<f64> = maxima[lo..hi].iter().flatten().cloned().collect();
            median(&mut v)
        })
        .collect()
}

/// Combined integrated, filtered and slope signals for the given per-lead weights.
struct Combined {
    mwi: Vec<f64>,
    filt: Vec<f64>,
    slope: Vec<f64>,
}

/// The per-block values of one lead that [`combine`] interpolates.
struct LeadBlocks<'a> {
    /// Beat level of the integrated signal per block.
    scale_i: &'a [f64],
    /// Beat level of the band-passed signal per block.
    scale_f: &'a [f64],
    /// Quality weight per block.
    weight: &'a [f64],
    mask: &'a [LeadState],
}

/// The leads' integrated, filtered and slope signals, each divided by its
/// local beat level and averaged with the leads' local weights. Scales and
/// weights are the per-block values interpolated between block centres, the
/// weight zeroed where the lead is masked; the weights are also returned per
/// sample, with their sum per lead (`Iterator::sum` order).
///
/// Run by run of [`Blocks::runs`], and within a run lead by lead: a lead's
/// two block values of each array are fixed in a run, and each sample's
/// interpolation fraction (the same for every lead) is computed once per
/// run. Every lead adds its terms to the per-sample sums in lead order, as a
/// per-sample loop over the leads would, so every value is the same
/// expression as [`Blocks::interpolate`] followed by [`combine_arrays`] (the
/// test oracle), hence the same bits. The per-sample loops have no branches
/// (a skipped term is an added `+0.0`, which leaves a sum that starts at
/// `+0.0` unchanged), so the compiler vectorises their divisions and square
/// roots; the weight sums, sequential by definition, are taken afterwards
/// in one pass over all leads, whose independent chains then overlap.
fn combine(
    feats: &[LeadFeatures],
    per_lead: &[LeadBlocks],
    blocks: &Blocks,
) -> (Combined, Vec<Vec<f64>>, Vec<f64>) {
    let n = blocks.n;
    let (mut den, mut m, mut f, mut s) = (vec![0.0; n], vec![0.0; n], vec![0.0; n], vec![0.0; n]);
    let mut w2: Vec<Vec<f64>> = (0..feats.len()).map(|_| vec![0.0; n]).collect();
    let mut frac: Vec<f64> = Vec::with_capacity(blocks.len + 1);
    for (a, e, run) in blocks.runs() {
        if let Run::Lerp(b) = run {
            let (c0, c1) = (blocks.centre(b), blocks.centre(b + 1));
            frac.clear();
            frac.extend((a..e).map(|t| ((t as f64 - c0) / (c1 - c0)).clamp(0.0, 1.0)));
        }
        for ((fe, lb), wl) in feats.iter().zip(per_lead).zip(&mut w2) {
            let sums = LeadRun {
                mask: &lb.mask[a..e],
                mwi: &fe.mwi[a..e],
                bp: &fe.bp[a..e],
                d2: &fe.d2[a..e],
                w: &mut wl[a..e],
                den: &mut den[a..e],
                m: &mut m[a..e],
                f: &mut f[a..e],
                s: &mut s[a..e],
            };
            match run {
                Run::Const(b) => {
                    let (w, si, sf) = (lb.weight[b], lb.scale_i[b], lb.scale_f[b]);
                    // SAFETY: SSE2 is part of every x86-64 processor.
                    #[cfg(target_arch = "x86_64")]
                    unsafe {
                        sums.add_const(w, si, sf)
                    };
                    #[cfg(not(target_arch = "x86_64"))]
                    sums.add_const(w, si, sf);
                }
                Run::Lerp(b) => {
                    let (wt, sci, scf) = (
                        (lb.weight[b], lb.weight[b + 1]),
                        (lb.scale_i[b], lb.scale_i[b + 1]),
                        (lb.scale_f[b], lb.scale_f[b + 1]),
                    );
                    // SAFETY: SSE2 is part of every x86-64 processor.
                    #[cfg(target_arch = "x86_64")]
                    unsafe {
                        sums.add_lerp(&frac, wt, sci, scf)
                    };
                    #[cfg(not(target_arch = "x86_64"))]
                    sums.add_lerp(&frac, wt, sci, scf);
                }
            }
        }
    }
    let wsum = sums_in_order(&w2);
    // SAFETY: SSE2 is part of every x86-64 processor.
    #[cfg(target_arch = "x86_64")]
    unsafe {
        normalise_pairs(&den, &mut m, &mut f, &mut s)
    };
    #[cfg(not(target_arch = "x86_64"))]
    normalise_scalar(&den, &mut m, &mut f, &mut s);
    (
        Combined {
            mwi: m,
            filt: f,
            slope: s,
        },
        w2,
        wsum,
    )
}

/// The sums divided by the denominator (`f` and `s` then square-rooted),
/// 0 where the denominator is not positive; sample by sample.
#[cfg_attr(target_arch = "x86_64", allow(dead_code))]
fn normalise_scalar(den: &[f64], m: &mut [f64], f: &mut [f64], s: &mut [f64]) {
    for (((d, m), f), s) in den.iter().zip(m).zip(f).zip(s) {
        if *d > 0.0 {
            *m /= d;
            *f = (*f / d).sqrt();
            *s = (*s / d).sqrt();
        } else {
            (*m, *f, *s) = (0.0, 0.0, 0.0);
        }
    }
}

/// [`normalise_scalar`] two samples at a time in SSE2 lanes: both results
/// computed, the kept one chosen by a bit mask (`+0.0` where the
/// denominator is not positive), so every lane has the scalar bits.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "sse2")]
fn normalise_pairs(den: &[f64], m: &mut [f64], f: &mut [f64], s: &mut [f64]) {
    use std::arch::x86_64::{_mm_and_pd, _mm_cmpgt_pd, _mm_div_pd, _mm_setzero_pd, _mm_sqrt_pd};
    let n = den.len();
    let (m, f, s) = (&mut m[..n], &mut f[..n], &mut s[..n]);
    let z = _mm_setzero_pd();
    let mut k = 0;
    while k + 2 <= n {
        let r = k..k + 2;
        let d = lanes::load(&den[r.clone()]);
        let ok = _mm_cmpgt_pd(d, z);
        let qm = _mm_div_pd(lanes::load(&m[r.clone()]), d);
        let qf = _mm_sqrt_pd(_mm_div_pd(lanes::load(&f[r.clone()]), d));
        let qs = _mm_sqrt_pd(_mm_div_pd(lanes::load(&s[r.clone()]), d));
        lanes::store(&mut m[r.clone()], _mm_and_pd(ok, qm));
        lanes::store(&mut f[r.clone()], _mm_and_pd(ok, qf));
        lanes::store(&mut s[r], _mm_and_pd(ok, qs));
        k += 2;
    }
    normalise_scalar(&den[k..], &mut m[k..], &mut f[k..], &mut s[k..]);
}

/// `v.iter().sum::<f64>()` of each of `vs` (equal lengths), walking the
/// arrays side by side in groups of up to four: each sum adds its values in
/// its own order, as the iterator does, and the chains of additions of the
/// leads of a group are independent, so they run overlapped instead of one
/// after the other.
fn sums_in_order(vs: &[Vec<f64>]) -> Vec<f64> {
    let mut out: Vec<f64> = Vec::with_capacity(vs.len());
    for group in vs.chunks(4) {
        let mut acc = [std::iter::empty::<f64>().sum::<f64>(); 4];
        match group {
            [a] => {
                for x in a {
                    acc[0] += x;
                }
            }
            [a, b] => {
                for (x, y) in a.iter().zip(b) {
                    acc[0] += x;
                    acc[1] += y;
                }
            }
            [a, b, c] => {
                for ((x, y), z) in a.iter().zip(b).zip(c) {
                    acc[0] += x;
                    acc[1] += y;
                    acc[2] += z;
                }
            }
            [a, b, c, d] => {
                for (((x, y), z), u) in a.iter().zip(b).zip(c).zip(d) {
                    acc[0] += x;
                    acc[1] += y;
                    acc[2] += z;
                    acc[3] += u;
                }
            }
            _ => unreachable!("chunks of 1 to 4"),
        }
        out.extend_from_slice(&acc[..group.len()]);
    }
    out
}

/// One lead's samples of one run of [`combine`] (all slices of the run's length).
struct LeadRun<'a> {
    mask: &'a [LeadState],
    mwi: &'a [f64],
    bp: &'a [f64],
    d2: &'a [f64],
    w: &'a mut [f64],
    den: &'a mut [f64],
    m: &'a mut [f64],
    f: &'a mut [f64],
    s: &'a mut [f64],
}

impl LeadRun<'_> {
    /// Adds the lead's terms with fixed weight and scales (integrated,
    /// band-passed).
    #[cfg_attr(target_arch = "x86_64", target_feature(enable = "sse2"))]
    fn add_const(self, w: f64, si: f64, sf: f64) {
        #[cfg(target_arch = "x86_64")]
        {
            use std::arch::x86_64::_mm_set1_pd;
            let v = (_mm_set1_pd(w), _mm_set1_pd(si), _mm_set1_pd(sf));
            self.add_pairs(|_| v, |_| (w, si, sf));
        }
        #[cfg(not(target_arch = "x86_64"))]
        self.add_scalar(|_| (w, si, sf));
    }

    /// Adds the lead's terms with weight and scales interpolated between two
    /// block values by `frac` (one fraction per sample of the run).
    #[cfg_attr(target_arch = "x86_64", target_feature(enable = "sse2"))]
    fn add_lerp(
        self,
        frac: &[f64],
        (w0, w1): (f64, f64),
        (i0, i1): (f64, f64),
        (f0, f1): (f64, f64),
    ) {
        let fr = &frac[..self.mask.len()];
        let at = |k: usize| {
            let r = fr[k];
            (
                w0 * (1.0 - r) + w1 * r,
                i0 * (1.0 - r) + i1 * r,
                f0 * (1.0 - r) + f1 * r,
            )
        };
        #[cfg(target_arch = "x86_64")]
        {
            use std::arch::x86_64::{_mm_add_pd, _mm_mul_pd, _mm_set1_pd, _mm_sub_pd};
            let one = _mm_set1_pd(1.0);
            let (vw0, vw1) = (_mm_set1_pd(w0), _mm_set1_pd(w1));
            let (vi0, vi1) = (_mm_set1_pd(i0), _mm_set1_pd(i1));
            let (vf0, vf1) = (_mm_set1_pd(f0), _mm_set1_pd(f1));
            // The scalar expressions above, two samples at a time.
            let at2 = |k: usize| {
                let r = lanes::load(&fr[k..k + 2]);
                let q = _mm_sub_pd(one, r);
                (
                    _mm_add_pd(_mm_mul_pd(vw0, q), _mm_mul_pd(vw1, r)),
                    _mm_add_pd(_mm_mul_pd(vi0, q), _mm_mul_pd(vi1, r)),
                    _mm_add_pd(_mm_mul_pd(vf0, q), _mm_mul_pd(vf1, r)),
                )
            };
            self.add_pairs(at2, at);
        }
        #[cfg(not(target_arch = "x86_64"))]
        self.add_scalar(at);
    }

    /// The loop sample by sample: `at(k)` gives the weight and scales at
    /// the run's `k`-th sample.
    #[cfg_attr(target_arch = "x86_64", allow(dead_code))]
    #[inline(always)]
    fn add_scalar(self, at: impl Fn(usize) -> (f64, f64, f64)) {
        self.add_scalar_from(0, at)
    }

    /// [`Self::add_scalar`] from the run's `start`-th sample on (also the odd
    /// last sample of [`Self::add_pairs`]).
    #[inline(always)]
    fn add_scalar_from(self, start: usize, at: impl Fn(usize) -> (f64, f64, f64)) {
        let len = self.mask.len();
        let (mwi, bp, d2) = (&self.mwi[..len], &self.bp[..len], &self.d2[..len]);
        let (wo, den) = (&mut self.w[..len], &mut self.den[..len]);
        let (m, f, s) = (&mut self.m[..len], &mut self.f[..len], &mut self.s[..len]);
        for k in start..len {
            let (w, si, sf) = at(k);
            let t = terms(self.mask[k], w, si, sf, mwi[k], bp[k], d2[k]);
            wo[k] = t.0;
            den[k] += t.1;
            m[k] += t.2;
            f[k] += t.3;
            s[k] += t.4;
        }
    }

    /// The loop two samples at a time in SSE2 lanes (part of every x86-64
    /// processor): the compiler's cost model for the baseline target does
    /// not vectorise the scalar loop, although a two-lane division costs
    /// about what one scalar division does on current processors. Each lane
    /// performs [`terms`]' operations on its sample in the same order, with
    /// the selections as bit masks, so the results are the same bits;
    /// `at2(k)` gives the weights and scales of samples `k` and `k + 1`, and
    /// `at(k)` that of the odd last sample.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "sse2")]
    #[inline]
    fn add_pairs(
        self,
        at2: impl Fn(usize) -> (lanes::F2, lanes::F2, lanes::F2),
        at: impl Fn(usize) -> (f64, f64, f64),
    ) {
        use std::arch::x86_64::{
            _mm_add_pd, _mm_and_pd, _mm_andnot_pd, _mm_castsi128_pd, _mm_cmple_pd, _mm_div_pd,
            _mm_mul_pd, _mm_or_pd, _mm_set_epi64x, _mm_setzero_pd,
        };
        let len = self.mask.len();
        let (mwi, bp, d2) = (&self.mwi[..len], &self.bp[..len], &self.d2[..len]);
        let (wo, den) = (&mut self.w[..len], &mut self.den[..len]);
        let (m, f, s) = (&mut self.m[..len], &mut self.f[..len], &mut self.s[..len]);
        let z = _mm_setzero_pd();
        let ok = |v: LeadState| -i64::from(v == LeadState::Ok);
        let mut k = 0;
        while k + 2 <= len {
            let r = k..k + 2;
            let (w, si, sf) = at2(k);
            let keep = _mm_castsi128_pd(_mm_set_epi64x(ok(self.mask[k + 1]), ok(self.mask[k])));
            let w = _mm_and_pd(w, keep);
            let skip = _mm_or_pd(
                _mm_or_pd(_mm_cmple_pd(w, z), _mm_cmple_pd(si, z)),
                _mm_cmple_pd(sf, z),
            );
            let b = _mm_div_pd(lanes::load(&bp[r.clone()]), sf);
            let tm = _mm_div_pd(_mm_mul_pd(w, lanes::load(&mwi[r.clone()])), si);
            let tf = _mm_mul_pd(_mm_mul_pd(w, b), b);
            let ts = _mm_div_pd(_mm_mul_pd(w, lanes::load(&d2[r.clone()])), si);
            lanes::store(&mut wo[r.clone()], w);
            let add = |x: &mut [f64], t| {
                let v = _mm_add_pd(lanes::load(x), _mm_andnot_pd(skip, t));
                lanes::store(x, v);
            };
            add(&mut den[r.clone()], w);
            add(&mut m[r.clone()], tm);
            add(&mut f[r.clone()], tf);
            add(&mut s[r], ts);
            k += 2;
        }
        self.add_scalar_from(k, at);
    }
}

/// Two `f64` lanes in an SSE2 register, moved from and to slices without
/// `unsafe` (the compiler merges the two element moves into one).
#[cfg(target_arch = "x86_64")]
mod lanes {
    use std::arch::x86_64::{__m128d, _mm_cvtsd_f64, _mm_set_pd, _mm_unpackhi_pd};

    pub(super) type F2 = __m128d;

    /// `x[0]` in the low lane, `x[1]` in the high one.
    #[target_feature(enable = "sse2")]
    #[inline]
    pub(super) fn load(x: &[f64]) -> F2 {
        _mm_set_pd(x[1], x[0])
    }

    /// The low lane to `x[0]`, the high one to `x[1]`.
    #[target_feature(enable = "sse2")]
    #[inline]
    pub(super) fn store(x: &mut [f64], v: F2) {
        x[0] = _mm_cvtsd_f64(v);
        x[1] = _mm_cvtsd_f64(_mm_unpackhi_pd(v, v));
    }
}

/// One lead's contribution at one sample: (its weight, then its terms of
/// the denominator and of the three sums). A masked sample has weight 0 and
/// no terms; a sample with a weight or scale that is not positive keeps its
/// weight but adds no terms. "No term" is `+0.0`: the sums start at `+0.0`,
/// a sum of finite or infinite values is never `−0.0` (`x + y` is `−0.0`
/// only when both are), and adding `+0.0` to anything but `−0.0` returns it
/// unchanged, so this equals skipping the term. Every value is computed and
/// the results chosen by selection (no branches).
#[inline(always)]
fn terms(
    mask: LeadState,
    w: f64,
    si: f64,
    sf: f64,
    mwi: f64,
    bp: f64,
    d2: f64,
) -> (f64, f64, f64, f64, f64) {
    let w = if mask == LeadState::Ok { w } else { 0.0 };
    let skip = w <= 0.0 || si <= 0.0 || sf <= 0.0;
    let b = bp / sf;
    let (tm, tf, ts) = (w * mwi / si, w * b * b, w * d2 / si);
    if skip {
        (w, 0.0, 0.0, 0.0, 0.0)
    } else {
        (w, w, tm, tf, ts)
    }
}

/// [`combine`] over per-sample arrays of scales and weights (the form it
/// replaced; test oracle).
#[cfg(test)]
fn combine_arrays(
    feats: &[LeadFeatures],
    scale_i: &[Vec<f64>],
    scale_f: &[Vec<f64>],
    weights: &[Vec<f64>],
) -> Combined {
    let n = feats[0].mwi.len();
    let mut c = Combined {
        mwi: vec![0.0; n],
        filt: vec![0.0; n],
        slope: vec![0.0; n],
    };
    for t in 0..n {
        let mut den = 0.0;
        let (mut m, mut f, mut s) = (0.0, 0.0, 0.0);
        for (l, fe) in feats.iter().enumerate() {
            let w = weights[l][t];
            if w <= 0.0 || scale_i[l][t] <= 0.0 || scale_f[l][t] <= 0.0 {
                continue;
            }
            den += w;
            m += w * fe.mwi[t] / scale_i[l][t];
            let b = fe.bp[t] / scale_f[l][t];
            f += w * b * b;
            s += w * fe.d2[t] / scale_i[l][t];
        }
        if den > 0.0 {
            c.mwi[t] = m / den;
            c.filt[t] = (f / den).sqrt();
            c.slope[t] = (s / den).sqrt();
        }
    }
    c
}

/// Peakiness of a lead's integrated signal per block: median of the block
/// maxima over the block and its two neighbours, divided by a low percentile
/// (the background between beats). A clean lead has
/// tall narrow peaks on a quiet background; noise raises the background.
/// `None` where the lead has no usable sample.
#[derive(Debug, Clone, Copy)]
struct Peakiness {
    /// Peak over the background of three blocks.
    weight_ratio: f64,
    /// Peak over the background of the block alone.
    noise_ratio: f64,
    /// Background of the block alone.
    background: f64,
}

/// The indices of `[a, e)` that are multiples of `step`: the samples the
/// background percentiles are taken from (`quality_background_step_ms`).
fn stepped(a: usize, e: usize, step: usize) -> std::iter::StepBy<std::ops::Range<usize>> {
    (a.div_ceil(step) * step..e).step_by(step)
}

/// `maxima` are the [`block_maxima`] of `mwi`.
fn block_peakiness(
    mwi: &[f64],
    maxima: &[Option<f64>],
    mask: &[LeadState],
    blocks: &Blocks,
    step: usize,
    cfg: &DetectConfig,
) -> Vec<Option<Peakiness>> {
    // The usable samples of each block as sorted `total_key`s, sorted once:
    // a block's percentile is then one index, and that of three blocks a
    // short merge walk, instead of a selection over fresh copies for every
    // block and again for each of its neighbours. The k-th key of a multiset
    // does not depend on how it is found, so the values equal those of
    // [`block_peakiness_reference`] bit for bit.
    let mut keys: Vec<i64> = Vec::with_capacity(mwi.len());
    let mut starts: Vec<usize> = Vec::with_capacity(blocks.count + 1);
    for b in 0..blocks.count {
        let s = keys.len();
        starts.push(s);
        let (a, e) = blocks.range(b);
        keys.extend(
            stepped(a, e, step)
                .filter(|&i| mask[i] == LeadState::Ok)
                .map(|i| total_key(mwi[i])),
        );
        keys[s..].sort_unstable();
    }
    starts.push(keys.len());
    let run = |b: usize| &keys[starts[b]..starts[b + 1]];
    let rank = |len: usize| {
        ((cfg.quality_background_percentile / 100.0) * (len - 1) as f64).round() as usize
    };
    (0..blocks.count)
        .map(|b| {
            let lo = b.saturating_sub(1);
            let hi = (b + 2).min(blocks.count);
            let mut mx: Vec<f64> = maxima[lo..hi].iter().flatten().cloned().collect();
            let peak = median(&mut mx)?;
            // Background over the three blocks for the weight (steadier), and
            // over the block alone for the noise test (sharper in time).
            let runs: Vec<&[i64]> = (lo..hi).map(run).collect();
            let total: usize = runs.iter().map(|r| r.len()).sum();
            if total == 0 {
                return None;
            }
            let bg3 = from_total_key(kth_of_sorted_runs(&runs, rank(total)));
            let own = run(b);
            let bg1 = if own.is_empty() {
                bg3
            } else {
                from_total_key(own[rank(own.len())])
            };
            let ratio = |bg: f64| {
                if peak <= 0.0 {
                    0.0
                } else if bg > 0.0 {
                    peak / bg
                } else {
                    f64::INFINITY
                }
            };
            Some(Peakiness {
                weight_ratio: ratio(bg3),
                noise_ratio: ratio(bg1),
                background: bg1,
            })
        })
        .collect()
}

/// The `k`-th smallest (0-based) of the union of a few ascending runs, by
/// walking the merge `k` steps. `k` must be below the total length.
fn kth_of_sorted_runs(runs: &[&[i64]], k: usize) -> i64 {
    let mut at = [0usize; 8];
    assert!(runs.len() <= at.len(), "at most 8 runs");
    let head = |at: &[usize], r: usize| runs[r].get(at[r]).copied();
    let mut taken = 0usize;
    loop {
        let mut best: Option<(usize, i64)> = None;
        for r in 0..runs.len() {
            if let Some(v) = head(&at, r) {
                if best.is_none_or(|(_, b)| v < b) {
                    best = Some((r, v));
                }
            }
        }
        let (r, v) = best.expect("k below the total length");
        if taken == k {
            return v;
        }
        at[r] += 1;
        taken += 1;
    }
}

/// The direct definition of [`block_peakiness`]: each percentile by a
/// selection over copies of the samples of its blocks (test oracle).
#[cfg(test)]
fn block_peakiness_reference(
    mwi: &[f64],
    mask: &[LeadState],
    blocks: &Blocks,
    step: usize,
    cfg: &DetectConfig,
) -> Vec<Option<Peakiness>> {
    let maxima: Vec<Option<f64>> = (0..blocks.count)
        .map(|b| {
            let (a, e) = blocks.range(b);
            (a..e)
                .filter(|&i| mask[i] == LeadState::Ok)
                .map(|i| mwi[i])
                .reduce(f64::max)
        })
        .collect();
    let mut buf = Vec::new();
    (0..blocks.count)
        .map(|b| {
            let lo = b.saturating_sub(1);
            let hi = (b + 2).min(blocks.count);
            let mut mx: Vec<f64> = maxima[lo..hi].iter().flatten().cloned().collect();
            let peak = median(&mut mx)?;
            // Selection on `total_key`s: the same k-th value as selecting the
            // values with `total_cmp`, without a comparison closure.
            let pct = |buf: &mut Vec<i64>| -> Option<f64> {
                if buf.is_empty() {
                    return None;
                }
                let k = ((cfg.quality_background_percentile / 100.0) * (buf.len() - 1) as f64)
                    .round() as usize;
                Some(from_total_key(*buf.select_nth_unstable(k).1))
            };
            // Background over the three blocks for the weight (steadier), and
            // over the block alone for the noise test (sharper in time).
            buf.clear();
            let (a, _) = blocks.range(lo);
            let (_, e) = blocks.range(hi - 1);
            buf.extend(
                (a..e)
                    .filter(|&i| i % step == 0 && mask[i] == LeadState::Ok)
                    .map(|i| total_key(mwi[i])),
            );
            let bg3 = pct(&mut buf)?;
            buf.clear();
            let (a, e) = blocks.range(b);
            buf.extend(
                (a..e)
                    .filter(|&i| i % step == 0 && mask[i] == LeadState::Ok)
                    .map(|i| total_key(mwi[i])),
            );
            let bg1 = pct(&mut buf).unwrap_or(bg3);
            let ratio = |bg: f64| {
                if peak <= 0.0 {
                    0.0
                } else if bg > 0.0 {
                    peak / bg
                } else {
                    f64::INFINITY
                }
            };
            Some(Peakiness {
                weight_ratio: ratio(bg3),
                noise_ratio: ratio(bg1),
                background: bg1,
            })
        })
        .collect()
}

/// Each block's value, or for a block without one that of the nearest block
/// with one (the lower on a tie; 0 when none has one). A known block is its
/// own nearest (the only one at distance 0), so only the gaps search.
fn fill_nearest(v: &[Option<f64>]) -> Vec<f64> {
    let known: Vec<(usize, f64)> = v
        .iter()
        .enumerate()
        .filter_map(|(i, x)| x.map(|x| (i, x)))
        .collect();
    v.iter()
        .enumerate()
        .map(|(i, x)| match x {
            Some(x) => *x,
            None => nearest_known(&known, i),
        })
        .collect()
}

/// The value of the entry of `known` nearest to block `i` (first on ties).
fn nearest_known(known: &[(usize, f64)], i: usize) -> f64 {
    known
        .iter()
        .min_by_key(|(j, _)| (*j as i64 - i as i64).unsigned_abs())
        .map(|(_, x)| *x)
        .unwrap_or(0.0)
}

/// [`fill_nearest`] searching for every block (the form it replaced; test oracle).
#[cfg(test)]
fn fill_nearest_reference(v: &[Option<f64>]) -> Vec<f64> {
    let known: Vec<(usize, f64)> = v
        .iter()
        .enumerate()
        .filter_map(|(i, x)| x.map(|x| (i, x)))
        .collect();
    (0..v.len()).map(|i| nearest_known(&known, i)).collect()
}

/// Why a sample is unreadable; one byte per sample (`Option<Reason>`), where
/// a `&str` per sample took sixteen.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Reason {
    Saturation,
    Flat,
    Noise,
}

impl Reason {
    /// The name written into [`Span::reason`].
    fn name(self) -> &'static str {
        match self {
            Reason::Saturation => "saturation",
            Reason::Flat => "flat",
            Reason::Noise => "noise",
        }
    }
}

/// Why each sample is unreadable (every lead flat, saturated or, in a
/// noise block, noise), `None` where it is readable.
fn unreadable_reasons(
    masks: &[Vec<LeadState>],
    noise_block: &[bool],
    blocks: &Blocks,
) -> Vec<Option<Reason>> {
    let n = blocks.n;
    // Block by block (the blocks cover `0..n` in order), so that a sample's
    // block is known without a division.
    let mut reason_at = vec![None; n];
    let mut any_ok: Vec<bool> = Vec::with_capacity(blocks.len);
    for (b, &noise) in noise_block.iter().enumerate() {
        let (a, e) = blocks.range(b);
        if !noise {
            // Outside noise blocks a sample is unreadable only when no lead
            // is usable there: a block where some lead is usable at every
            // sample (the usual case) has none, found by a pass per lead
            // instead of the per-sample walk over the leads below.
            any_ok.clear();
            any_ok.resize(e - a, false);
            for m in masks {
                for (o, s) in any_ok.iter_mut().zip(&m[a..e]) {
                    *o |= *s == LeadState::Ok;
                }
            }
            if any_ok.iter().all(|&o| o) {
                continue;
            }
        }
        for (t, r) in reason_at[a..e]
            .iter_mut()
            .enumerate()
            .map(|(k, r)| (a + k, r))
        {
            *r = reason_at_sample(masks, t, noise);
        }
    }
    reason_at
}

/// Why sample `t` is unreadable, if it is: no lead is usable there (a lead
/// in a noisy block counts as unusable); saturation when at least as many
/// leads are saturated as flat, then flatness, then noise.
fn reason_at_sample(masks: &[Vec<LeadState>], t: usize, noise: bool) -> Option<Reason> {
    let mut all_bad = true;
    let (mut flat, mut sat) = (0, 0);
    for m in masks {
        match m[t] {
            LeadState::Flat => flat += 1,
            LeadState::Saturated => sat += 1,
            LeadState::Ok => {
                if !noise {
                    all_bad = false;
                }
            }
        }
    }
    all_bad.then_some(if sat > 0 && sat >= flat {
        Reason::Saturation
    } else if flat > 0 {
        Reason::Flat
    } else {
        Reason::Noise
    })
}

/// [`unreadable_reasons`] by the walk over the leads at every sample (the
/// form it replaced; test oracle).
#[cfg(test)]
fn unreadable_reasons_reference(
    masks: &[Vec<LeadState>],
    noise_block: &[bool],
    blocks: &Blocks,
) -> Vec<Option<Reason>> {
    let mut reason_at = vec![None; blocks.n];
    for (t, r) in reason_at.iter_mut().enumerate() {
        *r = reason_at_sample(masks, t, noise_block[t / blocks.len]);
    }
    reason_at
}

pub(crate) fn detect_fused(leads: &[&[f64]], fs: f64, cfg: &DetectConfig) -> Detection {
    let n = leads[0].len();
    let nl = leads.len();
    if n < 3 {
        return Detection {
            beats: Vec::new(),
            unreadable: Vec::new(),
            lead_quality: vec![0.0; nl],
        };
    }
    // Gaps (non-finite samples) read as zero; a lead without any is used as is.
    let clean: Vec<std::borrow::Cow<[f64]>> = leads
        .iter()
        .map(|l| {
            if l.iter().all(|v| v.is_finite()) {
                std::borrow::Cow::Borrowed(*l)
            } else {
                l.iter()
                    .map(|v| if v.is_finite() { *v } else { 0.0 })
                    .collect()
            }
        })
        .collect();
    let clean_refs: Vec<&[f64]> = clean.iter().map(|x| x.as_ref()).collect();
    let feats: Vec<LeadFeatures> = pt::leads_features(&clean_refs, fs, cfg);
    let masks: Vec<Vec<LeadState>> = (0..nl)
        .map(|l| lead_mask(leads[l], &clean[l], &feats[l].bp, fs, cfg))
        .collect();
    let blocks = Blocks::new(n, fs, cfg);

    // Block maxima of the integrated signal serve both its scale and its peakiness.
    let max_i: Vec<Vec<Option<f64>>> = (0..nl)
        .map(|l| block_maxima(&feats[l].mwi, false, &masks[l], &blocks))
        .collect();
    let sc_i: Vec<Vec<Option<f64>>> = max_i.iter().map(|m| local_scale(m, cfg)).collect();
    let sc_f: Vec<Vec<Option<f64>>> = (0..nl)
        .map(|l| local_scale(&block_maxima(&feats[l].bp, true, &masks[l], &blocks), cfg))
        .collect();
    // A block without a scale takes the nearest known one (the weight of such
    // a lead there is zero anyway through its mask).
    let scale_i: Vec<Vec<f64>> = sc_i.iter().map(|v| fill_nearest(v)).collect();
    let scale_f: Vec<Vec<f64>> = sc_f.iter().map(|v| fill_nearest(v)).collect();

    // Lead weights: relative peakiness, zero for a lead that looks like noise.
    // A lead is noise in a block when it has lost its peaks because its
    // background rose (relative to its beat level over the whole record); a
    // quiet background without peaks is a pause, not noise.
    let bg_step = pt::ms_to_samples(cfg.quality_background_step_ms, fs).max(1);
    let pb: Vec<Vec<Option<Peakiness>>> = (0..nl)
        .map(|l| block_peakiness(&feats[l].mwi, &max_i[l], &masks[l], &blocks, bg_step, cfg))
        .collect();
    let level: Vec<f64> = (0..nl)
        .map(|l| {
            let mut v: Vec<f64> = sc_i[l].iter().flatten().cloned().collect();
            median(&mut v).unwrap_or(0.0)
        })
        .collect();
    let noisy = |l: usize, b: usize| {
        pb[l][b].is_none_or(|p| {
            p.noise_ratio < cfg.noise_ratio_max
                && p.background >= cfg.noise_background_fraction * level[l]
        })
    };
    let peaky: Vec<Vec<Option<f64>>> = pb
        .iter()
        .map(|v| v.iter().map(|x| x.map(|x| x.weight_ratio)).collect())
        .collect();
    let mut bw = vec![vec![0.0; blocks.count]; nl];
    let mut noise_block = vec![false; blocks.count];
    for b in 0..blocks.count {
        let best = (0..nl).filter_map(|l| peaky[l][b]).fold(0.0, f64::max);
        noise_block[b] = (0..nl).all(|l| noisy(l, b));
        for l in 0..nl {
            bw[l][b] = match peaky[l][b] {
                Some(p)
                    if sc_i[l][b].is_some() && best > 0.0 && (!noisy(l, b) || noise_block[b]) =>
                {
                    (p / best).min(1.0).powf(cfg.quality_weight_power)
                }
                _ => 0.0,
            };
        }
    }
    let per_lead: Vec<LeadBlocks> = (0..nl)
        .map(|l| LeadBlocks {
            scale_i: &scale_i[l],
            scale_f: &scale_f[l],
            weight: &bw[l],
            mask: &masks[l],
        })
        .collect();
    let (c2, w2, wsum) = combine(&feats, &per_lead, &blocks);
    let pts = pt::decide(&c2.mwi, &c2.filt, &c2.slope, fs, cfg);

    // Fiducial: peak of the combined band-passed energy near the integrated peak.
    let h = pt::ms_to_samples(cfg.mwi_window_ms, fs) / 2;
    let energy: Vec<f64> = c2.filt.iter().map(|f| f * f).collect();
    let energy = pt::moving_mean(&energy, pt::ms_to_samples(cfg.fiducial_smoothing_ms, fs));
    let mut fid: Vec<usize> = pts
        .iter()
        .map(|b| argmax_in(&energy, b.index.saturating_sub(h), b.index + h + 1))
        .collect();
    fid.dedup();

    // Unreadable: every lead flat, saturated or noise.
    let reason_at = unreadable_reasons(&masks, &noise_block, &blocks);
    let min_len = pt::ms_to_samples(cfg.unreadable_min_ms, fs);
    let mut unreadable: Vec<Span> = Vec::new();
    let mut t = 0;
    // From one unreadable sample to the next (a jump over the readable ones).
    while let Some(k) = reason_at[t..].iter().position(|r| r.is_some()) {
        t += k;
        let reason = reason_at[t].unwrap_or(Reason::Noise);
        let mut e = t + 1;
        while e < n && reason_at[e].is_some() {
            e += 1;
        }
        if e - t >= min_len {
            // Name the stretch after its most frequent reason.
            let mut counts = [
                (Reason::Saturation, 0usize),
                (Reason::Flat, 0),
                (Reason::Noise, 0),
            ];
            for r in reason_at[t..e].iter().flatten() {
                for c in &mut counts {
                    if c.0 == *r {
                        c.1 += 1;
                    }
                }
            }
            let best = counts
                .iter()
                .max_by_key(|c| c.1)
                .map(|c| c.0)
                .unwrap_or(reason);
            unreadable.push(Span {
                start: t,
                end: e,
                reason: best.name().to_string(),
            });
        }
        t = e;
    }
    let inside = |s: usize| unreadable.iter().any(|u| s >= u.start && s < u.end);
    fid.retain(|&s| !inside(s));

    let lead_quality: Vec<f64> = wsum.iter().map(|s| s / n as f64).collect();
    let weights_at: Vec<Vec<f64>> = fid
        .iter()
        .map(|&s| (0..nl).map(|l| w2[l][s]).collect())
        .collect();
    let clean: Vec<&[f64]> = clean.iter().map(|c| &c[..]).collect();
    let (fid, labels) = label::label_beats(&clean, &fid, &weights_at, &c2.slope, fs, cfg);
    let beats = fid
        .iter()
        .zip(labels)
        .map(|(&sample, label)| Beat { sample, label })
        .collect();
    Detection {
        beats,
        unreadable,
        lead_quality,
    }
}

#[cfg(test)]
mod block_tests {
    use super::*;

    // Quad-lane extremes against the `f64::min`/`f64::max` fold (oracle) for
    // every length up to 40 and every position of the extremes.
    #[test]
    fn min_max_equals_fold() {
        for n in 0..40usize {
            let x: Vec<f64> = (0..n)
                .map(|i| ((i * 7919) % 1013) as f64 / 100.0 - 5.0)
                .collect();
            let fold = x
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), &v| {
                    (l.min(v), h.max(v))
                });
            assert_eq!(min_max(&x), fold, "n={n}");
        }
    }

    // Block maxima with the all-usable shortcut against the per-sample fold
    // (oracle): signed and absolute values, masked stretches inside and
    // across blocks, a short last block.
    #[test]
    fn block_maxima_equal_per_sample_fold() {
        let n = 5_321usize;
        let x: Vec<f64> = (0..n)
            .map(|i| ((i * 7919) % 1013) as f64 / 100.0 - 6.0)
            .collect();
        let mask: Vec<LeadState> = (0..n)
            .map(|i| match i {
                1000..=1999 => LeadState::Flat,
                2500..=2800 => LeadState::Saturated,
                _ if i % 997 == 0 => LeadState::Flat,
                _ => LeadState::Ok,
            })
            .collect();
        for len in [500usize, 333, 1000, 7] {
            let blocks = Blocks {
                len,
                count: n.div_ceil(len),
                n,
            };
            for abs in [false, true] {
                assert_eq!(
                    block_maxima(&x, abs, &mask, &blocks),
                    block_maxima_reference(&x, abs, &mask, &blocks),
                    "len={len} abs={abs}"
                );
            }
        }
    }

    // Lead masks with the jump to extreme samples and lane extremes against
    // the walk over every run with fold extremes (oracle): clipped runs at
    // both extremes (long and short), a flat stretch, a run at the extreme
    // that ends the signal, gaps (NaN) and a lead without any run.
    #[test]
    fn lead_mask_equals_run_walk() {
        let fs = 250.0;
        let cfg = DetectConfig::default();
        let n = 20_000;
        let base: Vec<f64> = (0..n)
            .map(|i| (i as f64 * 0.031).sin() * 1.5 + ((i * 7919) % 101) as f64 / 500.0)
            .collect();
        let mut cases: Vec<Vec<f64>> = vec![base.clone()];
        let mut clip = base.clone();
        for v in &mut clip {
            *v = v.clamp(-1.2, 1.3);
        }
        cases.push(clip.clone());
        let mut mixed = clip.clone();
        mixed[5000..8000].iter_mut().for_each(|v| *v = 0.2);
        mixed[n - 30..].iter_mut().for_each(|v| *v = 1.3);
        mixed[12_000] = f64::NAN;
        mixed[12_001..12_400].iter_mut().for_each(|v| *v = f64::NAN);
        cases.push(mixed);
        let mut short = base.clone();
        short[300..305].iter_mut().for_each(|v| *v = 9.0);
        short[900..960].iter_mut().for_each(|v| *v = -9.0);
        cases.push(short);
        for (c, raw) in cases.iter().enumerate() {
            let x: Vec<f64> = raw
                .iter()
                .map(|v| if v.is_finite() { *v } else { 0.0 })
                .collect();
            let bp: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).chain([0.0]).collect();
            let fast = lead_mask(raw, &x, &bp, fs, &cfg);
            let slow = saturation_runs_reference(raw, &x, &bp, fs, &cfg);
            assert_eq!(fast, slow, "case {c}");
            if c == 1 {
                assert!(fast.contains(&LeadState::Saturated), "clipping found");
            }
        }
    }

    // Peak-to-peak from per-hop extremes against the direct pass (oracle) for
    // every window start and several window lengths, including windows cut
    // short by the end of the signal.
    #[test]
    fn hop_ranges_equal_direct_peak_to_peak() {
        let x: Vec<f64> = (0..1000)
            .map(|i| ((i * 7919) % 1013) as f64 / 100.0 - 5.0)
            .collect();
        for w in [1usize, 3, 4, 9, 250, 251, 999] {
            let hop = (w / 4).max(1);
            let r = HopRanges::new(&x, hop);
            let mut start = 0;
            while start < x.len() {
                let end = (start + w).min(x.len());
                assert_eq!(
                    r.ptp(&x, start, end),
                    ptp(&x[start..end]),
                    "w={w} start={start}"
                );
                start += hop;
            }
        }
    }

    // Run-wise interpolation against the per-sample definition (oracle), bit
    // for bit, for block counts 1, 2 and many, with a short last block.
    #[test]
    fn interpolation_equals_per_sample_definition() {
        for (n, len) in [
            (1000usize, 2000usize),
            (1000, 500),
            (1001, 500),
            (650_001, 500),
            (10_007, 333),
            (7, 2),
            (5, 1),
        ] {
            let b = Blocks {
                len,
                count: n.div_ceil(len),
                n,
            };
            let v: Vec<f64> = (0..b.count)
                .map(|k| ((k * 37) % 11) as f64 * 0.3 - 1.0)
                .collect();
            let fast = b.interpolate(&v);
            let slow = b.interpolate_reference(&v);
            assert_eq!(fast.len(), slow.len());
            for (i, (x, y)) in fast.iter().zip(&slow).enumerate() {
                assert_eq!(x.to_bits(), y.to_bits(), "n={n} len={len} i={i}");
            }
        }
    }

    // The integer block index against the float expression it replaces, over
    // whole records of several lengths and block sizes (odd and even).
    #[test]
    fn integer_segment_equals_float_floor() {
        for (n, len) in [
            (1000usize, 500usize),
            (650_000, 500),
            (10_007, 333),
            (5_000, 1),
        ] {
            let b = Blocks {
                len,
                count: n.div_ceil(len),
                n,
            };
            let first = (b.range(0).0 + b.range(0).1) as f64 / 2.0;
            for i in 0..n {
                if i as f64 > first {
                    assert_eq!(b.segment(i), b.segment_float(i), "n={n} len={len} i={i}");
                }
            }
        }
    }

    // Sorted blocks and merge walks against per-block selection over copies
    // (oracle), bit for bit: a spiky signal with flat and saturated stretches
    // (a block with no usable sample, blocks partly masked), a short last
    // block, and several percentiles.
    #[test]
    fn block_peakiness_equals_direct_selection() {
        let n: usize = 10_137;
        let mut s = 0x9e37_79b9_7f4a_7c15u64;
        let mut next = || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        let mwi: Vec<f64> = (0..n)
            .map(|i| {
                let beat = if i % 200 < 10 { 50.0 } else { 0.0 };
                beat + next() * 3.0
            })
            .collect();
        let mask: Vec<LeadState> = (0..n)
            .map(|i| match i {
                1000..=1999 => LeadState::Flat,
                2500..=2800 => LeadState::Saturated,
                _ if i % 97 == 0 => LeadState::Flat,
                _ => LeadState::Ok,
            })
            .collect();
        for (pct, step) in [(1.0, 1), (30.0, 1), (30.0, 4), (50.0, 7), (90.0, 3)] {
            let cfg = DetectConfig {
                quality_background_percentile: pct,
                ..DetectConfig::default()
            };
            let blocks = Blocks {
                len: 500,
                count: n.div_ceil(500),
                n,
            };
            let maxima = block_maxima(&mwi, false, &mask, &blocks);
            let fast = block_peakiness(&mwi, &maxima, &mask, &blocks, step, &cfg);
            let slow = block_peakiness_reference(&mwi, &mask, &blocks, step, &cfg);
            assert_eq!(fast.len(), slow.len());
            let bits = |p: &Option<Peakiness>| {
                p.map(|p| {
                    (
                        p.weight_ratio.to_bits(),
                        p.noise_ratio.to_bits(),
                        p.background.to_bits(),
                    )
                })
            };
            for (b, (f, r)) in fast.iter().zip(&slow).enumerate() {
                assert_eq!(bits(f), bits(r), "pct={pct} step={step} block={b}");
            }
        }
    }

    // The merge walk against sorting the concatenation (oracle).
    #[test]
    fn kth_of_runs_equals_sorted_concatenation() {
        let a = [1i64, 4, 4, 9];
        let b = [-3i64, 4, 10];
        let c: [i64; 0] = [];
        let d = [2i64];
        let runs: [&[i64]; 4] = [&a, &b, &c, &d];
        let mut all: Vec<i64> = runs.iter().flat_map(|r| r.iter().copied()).collect();
        all.sort_unstable();
        for (k, v) in all.iter().enumerate() {
            assert_eq!(kth_of_sorted_runs(&runs, k), *v, "k={k}");
        }
    }

    // Nearest-known filling with the shortcut for known blocks against the
    // search for every block (oracle): gaps at both ends, inside, ties
    // between two known blocks, nothing known, everything known.
    #[test]
    fn fill_nearest_equals_search() {
        let cases: Vec<Vec<Option<f64>>> = vec![
            vec![],
            vec![None, None, None],
            vec![Some(1.0), Some(2.0), Some(-0.0)],
            vec![None, Some(1.5), None, None, Some(2.5), None, None, None],
            vec![
                Some(3.0),
                None,
                Some(4.0),
                None,
                None,
                None,
                Some(5.0),
                None,
            ],
        ];
        for v in &cases {
            let bits = |w: Vec<f64>| w.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            assert_eq!(
                bits(fill_nearest(v)),
                bits(fill_nearest_reference(v)),
                "{v:?}"
            );
        }
        // The tie goes to the lower block.
        assert_eq!(fill_nearest(&[Some(1.0), None, Some(2.0)])[1], 1.0);
    }

    // The two-lane loop of a run against the sample-by-sample loop (oracle),
    // bit for bit: odd and even lengths, masked samples, weights and scales
    // that are negative, zero, infinite or NaN, sums holding NaN or infinity.
    #[test]
    fn lead_run_lanes_equal_scalar_loop() {
        let odd = [0.0, -0.0, 1.5, -2.0, f64::INFINITY, f64::NAN, 3.25, 1e-300];
        for len in [0usize, 1, 2, 3, 8, 17, 64] {
            let v = |seed: usize, k: usize| {
                let i = seed * 31 + k * 7;
                if i % 11 == 3 {
                    odd[i % odd.len()]
                } else {
                    ((i * 7919) % 1013) as f64 / 97.0 - 1.0
                }
            };
            let col = |seed: usize| (0..len).map(|k| v(seed, k)).collect::<Vec<f64>>();
            let mask: Vec<LeadState> = (0..len)
                .map(|k| match k % 7 {
                    2 => LeadState::Flat,
                    5 => LeadState::Saturated,
                    _ => LeadState::Ok,
                })
                .collect();
            let frac: Vec<f64> = (0..len).map(|k| (k as f64 / 13.0).fract()).collect();
            let (mwi, bp, d2) = (col(1), col(2), col(3));
            let sums0 = [col(4), col(5), col(6), col(7)];
            let params = [
                ((0.5, 0.9), (1.0, 2.0), (0.3, 0.7)),
                ((-0.5, 0.9), (0.0, 2.0), (0.3, -0.7)),
                ((f64::NAN, 0.9), (1.0, f64::INFINITY), (0.0, 0.7)),
            ];
            for (wp, ip, fp) in params {
                let run = |lanes: bool, lerp: bool| {
                    let mut wo = vec![0.0; len];
                    let [mut den, mut m, mut f, mut s] = sums0.clone();
                    let r = LeadRun {
                        mask: &mask,
                        mwi: &mwi,
                        bp: &bp,
                        d2: &d2,
                        w: &mut wo,
                        den: &mut den,
                        m: &mut m,
                        f: &mut f,
                        s: &mut s,
                    };
                    let at = |k: usize| {
                        let r: f64 = frac[k];
                        (
                            wp.0 * (1.0 - r) + wp.1 * r,
                            ip.0 * (1.0 - r) + ip.1 * r,
                            fp.0 * (1.0 - r) + fp.1 * r,
                        )
                    };
                    match (lanes, lerp) {
                        // SAFETY: SSE2 is part of every x86-64 processor.
                        #[cfg(target_arch = "x86_64")]
                        (true, true) => unsafe { r.add_lerp(&frac, wp, ip, fp) },
                        #[cfg(target_arch = "x86_64")]
                        (true, false) => unsafe { r.add_const(wp.1, ip.1, fp.1) },
                        #[cfg(not(target_arch = "x86_64"))]
                        (true, true) => r.add_lerp(&frac, wp, ip, fp),
                        #[cfg(not(target_arch = "x86_64"))]
                        (true, false) => r.add_const(wp.1, ip.1, fp.1),
                        (false, true) => r.add_scalar(at),
                        (false, false) => r.add_scalar(|_| (wp.1, ip.1, fp.1)),
                    }
                    [wo, den, m, f, s]
                        .iter()
                        .map(|a| a.iter().map(|x| x.to_bits()).collect::<Vec<_>>())
                        .collect::<Vec<_>>()
                };
                for lerp in [true, false] {
                    assert_eq!(run(true, lerp), run(false, lerp), "len={len} lerp={lerp}");
                }
            }
        }
    }

    // The two-lane normalisation against the sample-by-sample form (oracle),
    // bit for bit: denominators positive, zero, negative, NaN; odd length.
    #[test]
    fn normalise_lanes_equal_scalar() {
        let odd = [0.0, -0.0, 2.5, -1.0, f64::NAN, f64::INFINITY, 1e-310, 7.0];
        let n = 203;
        let v = |seed: usize| -> Vec<f64> {
            (0..n)
                .map(|i| {
                    let j = i * 13 + seed;
                    if j.is_multiple_of(5) {
                        odd[j % odd.len()]
                    } else {
                        ((j * 7919) % 1013) as f64 / 50.0 - 3.0
                    }
                })
                .collect()
        };
        let den = v(1);
        let (m0, f0, s0) = (v(2), v(3), v(4));
        let run = |lanes: bool| {
            let (mut m, mut f, mut s) = (m0.clone(), f0.clone(), s0.clone());
            if lanes {
                // SAFETY: SSE2 is part of every x86-64 processor.
                #[cfg(target_arch = "x86_64")]
                unsafe {
                    normalise_pairs(&den, &mut m, &mut f, &mut s)
                };
                #[cfg(not(target_arch = "x86_64"))]
                normalise_scalar(&den, &mut m, &mut f, &mut s);
            } else {
                normalise_scalar(&den, &mut m, &mut f, &mut s);
            }
            [m, f, s].map(|a| a.iter().map(|x| x.to_bits()).collect::<Vec<_>>())
        };
        assert_eq!(run(true), run(false));
    }

    // Unreadable reasons with the per-block shortcut against the per-sample
    // walk (oracle): three leads, flat and saturated stretches overlapping
    // in every combination, noise blocks, a short last block.
    #[test]
    fn unreadable_reasons_equal_per_sample_walk() {
        let n = 7_777usize;
        let blocks = Blocks {
            len: 500,
            count: n.div_ceil(500),
            n,
        };
        let masks: Vec<Vec<LeadState>> = (0..3)
            .map(|l| {
                (0..n)
                    .map(|i| match (i / (97 + 40 * l)) % 5 {
                        1 => LeadState::Flat,
                        3 if l != 1 => LeadState::Saturated,
                        _ => LeadState::Ok,
                    })
                    .collect()
            })
            .collect();
        for noise_every in [0usize, 2, 3] {
            let noise: Vec<bool> = (0..blocks.count)
                .map(|b| noise_every > 0 && b % noise_every == 1)
                .collect();
            let fast = unreadable_reasons(&masks, &noise, &blocks);
            assert_eq!(fast, unreadable_reasons_reference(&masks, &noise, &blocks));
            assert!(
                fast.iter().any(|r| r.is_some()),
                "the case has unreadable samples"
            );
        }
    }

    // The one-pass combination against interpolated arrays and the per-sample
    // combination (oracle), bit for bit: one to six leads (the weight sums
    // go in groups of up to four), masked stretches, blocks
    // with zero weight or zero scale, a short last block, one block only.
    #[test]
    fn fused_combination_equals_interpolated_arrays() {
        for (n, len, nl) in [
            (10_250usize, 500usize, 2usize),
            (700, 1000, 2),
            (2_001, 200, 2),
            (3_100, 250, 1),
            (3_100, 250, 3),
            (4_321, 300, 6),
        ] {
            let blocks = Blocks {
                len,
                count: n.div_ceil(len),
                n,
            };
            let feats: Vec<LeadFeatures> = (0..nl)
                .map(|l| {
                    let bp: Vec<f64> = (0..n)
                        .map(|i| ((i * (3 + l)) as f64 * 0.05).sin())
                        .collect();
                    let d2: Vec<f64> = bp.iter().map(|v| v * v * 40.0 + 0.1).collect();
                    let mwi = pt::moving_mean(&d2, 37);
                    LeadFeatures { bp, d2, mwi }
                })
                .collect();
            let per_block = |l: usize, k: usize| -> Vec<f64> {
                (0..blocks.count)
                    .map(|b| match (b + l + k) % 5 {
                        0 => 0.0,
                        r => r as f64 * 0.37 + l as f64,
                    })
                    .collect()
            };
            let scale_i: Vec<Vec<f64>> = (0..nl).map(|l| per_block(l, 1)).collect();
            let scale_f: Vec<Vec<f64>> = (0..nl).map(|l| per_block(l, 2)).collect();
            let weight: Vec<Vec<f64>> = (0..nl).map(|l| per_block(l, 3)).collect();
            let masks: Vec<Vec<LeadState>> = (0..nl)
                .map(|l| {
                    (0..n)
                        .map(|i| {
                            if (i / 300) % 4 == l + 1 {
                                LeadState::Flat
                            } else {
                                LeadState::Ok
                            }
                        })
                        .collect()
                })
                .collect();
            let per_lead: Vec<LeadBlocks> = (0..nl)
                .map(|l| LeadBlocks {
                    scale_i: &scale_i[l],
                    scale_f: &scale_f[l],
                    weight: &weight[l],
                    mask: &masks[l],
                })
                .collect();
            let (fast, w2, wsum) = combine(&feats, &per_lead, &blocks);
            let si: Vec<Vec<f64>> = scale_i.iter().map(|v| blocks.interpolate(v)).collect();
            let sf: Vec<Vec<f64>> = scale_f.iter().map(|v| blocks.interpolate(v)).collect();
            let ws: Vec<Vec<f64>> = (0..nl)
                .map(|l| {
                    blocks
                        .interpolate(&weight[l])
                        .into_iter()
                        .zip(&masks[l])
                        .map(|(w, m)| if *m == LeadState::Ok { w } else { 0.0 })
                        .collect()
                })
                .collect();
            let slow = combine_arrays(&feats, &si, &sf, &ws);
            let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&fast.mwi), bits(&slow.mwi), "n={n}");
            assert_eq!(bits(&fast.filt), bits(&slow.filt), "n={n}");
            assert_eq!(bits(&fast.slope), bits(&slow.slope), "n={n}");
            for l in 0..nl {
                assert_eq!(bits(&w2[l]), bits(&ws[l]), "n={n} lead {l}");
                assert_eq!(wsum[l].to_bits(), ws[l].iter().sum::<f64>().to_bits());
            }
        }
    }
}
