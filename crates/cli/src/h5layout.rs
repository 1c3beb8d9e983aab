//! How a record's tree is laid out in `results.h5`, where it differs from the part
//! file: the median beats of all windows are stacked into per-record arrays with a
//! leading window axis, instead of one group per window. HDF5 pays for every
//! dataset (header, allocation, name lookup), and a 15-minute record has 90
//! windows; stacking cuts thousands of tiny datasets per record to a few dozen.
//! The part files (read by `review` and `apply`) keep one group per window.

use std::collections::{BTreeMap, BTreeSet};
use tendline_store::{Attr, Data, Dataset, Group};

/// Every dataset below `g`, keyed by its path relative to `g` (`marks/t_end`).
fn flatten<'a>(g: &'a Group, prefix: &str, out: &mut BTreeMap<String, &'a Dataset>) {
    for (k, d) in &g.datasets {
        out.insert(format!("{prefix}{k}"), d);
    }
    for (k, sub) in &g.groups {
        flatten(sub, &format!("{prefix}{k}/"), out);
    }
}

/// Put `ds` at `path` (slash-separated) below `g`, creating groups.
fn put(g: &mut Group, path: &str, ds: Dataset) {
    match path.split_once('/') {
        Some((head, rest)) => put(g.group(head), rest, ds),
        None => {
            g.datasets.insert(path.to_string(), ds);
        }
    }
}

/// Stack one dataset across windows: `[W, n]` when every window that has it holds
/// `n` values (windows without it filled with −1 / NaN / ""; text is stored flat with
/// a `shape` attribute), else the values concatenated with an `offsets` attribute
/// (window `w` owns `offsets[w]..offsets[w+1]`). Per-window matrices go to
/// [`stack_matrices`] instead.
fn stack(per_window: &[Option<&Dataset>]) -> Dataset {
    let w = per_window.len();
    let present: Vec<&Dataset> = per_window.iter().flatten().copied().collect();
    let mut attrs = present.first().map(|d| d.attrs.clone()).unwrap_or_default();
    let lens: BTreeSet<usize> = present.iter().map(|d| d.data.rows()).collect();
    let fixed = (lens.len() == 1).then(|| *lens.iter().next().expect("one length"));
    let mut offsets = vec![0.0];
    macro_rules! gather {
        ($variant:ident, $fill:expr) => {{
            let mut v = Vec::new();
            for d in per_window {
                match (d.map(|d| &d.data), fixed) {
                    (Some(Data::$variant(x)), _) => v.extend(x.iter().cloned()),
                    (_, Some(n)) => v.extend(std::iter::repeat_n($fill, n)),
                    _ => {}
                }
                offsets.push(v.len() as f64);
            }
            v
        }};
    }
    let n = fixed.unwrap_or(0);
    let data = match present.first().map(|d| &d.data) {
        Some(Data::I64(_)) => {
            let v = gather!(I64, -1i64);
            if fixed.is_some() {
                Data::I64Nd {
                    shape: vec![w, n],
                    values: v,
                }
            } else {
                Data::I64(v)
            }
        }
        Some(Data::F64(_)) => {
            let v = gather!(F64, f64::NAN);
            if fixed.is_some() {
                Data::F64Nd {
                    shape: vec![w, n],
                    values: v,
                }
            } else {
                Data::F64(v)
            }
        }
        Some(Data::F32(_)) => {
            let v = gather!(F32, f32::NAN);
            if fixed.is_some() {
                Data::F32Nd {
                    shape: vec![w, n],
                    values: v,
                }
            } else {
                Data::F32(v)
            }
        }
        Some(Data::Text(_)) => {
            let v = gather!(Text, String::new());
            if fixed.is_some() {
                attrs.insert("shape".into(), Attr::Floats(vec![w as f64, n as f64]));
            }
            Data::Text(v)
        }
        // Nested stacking does not occur in parts; keep the first window's value.
        _ => {
            return present.first().map(|d| (*d).clone()).unwrap_or(Dataset {
                data: Data::I64(Vec::new()),
                attrs,
            })
        }
    };
    if fixed.is_none() {
        attrs.insert("offsets".into(), Attr::Floats(offsets));
    }
    Dataset { data, attrs }
}

