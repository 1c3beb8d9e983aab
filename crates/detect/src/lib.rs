//! QRS detection: Pan–Tompkins per lead, multi-lead fusion, beat labels and
//! unreadable stretches.
//!
//! Input: leads already passed through the run's conditioning filter
//! (baseline and power-line removed), in mV, all at sampling rate `fs`.
//! Output sample indices are 0-based indices into those same arrays.
//!
//! # Method
//!
//! * **Per lead** (Pan and Tompkins, IEEE Trans Biomed Eng 1985;32:230-236):
//!   zero-phase Butterworth band-pass 5–15 Hz, central derivative (mV/s),
//!   squaring, 150 ms moving-window mean, then the paper's decision rules:
//!   dual adaptive thresholds on the integrated (`SPKI/NPKI`) and filtered
//!   (`SPKF/NPKF`) signals, a learning phase on the first 2 s, search-back with
//!   halved thresholds when no QRS is seen for 166 % of the regular RR average,
//!   a 200 ms refractory period, and the slope test against T waves within
//!   360 ms. See [`detect_lead`]. Departures from the paper, all because
//!   whole records are processed offline: the filters are zero-phase (no
//!   delay to undo); a larger integrated peak inside the refractory period
//!   moves the beat to it (the first was a shoulder of the same complex);
//!   search-back also applies the T-wave test; when eight intervals in a row
//!   fall outside the regular limits the regular average restarts from them
//!   (a lasting change of rate); a QRS cut by the first or last sample of the
//!   record still counts.
//! * **Fusion** ([`detect`]): each lead's integrated signal is divided by its
//!   local beat level (median of 2 s block maxima over 10 s), and the leads are
//!   averaged with local quality weights; the same decision rules run once on
//!   this combined signal (a combined detection function, not a vote). Lead
//!   quality per 2 s block: zero where the lead is flat or saturated (see
//!   below) or noise; otherwise `(p / p_best)^2`, where the peakiness `p` is
//!   the median block maximum of the integrated signal over the block and its
//!   neighbours divided by its 30th percentile (the background between beats)
//!   and `p_best` that of the best lead there. A noisy lead thus weighs next to
//!   nothing and neither adds peaks nor dilutes the good one; a flat lead is
//!   left out. [`Detection::lead_quality`] is each lead's mean weight.
//! * **Fiducial point**: the maximum, within ±half the integration window
//!   around the integrated-signal peak, of the combined band-passed energy
//!   `Σ w_i · bp_i² / s_i²` (`s_i` = the lead's local band-passed beat level)
//!   smoothed over `fiducial_smoothing_ms`; for [`detect_lead`] the extremum
//!   of `|bp|`. With zero-phase filtering it sits on the main QRS deflection;
//!   on QTDB its median distance to the `.atr` mark of MIT-BIH-derived records
//!   is 0–4 ms (the European ST-T records mark beats 20–60 ms earlier).
//!   Where two lobes carry nearly the same energy the peak can change lobe
//!   from stretch to stretch; such beats are moved back onto the dominant
//!   beat shape when labelled (`fiducial_realign_ms`, see [`label`]).
//! * **Labels**: correlation with the dominant beat shape, QRS width relative to
//!   the dominant beats and prematurity (see [`label`]).
//! * **Unreadable stretches**: where every lead is flat (peak-to-peak below
//!   `flat_ptp_mv` over `flat_window_ms`, or missing samples), saturated
//!   (clipped at its extreme value for `saturation_run_ms`, or moving without
//!   any QRS-band content) or noise (peakiness below `noise_ratio_max` with a
//!   background raised above `noise_background_fraction` of its usual beat
//!   level, so that a quiet pause is not called noise). Beats inside are
//!   dropped, never guessed.
//!
//! # Conventions
//!
//! Every constant of [`DetectConfig`] is in physical units and converted to
//! samples with `round(ms * fs / 1000)`, so 250, 360, 500 and 1000 Hz give
//! the same beats. Derivatives are in mV/s and the integration is a mean, so
//! thresholds do not depend on `fs` either. Filters extend the ends by odd
//! reflection (see `tendline_dsp::filter::filtfilt_sos_padded`).

