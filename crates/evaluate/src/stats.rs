//! Summary statistics of signed errors and Bland–Altman agreement.
//!
//! Conventions: SD is the sample standard deviation (denominator n − 1; `None` below
//! two values); percentiles interpolate linearly between order statistics at
//! position q·(n − 1) (the default of numpy's `percentile`). The split of a spread
//! by record ([`RecordSplit`], [`split_by`]) uses population variances (denominator
//! n) instead, so that its two parts add up in squares.

use serde::{Deserialize, Serialize};

/// Population SD of `pts`' values around their per-key means (`within`) and of
/// those means over the points (`between`): `(between, within)`, with
/// `between² + within²` the population variance of all values. `(0, 0)` when empty.
pub fn split_by<K: Ord + Copy>(pts: &[(K, f64)]) -> (f64, f64) {
    if pts.is_empty() {
        return (0.0, 0.0);
    }
    let mut sums: std::collections::BTreeMap<K, (f64, usize)> = Default::default();
    for &(k, v) in pts {
        let e = sums.entry(k).or_insert((0.0, 0));
        e.0 += v;
        e.1 += 1;
    }
    let n = pts.len() as f64;
    let grand = pts.iter().map(|p| p.1).sum::<f64>() / n;
    let mean = |k: &K| sums[k].0 / sums[k].1 as f64;
    let between = pts
        .iter()
        .map(|p| (mean(&p.0) - grand).powi(2))
        .sum::<f64>()
        / n;
    let within = pts.iter().map(|p| (p.1 - mean(&p.0)).powi(2)).sum::<f64>() / n;
    (between.sqrt(), within.sqrt())
}

/// The differences of an agreement split into a part shared by each record
/// (the spread of the record means) and the rest within records, ms
/// (population SDs, [`split_by`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RecordSplit {
    pub records: usize,
    pub between_records_sd_ms: f64,
    pub within_record_sd_ms: f64,
}

impl RecordSplit {
    /// From `(record key, difference)` pairs; `None` when empty.
    pub fn from_keyed<K: Ord + Copy>(d: &[(K, f64)]) -> Option<RecordSplit> {
        if d.is_empty() {
            return None;
        }
        let (between, within) = split_by(d);
        Some(RecordSplit {
            records: d
                .iter()
                .map(|p| p.0)
                .collect::<std::collections::BTreeSet<_>>()
                .len(),
            between_records_sd_ms: between,
            within_record_sd_ms: within,
        })
    }
}

/// Summary of signed errors (test − reference), all in ms.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ErrorStats {
    /// Number of errors.
    pub n: usize,
    pub mean_ms: Option<f64>,
    /// SD pooled over all beats (sample SD).
    pub sd_ms: Option<f64>,
    /// Mean over records of each record's SD (records with at least two errors).
    pub mean_record_sd_ms: Option<f64>,
    /// Mean absolute error.
    pub mae_ms: Option<f64>,
    /// 95th percentile of |error|.
    pub p95_abs_ms: Option<f64>,
    /// Largest |error|.
    pub max_abs_ms: Option<f64>,
}

/// Arithmetic mean, `None` when empty.
pub fn mean(x: &[f64]) -> Option<f64> {
    (!x.is_empty()).then(|| x.iter().sum::<f64>() / x.len() as f64)
}

/// Sample standard deviation (n − 1), `None` below two values. Two-pass for accuracy.
pub fn sd(x: &[f64]) -> Option<f64> {
    if x.len() < 2 {
        return None;
    }
    let m = mean(x)?;
    let ss: f64 = x.iter().map(|v| (v - m) * (v - m)).sum();
    Some((ss / (x.len() - 1) as f64).sqrt())
}

