//! EDF and EDF+ (continuous) recordings, and their 24-bit siblings BDF and
//! BDF+: read into a [`Record`]; EDF+ written from one.
//!
//! EDF (European Data Format, Kemp et al. 1992) and its extension EDF+ (Kemp &
//! Olivan 2003) store 16-bit samples in fixed-duration data records after an
//! ASCII header. EDF+ adds an `EDF Annotations` channel of time-stamped
//! annotation lists (TALs) and structured patient/recording fields. BDF (the
//! BioSemi variant, from memory: first header byte 0xFF followed by `BIOSEMI`,
//! reserved field `24BIT`) stores 24-bit little-endian two's-complement samples
//! in the same layout; BDF+ (as edflib writes it: reserved field `BDF+C`, a
//! `BDF Annotations` channel) is BDF with the EDF+ fields and TALs.
//!
//! # Reading ([`read_edf`], [`read_edf_annotations`], [`parse_edf`], [`read_edf_deferred`])
//!
//! * [`read_edf`] reads the whole file, then decodes it. [`read_edf_deferred`]
//!   reads a long continuous file whose ordinary signals share one rate data
//!   record by data record into digital samples ([`crate::deferred`]: 2 bytes
//!   a sample for EDF, 4 for BDF, instead of the file's bytes and 8 bytes a
//!   sample in physical units), with the same values once converted.
//! * Accepted: EDF, EDF+ (`EDF+C` and `EDF+D`), BDF and BDF+ (`BDF+C`,
//!   `BDF+D`). In a discontinuous file (`+D`) each data record is placed at
//!   the onset of its time-keeping annotation, counted from the first record's;
//!   the gaps between records are NaN (the pipeline bridges and counts them like
//!   any missing samples), and overlapping records are an error. Annotation
//!   onsets stay relative to the header's start time.
//! * Samples are scaled to physical units with the header's physical and digital
//!   extremes: `phys = (dig - dig_min) * (phys_max - phys_min) / (dig_max - dig_min) + phys_min`.
//!   Units `uV`/`µV` are converted to `mV` (x 0.001), `V` to `mV` (x 1000),
//!   `mV` kept; other units (e.g. `degC`) are left as they are.
//! * One sampling rate per [`Record`]: the rate (samples per data record /
//!   record duration) held by most ECG signals (labels containing `ECG`/`EKG`,
//!   or a standard lead name such as `II`, `aVR`, `V1`, `MLII`); when no label
//!   looks like ECG, the rate held by most signals. Ties go to the higher rate.
//!   Signals at another rate are resampled to it, each with a note in
//!   `meta.comments` and in `Record::warnings`, so that every signal keeps its
//!   place (and its name) in header order: a slower signal is interpolated
//!   linearly between its own samples (held at its last sample past its end), a
//!   faster one is averaged over each output sample's period centred on the
//!   output sample (a box-car low-pass; its samples are not otherwise filtered).
//!   Sample `j` of the record is at `j / fs` seconds from the start, sample `i`
//!   of a signal at rate `f` at `i / f`, as in the EDF data records.
//! * Leads keep header order; `EDF Annotations` channels are left out of it,
//!   so lead indices equal header signal indices when the annotation channels
//!   come last (as edflib and most writers place them).
//! * `EDF Annotations` channels are parsed into [`EdfAnnotation`]s (one per
//!   annotation text; the time-keeping TAL that opens every data record is not
//!   returned) and never returned as leads. Onsets are seconds relative to the
//!   header's start time, as written in the file.
//! * EDF+ patient field `code sex birthdate name ...`: sex `M`/`F` goes to
//!   `meta.sex`; a birthdate `dd-MMM-yyyy` gives `meta.age` in completed years at
//!   the recording start date (the EDF+ `Startdate dd-MMM-yyyy` of the recording
//!   field, else the header date `dd.mm.yy`, years 85-99 = 19xx, 00-84 = 20xx).
//! * The file size must equal header + records x record size (as edflib, the
//!   library behind `pyedflib`, requires); a record count of `-1` is derived
//!   from the size.
//!
//! # Writing ([`write_edf`], [`write_edf_with_annotations`])
//!
//! EDF+C, 16-bit, one `EDF Annotations` channel. The data-record length is the
//! divisor of the sample count whose duration is closest to 1 s and is written
//! exactly in the 8-character duration field (and keeps a record under 61,440
//! bytes, the EDF recommendation). When no divisor qualifies, records are the
//! shortest whole number of seconds holding an integer number of samples, and
//! the last record is padded by repeating each lead's last sample: reading the
//! file back then returns the padded length. Each lead gets its own physical
//! range (its minimum and maximum, rounded outwards to fit 8 characters) and the
//! full digital range -32768..32767, so the quantisation step is
//! `(phys_max - phys_min) / 65535`. Units are written in ASCII (`µ` as `u`,
//! `°` as `deg`, other non-ASCII characters as `_`). The patient field holds the subject id (or
//! `X`), sex (`M`/`F`/`X`), and a birthdate derived from the age when known —
//! the header start date is `01.01.85`, the placeholder EDF+ prescribes for an
//! unknown date (from memory), and the recording field says `Startdate X`, and the birthdate is 1 January of 1985 minus the completed age,
//! so that reading back gives the same age. Writes are atomic.

use std::path::Path;

use crate::annotation::write_atomic;
use crate::deferred::{DeferredRecord, DigitalLead, Extent, Loaded, Scale, Store};
use crate::{FormatError, Lead, Metadata, Record, Sex};

/// Label of the EDF+ annotation channel.
pub const ANNOTATION_LABEL: &str = "EDF Annotations";
/// Label of the BDF+ annotation channel.
pub const BDF_ANNOTATION_LABEL: &str = "BDF Annotations";

/// One EDF+ annotation (one text of a TAL).
#[derive(Debug, Clone, PartialEq)]
pub struct EdfAnnotation {
    /// Onset in seconds from the header start time.
    pub onset_s: f64,
    /// Duration in seconds, if the TAL gives one.
    pub duration_s: Option<f64>,
    /// The annotation text (UTF-8, as EDF+ specifies).
    pub text: String,
}

/// EDF flavour declared in the header's reserved field.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EdfVariant {
    /// Plain EDF (reserved field not starting with `EDF+`).
    Edf,
    /// EDF+ continuous (`EDF+C`).
    EdfPlusC,
    /// BDF: 24-bit samples (first header byte 0xFF, `BIOSEMI`).
    Bdf,
    /// BDF+ continuous (`BDF+C`): BDF with the EDF+ fields and annotations.
    BdfPlusC,
    /// EDF+ discontinuous (`EDF+D`): data records placed by their time-keeping
    /// annotations, gaps between them read as NaN.
    EdfPlusD,
    /// BDF+ discontinuous (`BDF+D`).
    BdfPlusD,
}

