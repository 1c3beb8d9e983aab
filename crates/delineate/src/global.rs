//! Combination of per-lead marks into one set of global marks per beat.

use crate::lead::LeadAnalysis;
use crate::{BeatMarks, DelineateConfig, Mark, PairRule, TMorphology};

/// Which end of the spread a boundary takes.
#[derive(Clone, Copy, PartialEq)]
enum Pick {
    Earliest,
    Latest,
}

/// Earliest/latest usable mark after rejecting at most one outlying lead.
///
/// With three or more leads the extreme candidate is dropped when it lies
/// more than `outlier` samples beyond the median of the others. With two
/// leads that disagree by more than `outlier`, the more confident one is kept.
fn extreme(
    cands: &[Mark],
    pick: Pick,
    outlier: f64,
    pair: PairRule,
    expect: &dyn Fn() -> Option<f64>,
    cfg: &DelineateConfig,
) -> Option<Mark> {
    extreme_pref(cands, &[], pick, outlier, pair, expect, 0.0, cfg)
}

/// [`extreme`] where `preferred[i]` (if given) marks candidate `i` as the
/// preferred kind of wave: with `PairRule::Consistent`, when two leads
/// disagree and only one is preferred, its distance to the expected place
/// counts `bonus` samples less. `expect` gives the expected place; it is
/// called only in that case (it costs a median over the neighbouring beats).
#[allow(clippy::too_many_arguments)]
fn extreme_pref(
    cands: &[Mark],
    preferred: &[bool],
    pick: Pick,
    outlier: f64,
    pair: PairRule,
    expect: &dyn Fn() -> Option<f64>,
    bonus: f64,
    cfg: &DelineateConfig,
) -> Option<Mark> {
    let mut c: Vec<(Mark, bool)> = cands
        .iter()
        .enumerate()
        .map(|(i, &m)| (m, preferred.get(i).copied().unwrap_or(false)))
        .filter(|(m, _)| m.confidence as f64 >= cfg.global_min_confidence)
        .collect();
    if c.len() < cfg.global_min_leads || c.is_empty() {
        return None;
    }
    c.sort_by_key(|(m, _)| m.sample);
    if pick == Pick::Latest {
        c.reverse();
    }
    let total = c.len();
    let dist = |a: &Mark, b: f64| (a.sample as f64 - b).abs();
    if c.len() >= 3 {
        // A quarter of twelve leads may be off together (noise on the limb
        // leads); with three to seven leads this is the one-lead rule.
        let max_drop = ((cfg.global_outlier_max_frac * total as f64).floor() as usize).max(1);
        let mut dropped = 0;
        while dropped < max_drop && c.len() >= 3 {
            let mut rest: Vec<f64> = c[1..].iter().map(|(m, _)| m.sample as f64).collect();
            rest.sort_by(|a, b| a.total_cmp(b));
            let med = rest[rest.len() / 2];
            if dist(&c[0].0, med) <= outlier {
                break;
            }
            c.remove(0);
            dropped += 1;
        }
    } else if c.len() == 2 && dist(&c[0].0, c[1].0.sample as f64) > outlier {
        let ((m0, p0), (m1, p1)) = (c[0], c[1]);
        let drop_outer = match pair {
            PairRule::Confident => m1.confidence > m0.confidence,
            PairRule::Outer => false,
            PairRule::Inner => true,
            PairRule::Consistent | PairRule::Envelope => match expect() {
                Some(e) => {
                    let credit = |p: bool, q: bool| if p && !q { bonus } else { 0.0 };
                    dist(&m0, e) - credit(p0, p1) > dist(&m1, e) - credit(p1, p0)
                }
                None => m1.confidence > m0.confidence,
            },
        };
        if drop_outer {
            c.remove(0);
        }
    }
    let c: Vec<Mark> = c.into_iter().map(|(m, _)| m).collect();
    let best = c[0];
    let agree = cands
        .iter()
        .filter(|m| dist(m, best.sample as f64) <= outlier)
        .count() as f32
        / total.max(1) as f32;
    let mean_conf = c.iter().map(|m| m.confidence).sum::<f32>() / c.len() as f32;
    Some(Mark {
        sample: best.sample,
        confidence: (mean_conf * agree.min(1.0)).clamp(0.0, 1.0),
    })
}

/// Where beat `b`'s mark is expected from its neighbours: the beat's QRS
/// peak (median over leads) plus the median offset of the mark from each
/// lead's own QRS peak over the beats within `half` of `b` (excluding `b`).
fn expected(
    per_lead: &[Vec<BeatMarks>],
    b: usize,
    half: usize,
    get: &dyn Fn(&BeatMarks) -> Option<Mark>,
) -> Option<f64> {
    // Positions and offsets are whole samples, exact as `i64` and as `f64`:
    // the upper median by integer selection is the value a `total_cmp` sort
    // of the same numbers as `f64` puts at `len / 2` ([`expected_sorted`]).
    let med = |v: &mut [i64]| -> Option<f64> {
        if v.is_empty() {
            return None;
        }
        let m = v.len() / 2;
        Some(*v.select_nth_unstable(m).1 as f64)
    };
    let mut peaks: Vec<i64> = per_lead
        .iter()
        .filter_map(|l| l.get(b).and_then(|m| m.qrs_peak))
        .map(|m| m.sample as i64)
        .collect();
    let here = med(&mut peaks)?;
    let mut offs = Vec::with_capacity(per_lead.len() * 2 * half);
    for l in per_lead {
        let lo = b.saturating_sub(half);
        let hi = (b + half + 1).min(l.len());
        for (j, bm) in l.iter().enumerate().take(hi).skip(lo) {
            if j == b {
                continue;
            }
            if let (Some(m), Some(pk)) = (get(bm), bm.qrs_peak) {
                offs.push(m.sample as i64 - pk.sample as i64);
            }
        }
    }
    Some(here + med(&mut offs)?)
}

/// [`expected`] by sorting the `f64` values: the obvious definition (test oracle).
#[cfg(test)]
fn expected_sorted(
    per_lead: &[Vec<BeatMarks>],
    b: usize,
    half: usize,
    get: &dyn Fn(&BeatMarks) -> Option<Mark>,
) -> Option<f64> {
    let med = |mut v: Vec<f64>| -> Option<f64> {
        if v.is_empty() {
            return None;
        }
        v.sort_by(|a, b| a.total_cmp(b));
        Some(v[v.len() / 2])
    };
    let peaks: Vec<f64> = per_lead
        .iter()
        .filter_map(|l| l.get(b).and_then(|m| m.qrs_peak))
        .map(|m| m.sample as f64)
        .collect();
    let here = med(peaks)?;
    let mut offs = Vec::new();
    for l in per_lead {
        let lo = b.saturating_sub(half);
        let hi = (b + half + 1).min(l.len());
        for (j, bm) in l.iter().enumerate().take(hi).skip(lo) {
            if j == b {
                continue;
            }
            if let (Some(m), Some(pk)) = (get(bm), bm.qrs_peak) {
                offs.push(m.sample as f64 - pk.sample as f64);
            }
        }
    }
    Some(here + med(offs)?)
}

/// The most confident lead's mark (ties: the first lead).
fn best_lead(cands: &[(usize, Mark)]) -> Option<(usize, Mark)> {
    cands
        .iter()
        .copied()
        .fold(None, |acc: Option<(usize, Mark)>, (l, m)| match acc {
            Some((_, b)) if b.confidence >= m.confidence => acc,
            _ => Some((l, m)),
        })
}

/// Which wave [`tallest`] reads.
#[derive(Clone, Copy)]
enum Wave {
    P,
    T,
}

