//! One record through every stage: read, condition, detect, delineate, measure;
//! then its results as a store tree and as WFDB annotation files.

use crate::config::PipelineConfig;
use crate::inputs::RecordInput;
use anyhow::{bail, Context as _, Result};
use rayon::prelude::*;
use std::path::Path;
use tendline_delineate::{BeatMarks, Mark, TEndMethod, TMorphology};
use tendline_detect::Detection;
use tendline_dsp::amplitude::AmplitudeClass;
use tendline_dsp::filter::FilterCache;
use tendline_formats::annotation::{
    boundary_annotations, Annotation, AnnotationEncoder, WaveMarks,
};
use tendline_formats::deferred::Loaded;
use tendline_formats::subjects::SubjectRow;
use tendline_formats::Record;
use tendline_store::{Attr, Data, Group};

/// What every record shares: the config and the filter designs (one per sampling rate).
pub struct Context {
    pub config: PipelineConfig,
    pub config_toml: String,
    pub config_sha256: String,
    pub filters: FilterCache,
    pub csv_fs: Option<f64>,
    /// Threads for the chunks of long records (one wave of chunks at a time per
    /// record); `None`: chunks one after another on the record's own thread.
    /// Records themselves never run on this pool: a record may wait for memory
    /// (the run's budget), and a pool thread waiting for its chunks takes
    /// other jobs of its pool meanwhile, so a record started there beneath a
    /// waiting one could wait for the budget the suspended record holds.
    pub chunk_pool: Option<rayon::ThreadPool>,
    /// Keep a WFDB record that will be processed in chunks digital until
    /// each chunk is converted (`deferred`); off, it is read whole in
    /// physical units (the oracle of the tests).
    pub defer_long_records: bool,
}

impl Context {
    pub fn new(config: &PipelineConfig, csv_fs: Option<f64>) -> Result<Self> {
        Ok(Self {
            config: config.clone(),
            config_toml: config.to_toml(),
            config_sha256: config.sha256(),
            filters: FilterCache::new(config.filter.clone()),
            csv_fs,
            chunk_pool: None,
            defer_long_records: true,
        })
    }
}

/// A processed record: its store tree and its annotations.
pub struct Processed {
    pub group: Group,
    /// The global marks' annotation file (`<record>.mark`), encoded.
    pub marks: Vec<u8>,
    /// The per-lead marks' annotation file (`<record>.leadmark`), encoded.
    pub leadmarks: Vec<u8>,
    pub n_samples: u64,
    pub stages: StageSeconds,
}

/// Wall time one record spent in each stage (seconds, on the thread that ran
/// it; the chunks of a long record run side by side, so their times add up to
/// more than the record's wall time). For engineers who tune thresholds or
/// look for the slow stage: written to `run.json`, summed over the run.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct StageSeconds {
    /// Reading the input and checking it (missing samples, non-ECG signals).
    pub read: f64,
    /// Amplitude check, pacing-stimulus search and the conditioning filters.
    pub condition: f64,
    /// QRS detection and beat labels.
    pub detect: f64,
    /// Wave delineation, per lead and global.
    pub delineate: f64,
    /// Windows, median beats, QT and QTc.
    pub measure: f64,
    /// The record's results tree and annotation lists.
    pub assemble: f64,
}

impl StageSeconds {
    /// The stages with their names, in pipeline order.
    pub fn named(&self) -> [(&'static str, f64); 6] {
        [
            ("read", self.read),
            ("condition", self.condition),
            ("detect", self.detect),
            ("delineate", self.delineate),
            ("measure", self.measure),
            ("assemble", self.assemble),
        ]
    }
}

impl std::ops::AddAssign for StageSeconds {
    fn add_assign(&mut self, o: Self) {
        self.read += o.read;
        self.condition += o.condition;
        self.detect += o.detect;
        self.delineate += o.delineate;
        self.measure += o.measure;
        self.assemble += o.assemble;
    }
}

/// The first checks of [`check_record`]: at least one signal, a usable
/// sampling rate.
pub(crate) fn check_shape(n_leads: usize, fs: f64, path: &Path) -> Result<()> {
    if n_leads == 0 {
        bail!("{}: record has no signals", path.display());
    }
    if !(fs.is_finite() && fs > 0.0) {
        bail!(
            "{}: sampling frequency must be positive, got {fs}",
            path.display()
        );
    }
    Ok(())
}

/// Reject records no stage can work on, naming the problem.
pub(crate) fn check_record(rec: &Record, path: &Path) -> Result<()> {
    check_shape(rec.leads.len(), rec.fs, path)?;
    let n = rec.n_samples();
    check_not_empty(n, path)?;
    for (i, l) in rec.leads.iter().enumerate() {
        check_lead(i, &l.name, &l.samples, n, path)?;
    }
    if rec
        .leads
        .iter()
        .all(|l| l.samples.iter().all(|v| v.is_nan()))
    {
        return Err(all_missing(path));
    }
    Ok(())
}

/// The record-length check of [`check_record`].
pub(crate) fn check_not_empty(n: usize, path: &Path) -> Result<()> {
    if n == 0 {
        bail!("{}: record is empty (0 samples)", path.display());
    }
    Ok(())
}

/// The per-lead checks of [`check_record`] on lead `i` (`name`, samples `x`)
/// of a record of `n` samples per lead, for callers that hold one lead at a
/// time.
pub(crate) fn check_lead(i: usize, name: &str, x: &[f64], n: usize, path: &Path) -> Result<()> {
    if x.len() != n {
        bail!(
            "{}: lead {} `{}` has {} samples, lead 0 has {n}",
            path.display(),
            i,
            name,
            x.len()
        );
    }
    if let Some(k) = x.iter().position(|v| v.is_infinite()) {
        bail!(
            "{}: lead {} `{}` has an infinite value at sample {k}",
            path.display(),
            i,
            name
        );
    }
    Ok(())
}

/// The error of [`check_record`] for a record without a single sample.
pub(crate) fn all_missing(path: &Path) -> anyhow::Error {
    anyhow::anyhow!(
        "{}: every sample of every lead is missing (NaN)",
        path.display()
    )
}

/// The stretches (half-open sample ranges) where every signal that can be an
/// ECG lead has no sample: gaps of the recording itself (null segments, EDF+D
/// gaps), as opposed to one lead's dropout, which the other leads cover. Found
/// before the gaps are bridged, so that detection can leave them out.
pub(crate) fn missing_in_every_lead(rec: &Record) -> Vec<(usize, usize)> {
    let ecg: Vec<&[f64]> = rec
        .leads
        .iter()
        .filter(|l| tendline_formats::signals::non_ecg_reason(&l.name, &l.units).is_none())
        .map(|l| l.samples.as_slice())
        .collect();
    if ecg.is_empty() {
        return Vec::new();
    }
    let n = rec.n_samples();
    let mut out = Vec::new();
    let mut i = 0;
    while i < n {
        if ecg.iter().all(|x| x[i].is_nan()) {
            let start = i;
            while i < n && ecg.iter().all(|x| x[i].is_nan()) {
                i += 1;
            }
            out.push((start, i));
        } else {
            i += 1;
        }
    }
    out
}

/// Fill missing samples (NaN) so that the filters and the wavelet transform see
/// a continuous signal; returns the number filled per lead.
///
/// Readers produce NaN only for samples the format itself declares missing (the
/// WFDB invalid-sample value, a skewed signal past the end of its file and the
/// gaps of a variable-layout multi-segment record, as the `wfdb` Python package
/// reads them; the gaps between the data records of an EDF+D or BDF+D file);
/// other non-finite input is rejected by the readers. Inside a lead a gap is
/// bridged by a straight line between the samples around it; at the ends the
/// nearest sample is held. A long bridged gap is a flat or straight stretch
/// with no QRS slope: detection leaves it to the other leads or marks it
/// unreadable, and no wave boundary is found in it. A lead with no sample at
/// all is held at zero, which every stage treats as a flat (unusable) lead.
pub(crate) fn fill_missing(rec: &mut Record) -> Vec<usize> {
    let mut counts = Vec::with_capacity(rec.leads.len());
    for l in rec.leads.iter_mut() {
        let x = &mut l.samples;
        let n_missing = x.iter().filter(|v| v.is_nan()).count();
        counts.push(n_missing);
        if n_missing == 0 {
            continue;
        }
        let Some(first) = x.iter().position(|v| !v.is_nan()) else {
            x.iter_mut().for_each(|v| *v = 0.0);
            continue;
        };
        let head = x[first];
        x[..first].iter_mut().for_each(|v| *v = head);
        let mut last = first;
        for i in first + 1..x.len() {
            if x[i].is_nan() {
                continue;
            }
            if i > last + 1 {
                let (a, b) = (x[last], x[i]);
                let span = (i - last) as f64;
                for (k, v) in x[last + 1..i].iter_mut().enumerate() {
                    *v = a + (b - a) * (k + 1) as f64 / span;
                }
            }
            last = i;
        }
        let tail = x[last];
        x[last + 1..].iter_mut().for_each(|v| *v = tail);
    }
    counts
}

/// Signals that are not ECG (see `tendline_formats::signals`): held at zero in
/// the analysis, so that detection, delineation and QT see a flat, unusable lead,
/// while every signal keeps its index in the input header. Returns, per lead,
/// why it was left out (empty for an analysed lead); an error if no lead is left.
pub(crate) fn non_ecg_leads(rec: &mut Record, path: &Path) -> Result<Vec<String>> {
    let reasons: Vec<String> = rec
        .leads
        .iter()
        .map(|l| tendline_formats::signals::non_ecg_reason(&l.name, &l.units).unwrap_or_default())
        .collect();
    if reasons.iter().all(|r| !r.is_empty()) {
        bail!(
            "{}: no ECG lead among the signals ({})",
            path.display(),
            reasons.join("; ")
        );
    }
    for (l, r) in rec.leads.iter_mut().zip(&reasons) {
        if !r.is_empty() {
            l.samples.iter_mut().for_each(|v| *v = 0.0);
            rec.warnings
                .push(format!("signal not analysed as an ECG lead: {r}"));
        }
    }
    Ok(reasons)
}

/// The samples of the leads analysed as ECG (`excluded`: per lead, why it is
/// not, empty for an ECG lead; see [`non_ecg_leads`]).
pub(crate) fn ecg_leads<'a>(rec: &'a Record, excluded: &[String]) -> Vec<&'a [f64]> {
    rec.leads
        .iter()
        .zip(excluded)
        .filter(|(_, r)| r.is_empty())
        .map(|(l, _)| l.samples.as_slice())
        .collect()
}

