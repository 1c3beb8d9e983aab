//! Writing a synthetic recording and its ground truth to files.
//!
//! Signals go to a format-16 WFDB record (or an EDF+ file); the truth goes to
//! WFDB annotation files in the convention of the pipeline's own output:
//! per wave `(` onset, peak mark (`p`, `N`, `t`), `)` end.
//!
//! * `<record>.truth`: global truth, every annotation on channel 0 (like the
//!   pipeline's `<record>.mark`).
//! * `<record>.leadtruth`: per-lead truth, `chan` = lead index (0 = I ...
//!   11 = V6), waves absent from a lead left out, sorted by sample then channel
//!   (like the pipeline's `<record>.leadmark`).
//!
//! Marks are the nearest sample to the exact time, `round(t·fs)`.

use std::path::{Path, PathBuf};

use tendline_formats::annotation::{code_of, write_annotations};
use tendline_formats::{Annotation, Lead, Metadata, Record};

use crate::model::{LeadTruthBeat, SynthRecord, WaveTimes};
use crate::SynthError;

/// ADC gain of written WFDB records (ADU per mV): a 1 µV step, ±32.7 mV range.
pub const ADC_GAIN: f64 = 1000.0;

/// The recording as a [`Record`] named `name` with metadata `meta` (units mV).
pub fn to_record(rec: &SynthRecord, name: &str, meta: Metadata) -> Record {
    Record {
        name: name.to_string(),
        fs: rec.fs_hz,
        leads: rec
            .lead_names
            .iter()
            .zip(&rec.leads)
            .map(|(n, s)| Lead {
                name: n.clone(),
                units: "mV".to_string(),
                samples: s.clone(),
            })
            .collect(),
        meta,
        files: Vec::new(),
        warnings: Vec::new(),
    }
}

fn sample_of(t_s: f64, fs: f64) -> i64 {
    (t_s * fs).round() as i64
}

fn ann(sample: i64, symbol: &str, chan: u8) -> Annotation {
    Annotation {
        sample,
        code: code_of(symbol).expect("standard WFDB symbol"),
        subtype: 0,
        chan,
        num: 0,
        aux: None,
    }
}

fn push_wave(out: &mut Vec<Annotation>, w: &WaveTimes, peak: &str, chan: u8, fs: f64) {
    out.push(ann(sample_of(w.onset_s, fs), "(", chan));
    out.push(ann(sample_of(w.peak_s, fs), peak, chan));
    out.push(ann(sample_of(w.end_s, fs), ")", chan));
}

/// Global truth annotations: per beat `( p ) ( N ) ( t )`, channel 0.
pub fn truth_annotations(rec: &SynthRecord) -> Vec<Annotation> {
    let mut out = Vec::with_capacity(rec.truth_global.len() * 9);
    for b in &rec.truth_global {
        push_wave(&mut out, &b.p, "p", 0, rec.fs_hz);
        push_wave(&mut out, &b.qrs, "N", 0, rec.fs_hz);
        push_wave(&mut out, &b.t, "t", 0, rec.fs_hz);
    }
    out
}

/// Per-lead truth annotations, `chan` = lead index, sorted by (sample, chan).
pub fn lead_truth_annotations(rec: &SynthRecord) -> Vec<Annotation> {
    let mut out = Vec::new();
    for (l, beats) in rec.truth_per_lead.iter().enumerate() {
        for b in beats {
            let LeadTruthBeat { p, qrs, t } = b;
            for (w, sym) in [(p, "p"), (qrs, "N"), (t, "t")] {
                if let Some(w) = w {
                    push_wave(&mut out, w, sym, l as u8, rec.fs_hz);
                }
            }
        }
    }
    out.sort_by_key(|a| (a.sample, a.chan));
    out
}

/// Write `<dir>/<name>.truth` and `<dir>/<name>.leadtruth`.
pub fn write_truth(dir: &Path, name: &str, rec: &SynthRecord) -> Result<(), SynthError> {
    write_annotations(&dir.join(format!("{name}.truth")), &truth_annotations(rec))?;
    write_annotations(
        &dir.join(format!("{name}.leadtruth")),
        &lead_truth_annotations(rec),
    )?;
    Ok(())
}

/// Write the recording as a WFDB record (format 16, [`ADC_GAIN`]) with its
/// truth files; returns the header path.
pub fn write_wfdb(
    dir: &Path,
    name: &str,
    rec: &SynthRecord,
    meta: Metadata,
) -> Result<PathBuf, SynthError> {
    let hea = tendline_formats::wfdb::write_record(dir, &to_record(rec, name, meta), ADC_GAIN)?;
    write_truth(dir, name, rec)?;
    Ok(hea)
}

/// Write the recording as `<dir>/<name>.xml` (HL7 aECG, 1 µV steps) with its
/// truth files; returns the XML path.
pub fn write_aecg(
    dir: &Path,
    name: &str,
    rec: &SynthRecord,
    meta: Metadata,
) -> Result<PathBuf, SynthError> {
    let path = dir.join(format!("{name}.xml"));
    tendline_formats::aecg::write_aecg(&path, &to_record(rec, name, meta), 1000.0 / ADC_GAIN)?;
    write_truth(dir, name, rec)?;
    Ok(path)
}

/// Write the recording as `<dir>/<name>.edf` (EDF+C) with its truth files;
/// returns the EDF path.
pub fn write_edf(
    dir: &Path,
    name: &str,
    rec: &SynthRecord,
    meta: Metadata,
) -> Result<PathBuf, SynthError> {
    let path = dir.join(format!("{name}.edf"));
    tendline_formats::edf::write_edf(&path, &to_record(rec, name, meta))?;
    write_truth(dir, name, rec)?;
    Ok(path)
}
