//! The `[measure]` table of `pipeline.toml`: windows, beat selection, alignment,
//! QT rules, preferred correction, limits and per-subject analysis.

use serde::{Deserialize, Serialize};
use tendline_params::{Checker, ParamError};

use crate::align::Interpolation;
use crate::classify::Limits;
use crate::subject::SubjectConfig;

/// Which global QT feeds the QTc.
#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq, Default)]
#[serde(rename_all = "snake_case")]
pub enum QtRule {
    /// Longest single-lead QT among the leads with valid, plausible marks.
    #[default]
    LongestLead,
    /// Earliest QRS onset to latest T end across leads (superimposed leads).
    Superimposed,
}

impl QtRule {
    pub fn as_str(self) -> &'static str {
        match self {
            QtRule::LongestLead => "longest_lead",
            QtRule::Superimposed => "superimposed",
        }
    }
}

/// Heart-rate correction formula.
#[derive(Deserialize, Serialize, Clone, Copy, Debug, PartialEq, Eq, Default)]
#[serde(rename_all = "snake_case")]
pub enum Formula {
    Bazett,
    /// Default (common practice: Bazett over-corrects at fast and under-corrects at slow rates).
    #[default]
    Fridericia,
    Framingham,
    Hodges,
}

impl Formula {
    pub fn as_str(self) -> &'static str {
        match self {
            Formula::Bazett => "bazett",
            Formula::Fridericia => "fridericia",
            Formula::Framingham => "framingham",
            Formula::Hodges => "hodges",
        }
    }
}

