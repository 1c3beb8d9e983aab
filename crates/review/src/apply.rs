//! Import of a reader's corrections into a run: validation of the whole file, the
//! corrected marks beside the automatic ones, recomputed intervals, an audit table
//! and a report. See the crate docs for what is written where.

use crate::corrections::{self, Checked, Kind, FIDUCIALS};
use crate::run::Run;
use crate::util::{attr_f64, attr_text, data_at, f64s, i64s, median_finite, texts, utc_now};
use crate::ReviewError;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use tendline_delineate::{BeatMarks, Mark};
use tendline_formats::Sex;
use tendline_measure::{global, qtc, Formula, LeadMeasure, MeasureConfig, QtRule};
use tendline_store::{Attr, Data, Group};

/// QT and QTc of one window before and after the import.
#[derive(Debug, Clone, PartialEq)]
pub struct WindowChange {
    pub record: String,
    pub window: usize,
    pub qt_before_ms: f64,
    pub qt_after_ms: f64,
    pub qt_lead_before: String,
    pub qt_lead_after: String,
    /// Bazett, Fridericia, Framingham, Hodges (ms).
    pub qtc_before_ms: [f64; 4],
    pub qtc_after_ms: [f64; 4],
    pub qtc_flag_before: String,
    pub qtc_flag_after: String,
    /// The reader marked the window unreadable.
    pub unreadable: bool,
}

/// What [`apply_corrections`] did.
#[derive(Debug, Clone, PartialEq)]
pub struct ApplyReport {
    /// Entries applied.
    pub n_changes: usize,
    /// Part files rewritten.
    pub parts: Vec<PathBuf>,
    /// Annotation files rewritten (`annotations/<record>.mark` and `.leadmark`).
    pub annotations: Vec<PathBuf>,
    pub windows: Vec<WindowChange>,
    /// `corrections-report.md` in the run directory.
    pub report: PathBuf,
}

/// Columns of `windows/` a correction may change; their automatic values go to `windows/auto`.
const WINDOW_COLUMNS: [&str; 20] = [
    "qt_ms",
    "qt_lead",
    "qt_lead_index",
    "qt_longest_ms",
    "qt_superimposed_ms",
    "qrs_ms",
    "pr_ms",
    "jt_ms",
    "p_ms",
    "tpe_ms",
    "qt_dispersion_ms",
    "qt_valid_leads",
    "qtc_bazett_ms",
    "qtc_fridericia_ms",
    "qtc_framingham_ms",
    "qtc_hodges_ms",
    "qtc_ms",
    "qtc_flag",
    "flags",
    "classification",
];

/// Record attributes recomputed after a correction; automatic values go to `windows/auto` attrs.
const RECORD_ATTRS: [&str; 18] = [
    "qt_ms",
    "qt_superimposed_ms",
    "qrs_ms",
    "pr_ms",
    "jt_ms",
    "p_ms",
    "tpe_ms",
    "qt_dispersion_ms",
    "qtc_bazett_ms",
    "qtc_fridericia_ms",
    "qtc_framingham_ms",
    "qtc_hodges_ms",
    "qtc_ms",
    "n_windows_measured",
    "qtc_flag",
    "classification",
    "flags",
    "caution",
];

/// Window flags in the order the run writes them, then the reader's.
const FLAG_ORDER: [&str; 12] = [
    "irregular",
    "wide_qrs",
    "sex_unknown",
    "qtc_above_500",
    "unreadable",
    "too_few_beats",
    "unreadable_noise",
    "paced",
    "qt_inconsistent",
    "corrected",
    "unreadable_reader",
    "beat_unreadable_reader",
];

/// Import the corrections file `corrections` into the run at `run_dir`.
///
/// `who` names the person importing; it is the author of entries that name none.
/// The whole file is checked first; any bad entry gives
/// [`ReviewError::Corrections`] listing every bad entry, and nothing is written.
/// Changed parts are written to temporary files first and renamed only when all
/// were written. The caller regenerates `results.h5` and the CSV tables from the parts.
pub fn apply_corrections(
    run_dir: &Path,
    corrections: &Path,
    who: Option<&str>,
) -> Result<ApplyReport, ReviewError> {
    let run = Run::load(run_dir)?;
    let cfg = run.measure_config()?;
    let file = corrections::read(corrections)?;
    let now = utc_now();
    let (checked, parts) = corrections::validate(&run, &file, corrections, who, &now)?;

    let mut by_record: BTreeMap<&str, Vec<&Checked>> = BTreeMap::new();
    for c in &checked {
        by_record.entry(&c.record).or_default().push(c);
    }
    let mut files: Vec<(PathBuf, Vec<u8>)> = Vec::new();
    let mut part_paths = Vec::new();
    let mut annotations = Vec::new();
    let mut windows = Vec::new();
    let ann_dir = run.dir.join("annotations");
    for (record, changes) in &by_record {
        let mut part = parts[*record].clone();
        let path = run.part_path(record);
        let invalid = |message: String| ReviewError::Invalid {
            path: path.clone(),
            message,
        };
        windows.extend(
            apply_record(
                &mut part.group,
                record,
                changes,
                &cfg,
                &now,
                who.unwrap_or(""),
            )
            .map_err(invalid)?,
        );
        // The annotation files follow the current marks; the automatic ones are kept
        // under annotations/auto/ (written once, at the first import).
        for (auto_dir, corrected) in [(ann_dir.join("auto"), false), (ann_dir.clone(), true)] {
            let (marks, leadmarks) = crate::annotations::of_part(&part.group, corrected);
            for (ext, anns) in [("mark", marks), ("leadmark", leadmarks)] {
                let p = auto_dir.join(format!("{record}.{ext}"));
                if !corrected && p.exists() {
                    continue;
                }
                let bytes =
                    tendline_formats::annotation::encode_annotations(&anns).map_err(|m| {
                        ReviewError::Invalid {
                            path: p.clone(),
                            message: m,
                        }
                    })?;
                if corrected {
                    annotations.push(p.clone());
                }
                files.push((p, bytes));
            }
        }
        let bytes = serde_json::to_vec(&part).map_err(|e| invalid(e.to_string()))?;
        part_paths.push(path.clone());
        files.push((path, bytes));
    }
    commit(&files)?;

    let report = run.dir.join("corrections-report.md");
    let text = report_text(corrections, &checked, &windows, &now, &cfg);
    tendline_store::write_atomic(&report, text.as_bytes())?;
    Ok(ApplyReport {
        n_changes: checked.len(),
        parts: part_paths,
        annotations,
        windows,
        report,
    })
}

