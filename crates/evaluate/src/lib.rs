//! Validation of tendline's outputs against expert-annotated reference databases.
//!
//! This crate scores a finished run directory (`annotations/<record>.mark` global
//! marks, `annotations/<record>.leadmark` per-lead marks, `windows.csv` window QT)
//! against reference annotations in WFDB format, and writes a report a reviewer can
//! check: `report.json` (every number), `report.md` (summary), `report.html`
//! (self-contained page with SVG plots) and `marks.csv` (every scored mark).
//!
//! References (chosen with [`ReferenceKind`], `Auto` uses whatever exists):
//! - beats: `<record>.atr` (every beat); for LUDB-style data without `.atr`, the QRS
//!   peaks of the lead files clustered across leads;
//! - global boundaries: `<record>.q1c` (selected beats; QTDB annotator 1), with
//!   `<record>.q2c` (annotator 2) scored against it the same way as a human reference;
//! - per-lead boundaries: `<record>.<lead name lowercased>` (LUDB), the lead name
//!   mapped to the signal index through the record header's descriptions.
//!
//! Numerical conventions:
//! - Times are sample indices (0-based) in the record's own rate; errors are
//!   converted to ms as `samples · 1000 / fs` and are signed **test − reference**.
//! - Windows are inclusive and rounded down to whole samples:
//!   `floor(window_ms · fs / 1000)` (150 ms at 250 Hz = 37 samples).
//! - SD is the sample SD (n − 1); the 95th percentile of |error| interpolates
//!   linearly at position 0.95·(n − 1); "mean of per-record SDs" averages the SDs of
//!   records with at least two errors.
//! - CSE pass: pooled SD ≤ the CSE tolerance of the fiducial ([`waves::Fiducial::cse_tolerance_ms`]).
//! - Bland–Altman limits: bias ± 1.96 SD of the differences.
//!
//! The matching and parsing rules are in [`matching`], [`waves`] and [`score`]; the
//! Python cross-check `tests/python/test_validation_crosscheck.py` re-implements
//! them independently on the `wfdb` package.
//!
//! Files read:
//! - `<run>/annotations/<record>.mark` (global marks; any `chan`), `<record>.leadmark`
//!   (per-lead marks, `chan` = signal index in the input header), WFDB annotation
//!   files with the boundary convention of [`waves`]; aux text is ignored.
//! - `<run>/windows.csv`: header row, columns found by name; `record`, `start_s`,
//!   `end_s` required, `qt_ms`, `qt_superimposed_ms`, `qrs_ms` and `pr_ms` used
//!   when present.
//! - `<data>/<record>.hea`: the first line gives the rate, signal lines the lead names.
//!
//! Files written by [`write_report`] (in `out_dir`):
//! - `report.json`: [`ValidationReport`] serialised (`schema` = [`report::SCHEMA_VERSION`]);
//!   top-level keys `database`, `protocol`, `records`, `beats`, `global`, `best_lead`
//!   (QTDB only, see [`waves::best_lead_beats`]), `per_lead`,
//!   `qt`, `human`, `worst_beats`, `warnings`; sections absent for lack of a
//!   reference are `null`; unavailable numbers (e.g. SD of one value) are `null`.
//! - `report.md`: the headline tables; `report.html`: tables and inline SVG plots.
//! - `marks.csv`: one row per scored mark ([`marks_csv`]); a run without boundary
//!   references writes none and removes one left by an earlier report.
//! - Population SDs (denominator n) only where a spread is split into parts
//!   ([`components`], [`stats::RecordSplit`]), so the parts add up in squares.
//!
//! The regression gate: [`Floors`] (TOML, format in [`floors`]) and [`check_floors`].

pub mod calibration;
pub mod components;
pub mod error;
pub mod floors;
pub mod html;
pub mod inputs;
pub mod labels;
pub mod markdown;
pub mod marks_csv;
pub mod matching;
pub mod report;
pub mod score;
pub mod stability;
pub mod stats;
pub mod waves;

pub use error::EvalError;
pub use floors::{check_floors, Floors};
pub use report::ValidationReport;
pub use waves::{BeatMarks, Fiducial, Wave};

use inputs::{existing, read_ann, read_header, HeaderInfo};
use matching::{beat_counts, window_samples, Counts};
use report::{BeatScore, BeatSection, HumanSection, Protocol, QtSection, Strip, WorstBeat};
use score::{RecordScore, ScoreConfig};
use serde::{Deserialize, Serialize};
use stats::BlandAltman;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use tendline_params::{Checker, ParamError};
use waves::{parse_beats, parse_beats_by_chan, ParsedBeats};

/// Which reference annotations to score against.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ReferenceKind {
    /// Every kind whose files exist: `.atr` beats, `.q1c` global marks, lead files.
    #[default]
    Auto,
    /// Beats only (`.atr`, or the QRS marks of lead files).
    Beats,
    /// Global boundaries only (`.q1c`, with `.q2c` as human reference).
    Global,
    /// Per-lead boundaries only (lead files).
    PerLead,
}

impl std::fmt::Display for ReferenceKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            ReferenceKind::Auto => "auto",
            ReferenceKind::Beats => "beats",
            ReferenceKind::Global => "global",
            ReferenceKind::PerLead => "per-lead",
        })
    }
}

/// Options of a validation run (table `validate`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ValidateOptions {
    /// Finished run directory (holds `annotations/` and `windows.csv`).
    pub run_dir: PathBuf,
    /// Folder with the reference records (`.hea`, `.dat`, annotation files).
    pub data_dir: PathBuf,
    /// Which references to use (default `auto`).
    pub reference: ReferenceKind,
    /// Where [`validate_and_write`] puts the report files.
    pub out_dir: PathBuf,
    /// Records to score; default every `annotations/*.mark` with a header in `data_dir`.
    pub records: Option<Vec<String>>,
    /// Database name in the report and floors; default the name of `data_dir`.
    pub database: Option<String>,
    /// Beat matching window on QRS peaks, ms (default 150, ANSI/AAMI EC57 practice).
    pub beat_window_ms: f64,
    /// Largest |error| for a fiducial to count as detected, ms (default 150).
    pub fiducial_window_ms: f64,
    /// Fewest reference beats inside a window for window-QT scoring (default 3).
    pub min_window_beats: usize,
    /// Number of worst beats drawn in the HTML report (default 8).
    pub worst_beats: usize,
    /// Length of the signal strip drawn around a worst beat, s (default 1.5).
    pub strip_s: f64,
    /// Score `.q2c` against `.q1c` as human reference where both exist (default true).
    pub human_reference: bool,
    /// Bootstrap over records for the intervals of every pooled figure
    /// (default 2000 replicates, a fixed seed; [`stability`]).
    #[serde(default)]
    pub resampling: stability::Resampling,
}

impl Default for ValidateOptions {
    fn default() -> Self {
        ValidateOptions {
            run_dir: PathBuf::new(),
            data_dir: PathBuf::new(),
            reference: ReferenceKind::Auto,
            out_dir: PathBuf::new(),
            records: None,
            database: None,
            beat_window_ms: 150.0,
            fiducial_window_ms: 150.0,
            min_window_beats: 3,
            worst_beats: 8,
            strip_s: 1.5,
            human_reference: true,
            resampling: stability::Resampling::default(),
        }
    }
}

