//! Changing the sampling rate of a lead, so that stages can be checked for
//! invariance to the sampling rate (e.g. a 250 Hz database resampled to 500
//! and 1000 Hz) and records of unusual rates can be brought to a common one.
//!
//! Two methods are offered:
//! - [`resample_fft`] (and [`resample`], which picks the output length from
//!   the two rates): Fourier-domain method, the same algorithm as
//!   `scipy.signal.resample` (real input). It treats the signal as one period
//!   of a periodic signal, so a record whose two ends differ shows ringing
//!   near both ends.
//! - [`resample_poly`]: polyphase FIR for rational ratios `up/down`, the same
//!   algorithm and default filter as `scipy.signal.resample_poly`
//!   (Kaiser-windowed sinc, β = 5, half-length 10·max(up, down), zero
//!   padding outside the signal). Its edge effects are local.

use rustfft::num_complex::Complex64;
use rustfft::FftPlanner;

use crate::filter::DspError;

/// Resamples `x` from `fs_in` to `fs_out` Hz with [`resample_fft`], the output
/// length being `round(len · fs_out / fs_in)`; sample `i` of the output is at
/// time `i / fs_out`, like sample `i` of the input is at `i / fs_in`.
///
/// Returns an error for non-finite or non-positive rates; an empty input
/// gives an empty output.
pub fn resample(x: &[f64], fs_in: f64, fs_out: f64) -> Result<Vec<f64>, DspError> {
    for (name, fs) in [("input", fs_in), ("output", fs_out)] {
        if !(fs.is_finite() && fs > 0.0) {
            return Err(DspError::Resample(format!(
                "{name} sampling rate must be a finite number above 0 Hz, got {fs}"
            )));
        }
    }
    let num = (x.len() as f64 * fs_out / fs_in).round();
    if !(num.is_finite() && num <= (usize::MAX / 4) as f64) {
        return Err(DspError::Resample(format!(
            "output length {num} for {} samples from {fs_in} Hz to {fs_out} Hz is too large",
            x.len()
        )));
    }
    Ok(resample_fft(x, num as usize))
}

/// Fourier-domain resampling of `x` to exactly `num` samples.
///
/// The spectrum of `x` is truncated (down-sampling) or zero-padded
/// (up-sampling) and transformed back; when the kept band ends at an even
/// bin count the unpaired Nyquist bin is doubled (down) or halved (up) as in
/// `scipy.signal.resample`, so that the result agrees with it to rounding.
pub fn resample_fft(x: &[f64], num: usize) -> Vec<f64> {
    let n = x.len();
    if n == 0 || num == 0 {
        return vec![0.0; num];
    }
    let mut planner = FftPlanner::<f64>::new();
    let mut spec: Vec<Complex64> = x.iter().map(|&v| Complex64::new(v, 0.0)).collect();
    planner.plan_fft_forward(n).process(&mut spec);

    let m = n.min(num);
    let m2 = m / 2 + 1;
    // One-sided spectrum kept, scaled by num/n so that amplitudes survive the
    // change of length (the inverse FFT below divides by num).
    let scale = num as f64 / n as f64;
    let mut half: Vec<Complex64> = spec[..m2.min(n / 2 + 1)]
        .iter()
        .map(|c| c * scale)
        .collect();
    if m & 1 == 0 && num != n {
        let f = if num < n { 2.0 } else { 0.5 };
        half[m / 2] *= f;
    }

    // Build the Hermitian spectrum of length num from the one-sided part,
    // as an inverse real FFT of length num would read it (imaginary parts of
    // the DC and, for even num, the Nyquist bin are ignored).
    let mut full = vec![Complex64::new(0.0, 0.0); num];
    let nyq = num / 2;
    for (k, c) in half.iter().enumerate().take(nyq + 1) {
        full[k] = *c;
    }
    full[0].im = 0.0;
    if num & 1 == 0 {
        full[nyq].im = 0.0;
    }
    for k in 1..num.div_ceil(2) {
        full[num - k] = full[k].conj();
    }
    planner.plan_fft_inverse(num).process(&mut full);
    full.iter().map(|c| c.re / num as f64).collect()
}

