//! One-to-one matching of event times (beats) between a reference and a test.
//!
//! Rule (kept simple so that an independent implementation gives the same pairs):
//! every (reference, test) pair with `|test − reference| ≤ max_dist` samples is a
//! candidate; candidates are taken in order of increasing distance, ties broken by
//! the reference index then the test index, and a candidate is accepted when neither
//! of its events is already matched. `max_dist = floor(window_ms · fs / 1000)`, so the
//! window is inclusive: 150 ms at 250 Hz is 37 samples.
//!
//! Sensitivity = TP / (TP + FN), positive predictivity = TP / (TP + FP), in percent
//! (ANSI/AAMI EC57 practice, with the 150 ms window of common practice).

use serde::{Deserialize, Serialize};

/// Window in ms → largest matching distance in samples (inclusive).
pub fn window_samples(window_ms: f64, fs: f64) -> i64 {
    (window_ms * fs / 1000.0 + 1e-9).floor() as i64
}

/// Match sorted-or-not event samples; returns `(reference index, test index)` pairs
/// sorted by reference index.
pub fn match_events(reference: &[i64], test: &[i64], max_dist: i64) -> Vec<(usize, usize)> {
    // Test indices sorted by sample, so the candidates of one reference event are a
    // contiguous run found by binary search.
    let mut order: Vec<usize> = (0..test.len()).collect();
    order.sort_by_key(|&j| (test[j], j));
    let sorted: Vec<i64> = order.iter().map(|&j| test[j]).collect();
    let mut cand: Vec<(i64, usize, usize)> = Vec::new();
    for (i, &r) in reference.iter().enumerate() {
        let lo = sorted.partition_point(|&t| t < r - max_dist);
        for (k, &t) in sorted.iter().enumerate().skip(lo) {
            if t > r + max_dist {
                break;
            }
            cand.push(((t - r).abs(), i, order[k]));
        }
    }
    greedy(cand, reference.len(), test.len())
}

fn greedy(mut cand: Vec<(i64, usize, usize)>, n_ref: usize, n_test: usize) -> Vec<(usize, usize)> {
    cand.sort_unstable();
    let mut ref_used = vec![false; n_ref];
    let mut test_used = vec![false; n_test];
    let mut out = Vec::new();
    for (_, i, j) in cand {
        if !ref_used[i] && !test_used[j] {
            ref_used[i] = true;
            test_used[j] = true;
            out.push((i, j));
        }
    }
    out.sort_unstable();
    out
}

/// True positives, false negatives and false positives of a detection comparison.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Counts {
    pub tp: u64,
    #[serde(rename = "fn")]
    pub fn_: u64,
    pub fp: u64,
}

impl Counts {
    /// Sensitivity in percent, `None` without reference events.
    pub fn sensitivity_pct(&self) -> Option<f64> {
        ratio_pct(self.tp, self.tp + self.fn_)
    }

    /// Positive predictivity in percent, `None` without test events.
    pub fn ppv_pct(&self) -> Option<f64> {
        ratio_pct(self.tp, self.tp + self.fp)
    }

    /// Element-wise sum.
    pub fn add(&mut self, o: &Counts) {
        self.tp += o.tp;
        self.fn_ += o.fn_;
        self.fp += o.fp;
    }
}

fn ratio_pct(num: u64, den: u64) -> Option<f64> {
    (den > 0).then(|| 100.0 * num as f64 / den as f64)
}

