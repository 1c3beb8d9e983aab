//! `tendline tune`: threshold search with record-level cross-validation over
//! annotated records (the work is done by the `tendline-tune` crate; this
//! module parses arguments, shows progress and writes the outputs).

use anyhow::{bail, Context, Result};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::Instant;
use tendline_tune::{Dataset, Progress, RecordSource, Reference, RunInfo, SearchSpace};

#[derive(clap::Args)]
pub struct TuneArgs {
    /// Folders, RECORDS lists or record paths; each record needs a reference annotation file beside it.
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,
    /// Search space (TOML): parameters with ranges or lists, strategy, objective.
    #[arg(long)]
    pub space: PathBuf,
    /// Output folder: pipeline.toml, cv.csv, cv.md, candidates.csv, tune.html.
    #[arg(long)]
    pub out: PathBuf,
    /// Base configuration (TOML) the candidates modify; default: the built-in pipeline.toml.
    #[arg(long)]
    pub config: Option<PathBuf>,
    /// Override one key of the base configuration (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Record-level cross-validation folds (default: the space's `search.folds`, else 5).
    #[arg(long)]
    pub folds: Option<usize>,
    /// Seed of the random search and the fold assignment (default: the space's `search.seed`, else 1).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub jobs: Option<usize>,
    /// No progress output.
    #[arg(long)]
    pub quiet: bool,
    /// Extension of the reference annotation files with global wave boundaries (QT Database
    /// annotator 1: q1c); `leads`: per-lead files `<record>.<lead name>` (LUDB), combined across leads.
    #[arg(long, default_value = "q1c", value_name = "EXT")]
    pub reference_ext: String,
    /// Sampling rate (Hz) for CSV records that do not state one.
    #[arg(long, value_name = "HZ")]
    pub csv_fs: Option<f64>,
}

fn reporter(quiet: bool) -> (ProgressBar, bool) {
    if quiet || !std::io::stderr().is_terminal() {
        let pb = ProgressBar::with_draw_target(None, ProgressDrawTarget::hidden());
        return (pb, !quiet);
    }
    let pb = ProgressBar::new(0);
    pb.set_style(
        ProgressStyle::with_template("{bar:30} {pos}/{len} evaluations  {msg}  ETA {eta}")
            .expect("static template"),
    );
    (pb, false)
}

pub fn cmd_tune(a: TuneArgs) -> Result<ExitCode> {
    let t0 = Instant::now();
    let config = crate::config::load(a.config.as_deref(), &a.set)?;
    let base: toml::Table =
        toml::from_str(&config.to_toml()).context("base configuration as TOML")?;
    let text = std::fs::read_to_string(&a.space)
        .with_context(|| format!("--space {}: cannot read", a.space.display()))?;
    let origin = a.space.display().to_string();
    let mut space = SearchSpace::parse(&text, &origin, &base)?;
    if let Some(f) = a.folds {
        space.search.folds = f;
    }
    if let Some(s) = a.seed {
        space.search.seed = s;
    }
    let ext = a.reference_ext.trim_start_matches('.').to_string();
    if ext.is_empty() || ext.contains(['/', '\\']) {
        bail!(
            "--reference-ext: allowed a file extension such as q1c, got `{}`",
            a.reference_ext
        );
    }
    let records = crate::inputs::resolve_all(&a.inputs)?;
    let mut sources = Vec::new();
    let mut missing = Vec::new();
    for r in records {
        if ext == "leads" {
            // Which lead files exist is known once the header is read.
            sources.push(RecordSource {
                name: r.name,
                path: r.path,
                reference: Reference::LeadFiles,
            });
            continue;
        }
        let reference = r.path.with_file_name(format!("{}.{ext}", r.name));
        if reference.is_file() {
            sources.push(RecordSource {
                name: r.name,
                path: r.path,
                reference: Reference::File(reference),
            });
        } else {
            missing.push(r.name);
        }
    }
    if !missing.is_empty() && !a.quiet {
        eprintln!(
            "warning: {} record(s) without a .{ext} reference are left out: {}",
            missing.len(),
            missing.join(", ")
        );
    }
    let folds = space.search.folds;
    if sources.len() < folds.max(2) {
        bail!(
            "tune needs at least {} records with a .{ext} reference (one per fold), found {}",
            folds.max(2),
            sources.len()
        );
    }
    let jobs = match a.jobs {
        Some(0) => bail!("--jobs: allowed 1 or more threads, got 0"),
        Some(n) => n,
        None => std::thread::available_parallelism().map_or(1, |n| n.get()),
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(jobs)
        .build()
        .context("cannot start worker threads")?;
    let (pb, plain) = reporter(a.quiet);
    let last_plain = Mutex::new((Instant::now(), String::new()));
    let progress = |p: &Progress| {
        let best = p.best.map_or("-".to_string(), |b| format!("{b:.4}"));
        let msg = format!("{}: best J {best}", p.phase);
        pb.set_length(p.total);
        pb.set_position(p.done);
        pb.set_message(msg.clone());
        if plain {
            let mut l = last_plain.lock().unwrap_or_else(|e| e.into_inner());
            // One line every 10 s or at a new phase, so logs stay short.
            if l.0.elapsed().as_secs_f64() >= 10.0 || l.1 != p.phase {
                eprintln!("{}/{} evaluations  {msg}", p.done, p.total);
                *l = (Instant::now(), p.phase.clone());
            }
        }
    };
    let seed = space.search.seed;
    let cv = pool.install(|| -> Result<_> {
        let data = Dataset::load(sources, a.csv_fs)?;
        let cv = tendline_tune::cross_validate(&space, &data, folds, seed, &progress)?;
        data.clear_cache();
        Ok(cv)
    })?;
    pb.finish_and_clear();
    let info = RunInfo {
        space_file: origin,
        folds,
        seed,
        seconds: t0.elapsed().as_secs_f64(),
        threads: jobs,
    };
    tendline_tune::write_outputs(&a.out, &space, &cv, &info)?;
    // The written configuration must load exactly like a hand-written one.
    let written = a.out.join("pipeline.toml");
    crate::config::load(Some(&written), &[]).with_context(|| {
        format!(
            "{}: the tuned configuration does not load",
            written.display()
        )
    })?;
    if !a.quiet {
        let mean = |f: &dyn Fn(&tendline_tune::FoldResult) -> f64| {
            cv.folds.iter().map(f).sum::<f64>() / cv.folds.len() as f64
        };
        eprintln!(
            "cross-validation ({} folds): mean train J {:.4}, mean held-out J {:.4} (base configuration held-out {:.4})",
            cv.folds.len(),
            mean(&|f| f.train_score.objective),
            mean(&|f| f.test_score.objective),
            mean(&|f| f.test_base_score.objective)
        );
        eprintln!(
            "all {} records: best J {:.4} (base {:.4})",
            cv.records.len(),
            cv.final_score.objective,
            cv.base_score.objective
        );
        for (i, p) in space.params.iter().enumerate() {
            eprintln!(
                "  {} = {} (base {})",
                p.key, cv.final_best.0[i], cv.base.0[i]
            );
        }
        eprintln!(
            "{:.1} s; outputs in {} (pipeline.toml, cv.csv, cv.md, candidates.csv, tune.html)",
            t0.elapsed().as_secs_f64(),
            a.out.display()
        );
    }
    Ok(ExitCode::SUCCESS)
}
