//! The self-contained HTML report: tables plus inline SVG plots drawn with `plotters`
//! (SVG backend, text as SVG `<text>` elements, so no font files are read).

use crate::markdown::num;
use crate::report::{DelineationSection, RecordRow, ValidationReport, WorstBeat};
use crate::stats::BlandAltman;
use crate::waves::Fiducial;
use crate::EvalError;
use plotters::prelude::*;
use std::fmt::Write;

fn perr<E: std::fmt::Display>(e: E) -> EvalError {
    EvalError::Report(format!("plot: {e}"))
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

const BLUE: RGBColor = RGBColor(31, 119, 180);
const ORANGE: RGBColor = RGBColor(214, 95, 0);
const GREEN: RGBColor = RGBColor(0, 128, 60);
const GREY: RGBColor = RGBColor(150, 150, 150);

/// Histogram of errors (ms), 4 ms bins over ±`range` ms; values beyond are clamped
/// into the outer bins.
pub fn histogram_svg(title: &str, errors: &[f64], range: f64) -> Result<String, EvalError> {
    let bin = 4.0;
    let nb = (2.0 * range / bin).ceil() as usize;
    let mut counts = vec![0usize; nb];
    for &e in errors {
        let k = ((e + range) / bin).floor().clamp(0.0, (nb - 1) as f64) as usize;
        counts[k] += 1;
    }
    let ymax = counts.iter().copied().max().unwrap_or(0).max(1) as f64 * 1.1;
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (420, 260)).into_drawing_area();
        root.fill(&WHITE).map_err(perr)?;
        let mut ch = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 15))
            .margin(8)
            .margin_right(20)
            .x_label_area_size(32)
            .y_label_area_size(48)
            .build_cartesian_2d(-range..range, 0.0..ymax)
            .map_err(perr)?;
        ch.configure_mesh()
            .x_desc("error, tool − reference (ms)")
            .y_desc("count")
            .x_labels(7)
            .y_labels(5)
            .draw()
            .map_err(perr)?;
        ch.draw_series(counts.iter().enumerate().map(|(k, &c)| {
            let x0 = -range + k as f64 * bin;
            Rectangle::new([(x0, 0.0), (x0 + bin, c as f64)], BLUE.mix(0.8).filled())
        }))
        .map_err(perr)?;
        ch.draw_series(std::iter::once(PathElement::new(
            vec![(0.0, 0.0), (0.0, ymax)],
            GREY.stroke_width(1),
        )))
        .map_err(perr)?;
        root.present().map_err(perr)?;
    }
    Ok(buf)
}

/// Bland–Altman plot: difference vs mean, with bias and 95 % limits.
pub fn bland_altman_svg(title: &str, ba: &BlandAltman) -> Result<String, EvalError> {
    let pts = &ba.points;
    let (mut x0, mut x1, mut y0, mut y1) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
    for &(m, d) in pts {
        x0 = x0.min(m);
        x1 = x1.max(m);
        y0 = y0.min(d);
        y1 = y1.max(d);
    }
    for v in [ba.loa_low_ms, ba.loa_high_ms].into_iter().flatten() {
        y0 = y0.min(v);
        y1 = y1.max(v);
    }
    if pts.is_empty() {
        (x0, x1, y0, y1) = (300.0, 500.0, -50.0, 50.0);
    }
    let (xp, yp) = (((x1 - x0) * 0.05).max(5.0), ((y1 - y0) * 0.08).max(5.0));
    let (x0, x1, y0, y1) = (x0 - xp, x1 + xp, y0 - yp, y1 + yp);
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (560, 340)).into_drawing_area();
        root.fill(&WHITE).map_err(perr)?;
        let mut ch = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 15))
            .margin(8)
            .margin_right(20)
            .x_label_area_size(34)
            .y_label_area_size(50)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(perr)?;
        ch.configure_mesh()
            .x_desc("mean of tool and reference QT (ms)")
            .y_desc("tool − reference (ms)")
            .draw()
            .map_err(perr)?;
        ch.draw_series(
            pts.iter()
                .map(|&(m, d)| Circle::new((m, d), 2, BLUE.mix(0.5).filled())),
        )
        .map_err(perr)?;
        let lines = [
            (ba.bias_ms, ORANGE, "bias"),
            (ba.loa_low_ms, GREY, "−1.96 SD"),
            (ba.loa_high_ms, GREY, "+1.96 SD"),
        ];
        for (v, c, label) in lines {
            if let Some(v) = v {
                ch.draw_series(std::iter::once(PathElement::new(
                    vec![(x0, v), (x1, v)],
                    c.stroke_width(2),
                )))
                .map_err(perr)?
                .label(format!("{label} {v:.1} ms"))
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 15, y)], c.stroke_width(2))
                });
            }
        }
        ch.configure_series_labels()
            .background_style(WHITE.mix(0.8))
            .border_style(GREY)
            .draw()
            .map_err(perr)?;
        root.present().map_err(perr)?;
    }
    Ok(buf)
}

