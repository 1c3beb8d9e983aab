//! Median beats, QT and QTc per window, per lead, per record and per subject.
//!
//! A record is cut into consecutive windows (default 10 s; the last, shorter window
//! is kept if it is at least `min_window_s` long). In each window the normal beats
//! with stable RR, a full median-beat span inside the record, no overlap with an
//! unreadable stretch and good correlation with the window template are aligned on
//! their QRS fiducial to a fraction of a sample ([`align`]), and a sample-wise median
//! beat is formed per lead. Each lead's median beat is delineated, giving per-lead
//! QT (QRS onset to T end), QRS duration and PR; the global QT follows the
//! longest-lead rule and, stored beside it, the superimposed-leads rule ([`global`]).
//! RR is the mean normal-to-normal interval of the window, heart rate 60 000 / RR.
//! All four corrections ([`qtc`]) are stored; the preferred one is classified
//! ([`mod@classify`]). [`subject`] pools windows per subject for individual correction.
//!
//! # Conventions
//! - Input leads are conditioned (filtered) signals at `fs` Hz, all the same length;
//!   detection samples are 0-based indices into them.
//! - Times in results are seconds from the record start (`start_s`, `end_s`);
//!   intervals are milliseconds (`_ms`); heart rate is bpm.
//! - Median beats hold `beat_before_ms + beat_after_ms` of signal around the QRS
//!   fiducial, which sits at index [`MedianBeats::fiducial`]; marks of a lead's
//!   median beat are sample indices into that median beat.
//! - Samples beyond the record edge are never used: a beat whose median-beat span
//!   leaves the record is not averaged.
//! - A value that cannot be measured is `None`, never a fabricated number.
//! - Beats labelled unclassified by detection are averaged with the normal beats
//!   (`use_unclassified_beats`), ventricular beats never; both pass the same RR and
//!   correlation tests.
//! - Paced records ([`measure_record_paced`]): stimulus ends are input samples one
//!   past each stimulus; a median beat whose beats are mostly paced holds its
//!   stimulus at the median stimulus-to-fiducial offset, and its QRS onsets are
//!   held after it by the delineation stage's rule. Median beats are delineated
//!   without the QRS-end noise cap (`median_beat_noise_caps`): their noise is what
//!   averaging left.

pub mod align;
pub mod classify;
pub mod config;
pub mod consistency;
pub mod global;
pub mod qtc;
pub mod study;
pub mod subject;

pub use classify::{classify, Classification, Limits, QtcFlag, CAUTION};
pub use config::{Formula, MeasureConfig, QtRule};

use align::AlignParams;
use tendline_delineate::{BeatMarks, Mark};
use tendline_detect::{BeatLabel, Detection};
use tendline_formats::Sex;

/// Invalid input to [`measure_record`].
#[derive(Debug, thiserror::Error)]
pub enum MeasureError {
    #[error("invalid measure configuration: {}", join(.0))]
    Config(Vec<tendline_params::ParamError>),
    #[error("sampling rate must be a positive finite number of Hz, got {0}")]
    SamplingRate(f64),
    #[error("no leads given")]
    NoLeads,
    #[error("lead {index} ({name}) has {len} samples but lead 0 has {expected}")]
    LeadLength {
        index: usize,
        name: String,
        len: usize,
        expected: usize,
    },
    #[error("{names} lead names for {leads} leads")]
    LeadNames { names: usize, leads: usize },
    #[error("beat at sample {sample} lies beyond the record ({len} samples)")]
    BeatOutOfRange { sample: usize, len: usize },
}

fn join(e: &[tendline_params::ParamError]) -> String {
    e.iter()
        .map(|e| e.to_string())
        .collect::<Vec<_>>()
        .join("; ")
}

/// Conditions noted on a window.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct WindowFlags {
    /// Irregular rhythm (RR variability or many ectopic beats): QT from all accepted
    /// beats without RR-stability filter, RR from the intervals preceding them.
    pub irregular: bool,
    /// Global QRS ≥ `limits.wide_qrs_ms`: QT is lengthened by conduction, see JT.
    pub wide_qrs: bool,
    /// No sex given: both limits applied.
    pub unknown_sex: bool,
    /// Preferred QTc above `limits.high_risk_ms`.
    pub high_risk: bool,
    /// The window overlaps a stretch detection marked unreadable.
    pub unreadable: bool,
    /// Fewer accepted beats than needed for a median beat.
    pub too_few_beats: bool,
    /// At least one usable lead was left out of the QT because its beat-to-beat noise
    /// is large against its T wave (`max_noise_t_ratio`).
    pub noisy: bool,
    /// Pacemaker stimuli lie in the window (set by the caller, which finds them
    /// before filtering): the QT holds paced QRS complexes, wide by conduction
    /// (common practice: read the JT interval, and do not judge the QTc by the
    /// limits for conducted beats).
    pub paced: bool,
    /// A lead's QT departs from the same lead's in the neighbouring windows
    /// (`lead_consistency_ms`): the window's QT deserves a look at over-read.
    pub qt_inconsistent: bool,
}

/// Measurements of one lead's median beat.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LeadMeasure {
    /// The lead was measured (detection quality above 0 and at least `min_lead_quality`).
    pub usable: bool,
    /// QRS onset to T end (ms).
    pub qt_ms: Option<f64>,
    /// QRS onset to QRS end (ms).
    pub qrs_ms: Option<f64>,
    /// P onset to QRS onset (ms).
    pub pr_ms: Option<f64>,
    /// T-peak amplitude above the level at QRS onset (mV, negative for inverted T).
    pub t_amplitude_mv: Option<f64>,
    /// Broadband beat-to-beat noise (mV, see `residual_noise`). Compared with the T amplitude to
    /// decide whether the lead's T end can be trusted.
    pub noise_mv: Option<f64>,
    /// Noise left in the median beat over the repolarisation (mV, see
    /// `median_t_noise`): slow beat-to-beat noise that the broadband measure
    /// misses (electrode motion overlaps the T wave's own band).
    pub t_noise_mv: Option<f64>,
    /// The QT passed the plausibility, T-amplitude and outlier checks of the global rules.
    pub qt_accepted: bool,
    /// The lead's rate-corrected QT departs from its own in the neighbouring windows by
    /// more than `lead_consistency_ms` ([`check_lead_consistency`]).
    pub inconsistent: bool,
    /// Marks on the median beat, sample indices into the median beat.
    pub marks: BeatMarks,
}