impl ValidateOptions {
    /// Check value ranges; every violation is named by its `validate.<key>`.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("validate");
        c.require(
            !self.run_dir.as_os_str().is_empty(),
            "run_dir",
            "a run directory",
            "an empty path",
        )
        .require(
            !self.data_dir.as_os_str().is_empty(),
            "data_dir",
            "a data directory",
            "an empty path",
        )
        .range("beat_window_ms", self.beat_window_ms, 10.0, 500.0, "ms")
        .range(
            "fiducial_window_ms",
            self.fiducial_window_ms,
            10.0,
            1000.0,
            "ms",
        )
        .range(
            "min_window_beats",
            self.min_window_beats as f64,
            1.0,
            1000.0,
            "beats",
        )
        .range("worst_beats", self.worst_beats as f64, 0.0, 100.0, "beats")
        .range("strip_s", self.strip_s, 0.5, 10.0, "s")
        .range(
            "bootstrap",
            self.resampling.replicates as f64,
            100.0,
            100_000.0,
            "resamples",
        );
        if let Some(r) = &self.records {
            c.require(
                !r.is_empty(),
                "records",
                "a non-empty list (or absent for all)",
                "[]",
            );
        }
        c.finish()
    }
}

/// Name of the global reference combined from lead files.
const COMBINED_LABEL: &str =
    "lead files combined (earliest onset, latest offset, median peak across leads)";

/// What the best-lead section scored.
const BEST_LEAD_LABEL: &str =
    "tendline .leadmark, for each beat and fiducial the lead nearest the reference";

/// Why the best-lead section exists and what it is not; shared by the reports.
pub const BEST_LEAD_INTRO: &str = "Some published QTDB results (Laguna et al. 1994; Martínez et al. 2004, from memory) were scored by choosing, for every annotated beat, the lead whose automatic mark lies nearest the cardiologist's. That choice looks at the reference, so these figures are no measurement of the tool (the global table is); they are here to compare like with like with such figures, and they bound what any rule choosing one lead per beat from these per-lead marks could reach.";

/// What was loaded for one record.
impl Loaded {
    /// The global reference: `.q1c` where present, else the combined lead files.
    fn global_ref(&self) -> Option<&ParsedBeats> {
        self.q1c.as_ref().or(self.combined.as_ref())
    }
}

struct Loaded {
    name: String,
    hdr: HeaderInfo,
    test: ParsedBeats,
    test_lead: Option<BTreeMap<u8, ParsedBeats>>,
    /// `.atr` beats: sample and WFDB beat code.
    atr: Option<Vec<(i64, u8)>>,
    q1c: Option<ParsedBeats>,
    q2c: Option<ParsedBeats>,
    /// Global reference combined from the lead files (only where there is no `.q1c`).
    combined: Option<ParsedBeats>,
    /// Lead files by signal index.
    leads: BTreeMap<u8, ParsedBeats>,
}

fn load_record(
    opts: &ValidateOptions,
    name: &str,
    warnings: &mut Vec<String>,
) -> Result<Loaded, EvalError> {
    let hdr = read_header(&opts.data_dir, name)?;
    let ann_dir = opts.run_dir.join("annotations");
    let mark = ann_dir.join(format!("{name}.mark"));
    if !mark.is_file() {
        return Err(EvalError::Record {
            record: name.into(),
            message: format!("the run has no global marks file {}", mark.display()),
        });
    }
    let test = parse_beats(&read_ann(&mark)?, hdr.fs);
    let want_lead = matches!(opts.reference, ReferenceKind::Auto | ReferenceKind::PerLead);
    let mut leads = BTreeMap::new();
    {
        for (idx, lead) in hdr.leads.iter().enumerate() {
            let ext = lead.trim().to_lowercase();
            if ext.is_empty() || ext.contains(['/', '\\', ' ']) {
                continue;
            }
            if let Some(p) = existing(&opts.data_dir, name, &ext) {
                let mut anns = read_ann(&p)?;
                for a in &mut anns {
                    a.chan = idx as u8;
                }
                leads.insert(idx as u8, parse_beats(&anns, hdr.fs));
            }
        }
    }
    let leadmark = ann_dir.join(format!("{name}.leadmark"));
    // A `.q1c` reference also reads the per-lead marks, for the best-lead
    // comparison (see [`waves::best_lead_beats`]); nothing is lost without them.
    let best_lead_wanted = matches!(opts.reference, ReferenceKind::Auto | ReferenceKind::Global)
        && existing(&opts.data_dir, name, "q1c").is_some()
        && leadmark.is_file();
    let test_lead = if best_lead_wanted {
        Some(parse_beats_by_chan(&read_ann(&leadmark)?, hdr.fs))
    } else if want_lead && !leads.is_empty() {
        if leadmark.is_file() {
            Some(parse_beats_by_chan(&read_ann(&leadmark)?, hdr.fs))
        } else {
            warnings.push(format!(
                "{name}: lead reference files exist but the run has no {}; per-lead scoring skipped",
                leadmark.display()
            ));
            None
        }
    } else {
        None
    };
    let atr = match existing(&opts.data_dir, name, "atr") {
        Some(p) => Some(
            read_ann(&p)?
                .iter()
                .filter(|a| a.is_beat())
                .map(|a| (a.sample, a.code))
                .collect(),
        ),
        None => None,
    };
    let parse_opt = |ext: &str| -> Result<Option<ParsedBeats>, EvalError> {
        match existing(&opts.data_dir, name, ext) {
            Some(p) => Ok(Some(parse_beats(&read_ann(&p)?, hdr.fs))),
            None => Ok(None),
        }
    };
    let q1c = parse_opt("q1c")?;
    let q2c = if opts.human_reference {
        parse_opt("q2c")?
    } else {
        None
    };
    let combined = (q1c.is_none() && !leads.is_empty()).then(|| {
        let lists: Vec<&[BeatMarks]> = leads
            .values()
            .map(|p: &ParsedBeats| p.beats.as_slice())
            .collect();
        ParsedBeats {
            beats: waves::combine_leads(&lists, window_samples(opts.beat_window_ms, hdr.fs)),
            span: leads
                .values()
                .filter_map(|p: &ParsedBeats| p.span)
                .reduce(|a, b| (a.0.min(b.0), a.1.max(b.1))),
            ..Default::default()
        }
    });
    Ok(Loaded {
        name: name.to_string(),
        hdr,
        test,
        test_lead,
        atr,
        q1c,
        q2c,
        combined,
        leads,
    })
}

/// Cluster QRS peaks of several leads into beats: peaks sorted, a new beat starts when
/// a peak is more than `max_dist` after the first peak of the current beat; the beat
/// time is the median of its peaks (lower middle of an even count, rounded down).
pub fn cluster_peaks(lists: &[Vec<i64>], max_dist: i64) -> Vec<i64> {
    let mut all: Vec<i64> = lists.iter().flatten().copied().collect();
    all.sort_unstable();
    let mut out = Vec::new();
    let mut cur: Vec<i64> = Vec::new();
    for p in all {
        if cur.first().is_some_and(|&f| p - f > max_dist) {
            out.push(median_i64(&cur));
            cur.clear();
        }
        cur.push(p);
    }
    if !cur.is_empty() {
        out.push(median_i64(&cur));
    }
    out
}