/// One window's matrix: its column count and values (row-major).
type Matrix = (usize, Vec<f32>);

/// Every per-window matrix (`F32Matrix`) below `g`, taken out (its values
/// left empty) with its path relative to `g` and its column count.
fn take_matrices(g: &mut Group, prefix: &str, out: &mut Vec<(String, usize, Vec<f32>)>) {
    for (k, d) in g.datasets.iter_mut() {
        if let Data::F32Matrix { cols, values } = &mut d.data {
            out.push((format!("{prefix}{k}"), *cols, std::mem::take(values)));
        }
    }
    for (k, sub) in g.groups.iter_mut() {
        take_matrices(sub, &format!("{prefix}{k}/"), out);
    }
}

/// Per-window matrices (leads × samples; `None` where a window lacks one)
/// as one `[W, leads, samples]` stack whose blocks are the windows' own
/// vectors, moved, not copied; a window whose matrix is missing or empty is
/// filled with NaN, and matrices of more than one shape give `[W, 0, 0]`.
fn stack_matrices(
    blocks: Vec<Option<(usize, Vec<f32>)>>,
    attrs: BTreeMap<String, Attr>,
) -> Dataset {
    let shapes: BTreeSet<(usize, usize)> = blocks
        .iter()
        .flatten()
        .filter(|(cols, _)| *cols > 0)
        .map(|(cols, v)| (v.len() / cols, *cols))
        .collect();
    let (rows, cols) = if shapes.len() == 1 {
        *shapes.iter().next().expect("one shape")
    } else {
        (0, 0)
    };
    let w = blocks.len();
    let blocks = blocks
        .into_iter()
        .map(|b| match b {
            Some((c, v)) if c == cols && v.len() == rows * cols && cols > 0 => v,
            _ => vec![f32::NAN; rows * cols],
        })
        .collect();
    Dataset {
        data: Data::F32Stack {
            shape: [w, rows, cols],
            blocks,
        },
        attrs,
    }
}

/// Replace `windows/medians/<WWW>/…` by stacked arrays `windows/medians/…`.
pub fn stack_medians(record: &mut Group) {
    let Some(windows) = record.groups.get_mut("windows") else {
        return;
    };
    let Some(mut medians) = windows.groups.remove("medians") else {
        return;
    };
    // The median beats are the bulk of a long record's results (a 24-hour
    // 12-lead record: 0.54 GB): they move into the stack instead of being
    // copied.
    let n_windows = medians.groups.len();
    let mut matrices: BTreeMap<String, Vec<Option<Matrix>>> = BTreeMap::new();
    for (k, g) in medians.groups.values_mut().enumerate() {
        let mut taken = Vec::new();
        take_matrices(g, "", &mut taken);
        for (path, cols, values) in taken {
            matrices
                .entry(path)
                .or_insert_with(|| vec![None; n_windows])[k] = Some((cols, values));
        }
    }
    let wins: Vec<&Group> = medians.groups.values().collect();
    let mut paths: BTreeSet<String> = BTreeSet::new();
    let flat: Vec<BTreeMap<String, &Dataset>> = wins
        .iter()
        .map(|g| {
            let mut m = BTreeMap::new();
            flatten(g, "", &mut m);
            paths.extend(m.keys().cloned());
            m
        })
        .collect();
    let mut out = Group::default();
    for p in &paths {
        let per: Vec<Option<&Dataset>> = flat.iter().map(|m| m.get(p).copied()).collect();
        let ds = match matrices.remove(p) {
            Some(blocks) => {
                let attrs = per.iter().flatten().next().map(|d| d.attrs.clone());
                stack_matrices(blocks, attrs.unwrap_or_default())
            }
            None => stack(&per),
        };
        put(&mut out, p, ds);
    }
    // Window attributes: the same in every window become group attributes; others columns.
    if let Some(first) = wins.first() {
        for (k, a) in &first.attrs {
            if wins.iter().all(|w| w.attrs.get(k) == Some(a)) {
                out.attrs.insert(k.clone(), a.clone());
            } else {
                let col: Vec<f64> = wins
                    .iter()
                    .map(|w| match w.attrs.get(k) {
                        Some(Attr::Float(v)) => *v,
                        Some(Attr::Int(v)) => *v as f64,
                        _ => f64::NAN,
                    })
                    .collect();
                out.dataset(k, Data::F64(col));
            }
        }
    }
    out.attrs.insert(
        "layout".into(),
        Attr::Text("stacked: leading axis = window".into()),
    );
    windows.groups.insert("medians".into(), out);
}

