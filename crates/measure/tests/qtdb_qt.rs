//! Window QT against expert annotations of the open databases.
//!
//! - QT Database (Laguna et al., Computers in Cardiology 1997;24:673-676), annotator 1
//!   second pass (`.q1c`): for every window holding at least three beats with both
//!   QRS onset and T end marked, the window's QT is compared with the mean annotated
//!   QT (T end − QRS onset) of those beats. Target from issue #9 for the
//!   superimposed-leads QT: |mean| ≤ 10 ms and SD ≤ 20 ms; the longest-lead QT is
//!   reported beside it. The cardiologists marked while viewing both leads, so the
//!   superimposed-leads rule is the comparable one.
//! - LUDB (Kalyakulina et al., IEEE Access 2020;8:186181-186190): per lead, the mean
//!   annotated QT over the lead's marked beats; the longest lead's mean is the reference
//!   for the record's (single, 10-s) window QT. Mean and SD are reported; the test
//!   requires the comparison to have been made on most records.
//!
//! The pipeline is the real one: WFDB reader, conditioning filter, QRS detector,
//! delineator, measurement. Missing data makes these tests fail, not pass.

use std::path::{Path, PathBuf};

use tendline_delineate::DelineateConfig;
use tendline_detect::{DetectConfig, Detection};
use tendline_dsp::filter::{ConditioningFilter, FilterConfig};
use tendline_formats::annotation::read_annotations;
use tendline_formats::wfdb::read_record;
use tendline_formats::{Annotation, Record};
use tendline_measure::{measure_record, MeasureConfig, RecordMeasures};

fn data_dir() -> PathBuf {
    let d = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    assert!(
        d.is_dir(),
        "reference data missing at {} (expected ../shared/data relative to the repository root)",
        d.display()
    );
    d
}

