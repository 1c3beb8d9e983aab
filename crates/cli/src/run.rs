//! The batch: records in parallel, progress, resume, failure isolation, outputs.
//!
//! Output folder layout (all files written atomically):
//! - `parts/<record>.json`: a finished record's results and the key they were
//!   computed under (tool version, config, input checksums); reused on re-runs
//!   (format: DEVELOPERS.md, "Part files");
//! - `annotations/<record>.mark` and `.leadmark`: WFDB annotation files;
//! - `results.h5`, `summary.csv`, `windows.csv`, `failures.csv`, `run.json`:
//!   rebuilt by every run for the records named on the command line. During a
//!   run each record streams into `results.h5` (a temporary until the run ends)
//!   as soon as it is processed or reused, so writing overlaps processing;
//!   `tendline apply` rebuilds them from the part files.

use crate::budget::Budget;
use crate::config::PipelineConfig;
use crate::inputs::RecordInput;
use crate::pipeline::{self, Context};
use crate::tables;
use anyhow::{Context as _, Result};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::mpsc::{sync_channel, SyncSender};
use std::sync::Mutex;
use std::time::Instant;
use tendline_formats::subjects::SubjectRow;
use tendline_store::{Attr, Group, Part};

/// What the user asked for, already validated.
pub struct RunOptions {
    pub records: Vec<RecordInput>,
    pub out: PathBuf,
    pub config: PipelineConfig,
    pub subjects: BTreeMap<String, SubjectRow>,
    pub subjects_file: Option<PathBuf>,
    pub jobs: usize,
    pub force: bool,
    pub quiet: bool,
    pub csv_fs: Option<f64>,
    /// Memory budget in bytes (`--max-memory`); `None`: three quarters of the
    /// memory available at the start (see [`crate::budget`]).
    pub max_memory: Option<u64>,
}

/// How one record ended.
#[derive(Debug, Clone)]
pub enum Outcome {
    Done {
        seconds: f64,
        samples: u64,
        /// Time by stage ([`crate::pipeline::StageSeconds`]).
        stages: crate::pipeline::StageSeconds,
    },
    Reused,
    Failed {
        error: String,
    },
}

/// The run's result, for the caller to print and set the exit code.
pub struct RunReport {
    pub outcomes: Vec<(RecordInput, Outcome)>,
    pub parts: Vec<Part>,
    pub seconds: f64,
}

impl RunReport {
    /// Stage times summed over the records processed in this run, with their
    /// count (records reused from an earlier run or failed are not in it).
    pub fn stage_totals(&self) -> (crate::pipeline::StageSeconds, usize) {
        let mut total = crate::pipeline::StageSeconds::default();
        let mut n = 0;
        for (_, o) in &self.outcomes {
            if let Outcome::Done { stages, .. } = o {
                total += *stages;
                n += 1;
            }
        }
        (total, n)
    }

    pub fn failures(&self) -> Vec<(&RecordInput, &str)> {
        self.outcomes
            .iter()
            .filter_map(|(r, o)| match o {
                Outcome::Failed { error } => Some((r, error.as_str())),
                _ => None,
            })
            .collect()
    }
}

/// SHA-256 of a file, streamed.
pub fn sha256_file(path: &Path) -> Result<String> {
    use std::io::Read;
    let mut f =
        std::fs::File::open(path).with_context(|| format!("{}: cannot open", path.display()))?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = f
            .read(&mut buf)
            .with_context(|| format!("{}: read error", path.display()))?;
        if n == 0 {
            break;
        }
        h.update(&buf[..n]);
    }
    Ok(hex::encode(h.finalize()))
}

