//! Pacemaker stimulus artifacts: finding them and blanking them out of the
//! raw leads before any filtering.
//!
//! A pacing pulse lasts well under a millisecond (typically 0.4 ms, from
//! memory), and an electrocardiograph front end stretches it to one or a few
//! samples. It appears in every lead at once. Left in the signal, the
//! low-pass filter spreads it over several milliseconds with ringing, the QRS
//! detector may take it for a beat, and the delineator starts the QRS at the
//! spike instead of at the ventricular response the pulse evoked, which is
//! where cardiologists put the onset of a paced QRS (common practice; the
//! LUDB paced records are annotated so). Removing the stimulus artifact
//! before analysis is common practice in automated ECG analysis.
//!
//! # Rule
//!
//! In one lead, a stretch `[s, e)` of at most `max_width_ms` is a spike when
//! * some sample in it departs from the straight line joining its neighbours
//!   `x[s−1]` and `x[e]` by at least `min_mv`, and
//! * the signal around it is quiet by comparison: every step between
//!   consecutive samples over `flank_ms` before `s − 1` and after `e`, and
//!   the step `x[e] − x[s−1]` across it, are at most `flank_ratio` times that
//!   departure, and
//! * it starts with a jump: the step into it (`x[s] − x[s−1]`) is at least
//!   `min_jump_ratio` times the departure. The narrowest such stretch from `s`
//!   is taken (a stimulus is abrupt, and its tail may decay over a few samples).
//!
//! The quiet flanks and the jump are what separate a spike from a sharp R
//! wave or a notch in a QRS: the slopes on either side of an R peak are as
//! steep as the peak is high, and a notch rises over several samples.
//!
//! A stretch wider than `max_width_ms`, up to `max_pulse_ms`, is a spike only
//! when it also departs by at least `pulse_min_mv` and is left by a jump: the
//! step out of it (`x[e] − x[e−1]`) is at least `min_jump_ratio` times the
//! departure too. Some front ends record the stimulus as a rectangular pulse
//! of about ten milliseconds (LUDB 74 has one of 12 ms: six samples at
//! 500 Hz, about 0.7 mV in every lead), abrupt at both ends, which no wave is.
//!
//! A stretch is a pacing spike when at least `min_lead_fraction` of the leads,
//! and at least `min_leads` of them (or all, when there are fewer), hold a
//! spike within one sample of it. Every lead is then blanked over the
//! union of those stretches: the samples are replaced by the straight line
//! between the last sample before and the first sample after.
//!
//! Sample `i` is at time `i / fs`; amplitudes are in the leads' unit, which
//! the pipeline keeps in mV. Non-finite samples never take part in a spike.

/// Settings of the spike search (see the module documentation).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SpikeRule {
    /// Longest spike, in ms (at least one sample).
    pub max_width_ms: f64,
    /// Smallest departure from the line joining the spike's neighbours, in mV.
    pub min_mv: f64,
    /// Largest step beside the spike, as a fraction of its departure.
    pub flank_ratio: f64,
    /// Share of the leads that must hold the spike (0 to 1).
    pub min_lead_fraction: f64,
    /// Fewest leads that must hold the spike, whatever the share (capped at
    /// the number of leads): a lone lead's spike may be noise.
    pub min_leads: usize,
    /// Length of the quiet flanks on either side, in ms (at least one sample).
    pub flank_ms: f64,
    /// Smallest step into the spike, as a fraction of its departure.
    pub min_jump_ratio: f64,
    /// Longest rectangular pulse (entered and left by a jump), in ms; at or
    /// below `max_width_ms`, no wider stretch is looked at.
    pub max_pulse_ms: f64,
    /// Smallest departure of such a pulse, in mV.
    pub pulse_min_mv: f64,
}

/// One blanked stretch: samples `start..end` (end exclusive) of every lead.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Spike {
    /// First replaced sample.
    pub start: usize,
    /// One past the last replaced sample.
    pub end: usize,
}

/// Longest spike in samples for `fs` (at least 1).
fn max_width(fs: f64, rule: &SpikeRule) -> usize {
    ((rule.max_width_ms * fs / 1000.0).round() as usize).max(1)
}

