// Temporary diagnostic (not to be committed).
use std::io::Write;
use std::path::PathBuf;
use tendline_delineate::DelineateConfig;
use tendline_detect::DetectConfig;
use tendline_dsp::filter::{ConditioningFilter, FilterConfig};
use tendline_formats::wfdb::read_record;
use tendline_measure::{measure_record, MeasureConfig};

#[test]
#[ignore]
fn diag() {
    let recs = std::env::var("DIAG").unwrap();
    for spec in recs.split(',') {
        let (name, t0) = spec.split_once(':').unwrap();
        let t0: f64 = t0.parse().unwrap();
        let dir = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
        let p = if name.starts_with("sel") {
            dir.join("qtdb").join(name)
        } else {
            dir.join("ludb").join(name)
        };
        let rec = read_record(&p).unwrap();
        let fs = rec.fs;
        let raw: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
        let (leads, _) = ConditioningFilter::design(fs, &FilterConfig::default())
            .unwrap()
            .apply_record(&raw);
        let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
        let det = tendline_detect::detect(&leads, fs, &DetectConfig::default()).unwrap();
        let names: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
        let m = measure_record(
            &leads,
            &names,
            fs,
            &det,
            rec.meta.sex,
            &MeasureConfig::default(),
            &DelineateConfig::default(),
        )
        .unwrap();
        let w = m
            .windows
            .iter()
            .find(|w| (w.start_s - t0).abs() < 0.5)
            .unwrap();
        let a = (w.start_s * fs) as usize;
        let b = (w.end_s * fs) as usize;
        let labels: Vec<String> = det
            .beats
            .iter()
            .filter(|x| x.sample >= a && x.sample < b)
            .map(|x| format!("{}{}", x.sample, x.label.symbol()))
            .collect();
        println!(
            "{name} {t0}: beats {:?}\n quality {:?} unreadable {:?}",
            labels,
            det.lead_quality,
            det.unreadable
                .iter()
                .filter(|s| s.start < b && s.end > a)
                .collect::<Vec<_>>()
        );
        println!(
            " used {:?} rr {:?} flags {:?} qt {:?} sup {:?}",
            w.beats, w.rr_ms, w.flags, w.qt_longest_ms, w.qt_superimposed_ms
        );
        let mut f = std::fs::File::create(format!("/tmp/mdiag/{name}_{t0}.csv")).unwrap();
        for (l, lm) in w.leads.iter().enumerate() {
            let med = &w.median.per_lead[l];
            let amp = match (lm.marks.qrs_on, lm.marks.t_peak) {
                (Some(a), Some(b)) => med[b.sample] - med[a.sample],
                _ => f32::NAN,
            };
            println!(
                " lead {l}: tamp {amp:.3} conf {:?}",
                lm.marks.t_end.map(|m| m.confidence)
            );
            println!(" lead {l}: qt {:?} qrs {:?} on {:?} qend {:?} tpk {:?} tend {:?} tw {:?} tt {:?} ta {:?} morph {:?}", lm.qt_ms, lm.qrs_ms,
                lm.marks.qrs_on.map(|m| m.sample), lm.marks.qrs_end.map(|m| m.sample), lm.marks.t_peak.map(|m| m.sample), lm.marks.t_end.map(|m| m.sample),
                lm.marks.t_end_wavelet.map(|m| m.sample), lm.marks.t_end_tangent.map(|m| m.sample), lm.marks.t_end_area.map(|m| m.sample), lm.marks.t_morphology);
            let mk = |o: Option<tendline_delineate::Mark>| o.map_or(-1i64, |m| m.sample as i64);
            writeln!(
                f,
                "#{l},{},{},{},{}",
                mk(lm.marks.qrs_on),
                mk(lm.marks.qrs_end),
                mk(lm.marks.t_peak),
                mk(lm.marks.t_end)
            )
            .unwrap();
        }
        for k in 0..w.median.per_lead.first().map_or(0, |x| x.len()) {
            let row: Vec<String> = w.median.per_lead.iter().map(|x| x[k].to_string()).collect();
            writeln!(f, "{}", row.join(",")).unwrap();
        }
    }
}

