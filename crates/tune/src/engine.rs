//! The search engine: memoised (candidate, record) results, record subsets,
//! the strategies run on a subset, and record-level cross-validation.
//!
//! Each candidate is evaluated at most once per record; any set of records is
//! scored by pooling those records' results ([`Summary::pool`]). Fitting code
//! only ever receives a [`Subset`] of the training records: it has no way to
//! name or pool a held-out record, and the held-out fold is scored afterwards
//! through its own [`Subset`].

use crate::data::Evaluate;
use crate::folds::{kfold, Fold};
use crate::objective::{RecordResult, Score, Summary};
use crate::space::{Candidate, SearchSpace, Strategy, TunedConfig};
use crate::strategy;
use crate::TuneError;
use rayon::prelude::*;
use std::collections::HashMap;
use std::sync::atomic::{AtomicU64, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, OnceLock};

/// Progress of a search, for a progress bar.
#[derive(Debug, Clone, PartialEq)]
pub struct Progress {
    /// (candidate, record) evaluations done.
    pub done: u64,
    /// Evaluations expected (an estimate for coordinate descent).
    pub total: u64,
    /// Best objective so far in the current phase.
    pub best: Option<f64>,
    /// What is being searched (`all records`, `fold 2/5`).
    pub phase: String,
}

type Outcome = Result<Arc<RecordResult>, String>;

struct Entry {
    cand: Candidate,
    config: Result<Arc<TunedConfig>, String>,
    results: Vec<OnceLock<Outcome>>,
}

/// Memoised evaluations of candidates on records.
pub struct Engine<'a> {
    space: &'a SearchSpace,
    eval: &'a dyn Evaluate,
    n_records: usize,
    memo: Mutex<HashMap<String, Arc<Entry>>>,
    order: Mutex<Vec<String>>,
    progress: &'a (dyn Fn(&Progress) + Sync),
    done: AtomicU64,
    total: AtomicU64,
    best: Mutex<(String, Option<f64>)>,
}

impl<'a> Engine<'a> {
    pub fn new(
        space: &'a SearchSpace,
        eval: &'a dyn Evaluate,
        progress: &'a (dyn Fn(&Progress) + Sync),
    ) -> Self {
        Engine {
            space,
            eval,
            n_records: eval.record_names().len(),
            memo: Mutex::new(HashMap::new()),
            order: Mutex::new(Vec::new()),
            progress,
            done: AtomicU64::new(0),
            total: AtomicU64::new(0),
            best: Mutex::new((String::new(), None)),
        }
    }

    fn entry(&self, c: &Candidate) -> Arc<Entry> {
        let key = c.key();
        let mut memo = self.memo.lock().unwrap_or_else(|e| e.into_inner());
        Arc::clone(memo.entry(key.clone()).or_insert_with(|| {
            self.order
                .lock()
                .unwrap_or_else(|e| e.into_inner())
                .push(key);
            Arc::new(Entry {
                cand: c.clone(),
                config: self
                    .space
                    .config_for(c)
                    .map(Arc::new)
                    .map_err(|e| e.to_string()),
                results: (0..self.n_records).map(|_| OnceLock::new()).collect(),
            })
        }))
    }

    fn set_phase(&self, phase: &str, expected: u64) {
        *self.best.lock().unwrap_or_else(|e| e.into_inner()) = (phase.to_string(), None);
        self.total.fetch_add(expected, Ordering::Relaxed);
    }

    fn report(&self, best: Option<f64>) {
        let mut b = self.best.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(v) = best {
            if b.1.is_none_or(|x| v < x) {
                b.1 = Some(v);
            }
        }
        let done = self.done.load(Ordering::Relaxed);
        let total = self.total.load(Ordering::Relaxed).max(done);
        (self.progress)(&Progress {
            done,
            total,
            best: b.1,
            phase: b.0.clone(),
        });
    }

