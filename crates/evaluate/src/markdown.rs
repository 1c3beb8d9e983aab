//! The Markdown summary (`report.md`): the headline tables of the report.

use crate::report::{
    BeatSection, DelineationSection, LabelSection, QtSection, RecordRow, ValidationReport,
};
use crate::stats::BlandAltman;
use crate::waves::Fiducial;
use std::fmt::Write;

/// Format an optional number with `d` decimals, `–` when absent.
pub fn num(v: Option<f64>, d: usize) -> String {
    v.map_or_else(|| "–".to_string(), |x| format!("{x:.d$}"))
}

fn beats_md(out: &mut String, b: &BeatSection) {
    let o = &b.overall;
    let _ = writeln!(out, "## Beats\n\nReference: {}.\n", b.reference);
    let _ = writeln!(
        out,
        "| | TP | FN | FP | Se % | +P % |\n|---|---:|---:|---:|---:|---:|"
    );
    let _ = writeln!(
        out,
        "| all records | {} | {} | {} | {} | {} |",
        o.tp,
        o.fn_,
        o.fp,
        num(o.sensitivity_pct, 2),
        num(o.ppv_pct, 2)
    );
    for r in b.per_record.iter().take(10) {
        let _ = writeln!(
            out,
            "| {} | {} | {} | {} | {} | {} |",
            r.record,
            r.tp,
            r.fn_,
            r.fp,
            num(r.sensitivity_pct, 2),
            num(r.ppv_pct, 2)
        );
    }
    if b.per_record.len() > 10 {
        let _ = writeln!(
            out,
            "\n(worst 10 of {} records shown; all in report.json)",
            b.per_record.len()
        );
    }
    out.push('\n');
    if let Some(l) = &b.labels {
        labels_md(out, l);
    }
}

/// The beat-label table: reference class by the tool's label, paired beats.
fn labels_md(out: &mut String, l: &LabelSection) {
    let _ = writeln!(
        out,
        "Beat labels on the paired beats against the `.atr` codes, by ANSI/AAMI EC57 class of the reference (N: N L R e j; S: A a J S; V: V E; F: F; Q: paced and unclassifiable). The median beats average the beats labelled `N` and `Q` (never `V`) that pass their RR and correlation tests.\n\n| reference | labelled N | labelled V | labelled Q | other |\n|---|---:|---:|---:|---:|"
    );
    for r in &l.confusion {
        let _ = writeln!(
            out,
            "| {} | {} | {} | {} | {} |",
            r.reference, r.n, r.v, r.q, r.other
        );
    }
    let _ = writeln!(
        out,
        "\nNormal beats labelled `N`: {} %; ventricular ectopic beats: Se {} %, +P {} % (paired beats only).\n",
        num(l.n_sensitivity_pct, 2),
        num(l.v_sensitivity_pct, 2),
        num(l.v_ppv_pct, 2)
    );
}

/// The fiducial table of a delineation section.
pub fn fiducial_table(out: &mut String, s: &DelineationSection) {
    let _ = writeln!(
        out,
        "| Fiducial | n | Se % | +P % | mean ms | SD ms | mean rec. SD ms | MAE ms | p95 abs ms | CSE tol. ms | CSE |\n|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---|"
    );
    for f in &s.fiducials {
        let st = &f.stats;
        let _ = writeln!(
            out,
            "| {} | {} | {} | {} | {} | {} | {} | {} | {} | {} | {} |",
            f.fiducial.label(),
            st.n,
            num(f.sensitivity_pct, 2),
            num(f.ppv_pct, 2),
            num(st.mean_ms, 1),
            num(st.sd_ms, 1),
            num(st.mean_record_sd_ms, 1),
            num(st.mae_ms, 1),
            num(st.p95_abs_ms, 1),
            num(f.cse_tolerance_ms, 1),
            match f.cse_pass {
                Some(true) => "pass",
                Some(false) => "FAIL",
                None => "–",
            }
        );
    }
    out.push('\n');
}