use serde::{Deserialize, Serialize};
use tendline_params::{Checker, ParamError};

mod fuse;
pub mod label;
mod pt;

/// Beat class, with its standard WFDB beat code.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum BeatLabel {
    /// `N`: normal (dominant morphology, not premature).
    Normal,
    /// `V`: ventricular ectopic.
    Ventricular,
    /// `Q`: unclassifiable.
    Unclassified,
}

impl BeatLabel {
    /// The WFDB symbol (`N`, `V`, `Q`).
    pub fn symbol(self) -> &'static str {
        match self {
            BeatLabel::Normal => "N",
            BeatLabel::Ventricular => "V",
            BeatLabel::Unclassified => "Q",
        }
    }
}

/// One detected beat.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Beat {
    /// QRS fiducial point (sample index).
    pub sample: usize,
    pub label: BeatLabel,
}

/// A stretch excluded from analysis, `[start, end)` in samples.
#[derive(Debug, Clone, PartialEq)]
pub struct Span {
    pub start: usize,
    pub end: usize,
    /// Short reason: `noise`, `flat`, `saturation`, `missing` (no sample in any
    /// analysed lead; see [`exclude_missing`]).
    pub reason: String,
}

/// Everything detection says about one record.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Detection {
    pub beats: Vec<Beat>,
    pub unreadable: Vec<Span>,
    /// Quality per lead in 0..=1 (0 = unusable), same order as the input leads.
    pub lead_quality: Vec<f64>,
}

/// Bad input to [`detect`].
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DetectError {
    #[error("detect: no leads given")]
    NoLeads,
    #[error("detect: sampling rate must be finite and at least 100 Hz, got {0}")]
    BadSampleRate(f64),
    #[error("detect: lead {lead} has {len} samples but lead 0 has {expected}")]
    LengthMismatch {
        lead: usize,
        len: usize,
        expected: usize,
    },
    #[error(
        "detect: band-pass upper edge {hi_hz} Hz must be below half the sampling rate {fs} Hz"
    )]
    BandAboveNyquist { hi_hz: f64, fs: f64 },
    #[error("detect: invalid configuration: {}", .0.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; "))]
    Config(Vec<ParamError>),
}

