//! The WFDB annotation files of a record rebuilt from its part: the automatic
//! per-beat marks, or the current ones with a reader's per-beat corrections.
//!
//! The same boundary convention as the run (`(` onset, peak mark, `)` end; the QRS
//! peak carries the beat's code, the T end the method as aux text), built by
//! [`tendline_formats::annotation::boundary_annotations`], so a record without
//! corrections gives back the run's files byte for byte. A corrected T end carries
//! the aux text `reader`. A beat the reader marked unreadable keeps only its QRS
//! mark, with the code `Q` (unclassifiable beat) and the aux text `unreadable (reader)`.

use crate::util::{attr_f64, i64s, texts};
use tendline_formats::annotation::{boundary_annotations, Annotation, WaveMarks};
use tendline_store::Group;

/// `(global marks, per-lead marks)` of the record; `corrected` applies the reader's
/// per-beat corrections and unreadable beats.
pub fn of_part(g: &Group, corrected: bool) -> (Vec<Annotation>, Vec<Annotation>) {
    let global = lead_annotations(g, "global", 0, corrected);
    let mut leads = Vec::new();
    if let Some(lg) = crate::util::group_at(g, "marks/leads") {
        for (name, sub) in &lg.groups {
            let chan = attr_f64(sub, "channel")
                .map(|c| c as u8)
                .or_else(|| name.parse().ok())
                .unwrap_or(0);
            leads.extend(lead_annotations(
                g,
                &format!("leads/{name}"),
                chan,
                corrected,
            ));
        }
    }
    // The run's order: by sample, then channel (stable, so each lead keeps its order).
    leads.sort_by_key(|a| (a.sample, a.chan));
    (global, leads)
}

fn lead_annotations(g: &Group, sub: &str, chan: u8, corrected: bool) -> Vec<Annotation> {
    let peaks = i64s(g, "beats/qrs_peak").unwrap_or(&[]);
    let labels = texts(g, "beats/label").unwrap_or(&[]);
    let unreadable = if corrected {
        i64s(g, "beats/unreadable_reader").unwrap_or(&[])
    } else {
        &[]
    };
    let auto = |f: &str| i64s(g, &format!("marks/{sub}/{f}")).unwrap_or(&[]);
    let current = |f: &str| {
        let fixed = corrected
            .then(|| i64s(g, &format!("marks/corrected/{sub}/{f}")))
            .flatten();
        fixed.unwrap_or_else(|| auto(f))
    };
    let methods = texts(g, &format!("marks/{sub}/t_end_method")).unwrap_or(&[]);
    let at = |v: &[i64], i: usize| v.get(i).copied().filter(|&s| s >= 0);
    let names = [
        "p_on", "p_peak", "p_end", "qrs_on", "qrs_peak", "qrs_end", "t_on", "t_peak", "t_end",
    ];
    let cols: Vec<&[i64]> = names.iter().map(|f| current(f)).collect();
    let t_end_auto = auto("t_end");
    let mut waves = Vec::with_capacity(peaks.len() * 3);
    for (i, &peak) in peaks.iter().enumerate() {
        let label = labels.get(i).map_or("N", String::as_str);
        if unreadable.get(i).is_some_and(|&u| u != 0) {
            waves.push(WaveMarks {
                onset: None,
                peak: Some(at(cols[4], i).unwrap_or(peak)),
                end: None,
                symbol: "Q".into(),
                peak_aux: Some("unreadable (reader)".into()),
                end_aux: None,
            });
            continue;
        }
        let t_end = at(cols[8], i);
        let method = if t_end != at(t_end_auto, i) {
            "reader".to_string()
        } else {
            methods.get(i).cloned().unwrap_or_default()
        };
        waves.push(WaveMarks {
            onset: at(cols[0], i),
            peak: at(cols[1], i),
            end: at(cols[2], i),
            symbol: "p".into(),
            peak_aux: None,
            end_aux: None,
        });
        waves.push(WaveMarks {
            onset: at(cols[3], i),
            peak: Some(at(cols[4], i).unwrap_or(peak)),
            end: at(cols[5], i),
            symbol: label.to_string(),
            peak_aux: None,
            end_aux: None,
        });
        waves.push(WaveMarks {
            onset: at(cols[6], i),
            peak: at(cols[7], i),
            end: t_end,
            symbol: "t".into(),
            peak_aux: None,
            end_aux: Some(method),
        });
    }
    boundary_annotations(&waves, chan)
}
