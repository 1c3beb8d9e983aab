//! WFDB annotation files (MIT format): read and write, plus the standard code table.
//!
//! The reference annotations of the open databases (QTDB `.atr`, `.q1c`..., the
//! LUDB per-lead files) and the annotation files tendline writes use this format.
//!
//! # Format (MIT annotation format, as the WFDB library defines it)
//!
//! The file is a sequence of 16-bit little-endian words. The top 6 bits of a
//! word are a code `A`, the low 10 bits a value `I`:
//!
//! * `A` in `1..=58` (and `0` with `I != 0`): an annotation of type `A`, `I`
//!   samples after the previous one;
//! * `A = 59` (SKIP): the next two words hold a signed 32-bit interval, high
//!   16 bits first, added to the time of the next annotation (long intervals);
//! * `A = 60` (NUM), `61` (SUB), `62` (CHN): the low byte of `I` sets `num`
//!   (signed), `subtyp` (signed) or `chan` (unsigned) of the annotation before;
//! * `A = 63` (AUX): `I` is a byte count; that many auxiliary bytes follow,
//!   padded to an even count;
//! * the word `0` ends the file.
//!
//! `num` and `chan` are sticky: an annotation without NUM/CHN keeps the values
//! of the one before (0 at the start); `subtype` and `aux` reset for every
//! annotation. The writer emits NUM/CHN only when the value changes, so a file
//! read back gives identical fields.
//!
//! # Conventions and choices
//!
//! * Samples are absolute 0-based indices held in `i64` (files may exceed 2^31).
//! * Words after the end-of-file word are ignored (as the WFDB C library does);
//!   a file that ends without that word is accepted, at a word boundary.
//! * Annotations of code 0 (`NOTANN`) are not returned, but their interval and
//!   any NUM/CHN they carry count, like `wfdb.rdann` does.
//! * A NUM/SUB/CHN/AUX word before the first annotation is an error, as is a
//!   file cut inside a SKIP interval or AUX text, or with an odd byte count.
//!   An AUX of length 0 reads as no aux.
//! * Codes 50..=58 have no standard meaning; they are read and written as
//!   annotation types without a symbol.
//! * Definition annotations describe the file, not the signal, and are not
//!   returned as annotations: `"` notes at sample 0 whose aux text starts with
//!   `## ` (e.g. `## time resolution: 360`), and the notes at sample 0 between
//!   `## annotation type definitions` and `## end of definitions` (custom
//!   labels such as `15 c calibration pulse`). [`parse_annotation_file`]
//!   returns them as [`AnnotationFile::time_resolution_hz`] and
//!   [`AnnotationFile::custom_labels`], and [`encode_annotation_file`] writes
//!   them back. (`wfdb.rdann` drops every note at sample 0; a plain comment at
//!   sample 0 outside a definitions block is kept here.)
//! * An empty `aux` is not stored: `Some(vec![])` is written as no aux and reads
//!   back as `None`.
//! * The writer requires annotations sorted by sample (non-decreasing, all
//!   `>= 0`) and returns an error otherwise; it does not reorder.

use std::io::Write;
use std::path::Path;

use crate::error::FormatError;

/// Largest code of an ordinary annotation type (WFDB `ACMAX`).
pub const ACMAX: u8 = 49;
/// Pseudo-annotation code: long interval follows (WFDB `SKIP`).
pub const SKIP: u8 = 59;
/// Pseudo-annotation code: `num` field (WFDB `NUM`).
pub const NUM: u8 = 60;
/// Pseudo-annotation code: `subtyp` field (WFDB `SUB`).
pub const SUB: u8 = 61;
/// Pseudo-annotation code: `chan` field (WFDB `CHN`).
pub const CHN: u8 = 62;
/// Pseudo-annotation code: auxiliary bytes follow (WFDB `AUX`).
pub const AUX: u8 = 63;
/// Code of a comment annotation `"` (WFDB `NOTE`).
pub const NOTE: u8 = 22;

