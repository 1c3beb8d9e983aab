//! Conditioning filters applied to every lead before detection and delineation:
//! baseline-wander removal (Butterworth high-pass), power-line interference
//! removal (second-order notch at 50 or 60 Hz, fixed or detected from the
//! spectrum) and a Butterworth low-pass, all run forward and backward so that
//! wave boundaries are not shifted in time.
//!
//! The module also exposes the general building blocks (Butterworth designs as
//! second-order sections, causal and zero-phase cascade filtering, frequency
//! response) so that other stages, e.g. the Pan–Tompkins band-pass, reuse them.
//!
//! Designs follow the same steps as `scipy.signal.butter(..., output='sos')`
//! (analog Butterworth prototype, pre-warped frequency transform, bilinear
//! transform, "nearest" pole-zero pairing with the poles closest to the unit
//! circle in the last section and the overall gain in the first), so the
//! coefficients can be compared with that reference one-to-one.

use std::collections::HashMap;
use std::f64::consts::PI;
use std::sync::{Arc, RwLock};

use biquad::{Biquad, Coefficients, DirectForm2Transposed};
use realfft::RealFftPlanner;
use rustfft::num_complex::Complex64;
#[cfg(test)]
use rustfft::FftPlanner;
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use tendline_params::{Checker, ParamError};

use crate::pacing::{blank_spikes, find_spikes, Spike};

/// One second-order section `H(z) = (b0 + b1 z⁻¹ + b2 z⁻²) / (1 + a1 z⁻¹ + a2 z⁻²)`.
///
/// The leading denominator coefficient is always 1 (the `biquad` crate's
/// normalised form).
pub type Sos = Coefficients<f64>;

/// Highest Butterworth order accepted by the designers. Higher orders are
/// not needed for ECG conditioning and their pole placement near DC becomes
/// numerically delicate.
pub const MAX_BUTTERWORTH_ORDER: usize = 12;

/// Errors of filter design and resampling.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DspError {
    /// The sampling rate is not a finite positive number.
    #[error("sampling rate must be a finite number above 0 Hz, got {fs}")]
    BadSamplingRate {
        /// The rejected sampling rate in Hz.
        fs: f64,
    },
    /// A cut-off or centre frequency lies outside (0, Nyquist).
    #[error("{what}: frequency {freq_hz} Hz must lie strictly between 0 Hz and the Nyquist frequency {nyquist_hz} Hz (sampling rate {fs} Hz)")]
    FrequencyOutOfRange {
        /// Which filter or parameter the frequency belongs to.
        what: String,
        /// The rejected frequency in Hz.
        freq_hz: f64,
        /// Half the sampling rate in Hz.
        nyquist_hz: f64,
        /// Sampling rate in Hz.
        fs: f64,
    },
    /// A Butterworth order outside `1..=MAX_BUTTERWORTH_ORDER`.
    #[error("{what}: Butterworth order must be 1 to {max}, got {order}")]
    BadOrder {
        /// Which filter the order belongs to.
        what: String,
        /// The rejected order.
        order: usize,
        /// Highest accepted order.
        max: usize,
    },
    /// A band whose low edge is not below its high edge.
    #[error("band-pass: low cut-off {lo_hz} Hz must be below high cut-off {hi_hz} Hz")]
    BadBand {
        /// Low edge in Hz.
        lo_hz: f64,
        /// High edge in Hz.
        hi_hz: f64,
    },
    /// A notch quality factor that is not a finite positive number.
    #[error("notch: quality factor must be a finite number above 0, got {q}")]
    BadQ {
        /// The rejected quality factor.
        q: f64,
    },
    /// The filter configuration failed validation.
    #[error("invalid filter configuration: {}", .0.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; "))]
    InvalidConfig(Vec<ParamError>),
    /// A resampling request that cannot be honoured.
    #[error("resample: {0}")]
    Resample(String),
}

fn check_fs(fs: f64) -> Result<(), DspError> {
    if fs.is_finite() && fs > 0.0 {
        Ok(())
    } else {
        Err(DspError::BadSamplingRate { fs })
    }
}

fn check_freq(what: &str, f: f64, fs: f64) -> Result<(), DspError> {
    check_fs(fs)?;
    if f.is_finite() && f > 0.0 && f < fs / 2.0 {
        Ok(())
    } else {
        Err(DspError::FrequencyOutOfRange {
            what: what.to_string(),
            freq_hz: f,
            nyquist_hz: fs / 2.0,
            fs,
        })
    }
}

fn check_order(what: &str, order: usize) -> Result<(), DspError> {
    if (1..=MAX_BUTTERWORTH_ORDER).contains(&order) {
        Ok(())
    } else {
        Err(DspError::BadOrder {
            what: what.to_string(),
            order,
            max: MAX_BUTTERWORTH_ORDER,
        })
    }
}

// ---------------------------------------------------------------------------
// Butterworth design (zero-pole-gain, then second-order sections)
// ---------------------------------------------------------------------------

/// Zeros, poles and gain of a transfer function.
struct Zpk {
    z: Vec<Complex64>,
    p: Vec<Complex64>,
    k: f64,
}

/// Analog Butterworth low-pass prototype with cut-off 1 rad/s.
fn buttap(order: usize) -> Zpk {
    let n = order as i64;
    let p = (0..order as i64)
        .map(|i| {
            let m = -n + 1 + 2 * i;
            -Complex64::from_polar(1.0, PI * m as f64 / (2.0 * n as f64))
        })
        .collect();
    Zpk {
        z: Vec::new(),
        p,
        k: 1.0,
    }
}

fn cprod(v: &[Complex64]) -> Complex64 {
    v.iter().fold(Complex64::new(1.0, 0.0), |a, b| a * b)
}

/// Pre-warped analog frequency for the bilinear transform with an internal
/// sampling rate of 2 (so that `wn` is the cut-off as a fraction of Nyquist).
fn prewarp(wn: f64) -> f64 {
    4.0 * (PI * wn / 2.0).tan()
}

fn lp2lp(proto: Zpk, wo: f64) -> Zpk {
    let degree = proto.p.len() - proto.z.len();
    Zpk {
        z: proto.z.iter().map(|z| z * wo).collect(),
        p: proto.p.iter().map(|p| p * wo).collect(),
        k: proto.k * wo.powi(degree as i32),
    }
}

fn lp2hp(proto: Zpk, wo: f64) -> Zpk {
    let degree = proto.p.len() - proto.z.len();
    let neg_z: Vec<Complex64> = proto.z.iter().map(|z| -z).collect();
    let neg_p: Vec<Complex64> = proto.p.iter().map(|p| -p).collect();
    let k = proto.k * (cprod(&neg_z) / cprod(&neg_p)).re;
    let mut z: Vec<Complex64> = proto.z.iter().map(|z| wo / z).collect();
    z.extend(std::iter::repeat_n(Complex64::new(0.0, 0.0), degree));
    Zpk {
        z,
        p: proto.p.iter().map(|p| wo / p).collect(),
        k,
    }
}

fn lp2bp(proto: Zpk, wo: f64, bw: f64) -> Zpk {
    let degree = proto.p.len() - proto.z.len();
    let split = |v: &[Complex64]| -> Vec<Complex64> {
        let lp: Vec<Complex64> = v.iter().map(|x| x * (bw / 2.0)).collect();
        let mut out: Vec<Complex64> = lp.iter().map(|x| x + (x * x - wo * wo).sqrt()).collect();
        out.extend(lp.iter().map(|x| x - (x * x - wo * wo).sqrt()));
        out
    };
    let mut z = split(&proto.z);
    z.extend(std::iter::repeat_n(Complex64::new(0.0, 0.0), degree));
    Zpk {
        z,
        p: split(&proto.p),
        k: proto.k * bw.powi(degree as i32),
    }
}

/// Bilinear transform with internal sampling rate 2.
fn bilinear(analog: Zpk) -> Zpk {
    let fs2 = 4.0;
    let degree = analog.p.len() - analog.z.len();
    let mut z: Vec<Complex64> = analog.z.iter().map(|z| (fs2 + z) / (fs2 - z)).collect();
    let p: Vec<Complex64> = analog.p.iter().map(|p| (fs2 + p) / (fs2 - p)).collect();
    let num: Vec<Complex64> = analog.z.iter().map(|z| fs2 - z).collect();
    let den: Vec<Complex64> = analog.p.iter().map(|p| fs2 - p).collect();
    let k = analog.k * (cprod(&num) / cprod(&den)).re;
    z.extend(std::iter::repeat_n(Complex64::new(-1.0, 0.0), degree));
    Zpk { z, p, k }
}

/// Keeps one member (positive imaginary part) of each conjugate pair, then
/// the real values; values whose imaginary part is below a relative tolerance
/// are taken as real (exactly), as the pairing below tests realness exactly.
fn cplx_real(v: &[Complex64]) -> Vec<Complex64> {
    let tol = 100.0 * f64::EPSILON;
    let mut reals: Vec<f64> = Vec::new();
    let mut cplx: Vec<Complex64> = Vec::new();
    for x in v {
        if x.im.abs() <= tol * x.norm() {
            reals.push(x.re);
        } else if x.im > 0.0 {
            cplx.push(*x);
        }
    }
    reals.sort_by(|a, b| a.total_cmp(b));
    cplx.sort_by(|a, b| a.re.total_cmp(&b.re).then(a.im.total_cmp(&b.im)));
    let mut out = cplx;
    out.extend(reals.into_iter().map(|r| Complex64::new(r, 0.0)));
    out
}