/// Per-record mean ± SD of one fiducial's error, records in the given row order.
pub fn record_bars_svg(title: &str, rows: &[RecordRow], f: Fiducial) -> Result<String, EvalError> {
    let vals: Vec<(String, f64, f64)> = rows
        .iter()
        .filter_map(|r| {
            let x = r.fiducials.get(&f)?;
            Some((r.name.clone(), x.mean_ms?, x.sd_ms.unwrap_or(0.0)))
        })
        .collect();
    let (mut y0, mut y1) = (-10.0f64, 10.0f64);
    for (_, m, s) in &vals {
        y0 = y0.min(m - s);
        y1 = y1.max(m + s);
    }
    let n = vals.len().max(1);
    let w = (120 + 36 * n).clamp(420, 1100) as u32;
    // Room for about one label per 45 px; the rest of the names are in the table.
    let step = (n * 45).div_ceil(w as usize - 80).max(1);
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (w, 300)).into_drawing_area();
        root.fill(&WHITE).map_err(perr)?;
        let mut ch = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 15))
            .margin(8)
            .margin_right(20)
            .x_label_area_size(30)
            .y_label_area_size(50)
            .build_cartesian_2d(-0.5f64..(n as f64 - 0.5), (y0 * 1.05)..(y1 * 1.05))
            .map_err(perr)?;
        let names: Vec<String> = vals.iter().map(|v| v.0.clone()).collect();
        ch.configure_mesh()
            .disable_x_mesh()
            .x_labels(n + 1)
            .x_label_formatter(&|x| {
                let k = x.round();
                if (x - k).abs() < 1e-6 && k >= 0.0 && (k as usize) % step == 0 {
                    names.get(k as usize).cloned().unwrap_or_default()
                } else {
                    String::new()
                }
            })
            .y_desc("error mean ± SD (ms)")
            .draw()
            .map_err(perr)?;
        ch.draw_series(std::iter::once(PathElement::new(
            vec![(-0.5, 0.0), (n as f64 - 0.5, 0.0)],
            GREY.stroke_width(1),
        )))
        .map_err(perr)?;
        ch.draw_series(vals.iter().enumerate().map(|(k, (_, m, s))| {
            ErrorBar::new_vertical(k as f64, m - s, *m, m + s, BLUE.filled(), 4)
        }))
        .map_err(perr)?;
        root.present().map_err(perr)?;
    }
    Ok(buf)
}