/// Parameters of QRS detection (`[detect]` table of `pipeline.toml`).
///
/// Defaults follow Pan and Tompkins (1985) where the paper gives a value; the
/// others are this crate's choices, documented per field.
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct DetectConfig {
    /// Band-pass lower edge (Hz). Paper: 5 Hz.
    pub bandpass_low_hz: f64,
    /// Band-pass upper edge (Hz). Paper: passband about 5–15 Hz.
    pub bandpass_high_hz: f64,
    /// Butterworth order of each edge (2 or 4), applied forward and backward.
    pub bandpass_order: usize,
    /// Moving-window integration width (ms). Paper: 150 ms.
    pub mwi_window_ms: f64,
    /// Refractory period after a QRS (ms). Paper: 200 ms.
    pub refractory_ms: f64,
    /// Interval after a QRS in which a candidate must pass the slope test (ms). Paper: 360 ms.
    pub t_wave_window_ms: f64,
    /// Beyond `t_wave_window_ms`, up to this long after a QRS (ms), a candidate
    /// that fails the slope test and is also small (`t_wave_late_amp_frac`) is
    /// taken for a T wave or noise (0 = off). At slow rates with small QRS
    /// complexes and large T waves, noise bumps and T waves past 360 ms passed as
    /// beats: with electrode-motion noise added at 12 dB
    /// (scripts/validate_noise.py) 14 067 false beats over QTDB (sele0116 at 40
    /// bpm: 1314 against 558 true). Default 1000: 4208 (muscle noise at 12 dB:
    /// 2328 -> 506); clean QTDB unchanged (8 missed, 15 false of 85 462),
    /// clean LUDB false beats 4 -> 2. 600 / 800: 6597 / 5751 with motion noise.
    /// Without the size test (a longer fixed slope window, 450 / 550 ms) true
    /// premature beats of clean QTDB were lost (13 / 25; sel308, sel221).
    pub t_wave_late_window_ms: f64,
    /// See `t_wave_late_window_ms`: small = integrated (MWI) peak under this
    /// fraction of the running signal level (dimensionless). Default 0.3: 0.4 /
    /// 0.5 (600 ms) lost 1 / 7 true beats of clean QTDB.
    pub t_wave_late_amp_frac: f64,
    /// A candidate in the T-wave window whose largest slope is below this
    /// fraction of the previous QRS's is a T wave. Paper: 0.5.
    pub t_wave_slope_ratio: f64,
    /// Search back when no QRS for this multiple of the regular RR average. Paper: 1.66.
    pub searchback_rr_fraction: f64,
    /// Second threshold as a fraction of the first (used in search-back). Paper: 0.5.
    pub searchback_threshold_factor: f64,
    /// First threshold = noise level + this fraction of (signal − noise). Paper: 0.25.
    pub threshold_fraction: f64,
    /// Weight of a new peak in the signal level update. Paper: 0.125.
    pub signal_peak_weight: f64,
    /// Weight of a search-back peak in the signal level update. Paper: 0.25.
    pub searchback_peak_weight: f64,
    /// Weight of a new peak in the noise level update. Paper: 0.125.
    pub noise_peak_weight: f64,
    /// Thresholds are multiplied by this when the rhythm is irregular. Paper: 0.5.
    pub irregular_threshold_factor: f64,
    /// Number of RR intervals in each running average. Paper: 8.
    pub rr_average_beats: usize,
    /// Low limit of a regular RR, fraction of the regular average. Paper: 0.92.
    pub rr_low_fraction: f64,
    /// High limit of a regular RR, fraction of the regular average. Paper: 1.16.
    pub rr_high_fraction: f64,
    /// Learning phase length (ms). Paper: 2 s.
    pub learning_ms: f64,
    /// Initial signal level = this fraction of the learning-phase maximum (from memory: 1/3).
    pub learning_signal_fraction: f64,
    /// Initial noise level = this fraction of the learning-phase mean (from memory: 1/2).
    pub learning_noise_fraction: f64,
    /// While fewer than two beats have been accepted (no RR interval, so no
    /// search-back yet) and none for this long (ms, from the start or the last
    /// of them), the signal and noise levels are learned again, as in the
    /// learning phase, from the `learning_ms` of signal just before the next
    /// candidate, and the candidates of that stretch are judged again against
    /// them; 0 = never. Why: the paper learns the levels once, from the
    /// first 2 s, and lets them fall only with accepted beats or through the
    /// search-back, which needs an RR average; so a large artifact at the start
    /// (an amplifier settling, an electrode touched, a filter's edge) set a
    /// threshold above every QRS that followed and nothing was detected again
    /// (QTDB sele0114, sele0116 and sele0136 resampled to 128 Hz, whose first
    /// samples carry the resampler's edge ringing on a 9-mV offset: one beat
    /// each in 7.5 to 15 minutes). Once beats are found, pauses are left to the
    /// search-back: re-learning in the 5.9-s sinus pause of QTDB sel232 took 6
    /// noise peaks for beats. Default 5000.
    pub relearn_ms: f64,
    /// Block length for lead scales and quality (ms).
    pub fusion_block_ms: f64,
    /// Number of blocks (odd) over which each lead's beat level is the median block maximum.
    pub fusion_scale_blocks: usize,
    /// Percentile of a lead's integrated signal taken as its background between beats.
    pub quality_background_percentile: f64,
    /// Time between the samples of the integrated signal that the background
    /// percentile is taken from (ms; 0 = every sample). The integrated signal
    /// is a moving mean over `mwi_window_ms`, so a step well below that window
    /// loses nothing of its level and saves most of the sorting.
    pub quality_background_step_ms: f64,
    /// Lead weight = (peakiness / best lead's peakiness) to this power.
    pub quality_weight_power: f64,
    /// A lead whose peak-to-peak amplitude over `flat_window_ms` is below this is flat (mV).
    pub flat_ptp_mv: f64,
    /// Window for the flat and saturation tests (ms).
    pub flat_window_ms: f64,
    /// A window whose band-passed peak-to-peak is below this while the lead moves is
    /// saturated (clipped or decaying after a clip) (mV).
    pub saturation_bp_ptp_mv: f64,
    /// Identical consecutive samples for at least this long at the lead's extreme are a clip (ms).
    pub saturation_run_ms: f64,
    /// A lead whose peakiness (median block maximum over background) is below
    /// this is noise there; every lead below it: the block is unreadable.
    pub noise_ratio_max: f64,
    /// ... and only when its background (integrated signal between beats) is at
    /// least this fraction of its usual beat level over the record.
    pub noise_background_fraction: f64,
    /// Shortest unreadable stretch reported (ms).
    pub unreadable_min_ms: f64,
    /// Beats closer than this to a stretch missing in every analysed lead (a gap
    /// of the recording, which the pipeline bridges) are dropped: the bridge
    /// joins two unrelated parts of the signal, and the step it makes can look
    /// like a QRS to the band-pass (ms).
    pub missing_guard_ms: f64,
    /// The combined band-passed energy is smoothed over this window before its
    /// peak is taken as the fiducial point, so that two lobes of nearly equal
    /// height cannot swap from one beat (or sampling rate) to the next (ms).
    pub fiducial_smoothing_ms: f64,
    /// Half-width of the QRS window used for template correlation (ms).
    pub template_half_width_ms: f64,
    /// Beats correlating at least this with the dominant template have dominant morphology.
    pub label_corr_min: f64,
    /// QRS wider than the dominant beats by more than this is wide (ms).
    pub label_width_excess_ms: f64,
    /// Fraction of the peak band-passed energy that delimits the QRS for its width.
    pub label_width_energy_fraction: f64,
    /// A beat is premature when its RR is below this fraction of the local mean RR.
    pub label_premature_fraction: f64,
    /// A beat whose QRS does not match the dominant beat shape at its fiducial
    /// point (correlation below `label_corr_min`) but does within this many ms
    /// of it has its fiducial point moved there (0 = off). Why: when two lobes
    /// of a QRS carry nearly the same energy (an R and an S wave whose heights
    /// change with breathing), the energy peak sits on one lobe in some
    /// stretches of a record and on the other in the rest; such beats were
    /// labelled `Q`, left out of the median beats and gave RR steps of the lobe
    /// distance. Bounded by half the distance to the neighbouring beats.
    /// Default 80 (paced complexes of QTDB sel102 need more than 60). QTDB,
    /// against the `.atr` beat codes: normal beats labelled `N` 76,834 ->
    /// 78,961, ventricular beats labelled `V` 1115 -> 1102; sel840 and
    /// sele0106 beats off the usual lobe 32 % -> 0; global QRS onset SD 13.4 ->
    /// 12.9 ms, T-peak sensitivity 98.96 -> 99.01 %, window QT (superimposed)
    /// -0.7 +/- 22.3 -> -0.5 +/- 22.0 ms; LUDB per-lead QRS onset SD 10.44 ->
    /// 10.36 ms; beats found unchanged.
    pub fiducial_realign_ms: f64,
    /// A best match nearer than this to the fiducial point leaves the point
    /// where it is (ms): the other lobe of a QRS lies 30-100 ms away (QTDB),
    /// while a few ms is the jitter of a beat that barely misses
    /// `label_corr_min` (which the median-beat alignment absorbs) and would make
    /// the point depend on the sampling rate.
    pub fiducial_realign_min_ms: f64,
}