/// Column heads of the stability table (see [`stability_rows`]).
pub const STABILITY_HEADS: [&str; 8] = [
    "Fiducial",
    "SD ms (95 % CI)",
    "mean ms (95 % CI)",
    "Se % (95 % CI)",
    "odd records: n, SD ms",
    "even records: n, SD ms",
    "odd Se %",
    "even Se %",
];

/// One row per fiducial of a section: its pooled SD, mean and sensitivity with
/// their bootstrap intervals over records, and the SD and sensitivity on each
/// half of the records (`crate::stability`). Shared by the Markdown and HTML
/// reports.
pub fn stability_rows(s: &DelineationSection) -> Vec<[String; 8]> {
    let with_ci = |v: Option<f64>, ci: Option<[f64; 2]>, d: usize| match ci {
        Some([lo, hi]) => format!("{} ({lo:.d$} to {hi:.d$})", num(v, d)),
        None => num(v, d),
    };
    s.fiducials
        .iter()
        .filter_map(|f| {
            let st = f.stability.as_ref()?;
            let b = &st.bootstrap;
            let half = |h: &crate::stability::Half| format!("{}, {}", h.n, num(h.sd_ms, 1));
            Some([
                f.fiducial.label().to_string(),
                with_ci(f.stats.sd_ms, b.sd_ci_ms, 1),
                with_ci(f.stats.mean_ms, b.mean_ci_ms, 1),
                with_ci(f.sensitivity_pct, b.sensitivity_ci_pct, 2),
                half(&st.odd),
                half(&st.even),
                num(st.odd.sensitivity_pct, 2),
                num(st.even.sensitivity_pct, 2),
            ])
        })
        .collect()
}

/// Column heads of the confidence calibration table.
pub const CALIBRATION_HEADS: [&str; 6] = [
    "fiducial",
    "confidence quartile",
    "confidence range",
    "marks",
    "mean |error| ms",
    "SD ms",
];

/// What the calibration table shows (Markdown and HTML).
pub const CALIBRATION_INTRO: &str = "The scored marks of each fiducial in four equal groups by the confidence the tool gave them (quartile 1 = lowest). A confidence worth using puts the larger errors in the lower quartiles: those are the marks to over-read first.";

/// Rows of the calibration table (`crate::calibration`), shared by the
/// Markdown and HTML reports.
pub fn calibration_rows(s: &DelineationSection) -> Vec<[String; 6]> {
    s.calibration
        .iter()
        .map(|r| {
            [
                r.fiducial.label().to_string(),
                r.quartile.to_string(),
                format!("{:.2} to {:.2}", r.confidence_min, r.confidence_max),
                r.n.to_string(),
                format!("{:.1}", r.mean_abs_ms),
                format!("{:.1}", r.sd_ms),
            ]
        })
        .collect()
}

fn calibration_md(out: &mut String, s: &DelineationSection) {
    if s.calibration.is_empty() {
        return;
    }
    let _ = writeln!(
        out,
        "### Confidence against error

{CALIBRATION_INTRO}
"
    );
    let rows = calibration_rows(s);
    text_table(out, &CALIBRATION_HEADS, rows.iter().map(|r| r.as_slice()));
}

/// Column heads of the error-components table.
pub const COMPONENT_HEADS: [&str; 9] = [
    "fiducial",
    "marks",
    "record-channels",
    "SD ms",
    "between records ms",
    "between record-channels ms",
    "within record-channel ms",
    "reference spread ms",
    "tool spread ms",
];

/// What the error-components table shows (Markdown and HTML).
pub const COMPONENT_INTRO: &str = "Where the error comes from, over the scored marks (population SDs, so SD² = between record-channels² + within record-channel²; for global marks the channel is the record). Between records: the spread of each record's mean error; between record-channels: of each lead's mean error in each record (a fixed offset that following each beat more closely cannot remove); within record-channel: the beat-to-beat rest. Reference spread: how much the reference's own boundary moves from beat to beat relative to its QRS peak on the same channel (reading jitter plus true beat-to-beat change); tool spread: the same for the tool's marks. A within record-channel SD near the reference spread leaves little to gain beat by beat.";