/// Parameters of the measurement stage (table `measure`).
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct MeasureConfig {
    /// Window length (s); default 10, the resting-ECG length.
    pub window_s: f64,
    /// A last, shorter window is kept if at least this long (s); default 5.
    pub min_window_s: f64,
    /// Records with more samples than this, summed over their leads (millions),
    /// are processed in consecutive chunks of about this size, so that the
    /// stages of a long recording (a 24-hour Holter) need the working memory
    /// of one chunk, not of the whole record, beside the record's samples as
    /// read (released as the chunks pass them); 0 = never. Chunks are whole
    /// windows long; default 2, above every record of QTDB and LUDB (millions
    /// of samples).
    pub chunk_mega_samples: f64,
    /// Each chunk is filtered, detected and delineated with this much signal
    /// on either side of it (rounded up to whole windows), and only what falls
    /// inside the chunk is kept: filters, adaptive detection thresholds and the
    /// previous RR see the neighbouring signal (s); default 60.
    pub chunk_overlap_s: f64,
    /// Average beats that detection left unclassified together with normal beats
    /// (they must still correlate with the template); default true.
    pub use_unclassified_beats: bool,
    /// Fewest beats a regular window needs for a median beat; default 3.
    pub min_beats_per_window: usize,
    /// A window's P wave (PR interval, P duration, the P marks of its median
    /// beats) is kept only when at least this fraction of the window's beats
    /// have a P wave in the beat-by-beat delineation, which drops P waves whose
    /// PR interval scatters (`delineate.p_max_pr_mad_ms`: atrial fibrillation,
    /// flutter, AV dissociation). A median beat averages fibrillatory waves or
    /// dissociated P waves into a bump that reads as a P wave: before this rule
    /// 12 of the 14 LUDB records in atrial fibrillation, flutter or complete AV
    /// block reported a PR interval (150-312 ms in atrial fibrillation); with
    /// it none does, and all 86 others keep theirs. QTDB: 388 of 8671 windows
    /// lose their PR interval (23 records, most in sel35, sel221, sel821), 4 of
    /// the 344 with annotated P waves; their PR error 2.4 +/- 16.6 -> 2.4
    /// +/- 16.5 ms. 0 = off (dimensionless).
    pub window_p_min_beat_fraction: f64,
    /// A beat is kept if its preceding and following RR deviate from the window's
    /// median normal-to-normal RR by at most this fraction; default 0.2.
    pub rr_stability: f64,
    /// Pearson correlation a beat needs with the window template (all usable leads
    /// concatenated, from 150 ms before the fiducial into the T wave); default 0.85.
    pub min_correlation: f64,
    /// Median-beat span before the QRS fiducial (ms); default 400.
    pub beat_before_ms: f64,
    /// Median-beat span after the QRS fiducial (ms); default 900 (room for a QT up to `qt_max_ms`).
    pub beat_after_ms: f64,
    /// Half width (ms) of the QRS region cross-correlated for alignment; default 60.
    pub align_half_width_ms: f64,
    /// Largest alignment lag (ms) either side of the detected fiducial; default 20.
    pub align_max_lag_ms: f64,
    /// Alignment passes (template rebuilt each pass); default 2.
    pub align_passes: usize,
    /// Resampling of beats at fractional positions; default `sinc`.
    pub interpolation: Interpolation,
    /// Rule whose QT feeds the QTc; default `longest_lead`.
    pub qt_rule: QtRule,
    /// Formula of the reported QTc; default `fridericia`.
    pub preferred_formula: Formula,
    /// A lead whose median-beat T wave is smaller than this (absolute peak above the
    /// level at QRS onset, mV) gives no QT: its T end is not reliable (common practice:
    /// measure QT where the T wave ends clearly); default 0.05.
    pub min_t_amplitude_mv: f64,
    /// A lead whose beat-to-beat noise (RMS difference of single beats from the median
    /// beat, mV) exceeds this fraction of its T amplitude gives no QT, and the window is
    /// flagged `noisy`: noise that large moves the T end by tens of ms (seen on the
    /// synthetic demo signals with known truth; 3 % of LUDB 1-100 leads exceed it).
    /// Leads whose T wave is under `min_t_amplitude_mv` give no QT as flat and do not
    /// raise the flag: before, microvolts of noise on a near-flat T flagged 22 of the
    /// 100 LUDB windows and 1351 of 9450 QTDB windows (now 0 and 577), QT unchanged.
    /// Default 0.15; 0 disables the check.
    pub max_noise_t_ratio: f64,
    /// The broadband noise of `max_noise_t_ratio` is measured over the beat's own
    /// span (150 ms before the QRS fiducial to 0.75 RR after it, the span of the
    /// correlation test) outside the lead's QRS complex (its median-beat QRS onset
    /// to end, widened by `noise_qrs_margin_ms`), not over the whole median-beat
    /// span. Why: beyond the beat lie the neighbouring beats' QRS complexes,
    /// which RR changes leave unaligned, and inside the QRS the residual is the
    /// steep complex's sub-sample misalignment; neither is noise, and both grow
    /// as the sampling rate falls (the first minute of QTDB sel100 read at 128
    /// Hz: 0.05 mV in MLII, every lead of every window left out as noisy; now
    /// 0.006 mV at 128 and at 250 Hz). QTDB windows flagged `unreadable_noise`
    /// 713 -> 208 of 9450, window QT (superimposed leads, annotator 1) -2.3 +/-
    /// 22.66 -> -0.8 +/- 22.56 ms (382 scored windows), longest lead -7.5 +/-
    /// 23.05 -> -6.3 +/- 23.02 ms; LUDB unchanged. Switch.
    pub noise_outside_qrs: bool,
    /// Margin (ms) on either side of the QRS complex left out of the broadband
    /// noise (`noise_outside_qrs`).
    pub noise_qrs_margin_ms: f64,
    /// A lead whose median beat keeps more slow noise over the repolarisation
    /// (`t_noise_mv`, mV: the smoothed beat-to-beat residual's RMS, median over
    /// beats, over the square root of their number) than this fraction of its T
    /// amplitude gives no QT, and the window is flagged `noisy` as for
    /// `max_noise_t_ratio`, whose broadband measure misses noise in the T wave's
    /// own band (electrode motion). Measured with scripts/validate_noise.py
    /// (noise 0.5-10 Hz added at 12 dB): QTDB window QT (superimposed) -9.5 +/-
    /// 67.9 ms over 305 windows -> -11.4 +/- 49.5 over 227, 4698 of 9450
    /// windows flagged; clean QTDB -2.2 +/- 22.65 -> -2.3 +/- 22.66 ms, windows
    /// with a QT 9036 -> 8979; clean LUDB 4 of 100 windows flagged (two in
    /// atrial fibrillation), every window keeps a QT. 0.10: clean QTDB SD 22.84
    /// ms, 20 LUDB windows flagged. Default 0.15; 0 disables it.
    pub max_t_noise_ratio: f64,
    /// Start of the span whose slow noise is measured, after the QRS fiducial (ms).
    pub t_noise_from_ms: f64,
    /// Moving-average length (ms) that keeps the slow part of the beat-to-beat residual.
    pub t_noise_smooth_ms: f64,
    /// A lead's QT must exceed its QRS duration by at least this (ms): a T end found
    /// right after the QRS is a boundary error, not a T wave (plausibility bound chosen
    /// here, not a published value); default 100.
    pub min_jt_ms: f64,
    /// Single-lead or global QT below this is implausible and rejected (ms); default 200.
    pub qt_min_ms: f64,
    /// Single-lead or global QT above this is implausible and rejected (ms); default 900.
    /// Not lower: QTDB sel33 (35 bpm) has annotated QTs of 735-820 ms and sele0116 (37
    /// bpm) 710-745 ms, and the 700 ms used before left sel33 without any window QT and
    /// sele0116 with the shorter lead's or none. QTDB window QT (superimposed leads,
    /// annotator 1) with 700: -0.8 +/- 22.56 ms over 382 scored windows, 9057 windows
    /// with a QT; with 800 or 900: -0.7 +/- 22.26 over 388, 9162 windows (the 900-ms
    /// median-beat span, `beat_after_ms`, is the next limit). LUDB unchanged.
    pub qt_max_ms: f64,
    /// With three or more leads, a lead QT farther than this from the median lead QT
    /// is an outlier and not used by the longest-lead rule; with two leads, the leads
    /// disagree if their QTs differ by more than this (ms). Default 60: the spread of QT
    /// between leads of a normal 12-lead ECG (QT dispersion) is usually below about
    /// 50-60 ms (from memory), so a farther lead is a boundary error.
    pub lead_outlier_ms: f64,
    /// QT dispersion (longest minus shortest valid single-lead QT of a window) is
    /// reported only when at least this many leads give a valid QT. Default 3, the
    /// fewest with a spread that is more than one difference; a 12-lead ECG usually
    /// has many more (published QT-dispersion work asks for most of the 12 leads to be
    /// measurable, from memory), so compare dispersions only at like lead counts
    /// (`qt_valid_leads` beside each value). Count (no unit).
    pub qt_dispersion_min_leads: usize,
    /// With exactly two valid leads whose QTs disagree by more than `lead_outlier_ms`,
    /// one T wave upright and the other inverted, keep the upright lead (true) rather
    /// than the lead with the larger T wave (false). On QTDB (annotator 1, window QT)
    /// the inverted T's end was the early one in every such disagreement (4 records:
    /// the wavelet end fell on the first phase of the inverted T): superimposed-leads QT
    /// SD 30.1 -> 25.4 ms on the odd-positioned records of RECORDS, 26.9 -> 22.4 ms on
    /// the even ones (LUDB unchanged). Default true. No unit (switch).
    pub prefer_upright_t: bool,
    /// Superimposed-leads QT starts at the earliest QRS onset of every usable lead
    /// (true), not only of the leads whose T end is valid (false). The QRS onset is a
    /// property of the whole heart beat: a lead with a flat or unreadable T wave still
    /// shows where ventricular depolarisation begins, and leaving it out made the
    /// onset late (QTDB sel43: a 70 ms later onset). On QTDB (annotator 1, window QT,
    /// superimposed leads): mean -4.2 -> -2.2 ms, SD 23.3 -> 22.6 ms; odd-positioned
    /// records of RECORDS SD 23.9 -> 22.7, even 22.4 -> 22.2. LUDB window QT
    /// (validation report) -20.9 +/- 24.6 -> -19.9 +/- 23.9 ms. Default true. No unit
    /// (switch).
    pub qrs_onset_all_leads: bool,
    /// Superimposed leads, three or more leads: the earliest onset is dropped if it
    /// precedes the next earliest by more than this (ms); also used for P onset; default 20.
    pub onset_outlier_ms: f64,
    /// Superimposed leads, three or more leads: the latest T end (or QRS end) is dropped
    /// if it follows the next latest by more than this (ms); default 40.
    pub end_outlier_ms: f64,
    /// Superimposed leads, three or more leads: the earliest QRS onset (latest QRS
    /// end) must have another lead's within this (ms), else it is dropped as an
    /// outlier (up to `lead_outlier_max_frac` of the leads). Default 12 (three
    /// samples at 250 Hz). Before (the `onset_outlier_ms` / `end_outlier_ms`
    /// rule, one outlier): LUDB window QRS duration -10.8 +/- 22.6 ms against
    /// the lead files' earliest onset and latest end, now -16.0 +/- 15.6 (8 ms:
    /// -17.5 +/- 15.3; 20 ms with up to three outliers: -13.5 +/- 18.0); window
    /// PR 1.9 +/- 12.4 -> 2.9 +/- 10.7 ms; window QT (superimposed) -20.1 +/-
    /// 23.8 -> -21.3 +/- 23.9 ms. QTDB (two leads) unchanged. The same record
    /// read at 250 instead of 500 Hz (`scripts/validate_rates.py`) moved its
    /// QRS duration by an SD of 14.8 ms before: the earliest of twelve onsets
    /// follows any one lead's noise.
    pub qrs_outlier_ms: f64,
    /// Superimposed leads: at most this fraction of the leads (at least one) may be
    /// dropped from the earliest onset or latest end as outliers (dimensionless).
    /// Default 0.25: up to three of twelve leads, one of up to seven.
    pub lead_outlier_max_frac: f64,
    /// Two usable leads whose QRS ends differ by more than `end_outlier_ms`: the
    /// QRS duration ends at the mark of the lead whose QRS boundaries are the more
    /// confident (steeper, less noisy; the delineation's confidence), not at the
    /// later one. With three or more leads the outlier rule above applies. Default
    /// true: QTDB window QRS duration against annotator 1 4.5 +/- 23.8 -> 1.9 +/-
    /// 21.8 ms (odd-positioned records of RECORDS SD 25.1 -> 24.6, even 22.0 ->
    /// 18.2); LUDB (twelve leads) unchanged. The same rule for the QRS onset made
    /// the QTDB window QT worse (SD 22.6 -> 23.4 ms) and the PR interval too (17.8
    /// -> 19.9 ms), so the onset stays the earliest. No unit (switch).
    pub two_lead_qrs_end_confident: bool,
    /// A lead's QT in one window is compared with the same lead's QT in the
    /// neighbouring windows (`lead_consistency_windows` on either side), both
    /// corrected by Fridericia's formula for the windows' RR: farther than this
    /// (ms) from their median, the window is flagged `qt_inconsistent` for
    /// over-read and the lead is marked (`qt_inconsistent` per lead in
    /// results.h5); the values stay. Why: the QT of a lead changes slowly from
    /// one 10-s window to the next (it follows the heart rate with a lag of a
    /// minute or two, common practice), so a lead whose T end jumps by tens of
    /// ms and back has taken another wave (the next P wave, a U wave, a step of
    /// the ST level) or the other phase of a biphasic T in that window. QTDB
    /// (annotator 1, superimposed-leads window QT): 22 of 382 scored windows
    /// flagged, their error -8.6 +/- 35.4 ms (mean absolute 28.6) against -0.3
    /// +/- 21.5 (14.8) for the others; 6.4 % of the 9057 windows with a QT
    /// flagged. (Measured before the broadband noise span of
    /// `noise_outside_qrs`, as are the alternatives below: 20 of 381, 30.6
    /// against 15.0 ms.)
    /// Leaving the departing lead out of the QT instead made the scored windows
    /// worse (SD 22.7 -> 23.2 ms; only where another lead of the window was
    /// consistent: 23.7 ms), and so did keeping, of two disagreeing leads, the
    /// one whose QT varies less across windows (23.1-26.8 ms): in QTDB sel48 a
    /// lead reads its biphasic T by one phase in most windows and by the other
    /// in the rest, so the majority of the windows is no guide to the truth.
    /// 25 / 30 / 50 ms flagged 34 / 28 / 18 scored windows (mean absolute
    /// error 26.0 / 27.1 / 32.6 ms against 14.6-14.8 for the others). Default
    /// 40; 0 disables the check.
    pub lead_consistency_ms: f64,
    /// Windows on either side whose QT of the same lead forms the reference of
    /// `lead_consistency_ms` (count). Default 3: half a minute either way in
    /// 10-s windows.
    pub lead_consistency_windows: usize,
    /// Fewest neighbouring windows with a QT of the lead that the check needs
    /// (count); with fewer (short records, a lead valid in few windows) the lead
    /// is not checked. Default 3.
    pub lead_consistency_min_windows: usize,
    /// Leads whose detection quality is below this are not measured (quality 0, an
    /// unusable lead, never is); default 0: detection quality ranks leads for QRS
    /// detection, and a lead weak for QRS detection can still carry a clear T wave.
    pub min_lead_quality: f64,
    /// A window is irregular if the coefficient of variation of its normal-to-normal
    /// intervals exceeds this; default 0.15.
    pub irregular_rr_cv: f64,
    /// ... or if the fraction of non-normal beats exceeds this; default 0.2.
    pub irregular_ectopic_fraction: f64,
    /// Fewest beats averaged in an irregular window (no RR-stability filter is
    /// applied there; RR is the mean of the intervals preceding those beats); default 5.
    pub irregular_min_beats: usize,
    /// Classification limits.
    pub limits: Limits,
    /// Per-subject regression and serial ΔQTc.
    pub subject: SubjectConfig,
}