/// Write every file to a temporary sibling, then rename them all: a failure while
/// writing leaves every file as it was. A failed rename (rare: the temporaries are in
/// the same folders) puts back the files already renamed from their backups.
fn commit(files: &[(PathBuf, Vec<u8>)]) -> Result<(), ReviewError> {
    let sibling = |path: &Path, what: &str| {
        path.with_file_name(format!(
            ".{}.{what}-{}",
            path.file_name()
                .map(|n| n.to_string_lossy())
                .unwrap_or_default(),
            std::process::id()
        ))
    };
    let io = |path: &Path| {
        let path = path.to_path_buf();
        move |source| ReviewError::Io { path, source }
    };
    let mut tmps: Vec<PathBuf> = Vec::new();
    let cleanup = |tmps: &[PathBuf]| {
        for t in tmps {
            let _ = std::fs::remove_file(t);
        }
    };
    for (path, bytes) in files {
        let tmp = sibling(path, "review-tmp");
        let r = path
            .parent()
            .map_or(Ok(()), std::fs::create_dir_all)
            .and_then(|_| std::fs::write(&tmp, bytes));
        if let Err(e) = r {
            let _ = std::fs::remove_file(&tmp);
            cleanup(&tmps);
            return Err(io(path)(e));
        }
        tmps.push(tmp);
    }
    // Backups (hard links, so nothing is copied) let a failed rename be undone.
    let mut backups: Vec<(PathBuf, Option<PathBuf>)> = Vec::new();
    for ((path, _), tmp) in files.iter().zip(&tmps) {
        let backup = path.exists().then(|| sibling(path, "review-bak"));
        if let Some(b) = &backup {
            let _ = std::fs::remove_file(b);
            if let Err(e) = std::fs::hard_link(path, b) {
                cleanup(&tmps);
                undo(&backups);
                return Err(io(path)(e));
            }
        }
        if let Err(e) = std::fs::rename(tmp, path) {
            if let Some(b) = &backup {
                let _ = std::fs::remove_file(b);
            }
            cleanup(&tmps);
            undo(&backups);
            return Err(io(path)(e));
        }
        backups.push((path.clone(), backup));
    }
    for (_, b) in backups {
        if let Some(b) = b {
            let _ = std::fs::remove_file(b);
        }
    }
    Ok(())
}

/// Put back the files of a partly renamed commit.
fn undo(done: &[(PathBuf, Option<PathBuf>)]) {
    for (path, backup) in done.iter().rev() {
        match backup {
            Some(b) => {
                let _ = std::fs::rename(b, path);
            }
            None => {
                let _ = std::fs::remove_file(path);
            }
        }
    }
}

fn f64_col(g: &Group, name: &str) -> Vec<f64> {
    f64s(g, name).unwrap_or_default()
}

fn set_f64(g: &mut Group, name: &str, i: usize, v: f64) {
    if let Some(Data::F64(col)) = g.datasets.get_mut(name).map(|d| &mut d.data) {
        if let Some(x) = col.get_mut(i) {
            *x = v;
        }
    }
}

fn set_i64(g: &mut Group, name: &str, i: usize, v: i64) {
    if let Some(Data::I64(col)) = g.datasets.get_mut(name).map(|d| &mut d.data) {
        if let Some(x) = col.get_mut(i) {
            *x = v;
        }
    }
}

fn set_text(g: &mut Group, name: &str, i: usize, v: String) {
    if let Some(Data::Text(col)) = g.datasets.get_mut(name).map(|d| &mut d.data) {
        if let Some(x) = col.get_mut(i) {
            *x = v;
        }
    }
}

fn nan(v: Option<f64>) -> f64 {
    v.unwrap_or(f64::NAN)
}

