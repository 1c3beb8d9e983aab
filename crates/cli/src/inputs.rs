//! Turning the command line's INPUT arguments into a list of records.
//!
//! An INPUT is a folder, a `RECORDS` list or a record path:
//! - a folder with a `RECORDS` file: the records it lists;
//! - a folder without one: every WFDB header (`*.hea`), EDF (`*.edf`), CSV
//!   (`*.csv`, except `subjects.csv`) and HL7 aECG (`*.xml`) file directly inside
//!   it, sorted by name. Any `*.xml` is taken: an XML file that is not an aECG
//!   document fails as its own record with a clear message, and the batch goes on;
//! - a `RECORDS` file (any file named `RECORDS`): one record per line, relative
//!   to the file's folder, with or without an extension (`.hea` assumed without);
//!   entries that would leave that folder (`..`, absolute paths) are rejected;
//! - a path to a `.hea`, `.edf`, `.csv` or `.xml` file, or a WFDB record path without
//!   extension whose `.hea` exists.

use anyhow::{bail, Context, Result};
use std::collections::BTreeMap;
use std::path::{Component, Path, PathBuf};

/// One record to process.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RecordInput {
    /// Unique name within the run (file stem).
    pub name: String,
    /// Path handed to the reader (`.hea`, `.edf`, `.csv` or `.xml`).
    pub path: PathBuf,
}

const SIGNAL_EXTS: [&str; 4] = ["hea", "edf", "csv", "xml"];

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
                    "{}: not a record: expected a folder, a RECORDS file, a .hea, .edf, .csv or \
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
    })
}

fn from_records_file(list: &Path) -> Result<Vec<RecordInput>> {
    let dir = list.parent().unwrap_or(Path::new("."));
    let text = std::fs::read_to_string(list)
        .with_context(|| format!("{}: cannot read", list.display()))?;
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let entry = line.trim();
        if entry.is_empty() || entry.starts_with('#') {
            continue;
        }
        let rel = Path::new(entry);
        if rel.components().any(|c| !matches!(c, Component::Normal(_))) {
            bail!(
                "{}: line {}: record `{entry}` leaves the list's folder (only plain relative names are allowed)",
                list.display(),
                i + 1
            );
        }
        out.push(
            from_path(&dir.join(rel))
                .with_context(|| format!("{}: line {}", list.display(), i + 1))?,
        );
    }
    Ok(out)
}

fn from_folder(dir: &Path) -> Result<Vec<RecordInput>> {
    let list = dir.join("RECORDS");
    if list.is_file() {
        return from_records_file(&list);
    }
    let mut paths: Vec<PathBuf> = std::fs::read_dir(dir)
        .with_context(|| format!("{}: cannot list folder", dir.display()))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_file())
        .filter(|p| ext_of(p).is_some_and(|e| SIGNAL_EXTS.contains(&e.as_str())))
        .filter(|p| p.file_name().is_some_and(|n| n != "subjects.csv"))
        .collect();
    paths.sort();
    paths.iter().map(|p| from_path(p)).collect()
}

/// Resolve all INPUT arguments; record names must be unique across them.
pub fn resolve(inputs: &[PathBuf]) -> Result<Vec<RecordInput>> {
    let mut all = Vec::new();
    for inp in inputs {
        if inp.is_dir() {
            all.extend(from_folder(inp)?);
        } else if inp.file_name().is_some_and(|n| n == "RECORDS") {
            all.extend(from_records_file(inp)?);
        } else {
            all.push(from_path(inp)?);
        }
    }
    let mut seen: BTreeMap<String, PathBuf> = BTreeMap::new();
    for r in &all {
        if let Some(prev) = seen.insert(r.name.clone(), r.path.clone()) {
            bail!(
                "record name `{}` appears twice ({} and {}); results are keyed by record name",
                r.name,
                prev.display(),
                r.path.display()
            );
        }
    }
    Ok(all)
}

/// `subjects.csv` inside an input folder, used when `--subjects` is not given.
pub fn folder_subjects(inputs: &[PathBuf]) -> Option<PathBuf> {
    inputs
        .iter()
        .filter(|p| p.is_dir())
        .map(|p| p.join("subjects.csv"))
        .find(|p| p.is_file())
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
            "subjects.csv",
            "notes.txt",
        ] {
            touch(&d.path().join(n));
        }
        let names: Vec<String> = resolve(&[d.path().into()])
            .unwrap()
            .into_iter()
            .map(|r| r.name)
            .collect();
        assert_eq!(names, ["a", "b", "c", "d"]);
    }

    #[test]
    fn records_list_rejects_escapes_and_names_line() {
        let d = tempfile::tempdir().unwrap();
        touch(&d.path().join("a.hea"));
        std::fs::write(d.path().join("RECORDS"), "a\n../etc/passwd\n").unwrap();
        let e = format!("{:#}", resolve(&[d.path().into()]).unwrap_err());
        assert!(e.contains("line 2") && e.contains("leaves"), "{e}");
    }

    #[test]
    fn record_without_extension_and_duplicates() {
        let d = tempfile::tempdir().unwrap();
        touch(&d.path().join("r1.hea"));
        let r = resolve(&[d.path().join("r1")]).unwrap();
        assert_eq!(r[0].path, d.path().join("r1.hea"));
        let e = resolve(&[d.path().join("r1"), d.path().join("r1.hea")])
            .unwrap_err()
            .to_string();
        assert!(e.contains("twice"), "{e}");
        let e = resolve(&[d.path().join("nothing")])
            .unwrap_err()
            .to_string();
        assert!(e.contains("not a record"), "{e}");
    }
}
