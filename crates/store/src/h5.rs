//! Writing a tree of groups to an HDF5 file through the `hdf5-metno` binding.

use crate::tree::{Attr, Data, Group};
use crate::{tmp_sibling, StoreError};
use hdf5::types::VarLenUnicode;
use std::collections::BTreeSet;
use std::path::Path;
use std::str::FromStr;

fn h5err(path: &Path) -> impl Fn(hdf5::Error) -> StoreError + '_ {
    move |e| StoreError::Hdf5 {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

fn vlu(path: &Path, s: &str) -> Result<VarLenUnicode, StoreError> {
    // HDF5 strings cannot hold NUL; replace rather than fail a whole run on a stray byte.
    VarLenUnicode::from_str(&s.replace('\0', " ")).map_err(|e| StoreError::Invalid {
        path: path.to_path_buf(),
        message: format!("string not storable in HDF5: {e}"),
    })
}

fn write_attr(loc: &hdf5::Location, path: &Path, name: &str, a: &Attr) -> Result<(), StoreError> {
    let e = h5err(path);
    match a {
        Attr::Int(v) => loc
            .new_attr::<i64>()
            .create(name)
            .and_then(|at| at.write_scalar(v)),
        Attr::Float(v) => loc
            .new_attr::<f64>()
            .create(name)
            .and_then(|at| at.write_scalar(v)),
        Attr::Text(s) => {
            let v = vlu(path, s)?;
            loc.new_attr::<VarLenUnicode>()
                .create(name)
                .and_then(|at| at.write_scalar(&v))
        }
        Attr::Floats(v) => loc
            .new_attr_builder()
            .with_data(v.as_slice())
            .create(name)
            .map(|_| ()),
        Attr::Texts(v) => {
            let v = v
                .iter()
                .map(|s| vlu(path, s))
                .collect::<Result<Vec<_>, _>>()?;
            loc.new_attr_builder()
                .with_data(v.as_slice())
                .create(name)
                .map(|_| ())
        }
    }
    .map_err(e)
}

/// A view of `values` with `shape` (no copy: the writer reads the slice).
fn nd<'a, T>(
    path: &Path,
    shape: &[usize],
    values: &'a [T],
) -> Result<ndarray::ArrayViewD<'a, T>, StoreError> {
    ndarray::ArrayViewD::from_shape(ndarray::IxDyn(shape), values).map_err(|e| {
        StoreError::Invalid {
            path: path.to_path_buf(),
            message: format!("array of shape {shape:?} with {} values: {e}", values.len()),
        }
    })
}

/// A one-dimensional variable-length string dataset. Written through a
/// transfer property list whose conversion buffer fits the data: with the
/// default list the library allocates and zeroes a 1 MiB conversion buffer
/// for every string dataset, however few strings it holds. The dataset
/// itself (type, shape, layout) is the one `with_data` creates.
fn write_text(g: &hdf5::Group, name: &str, v: &[VarLenUnicode]) -> hdf5::Result<hdf5::Dataset> {
    use hdf5_sys::{h5d, h5i::hid_t, h5p, h5s};
    let ds = g
        .new_dataset::<VarLenUnicode>()
        .shape(v.len())
        .create(name)?;
    if v.is_empty() {
        return Ok(ds);
    }
    let mem = hdf5::Datatype::from_type::<VarLenUnicode>()?;
    // Memory and file elements are both a pointer-sized handle pair or
    // smaller; 32 bytes per string holds either, at least one page.
    let bytes = (v.len() * 32).clamp(4096, 1 << 20);
    let _guard = hdf5_sys::LOCK.lock();
    // SAFETY: `ds` and `mem` are open handles kept alive for the call, `v`
    // holds `v.len()` elements of the memory type, and the property list is
    // closed on every path; the library lock serialises the calls.
    let status = unsafe {
        let dxpl: hid_t = h5p::H5Pcreate(*h5p::H5P_CLS_DATASET_XFER);
        if dxpl < 0 {
            -1
        } else {
            let mut r = h5p::H5Pset_buffer(dxpl, bytes, std::ptr::null_mut(), std::ptr::null_mut());
            if r >= 0 {
                r = h5d::H5Dwrite(
                    ds.id(),
                    mem.id(),
                    h5s::H5S_ALL,
                    h5s::H5S_ALL,
                    dxpl,
                    v.as_ptr().cast(),
                );
            }
            h5p::H5Pclose(dxpl);
            r
        }
    };
    if status < 0 {
        return Err(hdf5::Error::from(format!(
            "writing {} strings to `{name}` failed",
            v.len()
        )));
    }
    Ok(ds)
}