/// Apply one record's changes to its group; returns the before/after of each touched window.
fn apply_record(
    g: &mut Group,
    record: &str,
    changes: &[&Checked],
    cfg: &MeasureConfig,
    now: &str,
    importer: &str,
) -> Result<Vec<WindowChange>, String> {
    let fs = attr_f64(g, "fs")
        .filter(|f| f.is_finite() && *f > 0.0)
        .ok_or("record has no valid `fs` attribute")?;
    let sex = attr_text(g, "sex").and_then(Sex::parse);

    // Automatic values are saved once, before the first correction ever touches them.
    {
        let saved_attrs: Vec<(String, Attr)> = RECORD_ATTRS
            .iter()
            .filter_map(|k| g.attrs.get(*k).map(|a| (k.to_string(), a.clone())))
            .collect();
        let wg = g
            .groups
            .get_mut("windows")
            .ok_or("record has no windows/ group")?;
        if !wg.groups.contains_key("auto") {
            let cols: Vec<(String, tendline_store::Dataset)> = WINDOW_COLUMNS
                .iter()
                .filter_map(|k| wg.datasets.get(*k).map(|d| (k.to_string(), d.clone())))
                .collect();
            let auto = wg.group("auto");
            auto.datasets.extend(cols);
            auto.attrs.extend(saved_attrs);
        }
    }

    let mut by_window: BTreeMap<usize, Vec<&Checked>> = BTreeMap::new();
    let mut beat_changes = Vec::new();
    for c in changes {
        match (c.kind.is_beat(), c.window) {
            (true, _) => beat_changes.push(*c),
            (false, Some(w)) => by_window.entry(w).or_default().push(c),
            (false, None) => return Err("a window change without a window".into()),
        }
    }
    let mut out = Vec::new();
    for w in apply_beats(g, &beat_changes)? {
        if by_window.contains_key(&w) {
            continue; // recomputed below, which adds the flag
        }
        let wg = g
            .groups
            .get_mut("windows")
            .ok_or("record has no windows/ group")?;
        let mut flags: Vec<String> = texts(wg, "flags")
            .and_then(|v| v.get(w).cloned())
            .unwrap_or_default()
            .split(';')
            .filter(|f| !f.is_empty())
            .map(String::from)
            .collect();
        flags.push("beat_unreadable_reader".into());
        set_text(wg, "flags", w, order_flags(flags).join(";"));
    }
    for (&w, chs) in &by_window {
        let mdir = format!("{w:03}");
        let wg = g
            .groups
            .get_mut("windows")
            .ok_or("record has no windows/ group")?;
        let mg = wg
            .groups
            .get_mut("medians")
            .and_then(|m| m.groups.get_mut(&mdir))
            .ok_or(format!("windows/medians/{mdir} is missing"))?;
        let n_leads = i64s(mg, "usable").map_or(0, |v| v.len());
        for c in chs {
            if c.kind == Kind::Unreadable {
                mg.group("corrected").attr("unreadable", Attr::Int(1));
                continue;
            }
            let Some((li, _)) = c.lead else { continue };
            let auto = i64s(mg, &format!("marks/{}", c.fiducial))
                .map(<[i64]>::to_vec)
                .unwrap_or_else(|| vec![-1; n_leads]);
            let cm = mg.group("corrected").group("marks");
            let arr = match cm.datasets.get_mut(&c.fiducial) {
                Some(d) => d,
                None => {
                    cm.dataset_with_units(&c.fiducial, Data::I64(auto), "sample");
                    cm.datasets.get_mut(&c.fiducial).expect("just inserted")
                }
            };
            if let Data::I64(v) = &mut arr.data {
                if let Some(x) = v.get_mut(li) {
                    *x = c.new_sample;
                }
            }
        }
        let before = window_values(g, w);
        recompute_window(g, w, fs, sex, cfg)?;
        let after = window_values(g, w);
        let unreadable = window_unreadable(g, w);
        out.push(WindowChange {
            record: record.to_string(),
            window: w,
            qt_before_ms: before.0,
            qt_after_ms: after.0,
            qt_lead_before: before.1,
            qt_lead_after: after.1,
            qtc_before_ms: before.2,
            qtc_after_ms: after.2,
            qtc_flag_before: before.3,
            qtc_flag_after: after.3,
            unreadable,
        });
    }
    recompute_record(g, sex, cfg);
    append_audit(g, changes, now, importer);
    Ok(out)
}

/// Per-beat changes: corrected marks beside the automatic ones
/// (`marks/corrected/global/<fiducial>`, `marks/corrected/leads/<LL>/<fiducial>`) and
/// `beats/unreadable_reader`. Returns the windows holding a beat newly marked unreadable.
fn apply_beats(g: &mut Group, changes: &[&Checked]) -> Result<Vec<usize>, String> {
    let n_beats = i64s(g, "beats/qrs_peak").map_or(0, <[i64]>::len);
    let mut windows = Vec::new();
    for c in changes {
        let beat = c.beat.ok_or("a beat change without a beat")?;
        if c.kind == Kind::BeatUnreadable {
            let bg = g.group("beats");
            let d = bg
                .datasets
                .entry("unreadable_reader".to_string())
                .or_insert_with(|| tendline_store::Dataset {
                    data: Data::I64(vec![0; n_beats]),
                    attrs: BTreeMap::new(),
                });
            if let Data::I64(v) = &mut d.data {
                if let Some(x) = v.get_mut(beat) {
                    *x = 1;
                }
            }
            windows.extend(c.window);
            continue;
        }
        let (auto_dir, sub) = match &c.lead {
            None => ("marks/global".to_string(), "global".to_string()),
            Some((li, _)) => (format!("marks/leads/{li:02}"), format!("leads/{li:02}")),
        };
        let auto = i64s(g, &format!("{auto_dir}/{}", c.fiducial))
            .map(<[i64]>::to_vec)
            .ok_or(format!("{auto_dir}/{} is missing", c.fiducial))?;
        let mut cg = g.group("marks").group("corrected");
        for s in sub.split('/') {
            cg = cg.group(s);
        }
        let d = cg
            .datasets
            .entry(c.fiducial.clone())
            .or_insert_with(|| tendline_store::Dataset {
                data: Data::I64(auto),
                attrs: [("units".to_string(), Attr::Text("sample".into()))].into(),
            });
        if let Data::I64(v) = &mut d.data {
            if let Some(x) = v.get_mut(beat) {
                *x = c.new_sample;
            }
        }
    }
    windows.sort_unstable();
    windows.dedup();
    Ok(windows)
}

