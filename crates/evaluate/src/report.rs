//! The validation report: what is written to `report.json` and summarised in
//! `report.md` and `report.html`, and its assembly from per-record scores.

use crate::calibration::CalibrationRow;
use crate::components::ComponentRow;
use crate::matching::Counts;
use crate::score::RecordScore;
use crate::stability::{stability, RecordErrors, Resampling, Stability};
use crate::stats::{BlandAltman, ErrorStats};
use crate::waves::{BeatMarks, Fiducial};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Version of the JSON layout; bump when fields change meaning.
pub const SCHEMA_VERSION: u32 = 1;

/// The whole validation result for one database.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ValidationReport {
    pub schema: u32,
    /// Producer and version, e.g. `tendline-evaluate 0.1.0`.
    pub generator: String,
    /// Database name (the data directory's name unless given), e.g. `qtdb`.
    pub database: String,
    pub run_dir: String,
    pub data_dir: String,
    pub protocol: Protocol,
    /// Records scored.
    pub records: Vec<String>,
    pub beats: Option<BeatSection>,
    /// Global (all-lead) boundaries against a `.q1c`-style reference.
    pub global: Option<DelineationSection>,
    /// Per-lead marks with the lead nearest the `.q1c` reference chosen for
    /// each beat and fiducial ([`crate::waves::best_lead_beats`]): for
    /// comparison with published figures scored that way, not a measurement.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub best_lead: Option<DelineationSection>,
    /// Per-lead boundaries against LUDB-style lead files.
    pub per_lead: Option<DelineationSection>,
    pub qt: Option<QtSection>,
    /// Second annotator against the first, next to the tool on the same records.
    pub human: Option<HumanSection>,
    /// Beats with the largest errors, for inspection.
    pub worst_beats: Vec<WorstBeat>,
    /// Problems that did not stop the run (missing files, skipped records...).
    pub warnings: Vec<String>,
    /// Every scored mark, written to `marks.csv` beside the report (not to JSON).
    #[serde(skip)]
    pub marks: Vec<crate::marks_csv::MarkRow>,
}

/// Matching rules and statistical conventions, restated in every report.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Protocol {
    pub beat_window_ms: f64,
    pub fiducial_window_ms: f64,
    pub min_window_beats: usize,
    pub rules: Vec<String>,
}

/// Beat detection against a beat reference.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct BeatSection {
    /// What served as beat reference.
    pub reference: String,
    pub overall: BeatScore,
    /// Per record, sorted by sensitivity + predictivity (worst first).
    pub per_record: Vec<BeatScore>,
    /// The tool's beat labels on the paired beats against the `.atr` beat
    /// codes; absent without `.atr` files.
    #[serde(default)]
    pub labels: Option<LabelSection>,
}

/// Beat labels against a coded beat reference, on the paired beats only.
///
/// Reference classes after ANSI/AAMI EC57 (common practice): `N` normal and
/// bundle-branch-block beats (`N L R e j`), `S` supraventricular ectopic
/// (`A a J S`), `V` ventricular ectopic (`V E`), `F` fusion (`F`), `Q` paced
/// and unclassifiable (`/ f Q` and any other beat code).
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct LabelSection {
    /// Rows: reference class; columns: the tool's label (`N`, `V`, `Q`, other).
    pub confusion: Vec<LabelRow>,
    /// Ventricular ectopic beats: reference `V` labelled `V` / all reference `V`.
    pub v_sensitivity_pct: Option<f64>,
    /// Paired beats labelled `V` whose reference is `V`.
    pub v_ppv_pct: Option<f64>,
    /// Reference `N` beats labelled `N` / all reference `N`.
    pub n_sensitivity_pct: Option<f64>,
}

/// One reference class of [`LabelSection::confusion`].
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq, Eq)]
pub struct LabelRow {
    pub reference: String,
    pub n: u64,
    pub v: u64,
    pub q: u64,
    pub other: u64,
}

