//! Wave delineation: P, QRS and T onset, peak and end per lead and across leads.
//!
//! Input: conditioned leads (mV) at `fs` and the QRS fiducial samples from detection.
//! All marks are sample indices into the same arrays.
//!
//! # Method
//!
//! Per lead, the signal is resampled to `analysis_fs_hz` (250 Hz by default,
//! the rate the boundary rules were designed at) and decomposed with the
//! quadratic-spline stationary wavelet transform (`tendline_dsp::wavelet`).
//! QRS boundaries come from modulus maxima at scale 2^2, P and T waves from
//! scale 2^4 (T falls back to 2^5), following Martínez et al. (IEEE TBME
//! 2004). T end is found three ways: the wavelet threshold rule, the tangent
//! method (steepest point of the final T limb, tangent intersected with the
//! PR-segment level), and the area indicator of Zhang et al. (2006). Threshold
//! boundaries (onsets and ends) are placed by linear interpolation of the
//! threshold crossing between analysis samples (`boundary_interpolate`,
//! `t_end_interpolate`); peaks and boundaries set at a local minimum of
//! |W_k| keep the analysis grid. Marks are mapped back to input samples by
//! rounding: above the analysis rate a boundary's resolution is the input
//! sample, a peak's one analysis sample (4 ms at 250 Hz).
//!
//! # Conventions
//!
//! * A wave that is not found, or whose boundary search runs into a window
//!   limit or the signal edge, is `None`; nothing panics on short signals.
//! * `confidence` grows with the wave's slope relative to the lead's typical
//!   wavelet activity (1.4826 × median |W_k|); global marks multiply in the
//!   fraction of leads that agree within `global_outlier_ms`. The reported
//!   T-end confidences also carry the agreement between the three T-end
//!   methods (`t_end_method_agree_*`), applied after every choice is made.
//! * Global marks: QRS onset, P onset and T onset are the earliest, QRS end,
//!   P end and T end the latest usable lead mark after rejecting outlying
//!   leads (one, or up to `global_outlier_max_frac` of many leads; with two
//!   leads that disagree, `global_pair_*` decides,
//!   and for T ends an upright T is favoured, `global_t_upright_bonus_ms`;
//!   for QRS ends a multi-lead wavelet envelope bounds how late a lead's
//!   end may be and how early the global end may be, `global_env_qrs_*`);
//!   the P and T peaks (and the T morphology) come from the lead whose wave
//!   stands tallest above its isoelectric level among the upright ones
//!   (`global_p_peak_tallest`, `global_t_peak_tallest`; with three leads or
//!   more among those near the leads' median peak), else, like the QRS
//!   peak, from the lead with the highest confidence for that mark (T:
//!   nearest where the neighbouring beats put it, `global_pair_t`). A lead
//!   P wave whose peak lies outside the global P span is searched again
//!   near the other leads' P (`lead_p_within_global`); each lead's P and
//!   QRS boundaries are then held to the centre of their offsets over the
//!   lead's neighbouring beats (the median for QRS, a trimmed mean for P)
//!   (`lead_ensemble_*`, module `ensemble`; the global QRS and P marks
//!   likewise, `global_ensemble_qrs`, `global_ensemble_p`), held within the
//!   global span of their
//!   wave (`lead_marks_within_global`), and moved part of the way toward the
//!   median of all leads for the beat (`lead_shrink_*`, module `shrink`;
//!   QRS onsets toward a lower quantile, `lead_shrink_qrs_on_quantile`).
//! * Paced beats ([`delineate_paced`]): a QRS onset, per lead or global,
//!   found before the end of the pacing stimulus that precedes the QRS peak
//!   is moved to `qrs_stimulus_latency_ms` after it (module `paced`).
//! * A biphasic T is reported as such, but its onset and end are searched
//!   from its dominant slope pair unless `t_biphasic_outer_bounds` is set.
//!   A biphasic P (`p_biphasic_frac`) is read from its outer lobes; of two
//!   candidate lobe pairs the one nearer the QRS is the P wave unless the
//!   earlier is clearly larger (`p_early_pair_frac`), and for T the earlier
//!   pair is preferred (`t_early_pair_frac`: a U wave follows the T).
//! * A T wave found as a single limb is read as the first limb of a wave
//!   (peak at the next zero crossing of W_k) unless that puts an upright
//!   crest below the PR-segment level or an inverted trough above it; then
//!   it is read as the final limb of the opposite wave, peak at the last
//!   zero crossing after the QRS end (`t_polarity_recheck`), as when the
//!   upstroke of the next P closes a false inverted T at a fast rate.
//! * P waves are dropped in every lead where the PR interval scatters over
//!   neighbouring beats (`p_max_pr_mad_ms`, module `prhythm`); a lead
//!   without a P wave where most leads have one is searched again near
//!   their P peak with relaxed presence thresholds (`p_fill_*`).
//! * Beats of a lead are delineated in order: the P search of a beat starts
//!   no earlier than the previous beat's wavelet T end.

mod config;
mod ensemble;
mod global;
mod lead;
mod paced;
mod prhythm;
mod shrink;
#[cfg(test)]
mod test_marks {
    use crate::Mark;

