//! Candidate generation: grid, seeded random draws and coordinate descent.

use crate::space::{range_grid, Candidate, Domain, SearchSpace};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Every combination of the parameters' grids (ranges: `steps` points, ends
/// included; lists: every value), first parameter slowest.
pub fn grid(space: &SearchSpace) -> Result<Vec<Candidate>, String> {
    let grids: Vec<Vec<toml::Value>> = space
        .params
        .iter()
        .map(|p| p.grid(space.search.steps))
        .collect();
    let total = grids
        .iter()
        .try_fold(1usize, |acc, g| acc.checked_mul(g.len()))
        .unwrap_or(usize::MAX);
    if total > space.search.max_candidates {
        return Err(format!(
            "[search] the grid has {total} candidates ({}), above max_candidates = {}; \
             lower steps, shorten lists or use strategy = \"random\"",
            grids
                .iter()
                .zip(&space.params)
                .map(|(g, p)| format!("{}: {}", p.key, g.len()))
                .collect::<Vec<_>>()
                .join(", "),
            space.search.max_candidates
        ));
    }
    let mut out = vec![Candidate(Vec::new())];
    for g in &grids {
        out = out
            .into_iter()
            .flat_map(|c| {
                g.iter().map(move |v| {
                    let mut c = c.clone();
                    c.0.push(v.clone());
                    c
                })
            })
            .collect();
    }
    Ok(out)
}

/// `n` distinct candidates: the base configuration first, then seeded draws
/// (uniform in the range, or in log(value) for log ranges; uniform over lists).
/// Fewer are returned when the space holds fewer distinct points.
pub fn random(space: &SearchSpace, n: usize, seed: u64) -> Vec<Candidate> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut out = vec![space.base_candidate()];
    let mut misses = 0;
    while out.len() < n && misses < 1000 {
        let c = Candidate(
            space
                .params
                .iter()
                .map(|p| match &p.domain {
                    Domain::List(v) => v[rng.gen_range(0..v.len())].clone(),
                    Domain::Range { min, max, log, .. } => {
                        let u: f64 = rng.gen();
                        let x = if *log {
                            (min.ln() + u * (max.ln() - min.ln())).exp()
                        } else {
                            min + u * (max - min)
                        };
                        p.number(x)
                    }
                })
                .collect(),
        );
        if out.contains(&c) {
            misses += 1;
        } else {
            out.push(c);
        }
    }
    out
}

