//! Global (multi-lead) intervals from the per-lead marks of one window's median beats.
//!
//! All leads' median beats share one time base (the beats were aligned jointly), so
//! marks of different leads are directly comparable.
//!
//! - A lead's QT is valid if the lead is usable, its QT lies within
//!   `[qt_min_ms, qt_max_ms]` and its T wave is at least `min_t_amplitude_mv` high
//!   (a flat T has no reliable end) and it exceeds the lead's QRS duration by at least
//!   `min_jt_ms` (a T end just after the QRS is a boundary error).
//! - Longest-lead QT: the longest valid single-lead QT after outliers are removed: with
//!   three or more valid leads, a lead whose QT is farther than `lead_outlier_ms` from
//!   their median (a T end caught on a U wave or noise must not decide the record);
//!   with exactly two valid leads that disagree by more than `lead_outlier_ms`, no
//!   median can arbitrate: if one T wave is upright and the other inverted and
//!   `prefer_upright_t` is set, the upright one is kept, otherwise the lead with the
//!   larger T wave (the clearer T end). The lead is recorded.
//! - Superimposed-leads QT: earliest QRS onset to latest T end. The T ends come from
//!   the valid leads (two leads: the leads kept above); the QRS onsets from every
//!   usable lead (`qrs_onset_all_leads`, else from the same leads as the T ends). With
//!   three or more leads a single outlying earliest onset (more than
//!   `onset_outlier_ms` before the next) and a single outlying latest end (more than
//!   `end_outlier_ms` after the next) are dropped.
//! - QRS: earliest QRS onset to latest QRS end by the same rule; PR: earliest P onset
//!   (same onset rule) to the global QRS onset; P duration: earliest P onset to latest
//!   P end (same rules) over every usable lead.
//! - T peak to T end (Tp-e) on the lead of the longest-lead QT, the lead whose T end
//!   the QT takes (the T peak of a biphasic T is its larger phase).
//! - QT dispersion: longest minus shortest QT of the valid leads (before the outlier
//!   rule, which would remove what dispersion measures) when at least
//!   `qt_dispersion_min_leads` leads are valid.

use crate::{LeadMeasure, MeasureConfig};

/// Global intervals of a window (ms); None where no lead gives a value.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Global {
    pub longest_ms: Option<f64>,
    pub longest_lead: Option<usize>,
    /// Leads that passed the longest-lead checks.
    pub accepted_leads: Vec<usize>,
    pub superimposed_ms: Option<f64>,
    pub qrs_ms: Option<f64>,
    pub pr_ms: Option<f64>,
    /// P-wave duration.
    pub p_ms: Option<f64>,
    /// T peak to T end on the longest-lead QT's lead.
    pub tpe_ms: Option<f64>,
    /// Longest minus shortest valid lead QT.
    pub qt_dispersion_ms: Option<f64>,
    /// Leads with a valid QT (plausible, T wave high enough, not too noisy).
    pub qt_valid_leads: usize,
}

/// Earliest of `v` (samples) confirmed by another lead: the earliest value
/// with a next-earliest value within `tol` after it, dropping as unconfirmed at
/// most `max_frac` of the values (at least one, never all but two); with fewer
/// than three values, the earliest. With one drop allowed this drops one
/// outlier earlier than the next by more than `tol`.
pub fn robust_min(v: &[f64], tol: f64, max_frac: f64) -> Option<f64> {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    s.sort_by(|a, b| a.total_cmp(b));
    if s.len() < 3 {
        return s.first().copied();
    }
    let last = ((max_frac * s.len() as f64).floor() as usize)
        .max(1)
        .min(s.len() - 2);
    Some(
        (0..=last)
            .find(|&i| s[i + 1] - s[i] <= tol)
            .map_or(s[last], |i| s[i]),
    )
}

/// Latest of `v`, the mirror of [`robust_min`].
pub fn robust_max(v: &[f64], tol: f64, max_frac: f64) -> Option<f64> {
    let neg: Vec<f64> = v.iter().map(|x| -x).collect();
    robust_min(&neg, tol, max_frac).map(|x| -x)
}