/// The files a record is made of, found without decoding it (for checksums and resume keys).
pub(crate) fn input_files(input: &RecordInput) -> Vec<PathBuf> {
    let mut files = vec![input.path.clone()];
    if input
        .path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("hea"))
    {
        // The formats crate's header parser decides which names are signal files;
        // a header it cannot parse is left for the reader to report.
        let dir = input.path.parent().unwrap_or(Path::new("."));
        let header = std::fs::read_to_string(&input.path)
            .ok()
            .and_then(|t| tendline_formats::wfdb::parse_header(&t, &input.path).ok());
        for sig in header.iter().flat_map(|h| &h.signals) {
            let p = dir.join(&sig.file_name);
            if !files.contains(&p) && p.is_file() {
                files.push(p);
            }
        }
    }
    files
}

fn record_key(
    ctx: &Context,
    checksums: &[(String, String)],
    subject: Option<&SubjectRow>,
) -> String {
    let mut h = Sha256::new();
    h.update(env!("CARGO_PKG_VERSION").as_bytes());
    h.update(ctx.config_toml.as_bytes());
    for (f, s) in checksums {
        h.update(f.as_bytes());
        h.update(s.as_bytes());
    }
    h.update(format!("{subject:?}").as_bytes());
    hex::encode(h.finalize())
}

pub(crate) fn panic_text(p: Box<dyn std::any::Any + Send>) -> String {
    if let Some(s) = p.downcast_ref::<&str>() {
        s.to_string()
    } else if let Some(s) = p.downcast_ref::<String>() {
        s.clone()
    } else {
        "unknown panic".into()
    }
}

/// Where finished records go as they finish: `results.h5` (one writer, in
/// turn) and their CSV rows, kept in input order for the end of the run.
struct Sink {
    h5: Mutex<Option<tendline_store::ResultsWriter>>,
    error: Mutex<Option<anyhow::Error>>,
    rows: Mutex<Vec<Option<(String, String)>>>,
}

impl Sink {
    /// Stream one record's full results out; errors are kept for the end of the run.
    fn emit(&self, index: usize, part: &mut Part) {
        let r = (|| -> Result<()> {
            let rows = tables::CsvWriter::rows(part)?;
            self.rows.lock().expect("rows lock")[index] = Some(rows);
            crate::h5layout::stack_medians(&mut part.group);
            if let Some(h5) = self.h5.lock().expect("h5 lock").as_mut() {
                h5.add_record(&part.record, &part.group)?;
            }
            Ok(())
        })();
        if let Err(e) = r {
            self.error.lock().expect("error lock").get_or_insert(e);
        }
    }
}

/// A finished record on its way out through the committer thread: its staged
/// files (temporary path, final path), made durable and renamed in this order (the
/// part file last, so a part on disk always has its annotations), then its tree
/// into `results.h5` and its CSV rows.
struct Job {
    index: usize,
    staged: Staged,
    part: Part,
}

/// Files written to temporary siblings: (temporary path, final path).
type Staged = Vec<(PathBuf, PathBuf)>;

/// Make every staged file of `job` durable and put it in place, in order; on the
/// first failure the remaining temporary files are removed and the error returned.
fn commit_job(job: &Job) -> Result<()> {
    for (i, (tmp, path)) in job.staged.iter().enumerate() {
        if let Err(e) = tendline_store::commit(tmp, path) {
            for (t, _) in &job.staged[i + 1..] {
                let _ = std::fs::remove_file(t);
            }
            return Err(e.into());
        }
    }
    Ok(())
}

/// Write `files` (final path, bytes) to temporary siblings; none is left behind on failure.
fn stage_all(files: Vec<(PathBuf, Vec<u8>)>) -> Result<Staged> {
    let mut staged = Vec::with_capacity(files.len());
    for (path, bytes) in files {
        match tendline_store::stage(&path, &bytes) {
            Ok(tmp) => staged.push((tmp, path)),
            Err(e) => {
                for (t, _) in &staged {
                    let _ = std::fs::remove_file(t);
                }
                return Err(e.into());
            }
        }
    }
    Ok(staged)
}

