//! `tendline`: the command line. It parses arguments, builds the validated
//! configuration, hands work to the library stages and reports; nothing else.

mod budget;
mod config;
mod deferred;
mod h5layout;
mod inputs;
mod inspect;
mod measures;
mod pipeline;
mod run;
mod tables;
mod tune;
mod validate;

// mimalloc serves the many short-lived per-beat and per-window buffers of the
// stages faster than glibc's allocator (its malloc/free family was about 7 %
// of a profile of a QTDB run).
#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

/// `mi_option_purge_delay` in mimalloc 3's `mimalloc.h` (`mi_option_e`, the
/// 16th entry); the Rust bindings carry no constant for it.
const MI_OPTION_PURGE_DELAY: libmimalloc_sys::mi_option_t = 15;

use anyhow::{Context, Result};
use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "tendline",
    version,
    about = "ECG wave boundaries, QT and QTc at research scale, with validation against annotated databases"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Process records: filter, detect beats, delineate waves, measure QT/QTc; write results to --out.
    Run(RunArgs),
    /// Score a run's annotation files against reference annotations and write a report.
    Validate(validate::ValidateArgs),
    /// Build the offline over-read site (index by review priority, one page per record) of a run.
    Review {
        /// A finished run folder.
        run: PathBuf,
        /// Site folder (default: `RUN/review`).
        #[arg(long)]
        out: Option<PathBuf>,
    },
    /// Import a reader's corrections file into a run: corrected marks kept beside the
    /// automatic ones with an audit trail, QT/QTc recomputed, outputs rewritten.
    Apply {
        /// A finished run folder.
        run: PathBuf,
        /// Corrections file saved from the review pages: JSON, or CSV (`.csv`, same fields as columns).
        corrections: PathBuf,
        /// Reader's name for entries that do not carry one.
        #[arg(long)]
        who: Option<String>,
    },
    /// Search thresholds over annotated records with record-level cross-validation;
    /// write the best configuration, the CV table and a report page to --out.
    Tune(tune::TuneArgs),
    /// List what a run would read, without processing: per record the format, sampling rate,
    /// leads, duration, sex and age, missing samples, non-ECG signals, reference annotation files
    /// beside it and any reading error; subjects-table rows without records and vice versa.
    Inspect(inspect::InspectArgs),
    /// Print the effective configuration (defaults, --config file and --set overrides) after validation.
    Config {
        /// Configuration file (TOML); default: the built-in pipeline.toml.
        #[arg(long)]
        config: Option<PathBuf>,
        /// Override one key, e.g. `--set detect.refractory_ms=200` (repeatable).
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        /// Print the compiled defaults instead (what pipeline.toml is generated from).
        #[arg(long, conflicts_with_all = ["config", "set"])]
        defaults: bool,
    },
}

#[derive(clap::Args)]
struct RunArgs {
    /// Folders, RECORDS lists, or record paths (.hea, .edf, .bdf, .ecg ISHNE Holter, .csv, .xml HL7 aECG, or a WFDB record name).
    #[arg(required = true)]
    inputs: Vec<PathBuf>,
    /// Output folder (created if needed; re-runs skip records already complete).
    #[arg(long)]
    out: PathBuf,
    /// Configuration file (TOML); default: the built-in pipeline.toml.
    #[arg(long)]
    config: Option<PathBuf>,
    /// Override one configuration key, e.g. `--set measure.window_s=5` (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    set: Vec<String>,
    /// Subjects CSV (record, subject, sex, age, timepoint); default: subjects.csv in an input folder.
    #[arg(long)]
    subjects: Option<PathBuf>,
    /// Worker threads (default: all cores); one more thread makes finished records durable and writes results.h5.
    #[arg(long)]
    jobs: Option<usize>,
    /// Redo records even when complete results under the same config and inputs exist.
    #[arg(long)]
    force: bool,
    /// No progress output.
    #[arg(long)]
    quiet: bool,
    /// Sampling rate (Hz) for CSV records that do not state one.
    #[arg(long, value_name = "HZ")]
    csv_fs: Option<f64>,
    /// Memory budget (MiB): records start only while their estimated need fits (long
    /// recordings then run fewer at a time); default: 3/4 of the memory available at the start.
    #[arg(long, value_name = "MIB")]
    max_memory: Option<u64>,
}