impl Default for MeasureConfig {
    fn default() -> Self {
        Self {
            window_s: 10.0,
            min_window_s: 5.0,
            chunk_mega_samples: 2.0,
            chunk_overlap_s: 60.0,
            use_unclassified_beats: true,
            min_beats_per_window: 3,
            window_p_min_beat_fraction: 0.5,
            rr_stability: 0.2,
            min_correlation: 0.85,
            beat_before_ms: 400.0,
            beat_after_ms: 900.0,
            align_half_width_ms: 60.0,
            align_max_lag_ms: 20.0,
            align_passes: 2,
            interpolation: Interpolation::Sinc,
            qt_rule: QtRule::LongestLead,
            preferred_formula: Formula::Fridericia,
            min_t_amplitude_mv: 0.05,
            max_noise_t_ratio: 0.15,
            noise_outside_qrs: true,
            noise_qrs_margin_ms: 10.0,
            max_t_noise_ratio: 0.15,
            t_noise_from_ms: 80.0,
            t_noise_smooth_ms: 40.0,
            min_jt_ms: 100.0,
            qt_min_ms: 200.0,
            qt_max_ms: 900.0,
            lead_outlier_ms: 60.0,
            qt_dispersion_min_leads: 3,
            prefer_upright_t: true,
            qrs_onset_all_leads: true,
            onset_outlier_ms: 20.0,
            end_outlier_ms: 40.0,
            qrs_outlier_ms: 12.0,
            lead_outlier_max_frac: 0.25,
            two_lead_qrs_end_confident: true,
            lead_consistency_ms: 40.0,
            lead_consistency_windows: 3,
            lead_consistency_min_windows: 3,
            min_lead_quality: 0.0,
            irregular_rr_cv: 0.15,
            irregular_ectopic_fraction: 0.2,
            irregular_min_beats: 5,
            limits: Limits::default(),
            subject: SubjectConfig::default(),
        }
    }
}

