//! Output files of a tuning run: the best configuration as a complete
//! `pipeline.toml`, the cross-validation table (`cv.csv`, `cv.md`), every
//! candidate's score (`candidates.csv`) and `tune.html` with, per parameter,
//! the objective on all records against the parameter's value (inline SVG).

use crate::engine::CvResult;
use crate::objective::Score;
use crate::space::{Candidate, Domain, SearchSpace};
use crate::TuneError;
use std::fmt::Write as _;
use std::path::Path;
use tendline_evaluate::Fiducial;

/// How the run was set up, for the report headers.
#[derive(Debug, Clone)]
pub struct RunInfo {
    pub space_file: String,
    pub folds: usize,
    pub seed: u64,
    pub seconds: f64,
    pub threads: usize,
}

fn num(x: f64) -> String {
    if x.is_finite() {
        format!("{x:.4}")
    } else {
        "inf".into()
    }
}

fn opt(x: Option<f64>, d: usize) -> String {
    x.filter(|v| v.is_finite())
        .map_or(String::new(), |v| format!("{v:.d$}"))
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn value_text(v: &toml::Value) -> String {
    match v {
        toml::Value::String(s) => s.clone(),
        other => other.to_string(),
    }
}

fn values(c: &Candidate) -> Vec<String> {
    c.0.iter().map(value_text).collect()
}

fn fid_cols(prefix: &str) -> Vec<String> {
    Fiducial::ALL
        .iter()
        .flat_map(|f| {
            let k = f.key();
            [
                format!("{prefix}{k}_sd_ms"),
                format!("{prefix}{k}_se_pct"),
                format!("{prefix}{k}_ppv_pct"),
            ]
        })
        .collect()
}

fn fid_vals(s: &Score) -> Vec<String> {
    s.summary
        .fiducials
        .iter()
        .flat_map(|f| [opt(f.sd_ms, 2), opt(f.se_pct, 2), opt(f.ppv_pct, 2)])
        .collect()
}

fn mean(v: impl Iterator<Item = f64>) -> f64 {
    let v: Vec<f64> = v.collect();
    v.iter().sum::<f64>() / v.len().max(1) as f64
}

/// `cv.csv`: one row per fold (chosen values, training and held-out
/// objective, held-out statistics per fiducial), then `mean` over folds,
/// `all` (the final search on all records, in-sample) and `base`.
pub fn cv_csv(space: &SearchSpace, cv: &CvResult) -> String {
    let mut head = vec![
        "fold".to_string(),
        "train_records".into(),
        "test_records".into(),
    ];
    head.extend(space.params.iter().map(|p| p.key.clone()));
    head.extend([
        "train_objective".into(),
        "test_objective".into(),
        "test_base_objective".into(),
    ]);
    head.extend(fid_cols("test_"));
    let mut out = head.join(",") + "\n";
    let row = |cells: Vec<String>| {
        cells
            .iter()
            .map(|c| csv_field(c))
            .collect::<Vec<_>>()
            .join(",")
            + "\n"
    };
    for f in &cv.folds {
        let mut c = vec![
            f.fold.to_string(),
            f.train.len().to_string(),
            f.test.len().to_string(),
        ];
        c.extend(values(&f.chosen));
        c.extend([
            num(f.train_score.objective),
            num(f.test_score.objective),
            num(f.test_base_score.objective),
        ]);
        c.extend(fid_vals(&f.test_score));
        out += &row(c);
    }
    let k = cv.folds.len();
    let mut c = vec!["mean".to_string(), String::new(), String::new()];
    c.extend(space.params.iter().map(|_| String::new()));
    c.extend([
        num(mean(cv.folds.iter().map(|f| f.train_score.objective))),
        num(mean(cv.folds.iter().map(|f| f.test_score.objective))),
        num(mean(cv.folds.iter().map(|f| f.test_base_score.objective))),
    ]);
    c.extend((0..Fiducial::ALL.len()).flat_map(|i| {
        let m = |g: &dyn Fn(&crate::objective::FiducialSummary) -> Option<f64>| {
            let v: Vec<f64> = cv
                .folds
                .iter()
                .filter_map(|f| g(&f.test_score.summary.fiducials[i]))
                .collect();
            (v.len() == k && k > 0).then(|| v.iter().sum::<f64>() / k as f64)
        };
        [
            opt(m(&|s| s.sd_ms), 2),
            opt(m(&|s| s.se_pct), 2),
            opt(m(&|s| s.ppv_pct), 2),
        ]
    }));
    out += &row(c);
    for (label, cand, score) in [
        ("all", &cv.final_best, &cv.final_score),
        ("base", &cv.base, &cv.base_score),
    ] {
        let mut c = vec![label.to_string(), cv.records.len().to_string(), "0".into()];
        c.extend(values(cand));
        c.extend([num(score.objective), String::new(), String::new()]);
        c.extend(fid_cols("").iter().map(|_| String::new()));
        out += &row(c);
    }
    out
}

/// `candidates.csv`: every candidate scored on all records.
pub fn candidates_csv(space: &SearchSpace, cv: &CvResult) -> String {
    let mut head = vec!["candidate".to_string()];
    head.extend(space.params.iter().map(|p| p.key.clone()));
    head.push("objective".into());
    head.extend(fid_cols(""));
    head.push("problem".into());
    let mut out = head.join(",") + "\n";
    for (i, (c, s)) in cv.all_records.iter().enumerate() {
        let mut cells = vec![i.to_string()];
        cells.extend(values(c));
        cells.push(num(s.objective));
        cells.extend(fid_vals(s));
        cells.push(
            cv.problems
                .iter()
                .find(|p| &p.0 == c)
                .map(|p| p.1.clone())
                .unwrap_or_default(),
        );
        out += &(cells
            .iter()
            .map(|c| csv_field(c))
            .collect::<Vec<_>>()
            .join(",")
            + "\n");
    }
    out
}

fn md_fold_table(space: &SearchSpace, cv: &CvResult) -> Vec<Vec<String>> {
    let mut rows = vec![];
    let mut head = vec!["fold".to_string(), "train / test records".into()];
    head.extend(space.params.iter().map(|p| format!("`{}`", p.key)));
    head.extend([
        "train J".into(),
        "held-out J".into(),
        "held-out J, base".into(),
        "held-out T end SD ms".into(),
        "held-out QRS on SD ms".into(),
    ]);
    rows.push(head);
    let sd = |s: &Score, f: Fiducial| {
        let i = Fiducial::ALL.iter().position(|x| *x == f).unwrap_or(0);
        opt(s.summary.fiducials[i].sd_ms, 1)
    };
    for f in &cv.folds {
        let mut r = vec![
            f.fold.to_string(),
            format!("{} / {}", f.train.len(), f.test.len()),
        ];
        r.extend(values(&f.chosen));
        r.extend([
            num(f.train_score.objective),
            num(f.test_score.objective),
            num(f.test_base_score.objective),
            sd(&f.test_score, Fiducial::TEnd),
            sd(&f.test_score, Fiducial::QrsOn),
        ]);
        rows.push(r);
    }
    let mut r = vec!["mean".to_string(), String::new()];
    r.extend(space.params.iter().map(|_| String::new()));
    r.extend([
        num(mean(cv.folds.iter().map(|f| f.train_score.objective))),
        num(mean(cv.folds.iter().map(|f| f.test_score.objective))),
        num(mean(cv.folds.iter().map(|f| f.test_base_score.objective))),
        String::new(),
        String::new(),
    ]);
    rows.push(r);
    rows
}

fn fiducial_rows(cv: &CvResult) -> Vec<Vec<String>> {
    let mut rows = vec![vec![
        "fiducial".to_string(),
        "base SD ms".into(),
        "base Se %".into(),
        "best SD ms".into(),
        "best Se %".into(),
        "best +P %".into(),
        "held-out SD ms (mean of folds)".into(),
    ]];
    for (i, f) in Fiducial::ALL.iter().enumerate() {
        let b = &cv.base_score.summary.fiducials[i];
        let t = &cv.final_score.summary.fiducials[i];
        let h: Vec<f64> = cv
            .folds
            .iter()
            .filter_map(|x| x.test_score.summary.fiducials[i].sd_ms)
            .collect();
        rows.push(vec![
            f.label().to_string(),
            opt(b.sd_ms, 1),
            opt(b.se_pct, 2),
            opt(t.sd_ms, 1),
            opt(t.se_pct, 2),
            opt(t.ppv_pct, 2),
            if h.len() == cv.folds.len() && !h.is_empty() {
                format!("{:.1}", mean(h.into_iter()))
            } else {
                String::new()
            },
        ]);
    }
    rows
}

fn md_table(rows: &[Vec<String>]) -> String {
    let mut s = String::new();
    for (i, r) in rows.iter().enumerate() {
        s += &format!("| {} |\n", r.join(" | "));
        if i == 0 {
            s += &format!("|{}\n", "---|".repeat(r.len()));
        }
    }
    s
}

fn html_table(rows: &[Vec<String>]) -> String {
    let esc = |s: &str| {
        s.replace('&', "&amp;")
            .replace('<', "&lt;")
            .replace('`', "")
    };
    let mut s = String::from("<table>\n");
    for (i, r) in rows.iter().enumerate() {
        let tag = if i == 0 { "th" } else { "td" };
        s += "<tr>";
        for c in r {
            let _ = write!(s, "<{tag}>{}</{tag}>", esc(c));
        }
        s += "</tr>\n";
    }
    s + "</table>\n"
}

fn intro(space: &SearchSpace, cv: &CvResult, info: &RunInfo) -> Vec<String> {
    vec![
        format!(
            "Space: `{}`; strategy `{}`; {} record(s); {} record-level folds (seed {}); {} candidate(s) scored on all records; {:.1} s on {} thread(s).",
            info.space_file,
            space.search.strategy.name(),
            cv.records.len(),
            info.folds,
            info.seed,
            cv.all_records.len(),
            info.seconds,
            info.threads
        ),
        format!("Objective J (lower is better): {}.", space.objective.describe()),
        "Per fold the search is run on the training records only; its choice is then scored on the held-out records. \
         The configuration written to pipeline.toml is the search on all records (`all` in cv.csv): the folds \
         estimate how well that procedure generalises, they do not pick the final values."
            .to_string(),
    ]
}

/// `cv.md`.
pub fn cv_markdown(space: &SearchSpace, cv: &CvResult, info: &RunInfo) -> String {
    let mut s = String::from("# Threshold tuning: cross-validation\n\n");
    for p in intro(space, cv, info) {
        s += &p;
        s += "\n\n";
    }
    s += "## Folds\n\n";
    s += &md_table(&md_fold_table(space, cv));
    s += &format!(
        "\n## Final configuration (all records)\n\nJ = {} (base configuration: {}).\n\n",
        num(cv.final_score.objective),
        num(cv.base_score.objective)
    );
    let mut rows = vec![vec!["parameter".to_string(), "base".into(), "best".into()]];
    for (i, p) in space.params.iter().enumerate() {
        rows.push(vec![
            format!("`{}`", p.key),
            value_text(&cv.base.0[i]),
            value_text(&cv.final_best.0[i]),
        ]);
    }
    s += &md_table(&rows);
    s += "\n";
    s += &md_table(&fiducial_rows(cv));
    s += "\n## Held-out records per fold\n\n";
    for f in &cv.folds {
        let names: Vec<&str> = f.test.iter().map(|&i| cv.records[i].as_str()).collect();
        s += &format!("- fold {}: {}\n", f.fold, names.join(", "));
    }
    if !cv.problems.is_empty() {
        s += &format!(
            "\n{} candidate(s) could not be scored:\n\n",
            cv.problems.len()
        );
        for (c, p) in cv.problems.iter().take(20) {
            s += &format!("- {}: {}\n", values(c).join(", "), p.replace('\n', " "));
        }
    }
    s
}

/// SVG scatter of the objective (all records) against one parameter.
fn param_svg(space: &SearchSpace, cv: &CvResult, i: usize) -> String {
    let p = &space.params[i];
    let (w, h, ml, mr, mt, mb) = (460.0, 260.0, 60.0, 20.0, 16.0, 44.0);
    let pts: Vec<(f64, f64)> = cv
        .all_records
        .iter()
        .filter(|(_, s)| s.objective.is_finite())
        .filter_map(|(c, s)| p.as_number(&c.0[i]).map(|x| (x, s.objective)))
        .collect();
    let mut svg = format!(
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\">\
         <rect x=\"0\" y=\"0\" width=\"{w}\" height=\"{h}\" fill=\"white\"/>"
    );
    if pts.is_empty() {
        svg += "<text x=\"20\" y=\"40\">no scored candidates</text></svg>";
        return svg;
    }
    let log = matches!(p.domain, Domain::Range { log: true, .. });
    let tx = |x: f64| if log { x.max(1e-300).ln() } else { x };
    let (mut x0, mut x1) = pts.iter().fold((f64::MAX, f64::MIN), |a, q| {
        (a.0.min(tx(q.0)), a.1.max(tx(q.0)))
    });
    let (mut y0, mut y1) = pts
        .iter()
        .fold((f64::MAX, f64::MIN), |a, q| (a.0.min(q.1), a.1.max(q.1)));
    if let Domain::Range { min, max, .. } = p.domain {
        x0 = x0.min(tx(min));
        x1 = x1.max(tx(max));
    }
    if let Domain::List(v) = &p.domain {
        x0 = -0.5;
        x1 = v.len() as f64 - 0.5;
    }
    if x1 - x0 < 1e-12 {
        x0 -= 0.5;
        x1 += 0.5;
    }
    if y1 - y0 < 1e-12 {
        y0 -= 0.5;
        y1 += 0.5;
    }
    let pad = (y1 - y0) * 0.05;
    let (y0, y1) = (y0 - pad, y1 + pad);
    let sx = |x: f64| ml + (tx(x) - x0) / (x1 - x0) * (w - ml - mr);
    let sxl = |xl: f64| ml + (xl - x0) / (x1 - x0) * (w - ml - mr);
    let sy = |y: f64| mt + (y1 - y) / (y1 - y0) * (h - mt - mb);
    let _ = write!(
        svg,
        "<line x1=\"{ml}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#444\"/><line x1=\"{ml}\" y1=\"{mt}\" x2=\"{ml}\" y2=\"{}\" stroke=\"#444\"/>",
        h - mb,
        w - mr,
        h - mb,
        h - mb
    );
    for k in 0..=4 {
        let y = y0 + (y1 - y0) * k as f64 / 4.0;
        let _ = write!(
            svg,
            "<text x=\"{}\" y=\"{:.1}\" font-size=\"10\" text-anchor=\"end\">{:.3}</text>",
            ml - 4.0,
            sy(y) + 3.0,
            y
        );
    }
    match &p.domain {
        Domain::List(v) => {
            for (k, val) in v.iter().enumerate() {
                let _ = write!(
                    svg,
                    "<text x=\"{:.1}\" y=\"{}\" font-size=\"10\" text-anchor=\"middle\">{}</text>",
                    sxl(k as f64),
                    h - mb + 14.0,
                    value_text(val)
                );
            }
        }
        Domain::Range { .. } => {
            for k in 0..=4 {
                let xl = x0 + (x1 - x0) * k as f64 / 4.0;
                let x = if log { xl.exp() } else { xl };
                let _ = write!(
                    svg,
                    "<text x=\"{:.1}\" y=\"{}\" font-size=\"10\" text-anchor=\"middle\">{}</text>",
                    sxl(xl),
                    h - mb + 14.0,
                    crate::space::round_sig(x, 3)
                );
            }
        }
    }
    let _ = write!(
        svg,
        "<text x=\"{:.1}\" y=\"{}\" font-size=\"11\" text-anchor=\"middle\">{}{}</text>\
         <text x=\"12\" y=\"{:.1}\" font-size=\"11\" transform=\"rotate(-90 12 {:.1})\" text-anchor=\"middle\">objective J (all records)</text>",
        (ml + w - mr) / 2.0,
        h - 8.0,
        p.key,
        if log { " (log scale)" } else { "" },
        (mt + h - mb) / 2.0,
        (mt + h - mb) / 2.0
    );
    let pos = |c: &Candidate| -> Option<f64> {
        let x = p.as_number(&c.0[i])?;
        Some(if matches!(p.domain, Domain::List(_)) {
            sxl(x)
        } else {
            sx(x)
        })
    };
    for (c, s) in &cv.all_records {
        if !s.objective.is_finite() {
            continue;
        }
        if let Some(x) = pos(c) {
            let _ = write!(
                svg,
                "<circle cx=\"{x:.1}\" cy=\"{:.1}\" r=\"3\" fill=\"#3a6ea5\" fill-opacity=\"0.6\"><title>{} → J {}</title></circle>",
                sy(s.objective),
                value_text(&c.0[i]),
                num(s.objective)
            );
        }
    }
    for (c, s, colour, label) in [
        (&cv.base, &cv.base_score, "#e08a00", "base"),
        (&cv.final_best, &cv.final_score, "#c0392b", "best"),
    ] {
        if let (Some(x), true) = (pos(c), s.objective.is_finite()) {
            let _ = write!(
                svg,
                "<circle cx=\"{x:.1}\" cy=\"{:.1}\" r=\"6\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"2\"><title>{label}</title></circle>",
                sy(s.objective)
            );
        }
    }
    svg + "</svg>"
}

/// `tune.html`: self-contained page.
pub fn tune_html(space: &SearchSpace, cv: &CvResult, info: &RunInfo) -> String {
    let mut s = String::from(
        "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>tendline tune</title><style>\
         body{font-family:sans-serif;max-width:1000px;margin:1em auto;padding:0 1em}\
         table{border-collapse:collapse;margin:0.5em 0}td,th{border:1px solid #bbb;padding:2px 6px;font-size:13px}\
         figure{display:inline-block;margin:0.5em}</style></head><body><h1>Threshold tuning</h1>\n",
    );
    for p in intro(space, cv, info) {
        let _ = writeln!(
            s,
            "<p>{}</p>",
            p.replace('&', "&amp;")
                .replace('<', "&lt;")
                .replace('`', "")
        );
    }
    s += "<h2>Cross-validation</h2>\n";
    s += &html_table(&md_fold_table(space, cv));
    s += "<h2>Final configuration (all records)</h2>\n";
    let mut rows = vec![vec!["parameter".to_string(), "base".into(), "best".into()]];
    for (i, p) in space.params.iter().enumerate() {
        rows.push(vec![
            p.key.clone(),
            value_text(&cv.base.0[i]),
            value_text(&cv.final_best.0[i]),
        ]);
    }
    s += &html_table(&rows);
    s += &html_table(&fiducial_rows(cv));
    s += "<h2>Objective against each parameter</h2>\n<p>Every candidate scored on all records \
          (other parameters vary too, so the cloud is a marginal view). Orange ring: base configuration; red ring: best.</p>\n";
    for i in 0..space.params.len() {
        let _ = writeln!(s, "<figure>{}</figure>", param_svg(space, cv, i));
    }
    s + "</body></html>\n"
}

/// The best configuration as a complete `pipeline.toml` text.
pub fn pipeline_toml(
    space: &SearchSpace,
    cv: &CvResult,
    info: &RunInfo,
) -> Result<String, TuneError> {
    let cfg = space.config_for(&cv.final_best)?;
    let mut s = format!(
        "# Generated by `tendline tune` (space {}, strategy {}, {} records, {} folds, seed {}).\n\
         # Objective on all records: {} (base configuration: {}).\n# Tuned:\n",
        info.space_file,
        space.search.strategy.name(),
        cv.records.len(),
        info.folds,
        info.seed,
        num(cv.final_score.objective),
        num(cv.base_score.objective)
    );
    for (i, p) in space.params.iter().enumerate() {
        s += &format!(
            "#   {} = {} (base {})\n",
            p.key, cv.final_best.0[i], cv.base.0[i]
        );
    }
    s += "# Units and meaning of every key: see the repository's pipeline.toml.\n\n";
    s += &toml::to_string(&cfg.tree).map_err(|e| TuneError::Invalid(e.to_string()))?;
    Ok(s)
}

/// Write every output file into `dir` (created if needed).
pub fn write_outputs(
    dir: &Path,
    space: &SearchSpace,
    cv: &CvResult,
    info: &RunInfo,
) -> Result<(), TuneError> {
    std::fs::create_dir_all(dir).map_err(|source| TuneError::Io {
        path: dir.to_path_buf(),
        source,
    })?;
    let files = [
        ("pipeline.toml", pipeline_toml(space, cv, info)?),
        ("cv.csv", cv_csv(space, cv)),
        ("cv.md", cv_markdown(space, cv, info)),
        ("candidates.csv", candidates_csv(space, cv)),
        ("tune.html", tune_html(space, cv, info)),
    ];
    for (name, text) in files {
        let p = dir.join(name);
        std::fs::write(&p, text).map_err(|source| TuneError::Io { path: p, source })?;
    }
    Ok(())
}
