//! Causal and zero-phase filtering: against a slow direct-form oracle and
//! against the defining properties of zero-phase filtering.

use std::f64::consts::PI;

use tendline_dsp::filter::{
    butterworth_bandpass_sos, butterworth_highpass_sos, butterworth_lowpass_sos, default_padlen,
    filtfilt_sos, filtfilt_sos_padded, lfilter_sos, ConditioningFilter, FilterConfig, Powerline,
    Sos,
};

/// Deterministic pseudo-random numbers in [-0.5, 0.5) (xorshift64).
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

fn poly_mul(a: &[f64], b: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; a.len() + b.len() - 1];
    for (i, x) in a.iter().enumerate() {
        for (j, y) in b.iter().enumerate() {
            out[i + j] += x * y;
        }
    }
    out
}

/// The whole cascade as one transfer function B(z)/A(z).
fn transfer_function(sections: &[Sos]) -> (Vec<f64>, Vec<f64>) {
    sections.iter().fold((vec![1.0], vec![1.0]), |(b, a), s| {
        (
            poly_mul(&b, &[s.b0, s.b1, s.b2]),
            poly_mul(&a, &[1.0, s.a1, s.a2]),
        )
    })
}

/// Slow, obvious oracle: the difference equation
/// y[n] = Σ b[k] x[n−k] − Σ_{k≥1} a[k] y[n−k], from rest.
fn difference_equation(b: &[f64], a: &[f64], x: &[f64]) -> Vec<f64> {
    let mut y = vec![0.0; x.len()];
    for n in 0..x.len() {
        let mut acc = 0.0;
        for (k, bk) in b.iter().enumerate() {
            if n >= k {
                acc += bk * x[n - k];
            }
        }
        for (k, ak) in a.iter().enumerate().skip(1) {
            if n >= k {
                acc -= ak * y[n - k];
            }
        }
        y[n] = acc / a[0];
    }
    y
}

/// Oracle for the zero-phase filter: the odd extension written out, and the
/// "steady state of a step" start obtained by literally feeding a long run of
/// the first value before the signal, each pass through the difference
/// equation of the full transfer function.
fn filtfilt_oracle(sections: &[Sos], x: &[f64], pad: usize, settle: usize) -> Vec<f64> {
    let (b, a) = transfer_function(sections);
    let n = x.len();
    let mut ext = Vec::new();
    for i in (1..=pad).rev() {
        ext.push(2.0 * x[0] - x[i]);
    }
    ext.extend_from_slice(x);
    for i in 1..=pad {
        ext.push(2.0 * x[n - 1] - x[n - 1 - i]);
    }
    let pass = |v: &[f64]| -> Vec<f64> {
        let mut pre = vec![v[0]; settle];
        pre.extend_from_slice(v);
        difference_equation(&b, &a, &pre)[settle..].to_vec()
    };
    let mut y = pass(&ext);
    y.reverse();
    let mut y = pass(&y);
    y.reverse();
    y[pad..pad + n].to_vec()
}

fn max_abs_diff(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max)
}

fn test_signal(n: usize, fs: f64) -> Vec<f64> {
    let r = noise(n, 7);
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            1.5 + 0.8 * (2.0 * PI * 0.3 * t).sin()
                + (2.0 * PI * 7.0 * t).sin()
                + 0.3 * (2.0 * PI * 50.0 * t).cos()
                + r[i]
        })
        .collect()
}

#[test]
fn lfilter_matches_difference_equation() {
    let fs = 250.0;
    let x = test_signal(2000, fs);
    for s in [
        butterworth_lowpass_sos(4, 40.0, fs).unwrap(),
        butterworth_bandpass_sos(2, 5.0, 15.0, fs).unwrap(),
        butterworth_highpass_sos(3, 1.0, fs).unwrap(),
    ] {
        let (b, a) = transfer_function(&s);
        let d = max_abs_diff(&lfilter_sos(&s, &x), &difference_equation(&b, &a, &x));
        assert!(d < 1e-9, "max difference {d}");
    }
}