/// Longest rectangular pulse in samples for `fs` (never below [`max_width`]).
fn max_pulse(fs: f64, rule: &SpikeRule) -> usize {
    ((rule.max_pulse_ms * fs / 1000.0).round() as usize).max(max_width(fs, rule))
}

/// Largest absolute step between consecutive samples of `x[a..=b]`
/// (NaN when a sample is not finite).
fn max_step(x: &[f64], a: usize, b: usize) -> f64 {
    let mut m = 0.0f64;
    for i in a + 1..=b {
        let d = (x[i] - x[i - 1]).abs();
        if !d.is_finite() {
            return f64::NAN;
        }
        m = m.max(d);
    }
    m
}

/// The spike of one lead starting at `s`, if any: its end (exclusive).
/// `wmax`: longest stretch, `wpulse`: longest pulse (left by a jump), `m`:
/// flank length, all in samples.
fn spike_at(
    x: &[f64],
    s: usize,
    (wmax, wpulse): (usize, usize),
    m: usize,
    rule: &SpikeRule,
) -> Option<usize> {
    if s < m + 1 {
        return None;
    }
    let a1 = x[s - 1];
    let before = max_step(x, s - 1 - m, s - 1);
    // Necessary for any width: the jump is at least min_jump_ratio × dev and
    // the steps before at most flank_ratio × dev, so those steps are at most
    // flank_ratio / min_jump_ratio × the jump. Inside a QRS consecutive steps
    // are alike, and this one comparison turns most of them down. (A NaN
    // passes it and is turned down below.)
    let jump = (x[s] - a1).abs();
    if rule.min_jump_ratio > 0.0 && before * rule.min_jump_ratio > rule.flank_ratio * jump {
        return None;
    }
    // A pulse's jumps in and out are at least min_jump_ratio × pulse_min_mv:
    // without such a jump into it, no stretch wider than wmax is looked at.
    let least_pulse_jump = rule.min_jump_ratio * rule.pulse_min_mv;
    let widest = if jump >= least_pulse_jump {
        wpulse
    } else {
        wmax
    };
    for w in 1..=widest {
        let e = s + w;
        if e + m >= x.len() {
            return None;
        }
        let b0 = x[e];
        if w > wmax && (b0 - x[e - 1]).abs() < least_pulse_jump {
            continue;
        }
        let after = max_step(x, e, e + m);
        let mut dev = 0.0f64;
        for (i, &v) in x[s..e].iter().enumerate() {
            let line = a1 + (b0 - a1) * (i + 1) as f64 / (w + 1) as f64;
            dev = dev.max((v - line).abs());
        }
        if !(dev.is_finite() && before.is_finite() && after.is_finite()) {
            return None;
        }
        let quiet = rule.flank_ratio * dev;
        // The stretch starts where the spike does, with a jump (a stimulus
        // is abrupt; its tail may decay over a few samples, and the narrowest
        // stretch is taken).
        if dev >= rule.min_mv
            && before <= quiet
            && after <= quiet
            && (b0 - a1).abs() <= quiet
            && (x[s] - a1).abs() >= rule.min_jump_ratio * dev
            && (w <= wmax
                || (dev >= rule.pulse_min_mv && (b0 - x[e - 1]).abs() >= rule.min_jump_ratio * dev))
        {
            return Some(e);
        }
    }
    None
}

/// Spikes of one lead, as `(start, end)` stretches in increasing order.
pub fn lead_spikes(x: &[f64], fs: f64, rule: &SpikeRule) -> Vec<(usize, usize)> {
    let widths = (max_width(fs, rule), max_pulse(fs, rule));
    let m = ((rule.flank_ms * fs / 1000.0).round() as usize).max(1);
    let mut out = Vec::new();
    // A spike is entered by a step of at least min_jump_ratio × min_mv: most
    // samples are ruled out by that one comparison.
    let least_jump = rule.min_jump_ratio * rule.min_mv;
    let mut s = m + 1;
    while s < x.len() {
        if (x[s] - x[s - 1]).abs() < least_jump {
            s += 1;
            continue;
        }
        match spike_at(x, s, widths, m, rule) {
            Some(e) => {
                out.push((s, e));
                s = e + 1;
            }
            None => s += 1,
        }
    }
    out
}