impl EdfVariant {
    /// True for the EDF+/BDF+ variants (structured patient field, TALs).
    pub fn is_plus(self) -> bool {
        matches!(
            self,
            EdfVariant::EdfPlusC
                | EdfVariant::BdfPlusC
                | EdfVariant::EdfPlusD
                | EdfVariant::BdfPlusD
        )
    }

    /// True for the discontinuous variants (`EDF+D`, `BDF+D`).
    pub fn is_discontinuous(self) -> bool {
        matches!(self, EdfVariant::EdfPlusD | EdfVariant::BdfPlusD)
    }

    /// Bytes per stored sample: 2 for EDF, 3 for BDF.
    pub fn sample_bytes(self) -> usize {
        match self {
            EdfVariant::Edf | EdfVariant::EdfPlusC | EdfVariant::EdfPlusD => 2,
            EdfVariant::Bdf | EdfVariant::BdfPlusC | EdfVariant::BdfPlusD => 3,
        }
    }
}

/// Header of one signal.
#[derive(Debug, Clone, PartialEq)]
pub struct EdfSignalHeader {
    /// Label, trimmed.
    pub label: String,
    pub transducer: String,
    /// Physical dimension as written, trimmed.
    pub units: String,
    pub phys_min: f64,
    pub phys_max: f64,
    pub dig_min: i32,
    pub dig_max: i32,
    pub prefilter: String,
    pub samples_per_record: usize,
}

impl EdfSignalHeader {
    /// True for an `EDF Annotations` channel.
    pub fn is_annotation(&self) -> bool {
        self.label == ANNOTATION_LABEL || self.label == BDF_ANNOTATION_LABEL
    }
}

/// The fixed header.
#[derive(Debug, Clone, PartialEq)]
pub struct EdfHeader {
    pub variant: EdfVariant,
    /// Local patient identification (80 characters, trimmed).
    pub patient: String,
    /// Local recording identification (80 characters, trimmed).
    pub recording: String,
    /// Start date `dd.mm.yy` as written.
    pub start_date: String,
    /// Start time `hh.mm.ss` as written.
    pub start_time: String,
    pub n_records: usize,
    /// Duration of one data record in seconds.
    pub record_duration_s: f64,
    pub signals: Vec<EdfSignalHeader>,
}

/// A decoded EDF file: header, physical samples of every ordinary signal (in
/// header order, units as written) and the annotations.
#[derive(Debug, Clone, PartialEq)]
pub struct EdfFile {
    pub header: EdfHeader,
    /// One entry per header signal; empty for annotation channels.
    pub samples: Vec<Vec<f64>>,
    pub annotations: Vec<EdfAnnotation>,
    /// Notes on how the file was read (gaps of a discontinuous file).
    pub warnings: Vec<String>,
}

fn invalid(path: &Path, message: impl Into<String>) -> FormatError {
    FormatError::Invalid {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

fn read_bytes(path: &Path) -> Result<Vec<u8>, FormatError> {
    std::fs::read(path).map_err(|source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    })
}

/// Read an EDF or EDF+C file into a [`Record`] (see the module docs).
pub fn read_edf(path: &Path) -> Result<Record, FormatError> {
    let bytes = read_bytes(path)?;
    let file = parse_edf(&bytes, path)?;
    edf_to_record(file, path)
}

/// The header of an EDF or BDF file, read without its data records; when
/// [`read_edf_deferred`] would keep the file's samples digital, also the
/// (rate in Hz, samples per signal, ordinary signals) it would ask its
/// `defer` about.
pub fn read_edf_header(path: &Path) -> Result<(EdfHeader, Option<Extent>), FormatError> {
    let (head, _) = open_head(path)?;
    let deferrable = head.deferrable();
    Ok((head.header, deferrable))
}

/// Open `path` and parse its header, reading no more of the file; the file
/// is returned positioned after the header.
fn open_head(path: &Path) -> Result<(EdfHead, std::fs::File), FormatError> {
    // The number of signals sets the header's length; a field that does not
    // parse is reported by `parse_head`, which needs no more bytes for it.
    let (bytes, file, file_len) = crate::deferred::read_head(path, 256, |b| {
        let ns = b
            .get(252..256)
            .and_then(|b| field_text(b).parse::<u64>().ok())
            .unwrap_or(0);
        256u64.saturating_mul(ns.saturating_add(1))
    })?;
    let head = parse_head(&bytes, file_len).map_err(|m| invalid(path, m))?;
    Ok((head, file))
}

/// [`read_edf`], except that a file for which `defer(fs, n_samples,
/// n_leads)` is true keeps its samples digital ([`crate::deferred`]: 16 bits
/// for EDF, 32 for BDF), read data record by data record without holding
/// the file's bytes. Only continuous files whose ordinary signals share one
/// rate are deferred (a discontinuous file needs its gaps placed, a signal
/// at another rate its resampling, as [`read_edf`] does); the others are
/// read whole. [`crate::deferred::DigitalLead::physical`] then gives exactly
/// the values of [`read_edf`], and the record carries the same name, rate,
/// lead names and units, metadata and warnings; a damaged annotation list is
/// the same error.
pub fn read_edf_deferred(
    path: &Path,
    defer: &dyn Fn(f64, usize, usize) -> bool,
) -> Result<Loaded, FormatError> {
    use std::io::Read;
    let (head, file) = open_head(path)?;
    if !head
        .deferrable()
        .is_some_and(|(fs, n, leads)| defer(fs, n, leads))
    {
        return read_edf(path).map(Loaded::Physical);
    }
    let h = &head.header;
    let bdf = head.width == 3;
    let mut narrow: Vec<Vec<i16>> = Vec::new();
    let mut wide: Vec<Vec<i32>> = Vec::new();
    // One store per header signal (annotation signals keep an empty one).
    let cap = |s: &EdfSignalHeader| {
        if s.is_annotation() {
            0
        } else {
            s.samples_per_record * h.n_records
        }
    };
    if bdf {
        wide = h
            .signals
            .iter()
            .map(|s| Vec::with_capacity(cap(s)))
            .collect();
    } else {
        narrow = h
            .signals
            .iter()
            .map(|s| Vec::with_capacity(cap(s)))
            .collect();
    }
    // Data records in blocks of about 1 MiB.
    let per_block = ((1usize << 20) / head.record_bytes.max(1)).max(1);
    let mut reader = file;
    let mut block = vec![0u8; per_block * head.record_bytes];
    let mut annotations = Vec::new();
    let mut r = 0;
    while r < h.n_records {
        let m = per_block.min(h.n_records - r);
        let bytes = &mut block[..m * head.record_bytes];
        reader.read_exact(bytes).map_err(|e| {
            invalid(
                path,
                format!(
                    "data record {}: {e} (the file changed while it was read?)",
                    r + 1
                ),
            )
        })?;
        for (i, record) in bytes.chunks_exact(head.record_bytes).enumerate() {
            head.walk_record(r + i, record, &mut annotations, |k, chunk| {
                if bdf {
                    wide[k].extend(chunk.chunks_exact(3).map(bdf_sample));
                } else {
                    narrow[k].extend(
                        chunk
                            .chunks_exact(2)
                            .map(|p| i16::from_le_bytes([p[0], p[1]])),
                    );
                }
            })
            .map_err(|m| invalid(path, m))?;
            // Only the check matters here: `read_edf` leaves annotations out
            // of the record too.
            annotations.clear();
        }
        r += m;
    }
    let mut stores: Vec<Store> = if bdf {
        wide.into_iter().map(Store::I32).collect()
    } else {
        narrow.into_iter().map(Store::I16).collect()
    };
    let EdfHead { header, .. } = head;
    let mut leads = Vec::new();
    for (s, store) in header.signals.iter().zip(stores.drain(..)) {
        if s.is_annotation() {
            continue;
        }
        let scale = Scale::Edf {
            dig_min: s.dig_min as f64,
            gain: (s.phys_max - s.phys_min) / (s.dig_max - s.dig_min) as f64,
            phys_min: s.phys_min,
        };
        leads.push(DigitalLead::with_store(store, scale, unit_to_mv(&s.units)));
    }
    // The record's name, rate, leads, metadata and warnings come from the
    // same conversion as `read_edf`'s, on empty samples.
    let samples = vec![Vec::new(); header.signals.len()];
    let file = EdfFile {
        header,
        samples,
        annotations: Vec::new(),
        warnings: Vec::new(),
    };
    let record = edf_to_record(file, path)?;
    Ok(Loaded::Deferred(DeferredRecord { record, leads }))
}

/// Read the annotations of an EDF+ file (empty for plain EDF).
pub fn read_edf_annotations(path: &Path) -> Result<Vec<EdfAnnotation>, FormatError> {
    let bytes = read_bytes(path)?;
    Ok(parse_edf(&bytes, path)?.annotations)
}

/// Latin-1 text of a header field, trimmed (EDF headers are ASCII; Latin-1
/// keeps any stray byte readable instead of failing).
fn field_text(b: &[u8]) -> String {
    b.iter()
        .map(|&c| c as char)
        .collect::<String>()
        .trim()
        .to_string()
}

struct Cursor<'a> {
    bytes: &'a [u8],
    pos: usize,
}

