//! HL7 v3 annotated ECG (aECG) XML files: the format cardiac-safety core labs
//! use to exchange ECGs.
//!
//! Structure read (HL7 aECG, from memory of the HL7 v3 aECG standard; namespace
//! `urn:hl7-org:v3`; element names are
//! matched by local name so a file with another or no namespace is read too,
//! with a warning):
//!
//! ```text
//! AnnotatedECG
//!   effectiveTime/(low|center)@value            time of the ECG (for the age)
//!   componentOf/.../trialSubject
//!     id@extension                              subject id -> Metadata::subject
//!     subjectDemographicPerson
//!       administrativeGenderCode@code (M|F)     -> Metadata::sex
//!       birthTime@value                         with effectiveTime -> Metadata::age
//!   component/series (code RHYTHM)
//!     component/sequenceSet
//!       component/sequence  code TIME_ABSOLUTE | TIME_RELATIVE
//!         value xsi:type GLIST_TS | GLIST_PQ: increment@value, @unit (s or ms)
//!       component/sequence  code MDC_ECG_LEAD_<NAME> (one per lead)
//!         value xsi:type SLIST_PQ: origin@value@unit, scale@value@unit, digits
//! ```
//!
//! Samples: physical = origin + scale × digit, converted to millivolts when the
//! units are a voltage (`uV`, `mV`, `V`; see the crate docs). The scale's unit is
//! the lead's unit (a non-voltage unit is kept unconverted and then the origin must
//! share it); a zero origin may omit its unit. `fs` = 1 / increment,
//! rounded to the nearest integer when within 1e-9 of it (so that `0.002 s` gives
//! exactly 500 Hz).
//!
//! **Lead names**: the `MDC_ECG_LEAD_` prefix of the sequence code is removed, the
//! rest is kept exactly as in the file (`MDC_ECG_LEAD_II` → `II`,
//! `MDC_ECG_LEAD_aVR` → `aVR`); a code without that prefix is kept whole.
//!
//! Only the first rhythm series (`series` with code `RHYTHM`) and its first
//! `sequenceSet` are read; further series or sequence sets are named in
//! [`Record::warnings`]. Derived series (`series/derivation`, representative
//! beats) are not read; their presence is noted in the metadata comments.
//!
//! Errors name the file, the problem and the element (with its line): malformed
//! or truncated XML, a root other than `AnnotatedECG`, no rhythm series, no
//! time sequence or no `increment`, an unknown `xsi:type`, a missing or
//! non-finite `origin`/`scale`, a digit that is not an integer, leads of unequal
//! length, no leads. Document type declarations are refused by the XML parser
//! (no entity expansion).

use std::path::Path;

use roxmltree::{Document, Node};

use crate::{wfdb::to_mv_factor, FormatError, Lead, Metadata, Record, Sex};

/// Namespace of HL7 v3 documents.
pub const HL7_NS: &str = "urn:hl7-org:v3";
const XSI_NS: &str = "http://www.w3.org/2001/XMLSchema-instance";
/// Prefix of the MDC lead codes (codeSystem 2.16.840.1.113883.6.24) removed from lead names.
pub const LEAD_PREFIX: &str = "MDC_ECG_LEAD_";

fn bad(path: &Path, msg: String) -> FormatError {
    FormatError::Invalid {
        path: path.to_path_buf(),
        message: msg,
    }
}

/// Read an aECG XML file.
pub fn read_aecg(path: &Path) -> Result<Record, FormatError> {
    let text = crate::read_utf8(path)?;
    parse_aecg(&text, path)
}

/// Element children of `n` with local name `name`.
fn kids<'a, 'i>(n: Node<'a, 'i>, name: &'static str) -> impl Iterator<Item = Node<'a, 'i>> {
    n.children()
        .filter(move |c| c.is_element() && c.tag_name().name() == name)
}

fn kid<'a, 'i>(n: Node<'a, 'i>, name: &'static str) -> Option<Node<'a, 'i>> {
    kids(n, name).next()
}

/// `<name> (line L)` for error messages.
fn at(n: Node) -> String {
    let p = n.document().text_pos_at(n.range().start);
    format!("<{}> (line {})", n.tag_name().name(), p.row)
}

/// `code@code` of an element, if any.
fn code_of<'a>(n: Node<'a, '_>) -> Option<&'a str> {
    kid(n, "code").and_then(|c| c.attribute("code"))
}

fn xsi_type<'a>(n: Node<'a, '_>) -> Option<&'a str> {
    n.attribute((XSI_NS, "type"))
        .or_else(|| n.attribute("type"))
        // A prefixed type (`hl7:SLIST_PQ`) names the same type.
        .map(|t| t.rsplit(':').next().unwrap_or(t))
}