/// What the stages produce for one stretch of a record (the whole record, or
/// one chunk of a long one).
struct Stretch {
    det: Detection,
    del: tendline_delineate::Delineation,
    windows: Vec<tendline_measure::WindowMeasure>,
    notch: Option<f64>,
    dropped: usize,
    stages: StageSeconds,
}

/// One chunk of a long record: `core` is what it contributes, `ext` the
/// samples it is processed with (the core and overlap on either side);
/// half-open sample ranges.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Chunk {
    core: (usize, usize),
    ext: (usize, usize),
}

/// The chunks of a record of `n` samples on `n_leads` leads: one chunk (the
/// whole record) unless it holds more than `chunk_mega_samples` million
/// samples over all leads. Chunk cores are whole measurement windows, so the
/// windows of every chunk fall on the record's own window grid; overlaps are
/// rounded up to whole windows.
pub(crate) fn chunk_plan(
    n: usize,
    n_leads: usize,
    fs: f64,
    cfg: &tendline_measure::MeasureConfig,
) -> Vec<Chunk> {
    let whole = vec![Chunk {
        core: (0, n),
        ext: (0, n),
    }];
    let w = ((cfg.window_s * fs).round() as usize).max(1);
    let budget = crate::budget::chunk_samples(cfg.chunk_mega_samples) as usize;
    if budget == 0 || n.saturating_mul(n_leads.max(1)) <= budget {
        return whole;
    }
    let len = (budget / n_leads.max(1) / w).max(1) * w;
    let ov = ((cfg.chunk_overlap_s * fs / w as f64).ceil() as usize).max(1) * w;
    if n <= len {
        return whole;
    }
    (0..n.div_ceil(len))
        .map(|k| {
            let core = (k * len, ((k + 1) * len).min(n));
            Chunk {
                core,
                ext: (core.0.saturating_sub(ov), (core.1 + ov).min(n)),
            }
        })
        .collect()
}

/// Join the chunks of a record: from each, the beats (with their marks),
/// unreadable stretches and windows that lie in its core, moved to record
/// positions; lead quality averaged over the chunks, weighted by core length.
fn join_chunks(parts: Vec<(&Chunk, Stretch)>, fs: f64, n_leads: usize) -> Stretch {
    let mut det = Detection {
        lead_quality: vec![0.0; n_leads],
        ..Detection::default()
    };
    let mut del = tendline_delineate::Delineation {
        per_lead: vec![Vec::new(); n_leads],
        global: Vec::new(),
    };
    let mut windows = Vec::new();
    let mut notches = Vec::new();
    let mut dropped = 0;
    let mut stages = StageSeconds::default();
    let total: usize = parts.iter().map(|(c, _)| c.core.1 - c.core.0).sum();
    for (c, part) in parts {
        let off = c.ext.0;
        let inside = |s: usize| (c.core.0..c.core.1).contains(&(s + off));
        for (i, b) in part.det.beats.iter().enumerate() {
            if !inside(b.sample) {
                continue;
            }
            let mut b = *b;
            b.sample += off;
            det.beats.push(b);
            let mut g = part.del.global[i].clone();
            g.shift(off);
            del.global.push(g);
            for (l, lead) in part.del.per_lead.iter().enumerate() {
                let mut m = lead[i].clone();
                m.shift(off);
                del.per_lead[l].push(m);
            }
        }
        for u in &part.det.unreadable {
            let (a, b) = ((u.start + off).max(c.core.0), (u.end + off).min(c.core.1));
            if a < b {
                det.unreadable.push(tendline_detect::Span {
                    start: a,
                    end: b,
                    reason: u.reason.clone(),
                });
            }
        }
        let weight = (c.core.1 - c.core.0) as f64 / total.max(1) as f64;
        for (q, pq) in det.lead_quality.iter_mut().zip(&part.det.lead_quality) {
            *q += weight * pq;
        }
        for mut w in part.windows {
            let start = (w.start_s * fs).round() as usize + off;
            if (c.core.0..c.core.1).contains(&start) {
                w.shift(off, fs);
                windows.push(w);
            }
        }
        notches.push(part.notch);
        dropped += part.dropped;
        stages += part.stages;
    }
    // The power-line frequency found most often (chunks of one recording agree
    // unless the interference comes and goes).
    let notch = notches
        .iter()
        .max_by_key(|n| notches.iter().filter(|m| m == n).count())
        .copied()
        .flatten();
    Stretch {
        det,
        del,
        windows,
        notch,
        dropped,
        stages,
    }
}

