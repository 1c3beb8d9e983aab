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
    /// `mark` or `unreadable`.
    #[serde(default = "mark_kind")]
    pub kind: String,
    pub record: String,
    /// 0-based window index (signed so a negative index is reported per entry).
    pub window: i64,
    /// Lead name, or `global` for a whole-window change.
    pub lead: String,
    /// Mark name, or `window` for a whole-window change.
    pub fiducial: String,
    /// Automatic mark (median-beat sample, −1 absent); `null` for `unreadable`.
    #[serde(default)]
    pub old_sample: Option<i64>,
    /// Reader's mark (−1 deletes the mark); `null` for `unreadable`.
    #[serde(default)]
    pub new_sample: Option<i64>,
    #[serde(default)]
    pub reason: String,
    #[serde(default)]
    pub who: Option<String>,
    #[serde(default)]
    pub when: Option<String>,
}

/// A change that passed validation, with everything resolved.
#[derive(Debug, Clone, PartialEq)]
pub struct Checked {
    pub index: usize,
    pub record: String,
    pub window: usize,
    /// `None` for a whole-window change.
    pub lead: Option<(usize, String)>,
    pub fiducial: String,
    pub unreadable: bool,
    pub old_sample: i64,
    pub new_sample: i64,
    pub reason: String,
    pub who: String,
    pub when: String,
}

/// Read and parse a corrections file (no checks against the run yet).
pub fn read(path: &Path) -> Result<CorrectionsFile, ReviewError> {
    let bytes = std::fs::read(path).map_err(|source| ReviewError::Io {
        path: path.to_path_buf(),
        source,
    })?;
    let f: CorrectionsFile = serde_json::from_slice(&bytes).map_err(|e| ReviewError::Invalid {
        path: path.to_path_buf(),
        message: format!("not a corrections file: {e}"),
    })?;
    if f.format != FORMAT || f.version != VERSION {
        return Err(ReviewError::Invalid {
            path: path.to_path_buf(),
            message: format!(
                "format {:?} version {} is not supported (expected {FORMAT:?} version {VERSION})",
                f.format, f.version
            ),
        });
    }
    Ok(f)
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
    let mut seen: BTreeMap<(String, usize, String, String), usize> = BTreeMap::new();
    let nonempty = |s: &Option<String>| {
        s.as_deref()
            .map(str::trim)
            .filter(|s| !s.is_empty())
            .map(String::from)
    };
    for (index, c) in file.changes.iter().enumerate() {
        let mut bad = |kind: ProblemKind, message: String| {
            problems.push(EntryProblem {
                index,
                kind,
                message: format!(
                    "record {:?}, window {}, lead {:?}, {:?}: {message}",
                    c.record, c.window, c.lead, c.fiducial
                ),
            })
        };
        let unreadable = match c.kind.as_str() {
            "mark" => false,
            "unreadable" => true,
            k => {
                bad(
                    ProblemKind::UnknownKind,
                    format!("unknown kind {k:?} (expected \"mark\" or \"unreadable\")"),
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
        let n_windows = crate::util::f64s(g, "windows/start_s").map_or(0, |v| v.len());
        let window = match usize::try_from(c.window) {
            Ok(w) if w < n_windows => w,
            _ => {
                bad(
                    ProblemKind::UnknownWindow,
                    format!("the record has {n_windows} window(s)"),
                );
                continue;
            }
        };
        let key = (c.record.clone(), window, c.lead.clone(), c.fiducial.clone());
        if let Some(first) = seen.get(&key) {
            bad(
                ProblemKind::Duplicate,
                format!("same change as entry {first}"),
            );
            continue;
        }
        seen.insert(key, index);
        if unreadable {
            if c.lead != "global"
                || c.fiducial != "window"
                || c.old_sample.is_some()
                || c.new_sample.is_some()
            {
                bad(ProblemKind::UnknownLead, "an unreadable window needs lead \"global\", fiducial \"window\" and null samples".into());
                continue;
            }
            out.push(Checked {
                index,
                record: c.record.clone(),
                window,
                lead: None,
                fiducial: "window".into(),
                unreadable: true,
                old_sample: -1,
                new_sample: -1,
                reason: c.reason.clone(),
                who,
                when,
            });
            continue;
        }
        let mdir = format!("windows/medians/{window:03}");
        let leads = attr_texts(g, "leads").unwrap_or(&[]);
        let Some(li) = leads.iter().position(|l| *l == c.lead) else {
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
        let (Some(old), Some(new)) = (c.old_sample, c.new_sample) else {
            bad(
                ProblemKind::OldSampleMismatch,
                "old_sample and new_sample are required for a mark".into(),
            );
            continue;
        };
        if old != auto {
            bad(
                ProblemKind::OldSampleMismatch,
                format!("old_sample {old} does not match the automatic mark {auto}"),
            );
            continue;
        }
        if new != -1 && !(0..beat_len as i64).contains(&new) {
            bad(
                ProblemKind::SampleOutOfRange,
                format!(
                    "new_sample {new} is outside the median beat (0..{beat_len}, or -1 to delete)"
                ),
            );
            continue;
        }
        out.push(Checked {
            index,
            record: c.record.clone(),
            window,
            lead: Some((li, c.lead.clone())),
            fiducial: c.fiducial.clone(),
            unreadable: false,
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
