//! The Pan–Tompkins decision stage (Pan and Tompkins, IEEE Trans Biomed Eng
//! 1985;32:230-236), run on a feature signal that may come from one lead or
//! from the fusion of several.
//!
//! Conventions: all arrays have the same length and rate `fs`; every constant
//! comes from [`DetectConfig`] in physical units and is converted to samples
//! here. The feature stage is zero-phase (forward–backward band-pass, central
//! derivative, centred moving window), so peaks of the integrated signal sit
//! at the QRS centre instead of one filter delay later.

use std::collections::VecDeque;

use crate::DetectConfig;

/// Samples in `ms` milliseconds at `fs`, at least 1.
pub(crate) fn ms_to_samples(ms: f64, fs: f64) -> usize {
    ((ms * fs / 1000.0).round() as usize).max(1)
}

/// Per-lead Pan–Tompkins signals.
#[derive(Debug, Clone)]
pub(crate) struct LeadFeatures {
    /// Band-passed lead (mV).
    pub bp: Vec<f64>,
    /// Squared derivative of `bp` ((mV/s)^2).
    pub d2: Vec<f64>,
    /// Moving-window integral (mean over the window) of `d2`.
    pub mwi: Vec<f64>,
}

/// Centred moving average over `w` samples (window `[i - w/2, i - w/2 + w)`,
/// truncated at the ends and divided by the samples actually inside).
pub(crate) fn moving_mean(x: &[f64], w: usize) -> Vec<f64> {
    let n = x.len();
    // Prefix sums appended by `extend` from a slice iterator (exact length:
    // no per-sample capacity check, unlike a push loop) into an unzeroed
    // buffer (a zero-filled one costs a pass of its own).
    let mut pre = Vec::with_capacity(n + 1);
    pre.push(0.0);
    let mut acc = 0.0;
    pre.extend(x.iter().map(|v| {
        acc += v;
        acc
    }));
    let half = w / 2;
    let at = |i: usize| {
        let a = i.saturating_sub(half);
        let b = (i + w - half).min(n);
        (pre[b] - pre[a]) / (b - a) as f64
    };
    // Inside, every window is whole (`b − a = w`): the same expression over
    // two shifted views of the prefix sums, without per-sample clamping
    // ([`moving_mean_reference`] is the test oracle).
    let lo = half.min(n);
    let hi = (n + half + 1).saturating_sub(w).clamp(lo, n);
    let mut out = Vec::with_capacity(n);
    out.extend((0..lo).map(at));
    if hi > lo {
        let wf = w as f64;
        out.extend(
            pre[lo + w - half..hi + w - half]
                .iter()
                .zip(&pre[lo - half..hi - half])
                .map(|(b, a)| (b - a) / wf),
        );
    }
    out.extend((hi..n).map(at));
    out
}

/// [`moving_mean`] sample by sample (test oracle).
#[cfg(test)]
pub(crate) fn moving_mean_reference(x: &[f64], w: usize) -> Vec<f64> {
    let n = x.len();
    let mut pre = vec![0.0; n + 1];
    for i in 0..n {
        pre[i + 1] = pre[i] + x[i];
    }
    let half = w / 2;
    (0..n)
        .map(|i| {
            let a = i.saturating_sub(half);
            let b = (i + w - half).min(n);
            (pre[b] - pre[a]) / (b - a) as f64
        })
        .collect()
}

/// Zero-phase Butterworth band-pass `lo_hz`–`hi_hz` (a high-pass and a low-pass of
/// `order` each, forward and backward). Padding is three periods of `lo_hz`, enough
/// for the high-pass transient to decay. `detect` has already checked the band
/// against `fs`, so a failed design cannot happen here; it would leave `x` unfiltered.
///
/// Several leads at once: equal-length leads run in pairs through one
/// cascade ([`tendline_dsp::filter::filtfilt_sos_padded_many`]), with the same
/// result as one at a time.
fn bandpass(xs: &[&[f64]], fs: f64, lo_hz: f64, hi_hz: f64, order: usize) -> Vec<Vec<f64>> {
    use tendline_dsp::filter::{
        butterworth_highpass_sos, butterworth_lowpass_sos, filtfilt_sos_padded_many,
    };
    let mut sos = butterworth_highpass_sos(order, lo_hz, fs).unwrap_or_default();
    sos.extend(butterworth_lowpass_sos(order, hi_hz, fs).unwrap_or_default());
    let pad = (3.0 * fs / lo_hz).ceil() as usize;
    filtfilt_sos_padded_many(&sos, xs, pad)
}

/// Band-pass, derivative (in mV/s, so values do not depend on `fs`), squaring
/// and moving-window integration.
pub(crate) fn lead_features(x: &[f64], fs: f64, cfg: &DetectConfig) -> LeadFeatures {
    leads_features(&[x], fs, cfg)
        .pop()
        .expect("one lead in, one out")
}