fn median_i64(sorted: &[i64]) -> i64 {
    let n = sorted.len();
    if n % 2 == 1 {
        sorted[n / 2]
    } else {
        (sorted[n / 2 - 1] + sorted[n / 2]).div_euclid(2)
    }
}

fn waves_present(parsed: &[&ParsedBeats]) -> BTreeSet<Wave> {
    let mut s = BTreeSet::new();
    for p in parsed {
        for b in &p.beats {
            s.insert(Wave::Qrs);
            if b.has_wave(Wave::P) {
                s.insert(Wave::P);
            }
            if b.has_wave(Wave::T) {
                s.insert(Wave::T);
            }
        }
    }
    s
}

fn protocol(opts: &ValidateOptions) -> Protocol {
    Protocol {
        beat_window_ms: opts.beat_window_ms,
        fiducial_window_ms: opts.fiducial_window_ms,
        min_window_beats: opts.min_window_beats,
        rules: vec![
            "Windows in samples: floor(window_ms * fs / 1000), inclusive.".into(),
            "Beat pairing: all (reference, test) pairs with |dt| <= window are candidates; taken by increasing |dt| (ties: lower reference index, then lower test index); one-to-one.".into(),
            "Beat references: .atr beat codes (WFDB isqrs set); LUDB: QRS peaks of all lead files clustered (new beat when > window after the cluster's first peak; median time); test beats outside the reference's annotated span are not counted (LUDB).".into(),
            "Waves: peak mark with '(' immediately before (onset) and ')' immediately after (offset); P belongs to the next QRS (last P before it, <= 600 ms), T to the previous QRS (first T after it, <= 800 ms).".into(),
            "Fiducials: reference beats paired to test beats by QRS peak; a reference fiducial is detected when the paired test beat marks it within the fiducial window; error = test - reference (ms); undetected and unpaired reference fiducials are false negatives.".into(),
            "False positives (positive predictivity): on paired beats only, where the reference annotates the wave exhaustively (any file of that reference kind marks it) and the reference beat lacks the whole wave while the test mark lies within the span the reference annotates on that channel (first to last reference mark), or the test mark lies outside the fiducial window of a present reference mark.".into(),
            "Statistics: SD with n - 1; mean of per-record SDs over records with >= 2 errors; p95 of |error| linear interpolation; CSE pass = pooled SD <= CSE 1985 tolerance (P on 10.2, P end 12.7, QRS on 6.5, QRS end 11.6, T end 30.6 ms).".into(),
            "Error components: over the scored marks, population SDs (denominator n) of each mark's record mean error (between records), of its (record, channel) mean error (between record-channels) and of the error minus that mean (within record-channel); reference / tool spread = the within (record, channel) population SD of each side's mark minus the QRS peak of its own beat; the global marks have one channel per record. Window intervals (and the human window QT) are split the same way by record: SD of each window's record mean difference (between records) and of the difference minus it (within record).".into(),
            "QT: beat QT = T end - QRS on on paired beats where both sides mark both (no fiducial window); window QT = windows.csv qt_superimposed_ms / qt_ms vs mean reference beat QT of reference beats with QRS peak in [start_s, end_s), windows with >= min_window_beats; with per-lead references also vs the longest per-lead reference QT (each lead file's mean beat QT in the window, >= min_window_beats beats; the longest lead's mean); window QRS duration / PR / P duration / T peak to T end = windows.csv qrs_ms / pr_ms / p_ms / tpe_ms vs the mean reference QRS end - QRS on / QRS on - P on / P end - P on / T end - T peak of the same beats, the same way; with per-lead references tpe_ms also vs the mean T end - T peak of the lead file of the window's qt_lead (the lead it was measured on), and qt_dispersion_ms vs the longest minus the shortest lead file mean beat QT in the window (>= min_window_beats beats each, >= 2 leads); Bland-Altman limits = bias +/- 1.96 SD.".into(),
            "Global reference without .q1c (LUDB): beats of all lead files clustered by QRS peak as above; per beat the earliest onset, latest offset and median peak over the leads that mark them (common practice for global boundaries).".into(),
            "Human reference: .q2c (annotator 2) scored against .q1c (annotator 1) with the same code, on the beats both annotators selected (.q1c beats paired with a .q2c beat) and the fiducials annotator 2 marks; the tool is shown on the same beats and fiducials. Window QT: per window of windows.csv, the mean beat QT of each annotator's beats with QRS peak in [start_s, end_s), on windows where both annotators have >= min_window_beats such beats; annotator 2 vs annotator 1, and the tool's qt_superimposed_ms vs annotator 1 on the same windows.".into(),
        ],
    }
}

