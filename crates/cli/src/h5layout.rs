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
/// (window `w` owns `offsets[w]..offsets[w+1]`). A per-window matrix (the median
/// beat, leads × samples) becomes `[W, leads, samples]`.
fn stack(per_window: &[Option<&Dataset>]) -> Dataset {
    let w = per_window.len();
    let present: Vec<&Dataset> = per_window.iter().flatten().copied().collect();
    let mut attrs = present.first().map(|d| d.attrs.clone()).unwrap_or_default();
    if let Some(Data::F32Matrix { .. }) = present.first().map(|d| &d.data) {
        let shapes: BTreeSet<(usize, usize)> = present
            .iter()
            .filter_map(|d| match &d.data {
                Data::F32Matrix { cols, values } if *cols > 0 => Some((values.len() / cols, *cols)),
                _ => None,
            })
            .collect();
        let (rows, cols) = if shapes.len() == 1 {
            *shapes.iter().next().expect("one shape")
        } else {
            (0, 0)
        };
        let mut values = Vec::with_capacity(w * rows * cols);
        for d in per_window {
            match d.map(|d| &d.data) {
                Some(Data::F32Matrix { cols: c, values: v })
                    if *c == cols && v.len() == rows * cols && cols > 0 =>
                {
                    values.extend_from_slice(v)
                }
                _ => values.extend(std::iter::repeat_n(f32::NAN, rows * cols)),
            }
        }
        return Dataset {
            data: Data::F32Nd {
                shape: vec![w, rows, cols],
                values,
            },
            attrs,
        };
    }
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

/// Replace `windows/medians/<WWW>/…` by stacked arrays `windows/medians/…`.
pub fn stack_medians(record: &mut Group) {
    let Some(windows) = record.groups.get_mut("windows") else {
        return;
    };
    let Some(medians) = windows.groups.remove("medians") else {
        return;
    };
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
        put(&mut out, p, stack(&per));
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
            matches!(&m.datasets["beat"].data, Data::F32Nd { shape, .. } if shape == &vec![2, 2, 3])
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
