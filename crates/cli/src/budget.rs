//! Memory budget of a run: records start only while their estimated memory
//! fits, so a folder of long recordings processed in parallel cannot exhaust
//! the machine's memory (an out-of-memory kill would end the whole batch,
//! records in flight and all).
//!
//! A record's need is estimated before it is read, from its header or file
//! size ([`estimate`]: its samples as `f64`, 8 bytes per sample and lead)
//! and the chunk size of the run ([`need`]): the stages hold about
//! [`STAGE_FACTOR`] times the samples they process at once (the whole record,
//! or one chunk with its overlap), and a record processed in chunks also
//! holds its own samples as read ([`READ_FACTOR`]) until the chunks have
//! passed them; plus [`BASE_BYTES`]. The chunks of one record run on every
//! worker thread at once, each with its own working memory. Measured (peak
//! resident memory of `tendline run --jobs 1` on one record, `/usr/bin/time`,
//! less the 34 MB of the program on a 10-s record), 12 leads at 1000 Hz: 160 s (15 MB of
//! samples, one piece) 110 MB; 10 min (58 MB, chunked) 230 MB; 1 hour
//! (346 MB) 533 MB; 6 hours (2.07 GB) 2.37 GB; 24 hours (8.29 GB) 9.10 GB. The
//! estimates for these are 161 MB, 316 MB, 639 MB, 2.57 GB and 9.54 GB.
//!
//! Those records are WFDB records (format 16), and since the chunked ones are
//! processed from their digital samples ([`Estimate::deferred`], the `deferred` module),
//! a chunked WFDB, EDF, BDF or ISHNE record holds [`deferred_factor`] times its samples instead
//! of [`READ_FACTOR`]: 6 hours 0.81-0.82 GB (estimate 0.98), 24 hours
//! 2.79-2.94 GB (3.18), with `--jobs 2` 1.06-1.08 GB and 2.79-2.81 GB (1.19
//! and 3.38; WFDB, EDF and ISHNE, `dist` binary, `scripts/bench_long.sh`,
//! `bench/long.md`, 2026-12-06). [`READ_FACTOR`] still
//! holds for the records read whole.
//!
//! The budget is `--max-memory` (MiB) or else three quarters of the memory
//! available when the run starts ([`available_bytes`]: the kernel's
//! `MemAvailable`, or less under a container's memory limit); without either
//! there is no limit.
//!
//! A record whose need exceeds the whole budget still runs, alone: the budget
//! orders records, it never refuses one.

use crate::inputs::RecordInput;
use std::path::Path;
use std::sync::{Condvar, Mutex};

/// Working memory of the stages per byte of the samples they process at once
/// (as `f64`): raw and filtered leads, wavelet scales, per-beat and per-window
/// results (see the module docs for the measurements).
pub const STAGE_FACTOR: f64 = 7.2;
/// Samples a chunk is processed with, per sample of its core: the core plus
/// the overlap on both sides (`measure.chunk_overlap_s`: 60 s either side of
/// a 166-s core at 12 leads and 1000 Hz is 1.72).
pub const CHUNK_EXTENT: f64 = 1.75;
/// Memory of a record beyond what scales with its samples: the part file,
/// buffers of the stages.
pub const BASE_BYTES: u64 = 48 << 20;

/// What the budget knows of a record before reading it.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Estimate {
    /// Its samples as `f64`, estimated without decoding it: from a WFDB
    /// header's frame count, else from the file sizes (binary formats store 2
    /// to 3 bytes per sample, text about 8 characters per value).
    pub bytes: u64,
    /// For a WFDB, EDF, BDF or ISHNE record the run processes from its
    /// digital samples when it is long enough to be chunked
    /// (`tendline_formats::read_record_deferred`: WFDB with one segment, one
    /// rate and a length in the header; continuous EDF or BDF with one rate
    /// for its ordinary signals; every ISHNE file), its [`deferred_factor`];
    /// `None` otherwise.
    pub deferred: Option<f64>,
}

