//! P-wave presence across beats: atrial activity with no fixed PR interval
//! (atrial fibrillation or flutter) is not reported as P waves.
//!
//! The P search of a single beat finds the largest wave before the QRS,
//! which in atrial fibrillation is an f wave at a random distance from the
//! QRS. In sinus rhythm the PR interval changes little from beat to beat
//! (common practice), so the scatter of the P-peak-to-QRS-peak interval over
//! neighbouring beats tells real P waves from random atrial activity.

use crate::lead::LeadAnalysis;
use crate::{BeatMarks, DelineateConfig};

/// Median absolute deviation of `v` (upper median; `v` is sorted in place).
fn mad(v: &mut [f64]) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    let med = v[v.len() / 2];
    let mut d: Vec<f64> = v.iter().map(|x| (x - med).abs()).collect();
    d.sort_by(|a, b| a.total_cmp(b));
    d[d.len() / 2]
}

/// Scatter (ms) of the PR interval around beat `b`: per lead, the median
/// absolute deviation of P peak to QRS peak over the beats within `half`
/// of `b` (leads with fewer than `min_waves` P waves there do not vote);
/// the lower median over the voting leads. `None` when no lead votes.
pub(crate) fn pr_scatter_ms(
    per_lead: &[Vec<BeatMarks>],
    b: usize,
    half: usize,
    min_waves: usize,
    fs: f64,
) -> Option<f64> {
    let mut votes: Vec<f64> = Vec::new();
    for l in per_lead {
        let lo = b.saturating_sub(half);
        let hi = (b + half + 1).min(l.len());
        if lo >= hi {
            continue;
        }
        let mut pr: Vec<f64> = l[lo..hi]
            .iter()
            .filter_map(|m| match (m.p_peak, m.qrs_peak) {
                (Some(p), Some(q)) => Some((q.sample as f64 - p.sample as f64) * 1000.0 / fs),
                _ => None,
            })
            .collect();
        if pr.len() >= min_waves.max(1) {
            votes.push(mad(&mut pr));
        }
    }
    if votes.is_empty() {
        return None;
    }
    // Lower median: with two leads the more regular one decides, as a lead
    // where the P wave is flat finds random waves even in sinus rhythm.
    votes.sort_by(|a, b| a.total_cmp(b));
    Some(votes[(votes.len() - 1) / 2])
}

/// Drop the P marks of every beat whose PR scatter exceeds
/// `p_max_pr_mad_ms`, in all leads (the rhythm is a property of the heart,
/// not of the lead).
pub(crate) fn drop_inconsistent_p(per_lead: &mut [Vec<BeatMarks>], fs: f64, cfg: &DelineateConfig) {
    if cfg.p_max_pr_mad_ms <= 0.0 || !(fs.is_finite() && fs > 0.0) {
        return;
    }
    let n = per_lead.iter().map(Vec::len).max().unwrap_or(0);
    let drop: Vec<bool> = (0..n)
        .map(|b| {
            pr_scatter_ms(per_lead, b, cfg.p_pr_context_beats, cfg.p_pr_min_waves, fs)
                .is_some_and(|s| s > cfg.p_max_pr_mad_ms)
        })
        .collect();
    for l in per_lead.iter_mut() {
        for (m, &d) in l.iter_mut().zip(&drop) {
            if d {
                m.p_on = None;
                m.p_peak = None;
                m.p_end = None;
            }
        }
    }
}

/// A P wave seen in most leads is also in the others, perhaps too small
/// for the single-lead presence test (a lead nearly perpendicular to the
/// P axis). For every beat where at least `p_fill_min_frac` of the leads
/// have a P wave, a lead without one is searched again within
/// `p_fill_window_ms` of the median P peak of the others, with the presence
/// thresholds multiplied by `p_fill_relax`.
pub(crate) fn fill_weak_p(
    las: &[Option<&LeadAnalysis>],
    per_lead: &mut [Vec<BeatMarks>],
    cfg: &DelineateConfig,
) {
    let n = per_lead.iter().map(Vec::len).max().unwrap_or(0);
    fill_weak_p_in(las, per_lead, cfg, (0..n).map(|b| (b, None)));
}

