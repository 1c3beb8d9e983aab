//! End-to-end checks of `measure_record_with` on invented synthetic records, with a
//! simple threshold delineator standing in for the delineation stage (it marks where a
//! Gaussian wave crosses 5 % of its peak, which is known analytically).

use super::*;
use tendline_detect::{Beat, Span};

const FS: f64 = 500.0;
const K: f64 = 2.447_746_830_680_816; // sqrt(2 ln 20): a Gaussian is at 5 % of its peak at ±K·σ

struct Shape {
    qrs_sigma: f64, // s
    t_center: f64,  // s after the QRS peak
    t_sigma: f64,   // s
    t_amp: f64,
}

fn wave(s: &Shape, t: f64) -> f64 {
    let g = |c: f64, w: f64, a: f64| a * (-(t - c).powi(2) / (2.0 * w * w)).exp();
    g(0.0, s.qrs_sigma, 1.0) + g(s.t_center, s.t_sigma, s.t_amp) + g(-0.16, 0.02, 0.1)
}

fn lcg(state: &mut u64) -> f64 {
    *state = state
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    ((*state >> 11) as f64) / ((1u64 << 53) as f64)
}

/// Expected single-lead QT (ms) of the stand-in delineator on `s`.
fn expected_qt_ms(s: &Shape) -> f64 {
    (K * s.qrs_sigma + s.t_center + K * s.t_sigma) * 1000.0
}

/// [`threshold_delineator`]'s marks of beat `i` (the form `measure_record_with` takes).
fn threshold_beat(x: &[f64], fs: f64, qrs: &[usize], i: usize) -> BeatMarks {
    threshold_delineator(x, fs, qrs).swap_remove(i)
}

/// Stand-in delineator: QRS onset/end where the signal leaves/returns below 5 % of the
/// QRS peak within ±60 ms; T end where it falls below 5 % of the T peak, searched up to
/// 70 % of the following RR. Returns one entry per `qrs`.
fn threshold_delineator(x: &[f64], fs: f64, qrs: &[usize]) -> Vec<BeatMarks> {
    let mk = |s| {
        Some(Mark {
            sample: s,
            confidence: 1.0,
        })
    };
    qrs.iter()
        .enumerate()
        .map(|(i, &c)| {
            let w = (0.06 * fs) as usize;
            let peak = x[c];
            let mut on = c;
            while on > c - w && x[on - 1] > 0.05 * peak {
                on -= 1;
            }
            let mut end = c;
            while end < c + w && x[end + 1] > 0.05 * peak {
                end += 1;
            }
            let rr = if i + 1 < qrs.len() {
                qrs[i + 1] - c
            } else {
                fs as usize
            };
            let (t0, t1) = (c + (0.1 * fs) as usize, c + (0.7 * rr as f64) as usize);
            let tp = (t0..t1).max_by(|&a, &b| x[a].total_cmp(&x[b])).unwrap();
            let mut te = tp;
            while te < t1 && x[te + 1] > 0.05 * x[tp] {
                te += 1;
            }
            BeatMarks {
                qrs_on: mk(on),
                qrs_end: mk(end),
                t_peak: mk(tp),
                t_end: mk(te),
                ..BeatMarks::default()
            }
        })
        .collect()
}

struct Rec {
    leads: Vec<Vec<f64>>,
    det: Detection,
    times: Vec<f64>,
}

/// Invented record: beats every `rr` s with ±`jitter` s of timing jitter, two leads.
fn record(dur_s: f64, rr: f64, jitter: f64, shapes: &[Shape], seed: u64) -> Rec {
    let mut st = seed;
    let n = (dur_s * FS) as usize;
    let mut times = Vec::new();
    let mut t = 0.5;
    while t < dur_s - 0.2 {
        times.push(t + (lcg(&mut st) - 0.5) * 2.0 * jitter);
        t += rr;
    }
    let leads = shapes
        .iter()
        .map(|s| {
            (0..n)
                .map(|i| {
                    let ti = i as f64 / FS;
                    times
                        .iter()
                        .filter(|&&c| (ti - c).abs() < 1.0)
                        .map(|&c| wave(s, ti - c))
                        .sum()
                })
                .collect()
        })
        .collect();
    let beats = times
        .iter()
        .map(|&c| Beat {
            sample: ((c * FS).round() as i64 + (lcg(&mut st) * 3.0) as i64 - 1) as usize,
            label: BeatLabel::Normal,
        })
        .collect();
    Rec {
        leads,
        det: Detection {
            beats,
            unreadable: vec![],
            lead_quality: vec![1.0; shapes.len()],
        },
        times,
    }
}