/// Median beats of one window.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MedianBeats {
    /// Index of the QRS fiducial in every median beat.
    pub fiducial: usize,
    /// Samples of every lead's median beat.
    pub len: usize,
    /// The leads' median beats one after the other, `values[lead * len + k]`,
    /// signal units of the input (mV): one array, which the results take
    /// over as it is (a 24-hour 12-lead record has 8640 windows of them,
    /// 540 MB at 1000 Hz). Empty when the window has too few beats.
    pub values: Vec<f32>,
}

impl MedianBeats {
    /// Number of leads with a median beat.
    pub fn n_leads(&self) -> usize {
        self.values.len().checked_div(self.len).unwrap_or(0)
    }

    /// Lead `l`'s median beat.
    pub fn lead(&self, l: usize) -> &[f32] {
        &self.values[l * self.len..(l + 1) * self.len]
    }
}

/// Everything measured in one window.
#[derive(Debug, Clone, PartialEq)]
pub struct WindowMeasure {
    pub start_s: f64,
    pub end_s: f64,
    /// Beats in the median beat.
    pub n_beats: usize,
    /// Detected fiducial samples of those beats.
    pub beats: Vec<usize>,
    /// Their aligned (fractional) fiducial positions, samples.
    pub aligned: Vec<f64>,
    /// Mean normal-to-normal RR (irregular windows: mean RR preceding the averaged beats), ms.
    pub rr_ms: Option<f64>,
    pub hr_bpm: Option<f64>,
    /// QT by the configured rule (ms).
    pub qt_ms: Option<f64>,
    /// Lead index behind `qt_ms` (longest-lead rule only).
    pub qt_lead: Option<usize>,
    /// Name of that lead.
    pub qt_lead_name: Option<String>,
    /// Longest-lead QT and its lead, whatever the configured rule.
    pub qt_longest_ms: Option<f64>,
    pub qt_longest_lead: Option<usize>,
    /// Superimposed-leads QT (earliest QRS onset to latest T end).
    pub qt_superimposed_ms: Option<f64>,
    /// Global QRS: earliest onset to latest end across leads.
    pub qrs_ms: Option<f64>,
    /// Global PR: earliest P onset to the global QRS onset.
    pub pr_ms: Option<f64>,
    /// QT − QRS (ms), reported for wide QRS.
    pub jt_ms: Option<f64>,
    /// P-wave duration: earliest P onset to latest P end across usable leads (ms).
    pub p_ms: Option<f64>,
    /// T peak to T end on the lead of the longest-lead QT (ms).
    pub tpe_ms: Option<f64>,
    /// Longest minus shortest valid single-lead QT (ms), with at least
    /// `qt_dispersion_min_leads` valid leads.
    pub qt_dispersion_ms: Option<f64>,
    /// Leads that gave a valid single-lead QT.
    pub qt_valid_leads: usize,
    pub qtc_bazett_ms: Option<f64>,
    pub qtc_fridericia_ms: Option<f64>,
    pub qtc_framingham_ms: Option<f64>,
    pub qtc_hodges_ms: Option<f64>,
    /// The preferred formula's QTc.
    pub qtc_ms: Option<f64>,
    pub qtc_flag: QtcFlag,
    pub classification: Classification,
    pub flags: WindowFlags,
    /// One entry per input lead.
    pub leads: Vec<LeadMeasure>,
    pub median: MedianBeats,
}

impl WindowMeasure {
    /// The same window in a record that starts `offset` samples earlier: its
    /// times and beat positions moved by `offset` (for chunks of a record).
    pub fn shift(&mut self, offset: usize, fs: f64) {
        let dt = offset as f64 / fs;
        self.start_s += dt;
        self.end_s += dt;
        self.beats.iter_mut().for_each(|b| *b += offset);
        self.aligned.iter_mut().for_each(|a| *a += offset as f64);
    }
}

/// Record-level summary over the measured windows.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordSummary {
    pub n_windows: usize,
    /// Windows with a QTc.
    pub n_measured: usize,
    pub n_irregular: usize,
    /// Windows flagged `qt_inconsistent` (a lead's QT jumps against its neighbours).
    pub n_inconsistent: usize,
    /// Medians over windows.
    pub rr_ms: Option<f64>,
    pub hr_bpm: Option<f64>,
    pub qt_ms: Option<f64>,
    pub qt_superimposed_ms: Option<f64>,
    pub qrs_ms: Option<f64>,
    pub pr_ms: Option<f64>,
    pub jt_ms: Option<f64>,
    pub p_ms: Option<f64>,
    pub tpe_ms: Option<f64>,
    pub qt_dispersion_ms: Option<f64>,
    pub qtc_bazett_ms: Option<f64>,
    pub qtc_fridericia_ms: Option<f64>,
    pub qtc_framingham_ms: Option<f64>,
    pub qtc_hodges_ms: Option<f64>,
    pub qtc_ms: Option<f64>,
    /// Means over windows.
    pub mean_qt_ms: Option<f64>,
    pub mean_rr_ms: Option<f64>,
    pub mean_qtc_ms: Option<f64>,
    pub qt_rule: QtRule,
    pub formula: Formula,
    /// Classification of the median preferred QTc.
    pub qtc_flag: QtcFlag,
    pub classification: Classification,
    /// Any window flagged.
    pub any_wide_qrs: bool,
    pub any_high_risk: bool,
    pub unknown_sex: bool,
    pub caution: &'static str,
}

/// Windows and summary of one record.
#[derive(Debug, Clone, PartialEq)]
pub struct RecordMeasures {
    pub windows: Vec<WindowMeasure>,
    pub summary: RecordSummary,
}

