//! Turning WFDB boundary annotations into per-beat fiducial points.
//!
//! Both the references (QTDB `.q1c`/`.q2c`, LUDB per-lead files) and tendline's own
//! `.mark`/`.leadmark` files use the open-database boundary convention: a wave is
//! an optional `(` onset, a peak mark (`p` P wave, a beat code such as `N` for the
//! QRS, `t` T wave, `u` U wave) and an optional `)` offset.
//!
//! Parsing rules (the Python cross-check implements the same rules, keep them in step):
//! 1. Annotations are grouped by `chan` (per-lead files) or taken together (global
//!    files), then stably sorted by sample (file order breaks ties).
//! 2. Every peak mark starts a wave. Its onset is the annotation *immediately before*
//!    it if that is `(`; its offset the annotation *immediately after* it if that is `)`.
//!    Any other `(`/`)` is ignored. Aux text is ignored.
//! 3. A beat is a QRS wave (a peak with a WFDB beat code, the `isqrs` set).
//! 4. A P wave belongs to the first QRS whose peak lies after the P peak, when it is
//!    the last P wave before that QRS and its peak is at most [`MAX_P_TO_QRS_MS`]
//!    before the QRS peak. A T wave belongs to the last QRS whose peak lies before the
//!    T peak, when it is the first T wave after that QRS and at most
//!    [`MAX_QRS_TO_T_MS`] after it. Other P and T waves, and all U waves, are
//!    dropped (counted in [`ParsedBeats`]).

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use tendline_formats::annotation::{is_beat_code, Annotation};

/// WFDB code of `(` (waveform onset).
pub const WFON: u8 = 39;
/// WFDB code of `)` (waveform offset).
pub const WFOFF: u8 = 40;
/// WFDB code of `p` (P-wave peak).
pub const PWAVE: u8 = 24;
/// WFDB code of `t` (T-wave peak).
pub const TWAVE: u8 = 27;
/// WFDB code of `u` (U-wave peak).
pub const UWAVE: u8 = 29;

/// Largest P-peak-to-QRS-peak distance for a P wave to belong to a beat. Only
/// guards against gaps between the selected beats of a reference; physiological
/// PR intervals are far shorter (a loose bound, chosen here).
pub const MAX_P_TO_QRS_MS: f64 = 600.0;
/// Largest QRS-peak-to-T-peak distance for a T wave to belong to a beat (a loose
/// bound, chosen here: QT above 700 ms is exceptional).
pub const MAX_QRS_TO_T_MS: f64 = 800.0;

/// The three waves of a beat.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Wave {
    P,
    Qrs,
    T,
}

/// The delineation fiducials that are scored (the QRS peak is used for matching).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Fiducial {
    POn,
    PPeak,
    PEnd,
    QrsOn,
    QrsEnd,
    TPeak,
    TEnd,
}

impl Fiducial {
    /// Every scored fiducial, in the order of the report tables.
    pub const ALL: [Fiducial; 7] = [
        Fiducial::POn,
        Fiducial::PPeak,
        Fiducial::PEnd,
        Fiducial::QrsOn,
        Fiducial::QrsEnd,
        Fiducial::TPeak,
        Fiducial::TEnd,
    ];

