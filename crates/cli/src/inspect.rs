//! `tendline inspect`: what a run would read, checked before any processing.
//!
//! A delivery of ECGs (a folder of WFDB, EDF, CSV or aECG files and a subjects
//! table) is worth checking before a long batch: does every record read, at
//! which sampling rate, with which leads, for how long, with which missing
//! samples or non-ECG signals, and does every record find its row in the
//! subjects table (and every row its record)? `inspect` resolves the INPUTs
//! exactly as `run` does, reads every record with the same readers and the same
//! checks (records in parallel, within the memory budget of a run:
//! [`crate::budget`]), and prints one line per record; `--csv FILE`
//! writes every field, `--checksums` adds the SHA-256 of each input file (the
//! values a run stores in `results.h5`). Nothing is written beside the inputs.
//!
//! Exit codes follow `run`: 0 when every record reads, 1 when any does not (the
//! others are still listed), 2 when no input resolves to a record at all.

use crate::inputs::{self, RecordInput};
use crate::pipeline::{
    amplitude_warning, check_lead, check_not_empty, check_shape, chunk_plan, non_ecg_leads,
};
use crate::run::{input_files, panic_text, sha256_file};
use crate::tables::csv_cell;
use anyhow::{Context, Result};
use rayon::prelude::*;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use tendline_formats::deferred::{DigitalLead, Loaded};
use tendline_formats::subjects::SubjectRow;

#[derive(clap::Args)]
pub struct InspectArgs {
    /// Folders, RECORDS lists, or record paths, as for `run`.
    #[arg(required = true)]
    inputs: Vec<PathBuf>,
    /// Write every field of every record to this CSV file.
    #[arg(long, value_name = "FILE")]
    csv: Option<PathBuf>,
    /// Subjects CSV to check against the records; default: subjects.csv in an input folder.
    #[arg(long)]
    subjects: Option<PathBuf>,
    /// Add the SHA-256 of every input file (reads each file once more).
    #[arg(long)]
    checksums: bool,
    /// Sampling rate (Hz) for CSV records that do not state one.
    #[arg(long, value_name = "HZ")]
    csv_fs: Option<f64>,
}

/// One record as read.
#[derive(Debug, Default)]
struct Row {
    name: String,
    path: PathBuf,
    format: &'static str,
    fs: Option<f64>,
    n_samples: Option<usize>,
    /// (name, units, why it is not analysed as ECG, missing samples).
    leads: Vec<(String, String, Option<String>, usize)>,
    /// SHA-256 of the decoded signal (sampling rate, number of leads, then every
    /// lead's samples as little-endian `f64`, NaN in one canonical form): equal for two records whose
    /// samples are equal, whatever their names, headers or formats.
    signal_sha256: Option<String>,
    /// Estimated peak memory of processing the record (bytes; [`crate::budget`]).
    need: u64,
    /// Leads whose readable samples all have one value (a disconnected
    /// electrode, a zero-filled channel): they read, but hold no ECG.
    flat: Vec<String>,
    sex: Option<&'static str>,
    age: Option<f64>,
    subject: Option<String>,
    timepoint: Option<String>,
    arm: Option<String>,
    files: Vec<PathBuf>,
    sha256: Vec<String>,
    /// Extensions of the files beside the record that share its name and are
    /// not its signal files (reference annotations such as `q1c`, `atr`, `i`).
    annotations: Vec<String>,
    warnings: Vec<String>,
    error: Option<String>,
    /// Typical peak-to-peak range of the ECG leads as read, taken as mV
    /// (`tendline_dsp::amplitude`); outside the default plausible span it
    /// adds a warning.
    amplitude_mv: Option<f64>,
}

impl Row {
    fn duration_s(&self) -> Option<f64> {
        self.fs.zip(self.n_samples).map(|(fs, n)| n as f64 / fs)
    }
    fn missing(&self) -> usize {
        self.leads.iter().map(|l| l.3).sum()
    }
}

/// The format a path is read as (the reader `tendline_formats::read_record` picks).
fn format_of(path: &Path) -> &'static str {
    match path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .as_deref()
    {
        Some("edf") => "EDF",
        Some("bdf") => "BDF",
        Some("ecg") => "ISHNE",
        Some("csv") => "CSV",
        Some("xml") => "HL7 aECG",
        _ => "WFDB",
    }
}