/// A long record's raw leads, moved out of the record, whose samples that no
/// later chunk reaches are handed back to the kernel as the chunks go. (A
/// WFDB record never gets here whole in physical units when it can be
/// processed from its digital samples: `crate::deferred`.)
///
/// Why: a 24-hour 12-lead 1000-Hz recording holds 8.3 GB of raw samples
/// (8 bytes per sample and lead); kept whole until the last chunk while the
/// chunks' results accumulate, it made the run peak at 12.2 GB. Released as
/// the chunks pass, the results take the place of samples already used.
/// Copying the leads into separately freed blocks instead was measured too:
/// the allocator kept the freed whole-lead buffers, so the copies only added
/// to the peak (11.8 GB).
struct RawLeads {
    leads: Vec<Vec<f64>>,
    /// Samples before this index may have been released: never read again.
    released: usize,
}

impl RawLeads {
    /// Moves the samples out of `leads` (left empty, so that nothing reads a
    /// released sample through the record).
    fn take(leads: &mut [tendline_formats::Lead]) -> Self {
        Self {
            leads: leads
                .iter_mut()
                .map(|l| std::mem::take(&mut l.samples))
                .collect(),
            released: 0,
        }
    }

    /// Samples `a..b` of every lead; `a` must not precede a released sample
    /// (chunks are taken in order; see [`Self::release_before`]).
    fn slices(&self, a: usize, b: usize) -> Vec<&[f64]> {
        assert!(
            a >= self.released,
            "chunk from sample {a} after samples up to {} were released",
            self.released
        );
        self.leads.iter().map(|x| &x[a..b]).collect()
    }

    /// Releases the memory of every sample before `s` that lies on whole
    /// memory pages; the samples from `s` on keep their values.
    fn release_before(&mut self, s: usize) {
        if s <= self.released {
            return;
        }
        for x in &mut self.leads {
            let end = s.min(x.len());
            release_pages(&mut x[self.released.min(end)..end]);
        }
        self.released = s;
    }
}

/// Where a long record's chunks take their samples from: the physical
/// samples as read, or a deferred record's digital ones (`deferred`).
enum Samples {
    Raw(RawLeads),
    Deferred(crate::deferred::DeferredLeads),
}

/// Sample types for which all-zero bits are a valid value (what a released
/// page reads as).
pub(crate) trait ZeroBits: Copy {}
impl ZeroBits for f64 {}
impl ZeroBits for i32 {}
impl ZeroBits for i16 {}

/// Returns the whole memory pages inside `x` to the kernel.
#[cfg(target_os = "linux")]
pub(crate) fn release_pages<T: ZeroBits>(x: &mut [T]) {
    // SAFETY: sysconf only reads a system constant.
    let page = match unsafe { libc::sysconf(libc::_SC_PAGESIZE) } {
        p if p > 0 => p as usize,
        _ => return,
    };
    let start = x.as_mut_ptr() as usize;
    let end = start + std::mem::size_of_val(x);
    let (a, b) = (start.div_ceil(page) * page, end / page * page);
    if b > a {
        // SAFETY: [a, b) lies inside `x`, which we borrow mutably, so no other
        // reference to it exists. Heap memory is private anonymous memory, for
        // which Linux's MADV_DONTNEED frees the pages and maps zero-filled
        // ones on the next touch: the same as writing zeros (valid values of
        // `T`: `ZeroBits`), without touching the pages. A failed call changes
        // nothing, so its result needs no check.
        unsafe {
            libc::madvise(a as *mut libc::c_void, b - a, libc::MADV_DONTNEED);
        }
    }
}

/// Elsewhere the memory is kept (the samples are simply not read again).
#[cfg(not(target_os = "linux"))]
pub(crate) fn release_pages<T: ZeroBits>(x: &mut [T]) {
    let _ = x;
}

/// How far a long record's chunks have come, for progress reports.
#[derive(Debug, Clone, Copy)]
pub struct ChunkProgress {
    /// Samples per lead processed (the chunk cores so far).
    pub done: usize,
    /// Samples per lead of the record.
    pub n: usize,
    pub leads: usize,
    pub fs: f64,
}