/// Beat counts and rates (`record` empty for the total).
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct BeatScore {
    pub record: String,
    pub tp: u64,
    #[serde(rename = "fn")]
    pub fn_: u64,
    pub fp: u64,
    pub sensitivity_pct: Option<f64>,
    pub ppv_pct: Option<f64>,
}

impl BeatScore {
    /// Rates from counts.
    pub fn from_counts(record: &str, c: &Counts) -> Self {
        BeatScore {
            record: record.to_string(),
            tp: c.tp,
            fn_: c.fn_,
            fp: c.fp,
            sensitivity_pct: c.sensitivity_pct(),
            ppv_pct: c.ppv_pct(),
        }
    }
}

/// Delineation accuracy against one kind of boundary reference.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DelineationSection {
    /// What served as reference, e.g. `q1c` or `LUDB lead files`.
    pub reference: String,
    /// What was scored, e.g. `tendline .mark` or `q2c (annotator 2)`.
    pub test: String,
    pub n_records: usize,
    pub ref_beats: usize,
    pub paired_beats: usize,
    pub fiducials: Vec<FiducialSummary>,
    /// Per record, sorted by T-end mean absolute error, worst first.
    pub per_record: Vec<RecordRow>,
    /// Per lead name (per-lead references only).
    pub per_lead_name: Vec<RecordRow>,
    /// Errors per fiducial (ms) for the histograms; not written to JSON.
    #[serde(skip)]
    pub errors: BTreeMap<Fiducial, Vec<f64>>,
    /// Error by confidence quartile of the scored marks
    /// (`crate::calibration`); empty when the run's confidences could not be
    /// read (and in reports written before it existed).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub calibration: Vec<CalibrationRow>,
    /// Each fiducial's error split into record, (record, channel) and
    /// beat-to-beat parts, beside the reference's own beat-to-beat spread
    /// (`crate::components`); absent in reports written before it existed.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub components: Vec<ComponentRow>,
}

/// One fiducial's detection rates and error statistics.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FiducialSummary {
    pub fiducial: Fiducial,
    pub tp: u64,
    #[serde(rename = "fn")]
    pub fn_: u64,
    pub fp: u64,
    pub sensitivity_pct: Option<f64>,
    /// `None` where the reference does not annotate the wave exhaustively.
    pub ppv_pct: Option<f64>,
    pub stats: ErrorStats,
    /// CSE tolerance on the SD (ms), where the CSE gives one.
    pub cse_tolerance_ms: Option<f64>,
    /// Pooled SD ≤ tolerance.
    pub cse_pass: Option<bool>,
    /// The same figures on the two halves of the records and their bootstrap
    /// intervals over records (`crate::stability`); absent in reports written
    /// before it existed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stability: Option<Stability>,
}

/// Per-record (or per-lead-name) row.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct RecordRow {
    /// Record name (or lead name).
    pub name: String,
    pub ref_beats: usize,
    pub paired_beats: usize,
    pub fiducials: BTreeMap<Fiducial, RowFiducial>,
}

/// One fiducial within a row.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct RowFiducial {
    pub n: usize,
    pub sensitivity_pct: Option<f64>,
    pub mean_ms: Option<f64>,
    pub sd_ms: Option<f64>,
    pub mae_ms: Option<f64>,
}

