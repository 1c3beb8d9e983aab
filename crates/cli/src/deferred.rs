//! A long WFDB, EDF or BDF record processed from its digital samples: the whole-record
//! passes of the pipeline run one lead at a time, and each chunk is
//! converted to physical units only when its turn comes.
//!
//! Why: a record processed in chunks used to be read whole in physical
//! units first (8 bytes per sample): a 24-hour 12-lead 1000-Hz recording
//! peaked at 9.1 GB (WFDB) or more (EDF: the file's bytes were held too
//! while it was decoded). Its digital samples take a quarter to half of that
//! ([`tendline_formats::deferred`]), and the passes over the whole
//! record (missing samples, amplitude, pacing spikes) need one lead in
//! physical units at a time.
//!
//! The passes leave no converted record behind: what they would have done to
//! the samples (missing samples bridged, signals that are not ECG held at
//! zero, pacing spikes blanked) is kept as a description and done again on
//! each stretch as it is converted ([`DeferredLeads::stretch`]), with the
//! same arithmetic as the whole-record passes of `pipeline`, so that a
//! stretch holds exactly the values the whole record would hold there
//! (tested against those passes as the oracle).

use anyhow::Result;
use std::path::Path;
use tendline_dsp::amplitude::{self, AmplitudeClass};
use tendline_dsp::filter::{ConditioningFilter, FilterConfig};
use tendline_dsp::pacing::Spike;
use tendline_formats::deferred::{DigitalLead, SamplesMut};
use tendline_formats::Record;

/// A run of missing samples `start..end` of one lead and the samples on
/// either side that bridge it (`None` at an end of the lead).
#[derive(Debug, Clone, Copy, PartialEq)]
struct Fill {
    start: usize,
    end: usize,
    left: Option<f64>,
    right: Option<f64>,
}

impl Fill {
    /// The bridged value of sample `i` (inside the run): the straight line
    /// between the samples around it, or the nearest sample at an end (the
    /// arithmetic of `pipeline::fill_missing`).
    fn value(&self, i: usize) -> f64 {
        match (self.left, self.right) {
            (Some(a), Some(b)) => {
                let span = (self.end - self.start + 1) as f64;
                a + (b - a) * (i - self.start + 1) as f64 / span
            }
            (Some(a), None) => a,
            (None, Some(b)) => b,
            (None, None) => 0.0,
        }
    }
}

/// A deferred record's leads with what the whole-record passes found.
pub(crate) struct DeferredLeads {
    leads: Vec<DigitalLead>,
    /// Per lead, its runs of missing samples in order.
    fills: Vec<Vec<Fill>>,
    /// Per lead: held at zero (not an ECG signal, or no sample at all).
    zero: Vec<bool>,
    spikes: Vec<Spike>,
    n: usize,
    /// Samples before this index may have been released: never read again.
    released: usize,
}

/// What the whole-record passes found, as the pipeline uses it.
pub(crate) struct Scan {
    pub leads: DeferredLeads,
    /// Stretches missing in every ECG lead.
    pub gaps: Vec<(usize, usize)>,
    /// Missing samples per lead.
    pub missing: Vec<usize>,
    pub amplitude: Option<(f64, AmplitudeClass)>,
}

/// Runs of NaN in `x`, as half-open ranges in order.
fn nan_runs(x: &[f64]) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let mut i = 0;
    while i < x.len() {
        if x[i].is_nan() {
            let s = i;
            while i < x.len() && x[i].is_nan() {
                i += 1;
            }
            out.push((s, i));
        } else {
            i += 1;
        }
    }
    out
}

/// The ranges inside every one of `sets` (each a sorted list of disjoint
/// half-open ranges).
fn intersect(sets: &[Vec<(usize, usize)>]) -> Vec<(usize, usize)> {
    let Some(first) = sets.first() else {
        return Vec::new();
    };
    let mut acc = first.clone();
    for s in &sets[1..] {
        let (mut i, mut j, mut out) = (0, 0, Vec::new());
        while i < acc.len() && j < s.len() {
            let (a, b) = (acc[i].0.max(s[j].0), acc[i].1.min(s[j].1));
            if a < b {
                out.push((a, b));
            }
            if acc[i].1 < s[j].1 {
                i += 1;
            } else {
                j += 1;
            }
        }
        acc = out;
    }
    acc
}

