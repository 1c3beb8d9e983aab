//! Single-lead wavelet delineation (Martínez et al., IEEE TBME 2004, after
//! Li, Zheng & Tai, IEEE TBME 1995), run at the analysis rate.
//!
//! The lead is resampled to `analysis_fs_hz` (cubic interpolation; the input
//! is expected to be low-passed well below half that rate), the quadratic
//! spline SWT gives `W_1..W_5`, and every beat is delineated with sample
//! positions in the analysis domain (fractional where the rule interpolates),
//! then mapped back to input samples by rounding.

use tendline_dsp::wavelet::swt_quadratic_spline_flat_ends;

use crate::{BeatMarks, DelineateConfig, Mark, PeakCrossing, TMorphology};

/// How [`LeadAnalysis::find_wave`] picks the lobes of a P or T wave.
#[derive(Debug, Clone, Copy)]
struct WaveRule {
    /// Opposite-sign maxima above `gamma` × the largest are significant.
    gamma: f64,
    /// Both neighbours above this fraction make the wave biphasic.
    biphasic_frac: f64,
    /// A biphasic wave's boundaries come from its outer lobes.
    three_lobe_bounds: bool,
    /// Maxima further (analysis samples) from the largest are another wave.
    reach: usize,
    /// A lone lobe gets a peak at the next zero crossing.
    lone_peak: bool,
    /// The earlier neighbour wins if at least this fraction of the later.
    early_frac: f64,
    /// When set, the outer lobe of a three-lobe wave is kept only if
    /// [`OuterCheck`] confirms it.
    outer_check: Option<OuterCheck>,
    /// Which sign change of W_k between the dominant pair is the peak.
    peak_crossing: PeakCrossing,
}

/// Confirmation of the outer (third) lobe of a biphasic wave: it must be
/// contiguous with the main pair, not a separate deflection (another wave,
/// baseline drift) that happens to lie within reach.
#[derive(Debug, Clone, Copy)]
struct OuterCheck {
    /// Significance level as a slope (mV/s): the outer lobe must reach it,
    /// and |W_k| below it counts as baseline.
    min_slope_mv_per_s: f64,
    /// Longest stretch (analysis samples) of baseline between the outer
    /// lobe and the adjacent lobe of the pair.
    max_quiet: usize,
}

/// One lead prepared for analysis.
pub(crate) struct LeadAnalysis {
    /// Signal at the analysis rate (mV).
    x: Vec<f64>,
    /// `w[k-1]` = W_k, scales 2^1..2^5 (see `tendline_dsp::wavelet`).
    w: Vec<Vec<f64>>,
    /// Robust activity level of W_2..W_5 (1.4826 × median |W_k|), read
    /// through [`Self::noise`]; W_1's is never used, so not computed.
    noise: Vec<f64>,
    /// Input samples per analysis sample.
    ratio: f64,
    n_in: usize,
    fs_a: f64,
}

/// Catmull-Rom cubic interpolation of `x` (rate `fs_in`) at rate `fs_out`.
/// Edge samples are repeated beyond the ends.
pub(crate) fn resample_cubic(x: &[f64], fs_in: f64, fs_out: f64) -> Vec<f64> {
    if x.is_empty() {
        return Vec::new();
    }
    if (fs_in - fs_out).abs() < 1e-9 {
        return x.to_vec();
    }
    let n = x.len();
    let step = fs_in / fs_out;
    let n_out = (((n - 1) as f64) / step).floor() as usize + 1;
    let at = |i: isize| x[i.clamp(0, n as isize - 1) as usize];
    (0..n_out)
        .map(|j| {
            let t = j as f64 * step;
            let i = t.floor() as isize;
            let u = t - i as f64;
            let (p0, p1, p2, p3) = (at(i - 1), at(i), at(i + 1), at(i + 2));
            p1 + 0.5
                * u
                * (p2 - p0
                    + u * (2.0 * p0 - 5.0 * p1 + 4.0 * p2 - p3 + u * (3.0 * (p1 - p2) + p3 - p0)))
        })
        .collect()
}

/// The lead at the analysis rate with gaps (non-finite values) read as 0.
/// At the analysis rate already, one pass over the input: [`resample_cubic`]
/// would copy it first (the form this replaces; test oracle).
fn analysis_signal(x: &[f64], fs: f64, fs_a: f64) -> Vec<f64> {
    let finite = |v: f64| if v.is_finite() { v } else { 0.0 };
    // The same test as `resample_cubic`'s for returning its input.
    if (fs - fs_a).abs() < 1e-9 {
        x.iter().map(|&v| finite(v)).collect()
    } else {
        resample_cubic(x, fs, fs_a)
            .into_iter()
            .map(finite)
            .collect()
    }
}

/// Element `n / 2` of the sorted |values| of an array of `n` values made of
/// `inner` and `n - inner.len()` zeros (0 when `n` is 0): the zeros are the
/// smallest keys, so they take the first ranks and the rest is a selection
/// in `inner`. Equals `kth_abs` of the whole array (the test oracle).
fn median_abs_zero_padded(inner: &[f64], n: usize) -> f64 {
    let k = n / 2;
    let zeros = n - inner.len();
    if k < zeros {
        return 0.0;
    }
    tendline_dsp::select::kth_abs(inner, k - zeros).unwrap_or(0.0)
}

fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    let m = v.len() / 2;
    v.select_nth_unstable_by(m, |a, b| a.total_cmp(b));
    v[m]
}

/// Positions of the wave lobes (modulus maxima) that define one wave.
#[derive(Debug, Clone)]
struct Lobes {
    /// Significant maxima in time order, alternating sign (2 or 3), or a
    /// single maximum for a monotonic wave.
    idx: Vec<usize>,
    /// Peak (zero crossing) between the dominant pair, if any.
    peak: Option<usize>,
    /// Largest |W_k| of the wave.
    amp: f64,
    morph: TMorphology,
}

impl LeadAnalysis {
    pub(crate) fn new(x: &[f64], fs: f64, cfg: &DelineateConfig) -> Self {
        let fs_a = cfg.analysis_fs_hz;
        let xa = analysis_signal(x, fs, fs_a);
        // A tiled median beat starts and ends with a second of its edge
        // values: the transform skips those runs (its details are exactly
        // zero there) and the noise levels count them as zeros.
        let (w, keep) = swt_quadratic_spline_flat_ends(&xa, 5);
        let noise = w[1..]
            .iter()
            // Median |W_k| by linear-time selection (same value as `median` of the |W_k|).
            .map(|wk| 1.4826 * median_abs_zero_padded(&wk[keep.clone()], wk.len()) + 1e-9)
            .collect();
        Self {
            x: xa,
            w,
            noise,
            ratio: fs / fs_a,
            n_in: x.len(),
            fs_a,
        }
    }

    /// W_k (k = 1..=5, clamped) at the analysis rate (multi-lead QRS
    /// envelope in `global`).
    pub(crate) fn w_k(&self, k: usize) -> &[f64] {
        &self.w[k.clamp(1, self.w.len()) - 1]
    }

    /// Input samples per analysis sample.
    pub(crate) fn ratio(&self) -> f64 {
        self.ratio
    }

    fn ms(&self, v: f64) -> f64 {
        v * self.fs_a / 1000.0
    }

    fn ms_i(&self, v: f64) -> isize {
        self.ms(v).round() as isize
    }

    fn len(&self) -> isize {
        self.x.len() as isize
    }

    /// Analysis-domain position to input sample (None if outside).
    fn to_input(&self, pos: f64) -> Option<usize> {
        let s = (pos * self.ratio).round();
        if s.is_finite() && s >= 0.0 && (s as usize) < self.n_in {
            Some(s as usize)
        } else {
            None
        }
    }

    fn mark(&self, pos: Option<f64>, confidence: f64) -> Option<Mark> {
        pos.and_then(|p| self.to_input(p)).map(|sample| Mark {
            sample,
            confidence: confidence.clamp(0.0, 1.0) as f32,
        })
    }

    /// Noise level of W_k, k in 2..=5.
    fn noise(&self, k: usize) -> f64 {
        self.noise[k - 2]
    }

    fn confidence(&self, amp: f64, k: usize, cfg: &DelineateConfig) -> f64 {
        let snr = amp / self.noise(k);
        snr / (snr + cfg.confidence_snr_half)
    }

    /// Local extrema of `w` (positive maxima, negative minima) in `[lo, hi]`.
    ///
    /// Without branches on the data: every index is written at the end of
    /// the list, which grows only when the sample is an extremum (the tests
    /// of the samples of a W_k change outcome too irregularly for branch
    /// prediction); on x86-64 the tests of two samples at a time in SSE2
    /// lanes. [`Self::extrema_reference`] is the test oracle.
    fn extrema(w: &[f64], lo: isize, hi: isize) -> Vec<usize> {
        let lo = lo.max(1) as usize;
        let hi = (hi.min(w.len() as isize - 2)).max(0) as usize;
        if hi < lo {
            return Vec::new();
        }
        let mut out = vec![0usize; hi - lo + 1];
        // SAFETY: SSE2 is part of every x86-64 processor.
        #[cfg(target_arch = "x86_64")]
        let count = unsafe { extrema_lanes(w, lo, hi, &mut out) };
        #[cfg(not(target_arch = "x86_64"))]
        let count = extrema_scalar(w, lo, hi, &mut out, 0);
        out.truncate(count);
        out
    }

    /// [`Self::extrema`] with a push per extremum (the form it replaced;
    /// test oracle).
    #[cfg(test)]
    fn extrema_reference(w: &[f64], lo: isize, hi: isize) -> Vec<usize> {
        let lo = lo.max(1) as usize;
        let hi = (hi.min(w.len() as isize - 2)).max(0) as usize;
        let mut out = Vec::new();
        for i in lo..=hi {
            let (a, b, c) = (w[i - 1], w[i], w[i + 1]);
            if (b > 0.0 && b >= a && b > c) || (b < 0.0 && b <= a && b < c) {
                out.push(i);
            }
        }
        out
    }

    /// First sign change after `a` up to `b`: the extremum of the smoothed
    /// signal nearest that sample (W_k[n] is centred at n + 1/2).
    fn zero_cross(w: &[f64], a: usize, b: usize) -> Option<usize> {
        let s = w[a].signum();
        (a + 1..=b).find(|&n| w[n].signum() != s || w[n] == 0.0)
    }