fn shapes() -> Vec<Shape> {
    vec![
        Shape {
            qrs_sigma: 0.008,
            t_center: 0.26,
            t_sigma: 0.04,
            t_amp: 0.3,
        },
        Shape {
            qrs_sigma: 0.009,
            t_center: 0.28,
            t_sigma: 0.045,
            t_amp: 0.25,
        },
    ]
}

fn names(n: usize) -> Vec<String> {
    (0..n).map(|i| format!("L{i}")).collect()
}

fn run(r: &Rec, cfg: &MeasureConfig, sex: Option<Sex>) -> RecordMeasures {
    let leads: Vec<&[f64]> = r.leads.iter().map(|l| l.as_slice()).collect();
    measure_record_with(
        &leads,
        &names(leads.len()),
        FS,
        &r.det,
        sex,
        cfg,
        threshold_beat,
    )
    .unwrap()
}

#[test]
fn windows_qt_rr_and_qtc_on_a_regular_record() {
    let sh = shapes();
    let r = record(25.0, 0.8, 0.003, &sh, 5);
    let m = run(&r, &MeasureConfig::default(), Some(Sex::Female));
    // 25 s → 10 s, 10 s and a 5 s tail (kept: ≥ min_window_s).
    assert_eq!(m.windows.len(), 3);
    assert_eq!((m.windows[2].start_s, m.windows[2].end_s), (20.0, 25.0));
    let q0 = expected_qt_ms(&sh[0]);
    let q1 = expected_qt_ms(&sh[1]);
    for w in &m.windows {
        assert!(
            !w.flags.too_few_beats && !w.flags.irregular,
            "{:?}",
            w.flags
        );
        assert!(w.n_beats >= 5, "{}", w.n_beats);
        let rr = w.rr_ms.unwrap();
        assert!((rr - 800.0).abs() < 5.0, "rr {rr}");
        // Longest lead is lead 1, measured within two samples (4 ms) of the analytic value.
        assert_eq!(w.qt_lead, Some(1));
        assert_eq!(w.qt_lead_name.as_deref(), Some("L1"));
        assert!(
            (w.leads[0].qt_ms.unwrap() - q0).abs() <= 4.0,
            "{:?} vs {q0}",
            w.leads[0].qt_ms
        );
        assert!(
            (w.qt_ms.unwrap() - q1).abs() <= 4.0,
            "{:?} vs {q1}",
            w.qt_ms
        );
        let sup = w.qt_superimposed_ms.unwrap();
        assert!(sup >= w.qt_ms.unwrap() - 1e-9 && sup <= q1 + 6.0, "{sup}");
        let q = w.qt_ms.unwrap();
        assert!((w.qtc_fridericia_ms.unwrap() - qtc::fridericia(q, rr / 1000.0)).abs() < 1e-9);
        assert_eq!(w.qtc_ms, w.qtc_fridericia_ms);
        assert!((w.jt_ms.unwrap() - (q - w.qrs_ms.unwrap())).abs() < 1e-9);
        // T peak to T end on the QT lead: the stand-in marks the Gaussian T wave's
        // peak and its 5 % point, K·σ later (analytic), within two samples.
        let tpe = K * sh[1].t_sigma * 1000.0;
        assert!(
            (w.tpe_ms.unwrap() - tpe).abs() <= 4.0,
            "{:?} vs {tpe}",
            w.tpe_ms
        );
        // Two valid leads: fewer than the default minimum of three for a dispersion.
        assert_eq!(w.qt_valid_leads, 2);
        assert_eq!(w.qt_dispersion_ms, None);
        assert_eq!(w.median.n_leads(), 2);
        assert_eq!(w.median.fiducial, 200);
        assert_eq!(w.median.lead(0).len(), 200 + 450 + 1);
        assert_eq!(w.median.values.len(), 2 * (200 + 450 + 1));
    }
    assert_eq!(m.summary.n_measured, 3);
    assert!(m.summary.caution == CAUTION && !m.summary.unknown_sex);
}

