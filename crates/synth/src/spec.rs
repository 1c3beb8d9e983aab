//! What to synthesise: the record-level parameters and the noise to add.
//!
//! Both structs deserialize from a TOML table (`[synth]`, `[synth.noise]`) with
//! unknown keys rejected; [`SynthSpec::validate`] checks every range and names
//! the offending key.

use serde::{Deserialize, Serialize};
use tendline_params::{Checker, ParamError};

/// Parameters of one synthetic recording.
///
/// Times are in milliseconds unless the name says otherwise; amplitudes are the
/// magnitudes of the heart vector of each event in millivolts (the amplitude a
/// lead parallel to the vector would show, before the precordial gain).
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct SynthSpec {
    /// Sampling rate (Hz). Default 500.
    pub fs_hz: f64,
    /// Record length (s). Default 10.
    pub duration_s: f64,
    /// Mean heart rate (beats per minute); mean RR = 60000 / `hr_bpm` ms. Default 60.
    pub hr_bpm: f64,
    /// Standard deviation of the RR tachogram (ms), LF/HF spectrum as in
    /// McSharry et al. 2003. 0 gives a constant RR. Default 25.
    pub rr_sd_ms: f64,
    /// Ratio of low-frequency (0.1 Hz) to high-frequency (0.25 Hz) RR power.
    /// Default 0.5 (McSharry et al. 2003).
    pub lf_hf_ratio: f64,
    /// QT at RR = 1000 ms (ms): the subject's "true QTc" for the chosen exponent.
    /// Default 400.
    pub qt1000_ms: f64,
    /// Exponent β of the QT–RR relation QT = `qt1000_ms` · (RR/1000 ms)^β, RR being
    /// the interval preceding the beat. Default 1/3 (so the true QTcF is `qt1000_ms`).
    pub qt_rr_exponent: f64,
    /// PR interval, global P onset to global QRS onset (ms). Default 160.
    pub pr_ms: f64,
    /// Frontal-plane angle of the R heart vector (degrees, 0 = lead I, 90 = aVF). Default 50.
    pub qrs_axis_deg: f64,
    /// Frontal-plane angle of the T heart vector (degrees). Default 40.
    pub t_axis_deg: f64,
    /// Magnitude of the P heart vector (mV). Default 0.15.
    pub p_amplitude_mv: f64,
    /// Magnitude of the R heart vector (mV). Default 1.5.
    pub r_amplitude_mv: f64,
    /// Magnitude of the T heart vector (mV). Default 0.35.
    pub t_amplitude_mv: f64,
    /// Boundary rule: a wave starts `boundary_k`·σ before and ends `boundary_k`·σ
    /// after its Gaussian centre. Default 2.5 (the wave has fallen to
    /// exp(-2.5²/2) ≈ 4.4 % of its peak there).
    pub boundary_k: f64,
    /// A wave whose amplitude in a lead is below this (mV, absolute) is treated as
    /// absent from that lead for the ground truth. Default 0.05.
    pub negligible_mv: f64,
    /// Noise added to the clean signal.
    pub noise: NoiseSpec,
    /// Seed of every random choice (RR tachogram, first-beat phase, noise).
    pub seed: u64,
}

impl Default for SynthSpec {
    fn default() -> Self {
        Self {
            fs_hz: 500.0,
            duration_s: 10.0,
            hr_bpm: 60.0,
            rr_sd_ms: 25.0,
            lf_hf_ratio: 0.5,
            qt1000_ms: 400.0,
            qt_rr_exponent: 1.0 / 3.0,
            pr_ms: 160.0,
            qrs_axis_deg: 50.0,
            t_axis_deg: 40.0,
            p_amplitude_mv: 0.15,
            r_amplitude_mv: 1.5,
            t_amplitude_mv: 0.35,
            boundary_k: 2.5,
            negligible_mv: 0.05,
            noise: NoiseSpec::default(),
            seed: 1,
        }
    }
}

/// Noise components, each at a signal-to-noise ratio over the whole record.
///
/// SNR is 10·log10(P_signal / P_noise) where P_signal is the sum over the 12
/// leads of the mean square of the clean lead and P_noise the same sum for that
/// noise component; every component is scaled so that this holds exactly for
/// the realised noise. Noise is generated at the electrodes, so its share
/// differs between leads. `None` leaves the component out.
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct NoiseSpec {
    /// Baseline wander (three sinusoids between 0.1 and 0.5 Hz), SNR in dB.
    pub baseline_wander_snr_db: Option<f64>,
    /// Power-line interference (a sinusoid at `powerline_hz`), SNR in dB.
    pub powerline_snr_db: Option<f64>,
    /// Power-line frequency (Hz): 50 or 60. Default 50.
    pub powerline_hz: f64,
    /// Muscle noise (white Gaussian noise band-limited to
    /// `muscle_low_hz`..`muscle_high_hz`), SNR in dB.
    pub muscle_snr_db: Option<f64>,
    /// Lower band edge of muscle noise (Hz). Default 20.
    pub muscle_low_hz: f64,
    /// Upper band edge of muscle noise (Hz); below fs/2. Default 150.
    pub muscle_high_hz: f64,
}

