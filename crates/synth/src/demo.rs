//! The demo study shipped in `demo-signals/`: an invented single-dose study.
//!
//! Eight invented volunteers, each with a baseline and a post-dose 10-s
//! 12-lead ECG at 500 Hz, synthesised by [`crate::generate`]. The invented drug
//! lengthens the QT at 1 s RR (the true QTcF, since β = 1/3) by 11–13 ms in five
//! volunteers. S04 has a fast heart rate where Bazett and Fridericia disagree by
//! 45–50 ms; S06 (a woman) has a prolonged QTcF (480 → 492 ms); the post-dose
//! recording of S08 is noisy; the baseline of S03 is stored as EDF and the
//! post-dose ECG of S05 as HL7 aECG XML.
//!
//! Nothing here is a real person, drug or recording.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use tendline_formats::{Metadata, Sex};

use crate::model::{SynthRecord, TruthSummary};
use crate::spec::{NoiseSpec, SynthSpec};
use crate::write;
use crate::{generate, SynthError};

/// Seed of the shipped `demo-signals/`.
pub const DEMO_SEED: u64 = 20261202;

/// Prolonged-QTc limits used for the expected flags: ≥ 450 ms in men, ≥ 460 ms
/// in women; short at ≤ 390 ms (AHA/ACCF/HRS recommendations 2009, from
/// memory; the same defaults as tendline's classification).
pub const PROLONGED_MALE_MS: f64 = 450.0;
pub const PROLONGED_FEMALE_MS: f64 = 460.0;
pub const SHORT_MS: f64 = 390.0;

/// One invented volunteer.
#[derive(Debug, Clone, Copy)]
pub struct Volunteer {
    pub id: &'static str,
    pub sex: Sex,
    pub age: u32,
    /// Heart rate at baseline and post-dose (bpm).
    pub hr_bpm: [f64; 2],
    /// True QTcF at baseline (ms).
    pub qtcf_ms: f64,
    /// Invented drug effect on QTcF (ms).
    pub drug_effect_ms: f64,
    pub pr_ms: f64,
    pub rr_sd_ms: f64,
    pub qrs_axis_deg: f64,
    pub t_axis_deg: f64,
    pub r_amplitude_mv: f64,
    pub t_amplitude_mv: f64,
    pub p_amplitude_mv: f64,
}

/// The eight volunteers.
pub const VOLUNTEERS: [Volunteer; 8] = [
    vol(
        "S01",
        Sex::Male,
        34,
        [64.0, 68.0],
        410.0,
        0.0,
        160.0,
        30.0,
        55.0,
        40.0,
        1.6,
        0.35,
        0.15,
    ),
    vol(
        "S02",
        Sex::Female,
        29,
        [70.0, 74.0],
        418.0,
        12.0,
        150.0,
        28.0,
        65.0,
        45.0,
        1.3,
        0.30,
        0.13,
    ),
    vol(
        "S03",
        Sex::Male,
        45,
        [58.0, 61.0],
        412.0,
        13.0,
        170.0,
        35.0,
        40.0,
        35.0,
        1.8,
        0.40,
        0.16,
    ),
    vol(
        "S04",
        Sex::Male,
        23,
        [114.0, 118.0],
        410.0,
        0.0,
        130.0,
        12.0,
        70.0,
        50.0,
        1.5,
        0.30,
        0.14,
    ),
    vol(
        "S05",
        Sex::Female,
        52,
        [76.0, 80.0],
        418.0,
        11.0,
        155.0,
        20.0,
        30.0,
        30.0,
        1.2,
        0.28,
        0.12,
    ),
    vol(
        "S06",
        Sex::Female,
        61,
        [72.0, 75.0],
        480.0,
        12.0,
        175.0,
        18.0,
        20.0,
        25.0,
        1.1,
        0.30,
        0.12,
    ),
    vol(
        "S07",
        Sex::Male,
        38,
        [60.0, 63.0],
        405.0,
        12.0,
        160.0,
        32.0,
        60.0,
        45.0,
        1.7,
        0.38,
        0.15,
    ),
    vol(
        "S08",
        Sex::Female,
        41,
        [67.0, 70.0],
        420.0,
        1.0,
        145.0,
        26.0,
        50.0,
        40.0,
        1.4,
        0.33,
        0.14,
    ),
];