/// Progress of the batch as records and chunks of long records finish: the
/// bar (terminal) or lines (otherwise), and the sample rate. The bar counts
/// samples (each record's estimated from its header or size before it runs,
/// [`crate::budget::estimate`]), so its ETA follows a long record's chunks.
struct Reporter<'a> {
    pb: &'a ProgressBar,
    /// Lines instead of the bar (stderr is not a terminal and not `--quiet`).
    plain: bool,
    log: &'a Mutex<()>,
    /// Samples (over all leads) processed so far, for the rate.
    samples: &'a AtomicU64,
    /// Records finished, of `n`.
    done: &'a AtomicU64,
    n: usize,
    t0: Instant,
}

/// One record's progress so far.
#[derive(Debug, Default)]
struct RecordProgress {
    /// Its samples as 8-byte values, estimated before it runs from its header
    /// or size ([`crate::budget::estimate`], read once per record).
    bytes: u64,
    /// How a chunked record of its kind holds its samples
    /// ([`crate::budget::Estimate::deferred`]).
    deferred: Option<f64>,
    /// Its samples over all leads, the same estimate (bar units, at least 1,
    /// so that every record moves the bar).
    estimate: u64,
    /// Samples over all leads counted into the rate.
    counted: u64,
    /// Bar units advanced for it (at most `estimate`).
    advanced: u64,
    /// Last tenth of the record reported by a line.
    tenth: usize,
}

impl Reporter<'_> {
    fn rate(&self) -> String {
        let rate =
            self.samples.load(Ordering::Relaxed) as f64 / self.t0.elapsed().as_secs_f64().max(1e-9);
        format!("{:.1} M samples/s", rate / 1e6)
    }

    fn records(&self) -> String {
        format!("{}/{} records", self.done.load(Ordering::Relaxed), self.n)
    }

    /// Moves the bar to `units` of the record (never past its estimate).
    fn advance(&self, rec: &mut RecordProgress, units: u64) {
        let to = units.min(rec.estimate);
        if to > rec.advanced {
            self.pb.inc(to - rec.advanced);
            rec.advanced = to;
        }
    }

    /// A chunk of the long record `name` is done. A line goes out each time
    /// another tenth of the record is passed, so a 24-hour recording shows
    /// about ten lines, not one per chunk.
    fn chunk(&self, name: &str, p: pipeline::ChunkProgress, rec: &mut RecordProgress) {
        let now = (p.done * p.leads) as u64;
        self.samples
            .fetch_add(now.saturating_sub(rec.counted), Ordering::Relaxed);
        rec.counted = rec.counted.max(now);
        let n = p.n.max(1);
        let pct = 100 * p.done / n;
        // The estimate may differ from the samples read: scale to it.
        self.advance(rec, (rec.estimate as f64 * p.done as f64 / n as f64) as u64);
        self.pb.set_message(format!(
            "{}  {}  {name} {pct} %",
            self.records(),
            self.rate()
        ));
        let tenth = 10 * p.done / n;
        if self.plain && tenth > rec.tenth && p.done < p.n {
            rec.tenth = tenth;
            let _g = self.log.lock();
            eprintln!(
                "[{name}] {pct} % ({} of {})",
                crate::inspect::fmt_duration(p.done as f64 / p.fs),
                crate::inspect::fmt_duration(p.n as f64 / p.fs)
            );
        }
    }

    /// A record has finished (done, kept or failed): the bar takes the rest
    /// of its estimate. Returns how many records have finished, this one
    /// included.
    fn finished(&self, rec: &mut RecordProgress) -> u64 {
        let k = self.done.fetch_add(1, Ordering::Relaxed) + 1;
        self.advance(rec, rec.estimate);
        self.pb
            .set_message(format!("{}  {}", self.records(), self.rate()));
        k
    }
}

