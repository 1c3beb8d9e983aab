//! Scoring the fiducials of matched beats against a reference.
//!
//! Rules (documented in the protocol; the Python cross-check follows them):
//! - Reference and test beats are paired by QRS peak with [`crate::matching::match_events`]
//!   (150 ms window by default).
//! - For each reference beat and each fiducial the reference marks: the fiducial is a
//!   true positive when the paired test beat marks it within the fiducial window
//!   (inclusive, `floor(window_ms·fs/1000)` samples); its error (test − reference, ms)
//!   then enters the statistics. Otherwise it is a false negative (unpaired reference
//!   beats count all their fiducials as false negatives).
//! - A test mark without a reference counterpart is a false positive only on a paired
//!   beat, and only where the reference annotates that wave exhaustively (the
//!   reference file set marks that wave at all — LUDB and QTDB `.q1c` do for P, QRS and
//!   T; QTDB `.q2c` has no P) and the reference beat lacks the whole wave, and only when
//!   the test mark lies within the span the reference annotates on that channel (first
//!   to last reference mark): the cardiologists of LUDB stop marking at the QRS of the
//!   last beat they consider, so that beat's T wave (and the first beat's P wave) lie
//!   outside what they read, not absent. A test mark outside the fiducial window of a
//!   present reference mark is a false negative and, under the same condition, also a
//!   false positive.

use crate::matching::{match_events, Counts};
use crate::waves::{BeatMarks, Fiducial, Wave};
use std::collections::{BTreeMap, BTreeSet};

/// Scoring parameters for one record (samples, at the record's rate).
#[derive(Debug, Clone)]
pub struct ScoreConfig {
    /// Sampling rate (Hz) for the conversion of errors to ms.
    pub fs: f64,
    /// QRS-peak pairing distance, samples.
    pub beat_window: i64,
    /// Largest |error| of a fiducial counted as detected, samples.
    pub fiducial_window: i64,
    /// Waves the reference annotates exhaustively (false positives are counted for these).
    pub exhaustive: BTreeSet<Wave>,
    /// Fiducials to score.
    pub fiducials: Vec<Fiducial>,
}

/// One scored fiducial of one beat.
#[derive(Debug, Clone, PartialEq)]
pub struct ErrorEntry {
    /// Channel (lead index; 0 for global).
    pub chan: u8,
    /// Index of the reference beat in its channel's beat list.
    pub ref_index: usize,
    /// Index of the paired test beat.
    pub test_index: usize,
    /// Test − reference, ms.
    pub error_ms: f64,
}

/// How one mark was scored (see the module rules).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Outcome {
    /// Both mark it within the fiducial window: the error enters the statistics.
    Tp,
    /// The reference marks it; the paired test beat does not, or the beat is unpaired.
    Fn,
    /// Both mark it, farther apart than the fiducial window: a false negative
    /// and, where the reference annotates the wave exhaustively, a false positive.
    Outside,
    /// The test marks it on a paired beat whose reference lacks the whole wave,
    /// within the span the reference annotates.
    Fp,
}

impl Outcome {
    /// Name in exported tables.
    pub fn key(self) -> &'static str {
        match self {
            Outcome::Tp => "tp",
            Outcome::Fn => "fn",
            Outcome::Outside => "outside",
            Outcome::Fp => "fp",
        }
    }
}

/// One scored mark: the reference beat it belongs to and both samples where marked.
#[derive(Debug, Clone, PartialEq)]
pub struct Scored {
    pub fiducial: Fiducial,
    pub chan: u8,
    pub outcome: Outcome,
    /// Index of the reference beat in its channel's beat list.
    pub ref_index: usize,
    /// Index of the paired test beat, if paired.
    pub test_index: Option<usize>,
    pub ref_sample: Option<i64>,
    pub test_sample: Option<i64>,
}

/// Everything measured on one record (one reference kind).
#[derive(Debug, Clone, Default)]
pub struct RecordScore {
    pub record: String,
    pub fs: f64,
    /// Reference beats and paired reference beats, over all channels.
    pub ref_beats: usize,
    pub paired_beats: usize,
    pub counts: BTreeMap<Fiducial, Counts>,
    pub errors: BTreeMap<Fiducial, Vec<ErrorEntry>>,
    /// Every scored mark with its outcome, in channel, fiducial and beat order.
    pub scored: Vec<Scored>,
    /// (test QT, reference QT, reference QRS peak sample, chan), ms, for paired beats
    /// where both mark QRS onset and T end.
    pub qt_pairs: Vec<(f64, f64, i64, u8)>,
    /// Parsed beats by channel: (reference, test), kept for the beat strips.
    pub beats: BTreeMap<u8, (Vec<BeatMarks>, Vec<BeatMarks>)>,
}

impl RecordScore {
    /// An empty score for `record` at `fs`.
    pub fn new(record: &str, fs: f64) -> Self {
        RecordScore {
            record: record.to_string(),
            fs,
            ..Default::default()
        }
    }

