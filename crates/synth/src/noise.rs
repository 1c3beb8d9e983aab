//! Noise added to the clean leads: baseline wander, power-line interference and
//! muscle noise, each scaled to an exact signal-to-noise ratio over the record.
//!
//! Noise is generated at the nine electrodes (RA, LA, LL, V1..V6) and combined
//! into leads like the ECG itself, so the lead relations survive. Each component
//! of each electrode draws from its own random stream, so adding or removing one
//! component leaves the others unchanged.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

use crate::spec::NoiseSpec;
use crate::SynthError;

/// First stream id of the noise streams (the model uses lower ids).
const STREAM_NOISE: u64 = 1000;
/// Seconds of filtered noise discarded so the filter transient is gone.
const WARMUP_S: f64 = 2.0;

/// A second-order IIR section (direct form I), coefficients normalised by a0.
#[derive(Debug, Clone, Copy)]
pub struct Biquad {
    b: [f64; 3],
    a: [f64; 2],
}

impl Biquad {
    /// Low-pass section; formulas of R. Bristow-Johnson's "Audio EQ Cookbook"
    /// (handbook formulas).
    pub fn lowpass(f0_hz: f64, fs_hz: f64, q: f64) -> Self {
        let w0 = 2.0 * std::f64::consts::PI * f0_hz / fs_hz;
        let (s, c) = w0.sin_cos();
        let alpha = s / (2.0 * q);
        let a0 = 1.0 + alpha;
        Self {
            b: [(1.0 - c) / 2.0 / a0, (1.0 - c) / a0, (1.0 - c) / 2.0 / a0],
            a: [-2.0 * c / a0, (1.0 - alpha) / a0],
        }
    }

    /// High-pass section (same source).
    pub fn highpass(f0_hz: f64, fs_hz: f64, q: f64) -> Self {
        let w0 = 2.0 * std::f64::consts::PI * f0_hz / fs_hz;
        let (s, c) = w0.sin_cos();
        let alpha = s / (2.0 * q);
        let a0 = 1.0 + alpha;
        Self {
            b: [(1.0 + c) / 2.0 / a0, -(1.0 + c) / a0, (1.0 + c) / 2.0 / a0],
            a: [-2.0 * c / a0, (1.0 - alpha) / a0],
        }
    }

    /// Filter `x` from rest.
    pub fn run(&self, x: &[f64]) -> Vec<f64> {
        let (mut x1, mut x2, mut y1, mut y2) = (0.0, 0.0, 0.0, 0.0);
        x.iter()
            .map(|&x0| {
                let y0 = self.b[0] * x0 + self.b[1] * x1 + self.b[2] * x2
                    - self.a[0] * y1
                    - self.a[1] * y2;
                x2 = x1;
                x1 = x0;
                y2 = y1;
                y1 = y0;
                y0
            })
            .collect()
    }
}

fn mean_square(x: &[f64]) -> f64 {
    if x.is_empty() {
        0.0
    } else {
        x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64
    }
}

fn stream(seed: u64, lead: usize, comp: u64) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(STREAM_NOISE + 16 * lead as u64 + comp);
    rng
}

/// Baseline wander: three sinusoids with frequencies in 0.1–0.5 Hz.
pub fn baseline_wander(n: usize, fs: f64, rng: &mut ChaCha8Rng) -> Vec<f64> {
    let comps: Vec<(f64, f64, f64)> = (0..3)
        .map(|_| {
            let f = 0.1 + 0.4 * rng.gen::<f64>();
            let a = 0.5 + 0.5 * rng.gen::<f64>();
            let p = 2.0 * std::f64::consts::PI * rng.gen::<f64>();
            (a, f, p)
        })
        .collect();
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            comps
                .iter()
                .map(|&(a, f, p)| a * (2.0 * std::f64::consts::PI * f * t + p).sin())
                .sum()
        })
        .collect()
}

/// Power-line interference: a sinusoid at `f_hz` with a random phase.
pub fn powerline(n: usize, fs: f64, f_hz: f64, rng: &mut ChaCha8Rng) -> Vec<f64> {
    let p = 2.0 * std::f64::consts::PI * rng.gen::<f64>();
    (0..n)
        .map(|i| (2.0 * std::f64::consts::PI * f_hz * i as f64 / fs + p).sin())
        .collect()
}