    /// Evaluate every (candidate, record) pair not yet known, in parallel;
    /// candidates sharing an upstream key run together so the per-record
    /// cache is rebuilt once per key.
    fn ensure(&self, cands: &[Candidate], records: &[usize]) {
        let entries: Vec<Arc<Entry>> = cands.iter().map(|c| self.entry(c)).collect();
        let mut work: Vec<(usize, usize, String)> = Vec::new();
        let remaining: Vec<AtomicUsize> = entries
            .iter()
            .enumerate()
            .map(|(k, e)| {
                let Ok(cfg) = &e.config else {
                    return AtomicUsize::new(0);
                };
                let key = cfg.upstream_key();
                let mut n = 0;
                for &r in records {
                    if e.results[r].get().is_none() {
                        work.push((k, r, key.clone()));
                        n += 1;
                    }
                }
                AtomicUsize::new(n)
            })
            .collect();
        // One upstream key at a time: the threads never evict each other's
        // cached record (stable sort keeps the candidate order within a key).
        work.sort_by(|a, b| a.2.cmp(&b.2));
        let mut groups: Vec<Vec<(usize, usize)>> = Vec::new();
        for (i, (k, r, key)) in work.iter().enumerate() {
            if i == 0 || work[i - 1].2 != *key {
                groups.push(Vec::new());
            }
            groups.last_mut().expect("pushed").push((*k, *r));
        }
        for group in groups {
            self.run_group(group, &entries, &remaining, records);
        }
    }

    fn run_group(
        &self,
        group: Vec<(usize, usize)>,
        entries: &[Arc<Entry>],
        remaining: &[AtomicUsize],
        records: &[usize],
    ) {
        group.into_par_iter().for_each(|(k, r)| {
            let e = &entries[k];
            let Ok(cfg) = &e.config else { return };
            let res = self
                .eval
                .evaluate(cfg, r)
                .map(Arc::new)
                .map_err(|x| x.to_string());
            let _ = e.results[r].set(res);
            self.done.fetch_add(1, Ordering::Relaxed);
            let finished = remaining[k].fetch_sub(1, Ordering::AcqRel) == 1;
            let best = finished.then(|| self.pooled(e, records).objective);
            self.report(best);
        });
    }

    fn pooled(&self, e: &Entry, records: &[usize]) -> Score {
        let invalid = Score {
            objective: f64::INFINITY,
            summary: Summary::default(),
        };
        if e.config.is_err() {
            return invalid;
        }
        let mut rs = Vec::with_capacity(records.len());
        for &r in records {
            match e.results[r].get() {
                Some(Ok(x)) => rs.push(Arc::clone(x)),
                _ => return invalid,
            }
        }
        let summary = Summary::pool(rs.iter().map(|a| a.as_ref()));
        Score {
            objective: self.space.objective.value(&summary),
            summary,
        }
    }

    /// Why a candidate has no score: its configuration error or the first
    /// record error; `None` when it is valid and fully evaluated.
    pub fn problem(&self, c: &Candidate) -> Option<String> {
        let e = self.entry(c);
        if let Err(m) = &e.config {
            return Some(m.clone());
        }
        e.results.iter().find_map(|r| match r.get() {
            Some(Err(m)) => Some(m.clone()),
            _ => None,
        })
    }

    /// True when `c` has a result (or error) on every record of `records`.
    pub fn complete_on(&self, c: &Candidate, records: &[usize]) -> bool {
        let e = self.entry(c);
        e.config.is_err() || records.iter().all(|&r| e.results[r].get().is_some())
    }

    /// Every candidate evaluated so far, in first-seen order.
    pub fn candidates(&self) -> Vec<Candidate> {
        let order = self.order.lock().unwrap_or_else(|e| e.into_inner()).clone();
        let memo = self.memo.lock().unwrap_or_else(|e| e.into_inner());
        order.iter().map(|k| memo[k].cand.clone()).collect()
    }