/// Stacks up to this size are joined and written in one call (a QT Database
/// record's median beats: about 1 MB in 90 blocks), larger ones block by block,
/// which adds a write call per block but no second copy of the data.
const STACK_JOIN_BYTES: usize = 16 << 20;

/// A [`Data::F32Stack`] as one `[shape]` dataset: joined into one buffer when
/// it takes at most `join_bytes`, else written one leading-axis slab per
/// block. A block of the wrong length is an error naming the dataset.
fn write_stack(
    g: &hdf5::Group,
    path: &Path,
    name: &str,
    shape: [usize; 3],
    blocks: &[Vec<f32>],
    join_bytes: usize,
) -> hdf5::Result<hdf5::Dataset> {
    let per = shape[1] * shape[2];
    if blocks.len() != shape[0] || blocks.iter().any(|b| b.len() != per) {
        return Err(hdf5::Error::from(format!(
            "{}: `{name}`: {} blocks of {:?} values for shape {shape:?}",
            path.display(),
            blocks.len(),
            blocks.iter().map(Vec::len).collect::<BTreeSet<_>>()
        )));
    }
    if shape[0] * per * 4 <= join_bytes {
        let joined: Vec<f32> = blocks.concat();
        let arr = ndarray::ArrayView3::from_shape(shape, &joined)
            .map_err(|e| hdf5::Error::from(e.to_string()))?;
        return g.new_dataset_builder().with_data(arr).create(name);
    }
    let ds = g.new_dataset::<f32>().shape(shape.to_vec()).create(name)?;
    for (k, b) in blocks.iter().enumerate() {
        let arr = ndarray::ArrayView3::from_shape((1, shape[1], shape[2]), b)
            .map_err(|e| hdf5::Error::from(e.to_string()))?;
        ds.write_slice(arr, ndarray::s![k..k + 1, .., ..])?;
    }
    Ok(ds)
}

fn write_group(g: &hdf5::Group, path: &Path, tree: &Group) -> Result<(), StoreError> {
    let e = h5err(path);
    for (name, a) in &tree.attrs {
        write_attr(g, path, name, a)?;
    }
    for (name, ds) in &tree.datasets {
        let b = g.new_dataset_builder();
        let d = match &ds.data {
            Data::I64(v) => b.with_data(v.as_slice()).create(name.as_str()),
            Data::F64(v) => b.with_data(v.as_slice()).create(name.as_str()),
            Data::F32(v) => b.with_data(v.as_slice()).create(name.as_str()),
            Data::Text(v) => {
                let v = v
                    .iter()
                    .map(|s| vlu(path, s))
                    .collect::<Result<Vec<_>, _>>()?;
                write_text(g, name, &v)
            }
            Data::F32Matrix { cols, values } => {
                let rows = values.len().checked_div(*cols).unwrap_or(0);
                assert_eq!(
                    rows * cols,
                    values.len(),
                    "rows * cols == len by construction"
                );
                let arr = ndarray::ArrayView2::from_shape((rows, *cols), values.as_slice())
                    .expect("rows * cols == len");
                b.with_data(arr).create(name.as_str())
            }
            Data::I64Nd { shape, values } => {
                b.with_data(nd(path, shape, values)?).create(name.as_str())
            }
            Data::F64Nd { shape, values } => {
                b.with_data(nd(path, shape, values)?).create(name.as_str())
            }
            Data::F32Nd { shape, values } => {
                b.with_data(nd(path, shape, values)?).create(name.as_str())
            }
            Data::F32Stack { shape, blocks } => {
                write_stack(g, path, name, *shape, blocks, STACK_JOIN_BYTES)
            }
        }
        .map_err(&e)?;
        for (an, a) in &ds.attrs {
            write_attr(&d, path, an, a)?;
        }
    }
    for (name, sub) in &tree.groups {
        let sg = g.create_group(name).map_err(&e)?;
        write_group(&sg, path, sub)?;
    }
    Ok(())
}

