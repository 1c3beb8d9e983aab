//! Filter designs checked against closed-form textbook responses and the
//! audio-EQ-cookbook notch; the coefficient-level comparison with scipy is in
//! tests/python/test_dsp_filters.py.

use std::f64::consts::PI;

use tendline_dsp::filter::{
    butterworth_bandpass_sos, butterworth_highpass_sos, butterworth_lowpass_sos, notch_sos,
    sos_response, DspError,
};

fn mag(sections: &[tendline_dsp::filter::Sos], f: f64, fs: f64) -> f64 {
    sos_response(sections, f, fs).norm()
}

/// Digital Butterworth by the bilinear transform with pre-warping:
/// |H(e^jw)|² = 1 / (1 + (tan(w/2) / tan(wc/2))^(2N)) for the low-pass and the
/// reciprocal ratio for the high-pass (Oppenheim & Schafer, Discrete-Time
/// Signal Processing, bilinear-transform Butterworth design; from memory).
fn butter_lp_mag(order: usize, fc: f64, f: f64, fs: f64) -> f64 {
    let r = (PI * f / fs).tan() / (PI * fc / fs).tan();
    1.0 / (1.0 + r.powi(2 * order as i32)).sqrt()
}

fn butter_hp_mag(order: usize, fc: f64, f: f64, fs: f64) -> f64 {
    let r = (PI * fc / fs).tan() / (PI * f / fs).tan();
    1.0 / (1.0 + r.powi(2 * order as i32)).sqrt()
}

/// Band-pass from the low-pass prototype by s -> (s² + Ω0²) / (s·B), with
/// Ω = tan(w/2) pre-warped edges, Ω0² = Ω1·Ω2, B = Ω2 − Ω1 (same source).
fn butter_bp_mag(order: usize, lo: f64, hi: f64, f: f64, fs: f64) -> f64 {
    let w = (PI * f / fs).tan();
    let w1 = (PI * lo / fs).tan();
    let w2 = (PI * hi / fs).tan();
    let r = (w * w - w1 * w2) / (w * (w2 - w1));
    1.0 / (1.0 + r.powi(2 * order as i32)).sqrt()
}

fn grid(fs: f64) -> Vec<f64> {
    (1..400).map(|k| k as f64 * fs / 800.0).collect()
}

#[test]
fn lowpass_matches_butterworth_formula() {
    for &(order, fc, fs) in &[
        (1, 40.0, 250.0),
        (2, 40.0, 250.0),
        (4, 100.0, 250.0),
        (5, 40.0, 1000.0),
        (8, 15.0, 360.0),
    ] {
        let s = butterworth_lowpass_sos(order, fc, fs).unwrap();
        assert_eq!(s.len(), order.div_ceil(2));
        for f in grid(fs) {
            let (got, want) = (mag(&s, f, fs), butter_lp_mag(order, fc, f, fs));
            assert!(
                (got - want).abs() < 1e-9,
                "order {order} fc {fc} fs {fs} f {f}: {got} vs {want}"
            );
        }
        // −3 dB at the cut-off and unit gain at DC: definition of the Butterworth cut-off.
        assert!((mag(&s, fc, fs) - 0.5f64.sqrt()).abs() < 1e-9);
        assert!((mag(&s, 0.0, fs) - 1.0).abs() < 1e-12);
    }
}

#[test]
fn highpass_matches_butterworth_formula() {
    for &(order, fc, fs) in &[
        (1, 0.5, 250.0),
        (2, 0.5, 250.0),
        (3, 0.67, 360.0),
        (4, 5.0, 1000.0),
    ] {
        let s = butterworth_highpass_sos(order, fc, fs).unwrap();
        for f in grid(fs) {
            let (got, want) = (mag(&s, f, fs), butter_hp_mag(order, fc, f, fs));
            assert!(
                (got - want).abs() < 1e-9,
                "order {order} fc {fc} fs {fs} f {f}: {got} vs {want}"
            );
        }
        assert!(mag(&s, 0.0, fs) < 1e-12, "DC must be blocked exactly");
        assert!((mag(&s, fc, fs) - 0.5f64.sqrt()).abs() < 1e-9);
    }
}

