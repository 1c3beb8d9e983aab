//! A lead's wave boundaries drawn part of the way toward the median of all
//! leads for the same beat.
//!
//! Each lead sees the same heart's electrical events through its own
//! projection, so a wave starts and ends at nearly the same time on every
//! lead (common practice: the global onset and end are read across all
//! leads), yet a boundary found on one lead alone carries that lead's noise
//! and the accidents of its local shape (a low initial deflection below the
//! threshold, a slow return to the baseline). A lead's mark is therefore
//! moved a fraction `a` of the way to the median of the marks that the leads
//! of the record put on the same beat: `own + a · (median − own)`, rounded to
//! the sample, with `a = lead_shrink_qrs` for the QRS onset and end,
//! `lead_shrink_p` for the P onset and end and `lead_shrink_t` for the T onset
//! and every T-end method's mark. `a = 0` leaves the lead alone, `a = 1` gives
//! every lead the median. Peaks are the lead's own extrema and stay. The QRS
//! onset moves toward a lower quantile (`lead_shrink_qrs_on_quantile`)
//! instead of the median: activation starts once for all leads, and a lead
//! that sees the first forces weakly marks the onset late, never early.
//!
//! Only beats where at least `lead_shrink_min_leads` leads have the mark take
//! part (the median of two leads is their mean and says nothing of which one
//! is off). A move that would break the order of the lead's waves (P onset,
//! P peak, P end, QRS onset, QRS peak, QRS end, T onset, T peak, T end) is
//! not made. Runs last, after the global marks are combined (they do not
//! change) and the lead marks are held to the global span: a move toward the
//! median of marks that all lie in the span stays in it.

use crate::{BeatMarks, DelineateConfig, Mark};

/// Which mark of a beat; read and written through [`get`] and [`set`].
#[derive(Clone, Copy)]
enum Field {
    POn,
    PEnd,
    QrsOn,
    QrsEnd,
    TOn,
    TEndWavelet,
    TEndTangent,
    TEndArea,
}

fn get(b: &BeatMarks, f: Field) -> Option<Mark> {
    match f {
        Field::POn => b.p_on,
        Field::PEnd => b.p_end,
        Field::QrsOn => b.qrs_on,
        Field::QrsEnd => b.qrs_end,
        Field::TOn => b.t_on,
        Field::TEndWavelet => b.t_end_wavelet,
        Field::TEndTangent => b.t_end_tangent,
        Field::TEndArea => b.t_end_area,
    }
}

fn set(b: &mut BeatMarks, f: Field, m: Mark) {
    match f {
        Field::POn => b.p_on = Some(m),
        Field::PEnd => b.p_end = Some(m),
        Field::QrsOn => b.qrs_on = Some(m),
        Field::QrsEnd => b.qrs_end = Some(m),
        Field::TOn => b.t_on = Some(m),
        Field::TEndWavelet => b.t_end_wavelet = Some(m),
        Field::TEndTangent => b.t_end_tangent = Some(m),
        Field::TEndArea => b.t_end_area = Some(m),
    }
}

/// The open interval a mark must stay in: strictly after the wave mark
/// before it and strictly before the one after it, on the same lead and beat
/// (missing marks set no bound). A P end may touch the QRS onset, as the
/// single-lead rules allow.
fn bounds(b: &BeatMarks, f: Field) -> (Option<usize>, Option<usize>) {
    let s = |m: Option<Mark>| m.map(|m| m.sample);
    let first = |ms: &[Option<Mark>]| ms.iter().find_map(|m| s(*m));
    match f {
        Field::POn => (None, first(&[b.p_peak, b.p_end, b.qrs_on])),
        Field::PEnd => (
            first(&[b.p_peak, b.p_on]),
            first(&[b.qrs_on, b.qrs_peak]).map(|x| x + 1),
        ),
        Field::QrsOn => (
            s(b.p_end).map(|x| x.saturating_sub(1)),
            first(&[b.qrs_peak, b.qrs_end]),
        ),
        Field::QrsEnd => (
            first(&[b.qrs_peak, b.qrs_on]),
            first(&[b.t_on, b.t_peak, b.t_end]),
        ),
        Field::TOn => (first(&[b.qrs_end, b.qrs_peak]), first(&[b.t_peak, b.t_end])),
        Field::TEndWavelet | Field::TEndTangent | Field::TEndArea => {
            (first(&[b.t_peak, b.t_on, b.qrs_end]), None)
        }
    }
}