/// A record's [`Estimate`], reading at most its header or file size, once.
pub fn estimate(input: &RecordInput) -> Estimate {
    let path = &input.path;
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase());
    let size = |p: &Path| std::fs::metadata(p).map(|m| m.len()).unwrap_or(0);
    let bytes = match ext.as_deref() {
        Some("edf") | Some("ecg") => size(path) * 4,
        Some("bdf") => size(path) * 8 / 3,
        Some("csv") | Some("xml") => size(path),
        _ => return wfdb_estimate(path).unwrap_or_default(),
    };
    // EDF holds 2-byte samples, BDF's 3-byte ones are kept in 4.
    let deferred = match ext.as_deref() {
        Some("edf") => edf_deferred(path, 2),
        Some("bdf") => edf_deferred(path, 4),
        Some("ecg") => tendline_formats::ishne::read_ishne_header(path)
            .ok()
            .map(|(_, _, leads)| deferred_factor(leads, 2)),
        _ => None,
    };
    Estimate { bytes, deferred }
}

/// The [`deferred_factor`] of an EDF or BDF file whose samples are held in
/// `bytes` bytes each, when the file can be deferred (its header alone says).
fn edf_deferred(path: &Path, bytes: usize) -> Option<f64> {
    let (_, deferrable) = tendline_formats::edf::read_edf_header(path).ok()?;
    deferrable.map(|(_, _, leads)| deferred_factor(leads, bytes))
}

fn wfdb_estimate(path: &Path) -> Option<Estimate> {
    let hea = tendline_formats::wfdb::header_path_of(path);
    let text = std::fs::read_to_string(&hea).ok()?;
    let h = tendline_formats::wfdb::parse_header(&text, &hea).ok()?;
    let spf = h
        .signals
        .iter()
        .map(|s| u64::from(s.samples_per_frame.max(1)))
        .max()
        .unwrap_or(1);
    let n_sig = h.n_sig.max(h.signals.len()) as u64;
    let one_rate = h
        .signals
        .iter()
        .all(|s| u64::from(s.samples_per_frame.max(1)) == spf);
    let narrow = h
        .signals
        .iter()
        .all(|s| <i16 as tendline_formats::wfdb::Digital>::holds(s.format));
    Some(Estimate {
        bytes: h.n_frames? * spf * n_sig * 8,
        deferred: (!h.is_multi_segment() && one_rate && !h.signals.is_empty())
            .then(|| deferred_factor(h.signals.len(), if narrow { 2 } else { 4 })),
    })
}

/// Memory held while a record is read, per byte of its samples as `f64`:
/// the samples and the decoded digital values of the signals not yet
/// converted. Reading (`tendline inspect`) peaked at 422 MB for the 1-hour
/// record of the module docs (346 MB of samples) and 8.96 GB for the 24-hour
/// one (8.29 GB), 1.12 and 1.08 times the samples less the program's 34 MB.
pub const READ_FACTOR: f64 = 1.12;

/// Estimated peak memory of reading a record of `samples` bytes ([`estimate`])
/// without processing it (bytes), when a record a run would process in chunks
/// of `chunk_samples` samples is read from its digital samples if `deferred`
/// says it can be (as [`need`] counts it; `tendline inspect` reads such
/// records so).
pub fn read_need(samples: u64, chunk_samples: u64, deferred: Option<f64>) -> u64 {
    let chunked = chunk_samples > 0 && samples > chunk_samples * 8;
    let factor = deferred.filter(|_| chunked).unwrap_or(READ_FACTOR);
    (samples as f64 * factor) as u64 + (16 << 20)
}

/// Memory held by a WFDB, EDF, BDF or ISHNE record processed in chunks from
/// its digital samples (the `deferred` module), per byte of its samples as
/// `f64`, when it has `leads` signals stored in `bytes` bytes each (2 for
/// EDF, ISHNE and the WFDB formats of up to 16 bits, else 4): while the
/// whole-record passes run, the digital samples and one lead in physical
/// units (`bytes`/8 + 1/`leads`); at the end, the results of the chunks
/// gathered and turned into the record's tree, which take 0.31 of the
/// samples' `f64` bytes for 12 leads at 1000 Hz; whichever is larger, and
/// 0.02 more for the program and the allocator's slack (as in
/// [`READ_FACTOR`]). Measured (peak of `tendline run`, `/usr/bin/time`,
/// `dist` binary) on the 24-hour 12-lead record of the module docs as WFDB
/// format 16, EDF and ISHNE: 2.79-2.94 GB with one worker, 2.79-2.81 GB with
/// two, reached while the whole-record passes run and again while the
/// results are assembled (2.79 GB then, of which about 0.2 GB is one chunk's
/// working memory); the estimates are 0.353 × 8.29 GB plus one or two
/// chunks' working memory and [`BASE_BYTES`], 3.18 and 3.38 GB.
pub fn deferred_factor(leads: usize, bytes: usize) -> f64 {
    (bytes as f64 / 8.0 + 1.0 / leads.max(1) as f64).max(0.31) + 0.02
}