/// The lead's beat-to-beat noise is too large for its T wave (see `max_noise_t_ratio`).
/// A T wave below `min_t_amplitude_mv` is left out of the QT as flat, not as noisy:
/// a few microvolts of noise against a near-flat T would otherwise flag a clean
/// window (`unreadable_noise`) for a lead the QT never used.
pub fn too_noisy(lead: &LeadMeasure, cfg: &MeasureConfig) -> bool {
    let over = |noise: Option<f64>, ratio: f64| {
        ratio > 0.0
            && noise
                .zip(lead.t_amplitude_mv)
                .is_some_and(|(n, t)| t.abs() >= cfg.min_t_amplitude_mv && n > ratio * t.abs())
    };
    over(lead.noise_mv, cfg.max_noise_t_ratio) || over(lead.t_noise_mv, cfg.max_t_noise_ratio)
}

/// The lead's QT may enter the window's QT: the lead is usable, its QT
/// plausible, its T wave high enough, not too noisy, and its JT long enough
/// (the checks of the module docs; the consistency across windows aside).
pub fn qt_valid(lead: &LeadMeasure, cfg: &MeasureConfig) -> bool {
    let plausible = |q: f64| q >= cfg.qt_min_ms && q <= cfg.qt_max_ms;
    lead.usable
        && lead.qt_ms.is_some_and(plausible)
        && lead.t_amplitude_mv.map_or(0.0, f64::abs) >= cfg.min_t_amplitude_mv
        && !too_noisy(lead, cfg)
        && lead
            .qt_ms
            .zip(lead.qrs_ms)
            .is_none_or(|(qt, qrs)| qt - qrs >= cfg.min_jt_ms)
}