#[test]
fn median_beat_matches_template_despite_jitter() {
    let sh = shapes();
    let r = record(10.0, 0.75, 0.004, &sh, 17);
    let m = run(&r, &MeasureConfig::default(), None);
    assert_eq!(m.windows.len(), 1);
    let w = &m.windows[0];
    // The median beat's fiducial is the mean aligned position; place the template there.
    let mean_pos = w.aligned.iter().sum::<f64>() / w.aligned.len() as f64;
    let used_true: Vec<f64> = w
        .beats
        .iter()
        .map(|&b| {
            *r.times
                .iter()
                .min_by(|a, c| {
                    ((*a * FS) - b as f64)
                        .abs()
                        .total_cmp(&((*c * FS) - b as f64).abs())
                })
                .unwrap()
        })
        .collect();
    let mean_true = used_true.iter().sum::<f64>() / used_true.len() as f64 * FS;
    let off = (mean_true - mean_pos) / FS;
    for (l, s) in sh.iter().enumerate() {
        for (k, &v) in w.median.lead(l).iter().enumerate() {
            let t = (k as f64 - w.median.fiducial as f64) / FS - off;
            // The neighbours are jittered independently, so only this beat's own span
            // (P wave to past the T wave) is compared.
            if !(-0.3..=0.55).contains(&t) {
                continue;
            }
            let e = wave(s, t) + wave(s, t + 0.75) + wave(s, t - 0.75);
            assert!((v as f64 - e).abs() < 0.03, "lead {l} k {k}: {v} vs {e}");
        }
    }
    assert!(w.flags.unknown_sex);
    assert!(w.classification.sex_unknown);
}

#[test]
fn ectopic_unstable_and_unreadable_beats_are_left_out() {
    let sh = shapes();
    let mut r = record(10.0, 0.8, 0.0, &sh, 3);
    // Mark beat 4 ventricular, and an unreadable stretch over beats 8-9.
    r.det.beats[4].label = BeatLabel::Ventricular;
    let (a, b) = (r.det.beats[8].sample - 10, r.det.beats[9].sample + 10);
    r.det.unreadable.push(Span {
        start: a,
        end: b,
        reason: "noise".into(),
    });
    let m = run(&r, &MeasureConfig::default(), Some(Sex::Male));
    let w = &m.windows[0];
    assert!(w.flags.unreadable);
    for (i, b) in r.det.beats.iter().enumerate() {
        if [4, 8, 9].contains(&i) {
            assert!(!w.beats.contains(&b.sample), "beat {i} used");
        }
    }
    // The RR of the window is the mean of normal-to-normal intervals only.
    assert!((w.rr_ms.unwrap() - 800.0).abs() < 3.0);
    assert!(w.qt_ms.is_some());
}