fn annotated_qt(anns: &[tendline_formats::Annotation]) -> Vec<(i64, i64, i64)> {
    let mut out = Vec::new();
    for i in 0..anns.len() {
        if !anns[i].is_beat() || i == 0 || anns[i - 1].symbol() != "(" {
            continue;
        }
        let on = anns[i - 1].sample;
        let mut j = i + 1;
        while j < anns.len() && !anns[j].is_beat() {
            if anns[j].symbol() == "t" {
                if let Some(e) = anns.get(j + 1).filter(|a| a.symbol() == ")") {
                    out.push((anns[i].sample, on, e.sample));
                }
                break;
            }
            j += 1;
        }
    }
    out
}

fn stats(v: &[f64]) -> String {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    let mut a: Vec<f64> = v.iter().map(|x| x.abs()).collect();
    a.sort_by(|x, y| x.total_cmp(y));
    let w: Vec<f64> = v.iter().copied().filter(|x| x.abs() < 60.0).collect();
    let wm = w.iter().sum::<f64>() / w.len() as f64;
    let wsd = (w.iter().map(|x| (x - wm).powi(2)).sum::<f64>() / (w.len() as f64 - 1.0)).sqrt();
    format!(
        "n {} mean {m:.1} sd {sd:.1} | med|e| {:.1} p90 {:.1} | <60: n {} mean {wm:.1} sd {wsd:.1}",
        v.len(),
        a[a.len() / 2],
        a[a.len() * 9 / 10],
        w.len()
    )
}

#[test]
#[ignore]
fn eval() {
    let dir = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    let cfgs: Vec<(&str, MeasureConfig)> = vec![
        ("default", MeasureConfig::default()),
        (
            "tamp0",
            MeasureConfig {
                min_t_amplitude_mv: 0.0,
                ..MeasureConfig::default()
            },
        ),
        (
            "out60",
            MeasureConfig {
                lead_outlier_ms: 60.0,
                ..MeasureConfig::default()
            },
        ),
        (
            "out80",
            MeasureConfig {
                lead_outlier_ms: 80.0,
                ..MeasureConfig::default()
            },
        ),
        (
            "out80e60",
            MeasureConfig {
                lead_outlier_ms: 80.0,
                end_outlier_ms: 60.0,
                ..MeasureConfig::default()
            },
        ),
        (
            "tamp.03",
            MeasureConfig {
                min_t_amplitude_mv: 0.03,
                ..MeasureConfig::default()
            },
        ),
    ];
    let only = std::env::var("ONLY").unwrap_or_default();
    let mut qt: Vec<(Vec<f64>, Vec<f64>)> = vec![(vec![], vec![]); cfgs.len()];
    let mut lu: Vec<(Vec<f64>, Vec<f64>)> = vec![(vec![], vec![]); cfgs.len()];
    let mut names: Vec<String> = std::fs::read_dir(dir.join("qtdb"))
        .unwrap()
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .filter_map(|n| n.strip_suffix(".q1c").map(str::to_string))
        .collect();
    names.sort();
    if only != "ludb" {
        for name in &names {
            let refs = annotated_qt(
                &tendline_formats::annotation::read_annotations(
                    &dir.join("qtdb").join(format!("{name}.q1c")),
                )
                .unwrap(),
            );
            let rec = read_record(&dir.join("qtdb").join(name)).unwrap();
            let fs = rec.fs;
            let raw: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
            let (leads, _) = ConditioningFilter::design(fs, &FilterConfig::default())
                .unwrap()
                .apply_record(&raw);
            let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
            let det = tendline_detect::detect(&leads, fs, &DetectConfig::default()).unwrap();
            let ln: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
            for (ci, (_, cfg)) in cfgs.iter().enumerate() {
                let m = measure_record(
                    &leads,
                    &ln,
                    fs,
                    &det,
                    rec.meta.sex,
                    cfg,
                    &DelineateConfig::default(),
                )
                .unwrap();
                for w in &m.windows {
                    let (a, b) = (
                        (w.start_s * fs).round() as i64,
                        (w.end_s * fs).round() as i64,
                    );
                    let inside: Vec<f64> = refs
                        .iter()
                        .filter(|r| r.0 >= a && r.0 < b)
                        .map(|r| (r.2 - r.1) as f64 / fs * 1000.0)
                        .collect();
                    if inside.len() < 3 {
                        continue;
                    }
                    let want = inside.iter().sum::<f64>() / inside.len() as f64;
                    if let Some(q) = w.qt_superimposed_ms {
                        qt[ci].0.push(q - want);
                    }
                    if let Some(q) = w.qt_longest_ms {
                        qt[ci].1.push(q - want);
                    }
                    if ci == 0 && std::env::var("VERBOSE").is_ok() {
                        println!(
                            "{name} {} ref {want:.0} sup {:?} lng {:?}",
                            w.start_s, w.qt_superimposed_ms, w.qt_longest_ms
                        );
                    }
                }
            }
        }
    }
    if only != "qtdb" {
        for r in 1..=100 {
            let p = dir.join("ludb").join(r.to_string());
            let rec = read_record(&p).unwrap();
            let fs = rec.fs;
            let raw: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
            let (leads, _) = ConditioningFilter::design(fs, &FilterConfig::default())
                .unwrap()
                .apply_record(&raw);
            let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
            let det = tendline_detect::detect(&leads, fs, &DetectConfig::default()).unwrap();
            let ln: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
            let mut best: Option<f64> = None;
            for ext in [
                "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
            ] {
                let anns = tendline_formats::annotation::read_annotations(
                    &dir.join("ludb").join(format!("{r}.{ext}")),
                )
                .unwrap();
                let q: Vec<f64> = annotated_qt(&anns)
                    .iter()
                    .map(|b| (b.2 - b.1) as f64 / fs * 1000.0)
                    .collect();
                if !q.is_empty() {
                    let mean = q.iter().sum::<f64>() / q.len() as f64;
                    best = Some(best.map_or(mean, |b: f64| b.max(mean)));
                }
            }
            let Some(want) = best else { continue };
            for (ci, (_, cfg)) in cfgs.iter().enumerate() {
                let m = measure_record(
                    &leads,
                    &ln,
                    fs,
                    &det,
                    rec.meta.sex,
                    cfg,
                    &DelineateConfig::default(),
                )
                .unwrap();
                let w = &m.windows[0];
                if let Some(q) = w.qt_superimposed_ms {
                    lu[ci].0.push(q - want);
                }
                if let Some(q) = w.qt_longest_ms {
                    lu[ci].1.push(q - want);
                }
            }
        }
    }
    for (ci, (n, _)) in cfgs.iter().enumerate() {
        if !qt[ci].0.is_empty() {
            println!(
                "{n:10} QTDB sup {}\n{n:10} QTDB lng {}",
                stats(&qt[ci].0),
                stats(&qt[ci].1)
            );
        }
        if !lu[ci].0.is_empty() {
            println!(
                "{n:10} LUDB sup {}\n{n:10} LUDB lng {}",
                stats(&lu[ci].0),
                stats(&lu[ci].1)
            );
        }
    }
}