/// Estimated peak memory of processing a record of `samples` bytes
/// ([`estimate`]) in a run of `threads` worker threads whose chunks hold
/// `chunk_samples` samples over all leads (`measure.chunk_mega_samples` ×
/// 10⁶; 0 = never chunked). A chunked record runs up to `threads` chunks at
/// once. `deferred`: what such a record holds per byte of its samples as
/// `f64` when a chunked record of its kind is processed from its digital
/// samples ([`Estimate::deferred`]).
pub fn need(samples: u64, chunk_samples: u64, threads: usize, deferred: Option<f64>) -> u64 {
    let s = samples as f64;
    let chunk = chunk_samples as f64 * 8.0;
    let chunked = chunk_samples > 0 && s > chunk;
    let (at_once, held) = if chunked {
        (
            chunk * CHUNK_EXTENT * threads.max(1) as f64,
            s * deferred.unwrap_or(READ_FACTOR),
        )
    } else {
        (s, 0.0)
    };
    (at_once * STAGE_FACTOR + held) as u64 + BASE_BYTES
}

/// `measure.chunk_mega_samples` as samples (the `chunk_samples` of [`need`]).
pub fn chunk_samples(mega: f64) -> u64 {
    (mega.max(0.0) * 1e6) as u64
}

/// Memory this process may still take (bytes): `MemAvailable` of
/// `/proc/meminfo`, lowered to the room left under the memory limit of the
/// process's control group when one is set (a container's limit does not show
/// in `/proc/meminfo`: cgroup v2 `memory.max` and `memory.current`, v1
/// `memory.limit_in_bytes` and `memory.usage_in_bytes`). `None` when neither
/// can be read.
pub fn available_bytes() -> Option<u64> {
    let read = |p: &str| std::fs::read_to_string(p).ok();
    let meminfo = read("/proc/meminfo").and_then(|text| {
        let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
        let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
        Some(kb * 1024)
    });
    // Usage counts the page cache; its inactive part is reclaimed before the
    // limit bites, as the kernel's own working-set figure leaves it out.
    let inactive = |stat: Option<String>, key: &str| -> u64 {
        stat.and_then(|t| {
            t.lines()
                .find_map(|l| l.strip_prefix(key)?.trim().parse().ok())
        })
        .unwrap_or(0)
    };
    let v2 = read("/sys/fs/cgroup/memory.max")
        .zip(read("/sys/fs/cgroup/memory.current"))
        .and_then(|(m, c)| cgroup_room(&m, &c))
        .map(|r| r + inactive(read("/sys/fs/cgroup/memory.stat"), "inactive_file "));
    let v1 = read("/sys/fs/cgroup/memory/memory.limit_in_bytes")
        .zip(read("/sys/fs/cgroup/memory/memory.usage_in_bytes"))
        .and_then(|(m, c)| cgroup_room(&m, &c))
        .map(|r| {
            r + inactive(
                read("/sys/fs/cgroup/memory/memory.stat"),
                "total_inactive_file ",
            )
        });
    [meminfo, v2, v1].into_iter().flatten().min()
}

/// Room under a control group's memory limit (`limit - usage`), from the
/// texts of its limit and usage files; `None` without a limit (`max`, or a
/// value of 2^62 or more, which cgroup v1 writes for "unlimited").
fn cgroup_room(limit: &str, usage: &str) -> Option<u64> {
    let limit: u64 = limit.trim().parse().ok()?;
    if limit >= 1 << 62 {
        return None;
    }
    let usage: u64 = usage.trim().parse().ok()?;
    Some(limit.saturating_sub(usage))
}

/// Bytes in use by running records, against a total.
pub struct Budget {
    total: u64,
    used: Mutex<u64>,
    freed: Condvar,
}

/// A record's share of the budget, returned when dropped.
pub struct Share<'a> {
    budget: &'a Budget,
    bytes: u64,
}