    /// A mark at sample `s` with confidence 0.5 (unit tests of the
    /// across-lead and across-beat rules).
    pub(crate) fn m(s: usize) -> Option<Mark> {
        Some(Mark {
            sample: s,
            confidence: 0.5,
        })
    }
}

pub use config::{DelineateConfig, PairRule, PeakCrossing};
pub use paced::onsets_after_stimuli;

use serde::{Deserialize, Serialize};

/// A single fiducial mark with its confidence in 0..=1.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Mark {
    pub sample: usize,
    pub confidence: f32,
}

/// T-wave morphology.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
pub enum TMorphology {
    #[default]
    Absent,
    Upright,
    Inverted,
    /// Positive then negative.
    BiphasicPosNeg,
    /// Negative then positive.
    BiphasicNegPos,
}

/// Method behind a T-end mark.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum TEndMethod {
    #[default]
    Wavelet,
    Tangent,
    Area,
}

/// The marks of one beat (on one lead, or global).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct BeatMarks {
    pub p_on: Option<Mark>,
    pub p_peak: Option<Mark>,
    pub p_end: Option<Mark>,
    pub qrs_on: Option<Mark>,
    pub qrs_peak: Option<Mark>,
    pub qrs_end: Option<Mark>,
    pub t_on: Option<Mark>,
    pub t_peak: Option<Mark>,
    /// T end by the configured default method (`t_end_method`).
    pub t_end: Option<Mark>,
    pub t_end_method: TEndMethod,
    pub t_end_wavelet: Option<Mark>,
    pub t_end_tangent: Option<Mark>,
    pub t_end_area: Option<Mark>,
    pub t_morphology: TMorphology,
}

impl BeatMarks {
    /// Every mark moved `offset` samples later (for chunks of a record).
    pub fn shift(&mut self, offset: usize) {
        for m in [
            &mut self.p_on,
            &mut self.p_peak,
            &mut self.p_end,
            &mut self.qrs_on,
            &mut self.qrs_peak,
            &mut self.qrs_end,
            &mut self.t_on,
            &mut self.t_peak,
            &mut self.t_end,
            &mut self.t_end_wavelet,
            &mut self.t_end_tangent,
            &mut self.t_end_area,
        ]
        .into_iter()
        .flatten()
        {
            m.sample += offset;
        }
    }

    /// The T end of the beat's own method (`t_end_method`), the value `t_end`
    /// holds.
    pub fn t_end_by_method(&self) -> Option<Mark> {
        match self.t_end_method {
            TEndMethod::Wavelet => self.t_end_wavelet,
            TEndMethod::Tangent => self.t_end_tangent,
            TEndMethod::Area => self.t_end_area,
        }
    }

    /// Take the T wave of `other` (onset, peak, every end, morphology),
    /// keeping this beat's P and QRS marks: what a second T search changes.
    fn take_t_marks(&mut self, other: &BeatMarks) {
        self.t_on = other.t_on;
        self.t_peak = other.t_peak;
        self.t_end = other.t_end;
        self.t_end_method = other.t_end_method;
        self.t_end_wavelet = other.t_end_wavelet;
        self.t_end_tangent = other.t_end_tangent;
        self.t_end_area = other.t_end_area;
        self.t_morphology = other.t_morphology;
    }
}

/// Per-lead and global marks of a record.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Delineation {
    /// `per_lead[lead][beat]`.
    pub per_lead: Vec<Vec<BeatMarks>>,
    /// `global[beat]`, combined across leads.
    pub global: Vec<BeatMarks>,
}

/// Delineate every beat of one lead. `qrs` are the QRS fiducial samples
/// (near the R peaks) in increasing order; the result has one entry per
/// fiducial. Out-of-range fiducials give empty marks.
pub fn delineate_lead(x: &[f64], fs: f64, qrs: &[usize], cfg: &DelineateConfig) -> Vec<BeatMarks> {
    if !(fs.is_finite() && fs > 0.0) || x.is_empty() {
        return vec![BeatMarks::default(); qrs.len()];
    }
    let la = lead::LeadAnalysis::new(x, fs, cfg);
    let mut out = delineate_analysed(&la, fs, qrs, cfg);
    for b in &mut out {
        weigh_t_end_methods(b, fs, cfg);
    }
    out
}