impl MeasureConfig {
    /// Every out-of-range value, named `measure.<key>`.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("measure");
        c.range("window_s", self.window_s, 2.0, 3600.0, "s")
            .range("min_window_s", self.min_window_s, 1.0, 3600.0, "s")
            .range(
                "chunk_mega_samples",
                self.chunk_mega_samples,
                0.0,
                10000.0,
                "millions of samples",
            )
            .range("chunk_overlap_s", self.chunk_overlap_s, 10.0, 3600.0, "s")
            .range(
                "window_p_min_beat_fraction",
                self.window_p_min_beat_fraction,
                0.0,
                1.0,
                "share of the window's beats",
            )
            .require(
                self.min_window_s <= self.window_s,
                "min_window_s",
                "at most window_s",
                self.min_window_s,
            )
            .range(
                "min_beats_per_window",
                self.min_beats_per_window as f64,
                1.0,
                1000.0,
                "beats",
            )
            .range("rr_stability", self.rr_stability, 0.01, 1.0, "fraction")
            .range("min_correlation", self.min_correlation, -1.0, 1.0, "")
            .range("beat_before_ms", self.beat_before_ms, 150.0, 1000.0, "ms")
            .range("beat_after_ms", self.beat_after_ms, 300.0, 1500.0, "ms")
            .range(
                "align_half_width_ms",
                self.align_half_width_ms,
                10.0,
                200.0,
                "ms",
            )
            .range("align_max_lag_ms", self.align_max_lag_ms, 0.0, 100.0, "ms")
            .range("align_passes", self.align_passes as f64, 1.0, 10.0, "")
            .range("max_noise_t_ratio", self.max_noise_t_ratio, 0.0, 10.0, "")
            .range("max_t_noise_ratio", self.max_t_noise_ratio, 0.0, 10.0, "")
            .range(
                "noise_qrs_margin_ms",
                self.noise_qrs_margin_ms,
                0.0,
                200.0,
                "ms",
            )
            .range(
                "lead_consistency_ms",
                self.lead_consistency_ms,
                0.0,
                500.0,
                "ms",
            )
            .range(
                "lead_consistency_windows",
                self.lead_consistency_windows as f64,
                1.0,
                100.0,
                "",
            )
            .range(
                "lead_consistency_min_windows",
                self.lead_consistency_min_windows as f64,
                1.0,
                200.0,
                "",
            )
            .range("t_noise_from_ms", self.t_noise_from_ms, 0.0, 400.0, "ms")
            .range(
                "t_noise_smooth_ms",
                self.t_noise_smooth_ms,
                4.0,
                200.0,
                "ms",
            )
            .range(
                "min_t_amplitude_mv",
                self.min_t_amplitude_mv,
                0.0,
                5.0,
                "mV",
            )
            .range("min_jt_ms", self.min_jt_ms, 0.0, 400.0, "ms")
            .range("qt_min_ms", self.qt_min_ms, 50.0, 500.0, "ms")
            .range("qt_max_ms", self.qt_max_ms, 300.0, 1000.0, "ms")
            .require(
                self.qt_min_ms < self.qt_max_ms,
                "qt_min_ms",
                "below qt_max_ms",
                self.qt_min_ms,
            )
            .range("lead_outlier_ms", self.lead_outlier_ms, 1.0, 500.0, "ms")
            .range(
                "qt_dispersion_min_leads",
                self.qt_dispersion_min_leads as f64,
                2.0,
                64.0,
                "leads",
            )
            .range("onset_outlier_ms", self.onset_outlier_ms, 1.0, 500.0, "ms")
            .range("end_outlier_ms", self.end_outlier_ms, 1.0, 500.0, "ms")
            .range("qrs_outlier_ms", self.qrs_outlier_ms, 1.0, 500.0, "ms")
            .range(
                "lead_outlier_max_frac",
                self.lead_outlier_max_frac,
                0.0,
                0.5,
                "share of the leads",
            )
            .range("min_lead_quality", self.min_lead_quality, 0.0, 1.0, "")
            .range("irregular_rr_cv", self.irregular_rr_cv, 0.0, 2.0, "")
            .range(
                "irregular_ectopic_fraction",
                self.irregular_ectopic_fraction,
                0.0,
                1.0,
                "fraction",
            )
            .range(
                "irregular_min_beats",
                self.irregular_min_beats as f64,
                1.0,
                1000.0,
                "beats",
            );
        c.extend(self.limits.check("measure.limits"));
        c.extend(self.subject.check("measure.subject"));
        c.finish()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_valid_and_documented_values() {
        let c = MeasureConfig::default();
        assert!(c.validate().is_ok());
        assert_eq!(c.window_s, 10.0);
        assert_eq!(c.qt_rule, QtRule::LongestLead);
        assert_eq!(c.preferred_formula, Formula::Fridericia);
        assert_eq!(c.limits.prolonged_male_ms, 450.0);
    }

