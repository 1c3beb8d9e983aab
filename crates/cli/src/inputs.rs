//! Turning the command line's INPUT arguments into a list of records.
//!
//! An INPUT is a folder, a `RECORDS` list or a record path:
//! - a folder with a `RECORDS` file: the records it lists;
//! - a folder without one: every WFDB header (`*.hea`), EDF (`*.edf`), BDF (`*.bdf`),
//!   ISHNE Holter (`*.ecg`), CSV
//!   (`*.csv`, except `subjects.csv`) and HL7 aECG (`*.xml`) file directly inside
//!   it, sorted by name, except the headers of segments that a multi-segment
//!   record in the folder names (they are read as parts of that record). Any `*.xml` is taken: an XML file that is not an aECG
//!   document fails as its own record with a clear message, and the batch goes on;
//! - a `RECORDS` file (any file named `RECORDS`): one record per line, relative
//!   to the file's folder, with or without an extension (`.hea` assumed without);
//!   entries that would leave that folder (`..`, absolute paths) are rejected;
//! - a path to a `.hea`, `.edf`, `.bdf`, `.ecg`, `.csv` or `.xml` file, or a WFDB record path without
//!   extension whose `.hea` exists.
//!
//! A problem with one input (a path that is not a record, a list line that leaves
//! its folder, a folder that cannot be listed, a record name already taken by
//! another file) does not stop the others: [`resolve`] returns it as a record
//! that carries the problem, and the batch reports it as a failed record. The same
//! file named twice (a folder and one of its records) is processed once.

use anyhow::{bail, Context, Result};
use std::collections::BTreeMap;
use std::path::{Component, Path, PathBuf};

/// One record to process.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RecordInput {
    /// Unique name within the run (file stem).
    pub name: String,
    /// Path handed to the reader (`.hea`, `.edf`, `.bdf`, `.ecg`, `.csv` or `.xml`).
    pub path: PathBuf,
    /// Why this input cannot be processed, found while resolving the inputs;
    /// the batch reports it as a failed record and goes on with the others.
    pub problem: Option<String>,
}

impl RecordInput {
    /// An input that failed to resolve: named after its file stem (or the
    /// whole path when it has none), so the failure table points at it.
    fn failed(path: &Path, problem: String) -> Self {
        let name = path
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .filter(|s| !s.is_empty())
            .unwrap_or_else(|| path.display().to_string());
        RecordInput {
            name,
            path: path.to_path_buf(),
            problem: Some(problem),
        }
    }
}

const SIGNAL_EXTS: [&str; 6] = ["hea", "edf", "bdf", "ecg", "csv", "xml"];

fn ext_of(p: &Path) -> Option<String> {
    p.extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
}

fn from_path(p: &Path) -> Result<RecordInput> {
    let resolved = match ext_of(p) {
        Some(e) if SIGNAL_EXTS.contains(&e.as_str()) => p.to_path_buf(),
        _ => {
            let hea = PathBuf::from(format!("{}.hea", p.display()));
            if hea.is_file() {
                hea
            } else {
                bail!(
                    "{}: not a record: expected a folder, a RECORDS file, a .hea, .edf, .bdf, .ecg, .csv or \
                     .xml (HL7 aECG) file, or a WFDB record name with a .hea beside it",
                    p.display()
                )
            }
        }
    };
    if !resolved.is_file() {
        bail!("{}: no such file", resolved.display());
    }
    let name = resolved
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    Ok(RecordInput {
        name,
        path: resolved,
        problem: None,
    })
}

fn from_records_file(list: &Path) -> Vec<RecordInput> {
    let dir = list.parent().unwrap_or(Path::new("."));
    let text = match std::fs::read_to_string(list) {
        Ok(t) => t,
        Err(e) => {
            return vec![RecordInput::failed(
                list,
                format!("{}: cannot read: {e}", list.display()),
            )]
        }
    };
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let entry = line.trim();
        if entry.is_empty() || entry.starts_with('#') {
            continue;
        }
        let rel = Path::new(entry);
        if rel.components().any(|c| !matches!(c, Component::Normal(_))) {
            out.push(RecordInput::failed(
                rel,
                format!(
                    "{}: line {}: record `{entry}` leaves the list's folder (only plain relative names are allowed)",
                    list.display(),
                    i + 1
                ),
            ));
            continue;
        }
        let path = dir.join(rel);
        out.push(from_path(&path).unwrap_or_else(|e| {
            RecordInput::failed(&path, format!("{}: line {}: {e:#}", list.display(), i + 1))
        }));
    }
    out
}

