//! Regression on the QT Database (Laguna et al., Computers in Cardiology
//! 1997): global marks of all 105 records against annotator 1 (`.q1c`),
//! pooled over all annotated beats. Input beats are the reference beat
//! annotations (`.atr`; where only `.man` exists, its selected beats with the
//! gaps filled by the project's detector, see `common::qtdb_beats`); the QRS
//! peak is re-located by the delineator, so exact R positions are not relied
//! on.
//! The asserted floors/ceilings are just beyond the figures measured with the
//! default configuration (see the crate report); they guard against
//! regressions and are not the targets.

mod common;

use common::*;
use tendline_delineate::{delineate, BeatMarks, DelineateConfig, Mark};

fn fiducial(b: &BeatMarks, key: &str) -> Option<Mark> {
    match key {
        "p_on" => b.p_on,
        "p_peak" => b.p_peak,
        "p_end" => b.p_end,
        "qrs_on" => b.qrs_on,
        "qrs_end" => b.qrs_end,
        "t_peak" => b.t_peak,
        "t_end" => b.t_end,
        "t_end_wavelet" => b.t_end_wavelet,
        "t_end_tangent" => b.t_end_tangent,
        "t_end_area" => b.t_end_area,
        _ => None,
    }
}

fn score_record(dir: &std::path::Path, rec: &str, cfg: &DelineateConfig) -> Table {
    let (fs, leads) = load_filtered(dir, rec);
    let beats = qtdb_beats(dir, rec, &leads, fs);
    let refs = waves(&annotations(&dir.join(format!("{rec}.q1c"))));
    let lead_refs: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let d = delineate(&lead_refs, fs, &beats, cfg);
    let tol = (0.150 * fs) as i64;
    let mut t = Table::new();
    for (i, w) in refs.iter().enumerate() {
        if w.kind != 'N' {
            continue;
        }
        // The tool's beat whose QRS peak is nearest within 150 ms.
        let ours = d
            .global
            .iter()
            .enumerate()
            .filter_map(|(j, g)| {
                let pk = g.qrs_peak.map_or(beats[j] as i64, |m| m.sample as i64);
                let dd = (pk - w.peak).abs();
                (dd <= tol).then_some((dd, j))
            })
            .min()
            .map(|x| &d.global[x.1]);
        let mut add = |key: &str, reference: i64| {
            let got = ours.and_then(|b| fiducial(b, key)).map(|m| m.sample);
            t.entry(key.to_string())
                .or_default()
                .add(got, reference, fs);
        };
        if let Some(o) = w.on {
            add("qrs_on", o);
        }
        if let Some(e) = w.end {
            add("qrs_end", e);
        }
        if i > 0 && refs[i - 1].kind == 'p' {
            let p = refs[i - 1];
            if let Some(o) = p.on {
                add("p_on", o);
            }
            add("p_peak", p.peak);
            if let Some(e) = p.end {
                add("p_end", e);
            }
        }
        if i + 1 < refs.len() && refs[i + 1].kind == 't' {
            let tw = refs[i + 1];
            add("t_peak", tw.peak);
            if let Some(e) = tw.end {
                for k in ["t_end", "t_end_wavelet", "t_end_tangent", "t_end_area"] {
                    add(k, e);
                }
            }
        }
    }
    t
}

/// Score `records` with two worker threads.
pub fn score_records(dir: &std::path::Path, records: &[String], cfg: &DelineateConfig) -> Table {
    let chunks: Vec<&[String]> = records.chunks(records.len().div_ceil(2).max(1)).collect();
    let tables: Vec<Table> = std::thread::scope(|s| {
        let hs: Vec<_> = chunks
            .iter()
            .map(|c| {
                s.spawn(move || {
                    merge_tables(
                        &c.iter()
                            .map(|r| score_record(dir, r, cfg))
                            .collect::<Vec<_>>(),
                    )
                })
            })
            .collect();
        hs.into_iter().map(|h| h.join().unwrap()).collect()
    });
    merge_tables(&tables)
}

const KEYS: [&str; 10] = [
    "p_on",
    "p_peak",
    "p_end",
    "qrs_on",
    "qrs_end",
    "t_peak",
    "t_end",
    "t_end_wavelet",
    "t_end_tangent",
    "t_end_area",
];

