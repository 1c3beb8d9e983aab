//! The `[delineate]` table of `pipeline.toml`: every threshold of the boundary
//! rules, the search windows and the cross-lead combination.
//!
//! Fractions named `xi_*` are the onset/offset factors ξ of Martínez et al.
//! (IEEE TBME 2004): a boundary is placed where |W_k| falls below ξ times the
//! modulus maximum that starts the search (or at the first local minimum of
//! |W_k|, whichever comes first). Fractions named `gamma_*` decide which modulus
//! maxima are significant. All durations are in milliseconds and are converted
//! at the analysis rate `analysis_fs_hz`.

use serde::{Deserialize, Serialize};
use tendline_params::{Checker, ParamError};

use crate::TEndMethod;

/// Parameters of wave delineation (table `delineate`).
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct DelineateConfig {
    /// Rate (Hz) at which the wavelet analysis runs; other input rates are
    /// resampled to it and marks mapped back. The rules were designed at 250 Hz
    /// (Martínez et al. 2004).
    pub analysis_fs_hz: f64,
    /// RR interval (ms) assumed when a beat has no neighbour (single median beat).
    pub default_rr_ms: f64,

    /// Half-width (ms) of the window around the given QRS fiducial in which
    /// the main QRS slope pair is looked for at scale 2^2.
    pub qrs_search_ms: f64,
    /// How far before the main QRS peak (ms) other QRS waves may start.
    /// Default 80: 100 let the onset walk into the P wave of short PR
    /// intervals (QTDB QRS-onset SD 16.0 -> 14.9 ms, LUDB 15.6 -> 14.4 ms).
    pub qrs_pre_ms: f64,
    /// How far after the main QRS peak (ms) other QRS waves may end.
    pub qrs_post_ms: f64,
    /// Wide complexes: the walk through the complex's maxima after the main
    /// pair may go on past `qrs_post_ms`, up to this long (ms) after the main
    /// QRS peak, through maxima that pass the wide-complex test
    /// (`qrs_wide_frac_post` of the largest) and `qrs_post_wide_noise_k`
    /// times the lead's noise level (0 = off). Paced and bundle-branch-block
    /// complexes last 140-200 ms (common practice) and their main peak may be
    /// the first deflection, so their final limb lies past a limit that
    /// suits narrow complexes; the QRS end was then put at the trough of the
    /// last wave (QTDB's paced sel102, about 35 ms early). The multi-lead
    /// envelope window widens the same way for a beat that a lead marks past
    /// `qrs_post_ms`. Default 160 (off before): QTDB global QRS end 4.1 +/-
    /// 17.8 -> 4.9 +/- 16.1 ms (odd-positioned records SD 14.2 unchanged,
    /// even 20.4 -> 17.5; the paced sel102 mean -33.5 -> -10.4 ms, sel104
    /// -15.5 -> +1.2 ms), sensitivity 100 -> 99.97 %; LUDB per-lead QRS end
    /// -2.5 +/- 16.0 -> -2.1 +/- 15.4 ms (odd-numbered records SD 14.9 ->
    /// 14.8, even 16.9 -> 15.9; found on QTDB, it also mends LUDB's paced
    /// records: 34 -21.5 +/- 30.8 -> -0.7 +/- 12.8 ms, 74 -30.0 -> -10.5 ms
    /// mean, 45 SD 19.1 -> 15.3, 95 SD 12.8 -> 10.1 ms); other marks within
    /// 0.1 ms and one beat.
    /// 140 / 200 ms (noise test off): QTDB 4.8 +/- 16.6 / 5.3 +/- 16.2 ms.
    /// Raising `qrs_post_ms` itself to 150 / 180 ms instead: QTDB 5.4 +/-
    /// 16.6 / 8.0 +/- 24.0 ms, narrow complexes of other records worse
    /// (sel302 SD 7.7 -> 22.0 ms at 150).
    pub qrs_post_wide_ms: f64,
    /// See `qrs_post_wide_ms`: multiple of the lead's noise level at scale
    /// 2^2 (dimensionless) that a maximum past `qrs_post_ms` must exceed, so
    /// that noise on a low-amplitude lead does not carry the QRS end into
    /// the ST segment. Default 8 (QTDB global QRS end with 0 / 4 / 8 / 16:
    /// 5.1 +/- 16.1 / 5.1 +/- 16.0 / 4.9 +/- 16.1 / 4.4 +/- 17.2 ms; at 0
    /// the noisy second lead of sel48 went late, SD 18.4 -> 25.4 ms, and the
    /// LUDB T-peak SD rose 21.8 -> 22.0 ms; at 8 only the paced records
    /// change on QTDB).
    pub qrs_post_wide_noise_k: f64,
    /// A modulus maximum joins the QRS complex (before or after the main
    /// slope pair, by any of the joining rules) only above this multiple of
    /// the lead's robust |W_2| noise level (1.4826 x median |W_2| over the
    /// record; dimensionless; 0 = off). On a noisy lead the ripples of the
    /// noise next to the complex pass the rules relative to the complex's
    /// largest maximum and carried the boundaries outward: muscle-like noise
    /// added at 12 dB (scripts/validate_noise.py) put the LUDB per-lead QRS
    /// end 61 ms late and the onset 26 ms early, QTDB's global QRS end 71 ms
    /// late. Default 2: LUDB per-lead QRS onset 6.6 +/- 10.60 -> 6.9 +/-
    /// 10.43 ms, QRS end -1.2 +/- 12.43 -> -1.8 +/- 11.88 ms (odd-numbered
    /// records 12.68 -> 11.89, even 12.18 -> 11.86); QTDB global QRS onset
    /// 1.8 +/- 13.41 -> 2.5 +/- 13.35 ms, end 4.5 +/- 15.29 -> 3.7 +/- 15.22;
    /// window QT unchanged. With 12-dB muscle noise: LUDB QRS end +60.7 ->
    /// -3.5 ms, onset -25.8 -> +14.5 ms; QTDB end +71.3 -> +12.4 ms. 1.5:
    /// LUDB end 12.22 ms; 2.5 / 3: LUDB end 11.75 / 11.65 ms but QTDB QRS
    /// end 15.74 / 16.10 ms; 5: QTDB onset 16.2 ms.
    pub qrs_chain_noise_k: f64,
    /// Modulus maxima before the main peak are significant above this fraction
    /// of the largest |W_2| of the complex (Martínez 2004: 0.06).
    pub qrs_gamma_pre: f64,
    /// Same, after the main peak (Martínez 2004: 0.09).
    pub qrs_gamma_post: f64,
    /// A maximum after the main pair of the same sign as the complex's
    /// current last one (a slope going on in the same direction) is
    /// significant only above this fraction, when larger than
    /// `qrs_gamma_post` (dimensionless; 0 = `qrs_gamma_post` for all).
    /// Default 0 (off). 0.12: LUDB per-lead QRS end -1.1 +/- 18.7 ->
    /// -2.4 +/- 18.3 ms (odd-numbered records SD 17.5 -> 17.0, even 19.8 ->
    /// 19.5), LUDB global 0.6 +/- 17.3 -> -1.6 +/- 16.8 ms; QTDB global
    /// 4.6 +/- 20.3 -> 2.7 +/- 20.0 ms but the odd-positioned records of
    /// RECORDS worse (SD 16.9 -> 17.9, even 23.0 -> 21.7): where one of the
    /// two leads ends earlier and the two then disagree by more than
    /// `global_outlier_ms`, `global_pair_qrs_end = confident` keeps the
    /// early lead (sel232, sele0704); with `outer` QTDB was worse still
    /// (7.3 +/- 22.5 ms). The QTDB window QT SD rose 23.4 -> 24.3 ms, all of
    /// it one window (sel36 at 600 s, error -72 -> -148 ms: the T window
    /// follows the QRS end). Raising `qrs_gamma_post` itself behaves the
    /// same way (0.105: LUDB per lead SD 17.9, QTDB odd 16.9 -> 17.4 ms;
    /// 0.12: LUDB 17.7, QTDB odd 18.2 ms).
    pub qrs_gamma_post_same: f64,
    /// Consecutive significant maxima of one complex are at most this far
    /// apart (ms); a larger gap ends the complex.
    pub qrs_chain_gap_ms: f64,
    /// Maxima before the main pair of at least this fraction of the largest
    /// join the complex even when up to `qrs_wide_gap_ms` away (wide and
    /// paced complexes). Default 0.2 (0.3 before: QTDB QRS-onset SD
    /// 14.9 -> 13.2 ms, LUDB unchanged).
    pub qrs_wide_frac: f64,
    /// Same, for maxima after the main pair. Default 0.15 (0.3 before: QTDB
    /// QRS-end SD 25.3 -> 21.6 ms, LUDB 20.6 -> 19.8 ms).
    pub qrs_wide_frac_post: f64,
    /// See `qrs_wide_frac` (ms).
    pub qrs_wide_gap_ms: f64,
    /// An opposite-sign maximum within `qrs_adjacent_gap_ms` of the complex
    /// joins it when above this fraction of the largest (small Q and S waves).
    /// Default 1 (off): on QTDB and LUDB it added more outliers than it removed.
    pub qrs_adjacent_frac: f64,
    /// See `qrs_adjacent_frac` (ms).
    pub qrs_adjacent_gap_ms: f64,
    /// Rising-ST cut at the QRS end: in the outermost run of same-sign
    /// |W_2| maxima after the main pair (no sign change between them), where
    /// |W_2| between two of them falls below this fraction of the inner one,
    /// the later ones are a slope of another wave (a rising ST segment, a
    /// slow T upstroke) and the complex ends at the inner one
    /// (dimensionless; 0 = off). Default 0 (off). On both databases the
    /// slope tails of a few records are cut, but terminal slurs that the
    /// cardiologists count as QRS are cut too: 0.10 with
    /// `qrs_valley_lobe_frac` 0.15 and `qrs_valley_min_lobes` 2 gave QTDB
    /// global QRS end 4.6 +/- 20.3 -> 4.4 +/- 19.8 ms (odd-positioned
    /// records of RECORDS SD 16.9 -> 17.0, even 23.0 -> 22.0; most of the
    /// gain from sel213), LUDB per lead -1.1 +/- 18.7 -> -1.2 +/- 18.7 ms
    /// (odd-numbered records SD 17.46 -> 17.44, even 19.75 -> 19.84, paced
    /// record 34 worse), LUDB global 0.6 +/- 17.3 -> 0.6 +/- 17.3 ms, window
    /// QT unchanged. Without the two conditions (any lobe size, one lobe
    /// enough) paced and slurred complexes were cut short: 0.10 gave QTDB
    /// 3.4 +/- 21.0 and LUDB per lead -2.0 +/- 19.2 ms.
    pub qrs_valley_frac_post: f64,
    /// See `qrs_valley_frac_post`: only maxima below this fraction of the
    /// complex's largest |W_2| maximum are cut (dimensionless).
    pub qrs_valley_lobe_frac: f64,
    /// See `qrs_valley_frac_post`: only runs of at least this many maxima
    /// beyond the valley are cut (a persisting slope, not one terminal lobe;
    /// count).
    pub qrs_valley_min_lobes: usize,
    /// Initial q lobe: an opposite-sign |W_2| maximum at most this far before
    /// the first maximum of the complex joins it when it also passes
    /// `qrs_q_noise_k` and `qrs_q_min_frac` (ms; 0 = off; a q wave lasts
    /// under about 40 ms, from memory). Default 0 (off): 40 with
    /// `qrs_q_xi_on` 0.5 lowered the QRS-onset SD (LUDB per lead 5.1 +/- 14.4
    /// -> 3.7 +/- 14.0 ms, record halves odd 13.6 -> 13.3, even 15.1 -> 14.7;
    /// QTDB global 1.3 +/- 13.7 -> 0.9 +/- 13.5 ms, odd 11.9 -> 11.6, even
    /// 15.0 -> 14.8) but raised the QTDB window QT SD 23.3 -> 24.2 ms, above
    /// the ceiling of crates/measure/tests/qtdb_qt.rs. Re-measured on the
    /// current defaults: QTDB window QT -4.3 +/- 23.4 -> -2.8 +/- 24.4 ms
    /// (384 -> 385 windows), mostly one window of sel44 (610-620 s, error
    /// -140 ms) that gets a QT only with the rule; it also moves the late
    /// onsets of sel103, sel33 and sele0136 (per-record mean 16.0, 13.9,
    /// 15.1 -> 2.0, 3.7, 7.7 ms), while on median beats of sel213, whose
    /// T end is late, the earlier onset lengthens the window QT by 12-24 ms.
    pub qrs_q_gap_ms: f64,
    /// See `qrs_q_gap_ms`: the q lobe must exceed this multiple of the
    /// lead's robust |W_2| noise level (1.4826 x median |W_2|).
    pub qrs_q_noise_k: f64,
    /// See `qrs_q_gap_ms`: the q lobe must exceed this fraction of the
    /// complex's largest |W_2| maximum.
    pub qrs_q_min_frac: f64,
    /// ξ for the QRS onset relative to a joined q lobe's own maximum.
    pub qrs_q_xi_on: f64,
    /// ξ for QRS onset at scale 2^2.
    pub qrs_xi_on: f64,
    /// The QRS onset threshold is at least this fraction of the complex's
    /// largest |W_2| maximum (0 = Martínez's rule alone: `qrs_xi_on` times
    /// the first maximum). Default 0 (off): 0.02 lowered the QRS-onset SD
    /// (QTDB global 13.7 -> 13.3 ms, LUDB per lead 14.4 -> 14.1 ms, both
    /// record halves) but moved onsets later (QTDB mean 1.3 -> 2.0 ms) and
    /// with them the QTDB window QT bias from -4.6 to -5.6 ms.
    pub qrs_xi_on_rel: f64,
    /// The QRS end threshold is at least this fraction of the complex's
    /// largest |W_2| maximum (0 = off). Default 0.03: QTDB global QRS end
    /// 4.5 +/- 21.4 -> 4.0 +/- 21.1 ms, LUDB per-lead -1.0 +/- 19.5 -> -1.4
    /// +/- 19.2 ms, both record halves of each lower; window QT unchanged.
    pub qrs_xi_end_rel: f64,
    /// The QRS end threshold (`qrs_xi_end_pos` / `qrs_xi_end_neg` times the
    /// last maximum) is at most this multiple of the lead's W_2 noise level
    /// (1.4826 times the median |W_2| over the lead; 0 = off), but never
    /// below `qrs_xi_end_rel` times the complex's largest maximum (which
    /// holds where there is no noise: a noise-free signal, a median beat).
    /// Why: for a large complex the threshold relative to its last maximum
    /// lies far above the level where its return to the baseline stops
    /// being visible, so large complexes ended early (LUDB per lead, mean
    /// QRS-end error by fifths of the mark confidence, lowest to highest:
    /// +3.5, 0.0, -2.7, -4.2, -4.8 ms). Default 3 (off before): QTDB global
    /// QRS end 3.74 +/- 15.03 -> 4.27 +/- 14.76 ms (odd- / even-positioned
    /// records 15.67 -> 15.55 / 14.27 -> 13.77), LUDB per lead -1.65 +/-
    /// 11.76 -> -0.05 +/- 11.41 (odd / even records 11.86 -> 11.46 / 11.66
    /// -> 11.37), LUDB global -4.66 +/- 12.19 -> -3.34 +/- 11.66; window
    /// QT unchanged. At 2: QTDB 5.11 +/- 14.61 (the bias past the 5 ms
    /// target), LUDB per lead 11.40. Measured without the floor (the cap
    /// alone) at 1.5 / 2 / 2.5 / 3 / 4: QTDB SD 14.58 / 14.59 / 14.67 /
    /// 14.76 / 14.82, LUDB per lead 11.35 / 11.31 / 11.35 / 11.37 / 11.45.
    /// The same cap on the QRS onset threshold (k = 1 / 2) moved LUDB per
    /// lead 10.02 -> 9.86 / 9.94 ms but QTDB global 12.98 -> 13.10 / 13.01
    /// and LUDB global 9.43 -> 9.54 / 9.52 (the earliest lead's onset earlier
    /// still): not built. On the wavelet T end (k = 1 / 2 / 4): QTDB 31.22 ->
    /// 32.08 / 31.27 / 31.15, LUDB per lead 21.68 -> 22.01 / 21.50 / 21.62:
    /// not built.
    pub qrs_end_noise_cap_k: f64,
    /// Whether `qrs_end_noise_cap_k` applies to the median beats of the
    /// measurement stage too. Default false: a median beat's noise is what
    /// is left after averaging, far below a single beat's, and the capped
    /// end ran on into the ST segment: QTDB window QRS duration 3.2 +/- 21.4
    /// -> 7.9 +/- 22.4 ms with the cap at 3 (LUDB -15.5 +/- 15.4 -> -11.1 +/-
    /// 16.5 against the lead files' latest end).
    pub median_beat_noise_caps: bool,
    /// ξ for QRS end at scale 2^2 when the last maximum is positive (rising
    /// S). Default 0.16 (0.125 before), set together with `qrs_xi_end_neg`.
    pub qrs_xi_end_pos: f64,
    /// ξ for QRS end at scale 2^2 when the last maximum is negative (falling
    /// R). Default 0.10 (0.2 before): a falling R often ends in a slow,
    /// slurred limb that the higher threshold cut off (QRS ends were early
    /// in V5-V6: LUDB -6.7 and -8.6 ms). Lowering only this one moved the
    /// QTDB global QRS end later (mean 4.0 -> 5.3 ms at 0.10, 6.6 at 0.05),
    /// so the rising-S threshold went up to 0.16, where lowering it had
    /// made both databases worse (0.10: QTDB SD 21.1 -> 21.3, LUDB 19.2 ->
    /// 19.3 ms). The pair 0.10/0.16: QTDB global QRS end 4.0 +/- 21.1 ->
    /// 4.6 +/- 20.3 ms (odd-positioned records of RECORDS 3.5 +/- 18.2 ->
    /// 3.9 +/- 16.9, even 4.5 +/- 23.5 -> 5.2 +/- 23.0); LUDB per lead -1.4
    /// +/- 19.2 -> -1.3 +/- 18.8 ms (odd-numbered records SD 17.9 -> 17.5,
    /// even 20.5 -> 20.0); QTDB window QT SD 23.3 -> 23.4 ms, T end and QRS
    /// onset unchanged. 0.075/0.16 gave a QTDB mean of 5.1 ms, 0.10/0.20
    /// QTDB SD 20.2 but LUDB 18.9 ms.
    pub qrs_xi_end_neg: f64,
    /// Pacing spikes: a largest |W_2| maximum of the QRS search around
    /// which |W_1| exceeds this multiple of |W_2| is a spike, not a QRS
    /// slope, and is left out of the complex (dimensionless; 0 = off). A
    /// one-sample impulse gives about 2.7 at the analysis rate, a Gaussian
    /// slope of σ = 4 ms about 0.7 (W_k ∝ smoothed derivative, see
    /// tendline_dsp::wavelet). Default 2: it changes only the paced LUDB
    /// records (8, 34, 45, 74, 95; QTDB's paced sel102 and sel104 are
    /// unchanged): LUDB per-lead QRS onset 5.1 +/- 14.4 -> 5.2 +/- 14.2 ms
    /// (odd-numbered records SD 13.6 -> 13.6, even 15.1 -> 14.8), QRS end
    /// -1.3 +/- 18.8 -> -1.1 +/- 18.7 ms (odd 17.5 unchanged, even 20.0 ->
    /// 19.8). 1.75 and 1.5 caught more spikes (LUDB QRS onset SD 14.1 and
    /// 13.7 ms) but also slopes of unpaced records (LUDB 89, 91, 92) and
    /// made the odd-numbered half's QRS end worse (17.5 -> 17.6 ms).
    pub qrs_spike_ratio: f64,
    /// Half-width (ms) of the span masked around a pacing spike.
    pub qrs_spike_halfwidth_ms: f64,
    /// A QRS onset (per lead and global) found before the end of a pacing
    /// stimulus removed by the filter stage (`filter.pacing_blank`) that
    /// precedes the beat's QRS peak by at most `qrs_pre_ms` is moved to this
    /// many ms after the stimulus end (negative = off). Why: a paced complex
    /// cannot start before the stimulus that triggers it, yet the onset
    /// search runs back into the blanked stimulus, whose straight-line
    /// replacement joins the evoked complex's slow first slope. Only beats
    /// with such a stimulus change. Default 0 (off before), the bound alone:
    /// LUDB per-lead QRS onset 3.7 +/- 10.14 -> 3.7 +/- 10.02 ms (odd- /
    /// even-numbered records 10.00 -> 9.97 / 10.28 -> 10.06), QTDB
    /// unchanged. On the LUDB records with stimuli found (8, 34, 74) the
    /// cardiologists' onsets lie a median 10, 20 and 14 ms after the
    /// stimulus end (the start of the evoked complex), ours lay -6, 11 and 8
    /// ms after it; a protocol that marks the evoked onset may set a
    /// latency: 4 / 8 / 12 ms gave LUDB SD 9.97 / 9.92 / 9.87 ms and QTDB
    /// global QRS-onset SD 12.98 / 13.01 / 13.02 ms (12.98 at 0). The
    /// median beats of the measurement stage follow the same rule, with the
    /// stimulus at the median of their beats' stimulus-to-fiducial offsets
    /// when more than half of the beats are paced: LUDB window QRS duration
    /// (against the lead files' earliest onset and latest end) -15.3 +/-
    /// 15.97 -> -15.5 +/- 15.39 ms, window QT -10.6 +/- 24.66 -> -10.8 +/-
    /// 24.51 ms (longest lead, against the longest lead's reference QT);
    /// LUDB 34 / 74 window QRS 172 -> 164 / 188 -> 182 ms (the cardiologists'
    /// 154 / 161).
    pub qrs_stimulus_latency_ms: f64,
    /// Longest search (ms) from the first/last significant maximum to the
    /// QRS onset/end.
    pub qrs_boundary_search_ms: f64,

    /// T window starts this long (ms) after the main QRS peak ...
    pub t_window_start_ms: f64,
    /// ... and at least this long (ms) after the QRS end. Default 60 (20
    /// before: the late lobes of wide complexes were taken for the T wave;
    /// QTDB T-end SD 52.8 -> 49.7 ms, LUDB unchanged).
    pub t_window_after_qrs_end_ms: f64,
    /// A T wave may follow the QRS with almost no ST segment; then the
    /// window above cuts off its first limb and only the final limb is
    /// left, a lone lobe. Such a lone lobe is looked for again with the
    /// window starting this long (ms) after the QRS end, and the result is
    /// kept if the lobe gains an earlier partner. 0 = off. Default 20
    /// (off before): QTDB global T-end sensitivity 98.19 -> 98.45 % (odd
    /// records 97.32 -> 97.67, even 99.01 -> 99.18), SD 33.2 ms unchanged,
    /// T-peak SD 31.6 -> 31.1 ms; LUDB per-lead T-end sensitivity 98.45 ->
    /// 98.56 %, SD 24.4 ms unchanged. 10, 20 and 30 ms gave the same figures.
    pub t_window_early_after_qrs_end_ms: f64,
    /// A T wave found as a lone limb read as the first limb of a wave whose
    /// peak then lies on the wrong side of the PR-segment level (an
    /// inverted trough above it, an upright crest below it, by more than
    /// `t_polarity_margin_mv`) is read instead as the final limb of a wave of
    /// the opposite polarity, its peak at the last zero crossing of W_k after
    /// the QRS end, when that peak lies on its own side. Such a reading comes
    /// from an early T at a fast rate: the window cuts off the first limb
    /// and the next P wave's upstroke closes a false inverted wave. Default
    /// true (new): QTDB global T peak SD 30.60 -> 29.38 ms, sensitivity 99.01
    /// -> 99.32 %; T end SD 32.89 -> 31.34 ms, sensitivity 99.24 -> 99.21 %;
    /// P onset SD 20.72 -> 20.27 ms; window QT (superimposed) SD 21.98 ->
    /// 21.93 ms. The gain is in the even-positioned records (T end SD 36.57
    /// -> 33.60 ms; odd 28.88 -> 29.01) and mostly sel41 (T-end MAE 117.6 ->
    /// 16.0 ms). LUDB per lead: T peak SD 21.55 -> 21.50 ms, T end 21.66 ->
    /// 21.68 ms.
    pub t_polarity_recheck: bool,
    /// See `t_polarity_recheck`: how far (mV) a peak may lie on the wrong
    /// side of the PR-segment level before the other reading is tried.
    /// Default 0 (0.02 and 0.05 mV left more of the misread beats: QTDB T
    /// end SD 32.55 and 33.00 ms).
    pub t_polarity_margin_mv: f64,
    /// T window ends at this fraction of the following RR interval after the
    /// QRS peak ... Default 0.5 (0.55 before: QTDB T-end sensitivity 97.5 ->
    /// 98.1 %, odd-positioned records 96.3 -> 97.2, even 98.6 -> 99.0; window
    /// QT SD 32.5 -> 28.5 ms, odd 35.3 -> 30.1, even 29.6 -> 26.9; pooled
    /// T-end SD 33.5 -> 34.3 ms with the added beats; LUDB unchanged).
    pub t_window_end_rr_frac: f64,
    /// ... bounded below by this (ms) ...
    pub t_window_end_min_ms: f64,
    /// ... and above by this (ms).
    pub t_window_end_max_ms: f64,
    /// At slow rates, where `t_window_end_rr_frac` × RR exceeds
    /// `t_window_end_max_ms`, a T wave with only one lobe in the window is
    /// looked for again up to this long (ms) after the QRS peak (long QT),
    /// and the longer result kept if the lobe then has a partner. QTDB T-end
    /// SD 46.6 -> 42.7 ms (odd-numbered half 51.7 -> 44.9, even half and LUDB
    /// unchanged; the gain comes mostly from one long-QT record, sel33).
    pub t_window_slow_max_ms: f64,
    /// T is present if its steepest slope at scale 2^4 exceeds this (mV/s).
    /// Default 0.3 (0.5 before: low, flat T waves of some leads were left
    /// unmarked). LUDB per-lead T end: sensitivity 96.38 -> 98.45 %, SD
    /// 23.7 -> 24.3 ms (odd-numbered records 96.4 -> 98.3 %, even 96.3 ->
    /// 98.6 %; the added T ends are the harder ones); QTDB global T end
    /// sensitivity 98.14 -> 98.19 %, T peak 98.33 -> 98.50 %; QTDB window
    /// QT (superimposed) SD 24.1 -> 23.3 ms (odd-positioned records of
    /// RECORDS 25.4 -> 23.8, even 22.4 unchanged). 0.2 added little more
    /// sensitivity for a further rise in LUDB SD.
    pub t_min_slope_mv_per_s: f64,
    /// Maxima of |W_4| above this fraction of the largest in the T window are
    /// significant.
    pub t_gamma: f64,
    /// A third significant maximum at least this fraction of the largest makes
    /// the T biphasic.
    pub t_biphasic_frac: f64,
    /// Whether the onset/end of a biphasic T are searched from its outer
    /// lobes (true) or from the dominant slope pair (false, default: on QTDB
    /// and LUDB the third lobe was more often a U wave or noise than a real
    /// second phase, and T-end SD fell from 57 to 52 ms on QTDB and from 40
    /// to 30 ms on LUDB). The morphology is reported either way.
    pub t_biphasic_outer_bounds: bool,
    /// Modulus maxima further than this (ms) from the largest one in the T
    /// window are not part of the T wave. Default 1000 (off): 140-200 ms
    /// helped LUDB T end but made QTDB T end markedly worse.
    pub t_lobe_reach_ms: f64,
    /// When the largest |W_k| maximum of the T window has significant
    /// opposite-sign neighbours on both sides, the T is the pair with the
    /// earlier one if that is at least this fraction of the later one
    /// (1 = the larger neighbour wins). Default 0.7: QTDB T-end SD 49.7 ->
    /// 48.6 ms, LUDB 30.3 -> 28.3 ms.
    pub t_early_pair_frac: f64,
    /// When only one significant slope of the T wave is found, place the T
    /// peak at the next zero crossing of W_k in the window (otherwise the
    /// peak is left absent). On QTDB this raised T-peak sensitivity from
    /// 97.4 to 99.7 % at a cost of 3 ms in T-peak SD (the added peaks are the
    /// harder ones).
    pub t_peak_from_one_limb: bool,
    /// Which sign change of W_k between the two limbs of a T wave is its
    /// peak: `first` (after the first limb, Martínez et al. 2004) or
    /// `beside_larger_limb` (the one next to the limb with the larger slope).
    /// On a low, broad T wave W_k may change sign more than once between the
    /// limbs: a small wiggle after a weak limb is not the summit, which sits
    /// against the steep limb. Default `beside_larger_limb`: QTDB global
    /// T-peak sensitivity 98.84 -> 98.93 % (odd-positioned records 98.95 ->
    /// 99.13, even 98.74 unchanged; SD 31.2 ms unchanged); LUDB per-lead
    /// T peak 98.68 -> 98.73 %, SD 22.8 -> 22.5 ms (odd 24.6 -> 24.7, even
    /// 20.8 -> 20.1); LUDB T-end sensitivity 98.96 -> 98.92 %, SD 23.3 ms
    /// unchanged. The same choice for the P peak moved P positive
    /// predictivity up on QTDB and down on LUDB (98.16 -> 98.01 %): not made.
    pub t_peak_crossing: PeakCrossing,
    /// A T wave found by one limb only (peak at the next zero crossing of
    /// W_k) takes its final limb from the first opposite-sign extremum of
    /// W_k up to this long (ms) after that peak, even past the T window (fast
    /// rates); without one the peak is dropped. Before, the end was searched
    /// from the first limb and fell before the peak (QTDB sele0409).
    pub t_final_limb_reach_ms: f64,
    /// A lone T lobe with no peak ahead of it (see `t_final_limb_reach_ms`)
    /// is read as the final limb of a T wave whose first limb merges with
    /// the end of the QRS (short or absent ST segment): its peak is the last
    /// zero crossing of W_k between the QRS end and the lobe, and the end is
    /// searched from the lobe. Without it the beat has a T end but no peak,
    /// and no T wave is written. Default on: QTDB global T-end sensitivity
    /// 98.45 -> 98.81 %, T peak 98.53 -> 98.84 % (sel40, sel44), SD
    /// unchanged (33.2 -> 33.3 ms); LUDB per-lead T end 98.56 -> 98.64 %
    /// (six records), SD unchanged; window QT unchanged.
    pub t_lone_limb_look_back: bool,
    /// Second pass per lead: a T peak more than this (ms) from where the
    /// neighbouring beats put it is searched again within
    /// ±`t_recheck_window_ms` of that place (0 = off); only the T marks are
    /// replaced. Default 80 (off before; when first measured, with older
    /// rules, it raised QTDB T-peak SD from 36.1 to 38.4 ms). Measured with
    /// the present rules, QTDB global: T-end sensitivity 99.15 -> 99.21 %,
    /// SD 33.7 -> 33.0 ms (odd-positioned records 32.2 -> 31.3, even 35.1 ->
    /// 34.5; sensitivity odd 98.95 -> 98.89, even 99.34 -> 99.51); T peak
    /// 98.93 -> 98.90 %, mean 6.1 -> 7.9 ms, SD 31.2 ms unchanged. LUDB per
    /// lead: T end 98.92 -> 99.07 %, SD 23.3 -> 23.0 ms (odd 24.6 -> 24.2,
    /// even 21.8 -> 21.7); T peak 98.73 -> 98.91 %, SD 22.5 -> 21.8 ms (both
    /// halves lower). 60 and 120 ms gave figures within 0.2 ms and 0.1 %;
    /// window half-widths 120 and 200 ms traded T-peak SD against T-end
    /// sensitivity. Window QT unchanged.
    pub t_recheck_ms: f64,
    /// ... only for beats whose preceding RR interval is within this
    /// fraction of the neighbours' median RR. Default 0.3 (0.15 before):
    /// the QT follows RR by roughly its cube root (Fridericia), so an RR 30 %
    /// off its neighbours moves the T peak by some 30 ms, well inside the
    /// `t_recheck_window_ms` window around the neighbours' place; beyond that
    /// (premature beats, pauses) the T legitimately moves more. With the
    /// window at 80 ms: QTDB global T peak 23.40 -> 23.07 ms, T end 30.63 ->
    /// 30.33 (odd-positioned records 28.2 -> 27.7, even 33.0 -> 33.0); LUDB
    /// per lead within 0.05 ms; 0.5 and 1.0 gave the QTDB figures of 0.3.
    pub t_recheck_rr_frac: f64,
    /// Half-width (ms) of the second-pass T window around the expected peak
    /// (this rule's and `lead_t_near_global`'s). Default 80 (160 before):
    /// a window as wide as a whole T wave lets the second search take the
    /// same wrong lobe again. Measured with the other defaults, 160 -> 80 ms:
    /// QTDB global T peak 24.42 -> 23.40 ms (odd / even records 21.8 -> 20.3
    /// / 27.1 -> 26.4), T end 31.09 -> 30.63 (28.8 -> 28.2 / 33.3 -> 33.0),
    /// sensitivity 99.24 -> 99.27 %; LUDB per lead T peak 21.61 -> 20.03
    /// (23.2 -> 21.7 / 19.9 -> 18.3), T end 21.66 -> 21.19 (22.4 -> 22.3 /
    /// 20.9 -> 20.1), T-end sensitivity 99.16 -> 99.08 %; LUDB global T end
    /// 27.34 -> 27.68 ms (the one figure that rose); window QT unchanged (the
    /// median beats have no neighbours). 40 / 60 / 70 / 90 / 100 / 120 ms:
    /// QTDB T end 32.18 / 31.08 / 30.84 / 30.74 / 30.64 / 30.70, LUDB per
    /// lead T end 22.10 / 21.43 / 21.32 / 21.03 / 21.12 / 21.21 ms.
    /// Record-level 5-fold cross-validation (`tendline tune`, grid of 40 /
    /// 60 / 80 / 120 / 160 ms and `t_recheck_rr_frac` 0.15 / 0.3 / 0.6, the
    /// tune objective): on QTDB every fold's training records chose 80 ms
    /// and 0.3; on LUDB (the leads' references combined) every fold chose
    /// 60 ms, for a held-out objective of 6.760 against 6.786 with 80 ms.
    pub t_recheck_window_ms: f64,
    /// ξ for T onset (Martínez 2004: 0.25).
    pub t_xi_on: f64,
    /// ξ for T end (Martínez 2004: 0.4). Default 0.4 (0.5 before: T end
    /// was early on average; QTDB global T-end mean -4.2 -> 1.1 ms, SD 34.0
    /// -> 33.5 ms, odd- and even-positioned records alike; window QT bias
    /// -9.1 -> -3.4 ms; LUDB per-lead T-end mean -3.2 -> 2.0 ms).
    pub t_xi_end: f64,
    /// Place the wavelet T end by linear interpolation of the threshold
    /// crossing between analysis samples (true) instead of at the midpoint
    /// of the two samples around it (false), so QT is not quantised to the
    /// analysis sample (4 ms at 250 Hz), which matters for QT changes of a
    /// few ms between recordings.
    pub t_end_interpolate: bool,
    /// Place the other threshold boundaries (QRS onset and end per lead, P
    /// onset and end, T onset) the same way: by linear interpolation of the
    /// threshold crossing between analysis samples (true) instead of at the
    /// midpoint of the two samples around it (false). It matters above the
    /// analysis rate, where marks are written at the input's finer sample.
    /// Default true (false before). LUDB per lead (500 Hz): P-end SD 14.92
    /// -> 14.65 ms (odd-positioned records 14.20 -> 13.93, even 15.66 ->
    /// 15.38), P-onset SD 15.26 -> 15.20 ms, QRS onset and end within 0.02
    /// ms; window QT against the longest lead's reference 23.7 -> 24.0 ms
    /// (100 windows). QTDB global (250 Hz, the analysis rate, so only
    /// through the windows that follow from these marks): P-onset Se 97.18
    /// -> 97.28 %, T-peak SD 29.38 -> 29.15 ms, T-end SD 31.34 -> 31.22 ms.
    pub boundary_interpolate: bool,
    /// Longest search (ms) from the last significant maximum to the T end.
    pub t_end_search_ms: f64,
    /// Method whose T end goes in `t_end`.
    pub t_end_method: TEndMethod,
    /// Window (ms) of the area indicator for the area T-end method
    /// (Zhang et al. 2006).
    pub t_area_window_ms: f64,
    /// Search for the area T end up to this long (ms) after the wavelet T end.
    pub t_area_search_after_ms: f64,
    /// Two T-end methods of a beat agree when their ends lie within this (ms)
    /// of each other (0 = the agreement is not used).
    pub t_end_method_agree_ms: f64,
    /// Weight w of the agreement between T-end methods in the reported
    /// confidence of each T-end mark (per lead and global): the confidence
    /// is multiplied by 1 - w + w * a, a the fraction of the beat's other
    /// T-end marks that agree with it (a mark with no other method to compare
    /// keeps its confidence). It is applied last: choices between leads and
    /// the confidence floors use the confidence from slope and noise (used
    /// there, the agreement lowered QTDB global T-end sensitivity from 99.15
    /// to 98.87 % at w = 0.5). On QTDB global T ends matched to annotator 1,
    /// ends whose methods all agree erred by 19.7 ms on average (mean
    /// absolute error), against 36.8 ms when half agree and 33.9 ms when none
    /// does.
    pub t_end_method_agree_weight: f64,

    /// P window starts this long (ms) before the QRS onset, bounded by the
    /// previous T end (`p_after_t_end_ms`). Default 340 (250 before), see
    /// `p_window_gap_ms`.
    pub p_window_ms: f64,
    /// P window ends this long (ms) before the QRS onset. Default 20 (8
    /// before: the first QRS slope was taken as the P's last lobe). Together
    /// with `p_window_ms` = 340: QTDB P-onset SD 22.9 -> 21.4 ms, P-end SD
    /// 23.9 -> 21.9 ms at unchanged sensitivity; LUDB P-onset SD 21.2 -> 18.8
    /// ms, P-end SD 25.4 -> 19.0 ms.
    pub p_window_gap_ms: f64,
    /// The P window starts at least this long (ms) after the previous beat's
    /// wavelet T end (Martínez et al. 2004 bound the P search by the
    /// preceding T). QTDB P-onset SD 25.9 -> 25.2 ms, LUDB P positive
    /// predictivity 88.8 -> 89.8 %.
    pub p_after_t_end_ms: f64,
    /// P is present if its steepest slope at scale 2^4 exceeds this (mV/s).
    pub p_min_slope_mv_per_s: f64,
    /// ... and its slope pair is at least this fraction of the QRS slope at 2^4.
    pub p_min_rel_qrs: f64,
    /// Maxima of |W_4| above this fraction of the largest in the P window are
    /// significant.
    pub p_gamma: f64,
    /// Modulus maxima further than this (ms) from the largest one in the P
    /// window are not part of the P wave. Default 120: on both QTDB and LUDB
    /// it lowered the P boundary SD by 3-6 ms at a cost of ~2 points of P
    /// sensitivity.
    pub p_lobe_reach_ms: f64,
    /// Both opposite-sign neighbours of the largest |W_4| maximum in the P
    /// window above this fraction of it make the P biphasic, and its onset
    /// and end are then searched from the outer lobes (fraction; above 1:
    /// never, the P is always read from its main lobe pair). Default 0.4,
    /// with `p_early_pair_frac` 1.5 (1.1, off, before; see there for the
    /// figures). Earlier measurements, with the larger neighbour always
    /// making the pair (P on / P end mean ± SD ms; QTDB global, q1c; LUDB
    /// per-lead and global), with `p_outer_max_quiet_ms`:
    /// Off: QTDB 0.7 ± 20.9 / -4.5 ± 21.4 (odd records by name SD
    ///   17.21 / 16.13, even 24.09 / 25.39); LUDB per-lead -3.5 ± 19.55
    ///   (MAE 10.96) / -5.4 ± 19.88, global -0.2 ± 19.69 / -8.5 ± 13.67.
    /// 0.25, no check (-1): QTDB -1.4 ± 20.1 / -2.9 ± 20.2, odd P on SD
    ///   17.21 -> 17.8 (worse); LUDB per-lead P on -7.1 ± 23.0 (the earlier
    ///   lobe of another deflection pulls the onset one lobe early).
    /// 0.25, quiet 4 / 8 / 12 / 20 / 40 ms: QTDB P on SD 20.15 / 19.77 /
    ///   19.91 / 20.2 / 20.2, P end 21.17 / 21.08 / 21.21 / 21.1 / 20.0;
    ///   LUDB per-lead P on SD 19.55 / 19.60 / 19.74 / 20.0 / 20.3.
    ///   At 8: QTDB even records better (P on SD 24.09 -> 22.24, P end 25.39
    ///   -> 24.92), odd level (17.21 -> 17.19, MAE 11.56 both); LUDB per-lead
    ///   P on MAE 10.96 -> 11.03, global P end SD 13.67 -> 13.83, global P
    ///   on Se 99.40 -> 99.25 %: LUDB slightly worse, so left off.
    /// 0.40, quiet 12: QTDB 20.1 / 21.4; LUDB per-lead P on 19.6.
    pub p_biphasic_frac: f64,
    /// The outer lobe of a biphasic P is kept only when contiguous with the
    /// main pair: its slope reaches `p_min_slope_mv_per_s`, W_4 changes sign
    /// once between them, and |W_4| stays below that slope (baseline) for at
    /// most this long (ms) in between. Negative: no such check. Only acts
    /// with `p_biphasic_frac` <= 1. Default 8, the best of the sweep under
    /// `p_biphasic_frac`.
    pub p_outer_max_quiet_ms: f64,
    /// Of the two lobe pairs around the largest |W_4| maximum in the P window
    /// (its opposite-sign neighbours before and after), the earlier pair is
    /// read as the P wave unless the later neighbour is larger than the
    /// earlier one divided by this fraction (dimensionless, as
    /// `t_early_pair_frac` for T; 1 = the larger neighbour wins, as before).
    /// Default 1.5: the pair nearer the QRS is preferred, because the P wave
    /// ends one PR segment (a quiet stretch) before the QRS, while the start
    /// of the 340-ms P window often holds the end of the T wave, a U wave or
    /// baseline noise. SD (ms) of P onset / P end, LUDB per lead, LUDB
    /// global, QTDB global (q1c), with `p_biphasic_frac` 1.1 (off): at 1.0
    /// 15.47 / 15.17, 16.18 / 14.35, 21.00 / 21.32; 0.5: 15.93 / 14.95,
    /// 16.70 / 14.62, 20.36 / 21.07; 1.5: 15.30 / 15.01, 15.76 / 13.89,
    /// 21.40 / 20.32; 2: 15.69 / 15.25; 3: 15.85 / 15.38. With 1.5 and
    /// `p_biphasic_frac` 0.25 / 0.3 / 0.4 / 0.5: LUDB per lead 15.45 / 14.96,
    /// 15.38 / 14.95, 15.27 / 14.96, 15.29 / 14.99; QTDB 20.26 / 20.20, 20.48
    /// / 20.39, 20.62 / 20.38, 21.29 / 20.38 (1.3 or 1.7 with 0.3 to 0.5: no
    /// better). With 1.5 and 0.4, odd / even-numbered records, LUDB per lead
    /// P onset 13.55 -> 13.71 / 17.29 -> 16.76, P end 14.14 -> 14.21 / 16.19
    /// -> 15.73; QTDB P onset 19.65 -> 17.81 / 22.20 -> 22.90, P end 23.14 ->
    /// 23.28 / 19.35 -> 17.05; mean absolute errors lower in all six; P
    /// sensitivity unchanged on LUDB (97.39 %), 96.62 -> 96.78 % on QTDB;
    /// QTDB P-peak SD 18.1 -> 18.8 ms (the peak follows the chosen pair).
    pub p_early_pair_frac: f64,
    /// ξ for P onset (Martínez 2004: 0.5). Default 0.6 (0.5 before; with
    /// `p_xi_end` = 0.8): QTDB global P-onset SD 20.37 -> 19.78 ms
    /// (odd- / even-positioned records 17.90 -> 17.08 / 22.42 -> 21.98),
    /// mean +0.1 -> +3.8 ms; LUDB per lead SD 15.19 -> 15.22 ms (13.59 ->
    /// 13.62 / 16.70 -> 16.74), mean -3.3 -> +0.2 ms, so the root-mean-square
    /// error falls on both (QTDB 20.37 -> 20.14, LUDB 15.54 -> 15.22 ms).
    /// 0.55 / 0.65: QTDB SD 20.10 / 19.68, mean +2.0 / +5.6; LUDB SD 15.24
    /// / 15.22, mean -1.6 / +2.0. Window QT unchanged.
    pub p_xi_on: f64,
    /// ξ for P end (Martínez 2004: 0.9). Default 0.8 (0.9 before: the P end
    /// was early on both databases, QTDB global mean -3.6 ms and LUDB per
    /// lead -4.1 ms). At 0.8: QTDB P-end mean -3.6 -> +1.0 ms, SD 20.54 ->
    /// 20.31 (odd- / even-positioned records 23.56 -> 23.28 / 17.07 ->
    /// 16.89), Se 96.78 -> 96.81 %; LUDB per lead mean -4.1 -> +0.7 ms, SD
    /// 14.65 -> 14.54 (13.93 -> 13.76 / 15.38 -> 15.32); QTDB P-onset SD
    /// 20.27 -> 20.37 (even-positioned records 22.23 -> 22.42). 0.85 / 0.75 / 0.7: QTDB P-end mean -1.1 / +3.1 / +5.0 ms, SD
    /// 20.42 / 20.25 / 20.20; LUDB mean -1.6 / +2.7 / +4.6, SD 14.61 / 14.60
    /// / 14.63.
    pub p_xi_end: f64,
    /// Longest search (ms) from the P slope maxima to its onset/end.
    pub p_boundary_search_ms: f64,
    /// P presence across beats: a beat's P waves are dropped (in every lead)
    /// when the P peak to QRS peak interval of the beats around it scatters
    /// by more than this (ms; median over leads of each lead's median
    /// absolute deviation). Atrial fibrillation and flutter leave no P wave
    /// with a fixed PR interval, so whatever the P search finds there is
    /// not a P wave. 0 = off. Default 14 (P peaks jitter by one or two
    /// samples at 250 Hz; at 10 ms QTDB lost 1.3 points of P sensitivity):
    /// LUDB per-lead P positive predictivity 79.9 -> 87.4 % at unchanged
    /// sensitivity (90.3 %; the false P waves were mostly in atrial
    /// fibrillation and flutter records); QTDB global P-onset positive
    /// predictivity 94.3 -> 97.7 %, sensitivity 94.7 -> 94.1 % (odd records
    /// 94.4 -> 93.6, even 95.0 -> 94.7). Second-degree and complete AV block
    /// also scatter the PR interval and lose their P waves.
    pub p_max_pr_mad_ms: f64,
    /// Beats on either side whose P waves enter that scatter.
    pub p_pr_context_beats: usize,
    /// A lead takes part in the test only with at least this many P waves
    /// among those beats.
    pub p_pr_min_waves: usize,
    /// A lead without a P wave in a beat where at least this fraction of
    /// the leads have one is searched again (see `p_fill_window_ms`).
    pub p_fill_min_frac: f64,
    /// ... within this (ms) of the median P peak of the other leads
    /// (0 = off). Default 80 with `p_fill_min_frac` 0.5 and `p_fill_relax`
    /// 0.5: LUDB per-lead P sensitivity 90.5 -> 94.9 % (odd records 91.8 ->
    /// 95.9, even 89.2 -> 93.9) at unchanged positive predictivity (87.3 %),
    /// P-onset SD 18.4 -> 18.9 ms; QTDB global P-onset sensitivity 94.2 ->
    /// 94.5 % (+P 97.7 %), SD 20.1 -> 20.3 ms. Windows of 30/50/100 ms gave
    /// 91.4/94.1/94.8 %.
    pub p_fill_window_ms: f64,
    /// ... with the P presence thresholds (`p_min_slope_mv_per_s`,
    /// `p_min_rel_qrs`) multiplied by this.
    pub p_fill_relax: f64,
    /// ... and when that search finds no P wave at scale 2^4 (a flat P whose
    /// W_4 lobe merges with the slope of the QRS or T), the W_3 lobe pair
    /// whose zero crossing lies nearest the other leads' median P peak, and
    /// at most this far (ms) from it, is taken, with the same relaxed
    /// presence thresholds at scale 2^3 (0 = off). Default 30: LUDB per-lead
    /// P-onset Se 94.8 -> 97.3 % (odd records 96.4 -> 98.7, even 93.2 ->
    /// 95.9), +P 97.9 -> 97.8 %, SD 19.0 -> 19.6 ms (odd 16.0 -> 16.6, even
    /// 21.7 -> 22.3); QTDB global P unchanged (Se 96.3 %, SD 20.9 ms). 20 /
    /// 40 ms gave Se 95.8 / 97.0 % at SD 19.4 / 19.7 ms; the nearest W_4
    /// pair instead of the window's wave lowered Se (94.2 %).
    pub p_fill_fine_peak_ms: f64,

    /// Length (ms) of the PR-segment stretch before QRS onset whose median is
    /// the isoelectric level (tangent method).
    pub baseline_window_ms: f64,
    /// A wave's slope-to-noise ratio that gives confidence 0.5.
    pub confidence_snr_half: f64,

    /// Across leads: a lead whose mark is more than this (ms) away from the
    /// others' median is rejected as outlying (at most one lead per mark).
    pub global_outlier_ms: f64,
    /// Same as `global_outlier_ms`, for QRS onset and end (ms; 0 = use
    /// `global_outlier_ms`). Default 0: a tighter QRS limit lets the more
    /// confident of two disagreeing leads win more often, which helped LUDB
    /// global marks but not QTDB's two leads (20 ms: QTDB QRS onset
    /// 1.3 +/- 13.7 -> 3.6 +/- 14.9 ms, end 4.6 +/- 20.3 -> -0.1 +/- 21.0 ms;
    /// LUDB global onset 13.1 -> 12.3, end 17.3 -> 16.8 ms SD; 28 ms: QTDB
    /// onset SD 14.4, end 20.8 ms).
    pub global_outlier_qrs_ms: f64,
    /// Marks with confidence below this are not used for global marks.
    pub global_min_confidence: f64,
    /// When a beat has a global T peak but no lead's T end clears
    /// `global_min_confidence`, the T end (each method) of the lead that gave
    /// the peak is taken, with its own low confidence, instead of leaving a
    /// T wave without an end. Default on: QTDB global T-end sensitivity
    /// 98.81 -> 99.15 % (12 beats in sel38, sel41, sel44, sel104; two records
    /// at odd and two at even positions of RECORDS), SD 33.3 -> 33.7 ms, mean
    /// 0.6 -> 0.5 ms; window QT and LUDB per-lead marks unchanged.
    pub global_t_end_from_peak_lead: bool,
    /// A lead's wave boundaries are kept within the global span of the wave:
    /// once the global marks are set, a lead onset before the global onset
    /// is moved to it, and a lead end after the global end likewise (P, QRS
    /// and T, each T-end method against its own global end), as long as the
    /// moved mark stays on its side of the lead's own peak. Why: depolarisation
    /// and repolarisation cannot show in one lead before they start or after
    /// they end in all the others, and the global marks already reject a
    /// single outlying lead; a lead mark beyond them is that lead's noise
    /// (high-frequency noise of the limb leads drawing the QRS end into the
    /// ST segment, LUDB 17 and 56). Default on: LUDB per-lead SD (ms), with
    /// odd / even records: QRS end 18.7 -> 16.0 (17.5 -> 15.0 / 19.7 -> 16.9),
    /// QRS onset 14.2 -> 13.7, P onset 19.6 -> 18.8, P end 19.9 -> 19.2,
    /// T end 24.4 -> 23.7 (26.1 -> 25.2 / 22.7 -> 22.2) with T-end sensitivity
    /// 98.64 -> 98.84 %; QTDB global marks and the median-beat windows are
    /// unchanged (per-lead marks only).
    pub lead_marks_within_global: bool,
    /// A lead's P wave whose peak lies outside the global P span (onset to
    /// end) is another deflection (noise, a bump before the QRS): it is
    /// dropped, the lead is searched again near the other leads' P peak
    /// (`p_fill_*`; a P found there outside the span is refused too), and
    /// the global marks are combined again. Default on: LUDB per-lead P
    /// onset SD 18.8 -> 17.0 ms (odd / even records 16.2 -> 14.9 / 21.2 ->
    /// 19.1), P end 19.1 -> 17.6, P sensitivity 97.31 -> 97.39 %, positive
    /// predictivity 97.83 -> 98.16 %; QTDB global P within 0.1 ms (P end SD
    /// 21.4 -> 21.3). (Searching again every lead without a P and keeping
    /// what is found: 97.48 % and 98.08 %.)
    pub lead_p_within_global: bool,
    /// Per-lead P (onset, peak, end) and QRS (onset, end) marks held to the
    /// lead's neighbouring beats: each replaced by the median (P: the
    /// trimmed mean, `lead_ensemble_p_trim`) of its offset
    /// to the QRS fiducial over the beat and this many beats on each side
    /// (module `ensemble`; 0 = off). Applied after the global marks are
    /// combined, so the global marks and the median-beat windows do not
    /// change. Default 6 (about a 10-s resting ECG): LUDB per-lead SD (ms),
    /// with odd / even records: P onset 17.0 -> 16.1 (14.8 -> 13.8 / 19.1 ->
    /// 18.1), P end 17.6 -> 16.1 (16.8 -> 15.0 / 18.4 -> 17.1), QRS onset
    /// 13.4 -> 12.6 (13.0 -> 12.1 / 13.9 -> 13.1), QRS end 15.4 -> 15.0 (14.8
    /// -> 14.4 / 15.9 -> 15.5); sensitivity and positive predictivity
    /// unchanged. 3, 8 or 10 beats: within 0.2 ms of 6. (Before the global
    /// marks, P only: QTDB global P onset SD odd records 16.9 -> 17.3 ms, so
    /// the global marks keep the beat's own.)
    pub lead_ensemble_beats: usize,
    /// See `lead_ensemble_beats`: fewest beats with the marks in the window.
    pub lead_ensemble_min_beats: usize,
    /// See `lead_ensemble_beats`: a beat whose P marks lie further than this
    /// (ms) from the window's P marks keeps its own (an ectopic atrial beat,
    /// a changed PR). LUDB P onset / end SD (ms) at gates 40, 60, 100 ms and
    /// none, when this gate alone guarded the ectopic beats: 16.9 / 17.2,
    /// 16.5 / 16.7, 16.1 / 16.1, 15.7 / 15.7. Default 150 (100 before), now
    /// that premature beats keep their own P by their timing
    /// (`lead_ensemble_premature_frac`): P onset 14.94 -> 14.87 ms (odd- /
    /// even-numbered records 13.53 -> 13.39 / 16.31 -> 16.28), P peak 13.57
    /// -> 13.32; a P that moved by more than a P wave's width and a half
    /// still keeps its own.
    pub lead_ensemble_p_gate_ms: f64,
    /// The same gate (ms) for the QRS onset and end: a ventricular ectopic
    /// beat's wider complex keeps its own boundaries. LUDB QRS onset / end SD
    /// with 40 ms as without a gate (12.6 / 15.0), 20 ms: 13.1 / 15.1.
    pub lead_ensemble_qrs_gate_ms: f64,
    /// See `lead_ensemble_beats`: the P marks take the mean of the window's
    /// offsets after this fraction of them is dropped from each end (0 =
    /// the plain mean, 0.25 = the interquartile mean, 0.5 = the median, as
    /// the QRS marks keep). Why: over a dozen beats whose P timing scatters
    /// by noise the trimmed mean keeps more of the information than the
    /// median and still drops the beats whose P was taken on another
    /// deflection. Default 0.25: LUDB per-lead SD (ms; odd- / even-numbered
    /// records), with the 150-ms gate and the premature-beat rule: P onset
    /// 14.98 -> 14.87 (13.45 -> 13.39 / 16.44 -> 16.28), P peak 13.62 ->
    /// 13.32, P end 14.29 -> 14.21. Alone (gate 100 ms, no premature-beat
    /// rule): P onset 15.22 -> 15.10, 0.1: 15.05, 0 (the mean): 15.16. The
    /// QRS marks with 0.25 instead of the median: QTDB global QRS onset
    /// 12.98 -> 12.86 but QRS end 14.76 -> 14.86, LUDB per-lead QRS end
    /// 11.41 -> 11.48 ms, so they keep the median.
    pub lead_ensemble_p_trim: f64,
    /// See `lead_ensemble_beats`: a beat whose preceding RR interval is
    /// shorter than this fraction of the median RR interval of the window's
    /// beats keeps its own P and QRS marks (0 = off; the global marks too).
    /// Why: a premature atrial beat starts elsewhere in the atria, so its P
    /// wave has neither the shape nor the PR interval of its neighbours
    /// (common practice), whatever the distance of its marks
    /// (`lead_ensemble_p_gate_ms`); a premature beat may also be conducted
    /// aberrantly or arise in the ventricles, with a QRS of its own. Default 0.85: LUDB
    /// per-lead SD (ms; odd- / even-numbered records), with the trimmed mean
    /// and the 150-ms gate: P onset 15.02 -> 14.87 (13.42 -> 13.39 / 16.55
    /// -> 16.28), P peak 13.52 -> 13.32 (12.16 -> 12.17 / 14.83 -> 14.45), P
    /// end 14.32 -> 14.21 (13.41 -> 13.43 / 15.23 -> 15.00); 0.8 / 0.9: P
    /// onset 14.88 / 14.83. QTDB global marks unchanged (measured on the
    /// lead marks alone, before `global_ensemble_p` applied the rule to the
    /// global P too). Extended to the QRS marks (the P marks only before):
    /// LUDB per-lead QRS onset 3.75 +/- 9.99 -> 3.76 +/- 9.94 ms (9.98 ->
    /// 9.89 / 10.00 -> 9.98), QRS end 11.41 -> 11.37 (11.46 -> 11.42 /
    /// 11.37 -> 11.31), LUDB global QRS end 11.71 -> 11.61; QTDB global QRS
    /// onset 12.99 -> 13.00, end 14.75 -> 14.78 ms.
    pub lead_ensemble_premature_frac: f64,
    /// Per-lead QRS onset and end moved this fraction of the way toward the
    /// median of the same mark across the record's leads for the beat (module
    /// `shrink`; 0 = off, 1 = the median). Applied last, after the global
    /// marks are combined and the lead marks held to the global span
    /// (`lead_marks_within_global`), so the global marks (all of QTDB's
    /// figures) and the median-beat windows do not change. Default 0.6: LUDB
    /// per-lead SD (ms), with odd / even records: QRS onset 12.7 -> 11.1
    /// (12.2 -> 10.6 / 13.2 -> 11.6), QRS end 15.0 -> 13.0 (14.4 -> 12.7 /
    /// 15.6 -> 13.4); 0.7: 11.2 / 13.1, 0.8: 11.2 / 13.3; before the clip to
    /// the global span instead of after: 11.2 / 13.2. Measured offline first
    /// over fractions 0 to 1: every lead at the median (1.0) gave 11.6 /
    /// 13.7, so the lead's own mark still carries information.
    pub lead_shrink_qrs: f64,
    /// See `lead_shrink_qrs`: the QRS onsets move toward this quantile of
    /// the leads' onsets for the beat instead of their median (0 = the
    /// earliest lead, 0.5 = the median, 1 = the latest; linear between
    /// order statistics). Why: the ventricles' activation starts once for
    /// all leads, and a lead onto which the first forces project weakly
    /// marks the onset late, never early, so the common onset lies below
    /// the median (common practice: the global QRS onset is the earliest
    /// across leads). Default 0.3 (the median before): LUDB per-lead QRS
    /// onset 6.6 +/- 10.36 -> 3.7 +/- 10.14 ms (odd- / even-numbered
    /// records 10.39 -> 10.00 / 10.32 -> 10.28); 0.4 / 0.2 / 0.1: 10.19 /
    /// 10.15 / 10.24 ms; 0.3 with `lead_shrink_qrs` 0.5 / 0.7 / 0.8: 10.20
    /// / 10.20 / 10.29. The same for the QRS end (the 0.7 quantile): 11.76
    /// -> 11.80 ms, so the ends keep the median. QTDB (two leads) unchanged.
    pub lead_shrink_qrs_on_quantile: f64,
    /// See `lead_shrink_qrs`: the fraction for the P onset and end. Default
    /// 0.3: LUDB P onset 16.1 -> 15.5 (13.8 -> 13.5 / 18.1 -> 17.3), P end
    /// 16.1 -> 15.2 (15.0 -> 14.1 / 17.1 -> 16.2); 0.2: 15.6 / 15.4, 0.4:
    /// 15.6 / 15.2.
    pub lead_shrink_p: f64,
    /// See `lead_shrink_qrs`: the fraction for the T onset and every T-end
    /// method's mark. Default 0.3: LUDB T end 22.8 -> 21.8 (23.9 -> 22.6 /
    /// 21.6 -> 20.9), sensitivity 99.10 -> 99.15 %; 0.4: 21.6.
    pub lead_shrink_t: f64,
    /// See `lead_shrink_qrs`: fewest leads with the mark on the beat for the
    /// beat to take part (at least 2; the median of two leads is their mean).
    /// Default 3, so two-lead records (QTDB) keep their own lead marks; 2 or
    /// 5 leave LUDB's per-lead figures within 0.05 ms.
    pub lead_shrink_min_leads: usize,
    /// The same rule (`lead_ensemble_beats`, `lead_ensemble_min_beats`,
    /// `lead_ensemble_qrs_gate_ms`) for the global QRS onset and end, after
    /// the global marks are combined. Default on: QTDB global (annotator 1),
    /// with odd / even records: QRS onset 1.3 +/- 13.7 -> 1.8 +/- 13.5 ms
    /// (12.7 -> 12.2 / 14.4 -> 14.5), QRS end 4.9 +/- 16.1 -> 4.5 +/- 15.3
    /// (14.2 -> 13.7 / 17.5 -> 16.4); sensitivities unchanged; LUDB per lead
    /// within 0.1 ms. (The global P, held the same way by the median of
    /// the time: P onset SD of the odd records 16.9 -> 17.1 and P end 15.9
    /// -> 16.6 ms; see `global_ensemble_p` for the rule it now takes.)
    pub global_ensemble_qrs: bool,
    /// The same rule for the global P onset, peak and end, with the P
    /// settings of the lead marks (`lead_ensemble_p_trim`,
    /// `lead_ensemble_premature_frac`, `lead_ensemble_p_gate_ms`). Default
    /// on (off before): QTDB global (annotator 1), with odd- /
    /// even-positioned records: P onset 3.74 +/- 19.74 -> 4.09 +/- 18.77 ms
    /// (17.08 -> 15.63 / 21.91 -> 21.27), P peak 3.96 +/- 16.18 -> 3.99 +/-
    /// 15.71 (16.50 -> 16.34 / 15.82 -> 14.99), P end 1.05 +/- 20.26 ->
    /// 1.09 +/- 19.45 (23.28 -> 23.04 / 16.76 -> 15.08), P sensitivities
    /// unchanged or up (P onset 97.28 -> 97.31 %); LUDB global P peak 8.19
    /// -> 7.23, P end 13.41 -> 11.03, but P onset 15.56 -> 15.85 ms (13.75 ->
    /// 14.13 / 17.16 -> 17.37); LUDB per lead within 0.05 ms. With the
    /// median (`lead_ensemble_p_trim` 0.5): QTDB P onset 19.00; with the gate
    /// at 100 ms: 18.99; without the premature-beat rule: 18.75 ms (LUDB
    /// global P onset 15.98).
    pub global_ensemble_p: bool,
    /// The same for the T wave (span: global T onset, or the QRS end, to the
    /// T end): the lead is searched again within ±`t_recheck_window_ms` of
    /// the global T peak and the T wave kept only if its peak then lies
    /// inside the span. Default off: LUDB per-lead T-end SD 23.3 -> 22.5 ms
    /// and positive predictivity 99.30 -> 99.41 %, but sensitivity 98.96 ->
    /// 98.51 % (dropped without the second search: 22.3 ms, 98.26 %), and
    /// QTDB global T-peak sensitivity 98.84 -> 98.64 %.
    pub lead_t_within_global: bool,
    /// A lead's T wave whose peak lies outside the global T span is searched
    /// again within ±`t_recheck_window_ms` of the global T peak, and the new
    /// T marks replace the lead's if their peak is nearer the global T peak;
    /// unlike `lead_t_within_global` (which takes precedence when on),
    /// nothing is dropped. Why: on a low or biphasic T the first search of a
    /// lead may take an ST lobe or one phase for the T wave, while the other
    /// leads agree on where repolarisation is. Default on (off before): LUDB
    /// per-lead T end 99.07 -> 99.10 %, SD 23.0 -> 22.8 ms (odd-numbered
    /// records 24.2 -> 23.9, even 21.7 -> 21.6), positive predictivity 99.41
    /// -> 99.44 %; T peak 98.91 -> 98.95 %, SD 21.8 -> 21.6 ms; QTDB global T
    /// peak 98.90 -> 98.93 %, SD 31.2 -> 30.6 ms, T end SD 33.0 -> 32.9 ms
    /// (both halves of RECORDS equal or better). Also searching again leads
    /// whose T peak is more than 80 ms from the global one (LUDB; 160 ms on
    /// QTDB) gave LUDB T end 22.7 ms and QTDB unchanged; 40 / 80 ms made QTDB
    /// worse (T end SD 33.3 ms).
    pub lead_t_near_global: bool,
    /// With three or more leads, outlying leads are dropped one after another
    /// from the extreme end before the earliest/latest mark is taken, each
    /// lying more than the outlier limit beyond the median of the leads left,
    /// up to this fraction of the leads with a mark (rounded down, at least
    /// one). Default 0.25: three of twelve leads. LUDB per-lead SD (ms), with
    /// odd / even records: T end 23.7 -> 23.3 (25.2 -> 24.7 / 22.2 -> 21.8),
    /// T-end sensitivity 98.84 -> 98.96 %, QRS onset 13.7 -> 13.5, P end
    /// 19.2 -> 19.1, QRS end and P onset unchanged (one lead at most, as
    /// before: T end 23.7, QRS onset 13.7; two leads: 23.4, 13.6). Two-lead
    /// records (QTDB) are not affected.
    pub global_outlier_max_frac: f64,
    /// Same as `global_min_confidence`, for P onset and end. Default 0.15
    /// (0.2 before, the common floor): low-confidence P waves had a global
    /// P peak but no onset or end. QTDB global P-onset Se 94.5 -> 96.3 %
    /// (odd records 93.7 -> 95.5, even 95.4 -> 97.2), +P 97.7 -> 96.2 %,
    /// SD 20.3 -> 20.9 ms (odd 15.5 -> 16.9, even 23.7 -> 23.9); P end Se
    /// 94.2 -> 95.9 %, SD 20.4 -> 21.4 ms. 0.1 gave 96.6 % at SD 21.1 ms.
    pub global_min_confidence_p: f64,
    /// Global marks need at least this many leads with a usable mark.
    pub global_min_leads: usize,
    /// Rule when exactly two leads disagree by more than `global_outlier_ms`
    /// on a QRS onset. Default `confident` for all four: on QTDB neither
    /// `outer` nor `inner` helped on both halves of the records.
    pub global_pair_qrs_on: PairRule,
    /// Same, for the QRS end. Default `confident`. Alone, `envelope` (see
    /// `global_env_qrs_end_frac`) gave QTDB 4.4 +/- 19.3 ms, `consistent`
    /// 6.5 +/- 21.6 ms and `inner` 3.7 +/- 21.2 ms (`confident`
    /// 4.6 +/- 20.3 ms); with `global_env_qrs_end_slack_ms` and
    /// `global_env_qrs_end_early_ms` at their defaults (scale 2^3)
    /// `envelope` and `confident` are equal within 0.1 ms (QTDB
    /// 4.1 +/- 17.8 ms both), so the simpler rule stays.
    pub global_pair_qrs_end: PairRule,
    /// Same, for P onset and end.
    pub global_pair_p: PairRule,
    /// Same, for T onset and all T-end methods.
    pub global_pair_t: PairRule,
    /// Beats on either side whose marks set the expected position for
    /// `PairRule::Consistent`.
    pub global_context_beats: usize,
    /// T end, `global_pair_t = consistent`: when exactly two leads disagree
    /// and one lead's T is upright while the other's is inverted or
    /// biphasic, the upright lead's T end counts as this much (ms) nearer
    /// the position the neighbouring beats predict. An inverted T's wavelet
    /// end tends to fall on its first phase or on an ST-segment lobe (the
    /// same finding as `measure.prefer_upright_t` on median beats). QTDB
    /// global T end (annotator 1), 0 -> 80 ms: Se 98.11 -> 98.14 %, mean
    /// 0.3 -> 1.2 ms, SD 34.3 -> 33.2 ms; recomputed per half from the
    /// run's marks, odd-positioned records of RECORDS SD 32.1 -> 31.7 ms,
    /// even 36.8 -> 34.9 ms (20 ms: 31.5 and 36.2); LUDB unchanged (12 leads rarely leave a disagreeing pair).
    /// 0 turns the preference off.
    pub global_t_upright_bonus_ms: f64,
    /// The global T peak is the peak of the lead whose T stands tallest
    /// above its isoelectric level (the median of `baseline_window_ms`
    /// before the lead's QRS onset, mV), among the leads whose T peak lies
    /// above that level; when none does, the `global_pair_t` rule chooses.
    /// Why: the apex is read where the T wave is tallest and upright (common
    /// practice), while a lead with a low, inverted or biphasic T puts its
    /// peak on another phase of the wave (QTDB's two leads disagree there by
    /// a constant 40 to 90 ms over whole records). false = the `global_pair_t`
    /// rule alone. Default true: QTDB global T peak (annotator 1) 6.6 +/-
    /// 29.2 -> 0.8 +/- 24.4 ms, odd- / even-positioned records 24.2 -> 21.8
    /// / 33.8 -> 27.1, sensitivity 99.29 -> 99.38 %; T end 31.2 -> 31.1 ms.
    /// Measured offline first on the per-lead marks: the tallest lead by
    /// absolute height (inverted T too) 32.4, the more confident lead 38.5,
    /// the mean of the two 32.2 ms, against 32.8 for the rule before (all
    /// without the 150 ms matching window). Tried and not kept: the same
    /// lead's T end settling a disagreeing pair of ends, SD 31.1 -> 28.6 ms
    /// but sensitivity 99.24 -> 98.56 % (with a 1.5 / 3 times taller T
    /// asked for: 29.4 / 31.2 ms, 98.73 / 98.87 %).
    pub global_t_peak_tallest: bool,
    /// See `global_t_peak_tallest`: with three leads or more, only the leads
    /// whose T peak lies within this distance (ms) of the median of the
    /// leads' T peaks take part, so one lead that took another wave cannot
    /// set the global peak. Default 10: LUDB global T peak (against the
    /// median of the cardiologists' lead peaks) -1.0 +/- 9.8 ms without the
    /// rule, with it and a gate of 10 / 20 / 40 ms / none: 9.4 / 11.1 / 13.1
    /// / 21.1 ms (odd- / even-numbered records at 10: 10.0 -> 10.0 / 9.6 ->
    /// 8.8). Two-lead records are not gated.
    pub global_t_peak_tallest_gate_ms: f64,
    /// The global P peak is the peak of the lead whose P stands tallest
    /// above the level of the `baseline_window_ms` before its P onset, among
    /// those above it (else the most confident lead's, as with false). Why:
    /// as for the T wave (`global_t_peak_tallest`), the apex is read where
    /// the wave is tallest and upright. Default true: QTDB global P peak
    /// (annotator 1) 4.95 +/- 19.13 -> 3.96 +/- 16.18 ms (odd- /
    /// even-positioned records 18.90 -> 16.50 / 19.26 -> 15.82), P onset
    /// 19.78 -> 19.74, P end 20.27 -> 20.26 ms; LUDB global P peak (against
    /// the median of the cardiologists' lead peaks) 4.67 +/- 17.69 -> -0.18
    /// +/- 8.19 ms; per-lead figures unchanged.
    pub global_p_peak_tallest: bool,
    /// See `global_p_peak_tallest` and `global_t_peak_tallest_gate_ms`: with
    /// three leads or more, only P peaks within this distance (ms) of the
    /// leads' median P peak take part. Default 10: LUDB global P peak SD
    /// 8.19 / 10.25 / 13.37 ms with 10 / 20 ms / no gate (QTDB, two leads,
    /// not gated).
    pub global_p_peak_tallest_gate_ms: f64,
    /// Multi-lead QRS referee (`PairRule::Envelope`,
    /// `global_env_qrs_end_slack_ms`, `global_env_qrs_end_early_ms`): the QRS
    /// onset is where the envelope of all leads' wavelet coefficients at
    /// scale 2^k (`global_env_qrs_scale`), sqrt(sum over leads of W_k^2) (a
    /// spatial-velocity measure), first reaches this fraction of its largest value within
    /// `qrs_pre_ms` before and `qrs_post_ms` after the beat's QRS peak
    /// (dimensionless). Used only with `global_pair_qrs_on = envelope`,
    /// which is off by default: on QTDB it raised the global QRS-onset SD at
    /// every fraction tried (13.7 ms with `confident`; envelope at scale 2^2,
    /// 0.05: 14.7, 0.2: 14.7, 0.3: 15.1 ms; at 2^3, 0.1: 14.8, 0.2: 14.9 ms).
    /// Moving a global onset later than the envelope's onset by more than
    /// 10 or 20 ms to it (scale 2^3, fractions 0.05 and 0.1) was tried and
    /// dropped: QTDB SD 13.7 -> 13.7-14.1 ms (odd-positioned records better,
    /// even worse), LUDB global SD 13.1 -> 13.9-15.1 ms.
    pub global_env_qrs_on_frac: f64,
    /// Same, for the QRS end: where the envelope last falls below this
    /// fraction of its largest value (dimensionless). Default 0.2, chosen
    /// with `global_pair_qrs_end = envelope` alone on QTDB global QRS end
    /// (annotator 1; 4.6 +/- 20.3 ms with `confident`): 0.05 6.9 +/- 21.3,
    /// 0.1 5.3 +/- 19.9, 0.2 4.4 +/- 19.3 (odd-positioned records of RECORDS
    /// SD 16.9 -> 16.1, even 23.0 -> 21.7), 0.3 4.2 +/- 19.7, 0.45
    /// 4.1 +/- 19.9 ms.
    pub global_env_qrs_end_frac: f64,
    /// A lead's QRS end later than the multi-lead envelope's end
    /// (`global_env_qrs_end_frac`) by more than this is left out of the
    /// latest pick while a lead within it remains (ms; 0 = off): the
    /// latest-of-leads rule otherwise takes one lead's late mark that the
    /// leads' joint activity does not support. Default 45. Chosen at scale
    /// 2^2 with `global_pair_qrs_end = envelope` and the fraction 0.2, 0 -> 30 -> 45
    /// -> 55 ms: QTDB global QRS end 4.4 +/- 19.3 -> 0.2 +/- 19.0 ->
    /// 3.4 +/- 18.7 -> (with `global_env_qrs_end_early_ms` 10)
    /// 4.2 +/- 18.3 ms (45: odd half SD 16.1 -> 15.1, even 21.7 -> 21.5);
    /// LUDB global 0.6 +/- 17.3 -> -11.5 +/- 13.6 -> -5.3 +/- 14.5 (MAE
    /// 12.7 -> 10.9 ms, odd-numbered records SD 17.0 -> 12.9, even
    /// 17.6 -> 15.8) -> -3.0 +/- 15.3 ms. Larger values trade LUDB's
    /// early mean against its SD. LUDB per-lead marks are not changed.
    pub global_env_qrs_end_slack_ms: f64,
    /// A global QRS end earlier than the multi-lead envelope's end by more
    /// than this is moved to the envelope's end (ms; 0 = off): every lead
    /// stopped on an inner lobe while the leads together are still active.
    /// Default 10. With the slack at 45 ms, off -> 40 -> 20 -> 10 ms: QTDB
    /// global QRS end 3.4 +/- 18.7 -> 3.4 +/- 18.7 -> 3.5 +/- 18.3 ->
    /// 3.6 +/- 18.0 ms (odd half SD 15.1 -> 14.9 -> 14.8 -> 14.5, even
    /// 21.5 -> 21.5 -> 21.0 -> 20.7; the paced sel102 -40.5 -> -34.1 ms); LUDB
    /// unchanged (it never applied).
    pub global_env_qrs_end_early_ms: f64,
    /// Wavelet scale 2^k of the multi-lead envelope (k, 1-5). Default 3: the
    /// fraction, slack and early limit above were chosen at k = 2; with them
    /// unchanged, k = 3 gave QTDB global QRS end 3.6 +/- 18.0 -> 4.1 +/- 17.8
    /// ms (odd-positioned records SD 14.5 -> 14.2, even 20.7 -> 20.5) and
    /// LUDB global -5.3 +/- 14.5 -> -3.0 +/- 14.5 ms (odd-numbered records SD
    /// 12.9 -> 14.1, even 15.8 -> 14.8; MAE 10.9 both). At k = 3, early
    /// limit 0 / 10 / 20 ms: QTDB SD 18.5 / 17.8 / 18.2 ms (both halves best
    /// at 10); slack 35 / 45 / 55 ms: QTDB 2.7 +/- 17.6 / 4.1 +/- 17.8 /
    /// 4.6 +/- 18.2 ms, LUDB -6.8 +/- 12.9 / -3.0 +/- 14.5 / -2.0 +/- 15.1 ms;
    /// fraction 0.15 / 0.3: QTDB SD 18.1 / 18.0 ms. Weighting the leads
    /// equally (each lead's W_2 over its own largest value in the window)
    /// instead of by amplitude was worse at k = 2: QTDB 5.0 +/- 19.3 ms.
    pub global_env_qrs_scale: usize,
}