/// Beats of window `w` the reader marked unreadable.
fn beats_unreadable_in(g: &Group, w: usize) -> usize {
    let (Some(fs), Some(start), Some(end)) = (
        attr_f64(g, "fs"),
        f64s(g, "windows/start_s").and_then(|v| v.get(w).copied()),
        f64s(g, "windows/end_s").and_then(|v| v.get(w).copied()),
    ) else {
        return 0;
    };
    let peaks = i64s(g, "beats/qrs_peak").unwrap_or(&[]);
    let flags = i64s(g, "beats/unreadable_reader").unwrap_or(&[]);
    peaks
        .iter()
        .zip(flags)
        .filter(|(&p, &u)| {
            let t = p as f64 / fs;
            u != 0 && t >= start && t < end
        })
        .count()
}

fn window_unreadable(g: &Group, w: usize) -> bool {
    crate::util::group_at(g, &format!("windows/medians/{w:03}/corrected"))
        .and_then(|c| attr_f64(c, "unreadable"))
        .is_some_and(|v| v != 0.0)
}

/// (QT, QT lead, four QTc, QTc flag) of window `w` as currently stored.
fn window_values(g: &Group, w: usize) -> (f64, String, [f64; 4], String) {
    let v = |c: &str| {
        f64_col(g, &format!("windows/{c}"))
            .get(w)
            .copied()
            .unwrap_or(f64::NAN)
    };
    let t = |c: &str| {
        texts(g, &format!("windows/{c}"))
            .and_then(|x| x.get(w).cloned())
            .unwrap_or_default()
    };
    (
        v("qt_ms"),
        t("qt_lead"),
        [
            v("qtc_bazett_ms"),
            v("qtc_fridericia_ms"),
            v("qtc_framingham_ms"),
            v("qtc_hodges_ms"),
        ],
        t("qtc_flag"),
    )
}

