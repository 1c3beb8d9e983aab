//! Result storage: the HDF5 file of a run and the per-record parts it is built from.
//!
//! Stages produce plain Rust values; the run turns each record's results into a
//! [`Group`] tree (attributes, 1-D datasets, sub-groups) that is
//! - saved as a JSON *part* file per record as soon as the record is done, so an
//!   interrupted run keeps every finished record and a re-run can resume, and
//! - assembled into `results.h5` at the end of the run, written to a temporary
//!   file and renamed on success so no reader ever sees a half-written file.
//!
//! The layout of `results.h5` is documented in `docs/results-h5.md` at the
//! repository root.

pub mod h5;
pub mod time;
pub mod tree;

pub use h5::{write_results, ResultsWriter};
pub use time::{iso_from_unix, utc_now};
pub use tree::{Attr, Data, Dataset, Group};

use std::path::{Path, PathBuf};

/// Errors of the store, each naming the file concerned.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{path}: HDF5 error: {message}")]
    Hdf5 { path: PathBuf, message: String },
    #[error("{path}: {message}")]
    Invalid { path: PathBuf, message: String },
}

/// Write `bytes` to `path` atomically: a temporary sibling file, fsync, rename.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), StoreError> {
    let tmp = stage(path, bytes)?;
    commit(&tmp, path)
}

/// First half of [`write_atomic`]: write `bytes` to the temporary sibling of `path`
/// (created with its folder if needed), without fsync; returns the temporary path.
/// [`commit`] finishes the write, possibly on another thread: `path` itself is not
/// touched until then, so a reader never sees a half-written file.
pub fn stage(path: &Path, bytes: &[u8]) -> Result<PathBuf, StoreError> {
    stage_with(path, &mut |f| f.write_all(bytes))
}

/// [`stage`] with the content written by `write` (through a buffer), so that
/// large content never needs to be held whole in memory.
pub fn stage_with(
    path: &Path,
    write: &mut dyn FnMut(&mut dyn std::io::Write) -> std::io::Result<()>,
) -> Result<PathBuf, StoreError> {
    use std::io::Write;
    let io = |source| StoreError::Io {
        path: path.to_path_buf(),
        source,
    };
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(io)?;
    let tmp = tmp_sibling(path);
    let written = std::fs::File::create(&tmp).and_then(|f| {
        let mut w = std::io::BufWriter::with_capacity(1 << 20, f);
        write(&mut w)?;
        w.flush()
    });
    if let Err(e) = written {
        let _ = std::fs::remove_file(&tmp);
        return Err(io(e));
    }
    Ok(tmp)
}

/// Second half of [`write_atomic`]: fsync the staged file `tmp` and rename it to
/// `path`. On failure the temporary file is removed and `path` is left as it was.
pub fn commit(tmp: &Path, path: &Path) -> Result<(), StoreError> {
    let r = std::fs::File::open(tmp)
        .and_then(|f| f.sync_all())
        .and_then(|()| std::fs::rename(tmp, path));
    r.map_err(|source| {
        let _ = std::fs::remove_file(tmp);
        StoreError::Io {
            path: path.to_path_buf(),
            source,
        }
    })
}

/// The temporary name used while `path` is being written (`.<name>.tmp-<pid>`).
pub fn tmp_sibling(path: &Path) -> PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    path.with_file_name(format!(".{name}.tmp-{}", std::process::id()))
}

/// A finished record as kept between runs: the key it was computed under and its tree.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Part {
    /// Record name (the HDF5 group name under `/records`).
    pub record: String,
    /// Hash of tool version, config and input checksums; a part is reused only when it matches.
    pub key: String,
    pub group: Group,
}

impl Part {
    /// Save atomically as JSON.
    pub fn save(&self, path: &Path) -> Result<(), StoreError> {
        let tmp = self.stage_json(path)?;
        commit(&tmp, path)
    }

    /// [`stage`] for the part's JSON, written as it is serialized: a long
    /// record's part (close to 1 GB of JSON for a 24-hour 12-lead record)
    /// is never held whole in memory.
    pub fn stage_json(&self, path: &Path) -> Result<PathBuf, StoreError> {
        stage_with(path, &mut |w| {
            serde_json::to_writer(w, self).map_err(std::io::Error::other)
        })
    }

    /// Load a part; a missing file is `Ok(None)`, a damaged one an error.
    pub fn load(path: &Path) -> Result<Option<Part>, StoreError> {
        match std::fs::read(path) {
            Ok(bytes) => {
                serde_json::from_slice(&bytes)
                    .map(Some)
                    .map_err(|e| StoreError::Invalid {
                        path: path.to_path_buf(),
                        message: format!("damaged part file: {e}"),
                    })
            }
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
            Err(source) => Err(StoreError::Io {
                path: path.to_path_buf(),
                source,
            }),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn atomic_write_leaves_no_temporary() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("a/b.txt");
        write_atomic(&p, b"hello").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"hello");
        let names: Vec<_> = std::fs::read_dir(p.parent().unwrap()).unwrap().collect();
        assert_eq!(names.len(), 1);
    }

