//! Beat labels `N`, `V`, `Q` from three cues: correlation of the QRS shape
//! with the dominant beat shape, QRS width relative to the dominant beats,
//! and prematurity.
//!
//! Rules (this crate's choice, in the spirit of common template-matching
//! beat classifiers):
//! * shape like the dominant beats (correlation ≥ `label_corr_min`) and not
//!   wide: `N`, unless premature (`Q`: likely supraventricular ectopic);
//! * different shape and wide or premature: `V`;
//! * anything else, and beats too close to the record ends for a template
//!   window: `Q`.
//!
//! Before the labels, a beat unlike the dominant shape at its fiducial point
//! but like it within `fiducial_realign_ms` has its point moved to the best
//! match (the energy peak had taken the other lobe of the same QRS complex);
//! a beat found wide keeps its own similarity and width for the label.
//!
//! Shape: each usable lead's window of ±`template_half_width_ms` around the
//! fiducial point, mean removed, divided by that lead's median beat
//! peak-to-peak, leads concatenated. The dominant template is the
//! sample-wise median of all beats, refined twice as the median of the beats
//! that correlate with it. Width: the stretch around the fiducial point
//! where the combined slope energy (smoothed over 40 ms) stays above
//! `label_width_energy_fraction` of its peak.

use crate::pt::{self, moving_mean};
use crate::{BeatLabel, DetectConfig};
use tendline_dsp::colmedian::column_median;

/// Median (mean of the two middle values for even counts, 0 for none), by
/// selection: the k-th value in `total_cmp` order is unique bit for bit, so
/// this equals the middle of the sorted slice ([`median_sorted`], the oracle).
pub(crate) fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    let m = v.len() / 2;
    let odd = v.len() % 2 == 1;
    let (left, mid, _) = v.select_nth_unstable_by(m, |a, b| a.total_cmp(b));
    if odd {
        *mid
    } else {
        let below = left
            .iter()
            .copied()
            .max_by(|a, b| a.total_cmp(b))
            .unwrap_or(*mid);
        0.5 * (below + *mid)
    }
}

/// Median by a full sort: the obvious definition [`median`] is tested against.
#[cfg(test)]
pub(crate) fn median_sorted(v: &mut [f64]) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    let m = v.len() / 2;
    if v.is_empty() {
        0.0
    } else if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    }
}

/// Beats compared pairwise to find the most typical one when the median
/// template fails (64² correlations at most, whatever the record's length).
const MEDOID_SAMPLE: usize = 64;

/// Pearson correlation; 0 when either vector is constant.
pub fn correlation(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    if n == 0 {
        return 0.0;
    }
    let ma = a[..n].iter().sum::<f64>() / n as f64;
    let mb = b[..n].iter().sum::<f64>() / n as f64;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for i in 0..n {
        let (x, y) = (a[i] - ma, b[i] - mb);
        sab += x * y;
        saa += x * x;
        sbb += y * y;
    }
    if saa <= 0.0 || sbb <= 0.0 {
        0.0
    } else {
        sab / (saa * sbb).sqrt()
    }
}

fn elementwise_median(vs: &[&Vec<f64>]) -> Vec<f64> {
    // The same value as `median` of each column, all columns at once.
    column_median(vs)
}