/// Rebuild the per-lead measurements of window `w` from the automatic marks with the
/// corrected marks laid over them, and combine them by the run's rule.
fn recompute_window(
    g: &mut Group,
    w: usize,
    fs: f64,
    sex: Option<Sex>,
    cfg: &MeasureConfig,
) -> Result<(), String> {
    let mpath = format!("windows/medians/{w:03}");
    let mg = crate::util::group_at(g, &mpath).ok_or(format!("{mpath} is missing"))?;
    let usable = i64s(mg, "usable").unwrap_or(&[]).to_vec();
    let n = usable.len();
    let (cols, beat) = match data_at(mg, "beat") {
        Some(Data::F32Matrix { cols, values }) => (*cols, values.clone()),
        _ => (0, Vec::new()),
    };
    let get = |dir: &str, f: &str| i64s(mg, &format!("{dir}/{f}")).map(<[i64]>::to_vec);
    let mut marks: BTreeMap<&str, Vec<i64>> = BTreeMap::new();
    let mut changed_lead = vec![false; n];
    for f in FIDUCIALS {
        let auto = get("marks", f).unwrap_or_else(|| vec![-1; n]);
        let eff = match get("corrected/marks", f) {
            Some(c) => {
                for l in 0..n.min(c.len()).min(auto.len()) {
                    changed_lead[l] |= c[l] != auto[l];
                }
                c
            }
            None => auto,
        };
        marks.insert(f, eff);
    }
    let conf = |f: &str, l: usize| {
        f64s(mg, &format!("marks/{f}_confidence"))
            .and_then(|v| v.get(l).copied())
            .unwrap_or(1.0) as f32
    };
    let mk = |f: &str, l: usize| -> Option<Mark> {
        let s = *marks.get(f)?.get(l)?;
        (s >= 0 && (s as usize) < cols.max(1)).then(|| Mark {
            sample: s as usize,
            confidence: conf(f, l),
        })
    };
    let stored = |name: &str| f64s(mg, name).unwrap_or_else(|| vec![f64::NAN; n]);
    let (t_amp, noise) = (stored("t_amplitude_mv"), stored("noise_mv"));
    let t_noise = stored("t_noise_mv");
    let fin = |v: f64| v.is_finite().then_some(v);
    let ms = |a: Option<Mark>, b: Option<Mark>| {
        a.zip(b)
            .map(|(a, b)| (b.sample as f64 - a.sample as f64) / fs * 1000.0)
    };
    let mut leads: Vec<LeadMeasure> = Vec::with_capacity(n);
    for l in 0..n {
        let bm = BeatMarks {
            p_on: mk("p_on", l),
            p_peak: mk("p_peak", l),
            p_end: mk("p_end", l),
            qrs_on: mk("qrs_on", l),
            qrs_peak: mk("qrs_peak", l),
            qrs_end: mk("qrs_end", l),
            t_on: mk("t_on", l),
            t_peak: mk("t_peak", l),
            t_end: mk("t_end", l),
            t_end_wavelet: mk("t_end_wavelet", l),
            t_end_tangent: mk("t_end_tangent", l),
            t_end_area: mk("t_end_area", l),
            ..BeatMarks::default()
        };
        let row = beat.get(l * cols..(l + 1) * cols).unwrap_or(&[]);
        let t_amplitude_mv = if changed_lead[l] {
            t_amplitude(row, &bm)
        } else {
            fin(t_amp.get(l).copied().unwrap_or(f64::NAN))
        };
        leads.push(LeadMeasure {
            usable: usable[l] != 0,
            qt_ms: ms(bm.qrs_on, bm.t_end),
            qrs_ms: ms(bm.qrs_on, bm.qrs_end),
            pr_ms: ms(bm.p_on, bm.qrs_on),
            t_amplitude_mv,
            noise_mv: fin(noise.get(l).copied().unwrap_or(f64::NAN)),
            t_noise_mv: fin(t_noise.get(l).copied().unwrap_or(f64::NAN)),
            qt_accepted: false,
            // The consistency check only flags; the global rules never read it.
            inconsistent: false,
            marks: bm,
        });
    }
    let unreadable = window_unreadable(g, w);
    let gl = global::combine(&leads, fs, cfg);
    let noisy = leads
        .iter()
        .any(|lm| lm.usable && global::too_noisy(lm, cfg));

    // Per-lead corrected values beside the automatic ones.
    {
        let mg = g
            .groups
            .get_mut("windows")
            .and_then(|x| x.groups.get_mut("medians"))
            .and_then(|x| x.groups.get_mut(&format!("{w:03}")))
            .ok_or(format!("{mpath} is missing"))?;
        let cg = mg.group("corrected");
        let col = |f: &dyn Fn(&LeadMeasure) -> Option<f64>| {
            Data::F64(leads.iter().map(|l| nan(f(l))).collect())
        };
        cg.dataset_with_units("qt_ms", col(&|l| l.qt_ms), "ms");
        cg.dataset_with_units("qrs_ms", col(&|l| l.qrs_ms), "ms");
        cg.dataset_with_units("pr_ms", col(&|l| l.pr_ms), "ms");
        cg.dataset_with_units("t_amplitude_mv", col(&|l| l.t_amplitude_mv), "mV");
        cg.dataset(
            "qt_accepted",
            Data::I64(
                (0..n)
                    .map(|l| i64::from(gl.accepted_leads.contains(&l)))
                    .collect(),
            ),
        );
        cg.attr("unreadable", Attr::Int(i64::from(unreadable)));
    }

    let names: Vec<String> = crate::util::attr_texts(g, "leads").unwrap_or(&[]).to_vec();
    let n_beats_unreadable = beats_unreadable_in(g, w);
    let wg = g
        .groups
        .get_mut("windows")
        .ok_or("record has no windows/ group")?;
    let rr_ms = f64_col(wg, "rr_ms").get(w).copied().unwrap_or(f64::NAN);
    let auto_flags = texts(wg, "auto/flags")
        .or_else(|| texts(wg, "flags"))
        .and_then(|v| v.get(w).cloned())
        .unwrap_or_default();
    let mut flags: Vec<String> = auto_flags
        .split(';')
        .filter(|s| !s.is_empty() && !["wide_qrs", "qtc_above_500", "unreadable_noise"].contains(s))
        .map(String::from)
        .collect();
    flags.push("corrected".into());

    if n_beats_unreadable > 0 {
        flags.push("beat_unreadable_reader".into());
    }
    let (p_dur, tpe, qt_disp) = if unreadable {
        (None, None, None)
    } else {
        (gl.p_ms, gl.tpe_ms, gl.qt_dispersion_ms)
    };
    let (qt, qt_lead, qt_longest, qt_sup, qrs, pr) = if unreadable {
        flags.push("unreadable_reader".into());
        (None, None, None, None, None, None)
    } else {
        let (q, l) = match cfg.qt_rule {
            QtRule::LongestLead => (gl.longest_ms, gl.longest_lead),
            QtRule::Superimposed => (gl.superimposed_ms, None),
        };
        (q, l, gl.longest_ms, gl.superimposed_ms, gl.qrs_ms, gl.pr_ms)
    };
    let jt = qt.zip(qrs).map(|(q, r)| q - r);
    let rr = fin(rr_ms);
    let all = qt.zip(rr).map(|(q, r)| qtc::all(q, r));
    let qb = all.and_then(|a| fin(a.bazett_ms));
    let qf = all.and_then(|a| fin(a.fridericia_ms));
    let qfr = all.and_then(|a| fin(a.framingham_ms));
    let qh = all.and_then(|a| fin(a.hodges_ms));
    let preferred = match cfg.preferred_formula {
        Formula::Bazett => qb,
        Formula::Fridericia => qf,
        Formula::Framingham => qfr,
        Formula::Hodges => qh,
    };
    let class = tendline_measure::classify(preferred, sex, &cfg.limits);
    if class.high_risk {
        flags.push("qtc_above_500".into());
    }
    if qrs.is_some_and(|q| q >= cfg.limits.wide_qrs_ms) {
        flags.push("wide_qrs".into());
    }
    if noisy && !unreadable {
        flags.push("unreadable_noise".into());
    }
    let flags = order_flags(flags);

    set_f64(wg, "qt_ms", w, nan(qt));
    set_text(
        wg,
        "qt_lead",
        w,
        qt_lead
            .and_then(|l| names.get(l).cloned())
            .unwrap_or_default(),
    );
    set_i64(wg, "qt_lead_index", w, qt_lead.map_or(-1, |l| l as i64));
    set_f64(wg, "qt_longest_ms", w, nan(qt_longest));
    set_f64(wg, "qt_superimposed_ms", w, nan(qt_sup));
    set_f64(wg, "qrs_ms", w, nan(qrs));
    set_f64(wg, "pr_ms", w, nan(pr));
    set_f64(wg, "jt_ms", w, nan(jt));
    set_f64(wg, "p_ms", w, nan(p_dur));
    set_f64(wg, "tpe_ms", w, nan(tpe));
    set_f64(wg, "qt_dispersion_ms", w, nan(qt_disp));
    set_i64(
        wg,
        "qt_valid_leads",
        w,
        if unreadable {
            0
        } else {
            gl.qt_valid_leads as i64
        },
    );
    set_f64(wg, "qtc_bazett_ms", w, nan(qb));
    set_f64(wg, "qtc_fridericia_ms", w, nan(qf));
    set_f64(wg, "qtc_framingham_ms", w, nan(qfr));
    set_f64(wg, "qtc_hodges_ms", w, nan(qh));
    set_f64(wg, "qtc_ms", w, nan(preferred));
    set_text(wg, "qtc_flag", w, class.flag.as_str().to_string());
    set_text(wg, "flags", w, flags.join(";"));
    set_text(wg, "classification", w, class.text);
    Ok(())
}

