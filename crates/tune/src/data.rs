//! The annotated records a search is scored on, and the per-record cache
//! that lets a candidate re-run only what its parameters change.
//!
//! Per record, the conditioned signal, the detected beats and the wavelet
//! transform of every lead are kept for the last upstream key seen
//! ([`TunedConfig::upstream_key`]: the `[filter]` and `[detect]` tables and
//! `delineate.analysis_fs_hz`); a candidate with another key recomputes them
//! (candidates are ordered by key, so this happens once per key and record).
//! Only beats that can be paired with a reference beat are delineated, with
//! [`tendline_delineate::context_margin`] neighbours on either side, so their
//! marks equal those of a full `tendline run` (tested in the delineate crate).
//!
//! Scoring follows `tendline validate` for global marks: the delineated beats
//! are written as the run's `.mark` annotations would be (peak marks with `(`
//! and `)` around them) and parsed back with `tendline_evaluate::waves`, then
//! scored with `tendline_evaluate::score` (150 ms beat and fiducial windows).

use crate::objective::RecordResult;
use crate::space::TunedConfig;
use crate::TuneError;
use std::collections::BTreeSet;
use std::path::PathBuf;
use std::sync::{Arc, Mutex};
use tendline_delineate::{context_margin, delineate_prepared, prepare_lead, PreparedLead};
use tendline_dsp::filter::ConditioningFilter;
use tendline_evaluate::matching::window_samples;
use tendline_evaluate::score::{RecordScore, ScoreConfig};
use tendline_evaluate::waves::{combine_leads, parse_beats, BeatMarks as RefBeat, Wave};
use tendline_evaluate::Fiducial;
use tendline_formats::annotation::{code_of, Annotation};

/// Beat pairing and fiducial windows (ms), as in `tendline validate`.
pub const WINDOW_MS: f64 = 150.0;

/// Largest `delineate.qrs_search_ms` allowed: a delineated QRS peak can move
/// this far from the detected beat, so beats this much beyond the pairing
/// window are still delineated.
const QRS_MOVE_MS: f64 = 300.0;

/// Scores candidates on records: what the search engine needs.
pub trait Evaluate: Sync {
    /// Record names, indexed as in [`Evaluate::evaluate`].
    fn record_names(&self) -> Vec<String>;
    /// The candidate's results on record `record`.
    fn evaluate(&self, cfg: &TunedConfig, record: usize) -> Result<RecordResult, TuneError>;
}

/// Where a record's reference marks come from.
#[derive(Debug, Clone, PartialEq)]
pub enum Reference {
    /// One annotation file with global boundaries (QTDB `.q1c`).
    File(PathBuf),
    /// One file per lead beside the record, `<record>.<lead name lowercased>`
    /// (LUDB), combined into global marks as `tendline validate` does:
    /// earliest onset, latest end, median peak across leads.
    LeadFiles,
}

/// One input: a record and its reference annotations.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordSource {
    pub name: String,
    /// Signal file handed to the reader (`.hea`, `.edf`, `.csv`).
    pub path: PathBuf,
    pub reference: Reference,
}