impl Default for DetectConfig {
    fn default() -> Self {
        Self {
            bandpass_low_hz: 5.0,
            bandpass_high_hz: 15.0,
            bandpass_order: 2,
            mwi_window_ms: 150.0,
            refractory_ms: 200.0,
            t_wave_window_ms: 360.0,
            t_wave_late_window_ms: 1000.0,
            t_wave_late_amp_frac: 0.3,
            t_wave_slope_ratio: 0.5,
            searchback_rr_fraction: 1.66,
            searchback_threshold_factor: 0.5,
            threshold_fraction: 0.25,
            signal_peak_weight: 0.125,
            searchback_peak_weight: 0.25,
            noise_peak_weight: 0.125,
            irregular_threshold_factor: 0.5,
            rr_average_beats: 8,
            rr_low_fraction: 0.92,
            rr_high_fraction: 1.16,
            learning_ms: 2000.0,
            learning_signal_fraction: 1.0 / 3.0,
            learning_noise_fraction: 0.5,
            relearn_ms: 5000.0,
            fusion_block_ms: 2000.0,
            fusion_scale_blocks: 5,
            quality_background_percentile: 30.0,
            quality_background_step_ms: 16.0,
            quality_weight_power: 2.0,
            flat_ptp_mv: 0.01,
            flat_window_ms: 1000.0,
            saturation_bp_ptp_mv: 0.005,
            saturation_run_ms: 40.0,
            noise_ratio_max: 8.0,
            noise_background_fraction: 0.05,
            unreadable_min_ms: 1000.0,
            missing_guard_ms: 150.0,
            fiducial_smoothing_ms: 20.0,
            template_half_width_ms: 100.0,
            label_corr_min: 0.85,
            label_width_excess_ms: 30.0,
            label_width_energy_fraction: 0.05,
            label_premature_fraction: 0.85,
            fiducial_realign_ms: 80.0,
            fiducial_realign_min_ms: 20.0,
        }
    }
}

