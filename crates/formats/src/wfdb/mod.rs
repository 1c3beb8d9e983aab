//! WFDB records (header `.hea` plus signal files): read and write.
//!
//! Two levels:
//! - [`read_digital`] returns every signal's digital samples at its own rate
//!   (samples per frame × frame rate), exactly as stored, for exact cross-checks;
//! - [`read_record`] returns a [`Record`] in physical units (millivolts where the
//!   units allow) with one sampling rate for all leads.
//!
//! Supported: signal formats 8, 16, 24, 32, 61, 80, 160, 212, 310, 311, and the
//! FLAC-compressed formats 508, 516, 524 (layout and limits in the `flac`
//! module: one FLAC channel per signal; `+` counts samples, not bytes); samples
//! per frame (`x`), skew (`:`), byte offsets (`+`), records spread over several
//! signal files, headers without a length (the length is inferred from the size
//! of the first signal file, as the `wfdb` Python package does), counter
//! frequency/base counter/base time/base date (parsed and kept in [`Header`]),
//! fixed-layout multi-segment records (segments concatenated), and
//! variable-layout multi-segment records in physical units (see the `layout`
//! module: [`read_record`] reads them; [`read_digital`] rejects them, having
//! no one gain per signal to give).
//!
//! Not supported, rejected with [`FormatError::Unsupported`]:
//! - in FLAC-compressed files (508, 516, 524): skew, signals of one file with
//!   different samples per frame, a header without a length, streams of other
//!   than 8, 16 or 24 bits per sample (none of which the `wfdb` Python package
//!   reads), and FLAC streams with escape-coded residual partitions, which the
//!   FLAC decoder used (`claxon`) does not implement;
//! - signal files in `.wav` containers, and `.mat` files other than MATLAB
//!   version 4 (see `check_mat_v4`);
//! - by [`read_digital`] only: variable-layout multi-segment records;
//! - null signals (file name `~`, format 0).
//!
//! Multi-rate records (signals with different samples per frame): [`read_digital`]
//! returns each signal at its own rate; [`read_record`], which needs one rate,
//! takes the fastest signal's rate (frame rate × the largest samples per frame)
//! and brings slower signals to it by linear interpolation between their own
//! samples. Sample `j` of frame `f` of a signal with `k` samples per frame lies at
//! `f + j/k` frames; so a slower signal's own samples are kept exactly where its
//! rate divides the fastest one, and its last sample is held to the end.
//!
//! Integrity checks: the header's per-signal checksum (16-bit sum of the signal's
//! digital samples over the record) and initial value are verified when present.
//! A mismatch does not fail the read: it is reported in [`WfdbSignals::warnings`]
//! and [`Record::warnings`], because real records (and WFDB tools' own test
//! records, e.g. skewed copies of a record) carry stale values while the samples
//! are fine. Invalid-sample markers (the most negative value of formats that have
//! one) become NaN in physical units, as the `wfdb` Python package does.

mod decode;
pub mod deferred;
mod flac;
mod header;
mod layout;

pub use decode::{bytes_for_samples, decode_into, invalid_value, is_supported, samples_in_bytes};
pub use flac::is_flac;
pub use header::{parse_header, Header, SegmentSpec, SignalSpec, DEFAULT_ADC_GAIN, DEFAULT_FS_HZ};

use std::ffi::OsString;
use std::fs::File;
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use crate::{FormatError, Lead, Metadata, Record};

/// One signal as stored: its header line and its digital samples.
#[derive(Debug, Clone, PartialEq)]
pub struct DigitalSignal<T = i32> {
    /// The signal's header line (for a multi-segment record, the first segment's).
    pub spec: SignalSpec,
    /// Digital samples, `n_frames × samples_per_frame` of them.
    pub samples: Vec<T>,
}

/// Integer types digital samples are held in: `i32` holds every format;
/// `i16` the formats of at most 16 bits whose values need no accumulation
/// ([`Digital::holds`]), at half the memory.
pub trait Digital: Copy + Send + Sync + std::fmt::Debug + PartialEq + 'static {
    /// The value of a decoded sample (within the type's range for the
    /// formats it [`Digital::holds`]).
    fn from_i32(v: i32) -> Self;
    fn to_i32(self) -> i32;
    /// Whether every sample of signal format `format` fits this type.
    fn holds(format: u32) -> bool;
}

impl Digital for i32 {
    fn from_i32(v: i32) -> Self {
        v
    }
    fn to_i32(self) -> i32 {
        self
    }
    fn holds(_: u32) -> bool {
        true
    }
}

impl Digital for i16 {
    fn from_i32(v: i32) -> Self {
        v as i16
    }
    fn to_i32(self) -> i32 {
        self as i32
    }
    /// Format 8 (first differences) is left out: its running sum is not
    /// bounded to 16 bits; the FLAC formats go through their own decoder.
    fn holds(format: u32) -> bool {
        matches!(format, 16 | 61 | 80 | 160 | 212 | 310 | 311)
    }
}