impl<'a> Cursor<'a> {
    fn take(&mut self, n: usize) -> &'a [u8] {
        let b = &self.bytes[self.pos..self.pos + n];
        self.pos += n;
        b
    }
}

fn parse_int(field: &str, what: &str) -> Result<i64, String> {
    field
        .parse::<i64>()
        .map_err(|_| format!("header field {what}: {field:?} is not an integer"))
}

fn parse_float(field: &str, what: &str) -> Result<f64, String> {
    match field.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        _ => Err(format!("header field {what}: {field:?} is not a number")),
    }
}

/// Decode EDF/EDF+C bytes; `path` only names the source in error messages.
pub fn parse_edf(bytes: &[u8], path: &Path) -> Result<EdfFile, FormatError> {
    parse_inner(bytes).map_err(|m| invalid(path, m))
}

fn parse_inner(bytes: &[u8]) -> Result<EdfFile, String> {
    let head = parse_head(bytes, bytes.len())?;
    let data = &bytes[head.header_len..];
    let mut samples: Vec<Vec<f64>> = head
        .header
        .signals
        .iter()
        .map(|s| {
            if s.is_annotation() {
                Vec::new()
            } else {
                Vec::with_capacity(s.samples_per_record * head.header.n_records)
            }
        })
        .collect();
    let mut annotations = Vec::new();
    let mut record_onsets: Vec<Option<f64>> = vec![None; head.header.n_records];
    let bdf = head.width == 3;
    for (r, record_onset) in record_onsets.iter_mut().enumerate() {
        let record = &data[r * head.record_bytes..(r + 1) * head.record_bytes];
        *record_onset = head.walk_record(r, record, &mut annotations, |k, chunk| {
            let s = &head.header.signals[k];
            let gain = (s.phys_max - s.phys_min) / (s.dig_max - s.dig_min) as f64;
            let out = &mut samples[k];
            if bdf {
                for p in chunk.chunks_exact(3) {
                    let d = bdf_sample(p) as f64;
                    out.push((d - s.dig_min as f64) * gain + s.phys_min);
                }
            } else {
                for p in chunk.chunks_exact(2) {
                    let d = i16::from_le_bytes([p[0], p[1]]) as f64;
                    out.push((d - s.dig_min as f64) * gain + s.phys_min);
                }
            }
        })?;
    }
    let EdfHead { header, .. } = head;
    let mut warnings = Vec::new();
    if header.variant.is_discontinuous() {
        place_records(
            &header.signals,
            header.record_duration_s,
            &record_onsets,
            &mut samples,
            &mut warnings,
        )?;
    }
    Ok(EdfFile {
        warnings,
        header,
        samples,
        annotations,
    })
}

/// A 24-bit little-endian two's-complement BDF sample.
fn bdf_sample(p: &[u8]) -> i32 {
    let sign = if p[2] & 0x80 != 0 { 0xff } else { 0 };
    i32::from_le_bytes([p[0], p[1], p[2], sign])
}

/// A parsed header and the layout of the data records after it.
struct EdfHead {
    header: EdfHeader,
    /// Bytes of the header (256 per signal plus 256).
    header_len: usize,
    /// Bytes per stored sample (2 EDF, 3 BDF).
    width: usize,
    /// Bytes per data record.
    record_bytes: usize,
}

impl EdfHead {
    /// Go through data record `r` (its bytes in `record`): each ordinary
    /// signal's bytes to `signal(k, bytes)`, each annotation signal's TALs
    /// parsed into `annotations`. Returns the record's onset (the first TAL
    /// of the first annotation signal, the time-keeping TAL of EDF+).
    fn walk_record(
        &self,
        r: usize,
        record: &[u8],
        annotations: &mut Vec<EdfAnnotation>,
        mut signal: impl FnMut(usize, &[u8]),
    ) -> Result<Option<f64>, String> {
        let mut onset = None;
        let mut first_ann = true;
        let mut off = 0;
        for (k, s) in self.header.signals.iter().enumerate() {
            let n = s.samples_per_record * self.width;
            let chunk = &record[off..off + n];
            off += n;
            if s.is_annotation() {
                let o = parse_tals(chunk, annotations).map_err(|m| {
                    format!("data record {} annotation signal {}: {m}", r + 1, k + 1)
                })?;
                if std::mem::take(&mut first_ann) {
                    onset = o;
                }
            } else {
                signal(k, chunk);
            }
        }
        Ok(onset)
    }