/// Labels for `beats` (sorted fiducial samples). `weights[i][l]` is lead `l`'s
/// quality weight at beat `i`; `slope` the combined slope signal.
///
/// Returns the fiducial points, some moved onto the dominant shape (see
/// `fiducial_realign_ms`; still sorted and distinct), and the labels.
pub(crate) fn label_beats(
    leads: &[&[f64]],
    beats: &[usize],
    weights: &[Vec<f64>],
    slope: &[f64],
    fs: f64,
    cfg: &DetectConfig,
) -> (Vec<usize>, Vec<BeatLabel>) {
    let nb = beats.len();
    if nb < 3 {
        return (beats.to_vec(), vec![BeatLabel::Unclassified; nb]);
    }
    let n = leads[0].len();
    let hw = pt::ms_to_samples(cfg.template_half_width_ms, fs);
    let nl = leads.len();

    // Leads used for shape: good at most beats; else the best one.
    let mean_w: Vec<f64> = (0..nl)
        .map(|l| weights.iter().map(|w| w[l]).sum::<f64>() / nb as f64)
        .collect();
    let mut used: Vec<usize> = (0..nl).filter(|&l| mean_w[l] >= 0.5).collect();
    if used.is_empty() {
        let best = (0..nl)
            .max_by(|&a, &b| mean_w[a].total_cmp(&mean_w[b]))
            .unwrap_or(0);
        used.push(best);
    }
    let inside = |b: usize| b >= hw && b + hw < n;
    let scales: Vec<f64> = used
        .iter()
        .map(|&l| {
            let mut p: Vec<f64> = beats
                .iter()
                .filter(|&&b| inside(b))
                .map(|&b| {
                    let s = &leads[l][b - hw..=b + hw];
                    let (lo, hi) = s.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |a, v| {
                        (a.0.min(*v), a.1.max(*v))
                    });
                    hi - lo
                })
                .collect();
            let m = median(&mut p);
            if m > 0.0 {
                m
            } else {
                1.0
            }
        })
        .collect();
    let shape_at = |b: usize| -> Option<Vec<f64>> {
        if !inside(b) {
            return None;
        }
        let mut v = Vec::with_capacity(used.len() * (2 * hw + 1));
        for (k, &l) in used.iter().enumerate() {
            let s = &leads[l][b - hw..=b + hw];
            let m = s.iter().sum::<f64>() / s.len() as f64;
            v.extend(s.iter().map(|x| (x - m) / scales[k]));
        }
        Some(v)
    };
    let mut shapes: Vec<Option<Vec<f64>>> = beats.iter().map(|&b| shape_at(b)).collect();
    let all: Vec<&Vec<f64>> = shapes.iter().flatten().collect();
    if all.len() < 3 {
        return (beats.to_vec(), vec![BeatLabel::Unclassified; nb]);
    }
    let mut template = elementwise_median(&all);
    // The sample-wise median of all beats is a blur when their points split
    // between lobes (QTDB sel231: three groups, none a majority; every beat
    // correlated about 0.05 with it and all were labelled `Q`). When it
    // matches fewer than half of the beats, start instead from the most
    // typical beat of an evenly spaced sample: the one most others match.
    let matched = |t: &[f64]| {
        all.iter()
            .filter(|s| correlation(s, t) >= cfg.label_corr_min)
            .count()
    };
    let median_matches = matched(&template);
    if 2 * median_matches < all.len() {
        let step = all.len().div_ceil(MEDOID_SAMPLE);
        let sample: Vec<&Vec<f64>> = all.iter().step_by(step).copied().collect();
        let typical = sample.iter().max_by_key(|a| {
            sample
                .iter()
                .filter(|b| correlation(a, b) >= cfg.label_corr_min)
                .count()
        });
        if let Some(t) = typical.filter(|t| matched(t) > median_matches) {
            template = t.to_vec();
        }
    }
    let mut corr: Vec<f64> = Vec::new();
    for _ in 0..3 {
        corr = shapes
            .iter()
            .map(|s| s.as_ref().map_or(-1.0, |s| correlation(s, &template)))
            .collect();
        let close: Vec<&Vec<f64>> = shapes
            .iter()
            .zip(&corr)
            .filter(|(_, c)| **c >= cfg.label_corr_min)
            .filter_map(|(s, _)| s.as_ref())
            .collect();
        if close.len() < 3 {
            break;
        }
        template = elementwise_median(&close);
    }

    // QRS width from the combined slope energy.
    let e = moving_mean(
        &slope.iter().map(|s| s * s).collect::<Vec<_>>(),
        pt::ms_to_samples(40.0, fs),
    );
    let h = pt::ms_to_samples(cfg.mwi_window_ms, fs);
    let width_at = |b: usize| -> f64 {
        let a = b.saturating_sub(h);
        let z = (b + h + 1).min(n);
        let peak = e[a..z].iter().cloned().fold(0.0, f64::max);
        let thr = cfg.label_width_energy_fraction * peak;
        let mut l = b;
        while l > a && e[l - 1] >= thr {
            l -= 1;
        }
        let mut r = b;
        while r + 1 < z && e[r + 1] >= thr {
            r += 1;
        }
        (r - l) as f64 * 1000.0 / fs
    };
    let dominant_width = |widths: &[f64], corr: &[f64]| -> Option<f64> {
        let mut w: Vec<f64> = widths
            .iter()
            .zip(corr)
            .filter(|(_, c)| **c >= cfg.label_corr_min)
            .map(|(w, _)| *w)
            .collect();
        (!w.is_empty()).then(|| median(&mut w))
    };
    let mut widths: Vec<f64> = beats.iter().map(|&b| width_at(b)).collect();
    let wide = |w: f64, dom: Option<f64>| dom.is_some_and(|d| w > d + cfg.label_width_excess_ms);

    // Beats unlike the dominant shape at their fiducial point but like it a few
    // tens of ms away: the energy peak chose the other lobe of the same QRS.
    // Such a beat's point moves there. A beat that was wide keeps the
    // similarity and width it was found with for its label: a ventricular
    // beat's broad complex can match the dominant shape at some shift by
    // chance (QTDB: 128 of 1282 `.atr` ventricular beats lost their `V`
    // when the shifted match decided), while its point still moves so that
    // paced complexes (sel102) are delineated from the same lobe.
    let mut beats = beats.to_vec();
    let reach = pt::ms_to_samples(cfg.fiducial_realign_ms, fs);
    let near = pt::ms_to_samples(cfg.fiducial_realign_min_ms, fs);
    let step = ((fs / 250.0).floor() as usize).max(1);
    if reach > 0 {
        let orig = beats.clone();
        let dom = dominant_width(&widths, &corr);
        for i in 0..nb {
            if corr[i] >= cfg.label_corr_min || shapes[i].is_none() {
                continue;
            }
            // Strictly inside the halves towards the neighbours: order kept.
            let lo = if i > 0 {
                orig[i] - (orig[i] - orig[i - 1] - 1) / 2
            } else {
                orig[i].saturating_sub(reach)
            };
            let hi = if i + 1 < nb {
                orig[i] + (orig[i + 1] - orig[i] - 1) / 2
            } else {
                orig[i] + reach
            };
            let lo = lo.max(orig[i].saturating_sub(reach));
            let hi = hi.min(orig[i] + reach);
            // Every `step`-th shift first, then the samples around the best
            // one: above 250 Hz the search costs what it costs at 250 Hz
            // (a QRS lobe is several ms wide), which matters for long
            // high-rate recordings with many beats unlike the template.
            let mut best: Option<(f64, usize, Vec<f64>)> = None;
            let consider = |b: usize, best: &mut Option<(f64, usize, Vec<f64>)>| {
                if b == orig[i] || b < lo || b > hi {
                    return;
                }
                if let Some(v) = shape_at(b) {
                    let c = correlation(&v, &template);
                    if best.as_ref().is_none_or(|(bc, _, _)| c > *bc) {
                        *best = Some((c, b, v));
                    }
                }
            };
            for b in (lo..=hi).step_by(step) {
                consider(b, &mut best);
            }
            if step > 1 {
                if let Some(centre) = best.as_ref().map(|x| x.1) {
                    for b in centre.saturating_sub(step - 1)..=centre + step - 1 {
                        consider(b, &mut best);
                    }
                }
            }
            let Some((c, b, v)) = best.filter(|(c, _, _)| *c >= cfg.label_corr_min) else {
                continue;
            };
            let was_wide = wide(widths[i], dom);
            if b.abs_diff(orig[i]) >= near {
                beats[i] = b;
                if !was_wide {
                    corr[i] = c;
                    shapes[i] = Some(v);
                    widths[i] = width_at(b);
                }
            } else if !was_wide {
                // Near: the point stays, the shape counts as matched.
                corr[i] = c;
            }
        }
    }

    let dom_width = dominant_width(&widths, &corr);

    let rr: Vec<Option<f64>> = (0..nb)
        .map(|i| {
            if i == 0 {
                None
            } else {
                Some((beats[i] - beats[i - 1]) as f64)
            }
        })
        .collect();
    let labels = (0..nb)
        .map(|i| {
            if shapes[i].is_none() || weights[i].iter().all(|w| *w <= 0.0) {
                return BeatLabel::Unclassified;
            }
            let lo = i.saturating_sub(8).max(1);
            let hi = (i + 9).min(nb);
            let mut local: Vec<f64> = (lo..hi).filter_map(|j| rr[j]).collect();
            let premature = match rr[i] {
                Some(r) if !local.is_empty() => {
                    r < cfg.label_premature_fraction * median(&mut local)
                }
                _ => false,
            };
            let wide = wide(widths[i], dom_width);
            let similar = corr[i] >= cfg.label_corr_min;
            match (similar, wide, premature) {
                (true, false, false) => BeatLabel::Normal,
                (false, true, _) | (false, _, true) => BeatLabel::Ventricular,
                _ => BeatLabel::Unclassified,
            }
        })
        .collect();
    (beats, labels)
}