    /// A view of some records (the only way to score).
    pub fn subset<'s>(&'s self, records: Vec<usize>) -> Subset<'s> {
        Subset {
            engine: self,
            records,
        }
    }
}

/// Some records of an [`Engine`]; scores pool these records only.
pub struct Subset<'s> {
    engine: &'s Engine<'s>,
    records: Vec<usize>,
}

impl Subset<'_> {
    /// Number of records.
    pub fn len(&self) -> usize {
        self.records.len()
    }

    /// True without records.
    pub fn is_empty(&self) -> bool {
        self.records.is_empty()
    }

    /// Scores of `cands` on these records (infinite objective when invalid).
    pub fn scores(&self, cands: &[Candidate]) -> Vec<Score> {
        self.engine.ensure(cands, &self.records);
        let scores: Vec<Score> = cands
            .iter()
            .map(|c| self.engine.pooled(&self.engine.entry(c), &self.records))
            .collect();
        // Candidates answered from the memo finish no work item: report here too.
        let best = scores
            .iter()
            .map(|s| s.objective)
            .fold(f64::INFINITY, f64::min);
        self.engine.report(best.is_finite().then_some(best));
        scores
    }
}

/// Result of one search on one subset.
#[derive(Debug, Clone)]
pub struct SearchResult {
    pub best: Candidate,
    pub score: Score,
}

/// Run the space's strategy on `subset`. `fixed` are the candidates of grid
/// and random search (the same for every subset).
pub fn search(space: &SearchSpace, subset: &Subset, fixed: &[Candidate]) -> SearchResult {
    match space.search.strategy {
        Strategy::Grid | Strategy::Random => {
            let scores = subset.scores(fixed);
            // Ties: the earlier candidate (the base comes first in random search).
            let k = (0..fixed.len())
                .min_by(|&a, &b| scores[a].objective.total_cmp(&scores[b].objective))
                .unwrap_or(0);
            SearchResult {
                best: fixed[k].clone(),
                score: scores[k].clone(),
            }
        }
        Strategy::Coordinate => {
            let (best, _) =
                strategy::coordinate_descent(space, space.base_candidate(), &mut |cs| {
                    subset.scores(cs).into_iter().map(|s| s.objective).collect()
                });
            let score = subset.scores(std::slice::from_ref(&best)).remove(0);
            SearchResult { best, score }
        }
    }
}

/// One cross-validation fold.
#[derive(Debug, Clone)]
pub struct FoldResult {
    pub fold: usize,
    pub train: Vec<usize>,
    pub test: Vec<usize>,
    /// Chosen on the training records.
    pub chosen: Candidate,
    pub train_score: Score,
    /// The chosen candidate on the held-out records.
    pub test_score: Score,
    /// The base configuration on the held-out records (for comparison; it
    /// is not fitted, so this is no leak).
    pub test_base_score: Score,
}

/// Everything a tuning run found.
#[derive(Debug, Clone)]
pub struct CvResult {
    pub records: Vec<String>,
    pub folds: Vec<FoldResult>,
    /// The search on all records: the configuration to use.
    pub final_best: Candidate,
    pub final_score: Score,
    /// The base configuration on all records.
    pub base: Candidate,
    pub base_score: Score,
    /// Every candidate evaluated on all records, with its score there.
    pub all_records: Vec<(Candidate, Score)>,
    /// Candidates that could not be scored and why.
    pub problems: Vec<(Candidate, String)>,
}

fn expected_work(space: &SearchSpace, fixed: usize, n: usize) -> u64 {
    let per = match space.search.strategy {
        Strategy::Grid | Strategy::Random => fixed,
        Strategy::Coordinate => {
            1 + space.search.rounds
                * space
                    .params
                    .iter()
                    .map(|p| p.grid(space.search.steps).len().saturating_sub(1))
                    .sum::<usize>()
        }
    };
    (per * n) as u64
}