/// [`lead_features`] of every lead, the band-pass run on the leads together.
pub(crate) fn leads_features(xs: &[&[f64]], fs: f64, cfg: &DetectConfig) -> Vec<LeadFeatures> {
    bandpass(
        xs,
        fs,
        cfg.bandpass_low_hz,
        cfg.bandpass_high_hz,
        cfg.bandpass_order,
    )
    .into_iter()
    .map(|bp| features_of_bandpassed(bp, fs, cfg))
    .collect()
}

/// Derivative, squaring and moving-window integration of a band-passed lead.
fn features_of_bandpassed(bp: Vec<f64>, fs: f64, cfg: &DetectConfig) -> LeadFeatures {
    let n = bp.len();
    // Central difference inside, one-sided at the two ends.
    let sq_deriv = |i: usize| {
        let a = bp[i.saturating_sub(1)];
        let b = bp[(i + 1).min(n - 1)];
        let span = ((i + 1).min(n - 1) - i.saturating_sub(1)).max(1) as f64;
        let d = (b - a) * fs / span;
        d * d
    };
    let mut d2 = Vec::with_capacity(n);
    if n < 3 {
        d2.extend((0..n).map(sq_deriv));
    } else {
        d2.push(sq_deriv(0));
        // `span` is 2 for every inner sample: the same expression without
        // the per-sample index arithmetic.
        d2.extend(bp.windows(3).map(|w| {
            let d = (w[2] - w[0]) * fs / 2.0;
            d * d
        }));
        d2.push(sq_deriv(n - 1));
    }
    let mwi = moving_mean(&d2, ms_to_samples(cfg.mwi_window_ms, fs));
    LeadFeatures { bp, d2, mwi }
}

/// A QRS accepted by the decision stage.
#[derive(Debug, Clone, Copy)]
pub(crate) struct PtBeat {
    /// Peak of the integrated signal (sample index).
    pub index: usize,
    /// Found by search-back with the lower thresholds.
    pub searchback: bool,
}

#[derive(Debug, Clone, Copy)]
pub(crate) struct Cand {
    /// Sample of the integrated-signal peak.
    pub k: usize,
    /// Integrated-signal peak.
    pub pi: f64,
    /// Filtered-signal peak in the QRS region.
    pub pf: f64,
    /// Largest slope in the QRS region.
    pub sl: f64,
}

/// Running state of the dual thresholds and RR averages.
struct State {
    spki: f64,
    npki: f64,
    spkf: f64,
    npkf: f64,
    rr: VecDeque<f64>,
    rr_regular: VecDeque<f64>,
    irregular: bool,
}

impl State {
    fn thr_i1(&self, cfg: &DetectConfig) -> f64 {
        let t = self.npki + cfg.threshold_fraction * (self.spki - self.npki);
        if self.irregular {
            t * cfg.irregular_threshold_factor
        } else {
            t
        }
    }
    fn thr_f1(&self, cfg: &DetectConfig) -> f64 {
        let t = self.npkf + cfg.threshold_fraction * (self.spkf - self.npkf);
        if self.irregular {
            t * cfg.irregular_threshold_factor
        } else {
            t
        }
    }
    fn rr_average2(&self) -> Option<f64> {
        let src = if self.rr_regular.is_empty() {
            &self.rr
        } else {
            &self.rr_regular
        };
        if src.is_empty() {
            None
        } else {
            Some(src.iter().sum::<f64>() / src.len() as f64)
        }
    }
    fn push_rr(&mut self, rr: f64, cfg: &DetectConfig) {
        let keep = cfg.rr_average_beats;
        let avg2 = self.rr_average2();
        self.rr.push_back(rr);
        while self.rr.len() > keep {
            self.rr.pop_front();
        }
        match avg2 {
            Some(a) if rr >= cfg.rr_low_fraction * a && rr <= cfg.rr_high_fraction * a => {
                self.rr_regular.push_back(rr);
                while self.rr_regular.len() > keep {
                    self.rr_regular.pop_front();
                }
                self.irregular = false;
            }
            Some(a) => {
                self.irregular = true;
                // A lasting change of rate: when none of the recent intervals
                // is within the limits, the regular average restarts from them.
                let all_out = self.rr.len() >= keep
                    && self
                        .rr
                        .iter()
                        .all(|&r| r < cfg.rr_low_fraction * a || r > cfg.rr_high_fraction * a);
                if all_out {
                    self.rr_regular = self.rr.clone();
                }
            }
            None => {
                self.rr_regular.push_back(rr);
            }
        }
    }
}