/// The peak of the lead whose wave stands tallest above its isoelectric
/// level (`LeadAnalysis::height_above_level`: the P wave above the level
/// before its onset, the T wave above the PR-segment level before the QRS
/// onset), among the leads whose peak lies above it
/// (`global_p_peak_tallest`, `global_t_peak_tallest`); with three leads or
/// more only peaks within the wave's gate (`global_p_peak_tallest_gate_ms`,
/// `global_t_peak_tallest_gate_ms`) of the leads' median peak take part.
/// `None` when no lead's peak lies above its level or the leads' signals
/// are not at hand.
fn tallest(
    peaks: &[(usize, Mark)],
    beats: &[&BeatMarks],
    leads: &[Option<&LeadAnalysis>],
    wave: Wave,
    fs: f64,
    cfg: &DelineateConfig,
) -> Option<(usize, Mark)> {
    let gate_ms = match wave {
        Wave::P => cfg.global_p_peak_tallest_gate_ms,
        Wave::T => cfg.global_t_peak_tallest_gate_ms,
    };
    let onset = |b: &BeatMarks| match wave {
        Wave::P => b.p_on,
        Wave::T => b.qrs_on,
    };
    let gate = gate_ms * fs / 1000.0;
    let height = |l: usize, m: Mark| {
        leads
            .get(l)
            .copied()
            .flatten()?
            .height_above_level(Some(m), onset(beats.get(l)?), cfg)
    };
    let median = (peaks.len() >= 3).then(|| {
        let mut v: Vec<f64> = peaks.iter().map(|(_, m)| m.sample as f64).collect();
        v.sort_by(f64::total_cmp);
        let h = v.len() / 2;
        if v.len() % 2 == 1 {
            v[h]
        } else {
            0.5 * (v[h - 1] + v[h])
        }
    });
    peaks
        .iter()
        .filter(|(_, m)| median.is_none_or(|c| (m.sample as f64 - c).abs() <= gate))
        .filter_map(|&(l, m)| {
            let h = height(l, m)?;
            (h > 0.0).then_some((h, (l, m)))
        })
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, t)| t)
}

/// `chosen` if it lies strictly between `on` and `end` (where given);
/// otherwise the candidate inside them nearest `expect` (or the most
/// confident one); otherwise `chosen` unchanged. `expect` is called only
/// when `chosen` lies outside.
fn inside_or(
    chosen: Option<(usize, Mark)>,
    cands: &[(usize, Mark)],
    on: Option<Mark>,
    end: Option<Mark>,
    expect: &dyn Fn() -> Option<f64>,
) -> Option<(usize, Mark)> {
    let inside = |m: &Mark| {
        on.is_none_or(|o| m.sample > o.sample) && end.is_none_or(|e| m.sample < e.sample)
    };
    if chosen.is_none_or(|(_, m)| inside(&m)) {
        return chosen;
    }
    let ok: Vec<(usize, Mark)> = cands.iter().copied().filter(|(_, m)| inside(m)).collect();
    let pick = match expect() {
        Some(e) => ok.iter().copied().min_by(|a, b| {
            (a.1.sample as f64 - e)
                .abs()
                .total_cmp(&(b.1.sample as f64 - e).abs())
        }),
        None => best_lead(&ok),
    };
    pick.or(chosen)
}

/// QRS onset and end of beat `b` on the multi-lead envelope
/// E(n) = sqrt(sum over leads of W_k(n)^2), k = `global_env_qrs_scale`
/// (input samples): the first and
/// last analysis samples around the beat's QRS peak (median over leads)
/// where E reaches `global_env_qrs_on_frac` / `global_env_qrs_end_frac` of
/// its largest value between `qrs_pre_ms` before and `qrs_post_ms` after the
/// peak. Spatial-velocity style: one lead's slow terminal slope that the
/// other leads do not share adds little to E, while a QRS lobe that only one
/// lead shows still raises it.
fn envelope_qrs(
    leads: &[Option<&LeadAnalysis>],
    per_lead: &[Vec<BeatMarks>],
    b: usize,
    cfg: &DelineateConfig,
) -> (Option<f64>, Option<f64>) {
    let ws: Vec<&[f64]> = leads
        .iter()
        .flatten()
        .map(|l| l.w_k(cfg.global_env_qrs_scale))
        .collect();
    let Some(ratio) = leads.iter().flatten().map(|l| l.ratio()).next() else {
        return (None, None);
    };
    let n = ws.iter().map(|w| w.len()).min().unwrap_or(0);
    let mut peaks: Vec<usize> = per_lead
        .iter()
        .filter_map(|l| l.get(b).and_then(|m| m.qrs_peak))
        .map(|m| m.sample)
        .collect();
    if peaks.is_empty() || n < 3 {
        return (None, None);
    }
    let mid = peaks.len() / 2;
    let pk = *peaks.select_nth_unstable(mid).1 as f64 / ratio;
    let fs_a = cfg.analysis_fs_hz;
    let lo = (pk - cfg.qrs_pre_ms * fs_a / 1000.0).round().max(0.0) as usize;
    // A lead whose complex went on past `qrs_post_ms` (wide complexes, see
    // `qrs_post_wide_ms`) widens the envelope's window the same way.
    let post_std = pk + cfg.qrs_post_ms * fs_a / 1000.0;
    let wide = per_lead
        .iter()
        .filter_map(|l| l.get(b).and_then(|m| m.qrs_end))
        .any(|m| m.sample as f64 / ratio > post_std);
    let post = if wide {
        cfg.qrs_post_ms.max(cfg.qrs_post_wide_ms)
    } else {
        cfg.qrs_post_ms
    };
    let hi = ((pk + post * fs_a / 1000.0).round() as usize).min(n - 1);
    let pk = (pk.round() as usize).min(n - 1);
    if hi <= lo {
        return (None, None);
    }
    let e: Vec<f64> = (lo..=hi)
        .map(|i| ws.iter().map(|w| w[i] * w[i]).sum::<f64>().sqrt())
        .collect();
    let emax = e.iter().copied().fold(0.0, f64::max);
    if emax <= 0.0 {
        return (None, None);
    }
    let k = pk.clamp(lo, hi) - lo;
    let on_thr = cfg.global_env_qrs_on_frac * emax;
    let end_thr = cfg.global_env_qrs_end_frac * emax;
    let on = e[..=k].iter().position(|&v| v >= on_thr);
    let end = e[k..].iter().rposition(|&v| v >= end_thr).map(|j| j + k);
    let to_in = |i: usize| (lo + i) as f64 * ratio;
    (on.map(to_in), end.map(to_in))
}

/// `cands` without the marks beyond `limit` (after it for `Pick::Latest`,
/// before it for `Pick::Earliest`) when a usable mark within it remains.
fn within_slack(
    cands: Vec<Mark>,
    limit: Option<f64>,
    pick: Pick,
    cfg: &DelineateConfig,
) -> Vec<Mark> {
    let Some(limit) = limit else { return cands };
    let ok = |m: &Mark| match pick {
        Pick::Latest => m.sample as f64 <= limit,
        Pick::Earliest => m.sample as f64 >= limit,
    };
    let usable = |m: &Mark| m.confidence as f64 >= cfg.global_min_confidence;
    if cands.iter().any(|m| ok(m) && usable(m)) {
        cands.into_iter().filter(ok).collect()
    } else {
        cands
    }
}