#[allow(clippy::too_many_arguments)]
const fn vol(
    id: &'static str,
    sex: Sex,
    age: u32,
    hr_bpm: [f64; 2],
    qtcf_ms: f64,
    drug_effect_ms: f64,
    pr_ms: f64,
    rr_sd_ms: f64,
    qrs_axis_deg: f64,
    t_axis_deg: f64,
    r_amplitude_mv: f64,
    t_amplitude_mv: f64,
    p_amplitude_mv: f64,
) -> Volunteer {
    Volunteer {
        id,
        sex,
        age,
        hr_bpm,
        qtcf_ms,
        drug_effect_ms,
        pr_ms,
        rr_sd_ms,
        qrs_axis_deg,
        t_axis_deg,
        r_amplitude_mv,
        t_amplitude_mv,
        p_amplitude_mv,
    }
}

/// Timepoint labels as written to `subjects.csv`.
pub const TIMEPOINTS: [&str; 2] = ["baseline", "post-dose"];
/// Record name suffixes of the timepoints.
const SUFFIX: [&str; 2] = ["base", "post"];
/// The record stored as EDF instead of WFDB.
pub const EDF_RECORD: &str = "s03_base";
/// The record stored as HL7 aECG XML instead of WFDB (the exchange format of
/// cardiac-safety studies).
pub const AECG_RECORD: &str = "s05_post";
/// The noisy record.
pub const NOISY_RECORD: &str = "s08_post";

/// Noise of the noisy record.
pub fn noisy_spec() -> NoiseSpec {
    NoiseSpec {
        baseline_wander_snr_db: Some(15.0),
        powerline_snr_db: Some(20.0),
        powerline_hz: 50.0,
        muscle_snr_db: Some(12.0),
        ..NoiseSpec::default()
    }
}

/// One record of the demo with its truth summary.
#[derive(Debug, Clone)]
pub struct DemoRecord {
    pub name: String,
    pub volunteer: Volunteer,
    /// 0 = baseline, 1 = post-dose.
    pub timepoint: usize,
    pub spec: SynthSpec,
    pub noisy: bool,
    pub edf: bool,
    /// Stored as HL7 aECG XML ([`AECG_RECORD`]).
    pub aecg: bool,
}

/// SplitMix64 step: decorrelates the per-record seeds derived from one seed.
fn splitmix(mut x: u64) -> u64 {
    x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    x ^ (x >> 31)
}

/// The 16 records of the scenario, in subject then timepoint order.
pub fn scenario(seed: u64) -> Vec<DemoRecord> {
    let mut out = Vec::new();
    for (i, v) in VOLUNTEERS.iter().enumerate() {
        for (tp, suffix) in SUFFIX.iter().enumerate() {
            let name = format!("{}_{}", v.id.to_ascii_lowercase(), suffix);
            let noisy = name == NOISY_RECORD;
            let spec = SynthSpec {
                fs_hz: 500.0,
                duration_s: 10.0,
                hr_bpm: v.hr_bpm[tp],
                rr_sd_ms: v.rr_sd_ms,
                qt1000_ms: v.qtcf_ms + if tp == 1 { v.drug_effect_ms } else { 0.0 },
                qt_rr_exponent: 1.0 / 3.0,
                pr_ms: v.pr_ms,
                qrs_axis_deg: v.qrs_axis_deg,
                t_axis_deg: v.t_axis_deg,
                p_amplitude_mv: v.p_amplitude_mv,
                r_amplitude_mv: v.r_amplitude_mv,
                t_amplitude_mv: v.t_amplitude_mv,
                noise: if noisy {
                    noisy_spec()
                } else {
                    NoiseSpec::default()
                },
                seed: splitmix(seed ^ splitmix((2 * i + tp) as u64)),
                ..SynthSpec::default()
            };
            out.push(DemoRecord {
                edf: name == EDF_RECORD,
                aecg: name == AECG_RECORD,
                name,
                volunteer: *v,
                timepoint: tp,
                spec,
                noisy,
            });
        }
    }
    out
}