/// Peaks of the integrated signal with the filtered and slope maxima within
/// `h` samples; `mwi` has at least 3 samples. The first and last samples
/// count as peaks when the signal rises towards them: a QRS cut by the
/// record edge still has its beat (an extension of the paper, which
/// describes a running detector). The edge rules are tested once, outside
/// the loop over the inner samples (oracle: [`candidates_reference`]).
pub(crate) fn candidates(mwi: &[f64], filt: &[f64], slope: &[f64], h: usize) -> Vec<Cand> {
    let n = mwi.len();
    let cand_at = |k: usize| -> Option<Cand> {
        let a = k.saturating_sub(h);
        let b = (k + h + 1).min(n);
        let pf = filt[a..b].iter().cloned().fold(0.0, f64::max);
        let sl = slope[a..b].iter().cloned().fold(0.0, f64::max);
        if k == 0 || k + 1 == n {
            // At an edge, only a complex whose filtered peak lies inside
            // the record counts; a step at the very last or first sample does not.
            let f = crate::fuse::argmax_in(filt, a, b);
            if f == 0 || f + 1 == n {
                return None;
            }
        }
        Some(Cand {
            k,
            pi: mwi[k],
            pf,
            sl,
        })
    };
    let mut cands = Vec::new();
    if mwi[0] > mwi[1] {
        cands.extend(cand_at(0));
    }
    for (i, w) in mwi.windows(3).enumerate() {
        if w[1] > w[0] && w[1] >= w[2] {
            cands.extend(cand_at(i + 1));
        }
    }
    if mwi[n - 1] > mwi[n - 2] {
        cands.extend(cand_at(n - 1));
    }
    cands
}

/// [`candidates`] testing every sample with the edge rules inline (the form
/// it replaced; test oracle).
#[cfg(test)]
pub(crate) fn candidates_reference(
    mwi: &[f64],
    filt: &[f64],
    slope: &[f64],
    h: usize,
) -> Vec<Cand> {
    let n = mwi.len();
    let mut cands = Vec::new();
    // The first and last samples count as peaks when the signal rises
    // towards them: a QRS cut by the record edge still has its beat (an
    // extension of the paper, which describes a running detector).
    for k in 0..n {
        let rises_left = k == 0 || mwi[k] > mwi[k - 1];
        let holds_right = if k + 1 == n {
            k > 0 && mwi[k] > mwi[k - 1]
        } else {
            mwi[k] >= mwi[k + 1]
        };
        if rises_left && holds_right && (k > 0 || mwi[0] > mwi[1]) {
            let a = k.saturating_sub(h);
            let b = (k + h + 1).min(n);
            let pf = filt[a..b].iter().cloned().fold(0.0, f64::max);
            let sl = slope[a..b].iter().cloned().fold(0.0, f64::max);
            if k == 0 || k + 1 == n {
                // At an edge, only a complex whose filtered peak lies inside
                // the record counts; a step at the very last or first sample does not.
                let f = crate::fuse::argmax_in(filt, a, b);
                if f == 0 || f + 1 == n {
                    continue;
                }
            }
            cands.push(Cand {
                k,
                pi: mwi[k],
                pf,
                sl,
            });
        }
    }

    cands
}

