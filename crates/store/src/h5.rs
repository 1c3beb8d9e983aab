//! Writing a tree of groups to an HDF5 file through the `hdf5-metno` binding.

use crate::tree::{Attr, Data, Group};
use crate::{tmp_sibling, StoreError};
use hdf5::types::VarLenUnicode;
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
                b.with_data(v.as_slice()).create(name.as_str())
            }
            Data::F32Matrix { cols, values } => {
                let rows = values.len().checked_div(*cols).unwrap_or(0);
                let arr = ndarray::Array2::from_shape_vec((rows, *cols), values.clone())
                    .expect("rows * cols == len by construction");
                b.with_data(&arr).create(name.as_str())
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

/// Write `root` (attributes and groups) to `path`: to a temporary sibling first,
/// renamed over `path` only when everything was written and the file closed.
pub fn write_results(path: &Path, root: &Group) -> Result<(), StoreError> {
    let tmp = tmp_sibling(path);
    let result = (|| {
        let f = hdf5::File::create(&tmp).map_err(h5err(path))?;
        write_group(&f, path, root)?;
        f.close().map_err(h5err(path))
    })();
    match result {
        Ok(()) => std::fs::rename(&tmp, path).map_err(|source| StoreError::Io {
            path: path.to_path_buf(),
            source,
        }),
        Err(e) => {
            let _ = std::fs::remove_file(&tmp);
            Err(e)
        }
    }
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
        r.dataset(
            "m",
            Data::F32Matrix {
                cols: 2,
                values: vec![1.0, 2.0, 3.0, 4.0],
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
        // Only the final file remains.
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 1);
    }
}