/// Flags without repeats, the run's order first.
fn order_flags(v: Vec<String>) -> Vec<String> {
    let mut out: Vec<String> = FLAG_ORDER
        .iter()
        .filter(|f| v.iter().any(|x| x == *f))
        .map(|f| f.to_string())
        .collect();
    for f in v {
        if !out.contains(&f) {
            out.push(f);
        }
    }
    out
}

/// T amplitude (mV) against the level at QRS onset: at the T peak if marked, else the
/// largest deviation between the T onset (or QRS end) and the T end; the measurement
/// stage's definition.
fn t_amplitude(row: &[f32], m: &BeatMarks) -> Option<f64> {
    let at = |s: usize| row.get(s).map(|&v| v as f64);
    let base = at(m.qrs_on?.sample)?;
    if let Some(tp) = m.t_peak {
        return at(tp.sample).map(|v| v - base);
    }
    let from = m.t_on.or(m.qrs_end)?.sample;
    let to = m.t_end?.sample;
    (from < to && to < row.len()).then(|| {
        row[from..=to]
            .iter()
            .map(|&v| v as f64 - base)
            .max_by(|a, b| a.abs().total_cmp(&b.abs()))
            .unwrap_or(0.0)
    })
}

/// Record-level summary attributes from the current window columns (medians over
/// windows, as the run computes them).
fn recompute_record(g: &mut Group, sex: Option<Sex>, cfg: &MeasureConfig) {
    let Some(wg) = g.groups.get("windows") else {
        return;
    };
    let med = |c: &str| median_finite(f64_col(wg, c).into_iter());
    let mut set = Vec::new();
    for c in [
        "qt_ms",
        "qt_superimposed_ms",
        "qrs_ms",
        "pr_ms",
        "jt_ms",
        "p_ms",
        "tpe_ms",
        "qt_dispersion_ms",
        "qtc_bazett_ms",
        "qtc_fridericia_ms",
        "qtc_framingham_ms",
        "qtc_hodges_ms",
        "qtc_ms",
    ] {
        set.push((c, med(c)));
    }
    let qtc_ms = med("qtc_ms");
    let n_measured = f64_col(wg, "qtc_ms")
        .iter()
        .filter(|v| v.is_finite())
        .count();
    let class = tendline_measure::classify(qtc_ms.is_finite().then_some(qtc_ms), sex, &cfg.limits);
    let wflags: Vec<String> = texts(wg, "flags").unwrap_or(&[]).to_vec();
    let any = |f: &str| wflags.iter().any(|x| x.split(';').any(|y| y == f));
    let auto_flags = wg
        .groups
        .get("auto")
        .and_then(|a| attr_text(a, "flags"))
        .or_else(|| attr_text(g, "flags"))
        .unwrap_or("")
        .to_string();
    let class_names = [
        "normal",
        "prolonged",
        "prolonged_if_male",
        "short",
        "unknown",
    ];
    let mut flags: Vec<String> = Vec::new();
    if class.flag.as_str() != "normal" {
        flags.push(class.flag.as_str().into());
    }
    if any("qtc_above_500") {
        flags.push("qtc_above_500".into());
    }
    if any("wide_qrs") {
        flags.push("wide_qrs".into());
    }
    for f in auto_flags.split(';') {
        if !f.is_empty()
            && !class_names.contains(&f)
            && !["qtc_above_500", "wide_qrs", "unreadable_noise"].contains(&f)
        {
            flags.push(f.to_string());
        }
    }
    for f in [
        "unreadable_noise",
        "corrected",
        "unreadable_reader",
        "beat_unreadable_reader",
    ] {
        if any(f) {
            flags.push(f.into());
        }
    }
    let mut seen = Vec::new();
    flags.retain(|f| {
        let new = !seen.contains(f);
        seen.push(f.clone());
        new
    });
    for (c, v) in set {
        g.attr(c, Attr::Float(v));
    }
    g.attr("n_windows_measured", Attr::Int(n_measured as i64));
    g.attr("qtc_flag", Attr::Text(class.flag.as_str().into()));
    g.attr("classification", Attr::Text(class.text));
    g.attr("flags", Attr::Text(flags.join(";")));
}