/// Puts the agreement between the T-end methods into the reported
/// confidence of each T-end mark (`t_end_method_agree_*`): multiplied by
/// 1 - w + w · a, a the fraction of the beat's other T-end marks within
/// `t_end_method_agree_ms`. Applied last, to what is reported: the choices
/// between leads and the confidence floors use the confidence from slope and
/// noise alone (with the agreement there, QTDB global T-end sensitivity fell
/// from 99.15 to 98.87 % at w = 0.5).
fn weigh_t_end_methods(b: &mut BeatMarks, fs: f64, cfg: &DelineateConfig) {
    let w = cfg.t_end_method_agree_weight;
    if cfg.t_end_method_agree_ms <= 0.0 || w <= 0.0 {
        return;
    }
    let tol = cfg.t_end_method_agree_ms * fs / 1000.0;
    let orig = [b.t_end_wavelet, b.t_end_tangent, b.t_end_area];
    let weighed = |i: usize| -> Option<Mark> {
        let m = orig[i]?;
        let (mut others, mut near) = (0usize, 0usize);
        for (j, o) in orig.iter().enumerate() {
            if let (true, Some(o)) = (j != i, o) {
                others += 1;
                near += usize::from((o.sample as f64 - m.sample as f64).abs() <= tol);
            }
        }
        if others == 0 {
            return Some(m);
        }
        let a = near as f64 / others as f64;
        Some(Mark {
            sample: m.sample,
            confidence: (m.confidence as f64 * (1.0 - w + w * a)) as f32,
        })
    };
    b.t_end_wavelet = weighed(0);
    b.t_end_tangent = weighed(1);
    b.t_end_area = weighed(2);
    b.t_end = b.t_end_by_method();
}

/// Marks of beat `i` of `qrs` on one lead, equal to
/// `delineate_lead(x, fs, qrs, cfg)[i]` (default marks for `i` out of range).
/// With at most three beats the second T pass never changes a beat (it needs
/// three other beats with a T peak), and each beat depends only on the ones
/// before it (the previous T end bounds the P search), so the beats after `i`
/// are not delineated (a tiled median beat needs only the middle of three);
/// longer lists take the whole delineation.
pub fn delineate_lead_beat(
    x: &[f64],
    fs: f64,
    qrs: &[usize],
    i: usize,
    cfg: &DelineateConfig,
) -> BeatMarks {
    if i >= qrs.len() {
        return BeatMarks::default();
    }
    if qrs.len() > 3 || !(fs.is_finite() && fs > 0.0) || x.is_empty() {
        return delineate_lead(x, fs, qrs, cfg).swap_remove(i);
    }
    let la = lead::LeadAnalysis::new(x, fs, cfg);
    let mut b = first_pass(&la, qrs, i + 1, cfg).pop().unwrap_or_default();
    weigh_t_end_methods(&mut b, fs, cfg);
    b
}

/// The first pass over beats `0..count` of `qrs`, in order.
fn first_pass(
    la: &lead::LeadAnalysis,
    qrs: &[usize],
    count: usize,
    cfg: &DelineateConfig,
) -> Vec<BeatMarks> {
    let mut out: Vec<BeatMarks> = Vec::with_capacity(count);
    for i in 0..count.min(qrs.len()) {
        let prev = i.checked_sub(1).map(|p| qrs[p]);
        let next = qrs.get(i + 1).copied();
        // The previous beat's T end bounds this beat's P search.
        let prev_t_end = out.last().and_then(|b| b.t_end_wavelet).map(|m| m.sample);
        out.push(la.beat(qrs[i], prev, next, prev_t_end, None, cfg));
    }
    out
}

/// [`delineate_lead`] on a lead already transformed.
fn delineate_analysed(
    la: &lead::LeadAnalysis,
    fs: f64,
    qrs: &[usize],
    cfg: &DelineateConfig,
) -> Vec<BeatMarks> {
    let mut out = first_pass(la, qrs, qrs.len(), cfg);
    if cfg.t_recheck_ms > 0.0 {
        recheck_t(la, &mut out, qrs, fs, cfg);
    }
    out
}