    /// Key used in JSON, TOML and tables (`p_on`, `t_end`...).
    pub fn key(self) -> &'static str {
        match self {
            Fiducial::POn => "p_on",
            Fiducial::PPeak => "p_peak",
            Fiducial::PEnd => "p_end",
            Fiducial::QrsOn => "qrs_on",
            Fiducial::QrsEnd => "qrs_end",
            Fiducial::TPeak => "t_peak",
            Fiducial::TEnd => "t_end",
        }
    }

    /// Human label (`P on`, `T end`...).
    pub fn label(self) -> &'static str {
        match self {
            Fiducial::POn => "P on",
            Fiducial::PPeak => "P peak",
            Fiducial::PEnd => "P end",
            Fiducial::QrsOn => "QRS on",
            Fiducial::QrsEnd => "QRS end",
            Fiducial::TPeak => "T peak",
            Fiducial::TEnd => "T end",
        }
    }

    /// The wave the fiducial belongs to.
    pub fn wave(self) -> Wave {
        match self {
            Fiducial::POn | Fiducial::PPeak | Fiducial::PEnd => Wave::P,
            Fiducial::QrsOn | Fiducial::QrsEnd => Wave::Qrs,
            Fiducial::TPeak | Fiducial::TEnd => Wave::T,
        }
    }

    /// CSE tolerance for the SD of the error in ms (the "2 SD" row of the CSE
    /// Working Party 1985 recommendations, as used in the delineation literature;
    /// values as given in the project brief and the data README). `None` where the
    /// CSE gives none.
    pub fn cse_tolerance_ms(self) -> Option<f64> {
        match self {
            Fiducial::POn => Some(10.2),
            Fiducial::PEnd => Some(12.7),
            Fiducial::QrsOn => Some(6.5),
            Fiducial::QrsEnd => Some(11.6),
            Fiducial::TEnd => Some(30.6),
            Fiducial::PPeak | Fiducial::TPeak => None,
        }
    }
}

/// The marks of one beat, in samples (0-based). `None`: not marked.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct BeatMarks {
    /// Channel (signal index) of the marks; 0 for global files.
    pub chan: u8,
    /// WFDB beat code of the QRS mark.
    pub code: u8,
    pub qrs_peak: i64,
    pub p_on: Option<i64>,
    pub p_peak: Option<i64>,
    pub p_end: Option<i64>,
    pub qrs_on: Option<i64>,
    pub qrs_end: Option<i64>,
    pub t_on: Option<i64>,
    pub t_peak: Option<i64>,
    pub t_end: Option<i64>,
}

impl BeatMarks {
    /// The sample of fiducial `f`, if marked.
    pub fn get(&self, f: Fiducial) -> Option<i64> {
        match f {
            Fiducial::POn => self.p_on,
            Fiducial::PPeak => self.p_peak,
            Fiducial::PEnd => self.p_end,
            Fiducial::QrsOn => self.qrs_on,
            Fiducial::QrsEnd => self.qrs_end,
            Fiducial::TPeak => self.t_peak,
            Fiducial::TEnd => self.t_end,
        }
    }

    /// Set (or clear) the sample of fiducial `f`.
    pub fn set(&mut self, f: Fiducial, v: Option<i64>) {
        let slot = match f {
            Fiducial::POn => &mut self.p_on,
            Fiducial::PPeak => &mut self.p_peak,
            Fiducial::PEnd => &mut self.p_end,
            Fiducial::QrsOn => &mut self.qrs_on,
            Fiducial::QrsEnd => &mut self.qrs_end,
            Fiducial::TPeak => &mut self.t_peak,
            Fiducial::TEnd => &mut self.t_end,
        };
        *slot = v;
    }

    /// True when the beat carries wave `w` (its peak mark is present).
    pub fn has_wave(&self, w: Wave) -> bool {
        match w {
            Wave::P => self.p_peak.is_some(),
            Wave::Qrs => true,
            Wave::T => self.t_peak.is_some(),
        }
    }

    /// QT in samples (T end − QRS on) when both are marked.
    pub fn qt_samples(&self) -> Option<i64> {
        Some(self.t_end? - self.qrs_on?)
    }

    /// QRS duration (QRS end − QRS onset), samples.
    pub fn qrs_samples(&self) -> Option<i64> {
        Some(self.qrs_end? - self.qrs_on?)
    }

    /// PR interval (QRS onset − P onset), samples.
    pub fn pr_samples(&self) -> Option<i64> {
        Some(self.qrs_on? - self.p_on?)
    }

    /// P-wave duration (P end − P onset), samples.
    pub fn p_samples(&self) -> Option<i64> {
        Some(self.p_end? - self.p_on?)
    }

    /// T peak to T end, samples.
    pub fn tpe_samples(&self) -> Option<i64> {
        Some(self.t_end? - self.t_peak?)
    }

