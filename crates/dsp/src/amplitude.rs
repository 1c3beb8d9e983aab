//! How large a record's deflections are, to catch samples in the wrong unit.
//!
//! Every stage takes samples in millivolts, and a few thresholds are absolute
//! (pacing spikes, flat leads, the smallest T wave). A CSV column of
//! microvolts without a unit in its header, or a WFDB header whose gain is
//! off by a factor of 1000, passes every format check and then misleads
//! those thresholds: microvolts read as millivolts make noise look like
//! pacing spikes; volts read as millivolts make every lead flat. The check
//! here compares the record's typical peak-to-peak range with the range a
//! surface ECG can have.
//!
//! Typical range of a lead: the signal is cut into consecutive blocks of
//! `block` samples (the last, shorter block is left out unless it is the
//! only one), each block's peak-to-peak range is taken over its finite
//! samples (a block with fewer than half its samples finite is skipped), and
//! the median over blocks is returned. A block of two seconds holds at least
//! one QRS complex at any heart rate above 30 bpm, so the median is about the
//! QRS amplitude plus the baseline drift within a block; a burst of artefact
//! in a minority of blocks does not move it. The record's typical range is
//! the median (mean of the two middle values for an even count) over its
//! leads with a nonzero range.
//!
//! Surface ECG QRS amplitudes lie between about 0.3 mV (low-voltage limb
//! leads) and 5 mV (precordial leads in left ventricular hypertrophy) (common
//! practice); over the 105 QT Database and 100 LUDB records the record range
//! measured this way is 0.46 to 4.28 mV. The default plausible span, 0.05 to
//! 20 mV ([`crate::filter::FilterConfig::amplitude_min_mv`] and
//! `amplitude_max_mv`), leaves an order of magnitude on both sides and is
//! still far from a factor of 1000.

/// Where a record's typical range lies against the plausible span.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AmplitudeClass {
    /// Within the span (bounds included).
    Plausible,
    /// Larger than the span: most likely microvolts read as millivolts.
    AboveSpan,
    /// Smaller than the span: most likely volts read as millivolts.
    BelowSpan,
}

/// Typical peak-to-peak range of one lead (module docs), in the lead's unit;
/// `None` when no block has enough finite samples. `block` is clamped to at
/// least one sample.
pub fn typical_range(samples: &[f64], block: usize) -> Option<f64> {
    let block = block.max(1);
    let mut ranges: Vec<f64> = if samples.len() < block {
        block_range(samples).into_iter().collect()
    } else {
        samples
            .chunks_exact(block)
            .filter_map(block_range)
            .collect()
    };
    median(&mut ranges)
}

/// Peak-to-peak range of the finite samples of one block; `None` when fewer
/// than half of them are finite.
fn block_range(b: &[f64]) -> Option<f64> {
    let (mut lo, mut hi, mut n) = (f64::INFINITY, f64::NEG_INFINITY, 0usize);
    for &v in b.iter().filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
        n += 1;
    }
    (n > 0 && 2 * n >= b.len()).then_some(hi - lo)
}

/// Median (mean of the two middle values for an even count); `None` when empty.
fn median(v: &mut [f64]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_unstable_by(f64::total_cmp);
    let m = v.len() / 2;
    Some(if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    })
}

/// Typical range of a record: the median of [`typical_range`] over the leads
/// whose range is nonzero (flat and missing leads say nothing about the unit);
/// `None` when no lead has one.
pub fn record_range(leads: &[&[f64]], block: usize) -> Option<f64> {
    let mut r: Vec<f64> = leads
        .iter()
        .filter_map(|l| typical_range(l, block))
        .filter(|&r| r > 0.0)
        .collect();
    median(&mut r)
}

/// Classify a typical range against the span `[min, max]`.
pub fn classify(range: f64, min: f64, max: f64) -> AmplitudeClass {
    if range > max {
        AmplitudeClass::AboveSpan
    } else if range < min {
        AmplitudeClass::BelowSpan
    } else {
        AmplitudeClass::Plausible
    }
}

/// The record's typical range ([`record_range`], blocks of
/// `cfg.amplitude_block_s` at `fs` Hz) and its class against the span
/// `cfg.amplitude_min_mv` to `cfg.amplitude_max_mv`; `None` when every lead is
/// flat or missing.
pub fn assess(
    leads: &[&[f64]],
    fs: f64,
    cfg: &crate::filter::FilterConfig,
) -> Option<(f64, AmplitudeClass)> {
    let block = block_samples(fs, cfg);
    record_range(leads, block).map(|r| (r, classify(r, cfg.amplitude_min_mv, cfg.amplitude_max_mv)))
}

