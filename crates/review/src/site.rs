//! The static review site: an index of records by review priority and one page per
//! record with the rhythm strip, median beats with their marks on the ECG grid, the
//! QT/QTc table and the correction tools (inline JavaScript, no network).

use crate::run::Run;
use crate::util::{
    attr_f64, attr_text, attr_texts, data_at, esc, f64s, group_at, i64s, median_finite, ms, texts,
};
use crate::ReviewError;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use tendline_store::{Data, Group};

/// Paper speed (mm/s) and gain (mm/mV) of the standard ECG grid (common practice).
const MM_PER_S: f64 = 25.0;
const MM_PER_MV: f64 = 10.0;
/// Seconds of the rhythm strip.
const STRIP_S: f64 = 10.0;

/// What [`build_site`] wrote.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteSummary {
    pub index: PathBuf,
    /// One page per record with results, in priority order.
    pub pages: Vec<PathBuf>,
    pub priorities: Vec<Priority>,
    /// Problems that did not stop the site (an input record that could not be read
    /// for the rhythm strip, a record without a part).
    pub warnings: Vec<String>,
}

/// Why a record should be read early; higher `score` first.
#[derive(Debug, Clone, PartialEq)]
pub struct Priority {
    pub record: String,
    pub score: f64,
    pub reasons: Vec<String>,
    /// Median over beats of the lowest confidence among QRS onset, QRS end and T end
    /// of the global marks (absent mark = 0); NaN without beats.
    pub mark_confidence: f64,
    /// Median over beats of |T end (wavelet) − T end (tangent)| of the global marks, ms.
    pub t_end_disagreement_ms: f64,
    pub qtc_ms: f64,
    pub qtc_flag: String,
}

/// Review priority of one record from its part group.
///
/// Score: 2·(1 − mark confidence) + 2 for a QTc flag other than `normal` + 1 for
/// unreadable stretches + 1 for a noisy lead left out (`unreadable_noise`) + 1 for
/// a lead whose QT jumps between windows (`qt_inconsistent`) + 1 for pacing
/// stimuli removed (`pacing_spikes`: paced QRS onsets and QT need a look) +
/// min(T-end disagreement / 20 ms, 2). Reasons are listed for confidence below 0.5,
/// a non-normal QTc flag, unreadable stretches, noisy leads, jumping QTs, pacing
/// stimuli and a T-end disagreement above 10 ms. The weights are this crate's choice, not a
/// published scale.
pub fn priority(g: &Group, record: &str) -> Priority {
    let fs = attr_f64(g, "fs").unwrap_or(f64::NAN);
    let conf = |f: &str| f64s(g, &format!("marks/global/{f}_confidence")).unwrap_or_default();
    let (a, b, c) = (conf("qrs_on"), conf("qrs_end"), conf("t_end"));
    let n = a.len().min(b.len()).min(c.len());
    let z = |v: f64| if v.is_finite() { v } else { 0.0 };
    let mark_confidence = median_finite((0..n).map(|i| z(a[i]).min(z(b[i])).min(z(c[i]))));
    let wav = i64s(g, "marks/global/t_end_wavelet").unwrap_or(&[]);
    let tan = i64s(g, "marks/global/t_end_tangent").unwrap_or(&[]);
    let t_end_disagreement_ms = median_finite(
        wav.iter()
            .zip(tan)
            .filter(|(a, b)| **a >= 0 && **b >= 0)
            .map(|(a, b)| (a - b).abs() as f64 / fs * 1000.0),
    );
    let qtc_ms = attr_f64(g, "qtc_ms").unwrap_or(f64::NAN);
    let qtc_flag = attr_text(g, "qtc_flag").unwrap_or("unknown").to_string();
    let flags = attr_text(g, "flags").unwrap_or("");
    let n_unreadable = i64s(g, "unreadable/start").map_or(0, |v| v.len());
    let mut score = 0.0;
    let mut reasons = Vec::new();
    if mark_confidence.is_finite() {
        score += 2.0 * (1.0 - mark_confidence);
        if mark_confidence < 0.5 {
            reasons.push(format!("low mark confidence {mark_confidence:.2}"));
        }
    } else {
        score += 2.0;
        reasons.push("no marked beats".into());
    }
    if qtc_flag != "normal" {
        score += 2.0;
        reasons.push(format!(
            "QTc {} ({} ms)",
            qtc_flag.replace('_', " "),
            ms(qtc_ms)
        ));
    }
    if n_unreadable > 0 {
        score += 1.0;
        reasons.push(format!("{n_unreadable} unreadable stretch(es)"));
    }
    if flags.split(';').any(|f| f == "unreadable_noise") {
        score += 1.0;
        reasons.push("noisy lead(s) left out of QT".into());
    }
    if flags.split(';').any(|f| f == "qt_inconsistent") {
        score += 1.0;
        reasons.push(match attr_f64(g, "n_windows_inconsistent") {
            Some(k) => format!("a lead's QT jumps between windows ({k:.0} window(s))"),
            None => "a lead's QT jumps between windows".into(),
        });
    }
    let n_paced = attr_f64(g, "pacing_spikes").unwrap_or(0.0);
    if n_paced > 0.0 {
        score += 1.0;
        reasons.push(format!(
            "{n_paced:.0} pacing stimulus artifact(s) removed: paced beats"
        ));
    }
    if t_end_disagreement_ms.is_finite() {
        score += (t_end_disagreement_ms / 20.0).min(2.0);
        if t_end_disagreement_ms > 10.0 {
            reasons.push(format!(
                "T-end methods disagree by {t_end_disagreement_ms:.0} ms"
            ));
        }
    }
    Priority {
        record: record.to_string(),
        score,
        reasons,
        mark_confidence,
        t_end_disagreement_ms,
        qtc_ms,
        qtc_flag,
    }
}