fn process_one(
    input: &RecordInput,
    budget: &Budget,
    ctx: &Context,
    opts: &RunOptions,
    report: &Reporter,
    progress: &mut RecordProgress,
    out: (&SyncSender<Job>, usize),
) -> (Outcome, Option<Part>) {
    let samples = report.samples;
    let t0 = Instant::now();
    if let Some(problem) = &input.problem {
        return (
            Outcome::Failed {
                error: problem.clone(),
            },
            None,
        );
    }
    let part_path = opts.out.join("parts").join(format!("{}.json", input.name));
    let result = (|| -> Result<(Outcome, Part, Staged)> {
        let files = input_files(input);
        let checksums: Vec<(String, String)> = files
            .iter()
            .map(|f| {
                Ok((
                    f.file_name()
                        .unwrap_or_default()
                        .to_string_lossy()
                        .into_owned(),
                    sha256_file(f)?,
                ))
            })
            .collect::<Result<_>>()?;
        let subject = opts.subjects.get(&input.name);
        let key = record_key(ctx, &checksums, subject);
        let ann_dir = opts.out.join("annotations");
        if !opts.force {
            if let Ok(Some(part)) = Part::load(&part_path) {
                let anns_present = ann_dir.join(format!("{}.mark", input.name)).is_file()
                    && ann_dir.join(format!("{}.leadmark", input.name)).is_file();
                if part.key == key && anns_present {
                    return Ok((Outcome::Reused, part, Vec::new()));
                }
            }
        }
        let processed = {
            let chunk = crate::budget::chunk_samples(ctx.config.measure.chunk_mega_samples);
            let _share = budget.acquire(crate::budget::need(
                progress.bytes,
                chunk,
                opts.jobs,
                progress.deferred,
            ));
            pipeline::process_record(input, ctx, subject, &checksums, &mut |p| {
                report.chunk(&input.name, p, progress)
            })?
        };
        samples.fetch_add(
            processed.n_samples.saturating_sub(progress.counted),
            Ordering::Relaxed,
        );
        let part = Part {
            record: input.name.clone(),
            key,
            group: processed.group,
        };
        // The files are written here, in parallel with the other records; their
        // fsync and rename (slow on a real disk) wait for the committer thread.
        let mut staged = stage_all(vec![
            (
                ann_dir.join(format!("{}.mark", input.name)),
                processed.marks,
            ),
            (
                ann_dir.join(format!("{}.leadmark", input.name)),
                processed.leadmarks,
            ),
        ])?;
        // Serialized straight to its file: a long record's part is large.
        match part.stage_json(&part_path) {
            Ok(tmp) => staged.push((tmp, part_path.clone())),
            Err(e) => {
                for (t, _) in &staged {
                    let _ = std::fs::remove_file(t);
                }
                return Err(e.into());
            }
        }
        Ok((
            Outcome::Done {
                seconds: t0.elapsed().as_secs_f64(),
                samples: processed.n_samples,
                stages: processed.stages,
            },
            part,
            staged,
        ))
    })();
    match result {
        Ok((o, part, staged)) => {
            let short = brief(&part);
            let (tx, index) = out;
            let job = Job {
                index,
                staged,
                part,
            };
            if let Err(e) = tx.send(job) {
                for (t, _) in &e.0.staged {
                    let _ = std::fs::remove_file(t);
                }
                return (
                    Outcome::Failed {
                        error: "results writer stopped before this record".into(),
                    },
                    None,
                );
            }
            (o, Some(short))
        }
        Err(e) => (
            Outcome::Failed {
                error: format!("{e:#}"),
            },
            None,
        ),
    }
}

/// What the end of the run needs in memory from a record: its attributes and the
/// windows' QT and RR (for per-subject fits). The full tree stays on disk in its part
/// file and is streamed into `results.h5`, so memory does not grow with the batch.
fn brief(p: &Part) -> Part {
    let mut g = Group {
        attrs: p.group.attrs.clone(),
        ..Group::default()
    };
    if let Some(w) = p.group.groups.get("windows") {
        for k in ["qt_ms", "rr_ms"] {
            if let Some(d) = w.datasets.get(k) {
                g.group("windows").datasets.insert(k.to_string(), d.clone());
            }
        }
    }
    Part {
        record: p.record.clone(),
        key: p.key.clone(),
        group: g,
    }
}