fn cmd_run(a: RunArgs) -> Result<ExitCode> {
    let config = config::load(a.config.as_deref(), &a.set)?;
    let records = inputs::resolve(&a.inputs);
    if records.iter().all(|r| r.problem.is_some()) {
        // Nothing to run: a usage error rather than a batch of failures.
        let problems: Vec<&str> = records
            .iter()
            .filter_map(|r| r.problem.as_deref())
            .collect();
        if problems.is_empty() {
            anyhow::bail!("no records found in the inputs given");
        }
        anyhow::bail!("no record to process:\n  {}", problems.join("\n  "));
    }
    let (subjects_file, subjects) = inputs::load_subjects(a.subjects.as_deref(), &a.inputs)?;
    inputs::check_csv_fs(a.csv_fs)?;
    let jobs = match a.jobs {
        Some(0) => anyhow::bail!("--jobs: allowed 1 or more threads, got 0"),
        Some(n) => n,
        None => std::thread::available_parallelism().map_or(1, |n| n.get()),
    };
    let opts = run::RunOptions {
        records,
        out: a.out,
        config,
        subjects,
        subjects_file,
        jobs,
        force: a.force,
        quiet: a.quiet,
        csv_fs: a.csv_fs,
        max_memory: match a.max_memory {
            Some(0) => anyhow::bail!("--max-memory: allowed 1 MiB or more, got 0"),
            m => m.map(|m| m << 20),
        },
    };
    let report = run::run(&opts)?;
    let subj = tables::subject_results(&report.parts, &opts.config.measure.subject);
    if !subj.is_empty() {
        tables::write_subjects(&opts.out, &subj)?;
    }
    tables::write_study(&opts.out, &subj, &opts.config.measure)?;
    if !a.quiet {
        println!(
            "{}",
            tables::print_table(
                &report.parts,
                &subj,
                opts.config.measure.preferred_formula.as_str()
            )
        );
    }
    for w in tables::amplitude_warnings(&report.parts) {
        eprintln!("{w}");
    }
    let failures = report.failures();
    let done = report.outcomes.len() - failures.len();
    if !a.quiet {
        eprintln!(
            "{} of {} records complete in {:.1} s; results in {}",
            done,
            report.outcomes.len(),
            report.seconds,
            opts.out.display()
        );
        let (stages, n) = report.stage_totals();
        let sum: f64 = stages.named().iter().map(|(_, v)| v).sum();
        if n > 0 && sum > 0.0 {
            let parts: Vec<String> = stages
                .named()
                .iter()
                .map(|(k, v)| format!("{k} {v:.2} s ({:.0} %)", 100.0 * v / sum))
                .collect();
            eprintln!(
                "time by stage over the {n} record(s) processed (run.json `stage_seconds`): {}",
                parts.join(", ")
            );
        }
    }
    if failures.is_empty() {
        Ok(ExitCode::SUCCESS)
    } else {
        eprintln!("\n{} record(s) failed:", failures.len());
        eprintln!("{:<20} error", "record");
        for (r, e) in &failures {
            eprintln!("{:<20} {}", r.name, e);
        }
        Ok(ExitCode::from(1))
    }
}

fn cmd_review(run: &std::path::Path, out: Option<PathBuf>) -> Result<ExitCode> {
    let out = out.unwrap_or_else(|| run.join("review"));
    let site = tendline_review::build_site(run, &out)
        .with_context(|| format!("review of {}", run.display()))?;
    for w in &site.warnings {
        eprintln!("warning: {w}");
    }
    eprintln!(
        "{} record page(s); open {}",
        site.pages.len(),
        site.index.display()
    );
    Ok(ExitCode::SUCCESS)
}

fn cmd_apply(
    run: &std::path::Path,
    corrections: &std::path::Path,
    who: Option<&str>,
) -> Result<ExitCode> {
    let report = tendline_review::apply_corrections(run, corrections, who)
        .with_context(|| format!("applying {} to {}", corrections.display(), run.display()))?;
    run::rebuild_outputs(run)?;
    eprintln!(
        "{} correction(s) applied to {} record(s); results.h5, CSV tables and {} annotation file(s) rewritten; report: {}",
        report.n_changes,
        report.parts.len(),
        report.annotations.len(),
        report.report.display()
    );
    Ok(ExitCode::SUCCESS)
}