    /// When the record can be read with its samples kept digital
    /// ([`read_edf_deferred`]): continuous, with at least one data record of
    /// positive duration, and every ordinary signal at one rate (nothing to
    /// resample). Then its (rate in Hz, samples per signal, ordinary signals).
    fn deferrable(&self) -> Option<Extent> {
        let h = &self.header;
        let mut ordinary = h.signals.iter().filter(|s| !s.is_annotation());
        let spr = ordinary.next()?.samples_per_record;
        let one_rate = ordinary.all(|s| s.samples_per_record == spr);
        (one_rate && !h.variant.is_discontinuous() && h.n_records > 0 && h.record_duration_s > 0.0)
            .then(|| {
                (
                    spr as f64 / h.record_duration_s,
                    h.n_records * spr,
                    h.signals.iter().filter(|s| !s.is_annotation()).count(),
                )
            })
    }
}

/// Parse the header of an EDF or BDF file from `bytes`, the first bytes of
/// a file of `file_len` bytes (at least its header when the file holds one).
fn parse_head(bytes: &[u8], file_len: usize) -> Result<EdfHead, String> {
    if file_len == 0 {
        return Err("empty file, not an EDF file".into());
    }
    let bdf = bytes[0] == 0xff;
    let kind = if bdf { "BDF" } else { "EDF" };
    if file_len < 256 {
        return Err(format!(
            "truncated {kind} header: {file_len} bytes, the fixed header alone has 256"
        ));
    }
    let mut c = Cursor { bytes, pos: 0 };
    let version_bytes = c.take(8);
    if bdf {
        if &version_bytes[1..] != b"BIOSEMI" {
            return Err(format!(
                "not a BDF file: version field is 0xFF followed by {:?}, expected \"BIOSEMI\"",
                field_text(&version_bytes[1..])
            ));
        }
    } else {
        let version = field_text(version_bytes);
        if version != "0" {
            return Err(format!(
                "not an EDF file: version field is {version:?}, expected \"0\" (EDF) or \
                 0xFF \"BIOSEMI\" (BDF)"
            ));
        }
    }
    let patient = field_text(c.take(80));
    let recording = field_text(c.take(80));
    let start_date = field_text(c.take(8));
    let start_time = field_text(c.take(8));
    let header_bytes = parse_int(&field_text(c.take(8)), "number of header bytes")?;
    let reserved = field_text(c.take(44));
    let n_records_field = parse_int(&field_text(c.take(8)), "number of data records")?;
    let record_duration_s = parse_float(&field_text(c.take(8)), "duration of a data record")?;
    let ns = parse_int(&field_text(c.take(4)), "number of signals")?;

    let plus = if bdf { "BDF+" } else { "EDF+" };
    let variant = if reserved.starts_with(&format!("{plus}D")) {
        if bdf {
            EdfVariant::BdfPlusD
        } else {
            EdfVariant::EdfPlusD
        }
    } else if reserved.starts_with(&format!("{plus}C")) {
        if bdf {
            EdfVariant::BdfPlusC
        } else {
            EdfVariant::EdfPlusC
        }
    } else if reserved.starts_with(plus) {
        return Err(format!("unknown {plus} variant {reserved:?}"));
    } else if bdf {
        EdfVariant::Bdf
    } else {
        EdfVariant::Edf
    };
    let width = variant.sample_bytes();
    let (dig_lo, dig_hi) = if bdf {
        (-(1i64 << 23), (1i64 << 23) - 1)
    } else {
        (-32768, 32767)
    };
    if ns < 1 {
        return Err(format!("number of signals is {ns}, must be at least 1"));
    }
    let ns = ns as usize;
    if record_duration_s < 0.0 {
        return Err(format!(
            "duration of a data record is {record_duration_s}, must not be negative"
        ));
    }
    let expected_header = 256 * (ns as i64 + 1);
    if header_bytes != expected_header {
        return Err(format!(
            "header size field says {header_bytes} bytes, but {ns} signals need {expected_header}"
        ));
    }
    let header_len = expected_header as usize;
    if file_len < header_len {
        return Err(format!(
            "truncated EDF header: {file_len} bytes, {ns} signals need {header_len}"
        ));
    }
    let mut cols: Vec<Vec<String>> = Vec::new();
    for width in [16usize, 80, 8, 8, 8, 8, 8, 80, 8, 32] {
        cols.push((0..ns).map(|_| field_text(c.take(width))).collect());
    }
    let mut signals = Vec::with_capacity(ns);
    // Header fields are stored column-wise (all labels, then all transducers...).
    #[allow(clippy::needless_range_loop)]
    for k in 0..ns {
        let label = cols[0][k].clone();
        let what = |f: &str| format!("{f} of signal {} ({label:?})", k + 1);
        let phys_min = parse_float(&cols[3][k], &what("physical minimum"))?;
        let phys_max = parse_float(&cols[4][k], &what("physical maximum"))?;
        let dig_min = parse_int(&cols[5][k], &what("digital minimum"))?;
        let dig_max = parse_int(&cols[6][k], &what("digital maximum"))?;
        let spr = parse_int(&cols[8][k], &what("number of samples per data record"))?;
        if !(dig_lo..=dig_hi).contains(&dig_min) || !(dig_lo..=dig_hi).contains(&dig_max) {
            return Err(format!(
                "{}: digital range {dig_min}..{dig_max} exceeds {} bits",
                what("digital extremes"),
                8 * width
            ));
        }
        if dig_max <= dig_min {
            return Err(format!(
                "{}: digital maximum {dig_max} is not above digital minimum {dig_min}",
                what("digital extremes")
            ));
        }
        if phys_max == phys_min {
            return Err(format!(
                "{}: physical minimum and maximum are both {phys_min}",
                what("physical extremes")
            ));
        }
        if spr < 1 {
            return Err(format!(
                "{} is {spr}, must be at least 1",
                what("number of samples per data record")
            ));
        }
        signals.push(EdfSignalHeader {
            label,
            transducer: cols[1][k].clone(),
            units: cols[2][k].clone(),
            phys_min,
            phys_max,
            dig_min: dig_min as i32,
            dig_max: dig_max as i32,
            prefilter: cols[7][k].clone(),
            samples_per_record: spr as usize,
        });
    }
    let record_samples: usize = signals
        .iter()
        .try_fold(0usize, |acc, s| acc.checked_add(s.samples_per_record))
        .ok_or("samples per data record overflow")?;
    let record_bytes = record_samples
        .checked_mul(width)
        .ok_or("data record size overflows")?;
    let data_len = file_len - header_len;
    let n_records = if n_records_field == -1 {
        if !data_len.is_multiple_of(record_bytes) {
            return Err(format!(
                "record count unknown (-1) and the {data_len} data bytes are not a whole number of {record_bytes}-byte data records"
            ));
        }
        data_len / record_bytes
    } else if n_records_field < 0 {
        return Err(format!(
            "number of data records is {n_records_field}, must be -1 (unknown) or at least 0"
        ));
    } else {
        let n = n_records_field as usize;
        let need = n.checked_mul(record_bytes).ok_or("data size overflows")?;
        if data_len < need {
            return Err(format!(
                "truncated {kind} file: header announces {n} data records of {record_bytes} bytes ({need} bytes) but only {data_len} data bytes follow the header"
            ));
        }
        if data_len > need {
            return Err(format!(
                "record count inconsistent with file size: {n} data records of {record_bytes} bytes need {need} data bytes, the file has {data_len}"
            ));
        }
        n
    };
    Ok(EdfHead {
        header: EdfHeader {
            variant,
            patient,
            recording,
            start_date,
            start_time,
            n_records,
            record_duration_s,
            signals,
        },
        header_len,
        width,
        record_bytes,
    })
}