    /// Last sample in `[lo, b)` where `w` has left the sign of `w[b]` (or is
    /// zero), searching back from `b`; `None` if `w` keeps that sign.
    fn zero_cross_back(w: &[f64], lo: usize, b: usize) -> Option<usize> {
        let s = w[b].signum();
        (lo..b).rev().find(|&n| w[n].signum() != s || w[n] == 0.0)
    }

    /// Boundary before maximum `m`: where |w| first falls below `thr` (W_k
    /// units; Martínez 2004's ξ·|w[m]|) or reaches a local minimum, searching
    /// back at most `max_len` samples and not before `limit`; `interpolate`
    /// as in [`Self::search_fwd`].
    fn search_back(
        w: &[f64],
        m: usize,
        thr: f64,
        max_len: isize,
        limit: isize,
        interpolate: bool,
    ) -> Option<f64> {
        let stop = (m as isize - max_len).max(limit).max(1);
        let mut n = m as isize - 1;
        while n >= stop {
            let i = n as usize;
            let v = w[i].abs();
            if v < thr || w[i].signum() != w[m].signum() {
                if !interpolate {
                    // Midway between the centres of W[i] (i + 1/2) and W[i+1].
                    return Some(i as f64 + 1.0);
                }
                // `f` of the way back from the centre of W[i+1]; f = 1/2
                // gives the midpoint above.
                let f = crossing_fraction(w[m].signum(), w[i + 1], w[i], thr);
                return Some(i as f64 + 1.5 - f);
            }
            if w[i - 1].abs() >= v {
                return Some(i as f64 + 0.5);
            }
            n -= 1;
        }
        None
    }

    /// Boundary after maximum `m`, mirror of [`Self::search_back`]. With
    /// `interpolate`, a threshold crossing is placed by linear interpolation
    /// between the two W_k samples around it instead of at their midpoint,
    /// so the boundary is not quantised to the analysis sample (4 ms at
    /// 250 Hz).
    fn search_fwd(
        w: &[f64],
        m: usize,
        thr: f64,
        max_len: isize,
        limit: isize,
        interpolate: bool,
    ) -> Option<f64> {
        let stop = (m as isize + max_len).min(limit).min(w.len() as isize - 2);
        let mut n = m as isize + 1;
        while n <= stop {
            let i = n as usize;
            let v = w[i].abs();
            if v < thr || w[i].signum() != w[m].signum() {
                if !interpolate {
                    return Some(i as f64);
                }
                // W[j] is centred at j + 1/2, so the midpoint rule above
                // returns i at f = 1/2.
                let f = crossing_fraction(w[m].signum(), w[i - 1], w[i], thr);
                return Some(i as f64 - 0.5 + f);
            }
            if w[i + 1].abs() >= v {
                return Some(i as f64 + 0.5);
            }
            n += 1;
        }
        None
    }

    /// Find a P or T wave at scale `k` in `[lo, hi]`: the largest modulus
    /// maximum and its largest significant opposite-sign neighbours.
    fn find_wave(&self, k: usize, lo: isize, hi: isize, rule: &WaveRule) -> Option<Lobes> {
        let WaveRule {
            gamma,
            biphasic_frac,
            three_lobe_bounds,
            reach,
            lone_peak,
            early_frac,
            outer_check,
            peak_crossing,
        } = *rule;
        // Maxima further than `reach` samples from the largest one belong to
        // another wave.
        let w = &self.w[k - 1];
        let all = Self::extrema(w, lo, hi);
        let &a = all
            .iter()
            .max_by(|&&p, &&q| w[p].abs().total_cmp(&w[q].abs()))?;
        let ext: Vec<usize> = all
            .into_iter()
            .filter(|&e| e.abs_diff(a) <= reach)
            .collect();
        let amp = w[a].abs();
        let sa = w[a].signum();
        let opp = |it: &mut dyn Iterator<Item = &usize>| -> Option<usize> {
            it.copied()
                .filter(|&e| w[e].signum() == -sa && w[e].abs() > gamma * amp)
                .max_by(|&p, &q| w[p].abs().total_cmp(&w[q].abs()))
        };
        let before = opp(&mut ext.iter().filter(|&&e| e < a));
        let after = opp(&mut ext.iter().filter(|&&e| e > a));
        let morph_pair = |first: usize| {
            if w[first] > 0.0 {
                TMorphology::Upright
            } else {
                TMorphology::Inverted
            }
        };
        // Some(first lobe positive) when three lobes make the wave biphasic.
        let mut biphasic = None;
        let (idx, pair) = match (before, after) {
            (Some(b), Some(c)) => {
                let (vb, vc) = (w[b].abs(), w[c].abs());
                // The earlier pair wins unless the later lobe is clearly
                // larger: a wave following T (U) should not pull the pair.
                let dominant = if vb >= early_frac * vc {
                    (b, a)
                } else {
                    (a, c)
                };
                // The outer lobe is the one left out of the dominant pair;
                // `a` (the largest) is always its neighbour.
                let outer = if dominant.0 == b { c } else { b };
                // (Checked only when the lobes are large enough to count.)
                let confirmed = || {
                    outer_check.is_none_or(|oc| {
                        let thr = oc.min_slope_mv_per_s * (1u32 << k) as f64 / self.fs_a;
                        Self::outer_lobe_contiguous(w, outer, a, thr, oc.max_quiet)
                    })
                };
                if vb.min(vc) >= biphasic_frac * amp && confirmed() {
                    biphasic = Some(w[b] > 0.0);
                    if three_lobe_bounds {
                        (vec![b, a, c], dominant)
                    } else {
                        (vec![dominant.0, dominant.1], dominant)
                    }
                } else {
                    (vec![dominant.0, dominant.1], dominant)
                }
            }
            (Some(b), None) => (vec![b, a], (b, a)),
            (None, Some(c)) => (vec![a, c], (a, c)),
            (None, None) => {
                let morph = if sa > 0.0 {
                    TMorphology::Upright
                } else {
                    TMorphology::Inverted
                };
                // One limb only: read as the first limb of a monophasic wave
                // (as the morphology above does), the wave's extremum is the
                // next zero crossing of W_k inside the window.
                let peak = if lone_peak {
                    let end = (hi.max(a as isize) as usize).min(w.len() - 1);
                    Self::zero_cross(w, a, end)
                } else {
                    None
                };
                return Some(Lobes {
                    idx: vec![a],
                    peak,
                    amp,
                    morph,
                });
            }
        };
        let morph = match biphasic {
            Some(true) => TMorphology::BiphasicPosNeg,
            Some(false) => TMorphology::BiphasicNegPos,
            None => morph_pair(idx[0]),
        };
        let peak = match peak_crossing {
            PeakCrossing::BesideLargerLimb if w[pair.1].abs() >= w[pair.0].abs() => {
                Self::zero_cross_back(w, pair.0, pair.1).map(|n| n + 1)
            }
            _ => Self::zero_cross(w, pair.0, pair.1),
        };
        Some(Lobes {
            idx,
            peak,
            amp,
            morph,
        })
    }

    /// Whether the lobe of `w` at `outer` joins the opposite-sign lobe at
    /// `inner` as one wave: |w[outer]| reaches `thr`, `w` changes sign once
    /// between them, and |w| stays below `thr` (back at the baseline) for at
    /// most `max_quiet` consecutive samples in between.
    fn outer_lobe_contiguous(
        w: &[f64],
        outer: usize,
        inner: usize,
        thr: f64,
        max_quiet: usize,
    ) -> bool {
        if w[outer].abs() < thr {
            return false;
        }
        let seg = &w[outer.min(inner)..=outer.max(inner)];
        let crossings = seg
            .windows(2)
            .filter(|p| (p[0] > 0.0) != (p[1] > 0.0))
            .count();
        let (mut run, mut longest) = (0usize, 0usize);
        for v in seg {
            run = if v.abs() < thr { run + 1 } else { 0 };
            longest = longest.max(run);
        }
        crossings == 1 && longest <= max_quiet
    }

    /// The wave of W_k in `[lo, hi]` whose peak (a zero crossing of W_k
    /// between two opposite-sign maxima) lies nearest `expect` and at most
    /// `max_off` samples from it (analysis samples). Each lobe is the first
    /// maximum of |W_k| met walking away from the crossing, and must lie
    /// inside the window, so the slope of a neighbouring wave cut by the
    /// window edge is not taken for a lobe; the smaller lobe must exceed
    /// `gamma` × the larger.
    fn find_pair_near(
        &self,
        k: usize,
        (lo, hi): (isize, isize),
        expect: isize,
        max_off: isize,
        gamma: f64,
    ) -> Option<Lobes> {
        let w = &self.w[k - 1];
        let lo = lo.max(1) as usize;
        let hi = (hi.min(w.len() as isize - 2)).max(0) as usize;
        if hi <= lo + 2 {
            return None;
        }
        let climb = |i: usize, back: bool| -> Option<usize> {
            let sg = w[i].signum();
            let mut m = i;
            loop {
                let n = if back { m.checked_sub(1)? } else { m + 1 };
                if n < lo || n > hi {
                    return None;
                }
                if w[n].signum() != sg || w[n].abs() < w[m].abs() {
                    return Some(m);
                }
                m = n;
            }
        };
        let mut best: Option<(usize, usize, usize, isize)> = None;
        for z in lo + 1..=hi {
            if w[z].signum() == w[z - 1].signum() || w[z - 1] == 0.0 {
                continue;
            }
            let off = (z as isize - expect).abs();
            if off > max_off || best.is_some_and(|(.., o)| o <= off) {
                continue;
            }
            let (Some(a), Some(b)) = (climb(z - 1, true), climb(z, false)) else {
                continue;
            };
            let (va, vb) = (w[a].abs(), w[b].abs());
            if va.min(vb) >= gamma * va.max(vb) {
                best = Some((a, b, z, off));
            }
        }
        let (a, b, z, _) = best?;
        Some(Lobes {
            idx: vec![a, b],
            peak: Some(z),
            amp: w[a].abs().max(w[b].abs()),
            morph: if w[a] > 0.0 {
                TMorphology::Upright
            } else {
                TMorphology::Inverted
            },
        })
    }

    /// Whether a T reading's peak lies on the side of the isoelectric level
    /// `baseline` that its morphology says (within `margin` mV): above it for
    /// an upright wave, below for an inverted one. Readings without a peak or
    /// a level, and biphasic ones, agree.
    fn polarity_agrees(&self, l: &Lobes, baseline: Option<f64>, margin: f64) -> bool {
        match (l.peak, baseline, l.morph) {
            (Some(p), Some(b), TMorphology::Upright) => self.x[p] - b >= -margin,
            (Some(p), Some(b), TMorphology::Inverted) => self.x[p] - b <= margin,
            _ => true,
        }
    }