/// Pacing spikes of a record: stretches held by at least
/// `min_lead_fraction` of the leads (each lead's spike within one sample),
/// as the union of the leads' stretches, in increasing order.
pub fn find_spikes(leads: &[&[f64]], fs: f64, rule: &SpikeRule) -> Vec<Spike> {
    let per_lead: Vec<Vec<(usize, usize)>> =
        leads.iter().map(|x| lead_spikes(x, fs, rule)).collect();
    join_spikes(&per_lead, rule)
}

/// The record's spikes from each lead's [`lead_spikes`] (one entry per lead,
/// every lead of [`find_spikes`]), for a caller that sees one lead at a time.
pub fn join_spikes(per_lead: &[Vec<(usize, usize)>], rule: &SpikeRule) -> Vec<Spike> {
    let n_leads = per_lead.len();
    if n_leads == 0 {
        return Vec::new();
    }
    // Every lead's stretches, widened by one sample for the coincidence test.
    let mut all: Vec<(usize, usize, usize)> = Vec::new();
    for (l, x) in per_lead.iter().enumerate() {
        all.extend(x.iter().map(|&(s, e)| (s, e, l)));
    }
    all.sort_unstable();
    let need = ((rule.min_lead_fraction * n_leads as f64).ceil() as usize)
        .max(rule.min_leads.min(n_leads))
        .max(1);
    let mut out = Vec::new();
    let mut i = 0;
    while i < all.len() {
        // A cluster: stretches that touch or overlap once widened by a sample.
        let (mut start, mut end) = (all[i].0, all[i].1);
        let mut seen = vec![false; n_leads];
        let mut j = i;
        while j < all.len() && all[j].0 <= end + 1 {
            start = start.min(all[j].0);
            end = end.max(all[j].1);
            seen[all[j].2] = true;
            j += 1;
        }
        if seen.iter().filter(|&&b| b).count() >= need {
            out.push(Spike { start, end });
        }
        i = j;
    }
    out
}

/// Replaces each spike's samples in every lead by the straight line between
/// the samples on either side of it.
pub fn blank_spikes(leads: &mut [Vec<f64>], spikes: &[Spike]) {
    for x in leads.iter_mut() {
        blank_lead(x, spikes);
    }
}

