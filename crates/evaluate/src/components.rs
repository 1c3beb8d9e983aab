//! Where a fiducial's error comes from: an offset shared by the whole record,
//! an offset of one lead of one record, or scatter from beat to beat; and how
//! much the reference's own marks move from beat to beat.
//!
//! Why: the pooled SD alone does not say what could lower it. If most of the
//! error is a fixed offset per (record, channel), a tool that follows each
//! beat more closely gains nothing; if the reference's own boundary moves from
//! beat to beat, relative to its own QRS peak, by about as much as the tool's
//! error does within a lead, no tool can follow it much more closely either.
//!
//! Conventions (every figure in ms, over the scored marks only: paired beats,
//! both marks present, |error| within the fiducial window):
//! - groups are (record, channel); the global marks have channel 0;
//! - variances are population variances (denominator n), so that
//!   `total² = between_channels² + within_channel²` holds exactly and
//!   `between_records ≤ between_channels`;
//! - `between_records`: SD of each mark's record mean error;
//!   `between_channels`: SD of each mark's (record, channel) mean error;
//!   `within_channel`: SD of each error minus its (record, channel) mean;
//! - `reference_spread` / `test_spread`: the same within-(record, channel) SD
//!   of the mark's offset from the QRS peak of its own beat, for the reference
//!   and for the tool. The reference spread mixes the annotators' reading
//!   jitter with true beat-to-beat change (a PR interval that varies).

use crate::score::RecordScore;
use crate::stats::split_by as split;
use crate::waves::Fiducial;
use serde::{Deserialize, Serialize};

/// The error components of one fiducial.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ComponentRow {
    pub fiducial: Fiducial,
    /// Scored marks.
    pub n: usize,
    /// Groups (record, channel) holding at least one scored mark.
    pub groups: usize,
    /// Population SD of the errors, ms.
    pub total_ms: f64,
    pub between_records_ms: f64,
    pub between_channels_ms: f64,
    pub within_channel_ms: f64,
    pub reference_spread_ms: f64,
    pub test_spread_ms: f64,
}

/// One scored mark: (record index, channel, error, reference offset from its
/// QRS peak, test offset from its QRS peak), ms.
type Point = (usize, u8, f64, f64, f64);