    /// Height (mV) of the signal at `peak` above its level before `onset`,
    /// the median of the `baseline_window_ms` there (before the QRS onset:
    /// the PR-segment level the tangent method uses; before the P onset: the
    /// end of the TP segment); negative below it. `None` without either mark.
    pub(crate) fn height_above_level(
        &self,
        peak: Option<Mark>,
        onset: Option<Mark>,
        cfg: &DelineateConfig,
    ) -> Option<f64> {
        let peak = (peak?.sample as f64 / self.ratio).round() as isize;
        let on = (onset?.sample as f64 / self.ratio).floor() as isize;
        let level = self.level(on - self.ms_i(cfg.baseline_window_ms), on)?;
        (0..self.len())
            .contains(&peak)
            .then(|| self.x[peak as usize] - level)
    }

    /// Median level of the signal in `[a, b)` (isoelectric estimate).
    fn level(&self, a: isize, b: isize) -> Option<f64> {
        let a = a.max(0) as usize;
        let b = (b.min(self.len())).max(0) as usize;
        if b <= a {
            return None;
        }
        let mut v = self.x[a..b].to_vec();
        Some(median(&mut v))
    }

    /// Delineate beat `fid` (input-domain QRS fiducial) with neighbours.
    pub(crate) fn beat(
        &self,
        fid: usize,
        prev: Option<usize>,
        next: Option<usize>,
        prev_t_end: Option<usize>,
        t_expect: Option<(usize, f64)>,
        cfg: &DelineateConfig,
    ) -> BeatMarks {
        let mut bm = BeatMarks {
            t_end_method: cfg.t_end_method,
            ..Default::default()
        };
        let n = self.len();
        if n < 8 {
            return bm;
        }
        let f = (fid as f64 / self.ratio).round() as isize;
        let prev_a = prev.map(|p| (p as f64 / self.ratio).round() as isize);
        let next_a = next.map(|p| (p as f64 / self.ratio).round() as isize);
        if f < 0 || f >= n {
            return bm;
        }

        // ---- QRS: main slope pair at scale 2^2.
        let w2 = &self.w[1];
        let half = self.ms_i(cfg.qrs_search_ms);
        let lo = (f - half).max(1);
        let hi = (f + half).min(n - 2);
        if hi <= lo {
            return bm;
        }
        // Pacing spikes: far narrower than any QRS slope, so |W_1| around
        // their W_2 maximum exceeds |W_2| (about 2.7 times for a one-sample
        // impulse, under 1 for a slope of a few ms; see `qrs_spike_ratio`).
        // A spike taken for the main slope would set every threshold of the
        // complex and cut its search region short; it is masked instead.
        let w1 = &self.w[0];
        let spike_half = self.ms_i(cfg.qrs_spike_halfwidth_ms);
        let is_spike = |i: usize| {
            let (l, h) = (i.saturating_sub(2), (i + 2).min(w1.len() - 1));
            let m1 = w1[l..=h].iter().fold(0.0f64, |m, v| m.max(v.abs()));
            cfg.qrs_spike_ratio > 0.0 && m1 > cfg.qrs_spike_ratio * w2[i].abs()
        };
        let mut spikes: Vec<isize> = Vec::new();
        let masked = |i: isize, sp: &[isize]| sp.iter().any(|&c| (i - c).abs() <= spike_half);
        let a = loop {
            let Some(a) = (lo..=hi)
                .filter(|&i| !masked(i, &spikes))
                .max_by(|&p, &q| w2[p as usize].abs().total_cmp(&w2[q as usize].abs()))
            else {
                return bm;
            };
            // At most two spikes (atrial and ventricular pacing).
            if spikes.len() < 2 && w2[a as usize] != 0.0 && is_spike(a as usize) {
                spikes.push(a);
                continue;
            }
            break a as usize;
        };
        if w2[a] == 0.0 {
            return bm;
        }
        let pair_reach = self.ms_i(60.0);
        let sa = w2[a].signum();
        let best_opp = |range: std::ops::RangeInclusive<isize>| {
            range
                .filter(|&i| i >= 1 && i < n - 1 && w2[i as usize].signum() == -sa)
                .filter(|&i| !masked(i, &spikes))
                .max_by(|&p, &q| w2[p as usize].abs().total_cmp(&w2[q as usize].abs()))
                .map(|i| i as usize)
        };
        let b_before = best_opp((a as isize - pair_reach)..=(a as isize - 1));
        let b_after = best_opp((a as isize + 1)..=(a as isize + pair_reach));
        let partner = match (b_before, b_after) {
            (Some(b), Some(c)) => {
                if w2[b].abs() >= w2[c].abs() {
                    b
                } else {
                    c
                }
            }
            (Some(b), None) => b,
            (None, Some(c)) => c,
            (None, None) => return bm,
        };
        let (p1, p2) = if partner < a {
            (partner, a)
        } else {
            (a, partner)
        };
        let peak = Self::zero_cross(w2, p1, p2).unwrap_or((p1 + p2) / 2);
        let qrs_amp = w2[a].abs();
        let qrs_conf = self.confidence(qrs_amp, 2, cfg);
        bm.qrs_peak = self.mark(Some(peak as f64), qrs_conf);

        // Significant maxima of the complex.
        let mut region_lo = peak as isize - self.ms_i(cfg.qrs_pre_ms);
        let mut region_hi = peak as isize + self.ms_i(cfg.qrs_post_ms);
        let mut wide_hi = peak as isize + self.ms_i(cfg.qrs_post_wide_ms);
        if let Some(p) = prev_a {
            region_lo = region_lo.max((p + peak as isize) / 2);
        }
        if let Some(q) = next_a {
            region_hi = region_hi.min((q + peak as isize) / 2);
            wide_hi = wide_hi.min((q + peak as isize) / 2);
        }
        let wide_hi = wide_hi.max(region_hi);
        let ext_all: Vec<usize> = Self::extrema(w2, region_lo, wide_hi)
            .into_iter()
            .filter(|&e| !masked(e as isize, &spikes))
            .collect();
        // The complex's largest maximum is taken within the usual region
        // only: past it lie the ST segment and T wave.
        let ext: Vec<usize> = ext_all
            .iter()
            .copied()
            .filter(|&e| e as isize <= region_hi)
            .collect();
        let m_all = ext.iter().map(|&e| w2[e].abs()).fold(qrs_amp, f64::max);
        // Walk outward from the main pair through significant maxima no more
        // than `qrs_chain_gap_ms` apart, so that P or T slopes separated by an
        // isoelectric segment are not taken as part of the complex.
        // Large maxima (wide complexes, paced beats) may be further apart.
        let gap = self.ms_i(cfg.qrs_chain_gap_ms) as usize;
        let wide_gap = self.ms_i(cfg.qrs_wide_gap_ms) as usize;
        // A small Q or S lobe right next to the complex (opposite sign, close)
        // also joins, so the boundary is not put at its peak.
        let adj_gap = self.ms_i(cfg.qrs_adjacent_gap_ms) as usize;
        let chain_floor = cfg.qrs_chain_noise_k * self.noise(2);
        let joins = |d: usize, v: f64, gamma: f64, wide_frac: f64, opposite: bool| {
            v > chain_floor
                && ((d <= gap && v > gamma * m_all)
                    || (d <= wide_gap && v > wide_frac * m_all)
                    || (opposite && d <= adj_gap && v > cfg.qrs_adjacent_frac * m_all))
        };
        let mut first = p1;
        for &e in ext.iter().rev().filter(|&&e| e < p1) {
            if first - e > gap.max(wide_gap) {
                break;
            }
            if joins(
                first - e,
                w2[e].abs(),
                cfg.qrs_gamma_pre,
                cfg.qrs_wide_frac,
                w2[e].signum() != w2[first].signum(),
            ) {
                first = e;
            }
        }
        let mut last = p2;
        let mut chain_post = vec![p2];
        for &e in ext_all.iter().filter(|&&e| e > p2) {
            if e - last > gap.max(wide_gap) {
                break;
            }
            // Past the usual region only large slopes, well above the
            // lead's noise: the final limb of a wide complex.
            if e as isize > region_hi
                && (w2[e].abs() <= cfg.qrs_wide_frac_post * m_all
                    || w2[e].abs() <= cfg.qrs_post_wide_noise_k * self.noise(2))
            {
                break;
            }
            if joins(
                e - last,
                w2[e].abs(),
                if w2[e].signum() == w2[last].signum() {
                    cfg.qrs_gamma_post.max(cfg.qrs_gamma_post_same)
                } else {
                    cfg.qrs_gamma_post
                },
                cfg.qrs_wide_frac_post,
                w2[e].signum() != w2[last].signum(),
            ) {
                last = e;
                chain_post.push(e);
            }
        }
        last = trim_same_sign_run(
            w2,
            &chain_post,
            cfg.qrs_valley_frac_post,
            cfg.qrs_valley_lobe_frac * m_all,
            cfg.qrs_valley_min_lobes,
        );
        let qsearch = self.ms_i(cfg.qrs_boundary_search_ms);
        // The threshold is relative to the outer maximum (Martínez 2004), but
        // not below a fraction of the complex's largest maximum: from a
        // small Q or S lobe a threshold relative to that lobe alone runs into
        // the isoelectric noise before (after) the complex.
        let mut on_thr = (cfg.qrs_xi_on * w2[first].abs()).max(cfg.qrs_xi_on_rel * m_all);
        // Initial q wave (Martínez 2004: the first significant maximum before
        // the complex): a small opposite-sign lobe close to the first maximum
        // and clearly above the lead's noise. Without it the onset stops at
        // the q trough (the sign change between the lobes), 10-40 ms late.
        let q_gap = self.ms_i(cfg.qrs_q_gap_ms);
        if q_gap > 0 {
            let q_floor = (cfg.qrs_q_noise_k * self.noise(2)).max(cfg.qrs_q_min_frac * m_all);
            let sf = w2[first].signum();
            // Largest opposite-sign maximum between the last sign change
            // before `first` and the one before that (one lobe).
            let mut n = first as isize - 1;
            let stop = (first as isize - q_gap).max(region_lo).max(1);
            while n >= stop && w2[n as usize].signum() == sf {
                n -= 1;
            }
            let mut q: Option<usize> = None;
            while n >= stop && w2[n as usize].signum() == -sf {
                let i = n as usize;
                if q.is_none_or(|j| w2[i].abs() > w2[j].abs()) {
                    q = Some(i);
                }
                n -= 1;
            }
            if let Some(q) = q {
                // A maximum cut by the search edge is no lobe of its own.
                let is_max = q >= 1 && w2[q - 1].abs() <= w2[q].abs();
                if is_max && w2[q].abs() > q_floor && w2[q].abs() < w2[first].abs() {
                    first = q;
                    on_thr = cfg.qrs_q_xi_on * w2[q].abs();
                }
            }
        }
        let qrs_on = Self::search_back(
            w2,
            first,
            on_thr,
            qsearch,
            region_lo - qsearch,
            cfg.boundary_interpolate,
        );
        let xi_end = if w2[last] > 0.0 {
            cfg.qrs_xi_end_pos
        } else {
            cfg.qrs_xi_end_neg
        };
        let mut end_thr = xi_end * w2[last].abs();
        // Not above a few times the lead's noise (see `qrs_end_noise_cap_k`),
        // but never below the floor relative to the whole complex, which
        // holds where there is no noise (a noise-free signal, a median beat).
        if cfg.qrs_end_noise_cap_k > 0.0 {
            end_thr = end_thr.min(cfg.qrs_end_noise_cap_k * self.noise(2));
        }
        let end_thr = end_thr.max(cfg.qrs_xi_end_rel * m_all);
        let end_hi = if last as isize > region_hi {
            wide_hi
        } else {
            region_hi
        };
        let qrs_end = Self::search_fwd(
            w2,
            last,
            end_thr,
            qsearch,
            end_hi + qsearch,
            cfg.boundary_interpolate,
        );
        bm.qrs_on = self.mark(qrs_on, qrs_conf);
        bm.qrs_end = self.mark(qrs_end, qrs_conf);

        let rr_next = next_a.map(|q| q - peak as isize);
        let rr_prev = prev_a.map(|p| peak as isize - p);
        let rr = rr_next
            .or(rr_prev)
            .unwrap_or(self.ms_i(cfg.default_rr_ms))
            .max(self.ms_i(250.0)) as f64;

        // ---- T wave at scale 2^4 (2^5 if nothing is found at 2^4).
        let qend_i = qrs_end
            .map(|e| e.ceil() as isize)
            .unwrap_or(peak as isize + self.ms_i(60.0));
        let t_lo = (peak as isize + self.ms_i(cfg.t_window_start_ms))
            .max(qend_i + self.ms_i(cfg.t_window_after_qrs_end_ms));
        let span = (cfg.t_window_end_rr_frac * rr).clamp(
            self.ms(cfg.t_window_end_min_ms),
            self.ms(cfg.t_window_end_max_ms),
        );
        let mut t_hi = peak as isize + span.round() as isize;
        // At slow rates (window cut by `t_window_end_max_ms`) a long QT may
        // reach past the window: see the lone-lobe retry below.
        let slow = cfg.t_window_end_rr_frac * rr > self.ms(cfg.t_window_end_max_ms);
        let mut t_hi_slow = peak as isize
            + (cfg.t_window_end_rr_frac * rr)
                .min(self.ms(cfg.t_window_slow_max_ms))
                .round() as isize;
        let mut t_limit = n - 2;
        if let Some(q) = next_a {
            t_hi_slow = t_hi_slow.min(q - self.ms_i(cfg.qrs_pre_ms));
            t_hi = t_hi.min(q - self.ms_i(cfg.qrs_pre_ms));
            t_limit = t_limit.min(q - self.ms_i(60.0));
        }
        t_hi = t_hi.min(n - 2);
        t_hi_slow = t_hi_slow.min(n - 2);
        // Second pass: narrow the T window around the T peak position the
        // neighbouring beats predict (input sample, half-width in ms).
        let (t_lo, t_hi) = match t_expect {
            Some((e, half_ms)) => {
                let e = (e as f64 / self.ratio).round() as isize;
                let h = self.ms_i(half_ms);
                (t_lo.max(e - h), t_hi.min(e + h))
            }
            None => (t_lo, t_hi),
        };
        let min_t = cfg.t_min_slope_mv_per_s;
        let mut t_found = None;
        if t_hi - t_lo >= self.ms_i(60.0) {
            for k in [4usize, 5] {
                let reach = self.ms_i(cfg.t_lobe_reach_ms) as usize;
                let rule = WaveRule {
                    gamma: cfg.t_gamma,
                    biphasic_frac: cfg.t_biphasic_frac,
                    three_lobe_bounds: cfg.t_biphasic_outer_bounds,
                    reach,
                    lone_peak: cfg.t_peak_from_one_limb,
                    early_frac: cfg.t_early_pair_frac,
                    outer_check: None,
                    peak_crossing: cfg.t_peak_crossing,
                };
                if let Some(l) = self.find_wave(k, t_lo, t_hi, &rule) {
                    let slope = l.amp / (1u32 << k) as f64 * self.fs_a;
                    if slope >= min_t {
                        // A lone lobe at a slow rate: retry in the longer
                        // window and keep the result if the lobe gains a
                        // partner.
                        let retry =
                            (l.idx.len() == 1 && slow && t_hi_slow > t_hi && t_expect.is_none())
                                .then(|| self.find_wave(k, t_lo, t_hi_slow, &rule))
                                .flatten()
                                .filter(|m| m.idx.len() >= 2 && m.idx.contains(&l.idx[0]));
                        let l = retry.unwrap_or(l);
                        // A lone lobe at the window start may be the final
                        // limb of a T wave that follows the QRS closely:
                        // look again from just after the QRS end.
                        let early_lo = qend_i + self.ms_i(cfg.t_window_early_after_qrs_end_ms);
                        let early = (cfg.t_window_early_after_qrs_end_ms > 0.0
                            && l.idx.len() == 1
                            && early_lo < t_lo
                            && t_expect.is_none())
                        .then(|| self.find_wave(k, early_lo, t_hi, &rule))
                        .flatten()
                        .filter(|m| {
                            m.idx.len() >= 2 && m.idx.contains(&l.idx[0]) && m.idx[0] < l.idx[0]
                        });
                        t_found = Some((k, early.unwrap_or(l)));
                        break;
                    }
                }
            }
        }
        let baseline_end = qrs_on
            .map(|o| o.floor() as isize)
            .unwrap_or(peak as isize - self.ms_i(50.0));
        let baseline = self.level(
            baseline_end - self.ms_i(cfg.baseline_window_ms),
            baseline_end,
        );
        if let Some((k, mut l)) = t_found {
            let w = &self.w[k - 1];
            // A lone lobe read as the first limb has its peak at the next zero
            // crossing; the final limb is the first opposite-sign extremum
            // after it, which may lie past the window end at fast rates. Without
            // it the end would be searched from the first limb, before the peak.
            // A lone lobe read as the first limb of a wave whose peak then
            // lies on the wrong side of the PR-segment level (an "inverted"
            // trough above it, an "upright" crest below it) is more likely
            // the final limb of a wave of the opposite polarity whose first
            // limb merges with the end of the QRS, the zero crossing ahead
            // coming from the next P wave: read it so when that reading's
            // peak lies on its own side.
            let mut final_limb = false;
            if cfg.t_polarity_recheck
                && l.idx.len() == 1
                && l.peak.is_some()
                && !self.polarity_agrees(&l, baseline, cfg.t_polarity_margin_mv)
            {
                if let Some(z) = Self::zero_cross_back(w, qend_i.max(0) as usize, l.idx[0]) {
                    let alt = Lobes {
                        idx: l.idx.clone(),
                        peak: Some(z),
                        amp: l.amp,
                        morph: if w[l.idx[0]] < 0.0 {
                            TMorphology::Upright
                        } else {
                            TMorphology::Inverted
                        },
                    };
                    if self.polarity_agrees(&alt, baseline, cfg.t_polarity_margin_mv) {
                        l = alt;
                        final_limb = true;
                    }
                }
            }
            if let (1, Some(pk), false) = (l.idx.len(), l.peak, final_limb) {
                let s0 = w[l.idx[0]].signum();
                let reach = (pk as isize + self.ms_i(cfg.t_final_limb_reach_ms)).min(t_limit);
                let fin = Self::extrema(w, pk as isize, reach)
                    .into_iter()
                    .find(|&e| w[e].signum() == -s0);
                match fin {
                    Some(e) => l.idx.push(e),
                    None => l.peak = None,
                }
            }
            let first = l.idx[0];
            let tsearch = self.ms_i(cfg.t_end_search_ms);
            let last = *l.idx.last().unwrap();
            let t_end_w = Self::search_fwd(
                w,
                last,
                cfg.t_xi_end * w[last].abs(),
                tsearch,
                t_limit,
                cfg.t_end_interpolate,
            );
            // A lone lobe with no peak ahead of it may be the final limb of a
            // T wave whose first limb merges with the end of the QRS: its peak
            // is then the last zero crossing of W_k between the QRS end and
            // the lobe, and the wave's polarity is the opposite reading. Read
            // so, the wave must end inside the T window (before the next
            // complex), and it has no first limb to search its onset from.
            let looked_back = cfg.t_lone_limb_look_back
                && l.idx.len() == 1
                && l.peak.is_none()
                && t_end_w.is_some_and(|e| e <= t_hi as f64);
            if looked_back {
                if let Some(z) = Self::zero_cross_back(w, qend_i.max(0) as usize, first) {
                    l.peak = Some(z);
                    l.morph = if w[first] < 0.0 {
                        TMorphology::Upright
                    } else {
                        TMorphology::Inverted
                    };
                }
            }
            let tconf = self.confidence(l.amp, k, cfg);
            bm.t_morphology = l.morph;
            bm.t_peak = self.mark(l.peak.map(|p| p as f64), tconf);
            let t_on = if l.peak.is_some_and(|p| p < first) {
                None
            } else {
                Self::search_back(
                    w,
                    first,
                    cfg.t_xi_on * w[first].abs(),
                    tsearch,
                    qend_i,
                    cfg.boundary_interpolate,
                )
            };
            bm.t_on = self.mark(t_on, tconf);
            bm.t_end_wavelet = self.mark(t_end_w, tconf);

            // Tangent: steepest point of the final limb at scale 2^3 (the
            // slope of the lightly smoothed signal), intersected with the
            // PR-segment level.
            let w3 = &self.w[2];
            let sign = w[last].signum();
            let s_lo = l.peak.unwrap_or(first).max(first) as isize;
            let s_hi = (t_end_w
                .map(|e| e.ceil() as isize)
                .unwrap_or(last as isize + tsearch / 2))
            .min(t_limit);
            let steep = (s_lo..=s_hi)
                .filter(|&i| i >= 0 && i < n - 1)
                .max_by(|&p, &q| (sign * w3[p as usize]).total_cmp(&(sign * w3[q as usize])))
                .map(|i| i as usize);
            if let (Some(s), Some(b)) = (steep, baseline) {
                let slope = w3[s] / 8.0;
                if sign * slope > 0.0 {
                    let xs = 0.5 * (self.x[s] + self.x[(s + 1).min(self.x.len() - 1)]);
                    let t = s as f64 + 0.5 + (b - xs) / slope;
                    if t > s as f64 && t < (s as f64 + self.ms(300.0)) && t <= t_limit as f64 {
                        bm.t_end_tangent = self.mark(Some(t), tconf);
                    }
                }
                // Area indicator (Zhang et al. 2006): A(k) = sum over the
                // window ending at k of (x[j] - x[k]), signed by the limb.
                let win = self.ms_i(cfg.t_area_window_ms).max(2) as usize;
                let a_hi = t_end_w
                    .map(|e| e.round() as isize + self.ms_i(cfg.t_area_search_after_ms))
                    .unwrap_or(s as isize + tsearch)
                    .min(t_limit);
                // Descending final limb (sign < 0) leaves the signal above
                // the end level: positive area.
                let best =
                    area_indicator_best(&self.x, s, a_hi.max(s as isize) as usize, win, sign);
                if let Some(kk) = best {
                    bm.t_end_area = self.mark(Some(kk as f64), tconf);
                }
            }
            bm.t_end = bm.t_end_by_method();
        }

        // ---- P wave at scale 2^4 before the QRS onset.
        let qon_i = qrs_on
            .map(|o| o.floor() as isize)
            .unwrap_or(peak as isize - self.ms_i(50.0));
        let mut p_lo = qon_i - self.ms_i(cfg.p_window_ms);
        let p_hi = qon_i - self.ms_i(cfg.p_window_gap_ms);
        if let Some(p) = prev_a {
            // The P of this beat lies in the second half of the RR interval.
            p_lo = p_lo.max(p + (peak as isize - p) / 2);
        }
        if let Some(te) = prev_t_end {
            let te = (te as f64 / self.ratio).round() as isize;
            if te < peak as isize {
                p_lo = p_lo.max(te + self.ms_i(cfg.p_after_t_end_ms));
            }
        }
        self.p_wave(&mut bm, peak, p_lo, p_hi, qon_i, 1.0, None, cfg);
        bm
    }

