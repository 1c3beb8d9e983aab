//! The measurement stage's results as store groups: `windows/` columns, the
//! median beats with their marks, and record-level summary attributes.

use crate::pipeline::marks_group;
use tendline_measure::{MeasureConfig, RecordMeasures};
use tendline_store::{Attr, Data, Group};

fn opt(v: Option<f64>) -> f64 {
    v.unwrap_or(f64::NAN)
}

/// Add `windows/` and the summary attributes to a record group. The median
/// beats move from `m` into the group (no copy); `m` keeps everything else.
pub fn windows_group(
    g: &mut Group,
    m: &mut RecordMeasures,
    names: &[String],
    fs: f64,
    cfg: &MeasureConfig,
) {
    let w = &m.windows;
    let wg = g.group("windows");
    let col = |f: &dyn Fn(&tendline_measure::WindowMeasure) -> Option<f64>| {
        Data::F64(w.iter().map(|x| opt(f(x))).collect())
    };
    wg.dataset_with_units(
        "start_s",
        Data::F64(w.iter().map(|x| x.start_s).collect()),
        "s",
    );
    wg.dataset_with_units("end_s", Data::F64(w.iter().map(|x| x.end_s).collect()), "s");
    wg.dataset(
        "n_beats",
        Data::I64(w.iter().map(|x| x.n_beats as i64).collect()),
    );
    wg.dataset_with_units("rr_ms", col(&|x| x.rr_ms), "ms");
    wg.dataset_with_units("hr_bpm", col(&|x| x.hr_bpm), "bpm");
    wg.dataset_with_units("qt_ms", col(&|x| x.qt_ms), "ms");
    wg.dataset(
        "qt_lead",
        Data::Text(
            w.iter()
                .map(|x| x.qt_lead.map(|i| names[i].clone()).unwrap_or_default())
                .collect(),
        ),
    );
    wg.dataset(
        "qt_lead_index",
        Data::I64(
            w.iter()
                .map(|x| x.qt_lead.map_or(-1, |i| i as i64))
                .collect(),
        ),
    );
    wg.dataset_with_units("qt_longest_ms", col(&|x| x.qt_longest_ms), "ms");
    wg.dataset_with_units("qt_superimposed_ms", col(&|x| x.qt_superimposed_ms), "ms");
    wg.dataset_with_units("qrs_ms", col(&|x| x.qrs_ms), "ms");
    wg.dataset_with_units("pr_ms", col(&|x| x.pr_ms), "ms");
    wg.dataset_with_units("jt_ms", col(&|x| x.jt_ms), "ms");
    wg.dataset_with_units("p_ms", col(&|x| x.p_ms), "ms");
    wg.dataset_with_units("tpe_ms", col(&|x| x.tpe_ms), "ms");
    wg.dataset_with_units("qt_dispersion_ms", col(&|x| x.qt_dispersion_ms), "ms");
    wg.dataset(
        "qt_valid_leads",
        Data::I64(w.iter().map(|x| x.qt_valid_leads as i64).collect()),
    );
    wg.dataset_with_units("qtc_bazett_ms", col(&|x| x.qtc_bazett_ms), "ms");
    wg.dataset_with_units("qtc_fridericia_ms", col(&|x| x.qtc_fridericia_ms), "ms");
    wg.dataset_with_units("qtc_framingham_ms", col(&|x| x.qtc_framingham_ms), "ms");
    wg.dataset_with_units("qtc_hodges_ms", col(&|x| x.qtc_hodges_ms), "ms");
    wg.dataset_with_units("qtc_ms", col(&|x| x.qtc_ms), "ms");
    wg.dataset(
        "qtc_flag",
        Data::Text(w.iter().map(|x| x.qtc_flag.as_str().to_string()).collect()),
    );
    wg.dataset(
        "flags",
        Data::Text(w.iter().map(|x| window_flags(x).join(";")).collect()),
    );
    wg.dataset(
        "classification",
        Data::Text(w.iter().map(|x| x.classification.text.clone()).collect()),
    );
    wg.attr("qt_rule", Attr::Text(cfg.qt_rule.as_str().into()));
    wg.attr(
        "preferred_formula",
        Attr::Text(cfg.preferred_formula.as_str().into()),
    );
    wg.attr(
        "caution",
        Attr::Text(tendline_measure::classify::CAUTION.into()),
    );
    for (k, x) in m.windows.iter_mut().enumerate() {
        let mg = wg.group("medians").group(&format!("{k:03}"));
        mg.attr("fiducial", Attr::Int(x.median.fiducial as i64));
        mg.attr("fs", Attr::Float(fs));
        mg.attr("start_s", Attr::Float(x.start_s));
        let values = std::mem::take(&mut x.median.values);
        let cols = if values.is_empty() { 0 } else { x.median.len };
        mg.dataset_with_units("beat", Data::F32Matrix { cols, values }, "mV");
        mg.dataset(
            "beats_used",
            Data::I64(x.beats.iter().map(|&b| b as i64).collect()),
        );
        // One element per lead: a few datasets per window instead of a group per lead,
        // which keeps HDF5 writing fast for 12-lead records with many windows.
        mg.attr("leads", Attr::Texts(names.to_vec()));
        mg.dataset(
            "usable",
            Data::I64(x.leads.iter().map(|l| l.usable as i64).collect()),
        );
        mg.dataset(
            "qt_accepted",
            Data::I64(x.leads.iter().map(|l| l.qt_accepted as i64).collect()),
        );
        mg.dataset(
            "qt_inconsistent",
            Data::I64(x.leads.iter().map(|l| l.inconsistent as i64).collect()),
        );
        mg.dataset_with_units(
            "qt_ms",
            Data::F64(x.leads.iter().map(|l| opt(l.qt_ms)).collect()),
            "ms",
        );
        mg.dataset_with_units(
            "qrs_ms",
            Data::F64(x.leads.iter().map(|l| opt(l.qrs_ms)).collect()),
            "ms",
        );
        mg.dataset_with_units(
            "pr_ms",
            Data::F64(x.leads.iter().map(|l| opt(l.pr_ms)).collect()),
            "ms",
        );
        mg.dataset_with_units(
            "t_amplitude_mv",
            Data::F64(x.leads.iter().map(|l| opt(l.t_amplitude_mv)).collect()),
            "mV",
        );
        mg.dataset_with_units(
            "noise_mv",
            Data::F64(x.leads.iter().map(|l| opt(l.noise_mv)).collect()),
            "mV",
        );
        mg.dataset_with_units(
            "t_noise_mv",
            Data::F64(x.leads.iter().map(|l| opt(l.t_noise_mv)).collect()),
            "mV",
        );
        let marks: Vec<_> = x.leads.iter().map(|l| l.marks.clone()).collect();
        marks_group(mg.group("marks"), &marks);
    }
    let s = &m.summary;
    for (n, v) in [
        ("rr_ms", s.rr_ms),
        ("hr_bpm", s.hr_bpm),
        ("qt_ms", s.qt_ms),
        ("qt_superimposed_ms", s.qt_superimposed_ms),
        ("qrs_ms", s.qrs_ms),
        ("pr_ms", s.pr_ms),
        ("jt_ms", s.jt_ms),
        ("p_ms", s.p_ms),
        ("tpe_ms", s.tpe_ms),
        ("qt_dispersion_ms", s.qt_dispersion_ms),
        ("qtc_bazett_ms", s.qtc_bazett_ms),
        ("qtc_fridericia_ms", s.qtc_fridericia_ms),
        ("qtc_framingham_ms", s.qtc_framingham_ms),
        ("qtc_hodges_ms", s.qtc_hodges_ms),
        ("qtc_ms", s.qtc_ms),
    ] {
        g.attr(n, Attr::Float(opt(v)));
    }
    g.attr("n_windows", Attr::Int(s.n_windows as i64));
    g.attr("n_windows_measured", Attr::Int(s.n_measured as i64));
    g.attr("n_windows_irregular", Attr::Int(s.n_irregular as i64));
    g.attr("n_windows_inconsistent", Attr::Int(s.n_inconsistent as i64));
    g.attr("qt_rule", Attr::Text(s.qt_rule.as_str().into()));
    g.attr("qtc_formula", Attr::Text(s.formula.as_str().into()));
    g.attr("qtc_flag", Attr::Text(s.qtc_flag.as_str().into()));
    g.attr("classification", Attr::Text(s.classification.text.clone()));
    g.attr("flags", Attr::Text(summary_flags(m).join(";")));
    g.attr("caution", Attr::Text(s.caution.into()));
}

