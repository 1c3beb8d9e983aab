//! Parser for WFDB header (`.hea`) text, independent of any file so that it can be
//! fuzzed and tested on strings.
//!
//! Layout (WFDB header(5) specification, from memory): a record line
//! `name[/nseg] nsig [fs[/counter_freq[(base_counter)]] [length [base_time [base_date]]]]`,
//! then either `nsig` signal lines
//! `file format[xspf][:skew][+offset] [gain[(baseline)][/units] [res [zero [init [checksum [block [description]]]]]]]`
//! or `nseg` segment lines `segment_name length`. Lines starting with `#` are
//! comments; blank lines are skipped; CR before LF is ignored.

use std::path::Path;

use crate::FormatError;

/// Default sampling frequency when the record line omits it (WFDB specification).
pub const DEFAULT_FS_HZ: f64 = 250.0;
/// Default ADC gain (units per physical unit) when missing or zero (WFDB specification).
pub const DEFAULT_ADC_GAIN: f64 = 200.0;

/// The parsed content of a header file.
#[derive(Debug, Clone, PartialEq)]
pub struct Header {
    /// Record name from the record line (without `/nseg`).
    pub name: String,
    /// Number of segments for a multi-segment record, `None` for a single-segment one.
    pub n_segments: Option<usize>,
    /// Number of signals.
    pub n_sig: usize,
    /// Frame frequency in Hz (samples per second per signal with one sample per frame).
    pub fs: f64,
    /// Counter frequency in Hz, if given (`250/360`).
    pub counter_freq: Option<f64>,
    /// Base counter value, if given (`250/360(12)`).
    pub base_counter: Option<f64>,
    /// Number of frames, if given. `None`: infer from the signal file size.
    pub n_frames: Option<u64>,
    /// Base time as written (`HH:MM:SS[.sss]`).
    pub base_time: Option<String>,
    /// Base date as written (`DD/MM/YYYY`).
    pub base_date: Option<String>,
    /// Signal specifications (empty for a multi-segment master header).
    pub signals: Vec<SignalSpec>,
    /// Segments of a multi-segment record.
    pub segments: Vec<SegmentSpec>,
    /// Comment lines, without the leading `#` and surrounding whitespace.
    pub comments: Vec<String>,
}

/// One signal line.
#[derive(Debug, Clone, PartialEq)]
pub struct SignalSpec {
    /// Signal file name, relative to the header's folder (`~` for a null signal).
    pub file_name: String,
    /// Storage format code (8, 16, 212, ...).
    pub format: u32,
    /// Samples per frame (the `x` suffix), at least 1.
    pub samples_per_frame: u32,
    /// Skew in frames (the `:` suffix).
    pub skew: u32,
    /// Byte offset of the first sample in the signal file (the `+` suffix).
    pub byte_offset: u64,
    /// ADC gain in digital units per physical unit (200 if missing or 0).
    pub adc_gain: f64,
    /// Digital value of physical zero (defaults to `adc_zero`).
    pub baseline: i64,
    /// Physical units (`mV` if missing).
    pub units: String,
    /// ADC resolution in bits (0 if missing).
    pub adc_res: u32,
    /// ADC zero (0 if missing).
    pub adc_zero: i64,
    /// Value of the first sample, if given.
    pub init_value: Option<i64>,
    /// 16-bit checksum of all samples of the signal, if given.
    pub checksum: Option<i64>,
    /// Block size (only meaningful for special files; kept, not used).
    pub block_size: u64,
    /// Description (the lead name), exactly as written, trailing whitespace removed.
    pub description: String,
    /// 1-based line number of this signal line in the header text.
    pub line: usize,
}

/// One segment line of a multi-segment header.
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentSpec {
    /// Segment record name (`~` for a null segment).
    pub name: String,
    /// Segment length in frames.
    pub n_frames: u64,
    /// 1-based line number.
    pub line: usize,
}

impl Header {
    /// True when the header describes a multi-segment record.
    pub fn is_multi_segment(&self) -> bool {
        self.n_segments.is_some()
    }
}

fn bad(path: &Path, line: usize, msg: impl std::fmt::Display) -> FormatError {
    FormatError::Invalid {
        path: path.to_path_buf(),
        message: format!("line {line}: {msg}"),
    }
}

fn parse_num<T: std::str::FromStr>(
    path: &Path,
    line: usize,
    field: &str,
    s: &str,
) -> Result<T, FormatError> {
    s.parse::<T>().map_err(|_| {
        bad(
            path,
            line,
            format!("field `{field}`: `{s}` is not a valid number"),
        )
    })
}