/// Classification of a QTc value by the limits above.
pub fn expected_flag(qtc_ms: f64, sex: Sex) -> &'static str {
    let limit = match sex {
        Sex::Male => PROLONGED_MALE_MS,
        Sex::Female => PROLONGED_FEMALE_MS,
    };
    if qtc_ms >= limit {
        "prolonged"
    } else if qtc_ms <= SHORT_MS {
        "short"
    } else {
        "normal"
    }
}

fn io_err(path: &Path) -> impl FnOnce(std::io::Error) -> SynthError + '_ {
    move |source| SynthError::Io {
        path: path.to_path_buf(),
        source,
    }
}

fn write_text(path: &Path, text: &str) -> Result<(), SynthError> {
    std::fs::write(path, text).map_err(io_err(path))
}

/// Generate the whole demo into `out` (created if missing): the records with
/// their `.truth`/`.leadtruth` files, `subjects.csv`, `truth.csv`, `RECORDS` and
/// `README.md`. Returns the paths written.
pub fn write_demo(out: &Path, seed: u64) -> Result<Vec<PathBuf>, SynthError> {
    std::fs::create_dir_all(out).map_err(io_err(out))?;
    let records = scenario(seed);
    let mut generated: Vec<(DemoRecord, SynthRecord, TruthSummary)> = Vec::new();
    let mut written = Vec::new();
    for d in records {
        let rec = generate(&d.spec)?;
        let sum = rec.summary().ok_or_else(|| SynthError::Geometry {
            message: format!("record {} holds no complete beat", d.name),
        })?;
        let v = d.volunteer;
        let meta = Metadata {
            age: Some(v.age as f64),
            sex: Some(v.sex),
            subject: Some(v.id.to_string()),
            timepoint: Some(TIMEPOINTS[d.timepoint].to_string()),
            arm: None,
            comments: vec![
                format!(
                    "synthetic ECG from tendline-synth (seed {}); invented volunteer {}, {}",
                    d.spec.seed, v.id, TIMEPOINTS[d.timepoint]
                ),
                "not a real recording: see README.md of demo-signals".to_string(),
            ],
        };
        let path = if d.edf {
            write::write_edf(out, &d.name, &rec, meta)?
        } else if d.aecg {
            write::write_aecg(out, &d.name, &rec, meta)?
        } else {
            write::write_wfdb(out, &d.name, &rec, meta)?
        };
        written.push(path);
        generated.push((d, rec, sum));
    }

    let mut subjects = String::from("record,subject,sex,age,timepoint\n");
    let mut truth = String::from(
        "record,subject,sex,age,timepoint,format,n_beats,mean_rr_ms,mean_hr_bpm,mean_qt_ms,\
         qtcf_ms,qtcb_ms,qtcf_of_means_ms,delta_qtcf_ms,noisy,expected_flag,expected_flag_bazett\n",
    );
    let mut records_list = String::new();
    for (k, (d, _, s)) in generated.iter().enumerate() {
        let v = d.volunteer;
        let tp = TIMEPOINTS[d.timepoint];
        writeln!(
            subjects,
            "{},{},{},{},{}",
            d.name,
            v.id,
            v.sex.code(),
            v.age,
            tp
        )
        .expect("string");
        let delta = if d.timepoint == 1 {
            let base = &generated[k - 1].2;
            format!("{:.3}", s.mean_qtcf_ms - base.mean_qtcf_ms)
        } else {
            String::new()
        };
        writeln!(
            truth,
            "{},{},{},{},{},{},{},{:.3},{:.3},{:.3},{:.3},{:.3},{:.3},{},{},{},{}",
            d.name,
            v.id,
            v.sex.code(),
            v.age,
            tp,
            if d.edf {
                "edf"
            } else if d.aecg {
                "aecg"
            } else {
                "wfdb"
            },
            s.n_beats,
            s.mean_rr_ms,
            60_000.0 / s.mean_rr_ms,
            s.mean_qt_ms,
            s.mean_qtcf_ms,
            s.mean_qtcb_ms,
            s.qtcf_of_means_ms,
            delta,
            if d.noisy { "yes" } else { "no" },
            expected_flag(s.mean_qtcf_ms, v.sex),
            expected_flag(s.mean_qtcb_ms, v.sex),
        )
        .expect("string");
        // The EDF and aECG records are listed with their extension; WFDB records by name.
        if d.edf {
            writeln!(records_list, "{}.edf", d.name).expect("string");
        } else if d.aecg {
            writeln!(records_list, "{}.xml", d.name).expect("string");
        } else {
            writeln!(records_list, "{}", d.name).expect("string");
        }
    }
    for (name, text) in [
        ("subjects.csv", subjects),
        ("truth.csv", truth),
        ("RECORDS", records_list),
        ("README.md", readme(seed, &generated)),
    ] {
        let p = out.join(name);
        write_text(&p, &text)?;
        written.push(p);
    }
    Ok(written)
}