/// The `q`-quantile of the ascending `v` (not empty), linear between the
/// order statistics: position `q · (len − 1)`, so `q = 0.5` is the median
/// (the mean of the middle two for an even count).
fn quantile_sorted(v: &[usize], q: f64) -> f64 {
    let pos = q.clamp(0.0, 1.0) * (v.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    let f = pos - lo as f64;
    v[lo] as f64 * (1.0 - f) + v[hi] as f64 * f
}

/// Apply the rule of the module docs to `per_lead[lead][beat]`.
pub(crate) fn toward_lead_median(per_lead: &mut [Vec<BeatMarks>], cfg: &DelineateConfig) {
    let min_leads = cfg.lead_shrink_min_leads.max(2);
    if per_lead.len() < min_leads {
        return;
    }
    let n = per_lead.iter().map(Vec::len).min().unwrap_or(0);
    let plan = [
        (Field::QrsOn, cfg.lead_shrink_qrs),
        (Field::QrsEnd, cfg.lead_shrink_qrs),
        (Field::POn, cfg.lead_shrink_p),
        (Field::PEnd, cfg.lead_shrink_p),
        (Field::TOn, cfg.lead_shrink_t),
        (Field::TEndWavelet, cfg.lead_shrink_t),
        (Field::TEndTangent, cfg.lead_shrink_t),
        (Field::TEndArea, cfg.lead_shrink_t),
    ];
    let mut vals: Vec<usize> = Vec::with_capacity(per_lead.len());
    let mut target: Vec<Option<usize>> = vec![None; per_lead.len()];
    for beat in 0..n {
        for &(field, a) in &plan {
            if a <= 0.0 {
                continue;
            }
            vals.clear();
            vals.extend(
                per_lead
                    .iter()
                    .filter_map(|l| get(&l[beat], field).map(|m| m.sample)),
            );
            if vals.len() < min_leads {
                continue;
            }
            vals.sort_unstable();
            let q = match field {
                Field::QrsOn => cfg.lead_shrink_qrs_on_quantile,
                _ => 0.5,
            };
            let med = quantile_sorted(&vals, q);
            // Targets from the marks as they were before this field moved
            // on any lead, so the order of the leads does not matter.
            for (t, l) in target.iter_mut().zip(per_lead.iter()) {
                *t = get(&l[beat], field).map(|m| {
                    let own = m.sample as f64;
                    (own + a * (med - own)).round().max(0.0) as usize
                });
            }
            for (t, l) in target.iter().zip(per_lead.iter_mut()) {
                let (Some(s), Some(own)) = (*t, get(&l[beat], field)) else {
                    continue;
                };
                let (lo, hi) = bounds(&l[beat], field);
                if lo.is_none_or(|lo| s > lo) && hi.is_none_or(|hi| s < hi) {
                    set(
                        &mut l[beat],
                        field,
                        Mark {
                            sample: s,
                            confidence: own.confidence,
                        },
                    );
                }
            }
        }
        if cfg.lead_shrink_t > 0.0 {
            for l in per_lead.iter_mut() {
                l[beat].t_end = l[beat].t_end_by_method();
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::test_marks::m;

    fn beat(qrs_on: usize, qrs_end: usize) -> BeatMarks {
        BeatMarks {
            p_on: m(100),
            p_peak: m(120),
            p_end: m(140),
            qrs_on: m(qrs_on),
            qrs_peak: m(170),
            qrs_end: m(qrs_end),
            t_peak: m(300),
            ..Default::default()
        }
    }

    /// Four leads' QRS onsets 150, 154, 160, 166 and ends 190, 200, 200,
    /// 230, shrunk by half toward the onset quantile `q`; returns the
    /// onsets and ends after the move, and the leads.
    fn shrink_four(q: f64) -> (Vec<usize>, Vec<usize>, Vec<Vec<BeatMarks>>) {
        let cfg = DelineateConfig {
            lead_shrink_qrs: 0.5,
            lead_shrink_qrs_on_quantile: q,
            lead_shrink_p: 0.0,
            lead_shrink_t: 0.0,
            lead_shrink_min_leads: 3,
            ..DelineateConfig::default()
        };
        let mut per_lead = vec![
            vec![beat(150, 190)],
            vec![beat(154, 200)],
            vec![beat(160, 200)],
            vec![beat(166, 230)],
        ];
        toward_lead_median(&mut per_lead, &cfg);
        let get = |f: fn(&BeatMarks) -> Option<Mark>| -> Vec<usize> {
            per_lead.iter().map(|l| f(&l[0]).unwrap().sample).collect()
        };
        (get(|b| b.qrs_on), get(|b| b.qrs_end), per_lead)
    }

    #[test]
    fn marks_move_the_configured_fraction_toward_the_median() {
        // Onset median 157, end median 200. Oracle: own + 0.5 (median -
        // own), rounded; 153.5, 155.5 round half away from zero.
        let (on, end, per_lead) = shrink_four(0.5);
        assert_eq!(on, [154, 156, 159, 162]);
        assert_eq!(end, [195, 200, 200, 215]);
        assert!(per_lead.iter().all(|l| l[0].p_on == m(100)));
        assert!(per_lead
            .iter()
            .all(|l| l[0].qrs_on.unwrap().confidence == 0.5));
    }

    #[test]
    fn onsets_move_toward_the_configured_quantile_and_ends_toward_the_median() {
        // Oracle: the 0.3 quantile of 150, 154, 160, 166 at position
        // 0.3 · 3 = 0.9 is 150 + 0.9 · 4 = 153.6 (numpy's default `linear`
        // quantile gives the same); own + 0.5 (153.6 - own) = 151.8, 153.8,
        // 156.8, 159.8. Ends keep the median, 200.
        let (on, end, _) = shrink_four(0.3);
        assert_eq!(on, [152, 154, 157, 160]);
        assert_eq!(end, [195, 200, 200, 215]);
        // The ends of the quantile range are the extreme leads, 0.5 the median.
        assert_eq!(quantile_sorted(&[150, 154, 160, 166], 0.0), 150.0);
        assert_eq!(quantile_sorted(&[150, 154, 160, 166], 1.0), 166.0);
        assert_eq!(quantile_sorted(&[150, 154, 160, 166], 0.5), 157.0);
        assert_eq!(quantile_sorted(&[150, 154, 160], 0.5), 154.0);
    }

    #[test]
    fn too_few_leads_or_a_broken_order_leave_the_mark() {
        let cfg = DelineateConfig {
            lead_shrink_qrs: 1.0,
            lead_shrink_min_leads: 3,
            ..DelineateConfig::default()
        };
        // Two leads: below the minimum, nothing moves.
        let two = vec![vec![beat(150, 190)], vec![beat(160, 230)]];
        let mut got = two.clone();
        toward_lead_median(&mut got, &cfg);
        assert_eq!(got, two);
        // Three leads, median QRS onset 150: the third lead's P ends at 155,
        // so its onset may not move to 150 and stays.
        let mut third = beat(160, 200);
        third.p_end = m(155);
        let mut per_lead = vec![vec![beat(150, 200)], vec![beat(150, 200)], vec![third]];
        toward_lead_median(&mut per_lead, &cfg);
        assert_eq!(per_lead[2][0].qrs_on, m(160));
        // Off: nothing moves.
        let off = DelineateConfig {
            lead_shrink_qrs: 0.0,
            lead_shrink_p: 0.0,
            lead_shrink_t: 0.0,
            ..DelineateConfig::default()
        };
        let orig = vec![
            vec![beat(150, 190)],
            vec![beat(154, 200)],
            vec![beat(166, 230)],
        ];
        let mut got = orig.clone();
        toward_lead_median(&mut got, &off);
        assert_eq!(got, orig);
    }
}