/// Score a run against the references. Does not write anything.
pub fn validate(opts: &ValidateOptions) -> Result<ValidationReport, EvalError> {
    opts.validate().map_err(EvalError::Options)?;
    if !opts.data_dir.is_dir() {
        return Err(EvalError::NoRecords(format!(
            "data directory {} does not exist",
            opts.data_dir.display()
        )));
    }
    let names = match &opts.records {
        Some(r) => r.clone(),
        None => inputs::discover_records(&opts.run_dir, &opts.data_dir)?,
    };
    if names.is_empty() {
        return Err(EvalError::NoRecords(format!(
            "no {}/annotations/*.mark has a header in {}",
            opts.run_dir.display(),
            opts.data_dir.display()
        )));
    }
    let mut warnings = Vec::new();
    let mut recs = Vec::with_capacity(names.len());
    for n in &names {
        recs.push(load_record(opts, n, &mut warnings)?);
    }
    let kind = opts.reference;
    let want_beats = matches!(kind, ReferenceKind::Auto | ReferenceKind::Beats);
    let want_global = matches!(kind, ReferenceKind::Auto | ReferenceKind::Global);
    let want_lead = matches!(kind, ReferenceKind::Auto | ReferenceKind::PerLead);

    // Beats.
    let mut beats = None;
    if want_beats {
        let mut total = Counts::default();
        let mut per = Vec::new();
        let mut sources = BTreeSet::new();
        let mut labels = labels::LabelTally::default();
        for r in &recs {
            let w = window_samples(opts.beat_window_ms, r.hdr.fs);
            let test: Vec<i64> = r.test.beats.iter().map(|b| b.qrs_peak).collect();
            let (reference, span, src) = if let Some(a) = &r.atr {
                (
                    a.iter().map(|b| b.0).collect(),
                    None,
                    ".atr beat annotations",
                )
            } else if !r.leads.is_empty() {
                let lists: Vec<Vec<i64>> = r
                    .leads
                    .values()
                    .map(|p| p.beats.iter().map(|b| b.qrs_peak).collect())
                    .collect();
                let span = r
                    .leads
                    .values()
                    .filter_map(|p| p.span)
                    .reduce(|a, b| (a.0.min(b.0), a.1.max(b.1)));
                (
                    cluster_peaks(&lists, w),
                    span,
                    "lead files (QRS peaks clustered across leads)",
                )
            } else {
                continue;
            };
            sources.insert(src);
            let (c, pairs) = beat_counts(&reference, &test, w, span);
            if let Some(a) = &r.atr {
                for &(i, j) in &pairs {
                    labels.add(a[i].1, r.test.beats[j].code);
                }
            }
            total.add(&c);
            per.push(BeatScore::from_counts(&r.name, &c));
        }
        if per.is_empty() {
            if kind == ReferenceKind::Beats {
                return Err(EvalError::NoRecords(format!(
                    "no record has a beat reference (.atr or lead files) in {}",
                    opts.data_dir.display()
                )));
            }
        } else {
            let key = |b: &BeatScore| b.sensitivity_pct.unwrap_or(0.0) + b.ppv_pct.unwrap_or(0.0);
            per.sort_by(|a, b| key(a).total_cmp(&key(b)));
            beats = Some(BeatSection {
                reference: sources.into_iter().collect::<Vec<_>>().join(", "),
                overall: BeatScore::from_counts("", &total),
                per_record: per,
                labels: (!labels.is_empty()).then(|| labels.finish()),
            });
        }
    }

    // Global boundaries.
    let mut global = None;
    let mut best_lead = None;
    let mut human = None;
    let mut qt = None;
    let windows = load_windows(opts, &mut warnings)?;
    let mut global_scores: Vec<RecordScore> = Vec::new();
    if want_global {
        let refs: Vec<&ParsedBeats> = recs.iter().filter_map(|r| r.global_ref()).collect();
        let mut labels = BTreeSet::new();
        for r in &recs {
            if r.q1c.is_some() {
                labels.insert(".q1c (annotator 1)");
            } else if r.combined.is_some() {
                labels.insert(COMBINED_LABEL);
            }
        }
        let ref_label = labels.into_iter().collect::<Vec<_>>().join(" + ");
        if refs.is_empty() && kind == ReferenceKind::Global {
            return Err(EvalError::NoRecords(format!(
                "no record has a .q1c reference or lead reference files in {}",
                opts.data_dir.display()
            )));
        }
        if !refs.is_empty() {
            let exhaustive = waves_present(&refs);
            let fids = Fiducial::ALL.to_vec();
            let ppv: Vec<Fiducial> = fids
                .iter()
                .copied()
                .filter(|f| exhaustive.contains(&f.wave()))
                .collect();
            let cfg_for = |fs: f64, fiducials: Vec<Fiducial>| ScoreConfig {
                fs,
                beat_window: window_samples(opts.beat_window_ms, fs),
                fiducial_window: window_samples(opts.fiducial_window_ms, fs),
                exhaustive: exhaustive.clone(),
                fiducials,
            };
            for r in &recs {
                if let Some(q) = r.global_ref() {
                    let mut s = RecordScore::new(&r.name, r.hdr.fs);
                    s.add_channel(
                        0,
                        q.beats.clone(),
                        r.test.beats.clone(),
                        &cfg_for(r.hdr.fs, fids.clone()),
                    );
                    global_scores.push(s);
                }
            }
            global = Some(report::build_section(
                &ref_label,
                "tendline .mark",
                &global_scores,
                &fids,
                &ppv,
                None,
                opts.resampling,
            ));
            let best: Vec<RecordScore> = recs
                .iter()
                .filter_map(|r| {
                    let (q, tl) = (r.q1c.as_ref()?, r.test_lead.as_ref()?);
                    let lists: Vec<&[BeatMarks]> =
                        tl.values().map(|p| p.beats.as_slice()).collect();
                    let w = window_samples(opts.beat_window_ms, r.hdr.fs);
                    let chosen = waves::best_lead_beats(&q.beats, &lists, w);
                    let mut s = RecordScore::new(&r.name, r.hdr.fs);
                    s.add_channel(0, q.beats.clone(), chosen, &cfg_for(r.hdr.fs, fids.clone()));
                    Some(s)
                })
                .collect();
            if !best.is_empty() {
                // Pooled figures only: per-record rows of a comparison that
                // looks at the reference would invite tuning to them.
                let mut b = report::build_section(
                    ".q1c (annotator 1)",
                    BEST_LEAD_LABEL,
                    &best,
                    &fids,
                    &[],
                    None,
                    opts.resampling,
                );
                b.per_record.clear();
                best_lead = Some(b);
            }
            // Human reference.
            let pairs: Vec<&Loaded> = recs
                .iter()
                .filter(|r| r.q1c.is_some() && r.q2c.is_some())
                .collect();
            if !pairs.is_empty() {
                let q2: Vec<&ParsedBeats> = pairs.iter().filter_map(|r| r.q2c.as_ref()).collect();
                let marked = waves_present(&q2);
                let hf: Vec<Fiducial> = fids
                    .iter()
                    .copied()
                    .filter(|f| marked.contains(&f.wave()))
                    .collect();
                let mut ann_scores = Vec::new();
                let mut tool_scores = Vec::new();
                for r in &pairs {
                    let (Some(q1), Some(q2)) = (&r.q1c, &r.q2c) else {
                        continue;
                    };
                    let cfg = cfg_for(r.hdr.fs, hf.clone());
                    // Only the beats both annotators selected: annotator 2 marked a
                    // subset of annotator 1's beats, and that choice is not an error.
                    let p1: Vec<i64> = q1.beats.iter().map(|b| b.qrs_peak).collect();
                    let p2: Vec<i64> = q2.beats.iter().map(|b| b.qrs_peak).collect();
                    let common: Vec<BeatMarks> = matching::match_events(&p1, &p2, cfg.beat_window)
                        .into_iter()
                        .map(|(i, _)| q1.beats[i].clone())
                        .collect();
                    let mut a = RecordScore::new(&r.name, r.hdr.fs);
                    a.add_channel(0, common.clone(), q2.beats.clone(), &cfg);
                    let mut t = RecordScore::new(&r.name, r.hdr.fs);
                    t.add_channel(0, common, r.test.beats.clone(), &cfg);
                    ann_scores.push(a);
                    tool_scores.push(t);
                }
                let ba = |s: &[RecordScore]| {
                    let p: Vec<(f64, f64)> = s
                        .iter()
                        .flat_map(|x| x.qt_pairs.iter().map(|q| (q.0, q.1)))
                        .collect();
                    BlandAltman::from_pairs(&p)
                };
                let (annotator_qt_window, tool_qt_window) =
                    human_window_qt(opts, windows.as_deref(), &pairs);
                human = Some(HumanSection {
                    records: pairs.iter().map(|r| r.name.clone()).collect(),
                    annotator: report::build_section(
                        ".q1c (annotator 1)",
                        ".q2c (annotator 2)",
                        &ann_scores,
                        &hf,
                        &ppv,
                        None,
                        opts.resampling,
                    ),
                    tool: report::build_section(
                        ".q1c (annotator 1)",
                        "tendline .mark",
                        &tool_scores,
                        &hf,
                        &ppv,
                        None,
                        opts.resampling,
                    ),
                    annotator_qt_beat: ba(&ann_scores),
                    tool_qt_beat: ba(&tool_scores),
                    annotator_qt_window,
                    tool_qt_window,
                });
            }
            // QT.
            let p: Vec<(f64, f64)> = global_scores
                .iter()
                .flat_map(|x| x.qt_pairs.iter().map(|q| (q.0, q.1)))
                .collect();
            let (ws, wsingle, n_w) = window_qt(opts, windows.as_deref(), &recs);
            let (window_qrs, window_pr) = window_qrs_pr(opts, windows.as_deref(), &recs);
            let (window_p, window_tpe) = window_p_tpe(opts, windows.as_deref(), &recs);
            qt = Some(QtSection {
                reference: ref_label.clone(),
                beat: BlandAltman::from_pairs(&p),
                beat_per_lead: None,
                window_superimposed: ws,
                window_single: wsingle,
                windows_scored: n_w,
                window_superimposed_lead_ref: None,
                window_single_lead_ref: None,
                window_qrs,
                window_pr,
                window_p,
                window_tpe,
                window_tpe_lead_ref: None,
                window_qt_dispersion_lead_ref: None,
                window_by_flag: window_qt_by_flag(opts, windows.as_deref(), &recs),
                window_stability: None,
            });
        }
    }

    // Per-lead boundaries.
    let mut per_lead = None;
    let mut lead_scores: Vec<RecordScore> = Vec::new();
    if want_lead {
        let refs: Vec<&ParsedBeats> = recs.iter().flat_map(|r| r.leads.values()).collect();
        if refs.is_empty() && kind == ReferenceKind::PerLead {
            return Err(EvalError::NoRecords(format!(
                "no record has lead reference files (<record>.<lead>) in {}",
                opts.data_dir.display()
            )));
        }
        if !refs.is_empty() {
            let exhaustive = waves_present(&refs);
            let fids = Fiducial::ALL.to_vec();
            let ppv: Vec<Fiducial> = fids
                .iter()
                .copied()
                .filter(|f| exhaustive.contains(&f.wave()))
                .collect();
            let mut names = BTreeMap::new();
            for r in &recs {
                let Some(tl) = &r.test_lead else { continue };
                let cfg = ScoreConfig {
                    fs: r.hdr.fs,
                    beat_window: window_samples(opts.beat_window_ms, r.hdr.fs),
                    fiducial_window: window_samples(opts.fiducial_window_ms, r.hdr.fs),
                    exhaustive: exhaustive.clone(),
                    fiducials: fids.clone(),
                };
                let mut s = RecordScore::new(&r.name, r.hdr.fs);
                for (&ch, reference) in &r.leads {
                    let test = tl.get(&ch).map(|p| p.beats.clone()).unwrap_or_default();
                    s.add_channel(ch, reference.beats.clone(), test, &cfg);
                }
                names.insert(r.name.clone(), r.hdr.leads.clone());
                lead_scores.push(s);
            }
            if !lead_scores.is_empty() {
                per_lead = Some(report::build_section(
                    "lead files (per-lead expert marks)",
                    "tendline .leadmark",
                    &lead_scores,
                    &fids,
                    &ppv,
                    Some(&names),
                    opts.resampling,
                ));
                let p: Vec<(f64, f64)> = lead_scores
                    .iter()
                    .flat_map(|x| x.qt_pairs.iter().map(|q| (q.0, q.1)))
                    .collect();
                let ba = BlandAltman::from_pairs(&p);
                let (lead_sup, lead_single) =
                    window_qt_longest_lead_ref(opts, windows.as_deref(), &recs);
                let q = qt.get_or_insert_with(|| QtSection {
                    reference: "lead files".into(),
                    beat: BlandAltman::default(),
                    beat_per_lead: None,
                    window_superimposed: None,
                    window_single: None,
                    windows_scored: 0,
                    window_superimposed_lead_ref: None,
                    window_single_lead_ref: None,
                    window_qrs: None,
                    window_pr: None,
                    window_p: None,
                    window_tpe: None,
                    window_tpe_lead_ref: None,
                    window_qt_dispersion_lead_ref: None,
                    window_by_flag: Vec::new(),
                    window_stability: None,
                });
                q.beat_per_lead = Some(ba);
                q.window_superimposed_lead_ref = lead_sup;
                q.window_single_lead_ref = lead_single;
                q.window_tpe_lead_ref = window_tpe_lead_ref(opts, windows.as_deref(), &recs);
                q.window_qt_dispersion_lead_ref =
                    window_dispersion_lead_ref(opts, windows.as_deref(), &recs);
            }
        }
    }

    if let (Some(q), Some(rows)) = (qt.as_mut(), windows.as_deref()) {
        q.window_stability = Some(window_stability(rows));
    }
    let worst = worst_beats(opts, &recs, &global_scores, &lead_scores, &mut warnings);
    let mut marks = Vec::new();
    if global.is_some() || per_lead.is_some() {
        use calibration::Marks;
        let confs = calibration::load_all(&opts.run_dir, &names, &mut warnings);
        let global_conf = |rec: &str, ch: u8, f: Fiducial, s: i64| {
            confs.get(rec).and_then(|c| c.get(Marks::Global, ch, f, s))
        };
        let lead_conf = |rec: &str, ch: u8, f: Fiducial, s: i64| {
            confs.get(rec).and_then(|c| c.get(Marks::Leads, ch, f, s))
        };
        if let Some(g) = &mut global {
            g.calibration = calibration::rows(&global_scores, &Fiducial::ALL, &global_conf);
        }
        if let Some(p) = &mut per_lead {
            p.calibration = calibration::rows(&lead_scores, &Fiducial::ALL, &lead_conf);
        }
        let lead_names: BTreeMap<String, Vec<String>> = recs
            .iter()
            .map(|r| (r.name.clone(), r.hdr.leads.clone()))
            .collect();
        marks = marks_csv::rows("global", &global_scores, None, &global_conf);
        marks.extend(marks_csv::rows(
            "lead",
            &lead_scores,
            Some(&lead_names),
            &lead_conf,
        ));
    }
    let database = opts.database.clone().unwrap_or_else(|| {
        opts.data_dir
            .canonicalize()
            .unwrap_or_else(|_| opts.data_dir.clone())
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "data".into())
    });
    Ok(ValidationReport {
        schema: report::SCHEMA_VERSION,
        generator: format!("tendline-evaluate {}", env!("CARGO_PKG_VERSION")),
        database,
        run_dir: opts.run_dir.display().to_string(),
        data_dir: opts.data_dir.display().to_string(),
        protocol: protocol(opts),
        records: names,
        beats,
        global,
        best_lead,
        per_lead,
        qt,
        human,
        worst_beats: worst,
        warnings,
        marks,
    })
}