    #[test]
    fn bad_values_are_named() {
        let c = MeasureConfig {
            window_s: 0.5,
            rr_stability: 3.0,
            limits: Limits {
                wide_qrs_ms: 5.0,
                ..Limits::default()
            },
            ..MeasureConfig::default()
        };
        let e = c.validate().unwrap_err();
        let keys: Vec<&str> = e.iter().map(|e| e.key.as_str()).collect();
        assert!(keys.contains(&"measure.window_s"), "{keys:?}");
        assert!(keys.contains(&"measure.rr_stability"), "{keys:?}");
        assert!(keys.contains(&"measure.limits.wide_qrs_ms"), "{keys:?}");
    }

    #[test]
    fn serde_names_are_snake_case() {
        let c: MeasureConfig = toml_like(
            r#"{"qt_rule":"superimposed","preferred_formula":"bazett","interpolation":"linear"}"#,
        );
        assert_eq!(c.qt_rule, QtRule::Superimposed);
        assert_eq!(c.preferred_formula, Formula::Bazett);
        assert_eq!(c.interpolation, Interpolation::Linear);
        assert!(serde_json::from_str::<MeasureConfig>(r#"{"window_sec":10}"#).is_err());
    }

    fn toml_like(s: &str) -> MeasureConfig {
        serde_json::from_str(s).unwrap()
    }
}