/// A finite `value` attribute of `n`, with its `unit` (empty when absent).
fn quantity<'a>(path: &Path, n: Node<'a, '_>, what: &str) -> Result<(f64, &'a str), FormatError> {
    let Some(v) = n.attribute("value") else {
        return Err(bad(path, format!("{what} {}: no `value` attribute", at(n))));
    };
    let x: f64 = v.trim().parse().map_err(|_| {
        bad(
            path,
            format!("{what} {}: value `{v}` is not a number", at(n)),
        )
    })?;
    if !x.is_finite() {
        return Err(bad(
            path,
            format!("{what} {}: value `{v}` is not finite", at(n)),
        ));
    }
    Ok((x, n.attribute("unit").unwrap_or("").trim()))
}

/// Parse aECG XML text (see the module documentation); `path` names the file in
/// errors and gives the record name (file stem).
pub fn parse_aecg(text: &str, path: &Path) -> Result<Record, FormatError> {
    if text.trim().is_empty() {
        return Err(bad(path, "empty file: no XML document".into()));
    }
    let doc = Document::parse(text)
        .map_err(|e| bad(path, format!("not well-formed XML (truncated file?): {e}")))?;
    let root = doc.root_element();
    if root.tag_name().name() != "AnnotatedECG" {
        return Err(bad(
            path,
            format!(
                "not an HL7 aECG document: root element is <{}>, expected <AnnotatedECG>",
                root.tag_name().name()
            ),
        ));
    }
    let mut warnings = Vec::new();
    if root.tag_name().namespace() != Some(HL7_NS) {
        warnings.push(format!(
            "root element <AnnotatedECG> is not in the HL7 v3 namespace {HL7_NS} (found {})",
            root.tag_name().namespace().unwrap_or("none")
        ));
    }
    let series: Vec<Node> = kids(root, "component")
        .flat_map(|c| kids(c, "series"))
        .collect();
    let rhythm: Vec<Node> = series
        .iter()
        .copied()
        .filter(|s| code_of(*s) == Some("RHYTHM"))
        .collect();
    let Some(&ser) = rhythm.first() else {
        let found: Vec<String> = series
            .iter()
            .map(|s| code_of(*s).unwrap_or("(no code)").to_string())
            .collect();
        return Err(bad(
            path,
            format!(
                "no rhythm series: no AnnotatedECG/component/series with code RHYTHM (series codes found: {})",
                if found.is_empty() { "none".to_string() } else { found.join(", ") }
            ),
        ));
    };
    if rhythm.len() > 1 {
        warnings.push(format!(
            "{} rhythm series in the file; only the first {} was read",
            rhythm.len(),
            at(ser)
        ));
    }
    let mut comments = Vec::new();
    let n_derived = series
        .iter()
        .map(|s| kids(*s, "derivation").count())
        .sum::<usize>();
    if n_derived > 0 {
        comments.push(format!(
            "aECG: {n_derived} derived series (series/derivation, e.g. representative beats) not read"
        ));
    }
    let sets: Vec<Node> = kids(ser, "component")
        .flat_map(|c| kids(c, "sequenceSet"))
        .collect();
    let Some(&set) = sets.first() else {
        return Err(bad(
            path,
            format!("rhythm series {}: no component/sequenceSet", at(ser)),
        ));
    };
    if sets.len() > 1 {
        warnings.push(format!(
            "the rhythm series has {} sequence sets; only the first {} was read",
            sets.len(),
            at(set)
        ));
    }

    let mut fs = None;
    let mut leads = Vec::new();
    for seq in kids(set, "component").flat_map(|c| kids(c, "sequence")) {
        let Some(code) = code_of(seq) else {
            return Err(bad(path, format!("sequence {}: no code", at(seq))));
        };
        let Some(value) = kid(seq, "value") else {
            return Err(bad(
                path,
                format!("sequence {} ({code}): no <value>", at(seq)),
            ));
        };
        let ty = xsi_type(value).unwrap_or("");
        if code.starts_with("TIME_") {
            if fs.is_some() {
                warnings.push(format!("second time sequence {} ({code}) ignored", at(seq)));
                continue;
            }
            fs = Some(time_fs(path, value, code, ty)?);
        } else {
            leads.push(lead_of(path, value, code, ty)?);
        }
    }
    let Some(fs) = fs else {
        return Err(bad(
            path,
            format!(
                "sequence set {}: no time sequence (code TIME_ABSOLUTE or TIME_RELATIVE), so no sampling rate",
                at(set)
            ),
        ));
    };
    if leads.is_empty() {
        return Err(bad(
            path,
            format!("sequence set {}: no lead sequences", at(set)),
        ));
    }
    let n = leads[0].samples.len();
    if n == 0 {
        return Err(bad(
            path,
            format!("lead {}: no samples in <digits>", leads[0].name),
        ));
    }
    if let Some(l) = leads.iter().find(|l| l.samples.len() != n) {
        return Err(bad(
            path,
            format!(
                "leads of unequal length: {} has {n} samples, {} has {}",
                leads[0].name,
                l.name,
                l.samples.len()
            ),
        ));
    }
    let mut meta = metadata(root, &mut warnings);
    meta.comments = comments;
    Ok(Record::from_file(path, fs, leads, meta, warnings))
}