/// Lead waves outside the global span of their wave (`lead_p_within_global`,
/// `lead_t_within_global`): a P wave is dropped and searched again near the
/// other leads' P peak (`p_fill_*`); a T wave is searched again in a window of
/// ±`t_recheck_window_ms` around the global T peak and kept only if its peak
/// then lies inside the span, else dropped. With `lead_t_near_global` instead,
/// the T wave found again replaces the lead's T marks if its peak is nearer
/// the global T peak, and nothing is dropped. Returns whether any lead
/// changed (the global marks must then be combined again).
fn within_global(
    las: &[Option<&lead::LeadAnalysis>],
    per_lead: &mut [Vec<BeatMarks>],
    global: &[BeatMarks],
    qrs: &[usize],
    cfg: &DelineateConfig,
) -> bool {
    // Without `lead_t_within_global` (drop), `lead_t_near_global` searches
    // the same T waves again but only moves them.
    let near = cfg.lead_t_near_global && !cfg.lead_t_within_global;
    if !(cfg.lead_p_within_global || cfg.lead_t_within_global || near) {
        return false;
    }
    // T waves to search again, before they are dropped.
    let mut redo: Vec<(usize, usize)> = Vec::new();
    if cfg.lead_t_within_global || near {
        for (l, lead) in per_lead.iter().enumerate() {
            for (i, (b, g)) in lead.iter().zip(global).enumerate() {
                if global::t_outside(b, g) && g.t_peak.is_some() {
                    redo.push((l, i));
                }
            }
        }
    }
    let mut refill: Vec<(usize, Option<usize>)> = Vec::new();
    if cfg.lead_p_within_global {
        for (l, lead) in per_lead.iter().enumerate() {
            for (i, (b, g)) in lead.iter().zip(global).enumerate() {
                if global::p_outside(b, g) {
                    refill.push((i, Some(l)));
                }
            }
        }
        refill.sort_unstable();
    }
    let changed = global::drop_waves_outside_global(
        per_lead,
        global,
        cfg.lead_p_within_global,
        cfg.lead_t_within_global,
    );
    if !changed && redo.is_empty() {
        return false;
    }
    let mut changed = changed;
    prhythm::fill_weak_p_in(las, per_lead, cfg, refill.iter().copied());
    // A P found again must lie in the span too (the search window around the
    // other leads' P may reach the deflection that was dropped).
    for &(i, l) in &refill {
        if let Some(b) = l.and_then(|l| per_lead[l].get_mut(i)) {
            if global::p_outside(b, &global[i]) {
                b.p_on = None;
                b.p_peak = None;
                b.p_end = None;
            }
        }
    }
    for (l, i) in redo {
        let (Some(la), Some(gp)) = (las.get(l).copied().flatten(), global[i].t_peak) else {
            continue;
        };
        let prev = i.checked_sub(1).map(|p| qrs[p]);
        let next = qrs.get(i + 1).copied();
        let prev_t_end = i
            .checked_sub(1)
            .and_then(|p| per_lead[l][p].t_end_wavelet)
            .map(|m| m.sample);
        let again = la.beat(
            qrs[i],
            prev,
            next,
            prev_t_end,
            Some((gp.sample, cfg.t_recheck_window_ms)),
            cfg,
        );
        if near {
            let d = |b: &BeatMarks| b.t_peak.map(|t| t.sample.abs_diff(gp.sample));
            if let (Some(a), Some(b)) = (d(&again), d(&per_lead[l][i])) {
                if a < b {
                    per_lead[l][i].take_t_marks(&again);
                    changed = true;
                }
            }
            continue;
        }
        if !global::t_outside(&again, &global[i]) && again.t_peak.is_some() {
            per_lead[l][i].take_t_marks(&again);
        }
    }
    changed
}

/// Second pass over the T waves of one lead: the T peak should sit about
/// where the neighbouring beats put it (median offset from the QRS peak over
/// `global_context_beats` beats either side, common practice that QT changes
/// little from beat to beat). A beat whose T peak is missing or more than
/// `t_recheck_ms` away is searched again in a window of
/// ±`t_recheck_window_ms` around that place; the new T marks are kept if
/// their peak is nearer.
fn recheck_t(
    la: &lead::LeadAnalysis,
    out: &mut [BeatMarks],
    qrs: &[usize],
    fs: f64,
    cfg: &DelineateConfig,
) {
    let offs: Vec<Option<f64>> = out
        .iter()
        .map(|b| match (b.t_peak, b.qrs_peak) {
            (Some(t), Some(q)) => Some(t.sample as f64 - q.sample as f64),
            _ => None,
        })
        .collect();
    let tol = cfg.t_recheck_ms * fs / 1000.0;
    let half = cfg.global_context_beats;
    for i in 0..out.len() {
        let Some(q) = out[i].qrs_peak else { continue };
        let lo = i.saturating_sub(half);
        let hi = (i + half + 1).min(out.len());
        // Only beats at the rate of their neighbours: after a premature
        // beat or a pause the QT legitimately differs.
        let rr = |j: usize| (j > 0).then(|| qrs[j] as f64 - qrs[j - 1] as f64);
        let mut rrs: Vec<f64> = (lo.max(1)..hi).filter(|&j| j != i).filter_map(rr).collect();
        match rr(i) {
            Some(r) if !rrs.is_empty() => {
                rrs.sort_by(|a, b| a.total_cmp(b));
                let m = rrs[rrs.len() / 2];
                if (r - m).abs() > cfg.t_recheck_rr_frac * m {
                    continue;
                }
            }
            _ => continue,
        }
        let mut v: Vec<f64> = (lo..hi)
            .filter(|&j| j != i)
            .filter_map(|j| offs[j])
            .collect();
        if v.len() < 3 {
            continue;
        }
        v.sort_by(|a, b| a.total_cmp(b));
        let e = q.sample as f64 + v[v.len() / 2];
        if e < 0.0 {
            continue;
        }
        let dev = |b: &BeatMarks| b.t_peak.map(|t| (t.sample as f64 - e).abs());
        if dev(&out[i]).is_some_and(|d| d <= tol) {
            continue;
        }
        let prev = if i > 0 { Some(qrs[i - 1]) } else { None };
        let next = qrs.get(i + 1).copied();
        let prev_t_end = if i > 0 {
            out[i - 1].t_end_wavelet.map(|m| m.sample)
        } else {
            None
        };
        let again = la.beat(
            qrs[i],
            prev,
            next,
            prev_t_end,
            Some((e.round() as usize, cfg.t_recheck_window_ms)),
            cfg,
        );
        let better = match (dev(&again), dev(&out[i])) {
            (Some(a), Some(b)) => a < b,
            (Some(_), None) => true,
            _ => false,
        };
        if better {
            // The second search is about the T wave; the beat's P and QRS
            // stay as first found (the P window follows the previous beat's
            // T end, which this pass may have moved: QTDB P-onset
            // sensitivity fell from 96.62 to 96.40 % when the whole beat was
            // replaced).
            out[i].take_t_marks(&again);
        }
    }
}