/// Greatest common divisor.
fn gcd(a: u64, b: u64) -> u64 {
    if b == 0 {
        a
    } else {
        gcd(b, a % b)
    }
}

/// Modified Bessel function of the first kind, order 0, by its power series
/// (converges quickly for the β ≤ 20 used by Kaiser windows).
fn bessel_i0(x: f64) -> f64 {
    let mut sum = 1.0;
    let mut term = 1.0;
    let q = x * x / 4.0;
    for k in 1..200 {
        term *= q / (k as f64 * k as f64);
        sum += term;
        if term < sum * 1e-17 {
            break;
        }
    }
    sum
}

/// Low-pass FIR of `numtaps` taps with cut-off `cutoff` (fraction of
/// Nyquist), Kaiser window of parameter `beta`, scaled to unit DC gain:
/// the windowed-sinc design of `scipy.signal.firwin`.
fn firwin_kaiser(numtaps: usize, cutoff: f64, beta: f64) -> Vec<f64> {
    let alpha = 0.5 * (numtaps as f64 - 1.0);
    let denom = bessel_i0(beta);
    let mut h: Vec<f64> = (0..numtaps)
        .map(|i| {
            let m = i as f64 - alpha;
            let arg = cutoff * m;
            let sinc = if arg == 0.0 {
                1.0
            } else {
                (std::f64::consts::PI * arg).sin() / (std::f64::consts::PI * arg)
            };
            let r = if numtaps > 1 {
                2.0 * i as f64 / (numtaps as f64 - 1.0) - 1.0
            } else {
                0.0
            };
            let w = bessel_i0(beta * (1.0 - r * r).max(0.0).sqrt()) / denom;
            cutoff * sinc * w
        })
        .collect();
    let s: f64 = h.iter().sum();
    for v in &mut h {
        *v /= s;
    }
    h
}

/// Polyphase resampling by the rational factor `up / down` (reduced first),
/// with scipy's default anti-aliasing filter: `firwin(2·h + 1, 1/max(up,
/// down), window=('kaiser', 5.0))·up` with `h = 10·max(up, down)`. The output
/// has `ceil(len · up / down)` samples, aligned so that output sample `i` is at
/// input time `i · down / up`; samples outside the signal count as zero.
pub fn resample_poly(x: &[f64], up: u64, down: u64) -> Result<Vec<f64>, DspError> {
    if up == 0 || down == 0 {
        return Err(DspError::Resample(format!(
            "up and down factors must be at least 1, got up={up}, down={down}"
        )));
    }
    let g = gcd(up, down);
    let (up, down) = ((up / g) as usize, (down / g) as usize);
    if x.is_empty() {
        return Ok(Vec::new());
    }
    if up == 1 && down == 1 {
        return Ok(x.to_vec());
    }
    let max_rate = up.max(down);
    let half_len = 10 * max_rate;
    let h: Vec<f64> = firwin_kaiser(2 * half_len + 1, 1.0 / max_rate as f64, 5.0)
        .into_iter()
        .map(|v| v * up as f64)
        .collect();
    let n_out = (x.len() * up).div_ceil(down);
    // Output sample i is the filtered up-sampled signal at index
    // i·down + half_len (the filter's group delay), where the up-sampled
    // signal holds x[j] at index j·up and zeros elsewhere.
    let mut y = vec![0.0; n_out];
    for (i, out) in y.iter_mut().enumerate() {
        let t = i * down + half_len;
        // Taps k with (t - k) a multiple of up, 0 <= (t-k)/up < len.
        let k0 = t % up;
        let mut acc = 0.0;
        let mut k = k0;
        while k < h.len() {
            let j = (t - k) / up;
            if j < x.len() {
                acc += h[k] * x[j];
            }
            if t < k + up {
                break;
            }
            k += up;
        }
        *out = acc;
    }
    Ok(y)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Bessel I0 values: Abramowitz & Stegun table 9.8 (I0(1) = 1.266065878,
    // I0(5) = 27.23987182), from memory.
    #[test]
    fn bessel_i0_matches_table_values() {
        assert!((bessel_i0(1.0) - 1.266_065_878).abs() < 1e-8);
        assert!((bessel_i0(5.0) - 27.239_871_82).abs() < 1e-6);
    }
}