/// Rows of the error-components table (`crate::components`), shared by the
/// Markdown and HTML reports.
pub fn component_rows(s: &DelineationSection) -> Vec<[String; 9]> {
    s.components
        .iter()
        .map(|r| {
            [
                r.fiducial.label().to_string(),
                r.n.to_string(),
                r.groups.to_string(),
                format!("{:.1}", r.total_ms),
                format!("{:.1}", r.between_records_ms),
                format!("{:.1}", r.between_channels_ms),
                format!("{:.1}", r.within_channel_ms),
                format!("{:.1}", r.reference_spread_ms),
                format!("{:.1}", r.test_spread_ms),
            ]
        })
        .collect()
}

/// Column heads of the human-reference components table.
pub const HUMAN_COMPONENT_HEADS: [&str; 8] = [
    "scored",
    "fiducial",
    "marks",
    "SD ms",
    "between records ms",
    "within record ms",
    "annotator 1 spread ms",
    "own spread ms",
];

/// What the human-reference components table shows (Markdown and HTML).
pub const HUMAN_COMPONENT_INTRO: &str = "Error components on the same beats (population SDs; see the error-components table above): the second cardiologist's own disagreement with the first splits the same way, so the within-record part of the tool's error can be set beside a human reader's.";

/// Rows of the human-reference components table: annotator 2, then the tool,
/// per fiducial.
pub fn human_component_rows(h: &crate::report::HumanSection) -> Vec<[String; 8]> {
    let mut out = Vec::new();
    for (who, sec) in [("annotator 2", &h.annotator), ("tendline", &h.tool)] {
        for r in &sec.components {
            out.push([
                who.to_string(),
                r.fiducial.label().to_string(),
                r.n.to_string(),
                format!("{:.1}", r.total_ms),
                format!("{:.1}", r.between_records_ms),
                format!("{:.1}", r.within_channel_ms),
                format!("{:.1}", r.reference_spread_ms),
                format!("{:.1}", r.test_spread_ms),
            ]);
        }
    }
    out
}

fn components_md(out: &mut String, s: &DelineationSection) {
    if s.components.is_empty() {
        return;
    }
    let _ = writeln!(
        out,
        "### Error components

{COMPONENT_INTRO}
"
    );
    let rows = component_rows(s);
    text_table(out, &COMPONENT_HEADS, rows.iter().map(|r| r.as_slice()));
}

fn stability_md(out: &mut String, s: &DelineationSection) {
    let rows = stability_rows(s);
    let Some(first) = s.fiducials.iter().find_map(|f| f.stability.as_ref()) else {
        return;
    };
    let _ = writeln!(
        out,
        "### Stability over records

95 % intervals from {} bootstrap resamples of the records (seed {}); halves: records at odd and even positions of the record list. A target met at the point estimate but not across the interval may be missed on unseen records.
",
        first.bootstrap.replicates, first.bootstrap.seed
    );
    text_table(out, &STABILITY_HEADS, rows.iter().map(|r| r.as_slice()));
}

/// A table of text cells, the first column left-aligned and the others
/// right-aligned, followed by a blank line.
fn text_table<'a>(out: &mut String, heads: &[&str], rows: impl Iterator<Item = &'a [String]>) {
    let _ = writeln!(
        out,
        "| {} |\n|---|{}",
        heads.join(" | "),
        "---:|".repeat(heads.len().saturating_sub(1))
    );
    for r in rows {
        let _ = writeln!(out, "| {} |", r.join(" | "));
    }
    out.push('\n');
}