/// How to combine two leads whose marks of a boundary disagree by more than
/// `global_outlier_ms`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum PairRule {
    /// The mark with the higher confidence.
    #[default]
    Confident,
    /// The outer mark (earliest onset, latest end), as when the leads agree.
    Outer,
    /// The inner mark (latest onset, earliest end).
    Inner,
    /// The mark nearer where the neighbouring beats put it (their median
    /// offset from the QRS peak, `global_context_beats` beats either side):
    /// QT and PR change little from beat to beat, so the lead that breaks
    /// the pattern is the one that picked the wrong wave.
    Consistent,
    /// The mark nearer the multi-lead wavelet envelope's boundary
    /// (`global_env_qrs_on_frac`, `global_env_qrs_end_frac`; QRS only,
    /// elsewhere as `confident`).
    Envelope,
}

/// Which sign change of W_k between the two limbs of a wave marks its peak.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum PeakCrossing {
    /// The first sign change after the first limb.
    First,
    /// The sign change next to the limb with the larger |W_k| (the first
    /// after the first limb when that limb is the larger).
    #[default]
    BesideLargerLimb,
}

impl Default for DelineateConfig {
    fn default() -> Self {
        Self {
            analysis_fs_hz: 250.0,
            default_rr_ms: 1000.0,
            qrs_search_ms: 80.0,
            qrs_pre_ms: 80.0,
            qrs_post_ms: 120.0,
            qrs_post_wide_ms: 160.0,
            qrs_post_wide_noise_k: 8.0,
            qrs_chain_noise_k: 2.0,
            qrs_gamma_pre: 0.1,
            qrs_gamma_post: 0.09,
            qrs_gamma_post_same: 0.0,
            qrs_chain_gap_ms: 40.0,
            qrs_wide_frac: 0.2,
            qrs_wide_frac_post: 0.15,
            qrs_wide_gap_ms: 100.0,
            qrs_adjacent_frac: 1.0,
            qrs_adjacent_gap_ms: 24.0,
            qrs_valley_frac_post: 0.0,
            qrs_valley_lobe_frac: 0.15,
            qrs_valley_min_lobes: 2,
            qrs_q_gap_ms: 0.0,
            qrs_q_noise_k: 4.0,
            qrs_q_min_frac: 0.03,
            qrs_q_xi_on: 0.5,
            qrs_xi_on: 0.05,
            qrs_xi_on_rel: 0.0,
            qrs_xi_end_rel: 0.03,
            qrs_end_noise_cap_k: 3.0,
            median_beat_noise_caps: false,
            qrs_xi_end_pos: 0.16,
            qrs_xi_end_neg: 0.1,
            qrs_spike_ratio: 2.0,
            qrs_spike_halfwidth_ms: 12.0,
            qrs_stimulus_latency_ms: 0.0,
            qrs_boundary_search_ms: 80.0,
            t_window_start_ms: 100.0,
            t_window_after_qrs_end_ms: 60.0,
            t_window_early_after_qrs_end_ms: 20.0,
            t_polarity_recheck: true,
            t_polarity_margin_mv: 0.0,
            t_window_end_rr_frac: 0.5,
            t_window_end_min_ms: 350.0,
            t_window_end_max_ms: 600.0,
            t_window_slow_max_ms: 900.0,
            t_min_slope_mv_per_s: 0.3,
            t_gamma: 0.125,
            t_biphasic_frac: 0.3,
            t_biphasic_outer_bounds: false,
            t_lobe_reach_ms: 1000.0,
            t_early_pair_frac: 0.7,
            t_peak_from_one_limb: true,
            t_peak_crossing: PeakCrossing::BesideLargerLimb,
            t_final_limb_reach_ms: 150.0,
            t_lone_limb_look_back: true,
            t_recheck_ms: 80.0,
            t_recheck_rr_frac: 0.3,
            t_recheck_window_ms: 80.0,
            t_xi_on: 0.25,
            t_xi_end: 0.4,
            t_end_interpolate: true,
            boundary_interpolate: true,
            t_end_search_ms: 200.0,
            t_end_method: TEndMethod::Wavelet,
            t_area_window_ms: 128.0,
            t_area_search_after_ms: 120.0,
            t_end_method_agree_ms: 40.0,
            t_end_method_agree_weight: 0.5,
            p_window_ms: 340.0,
            p_window_gap_ms: 20.0,
            p_after_t_end_ms: 0.0,
            p_min_slope_mv_per_s: 0.3,
            p_min_rel_qrs: 0.02,
            p_gamma: 0.25,
            p_lobe_reach_ms: 120.0,
            p_biphasic_frac: 0.4,
            p_outer_max_quiet_ms: 8.0,
            p_early_pair_frac: 1.5,
            p_xi_on: 0.6,
            p_xi_end: 0.8,
            p_boundary_search_ms: 100.0,
            p_max_pr_mad_ms: 14.0,
            p_pr_context_beats: 4,
            p_pr_min_waves: 4,
            p_fill_min_frac: 0.5,
            p_fill_window_ms: 80.0,
            p_fill_relax: 0.5,
            p_fill_fine_peak_ms: 30.0,
            baseline_window_ms: 20.0,
            confidence_snr_half: 3.0,
            global_outlier_ms: 40.0,
            global_outlier_qrs_ms: 0.0,
            global_min_confidence: 0.2,
            global_t_end_from_peak_lead: true,
            lead_marks_within_global: true,
            lead_p_within_global: true,
            lead_ensemble_beats: 6,
            lead_ensemble_min_beats: 3,
            lead_ensemble_p_gate_ms: 150.0,
            lead_ensemble_qrs_gate_ms: 40.0,
            lead_ensemble_p_trim: 0.25,
            lead_ensemble_premature_frac: 0.85,
            global_ensemble_qrs: true,
            global_ensemble_p: true,
            lead_shrink_qrs: 0.6,
            lead_shrink_qrs_on_quantile: 0.3,
            lead_shrink_p: 0.3,
            lead_shrink_t: 0.3,
            lead_shrink_min_leads: 3,
            lead_t_within_global: false,
            lead_t_near_global: true,
            global_outlier_max_frac: 0.25,
            global_min_confidence_p: 0.15,
            global_min_leads: 1,
            global_pair_qrs_on: PairRule::Confident,
            global_pair_qrs_end: PairRule::Confident,
            global_pair_p: PairRule::Consistent,
            global_pair_t: PairRule::Consistent,
            global_context_beats: 8,
            global_t_upright_bonus_ms: 80.0,
            global_t_peak_tallest: true,
            global_t_peak_tallest_gate_ms: 10.0,
            global_p_peak_tallest: true,
            global_p_peak_tallest_gate_ms: 10.0,
            global_env_qrs_on_frac: 0.2,
            global_env_qrs_end_frac: 0.2,
            global_env_qrs_end_slack_ms: 45.0,
            global_env_qrs_end_early_ms: 10.0,
            global_env_qrs_scale: 3,
        }
    }
}