/// Build the review site of the run at `run_dir` into `out_dir` (created if needed):
/// `index.html` and `<record>.html` per record with results.
pub fn build_site(run_dir: &Path, out_dir: &Path) -> Result<SiteSummary, ReviewError> {
    let run = Run::load(run_dir)?;
    std::fs::create_dir_all(out_dir).map_err(|source| ReviewError::Io {
        path: out_dir.to_path_buf(),
        source,
    })?;
    let mut warnings = Vec::new();
    let mut items = Vec::new();
    for rec in &run.records {
        match run.part(&rec.record)? {
            Some(p) => items.push((rec, p)),
            None => warnings.push(format!(
                "{}: no results (status {})",
                rec.record,
                rec.status.as_deref().unwrap_or("unknown")
            )),
        }
    }
    let mut pri: Vec<(Priority, usize)> = items
        .iter()
        .enumerate()
        .map(|(i, (r, p))| (priority(&p.group, &r.record), i))
        .collect();
    pri.sort_by(|a, b| {
        b.0.score
            .total_cmp(&a.0.score)
            .then_with(|| a.0.record.cmp(&b.0.record))
    });
    let mut pages = Vec::new();
    for (p, i) in &pri {
        let (rec, part) = &items[*i];
        let strip = match run.input_path(rec) {
            Some(path) => match tendline_formats::read_record(
                &path,
                &tendline_formats::ReadOptions::default(),
            ) {
                Ok(r) => Ok(r),
                Err(e) => Err(format!("{}: {e}", path.display())),
            },
            None => Err(format!(
                "input file {:?} not found",
                rec.path.as_deref().unwrap_or("")
            )),
        };
        if let Err(e) = &strip {
            warnings.push(format!("{}: rhythm strip left out: {e}", rec.record));
        }
        let html = record_page(&rec.record, &part.group, p, strip.as_ref().ok());
        let path = out_dir.join(format!("{}.html", file_name(&rec.record)));
        write(&path, &html)?;
        pages.push(path);
    }
    let index = out_dir.join("index.html");
    write(
        &index,
        &index_page(&pri.iter().map(|(p, _)| p.clone()).collect::<Vec<_>>()),
    )?;
    Ok(SiteSummary {
        index,
        pages,
        priorities: pri.into_iter().map(|(p, _)| p).collect(),
        warnings,
    })
}