/// A bar of `total` units (samples over all leads, estimated), hidden
/// with `--quiet` or without a terminal.
fn progress_bar(total: u64, quiet: bool) -> ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::hidden());
    }
    let pb = ProgressBar::new(total);
    pb.set_style(
        ProgressStyle::with_template("{bar:30} {msg}  ETA {eta}").expect("static template"),
    );
    pb
}

impl RecordProgress {
    /// A record about to run, as the budget estimated it.
    fn new(est: crate::budget::Estimate) -> Self {
        Self {
            bytes: est.bytes,
            deferred: est.deferred,
            estimate: (est.bytes / 8).max(1),
            ..Default::default()
        }
    }
}

/// Run the whole batch. Never stops at a bad record.
pub fn run(opts: &RunOptions) -> Result<RunReport> {
    let t0 = Instant::now();
    std::fs::create_dir_all(&opts.out)
        .with_context(|| format!("--out {}: cannot create", opts.out.display()))?;
    let mut ctx = Context::new(&opts.config, opts.csv_fs)?;
    ctx.chunk_pool = Some(
        rayon::ThreadPoolBuilder::new()
            .num_threads(opts.jobs)
            .build()
            .context("cannot start worker threads")?,
    );
    let n = opts.records.len();
    let budget = Budget::new(
        opts.max_memory
            .or_else(|| crate::budget::available_bytes().map(|a| a / 4 * 3)),
    );
    // Each record's size, from its header or file size, read once.
    let sizes: Vec<crate::budget::Estimate> =
        opts.records.iter().map(crate::budget::estimate).collect();
    note_budget(opts, &budget, &sizes);
    let pb = progress_bar(
        sizes.iter().map(|&e| RecordProgress::new(e).estimate).sum(),
        opts.quiet,
    );
    pb.set_message(format!("0/{n} records"));
    let plain = !opts.quiet && !std::io::stderr().is_terminal();
    let samples = AtomicU64::new(0);
    let done = AtomicU64::new(0);
    let log = Mutex::new(());
    // Records stream into results.h5 as they finish, so writing overlaps the
    // processing of the others and no part file is read back at the end.
    let mut root = root_group(opts, &ctx)?;
    let created = root.attrs.remove("created_utc");
    let sink = Sink {
        h5: Mutex::new(Some(tendline_store::ResultsWriter::create(
            &opts.out.join("results.h5"),
            &root,
        )?)),
        error: Mutex::new(None),
        rows: Mutex::new(vec![None; n]),
    };
    // One committer thread makes each record's files durable (fsync, rename) and
    // streams it into results.h5 while the workers go on with the next records:
    // the workers neither wait on the disk nor on each other for the HDF5 writer.
    // The bounded queue keeps memory bounded when the committer falls behind.
    let (tx, rx) = sync_channel::<Job>(2 * opts.jobs.max(1));
    let (results, late_failures) = std::thread::scope(|scope| {
        let committer = scope.spawn(|| {
            let mut failed: Vec<(usize, String)> = Vec::new();
            for mut job in rx {
                let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                    commit_job(&job).map(|()| sink.emit(job.index, &mut job.part))
                }));
                match r {
                    Ok(Ok(())) => {}
                    Ok(Err(e)) => failed.push((job.index, format!("{e:#}"))),
                    Err(p) => failed.push((
                        job.index,
                        format!("internal error (panic): {}", panic_text(p)),
                    )),
                }
            }
            failed
        });
        let results = run_records(
            opts, &budget, &ctx, &sizes, &samples, &done, &log, &pb, plain, t0, &tx,
        );
        drop(tx);
        // The committer catches the panics of its jobs; any other is re-raised.
        let failed = committer
            .join()
            .unwrap_or_else(|p| std::panic::resume_unwind(p));
        (results, failed)
    });
    pb.finish_and_clear();
    let mut results = results;
    for (index, error) in late_failures {
        if let Some(r) = results.get_mut(index) {
            if !matches!(r.0, Outcome::Failed { .. }) {
                *r = (Outcome::Failed { error }, None);
            }
        }
    }
    let mut outcomes = Vec::with_capacity(n);
    let mut parts = Vec::new();
    for (input, (o, p)) in opts.records.iter().zip(results) {
        outcomes.push((input.clone(), o));
        parts.extend(p);
    }
    if let Some(e) = sink.error.into_inner().expect("error lock") {
        return Err(e);
    }
    let mut h5 = sink
        .h5
        .into_inner()
        .expect("h5 lock")
        .expect("writer present until the end");
    if let Some(a) = created {
        h5.root_attr("created_utc", &a)?;
    }
    h5.finish()?;
    let mut csv = tables::CsvWriter::default();
    for rows in sink.rows.into_inner().expect("rows lock").iter().flatten() {
        csv.push_rows(rows);
    }
    let report = RunReport {
        outcomes,
        parts,
        seconds: t0.elapsed().as_secs_f64(),
    };
    write_tables(opts, &ctx, &report, &csv)?;
    Ok(report)
}