type WindowQt = (Option<BlandAltman>, Option<BlandAltman>, usize);

/// The run's `windows.csv`, or None (with a warning) when the run has none.
fn load_windows(
    opts: &ValidateOptions,
    warnings: &mut Vec<String>,
) -> Result<Option<Vec<inputs::WindowRow>>, EvalError> {
    let path = opts.run_dir.join("windows.csv");
    if !path.is_file() {
        warnings.push(format!(
            "{} not found: window QT not scored",
            path.display()
        ));
        return Ok(None);
    }
    let text = std::fs::read_to_string(&path).map_err(|source| EvalError::Io {
        path: path.clone(),
        source,
    })?;
    inputs::parse_windows_csv(&text, &path).map(Some)
}

/// Mean interval (ms) of the beats of `beats` whose QRS peak lies in the window
/// `[start_s, end_s)`, if at least `min_beats` of them mark both ends of it
/// (`interval`: e.g. [`waves::BeatMarks::qt_samples`]).
fn window_mean(
    beats: &ParsedBeats,
    w: &inputs::WindowRow,
    fs: f64,
    min_beats: usize,
    interval: fn(&waves::BeatMarks) -> Option<i64>,
) -> Option<f64> {
    let (lo, hi) = (w.start_s * fs, w.end_s * fs);
    let v: Vec<f64> = beats
        .beats
        .iter()
        .filter(|b| (b.qrs_peak as f64) >= lo && (b.qrs_peak as f64) < hi)
        .filter_map(interval)
        .map(|s| s as f64 * 1000.0 / fs)
        .collect();
    (v.len() >= min_beats).then(|| stats::mean(&v)).flatten()
}