/// Measure a record with the delineation stage's `delineate_lead`.
#[allow(clippy::too_many_arguments)]
pub fn measure_record(
    leads: &[&[f64]],
    lead_names: &[String],
    fs: f64,
    detection: &Detection,
    sex: Option<Sex>,
    cfg: &MeasureConfig,
    dcfg: &tendline_delineate::DelineateConfig,
) -> Result<RecordMeasures, MeasureError> {
    measure_record_paced(leads, lead_names, fs, detection, &[], sex, cfg, dcfg)
}

/// [`measure_record`] for a record with pacing stimuli: `stimulus_ends`
/// (input samples one past each stimulus, sorted ascending, as the
/// delineation stage's `delineate_paced` takes them). A median beat built
/// from paced beats holds their stimulus at the median of the beats'
/// stimulus-to-fiducial offsets, and its QRS onsets are held after it by the
/// delineation stage's rule (`tendline_delineate::onsets_after_stimuli`,
/// `qrs_stimulus_latency_ms`).
#[allow(clippy::too_many_arguments)]
pub fn measure_record_paced(
    leads: &[&[f64]],
    lead_names: &[String],
    fs: f64,
    detection: &Detection,
    stimulus_ends: &[usize],
    sex: Option<Sex>,
    cfg: &MeasureConfig,
    dcfg: &tendline_delineate::DelineateConfig,
) -> Result<RecordMeasures, MeasureError> {
    let median_cfg;
    let dcfg = if dcfg.median_beat_noise_caps {
        dcfg
    } else {
        // See `median_beat_noise_caps`.
        median_cfg = tendline_delineate::DelineateConfig {
            qrs_end_noise_cap_k: 0.0,
            ..dcfg.clone()
        };
        &median_cfg
    };
    measure_record_inner(
        leads,
        lead_names,
        fs,
        detection,
        sex,
        cfg,
        |x, fs, qrs, i| tendline_delineate::delineate_lead_beat(x, fs, qrs, i, dcfg),
        Pacing {
            stimulus_ends,
            rule: dcfg,
        },
    )
}

/// Pacing stimuli of a record and the delineation settings of the rule that
/// holds a median beat's QRS onset after its stimulus
/// (`tendline_delineate::onsets_after_stimuli`).
struct Pacing<'a> {
    stimulus_ends: &'a [usize],
    rule: &'a tendline_delineate::DelineateConfig,
}

/// [`measure_record`] with any single-lead delineator `delineate(x, fs, qrs, i) -> marks of
/// beat i` (only the marks of one beat of each tiled median beat are read).
#[allow(clippy::too_many_arguments)]
pub fn measure_record_with<D>(
    leads: &[&[f64]],
    lead_names: &[String],
    fs: f64,
    detection: &Detection,
    sex: Option<Sex>,
    cfg: &MeasureConfig,
    delineate: D,
) -> Result<RecordMeasures, MeasureError>
where
    D: FnMut(&[f64], f64, &[usize], usize) -> BeatMarks,
{
    // No stimuli: the rule is never applied, its settings are the defaults.
    let rule = tendline_delineate::DelineateConfig::default();
    let pacing = Pacing {
        stimulus_ends: &[],
        rule: &rule,
    };
    measure_record_inner(
        leads, lead_names, fs, detection, sex, cfg, delineate, pacing,
    )
}

#[allow(clippy::too_many_arguments)]
fn measure_record_inner<D>(
    leads: &[&[f64]],
    lead_names: &[String],
    fs: f64,
    detection: &Detection,
    sex: Option<Sex>,
    cfg: &MeasureConfig,
    mut delineate: D,
    pacing: Pacing,
) -> Result<RecordMeasures, MeasureError>
where
    D: FnMut(&[f64], f64, &[usize], usize) -> BeatMarks,
{
    cfg.validate().map_err(MeasureError::Config)?;
    if !(fs.is_finite() && fs > 0.0) {
        return Err(MeasureError::SamplingRate(fs));
    }
    let n = leads.first().ok_or(MeasureError::NoLeads)?.len();
    if lead_names.len() != leads.len() {
        return Err(MeasureError::LeadNames {
            names: lead_names.len(),
            leads: leads.len(),
        });
    }
    for (i, l) in leads.iter().enumerate() {
        if l.len() != n {
            return Err(MeasureError::LeadLength {
                index: i,
                name: lead_names[i].clone(),
                len: l.len(),
                expected: n,
            });
        }
    }
    let mut beats = detection.beats.clone();
    beats.sort_by_key(|b| b.sample);
    if let Some(b) = beats.iter().find(|b| b.sample >= n) {
        return Err(MeasureError::BeatOutOfRange {
            sample: b.sample,
            len: n,
        });
    }
    let quality: Vec<f64> = if detection.lead_quality.len() == leads.len() {
        detection.lead_quality.clone()
    } else {
        vec![1.0; leads.len()]
    };
    let usable: Vec<bool> = quality
        .iter()
        .map(|&q| q > 0.0 && q >= cfg.min_lead_quality)
        .collect();

    let ctx = Ctx {
        leads,
        lead_names,
        fs,
        detection,
        beats: &beats,
        sex,
        cfg,
        usable: &usable,
        n,
        pacing,
    };
    let mut windows = Vec::new();
    let w = (cfg.window_s * fs).round() as usize;
    let min_w = (cfg.min_window_s * fs).round() as usize;
    let mut start = 0usize;
    while start < n {
        let end = (start + w).min(n);
        if end - start < min_w && !(start == 0 && end == n && n > 0) {
            break;
        }
        windows.push(measure_window(&ctx, start, end, &mut delineate));
        start = end;
    }
    check_lead_consistency(&mut windows, cfg);
    let summary = summarize(&windows, sex, cfg);
    Ok(RecordMeasures { windows, summary })
}

struct Ctx<'a> {
    leads: &'a [&'a [f64]],
    lead_names: &'a [String],
    fs: f64,
    detection: &'a Detection,
    beats: &'a [tendline_detect::Beat],
    sex: Option<Sex>,
    cfg: &'a MeasureConfig,
    usable: &'a [bool],
    n: usize,
    pacing: Pacing<'a>,
}

/// Whether every value is finite. The exponent test without early exit
/// (an OR over all values, which the compiler vectorises) instead of a
/// short-circuiting `all(is_finite)` that walks one value at a time: a value
/// is finite exactly when its exponent bits are not all ones (IEEE 754).
fn all_finite(x: &[f64]) -> bool {
    const EXP: u64 = 0x7ff0_0000_0000_0000;
    !x.iter()
        .fold(false, |any, v| any | (v.to_bits() & EXP == EXP))
}