/// Delineate all leads and combine them into global marks per beat.
pub fn delineate(leads: &[&[f64]], fs: f64, qrs: &[usize], cfg: &DelineateConfig) -> Delineation {
    delineate_paced(leads, fs, qrs, &[], cfg)
}

/// [`delineate`] for a record whose pacing stimuli were removed before
/// filtering: `stimulus_ends` (input samples one past each stimulus, sorted)
/// bound the QRS onsets of the beats they trigger (`qrs_stimulus_latency_ms`,
/// module `paced`).
pub fn delineate_paced(
    leads: &[&[f64]],
    fs: f64,
    qrs: &[usize],
    stimulus_ends: &[usize],
    cfg: &DelineateConfig,
) -> Delineation {
    let las: Vec<Option<lead::LeadAnalysis>> = leads
        .iter()
        .map(|x| {
            (fs.is_finite() && fs > 0.0 && !x.is_empty())
                .then(|| lead::LeadAnalysis::new(x, fs, cfg))
        })
        .collect();
    let per_lead: Vec<Vec<BeatMarks>> = las
        .iter()
        .map(|la| match la {
            Some(la) => delineate_analysed(la, fs, qrs, cfg),
            None => vec![BeatMarks::default(); qrs.len()],
        })
        .collect();
    let refs: Vec<Option<&lead::LeadAnalysis>> = las.iter().map(Option::as_ref).collect();
    across_leads(&refs, per_lead, qrs, stimulus_ends, fs, cfg)
}

/// What follows the single-lead delineation of every lead: P waves dropped
/// where the PR scatters and searched again where most leads have one, the
/// global marks, lead waves outside the global span, lead P and QRS
/// boundaries held to the lead's neighbouring beats and to the global span
/// and drawn toward the median across leads,
/// and the method agreement put into the reported T-end confidences.
fn across_leads(
    las: &[Option<&lead::LeadAnalysis>],
    mut per_lead: Vec<Vec<BeatMarks>>,
    qrs: &[usize],
    stimulus_ends: &[usize],
    fs: f64,
    cfg: &DelineateConfig,
) -> Delineation {
    for lead in per_lead.iter_mut() {
        paced::onsets_after_stimuli(lead, stimulus_ends, fs, cfg);
    }
    prhythm::drop_inconsistent_p(&mut per_lead, fs, cfg);
    prhythm::fill_weak_p(las, &mut per_lead, cfg);
    let mut global = global::combine(&per_lead, las, qrs.len(), fs, cfg);
    if within_global(las, &mut per_lead, &global, qrs, cfg) {
        global = global::combine(&per_lead, las, qrs.len(), fs, cfg);
    }
    // The multi-lead envelope may put the global onset on the stimulus too.
    paced::onsets_after_stimuli(&mut global, stimulus_ends, fs, cfg);
    ensemble::hold_to_neighbours(&mut per_lead, qrs, fs, cfg, true, true);
    if cfg.global_ensemble_qrs || cfg.global_ensemble_p {
        let mut g = [std::mem::take(&mut global)];
        ensemble::hold_to_neighbours(
            &mut g,
            qrs,
            fs,
            cfg,
            cfg.global_ensemble_p,
            cfg.global_ensemble_qrs,
        );
        [global] = g;
    }
    if cfg.lead_marks_within_global {
        global::clip_leads_to_global(&mut per_lead, &global);
    }
    // After the clip: a move toward the median of marks that all lie in the
    // global span stays in it.
    shrink::toward_lead_median(&mut per_lead, cfg);
    for b in per_lead.iter_mut().flatten().chain(global.iter_mut()) {
        weigh_t_end_methods(b, fs, cfg);
    }
    Delineation { per_lead, global }
}

/// One lead with its wavelet transform at the analysis rate, computed once so
/// that several configurations can be tried on the same signal (threshold
/// tuning). It depends only on the signal, `fs` and `analysis_fs_hz`: a
/// configuration with another analysis rate needs a new [`PreparedLead`].
pub struct PreparedLead {
    la: Option<lead::LeadAnalysis>,
    fs: f64,
    analysis_fs_hz: f64,
}

impl PreparedLead {
    /// Input sampling rate (Hz) of the lead.
    pub fn fs(&self) -> f64 {
        self.fs
    }

    /// Analysis rate (Hz) the transform was computed at.
    pub fn analysis_fs_hz(&self) -> f64 {
        self.analysis_fs_hz
    }
}

/// Resample `x` to `cfg.analysis_fs_hz` and compute its wavelet transform
/// (the part of [`delineate_lead`] that no other threshold affects).
pub fn prepare_lead(x: &[f64], fs: f64, cfg: &DelineateConfig) -> PreparedLead {
    let la =
        (fs.is_finite() && fs > 0.0 && !x.is_empty()).then(|| lead::LeadAnalysis::new(x, fs, cfg));
    PreparedLead {
        la,
        fs,
        analysis_fs_hz: cfg.analysis_fs_hz,
    }
}