fn parse_f64(path: &Path, line: usize, field: &str, s: &str) -> Result<f64, FormatError> {
    let v: f64 = parse_num(path, line, field, s)?;
    if !v.is_finite() {
        return Err(bad(
            path,
            line,
            format!("field `{field}`: `{s}` is not finite"),
        ));
    }
    Ok(v)
}

/// Split `s` at the first occurrence of any of `seps`; returns (head, rest starting at the separator).
fn split_at_any<'a>(s: &'a str, seps: &[char]) -> (&'a str, &'a str) {
    match s.find(|c| seps.contains(&c)) {
        Some(i) => (&s[..i], &s[i..]),
        None => (s, ""),
    }
}

/// Parse header text. `path` is only used to name the file in errors.
///
/// The parser never panics on any input; every problem is an
/// [`FormatError::Invalid`] naming the line and field.
pub fn parse_header(text: &str, path: &Path) -> Result<Header, FormatError> {
    let mut comments = Vec::new();
    let mut content: Vec<(usize, &str)> = Vec::new();
    for (i, raw) in text.split('\n').enumerate() {
        let line_no = i + 1;
        let line = raw.trim_end_matches('\r');
        let t = line.trim_start();
        if let Some(c) = t.strip_prefix('#') {
            comments.push(c.trim().to_string());
        } else if !t.trim().is_empty() {
            content.push((line_no, line.trim()));
        }
    }
    let Some(&(rec_line, rec)) = content.first() else {
        return Err(FormatError::Invalid {
            path: path.to_path_buf(),
            message: "empty header: no record line".into(),
        });
    };
    let mut toks = rec.split_whitespace();
    let name_tok = toks.next().unwrap_or_default();
    let (name, n_segments) = match name_tok.split_once('/') {
        Some((n, s)) => {
            let nseg: usize = parse_num(path, rec_line, "number of segments", s)?;
            if nseg == 0 {
                return Err(bad(path, rec_line, "number of segments is 0"));
            }
            (n, Some(nseg))
        }
        None => (name_tok, None),
    };
    if name.is_empty() {
        return Err(bad(path, rec_line, "empty record name"));
    }
    let n_sig: usize = match toks.next() {
        Some(s) => parse_num(path, rec_line, "number of signals", s)?,
        None => {
            return Err(bad(
                path,
                rec_line,
                "record line lacks the number of signals",
            ))
        }
    };
    let (mut fs, mut counter_freq, mut base_counter) = (DEFAULT_FS_HZ, None, None);
    if let Some(tok) = toks.next() {
        let (f, rest) = split_at_any(tok, &['/']);
        fs = parse_f64(path, rec_line, "sampling frequency", f)?;
        if fs <= 0.0 {
            return Err(bad(
                path,
                rec_line,
                format!("sampling frequency {fs} is not positive"),
            ));
        }
        if let Some(rest) = rest.strip_prefix('/') {
            let (cf, rest2) = split_at_any(rest, &['(']);
            counter_freq = Some(parse_f64(path, rec_line, "counter frequency", cf)?);
            if let Some(bc) = rest2.strip_prefix('(') {
                let bc = bc
                    .strip_suffix(')')
                    .ok_or_else(|| bad(path, rec_line, "base counter lacks the closing `)`"))?;
                base_counter = Some(parse_f64(path, rec_line, "base counter", bc)?);
            } else if !rest2.is_empty() {
                return Err(bad(
                    path,
                    rec_line,
                    format!("unexpected `{rest2}` after the counter frequency"),
                ));
            }
        }
    }
    let n_frames = match toks.next() {
        Some(s) => Some(parse_num::<u64>(path, rec_line, "number of samples", s)?),
        None => None,
    };
    let base_time = toks.next().map(str::to_string);
    if let Some(t) = &base_time {
        if !t
            .chars()
            .all(|c| c.is_ascii_digit() || c == ':' || c == '.')
            || !t.contains(':') && !t.contains('.')
        {
            return Err(bad(
                path,
                rec_line,
                format!("base time `{t}` is not HH:MM:SS"),
            ));
        }
    }
    let base_date = toks.next().map(str::to_string);
    if let Some(d) = &base_date {
        if !d.chars().all(|c| c.is_ascii_digit() || c == '/') {
            return Err(bad(
                path,
                rec_line,
                format!("base date `{d}` is not DD/MM/YYYY"),
            ));
        }
    }
    if let Some(extra) = toks.next() {
        return Err(bad(
            path,
            rec_line,
            format!("unexpected field `{extra}` on the record line"),
        ));
    }

    let mut header = Header {
        name: name.to_string(),
        n_segments,
        n_sig,
        fs,
        counter_freq,
        base_counter,
        n_frames,
        base_time,
        base_date,
        signals: Vec::new(),
        segments: Vec::new(),
        comments,
    };
    let rest = &content[1..];
    if let Some(nseg) = n_segments {
        if rest.len() < nseg {
            return Err(bad(
                path,
                rec_line,
                format!(
                    "record line announces {nseg} segments, the header has {} segment lines",
                    rest.len()
                ),
            ));
        }
        for &(ln, l) in rest.iter().take(nseg) {
            let mut t = l.split_whitespace();
            let sname = t.next().unwrap_or_default().to_string();
            let len = match t.next() {
                Some(s) => parse_num::<u64>(path, ln, "segment length", s)?,
                None => return Err(bad(path, ln, "segment line lacks the length")),
            };
            if let Some(x) = t.next() {
                return Err(bad(
                    path,
                    ln,
                    format!("unexpected field `{x}` on a segment line"),
                ));
            }
            header.segments.push(SegmentSpec {
                name: sname,
                n_frames: len,
                line: ln,
            });
        }
        if let Some(&(ln, _)) = rest.get(nseg) {
            return Err(bad(path, ln, "more lines than the announced segments"));
        }
        return Ok(header);
    }
    if rest.len() < n_sig {
        return Err(bad(
            path,
            rec_line,
            format!(
                "record line announces {n_sig} signals, the header has {} signal lines",
                rest.len()
            ),
        ));
    }
    for &(ln, l) in rest.iter().take(n_sig) {
        header.signals.push(parse_signal_line(path, ln, l)?);
    }
    if let Some(&(ln, _)) = rest.get(n_sig) {
        return Err(bad(
            path,
            ln,
            format!("more lines than the {n_sig} announced signals"),
        ));
    }
    Ok(header)
}