/// One WFDB annotation, with every field the format can carry.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Annotation {
    /// Sample index (absolute, 0-based); i64 because files may hold very large times.
    pub sample: i64,
    /// WFDB annotation code (anntyp), e.g. 1 = `N`, 39 = `(`, 40 = `)`.
    pub code: u8,
    /// Annotation subtype (WFDB `subtyp`); LUDB and QTDB use 0 mostly.
    pub subtype: i8,
    /// Signal channel (WFDB `chan`); sticky in the file.
    pub chan: u8,
    /// Annotator number (WFDB `num`); sticky in the file.
    pub num: i8,
    /// Auxiliary bytes (often text), if any.
    pub aux: Option<Vec<u8>>,
}

/// Symbol of each code 0..=49; `""` where the standard table defines none.
///
/// Source: the `ann_label_table` of the `wfdb` Python package (4.3), which follows
/// the WFDB library's `ecgcodes.h`; checked code by code in
/// `tests/python/test_formats_annotations.py`.
const SYMBOLS: [&str; ACMAX as usize + 1] = [
    " ", "N", "L", "R", "a", "V", "F", "J", "A", "S", // 0-9
    "E", "j", "/", "Q", "~", "", "|", "", "s", "T", // 10-19
    "*", "D", "\"", "=", "p", "B", "^", "t", "+", "u", // 20-29
    "?", "!", "[", "]", "e", "n", "@", "x", "f", "(", // 30-39
    ")", "r", "", "", "", "", "", "", "", "", // 40-49
];

/// Codes that denote a beat (QRS complex): the WFDB `isqrs` set.
///
/// Source: the `is_qrs` table of the `wfdb` Python package (4.3), which mirrors the
/// WFDB library's `isqrs` map; checked in `tests/python/test_formats_annotations.py`.
const BEAT_CODES: [u8; 20] = [
    1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 25, 30, 31, 34, 35, 38, 41,
];

/// Symbol of a WFDB annotation code, e.g. `symbol_of(1) == "N"`.
///
/// Returns `""` for codes without a standard symbol (15, 17, 42..). Code 0
/// (`NOTANN`) is `" "` as in the reference table.
pub fn symbol_of(code: u8) -> &'static str {
    SYMBOLS.get(code as usize).copied().unwrap_or("")
}

/// Code of a standard annotation symbol, e.g. `code_of("(") == Some(39)`.
///
/// `None` for symbols outside the standard table (and for `" "`, `NOTANN`,
/// which is not a real annotation).
pub fn code_of(symbol: &str) -> Option<u8> {
    // Every standard symbol is one byte (checked when the table is built), so
    // a symbol is one table lookup instead of a search of string compares,
    // which showed in profiles of writing annotation files.
    match symbol.as_bytes() {
        [b] => match CODE_OF_BYTE[*b as usize] {
            0 => None,
            c => Some(c),
        },
        _ => None,
    }
}

/// Code of each one-byte symbol (0 = none): the first code 1..=49 whose
/// symbol is that byte, as a search of [`SYMBOLS`] in code order finds it.
const CODE_OF_BYTE: [u8; 256] = {
    let mut t = [0u8; 256];
    let mut c = SYMBOLS.len() - 1;
    // Backwards, so that the lowest code with a given symbol is written last.
    while c >= 1 {
        let s = SYMBOLS[c].as_bytes();
        assert!(s.len() <= 1, "annotation symbols are single bytes");
        if s.len() == 1 {
            t[s[0] as usize] = c as u8;
        }
        c -= 1;
    }
    t
};

/// [`code_of`] by searching the table in code order (test oracle).
#[cfg(test)]
fn code_of_search(symbol: &str) -> Option<u8> {
    if symbol.is_empty() {
        return None;
    }
    SYMBOLS
        .iter()
        .enumerate()
        .skip(1)
        .find(|(_, s)| **s == symbol)
        .map(|(c, _)| c as u8)
}

/// True when `code` marks a beat (the WFDB `isqrs` set: N L R a V F J A S E j / Q B ? ! e n f r).
pub fn is_beat_code(code: u8) -> bool {
    BEAT_CODES.contains(&code)
}