/// An HDF5 results file being written one record at a time, so memory stays bounded
/// whatever the number of records. Written to a temporary sibling and renamed over
/// the final path by [`ResultsWriter::finish`]; dropped unfinished, it removes the
/// temporary and leaves any previous file untouched.
pub struct ResultsWriter {
    file: Option<hdf5::File>,
    records: Option<hdf5::Group>,
    tmp: std::path::PathBuf,
    path: std::path::PathBuf,
}

impl ResultsWriter {
    /// Start a file with the root attributes and groups of `root`, and an empty `/records`.
    pub fn create(path: &Path, root: &Group) -> Result<Self, StoreError> {
        let tmp = tmp_sibling(path);
        let mut w = ResultsWriter {
            file: None,
            records: None,
            tmp: tmp.clone(),
            path: path.to_path_buf(),
        };
        // The 1.8+ file format stores small groups compactly (links in the object header
        // instead of a B-tree and heap per group), which makes files with many small
        // per-record groups several times smaller; h5py and HDF5 ≥ 1.8 read it.
        let f = hdf5::File::with_options()
            .with_fapl(|p| p.libver_v18())
            .create(&tmp)
            .map_err(h5err(path))?;
        write_group(&f, path, root)?;
        w.records = Some(match f.group("records") {
            Ok(g) => g,
            Err(_) => f.create_group("records").map_err(h5err(path))?,
        });
        w.file = Some(f);
        Ok(w)
    }

    /// Write one record as `/records/<name>`.
    pub fn add_record(&mut self, name: &str, group: &Group) -> Result<(), StoreError> {
        let recs = self.records.as_ref().expect("open until finish");
        let g = recs.create_group(name).map_err(h5err(&self.path))?;
        write_group(&g, &self.path, group)
    }

    /// Add an attribute to the root group (e.g. one known only at the end).
    pub fn root_attr(&mut self, name: &str, a: &Attr) -> Result<(), StoreError> {
        let f = self.file.as_ref().expect("open until finish");
        write_attr(f, &self.path, name, a)
    }

    /// Close the file and move it into place.
    pub fn finish(mut self) -> Result<(), StoreError> {
        self.records = None;
        if let Some(f) = self.file.take() {
            f.close().map_err(h5err(&self.path))?;
        }
        std::fs::rename(&self.tmp, &self.path).map_err(|source| StoreError::Io {
            path: self.path.clone(),
            source,
        })
    }
}

impl Drop for ResultsWriter {
    fn drop(&mut self) {
        if self.file.is_some() {
            self.records = None;
            self.file = None;
            let _ = std::fs::remove_file(&self.tmp);
        }
    }
}