#[test]
#[ignore]
fn ludb_perlead() {
    let dir = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    let (mut med_err, mut raw_err, mut med_vs_raw) = (vec![], vec![], vec![]);
    let exts = [
        "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
    ];
    for r in 1..=100 {
        let rec = read_record(&dir.join("ludb").join(r.to_string())).unwrap();
        let fs = rec.fs;
        let raw: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
        let (leads, _) = ConditioningFilter::design(fs, &FilterConfig::default())
            .unwrap()
            .apply_record(&raw);
        let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
        let det = tendline_detect::detect(&leads, fs, &DetectConfig::default()).unwrap();
        let ln: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
        let m = measure_record(
            &leads,
            &ln,
            fs,
            &det,
            rec.meta.sex,
            &MeasureConfig::default(),
            &DelineateConfig::default(),
        )
        .unwrap();
        let w = &m.windows[0];
        let qrs: Vec<usize> = det.beats.iter().map(|b| b.sample).collect();
        for (l, ext) in exts.iter().enumerate() {
            let anns = tendline_formats::annotation::read_annotations(
                &dir.join("ludb").join(format!("{r}.{ext}")),
            )
            .unwrap();
            let q: Vec<f64> = annotated_qt(&anns)
                .iter()
                .map(|b| (b.2 - b.1) as f64 / fs * 1000.0)
                .collect();
            if q.is_empty() {
                continue;
            }
            let want = q.iter().sum::<f64>() / q.len() as f64;
            let bm =
                tendline_delineate::delineate_lead(leads[l], fs, &qrs, &DelineateConfig::default());
            let rq: Vec<f64> = bm
                .iter()
                .filter_map(|b| {
                    b.qrs_on
                        .zip(b.t_end)
                        .map(|(a, e)| (e.sample as f64 - a.sample as f64) / fs * 1000.0)
                })
                .collect();
            let rawm = if rq.is_empty() {
                None
            } else {
                let mut v = rq.clone();
                v.sort_by(|a, b| a.total_cmp(b));
                Some(v[v.len() / 2])
            };
            if let Some(x) = rawm {
                raw_err.push(x - want);
            }
            if let Some(x) = w.leads[l].qt_ms {
                med_err.push(x - want);
                if let Some(y) = rawm {
                    med_vs_raw.push(x - y);
                }
            }
        }
    }
    println!("per-lead median-beat QT - lead ref: {}", stats(&med_err));
    println!(
        "per-lead raw-beat median QT - lead ref: {}",
        stats(&raw_err)
    );
    println!(
        "median-beat QT - raw-beat median QT: {}",
        stats(&med_vs_raw)
    );
}