/// A signal strip with the reference marks (green, solid, labelled above) and the
/// tool's marks (orange, labelled below).
pub fn strip_svg(b: &WorstBeat) -> Result<String, EvalError> {
    let Some(st) = &b.strip else {
        return Ok(String::new());
    };
    let t = |s: i64| s as f64 / b.fs;
    let (mut y0, mut y1) = (f64::MAX, f64::MIN);
    for &v in &st.samples {
        if v.is_finite() {
            y0 = y0.min(v);
            y1 = y1.max(v);
        }
    }
    if y0 > y1 {
        (y0, y1) = (-1.0, 1.0);
    }
    let pad = ((y1 - y0) * 0.25).max(0.05);
    let (y0, y1) = (y0 - pad, y1 + pad);
    let t0 = t(st.start);
    let t1 = t(st.start + st.samples.len() as i64 - 1);
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (620, 260)).into_drawing_area();
        root.fill(&WHITE).map_err(perr)?;
        let title = format!(
            "{} lead {} — {} error {:+.0} ms",
            b.record,
            b.lead,
            b.fiducial.label(),
            b.error_ms
        );
        let mut ch = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 14))
            .margin(8)
            .margin_right(20)
            .x_label_area_size(30)
            .y_label_area_size(50)
            .build_cartesian_2d(t0..t1, y0..y1)
            .map_err(perr)?;
        ch.configure_mesh()
            .x_desc("time (s)")
            .y_desc(st.units.clone())
            .draw()
            .map_err(perr)?;
        ch.draw_series(LineSeries::new(
            st.samples
                .iter()
                .enumerate()
                .filter(|(_, v)| v.is_finite())
                .map(|(k, &v)| (t(st.start + k as i64), v)),
            BLACK.stroke_width(1),
        ))
        .map_err(perr)?;
        let marks = |m: &crate::waves::BeatMarks| -> Vec<(i64, &'static str)> {
            [
                (m.p_on, "Pon"),
                (m.p_end, "Pend"),
                (m.qrs_on, "QRSon"),
                (m.qrs_end, "QRSend"),
                (m.t_peak, "Tpk"),
                (m.t_end, "Tend"),
            ]
            .into_iter()
            .filter_map(|(s, l)| s.map(|s| (s, l)))
            .collect()
        };
        let h = y1 - y0;
        for (s, l) in marks(&b.reference) {
            let x = t(s);
            ch.draw_series(std::iter::once(PathElement::new(
                vec![(x, y0 + 0.5 * h), (x, y1)],
                GREEN.stroke_width(2),
            )))
            .map_err(perr)?;
            ch.draw_series(std::iter::once(Text::new(
                l,
                (x, y1 - 0.02 * h),
                ("sans-serif", 10).into_font().color(&GREEN),
            )))
            .map_err(perr)?;
        }
        for (s, l) in marks(&b.test) {
            let x = t(s);
            ch.draw_series(std::iter::once(PathElement::new(
                vec![(x, y0), (x, y0 + 0.5 * h)],
                ORANGE.stroke_width(2),
            )))
            .map_err(perr)?;
            ch.draw_series(std::iter::once(Text::new(
                l,
                (x, y0 + 0.08 * h),
                ("sans-serif", 10).into_font().color(&ORANGE),
            )))
            .map_err(perr)?;
        }
        root.present().map_err(perr)?;
    }
    Ok(buf)
}

fn fiducial_table_html(out: &mut String, s: &DelineationSection) {
    out.push_str("<table><tr><th>Fiducial</th><th>n</th><th>Se %</th><th>+P %</th><th>mean ms</th><th>SD ms</th><th>mean record SD ms</th><th>MAE ms</th><th>p95 |err| ms</th><th>CSE tol. ms</th><th>CSE</th></tr>\n");
    for f in &s.fiducials {
        let st = &f.stats;
        let cse = match f.cse_pass {
            Some(true) => "<td class=pass>pass</td>",
            Some(false) => "<td class=fail>fail</td>",
            None => "<td>–</td>",
        };
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>{}</tr>",
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
            cse
        );
    }
    out.push_str("</table>\n");
}