#[test]
fn bandpass_matches_butterworth_formula() {
    for &(order, lo, hi, fs) in &[
        (1, 5.0, 15.0, 250.0),
        (2, 5.0, 15.0, 250.0),
        (3, 0.5, 40.0, 500.0),
        (4, 8.0, 20.0, 360.0),
    ] {
        let s = butterworth_bandpass_sos(order, lo, hi, fs).unwrap();
        assert_eq!(s.len(), order);
        for f in grid(fs) {
            let (got, want) = (mag(&s, f, fs), butter_bp_mag(order, lo, hi, f, fs));
            assert!(
                (got - want).abs() < 1e-8,
                "order {order} [{lo},{hi}] fs {fs} f {f}: {got} vs {want}"
            );
        }
        assert!((mag(&s, lo, fs) - 0.5f64.sqrt()).abs() < 1e-8);
        assert!((mag(&s, hi, fs) - 0.5f64.sqrt()).abs() < 1e-8);
    }
}

/// Notch from the formulas of R. Bristow-Johnson, "Cookbook formulae for
/// audio EQ biquad filter coefficients": b = [1, −2cos w0, 1],
/// a = [1 + α, −2cos w0, 1 − α], normalised by a0; with α = tan(w0/(2Q)) the
/// −3 dB bandwidth is exactly w0/Q (the definition used by
/// `scipy.signal.iirnotch`).
#[test]
fn notch_matches_cookbook_formula_and_bandwidth() {
    for &(f0, q, fs) in &[
        (50.0, 30.0, 250.0),
        (60.0, 30.0, 250.0),
        (50.0, 10.0, 1000.0),
        (60.0, 35.0, 360.0),
    ] {
        let s = notch_sos(f0, q, fs).unwrap();
        let w0 = 2.0 * PI * f0 / fs;
        let alpha = (w0 / (2.0 * q)).tan();
        let a0 = 1.0 + alpha;
        let want = [
            1.0 / a0,
            -2.0 * w0.cos() / a0,
            1.0 / a0,
            -2.0 * w0.cos() / a0,
            (1.0 - alpha) / a0,
        ];
        let got = [s.b0, s.b1, s.b2, s.a1, s.a2];
        for (g, w) in got.iter().zip(want) {
            assert!((g - w).abs() < 1e-14, "{got:?} vs {want:?}");
        }
        assert!(mag(&[s], f0, fs) < 1e-12, "zero gain at the centre");
        // −3 dB points are at w0 ± bw/2 in the tan(w/2)-warped sense; the
        // frequencies where |H|² = 1/2 satisfy tan-based symmetry, so check
        // by bisection that the −3 dB width equals w0/Q.
        let half_power = |lo: f64, hi: f64, rising: bool| {
            let (mut a, mut b) = (lo, hi);
            for _ in 0..200 {
                let m = 0.5 * (a + b);
                let above = mag(&[s], m, fs) > 0.5f64.sqrt();
                if above == rising {
                    b = m;
                } else {
                    a = m;
                }
            }
            0.5 * (a + b)
        };
        let f_hi = half_power(f0, fs / 2.0 * 0.999, true);
        let f_lo = half_power(1e-3, f0, false);
        let bw = f_hi - f_lo;
        assert!(
            (bw - f0 / q).abs() < 1e-6 * f0,
            "bandwidth {bw} vs {}",
            f0 / q
        );
        assert!((mag(&[s], 0.0, fs) - 1.0).abs() < 1e-12);
    }
}

#[test]
fn bad_design_parameters_are_typed_errors() {
    assert!(matches!(
        butterworth_lowpass_sos(4, 130.0, 250.0),
        Err(DspError::FrequencyOutOfRange { .. })
    ));
    assert!(matches!(
        butterworth_lowpass_sos(0, 40.0, 250.0),
        Err(DspError::BadOrder { .. })
    ));
    assert!(matches!(
        butterworth_highpass_sos(2, 0.5, 0.0),
        Err(DspError::BadSamplingRate { .. })
    ));
    assert!(matches!(
        butterworth_highpass_sos(2, f64::NAN, 250.0),
        Err(DspError::FrequencyOutOfRange { .. })
    ));
    assert!(matches!(
        butterworth_bandpass_sos(2, 15.0, 5.0, 250.0),
        Err(DspError::BadBand { .. })
    ));
    assert!(matches!(
        notch_sos(50.0, 0.0, 250.0),
        Err(DspError::BadQ { .. })
    ));
    assert!(matches!(
        notch_sos(60.0, 30.0, 100.0),
        Err(DspError::FrequencyOutOfRange { .. })
    ));
    let msg = butterworth_lowpass_sos(4, 130.0, 250.0)
        .unwrap_err()
        .to_string();
    assert!(msg.contains("130") && msg.contains("125"), "{msg}");
}
