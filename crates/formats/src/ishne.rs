//! ISHNE Holter files (`.ecg`): the standard output format of Holter recorders
//! (Badilini F, "The ISHNE Holter Standard Output File Format", Ann
//! Noninvasive Electrocardiol 1998;3:263-266), read into a [`Record`].
//!
//! Layout (from memory of that publication; all numbers little-endian):
//!
//! ```text
//! offset  size  field
//!      0     8  magic number `ISHNE1.0` (`ANN  1.0` for an annotation file)
//!      8     2  CRC-CCITT (polynomial 0x1021, initial value 0xFFFF) of the
//!               bytes from offset 10 up to the start of the ECG block
//!     10     4  size of the variable-length block (bytes)
//!     14     4  samples per lead
//!     18     4  offset of the variable-length block (522)
//!     22     4  offset of the ECG block
//!     26     2  file version
//!     28    40  first name, 68: 40 last name, 108: 20 subject id
//!    128     2  sex (0 unknown, 1 male, 2 female)
//!    130     2  race
//!    132     6  birth date (day, month, year), 138: 6 recording date,
//!               144: 6 file date, 150: 6 start time (hour, minute, second)
//!    156     2  number of leads (1 to 12)
//!    158    24  lead specification per lead (code, see `lead_name`)
//!    182    24  lead quality per lead
//!    206    24  amplitude resolution per lead (nV per digital unit)
//!    230     2  pacemaker code
//!    232    40  recorder type
//!    272     2  sampling rate (Hz)
//!    274   248  proprietary, copyright, reserved
//!    522     -  variable-length block, then the ECG block: 16-bit samples,
//!               lead after lead within each sample instant
//! ```
//!
//! Values: `digital × resolution` nV, returned in millivolts. Lead names come
//! from the lead specification codes (`I`, `II`, `V1`...; an unknown code gives
//! `lead<k>`, numbered from 1). Sex and age (birth date against recording date)
//! go to the record's metadata, the subject id to `meta.subject`. A CRC that
//! does not match is a warning, as for WFDB header checksums: the samples may be
//! fine. A file shorter than its header announces is an error; extra bytes after
//! the announced samples are ignored with a warning.

use std::path::Path;

use crate::deferred::{DeferredRecord, DigitalLead, Extent, Loaded, Scale, Store};
use crate::{FormatError, Lead, Metadata, Record, Sex};

const MAGIC: &[u8; 8] = b"ISHNE1.0";
const ANN_MAGIC: &[u8; 8] = b"ANN  1.0";
/// The fixed part: magic, CRC and the 512-byte header.
const FIXED: usize = 522;

