//! Shared loading and scoring for the database regression tests.
//!
//! Scoring follows the conventions in `../shared/data/README.md` (common
//! practice): a reference wave matches the tool's wave within 150 ms
//! (ANSI/AAMI EC57 practice), error = tool − reference in ms, sensitivity =
//! reference marks with a tool mark in the matched beat / reference marks.

#![allow(dead_code)]

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use tendline_dsp::filter::{ConditioningFilter, FilterConfig};
use tendline_formats::annotation::read_annotations;

pub fn data_dir() -> Option<PathBuf> {
    let d = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    if d.is_dir() {
        Some(d)
    } else {
        eprintln!("SKIP: reference data not found at {}", d.display());
        None
    }
}

/// A record's leads after the run's conditioning filter (default `[filter]`).
pub fn load_filtered(dir: &Path, rec: &str) -> (f64, Vec<Vec<f64>>) {
    let hea = dir.join(format!("{rec}.hea"));
    let r = tendline_formats::wfdb::read_record(&hea)
        .unwrap_or_else(|e| panic!("{}: {e}", hea.display()));
    let f = ConditioningFilter::design(r.fs, &FilterConfig::default()).expect("filter design");
    let leads = r
        .leads
        .iter()
        .map(|l| {
            let x: Vec<f64> = l
                .samples
                .iter()
                .map(|v| if v.is_finite() { *v } else { 0.0 })
                .collect();
            f.apply(&x)
        })
        .collect();
    (r.fs, leads)
}

/// `(sample, symbol)` of an annotation file.
pub fn annotations(path: &Path) -> Vec<(i64, String)> {
    read_annotations(path)
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()))
        .iter()
        .map(|a| (a.sample, a.symbol().to_string()))
        .collect()
}

/// A reference wave: kind (`p`, `N` for any QRS label, `t`), onset, peak, end.
#[derive(Debug, Clone, Copy)]
pub struct RefWave {
    pub kind: char,
    pub on: Option<i64>,
    pub peak: i64,
    pub end: Option<i64>,
}

/// Waves from the WFDB boundary convention `(` peak `)`: a boundary belongs
/// to the peak mark it immediately precedes or follows.
pub fn waves(ann: &[(i64, String)]) -> Vec<RefWave> {
    let mut out = vec![];
    for i in 0..ann.len() {
        let s = ann[i].1.as_str();
        if matches!(s, "(" | ")" | "u" | "") {
            continue;
        }
        let kind = match s {
            "p" => 'p',
            "t" => 't',
            _ => 'N',
        };
        let on = (i > 0 && ann[i - 1].1 == "(").then(|| ann[i - 1].0);
        let end = (i + 1 < ann.len() && ann[i + 1].1 == ")").then(|| ann[i + 1].0);
        out.push(RefWave {
            kind,
            on,
            peak: ann[i].0,
            end,
        });
    }
    out
}

/// Error accumulator for one fiducial.
#[derive(Default, Clone, Debug)]
pub struct Acc {
    pub n_ref: usize,
    pub n_found: usize,
    pub errs: Vec<f64>,
}

impl Acc {
    pub fn add(&mut self, got: Option<usize>, reference: i64, fs: f64) {
        self.n_ref += 1;
        if let Some(g) = got {
            self.n_found += 1;
            self.errs.push((g as f64 - reference as f64) * 1000.0 / fs);
        }
    }
    pub fn merge(&mut self, o: &Acc) {
        self.n_ref += o.n_ref;
        self.n_found += o.n_found;
        self.errs.extend(&o.errs);
    }
    pub fn sens(&self) -> f64 {
        100.0 * self.n_found as f64 / self.n_ref.max(1) as f64
    }
    pub fn mean(&self) -> f64 {
        self.errs.iter().sum::<f64>() / self.errs.len().max(1) as f64
    }
    pub fn sd(&self) -> f64 {
        let m = self.mean();
        let n = self.errs.len();
        if n < 2 {
            return 0.0;
        }
        (self.errs.iter().map(|e| (e - m).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
    }
}

pub type Table = BTreeMap<String, Acc>;

pub fn merge_tables(tables: &[Table]) -> Table {
    let mut t = Table::new();
    for tab in tables {
        for (k, a) in tab {
            t.entry(k.clone()).or_default().merge(a);
        }
    }
    t
}

pub fn print_table(title: &str, t: &Table, keys: &[&str]) {
    println!("{title}");
    println!(
        "{:16} {:>8} {:>8} {:>8} {:>7}",
        "fiducial", "sens %", "mean ms", "SD ms", "n ref"
    );
    for k in keys {
        if let Some(a) = t.get(*k) {
            println!(
                "{:16} {:8.2} {:8.2} {:8.2} {:7}",
                k,
                a.sens(),
                a.mean(),
                a.sd(),
                a.n_ref
            );
        }
    }
}

/// Input beats of a QTDB record. Where the database has reference beat
/// annotations for every beat (`.atr`) those are used. Otherwise `.man` lists
/// only the ~30 selected beats, so the gaps are filled with beats from the
/// project's Pan–Tompkins detector (`tendline-detect`): a selected beat
/// replaces the detected beat within 150 ms of it. Without the fill, the
/// neighbours of a selected beat would be other selected beats seconds away
/// and the T search window would run into unlisted complexes.
pub fn qtdb_beats(dir: &Path, rec: &str, leads: &[Vec<f64>], fs: f64) -> Vec<usize> {
    let read = |ext: &str| -> Vec<usize> {
        read_annotations(&dir.join(format!("{rec}.{ext}")))
            .unwrap()
            .iter()
            .filter(|a| a.is_beat() && a.sample >= 0)
            .map(|a| a.sample as usize)
            .collect()
    };
    if dir.join(format!("{rec}.atr")).is_file() {
        return read("atr");
    }
    let man = read("man");
    let refs: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    let det = tendline_detect::detect(&refs, fs, &tendline_detect::DetectConfig::default())
        .expect("detector on a QTDB record");
    let tol = (0.150 * fs) as usize;
    let mut beats: Vec<usize> = det
        .beats
        .iter()
        .map(|b| b.sample)
        .filter(|&s| man.iter().all(|&m| m.abs_diff(s) > tol))
        .chain(man.iter().copied())
        .collect();
    beats.sort_unstable();
    beats.dedup();
    beats
}