/// Say when the memory budget will keep records from running side by side
/// (the largest `jobs` records together need more than it), and warn when a
/// record needs more memory than the machine has available.
/// `sizes`: each record's [`crate::budget::estimate`].
fn note_budget(opts: &RunOptions, budget: &Budget, sizes: &[crate::budget::Estimate]) {
    let chunk = crate::budget::chunk_samples(opts.config.measure.chunk_mega_samples);
    let mut needs: Vec<(u64, &str)> = opts
        .records
        .iter()
        .zip(sizes)
        .filter(|(r, _)| r.problem.is_none())
        .map(|(r, e)| {
            let need = crate::budget::need(e.bytes, chunk, opts.jobs, e.deferred);
            (need, r.name.as_str())
        })
        .collect();
    needs.sort_unstable_by_key(|n| std::cmp::Reverse(n.0));
    if let Some(note) = needs
        .first()
        .and_then(|&(need, name)| oversize_note(name, need, crate::budget::available_bytes()?))
    {
        eprintln!("{note}");
    }
    // A warning of a possible failure shows even with `--quiet`; this note
    // only explains the pace, which `--quiet` asks not to hear about.
    let Some(total) = budget.total().filter(|_| !opts.quiet) else {
        return;
    };
    let top: u64 = needs.iter().take(opts.jobs.max(1)).map(|n| n.0).sum();
    if opts.jobs > 1 && top > total {
        eprintln!(
            "memory budget {} MiB (`--max-memory`): the longest records need up to {} MiB each \
             and run fewer at a time",
            total >> 20,
            needs[0].0 >> 20
        );
    }
}

/// A warning when the record needing the most memory (`need` bytes, estimated)
/// needs more than the machine has available (`available` bytes): the budget
/// runs it alone, but the system may still stop the run for lack of memory.
fn oversize_note(name: &str, need: u64, available: u64) -> Option<String> {
    (need > available).then(|| {
        format!(
            "memory: record `{name}` needs about {} MiB, more than the {} MiB available now; \
             it may be stopped for lack of memory (fewer `--jobs`, a machine with more \
             memory, or the recording split into parts avoids it)",
            need >> 20,
            available >> 20
        )
    })
}

/// What a record's processing gives the run: its outcome and, unless it
/// failed, its part.
type RecordResult = (Outcome, Option<Part>);