fn stability_html(out: &mut String, s: &DelineationSection) {
    let rows = crate::markdown::stability_rows(s);
    plain_table_html(
        out,
        "Stability over records: 95 % bootstrap intervals (records resampled) and the two halves of the record list (odd and even positions).",
        &crate::markdown::STABILITY_HEADS,
        rows.iter().map(|r| r.as_slice()),
    );
}

/// A paragraph and a table of text cells; nothing without rows.
fn plain_table_html<'a>(
    out: &mut String,
    intro: &str,
    heads: &[&str],
    rows: impl Iterator<Item = &'a [String]>,
) {
    let mut body = String::new();
    for r in rows {
        body.push_str("<tr>");
        for c in r {
            let _ = write!(body, "<td>{}</td>", esc(c));
        }
        body.push_str("</tr>\n");
    }
    if body.is_empty() {
        return;
    }
    let _ = write!(out, "<p>{}</p><table><tr>", esc(intro));
    for h in heads {
        let _ = write!(out, "<th>{}</th>", esc(h));
    }
    out.push_str("</tr>\n");
    out.push_str(&body);
    out.push_str("</table>\n");
}

fn rows_html(out: &mut String, rows: &[RecordRow], first: &str) {
    let fids = [
        Fiducial::POn,
        Fiducial::PEnd,
        Fiducial::QrsOn,
        Fiducial::QrsEnd,
        Fiducial::TPeak,
        Fiducial::TEnd,
    ];
    let _ = write!(
        out,
        "<table><tr><th>{first}</th><th>beats</th><th>paired</th>"
    );
    for f in fids {
        let _ = write!(out, "<th>{} mean ± SD</th>", f.label());
    }
    out.push_str("<th>T end MAE</th></tr>\n");
    for r in rows {
        let _ = write!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td>",
            esc(&r.name),
            r.ref_beats,
            r.paired_beats
        );
        for f in fids {
            let c = r.fiducials.get(&f).map_or("–".into(), |x| {
                format!("{} ± {}", num(x.mean_ms, 1), num(x.sd_ms, 1))
            });
            let _ = write!(out, "<td>{c}</td>");
        }
        let _ = writeln!(
            out,
            "<td>{}</td></tr>",
            num(r.fiducials.get(&Fiducial::TEnd).and_then(|x| x.mae_ms), 1)
        );
    }
    out.push_str("</table>\n");
}

fn section_html(
    out: &mut String,
    id: &str,
    title: &str,
    s: &DelineationSection,
    range_ms: f64,
) -> Result<(), EvalError> {
    let _ = writeln!(
        out,
        "<h2 id={id}>{}</h2><p>Reference: {}; scored: {}. {} records, {} reference beats, {} paired.</p>",
        esc(title),
        esc(&s.reference),
        esc(&s.test),
        s.n_records,
        s.ref_beats,
        s.paired_beats
    );
    fiducial_table_html(out, s);
    stability_html(out, s);
    let cal = crate::markdown::calibration_rows(s);
    plain_table_html(
        out,
        &format!(
            "Confidence against error. {}",
            crate::markdown::CALIBRATION_INTRO
        ),
        &crate::markdown::CALIBRATION_HEADS,
        cal.iter().map(|r| r.as_slice()),
    );
    let comp = crate::markdown::component_rows(s);
    plain_table_html(
        out,
        &format!("Error components. {}", crate::markdown::COMPONENT_INTRO),
        &crate::markdown::COMPONENT_HEADS,
        comp.iter().map(|r| r.as_slice()),
    );
    out.push_str("<div class=plots>");
    for f in &s.fiducials {
        if let Some(e) = s.errors.get(&f.fiducial) {
            if !e.is_empty() {
                out.push_str(&histogram_svg(
                    &format!("{} error (n = {})", f.fiducial.label(), e.len()),
                    e,
                    range_ms,
                )?);
            }
        }
    }
    out.push_str("</div>");
    for f in [Fiducial::QrsOn, Fiducial::TEnd] {
        out.push_str(&record_bars_svg(
            &format!("{}: per-record error (sorted by T-end MAE)", f.label()),
            &s.per_record,
            f,
        )?);
    }
    if !s.per_lead_name.is_empty() {
        out.push_str("<h3>Per lead</h3>");
        rows_html(out, &s.per_lead_name, "lead");
    }
    out.push_str("<details><summary>Per-record table (sorted by T-end MAE, worst first)</summary>");
    rows_html(out, &s.per_record, "record");
    out.push_str("</details>\n");
    Ok(())
}