fn is_real(x: &Complex64) -> bool {
    x.im == 0.0
}

/// Index of the element of `from` nearest to `to`, restricted to real or
/// complex candidates when asked.
fn nearest_idx(from: &[Complex64], to: Complex64, which: Option<bool>) -> usize {
    let mut best: Option<(usize, f64)> = None;
    for (i, x) in from.iter().enumerate() {
        if let Some(want_real) = which {
            if is_real(x) != want_real {
                continue;
            }
        }
        let d = (x - to).norm();
        if best.is_none_or(|(_, bd)| d < bd) {
            best = Some((i, d));
        }
    }
    best.map(|b| b.0).unwrap_or(0)
}

/// Index of the pole closest to the unit circle (the least damped one).
fn idx_worst(p: &[Complex64], among: impl Fn(&Complex64) -> bool) -> Option<usize> {
    let mut best: Option<(usize, f64)> = None;
    for (i, x) in p.iter().enumerate() {
        if !among(x) {
            continue;
        }
        let d = (1.0 - x.norm()).abs();
        if best.is_none_or(|(_, bd)| d < bd) {
            best = Some((i, d));
        }
    }
    best.map(|b| b.0)
}

fn section(z: [Complex64; 2], p: [Complex64; 2]) -> Sos {
    Coefficients {
        b0: 1.0,
        b1: -(z[0] + z[1]).re,
        b2: (z[0] * z[1]).re,
        a1: -(p[0] + p[1]).re,
        a2: (p[0] * p[1]).re,
    }
}

/// Second-order sections from a digital zero-pole-gain description, pairing
/// each pole with its nearest zero and putting the least damped poles last
/// (so that the earlier sections reduce the signal before it meets the high-Q
/// ones); the overall gain goes into the first section. Mirrors
/// `scipy.signal.zpk2sos(pairing='nearest')` for a digital filter.
fn zpk_to_sos(zpk: Zpk) -> Vec<Sos> {
    let Zpk { mut z, mut p, k } = zpk;
    let zero = Complex64::new(0.0, 0.0);
    if z.len() < p.len() {
        z.extend(std::iter::repeat_n(zero, p.len() - z.len()));
    }
    if p.len() < z.len() {
        p.extend(std::iter::repeat_n(zero, z.len() - p.len()));
    }
    let n_sections = p.len().div_ceil(2);
    if p.len() % 2 == 1 {
        p.push(zero);
        z.push(zero);
    }
    let mut z = cplx_real(&z);
    let mut p = cplx_real(&p);
    let mut sos = vec![
        Coefficients {
            b0: 1.0,
            b1: 0.0,
            b2: 0.0,
            a1: 0.0,
            a2: 0.0
        };
        n_sections
    ];
    for si in (0..n_sections).rev() {
        let Some(i1) = idx_worst(&p, |_| true) else {
            break;
        };
        let p1 = p.remove(i1);
        let n_real_p = p.iter().filter(|x| is_real(x)).count();
        if is_real(&p1) && n_real_p == 0 {
            // Last remaining real pole: pair with the nearest real zero and
            // an origin pole/zero pair.
            let iz = nearest_idx(&z, p1, Some(true));
            let z1 = z.remove(iz);
            sos[si] = section([z1, zero], [p1, zero]);
        } else if p.len() + 1 == z.len()
            && !is_real(&p1)
            && n_real_p == 1
            && z.iter().filter(|x| is_real(x)).count() == 1
        {
            // One real pole and one real zero left: this complex pole must
            // take a complex zero pair.
            let iz = nearest_idx(&z, p1, Some(false));
            let z1 = z.remove(iz);
            sos[si] = section([z1, z1.conj()], [p1, p1.conj()]);
        } else {
            let p2 = if is_real(&p1) {
                let i2 = idx_worst(&p, is_real).unwrap_or(0);
                p.remove(i2)
            } else {
                p1.conj()
            };
            if z.is_empty() {
                sos[si] = section([zero, zero], [p1, p2]);
            } else {
                let iz = nearest_idx(&z, p1, None);
                let z1 = z.remove(iz);
                if !is_real(&z1) {
                    sos[si] = section([z1, z1.conj()], [p1, p2]);
                } else if !z.is_empty() {
                    let iz2 = nearest_idx(&z, p1, Some(true));
                    let z2 = z.remove(iz2);
                    sos[si] = section([z1, z2], [p1, p2]);
                } else {
                    sos[si] = section([z1, zero], [p1, p2]);
                }
            }
        }
    }
    if let Some(first) = sos.first_mut() {
        first.b0 *= k;
        first.b1 *= k;
        first.b2 *= k;
    }
    sos
}

/// Butterworth low-pass of `order` with −3 dB cut-off `fc_hz`, as second-order sections.
pub fn butterworth_lowpass_sos(order: usize, fc_hz: f64, fs: f64) -> Result<Vec<Sos>, DspError> {
    check_order("low-pass", order)?;
    check_freq("low-pass cut-off", fc_hz, fs)?;
    let wo = prewarp(fc_hz / (fs / 2.0));
    Ok(zpk_to_sos(bilinear(lp2lp(buttap(order), wo))))
}

/// Butterworth high-pass of `order` with −3 dB cut-off `fc_hz`, as second-order sections.
pub fn butterworth_highpass_sos(order: usize, fc_hz: f64, fs: f64) -> Result<Vec<Sos>, DspError> {
    check_order("high-pass", order)?;
    check_freq("high-pass cut-off", fc_hz, fs)?;
    let wo = prewarp(fc_hz / (fs / 2.0));
    Ok(zpk_to_sos(bilinear(lp2hp(buttap(order), wo))))
}

/// Butterworth band-pass built from a low-pass prototype of `order` (so the
/// result has `2·order` poles), −3 dB edges `lo_hz` and `hi_hz`.
pub fn butterworth_bandpass_sos(
    order: usize,
    lo_hz: f64,
    hi_hz: f64,
    fs: f64,
) -> Result<Vec<Sos>, DspError> {
    check_order("band-pass", order)?;
    check_freq("band-pass low cut-off", lo_hz, fs)?;
    check_freq("band-pass high cut-off", hi_hz, fs)?;
    if lo_hz >= hi_hz {
        return Err(DspError::BadBand { lo_hz, hi_hz });
    }
    let w1 = prewarp(lo_hz / (fs / 2.0));
    let w2 = prewarp(hi_hz / (fs / 2.0));
    Ok(zpk_to_sos(bilinear(lp2bp(
        buttap(order),
        (w1 * w2).sqrt(),
        w2 - w1,
    ))))
}

/// Second-order notch at `f0_hz` whose −3 dB bandwidth is `f0_hz / q`.
///
/// The section is the audio-EQ-cookbook notch (R. Bristow-Johnson) built by
/// the `biquad` crate. The cookbook's `alpha = sin(w0)/(2Q)` is given the
/// value `tan(w0/(2q))`, which makes `q` the ratio of centre frequency to the
/// exact digital −3 dB bandwidth, the same meaning as in
/// `scipy.signal.iirnotch`.
pub fn notch_sos(f0_hz: f64, q: f64, fs: f64) -> Result<Sos, DspError> {
    check_freq("notch centre", f0_hz, fs)?;
    if !(q.is_finite() && q > 0.0) {
        return Err(DspError::BadQ { q });
    }
    let w0 = 2.0 * PI * f0_hz / fs;
    let alpha = (w0 / (2.0 * q)).tan();
    let q_cookbook = w0.sin() / (2.0 * alpha);
    // `from_normalized_params` takes the frequency as a fraction of Nyquist.
    Coefficients::from_normalized_params(biquad::Type::Notch, f0_hz / (fs / 2.0), q_cookbook)
        .map_err(|_| DspError::FrequencyOutOfRange {
            what: "notch centre".to_string(),
            freq_hz: f0_hz,
            nyquist_hz: fs / 2.0,
            fs,
        })
}

/// Complex frequency response of a cascade at `f_hz`, evaluated directly as
/// the product of `B(e^{jw}) / A(e^{jw})` over the sections.
pub fn sos_response(sections: &[Sos], f_hz: f64, fs: f64) -> Complex64 {
    let w = 2.0 * PI * f_hz / fs;
    let z1 = Complex64::from_polar(1.0, -w);
    let z2 = z1 * z1;
    sections.iter().fold(Complex64::new(1.0, 0.0), |h, s| {
        let num = s.b0 + z1 * s.b1 + z2 * s.b2;
        let den = 1.0 + z1 * s.a1 + z2 * s.a2;
        h * num / den
    })
}

// ---------------------------------------------------------------------------
// Filtering
// ---------------------------------------------------------------------------

/// Run the cascade causally from rest (zero initial state), section by section.
pub fn lfilter_sos(sections: &[Sos], x: &[f64]) -> Vec<f64> {
    let mut y = x.to_vec();
    run_cascade(sections, &mut y, None);
    y
}