pub(crate) fn combine(
    per_lead: &[Vec<BeatMarks>],
    leads: &[Option<&LeadAnalysis>],
    n_beats: usize,
    fs: f64,
    cfg: &DelineateConfig,
) -> Vec<BeatMarks> {
    let outlier = cfg.global_outlier_ms * fs / 1000.0;
    let outlier_qrs = if cfg.global_outlier_qrs_ms > 0.0 {
        cfg.global_outlier_qrs_ms * fs / 1000.0
    } else {
        outlier
    };
    let upright_bonus = cfg.global_t_upright_bonus_ms * fs / 1000.0;
    let slack = cfg.global_env_qrs_end_slack_ms * fs / 1000.0;
    let early = cfg.global_env_qrs_end_early_ms * fs / 1000.0;
    let use_env = slack > 0.0
        || early > 0.0
        || cfg.global_pair_qrs_on == PairRule::Envelope
        || cfg.global_pair_qrs_end == PairRule::Envelope;
    // P boundaries have their own confidence floor.
    let cfg_p = DelineateConfig {
        global_min_confidence: cfg.global_min_confidence_p,
        ..cfg.clone()
    };
    let mut g: Vec<BeatMarks> = (0..n_beats)
        .map(|b| {
            let beats: Vec<&BeatMarks> = per_lead.iter().filter_map(|l| l.get(b)).collect();
            let gather = |f: &dyn Fn(&BeatMarks) -> Option<Mark>| -> Vec<Mark> {
                beats.iter().filter_map(|bm| f(bm)).collect()
            };
            let gather_l = |f: &dyn Fn(&BeatMarks) -> Option<Mark>| -> Vec<(usize, Mark)> {
                beats
                    .iter()
                    .enumerate()
                    .filter_map(|(l, bm)| f(bm).map(|m| (l, m)))
                    .collect()
            };
            let exp = |get: &dyn Fn(&BeatMarks) -> Option<Mark>, rule: PairRule| {
                if rule == PairRule::Consistent {
                    expected(per_lead, b, cfg.global_context_beats, get)
                } else {
                    None
                }
            };
            let mut g = BeatMarks {
                t_end_method: cfg.t_end_method,
                ..Default::default()
            };
            let (env_on, env_end) = if use_env {
                envelope_qrs(leads, per_lead, b, cfg)
            } else {
                (None, None)
            };
            let exp_qrs = |get: &dyn Fn(&BeatMarks) -> Option<Mark>, rule, env: Option<f64>| {
                if rule == PairRule::Envelope {
                    env
                } else {
                    exp(get, rule)
                }
            };
            let slack_end = (slack > 0.0)
                .then_some(env_end.map(|e| e + slack))
                .flatten();
            g.qrs_on = extreme(
                &gather(&|m| m.qrs_on),
                Pick::Earliest,
                outlier_qrs,
                cfg.global_pair_qrs_on,
                &|| exp_qrs(&|m| m.qrs_on, cfg.global_pair_qrs_on, env_on),
                cfg,
            );
            g.qrs_end = extreme(
                &within_slack(gather(&|m| m.qrs_end), slack_end, Pick::Latest, cfg),
                Pick::Latest,
                outlier_qrs,
                cfg.global_pair_qrs_end,
                &|| exp_qrs(&|m| m.qrs_end, cfg.global_pair_qrs_end, env_end),
                cfg,
            );
            if let (Some(q), Some(e)) = (g.qrs_end, env_end) {
                if early > 0.0 && e - q.sample as f64 > early {
                    g.qrs_end = Some(Mark {
                        sample: e.round() as usize,
                        confidence: q.confidence,
                    });
                }
            }
            g.p_on = extreme(
                &gather(&|m| m.p_on),
                Pick::Earliest,
                outlier,
                cfg.global_pair_p,
                &|| exp(&|m| m.p_on, cfg.global_pair_p),
                &cfg_p,
            );
            g.p_end = extreme(
                &gather(&|m| m.p_end),
                Pick::Latest,
                outlier,
                cfg.global_pair_p,
                &|| exp(&|m| m.p_end, cfg.global_pair_p),
                &cfg_p,
            );
            g.t_on = extreme(
                &gather(&|m| m.t_on),
                Pick::Earliest,
                outlier,
                cfg.global_pair_t,
                &|| exp(&|m| m.t_on, cfg.global_pair_t),
                cfg,
            );
            // T ends: an upright T is preferred over an inverted or biphasic
            // one when two leads disagree (`global_t_upright_bonus_ms`).
            let t_end_of = |get: &dyn Fn(&BeatMarks) -> Option<Mark>| {
                let (marks, upright): (Vec<Mark>, Vec<bool>) = beats
                    .iter()
                    .filter_map(|bm| get(bm).map(|m| (m, bm.t_morphology == TMorphology::Upright)))
                    .unzip();
                extreme_pref(
                    &marks,
                    &upright,
                    Pick::Latest,
                    outlier,
                    cfg.global_pair_t,
                    &|| exp(get, cfg.global_pair_t),
                    upright_bonus,
                    cfg,
                )
            };
            g.t_end_wavelet = t_end_of(&|m| m.t_end_wavelet);
            g.t_end_tangent = t_end_of(&|m| m.t_end_tangent);
            g.t_end_area = t_end_of(&|m| m.t_end_area);
            g.t_end = g.t_end_by_method();
            let t_peaks = gather_l(&|m| m.t_peak);
            // With the consistency rule, the T peak comes from the lead whose
            // peak lies nearest the neighbouring beats' pattern.
            // (The expected place is only worked out when there is a choice.)
            let t_expect = if t_peaks.len() >= 2 {
                exp(&|m| m.t_peak, cfg.global_pair_t)
            } else {
                None
            };
            // The tallest upright T, when one is (`global_t_peak_tallest`).
            let t_tallest = if cfg.global_t_peak_tallest && t_peaks.len() >= 2 {
                tallest(&t_peaks, &beats, leads, Wave::T, fs, cfg)
            } else {
                None
            };
            let t_peak_lead = match (t_tallest, t_expect) {
                (Some(t), _) => Some(t),
                (None, Some(e)) => t_peaks.iter().copied().min_by(|a, b| {
                    (a.1.sample as f64 - e)
                        .abs()
                        .total_cmp(&(b.1.sample as f64 - e).abs())
                }),
                (None, None) => best_lead(&t_peaks),
            };
            // Boundaries and peak come from possibly different leads; a peak
            // outside its own boundaries (a lead that took another wave) is
            // replaced by the nearest-to-expected peak that lies inside them,
            // so the written wave stays `(` peak `)`.
            let t_peak_lead = inside_or(t_peak_lead, &t_peaks, g.t_on, g.t_end, &|| {
                exp(&|m| m.t_peak, cfg.global_pair_t)
            });
            if let Some((l, m)) = t_peak_lead {
                g.t_peak = Some(m);
                g.t_morphology = beats[l].t_morphology;
                // A T wave reported present keeps an end: when no lead's end
                // clears the confidence floor, the peak's own lead gives it,
                // with its low confidence (`global_t_end_from_peak_lead`).
                if cfg.global_t_end_from_peak_lead {
                    let after = |e: Option<Mark>| e.filter(|e| e.sample > m.sample);
                    let own = beats[l];
                    g.t_end_wavelet = g.t_end_wavelet.or(after(own.t_end_wavelet));
                    g.t_end_tangent = g.t_end_tangent.or(after(own.t_end_tangent));
                    g.t_end_area = g.t_end_area.or(after(own.t_end_area));
                    g.t_end = g.t_end_by_method();
                }
            } else if let Some((l, _)) = best_lead(&gather_l(&|m| m.t_end)) {
                g.t_morphology = beats[l].t_morphology;
            }
            let p_peaks = gather_l(&|m| m.p_peak);
            let p_tallest = if cfg.global_p_peak_tallest && p_peaks.len() >= 2 {
                tallest(&p_peaks, &beats, leads, Wave::P, fs, cfg)
            } else {
                None
            };
            g.p_peak = inside_or(
                p_tallest.or_else(|| best_lead(&p_peaks)),
                &p_peaks,
                g.p_on,
                g.p_end,
                &|| None,
            )
            .map(|x| x.1);
            let q_peaks = gather_l(&|m| m.qrs_peak);
            g.qrs_peak = inside_or(best_lead(&q_peaks), &q_peaks, g.qrs_on, g.qrs_end, &|| None)
                .map(|x| x.1);
            g
        })
        .collect();
    separate_p_from_previous_t(&mut g, per_lead, &cfg_p);
    separate_t_from_qrs(&mut g, per_lead, cfg);
    g
}

/// A peak outside `lo..=hi` (false when any of the three is missing).
fn outside(peak: Option<Mark>, lo: Option<Mark>, hi: Option<Mark>) -> bool {
    match (peak, lo, hi) {
        (Some(pk), Some(lo), Some(hi)) => pk.sample < lo.sample || pk.sample > hi.sample,
        _ => false,
    }
}

