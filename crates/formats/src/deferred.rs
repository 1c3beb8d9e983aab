//! Records whose samples stay digital until a stretch of them is asked for,
//! so that a long recording is never held whole in physical units.
//!
//! Why: physical samples take 8 bytes each (`f64`), digital ones 2 (`i16`:
//! EDF, and the WFDB formats of up to 16 bits that need no accumulation) or
//! else 4 (`i32`: BDF's 24 bits, the other WFDB formats): a 24-hour 12-lead
//! 1000-Hz recording is 8.3 GB in physical units and 2.1 GB here. A caller
//! that works through a long record in stretches converts only the stretch it
//! works on.
//!
//! [`DigitalLead::physical`] gives exactly the values the format's whole-record
//! reader gives for the same samples: the same operations in the same order
//! (WFDB: `(d − baseline) / gain`, invalid-sample markers as NaN, see
//! [`crate::wfdb::deferred`]; EDF and BDF: `(d − dig_min) · gain + phys_min`,
//! see [`crate::edf::read_edf_deferred`]; ISHNE: `d · resolution`, see
//! [`crate::ishne::read_ishne_deferred`]; then the factor to millivolts when
//! the units are a voltage other than mV).

use crate::wfdb::Digital;
use crate::{FormatError, Record};
use std::io::Read;
use std::path::Path;

/// What a reader asks its `defer` about a record, from its header alone:
/// (sampling rate in Hz, samples per lead, leads).
pub type Extent = (f64, usize, usize);

/// The start of the file at `path` for a reader that parses its header
/// before deciding how to read the rest: the first `first` bytes, then as
/// many more as `total` (given those) says the header holds, never past the
/// end of the file. Returns those bytes, the file positioned after them, and
/// the file's length.
pub(crate) fn read_head(
    path: &Path,
    first: u64,
    total: impl FnOnce(&[u8]) -> u64,
) -> Result<(Vec<u8>, std::fs::File, usize), FormatError> {
    let io = |source| FormatError::Io {
        path: path.to_path_buf(),
        source,
    };
    let mut file = std::fs::File::open(path).map_err(io)?;
    let file_len = file.metadata().map_err(io)?.len();
    let mut bytes = Vec::new();
    (&mut file)
        .take(first)
        .read_to_end(&mut bytes)
        .map_err(io)?;
    let want = total(&bytes).min(file_len);
    (&mut file)
        .take(want.saturating_sub(bytes.len() as u64))
        .read_to_end(&mut bytes)
        .map_err(io)?;
    Ok((bytes, file, usize::try_from(file_len).unwrap_or(usize::MAX)))
}

/// Digital samples in the narrowest type that holds their format.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Store {
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
    scale: Scale,
    /// Factor to millivolts; `None` when the units are mV or not a voltage
    /// (no multiplication, as in the whole-record readers).
    factor: Option<f64>,
}

