//! Pacing stimulus artifacts (`tendline_dsp::pacing`, defaults of
//! `pipeline.toml`) against the Lobachevsky University Electrocardiography
//! Database (Kalyakulina et al., IEEE Access 2020;8:186181-186190), records
//! 1-100: the cardiologists' diagnoses in each header say which records are
//! paced, and the lead annotation files say where each QRS starts.
//!
//! Checks:
//! * no spike is found in a record whose diagnoses do not mention pacing
//!   (93 of the 100; a spike there would be a QRS, P or T wave or noise
//!   blanked by mistake);
//! * in the two records with unipolar ventricular pacing (34 and 74), whose
//!   stimuli are large, each spike is followed within 100 ms by a QRS onset
//!   annotated in lead II, and most annotated QRS complexes have one.
//!
//! Run with `--release`; `--nocapture` prints what was found.

use std::path::{Path, PathBuf};

use rayon::prelude::*;
use tendline_dsp::filter::{ConditioningFilter, FilterConfig};
use tendline_dsp::pacing::Spike;
use tendline_formats::annotation::read_annotations;

fn ludb_dir() -> Option<PathBuf> {
    let d = Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../../../shared/data/ludb"
    ));
    if d.is_dir() {
        Some(d.to_path_buf())
    } else {
        println!(
            "SKIP: LUDB not found at {} (see ../shared/data/README.md)",
            d.display()
        );
        None
    }
}

struct Found {
    record: usize,
    paced: bool,
    spikes: Vec<Spike>,
}

fn spikes_of(dir: &Path, record: usize) -> Found {
    let hea = dir.join(format!("{record}.hea"));
    let rec = tendline_formats::wfdb::read_record(&hea).expect("read LUDB record");
    let paced = rec
        .meta
        .comments
        .iter()
        .any(|c| c.to_ascii_lowercase().contains("pacing"));
    let leads: Vec<&[f64]> = rec.leads.iter().map(|l| l.samples.as_slice()).collect();
    let f = ConditioningFilter::design(rec.fs, &FilterConfig::default()).expect("design");
    Found {
        record,
        paced,
        spikes: f.pacing_spikes(&leads),
    }
}

/// QRS onsets of lead II (the `(` just before each `N` label) and the span
/// the cardiologists annotated (first to last mark: the incomplete first and
/// last beats are usually not marked).
fn qrs_onsets(dir: &Path, record: usize) -> (Vec<usize>, (usize, usize)) {
    let ann = read_annotations(&dir.join(format!("{record}.ii"))).expect("read annotations");
    let onsets = ann
        .windows(2)
        .filter(|w| w[0].symbol() == "(" && w[1].symbol() == "N")
        .map(|w| w[0].sample as usize)
        .collect();
    let span = (
        ann.first().map_or(0, |a| a.sample as usize),
        ann.last().map_or(0, |a| a.sample as usize),
    );
    (onsets, span)
}

#[test]
fn pacing_spikes_only_in_paced_records_and_before_their_qrs() {
    let Some(dir) = ludb_dir() else { return };
    let found: Vec<Found> = (1..=100usize)
        .into_par_iter()
        .map(|r| spikes_of(&dir, r))
        .collect();
    let paced: Vec<usize> = found.iter().filter(|f| f.paced).map(|f| f.record).collect();
    println!("records whose diagnoses mention pacing: {paced:?}");
    for f in found.iter().filter(|f| !f.spikes.is_empty()) {
        println!("record {}: {} spike(s)", f.record, f.spikes.len());
    }
    let wrong: Vec<usize> = found
        .iter()
        .filter(|f| !f.paced && !f.spikes.is_empty())
        .map(|f| f.record)
        .collect();
    assert!(
        wrong.is_empty(),
        "spikes in records without pacing: {wrong:?}"
    );
    assert_eq!(paced.len(), 7, "LUDB 1-100 has 7 paced records (headers)");

    // 100 ms at 500 Hz.
    let within = 50usize;
    for r in [34usize, 74] {
        let f = &found[r - 1];
        let (onsets, (first, last)) = qrs_onsets(&dir, r);
        let inside: Vec<&Spike> = f
            .spikes
            .iter()
            .filter(|s| s.start >= first && s.end <= last)
            .collect();
        let followed = inside
            .iter()
            .filter(|s| onsets.iter().any(|&o| o >= s.end && o - s.end <= within))
            .count();
        let preceded = onsets
            .iter()
            .filter(|&&o| f.spikes.iter().any(|s| o >= s.end && o - s.end <= within))
            .count();
        println!(
            "record {r}: {} spikes in the annotated span, {followed} followed by an annotated QRS onset within 100 ms; \
             {preceded} of {} annotated QRS onsets preceded by one",
            inside.len(),
            onsets.len()
        );
        assert_eq!(
            followed,
            inside.len(),
            "record {r}: a spike without a QRS after it"
        );
        assert!(
            preceded * 10 >= onsets.len() * 8,
            "record {r}: only {preceded} of {} QRS onsets follow a spike",
            onsets.len()
        );
    }
}