/// Initial states (transposed direct form II, `[s1, s2]` per section) that
/// put the cascade in the steady state of a unit step, scaled per section by
/// the DC gain of the sections before it (as `scipy.signal.sosfilt_zi`).
pub fn sos_step_state(sections: &[Sos]) -> Vec<[f64; 2]> {
    let mut scale = 1.0;
    sections
        .iter()
        .map(|s| {
            let a_sum = 1.0 + s.a1 + s.a2;
            let b_sum = s.b0 + s.b1 + s.b2;
            // A section with a pole at DC has no finite step steady state;
            // start it from rest instead.
            let g = if a_sum.abs() > f64::EPSILON {
                b_sum / a_sum
            } else {
                0.0
            };
            let s2 = s.b2 - s.a2 * g;
            let s1 = s.b1 + s.b2 - (s.a1 + s.a2) * g;
            let zi = [scale * s1, scale * s2];
            scale *= g;
            zi
        })
        .collect()
}

/// Filters `y` in place through every section; `zi` (already scaled) seeds
/// the transposed direct form II states.
///
/// All sections per sample rather than one section over the whole signal:
/// section k at sample n+1 does not wait for section k+1 at sample n, so
/// the processor overlaps them (about 3× faster than section by section
/// for the default chain, measured). Cascades of up to six sections (every
/// chain the pipeline designs) run with the section count known at compile
/// time, so the states stay in registers; each step is the same expression
/// as `biquad::DirectForm2Transposed::run` ([`run_cascade_biquad`], the test
/// oracle), hence the same bits.
fn run_cascade(sections: &[Sos], y: &mut [f64], zi: Option<&[[f64; 2]]>) {
    run_cascade_dir::<false>(sections, y, zi)
}

/// [`run_cascade`] over `y` from its last sample to its first.
fn run_cascade_backward(sections: &[Sos], y: &mut [f64], zi: Option<&[[f64; 2]]>) {
    run_cascade_dir::<true>(sections, y, zi)
}

fn run_cascade_dir<const REV: bool>(sections: &[Sos], y: &mut [f64], zi: Option<&[[f64; 2]]>) {
    match sections.len() {
        0 => {}
        1 => run_cascade_n::<1, REV>(sections, y, zi),
        2 => run_cascade_n::<2, REV>(sections, y, zi),
        3 => run_cascade_n::<3, REV>(sections, y, zi),
        4 => run_cascade_n::<4, REV>(sections, y, zi),
        5 => run_cascade_n::<5, REV>(sections, y, zi),
        6 => run_cascade_n::<6, REV>(sections, y, zi),
        _ if REV => {
            y.reverse();
            run_cascade_biquad(sections, y, zi);
            y.reverse();
        }
        _ => run_cascade_biquad(sections, y, zi),
    }
}

fn run_cascade_n<const N: usize, const REV: bool>(
    sections: &[Sos],
    y: &mut [f64],
    zi: Option<&[[f64; 2]]>,
) {
    let c: [Sos; N] = std::array::from_fn(|k| sections[k]);
    let mut s1 = [0.0f64; N];
    let mut s2 = [0.0f64; N];
    if let Some(zi) = zi {
        for k in 0..N {
            s1[k] = zi[k][0];
            s2[k] = zi[k][1];
        }
    }
    let mut step = |v: &mut f64| {
        let mut x = *v;
        for k in 0..N {
            let out = s1[k] + c[k].b0 * x;
            s1[k] = s2[k] + c[k].b1 * x - c[k].a1 * out;
            s2[k] = c[k].b2 * x - c[k].a2 * out;
            x = out;
        }
        *v = x;
    };
    if REV {
        y.iter_mut().rev().for_each(&mut step);
    } else {
        y.iter_mut().for_each(&mut step);
    }
}

/// The cascade through the `biquad` crate's sections (any length; the
/// oracle of [`run_cascade_n`]).
fn run_cascade_biquad(sections: &[Sos], y: &mut [f64], zi: Option<&[[f64; 2]]>) {
    let mut stages: Vec<DirectForm2Transposed<f64>> = sections
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let mut f = DirectForm2Transposed::<f64>::new(*s);
            if let Some(zi) = zi {
                f.s1 = zi[i][0];
                f.s2 = zi[i][1];
            }
            f
        })
        .collect();
    for v in y.iter_mut() {
        let mut s = *v;
        for f in stages.iter_mut() {
            s = f.run(s);
        }
        *v = s;
    }
}

/// Pad length that `scipy.signal.sosfiltfilt` uses by default:
/// `3 · (2·sections + 1 − trailing zero coefficients)`.
pub fn default_padlen(sections: &[Sos]) -> usize {
    let zb = sections.iter().filter(|s| s.b2 == 0.0).count();
    let za = sections.iter().filter(|s| s.a2 == 0.0).count();
    3 * (2 * sections.len() + 1 - zb.min(za))
}

/// Zero-phase filtering with the default pad length ([`default_padlen`]).
///
/// Same algorithm as `scipy.signal.sosfiltfilt` with `padtype='odd'`: the
/// signal is extended at both ends by its point reflection about the end
/// sample, filtered forward from the step steady state of the first extended
/// sample, reversed, filtered again the same way, reversed and trimmed. The
/// magnitude response is that of the cascade squared; the phase is zero.
/// Signals not longer than the pad use a pad of `len − 1` samples (scipy
/// rejects them instead).
pub fn filtfilt_sos(sections: &[Sos], x: &[f64]) -> Vec<f64> {
    filtfilt_sos_padded(sections, x, default_padlen(sections))
}

/// [`filtfilt_sos`] with an explicit pad length (clipped to `len − 1`).
pub fn filtfilt_sos_padded(sections: &[Sos], x: &[f64], padlen: usize) -> Vec<f64> {
    let n = x.len();
    if n == 0 {
        return Vec::new();
    }
    if sections.is_empty() {
        return x.to_vec();
    }
    let pad = padlen.min(n - 1);
    let mut ext = Vec::with_capacity(n + 2 * pad);
    let (first, last) = (x[0], x[n - 1]);
    ext.extend((1..=pad).rev().map(|i| 2.0 * first - x[i]));
    ext.extend_from_slice(x);
    ext.extend((1..=pad).map(|i| 2.0 * last - x[n - 1 - i]));

    let zi = sos_step_state(sections);
    let scaled = |v: f64| -> Vec<[f64; 2]> { zi.iter().map(|z| [z[0] * v, z[1] * v]).collect() };
    let z0 = scaled(ext[0]);
    run_cascade(sections, &mut ext, Some(&z0));
    // The backward pass walks the buffer from its end instead of reversing
    // it twice: the same values through the same operations in the same
    // order ([`filtfilt_sos_padded_reversing`] is the test oracle).
    let z1 = scaled(ext[ext.len() - 1]);
    run_cascade_backward(sections, &mut ext, Some(&z1));
    ext.copy_within(pad..pad + n, 0);
    ext.truncate(n);
    ext
}

/// [`filtfilt_sos_padded`] of several signals with one cascade; the same
/// output, bit for bit, as calling it on each signal.
///
/// Signals of equal length are filtered two at a time, interleaved in one
/// buffer: a biquad step is a chain of dependent multiply-adds, so one
/// signal leaves most of the processor's arithmetic idle, and a second,
/// independent signal in the other lane of the same instructions runs at
/// almost no extra cost (about 1.8× the throughput of two single passes,
/// measured on the default six-section chain). Each lane performs the
/// operations of the single-signal pass in the same order, so the results
/// are identical ([`filtfilt_sos_padded`] is the test oracle).
pub fn filtfilt_sos_padded_many(sections: &[Sos], xs: &[&[f64]], padlen: usize) -> Vec<Vec<f64>> {
    let mut out: Vec<Option<Vec<f64>>> = vec![None; xs.len()];
    let mut single: Vec<usize> = Vec::new();
    let mut waiting: Option<usize> = None;
    for (i, x) in xs.iter().enumerate() {
        // Pairs need equal lengths, at least two samples, and a chain the
        // lane loop is compiled for.
        if x.len() < 2 || sections.is_empty() || sections.len() > 6 {
            single.push(i);
            continue;
        }
        match waiting {
            Some(j) if xs[j].len() == x.len() => {
                let (a, b) = filtfilt_pair(sections, xs[j], x, padlen);
                out[j] = Some(a);
                out[i] = Some(b);
                waiting = None;
            }
            Some(j) => {
                single.push(j);
                waiting = Some(i);
            }
            None => waiting = Some(i),
        }
    }
    single.extend(waiting);
    for i in single {
        out[i] = Some(filtfilt_sos_padded(sections, xs[i], padlen));
    }
    out.into_iter()
        .map(|v| v.expect("every signal filtered"))
        .collect()
}

/// Two equal-length signals (`n ≥ 2`, 1–6 sections) through
/// [`filtfilt_sos_padded`]'s algorithm in two lanes of one buffer.
fn filtfilt_pair(sections: &[Sos], x: &[f64], y: &[f64], padlen: usize) -> (Vec<f64>, Vec<f64>) {
    let n = x.len();
    debug_assert_eq!(n, y.len());
    let pad = padlen.min(n - 1);
    let ext_of = |x: &[f64], i: usize| -> f64 {
        // Index i of the odd-reflection extension of x.
        if i < pad {
            2.0 * x[0] - x[pad - i]
        } else if i < pad + n {
            x[i - pad]
        } else {
            2.0 * x[n - 1] - x[n - 1 - (i - pad - n + 1)]
        }
    };
    let len = n + 2 * pad;
    let mut ext: Vec<[f64; 2]> = Vec::with_capacity(len);
    ext.extend((0..pad).map(|i| [ext_of(x, i), ext_of(y, i)]));
    ext.extend(x.iter().zip(y).map(|(a, b)| [*a, *b]));
    ext.extend((pad + n..len).map(|i| [ext_of(x, i), ext_of(y, i)]));

    let zi = sos_step_state(sections);
    let scaled = |v: [f64; 2]| -> Vec<[[f64; 2]; 2]> {
        zi.iter()
            .map(|z| [[z[0] * v[0], z[0] * v[1]], [z[1] * v[0], z[1] * v[1]]])
            .collect()
    };
    let z0 = scaled(ext[0]);
    run_pair_dir::<false>(sections, &mut ext, &z0);
    let z1 = scaled(ext[len - 1]);
    run_pair_dir::<true>(sections, &mut ext, &z1);
    let core = &ext[pad..pad + n];
    (
        core.iter().map(|v| v[0]).collect(),
        core.iter().map(|v| v[1]).collect(),
    )
}