/// Percentile `q` in [0, 1] with linear interpolation at q·(n − 1).
pub fn percentile(x: &[f64], q: f64) -> Option<f64> {
    if x.is_empty() {
        return None;
    }
    let mut v = x.to_vec();
    v.sort_by(f64::total_cmp);
    let pos = q.clamp(0.0, 1.0) * (v.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    Some(v[lo] + (v[hi] - v[lo]) * (pos - lo as f64))
}

impl ErrorStats {
    /// Statistics of errors grouped by record (each inner slice one record).
    pub fn from_groups(groups: &[&[f64]]) -> ErrorStats {
        let all: Vec<f64> = groups.iter().flat_map(|g| g.iter().copied()).collect();
        let abs: Vec<f64> = all.iter().map(|v| v.abs()).collect();
        let rec_sds: Vec<f64> = groups.iter().filter_map(|g| sd(g)).collect();
        ErrorStats {
            n: all.len(),
            mean_ms: mean(&all),
            sd_ms: sd(&all),
            mean_record_sd_ms: mean(&rec_sds),
            mae_ms: mean(&abs),
            p95_abs_ms: percentile(&abs, 0.95),
            max_abs_ms: abs.iter().copied().reduce(f64::max),
        }
    }

    /// Statistics of one group.
    pub fn from_errors(x: &[f64]) -> ErrorStats {
        Self::from_groups(&[x])
    }
}

/// Bland–Altman agreement of paired measurements (test, reference), in ms.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct BlandAltman {
    pub n: usize,
    /// Mean of test − reference.
    pub bias_ms: Option<f64>,
    /// Sample SD of test − reference.
    pub sd_ms: Option<f64>,
    /// bias − 1.96 SD.
    pub loa_low_ms: Option<f64>,
    /// bias + 1.96 SD.
    pub loa_high_ms: Option<f64>,
    /// Mean absolute difference.
    pub mae_ms: Option<f64>,
    /// (mean of the pair, difference) for the plot; not written to JSON.
    #[serde(skip)]
    pub points: Vec<(f64, f64)>,
    /// Bias and SD on the two halves of the records and their bootstrap
    /// intervals over records, where the pairs are known by record
    /// ([`BlandAltman::by_record`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stability: Option<crate::stability::Stability>,
    /// The differences split by record, where the pairs are known by record.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub by_record: Option<RecordSplit>,
}

impl BlandAltman {
    /// Agreement of `(test, reference)` pairs.
    pub fn from_pairs(pairs: &[(f64, f64)]) -> BlandAltman {
        let d: Vec<f64> = pairs.iter().map(|(t, r)| t - r).collect();
        let abs: Vec<f64> = d.iter().map(|v| v.abs()).collect();
        let bias = mean(&d);
        let s = sd(&d);
        let (lo, hi) = match (bias, s) {
            (Some(b), Some(s)) => (Some(b - 1.96 * s), Some(b + 1.96 * s)),
            _ => (None, None),
        };
        BlandAltman {
            n: d.len(),
            bias_ms: bias,
            sd_ms: s,
            loa_low_ms: lo,
            loa_high_ms: hi,
            mae_ms: mean(&abs),
            points: pairs.iter().map(|(t, r)| ((t + r) / 2.0, t - r)).collect(),
            stability: None,
            by_record: None,
        }
    }