fn ba_rows(out: &mut String, rows: &[(&str, &BlandAltman)]) {
    out.push_str("<table><tr><th>interval</th><th>n</th><th>bias ms</th><th>SD ms</th><th>95 % limits ms</th><th>MAE ms</th></tr>\n");
    for (name, b) in rows {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{} to {}</td><td>{}</td></tr>",
            esc(name),
            b.n,
            num(b.bias_ms, 1),
            num(b.sd_ms, 1),
            num(b.loa_low_ms, 1),
            num(b.loa_high_ms, 1),
            num(b.mae_ms, 1)
        );
    }
    out.push_str("</table>\n");
}

/// Render the HTML page.
pub fn render(r: &ValidationReport) -> Result<String, EvalError> {
    let mut o = String::new();
    // Histograms span the fiducial window: no counted error lies outside it.
    let hist_range = r.protocol.fiducial_window_ms.max(20.0);
    let _ = writeln!(
        o,
        "<!DOCTYPE html><html lang=en><head><meta charset=utf-8><title>tendline validation: {db}</title><style>
body{{font-family:sans-serif;max-width:1150px;margin:1em auto;padding:0 1em;color:#222}}
table{{border-collapse:collapse;margin:.5em 0 1em}}td,th{{border:1px solid #ccc;padding:2px 6px;text-align:right;font-size:13px}}
th{{background:#f2f2f2}}td:first-child{{text-align:left}}.pass{{color:#070}}.fail{{color:#b00;font-weight:bold}}
.plots svg{{margin:2px}}code{{background:#f4f4f4}}
</style></head><body><h1>Validation report: {db}</h1><p>Generated by {gen}. Run <code>{run}</code>, data <code>{data}</code>, {n} records.</p>",
        db = esc(&r.database),
        gen = esc(&r.generator),
        run = esc(&r.run_dir),
        data = esc(&r.data_dir),
        n = r.records.len()
    );
    if let Some(b) = &r.beats {
        let ov = &b.overall;
        let _ = writeln!(
            o,
            "<h2 id=beats>Beats</h2><p>Reference: {}.</p><table><tr><th></th><th>TP</th><th>FN</th><th>FP</th><th>Se %</th><th>+P %</th></tr><tr><td>all records</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            esc(&b.reference), ov.tp, ov.fn_, ov.fp, num(ov.sensitivity_pct, 2), num(ov.ppv_pct, 2)
        );
        for x in &b.per_record {
            let _ = writeln!(
                o,
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                esc(&x.record),
                x.tp,
                x.fn_,
                x.fp,
                num(x.sensitivity_pct, 2),
                num(x.ppv_pct, 2)
            );
        }
        o.push_str("</table>\n");
        if let Some(l) = &b.labels {
            let rows: Vec<[String; 5]> = l
                .confusion
                .iter()
                .map(|x| {
                    [
                        x.reference.clone(),
                        x.n.to_string(),
                        x.v.to_string(),
                        x.q.to_string(),
                        x.other.to_string(),
                    ]
                })
                .collect();
            plain_table_html(
                &mut o,
                "Beat labels on the paired beats against the .atr codes, by ANSI/AAMI EC57 class of the reference (N: N L R e j; S: A a J S; V: V E; F: F; Q: paced and unclassifiable). The median beats average the beats labelled N and Q (never V) that pass their RR and correlation tests.",
                &["reference", "labelled N", "labelled V", "labelled Q", "other"],
                rows.iter().map(|r| r.as_slice()),
            );
            let _ = writeln!(
                o,
                "<p>Normal beats labelled N: {} %; ventricular ectopic beats: Se {} %, +P {} % (paired beats only).</p>",
                num(l.n_sensitivity_pct, 2),
                num(l.v_sensitivity_pct, 2),
                num(l.v_ppv_pct, 2)
            );
        }
    }
    if let Some(g) = &r.global {
        section_html(&mut o, "global", "Global boundaries", g, hist_range)?;
    }
    if let Some(b) = &r.best_lead {
        let _ = writeln!(
            o,
            "<h2 id=best-lead>Best lead per beat (comparison only)</h2><p>{}</p><p>Reference: {}; scored: {}. {} records, {} reference beats, {} paired.</p>",
            esc(crate::BEST_LEAD_INTRO),
            esc(&b.reference),
            esc(&b.test),
            b.n_records,
            b.ref_beats,
            b.paired_beats
        );
        fiducial_table_html(&mut o, b);
    }
    if let Some(h) = &r.human {
        let _ = writeln!(
            o,
            "<h2 id=human>Human reference</h2><p>Annotator 2 (.q2c) scored against annotator 1 (.q1c) with the same code, on {} records ({}); the tool against annotator 1 on the same beats (those both annotators selected) and fiducials below.</p><h3>Annotator 2 vs annotator 1</h3>",
            h.records.len(),
            esc(&h.records.join(", "))
        );
        fiducial_table_html(&mut o, &h.annotator);
        o.push_str("<h3>tendline vs annotator 1 (same beats)</h3>");
        fiducial_table_html(&mut o, &h.tool);
        ba_rows(
            &mut o,
            &[
                ("beat QT, annotator 2", &h.annotator_qt_beat),
                ("beat QT, tendline", &h.tool_qt_beat),
            ],
        );
        if let Some(a) = &h.annotator_qt_window {
            let mut rows: Vec<(&str, &BlandAltman)> = vec![("window QT, annotator 2", a)];
            if let Some(t) = &h.tool_qt_window {
                rows.push(("window QT, tendline (superimposed leads)", t));
            }
            ba_rows(&mut o, &rows);
        }
        let comp = crate::markdown::human_component_rows(h);
        plain_table_html(
            &mut o,
            &format!(
                "Error components, same beats. {}",
                crate::markdown::HUMAN_COMPONENT_INTRO
            ),
            &crate::markdown::HUMAN_COMPONENT_HEADS,
            comp.iter().map(|r| r.as_slice()),
        );
    }
    if let Some(p) = &r.per_lead {
        section_html(&mut o, "perlead", "Per-lead boundaries", p, hist_range)?;
    }
    if let Some(q) = &r.qt {
        let _ = writeln!(
            o,
            "<h2 id=qt>QT, QRS and PR intervals</h2><p>Reference: {}.</p>",
            esc(&q.reference)
        );
        let mut rows = vec![("beat, global marks", &q.beat)];
        if let Some(b) = &q.beat_per_lead {
            rows.push(("beat, per lead", b));
        }
        if let Some(b) = &q.window_superimposed {
            rows.push(("window, superimposed leads", b));
        }
        if let Some(b) = &q.window_single {
            rows.push(("window, single lead", b));
        }
        if let Some(b) = &q.window_superimposed_lead_ref {
            rows.push(("window, superimposed leads, vs longest reference lead", b));
        }
        if let Some(b) = &q.window_single_lead_ref {
            rows.push(("window, single lead, vs longest reference lead", b));
        }
        if let Some(b) = &q.window_qrs {
            rows.push(("window QRS duration", b));
        }
        if let Some(b) = &q.window_pr {
            rows.push(("window PR interval", b));
        }
        if let Some(b) = &q.window_p {
            rows.push(("window P duration", b));
        }
        if let Some(b) = &q.window_tpe {
            rows.push(("window T peak to T end", b));
        }
        if let Some(b) = &q.window_tpe_lead_ref {
            rows.push(("window T peak to T end, vs the same reference lead", b));
        }
        if let Some(b) = &q.window_qt_dispersion_lead_ref {
            rows.push(("window QT dispersion, vs the reference leads", b));
        }
        ba_rows(&mut o, &rows);
        let st = crate::markdown::qt_stability_rows(q);
        plain_table_html(
            &mut o,
            "Window intervals over records: 95 % bootstrap intervals (records resampled) and the two halves of the record list.",
            &crate::markdown::QT_STABILITY_HEADS,
            st.iter().map(|r| r.as_slice()),
        );
        let sp = crate::markdown::qt_split_rows(q, r.human.as_ref());
        plain_table_html(
            &mut o,
            crate::markdown::QT_SPLIT_INTRO,
            &crate::markdown::QT_SPLIT_HEADS,
            sp.iter().map(|r| r.as_slice()),
        );
        let fr = crate::markdown::flag_rows(q);
        plain_table_html(
            &mut o,
            crate::markdown::FLAG_INTRO,
            &crate::markdown::FLAG_HEADS,
            fr.iter().map(|r| r.as_slice()),
        );
        if let Some(rows) = q
            .window_stability
            .as_ref()
            .filter(|s| s.pairs > 0)
            .map(crate::markdown::window_step_rows)
        {
            plain_table_html(
                &mut o,
                crate::markdown::WINDOW_STEP_INTRO,
                &crate::markdown::WINDOW_STEP_HEADS,
                rows.iter().map(|r| r.as_slice()),
            );
        }
        o.push_str("<div class=plots>");
        for (name, b) in rows {
            if b.n > 0 {
                o.push_str(&bland_altman_svg(
                    &format!("QT {name}: Bland–Altman (n = {})", b.n),
                    b,
                )?);
            }
        }
        o.push_str("</div>\n");
    }
    if !r.worst_beats.is_empty() {
        o.push_str("<h2 id=worst>Worst beats</h2><p>Green (top): reference marks; orange (bottom): tendline's marks.</p><div class=plots>");
        for b in &r.worst_beats {
            if b.strip.is_some() {
                o.push_str(&strip_svg(b)?);
            } else {
                let _ = writeln!(
                    o,
                    "<p>{} lead {}: {} error {:+.0} ms (signal not available)</p>",
                    esc(&b.record),
                    esc(&b.lead),
                    b.fiducial.label(),
                    b.error_ms
                );
            }
        }
        o.push_str("</div>\n");
    }
    let _ = writeln!(
        o,
        "<h2 id=protocol>Protocol</h2><p>Beat window {} ms, fiducial window {} ms, window QT needs ≥ {} reference beats.</p><ul>",
        r.protocol.beat_window_ms, r.protocol.fiducial_window_ms, r.protocol.min_window_beats
    );
    for rule in &r.protocol.rules {
        let _ = writeln!(o, "<li>{}</li>", esc(rule));
    }
    o.push_str("</ul>");
    if !r.warnings.is_empty() {
        o.push_str("<h2>Warnings</h2><ul>");
        for w in &r.warnings {
            let _ = writeln!(o, "<li>{}</li>", esc(w));
        }
        o.push_str("</ul>");
    }
    o.push_str("</body></html>\n");
    Ok(o)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn svg_plots_contain_text_without_font_files() {
        let s = histogram_svg("T end error", &[-3.0, 1.0, 2.0, 500.0], 150.0).unwrap();
        assert!(s.starts_with("<svg"), "{}", &s[..40.min(s.len())]);
        assert!(s.contains("T end error"));
        assert!(s.contains("<text"));
        let ba = BlandAltman::from_pairs(&[(400.0, 390.0), (420.0, 415.0), (380.0, 390.0)]);
        let s = bland_altman_svg("QT", &ba).unwrap();
        assert!(s.contains("bias"));
    }
}