fn window_flags(x: &tendline_measure::WindowMeasure) -> Vec<&'static str> {
    let f = &x.flags;
    let mut v = Vec::new();
    for (on, name) in [
        (f.irregular, "irregular"),
        (f.wide_qrs, "wide_qrs"),
        (f.unknown_sex, "sex_unknown"),
        (f.high_risk, "qtc_above_500"),
        (f.unreadable, "unreadable"),
        (f.too_few_beats, "too_few_beats"),
        (f.noisy, "unreadable_noise"),
        (f.paced, "paced"),
        (f.qt_inconsistent, "qt_inconsistent"),
    ] {
        if on {
            v.push(name);
        }
    }
    v
}

/// Record-level flags: the QTc class when not normal, then conditions seen in any window.
pub fn summary_flags(m: &RecordMeasures) -> Vec<String> {
    let s = &m.summary;
    let mut v: Vec<String> = Vec::new();
    if s.qtc_flag.as_str() != "normal" {
        v.push(s.qtc_flag.as_str().to_string());
    }
    // The record's QTc, not a single window's, decides the record-level highlight;
    // windows.csv keeps each window's own flags.
    if s.classification.high_risk {
        v.push("qtc_above_500".into());
    }
    if s.any_wide_qrs {
        v.push("wide_qrs".into());
    }
    if s.n_irregular > 0 {
        v.push("irregular".into());
    }
    if s.unknown_sex {
        v.push("sex_unknown".into());
    }
    if m.windows.iter().any(|w| w.flags.unreadable) {
        v.push("unreadable".into());
    }
    if m.windows.iter().any(|w| w.flags.noisy) {
        v.push("unreadable_noise".into());
    }
    if m.windows.iter().any(|w| w.flags.paced) {
        v.push("paced".into());
    }
    if m.windows.iter().any(|w| w.flags.qt_inconsistent) {
        v.push("qt_inconsistent".into());
    }
    v
}
