//! Power-line detection, record-level filtering, the design cache and the
//! `[filter]` configuration table.

use std::f64::consts::PI;
use std::sync::Arc;

use tendline_dsp::filter::{ConditioningFilter, DspError, FilterCache, FilterConfig, Powerline};

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

/// Invented ECG-like lead (demo data): narrow "QRS" and broad "T" bumps at
/// 72 beats/min, 0.2 Hz wander, white noise, plus an optional mains tone of
/// `mains_mv` amplitude at `mains_hz` (slightly off nominal, as real mains
/// frequency drifts by a few tenths of a hertz, common practice).
fn ecg_like(fs: f64, seconds: f64, mains_hz: f64, mains_mv: f64, seed: u64) -> Vec<f64> {
    let n = (fs * seconds) as usize;
    let r = noise(n, seed);
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let ph = (t * 1.2).fract() / 1.2;
            let qrs = 1.2 * (-((ph - 0.25) / 0.012).powi(2)).exp();
            let tw = 0.3 * (-((ph - 0.55) / 0.05).powi(2)).exp();
            qrs + tw
                + 0.3 * (2.0 * PI * 0.2 * t).sin()
                + 0.02 * r[i]
                + mains_mv * (2.0 * PI * mains_hz * t + 0.3).sin()
        })
        .collect()
}

#[test]
fn detects_50_60_and_none() {
    let cfg = FilterConfig::default();
    for fs in [250.0, 360.0, 500.0, 1000.0] {
        for seconds in [10.0, 60.0] {
            let with50 = ecg_like(fs, seconds, 50.1, 0.05, 1);
            let with60 = ecg_like(fs, seconds, 59.8, 0.05, 2);
            let clean = ecg_like(fs, seconds, 50.0, 0.0, 3);
            assert_eq!(
                ConditioningFilter::detect_powerline(&with50, fs, &cfg),
                Some(50.0),
                "fs {fs} {seconds}s"
            );
            assert_eq!(
                ConditioningFilter::detect_powerline(&with60, fs, &cfg),
                Some(60.0),
                "fs {fs} {seconds}s"
            );
            assert_eq!(
                ConditioningFilter::detect_powerline(&clean, fs, &cfg),
                None,
                "fs {fs} {seconds}s"
            );
        }
    }
    // Pure white noise has a flat spectrum: nothing to detect.
    assert_eq!(
        ConditioningFilter::detect_powerline(&noise(250 * 60, 11), 250.0, &cfg),
        None
    );
    // A tone well away from both line frequencies is not mistaken for one.
    let tone55 = ecg_like(250.0, 30.0, 55.0, 0.05, 4);
    assert_eq!(
        ConditioningFilter::detect_powerline(&tone55, 250.0, &cfg),
        None
    );
}

/// Invented paced-like lead (demo data): a very sharp spike every second
/// exactly (60 beats/min), whose harmonics are lines at every whole hertz,
/// 50 and 60 Hz included. Those comb lines are not mains interference.
fn paced_like(fs: f64, seconds: f64, mains_mv: f64) -> Vec<f64> {
    let n = (fs * seconds) as usize;
    let r = noise(n, 21);
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let ph = t.fract();
            let spike = 2.0 * (-((ph - 0.2) / 0.002).powi(2)).exp();
            let qrs = 1.0 * (-((ph - 0.24) / 0.015).powi(2)).exp();
            spike + qrs + 0.01 * r[i] + mains_mv * (2.0 * PI * 50.0 * t).sin()
        })
        .collect()
}

#[test]
fn harmonic_comb_of_a_regular_rhythm_is_not_mains() {
    let cfg = FilterConfig::default();
    for fs in [250.0, 500.0, 1000.0] {
        assert_eq!(
            ConditioningFilter::detect_powerline(&paced_like(fs, 60.0, 0.0), fs, &cfg),
            None,
            "fs {fs}"
        );
        assert_eq!(
            ConditioningFilter::detect_powerline(&paced_like(fs, 60.0, 0.1), fs, &cfg),
            Some(50.0),
            "fs {fs}"
        );
    }
}

#[test]
fn detection_threshold_is_the_configured_ratio() {
    let fs = 250.0;
    let weak = ecg_like(fs, 60.0, 50.0, 0.01, 5);
    let strict = FilterConfig {
        powerline_detect_ratio: 1.0e5,
        ..FilterConfig::default()
    };
    let lax = FilterConfig {
        powerline_detect_ratio: 3.0,
        ..FilterConfig::default()
    };
    assert_eq!(
        ConditioningFilter::detect_powerline(&weak, fs, &strict),
        None
    );
    assert_eq!(
        ConditioningFilter::detect_powerline(&weak, fs, &lax),
        Some(50.0)
    );
}

#[test]
fn low_sampling_rates_cannot_detect_lines_above_nyquist() {
    let cfg = FilterConfig::default();
    // At 100 Hz neither 50 Hz (= Nyquist) nor 60 Hz can be seen.
    let x = ecg_like(100.0, 30.0, 20.0, 0.0, 6);
    assert_eq!(ConditioningFilter::detect_powerline(&x, 100.0, &cfg), None);
    // Too short to resolve: no decision, no panic.
    assert_eq!(
        ConditioningFilter::detect_powerline(&[1.0, 2.0, 3.0], 250.0, &cfg),
        None
    );
    assert_eq!(ConditioningFilter::detect_powerline(&[], 250.0, &cfg), None);
    // Fixed 60 Hz at 100 Hz is a design error; auto at 100 Hz is fine.
    let fixed = FilterConfig {
        powerline: Powerline::Hz60,
        ..FilterConfig::default()
    };
    assert!(matches!(
        ConditioningFilter::design(100.0, &fixed),
        Err(DspError::FrequencyOutOfRange { .. })
    ));
    let f = ConditioningFilter::design(100.0, &cfg).unwrap();
    assert_eq!(f.lowpass_hz(), Some(45.0), "0.45 × fs clamp");
    assert_eq!(f.apply(&x).len(), x.len());
}