#[test]
fn filtfilt_matches_oracle() {
    let fs = 250.0;
    let x = test_signal(3000, fs);
    for (s, settle) in [
        (butterworth_lowpass_sos(4, 40.0, fs).unwrap(), 2000),
        (butterworth_bandpass_sos(2, 5.0, 15.0, fs).unwrap(), 4000),
        (butterworth_highpass_sos(2, 0.5, fs).unwrap(), 40_000),
    ] {
        for pad in [default_padlen(&s), 500] {
            let got = filtfilt_sos_padded(&s, &x, pad);
            let want = filtfilt_oracle(&s, &x, pad, settle);
            let d = max_abs_diff(&got, &want);
            assert!(d < 1e-8, "pad {pad}: max difference {d}");
        }
        let d = max_abs_diff(
            &filtfilt_sos(&s, &x),
            &filtfilt_oracle(&s, &x, default_padlen(&s), settle),
        );
        assert!(d < 1e-8, "default pad: {d}");
    }
}

/// A zero-phase filter maps an even signal to an even signal (its impulse
/// response is symmetric) — the defining property of forward-backward
/// filtering (Gustafsson, IEEE TSP 1996, from memory).
#[test]
fn symmetric_pulse_stays_symmetric_and_in_place() {
    let fs = 250.0;
    let n = 2001;
    let c = (n / 2) as f64;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let d = (i as f64 - c) / fs;
            (-(d / 0.02).powi(2)).exp() + 0.3 * (-(d / 0.15).powi(2)).exp()
        })
        .collect();
    let filt = ConditioningFilter::design(
        fs,
        &FilterConfig {
            powerline: Powerline::Hz50,
            lowpass_hz: 40.0,
            ..FilterConfig::default()
        },
    )
    .unwrap();
    let y = filt.apply(&x);
    let asym = (0..n)
        .map(|i| (y[i] - y[n - 1 - i]).abs())
        .fold(0.0, f64::max);
    let peak = y.iter().cloned().fold(f64::MIN, f64::max);
    // The two passes start from opposite edges, so symmetry is exact only up
    // to what is left of the start-up transients after the padding.
    assert!(asym < 1e-6 * peak.abs().max(1.0), "asymmetry {asym}");
    let argmax = y
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .unwrap()
        .0;
    assert_eq!(argmax, n / 2, "peak must not move");
    // A causal pass of the same cascade delays the peak (contrast case).
    let causal = lfilter_sos(&filt.sections(Some(50.0)), &x);
    let causal_argmax = causal
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))
        .unwrap()
        .0;
    assert!(causal_argmax > n / 2, "causal filter should delay the peak");
}

/// Cross-correlation of input and zero-phase output of a broadband signal
/// peaks at lag 0.
#[test]
fn cross_correlation_peaks_at_lag_zero() {
    let fs = 250.0;
    let x = noise(5000, 99);
    let s = butterworth_bandpass_sos(2, 5.0, 15.0, fs).unwrap();
    let y = filtfilt_sos(&s, &x);
    let xcorr = |lag: isize| -> f64 {
        (0..x.len() as isize)
            .filter_map(|i| {
                let j = i + lag;
                (j >= 0 && (j as usize) < y.len()).then(|| x[i as usize] * y[j as usize])
            })
            .sum()
    };
    let best = (-20..=20)
        .max_by(|a, b| xcorr(*a).total_cmp(&xcorr(*b)))
        .unwrap();
    assert_eq!(best, 0);
    let causal = lfilter_sos(&s, &x);
    let xc = |lag: usize| -> f64 { (0..x.len() - lag).map(|i| x[i] * causal[i + lag]).sum() };
    let best_causal = (0..40).max_by(|a, b| xc(*a).total_cmp(&xc(*b))).unwrap();
    assert!(best_causal > 0, "the causal band-pass must show a delay");
}