/// The whole-record passes of the pipeline over `leads` (the samples of
/// `rec`, whose leads carry names and units but no samples), one lead at a
/// time in physical units: the checks of `pipeline::check_record`, missing
/// samples (`missing_in_every_lead`, `fill_missing`), the amplitude class
/// and the pacing spikes of the ECG leads. Errors name `path`.
pub(crate) fn scan(
    rec: &Record,
    leads: Vec<DigitalLead>,
    path: &Path,
    filter: &ConditioningFilter,
    cfg: &FilterConfig,
) -> Result<Scan> {
    crate::pipeline::check_shape(leads.len(), rec.fs, path)?;
    let n = leads[0].len();
    crate::pipeline::check_not_empty(n, path)?;
    let block = amplitude::block_samples(rec.fs, cfg);
    let k = leads.len();
    let (mut fills, mut zero, mut missing) = (Vec::with_capacity(k), vec![false; k], vec![0; k]);
    let (mut ecg_runs, mut ranges, mut lead_spikes) = (Vec::new(), Vec::new(), Vec::new());
    // One buffer for every lead's physical samples (8 bytes each: 0.69 GB
    // for a 24-hour 1000-Hz lead), handed back to the system once the scan
    // is done: the allocator keeps freed memory for reuse (`tune_allocator`
    // in `main`), and it would otherwise stay resident beside the digital
    // samples for the whole run.
    let mut x: Vec<f64> = Vec::new();
    for (i, (d, l)) in leads.iter().zip(&rec.leads).enumerate() {
        d.physical_into(0, d.len(), &mut x);
        crate::pipeline::check_lead(i, &l.name, &x, n, path)?;
        let runs = nan_runs(&x);
        missing[i] = runs.iter().map(|(a, b)| b - a).sum();
        let lead_fills: Vec<Fill> = if missing[i] == n {
            zero[i] = true;
            Vec::new()
        } else {
            runs.iter()
                .map(|&(s, e)| Fill {
                    start: s,
                    end: e,
                    left: s.checked_sub(1).map(|j| x[j]),
                    right: (e < n).then(|| x[e]),
                })
                .collect()
        };
        for f in &lead_fills {
            for (j, v) in x[f.start..f.end].iter_mut().enumerate() {
                *v = f.value(f.start + j);
            }
        }
        if zero[i] {
            x.iter_mut().for_each(|v| *v = 0.0);
        }
        let ecg = tendline_formats::signals::non_ecg_reason(&l.name, &l.units).is_none();
        if ecg {
            ecg_runs.push(runs);
            ranges.push(amplitude::typical_range(&x, block));
            lead_spikes.push(filter.lead_pacing_spikes(&x));
        } else {
            zero[i] = true;
        }
        fills.push(lead_fills);
    }
    crate::pipeline::release_pages(&mut x);
    drop(x);
    if missing.iter().all(|&m| m == n) {
        return Err(crate::pipeline::all_missing(path));
    }
    let amplitude = amplitude::assess_ranges(&ranges, cfg);
    let spikes = match amplitude {
        Some((_, AmplitudeClass::AboveSpan)) => Vec::new(),
        _ => filter.join_pacing_spikes(&lead_spikes),
    };
    Ok(Scan {
        gaps: intersect(&ecg_runs),
        missing,
        amplitude,
        leads: DeferredLeads {
            leads,
            fills,
            zero,
            spikes,
            n,
            released: 0,
        },
    })
}

impl DeferredLeads {
    /// Samples per lead.
    pub(crate) fn n(&self) -> usize {
        self.n
    }

    /// The record's pacing spikes, blanked in every stretch.
    pub(crate) fn spikes(&self) -> &[Spike] {
        &self.spikes
    }

    /// Samples `a..b` of every lead in physical units, missing samples
    /// bridged, non-ECG signals at zero and pacing spikes blanked: what the
    /// whole record would hold there after the pipeline's passes.
    pub(crate) fn stretch(&self, a: usize, b: usize) -> Vec<Vec<f64>> {
        let b = b.min(self.n);
        let a = a.min(b);
        let (blank, lo, hi) = self.reach(a, b);
        assert!(
            lo >= self.released,
            "stretch from sample {lo} after samples up to {} were released",
            self.released
        );
        self.leads
            .iter()
            .zip(&self.fills)
            .zip(&self.zero)
            .map(|((d, fills), &zero)| {
                if zero {
                    return vec![0.0; b - a];
                }
                let mut x = d.physical(lo, hi);
                for f in fills.iter().filter(|f| f.start < hi && f.end > lo) {
                    for j in f.start.max(lo)..f.end.min(hi) {
                        x[j - lo] = f.value(j);
                    }
                }
                for s in &blank {
                    let (l, r) = (x[s.start - 1 - lo], x[s.end - lo]);
                    let w = (s.end - s.start + 1) as f64;
                    for (k, v) in x[s.start - lo..s.end - lo].iter_mut().enumerate() {
                        *v = l + (r - l) * (k + 1) as f64 / w;
                    }
                }
                x.drain(..a - lo);
                x.truncate(b - a);
                x
            })
            .collect()
    }
}