/// Split off the next whitespace-delimited token; returns (token, remainder).
fn next_token(s: &str) -> Option<(&str, &str)> {
    let s = s.trim_start();
    if s.is_empty() {
        return None;
    }
    let end = s.find(char::is_whitespace).unwrap_or(s.len());
    Some((&s[..end], &s[end..]))
}

fn parse_signal_line(path: &Path, ln: usize, l: &str) -> Result<SignalSpec, FormatError> {
    let (file_name, rest) = next_token(l).ok_or_else(|| bad(path, ln, "empty signal line"))?;
    let (fmt_tok, mut rest) = next_token(rest).ok_or_else(|| {
        bad(
            path,
            ln,
            format!("signal line for `{file_name}` lacks the format"),
        )
    })?;
    // format[xspf][:skew][+offset]
    let (f, mut mods) = split_at_any(fmt_tok, &['x', ':', '+']);
    let format: u32 = parse_num(path, ln, "format", f)?;
    let (mut spf, mut skew, mut offset) = (1u32, 0u32, 0u64);
    while !mods.is_empty() {
        let c = mods.as_bytes()[0] as char;
        let (v, r) = split_at_any(&mods[1..], &['x', ':', '+']);
        match c {
            'x' => spf = parse_num(path, ln, "samples per frame", v)?,
            ':' => skew = parse_num(path, ln, "skew", v)?,
            '+' => offset = parse_num(path, ln, "byte offset", v)?,
            _ => unreachable!("split_at_any stops only at x, : or +"),
        }
        mods = r;
    }
    if spf == 0 {
        return Err(bad(path, ln, "samples per frame is 0"));
    }
    let mut spec = SignalSpec {
        file_name: file_name.to_string(),
        format,
        samples_per_frame: spf,
        skew,
        byte_offset: offset,
        adc_gain: DEFAULT_ADC_GAIN,
        baseline: 0,
        units: "mV".to_string(),
        adc_res: 0,
        adc_zero: 0,
        init_value: None,
        checksum: None,
        block_size: 0,
        description: String::new(),
        line: ln,
    };
    let mut baseline = None;
    // gain[(baseline)][/units]
    if let Some((g, r)) = next_token(rest) {
        rest = r;
        let (gv, mut gm) = split_at_any(g, &['(', '/']);
        spec.adc_gain = parse_f64(path, ln, "ADC gain", gv)?;
        if spec.adc_gain == 0.0 {
            spec.adc_gain = DEFAULT_ADC_GAIN;
        }
        if let Some(b) = gm.strip_prefix('(') {
            let close = b
                .find(')')
                .ok_or_else(|| bad(path, ln, "baseline lacks the closing `)`"))?;
            baseline = Some(parse_num::<i64>(path, ln, "baseline", &b[..close])?);
            gm = &b[close + 1..];
        }
        if let Some(u) = gm.strip_prefix('/') {
            spec.units = u.to_string();
        } else if !gm.is_empty() {
            return Err(bad(
                path,
                ln,
                format!("field `ADC gain`: unexpected `{gm}`"),
            ));
        }
        if let Some((t, r)) = next_token(rest) {
            rest = r;
            spec.adc_res = parse_num(path, ln, "ADC resolution", t)?;
            if let Some((t, r)) = next_token(rest) {
                rest = r;
                spec.adc_zero = parse_num(path, ln, "ADC zero", t)?;
                if let Some((t, r)) = next_token(rest) {
                    rest = r;
                    spec.init_value = Some(parse_num(path, ln, "initial value", t)?);
                    if let Some((t, r)) = next_token(rest) {
                        rest = r;
                        spec.checksum = Some(parse_num(path, ln, "checksum", t)?);
                        if let Some((t, r)) = next_token(rest) {
                            rest = r;
                            spec.block_size = parse_num(path, ln, "block size", t)?;
                            spec.description = rest.trim().to_string();
                        }
                    }
                }
            }
        }
    }
    spec.baseline = baseline.unwrap_or(spec.adc_zero);
    Ok(spec)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(s: &str) -> Result<Header, FormatError> {
        parse_header(s, Path::new("t.hea"))
    }

    #[test]
    fn record_line_fields() {
        // Record line of QTDB sel100 (PhysioNet QT Database): counter frequency 360.
        let h = p("sel100 2 250/360 225000\r\nsel100.dat 212 200(0) 11 1024 945 -13873 0 MLII\r\nsel100.dat 212 200(0) 11 1024 955 14507 0 V5\r\n# 69 M 1085 1629 x1\r\n").unwrap();
        assert_eq!(h.name, "sel100");
        assert_eq!(h.fs, 250.0);
        assert_eq!(h.counter_freq, Some(360.0));
        assert_eq!(h.n_frames, Some(225000));
        assert_eq!(h.signals.len(), 2);
        let s = &h.signals[0];
        assert_eq!(
            (s.format, s.adc_gain, s.baseline, s.adc_zero),
            (212, 200.0, 0, 1024)
        );
        assert_eq!(
            (s.adc_res, s.init_value, s.checksum),
            (11, Some(945), Some(-13873))
        );
        assert_eq!(s.units, "mV");
        assert_eq!(s.description, "MLII");
        assert_eq!(h.comments, vec!["69 M 1085 1629 x1"]);
    }

    #[test]
    fn modifiers_and_defaults() {
        let h = p("r 2 62.4725/999.56(12) 10 10:44:18.529 04/05/2704\nr.dat 16x2:3+24 0/uV 12\nr.dat 16\n").unwrap();
        assert_eq!(h.counter_freq, Some(999.56));
        assert_eq!(h.base_counter, Some(12.0));
        assert_eq!(h.base_time.as_deref(), Some("10:44:18.529"));
        assert_eq!(h.base_date.as_deref(), Some("04/05/2704"));
        let s = &h.signals[0];
        assert_eq!((s.samples_per_frame, s.skew, s.byte_offset), (2, 3, 24));
        // Gain 0 means the default 200 (WFDB specification).
        assert_eq!(s.adc_gain, 200.0);
        assert_eq!(s.units, "uV");
        assert_eq!(s.init_value, None);
        let s1 = &h.signals[1];
        assert_eq!(
            (s1.adc_gain, s1.units.as_str(), s1.description.as_str()),
            (200.0, "mV", "")
        );
    }

    #[test]
    fn multi_segment() {
        let h =
            p("041s/2 7 125 2000 8:26:04 26/10/1994\r\n041s01 1000\r\n041s02 1000\r\n").unwrap();
        assert_eq!(h.n_segments, Some(2));
        assert_eq!(h.segments[1].name, "041s02");
        assert_eq!(h.segments[1].n_frames, 1000);
    }

    #[test]
    fn errors_name_line_and_field() {
        let e = p("r 1 250 10\nr.dat 16 abc\n").unwrap_err().to_string();
        assert!(
            e.contains("line 2") && e.contains("ADC gain") && e.contains("abc"),
            "{e}"
        );
        let e = p("").unwrap_err().to_string();
        assert!(e.contains("empty header"), "{e}");
        let e = p("r 3 250 10\nr.dat 16\n").unwrap_err().to_string();
        assert!(e.contains("announces 3 signals"), "{e}");
        let e = p("r x 250\n").unwrap_err().to_string();
        assert!(e.contains("number of signals"), "{e}");
        let e = p("r 1 250 10\nr.dat 16x0\n").unwrap_err().to_string();
        assert!(e.contains("samples per frame"), "{e}");
    }
}