    /// Agreement of `(record position, test, reference)` triples, with the
    /// stability of bias and SD over records (`crate::stability`; records
    /// ordered by position, sensitivity not applicable). `None` when empty.
    pub fn by_record(
        triples: &[(usize, f64, f64)],
        boot: crate::stability::Resampling,
    ) -> Option<BlandAltman> {
        if triples.is_empty() {
            return None;
        }
        let pairs: Vec<(f64, f64)> = triples.iter().map(|&(_, t, r)| (t, r)).collect();
        let mut ba = BlandAltman::from_pairs(&pairs);
        let mut by: std::collections::BTreeMap<usize, Vec<f64>> = Default::default();
        for &(k, t, r) in triples {
            by.entry(k).or_default().push(t - r);
        }
        let recs: Vec<crate::stability::RecordErrors> = by
            .values()
            .map(|e| crate::stability::RecordErrors {
                errors: e,
                tp: 0,
                fn_: 0,
            })
            .collect();
        ba.stability = crate::stability::stability(&recs, boot.replicates, boot.seed);
        let keyed: Vec<(usize, f64)> = triples.iter().map(|&(k, t, r)| (k, t - r)).collect();
        ba.by_record = RecordSplit::from_keyed(&keyed);
        Some(ba)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn record_split_by_hand() {
        // Record 1: 2, 4 (mean 3); record 2: 9 (mean 9). Grand mean 5.
        // Between: (2·(3 − 5)² + (9 − 5)²) / 3 = 24 / 3; within: (1 + 1 + 0) / 3.
        let s = RecordSplit::from_keyed(&[(1, 2.0), (2, 9.0), (1, 4.0)]).unwrap();
        assert_eq!(s.records, 2);
        assert!((s.between_records_sd_ms - 8.0f64.sqrt()).abs() < 1e-12);
        assert!((s.within_record_sd_ms - (2.0f64 / 3.0).sqrt()).abs() < 1e-12);
        assert!(RecordSplit::from_keyed::<u8>(&[]).is_none());
    }

    #[test]
    fn hand_computed_mean_sd() {
        // 2, 4, 4, 4, 5, 5, 7, 9: mean 5, sum of squares 32, sample SD sqrt(32/7).
        let x = [2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0];
        assert_eq!(mean(&x), Some(5.0));
        assert!((sd(&x).unwrap() - (32.0f64 / 7.0).sqrt()).abs() < 1e-12);
        assert_eq!(sd(&[1.0]), None);
    }

    #[test]
    fn percentile_matches_numpy_linear() {
        // numpy.percentile([1,2,3,4,5,6,7,8,9,10], 95) = 9.55 (linear, position 8.55).
        let x: Vec<f64> = (1..=10).map(f64::from).collect();
        assert!((percentile(&x, 0.95).unwrap() - 9.55).abs() < 1e-12);
        assert_eq!(percentile(&x, 0.0), Some(1.0));
        assert_eq!(percentile(&x, 1.0), Some(10.0));
        assert_eq!(percentile(&[3.0], 0.95), Some(3.0));
    }

    #[test]
    fn grouped_stats_pool_and_average_record_sds() {
        let a = [1.0, 3.0]; // SD sqrt(2)
        let b = [-2.0, 2.0, 0.0]; // SD 2
        let c = [10.0]; // no SD
        let s = ErrorStats::from_groups(&[&a, &b, &c]);
        assert_eq!(s.n, 6);
        assert!((s.mean_ms.unwrap() - 14.0 / 6.0).abs() < 1e-12);
        assert!((s.mean_record_sd_ms.unwrap() - (2f64.sqrt() + 2.0) / 2.0).abs() < 1e-12);
        assert!((s.mae_ms.unwrap() - 18.0 / 6.0).abs() < 1e-12);
        assert_eq!(s.max_abs_ms, Some(10.0));
        // Pooled SD equals the SD of the concatenation.
        let all = [1.0, 3.0, -2.0, 2.0, 0.0, 10.0];
        assert!((s.sd_ms.unwrap() - sd(&all).unwrap()).abs() < 1e-12);
    }

    #[test]
    fn bland_altman_limits() {
        // Differences 1, 2, 3: bias 2, SD 1, limits 2 ± 1.96.
        let p = [(11.0, 10.0), (22.0, 20.0), (33.0, 30.0)];
        let ba = BlandAltman::from_pairs(&p);
        assert_eq!(ba.bias_ms, Some(2.0));
        assert!((ba.sd_ms.unwrap() - 1.0).abs() < 1e-12);
        assert!((ba.loa_low_ms.unwrap() - 0.04).abs() < 1e-12);
        assert!((ba.loa_high_ms.unwrap() - 3.96).abs() < 1e-12);
        assert_eq!(ba.points[0], (10.5, 1.0));
    }
}