#[test]
fn record_notch_is_decided_on_all_leads_and_removes_the_line() {
    let fs = 500.0;
    let a = ecg_like(fs, 20.0, 60.0, 0.1, 7);
    let b = ecg_like(fs, 20.0, 60.0, 0.1, 8);
    let f = ConditioningFilter::design(fs, &FilterConfig::default()).unwrap();
    let (out, notch) = f.apply_record(&[&a, &b]);
    assert_eq!(notch, Some(60.0));
    assert_eq!(out.len(), 2);
    assert_eq!(out[0].len(), a.len());
    // After filtering, no 60 Hz line is left to detect.
    assert_eq!(
        ConditioningFilter::detect_powerline(&out[0], fs, f.config()),
        None
    );
    // Off means off, fixed means fixed, whatever the signal holds.
    let off = ConditioningFilter::design(
        fs,
        &FilterConfig {
            powerline: Powerline::Off,
            ..FilterConfig::default()
        },
    )
    .unwrap();
    assert_eq!(off.apply_record(&[&a]).1, None);
    let fixed = ConditioningFilter::design(
        fs,
        &FilterConfig {
            powerline: Powerline::Hz50,
            ..FilterConfig::default()
        },
    )
    .unwrap();
    assert_eq!(fixed.apply_record(&[&a]).1, Some(50.0));
}

#[test]
fn cache_designs_once_per_rate_across_threads() {
    let cache = Arc::new(FilterCache::new(FilterConfig::default()));
    let handles: Vec<_> = (0..8)
        .map(|i| {
            let c = Arc::clone(&cache);
            std::thread::spawn(move || c.get(if i & 1 == 0 { 250.0 } else { 500.0 }).unwrap())
        })
        .collect();
    let got: Vec<_> = handles.into_iter().map(|h| h.join().unwrap()).collect();
    assert_eq!(cache.len(), 2);
    for g in &got {
        let again = cache.get(g.fs()).unwrap();
        assert!(Arc::ptr_eq(g, &again), "one shared design per rate");
    }
    assert!(matches!(
        cache.get(0.0),
        Err(DspError::BadSamplingRate { .. })
    ));
    assert!(matches!(
        cache.get(f64::NAN),
        Err(DspError::BadSamplingRate { .. })
    ));
    assert_eq!(cache.len(), 2);
}

#[test]
fn config_reads_from_toml() {
    let cfg: FilterConfig = toml::from_str("highpass_hz = 0.67\npowerline = \"60\"\n").unwrap();
    assert_eq!(cfg.powerline, Powerline::Hz60);
    assert_eq!(cfg.highpass_hz, 0.67);
    assert_eq!(cfg.lowpass_hz, FilterConfig::default().lowpass_hz);
    let cfg: FilterConfig = toml::from_str("powerline = 50").unwrap();
    assert_eq!(cfg.powerline, Powerline::Hz50);
    for s in ["auto", "off"] {
        let cfg: FilterConfig = toml::from_str(&format!("powerline = \"{s}\"")).unwrap();
        assert_eq!(cfg.powerline.to_string(), s);
    }
    let e = toml::from_str::<FilterConfig>("powerline = \"55\"")
        .unwrap_err()
        .to_string();
    assert!(e.contains("55") && e.contains("auto"), "{e}");
    let e = toml::from_str::<FilterConfig>("lowpas_hz = 40.0")
        .unwrap_err()
        .to_string();
    assert!(e.contains("lowpas_hz"), "{e}");
    // Round trip through TOML keeps every value.
    let text = toml::to_string(&FilterConfig::default()).unwrap();
    let back: FilterConfig = toml::from_str(&text).unwrap();
    assert_eq!(back, FilterConfig::default());
}

#[test]
fn validation_names_every_bad_key() {
    let bad = FilterConfig {
        highpass_hz: -1.0,
        highpass_order: 0,
        notch_q: f64::NAN,
        powerline_detect_ratio: 1.0,
        lowpass_hz: 3.0,
        lowpass_order: 20,
        ..FilterConfig::default()
    };
    let errs = bad.validate().unwrap_err();
    let keys: Vec<&str> = errs.iter().map(|e| e.key.as_str()).collect();
    for k in [
        "filter.highpass_hz",
        "filter.highpass_order",
        "filter.notch_q",
        "filter.powerline_detect_ratio",
        "filter.lowpass_hz",
        "filter.lowpass_order",
    ] {
        assert!(keys.contains(&k), "{k} missing from {keys:?}");
    }
    let e = ConditioningFilter::design(250.0, &bad).unwrap_err();
    assert!(matches!(e, DspError::InvalidConfig(_)));
    assert!(e.to_string().contains("filter.notch_q"), "{e}");
    // Disabled stages are valid and give a pure notch / identity chain.
    let none = FilterConfig {
        highpass_hz: 0.0,
        lowpass_hz: 0.0,
        powerline: Powerline::Off,
        ..FilterConfig::default()
    };
    let f = ConditioningFilter::design(250.0, &none).unwrap();
    let x = ecg_like(250.0, 5.0, 50.0, 0.1, 9);
    assert_eq!(f.apply(&x), x);
}