/// Sampling rate from the time sequence's `value` (GLIST_TS or GLIST_PQ).
fn time_fs(path: &Path, value: Node, code: &str, ty: &str) -> Result<f64, FormatError> {
    if !matches!(ty, "GLIST_TS" | "GLIST_PQ") {
        let msg = format!(
            "time sequence ({code}) {}: xsi:type `{ty}` not supported (expected GLIST_TS or GLIST_PQ, a regularly sampled time axis)",
            at(value)
        );
        return Err(if ty.starts_with("SLIST") {
            FormatError::Unsupported {
                path: path.to_path_buf(),
                message: msg,
            }
        } else {
            bad(path, msg)
        });
    }
    let Some(inc) = kid(value, "increment") else {
        return Err(bad(
            path,
            format!(
                "time sequence ({code}) {}: no <increment>, so no sampling rate",
                at(value)
            ),
        ));
    };
    let (v, unit) = quantity(path, inc, &format!("time sequence ({code})"))?;
    let secs = match unit {
        "s" | "" => v,
        "ms" => v / 1000.0,
        u => {
            return Err(bad(
                path,
                format!(
                    "time sequence ({code}) {}: unit `{u}` not supported (expected s or ms)",
                    at(inc)
                ),
            ))
        }
    };
    if secs <= 0.0 {
        return Err(bad(
            path,
            format!(
                "time sequence ({code}) {}: increment must be positive, got {v} {unit}",
                at(inc)
            ),
        ));
    }
    let fs = 1.0 / secs;
    if !fs.is_finite() {
        return Err(bad(
            path,
            format!(
                "time sequence ({code}) {}: increment {v} {unit} gives no finite sampling rate",
                at(inc)
            ),
        ));
    }
    // Increments like 0.002 s are not exact in binary; 1/0.002 may miss 500 by an ulp.
    let r = fs.round();
    Ok(if r > 0.0 && ((fs - r) / r).abs() < 1e-9 {
        r
    } else {
        fs
    })
}

/// One lead from an SLIST_PQ `value`: origin + scale × digits.
fn lead_of(path: &Path, value: Node, code: &str, ty: &str) -> Result<Lead, FormatError> {
    if ty != "SLIST_PQ" {
        return Err(bad(
            path,
            format!(
                "sequence {code} {}: xsi:type `{ty}` not supported (expected SLIST_PQ)",
                at(value)
            ),
        ));
    }
    let what = format!("lead {code}");
    let get = |name: &'static str| {
        kid(value, name).ok_or_else(|| bad(path, format!("{what} {}: no <{name}>", at(value))))
    };
    let (origin, ou) = quantity(path, get("origin")?, &what)?;
    let scale_node = get("scale")?;
    let (scale, su) = quantity(path, scale_node, &what)?;
    if scale == 0.0 {
        return Err(bad(
            path,
            format!("{what} {}: scale is zero", at(scale_node)),
        ));
    }
    let digits = get("digits")?;
    // The scale's unit is the lead's unit (to mV when a voltage). The origin is
    // brought to the same unit; a zero origin may omit its unit.
    if su.is_empty() {
        return Err(bad(
            path,
            format!("{what} {}: no unit (expected uV, mV or V)", at(scale_node)),
        ));
    }
    let origin_unit = if ou.is_empty() && origin == 0.0 {
        su
    } else {
        ou
    };
    let (fo, fsc, units) = match (to_mv_factor(origin_unit), to_mv_factor(su)) {
        (Some(a), Some(b)) => (a, b, "mV".to_string()),
        _ if origin_unit == su => (1.0, 1.0, su.to_string()),
        _ => {
            return Err(bad(
                path,
                format!(
                    "{what} {}: origin unit `{ou}` and scale unit `{su}` differ and are not both voltages",
                    at(value)
                ),
            ))
        }
    };
    let (o, s) = (origin * fo, scale * fsc);
    let txt = digits.text().unwrap_or("");
    if digits.children().any(|c| c.is_element()) {
        return Err(bad(
            path,
            format!("{what} {}: element inside <digits>", at(digits)),
        ));
    }
    let mut samples = Vec::with_capacity(txt.len() / 4);
    for (k, tok) in txt.split_ascii_whitespace().enumerate() {
        let d: i64 = tok.parse().map_err(|_| {
            bad(
                path,
                format!(
                    "{what} {}: digit {} `{}` is not an integer",
                    at(digits),
                    k + 1,
                    tok.chars().take(32).collect::<String>()
                ),
            )
        })?;
        let x = o + s * d as f64;
        if !x.is_finite() {
            return Err(bad(
                path,
                format!(
                    "{what} {}: digit {} ({d}) gives a value out of range with this origin and scale",
                    at(digits),
                    k + 1
                ),
            ));
        }
        samples.push(x);
    }
    let name = code.strip_prefix(LEAD_PREFIX).unwrap_or(code);
    if name.is_empty() {
        return Err(bad(path, format!("{what} {}: empty lead name", at(value))));
    }
    Ok(Lead {
        name: name.to_string(),
        units,
        samples,
    })
}