fn read_reference(
    src: &RecordSource,
    r: &tendline_formats::Record,
) -> Result<Vec<RefBeat>, TuneError> {
    let rec_err = |m: String| TuneError::Record {
        record: src.name.clone(),
        message: m,
    };
    let read = |p: &std::path::Path| {
        tendline_formats::annotation::read_annotations(p)
            .map_err(|e| rec_err(format!("reference {}: {e}", p.display())))
    };
    match &src.reference {
        Reference::File(p) => Ok(parse_beats(&read(p)?, r.fs).beats),
        Reference::LeadFiles => {
            let mut lists = Vec::new();
            for l in &r.leads {
                let ext = l.name.trim().to_lowercase();
                if ext.is_empty() || ext.contains(['/', '\\', ' ']) {
                    continue;
                }
                let p = src.path.with_file_name(format!("{}.{ext}", src.name));
                if p.is_file() {
                    lists.push(parse_beats(&read(&p)?, r.fs).beats);
                }
            }
            if lists.is_empty() {
                return Err(rec_err(format!(
                    "no lead reference files <record>.<lead name> beside {} (leads: {})",
                    src.path.display(),
                    r.leads
                        .iter()
                        .map(|l| l.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                )));
            }
            let refs: Vec<&[RefBeat]> = lists.iter().map(Vec::as_slice).collect();
            Ok(combine_leads(&refs, window_samples(WINDOW_MS, r.fs)))
        }
    }
}

struct Upstream {
    key: String,
    qrs: Vec<usize>,
    labels: Vec<&'static str>,
    /// Detected beats that may pair with a reference beat.
    targets: Vec<usize>,
    leads: Vec<PreparedLead>,
}

struct RecordData {
    src: RecordSource,
    fs: f64,
    reference: Vec<RefBeat>,
    cache: Mutex<Option<Arc<Upstream>>>,
}

/// Annotated records with their cache; evaluates candidates with the real pipeline.
pub struct Dataset {
    records: Vec<RecordData>,
    exhaustive: BTreeSet<Wave>,
    csv_fs: Option<f64>,
}

fn read(src: &RecordSource, csv_fs: Option<f64>) -> Result<tendline_formats::Record, TuneError> {
    let rec_err = |m: String| TuneError::Record {
        record: src.name.clone(),
        message: m,
    };
    let opts = tendline_formats::ReadOptions { csv_fs };
    let r = tendline_formats::read_record(&src.path, &opts)
        .map_err(|e| rec_err(format!("reading {}: {e}", src.path.display())))?;
    if r.leads.is_empty() || r.n_samples() == 0 {
        return Err(rec_err(format!("{}: no samples", src.path.display())));
    }
    for l in &r.leads {
        if let Some(k) = l.samples.iter().position(|v| !v.is_finite()) {
            return Err(rec_err(format!(
                "{}: lead `{}` has a non-finite value at sample {k}",
                src.path.display(),
                l.name
            )));
        }
    }
    Ok(r)
}

impl Dataset {
    /// Read every record's header and reference annotations (in parallel on
    /// the current rayon pool). Fails on the first unreadable record.
    pub fn load(sources: Vec<RecordSource>, csv_fs: Option<f64>) -> Result<Self, TuneError> {
        use rayon::prelude::*;
        let records: Vec<RecordData> = sources
            .into_par_iter()
            .map(|src| {
                let r = read(&src, csv_fs)?;
                let reference = read_reference(&src, &r)?;
                Ok(RecordData {
                    src,
                    fs: r.fs,
                    reference,
                    cache: Mutex::new(None),
                })
            })
            .collect::<Result<_, TuneError>>()?;
        // Waves the references mark at all are scored for false positives
        // (as in `tendline validate`).
        let mut exhaustive = BTreeSet::new();
        for r in &records {
            for b in &r.reference {
                exhaustive.insert(Wave::Qrs);
                if b.has_wave(Wave::P) {
                    exhaustive.insert(Wave::P);
                }
                if b.has_wave(Wave::T) {
                    exhaustive.insert(Wave::T);
                }
            }
        }
        Ok(Dataset {
            records,
            exhaustive,
            csv_fs,
        })
    }

    /// Number of records.
    pub fn len(&self) -> usize {
        self.records.len()
    }

    /// True without records.
    pub fn is_empty(&self) -> bool {
        self.records.is_empty()
    }

    /// Reference beats of record `i`.
    pub fn reference_beats(&self, i: usize) -> usize {
        self.records[i].reference.len()
    }

    fn upstream(&self, i: usize, cfg: &TunedConfig) -> Result<Arc<Upstream>, TuneError> {
        let rd = &self.records[i];
        let key = cfg.upstream_key();
        // Held while computing: other candidates of this record wait rather
        // than compute the same thing twice.
        let mut slot = rd.cache.lock().unwrap_or_else(|e| e.into_inner());
        if let Some(u) = slot.as_ref().filter(|u| u.key == key) {
            return Ok(Arc::clone(u));
        }
        *slot = None; // free the old transform before building the new one
        let rec_err = |m: String| TuneError::Record {
            record: rd.src.name.clone(),
            message: m,
        };
        let r = read(&rd.src, self.csv_fs)?;
        let filter = ConditioningFilter::design(r.fs, &cfg.filter)
            .map_err(|e| rec_err(format!("filter design: {e}")))?;
        let raw: Vec<&[f64]> = r.leads.iter().map(|l| l.samples.as_slice()).collect();
        let (cond, _) = filter.apply_record(&raw);
        drop(r);
        let leads: Vec<&[f64]> = cond.iter().map(Vec::as_slice).collect();
        let det = tendline_detect::detect(&leads, rd.fs, &cfg.detect)
            .map_err(|e| rec_err(format!("beat detection: {e}")))?;
        let qrs: Vec<usize> = det.beats.iter().map(|b| b.sample).collect();
        let labels: Vec<&'static str> = det.beats.iter().map(|b| b.label.symbol()).collect();
        let mut peaks: Vec<i64> = rd.reference.iter().map(|b| b.qrs_peak).collect();
        peaks.sort_unstable();
        let reach = window_samples(WINDOW_MS + QRS_MOVE_MS, rd.fs);
        let targets = qrs
            .iter()
            .enumerate()
            .filter(|(_, &s)| {
                let s = s as i64;
                let j = peaks.partition_point(|&p| p < s - reach);
                peaks.get(j).is_some_and(|&p| p <= s + reach)
            })
            .map(|(i, _)| i)
            .collect();
        let prepared = leads
            .iter()
            .map(|x| prepare_lead(x, rd.fs, &cfg.delineate))
            .collect();
        let u = Arc::new(Upstream {
            key,
            qrs,
            labels,
            targets,
            leads: prepared,
        });
        *slot = Some(Arc::clone(&u));
        Ok(u)
    }

    /// Drop every cached transform (frees memory after a search).
    pub fn clear_cache(&self) {
        for r in &self.records {
            *r.cache.lock().unwrap_or_else(|e| e.into_inner()) = None;
        }
    }
}

fn ann(sample: usize, symbol: &str) -> Annotation {
    Annotation {
        sample: sample as i64,
        code: code_of(symbol).expect("standard WFDB symbol"),
        subtype: 0,
        chan: 0,
        num: 0,
        aux: None,
    }
}

impl Evaluate for Dataset {
    fn record_names(&self) -> Vec<String> {
        self.records.iter().map(|r| r.src.name.clone()).collect()
    }

    fn evaluate(&self, cfg: &TunedConfig, i: usize) -> Result<RecordResult, TuneError> {
        let rd = &self.records[i];
        let up = self.upstream(i, cfg)?;
        let m = context_margin(&cfg.delineate);
        let mut want = vec![false; up.qrs.len()];
        for &t in &up.targets {
            let hi = (t + m + 1).min(want.len());
            for w in &mut want[t.saturating_sub(m)..hi] {
                *w = true;
            }
        }
        let del = delineate_prepared(&up.leads, &up.qrs, &want, &cfg.delineate);
        // The delineated beats as `tendline run` writes them to `<record>.mark`
        // (the neighbours too: their marks decide which `(` and `)` sit next to
        // a target beat's peaks once the annotations are sorted by time).
        let mut anns = Vec::new();
        for t in (0..up.qrs.len()).filter(|&i| want[i]) {
            let b = &del.global[t];
            let qrs_peak = b.qrs_peak.map_or(up.qrs[t], |p| p.sample);
            let waves = [
                (b.p_on, b.p_peak.map(|p| p.sample), b.p_end, "p"),
                (b.qrs_on, Some(qrs_peak), b.qrs_end, up.labels[t]),
                (b.t_on, b.t_peak.map(|p| p.sample), b.t_end, "t"),
            ];
            for (on, peak, end, sym) in waves {
                let Some(peak) = peak else { continue };
                if let Some(on) = on {
                    anns.push(ann(on.sample, "("));
                }
                anns.push(ann(peak, sym));
                if let Some(end) = end {
                    anns.push(ann(end.sample, ")"));
                }
            }
        }
        anns.sort_by_key(|a| a.sample);
        let test = parse_beats(&anns, rd.fs).beats;
        let sc = ScoreConfig {
            fs: rd.fs,
            beat_window: window_samples(WINDOW_MS, rd.fs),
            fiducial_window: window_samples(WINDOW_MS, rd.fs),
            exhaustive: self.exhaustive.clone(),
            fiducials: Fiducial::ALL.to_vec(),
        };
        let mut s = RecordScore::new(&rd.src.name, rd.fs);
        s.add_channel(0, rd.reference.clone(), test, &sc);
        let mut out = RecordResult::default();
        for (k, f) in Fiducial::ALL.iter().enumerate() {
            out.counts[k] = s.counts.get(f).copied().unwrap_or_default();
            out.errors[k] = s.error_values(*f);
        }
        Ok(out)
    }
}
