//! Checks of the generator against its documented model and boundary rule.

use tendline_synth::model::clean_value_slow;
use tendline_synth::{generate, NoiseSpec, SynthSpec};

fn spec(seed: u64) -> SynthSpec {
    SynthSpec {
        seed,
        duration_s: 20.0,
        ..SynthSpec::default()
    }
}

#[test]
fn same_seed_same_record_other_seed_differs() {
    let a = generate(&spec(42)).unwrap();
    let b = generate(&spec(42)).unwrap();
    assert_eq!(a, b);
    let c = generate(&spec(43)).unwrap();
    assert_ne!(a.leads, c.leads);
    assert_ne!(a.truth_global, c.truth_global);
}

#[test]
fn truth_qt_follows_requested_relation() {
    for (qt1000, beta, hr) in [
        (400.0, 1.0 / 3.0, 60.0),
        (450.0, 0.5, 95.0),
        (380.0, 0.25, 115.0),
    ] {
        let s = SynthSpec {
            qt1000_ms: qt1000,
            qt_rr_exponent: beta,
            hr_bpm: hr,
            pr_ms: 130.0,
            rr_sd_ms: 20.0,
            ..spec(5)
        };
        let r = generate(&s).unwrap();
        assert!(r.truth_global.len() >= 15, "{} beats", r.truth_global.len());
        for b in &r.truth_global {
            let want = qt1000 * (b.rr_ms / 1000.0).powf(beta);
            assert!((b.qt_ms - want).abs() < 1e-6, "qt {} want {want}", b.qt_ms);
            // The QT is global T end minus global QRS onset.
            assert!(((b.t.end_s - b.qrs.onset_s) * 1000.0 - b.qt_ms).abs() < 1e-9);
        }
        // With β = 1/3 every beat's Fridericia QTc is the subject's QT at 1 s.
        if (beta - 1.0 / 3.0).abs() < 1e-12 {
            let sum = r.summary().unwrap();
            assert!((sum.mean_qtcf_ms - qt1000).abs() < 1e-6);
        }
    }
}

#[test]
fn rr_mean_and_variability_as_requested() {
    let s = SynthSpec {
        duration_s: 600.0,
        hr_bpm: 75.0,
        rr_sd_ms: 30.0,
        ..spec(11)
    };
    let r = generate(&s).unwrap();
    let rr: Vec<f64> = r.truth_global.iter().map(|b| b.rr_ms).collect();
    let m = rr.iter().sum::<f64>() / rr.len() as f64;
    let sd = (rr.iter().map(|x| (x - m).powi(2)).sum::<f64>() / rr.len() as f64).sqrt();
    // 10 min holds ~60 LF cycles: sample SD within 25 % of the process SD.
    assert!((m - 800.0).abs() < 10.0, "mean RR {m}");
    assert!((sd - 30.0).abs() < 7.5, "sd {sd}");
}

/// Times of the global truth marks as the onset/end rule defines them, checked
/// against the signal itself: at a lead's onset, the wave has fallen to
/// exp(−k²/2) of its peak (sampled at the nearest sample, so within the
/// change over half a sample).
#[test]
fn boundaries_sit_where_the_rule_says_in_the_signal() {
    let s = SynthSpec {
        fs_hz: 2000.0,
        rr_sd_ms: 0.0,
        ..spec(9)
    };
    let r = generate(&s).unwrap();
    let fs = r.fs_hz;
    let k = s.boundary_k;
    let frac = (-k * k / 2.0).exp();
    let val = |l: usize, t: f64| r.leads[l][(t * fs).round() as usize];
    let mut checked = 0;
    for (l, lt) in r.truth_per_lead.iter().enumerate() {
        let amp = r.amplitudes_mv[l];
        for (b, g) in lt.iter().zip(&r.truth_global) {
            // P wave: isolated from the previous T and the QRS (long RR), so the
            // signal there is the P Gaussian alone.
            if let Some(p) = b.p {
                let peak = val(l, p.peak_s);
                // Nearest sample is ≤ 0.25 ms from the centre: (0.25/20)²/2 < 1e-4 relative.
                assert!((peak - amp[0]).abs() < 1e-4 * amp[0].abs());
                for edge in [p.onset_s, p.end_s] {
                    let ratio = val(l, edge) / peak;
                    // half a sample at 2 kHz is 0.25 ms; σ_P = 20 ms.
                    let slack = k * 0.25 / 20.0 * 1.05;
                    assert!(
                        (ratio - frac).abs() < frac * slack + 1e-9,
                        "lead {l} ratio {ratio}"
                    );
                }
                checked += 1;
            }
            // T wave: its end is the last point of the beat before the next P.
            if let Some(t) = b.t {
                let peak = val(l, t.peak_s);
                let ratio = val(l, t.end_s) / peak;
                // σ_down = 0.075·QT ≥ 28 ms here; half a sample is 0.25 ms.
                let slack = k * 0.25 / 28.0 * 1.1;
                assert!(
                    (ratio - frac).abs() < frac * slack,
                    "lead {l} T ratio {ratio}"
                );
                assert!(t.end_s <= g.t.end_s + 1e-12);
                assert!(b.qrs.unwrap().onset_s >= g.qrs.onset_s - 1e-12);
            }
        }
    }
    assert!(checked > 50);
}