fn window_mean_qt(
    beats: &ParsedBeats,
    w: &inputs::WindowRow,
    fs: f64,
    min_beats: usize,
) -> Option<f64> {
    window_mean(beats, w, fs, min_beats, waves::BeatMarks::qt_samples)
}

/// The records by name, with their position in the report's record order.
fn by_position(recs: &[Loaded]) -> BTreeMap<&str, (usize, &Loaded)> {
    recs.iter()
        .enumerate()
        .map(|(k, r)| (r.name.as_str(), (k, r)))
        .collect()
}

/// Agreement of a window value of `windows.csv` (`value`) with the mean
/// reference interval (`interval`) of the global reference's beats in the
/// window, over the windows with at least `min_window_beats` such beats; with
/// its stability over records. Also returns how many windows had a reference.
fn window_agreement(
    opts: &ValidateOptions,
    rows: &[inputs::WindowRow],
    recs: &[Loaded],
    interval: fn(&waves::BeatMarks) -> Option<i64>,
    value: impl Fn(&inputs::WindowRow) -> Option<f64>,
) -> (Option<BlandAltman>, usize) {
    let by_name = by_position(recs);
    let (mut v, mut n) = (Vec::new(), 0);
    for w in rows {
        let Some(&(k, r)) = by_name.get(w.record.as_str()) else {
            continue;
        };
        let Some(q) = r.global_ref() else { continue };
        let Some(m) = window_mean(q, w, r.hdr.fs, opts.min_window_beats, interval) else {
            continue;
        };
        n += 1;
        if let Some(x) = value(w) {
            v.push((k, x, m));
        }
    }
    (BlandAltman::by_record(&v, opts.resampling), n)
}