fn run_pair_dir<const REV: bool>(sections: &[Sos], y: &mut [[f64; 2]], zi: &[[[f64; 2]; 2]]) {
    match sections.len() {
        1 => run_pair_n::<1, REV>(sections, y, zi),
        2 => run_pair_n::<2, REV>(sections, y, zi),
        3 => run_pair_n::<3, REV>(sections, y, zi),
        4 => run_pair_n::<4, REV>(sections, y, zi),
        5 => run_pair_n::<5, REV>(sections, y, zi),
        6 => run_pair_n::<6, REV>(sections, y, zi),
        _ => unreachable!("pairs are formed for chains of 1 to 6 sections"),
    }
}

/// [`run_cascade_n`] on two lanes; `zi[k] = [s1, s2]`, each `[lane 0, lane 1]`.
fn run_pair_n<const N: usize, const REV: bool>(
    sections: &[Sos],
    y: &mut [[f64; 2]],
    zi: &[[[f64; 2]; 2]],
) {
    let c: [Sos; N] = std::array::from_fn(|k| sections[k]);
    let mut s1: [[f64; 2]; N] = std::array::from_fn(|k| zi[k][0]);
    let mut s2: [[f64; 2]; N] = std::array::from_fn(|k| zi[k][1]);
    let mut step = |v: &mut [f64; 2]| {
        let mut x = *v;
        for k in 0..N {
            let mut out = [0.0; 2];
            for l in 0..2 {
                out[l] = s1[k][l] + c[k].b0 * x[l];
                s1[k][l] = s2[k][l] + c[k].b1 * x[l] - c[k].a1 * out[l];
                s2[k][l] = c[k].b2 * x[l] - c[k].a2 * out[l];
            }
            x = out;
        }
        *v = x;
    };
    if REV {
        y.iter_mut().rev().for_each(&mut step);
    } else {
        y.iter_mut().for_each(&mut step);
    }
}

/// [`filtfilt_sos_padded`] with the backward pass between two reversals of
/// the buffer, as `scipy.signal.sosfiltfilt` describes it (test oracle).
#[cfg(test)]
fn filtfilt_sos_padded_reversing(sections: &[Sos], x: &[f64], padlen: usize) -> Vec<f64> {
    let n = x.len();
    if n == 0 {
        return Vec::new();
    }
    if sections.is_empty() {
        return x.to_vec();
    }
    let pad = padlen.min(n - 1);
    let mut ext = Vec::with_capacity(n + 2 * pad);
    let (first, last) = (x[0], x[n - 1]);
    ext.extend((1..=pad).rev().map(|i| 2.0 * first - x[i]));
    ext.extend_from_slice(x);
    ext.extend((1..=pad).map(|i| 2.0 * last - x[n - 1 - i]));
    let zi = sos_step_state(sections);
    let scaled = |v: f64| -> Vec<[f64; 2]> { zi.iter().map(|z| [z[0] * v, z[1] * v]).collect() };
    let z0 = scaled(ext[0]);
    run_cascade(sections, &mut ext, Some(&z0));
    ext.reverse();
    let z1 = scaled(ext[0]);
    run_cascade(sections, &mut ext, Some(&z1));
    ext.reverse();
    ext[pad..pad + n].to_vec()
}

// ---------------------------------------------------------------------------
// Configuration
// ---------------------------------------------------------------------------

/// How power-line interference is handled.
///
/// In TOML it is a string: `"auto"`, `"off"`, `"50"` or `"60"` (the bare
/// integers 50 and 60 are accepted too).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum Powerline {
    /// Look for a spectral peak at 50 Hz and 60 Hz and notch the one found, if any.
    #[default]
    Auto,
    /// Never notch.
    Off,
    /// Always notch 50 Hz (Europe, most of Asia and Africa).
    Hz50,
    /// Always notch 60 Hz (the Americas, parts of Asia).
    Hz60,
}

impl Powerline {
    const NAMES: [&'static str; 4] = ["auto", "off", "50", "60"];

    fn as_str(self) -> &'static str {
        match self {
            Powerline::Auto => "auto",
            Powerline::Off => "off",
            Powerline::Hz50 => "50",
            Powerline::Hz60 => "60",
        }
    }

    /// The fixed notch frequency, for `"50"` and `"60"`.
    pub fn fixed_hz(self) -> Option<f64> {
        match self {
            Powerline::Hz50 => Some(50.0),
            Powerline::Hz60 => Some(60.0),
            _ => None,
        }
    }
}

impl std::fmt::Display for Powerline {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl std::str::FromStr for Powerline {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s.trim().to_ascii_lowercase().as_str() {
            "auto" => Ok(Powerline::Auto),
            "off" => Ok(Powerline::Off),
            "50" => Ok(Powerline::Hz50),
            "60" => Ok(Powerline::Hz60),
            other => Err(format!(
                "unknown power-line setting `{other}`: expected one of \"{}\"",
                Powerline::NAMES.join("\", \"")
            )),
        }
    }
}

impl Serialize for Powerline {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.as_str())
    }
}

impl<'de> Deserialize<'de> for Powerline {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl serde::de::Visitor<'_> for V {
            type Value = Powerline;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("one of \"auto\", \"off\", \"50\", \"60\"")
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<Powerline, E> {
                v.parse().map_err(E::custom)
            }
            fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<Powerline, E> {
                self.visit_str(&v.to_string())
            }
            fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<Powerline, E> {
                self.visit_str(&v.to_string())
            }
        }
        d.deserialize_any(V)
    }
}