/// QT agreement.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct QtSection {
    /// Reference of the QT values.
    pub reference: String,
    /// Beat QT (T end − QRS on) of the global marks on paired beats (n = 0 without a
    /// global reference).
    pub beat: BlandAltman,
    /// Beat QT of each lead's marks against that lead's reference (per-lead references).
    pub beat_per_lead: Option<BlandAltman>,
    /// Window QT from superimposed leads vs the mean reference QT of the window.
    pub window_superimposed: Option<BlandAltman>,
    /// Window QT from the single chosen lead vs the same reference.
    pub window_single: Option<BlandAltman>,
    /// Windows with enough reference beats.
    pub windows_scored: usize,
    /// Per-lead references: window QT from superimposed leads vs the longest per-lead
    /// reference QT of the window (each lead's mean beat QT; the longest lead's).
    #[serde(default)]
    pub window_superimposed_lead_ref: Option<BlandAltman>,
    /// Per-lead references: the QTc-feeding window QT vs the same reference.
    #[serde(default)]
    pub window_single_lead_ref: Option<BlandAltman>,
    /// Window QRS duration (`windows.csv` `qrs_ms`) vs the mean reference QRS
    /// duration (QRS end − QRS onset) of the window's beats.
    #[serde(default)]
    pub window_qrs: Option<BlandAltman>,
    /// Window PR interval (`pr_ms`) vs the mean reference PR (QRS onset − P
    /// onset) of the window's beats.
    #[serde(default)]
    pub window_pr: Option<BlandAltman>,
    /// Window P-wave duration (`p_ms`) vs the mean reference P duration (P end −
    /// P onset) of the window's beats.
    #[serde(default)]
    pub window_p: Option<BlandAltman>,
    /// Window T peak to T end (`tpe_ms`) vs the mean reference T end − T peak of
    /// the window's beats.
    #[serde(default)]
    pub window_tpe: Option<BlandAltman>,
    /// Per-lead references: window T peak to T end (`tpe_ms`, measured on the
    /// lead `qt_lead`) vs the mean T end − T peak of that lead file's beats in
    /// the window.
    #[serde(default)]
    pub window_tpe_lead_ref: Option<BlandAltman>,
    /// Per-lead references: window QT dispersion (`qt_dispersion_ms`) vs the
    /// longest minus the shortest of the lead files' mean beat QTs in the window.
    #[serde(default)]
    pub window_qt_dispersion_lead_ref: Option<BlandAltman>,
    /// Window QT from superimposed leads against the same reference as
    /// `window_superimposed`, split by each over-read flag of `windows.csv`
    /// ([`OVERREAD_FLAGS`]): how much larger the errors of the flagged windows are.
    #[serde(default)]
    pub window_by_flag: Vec<FlagSplit>,
    /// How the QTc-feeding window QT changes from one window to the next, over
    /// every window of the run (no reference needed).
    #[serde(default)]
    pub window_stability: Option<WindowStability>,
}

/// Window flags that point the over-read at a window's QT.
pub const OVERREAD_FLAGS: [&str; 2] = ["qt_inconsistent", "unreadable_noise"];

/// Window QT agreement on the scored windows with and without one flag.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FlagSplit {
    pub flag: String,
    /// Scored windows (with enough reference beats and a tool value) that carry the flag.
    pub flagged_windows: usize,
    /// Scored windows without it.
    pub unflagged_windows: usize,
    pub flagged: Option<BlandAltman>,
    pub unflagged: Option<BlandAltman>,
}

/// Consistency of the window QT between neighbouring windows of a record.
///
/// For each pair of consecutive windows of a record that both have a QT and an
/// RR, the difference of their QT corrected by Fridericia's formula
/// (QT / RR^(1/3), RR in s). The QT of a heart changes little in ten seconds
/// (common practice: it follows the rate with a lag of a minute or two), so the
/// spread of these differences measures how often the tool's QT jumps, on all
/// the data and not only where a reference exists.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct WindowStability {
    /// Records with at least one such pair.
    pub records: usize,
    /// Windows with a QT and an RR.
    pub windows: usize,
    /// Pairs of consecutive windows.
    pub pairs: usize,
    /// SD of the differences (ms).
    pub delta_sd_ms: Option<f64>,
    /// Median absolute difference (ms).
    pub delta_median_abs_ms: Option<f64>,
    /// Pairs whose QTcF differ by more than 40 ms (percent).
    pub delta_above_40_pct: Option<f64>,
    /// Windows with a QT flagged `qt_inconsistent` (percent).
    pub inconsistent_pct: Option<f64>,
}

/// Second annotator vs first, and the tool on the same records.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct HumanSection {
    pub records: Vec<String>,
    pub annotator: DelineationSection,
    pub tool: DelineationSection,
    pub annotator_qt_beat: BlandAltman,
    pub tool_qt_beat: BlandAltman,
    /// Window QT: the mean annotated beat QT of each window of `windows.csv` by
    /// annotator 2 against the same by annotator 1, on the windows where both
    /// annotators mark at least `min_window_beats` beats. None without a run's
    /// `windows.csv` or without such windows.
    #[serde(default)]
    pub annotator_qt_window: Option<BlandAltman>,
    /// The tool's superimposed-leads window QT against annotator 1 on the same
    /// windows (those of them where the tool gives a value).
    #[serde(default)]
    pub tool_qt_window: Option<BlandAltman>,
}