fn rows_table(out: &mut String, rows: &[RecordRow], first: &str, limit: usize) {
    let fids = [Fiducial::QrsOn, Fiducial::QrsEnd, Fiducial::TEnd];
    let _ = writeln!(
        out,
        "| {first} | beats | paired | QRS on mean±SD | QRS end mean±SD | T end mean±SD | T end MAE |\n|---|---:|---:|---:|---:|---:|---:|"
    );
    for r in rows.iter().take(limit) {
        let ms = |f: Fiducial| {
            r.fiducials.get(&f).map_or("–".into(), |x| {
                format!("{} ± {}", num(x.mean_ms, 1), num(x.sd_ms, 1))
            })
        };
        let _ = writeln!(
            out,
            "| {} | {} | {} | {} | {} | {} | {} |",
            r.name,
            r.ref_beats,
            r.paired_beats,
            ms(Fiducial::QrsOn),
            ms(Fiducial::QrsEnd),
            ms(Fiducial::TEnd),
            num(r.fiducials.get(&fids[2]).and_then(|x| x.mae_ms), 1)
        );
    }
    if rows.len() > limit {
        let _ = writeln!(
            out,
            "\n(worst {limit} of {} shown; all in report.json)",
            rows.len()
        );
    }
    out.push('\n');
}

fn section_md(out: &mut String, title: &str, s: &DelineationSection) {
    let _ = writeln!(
        out,
        "## {title}\n\nReference: {}; scored: {}. {} records, {} reference beats, {} paired.\n",
        s.reference, s.test, s.n_records, s.ref_beats, s.paired_beats
    );
    fiducial_table(out, s);
    stability_md(out, s);
    calibration_md(out, s);
    components_md(out, s);
    if !s.per_lead_name.is_empty() {
        let _ = writeln!(out, "### Per lead\n");
        rows_table(out, &s.per_lead_name, "lead", usize::MAX);
    }
    let _ = writeln!(out, "### Per record (sorted by T-end MAE, worst first)\n");
    rows_table(out, &s.per_record, "record", 15);
}

fn ba_row(out: &mut String, name: &str, b: &BlandAltman) {
    let _ = writeln!(
        out,
        "| {name} | {} | {} | {} | {} to {} | {} |",
        b.n,
        num(b.bias_ms, 1),
        num(b.sd_ms, 1),
        num(b.loa_low_ms, 1),
        num(b.loa_high_ms, 1),
        num(b.mae_ms, 1)
    );
}

fn qt_md(out: &mut String, q: &QtSection) {
    let _ = writeln!(
        out,
        "## QT, QRS and PR intervals (Bland–Altman)\n\nReference: {}.\n\n| interval | n | bias ms | SD ms | 95% limits ms | MAE ms |\n|---|---:|---:|---:|---:|---:|",
        q.reference
    );
    if q.beat.n > 0 {
        ba_row(out, "beat, global marks", &q.beat);
    }
    if let Some(b) = &q.beat_per_lead {
        ba_row(out, "beat, per lead", b);
    }
    if let Some(b) = &q.window_superimposed {
        ba_row(out, "window, superimposed leads", b);
    }
    if let Some(b) = &q.window_single {
        ba_row(out, "window, single lead", b);
    }
    if let Some(b) = &q.window_superimposed_lead_ref {
        ba_row(
            out,
            "window, superimposed leads, vs longest reference lead",
            b,
        );
    }
    if let Some(b) = &q.window_single_lead_ref {
        ba_row(out, "window, single lead, vs longest reference lead", b);
    }
    if let Some(b) = &q.window_qrs {
        ba_row(out, "window QRS duration", b);
    }
    if let Some(b) = &q.window_pr {
        ba_row(out, "window PR interval", b);
    }
    if let Some(b) = &q.window_p {
        ba_row(out, "window P duration", b);
    }
    if let Some(b) = &q.window_tpe {
        ba_row(out, "window T peak to T end", b);
    }
    if let Some(b) = &q.window_tpe_lead_ref {
        ba_row(out, "window T peak to T end, vs the same reference lead", b);
    }
    if let Some(b) = &q.window_qt_dispersion_lead_ref {
        ba_row(out, "window QT dispersion, vs the reference leads", b);
    }
    out.push('\n');
    let rows = qt_stability_rows(q);
    if !rows.is_empty() {
        let _ = writeln!(
            out,
            "Window intervals over records: 95 % bootstrap intervals (records resampled, as for the boundaries) and the two halves of the record list.\n"
        );
        text_table(out, &QT_STABILITY_HEADS, rows.iter().map(|r| r.as_slice()));
    }
}