/// The files of each folder holding a record, listed once: stem → (extension,
/// path) of every plain file whose extension is not a signal format's.
/// (Listing the folder per record would read a folder of n records n times.)
type Siblings =
    std::collections::HashMap<PathBuf, std::collections::HashMap<String, Vec<(String, PathBuf)>>>;

fn folder_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

fn list_siblings(records: &[RecordInput]) -> Siblings {
    let signal = ["hea", "dat", "edf", "bdf", "ecg", "csv", "xml", "mat"];
    let dirs: BTreeSet<PathBuf> = records.iter().map(|r| folder_of(&r.path)).collect();
    dirs.into_iter()
        .map(|dir| {
            let mut by_stem: std::collections::HashMap<String, Vec<(String, PathBuf)>> =
                Default::default();
            for e in std::fs::read_dir(&dir).into_iter().flatten().flatten() {
                let p = e.path();
                let (Some(stem), Some(ext)) = (p.file_stem(), p.extension()) else {
                    continue;
                };
                let ext = ext.to_string_lossy().into_owned();
                if signal.contains(&ext.to_ascii_lowercase().as_str()) || !p.is_file() {
                    continue;
                }
                by_stem
                    .entry(stem.to_string_lossy().into_owned())
                    .or_default()
                    .push((ext, p));
            }
            (dir, by_stem)
        })
        .collect()
}

/// Extensions of the files beside the record that share its stem and are not
/// among its own files.
fn annotation_exts(path: &Path, own: &[PathBuf], siblings: &Siblings) -> Vec<String> {
    let Some(stem) = path.file_stem() else {
        return Vec::new();
    };
    let found = siblings
        .get(&folder_of(path))
        .and_then(|m| m.get(stem.to_string_lossy().as_ref()));
    let out: BTreeSet<String> = found
        .into_iter()
        .flatten()
        // Same folder: the names decide (`./x` and `x` are one file).
        .filter(|(_, p)| !own.iter().any(|o| o.file_name() == p.file_name()))
        .map(|(e, _)| e.clone())
        .collect();
    out.into_iter().collect()
}

fn inspect_one(
    input: &RecordInput,
    csv_fs: Option<f64>,
    checksums: bool,
    subject: Option<&SubjectRow>,
    siblings: &Siblings,
    need: u64,
    defer_long_records: bool,
) -> Row {
    let mut row = Row {
        name: input.name.clone(),
        path: input.path.clone(),
        format: format_of(&input.path),
        need,
        ..Default::default()
    };
    if let Some(p) = &input.problem {
        row.error = Some(p.clone());
        return row;
    }
    let files = input_files(input);
    if checksums {
        match files
            .iter()
            .map(|f| sha256_file(f))
            .collect::<Result<Vec<_>>>()
        {
            Ok(s) => row.sha256 = s,
            Err(e) => row.error = Some(format!("{e:#}")),
        }
    }
    row.annotations = annotation_exts(&input.path, &files, siblings);
    row.files = files;
    let opts = tendline_formats::ReadOptions { csv_fs };
    // A record a run would process in chunks is read as a run reads it,
    // digital until each lead's turn comes (`tendline_formats::deferred`).
    let measure = crate::config::PipelineConfig::default().measure;
    let defer = |fs: f64, n: usize, leads: usize| {
        defer_long_records && chunk_plan(n, leads, fs, &measure).len() > 1
    };
    let (mut rec, digital) =
        match tendline_formats::read_record_deferred(&input.path, &opts, &defer) {
            Ok(Loaded::Physical(r)) => (r, None),
            Ok(Loaded::Deferred(d)) => (d.record, Some(d.leads)),
            Err(e) => {
                row.error = Some(e.to_string());
                return row;
            }
        };
    if let Some(s) = subject {
        s.apply(&mut rec.meta);
    }
    let n = digital
        .as_ref()
        .map_or(rec.n_samples(), |d| d.first().map_or(0, DigitalLead::len));
    row.fs = Some(rec.fs);
    row.n_samples = Some(n);
    row.sex = rec.meta.sex.map(|s| s.code());
    row.age = rec.meta.age;
    row.subject = rec.meta.subject.clone();
    row.timepoint = rec.meta.timepoint.clone();
    row.arm = rec.meta.arm.clone();
    row.warnings = rec.warnings.clone();
    // One lead at a time, in physical units: the listing, the digest and the
    // run's own checks (`check_record`, `non_ecg_leads`, in their order, so
    // the message is the one a run would record) need no more.
    let path = input.path.as_path();
    let mut error = check_shape(rec.leads.len(), rec.fs, path)
        .and_then(|()| check_not_empty(n, path))
        .err();
    let cfg = tendline_dsp::filter::FilterConfig::default();
    let block = tendline_dsp::amplitude::block_samples(rec.fs, &cfg);
    let mut digest = SignalDigest::new(rec.fs, rec.leads.len());
    let (mut ranges, mut all_missing, mut any_ecg) = (Vec::new(), true, false);
    // One buffer for every lead converted from digital samples (a fresh one
    // per lead costs the kernel's zeroing of every page).
    let mut converted = Vec::new();
    for (i, l) in rec.leads.iter().enumerate() {
        let x: &[f64] = match &digital {
            None => &l.samples,
            Some(d) => {
                d[i].physical_into(0, d[i].len(), &mut converted);
                &converted
            }
        };
        let why = tendline_formats::signals::non_ecg_reason(&l.name, &l.units);
        let nan = x.iter().filter(|v| v.is_nan()).count();
        let mut finite = x.iter().filter(|v| v.is_finite());
        if finite
            .next()
            .is_some_and(|first| finite.all(|v| v == first))
        {
            row.flat.push(l.name.clone());
        }
        digest.lead(x);
        if error.is_none() {
            error = check_lead(i, &l.name, x, n, path).err();
        }
        all_missing &= nan == x.len();
        if why.is_none() {
            any_ecg = true;
            ranges.push(tendline_dsp::amplitude::typical_range(x, block));
        }
        row.leads.push((l.name.clone(), l.units.clone(), why, nan));
    }
    row.signal_sha256 = Some(digest.finish());
    if error.is_none() && all_missing {
        error = Some(crate::pipeline::all_missing(path));
    }
    if error.is_none() && !any_ecg {
        error = non_ecg_leads(&mut rec, path).err();
    }
    match error {
        Some(e) => {
            row.error.get_or_insert(format!("{e:#}"));
        }
        // The default configuration's span, as for the memory estimate
        // (`inspect` takes no pipeline.toml).
        None => {
            if let Some((r, c)) = tendline_dsp::amplitude::assess_ranges(&ranges, &cfg) {
                row.amplitude_mv = Some(r);
                row.warnings.extend(amplitude_warning(r, c, &cfg));
            }
        }
    }
    row
}

