//! Checks of the quadratic-spline stationary wavelet transform against a slow
//! direct-convolution oracle and against analytic inputs.

use std::collections::BTreeMap;
use tendline_dsp::wavelet::{compensated_delay, swt_quadratic_spline};

/// Equivalent impulse response of scale 2^k as `offset -> coefficient`, built by
/// convolving the upsampled filters h_1..h_{k-1} and g_k written out tap by tap
/// (filters of Mallat & Zhong 1992: h[-2..=1] = [1,3,3,1]/8, g[-1..=0] = [2,-2]).
fn equivalent_filter(k: usize) -> BTreeMap<isize, f64> {
    let h = [(-2isize, 0.125), (-1, 0.375), (0, 0.375), (1, 0.125)];
    let g = [(-1isize, 2.0), (0, -2.0)];
    let mut f: BTreeMap<isize, f64> = BTreeMap::from([(0, 1.0)]);
    let conv = |f: &BTreeMap<isize, f64>, taps: &[(isize, f64)], s: isize| {
        let mut out = BTreeMap::new();
        for (&o, &c) in f {
            for &(t, d) in taps {
                *out.entry(o + t * s).or_insert(0.0) += c * d;
            }
        }
        out
    };
    for j in 1..k {
        f = conv(&f, &h, 1 << (j - 1));
    }
    conv(&f, &g, 1 << (k - 1))
}

/// Slow oracle: W_k[n] = sum_m f[m] x[n - delay - m] on the half-sample
/// symmetric extension of x.
fn oracle(x: &[f64], k: usize) -> Vec<f64> {
    let n = x.len() as isize;
    let ext = |i: isize| -> f64 {
        // Half-sample symmetric reflection, written out without modular tricks.
        let mut i = i;
        loop {
            if i < 0 {
                i = -1 - i;
            } else if i >= n {
                i = 2 * n - 1 - i;
            } else {
                return x[i as usize];
            }
        }
    };
    let f = equivalent_filter(k);
    let d = compensated_delay(k) as isize;
    (0..n)
        .map(|i| f.iter().map(|(&m, &c)| c * ext(i - d - m)).sum())
        .collect()
}

fn test_signal(n: usize) -> Vec<f64> {
    // Deterministic, non-smooth: a sum of incommensurate sinusoids and a step.
    (0..n)
        .map(|i| {
            let t = i as f64;
            (0.07 * t).sin() + 0.5 * (0.31 * t + 1.0).cos() + if i > n / 3 { 0.8 } else { 0.0 }
        })
        .collect()
}

#[test]
fn matches_direct_convolution_oracle() {
    for &n in &[1usize, 2, 5, 17, 64, 300, 1000] {
        let x = test_signal(n);
        let w = swt_quadratic_spline(&x, 5);
        assert_eq!(w.len(), 5);
        for k in 1..=5 {
            assert_eq!(w[k - 1].len(), n);
            let o = oracle(&x, k);
            for i in 0..n {
                assert!(
                    (w[k - 1][i] - o[i]).abs() < 1e-9,
                    "n={n} k={k} i={i}: {} vs {}",
                    w[k - 1][i],
                    o[i]
                );
            }
        }
    }
}

#[test]
fn constant_gives_zero_and_ramp_gives_two_to_the_k() {
    let c = vec![3.5; 400];
    for wk in swt_quadratic_spline(&c, 5) {
        assert!(wk.iter().all(|v| v.abs() < 1e-12));
    }
    // Gain stated in the module docs: unit ramp -> 2^k away from the edges.
    let r: Vec<f64> = (0..400).map(|i| i as f64).collect();
    let w = swt_quadratic_spline(&r, 5);
    for k in 1..=5 {
        for v in &w[k - 1][100..300] {
            assert!((v - (1u32 << k) as f64).abs() < 1e-9);
        }
    }
}

#[test]
fn gaussian_pulse_zero_crossing_and_inflection_extrema() {
    // Analytic input: a Gaussian has its peak at c and inflection points at
    // c ± sigma. The wavelet is the derivative of a smoothing kernel, so W_k is
    // the derivative of the Gaussian smoothed by a kernel of variance v_k; the
    // smoothed pulse stays near-Gaussian with sigma_k = sqrt(sigma^2 + v_k).
    // v_k = 0.75 * sum_{j<k} 4^(j-1) (variance of h upsampled by 2^(j-1))
    //     + 4^(k-1)/12 (g is the derivative of a box of width 2^(k-1)).
    let sigma = 20.0;
    let c = 500.0;
    let x: Vec<f64> = (0..1000)
        .map(|i| (-(i as f64 - c).powi(2) / (2.0 * sigma * sigma)).exp())
        .collect();
    let w = swt_quadratic_spline(&x, 5);
    for k in 1..=5usize {
        let wk = &w[k - 1];
        // W_k[n] is centred at n + 1/2: the sign change from W[n-1] > 0 to
        // W[n] <= 0 puts the peak nearest to sample n.
        let zc = (300..700)
            .find(|&i| wk[i - 1] > 0.0 && wk[i] <= 0.0)
            .unwrap();
        assert!((zc as f64 - c).abs() <= 1.0, "k={k} zero crossing at {zc}");
        let vk: f64 = (1..k).map(|j| 0.75 * 4f64.powi(j as i32 - 1)).sum::<f64>()
            + 4f64.powi(k as i32 - 1) / 12.0;
        let sk = (sigma * sigma + vk).sqrt();
        let imax = (300..700).max_by(|&a, &b| wk[a].total_cmp(&wk[b])).unwrap();
        let imin = (300..700).min_by(|&a, &b| wk[a].total_cmp(&wk[b])).unwrap();
        // Extremum of a derivative centred half a sample late.
        assert!(
            (imax as f64 + 0.5 - (c - sk)).abs() <= 1.0,
            "k={k} max at {imax}, expect {}",
            c - sk
        );
        assert!(
            (imin as f64 + 0.5 - (c + sk)).abs() <= 1.0,
            "k={k} min at {imin}, expect {}",
            c + sk
        );
    }
}