/// Column heads of the window-interval stability table (see [`qt_stability_rows`]).
pub const QT_STABILITY_HEADS: [&str; 5] = [
    "interval",
    "bias ms (95 % CI)",
    "SD ms (95 % CI)",
    "odd records: n, bias, SD ms",
    "even records: n, bias, SD ms",
];

/// One row per window-interval agreement (QT, QRS, PR) that carries its
/// stability over records.
/// Shared by the Markdown and HTML reports.
pub fn qt_stability_rows(q: &QtSection) -> Vec<[String; 5]> {
    let named = [
        ("window, superimposed leads", &q.window_superimposed),
        ("window, single lead", &q.window_single),
        (
            "window, superimposed leads, vs longest reference lead",
            &q.window_superimposed_lead_ref,
        ),
        (
            "window, single lead, vs longest reference lead",
            &q.window_single_lead_ref,
        ),
        ("window QRS duration", &q.window_qrs),
        ("window PR interval", &q.window_pr),
        ("window P duration", &q.window_p),
        ("window T peak to T end", &q.window_tpe),
        (
            "window T peak to T end, vs the same reference lead",
            &q.window_tpe_lead_ref,
        ),
        (
            "window QT dispersion, vs the reference leads",
            &q.window_qt_dispersion_lead_ref,
        ),
    ];
    let ci = |v: Option<f64>, c: Option<[f64; 2]>| match c {
        Some([lo, hi]) => format!("{} ({lo:.1} to {hi:.1})", num(v, 1)),
        None => num(v, 1),
    };
    let half =
        |h: &crate::stability::Half| format!("{}, {}, {}", h.n, num(h.mean_ms, 1), num(h.sd_ms, 1));
    named
        .iter()
        .filter_map(|(name, b)| {
            let b = b.as_ref()?;
            let st = b.stability.as_ref()?;
            Some([
                name.to_string(),
                ci(b.bias_ms, st.bootstrap.mean_ci_ms),
                ci(b.sd_ms, st.bootstrap.sd_ci_ms),
                half(&st.odd),
                half(&st.even),
            ])
        })
        .collect()
}

/// What the over-read flag table shows (Markdown and HTML).
pub const FLAG_INTRO: &str = "Window QT (superimposed leads) on the scored windows with and without each flag that points the over-read at a window: a flag is worth its reading when the flagged windows err more.";

/// Column heads of the over-read flag table (see [`flag_rows`]).
pub const FLAG_HEADS: [&str; 7] = [
    "flag",
    "flagged windows",
    "flagged: bias, SD ms",
    "flagged: MAE ms",
    "other windows",
    "others: bias, SD ms",
    "others: MAE ms",
];

/// One row per over-read flag of [`QtSection::window_by_flag`].
/// Shared by the Markdown and HTML reports.
pub fn flag_rows(q: &QtSection) -> Vec<[String; 7]> {
    let pair = |b: Option<&crate::stats::BlandAltman>| {
        b.map_or("–".to_string(), |b| {
            format!("{}, {}", num(b.bias_ms, 1), num(b.sd_ms, 1))
        })
    };
    let mae =
        |b: Option<&crate::stats::BlandAltman>| b.map_or("–".to_string(), |b| num(b.mae_ms, 1));
    q.window_by_flag
        .iter()
        .map(|f| {
            [
                format!("`{}`", f.flag),
                f.flagged_windows.to_string(),
                pair(f.flagged.as_ref()),
                mae(f.flagged.as_ref()),
                f.unflagged_windows.to_string(),
                pair(f.unflagged.as_ref()),
                mae(f.unflagged.as_ref()),
            ]
        })
        .collect()
}

/// What the window-to-window table shows (Markdown and HTML).
pub const WINDOW_STEP_INTRO: &str = "Window QT from one window to the next, over every window of the run (no reference needed): the QTc-feeding QT of consecutive windows of a record, each corrected by Fridericia's formula, and their difference. A heart's QT changes little in ten seconds, so large differences are the tool's jumps.";