    /// P search in `[p_lo, p_hi]` (analysis samples) before the QRS onset
    /// `qon_i` of the complex peaking at `peak`; the presence thresholds are
    /// multiplied by `relax`. With `expect` (analysis sample where the other
    /// leads put the P peak), a wave missed at scale 2^4 is looked for at
    /// 2^3 as the lobe pair peaking nearest it (`p_fill_fine_peak_ms`).
    /// Writes the P marks of `bm` when found.
    #[allow(clippy::too_many_arguments)]
    fn p_wave(
        &self,
        bm: &mut BeatMarks,
        peak: usize,
        p_lo: isize,
        p_hi: isize,
        qon_i: isize,
        relax: f64,
        expect: Option<isize>,
        cfg: &DelineateConfig,
    ) {
        if p_hi - p_lo < self.ms_i(40.0) {
            return;
        }
        if self.p_wave_at(bm, 4, None, peak, p_lo, p_hi, qon_i, relax, cfg) {
            return;
        }
        if let Some(e) = expect.filter(|_| cfg.p_fill_fine_peak_ms > 0.0) {
            let near = (e, self.ms_i(cfg.p_fill_fine_peak_ms));
            self.p_wave_at(bm, 3, Some(near), peak, p_lo, p_hi, qon_i, relax, cfg);
        }
    }

