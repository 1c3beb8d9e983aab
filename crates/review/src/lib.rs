//! Over-read package of a finished run: a static review site for a reader and the
//! import of the reader's corrections with an audit trail.
//!
//! - [`build_site`] writes `index.html` (records by review priority) and one page per
//!   record (rhythm strip, median beats on the ECG grid with their marks, QT/QTc
//!   table, flags and the caution text). The pages are self-contained: inline CSS,
//!   inline JavaScript and SVG, no server, no network.
//! - On a record page the reader selects a mark (click), moves it by dragging or with
//!   the arrow keys (one sample per key press), reverts it (`Backspace`, or the
//!   revert buttons), can mark a window unreadable, and in the rhythm strip can move
//!   the per-beat QRS onset and T end of each beat or mark a beat unreadable (`U`);
//!   the corrections are saved from the browser as JSON or CSV (schema below).
//! - [`apply_corrections`] validates the whole file against the run, then stores the
//!   corrected marks beside the automatic ones, recomputes QT, QRS, PR, the four QTc
//!   and the classification of the affected windows, appends an audit table, and
//!   writes `corrections-report.md`. Every part file is written atomically and only
//!   after every entry has been checked, so a bad file changes nothing.
//!
//! # Conventions
//! - Sample indices of median-beat marks are 0-based indices into the window's median
//!   beat (`windows/medians/<WWW>/beat`), at the record's `fs`; `-1` is an absent mark.
//! - Intervals are milliseconds: `samples / fs · 1000`.
//! - The ECG grid is 25 mm/s and 10 mm/mV with 1 mm minor and 5 mm major lines
//!   (common practice); SVG user units are millimetres, so zooming scales only the
//!   rendered size.
//! - Per-beat marks (`marks/global`, `marks/leads`) are record sample indices at
//!   `fs`, as in the annotation files.
//! - Median-beat corrections change the window's QT/QTc. Per-beat corrections change
//!   the per-beat marks and the annotation files, not the window QT: the median beat
//!   is not rebuilt, so a window holding a beat marked unreadable is flagged
//!   `beat_unreadable_reader` for the reader to correct or declare unreadable.
//!
//! # Corrections file (JSON)
//! ```json
//! {
//!   "format": "tendline-corrections",
//!   "version": 1,
//!   "who": "Dr A. Reader",
//!   "created_utc": "2026-12-02T08:00:00Z",
//!   "changes": [
//!     { "kind": "mark", "record": "s01_base", "window": 0, "lead": "V3",
//!       "fiducial": "t_end", "old_sample": 374, "new_sample": 384,
//!       "reason": "T end on the U wave", "who": "Dr A. Reader",
//!       "when": "2026-12-02T08:00:00Z" },
//!     { "kind": "unreadable", "record": "s01_base", "window": 1, "lead": "global",
//!       "fiducial": "window", "old_sample": null, "new_sample": null,
//!       "reason": "baseline wander" },
//!     { "kind": "beat_mark", "record": "s01_base", "beat": 7, "lead": "global",
//!       "fiducial": "t_end", "old_sample": 6120, "new_sample": 6141,
//!       "reason": "T end before the end of the downslope" },
//!     { "kind": "beat_unreadable", "record": "s01_base", "beat": 9, "lead": "global",
//!       "fiducial": "beat", "reason": "electrode artefact" }
//!   ]
//! }
//! ```
//!
//! The same entries may come as CSV (a file whose name ends in `.csv`): a header
//! row naming columns from [`CSV_COLUMNS`] in any order (`record`, `lead` and
//! `fiducial` required), one entry per row, empty cells for `null`; RFC 4180
//! quoting. A CSV file has no file-level `who` or `created_utc`.
//! - `format` must be `tendline-corrections`, `version` must be `1`; `who` and
//!   `created_utc` of the file are optional defaults for the entries.
//! - `kind`: `mark` (default when omitted) moves one median-beat mark; `unreadable`
//!   declares a whole window unreadable (`lead` `global`, `fiducial` `window`,
//!   samples `null`); `beat_mark` moves one per-beat mark (`beat`: 0-based index
//!   into `beats/qrs_peak`; `lead`: `global` or a lead name; samples are record
//!   samples, `0 ≤ new_sample < n_samples` or `-1`); `beat_unreadable` declares one
//!   beat unreadable (`lead` `global`, `fiducial` `beat`, samples `null`).
//! - `record`: record name as in `run.json`; `window`: 0-based window index
//!   (`windows/medians/<WWW>`); `lead`: lead name exactly as in the record.
//! - `fiducial`: one of `p_on`, `p_peak`, `p_end`, `qrs_on`, `qrs_peak`, `qrs_end`,
//!   `t_on`, `t_peak`, `t_end`, `t_end_wavelet`, `t_end_tangent`, `t_end_area`.
//! - `old_sample`: the automatic mark as stored by the run (`-1` when absent); it must
//!   match, so a file made for another run is refused. `new_sample`: the reader's
//!   mark, `0 ≤ new_sample < beat length`, or `-1` to delete the mark.
//! - `who` (entry, else file, else the importer's name) and `when` (ISO 8601 UTC,
//!   `YYYY-MM-DDTHH:MM:SSZ`; entry, else file `created_utc`, else the import time).
//! - One entry per (record, window or beat, lead, fiducial), per unreadable window
//!   and per unreadable beat.
//!
//! # What a correction changes in a part (`/records/<record>`)
//! - `windows/medians/<WWW>/corrected/marks/<fiducial>`: the window's marks (one per
//!   lead) with the reader's values; the automatic `marks/` are untouched.
//!   `corrected/{qt_ms,qrs_ms,pr_ms,t_amplitude_mv,qt_accepted}` per lead, and the
//!   attribute `corrected/unreadable` (0/1).
//! - `windows/<column>`: the current values (recomputed); `windows/auto/<column>`:
//!   the automatic values of every column a correction changed (written once, at the
//!   first import, and kept at later imports). Record-level summary attributes are
//!   recomputed as in the run (median over windows) and their automatic values are
//!   kept as attributes of `windows/auto`.
//! - Corrected windows get the flag `corrected`; a window marked unreadable gets NaN
//!   QT, QTc, JT, QRS and PR, QTc flag `unknown` and the flag `unreadable_reader`.
//! - `marks/corrected/global/<fiducial>` and `marks/corrected/leads/<LL>/<fiducial>`:
//!   the per-beat marks with the reader's values (one per beat); the automatic
//!   `marks/global` and `marks/leads` are untouched. `beats/unreadable_reader`: 1 for
//!   each beat the reader declared unreadable.
//! - `annotations/<record>.mark` and `.leadmark` are rewritten with the current
//!   marks (see the `annotations` module); the automatic files are kept as
//!   `annotations/auto/<record>.mark` and `.leadmark` (written at the first import).
//! - `corrections/`: audit table, one row per change (appended at each import):
//!   `record`, `window` (−1: none), `beat` (−1: none), `lead`, `fiducial`, `kind`,
//!   `old_sample`, `new_sample`, `who`, `when`, `reason`, `applied_utc`, `applied_by`.
//!
//! Every file of an import (parts and annotation files) is written to a temporary
//! sibling first and renamed only when all were written; a rename that fails puts
//! back the files already renamed.
//!
//! Window QT after a correction follows the run's rule from `run.json`'s
//! `[measure]` configuration through [`tendline_measure::global::combine`]
//! (plausibility, T amplitude, noise and outlier checks, then longest lead or
//! superimposed leads), so a corrected lead is accepted or refused exactly as an
//! automatic one would be.