/// Parameters of the conditioning filters (`[filter]` table of `pipeline.toml`).
#[derive(Deserialize, Serialize, Clone, Debug, PartialEq)]
#[serde(deny_unknown_fields, default)]
pub struct FilterConfig {
    /// Baseline-wander high-pass −3 dB cut-off of one pass, in Hz; 0 disables.
    ///
    /// Default 0.5 Hz. Recommendations for diagnostic electrocardiographs
    /// (AHA/ACCF/HRS 2007, from memory) allow a low-frequency cut-off up to
    /// 0.67 Hz when the filter has zero phase, because a zero-phase high-pass
    /// does not distort the ST segment the way a causal one does; 0.5 Hz
    /// stays below that limit while removing respiration-driven wander
    /// (typically 0.15–0.3 Hz, common practice).
    pub highpass_hz: f64,
    /// Butterworth order of the high-pass (one pass; forward-backward doubles it). Default 2.
    pub highpass_order: usize,
    /// Power-line handling: `"auto"` (default), `"off"`, `"50"` or `"60"`.
    pub powerline: Powerline,
    /// Notch quality factor: centre frequency over −3 dB bandwidth of one
    /// pass. Default 30 (a 1.7 Hz wide notch at 50 Hz), as in the
    /// `scipy.signal.iirnotch` documentation example (from memory).
    pub notch_q: f64,
    /// In `"auto"` mode, the spectral peak at 50 or 60 Hz (max of the Welch
    /// power spectral density within ±1 Hz) must exceed the 90th percentile
    /// of the density 2–6 Hz away on both sides by this factor. Default 10 (10 dB).
    pub powerline_detect_ratio: f64,
    /// In `"auto"` mode, at most this many Welch segments (4 s each) per lead
    /// enter the spectrum, taken at an even stride over the whole record
    /// (every segment of a record with fewer); 0 takes every segment.
    /// Default 64 (over 4 minutes of signal: the mains line is steady over
    /// a record, and the averaged spectrum of 64 segments already varies by
    /// about 1/√64 = 12 %, far below the 10× detection ratio).
    pub powerline_max_segments: usize,
    /// Low-pass −3 dB cut-off of one pass, in Hz; 0 disables. Default 100 Hz.
    ///
    /// When the value is at or above 0.45 × the sampling rate it is lowered
    /// to 0.45 × the sampling rate for that record (e.g. 90 Hz at 200 Hz):
    /// a cut-off closer to Nyquist would only remove the little that is left
    /// between it and Nyquist. 100 Hz keeps the diagnostic bandwidth
    /// (150 Hz recommended for adults, AHA/ACCF/HRS 2007, from memory) as far
    /// as a 250 Hz record allows and leaves the same band at 250, 500 and
    /// 1000 Hz, so results do not depend on the sampling rate.
    pub lowpass_hz: f64,
    /// Butterworth order of the low-pass (one pass; forward-backward doubles it). Default 4.
    pub lowpass_order: usize,
    /// Remove pacemaker stimulus artifacts from the raw leads before filtering
    /// (the rule is in the dsp crate's `pacing` module). Default true: only
    /// narrow spikes with quiet flanks, present in most leads at once, are
    /// removed; a QRS, P or T wave has slopes on its sides as steep as its height.
    pub pacing_blank: bool,
    /// Longest pacing spike, in ms (rounded to samples, at least one).
    /// Default 6 ms: up to two samples at 250 Hz, three at 500 Hz.
    pub pacing_max_width_ms: f64,
    /// Smallest pacing spike: its departure from the straight line joining
    /// the samples on either side, in mV. Default 0.1 mV.
    pub pacing_min_mv: f64,
    /// Largest step between consecutive samples beside a pacing spike (over
    /// `pacing_flank_ms` before and after it) and across it, as a fraction of
    /// its departure. Default 0.3.
    pub pacing_flank_ratio: f64,
    /// Length of the quiet flanks on either side of a pacing spike, in ms
    /// (rounded to samples, at least one). Default 4 ms.
    pub pacing_flank_ms: f64,
    /// Smallest step into a pacing spike (from the sample before it to its
    /// first sample), as a fraction of its departure: a stimulus is abrupt,
    /// a notch in a QRS rises over several samples. Default 0.5.
    pub pacing_min_jump_ratio: f64,
    /// Share of the leads that must hold a spike within one sample of each
    /// other for it to count as a pacing stimulus (0 to 1), and at least
    /// `pacing_min_leads` of them. Default 0.5 (0.75 before, which asked
    /// for 9 of 12 leads): a stimulus's vector may lie almost square to
    /// several leads, where its spike stays under `pacing_min_mv`. LUDB
    /// records with pacing in their diagnoses, stimuli found over beats:
    /// 8: 4 -> 8 of 12, 45: 0 -> 4 of 10 (34, 74, 90, 93, 95 unchanged); no
    /// stimulus found in any other LUDB record at 0.5 or at 0.34; QTDB
    /// unchanged (`pacing_min_leads` 2 asks for both leads). LUDB per-lead
    /// QRS onset 3.73 +/- 10.02 -> 3.75 +/- 9.97 ms (odd- / even-numbered
    /// records 9.97 -> 9.98 / 10.06 -> 9.97), global 5.09 +/- 9.43 -> 5.16
    /// +/- 9.33 ms; 0.34 (5 of 12 leads): 8: 9 of 12, 45: 5 of 10, per-lead
    /// QRS onset 9.98 ms.
    pub pacing_min_lead_fraction: f64,
    /// Fewest leads that must hold a spike for it to count as a pacing
    /// stimulus, whatever `pacing_min_lead_fraction` asks (capped at the
    /// record's number of leads; a single-lead record needs its one lead).
    /// Default 2: a spike in one lead alone may be noise. With
    /// `pacing_min_lead_fraction` 0.5 and one lead allowed, QTDB (two
    /// leads) had stimuli in 48 records, against 11 with both leads asked
    /// for (sel102 and sel104 are paced records).
    pub pacing_min_leads: usize,
    /// Longest rectangular stimulus artifact, in ms: a stretch wider than
    /// `pacing_max_width_ms` and up to this long counts when it is also left
    /// by a jump of at least `pacing_min_jump_ratio` times its departure
    /// (some front ends record the stimulus as a pulse of about 10 ms, abrupt
    /// at both ends; LUDB 74 has one of 12 ms in every lead). At or below
    /// `pacing_max_width_ms`: off. Default 14 (off before): LUDB per-lead
    /// QRS end -1.3 +/- 13.05 -> -1.2 +/- 12.43 ms, QRS onset SD 10.66 ->
    /// 10.60, global QRS end SD 13.41 -> 13.26 (the one LUDB 74 pulse); QTDB
    /// QRS onset SD 13.44 -> 13.41 ms, other figures within 0.01 ms.
    pub pacing_max_pulse_ms: f64,
    /// Smallest departure of such a rectangular pulse, in mV: higher than
    /// `pacing_min_mv`, because at 250 Hz a pulse of 14 ms is only three or
    /// four samples and noise bumps of that width with abrupt sides exist.
    /// Default 0.3: QTDB records with spikes 8 -> 11 (the paced sel102 and
    /// sel104, and sel44); at 0.1 (as `pacing_min_mv`) 21 records, with
    /// noise bumps of 0.1-0.2 mV in sel39, sel301 and sele0107 among them;
    /// 0.5 as 0.3 but for one spike fewer in sel104 and in sel301. LUDB:
    /// the same five paced records either way, one more spike in 74.
    pub pacing_pulse_min_mv: f64,
    /// Smallest plausible typical peak-to-peak range of a record, in mV (the
    /// median over leads of each lead's median range over blocks of
    /// `amplitude_block_s`; dsp crate's `amplitude` module). A record below it
    /// gets a warning naming the likely unit error (volts read as
    /// millivolts). Default 0.05 mV: the 205 QTDB and LUDB records lie between
    /// 0.46 and 4.28 mV.
    pub amplitude_min_mv: f64,
    /// Largest plausible typical range, in mV (see `amplitude_min_mv`). A
    /// record above it gets a warning (microvolts read as millivolts: label
    /// the column, e.g. `II [uV]`, or correct the header's gain), and pacing
    /// spikes are not looked for, since their thresholds are in mV. Default
    /// 20 mV.
    pub amplitude_max_mv: f64,
    /// Block length of the typical range, in s (see `amplitude_min_mv`).
    /// Default 2 s: every block holds a QRS complex above 30 bpm.
    pub amplitude_block_s: f64,
}

impl Default for FilterConfig {
    fn default() -> Self {
        Self {
            highpass_hz: 0.5,
            highpass_order: 2,
            powerline: Powerline::Auto,
            notch_q: 30.0,
            powerline_detect_ratio: 10.0,
            powerline_max_segments: 64,
            lowpass_hz: 100.0,
            lowpass_order: 4,
            pacing_blank: true,
            pacing_max_width_ms: 6.0,
            pacing_min_mv: 0.1,
            pacing_flank_ratio: 0.3,
            pacing_min_lead_fraction: 0.5,
            pacing_min_leads: 2,
            pacing_flank_ms: 4.0,
            pacing_min_jump_ratio: 0.5,
            pacing_max_pulse_ms: 14.0,
            pacing_pulse_min_mv: 0.3,
            amplitude_min_mv: 0.05,
            amplitude_max_mv: 20.0,
            amplitude_block_s: 2.0,
        }
    }
}

impl FilterConfig {
    /// The pacing-spike rule of this configuration.
    pub fn spike_rule(&self) -> crate::pacing::SpikeRule {
        crate::pacing::SpikeRule {
            max_width_ms: self.pacing_max_width_ms,
            min_mv: self.pacing_min_mv,
            flank_ratio: self.pacing_flank_ratio,
            min_lead_fraction: self.pacing_min_lead_fraction,
            min_leads: self.pacing_min_leads,
            flank_ms: self.pacing_flank_ms,
            min_jump_ratio: self.pacing_min_jump_ratio,
            max_pulse_ms: self.pacing_max_pulse_ms,
            pulse_min_mv: self.pacing_pulse_min_mv,
        }
    }
}

impl FilterConfig {
    /// Range checks; keys are reported under the `filter` table.
    pub fn validate(&self) -> Result<(), Vec<ParamError>> {
        let mut c = Checker::new("filter");
        c.range("highpass_hz", self.highpass_hz, 0.0, 5.0, "Hz, 0 = off")
            .range("highpass_order", self.highpass_order as f64, 1.0, 8.0, "")
            .range("notch_q", self.notch_q, 1.0, 200.0, "")
            .range(
                "powerline_detect_ratio",
                self.powerline_detect_ratio,
                1.5,
                1.0e6,
                "",
            )
            .range(
                "powerline_max_segments",
                self.powerline_max_segments as f64,
                0.0,
                1.0e6,
                "segments, 0 = all",
            )
            .range("lowpass_hz", self.lowpass_hz, 0.0, 10_000.0, "Hz, 0 = off")
            .range("lowpass_order", self.lowpass_order as f64, 1.0, 10.0, "")
            .range(
                "pacing_max_width_ms",
                self.pacing_max_width_ms,
                0.5,
                20.0,
                "ms",
            )
            .range("pacing_min_mv", self.pacing_min_mv, 0.01, 10.0, "mV")
            .range("pacing_flank_ratio", self.pacing_flank_ratio, 0.0, 1.0, "")
            .range("pacing_flank_ms", self.pacing_flank_ms, 0.5, 50.0, "ms")
            .range(
                "pacing_min_jump_ratio",
                self.pacing_min_jump_ratio,
                0.0,
                1.0,
                "",
            )
            .range(
                "pacing_min_lead_fraction",
                self.pacing_min_lead_fraction,
                0.0,
                1.0,
                "share of the leads",
            )
            .range(
                "pacing_min_leads",
                self.pacing_min_leads as f64,
                1.0,
                64.0,
                "leads",
            )
            .range(
                "pacing_max_pulse_ms",
                self.pacing_max_pulse_ms,
                0.0,
                50.0,
                "ms",
            )
            .range(
                "pacing_pulse_min_mv",
                self.pacing_pulse_min_mv,
                0.01,
                10.0,
                "mV",
            )
            .range("amplitude_min_mv", self.amplitude_min_mv, 0.0, 1.0, "mV")
            .range("amplitude_max_mv", self.amplitude_max_mv, 1.0, 1.0e6, "mV")
            .range("amplitude_block_s", self.amplitude_block_s, 0.1, 60.0, "s");
        if self.lowpass_hz.is_finite() && self.highpass_hz.is_finite() {
            c.require(
                self.lowpass_hz == 0.0 || self.lowpass_hz >= 10.0 * self.highpass_hz.max(0.5),
                "lowpass_hz",
                "0 (off) or at least 10 × highpass_hz and at least 5 Hz",
                self.lowpass_hz,
            );
        }
        c.finish()
    }
}

