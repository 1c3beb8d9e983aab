//! The tuning API (`prepare_lead` + `delineate_prepared`) against the plain
//! `delineate` on real signals: QT Database records (Laguna et al. 1997) with
//! their reference beats. With every beat wanted the marks must be identical;
//! with a sparse selection, the wanted beats must be identical when their
//! `context_margin` neighbours are wanted too.

mod common;

use common::*;
use tendline_delineate::{
    context_margin, delineate, delineate_prepared, prepare_lead, DelineateConfig,
};

fn check(rec: &str, cfg: &DelineateConfig) {
    let Some(data) = data_dir() else { return };
    let dir = data.join("qtdb");
    let (fs, leads) = load_filtered(&dir, rec);
    let beats = qtdb_beats(&dir, rec, &leads, fs);
    let refs: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let full = delineate(&refs, fs, &beats, cfg);
    let prepared: Vec<_> = refs.iter().map(|x| prepare_lead(x, fs, cfg)).collect();

    let all = delineate_prepared(&prepared, &beats, &vec![true; beats.len()], cfg);
    assert_eq!(all, full, "{rec}: every beat wanted");

    // Every 37th beat as a target (further apart when the margins would
    // touch), with its margin.
    let m = context_margin(cfg);
    let targets: Vec<usize> = (5..beats.len()).step_by(37.max(2 * m + 3)).collect();
    let mut want = vec![false; beats.len()];
    for &t in &targets {
        for w in want
            .iter_mut()
            .take((t + m + 1).min(beats.len()))
            .skip(t.saturating_sub(m))
        {
            *w = true;
        }
    }
    let part = delineate_prepared(&prepared, &beats, &want, cfg);
    for &t in &targets {
        assert_eq!(part.global[t], full.global[t], "{rec}: global beat {t}");
        for (l, lead) in part.per_lead.iter().enumerate() {
            assert_eq!(lead[t], full.per_lead[l][t], "{rec}: lead {l} beat {t}");
        }
    }
    // Beats not wanted carry no marks.
    let skipped = want.iter().position(|w| !w).expect("sparse selection");
    assert!(part.global[skipped].qrs_on.is_none() && part.global[skipped].t_end.is_none());
}

#[test]
fn prepared_equals_full_delineation_default_config() {
    check("sel100", &DelineateConfig::default());
    check("sele0607", &DelineateConfig::default());
}

#[test]
fn prepared_equals_full_delineation_with_second_t_pass() {
    let cfg = DelineateConfig {
        t_recheck_ms: 80.0,
        global_context_beats: 5,
        ..Default::default()
    };
    check("sel100", &cfg);
}