/// Global T end: in every lead, the clean signal beyond it is at most the
/// documented fraction of that lead's largest T amplitude (or the negligible
/// amplitude where T is absent); just before it, some lead still exceeds it.
#[test]
fn global_t_end_is_the_latest_lead_end() {
    let s = SynthSpec {
        rr_sd_ms: 0.0,
        fs_hz: 1000.0,
        ..spec(2)
    };
    let r = generate(&s).unwrap();
    let fs = r.fs_hz;
    let frac = (-s.boundary_k * s.boundary_k / 2.0).exp();
    for g in &r.truth_global {
        let after = ((g.t.end_s * fs).ceil()) as usize;
        let before = ((g.t.end_s - 0.010) * fs).round() as usize;
        let mut some_above = false;
        for l in 0..12 {
            let a = r.amplitudes_mv[l][4].abs();
            let limit = if a >= s.negligible_mv {
                a * frac
            } else {
                s.negligible_mv
            };
            assert!(r.leads[l][after].abs() <= limit + 1e-9, "lead {l}");
            if a >= s.negligible_mv && r.leads[l][before].abs() > a * frac {
                some_above = true;
            }
        }
        assert!(some_above);
    }
}

#[test]
fn windowed_sum_matches_slow_full_sum() {
    let s = SynthSpec {
        duration_s: 6.0,
        ..spec(77)
    };
    let r = generate(&s).unwrap();
    let t: Vec<f64> = (0..r.n_samples()).map(|i| i as f64 / r.fs_hz).collect();
    for l in [0, 3, 6, 11] {
        let slow = clean_value_slow(&s, l, &t).unwrap();
        let err = slow
            .iter()
            .zip(&r.leads[l])
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(err < 1e-9, "lead {l} max err {err}");
    }
}

#[test]
fn limb_leads_obey_einthoven_in_the_signal() {
    // Einthoven's law III = II − I and aVR + aVL + aVF = 0 (handbook relations).
    let r = generate(&spec(3)).unwrap();
    for i in 0..r.n_samples() {
        let v = |l: usize| r.leads[l][i];
        assert!((v(2) - (v(1) - v(0))).abs() < 1e-12);
        assert!((v(3) + v(4) + v(5)).abs() < 1e-12);
    }
}

/// Record-level SNR as documented: all 12 leads, all samples.
fn snr_db(clean: &[Vec<f64>], noisy: &[Vec<f64>]) -> f64 {
    let (mut ps, mut pn) = (0.0, 0.0);
    for (c, x) in clean.iter().zip(noisy) {
        ps += c.iter().map(|v| v * v).sum::<f64>();
        pn += c.iter().zip(x).map(|(a, b)| (b - a).powi(2)).sum::<f64>();
    }
    10.0 * (ps / pn).log10()
}

#[test]
fn each_noise_component_has_the_requested_snr() {
    let clean = generate(&spec(8)).unwrap();
    let cases = [
        NoiseSpec {
            baseline_wander_snr_db: Some(6.0),
            ..NoiseSpec::default()
        },
        NoiseSpec {
            powerline_snr_db: Some(20.0),
            powerline_hz: 60.0,
            ..NoiseSpec::default()
        },
        NoiseSpec {
            muscle_snr_db: Some(12.0),
            ..NoiseSpec::default()
        },
    ];
    for (noise, want) in cases.into_iter().zip([6.0, 20.0, 12.0]) {
        let r = generate(&SynthSpec { noise, ..spec(8) }).unwrap();
        assert_eq!(
            r.truth_global, clean.truth_global,
            "noise must not move the truth"
        );
        let got = snr_db(&clean.leads, &r.leads);
        assert!((got - want).abs() < 1e-6, "{got} dB, want {want}");
        // Noise comes from the electrodes: Einthoven's law still holds.
        for i in 0..r.n_samples() {
            let v = |l: usize| r.leads[l][i];
            assert!((v(2) - (v(1) - v(0))).abs() < 1e-9);
            assert!((v(3) + v(4) + v(5)).abs() < 1e-9);
        }
        // ...and every lead carries some of it.
        for l in 0..12 {
            let d: f64 = clean.leads[l]
                .iter()
                .zip(&r.leads[l])
                .map(|(a, b)| (a - b).abs())
                .sum();
            assert!(d > 0.0, "lead {l} without noise");
        }
    }
    // Components are independent streams: both together give about the power sum.
    let both = generate(&SynthSpec {
        noise: NoiseSpec {
            baseline_wander_snr_db: Some(10.0),
            muscle_snr_db: Some(10.0),
            ..NoiseSpec::default()
        },
        ..spec(8)
    })
    .unwrap();
    let got = snr_db(&clean.leads, &both.leads);
    assert!((got - 10.0 * (0.5f64).log10() - 10.0).abs() < 0.5, "{got}");
}

#[test]
fn bad_parameters_are_named() {
    let s = SynthSpec {
        hr_bpm: 500.0,
        noise: NoiseSpec {
            powerline_hz: 55.0,
            ..NoiseSpec::default()
        },
        ..SynthSpec::default()
    };
    let e = generate(&s).unwrap_err().to_string();
    assert!(e.contains("synth.hr_bpm"), "{e}");
    assert!(e.contains("synth.noise.powerline_hz"), "{e}");
    // In range but impossible: a very long QT at a fast rate overlaps the next P.
    let s = SynthSpec {
        hr_bpm: 150.0,
        qt1000_ms: 600.0,
        rr_sd_ms: 0.0,
        ..SynthSpec::default()
    };
    let e = generate(&s).unwrap_err().to_string();
    assert!(e.contains("overlaps the next P"), "{e}");
}

#[test]
fn spec_round_trips_through_toml_and_rejects_unknown_keys() {
    let s = SynthSpec {
        noise: NoiseSpec {
            muscle_snr_db: Some(9.0),
            ..NoiseSpec::default()
        },
        ..spec(4)
    };
    let text = toml::to_string(&s).unwrap();
    let back: SynthSpec = toml::from_str(&text).unwrap();
    assert_eq!(back, s);
    let bad = toml::from_str::<SynthSpec>("hr_bmp = 70\n");
    assert!(bad.unwrap_err().to_string().contains("hr_bmp"));
}