#[test]
#[ignore]
fn qtdb_median_vs_raw() {
    let dir = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    let mut names: Vec<String> = std::fs::read_dir(dir.join("qtdb"))
        .unwrap()
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .filter_map(|n| n.strip_suffix(".q1c").map(str::to_string))
        .collect();
    names.sort();
    let (mut mv, mut raw_sup) = (vec![], vec![]);
    for name in &names {
        let refs = annotated_qt(
            &tendline_formats::annotation::read_annotations(
                &dir.join("qtdb").join(format!("{name}.q1c")),
            )
            .unwrap(),
        );
        let rec = read_record(&dir.join("qtdb").join(name)).unwrap();
        let fs = rec.fs;
        let raw: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
        let (leads, _) = ConditioningFilter::design(fs, &FilterConfig::default())
            .unwrap()
            .apply_record(&raw);
        let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
        let det = tendline_detect::detect(&leads, fs, &DetectConfig::default()).unwrap();
        let ln: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
        let m = measure_record(
            &leads,
            &ln,
            fs,
            &det,
            rec.meta.sex,
            &MeasureConfig::default(),
            &DelineateConfig::default(),
        )
        .unwrap();
        let qrs: Vec<usize> = det.beats.iter().map(|b| b.sample).collect();
        let per: Vec<Vec<tendline_delineate::BeatMarks>> = leads
            .iter()
            .map(|x| tendline_delineate::delineate_lead(x, fs, &qrs, &DelineateConfig::default()))
            .collect();
        for w in &m.windows {
            let (a, b) = (
                (w.start_s * fs).round() as i64,
                (w.end_s * fs).round() as i64,
            );
            let inside: Vec<f64> = refs
                .iter()
                .filter(|r| r.0 >= a && r.0 < b)
                .map(|r| (r.2 - r.1) as f64 / fs * 1000.0)
                .collect();
            if inside.len() < 3 {
                continue;
            }
            let want = inside.iter().sum::<f64>() / inside.len() as f64;
            // raw per-beat superimposed QT (earliest on, latest end over the 2 leads), median over the window's used beats
            let mut sq = vec![];
            for &s in &w.beats {
                let i = qrs.iter().position(|&q| q == s).unwrap();
                let on = per
                    .iter()
                    .filter_map(|p| p[i].qrs_on.map(|m| m.sample))
                    .min();
                let en = per
                    .iter()
                    .filter_map(|p| p[i].t_end.map(|m| m.sample))
                    .max();
                if let (Some(o), Some(e)) = (on, en) {
                    if e > o {
                        sq.push((e - o) as f64 / fs * 1000.0);
                    }
                }
            }
            if sq.is_empty() {
                continue;
            }
            sq.sort_by(|a, b| a.total_cmp(b));
            let r = sq[sq.len() / 2];
            raw_sup.push(r - want);
            for (l, lm) in w.leads.iter().enumerate() {
                let mut lq: Vec<f64> = w
                    .beats
                    .iter()
                    .filter_map(|&s| {
                        let i = qrs.iter().position(|&q| q == s).unwrap();
                        per[l][i]
                            .qrs_on
                            .zip(per[l][i].t_end)
                            .map(|(o, e)| (e.sample as f64 - o.sample as f64) / fs * 1000.0)
                    })
                    .collect();
                if lq.is_empty() {
                    continue;
                }
                lq.sort_by(|a, b| a.total_cmp(b));
                if let Some(q) = lm.qt_ms {
                    mv.push(q - lq[lq.len() / 2]);
                }
            }
        }
    }
    println!(
        "QTDB raw per-beat superimposed (median over used beats) - ref: {}",
        stats(&raw_sup)
    );
    println!(
        "QTDB per-lead median-beat QT - raw per-beat median QT: {}",
        stats(&mv)
    );
}