impl Annotation {
    /// An annotation with `symbol` at `sample` (chan 0, num 0, subtype 0, no aux).
    ///
    /// A symbol outside the standard table becomes a comment annotation (`"`)
    /// carrying the symbol as its aux text, the way the `wfdb` Python package
    /// stores unknown symbols (`sym_to_aux`), so no input is lost.
    pub fn new(sample: i64, symbol: &str) -> Annotation {
        match code_of(symbol) {
            Some(code) => Annotation {
                sample,
                code,
                subtype: 0,
                chan: 0,
                num: 0,
                aux: None,
            },
            None => Annotation {
                sample,
                code: NOTE,
                subtype: 0,
                chan: 0,
                num: 0,
                aux: Some(symbol.as_bytes().to_vec()),
            },
        }
    }

    /// The standard symbol of this annotation's code (`""` if it has none).
    pub fn symbol(&self) -> &'static str {
        symbol_of(self.code)
    }

    /// True when this annotation marks a beat (WFDB `isqrs`).
    pub fn is_beat(&self) -> bool {
        is_beat_code(self.code)
    }

    /// The aux bytes as text, each byte taken as one Latin-1 character (as
    /// `wfdb.rdann` decodes them); `None` without aux.
    pub fn aux_text(&self) -> Option<String> {
        self.aux
            .as_ref()
            .map(|b| b.iter().map(|&c| c as char).collect())
    }
}

/// A code given a symbol of its own by the file (WFDB custom annotation type).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CustomLabel {
    pub code: u8,
    pub symbol: String,
    pub description: String,
}

/// An annotation file with its definitions (time resolution, custom labels).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct AnnotationFile {
    /// The annotations, in file order, definition annotations removed.
    pub annotations: Vec<Annotation>,
    /// Sampling rate declared by a `## time resolution: <hz>` definition, if any.
    pub time_resolution_hz: Option<f64>,
    /// Codes redefined between `## annotation type definitions` and
    /// `## end of definitions`, e.g. `15 c calibration pulse`.
    pub custom_labels: Vec<CustomLabel>,
}

impl AnnotationFile {
    /// Symbol of `code` in this file: its custom label if defined, else the standard one.
    pub fn symbol_of(&self, code: u8) -> &str {
        self.custom_labels
            .iter()
            .find(|c| c.code == code)
            .map_or(symbol_of(code), |c| c.symbol.as_str())
    }
}