#[test]
fn irregular_rhythm_is_flagged_and_still_measured() {
    let sh = shapes();
    let mut r = record(10.0, 0.8, 0.0, &sh, 3);
    // Rebuild with strongly varying RR (AF-like), same shapes.
    let mut st = 99u64;
    let mut t = 0.5;
    let mut times = Vec::new();
    while t < 9.6 {
        times.push(t);
        t += 0.55 + 0.5 * lcg(&mut st);
    }
    let n = r.leads[0].len();
    for (l, s) in sh.iter().enumerate() {
        r.leads[l] = (0..n)
            .map(|i| {
                let ti = i as f64 / FS;
                times
                    .iter()
                    .filter(|&&c| (ti - c).abs() < 1.0)
                    .map(|&c| wave(s, ti - c))
                    .sum()
            })
            .collect();
    }
    r.det.beats = times
        .iter()
        .map(|&c| Beat {
            sample: (c * FS).round() as usize,
            label: BeatLabel::Normal,
        })
        .collect();
    let m = run(&r, &MeasureConfig::default(), Some(Sex::Male));
    let w = &m.windows[0];
    assert!(w.flags.irregular);
    assert!(w.n_beats >= 5);
    // RR is the mean of the intervals preceding the averaged beats.
    let s: Vec<usize> = r.det.beats.iter().map(|b| b.sample).collect();
    let pre: Vec<f64> = w
        .beats
        .iter()
        .filter_map(|&b| {
            s.iter()
                .position(|&x| x == b)
                .filter(|&i| i > 0)
                .map(|i| (s[i] - s[i - 1]) as f64 / FS * 1000.0)
        })
        .collect();
    let want = pre.iter().sum::<f64>() / pre.len() as f64;
    assert!((w.rr_ms.unwrap() - want).abs() < 1e-9);
    assert!(w.qt_ms.is_some());
    assert_eq!(m.summary.n_irregular, 1);
}

#[test]
fn superimposed_rule_and_other_formula_follow_config() {
    let sh = shapes();
    let r = record(10.0, 0.8, 0.002, &sh, 8);
    let cfg = MeasureConfig {
        qt_rule: QtRule::Superimposed,
        preferred_formula: Formula::Bazett,
        ..MeasureConfig::default()
    };
    let w = &run(&r, &cfg, Some(Sex::Male)).windows[0];
    assert_eq!(w.qt_ms, w.qt_superimposed_ms);
    assert_eq!(w.qt_lead, None);
    assert_eq!(w.qtc_ms, w.qtc_bazett_ms);
}

#[test]
fn too_few_beats_gives_no_qt() {
    let sh = shapes();
    let mut r = record(10.0, 0.8, 0.0, &sh, 2);
    r.det.beats.truncate(2);
    let w = &run(&r, &MeasureConfig::default(), None).windows[0];
    assert!(w.flags.too_few_beats);
    assert_eq!(w.qt_ms, None);
    assert_eq!(w.qtc_flag, QtcFlag::Unknown);
}

#[test]
fn bad_input_is_a_typed_error() {
    let x = vec![0.0; 100];
    let y = vec![0.0; 99];
    let det = Detection::default();
    let cfg = MeasureConfig::default();
    let e = measure_record_with(&[&x, &y], &names(2), FS, &det, None, &cfg, threshold_beat)
        .unwrap_err();
    assert!(
        matches!(e, MeasureError::LeadLength { index: 1, .. }),
        "{e}"
    );
    let e =
        measure_record_with(&[&x], &names(1), 0.0, &det, None, &cfg, threshold_beat).unwrap_err();
    assert!(e.to_string().contains("sampling rate"));
    let det = Detection {
        beats: vec![Beat {
            sample: 100,
            label: BeatLabel::Normal,
        }],
        ..Detection::default()
    };
    let e =
        measure_record_with(&[&x], &names(1), FS, &det, None, &cfg, threshold_beat).unwrap_err();
    assert!(matches!(
        e,
        MeasureError::BeatOutOfRange {
            sample: 100,
            len: 100
        }
    ));
    let bad = MeasureConfig {
        window_s: -1.0,
        ..MeasureConfig::default()
    };
    let e = measure_record_with(
        &[&x],
        &names(1),
        FS,
        &Detection::default(),
        None,
        &bad,
        threshold_beat,
    )
    .unwrap_err();
    assert!(e.to_string().contains("measure.window_s"), "{e}");
}

#[test]
fn beats_over_a_gap_are_left_out() {
    let sh = shapes();
    let mut r = record(10.0, 0.8, 0.0, &sh, 4);
    let s = r.det.beats[5].sample;
    r.leads[1][s + 10] = f64::NAN;
    let w = &run(&r, &MeasureConfig::default(), None).windows[0];
    assert!(!w.beats.contains(&s));
    assert!(w.median.values.iter().all(|v| v.is_finite()));
    assert!(w.qt_ms.is_some());
}

