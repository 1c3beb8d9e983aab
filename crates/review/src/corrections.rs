//! The corrections file a reader saves from the review site (schema in the crate
//! docs) and its validation against a run.

use crate::run::Run;
use crate::util::{attr_texts, data_at, i64s, is_iso_utc};
use crate::{EntryProblem, ProblemKind, ReviewError};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;
use tendline_store::{Data, Part};

/// Value of the `format` field.
pub const FORMAT: &str = "tendline-corrections";
/// Supported `version`.
pub const VERSION: u32 = 1;

/// Median-beat marks a reader may move (the datasets of `windows/medians/<WWW>/marks`).
pub const FIDUCIALS: [&str; 12] = [
    "p_on",
    "p_peak",
    "p_end",
    "qrs_on",
    "qrs_peak",
    "qrs_end",
    "t_on",
    "t_peak",
    "t_end",
    "t_end_wavelet",
    "t_end_tangent",
    "t_end_area",
];

/// A whole corrections file.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CorrectionsFile {
    pub format: String,
    pub version: u32,
    /// Default author of the entries.
    #[serde(default)]
    pub who: Option<String>,
    /// Default time of the entries (ISO 8601 UTC).
    #[serde(default)]
    pub created_utc: Option<String>,
    pub changes: Vec<Change>,
}

fn mark_kind() -> String {
    "mark".into()
}

/// One change made by the reader.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Change {
    /// `mark`, `unreadable`, `beat_mark` or `beat_unreadable`.
    #[serde(default = "mark_kind")]
    pub kind: String,
    pub record: String,
    /// 0-based window index (signed so a negative index is reported per entry);
    /// required for `mark` and `unreadable`, ignored for the beat kinds.
    #[serde(default)]
    pub window: Option<i64>,
    /// 0-based beat index (`beats/qrs_peak`); required for `beat_mark` and
    /// `beat_unreadable`.
    #[serde(default)]
    pub beat: Option<i64>,
    /// Lead name, or `global` for a whole-window or whole-beat change and for the
    /// global per-beat marks.
    pub lead: String,
    /// Mark name, `window` for an unreadable window, `beat` for an unreadable beat.
    pub fiducial: String,
    /// Automatic mark (median-beat sample for `mark`, record sample for `beat_mark`,
    /// −1 absent); `null` for the unreadable kinds.
    #[serde(default)]
    pub old_sample: Option<i64>,
    /// Reader's mark (−1 deletes the mark); `null` for the unreadable kinds.
    #[serde(default)]
    pub new_sample: Option<i64>,
    #[serde(default)]
    pub reason: String,
    #[serde(default)]
    pub who: Option<String>,
    #[serde(default)]
    pub when: Option<String>,
}

/// What a change does.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// Moves one median-beat mark of a window.
    Mark,
    /// Declares a whole window unreadable.
    Unreadable,
    /// Moves one per-beat mark (global or of one lead).
    BeatMark,
    /// Declares one beat unreadable.
    BeatUnreadable,
}

impl Kind {
    pub fn as_str(self) -> &'static str {
        match self {
            Kind::Mark => "mark",
            Kind::Unreadable => "unreadable",
            Kind::BeatMark => "beat_mark",
            Kind::BeatUnreadable => "beat_unreadable",
        }
    }

    /// The change concerns one beat rather than a window's median beat.
    pub fn is_beat(self) -> bool {
        matches!(self, Kind::BeatMark | Kind::BeatUnreadable)
    }

    pub fn is_unreadable(self) -> bool {
        matches!(self, Kind::Unreadable | Kind::BeatUnreadable)
    }
}

/// A change that passed validation, with everything resolved.
#[derive(Debug, Clone, PartialEq)]
pub struct Checked {
    pub index: usize,
    pub record: String,
    /// The window changed, or for a beat change the window holding the beat (if any).
    pub window: Option<usize>,
    /// Beat index of a beat change.
    pub beat: Option<usize>,
    /// `None` for a whole-window or whole-beat change and for global per-beat marks.
    pub lead: Option<(usize, String)>,
    pub fiducial: String,
    pub kind: Kind,
    pub old_sample: i64,
    pub new_sample: i64,
    pub reason: String,
    pub who: String,
    pub when: String,
}

/// Columns of a CSV corrections file (header row required; any order; only
/// `record`, `lead` and `fiducial` are required).
pub const CSV_COLUMNS: [&str; 11] = [
    "kind",
    "record",
    "window",
    "beat",
    "lead",
    "fiducial",
    "old_sample",
    "new_sample",
    "reason",
    "who",
    "when",
];