/// The lead's P peak lies outside the global P span (onset to end).
pub(crate) fn p_outside(b: &BeatMarks, g: &BeatMarks) -> bool {
    outside(b.p_peak, g.p_on, g.p_end)
}

/// The lead's T peak lies outside the global T span (global T onset, or the
/// QRS end without one, to the global T end).
pub(crate) fn t_outside(b: &BeatMarks, g: &BeatMarks) -> bool {
    outside(b.t_peak, g.t_on.or(g.qrs_end), g.t_end)
}

/// Drops the P wave (`p`) and the T wave (`t`) of a lead whose peak lies
/// outside the global span of that wave (P: global P onset to P end; T:
/// global T onset, or the QRS end without one, to the T end): the leads agree
/// on where the beat's one atrial depolarisation (P) or ventricular
/// repolarisation (T) wave is, and a lead peak outside it is another
/// deflection (noise, a U wave, the P of the next beat). Returns whether any
/// wave was dropped.
pub(crate) fn drop_waves_outside_global(
    per_lead: &mut [Vec<BeatMarks>],
    global: &[BeatMarks],
    p: bool,
    t: bool,
) -> bool {
    let mut any = false;
    for lead in per_lead.iter_mut() {
        for (b, g) in lead.iter_mut().zip(global) {
            if p && p_outside(b, g) {
                b.p_on = None;
                b.p_peak = None;
                b.p_end = None;
                any = true;
            }
            if t && t_outside(b, g) {
                b.t_on = None;
                b.t_peak = None;
                b.t_end = None;
                b.t_end_wavelet = None;
                b.t_end_tangent = None;
                b.t_end_area = None;
                b.t_morphology = TMorphology::Absent;
                any = true;
            }
        }
    }
    any
}

/// Keeps each lead's boundaries within the global span of their wave
/// (`lead_marks_within_global`): an onset before the global onset, or an end
/// after the global end, is moved onto the global mark (taking its
/// confidence). A move that would put the boundary on the wrong side of the
/// lead's own peak is not made: that lead has marked another wave.
pub(crate) fn clip_leads_to_global(per_lead: &mut [Vec<BeatMarks>], global: &[BeatMarks]) {
    fn onset(m: &mut Option<Mark>, g: Option<Mark>, peak: Option<Mark>) {
        if let (Some(lm), Some(gm)) = (*m, g) {
            if lm.sample < gm.sample && peak.is_none_or(|p| gm.sample < p.sample) {
                *m = Some(gm);
            }
        }
    }
    fn end(m: &mut Option<Mark>, g: Option<Mark>, peak: Option<Mark>) {
        if let (Some(lm), Some(gm)) = (*m, g) {
            if lm.sample > gm.sample && peak.is_none_or(|p| gm.sample > p.sample) {
                *m = Some(gm);
            }
        }
    }
    for lead in per_lead.iter_mut() {
        for (b, g) in lead.iter_mut().zip(global) {
            onset(&mut b.p_on, g.p_on, b.p_peak);
            end(&mut b.p_end, g.p_end, b.p_peak);
            onset(&mut b.qrs_on, g.qrs_on, b.qrs_peak);
            end(&mut b.qrs_end, g.qrs_end, b.qrs_peak);
            onset(&mut b.t_on, g.t_on, b.t_peak);
            end(&mut b.t_end_wavelet, g.t_end_wavelet, b.t_peak);
            end(&mut b.t_end_tangent, g.t_end_tangent, b.t_peak);
            end(&mut b.t_end_area, g.t_end_area, b.t_peak);
            b.t_end = b.t_end_by_method();
        }
    }
}

/// The T wave starts after the QRS complex ends (common practice: ST
/// segment). The earliest lead T onset can fall before the latest lead QRS
/// end (wide or paced complexes), which would interleave the two waves in
/// the written annotations and hide the QRS end from a reader (QTDB sel102,
/// sel38). Such a T onset is replaced by the earliest usable lead onset
/// after that QRS end and before the T peak, or dropped.
fn separate_t_from_qrs(g: &mut [BeatMarks], per_lead: &[Vec<BeatMarks>], cfg: &DelineateConfig) {
    for (i, b) in g.iter_mut().enumerate() {
        let (Some(qe), Some(to)) = (b.qrs_end, b.t_on) else {
            continue;
        };
        if to.sample > qe.sample {
            continue;
        }
        let before_peak = |m: &Mark| b.t_peak.is_none_or(|p| m.sample < p.sample);
        b.t_on = per_lead
            .iter()
            .filter_map(|l| l.get(i).and_then(|x| x.t_on))
            .filter(|m| {
                m.sample > qe.sample
                    && before_peak(m)
                    && m.confidence as f64 >= cfg.global_min_confidence
            })
            .min_by_key(|m| m.sample);
    }
}