/// Read an MIT-format annotation file.
pub fn read_annotations(path: &Path) -> Result<Vec<Annotation>, FormatError> {
    let bytes = std::fs::read(path).map_err(|source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    parse_annotations(&bytes, path)
}

/// Parse the bytes of an MIT-format annotation file; `path` only names the
/// source in error messages.
pub fn parse_annotations(bytes: &[u8], path: &Path) -> Result<Vec<Annotation>, FormatError> {
    parse_annotation_file(bytes, path).map(|f| f.annotations)
}

/// Parse an MIT-format annotation file, keeping the declared time resolution.
pub fn parse_annotation_file(bytes: &[u8], path: &Path) -> Result<AnnotationFile, FormatError> {
    parse_inner(bytes).map_err(|message| FormatError::Invalid {
        path: path.to_path_buf(),
        message,
    })
}

fn word_at(bytes: &[u8], pos: usize) -> Option<u16> {
    let b = bytes.get(pos..pos + 2)?;
    Some(u16::from_le_bytes([b[0], b[1]]))
}

fn parse_inner(bytes: &[u8]) -> Result<AnnotationFile, String> {
    let mut out = Vec::new();
    let mut time_resolution_hz = None;
    let mut custom_labels = Vec::new();
    let mut in_definitions = false;
    let mut pos = 0usize;
    let mut t: i64 = 0;
    let mut chan: u8 = 0;
    let mut num: i8 = 0;
    let mut index = 0usize; // annotation count, for messages
    loop {
        if pos == bytes.len() {
            break; // no end-of-file word: accepted at a word boundary
        }
        let Some(w) = word_at(bytes, pos) else {
            return Err(format!(
                "truncated annotation file: odd trailing byte at offset {pos}"
            ));
        };
        if w == 0 {
            break;
        }
        let a = (w >> 10) as u8;
        let i = (w & 0x3ff) as i64;
        match a {
            SKIP => {
                let b = bytes.get(pos + 2..pos + 6).ok_or_else(|| {
                    format!(
                        "truncated annotation file: SKIP at offset {pos} lacks its 4-byte interval"
                    )
                })?;
                // PDP-11 long: high 16-bit word first, each word little-endian.
                let n = i32::from_le_bytes([b[2], b[3], b[0], b[1]]) as i64;
                t = t
                    .checked_add(n)
                    .ok_or_else(|| format!("sample number overflows after SKIP at offset {pos}"))?;
                pos += 6;
                continue;
            }
            NUM | SUB | CHN | AUX => {
                return Err(format!(
                    "pseudo-annotation code {a} at offset {pos} is not preceded by an annotation"
                ));
            }
            _ => {}
        }
        t = t
            .checked_add(i)
            .ok_or_else(|| format!("sample number overflows at offset {pos}"))?;
        pos += 2;
        let mut subtype: i8 = 0;
        let mut aux: Option<Vec<u8>> = None;
        // Fields of this annotation follow as pseudo-annotations.
        while let Some(w2) = word_at(bytes, pos) {
            let a2 = (w2 >> 10) as u8;
            let low = (w2 & 0xff) as u8;
            match a2 {
                NUM => num = low as i8,
                SUB => subtype = low as i8,
                CHN => chan = low,
                AUX => {
                    // The count is the low byte (aux texts hold at most 255 bytes).
                    let len = low as usize;
                    let padded = len + (len & 1);
                    let data = bytes.get(pos + 2..pos + 2 + padded).ok_or_else(|| {
                        format!(
                            "truncated annotation file: AUX of {len} bytes at offset {pos} (annotation {index}) runs past the end"
                        )
                    })?;
                    // An empty AUX carries nothing (and is never written).
                    aux = (len > 0).then(|| data[..len].to_vec());
                    pos += padded;
                }
                _ => break,
            }
            pos += 2;
        }
        index += 1;
        if a == 0 {
            continue; // NOTANN: not an annotation, but its interval and fields count
        }
        if t == 0 && a == NOTE {
            if let Some(text) = aux.as_deref() {
                let s: String = text.iter().map(|&c| c as char).collect();
                if let Some(v) = s.strip_prefix("## time resolution: ") {
                    time_resolution_hz = v.trim_end_matches('\0').trim().parse::<f64>().ok();
                    continue;
                } else if s.starts_with("## annotation type definitions") {
                    in_definitions = true;
                    continue;
                } else if s.starts_with("## end of definitions") {
                    in_definitions = false;
                    continue;
                } else if s.starts_with("## ") {
                    continue;
                } else if in_definitions {
                    custom_labels.push(parse_custom_label(&s, index)?);
                    continue;
                }
            }
        }
        out.push(Annotation {
            sample: t,
            code: a,
            subtype,
            chan,
            num,
            aux,
        });
    }
    Ok(AnnotationFile {
        annotations: out,
        time_resolution_hz,
        custom_labels,
    })
}

fn parse_custom_label(s: &str, index: usize) -> Result<CustomLabel, String> {
    let s = s.trim_end_matches(['\0', '\n', '\r']);
    let mut parts = s.splitn(3, ' ');
    let code = parts.next().and_then(|c| c.parse::<u8>().ok());
    let symbol = parts.next().filter(|x| !x.is_empty());
    match (code, symbol) {
        (Some(code), Some(symbol)) if code <= ACMAX => Ok(CustomLabel {
            code,
            symbol: symbol.to_string(),
            description: parts.next().unwrap_or("").to_string(),
        }),
        _ => Err(format!(
            "annotation {index}: bad annotation type definition {s:?} (expected `<code 0-49> <symbol> <description>`)"
        )),
    }
}

/// Encode annotations in the MIT format (see the module docs for the rules).
pub fn encode_annotations(anns: &[Annotation]) -> Result<Vec<u8>, String> {
    let mut enc = AnnotationEncoder::new();
    for a in anns {
        enc.push(a)?;
    }
    Ok(enc.finish())
}

/// An MIT-format annotation file written one annotation at a time, so that
/// a long record's annotations need never be held all at once: the bytes are
/// exactly those of [`encode_annotations`] over the same annotations (which
/// is built on it). Annotations must come in sample order.
#[derive(Debug, Clone, Default)]
pub struct AnnotationEncoder {
    out: Vec<u8>,
    prev_t: i64,
    chan: u8,
    num: i8,
    count: usize,
}

impl AnnotationEncoder {
    /// An empty file without definitions.
    pub fn new() -> Self {
        Self::default()
    }

    /// Appends one annotation; errors name it by its position in the file
    /// (negative sample, out of order, a code that is no annotation type,
    /// aux text over 255 bytes), and nothing is written for it.
    pub fn push(&mut self, a: &Annotation) -> Result<(), String> {
        let k = self.count;
        if a.sample < 0 {
            return Err(format!(
                "annotation {k}: negative sample {} cannot be written",
                a.sample
            ));
        }
        if a.sample < self.prev_t {
            return Err(format!(
                "annotations not sorted by sample: annotation {k} at sample {} follows sample {}",
                a.sample, self.prev_t
            ));
        }
        if a.code == 0 || a.code >= SKIP {
            return Err(format!(
                "annotation {k}: code {} is not an annotation type (allowed 1 to 58)",
                a.code
            ));
        }
        let aux = a.aux.as_ref().filter(|x| !x.is_empty());
        if let Some(aux) = aux.filter(|x| x.len() > 255) {
            return Err(format!(
                "annotation {k}: aux of {} bytes exceeds the 255-byte limit",
                aux.len()
            ));
        }
        let out = &mut self.out;
        let push = |out: &mut Vec<u8>, code: u8, value: u16| {
            out.extend_from_slice(&(((code as u16) << 10) | (value & 0x3ff)).to_le_bytes());
        };
        let mut d = a.sample - self.prev_t;
        while d > 0x3ff {
            let n = d.min(i32::MAX as i64);
            let nb = (n as i32).to_le_bytes();
            push(out, SKIP, 0);
            out.extend_from_slice(&[nb[2], nb[3], nb[0], nb[1]]);
            d -= n;
        }
        push(out, a.code, d as u16);
        if a.subtype != 0 {
            push(out, SUB, a.subtype as u8 as u16);
        }
        if a.chan != self.chan {
            push(out, CHN, a.chan as u16);
            self.chan = a.chan;
        }
        if a.num != self.num {
            push(out, NUM, a.num as u8 as u16);
            self.num = a.num;
        }
        if let Some(aux) = aux {
            push(out, AUX, aux.len() as u16);
            out.extend_from_slice(aux);
            if aux.len() % 2 == 1 {
                out.push(0);
            }
        }
        self.prev_t = a.sample;
        self.count += 1;
        Ok(())
    }

    /// Annotations written so far.
    pub fn len(&self) -> usize {
        self.count
    }

    /// Whether no annotation was written.
    pub fn is_empty(&self) -> bool {
        self.count == 0
    }

    /// The file's bytes, with its end-of-file marker.
    pub fn finish(mut self) -> Vec<u8> {
        self.out.extend_from_slice(&[0, 0]);
        self.out
    }
}

fn push_note_at_zero(out: &mut Vec<u8>, text: &str) -> Result<(), String> {
    let b = text.as_bytes();
    if b.len() > 255 {
        return Err(format!("definition {text:?} exceeds 255 bytes"));
    }
    out.extend_from_slice(&((NOTE as u16) << 10).to_le_bytes());
    out.extend_from_slice(&(((AUX as u16) << 10) | b.len() as u16).to_le_bytes());
    out.extend_from_slice(b);
    if b.len() % 2 == 1 {
        out.push(0);
    }
    Ok(())
}

/// Encode an annotation file with its definitions, laid out as the `wfdb`
/// Python package writes them: definition notes at sample 0, then `SKIP -1`
/// and a `NOTANN` of interval 1, so that real annotations at sample 0 are not
/// taken for definitions.
pub fn encode_annotation_file(file: &AnnotationFile) -> Result<Vec<u8>, String> {
    let anns = &file.annotations;
    let mut out = Vec::with_capacity(anns.len() * 2 + 2);
    let has_defs = file.time_resolution_hz.is_some() || !file.custom_labels.is_empty();
    if let Some(fs) = file.time_resolution_hz {
        if !(fs.is_finite() && fs > 0.0) {
            return Err(format!("time resolution {fs} Hz is not a positive number"));
        }
        push_note_at_zero(&mut out, &format!("## time resolution: {fs}"))?;
    }
    if !file.custom_labels.is_empty() {
        push_note_at_zero(&mut out, "## annotation type definitions")?;
        for c in &file.custom_labels {
            if c.code > ACMAX || c.symbol.is_empty() || c.symbol.contains(' ') {
                return Err(format!(
                    "custom label {} {:?}: code must be 0-49 and the symbol non-empty without spaces",
                    c.code, c.symbol
                ));
            }
            push_note_at_zero(
                &mut out,
                &format!("{} {} {}", c.code, c.symbol, c.description),
            )?;
        }
        push_note_at_zero(&mut out, "## end of definitions")?;
    }
    if has_defs {
        out.extend_from_slice(&[0, (SKIP << 2), 0xff, 0xff, 0xff, 0xff, 1, 0]);
    }
    let mut enc = AnnotationEncoder {
        out,
        ..AnnotationEncoder::default()
    };
    for a in anns {
        enc.push(a)?;
    }
    Ok(enc.finish())
}

/// One wave of one beat in the open databases' boundary convention: `(` at the
/// onset, the peak mark (`symbol`), `)` at the end. Samples are absolute; a wave
/// without a peak is not written.
#[derive(Debug, Clone, PartialEq)]
pub struct WaveMarks {
    pub onset: Option<i64>,
    pub peak: Option<i64>,
    pub end: Option<i64>,
    /// Peak symbol: `p`, `t`, or the beat's code for the QRS (`N`, `V`, `Q`...).
    pub symbol: String,
    /// Aux text of the peak mark (e.g. why a beat is unclassifiable).
    pub peak_aux: Option<String>,
    /// Aux text of the end mark (e.g. the T-end method).
    pub end_aux: Option<String>,
}

/// The annotations of `waves` on channel `chan`, sorted by sample (waves of
/// neighbouring beats overlap at fast rates, and the format needs time order).
/// Negative samples are dropped.
pub fn boundary_annotations<'a>(
    waves: impl IntoIterator<Item = &'a WaveMarks>,
    chan: u8,
) -> Vec<Annotation> {
    let mk = |sample: i64, symbol: &str, aux: Option<&String>| {
        let mut a = Annotation::new(sample, symbol);
        a.chan = chan;
        if let Some(t) = aux.filter(|t| !t.is_empty()) {
            match &mut a.aux {
                // An unknown symbol already carries itself as aux text.
                Some(v) => {
                    v.push(b' ');
                    v.extend_from_slice(t.as_bytes());
                }
                None => a.aux = Some(t.as_bytes().to_vec()),
            }
        }
        a
    };
    let mut out = Vec::new();
    for w in waves {
        let Some(peak) = w.peak.filter(|&s| s >= 0) else {
            continue;
        };
        if let Some(on) = w.onset.filter(|&s| s >= 0) {
            out.push(mk(on, "(", None));
        }
        out.push(mk(peak, &w.symbol, w.peak_aux.as_ref()));
        if let Some(end) = w.end.filter(|&s| s >= 0) {
            out.push(mk(end, ")", w.end_aux.as_ref()));
        }
    }
    out.sort_by_key(|a| a.sample);
    out
}