/// A beat with a large error, with both sets of marks (samples) and a signal strip.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct WorstBeat {
    pub record: String,
    /// Lead drawn (and scored, for per-lead references).
    pub lead: String,
    pub chan: u8,
    /// `global` or `per_lead`.
    pub section: String,
    pub fiducial: Fiducial,
    pub error_ms: f64,
    pub fs: f64,
    pub reference: BeatMarks,
    pub test: BeatMarks,
    /// Signal strip around the beat (not in JSON).
    #[serde(skip)]
    pub strip: Option<Strip>,
}

/// A piece of one lead's signal.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Strip {
    /// Sample index of `samples[0]`.
    pub start: i64,
    pub samples: Vec<f64>,
    pub units: String,
}

fn row(name: &str, scores: &[&RecordScore], fiducials: &[Fiducial], chan: Option<u8>) -> RecordRow {
    let mut fid = BTreeMap::new();
    for &f in fiducials {
        let mut c = Counts::default();
        let mut e = Vec::new();
        for s in scores {
            if chan.is_none() {
                if let Some(x) = s.counts.get(&f) {
                    c.add(x);
                }
            }
            e.extend(
                s.errors
                    .get(&f)
                    .into_iter()
                    .flatten()
                    .filter(|x| chan.is_none_or(|ch| x.chan == ch))
                    .map(|x| x.error_ms),
            );
        }
        let st = ErrorStats::from_errors(&e);
        fid.insert(
            f,
            RowFiducial {
                n: st.n,
                sensitivity_pct: if chan.is_none() {
                    c.sensitivity_pct()
                } else {
                    None
                },
                mean_ms: st.mean_ms,
                sd_ms: st.sd_ms,
                mae_ms: st.mae_ms,
            },
        );
    }
    RecordRow {
        name: name.to_string(),
        ref_beats: scores.iter().map(|s| s.ref_beats).sum(),
        paired_beats: scores.iter().map(|s| s.paired_beats).sum(),
        fiducials: fid,
    }
}

/// Sort rows by T-end MAE (worst first), rows without T end last by name.
pub fn sort_rows_by_error(rows: &mut [RecordRow]) {
    let key = |r: &RecordRow| {
        r.fiducials
            .get(&Fiducial::TEnd)
            .and_then(|f| f.mae_ms)
            .or_else(|| r.fiducials.get(&Fiducial::QrsOn).and_then(|f| f.mae_ms))
    };
    rows.sort_by(|a, b| match (key(a), key(b)) {
        (Some(x), Some(y)) => y.total_cmp(&x),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => crate::inputs::natural_cmp(&a.name, &b.name),
    });
}