#[test]
fn gap_filling_is_linear() {
    let b = [None, Some(1.0), None, None, Some(4.0), None];
    assert_eq!(fill_gaps(&b), vec![1.0, 1.0, 2.0, 3.0, 4.0, 4.0]);
}

// Gap filling with a walking index against a binary search per gap sample
// (oracle), bit for bit: gaps at both ends, inside, single known samples,
// no known sample.
#[test]
fn fill_gaps_equals_binary_search_form() {
    let cases: Vec<Vec<Option<f64>>> = vec![
        vec![
            None,
            None,
            Some(1.0),
            None,
            None,
            Some(-2.5),
            None,
            Some(0.3),
            None,
        ],
        vec![Some(4.0)],
        vec![None, Some(4.0), None],
        vec![None; 5],
        vec![],
        (0..500)
            .map(|i| (i % 7 != 3 && i % 11 != 0).then(|| (i as f64 * 0.1).sin()))
            .collect(),
    ];
    for (c, buf) in cases.iter().enumerate() {
        let fast = fill_gaps(buf);
        let slow = fill_gaps_reference(buf);
        assert_eq!(fast.len(), slow.len());
        for (i, (a, b)) in fast.iter().zip(&slow).enumerate() {
            assert_eq!(a.to_bits(), b.to_bits(), "case {c} sample {i}");
        }
    }
}

// The OR form against `is_finite` value by value (oracle): every kind of
// value in every position of short and long slices.
#[test]
fn all_finite_equals_is_finite() {
    let kinds = [
        0.0,
        -0.0,
        1.5,
        -3.0e300,
        f64::MIN_POSITIVE / 2.0,
        f64::MAX,
        f64::NAN,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ];
    for n in [0usize, 1, 3, 8, 33] {
        for &k in &kinds {
            for pos in 0..n.max(1) {
                let mut x = vec![0.25; n];
                if pos < n {
                    x[pos] = k;
                }
                assert_eq!(
                    super::all_finite(&x),
                    x.iter().all(|v| v.is_finite()),
                    "n={n} k={k} pos={pos}"
                );
            }
        }
    }
}

#[test]
fn windows_lose_their_p_wave_when_most_beats_have_none() {
    let sh = shapes();
    let r = record(25.0, 0.8, 0.003, &sh, 5);
    let cfg = MeasureConfig::default();
    let base = run(&r, &cfg, None);
    assert_eq!(base.windows.len(), 3);
    // Give every window a P wave to keep or lose (the synthetic beats have none).
    let with_p = || {
        let mut w = base.windows.clone();
        for x in &mut w {
            x.pr_ms = Some(160.0);
            x.p_ms = Some(100.0);
            for lm in &mut x.leads {
                lm.pr_ms = Some(160.0);
                lm.marks.p_on = Some(Mark {
                    sample: 10,
                    confidence: 0.5,
                });
                lm.marks.p_end = lm.marks.p_on;
            }
        }
        w
    };
    let samples: Vec<usize> = r.det.beats.iter().map(|b| b.sample).collect();
    // Window 0: exactly half of its beats (rounded up) with a P wave: kept
    // (at least the fraction). Window 1: one beat fewer: dropped. Window 2: all.
    let mut present = vec![false; samples.len()];
    for (k, w) in base.windows.iter().enumerate() {
        let n = w.beats.len();
        assert!(n >= 3, "window {k}: {n} beats");
        let with = match k {
            0 => n.div_ceil(2),
            1 => n.div_ceil(2) - 1,
            _ => n,
        };
        for b in &w.beats[..with] {
            present[samples.binary_search(b).unwrap()] = true;
        }
    }
    let mut w = with_p();
    assert_eq!(drop_absent_p(&mut w, &samples, &present, &cfg), 1);
    assert_eq!(w[0].pr_ms, Some(160.0));
    assert_eq!((w[1].pr_ms, w[1].p_ms), (None, None));
    assert!(w[1]
        .leads
        .iter()
        .all(|lm| lm.pr_ms.is_none() && lm.marks.p_on.is_none() && lm.marks.p_end.is_none()));
    assert_eq!(w[2].p_ms, Some(100.0));
    // Off: nothing changes.
    let off = MeasureConfig {
        window_p_min_beat_fraction: 0.0,
        ..MeasureConfig::default()
    };
    let mut w = with_p();
    assert_eq!(drop_absent_p(&mut w, &samples, &present, &off), 0);
    assert_eq!(w, with_p());
}