/// SHA-256 of a decoded signal (sampling rate, number of leads, then every
/// lead's samples as little-endian `f64`, NaN in one canonical form), fed one
/// lead at a time.
struct SignalDigest(sha2::Sha256, Vec<u8>);

impl SignalDigest {
    fn new(fs: f64, leads: usize) -> Self {
        use sha2::Digest;
        let mut h = sha2::Sha256::new();
        h.update(fs.to_le_bytes());
        h.update((leads as u64).to_le_bytes());
        Self(h, Vec::new())
    }

    fn lead(&mut self, x: &[f64]) {
        use sha2::Digest;
        // In blocks, so that a long lead is not copied whole once more.
        for part in x.chunks(1 << 16) {
            self.1.clear();
            self.1.extend(part.iter().flat_map(|v| {
                let v = if v.is_nan() { f64::NAN } else { *v };
                v.to_le_bytes()
            }));
            self.0.update(&self.1);
        }
    }

    fn finish(self) -> String {
        use sha2::Digest;
        hex::encode(self.0.finalize())
    }
}

/// Groups of two or more records with the same decoded signal.
fn identical_signals(rows: &[Row]) -> Vec<Vec<&str>> {
    let mut by: std::collections::BTreeMap<&str, Vec<&str>> = Default::default();
    for r in rows.iter().filter(|r| r.error.is_none()) {
        if let Some(d) = &r.signal_sha256 {
            by.entry(d.as_str()).or_default().push(r.name.as_str());
        }
    }
    by.into_values().filter(|v| v.len() > 1).collect()
}

const CSV_HEADER: &str = "record,status,format,path,fs_hz,n_samples,duration_s,n_leads,leads,units,\
non_ecg,flat_leads,missing_samples,sex,age,subject,timepoint,arm,annotations,files,sha256,signal_sha256,memory_mib,warnings,error,\
amplitude_mv";