fn ms_to_samples(ms: f64, fs: f64) -> usize {
    (ms * fs / 1000.0).round() as usize
}

fn pearson(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len()) as f64;
    if n < 2.0 {
        return f64::NAN;
    }
    let ma = a.iter().sum::<f64>() / n;
    let mb = b.iter().sum::<f64>() / n;
    let (mut sab, mut saa, mut sbb) = (0.0, 0.0, 0.0);
    for (x, y) in a.iter().zip(b) {
        sab += (x - ma) * (y - mb);
        saa += (x - ma) * (x - ma);
        sbb += (y - mb) * (y - mb);
    }
    if saa <= 0.0 || sbb <= 0.0 {
        return f64::NAN;
    }
    sab / (saa * sbb).sqrt()
}

/// Samples `c0..=c1` of each of `leads`, each with its mean removed, end to end.
fn concat_centred<'a>(
    leads: &[usize],
    c0: usize,
    c1: usize,
    lead: impl Fn(usize) -> &'a [f64],
) -> Vec<f64> {
    let mut out = Vec::new();
    concat_centred_into(leads, c0, c1, lead, &mut out);
    out
}

/// [`concat_centred`] into a reused buffer (one lead slice at a time: a
/// flattened iterator filled the vector value by value).
fn concat_centred_into<'a>(
    leads: &[usize],
    c0: usize,
    c1: usize,
    lead: impl Fn(usize) -> &'a [f64],
    out: &mut Vec<f64>,
) {
    out.clear();
    out.reserve(leads.len() * (c1 + 1).saturating_sub(c0));
    for &l in leads {
        let s = &lead(l)[c0..=c1];
        let m = s.iter().sum::<f64>() / s.len() as f64;
        out.extend(s.iter().map(|v| v - m));
    }
}

