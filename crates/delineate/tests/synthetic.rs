//! Placement on analytic beats: every wave is a Gaussian, so its peak, its
//! inflection points (c ± σ) and the tangent at the steepest point of the
//! trailing limb (which meets the baseline at c + 2σ: at c + σ the wave is
//! A·e^{-1/2} and its slope −A·e^{-1/2}/σ) are known exactly.

use tendline_delineate::{delineate, delineate_lead, BeatMarks, DelineateConfig, TMorphology};

#[derive(Clone, Copy)]
struct Wave {
    amp: f64,
    /// Centre relative to the R peak (ms).
    at_ms: f64,
    sigma_ms: f64,
}

fn p_wave() -> Wave {
    Wave {
        amp: 0.15,
        at_ms: -170.0,
        sigma_ms: 14.0,
    }
}
fn t_wave(amp: f64) -> Wave {
    Wave {
        amp,
        at_ms: 300.0,
        sigma_ms: 40.0,
    }
}
fn qrs() -> [Wave; 3] {
    [
        Wave {
            amp: -0.2,
            at_ms: -22.0,
            sigma_ms: 5.0,
        },
        Wave {
            amp: 1.2,
            at_ms: 0.0,
            sigma_ms: 8.0,
        },
        Wave {
            amp: -0.3,
            at_ms: 22.0,
            sigma_ms: 6.0,
        },
    ]
}

/// Beats every `rr_ms`, first R at 600 ms, sampled exactly at `fs`.
fn synth(fs: f64, n_beats: usize, rr_ms: f64, waves: &[Wave]) -> (Vec<f64>, Vec<usize>) {
    let n = ((600.0 + rr_ms * n_beats as f64) * fs / 1000.0) as usize;
    let rs: Vec<f64> = (0..n_beats).map(|i| 600.0 + rr_ms * i as f64).collect();
    let x = (0..n)
        .map(|i| {
            let t = i as f64 * 1000.0 / fs;
            rs.iter()
                .flat_map(|r| {
                    waves.iter().map(move |w| {
                        w.amp * (-((t - r - w.at_ms) / w.sigma_ms).powi(2) / 2.0).exp()
                    })
                })
                .sum()
        })
        .collect();
    (
        x,
        rs.iter()
            .map(|r| (r * fs / 1000.0).round() as usize)
            .collect(),
    )
}

fn all_waves(t_amp: f64) -> Vec<Wave> {
    let mut v = vec![p_wave(), t_wave(t_amp)];
    v.extend(qrs());
    v
}

/// Mark time relative to the beat's R (ms).
fn rel(m: Option<tendline_delineate::Mark>, r: usize, fs: f64) -> f64 {
    (m.expect("mark present").sample as f64 - r as f64) * 1000.0 / fs
}

fn print(b: &BeatMarks, r: usize, fs: f64) {
    let f = |m: Option<tendline_delineate::Mark>| {
        m.map_or(f64::NAN, |m| (m.sample as f64 - r as f64) * 1000.0 / fs)
    };
    println!(
        "p {:.0} {:.0} {:.0} | qrs {:.0} {:.0} {:.0} | t {:.0} {:.0} end w {:.0} tg {:.0} ar {:.0} {:?}",
        f(b.p_on), f(b.p_peak), f(b.p_end), f(b.qrs_on), f(b.qrs_peak), f(b.qrs_end), f(b.t_on), f(b.t_peak),
        f(b.t_end_wavelet), f(b.t_end_tangent), f(b.t_end_area), b.t_morphology
    );
}

/// Variance (ms² at the 250 Hz analysis rate) that the smoothing of scale
/// 2^k adds: 0.75·Σ_{j<k} 4^(j-1) + 4^(k-1)/12 samples² (see the wavelet
/// tests in tendline-dsp).
fn v_k(k: i32) -> f64 {
    let s: f64 = (1..k).map(|j| 0.75 * 4f64.powi(j - 1)).sum::<f64>() + 4f64.powi(k - 1) / 12.0;
    s * 16.0
}