#[cfg(test)]
mod median_tests {
    use super::*;

    // Selection against the full sort (oracle), bit for bit, odd and even
    // counts, ties and signed zeros included.
    #[test]
    fn median_by_selection_equals_sorted_median() {
        let mut s = 7u64;
        for n in 0..40usize {
            for round in 0..20usize {
                let v: Vec<f64> = (0..n)
                    .map(|i| {
                        s = s
                            .wrapping_mul(6364136223846793005)
                            .wrapping_add(1442695040888963407);
                        match (i + round) % 6 {
                            0 => 0.0,
                            1 => -0.0,
                            2 => 2.5,
                            _ => (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5,
                        }
                    })
                    .collect();
                let (mut a, mut b) = (v.clone(), v.clone());
                assert_eq!(
                    median(&mut a).to_bits(),
                    median_sorted(&mut b).to_bits(),
                    "{v:?}"
                );
            }
        }
    }
}

#[cfg(test)]
mod realign_tests {
    use super::*;

    /// Invented beats (a logic check): the same biphasic QRS, an R lobe then
    /// an S lobe 40 ms later, every 800 ms; the fiducial points given to the
    /// labeller sit on the R lobe, the S lobe or 20 ms after the S lobe in turn
    /// (40 / 30 / 30 %, so the sample-wise median of all beats is a blur no
    /// beat matches). Every beat must come back on the R lobe (the most common
    /// point), labelled `N`; at 1000 Hz through the coarse-then-fine search.
    fn split_lobes_come_back(fs: f64) {
        let cfg = DetectConfig::default();
        let k = (fs / 250.0).round() as usize;
        let nb = 40;
        let rr = 200 * k;
        let n = rr * (nb + 2);
        let mut x = vec![0.0; n];
        let true_r: Vec<usize> = (1..=nb).map(|j| j * rr).collect();
        let (w, gap) = (3.0 * k as f64, 10.0 * k as f64);
        for &r in &true_r {
            for (i, v) in x.iter_mut().enumerate() {
                let t = i as f64 - r as f64;
                *v += (-(t / w).powi(2)).exp() - 0.9 * (-((t - gap) / w).powi(2)).exp();
            }
        }
        let offsets = [0usize, 10 * k, 15 * k];
        let given: Vec<usize> = true_r
            .iter()
            .enumerate()
            .map(|(j, &r)| {
                r + match j % 10 {
                    0..=3 => offsets[0],
                    4..=6 => offsets[1],
                    _ => offsets[2],
                }
            })
            .collect();
        let lead: &[f64] = &x;
        let weights = vec![vec![1.0]; nb];
        let slope: Vec<f64> = (0..n)
            .map(|i| if i == 0 { 0.0 } else { x[i] - x[i - 1] })
            .collect();
        let (moved, labels) = label_beats(&[lead], &given, &weights, &slope, fs, &cfg);
        assert_eq!(moved, true_r, "fs {fs}");
        assert!(labels.iter().all(|l| *l == BeatLabel::Normal), "{labels:?}");
        // Without the realignment the points stay split (the fault guarded).
        let off = DetectConfig {
            fiducial_realign_ms: 0.0,
            ..cfg
        };
        let (kept, _) = label_beats(&[lead], &given, &weights, &slope, fs, &off);
        assert_eq!(kept, given);
    }

    #[test]
    fn beats_split_between_lobes_come_back_to_one() {
        split_lobes_come_back(250.0);
    }

    #[test]
    fn beats_split_between_lobes_come_back_at_1000_hz() {
        split_lobes_come_back(1000.0);
    }
}