/// Run every stage on one record. A long record, processed in chunks, calls
/// `on_chunk` after each chunk.
pub fn process_record(
    input: &RecordInput,
    ctx: &Context,
    subject: Option<&SubjectRow>,
    checksums: &[(String, String)],
    on_chunk: &mut dyn FnMut(ChunkProgress),
) -> Result<Processed> {
    let clock = std::time::Instant::now();
    let cfg = &ctx.config;
    let opts = tendline_formats::ReadOptions { csv_fs: ctx.csv_fs };
    // A record that will be processed in chunks keeps its samples digital
    // where the format allows (`deferred`): never whole in physical units.
    let defer = |fs: f64, n: usize, leads: usize| {
        ctx.defer_long_records && chunk_plan(n, leads, fs, &cfg.measure).len() > 1
    };
    let loaded = tendline_formats::read_record_deferred(&input.path, &opts, &defer)
        // Every format error already names the file it read.
        .context("reading the input")?;
    let (mut rec, digital) = match loaded {
        Loaded::Physical(rec) => (rec, None),
        Loaded::Deferred(d) => (d.record, Some(d.leads)),
    };
    let filter = ctx
        .filters
        .get(rec.fs)
        .with_context(|| format!("{}: filter design", input.name));
    let (gaps, missing, scan) = match digital {
        None => {
            check_record(&rec, &input.path)?;
            let gaps = missing_in_every_lead(&rec);
            let missing = fill_missing(&mut rec);
            (gaps, missing, None)
        }
        Some(leads) => {
            let filter = filter.as_ref().map_err(|e| anyhow::anyhow!("{e:#}"))?;
            let mut s = crate::deferred::scan(&rec, leads, &input.path, filter, &cfg.filter)?;
            (
                std::mem::take(&mut s.gaps),
                std::mem::take(&mut s.missing),
                Some(s),
            )
        }
    };
    // Taken before a long record's samples leave `rec` (`RawLeads`).
    let n_samples = scan.as_ref().map_or(rec.n_samples(), |s| s.leads.n());
    let bridged: Vec<String> = rec
        .leads
        .iter()
        .zip(&missing)
        .filter(|(_, &m)| m > 0)
        .map(|(l, m)| format!("`{}` {m}", l.name))
        .collect();
    if !bridged.is_empty() {
        rec.warnings.push(format!(
            "missing samples bridged (see `missing_samples`): {}",
            bridged.join(", ")
        ));
    }
    let excluded = non_ecg_leads(&mut rec, &input.path)?;
    if let Some(s) = subject {
        s.apply(&mut rec.meta);
    }
    let read_s = clock.elapsed().as_secs_f64();
    let clock = std::time::Instant::now();
    let filter = filter?;
    // Over the whole record (before any chunking), on the ECG leads only:
    // the other signals are held at zero and would never hold a spike.
    let (amplitude, spikes) = if let Some(s) = &scan {
        (s.amplitude, s.leads.spikes().to_vec())
    } else {
        let ecg = ecg_leads(&rec, &excluded);
        let amplitude = tendline_dsp::amplitude::assess(&ecg, rec.fs, &cfg.filter);
        // Samples far larger than millivolts make noise pass the spike rule's
        // mV thresholds: blanking would cut holes into the signal.
        let spikes = match amplitude {
            Some((_, AmplitudeClass::AboveSpan)) => Vec::new(),
            _ => filter.pacing_spikes(&ecg),
        };
        (amplitude, spikes)
    };
    let amplitude_note = amplitude.and_then(|(r, c)| amplitude_warning(r, c, &cfg.filter));
    rec.warnings.extend(amplitude_note.clone());
    if !spikes.is_empty() {
        for l in rec.leads.iter_mut() {
            tendline_dsp::pacing::blank_lead(&mut l.samples, &spikes);
        }
        rec.warnings.push(format!(
            "{} pacing stimulus artifact(s) removed before filtering (`filter.pacing_blank`; \
             positions in `pacing/`)",
            spikes.len()
        ));
    }
    let mut stimulus_ends: Vec<usize> = spikes.iter().map(|s| s.end).collect();
    stimulus_ends.sort_unstable();
    let names: Vec<String> = rec.leads.iter().map(|l| l.name.clone()).collect();
    let (fs, sex) = (rec.fs, rec.meta.sex);
    let before_chunks = clock.elapsed().as_secs_f64();
    // Filter, detect, delineate and measure one stretch of the record.
    let analyse = |raw: &[&[f64]], gaps: &[(usize, usize)], stimuli: &[usize]| -> Result<Stretch> {
        let mut lap = Lap::start();
        let (cond, notch) = filter.filter_record(raw);
        let condition = lap.next();
        let leads: Vec<&[f64]> = cond.iter().map(Vec::as_slice).collect();
        let mut det = tendline_detect::detect(&leads, fs, &cfg.detect)
            .with_context(|| format!("{}: beat detection", input.name))?;
        let dropped = tendline_detect::exclude_missing(&mut det, gaps, fs, &cfg.detect);
        let qrs: Vec<usize> = det.beats.iter().map(|b| b.sample).collect();
        let detect = lap.next();
        let del = tendline_delineate::delineate_paced(&leads, fs, &qrs, stimuli, &cfg.delineate);
        let delineate = lap.next();
        let meas = tendline_measure::measure_record_paced(
            &leads,
            &names,
            fs,
            &det,
            stimuli,
            sex,
            &cfg.measure,
            &cfg.delineate,
        )
        .map_err(|e| anyhow::anyhow!("{}: measurement: {e}", input.name))?;
        let mut windows = meas.windows;
        let p_present: Vec<bool> = del.global.iter().map(|b| b.p_on.is_some()).collect();
        tendline_measure::drop_absent_p(&mut windows, &qrs, &p_present, &cfg.measure);
        let stages = StageSeconds {
            condition,
            detect,
            delineate,
            measure: lap.next(),
            ..StageSeconds::default()
        };
        Ok(Stretch {
            det,
            del,
            windows,
            notch,
            dropped,
            stages,
        })
    };
    let plan = chunk_plan(n_samples, rec.leads.len(), fs, &cfg.measure);
    let whole = if plan.len() <= 1 {
        let converted = scan.as_ref().map(|s| s.leads.stretch(0, n_samples));
        let raw: Vec<&[f64]> = match &converted {
            Some(c) => c.iter().map(Vec::as_slice).collect(),
            None => rec.leads.iter().map(|l| l.samples.as_slice()).collect(),
        };
        analyse(&raw, &gaps, &stimulus_ends)?
    } else {
        rec.warnings.push(format!(
            "long record: processed in {} chunks of {} s (`measure.chunk_mega_samples`), each \
             with up to {} s of the neighbouring signal (`measure.chunk_overlap_s`)",
            plan.len(),
            (plan[0].core.1 - plan[0].core.0) as f64 / fs,
            (plan[0].ext.1 - plan[0].core.1) as f64 / fs,
        ));
        let mut raw = match scan {
            Some(s) => Samples::Deferred(s.leads),
            None => Samples::Raw(RawLeads::take(&mut rec.leads)),
        };
        let n_leads = rec.leads.len();
        // Chunks are independent: a wave of as many as the chunk pool has
        // threads runs at once, so one long record alone still uses every
        // core. Between waves the samples no later chunk reaches are released.
        let wave = ctx
            .chunk_pool
            .as_ref()
            .map_or(1, |p| p.current_num_threads().max(1));
        let mut parts = Vec::with_capacity(plan.len());
        for (w, group) in plan.chunks(wave).enumerate() {
            let held = &raw;
            let one = |c: &Chunk| {
                let local: Vec<(usize, usize)> = gaps
                    .iter()
                    .filter(|&&(a, b)| b > c.ext.0 && a < c.ext.1)
                    .map(|&(a, b)| (a.max(c.ext.0) - c.ext.0, b.min(c.ext.1) - c.ext.0))
                    .collect();
                let stimuli: Vec<usize> = stimulus_ends
                    .iter()
                    .filter(|&&e| e > c.ext.0 && e <= c.ext.1)
                    .map(|&e| e - c.ext.0)
                    .collect();
                match held {
                    Samples::Raw(r) => analyse(&r.slices(c.ext.0, c.ext.1), &local, &stimuli),
                    Samples::Deferred(d) => {
                        let x = d.stretch(c.ext.0, c.ext.1);
                        let x: Vec<&[f64]> = x.iter().map(Vec::as_slice).collect();
                        analyse(&x, &local, &stimuli)
                    }
                }
            };
            let stretches: Vec<Result<Stretch>> = match (&ctx.chunk_pool, group.len()) {
                (Some(pool), 2..) => pool.install(|| group.par_iter().map(one).collect()),
                _ => group.iter().map(one).collect(),
            };
            for (c, stretch) in group.iter().zip(stretches) {
                parts.push((c, stretch?));
                on_chunk(ChunkProgress {
                    done: c.core.1,
                    n: n_samples,
                    leads: n_leads,
                    fs,
                });
            }
            if let Some(next) = plan.get((w + 1) * wave) {
                match &mut raw {
                    Samples::Raw(r) => r.release_before(next.ext.0),
                    Samples::Deferred(d) => d.release_before(next.ext.0),
                }
            }
        }
        join_chunks(parts, fs, rec.leads.len())
    };
    let Stretch {
        det,
        del,
        windows,
        notch,
        dropped,
        mut stages,
    } = whole;
    stages.read = read_s;
    stages.condition += before_chunks;
    let clock = std::time::Instant::now();
    if dropped > 0 {
        rec.warnings.push(format!(
            "{dropped} beat(s) within {} ms of a stretch missing in every lead dropped \
             (`detect.missing_guard_ms`)",
            cfg.detect.missing_guard_ms
        ));
    }
    let mut windows = windows;
    mark_paced_windows(&mut windows, &spikes, fs);
    let summary = tendline_measure::summarize(&windows, sex, &cfg.measure);
    let mut meas = tendline_measure::RecordMeasures { windows, summary };
    stages.measure += clock.elapsed().as_secs_f64();
    let clock = std::time::Instant::now();
    let qrs: Vec<usize> = det.beats.iter().map(|b| b.sample).collect();

    let mut g = Group::default();
    record_attrs(
        &mut g, &rec, n_samples, checksums, notch, &det, &missing, &excluded,
    );
    if let Some((r, _)) = amplitude {
        g.attr("amplitude_mv", Attr::Float(r));
    }
    if let Some(w) = amplitude_note {
        g.attr("amplitude_warning", Attr::Text(w));
    }
    beats_group(g.group("beats"), &det);
    pacing_group(&mut g, &spikes);
    unreadable_group(g.group("unreadable"), &det);
    let marks = g.group("marks");
    marks_group(marks.group("global"), &del.global);
    for (i, lead) in del.per_lead.iter().enumerate() {
        let lg = marks.group("leads").group(&format!("{i:02}"));
        lg.attr("lead", Attr::Text(names[i].clone()));
        lg.attr("channel", Attr::Int(i as i64));
        marks_group(lg, lead);
    }
    crate::measures::windows_group(&mut g, &mut meas, &names, rec.fs, &cfg.measure);

    let labels: Vec<&str> = det.beats.iter().map(|b| b.label.symbol()).collect();
    let annotation_error = |e: String| anyhow::anyhow!("{}: annotations: {e}", input.name);
    let marks =
        encode_beat_annotations(&[(0, &del.global)], &qrs, &labels).map_err(annotation_error)?;
    let lead_list: Vec<(u8, &[BeatMarks])> = del
        .per_lead
        .iter()
        .enumerate()
        // A signal that is not ECG has no beats of its own to annotate.
        .filter(|(i, _)| excluded[*i].is_empty())
        .map(|(i, l)| (i as u8, l.as_slice()))
        .collect();
    let leadmarks = encode_beat_annotations(&lead_list, &qrs, &labels).map_err(annotation_error)?;
    stages.assemble = clock.elapsed().as_secs_f64();
    Ok(Processed {
        group: g,
        marks,
        leadmarks,
        n_samples: (n_samples * rec.leads.len()) as u64,
        stages,
    })
}

