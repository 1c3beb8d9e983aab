//! Every scored mark of a validation as one CSV row (`marks.csv` beside the
//! report), so that users can compute their own statistics (mixed models,
//! other tolerances, subsets of records) from exactly the pairs the report
//! counted.
//!
//! Columns:
//! - `section`: `global` (the `.mark` files) or `lead` (the `.leadmark` files);
//! - `record`, `channel` (signal index; 0 for global marks), `lead` (the
//!   signal's name in the header; empty for global marks);
//! - `fiducial`: `p_on` … `t_end`;
//! - `outcome`: `tp`, `fn`, `outside` or `fp` ([`crate::score::Outcome`]);
//! - `ref_beat` (index of the reference beat on its channel) and
//!   `ref_qrs_peak_sample`;
//! - `ref_sample`, `tool_sample`: samples at the record's rate, as in the
//!   annotation files (empty where that side has no mark);
//! - `error_ms`: tool − reference where both mark it;
//! - `tool_confidence`: the confidence the run gave the tool's mark, if known.
//!
//! Rows are ordered by section, record (the report's order), channel,
//! fiducial, then reference beat.

use crate::score::{Outcome, RecordScore};
use crate::waves::Fiducial;
use std::collections::BTreeMap;
use std::fmt::Write;

/// One scored mark.
#[derive(Debug, Clone, PartialEq)]
pub struct MarkRow {
    pub section: &'static str,
    pub record: String,
    pub channel: u8,
    pub lead: String,
    pub fiducial: Fiducial,
    pub outcome: Outcome,
    pub ref_beat: usize,
    pub ref_qrs_peak: i64,
    pub ref_sample: Option<i64>,
    pub tool_sample: Option<i64>,
    pub error_ms: Option<f64>,
    pub tool_confidence: Option<f32>,
}

/// The rows of one section's scores. `lead_names` maps a record to its signal
/// names (per-lead sections); `conf(record, channel, fiducial, sample)` gives
/// the confidence of a tool mark.
pub fn rows(
    section: &'static str,
    scores: &[RecordScore],
    lead_names: Option<&BTreeMap<String, Vec<String>>>,
    conf: &dyn Fn(&str, u8, Fiducial, i64) -> Option<f32>,
) -> Vec<MarkRow> {
    let mut out = Vec::new();
    for s in scores {
        let mut scored: Vec<_> = s.scored.iter().collect();
        scored.sort_by_key(|x| (x.chan, x.fiducial, x.ref_index));
        for x in scored {
            let lead = lead_names
                .and_then(|n| n.get(&s.record))
                .and_then(|v| v.get(x.chan as usize))
                .cloned()
                .unwrap_or_default();
            let ref_qrs_peak = s
                .beats
                .get(&x.chan)
                .and_then(|(r, _)| r.get(x.ref_index))
                .map_or(0, |b| b.qrs_peak);
            out.push(MarkRow {
                section,
                record: s.record.clone(),
                channel: x.chan,
                lead,
                fiducial: x.fiducial,
                outcome: x.outcome,
                ref_beat: x.ref_index,
                ref_qrs_peak,
                ref_sample: x.ref_sample,
                tool_sample: x.test_sample,
                error_ms: x
                    .ref_sample
                    .zip(x.test_sample)
                    .map(|(r, t)| (t - r) as f64 * 1000.0 / s.fs),
                tool_confidence: x
                    .test_sample
                    .and_then(|t| conf(&s.record, x.chan, x.fiducial, t)),
            });
        }
    }
    out
}

/// A CSV field, quoted when it holds a comma, a quote or a line break (RFC 4180).
fn field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// Header line of `marks.csv`.
pub const HEADER: &str = "section,record,channel,lead,fiducial,outcome,ref_beat,ref_qrs_peak_sample,ref_sample,tool_sample,error_ms,tool_confidence";

/// The CSV text of `rows` (header included; errors to 1 µs, confidences to 4 decimals).
pub fn to_csv(rows: &[MarkRow]) -> String {
    let opt = |v: Option<i64>| v.map(|x| x.to_string()).unwrap_or_default();
    let mut out = String::with_capacity(64 * (rows.len() + 1));
    out.push_str(HEADER);
    out.push('\n');
    for r in rows {
        let _ = writeln!(
            out,
            "{},{},{},{},{},{},{},{},{},{},{},{}",
            r.section,
            field(&r.record),
            r.channel,
            field(&r.lead),
            r.fiducial.key(),
            r.outcome.key(),
            r.ref_beat,
            r.ref_qrs_peak,
            opt(r.ref_sample),
            opt(r.tool_sample),
            r.error_ms.map(|e| format!("{e:.3}")).unwrap_or_default(),
            r.tool_confidence
                .map(|c| format!("{c:.4}"))
                .unwrap_or_default(),
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::score::tests::beat;
    use crate::score::ScoreConfig;
    use crate::waves::Wave;

    #[test]
    fn rows_carry_each_decision_with_samples_and_error() {
        let cfg = ScoreConfig {
            fs: 250.0,
            beat_window: 37,
            fiducial_window: 37,
            exhaustive: [Wave::Qrs].into_iter().collect(),
            fiducials: vec![Fiducial::QrsOn],
        };
        // Beat 1: onset 3 samples late (12 ms); beat 2: no test beat.
        let mut t = beat(100);
        t.qrs_on = Some(93);
        let mut s = RecordScore::new("rec,1", 250.0);
        s.add_channel(2, vec![beat(100), beat(400)], vec![t], &cfg);
        let names: BTreeMap<String, Vec<String>> = [(
            "rec,1".to_string(),
            vec!["I".into(), "II".into(), "V\"1".into()],
        )]
        .into();
        let conf = |_: &str, ch: u8, f: Fiducial, smp: i64| {
            (ch == 2 && f == Fiducial::QrsOn && smp == 93).then_some(0.75f32)
        };
        let rows = rows("lead", &[s], Some(&names), &conf);
        assert_eq!(rows.len(), 2);
        assert_eq!(
            (rows[0].outcome, rows[0].ref_sample, rows[0].tool_sample),
            (Outcome::Tp, Some(90), Some(93))
        );
        assert_eq!(rows[0].error_ms, Some(12.0));
        assert_eq!(rows[0].tool_confidence, Some(0.75));
        assert_eq!((rows[1].outcome, rows[1].ref_qrs_peak), (Outcome::Fn, 400));
        let text = to_csv(&rows);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], HEADER);
        assert_eq!(
            lines[1],
            "lead,\"rec,1\",2,\"V\"\"1\",qrs_on,tp,0,100,90,93,12.000,0.7500"
        );
        assert_eq!(
            lines[2],
            "lead,\"rec,1\",2,\"V\"\"1\",qrs_on,fn,1,400,390,,,"
        );
    }
}