/// Append the applied changes to the `corrections/` audit table.
fn append_audit(g: &mut Group, changes: &[&Checked], now: &str, importer: &str) {
    let ag = g.group("corrections");
    let mut push_text = |name: &str, vals: Vec<String>| {
        let d = ag
            .datasets
            .entry(name.to_string())
            .or_insert_with(|| tendline_store::Dataset {
                data: Data::Text(Vec::new()),
                attrs: BTreeMap::new(),
            });
        if let Data::Text(v) = &mut d.data {
            v.extend(vals);
        }
    };
    push_text("record", changes.iter().map(|c| c.record.clone()).collect());
    push_text(
        "lead",
        changes
            .iter()
            .map(|c| c.lead.as_ref().map_or("global".into(), |l| l.1.clone()))
            .collect(),
    );
    push_text(
        "fiducial",
        changes.iter().map(|c| c.fiducial.clone()).collect(),
    );
    push_text(
        "kind",
        changes.iter().map(|c| c.kind.as_str().into()).collect(),
    );
    push_text("who", changes.iter().map(|c| c.who.clone()).collect());
    push_text("when", changes.iter().map(|c| c.when.clone()).collect());
    push_text("reason", changes.iter().map(|c| c.reason.clone()).collect());
    push_text(
        "applied_utc",
        changes.iter().map(|_| now.to_string()).collect(),
    );
    push_text(
        "applied_by",
        changes.iter().map(|_| importer.to_string()).collect(),
    );
    let mut push_int = |name: &str, vals: Vec<i64>, units: Option<&str>| {
        let d = ag
            .datasets
            .entry(name.to_string())
            .or_insert_with(|| tendline_store::Dataset {
                data: Data::I64(Vec::new()),
                attrs: units
                    .map(|u| [("units".to_string(), Attr::Text(u.into()))].into())
                    .unwrap_or_default(),
            });
        if let Data::I64(v) = &mut d.data {
            v.extend(vals);
        }
    };
    push_int(
        "window",
        changes
            .iter()
            .map(|c| c.window.map_or(-1, |w| w as i64))
            .collect(),
        None,
    );
    push_int(
        "beat",
        changes
            .iter()
            .map(|c| c.beat.map_or(-1, |b| b as i64))
            .collect(),
        None,
    );
    push_int(
        "old_sample",
        changes.iter().map(|c| c.old_sample).collect(),
        Some("sample"),
    );
    push_int(
        "new_sample",
        changes.iter().map(|c| c.new_sample).collect(),
        Some("sample"),
    );
}

fn report_text(
    path: &Path,
    checked: &[Checked],
    windows: &[WindowChange],
    now: &str,
    cfg: &MeasureConfig,
) -> String {
    let mut s = String::new();
    let f = |v: f64| crate::util::ms(v);
    let _ = writeln!(s, "# Corrections applied\n");
    let _ = writeln!(
        s,
        "- File: `{}`\n- Applied: {now}\n- Entries: {}\n- QT rule: {}; preferred QTc: {}\n",
        path.display(),
        checked.len(),
        cfg.qt_rule.as_str(),
        cfg.preferred_formula.as_str()
    );
    let _ = writeln!(s, "## Changes\n");
    let _ = writeln!(
        s,
        "| # | record | kind | window | beat | lead | mark | old sample | new sample | who | when | reason |"
    );
    let _ = writeln!(s, "|---|---|---|---|---|---|---|---|---|---|---|---|");
    let opt = |v: Option<usize>| v.map_or("—".to_string(), |v| v.to_string());
    for c in checked {
        let lead = c.lead.as_ref().map_or("global", |l| l.1.as_str());
        let (o, n) = if c.kind.is_unreadable() {
            ("—".to_string(), "unreadable".to_string())
        } else {
            (c.old_sample.to_string(), c.new_sample.to_string())
        };
        let _ = writeln!(
            s,
            "| {} | {} | {} | {} | {} | {} | {} | {o} | {n} | {} | {} | {} |",
            c.index,
            c.record,
            c.kind.as_str(),
            opt(c.window),
            opt(c.beat),
            lead,
            c.fiducial,
            md(&c.who),
            c.when,
            md(&c.reason)
        );
    }
    let n_beat = checked.iter().filter(|c| c.kind.is_beat()).count();
    if n_beat > 0 {
        let _ = writeln!(
            s,
            "\n{n_beat} per-beat change(s): the annotation files `annotations/<record>.mark` and `.leadmark` now carry the corrected marks (the automatic files are kept in `annotations/auto/`); an unreadable beat keeps its QRS mark as `Q` (unclassifiable) and loses its wave boundaries. Window QT comes from the median beat, which is not rebuilt: windows holding a beat marked unreadable carry the flag `beat_unreadable_reader` so the reader can correct their median marks or mark them unreadable."
        );
    }
    let _ = writeln!(s, "\n## Windows recomputed\n");
    let _ = writeln!(s, "| record | window | QT before (lead) | QT after (lead) | QTcB | QTcF | QTcFram | QTcH | QTc flag |");
    let _ = writeln!(s, "|---|---|---|---|---|---|---|---|---|");
    for w in windows {
        let pair = |i: usize| format!("{} → {}", f(w.qtc_before_ms[i]), f(w.qtc_after_ms[i]));
        let _ = writeln!(
            s,
            "| {} | {} | {} ms ({}) | {} ms ({}){} | {} | {} | {} | {} | {} → {} |",
            w.record,
            w.window,
            f(w.qt_before_ms),
            w.qt_lead_before,
            f(w.qt_after_ms),
            w.qt_lead_after,
            if w.unreadable { " unreadable" } else { "" },
            pair(0),
            pair(1),
            pair(2),
            pair(3),
            w.qtc_flag_before,
            w.qtc_flag_after
        );
    }
    let _ = writeln!(s, "\nAutomatic values are kept in `windows/auto` and the automatic marks in `windows/medians/<WWW>/marks`.\n\n{}", tendline_measure::CAUTION);
    s
}