impl DetectConfig {
    /// Range checks, keys reported under `detect.`.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("detect");
        c.range("bandpass_low_hz", self.bandpass_low_hz, 0.5, 30.0, "Hz")
            .range("bandpass_high_hz", self.bandpass_high_hz, 5.0, 60.0, "Hz")
            .require(
                self.bandpass_low_hz < self.bandpass_high_hz,
                "bandpass_high_hz",
                "above bandpass_low_hz",
                self.bandpass_high_hz,
            )
            .one_of("bandpass_order", &self.bandpass_order, &[2, 4])
            .range("mwi_window_ms", self.mwi_window_ms, 50.0, 400.0, "ms")
            .range("refractory_ms", self.refractory_ms, 100.0, 400.0, "ms")
            .range(
                "t_wave_window_ms",
                self.t_wave_window_ms,
                200.0,
                600.0,
                "ms",
            )
            .range(
                "t_wave_late_window_ms",
                self.t_wave_late_window_ms,
                0.0,
                1500.0,
                "ms",
            )
            .range(
                "t_wave_late_amp_frac",
                self.t_wave_late_amp_frac,
                0.0,
                1.0,
                "",
            )
            .range("t_wave_slope_ratio", self.t_wave_slope_ratio, 0.0, 1.0, "")
            .range(
                "searchback_rr_fraction",
                self.searchback_rr_fraction,
                1.1,
                3.0,
                "",
            )
            .range(
                "searchback_threshold_factor",
                self.searchback_threshold_factor,
                0.1,
                1.0,
                "",
            )
            .range("threshold_fraction", self.threshold_fraction, 0.05, 0.9, "")
            .range("signal_peak_weight", self.signal_peak_weight, 0.01, 1.0, "")
            .range(
                "searchback_peak_weight",
                self.searchback_peak_weight,
                0.01,
                1.0,
                "",
            )
            .range("noise_peak_weight", self.noise_peak_weight, 0.01, 1.0, "")
            .range(
                "irregular_threshold_factor",
                self.irregular_threshold_factor,
                0.1,
                1.0,
                "",
            )
            .range(
                "rr_average_beats",
                self.rr_average_beats as f64,
                1.0,
                64.0,
                "beats",
            )
            .range("rr_low_fraction", self.rr_low_fraction, 0.5, 1.0, "")
            .range("rr_high_fraction", self.rr_high_fraction, 1.0, 2.0, "")
            .range("learning_ms", self.learning_ms, 500.0, 10000.0, "ms")
            .range(
                "learning_signal_fraction",
                self.learning_signal_fraction,
                0.01,
                1.0,
                "",
            )
            .range(
                "learning_noise_fraction",
                self.learning_noise_fraction,
                0.0,
                1.0,
                "",
            )
            .range("relearn_ms", self.relearn_ms, 0.0, 600_000.0, "ms")
            .range(
                "fusion_block_ms",
                self.fusion_block_ms,
                500.0,
                20000.0,
                "ms",
            )
            .range(
                "fusion_scale_blocks",
                self.fusion_scale_blocks as f64,
                1.0,
                51.0,
                "blocks",
            )
            .require(
                self.fusion_scale_blocks % 2 == 1,
                "fusion_scale_blocks",
                "an odd number",
                self.fusion_scale_blocks,
            )
            .range(
                "quality_background_percentile",
                self.quality_background_percentile,
                1.0,
                90.0,
                "%",
            )
            .range(
                "quality_background_step_ms",
                self.quality_background_step_ms,
                0.0,
                100.0,
                "ms",
            )
            .range(
                "quality_weight_power",
                self.quality_weight_power,
                0.0,
                10.0,
                "",
            )
            .range("flat_ptp_mv", self.flat_ptp_mv, 0.0, 1.0, "mV")
            .range("flat_window_ms", self.flat_window_ms, 100.0, 10000.0, "ms")
            .range(
                "saturation_bp_ptp_mv",
                self.saturation_bp_ptp_mv,
                0.0,
                1.0,
                "mV",
            )
            .range(
                "saturation_run_ms",
                self.saturation_run_ms,
                4.0,
                2000.0,
                "ms",
            )
            .range("noise_ratio_max", self.noise_ratio_max, 0.0, 100.0, "")
            .range(
                "noise_background_fraction",
                self.noise_background_fraction,
                0.0,
                10.0,
                "",
            )
            .range(
                "unreadable_min_ms",
                self.unreadable_min_ms,
                0.0,
                60000.0,
                "ms",
            )
            .range("missing_guard_ms", self.missing_guard_ms, 0.0, 2000.0, "ms")
            .range(
                "fiducial_smoothing_ms",
                self.fiducial_smoothing_ms,
                0.0,
                100.0,
                "ms",
            )
            .range(
                "template_half_width_ms",
                self.template_half_width_ms,
                40.0,
                300.0,
                "ms",
            )
            .range("label_corr_min", self.label_corr_min, 0.0, 1.0, "")
            .range(
                "label_width_excess_ms",
                self.label_width_excess_ms,
                0.0,
                200.0,
                "ms",
            )
            .range(
                "label_width_energy_fraction",
                self.label_width_energy_fraction,
                0.001,
                0.9,
                "",
            )
            .range(
                "fiducial_realign_ms",
                self.fiducial_realign_ms,
                0.0,
                200.0,
                "ms",
            )
            .range(
                "fiducial_realign_min_ms",
                self.fiducial_realign_min_ms,
                0.0,
                200.0,
                "ms",
            )
            .range(
                "label_premature_fraction",
                self.label_premature_fraction,
                0.3,
                1.0,
                "",
            );
        c.finish()
    }
}