fn csv_text(rows: &[Row]) -> String {
    let mut s = String::from(CSV_HEADER);
    s.push('\n');
    let join = |v: Vec<String>| csv_cell(&v.join(";"));
    for r in rows {
        let cells = [
            csv_cell(&r.name),
            if r.error.is_some() { "failed" } else { "ok" }.into(),
            r.format.into(),
            csv_cell(&r.path.display().to_string()),
            r.fs.map(|f| format!("{f}")).unwrap_or_default(),
            r.n_samples.map(|n| n.to_string()).unwrap_or_default(),
            r.duration_s()
                .map(|d| format!("{d:.3}"))
                .unwrap_or_default(),
            if r.leads.is_empty() {
                String::new()
            } else {
                r.leads.len().to_string()
            },
            join(r.leads.iter().map(|l| l.0.clone()).collect()),
            join(r.leads.iter().map(|l| l.1.clone()).collect()),
            join(
                r.leads
                    .iter()
                    .filter_map(|l| l.2.as_ref().map(|why| format!("{}: {why}", l.0)))
                    .collect(),
            ),
            join(r.flat.clone()),
            if r.leads.is_empty() {
                String::new()
            } else {
                r.missing().to_string()
            },
            r.sex.unwrap_or("").into(),
            r.age.map(|a| format!("{a}")).unwrap_or_default(),
            csv_cell(r.subject.as_deref().unwrap_or("")),
            csv_cell(r.timepoint.as_deref().unwrap_or("")),
            csv_cell(r.arm.as_deref().unwrap_or("")),
            join(r.annotations.clone()),
            join(r.files.iter().map(|f| f.display().to_string()).collect()),
            join(r.sha256.clone()),
            r.signal_sha256.clone().unwrap_or_default(),
            if r.error.is_none() {
                (r.need >> 20).to_string()
            } else {
                String::new()
            },
            join(r.warnings.clone()),
            csv_cell(r.error.as_deref().unwrap_or("")),
            r.amplitude_mv
                .map(|a| format!("{a:.4}"))
                .unwrap_or_default(),
        ];
        s.push_str(&cells.join(","));
        s.push('\n');
    }
    s
}

/// `12.3 s`, `14:59` (min:s) or `24:00:00` (h:min:s).
pub(crate) fn fmt_duration(d: f64) -> String {
    if d < 60.0 {
        return format!("{d:.1} s");
    }
    let t = d.round() as u64;
    if t < 3600 {
        format!("{}:{:02}", t / 60, t % 60)
    } else {
        format!("{}:{:02}:{:02}", t / 3600, (t / 60) % 60, t % 60)
    }
}

fn table(rows: &[Row]) -> String {
    let mut s = format!(
        "{:<20} {:<8} {:>8} {:>5} {:>10} {:<3} {:>4}  notes\n",
        "record", "format", "fs Hz", "leads", "duration", "sex", "age"
    );
    for r in rows {
        let mut notes: Vec<String> = Vec::new();
        if let Some(e) = &r.error {
            notes.push(format!("FAILED: {e}"));
        } else {
            let non_ecg: Vec<&str> = r
                .leads
                .iter()
                .filter(|l| l.2.is_some())
                .map(|l| l.0.as_str())
                .collect();
            if !non_ecg.is_empty() {
                notes.push(format!("not ECG: {}", non_ecg.join(", ")));
            }
            if !r.flat.is_empty() {
                notes.push(format!("flat: {}", r.flat.join(", ")));
            }
            if r.missing() > 0 {
                notes.push(format!("{} missing samples", r.missing()));
            }
            notes.extend(r.warnings.iter().cloned());
            if !r.annotations.is_empty() {
                notes.push(format!("annotations: {}", r.annotations.join(" ")));
            }
        }
        s.push_str(&format!(
            "{:<20} {:<8} {:>8} {:>5} {:>10} {:<3} {:>4}  {}\n",
            r.name,
            r.format,
            r.fs.map(|f| format!("{f}")).unwrap_or_default(),
            if r.leads.is_empty() {
                String::new()
            } else {
                r.leads.len().to_string()
            },
            r.duration_s().map(fmt_duration).unwrap_or_default(),
            r.sex.unwrap_or(""),
            r.age.map(|a| format!("{a}")).unwrap_or_default(),
            notes.join("; ")
        ));
    }
    s
}