fn md(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cfg_of(run: &Path) -> MeasureConfig {
        Run::load(run).unwrap().measure_config().unwrap()
    }

    /// Without any correction the recomputation must give back exactly what the run
    /// stored: the same marks, the same rule (the measurement stage's `combine`), the
    /// same formulas. This ties the import to the run's own numbers.
    #[test]
    fn recomputing_an_uncorrected_window_reproduces_the_run() {
        let fixture = Path::new(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/fixtures/demo-run"
        ));
        // More run directories to check, e.g. a run over real recordings (`:`-separated).
        let extra = std::env::var("REVIEW_CHECK_RUNS").unwrap_or_default();
        let dirs: Vec<&Path> = std::iter::once(fixture)
            .chain(extra.split(':').filter(|s| !s.is_empty()).map(Path::new))
            .collect();
        let mut n = 0;
        for dir in dirs {
            let cfg = cfg_of(dir);
            for rec in Run::load(dir)
                .unwrap()
                .records
                .iter()
                .map(|r| r.record.clone())
            {
                let Some(p) =
                    tendline_store::Part::load(&dir.join(format!("parts/{rec}.json"))).unwrap()
                else {
                    continue;
                };
                let mut g = p.group.clone();
                let fs = attr_f64(&g, "fs").unwrap();
                let sex = attr_text(&g, "sex").and_then(Sex::parse);
                let nw = f64_col(&g, "windows/start_s").len();
                for w in 0..nw {
                    recompute_window(&mut g, w, fs, sex, &cfg).unwrap();
                    for c in WINDOW_COLUMNS {
                        let (a, b) = (
                            data_at(&p.group, &format!("windows/{c}")),
                            data_at(&g, &format!("windows/{c}")),
                        );
                        if c == "flags" {
                            // Only the reader's flag is added.
                            let (Some(Data::Text(a)), Some(Data::Text(b))) = (a, b) else {
                                panic!()
                            };
                            let want = if a[w].is_empty() {
                                "corrected".to_string()
                            } else {
                                format!("{};corrected", a[w])
                            };
                            assert_eq!(b[w], want, "{rec} window {w}");
                            continue;
                        }
                        match (a, b) {
                            (Some(Data::F64(a)), Some(Data::F64(b))) => {
                                let same = (a[w].is_nan() && b[w].is_nan())
                                    || (a[w] - b[w]).abs() <= 1e-9 * a[w].abs().max(1.0);
                                assert!(
                                    same,
                                    "{rec} window {w} {c}: run {} recomputed {}",
                                    a[w], b[w]
                                );
                            }
                            (a, b) => assert_eq!(a, b, "{rec} window {w} {c}"),
                        }
                    }
                    n += 1;
                }
            }
        }
        assert!(n >= 2);
    }

    #[test]
    fn t_amplitude_follows_the_measurement_rule() {
        // T peak marked: value at the peak minus the value at QRS onset.
        let row: Vec<f32> = (0..100)
            .map(|k| {
                if k == 60 {
                    0.5
                } else if k == 10 {
                    0.1
                } else {
                    0.0
                }
            })
            .collect();
        let mk = |s| {
            Some(Mark {
                sample: s,
                confidence: 1.0,
            })
        };
        let m = BeatMarks {
            qrs_on: mk(10),
            t_peak: mk(60),
            t_end: mk(80),
            ..BeatMarks::default()
        };
        assert!((t_amplitude(&row, &m).unwrap() - 0.4).abs() < 1e-6);
        // No T peak: largest deviation between QRS end and T end.
        let m = BeatMarks {
            qrs_on: mk(20),
            qrs_end: mk(30),
            t_end: mk(80),
            ..BeatMarks::default()
        };
        assert!((t_amplitude(&row, &m).unwrap() - 0.5).abs() < 1e-6);
        assert_eq!(t_amplitude(&row, &BeatMarks::default()), None);
    }
}
