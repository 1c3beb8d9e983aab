//! Beat detection against the reference beat annotations of the QT Database
//! (Laguna et al., Computers in Cardiology 1997;24:673-676; PhysioNet), the
//! `.atr` files of its 81 records that have one (85,462 beats).
//!
//! Scoring (ANSI/AAMI EC57 practice, common practice): a detection matches a
//! reference beat within 150 ms, one to one ([`match_beats`]); sensitivity
//! Se = TP/(TP+FN), positive predictivity +P = TP/(TP+FP), pooled over all
//! beats of all records ("gross" statistics). Nothing is excluded: every
//! reference beat of every whole record counts (the `.atr` beat codes of the
//! WFDB `isqrs` set), every detection counts, including those in the first
//! and last seconds and in stretches the detector marks unreadable.
//!
//! Input is what the pipeline feeds the detector: the physical signal
//! through the run's conditioning filter (`tendline_dsp::filter`, defaults).
//!
//! Run with `--release`; `--nocapture` prints the per-record table.

use std::path::{Path, PathBuf};

use rayon::prelude::*;
use tendline_detect::{detect, match_beats, BeatLabel, DetectConfig, MatchStats};
use tendline_dsp::filter::{ConditioningFilter, FilterConfig};
use tendline_formats::annotation::{is_beat_code, read_annotations, symbol_of};

/// Floors set just under the values measured when this test was written
/// (Se 99.992 %: 7 of 85,462 beats missed; +P 99.984 %: 14 false); the issue's
/// target is 99.7 % for both.
const SE_FLOOR: f64 = 0.9998;
const PPV_FLOOR: f64 = 0.9997;

fn qtdb_dir() -> Option<PathBuf> {
    let d = Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../../shared/data/qtdb"
    ));
    if d.is_dir() {
        Some(d.to_path_buf())
    } else {
        println!(
            "SKIP: QT Database not found at {} (see ../shared/data/README.md)",
            d.display()
        );
        None
    }
}

/// Names of the records that have a `.atr` file, sorted.
fn atr_records(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .expect("read qtdb dir")
        .filter_map(|e| {
            let name = e.ok()?.file_name().into_string().ok()?;
            name.strip_suffix(".atr").map(|s| s.to_string())
        })
        .collect();
    v.sort();
    v
}