/// HL7 TS date `YYYYMMDD...` → (year, month, day).
fn ts_date(v: &str) -> Option<(i32, u32, u32)> {
    let v = v.trim();
    if v.len() < 8 || !v.as_bytes()[..8].iter().all(u8::is_ascii_digit) {
        return None;
    }
    let (y, m, d) = (
        v[0..4].parse().ok()?,
        v[4..6].parse().ok()?,
        v[6..8].parse().ok()?,
    );
    ((1..=12).contains(&m) && (1..=31).contains(&d)).then_some((y, m, d))
}

use crate::meta::age_years;

fn metadata(root: Node, warnings: &mut Vec<String>) -> Metadata {
    let mut m = Metadata::default();
    let Some(subj) = root
        .descendants()
        .find(|n| n.is_element() && n.tag_name().name() == "trialSubject")
    else {
        return m;
    };
    m.subject = kid(subj, "id")
        .and_then(|i| i.attribute("extension").or_else(|| i.attribute("root")))
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty());
    let person = subj
        .descendants()
        .find(|n| n.is_element() && n.tag_name().name() == "subjectDemographicPerson");
    if let Some(p) = person {
        m.sex = kid(p, "administrativeGenderCode")
            .and_then(|g| g.attribute("code"))
            .and_then(|c| match c.trim() {
                "M" => Some(Sex::Male),
                "F" => Some(Sex::Female),
                _ => None,
            });
        let birth = kid(p, "birthTime").and_then(|b| b.attribute("value"));
        let ecg = kid(root, "effectiveTime").and_then(|t| {
            t.attribute("value")
                .or_else(|| kid(t, "low").and_then(|l| l.attribute("value")))
                .or_else(|| kid(t, "center").and_then(|l| l.attribute("value")))
        });
        if let (Some(b), Some(e)) = (birth, ecg) {
            match (ts_date(b), ts_date(e)) {
                (Some(b), Some(e)) => m.age = age_years(b, e),
                _ => warnings.push(format!(
                    "age not derived: birthTime `{b}` or effectiveTime `{e}` is not a YYYYMMDD date"
                )),
            }
        }
    }
    m
}

/// MDC code of a lead name: `MDC_ECG_LEAD_` and the name upper-cased (`aVR` →
/// `MDC_ECG_LEAD_AVR`, the form of the MDC nomenclature, ISO/IEEE 11073-10101,
/// from memory);
/// a name that already carries the prefix is kept.
pub fn lead_code(name: &str) -> String {
    if name.starts_with(LEAD_PREFIX) {
        name.to_string()
    } else {
        format!("{LEAD_PREFIX}{}", name.to_ascii_uppercase())
    }
}

