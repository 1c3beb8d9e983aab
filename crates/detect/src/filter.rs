//! Small zero-phase Butterworth filters used inside detection.
//!
//! Detection needs its own 5–15 Hz band-pass designed from physical
//! frequencies, so that the same cut-offs hold at every sampling rate. The
//! design is the textbook bilinear transform with frequency pre-warping of an
//! analogue Butterworth prototype, split into second-order sections
//! (common practice; e.g. the RBJ "audio EQ cookbook" biquad formulas).
//! Filtering is forward–backward (zero phase), so peaks are not delayed and a
//! fiducial point means the same instant at every sampling rate.
//!
//! Edge handling: the signal is extended at both ends by odd reflection about
//! the end sample (`pad` samples) before filtering, and the extension is cut
//! off afterwards.

/// One second-order section, `b0 + b1 z^-1 + b2 z^-2` over `1 + a1 z^-1 + a2 z^-2`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Biquad {
    pub b: [f64; 3],
    pub a: [f64; 2],
}

/// Quality factors of the second-order sections of an even-order Butterworth.
fn butter_qs(order: usize) -> Vec<f64> {
    let n = order as f64;
    (1..=order / 2)
        .map(|k| {
            let theta = std::f64::consts::PI * (2.0 * k as f64 - 1.0) / (2.0 * n);
            1.0 / (2.0 * theta.cos())
        })
        .collect()
}

/// Butterworth low-pass of even `order` at cut-off `fc_hz` (−3 dB).
pub fn butter_lowpass(order: usize, fc_hz: f64, fs: f64) -> Vec<Biquad> {
    let k = (std::f64::consts::PI * fc_hz / fs).tan();
    butter_qs(order)
        .into_iter()
        .map(|q| {
            let norm = 1.0 / (1.0 + k / q + k * k);
            let b0 = k * k * norm;
            Biquad {
                b: [b0, 2.0 * b0, b0],
                a: [2.0 * (k * k - 1.0) * norm, (1.0 - k / q + k * k) * norm],
            }
        })
        .collect()
}

/// Butterworth high-pass of even `order` at cut-off `fc_hz` (−3 dB).
pub fn butter_highpass(order: usize, fc_hz: f64, fs: f64) -> Vec<Biquad> {
    let k = (std::f64::consts::PI * fc_hz / fs).tan();
    butter_qs(order)
        .into_iter()
        .map(|q| {
            let norm = 1.0 / (1.0 + k / q + k * k);
            Biquad {
                b: [norm, -2.0 * norm, norm],
                a: [2.0 * (k * k - 1.0) * norm, (1.0 - k / q + k * k) * norm],
            }
        })
        .collect()
}

/// Causal filtering through a cascade of sections (direct form II transposed), zero initial state.
pub fn lfilter(sos: &[Biquad], x: &[f64]) -> Vec<f64> {
    let mut y = x.to_vec();
    for s in sos {
        let (mut z1, mut z2) = (0.0, 0.0);
        for v in y.iter_mut() {
            let xin = *v;
            let out = s.b[0] * xin + z1;
            z1 = s.b[1] * xin - s.a[0] * out + z2;
            z2 = s.b[2] * xin - s.a[1] * out;
            *v = out;
        }
    }
    y
}

/// Zero-phase forward–backward filtering with odd-reflection padding of `pad` samples.
pub fn filtfilt(sos: &[Biquad], x: &[f64], pad: usize) -> Vec<f64> {
    let n = x.len();
    if n == 0 {
        return Vec::new();
    }
    let pad = pad.min(n - 1);
    let mut ext = Vec::with_capacity(n + 2 * pad);
    for i in (1..=pad).rev() {
        ext.push(2.0 * x[0] - x[i]);
    }
    ext.extend_from_slice(x);
    for i in 1..=pad {
        ext.push(2.0 * x[n - 1] - x[n - 1 - i]);
    }
    let mut y = lfilter(sos, &ext);
    y.reverse();
    let mut y = lfilter(sos, &y);
    y.reverse();
    y[pad..pad + n].to_vec()
}