/// Coordinate descent from `start`: for each parameter in turn, try its grid
/// with the others fixed at the best so far and keep the best value (ties
/// keep the current one); a range's grid then narrows to one grid step either
/// side of the best value. `rounds` passes over all parameters.
///
/// `score` evaluates a batch (lower is better), so a batch can run in
/// parallel. Returns the best candidate and its score.
pub fn coordinate_descent(
    space: &SearchSpace,
    start: Candidate,
    score: &mut dyn FnMut(&[Candidate]) -> Vec<f64>,
) -> (Candidate, f64) {
    let steps = space.search.steps;
    let mut cur_s = score(std::slice::from_ref(&start))[0];
    let mut cur = start;
    let mut bounds: Vec<Option<(f64, f64)>> = space
        .params
        .iter()
        .map(|p| match p.domain {
            Domain::Range { min, max, .. } => Some((min, max)),
            Domain::List(_) => None,
        })
        .collect();
    for _ in 0..space.search.rounds {
        for (i, p) in space.params.iter().enumerate() {
            let values = match (&p.domain, bounds[i]) {
                (
                    Domain::Range {
                        log,
                        integer,
                        steps: own,
                        ..
                    },
                    Some((lo, hi)),
                ) => range_grid(lo, hi, *log, *integer, own.unwrap_or(steps)),
                (d, _) => match d {
                    Domain::List(v) => v.clone(),
                    Domain::Range { .. } => p.grid(steps),
                },
            };
            let cands: Vec<Candidate> = values
                .iter()
                .filter(|v| **v != cur.0[i])
                .map(|v| {
                    let mut c = cur.clone();
                    c.0[i] = v.clone();
                    c
                })
                .collect();
            if !cands.is_empty() {
                let s = score(&cands);
                if let Some((k, &best)) = s.iter().enumerate().min_by(|a, b| a.1.total_cmp(b.1)) {
                    if best < cur_s {
                        cur_s = best;
                        cur = cands[k].clone();
                    }
                }
            }
            if let (
                Domain::Range {
                    min,
                    max,
                    log,
                    steps: own,
                    ..
                },
                Some((lo, hi)),
            ) = (&p.domain, bounds[i])
            {
                let n = own.unwrap_or(steps).max(2) as f64 - 1.0;
                let b = p.as_number(&cur.0[i]).unwrap_or(lo);
                bounds[i] = Some(if *log {
                    let step = (hi.ln() - lo.ln()) / n;
                    (
                        (b.ln() - step).exp().max(*min),
                        (b.ln() + step).exp().min(*max),
                    )
                } else {
                    let step = (hi - lo) / n;
                    ((b - step).max(*min), (b + step).min(*max))
                });
            }
        }
    }
    (cur, cur_s)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn base() -> toml::Table {
        toml::from_str(
            "[delineate]\nt_xi_end = 0.5\nglobal_context_beats = 8\nt_end_method = 'wavelet'\nt_gamma = 0.125\n",
        )
        .unwrap()
    }

    fn space(params: &str, search: &str) -> SearchSpace {
        SearchSpace::parse(
            &format!("[search]\n{search}\n[params.delineate]\n{params}"),
            "space.toml",
            &base(),
        )
        .unwrap()
    }

    /// Position of a key in the space (tables are read in key order).
    fn at(s: &SearchSpace, key: &str) -> usize {
        s.params
            .iter()
            .position(|p| p.key == format!("delineate.{key}"))
            .unwrap()
    }

    #[test]
    fn grid_is_the_product_and_refuses_huge_grids() {
        let s = space(
            "t_xi_end = { min = 0.2, max = 0.6, steps = 3 }\nt_end_method = { values = ['wavelet', 'area'] }",
            "strategy = 'grid'",
        );
        let g = grid(&s).unwrap();
        assert_eq!(g.len(), 6);
        // Key order: t_end_method (slowest), then t_xi_end.
        assert_eq!(at(&s, "t_end_method"), 0);
        let xs: Vec<f64> = g.iter().map(|c| c.0[1].as_float().unwrap()).collect();
        assert_eq!(xs, vec![0.2, 0.4, 0.6, 0.2, 0.4, 0.6]);
        let ms: Vec<&str> = g.iter().map(|c| c.0[0].as_str().unwrap()).collect();
        assert_eq!(
            ms,
            vec!["wavelet", "wavelet", "wavelet", "area", "area", "area"]
        );
        let s = space(
            "t_xi_end = { min = 0.2, max = 0.6, steps = 100 }\nt_gamma = { min = 0.0, max = 0.5, steps = 200 }",
            "strategy = 'grid'\nmax_candidates = 1000",
        );
        let e = grid(&s).unwrap_err();
        assert!(
            e.contains("20000") && e.contains("max_candidates = 1000"),
            "{e}"
        );
    }

    #[test]
    fn random_is_seeded_starts_at_base_and_stays_in_range() {
        let s = space(
            "t_xi_end = { min = 0.2, max = 0.6 }\nglobal_context_beats = { min = 2, max = 12 }\nt_gamma = { min = 0.01, max = 0.5, scale = 'log' }",
            "",
        );
        let a = random(&s, 50, 3);
        assert_eq!(a, random(&s, 50, 3));
        assert_ne!(a, random(&s, 50, 4));
        assert_eq!(a.len(), 50);
        assert_eq!(a[0], s.base_candidate());
        let (ix, ik, ig) = (
            at(&s, "t_xi_end"),
            at(&s, "global_context_beats"),
            at(&s, "t_gamma"),
        );
        for c in &a {
            let x = c.0[ix].as_float().unwrap();
            assert!((0.2..=0.6).contains(&x));
            let k = c.0[ik].as_integer().unwrap();
            assert!((2..=12).contains(&k));
            let g = c.0[ig].as_float().unwrap();
            assert!((0.01..=0.5).contains(&g));
        }
        // Log draws: about half below the geometric mean sqrt(0.01 * 0.5) = 0.0707.
        let below = a
            .iter()
            .filter(|c| c.0[ig].as_float().unwrap() < 0.0707)
            .count();
        assert!((12..=38).contains(&below), "{below}");
    }

    #[test]
    fn random_stops_when_the_space_is_exhausted() {
        let s = space(
            "t_end_method = { values = ['wavelet', 'area', 'tangent'] }",
            "",
        );
        assert_eq!(random(&s, 100, 1).len(), 3);
    }

    #[test]
    fn coordinate_descent_finds_a_separable_minimum() {
        // f = (x - 0.37)^2 + (k - 5)^2 / 100 + [method != area]: minimum at 0.37, 5, area.
        let s = space(
            "t_xi_end = { min = 0.0, max = 1.0 }\nglobal_context_beats = { min = 1, max = 20 }\nt_end_method = { values = ['wavelet', 'area', 'tangent'] }",
            "steps = 5\nrounds = 4",
        );
        let (ix, ik, im) = (
            at(&s, "t_xi_end"),
            at(&s, "global_context_beats"),
            at(&s, "t_end_method"),
        );
        let f = |c: &Candidate| {
            let x = c.0[ix].as_float().unwrap();
            let k = c.0[ik].as_integer().unwrap() as f64;
            let m = c.0[im].as_str().unwrap();
            (x - 0.37).powi(2) + (k - 5.0).powi(2) / 100.0 + f64::from(u8::from(m != "area"))
        };
        let mut calls = 0;
        let (best, v) = coordinate_descent(&s, s.base_candidate(), &mut |cs| {
            calls += cs.len();
            cs.iter().map(f).collect()
        });
        assert_eq!(best.0[im].as_str(), Some("area"));
        assert_eq!(best.0[ik].as_integer(), Some(5));
        assert!(
            (best.0[ix].as_float().unwrap() - 0.37).abs() < 0.02,
            "{best:?}"
        );
        assert!((v - f(&best)).abs() < 1e-12);
        assert!(calls < 60, "{calls} evaluations");
    }
}