// ---------------------------------------------------------------------------
// Power-line detection
// ---------------------------------------------------------------------------

/// Stride (in segments) that keeps at most `max_segments` of the
/// half-overlapping segments of `nseg` samples of a signal of `n` samples:
/// 1 (every segment) when they are that few or `max_segments` is 0.
fn segment_stride(n: usize, nseg: usize, max_segments: usize) -> usize {
    let half = (nseg / 2).max(1);
    let total = if n >= nseg { (n - nseg) / half + 1 } else { 0 };
    if max_segments == 0 || total <= max_segments {
        1
    } else {
        total.div_ceil(max_segments)
    }
}

/// Welch power spectral density: Hann-windowed segments of 4 s (or the whole
/// signal if shorter), 50 % overlap, segment mean removed; of a long signal
/// only every [`segment_stride`]-th segment, so at most `max_segments` enter
/// the average. Returns the density per bin and the bin spacing in Hz;
/// summing densities from several leads is meaningful because they share
/// the bin grid.
fn welch_psd(
    x: &[f64],
    fs: f64,
    max_segments: usize,
    planner: &mut RealFftPlanner<f64>,
) -> (Vec<f64>, f64) {
    let n = x.len();
    let nseg = ((4.0 * fs).round() as usize).clamp(2, n.max(2)).min(n);
    if nseg < 2 {
        return (Vec::new(), 0.0);
    }
    let step = (nseg / 2).max(1) * segment_stride(n, nseg, max_segments);
    let win: Vec<f64> = (0..nseg)
        .map(|i| 0.5 - 0.5 * (2.0 * PI * i as f64 / nseg as f64).cos())
        .collect();
    // A real-input transform: the segments are real, so only the
    // non-negative frequencies are computed (half the work of a complex FFT).
    let fft = planner.plan_fft_forward(nseg);
    let nb = nseg / 2 + 1;
    let mut psd = vec![0.0; nb];
    let mut buf = fft.make_input_vec();
    let mut spec = fft.make_output_vec();
    let mut scratch = fft.make_scratch_vec();
    let mut count = 0usize;
    let mut start = 0;
    while start + nseg <= n {
        let seg = &x[start..start + nseg];
        let mean = seg.iter().sum::<f64>() / nseg as f64;
        for ((b, v), w) in buf.iter_mut().zip(seg).zip(&win) {
            *b = (v - mean) * w;
        }
        fft.process_with_scratch(&mut buf, &mut spec, &mut scratch)
            .expect("buffer lengths come from the plan");
        for (p, b) in psd.iter_mut().zip(&spec) {
            *p += b.norm_sqr();
        }
        count += 1;
        start += step;
    }
    if count > 0 {
        for p in &mut psd {
            *p /= count as f64;
        }
    }
    (psd, fs / nseg as f64)
}

/// [`welch_psd`] with a complex FFT of the real segments: the direct form
/// (test oracle).
#[cfg(test)]
fn welch_psd_complex(x: &[f64], fs: f64, max_segments: usize) -> (Vec<f64>, f64) {
    let mut planner = FftPlanner::new();
    let n = x.len();
    let nseg = ((4.0 * fs).round() as usize).clamp(2, n.max(2)).min(n);
    if nseg < 2 {
        return (Vec::new(), 0.0);
    }
    // The kept segments by their index among all half-overlapping ones.
    let stride = segment_stride(n, nseg, max_segments);
    let half = (nseg / 2).max(1);
    let starts: Vec<usize> = (0..)
        .map(|j| j * half)
        .take_while(|&s| s + nseg <= n)
        .enumerate()
        .filter(|(j, _)| j % stride == 0)
        .map(|(_, s)| s)
        .collect();
    let win: Vec<f64> = (0..nseg)
        .map(|i| 0.5 - 0.5 * (2.0 * PI * i as f64 / nseg as f64).cos())
        .collect();
    let fft = planner.plan_fft_forward(nseg);
    let nb = nseg / 2 + 1;
    let mut psd = vec![0.0; nb];
    let mut buf = vec![Complex64::new(0.0, 0.0); nseg];
    let mut count = 0usize;
    for &start in &starts {
        let seg = &x[start..start + nseg];
        let mean = seg.iter().sum::<f64>() / nseg as f64;
        for ((b, v), w) in buf.iter_mut().zip(seg).zip(&win) {
            *b = Complex64::new((v - mean) * w, 0.0);
        }
        fft.process(&mut buf);
        for (p, b) in psd.iter_mut().zip(&buf) {
            *p += b.norm_sqr();
        }
        count += 1;
    }
    if count > 0 {
        for p in &mut psd {
            *p /= count as f64;
        }
    }
    (psd, fs / nseg as f64)
}

/// Peak-to-neighbourhood ratio at `f0` (see [`FilterConfig::powerline_detect_ratio`]),
/// or `None` when the neighbourhood does not fit below Nyquist or the
/// resolution is too coarse to separate peak and neighbourhood.
fn line_ratio(psd: &[f64], df: f64, f0: f64) -> Option<f64> {
    if df <= 0.0 || df > 1.0 {
        return None;
    }
    let nyq = df * (psd.len().saturating_sub(1)) as f64;
    if f0 + 6.0 > nyq {
        return None;
    }
    let mut peak = 0.0f64;
    let mut neigh = Vec::new();
    for (i, p) in psd.iter().enumerate() {
        let d = (i as f64 * df - f0).abs();
        if d <= 1.0 {
            peak = peak.max(*p);
        } else if (2.0..=6.0).contains(&d) {
            neigh.push(*p);
        }
    }
    if neigh.is_empty() {
        return None;
    }
    // A high quantile rather than the median: the harmonics of a regular
    // rhythm form a comb of lines (at exactly 50 and 60 Hz for a paced
    // 60 beats/min rhythm), and a comb line must not stand out from its
    // neighbours the way an isolated mains line does.
    neigh.sort_by(|a, b| a.total_cmp(b));
    let reference = neigh[(neigh.len() * 9 / 10).min(neigh.len() - 1)];
    if reference > 0.0 {
        Some(peak / reference)
    } else if peak > 0.0 {
        Some(f64::INFINITY)
    } else {
        Some(0.0)
    }
}

fn decide_powerline(psd: &[f64], df: f64, cfg: &FilterConfig) -> Option<f64> {
    [50.0, 60.0]
        .into_iter()
        .filter_map(|f| line_ratio(psd, df, f).map(|r| (f, r)))
        .filter(|(_, r)| *r >= cfg.powerline_detect_ratio)
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(f, _)| f)
}

// ---------------------------------------------------------------------------
// Conditioning filter
// ---------------------------------------------------------------------------

/// The conditioning chain designed for one sampling rate. Immutable after
/// design, hence `Send + Sync` and shareable through an `Arc`.
#[derive(Debug, Clone)]
pub struct ConditioningFilter {
    fs: f64,
    cfg: FilterConfig,
    highpass: Vec<Sos>,
    lowpass: Vec<Sos>,
    lowpass_hz: Option<f64>,
    notch50: Option<Sos>,
    notch60: Option<Sos>,
}

impl ConditioningFilter {
    /// Designs the chain for sampling rate `fs` (Hz). The configuration is
    /// validated first; a fixed power-line frequency at or above Nyquist is
    /// an error, while in `"auto"` mode a line frequency that cannot occur
    /// below Nyquist is simply never detected.
    pub fn design(fs: f64, cfg: &FilterConfig) -> Result<Self, DspError> {
        check_fs(fs)?;
        cfg.validate().map_err(DspError::InvalidConfig)?;
        let highpass = if cfg.highpass_hz > 0.0 {
            butterworth_highpass_sos(cfg.highpass_order, cfg.highpass_hz, fs)?
        } else {
            Vec::new()
        };
        let lowpass_hz = (cfg.lowpass_hz > 0.0).then(|| cfg.lowpass_hz.min(0.45 * fs));
        let lowpass = match lowpass_hz {
            Some(fc) => butterworth_lowpass_sos(cfg.lowpass_order, fc, fs)?,
            None => Vec::new(),
        };
        let notch = |f: f64| -> Result<Option<Sos>, DspError> {
            match cfg.powerline {
                Powerline::Off => Ok(None),
                Powerline::Auto if f >= fs / 2.0 => Ok(None),
                Powerline::Auto => notch_sos(f, cfg.notch_q, fs).map(Some),
                fixed if fixed.fixed_hz() == Some(f) => notch_sos(f, cfg.notch_q, fs).map(Some),
                _ => Ok(None),
            }
        };
        Ok(Self {
            fs,
            cfg: cfg.clone(),
            highpass,
            lowpass,
            lowpass_hz,
            notch50: notch(50.0)?,
            notch60: notch(60.0)?,
        })
    }

    /// Sampling rate the chain was designed for, in Hz.
    pub fn fs(&self) -> f64 {
        self.fs
    }

    /// The configuration the chain was designed from.
    pub fn config(&self) -> &FilterConfig {
        &self.cfg
    }