/// [`fill_weak_p`] for the given (beat, lead) pairs only (`None`: every lead
/// of the beat), beats in increasing order.
pub(crate) fn fill_weak_p_in(
    las: &[Option<&LeadAnalysis>],
    per_lead: &mut [Vec<BeatMarks>],
    cfg: &DelineateConfig,
    which: impl Iterator<Item = (usize, Option<usize>)>,
) {
    if cfg.p_fill_window_ms <= 0.0 || per_lead.len() < 2 {
        return;
    }
    for (b, only) in which {
        let mut peaks: Vec<usize> = per_lead
            .iter()
            .filter_map(|l| l.get(b).and_then(|m| m.p_peak))
            .map(|m| m.sample)
            .collect();
        if peaks.is_empty() || (peaks.len() as f64) < cfg.p_fill_min_frac * per_lead.len() as f64 {
            continue;
        }
        peaks.sort_unstable();
        let expect = peaks[peaks.len() / 2];
        for (k, (l, la)) in per_lead.iter_mut().zip(las).enumerate() {
            if only.is_some_and(|o| o != k) {
                continue;
            }
            let (Some(bm), Some(la)) = (l.get_mut(b), la) else {
                continue;
            };
            if bm.p_peak.is_some() {
                continue;
            }
            if let Some(found) = la.p_near(bm, expect, cfg.p_fill_window_ms, cfg.p_fill_relax, cfg)
            {
                *bm = found;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::Mark;

    fn beat(qrs: usize, p: Option<usize>) -> BeatMarks {
        let mk = |s| Mark {
            sample: s,
            confidence: 0.9,
        };
        BeatMarks {
            qrs_peak: Some(mk(qrs)),
            p_peak: p.map(mk),
            p_on: p.map(|s| mk(s - 10)),
            p_end: p.map(|s| mk(s + 10)),
            ..Default::default()
        }
    }

    #[test]
    fn fixed_pr_keeps_p_and_random_pr_drops_it() {
        let cfg = DelineateConfig::default();
        let fs = 250.0;
        // Sinus: PR (P peak to QRS peak) 40 samples = 160 ms, +-1 sample.
        let sinus: Vec<BeatMarks> = (0..12)
            .map(|i| beat(1000 + 200 * i, Some(960 + 200 * i + (i % 3) - 1)))
            .collect();
        // Random offsets between 20 and 80 samples (80-320 ms): f waves.
        let offs = [20, 75, 33, 61, 48, 80, 25, 66, 39, 71, 29, 55];
        let af: Vec<BeatMarks> = (0..12)
            .map(|i| beat(1000 + 200 * i, Some(1000 + 200 * i - offs[i])))
            .collect();
        let mut leads = vec![sinus.clone(), sinus.clone()];
        drop_inconsistent_p(&mut leads, fs, &cfg);
        assert!(leads.iter().flatten().all(|b| b.p_peak.is_some()));
        let mut leads = vec![af.clone(), af];
        drop_inconsistent_p(&mut leads, fs, &cfg);
        assert!(leads
            .iter()
            .flatten()
            .all(|b| b.p_peak.is_none() && b.p_on.is_none() && b.p_end.is_none()));
        // Off: nothing changes.
        let off = DelineateConfig {
            p_max_pr_mad_ms: 0.0,
            ..cfg
        };
        let mut leads = vec![beat_row(&offs)];
        let before = leads.clone();
        drop_inconsistent_p(&mut leads, fs, &off);
        assert_eq!(leads, before);
    }

    fn beat_row(offs: &[usize]) -> Vec<BeatMarks> {
        offs.iter()
            .enumerate()
            .map(|(i, o)| beat(1000 + 200 * i, Some(1000 + 200 * i - o)))
            .collect()
    }

    #[test]
    fn leads_with_few_p_waves_do_not_vote() {
        // One lead with a consistent P, one with only two (scattered) P waves.
        let sinus: Vec<BeatMarks> = (0..10)
            .map(|i| beat(1000 + 200 * i, Some(960 + 200 * i)))
            .collect();
        let sparse: Vec<BeatMarks> = (0..10)
            .map(|i| {
                beat(
                    1000 + 200 * i,
                    [Some(920), Some(990)]
                        .get(i)
                        .copied()
                        .flatten()
                        .map(|o| o + 200 * i),
                )
            })
            .collect();
        assert_eq!(pr_scatter_ms(&[sinus, sparse], 1, 4, 4, 250.0), Some(0.0));
    }
}
