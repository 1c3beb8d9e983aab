//! A lead's P and QRS boundaries held to the lead's own neighbouring beats.
//!
//! On one lead, beat after beat in the same rhythm, the P wave and the QRS
//! complex keep their place relative to the QRS fiducial (common practice: the
//! PR interval and the QRS duration change little over a few seconds). A
//! single beat's boundaries, found on that beat alone, carry its noise: a
//! low P wave taken on another deflection, a QRS onset moved by a noise
//! spike. Here each beat's P onset, peak and end, and QRS onset and end, are
//! replaced by the centre of their offsets to the fiducial over the beat and
//! its `lead_ensemble_beats` neighbours on each side that have the same marks
//! (at least `lead_ensemble_min_beats` of them): the per-beat counterpart of
//! measuring on a median beat. The centre is the median for the QRS marks and
//! a trimmed mean for the P marks (`lead_ensemble_p_trim`): a low P wave's
//! timing scatters from beat to beat by noise, and averaging the middle of
//! the window uses more of the beats than the median does.
//!
//! A beat whose own marks lie further than the gate from that centre
//! (`lead_ensemble_p_gate_ms`, `lead_ensemble_qrs_gate_ms`) keeps them: an
//! ectopic beat, a changed conduction. A premature beat (preceding RR interval
//! below `lead_ensemble_premature_frac` of the window's median RR) keeps its
//! own P and QRS marks whatever their distance: a premature atrial beat
//! starts elsewhere in the atria, and a premature beat may be conducted
//! aberrantly or arise in the ventricles. A move that would break
//! the order of the beat's waves (previous T end, P, QRS onset, QRS peak,
//! T onset or peak) is not made. The global QRS onset and end take the same
//! rule (`global_ensemble_qrs`), and so do the global P marks (`global_ensemble_p`). Positions are samples of the input rate;
//! a median of an even count is the mean of the two middle values, and every
//! centre is rounded to the sample.

use crate::{BeatMarks, DelineateConfig, Mark};