/// The records on `opts.jobs` threads, started in input order; finished ones
/// go to `tx`. Plain threads, not a rayon pool: a record may wait for its
/// share of the memory budget, which is safe only on a thread with no other
/// work suspended beneath it (see [`Context::chunk_pool`]).
#[allow(clippy::too_many_arguments)]
fn run_records(
    opts: &RunOptions,
    budget: &Budget,
    ctx: &Context,
    sizes: &[crate::budget::Estimate],
    samples: &AtomicU64,
    done: &AtomicU64,
    log: &Mutex<()>,
    pb: &ProgressBar,
    plain: bool,
    t0: Instant,
    tx: &SyncSender<Job>,
) -> Vec<RecordResult> {
    let n = opts.records.len();
    let report = Reporter {
        pb,
        plain,
        log,
        samples,
        done,
        n,
        t0,
    };
    let next = std::sync::atomic::AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<RecordResult>>> = (0..n).map(|_| Mutex::new(None)).collect();
    let one = |index: usize| {
        let input = &opts.records[index];
        let mut progress = RecordProgress::new(sizes[index]);
        let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            process_one(
                input,
                budget,
                ctx,
                opts,
                &report,
                &mut progress,
                (tx, index),
            )
        }))
        .unwrap_or_else(|p| {
            (
                Outcome::Failed {
                    error: format!("internal error (panic): {}", panic_text(p)),
                },
                None,
            )
        });
        let k = report.finished(&mut progress);
        if plain {
            let _g = log.lock();
            let what = match &r.0 {
                Outcome::Done {
                    seconds, samples, ..
                } => {
                    format!("done, {samples} samples in {seconds:.2} s")
                }
                Outcome::Reused => "unchanged, kept".to_string(),
                Outcome::Failed { error } => format!("FAILED: {error}"),
            };
            eprintln!("[{k}/{n}] {}: {what}", input.name);
        }
        *slots[index].lock().unwrap_or_else(|e| e.into_inner()) = Some(r);
    };
    std::thread::scope(|scope| {
        for _ in 0..opts.jobs.clamp(1, n.max(1)) {
            scope.spawn(|| loop {
                let index = next.fetch_add(1, Ordering::Relaxed);
                if index >= n {
                    break;
                }
                one(index);
            });
        }
    });
    slots
        .into_iter()
        .map(|s| {
            s.into_inner()
                .unwrap_or_else(|e| e.into_inner())
                .expect("every record index was taken by a thread")
        })
        .collect()
}

/// Rewrite `results.h5`, `summary.csv`, `windows.csv` and `subjects.csv` of a finished
/// run from its part files (after corrections were imported), under the run's own
/// configuration and record list as recorded in `run.json`.
pub fn rebuild_outputs(out: &Path) -> Result<()> {
    let manifest_path = out.join("run.json");
    let text = std::fs::read_to_string(&manifest_path).with_context(|| {
        format!(
            "{}: cannot read (not a run folder?)",
            manifest_path.display()
        )
    })?;
    let manifest: serde_json::Value = serde_json::from_str(&text)
        .with_context(|| format!("{}: not valid JSON", manifest_path.display()))?;
    let config_toml = manifest["config_toml"].as_str().unwrap_or_default();
    let config = crate::config::load_from_str(config_toml, "config of the run (run.json)", &[])?;
    let ctx = Context::new(&config, None)?;
    let mut report = RunReport {
        outcomes: Vec::new(),
        parts: Vec::new(),
        seconds: manifest["seconds"].as_f64().unwrap_or(0.0),
    };
    for r in manifest["records"].as_array().into_iter().flatten() {
        let name = r["record"].as_str().unwrap_or_default().to_string();
        let input = RecordInput {
            name: name.clone(),
            path: PathBuf::from(r["path"].as_str().unwrap_or_default()),
            problem: None,
        };
        let outcome = match r["status"].as_str() {
            Some("failed") => Outcome::Failed {
                error: r["detail"].as_str().unwrap_or_default().to_string(),
            },
            _ => {
                let p = out.join("parts").join(format!("{name}.json"));
                let part = Part::load(&p)?
                    .with_context(|| format!("{}: part file missing", p.display()))?;
                report.parts.push(brief(&part));
                Outcome::Reused
            }
        };
        report.outcomes.push((input, outcome));
    }
    let opts = RunOptions {
        records: report.outcomes.iter().map(|(r, _)| r.clone()).collect(),
        out: out.to_path_buf(),
        config,
        subjects: Default::default(),
        // Keep the subjects file of the original run on record (root attributes).
        subjects_file: manifest["subjects_file"]
            .as_str()
            .map(PathBuf::from)
            .filter(|p| p.is_file()),
        jobs: 1,
        force: false,
        quiet: true,
        csv_fs: None,
        max_memory: None,
    };
    write_run_outputs(&opts, &ctx, &report)?;
    let subj = tables::subject_results(&report.parts, &opts.config.measure.subject);
    if !subj.is_empty() {
        tables::write_subjects(out, &subj)?;
    }
    tables::write_study(out, &subj, &opts.config.measure)?;
    Ok(())
}