fn measure_window<D>(ctx: &Ctx, ws: usize, we: usize, delineate: &mut D) -> WindowMeasure
where
    D: FnMut(&[f64], f64, &[usize], usize) -> BeatMarks,
{
    let cfg = ctx.cfg;
    let fs = ctx.fs;
    let beats = ctx.beats;
    let before = ms_to_samples(cfg.beat_before_ms, fs);
    let after = ms_to_samples(cfg.beat_after_ms, fs);
    let lo = beats.partition_point(|b| b.sample < ws);
    let hi = beats.partition_point(|b| b.sample < we);
    let idx: Vec<usize> = (lo..hi).collect();

    // Intervals ending at each beat of the window (the first may start in the previous window).
    let prev_rr = |i: usize| (i > 0).then(|| (beats[i].sample - beats[i - 1].sample) as f64);
    let next_rr =
        |i: usize| (i + 1 < beats.len()).then(|| (beats[i + 1].sample - beats[i].sample) as f64);
    // Unclassified beats count as normal when configured: the correlation test below
    // still removes any whose morphology differs from the window's dominant beat.
    let is_n = |i: usize| match beats[i].label {
        BeatLabel::Normal => true,
        BeatLabel::Unclassified => cfg.use_unclassified_beats,
        BeatLabel::Ventricular => false,
    };
    let nn: Vec<f64> = idx
        .iter()
        .filter(|&&i| i > 0 && is_n(i) && is_n(i - 1))
        .filter_map(|&i| prev_rr(i))
        .collect();
    let all_rr: Vec<f64> = idx.iter().filter_map(|&i| prev_rr(i)).collect();
    let n_ectopic = idx
        .iter()
        .filter(|&&i| beats[i].label == BeatLabel::Ventricular)
        .count();
    let cv = if nn.len() >= 3 {
        let m = nn.iter().sum::<f64>() / nn.len() as f64;
        (nn.iter().map(|r| (r - m).powi(2)).sum::<f64>() / (nn.len() - 1) as f64).sqrt() / m
    } else {
        0.0
    };
    let irregular = !idx.is_empty()
        && (cv > cfg.irregular_rr_cv
            || n_ectopic as f64 / idx.len() as f64 > cfg.irregular_ectopic_fraction);
    let med_nn = {
        let mut v = if nn.is_empty() {
            all_rr.clone()
        } else {
            nn.clone()
        };
        align::median(&mut v)
    };

    let unreadable_overlap = |a: usize, b: usize| {
        ctx.detection
            .unreadable
            .iter()
            .any(|s| s.start < b && s.end > a)
    };
    let stable = |r: Option<f64>| match r {
        Some(r) => med_nn.is_finite() && (r - med_nn).abs() <= cfg.rr_stability * med_nn,
        None => false,
    };
    let candidates: Vec<usize> = idx
        .iter()
        .copied()
        .filter(|&i| is_n(i))
        .filter(|&i| beats[i].sample >= before && beats[i].sample + after < ctx.n)
        .filter(|&i| !unreadable_overlap(beats[i].sample - before, beats[i].sample + after + 1))
        // Gaps in the recording (non-finite samples) would poison the median beat.
        .filter(|&i| {
            let span = beats[i].sample - before..=beats[i].sample + after;
            ctx.leads.iter().all(|x| all_finite(&x[span.clone()]))
        })
        .filter(|&i| {
            irregular || (stable(prev_rr(i)) && (next_rr(i).is_none() || stable(next_rr(i))))
        })
        .collect();

    let usable_leads: Vec<usize> = (0..ctx.leads.len()).filter(|&l| ctx.usable[l]).collect();
    let weights: Vec<f64> = ctx
        .usable
        .iter()
        .map(|&u| if u { 1.0 } else { 0.0 })
        .collect();
    let fids: Vec<usize> = candidates.iter().map(|&i| beats[i].sample).collect();
    let ap = AlignParams {
        half_width: ms_to_samples(cfg.align_half_width_ms, fs).max(1),
        max_lag: ms_to_samples(cfg.align_max_lag_ms, fs),
        passes: cfg.align_passes,
        interp: cfg.interpolation,
    };
    let pos = if usable_leads.is_empty() {
        fids.iter().map(|&f| f as f64).collect()
    } else {
        align::align(ctx.leads, &weights, &fids, &ap)
    };
    // Aligned positions may move a beat by up to max_lag: keep its span inside the record.
    let keep_pos: Vec<usize> = (0..pos.len())
        .filter(|&k| pos[k] - before as f64 >= 0.0 && pos[k] + after as f64 <= (ctx.n - 1) as f64)
        .collect();
    let segs: Vec<Vec<Vec<f64>>> = keep_pos
        .iter()
        .map(|&k| {
            // The leads of a beat share its Lanczos weights.
            let mut cache = align::LanczosCache::default();
            ctx.leads
                .iter()
                .map(|x| {
                    let mut v = Vec::with_capacity(before + after + 1);
                    align::extract_with(
                        x,
                        pos[k],
                        before,
                        after,
                        cfg.interpolation,
                        &mut v,
                        &mut cache,
                    );
                    v
                })
                .collect()
        })
        .collect();

    // Correlation with the template over [−150 ms, into the T wave] on usable leads.
    let c0 = before.saturating_sub(ms_to_samples(150.0, fs));
    let c1_ms = if med_nn.is_finite() {
        (0.75 * med_nn / fs * 1000.0).min(cfg.beat_after_ms)
    } else {
        cfg.beat_after_ms
    };
    let c1 = before + ms_to_samples(c1_ms, fs).min(after);
    // The template (median of every candidate) of each usable lead; it is
    // also the final median beat of a lead when every candidate is accepted.
    let mut templ: Vec<Option<Vec<f64>>> = vec![None; ctx.leads.len()];
    let accepted: Vec<usize> = if segs.is_empty() || usable_leads.is_empty() {
        Vec::new()
    } else {
        for &l in &usable_leads {
            templ[l] = Some(align::median_beat(
                &segs.iter().map(|b| b[l].as_slice()).collect::<Vec<_>>(),
            ));
        }
        let tc = concat_centred(&usable_leads, c0, c1, |l| {
            templ[l].as_deref().unwrap_or_default()
        });
        let mut beat = Vec::new();
        (0..segs.len())
            .filter(|&k| {
                concat_centred_into(&usable_leads, c0, c1, |l| segs[k][l].as_slice(), &mut beat);
                pearson(&beat, &tc) >= cfg.min_correlation
            })
            .collect()
    };
    // `accepted` keeps the candidates' order, so accepting all of them gives
    // the template's input exactly.
    let all_accepted = accepted.len() == segs.len();
    let need = if irregular {
        cfg.irregular_min_beats
    } else {
        cfg.min_beats_per_window
    };
    let used_beats: Vec<usize> = accepted.iter().map(|&k| candidates[keep_pos[k]]).collect();
    let used_pos: Vec<f64> = accepted.iter().map(|&k| pos[keep_pos[k]]).collect();

    let stimulus_in_median = median_stimulus_end(ctx.pacing.stimulus_ends, &used_pos, before);

    let rr_samples = if irregular {
        let v: Vec<f64> = used_beats.iter().filter_map(|&i| prev_rr(i)).collect();
        (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
    } else {
        (!nn.is_empty()).then(|| nn.iter().sum::<f64>() / nn.len() as f64)
    };
    let rr_ms = rr_samples.map(|r| r / fs * 1000.0);
    let hr_bpm = rr_ms.map(qtc::hr_from_rr_ms);

    let mut flags = WindowFlags {
        irregular,
        unknown_sex: ctx.sex.is_none(),
        unreadable: unreadable_overlap(ws, we),
        ..WindowFlags::default()
    };
    let mut leads_out: Vec<LeadMeasure> = vec![LeadMeasure::default(); ctx.leads.len()];
    let mut median = MedianBeats {
        fiducial: before,
        ..MedianBeats::default()
    };
    let mut g = global::Global::default();
    if accepted.len() < need.max(1) {
        flags.too_few_beats = true;
    } else {
        let tile_rr = if med_nn.is_finite() {
            med_nn.round() as usize
        } else {
            before + after + 1
        };
        for (l, lm) in leads_out.iter_mut().enumerate() {
            let m = match templ[l].take() {
                Some(t) if all_accepted => t,
                _ => align::median_beat(
                    &accepted
                        .iter()
                        .map(|&k| segs[k][l].as_slice())
                        .collect::<Vec<_>>(),
                ),
            };
            if l == 0 {
                median.len = m.len();
                median.values.reserve_exact(m.len() * ctx.leads.len());
            }
            assert_eq!(
                m.len(),
                median.len,
                "median beats of one window differ in length"
            );
            median.values.extend(m.iter().map(|&v| v as f32));
            lm.usable = ctx.usable[l];
            if !lm.usable {
                continue;
            }
            lm.marks = delineate_median(&m, before, tile_rr, fs, delineate);
            if let Some(e) = stimulus_in_median {
                tendline_delineate::onsets_after_stimuli(
                    std::slice::from_mut(&mut lm.marks),
                    &[e],
                    fs,
                    ctx.pacing.rule,
                );
            }
            let d = |a: &Option<Mark>, b: &Option<Mark>| {
                a.zip(*b)
                    .map(|(a, b)| (b.sample as f64 - a.sample as f64) / fs * 1000.0)
            };
            lm.qt_ms = d(&lm.marks.qrs_on, &lm.marks.t_end);
            lm.t_amplitude_mv = t_amplitude(&m, &lm.marks);
            // The beat's own span (as for the correlation test): beyond it
            // lie the neighbouring beats' complexes, which RR changes do not
            // align.
            let span = if cfg.noise_outside_qrs {
                (c0, c1)
            } else {
                (0, m.len())
            };
            let skip = if cfg.noise_outside_qrs {
                let margin = ms_to_samples(cfg.noise_qrs_margin_ms, fs);
                lm.marks
                    .qrs_on
                    .zip(lm.marks.qrs_end)
                    .map(|(a, b)| (a.sample.saturating_sub(margin), b.sample + margin))
            } else {
                None
            };
            lm.noise_mv = residual_noise(
                &m,
                accepted.iter().map(|&k| segs[k][l].as_slice()),
                span,
                skip,
            );
            lm.t_noise_mv = median_t_noise(
                &m,
                accepted.iter().map(|&k| segs[k][l].as_slice()),
                before + ms_to_samples(cfg.t_noise_from_ms, fs),
                c1,
                ms_to_samples(cfg.t_noise_smooth_ms, fs).max(1),
            );
            lm.qrs_ms = d(&lm.marks.qrs_on, &lm.marks.qrs_end);
            lm.pr_ms = d(&lm.marks.p_on, &lm.marks.qrs_on);
        }
        flags.noisy = leads_out
            .iter()
            .any(|lm| lm.usable && global::too_noisy(lm, cfg));
        g = global::combine(&leads_out, fs, cfg);
        for (l, lm) in leads_out.iter_mut().enumerate() {
            lm.qt_accepted = g.accepted_leads.contains(&l);
        }
    }

    let (qt_ms, qt_lead) = match cfg.qt_rule {
        QtRule::LongestLead => (g.longest_ms, g.longest_lead),
        QtRule::Superimposed => (g.superimposed_ms, None),
    };
    let jt_ms = qt_ms.zip(g.qrs_ms).map(|(q, r)| q - r);
    let all = qt_ms.zip(rr_ms).map(|(q, r)| qtc::all(q, r));
    let fin = |v: f64| v.is_finite().then_some(v);
    let qtc_bazett_ms = all.and_then(|a| fin(a.bazett_ms));
    let qtc_fridericia_ms = all.and_then(|a| fin(a.fridericia_ms));
    let qtc_framingham_ms = all.and_then(|a| fin(a.framingham_ms));
    let qtc_hodges_ms = all.and_then(|a| fin(a.hodges_ms));
    let qtc_ms = match cfg.preferred_formula {
        Formula::Bazett => qtc_bazett_ms,
        Formula::Fridericia => qtc_fridericia_ms,
        Formula::Framingham => qtc_framingham_ms,
        Formula::Hodges => qtc_hodges_ms,
    };
    let classification = classify::classify(qtc_ms, ctx.sex, &cfg.limits);
    flags.high_risk = classification.high_risk;
    flags.wide_qrs = g.qrs_ms.is_some_and(|q| q >= cfg.limits.wide_qrs_ms);

    WindowMeasure {
        start_s: ws as f64 / fs,
        end_s: we as f64 / fs,
        n_beats: used_beats.len(),
        beats: used_beats.iter().map(|&i| beats[i].sample).collect(),
        aligned: used_pos,
        rr_ms,
        hr_bpm,
        qt_ms,
        qt_lead,
        qt_lead_name: qt_lead.map(|l| ctx.lead_names[l].clone()),
        qt_longest_ms: g.longest_ms,
        qt_longest_lead: g.longest_lead,
        qt_superimposed_ms: g.superimposed_ms,
        qrs_ms: g.qrs_ms,
        pr_ms: g.pr_ms,
        jt_ms,
        p_ms: g.p_ms,
        tpe_ms: g.tpe_ms,
        qt_dispersion_ms: g.qt_dispersion_ms,
        qt_valid_leads: g.qt_valid_leads,
        qtc_bazett_ms,
        qtc_fridericia_ms,
        qtc_framingham_ms,
        qtc_hodges_ms,
        qtc_ms,
        qtc_flag: classification.flag,
        classification,
        flags,
        leads: leads_out,
        median,
    }
}

/// Where the pacing stimulus of a median beat ends, in median-beat samples
/// (the fiducial at `before`): for each beat of the median (aligned fiducial
/// `pos`, input samples), the latest stimulus end at or before its fiducial
/// and at most `before` samples before it. When more than half of the beats
/// have one, the median of their fiducial-minus-stimulus-end offsets, rounded,
/// counted back from `before`; else None (a median of mostly unpaced beats
/// has no stimulus to hold its onset after).
fn median_stimulus_end(stimulus_ends: &[usize], pos: &[f64], before: usize) -> Option<usize> {
    if stimulus_ends.is_empty() || pos.is_empty() {
        return None;
    }
    let mut offsets: Vec<f64> = pos
        .iter()
        .filter_map(|&p| {
            let k = stimulus_ends.partition_point(|&e| e as f64 <= p);
            let e = *stimulus_ends.get(k.checked_sub(1)?)? as f64;
            (p - e <= before as f64).then_some(p - e)
        })
        .collect();
    if 2 * offsets.len() <= pos.len() {
        return None;
    }
    let off = align::median(&mut offsets);
    Some((before as f64 - off).round().max(0.0) as usize)
}

/// Flag each window with a lead whose rate-corrected QT departs from the same
/// lead's in the neighbouring windows (`lead_consistency_ms`, module
/// [`consistency`]), and mark those leads. The values are left as they are:
/// the flag points the over-read at the window. Returns how many windows were
/// flagged.
pub fn check_lead_consistency(windows: &mut [WindowMeasure], cfg: &MeasureConfig) -> usize {
    let checks = consistency::inconsistent_leads(windows, cfg);
    for c in &checks {
        let win = &mut windows[c.window];
        win.flags.qt_inconsistent = true;
        for &l in &c.inconsistent {
            win.leads[l].inconsistent = true;
        }
    }
    checks.len()
}

/// Drop the P wave of windows whose beats mostly have none in the beat-by-beat
/// delineation (`window_p_min_beat_fraction`): the PR interval, the P duration
/// and the P marks of every lead's median beat. `beat_samples` are the QRS
/// fiducials the delineation ran on, in increasing order, and `p_present`
/// says for each whether its global marks hold a P onset; a window beat not
/// among them counts as without P. Returns how many windows were cleared.
pub fn drop_absent_p(
    windows: &mut [WindowMeasure],
    beat_samples: &[usize],
    p_present: &[bool],
    cfg: &MeasureConfig,
) -> usize {
    let frac = cfg.window_p_min_beat_fraction;
    if frac <= 0.0 {
        return 0;
    }
    let mut dropped = 0;
    for w in windows.iter_mut() {
        if w.beats.is_empty() {
            continue;
        }
        let with_p = w
            .beats
            .iter()
            .filter(|&&b| {
                beat_samples
                    .binary_search(&b)
                    .is_ok_and(|i| p_present.get(i).copied().unwrap_or(false))
            })
            .count();
        if (with_p as f64) >= frac * w.beats.len() as f64 {
            continue;
        }
        w.pr_ms = None;
        w.p_ms = None;
        for lm in &mut w.leads {
            lm.pr_ms = None;
            lm.marks.p_on = None;
            lm.marks.p_peak = None;
            lm.marks.p_end = None;
        }
        dropped += 1;
    }
    dropped
}

/// Delineate one median beat (fiducial at `fid`) placed in a longer buffer: copies of
/// the beat one RR (`rr` samples) before and after it, then one second of the edge
/// values, so the wavelet sees realistic context and the delineator sees real RR.
/// Returns the middle beat's marks as indices into the median beat (marks that fall
/// outside the median beat are dropped).
fn delineate_median<D>(m: &[f64], fid: usize, rr: usize, fs: f64, delineate: &mut D) -> BeatMarks
where
    D: FnMut(&[f64], f64, &[usize], usize) -> BeatMarks,
{
    let l = m.len();
    let after = l - 1 - fid;
    let rr = rr.max(1);
    let pad = fs.round() as usize;
    let c = pad + fid + rr;
    let total = c + rr + after + 1 + pad;
    let mut buf: Vec<Option<f64>> = vec![None; total];
    // Neighbour copies first, the measured beat last so it wins where spans overlap.
    for center in [c - rr, c + rr, c] {
        for (k, &v) in m.iter().enumerate() {
            let t = center + k - fid;
            if center != c && t + fid >= c && t <= c + after {
                continue;
            }
            buf[t] = Some(v);
        }
    }
    let filled = fill_gaps(&buf);
    let bm = delineate(&filled, fs, &[c - rr, c, c + rr], 1);
    let origin = c - fid;
    let shift = |mk: Option<Mark>| {
        mk.and_then(|mk| {
            (mk.sample >= origin && mk.sample - origin < l).then(|| Mark {
                sample: mk.sample - origin,
                confidence: mk.confidence,
            })
        })
    };
    BeatMarks {
        p_on: shift(bm.p_on),
        p_peak: shift(bm.p_peak),
        p_end: shift(bm.p_end),
        qrs_on: shift(bm.qrs_on),
        qrs_peak: shift(bm.qrs_peak),
        qrs_end: shift(bm.qrs_end),
        t_on: shift(bm.t_on),
        t_peak: shift(bm.t_peak),
        t_end: shift(bm.t_end),
        t_end_method: bm.t_end_method,
        t_end_wavelet: shift(bm.t_end_wavelet),
        t_end_tangent: shift(bm.t_end_tangent),
        t_end_area: shift(bm.t_end_area),
        t_morphology: bm.t_morphology,
    }
}

/// T amplitude (mV) against the PQ level at QRS onset: at the T peak if marked,
/// else the largest deviation between the QRS end (or T onset) and the T end.
/// Broadband beat-to-beat noise (mV): per beat, the residual from the median beat is
/// passed through the second-difference filter r[i] − (r[i−1] + r[i+1])/2, which keeps
/// noise (white noise of SD σ comes out with SD σ·√1.5) and removes the smooth
/// beat-to-beat changes of a real ECG (T waves following RR); median over beats.
/// Only centre samples in `span` (`lo..hi`) count, and those within `skip`
/// (inclusive; the QRS complex) are left out: there the residual is the steep
/// complex's sub-sample misalignment, not noise.
fn residual_noise<'a>(
    m: &[f64],
    beats: impl Iterator<Item = &'a [f64]>,
    span: (usize, usize),
    skip: Option<(usize, usize)>,
) -> Option<f64> {
    let keep = |i: usize| skip.is_none_or(|(a, b)| i < a || i > b);
    let (lo, hi) = (span.0.max(1), span.1.min(m.len().saturating_sub(1)));
    let kept = (lo..hi).filter(|&i| keep(i)).count();
    if kept == 0 {
        return None;
    }
    let mut r: Vec<f64> = beats
        .filter(|b| b.len() == m.len())
        .map(|b| {
            let res = |i: usize| b[i] - m[i];
            let ss: f64 = (lo..hi)
                .filter(|&i| keep(i))
                .map(|i| (res(i) - 0.5 * (res(i - 1) + res(i + 1))).powi(2))
                .sum();
            (ss / kept as f64 / 1.5).sqrt()
        })
        .collect();
    (!r.is_empty()).then(|| align::median(&mut r))
}