/// Zero-phase Butterworth band-pass `lo_hz`–`hi_hz`: a high-pass and a low-pass of
/// `order` each, run forward and backward. Padding is one period of `lo_hz`
/// times three, enough for the high-pass transient to decay.
pub fn bandpass(x: &[f64], fs: f64, lo_hz: f64, hi_hz: f64, order: usize) -> Vec<f64> {
    let mut sos = butter_highpass(order, lo_hz, fs);
    sos.extend(butter_lowpass(order, hi_hz, fs));
    let pad = (3.0 * fs / lo_hz).ceil() as usize;
    filtfilt(&sos, x, pad)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Gain of a cascade at frequency `f` by direct evaluation of the transfer function.
    fn gain(sos: &[Biquad], f: f64, fs: f64) -> f64 {
        let w = 2.0 * std::f64::consts::PI * f / fs;
        let mut g = 1.0;
        for s in sos {
            let z1 = (w.cos(), -w.sin());
            let z2 = ((2.0 * w).cos(), -(2.0 * w).sin());
            let num = (
                s.b[0] + s.b[1] * z1.0 + s.b[2] * z2.0,
                s.b[1] * z1.1 + s.b[2] * z2.1,
            );
            let den = (
                1.0 + s.a[0] * z1.0 + s.a[1] * z2.0,
                s.a[0] * z1.1 + s.a[1] * z2.1,
            );
            g *= (num.0.hypot(num.1)) / (den.0.hypot(den.1));
        }
        g
    }

    #[test]
    fn butterworth_is_minus_3db_at_cutoff_and_flat_in_passband() {
        // Butterworth definition: |H(fc)| = 1/sqrt(2), maximally flat (handbook formula).
        for &fs in &[250.0, 360.0, 500.0, 1000.0] {
            for &order in &[2usize, 4] {
                let lp = butter_lowpass(order, 15.0, fs);
                assert!((gain(&lp, 15.0, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
                assert!((gain(&lp, 0.0, fs) - 1.0).abs() < 1e-12);
                let hp = butter_highpass(order, 5.0, fs);
                assert!((gain(&hp, 5.0, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
                assert!((gain(&hp, fs / 2.0 * 0.999, fs) - 1.0).abs() < 1e-3);
            }
        }
    }

    #[test]
    fn butterworth_matches_analogue_magnitude_after_prewarp() {
        // |H|^2 = 1 / (1 + (Ω/Ωc)^(2n)) with Ω = tan(πf/fs) (bilinear transform, handbook).
        let fs = 250.0;
        let lp = butter_lowpass(4, 15.0, fs);
        for &f in &[1.0, 7.0, 20.0, 40.0, 100.0] {
            let r =
                (std::f64::consts::PI * f / fs).tan() / (std::f64::consts::PI * 15.0 / fs).tan();
            let want = 1.0 / (1.0 + r.powi(8)).sqrt();
            assert!((gain(&lp, f, fs) - want).abs() < 1e-9, "f={f}");
        }
    }

    #[test]
    fn lfilter_matches_direct_difference_equation() {
        // Slow oracle: y[n] = b0 x[n] + b1 x[n-1] + b2 x[n-2] - a1 y[n-1] - a2 y[n-2].
        let s = butter_lowpass(2, 10.0, 250.0)[0];
        let x: Vec<f64> = (0..300)
            .map(|i| ((i * 37 % 101) as f64 - 50.0) / 7.0)
            .collect();
        let fast = lfilter(&[s], &x);
        let mut y = vec![0.0; x.len()];
        for n in 0..x.len() {
            let xm = |k: usize| if n >= k { x[n - k] } else { 0.0 };
            let ym = |k: usize, y: &Vec<f64>| if n >= k { y[n - k] } else { 0.0 };
            y[n] = s.b[0] * x[n] + s.b[1] * xm(1) + s.b[2] * xm(2)
                - s.a[0] * ym(1, &y)
                - s.a[1] * ym(2, &y);
        }
        for (a, b) in fast.iter().zip(&y) {
            assert!((a - b).abs() < 1e-9);
        }
    }

    #[test]
    fn filtfilt_has_zero_phase() {
        // A symmetric pulse stays symmetric about its centre after zero-phase filtering.
        let n = 1001;
        let x: Vec<f64> = (0..n)
            .map(|i| (-((i as f64 - 500.0) / 6.0).powi(2)).exp())
            .collect();
        let y = bandpass(&x, 250.0, 5.0, 15.0, 2);
        let imax = (0..n).max_by(|&a, &b| y[a].total_cmp(&y[b])).unwrap();
        assert_eq!(imax, 500);
        for k in 1..100 {
            assert!((y[500 - k] - y[500 + k]).abs() < 1e-9);
        }
    }
}