fn gcd(a: usize, b: usize) -> usize {
    if b == 0 {
        a
    } else {
        gcd(b, a % b)
    }
}

/// Place the data records of a discontinuous (`EDF+D`/`BDF+D`) file at their
/// onsets, NaN in the gaps (EDF+ specification, Kemp & Olivan 2003, from
/// memory: every data record opens with a time-keeping TAL giving its start in
/// seconds; in `EDF+D` successive records may leave gaps but never overlap).
///
/// Onsets count from the first record's, as sample 0 of a continuous file does.
/// They are put on the grid of `duration / g` seconds, `g` the greatest common
/// divisor of the signals' samples per record, so that every signal gets whole
/// sample offsets and all keep the ratio of their rates; an onset more than 1 %
/// of that step off the grid is rounded with a warning.
fn place_records(
    signals: &[EdfSignalHeader],
    duration_s: f64,
    onsets: &[Option<f64>],
    samples: &mut [Vec<f64>],
    warnings: &mut Vec<String>,
) -> Result<(), String> {
    let ordinary: Vec<usize> = (0..signals.len())
        .filter(|&k| !signals[k].is_annotation())
        .collect();
    if ordinary.is_empty() || onsets.is_empty() {
        return Ok(());
    }
    if duration_s <= 0.0 {
        return Err(format!(
            "discontinuous file with a data-record duration of {duration_s} s: the records \
             cannot be placed in time"
        ));
    }
    let g = ordinary
        .iter()
        .map(|&k| signals[k].samples_per_record)
        .fold(0, gcd);
    let step = duration_s / g as f64;
    let mut ticks: Vec<u64> = Vec::with_capacity(onsets.len());
    let mut off_grid = 0usize;
    let first = onsets[0].ok_or("data record 1 has no time-keeping annotation (its onset)")?;
    for (r, o) in onsets.iter().enumerate() {
        let o = o.ok_or_else(|| {
            format!(
                "data record {} has no time-keeping annotation (its onset)",
                r + 1
            )
        })?;
        let t = (o - first) / step;
        if !(0.0..=(1u64 << 40) as f64).contains(&t) {
            return Err(format!(
                "data record {} starts at {o} s, {} s from the first record: out of range",
                r + 1,
                o - first
            ));
        }
        let tick = t.round() as u64;
        if (t - tick as f64).abs() > 0.01 {
            off_grid += 1;
        }
        if let Some(&prev) = ticks.last() {
            if tick < prev + g as u64 {
                return Err(format!(
                    "data record {} starts at {o} s, before the previous one ends ({} s): \
                     records of a discontinuous file must not overlap",
                    r + 1,
                    first + (prev + g as u64) as f64 * step
                ));
            }
        }
        ticks.push(tick);
    }
    let total_ticks = ticks.last().copied().unwrap_or(0) + g as u64;
    let gaps = ticks.windows(2).filter(|w| w[1] > w[0] + g as u64).count();
    for &k in &ordinary {
        let per = (signals[k].samples_per_record / g) as u64;
        let len = total_ticks * per;
        // A whole record is held in memory: gaps may lengthen a signal to 2^26
        // samples (37 h at 500 Hz) or twice its stored length, not more, so a
        // damaged onset cannot ask for gigabytes.
        let stored = (onsets.len() * signals[k].samples_per_record) as u64;
        let cap = (1u64 << 26).max(2 * stored);
        if len > cap {
            return Err(format!(
                "signal {} ({:?}): the gaps between data records make it {len} samples long \
                 ({} s), more than the {cap} allowed; check the records' onsets",
                k + 1,
                signals[k].label,
                total_ticks as f64 * step
            ));
        }
        let spr = signals[k].samples_per_record;
        let mut out = vec![f64::NAN; len as usize];
        for (r, &t) in ticks.iter().enumerate() {
            let at = (t * per) as usize;
            out[at..at + spr].copy_from_slice(&samples[k][r * spr..(r + 1) * spr]);
        }
        samples[k] = out;
    }
    if gaps > 0 {
        let gap_s = (total_ticks - onsets.len() as u64 * g as u64) as f64 * step;
        warnings.push(format!(
            "discontinuous recording: {gaps} gap(s) between data records, {gap_s} s in all, \
             read as NaN"
        ));
    }
    if off_grid > 0 {
        warnings.push(format!(
            "discontinuous recording: {off_grid} data record onset(s) off the sample grid \
             ({step} s), rounded to it"
        ));
    }
    Ok(())
}