/// Noise of the median beat in the band of the T wave (mV): per beat, the
/// residual from the median beat over samples `lo..=hi` (the repolarisation)
/// smoothed by a centred moving average of `smooth` samples (which keeps
/// the slow noise that moves a T end and drops what the T delineation at
/// coarse wavelet scales ignores anyway), its RMS; the median over beats,
/// times 1.2533 / sqrt(beats): the standard error of a median of that many
/// beats with Gaussian noise (sqrt(π/2) / sqrt(n); common statistics).
/// `None` with fewer than 3 beats or an empty span.
fn median_t_noise<'a>(
    m: &[f64],
    beats: impl Iterator<Item = &'a [f64]>,
    lo: usize,
    hi: usize,
    smooth: usize,
) -> Option<f64> {
    let hi = hi.min(m.len().saturating_sub(1));
    if lo + smooth > hi {
        return None;
    }
    let mut r: Vec<f64> = beats
        .filter(|b| b.len() == m.len())
        .map(|b| {
            let res: Vec<f64> = (lo..=hi).map(|i| b[i] - m[i]).collect();
            let mut acc: f64 = res[..smooth].iter().sum();
            let mut ss = (acc / smooth as f64).powi(2);
            for i in smooth..res.len() {
                acc += res[i] - res[i - smooth];
                ss += (acc / smooth as f64).powi(2);
            }
            (ss / (res.len() - smooth + 1) as f64).sqrt()
        })
        .collect();
    if r.len() < 3 {
        return None;
    }
    let n = r.len() as f64;
    Some(align::median(&mut r) * std::f64::consts::FRAC_PI_2.sqrt() / n.sqrt())
}