    /// Every marked sample of the beat (for plotting and spans).
    pub fn all_marks(&self) -> Vec<i64> {
        [
            self.p_on,
            self.p_peak,
            self.p_end,
            self.qrs_on,
            Some(self.qrs_peak),
            self.qrs_end,
            self.t_on,
            self.t_peak,
            self.t_end,
        ]
        .into_iter()
        .flatten()
        .collect()
    }
}

/// Beats of one annotation sequence, with what could not be attached to a beat.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ParsedBeats {
    /// Beats in time order.
    pub beats: Vec<BeatMarks>,
    /// P waves not attached to any beat.
    pub orphan_p: usize,
    /// T waves not attached to any beat.
    pub orphan_t: usize,
    /// First and last annotated sample of the sequence (any mark), if any.
    pub span: Option<(i64, i64)>,
}

#[derive(Debug, Clone, Copy)]
struct WaveMarks {
    on: Option<i64>,
    peak: i64,
    off: Option<i64>,
}

/// Parse one annotation sequence (a global file, or one channel) into beats.
///
/// `fs` (Hz) converts the attachment bounds [`MAX_P_TO_QRS_MS`] and
/// [`MAX_QRS_TO_T_MS`] to samples.
pub fn parse_beats(anns: &[Annotation], fs: f64) -> ParsedBeats {
    let mut seq: Vec<&Annotation> = anns.iter().collect();
    seq.sort_by_key(|a| a.sample); // stable: file order breaks ties
    let span = match (seq.first(), seq.last()) {
        (Some(a), Some(b)) => Some((a.sample, b.sample)),
        _ => None,
    };
    let mut qrs: Vec<(WaveMarks, u8)> = Vec::new();
    let mut pw: Vec<WaveMarks> = Vec::new();
    let mut tw: Vec<WaveMarks> = Vec::new();
    for (i, a) in seq.iter().enumerate() {
        let is_beat = is_beat_code(a.code);
        if !(is_beat || a.code == PWAVE || a.code == TWAVE || a.code == UWAVE) {
            continue;
        }
        let on = (i > 0 && seq[i - 1].code == WFON).then(|| seq[i - 1].sample);
        let off = seq.get(i + 1).filter(|n| n.code == WFOFF).map(|n| n.sample);
        let w = WaveMarks {
            on,
            peak: a.sample,
            off,
        };
        if is_beat {
            qrs.push((w, a.code));
        } else if a.code == PWAVE {
            pw.push(w);
        } else if a.code == TWAVE {
            tw.push(w);
        }
    }
    let max_p = (MAX_P_TO_QRS_MS * fs / 1000.0).floor() as i64;
    let max_t = (MAX_QRS_TO_T_MS * fs / 1000.0).floor() as i64;
    let chan = anns.first().map_or(0, |a| a.chan);
    let mut beats: Vec<BeatMarks> = qrs
        .iter()
        .map(|(w, code)| BeatMarks {
            chan,
            code: *code,
            qrs_peak: w.peak,
            qrs_on: w.on,
            qrs_end: w.off,
            ..Default::default()
        })
        .collect();
    let peaks: Vec<i64> = beats.iter().map(|b| b.qrs_peak).collect();
    let mut orphan_p = 0;
    // P: the last P before the next QRS.
    for (k, p) in pw.iter().enumerate() {
        let j = peaks.partition_point(|&q| q <= p.peak); // first QRS strictly after
        let next_p_before = pw
            .get(k + 1)
            .is_some_and(|n| j < peaks.len() && n.peak < peaks[j]);
        if j < peaks.len() && !next_p_before && peaks[j] - p.peak <= max_p {
            beats[j].p_on = p.on;
            beats[j].p_peak = Some(p.peak);
            beats[j].p_end = p.off;
        } else {
            orphan_p += 1;
        }
    }
    let mut orphan_t = 0;
    // T: the first T after the previous QRS.
    for (k, t) in tw.iter().enumerate() {
        let j = peaks.partition_point(|&q| q < t.peak); // QRS strictly before: j-1
        let prev_t_after = k > 0 && j > 0 && tw[k - 1].peak > peaks[j - 1];
        if j > 0 && !prev_t_after && t.peak - peaks[j - 1] <= max_t {
            let b = &mut beats[j - 1];
            b.t_on = t.on;
            b.t_peak = Some(t.peak);
            b.t_end = t.off;
        } else {
            orphan_t += 1;
        }
    }
    ParsedBeats {
        beats,
        orphan_p,
        orphan_t,
        span,
    }
}