/// Write annotations to an MIT-format file, atomically (temporary file in the
/// same directory, then rename). Annotations must be sorted by sample.
pub fn write_annotations(path: &Path, anns: &[Annotation]) -> Result<(), FormatError> {
    let bytes = encode_annotations(anns).map_err(|message| FormatError::Invalid {
        path: path.to_path_buf(),
        message,
    })?;
    write_atomic(path, &bytes)
}

/// Read an annotation file with its definitions (time resolution, custom labels).
pub fn read_annotation_file(path: &Path) -> Result<AnnotationFile, FormatError> {
    let bytes = std::fs::read(path).map_err(|source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    parse_annotation_file(&bytes, path)
}

/// Write an annotation file with its definitions, atomically.
pub fn write_annotation_file(path: &Path, file: &AnnotationFile) -> Result<(), FormatError> {
    let bytes = encode_annotation_file(file).map_err(|message| FormatError::Invalid {
        path: path.to_path_buf(),
        message,
    })?;
    write_atomic(path, &bytes)
}

/// Write `bytes` to `path` through a temporary file in the same directory and
/// a rename, so readers never see a half-written file.
pub(crate) fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), FormatError> {
    use std::sync::atomic::{AtomicU64, Ordering};
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let io = |source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    };
    let file_name = path.file_name().ok_or_else(|| FormatError::Invalid {
        path: path.to_path_buf(),
        message: "output path has no file name".to_string(),
    })?;
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => std::path::PathBuf::from("."),
    };
    let tmp = dir.join(format!(
        ".{}.tmp-{}-{}",
        file_name.to_string_lossy(),
        std::process::id(),
        COUNTER.fetch_add(1, Ordering::Relaxed)
    ));
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(io(e));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    // The lookup table against searching the symbol table (oracle): every
    // one-byte string, every standard symbol, and longer or empty strings.
    #[test]
    fn code_lookup_equals_table_search() {
        for b in 0u8..=127 {
            let s = (b as char).to_string();
            assert_eq!(code_of(&s), code_of_search(&s), "{b}");
        }
        for s in SYMBOLS.iter().chain(&["", "NN", "(N", "é", "\"\""]) {
            assert_eq!(code_of(s), code_of_search(s), "{s:?}");
        }
        assert_eq!(code_of("("), Some(39));
        assert_eq!(code_of(" "), None);
    }

    #[test]
    fn symbols_round_trip_through_codes() {
        for code in 1..=ACMAX {
            let s = symbol_of(code);
            if !s.is_empty() {
                assert_eq!(code_of(s), Some(code), "symbol {s:?}");
            }
        }
        assert_eq!(code_of("N"), Some(1));
        assert_eq!(code_of("("), Some(39));
        assert_eq!(code_of("zz"), None);
    }

    #[test]
    fn new_with_unknown_symbol_becomes_note() {
        let a = Annotation::new(5, "Zz");
        assert_eq!(a.code, NOTE);
        assert_eq!(a.aux.as_deref(), Some(&b"Zz"[..]));
    }

    #[test]
    fn boundary_convention_orders_waves_and_skips_peakless_ones() {
        // QTDB's convention (common practice): `(` onset, peak symbol, `)` end.
        let w = |on, peak, end, sym: &str, end_aux: Option<&str>| WaveMarks {
            onset: on,
            peak,
            end,
            symbol: sym.into(),
            peak_aux: None,
            end_aux: end_aux.map(String::from),
        };
        let waves = [
            w(Some(100), Some(110), Some(120), "N", None),
            w(Some(180), Some(230), Some(260), "t", Some("tangent")),
            w(Some(60), Some(70), Some(80), "p", None),
            w(Some(300), None, Some(320), "p", None),
        ];
        let a = boundary_annotations(&waves, 3);
        let got: Vec<(i64, &str)> = a.iter().map(|a| (a.sample, a.symbol())).collect();
        assert_eq!(
            got,
            [
                (60, "("),
                (70, "p"),
                (80, ")"),
                (100, "("),
                (110, "N"),
                (120, ")"),
                (180, "("),
                (230, "t"),
                (260, ")")
            ]
        );
        assert!(a.iter().all(|a| a.chan == 3));
        assert_eq!(a[8].aux_text().as_deref(), Some("tangent"));
        assert!(encode_annotations(&a).is_ok());
    }
}