/// Seconds between successive calls, for [`StageSeconds`].
struct Lap(std::time::Instant);

impl Lap {
    fn start() -> Self {
        Lap(std::time::Instant::now())
    }

    /// Seconds since the start or the previous call.
    fn next(&mut self) -> f64 {
        let now = std::time::Instant::now();
        let s = now.duration_since(self.0).as_secs_f64();
        self.0 = now;
        s
    }
}

/// The warning for a record whose typical range (`range`, in the unit its
/// samples were read in, taken as mV) lies outside the plausible span; `None`
/// within it.
pub(crate) fn amplitude_warning(
    range: f64,
    class: AmplitudeClass,
    cfg: &tendline_dsp::filter::FilterConfig,
) -> Option<String> {
    let range = significant(range, 3);
    let span = format!(
        "{}-{} mV (`filter.amplitude_min_mv`, `filter.amplitude_max_mv`)",
        cfg.amplitude_min_mv, cfg.amplitude_max_mv
    );
    match class {
        AmplitudeClass::Plausible => None,
        AmplitudeClass::AboveSpan => Some(format!(
            "amplitude: typical peak-to-peak range {range} mV, above the plausible {span}: \
             the samples are probably microvolts read as millivolts (state the unit in the \
             CSV header, e.g. `II [uV]`, or correct the header's gain); pacing spikes were not \
             looked for and amplitude thresholds do not hold"
        )),
        AmplitudeClass::BelowSpan => Some(format!(
            "amplitude: typical peak-to-peak range {range} mV, below the plausible {span}: \
             the samples are probably volts read as millivolts (state the unit in the CSV \
             header, e.g. `II [V]`, or correct the header's gain); leads may be taken as flat"
        )),
    }
}

/// `x` with `digits` significant digits in plain notation (`969`, `0.000969`).
fn significant(x: f64, digits: i32) -> String {
    if !x.is_finite() || x == 0.0 {
        return format!("{x}");
    }
    let d = (digits - 1 - x.abs().log10().floor() as i32).max(0) as usize;
    format!("{x:.d$}")
}

/// Flags the windows that hold a pacing stimulus (a spike starting in
/// `[start_s, end_s)`).
fn mark_paced_windows(
    windows: &mut [tendline_measure::WindowMeasure],
    spikes: &[tendline_dsp::pacing::Spike],
    fs: f64,
) {
    for w in windows.iter_mut() {
        w.flags.paced = holds_spike(w.start_s, w.end_s, spikes, fs);
    }
}

/// Whether a spike starts in `[start_s, end_s)`.
fn holds_spike(start_s: f64, end_s: f64, spikes: &[tendline_dsp::pacing::Spike], fs: f64) -> bool {
    spikes.iter().any(|s| {
        let t = s.start as f64 / fs;
        t >= start_s && t < end_s
    })
}

/// Pacing stimulus artifacts removed from the raw leads: the attribute
/// `pacing_spikes` (their number, 0 when none or when blanking is off) and,
/// when there are any, `pacing/start` and `pacing/end` (samples, end exclusive).
fn pacing_group(g: &mut Group, spikes: &[tendline_dsp::pacing::Spike]) {
    g.attr("pacing_spikes", Attr::Int(spikes.len() as i64));
    if spikes.is_empty() {
        return;
    }
    let p = g.group("pacing");
    let start = spikes.iter().map(|s| s.start as i64).collect();
    let end = spikes.iter().map(|s| s.end as i64).collect();
    p.dataset_with_units("start", Data::I64(start), "sample");
    p.dataset_with_units("end", Data::I64(end), "sample");
}

/// `n_samples`: samples per lead (a long record's samples have left `rec` by now).
#[allow(clippy::too_many_arguments)]
fn record_attrs(
    g: &mut Group,
    rec: &Record,
    n_samples: usize,
    checksums: &[(String, String)],
    notch: Option<f64>,
    det: &Detection,
    missing: &[usize],
    excluded: &[String],
) {
    g.attr("fs", Attr::Float(rec.fs));
    g.attr("n_samples", Attr::Int(n_samples as i64));
    g.attr("duration_s", Attr::Float(n_samples as f64 / rec.fs));
    g.attr(
        "leads",
        Attr::Texts(rec.leads.iter().map(|l| l.name.clone()).collect()),
    );
    g.attr(
        "units",
        Attr::Texts(rec.leads.iter().map(|l| l.units.clone()).collect()),
    );
    if let Some(s) = rec.meta.sex {
        g.attr("sex", Attr::Text(s.code().into()));
    }
    if let Some(a) = rec.meta.age {
        g.attr("age", Attr::Float(a));
    }
    if let Some(s) = &rec.meta.subject {
        g.attr("subject", Attr::Text(s.clone()));
    }
    if let Some(t) = &rec.meta.timepoint {
        g.attr("timepoint", Attr::Text(t.clone()));
    }
    if let Some(a) = &rec.meta.arm {
        g.attr("arm", Attr::Text(a.clone()));
    }
    g.attr(
        "input_files",
        Attr::Texts(checksums.iter().map(|c| c.0.clone()).collect()),
    );
    g.attr(
        "input_sha256",
        Attr::Texts(checksums.iter().map(|c| c.1.clone()).collect()),
    );
    g.attr(
        "missing_samples",
        Attr::Floats(missing.iter().map(|&m| m as f64).collect()),
    );
    g.attr(
        "analysed",
        Attr::Floats(
            excluded
                .iter()
                .map(|r| if r.is_empty() { 1.0 } else { 0.0 })
                .collect(),
        ),
    );
    if !rec.warnings.is_empty() {
        g.attr("input_warnings", Attr::Texts(rec.warnings.clone()));
    }
    g.attr("powerline_notch_hz", Attr::Float(notch.unwrap_or(0.0)));
    g.attr("lead_quality", Attr::Floats(det.lead_quality.clone()));
    g.attr("n_beats", Attr::Int(det.beats.len() as i64));
}

fn beats_group(g: &mut Group, det: &Detection) {
    g.dataset_with_units(
        "qrs_peak",
        Data::I64(det.beats.iter().map(|b| b.sample as i64).collect()),
        "sample",
    );
    g.dataset(
        "label",
        Data::Text(
            det.beats
                .iter()
                .map(|b| b.label.symbol().to_string())
                .collect(),
        ),
    );
}