fn file_name(record: &str) -> String {
    record
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

fn write(path: &Path, s: &str) -> Result<(), ReviewError> {
    tendline_store::write_atomic(path, s.as_bytes()).map_err(Into::into)
}

const CSS: &str = r#"
body{font-family:system-ui,sans-serif;margin:16px;color:#222}
table{border-collapse:collapse;margin:8px 0}td,th{border:1px solid #ccc;padding:3px 6px;font-size:13px;text-align:right;white-space:nowrap}
th{background:#f3f3f3}td.l,th.l{text-align:left}
.caution{background:#fff4d6;border:1px solid #e0b94c;padding:6px 10px;margin:8px 0}
.bar{position:sticky;top:0;background:#fff;padding:6px 0;border-bottom:1px solid #ddd;z-index:5}
.bar button{margin-right:4px}.bar input{margin-right:8px}
.leads{display:flex;flex-wrap:wrap;gap:10px}.lead{border:1px solid #eee;padding:2px}
.lead h4{margin:2px 0;font-size:12px}.off{color:#999}
svg.ecg{display:block;background:#fff}
.trace{fill:none;stroke:#111;stroke-width:0.25;stroke-linejoin:round}
.mark line.v{stroke-width:0.2}.mark line.hit{stroke:transparent;stroke-width:2.5;cursor:ew-resize}
.mark text{font-size:2px;font-family:sans-serif}
.mark.p line.v{stroke:#1a7f37}.mark.p text{fill:#1a7f37}
.mark.q line.v{stroke:#0b5cad}.mark.q text{fill:#0b5cad}
.mark.t line.v{stroke:#a3238e}.mark.t text{fill:#a3238e}
.mark.moved line.v{stroke-dasharray:1 0.6}
.mark.sel line.v{stroke:#e36209;stroke-width:0.6}.mark.sel text{fill:#e36209;font-weight:bold}
.mark:focus{outline:none}
rect.beat{fill:transparent;cursor:pointer}rect.beat.on{fill:#e36209;fill-opacity:0.12}rect.beat.bad{fill:#d1242f;fill-opacity:0.25}
#changes{font-size:12px}
"#;

/// Grid patterns, defined once per page and used by every ECG SVG.
const GRID_DEFS: &str = r##"<svg width="0" height="0" style="position:absolute" aria-hidden="true"><defs>
<pattern id="grid-minor" width="1" height="1" patternUnits="userSpaceOnUse"><path d="M1 0H0V1" fill="none" stroke="#f6c3c3" stroke-width="0.06"/></pattern>
<pattern id="grid-major" width="5" height="5" patternUnits="userSpaceOnUse"><path d="M5 0H0V5" fill="none" stroke="#e58f8f" stroke-width="0.15"/></pattern>
</defs></svg>"##;

fn index_page(pri: &[Priority]) -> String {
    let mut s = String::new();
    let _ = write!(
        s,
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>tendline review</title><style>{CSS}</style></head><body>\
         <h1>Review: records by priority</h1><p class=\"caution\">{}</p>\
         <p>Highest priority first: low mark confidence, QTc flags other than normal, unreadable stretches or noisy leads, disagreement between T-end methods.</p>\
         <table id=\"records\"><tr><th>#</th><th class=\"l\">record</th><th>score</th><th>QTc (ms)</th><th class=\"l\">QTc flag</th><th>mark confidence</th><th>T-end disagreement (ms)</th><th class=\"l\">reasons</th></tr>",
        esc(tendline_measure::CAUTION)
    );
    for (i, p) in pri.iter().enumerate() {
        let _ = write!(
            s,
            "<tr><td>{}</td><td class=\"l\"><a href=\"{}.html\">{}</a></td><td>{:.2}</td><td>{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td></tr>",
            i + 1,
            esc(&file_name(&p.record)),
            esc(&p.record),
            p.score,
            ms(p.qtc_ms),
            esc(&p.qtc_flag),
            if p.mark_confidence.is_finite() { format!("{:.2}", p.mark_confidence) } else { "—".into() },
            if p.t_end_disagreement_ms.is_finite() { format!("{:.0}", p.t_end_disagreement_ms) } else { "—".into() },
            esc(&p.reasons.join("; "))
        );
    }
    s.push_str("</table></body></html>\n");
    s
}

/// The editable marks shown on the median beats: (name, label, wave class, label row).
const SHOWN: [(&str, &str, &str, u8); 9] = [
    ("p_on", "P(", "p", 0),
    ("p_peak", "P", "p", 1),
    ("p_end", "P)", "p", 2),
    ("qrs_on", "QRS(", "q", 0),
    ("qrs_peak", "R", "q", 1),
    ("qrs_end", "QRS)", "q", 2),
    ("t_on", "T(", "t", 0),
    ("t_peak", "T", "t", 1),
    ("t_end", "T)", "t", 2),
];

fn f(v: f64) -> String {
    format!("{v:.2}")
}

/// Polyline points in mm of `y` (mV) at `fs`, starting at x = 0, baseline at `y0` mm.
/// Long signals are reduced to the min and max of each 0.2 mm column, which keeps
/// every peak visible at any zoom the page offers.
fn points(y: &[f64], fs: f64, y0: f64, lo_mm: f64, hi_mm: f64) -> String {
    let mm_per_sample = MM_PER_S / fs;
    let col = (0.2 / mm_per_sample).floor().max(1.0) as usize;
    let ymm = |v: f64| (y0 - v * MM_PER_MV).clamp(lo_mm, hi_mm);
    let mut s = String::new();
    if col <= 2 {
        for (k, &v) in y.iter().enumerate() {
            if v.is_finite() {
                let _ = write!(s, "{},{} ", f(k as f64 * mm_per_sample), f(ymm(v)));
            }
        }
        return s;
    }
    for (c, chunk) in y.chunks(col).enumerate() {
        let fin = chunk
            .iter()
            .copied()
            .enumerate()
            .filter(|(_, v)| v.is_finite());
        let (mut lo, mut hi) = ((0, f64::INFINITY), (0, f64::NEG_INFINITY));
        for (k, v) in fin {
            if v < lo.1 {
                lo = (k, v);
            }
            if v > hi.1 {
                hi = (k, v);
            }
        }
        if !lo.1.is_finite() {
            continue;
        }
        let (a, b) = if lo.0 <= hi.0 { (lo, hi) } else { (hi, lo) };
        for (k, v) in [a, b] {
            let _ = write!(
                s,
                "{},{} ",
                f((c * col + k) as f64 * mm_per_sample),
                f(ymm(v))
            );
        }
    }
    s
}

fn grid_rects(w: f64, h: f64) -> String {
    format!(
        "<rect class=\"grid\" width=\"{0}\" height=\"{1}\" fill=\"url(#grid-minor)\"/><rect class=\"grid\" width=\"{0}\" height=\"{1}\" fill=\"url(#grid-major)\"/>",
        f(w),
        f(h)
    )
}

/// An ECG SVG in millimetre user units, rendered at `px_per_mm` before zooming.
fn svg_open(w: f64, h: f64, px_per_mm: f64, extra: &str) -> String {
    format!(
        "<svg class=\"ecg\" xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {0} {1}\" width=\"{2}\" height=\"{3}\" data-wmm=\"{0}\" data-hmm=\"{1}\" data-base=\"{px_per_mm}\" {extra}>",
        f(w),
        f(h),
        f(w * px_per_mm),
        f(h * px_per_mm)
    )
}

/// The first seconds of a few leads, with the stretches the run found unreadable
/// shaded and the global per-beat QRS onset and T end of the run as ticks (read-only).
fn rhythm_strip(rec: &tendline_formats::Record, g: &Group) -> String {
    let mut s = String::from("<h2>Rhythm strip (first 10 s)</h2><p class=\"off\">Grey: stretch the run found unreadable. Purple ticks at the top: pacing stimuli the run removed before filtering. QRSon and Tend: the per-beat global marks; move them like the median-beat marks. Click a beat and press U to mark it unreadable (red); U again undoes it.</p>");
    let want = ["II", "V1", "V5"];
    let mut idx: Vec<usize> = want
        .iter()
        .filter_map(|w| {
            rec.leads
                .iter()
                .position(|l| l.name.eq_ignore_ascii_case(w))
        })
        .collect();
    if idx.is_empty() {
        idx = (0..rec.leads.len().min(3)).collect();
    }
    let n = ((STRIP_S * rec.fs) as usize).min(rec.leads.first().map_or(0, |l| l.samples.len()));
    let w = n as f64 / rec.fs * MM_PER_S;
    let h = 30.0;
    let x = |k: i64| k as f64 / rec.fs * MM_PER_S;
    let mut overlay = String::new();
    let starts = i64s(g, "unreadable/start").unwrap_or(&[]);
    let ends = i64s(g, "unreadable/end").unwrap_or(&[]);
    for (&a, &b) in starts.iter().zip(ends) {
        if a < n as i64 && b > 0 {
            let (a, b) = (x(a.max(0)), x(b.min(n as i64)));
            let _ = write!(
                overlay,
                "<rect class=\"unreadable\" x=\"{}\" width=\"{}\" height=\"{}\" fill=\"#888\" fill-opacity=\"0.25\"/>",
                f(a),
                f(b - a),
                f(h)
            );
        }
    }
    // Pacing stimuli the run removed before filtering (the strip shows the
    // signal as read, spikes included): a thin mark above each.
    let p_starts = i64s(g, "pacing/start").unwrap_or(&[]);
    for &a in p_starts {
        if a >= 0 && a < n as i64 {
            let _ = write!(
                overlay,
                "<line class=\"pace\" x1=\"{0}\" x2=\"{0}\" y1=\"0\" y2=\"2\" stroke=\"#a0a\" stroke-width=\"0.3\"><title>pacing stimulus at sample {a}, removed before filtering</title></line>",
                f(x(a))
            );
        }
    }
    // Per-beat marks of the run (current values after imported corrections), and a
    // beat handle (the span around each QRS peak) to select a beat for `U`.
    let peaks = i64s(g, "beats/qrs_peak").unwrap_or(&[]);
    let reader_bad = i64s(g, "beats/unreadable_reader").unwrap_or(&[]);
    for (i, &p) in peaks.iter().enumerate() {
        if p < 0 || p >= n as i64 {
            continue;
        }
        let done = reader_bad.get(i).is_some_and(|&u| u != 0);
        let a = x((p as f64 - 0.2 * rec.fs) as i64).max(0.0);
        let b = x((p as f64 + 0.45 * rec.fs) as i64).min(w);
        let _ = write!(
            overlay,
            "<rect class=\"beat{}\" data-beat=\"{i}\" x=\"{}\" width=\"{}\" height=\"{}\"><title>beat {i}{}</title></rect>",
            if done { " bad done" } else { "" },
            f(a),
            f((b - a).max(0.0)),
            f(h),
            if done { " (unreadable, imported)" } else { "" }
        );
    }
    for (fid, class, text, y0) in [
        ("qrs_on", "q", "QRSon", 0.0),
        ("t_end", "t", "Tend", h - 3.0),
    ] {
        let auto = i64s(g, &format!("marks/global/{fid}")).unwrap_or(&[]);
        let cur = i64s(g, &format!("marks/corrected/global/{fid}")).unwrap_or(auto);
        for (i, (&a, &k)) in auto.iter().zip(cur).enumerate() {
            if k < 0 || k >= n as i64 || reader_bad.get(i).is_some_and(|&u| u != 0) {
                continue;
            }
            let _ = write!(
                overlay,
                "<g class=\"mark bmark {class}{}\" tabindex=\"0\" data-beat=\"{i}\" data-lead=\"global\" data-f=\"{fid}\" data-auto=\"{a}\" data-s=\"{k}\" data-fs=\"{}\" transform=\"translate({},0)\"><title>beat {i} {fid} at sample {k}</title>\
                 <line class=\"hit\" x1=\"0\" x2=\"0\" y1=\"0\" y2=\"{}\"/><line class=\"v\" x1=\"0\" x2=\"0\" y1=\"{}\" y2=\"{}\"/><text x=\"0.4\" y=\"{}\">{text}</text></g>",
                if k != a { " moved" } else { "" },
                rec.fs,
                f(x(k)),
                f(h),
                f(y0),
                f(y0 + 3.0),
                f(y0 + 2.2),
            );
        }
    }
    for &l in &idx {
        let y = &rec.leads[l].samples[..n.min(rec.leads[l].samples.len())];
        let base = median_finite(y.iter().copied());
        let base = if base.is_finite() { base } else { 0.0 };
        let centered: Vec<f64> = y.iter().map(|v| v - base).collect();
        let _ = write!(
            s,
            "<div class=\"lead\"><h4>{} <span class=\"off\">(baseline-centred, clipped at ±1.5 mV)</span></h4>{}{}{overlay}<polyline class=\"trace\" points=\"{}\"/></svg></div>",
            esc(&rec.leads[l].name),
            svg_open(w, h, 4.0, &format!("data-kind=\"strip\" data-n=\"{n}\"")),
            grid_rects(w, h),
            points(&centered, rec.fs, h / 2.0, 0.0, h)
        );
    }
    s
}

/// One lead's median beat with its marks.
#[allow(clippy::too_many_arguments)]
fn median_svg(
    g: &Group,
    w: usize,
    l: usize,
    name: &str,
    row: &[f32],
    fs: f64,
    usable: bool,
    accepted: bool,
) -> String {
    let n = row.len();
    let y: Vec<f64> = row.iter().map(|&v| v as f64).collect();
    let fin = y.iter().copied().filter(|v| v.is_finite());
    let (mut lo, mut hi) = fin.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
        (a.min(v), b.max(v))
    });
    if !lo.is_finite() {
        (lo, hi) = (-1.0, 1.0);
    }
    // Whole 5 mm squares above and below, at least 0.5 mV of room each side.
    let top_mm = ((hi.max(0.5) + 0.2) * MM_PER_MV / 5.0).ceil() * 5.0;
    let bot_mm = ((-lo).max(0.5) * MM_PER_MV / 5.0 + 0.04).ceil() * 5.0;
    let label = 10.0;
    let h = label + top_mm + bot_mm;
    let wmm = n as f64 / fs * MM_PER_S;
    let y0 = label + top_mm;
    let mut s = String::new();
    let state = if !usable {
        " <span class=\"off\">(not measured)</span>"
    } else if accepted {
        " <span>(QT accepted)</span>"
    } else {
        " <span class=\"off\">(QT not accepted)</span>"
    };
    let _ = write!(
        s,
        "<div class=\"lead\"><h4>{}{state}</h4>{}{}<polyline class=\"trace\" points=\"{}\"/>",
        esc(name),
        svg_open(
            wmm,
            h,
            8.0,
            &format!("data-kind=\"median\" data-w=\"{w}\" data-n=\"{n}\" data-fs=\"{fs}\"")
        ),
        grid_rects(wmm, h),
        points(&y, fs, y0, 0.0, h)
    );
    if usable {
        let mdir = format!("windows/medians/{w:03}");
        for (fid, text, class, rowi) in SHOWN {
            let auto = i64s(g, &format!("{mdir}/marks/{fid}"))
                .and_then(|v| v.get(l).copied())
                .unwrap_or(-1);
            let cur = i64s(g, &format!("{mdir}/corrected/marks/{fid}"))
                .and_then(|v| v.get(l).copied())
                .unwrap_or(auto);
            if cur < 0 || cur as usize >= n {
                continue;
            }
            let x = cur as f64 / fs * MM_PER_S;
            let ty = 3.0 + 3.0 * rowi as f64;
            let _ = write!(
                s,
                "<g class=\"mark {class}{}\" tabindex=\"0\" data-w=\"{w}\" data-lead=\"{}\" data-f=\"{fid}\" data-auto=\"{auto}\" data-s=\"{cur}\" data-fs=\"{fs}\" transform=\"translate({},0)\"><title>{fid} at sample {cur} of the median beat</title>\
                 <line class=\"hit\" x1=\"0\" x2=\"0\" y1=\"0\" y2=\"{}\"/><line class=\"v\" x1=\"0\" x2=\"0\" y1=\"{}\" y2=\"{}\"/><text x=\"0.4\" y=\"{}\">{}</text></g>",
                if cur != auto { " moved" } else { "" },
                esc(name),
                f(x),
                f(h),
                f(ty + 0.6),
                f(h),
                f(ty),
                esc(text)
            );
        }
    }
    s.push_str("</svg></div>");
    s
}

fn col_f(g: &Group, name: &str, i: usize) -> f64 {
    f64s(g, &format!("windows/{name}"))
        .and_then(|v| v.get(i).copied())
        .unwrap_or(f64::NAN)
}

fn col_t(g: &Group, name: &str, i: usize) -> String {
    texts(g, &format!("windows/{name}"))
        .and_then(|v| v.get(i).cloned())
        .unwrap_or_default()
}

fn record_page(
    record: &str,
    g: &Group,
    p: &Priority,
    strip: Option<&tendline_formats::Record>,
) -> String {
    let fs = attr_f64(g, "fs").unwrap_or(f64::NAN);
    let leads: Vec<String> = attr_texts(g, "leads").unwrap_or(&[]).to_vec();
    let n_windows = f64s(g, "windows/start_s").map_or(0, |v| v.len());
    let qt_rule = group_at(g, "windows")
        .and_then(|w| attr_text(w, "qt_rule"))
        .or_else(|| attr_text(g, "qt_rule"))
        .unwrap_or("");
    let formula = attr_text(g, "qtc_formula").unwrap_or("");
    let mut s = String::new();
    let _ = write!(
        s,
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>{r} — tendline review</title><style>{CSS}</style></head><body data-record=\"{r}\">{GRID_DEFS}\
         <p><a href=\"index.html\">← all records</a></p><h1>Record {r}</h1>\
         <p>fs {fs} Hz · {nl} leads · sex {sex} · QT rule <b>{rule}</b> · preferred QTc <b>{formula}</b> · record QTc {qtc} ms ({flag})</p>\
         <p>Review priority {score:.2}: {reasons}</p><p>Record flags: {flags}</p><p class=\"caution\">{caution}</p>",
        r = esc(record),
        nl = leads.len(),
        sex = esc(attr_text(g, "sex").unwrap_or("unknown")),
        rule = esc(qt_rule),
        formula = esc(formula),
        qtc = ms(attr_f64(g, "qtc_ms").unwrap_or(f64::NAN)),
        flag = esc(attr_text(g, "qtc_flag").unwrap_or("")),
        score = p.score,
        reasons = esc(&if p.reasons.is_empty() { "no specific reason".to_string() } else { p.reasons.join("; ") }),
        flags = esc(attr_text(g, "flags").filter(|f| !f.is_empty()).unwrap_or("none")),
        caution = esc(attr_text(g, "caution").unwrap_or(tendline_measure::CAUTION)),
    );
    s.push_str(
        "<div class=\"bar\"><button id=\"zoom-out\" type=\"button\">−</button><span id=\"zoomval\">100%</span> <button id=\"zoom-in\" type=\"button\">+</button> \
         <label>who <input id=\"who\" size=\"14\" placeholder=\"reader name\"></label><label>reason <input id=\"reason\" size=\"28\" placeholder=\"why the change\"></label>\
         <button id=\"revert\" type=\"button\">Revert selected</button> <button id=\"revert-all\" type=\"button\">Revert all</button> \
         <button id=\"save\" type=\"button\">Save corrections (JSON)</button> <button id=\"save-csv\" type=\"button\">Save as CSV</button> <span id=\"status\">Click a mark, drag it or use ←/→ (one sample per press); Backspace reverts it. Ctrl+wheel zooms.</span>\
         <div id=\"changes\"></div></div>",
    );

    // QT/QTc table.
    s.push_str("<h2>QT and QTc per window</h2><table id=\"qt\"><tr><th>window</th><th>start–end (s)</th><th>beats</th><th>RR (ms)</th><th>HR (bpm)</th><th>QT (ms)</th><th class=\"l\">rule / lead</th><th>QT superimposed</th><th>QRS</th><th>PR</th><th title=\"P-wave duration\">P</th><th title=\"T peak to T end on the QT lead\">Tp-e</th><th title=\"QT dispersion (longest minus shortest lead QT)\">QTd</th><th>QTcB</th><th>QTcF</th><th>QTcFram</th><th>QTcH</th><th>QTc ({formula})</th><th class=\"l\">QTc flag</th><th class=\"l\">flags</th><th class=\"l\">unreadable</th></tr>".replace("{formula}", &esc(formula)).as_str());
    for w in 0..n_windows {
        let lead = col_t(g, "qt_lead", w);
        let rule = if qt_rule == "longest_lead" && !lead.is_empty() {
            format!("longest lead: {lead}")
        } else {
            qt_rule.replace('_', " ")
        };
        let flags = col_t(g, "flags", w);
        let reader_unreadable = flags.split(';').any(|f| f == "unreadable_reader");
        let _ = write!(
            s,
            "<tr><td><a href=\"#w{w}\">{w}</a></td><td>{:.1}–{:.1}</td><td>{}</td><td>{}</td><td>{}</td><td><b>{}</b></td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td>\
             <td class=\"l\"><label><input type=\"checkbox\" class=\"unread\" data-w=\"{w}\"{}> mark</label></td></tr>",
            col_f(g, "start_s", w),
            col_f(g, "end_s", w),
            ms(col_f(g, "n_beats", w)),
            ms(col_f(g, "rr_ms", w)),
            ms(col_f(g, "hr_bpm", w)),
            ms(col_f(g, "qt_ms", w)),
            esc(&rule),
            ms(col_f(g, "qt_superimposed_ms", w)),
            ms(col_f(g, "qrs_ms", w)),
            ms(col_f(g, "pr_ms", w)),
            ms(col_f(g, "p_ms", w)),
            ms(col_f(g, "tpe_ms", w)),
            ms(col_f(g, "qt_dispersion_ms", w)),
            ms(col_f(g, "qtc_bazett_ms", w)),
            ms(col_f(g, "qtc_fridericia_ms", w)),
            ms(col_f(g, "qtc_framingham_ms", w)),
            ms(col_f(g, "qtc_hodges_ms", w)),
            ms(col_f(g, "qtc_ms", w)),
            esc(&col_t(g, "qtc_flag", w)),
            esc(&flags),
            if reader_unreadable { " checked disabled" } else { "" },
        );
    }
    s.push_str("</table>");
    // Short records show the classification sentences; long ones fold them away.
    let _ = write!(
        s,
        "<details{}><summary>Classification per window</summary>",
        if n_windows <= 3 { " open" } else { "" }
    );
    for w in 0..n_windows {
        let c = col_t(g, "classification", w);
        if !c.is_empty() {
            let _ = write!(s, "<p>Window {w}: {}</p>", esc(&c));
        }
    }
    s.push_str("</details>");

    s.push_str(&audit_table(g));
    match strip {
        Some(r) => s.push_str(&rhythm_strip(r, g)),
        None => s.push_str("<h2>Rhythm strip</h2><p class=\"off\">The input record could not be read; see the warnings of the review command.</p>"),
    }

    s.push_str("<h2>Median beats (25 mm/s, 10 mm/mV)</h2>");
    for w in 0..n_windows {
        let mdir = format!("windows/medians/{w:03}");
        let (cols, values) = match data_at(g, &format!("{mdir}/beat")) {
            Some(Data::F32Matrix { cols, values }) => (*cols, values.as_slice()),
            _ => (0, &[][..]),
        };
        let _ = write!(
            s,
            "<h3 id=\"w{w}\">Window {w} ({:.1}–{:.1} s)</h3>",
            col_f(g, "start_s", w),
            col_f(g, "end_s", w)
        );
        if cols == 0 {
            s.push_str("<p class=\"off\">No median beat (too few beats).</p>");
            continue;
        }
        let usable = i64s(g, &format!("{mdir}/usable")).unwrap_or(&[]);
        let acc = i64s(g, &format!("{mdir}/corrected/qt_accepted"))
            .or_else(|| i64s(g, &format!("{mdir}/qt_accepted")))
            .unwrap_or(&[]);
        s.push_str("<div class=\"leads\">");
        for (l, name) in leads.iter().enumerate() {
            let Some(row) = values.get(l * cols..(l + 1) * cols) else {
                continue;
            };
            s.push_str(&median_svg(
                g,
                w,
                l,
                name,
                row,
                fs,
                usable.get(l).is_some_and(|&u| u != 0),
                acc.get(l).is_some_and(|&u| u != 0),
            ));
        }
        s.push_str("</div>");
    }
    let _ = writeln!(
        s,
        "<script>{}</script></body></html>",
        SCRIPT.replace("__FORMAT__", crate::FORMAT)
    );
    s
}

/// Page behaviour: zoom, selecting and moving marks, unreadable windows, saving.
const SCRIPT: &str = r#"
(function(){
'use strict';
var REC = document.body.dataset.record;
var zoom = 1, sel = null, drag = null, selBeat = null;
var changes = new Map();
function $(id){ return document.getElementById(id); }
function setZoom(z){
  zoom = Math.max(0.25, Math.min(8, z));
  document.querySelectorAll('svg.ecg').forEach(function(svg){
    var k = svg.dataset.base * zoom;
    svg.setAttribute('width', (svg.dataset.wmm * k).toFixed(1));
    svg.setAttribute('height', (svg.dataset.hmm * k).toFixed(1));
  });
  $('zoomval').textContent = Math.round(zoom * 100) + '%';
}
function who(){ return $('who').value.trim(); }
function reason(){ return $('reason').value.trim(); }
function renderList(){
  var list = Array.from(changes.values());
  $('changes').textContent = list.length ? list.length + ' change(s): ' + list.map(function(c){
    if (c.kind === 'unreadable') return 'window ' + c.window + ' unreadable';
    if (c.kind === 'beat_unreadable') return 'beat ' + c.beat + ' unreadable';
    var where = c.kind === 'beat_mark' ? 'beat ' + c.beat : 'w' + c.window + ' ' + c.lead;
    return where + ' ' + c.fiducial + ' ' + c.old_sample + '→' + c.new_sample;
  }).join(', ') : '';
}
function isBeat(g){ return g.dataset.beat !== undefined; }
function keyOf(g){
  return isBeat(g) ? 'b|' + g.dataset.beat + '|' + g.dataset.lead + '|' + g.dataset.f
    : g.dataset.w + '|' + g.dataset.lead + '|' + g.dataset.f;
}
function note(g){
  var key = keyOf(g);
  var a = +g.dataset.auto, s = +g.dataset.s;
  g.classList.toggle('moved', a !== s);
  if (a === s) { changes.delete(key); }
  else if (isBeat(g)) {
    changes.set(key, {kind: 'beat_mark', record: REC, beat: +g.dataset.beat, lead: g.dataset.lead,
      fiducial: g.dataset.f, old_sample: a, new_sample: s, reason: reason(), who: who(),
      when: new Date().toISOString()});
  } else {
    changes.set(key, {kind: 'mark', record: REC, window: +g.dataset.w, lead: g.dataset.lead,
      fiducial: g.dataset.f, old_sample: a, new_sample: s, reason: reason(), who: who(),
      when: new Date().toISOString()});
  }
  renderList();
}
function status(){
  if (!sel) return;
  var fs = +sel.dataset.fs, s = +sel.dataset.s, a = +sel.dataset.auto;
  $('status').textContent = (isBeat(sel) ? 'Beat ' + sel.dataset.beat + ' (global)' : 'Window ' + sel.dataset.w + ', lead ' + sel.dataset.lead) + ', ' + sel.dataset.f +
    ': sample ' + s + ' (' + (s / fs * 1000).toFixed(0) + ' ms; automatic ' + a + ', change ' +
    ((s - a) / fs * 1000).toFixed(0) + ' ms)';
}
function select(g){
  if (sel) sel.classList.remove('sel');
  sel = g;
  if (g) { g.classList.add('sel'); g.focus({preventScroll: true}); status(); }
}
function move(g, s){
  var n = +g.closest('svg').dataset.n;
  s = Math.max(0, Math.min(n - 1, Math.round(s)));
  // A per-beat mark is drawn on every lead of the strip: move all its copies.
  var all = isBeat(g) ? document.querySelectorAll('g.bmark[data-beat="' + g.dataset.beat + '"][data-f="' + g.dataset.f + '"]') : [g];
  Array.prototype.forEach.call(all, function(m){
    m.dataset.s = s;
    m.setAttribute('transform', 'translate(' + (s / +m.dataset.fs * 25).toFixed(3) + ',0)');
    m.classList.toggle('moved', +m.dataset.auto !== s);
  });
  note(g); status();
}
function selectBeat(b){
  document.querySelectorAll('rect.beat.on').forEach(function(r){ r.classList.remove('on'); });
  selBeat = b;
  if (b === null) return;
  document.querySelectorAll('rect.beat[data-beat="' + b + '"]').forEach(function(r){ r.classList.add('on'); });
  $('status').textContent = 'Beat ' + b + ' selected: U marks it unreadable (U again undoes).';
}
function toggleBeat(b){
  var rects = document.querySelectorAll('rect.beat[data-beat="' + b + '"]');
  if (!rects.length || rects[0].classList.contains('done')) return;
  var key = 'beat_unreadable|' + b, on = !changes.has(key);
  if (on) {
    changes.set(key, {kind: 'beat_unreadable', record: REC, beat: +b, lead: 'global', fiducial: 'beat',
      old_sample: null, new_sample: null, reason: reason(), who: who(), when: new Date().toISOString()});
  } else { changes.delete(key); }
  rects.forEach(function(r){ r.classList.toggle('bad', on); });
  renderList();
  $('status').textContent = 'Beat ' + b + (on ? ' marked unreadable.' : ': unreadable mark removed.');
}
function revert(g){ if (g && +g.dataset.s !== +g.dataset.auto) move(g, +g.dataset.auto); }
document.querySelectorAll('rect.beat').forEach(function(r){
  r.addEventListener('click', function(){ selectBeat(r.dataset.beat); });
});
document.querySelectorAll('g.mark').forEach(function(g){
  g.addEventListener('pointerdown', function(e){
    select(g); drag = g; e.preventDefault();
    if (g.setPointerCapture) { try { g.setPointerCapture(e.pointerId); } catch (err) {} }
  });
  g.addEventListener('pointermove', function(e){
    if (drag !== g) return;
    var svg = g.closest('svg'), m = svg.getScreenCTM();
    if (!m) return;
    var pt = svg.createSVGPoint(); pt.x = e.clientX; pt.y = e.clientY;
    var p = pt.matrixTransform(m.inverse());
    move(g, p.x / 25 * +g.dataset.fs);
  });
  g.addEventListener('pointerup', function(){ drag = null; });
  g.addEventListener('click', function(){ select(g); if (isBeat(g)) selectBeat(g.dataset.beat); });
});
document.addEventListener('keydown', function(e){
  if (e.target.tagName === 'INPUT') return;
  if ((e.key === 'u' || e.key === 'U') && selBeat !== null) { e.preventDefault(); toggleBeat(selBeat); return; }
  if (!sel) return;
  if (e.key === 'Backspace') { e.preventDefault(); revert(sel); }
  else if (e.key === 'ArrowLeft' || e.key === 'ArrowRight') {
    e.preventDefault();
    move(sel, +sel.dataset.s + (e.key === 'ArrowLeft' ? -1 : 1));
  } else if (e.key === 'Escape') { sel.classList.remove('sel'); sel = null; }
});
document.querySelectorAll('input.unread').forEach(function(cb){
  cb.addEventListener('change', function(){
    var key = 'unreadable|' + cb.dataset.w;
    if (cb.checked) {
      changes.set(key, {kind: 'unreadable', record: REC, window: +cb.dataset.w, lead: 'global',
        fiducial: 'window', old_sample: null, new_sample: null, reason: reason(), who: who(),
        when: new Date().toISOString()});
    } else { changes.delete(key); }
    renderList();
  });
});
$('revert').addEventListener('click', function(){ revert(sel); });
$('revert-all').addEventListener('click', function(){
  document.querySelectorAll('g.mark.moved').forEach(function(g){ revert(g); });
  document.querySelectorAll('input.unread:not([disabled])').forEach(function(cb){
    if (cb.checked) { cb.checked = false; cb.dispatchEvent(new Event('change')); }
  });
  Array.from(changes.keys()).filter(function(k){ return k.indexOf('beat_unreadable|') === 0; })
    .forEach(function(k){ toggleBeat(k.split('|')[1]); });
  $('status').textContent = 'All changes reverted.';
});
$('zoom-in').addEventListener('click', function(){ setZoom(zoom * 1.25); });
$('zoom-out').addEventListener('click', function(){ setZoom(zoom / 1.25); });
document.addEventListener('wheel', function(e){
  if (!e.ctrlKey || !e.target.closest || !e.target.closest('svg.ecg')) return;
  e.preventDefault();
  setZoom(zoom * (e.deltaY < 0 ? 1.1 : 1 / 1.1));
}, {passive: false});
function buildDoc(askReason){
  var list = Array.from(changes.values()).map(function(c){ return Object.assign({}, c); });
  var r = reason();
  if (askReason && list.some(function(c){ return !c.reason; }) && !r) {
    r = (window.prompt('Reason for the changes without one:') || '').trim();
  }
  list.forEach(function(c){ if (!c.reason) c.reason = r; if (!c.who) c.who = who(); if (!c.who) delete c.who; });
  var doc = {format: '__FORMAT__', version: 1, created_utc: new Date().toISOString(), changes: list};
  if (who()) doc.who = who();
  return doc;
}
var COLS = ['kind', 'record', 'window', 'beat', 'lead', 'fiducial', 'old_sample', 'new_sample', 'reason', 'who', 'when'];
function toCsv(doc){
  var cell = function(v){
    if (v === null || v === undefined) return '';
    v = String(v);
    return /[",\r\n]/.test(v) ? '"' + v.replace(/"/g, '""') + '"' : v;
  };
  return COLS.join(',') + '\n' + doc.changes.map(function(c){
    var row = Object.assign({}, c);
    if (!row.who && doc.who) row.who = doc.who;
    return COLS.map(function(k){ return cell(row[k]); }).join(',');
  }).join('\n') + '\n';
}
function download(text, type, name, n){
  var blob = new Blob([text], {type: type});
  var a = document.createElement('a');
  a.href = URL.createObjectURL(blob);
  a.download = name;
  document.body.appendChild(a); a.click(); a.remove();
  setTimeout(function(){ URL.revokeObjectURL(a.href); }, 1000);
  $('status').textContent = 'Saved ' + n + ' change(s) to ' + name + '.';
}
$('save').addEventListener('click', function(){
  if (!changes.size) { $('status').textContent = 'No changes to save.'; return; }
  var doc = buildDoc(true);
  download(JSON.stringify(doc, null, 2), 'application/json', REC + '-corrections.json', doc.changes.length);
});
$('save-csv').addEventListener('click', function(){
  if (!changes.size) { $('status').textContent = 'No changes to save.'; return; }
  var doc = buildDoc(true);
  download(toCsv(doc), 'text/csv', REC + '-corrections.csv', doc.changes.length);
});
// Self-test for the headless-browser check (page opened with #selftest): select the
// first median T end, press → ten times, drag a median QRS onset, mark the last window
// unreadable (when there are several), move and revert per-beat marks in the strip,
// mark a beat unreadable, and show the files the save buttons would write.
if (location.hash === '#selftest') {
  var g = document.querySelector('svg[data-kind="median"] g.mark[data-f="t_end"]');
  if (g) {
    select(g);
    for (var i = 0; i < 10; i++) document.dispatchEvent(new KeyboardEvent('keydown', {key: 'ArrowRight'}));
  }
  // Drag the QRS onset of the second lead 2 mm (80 ms at 25 mm/s) to the right.
  var q = document.querySelectorAll('svg[data-kind="median"] g.mark[data-f="qrs_on"]')[1];
  if (q) {
    var svg = q.closest('svg'), rect = svg.getBoundingClientRect();
    var k = rect.width / +svg.dataset.wmm, x = +q.dataset.s / +q.dataset.fs * 25;
    var at = function(mm){ return {clientX: rect.left + mm * k, clientY: rect.top + 5 * k, pointerId: 1, bubbles: true}; };
    q.dispatchEvent(new PointerEvent('pointerdown', at(x)));
    q.dispatchEvent(new PointerEvent('pointermove', at(x + 1)));
    q.dispatchEvent(new PointerEvent('pointermove', at(x + 2)));
    q.dispatchEvent(new PointerEvent('pointerup', at(x + 2)));
  }
  var cbs = document.querySelectorAll('input.unread:not([disabled])');
  if (cbs.length > 1) { var cb = cbs[cbs.length - 1]; cb.checked = true; cb.dispatchEvent(new Event('change')); }
  // Per-beat: move the first strip T end 5 samples left, undo a move with Backspace,
  // and mark the second beat unreadable with U.
  var bt = document.querySelector('g.bmark[data-f="t_end"]');
  if (bt) {
    bt.dispatchEvent(new MouseEvent('click', {bubbles: true}));
    for (var j = 0; j < 5; j++) document.dispatchEvent(new KeyboardEvent('keydown', {key: 'ArrowLeft'}));
    var bq = document.querySelector('g.bmark[data-f="qrs_on"]');
    bq.dispatchEvent(new MouseEvent('click', {bubbles: true}));
    document.dispatchEvent(new KeyboardEvent('keydown', {key: 'ArrowRight'}));
    document.dispatchEvent(new KeyboardEvent('keydown', {key: 'Backspace'}));
  }
  var br = document.querySelectorAll('rect.beat')[1];
  if (br) {
    br.dispatchEvent(new MouseEvent('click', {bubbles: true}));
    document.dispatchEvent(new KeyboardEvent('keydown', {key: 'u'}));
  }
  $('who').value = 'browser self-test'; $('reason').value = 'self-test';
  var pre = document.createElement('pre'); pre.id = 'selftest';
  pre.textContent = JSON.stringify(buildDoc(false));
  document.body.appendChild(pre);
  var pc = document.createElement('pre'); pc.id = 'selftest-csv';
  pc.textContent = toCsv(buildDoc(false));
  document.body.appendChild(pc);
}
setZoom(1);
document.body.dataset.ready = '1';
})();
"#;

/// Corrections already imported into this record (the `corrections/` audit table), with
/// the automatic QT and QTc beside the current ones.
fn audit_table(g: &Group) -> String {
    let Some(a) = group_at(g, "corrections") else {
        return String::new();
    };
    let t = |n: &str| texts(a, n).map(<[String]>::to_vec).unwrap_or_default();
    let i = |n: &str| i64s(a, n).map(<[i64]>::to_vec).unwrap_or_default();
    let (lead, fid, kind, who, when, reason, applied) = (
        t("lead"),
        t("fiducial"),
        t("kind"),
        t("who"),
        t("when"),
        t("reason"),
        t("applied_utc"),
    );
    let (win, old, new) = (i("window"), i("old_sample"), i("new_sample"));
    let mut s = String::from(
        "<h2>Corrections already applied</h2><table id=\"audit\"><tr><th>window</th><th class=\"l\">lead</th><th class=\"l\">mark</th><th>automatic</th><th>corrected</th><th class=\"l\">who</th><th class=\"l\">when</th><th class=\"l\">reason</th><th class=\"l\">applied</th></tr>",
    );
    let get = |v: &[String], k: usize| v.get(k).cloned().unwrap_or_default();
    for (k, w) in win.iter().enumerate() {
        let unread = get(&kind, k) == "unreadable";
        let _ = write!(
            s,
            "<tr><td>{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td></tr>",
            w,
            esc(&get(&lead, k)),
            esc(&get(&fid, k)),
            if unread { "—".into() } else { old.get(k).map_or(String::new(), i64::to_string) },
            if unread { "unreadable".into() } else { new.get(k).map_or(String::new(), i64::to_string) },
            esc(&get(&who, k)),
            esc(&get(&when, k)),
            esc(&get(&reason, k)),
            esc(&get(&applied, k)),
        );
    }
    s.push_str("</table>");
    if let Some(auto) = group_at(g, "windows/auto") {
        s.push_str("<table id=\"auto\"><tr><th>window</th><th>automatic QT</th><th>current QT</th><th>automatic QTc</th><th>current QTc</th><th class=\"l\">automatic flag</th><th class=\"l\">current flag</th></tr>");
        let n = f64s(auto, "qt_ms").map_or(0, |v| v.len());
        for w in 0..n {
            let af = |c: &str| {
                f64s(auto, c)
                    .and_then(|v| v.get(w).copied())
                    .unwrap_or(f64::NAN)
            };
            let at = |c: &str| {
                texts(auto, c)
                    .and_then(|v| v.get(w).cloned())
                    .unwrap_or_default()
            };
            let _ = write!(
                s,
                "<tr><td>{w}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td class=\"l\">{}</td><td class=\"l\">{}</td></tr>",
                ms(af("qt_ms")),
                ms(col_f(g, "qt_ms", w)),
                ms(af("qtc_ms")),
                ms(col_f(g, "qtc_ms", w)),
                esc(&at("qtc_flag")),
                esc(&col_t(g, "qtc_flag", w)),
            );
        }
        s.push_str("</table>");
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(p: &str) -> Vec<(f64, f64)> {
        p.split_whitespace()
            .map(|xy| {
                let (x, y) = xy.split_once(',').unwrap();
                (x.parse().unwrap(), y.parse().unwrap())
            })
            .collect()
    }

    /// The min/max reduction against the obvious oracle: every 0.2 mm column keeps
    /// exactly its lowest and highest sample, in time order, at their own times.
    #[test]
    fn strip_reduction_keeps_each_columns_extremes() {
        let fs = 500.0; // 0.05 mm per sample at 25 mm/s: 4 samples per column.
        let mut s = 12345u64;
        let y: Vec<f64> = (0..1003)
            .map(|_| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((s >> 33) as f64 / (1u64 << 31) as f64) * 2.0 - 1.0
            })
            .collect();
        let pts = parse(&points(&y, fs, 15.0, -100.0, 100.0));
        let chunks: Vec<&[f64]> = y.chunks(4).collect();
        assert_eq!(pts.len(), 2 * chunks.len());
        for (c, ch) in chunks.iter().enumerate() {
            let (imin, vmin) = ch
                .iter()
                .copied()
                .enumerate()
                .min_by(|a, b| a.1.total_cmp(&b.1))
                .unwrap();
            let (imax, vmax) = ch
                .iter()
                .copied()
                .enumerate()
                .max_by(|a, b| a.1.total_cmp(&b.1))
                .unwrap();
            let mut want = [(imin, vmin), (imax, vmax)];
            want.sort_by_key(|w| w.0);
            for (k, (i, v)) in want.iter().enumerate() {
                let (x, ym) = pts[2 * c + k];
                // 25 mm/s and 10 mm/mV; SVG y grows downwards from the baseline at 15 mm.
                assert!((x - (c * 4 + i) as f64 * 0.05).abs() < 0.006, "column {c}");
                assert!((ym - (15.0 - v * 10.0)).abs() < 0.006, "column {c}");
            }
        }
    }

    #[test]
    fn priority_reasons_from_a_part() {
        let mut g = Group::default();
        g.attr("fs", tendline_store::Attr::Float(500.0));
        g.attr("qtc_flag", tendline_store::Attr::Text("prolonged".into()));
        g.attr("qtc_ms", tendline_store::Attr::Float(471.0));
        let m = g.group("marks").group("global");
        for f in ["qrs_on", "qrs_end", "t_end"] {
            m.dataset(&format!("{f}_confidence"), Data::F32(vec![0.9, 0.3, 0.4]));
        }
        m.dataset("t_end_wavelet", Data::I64(vec![400, 900, 1400]));
        m.dataset("t_end_tangent", Data::I64(vec![390, 890, -1]));
        let p = priority(&g, "r");
        assert!((p.mark_confidence - 0.4).abs() < 1e-6);
        // |400 − 390| samples at 500 Hz = 20 ms; the beat without a tangent end is skipped.
        assert_eq!(p.t_end_disagreement_ms, 20.0);
        assert_eq!(p.reasons.len(), 3, "{:?}", p.reasons);
        assert!((p.score - (2.0 * 0.6 + 2.0 + 1.0)).abs() < 1e-6);
        let mut calm = g.clone();
        calm.attr("qtc_flag", tendline_store::Attr::Text("normal".into()));
        assert!(priority(&calm, "c").score < p.score);
        // Pacing stimuli add one point and a reason.
        let mut paced = g.clone();
        paced.attr("pacing_spikes", tendline_store::Attr::Int(7));
        let q = priority(&paced, "p");
        assert!((q.score - p.score - 1.0).abs() < 1e-9);
        assert!(
            q.reasons.iter().any(|r| r.starts_with("7 pacing")),
            "{:?}",
            q.reasons
        );
    }
}
