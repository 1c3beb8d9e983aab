//! Resampling against slow oracles (direct DFT, explicit up-sample /
//! convolve / down-sample) and against band-limited signals known in closed
//! form. The comparison with scipy's own values is in
//! tests/python/test_dsp_filters.py.

use std::f64::consts::PI;

use tendline_dsp::resample::{resample, resample_fft, resample_poly};
use tendline_dsp::DspError;

/// Slow oracle for the Fourier method: evaluate the trigonometric
/// interpolant defined by the kept DFT bins at the new sample times,
/// t = i·n/num input samples, straight from the DFT definition. For an even
/// kept band the unpaired bin counts half on each side (up-sampling) or
/// the pair is merged (down-sampling) — the convention of
/// `scipy.signal.resample`.
fn fft_oracle(x: &[f64], num: usize) -> Vec<f64> {
    let n = x.len();
    let m = n.min(num);
    let dft = |k: i64| -> (f64, f64) {
        let (mut re, mut im) = (0.0, 0.0);
        for (j, v) in x.iter().enumerate() {
            let a = -2.0 * PI * (k as f64) * j as f64 / n as f64;
            re += v * a.cos();
            im += v * a.sin();
        }
        (re, im)
    };
    // Bins -(m-1)/2 ..= (m-1)/2, plus the unpaired ±m/2 bin for even m.
    let half = ((m - 1) / 2) as i64;
    let mut bins: Vec<(f64, f64, f64)> = Vec::new(); // (frequency in bins, re, im)
    for k in -half..=half {
        let (re, im) = dft(k);
        bins.push((k as f64, re, im));
    }
    if m & 1 == 0 {
        let k = (m / 2) as i64;
        let (re, im) = dft(k);
        if num > n {
            // Split the unpaired bin into a conjugate pair at ±m/2, each half.
            bins.push((k as f64, re / 2.0, im / 2.0));
            bins.push((-(k as f64), re / 2.0, -im / 2.0));
        } else if num < n {
            // Down-sampling: bins +m/2 and −m/2 merge into the output's
            // Nyquist bin, which a real inverse transform reads as a cosine.
            let (re2, _) = dft(-k);
            bins.push((k as f64, re + re2, 0.0));
        } else {
            bins.push((k as f64, re, im));
        }
    }
    (0..num)
        .map(|i| {
            let t = i as f64 * n as f64 / num as f64;
            bins.iter()
                .map(|(k, re, im)| {
                    let a = 2.0 * PI * k * t / n as f64;
                    re * a.cos() - im * a.sin()
                })
                .sum::<f64>()
                / n as f64
        })
        .collect()
}

/// Slow oracle for the polyphase method: insert up−1 zeros between samples,
/// convolve with the full filter, take every down-th sample after the
/// filter's delay — written out literally.
fn poly_oracle(x: &[f64], up: usize, down: usize, h: &[f64]) -> Vec<f64> {
    let mut xu = vec![0.0; x.len() * up];
    for (i, v) in x.iter().enumerate() {
        xu[i * up] = *v;
    }
    let mut conv = vec![0.0; xu.len() + h.len() - 1];
    for (i, a) in xu.iter().enumerate() {
        for (j, b) in h.iter().enumerate() {
            conv[i + j] += a * b;
        }
    }
    let delay = (h.len() - 1) / 2;
    let n_out = (x.len() * up).div_ceil(down);
    (0..n_out).map(|i| conv[i * down + delay]).collect()
}

fn noise(n: usize, seed: u64) -> Vec<f64> {
    let mut s = seed | 1;
    (0..n)
        .map(|_| {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        })
        .collect()
}

fn max_abs_diff(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max)
}

#[test]
fn fft_resample_matches_dft_oracle() {
    for n in [64usize, 65, 100, 101] {
        let x = noise(n, n as u64);
        for num in [n * 4, n * 2, n / 4, n * 36 / 25, n * 25 / 36, n] {
            let d = max_abs_diff(&resample_fft(&x, num), &fft_oracle(&x, num));
            assert!(d < 1e-11, "n {n} num {num}: {d}");
        }
    }
}