fn unreadable_group(g: &mut Group, det: &Detection) {
    g.dataset_with_units(
        "start",
        Data::I64(det.unreadable.iter().map(|s| s.start as i64).collect()),
        "sample",
    );
    g.dataset_with_units(
        "end",
        Data::I64(det.unreadable.iter().map(|s| s.end as i64).collect()),
        "sample",
    );
    g.dataset(
        "reason",
        Data::Text(det.unreadable.iter().map(|s| s.reason.clone()).collect()),
    );
}

/// Reads one fiducial of a beat.
type MarkGetter = fn(&BeatMarks) -> Option<Mark>;

/// Names and accessors of every stored fiducial, in the order written.
pub const FIDUCIALS: [(&str, MarkGetter); 12] = [
    ("p_on", |b| b.p_on),
    ("p_peak", |b| b.p_peak),
    ("p_end", |b| b.p_end),
    ("qrs_on", |b| b.qrs_on),
    ("qrs_peak", |b| b.qrs_peak),
    ("qrs_end", |b| b.qrs_end),
    ("t_on", |b| b.t_on),
    ("t_peak", |b| b.t_peak),
    ("t_end", |b| b.t_end),
    ("t_end_wavelet", |b| b.t_end_wavelet),
    ("t_end_tangent", |b| b.t_end_tangent),
    ("t_end_area", |b| b.t_end_area),
];

pub fn method_name(m: TEndMethod) -> &'static str {
    match m {
        TEndMethod::Wavelet => "wavelet",
        TEndMethod::Tangent => "tangent",
        TEndMethod::Area => "area",
    }
}

pub fn morphology_name(m: TMorphology) -> &'static str {
    match m {
        TMorphology::Absent => "absent",
        TMorphology::Upright => "upright",
        TMorphology::Inverted => "inverted",
        TMorphology::BiphasicPosNeg => "biphasic+-",
        TMorphology::BiphasicNegPos => "biphasic-+",
    }
}

/// Marks as columns: sample index (−1 = absent) and confidence (NaN = absent).
pub fn marks_group(g: &mut Group, beats: &[BeatMarks]) {
    for (name, get) in FIDUCIALS {
        g.dataset_with_units(
            name,
            Data::I64(
                beats
                    .iter()
                    .map(|b| get(b).map_or(-1, |m| m.sample as i64))
                    .collect(),
            ),
            "sample",
        );
        g.dataset(
            &format!("{name}_confidence"),
            Data::F32(
                beats
                    .iter()
                    .map(|b| get(b).map_or(f32::NAN, |m| m.confidence))
                    .collect(),
            ),
        );
    }
    g.dataset(
        "t_end_method",
        Data::Text(
            beats
                .iter()
                .map(|b| method_name(b.t_end_method).to_string())
                .collect(),
        ),
    );
    g.dataset(
        "t_morphology",
        Data::Text(
            beats
                .iter()
                .map(|b| morphology_name(b.t_morphology).to_string())
                .collect(),
        ),
    );
}

/// Beats per block of [`encode_beat_annotations`].
const ANNOTATION_BLOCK_BEATS: usize = 4096;

/// The annotation file (MIT format) of the beats' marks on the channels of
/// `leads` (channel, one mark set per beat), ordered by sample and then
/// channel: the bytes of [`beat_annotations`] of every lead, concatenated,
/// sorted by (sample, channel) and encoded, which the tests keep as the
/// oracle.
///
/// Why blocks: a 24-hour 12-lead record has about 7.2 million per-lead
/// annotations (`bench/long.md`), which as annotation structures added 0.8
/// GB to its peak memory at the end of the run. The annotations are built [`ANNOTATION_BLOCK_BEATS`]
/// beats at a time; those that no later beat's marks can precede (the lower
/// bound being the earliest mark of every later beat) are written, the rest
/// wait for the next block.
pub fn encode_beat_annotations(
    leads: &[(u8, &[BeatMarks])],
    qrs: &[usize],
    labels: &[&str],
) -> Result<Vec<u8>, String> {
    let n = qrs.len();
    // The earliest sample any annotation of beats j.. can hold.
    let mut later = vec![i64::MAX; n + 1];
    for j in (0..n).rev() {
        let earliest = leads
            .iter()
            .flat_map(|(_, b)| {
                let b = &b[j];
                [
                    b.p_on, b.p_peak, b.p_end, b.qrs_on, b.qrs_peak, b.qrs_end, b.t_on, b.t_peak,
                    b.t_end,
                ]
            })
            .flatten()
            .map(|m| m.sample as i64)
            .chain([qrs[j] as i64])
            .min()
            .unwrap_or(i64::MAX);
        later[j] = later[j + 1].min(earliest);
    }
    let mut enc = AnnotationEncoder::new();
    let mut pending: Vec<Annotation> = Vec::new();
    let mut start = 0;
    while start < n {
        let end = (start + ANNOTATION_BLOCK_BEATS).min(n);
        for (chan, beats) in leads {
            pending.extend(beat_annotations(
                &beats[start..end],
                &qrs[start..end],
                &labels[start..end],
                *chan,
            ));
        }
        // Stable: equal keys keep the order the whole-record sort gives them.
        pending.sort_by_key(|a| (a.sample, a.chan));
        let ready = pending.partition_point(|a| a.sample < later[end]);
        for a in pending.drain(..ready) {
            enc.push(&a)?;
        }
        start = end;
    }
    for a in &pending {
        enc.push(a)?;
    }
    Ok(enc.finish())
}