fn median(v: &mut [f64]) -> f64 {
    let n = v.len();
    if n <= 64 {
        // Windows are a dozen beats: insertion sort is the cheapest here.
        for i in 1..n {
            let x = v[i];
            let mut j = i;
            while j > 0 && v[j - 1] > x {
                v[j] = v[j - 1];
                j -= 1;
            }
            v[j] = x;
        }
    } else {
        v.sort_unstable_by(|a, b| a.total_cmp(b));
    }
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Offsets (samples) of three marks to the fiducial, per beat; `None` where
/// one of the marks is missing.
fn offsets(
    marks: &[BeatMarks],
    qrs: &[usize],
    fields: impl Fn(&BeatMarks) -> [Option<Mark>; 3],
) -> Vec<Option<[f64; 3]>> {
    marks
        .iter()
        .zip(qrs)
        .map(|(m, &q)| match fields(m) {
            [Some(a), Some(b), Some(c)] => Some([a, b, c].map(|x| x.sample as f64 - q as f64)),
            _ => None,
        })
        .collect()
}

/// Mean of `v` after `floor(trim * n)` values are dropped from each end
/// (`trim` >= 0.5: the median). Sorts `v`.
fn trimmed_mean(v: &mut [f64], trim: f64) -> f64 {
    let med = median(v);
    let n = v.len();
    let cut = (trim.max(0.0) * n as f64).floor() as usize;
    if trim >= 0.5 || 2 * cut >= n {
        return med;
    }
    let kept = &v[cut..n - cut];
    kept.iter().sum::<f64>() / kept.len() as f64
}

/// Trimmed means ([`trimmed_mean`]) of `off` over `lo..hi` (beats that have
/// all three marks); `None` below `min_beats` such beats. `buf` is scratch
/// space.
fn centre_offsets(
    off: &[Option<[f64; 3]>],
    lo: usize,
    hi: usize,
    min_beats: usize,
    trim: f64,
    buf: &mut Vec<f64>,
) -> Option<[f64; 3]> {
    let count = off[lo..hi].iter().flatten().count();
    if count < min_beats.max(1) {
        return None;
    }
    Some(std::array::from_fn(|k| {
        buf.clear();
        buf.extend(off[lo..hi].iter().flatten().map(|d| d[k]));
        trimmed_mean(buf, trim)
    }))
}

/// Whether beat `b`'s preceding RR interval is shorter than `frac` times the
/// median RR interval of the beats `lo..hi` (each with a predecessor).
fn premature(qrs: &[usize], b: usize, lo: usize, hi: usize, frac: f64, buf: &mut Vec<f64>) -> bool {
    if frac <= 0.0 || b == 0 {
        return false;
    }
    buf.clear();
    buf.extend((lo.max(1)..hi).map(|i| qrs[i].saturating_sub(qrs[i - 1]) as f64));
    if buf.is_empty() {
        return false;
    }
    let rr = median(buf);
    (qrs[b].saturating_sub(qrs[b - 1]) as f64) < frac * rr
}

/// Apply the rule of the module docs to every lead (`lead_ensemble_beats` 0:
/// nothing changes); the P marks only with `with_p`, the QRS marks only with
/// `with_qrs` (the global marks: `global_ensemble_p`, `global_ensemble_qrs`).
pub(crate) fn hold_to_neighbours(
    per_lead: &mut [Vec<BeatMarks>],
    qrs: &[usize],
    fs: f64,
    cfg: &DelineateConfig,
    with_p: bool,
    with_qrs: bool,
) {
    let half = cfg.lead_ensemble_beats;
    if half == 0 || !(fs.is_finite() && fs > 0.0) {
        return;
    }
    let p_gate = cfg.lead_ensemble_p_gate_ms * fs / 1000.0;
    let qrs_gate = cfg.lead_ensemble_qrs_gate_ms * fs / 1000.0;
    let min_beats = cfg.lead_ensemble_min_beats;
    let p_trim = cfg.lead_ensemble_p_trim;
    let mut buf = Vec::with_capacity(2 * half + 1);
    // Premature beats depend on the beat times alone: worked out once for
    // the leads' common beat count (again only for a lead with fewer beats).
    let early_of = |n: usize, buf: &mut Vec<f64>| -> Vec<bool> {
        (0..n)
            .map(|b| {
                let (lo, hi) = (b.saturating_sub(half), (b + half + 1).min(n));
                premature(qrs, b, lo, hi, cfg.lead_ensemble_premature_frac, buf)
            })
            .collect()
    };
    let mut early: Vec<bool> = Vec::new();
    for lead in per_lead.iter_mut() {
        let n = lead.len().min(qrs.len());
        if early.len() != n {
            early = early_of(n, &mut buf);
        }
        let p_off = offsets(&lead[..n], qrs, |m| [m.p_on, m.p_peak, m.p_end]);
        let q_off = offsets(&lead[..n], qrs, |m| [m.qrs_on, m.qrs_peak, m.qrs_end]);
        for b in 0..n {
            let (lo, hi) = (b.saturating_sub(half), (b + half + 1).min(n));
            let at = |v: f64| (qrs[b] as f64 + v).round().max(0.0) as usize;
            let moved = |own: Mark, s: usize| Mark {
                sample: s,
                confidence: own.confidence,
            };
            let within =
                |own: Mark, s: usize, gate: f64| (s as f64 - own.sample as f64).abs() <= gate;
            // The beat's own marks: moves of this pass touch only beat `b`,
            // and its neighbours' offsets were taken before any move.
            let own = lead[b].clone();
            // P onset, peak and end together.
            if let (false, true, Some(on), Some(pk), Some(en)) =
                (early[b], with_p, own.p_on, own.p_peak, own.p_end)
            {
                if let Some(d) = centre_offsets(&p_off, lo, hi, min_beats, p_trim, &mut buf) {
                    let (s_on, s_pk, s_en) = (at(d[0]), at(d[1]), at(d[2]));
                    // The previous beat's T end as it stands now.
                    let floor = b
                        .checked_sub(1)
                        .and_then(|a| lead[a].t_end)
                        .map_or(0, |m| m.sample + 1);
                    let ceil = own.qrs_on.map_or(usize::MAX, |m| m.sample);
                    if within(on, s_on, p_gate)
                        && within(pk, s_pk, p_gate)
                        && within(en, s_en, p_gate)
                        && floor <= s_on
                        && s_on < s_pk
                        && s_pk < s_en
                        && s_en <= ceil
                    {
                        lead[b].p_on = Some(moved(on, s_on));
                        lead[b].p_peak = Some(moved(pk, s_pk));
                        lead[b].p_end = Some(moved(en, s_en));
                    }
                }
            }
            // QRS onset and end (the peak stays: it is the lead's own extremum).
            if let (false, true, Some(on), Some(pk), Some(en)) =
                (early[b], with_qrs, own.qrs_on, own.qrs_peak, own.qrs_end)
            {
                if let Some(d) = centre_offsets(&q_off, lo, hi, min_beats, 0.5, &mut buf) {
                    let (s_on, s_en) = (at(d[0]), at(d[2]));
                    let floor = lead[b].p_end.map_or(0, |m| m.sample);
                    let ceil = own.t_on.or(own.t_peak).map_or(usize::MAX, |m| m.sample);
                    if within(on, s_on, qrs_gate)
                        && within(en, s_en, qrs_gate)
                        && floor <= s_on
                        && s_on < pk.sample
                        && pk.sample < s_en
                        && s_en < ceil
                    {
                        lead[b].qrs_on = Some(moved(on, s_on));
                        lead[b].qrs_end = Some(moved(en, s_en));
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::test_marks::m;

    /// Beats every 500 samples (fs 500 Hz); P at -100/-80/-60 and QRS at
    /// -20/0/+40 samples from the fiducial, plus `jitter[b]` on P onset and
    /// QRS end; T peak at +150.
    fn lead(jitter: &[i64]) -> (Vec<BeatMarks>, Vec<usize>) {
        let qrs: Vec<usize> = (0..jitter.len()).map(|b| 1000 + 500 * b).collect();
        let marks = qrs
            .iter()
            .zip(jitter)
            .map(|(&q, &j)| BeatMarks {
                p_on: m((q as i64 - 100 + j) as usize),
                p_peak: m(q - 80),
                p_end: m(q - 60),
                qrs_on: m(q - 20),
                qrs_peak: m(q),
                qrs_end: m((q as i64 + 40 + j) as usize),
                t_peak: m(q + 150),
                ..Default::default()
            })
            .collect();
        (marks, qrs)
    }

    #[test]
    fn jittered_boundaries_take_the_neighbours_median_and_outliers_stay() {
        // The P marks take the median here too (trim 0.5); the trimmed mean
        // has its own test below.
        let cfg = DelineateConfig {
            lead_ensemble_p_trim: 0.5,
            ..DelineateConfig::default()
        };
        assert!(cfg.lead_ensemble_beats >= 3);
        // Oracle: with offsets constant but for the jitter, the median of the
        // jittered offsets over the window is the constant offset itself.
        let jitter = [0, 3, -4, 2, 0, -1, 30, 0, 1, -2, 0];
        let (marks, qrs) = lead(&jitter);
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &cfg, true, true);
        for (b, (got, q)) in per_lead[0].iter().zip(&qrs).enumerate() {
            // 30 samples = 60 ms: beyond the 40-ms QRS gate, within the P gate.
            let qrs_end = if b == 6 { q + 70 } else { q + 40 };
            assert_eq!(got.qrs_end.unwrap().sample, qrs_end, "beat {b}");
            assert_eq!(got.p_on.unwrap().sample, q - 100, "beat {b}");
            assert_eq!(got.qrs_peak, marks[b].qrs_peak);
            assert_eq!(got.p_on.unwrap().confidence, 0.5);
        }
        // Without the P part: P stays, the QRS moves; without the QRS part
        // the reverse.
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &cfg, false, true);
        assert_eq!(per_lead[0][1].p_on, marks[1].p_on);
        assert_eq!(per_lead[0][1].qrs_end.unwrap().sample, qrs[1] + 40);
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &cfg, true, false);
        assert_eq!(per_lead[0][1].p_on.unwrap().sample, qrs[1] - 100);
        assert_eq!(per_lead[0][1].qrs_end, marks[1].qrs_end);
        // Off: nothing moves.
        let off = DelineateConfig {
            lead_ensemble_beats: 0,
            ..cfg.clone()
        };
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &off, true, true);
        assert_eq!(per_lead[0], marks);
    }

    #[test]
    fn a_move_across_a_neighbouring_wave_is_not_made() {
        let cfg = DelineateConfig::default();
        let (mut marks, qrs) = lead(&[0; 9]);
        // Beat 4: its QRS starts early (at -70, beyond the QRS gate from the
        // median -20, so it stays), so the median P end (-60) would lie inside
        // its QRS; its P is left alone although within the P gate.
        marks[4].qrs_on = m(qrs[4] - 70);
        marks[4].p_on = m(qrs[4] - 130);
        marks[4].p_peak = m(qrs[4] - 110);
        marks[4].p_end = m(qrs[4] - 90);
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &cfg, true, true);
        assert_eq!(per_lead[0][4].p_end, marks[4].p_end);
        assert_eq!(per_lead[0][4].p_on, marks[4].p_on);
        assert_eq!(per_lead[0][3].p_on.unwrap().sample, qrs[3] - 100);
    }

    /// Slow oracle of [`trimmed_mean`]: sort a copy, drop `floor(trim * n)`
    /// values from each end, average what is left (the median at 0.5).
    fn trimmed_mean_oracle(v: &[f64], trim: f64) -> f64 {
        let mut s = v.to_vec();
        s.sort_by(|a, b| a.total_cmp(b));
        let n = s.len();
        let cut = (trim * n as f64).floor() as usize;
        if trim >= 0.5 || 2 * cut >= n {
            return if n % 2 == 1 {
                s[n / 2]
            } else {
                (s[n / 2 - 1] + s[n / 2]) / 2.0
            };
        }
        let kept = &s[cut..n - cut];
        kept.iter().sum::<f64>() / kept.len() as f64
    }

    #[test]
    fn trimmed_mean_equals_the_sort_and_drop_oracle() {
        // Worked value: 13 offsets, 0.25 drops floor(3.25) = 3 from each end
        // and averages the 7 middle ones: (1+2+2+3+3+4+5)/7 = 20/7.
        let mut v = vec![
            9.0, -40.0, 3.0, 2.0, 5.0, 1.0, 4.0, 3.0, 2.0, 30.0, -1.0, 6.0, 0.0,
        ];
        assert!((trimmed_mean(&mut v.clone(), 0.25) - 20.0 / 7.0).abs() < 1e-12);
        assert_eq!(trimmed_mean(&mut v, 0.5), 3.0);
        // Pseudo-random lengths 1..30 and trims 0..0.5 against the oracle.
        let mut state = 12345u64;
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 33) as f64 / (1u64 << 31) as f64
        };
        for _ in 0..500 {
            let n = 1 + (next() * 30.0) as usize;
            let v: Vec<f64> = (0..n).map(|_| (next() * 200.0 - 100.0).round()).collect();
            let trim = (next() * 0.6).min(0.5);
            let got = trimmed_mean(&mut v.clone(), trim);
            let want = trimmed_mean_oracle(&v, trim);
            assert!(
                (got - want).abs() < 1e-9,
                "n {n} trim {trim}: {got} vs {want}"
            );
        }
    }

    #[test]
    fn p_marks_take_the_interquartile_mean_of_the_window() {
        // 13 beats, so the window of beat 6 (6 beats each side) holds every
        // offset. Sorted jitter: -40 -30 -20 0 0 0 0 10 10 10 12 14 15; 0.25
        // drops 3 from each end: (0+0+0+0+10+10+10)/7 = 4.29 samples, so P
        // onset -100 + 4.29 rounds to -96, where the median (0) gives -100.
        let jitter = [10, -40, 0, 12, -30, 0, 10, 15, 0, -20, 14, 0, 10];
        let (marks, qrs) = lead(&jitter);
        let cfg = DelineateConfig::default();
        assert_eq!(cfg.lead_ensemble_p_trim, 0.25);
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &cfg, true, true);
        assert_eq!(per_lead[0][6].p_on.unwrap().sample, qrs[6] - 96);
        // No trim: the plain mean of the 13 offsets, -100 - 19/13 = -101.46.
        // All of it (0.5): the median, -100.
        for (trim, want) in [(0.0, 101), (0.5, 100)] {
            let c = DelineateConfig {
                lead_ensemble_p_trim: trim,
                ..cfg.clone()
            };
            let mut per_lead = vec![marks.clone()];
            hold_to_neighbours(&mut per_lead, &qrs, 500.0, &c, true, true);
            assert_eq!(
                per_lead[0][6].p_on.unwrap().sample,
                qrs[6] - want,
                "trim {trim}"
            );
        }
    }

    #[test]
    fn a_premature_beat_keeps_its_own_p_and_qrs() {
        // Beats every 500 samples but beat 5, which comes 150 samples early
        // (RR 350 = 0.7 of the median 500, below 0.85): its P onset 20
        // samples (40 ms) early and its QRS end 10 samples (20 ms, within
        // the 40-ms QRS gate) late are its own and stay; with the rule off
        // they are moved to the neighbours' -100 and +40. Beat 6 follows
        // the premature beat (RR 650): not premature, so its jittered marks
        // (P onset -106, QRS end +46) are held.
        let (mut marks, mut qrs) = lead(&[0; 11]);
        qrs[5] -= 150;
        for (b, m) in marks.iter_mut().enumerate() {
            let q = qrs[b];
            let (jp, jq) = match b {
                5 => (20, 10),
                6 => (6, 6),
                _ => (0, 0),
            };
            *m = BeatMarks {
                p_on: crate::test_marks::m(q - 100 - jp),
                p_peak: crate::test_marks::m(q - 80),
                p_end: crate::test_marks::m(q - 60),
                qrs_on: crate::test_marks::m(q - 20),
                qrs_peak: crate::test_marks::m(q),
                qrs_end: crate::test_marks::m(q + 40 + jq),
                t_peak: crate::test_marks::m(q + 150),
                ..Default::default()
            };
        }
        let cfg = DelineateConfig::default();
        assert_eq!(cfg.lead_ensemble_premature_frac, 0.85);
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &cfg, true, true);
        assert_eq!(per_lead[0][5].p_on, marks[5].p_on);
        assert_eq!(per_lead[0][5].qrs_end, marks[5].qrs_end);
        assert_eq!(per_lead[0][6].p_on.unwrap().sample, qrs[6] - 100);
        assert_eq!(per_lead[0][6].qrs_end.unwrap().sample, qrs[6] + 40);
        let off = DelineateConfig {
            lead_ensemble_premature_frac: 0.0,
            ..cfg.clone()
        };
        let mut per_lead = vec![marks.clone()];
        hold_to_neighbours(&mut per_lead, &qrs, 500.0, &off, true, true);
        assert_eq!(per_lead[0][5].p_on.unwrap().sample, qrs[5] - 100);
        assert_eq!(per_lead[0][5].qrs_end.unwrap().sample, qrs[5] + 40);
    }
}