/// The block of [`assess`] in samples at `fs` Hz.
pub fn block_samples(fs: f64, cfg: &crate::filter::FilterConfig) -> usize {
    (cfg.amplitude_block_s * fs).round() as usize
}

/// [`assess`] from each lead's [`typical_range`] (blocks of
/// [`block_samples`]), for a caller that sees one lead at a time.
pub fn assess_ranges(
    ranges: &[Option<f64>],
    cfg: &crate::filter::FilterConfig,
) -> Option<(f64, AmplitudeClass)> {
    let mut r: Vec<f64> = ranges
        .iter()
        .flatten()
        .copied()
        .filter(|&r| r > 0.0)
        .collect();
    median(&mut r).map(|r| (r, classify(r, cfg.amplitude_min_mv, cfg.amplitude_max_mv)))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slow, obvious oracle: every block sorted, first and last finite value.
    fn oracle(samples: &[f64], block: usize) -> Option<f64> {
        let blocks: Vec<&[f64]> = if samples.len() < block {
            vec![samples]
        } else {
            samples.chunks(block).filter(|b| b.len() == block).collect()
        };
        let mut r = Vec::new();
        for b in blocks {
            let mut f: Vec<f64> = b.iter().copied().filter(|v| v.is_finite()).collect();
            if f.is_empty() || f.len() * 2 < b.len() {
                continue;
            }
            f.sort_by(|a, b| a.partial_cmp(b).unwrap());
            r.push(f[f.len() - 1] - f[0]);
        }
        r.sort_by(|a, b| a.partial_cmp(b).unwrap());
        match r.len() {
            0 => None,
            n if n % 2 == 1 => Some(r[n / 2]),
            n => Some((r[n / 2 - 1] + r[n / 2]) / 2.0),
        }
    }

    #[test]
    fn matches_the_oracle_on_pseudo_random_signals_with_gaps() {
        let mut s = 0x9e37_79b9_7f4a_7c15_u64;
        let mut next = || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        for n in [0usize, 1, 7, 100, 999, 1000, 1001, 5003] {
            for block in [1usize, 3, 250, 1000, 2000] {
                let x: Vec<f64> = (0..n)
                    .map(|_| {
                        let u = next();
                        if u < 0.2 {
                            f64::NAN
                        } else {
                            (u - 0.6) * 4.0
                        }
                    })
                    .collect();
                assert_eq!(
                    typical_range(&x, block),
                    oracle(&x, block),
                    "n {n} block {block}"
                );
            }
        }
    }

    #[test]
    fn sine_blocks_give_twice_the_amplitude() {
        // A 1-mV-amplitude sine at 1 Hz sampled at 500 Hz: every 2-s block holds
        // whole periods, so its range is 2 mV up to the sampling of the peaks.
        let fs = 500.0;
        let x: Vec<f64> = (0..5000)
            .map(|i| (2.0 * std::f64::consts::PI * i as f64 / fs).sin())
            .collect();
        let r = typical_range(&x, 1000).unwrap();
        assert!((r - 2.0).abs() < 1e-4, "{r}");
    }

    #[test]
    fn a_burst_in_a_minority_of_blocks_does_not_move_it() {
        let mut x: Vec<f64> = (0..10_000).map(|i| ((i % 200) as f64) / 200.0).collect();
        for v in &mut x[2000..4000] {
            *v *= 100.0;
        }
        assert!((typical_range(&x, 1000).unwrap() - 0.995).abs() < 1e-12);
    }

    #[test]
    fn flat_and_missing_leads_are_left_out_of_the_record_range() {
        let a: Vec<f64> = (0..4000).map(|i| (i % 100) as f64 * 0.01).collect();
        let flat = vec![0.3; 4000];
        let nan = vec![f64::NAN; 4000];
        let r = record_range(&[&a, &flat, &nan], 1000).unwrap();
        assert!((r - 0.99).abs() < 1e-12, "{r}");
        assert_eq!(record_range(&[&flat, &nan], 1000), None);
    }

    #[test]
    fn classification_includes_the_bounds() {
        assert_eq!(classify(0.05, 0.05, 20.0), AmplitudeClass::Plausible);
        assert_eq!(classify(20.0, 0.05, 20.0), AmplitudeClass::Plausible);
        assert_eq!(classify(1200.0, 0.05, 20.0), AmplitudeClass::AboveSpan);
        assert_eq!(classify(0.0012, 0.05, 20.0), AmplitudeClass::BelowSpan);
    }
}