/// Muscle noise: white Gaussian noise through two high-pass and two low-pass
/// Butterworth-Q sections (4th-order band edges at `lo_hz` and `hi_hz`).
pub fn muscle(n: usize, fs: f64, lo_hz: f64, hi_hz: f64, rng: &mut ChaCha8Rng) -> Vec<f64> {
    let warm = (WARMUP_S * fs) as usize;
    let white: Vec<f64> = (0..n + warm).map(|_| StandardNormal.sample(rng)).collect();
    let q = std::f64::consts::FRAC_1_SQRT_2;
    let hp = Biquad::highpass(lo_hz, fs, q);
    let lp = Biquad::lowpass(hi_hz, fs, q);
    let y = lp.run(&lp.run(&hp.run(&hp.run(&white))));
    y[warm..].to_vec()
}

/// Electrodes whose potentials the noise is generated at: RA, LA, LL, V1..V6.
const N_ELECTRODES: usize = 9;

/// Lead voltages from electrode potentials (RA, LA, LL, V1..V6) for the 12
/// leads in [`crate::leads::LEAD_NAMES`] order: I = LA − RA, II = LL − RA,
/// III = LL − LA, augmented leads against the mean of the other two limb
/// electrodes, precordial leads against Wilson's central terminal (the mean of
/// the three limb electrodes). Standard lead definitions (common practice).
fn leads_from_electrodes(e: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let n = e[0].len();
    let (ra, la, ll) = (&e[0], &e[1], &e[2]);
    let mut out = vec![vec![0.0; n]; 12];
    for i in 0..n {
        let wct = (ra[i] + la[i] + ll[i]) / 3.0;
        out[0][i] = la[i] - ra[i];
        out[1][i] = ll[i] - ra[i];
        out[2][i] = ll[i] - la[i];
        out[3][i] = ra[i] - (la[i] + ll[i]) / 2.0;
        out[4][i] = la[i] - (ra[i] + ll[i]) / 2.0;
        out[5][i] = ll[i] - (ra[i] + la[i]) / 2.0;
        for v in 0..6 {
            out[6 + v][i] = e[3 + v][i] - wct;
        }
    }
    out
}