#[test]
fn empty_and_tiny_inputs_do_not_panic() {
    assert_eq!(swt_quadratic_spline(&[], 5), vec![Vec::<f64>::new(); 5]);
    let w = swt_quadratic_spline(&[1.0], 5);
    assert!(w.iter().all(|v| v == &vec![0.0]));
}

// The fast transform against its direct definition (slow oracle, every tap
// bounds-checked): equal bit for bit, at every length from 1 sample (periodic
// reflection) up, with signed zeros and a step, at 1 to 7 scales.
#[test]
fn fast_transform_equals_reference_bit_for_bit() {
    use tendline_dsp::wavelet::swt_quadratic_spline_reference;
    let mut state = 0x2545_f491_4f6c_dd1du64;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    for n in [1usize, 2, 3, 5, 17, 64, 257, 1000, 4099] {
        let mut x: Vec<f64> = (0..n).map(|_| next()).collect();
        if n > 10 {
            x[3] = -0.0;
            x[4] = 0.0;
            for v in &mut x[n / 2..] {
                *v += 1.0;
            }
        }
        for scales in 1..=7 {
            let fast = swt_quadratic_spline(&x, scales);
            let slow = swt_quadratic_spline_reference(&x, scales);
            assert_eq!(fast.len(), slow.len());
            for (k, (f, s)) in fast.iter().zip(&slow).enumerate() {
                assert_eq!(f.len(), s.len());
                for (i, (a, b)) in f.iter().zip(s).enumerate() {
                    assert_eq!(a.to_bits(), b.to_bits(), "n={n} scales={scales} W{k} [{i}]");
                }
            }
        }
    }
    // All zeros: the signs of the zero details agree too.
    let z = vec![0.0; 300];
    assert_eq!(
        swt_quadratic_spline(&z, 5),
        swt_quadratic_spline_reference(&z, 5)
    );
}

// The transform that skips long constant runs at the ends (a tiled median
// beat's padding) against the full transform (oracle): equal bit for bit,
// zero outside the range it reports, for runs just below, at and above the
// length it needs, on either or both sides, constants of either sign and
// zero, and 1 to 6 scales; non-finite runs are not cut.
#[test]
fn flat_ends_transform_equals_full_transform_bit_for_bit() {
    use tendline_dsp::wavelet::swt_quadratic_spline_flat_ends;
    let mut state = 0x9e37_79b9_7f4a_7c15u64;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    let mut cut_somewhere = false;
    for scales in 1..=6usize {
        let need = (4usize << scales) + (1 << scales);
        for (lead, trail) in [
            (0, 0),
            (need - 1, need - 1),
            (need, 0),
            (0, need),
            (need, need),
            (need + 1, need + 7),
            (3 * need, 2 * need + 3),
            (3 * need, 10),
        ] {
            for mid in [1usize, 40, 300] {
                for (c0, c1) in [(0.7, -1.3), (0.0, -0.0), (-2.5, 2.5)] {
                    let mut x = vec![c0; lead];
                    x.extend((0..mid).map(|_| next()));
                    x.extend(std::iter::repeat_n(c1, trail));
                    let full = swt_quadratic_spline(&x, scales);
                    let (fast, keep) = swt_quadratic_spline_flat_ends(&x, scales);
                    cut_somewhere |= keep.len() < x.len();
                    assert_eq!(fast.len(), full.len());
                    for (k, (f, s)) in fast.iter().zip(&full).enumerate() {
                        assert_eq!(f.len(), s.len());
                        for (i, (a, b)) in f.iter().zip(s).enumerate() {
                            assert_eq!(
                                a.to_bits(),
                                b.to_bits(),
                                "scales={scales} lead={lead} trail={trail} mid={mid} W{k} [{i}]"
                            );
                            if !keep.contains(&i) {
                                assert_eq!(a.to_bits(), 0.0f64.to_bits());
                            }
                        }
                    }
                }
            }
        }
    }
    assert!(cut_somewhere, "the test never exercised a cut");
    // A NaN run is not cut (its details are NaN, not zero).
    let mut x = vec![f64::NAN; 400];
    x.extend((0..50).map(|i| i as f64));
    let (_, keep) = swt_quadratic_spline_flat_ends(&x, 5);
    assert_eq!(keep, 0..x.len());
}