/// The open databases' boundary convention: `(` onset, peak mark, `)` end, per wave.
pub fn beat_annotations(
    beats: &[BeatMarks],
    qrs: &[usize],
    labels: &[&str],
    chan: u8,
) -> Vec<Annotation> {
    let s = |m: Option<Mark>| m.map(|m| m.sample as i64);
    let waves: Vec<WaveMarks> = beats
        .iter()
        .enumerate()
        .flat_map(|(i, b)| {
            [
                WaveMarks {
                    onset: s(b.p_on),
                    peak: s(b.p_peak),
                    end: s(b.p_end),
                    symbol: "p".into(),
                    peak_aux: None,
                    end_aux: None,
                },
                WaveMarks {
                    onset: s(b.qrs_on),
                    peak: Some(s(b.qrs_peak).unwrap_or(qrs[i] as i64)),
                    end: s(b.qrs_end),
                    symbol: labels[i].into(),
                    peak_aux: None,
                    end_aux: None,
                },
                WaveMarks {
                    onset: s(b.t_on),
                    peak: s(b.t_peak),
                    end: s(b.t_end),
                    symbol: "t".into(),
                    peak_aux: None,
                    end_aux: Some(method_name(b.t_end_method).into()),
                },
            ]
        })
        .collect();
    boundary_annotations(&waves, chan)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Marks of `n` beats on `leads` leads from a fixed pseudo-random
    /// sequence: beats 100 samples apart whose waves reach 60 samples into
    /// the next beat (so a beat's T end follows the next beat's P onset),
    /// some marks absent, some QRS peaks absent (the detector's sample is
    /// written instead), every T-end method, a few beats with an early
    /// outlying P onset up to 300 samples back.
    fn random_marks(n: usize, leads: usize) -> (Vec<Vec<BeatMarks>>, Vec<usize>) {
        let mut state: u64 = 0x2545_f491_4f6c_dd1d;
        let mut next = move |m: u64| {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state % m
        };
        let qrs: Vec<usize> = (0..n).map(|j| 400 + 100 * j).collect();
        let beats = (0..leads)
            .map(|_| {
                qrs.iter()
                    .map(|&q| {
                        let mut mark = |lo: i64, span: u64| {
                            (next(10) > 0).then(|| Mark {
                                sample: (q as i64 + lo + next(span) as i64) as usize,
                                confidence: 0.5,
                            })
                        };
                        let mut b = BeatMarks {
                            p_on: mark(-90, 20),
                            p_peak: mark(-70, 20),
                            p_end: mark(-50, 20),
                            qrs_on: mark(-20, 15),
                            qrs_peak: mark(-3, 6),
                            qrs_end: mark(5, 20),
                            t_on: mark(40, 20),
                            t_peak: mark(80, 40),
                            t_end: mark(120, 40),
                            ..BeatMarks::default()
                        };
                        b.t_end_method = match next(3) {
                            0 => TEndMethod::Wavelet,
                            1 => TEndMethod::Tangent,
                            _ => TEndMethod::Area,
                        };
                        if next(50) == 0 {
                            b.p_on = Some(Mark {
                                sample: q - 100 - next(200) as usize,
                                confidence: 0.1,
                            });
                        }
                        b
                    })
                    .collect()
            })
            .collect();
        (beats, qrs)
    }

    /// Blockwise encoding against the oracle: every lead's annotations built
    /// at once, sorted by (sample, channel) and encoded in one go. Over
    /// several blocks, with waves that overlap the next beats' across block
    /// boundaries, and for an empty record.
    #[test]
    fn blockwise_annotations_equal_the_whole_record_sort() {
        for (n, n_leads) in [(0, 2), (1, 1), (3 * ANNOTATION_BLOCK_BEATS + 17, 3)] {
            let (beats, qrs) = random_marks(n, n_leads);
            let labels: Vec<&str> = (0..n).map(|j| if j % 7 == 3 { "V" } else { "N" }).collect();
            let leads: Vec<(u8, &[BeatMarks])> = beats
                .iter()
                .enumerate()
                .map(|(i, b)| (2 * i as u8 + 1, b.as_slice()))
                .collect();
            let mut all: Vec<Annotation> = leads
                .iter()
                .flat_map(|&(c, b)| beat_annotations(b, &qrs, &labels, c))
                .collect();
            all.sort_by_key(|a| (a.sample, a.chan));
            let oracle = tendline_formats::annotation::encode_annotations(&all).unwrap();
            let got = encode_beat_annotations(&leads, &qrs, &labels).unwrap();
            assert_eq!(got, oracle, "{n} beats, {n_leads} leads");
            if n > ANNOTATION_BLOCK_BEATS {
                // Marks of the first block reach past the second block's first
                // marks: the blocks do have to be merged.
                let b = ANNOTATION_BLOCK_BEATS;
                let span = |r: std::ops::Range<usize>| -> Vec<i64> {
                    leads
                        .iter()
                        .flat_map(|&(c, x)| {
                            beat_annotations(&x[r.clone()], &qrs[r.clone()], &labels[r.clone()], c)
                        })
                        .map(|a| a.sample)
                        .collect()
                };
                let last_first = span(0..b).into_iter().max().unwrap();
                let first_second = span(b..n).into_iter().min().unwrap();
                assert!(last_first > first_second, "{last_first} {first_second}");
            }
        }
    }

    #[test]
    fn amplitude_warning_names_the_likely_unit_and_the_keys() {
        let cfg = tendline_dsp::filter::FilterConfig::default();
        assert_eq!(
            amplitude_warning(1.2, AmplitudeClass::Plausible, &cfg),
            None
        );
        let up = amplitude_warning(969.26, AmplitudeClass::AboveSpan, &cfg).unwrap();
        assert!(up.contains("range 969 mV"), "{up}");
        assert!(up.contains("microvolts read as millivolts"), "{up}");
        assert!(up.contains("`filter.amplitude_max_mv`"), "{up}");
        assert!(up.contains("pacing spikes were not looked for"), "{up}");
        let down = amplitude_warning(0.000_969_26, AmplitudeClass::BelowSpan, &cfg).unwrap();
        assert!(down.contains("range 0.000969 mV"), "{down}");
        assert!(down.contains("volts read as millivolts"), "{down}");
    }

    #[test]
    fn significant_digits_in_plain_notation() {
        assert_eq!(significant(969.26, 3), "969");
        assert_eq!(significant(4.2804, 3), "4.28");
        assert_eq!(significant(0.000_969_26, 3), "0.000969");
        assert_eq!(significant(12_345.6, 3), "12346");
        assert_eq!(significant(0.0, 3), "0");
    }

    #[test]
    fn windows_holding_a_pacing_spike_are_flagged() {
        // Hand-worked: at 500 Hz, windows [0, 10) s and [10, 20) s; a spike
        // starting at sample 4999 (9.998 s) lies in the first, one starting at
        // sample 10 000 (exactly 20 s) in neither.
        let sp = |s: usize| tendline_dsp::pacing::Spike {
            start: s,
            end: s + 1,
        };
        let spikes = [sp(4999), sp(10_000)];
        assert!(holds_spike(0.0, 10.0, &spikes, 500.0));
        assert!(!holds_spike(10.0, 20.0, &spikes, 500.0));
        assert!(!holds_spike(0.0, 10.0, &[], 500.0));
    }

    use tendline_formats::{Lead, Metadata};

    fn rec(leads: Vec<(&str, &str, Vec<f64>)>) -> Record {
        Record::from_file(
            Path::new("r.csv"),
            100.0,
            leads
                .into_iter()
                .map(|(n, u, s)| Lead {
                    name: n.into(),
                    units: u.into(),
                    samples: s,
                })
                .collect(),
            Metadata::default(),
            Vec::new(),
        )
    }

    #[test]
    fn missing_samples_are_bridged_and_counted() {
        let nan = f64::NAN;
        let mut r = rec(vec![
            ("I", "mV", vec![nan, nan, 1.0, nan, nan, 4.0, 2.0, nan]),
            ("II", "mV", vec![nan; 4]),
            ("III", "mV", vec![0.5; 4]),
        ]);
        let counts = fill_missing(&mut r);
        assert_eq!(counts, [5, 4, 0]);
        assert_eq!(r.leads[0].samples, [1.0, 1.0, 1.0, 2.0, 3.0, 4.0, 2.0, 2.0]);
        assert_eq!(r.leads[1].samples, [0.0; 4]);
        assert_eq!(r.leads[2].samples, [0.5; 4]);
    }

    #[test]
    fn non_ecg_signals_are_held_flat_and_a_record_without_ecg_fails() {
        let mut r = rec(vec![
            ("II", "mV", vec![1.0, 2.0]),
            ("ABP", "mmHg", vec![80.0, 120.0]),
            ("Pleth", "NU", vec![3.0, 4.0]),
        ]);
        let why = non_ecg_leads(&mut r, Path::new("r.csv")).unwrap();
        assert!(why[0].is_empty() && !why[1].is_empty() && !why[2].is_empty());
        assert_eq!(r.leads[0].samples, [1.0, 2.0]);
        assert_eq!(r.leads[1].samples, [0.0, 0.0]);
        let mut r = rec(vec![("RESP", "NU", vec![1.0, 2.0])]);
        let e = non_ecg_leads(&mut r, Path::new("r.csv"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("no ECG lead") && e.contains("RESP"), "{e}");
    }
}

#[cfg(test)]
mod chunk_tests {
    use super::*;

    /// Hand-worked plans at 100 Hz with 10-s windows (1000 samples): a budget
    /// of 0.01 M samples over 2 leads gives 5000-sample (5-window) chunks, and
    /// a 15-s overlap rounds up to 2 windows (2000 samples).
    #[test]
    fn chunk_plan_is_whole_windows_with_overlap() {
        let cfg = tendline_measure::MeasureConfig {
            chunk_mega_samples: 0.01,
            chunk_overlap_s: 15.0,
            ..Default::default()
        };
        let plan = chunk_plan(12_345, 2, 100.0, &cfg);
        let got: Vec<((usize, usize), (usize, usize))> =
            plan.iter().map(|c| (c.core, c.ext)).collect();
        assert_eq!(
            got,
            [
                ((0, 5000), (0, 7000)),
                ((5000, 10_000), (3000, 12_000)),
                ((10_000, 12_345), (8000, 12_345)),
            ]
        );
        // At or under the budget, or with chunking off: the whole record.
        let whole = [Chunk {
            core: (0, 5000),
            ext: (0, 5000),
        }];
        assert_eq!(chunk_plan(5000, 2, 100.0, &cfg), whole);
        let off = tendline_measure::MeasureConfig {
            chunk_mega_samples: 0.0,
            ..cfg.clone()
        };
        let all = [Chunk {
            core: (0, 12_345),
            ext: (0, 12_345),
        }];
        assert_eq!(chunk_plan(12_345, 2, 100.0, &off), all);
    }

    /// The raw store against the obvious oracle (slicing a copy of the
    /// original leads), over every chunk of a plan, releasing the samples
    /// before each next chunk as the run does: what a chunk reads keeps its
    /// values, whatever was released before it. The leads are long enough
    /// (64 k samples, 512 KiB) for whole pages to be released.
    #[test]
    fn raw_leads_keep_every_sample_a_later_chunk_reads() {
        let cfg = tendline_measure::MeasureConfig {
            chunk_mega_samples: 0.05,
            chunk_overlap_s: 15.0,
            ..Default::default()
        };
        let n = 65_537;
        let original: Vec<Vec<f64>> = (0..2)
            .map(|l| (0..n).map(|i| (i * 7 + l * 1_000_003 + 1) as f64).collect())
            .collect();
        let mut leads: Vec<tendline_formats::Lead> = original
            .iter()
            .enumerate()
            .map(|(i, s)| tendline_formats::Lead {
                name: format!("L{i}"),
                units: "mV".into(),
                samples: s.clone(),
            })
            .collect();
        let plan = chunk_plan(n, 2, 100.0, &cfg);
        assert!(plan.len() >= 3, "{plan:?}");
        let mut raw = RawLeads::take(&mut leads);
        assert!(leads.iter().all(|l| l.samples.is_empty()));
        for (k, c) in plan.iter().enumerate() {
            for (got, o) in raw.slices(c.ext.0, c.ext.1).iter().zip(&original) {
                assert_eq!(*got, &o[c.ext.0..c.ext.1], "chunk {k}");
            }
            if let Some(next) = plan.get(k + 1) {
                raw.release_before(next.ext.0);
                assert_eq!(raw.released, next.ext.0);
            }
        }
    }

    /// A long WFDB record processed from its digital samples (`deferred`)
    /// against the oracle, the same record read whole in physical units
    /// (`defer_long_records` off): the same store tree and annotations. The
    /// record is QT Database sel100 (../shared/data) with stretches of
    /// invalid samples written in (in both leads, in one lead, at the start,
    /// across chunk boundaries) and processed in chunks of 0.1 M samples,
    /// both one chunk at a time and two at once.
    #[test]
    fn a_deferred_record_gives_the_results_of_the_whole_record() {
        let src =
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../../../shared/data/qtdb/sel100.hea");
        let mut rec = tendline_formats::read_record(&src, &Default::default())
            .expect("../shared/data/qtdb/sel100 (see ../shared/data/README.md)");
        rec.name = "gappy".into();
        let n = rec.n_samples();
        for (lead, a, b) in [
            (0, 0, 300),
            (1, 0, 120),
            (0, 40_000, 40_900),
            (1, 40_500, 41_000),
            (1, 99_990, 100_700),
            (0, n - 50, n),
        ] {
            rec.leads[lead].samples[a..b]
                .iter_mut()
                .for_each(|v| *v = f64::NAN);
        }
        let dir = tempfile::tempdir().unwrap();
        let hea = tendline_formats::wfdb::write_record(dir.path(), &rec, 200.0).unwrap();
        let input = RecordInput {
            name: "gappy".into(),
            path: hea,
            problem: None,
        };
        deferred_equals_whole(&input);
    }

    /// The same for an EDF file (16-bit samples, no invalid marker): QT
    /// Database sel100 written by the crate's EDF writer.
    #[test]
    fn a_deferred_edf_file_gives_the_results_of_the_whole_file() {
        let src =
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../../../shared/data/qtdb/sel100.hea");
        let rec = tendline_formats::read_record(&src, &Default::default())
            .expect("../shared/data/qtdb/sel100 (see ../shared/data/README.md)");
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("sel100.edf");
        tendline_formats::edf::write_edf(&path, &rec).unwrap();
        let input = RecordInput {
            name: "sel100".into(),
            path,
            problem: None,
        };
        deferred_equals_whole(&input);
    }

    /// `input` processed in chunks of 0.1 M samples, one and two at a time,
    /// from its digital samples and read whole: the same results; and it was
    /// indeed deferred.
    fn deferred_equals_whole(input: &RecordInput) {
        let mut config = PipelineConfig::default();
        config.measure.chunk_mega_samples = 0.1;
        let defer =
            |fs: f64, n: usize, leads: usize| chunk_plan(n, leads, fs, &config.measure).len() > 1;
        let loaded =
            tendline_formats::read_record_deferred(&input.path, &Default::default(), &defer)
                .unwrap();
        assert!(matches!(loaded, Loaded::Deferred(_)), "{}", input.name);
        for threads in [1, 2] {
            let run = |defer: bool| {
                let mut ctx = Context::new(&config, None).unwrap();
                ctx.defer_long_records = defer;
                ctx.chunk_pool = (threads > 1).then(|| {
                    rayon::ThreadPoolBuilder::new()
                        .num_threads(threads)
                        .build()
                        .unwrap()
                });
                let mut chunks = 0;
                let p = process_record(input, &ctx, None, &[], &mut |_| chunks += 1).unwrap();
                (p, chunks)
            };
            let ((a, ca), (b, cb)) = (run(true), run(false));
            assert!(ca >= 4 && ca == cb, "chunks {ca} / {cb}");
            let beat_marks =
                tendline_formats::annotation::parse_annotations(&a.marks, &input.path).unwrap();
            assert!(beat_marks.len() > 500, "{} beat marks", beat_marks.len());
            assert_eq!(a.marks, b.marks);
            assert_eq!(a.leadmarks, b.leadmarks);
            assert_eq!(a.n_samples, b.n_samples);
            // Debug text: NaN fields (absent values) compare equal there, and
            // every other float prints in a form that reads back exactly.
            assert!(format!("{:?}", a.group) == format!("{:?}", b.group));
        }
    }

    /// Reading a released sample is a logic error the store refuses.
    #[test]
    #[should_panic(expected = "were released")]
    fn raw_leads_refuse_a_released_range() {
        let mut leads = vec![tendline_formats::Lead {
            name: "I".into(),
            units: "mV".into(),
            samples: vec![1.0; 4096],
        }];
        let mut raw = RawLeads::take(&mut leads);
        raw.release_before(2048);
        let _ = raw.slices(1024, 4096);
    }
}