fn readme(seed: u64, generated: &[(DemoRecord, SynthRecord, TruthSummary)]) -> String {
    let mut s = String::new();
    s.push_str(
        "# demo-signals: an invented single-dose study\n\n\
         **Everything here is invented**: the volunteers, the drug and its effect are fictional, \
         and the ECGs are synthetic signals from the `tendline-synth` generator (a Gaussian-event \
         model after McSharry et al., IEEE Trans Biomed Eng 2003;50:289-294). No real person or \
         recording is involved.\n\n\
         ## Regenerate\n\n\
         ```sh\n",
    );
    writeln!(
        s,
        "cargo run --release -p tendline-synth -- --out demo-signals --seed {seed}"
    )
    .expect("string");
    s.push_str(
        "```\n\n\
         The command rewrites every file of this folder, this README included, byte for byte \
         (on the same platform; see the crate docs of `tendline-synth`).\n\n\
         ## Scenario\n\n\
         Eight volunteers, each with a baseline and a post-dose 10-s 12-lead ECG at 500 Hz \
         (leads I, II, III, aVR, aVL, aVF, V1–V6, in mV). The invented drug lengthens the true \
         QTcF by 11–13 ms in S02, S03, S05, S06 and S07 and by 0–1 ms in the others. \
         S04 has a heart rate near 115 bpm, where Bazett's and Fridericia's corrections \
         disagree by 45–50 ms (Bazett calls it prolonged, Fridericia does not). \
         S06, a woman, has a prolonged QTcF (about 480 ms at baseline, 492 ms post-dose) that \
         must be flagged. The post-dose recording of S08 is noisy (baseline wander at 15 dB, \
         50 Hz interference at 20 dB, muscle noise at 12 dB; signal-to-noise ratios over all \
         12 leads, noise generated at the electrodes). Every other recording is \
         noise-free apart from the 1 µV quantisation.\n\n\
         True QT follows QT = QTcF · (RR/1 s)^(1/3) for every beat, RR being the interval \
         preceding the beat, so the true Fridericia QTc of each beat is the subject's value.\n\n\
         ## Files\n\n\
         * `<record>.hea` + `<record>.dat`: WFDB records, format 16, gain 1000 ADU/mV \
         (1 µV step); age and sex in the header comments.\n",
    );
    writeln!(
        s,
        "* `{EDF_RECORD}.edf`: the baseline of S03, stored as EDF+ instead of WFDB (to exercise \
         both readers). `RECORDS` lists the 16 records, WFDB records by name and this one \
         as `{EDF_RECORD}.edf` (tendline's RECORDS convention: an entry without extension is a \
         WFDB record); `subjects.csv` and `truth.csv` name every record by its file stem."
    )
    .expect("string");
    writeln!(
        s,
        "* `{AECG_RECORD}.xml`: the post-dose ECG of S05, stored as an HL7 aECG document (the \
         format sponsors exchange in cardiac-safety studies): one rhythm series, a regular time \
         axis and one SLIST_PQ sequence per lead on a 1 µV grid, lead codes \
         `MDC_ECG_LEAD_I` … `MDC_ECG_LEAD_V6` (read back as I … V6, with AVR, AVL, AVF \
         upper-cased as the MDC codes have them); listed as `{AECG_RECORD}.xml` in `RECORDS`."
    )
    .expect("string");
    s.push_str(
        "* `<record>.truth`: global ground truth as a WFDB annotation file, per beat \
         `(` P onset, `p` P peak, `)` P end, `(` QRS onset, `N` R peak, `)` QRS end, `(` T onset, \
         `t` T peak, `)` T end, all on channel 0 — the convention of the pipeline's `.mark` \
         output.\n\
         * `<record>.leadtruth`: the same per lead (`chan` = lead index, 0 = I … 11 = V6); a \
         wave below 0.05 mV in a lead is absent there.\n\
         * `subjects.csv`: `record,subject,sex,age,timepoint` (timepoints `baseline`, \
         `post-dose`).\n\
         * `truth.csv`: per record the number of complete beats, mean RR (ms) and heart rate, \
         mean global QT (ms), mean per-beat QTcF and QTcB (ms), QTcF of the means, ΔQTcF from \
         baseline (post-dose rows), whether the record is noisy, and the expected \
         classification by QTcF and by QTcB (prolonged at ≥ 450 ms in men, ≥ 460 ms in women; \
         short at ≤ 390 ms).\n\n\
         ## Ground truth\n\n\
         Each wave is a Gaussian (the T wave an asymmetric one). In a lead, a wave starts \
         2.5 σ before and ends 2.5 σ after its centre (it has fallen to 4.4 % of its peak \
         there); the global onset is the earliest and the global end the latest over the leads \
         where the wave is at least 0.05 mV. QT is global QRS onset to global T end. Beats are \
         listed only when the whole beat (P onset to T end) lies inside the record. Marks in \
         the annotation files are the nearest sample (2 ms grid); the values in `truth.csv` are \
         exact. A T-end finder that uses the tangent at the steepest T downslope lands \
         0.5 σ before this end on a Gaussian: with the falling σ = 0.075 · QT (up to 1.05 × that \
         in V3), that is 12–19 ms early for QT of 320–490 ms.\n\n\
         ## Records\n\n\
         | record | subject | sex | age | timepoint | HR (bpm) | QT (ms) | QTcF (ms) | QTcB (ms) | expected |\n\
         |---|---|---|---|---|---|---|---|---|---|\n",
    );
    for (d, _, t) in generated {
        let v = d.volunteer;
        let mut note = expected_flag(t.mean_qtcf_ms, v.sex).to_string();
        let bazett = expected_flag(t.mean_qtcb_ms, v.sex);
        if bazett != note {
            note.push_str(&format!(" (Bazett: {bazett})"));
        }
        if d.noisy {
            note.push_str(", noisy");
        }
        if d.edf {
            note.push_str(", EDF");
        }
        if d.aecg {
            note.push_str(", aECG");
        }
        writeln!(
            s,
            "| {} | {} | {} | {} | {} | {:.1} | {:.1} | {:.1} | {:.1} | {} |",
            d.name,
            v.id,
            v.sex.code(),
            v.age,
            TIMEPOINTS[d.timepoint],
            60_000.0 / t.mean_rr_ms,
            t.mean_qt_ms,
            t.mean_qtcf_ms,
            t.mean_qtcb_ms,
            note
        )
        .expect("string");
    }
    s
}