/// Digital content of a WFDB record, each signal at its own rate.
#[derive(Debug, Clone, PartialEq)]
pub struct WfdbSignals<T = i32> {
    /// The record's own header (for a multi-segment record: the master header).
    pub header: Header,
    /// Frame frequency in Hz; signal `i` has `fs × samples_per_frame` samples per second.
    pub fs: f64,
    /// Number of frames read.
    pub n_frames: u64,
    pub signals: Vec<DigitalSignal<T>>,
    /// Every file read (headers and signal files).
    pub files: Vec<PathBuf>,
    /// Checksum and initial-value mismatches, invalid-sample notes.
    pub warnings: Vec<String>,
}

fn invalid(path: &Path, message: impl Into<String>) -> FormatError {
    FormatError::Invalid {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

fn unsupported(path: &Path, message: impl Into<String>) -> FormatError {
    FormatError::Unsupported {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

fn io(path: &Path, source: std::io::Error) -> FormatError {
    FormatError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// The `.hea` path for a header path or a record path without extension.
pub fn header_path_of(path: &Path) -> PathBuf {
    if path.extension().is_some_and(|e| e == "hea") {
        path.to_path_buf()
    } else {
        let mut s: OsString = path.as_os_str().to_owned();
        s.push(".hea");
        PathBuf::from(s)
    }
}

/// Read and parse a header file. Text that is not UTF-8 is read as Latin-1
/// (older headers use it for e.g. `µV`).
pub fn read_header(header_path: &Path) -> Result<Header, FormatError> {
    let path = header_path_of(header_path);
    let bytes = std::fs::read(&path).map_err(|e| io(&path, e))?;
    let text = match String::from_utf8(bytes) {
        Ok(s) => s,
        Err(e) => e.into_bytes().iter().map(|&b| b as char).collect(),
    };
    parse_header(&text, &path)
}

/// Read every signal of a record as digital samples at its own rate.
///
/// `header_path` is the `.hea` file or the record path without extension.
pub fn read_digital(header_path: &Path) -> Result<WfdbSignals, FormatError> {
    read_digital_depth(header_path, 0)
}

fn read_digital_depth(header_path: &Path, depth: usize) -> Result<WfdbSignals, FormatError> {
    let path = header_path_of(header_path);
    let header = read_header(&path)?;
    if header.is_multi_segment() {
        if depth > 0 {
            return Err(unsupported(
                &path,
                "a segment of a multi-segment record is itself multi-segment",
            ));
        }
        return read_multi_segment(&path, header);
    }
    read_single(&path, header)
}

/// Frames in `nbytes` bytes for `tspf` samples per frame, as the `wfdb` Python
/// package infers a missing length: floor(bytes / (bytes_per_sample × tspf)).
fn frames_from_size(format: u32, nbytes: u64, tspf: u64) -> u64 {
    let (num, den): (u128, u128) = match format {
        8 | 80 => (1, 1),
        16 | 61 | 160 => (1, 2),
        24 => (1, 3),
        32 => (1, 4),
        212 => (2, 3),
        310 | 311 => (3, 4),
        _ => return 0,
    };
    (nbytes as u128 * num / (den * tspf as u128)) as u64
}

struct FileGroup {
    name: String,
    signals: Vec<usize>,
    format: u32,
    offset: u64,
    tspf: u64,
}

fn read_single<T: Digital>(path: &Path, header: Header) -> Result<WfdbSignals<T>, FormatError> {
    let dir = path.parent().unwrap_or(Path::new(""));
    // Group signals by file, in order of first appearance.
    let mut groups: Vec<FileGroup> = Vec::new();
    for (i, s) in header.signals.iter().enumerate() {
        let at = |m: String| format!("line {} (signal {i}, `{}`): {m}", s.line, s.description);
        if s.file_name == "~" {
            return Err(unsupported(
                path,
                at("null signal (file `~`) is not supported".into()),
            ));
        }
        if !is_supported(s.format) && !is_flac(s.format) {
            let reason = decode::unsupported_reason(s.format);
            return Err(if s.format == 0 {
                unsupported(path, at(reason))
            } else {
                invalid(path, at(reason))
            });
        }
        let lower = s.file_name.to_ascii_lowercase();
        if lower.ends_with(".wav") {
            return Err(unsupported(
                path,
                at(format!(
                    "signal file `{}`: WAV containers are not supported",
                    s.file_name
                )),
            ));
        }
        if s.file_name.contains('/') || s.file_name.contains('\\') {
            return Err(invalid(
                path,
                at(format!(
                    "signal file `{}` must be a plain file name in the header's folder",
                    s.file_name
                )),
            ));
        }
        match groups.iter_mut().find(|g| g.name == s.file_name) {
            Some(g) => {
                if g.format != s.format {
                    return Err(invalid(
                        path,
                        at(format!(
                            "format {} differs from format {} of the other signals in `{}`",
                            s.format, g.format, s.file_name
                        )),
                    ));
                }
                g.signals.push(i);
                g.tspf += s.samples_per_frame as u64;
            }
            None => groups.push(FileGroup {
                name: s.file_name.clone(),
                signals: vec![i],
                format: s.format,
                offset: s.byte_offset,
                tspf: s.samples_per_frame as u64,
            }),
        }
    }
    let flac_layouts: Vec<Option<flac::FlacLayout>> = groups
        .iter()
        .map(|g| {
            if !is_flac(g.format) {
                return Ok(None);
            }
            let lay = flac_layout(path, &header, g);
            let at = |k: usize, m: String| {
                let (i, s) = (g.signals[k], &header.signals[g.signals[k]]);
                format!("line {} (signal {i}, `{}`): {m}", s.line, s.description)
            };
            flac::check_layout(&lay, &g.name, at)?;
            Ok(Some(lay))
        })
        .collect::<Result<_, FormatError>>()?;
    let mut files = vec![path.to_path_buf()];
    let mut warnings = Vec::new();
    let mut opened = Vec::new();
    for g in &groups {
        let fpath = dir.join(&g.name);
        let f = File::open(&fpath).map_err(|e| {
            invalid(
                path,
                format!(
                    "signal file `{}` named in the header cannot be opened: {e}",
                    fpath.display()
                ),
            )
        })?;
        let len = f.metadata().map_err(|e| io(&fpath, e))?.len();
        // A FLAC file's offset counts samples, checked while decoding.
        if len < g.offset && !is_flac(g.format) {
            return Err(invalid(
                &fpath,
                format!(
                    "byte offset {} is beyond the end of the file ({len} bytes)",
                    g.offset
                ),
            ));
        }
        if g.name.to_ascii_lowercase().ends_with(".mat") {
            check_mat_v4(&fpath, &f, len, g)?;
        }
        opened.push((fpath, f, len.saturating_sub(g.offset)));
    }
    let n_frames = match header.n_frames {
        Some(n) => n,
        // As in the `wfdb` Python package, the first signal's file gives the length.
        None => match (groups.first(), opened.first()) {
            (Some(g), Some((fpath, _, _))) if is_flac(g.format) => {
                return Err(unsupported(
                    path,
                    format!(
                        "the record line gives no length, and the length of the FLAC-compressed \
                         file `{}` cannot be inferred from its size (the wfdb Python package \
                         cannot either)",
                        fpath.display()
                    ),
                ));
            }
            (Some(g), Some((_, _, avail))) => frames_from_size(g.format, *avail, g.tspf),
            _ => 0,
        },
    };
    if let Some(s) = header.signals.iter().find(|s| !T::holds(s.format)) {
        return Err(unsupported(
            path,
            format!(
                "line {}: format {} does not fit the sample type asked for",
                s.line, s.format
            ),
        ));
    }
    let mut signals: Vec<Option<DigitalSignal<T>>> = vec![None; header.signals.len()];
    for ((g, (fpath, mut f, avail)), lay) in groups.iter().zip(opened).zip(&flac_layouts) {
        if let Some(lay) = lay {
            let outs = flac::read_signals(&fpath, f, lay, n_frames)?;
            for (&i, out) in g.signals.iter().zip(outs) {
                signals[i] = Some(DigitalSignal {
                    spec: header.signals[i].clone(),
                    samples: out.into_iter().map(T::from_i32).collect(),
                });
            }
            files.push(fpath);
            continue;
        }
        let want_samples = n_frames.checked_mul(g.tspf).ok_or_else(|| {
            invalid(
                path,
                format!("sample count {n_frames} × {} overflows", g.tspf),
            )
        })?;
        let want_bytes = bytes_for_samples(g.format, want_samples)
            .ok_or_else(|| invalid(path, format!("sample count {n_frames} is too large")))?;
        if want_bytes > avail {
            let have = frames_from_size(g.format, avail, g.tspf);
            return Err(invalid(
                &fpath,
                format!(
                    "truncated: the header ({}) says {n_frames} samples per signal, which need {want_bytes} bytes \
                     after offset {}, but the file holds {avail} bytes ({have} samples)",
                    path.display(),
                    g.offset
                ),
            ));
        }
        // Skewed signals read up to `max_skew` frames past the record; what the
        // file lacks there becomes invalid samples (as in the `wfdb` Python package).
        let slots = slots_of(&header, &g.signals);
        f.seek(SeekFrom::Start(g.offset))
            .map_err(|e| io(&fpath, e))?;
        let outs = demux(g.format, &mut f, avail, n_frames, &slots).map_err(|e| io(&fpath, e))?;
        for (&i, out) in g.signals.iter().zip(outs) {
            signals[i] = Some(DigitalSignal {
                spec: header.signals[i].clone(),
                samples: out,
            });
        }
        files.push(fpath);
    }
    let signals: Vec<DigitalSignal<T>> = signals.into_iter().flatten().collect();
    for (i, s) in signals.iter().enumerate() {
        check_signal(path, i, s, &mut warnings);
    }
    Ok(WfdbSignals {
        fs: header.fs,
        n_frames,
        header,
        signals,
        files,
        warnings,
    })
}

/// What the header says a FLAC-compressed file `g` holds.
fn flac_layout<'a>(path: &'a Path, header: &Header, g: &FileGroup) -> flac::FlacLayout<'a> {
    let sig =
        |f: fn(&SignalSpec) -> u32| g.signals.iter().map(|&i| f(&header.signals[i])).collect();
    flac::FlacLayout {
        header_path: path,
        format: g.format,
        spf: sig(|s| s.samples_per_frame),
        skew: sig(|s| s.skew),
        sample_offset: g.offset,
    }
}

/// Where one signal sits in the frames of its file.
#[derive(Debug, Clone, Copy)]
struct Slot {
    /// Index of its first sample within a frame.
    pos: usize,
    spf: usize,
    skew: u64,
    /// Start of the accumulation for format 8.
    init: i32,
}

fn slots_of(header: &Header, signals: &[usize]) -> Vec<Slot> {
    let mut pos = 0;
    signals
        .iter()
        .map(|&i| {
            let s = &header.signals[i];
            let slot = Slot {
                pos,
                spf: s.samples_per_frame as usize,
                skew: s.skew as u64,
                init: s.init_value.unwrap_or(s.adc_zero) as i32,
            };
            pos += slot.spf;
            slot
        })
        .collect()
}

/// Decode the signals of one file from `r` (positioned at the byte offset; `avail`
/// bytes follow) in blocks of frames, so that no whole-file buffer is needed.
///
/// Returns one vector per slot with `n_frames × spf` samples. Samples that skew
/// places past the end of the file are the format's invalid value.
fn demux<R: Read, T: Digital>(
    format: u32,
    r: &mut R,
    avail: u64,
    n_frames: u64,
    slots: &[Slot],
) -> std::io::Result<Vec<Vec<T>>> {
    let tspf: usize = slots.iter().map(|s| s.spf).sum();
    let max_skew = slots.iter().map(|s| s.skew).max().unwrap_or(0);
    let total_frames = n_frames.saturating_add(max_skew);
    let avail_samples =
        samples_in_bytes(format, avail).min(total_frames.saturating_mul(tspf as u64)) as usize;
    let stream_frames = avail_samples.div_ceil(tspf.max(1));
    // A multiple of 6 frames keeps block starts on 212/310/311 group boundaries.
    let block_frames = 6 * (8192 / tspf.max(1)).max(1);
    let bad = T::from_i32(invalid_value(format).unwrap_or(i32::MIN));
    let mut outs: Vec<Vec<T>> = slots
        .iter()
        .map(|s| Vec::with_capacity(n_frames as usize * s.spf))
        .collect();
    let mut acc: Vec<i32> = slots.iter().map(|s| s.init).collect();
    let mut buf = Vec::new();
    let mut sbuf = Vec::new();
    let mut b0 = 0usize;
    while b0 < stream_frames {
        let b1 = (b0 + block_frames).min(stream_frames);
        let (s0, s1) = (b0 * tspf, (b1 * tspf).min(avail_samples));
        let (y0, y1) = (
            bytes_for_samples(format, s0 as u64).unwrap_or(0),
            bytes_for_samples(format, s1 as u64).unwrap_or(0),
        );
        buf.resize((y1 - y0) as usize, 0);
        r.read_exact(&mut buf)?;
        sbuf.resize(s1 - s0, 0);
        decode_into(format, &buf, &mut sbuf);
        if format == 8 {
            // First differences accumulate per signal, starting at the initial value.
            for frame in sbuf.chunks_mut(tspf) {
                for (k, sl) in slots.iter().enumerate() {
                    for v in frame.iter_mut().skip(sl.pos).take(sl.spf) {
                        acc[k] = acc[k].wrapping_add(*v);
                        *v = acc[k];
                    }
                }
            }
        }
        for (sl, out) in slots.iter().zip(outs.iter_mut()) {
            // Output frames whose stored frame (frame + skew) lies in [b0, b1).
            let skew = sl.skew as usize;
            let f0 = b0.max(skew) - skew;
            let f1 = b1.saturating_sub(skew).min(n_frames as usize);
            if f0 >= f1 {
                continue;
            }
            let first = (f0 + skew) * tspf + sl.pos - s0;
            if tspf == 1 {
                out.extend(
                    sbuf[first..first + (f1 - f0)]
                        .iter()
                        .map(|&v| T::from_i32(v)),
                );
            } else if sl.spf == 1 {
                // The last frame of the stream may be partial: pad what it lacks.
                let want = out.len() + (f1 - f0);
                out.extend(
                    sbuf.get(first..)
                        .unwrap_or(&[])
                        .iter()
                        .step_by(tspf)
                        .take(f1 - f0)
                        .map(|&v| T::from_i32(v)),
                );
                out.resize(want, bad);
            } else {
                for fr in 0..f1 - f0 {
                    let base = first + fr * tspf;
                    for j in 0..sl.spf {
                        out.push(sbuf.get(base + j).map_or(bad, |&v| T::from_i32(v)));
                    }
                }
            }
        }
        b0 = b1;
    }
    for (sl, out) in slots.iter().zip(outs.iter_mut()) {
        out.resize(n_frames as usize * sl.spf, bad);
    }
    Ok(outs)
}

/// Verify checksum and initial value of one signal; note invalid samples.
fn check_signal<T: Digital>(
    path: &Path,
    i: usize,
    s: &DigitalSignal<T>,
    warnings: &mut Vec<String>,
) {
    let spec = &s.spec;
    let who = format!(
        "{}: line {} (signal {i}, `{}`)",
        path.display(),
        spec.line,
        spec.description
    );
    if let Some(c) = spec.checksum {
        let sum = s
            .samples
            .iter()
            .fold(0i64, |a, &v| a.wrapping_add(v.to_i32() as i64));
        // The checksum is the 16-bit sum; headers write it signed or unsigned.
        if sum.rem_euclid(65536) != c.rem_euclid(65536) {
            warnings.push(format!(
                "{who}: checksum mismatch: header {c}, samples sum to {} (mod 65536)",
                sum.rem_euclid(65536)
            ));
        }
    }
    if let (Some(iv), Some(first)) = (spec.init_value, s.samples.first().map(|v| v.to_i32())) {
        if spec.format != 8 && iv != first as i64 {
            warnings.push(format!(
                "{who}: initial value mismatch: header {iv}, first sample {first}"
            ));
        }
    }
    if let Some(bad) = invalid_value(spec.format) {
        let n = s.samples.iter().filter(|&&v| v.to_i32() == bad).count();
        if n > 0 {
            warnings.push(format!("{who}: {n} invalid (missing) samples, read as NaN"));
        }
    }
}

fn read_multi_segment(path: &Path, header: Header) -> Result<WfdbSignals, FormatError> {
    let dir = path.parent().unwrap_or(Path::new(""));
    if let Some(seg) = variable_layout_segment(&header) {
        return Err(unsupported(
            path,
            format!(
                "line {}: variable-layout multi-segment record (layout or null segment `{}`): its \
                 segments store a signal with different gains, so it has no single digital form; \
                 it is read in physical units as a record",
                seg.line, seg.name
            ),
        ));
    }
    let mut out: Option<WfdbSignals> = None;
    for seg in &header.segments {
        check_segment_name(path, seg)?;
        let sp = dir.join(format!("{}.hea", seg.name));
        let part = read_digital_depth(&sp, 1)?;
        check_segment_length(path, seg, part.n_frames)?;
        if part.signals.len() != header.n_sig || part.fs != header.fs {
            return Err(invalid(
                path,
                format!(
                    "line {}: segment `{}` has {} signals at {} Hz, the master header says {} at {} Hz",
                    seg.line,
                    seg.name,
                    part.signals.len(),
                    part.fs,
                    header.n_sig,
                    header.fs
                ),
            ));
        }
        match &mut out {
            None => out = Some(part),
            Some(acc) => {
                for (k, (a, b)) in acc.signals.iter_mut().zip(part.signals).enumerate() {
                    let (x, y) = (&a.spec, &b.spec);
                    if x.samples_per_frame != y.samples_per_frame
                        || x.adc_gain != y.adc_gain
                        || x.baseline != y.baseline
                        || x.units != y.units
                        || x.description != y.description
                    {
                        return Err(unsupported(
                            path,
                            format!(
                                "line {}: signal {k} of segment `{}` differs in samples per frame, gain, baseline, \
                                 units or name from the first segment; such records are not supported",
                                seg.line, seg.name
                            ),
                        ));
                    }
                    a.samples.extend_from_slice(&b.samples);
                }
                acc.n_frames += part.n_frames;
                acc.files.extend(part.files);
                acc.warnings.extend(part.warnings);
            }
        }
    }
    let mut out = out.ok_or_else(|| invalid(path, "multi-segment record without segments"))?;
    out.files.insert(0, path.to_path_buf());
    let mut comments = header.comments.clone();
    if comments.is_empty() {
        comments = out.header.comments.clone();
    }
    out.header = Header { comments, ..header };
    Ok(out)
}

/// A segment must be a record in the master header's folder.
fn check_segment_name(path: &Path, seg: &SegmentSpec) -> Result<(), FormatError> {
    let n = &seg.name;
    if n.is_empty() || n.contains('/') || n.contains('\\') || n.contains("..") {
        return Err(invalid(
            path,
            format!(
                "line {}: segment name `{n}` must be a plain record name",
                seg.line
            ),
        ));
    }
    Ok(())
}

/// A segment must hold the number of samples the master header gives it.
fn check_segment_length(path: &Path, seg: &SegmentSpec, n_frames: u64) -> Result<(), FormatError> {
    if n_frames != seg.n_frames {
        return Err(invalid(
            path,
            format!(
                "line {}: segment `{}` has {n_frames} samples, the master header says {}",
                seg.line, seg.name, seg.n_frames
            ),
        ));
    }
    Ok(())
}

/// The first segment that makes a multi-segment record variable-layout: its
/// layout segment (`<name>_layout`) or a null segment (`~`).
fn variable_layout_segment(header: &Header) -> Option<&SegmentSpec> {
    header
        .segments
        .iter()
        .find(|s| s.name == "~" || s.name.ends_with("_layout"))
}

/// Factor that converts `units` to millivolts, if the units are a voltage.
pub fn to_mv_factor(units: &str) -> Option<f64> {
    match units.trim() {
        "mV" => Some(1.0),
        "uV" | "μV" | "µV" => Some(1e-3),
        "V" => Some(1e3),
        _ => None,
    }
}

/// Physical value of each digital sample, in the header's units:
/// `(d - baseline) / gain`, invalid-sample markers become NaN.
pub fn to_physical(s: &DigitalSignal) -> Vec<f64> {
    let bad = invalid_value(s.spec.format);
    let (b, g) = (s.spec.baseline as f64, s.spec.adc_gain);
    s.samples
        .iter()
        .map(|&d| {
            if Some(d) == bad {
                f64::NAN
            } else {
                (d as f64 - b) / g
            }
        })
        .collect()
}

/// Read a WFDB record into a [`Record`] (samples in mV where the units allow).
///
/// `header_path` is the `.hea` file or the record path without extension.
/// Signals with different samples per frame are brought to the fastest rate
/// (module docs); a warning on the record says which.
pub fn read_record(header_path: &Path) -> Result<Record, FormatError> {
    let path = header_path_of(header_path);
    let header = read_header(&path)?;
    read_record_with(&path, header)
}

/// [`read_record`] of the record whose header, at `path`, has been read.
fn read_record_with(path: &Path, header: Header) -> Result<Record, FormatError> {
    if header.is_multi_segment() && variable_layout_segment(&header).is_some() {
        return layout::read_variable_layout(path, header);
    }
    let w = if header.is_multi_segment() {
        read_multi_segment(path, header)?
    } else {
        read_single(path, header)?
    };
    Ok(record_from_signals(w))
}

/// Physical units at one rate (the fastest signal's) from the digital signals.
fn record_from_signals(mut w: WfdbSignals) -> Record {
    let spf = w
        .signals
        .iter()
        .map(|s| s.spec.samples_per_frame)
        .max()
        .unwrap_or(1)
        .max(1);
    let fs = w.fs * spf as f64;
    let mut notes = Vec::new();
    // Each signal's digital samples are freed as soon as its physical ones
    // exist, so reading peaks near the physical record (8 bytes per sample)
    // rather than the physical and the digital record (4 more) together.
    let signals = std::mem::take(&mut w.signals);
    let leads = signals
        .into_iter()
        .map(|s| {
            let mut samples = to_physical(&s);
            let k = s.spec.samples_per_frame.max(1);
            if k != spf {
                samples = crate::frames::upsample_linear(&samples, k as usize, spf as usize);
                notes.push(format!(
                    "line {} (signal `{}`): sampled at {} Hz, interpolated to the record's {} Hz",
                    s.spec.line,
                    s.spec.description,
                    w.fs * k as f64,
                    fs
                ));
            }
            let units = match to_mv_factor(&s.spec.units) {
                Some(f) => {
                    if f != 1.0 {
                        samples.iter_mut().for_each(|v| *v *= f);
                    }
                    "mV".to_string()
                }
                None => s.spec.units.clone(),
            };
            Lead {
                name: s.spec.description.clone(),
                units,
                samples,
            }
        })
        .collect();
    w.warnings.extend(notes);
    let meta = Metadata::from_comments(&w.header.comments);
    Record {
        name: w.header.name.clone(),
        fs,
        leads,
        meta,
        files: w.files,
        warnings: w.warnings,
    }
}

/// A `.mat` signal file (as WFDB's `wfdb2mat` writes them, and as PhysioNet
/// challenge databases ship 12-lead ECGs) is a MATLAB version 4 file holding one
/// matrix `val`: signals × frames, column-major, i.e. frame-interleaved samples
/// after a 20-byte header and the matrix name. The record header states the
/// storage format and a byte offset that skips that prefix, so the samples are
/// read like any other signal file; this checks that the MATLAB header agrees
/// (little-endian full numeric matrix, element type matching the format, one
/// row per signal sample of a frame, the offset ending right after the name,
/// the data filling the file) and rejects the file with the mismatch named if
/// it does not. Layout: MATLAB 4 MAT-file format (MathWorks, "MAT-File Format",
/// the version 4 section), from memory.
fn check_mat_v4(fpath: &Path, f: &File, len: u64, g: &FileGroup) -> Result<(), FormatError> {
    let bad = |m: String| invalid(fpath, format!("MATLAB signal file: {m}"));
    let mut head = [0u8; 20];
    if len < 20 {
        return Err(bad(format!("{len} bytes, shorter than a MATLAB v4 header")));
    }
    {
        use std::io::Read;
        let mut r = f;
        r.read_exact(&mut head).map_err(|e| io(fpath, e))?;
    }
    if head.starts_with(b"MATLAB") {
        return Err(unsupported(
            fpath,
            "MATLAB signal file: version 5 or later layout; only version 4 files (as wfdb2mat \
             writes them) are read",
        ));
    }
    let word = |k: usize| u32::from_le_bytes(head[4 * k..4 * k + 4].try_into().expect("4 bytes"));
    let (ty, rows, cols, imag, namlen) = (word(0), word(1), word(2), word(3), word(4));
    let (m, o, p, t) = (ty / 1000, (ty / 100) % 10, (ty / 10) % 10, ty % 10);
    if ty >= 5000 || m != 0 || o != 0 || t != 0 || imag != 0 {
        return Err(bad(format!(
            "type {ty:04} (imaginary part {imag}): only a little-endian, real, full numeric \
             matrix (type 00P0) is read"
        )));
    }
    // Element type P: 0 double, 1 single, 2 int32, 3 int16, 4 uint16, 5 uint8.
    let want_p = match g.format {
        16 => Some(3),
        32 => Some(2),
        80 => Some(5),
        _ => None,
    };
    if want_p != Some(p) {
        return Err(bad(format!(
            "element type {p} (0 double, 1 single, 2 int32, 3 int16, 4 uint16, 5 uint8) does \
             not hold the header's format {} (16 needs int16, 32 int32, 80 uint8)",
            g.format
        )));
    }
    if rows as u64 != g.tspf {
        return Err(bad(format!(
            "the matrix has {rows} rows, the header puts {} samples per frame in this file",
            g.tspf
        )));
    }
    if g.offset != 20 + namlen as u64 {
        return Err(bad(format!(
            "the header's byte offset is {}, but the samples start at byte {} (20-byte header \
             and a {namlen}-byte matrix name)",
            g.offset,
            20 + namlen as u64
        )));
    }
    let width = match p {
        2 => 4,
        3 => 2,
        _ => 1,
    };
    let data = (rows as u64) * (cols as u64) * width;
    if g.offset + data != len {
        return Err(bad(format!(
            "a {rows} × {cols} matrix needs {data} bytes after byte {}, the file holds {}",
            g.offset,
            len - g.offset.min(len)
        )));
    }
    Ok(())
}

/// Write `rec` as a format-16 WFDB record `<dir>/<rec.name>.hea` + `.dat`; returns the header path.
///
/// Samples are taken as millivolts (units written as each lead's units, `mV`
/// when empty) and stored as `round(value × adc_gain)`; NaN is stored as the
/// format-16 invalid value. Values outside the 16-bit range at this gain are an
/// error. Header comments: `<age>: …` and `<sex>: …` from `rec.meta`, then the
/// other comment lines of `rec.meta.comments` (age/sex lines there are dropped
/// so that a read-write cycle does not duplicate them).
pub fn write_record(dir: &Path, rec: &Record, adc_gain: f64) -> Result<PathBuf, FormatError> {
    let hea = dir.join(format!("{}.hea", rec.name));
    if rec.name.is_empty()
        || rec
            .name
            .contains(|c: char| c.is_whitespace() || c == '/' || c == '\\' || c == '.')
    {
        return Err(invalid(
            &hea,
            format!("record name `{}` is not a valid WFDB record name", rec.name),
        ));
    }
    if !(adc_gain.is_finite() && adc_gain > 0.0) {
        return Err(invalid(
            &hea,
            format!("ADC gain {adc_gain} must be positive and finite"),
        ));
    }
    if !(rec.fs.is_finite() && rec.fs > 0.0) {
        return Err(invalid(
            &hea,
            format!("sampling rate {} must be positive and finite", rec.fs),
        ));
    }
    let n = rec.n_samples();
    let mut digital: Vec<Vec<i16>> = Vec::with_capacity(rec.leads.len());
    for (k, lead) in rec.leads.iter().enumerate() {
        if lead.samples.len() != n {
            return Err(invalid(
                &hea,
                format!(
                    "lead {k} `{}` has {} samples, lead 0 has {n}",
                    lead.name,
                    lead.samples.len()
                ),
            ));
        }
        if lead.name.contains(['\n', '\r']) || lead.units.contains(char::is_whitespace) {
            return Err(invalid(
                &hea,
                format!("lead {k}: name or units contain line breaks or spaces"),
            ));
        }
        let mut d = Vec::with_capacity(n);
        for (i, &v) in lead.samples.iter().enumerate() {
            if v.is_nan() {
                d.push(i16::MIN);
                continue;
            }
            let x = (v * adc_gain).round();
            if !(x > i16::MIN as f64 && x <= i16::MAX as f64) {
                return Err(invalid(
                    &hea,
                    format!(
                        "lead {k} `{}` sample {i} = {v} does not fit format 16 at gain {adc_gain}",
                        lead.name
                    ),
                ));
            }
            d.push(x as i16);
        }
        digital.push(d);
    }
    let mut bytes = Vec::with_capacity(n * rec.leads.len() * 2);
    let mut frame = Vec::with_capacity(rec.leads.len());
    for i in 0..n {
        frame.clear();
        frame.extend(digital.iter().map(|d| d[i]));
        decode::encode_16(&frame, &mut bytes);
    }
    let dat_name = format!("{}.dat", rec.name);
    let mut text = format!("{} {} {} {}\n", rec.name, rec.leads.len(), rec.fs, n);
    for (lead, d) in rec.leads.iter().zip(&digital) {
        let sum = d.iter().fold(0i64, |a, &v| a + v as i64);
        let checksum = sum.rem_euclid(65536) as u16 as i16;
        let units = if lead.units.is_empty() {
            "mV"
        } else {
            lead.units.as_str()
        };
        text.push_str(&format!(
            "{dat_name} 16 {adc_gain}(0)/{units} 16 0 {} {checksum} 0",
            d.first().copied().unwrap_or(0)
        ));
        if !lead.name.is_empty() {
            text.push(' ');
            text.push_str(&lead.name);
        }
        text.push('\n');
    }
    if let Some(age) = rec.meta.age {
        text.push_str(&format!("#<age>: {age}\n"));
    }
    if let Some(sex) = rec.meta.sex {
        text.push_str(&format!("#<sex>: {}\n", sex.code()));
    }
    for c in &rec.meta.comments {
        let (a, s) = crate::meta::age_sex_of_line(c);
        if (a.is_some() && rec.meta.age.is_some()) || (s.is_some() && rec.meta.sex.is_some()) {
            continue;
        }
        for line in c.lines() {
            text.push_str(&format!("# {line}\n"));
        }
    }
    std::fs::create_dir_all(dir).map_err(|e| io(dir, e))?;
    let dat = dir.join(&dat_name);
    let mut f = File::create(&dat).map_err(|e| io(&dat, e))?;
    f.write_all(&bytes).map_err(|e| io(&dat, e))?;
    std::fs::write(&hea, text).map_err(|e| io(&hea, e))?;
    Ok(hea)
}

#[cfg(test)]
mod tests {

    use super::*;

    /// Slow oracle: decode the whole stream at once, then pick each signal's
    /// samples frame by frame (the obvious reading of the WFDB frame layout).
    fn demux_simple(format: u32, bytes: &[u8], n_frames: usize, slots: &[Slot]) -> Vec<Vec<i32>> {
        let tspf: usize = slots.iter().map(|s| s.spf).sum();
        let n = samples_in_bytes(format, bytes.len() as u64) as usize;
        let mut stream = vec![0; n];
        decode_into(format, bytes, &mut stream);
        if format == 8 {
            let mut acc: Vec<i32> = slots.iter().map(|s| s.init).collect();
            for (i, v) in stream.iter_mut().enumerate() {
                let p = i % tspf;
                let k = slots
                    .iter()
                    .position(|s| p >= s.pos && p < s.pos + s.spf)
                    .unwrap();
                acc[k] = acc[k].wrapping_add(*v);
                *v = acc[k];
            }
        }
        let bad = invalid_value(format).unwrap_or(i32::MIN);
        slots
            .iter()
            .map(|s| {
                let mut out = Vec::new();
                for f in 0..n_frames {
                    for j in 0..s.spf {
                        let idx = (f + s.skew as usize) * tspf + s.pos + j;
                        out.push(stream.get(idx).copied().unwrap_or(bad));
                    }
                }
                out
            })
            .collect()
    }

    #[test]
    fn blocked_demux_matches_simple_oracle() {
        let mut x = 0x1234_5678_9abc_def0u64;
        let mut next = move || {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x
        };
        let mut narrow16 = 0;
        for case in 0..300 {
            let format = [8, 16, 24, 32, 61, 80, 160, 212, 310, 311][case % 10];
            let nsig = 1 + (next() % 4) as usize;
            let mut pos = 0;
            let slots: Vec<Slot> = (0..nsig)
                .map(|_| {
                    let spf = if next() % 3 == 0 {
                        1 + (next() % 4) as usize
                    } else {
                        1
                    };
                    let s = Slot {
                        pos,
                        spf,
                        skew: if next() % 3 == 0 { next() % 5 } else { 0 },
                        init: (next() % 100) as i32 - 50,
                    };
                    pos += spf;
                    s
                })
                .collect();
            // Large enough to span several blocks in some cases.
            let nbytes = (next() % if case % 7 == 0 { 400_000 } else { 300 }) as usize;
            let bytes: Vec<u8> = (0..nbytes).map(|_| next() as u8).collect();
            let tspf = pos as u64;
            let max_frames = samples_in_bytes(format, nbytes as u64) / tspf;
            let n_frames = if max_frames == 0 {
                0
            } else {
                next() % (max_frames + 1)
            } as usize;
            let want = demux_simple(format, &bytes, n_frames, &slots);
            fn widened<T: Digital>(out: Vec<Vec<T>>) -> Vec<Vec<i32>> {
                out.into_iter()
                    .map(|x| x.into_iter().map(T::to_i32).collect())
                    .collect()
            }
            let run = |narrow: bool| {
                let mut r = &bytes[..];
                let (a, n) = (nbytes as u64, n_frames as u64);
                if narrow {
                    widened(demux::<_, i16>(format, &mut r, a, n, &slots).unwrap())
                } else {
                    widened(demux::<_, i32>(format, &mut r, a, n, &slots).unwrap())
                }
            };
            assert_eq!(
                run(false),
                want,
                "case {case}: format {format}, slots {slots:?}, {nbytes} bytes, {n_frames} frames"
            );
            // The same samples held in 16 bits, for the formats that fit.
            if i16::holds(format) {
                assert_eq!(run(true), want, "case {case}: format {format} in 16 bits");
                narrow16 += 1;
            }
        }
        assert_eq!(narrow16, 210, "cases read in 16 bits");
    }
}
