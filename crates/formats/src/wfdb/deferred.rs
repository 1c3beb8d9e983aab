//! WFDB records read with their samples kept digital ([`crate::deferred`]):
//! 16 bits for the formats of up to 16 bits that need no accumulation (16,
//! 61, 80, 160, 212, 310, 311), decoded into 16 bits directly and never held
//! wider; 32 bits for the others.
//!
//! [`DigitalLead::physical`] gives exactly the values [`super::read_record`]
//! gives for the same samples. Only single-segment records with their length
//! in the header and one rate for every signal are deferred: a slower signal
//! would need the interpolation of [`super::read_record`] first, and the
//! other records are read whole.

use super::{invalid_value, to_mv_factor, Digital, WfdbSignals};
pub use crate::deferred::{DeferredRecord, DigitalLead, Loaded, SamplesMut};
use crate::deferred::{Scale, Store};
use crate::{FormatError, Lead, Metadata, Record};
use std::path::Path;

/// Read a WFDB record, deferring the conversion to physical units when
/// `defer(fs, n_samples, n_leads)` says so and the record allows it (a
/// single segment, its length in the header, one rate for every signal);
/// otherwise the record [`super::read_record`] returns.
pub fn read_record_deferred(
    header_path: &Path,
    defer: &dyn Fn(f64, usize, usize) -> bool,
) -> Result<Loaded, FormatError> {
    let path = super::header_path_of(header_path);
    let header = super::read_header(&path)?;
    // Decided from the header, so that a record read whole is read exactly
    // as `read_record` reads it; only a single-segment record with its length
    // in the header is deferred.
    let frames = header.n_frames.filter(|_| !header.is_multi_segment());
    let spf = header
        .signals
        .first()
        .map_or(1, |s| s.samples_per_frame.max(1));
    let deferred = frames.is_some_and(|frames| {
        !header.signals.is_empty()
            && header
                .signals
                .iter()
                .all(|s| s.samples_per_frame.max(1) == spf)
            && defer(
                header.fs * spf as f64,
                frames.saturating_mul(spf as u64) as usize,
                header.signals.len(),
            )
    });
    if !deferred {
        return super::read_record_with(&path, header).map(Loaded::Physical);
    }
    // Formats of at most 16 bits are held in 16 bits from the start: the
    // record is never held wider, even while it is read.
    Ok(Loaded::Deferred(
        if header.signals.iter().all(|s| i16::holds(s.format)) {
            deferred_from_signals(super::read_single::<i16>(&path, header)?, Store::I16)
        } else {
            deferred_from_signals(super::read_single::<i32>(&path, header)?, Store::I32)
        },
    ))
}

/// The deferred form of signals that share one rate; `store` holds one
/// signal's samples.
fn deferred_from_signals<T: super::Digital>(
    mut w: WfdbSignals<T>,
    store: fn(Vec<T>) -> Store,
) -> DeferredRecord {
    let spf = w
        .signals
        .first()
        .map_or(1, |s| s.spec.samples_per_frame.max(1));
    let signals = std::mem::take(&mut w.signals);
    let mut leads = Vec::with_capacity(signals.len());
    let mut digital = Vec::with_capacity(signals.len());
    for s in signals {
        let factor = to_mv_factor(&s.spec.units);
        leads.push(Lead {
            name: s.spec.description.clone(),
            units: if factor.is_some() {
                "mV".to_string()
            } else {
                s.spec.units.clone()
            },
            samples: Vec::new(),
        });
        let scale = Scale::Wfdb {
            baseline: s.spec.baseline as f64,
            gain: s.spec.adc_gain,
            invalid: invalid_value(s.spec.format),
        };
        digital.push(DigitalLead::with_store(store(s.samples), scale, factor));
    }
    let meta = Metadata::from_comments(&w.header.comments);
    DeferredRecord {
        record: Record {
            name: w.header.name.clone(),
            fs: w.fs * spf as f64,
            leads,
            meta,
            files: w.files,
            warnings: w.warnings,
        },
        leads: digital,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::PathBuf;

    fn same_bits(a: &[f64], b: &[f64]) -> bool {
        a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
    }

    /// Oracle: the record in physical units from `read_record`. Over every
    /// WFDB conformance record of ../shared/data (every storage format,
    /// skew, offsets, multi-file and multi-segment records) and a QT Database
    /// record, the deferred record must give the same values bit for bit,
    /// over the whole record and over stretches of it.
    #[test]
    fn deferred_samples_equal_the_physical_record() {
        let data = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../../shared/data");
        let mut heads: Vec<PathBuf> = std::fs::read_dir(data.join("wfdb-conformance"))
            .expect("../shared/data/wfdb-conformance (see ../shared/data/README.md)")
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|e| e == "hea"))
            .collect();
        heads.sort();
        heads.push(data.join("qtdb/sel100.hea"));
        let (mut deferred, mut physical) = (0, 0);
        for p in &heads {
            let Ok(whole) = super::super::read_record(p) else {
                assert!(
                    read_record_deferred(p, &|_, _, _| true).is_err(),
                    "{}",
                    p.display()
                );
                continue;
            };
            let d = match read_record_deferred(p, &|_, _, _| true).unwrap() {
                Loaded::Deferred(d) => d,
                Loaded::Physical(r) => {
                    // Multi-rate and variable-layout records stay physical.
                    assert_eq!(r.leads.len(), whole.leads.len(), "{}", p.display());
                    for (x, y) in r.leads.iter().zip(&whole.leads) {
                        assert!(same_bits(&x.samples, &y.samples), "{}", p.display());
                    }
                    physical += 1;
                    continue;
                }
            };
            deferred += 1;
            let what = p.display();
            assert_eq!(d.first_difference(&whole), None, "{what}");
            let back = d.into_record();
            for (x, y) in back.leads.iter().zip(&whole.leads) {
                assert_eq!((&x.name, &x.units), (&y.name, &y.units), "{what}");
                assert!(same_bits(&x.samples, &y.samples), "{what}");
            }
            let Loaded::Physical(r) = read_record_deferred(p, &|_, _, _| false).unwrap() else {
                panic!("{what}: deferred when not asked");
            };
            assert_eq!(r.name, whole.name);
        }
        eprintln!("{deferred} records deferred, {physical} physical");
        assert!(
            deferred >= 20,
            "only {deferred} records deferred ({physical} stayed physical)"
        );
    }
}