    /// Low-pass cut-off actually used (after the 0.45 × fs clamp), if any.
    pub fn lowpass_hz(&self) -> Option<f64> {
        self.lowpass_hz
    }

    /// The cascade run for a given notch choice: high-pass, notch, low-pass.
    /// A notch frequency the chain was not designed for is ignored.
    pub fn sections(&self, notch_hz: Option<f64>) -> Vec<Sos> {
        let mut s = self.highpass.clone();
        let notch = match notch_hz {
            Some(50.0) => self.notch50,
            Some(60.0) => self.notch60,
            _ => None,
        };
        s.extend(notch);
        s.extend_from_slice(&self.lowpass);
        s
    }

    /// Pad length of the forward-backward pass for an `n`-sample signal:
    /// the larger of scipy's default (`3·(2·sections+1)`) and one period of the
    /// high-pass cut-off (`fs / highpass_hz` samples), clipped to `n − 1`.
    /// The longer pad lets the slow high-pass transient, whose time constant
    /// is about `1/(2π·highpass_hz)`, die out in the padding instead of at
    /// the record's edges.
    pub fn padlen(&self, notch_hz: Option<f64>, n: usize) -> usize {
        let sections = self.sections(notch_hz);
        let mut pad = default_padlen(&sections);
        if self.cfg.highpass_hz > 0.0 {
            pad = pad.max((self.fs / self.cfg.highpass_hz).ceil() as usize);
        }
        pad.min(n.saturating_sub(1))
    }

    /// Zero-phase filtering of one lead with a given notch choice (`None`: no notch).
    pub fn apply_with_notch(&self, x: &[f64], notch_hz: Option<f64>) -> Vec<f64> {
        let sections = self.sections(notch_hz);
        filtfilt_sos_padded(&sections, x, self.padlen(notch_hz, x.len()))
    }

    /// [`Self::apply_with_notch`] on every lead (leads of equal length are
    /// filtered in pairs, see [`filtfilt_sos_padded_many`]; same results).
    pub fn apply_leads_with_notch(&self, leads: &[&[f64]], notch_hz: Option<f64>) -> Vec<Vec<f64>> {
        let sections = self.sections(notch_hz);
        let mut out: Vec<Vec<f64>> = vec![Vec::new(); leads.len()];
        // Leads of one record share their length, hence their pad.
        let mut by_len: Vec<(usize, Vec<usize>)> = Vec::new();
        for (i, x) in leads.iter().enumerate() {
            match by_len.iter_mut().find(|(n, _)| *n == x.len()) {
                Some((_, v)) => v.push(i),
                None => by_len.push((x.len(), vec![i])),
            }
        }
        for (n, idx) in by_len {
            let group: Vec<&[f64]> = idx.iter().map(|&i| leads[i]).collect();
            let done = filtfilt_sos_padded_many(&sections, &group, self.padlen(notch_hz, n));
            for (i, y) in idx.into_iter().zip(done) {
                out[i] = y;
            }
        }
        out
    }

    /// The notch the configuration asks for, detecting on `x` in `"auto"` mode.
    fn notch_for(&self, psd_source: impl FnOnce() -> Option<f64>) -> Option<f64> {
        match self.cfg.powerline {
            Powerline::Off => None,
            Powerline::Auto => psd_source(),
            fixed => fixed.fixed_hz(),
        }
    }

    /// Zero-phase filtering of one lead (forward-backward with odd-extension
    /// padding of [`Self::padlen`] samples). In `"auto"` mode the notch is
    /// chosen by [`Self::detect_powerline`] on this lead. Returns the same length.
    pub fn apply(&self, x: &[f64]) -> Vec<f64> {
        let notch = self.notch_for(|| Self::detect_powerline(x, self.fs, &self.cfg));
        self.apply_with_notch(x, notch)
    }

    /// Auto power-line detection on one lead: `Some(50.0)`, `Some(60.0)` or `None`.
    pub fn detect_powerline(x: &[f64], fs: f64, cfg: &FilterConfig) -> Option<f64> {
        Self::detect_powerline_leads(&[x], fs, cfg)
    }

    /// Power-line detection on the summed spectra of several leads of one
    /// record: the interference comes from the mains and appears on all
    /// leads, so one decision per record avoids notching some leads only.
    pub fn detect_powerline_leads(leads: &[&[f64]], fs: f64, cfg: &FilterConfig) -> Option<f64> {
        if !(fs.is_finite() && fs > 0.0) {
            return None;
        }
        let mut planner = RealFftPlanner::new();
        let mut total: Vec<f64> = Vec::new();
        let mut df = 0.0;
        for lead in leads {
            if lead.iter().any(|v| !v.is_finite()) {
                continue;
            }
            let (psd, d) = welch_psd(lead, fs, cfg.powerline_max_segments, &mut planner);
            if psd.is_empty() {
                continue;
            }
            if total.is_empty() {
                total = psd;
                df = d;
            } else if total.len() == psd.len() {
                for (t, p) in total.iter_mut().zip(&psd) {
                    *t += p;
                }
            }
        }
        if total.is_empty() {
            return None;
        }
        decide_powerline(&total, df, cfg)
    }

    /// Pacing stimulus artifacts in the raw leads of a record (none when
    /// `pacing_blank` is off). See [`crate::pacing`].
    pub fn pacing_spikes(&self, leads: &[&[f64]]) -> Vec<Spike> {
        if !self.cfg.pacing_blank {
            return Vec::new();
        }
        find_spikes(leads, self.fs, &self.cfg.spike_rule())
    }

    /// One lead's part of [`Self::pacing_spikes`] (its own spike stretches,
    /// before the coincidence rule across leads); none when blanking is off.
    pub fn lead_pacing_spikes(&self, x: &[f64]) -> Vec<(usize, usize)> {
        if !self.cfg.pacing_blank {
            return Vec::new();
        }
        crate::pacing::lead_spikes(x, self.fs, &self.cfg.spike_rule())
    }

    /// [`Self::pacing_spikes`] from every lead's [`Self::lead_pacing_spikes`].
    pub fn join_pacing_spikes(&self, per_lead: &[Vec<(usize, usize)>]) -> Vec<Spike> {
        if !self.cfg.pacing_blank {
            return Vec::new();
        }
        crate::pacing::join_spikes(per_lead, &self.cfg.spike_rule())
    }

    /// Conditions all leads of a record: pacing spikes blanked
    /// ([`Self::pacing_spikes`]), then [`Self::filter_record`]. Returns the
    /// filtered leads and the notch used.
    pub fn apply_record(&self, leads: &[&[f64]]) -> (Vec<Vec<f64>>, Option<f64>) {
        let spikes = self.pacing_spikes(leads);
        if spikes.is_empty() {
            return self.filter_record(leads);
        }
        let mut own: Vec<Vec<f64>> = leads.iter().map(|l| l.to_vec()).collect();
        blank_spikes(&mut own, &spikes);
        let refs: Vec<&[f64]> = own.iter().map(Vec::as_slice).collect();
        self.filter_record(&refs)
    }

    /// Filters all leads of a record as they are (no pacing-spike blanking);
    /// in `"auto"` mode the notch is chosen once from all leads. Returns the
    /// filtered leads and the notch used.
    pub fn filter_record(&self, leads: &[&[f64]]) -> (Vec<Vec<f64>>, Option<f64>) {
        let notch = self.notch_for(|| Self::detect_powerline_leads(leads, self.fs, &self.cfg));
        (self.apply_leads_with_notch(leads, notch), notch)
    }
}

/// Thread-safe cache of designs, one per sampling rate, for a fixed
/// configuration: the chain is designed once and shared by every record and
/// thread at that rate ("plan once, process many").
#[derive(Debug)]
pub struct FilterCache {
    cfg: FilterConfig,
    designs: RwLock<HashMap<u64, Arc<ConditioningFilter>>>,
}

impl FilterCache {
    /// An empty cache for `cfg`.
    pub fn new(cfg: FilterConfig) -> Self {
        Self {
            cfg,
            designs: RwLock::new(HashMap::new()),
        }
    }

    /// The configuration every design in this cache uses.
    pub fn config(&self) -> &FilterConfig {
        &self.cfg
    }

    /// The chain for sampling rate `fs`, designing it on first use.
    pub fn get(&self, fs: f64) -> Result<Arc<ConditioningFilter>, DspError> {
        check_fs(fs)?;
        let key = fs.to_bits();
        // A poisoned lock only means another thread panicked while holding
        // it; the map itself is always in a consistent state.
        if let Some(f) = self
            .designs
            .read()
            .unwrap_or_else(|e| e.into_inner())
            .get(&key)
        {
            return Ok(Arc::clone(f));
        }
        let mut map = self.designs.write().unwrap_or_else(|e| e.into_inner());
        if let Some(f) = map.get(&key) {
            return Ok(Arc::clone(f));
        }
        let f = Arc::new(ConditioningFilter::design(fs, &self.cfg)?);
        map.insert(key, Arc::clone(&f));
        Ok(f)
    }

    /// Number of sampling rates designed so far.
    pub fn len(&self) -> usize {
        self.designs.read().unwrap_or_else(|e| e.into_inner()).len()
    }