/// Column heads of the window-to-window table (see [`window_step_rows`]).
pub const WINDOW_STEP_HEADS: [&str; 2] = ["quantity", "value"];

/// The rows of a [`crate::report::WindowStability`].
pub fn window_step_rows(s: &crate::report::WindowStability) -> Vec<[String; 2]> {
    let pct = |v: Option<f64>| v.map_or("–".to_string(), |v| format!("{v:.2} %"));
    vec![
        ["records".into(), s.records.to_string()],
        ["windows with a QT and RR".into(), s.windows.to_string()],
        ["pairs of consecutive windows".into(), s.pairs.to_string()],
        [
            "SD of the QTcF difference".into(),
            format!("{} ms", num(s.delta_sd_ms, 1)),
        ],
        [
            "median absolute QTcF difference".into(),
            format!("{} ms", num(s.delta_median_abs_ms, 1)),
        ],
        [
            "pairs differing by more than 40 ms".into(),
            pct(s.delta_above_40_pct),
        ],
        [
            "windows flagged `qt_inconsistent`".into(),
            pct(s.inconsistent_pct),
        ],
    ]
}

/// Column heads of the split-by-record table (see [`qt_split_rows`]).
pub const QT_SPLIT_HEADS: [&str; 6] = [
    "interval",
    "windows",
    "records",
    "SD ms",
    "between records SD ms",
    "within record SD ms",
];

/// What the split-by-record table shows (Markdown and HTML).
pub const QT_SPLIT_INTRO: &str = "Window intervals split by record (population SDs: between² + within² = the population variance of the differences): the spread of each record's mean difference, a reading that holds for the whole record, and the rest from window to window within records.";

/// One row per window-interval agreement known by record, the second
/// annotator's window QT and the tool's on the same windows included.
/// Shared by the Markdown and HTML reports.
pub fn qt_split_rows(q: &QtSection, h: Option<&crate::report::HumanSection>) -> Vec<[String; 6]> {
    let mut named = vec![
        ("window, superimposed leads", q.window_superimposed.as_ref()),
        ("window, single lead", q.window_single.as_ref()),
        (
            "window, superimposed leads, vs longest reference lead",
            q.window_superimposed_lead_ref.as_ref(),
        ),
        (
            "window, single lead, vs longest reference lead",
            q.window_single_lead_ref.as_ref(),
        ),
        ("window QRS duration", q.window_qrs.as_ref()),
        ("window PR interval", q.window_pr.as_ref()),
        ("window P duration", q.window_p.as_ref()),
        ("window T peak to T end", q.window_tpe.as_ref()),
        (
            "window T peak to T end, vs the same reference lead",
            q.window_tpe_lead_ref.as_ref(),
        ),
        (
            "window QT dispersion, vs the reference leads",
            q.window_qt_dispersion_lead_ref.as_ref(),
        ),
    ];
    if let Some(h) = h {
        named.push((
            "window QT, annotator 2 vs annotator 1",
            h.annotator_qt_window.as_ref(),
        ));
        named.push((
            "window QT, tendline (superimposed) on the same windows",
            h.tool_qt_window.as_ref(),
        ));
    }
    named
        .into_iter()
        .filter_map(|(name, b)| {
            let b = b?;
            let s = b.by_record.as_ref()?;
            Some([
                name.to_string(),
                b.n.to_string(),
                s.records.to_string(),
                num(b.sd_ms, 1),
                format!("{:.1}", s.between_records_sd_ms),
                format!("{:.1}", s.within_record_sd_ms),
            ])
        })
        .collect()
}

