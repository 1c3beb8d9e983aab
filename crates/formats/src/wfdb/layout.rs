//! Variable-layout multi-segment WFDB records, as bedside-monitor databases
//! store long recordings: the signal set and each signal's gain may change from
//! segment to segment, and gaps are null segments.
//!
//! Structure (WFDB header format, `header(5)` of the WFDB Software Package,
//! from memory): the master header's first segment may be a *layout segment*
//! (`<name>_layout`, 0 samples) whose header lists every signal the record can
//! hold (name, units; its signal file is `~`); the other segments are ordinary
//! single-segment records at the master's frame rate, each with any subset of
//! those signals and its own gains and baselines; a segment named `~` is a gap
//! of the stated length.
//!
//! Read as the `wfdb` Python package reads such a record into one record of
//! physical values (`rdrecord`, which has no digital form for it either):
//! - the signals are the layout's, in its order, with its units; without a
//!   layout segment, the first non-null segment's signals;
//! - each segment's samples are converted with that segment's own gain and
//!   baseline, then placed under the layout signal of the same name (the first
//!   of that name in the segment); a segment signal that the layout does not
//!   name is left out, with a warning;
//! - every sample a segment does not cover (a null segment, or a segment
//!   without that signal) is NaN; the pipeline bridges such gaps like any
//!   missing samples and counts them.
//!
//! Voltages are converted to millivolts segment by segment, so a segment in
//! `uV` and one in `mV` join up; other units must be the same as the layout's.
//! Segments with several samples per frame are rejected as unsupported (the
//! record would change rate from segment to segment).

use std::path::{Path, PathBuf};

use super::{
    check_segment_length, check_segment_name, header_path_of, invalid, read_header, read_single,
    to_mv_factor, to_physical, unsupported, Header,
};
use crate::{FormatError, Lead, Metadata, Record};

/// One signal of the layout: its name and the units of the output lead.
struct LayoutSignal {
    name: String,
    /// Units as written in the layout (`mV` when missing, as the header parser gives).
    units: String,
}