/// A P wave starts after the previous beat's T wave has ended and ends
/// before its QRS starts (common practice: TP and PR segments). Leads are combined independently, so the
/// earliest lead P onset can fall before the latest lead T end of the beat
/// before, which would also interleave the two waves in the written
/// annotations. Such a P onset is replaced by the earliest usable lead onset
/// after that T end, or else put one sample after it; a P end at or after
/// the QRS onset likewise.
fn separate_p_from_previous_t(
    g: &mut [BeatMarks],
    per_lead: &[Vec<BeatMarks>],
    cfg: &DelineateConfig,
) {
    for i in 1..g.len() {
        let (Some(te), Some(po)) = (g[i - 1].t_end, g[i].p_on) else {
            continue;
        };
        if po.sample > te.sample {
            continue;
        }
        let later = per_lead
            .iter()
            .filter_map(|l| l.get(i).and_then(|b| b.p_on))
            .filter(|m| m.sample > te.sample && m.confidence as f64 >= cfg.global_min_confidence)
            .min_by_key(|m| m.sample);
        let on = later.unwrap_or(Mark {
            sample: te.sample + 1,
            confidence: po.confidence * 0.5,
        });
        let peak_ok = g[i].p_peak.is_none_or(|p| p.sample > on.sample);
        let end_ok = g[i].p_end.is_none_or(|e| e.sample > on.sample);
        if peak_ok && end_ok {
            g[i].p_on = Some(on);
        } else {
            g[i].p_on = None;
        }
    }
    // Same within a beat: the P ends before the QRS starts.
    for (i, b) in g.iter_mut().enumerate() {
        let (Some(qo), Some(pe)) = (b.qrs_on, b.p_end) else {
            continue;
        };
        if pe.sample < qo.sample {
            continue;
        }
        let earlier = per_lead
            .iter()
            .filter_map(|l| l.get(i).and_then(|b| b.p_end))
            .filter(|m| m.sample < qo.sample && m.confidence as f64 >= cfg.global_min_confidence)
            .max_by_key(|m| m.sample);
        let end = earlier.or((qo.sample > 0).then(|| Mark {
            sample: qo.sample - 1,
            confidence: pe.confidence * 0.5,
        }));
        b.p_end = end.filter(|e| b.p_peak.is_none_or(|p| p.sample < e.sample));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn m(sample: usize, confidence: f32) -> Mark {
        Mark { sample, confidence }
    }

    #[test]
    fn single_outlying_lead_is_rejected_for_earliest_and_latest() {
        let cfg = DelineateConfig::default();
        // Three leads agree near 100, one is 30 samples early: dropped.
        let c = [m(100, 0.9), m(102, 0.9), m(70, 0.9), m(101, 0.9)];
        assert_eq!(
            extreme(
                &c,
                Pick::Earliest,
                10.0,
                PairRule::Confident,
                &|| None,
                &cfg
            )
            .unwrap()
            .sample,
            100
        );
        // Without the outlier the earliest is kept as is.
        let c = [m(100, 0.9), m(102, 0.9), m(95, 0.9)];
        assert_eq!(
            extreme(
                &c,
                Pick::Earliest,
                10.0,
                PairRule::Confident,
                &|| None,
                &cfg
            )
            .unwrap()
            .sample,
            95
        );
        // Latest: one late outlier is dropped, but only one.
        let c = [m(200, 0.9), m(204, 0.9), m(260, 0.9), m(203, 0.9)];
        assert_eq!(
            extreme(&c, Pick::Latest, 10.0, PairRule::Confident, &|| None, &cfg)
                .unwrap()
                .sample,
            204
        );
        // Two leads far apart: the more confident one wins.
        let c = [m(200, 0.3), m(260, 0.8)];
        assert_eq!(
            extreme(
                &c,
                Pick::Earliest,
                10.0,
                PairRule::Confident,
                &|| None,
                &cfg
            )
            .unwrap()
            .sample,
            260
        );
        // Low-confidence marks are not used.
        assert!(extreme(
            &[m(5, 0.01)],
            Pick::Earliest,
            10.0,
            PairRule::Confident,
            &|| None,
            &cfg
        )
        .is_none());
    }

    // The expected place (a median over neighbouring beats) is worked out
    // only where the consistency rule has to choose between two leads, and
    // the choice is the one an expectation given up front makes.
    #[test]
    fn expected_place_is_asked_for_only_when_two_leads_disagree() {
        let cfg = DelineateConfig::default();
        let calls = std::cell::Cell::new(0);
        let expect = || {
            calls.set(calls.get() + 1);
            Some(250.0)
        };
        let run = |c: &[Mark]| extreme(c, Pick::Latest, 10.0, PairRule::Consistent, &expect, &cfg);
        // Agreeing pair, single lead, three leads: not asked.
        run(&[m(200, 0.9), m(205, 0.5)]);
        run(&[m(200, 0.9)]);
        run(&[m(200, 0.9), m(260, 0.5), m(203, 0.7)]);
        assert_eq!(calls.get(), 0);
        // Disagreeing pair: asked once, same pick as with the value given.
        let lazy = run(&[m(200, 0.9), m(260, 0.5)]);
        assert_eq!(calls.get(), 1);
        let given = extreme(
            &[m(200, 0.9), m(260, 0.5)],
            Pick::Latest,
            10.0,
            PairRule::Consistent,
            &|| Some(250.0),
            &cfg,
        );
        assert_eq!(lazy, given);
        assert_eq!(lazy.unwrap().sample, 260);
    }

    #[test]
    fn two_disagreeing_leads_follow_the_pair_rule() {
        let cfg = DelineateConfig::default();
        let c = [m(200, 0.9), m(260, 0.5)];
        let pick = |rule, expect| {
            extreme(&c, Pick::Latest, 10.0, rule, &|| expect, &cfg)
                .unwrap()
                .sample
        };
        assert_eq!(pick(PairRule::Confident, None), 200);
        assert_eq!(pick(PairRule::Outer, None), 260);
        assert_eq!(pick(PairRule::Inner, None), 200);
        // Consistent: the mark nearer the expected place, whatever the
        // confidence; without an expectation it falls back to confidence.
        assert_eq!(pick(PairRule::Consistent, Some(250.0)), 260);
        assert_eq!(pick(PairRule::Consistent, Some(205.0)), 200);
        assert_eq!(pick(PairRule::Consistent, None), 200);
    }

    #[test]
    fn upright_t_end_gets_the_bonus_in_a_disagreeing_pair() {
        let cfg = DelineateConfig::default();
        // Two T ends 60 samples apart; the neighbouring beats expect 225:
        // 25 samples from the first lead's mark (200), 35 from the second's.
        let c = [m(200, 0.9), m(260, 0.5)];
        let pick = |pref: &[bool], bonus: f64| {
            extreme_pref(
                &c,
                pref,
                Pick::Latest,
                10.0,
                PairRule::Consistent,
                &|| Some(225.0),
                bonus,
                &cfg,
            )
            .unwrap()
            .sample
        };
        // Without a preference or a bonus the nearer mark wins.
        assert_eq!(pick(&[], 20.0), 200);
        assert_eq!(pick(&[false, true], 0.0), 200);
        // Upright second lead: 35 - 20 < 25 wins; 35 - 5 > 25 does not.
        assert_eq!(pick(&[false, true], 20.0), 260);
        assert_eq!(pick(&[false, true], 5.0), 200);
        // Both upright: no credit.
        assert_eq!(pick(&[true, true], 50.0), 200);
        // The credit goes only to the preferred lead.
        assert_eq!(pick(&[true, false], 50.0), 200);
    }

    #[test]
    fn t_peak_without_a_confident_end_takes_its_own_leads_end() {
        // Two leads with a T peak and wavelet T end, both ends below the
        // confidence floor (0.2). Lead 1's peak is the more confident one
        // and is taken; its end follows it, with its own low confidence.
        let lead = |pk: (usize, f32), te: usize| BeatMarks {
            qrs_peak: Some(m(100, 0.9)),
            t_peak: Some(m(pk.0, pk.1)),
            t_end_wavelet: Some(m(te, 0.1)),
            t_end: Some(m(te, 0.1)),
            ..Default::default()
        };
        let per_lead = vec![vec![lead((200, 0.1), 230)], vec![lead((205, 0.15), 240)]];
        let on = DelineateConfig::default();
        let g = combine(&per_lead, &[], 1, 250.0, &on)[0].clone();
        let (p, e) = (g.t_peak.unwrap(), g.t_end.unwrap());
        assert_eq!((p.sample, e.sample), (205, 240));
        assert_eq!(g.t_end_wavelet, g.t_end);
        assert!(e.confidence < 0.2);
        // Off: the end is left out, as the floor says.
        let off = DelineateConfig {
            global_t_end_from_peak_lead: false,
            ..on
        };
        let g = combine(&per_lead, &[], 1, 250.0, &off)[0].clone();
        assert!(g.t_peak.is_some() && g.t_end.is_none());
        // An end of the peak's lead that lies before the peak is not taken.
        let per_lead = vec![vec![lead((200, 0.1), 190)]];
        let g = combine(&per_lead, &[], 1, 250.0, &DelineateConfig::default())[0].clone();
        assert!(g.t_peak.is_some() && g.t_end.is_none());
    }

    #[test]
    fn up_to_a_quarter_of_the_leads_may_be_dropped_as_outliers() {
        // Twelve leads: nine agree on an end near 250, three (noise) lie
        // 30-50 samples later, each beyond the 10-sample limit from the
        // median of the leads left.
        let mut c: Vec<Mark> = (0..9).map(|i| m(245 + i, 0.9)).collect();
        c.extend([m(300, 0.9), m(290, 0.9), m(280, 0.9)]);
        let latest = |frac: f64| {
            let cfg = DelineateConfig {
                global_outlier_max_frac: frac,
                ..DelineateConfig::default()
            };
            extreme(&c, Pick::Latest, 10.0, PairRule::Confident, &|| None, &cfg)
                .unwrap()
                .sample
        };
        // 0.25 of 12 = 3: all three go, the latest of the nine is taken.
        assert_eq!(latest(0.25), 253);
        // 0.2 of 12 = 2 (rounded down): the third outlier stays.
        assert_eq!(latest(0.2), 280);
        // 0: at least one lead is still dropped (the one-lead rule).
        assert_eq!(latest(0.0), 290);
        // Never more than the outliers: a lead within the limit is kept.
        let tight: Vec<Mark> = (0..12).map(|i| m(245 + i, 0.9)).collect();
        let cfg = DelineateConfig::default();
        let e = extreme(
            &tight,
            Pick::Latest,
            10.0,
            PairRule::Confident,
            &|| None,
            &cfg,
        );
        assert_eq!(e.unwrap().sample, 256);
    }

    #[test]
    fn lead_waves_with_a_peak_outside_the_global_span_are_dropped() {
        let wave = |p: usize, t: usize| BeatMarks {
            p_on: Some(m(p - 10, 0.9)),
            p_peak: Some(m(p, 0.9)),
            p_end: Some(m(p + 10, 0.9)),
            qrs_end: Some(m(130, 0.9)),
            t_peak: Some(m(t, 0.9)),
            t_end: Some(m(t + 30, 0.9)),
            t_end_wavelet: Some(m(t + 30, 0.9)),
            t_morphology: TMorphology::Upright,
            ..Default::default()
        };
        // Global P 40..60, T from the QRS end (130, no T onset) to 250.
        let g = vec![BeatMarks {
            p_on: Some(m(40, 0.9)),
            p_end: Some(m(60, 0.9)),
            qrs_end: Some(m(130, 0.9)),
            t_end: Some(m(250, 0.9)),
            ..Default::default()
        }];
        // Lead 0 agrees; lead 1's P peak (80) and T peak (270) lie outside.
        let mut per_lead = vec![vec![wave(50, 220)], vec![wave(80, 270)]];
        let before = per_lead.clone();
        // P only (the default): lead 1 loses its P wave and keeps its T.
        assert!(drop_waves_outside_global(&mut per_lead, &g, true, false));
        assert_eq!(per_lead[0], before[0]);
        let b = &per_lead[1][0];
        assert!(b.p_on.is_none() && b.p_peak.is_none() && b.p_end.is_none());
        assert_eq!(b.t_peak, before[1][0].t_peak);
        // With T as well: lead 1's T goes too, with its morphology.
        assert!(drop_waves_outside_global(&mut per_lead, &g, true, true));
        let b = &per_lead[1][0];
        assert!(b.t_peak.is_none() && b.t_end.is_none() && b.t_end_wavelet.is_none());
        assert_eq!(b.t_morphology, TMorphology::Absent);
        // Nothing outside: nothing changes and nothing is reported.
        let mut ok = vec![vec![wave(50, 220)]];
        assert!(!drop_waves_outside_global(&mut ok, &g, true, true));
        // No global span: no judgement.
        let mut alone = vec![vec![wave(80, 270)]];
        assert!(!drop_waves_outside_global(
            &mut alone,
            &[BeatMarks::default()],
            true,
            true
        ));
    }

    #[test]
    fn lead_boundaries_beyond_the_global_span_are_moved_onto_it() {
        let cfg = DelineateConfig::default();
        // Three leads agree on a QRS from 90 to 130 and a T ending at 250;
        // lead 3 (noise) puts the QRS from 80 to 160 and its T end at 290.
        // 30-40 samples at 250 Hz is beyond the 40 ms outlier limit, so the
        // global marks follow the three.
        let lead = |on: usize, end: usize, te: usize| BeatMarks {
            qrs_on: Some(m(on, 0.9)),
            qrs_peak: Some(m(110, 0.9)),
            qrs_end: Some(m(end, 0.9)),
            t_peak: Some(m(220, 0.9)),
            t_end_wavelet: Some(m(te, 0.9)),
            t_end_tangent: Some(m(te - 5, 0.9)),
            t_end: Some(m(te, 0.9)),
            ..Default::default()
        };
        let mut per_lead = vec![
            vec![lead(90, 130, 250)],
            vec![lead(91, 128, 248)],
            vec![lead(92, 129, 249)],
            vec![lead(80, 160, 290)],
        ];
        let g = combine(&per_lead, &[], 1, 250.0, &cfg);
        let (gon, gend) = (g[0].qrs_on.unwrap(), g[0].qrs_end.unwrap());
        let gte = g[0].t_end.unwrap();
        assert_eq!((gon.sample, gend.sample, gte.sample), (90, 130, 250));
        let before = per_lead.clone();
        clip_leads_to_global(&mut per_lead, &g);
        // The three agreeing leads lie inside the span and keep their marks.
        assert_eq!(per_lead[..3], before[..3]);
        let b = &per_lead[3][0];
        assert_eq!(b.qrs_on, Some(gon));
        assert_eq!(b.qrs_end, Some(gend));
        assert_eq!(b.t_end, Some(gte));
        assert_eq!(b.t_end_wavelet, Some(gte));
        // Each T-end method is held to its own global end (tangent: 245).
        assert_eq!(b.t_end_tangent, g[0].t_end_tangent);
        assert_eq!(b.t_end_tangent.unwrap().sample, 245);

        // A global end before the lead's own peak is not imposed: that lead
        // took another wave, and moving its end would put it before its peak.
        let mut odd = vec![vec![BeatMarks {
            t_peak: Some(m(300, 0.9)),
            t_end: Some(m(330, 0.9)),
            t_end_wavelet: Some(m(330, 0.9)),
            ..Default::default()
        }]];
        let kept = odd.clone();
        clip_leads_to_global(&mut odd, &g);
        assert_eq!(odd, kept);
        // No global mark: nothing to hold the lead to.
        let mut alone = before.clone();
        clip_leads_to_global(&mut alone, &[BeatMarks::default()]);
        assert_eq!(alone, before);
    }

    #[test]
    fn t_onset_before_the_qrs_end_is_moved_after_it() {
        let cfg = DelineateConfig::default();
        // Lead 0: narrow QRS ending at 110, T from 115; lead 1: wide QRS
        // ending at 130, T from 140. Earliest T on (115) precedes the latest
        // QRS end (130): the T onset of lead 1 is taken instead.
        let lead = |qe: usize, to: usize| BeatMarks {
            qrs_peak: Some(m(100, 0.9)),
            qrs_end: Some(m(qe, 0.9)),
            t_on: Some(m(to, 0.9)),
            t_peak: Some(m(200, 0.9)),
            ..Default::default()
        };
        let per_lead = vec![vec![lead(110, 115)], vec![lead(130, 140)]];
        let g = combine(&per_lead, &[], 1, 250.0, &cfg);
        assert_eq!(g[0].qrs_end.unwrap().sample, 130);
        assert_eq!(g[0].t_on.unwrap().sample, 140);
        // No lead onset after the QRS end: no global T onset.
        let per_lead = vec![vec![lead(110, 115)], vec![lead(130, 120)]];
        let g = combine(&per_lead, &[], 1, 250.0, &cfg);
        assert!(g[0].t_on.is_none());
    }

    fn beat(qrs_peak: usize, t_end: usize) -> BeatMarks {
        BeatMarks {
            qrs_peak: Some(m(qrs_peak, 0.9)),
            t_end: Some(m(t_end, 0.9)),
            ..Default::default()
        }
    }

    #[test]
    fn expected_position_is_the_neighbours_median_offset() {
        // Slow oracle by hand: neighbours of beat 2 have T-end offsets
        // 100, 102, 98, 300 (one outlier); median of the sorted
        // [98, 100, 102, 300] at index 2 is 102; beat 2's QRS peak is 1000.
        let lead = vec![
            beat(0, 100),
            beat(500, 602),
            beat(1000, 1400),
            beat(1500, 1598),
            beat(2000, 2300),
        ];
        let e = expected(&[lead], 2, 8, &|b| b.t_end).unwrap();
        assert_eq!(e, 1102.0);
    }

    // Integer selection against the sorted-f64 definition (oracle), bit for
    // bit, over three leads of pseudo-random marks with gaps, every beat and
    // several context widths (odd and even counts of neighbours).
    #[test]
    fn expected_by_selection_equals_sorted_definition() {
        let mut s = 0x2545_f491_4f6c_dd1du64;
        let mut next = |m: u64| {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            s % m
        };
        let leads: Vec<Vec<BeatMarks>> = (0..3)
            .map(|_| {
                (0..40)
                    .map(|i| {
                        let pk = 500 * i + next(20) as usize;
                        let mut b = beat(pk, pk + 250 + next(60) as usize);
                        if next(7) == 0 {
                            b.t_end = None;
                        }
                        if next(11) == 0 {
                            b.qrs_peak = None;
                        }
                        b
                    })
                    .collect()
            })
            .collect();
        for half in [1usize, 2, 5, 8, 50] {
            for b in 0..42 {
                let fast = expected(&leads, b, half, &|m| m.t_end);
                let slow = expected_sorted(&leads, b, half, &|m| m.t_end);
                assert_eq!(
                    fast.map(f64::to_bits),
                    slow.map(f64::to_bits),
                    "b={b} half={half}"
                );
            }
        }
    }

    /// Two leads with a smooth QRS-like bump (Gaussian, sigma 10 ms) at
    /// sample 500 of 1000 at 250 Hz; lead 1 has an extra later lobe at
    /// `late` samples after the peak (0 = none).
    fn bump_leads(late: usize) -> Vec<Vec<f64>> {
        let g = |i: usize, c: usize, a: f64| {
            let t = (i as f64 - c as f64) / 2.5;
            a * (-0.5 * t * t).exp()
        };
        let l0: Vec<f64> = (0..1000).map(|i| g(i, 500, 1.0)).collect();
        let l1: Vec<f64> = (0..1000)
            .map(|i| {
                g(i, 500, 0.8)
                    + if late > 0 {
                        g(i, 500 + late, -0.6)
                    } else {
                        0.0
                    }
            })
            .collect();
        vec![l0, l1]
    }

    fn qrs_beat(peak: usize, on: usize, end: usize) -> BeatMarks {
        BeatMarks {
            qrs_peak: Some(m(peak, 0.9)),
            qrs_on: Some(m(on, 0.9)),
            qrs_end: Some(m(end, 0.9)),
            ..Default::default()
        }
    }

    #[test]
    fn envelope_boundaries_are_symmetric_about_a_symmetric_bump_and_follow_a_late_lobe() {
        let cfg = DelineateConfig::default();
        let sig = bump_leads(0);
        let las: Vec<LeadAnalysis> = sig
            .iter()
            .map(|x| LeadAnalysis::new(x, 250.0, &cfg))
            .collect();
        let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
        let per_lead = vec![vec![qrs_beat(500, 480, 520)], vec![qrs_beat(500, 480, 520)]];
        let (on, end) = envelope_qrs(&refs, &per_lead, 0, &cfg);
        let (on, end) = (on.unwrap(), end.unwrap());
        // A Gaussian is symmetric, its derivative antisymmetric: |W_2| and
        // the envelope are symmetric about the peak up to the filters'
        // half-sample delay, so the two boundaries are too (within 2 samples).
        assert!(on < 500.0 && end > 500.0, "on {on} end {end}");
        assert!(
            ((500.0 - on) - (end - 500.0)).abs() <= 2.0,
            "on {on} end {end}"
        );
        // Inside the search window (80 ms before, 120 ms after the peak).
        assert!(on >= 480.0 && end <= 530.0, "on {on} end {end}");
        // A second lobe 40 ms later in one lead moves the end later.
        let sig = bump_leads(10);
        let las: Vec<LeadAnalysis> = sig
            .iter()
            .map(|x| LeadAnalysis::new(x, 250.0, &cfg))
            .collect();
        let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
        let (_, end_late) = envelope_qrs(&refs, &per_lead, 0, &cfg);
        assert!(end_late.unwrap() >= end + 8.0, "{end} -> {end_late:?}");
        // No leads: no referee.
        assert_eq!(envelope_qrs(&[], &per_lead, 0, &cfg), (None, None));
    }

    #[test]
    fn lead_ends_beyond_the_envelope_slack_are_dropped_while_one_remains() {
        let cfg = DelineateConfig::default();
        let c = vec![m(100, 0.9), m(130, 0.9), m(108, 0.1)];
        // Limit 110: 130 goes; 108 stays in the list (confidence is
        // judged later) but does not alone keep the filter on.
        let kept = within_slack(c.clone(), Some(110.0), Pick::Latest, &cfg);
        assert_eq!(kept, vec![m(100, 0.9), m(108, 0.1)]);
        let kept = within_slack(c.clone(), Some(105.0), Pick::Latest, &cfg);
        assert_eq!(kept, vec![m(100, 0.9)]);
        // No mark within the limit: nothing is dropped.
        let kept = within_slack(c.clone(), Some(99.0), Pick::Latest, &cfg);
        assert_eq!(kept, c);
        // Earliest: marks before the limit go.
        let kept = within_slack(c.clone(), Some(105.0), Pick::Earliest, &cfg);
        assert_eq!(kept, vec![m(130, 0.9), m(108, 0.1)]);
        // Only an unusable mark within the limit: nothing is dropped.
        let c2 = vec![m(100, 0.9), m(108, 0.1)];
        let kept = within_slack(c2.clone(), Some(105.0), Pick::Earliest, &cfg);
        assert_eq!(kept, c2);
        assert_eq!(within_slack(c.clone(), None, Pick::Latest, &cfg), c);
    }

    #[test]
    fn global_qrs_end_is_refereed_by_the_multi_lead_envelope() {
        let cfg = DelineateConfig::default();
        let sig = bump_leads(0);
        let las: Vec<LeadAnalysis> = sig
            .iter()
            .map(|x| LeadAnalysis::new(x, 250.0, &cfg))
            .collect();
        let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
        let probe = vec![vec![qrs_beat(500, 480, 520)], vec![qrs_beat(500, 480, 520)]];
        let env_end = envelope_qrs(&refs, &probe, 0, &cfg).1.unwrap();
        let e = env_end.round() as usize;
        let slack = (cfg.global_env_qrs_end_slack_ms * 250.0 / 1000.0) as usize;
        let early = (cfg.global_env_qrs_end_early_ms * 250.0 / 1000.0) as usize;
        let end_of = |a: usize, b: usize| {
            let per_lead = vec![vec![qrs_beat(500, 480, a)], vec![qrs_beat(500, 480, b)]];
            combine(&per_lead, &refs, 1, 250.0, &cfg)[0]
                .qrs_end
                .unwrap()
                .sample
        };
        // Both within the slack and closer than `global_outlier_ms`: the
        // latest, as without the referee.
        assert_eq!(end_of(e, e + 3), e + 3);
        // One lead beyond the slack: the other lead's end.
        assert_eq!(end_of(e + 1, e + slack + 2), e + 1);
        // Both beyond it: the latest is kept (no lead within the limit).
        assert_eq!(end_of(e + slack + 2, e + slack + 4), e + slack + 4);
        // Both ending well before the envelope: its end instead.
        assert_eq!(end_of(e - early - 5, e - early - 3), e);
        // Without leads to referee, the latest lead mark as before.
        let per_lead = vec![vec![qrs_beat(500, 480, 510)], vec![qrs_beat(500, 480, 530)]];
        assert_eq!(
            combine(&per_lead, &[], 1, 250.0, &cfg)[0]
                .qrs_end
                .unwrap()
                .sample,
            530
        );
    }

    /// Two leads with a T wave (Gaussian, 0.2 mV at sample 600 on lead 0 and
    /// `h1` mV at 640 on lead 1) on a baseline of `base` mV, and the lead
    /// marks read from them: T ends at 640 and 690, 200 ms apart (beyond
    /// `global_outlier_ms`).
    fn t_leads(h1: f64, base: f64) -> (Vec<Vec<f64>>, Vec<Vec<BeatMarks>>) {
        let g = |i: usize, c: usize, a: f64| {
            let t = (i as f64 - c as f64) / 12.0;
            base + a * (-0.5 * t * t).exp()
        };
        let sig = vec![
            (0..1000).map(|i| g(i, 600, 0.2)).collect(),
            (0..1000).map(|i| g(i, 640, h1)).collect(),
        ];
        let beat = |pk: usize, end: usize, conf: f32, morph| BeatMarks {
            t_peak: Some(m(pk, conf)),
            t_end: Some(m(end, conf)),
            t_end_wavelet: Some(m(end, conf)),
            t_end_tangent: Some(m(end, conf)),
            t_end_area: Some(m(end, conf)),
            t_morphology: morph,
            ..qrs_beat(500, 480, 520)
        };
        let inv = if h1 < 0.0 {
            TMorphology::Inverted
        } else {
            TMorphology::Upright
        };
        // Lead 0 is the more confident one, so the confidence rule (no
        // neighbouring beats to give an expected place) would keep it.
        let per_lead = vec![
            vec![beat(600, 640, 0.9, TMorphology::Upright)],
            vec![beat(640, 690, 0.6, inv)],
        ];
        (sig, per_lead)
    }

    #[test]
    fn height_of_the_t_peak_is_read_above_the_pr_level() {
        let cfg = DelineateConfig::default();
        let (sig, per_lead) = t_leads(0.5, 0.1);
        let la = LeadAnalysis::new(&sig[1], 250.0, &cfg);
        // Oracle: the sample at the peak minus the median of the 20 ms (5
        // samples at 250 Hz) before the QRS onset (480); the Gaussian is
        // 0 there to 1e-30, so the level is the 0.1 mV baseline.
        let b = &per_lead[1][0];
        let h = la.height_above_level(b.t_peak, b.qrs_on, &cfg).unwrap();
        assert!((h - 0.5).abs() < 1e-9, "{h}");
        assert_eq!(la.height_above_level(b.t_peak, None, &cfg), None);
        assert_eq!(la.height_above_level(None, b.qrs_on, &cfg), None);
    }

    #[test]
    fn tallest_upright_t_gives_the_global_peak() {
        let run = |h1: f64, cfg: &DelineateConfig| {
            let (sig, per_lead) = t_leads(h1, 0.1);
            let las: Vec<LeadAnalysis> = sig
                .iter()
                .map(|x| LeadAnalysis::new(x, 250.0, cfg))
                .collect();
            let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
            let g = combine(&per_lead, &refs, 1, 250.0, cfg)[0].clone();
            (g.t_peak.unwrap().sample, g.t_end.unwrap().sample)
        };
        // Of the T ends 50 samples apart the latest is kept (outer pair
        // rule) whichever lead gives the peak, so only the peak's choice is
        // seen.
        let on = DelineateConfig {
            global_pair_t: PairRule::Outer,
            ..DelineateConfig::default()
        };
        let run_neg = |cfg: &DelineateConfig| {
            let (sig, mut per_lead) = t_leads(-0.5, 0.1);
            // Lead 0 mirrored about its 0.1 mV baseline: both T waves inverted.
            let mut sig = sig;
            sig[0] = sig[0].iter().map(|v| 0.2 - v).collect();
            for l in per_lead.iter_mut() {
                l[0].t_morphology = TMorphology::Inverted;
            }
            let las: Vec<LeadAnalysis> = sig
                .iter()
                .map(|x| LeadAnalysis::new(x, 250.0, cfg))
                .collect();
            let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
            combine(&per_lead, &refs, 1, 250.0, cfg)[0]
                .t_peak
                .unwrap()
                .sample
        };
        // Lead 1's T (0.5 mV) is the taller: its peak, inside the span that
        // the T ends leave (the latest, with the outer pair rule).
        assert_eq!(run(0.5, &on), (640, 690));
        // Lead 1 lower (0.1 mV): lead 0's peak.
        assert_eq!(run(0.1, &on), (600, 690));
        // Lead 1 inverted (-0.5 mV, larger in size): the upright lead 0.
        assert_eq!(run(-0.5, &on), (600, 690));
        // Rule off: the more confident lead 0.
        let off = DelineateConfig {
            global_t_peak_tallest: false,
            ..on.clone()
        };
        assert_eq!(run(0.5, &off), (600, 690));
        // No T upright on any lead: the rule has nothing to choose from and
        // the confidence rule gives the more confident lead 0's peak.
        assert_eq!(run_neg(&on), 600);
    }

    #[test]
    fn with_three_leads_only_peaks_near_their_median_compete() {
        let cfg = DelineateConfig::default();
        // Median 602; gate 10 ms = 2.5 samples at 250 Hz.
        let t_peaks = [(0, m(600, 0.9)), (1, m(602, 0.9)), (2, m(640, 0.9))];
        let sig: Vec<Vec<f64>> = [(600, 0.2), (602, 0.3), (640, 0.9)]
            .iter()
            .map(|&(c, a)| {
                (0..1000)
                    .map(|i| {
                        let t = (i as f64 - c as f64) / 12.0;
                        a * (-0.5 * t * t).exp()
                    })
                    .collect()
            })
            .collect();
        let las: Vec<LeadAnalysis> = sig
            .iter()
            .map(|x| LeadAnalysis::new(x, 250.0, &cfg))
            .collect();
        let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
        let beats: Vec<BeatMarks> = t_peaks
            .iter()
            .map(|&(_, p)| BeatMarks {
                t_peak: Some(p),
                ..qrs_beat(500, 480, 520)
            })
            .collect();
        let b: Vec<&BeatMarks> = beats.iter().collect();
        // The tallest (lead 2) lies 38 samples from the median: out; of the
        // two near it, lead 1 is the taller.
        let got = tallest(&t_peaks, &b, &refs, Wave::T, 250.0, &cfg).unwrap();
        assert_eq!(got.0, 1);
        // Without the gate (a wide one), lead 2.
        let wide = DelineateConfig {
            global_t_peak_tallest_gate_ms: 1000.0,
            ..DelineateConfig::default()
        };
        assert_eq!(
            tallest(&t_peaks, &b, &refs, Wave::T, 250.0, &wide)
                .unwrap()
                .0,
            2
        );
    }

    #[test]
    fn tallest_upright_p_gives_the_global_p_peak() {
        // Two leads on a 0.1 mV baseline: a P wave (Gaussian) of 0.05 mV at
        // sample 400 on lead 0 and of `h1` mV at 410 on lead 1; onsets 380
        // and 390, ends 420 and 430; lead 0 the more confident.
        let run = |h1: f64, cfg: &DelineateConfig| {
            let g = |i: usize, c: usize, a: f64| {
                let t = (i as f64 - c as f64) / 5.0;
                0.1 + a * (-0.5 * t * t).exp()
            };
            let sig: Vec<Vec<f64>> = vec![
                (0..1000).map(|i| g(i, 400, 0.05)).collect(),
                (0..1000).map(|i| g(i, 410, h1)).collect(),
            ];
            let beat = |on: usize, pk: usize, end: usize, conf: f32| BeatMarks {
                p_on: Some(m(on, conf)),
                p_peak: Some(m(pk, conf)),
                p_end: Some(m(end, conf)),
                ..qrs_beat(500, 480, 520)
            };
            let per_lead = vec![
                vec![beat(380, 400, 420, 0.9)],
                vec![beat(390, 410, 430, 0.6)],
            ];
            let las: Vec<LeadAnalysis> = sig
                .iter()
                .map(|x| LeadAnalysis::new(x, 250.0, cfg))
                .collect();
            // Oracle of the height: the peak sample minus the median of the
            // 20 ms (5 samples at 250 Hz, 385..390) before the onset; the
            // Gaussian rises there, so the median is the middle one, 387.
            let b = &per_lead[1][0];
            let h = las[1].height_above_level(b.p_peak, b.p_on, cfg).unwrap();
            let want = g(410, 410, h1) - g(387, 410, h1);
            assert!((h - want).abs() < 1e-12, "{h} vs {want}");
            let refs: Vec<Option<&LeadAnalysis>> = las.iter().map(Some).collect();
            combine(&per_lead, &refs, 1, 250.0, cfg)[0]
                .p_peak
                .unwrap()
                .sample
        };
        let on = DelineateConfig::default();
        // Lead 1's P (0.15 mV) is the taller: its peak.
        assert_eq!(run(0.15, &on), 410);
        // Lead 1's P lower (0.02 mV): lead 0's.
        assert_eq!(run(0.02, &on), 400);
        // Lead 1 inverted: the upright lead 0.
        assert_eq!(run(-0.15, &on), 400);
        // Rule off: the more confident lead 0 whatever the heights.
        let off = DelineateConfig {
            global_p_peak_tallest: false,
            ..DelineateConfig::default()
        };
        assert_eq!(run(0.15, &off), 400);
    }
}