impl Budget {
    /// `total` bytes; `None`: no limit.
    pub fn new(total: Option<u64>) -> Self {
        Budget {
            total: total.unwrap_or(u64::MAX),
            used: Mutex::new(0),
            freed: Condvar::new(),
        }
    }

    pub fn total(&self) -> Option<u64> {
        (self.total != u64::MAX).then_some(self.total)
    }

    /// Wait until `bytes` fit beside the records already running (a need
    /// above the total is taken as the total: that record runs alone).
    pub fn acquire(&self, bytes: u64) -> Share<'_> {
        if self.total == u64::MAX {
            return Share {
                budget: self,
                bytes: 0,
            };
        }
        let bytes = bytes.min(self.total);
        let mut used = self.used.lock().expect("budget lock");
        while *used > 0 && *used + bytes > self.total {
            used = self.freed.wait(used).expect("budget lock");
        }
        *used += bytes;
        Share {
            budget: self,
            bytes,
        }
    }
}

impl Drop for Share<'_> {
    fn drop(&mut self) {
        if self.bytes == 0 {
            return;
        }
        let mut used = self.budget.used.lock().expect("budget lock");
        *used -= self.bytes;
        self.budget.freed.notify_all();
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::atomic::{AtomicU64, Ordering};
    use std::time::Duration;

    #[test]
    fn shares_beyond_the_total_wait_and_a_huge_one_runs_alone() {
        let b = Budget::new(Some(100));
        let running = AtomicU64::new(0);
        let peak = AtomicU64::new(0);
        // Six records of 40: at most two fit in 100 at once.
        std::thread::scope(|s| {
            for _ in 0..6 {
                s.spawn(|| {
                    let _share = b.acquire(40);
                    let now = running.fetch_add(40, Ordering::SeqCst) + 40;
                    peak.fetch_max(now, Ordering::SeqCst);
                    std::thread::sleep(Duration::from_millis(20));
                    running.fetch_sub(40, Ordering::SeqCst);
                });
            }
        });
        assert_eq!(peak.load(Ordering::SeqCst), 80);
        assert_eq!(*b.used.lock().unwrap(), 0);
        // A need above the total does not wait forever: it takes the whole budget.
        let big = b.acquire(1_000);
        assert_eq!(*b.used.lock().unwrap(), 100);
        drop(big);
        assert_eq!(*b.used.lock().unwrap(), 0);
    }

    #[test]
    fn a_wfdb_records_samples_come_from_its_header() {
        // LUDB 1 (LUDB 1.0.1 header): 12 signals of 5000 samples at 500 Hz.
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../../../shared/data/ludb/1.hea");
        if !path.is_file() {
            panic!("reference data missing at {}", path.display());
        }
        let input = RecordInput {
            name: "1".into(),
            path,
            problem: None,
        };
        assert_eq!(estimate(&input).bytes, 12 * 5000 * 8);
        // Format 16: held in 2 bytes with one lead in physical units (above
        // the results' floor of 0.31).
        assert_eq!(estimate(&input).deferred, Some(deferred_factor(12, 2)));
        assert!((deferred_factor(12, 2) - (0.25 + 1.0 / 12.0 + 0.02)).abs() < 1e-12);
        assert!((deferred_factor(24, 2) - 0.33).abs() < 1e-12);
        assert!((deferred_factor(12, 4) - (0.5 + 1.0 / 12.0 + 0.02)).abs() < 1e-12);
        assert!((deferred_factor(2, 2) - 0.77).abs() < 1e-12);
        // 60 000 samples: one piece under the default 2 M-sample chunks.
        assert_eq!(
            need(
                estimate(&input).bytes,
                2_000_000,
                4,
                estimate(&input).deferred
            ),
            (12.0 * 5000.0 * 8.0 * STAGE_FACTOR) as u64 + BASE_BYTES
        );
    }

    /// An EDF file written by the crate's writer (EDF+C, one rate for its
    /// leads) is processed from its digital samples when chunked: 2 bytes a
    /// sample; a CSV file never is.
    #[test]
    fn an_edf_file_is_deferred_from_its_header() {
        let dir = std::env::temp_dir().join(format!("tendline-budget-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let lead = |name: &str| tendline_formats::Lead {
            name: name.into(),
            units: "mV".into(),
            samples: (0..5000).map(|i| (i as f64 * 0.01).sin()).collect(),
        };
        let rec = tendline_formats::Record {
            name: "e".into(),
            fs: 500.0,
            leads: vec![lead("I"), lead("II"), lead("V1")],
            meta: Default::default(),
            files: vec![],
            warnings: vec![],
        };
        let path = dir.join("e.edf");
        tendline_formats::edf::write_edf(&path, &rec).unwrap();
        let input = RecordInput {
            name: "e".into(),
            path: path.clone(),
            problem: None,
        };
        let e = estimate(&input);
        assert_eq!(e.deferred, Some(deferred_factor(3, 2)));
        assert_eq!(e.bytes, std::fs::metadata(&path).unwrap().len() * 4);
        let csv = RecordInput {
            name: "c".into(),
            path: dir.join("c.csv"),
            problem: None,
        };
        assert_eq!(estimate(&csv).deferred, None);
        std::fs::remove_dir_all(&dir).unwrap();
    }

    /// A long record's need grows with its samples as read, not with the
    /// stages' working memory, which one chunk bounds; without chunks (0) it
    /// grows with the stages'.
    #[test]
    fn chunks_bound_the_working_memory_of_a_long_record() {
        let day = 86_400_000u64 * 12 * 8; // 24 h, 12 leads at 1000 Hz, as f64
        let chunked = need(day, chunk_samples(2.0), 1, None);
        let chunk_work = (2e6 * 8.0 * CHUNK_EXTENT * STAGE_FACTOR) as u64;
        assert_eq!(
            chunked,
            (day as f64 * READ_FACTOR) as u64 + chunk_work + BASE_BYTES
        );
        // Within 10 % above the measured 9.10 GB (module docs) plus the 34-MB program.
        let measured = 9_133_128u64 * 1024;
        assert!(
            chunked >= measured && chunked <= measured / 10 * 11,
            "{chunked}"
        );
        assert!(need(day, 0, 1, None) > 7 * day);
        // Twice the samples, at most twice (and a bit) the need, once chunked.
        assert!(need(2 * day, chunk_samples(2.0), 1, None) < 2 * chunked);
        // Two threads run two chunks of it at once: one more chunk's work
        // (measured with `--jobs 2`: 9.31 GB).
        assert_eq!(need(day, chunk_samples(2.0), 2, None), chunked + chunk_work);
        assert!(need(day, chunk_samples(2.0), 2, None) >= 9_314_356 * 1024);
        // The same record processed from its digital samples: at or above
        // the largest measured peaks of WFDB format 16, EDF and ISHNE (`dist`
        // binary, `bench/long.md`, 2026-12-06T00:41Z: `--jobs 1` 2805 MiB,
        // EDF; `--jobs 2` 2679 MiB, EDF), within 15 % for one worker and 25 %
        // for two: the peak comes while the whole-record passes run or the
        // results are assembled, when no second chunk runs, so the second
        // chunk's working memory the estimate counts is not used then.
        for (threads, mib, slack) in [(1, 2805u64, 1.15), (2, 2679, 1.25)] {
            let d = need(
                day,
                chunk_samples(2.0),
                threads,
                Some(deferred_factor(12, 2)),
            );
            let measured = mib << 20;
            assert!(
                d >= measured && (d as f64) <= measured as f64 * slack,
                "{threads}: {d}"
            );
        }
    }

    #[test]
    fn a_control_groups_limit_lowers_the_room() {
        // cgroup v2 writes `max` without a limit, v1 a value near 2^63.
        assert_eq!(cgroup_room("max\n", "123\n"), None);
        assert_eq!(cgroup_room("9223372036854771712\n", "5000\n"), None);
        assert_eq!(cgroup_room("4294967296\n", "1073741824\n"), Some(3 << 30));
        assert_eq!(cgroup_room("1000\n", "2000\n"), Some(0));
        assert_eq!(cgroup_room("garbage", "1"), None);
    }

    #[test]
    fn no_limit_never_waits() {
        let b = Budget::new(None);
        let s1 = b.acquire(u64::MAX);
        let s2 = b.acquire(u64::MAX);
        drop((s1, s2));
        assert_eq!(*b.used.lock().unwrap(), 0);
        assert_eq!(b.total(), None);
    }
}