    #[test]
    fn staged_file_replaces_the_target_only_at_commit() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("c/d.txt");
        write_atomic(&p, b"old").unwrap();
        let tmp = stage(&p, b"new").unwrap();
        // Until the commit the target keeps its old content.
        assert_eq!(std::fs::read(&p).unwrap(), b"old");
        assert_ne!(tmp, p);
        commit(&tmp, &p).unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"new");
        assert!(!tmp.exists());
        // A commit that cannot happen (staged file gone) names the target and
        // leaves it as it was.
        let e = commit(&tmp, &p).unwrap_err();
        assert!(e.to_string().contains("d.txt"), "{e}");
        assert_eq!(std::fs::read(&p).unwrap(), b"new");
    }

    #[test]
    fn part_round_trip_and_damage_detected() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.json");
        let mut g = Group::default();
        g.attr("fs", Attr::Float(250.0));
        g.dataset("x", Data::I64(vec![1, 2, 3]));
        g.attr("missing", Attr::Float(f64::NAN));
        g.dataset("y", Data::F64(vec![1.5, f64::NAN]));
        let part = Part {
            record: "r".into(),
            key: "k".into(),
            group: g,
        };
        part.save(&p).unwrap();
        // NaN (missing values) must survive JSON, where NaN != NaN forbids a plain assert_eq.
        let back = Part::load(&p).unwrap().unwrap();
        assert_eq!(
            serde_json::to_string(&back).unwrap(),
            serde_json::to_string(&part).unwrap()
        );
        assert!(matches!(back.group.attrs["missing"], Attr::Float(v) if v.is_nan()));
        assert!(
            matches!(&back.group.datasets["y"].data, Data::F64(v) if v[0] == 1.5 && v[1].is_nan())
        );
        assert_eq!(Part::load(&d.path().join("none.json")).unwrap(), None);
        std::fs::write(&p, b"{not json").unwrap();
        let e = Part::load(&p).unwrap_err().to_string();
        assert!(e.contains("r.json") && e.contains("damaged"), "{e}");
    }

    // Part files of earlier versions wrote f32 arrays as JSON arrays with
    // `null` for NaN: they still load, as the same values.
    #[test]
    fn part_with_f32_arrays_in_the_array_form_loads() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("old.json");
        std::fs::write(
            &p,
            br#"{"record":"r","key":"k","group":{"attrs":{},"datasets":{
                "c":{"data":{"F32":[0.5,null,-2.25]},"attrs":{}},
                "m":{"data":{"F32Matrix":{"cols":2,"values":[1.0,2.0,null,4.0]}},"attrs":{}},
                "n":{"data":{"F32Nd":{"shape":[1,2],"values":[3.5,null]}},"attrs":{}}},
                "groups":{}}}"#,
        )
        .unwrap();
        let part = Part::load(&p).unwrap().unwrap();
        let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        let Data::F32(c) = &part.group.datasets["c"].data else {
            panic!("F32 expected");
        };
        assert_eq!(bits(c), bits(&[0.5, f32::NAN, -2.25]));
        let Data::F32Matrix { cols, values } = &part.group.datasets["m"].data else {
            panic!("F32Matrix expected");
        };
        assert_eq!((*cols, bits(values)), (2, bits(&[1.0, 2.0, f32::NAN, 4.0])));
        let Data::F32Nd { shape, values } = &part.group.datasets["n"].data else {
            panic!("F32Nd expected");
        };
        assert_eq!(
            (shape.clone(), bits(values)),
            (vec![1, 2], bits(&[3.5, f32::NAN]))
        );
        // Saved again, the values come back in the packed form with the same bits.
        part.save(&p).unwrap();
        let text = std::fs::read_to_string(&p).unwrap();
        assert!(text.contains(r#""F32":""#), "{text}");
        let again = Part::load(&p).unwrap().unwrap();
        let Data::F32(c2) = &again.group.datasets["c"].data else {
            panic!("F32 expected");
        };
        assert_eq!(bits(c2), bits(c));
    }

    // A resumed record reads its values back from its part file, a fresh one
    // writes them from memory: both must be the same bits (serde_json parses
    // floats exactly only with its `float_roundtrip` feature). The first value
    // is a QTc of QTDB sel811 that a lossy parse moved by one unit in the last place.
    #[test]
    fn part_floats_round_trip_bit_for_bit() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.json");
        let mut s = 12345u64;
        let mut v = vec![393.65000000000003, 0.1 + 0.2, 1e-300, -2.5e300, 5e-324];
        v.extend((0..20_000).map(|_| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            f64::from_bits(s >> 2) // positive, below 2, down to subnormals
        }));
        let mut g = Group::default();
        g.dataset("v", Data::F64(v.clone()));
        let part = Part {
            record: "r".into(),
            key: "k".into(),
            group: g,
        };
        part.save(&p).unwrap();
        let back = Part::load(&p).unwrap().unwrap();
        let Data::F64(w) = &back.group.datasets["v"].data else {
            panic!("dataset type changed");
        };
        assert_eq!(w.len(), v.len());
        for (a, b) in v.iter().zip(w) {
            assert_eq!(a.to_bits(), b.to_bits(), "{a:e} read back as {b:e}");
        }
    }
}