/// Parse the TALs of one annotation signal in one data record.
///
/// TAL layout (EDF+ spec): `+onset[\x15duration]\x14[text\x14]...\x00`, TALs
/// back to back, the rest of the signal filled with `\x00`.
/// Returns the onset of the chunk's first TAL (the time-keeping TAL when the
/// chunk is the first annotation signal of a data record).
fn parse_tals(chunk: &[u8], out: &mut Vec<EdfAnnotation>) -> Result<Option<f64>, String> {
    let mut first = None;
    let mut i = 0;
    while i < chunk.len() {
        if chunk[i] == 0 {
            i += 1;
            continue;
        }
        let end = chunk[i..]
            .iter()
            .position(|&b| b == 0)
            .map(|p| i + p)
            .ok_or_else(|| format!("TAL at byte {i} is not terminated by a 0 byte"))?;
        let tal = &chunk[i..end];
        let head_end = tal
            .iter()
            .position(|&b| b == 0x14)
            .ok_or_else(|| format!("TAL at byte {i} has no 0x14 after its onset"))?;
        let head = &tal[..head_end];
        let (onset_b, dur_b) = match head.iter().position(|&b| b == 0x15) {
            Some(p) => (&head[..p], Some(&head[p + 1..])),
            None => (head, None),
        };
        let onset_s = tal_number(onset_b, true).ok_or_else(|| {
            format!(
                "TAL at byte {i}: bad onset {:?}",
                String::from_utf8_lossy(onset_b)
            )
        })?;
        first.get_or_insert(onset_s);
        let duration_s = match dur_b {
            Some(d) => Some(tal_number(d, false).ok_or_else(|| {
                format!(
                    "TAL at byte {i}: bad duration {:?}",
                    String::from_utf8_lossy(d)
                )
            })?),
            None => None,
        };
        for text in tal[head_end + 1..].split(|&b| b == 0x14) {
            if !text.is_empty() {
                out.push(EdfAnnotation {
                    onset_s,
                    duration_s,
                    text: String::from_utf8_lossy(text).into_owned(),
                });
            }
        }
        i = end + 1;
    }
    Ok(first)
}

/// A TAL number: onsets must carry a sign (`+`/`-`), durations must not;
/// digits with an optional decimal point only.
fn tal_number(b: &[u8], signed: bool) -> Option<f64> {
    let body = if signed {
        match b.first()? {
            b'+' | b'-' => &b[1..],
            _ => return None,
        }
    } else {
        b
    };
    let ok = !body.is_empty()
        && body.iter().all(|&c| c.is_ascii_digit() || c == b'.')
        && body.iter().filter(|&&c| c == b'.').count() <= 1
        && body.iter().any(|c| c.is_ascii_digit());
    if !ok {
        return None;
    }
    std::str::from_utf8(b).ok()?.parse::<f64>().ok()
}

/// Factor to millivolts and the resulting unit, for voltage units.
fn unit_to_mv(units: &str) -> Option<f64> {
    match units {
        "mV" => Some(1.0),
        "uV" | "µV" | "μV" => Some(0.001),
        "V" => Some(1000.0),
        _ => None,
    }
}

/// Convert a decoded file to a [`Record`] (rate choice, units, patient field).
pub fn edf_to_record(file: EdfFile, path: &Path) -> Result<Record, FormatError> {
    let EdfFile {
        header,
        samples,
        warnings: read_notes,
        ..
    } = file;
    let h = &header;
    let ordinary: Vec<usize> = (0..h.signals.len())
        .filter(|&k| !h.signals[k].is_annotation())
        .collect();
    if ordinary.is_empty() {
        return Err(invalid(
            path,
            "no signal channels (annotation-only EDF+ file); read its annotations instead",
        ));
    }
    if h.record_duration_s <= 0.0 {
        return Err(invalid(
            path,
            format!(
                "duration of a data record is {}, must be positive for a file with signals",
                h.record_duration_s
            ),
        ));
    }
    if h.n_records == 0 {
        return Err(invalid(path, "the file holds no data records"));
    }
    let rate = |k: usize| h.signals[k].samples_per_record as f64 / h.record_duration_s;
    let ecg: Vec<usize> = ordinary
        .iter()
        .copied()
        .filter(|&k| crate::signals::is_ecg_name(&h.signals[k].label))
        .collect();
    let candidates = if ecg.is_empty() { &ordinary } else { &ecg };
    // Rate held by most candidates; ties to the higher rate. Counted on samples
    // per record, which are integers, to avoid comparing floats.
    let mut best: Option<(usize, usize)> = None; // (count, spr)
    for &k in candidates {
        let spr = h.signals[k].samples_per_record;
        let count = candidates
            .iter()
            .filter(|&&j| h.signals[j].samples_per_record == spr)
            .count();
        if best.is_none_or(|(bc, bs)| count > bc || (count == bc && spr > bs)) {
            best = Some((count, spr));
        }
    }
    let spr = best.map(|b| b.1).unwrap_or(0);
    let fs = spr as f64 / h.record_duration_s;

    let mut meta = Metadata::default();
    let mut warnings = read_notes;
    let mut leads = Vec::new();
    for (k, mut s) in samples.into_iter().enumerate() {
        let sh = &header.signals[k];
        if sh.is_annotation() {
            continue;
        }
        if sh.samples_per_record != spr {
            let note = format!(
                "EDF signal {:?} resampled from {} Hz to the record's {} Hz ({})",
                sh.label,
                rate(k),
                fs,
                if sh.samples_per_record < spr {
                    "linear interpolation"
                } else {
                    "mean over each output sample's period"
                }
            );
            let k_in = sh.samples_per_record;
            s = if k_in < spr {
                crate::frames::upsample_linear(&s, k_in, spr)
            } else {
                crate::frames::downsample_mean(&s, k_in, spr)
            };
            meta.comments.push(note.clone());
            warnings.push(note);
        }
        let units = match unit_to_mv(&sh.units) {
            Some(f) => {
                if f != 1.0 {
                    s.iter_mut().for_each(|x| *x *= f);
                }
                "mV".to_string()
            }
            None => sh.units.clone(),
        };
        leads.push(Lead {
            name: sh.label.clone(),
            units,
            samples: s,
        });
    }
    if header.variant.is_plus() {
        patient_meta(&header, &mut meta);
    }
    Ok(Record::from_file(path, fs, leads, meta, warnings))
}

const MONTHS: [&str; 12] = [
    "JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC",
];

/// `dd-MMM-yyyy` to (year, month, day).
fn parse_edfplus_date(s: &str) -> Option<(i32, u32, u32)> {
    let mut it = s.split('-');
    let d: u32 = it.next()?.parse().ok()?;
    let m = it.next()?.to_ascii_uppercase();
    let y: i32 = it.next()?.parse().ok()?;
    if it.next().is_some() || !(1..=31).contains(&d) {
        return None;
    }
    let m = MONTHS.iter().position(|x| *x == m)? as u32 + 1;
    Some((y, m, d))
}

/// Header `dd.mm.yy` to (year, month, day); 85-99 = 19xx, 00-84 = 20xx (EDF spec).
fn parse_header_date(s: &str) -> Option<(i32, u32, u32)> {
    let mut it = s.split('.');
    let d: u32 = it.next()?.parse().ok()?;
    let m: u32 = it.next()?.parse().ok()?;
    let y: i32 = it.next()?.parse().ok()?;
    if it.next().is_some()
        || !(1..=31).contains(&d)
        || !(1..=12).contains(&m)
        || !(0..=99).contains(&y)
    {
        return None;
    }
    Some((if y >= 85 { 1900 + y } else { 2000 + y }, m, d))
}