    /// The lobe rule of the P search: biphasic P allowed (both lobes within
    /// `p_gamma` of each other), three-lobe bounds, lobes reaching
    /// `p_lobe_reach_ms`.
    fn p_rule(&self, cfg: &DelineateConfig) -> WaveRule {
        WaveRule {
            gamma: cfg.p_gamma,
            biphasic_frac: cfg.p_biphasic_frac,
            three_lobe_bounds: true,
            reach: self.ms_i(cfg.p_lobe_reach_ms) as usize,
            lone_peak: false,
            early_frac: cfg.p_early_pair_frac,
            outer_check: (cfg.p_outer_max_quiet_ms >= 0.0).then(|| OuterCheck {
                min_slope_mv_per_s: cfg.p_min_slope_mv_per_s,
                max_quiet: self.ms_i(cfg.p_outer_max_quiet_ms) as usize,
            }),
            peak_crossing: PeakCrossing::First,
        }
    }

    /// One P search of [`Self::p_wave`] at scale 2^`k`: the window's wave
    /// (Martínez 2004), or with `near` = (expected peak, largest offset) the
    /// lobe pair peaking nearest the expected peak. Returns whether a P wave
    /// was found (and marked).
    #[allow(clippy::too_many_arguments)]
    fn p_wave_at(
        &self,
        bm: &mut BeatMarks,
        k: usize,
        near: Option<(isize, isize)>,
        peak: usize,
        p_lo: isize,
        p_hi: isize,
        qon_i: isize,
        relax: f64,
        cfg: &DelineateConfig,
    ) -> bool {
        let rule = self.p_rule(cfg);
        let found = match near {
            Some((e, off)) => self.find_pair_near(k, (p_lo, p_hi), e, off, cfg.p_gamma),
            None => self.find_wave(k, p_lo, p_hi, &rule),
        };
        let Some(l) = found else {
            return false;
        };
        let w4 = &self.w[k - 1];
        let slope = l.amp / (1u32 << k) as f64 * self.fs_a;
        let qrs4 = ext_max(
            w4,
            peak as isize - self.ms_i(60.0),
            peak as isize + self.ms_i(60.0),
        );
        if l.idx.len() >= 2
            && slope >= relax * cfg.p_min_slope_mv_per_s
            && l.amp >= relax * cfg.p_min_rel_qrs * qrs4
        {
            let pconf = self.confidence(l.amp, k, cfg);
            let psearch = self.ms_i(cfg.p_boundary_search_ms);
            let first = l.idx[0];
            let last = *l.idx.last().unwrap();
            bm.p_peak = self.mark(l.peak.map(|p| p as f64), pconf);
            bm.p_on = self.mark(
                Self::search_back(
                    w4,
                    first,
                    cfg.p_xi_on * w4[first].abs(),
                    psearch,
                    p_lo - psearch,
                    cfg.boundary_interpolate,
                ),
                pconf,
            );
            bm.p_end = self.mark(
                Self::search_fwd(
                    w4,
                    last,
                    cfg.p_xi_end * w4[last].abs(),
                    psearch,
                    qon_i,
                    cfg.boundary_interpolate,
                ),
                pconf,
            );
            return true;
        }
        false
    }

    /// Second P search of a beat already delineated on this lead (`bm`),
    /// within `half_ms` of `expect` (input sample: where the other leads put
    /// the P peak), with the presence thresholds multiplied by `relax`.
    /// Returns `bm` with the P marks found, if any.
    pub(crate) fn p_near(
        &self,
        bm: &BeatMarks,
        expect: usize,
        half_ms: f64,
        relax: f64,
        cfg: &DelineateConfig,
    ) -> Option<BeatMarks> {
        let to_a = |s: usize| (s as f64 / self.ratio).round() as isize;
        let peak = to_a(bm.qrs_peak?.sample);
        let qon_i = to_a(bm.qrs_on?.sample);
        if peak < 0 || peak >= self.len() {
            return None;
        }
        let e = to_a(expect);
        let h = self.ms_i(half_ms);
        let p_lo = e - h;
        let p_hi = (e + h).min(qon_i - self.ms_i(cfg.p_window_gap_ms));
        let mut out = bm.clone();
        self.p_wave(
            &mut out,
            peak as usize,
            p_lo,
            p_hi,
            qon_i,
            relax,
            Some(e),
            cfg,
        );
        out.p_peak.is_some().then_some(out)
    }
}

/// The extrema of `w` at `lo..=hi` (`1 <= lo`, `hi <= w.len() - 2`) written
/// to `out` from index `count` on, one test per sample, each index written
/// and kept only when the test holds; returns the new count.
/// Where between two W_k samples, the last at or above the threshold
/// (`inside`) and the first below it (`outside`), the line joining them
/// meets `thr`, as the fraction 0..1 of the way from `inside`; both read
/// signed along the maximum's sign `s` (so a >= thr > b). 1/2 when the two
/// do not fall (the midpoint rule).
fn crossing_fraction(s: f64, inside: f64, outside: f64, thr: f64) -> f64 {
    let (a, b) = (s * inside, s * outside);
    if a > b {
        ((a - thr) / (a - b)).clamp(0.0, 1.0)
    } else {
        0.5
    }
}

fn extrema_scalar(w: &[f64], lo: usize, hi: usize, out: &mut [usize], mut count: usize) -> usize {
    for (i, t) in (lo..=hi).zip(w[lo - 1..=hi + 1].windows(3)) {
        let (a, b, c) = (t[0], t[1], t[2]);
        let max = (b > 0.0) & (b >= a) & (b > c);
        let min = (b < 0.0) & (b <= a) & (b < c);
        out[count] = i;
        count += usize::from(max | min);
    }
    count
}

/// [`extrema_scalar`] from `count` 0, two samples at a time: the same
/// ordered comparisons (false with NaN, as in the scalar tests) in SSE2
/// lanes, their outcomes as two bits.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "sse2")]
fn extrema_lanes(w: &[f64], lo: usize, hi: usize, out: &mut [usize]) -> usize {
    use std::arch::x86_64::{
        __m128d, _mm_and_pd, _mm_cmpge_pd, _mm_cmpgt_pd, _mm_cmple_pd, _mm_cmplt_pd,
        _mm_movemask_pd, _mm_or_pd, _mm_set_pd, _mm_setzero_pd,
    };
    let load = |x: &[f64]| -> __m128d { _mm_set_pd(x[1], x[0]) };
    let z = _mm_setzero_pd();
    let mut count = 0;
    let mut i = lo;
    while i < hi {
        let (a, b, c) = (
            load(&w[i - 1..i + 1]),
            load(&w[i..i + 2]),
            load(&w[i + 1..i + 3]),
        );
        let max = _mm_and_pd(
            _mm_and_pd(_mm_cmpgt_pd(b, z), _mm_cmpge_pd(b, a)),
            _mm_cmpgt_pd(b, c),
        );
        let min = _mm_and_pd(
            _mm_and_pd(_mm_cmplt_pd(b, z), _mm_cmple_pd(b, a)),
            _mm_cmplt_pd(b, c),
        );
        let bits = _mm_movemask_pd(_mm_or_pd(max, min)) as usize;
        out[count] = i;
        count += bits & 1;
        out[count] = i + 1;
        count += (bits >> 1) & 1;
        i += 2;
    }
    if i == hi {
        count = extrema_scalar(w, hi, hi, out, count);
    }
    count
}