/// The root attributes of `results.h5`.
fn root_group(opts: &RunOptions, ctx: &Context) -> Result<Group> {
    let mut root = Group::default();
    root.attr("tool", Attr::Text("tendline".into()));
    root.attr("tool_version", Attr::Text(env!("CARGO_PKG_VERSION").into()));
    root.attr("config_toml", Attr::Text(ctx.config_toml.clone()));
    root.attr("config_sha256", Attr::Text(ctx.config_sha256.clone()));
    root.attr("created_utc", Attr::Text(tables::utc_now()));
    root.attr(
        "caution",
        Attr::Text(tendline_measure::classify::CAUTION.into()),
    );
    if let Some(s) = &opts.subjects_file {
        root.attr("subjects_file", Attr::Text(s.display().to_string()));
        root.attr("subjects_sha256", Attr::Text(sha256_file(s)?));
    }
    Ok(root)
}

fn write_run_outputs(opts: &RunOptions, ctx: &Context, report: &RunReport) -> Result<()> {
    let root = root_group(opts, ctx)?;
    let mut h5 = tendline_store::ResultsWriter::create(&opts.out.join("results.h5"), &root)?;
    let mut csv = tables::CsvWriter::default();
    for p in &report.parts {
        let path = opts.out.join("parts").join(format!("{}.json", p.record));
        let full = Part::load(&path)?
            .with_context(|| format!("{}: part file disappeared during the run", path.display()))?;
        csv.add(&full)?;
        let mut g = full.group;
        crate::h5layout::stack_medians(&mut g);
        h5.add_record(&full.record, &g)?;
    }
    h5.finish()?;
    write_tables(opts, ctx, report, &csv)
}

/// The CSV tables, the failures and the run manifest.
fn write_tables(
    opts: &RunOptions,
    ctx: &Context,
    report: &RunReport,
    csv: &tables::CsvWriter,
) -> Result<()> {
    csv.write(&opts.out)?;
    tables::write_failures(&opts.out, &report.failures())?;
    tables::write_manifest(&opts.out, ctx, report, opts.subjects_file.as_deref())?;
    Ok(())
}

#[cfg(test)]
mod budget_note_tests {
    /// The warning names the record and both sizes only when the need exceeds
    /// what is available.
    #[test]
    fn an_oversize_record_is_named_before_the_run() {
        assert_eq!(super::oversize_note("h24", 9 << 30, 10 << 30), None);
        let note = super::oversize_note("h24", 12 << 30, 8 << 30).unwrap();
        assert!(
            note.contains("`h24`") && note.contains("12288 MiB") && note.contains("8192 MiB"),
            "{note}"
        );
    }
}