/// Where a ξ boundary rule puts the onset/end of an isolated Gaussian read at
/// scale 2^k: W_k ∝ derivative of a Gaussian of σ_k = sqrt(σ² + v_k), whose
/// modulus maximum is at c ∓ σ_k; |W_k| falls to ξ of it at c ∓ u·σ_k with
/// u·exp(−(u² − 1)/2) = ξ, u > 1 (solved by bisection).
fn xi_boundary(w: Wave, k: i32, xi: f64, side: f64) -> f64 {
    let sk = (w.sigma_ms.powi(2) + v_k(k)).sqrt();
    let f = |u: f64| u * (-(u * u - 1.0) / 2.0).exp() - xi;
    let (mut lo, mut hi) = (1.0, 10.0);
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if f(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    w.at_ms + side * lo * sk
}

/// Analysis sample (4 ms) plus one input sample of rounding.
fn near(got: f64, expect: f64, fs: f64, what: &str) {
    let tol = 4.0 + 1000.0 / fs;
    assert!(
        (got - expect).abs() <= tol,
        "{what}: {got} ms, expected {expect:.1} ± {tol} ms"
    );
}

fn check_beat(b: &BeatMarks, r: usize, fs: f64) {
    let (p, t, q) = (p_wave(), t_wave(0.35), qrs());
    let c = DelineateConfig::default();
    near(rel(b.qrs_peak, r, fs), 0.0, fs, "qrs peak");
    near(rel(b.p_peak, r, fs), p.at_ms, fs, "p peak");
    near(rel(b.t_peak, r, fs), t.at_ms, fs, "t peak");
    near(
        rel(b.p_on, r, fs),
        xi_boundary(p, 4, c.p_xi_on, -1.0),
        fs,
        "p on",
    );
    near(
        rel(b.p_end, r, fs),
        xi_boundary(p, 4, c.p_xi_end, 1.0),
        fs,
        "p end",
    );
    near(
        rel(b.qrs_on, r, fs),
        xi_boundary(q[0], 2, c.qrs_xi_on, -1.0),
        fs,
        "qrs on (Q wave)",
    );
    // The last lobe (S upstroke) is positive.
    near(
        rel(b.qrs_end, r, fs),
        xi_boundary(q[2], 2, c.qrs_xi_end_pos, 1.0),
        fs,
        "qrs end (S wave)",
    );
    near(
        rel(b.t_on, r, fs),
        xi_boundary(t, 4, c.t_xi_on, -1.0),
        fs,
        "t on",
    );
    near(
        rel(b.t_end_wavelet, r, fs),
        xi_boundary(t, 4, c.t_xi_end, 1.0),
        fs,
        "t end wavelet",
    );
    // Area indicator: no closed form here; it must lie past the tangent
    // end and within 3.5 σ of the centre.
    let area = rel(b.t_end_area, r, fs);
    assert!(
        area >= t.at_ms + 2.0 * t.sigma_ms - 4.0 && area <= t.at_ms + 3.5 * t.sigma_ms,
        "t end area {area}"
    );
    // Tangent: the steepest point is read at scale 2^3, whose smoothing adds
    // variance v_3, so the tangent meets the baseline at c + 2·sqrt(σ² + v_3).
    let expect = t.at_ms + 2.0 * (t.sigma_ms.powi(2) + v_k(3)).sqrt();
    near(rel(b.t_end_tangent, r, fs), expect, fs, "t end tangent");
    assert_eq!(b.t_morphology, TMorphology::Upright);
    assert_eq!(
        b.t_end, b.t_end_wavelet,
        "default method is the wavelet rule"
    );
}

#[test]
fn gaussian_beat_placement_250_hz() {
    let fs = 250.0;
    let (x, rs) = synth(fs, 6, 900.0, &all_waves(0.35));
    let marks = delineate_lead(&x, fs, &rs, &DelineateConfig::default());
    for (b, &r) in marks.iter().zip(&rs) {
        print(b, r, fs);
        check_beat(b, r, fs);
    }
}

#[test]
fn qrs_end_of_a_falling_r_wave() {
    // A complex without an S wave ends on the R wave's falling limb: the last
    // significant maximum of W_2 is negative, so the end is the
    // `qrs_xi_end_neg` boundary of the R Gaussian (its ξ is above the
    // `qrs_xi_end_rel` floor, which is relative to the same maximum here).
    let r_wave = Wave {
        amp: 1.2,
        at_ms: 0.0,
        sigma_ms: 8.0,
    };
    let c = DelineateConfig::default();
    assert!(c.qrs_xi_end_neg > c.qrs_xi_end_rel);
    let want = xi_boundary(r_wave, 2, c.qrs_xi_end_neg, 1.0);
    for fs in [250.0, 500.0] {
        let (x, rs) = synth(fs, 5, 900.0, &[p_wave(), r_wave, t_wave(0.35)]);
        let marks = delineate_lead(&x, fs, &rs, &c);
        for (b, &r) in marks.iter().zip(&rs).skip(1).take(rs.len() - 2) {
            print(b, r, fs);
            near(rel(b.qrs_end, r, fs), want, fs, "qrs end (falling R)");
        }
    }
}

#[test]
fn pacing_spike_is_left_out_of_the_complex() {
    // A paced beat: a one-sample spike 80 ms before a wide ventricular
    // complex (one broad Gaussian). The spike's |W_2| is about three times
    // the complex's, so without the spike rule it is taken for the main
    // slope pair (QRS peak on the spike, thresholds relative to it); with
    // it, peak, onset and end are those of the wide Gaussian alone.
    let fs = 250.0;
    let wide = Wave {
        amp: 1.0,
        at_ms: 0.0,
        sigma_ms: 20.0,
    };
    let (mut x, rs) = synth(fs, 5, 1000.0, &[wide, t_wave(0.35)]);
    for &r in &rs {
        x[r - (0.080 * fs) as usize] += 2.0;
    }
    let on = DelineateConfig {
        qrs_spike_ratio: 1.5,
        ..DelineateConfig::default()
    };
    let off = DelineateConfig {
        qrs_spike_ratio: 0.0,
        ..on.clone()
    };
    let want_on = xi_boundary(wide, 2, on.qrs_xi_on, -1.0);
    let want_end = xi_boundary(wide, 2, on.qrs_xi_end_neg, 1.0);
    let m_on = delineate_lead(&x, fs, &rs, &on);
    let m_off = delineate_lead(&x, fs, &rs, &off);
    for i in 1..rs.len() - 1 {
        print(&m_on[i], rs[i], fs);
        print(&m_off[i], rs[i], fs);
        near(
            rel(m_on[i].qrs_peak, rs[i], fs),
            0.0,
            fs,
            "qrs peak (paced)",
        );
        near(
            rel(m_on[i].qrs_on, rs[i], fs),
            want_on,
            fs,
            "qrs on (paced)",
        );
        near(
            rel(m_on[i].qrs_end, rs[i], fs),
            want_end,
            fs,
            "qrs end (paced)",
        );
        // Without the rule the spike is the main slope pair: the QRS peak
        // falls on it.
        let peak_off = rel(m_off[i].qrs_peak, rs[i], fs);
        assert!(
            (peak_off + 80.0).abs() <= 8.0,
            "without the rule the peak should be the spike's: {peak_off}"
        );
    }
}

#[test]
fn five_hundred_hz_gives_the_same_marks_as_250_hz() {
    // The analysis runs at 250 Hz; a 500 Hz input is resampled and its
    // marks mapped back, so they agree within one analysis sample.
    let cfg = DelineateConfig::default();
    let (x1, r1) = synth(250.0, 5, 850.0, &all_waves(0.35));
    let (x2, r2) = synth(500.0, 5, 850.0, &all_waves(0.35));
    let m1 = delineate_lead(&x1, 250.0, &r1, &cfg);
    let m2 = delineate_lead(&x2, 500.0, &r2, &cfg);
    for i in 0..r1.len() {
        check_beat(&m2[i], r2[i], 500.0);
        let pairs = [
            (m1[i].p_on, m2[i].p_on),
            (m1[i].p_end, m2[i].p_end),
            (m1[i].qrs_on, m2[i].qrs_on),
            (m1[i].qrs_end, m2[i].qrs_end),
            (m1[i].t_peak, m2[i].t_peak),
            (m1[i].t_end_wavelet, m2[i].t_end_wavelet),
            (m1[i].t_end_tangent, m2[i].t_end_tangent),
        ];
        for (a, b) in pairs {
            let ta = a.unwrap().sample as f64 * 4.0;
            let tb = b.unwrap().sample as f64 * 2.0;
            assert!(
                (ta - tb).abs() <= 4.0,
                "beat {i}: {ta} ms at 250 Hz vs {tb} ms at 500 Hz"
            );
        }
    }
}

#[test]
fn absent_p_and_flat_t_are_reported_absent() {
    let fs = 250.0;
    let waves: Vec<Wave> = qrs().to_vec();
    let (x, rs) = synth(fs, 5, 800.0, &waves);
    for b in delineate_lead(&x, fs, &rs, &DelineateConfig::default()) {
        assert!(b.qrs_on.is_some() && b.qrs_end.is_some());
        assert!(
            b.p_on.is_none() && b.p_peak.is_none() && b.p_end.is_none(),
            "{b:?}"
        );
        assert!(b.t_peak.is_none() && b.t_end.is_none(), "{b:?}");
        assert_eq!(b.t_morphology, TMorphology::Absent);
    }
}

#[test]
fn inverted_and_biphasic_t() {
    let fs = 250.0;
    let (x, rs) = synth(fs, 5, 900.0, &all_waves(-0.3));
    for (b, &r) in delineate_lead(&x, fs, &rs, &DelineateConfig::default())
        .iter()
        .zip(&rs)
    {
        assert_eq!(b.t_morphology, TMorphology::Inverted);
        assert!((rel(b.t_peak, r, fs) - 300.0).abs() <= 4.0);
        assert!(b.t_end_tangent.is_some() && b.t_end_wavelet.is_some());
    }
    // Positive then negative lobe of equal size.
    let mut w = all_waves(0.0);
    w.push(Wave {
        amp: 0.25,
        at_ms: 260.0,
        sigma_ms: 30.0,
    });
    w.push(Wave {
        amp: -0.25,
        at_ms: 340.0,
        sigma_ms: 30.0,
    });
    let (x, rs) = synth(fs, 5, 900.0, &w);
    for b in delineate_lead(&x, fs, &rs, &DelineateConfig::default()) {
        assert_eq!(b.t_morphology, TMorphology::BiphasicPosNeg, "{b:?}");
    }
}

#[test]
fn single_median_beat_and_edges_do_not_panic() {
    let fs = 500.0;
    let cfg = DelineateConfig::default();
    // A 1.2 s median beat with its R at 0.4 s.
    let (x, _) = synth(fs, 1, 900.0, &all_waves(0.35));
    let x = &x[(0.2 * fs) as usize..(1.4 * fs) as usize];
    let r = (0.4 * fs) as usize;
    let b = &delineate_lead(x, fs, &[r], &cfg)[0];
    check_beat(b, r, fs);
    // Beats at and beyond the edges, empty and tiny inputs.
    let marks = delineate_lead(x, fs, &[0, 3, x.len() - 1, x.len() + 50], &cfg);
    assert_eq!(marks.len(), 4);
    assert_eq!(
        marks[3],
        BeatMarks {
            t_end_method: cfg.t_end_method,
            ..Default::default()
        }
    );
    assert_eq!(delineate_lead(&[], fs, &[0, 10], &cfg).len(), 2);
    assert_eq!(delineate_lead(&[0.0; 5], fs, &[2], &cfg).len(), 1);
    let d = delineate(&[x, x], fs, &[r], &cfg);
    assert_eq!(d.global.len(), 1);
    assert_eq!(d.global[0].qrs_on, d.per_lead[0][0].qrs_on);
}

#[test]
fn small_initial_q_wave_joins_the_complex() {
    // A q wave too small for the chain rule (|W_2| ≈ 8 % of the R lobe, below
    // `qrs_gamma_pre`): without the q-lobe rule the onset stops at the q
    // trough; with it, the onset is the ξ boundary of the q Gaussian itself.
    let fs = 250.0;
    let q = Wave {
        amp: -0.06,
        at_ms: -24.0,
        sigma_ms: 4.0,
    };
    let r = Wave {
        amp: 1.2,
        at_ms: 0.0,
        sigma_ms: 8.0,
    };
    let (x, rs) = synth(fs, 5, 900.0, &[q, r, t_wave(0.3)]);
    let off = DelineateConfig {
        qrs_q_gap_ms: 0.0,
        ..DelineateConfig::default()
    };
    let on = DelineateConfig {
        qrs_q_gap_ms: 40.0,
        qrs_q_xi_on: 0.5,
        ..DelineateConfig::default()
    };
    let want = xi_boundary(q, 2, on.qrs_q_xi_on, -1.0);
    let m_off = delineate_lead(&x, fs, &rs, &off);
    let m_on = delineate_lead(&x, fs, &rs, &on);
    for i in 1..rs.len() - 1 {
        let t_off = rel(m_off[i].qrs_on, rs[i], fs);
        let t_on = rel(m_on[i].qrs_on, rs[i], fs);
        println!("beat {i}: onset off {t_off} on {t_on} want {want:.1} ms");
        assert!(
            t_off >= q.at_ms - 6.0,
            "q trough expected without the rule: {t_off}"
        );
        assert!(
            (t_on - want).abs() <= 6.0,
            "onset {t_on} ms, ξ boundary of q {want:.1} ms"
        );
        assert!(t_on < q.at_ms, "onset {t_on} ms not before the q wave");
    }
}

/// A QS complex whose T wave rises straight out of the S upstroke (no ST
/// segment, as in QTDB sel40): the T window holds only the falling limb,
/// and the peak lies between the QRS end and that limb.
fn qs_with_early_t() -> Vec<Wave> {
    vec![
        Wave {
            amp: -1.0,
            at_ms: 0.0,
            sigma_ms: 12.0,
        },
        Wave {
            amp: 0.3,
            at_ms: T_EARLY_MS,
            sigma_ms: 40.0,
        },
    ]
}
const T_EARLY_MS: f64 = 110.0;

#[test]
fn t_wave_read_from_its_final_limb_has_a_peak_and_an_end() {
    let fs = 250.0;
    let (x, rs) = synth(fs, 6, 800.0, &qs_with_early_t());
    let off = DelineateConfig {
        t_lone_limb_look_back: false,
        ..DelineateConfig::default()
    };
    let beats_off = delineate_lead(&x, fs, &rs, &off);
    let beats = delineate_lead(&x, fs, &rs, &DelineateConfig::default());
    for ((b0, b), &r) in beats_off.iter().zip(&beats).zip(&rs).skip(1).take(4) {
        print(b0, r, fs);
        print(b, r, fs);
        // Without the look-back the lone falling limb yields an end but no
        // peak, so no T wave could be written.
        assert!(b0.t_peak.is_none(), "{b0:?}");
        assert_eq!(b.t_morphology, TMorphology::Upright, "{b:?}");
        let pk = rel(b.t_peak, r, fs);
        assert!((pk - T_EARLY_MS).abs() <= 8.0, "T peak {pk} ms");
        // The end comes from the falling limb, after the peak; no onset is
        // claimed, as the rising limb is lost in the QRS.
        assert!(rel(b.t_end, r, fs) > pk + 20.0);
        assert!(b.t_on.is_none());
    }
}

/// One beat of a steady train carries an extra sharp deflection late in its
/// T window (invented for this test, like a premature P riding there). The
/// first pass takes it for that beat's T wave; the second pass
/// (`t_recheck_ms`) finds the T where the neighbouring beats have theirs
/// (common practice: QT changes little from beat to beat at a steady rate)
/// and replaces only the T marks.
#[test]
fn t_recheck_finds_the_t_where_the_neighbours_have_it() {
    let fs = 250.0;
    let rr = 1000.0;
    let (mut x, rs) = synth(fs, 12, rr, &all_waves(0.3));
    let odd = 6;
    let bump = Wave {
        amp: 0.4,
        at_ms: 490.0,
        sigma_ms: 8.0,
    };
    let (b, _) = synth(fs, 1, rr, &[bump]);
    let shift = rs[odd] - rs[0];
    for (i, v) in b.iter().enumerate() {
        if let Some(xi) = x.get_mut(i + shift) {
            *xi += v;
        }
    }
    let off = DelineateConfig {
        t_recheck_ms: 0.0,
        ..DelineateConfig::default()
    };
    let on = DelineateConfig::default();
    assert!(on.t_recheck_ms > 0.0);
    let first = delineate_lead(&x, fs, &rs, &off);
    let second = delineate_lead(&x, fs, &rs, &on);
    let r = rs[odd];
    print(&first[odd], r, fs);
    print(&second[odd], r, fs);
    let t = t_wave(0.3).at_ms;
    let pk0 = rel(first[odd].t_peak, r, fs);
    let pk1 = rel(second[odd].t_peak, r, fs);
    assert!(
        (pk0 - t).abs() > on.t_recheck_ms,
        "first pass T peak {pk0} ms"
    );
    assert!((pk1 - t).abs() <= 8.0, "second pass T peak {pk1} ms");
    assert_eq!(second[odd].t_morphology, TMorphology::Upright);
    // P and QRS marks are the first pass's; the other beats are untouched.
    let b0 = &first[odd];
    let b1 = &second[odd];
    assert_eq!(
        (
            b0.p_on,
            b0.p_peak,
            b0.p_end,
            b0.qrs_on,
            b0.qrs_peak,
            b0.qrs_end
        ),
        (
            b1.p_on,
            b1.p_peak,
            b1.p_end,
            b1.qrs_on,
            b1.qrs_peak,
            b1.qrs_end
        )
    );
    for (i, (a, b)) in first.iter().zip(&second).enumerate() {
        if i != odd {
            assert_eq!(a, b, "beat {i}");
        }
    }
}

#[test]
fn wide_complex_ends_after_its_final_limb() {
    // A wide complex (paced or bundle-branch-block-like, invented for the
    // test): a sharp R, then a broad S wave centred 110 ms after it whose
    // rising limb has its W_2 maximum about 133 ms after the R, past the
    // `qrs_post_ms` limit of narrow complexes. The QRS end belongs after
    // that limb (the `qrs_xi_end_pos` boundary of the S Gaussian); with the
    // wide-complex extension off it falls at the S trough.
    let fs = 250.0;
    let r_wave = Wave {
        amp: 1.2,
        at_ms: 0.0,
        sigma_ms: 8.0,
    };
    let s_wave = Wave {
        amp: -1.0,
        at_ms: 110.0,
        sigma_ms: 22.0,
    };
    let t = Wave {
        amp: 0.35,
        at_ms: 420.0,
        sigma_ms: 40.0,
    };
    let (x, rs) = synth(fs, 6, 1000.0, &[p_wave(), r_wave, s_wave, t]);
    let on = DelineateConfig::default();
    assert!(on.qrs_post_wide_ms > on.qrs_post_ms);
    let off = DelineateConfig {
        qrs_post_wide_ms: 0.0,
        ..on.clone()
    };
    let want = xi_boundary(s_wave, 2, on.qrs_xi_end_pos, 1.0);
    // Both leads alike, so the global mark goes through the multi-lead
    // envelope check too.
    let d_on = delineate(&[&x, &x], fs, &rs, &on);
    let d_off = delineate(&[&x, &x], fs, &rs, &off);
    for (i, &r) in rs.iter().enumerate().take(rs.len() - 1).skip(1) {
        print(&d_on.per_lead[0][i], r, fs);
        print(&d_off.per_lead[0][i], r, fs);
        near(
            rel(d_on.per_lead[0][i].qrs_end, r, fs),
            want,
            fs,
            "lead qrs end (wide)",
        );
        near(
            rel(d_on.global[i].qrs_end, r, fs),
            want,
            fs,
            "global qrs end (wide)",
        );
        let cut = rel(d_off.per_lead[0][i].qrs_end, r, fs);
        assert!(
            cut < s_wave.at_ms + 12.0,
            "without the extension the end should stop near the S trough: {cut} ms"
        );
        // The T wave is still found where it is.
        near(
            rel(d_on.global[i].t_peak, r, fs),
            t.at_ms,
            fs,
            "t peak (wide)",
        );
    }
}

#[test]
fn lead_t_outside_the_global_span_is_searched_again_near_the_global_t() {
    // Three leads (invented for the test): two with a plain beat, the third
    // with a low T wave and, on every beat, a sharp deflection 520 ms after
    // the R that draws its first search away from the T wave (the neighbouring
    // beats agree with it, so the lead's own second T pass cannot help). The
    // global T comes from the two plain leads; the third lead's T peak lies
    // after the global T end and is searched again near the global T peak.
    let fs = 250.0;
    let rr = 1000.0;
    let (plain, rs) = synth(fs, 8, rr, &all_waves(0.35));
    let mut waves = all_waves(0.08);
    waves.push(Wave {
        amp: 0.5,
        at_ms: 520.0,
        sigma_ms: 10.0,
    });
    let (odd, _) = synth(fs, 8, rr, &waves);
    let on = DelineateConfig::default();
    assert!(on.lead_t_near_global && !on.lead_t_within_global);
    let off = DelineateConfig {
        lead_t_near_global: false,
        ..on.clone()
    };
    let leads: [&[f64]; 3] = [&plain, &plain, &odd];
    let d_on = delineate(&leads, fs, &rs, &on);
    let d_off = delineate(&leads, fs, &rs, &off);
    let t = t_wave(0.08).at_ms;
    for (i, &r) in rs.iter().enumerate().take(rs.len() - 1).skip(1) {
        print(&d_off.per_lead[2][i], r, fs);
        print(&d_on.per_lead[2][i], r, fs);
        near(rel(d_on.global[i].t_peak, r, fs), t, fs, "global t peak");
        let before = rel(d_off.per_lead[2][i].t_peak, r, fs);
        assert!(
            (before - t).abs() > 100.0,
            "first search should be drawn to the late deflection: {before} ms"
        );
        near(rel(d_on.per_lead[2][i].t_peak, r, fs), t, fs, "lead t peak");
        // The plain leads and the third lead's P and QRS are unchanged.
        assert_eq!(d_on.per_lead[0][i], d_off.per_lead[0][i]);
        let (a, b) = (&d_on.per_lead[2][i], &d_off.per_lead[2][i]);
        assert_eq!((a.p_on, a.qrs_on, a.qrs_end), (b.p_on, b.qrs_on, b.qrs_end));
    }
}

/// The QS complex with its early T wave (`qs_with_early_t`) at a fast rate,
/// the next beat's P wave close behind the T (as in QTDB sel41, invented
/// shapes): the T window holds the T's falling limb, and the P's upstroke
/// makes a zero crossing of W_4 after it. Read as the first limb of an
/// inverted wave, the "trough" would lie above the PR-segment level, which
/// an inverted T cannot do; `t_polarity_recheck` reads the lone limb as the
/// final limb of an upright wave instead.
#[test]
fn t_wave_whose_trough_would_lie_above_the_baseline_is_read_upright() {
    let fs = 250.0;
    let rr = 600.0;
    let mut waves = qs_with_early_t();
    waves.push(Wave {
        amp: 0.15,
        at_ms: rr - 210.0,
        sigma_ms: 18.0,
    });
    let (x, rs) = synth(fs, 8, rr, &waves);
    let off = DelineateConfig {
        t_polarity_recheck: false,
        ..DelineateConfig::default()
    };
    let beats_off = delineate_lead(&x, fs, &rs, &off);
    let beats = delineate_lead(&x, fs, &rs, &DelineateConfig::default());
    for ((b0, b), &r) in beats_off.iter().zip(&beats).zip(&rs).skip(1).take(5) {
        print(b0, r, fs);
        print(b, r, fs);
        assert_eq!(b0.t_morphology, TMorphology::Inverted, "{b0:?}");
        assert_eq!(b.t_morphology, TMorphology::Upright, "{b:?}");
        let pk = rel(b.t_peak, r, fs);
        assert!((pk - T_EARLY_MS).abs() <= 8.0, "T peak {pk} ms");
        // Tangent end of the Gaussian T: its centre plus 2σ (module docs).
        near(
            rel(b.t_end_tangent, r, fs),
            T_EARLY_MS + 80.0,
            fs,
            "t end tangent",
        );
        // The P wave the false T end had swallowed is found again.
        assert!(b0.p_peak.is_none(), "{b0:?}");
        near(rel(b.p_peak, r, fs), -210.0, fs, "p peak");
    }
}