/// The first `k` in `lo..=hi` (those with a whole window inside `x`) where
/// `-sign` × A(k) is largest, A(k) = Σ (x[j] − x[k]) over the `win` samples
/// ending at `k` (Zhang et al. 2006), each sum taken in sample order.
/// The sums of eight consecutive `k` are taken side by side: each is the
/// same sequence of additions as on its own, but the eight chains are
/// independent, so they overlap instead of waiting on one another
/// ([`area_indicator_best_reference`] is the test oracle).
fn area_indicator_best(x: &[f64], lo: usize, hi: usize, win: usize, sign: f64) -> Option<usize> {
    const G: usize = 8;
    let start = lo.max(win.saturating_sub(1));
    let end = hi.min(x.len().checked_sub(1)?);
    let mut best: Option<(usize, f64)> = None;
    let mut take = |k: usize, area: f64| {
        let val = -sign * area;
        if best.is_none_or(|(_, bv)| val > bv) {
            best = Some((k, val));
        }
    };
    let zero = std::iter::empty::<f64>().sum::<f64>();
    let mut k = start;
    while k + G <= end + 1 {
        let xs = &x[k + 1 - win..k + G];
        let xk: [f64; G] = std::array::from_fn(|q| x[k + q]);
        let mut acc = [zero; G];
        for j in 0..win {
            let row = &xs[j..j + G];
            for q in 0..G {
                acc[q] += row[q] - xk[q];
            }
        }
        for (q, a) in acc.into_iter().enumerate() {
            take(k + q, a);
        }
        k += G;
    }
    while k <= end {
        let xk = x[k];
        take(k, x[k + 1 - win..=k].iter().map(|&v| v - xk).sum());
        k += 1;
    }
    best.map(|(k, _)| k)
}

/// [`area_indicator_best`] one `k` at a time (the form it replaced; test oracle).
#[cfg(test)]
fn area_indicator_best_reference(
    x: &[f64],
    lo: usize,
    hi: usize,
    win: usize,
    sign: f64,
) -> Option<usize> {
    let mut best: Option<(usize, f64)> = None;
    for kk in lo..=hi {
        if kk + 1 < win || kk >= x.len() {
            continue;
        }
        let xk = x[kk];
        let area: f64 = x[kk + 1 - win..=kk].iter().map(|&v| v - xk).sum();
        let val = -sign * area;
        if best.is_none_or(|(_, bv)| val > bv) {
            best = Some((kk, val));
        }
    }
    best.map(|(k, _)| k)
}

/// Where a chain of |W_k| maxima (`chain`, ordered outward from the main
/// pair, at least one) ends once its outermost run of same-sign maxima (no
/// sign change of `w` between them) is trimmed: where |w| between two of
/// them falls below `frac` of the inner one, the slope has levelled off and
/// the later maxima of the same direction (a rising ST segment, a slow T
/// upstroke) are another wave, so the chain ends at the inner one. Only
/// when every later maximum is below `lobe_max` and there are at least
/// `min_lobes` of them (a persisting slope, not one terminal lobe of a
/// slurred S). A run followed by an opposite lobe that joined (a small
/// terminal s or r') is not outermost and stays. `frac` <= 0: no trim.
fn trim_same_sign_run(
    w: &[f64],
    chain: &[usize],
    frac: f64,
    lobe_max: f64,
    min_lobes: usize,
) -> usize {
    let n = chain.len();
    if frac <= 0.0 || n < 2 {
        return chain[n - 1];
    }
    let same_run = |a: usize, b: usize| {
        let (lo, hi) = (a.min(b), a.max(b));
        let s = w[a].signum();
        w[lo..=hi].iter().all(|v| v.signum() == s)
    };
    let mut j = n - 1;
    while j > 0 && same_run(chain[j - 1], chain[j]) {
        j -= 1;
    }
    for i in j..n - 1 {
        let (lo, hi) = (chain[i].min(chain[i + 1]), chain[i].max(chain[i + 1]));
        let valley = w[lo + 1..hi]
            .iter()
            .fold(f64::INFINITY, |m, v| m.min(v.abs()));
        let small = chain[i + 1..].iter().all(|&e| w[e].abs() < lobe_max);
        let persists = n - 1 - i >= min_lobes;
        if valley < frac * w[chain[i]].abs() && small && persists {
            return chain[i];
        }
    }
    chain[n - 1]
}

fn ext_max(w: &[f64], lo: isize, hi: isize) -> f64 {
    let lo = lo.max(0) as usize;
    let hi = (hi.max(0) as usize).min(w.len());
    w[lo.min(hi)..hi].iter().fold(0.0, |m, v| m.max(v.abs()))
}

#[cfg(test)]
mod tests {
    use super::*;

    // The analysis signal without the copy at an equal rate against
    // resampling then mapping (oracle), bit for bit: gaps, infinities, a
    // signed zero, an empty lead, equal and different rates.
    #[test]
    fn analysis_signal_equals_resample_then_map() {
        let x = [0.5, f64::NAN, -0.0, 2.0, f64::INFINITY, -1.25, 3.0];
        for (fs, fs_a) in [
            (250.0, 250.0),
            (250.0, 250.0 + 1e-12),
            (500.0, 250.0),
            (360.0, 250.0),
        ] {
            for sig in [&x[..], &[]] {
                let slow: Vec<u64> = resample_cubic(sig, fs, fs_a)
                    .into_iter()
                    .map(|v| if v.is_finite() { v } else { 0.0 })
                    .map(f64::to_bits)
                    .collect();
                let fast: Vec<u64> = analysis_signal(sig, fs, fs_a)
                    .into_iter()
                    .map(f64::to_bits)
                    .collect();
                assert_eq!(fast, slow, "fs={fs} fs_a={fs_a} len={}", sig.len());
            }
        }
    }

    #[test]
    fn interpolated_crossings_lie_where_a_linear_ramp_meets_the_threshold() {
        // Oracle: W[j] = j is the ramp v(t) = t - 1/2 sampled at the
        // centres j + 1/2, so it meets 3.3 at t = 3.8 (rising, searched
        // back from the maximum at 10) and the falling ramp 10 - j meets it
        // at t = 7.2 (searched forward from the maximum at 0).
        let up: Vec<f64> = (0..=10).map(f64::from).collect();
        let down: Vec<f64> = up.iter().rev().copied().collect();
        let back = |interp| LeadAnalysis::search_back(&up, 10, 3.3, 20, 0, interp);
        let fwd = |interp| LeadAnalysis::search_fwd(&down, 0, 3.3, 20, 10, interp);
        assert!((back(true).unwrap() - 3.8).abs() < 1e-12);
        assert!((fwd(true).unwrap() - 7.2).abs() < 1e-12);
        // Without interpolation: the midpoint between the two samples'
        // centres (3.5 + 4.5) / 2 and (6.5 + 7.5) / 2.
        assert_eq!(back(false), Some(4.0));
        assert_eq!(fwd(false), Some(7.0));
        // Negative lobes give the mirror positions.
        let neg: Vec<f64> = up.iter().map(|v| -v).collect();
        let b = LeadAnalysis::search_back(&neg, 10, 3.3, 20, 0, true).unwrap();
        assert!((b - 3.8).abs() < 1e-12);
    }

    // Branch-free extrema against the push per extremum (oracle): plateaus,
    // zeros, NaN, windows cut by both ends, empty and reversed windows.
    #[test]
    fn extrema_equal_pushes() {
        let mut w: Vec<f64> = (0..400)
            .map(|i| (i as f64 * 0.13).sin() * ((i * 7919) % 7) as f64)
            .collect();
        w[100..110].iter_mut().for_each(|v| *v = 0.5);
        w[200..204].iter_mut().for_each(|v| *v = -0.0);
        w[250] = f64::NAN;
        for (lo, hi) in [
            (-5, 500),
            (0, 0),
            (1, 1),
            (50, 40),
            (90, 130),
            (395, 399),
            (398, 600),
        ] {
            assert_eq!(
                LeadAnalysis::extrema(&w, lo, hi),
                LeadAnalysis::extrema_reference(&w, lo, hi),
                "lo={lo} hi={hi}"
            );
        }
        assert!(LeadAnalysis::extrema(&w, -5, 500).len() > 20);
        assert!(LeadAnalysis::extrema(&[1.0, 2.0], 0, 5).is_empty());
    }

    // The area indicator with eight sums side by side against one sum at a
    // time (oracle): windows at the start and past the end of the signal,
    // both limb signs, ranges shorter and longer than a group, ties (a flat
    // signal), and a signal with a NaN.
    #[test]
    fn area_indicator_equals_one_at_a_time() {
        let x: Vec<f64> = (0..300)
            .map(|i| (i as f64 * 0.07).sin() + ((i * 7919) % 101) as f64 / 400.0)
            .collect();
        let flat = vec![0.25; 120];
        let mut nan = x.clone();
        nan[150] = f64::NAN;
        for sig in [&x, &flat, &nan] {
            for win in [2usize, 3, 8, 32] {
                for (lo, hi) in [(0, 0), (0, 40), (5, 12), (20, 90), (250, 320), (290, 299)] {
                    for sign in [1.0, -1.0] {
                        assert_eq!(
                            area_indicator_best(sig, lo, hi, win, sign),
                            area_indicator_best_reference(sig, lo, hi, win, sign),
                            "win={win} lo={lo} hi={hi} sign={sign} len={}",
                            sig.len()
                        );
                    }
                }
            }
        }
        assert!(area_indicator_best(&x, 20, 90, 32, 1.0).is_some());
    }