fn t_amplitude(m: &[f64], marks: &BeatMarks) -> Option<f64> {
    let base = m[marks.qrs_on?.sample];
    if let Some(tp) = marks.t_peak {
        return Some(m[tp.sample] - base);
    }
    let from = marks.t_on.or(marks.qrs_end)?.sample;
    let to = marks.t_end?.sample;
    (from < to).then(|| {
        m[from..=to]
            .iter()
            .map(|v| v - base)
            .max_by(|a, b| a.abs().total_cmp(&b.abs()))
            .unwrap_or(0.0)
    })
}

/// Fill `None` runs by a straight line between their neighbours, or by the nearest value at the ends.
fn fill_gaps(buf: &[Option<f64>]) -> Vec<f64> {
    // One pass over runs: known samples are copied, a `None` run between
    // known samples `a` and `b` is filled with the same expression the
    // binary-search form evaluates per sample ([`fill_gaps_reference`]).
    let n = buf.len();
    let Some(first) = buf.iter().position(Option::is_some) else {
        return vec![0.0; n];
    };
    let mut out = Vec::with_capacity(n);
    let v0 = buf[first].unwrap_or(0.0);
    out.resize(first, v0);
    let mut a = first;
    let mut i = first;
    while i < n {
        if let Some(v) = buf[i] {
            out.push(v);
            a = i;
            i += 1;
            continue;
        }
        let b = buf[i..].iter().position(Option::is_some).map(|k| i + k);
        let va = buf[a].unwrap_or(0.0);
        match b {
            Some(b) => {
                let vb = buf[b].unwrap_or(0.0);
                for t in i..b {
                    out.push(va + (vb - va) * (t - a) as f64 / (b - a) as f64);
                }
                i = b;
            }
            None => {
                out.resize(n, va);
                i = n;
            }
        }
    }
    out
}