fn patient_meta(h: &EdfHeader, meta: &mut Metadata) {
    let parts: Vec<&str> = h.patient.split_whitespace().collect();
    match parts.get(1) {
        Some(&"M") => meta.sex = Some(Sex::Male),
        Some(&"F") => meta.sex = Some(Sex::Female),
        _ => {}
    }
    let Some(birth) = parts.get(2).and_then(|s| parse_edfplus_date(s)) else {
        return;
    };
    let rec_parts: Vec<&str> = h.recording.split_whitespace().collect();
    let start = match rec_parts.as_slice() {
        ["Startdate", d, ..] => parse_edfplus_date(d),
        _ => None,
    }
    .or_else(|| parse_header_date(&h.start_date));
    let Some(start) = start else { return };
    let mut age = start.0 - birth.0;
    if (start.1, start.2) < (birth.1, birth.2) {
        age -= 1;
    }
    if (0..=150).contains(&age) {
        meta.age = Some(age as f64);
    } else {
        meta.comments.push(format!(
            "EDF+ birthdate {} gives an age of {age} years at the recording start; age not set",
            parts[2]
        ));
    }
}

// ---------------------------------------------------------------- writing

/// Largest data record the EDF spec recommends, in bytes.
const MAX_RECORD_BYTES: usize = 61_440;

/// Write `rec` as EDF+C with an annotation channel holding only the
/// time-keeping TALs (see the module docs), atomically.
pub fn write_edf(path: &Path, rec: &Record) -> Result<(), FormatError> {
    write_edf_with_annotations(path, rec, &[])
}

/// Write `rec` as EDF+C with `annotations` in its annotation channel, atomically.
pub fn write_edf_with_annotations(
    path: &Path,
    rec: &Record,
    annotations: &[EdfAnnotation],
) -> Result<(), FormatError> {
    let bytes = encode_edf(rec, annotations).map_err(|m| invalid(path, m))?;
    write_atomic(path, &bytes)
}

/// Number formatted to at most 8 characters, rounded down (`up == false`) or up.
fn fmt8(x: f64, up: bool) -> Option<String> {
    for decimals in (0..=7).rev() {
        let scale = 10f64.powi(decimals);
        let v = if up {
            (x * scale).ceil() / scale
        } else {
            (x * scale).floor() / scale
        };
        let s = format!("{v:.*}", decimals as usize);
        let s = if s == "-0" { "0".to_string() } else { s };
        if s.len() <= 8 {
            return Some(s);
        }
    }
    None
}

/// Duration of `spr` samples at `fs`, if exactly writable in 8 characters.
fn duration_field(spr: usize, fs: f64) -> Option<String> {
    let d = spr as f64 / fs;
    for decimals in 0..=7usize {
        let s = format!("{d:.decimals$}");
        let s = if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        };
        if s.len() > 8 {
            continue;
        }
        let back: f64 = s.parse().ok()?;
        if back > 0.0 && ((spr as f64 / back) - fs).abs() <= 1e-9 * fs {
            return Some(s);
        }
    }
    None
}

/// EDF headers are ASCII: `µ`/`μ` become `u`, `°` becomes `deg`, any other
/// non-ASCII character `_`.
fn ascii_units(units: &str) -> String {
    units
        .chars()
        .map(|c| match c {
            'µ' | 'μ' => "u".to_string(),
            '°' => "deg".to_string(),
            c if c.is_ascii() => c.to_string(),
            _ => "_".to_string(),
        })
        .collect()
}

fn put(out: &mut Vec<u8>, s: &str, width: usize) -> Result<(), String> {
    if !s.is_ascii() || s.len() > width {
        return Err(format!(
            "header value {s:?} must be ASCII of at most {width} characters"
        ));
    }
    out.extend_from_slice(s.as_bytes());
    out.extend(std::iter::repeat_n(b' ', width - s.len()));
    Ok(())
}

fn tal_bytes(onset: f64, duration: Option<f64>, texts: &[&str]) -> Vec<u8> {
    let mut b = Vec::new();
    let sign = if onset < 0.0 { "-" } else { "+" };
    b.extend_from_slice(format!("{sign}{}", fmt_seconds(onset.abs())).as_bytes());
    if let Some(d) = duration {
        b.push(0x15);
        b.extend_from_slice(fmt_seconds(d).as_bytes());
    }
    b.push(0x14);
    if texts.is_empty() {
        b.push(0x14);
    }
    for t in texts {
        b.extend_from_slice(t.as_bytes());
        b.push(0x14);
    }
    b.push(0);
    b
}

/// Seconds without exponent or trailing zeros (TAL numbers allow digits and `.`).
fn fmt_seconds(x: f64) -> String {
    let s = format!("{x:.9}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s.is_empty() {
        "0".into()
    } else {
        s.to_string()
    }
}

fn patient_field(meta: &Metadata) -> String {
    let code: String = match &meta.subject {
        Some(s) if !s.trim().is_empty() => s
            .trim()
            .chars()
            .map(|c| if c.is_ascii_graphic() { c } else { '_' })
            .take(40)
            .collect(),
        _ => "X".into(),
    };
    let sex = meta.sex.map_or("X", |s| s.code());
    let birth = match meta.age {
        Some(a) if a.is_finite() && (0.0..=150.0).contains(&a) => {
            format!("01-JAN-{}", 1985 - a.floor() as i32)
        }
        _ => "X".into(),
    };
    format!("{code} {sex} {birth} X")
}