mod annotations;
mod apply;
mod corrections;
mod run;
mod site;
mod util;

pub use apply::{apply_corrections, ApplyReport, WindowChange};
pub use corrections::{Change, CorrectionsFile, Kind, CSV_COLUMNS, FIDUCIALS, FORMAT, VERSION};
pub use site::{build_site, priority, Priority, SiteSummary};

use std::path::PathBuf;

/// What is wrong with one entry of a corrections file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ProblemKind {
    UnknownRecord,
    UnknownWindow,
    /// A beat index the record does not have.
    UnknownBeat,
    UnknownLead,
    UnknownFiducial,
    UnknownKind,
    /// `old_sample` differs from the stored automatic mark.
    OldSampleMismatch,
    /// `new_sample` lies outside the median beat.
    SampleOutOfRange,
    /// A second entry for the same mark or window.
    Duplicate,
    /// Nobody to name as the author of the change.
    MissingWho,
    /// `when` is not ISO 8601 UTC.
    BadTime,
}

/// One problem of one entry (`index` is 0-based into `changes`).
#[derive(Debug, Clone, PartialEq)]
pub struct EntryProblem {
    pub index: usize,
    pub kind: ProblemKind,
    pub message: String,
}

impl std::fmt::Display for EntryProblem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "entry {}: {}", self.index, self.message)
    }
}

/// Errors of this crate, each naming the file concerned.
#[derive(Debug, thiserror::Error)]
pub enum ReviewError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{path}: {message}")]
    Invalid { path: PathBuf, message: String },
    #[error(transparent)]
    Store(#[from] tendline_store::StoreError),
    #[error("{path}: {} bad entr{}, nothing applied:\n{}", problems.len(), if problems.len() == 1 { "y" } else { "ies" }, join(problems))]
    Corrections {
        path: PathBuf,
        problems: Vec<EntryProblem>,
    },
}

fn join(p: &[EntryProblem]) -> String {
    p.iter()
        .map(|e| format!("  {e}"))
        .collect::<Vec<_>>()
        .join("\n")
}