#[test]
fn median_t_noise_keeps_slow_residuals_and_drops_fast_ones() {
    // Nine beats: the median beat plus a slow sine of amplitude 0.03 mV
    // (period 200 samples, the span holds two) and an alternating ±0.1 mV
    // that the 2-sample moving average cancels exactly. A sine of amplitude
    // a has RMS a/√2; its 2-sample average has amplitude a·cos(π/200).
    let m: Vec<f64> = (0..500).map(|i| (i as f64 / 50.0).sin()).collect();
    let (lo, hi) = (100usize, 500 - 1);
    let beats: Vec<Vec<f64>> = (0..9)
        .map(|k| {
            m.iter()
                .enumerate()
                .map(|(i, v)| {
                    let ph = 2.0 * std::f64::consts::PI * (i as f64 / 200.0 + k as f64 / 9.0);
                    v + 0.03 * ph.sin() + if i % 2 == 0 { 0.1 } else { -0.1 }
                })
                .collect()
        })
        .collect();
    let got = median_t_noise(&m, beats.iter().map(|b| b.as_slice()), lo, hi, 2).unwrap();
    let rms = 0.03 * (std::f64::consts::PI / 200.0).cos() / 2f64.sqrt();
    let want = rms * (std::f64::consts::PI / 2.0).sqrt() / 3.0;
    assert!((got - want).abs() < 0.02 * want, "got {got}, want {want}");
    // Fewer than three beats: no estimate; an empty span: none either.
    assert_eq!(
        median_t_noise(&m, beats[..2].iter().map(|b| b.as_slice()), lo, hi, 2),
        None
    );
    assert_eq!(
        median_t_noise(&m, beats.iter().map(|b| b.as_slice()), 400, 401, 4),
        None
    );
}

/// Windows of an invented 90-s record whose leads' QTs follow Fridericia's
/// relation to RR exactly (QT = 400 ms · RR^(1/3), RR in s: Fridericia, Acta
/// Med Scand 1920), with the rate changing from window to window.
fn fridericia_windows() -> Vec<WindowMeasure> {
    let sh = shapes();
    let r = record(90.0, 0.8, 0.003, &sh, 11);
    let mut w = run(&r, &MeasureConfig::default(), None).windows;
    assert_eq!(w.len(), 9);
    for (k, x) in w.iter_mut().enumerate() {
        let rr = 600.0 + 50.0 * k as f64;
        x.rr_ms = Some(rr);
        x.flags.qt_inconsistent = false;
        for lm in &mut x.leads {
            assert!(global::qt_valid(lm, &MeasureConfig::default()));
            lm.qt_ms = Some(400.0 * (rr / 1000.0).cbrt());
            lm.inconsistent = false;
        }
    }
    w
}

#[test]
fn a_lead_whose_qt_jumps_against_its_neighbours_is_flagged_and_kept() {
    let cfg = MeasureConfig::default();
    // QT moving with the rate as Fridericia's formula says is consistent,
    // however much the RR changes (600 to 1000 ms here).
    let mut w = fridericia_windows();
    assert_eq!(check_lead_consistency(&mut w, &cfg), 0);
    assert!(w.iter().all(|x| !x.flags.qt_inconsistent));
    // Lead 0 of window 4 ends 60 ms late: that window is flagged and lead 0
    // marked; the values stay as measured (the flag asks for an over-read).
    let mut w = fridericia_windows();
    let late = w[4].leads[0].qt_ms.unwrap() + 60.0;
    w[4].leads[0].qt_ms = Some(late);
    let before_qt = w[4].qt_ms;
    assert_eq!(check_lead_consistency(&mut w, &cfg), 1);
    assert!(w[4].flags.qt_inconsistent);
    assert!(w[4].leads[0].inconsistent && !w[4].leads[1].inconsistent);
    assert_eq!(w[4].leads[0].qt_ms, Some(late));
    assert_eq!(w[4].qt_ms, before_qt);
    assert!(w
        .iter()
        .enumerate()
        .all(|(k, x)| k == 4 || !x.flags.qt_inconsistent));
    // 35 ms (under the 40-ms default) is not a jump.
    let mut w = fridericia_windows();
    w[4].leads[0].qt_ms = w[4].leads[0].qt_ms.map(|q| q + 35.0);
    assert_eq!(check_lead_consistency(&mut w, &cfg), 0);
    // Corrected QT, not raw QT, is compared: the same raw QT at a 40 %
    // shorter RR (RR^(1/3) 0.84 times smaller: QTcF 57 ms longer) departs.
    let mut w = fridericia_windows();
    w[4].rr_ms = w[4].rr_ms.map(|r| r * 0.6);
    assert_eq!(check_lead_consistency(&mut w, &cfg), 1);
    assert!(w[4].leads.iter().all(|l| l.inconsistent));
}