fn from_folder(dir: &Path) -> Vec<RecordInput> {
    let list = dir.join("RECORDS");
    if list.is_file() {
        return from_records_file(&list);
    }
    let entries = match std::fs::read_dir(dir) {
        Ok(e) => e,
        Err(e) => {
            return vec![RecordInput::failed(
                dir,
                format!("{}: cannot list folder: {e}", dir.display()),
            )]
        }
    };
    let mut paths: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_file())
        .filter(|p| ext_of(p).is_some_and(|e| SIGNAL_EXTS.contains(&e.as_str())))
        .filter(|p| p.file_name().is_some_and(|n| n != "subjects.csv"))
        .collect();
    paths.sort();
    let segments = segment_names(&paths);
    paths
        .iter()
        .filter(|p| {
            !(ext_of(p).as_deref() == Some("hea")
                && p.file_stem()
                    .is_some_and(|s| segments.contains(s.to_string_lossy().as_ref())))
        })
        .map(|p| from_path(p).unwrap_or_else(|e| RecordInput::failed(p, format!("{e:#}"))))
        .collect()
}

/// The segment records (layout segments included) that the multi-segment
/// headers among `paths` name: in a folder without a `RECORDS` list they are
/// parts of their master record, not records of their own. A master header that
/// cannot be parsed names none (it fails as its own record later).
fn segment_names(paths: &[PathBuf]) -> std::collections::BTreeSet<String> {
    let mut out = std::collections::BTreeSet::new();
    for p in paths.iter().filter(|p| ext_of(p).as_deref() == Some("hea")) {
        // Only a record line `name/nseg ...` starts a multi-segment header: look at
        // the first line that is not a comment before parsing the whole header.
        let Ok(text) = std::fs::read(p) else { continue };
        let text = String::from_utf8_lossy(&text);
        let first = text
            .lines()
            .map(str::trim)
            .find(|l| !l.is_empty() && !l.starts_with('#'));
        let is_multi = first
            .and_then(|l| l.split_whitespace().next())
            .is_some_and(|name| name.contains('/'));
        if !is_multi {
            continue;
        }
        if let Ok(h) = tendline_formats::wfdb::read_header(p) {
            out.extend(
                h.segments
                    .iter()
                    .filter(|s| s.name != "~")
                    .map(|s| s.name.clone()),
            );
        }
    }
    out
}

/// Resolve all INPUT arguments into records, in the order given.
///
/// Never fails as a whole: an input with a problem comes back with
/// [`RecordInput::problem`] set. Record names are unique among the records
/// without a problem (outputs are keyed by name): a second file with a name
/// already taken carries a problem instead, and the same file named twice is
/// kept once.
pub fn resolve(inputs: &[PathBuf]) -> Vec<RecordInput> {
    let mut all = Vec::new();
    for inp in inputs {
        if inp.is_dir() {
            all.extend(from_folder(inp));
        } else if inp.file_name().is_some_and(|n| n == "RECORDS") {
            all.extend(from_records_file(inp));
        } else {
            all.push(from_path(inp).unwrap_or_else(|e| RecordInput::failed(inp, format!("{e:#}"))));
        }
    }
    let same_file = |a: &Path, b: &Path| {
        a == b || matches!((a.canonicalize(), b.canonicalize()), (Ok(x), Ok(y)) if x == y)
    };
    let mut seen: BTreeMap<String, PathBuf> = BTreeMap::new();
    let mut out: Vec<RecordInput> = Vec::with_capacity(all.len());
    for mut r in all {
        if r.problem.is_some() {
            out.push(r);
            continue;
        }
        match seen.get(&r.name) {
            Some(prev) if same_file(prev, &r.path) => continue,
            Some(prev) => {
                r.problem = Some(format!(
                    "{}: record name `{}` is already taken by {}; results are keyed by record \
                     name: rename one of the files or run them into separate --out folders",
                    r.path.display(),
                    r.name,
                    prev.display()
                ));
            }
            None => {
                seen.insert(r.name.clone(), r.path.clone());
            }
        }
        out.push(r);
    }
    out
}

/// [`resolve`] for commands that need every input (`tune`, `validate`): the
/// first problem is an error.
pub fn resolve_all(inputs: &[PathBuf]) -> Result<Vec<RecordInput>> {
    let records = resolve(inputs);
    if let Some(p) = records.iter().find_map(|r| r.problem.as_deref()) {
        bail!("{p}");
    }
    Ok(records)
}

/// `subjects.csv` inside an input folder, used when `--subjects` is not given.
pub fn folder_subjects(inputs: &[PathBuf]) -> Option<PathBuf> {
    inputs
        .iter()
        .filter(|p| p.is_dir())
        .map(|p| p.join("subjects.csv"))
        .find(|p| p.is_file())
}