/// [`fill_gaps`] with a binary search per gap sample (test oracle).
#[cfg(test)]
fn fill_gaps_reference(buf: &[Option<f64>]) -> Vec<f64> {
    let mut out = vec![0.0; buf.len()];
    let known: Vec<usize> = (0..buf.len()).filter(|&i| buf[i].is_some()).collect();
    if known.is_empty() {
        return out;
    }
    for i in 0..buf.len() {
        out[i] = match buf[i] {
            Some(v) => v,
            None => {
                let j = known.partition_point(|&k| k < i);
                match (j.checked_sub(1).map(|p| known[p]), known.get(j)) {
                    (Some(a), Some(&b)) => {
                        let (va, vb) = (buf[a].unwrap_or(0.0), buf[b].unwrap_or(0.0));
                        va + (vb - va) * (i - a) as f64 / (b - a) as f64
                    }
                    (Some(a), None) => buf[a].unwrap_or(0.0),
                    (None, Some(&b)) => buf[b].unwrap_or(0.0),
                    (None, None) => 0.0,
                }
            }
        };
    }
    out
}

fn median_of(v: impl Iterator<Item = Option<f64>>) -> Option<f64> {
    let mut v: Vec<f64> = v.flatten().filter(|x| x.is_finite()).collect();
    (!v.is_empty()).then(|| align::median(&mut v))
}

fn mean_of(v: impl Iterator<Item = Option<f64>>) -> Option<f64> {
    let v: Vec<f64> = v.flatten().filter(|x| x.is_finite()).collect();
    (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
}

/// The record summary of a list of windows (what [`measure_record`] returns
/// beside them); for records measured in chunks and joined.
pub fn summarize(w: &[WindowMeasure], sex: Option<Sex>, cfg: &MeasureConfig) -> RecordSummary {
    let med = |f: fn(&WindowMeasure) -> Option<f64>| median_of(w.iter().map(f));
    let qtc_ms = med(|w| w.qtc_ms);
    let classification = classify::classify(qtc_ms, sex, &cfg.limits);
    RecordSummary {
        n_windows: w.len(),
        n_measured: w.iter().filter(|w| w.qtc_ms.is_some()).count(),
        n_irregular: w.iter().filter(|w| w.flags.irregular).count(),
        n_inconsistent: w.iter().filter(|w| w.flags.qt_inconsistent).count(),
        rr_ms: med(|w| w.rr_ms),
        hr_bpm: med(|w| w.hr_bpm),
        qt_ms: med(|w| w.qt_ms),
        qt_superimposed_ms: med(|w| w.qt_superimposed_ms),
        qrs_ms: med(|w| w.qrs_ms),
        pr_ms: med(|w| w.pr_ms),
        jt_ms: med(|w| w.jt_ms),
        p_ms: med(|w| w.p_ms),
        tpe_ms: med(|w| w.tpe_ms),
        qt_dispersion_ms: med(|w| w.qt_dispersion_ms),
        qtc_bazett_ms: med(|w| w.qtc_bazett_ms),
        qtc_fridericia_ms: med(|w| w.qtc_fridericia_ms),
        qtc_framingham_ms: med(|w| w.qtc_framingham_ms),
        qtc_hodges_ms: med(|w| w.qtc_hodges_ms),
        qtc_ms,
        mean_qt_ms: mean_of(w.iter().map(|w| w.qt_ms)),
        mean_rr_ms: mean_of(w.iter().map(|w| w.rr_ms)),
        mean_qtc_ms: mean_of(w.iter().map(|w| w.qtc_ms)),
        qt_rule: cfg.qt_rule,
        formula: cfg.preferred_formula,
        qtc_flag: classification.flag,
        classification,
        any_wide_qrs: w.iter().any(|w| w.flags.wide_qrs),
        any_high_risk: w.iter().any(|w| w.flags.high_risk),
        unknown_sex: sex.is_none(),
        caution: CAUTION,
    }
}

/// Rows of one record's windows as `subject` input (windows with both QT and RR).
pub fn subject_windows(m: &RecordMeasures) -> Vec<subject::QtRr> {
    m.windows
        .iter()
        .filter_map(|w| {
            w.qt_ms
                .zip(w.rr_ms)
                .map(|(qt_ms, rr_ms)| subject::QtRr { qt_ms, rr_ms })
        })
        .collect()
}

#[cfg(test)]
mod tests;