fn check_input(leads: &[&[f64]], fs: f64, cfg: &DetectConfig) -> Result<(), DetectError> {
    cfg.validate().map_err(DetectError::Config)?;
    if !(fs.is_finite() && fs >= 100.0) {
        return Err(DetectError::BadSampleRate(fs));
    }
    if cfg.bandpass_high_hz >= fs / 2.0 {
        return Err(DetectError::BandAboveNyquist {
            hi_hz: cfg.bandpass_high_hz,
            fs,
        });
    }
    let Some(first) = leads.first() else {
        return Err(DetectError::NoLeads);
    };
    for (i, l) in leads.iter().enumerate() {
        if l.len() != first.len() {
            return Err(DetectError::LengthMismatch {
                lead: i,
                len: l.len(),
                expected: first.len(),
            });
        }
    }
    Ok(())
}

/// Mark the stretches `missing` (half-open sample ranges where every analysed
/// lead had no sample, later bridged) as unreadable with reason `missing`, and
/// drop the beats within `missing_guard_ms` of them; returns how many beats were
/// dropped. Labels of the remaining beats are kept as detected.
pub fn exclude_missing(
    det: &mut Detection,
    missing: &[(usize, usize)],
    fs: f64,
    cfg: &DetectConfig,
) -> usize {
    if missing.is_empty() {
        return 0;
    }
    let guard = (cfg.missing_guard_ms * fs / 1000.0).round().max(0.0) as usize;
    let before = det.beats.len();
    det.beats.retain(|b| {
        !missing
            .iter()
            .any(|&(s, e)| b.sample + guard >= s && b.sample < e + guard)
    });
    det.unreadable.extend(
        missing
            .iter()
            .filter(|(s, e)| e > s)
            .map(|&(start, end)| Span {
                start,
                end,
                reason: "missing".into(),
            }),
    );
    det.unreadable.sort_by_key(|s| (s.start, s.end));
    before - det.beats.len()
}

