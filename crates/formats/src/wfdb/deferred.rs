//! A WFDB record whose samples stay digital until a stretch of them is asked
//! for, so that a long recording is never held whole in physical units.
//!
//! Why: physical samples take 8 bytes each (`f64`), digital ones 2 (`i16`,
//! for the formats of up to 16 bits that need no accumulation: 16, 61, 80,
//! 160, 212, 310, 311) or else 4 (`i32`): a 24-hour 12-lead 1000-Hz
//! recording in format 16 is 8.3 GB as read by [`super::read_record`] and
//! 2.1 GB here, and it is decoded into 16 bits directly, never held wider. A
//! caller that works through a long record in stretches converts only the
//! stretch it works on.
//!
//! [`DigitalLead::physical`] gives exactly the values [`super::read_record`]
//! gives for the same samples: the same operations in the same order
//! (`(d − baseline) / gain`, then the factor to millivolts when the units are
//! a voltage other than mV; invalid-sample markers become NaN). Only
//! single-segment records with their length in the header and one rate for
//! every signal are deferred: a slower signal would need the interpolation of
//! [`super::read_record`] first, and the other records are read whole.

use super::{invalid_value, to_mv_factor, Digital, WfdbSignals};
use crate::{FormatError, Lead, Metadata, Record};
use std::path::Path;

/// Digital samples in the narrowest type that holds their format.
#[derive(Debug, Clone, PartialEq)]
enum Store {
    I16(Vec<i16>),
    I32(Vec<i32>),
}

/// A lead's digital samples, mutable, for a caller that hands the memory of
/// samples it has done with back to the system ([`DigitalLead::samples_mut`]).
pub enum SamplesMut<'a> {
    I16(&'a mut [i16]),
    I32(&'a mut [i32]),
}

/// One signal's digital samples and what converts them to physical units.
#[derive(Debug, Clone, PartialEq)]
pub struct DigitalLead {
    samples: Store,
    baseline: f64,
    gain: f64,
    /// Factor to millivolts; `None` when the units are mV or not a voltage
    /// (no multiplication, as in [`super::read_record`]).
    factor: Option<f64>,
    invalid: Option<i32>,
}

impl DigitalLead {
    /// A lead from its digital samples: physical value `(d − baseline) / gain`,
    /// times `factor` when given; a sample equal to `invalid` is missing (NaN).
    pub fn new(
        samples: Vec<i32>,
        baseline: f64,
        gain: f64,
        factor: Option<f64>,
        invalid: Option<i32>,
    ) -> Self {
        Self::with_store(Store::I32(samples), baseline, gain, factor, invalid)
    }

    fn with_store(
        samples: Store,
        baseline: f64,
        gain: f64,
        factor: Option<f64>,
        invalid: Option<i32>,
    ) -> Self {
        Self {
            samples,
            baseline,
            gain,
            factor: factor.filter(|&f| f != 1.0),
            invalid,
        }
    }

    /// Number of samples.
    pub fn len(&self) -> usize {
        match &self.samples {
            Store::I16(x) => x.len(),
            Store::I32(x) => x.len(),
        }
    }

    /// Whether the lead holds no sample.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Physical values of samples `a..b` (clamped to the lead).
    pub fn physical(&self, a: usize, b: usize) -> Vec<f64> {
        let b = b.min(self.len());
        let a = a.min(b);
        match &self.samples {
            Store::I16(x) => self.convert(&x[a..b]),
            Store::I32(x) => self.convert(&x[a..b]),
        }
    }

    fn convert<T: super::Digital>(&self, x: &[T]) -> Vec<f64> {
        let (base, gain) = (self.baseline, self.gain);
        let bad = self.invalid;
        let conv = |d: i32| {
            if Some(d) == bad {
                f64::NAN
            } else {
                (d as f64 - base) / gain
            }
        };
        match self.factor {
            None => x.iter().map(|&d| conv(d.to_i32())).collect(),
            Some(f) => x.iter().map(|&d| conv(d.to_i32()) * f).collect(),
        }
    }

    /// The digital samples themselves, for a caller that hands the memory of
    /// samples it has done with back to the system as it goes.
    pub fn samples_mut(&mut self) -> SamplesMut<'_> {
        match &mut self.samples {
            Store::I16(x) => SamplesMut::I16(x),
            Store::I32(x) => SamplesMut::I32(x),
        }
    }
}

/// A record whose samples are [`DigitalLead`]s: `record` carries everything
/// else (name, rate, lead names and units, metadata, files, warnings), its
/// leads without samples.
#[derive(Debug, Clone, PartialEq)]
pub struct DeferredRecord {
    pub record: Record,
    pub leads: Vec<DigitalLead>,
}

impl DeferredRecord {
    /// Number of samples per lead.
    pub fn n_samples(&self) -> usize {
        self.leads.first().map_or(0, DigitalLead::len)
    }

    /// The whole record in physical units, as [`super::read_record`] returns it.
    pub fn into_record(self) -> Record {
        let n = self.n_samples();
        let mut rec = self.record;
        for (l, d) in rec.leads.iter_mut().zip(self.leads) {
            l.samples = d.physical(0, n);
        }
        rec
    }
}

/// A record as read: in physical units, or deferred.
#[derive(Debug, Clone, PartialEq)]
pub enum Loaded {
    Physical(Record),
    Deferred(DeferredRecord),
}

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
        digital.push(DigitalLead::with_store(
            store(s.samples),
            s.spec.baseline as f64,
            s.spec.adc_gain,
            factor,
            invalid_value(s.spec.format),
        ));
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
            assert_eq!(d.record.name, whole.name, "{what}");
            assert_eq!(d.record.fs, whole.fs, "{what}");
            assert_eq!(d.record.files, whole.files, "{what}");
            assert_eq!(d.record.warnings, whole.warnings, "{what}");
            assert_eq!(d.record.meta, whole.meta, "{what}");
            let n = whole.n_samples();
            assert_eq!(d.n_samples(), n, "{what}");
            for (l, w) in d.leads.iter().zip(&whole.leads) {
                for (a, b) in [
                    (0, n),
                    (0, n / 3),
                    (n / 3, n / 2 + 1),
                    (n.saturating_sub(7), n),
                ] {
                    assert!(
                        same_bits(&l.physical(a, b), &w.samples[a..b]),
                        "{what} {a}..{b}"
                    );
                }
            }
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

    /// Invalid markers become NaN and the unit factor applies after the
    /// division, as `to_physical` and `read_record` do (worked by hand:
    /// (1100 − 100) / 200 = 5 mV, in µV units 5 · 10⁻³ mV).
    #[test]
    fn conversion_follows_the_header_formula() {
        let l = DigitalLead::new(vec![1100, -32768, 100], 100.0, 200.0, None, Some(-32768));
        let v = l.physical(0, 3);
        assert_eq!(v[0], 5.0);
        assert!(v[1].is_nan());
        assert_eq!(v[2], 0.0);
        let u = DigitalLead::new(vec![1100], 100.0, 200.0, Some(1e-3), None);
        assert_eq!(u.physical(0, 1), vec![5.0 * 1e-3]);
        assert_eq!(u.physical(3, 9), Vec::<f64>::new());
    }
}