/// How a format turns a digital sample into a physical value (before the
/// factor to millivolts).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Scale {
    /// WFDB: `(d − baseline) / gain`; a sample equal to `invalid` is NaN.
    Wfdb {
        baseline: f64,
        gain: f64,
        invalid: Option<i32>,
    },
    /// EDF and BDF: `(d − dig_min) · gain + phys_min`, `gain` being
    /// `(phys_max − phys_min) / (dig_max − dig_min)`.
    Edf {
        dig_min: f64,
        gain: f64,
        phys_min: f64,
    },
    /// ISHNE: `d · gain`.
    Linear { gain: f64 },
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
        let scale = Scale::Wfdb {
            baseline,
            gain,
            invalid,
        };
        Self::with_store(Store::I32(samples), scale, factor)
    }

    pub(crate) fn with_store(samples: Store, scale: Scale, factor: Option<f64>) -> Self {
        Self {
            samples,
            scale,
            factor: factor.filter(|&f| f != 1.0),
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
        let mut out = Vec::new();
        self.physical_into(a, b, &mut out);
        out
    }

    /// [`Self::physical`] into `out` (its old contents replaced), so that a
    /// caller converting lead after lead reuses one buffer: a fresh buffer
    /// of a whole long lead costs the kernel's zeroing of every page (about
    /// a tenth of the passes over a 24-hour record).
    pub fn physical_into(&self, a: usize, b: usize, out: &mut Vec<f64>) {
        let b = b.min(self.len());
        let a = a.min(b);
        out.clear();
        match &self.samples {
            Store::I16(x) => self.convert(&x[a..b], out),
            Store::I32(x) => self.convert(&x[a..b], out),
        }
    }

    fn convert<T: Digital>(&self, x: &[T], out: &mut Vec<f64>) {
        match self.scale {
            Scale::Wfdb {
                baseline,
                gain,
                invalid,
            } => self.apply(x, out, |d| {
                if Some(d) == invalid {
                    f64::NAN
                } else {
                    (d as f64 - baseline) / gain
                }
            }),
            Scale::Edf {
                dig_min,
                gain,
                phys_min,
            } => self.apply(x, out, |d| (d as f64 - dig_min) * gain + phys_min),
            Scale::Linear { gain } => self.apply(x, out, |d| f64::from(d) * gain),
        }
    }

    /// `conv` on every sample, then the factor to millivolts.
    fn apply<T: Digital>(&self, x: &[T], out: &mut Vec<f64>, conv: impl Fn(i32) -> f64) {
        match self.factor {
            None => out.extend(x.iter().map(|&d| conv(d.to_i32()))),
            Some(f) => out.extend(x.iter().map(|&d| conv(d.to_i32()) * f)),
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

    /// Where this record differs from `whole`, the same record as its
    /// format's whole-record reader returns it: everything but the samples,
    /// then every lead's values bit for bit over the whole record and over
    /// stretches of it. `None` when they are the same. The readers' tests
    /// use it with the whole-record reader as the oracle.
    pub fn first_difference(&self, whole: &Record) -> Option<String> {
        let mut bare = whole.clone();
        bare.leads.iter_mut().for_each(|l| l.samples = Vec::new());
        if self.record != bare {
            return Some(format!("record {:?} against {:?}", self.record, bare));
        }
        let n = whole.n_samples();
        if self.n_samples() != n || self.leads.len() != whole.leads.len() {
            return Some(format!(
                "{} leads of {} samples against {} of {n}",
                self.leads.len(),
                self.n_samples(),
                whole.leads.len()
            ));
        }
        let same = |a: &[f64], b: &[f64]| {
            a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
        };
        for (l, w) in self.leads.iter().zip(&whole.leads) {
            for (a, b) in [
                (0, n),
                (0, n / 3),
                (n / 3, n / 2 + 1),
                (n.saturating_sub(7), n),
            ] {
                if !same(&l.physical(a, b), &w.samples[a..b]) {
                    return Some(format!("lead {:?}, samples {a}..{b}", w.name));
                }
            }
        }
        None
    }

    /// The whole record in physical units, as the whole-record reader returns it.
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

#[cfg(test)]
mod tests {
    use super::*;

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
        // Into a buffer that held other values, longer and shorter: the
        // same values as a fresh conversion, nothing of the old left.
        for old in [vec![7.0; 10], vec![7.0; 1]] {
            let mut buf = old;
            l.physical_into(1, 3, &mut buf);
            assert_eq!(buf.len(), 2);
            assert!(buf[0].is_nan() && buf[1] == 0.0);
        }
        let mut buf = vec![7.0; 4];
        u.physical_into(3, 9, &mut buf);
        assert!(buf.is_empty());
    }

    /// EDF's scaling (EDF specification, Kemp et al. 1992, from memory:
    /// physical = (digital − digital minimum) · (physical range / digital
    /// range) + physical minimum), worked by hand: digital −2048..2047 over
    /// −10..10 mV, digital 0 is 2048 · 20 / 4095 − 10 mV.
    #[test]
    fn edf_conversion_follows_the_header_formula() {
        let scale = Scale::Edf {
            dig_min: -2048.0,
            gain: 20.0 / 4095.0,
            phys_min: -10.0,
        };
        let l = DigitalLead::with_store(Store::I16(vec![-2048, 0, 2047]), scale, Some(1e3));
        let v = l.physical(0, 3);
        assert_eq!(v[0], -10.0 * 1e3);
        assert_eq!(v[1], (2048.0 * (20.0 / 4095.0) - 10.0) * 1e3);
        assert!((v[2] - 10.0 * 1e3).abs() < 1e-9);
    }
}