    /// Whether nothing has been designed yet.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn filter_types_are_send_and_sync() {
        fn assert_send_sync<T: Send + Sync>() {}
        assert_send_sync::<ConditioningFilter>();
        assert_send_sync::<FilterCache>();
    }

    #[test]
    fn default_config_is_valid() {
        assert!(FilterConfig::default().validate().is_ok());
    }

    // The real-input Welch spectrum against the complex-FFT form (oracle):
    // same bins, equal to rounding, for 250, 360 and 500 Hz and a length that
    // is not a whole number of segments; a 50 Hz line on an ECG-like signal.
    #[test]
    fn real_fft_welch_equals_complex_fft() {
        for fs in [250.0, 360.0, 500.0] {
            let n = (61.3 * fs) as usize;
            let x: Vec<f64> = (0..n)
                .map(|i| {
                    let t = i as f64 / fs;
                    (2.0 * PI * 1.2 * t).sin().powi(15)
                        + 0.05 * (2.0 * PI * 50.0 * t).sin()
                        + 0.01 * ((i * 7919 % 1000) as f64 / 1000.0 - 0.5)
                })
                .collect();
            // Every segment (0 and a cap above the 29 segments), and every
            // 2nd, 3rd, 5th segment (caps 15, 10, 6).
            for max_segments in [0, 64, 15, 10, 6] {
                let (fast, df_fast) = welch_psd(&x, fs, max_segments, &mut RealFftPlanner::new());
                let (slow, df_slow) = welch_psd_complex(&x, fs, max_segments);
                assert_eq!(df_fast.to_bits(), df_slow.to_bits());
                assert_eq!(fast.len(), slow.len());
                let top = slow.iter().cloned().fold(0.0, f64::max);
                for (i, (f, s)) in fast.iter().zip(&slow).enumerate() {
                    assert!(
                        (f - s).abs() <= 1e-12 * top,
                        "fs={fs} max={max_segments} bin {i}: {f} vs {s}"
                    );
                }
            }
        }
    }

    // The stride keeps at most the cap, and every segment when they are at
    // most the cap; counted against a direct enumeration of the segments.
    #[test]
    fn segment_stride_keeps_at_most_the_cap() {
        for n in [
            0usize, 999, 1000, 1001, 1500, 2000, 61_300, 225_000, 650_000,
        ] {
            for max in [0usize, 1, 2, 6, 64, 1000] {
                let nseg = 1000usize.min(n.max(2));
                let s = segment_stride(n, nseg, max);
                let all = (0..)
                    .map(|j| j * 500)
                    .take_while(|&a| a + nseg <= n)
                    .count();
                let kept = (0..all).filter(|j| j % s == 0).count();
                if max == 0 || all <= max {
                    assert_eq!(s, 1, "n={n} max={max}");
                } else {
                    assert!(
                        kept <= max && kept >= max / 2,
                        "n={n} max={max} kept={kept}"
                    );
                }
            }
        }
    }

    // The backward pass walked from the end against the reversing form
    // (oracle), bit for bit: 1 to 8 sections (8 takes the `biquad` path),
    // pads shorter and longer than the signal, a signal of one sample.
    #[test]
    fn backward_walk_equals_reversing_filtfilt() {
        let fs = 250.0;
        let mut all = butterworth_highpass_sos(2, 0.5, fs).unwrap();
        all.push(notch_sos(60.0, 30.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(4, 100.0, fs).unwrap());
        all.extend(butterworth_highpass_sos(2, 5.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(4, 15.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(2, 40.0, fs).unwrap());
        assert!(all.len() >= 8);
        for n in [1usize, 2, 17, 3000] {
            let x: Vec<f64> = (0..n)
                .map(|i| {
                    let t = i as f64 / fs;
                    (2.0 * PI * 1.2 * t).sin() + 0.3 * (2.0 * PI * 60.0 * t).sin() + 0.01 * i as f64
                })
                .collect();
            for k in 1..=8 {
                for pad in [0usize, 5, 150, 5000] {
                    let fast = filtfilt_sos_padded(&all[..k], &x, pad);
                    let slow = filtfilt_sos_padded_reversing(&all[..k], &x, pad);
                    assert_eq!(fast.len(), slow.len());
                    for (i, (a, b)) in fast.iter().zip(&slow).enumerate() {
                        assert_eq!(
                            a.to_bits(),
                            b.to_bits(),
                            "n={n} sections={k} pad={pad} i={i}"
                        );
                    }
                }
            }
        }
    }

    // Signals filtered in pairs against one at a time (oracle), bit for bit:
    // 1 to 8 sections (7 and 8 leave the pair path), equal and unequal
    // lengths, odd counts, signals of 0, 1 and 2 samples, pads shorter and
    // longer than the signal.
    #[test]
    fn paired_filtfilt_equals_single() {
        let fs = 250.0;
        let mut all = butterworth_highpass_sos(2, 0.5, fs).unwrap();
        all.push(notch_sos(50.0, 30.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(4, 100.0, fs).unwrap());
        all.extend(butterworth_highpass_sos(2, 5.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(4, 15.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(2, 40.0, fs).unwrap());
        assert!(all.len() >= 8);
        let sig = |n: usize, f: f64| -> Vec<f64> {
            (0..n)
                .map(|i| {
                    let t = i as f64 / fs;
                    (2.0 * PI * f * t).sin() + 0.2 * (2.0 * PI * 50.0 * t).cos() - 0.003 * i as f64
                })
                .collect()
        };
        let sets: Vec<Vec<Vec<f64>>> = vec![
            vec![sig(3000, 1.1), sig(3000, 2.3)],
            vec![sig(3000, 1.1), sig(3000, 2.3), sig(3000, 0.7)],
            vec![
                sig(500, 1.0),
                sig(700, 1.5),
                sig(500, 3.0),
                sig(700, 0.4),
                sig(2, 1.0),
            ],
            vec![sig(0, 1.0), sig(1, 1.0), sig(2, 1.0), sig(2, 2.0)],
            vec![sig(40, 1.0), sig(40, 9.0)],
        ];
        for k in 1..=8 {
            for pad in [0usize, 5, 150, 5000] {
                for set in &sets {
                    let xs: Vec<&[f64]> = set.iter().map(|v| v.as_slice()).collect();
                    let fast = filtfilt_sos_padded_many(&all[..k], &xs, pad);
                    assert_eq!(fast.len(), xs.len());
                    for (j, x) in xs.iter().enumerate() {
                        let slow = filtfilt_sos_padded(&all[..k], x, pad);
                        assert_eq!(fast[j].len(), slow.len());
                        for (i, (a, b)) in fast[j].iter().zip(&slow).enumerate() {
                            assert_eq!(
                                a.to_bits(),
                                b.to_bits(),
                                "sections={k} pad={pad} j={j} i={i}"
                            );
                        }
                    }
                }
            }
        }
    }

    // A record's leads through the conditioning chain, paired, against
    // `apply_with_notch` lead by lead (oracle), bit for bit.
    #[test]
    fn apply_leads_equals_lead_by_lead() {
        let fs = 360.0;
        let f = ConditioningFilter::design(fs, &FilterConfig::default()).unwrap();
        let leads: Vec<Vec<f64>> = (0..5)
            .map(|l| {
                (0..4000)
                    .map(|i| ((i * (l + 2)) as f64 * 0.013).sin() + 0.001 * (i % 97) as f64)
                    .collect()
            })
            .collect();
        let refs: Vec<&[f64]> = leads.iter().map(|v| v.as_slice()).collect();
        for notch in [None, Some(50.0), Some(60.0)] {
            let fast = f.apply_leads_with_notch(&refs, notch);
            for (x, y) in refs.iter().zip(&fast) {
                let slow = f.apply_with_notch(x, notch);
                assert!(slow.iter().zip(y).all(|(a, b)| a.to_bits() == b.to_bits()));
                assert_eq!(slow.len(), y.len());
            }
        }
    }

    // The fixed-size cascade against the `biquad` crate's sections (oracle),
    // bit for bit, for 1 to 7 sections from rest and from a step state, on
    // the conditioning chain's own sections (high-pass, notch, low-pass) and
    // the Pan-Tompkins band-pass.
    #[test]
    fn fixed_size_cascade_equals_biquad_sections() {
        let fs = 250.0;
        let mut all = butterworth_highpass_sos(2, 0.5, fs).unwrap();
        all.push(notch_sos(50.0, 30.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(4, 40.0, fs).unwrap());
        all.extend(butterworth_highpass_sos(2, 5.0, fs).unwrap());
        all.extend(butterworth_lowpass_sos(4, 15.0, fs).unwrap());
        assert!(all.len() >= 7);
        let x: Vec<f64> = (0..3000)
            .map(|i| {
                let t = i as f64 / fs;
                (2.0 * PI * 1.2 * t).sin() + 0.3 * (2.0 * PI * 50.0 * t).sin() + 0.01 * i as f64
            })
            .collect();
        for k in 1..=7 {
            let secs = &all[..k];
            let zi: Vec<[f64; 2]> = sos_step_state(secs)
                .iter()
                .map(|z| [z[0] * 0.7, z[1] * 0.7])
                .collect();
            for z in [None, Some(zi.as_slice())] {
                let mut fast = x.clone();
                let mut slow = x.clone();
                run_cascade(secs, &mut fast, z);
                run_cascade_biquad(secs, &mut slow, z);
                for (i, (a, b)) in fast.iter().zip(&slow).enumerate() {
                    assert_eq!(a.to_bits(), b.to_bits(), "sections={k} i={i}");
                }
            }
        }
    }
}