/// Combine the leads of one window.
pub fn combine(leads: &[LeadMeasure], fs: f64, cfg: &MeasureConfig) -> Global {
    let ms = |samples: f64| samples / fs * 1000.0;
    let plausible = |q: f64| q >= cfg.qt_min_ms && q <= cfg.qt_max_ms;
    let t_amp = |l: usize| leads[l].t_amplitude_mv.map_or(0.0, f64::abs);
    let valid: Vec<usize> = (0..leads.len())
        .filter(|&l| qt_valid(&leads[l], cfg))
        .collect();
    let mut accepted = valid.clone();
    if valid.len() >= 3 {
        let mut q: Vec<f64> = valid.iter().filter_map(|&l| leads[l].qt_ms).collect();
        let med = crate::align::median(&mut q);
        accepted.retain(|&l| {
            leads[l]
                .qt_ms
                .is_some_and(|q| (q - med).abs() <= cfg.lead_outlier_ms)
        });
    } else if valid.len() == 2 {
        let (a, b) = (valid[0], valid[1]);
        let (qa, qb) = (leads[a].qt_ms.unwrap_or(0.0), leads[b].qt_ms.unwrap_or(0.0));
        if (qa - qb).abs() > cfg.lead_outlier_ms {
            let upright = |l: usize| leads[l].t_amplitude_mv.is_some_and(|t| t > 0.0);
            accepted = vec![if cfg.prefer_upright_t && upright(a) != upright(b) {
                if upright(a) {
                    a
                } else {
                    b
                }
            } else if t_amp(b) > t_amp(a) {
                b
            } else {
                a
            }];
        }
    }
    let longest_lead = accepted.iter().copied().max_by(|&a, &b| {
        leads[a]
            .qt_ms
            .unwrap_or(0.0)
            .total_cmp(&leads[b].qt_ms.unwrap_or(0.0))
    });
    let longest_ms = longest_lead.and_then(|l| leads[l].qt_ms);

    let on_tol = cfg.onset_outlier_ms * fs / 1000.0;
    let end_tol = cfg.end_outlier_ms * fs / 1000.0;
    let qrs_tol = cfg.qrs_outlier_ms * fs / 1000.0;
    let frac = cfg.lead_outlier_max_frac;
    let samples = |f: fn(&LeadMeasure) -> Option<f64>, set: &[usize]| -> Vec<f64> {
        set.iter().filter_map(|&l| f(&leads[l])).collect()
    };
    let qrs_on = |m: &LeadMeasure| m.marks.qrs_on.map(|k| k.sample as f64);
    let t_end = |m: &LeadMeasure| m.marks.t_end.map(|k| k.sample as f64);
    let qrs_end = |m: &LeadMeasure| m.marks.qrs_end.map(|k| k.sample as f64);
    let p_on = |m: &LeadMeasure| m.marks.p_on.map(|k| k.sample as f64);

    // QRS and PR from every usable lead with the marks (a lead's T end need not be valid).
    let usable: Vec<usize> = (0..leads.len()).filter(|&l| leads[l].usable).collect();
    // Two leads that disagree beyond the tolerance: the more confident mark
    // (the outlier rule needs a third lead to tell which one is off).
    let confident_of_two =
        |get: fn(&LeadMeasure) -> Option<tendline_delineate::Mark>, tol: f64| -> Option<f64> {
            let m: Vec<tendline_delineate::Mark> =
                usable.iter().filter_map(|&l| get(&leads[l])).collect();
            match m.as_slice() {
                [a, b] if (a.sample as f64 - b.sample as f64).abs() > tol => {
                    Some(if b.confidence > a.confidence { b } else { a }.sample as f64)
                }
                _ => None,
            }
        };
    let on_all = robust_min(&samples(qrs_on, &usable), qrs_tol, frac);

    let sup_set = if valid.len() >= 3 { &valid } else { &accepted };
    let sup_end = robust_max(&samples(t_end, sup_set), end_tol, frac);
    let sup_on = if cfg.qrs_onset_all_leads && sup_end.is_some() {
        on_all
    } else {
        robust_min(&samples(qrs_on, sup_set), qrs_tol, frac)
    };
    let superimposed_ms = sup_on
        .zip(sup_end)
        .map(|(a, b)| ms(b - a))
        .filter(|&q| plausible(q));
    let qrs_end_all = cfg
        .two_lead_qrs_end_confident
        .then(|| confident_of_two(|m| m.marks.qrs_end, end_tol))
        .flatten()
        .or_else(|| robust_max(&samples(qrs_end, &usable), qrs_tol, frac));
    let qrs_ms = on_all
        .zip(qrs_end_all)
        .map(|(a, b)| ms(b - a))
        .filter(|&q| q > 0.0);
    let p_on_all = robust_min(&samples(p_on, &usable), on_tol, frac);
    let pr_ms = p_on_all
        .zip(on_all)
        .map(|(p, q)| ms(q - p))
        .filter(|&q| q > 0.0);
    let p_end = |m: &LeadMeasure| m.marks.p_end.map(|k| k.sample as f64);
    let p_ms = p_on_all
        .zip(robust_max(&samples(p_end, &usable), end_tol, frac))
        .map(|(a, b)| ms(b - a))
        .filter(|&p| p > 0.0);
    let tpe_ms = longest_lead
        .and_then(|l| leads[l].marks.t_peak.zip(leads[l].marks.t_end))
        .map(|(p, e)| ms(e.sample as f64 - p.sample as f64))
        .filter(|&d| d > 0.0);
    let valid_qt: Vec<f64> = valid.iter().filter_map(|&l| leads[l].qt_ms).collect();
    let qt_dispersion_ms = (valid_qt.len() >= cfg.qt_dispersion_min_leads.max(2)).then(|| {
        valid_qt.iter().copied().fold(f64::NEG_INFINITY, f64::max)
            - valid_qt.iter().copied().fold(f64::INFINITY, f64::min)
    });
    Global {
        longest_ms,
        longest_lead,
        accepted_leads: accepted,
        superimposed_ms,
        qrs_ms,
        pr_ms,
        p_ms,
        tpe_ms,
        qt_dispersion_ms,
        qt_valid_leads: valid.len(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use tendline_delineate::{BeatMarks, Mark};

    // Marks are placed 200 samples into the beat so a P onset 150 before the QRS exists.
    fn lead(on: usize, qrs_end: usize, t_end: usize) -> LeadMeasure {
        // Signed so that a P onset 150 before an early QRS onset stays exact in debug builds.
        let mk = |s: isize| {
            Some(Mark {
                sample: (s + 200) as usize,
                confidence: 1.0,
            })
        };
        let (on_i, qrs_end_i, t_end_i) = (on as isize, qrs_end as isize, t_end as isize);
        let fs = 1000.0;
        LeadMeasure {
            usable: true,
            qt_ms: Some((t_end - on) as f64 / fs * 1000.0),
            qrs_ms: Some((qrs_end - on) as f64),
            pr_ms: None,
            t_amplitude_mv: Some(0.3),
            noise_mv: None,
            t_noise_mv: None,
            qt_accepted: false,
            inconsistent: false,
            marks: BeatMarks {
                qrs_on: mk(on_i),
                qrs_end: mk(qrs_end_i),
                t_end: mk(t_end_i),
                p_on: mk(on_i - 150),
                ..BeatMarks::default()
            },
        }
    }

    #[test]
    fn longest_lead_rejects_implausible_and_outliers() {
        let cfg = MeasureConfig::default();
        // fs = 1000 Hz so samples are ms. Lead 3's QT 520 is 110 ms above the median: outlier.
        let leads = vec![
            lead(100, 190, 500),
            lead(102, 195, 512),
            lead(98, 188, 505),
            lead(100, 190, 620),
            lead(100, 190, 1100),
        ];
        let g = combine(&leads, 1000.0, &cfg);
        assert_eq!(g.longest_lead, Some(1));
        assert_eq!(g.longest_ms, Some(410.0));
        assert_eq!(g.accepted_leads, vec![0, 1, 2]);
        // Superimposed over the plausible leads 0..=3: onset 98 (not an outlier: 2 ms
        // before the next), the 620 end is 108 ms after the next latest: dropped → 512.
        assert_eq!(g.superimposed_ms, Some(414.0));
        // QRS over all usable leads: 98 → 195 (no outlier).
        assert_eq!(g.qrs_ms, Some(97.0));
        assert_eq!(g.pr_ms, Some(150.0));
    }

    #[test]
    fn long_qt_of_a_slow_heart_is_kept() {
        // QTDB sel33 (35 bpm): annotator 1 marks window QTs of 735-820 ms; the
        // database's annotations, measured here. Such leads must enter the QT;
        // a QT past the 900-ms bound (a T end in the next beat) does not.
        let cfg = MeasureConfig::default();
        let g = combine(&[lead(100, 200, 860), lead(102, 205, 872)], 1000.0, &cfg);
        assert_eq!(g.accepted_leads, vec![0, 1]);
        assert_eq!(g.longest_ms, Some(770.0));
        assert_eq!(g.superimposed_ms, Some(772.0));
        let g = combine(&[lead(100, 200, 1010), lead(102, 205, 1020)], 1000.0, &cfg);
        assert!(g.accepted_leads.is_empty());
        assert_eq!(g.superimposed_ms, None);
    }

    #[test]
    fn two_leads_with_distant_qrs_ends_take_the_confident_one() {
        let cfg = MeasureConfig::default();
        // fs = 1000 Hz. Lead 1's QRS end is 80 ms after lead 0's (> 40 ms) and
        // less confident: the QRS ends at lead 0's mark, 100 -> 190.
        let sure = lead(100, 190, 500);
        let mut unsure = lead(100, 270, 500);
        unsure.marks.qrs_end.as_mut().unwrap().confidence = 0.3;
        let g = combine(&[sure.clone(), unsure.clone()], 1000.0, &cfg);
        assert_eq!(g.qrs_ms, Some(90.0));
        // The order of the leads does not matter.
        let g = combine(&[unsure.clone(), sure.clone()], 1000.0, &cfg);
        assert_eq!(g.qrs_ms, Some(90.0));
        // A more confident late end is kept.
        let mut late_sure = lead(100, 270, 500);
        late_sure.marks.qrs_end.as_mut().unwrap().confidence = 1.0;
        let mut early_unsure = sure.clone();
        early_unsure.marks.qrs_end.as_mut().unwrap().confidence = 0.3;
        assert_eq!(
            combine(&[early_unsure, late_sure], 1000.0, &cfg).qrs_ms,
            Some(170.0)
        );
        // Within the tolerance, or with the rule off, the latest end counts.
        let near = lead(100, 220, 500);
        assert_eq!(
            combine(&[sure.clone(), near], 1000.0, &cfg).qrs_ms,
            Some(120.0)
        );
        let off = MeasureConfig {
            two_lead_qrs_end_confident: false,
            ..MeasureConfig::default()
        };
        assert_eq!(combine(&[sure, unsure], 1000.0, &off).qrs_ms, Some(170.0));
    }

    #[test]
    fn noisy_lead_is_left_out_of_the_longest_lead_rule() {
        let cfg = MeasureConfig::default();
        let mut noisy = lead(100, 190, 530);
        // Noise 0.06 mV against a 0.3 mV T wave: ratio 0.2 > 0.15.
        noisy.noise_mv = Some(0.06);
        let mut quiet = lead(100, 190, 500);
        quiet.noise_mv = Some(0.01);
        let leads = vec![quiet.clone(), noisy.clone(), quiet];
        assert!(too_noisy(&noisy, &cfg) && !too_noisy(&leads[0], &cfg));
        // A near-flat T (0.02 mV, under `min_t_amplitude_mv` 0.05) with 4 uV of
        // noise (ratio 0.2) is flat, not noisy (the demo's S05, lead V1).
        let mut flat = lead(100, 190, 500);
        flat.noise_mv = Some(0.004);
        flat.t_amplitude_mv = Some(0.02);
        assert!(!too_noisy(&flat, &cfg));
        flat.t_amplitude_mv = Some(0.06);
        flat.noise_mv = Some(0.012);
        assert!(too_noisy(&flat, &cfg));
        // Slow noise left in the median beat: 0.05 mV against 0.3 mV (ratio
        // 0.17 > `max_t_noise_ratio` 0.15) is too noisy, 0.04 mV is not, and
        // a zero ratio disables the test.
        let mut slow = lead(100, 190, 500);
        slow.noise_mv = Some(0.01);
        slow.t_noise_mv = Some(0.05);
        assert!(too_noisy(&slow, &cfg));
        slow.t_noise_mv = Some(0.04);
        assert!(!too_noisy(&slow, &cfg));
        slow.t_noise_mv = Some(0.05);
        let no_slow = MeasureConfig {
            max_t_noise_ratio: 0.0,
            ..MeasureConfig::default()
        };
        assert!(!too_noisy(&slow, &no_slow));
        let g = combine(&leads, 1000.0, &cfg);
        assert_eq!(g.longest_ms, Some(400.0));
        assert!(!g.accepted_leads.contains(&1));
        // Disabled check: the long noisy lead wins again.
        let off = MeasureConfig {
            max_noise_t_ratio: 0.0,
            ..MeasureConfig::default()
        };
        assert_eq!(combine(&leads, 1000.0, &off).longest_ms, Some(430.0));
    }

    #[test]
    fn flat_t_is_not_measured_and_two_disagreeing_leads_keep_the_larger_t() {
        let cfg = MeasureConfig::default();
        let mut flat = lead(100, 190, 600);
        flat.t_amplitude_mv = Some(-0.02);
        let g = combine(&[lead(100, 190, 500), flat.clone()], 1000.0, &cfg);
        assert_eq!((g.longest_lead, g.longest_ms), (Some(0), Some(400.0)));
        assert_eq!(g.superimposed_ms, Some(400.0));
        // Both T waves clear enough but 100 ms apart: the larger T wins.
        flat.t_amplitude_mv = Some(0.2);
        let mut big = lead(100, 190, 500);
        big.t_amplitude_mv = Some(-0.4);
        let g = combine(&[flat.clone(), big.clone()], 1000.0, &cfg);
        // Opposite polarities: the upright T (lead 0) wins over the larger inverted one.
        assert_eq!((g.longest_lead, g.longest_ms), (Some(0), Some(500.0)));
        assert_eq!(g.superimposed_ms, Some(500.0));
        // Without the polarity preference the larger T wins.
        let amp_only = MeasureConfig {
            prefer_upright_t: false,
            ..MeasureConfig::default()
        };
        let g = combine(&[flat.clone(), big], 1000.0, &amp_only);
        assert_eq!((g.longest_lead, g.longest_ms), (Some(1), Some(400.0)));
        assert_eq!(g.superimposed_ms, Some(400.0));
        // Same polarity: the larger T wins whatever the preference.
        let mut big_up = lead(100, 190, 500);
        big_up.t_amplitude_mv = Some(0.4);
        let g = combine(&[flat, big_up], 1000.0, &cfg);
        assert_eq!((g.longest_lead, g.longest_ms), (Some(1), Some(400.0)));
    }

    #[test]
    fn t_end_just_after_the_qrs_is_rejected() {
        let cfg = MeasureConfig::default();
        // Lead 1: QRS 150 ms, QT 210 ms → JT 60 ms < 100 ms.
        let g = combine(&[lead(100, 190, 500), lead(100, 250, 310)], 1000.0, &cfg);
        assert_eq!(g.accepted_leads, vec![0]);
        assert_eq!(g.superimposed_ms, Some(400.0));
    }

    #[test]
    fn superimposed_onset_comes_from_every_usable_lead() {
        // Invented marks (logic check, fs = 1000 Hz so samples are ms): lead 1's T wave
        // is too flat for a T end, but its QRS starts 30 ms before lead 0's.
        let cfg = MeasureConfig::default();
        let mut flat = lead(70, 190, 600);
        flat.t_amplitude_mv = Some(0.01);
        let leads = vec![lead(100, 190, 500), flat];
        let g = combine(&leads, 1000.0, &cfg);
        assert_eq!(g.accepted_leads, vec![0]);
        assert_eq!(g.superimposed_ms, Some(430.0));
        // The longest-lead QT stays within one lead.
        assert_eq!(g.longest_ms, Some(400.0));
        // Switched off: onset from the leads with a valid T end only.
        let own = MeasureConfig {
            qrs_onset_all_leads: false,
            ..MeasureConfig::default()
        };
        assert_eq!(combine(&leads, 1000.0, &own).superimposed_ms, Some(400.0));
        // An unusable lead gives no onset either way.
        let mut off = leads.clone();
        off[1].usable = false;
        assert_eq!(combine(&off, 1000.0, &cfg).superimposed_ms, Some(400.0));
    }

    /// `lead` with a P end and a T peak (samples relative to the same origin).
    fn lead_pt(
        on: usize,
        qrs_end: usize,
        t_end: usize,
        p_end: usize,
        t_peak: usize,
    ) -> LeadMeasure {
        let mut l = lead(on, qrs_end, t_end);
        let mk = |s: usize| {
            Some(Mark {
                sample: s + 200,
                confidence: 1.0,
            })
        };
        l.marks.p_end = mk(p_end);
        l.marks.t_peak = mk(t_peak);
        l
    }

    #[test]
    fn p_duration_tpe_and_dispersion_by_hand() {
        // Invented marks (logic check, fs = 1000 Hz so samples are ms).
        // P onsets: 150 before each QRS onset (`lead`): 100-150 = -50, 95-150 = -55,
        // 105-150 = -45 -> earliest -55. P ends 60, 70, 65 -> latest 70 (within the
        // 40-ms outlier tolerance of the next). P duration 70 - (-55) = 125 ms.
        // QTs 400, 420 (longest), 380 ms; Tp-e on the longest lead 515 - 440 = 75 ms;
        // dispersion 420 - 380 = 40 ms (common practice: max - min lead QT).
        let cfg = MeasureConfig::default();
        let leads = [
            lead_pt(100, 190, 500, 60, 420),
            lead_pt(95, 190, 515, 70, 440),
            lead_pt(105, 190, 485, 65, 410),
        ];
        let g = combine(&leads, 1000.0, &cfg);
        assert_eq!(g.longest_lead, Some(1));
        assert_eq!(g.longest_ms, Some(420.0));
        assert_eq!(g.p_ms, Some(125.0));
        assert_eq!(g.tpe_ms, Some(75.0));
        assert_eq!(g.qt_dispersion_ms, Some(40.0));
        assert_eq!(g.qt_valid_leads, 3);
        // Two valid leads: no dispersion under the default minimum of 3, a value
        // when the minimum is 2.
        let g2 = combine(&leads[..2], 1000.0, &cfg);
        assert_eq!((g2.qt_dispersion_ms, g2.qt_valid_leads), (None, 2));
        let two = MeasureConfig {
            qt_dispersion_min_leads: 2,
            ..MeasureConfig::default()
        };
        assert_eq!(
            combine(&leads[..2], 1000.0, &two).qt_dispersion_ms,
            Some(20.0)
        );
        // A lead with a flat T gives no QT and so takes no part in the dispersion.
        let mut flat = lead_pt(100, 190, 700, 60, 420);
        flat.t_amplitude_mv = Some(0.01);
        let g = combine(
            &[leads[0].clone(), leads[1].clone(), leads[2].clone(), flat],
            1000.0,
            &cfg,
        );
        assert_eq!((g.qt_dispersion_ms, g.qt_valid_leads), (Some(40.0), 3));
        // No T peak on the longest lead: no Tp-e (not taken from another lead).
        let mut no_peak = leads.clone();
        no_peak[1].marks.t_peak = None;
        assert_eq!(combine(&no_peak, 1000.0, &cfg).tpe_ms, None);
        // No P end anywhere: no P duration.
        let mut no_p = leads.clone();
        for l in &mut no_p {
            l.marks.p_end = None;
        }
        assert_eq!(combine(&no_p, 1000.0, &cfg).p_ms, None);
    }

    #[test]
    fn two_leads_use_both() {
        let cfg = MeasureConfig::default();
        let g = combine(&[lead(100, 190, 480), lead(90, 180, 500)], 1000.0, &cfg);
        assert_eq!(g.longest_ms, Some(410.0));
        assert_eq!(g.superimposed_ms, Some(410.0));
        let g = combine(&[lead(100, 190, 480), lead(110, 180, 500)], 1000.0, &cfg);
        assert_eq!(g.longest_lead, Some(1));
        assert_eq!(g.longest_ms, Some(390.0));
        assert_eq!(g.superimposed_ms, Some(400.0));
    }

    #[test]
    fn robust_extremes() {
        assert_eq!(robust_min(&[10.0, 40.0, 41.0], 20.0, 0.0), Some(40.0));
        assert_eq!(robust_min(&[30.0, 40.0, 41.0], 20.0, 0.0), Some(30.0));
        assert_eq!(robust_min(&[10.0, 40.0], 20.0, 0.0), Some(10.0));
        assert_eq!(robust_max(&[10.0, 40.0, 90.0], 20.0, 0.0), Some(40.0));
        assert_eq!(robust_min(&[], 1.0, 0.0), None);
        // Hand-worked, twelve onsets (samples), tolerance 3: 10 and 20 have no
        // lead within 3 after them, 30 has 32; a quarter of twelve, three, may be dropped.
        let v = [
            10.0, 20.0, 30.0, 32.0, 33.0, 34.0, 35.0, 35.0, 36.0, 36.0, 37.0, 40.0,
        ];
        assert_eq!(robust_min(&v, 3.0, 0.25), Some(30.0));
        // Only one may be dropped (at least one always may): the second
        // earliest, unconfirmed, is kept.
        assert_eq!(robust_min(&v, 3.0, 0.05), Some(20.0));
        // None confirmed within the allowance: the value after the last drop.
        assert_eq!(
            robust_min(&[0.0, 10.0, 20.0, 30.0, 40.0], 3.0, 0.4),
            Some(20.0)
        );
        // Never more than all but two.
        assert_eq!(robust_min(&[0.0, 10.0, 20.0], 3.0, 1.0), Some(10.0));
        // Latest: 40 has 37 within 3 before it; with 41 instead, 41 is dropped.
        assert_eq!(robust_max(&v, 3.0, 0.25), Some(40.0));
        let mut w = v;
        w[11] = 41.0;
        assert_eq!(robust_max(&w, 3.0, 0.25), Some(37.0));
    }
}