/// Parse a per-lead file set: annotations grouped by `chan`, each parsed alone.
pub fn parse_beats_by_chan(anns: &[Annotation], fs: f64) -> BTreeMap<u8, ParsedBeats> {
    let mut groups: BTreeMap<u8, Vec<Annotation>> = BTreeMap::new();
    for a in anns {
        groups.entry(a.chan).or_default().push(a.clone());
    }
    groups
        .into_iter()
        .map(|(c, v)| (c, parse_beats(&v, fs)))
        .collect()
}

/// Combine per-lead beats into global beats (used as the global reference where a
/// database has only per-lead marks, e.g. LUDB).
///
/// QRS peaks of all leads are clustered as in [`crate::cluster_peaks`] (a new beat
/// when a peak is more than `max_dist` samples after the cluster's first peak). Per
/// beat: onsets are the earliest over the leads that mark them, offsets the latest,
/// peaks the median (lower middle pair averaged, rounded down) — the usual global
/// definition of boundaries over a multi-lead recording (common practice since the
/// CSE studies).
pub fn combine_leads(leads: &[&[BeatMarks]], max_dist: i64) -> Vec<BeatMarks> {
    let mut all: Vec<&BeatMarks> = leads.iter().flat_map(|l| l.iter()).collect();
    all.sort_by_key(|b| b.qrs_peak);
    let mut out = Vec::new();
    let mut cur: Vec<&BeatMarks> = Vec::new();
    for b in all {
        if cur
            .first()
            .is_some_and(|f| b.qrs_peak - f.qrs_peak > max_dist)
        {
            out.push(merge(&cur));
            cur.clear();
        }
        cur.push(b);
    }
    if !cur.is_empty() {
        out.push(merge(&cur));
    }
    out
}

/// For every reference beat, the marks of the lead that lies closest to the
/// reference, chosen fiducial by fiducial: the "best lead per beat" protocol
/// by which some published QTDB results were scored (Laguna et al. 1994 and
/// Martínez et al. 2004 chose, per annotated beat, the lead whose automatic
/// mark was nearest the expert's; from memory). It looks at the reference, so
/// it bounds what a lead choice could give; it is no measurement of a method.
///
/// Each lead's beats are paired with the reference beats by QRS peak
/// ([`crate::matching::match_events`], `max_dist` samples). A reference beat
/// paired in no lead is left out (it then scores as unpaired); otherwise the
/// returned beat carries the reference's QRS peak and code and, for each
/// fiducial the reference marks, the value of the paired lead beat nearest to
/// it (ties: the lead listed first); fiducials the reference lacks stay
/// unmarked, and so does T onset.
pub fn best_lead_beats(
    reference: &[BeatMarks],
    leads: &[&[BeatMarks]],
    max_dist: i64,
) -> Vec<BeatMarks> {
    let rp: Vec<i64> = reference.iter().map(|b| b.qrs_peak).collect();
    let mut partners: Vec<Vec<&BeatMarks>> = vec![Vec::new(); reference.len()];
    for lead in leads {
        let lp: Vec<i64> = lead.iter().map(|b| b.qrs_peak).collect();
        for (i, j) in crate::matching::match_events(&rp, &lp, max_dist) {
            partners[i].push(&lead[j]);
        }
    }
    reference
        .iter()
        .zip(&partners)
        .filter(|(_, p)| !p.is_empty())
        .map(|(r, p)| {
            let mut b = BeatMarks {
                chan: 0,
                code: r.code,
                qrs_peak: r.qrs_peak,
                ..Default::default()
            };
            for f in Fiducial::ALL {
                let Some(rv) = r.get(f) else { continue };
                let best = p
                    .iter()
                    .filter_map(|l| l.get(f))
                    .min_by_key(|v| (v - rv).abs());
                b.set(f, best);
            }
            b
        })
        .collect()
}