#[test]
fn the_consistency_check_needs_enough_neighbours_and_can_be_off() {
    // Off: nothing is judged.
    let off = MeasureConfig {
        lead_consistency_ms: 0.0,
        ..MeasureConfig::default()
    };
    let mut w = fridericia_windows();
    w[4].leads[0].qt_ms = w[4].leads[0].qt_ms.map(|q| q + 100.0);
    assert_eq!(check_lead_consistency(&mut w, &off), 0);
    // Lead 0 gives a QT in only three windows (0, 1 and 4; the others have a
    // flat T): window 4 has no neighbour within 3 windows with a QT of lead 0
    // but window 1, fewer than the 3 needed, so it is not judged.
    let cfg = MeasureConfig::default();
    let mut w = fridericia_windows();
    for (k, x) in w.iter_mut().enumerate() {
        if ![0, 1, 4].contains(&k) {
            x.leads[0].t_amplitude_mv = Some(0.0);
        }
    }
    w[4].leads[0].qt_ms = w[4].leads[0].qt_ms.map(|q| q + 100.0);
    assert_eq!(check_lead_consistency(&mut w, &cfg), 0);
    // With one neighbour enough, it is judged against window 1 and departs;
    // window 1 is then judged against windows 0 and 4, whose median (of two
    // values, their mean) lies 50 ms above it: it departs too. That is why
    // the default asks for three.
    let one = MeasureConfig {
        lead_consistency_min_windows: 1,
        ..MeasureConfig::default()
    };
    assert_eq!(check_lead_consistency(&mut w, &one), 2);
    assert!(w[4].leads[0].inconsistent && w[1].leads[0].inconsistent);
    assert!(!w[0].leads[0].inconsistent);
}

#[test]
fn broadband_noise_counts_only_the_beat_outside_its_qrs() {
    // Seeded white noise of SD 0.02 mV in every beat's residual over the kept
    // samples 10..90, and large beat-to-beat differences (a misaligned QRS at
    // 40..50, a neighbouring complex at 95..) where the estimate must not look.
    let m = vec![0.0; 100];
    let mut st = 7u64;
    let beats: Vec<Vec<f64>> = (0..9)
        .map(|k| {
            (0..100)
                .map(|i| {
                    // Sum of 12 uniforms minus 6: unit variance (Irwin-Hall; common practice).
                    let g: f64 = (0..12).map(|_| lcg(&mut st)).sum::<f64>() - 6.0;
                    let misaligned = if (40..=50).contains(&i) || i >= 95 {
                        if k % 2 == 0 {
                            1.0
                        } else {
                            -1.0
                        }
                    } else {
                        0.0
                    };
                    0.02 * g + misaligned
                })
                .collect()
        })
        .collect();
    let refs = || beats.iter().map(|b| b.as_slice());
    let n = residual_noise(&m, refs(), (10, 90), Some((38, 52))).unwrap();
    // The second difference keeps white noise at SD σ·√1.5, divided out: σ back,
    // within the sampling spread of 9 beats × 64 samples.
    assert!((n - 0.02).abs() < 0.003, "{n}");
    // Over the whole span the misaligned complexes dominate.
    let all = residual_noise(&m, refs(), (0, 100), None).unwrap();
    assert!(all > 0.1, "{all}");
    // Nothing left to measure: none.
    assert_eq!(residual_noise(&m, refs(), (40, 45), Some((30, 60))), None);
}

