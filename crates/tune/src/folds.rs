//! Record-level k-fold splitting: every record lands in exactly one held-out
//! fold, beats of one record never straddle folds (beats of a record are
//! strongly correlated, so a beat-level split would leak).

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// One fold: indices of the records fitted on and of the held-out records.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Fold {
    pub train: Vec<usize>,
    pub test: Vec<usize>,
}

/// Split `n` records into `k` folds after a seeded shuffle; fold sizes differ
/// by at most one. Needs `2 <= k <= n`.
pub fn kfold(n: usize, k: usize, seed: u64) -> Result<Vec<Fold>, String> {
    if k < 2 || k > n {
        return Err(format!(
            "folds: allowed 2 to the number of records ({n}), got {k}"
        ));
    }
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut ChaCha8Rng::seed_from_u64(seed));
    Ok((0..k)
        .map(|f| {
            let mut test: Vec<usize> = order
                .iter()
                .enumerate()
                .filter(|(i, _)| i % k == f)
                .map(|(_, &r)| r)
                .collect();
            test.sort_unstable();
            let train = (0..n).filter(|r| !test.contains(r)).collect();
            Fold { train, test }
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn folds_are_disjoint_cover_all_and_balanced() {
        for (n, k) in [(105, 5), (10, 3), (7, 7), (2, 2)] {
            let folds = kfold(n, k, 42).unwrap();
            assert_eq!(folds.len(), k);
            let mut seen = vec![0; n];
            for f in &folds {
                for &r in &f.test {
                    seen[r] += 1;
                    assert!(!f.train.contains(&r), "record {r} both fitted and held out");
                }
                assert_eq!(f.train.len() + f.test.len(), n);
                assert!(f.test.len() == n / k || f.test.len() == n / k + 1);
            }
            assert!(
                seen.iter().all(|&c| c == 1),
                "each record held out once: {seen:?}"
            );
        }
    }

    #[test]
    fn seeded_reproducible_and_seed_matters() {
        assert_eq!(kfold(50, 5, 7).unwrap(), kfold(50, 5, 7).unwrap());
        assert_ne!(kfold(50, 5, 7).unwrap(), kfold(50, 5, 8).unwrap());
    }

    #[test]
    fn bad_k_is_named() {
        let e = kfold(3, 5, 1).unwrap_err();
        assert!(e.contains("folds") && e.contains("got 5"), "{e}");
        assert!(kfold(10, 1, 1).is_err());
    }
}