#[test]
fn highpass_removes_dc_and_wander() {
    let fs = 250.0;
    let n = 30 * 250;
    // Offset 2 mV plus a 0.1 Hz wander of 1 mV on a 10 Hz component.
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            2.0 + (2.0 * PI * 0.1 * t).sin() + 0.5 * (2.0 * PI * 10.0 * t).sin()
        })
        .collect();
    let filt = ConditioningFilter::design(
        fs,
        &FilterConfig {
            powerline: Powerline::Off,
            ..FilterConfig::default()
        },
    )
    .unwrap();
    let y = filt.apply(&x);
    let mean = y.iter().sum::<f64>() / n as f64;
    assert!(mean.abs() < 0.01, "residual mean {mean}");
    // Away from the edges, what is left is the 10 Hz component: compare
    // with it sample by sample. Residual wander at 0.1 Hz through a
    // 0.5 Hz order-2 filter run twice: (0.1/0.5)^8 ≈ 2.6e-6 relative (Butterworth formula).
    let inner = 5 * 250..n - 5 * 250;
    let err = inner
        .map(|i| (y[i] - 0.5 * (2.0 * PI * 10.0 * i as f64 / fs).sin()).abs())
        .fold(0.0, f64::max);
    assert!(err < 0.01, "max deviation from the 10 Hz component {err}");
}

/// The conditioning chain with the 50 Hz notch attenuates 50 Hz by far more
/// than 30 dB (one pass gives a zero at 50 Hz; rounding and edge leakage
/// leave a little) while passing 10 Hz.
#[test]
fn fifty_hz_attenuated_more_than_30_db() {
    let fs = 250.0;
    let n = 20 * 250;
    let tone = |f: f64| -> Vec<f64> {
        (0..n)
            .map(|i| (2.0 * PI * f * i as f64 / fs).sin())
            .collect()
    };
    let filt = ConditioningFilter::design(
        fs,
        &FilterConfig {
            powerline: Powerline::Hz50,
            ..FilterConfig::default()
        },
    )
    .unwrap();
    let rms = |v: &[f64]| (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt();
    let inner = 2 * 250..n - 2 * 250;
    let x50 = tone(50.0);
    let y50 = filt.apply(&x50);
    let att_db = 20.0 * (rms(&y50[inner.clone()]) / rms(&x50[inner.clone()])).log10();
    assert!(att_db < -30.0, "50 Hz attenuation only {att_db:.1} dB");
    let x10 = tone(10.0);
    let y10 = filt.apply(&x10);
    let pass_db = 20.0 * (rms(&y10[inner.clone()]) / rms(&x10[inner])).log10();
    assert!(pass_db.abs() < 0.1, "10 Hz changed by {pass_db:.2} dB");
}

#[test]
fn edges_and_short_signals() {
    let s = butterworth_lowpass_sos(4, 40.0, 250.0).unwrap();
    assert!(filtfilt_sos(&s, &[]).is_empty());
    assert_eq!(filtfilt_sos(&s, &[3.0]).len(), 1);
    // A constant passes a low-pass unchanged, even when shorter than the pad.
    for n in [2, 5, 30, 1000] {
        let y = filtfilt_sos(&s, &vec![3.0; n]);
        assert!(y.iter().all(|v| (v - 3.0).abs() < 1e-9), "n={n}: {y:?}");
    }
    // A straight line passes a unit-DC-gain low-pass unchanged: the odd
    // extension continues it as a line, and the start-up transient (the
    // initial state is that of a constant, not of a ramp) dies out within a
    // long enough pad.
    let line: Vec<f64> = (0..500).map(|i| 0.01 * i as f64 - 1.0).collect();
    let y = filtfilt_sos_padded(&s, &line, 300);
    assert!(max_abs_diff(&y, &line) < 1e-9);
    // No sections: identity.
    assert_eq!(filtfilt_sos(&[], &line), line);
}