    // Noise level of a zero-padded array from its inner part against the
    // selection over the whole array (oracle, `kth_abs` itself tested against
    // a sort): zero runs shorter and longer than half, empty inner parts,
    // signed zeros inside.
    #[test]
    fn median_abs_of_zero_padded_array_equals_whole_array_selection() {
        let mut s = 0x2545_f491_4f6c_dd1du64;
        let mut next = || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        for inner_len in [0usize, 1, 2, 7, 100, 1001] {
            for (z0, z1) in [
                (0usize, 0usize),
                (1, 0),
                (0, 3),
                (50, 50),
                (600, 700),
                (5000, 1),
            ] {
                let mut inner: Vec<f64> = (0..inner_len).map(|_| next()).collect();
                if inner_len > 3 {
                    inner[1] = -0.0;
                    inner[2] = 0.0;
                }
                let mut whole = vec![0.0; z0];
                whole.extend_from_slice(&inner);
                whole.extend(std::iter::repeat_n(0.0, z1));
                let n = whole.len();
                let oracle = tendline_dsp::select::kth_abs(&whole, n / 2).unwrap_or(0.0);
                let fast = median_abs_zero_padded(&inner, n);
                assert_eq!(fast.to_bits(), oracle.to_bits(), "{inner_len} {z0} {z1}");
            }
        }
    }

    /// A small P wave (Gaussian, 0.03 mV, SD 12 ms, peak at 1.0 s) followed
    /// 100 ms later by a 0.3 mV step (invented shapes, 250 Hz): the step's
    /// single W_k lobe dominates the window, as the QRS or T slope does
    /// where a flat P is missed in a lead.
    fn p_before_step() -> LeadAnalysis {
        let fs = 250.0;
        let x: Vec<f64> = (0..500)
            .map(|i| {
                let t = i as f64 / fs;
                0.03 * (-(t - 1.0).powi(2) / (2.0 * 0.012f64.powi(2))).exp()
                    + 0.15 * (1.0 + ((t - 1.1) / 0.01).tanh())
            })
            .collect();
        LeadAnalysis::new(&x, fs, &DelineateConfig::default())
    }

    #[test]
    fn pair_near_the_expected_peak_is_found_beside_a_larger_slope() {
        let la = p_before_step();
        let cfg = DelineateConfig::default();
        let (lo, hi) = (230, 280); // 0.92-1.12 s
        let rule = la.p_rule(&cfg);
        // The window's largest maximum is the step's lone lobe: no P pair.
        for k in [3, 4] {
            let l = la.find_wave(k, lo, hi, &rule).expect("a maximum");
            assert_eq!(l.idx.len(), 1, "scale {k}: {:?}", l.idx);
        }
        // The lobe pair peaking nearest 1.0 s (sample 250) at 2^3 is the P:
        // its zero crossing within one sample of the P peak, one lobe on
        // either side.
        let l = la
            .find_pair_near(3, (lo, hi), 250, la.ms_i(30.0), cfg.p_gamma)
            .expect("P pair");
        let z = l.peak.unwrap();
        assert!(z.abs_diff(250) <= 1, "peak {z}");
        assert!(l.idx[0] < z && z <= l.idx[1], "{:?}", l.idx);
        // Too far from the expected peak: nothing.
        assert!(la
            .find_pair_near(3, (lo, hi), 250 + la.ms_i(60.0), la.ms_i(30.0), cfg.p_gamma)
            .is_none());
    }