/// The rows of `fiducials` over the scored marks of `scores` (a fiducial
/// without any scored mark has none).
pub fn rows(scores: &[RecordScore], fiducials: &[Fiducial]) -> Vec<ComponentRow> {
    let mut out = Vec::new();
    for &f in fiducials {
        let mut pts: Vec<Point> = Vec::new();
        for (ri, s) in scores.iter().enumerate() {
            let ms = 1000.0 / s.fs;
            for e in s.errors.get(&f).map(Vec::as_slice).unwrap_or_default() {
                let Some((reference, test)) = s.beats.get(&e.chan) else {
                    continue;
                };
                let offset = |b: Option<&crate::waves::BeatMarks>| {
                    b.and_then(|b| b.get(f).map(|x| (x - b.qrs_peak) as f64 * ms))
                };
                if let (Some(r), Some(t)) = (
                    offset(reference.get(e.ref_index)),
                    offset(test.get(e.test_index)),
                ) {
                    pts.push((ri, e.chan, e.error_ms, r, t));
                }
            }
        }
        if pts.is_empty() {
            continue;
        }
        let by_channel = |v: fn(&Point) -> f64| -> Vec<((usize, u8), f64)> {
            pts.iter().map(|p| ((p.0, p.1), v(p))).collect()
        };
        let by_record: Vec<(usize, f64)> = pts.iter().map(|p| (p.0, p.2)).collect();
        let (between_channels, within_channel) = split(&by_channel(|p| p.2));
        let (between_records, _) = split(&by_record);
        let (_, reference_spread) = split(&by_channel(|p| p.3));
        let (_, test_spread) = split(&by_channel(|p| p.4));
        let groups = pts
            .iter()
            .map(|p| (p.0, p.1))
            .collect::<std::collections::BTreeSet<_>>()
            .len();
        let n = pts.len() as f64;
        let mean = pts.iter().map(|p| p.2).sum::<f64>() / n;
        let total = (pts.iter().map(|p| (p.2 - mean).powi(2)).sum::<f64>() / n).sqrt();
        out.push(ComponentRow {
            fiducial: f,
            n: pts.len(),
            groups,
            total_ms: total,
            between_records_ms: between_records,
            between_channels_ms: between_channels,
            within_channel_ms: within_channel,
            reference_spread_ms: reference_spread,
            test_spread_ms: test_spread,
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::score::ErrorEntry;
    use crate::waves::BeatMarks;

    fn beat(chan: u8, peak: i64, qrs_on: i64) -> BeatMarks {
        BeatMarks {
            chan,
            qrs_on: Some(qrs_on),
            ..crate::score::tests::beat(peak)
        }
    }

    /// One record at 1000 Hz (1 sample = 1 ms) with (reference, test) QRS
    /// onsets, as offsets from QRS peaks at 1000, 2000, ... per channel.
    fn record(name: &str, chans: &[(u8, &[(i64, i64)])]) -> RecordScore {
        let mut s = RecordScore::new(name, 1000.0);
        let mut errs = Vec::new();
        for &(ch, onsets) in chans {
            let mut r = Vec::new();
            let mut t = Vec::new();
            for (i, &(ro, to)) in onsets.iter().enumerate() {
                let peak = 1000 * (i as i64 + 1);
                r.push(beat(ch, peak, peak + ro));
                t.push(beat(ch, peak, peak + to));
                errs.push(ErrorEntry {
                    chan: ch,
                    ref_index: i,
                    test_index: i,
                    error_ms: (to - ro) as f64,
                });
            }
            s.beats.insert(ch, (r, t));
        }
        s.errors.insert(Fiducial::QrsOn, errs);
        s
    }

    #[test]
    fn components_match_a_hand_computation() {
        // Record a, channel 0: reference onsets -40, -44 (offset from the
        // peak), test -30, -30: errors 10, 14. Channel 1: reference -50, -50,
        // test -52, -48: errors -2, 2. Record b, channel 0: reference -36,
        // -40, test -40, -40: errors -4, 0.
        let a = record(
            "a",
            &[
                (0, &[(-40, -30), (-44, -30)]),
                (1, &[(-50, -52), (-50, -48)]),
            ],
        );
        let b = record("b", &[(0, &[(-36, -40), (-40, -40)])]);
        let rows = rows(&[a, b], &[Fiducial::POn, Fiducial::QrsOn, Fiducial::TEnd]);
        assert_eq!(rows.len(), 1, "only QRS onset has scored marks");
        let r = &rows[0];
        assert_eq!((r.fiducial, r.n, r.groups), (Fiducial::QrsOn, 6, 3));
        // Errors 10, 14, -2, 2, -4, 0: mean 20/6; population variance
        // (100 + 196 + 4 + 4 + 16 + 0) / 6 - (20/6)^2.
        let m: f64 = 20.0 / 6.0;
        let close = |x: f64, y: f64| (x - y).abs() < 1e-12;
        assert!(close(r.total_ms, (320.0 / 6.0 - m * m).sqrt()));
        // Group means 12 (a/0), 0 (a/1), -2 (b/0), two marks each.
        let bc = ((12.0 - m).powi(2) + (0.0 - m).powi(2) + (-2.0 - m).powi(2)) / 3.0;
        assert!(close(r.between_channels_ms, bc.sqrt()));
        // Deviations from the group means: ±2, ±2, ±2.
        assert!(close(r.within_channel_ms, 2.0));
        assert!(close(
            r.total_ms.powi(2),
            r.between_channels_ms.powi(2) + r.within_channel_ms.powi(2)
        ));
        // Record means 6 (four marks of a), -2 (two of b).
        let br = (4.0 * (6.0 - m).powi(2) + 2.0 * (-2.0 - m).powi(2)) / 6.0;
        assert!(close(r.between_records_ms, br.sqrt()));
        // Reference offsets -40/-44, -50/-50, -36/-40: deviations 2, 2, 0, 0,
        // 2, 2 -> sqrt(16 / 6). Test offsets -30/-30, -52/-48, -40/-40:
        // deviations 0, 0, 2, 2, 0, 0 -> sqrt(8 / 6).
        assert!(close(r.reference_spread_ms, (16.0f64 / 6.0).sqrt()));
        assert!(close(r.test_spread_ms, (8.0f64 / 6.0).sqrt()));
    }

    #[test]
    fn no_scored_marks_no_rows() {
        assert!(rows(&[RecordScore::new("x", 250.0)], &Fiducial::ALL).is_empty());
    }
}