/// Keep freed memory in the process instead of returning it to the kernel.
///
/// Every record allocates dozens of whole-record arrays of a few MB; above
/// glibc's mmap threshold each would be a fresh mapping whose pages the kernel
/// zeroes on first touch and unmaps on free, which cost about a sixth of the
/// CPU time of a QTDB run (measured: system time 0.59 s → 0.11 s for 12
/// records). Memory stays bounded: freed blocks are reused by the next record.
/// The same holds for mimalloc, which by default purges freed pages after a
/// delay (measured: about 1 s of system time over QTDB with purging, 0.7 s
/// without); glibc's settings still serve the C libraries (HDF5).
fn tune_allocator() {
    // SAFETY: a plain setter of a process-wide option, called before any
    // other thread exists.
    unsafe { libmimalloc_sys::mi_option_set(MI_OPTION_PURGE_DELAY, -1) };
    tune_glibc_allocator();
    disable_transparent_huge_pages();
}

/// No transparent huge pages for this process. mimalloc asks the kernel for
/// them on its arenas (`madvise`), and each first touch of a 2 MiB region
/// then zeroes all of it, used or not. Measured over QTDB (release build,
/// three runs each, identical outputs): system time with one worker
/// 0.64-0.93 s -> 0.31-0.34 s, with two workers 1.40-1.81 s -> 0.36-0.44 s
/// and wall time 4.79-4.90 s -> 4.19-4.41 s, user time unchanged; with the
/// `dist` build, two workers, five rounds: wall 4.85 -> 4.47 s, system time
/// 1.58 -> 0.38 s, user time 7.70 -> 8.16 s (small pages cost some address
/// translation). mimalloc's own option (`allow_thp`) is read before `main`
/// runs, so the process flag is set here instead.
#[cfg(target_os = "linux")]
fn disable_transparent_huge_pages() {
    // SAFETY: prctl with PR_SET_THP_DISABLE only sets a flag of this
    // process's memory map; a kernel without it returns an error, ignored.
    unsafe {
        libc::prctl(libc::PR_SET_THP_DISABLE, 1, 0, 0, 0);
    }
}

#[cfg(not(target_os = "linux"))]
fn disable_transparent_huge_pages() {}

#[cfg(all(target_os = "linux", target_env = "gnu"))]
fn tune_glibc_allocator() {
    // SAFETY: mallopt only changes allocator parameters; it is called before
    // any other thread exists.
    unsafe {
        libc::mallopt(libc::M_MMAP_THRESHOLD, 256 << 20);
        libc::mallopt(libc::M_TRIM_THRESHOLD, 512 << 20);
        libc::mallopt(libc::M_TOP_PAD, 64 << 20);
    }
}

#[cfg(not(all(target_os = "linux", target_env = "gnu")))]
fn tune_glibc_allocator() {}

fn main() -> ExitCode {
    tune_allocator();
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Run(a) => cmd_run(a),
        Command::Validate(a) => validate::cmd_validate(a),
        Command::Tune(a) => tune::cmd_tune(a),
        Command::Inspect(a) => inspect::cmd_inspect(a),
        Command::Review { run, out } => cmd_review(&run, out),
        Command::Apply {
            run,
            corrections,
            who,
        } => cmd_apply(&run, &corrections, who.as_deref()),
        Command::Config { defaults: true, .. } => {
            print!("{}", config::PipelineConfig::default().to_toml());
            Ok(ExitCode::SUCCESS)
        }
        Command::Config { config, set, .. } => config::load(config.as_deref(), &set).map(|c| {
            print!("{}", c.to_toml());
            ExitCode::SUCCESS
        }),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(2)
        }
    }
}

#[cfg(test)]
mod tests {
    // `MI_OPTION_PURGE_DELAY` is a raw index into mimalloc's option enum;
    // if a mimalloc update renumbered the enum, `tune_allocator` would set
    // another option. Defaults from the option table of the built mimalloc
    // (v3 src/options.c): purge delay 1000 ms, and the next entry,
    // use_numa_nodes, 0 (use all nodes).
    #[test]
    fn purge_delay_index_names_mimallocs_purge_delay() {
        // SAFETY: plain getters of process-wide options.
        let (purge, next) = unsafe {
            (
                libmimalloc_sys::mi_option_get(super::MI_OPTION_PURGE_DELAY),
                libmimalloc_sys::mi_option_get(super::MI_OPTION_PURGE_DELAY + 1),
            )
        };
        assert_eq!((purge, next), (1000, 0));
    }

    #[cfg(target_os = "linux")]
    #[test]
    fn transparent_huge_pages_are_off_for_the_process() {
        super::disable_transparent_huge_pages();
        // SAFETY: PR_GET_THP_DISABLE only reads the process flag.
        let flag = unsafe { libc::prctl(libc::PR_GET_THP_DISABLE, 0, 0, 0, 0) };
        assert_eq!(flag, 1, "PR_GET_THP_DISABLE after the call");
    }
}