fn invalid(path: &Path, message: impl Into<String>) -> FormatError {
    FormatError::Invalid {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

/// CRC-CCITT as the ISHNE format uses it: polynomial 0x1021, initial value
/// 0xFFFF, bits most significant first, no final XOR ("CRC-16/CCITT-FALSE").
pub fn crc_ccitt(bytes: &[u8]) -> u16 {
    let mut crc: u16 = 0xffff;
    for &b in bytes {
        crc ^= (b as u16) << 8;
        for _ in 0..8 {
            crc = if crc & 0x8000 != 0 {
                (crc << 1) ^ 0x1021
            } else {
                crc << 1
            };
        }
    }
    crc
}

/// Lead name of an ISHNE lead specification code (table of the ISHNE
/// publication, from memory), or `None` for an unknown code.
pub fn lead_name(code: i16) -> Option<&'static str> {
    Some(match code {
        1 => "bipolar",
        2 => "X",
        3 => "Y",
        4 => "Z",
        5 => "I",
        6 => "II",
        7 => "III",
        8 => "aVR",
        9 => "aVL",
        10 => "aVF",
        11 => "V1",
        12 => "V2",
        13 => "V3",
        14 => "V4",
        15 => "V5",
        16 => "V6",
        17 => "ES",
        18 => "AS",
        19 => "AI",
        _ => return None,
    })
}

fn i16_at(b: &[u8], at: usize) -> i16 {
    i16::from_le_bytes([b[at], b[at + 1]])
}

fn i32_at(b: &[u8], at: usize) -> i32 {
    i32::from_le_bytes([b[at], b[at + 1], b[at + 2], b[at + 3]])
}

fn text_at(b: &[u8], at: usize, n: usize) -> String {
    b[at..at + n]
        .iter()
        .take_while(|&&c| c != 0)
        .map(|&c| c as char)
        .collect::<String>()
        .trim()
        .to_string()
}

/// (year, month, day) of a day-month-year triple, if it is a calendar date.
fn date_at(b: &[u8], at: usize) -> Option<(i32, u32, u32)> {
    let (d, m, y) = (i16_at(b, at), i16_at(b, at + 2), i16_at(b, at + 4));
    ((1..=31).contains(&d) && (1..=12).contains(&m) && y > 0)
        .then_some((y as i32, m as u32, d as u32))
}

/// Read an ISHNE Holter file (see the module docs).
pub fn read_ishne(path: &Path) -> Result<Record, FormatError> {
    let bytes = std::fs::read(path).map_err(|source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    parse_ishne(&bytes, path)
}

/// Decode ISHNE bytes; `path` names the file in errors and in the record.
pub fn parse_ishne(b: &[u8], path: &Path) -> Result<Record, FormatError> {
    let head = parse_head(b, b.len(), path)?;
    let (nl, n) = (head.gains.len(), head.n);
    let data = &b[head.ecg_offset..head.ecg_offset + n * nl * 2];
    let mut samples: Vec<Vec<f64>> = (0..nl).map(|_| Vec::with_capacity(n)).collect();
    for frame in data.chunks_exact(2 * nl) {
        for (k, lead) in samples.iter_mut().enumerate() {
            let d = i16::from_le_bytes([frame[2 * k], frame[2 * k + 1]]);
            lead.push(f64::from(d) * head.gains[k]);
        }
    }
    Ok(head.into_record(path, samples))
}

/// The header of an ISHNE file: what it announces and the record it makes.
struct IshneHead {
    fs: f64,
    names: Vec<String>,
    /// Per lead, millivolts per digital unit.
    gains: Vec<f64>,
    /// Samples per lead.
    n: usize,
    ecg_offset: usize,
    meta: Metadata,
    warnings: Vec<String>,
}

impl IshneHead {
    /// The record with these `samples` (one vector per lead, in mV).
    fn into_record(self, path: &Path, samples: Vec<Vec<f64>>) -> Record {
        let leads = self
            .names
            .into_iter()
            .zip(samples)
            .map(|(name, samples)| Lead {
                name,
                units: "mV".into(),
                samples,
            })
            .collect();
        Record::from_file(path, self.fs, leads, self.meta, self.warnings)
    }
}

/// Parse the header of an ISHNE file from `b`, its first bytes (at least
/// up to its ECG block when the file holds that many), the file having
/// `file_len` bytes in all.
fn parse_head(b: &[u8], file_len: usize, path: &Path) -> Result<IshneHead, FormatError> {
    if b.len() >= 8 && &b[..8] == ANN_MAGIC {
        return Err(invalid(
            path,
            "an ISHNE annotation file (magic `ANN  1.0`), not an ECG file",
        ));
    }
    if b.len() < 8 || &b[..8] != MAGIC {
        let got: String = b.iter().take(8).map(|&c| c as char).collect();
        return Err(invalid(
            path,
            format!("not an ISHNE Holter file: magic number {got:?}, expected \"ISHNE1.0\""),
        ));
    }
    if file_len < FIXED {
        return Err(invalid(
            path,
            format!("truncated ISHNE header: {file_len} bytes, the fixed header alone has {FIXED}"),
        ));
    }
    let var_size = i32_at(b, 10);
    let n_samples = i32_at(b, 14);
    let var_offset = i32_at(b, 18);
    let ecg_offset = i32_at(b, 22);
    let n_leads = i16_at(b, 156);
    let fs = i16_at(b, 272);
    if !(1..=12).contains(&n_leads) {
        return Err(invalid(
            path,
            format!("number of leads is {n_leads}, must be 1 to 12"),
        ));
    }
    if fs <= 0 {
        return Err(invalid(
            path,
            format!("sampling rate is {fs} Hz, must be positive"),
        ));
    }
    if var_size < 0 || var_offset != FIXED as i32 {
        return Err(invalid(
            path,
            format!(
                "variable-length block of {var_size} bytes at offset {var_offset}; the block \
                 starts at offset {FIXED} and cannot have a negative size"
            ),
        ));
    }
    if i64::from(ecg_offset) < i64::from(var_offset) + i64::from(var_size) {
        return Err(invalid(
            path,
            format!(
                "ECG block offset {ecg_offset} lies before the end of the variable-length block \
                 ({} bytes)",
                i64::from(var_offset) + i64::from(var_size)
            ),
        ));
    }
    if n_samples <= 0 {
        return Err(invalid(
            path,
            format!("samples per lead is {n_samples}, must be positive"),
        ));
    }
    let ecg_offset = ecg_offset as usize;
    let nl = n_leads as usize;
    let n = n_samples as usize;
    let need = n
        .checked_mul(nl * 2)
        .and_then(|x| x.checked_add(ecg_offset))
        .ok_or_else(|| invalid(path, "announced size overflows"))?;
    if file_len < need {
        return Err(invalid(
            path,
            format!(
                "truncated ISHNE file: the header announces {n} samples of {nl} leads ({need} \
                 bytes in all), the file has {file_len}"
            ),
        ));
    }
    let mut warnings = Vec::new();
    if file_len > need {
        warnings.push(format!(
            "{}: {} bytes after the {n} announced samples per lead are ignored",
            path.display(),
            file_len - need
        ));
    }
    let stored_crc = u16::from_le_bytes([b[8], b[9]]);
    let crc = crc_ccitt(&b[10..ecg_offset]);
    if crc != stored_crc {
        warnings.push(format!(
            "{}: header CRC is {stored_crc:#06x}, the header bytes give {crc:#06x}",
            path.display()
        ));
    }

    let mut names: Vec<String> = Vec::with_capacity(nl);
    let mut gains: Vec<f64> = Vec::with_capacity(nl);
    for k in 0..nl {
        let code = i16_at(b, 158 + 2 * k);
        let res = i16_at(b, 206 + 2 * k);
        if res <= 0 {
            return Err(invalid(
                path,
                format!(
                    "lead {}: amplitude resolution is {res} nV, must be positive",
                    k + 1
                ),
            ));
        }
        let mut name = lead_name(code)
            .map(str::to_string)
            .unwrap_or_else(|| format!("lead{}", k + 1));
        if names.contains(&name) {
            name = format!("{name}_{}", k + 1);
        }
        names.push(name);
        gains.push(f64::from(res) * 1e-6);
    }
    let mut meta = Metadata {
        sex: match i16_at(b, 128) {
            1 => Some(Sex::Male),
            2 => Some(Sex::Female),
            _ => None,
        },
        ..Metadata::default()
    };
    if let (Some(birth), Some(rec)) = (date_at(b, 132), date_at(b, 138)) {
        meta.age = crate::meta::age_years(birth, rec);
    }
    let id = text_at(b, 108, 20);
    if !id.is_empty() {
        meta.subject = Some(id);
    }
    let recorder = text_at(b, 232, 40);
    if !recorder.is_empty() {
        meta.comments.push(format!("recorder: {recorder}"));
    }
    Ok(IshneHead {
        fs: f64::from(fs),
        names,
        gains,
        n,
        ecg_offset,
        meta,
        warnings,
    })
}

/// The (sampling rate in Hz, samples per lead, leads) an ISHNE file's
/// header announces, read without its samples.
pub fn read_ishne_header(path: &Path) -> Result<Extent, FormatError> {
    let (head, _) = open_head(path)?;
    Ok((head.fs, head.n, head.gains.len()))
}

/// Open `path` and parse its header, reading no further than its ECG block;
/// the file is returned positioned there.
fn open_head(path: &Path) -> Result<(IshneHead, std::fs::File), FormatError> {
    // The header runs to the ECG block (its CRC covers the bytes before it).
    let (b, file, file_len) = crate::deferred::read_head(path, FIXED as u64, |b| {
        if b.len() >= FIXED {
            u64::try_from(i32_at(b, 22)).unwrap_or(0)
        } else {
            0
        }
    })?;
    let head = parse_head(&b, file_len, path)?;
    Ok((head, file))
}

/// [`read_ishne`], except that a file for which `defer(fs, n_samples,
/// n_leads)` is true keeps its 16-bit samples digital
/// ([`crate::deferred`]), read in blocks without holding the file's bytes;
/// [`crate::deferred::DigitalLead::physical`] then gives exactly the values
/// of [`read_ishne`], and the record carries the same name, rate, leads,
/// metadata and warnings.
pub fn read_ishne_deferred(
    path: &Path,
    defer: &dyn Fn(f64, usize, usize) -> bool,
) -> Result<Loaded, FormatError> {
    use std::io::Read;
    let (head, mut file) = open_head(path)?;
    let nl = head.gains.len();
    if !defer(head.fs, head.n, nl) {
        drop(file);
        return read_ishne(path).map(Loaded::Physical);
    }
    let mut digital: Vec<Vec<i16>> = (0..nl).map(|_| Vec::with_capacity(head.n)).collect();
    // Frames in blocks of about 1 MiB.
    let frame = 2 * nl;
    let mut block = vec![0u8; (1 << 20) / frame * frame];
    let mut left = head.n;
    while left > 0 {
        let m = left.min(block.len() / frame);
        let bytes = &mut block[..m * frame];
        file.read_exact(bytes).map_err(|source| FormatError::Io {
            path: path.to_path_buf(),
            source,
        })?;
        for f in bytes.chunks_exact(frame) {
            for (k, lead) in digital.iter_mut().enumerate() {
                lead.push(i16::from_le_bytes([f[2 * k], f[2 * k + 1]]));
            }
        }
        left -= m;
    }
    let leads = digital
        .into_iter()
        .zip(&head.gains)
        .map(|(d, &gain)| DigitalLead::with_store(Store::I16(d), Scale::Linear { gain }, None))
        .collect();
    let record = head.into_record(path, vec![Vec::new(); nl]);
    Ok(Loaded::Deferred(DeferredRecord { record, leads }))
}
