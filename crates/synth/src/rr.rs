//! RR tachogram with the bimodal LF/HF spectrum of McSharry et al. (2003).
//!
//! The RR interval as a function of time is the mean RR plus a sum of
//! sinusoids whose power follows S(f) = σ1²·G(f; 0.1 Hz, 0.01 Hz) + σ2²·G(f;
//! 0.25 Hz, 0.01 Hz), G a unit-area Gaussian, σ1²/σ2² the LF/HF ratio
//! (centre frequencies and widths as given in McSharry et al., IEEE Trans Biomed
//! Eng 2003;50:289-294, from memory). The sinusoids sit on a fixed grid of
//! 1/512 Hz up to 0.5 Hz with random phases, and are scaled so that the
//! process variance is exactly `rr_sd_ms²`.

use rand::Rng;

/// Spacing period of the frequency grid (s).
const GRID_PERIOD_S: f64 = 512.0;
/// LF and HF centre frequencies (Hz) and the common Gaussian width (Hz).
const F_LF: f64 = 0.1;
const F_HF: f64 = 0.25;
const C_WIDTH: f64 = 0.01;

/// The RR interval (ms) as a smooth function of time.
#[derive(Debug, Clone)]
pub struct Tachogram {
    mean_ms: f64,
    /// (amplitude ms, frequency Hz, phase rad)
    comps: Vec<(f64, f64, f64)>,
}

impl Tachogram {
    /// A tachogram of mean `mean_ms`, standard deviation `sd_ms` and LF/HF power
    /// ratio `lf_hf`, phases drawn from `rng`.
    pub fn new<R: Rng>(mean_ms: f64, sd_ms: f64, lf_hf: f64, rng: &mut R) -> Self {
        let mut comps = Vec::new();
        if sd_ms > 0.0 {
            let gauss = |f: f64, fc: f64| {
                (-(f - fc).powi(2) / (2.0 * C_WIDTH * C_WIDTH)).exp()
                    / (2.0 * std::f64::consts::PI * C_WIDTH * C_WIDTH).sqrt()
            };
            let s_lf = lf_hf / (1.0 + lf_hf);
            let s_hf = 1.0 / (1.0 + lf_hf);
            let n = (0.5 * GRID_PERIOD_S) as usize;
            for k in 1..=n {
                let f = k as f64 / GRID_PERIOD_S;
                let s = s_lf * gauss(f, F_LF) + s_hf * gauss(f, F_HF);
                let phase = rng.gen::<f64>() * 2.0 * std::f64::consts::PI;
                if s > 1e-12 {
                    comps.push((s.sqrt(), f, phase));
                }
            }
            // Variance of Σ A cos(...) with independent phases is Σ A²/2.
            let var: f64 = comps.iter().map(|c| c.0 * c.0 / 2.0).sum();
            let scale = sd_ms / var.sqrt();
            for c in &mut comps {
                c.0 *= scale;
            }
        }
        Self { mean_ms, comps }
    }

    /// RR interval (ms) at time `t_s` (s).
    pub fn rr_at(&self, t_s: f64) -> f64 {
        let tau = 2.0 * std::f64::consts::PI * t_s;
        self.mean_ms
            + self
                .comps
                .iter()
                .map(|&(a, f, p)| a * (tau * f + p).cos())
                .sum::<f64>()
    }

    /// Theoretical standard deviation (ms) of the process.
    pub fn sd_ms(&self) -> f64 {
        self.comps
            .iter()
            .map(|c| c.0 * c.0 / 2.0)
            .sum::<f64>()
            .sqrt()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn long_run_matches_requested_mean_and_sd() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let t = Tachogram::new(800.0, 40.0, 0.5, &mut rng);
        assert!((t.sd_ms() - 40.0).abs() < 1e-9);
        // Sample over one full grid period: the sinusoids are orthogonal there,
        // so the sample variance equals Σ A²/2 up to sampling error.
        let n = 51_200;
        let xs: Vec<f64> = (0..n).map(|i| t.rr_at(i as f64 * 0.01)).collect();
        let m = xs.iter().sum::<f64>() / n as f64;
        let sd = (xs.iter().map(|x| (x - m).powi(2)).sum::<f64>() / n as f64).sqrt();
        assert!((m - 800.0).abs() < 0.5, "mean {m}");
        assert!((sd - 40.0).abs() < 0.5, "sd {sd}");
    }

    #[test]
    fn zero_sd_is_constant() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let t = Tachogram::new(750.0, 0.0, 0.5, &mut rng);
        assert_eq!(t.rr_at(3.3), 750.0);
    }
}