pub fn cmd_inspect(a: InspectArgs) -> Result<ExitCode> {
    inputs::check_csv_fs(a.csv_fs)?;
    let records = inputs::resolve(&a.inputs);
    if records.is_empty() {
        anyhow::bail!("no records found in the inputs given");
    }
    let (subjects_file, subjects) = inputs::load_subjects(a.subjects.as_deref(), &a.inputs)?;
    // Records are read in parallel but only while their samples fit the same
    // default budget as a run's, so a folder of long recordings cannot
    // exhaust the memory.
    let budget = crate::budget::Budget::new(crate::budget::available_bytes().map(|a| a / 4 * 3));
    let siblings = list_siblings(&records);
    // The need of a run with the default configuration (`inspect` takes no
    // pipeline.toml) and the default number of threads.
    let default_jobs = std::thread::available_parallelism().map_or(1, |n| n.get());
    let default_chunk = crate::budget::chunk_samples(
        crate::config::PipelineConfig::default()
            .measure
            .chunk_mega_samples,
    );
    let rows: Vec<Row> = records
        .par_iter()
        .map(|r| {
            let est = crate::budget::estimate(r);
            let samples = est.bytes;
            let _share = budget.acquire(crate::budget::read_need(
                samples,
                default_chunk,
                est.deferred,
            ));
            // A reader that panics on one file must not end the listing: that
            // record is listed as failed, as a run would record it.
            std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                inspect_one(
                    r,
                    a.csv_fs,
                    a.checksums,
                    subjects.get(&r.name),
                    &siblings,
                    crate::budget::need(samples, default_chunk, default_jobs, est.deferred),
                    true,
                )
            }))
            .unwrap_or_else(|p| Row {
                name: r.name.clone(),
                path: r.path.clone(),
                format: format_of(&r.path),
                error: Some(format!("internal error (panic): {}", panic_text(p))),
                ..Default::default()
            })
        })
        .collect();
    print!("{}", table(&rows));

    let failed = rows.iter().filter(|r| r.error.is_some()).count();
    let total_s: f64 = rows.iter().filter_map(Row::duration_s).sum();
    let mut fs: Vec<f64> = rows.iter().filter_map(|r| r.fs).collect();
    fs.sort_by(f64::total_cmp);
    fs.dedup();
    let rates: Vec<String> = fs.iter().map(|f| format!("{f} Hz")).collect();
    eprintln!(
        "{} record(s): {} read, {} failed; {} of signal; sampling rates: {}",
        rows.len(),
        rows.len() - failed,
        failed,
        fmt_duration(total_s),
        if rates.is_empty() {
            "none".into()
        } else {
            rates.join(", ")
        }
    );
    if let Some(avail) = crate::budget::available_bytes() {
        let budget = avail / 4 * 3;
        if let Some(big) = rows
            .iter()
            .filter(|r| r.error.is_none())
            .max_by_key(|r| r.need)
            .filter(|r| r.need > budget)
        {
            eprintln!(
                "memory: {} needs about {} MiB, more than the default budget of a run here \
                 ({} MiB, 3/4 of the memory available now); such records run alone",
                big.name,
                big.need >> 20,
                budget >> 20
            );
        }
    }
    let same = identical_signals(&rows);
    for g in &same {
        eprintln!(
            "identical signals (a record delivered twice?): {}",
            g.join(", ")
        );
    }
    if let Some(p) = &subjects_file {
        let names: BTreeSet<&str> = rows.iter().map(|r| r.name.as_str()).collect();
        let without: Vec<&str> = rows
            .iter()
            .filter(|r| !subjects.contains_key(&r.name))
            .map(|r| r.name.as_str())
            .collect();
        let unmatched: Vec<&str> = subjects
            .keys()
            .map(String::as_str)
            .filter(|k| !names.contains(k))
            .collect();
        eprintln!(
            "subjects {}: {} row(s); {} record(s) without a row{}; {} row(s) naming no record found{}",
            p.display(),
            subjects.len(),
            without.len(),
            list_some(&without),
            unmatched.len(),
            list_some(&unmatched)
        );
    }
    if let Some(p) = &a.csv {
        tendline_store::write_atomic(p, csv_text(&rows).as_bytes())
            .with_context(|| format!("--csv {}", p.display()))?;
    }
    Ok(if failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

/// ` (a, b, c, …)` for a short list, nothing for an empty one.
fn list_some(v: &[&str]) -> String {
    match v.len() {
        0 => String::new(),
        1..=8 => format!(" ({})", v.join(", ")),
        _ => format!(" ({}, … {} more)", v[..8].join(", "), v.len() - 8),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A long record (one a run would process in chunks) read lead by lead
    /// from its digital samples against the oracle, the same record read
    /// whole (`defer_long_records` off): the same row, field for field. The
    /// records: a WFDB record of 800 000 samples at 500 Hz with missing
    /// samples in one lead, a flat lead and a respiration signal, the same
    /// without its missing samples as EDF, and one whose every sample is
    /// missing (the same error).
    #[test]
    fn a_long_record_is_listed_as_when_read_whole() {
        let n = 800_000;
        let wave = |k: usize| -> Vec<f64> {
            (0..n)
                .map(|i| {
                    let t = i as f64 / 500.0;
                    (1.0 + k as f64 * 0.3) * (std::f64::consts::TAU * 1.1 * t).sin().powi(15)
                        + 0.01 * ((i * 7919 + k) % 17) as f64
                })
                .collect()
        };
        let lead = |name: &str, samples: Vec<f64>| tendline_formats::Lead {
            name: name.into(),
            units: "mV".into(),
            samples,
        };
        let mut gappy = wave(1);
        gappy[1000..1500].iter_mut().for_each(|v| *v = f64::NAN);
        let mut rec = tendline_formats::Record {
            name: "long".into(),
            fs: 500.0,
            leads: vec![
                lead("I", wave(0)),
                lead("II", gappy),
                lead("V1", vec![0.25; n]),
                lead("RESP", wave(2)),
            ],
            meta: Default::default(),
            files: vec![],
            warnings: vec![],
        };
        let dir = tempfile::tempdir().unwrap();
        let hea = tendline_formats::wfdb::write_record(dir.path(), &rec, 1000.0).unwrap();
        rec.leads[1].samples = wave(1);
        let edf = dir.path().join("long_edf.edf");
        tendline_formats::edf::write_edf(&edf, &rec).unwrap();
        rec.name = "void".into();
        rec.leads
            .iter_mut()
            .for_each(|l| l.samples.iter_mut().for_each(|v| *v = f64::NAN));
        let void = tendline_formats::wfdb::write_record(dir.path(), &rec, 1000.0).unwrap();
        let measure = crate::config::PipelineConfig::default().measure;
        let defer = |fs: f64, n: usize, leads: usize| chunk_plan(n, leads, fs, &measure).len() > 1;
        for path in [hea, edf, void] {
            let input = RecordInput {
                name: "long".into(),
                path: path.clone(),
                problem: None,
            };
            let siblings = list_siblings(std::slice::from_ref(&input));
            let row = |defer| inspect_one(&input, None, true, None, &siblings, 7, defer);
            let (a, b) = (row(true), row(false));
            assert!(
                matches!(
                    tendline_formats::read_record_deferred(&path, &Default::default(), &defer),
                    Ok(Loaded::Deferred(_))
                ),
                "{}: not deferred",
                path.display()
            );
            assert_eq!(format!("{a:?}"), format!("{b:?}"), "{}", path.display());
            if path.ends_with("void.hea") {
                assert!(a.error.unwrap().contains("every sample"));
            } else {
                assert_eq!(a.error, None, "{}", path.display());
                assert_eq!(a.flat, vec!["V1".to_string()]);
                assert!(a.amplitude_mv.is_some());
                assert!(a.leads[3].2.is_some(), "RESP is not ECG");
                let gap = if path.ends_with("long.hea") { 500 } else { 0 };
                assert_eq!(a.leads[1].3, gap, "{}", path.display());
            }
        }
    }

    #[test]
    fn durations_read_as_seconds_minutes_or_hours() {
        assert_eq!(fmt_duration(10.0), "10.0 s");
        assert_eq!(fmt_duration(899.9), "15:00");
        assert_eq!(fmt_duration(86_400.0), "24:00:00");
        assert_eq!(fmt_duration(3_725.0), "1:02:05");
    }

    #[test]
    fn csv_cells_with_separators_are_quoted() {
        let r = Row {
            name: "a,b".into(),
            format: "CSV",
            error: Some("bad \"x\"".into()),
            ..Default::default()
        };
        let t = csv_text(&[r]);
        let line = t.lines().nth(1).unwrap();
        assert!(line.starts_with("\"a,b\",failed,CSV,"), "{line}");
        // The error, then the empty amplitude column of a record not read.
        assert!(line.ends_with(",\"bad \"\"x\"\"\","), "{line}");
        // One column per header name: the quoted comma is the only extra one.
        let header_commas = t.lines().next().unwrap().matches(',').count();
        assert_eq!(line.matches(',').count(), header_commas + 1, "{t}");
    }
}
