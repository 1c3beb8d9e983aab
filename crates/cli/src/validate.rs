//! `tendline validate`: score a run (or run, then score) against reference
//! annotations and write `report.json`, `report.md`, `report.html` and
//! `marks.csv` (every scored mark); with
//! `--floors`, fail when accuracy falls below the committed floors.

use anyhow::{Context, Result};
use std::path::PathBuf;
use std::process::ExitCode;
use tendline_evaluate::{ReferenceKind, ValidateOptions};

#[derive(clap::Args)]
pub struct ValidateArgs {
    /// A finished run folder (holding annotations/ and windows.csv); with --process, where to run.
    pub run: PathBuf,
    /// Folder with the reference records and annotation files (e.g. ../shared/data/qtdb).
    #[arg(long)]
    pub data: PathBuf,
    /// Report folder (default: `RUN/validation`).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Which references to score against: auto (every kind present), beats, global, per-lead.
    #[arg(long, default_value = "auto", value_parser = ["auto", "beats", "global", "per-lead"])]
    pub reference: String,
    /// Only these records (comma-separated); default every record of the run with a reference.
    #[arg(long, value_delimiter = ',')]
    pub records: Option<Vec<String>>,
    /// Database name used in the report and the floors file (default: the data folder's name).
    #[arg(long)]
    pub database: Option<String>,
    /// Beat matching window on QRS peaks (ms; ANSI/AAMI EC57 practice: 150).
    #[arg(long, default_value_t = 150.0)]
    pub beat_window_ms: f64,
    /// Largest |error| for a boundary to count as found (ms).
    #[arg(long, default_value_t = 150.0)]
    pub fiducial_window_ms: f64,
    /// Bootstrap resamples of the records behind each 95 % interval (100 to 100000).
    #[arg(long, default_value_t = tendline_evaluate::stability::REPLICATES)]
    pub bootstrap: usize,
    /// Seed of the bootstrap's record draws (the same seed gives the same intervals).
    #[arg(long, default_value_t = tendline_evaluate::stability::SEED)]
    pub seed: u64,
    /// Committed accuracy floors (TOML); the command fails (exit 1) when any is not met.
    #[arg(long)]
    pub floors: Option<PathBuf>,
    /// Run the pipeline over --data into RUN first (resuming), then score.
    #[arg(long)]
    pub process: bool,
    /// With --process: configuration file (default: the built-in pipeline.toml).
    #[arg(long)]
    pub config: Option<PathBuf>,
    /// With --process: override one configuration key (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// With --process: worker threads.
    #[arg(long)]
    pub jobs: Option<usize>,
    /// No progress output.
    #[arg(long)]
    pub quiet: bool,
}

pub fn cmd_validate(a: ValidateArgs) -> Result<ExitCode> {
    if a.process {
        let config = crate::config::load(a.config.as_deref(), &a.set)?;
        let records = crate::inputs::resolve_all(std::slice::from_ref(&a.data))?;
        let opts = crate::run::RunOptions {
            records,
            out: a.run.clone(),
            config,
            subjects: Default::default(),
            subjects_file: None,
            jobs: a
                .jobs
                .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get())),
            force: false,
            quiet: a.quiet,
            csv_fs: None,
            max_memory: None,
        };
        let report = crate::run::run(&opts)?;
        let failed = report.failures();
        if !failed.is_empty() {
            eprintln!(
                "warning: {} record(s) failed to process and are not scored:",
                failed.len()
            );
            for (r, e) in failed {
                eprintln!("  {}: {e}", r.name);
            }
        }
    }
    let opts = ValidateOptions {
        run_dir: a.run.clone(),
        data_dir: a.data.clone(),
        reference: match a.reference.as_str() {
            "beats" => ReferenceKind::Beats,
            "global" => ReferenceKind::Global,
            "per-lead" => ReferenceKind::PerLead,
            _ => ReferenceKind::Auto,
        },
        out_dir: a.out.clone().unwrap_or_else(|| a.run.join("validation")),
        records: a.records.clone(),
        database: a.database.clone(),
        beat_window_ms: a.beat_window_ms,
        fiducial_window_ms: a.fiducial_window_ms,
        resampling: tendline_evaluate::stability::Resampling {
            replicates: a.bootstrap,
            seed: a.seed,
        },
        ..ValidateOptions::default()
    };
    let report = tendline_evaluate::validate_and_write(&opts).with_context(|| {
        format!(
            "validating {} against {}",
            a.run.display(),
            a.data.display()
        )
    })?;
    if !a.quiet {
        eprintln!(
            "{}: {} records scored; report (report.md, .html, .json){} in {}",
            report.database,
            report.records.len(),
            if report.marks.is_empty() {
                ""
            } else {
                " and every scored mark (marks.csv)"
            },
            opts.out_dir.display()
        );
        for w in &report.warnings {
            eprintln!("warning: {w}");
        }
    }
    if let Some(f) = &a.floors {
        let floors = tendline_evaluate::floors::Floors::read(f)?;
        let violations = tendline_evaluate::floors::check_floors(&report, &floors);
        if !violations.is_empty() {
            eprintln!("accuracy below the floors of {}:", f.display());
            for v in &violations {
                eprintln!("  {v}");
            }
            return Ok(ExitCode::from(1));
        }
        eprintln!("{}: every floor of {} met", report.database, f.display());
    }
    Ok(ExitCode::SUCCESS)
}
