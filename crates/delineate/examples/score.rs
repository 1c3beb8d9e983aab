//! Development scoring loop for the delineator: QTDB global marks against
//! annotator 1 (split into even/odd halves of the sorted record list) and
//! LUDB per-lead marks, with the largest-error beats listed lead by lead.
//!
//! Usage: `cargo run --release --example score -p tendline-delineate -- [qtdb|ludb|both] [worst-key]`
//! Config overrides as JSON in the `DCFG` environment variable.

#[path = "../tests/common/mod.rs"]
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

const KEYS: [&str; 9] = [
    "p_on",
    "p_end",
    "qrs_on",
    "qrs_end",
    "t_peak",
    "t_end",
    "t_end_wavelet",
    "t_end_tangent",
    "t_end_area",
];

struct Worst {
    rec: String,
    key: String,
    err: f64,
    line: String,
}

fn score_qtdb(
    dir: &std::path::Path,
    rec: &str,
    cfg: &DelineateConfig,
    wkey: &str,
) -> (Table, Vec<Worst>) {
    let (fs, leads) = load_filtered(dir, rec);
    let beats = qtdb_beats(dir, rec, &leads, fs);
    let refs = waves(&annotations(&dir.join(format!("{rec}.q1c"))));
    let lead_refs: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let d = delineate(&lead_refs, fs, &beats, cfg);
    if std::env::var("DUMP").is_ok_and(|v| v == rec) {
        let f = |m: Option<Mark>| {
            m.map_or("   -   ".into(), |m| {
                format!("{:7.3}", m.sample as f64 / fs)
            })
        };
        for (j, g) in d.global.iter().enumerate() {
            let t0 = beats[j] as f64 / fs;
            if !(600.0..640.0).contains(&t0) {
                continue;
            }
            for (name, b) in
                std::iter::once(("G", g)).chain(d.per_lead.iter().map(|l| ("l", &l[j])))
            {
                println!(
                    "DUMP {name} beat {:7.3} P {} {} QRS {} {} {} T {} {} {} {:?}",
                    t0,
                    f(b.p_on),
                    f(b.p_end),
                    f(b.qrs_on),
                    f(b.qrs_peak),
                    f(b.qrs_end),
                    f(b.t_on),
                    f(b.t_peak),
                    f(b.t_end),
                    b.t_morphology
                );
            }
        }
    }
    let tol = (0.150 * fs) as i64;
    let mut t = Table::new();
    let mut worst = vec![];
    for (i, w) in refs.iter().enumerate() {
        if w.kind != 'N' {
            continue;
        }
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
            .map(|x| x.1);
        let mut add = |key: &str, reference: i64| {
            let got = ours
                .and_then(|j| fiducial(&d.global[j], key))
                .map(|m| m.sample);
            t.entry(key.to_string())
                .or_default()
                .add(got, reference, fs);
            if key == wkey {
                let err = got.map_or(9999.0, |g| (g as f64 - reference as f64) * 1000.0 / fs);
                let lm: Vec<String> = d
                    .per_lead
                    .iter()
                    .map(|l| {
                        ours.and_then(|j| fiducial(&l[j], key))
                            .map_or("-".into(), |m| {
                                format!(
                                    "{:+.0}({:.2})",
                                    (m.sample as f64 - reference as f64) * 1000.0 / fs,
                                    m.confidence
                                )
                            })
                    })
                    .collect();
                let morph: Vec<String> = d
                    .per_lead
                    .iter()
                    .map(|l| ours.map_or("".into(), |j| format!("{:?}", l[j].t_morphology)))
                    .collect();
                worst.push(Worst {
                    rec: rec.to_string(),
                    key: key.to_string(),
                    err,
                    line: format!(
                        "ref@{:.2}s leads {:?} {:?}",
                        reference as f64 / fs,
                        lm,
                        morph
                    ),
                });
            }
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
    (t, worst)
}

fn par<T: Send, R: Send>(items: Vec<T>, f: impl Fn(T) -> R + Sync) -> Vec<R> {
    let n = items.len();
    let mut items: Vec<Option<T>> = items.into_iter().map(Some).collect();
    let (a, b) = items.split_at_mut(n / 2);
    let f = &f;
    std::thread::scope(|s| {
        let h = s.spawn(move || {
            a.iter_mut()
                .map(|x| f(x.take().unwrap()))
                .collect::<Vec<_>>()
        });
        let mut r2: Vec<R> = b.iter_mut().map(|x| f(x.take().unwrap())).collect();
        let mut r1 = h.join().unwrap();
        r1.append(&mut r2);
        r1
    })
}

fn row(a: &Acc) -> String {
    format!("{:6.2} {:6.2} {:6.2}", a.sens(), a.mean(), a.sd())
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let which = args.get(1).map(String::as_str).unwrap_or("both");
    let wkey = args.get(2).cloned().unwrap_or("t_end".into());
    let nworst: usize = args.get(3).and_then(|s| s.parse().ok()).unwrap_or(25);
    let cfg: DelineateConfig = match std::env::var("DCFG") {
        Ok(s) if !s.is_empty() => serde_json::from_str(&s).expect("DCFG json"),
        _ => DelineateConfig::default(),
    };
    let data = data_dir().expect("data");
    if which == "qtdb" || which == "both" {
        let dir = data.join("qtdb");
        let mut records: Vec<String> = std::fs::read_to_string(dir.join("RECORDS"))
            .unwrap()
            .split_whitespace()
            .map(String::from)
            .collect();
        records.sort();
        let res = par(records.clone(), |r| score_qtdb(&dir, &r, &cfg, &wkey));
        let tabs: Vec<Table> = res.iter().map(|x| x.0.clone()).collect();
        let all = merge_tables(&tabs);
        let even = merge_tables(&tabs.iter().step_by(2).cloned().collect::<Vec<_>>());
        let odd = merge_tables(&tabs.iter().skip(1).step_by(2).cloned().collect::<Vec<_>>());
        println!(
            "QTDB {:14} {:>20} | {:>20} | {:>20}",
            "", "all sens/mean/SD", "even", "odd"
        );
        for k in KEYS {
            if let (Some(a), Some(e), Some(o)) = (all.get(k), even.get(k), odd.get(k)) {
                println!("QTDB {:14} {} | {} | {}", k, row(a), row(e), row(o));
            }
        }
        // Worst records by contribution to squared error of wkey.
        let mut recs: Vec<(f64, String, usize, usize)> = res
            .iter()
            .zip(&records)
            .filter_map(|((t, _), r)| {
                t.get(&wkey).map(|a| {
                    let m = all[&wkey].mean();
                    (
                        a.errs.iter().map(|e| (e - m).powi(2)).sum::<f64>(),
                        r.clone(),
                        a.n_ref - a.n_found,
                        a.errs.len(),
                    )
                })
            })
            .collect();
        recs.sort_by(|a, b| b.0.total_cmp(&a.0));
        let tot: f64 = recs.iter().map(|x| x.0).sum();
        println!("worst records for {wkey} (share of squared error, missing, n):");
        for r in recs.iter().take(12) {
            println!(
                "  {} {:5.1}% miss {} n {} rms {:.1}",
                r.1,
                100.0 * r.0 / tot,
                r.2,
                r.3,
                (r.0 / r.3.max(1) as f64).sqrt()
            );
        }
        let mut w: Vec<&Worst> = res.iter().flat_map(|x| x.1.iter()).collect();
        w.sort_by(|a, b| b.err.abs().total_cmp(&a.err.abs()));
        for x in w.iter().take(nworst) {
            println!("  {} {} {:+.0} {}", x.rec, x.key, x.err, x.line);
        }
    }
    if which == "ludb" || which == "both" {
        let dir = data.join("ludb");
        let recs: Vec<usize> = (1..=100).collect();
        let tabs = par(recs, |r| ludb::score_record(&dir, r, &cfg));
        let t = merge_tables(&tabs);
        for k in [
            "qrs_sens",
            "qrs_ppv",
            "qrs_on",
            "qrs_end",
            "t_sens",
            "t_ppv",
            "t_peak",
            "t_end",
            "t_end_tangent",
            "t_end_area",
            "p_sens",
            "p_ppv",
            "p_on",
            "p_end",
        ] {
            if let Some(a) = t.get(k) {
                println!("LUDB {:14} {}", k, row(a));
            }
        }
    }
}

mod ludb {
    use super::common::*;
    use tendline_delineate::{delineate, BeatMarks, DelineateConfig, Mark};
    include!("support/ludb_score.rs");
}