/// (beat sample, QRS onset, T end) of every beat with both boundaries marked: the `(`
/// immediately before the beat label, and the `)` right after the first `t` that
/// follows it before the next beat label (WFDB boundary convention).
fn annotated_qt(anns: &[Annotation]) -> Vec<(i64, i64, i64)> {
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

/// Filter, detect and measure one WFDB record.
fn measure(path: &Path) -> (RecordMeasures, f64) {
    measure_with(path, &DelineateConfig::default())
}

/// [`measure`] with the median beats delineated by `dcfg`.
/// Read one WFDB record, condition it with the default filters and detect its beats.
fn conditioned(path: &Path) -> (Record, Vec<Vec<f64>>, Detection) {
    let rec = read_record(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let raw: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
    let filt = ConditioningFilter::design(rec.fs, &FilterConfig::default()).expect("filter design");
    let (leads, _) = filt.apply_record(&raw);
    let views: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let det = tendline_detect::detect(&views, rec.fs, &DetectConfig::default()).expect("detect");
    (rec, leads, det)
}

fn measure_with(path: &Path, dcfg: &DelineateConfig) -> (RecordMeasures, f64) {
    let (rec, leads, det) = conditioned(path);
    let fs = rec.fs;
    let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let names: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
    let m = measure_record(
        &leads,
        &names,
        fs,
        &det,
        rec.meta.sex,
        &MeasureConfig::default(),
        dcfg,
    )
    .expect("measure");
    (m, fs)
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    (m, sd)
}

#[test]
fn qtdb_window_qt_against_annotator_1() {
    let dir = data_dir().join("qtdb");
    let mut names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .filter_map(|e| e.ok()?.file_name().into_string().ok())
        .filter_map(|n| n.strip_suffix(".q1c").map(str::to_string))
        .collect();
    names.sort();
    assert_eq!(names.len(), 105, "QTDB should hold 105 records with .q1c");
    let (mut sup, mut lng) = (Vec::new(), Vec::new());
    let mut n_windows_ref = 0;
    for name in &names {
        let anns = read_annotations(&dir.join(format!("{name}.q1c")))
            .unwrap_or_else(|e| panic!("{name}.q1c: {e}"));
        let refs = annotated_qt(&anns);
        let (m, fs) = measure(&dir.join(name));
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
            n_windows_ref += 1;
            let want = inside.iter().sum::<f64>() / inside.len() as f64;
            if let Some(q) = w.qt_superimposed_ms {
                sup.push(q - want);
            }
            if let Some(q) = w.qt_longest_ms {
                lng.push(q - want);
            }
            println!(
                "{name} {:6.1}s ref {want:6.1} sup {:?} longest {:?} n_beats {} irregular {}",
                w.start_s, w.qt_superimposed_ms, w.qt_longest_ms, w.n_beats, w.flags.irregular
            );
        }
    }
    let (ms, ss) = mean_sd(&sup);
    let (ml, sl) = mean_sd(&lng);
    println!("QTDB q1c windows with >=3 annotated beats: {n_windows_ref}");
    println!(
        "superimposed-leads QT - reference: n {} mean {ms:.1} ms SD {ss:.1} ms",
        sup.len()
    );
    println!(
        "longest-lead QT - reference:       n {} mean {ml:.1} ms SD {sl:.1} ms",
        lng.len()
    );
    assert!(
        n_windows_ref >= 150,
        "too few reference windows: {n_windows_ref}"
    );
    assert!(
        sup.len() * 10 >= n_windows_ref * 8,
        "QT measured in only {} of {n_windows_ref} windows",
        sup.len()
    );
    // Regression ceilings just above what was measured with the default pipeline
    // (superimposed mean -2.2, SD 22.6 ms; longest lead mean -7.4, SD 23.1 ms; see
    // validation/results). The project's mean target (|mean| <= 10 ms) is met, the SD
    // target (<= 20 ms) not yet; these bounds stop the figures getting worse unnoticed.
    assert!(
        ms.abs() <= SUP_MAX_ABS_MEAN_MS && ss <= SUP_MAX_SD_MS,
        "superimposed QT error mean {ms:.1} SD {ss:.1} ms (ceilings {SUP_MAX_ABS_MEAN_MS}, {SUP_MAX_SD_MS})"
    );
    assert!(
        ml.abs() <= LONGEST_MAX_ABS_MEAN_MS && sl <= LONGEST_MAX_SD_MS,
        "longest-lead QT error mean {ml:.1} SD {sl:.1} ms (ceilings {LONGEST_MAX_ABS_MEAN_MS}, {LONGEST_MAX_SD_MS})"
    );
}

const SUP_MAX_ABS_MEAN_MS: f64 = 3.0;
const SUP_MAX_SD_MS: f64 = 23.0;
const LONGEST_MAX_ABS_MEAN_MS: f64 = 8.0;
const LONGEST_MAX_SD_MS: f64 = 23.5;

#[test]
fn ludb_window_qt_against_longest_lead_reference() {
    let dir = data_dir().join("ludb");
    let lead_ext = [
        "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
    ];
    let (mut lng, mut sup) = (Vec::new(), Vec::new());
    let mut n_ref = 0;
    for r in 1..=100 {
        let mut best: Option<f64> = None;
        let mut fs_ref = None;
        let (m, fs) = measure(&dir.join(r.to_string()));
        for ext in lead_ext {
            let p = dir.join(format!("{r}.{ext}"));
            let anns = read_annotations(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
            let q: Vec<f64> = annotated_qt(&anns)
                .iter()
                .map(|b| (b.2 - b.1) as f64 / fs * 1000.0)
                .collect();
            if !q.is_empty() {
                let mean = q.iter().sum::<f64>() / q.len() as f64;
                best = Some(best.map_or(mean, |b: f64| b.max(mean)));
            }
            fs_ref = Some(fs);
        }
        assert!(fs_ref.is_some());
        let Some(want) = best else { continue };
        n_ref += 1;
        let w = &m.windows[0];
        if let Some(q) = w.qt_longest_ms {
            lng.push(q - want);
        }
        if let Some(q) = w.qt_superimposed_ms {
            sup.push(q - want);
        }
        println!(
            "ludb {r:3} ref {want:6.1} longest {:?} (lead {:?}) sup {:?} n_beats {} flags {:?}",
            w.qt_longest_ms, w.qt_lead_name, w.qt_superimposed_ms, w.n_beats, w.flags
        );
    }
    let (ml, sl) = mean_sd(&lng);
    let (ms, ss) = mean_sd(&sup);
    println!("LUDB records with a reference QT: {n_ref}");
    println!(
        "longest-lead QT - reference:       n {} mean {ml:.1} ms SD {sl:.1} ms",
        lng.len()
    );
    println!(
        "superimposed-leads QT - reference: n {} mean {ms:.1} ms SD {ss:.1} ms",
        sup.len()
    );
    assert!(
        n_ref >= 90,
        "reference QT found in only {n_ref} LUDB records"
    );
    assert!(
        lng.len() * 10 >= n_ref * 7,
        "window QT measured in only {} of {n_ref} records",
        lng.len()
    );
}

/// Per detected beat: (fiducial sample, QT of the per-beat global marks in ms).
fn beat_global_qt(path: &Path) -> Vec<(usize, Option<f64>)> {
    let (rec, leads, det) = conditioned(path);
    let fs = rec.fs;
    let leads: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let mut qrs: Vec<usize> = det.beats.iter().map(|b| b.sample).collect();
    qrs.sort();
    let d = tendline_delineate::delineate(&leads, fs, &qrs, &DelineateConfig::default());
    qrs.iter()
        .zip(&d.global)
        .map(|(&q, g)| {
            let qt = g
                .qrs_on
                .zip(g.t_end)
                .map(|(a, b)| (b.sample as f64 - a.sample as f64) / fs * 1000.0);
            (q, qt)
        })
        .collect()
}

/// Diagnostic (run by hand): one CSV row per QTDB window and lead with the median-beat
/// marks (samples relative to the median beat's fiducial), the reference's mean QRS
/// onset and T end relative to the window's aligned beats, and the window QTs, written
/// to the file named by `TENDLINE_QT_DUMP`.
#[test]
#[ignore]
fn qtdb_window_dump() {
    let out = std::env::var("TENDLINE_QT_DUMP").expect("TENDLINE_QT_DUMP not set");
    // Optional JSON overrides of the delineation settings used on the median beats.
    let dcfg: DelineateConfig = std::env::var("TENDLINE_QT_DCFG")
        .map(|j| serde_json::from_str(&j).expect("TENDLINE_QT_DCFG: DelineateConfig JSON"))
        .unwrap_or_default();
    let dir = data_dir().join("qtdb");
    let names: Vec<String> = std::fs::read_to_string(dir.join("RECORDS"))
        .expect("RECORDS")
        .lines()
        .map(str::to_string)
        .collect();
    let rows = std::sync::Mutex::new(Vec::new());
    let next = std::sync::atomic::AtomicUsize::new(0);
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| loop {
                let i = next.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
                let Some(name) = names.get(i) else { break };
                let anns = read_annotations(&dir.join(format!("{name}.q1c")))
                    .unwrap_or_else(|e| panic!("{name}.q1c: {e}"));
                let refs = annotated_qt(&anns);
                let (m, fs) = measure_with(&dir.join(name), &dcfg);
                let glob = if std::env::var("TENDLINE_QT_DUMP_BEATS").is_ok() {
                    beat_global_qt(&dir.join(name))
                } else {
                    Vec::new()
                };
                let mut local = Vec::new();
                for w in &m.windows {
                    let (a, b) = ((w.start_s * fs).round() as i64, (w.end_s * fs).round() as i64);
                    let inside: Vec<&(i64, i64, i64)> =
                        refs.iter().filter(|r| r.0 >= a && r.0 < b).collect();
                    if inside.len() < 3 {
                        continue;
                    }
                    let want = inside.iter().map(|r| (r.2 - r.1) as f64).sum::<f64>()
                        / inside.len() as f64
                        / fs
                        * 1000.0;
                    // Reference marks relative to the nearest aligned beat of the window.
                    let (mut on, mut end, mut k) = (0.0, 0.0, 0usize);
                    for r in &inside {
                        if let Some(p) = w
                            .aligned
                            .iter()
                            .copied()
                            .min_by(|x, y| (x - r.0 as f64).abs().total_cmp(&(y - r.0 as f64).abs()))
                            .filter(|p| (p - r.0 as f64).abs() <= 0.15 * fs)
                        {
                            on += r.1 as f64 - p;
                            end += r.2 as f64 - p;
                            k += 1;
                        }
                    }
                    // Median per-beat global QT (ms) of the window's beats.
                    let mut bq: Vec<f64> = w
                        .beats
                        .iter()
                        .filter_map(|b| glob.iter().find(|g| g.0 == *b).and_then(|g| g.1))
                        .collect();
                    bq.sort_by(|a, b| a.total_cmp(b));
                    let beat_qt = (!bq.is_empty()).then(|| bq[bq.len() / 2]);
                    let f = w.median.fiducial as f64;
                    let o = |v: Option<f64>| v.map_or(String::new(), |v| format!("{v:.2}"));
                    let mk = |m: Option<tendline_delineate::Mark>| o(m.map(|m| m.sample as f64 - f));
                    for (l, lm) in w.leads.iter().enumerate() {
                        local.push(format!(
                            "{name},{fs},{:.1},{want:.2},{},{},{},{},{},{},{},{},{l},{},{},{},{},{},{},{},{},{},{},{},{},{}",
                            w.start_s,
                            o(beat_qt),
                            inside.len(),
                            o((k > 0).then(|| on / k as f64)),
                            o((k > 0).then(|| end / k as f64)),
                            o(w.qt_superimposed_ms),
                            o(w.qt_longest_ms),
                            w.qt_longest_lead.map_or(String::new(), |l| l.to_string()),
                            o(w.rr_ms),
                            lm.usable,
                            mk(lm.marks.qrs_on),
                            mk(lm.marks.qrs_end),
                            mk(lm.marks.t_peak),
                            mk(lm.marks.t_end),
                            mk(lm.marks.t_end_wavelet),
                            mk(lm.marks.t_end_tangent),
                            mk(lm.marks.t_end_area),
                            o(lm.t_amplitude_mv),
                            o(lm.noise_mv),
                            o(lm.qt_ms),
                            lm.qt_accepted,
                            w.n_beats,
                        ));
                    }
                }
                rows.lock().expect("rows").extend(local);
            });
        }
    });
    let mut rows = rows.into_inner().expect("rows");
    rows.sort();
    let head = "rec,fs,start_s,ref_qt,beat_qt,n_ref,ref_on,ref_end,sup,longest,longest_lead,rr,lead,usable,qrs_on,qrs_end,t_peak,t_end,t_end_wav,t_end_tan,t_end_area,t_amp,noise,qt,accepted,n_beats";
    std::fs::write(&out, format!("{head}\n{}\n", rows.join("\n"))).expect("write dump");
}