/// Detect, place and label the beats of one record from all its leads.
///
/// Non-finite samples (gaps) are treated as a flat lead at that place.
pub fn detect(leads: &[&[f64]], fs: f64, cfg: &DetectConfig) -> Result<Detection, DetectError> {
    check_input(leads, fs, cfg)?;
    Ok(fuse::detect_fused(leads, fs, cfg))
}

/// Single-lead Pan–Tompkins: QRS fiducial points (extremum of the band-passed
/// lead within ±half the integration window of each integrated-signal peak).
///
/// Invalid `fs` or configuration yields no beats; use [`detect`] for typed errors.
pub fn detect_lead(x: &[f64], fs: f64, cfg: &DetectConfig) -> Vec<usize> {
    if check_input(&[x], fs, cfg).is_err() || x.len() < 3 {
        return Vec::new();
    }
    let clean: Vec<f64> = x
        .iter()
        .map(|v| if v.is_finite() { *v } else { 0.0 })
        .collect();
    let f = pt::lead_features(&clean, fs, cfg);
    let filt: Vec<f64> = f.bp.iter().map(|v| v.abs()).collect();
    let slope: Vec<f64> = f.d2.iter().map(|v| v.sqrt()).collect();
    let beats = pt::decide(&f.mwi, &filt, &slope, fs, cfg);
    let h = pt::ms_to_samples(cfg.mwi_window_ms, fs) / 2;
    let mut out: Vec<usize> = beats
        .iter()
        .map(|b| fuse::argmax_in(&filt, b.index.saturating_sub(h), b.index + h + 1))
        .collect();
    out.dedup();
    out
}

/// Counts of a beat-by-beat comparison.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct MatchStats {
    /// Reference beats with a detection within the window.
    pub tp: usize,
    /// Reference beats without one.
    pub fn_: usize,
    /// Detections matched to no reference beat.
    pub fp: usize,
}

impl MatchStats {
    /// Sensitivity tp / (tp + fn), 1 when there is no reference beat.
    pub fn sensitivity(&self) -> f64 {
        if self.tp + self.fn_ == 0 {
            1.0
        } else {
            self.tp as f64 / (self.tp + self.fn_) as f64
        }
    }
    /// Positive predictivity tp / (tp + fp), 1 when nothing was detected.
    pub fn positive_predictivity(&self) -> f64 {
        if self.tp + self.fp == 0 {
            1.0
        } else {
            self.tp as f64 / (self.tp + self.fp) as f64
        }
    }
    /// Sum of two comparisons.
    pub fn add(&mut self, o: MatchStats) {
        self.tp += o.tp;
        self.fn_ += o.fn_;
        self.fp += o.fp;
    }
}

/// One-to-one matching of detections to reference beats: a pair matches when
/// `|d − r| <= window` (samples). Both lists must be sorted ascending.
///
/// Each reference beat, in time order, takes the earliest unused detection
/// that is still within its window; on a line this greedy order gives the
/// largest possible number of pairs (the same argument as for interval
/// scheduling), so `tp` is the maximum matching.
pub fn match_beats(reference: &[i64], detected: &[i64], window: i64) -> MatchStats {
    let mut j = 0usize;
    let mut tp = 0usize;
    for &r in reference {
        while j < detected.len() && detected[j] < r - window {
            j += 1;
        }
        if j < detected.len() && detected[j] <= r + window {
            tp += 1;
            j += 1;
        }
    }
    MatchStats {
        tp,
        fn_: reference.len() - tp,
        fp: detected.len() - tp,
    }
}

#[cfg(test)]
mod tests;