fn merge(beats: &[&BeatMarks]) -> BeatMarks {
    let min = |f: fn(&BeatMarks) -> Option<i64>| beats.iter().filter_map(|b| f(b)).min();
    let max = |f: fn(&BeatMarks) -> Option<i64>| beats.iter().filter_map(|b| f(b)).max();
    let med = |f: fn(&BeatMarks) -> Option<i64>| {
        let mut v: Vec<i64> = beats.iter().filter_map(|b| f(b)).collect();
        v.sort_unstable();
        let n = v.len();
        match n {
            0 => None,
            _ if n % 2 == 1 => Some(v[n / 2]),
            _ => Some((v[n / 2 - 1] + v[n / 2]).div_euclid(2)),
        }
    };
    BeatMarks {
        chan: 0,
        code: beats[0].code,
        qrs_peak: med(|b| Some(b.qrs_peak)).unwrap_or(beats[0].qrs_peak),
        p_on: min(|b| b.p_on),
        p_peak: med(|b| b.p_peak),
        p_end: max(|b| b.p_end),
        qrs_on: min(|b| b.qrs_on),
        qrs_end: max(|b| b.qrs_end),
        t_on: min(|b| b.t_on),
        t_peak: med(|b| b.t_peak),
        t_end: max(|b| b.t_end),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ann(sample: i64, code: u8) -> Annotation {
        Annotation {
            sample,
            code,
            subtype: 0,
            chan: 0,
            num: 0,
            aux: None,
        }
    }

    fn seq(items: &[(i64, char)]) -> Vec<Annotation> {
        items
            .iter()
            .map(|&(s, c)| {
                let code = match c {
                    '(' => WFON,
                    ')' => WFOFF,
                    'p' => PWAVE,
                    't' => TWAVE,
                    'u' => UWAVE,
                    'N' => 1,
                    'V' => 5,
                    'A' => 8,
                    _ => panic!("test symbol"),
                };
                ann(s, code)
            })
            .collect()
    }

    // Hand-made beats in the QTDB q1c layout (sel100's first beat, samples from the
    // database file: ( p ) ( N ) t ) with no T onset).
    #[test]
    fn qtdb_layout_without_t_onset() {
        let a = seq(&[
            (150272, '('),
            (150290, 'p'),
            (150297, ')'),
            (150316, '('),
            (150330, 'N'),
            (150334, ')'),
            (150394, 't'),
            (150419, ')'),
        ]);
        let p = parse_beats(&a, 250.0);
        assert_eq!(p.beats.len(), 1);
        let b = &p.beats[0];
        assert_eq!(
            (b.p_on, b.p_peak, b.p_end),
            (Some(150272), Some(150290), Some(150297))
        );
        assert_eq!(
            (b.qrs_on, b.qrs_peak, b.qrs_end),
            (Some(150316), 150330, Some(150334))
        );
        assert_eq!(
            (b.t_on, b.t_peak, b.t_end),
            (None, Some(150394), Some(150419))
        );
        assert_eq!(b.qt_samples(), Some(150419 - 150316));
        assert_eq!(p.span, Some((150272, 150419)));
    }

    #[test]
    fn missing_waves_and_u_waves() {
        // Beat 1: QRS + T + U; beat 2: P + QRS, no T; trailing P without QRS.
        let a = seq(&[
            (100, '('),
            (110, 'N'),
            (120, ')'),
            (150, '('),
            (170, 't'),
            (190, ')'),
            (200, 'u'),
            (210, ')'),
            (300, '('),
            (310, 'p'),
            (320, ')'),
            (330, '('),
            (340, 'V'),
            (350, ')'),
            (600, 'p'),
            (610, ')'),
        ]);
        let p = parse_beats(&a, 250.0);
        assert_eq!(p.beats.len(), 2);
        assert_eq!(p.beats[0].p_peak, None);
        assert_eq!(p.beats[0].t_on, Some(150));
        assert_eq!(p.beats[0].t_end, Some(190));
        assert_eq!(p.beats[1].code, 5);
        assert_eq!(p.beats[1].p_peak, Some(310));
        assert_eq!(p.beats[1].t_peak, None);
        assert_eq!(p.orphan_p, 1);
        assert_eq!(p.orphan_t, 0);
    }

    #[test]
    fn extra_p_waves_keep_only_the_last_and_far_waves_are_dropped() {
        // Two P waves before one QRS (e.g. a blocked P): the later one belongs to the beat.
        // A T wave 1000 samples (4 s at 250 Hz) after the QRS is beyond the bound.
        let a = seq(&[(100, 'p'), (200, 'p'), (250, 'N'), (1250, 't')]);
        let p = parse_beats(&a, 250.0);
        assert_eq!(p.beats[0].p_peak, Some(200));
        assert_eq!(p.beats[0].t_peak, None);
        assert_eq!((p.orphan_p, p.orphan_t), (1, 1));
    }

    #[test]
    fn by_chan_groups_leads() {
        let mut a = seq(&[(10, 'N'), (20, 't'), (12, 'N')]);
        a[2].chan = 3;
        let m = parse_beats_by_chan(&a, 500.0);
        assert_eq!(m.len(), 2);
        assert_eq!(m[&0].beats[0].t_peak, Some(20));
        assert_eq!(m[&3].beats[0].chan, 3);
        assert_eq!(m[&3].beats[0].qrs_peak, 12);
    }

    #[test]
    fn combined_leads_take_earliest_onset_latest_offset_median_peak() {
        let a = BeatMarks {
            qrs_peak: 100,
            qrs_on: Some(90),
            qrs_end: Some(112),
            t_peak: Some(160),
            t_end: Some(200),
            ..Default::default()
        };
        let b = BeatMarks {
            qrs_peak: 104,
            qrs_on: Some(92),
            qrs_end: Some(110),
            p_peak: Some(60),
            t_peak: Some(170),
            t_end: Some(210),
            ..Default::default()
        };
        let c = BeatMarks {
            qrs_peak: 400,
            ..Default::default()
        };
        let g = combine_leads(&[&[a, c.clone()], &[b]], 75);
        assert_eq!(g.len(), 2);
        assert_eq!(g[0].qrs_peak, 102);
        assert_eq!((g[0].qrs_on, g[0].qrs_end), (Some(90), Some(112)));
        assert_eq!((g[0].t_peak, g[0].t_end), (Some(165), Some(210)));
        assert_eq!(g[0].p_peak, Some(60));
        assert_eq!(g[1], c);
    }

    #[test]
    fn best_lead_takes_the_nearest_lead_per_fiducial() {
        // Hand-worked: reference QRS on 90, T end 200, no P; lead 0 marks
        // 86 / 230, lead 1 marks 95 / 207 (both 4 and 5 away for the onset:
        // lead 0 wins on 4), T end nearest in lead 1 (7 < 30). The second
        // reference beat is paired in no lead (peaks 300 apart) and is left
        // out; a P wave the reference lacks stays unmarked.
        let r = |q: i64, on: i64, te: i64| BeatMarks {
            qrs_peak: q,
            qrs_on: Some(on),
            t_end: Some(te),
            ..Default::default()
        };
        let l0 = BeatMarks {
            p_on: Some(40),
            ..r(101, 86, 230)
        };
        let l1 = r(98, 95, 207);
        let out = best_lead_beats(&[r(100, 90, 200), r(900, 890, 1000)], &[&[l0], &[l1]], 37);
        assert_eq!(out.len(), 1);
        assert_eq!(out[0].qrs_peak, 100);
        assert_eq!((out[0].qrs_on, out[0].t_end), (Some(86), Some(207)));
        assert_eq!(out[0].p_on, None);
        // Equal distance: the lead listed first.
        let tie = best_lead_beats(
            &[r(100, 90, 200)],
            &[&[r(100, 88, 200)], &[r(100, 92, 200)]],
            37,
        );
        assert_eq!(tie[0].qrs_on, Some(88));
    }

    #[test]
    fn unsorted_input_is_sorted_stably() {
        let a = seq(&[(40, ')'), (20, 'N'), (10, '(')]);
        let p = parse_beats(&a, 250.0);
        assert_eq!(p.beats[0].qrs_on, Some(10));
        assert_eq!(p.beats[0].qrs_end, Some(40));
    }
}