impl Default for NoiseSpec {
    fn default() -> Self {
        Self {
            baseline_wander_snr_db: None,
            powerline_snr_db: None,
            powerline_hz: 50.0,
            muscle_snr_db: None,
            muscle_low_hz: 20.0,
            muscle_high_hz: 150.0,
        }
    }
}

impl NoiseSpec {
    /// True when any component is switched on.
    pub fn any(&self) -> bool {
        self.baseline_wander_snr_db.is_some()
            || self.powerline_snr_db.is_some()
            || self.muscle_snr_db.is_some()
    }

    fn check(&self, fs_hz: f64) -> Checker {
        let mut c = Checker::new("synth.noise");
        for (name, v) in [
            ("baseline_wander_snr_db", self.baseline_wander_snr_db),
            ("powerline_snr_db", self.powerline_snr_db),
            ("muscle_snr_db", self.muscle_snr_db),
        ] {
            if let Some(v) = v {
                c.range(name, v, -20.0, 80.0, "dB");
            }
        }
        c.one_of("powerline_hz", &self.powerline_hz, &[50.0, 60.0]);
        c.range("muscle_low_hz", self.muscle_low_hz, 0.5, 200.0, "Hz");
        c.range("muscle_high_hz", self.muscle_high_hz, 1.0, 1000.0, "Hz");
        c.require(
            self.muscle_high_hz > self.muscle_low_hz,
            "muscle_high_hz",
            "greater than muscle_low_hz",
            self.muscle_high_hz,
        );
        c.require(
            self.muscle_high_hz < 0.45 * fs_hz,
            "muscle_high_hz",
            &format!("below 0.45 × fs_hz = {} Hz", 0.45 * fs_hz),
            self.muscle_high_hz,
        );
        if self.powerline_snr_db.is_some() {
            c.require(
                self.powerline_hz < 0.5 * fs_hz,
                "powerline_hz",
                &format!("below fs_hz / 2 = {} Hz", 0.5 * fs_hz),
                self.powerline_hz,
            );
        }
        c
    }
}

impl SynthSpec {
    /// Mean RR interval (ms).
    pub fn mean_rr_ms(&self) -> f64 {
        60_000.0 / self.hr_bpm
    }

    /// QT (ms) the generator realises for a beat preceded by an RR of `rr_ms`.
    pub fn qt_for_rr(&self, rr_ms: f64) -> f64 {
        self.qt1000_ms * (rr_ms / 1000.0).powf(self.qt_rr_exponent)
    }

    /// Check every parameter; all violations are returned together.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("synth");
        c.range("fs_hz", self.fs_hz, 100.0, 10_000.0, "Hz");
        c.range("duration_s", self.duration_s, 2.0, 86_400.0, "s");
        c.range("hr_bpm", self.hr_bpm, 30.0, 200.0, "beats per minute");
        c.range("rr_sd_ms", self.rr_sd_ms, 0.0, 150.0, "ms");
        c.range("lf_hf_ratio", self.lf_hf_ratio, 0.01, 100.0, "");
        c.range("qt1000_ms", self.qt1000_ms, 250.0, 650.0, "ms");
        c.range("qt_rr_exponent", self.qt_rr_exponent, 0.0, 1.0, "");
        c.range("pr_ms", self.pr_ms, 100.0, 300.0, "ms");
        c.range("qrs_axis_deg", self.qrs_axis_deg, -180.0, 180.0, "degrees");
        c.range("t_axis_deg", self.t_axis_deg, -180.0, 180.0, "degrees");
        c.range("p_amplitude_mv", self.p_amplitude_mv, 0.05, 1.0, "mV");
        c.range("r_amplitude_mv", self.r_amplitude_mv, 0.2, 5.0, "mV");
        c.range("t_amplitude_mv", self.t_amplitude_mv, 0.05, 2.0, "mV");
        c.range(
            "boundary_k",
            self.boundary_k,
            1.5,
            4.0,
            "standard deviations",
        );
        c.range("negligible_mv", self.negligible_mv, 0.001, 0.2, "mV");
        if self.hr_bpm.is_finite() && self.hr_bpm > 0.0 && self.rr_sd_ms.is_finite() {
            let rr = self.mean_rr_ms();
            c.require(
                self.rr_sd_ms <= 0.1 * rr,
                "rr_sd_ms",
                &format!("at most 10 % of the mean RR ({:.1} ms)", 0.1 * rr),
                self.rr_sd_ms,
            );
        }
        c.extend(self.noise.check(self.fs_hz));
        c.finish()
    }
}