/// Read and parse a corrections file (no checks against the run yet): JSON, or CSV
/// when the name ends in `.csv`.
pub fn read(path: &Path) -> Result<CorrectionsFile, ReviewError> {
    let bytes = std::fs::read(path).map_err(|source| ReviewError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    let invalid = |message: String| ReviewError::Invalid {
        path: path.to_path_buf(),
        message,
    };
    let is_csv = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
    if is_csv {
        let text = String::from_utf8(bytes)
            .map_err(|_| invalid("CSV corrections file is not UTF-8 text".into()))?;
        return from_csv(&text).map_err(invalid);
    }
    let f: CorrectionsFile = serde_json::from_slice(&bytes)
        .map_err(|e| invalid(format!("not a corrections file: {e}")))?;
    if f.format != FORMAT || f.version != VERSION {
        return Err(invalid(format!(
            "format {:?} version {} is not supported (expected {FORMAT:?} version {VERSION})",
            f.format, f.version
        )));
    }
    Ok(f)
}

/// Split CSV text into rows of fields (RFC 4180: `"` quotes, `""` inside quotes,
/// separators and line breaks allowed inside quotes).
fn csv_rows(text: &str) -> Result<Vec<Vec<String>>, String> {
    let mut rows = Vec::new();
    let mut row = Vec::new();
    let mut field = String::new();
    let mut quoted = false;
    let mut line = 1usize;
    let mut chars = text.trim_start_matches('\u{feff}').chars().peekable();
    while let Some(c) = chars.next() {
        if quoted {
            match c {
                '"' if chars.peek() == Some(&'"') => {
                    chars.next();
                    field.push('"');
                }
                '"' => quoted = false,
                '\n' => {
                    line += 1;
                    field.push(c);
                }
                _ => field.push(c),
            }
            continue;
        }
        match c {
            '"' if field.is_empty() => quoted = true,
            ',' => row.push(std::mem::take(&mut field)),
            '\r' => {}
            '\n' => {
                line += 1;
                row.push(std::mem::take(&mut field));
                if !(row.len() == 1 && row[0].trim().is_empty()) {
                    rows.push(std::mem::take(&mut row));
                }
                row.clear();
            }
            _ => field.push(c),
        }
    }
    if quoted {
        return Err(format!("line {line}: quoted field not closed"));
    }
    if !field.is_empty() || !row.is_empty() {
        row.push(field);
        rows.push(row);
    }
    Ok(rows)
}

/// A CSV corrections file as the same entries a JSON file holds.
fn from_csv(text: &str) -> Result<CorrectionsFile, String> {
    let rows = csv_rows(text)?;
    let Some((header, body)) = rows.split_first() else {
        return Err("CSV corrections file is empty (expected a header row)".into());
    };
    let header: Vec<String> = header
        .iter()
        .map(|h| h.trim().to_ascii_lowercase())
        .collect();
    for h in &header {
        if !CSV_COLUMNS.contains(&h.as_str()) {
            return Err(format!(
                "unknown column {h:?} (allowed: {})",
                CSV_COLUMNS.join(", ")
            ));
        }
    }
    for need in ["record", "lead", "fiducial"] {
        if !header.iter().any(|h| h == need) {
            return Err(format!("column {need:?} is missing"));
        }
    }
    let mut changes = Vec::with_capacity(body.len());
    for (r, row) in body.iter().enumerate() {
        let line = r + 2;
        if row.len() != header.len() {
            return Err(format!(
                "row {line}: {} fields, the header has {}",
                row.len(),
                header.len()
            ));
        }
        let get = |name: &str| -> Option<String> {
            header
                .iter()
                .position(|h| h == name)
                .map(|k| row[k].trim().to_string())
                .filter(|v| !v.is_empty())
        };
        let int = |name: &str| -> Result<Option<i64>, String> {
            get(name)
                .map(|v| {
                    v.parse::<i64>().map_err(|_| {
                        format!("row {line}: column {name:?}: expected an integer, got {v:?}")
                    })
                })
                .transpose()
        };
        changes.push(Change {
            kind: get("kind").unwrap_or_else(mark_kind),
            record: get("record").unwrap_or_default(),
            window: int("window")?,
            beat: int("beat")?,
            lead: get("lead").unwrap_or_default(),
            fiducial: get("fiducial").unwrap_or_default(),
            old_sample: int("old_sample")?,
            new_sample: int("new_sample")?,
            reason: get("reason").unwrap_or_default(),
            who: get("who"),
            when: get("when"),
        });
    }
    Ok(CorrectionsFile {
        format: FORMAT.into(),
        version: VERSION,
        who: None,
        created_utc: None,
        changes,
    })
}

/// An unreadable window or beat names no lead and no samples.
fn is_whole(c: &Change, fiducial: &str) -> bool {
    c.lead == "global" && c.fiducial == fiducial && c.old_sample.is_none() && c.new_sample.is_none()
}

/// The old and new sample of a moved mark: `old` must be the automatic mark, `new`
/// inside `0..limit` (or −1 to delete); `within` names the span for the message.
fn check_move(
    c: &Change,
    auto: i64,
    limit: i64,
    within: &str,
) -> Result<(i64, i64), (ProblemKind, String)> {
    let (Some(old), Some(new)) = (c.old_sample, c.new_sample) else {
        return Err((
            ProblemKind::OldSampleMismatch,
            "old_sample and new_sample are required for a mark".into(),
        ));
    };
    if old != auto {
        return Err((
            ProblemKind::OldSampleMismatch,
            format!("old_sample {old} does not match the automatic mark {auto}"),
        ));
    }
    if new != -1 && !(0..limit).contains(&new) {
        return Err((
            ProblemKind::SampleOutOfRange,
            format!("new_sample {new} is outside the {within} (0..{limit}, or -1 to delete)"),
        ));
    }
    Ok((old, new))
}

/// Entries already seen, by (record, place, lead, fiducial).
type Seen = BTreeMap<(String, String, String, String), usize>;

/// The index of an earlier entry making the same change at `place` (`w<window>` or
/// `b<beat>`), else remember this one.
fn first_entry(seen: &mut Seen, c: &Change, place: String, index: usize) -> Option<usize> {
    let key = (c.record.clone(), place, c.lead.clone(), c.fiducial.clone());
    match seen.get(&key) {
        Some(&first) => Some(first),
        None => {
            seen.insert(key, index);
            None
        }
    }
}

/// Check every entry against the run; all problems at once, or the resolved changes
/// with the loaded parts of the records they touch.
pub fn validate(
    run: &Run,
    file: &CorrectionsFile,
    path: &Path,
    importer: Option<&str>,
    now: &str,
) -> Result<(Vec<Checked>, BTreeMap<String, Part>), ReviewError> {
    let known: BTreeSet<&str> = run.records.iter().map(|r| r.record.as_str()).collect();
    let mut parts: BTreeMap<String, Option<Part>> = BTreeMap::new();
    let mut problems = Vec::new();
    let mut out = Vec::new();
    let mut seen = Seen::new();
    let nonempty = |s: &Option<String>| {
        s.as_deref()
            .map(str::trim)
            .filter(|s| !s.is_empty())
            .map(String::from)
    };
    for (index, c) in file.changes.iter().enumerate() {
        let place = match (c.window, c.beat) {
            (_, Some(b)) if c.kind.starts_with("beat") => format!("beat {b}"),
            (Some(w), _) => format!("window {w}"),
            _ => "no window".to_string(),
        };
        let mut bad = |kind: ProblemKind, message: String| {
            problems.push(EntryProblem {
                index,
                kind,
                message: format!(
                    "record {:?}, {place}, lead {:?}, {:?}: {message}",
                    c.record, c.lead, c.fiducial
                ),
            })
        };
        let kind = match c.kind.as_str() {
            "mark" => Kind::Mark,
            "unreadable" => Kind::Unreadable,
            "beat_mark" => Kind::BeatMark,
            "beat_unreadable" => Kind::BeatUnreadable,
            k => {
                bad(
                    ProblemKind::UnknownKind,
                    format!("unknown kind {k:?} (expected \"mark\", \"unreadable\", \"beat_mark\" or \"beat_unreadable\")"),
                );
                continue;
            }
        };
        let Some(who) = nonempty(&c.who)
            .or_else(|| nonempty(&file.who))
            .or_else(|| importer.map(String::from).filter(|s| !s.trim().is_empty()))
        else {
            bad(
                ProblemKind::MissingWho,
                "no `who` in the entry or the file, and no importer name given".into(),
            );
            continue;
        };
        let when = nonempty(&c.when)
            .or_else(|| nonempty(&file.created_utc))
            .unwrap_or_else(|| now.to_string());
        if !is_iso_utc(&when) {
            bad(
                ProblemKind::BadTime,
                format!("time {when:?} is not ISO 8601 UTC (YYYY-MM-DDTHH:MM:SSZ)"),
            );
            continue;
        }
        if !known.contains(c.record.as_str()) {
            bad(
                ProblemKind::UnknownRecord,
                "no such record in this run".into(),
            );
            continue;
        }
        if !parts.contains_key(&c.record) {
            parts.insert(c.record.clone(), run.part(&c.record)?);
        }
        let Some(part) = parts.get(&c.record).and_then(Option::as_ref) else {
            bad(
                ProblemKind::UnknownRecord,
                "the record has no results in this run (failed or missing part)".into(),
            );
            continue;
        };
        let g = &part.group;
        let starts = crate::util::f64s(g, "windows/start_s").unwrap_or_default();
        let ends = crate::util::f64s(g, "windows/end_s").unwrap_or_default();
        let n_windows = starts.len();
        let leads = attr_texts(g, "leads").unwrap_or(&[]);
        let resolve_lead = |name: &str| leads.iter().position(|l| l == name);

        if kind.is_beat() {
            let peaks = i64s(g, "beats/qrs_peak").unwrap_or(&[]);
            let beat = match c.beat.map(usize::try_from) {
                Some(Ok(b)) if b < peaks.len() => b,
                Some(_) => {
                    bad(
                        ProblemKind::UnknownBeat,
                        format!("the record has {} beat(s)", peaks.len()),
                    );
                    continue;
                }
                None => {
                    bad(
                        ProblemKind::UnknownBeat,
                        "a beat change needs `beat` (0-based beat index)".into(),
                    );
                    continue;
                }
            };
            let fs = crate::util::attr_f64(g, "fs").unwrap_or(f64::NAN);
            let t = peaks[beat] as f64 / fs;
            let window = (0..n_windows).find(|&w| t >= starts[w] && t < ends[w]);
            if let Some(first) = first_entry(&mut seen, c, format!("b{beat}"), index) {
                bad(
                    ProblemKind::Duplicate,
                    format!("same change as entry {first}"),
                );
                continue;
            }
            if kind == Kind::BeatUnreadable {
                if !is_whole(c, "beat") {
                    bad(ProblemKind::UnknownLead, "an unreadable beat needs lead \"global\", fiducial \"beat\" and null samples".into());
                    continue;
                }
                out.push(Checked {
                    index,
                    record: c.record.clone(),
                    window,
                    beat: Some(beat),
                    lead: None,
                    fiducial: "beat".into(),
                    kind,
                    old_sample: -1,
                    new_sample: -1,
                    reason: c.reason.clone(),
                    who,
                    when,
                });
                continue;
            }
            let (lead, dir) = if c.lead == "global" {
                (None, "marks/global".to_string())
            } else {
                match resolve_lead(&c.lead) {
                    Some(li) => (Some((li, c.lead.clone())), format!("marks/leads/{li:02}")),
                    None => {
                        bad(
                            ProblemKind::UnknownLead,
                            format!(
                                "expected \"global\" or one of the record's leads: {}",
                                leads.join(", ")
                            ),
                        );
                        continue;
                    }
                }
            };
            if !FIDUCIALS.contains(&c.fiducial.as_str()) {
                bad(
                    ProblemKind::UnknownFiducial,
                    format!("expected one of {}", FIDUCIALS.join(", ")),
                );
                continue;
            }
            let Some(auto) =
                i64s(g, &format!("{dir}/{}", c.fiducial)).and_then(|v| v.get(beat).copied())
            else {
                bad(
                    ProblemKind::UnknownBeat,
                    format!("the run stored no {dir}/{} for this beat", c.fiducial),
                );
                continue;
            };
            let n_samples = crate::util::attr_f64(g, "n_samples").unwrap_or(0.0) as i64;
            let (old, new) = match check_move(c, auto, n_samples, "record") {
                Ok(v) => v,
                Err((k, m)) => {
                    bad(k, m);
                    continue;
                }
            };
            out.push(Checked {
                index,
                record: c.record.clone(),
                window,
                beat: Some(beat),
                lead,
                fiducial: c.fiducial.clone(),
                kind,
                old_sample: old,
                new_sample: new,
                reason: c.reason.clone(),
                who,
                when,
            });
            continue;
        }

        let window = match c.window.map(usize::try_from) {
            Some(Ok(w)) if w < n_windows => w,
            _ => {
                bad(
                    ProblemKind::UnknownWindow,
                    format!("the record has {n_windows} window(s)"),
                );
                continue;
            }
        };
        if let Some(first) = first_entry(&mut seen, c, format!("w{window}"), index) {
            bad(
                ProblemKind::Duplicate,
                format!("same change as entry {first}"),
            );
            continue;
        }
        if kind == Kind::Unreadable {
            if !is_whole(c, "window") {
                bad(ProblemKind::UnknownLead, "an unreadable window needs lead \"global\", fiducial \"window\" and null samples".into());
                continue;
            }
            out.push(Checked {
                index,
                record: c.record.clone(),
                window: Some(window),
                beat: None,
                lead: None,
                fiducial: "window".into(),
                kind,
                old_sample: -1,
                new_sample: -1,
                reason: c.reason.clone(),
                who,
                when,
            });
            continue;
        }
        let mdir = format!("windows/medians/{window:03}");
        let Some(li) = resolve_lead(&c.lead) else {
            bad(
                ProblemKind::UnknownLead,
                format!("the record's leads are {}", leads.join(", ")),
            );
            continue;
        };
        if !FIDUCIALS.contains(&c.fiducial.as_str()) {
            bad(
                ProblemKind::UnknownFiducial,
                format!("expected one of {}", FIDUCIALS.join(", ")),
            );
            continue;
        }
        let beat_len = match data_at(g, &format!("{mdir}/beat")) {
            Some(Data::F32Matrix { cols, .. }) => *cols,
            _ => 0,
        };
        let auto =
            i64s(g, &format!("{mdir}/marks/{}", c.fiducial)).and_then(|v| v.get(li).copied());
        let (Some(auto), true) = (auto, beat_len > 0) else {
            bad(
                ProblemKind::UnknownWindow,
                "the window has no median beat (too few beats)".into(),
            );
            continue;
        };
        let (old, new) = match check_move(c, auto, beat_len as i64, "median beat") {
            Ok(v) => v,
            Err((k, m)) => {
                bad(k, m);
                continue;
            }
        };
        out.push(Checked {
            index,
            record: c.record.clone(),
            window: Some(window),
            beat: None,
            lead: Some((li, c.lead.clone())),
            fiducial: c.fiducial.clone(),
            kind,
            old_sample: old,
            new_sample: new,
            reason: c.reason.clone(),
            who,
            when,
        });
    }
    if !problems.is_empty() {
        return Err(ReviewError::Corrections {
            path: path.to_path_buf(),
            problems,
        });
    }
    let parts = parts
        .into_iter()
        .filter_map(|(k, v)| v.map(|p| (k, p)))
        .collect();
    Ok((out, parts))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_rows_follow_rfc4180_quoting() {
        // RFC 4180 (common practice for CSV): quotes, doubled quotes, separators
        // and line breaks inside quoted fields.
        let rows = csv_rows("a,b,c\r\n1,\"x, \"\"y\"\"\",\"two\nlines\"\n\n2,,\n").unwrap();
        assert_eq!(
            rows,
            vec![
                vec!["a", "b", "c"],
                vec!["1", "x, \"y\"", "two\nlines"],
                vec!["2", "", ""],
            ]
        );
        assert!(csv_rows("a\n\"open").is_err());
    }

    #[test]
    fn csv_file_maps_to_the_json_entries() {
        let text = "kind,record,window,beat,lead,fiducial,old_sample,new_sample,reason,who,when\n\
                    mark,s01,0,,V3,t_end,374,384,U wave,Dr A,2026-12-02T08:00:00Z\n\
                    beat_unreadable,s01,,12,global,beat,,,noise,,\n";
        let f = from_csv(text).unwrap();
        assert_eq!(f.changes.len(), 2);
        let a = &f.changes[0];
        assert_eq!((a.kind.as_str(), a.window, a.beat), ("mark", Some(0), None));
        assert_eq!((a.old_sample, a.new_sample), (Some(374), Some(384)));
        assert_eq!(a.who.as_deref(), Some("Dr A"));
        let b = &f.changes[1];
        assert_eq!(
            (b.kind.as_str(), b.window, b.beat),
            ("beat_unreadable", None, Some(12))
        );
        assert_eq!((b.old_sample, b.who.as_deref()), (None, None));
    }

    #[test]
    fn csv_errors_name_the_column_and_row() {
        let e = from_csv("record,lead,fiducial,colour\n").unwrap_err();
        assert!(e.contains("\"colour\"") && e.contains("allowed"), "{e}");
        let e = from_csv("record,lead\n").unwrap_err();
        assert!(e.contains("\"fiducial\""), "{e}");
        let e = from_csv("record,lead,fiducial,window\ns,V1,t_end,x\n").unwrap_err();
        assert!(e.contains("row 2") && e.contains("\"window\""), "{e}");
        let e = from_csv("record,lead,fiducial\ns,V1\n").unwrap_err();
        assert!(e.contains("row 2"), "{e}");
    }
}