/// Pan–Tompkins decisions on `mwi` (integrated), `filt` (magnitude of the
/// band-passed signal) and `slope` (magnitude of its derivative).
pub(crate) fn decide(
    mwi: &[f64],
    filt: &[f64],
    slope: &[f64],
    fs: f64,
    cfg: &DetectConfig,
) -> Vec<PtBeat> {
    let n = mwi.len();
    if n < 3 {
        return Vec::new();
    }
    let h = ms_to_samples(cfg.mwi_window_ms, fs) / 2;
    let refractory = ms_to_samples(cfg.refractory_ms, fs);
    let t_window = ms_to_samples(cfg.t_wave_window_ms, fs);
    let late_window = ms_to_samples(cfg.t_wave_late_window_ms, fs);

    let cands = candidates(mwi, filt, slope, h);

    // Learning phase: initial signal and noise levels from the first seconds.
    let learn = ms_to_samples(cfg.learning_ms, fs).min(n);
    // (signal, noise) levels of the integrated and the filtered signal over a stretch.
    let levels = |a: usize, b: usize| {
        let (i, f) = (&mwi[a..b], &filt[a..b]);
        let len = (b - a).max(1) as f64;
        (
            cfg.learning_signal_fraction * i.iter().cloned().fold(0.0, f64::max),
            cfg.learning_noise_fraction * i.iter().sum::<f64>() / len,
            cfg.learning_signal_fraction * f.iter().cloned().fold(0.0, f64::max),
            cfg.learning_noise_fraction * f.iter().sum::<f64>() / len,
        )
    };
    let (spki, npki, spkf, npkf) = levels(0, learn);
    let mut st = State {
        spki,
        npki,
        spkf,
        npkf,
        rr: VecDeque::new(),
        rr_regular: VecDeque::new(),
        irregular: false,
    };
    let relearn = if cfg.relearn_ms > 0.0 {
        ms_to_samples(cfg.relearn_ms, fs).max(1)
    } else {
        usize::MAX
    };
    let mut learned_at = 0usize;

    let mut beats: Vec<PtBeat> = Vec::new();
    let mut last: Option<Cand> = None;
    let mut pending: Vec<Cand> = Vec::new();

    let accept =
        |c: Cand, sb: bool, st: &mut State, beats: &mut Vec<PtBeat>, last: &mut Option<Cand>| {
            let w = if sb {
                cfg.searchback_peak_weight
            } else {
                cfg.signal_peak_weight
            };
            st.spki = w * c.pi + (1.0 - w) * st.spki;
            st.spkf = w * c.pf + (1.0 - w) * st.spkf;
            if let Some(l) = last {
                st.push_rr((c.k - l.k) as f64, cfg);
            }
            beats.push(PtBeat {
                index: c.k,
                searchback: sb,
            });
            *last = Some(c);
        };

    // Candidates to judge again (after re-learning) before the next new one.
    let mut retry: VecDeque<Cand> = VecDeque::new();
    let mut fresh = cands.iter().copied();
    while let Some(c) = retry.pop_front().or_else(|| fresh.next()) {
        // Search-back: no QRS for longer than the missed-beat limit.
        while let (Some(l), Some(avg)) = (last, st.rr_average2()) {
            let limit = cfg.searchback_rr_fraction * avg;
            if ((c.k - l.k) as f64) <= limit {
                break;
            }
            let thr_i2 = cfg.searchback_threshold_factor * st.thr_i1(cfg);
            let thr_f2 = cfg.searchback_threshold_factor * st.thr_f1(cfg);
            let best = pending
                .iter()
                .enumerate()
                .filter(|(_, p)| p.k >= l.k + refractory && p.pi > thr_i2 && p.pf > thr_f2)
                .filter(|(_, p)| !(p.k - l.k < t_window && p.sl < cfg.t_wave_slope_ratio * l.sl))
                .max_by(|a, b| a.1.pi.total_cmp(&b.1.pi))
                .map(|(i, _)| i);
            match best {
                Some(i) => {
                    let p = pending[i];
                    pending.drain(..=i);
                    accept(p, true, &mut st, &mut beats, &mut last);
                }
                None => break,
            }
        }

        if let Some(l) = last {
            if c.k - l.k < refractory {
                // Inside the refractory period only a larger peak of the same
                // complex can move the beat (the first one was a shoulder).
                if c.pi > l.pi && !beats.last().map(|b| b.searchback).unwrap_or(false) {
                    let shift = (c.k - l.k) as f64;
                    if let Some(b) = beats.last_mut() {
                        b.index = c.k;
                    }
                    if let Some(r) = st.rr.back_mut() {
                        *r += shift;
                    }
                    last = Some(Cand {
                        sl: c.sl.max(l.sl),
                        ..c
                    });
                }
                continue;
            }
        }

        // No RR interval yet (so no search-back) and no beat for
        // `relearn_ms`: learn the levels again from the stretch just before
        // this candidate (see `DetectConfig::relearn_ms`).
        let quiet_since = last.map_or(0, |l| l.k).max(learned_at);
        if beats.len() < 2 && c.k.saturating_sub(quiet_since) > relearn && c.k >= learn {
            let from = c.k - learn;
            (st.spki, st.npki, st.spkf, st.npkf) = levels(from, c.k);
            learned_at = c.k;
            // The candidates of the stretch learned from were judged against
            // the old levels: judge them again, in order, then this one.
            retry.push_front(c);
            let mut again: Vec<Cand> = pending.iter().copied().filter(|p| p.k >= from).collect();
            pending.retain(|p| p.k < from);
            while let Some(p) = again.pop() {
                retry.push_front(p);
            }
            continue;
        }
        let mut is_qrs = c.pi > st.thr_i1(cfg) && c.pf > st.thr_f1(cfg);
        if is_qrs {
            if let Some(l) = last {
                if c.k - l.k < t_window && c.sl < cfg.t_wave_slope_ratio * l.sl {
                    is_qrs = false;
                }
                if c.k - l.k < late_window
                    && c.sl < cfg.t_wave_slope_ratio * l.sl
                    && c.pi < cfg.t_wave_late_amp_frac * st.spki
                {
                    is_qrs = false;
                }
            }
        }
        if is_qrs {
            accept(c, false, &mut st, &mut beats, &mut last);
            pending.clear();
        } else {
            let w = cfg.noise_peak_weight;
            st.npki = w * c.pi + (1.0 - w) * st.npki;
            st.npkf = w * c.pf + (1.0 - w) * st.npkf;
            pending.push(c);
        }
    }
    beats
}