#[test]
fn median_stimulus_end_is_the_median_offset_of_the_paced_beats() {
    // Hand-worked: stimuli end 30, 30 and 31 samples before the aligned
    // fiducials, so 170 of a median beat whose fiducial is at 200.
    let ends = [100, 600, 1100];
    assert_eq!(
        median_stimulus_end(&ends, &[130.0, 630.0, 1131.0], 200),
        Some(170)
    );
    // Two of three beats paced (more than half): their median offset 30.5 rounds to 31 back.
    assert_eq!(
        median_stimulus_end(&[100, 600], &[130.0, 631.0, 1400.0], 200),
        Some(170)
    );
    // A stimulus further back than the median beat's start belongs to no beat;
    // one paced beat of three (not more than half): no stimulus.
    assert_eq!(
        median_stimulus_end(&[100], &[130.0, 630.0, 1130.0], 200),
        None
    );
    assert_eq!(median_stimulus_end(&[100], &[400.0], 200), None);
    assert_eq!(median_stimulus_end(&[], &[130.0], 200), None);
}

#[test]
fn median_beat_qrs_onsets_are_held_after_the_pacing_stimulus() {
    // Invented paced record: every beat's stimulus ends 7 samples (14 ms) before
    // its QRS peak, while the stand-in delineator puts the onset where the
    // Gaussian QRS crosses 5 % of its peak, K·σ before it (19.6 / 22.0 ms, about
    // 10 / 11 samples, for the two leads' σ of 8 / 9 ms).
    let sh = shapes();
    let r = record(10.0, 0.8, 0.003, &sh, 11);
    let ends: Vec<usize> = r
        .times
        .iter()
        .map(|&c| (c * FS).round() as usize - 7)
        .collect();
    let with_peak = |x: &[f64], fs: f64, qrs: &[usize], i: usize| {
        let mut b = threshold_beat(x, fs, qrs, i);
        b.qrs_peak = b.qrs_on.map(|_| Mark {
            sample: qrs[i],
            confidence: 1.0,
        });
        b
    };
    let leads: Vec<&[f64]> = r.leads.iter().map(|l| l.as_slice()).collect();
    let cfg = MeasureConfig::default();
    let dcfg = tendline_delineate::DelineateConfig::default();
    let measure = |stimulus_ends: &[usize]| {
        measure_record_inner(
            &leads,
            &names(leads.len()),
            FS,
            &r.det,
            None,
            &cfg,
            with_peak,
            Pacing {
                stimulus_ends,
                rule: &dcfg,
            },
        )
        .unwrap()
    };
    let before = ms_to_samples(cfg.beat_before_ms, FS);
    let (free, paced) = (measure(&[]), measure(&ends));
    let w = (&free.windows[0], &paced.windows[0]);
    for (l, s) in sh.iter().enumerate() {
        let on = |w: &WindowMeasure| w.leads[l].marks.qrs_on.unwrap().sample;
        let free_on = before - (K * s.qrs_sigma * FS).round() as usize;
        assert!(on(w.0).abs_diff(free_on) <= 1, "{} {free_on}", on(w.0));
        assert!(on(w.1).abs_diff(before - 7) <= 1, "{}", on(w.1));
        // The end of the complex and the T end do not move.
        assert_eq!(w.0.leads[l].marks.t_end, w.1.leads[l].marks.t_end);
    }
    // The QRS duration (earliest onset across leads) and the QT shorten by the
    // earliest onset's move: from about 11 to 7 samples before the peak, 8 ms
    // (±1 sample each side).
    let d = w.0.qrs_ms.unwrap() - w.1.qrs_ms.unwrap();
    assert!((d - 8.0).abs() <= 4.0 + 1e-9, "{d}");
    assert!(w.0.qt_ms.unwrap() > w.1.qt_ms.unwrap());
}