/// Read a variable-layout multi-segment record (`header` is its master header,
/// read from `path`) as one record in physical units.
pub(super) fn read_variable_layout(path: &Path, header: Header) -> Result<Record, FormatError> {
    let dir = path.parent().unwrap_or(Path::new(""));
    let mut files: Vec<PathBuf> = vec![path.to_path_buf()];
    let mut warnings: Vec<String> = Vec::new();
    let mut comments = header.comments.clone();

    // The layout: the layout segment's signals, or the first real segment's.
    let layout_seg = header
        .segments
        .first()
        .filter(|s| s.name.ends_with("_layout"));
    if let Some(seg) = header
        .segments
        .iter()
        .skip(1)
        .find(|s| s.name.ends_with("_layout"))
    {
        return Err(invalid(
            path,
            format!(
                "line {}: layout segment `{}` must be the first segment",
                seg.line, seg.name
            ),
        ));
    }
    let layout_src = match layout_seg {
        Some(seg) => {
            if seg.n_frames != 0 {
                return Err(invalid(
                    path,
                    format!(
                        "line {}: layout segment `{}` has {} samples; a layout segment has none",
                        seg.line, seg.name, seg.n_frames
                    ),
                ));
            }
            Some(seg)
        }
        None => header.segments.iter().find(|s| s.name != "~"),
    };
    let layout_src = layout_src.ok_or_else(|| {
        invalid(
            path,
            "multi-segment record with only null segments: no signal to read",
        )
    })?;
    check_segment_name(path, layout_src)?;
    let layout_path = header_path_of(&dir.join(&layout_src.name));
    let layout_header = read_header(&layout_path)?;
    if layout_header.is_multi_segment() {
        return Err(unsupported(
            &layout_path,
            "a segment of a multi-segment record is itself multi-segment",
        ));
    }
    if layout_header.fs != header.fs {
        return Err(invalid(
            &layout_path,
            format!(
                "layout at {} Hz, the master header says {} Hz",
                layout_header.fs, header.fs
            ),
        ));
    }
    let layout: Vec<LayoutSignal> = layout_header
        .signals
        .iter()
        .map(|s| LayoutSignal {
            name: s.description.clone(),
            units: s.units.clone(),
        })
        .collect();
    for (i, a) in layout.iter().enumerate() {
        if layout[..i].iter().any(|b| b.name == a.name) {
            return Err(invalid(
                &layout_path,
                format!(
                    "signal name `{}` appears twice in the layout; segments are matched to the \
                     layout by name",
                    a.name
                ),
            ));
        }
    }
    if layout.is_empty() {
        return Err(invalid(&layout_path, "the layout lists no signal"));
    }
    if layout_seg.is_some() {
        files.push(layout_path.clone());
        if comments.is_empty() {
            comments = layout_header.comments.clone();
        }
    }

    let total: u64 = header.segments.iter().map(|s| s.n_frames).sum();
    if let Some(n) = header.n_frames {
        if n != total {
            return Err(invalid(
                path,
                format!("the segments hold {total} samples, the record line says {n}"),
            ));
        }
    }
    let total = usize::try_from(total)
        .map_err(|_| invalid(path, format!("{total} samples do not fit in memory")))?;
    let mut out: Vec<Vec<f64>> = vec![vec![f64::NAN; total]; layout.len()];
    // Each layout signal's voltage factor, or None for a non-voltage unit.
    let out_factor: Vec<Option<f64>> = layout.iter().map(|l| to_mv_factor(&l.units)).collect();
    let mut left_out: Vec<(String, Vec<String>)> = Vec::new();

    let mut at = 0usize;
    for seg in &header.segments {
        let n = seg.n_frames as usize;
        if seg.name == "~" || Some(seg) == layout_seg {
            at += n;
            continue;
        }
        check_segment_name(path, seg)?;
        let sp = header_path_of(&dir.join(&seg.name));
        let sh = read_header(&sp)?;
        if sh.is_multi_segment() {
            return Err(unsupported(
                &sp,
                "a segment of a multi-segment record is itself multi-segment",
            ));
        }
        let part = read_single(&sp, sh)?;
        check_segment_length(path, seg, part.n_frames)?;
        if part.fs != header.fs {
            return Err(invalid(
                path,
                format!(
                    "line {}: segment `{}` is at {} Hz, the master header says {} Hz",
                    seg.line, seg.name, part.fs, header.fs
                ),
            ));
        }
        if let Some(s) = part.signals.iter().find(|s| s.spec.samples_per_frame > 1) {
            return Err(unsupported(
                &sp,
                format!(
                    "line {} (signal `{}`): {} samples per frame in a variable-layout record \
                     (the record would change rate between segments) is not supported",
                    s.spec.line, s.spec.description, s.spec.samples_per_frame
                ),
            ));
        }
        for (k, s) in part.signals.iter().enumerate() {
            let name = &s.spec.description;
            let Some(li) = layout.iter().position(|l| &l.name == name) else {
                match left_out.iter_mut().find(|(n, _)| n == name) {
                    Some((_, segs)) => segs.push(seg.name.clone()),
                    None => left_out.push((name.clone(), vec![seg.name.clone()])),
                }
                continue;
            };
            if part.signals[..k]
                .iter()
                .any(|o| &o.spec.description == name)
            {
                continue; // the first signal of that name is the one used
            }
            let factor = match (out_factor[li], to_mv_factor(&s.spec.units)) {
                (Some(_), Some(f)) => f,
                (None, None) if s.spec.units == layout[li].units => 1.0,
                _ => {
                    return Err(invalid(
                        &sp,
                        format!(
                            "line {} (signal `{name}`): units `{}`, the layout's are `{}`; \
                             segments of a signal must share its units (voltages are converted)",
                            s.spec.line, s.spec.units, layout[li].units
                        ),
                    ))
                }
            };
            let dst = &mut out[li][at..at + n];
            for (d, v) in dst.iter_mut().zip(to_physical(s)) {
                *d = v * factor;
            }
        }
        files.extend(part.files);
        warnings.extend(part.warnings);
        at += n;
    }

    for (name, segs) in &left_out {
        let shown: Vec<&str> = segs.iter().take(5).map(String::as_str).collect();
        let more = if segs.len() > 5 {
            format!(" and {} more", segs.len() - 5)
        } else {
            String::new()
        };
        warnings.push(format!(
            "{}: signal `{name}` of segment(s) {}{more} is not in the layout and is left out",
            path.display(),
            shown.join(", ")
        ));
    }
    for (l, v) in layout.iter().zip(&out) {
        let gaps = v.iter().filter(|x| x.is_nan()).count();
        if gaps > 0 {
            warnings.push(format!(
                "{}: signal `{}`: {gaps} of {total} samples lie in null segments, in segments \
                 without it, or are invalid: read as NaN",
                path.display(),
                l.name
            ));
        }
    }

    let leads = layout
        .iter()
        .zip(out)
        .zip(&out_factor)
        .map(|((l, samples), f)| Lead {
            name: l.name.clone(),
            units: if f.is_some() {
                "mV".to_string()
            } else {
                l.units.clone()
            },
            samples,
        })
        .collect();
    Ok(Record {
        name: header.name.clone(),
        fs: header.fs,
        leads,
        meta: Metadata::from_comments(&comments),
        files,
        warnings,
    })
}