/// Add the noise of `spec` to `leads` (the 12 clean leads, mV) in place.
///
/// Every component is generated at the electrodes and turned into leads by the
/// standard lead definitions, so Einthoven's law holds in the noisy signal too.
/// Each component is then scaled by one factor for the whole record so that
/// 10·log10(Σ clean² / Σ noise²), sums over all samples of all 12 leads, equals
/// its SNR.
pub fn add_noise(
    leads: &mut [Vec<f64>],
    fs: f64,
    spec: &NoiseSpec,
    seed: u64,
) -> Result<(), SynthError> {
    if leads.len() != 12 {
        return Err(SynthError::Geometry {
            message: format!("noise needs the 12 standard leads, got {}", leads.len()),
        });
    }
    let n = leads[0].len();
    let p_sig: f64 = leads.iter().map(|l| mean_square(l)).sum();
    let mut comps: Vec<(f64, Vec<Vec<f64>>)> = Vec::new();
    let electrodes = |make: &dyn Fn(&mut ChaCha8Rng) -> Vec<f64>, comp: u64| {
        let e: Vec<Vec<f64>> = (0..N_ELECTRODES)
            .map(|k| make(&mut stream(seed, k, comp)))
            .collect();
        leads_from_electrodes(&e)
    };
    if let Some(snr) = spec.baseline_wander_snr_db {
        comps.push((snr, electrodes(&|r| baseline_wander(n, fs, r), 0)));
    }
    if let Some(snr) = spec.powerline_snr_db {
        // Mains reaches every electrode in phase, with electrode-specific
        // amplitude (unequal contact impedances); only the imbalance shows.
        let mut rng = stream(seed, N_ELECTRODES, 1);
        let base = powerline(n, fs, spec.powerline_hz, &mut rng);
        comps.push((
            snr,
            electrodes(
                &|r| {
                    let a = 0.5 + r.gen::<f64>();
                    base.iter().map(|v| a * v).collect()
                },
                1,
            ),
        ));
    }
    if let Some(snr) = spec.muscle_snr_db {
        comps.push((
            snr,
            electrodes(
                &|r| muscle(n, fs, spec.muscle_low_hz, spec.muscle_high_hz, r),
                2,
            ),
        ));
    }
    for (snr, x) in comps {
        let p_noise: f64 = x.iter().map(|l| mean_square(l)).sum();
        if p_noise <= 0.0 || p_sig <= 0.0 {
            return Err(SynthError::Geometry {
                message: format!(
                    "cannot scale noise to an SNR: signal power {p_sig}, noise power {p_noise}"
                ),
            });
        }
        let g = (p_sig * 10f64.powf(-snr / 10.0) / p_noise).sqrt();
        for (lead, nl) in leads.iter_mut().zip(&x) {
            for (v, e) in lead.iter_mut().zip(nl) {
                *v += g * e;
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Power of `x` at frequency `f` by a direct DFT sum (slow oracle).
    fn dft_power(x: &[f64], fs: f64, f: f64) -> f64 {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, v) in x.iter().enumerate() {
            let w = 2.0 * std::f64::consts::PI * f * i as f64 / fs;
            re += v * w.cos();
            im -= v * w.sin();
        }
        (re * re + im * im) / x.len() as f64
    }

    #[test]
    fn biquad_gains_match_design_at_cutoff_and_far_bands() {
        // A Butterworth-Q (Q = 1/√2) section has gain 1/√2 (−3 dB) at f0, ≈1 far
        // in the passband and falls 12 dB/octave in the stopband (handbook
        // property of second-order Butterworth filters).
        let fs = 500.0;
        let q = std::f64::consts::FRAC_1_SQRT_2;
        let n = 20_000;
        let gain = |bq: &Biquad, f: f64| {
            let x: Vec<f64> = (0..n)
                .map(|i| (2.0 * std::f64::consts::PI * f * i as f64 / fs).sin())
                .collect();
            let y = bq.run(&x);
            (mean_square(&y[n / 2..]) / mean_square(&x[n / 2..])).sqrt()
        };
        let lp = Biquad::lowpass(50.0, fs, q);
        assert!((gain(&lp, 50.0) - q).abs() < 0.01);
        assert!((gain(&lp, 2.0) - 1.0).abs() < 0.01);
        let hp = Biquad::highpass(20.0, fs, q);
        assert!((gain(&hp, 20.0) - q).abs() < 0.01);
        assert!((gain(&hp, 200.0) - 1.0).abs() < 0.02);
        // One octave below the high-pass corner: 1/sqrt(1 + 2^4) for Butterworth.
        assert!((gain(&hp, 10.0) - 1.0 / 17f64.sqrt()).abs() < 0.01);
    }

    #[test]
    fn muscle_noise_power_lies_in_its_band() {
        let fs = 500.0;
        let mut rng = stream(7, 0, 2);
        let x = muscle(5000, fs, 20.0, 150.0, &mut rng);
        // Averaged DFT power in band vs out of band (direct DFT oracle).
        let band = |lo: f64, hi: f64| {
            let fs_: Vec<f64> = (0..)
                .map(|k| lo + k as f64 * 1.0)
                .take_while(|f| *f < hi)
                .collect();
            fs_.iter().map(|&f| dft_power(&x, fs, f)).sum::<f64>() / fs_.len() as f64
        };
        let inside = band(40.0, 120.0);
        let low = band(1.0, 6.0);
        let high = band(230.0, 249.0);
        assert!(inside > 20.0 * low, "inside {inside} low {low}");
        assert!(inside > 5.0 * high, "inside {inside} high {high}");
    }

    #[test]
    fn powerline_peak_at_mains_frequency() {
        let fs = 500.0;
        let mut rng = stream(7, 0, 1);
        let x = powerline(5000, fs, 60.0, &mut rng);
        let p60 = dft_power(&x, fs, 60.0);
        let p50 = dft_power(&x, fs, 50.0);
        assert!(p60 > 1e6 * p50.max(1e-30));
    }
}