/// Build a section from per-record scores. `ppv_waves`: fiducials whose wave the
/// reference annotates exhaustively (positive predictivity reported).
/// `lead_names`: per-lead sections get a row per lead name (chan → name per record).
pub fn build_section(
    reference: &str,
    test: &str,
    scores: &[RecordScore],
    fiducials: &[Fiducial],
    ppv_fiducials: &[Fiducial],
    lead_names: Option<&BTreeMap<String, Vec<String>>>,
    boot: Resampling,
) -> DelineationSection {
    let mut sums = Vec::new();
    let mut errors = BTreeMap::new();
    for &f in fiducials {
        let mut c = Counts::default();
        let groups: Vec<Vec<f64>> = scores.iter().map(|s| s.error_values(f)).collect();
        for s in scores {
            if let Some(x) = s.counts.get(&f) {
                c.add(x);
            }
        }
        let refs: Vec<&[f64]> = groups.iter().map(|g| g.as_slice()).collect();
        let stats = ErrorStats::from_groups(&refs);
        let per_record: Vec<RecordErrors> = scores
            .iter()
            .zip(&groups)
            .map(|(s, g)| {
                let c = s.counts.get(&f).cloned().unwrap_or_default();
                RecordErrors {
                    errors: g,
                    tp: c.tp,
                    fn_: c.fn_,
                }
            })
            .collect();
        let stab = stability(&per_record, boot.replicates, boot.seed);
        let tol = f.cse_tolerance_ms();
        let pass = match (tol, stats.sd_ms) {
            (Some(t), Some(sd)) => Some(sd <= t),
            _ => None,
        };
        sums.push(FiducialSummary {
            fiducial: f,
            tp: c.tp,
            fn_: c.fn_,
            fp: c.fp,
            sensitivity_pct: c.sensitivity_pct(),
            ppv_pct: if ppv_fiducials.contains(&f) {
                c.ppv_pct()
            } else {
                None
            },
            stats,
            cse_tolerance_ms: tol,
            cse_pass: pass,
            stability: stab,
        });
        errors.insert(f, groups.concat());
    }
    let mut per_record: Vec<RecordRow> = scores
        .iter()
        .map(|s| row(&s.record, &[s], fiducials, None))
        .collect();
    sort_rows_by_error(&mut per_record);
    let mut per_lead_name = Vec::new();
    if let Some(names) = lead_names {
        // Group (record, chan) by lead name, case-insensitively.
        let mut by_name: BTreeMap<String, Vec<(usize, u8)>> = BTreeMap::new();
        for (k, s) in scores.iter().enumerate() {
            for &ch in s.beats.keys() {
                let n = names
                    .get(&s.record)
                    .and_then(|v| v.get(ch as usize))
                    .map(|n| n.to_lowercase())
                    .unwrap_or_else(|| format!("chan{ch}"));
                by_name.entry(n).or_default().push((k, ch));
            }
        }
        for (name, members) in by_name {
            // Per lead name: statistics over that lead's errors in every record.
            let mut r = RecordRow {
                name: name.clone(),
                ref_beats: 0,
                paired_beats: 0,
                fiducials: BTreeMap::new(),
            };
            for &f in fiducials {
                let e: Vec<f64> = members
                    .iter()
                    .flat_map(|&(k, ch)| {
                        scores[k]
                            .errors
                            .get(&f)
                            .into_iter()
                            .flatten()
                            .filter(move |x| x.chan == ch)
                            .map(|x| x.error_ms)
                    })
                    .collect();
                let st = ErrorStats::from_errors(&e);
                r.fiducials.insert(
                    f,
                    RowFiducial {
                        n: st.n,
                        sensitivity_pct: None,
                        mean_ms: st.mean_ms,
                        sd_ms: st.sd_ms,
                        mae_ms: st.mae_ms,
                    },
                );
            }
            for &(k, ch) in &members {
                if let Some((rb, _)) = scores[k].beats.get(&ch) {
                    r.ref_beats += rb.len();
                }
            }
            per_lead_name.push(r);
        }
        per_lead_name.sort_by_key(|a| lead_order(&a.name));
    }
    DelineationSection {
        reference: reference.to_string(),
        test: test.to_string(),
        n_records: scores.len(),
        ref_beats: scores.iter().map(|s| s.ref_beats).sum(),
        paired_beats: scores.iter().map(|s| s.paired_beats).sum(),
        fiducials: sums,
        per_record,
        per_lead_name,
        errors,
        calibration: Vec::new(),
        components: crate::components::rows(scores, fiducials),
    }
}

/// Standard 12-lead order for tables, unknown names after in natural order.
fn lead_order(name: &str) -> (usize, String) {
    const ORDER: [&str; 12] = [
        "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
    ];
    (
        ORDER.iter().position(|o| *o == name).unwrap_or(ORDER.len()),
        name.to_string(),
    )
}

impl DelineationSection {
    /// The summary of fiducial `f`, if scored.
    pub fn fiducial(&self, f: Fiducial) -> Option<&FiducialSummary> {
        self.fiducials.iter().find(|s| s.fiducial == f)
    }
}