/// Encode `rec` as EDF+C bytes (see the module docs for the layout choices).
pub fn encode_edf(rec: &Record, annotations: &[EdfAnnotation]) -> Result<Vec<u8>, String> {
    if rec.leads.is_empty() {
        return Err("record has no leads".into());
    }
    let n = rec.n_samples();
    if n == 0 {
        return Err("record has no samples".into());
    }
    if !(rec.fs.is_finite() && rec.fs > 0.0) {
        return Err(format!("sampling rate {} Hz is not positive", rec.fs));
    }
    for l in &rec.leads {
        if l.samples.len() != n {
            return Err(format!(
                "lead {:?} has {} samples, lead {:?} has {n}",
                l.name,
                l.samples.len(),
                rec.leads[0].name
            ));
        }
        if let Some(i) = l.samples.iter().position(|x| !x.is_finite()) {
            return Err(format!("lead {:?}: sample {i} is not finite", l.name));
        }
    }
    let nsig = rec.leads.len();
    // Choose samples per record.
    let bytes_per_sample_all = nsig * 2;
    let mut choice: Option<(usize, String)> = None;
    let mut best_dist = f64::INFINITY;
    let mut divisors: Vec<usize> = Vec::new();
    let mut d = 1usize;
    while d * d <= n {
        if n.is_multiple_of(d) {
            divisors.push(d);
            divisors.push(n / d);
        }
        d += 1;
    }
    for &spr in &divisors {
        if spr * bytes_per_sample_all + 64 > MAX_RECORD_BYTES || spr < 1 {
            continue;
        }
        if let Some(field) = duration_field(spr, rec.fs) {
            let dist = (spr as f64 / rec.fs - 1.0).abs();
            // Very short records waste space on time-keeping TALs; keep >= 0.1 s.
            if spr as f64 / rec.fs >= 0.1 && dist < best_dist {
                best_dist = dist;
                choice = Some((spr, field));
            }
        }
    }
    if choice.is_none() {
        for secs in 1..=60usize {
            let spr_f = rec.fs * secs as f64;
            let spr = spr_f.round() as usize;
            if (spr_f - spr as f64).abs() < 1e-6
                && spr * bytes_per_sample_all + 64 <= MAX_RECORD_BYTES
            {
                if let Some(field) = duration_field(spr, rec.fs) {
                    choice = Some((spr, field));
                    break;
                }
            }
        }
    }
    let (spr, dur_field) = choice.ok_or_else(|| {
        format!(
            "no EDF data-record layout fits {} Hz with {nsig} leads (records must hold whole samples and stay under {MAX_RECORD_BYTES} bytes)",
            rec.fs
        )
    })?;
    let dur: f64 = dur_field.parse().map_err(|_| "duration field")?;
    let n_records = n.div_ceil(spr);

    // Annotation TALs per record.
    let mut per_record: Vec<Vec<u8>> = (0..n_records)
        .map(|r| tal_bytes(r as f64 * dur, None, &[]))
        .collect();
    for a in annotations {
        if !a.onset_s.is_finite() || a.duration_s.is_some_and(|d| !(d.is_finite() && d >= 0.0)) {
            return Err(format!(
                "annotation {:?}: onset/duration not finite",
                a.text
            ));
        }
        if a.text.bytes().any(|b| b == 0 || b == 0x14 || b == 0x15) {
            return Err(format!(
                "annotation {:?}: text holds a TAL control byte",
                a.text
            ));
        }
        let r = ((a.onset_s / dur).floor().max(0.0) as usize).min(n_records - 1);
        let tal = tal_bytes(a.onset_s, a.duration_s, &[a.text.as_str()]);
        per_record[r].extend_from_slice(&tal);
    }
    let ann_bytes = per_record.iter().map(Vec::len).max().unwrap_or(0);
    let ann_spr = ann_bytes.div_ceil(2).max(1);
    let record_bytes = bytes_per_sample_all * spr + 2 * ann_spr;
    if record_bytes > MAX_RECORD_BYTES * 4 {
        return Err(format!(
            "annotations too dense: one data record would need {record_bytes} bytes"
        ));
    }

    // Header.
    let ns = nsig + 1;
    let mut out = Vec::with_capacity(256 * (ns + 1) + n_records * record_bytes);
    put(&mut out, "0", 8)?;
    put(&mut out, &patient_field(&rec.meta), 80)?;
    put(&mut out, "Startdate X X X tendline", 80)?;
    put(&mut out, "01.01.85", 8)?;
    put(&mut out, "00.00.00", 8)?;
    put(&mut out, &(256 * (ns + 1)).to_string(), 8)?;
    put(&mut out, "EDF+C", 44)?;
    put(&mut out, &n_records.to_string(), 8)?;
    put(&mut out, &dur_field, 8)?;
    put(&mut out, &ns.to_string(), 4)?;

    struct Scale {
        pmin: f64,
        pmax: f64,
        pmin_s: String,
        pmax_s: String,
    }
    let mut scales = Vec::with_capacity(nsig);
    for l in &rec.leads {
        let (mut lo, mut hi) = l
            .samples
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                (a.min(x), b.max(x))
            });
        if lo == hi {
            lo -= 1.0;
            hi += 1.0;
        }
        let pmin_s = fmt8(lo, false)
            .ok_or_else(|| format!("lead {:?}: minimum {lo} does not fit 8 characters", l.name))?;
        let pmax_s = fmt8(hi, true)
            .ok_or_else(|| format!("lead {:?}: maximum {hi} does not fit 8 characters", l.name))?;
        let pmin: f64 = pmin_s.parse().map_err(|_| "physical minimum")?;
        let pmax: f64 = pmax_s.parse().map_err(|_| "physical maximum")?;
        scales.push(Scale {
            pmin,
            pmax,
            pmin_s,
            pmax_s,
        });
    }
    for l in &rec.leads {
        put(&mut out, &l.name, 16).map_err(|e| format!("lead label: {e}"))?;
    }
    put(&mut out, ANNOTATION_LABEL, 16)?;
    for _ in 0..ns {
        put(&mut out, "", 80)?; // transducer
    }
    for l in &rec.leads {
        put(&mut out, &ascii_units(&l.units), 8)
            .map_err(|e| format!("lead {:?} units: {e}", l.name))?;
    }
    put(&mut out, "", 8)?;
    for s in &scales {
        put(&mut out, &s.pmin_s, 8)?;
    }
    put(&mut out, "-1", 8)?;
    for s in &scales {
        put(&mut out, &s.pmax_s, 8)?;
    }
    put(&mut out, "1", 8)?;
    for _ in 0..ns {
        put(&mut out, "-32768", 8)?;
    }
    for _ in 0..ns {
        put(&mut out, "32767", 8)?;
    }
    for _ in 0..ns {
        put(&mut out, "", 80)?; // prefiltering
    }
    for _ in 0..nsig {
        put(&mut out, &spr.to_string(), 8)?;
    }
    put(&mut out, &ann_spr.to_string(), 8)?;
    for _ in 0..ns {
        put(&mut out, "", 32)?;
    }

    // Data records.
    for (r, tals) in per_record.iter().enumerate() {
        for (l, s) in rec.leads.iter().zip(&scales) {
            let step = (s.pmax - s.pmin) / 65535.0;
            let last = l.samples[n - 1];
            for i in r * spr..(r + 1) * spr {
                let x = l.samples.get(i).copied().unwrap_or(last);
                let d = ((x - s.pmin) / step - 32768.0)
                    .round()
                    .clamp(-32768.0, 32767.0) as i16;
                out.extend_from_slice(&d.to_le_bytes());
            }
        }
        out.extend_from_slice(tals);
        out.extend(std::iter::repeat_n(0u8, 2 * ann_spr - tals.len()));
    }
    Ok(out)
}