#[test]
fn poly_resample_matches_convolution_oracle() {
    let x = noise(300, 5);
    for (up, down) in [(4usize, 1usize), (2, 1), (1, 4), (36, 25), (25, 36), (3, 2)] {
        let got = resample_poly(&x, up as u64, down as u64).unwrap();
        let max_rate = up.max(down);
        let half = 10 * max_rate;
        assert_eq!(got.len(), (x.len() * up).div_ceil(down));
        // scipy's default filter for resample_poly, rebuilt here from the
        // textbook formula: 2·10·max(up, down) + 1 taps, cut-off 1/max(up, down).
        let h = kaiser_sinc(2 * half + 1, 1.0 / max_rate as f64, 5.0, up as f64);
        let want = poly_oracle(&x, up, down, &h);
        let d = max_abs_diff(&got, &want);
        assert!(d < 1e-12, "up {up} down {down}: {d}");
    }
}

/// Windowed-sinc low-pass (Kaiser window, J. F. Kaiser 1974; I0 by its power
/// series), unit DC gain, times `gain`. Textbook formula, written
/// independently of the library's version.
fn kaiser_sinc(numtaps: usize, cutoff: f64, beta: f64, gain: f64) -> Vec<f64> {
    let i0 = |x: f64| -> f64 {
        let mut s = 0.0;
        let mut fact = 1.0;
        for k in 0..60 {
            if k > 0 {
                fact *= k as f64;
            }
            s += ((x / 2.0).powi(k) / fact).powi(2);
        }
        s
    };
    let mid = (numtaps - 1) as f64 / 2.0;
    let mut h: Vec<f64> = (0..numtaps)
        .map(|i| {
            let m = i as f64 - mid;
            let sinc = if m == 0.0 {
                1.0
            } else {
                (PI * cutoff * m).sin() / (PI * cutoff * m)
            };
            let r = m / mid;
            cutoff * sinc * i0(beta * (1.0 - r * r).sqrt()) / i0(beta)
        })
        .collect();
    let s: f64 = h.iter().sum();
    h.iter_mut().for_each(|v| *v *= gain / s);
    h
}

/// A sinusoid with a whole number of periods in the record is band-limited
/// and periodic, so the Fourier method reproduces it exactly at the new rate
/// (sampling theorem).
#[test]
fn periodic_sine_is_reproduced_exactly_at_new_rates() {
    let fs = 250.0;
    let n = 2500; // 10 s
    let x: Vec<f64> = (0..n)
        .map(|i| (2.0 * PI * 7.0 * i as f64 / fs + 0.4).sin())
        .collect();
    for fs_out in [500.0, 1000.0, 360.0, 200.0] {
        let y = resample(&x, fs, fs_out).unwrap();
        assert_eq!(y.len(), (n as f64 * fs_out / fs).round() as usize);
        let want: Vec<f64> = (0..y.len())
            .map(|i| (2.0 * PI * 7.0 * i as f64 / fs_out + 0.4).sin())
            .collect();
        let d = max_abs_diff(&y, &want);
        assert!(d < 1e-9, "fs_out {fs_out}: {d}");
    }
}

/// The polyphase method's pass band ripple is set by the Kaiser window; away
/// from the edges a 7 Hz sine comes through 250 -> 1000 Hz within 1e-3.
#[test]
fn poly_resample_reproduces_sine_away_from_edges() {
    let fs = 250.0;
    let n = 2500;
    let x: Vec<f64> = (0..n)
        .map(|i| (2.0 * PI * 7.0 * i as f64 / fs).sin())
        .collect();
    let y = resample_poly(&x, 4, 1).unwrap();
    let err = (400..y.len() - 400)
        .map(|i| (y[i] - (2.0 * PI * 7.0 * i as f64 / 1000.0).sin()).abs())
        .fold(0.0, f64::max);
    assert!(err < 1e-3, "{err}");
}

#[test]
fn round_trip_up_and_down_is_identity_for_fft_method() {
    let x = noise(1000, 3);
    let up = resample(&x, 250.0, 1000.0).unwrap();
    let back = resample(&up, 1000.0, 250.0).unwrap();
    assert!(max_abs_diff(&x, &back) < 1e-12);
}

#[test]
fn bad_rates_are_typed_errors() {
    assert!(matches!(
        resample(&[1.0], 0.0, 250.0),
        Err(DspError::Resample(_))
    ));
    assert!(matches!(
        resample(&[1.0], 250.0, f64::INFINITY),
        Err(DspError::Resample(_))
    ));
    assert!(matches!(
        resample_poly(&[1.0], 0, 1),
        Err(DspError::Resample(_))
    ));
    assert!(resample(&[], 250.0, 500.0).unwrap().is_empty());
    assert!(resample_poly(&[], 2, 1).unwrap().is_empty());
}