    /// Invented |W_2| sequences (no signal): a falling R slope (maximum 2.0
    /// at 2) whose |W_2| nearly vanishes at 5, then same-sign bumps of 0.25
    /// at 7, 10 and 13 with shallow dips between them (a rising ST segment).
    /// Nine beats at 1-s intervals (invented shapes for this test: an R
    /// wave of 1 mV, Gaussian with SD 12 ms, a T wave of 0.3 mV, SD 40 ms,
    /// 300 ms after it), with white Gaussian noise of SD `sd` mV from a
    /// fixed-seed generator.
    fn noisy_beats(sd: f64) -> (LeadAnalysis, Vec<usize>, DelineateConfig) {
        let fs = 250.0;
        let mut state = 0x9E37_79B9_7F4A_7C15u64;
        let mut uniform = move || {
            state = state
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        };
        let peaks: Vec<usize> = (1..10).map(|s| s * 250).collect();
        let g = |t: f64, c: f64, sd: f64| (-(t - c).powi(2) / (2.0 * sd * sd)).exp();
        let x: Vec<f64> = (0..2500)
            .map(|i| {
                let t = i as f64 / fs;
                let ecg: f64 = (1..10)
                    .map(|s| g(t, s as f64, 0.012) + 0.3 * g(t, s as f64 + 0.3, 0.04))
                    .sum();
                // Box-Muller.
                let (u1, u2) = (uniform(), uniform());
                ecg + sd * (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
            })
            .collect();
        let cfg = DelineateConfig::default();
        (LeadAnalysis::new(&x, fs, &cfg), peaks, cfg)
    }

    /// Mean |noisy − clean| QRS onset and end (samples) over the inner beats.
    fn qrs_shift(sd: f64, chain_noise_k: f64) -> (f64, f64) {
        let (clean, peaks, _) = noisy_beats(0.0);
        let (noisy, _, mut cfg) = noisy_beats(sd);
        cfg.qrs_chain_noise_k = chain_noise_k;
        let (mut on, mut end) = (0.0, 0.0);
        for k in 1..peaks.len() - 1 {
            let (p, n) = (Some(peaks[k - 1]), Some(peaks[k + 1]));
            let a = clean.beat(peaks[k], p, n, None, None, &cfg);
            let b = noisy.beat(peaks[k], p, n, None, None, &cfg);
            let d = |x: Option<Mark>, y: Option<Mark>| {
                (x.expect("clean mark").sample as f64 - y.expect("noisy mark").sample as f64).abs()
            };
            on += d(a.qrs_on, b.qrs_on);
            end += d(a.qrs_end, b.qrs_end);
        }
        let m = (peaks.len() - 2) as f64;
        (on / m, end / m)
    }

    /// Slow oracle of the QRS end under `qrs_end_noise_cap_k`: on the W_2 of
    /// one Gaussian R wave (the last lobe is the largest |W_2| after the
    /// peak), the end is where |W_2| falls below max(min(ξ_end·|W_2[last]|,
    /// k·noise), `qrs_xi_end_rel`·max|W_2|), linearly interpolated with
    /// W_2[j] centred at j + 1/2.
    fn oracle_qrs_end(la: &LeadAnalysis, peak: usize, cfg: &DelineateConfig) -> f64 {
        let w2 = &la.w[1];
        let span = la.ms_i(40.0) as usize;
        let m_all = (peak - span..peak + span)
            .map(|i| w2[i].abs())
            .fold(0.0, f64::max);
        let last = (peak..peak + span)
            .max_by(|&a, &b| w2[a].abs().total_cmp(&w2[b].abs()))
            .unwrap();
        let xi = if w2[last] > 0.0 {
            cfg.qrs_xi_end_pos
        } else {
            cfg.qrs_xi_end_neg
        };
        let mut thr = xi * w2[last].abs();
        if cfg.qrs_end_noise_cap_k > 0.0 {
            thr = thr.min(cfg.qrs_end_noise_cap_k * la.noise(2));
        }
        let thr = thr.max(cfg.qrs_xi_end_rel * m_all);
        let i = (last + 1..).find(|&i| w2[i].abs() < thr).unwrap();
        let (a, b) = (w2[i - 1].abs(), w2[i].abs());
        i as f64 - 0.5 + (a - thr) / (a - b)
    }

    #[test]
    fn qrs_end_threshold_is_capped_at_a_multiple_of_the_noise() {
        // The invented beats of `noisy_beats` with 0.005 mV of noise: for the
        // 1-mV R wave the relative threshold lies above 3 times the W_2
        // noise, so the cap binds and the end moves later (measured: one
        // sample on every inner beat; 0.3 sample on average at 0.01 mV).
        let (la, peaks, mut cfg) = noisy_beats(0.005);
        let mut moved = 0.0;
        for k in 1..peaks.len() - 1 {
            let (p, n) = (Some(peaks[k - 1]), Some(peaks[k + 1]));
            let end = |cfg: &DelineateConfig| {
                la.beat(peaks[k], p, n, None, None, cfg)
                    .qrs_end
                    .expect("QRS end")
                    .sample as f64
            };
            cfg.qrs_end_noise_cap_k = 3.0;
            let capped = end(&cfg);
            let want = oracle_qrs_end(&la, peaks[k], &cfg);
            assert!(
                (capped - want).abs() <= 0.5 + 1e-9,
                "beat {k}: {capped} vs {want}"
            );
            cfg.qrs_end_noise_cap_k = 0.0;
            let free = end(&cfg);
            let want = oracle_qrs_end(&la, peaks[k], &cfg);
            assert!(
                (free - want).abs() <= 0.5 + 1e-9,
                "beat {k}: {free} vs {want}"
            );
            moved += capped - free;
        }
        let moved = moved / (peaks.len() - 2) as f64;
        assert!(moved >= 0.75, "mean move {moved} samples");
        // Noise-free: the floor relative to the complex holds, so the end
        // stays where `qrs_xi_end_rel` puts it instead of running on.
        let (clean, peaks, mut cfg) = noisy_beats(0.0);
        cfg.qrs_end_noise_cap_k = 3.0;
        let (p, n) = (Some(peaks[3]), Some(peaks[5]));
        let e = clean
            .beat(peaks[4], p, n, None, None, &cfg)
            .qrs_end
            .unwrap();
        let want = oracle_qrs_end(&clean, peaks[4], &cfg);
        assert!(
            (e.sample as f64 - want).abs() <= 0.5 + 1e-9,
            "{} vs {want}",
            e.sample
        );
    }

    #[test]
    fn noise_ripples_do_not_join_the_complex() {
        // 0.04 mV of white noise on a 1-mV R wave: about 19 dB by the noise
        // stress test's measure (A^2/8 over the noise power).
        let (on0, end0) = qrs_shift(0.04, 0.0);
        let (on2, end2) = qrs_shift(0.04, 2.0);
        // Measured: off 5.0 / 6.3 samples (onset / end), k = 2 3.1 / 2.1.
        assert!(
            on2 <= 3.5 && end2 <= 3.0,
            "k = 2: onset {on2}, end {end2} samples"
        );
        assert!(
            end0 > end2 + 3.0,
            "QRS end off {end0} vs k = 2 {end2} samples"
        );
        assert!(
            on0 > on2 + 1.0,
            "QRS onset off {on0} vs k = 2 {on2} samples"
        );
    }

    fn st_ramp() -> Vec<f64> {
        vec![
            0.0, 1.0, 2.0, 1.0, 0.4, 0.1, 0.2, 0.25, 0.2, 0.2, 0.25, 0.2, 0.2, 0.25, 0.1, 0.0,
        ]
    }

    #[test]
    fn same_sign_run_beyond_a_deep_valley_is_trimmed() {
        let w = st_ramp();
        let chain = [2, 7, 10, 13];
        // Off, or too shallow a valley for `frac`: the chain is kept.
        assert_eq!(trim_same_sign_run(&w, &chain, 0.0, 1.0, 2), 13);
        assert_eq!(trim_same_sign_run(&w, &chain, 0.04, 1.0, 2), 13);
        // Valley 0.1 below 0.1 x 2.0 after maximum 2: the run after it goes.
        assert_eq!(trim_same_sign_run(&w, &chain, 0.1, 1.0, 2), 2);
        // Later maxima not small enough, or too few of them: kept.
        assert_eq!(trim_same_sign_run(&w, &chain, 0.1, 0.2, 2), 13);
        assert_eq!(trim_same_sign_run(&w, &chain[..2], 0.1, 1.0, 2), 7);
        assert_eq!(trim_same_sign_run(&w, &chain[..2], 0.1, 1.0, 1), 2);
        // A sign change between the maxima: not one run, nothing trimmed.
        let mut w2 = w.clone();
        w2[5] = -0.05;
        assert_eq!(trim_same_sign_run(&w2, &chain, 0.1, 1.0, 2), 13);
        // An opposite lobe at the end: the same-sign run is not outermost.
        let mut w3 = w.clone();
        w3.extend([-0.3, 0.0]);
        assert_eq!(
            trim_same_sign_run(&w3, &[2, 7, 10, 13, 16], 0.1, 1.0, 2),
            16
        );
    }

    /// Raised-cosine pulses (invented shapes, 250 Hz): `(start s, length s,
    /// mV)`, each `a (1 - cos)/2` on its support and 0 outside, so a wave's
    /// onset and end are known exactly.
    fn pulses(spec: &[(f64, f64, f64)]) -> LeadAnalysis {
        let fs = 250.0;
        let x: Vec<f64> = (0..500)
            .map(|i| {
                let t = i as f64 / fs;
                spec.iter()
                    .filter(|&&(t0, d, _)| t >= t0 && t <= t0 + d)
                    .map(|&(t0, d, a)| {
                        a * 0.5 * (1.0 - (2.0 * std::f64::consts::PI * (t - t0) / d).cos())
                    })
                    .sum()
            })
            .collect();
        LeadAnalysis::new(&x, fs, &DelineateConfig::default())
    }

    /// A low inverted T wave (invented shape for this test): a slow, shallow
    /// descent from 0.40 s with a small hump on it, then a steep return
    /// from the trough at about 0.94 s. Between the weak descending limb
    /// and the strong ascending one W_4 changes sign three times; the hump is
    /// not the wave's summit.
    #[test]
    fn t_peak_sits_beside_the_steep_limb_past_a_wiggle() {
        let step = |t: f64, t0: f64, d: f64, a: f64| {
            a * if t < t0 {
                0.0
            } else if t > t0 + d {
                1.0
            } else {
                0.5 * (1.0 - (std::f64::consts::PI * (t - t0) / d).cos())
            }
        };
        let x: Vec<f64> = (0..500)
            .map(|i| {
                let t = i as f64 / 250.0;
                step(t, 0.40, 0.20, -0.10)
                    + step(t, 0.60, 0.10, 0.03)
                    + step(t, 0.70, 0.24, -0.10)
                    + step(t, 0.95, 0.12, 0.17)
            })
            .collect();
        let cfg = DelineateConfig::default();
        let la = LeadAnalysis::new(&x, 250.0, &cfg);
        let trough = (100..400)
            .min_by(|&p, &q| la.x[p].total_cmp(&la.x[q]))
            .unwrap();
        let rule = |c| WaveRule {
            gamma: cfg.t_gamma,
            biphasic_frac: cfg.t_biphasic_frac,
            three_lobe_bounds: cfg.t_biphasic_outer_bounds,
            reach: la.ms_i(cfg.t_lobe_reach_ms) as usize,
            lone_peak: cfg.t_peak_from_one_limb,
            early_frac: cfg.t_early_pair_frac,
            outer_check: None,
            peak_crossing: c,
        };
        // The wave in 0.36-1.28 s at 2^4 under each rule.
        let both = |a: &LeadAnalysis| {
            let find = |c| a.find_wave(4, 90, 320, &rule(c)).unwrap();
            (
                find(PeakCrossing::First),
                find(PeakCrossing::BesideLargerLimb),
            )
        };
        let (first, beside) = both(&la);
        // Both rules take the same pair: the larger descending lobe, before
        // the hump, and the ascending limb.
        assert_eq!(first.idx, beside.idx);
        assert!(
            first.idx[0] < 150 && first.idx[1] > trough,
            "{:?}",
            first.idx
        );
        let (f, b) = (first.peak.unwrap(), beside.peak.unwrap());
        assert!(b.abs_diff(trough) <= 3, "beside {b}, trough {trough}");
        assert!(f + 50 < trough, "first {f}, trough {trough}");
        // A plain symmetric wave: one crossing, both rules agree on the summit.
        let plain = pulses(&[(0.5, 0.4, 0.3)]);
        let (p1, p2) = both(&plain);
        assert_eq!(p1.peak, p2.peak);
        assert!(p1.peak.unwrap().abs_diff(175) <= 2, "{:?}", p1.peak);
    }

    /// P end (analysis samples) from the last lobe of the P window's wave at
    /// 2^4, as the P search reads it; and the number of lobes.
    fn p_end_of(la: &LeadAnalysis, cfg: &DelineateConfig, lo: isize, hi: isize) -> (f64, usize) {
        let l = la.find_wave(4, lo, hi, &la.p_rule(cfg)).expect("P wave");
        let last = *l.idx.last().unwrap();
        let psearch = la.ms_i(cfg.p_boundary_search_ms);
        let end = LeadAnalysis::search_fwd(
            &la.w[3],
            last,
            cfg.p_xi_end * la.w[3][last].abs(),
            psearch,
            hi + psearch,
            cfg.boundary_interpolate,
        )
        .expect("P end");
        (end, l.idx.len())
    }

    #[test]
    fn contiguous_outer_lobe_of_a_biphasic_p_sets_its_end() {
        // Biphasic P: +0.10 mV on 0.96-1.02 s, then -0.08 mV on 1.02-1.08 s
        // (one wave, no baseline between): true end 1.08 s = sample 270.
        let la = pulses(&[(0.96, 0.06, 0.10), (1.02, 0.06, -0.08)]);
        let (lo, hi) = (225, 300); // 0.90-1.20 s

        // Off, with the larger neighbour making the pair (the earlier one
        // here): the end falls inside the negative half.
        let off = DelineateConfig {
            p_biphasic_frac: 1.1,
            p_early_pair_frac: 1.0,
            ..DelineateConfig::default()
        };
        let on = DelineateConfig {
            p_biphasic_frac: 0.25,
            p_outer_max_quiet_ms: 8.0,
            ..off.clone()
        };
        let (end_off, n_off) = p_end_of(&la, &off, lo, hi);
        assert_eq!(n_off, 2);
        assert!(end_off < 270.0 - 5.0, "end without the rule {end_off}");
        // On: the third lobe is confirmed and the end comes within 4
        // samples (16 ms) of the true end.
        let (end_on, n_on) = p_end_of(&la, &on, lo, hi);
        assert_eq!(n_on, 3);
        assert!((end_on - 270.0).abs() <= 4.0, "end with the rule {end_on}");
        // The defaults read it as biphasic too.
        let (end_def, n_def) = p_end_of(&la, &DelineateConfig::default(), lo, hi);
        assert_eq!(n_def, 3);
        assert!((end_def - 270.0).abs() <= 4.0, "end by default {end_def}");
    }

    #[test]
    fn lobe_pair_nearer_the_qrs_is_the_p_wave() {
        // Invented shapes: the end of a wave before the P (a T or U wave,
        // +0.09 mV on 0.70-0.86 s) falls inside the P window; the P rises
        // fast and falls slowly (+0.06 mV on 0.90-0.98 s plus +0.05 mV on
        // 0.90-1.04 s), summit at sample 236 (0.944 s, computed from the
        // formula). The largest |W_4| maximum is the P's rise, flanked by the
        // earlier wave's descent and the P's own, smaller descent.
        let la = pulses(&[(0.70, 0.16, 0.09), (0.90, 0.08, 0.06), (0.90, 0.14, 0.05)]);
        let (lo, hi) = (200, 275); // 0.80-1.10 s
        let peak = |frac: f64| {
            let cfg = DelineateConfig {
                p_early_pair_frac: frac,
                p_biphasic_frac: 1.1,
                ..DelineateConfig::default()
            };
            la.find_wave(4, lo, hi, &la.p_rule(&cfg))
                .expect("P wave")
                .peak
                .unwrap()
        };
        // The larger neighbour alone (1.0) pairs the P's rise with the other
        // wave's descent: the "peak" falls in the baseline between them.
        let old = peak(1.0);
        assert!(old < 225, "larger-neighbour pair peak {old}");
        // The default prefers the later pair: the P's own summit.
        let new = peak(DelineateConfig::default().p_early_pair_frac);
        assert!(new.abs_diff(236) <= 3, "default pair peak {new}");
    }

    #[test]
    fn outer_lobe_behind_a_baseline_stretch_is_not_taken() {
        // Monophasic P +0.10 mV on 0.96-1.04 s, and 0.06 mV on 0.70-0.76 s
        // (another wave, 200 ms of baseline between), within a reach widened
        // to 400 ms so its falling slope is a candidate outer lobe.
        let la = pulses(&[(0.70, 0.06, 0.06), (0.96, 0.08, 0.10)]);
        let (lo, hi) = (165, 300); // 0.66-1.20 s
        let base = DelineateConfig {
            p_biphasic_frac: 0.25,
            p_lobe_reach_ms: 400.0,
            ..DelineateConfig::default()
        };
        let unchecked = DelineateConfig {
            p_outer_max_quiet_ms: -1.0,
            ..base.clone()
        };
        let checked = DelineateConfig {
            p_outer_max_quiet_ms: 8.0,
            ..base
        };
        let first = |cfg: &DelineateConfig| {
            let l = la.find_wave(4, lo, hi, &la.p_rule(cfg)).expect("P wave");
            (l.idx[0], l.idx.len())
        };
        // Unchecked, the earlier wave's lobe opens the P (before 0.80 s).
        let (f, n) = first(&unchecked);
        assert_eq!(n, 3);
        assert!(f < 200, "first lobe {f}");
        // Checked: the pair of the P itself (its rising slope after 0.90 s).
        let (f, n) = first(&checked);
        assert_eq!(n, 2);
        assert!(f > 225, "first lobe {f}");
    }
}