impl DelineateConfig {
    /// Check every value's range; errors are keyed `delineate.<field>`.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("delineate");
        c.range("analysis_fs_hz", self.analysis_fs_hz, 100.0, 2000.0, "Hz")
            .range("default_rr_ms", self.default_rr_ms, 250.0, 3000.0, "ms")
            .range("qrs_search_ms", self.qrs_search_ms, 10.0, 300.0, "ms")
            .range("qrs_pre_ms", self.qrs_pre_ms, 20.0, 300.0, "ms")
            .range("qrs_post_ms", self.qrs_post_ms, 20.0, 300.0, "ms")
            .range("qrs_post_wide_ms", self.qrs_post_wide_ms, 0.0, 300.0, "ms")
            .range(
                "qrs_post_wide_noise_k",
                self.qrs_post_wide_noise_k,
                0.0,
                1000.0,
                "",
            )
            .range("qrs_gamma_pre", self.qrs_gamma_pre, 0.0, 1.0, "")
            .range("qrs_gamma_post", self.qrs_gamma_post, 0.0, 1.0, "")
            .range(
                "qrs_gamma_post_same",
                self.qrs_gamma_post_same,
                0.0,
                1.0,
                "",
            )
            .range("qrs_chain_gap_ms", self.qrs_chain_gap_ms, 4.0, 200.0, "ms")
            .range("qrs_wide_frac", self.qrs_wide_frac, 0.0, 1.0, "")
            .range("qrs_wide_frac_post", self.qrs_wide_frac_post, 0.0, 1.0, "")
            .range("qrs_wide_gap_ms", self.qrs_wide_gap_ms, 4.0, 300.0, "ms")
            .range("qrs_adjacent_frac", self.qrs_adjacent_frac, 0.0, 1.0, "")
            .range(
                "qrs_valley_frac_post",
                self.qrs_valley_frac_post,
                0.0,
                1.0,
                "",
            )
            .range(
                "qrs_valley_lobe_frac",
                self.qrs_valley_lobe_frac,
                0.0,
                1.0,
                "",
            )
            .range(
                "qrs_valley_min_lobes",
                self.qrs_valley_min_lobes as f64,
                1.0,
                16.0,
                "maxima",
            )
            .range(
                "qrs_adjacent_gap_ms",
                self.qrs_adjacent_gap_ms,
                0.0,
                200.0,
                "ms",
            )
            .range("qrs_q_gap_ms", self.qrs_q_gap_ms, 0.0, 100.0, "ms")
            .range("qrs_q_noise_k", self.qrs_q_noise_k, 0.0, 100.0, "")
            .range("qrs_chain_noise_k", self.qrs_chain_noise_k, 0.0, 100.0, "")
            .range("qrs_q_min_frac", self.qrs_q_min_frac, 0.0, 1.0, "")
            .range("qrs_q_xi_on", self.qrs_q_xi_on, 0.0, 1.0, "")
            .range("qrs_xi_on", self.qrs_xi_on, 0.0, 1.0, "")
            .range("qrs_xi_on_rel", self.qrs_xi_on_rel, 0.0, 1.0, "")
            .range("qrs_xi_end_rel", self.qrs_xi_end_rel, 0.0, 1.0, "")
            .range(
                "qrs_end_noise_cap_k",
                self.qrs_end_noise_cap_k,
                0.0,
                100.0,
                "",
            )
            .range("qrs_xi_end_pos", self.qrs_xi_end_pos, 0.0, 1.0, "")
            .range("qrs_xi_end_neg", self.qrs_xi_end_neg, 0.0, 1.0, "")
            .range("qrs_spike_ratio", self.qrs_spike_ratio, 0.0, 100.0, "")
            .range(
                "qrs_spike_halfwidth_ms",
                self.qrs_spike_halfwidth_ms,
                0.0,
                100.0,
                "ms",
            )
            .range(
                "qrs_stimulus_latency_ms",
                self.qrs_stimulus_latency_ms,
                -1.0,
                100.0,
                "ms",
            )
            .range(
                "qrs_boundary_search_ms",
                self.qrs_boundary_search_ms,
                8.0,
                300.0,
                "ms",
            )
            .range(
                "t_window_start_ms",
                self.t_window_start_ms,
                0.0,
                400.0,
                "ms",
            )
            .range(
                "t_window_after_qrs_end_ms",
                self.t_window_after_qrs_end_ms,
                0.0,
                300.0,
                "ms",
            )
            .range(
                "t_window_early_after_qrs_end_ms",
                self.t_window_early_after_qrs_end_ms,
                0.0,
                300.0,
                "ms",
            )
            .range(
                "t_polarity_margin_mv",
                self.t_polarity_margin_mv,
                0.0,
                2.0,
                "mV",
            )
            .range(
                "t_window_end_rr_frac",
                self.t_window_end_rr_frac,
                0.2,
                1.0,
                "",
            )
            .range(
                "t_window_end_min_ms",
                self.t_window_end_min_ms,
                100.0,
                1000.0,
                "ms",
            )
            .range(
                "t_window_end_max_ms",
                self.t_window_end_max_ms,
                100.0,
                1500.0,
                "ms",
            )
            .range(
                "t_window_slow_max_ms",
                self.t_window_slow_max_ms,
                100.0,
                2000.0,
                "ms",
            )
            .require(
                self.t_window_end_min_ms <= self.t_window_end_max_ms,
                "t_window_end_min_ms",
                "at most t_window_end_max_ms",
                self.t_window_end_min_ms,
            )
            .range(
                "t_min_slope_mv_per_s",
                self.t_min_slope_mv_per_s,
                0.0,
                100.0,
                "mV/s",
            )
            .range("t_gamma", self.t_gamma, 0.0, 1.0, "")
            .range("t_biphasic_frac", self.t_biphasic_frac, 0.0, 1.0, "")
            .range("t_lobe_reach_ms", self.t_lobe_reach_ms, 20.0, 2000.0, "ms")
            .range("t_early_pair_frac", self.t_early_pair_frac, 0.0, 10.0, "")
            .range(
                "t_final_limb_reach_ms",
                self.t_final_limb_reach_ms,
                0.0,
                1000.0,
                "ms",
            )
            .range("t_recheck_ms", self.t_recheck_ms, 0.0, 500.0, "ms")
            .range("t_recheck_rr_frac", self.t_recheck_rr_frac, 0.0, 10.0, "")
            .range(
                "t_recheck_window_ms",
                self.t_recheck_window_ms,
                20.0,
                1000.0,
                "ms",
            )
            .range("t_xi_on", self.t_xi_on, 0.0, 1.0, "")
            .range("t_xi_end", self.t_xi_end, 0.0, 1.0, "")
            .range("t_end_search_ms", self.t_end_search_ms, 20.0, 600.0, "ms")
            .range("t_area_window_ms", self.t_area_window_ms, 8.0, 400.0, "ms")
            .range(
                "t_end_method_agree_ms",
                self.t_end_method_agree_ms,
                0.0,
                200.0,
                "ms",
            )
            .range(
                "t_end_method_agree_weight",
                self.t_end_method_agree_weight,
                0.0,
                1.0,
                "",
            )
            .range(
                "t_area_search_after_ms",
                self.t_area_search_after_ms,
                0.0,
                400.0,
                "ms",
            )
            .range("p_window_ms", self.p_window_ms, 50.0, 600.0, "ms")
            .range("p_window_gap_ms", self.p_window_gap_ms, 0.0, 100.0, "ms")
            .require(
                self.p_window_gap_ms < self.p_window_ms,
                "p_window_gap_ms",
                "less than p_window_ms",
                self.p_window_gap_ms,
            )
            .range(
                "p_after_t_end_ms",
                self.p_after_t_end_ms,
                -200.0,
                400.0,
                "ms",
            )
            .range(
                "p_min_slope_mv_per_s",
                self.p_min_slope_mv_per_s,
                0.0,
                100.0,
                "mV/s",
            )
            .range("p_min_rel_qrs", self.p_min_rel_qrs, 0.0, 1.0, "")
            .range("p_gamma", self.p_gamma, 0.0, 1.0, "")
            .range("p_lobe_reach_ms", self.p_lobe_reach_ms, 20.0, 2000.0, "ms")
            .range("p_biphasic_frac", self.p_biphasic_frac, 0.0, 2.0, "")
            .range("p_early_pair_frac", self.p_early_pair_frac, 0.0, 10.0, "")
            .range(
                "p_outer_max_quiet_ms",
                self.p_outer_max_quiet_ms,
                -1.0,
                1000.0,
                "ms",
            )
            .range("p_xi_on", self.p_xi_on, 0.0, 1.0, "")
            .range("p_xi_end", self.p_xi_end, 0.0, 1.0, "")
            .range(
                "p_boundary_search_ms",
                self.p_boundary_search_ms,
                8.0,
                400.0,
                "ms",
            )
            .range("p_max_pr_mad_ms", self.p_max_pr_mad_ms, 0.0, 500.0, "ms")
            .range(
                "p_pr_context_beats",
                self.p_pr_context_beats as f64,
                1.0,
                1000.0,
                "beats",
            )
            .range("p_fill_min_frac", self.p_fill_min_frac, 0.0, 1.0, "")
            .range("p_fill_window_ms", self.p_fill_window_ms, 0.0, 400.0, "ms")
            .require(
                self.p_fill_window_ms == 0.0 || self.p_fill_window_ms >= 20.0,
                "p_fill_window_ms",
                "0 or at least 20",
                self.p_fill_window_ms,
            )
            .range("p_fill_relax", self.p_fill_relax, 0.0, 1.0, "")
            .range(
                "p_fill_fine_peak_ms",
                self.p_fill_fine_peak_ms,
                0.0,
                200.0,
                "ms",
            )
            .range(
                "p_pr_min_waves",
                self.p_pr_min_waves as f64,
                2.0,
                2001.0,
                "beats",
            )
            .range(
                "baseline_window_ms",
                self.baseline_window_ms,
                4.0,
                200.0,
                "ms",
            )
            .range(
                "confidence_snr_half",
                self.confidence_snr_half,
                0.01,
                1000.0,
                "",
            )
            .range(
                "global_outlier_ms",
                self.global_outlier_ms,
                0.0,
                500.0,
                "ms",
            )
            .range(
                "global_outlier_max_frac",
                self.global_outlier_max_frac,
                0.0,
                0.5,
                "",
            )
            .range(
                "global_outlier_qrs_ms",
                self.global_outlier_qrs_ms,
                0.0,
                500.0,
                "ms",
            )
            .range(
                "global_min_confidence",
                self.global_min_confidence,
                0.0,
                1.0,
                "",
            )
            .range(
                "global_env_qrs_on_frac",
                self.global_env_qrs_on_frac,
                0.0,
                1.0,
                "",
            )
            .range(
                "global_env_qrs_end_frac",
                self.global_env_qrs_end_frac,
                0.0,
                1.0,
                "",
            )
            .range(
                "global_env_qrs_end_slack_ms",
                self.global_env_qrs_end_slack_ms,
                0.0,
                500.0,
                "ms",
            )
            .range(
                "global_env_qrs_end_early_ms",
                self.global_env_qrs_end_early_ms,
                0.0,
                500.0,
                "ms",
            )
            .range(
                "global_t_upright_bonus_ms",
                self.global_t_upright_bonus_ms,
                0.0,
                500.0,
                "ms",
            )
            .range(
                "global_min_confidence_p",
                self.global_min_confidence_p,
                0.0,
                1.0,
                "",
            )
            .range(
                "lead_ensemble_beats",
                self.lead_ensemble_beats as f64,
                0.0,
                1000.0,
                "beats",
            )
            .range(
                "lead_ensemble_min_beats",
                self.lead_ensemble_min_beats as f64,
                1.0,
                1000.0,
                "beats",
            )
            .range("lead_shrink_qrs", self.lead_shrink_qrs, 0.0, 1.0, "")
            .range(
                "lead_shrink_qrs_on_quantile",
                self.lead_shrink_qrs_on_quantile,
                0.0,
                1.0,
                "",
            )
            .range("lead_shrink_p", self.lead_shrink_p, 0.0, 1.0, "")
            .range("lead_shrink_t", self.lead_shrink_t, 0.0, 1.0, "")
            .range(
                "global_p_peak_tallest_gate_ms",
                self.global_p_peak_tallest_gate_ms,
                0.0,
                1000.0,
                "ms",
            )
            .range(
                "global_t_peak_tallest_gate_ms",
                self.global_t_peak_tallest_gate_ms,
                0.0,
                1000.0,
                "ms",
            )
            .range(
                "lead_shrink_min_leads",
                self.lead_shrink_min_leads as f64,
                2.0,
                1000.0,
                "leads",
            )
            .range(
                "lead_ensemble_p_gate_ms",
                self.lead_ensemble_p_gate_ms,
                0.0,
                1000.0,
                "ms",
            )
            .range(
                "lead_ensemble_qrs_gate_ms",
                self.lead_ensemble_qrs_gate_ms,
                0.0,
                1000.0,
                "ms",
            )
            .range(
                "lead_ensemble_p_trim",
                self.lead_ensemble_p_trim,
                0.0,
                0.5,
                "",
            )
            .range(
                "lead_ensemble_premature_frac",
                self.lead_ensemble_premature_frac,
                0.0,
                1.0,
                "",
            )
            .range(
                "global_context_beats",
                self.global_context_beats as f64,
                1.0,
                1000.0,
                "beats",
            )
            .range(
                "global_min_leads",
                self.global_min_leads as f64,
                1.0,
                64.0,
                "leads",
            )
            .range(
                "global_env_qrs_scale",
                self.global_env_qrs_scale as f64,
                1.0,
                5.0,
                "",
            );
        c.finish()
    }
}