#[cfg(test)]
mod tests {
    use super::*;

    fn window(qt: [f64; 2], used: Vec<i64>, corrected: Option<i64>) -> Group {
        let mut g = Group::default();
        g.attr("fiducial", Attr::Int(100));
        g.attr("start_s", Attr::Float(used[0] as f64));
        g.dataset("qt_ms", Data::F64(qt.to_vec()));
        g.dataset("beats_used", Data::I64(used));
        g.dataset(
            "beat",
            Data::F32Matrix {
                cols: 3,
                values: vec![1.0; 6],
            },
        );
        g.group("marks").dataset("t_end", Data::I64(vec![10, 11]));
        if let Some(c) = corrected {
            g.group("corrected")
                .group("marks")
                .dataset("t_end", Data::I64(vec![c, -1]));
        }
        g
    }

    /// Windows without a matrix or with an empty one are NaN blocks; the
    /// others keep their values; matrices of two shapes give `[W, 0, 0]`.
    #[test]
    fn matrices_stack_by_window_with_nan_fill() {
        let a = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
        let blocks = vec![
            Some((3, a.clone())),
            None,
            Some((0, Vec::new())),
            Some((3, a.clone())),
        ];
        let d = stack_matrices(blocks, BTreeMap::new());
        let Data::F32Stack { shape, blocks } = d.data else {
            panic!("a stack expected");
        };
        assert_eq!(shape, [4, 2, 3]);
        assert_eq!(blocks[0], a);
        assert_eq!(blocks[3], a);
        for b in &blocks[1..3] {
            assert!(b.len() == 6 && b.iter().all(|x| x.is_nan()));
        }
        let d = stack_matrices(vec![Some((3, a.clone())), Some((2, a))], BTreeMap::new());
        assert!(
            matches!(d.data, Data::F32Stack { shape: [2, 0, 0], blocks } if blocks.iter().all(Vec::is_empty))
        );
    }

    #[test]
    fn windows_are_stacked_with_fill_and_offsets() {
        let mut rec = Group::default();
        let med = rec.group("windows").group("medians");
        med.groups
            .insert("000".into(), window([400.0, 410.0], vec![5, 9], None));
        med.groups.insert(
            "001".into(),
            window([420.0, f64::NAN], vec![20, 24, 28], Some(15)),
        );
        stack_medians(&mut rec);
        let m = &rec.groups["windows"].groups["medians"];
        assert!(matches!(&m.datasets["qt_ms"].data,
            Data::F64Nd { shape, values } if shape == &vec![2, 2] && values[..3] == [400.0, 410.0, 420.0] && values[3].is_nan()));
        assert!(
            matches!(&m.datasets["beat"].data, Data::F32Stack { shape, blocks } if shape == &[2, 2, 3] && blocks.iter().all(|b| b == &vec![1.0; 6]))
        );
        // Ragged: concatenated with offsets 0, 2, 5.
        let used = &m.datasets["beats_used"];
        assert_eq!(used.data, Data::I64(vec![5, 9, 20, 24, 28]));
        assert_eq!(used.attrs["offsets"], Attr::Floats(vec![0.0, 2.0, 5.0]));
        // Present only in window 1: window 0 filled with -1.
        assert_eq!(
            m.groups["corrected"].groups["marks"].datasets["t_end"].data,
            Data::I64Nd {
                shape: vec![2, 2],
                values: vec![-1, -1, 15, -1]
            }
        );
        // Same in every window → attribute; differing → column.
        assert_eq!(m.attrs["fiducial"], Attr::Int(100));
        assert_eq!(m.datasets["start_s"].data, Data::F64(vec![5.0, 20.0]));
    }
}