/// [`delineate`] on prepared leads, for the beats with `want[i]` only; the
/// others get empty marks. With every beat wanted the result equals
/// [`delineate`] with the same configuration (at the prepared analysis rate;
/// `cfg.analysis_fs_hz` is not looked at).
///
/// A beat's marks also depend on its neighbours (the previous beat's T end
/// bounds the P search; `t_recheck_ms` and the `consistent` pair rule use up
/// to `global_context_beats` beats either side), so a wanted beat is
/// delineated exactly as in the full run when the
/// [`context_margin`] beats on either side are wanted too.
/// `want` shorter than `qrs` counts as false for the missing beats.
pub fn delineate_prepared(
    leads: &[PreparedLead],
    qrs: &[usize],
    want: &[bool],
    cfg: &DelineateConfig,
) -> Delineation {
    let wanted = |i: usize| want.get(i).copied().unwrap_or(false);
    let per_lead: Vec<Vec<BeatMarks>> = leads
        .iter()
        .map(|pl| {
            let mut out = vec![BeatMarks::default(); qrs.len()];
            let Some(la) = &pl.la else { return out };
            for i in 0..qrs.len() {
                if !wanted(i) {
                    continue;
                }
                let prev = if i > 0 { Some(qrs[i - 1]) } else { None };
                let next = qrs.get(i + 1).copied();
                let prev_t_end = if i > 0 && wanted(i - 1) {
                    out[i - 1].t_end_wavelet.map(|m| m.sample)
                } else {
                    None
                };
                out[i] = la.beat(qrs[i], prev, next, prev_t_end, None, cfg);
            }
            if cfg.t_recheck_ms > 0.0 {
                recheck_t(la, &mut out, qrs, pl.fs, cfg);
            }
            out
        })
        .collect();
    let fs = leads.first().map_or(1.0, |l| l.fs);
    let refs: Vec<Option<&lead::LeadAnalysis>> = leads.iter().map(|l| l.la.as_ref()).collect();
    across_leads(&refs, per_lead, qrs, &[], fs, cfg)
}