#[test]
fn qtdb_global_marks_against_annotator_1() {
    let Some(data) = data_dir() else { return };
    let dir = data.join("qtdb");
    let records: Vec<String> = std::fs::read_to_string(dir.join("RECORDS"))
        .unwrap()
        .split_whitespace()
        .map(String::from)
        .collect();
    assert_eq!(records.len(), 105);
    let t = score_records(&dir, &records, &DelineateConfig::default());
    print_table("QTDB global vs q1c, 105 records", &t, &KEYS);
    // (key, sensitivity floor %, |mean| ceiling ms, SD ceiling ms): measured
    // values with margins, see the crate report. P sensitivity 94.7 -> 94.1 %
    // when P waves with a scattered PR interval were dropped (p_max_pr_mad_ms).
    let limits: [(&str, f64, f64, f64); 9] = [
        // P boundaries at `p_xi_on` 0.6 / `p_xi_end` 0.8 (0.5 / 0.9 before,
        // Martínez 2004): P onset Se 97.37 %, mean 3.77, SD 20.41 ms; P end
        // Se 96.84 %, mean 0.98, SD 20.34 ms (this test's matching). Then
        // `global_ensemble_p` (the global P held to the trimmed mean of its
        // neighbouring beats' P timing): P onset (Se 97.34 %) 3.74 +/- 20.37
        // -> 4.19 +/- 19.04 ms, P end (Se 96.96 %) 0.99 +/- 20.33 -> 1.15 +/-
        // 19.69 ms.
        ("p_on", 96.8, 4.6, 19.6),
        ("p_end", 96.3, 1.6, 20.2),
        // QRS onset and end with `global_ensemble_qrs` (the global QRS held
        // to the median offsets of the neighbouring beats): onset mean 1.67,
        // SD 13.06 ms; end mean 4.57, SD 15.28 ms.
        // Then `qrs_chain_noise_k` 2: QRS onset mean 2.39, SD 12.92; QRS
        // end 3.84 / 15.30.
        ("qrs_on", 99.8, 2.6, 13.4),
        // QRS end with `qrs_xi_end_neg` 0.10 / `qrs_xi_end_pos` 0.16: mean
        // 3.5 -> 4.1 ms, SD 21.4 -> 20.6 ms; with the multi-lead envelope
        // bounds (`global_env_qrs_end_*`, `global_env_qrs_scale` 3, pair rule
        // `confident`): mean 3.54, SD 18.16 ms. With the wide-complex
        // extension (`qrs_post_wide_ms` 160): mean 4.74, SD 15.97 ms. With
        // `qrs_end_noise_cap_k` 3: mean 4.45, SD 15.04 ms.
        ("qrs_end", 99.8, 5.0, 15.6),
        // T peak and T ends with `t_window_early_after_qrs_end_ms` 20: T peak
        // Se 99.72 %, mean 5.1, SD 36.8 ms; T end Se 99.66 %, mean 0.3, SD
        // 36.9 ms; tangent mean -6.3, SD 44.2 ms; area mean 1.8, SD 42.3 ms.
        // With `t_recheck_ms` 80 (a T peak far from the neighbours' searched
        // again there): T peak mean 7.96, SD 35.5 ms; T end mean 2.33, SD
        // 36.2 ms; tangent mean -4.2, SD 43.0 ms; area mean 4.4, SD 42.2 ms.
        // With `global_t_peak_tallest` (the global T peak from the lead of
        // the tallest upright T): T peak mean 0.50, SD 28.18 ms. With the
        // second search narrower (`t_recheck_window_ms` 160 -> 80) and
        // open to beats within 30 % of the neighbours' RR
        // (`t_recheck_rr_frac` 0.15 -> 0.3): mean 0.60, SD 27.47 ms.
        ("t_peak", 99.5, 1.0, 28.0),
        // T ends with `global_t_upright_bonus_ms` 80 and `t_min_slope_mv_per_s`
        // 0.3: wavelet mean 1.1, SD 37.1 ms, tangent SD 44.5 ms, area mean
        // 3.0 ms (this test's matching, not the report's). With the peak
        // lead's end kept for a T peak without a confident end
        // (`global_t_end_from_peak_lead`): mean 0.26, SD 37.31 ms; tangent
        // mean -6.30, SD 44.51 ms. With `global_t_peak_tallest` (the T
        // peak held inside the T span moves less): mean 1.19, SD 34.48 ms.
        // With the narrower second search (see T peak): mean 1.13, SD 33.70
        // ms; tangent Se 98.84 -> 98.64 %, mean -3.48, SD 43.10 -> 41.09 ms;
        // area mean 3.70, SD 40.67 -> 39.67 ms.
        ("t_end", 99.5, 2.6, 34.2),
        ("t_end_wavelet", 99.5, 2.6, 34.2),
        ("t_end_tangent", 97.7, 6.5, 43.4),
        // The area T end moved with the later QRS ends (the T window starts
        // after them): SD 43.17 -> 43.32 ms.
        ("t_end_area", 99.5, 4.7, 42.5),
    ];
    for (k, sens, mean, sd) in limits {
        let a = &t[k];
        assert!(
            a.sens() >= sens,
            "{k}: sensitivity {:.2} < {sens}",
            a.sens()
        );
        assert!(
            a.mean().abs() <= mean,
            "{k}: |mean| {:.2} > {mean}",
            a.mean()
        );
        assert!(a.sd() <= sd, "{k}: SD {:.2} > {sd}", a.sd());
    }
}