/// Render the whole summary.
pub fn render(r: &ValidationReport) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "# Validation report: {}\n\nGenerated by {}. Run: `{}`. Data: `{}`. {} records.\n",
        r.database,
        r.generator,
        r.run_dir,
        r.data_dir,
        r.records.len()
    );
    if let Some(b) = &r.beats {
        beats_md(&mut out, b);
    }
    if let Some(g) = &r.global {
        section_md(&mut out, "Global boundaries", g);
    }
    if let Some(b) = &r.best_lead {
        let _ = writeln!(
            out,
            "## Best lead per beat (comparison only)\n\n{}\n\nReference: {}; scored: {}. {} records, {} reference beats, {} paired.\n",
            crate::BEST_LEAD_INTRO,
            b.reference,
            b.test,
            b.n_records,
            b.ref_beats,
            b.paired_beats
        );
        fiducial_table(&mut out, b);
    }
    if let Some(h) = &r.human {
        let _ = writeln!(
            out,
            "## Human reference: annotator 2 vs annotator 1 ({} records: {})\n\nThe same scoring code applied to the second cardiologist's marks; the tool on the same beats (those both annotators selected) and fiducials below it.\n\n### Annotator 2 (.q2c) vs annotator 1 (.q1c)\n",
            h.records.len(),
            h.records.join(", ")
        );
        fiducial_table(&mut out, &h.annotator);
        let _ = writeln!(out, "### tendline vs annotator 1, same beats\n");
        fiducial_table(&mut out, &h.tool);
        let _ = writeln!(out, "| beat QT | n | bias ms | SD ms | 95% limits ms | MAE ms |\n|---|---:|---:|---:|---:|---:|");
        ba_row(&mut out, "annotator 2", &h.annotator_qt_beat);
        ba_row(&mut out, "tendline", &h.tool_qt_beat);
        out.push('\n');
        if let Some(a) = &h.annotator_qt_window {
            let _ = writeln!(out, "Window QT (mean annotated beat QT per window of `windows.csv`, windows where both annotators mark enough beats):\n\n| window QT | n | bias ms | SD ms | 95% limits ms | MAE ms |\n|---|---:|---:|---:|---:|---:|");
            ba_row(&mut out, "annotator 2", a);
            if let Some(t) = &h.tool_qt_window {
                ba_row(&mut out, "tendline, superimposed leads", t);
            }
            out.push('\n');
        }
        let rows = human_component_rows(h);
        if !rows.is_empty() {
            let _ = writeln!(
                out,
                "### Error components, same beats\n\n{HUMAN_COMPONENT_INTRO}\n"
            );
            text_table(
                &mut out,
                &HUMAN_COMPONENT_HEADS,
                rows.iter().map(|r| r.as_slice()),
            );
        }
    }
    if let Some(p) = &r.per_lead {
        section_md(&mut out, "Per-lead boundaries", p);
    }
    if let Some(q) = &r.qt {
        qt_md(&mut out, q);
        let rows = qt_split_rows(q, r.human.as_ref());
        if !rows.is_empty() {
            let _ = writeln!(out, "{QT_SPLIT_INTRO}\n");
            text_table(&mut out, &QT_SPLIT_HEADS, rows.iter().map(|r| r.as_slice()));
        }
        let rows = flag_rows(q);
        if !rows.is_empty() {
            let _ = writeln!(out, "{FLAG_INTRO}\n");
            text_table(&mut out, &FLAG_HEADS, rows.iter().map(|r| r.as_slice()));
        }
        if let Some(rows) = q
            .window_stability
            .as_ref()
            .filter(|s| s.pairs > 0)
            .map(window_step_rows)
        {
            let _ = writeln!(out, "{WINDOW_STEP_INTRO}\n");
            text_table(
                &mut out,
                &WINDOW_STEP_HEADS,
                rows.iter().map(|r| r.as_slice()),
            );
        }
    }
    let _ = writeln!(out, "## Protocol\n");
    let _ = writeln!(
        out,
        "Beat window {} ms, fiducial window {} ms, window QT needs ≥ {} reference beats.\n",
        r.protocol.beat_window_ms, r.protocol.fiducial_window_ms, r.protocol.min_window_beats
    );
    for rule in &r.protocol.rules {
        let _ = writeln!(out, "- {rule}");
    }
    if !r.warnings.is_empty() {
        let _ = writeln!(out, "\n## Warnings\n");
        for w in &r.warnings {
            let _ = writeln!(out, "- {w}");
        }
    }
    out
}