/// Beats on either side of a beat that [`delineate_prepared`] must also
/// delineate for that beat's marks to equal the full run's under `cfg`.
pub fn context_margin(cfg: &DelineateConfig) -> usize {
    // Every step that reads neighbouring beats widens the reach of the steps
    // after it, so the margin is the sum of their reaches, in the order of
    // `delineate_analysed` and `across_leads`: one beat for the previous T
    // end that bounds the P search; the second T pass (`t_recheck_ms`, the
    // neighbours' T peaks); the P presence test (`p_pr_context_beats`); the
    // global combination (`global_context_beats`), combined again after the
    // leads' waves were searched again against it (`within_global`); the
    // neighbour holds (`lead_ensemble_beats`, lead and global marks).
    let g = cfg.global_context_beats;
    let recheck = if cfg.t_recheck_ms > 0.0 { g } else { 0 };
    let p_test = if cfg.p_max_pr_mad_ms > 0.0 {
        cfg.p_pr_context_beats
    } else {
        0
    };
    let again = cfg.lead_p_within_global || cfg.lead_t_within_global || cfg.lead_t_near_global;
    let second = if again { g } else { 0 };
    1 + recheck + p_test + g + second + cfg.lead_ensemble_beats
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn t_end_confidence_reports_the_agreement_of_the_methods() {
        let m = |sample: usize| {
            Some(Mark {
                sample,
                confidence: 0.8,
            })
        };
        // 250 Hz, 40 ms = 10 samples. Wavelet and area agree (8 apart), the
        // tangent lies 30 before: each of the first two agrees with one of
        // its two others (a = 1/2), the tangent with none (a = 0).
        let mut b = BeatMarks {
            t_end_wavelet: m(300),
            t_end_tangent: m(270),
            t_end_area: m(308),
            t_end: m(300),
            ..Default::default()
        };
        let cfg = DelineateConfig::default();
        assert_eq!(cfg.t_end_method_agree_weight, 0.5);
        weigh_t_end_methods(&mut b, 250.0, &cfg);
        let c = |x: Option<Mark>| x.unwrap().confidence;
        assert!((c(b.t_end_wavelet) - 0.8 * 0.75).abs() < 1e-6);
        assert!((c(b.t_end_area) - 0.8 * 0.75).abs() < 1e-6);
        assert!((c(b.t_end_tangent) - 0.8 * 0.5).abs() < 1e-6);
        // `t_end` follows the default method, samples are untouched.
        assert_eq!(b.t_end, b.t_end_wavelet);
        assert_eq!(b.t_end_tangent.unwrap().sample, 270);
        // A lone method has nothing to agree with and keeps its confidence;
        // weight 0 leaves every confidence as it was.
        let mut lone = BeatMarks {
            t_end_wavelet: m(300),
            t_end: m(300),
            ..Default::default()
        };
        weigh_t_end_methods(&mut lone, 250.0, &cfg);
        assert_eq!(c(lone.t_end), 0.8);
        let off = DelineateConfig {
            t_end_method_agree_weight: 0.0,
            ..cfg
        };
        let mut same = BeatMarks {
            t_end_wavelet: m(300),
            t_end_tangent: m(200),
            t_end: m(300),
            ..Default::default()
        };
        weigh_t_end_methods(&mut same, 250.0, &off);
        assert_eq!(c(same.t_end_tangent), 0.8);
    }

    #[test]
    fn default_config_is_valid_and_bad_values_name_their_key() {
        assert!(DelineateConfig::default().validate().is_ok());
        let cfg = DelineateConfig {
            t_xi_end: 1.5,
            p_window_gap_ms: 400.0,
            ..Default::default()
        };
        let errs = cfg.validate().unwrap_err();
        let text: Vec<String> = errs.iter().map(|e| e.to_string()).collect();
        assert!(
            text.iter().any(|t| t.contains("delineate.t_xi_end")),
            "{text:?}"
        );
        assert!(
            text.iter().any(|t| t.contains("delineate.p_window_gap_ms")),
            "{text:?}"
        );
    }

    // One beat of a short list against the whole delineation (oracle): every
    // beat of lists of 1 to 3 beats (the path that stops after the beat) and
    // of 5 beats (the whole delineation), on invented beats with P, QRS and T.
    #[test]
    fn one_beat_equals_that_beat_of_the_whole_delineation() {
        let cfg = DelineateConfig::default();
        let (x, qrs) = synthetic_lead(0.15, 5);
        for fs in [500.0, 250.0] {
            let x: Vec<f64> = if fs == 500.0 {
                x.clone()
            } else {
                x.iter().step_by(2).copied().collect()
            };
            let qrs: Vec<usize> = qrs.iter().map(|&q| q * fs as usize / 500).collect();
            for list in [&qrs[1..2], &qrs[1..3], &qrs[1..4], &qrs[..]] {
                let whole = delineate_lead(&x, fs, list, &cfg);
                for (i, w) in whole.iter().enumerate() {
                    let one = delineate_lead_beat(&x, fs, list, i, &cfg);
                    assert_eq!(&one, w, "fs {fs} beats {} beat {i}", list.len());
                }
                assert!(whole.iter().any(|b| b.t_end.is_some() && b.p_on.is_some()));
                let past = delineate_lead_beat(&x, fs, list, list.len(), &cfg);
                assert_eq!(past, BeatMarks::default());
            }
        }
    }

    /// Synthetic beats (invented data): Gaussian P (peak 160 ms before the R
    /// peak), QRS and T waves at 60 beats/min, 500 Hz; `p_mv` P amplitude.
    fn synthetic_lead(p_mv: f64, n_beats: usize) -> (Vec<f64>, Vec<usize>) {
        let fs = 500.0;
        let rr = 500;
        let n = rr * (n_beats + 1);
        let g = |t: f64, c: f64, s: f64| (-(t - c) * (t - c) / (2.0 * s * s)).exp();
        let qrs: Vec<usize> = (1..=n_beats).map(|k| k * rr).collect();
        let x = (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                qrs.iter()
                    .map(|&r| {
                        let c = r as f64 / fs;
                        p_mv * g(t, c - 0.16, 0.02) + 1.0 * g(t, c, 0.01)
                            - 0.2 * g(t, c + 0.025, 0.008)
                            + 0.3 * g(t, c + 0.3, 0.05)
                    })
                    .sum()
            })
            .collect();
        (x, qrs)
    }

    #[test]
    fn weak_p_in_one_lead_is_found_where_the_other_leads_have_it() {
        let fs = 500.0;
        let (strong, qrs) = synthetic_lead(0.15, 8);
        let (weak, _) = synthetic_lead(0.012, 8);
        let leads: Vec<&[f64]> = vec![&strong, &strong, &weak];
        let off = DelineateConfig {
            p_fill_window_ms: 0.0,
            ..Default::default()
        };
        let d = delineate(&leads, fs, &qrs, &off);
        let inner = 1..qrs.len() - 1;
        // Alone, the weak lead's P fails the presence test...
        assert!(d.per_lead[0][inner.clone()]
            .iter()
            .all(|b| b.p_peak.is_some()));
        assert!(d.per_lead[2][inner.clone()]
            .iter()
            .all(|b| b.p_peak.is_none()));
        // ... with the other leads' P it is found at the same place (P peak
        // at 160 ms before the R peak, within 10 ms).
        let d = delineate(&leads, fs, &qrs, &DelineateConfig::default());
        for i in inner {
            let p = d.per_lead[2][i].p_peak.expect("weak P found").sample as f64;
            assert!(
                (qrs[i] as f64 - p - 80.0).abs() <= 5.0,
                "beat {i}: P peak {p}"
            );
        }
    }

    #[test]
    fn lead_p_outside_the_global_p_is_searched_again_where_the_others_have_it() {
        let fs = 500.0;
        let (strong, qrs) = synthetic_lead(0.15, 8);
        // A third lead with a weak true P (160 ms before the R peak) and a
        // larger bump 100 ms before the R peak that its own P search takes.
        let (mut odd, _) = synthetic_lead(0.012, 8);
        for (i, v) in odd.iter_mut().enumerate() {
            let t = i as f64 / fs;
            for &r in &qrs {
                let c = r as f64 / fs - 0.1;
                *v += 0.08 * (-(t - c) * (t - c) / (2.0 * 0.012 * 0.012)).exp();
            }
        }
        let leads: Vec<&[f64]> = vec![&strong, &strong, &odd];
        let inner = 1..qrs.len() - 1;
        let p_of = |d: &Delineation, i: usize| d.per_lead[2][i].p_peak.map(|m| m.sample as f64);
        let off = DelineateConfig {
            lead_p_within_global: false,
            ..Default::default()
        };
        let d = delineate(&leads, fs, &qrs, &off);
        // Without the rule the third lead keeps the bump (about 50 samples,
        // 100 ms, before the R peak), outside the global P.
        for i in inner.clone() {
            let p = p_of(&d, i).expect("bump taken as P");
            assert!(
                (qrs[i] as f64 - p - 50.0).abs() <= 8.0,
                "beat {i}: P peak {p}"
            );
            let g = &d.global[i];
            assert!(p > g.p_end.unwrap().sample as f64, "beat {i}");
        }
        // With it, the lead's P is where the others have theirs (80 samples,
        // 160 ms, before the R peak) or absent (here the search around the
        // others' P reaches the bump again, and that is refused too), never
        // on the bump; the other leads keep theirs.
        let d = delineate(&leads, fs, &qrs, &DelineateConfig::default());
        for i in inner {
            if let Some(p) = p_of(&d, i) {
                assert!(
                    (qrs[i] as f64 - p - 80.0).abs() <= 5.0,
                    "beat {i}: P peak {p}"
                );
            }
            assert!(d.per_lead[0][i].p_peak.is_some(), "beat {i}");
        }
    }

    /// Invented beats (500 Hz, 60 beats/min): a narrow QRS and a T wave
    /// peaking 120 ms after the R peak with no ST segment, so the default
    /// T window start (100 ms after the R peak, 60 ms after the QRS end)
    /// cuts off its first limb.
    fn t_after_short_st(n_beats: usize) -> (Vec<f64>, Vec<usize>) {
        let fs = 500.0;
        let rr = 500;
        let g = |t: f64, c: f64, s: f64| (-(t - c) * (t - c) / (2.0 * s * s)).exp();
        let qrs: Vec<usize> = (1..=n_beats).map(|k| k * rr).collect();
        let x = (0..rr * (n_beats + 1))
            .map(|i| {
                let t = i as f64 / fs;
                qrs.iter()
                    .map(|&r| {
                        let c = r as f64 / fs;
                        g(t, c, 0.01) + 0.4 * g(t, c + 0.12, 0.035)
                    })
                    .sum()
            })
            .collect();
        (x, qrs)
    }

    #[test]
    fn t_wave_right_after_the_qrs_is_found_from_its_first_limb() {
        let fs = 500.0;
        let (x, qrs) = t_after_short_st(6);
        let off = DelineateConfig {
            t_window_early_after_qrs_end_ms: 0.0,
            t_lone_limb_look_back: false,
            ..Default::default()
        };
        let near_peak = |b: &BeatMarks, r: usize| {
            b.t_peak
                .is_some_and(|p| (p.sample as f64 - (r as f64 + 0.12 * fs)).abs() <= 5.0)
        };
        let inner = 1..qrs.len() - 1;
        // Without the second look the window holds only the final limb: the
        // T peak is missed or misplaced.
        let d = delineate_lead(&x, fs, &qrs, &off);
        assert!(inner.clone().all(|i| !near_peak(&d[i], qrs[i])));
        // Reading that final limb back to its peak finds it on its own.
        let back = DelineateConfig {
            t_lone_limb_look_back: true,
            ..off
        };
        let d = delineate_lead(&x, fs, &qrs, &back);
        assert!(inner.clone().all(|i| near_peak(&d[i], qrs[i])));
        // With it, the T peak is at 120 ms (within 10 ms) and the T end after it.
        let d = delineate_lead(&x, fs, &qrs, &DelineateConfig::default());
        for i in inner {
            assert!(near_peak(&d[i], qrs[i]), "beat {i}: {:?}", d[i].t_peak);
            let end = d[i].t_end.expect("T end").sample;
            assert!(end > qrs[i] + 60, "beat {i}: T end {end}");
        }
    }

    #[test]
    fn config_rejects_unknown_keys() {
        // deny_unknown_fields: a typo is an error, not silently ignored.
        assert!(from_one_key("t_xi_endd").is_err());
        assert_eq!(from_one_key("t_xi_end").unwrap().t_xi_end, 0.3);
    }

    fn from_one_key(key: &str) -> Result<DelineateConfig, serde::de::value::Error> {
        use serde::de::value::{Error, MapDeserializer};
        let it = std::iter::once((key, 0.3f64));
        DelineateConfig::deserialize(MapDeserializer::<_, Error>::new(it))
    }
}