/// [`blank_spikes`] on one lead. A spike touching either end of the lead is
/// left alone (there is no sample beyond it to join).
pub fn blank_lead(x: &mut [f64], spikes: &[Spike]) {
    for sp in spikes {
        if sp.start == 0 || sp.end >= x.len() || sp.start >= sp.end {
            continue;
        }
        let (a, b) = (x[sp.start - 1], x[sp.end]);
        let w = (sp.end - sp.start + 1) as f64;
        for (k, v) in x[sp.start..sp.end].iter_mut().enumerate() {
            *v = a + (b - a) * (k + 1) as f64 / w;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rule(max_width_ms: f64, min_lead_fraction: f64) -> SpikeRule {
        SpikeRule {
            max_width_ms,
            min_mv: 0.1,
            flank_ratio: 0.3,
            min_lead_fraction,
            min_leads: 1,
            flank_ms: 4.0,
            min_jump_ratio: 0.5,
            max_pulse_ms: 0.0,
            pulse_min_mv: 0.3,
        }
    }

    #[test]
    fn one_sample_spike_on_a_ramp_is_found_and_the_ramp_restored() {
        // Hand-worked: a ramp of 0.001 mV per sample with +0.4 mV added at
        // sample 10. At 500 Hz and 6 ms the widest stretch is 3 samples; the
        // one-sample stretch [10, 11) departs by exactly 0.4 from the line
        // joining samples 9 and 11, and every step beside it is 0.001 or 0.002
        // (under 0.3 × 0.4). Blanking puts back the ramp value 0.010.
        let ramp: Vec<f64> = (0..40).map(|i| 0.001 * i as f64).collect();
        let mut x = ramp.clone();
        x[10] += 0.4;
        let leads = [x.as_slice(), x.as_slice()];
        let sp = find_spikes(&leads, 500.0, &rule(6.0, 0.75));
        assert_eq!(sp, vec![Spike { start: 10, end: 11 }]);
        let mut own = vec![x.clone(), x];
        blank_spikes(&mut own, &sp);
        for l in &own {
            for (a, b) in l.iter().zip(&ramp) {
                assert!((a - b).abs() < 1e-12, "{a} vs {b}");
            }
        }
    }

    #[test]
    fn a_two_sample_biphasic_spike_is_one_stretch() {
        // +0.3 then −0.3 mV on a flat line: the one-sample stretch [10, 11)
        // fails (the step across it, 0 → −0.3, is not quiet); [10, 12) departs
        // by 0.3 from the flat line joining samples 9 and 12.
        let mut x = vec![0.0; 30];
        x[10] = 0.3;
        x[11] = -0.3;
        assert_eq!(lead_spikes(&x, 500.0, &rule(6.0, 1.0)), vec![(10, 12)]);
        // At 250 Hz, 4 ms is one sample: too narrow a limit for it.
        assert!(lead_spikes(&x, 250.0, &rule(4.0, 1.0)).is_empty());
    }

    #[test]
    fn a_rectangular_pulse_is_found_only_with_the_pulse_rule() {
        // The LUDB 74 stimulus at samples 3607-3612 (read with `wfdb`, lead I
        // minus its level just before, rounded to 0.01 mV): six samples near
        // -0.74 mV with a smaller second one (12 ms at 500 Hz), then back to
        // the level. Widest plain stretch at 6 ms: 3 samples, too narrow; the
        // step across every narrower stretch is not quiet.
        let mut x = vec![0.0; 40];
        for (k, v) in [-0.74, -0.69, -0.74, -0.74, -0.74, -0.74]
            .iter()
            .enumerate()
        {
            x[20 + k] = *v;
        }
        assert!(lead_spikes(&x, 500.0, &rule(6.0, 1.0)).is_empty());
        let pulse = SpikeRule {
            max_pulse_ms: 14.0,
            ..rule(6.0, 1.0)
        };
        assert_eq!(lead_spikes(&x, 500.0, &pulse), vec![(20, 26)]);
        // Lead II of the same pulse, with its overshoot on the second sample:
        // the jumps in and out (0.41, 0.40) still reach half the departure
        // (0.66).
        let mut y = vec![0.0; 40];
        for (k, v) in [0.41, 0.66, 0.41, 0.41, 0.41, 0.40].iter().enumerate() {
            y[20 + k] = *v;
        }
        assert_eq!(lead_spikes(&y, 500.0, &pulse), vec![(20, 26)]);
        // Entered by a jump but decaying back over 10 ms: no jump out of it
        // (last step 0.15 against half its height, 0.35), so not a pulse.
        let mut z = vec![0.0; 40];
        for (k, v) in [0.70, 0.70, 0.60, 0.45, 0.30, 0.15].iter().enumerate() {
            z[20 + k] = *v;
        }
        assert!(lead_spikes(&z, 500.0, &pulse).is_empty());
        // A pulse below `pulse_min_mv` (0.3) is not taken, one above is.
        let small: Vec<f64> = x.iter().map(|v| v * 0.25 / 0.74).collect();
        assert!(lead_spikes(&small, 500.0, &pulse).is_empty());
        let large: Vec<f64> = x.iter().map(|v| v * 0.35 / 0.74).collect();
        assert_eq!(lead_spikes(&large, 500.0, &pulse), vec![(20, 26)]);
        // Wider than `max_pulse_ms` (8 samples = 16 ms > 14 ms): not taken.
        let mut wide = vec![0.0; 40];
        for v in &mut wide[20..28] {
            *v = -0.7;
        }
        assert!(lead_spikes(&wide, 500.0, &pulse).is_empty());
    }

    #[test]
    fn sharp_r_waves_are_not_spikes() {
        // A narrow R wave sampled at 250 Hz: its sides rise and fall as
        // steeply as its peak departs from them.
        let r = [0.0, 0.0, 0.0, 0.3, 0.9, 1.5, 0.8, 0.1, 0.0, 0.0, 0.0];
        assert!(lead_spikes(&r, 250.0, &rule(6.0, 1.0)).is_empty());
        // A Gaussian QRS of 8 ms standard deviation at 500 Hz, 2 mV.
        let g: Vec<f64> = (0..100)
            .map(|i| 2.0 * (-((i as f64 - 50.0) * 2.0 / 8.0).powi(2) / 2.0).exp())
            .collect();
        assert!(lead_spikes(&g, 500.0, &rule(6.0, 1.0)).is_empty());
    }

    #[test]
    fn a_spike_must_be_in_enough_leads() {
        let flat = vec![0.0; 30];
        let mut x = flat.clone();
        x[12] = -0.5;
        // One lead of two: half the leads.
        let leads = [x.as_slice(), flat.as_slice()];
        assert!(find_spikes(&leads, 500.0, &rule(6.0, 0.75)).is_empty());
        assert_eq!(
            find_spikes(&leads, 500.0, &rule(6.0, 0.5)),
            vec![Spike { start: 12, end: 13 }]
        );
        // ... but not with two leads asked for (`min_leads`).
        let two = SpikeRule {
            min_leads: 2,
            ..rule(6.0, 0.5)
        };
        assert!(find_spikes(&leads, 500.0, &two).is_empty());
        // Twelve leads, half of them asked for: a spike in six is one, in five
        // is none; a lone lead of a single-lead record needs only itself.
        let twelve = |n: usize| -> Vec<Spike> {
            let leads: Vec<&[f64]> = (0..12)
                .map(|l| if l < n { x.as_slice() } else { flat.as_slice() })
                .collect();
            find_spikes(&leads, 500.0, &two)
        };
        assert_eq!(twelve(6), vec![Spike { start: 12, end: 13 }]);
        assert!(twelve(5).is_empty());
        assert_eq!(
            find_spikes(&[x.as_slice()], 500.0, &two),
            vec![Spike { start: 12, end: 13 }]
        );
        // One sample apart in the two leads: one spike covering both.
        let mut y = flat.clone();
        y[13] = 0.4;
        let leads = [x.as_slice(), y.as_slice()];
        assert_eq!(
            find_spikes(&leads, 500.0, &rule(6.0, 0.75)),
            vec![Spike { start: 12, end: 14 }]
        );
    }

    #[test]
    fn edges_gaps_and_small_spikes_are_left_alone() {
        let mut x = vec![0.0; 10];
        x[0] = 1.0; // no two samples before it
        x[8] = 1.0; // no sample after the one following it
        assert!(lead_spikes(&x, 500.0, &rule(6.0, 1.0)).is_empty());
        let mut y = vec![0.0; 20];
        y[10] = 0.05; // under min_mv
        assert!(lead_spikes(&y, 500.0, &rule(6.0, 1.0)).is_empty());
        y[10] = 0.5;
        y[8] = f64::NAN; // a gap beside it
        assert!(lead_spikes(&y, 500.0, &rule(6.0, 1.0)).is_empty());
        y[8] = 0.0;
        y[10] = f64::NAN; // a gap in place of the spike
        assert!(lead_spikes(&y, 500.0, &rule(6.0, 1.0)).is_empty());
        y[10] = f64::INFINITY;
        assert!(lead_spikes(&y, 500.0, &rule(6.0, 1.0)).is_empty());
        assert!(find_spikes(&[], 500.0, &rule(6.0, 1.0)).is_empty());
        // Blanking a spike that touches an end changes nothing.
        let mut z = vec![1.0, 2.0, 3.0];
        blank_lead(
            &mut z,
            &[Spike { start: 0, end: 1 }, Spike { start: 2, end: 3 }],
        );
        assert_eq!(z, vec![1.0, 2.0, 3.0]);
    }
}