fn xml_escape(v: &str) -> String {
    v.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// The HL7 aECG document of `rec`, as [`parse_aecg`] reads it: one rhythm series
/// with one sequence set holding a regular relative time axis (`TIME_RELATIVE`,
/// `GLIST_PQ`, increment 1/fs in s) and one `SLIST_PQ` sequence per lead (origin
/// 0 µV, scale `step_uv` µV, samples rounded to whole steps); the lead codes come
/// from [`lead_code`]; sex and subject id from `rec.meta` when known (the age is
/// not written: the standard derives it from a birth date this crate does not
/// keep). Errors (as text): a lead not in mV, a non-finite sample, a step that is
/// not positive, a sample beyond ±2^53 steps.
pub fn encode_aecg(rec: &Record, step_uv: f64) -> Result<String, String> {
    use std::fmt::Write;
    if !(step_uv.is_finite() && step_uv > 0.0) {
        return Err(format!("step_uv: must be positive, got {step_uv}"));
    }
    if !(rec.fs.is_finite() && rec.fs > 0.0) {
        return Err(format!("fs: must be positive, got {}", rec.fs));
    }
    let mut x = String::with_capacity(64 + rec.leads.len() * (rec.n_samples() * 6 + 300));
    x.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    let _ = writeln!(
        x,
        "<AnnotatedECG xmlns=\"{HL7_NS}\" xmlns:xsi=\"{XSI_NS}\">\n  <id extension=\"{}\"/>\n  <code code=\"93000\" codeSystem=\"2.16.840.1.113883.6.12\" codeSystemName=\"CPT-4\"/>",
        xml_escape(&rec.name)
    );
    if rec.meta.subject.is_some() || rec.meta.sex.is_some() {
        x.push_str("  <componentOf><timepointEvent><componentOf><subjectAssignment><subject><trialSubject>\n");
        if let Some(sub) = &rec.meta.subject {
            let _ = writeln!(x, "    <id extension=\"{}\"/>", xml_escape(sub));
        }
        if let Some(sex) = rec.meta.sex {
            let code = match sex {
                Sex::Male => "M",
                Sex::Female => "F",
            };
            let _ = writeln!(
                x,
                "    <subjectDemographicPerson><administrativeGenderCode code=\"{code}\" codeSystem=\"2.16.840.1.113883.5.1\"/></subjectDemographicPerson>"
            );
        }
        x.push_str("  </trialSubject></subject></subjectAssignment></componentOf></timepointEvent></componentOf>\n");
    }
    let _ = writeln!(
        x,
        "  <component><series>\n    <code code=\"RHYTHM\" codeSystem=\"2.16.840.1.113883.5.4\"/>\n    <component><sequenceSet>\n      <component><sequence><code code=\"TIME_RELATIVE\" codeSystem=\"2.16.840.1.113883.5.4\"/><value xsi:type=\"GLIST_PQ\"><head value=\"0\" unit=\"s\"/><increment value=\"{}\" unit=\"s\"/></value></sequence></component>",
        1.0 / rec.fs
    );
    // Steps beyond 2^53 are no longer whole numbers in an f64.
    let limit = 9_007_199_254_740_992.0;
    for l in &rec.leads {
        if l.units != "mV" {
            return Err(format!(
                "lead {}: units `{}`, only mV can be written",
                l.name, l.units
            ));
        }
        let _ = write!(
            x,
            "      <component><sequence><code code=\"{}\" codeSystem=\"2.16.840.1.113883.6.24\"/><value xsi:type=\"SLIST_PQ\"><origin value=\"0\" unit=\"uV\"/><scale value=\"{step_uv}\" unit=\"uV\"/><digits>",
            xml_escape(&lead_code(&l.name))
        );
        for (k, &v) in l.samples.iter().enumerate() {
            let d = (v * 1000.0 / step_uv).round();
            if !d.is_finite() || d.abs() > limit {
                return Err(format!(
                    "lead {}: sample {k} ({v} mV) cannot be written in steps of {step_uv} uV",
                    l.name
                ));
            }
            if k > 0 {
                x.push(' ');
            }
            let _ = write!(x, "{}", d as i64);
        }
        x.push_str("</digits></value></sequence></component>\n");
    }
    x.push_str("    </sequenceSet></component>\n  </series></component>\n</AnnotatedECG>\n");
    Ok(x)
}

/// Write [`encode_aecg`] of `rec` to `path` atomically (temporary file, rename).
pub fn write_aecg(path: &Path, rec: &Record, step_uv: f64) -> Result<(), FormatError> {
    let text = encode_aecg(rec, step_uv).map_err(|message| FormatError::Invalid {
        path: path.to_path_buf(),
        message,
    })?;
    crate::annotation::write_atomic(path, text.as_bytes())
}

#[cfg(test)]
mod tests {
    use super::*;

    const P: &str = "/tmp/x/rec1.xml";

    /// A small aECG document following the HL7 aECG structure (from memory of the
    /// HL7 v3 aECG standard): `time` is the time sequence's `value` body, `leads`
    /// (code, type, origin uV, scale uV, digits) the lead sequences.
    fn doc(time: &str, leads: &[(&str, &str, &str, &str, &str)], extra: &str) -> String {
        let mut s = String::from(
            r#"<?xml version="1.0" encoding="UTF-8"?>
<AnnotatedECG xmlns="urn:hl7-org:v3" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">
  <id root="1.2.3"/>
  <effectiveTime><low value="20210615093000.000"/><high value="20210615093010.000"/></effectiveTime>
  <componentOf><timepointEvent><componentOf><subjectAssignment><subject><trialSubject>
    <id extension="SUBJ-007"/>
    <subjectDemographicPerson>
      <administrativeGenderCode code="F" codeSystem="2.16.840.1.113883.5.1"/>
      <birthTime value="19800616"/>
    </subjectDemographicPerson>
  </trialSubject></subject></subjectAssignment></componentOf></timepointEvent></componentOf>
  <component><series>
    <code code="RHYTHM" codeSystem="2.16.840.1.113883.5.4"/>
    <component><sequenceSet>
"#,
        );
        s.push_str(&format!(
            "<component><sequence><code code=\"TIME_ABSOLUTE\" codeSystem=\"2.16.840.1.113883.5.4\"/>{time}</sequence></component>\n"
        ));
        for (code, ty, o, sc, d) in leads {
            s.push_str(&format!(
                "<component><sequence><code code=\"{code}\" codeSystem=\"2.16.840.1.113883.6.24\"/>\
                 <value xsi:type=\"{ty}\"><origin value=\"{o}\" unit=\"uV\"/><scale value=\"{sc}\" unit=\"uV\"/>\
                 <digits>{d}</digits></value></sequence></component>\n"
            ));
        }
        s.push_str("</sequenceSet></component>\n");
        s.push_str(extra);
        s.push_str("</series></component>\n</AnnotatedECG>\n");
        s
    }

    const TIME: &str = r#"<value xsi:type="GLIST_TS"><head value="20210615093000.000"/><increment value="0.002" unit="s"/></value>"#;

    fn two_leads() -> Vec<(
        &'static str,
        &'static str,
        &'static str,
        &'static str,
        &'static str,
    )> {
        vec![
            ("MDC_ECG_LEAD_II", "SLIST_PQ", "0", "5", "0 200 -100 7"),
            ("MDC_ECG_LEAD_aVR", "SLIST_PQ", "10", "2.5", "1 2 3 4"),
        ]
    }

    fn err(text: &str) -> String {
        let e = parse_aecg(text, Path::new(P)).unwrap_err().to_string();
        assert!(e.contains(P), "error does not name the file: {e}");
        e
    }

    #[test]
    fn valid_document() {
        let r = parse_aecg(&doc(TIME, &two_leads(), ""), Path::new(P)).unwrap();
        // fs = 1 / increment (HL7 aECG GLIST increment, from memory): 1 / 0.002 s = 500 Hz.
        assert_eq!(r.fs, 500.0);
        assert_eq!(r.name, "rec1");
        let names: Vec<&str> = r.leads.iter().map(|l| l.name.as_str()).collect();
        assert_eq!(names, ["II", "aVR"]);
        // physical = origin + scale * digit (HL7 SLIST_PQ, from memory), uV -> mV / 1000.
        assert_eq!(r.leads[0].samples, [0.0, 1.0, -0.5, 0.035]);
        let want: Vec<f64> = [1.0, 2.0, 3.0, 4.0]
            .iter()
            .map(|d| (10.0 + 2.5 * d) / 1000.0)
            .collect();
        for (a, b) in r.leads[1].samples.iter().zip(&want) {
            assert!((a - b).abs() < 1e-15);
        }
        assert!(r.leads.iter().all(|l| l.units == "mV"));
        assert_eq!(r.meta.sex, Some(Sex::Female));
        assert_eq!(r.meta.subject.as_deref(), Some("SUBJ-007"));
        // Born 1980-06-16, ECG on 2021-06-15: one day before the 41st birthday -> 40.
        assert_eq!(r.meta.age, Some(40.0));
        assert!(r.warnings.is_empty(), "{:?}", r.warnings);
        assert_eq!(r.files, [Path::new(P)]);
    }

    #[test]
    fn increment_in_ms_and_glist_pq() {
        let t = r#"<value xsi:type="GLIST_PQ"><head value="0" unit="ms"/><increment value="4" unit="ms"/></value>"#;
        let r = parse_aecg(&doc(t, &two_leads(), ""), Path::new(P)).unwrap();
        assert_eq!(r.fs, 250.0);
    }

    #[test]
    fn extra_sets_and_series_warn_derived_noted() {
        let extra = r#"<derivation><derivedSeries><code code="REPRESENTATIVE_BEAT"/></derivedSeries></derivation>
<component><sequenceSet><component><sequence><code code="TIME_ABSOLUTE"/></sequence></component></sequenceSet></component>"#;
        let r = parse_aecg(&doc(TIME, &two_leads(), extra), Path::new(P)).unwrap();
        assert_eq!(r.leads.len(), 2);
        assert!(
            r.warnings.iter().any(|w| w.contains("2 sequence sets")),
            "{:?}",
            r.warnings
        );
        assert!(r.meta.comments.iter().any(|c| c.contains("derived")));
        // A second rhythm series: read the first, warn.
        let d = doc(TIME, &two_leads(), "");
        let second = d.replace(
            "</AnnotatedECG>",
            "<component><series><code code=\"RHYTHM\"/></series></component></AnnotatedECG>",
        );
        let r = parse_aecg(&second, Path::new(P)).unwrap();
        assert!(r.warnings.iter().any(|w| w.contains("2 rhythm series")));
    }

    #[test]
    fn unequal_lengths() {
        let mut l = two_leads();
        l[1].4 = "1 2 3";
        let e = err(&doc(TIME, &l, ""));
        assert!(
            e.contains("unequal length") && e.contains("aVR has 3"),
            "{e}"
        );
    }

    #[test]
    fn missing_increment() {
        let t = r#"<value xsi:type="GLIST_TS"><head value="20210615093000"/></value>"#;
        let e = err(&doc(t, &two_leads(), ""));
        assert!(
            e.contains("no <increment>") && e.contains("TIME_ABSOLUTE"),
            "{e}"
        );
    }

    #[test]
    fn bad_increment_unit_and_value() {
        let t = r#"<value xsi:type="GLIST_TS"><increment value="2" unit="min"/></value>"#;
        assert!(err(&doc(t, &two_leads(), "")).contains("unit `min`"));
        let t = r#"<value xsi:type="GLIST_TS"><increment value="0" unit="s"/></value>"#;
        assert!(err(&doc(t, &two_leads(), "")).contains("must be positive"));
        let t = r#"<value xsi:type="GLIST_TS"><increment value="NaN" unit="s"/></value>"#;
        assert!(err(&doc(t, &two_leads(), "")).contains("not finite"));
        // Subnormal increment: 1 / 1e-320 overflows (found by tests/aecg_mutation.rs).
        let t = r#"<value xsi:type="GLIST_TS"><increment value="1e-320" unit="s"/></value>"#;
        assert!(err(&doc(t, &two_leads(), "")).contains("no finite sampling rate"));
    }

    #[test]
    fn units() {
        // A zero origin without a unit takes the scale's: still converted to mV.
        let d = doc(TIME, &two_leads(), "").replacen(
            r#"<origin value="0" unit="uV"/>"#,
            r#"<origin value="0"/>"#,
            1,
        );
        let r = parse_aecg(&d, Path::new(P)).unwrap();
        assert_eq!(r.leads[0].units, "mV");
        assert_eq!(r.leads[0].samples[1], 1.0);
        // Origin in mV, scale in uV: both to mV (crate docs: uV / 1000, mV x 1).
        let d = doc(TIME, &two_leads(), "").replacen(
            r#"<origin value="0" unit="uV"/>"#,
            r#"<origin value="2" unit="mV"/>"#,
            1,
        );
        let r = parse_aecg(&d, Path::new(P)).unwrap();
        assert_eq!(r.leads[0].samples[1], 3.0);
        // Scale without a unit; non-voltage units that differ.
        let d = doc(TIME, &two_leads(), "").replacen(
            r#"<scale value="5" unit="uV"/>"#,
            r#"<scale value="5"/>"#,
            1,
        );
        assert!(err(&d).contains("<scale> (line"));
        let d = doc(TIME, &two_leads(), "").replace(r#"unit="uV""#, r#"unit="mmHg""#);
        let r = parse_aecg(&d, Path::new(P)).unwrap();
        assert_eq!(r.leads[0].units, "mmHg");
        let d = doc(TIME, &two_leads(), "").replacen(r#"unit="uV""#, r#"unit="mmHg""#, 1);
        assert!(err(&d).contains("differ and are not both voltages"));
    }

    #[test]
    fn overflowing_values() {
        let mut l = two_leads();
        l[0].3 = "1e308";
        l[0].4 = "0 9000000000000000000 1 1";
        let e = err(&doc(TIME, &l, ""));
        assert!(
            e.contains("digit 2 (9000000000000000000) gives a value out of range"),
            "{e}"
        );
    }

    #[test]
    fn non_integer_and_nan_digits() {
        let mut l = two_leads();
        l[0].4 = "0 1.5 2 3";
        let e = err(&doc(TIME, &l, ""));
        assert!(
            e.contains("lead MDC_ECG_LEAD_II") && e.contains("digit 2 `1.5` is not an integer"),
            "{e}"
        );
        assert!(e.contains("<digits> (line"), "{e}");
        l[0].4 = "0 NaN 2 3";
        assert!(err(&doc(TIME, &l, "")).contains("`NaN` is not an integer"));
    }

    #[test]
    fn no_leads() {
        let e = err(&doc(TIME, &[], ""));
        assert!(e.contains("no lead sequences"), "{e}");
    }

    #[test]
    fn nan_or_absent_scale() {
        let mut l = two_leads();
        l[0].3 = "NaN";
        let e = err(&doc(TIME, &l, ""));
        assert!(
            e.contains("lead MDC_ECG_LEAD_II <scale>") && e.contains("not finite"),
            "{e}"
        );
        let d = doc(TIME, &two_leads(), "").replacen(r#"<scale value="5" unit="uV"/>"#, "", 1);
        let e = err(&d);
        assert!(e.contains("no <scale>"), "{e}");
        let d = doc(TIME, &two_leads(), "").replacen(
            r#"<scale value="5" unit="uV"/>"#,
            r#"<scale unit="uV"/>"#,
            1,
        );
        assert!(err(&d).contains("no `value` attribute"));
    }

    #[test]
    fn unknown_xsi_type() {
        let mut l = two_leads();
        l[1].1 = "SLIST_INT";
        let e = err(&doc(TIME, &l, ""));
        assert!(
            e.contains("MDC_ECG_LEAD_aVR") && e.contains("xsi:type `SLIST_INT`"),
            "{e}"
        );
        let t = r#"<value xsi:type="SLIST_TS"><digits>0 1</digits></value>"#;
        let e = err(&doc(t, &two_leads(), ""));
        assert!(e.contains("unsupported") && e.contains("SLIST_TS"), "{e}");
    }

    #[test]
    fn truncated_empty_wrong_root() {
        let d = doc(TIME, &two_leads(), "");
        let cut = &d[..d.find("200 -100").unwrap() + 2];
        let e = err(cut);
        assert!(e.contains("not well-formed XML"), "{e}");
        assert!(err("").contains("empty file"));
        assert!(err("  \n").contains("empty file"));
        let e = err("<?xml version=\"1.0\"?><ClinicalDocument xmlns=\"urn:hl7-org:v3\"/>");
        assert!(e.contains("root element is <ClinicalDocument>"), "{e}");
    }

    #[test]
    fn no_rhythm_series_or_time() {
        let d = doc(TIME, &two_leads(), "").replace("code=\"RHYTHM\"", "code=\"OTHER\"");
        let e = err(&d);
        assert!(e.contains("no rhythm series") && e.contains("OTHER"), "{e}");
        let d = doc(TIME, &two_leads(), "").replace("TIME_ABSOLUTE", "SOMETHING");
        // The former time sequence is then a lead sequence of the wrong type.
        assert!(err(&d).contains("xsi:type `GLIST_TS`"));
        let d = doc("", &two_leads(), "").replace(
            "<sequence><code code=\"TIME_ABSOLUTE\" codeSystem=\"2.16.840.1.113883.5.4\"/></sequence>",
            "",
        );
        let e = err(&d.replace("<component></component>", ""));
        assert!(e.contains("no time sequence"), "{e}");
    }

    #[test]
    fn dtd_refused() {
        let d = format!(
            "<?xml version=\"1.0\"?><!DOCTYPE AnnotatedECG [<!ENTITY a \"aaaa\">]>{}",
            &doc(TIME, &two_leads(), "")[39..]
        );
        assert!(err(&d).contains("not well-formed XML"));
    }

    #[test]
    fn ages() {
        assert_eq!(age_years((1980, 6, 16), (2021, 6, 16)), Some(41.0));
        assert_eq!(age_years((1980, 6, 16), (2021, 6, 15)), Some(40.0));
        assert_eq!(ts_date("2021"), None);
        assert_eq!(ts_date("20211315"), None);
        assert_eq!(ts_date("20210615093000.000+0100"), Some((2021, 6, 15)));
    }

    // Writer and reader agree: every sample on the 1 µV grid comes back exactly
    // (the reader's physical value is origin + scale × digit, HL7 aECG SLIST_PQ).
    #[test]
    fn written_document_reads_back() {
        let lead = |name: &str, k: f64| Lead {
            name: name.into(),
            units: "mV".into(),
            samples: (0..500)
                .map(|i| ((i as f64 * k).sin() * 1000.0).round() / 1000.0)
                .collect(),
        };
        let rec = Record {
            name: "r<1>".into(),
            fs: 500.0,
            leads: vec![lead("I", 0.01), lead("aVR", 0.02), lead("V1", 0.03)],
            meta: Metadata {
                sex: Some(Sex::Female),
                subject: Some("S&1".into()),
                ..Metadata::default()
            },
            files: vec![],
            warnings: vec![],
        };
        let text = encode_aecg(&rec, 1.0).unwrap();
        let back = parse_aecg(&text, Path::new("r.xml")).unwrap();
        assert_eq!(back.fs, 500.0);
        assert!(back.warnings.is_empty(), "{:?}", back.warnings);
        assert_eq!(back.meta.sex, Some(Sex::Female));
        assert_eq!(back.meta.subject.as_deref(), Some("S&1"));
        let names: Vec<&str> = back.leads.iter().map(|l| l.name.as_str()).collect();
        assert_eq!(names, ["I", "AVR", "V1"]);
        for (a, b) in rec.leads.iter().zip(&back.leads) {
            assert_eq!(a.samples.len(), b.samples.len());
            for (x, y) in a.samples.iter().zip(&b.samples) {
                assert!((x - y).abs() < 1e-12, "{x} {y}");
            }
        }
        assert!(encode_aecg(&rec, 0.0).unwrap_err().contains("step_uv"));
        let mut bad = rec.clone();
        bad.leads[1].samples[3] = f64::NAN;
        assert!(encode_aecg(&bad, 1.0).unwrap_err().contains("aVR"));
    }
}