/// Write `root` (attributes and groups) to `path` in one go (temporary file, then rename).
pub fn write_results(path: &Path, root: &Group) -> Result<(), StoreError> {
    let mut only_root = root.clone();
    let records = only_root.groups.remove("records");
    let mut w = ResultsWriter::create(path, &only_root)?;
    if let Some(r) = records {
        if let Some(a) = r.attrs.keys().next() {
            return Err(StoreError::Invalid {
                path: path.to_path_buf(),
                message: format!("attribute `{a}` on /records is not supported"),
            });
        }
        for (name, g) in &r.groups {
            w.add_record(name, g)?;
        }
    }
    w.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_and_reads_back_with_the_binding() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.h5");
        let mut root = Group::default();
        root.attr("tool_version", Attr::Text("0.1.0".into()));
        let r = root.group("records").group("rec1");
        r.attr("fs", Attr::Float(250.0));
        r.attr("leads", Attr::Texts(vec!["MLII".into(), "V5".into()]));
        r.group("beats")
            .dataset_with_units("qrs_peak", Data::I64(vec![10, 20]), "sample");
        r.group("beats")
            .dataset("label", Data::Text(vec!["N".into(), "V".into()]));
        // Many strings (a conversion buffer of its own size) and an empty
        // string dataset.
        let many: Vec<String> = (0..5000).map(|i| format!("s{i}\u{e9}")).collect();
        r.dataset("many", Data::Text(many.clone()));
        r.dataset("none", Data::Text(Vec::new()));
        r.dataset(
            "m",
            Data::F32Matrix {
                cols: 2,
                values: vec![1.0, 2.0, 3.0, 4.0],
            },
        );
        r.dataset(
            "cube",
            Data::F32Nd {
                shape: vec![2, 1, 3],
                values: vec![0.0, 1.0, 2.0, 3.0, 4.0, 5.0],
            },
        );
        write_results(&p, &root).unwrap();
        let f = hdf5::File::open(&p).unwrap();
        let q: Vec<i64> = f
            .dataset("records/rec1/beats/qrs_peak")
            .unwrap()
            .read_raw()
            .unwrap();
        assert_eq!(q, vec![10, 20]);
        let read_text = |name: &str| -> Vec<String> {
            let ds = f.dataset(name).unwrap();
            assert_eq!(ds.shape().len(), 1, "{name} is one-dimensional");
            ds.read_raw::<VarLenUnicode>()
                .unwrap()
                .iter()
                .map(|s| s.as_str().to_string())
                .collect()
        };
        assert_eq!(read_text("records/rec1/beats/label"), vec!["N", "V"]);
        assert_eq!(read_text("records/rec1/many"), many);
        assert!(read_text("records/rec1/none").is_empty());
        let fs: f64 = f
            .group("records/rec1")
            .unwrap()
            .attr("fs")
            .unwrap()
            .read_scalar()
            .unwrap();
        assert_eq!(fs, 250.0);
        let shape = f.dataset("records/rec1/m").unwrap().shape();
        assert_eq!(shape, vec![2, 2]);
        let cube = f.dataset("records/rec1/cube").unwrap();
        assert_eq!(cube.shape(), vec![2, 1, 3]);
        let v: Vec<f32> = cube.read_raw().unwrap();
        assert_eq!(v, vec![0.0, 1.0, 2.0, 3.0, 4.0, 5.0]);
        // Only the final file remains.
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 1);
    }

    /// A stack written joined and block by block reads back as the joined
    /// values (the oracle: the blocks concatenated), NaN blocks included; a
    /// block of the wrong length is an error naming the dataset.
    #[test]
    fn stacks_read_back_as_their_blocks_joined() {
        let d = tempfile::tempdir().unwrap();
        let f = hdf5::File::create(d.path().join("s.h5")).unwrap();
        let blocks: Vec<Vec<f32>> = (0..5)
            .map(|k| {
                (0..6)
                    .map(|i| {
                        if k == 2 {
                            f32::NAN
                        } else {
                            (10 * k + i) as f32
                        }
                    })
                    .collect()
            })
            .collect();
        let joined = blocks.concat();
        let path = Path::new("s.h5");
        for (name, limit) in [("joined", usize::MAX), ("slabs", 0)] {
            write_stack(&f, path, name, [5, 2, 3], &blocks, limit).unwrap();
            let ds = f.dataset(name).unwrap();
            assert_eq!(ds.shape(), vec![5, 2, 3], "{name}");
            let v: Vec<f32> = ds.read_raw().unwrap();
            assert_eq!(v.len(), joined.len());
            for (a, b) in v.iter().zip(&joined) {
                assert!(a == b || (a.is_nan() && b.is_nan()), "{name}: {a} vs {b}");
            }
        }
        let empty = vec![Vec::new(); 3];
        write_stack(&f, path, "empty", [3, 0, 0], &empty, 0).unwrap();
        assert_eq!(f.dataset("empty").unwrap().shape(), vec![3, 0, 0]);
        let mut bad = blocks.clone();
        bad[3].pop();
        let e = write_stack(&f, path, "bad", [5, 2, 3], &bad, 0).unwrap_err();
        assert!(e.to_string().contains("`bad`"), "{e}");
    }

    #[test]
    fn unfinished_writer_leaves_previous_file_and_no_temporary() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("r.h5");
        std::fs::write(&p, b"previous").unwrap();
        {
            let mut w = ResultsWriter::create(&p, &Group::default()).unwrap();
            w.add_record("a", &Group::default()).unwrap();
            // dropped without finish(), as on an error mid-run
        }
        assert_eq!(std::fs::read(&p).unwrap(), b"previous");
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 1);
    }
}