/// Beat comparison counts. Test events outside `test_span` (inclusive) are ignored
/// (not counted as false positives): references that annotate only part of a record.
pub fn beat_counts(
    reference: &[i64],
    test: &[i64],
    max_dist: i64,
    test_span: Option<(i64, i64)>,
) -> (Counts, Vec<(usize, usize)>) {
    let pairs = match_events(reference, test, max_dist);
    let mut matched_test = vec![false; test.len()];
    for &(_, j) in &pairs {
        matched_test[j] = true;
    }
    let fp = test
        .iter()
        .zip(&matched_test)
        .filter(|(&t, &m)| !m && test_span.is_none_or(|(lo, hi)| t >= lo && t <= hi))
        .count() as u64;
    let tp = pairs.len() as u64;
    (
        Counts {
            tp,
            fn_: reference.len() as u64 - tp,
            fp,
        },
        pairs,
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Slow obvious oracle: every pair, sorted, greedy (no binary search).
    fn oracle(reference: &[i64], test: &[i64], max_dist: i64) -> Vec<(usize, usize)> {
        let mut cand = Vec::new();
        for (i, &r) in reference.iter().enumerate() {
            for (j, &t) in test.iter().enumerate() {
                if (t - r).abs() <= max_dist {
                    cand.push(((t - r).abs(), i, j));
                }
            }
        }
        greedy(cand, reference.len(), test.len())
    }

    #[test]
    fn window_is_floor_of_ms_times_fs() {
        // 150 ms at 250 Hz = 37.5 samples → 37; at 500 Hz exactly 75; at 360 Hz exactly 54.
        assert_eq!(window_samples(150.0, 250.0), 37);
        assert_eq!(window_samples(150.0, 500.0), 75);
        assert_eq!(window_samples(150.0, 360.0), 54);
    }

    #[test]
    fn hand_computed_example() {
        // ref 100, 300, 500; test 110 (d=10), 290 (d=10), 330 (d=30 to ref 300), 900.
        // 300 takes 290 (closer than 330); 330 is left unmatched; 500 has none within 37.
        let r = [100, 300, 500];
        let t = [110, 290, 330, 900];
        let (c, pairs) = beat_counts(&r, &t, 37, None);
        assert_eq!(pairs, vec![(0, 0), (1, 1)]);
        assert_eq!(
            c,
            Counts {
                tp: 2,
                fn_: 1,
                fp: 2
            }
        );
        assert!((c.sensitivity_pct().unwrap() - 200.0 / 3.0).abs() < 1e-12);
        assert!((c.ppv_pct().unwrap() - 50.0).abs() < 1e-12);
        // A span excluding 900 removes one false positive.
        let (c, _) = beat_counts(&r, &t, 37, Some((0, 600)));
        assert_eq!(c.fp, 1);
    }

    #[test]
    fn window_edge_is_inclusive() {
        assert_eq!(match_events(&[100], &[137], 37), vec![(0, 0)]);
        assert!(match_events(&[100], &[138], 37).is_empty());
        assert_eq!(match_events(&[100], &[63], 37), vec![(0, 0)]);
    }

    #[test]
    fn ties_go_to_lower_reference_then_lower_test_index() {
        // Test 200 is 20 from both refs 180 and 220: ref 0 wins the tie.
        assert_eq!(match_events(&[180, 220], &[200], 37), vec![(0, 0)]);
        // Ref 200 equally near tests 180 and 220: test 0 wins.
        assert_eq!(match_events(&[200], &[180, 220], 37), vec![(0, 0)]);
    }

    #[test]
    fn agrees_with_oracle_on_pseudo_random_sequences() {
        // Deterministic LCG (Knuth MMIX constants) so the test needs no RNG crate.
        let mut s: u64 = 12345;
        let mut next = |m: u64| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 33) % m
        };
        for _ in 0..300 {
            let n = next(30) as usize;
            let m = next(30) as usize;
            let r: Vec<i64> = (0..n).map(|_| next(3000) as i64).collect();
            let t: Vec<i64> = (0..m).map(|_| next(3000) as i64).collect();
            let d = next(200) as i64;
            let fast = match_events(&r, &t, d);
            assert_eq!(fast, oracle(&r, &t, d));
            // Maximality: no unmatched pair within the window remains.
            let ru: Vec<bool> = (0..n).map(|i| fast.iter().any(|p| p.0 == i)).collect();
            let tu: Vec<bool> = (0..m).map(|j| fast.iter().any(|p| p.1 == j)).collect();
            for i in 0..n {
                for j in 0..m {
                    assert!(ru[i] || tu[j] || (t[j] - r[i]).abs() > d);
                }
            }
        }
    }

    #[test]
    fn empty_inputs() {
        let (c, p) = beat_counts(&[], &[], 10, None);
        assert!(p.is_empty());
        assert_eq!(c.sensitivity_pct(), None);
        assert_eq!(c.ppv_pct(), None);
    }
}