/// The subjects table of a run or an inspection: `explicit` (`--subjects`) or
/// else `subjects.csv` in an input folder, read; none when neither exists.
pub fn load_subjects(
    explicit: Option<&Path>,
    inputs: &[PathBuf],
) -> Result<(
    Option<PathBuf>,
    BTreeMap<String, tendline_formats::subjects::SubjectRow>,
)> {
    let file = explicit
        .map(Path::to_path_buf)
        .or_else(|| folder_subjects(inputs));
    let rows = match &file {
        Some(p) => tendline_formats::subjects::read_subjects(p)
            .with_context(|| format!("--subjects {}", p.display()))?,
        None => BTreeMap::new(),
    };
    Ok((file, rows))
}

/// `--csv-fs`, when given, must be a positive rate.
pub fn check_csv_fs(csv_fs: Option<f64>) -> Result<()> {
    match csv_fs {
        Some(fs) if !(fs.is_finite() && fs > 0.0) => {
            bail!("--csv-fs: allowed a positive sampling rate in Hz, got {fs}")
        }
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn touch(p: &Path) {
        std::fs::write(p, b"x").unwrap();
    }

    #[test]
    fn folder_without_list_takes_signal_files_but_not_subjects() {
        let d = tempfile::tempdir().unwrap();
        for n in [
            "a.hea",
            "a.dat",
            "b.edf",
            "c.csv",
            "d.xml",
            "e.bdf",
            "f.ecg",
            "subjects.csv",
            "notes.txt",
        ] {
            touch(&d.path().join(n));
        }
        let names: Vec<String> = resolve(&[d.path().into()])
            .into_iter()
            .map(|r| r.name)
            .collect();
        assert_eq!(names, ["a", "b", "c", "d", "e", "f"]);
    }

    #[test]
    fn folder_without_list_leaves_out_segments_of_multi_segment_records() {
        // Header layout: WFDB `header(5)` (from memory): a record line
        // `name/nseg nsig fs len`, then one `segment length` line per segment.
        let d = tempfile::tempdir().unwrap();
        std::fs::write(
            d.path().join("m.hea"),
            "# a comment first\nm/3 2 125 30\nm_layout 0\n~ 10\nm_0001 20\n",
        )
        .unwrap();
        for n in ["m_layout.hea", "m_0001.hea", "m_0001.dat", "other.hea"] {
            touch(&d.path().join(n));
        }
        let names: Vec<String> = resolve(&[d.path().into()])
            .into_iter()
            .map(|r| r.name)
            .collect();
        assert_eq!(names, ["m", "other"]);
        // Named directly, a segment is still read on its own.
        let r = resolve(&[d.path().join("m_0001.hea")]);
        assert_eq!(r[0].name, "m_0001");
    }

    #[test]
    fn records_list_flags_escapes_and_names_line() {
        let d = tempfile::tempdir().unwrap();
        touch(&d.path().join("a.hea"));
        std::fs::write(d.path().join("RECORDS"), "a\n../etc/passwd\nmissing\n").unwrap();
        let r = resolve(&[d.path().into()]);
        assert_eq!(r.len(), 3);
        assert!(r[0].problem.is_none());
        let e = r[1].problem.as_deref().unwrap();
        assert!(e.contains("line 2") && e.contains("leaves"), "{e}");
        let e = r[2].problem.as_deref().unwrap();
        assert!(e.contains("line 3") && e.contains("missing"), "{e}");
        let e = format!("{:#}", resolve_all(&[d.path().into()]).unwrap_err());
        assert!(e.contains("line 2"), "{e}");
    }

    #[test]
    fn record_without_extension_and_duplicates() {
        let d = tempfile::tempdir().unwrap();
        touch(&d.path().join("r1.hea"));
        touch(&d.path().join("r1.edf"));
        let r = resolve(&[d.path().join("r1")]);
        assert_eq!(r[0].path, d.path().join("r1.hea"));
        // The same file twice is one record.
        let r = resolve(&[d.path().join("r1"), d.path().join("r1.hea")]);
        assert_eq!(r.len(), 1, "{r:?}");
        assert!(r[0].problem.is_none());
        // Another file with the same name is flagged, the first one kept.
        let r = resolve(&[d.path().into()]);
        assert_eq!(r.len(), 2, "{r:?}");
        assert!(r[0].problem.is_none());
        assert_eq!(r[0].path, d.path().join("r1.edf"));
        let e = r[1].problem.as_deref().unwrap();
        assert!(e.contains("already taken") && e.contains("r1.edf"), "{e}");
        let r = resolve(&[d.path().join("nothing")]);
        let e = r[0].problem.as_deref().unwrap();
        assert!(e.contains("not a record") && r[0].name == "nothing", "{e}");
    }
}