fn window_qt(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> WindowQt {
    let Some(rows) = rows else {
        return (None, None, 0);
    };
    let qt = waves::BeatMarks::qt_samples;
    let (sup, n) = window_agreement(opts, rows, recs, qt, |w| w.qt_superimposed_ms);
    let (single, _) = window_agreement(opts, rows, recs, qt, |w| w.qt_ms);
    (sup, single, n)
}

/// The superimposed-leads window QT against the global reference, on the
/// windows with and without each of [`report::OVERREAD_FLAGS`].
fn window_qt_by_flag(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> Vec<report::FlagSplit> {
    let Some(rows) = rows else {
        return Vec::new();
    };
    let qt = waves::BeatMarks::qt_samples;
    report::OVERREAD_FLAGS
        .iter()
        .map(|&flag| {
            let (flagged, _) = window_agreement(opts, rows, recs, qt, |w| {
                w.qt_superimposed_ms.filter(|_| w.has_flag(flag))
            });
            let (unflagged, _) = window_agreement(opts, rows, recs, qt, |w| {
                w.qt_superimposed_ms.filter(|_| !w.has_flag(flag))
            });
            report::FlagSplit {
                flag: flag.to_string(),
                flagged_windows: flagged.as_ref().map_or(0, |b| b.n),
                unflagged_windows: unflagged.as_ref().map_or(0, |b| b.n),
                flagged,
                unflagged,
            }
        })
        .collect()
}

/// [`report::WindowStability`] of the QTc-feeding QT over all rows of
/// `windows.csv`. Windows are consecutive when their `window` numbers differ
/// by one (rows without a number: when they follow each other in the file).
pub fn window_stability(rows: &[inputs::WindowRow]) -> report::WindowStability {
    let qtcf = |w: &inputs::WindowRow| {
        w.qt_ms
            .zip(w.rr_ms)
            .filter(|&(_, rr)| rr > 0.0)
            .map(|(qt, rr)| qt / (rr / 1000.0).cbrt())
            .filter(|v| v.is_finite())
    };
    let mut deltas = Vec::new();
    let mut records = BTreeSet::new();
    let (mut windows, mut inconsistent) = (0usize, 0usize);
    for (i, w) in rows.iter().enumerate() {
        if qtcf(w).is_some() {
            windows += 1;
            inconsistent += usize::from(w.has_flag("qt_inconsistent"));
        }
        let Some(prev) = i.checked_sub(1).map(|j| &rows[j]) else {
            continue;
        };
        let next_number = match (prev.window.parse::<i64>(), w.window.parse::<i64>()) {
            (Ok(a), Ok(b)) => b == a + 1,
            _ => prev.window.is_empty() && w.window.is_empty(),
        };
        if prev.record != w.record || !next_number {
            continue;
        }
        if let (Some(a), Some(b)) = (qtcf(prev), qtcf(w)) {
            deltas.push(b - a);
            records.insert(w.record.clone());
        }
    }
    let n = deltas.len();
    let pct = |k: usize, of: usize| (of > 0).then(|| 100.0 * k as f64 / of as f64);
    let abs: Vec<f64> = deltas.iter().map(|d| d.abs()).collect();
    report::WindowStability {
        records: records.len(),
        windows,
        pairs: n,
        delta_sd_ms: stats::sd(&deltas),
        delta_median_abs_ms: stats::percentile(&abs, 0.5),
        delta_above_40_pct: pct(abs.iter().filter(|&&a| a > 40.0).count(), n),
        inconsistent_pct: pct(inconsistent, windows),
    }
}

/// Window QRS duration and PR interval against the mean reference interval of the
/// window's beats (global references), as for the window QT.
fn window_qrs_pr(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> (Option<BlandAltman>, Option<BlandAltman>) {
    let Some(rows) = rows else {
        return (None, None);
    };
    let qrs = window_agreement(opts, rows, recs, waves::BeatMarks::qrs_samples, |w| {
        w.qrs_ms
    });
    let pr = window_agreement(opts, rows, recs, waves::BeatMarks::pr_samples, |w| w.pr_ms);
    (qrs.0, pr.0)
}

/// Window P-wave duration and T peak to T end against the mean reference interval
/// of the window's beats (global references), as for the window QT.
fn window_p_tpe(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> (Option<BlandAltman>, Option<BlandAltman>) {
    let Some(rows) = rows else {
        return (None, None);
    };
    let p = window_agreement(opts, rows, recs, waves::BeatMarks::p_samples, |w| w.p_ms);
    let tpe = window_agreement(opts, rows, recs, waves::BeatMarks::tpe_samples, |w| {
        w.tpe_ms
    });
    (p.0, tpe.0)
}

/// Agreement of a window value of `windows.csv` (`value`) with a reference
/// the record's lead files give for that window (`reference`; None: the window
/// is not scored), with its stability over records.
fn lead_files_agreement(
    opts: &ValidateOptions,
    rows: &[inputs::WindowRow],
    recs: &[Loaded],
    value: fn(&inputs::WindowRow) -> Option<f64>,
    reference: impl Fn(&inputs::WindowRow, &Loaded) -> Option<f64>,
) -> Option<BlandAltman> {
    let by_name = by_position(recs);
    let v: Vec<(usize, f64, f64)> = rows
        .iter()
        .filter_map(|w| {
            let &(k, r) = by_name.get(w.record.as_str())?;
            let t = value(w)?;
            Some((k, t, reference(w, r)?))
        })
        .collect();
    BlandAltman::by_record(&v, opts.resampling)
}

/// Window T peak to T end against the same lead's reference (per-lead references
/// such as LUDB's): per window, the lead file of the window's `qt_lead` (the lead
/// the tool measured Tp-e on), its mean T end − T peak over its beats with QRS
/// peak in the window (at least `min_window_beats`).
fn window_tpe_lead_ref(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> Option<BlandAltman> {
    lead_files_agreement(
        opts,
        rows?,
        recs,
        |w| w.tpe_ms,
        |w, r| {
            let idx = r
                .hdr
                .leads
                .iter()
                .position(|l| !w.qt_lead.is_empty() && l.eq_ignore_ascii_case(&w.qt_lead))?;
            let beats = r.leads.get(&u8::try_from(idx).ok()?)?;
            window_mean(
                beats,
                w,
                r.hdr.fs,
                opts.min_window_beats,
                waves::BeatMarks::tpe_samples,
            )
        },
    )
}

/// Window QT dispersion against the per-lead references: per window, the longest
/// minus the shortest of the lead files' mean beat QTs (each over at least
/// `min_window_beats` beats with QRS peak in the window), with at least two such
/// leads.
fn window_dispersion_lead_ref(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> Option<BlandAltman> {
    lead_files_agreement(
        opts,
        rows?,
        recs,
        |w| w.qt_dispersion_ms,
        |w, r| {
            let qts: Vec<f64> = r
                .leads
                .values()
                .filter_map(|b| window_mean_qt(b, w, r.hdr.fs, opts.min_window_beats))
                .collect();
            (qts.len() >= 2).then(|| {
                qts.iter().copied().fold(f64::NEG_INFINITY, f64::max)
                    - qts.iter().copied().fold(f64::INFINITY, f64::min)
            })
        },
    )
}

/// Window QT against the longest per-lead reference QT (per-lead references such as
/// LUDB's): per window, each lead file's mean beat QT over its beats with QRS peak
/// in the window (at least `min_window_beats` of them), and the longest of those
/// means is the reference; (superimposed-leads QT, QTc-feeding QT) against it.
fn window_qt_longest_lead_ref(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    recs: &[Loaded],
) -> (Option<BlandAltman>, Option<BlandAltman>) {
    let Some(rows) = rows else {
        return (None, None);
    };
    let by_name = by_position(recs);
    let (mut sup, mut single) = (Vec::new(), Vec::new());
    for w in rows {
        let Some(&(k, r)) = by_name.get(w.record.as_str()) else {
            continue;
        };
        let longest = r
            .leads
            .values()
            .filter_map(|b| window_mean_qt(b, w, r.hdr.fs, opts.min_window_beats))
            .reduce(f64::max);
        let Some(m) = longest else { continue };
        if let Some(v) = w.qt_superimposed_ms {
            sup.push((k, v, m));
        }
        if let Some(v) = w.qt_ms {
            single.push((k, v, m));
        }
    }
    (
        BlandAltman::by_record(&sup, opts.resampling),
        BlandAltman::by_record(&single, opts.resampling),
    )
}

/// Window QT of annotator 2 and of the tool (superimposed leads) against annotator 1,
/// on the windows of the records both annotators marked where each annotator marks
/// at least `min_window_beats` beats: how far two cardiologists' window QTs lie apart
/// beside how far the tool lies from the first.
fn human_window_qt(
    opts: &ValidateOptions,
    rows: Option<&[inputs::WindowRow]>,
    pairs: &[&Loaded],
) -> (Option<BlandAltman>, Option<BlandAltman>) {
    let Some(rows) = rows else {
        return (None, None);
    };
    let by_name: BTreeMap<&str, &Loaded> = pairs.iter().map(|r| (r.name.as_str(), *r)).collect();
    let (mut ann, mut tool) = (Vec::new(), Vec::new());
    for w in rows {
        let Some(r) = by_name.get(w.record.as_str()) else {
            continue;
        };
        let (Some(q1), Some(q2)) = (&r.q1c, &r.q2c) else {
            continue;
        };
        let fs = r.hdr.fs;
        let (Some(m1), Some(m2)) = (
            window_mean_qt(q1, w, fs, opts.min_window_beats),
            window_mean_qt(q2, w, fs, opts.min_window_beats),
        ) else {
            continue;
        };
        ann.push((r.name.as_str(), m2, m1));
        if let Some(v) = w.qt_superimposed_ms {
            tool.push((r.name.as_str(), v, m1));
        }
    }
    let f = |v: Vec<(&str, f64, f64)>| {
        (!v.is_empty()).then(|| {
            let pairs: Vec<(f64, f64)> = v.iter().map(|&(_, t, r)| (t, r)).collect();
            let keyed: Vec<(&str, f64)> = v.iter().map(|&(k, t, r)| (k, t - r)).collect();
            BlandAltman {
                by_record: stats::RecordSplit::from_keyed(&keyed),
                ..BlandAltman::from_pairs(&pairs)
            }
        })
    };
    (f(ann), f(tool))
}

fn worst_beats(
    opts: &ValidateOptions,
    recs: &[Loaded],
    global: &[RecordScore],
    lead: &[RecordScore],
    warnings: &mut Vec<String>,
) -> Vec<WorstBeat> {
    if opts.worst_beats == 0 {
        return Vec::new();
    }
    // Largest |error| of T end and QRS onset, pooled over the global and per-lead
    // sections; one entry per beat.
    let mut cand = Vec::new();
    for (sec, scores) in [("global", global), ("per_lead", lead)] {
        for s in scores {
            for f in [Fiducial::TEnd, Fiducial::QrsOn] {
                for e in s.errors.get(&f).into_iter().flatten() {
                    cand.push((e.error_ms.abs(), sec, s, f, e.clone()));
                }
            }
        }
    }
    cand.sort_by(|a, b| b.0.total_cmp(&a.0));
    let mut seen = BTreeSet::new();
    let mut out = Vec::new();
    let mut cache: BTreeMap<String, Option<tendline_formats::Record>> = BTreeMap::new();
    for (_, section, s, f, e) in cand {
        if out.len() >= opts.worst_beats {
            break;
        }
        if !seen.insert((section, s.record.clone(), e.chan, e.ref_index)) {
            continue;
        }
        let Some((rb, tb)) = s.beats.get(&e.chan) else {
            continue;
        };
        let reference = rb[e.ref_index].clone();
        let test = tb[e.test_index].clone();
        let hdr_leads = recs
            .iter()
            .find(|r| r.name == s.record)
            .map(|r| r.hdr.leads.clone())
            .unwrap_or_default();
        let lead = hdr_leads.get(e.chan as usize).cloned().unwrap_or_default();
        let rec = cache.entry(s.record.clone()).or_insert_with(|| {
            let p = opts.data_dir.join(format!("{}.hea", s.record));
            match tendline_formats::wfdb::read_record(&p) {
                Ok(r) => Some(r),
                Err(err) => {
                    warnings.push(format!("worst-beat strip of {}: {err}", s.record));
                    None
                }
            }
        });
        let strip = rec.as_ref().and_then(|r| {
            let l = r.leads.get(e.chan as usize)?;
            let before = (0.5 / 1.5 * opts.strip_s * s.fs).round() as i64;
            let len = (opts.strip_s * s.fs).round() as i64;
            let start = (reference.qrs_peak - before).max(0);
            let end = (start + len).min(l.samples.len() as i64);
            (end > start).then(|| Strip {
                start,
                samples: l.samples[start as usize..end as usize].to_vec(),
                units: l.units.clone(),
            })
        });
        out.push(WorstBeat {
            record: s.record.clone(),
            lead,
            chan: e.chan,
            section: section.into(),
            fiducial: f,
            error_ms: e.error_ms,
            fs: s.fs,
            reference,
            test,
            strip,
        });
    }
    out
}

/// Write `report.json`, `report.md` and `report.html` into `out_dir` (created if needed).
pub fn write_report(report: &ValidationReport, out_dir: &Path) -> Result<(), EvalError> {
    std::fs::create_dir_all(out_dir).map_err(|source| EvalError::Io {
        path: out_dir.to_path_buf(),
        source,
    })?;
    let write = |name: &str, text: &str| -> Result<(), EvalError> {
        let p = out_dir.join(name);
        std::fs::write(&p, text).map_err(|source| EvalError::Io { path: p, source })
    };
    let json =
        serde_json::to_string_pretty(report).map_err(|e| EvalError::Report(e.to_string()))?;
    write("report.json", &(json + "\n"))?;
    write("report.md", &markdown::render(report))?;
    write("report.html", &html::render(report)?)?;
    if !report.marks.is_empty() {
        write("marks.csv", &marks_csv::to_csv(&report.marks))?;
    } else {
        // A stale list from an earlier report must not pass for this one's.
        let p = out_dir.join("marks.csv");
        match std::fs::remove_file(&p) {
            Err(e) if e.kind() != std::io::ErrorKind::NotFound => {
                return Err(EvalError::Io { path: p, source: e })
            }
            _ => {}
        }
    }
    Ok(())
}

/// [`validate`] then [`write_report`] into `opts.out_dir`.
pub fn validate_and_write(opts: &ValidateOptions) -> Result<ValidationReport, EvalError> {
    let r = validate(opts)?;
    if opts.out_dir.as_os_str().is_empty() {
        return Err(EvalError::Options(vec![ParamError {
            key: "validate.out_dir".into(),
            allowed: "an output directory".into(),
            got: "an empty path".into(),
        }]));
    }
    write_report(&r, &opts.out_dir)?;
    Ok(r)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn window_stability_by_hand() {
        // Fridericia's correction QT / RR^(1/3), RR in s (Fridericia 1920).
        // Record a: windows 0-3 at RR 1000 ms (QTcF = QT), QT 400, 410, 470,
        // 400 (window 2 flagged): differences +10, +60, -70. Record b: window
        // 0 at RR 729 ms (0.729^(1/3) = 0.9 exactly) and QT 360 (QTcF 400),
        // window 2 (not consecutive with 0) at RR 1000, QT 400: no pair.
        // A row without RR counts nowhere.
        let row =
            |rec: &str, w: &str, qt: f64, rr: Option<f64>, flags: &[&str]| inputs::WindowRow {
                record: rec.into(),
                window: w.into(),
                start_s: 0.0,
                end_s: 10.0,
                qt_ms: Some(qt),
                qt_superimposed_ms: None,
                qrs_ms: None,
                pr_ms: None,
                p_ms: None,
                tpe_ms: None,
                qt_lead: String::new(),
                qt_dispersion_ms: None,
                rr_ms: rr,
                flags: flags.iter().map(|f| f.to_string()).collect(),
            };
        let rows = vec![
            row("a", "0", 400.0, Some(1000.0), &[]),
            row("a", "1", 410.0, Some(1000.0), &[]),
            row("a", "2", 470.0, Some(1000.0), &["qt_inconsistent"]),
            row("a", "3", 400.0, Some(1000.0), &[]),
            row("b", "0", 360.0, Some(729.0), &[]),
            row("b", "2", 400.0, Some(1000.0), &[]),
            row("b", "3", 400.0, None, &[]),
        ];
        let s = window_stability(&rows);
        assert_eq!((s.records, s.windows, s.pairs), (1, 6, 3));
        // Differences 10, 60, -70: mean 0, sample SD sqrt((100 + 3600 + 4900) / 2).
        let sd = ((100.0f64 + 3600.0 + 4900.0) / 2.0).sqrt();
        assert!((s.delta_sd_ms.unwrap() - sd).abs() < 1e-9);
        assert_eq!(s.delta_median_abs_ms, Some(60.0));
        assert!((s.delta_above_40_pct.unwrap() - 200.0 / 3.0).abs() < 1e-9);
        assert!((s.inconsistent_pct.unwrap() - 100.0 / 6.0).abs() < 1e-9);
        // The 729-ms window is corrected exactly (QTcF 400, same as window b/2).
        let b = vec![
            row("b", "0", 360.0, Some(729.0), &[]),
            row("b", "1", 400.0, Some(1000.0), &[]),
        ];
        let s = window_stability(&b);
        assert_eq!(s.pairs, 1);
        assert!(s.delta_median_abs_ms.unwrap().abs() < 1e-9);
        assert_eq!(window_stability(&[]).pairs, 0);
    }

    #[test]
    fn cluster_peaks_merges_leads() {
        // Lead A: 100, 600; lead B: 110, 590, 1200 → beats at medians.
        let c = cluster_peaks(&[vec![100, 600], vec![110, 590, 1200]], 75);
        assert_eq!(c, vec![105, 595, 1200]);
        assert_eq!(cluster_peaks(&[vec![10, 20, 30]], 75), vec![20]);
    }

    #[test]
    fn options_defaults_and_checks() {
        let o = ValidateOptions::default();
        let e = o.validate().unwrap_err();
        assert!(e.iter().any(|x| x.key == "validate.run_dir"));
        let o = ValidateOptions {
            run_dir: "r".into(),
            data_dir: "d".into(),
            beat_window_ms: 5.0,
            ..Default::default()
        };
        let e = o.validate().unwrap_err();
        assert_eq!(e.len(), 1);
        assert_eq!(e[0].key, "validate.beat_window_ms");
        let o = ValidateOptions {
            run_dir: "r".into(),
            data_dir: "d".into(),
            resampling: stability::Resampling {
                replicates: 50,
                seed: 1,
            },
            ..Default::default()
        };
        let e = o.validate().unwrap_err();
        assert_eq!(e[0].key, "validate.bootstrap");
        let o: ValidateOptions =
            toml::from_str("run_dir = 'r'\ndata_dir = 'd'\nreference = 'per-lead'").unwrap();
        assert_eq!(o.reference, ReferenceKind::PerLead);
        assert!(o.validate().is_ok());
        assert!(toml::from_str::<ValidateOptions>("bogus = 1").is_err());
    }
}