impl DeferredLeads {
    /// The spikes to blank in samples `a..b` and the samples a stretch
    /// `a..b` is converted from: a spike reaching into the stretch is joined
    /// across by the samples on either side of it, which may lie outside.
    fn reach(&self, a: usize, b: usize) -> (Vec<&Spike>, usize, usize) {
        let blank: Vec<&Spike> = self
            .spikes
            .iter()
            .filter(|s| s.start < b && s.end > a)
            .filter(|s| s.start > 0 && s.end < self.n && s.start < s.end)
            .collect();
        let lo = blank.iter().map(|s| s.start - 1).fold(a, usize::min);
        let hi = blank.iter().map(|s| s.end + 1).fold(b, usize::max);
        (blank, lo, hi)
    }

    /// Hands back to the system the memory of the digital samples that no
    /// stretch from `a` on reads (whole memory pages only; see
    /// `pipeline::release_pages`). Stretches are asked for in order.
    pub(crate) fn release_before(&mut self, a: usize) {
        let a = a.min(self.n);
        let (_, lo, _) = self.reach(a, self.n);
        if lo <= self.released {
            return;
        }
        let from = self.released;
        for d in &mut self.leads {
            let end = lo.min(d.len());
            let start = from.min(end);
            match d.samples_mut() {
                SamplesMut::I16(x) => crate::pipeline::release_pages(&mut x[start..end]),
                SamplesMut::I32(x) => crate::pipeline::release_pages(&mut x[start..end]),
            }
        }
        self.released = lo;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use tendline_formats::Lead;

    /// Runs of the intersection, checked sample by sample (slow oracle).
    #[test]
    fn intersection_equals_the_samplewise_oracle() {
        let sets = vec![
            vec![(0, 5), (8, 20), (30, 31)],
            vec![(2, 9), (10, 12), (15, 40)],
            vec![(0, 100)],
        ];
        let inside = |i: usize| {
            sets.iter()
                .all(|s| s.iter().any(|&(a, b)| (a..b).contains(&i)))
        };
        let v: Vec<f64> = (0..100)
            .map(|i| if inside(i) { f64::NAN } else { 0.0 })
            .collect();
        assert_eq!(intersect(&sets), nan_runs(&v));
        assert_eq!(intersect(&[]), Vec::<(usize, usize)>::new());
    }

    fn lead(name: &str, units: &str) -> Lead {
        Lead {
            name: name.into(),
            units: units.into(),
            samples: Vec::new(),
        }
    }

    /// A 4-lead 250-Hz record, 20 s: beat-like pulses, coincident pacing-like
    /// steps, runs of invalid samples (at the start, inside, across the
    /// middle, at the end), a lead with no valid sample and a respiration
    /// signal.
    fn synthetic() -> (Record, Vec<DigitalLead>) {
        let (fs, n) = (250.0, 5000usize);
        let bad = -32768;
        let mut digital: Vec<Vec<i32>> = (0..4)
            .map(|l| {
                (0..n)
                    .map(|i| {
                        let t = i as f64 / fs;
                        let beat = (-((t % 0.8) - 0.3).powi(2) / 0.0004).exp();
                        let wander = 0.2 * (0.3 * t + l as f64).sin();
                        ((beat * (1.0 + l as f64 * 0.3) + wander) * 200.0).round() as i32
                    })
                    .collect()
            })
            .collect();
        for &p in &[700usize, 1900, 2500, 4100] {
            for x in digital.iter_mut().take(3) {
                x[p] += 1200;
                x[p + 1] -= 900;
            }
        }
        for (a, b) in [(0usize, 40usize), (1000, 1013), (2490, 2510), (4990, 5000)] {
            digital[0][a..b].iter_mut().for_each(|v| *v = bad);
        }
        for (a, b) in [(995usize, 1020usize), (2400, 2600)] {
            digital[1][a..b].iter_mut().for_each(|v| *v = bad);
            digital[2][a..b].iter_mut().for_each(|v| *v = bad);
        }
        digital[3].iter_mut().for_each(|v| *v = bad);
        let mut resp = digital[1].clone();
        resp.iter_mut().for_each(|v| *v /= 3);
        digital.push(resp);
        let names = [
            ("I", "mV"),
            ("II", "mV"),
            ("V1", "uV"),
            ("V2", "mV"),
            ("RESP", "Ohm"),
        ];
        let rec = Record {
            name: "synthetic".into(),
            fs,
            leads: names.iter().map(|&(a, u)| lead(a, u)).collect(),
            meta: Default::default(),
            files: Vec::new(),
            warnings: Vec::new(),
        };
        let leads = digital
            .into_iter()
            .zip(names)
            .map(|(d, (_, u))| {
                let f = tendline_formats::wfdb::to_mv_factor(u);
                DigitalLead::new(d, 12.0, 200.0, f, Some(bad))
            })
            .collect();
        (rec, leads)
    }

    /// Oracle: the record in physical units through the pipeline's own
    /// whole-record passes (`check_record`, `missing_in_every_lead`,
    /// `fill_missing`, `non_ecg_leads`, the amplitude and spike passes,
    /// `blank_lead`). The scan must find the same gaps, counts, amplitude
    /// and spikes, and every stretch must equal the whole record's samples
    /// there, bit for bit.
    #[test]
    fn stretches_equal_the_whole_record_after_its_passes() {
        let (shell, leads) = synthetic();
        let cfg = FilterConfig {
            pacing_blank: true,
            ..Default::default()
        };
        let filter = tendline_dsp::filter::FilterCache::new(cfg.clone())
            .get(shell.fs)
            .unwrap();
        let path = Path::new("synthetic.hea");
        let mut whole = shell.clone();
        for (l, d) in whole.leads.iter_mut().zip(&leads) {
            l.samples = d.physical(0, d.len());
        }
        crate::pipeline::check_record(&whole, path).unwrap();
        let gaps = crate::pipeline::missing_in_every_lead(&whole);
        let missing = crate::pipeline::fill_missing(&mut whole);
        let excluded = crate::pipeline::non_ecg_leads(&mut whole, path).unwrap();
        let ecg = crate::pipeline::ecg_leads(&whole, &excluded);
        let amp = amplitude::assess(&ecg, whole.fs, &cfg);
        let spikes = filter.pacing_spikes(&ecg);
        for l in whole.leads.iter_mut() {
            tendline_dsp::pacing::blank_lead(&mut l.samples, &spikes);
        }

        let s = scan(&shell, leads, path, &filter, &cfg).unwrap();
        assert_eq!(s.gaps, gaps);
        assert!(
            !gaps.is_empty(),
            "the synthetic record has a gap in every ECG lead"
        );
        assert_eq!(s.missing, missing);
        assert_eq!(s.amplitude, amp);
        assert_eq!(s.leads.spikes(), spikes);
        assert!(spikes.len() >= 3, "pacing-like steps found: {spikes:?}");
        let n = whole.n_samples();
        let mut cuts: Vec<(usize, usize)> = vec![(0, n), (0, 1), (n - 1, n), (5, 5)];
        for sp in &spikes {
            cuts.extend([
                (sp.start, sp.end),
                (sp.start + 1, n),
                (0, sp.start + 1),
                (sp.end, sp.end + 3),
            ]);
        }
        for a in (0..n).step_by(377) {
            cuts.push((a, (a + 1234).min(n)));
        }
        let check = |d: &DeferredLeads, a: usize, b: usize| {
            let got = d.stretch(a, b);
            for (i, (g, w)) in got.iter().zip(&whole.leads).enumerate() {
                assert_eq!(g.len(), b - a, "lead {i} {a}..{b}");
                for (j, (x, y)) in g.iter().zip(&w.samples[a..b]).enumerate() {
                    assert_eq!(
                        x.to_bits(),
                        y.to_bits(),
                        "lead {i} sample {} of {a}..{b}",
                        a + j
                    );
                }
            }
        };
        for (a, b) in cuts {
            check(&s.leads, a, b);
        }
        // Overlapping stretches in order, releasing what the next one does
        // not read (some start inside or just after a spike).
        let mut d = s.leads;
        let mut starts: Vec<usize> = (0..n).step_by(1100).collect();
        starts.extend(spikes.iter().flat_map(|sp| [sp.start + 1, sp.end]));
        starts.sort_unstable();
        for (k, &a) in starts.iter().enumerate() {
            check(&d, a, (a + 1500).min(n));
            if let Some(&next) = starts.get(k + 1) {
                d.release_before(next);
            }
        }
        assert!(d.released > n / 2, "released up to {}", d.released);
    }

    /// The scan rejects what `check_record` rejects, naming the file.
    #[test]
    fn scan_rejects_records_without_a_valid_sample() {
        let (shell, _) = synthetic();
        let f = tendline_dsp::filter::FilterCache::new(FilterConfig::default())
            .get(250.0)
            .unwrap();
        let err = |leads: Vec<DigitalLead>| {
            scan(
                &shell,
                leads,
                Path::new("x.hea"),
                &f,
                &FilterConfig::default(),
            )
            .err()
            .unwrap()
            .to_string()
        };
        let none = (0..5)
            .map(|_| DigitalLead::new(vec![-32768; 10], 0.0, 200.0, None, Some(-32768)))
            .collect();
        let e = err(none);
        assert!(
            e.contains("x.hea") && e.contains("every sample of every lead is missing"),
            "{e}"
        );
        let e = err((0..5)
            .map(|_| DigitalLead::new(vec![], 0.0, 200.0, None, None))
            .collect());
        assert!(e.contains("record is empty"), "{e}");
    }
}