struct Loaded {
    fs: f64,
    leads: Vec<Vec<f64>>,
    /// Reference beats: (sample, WFDB symbol).
    beats: Vec<(i64, &'static str)>,
}

fn load(dir: &Path, rec: &str) -> Loaded {
    let r =
        tendline_formats::wfdb::read_record(&dir.join(format!("{rec}.hea"))).expect("read record");
    let ann = read_annotations(&dir.join(format!("{rec}.atr"))).expect("read .atr");
    let beats = ann
        .iter()
        .filter(|a| is_beat_code(a.code))
        .map(|a| (a.sample, symbol_of(a.code)))
        .collect();
    Loaded {
        fs: r.fs,
        leads: r.leads.into_iter().map(|l| l.samples).collect(),
        beats,
    }
}

fn condition(leads: &[Vec<f64>], fs: f64) -> Vec<Vec<f64>> {
    let f = ConditioningFilter::design(fs, &FilterConfig::default()).expect("filter design");
    let refs: Vec<&[f64]> = leads.iter().map(|l| l.as_slice()).collect();
    f.apply_record(&refs).0
}

/// Index of the detection (sorted samples) nearest to reference sample `s`,
/// if within `w` samples.
fn nearest(got: &[i64], s: i64, w: i64) -> Option<usize> {
    let k = got.partition_point(|&g| g < s);
    [k.wrapping_sub(1), k]
        .into_iter()
        .filter(|&j| j < got.len())
        .min_by_key(|&j| (got[j] - s).abs())
        .filter(|&j| (got[j] - s).abs() <= w)
}

/// 150 ms in samples, rounded down so that the window never exceeds 150 ms.
fn window(fs: f64) -> i64 {
    (0.150 * fs).floor() as i64
}

struct Row {
    rec: String,
    beats: MatchStats,
    inner: MatchStats,
    v: MatchStats,
    /// Normal and bundle-branch-block reference beats (EC57 class N) with a
    /// detection within the window, and how many of those are labelled `N`.
    normal: (usize, usize),
    unreadable_s: f64,
    quality: Vec<f64>,
}

#[test]
fn qtdb_sensitivity_and_positive_predictivity_meet_floor() {
    let Some(dir) = qtdb_dir() else { return };
    let recs = atr_records(&dir);
    assert_eq!(recs.len(), 81, "QTDB should have 81 records with .atr");
    let cfg = DetectConfig::default();
    let mut rows: Vec<Row> = recs
        .par_iter()
        .map(|rec| {
            let l = load(&dir, rec);
            let x = condition(&l.leads, l.fs);
            let refs: Vec<&[f64]> = x.iter().map(|v| v.as_slice()).collect();
            let d = detect(&refs, l.fs, &cfg).expect("detect");
            let w = window(l.fs);
            let reference: Vec<i64> = l.beats.iter().map(|b| b.0).collect();
            let got: Vec<i64> = d.beats.iter().map(|b| b.sample as i64).collect();
            let ref_v: Vec<i64> = l.beats.iter().filter(|b| b.1 == "V").map(|b| b.0).collect();
            let got_v: Vec<i64> = d
                .beats
                .iter()
                .filter(|b| b.label == BeatLabel::Ventricular)
                .map(|b| b.sample as i64)
                .collect();
            Row {
                rec: rec.clone(),
                beats: match_beats(&reference, &got, w),
                inner: {
                    // Informative only: the same without the first and last 150 ms.
                    let n = l.leads[0].len() as i64;
                    let keep = |s: &i64| *s >= w && *s < n - w;
                    let r: Vec<i64> = reference.iter().cloned().filter(keep).collect();
                    let g: Vec<i64> = got.iter().cloned().filter(keep).collect();
                    match_beats(&r, &g, w)
                },
                v: match_beats(&ref_v, &got_v, w),
                normal: {
                    let mut n = (0, 0);
                    for &(s, _) in l
                        .beats
                        .iter()
                        .filter(|b| matches!(b.1, "N" | "L" | "R" | "e" | "j"))
                    {
                        if let Some(j) = nearest(&got, s, w) {
                            n.0 += 1;
                            n.1 += usize::from(d.beats[j].label == BeatLabel::Normal);
                        }
                    }
                    n
                },
                unreadable_s: d
                    .unreadable
                    .iter()
                    .map(|s| (s.end - s.start) as f64)
                    .fold(0.0, |a, b| a + b)
                    / l.fs,
                quality: d.lead_quality.clone(),
            }
        })
        .collect();
    let mut total = MatchStats::default();
    let mut v_total = MatchStats::default();
    let mut inner = MatchStats::default();
    let mut normal = (0usize, 0usize);
    for r in &rows {
        total.add(r.beats);
        inner.add(r.inner);
        v_total.add(r.v);
        normal.0 += r.normal.0;
        normal.1 += r.normal.1;
    }
    rows.sort_by_key(|r| std::cmp::Reverse(r.beats.fn_ + r.beats.fp));
    println!("record     ref   TP   FN   FP   Se%     +P%    unreadable_s  lead_quality");
    for r in rows.iter().take(15) {
        let m = r.beats;
        println!(
            "{:9} {:5} {:5} {:4} {:4} {:7.3} {:7.3} {:8.1}      {:?}",
            r.rec,
            m.tp + m.fn_,
            m.tp,
            m.fn_,
            m.fp,
            100.0 * m.sensitivity(),
            100.0 * m.positive_predictivity(),
            r.unreadable_s,
            r.quality
                .iter()
                .map(|q| (q * 100.0).round() / 100.0)
                .collect::<Vec<_>>()
        );
    }
    println!(
        "TOTAL reference beats {} TP {} FN {} FP {}  Se {:.4} %  +P {:.4} %",
        total.tp + total.fn_,
        total.tp,
        total.fn_,
        total.fp,
        100.0 * total.sensitivity(),
        100.0 * total.positive_predictivity()
    );
    println!(
        "(informative) without the first and last 150 ms of each record: FN {} FP {}  Se {:.4} %  +P {:.4} %",
        inner.fn_,
        inner.fp,
        100.0 * inner.sensitivity(),
        100.0 * inner.positive_predictivity()
    );
    println!(
        "V labels vs reference V ({} beats): Se {:.2} %  +P {:.2} %",
        v_total.tp + v_total.fn_,
        100.0 * v_total.sensitivity(),
        100.0 * v_total.positive_predictivity()
    );
    let n_share = normal.1 as f64 / normal.0 as f64;
    println!(
        "normal beats (EC57 class N) labelled N: {} of {} ({:.2} %)",
        normal.1,
        normal.0,
        100.0 * n_share
    );
    // The README of the data gives 85,462 reference beats in the 81 .atr files.
    assert_eq!(total.tp + total.fn_, 85_462);
    assert!(
        total.sensitivity() >= SE_FLOOR,
        "Se {:.4} % below floor",
        100.0 * total.sensitivity()
    );
    assert!(
        total.positive_predictivity() >= PPV_FLOOR,
        "+P {:.4} % below floor",
        100.0 * total.positive_predictivity()
    );
    // Ventricular labels: floors just under the measured values, a guard
    // against silent regressions rather than a target of the issue.
    assert!(
        v_total.sensitivity() >= 0.85,
        "V Se {:.3}",
        v_total.sensitivity()
    );
    assert!(
        v_total.positive_predictivity() >= 0.78,
        "V +P {:.3}",
        v_total.positive_predictivity()
    );
    // Normal beats labelled N (a floor just under the measured 98.96 %; before
    // the fiducial realignment and the most-typical-beat template 95.70 %, the
    // lost ones mostly in sel840, sele0106 and sel231).
    assert!(n_share >= 0.985, "normal beats labelled N {n_share:.4}");
}

/// The same records brought to 500 and 1000 Hz (polyphase resampling,
/// `tendline_dsp::resample::resample_poly`, scipy's algorithm) must give the
/// same beats: every beat at the original rate has one at the higher rate
/// within one original sample, and no other beat appears.
///
/// Measured when written: every beat is found at every rate (none missing or
/// extra within 150 ms away from the ends), and 99.5 % of fiducial points
/// agree within one original sample. The exceptions are paced beats of
/// sel102, where the pacing spike (lead 0) and the wide paced QRS (lead 1)
/// give two lobes of nearly equal combined energy about 100 ms apart, and the
/// fiducial point may take either; the floor below is set just under that.
#[test]
fn qtdb_beats_do_not_depend_on_sampling_rate() {
    let Some(dir) = qtdb_dir() else { return };
    // A clean sinus record, a paced one, one with many ectopic beats, one with a noisy lead.
    let recs = ["sel100", "sel102", "sel223", "sele0116"];
    let cfg = DetectConfig::default();
    let results: Vec<(String, u64, MatchStats, usize, f64)> = recs
        .par_iter()
        .flat_map(|rec| {
            let l = load(&dir, rec);
            let x = condition(&l.leads, l.fs);
            let refs: Vec<&[f64]> = x.iter().map(|v| v.as_slice()).collect();
            let base: Vec<i64> = detect(&refs, l.fs, &cfg)
                .expect("detect")
                .beats
                .iter()
                .map(|b| b.sample as i64)
                .collect();
            [2u64, 4]
                .into_iter()
                .map(|k| {
                    let fs_k = l.fs * k as f64;
                    // The mean is removed first: the resampler pads with zeros, and
                    // a lead sitting at several mV would otherwise end in a step.
                    let up: Vec<Vec<f64>> = l
                        .leads
                        .iter()
                        .map(|v| {
                            let m = v.iter().sum::<f64>() / v.len() as f64;
                            let c: Vec<f64> = v.iter().map(|x| x - m).collect();
                            tendline_dsp::resample::resample_poly(&c, k, 1).expect("resample")
                        })
                        .collect();
                    let xk = condition(&up, fs_k);
                    let rk: Vec<&[f64]> = xk.iter().map(|v| v.as_slice()).collect();
                    let got: Vec<i64> = detect(&rk, fs_k, &cfg)
                        .expect("detect")
                        .beats
                        .iter()
                        .map(|b| b.sample as i64)
                        .collect();
                    // Compare on the high-rate grid (one original sample is k
                    // samples), leaving out the first and last second, where the
                    // resampler's zero padding changes the signal.
                    let n = l.leads[0].len() as i64;
                    let (lo, hi) = (l.fs as i64, n - l.fs as i64);
                    let scaled: Vec<i64> = base
                        .iter()
                        .filter(|&&s| s >= lo && s < hi)
                        .map(|s| s * k as i64)
                        .collect();
                    let got: Vec<i64> = got
                        .into_iter()
                        .filter(|&s| s >= lo * k as i64 && s < hi * k as i64)
                        .collect();
                    let m = match_beats(&scaled, &got, k as i64);
                    let loose = match_beats(&scaled, &got, window(fs_k));
                    let worst = {
                        // Largest offset among pairs within 150 ms, in original samples.
                        let mut j = 0usize;
                        let mut worst = 0i64;
                        for &s in &scaled {
                            while j < got.len() && got[j] < s - window(fs_k) {
                                j += 1;
                            }
                            if j < got.len() && got[j] <= s + window(fs_k) {
                                worst = worst.max((got[j] - s).abs());
                                j += 1;
                            }
                        }
                        worst as f64 / k as f64
                    };
                    (rec.to_string(), k, m, loose.fn_ + loose.fp, worst)
                })
                .collect::<Vec<_>>()
        })
        .collect();
    let mut total = MatchStats::default();
    for (rec, k, m, loose_err, worst) in &results {
        println!(
            "{rec} x{k}: beats {} matched within 1 original sample {}, unmatched {} / extra {}; \
             differing beats within 150 ms {}, largest offset {:.2} original samples",
            m.tp + m.fn_,
            m.tp,
            m.fn_,
            m.fp,
            loose_err,
            worst
        );
        total.add(*m);
    }
    let frac = total.tp as f64 / (total.tp + total.fn_.max(total.fp)) as f64;
    println!("overall agreement {:.4} %", 100.0 * frac);
    assert!(
        frac >= 0.994,
        "only {:.4} % of beats agree across rates",
        100.0 * frac
    );
}

/// A large artifact at the very start of a record (an amplifier settling, an
/// electrode touched: here 5 mV for 40 ms on every lead, invented) must not stop
/// the detection of the beats that follow. Before `relearn_ms`, the learning
/// phase took its levels from the artifact and these records lost every beat
/// (seen first on them resampled to 128 Hz, whose first samples carry the
/// resampler's edge ringing). Reference: the records' `.atr` beats. Measured
/// when written: Se 99.57, 99.64 and 99.88 % with re-learning; 0, 0 and 99.88 %
/// without (the beats of the first 3 s before the re-learned stretch stay lost).
#[test]
fn an_artifact_at_the_start_does_not_stop_detection() {
    let Some(dir) = qtdb_dir() else { return };
    let on = DetectConfig::default();
    let off = DetectConfig {
        relearn_ms: 0.0,
        ..DetectConfig::default()
    };
    for rec in ["sele0114", "sele0116", "sele0136"] {
        let mut l = load(&dir, rec);
        let n = (0.040 * l.fs) as usize;
        for lead in &mut l.leads {
            let x0 = lead[0];
            lead[..n].iter_mut().for_each(|v| *v = x0 + 5.0);
        }
        let x = condition(&l.leads, l.fs);
        let refs: Vec<&[f64]> = x.iter().map(|v| v.as_slice()).collect();
        let reference: Vec<i64> = l.beats.iter().map(|b| b.0).collect();
        let se = |cfg: &DetectConfig| {
            let d = detect(&refs, l.fs, cfg).expect("detect");
            let got: Vec<i64> = d.beats.iter().map(|b| b.sample as i64).collect();
            match_beats(&reference, &got, window(l.fs)).sensitivity()
        };
        let (with, without) = (se(&on), se(&off));
        println!(
            "{rec}: Se {:.2} % with re-learning, {:.2} % without",
            100.0 * with,
            100.0 * without
        );
        assert!(with > 0.99, "{rec}: Se {with}");
    }
}

/// In QTDB sel840 and sele0106 the R and S waves carry nearly the same
/// band-passed energy and the energy peak took the S wave in about a third of
/// the beats (fiducial 32-40 ms after the usual one, by stretches), so those
/// beats were labelled `Q` and left out of the median beats. Judged against
/// the `.atr` beat marks of the database (their position relative to the
/// detection should be the same from beat to beat): the share of normal beats
/// whose detection sits more than 20 ms from the record's median offset, and
/// the share of `.atr` normal beats labelled `N`.
///
/// Measured when written (realignment on / off): sel840 0.0 / 32.3 % far and
/// 99.9 / 67.4 % labelled `N`, sele0106 0.0 / 32.4 % and 99.9 / 67.6 %.
#[test]
fn fiducial_points_stay_on_one_lobe() {
    let Some(dir) = qtdb_dir() else { return };
    let on = DetectConfig::default();
    let off = DetectConfig {
        fiducial_realign_ms: 0.0,
        ..DetectConfig::default()
    };
    for rec in ["sel840", "sele0106"] {
        let l = load(&dir, rec);
        let x = condition(&l.leads, l.fs);
        let refs: Vec<&[f64]> = x.iter().map(|v| v.as_slice()).collect();
        let judge = |cfg: &DetectConfig| {
            let d = detect(&refs, l.fs, cfg).expect("detect");
            let got: Vec<i64> = d.beats.iter().map(|b| b.sample as i64).collect();
            let mut offsets = Vec::new();
            let (mut normal, mut labelled_n) = (0usize, 0usize);
            for &(s, _) in l.beats.iter().filter(|b| b.1 == "N") {
                if let Some(j) = nearest(&got, s, window(l.fs)) {
                    offsets.push((got[j] - s) as f64 * 1000.0 / l.fs);
                    normal += 1;
                    labelled_n += usize::from(d.beats[j].label == BeatLabel::Normal);
                }
            }
            let mut sorted = offsets.clone();
            sorted.sort_by(f64::total_cmp);
            let med = sorted[sorted.len() / 2];
            let far = offsets.iter().filter(|o| (*o - med).abs() > 20.0).count();
            (
                far as f64 / offsets.len() as f64,
                labelled_n as f64 / normal as f64,
            )
        };
        let ((far_on, n_on), (far_off, n_off)) = (judge(&on), judge(&off));
        println!(
            "{rec}: far from the median offset {:.1} % (off: {:.1} %), normal beats labelled N {:.1} % (off: {:.1} %)",
            100.0 * far_on,
            100.0 * far_off,
            100.0 * n_on,
            100.0 * n_off
        );
        assert!(far_on < 0.02, "{rec}: {far_on}");
        assert!(n_on > 0.95, "{rec}: {n_on}");
        // Without the realignment the fault this guards against is there.
        assert!(far_off > 0.2, "{rec}: {far_off}");
    }
}