/// Cross-validate the space's search over the evaluator's records with
/// `k` record-level folds (seeded), then search all records for the final
/// configuration. Runs on the current rayon pool.
pub fn cross_validate(
    space: &SearchSpace,
    eval: &dyn Evaluate,
    k: usize,
    seed: u64,
    progress: &(dyn Fn(&Progress) + Sync),
) -> Result<CvResult, TuneError> {
    let names = eval.record_names();
    let n = names.len();
    let folds: Vec<Fold> = kfold(n, k, seed).map_err(TuneError::Options)?;
    let fixed: Vec<Candidate> = match space.search.strategy {
        Strategy::Grid => strategy::grid(space).map_err(TuneError::Options)?,
        Strategy::Random => strategy::random(space, space.search.candidates, seed),
        Strategy::Coordinate => Vec::new(),
    };
    let engine = Engine::new(space, eval, progress);
    let all: Vec<usize> = (0..n).collect();
    // Grid and random: every candidate on every record once, first; the folds
    // then only pool. Coordinate descent depends on the training set, so it
    // runs per fold (repeated evaluations come from the memo).
    engine.set_phase("all records", expected_work(space, fixed.len(), n));
    let everything = engine.subset(all.clone());
    let fin = search(space, &everything, &fixed);
    let mut fold_results = Vec::new();
    for (i, f) in folds.iter().enumerate() {
        let phase = format!("fold {}/{}", i + 1, folds.len());
        let extra = if space.search.strategy == Strategy::Coordinate {
            expected_work(space, 0, f.train.len())
        } else {
            0
        };
        engine.set_phase(&phase, extra);
        let fitted = {
            let train = engine.subset(f.train.clone());
            search(space, &train, &fixed)
        };
        let held_out = engine.subset(f.test.clone());
        let test_score = held_out
            .scores(std::slice::from_ref(&fitted.best))
            .remove(0);
        let test_base_score = held_out
            .scores(std::slice::from_ref(&space.base_candidate()))
            .remove(0);
        fold_results.push(FoldResult {
            fold: i + 1,
            train: f.train.clone(),
            test: f.test.clone(),
            chosen: fitted.best,
            train_score: fitted.score,
            test_score,
            test_base_score,
        });
    }
    let base = space.base_candidate();
    let base_score = everything.scores(std::slice::from_ref(&base)).remove(0);
    // Only candidates already scored on every record (coordinate descent
    // leaves fold-specific candidates scored on their training records only).
    let cands: Vec<Candidate> = engine
        .candidates()
        .into_iter()
        .filter(|c| engine.complete_on(c, &all))
        .collect();
    let scores = everything.scores(&cands);
    let problems = cands
        .iter()
        .filter_map(|c| engine.problem(c).map(|p| (c.clone(), p)))
        .collect();
    Ok(CvResult {
        records: names,
        folds: fold_results,
        final_best: fin.best,
        final_score: fin.score,
        base,
        base_score,
        all_records: cands.into_iter().zip(scores).collect(),
        problems,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::objective::fiducial_index;
    use tendline_evaluate::matching::Counts;
    use tendline_evaluate::Fiducial;

    /// Record `r` is best at `t_xi_end = opt[r]`: its QRS-onset errors are
    /// ±100·|x − opt| ms, so the pooled SD grows with the distance.
    struct Synthetic {
        opt: Vec<f64>,
    }

    impl Evaluate for Synthetic {
        fn record_names(&self) -> Vec<String> {
            (0..self.opt.len()).map(|i| format!("r{i}")).collect()
        }
        fn evaluate(&self, cfg: &TunedConfig, r: usize) -> Result<RecordResult, TuneError> {
            let d = 100.0 * (cfg.delineate.t_xi_end - self.opt[r]) + 1.0;
            let mut out = RecordResult::default();
            let q = fiducial_index(Fiducial::QrsOn);
            out.errors[q] = vec![d, -d];
            out.counts[q] = Counts {
                tp: 2,
                fn_: 0,
                fp: 0,
            };
            Ok(out)
        }
    }

    fn space(strategy: &str) -> SearchSpace {
        let base: toml::Table = toml::from_str("[delineate]\nt_xi_end = 0.5\n").unwrap();
        SearchSpace::parse(
            &format!(
                "[search]\nstrategy = '{strategy}'\nsteps = 9\n[params.delineate]\nt_xi_end = {{ min = 0.1, max = 0.9 }}\n"
            ),
            "space.toml",
            &base,
        )
        .unwrap()
    }

    #[test]
    fn held_out_scores_never_see_fitted_records_and_fits_never_see_held_out() {
        for strategy in ["grid", "coordinate"] {
            let s = space(strategy);
            let n = 12;
            let clean = Synthetic { opt: vec![0.3; n] };
            let folds = kfold(n, 3, 9).unwrap();
            // Poison fold 1's held-out records: they now favour 0.9 strongly.
            let mut opt = vec![0.3; n];
            for &r in &folds[0].test {
                opt[r] = 0.9;
            }
            let poisoned = Synthetic { opt };
            let quiet = |_: &Progress| {};
            let a = cross_validate(&s, &clean, 3, 9, &quiet).unwrap();
            let b = cross_validate(&s, &poisoned, 3, 9, &quiet).unwrap();
            assert_eq!(a.folds[0].test, folds[0].test);
            // Fold 1 fits on the same records in both runs: same choice, same training score.
            assert_eq!(a.folds[0].chosen, b.folds[0].chosen, "{strategy}");
            assert_eq!(a.folds[0].train_score, b.folds[0].train_score, "{strategy}");
            assert!((a.folds[0].chosen.0[0].as_float().unwrap() - 0.3).abs() < 1e-9);
            // Its held-out score is the pool of exactly the held-out records.
            assert_ne!(a.folds[0].test_score, b.folds[0].test_score);
            let cfg = s.config_for(&b.folds[0].chosen).unwrap();
            let direct: Vec<RecordResult> = folds[0]
                .test
                .iter()
                .map(|&r| poisoned.evaluate(&cfg, r).unwrap())
                .collect();
            let pooled = Summary::pool(direct.iter());
            assert_eq!(b.folds[0].test_score.summary, pooled);
            assert_eq!(b.folds[0].test_score.objective, s.objective.value(&pooled));
            // Where the poisoned records are fitted (folds 2 and 3), they do
            // change the training score: the check above can fail.
            assert!(
                (1..3).any(|k| a.folds[k].train_score != b.folds[k].train_score),
                "{strategy}"
            );
            // Every record is held out exactly once and never in its own fold's training set.
            for f in &b.folds {
                assert!(f.test.iter().all(|r| !f.train.contains(r)));
            }
        }
    }

    #[test]
    fn each_candidate_is_evaluated_once_per_record() {
        use std::sync::atomic::AtomicUsize;
        struct Counting {
            inner: Synthetic,
            calls: AtomicUsize,
        }
        impl Evaluate for Counting {
            fn record_names(&self) -> Vec<String> {
                self.inner.record_names()
            }
            fn evaluate(&self, cfg: &TunedConfig, r: usize) -> Result<RecordResult, TuneError> {
                self.calls.fetch_add(1, Ordering::Relaxed);
                self.inner.evaluate(cfg, r)
            }
        }
        let s = space("grid");
        let e = Counting {
            inner: Synthetic { opt: vec![0.5; 10] },
            calls: AtomicUsize::new(0),
        };
        let cv = cross_validate(&s, &e, 5, 1, &|_: &Progress| {}).unwrap();
        // 9 grid points × 10 records, however many folds pool them.
        assert_eq!(e.calls.load(Ordering::Relaxed), 90);
        assert_eq!(cv.all_records.len(), 9);
        assert!((cv.final_best.0[0].as_float().unwrap() - 0.5).abs() < 1e-9);
    }
}