    /// Errors (ms) of one fiducial.
    pub fn error_values(&self, f: Fiducial) -> Vec<f64> {
        self.errors
            .get(&f)
            .map(|v| v.iter().map(|e| e.error_ms).collect())
            .unwrap_or_default()
    }

    /// Score one channel's beats and add them to this record.
    pub fn add_channel(
        &mut self,
        chan: u8,
        reference: Vec<BeatMarks>,
        test: Vec<BeatMarks>,
        cfg: &ScoreConfig,
    ) {
        let rp: Vec<i64> = reference.iter().map(|b| b.qrs_peak).collect();
        let tp: Vec<i64> = test.iter().map(|b| b.qrs_peak).collect();
        let pairs = match_events(&rp, &tp, cfg.beat_window);
        let mut partner: Vec<Option<usize>> = vec![None; reference.len()];
        for &(i, j) in &pairs {
            partner[i] = Some(j);
        }
        self.ref_beats += reference.len();
        self.paired_beats += pairs.len();
        let ms = 1000.0 / cfg.fs;
        let marks = || reference.iter().flat_map(|b| b.all_marks());
        let span = marks().min().zip(marks().max());
        let in_span = |v: i64| span.is_some_and(|(lo, hi)| (lo..=hi).contains(&v));
        for &f in &cfg.fiducials {
            let c = self.counts.entry(f).or_default();
            let errs = self.errors.entry(f).or_default();
            let scored = &mut self.scored;
            for (i, r) in reference.iter().enumerate() {
                let t = partner[i].map(|j| &test[j]);
                let tv = t.and_then(|t| t.get(f));
                let may_fp = cfg.exhaustive.contains(&f.wave());
                let mut record = |outcome, ref_sample, test_sample| {
                    scored.push(Scored {
                        fiducial: f,
                        chan,
                        outcome,
                        ref_index: i,
                        test_index: partner[i],
                        ref_sample,
                        test_sample,
                    })
                };
                match (r.get(f), tv) {
                    (Some(rv), Some(tv)) if (tv - rv).abs() <= cfg.fiducial_window => {
                        c.tp += 1;
                        errs.push(ErrorEntry {
                            chan,
                            ref_index: i,
                            test_index: partner[i].unwrap_or(0),
                            error_ms: (tv - rv) as f64 * ms,
                        });
                        record(Outcome::Tp, Some(rv), Some(tv));
                    }
                    (Some(rv), Some(tv)) => {
                        c.fn_ += 1;
                        if may_fp {
                            c.fp += 1;
                        }
                        record(Outcome::Outside, Some(rv), Some(tv));
                    }
                    (Some(rv), None) => {
                        c.fn_ += 1;
                        record(Outcome::Fn, Some(rv), None);
                    }
                    (None, Some(tv)) => {
                        if may_fp && !r.has_wave(f.wave()) && in_span(tv) {
                            c.fp += 1;
                            record(Outcome::Fp, None, Some(tv));
                        }
                    }
                    (None, None) => {}
                }
            }
        }
        for (i, r) in reference.iter().enumerate() {
            if let Some(j) = partner[i] {
                if let (Some(rq), Some(tq)) = (r.qt_samples(), test[j].qt_samples()) {
                    self.qt_pairs
                        .push((tq as f64 * ms, rq as f64 * ms, r.qrs_peak, chan));
                }
            }
        }
        self.beats.insert(chan, (reference, test));
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// A test beat: QRS at `q` ± 10 samples, T peak and end 60 and 90 after it.
    pub(crate) fn beat(q: i64) -> BeatMarks {
        BeatMarks {
            qrs_peak: q,
            qrs_on: Some(q - 10),
            qrs_end: Some(q + 10),
            t_peak: Some(q + 60),
            t_end: Some(q + 90),
            ..Default::default()
        }
    }

    fn cfg(exhaustive: &[Wave]) -> ScoreConfig {
        ScoreConfig {
            fs: 250.0,
            beat_window: 37,
            fiducial_window: 37,
            exhaustive: exhaustive.iter().copied().collect(),
            fiducials: Fiducial::ALL.to_vec(),
        }
    }

    #[test]
    fn hand_computed_record() {
        // Reference: 3 beats without P. Test: beat 1 exact, beat 2 shifted T end +5
        // samples (20 ms) and with a P wave, beat 3 missing, an extra beat at 2000.
        let r = vec![beat(100), beat(400), beat(700)];
        let mut t2 = beat(402);
        t2.t_end = Some(402 + 90 + 3); // ref T end 490, test 495: +5 samples
        t2.p_on = Some(340);
        t2.p_peak = Some(350);
        t2.p_end = Some(360);
        let t = vec![beat(100), t2, beat(2000)];
        let mut s = RecordScore::new("x", 250.0);
        s.add_channel(
            0,
            r.clone(),
            t.clone(),
            &cfg(&[Wave::P, Wave::Qrs, Wave::T]),
        );
        assert_eq!((s.ref_beats, s.paired_beats), (3, 2));
        let te = &s.counts[&Fiducial::TEnd];
        assert_eq!((te.tp, te.fn_, te.fp), (2, 1, 0));
        assert_eq!(s.error_values(Fiducial::TEnd), vec![0.0, 20.0]);
        assert_eq!(s.error_values(Fiducial::QrsOn), vec![0.0, 8.0]);
        // P: reference has none, test marks one on a paired beat → FP (P exhaustive).
        let pp = &s.counts[&Fiducial::PPeak];
        assert_eq!((pp.tp, pp.fn_, pp.fp), (0, 0, 1));
        assert_eq!(s.qt_pairs.len(), 2);
        // QT: T end +5 samples, QRS on +2 samples → +3 samples = 12 ms.
        assert_eq!(s.qt_pairs[1].0 - s.qt_pairs[1].1, 12.0);

        // The scored list holds the same decisions, one row per mark.
        type Row = (Outcome, Option<usize>, Option<i64>, Option<i64>);
        let rows = |f: Fiducial| -> Vec<Row> {
            s.scored
                .iter()
                .filter(|x| x.fiducial == f)
                .map(|x| (x.outcome, x.test_index, x.ref_sample, x.test_sample))
                .collect()
        };
        assert_eq!(
            rows(Fiducial::TEnd),
            vec![
                (Outcome::Tp, Some(0), Some(190), Some(190)),
                (Outcome::Tp, Some(1), Some(490), Some(495)),
                (Outcome::Fn, None, Some(790), None),
            ]
        );
        assert_eq!(
            rows(Fiducial::PPeak),
            vec![(Outcome::Fp, Some(1), None, Some(350))]
        );
        for f in Fiducial::ALL {
            let c = &s.counts[&f];
            let n = |o: Outcome| {
                s.scored
                    .iter()
                    .filter(|x| x.fiducial == f && x.outcome == o)
                    .count() as u64
            };
            assert_eq!(c.tp, n(Outcome::Tp));
            assert_eq!(c.fn_, n(Outcome::Fn) + n(Outcome::Outside));
            assert_eq!(c.fp, n(Outcome::Fp) + n(Outcome::Outside));
        }

        // Without P being exhaustive, the P mark is not a false positive.
        let mut s2 = RecordScore::new("x", 250.0);
        s2.add_channel(0, r, t, &cfg(&[Wave::Qrs, Wave::T]));
        assert_eq!(s2.counts[&Fiducial::PPeak].fp, 0);
    }

    #[test]
    fn wave_outside_reference_span_is_not_false_positive() {
        // Reference: three beats, the last one marked only up to its QRS end (the
        // LUDB convention at the end of the annotated stretch). Test: T on every beat.
        let mut last = beat(700);
        last.t_peak = None;
        last.t_end = None;
        let mut inner = beat(400);
        inner.t_peak = None;
        inner.t_end = None;
        let r = vec![beat(100), inner, last];
        let t = vec![beat(100), beat(400), beat(700)];
        let mut s = RecordScore::new("x", 250.0);
        s.add_channel(0, r, t, &cfg(&[Wave::Qrs, Wave::T]));
        // Beat 2's T (peak 460, end 490) lies inside the span (90..=710): false
        // positive; beat 3's T (760, 790) lies after it: not counted.
        let tp = &s.counts[&Fiducial::TPeak];
        assert_eq!((tp.tp, tp.fn_, tp.fp), (1, 0, 1));
        let te = &s.counts[&Fiducial::TEnd];
        assert_eq!((te.tp, te.fn_, te.fp), (1, 0, 1));
    }

    #[test]
    fn mark_outside_window_is_miss_and_false_positive() {
        let r = vec![beat(100)];
        let mut tb = beat(100);
        tb.t_end = Some(190 + 38); // 38 samples > 37
        let mut s = RecordScore::new("x", 250.0);
        s.add_channel(0, r.clone(), vec![tb.clone()], &cfg(&[Wave::Qrs, Wave::T]));
        let te = &s.counts[&Fiducial::TEnd];
        assert_eq!((te.tp, te.fn_, te.fp), (0, 1, 1));
        let row = s
            .scored
            .iter()
            .find(|x| x.fiducial == Fiducial::TEnd)
            .unwrap();
        assert_eq!(
            (row.outcome, row.ref_sample, row.test_sample),
            (Outcome::Outside, Some(190), Some(228))
        );
        assert!(s.qt_pairs.len() == 1, "QT pairs are not windowed");
        tb.t_end = Some(190 + 37);
        let mut s = RecordScore::new("x", 250.0);
        s.add_channel(0, r, vec![tb], &cfg(&[Wave::Qrs, Wave::T]));
        assert_eq!(s.counts[&Fiducial::TEnd].tp, 1);
        assert_eq!(s.error_values(Fiducial::TEnd), vec![148.0]);
    }
}
