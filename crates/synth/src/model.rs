//! The ECG model: Gaussian P, Q, R, S and T events per beat, projected on the
//! 12 leads, with the exact wave boundaries that follow from the Gaussians.
//!
//! See the crate documentation for the model, the boundary rule and the
//! numerical conventions.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::leads::{self, LEAD_NAMES, WIDTH_FACTOR};
use crate::noise;
use crate::rr::Tachogram;
use crate::spec::SynthSpec;
use crate::SynthError;

/// Random-stream numbers (ChaCha stream ids) of the generator's random parts,
/// so that switching noise on or off never changes the clean signal.
pub(crate) const STREAM_RR: u64 = 1;
pub(crate) const STREAM_PHASE: u64 = 2;

/// The five events of a beat, in time order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Event {
    P,
    Q,
    R,
    S,
    T,
}

/// Fixed shape of the QRS events: (offset from the R centre ms, σ ms).
const Q_SHAPE: (f64, f64) = (-22.0, 6.0);
const R_SHAPE: (f64, f64) = (0.0, 9.0);
const S_SHAPE: (f64, f64) = (24.0, 7.0);
/// σ of the P wave (ms).
const P_SIGMA_MS: f64 = 20.0;
/// T-wave widths as fractions of the beat's QT: rising and falling σ. The
/// falling limb is steeper, as in real T waves (common practice).
const T_SIGMA_UP_FRAC: f64 = 0.12;
const T_SIGMA_DOWN_FRAC: f64 = 0.075;
/// Gaussians are evaluated within ±`SUPPORT_SIGMAS`·σ of their centre; the
/// neglected tail is below exp(-32) ≈ 1e-14 of the peak.
const SUPPORT_SIGMAS: f64 = 8.0;
/// Margin (s) of beats generated before the record start and after its end, so
/// the record starts and ends mid-cycle.
const MARGIN_S: f64 = 2.0;

/// Onset, peak and end of one wave (s from the first sample).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WaveTimes {
    pub onset_s: f64,
    pub peak_s: f64,
    pub end_s: f64,
}

/// Global (all-lead) ground truth of one beat.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TruthBeat {
    pub p: WaveTimes,
    /// QRS onset/end; the peak is the centre of the R event.
    pub qrs: WaveTimes,
    pub t: WaveTimes,
    /// RR interval preceding this beat (ms, between R-event centres).
    pub rr_ms: f64,
    /// QT (ms): global QRS onset to global T end.
    pub qt_ms: f64,
}

/// Ground truth of one beat in one lead; a wave below the negligible amplitude
/// in that lead is `None`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LeadTruthBeat {
    pub p: Option<WaveTimes>,
    pub qrs: Option<WaveTimes>,
    pub t: Option<WaveTimes>,
}

/// A generated recording with its ground truth.
#[derive(Debug, Clone, PartialEq)]
pub struct SynthRecord {
    /// Sampling rate (Hz).
    pub fs_hz: f64,
    /// Lead names, in the order of `leads`: I, II, III, aVR, aVL, aVF, V1..V6.
    pub lead_names: Vec<String>,
    /// Samples (mV), noise included; sample `i` is at time `i / fs_hz`.
    pub leads: Vec<Vec<f64>>,
    /// Global truth of every beat whose P onset and T end both lie within the record.
    pub truth_global: Vec<TruthBeat>,
    /// Per-lead truth, `truth_per_lead[lead][k]` for the beat `truth_global[k]`.
    pub truth_per_lead: Vec<Vec<LeadTruthBeat>>,
    /// Amplitude (mV) of each event in each lead: `amplitudes_mv[lead]` is
    /// `[P, Q, R, S, T]`.
    pub amplitudes_mv: Vec<[f64; 5]>,
}

/// Per-record summary of the ground truth, as written to `truth.csv`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TruthSummary {
    pub n_beats: usize,
    /// Mean of the preceding RR over the truth beats (ms).
    pub mean_rr_ms: f64,
    /// Mean global QT over the truth beats (ms).
    pub mean_qt_ms: f64,
    /// Mean over beats of QT / (RR/1000)^(1/3) (Fridericia), RR the preceding interval.
    pub mean_qtcf_ms: f64,
    /// Mean over beats of QT / (RR/1000)^(1/2) (Bazett).
    pub mean_qtcb_ms: f64,
    /// Fridericia applied to the means: mean QT / (mean RR/1000)^(1/3).
    pub qtcf_of_means_ms: f64,
}

impl SynthRecord {
    /// Number of samples per lead.
    pub fn n_samples(&self) -> usize {
        self.leads.first().map_or(0, Vec::len)
    }

    /// Summary of the global truth; `None` when no complete beat lies in the record.
    pub fn summary(&self) -> Option<TruthSummary> {
        let b = &self.truth_global;
        if b.is_empty() {
            return None;
        }
        let n = b.len() as f64;
        let mean = |f: &dyn Fn(&TruthBeat) -> f64| b.iter().map(f).sum::<f64>() / n;
        let mean_rr_ms = mean(&|x| x.rr_ms);
        let mean_qt_ms = mean(&|x| x.qt_ms);
        Some(TruthSummary {
            n_beats: b.len(),
            mean_rr_ms,
            mean_qt_ms,
            mean_qtcf_ms: mean(&|x| x.qt_ms / (x.rr_ms / 1000.0).cbrt()),
            mean_qtcb_ms: mean(&|x| x.qt_ms / (x.rr_ms / 1000.0).sqrt()),
            qtcf_of_means_ms: mean_qt_ms / (mean_rr_ms / 1000.0).cbrt(),
        })
    }
}

/// One Gaussian event placed in time, with its per-lead amplitudes.
#[derive(Debug, Clone, Copy)]
struct Placed {
    event: Event,
    centre_s: f64,
    /// σ before / after the centre (s), before the lead width factor.
    sigma_up_s: f64,
    sigma_down_s: f64,
}

/// Heart vectors of the five events (mV, see [`leads`] for the axes).
fn heart_vectors(spec: &SynthSpec) -> [[f64; 3]; 5] {
    let r = spec.r_amplitude_mv;
    [
        leads::heart_vector(spec.p_amplitude_mv, 55.0, 10.0),
        // Septal activation: rightward and anterior (common practice).
        leads::heart_vector(0.1 * r, spec.qrs_axis_deg + 110.0, 50.0),
        leads::heart_vector(r, spec.qrs_axis_deg, -10.0),
        // Late basal activation: superior, rightward, posterior.
        leads::heart_vector(0.25 * r, spec.qrs_axis_deg - 150.0, -40.0),
        leads::heart_vector(spec.t_amplitude_mv, spec.t_axis_deg, 25.0),
    ]
}

fn event_index(e: Event) -> usize {
    match e {
        Event::P => 0,
        Event::Q => 1,
        Event::R => 2,
        Event::S => 3,
        Event::T => 4,
    }
}

/// Width factor of an event in a lead (the P wave is taken as purely dipolar).
fn width_factor(e: Event, lead: usize) -> f64 {
    if e == Event::P {
        1.0
    } else {
        WIDTH_FACTOR[lead]
    }
}

/// Per-record layout: amplitudes and which waves count in which lead.
struct Layout {
    amp: Vec<[f64; 5]>,
    sig: Vec<[bool; 5]>,
    /// QRS onset / end offsets from the R centre (s), global.
    qrs_on_off_s: f64,
    qrs_end_off_s: f64,
    /// Largest width factor among leads where P / T count.
    p_fmax: f64,
    t_fmax: f64,
}

fn layout(spec: &SynthSpec) -> Result<Layout, SynthError> {
    let hv = heart_vectors(spec);
    let k = spec.boundary_k;
    let n = LEAD_NAMES.len();
    let mut amp = vec![[0.0; 5]; n];
    let mut sig = vec![[false; 5]; n];
    for l in 0..n {
        for e in 0..5 {
            amp[l][e] = leads::project(hv[e], l);
            sig[l][e] = amp[l][e].abs() >= spec.negligible_mv;
        }
    }
    let mut on = f64::INFINITY;
    let mut end = f64::NEG_INFINITY;
    let mut p_fmax = f64::NEG_INFINITY;
    let mut t_fmax = f64::NEG_INFINITY;
    for (l, sig_l) in sig.iter().enumerate() {
        for (e, (off, sd)) in [
            (Event::Q, Q_SHAPE),
            (Event::R, R_SHAPE),
            (Event::S, S_SHAPE),
        ] {
            if sig_l[event_index(e)] {
                let s = sd * width_factor(e, l);
                on = on.min(off - k * s);
                end = end.max(off + k * s);
            }
        }
        if sig_l[0] {
            p_fmax = p_fmax.max(width_factor(Event::P, l));
        }
        if sig_l[4] {
            t_fmax = t_fmax.max(width_factor(Event::T, l));
        }
    }
    let missing = |w: &str| {
        SynthError::Geometry {
        message: format!(
            "no lead shows the {w} above negligible_mv = {} mV; raise the amplitude or lower negligible_mv",
            spec.negligible_mv
        ),
    }
    };
    if !on.is_finite() {
        return Err(missing("QRS complex"));
    }
    if !p_fmax.is_finite() {
        return Err(missing("P wave"));
    }
    if !t_fmax.is_finite() {
        return Err(missing("T wave"));
    }
    Ok(Layout {
        amp,
        sig,
        qrs_on_off_s: on / 1000.0,
        qrs_end_off_s: end / 1000.0,
        p_fmax,
        t_fmax,
    })
}

/// Events of one beat with R centre `r_s` and preceding RR `rr_ms`, plus its
/// global truth.
fn place_beat(spec: &SynthSpec, lay: &Layout, r_s: f64, rr_ms: f64) -> ([Placed; 5], TruthBeat) {
    let k = spec.boundary_k;
    let qt_ms = spec.qt_for_rr(rr_ms);
    let qrs_on = r_s + lay.qrs_on_off_s;
    let sp = P_SIGMA_MS / 1000.0;
    let p_c = qrs_on - spec.pr_ms / 1000.0 + k * sp * lay.p_fmax;
    let t_up = T_SIGMA_UP_FRAC * qt_ms / 1000.0;
    let t_down = T_SIGMA_DOWN_FRAC * qt_ms / 1000.0;
    // Work in time for T: its centre is placed so that the latest T end over the
    // leads lands exactly QT after the earliest QRS onset.
    let t_end = qrs_on + qt_ms / 1000.0;
    let t_c = t_end - k * t_down * lay.t_fmax;
    let qrs_shape = |(off, sd): (f64, f64), e| Placed {
        event: e,
        centre_s: r_s + off / 1000.0,
        sigma_up_s: sd / 1000.0,
        sigma_down_s: sd / 1000.0,
    };
    let placed = [
        Placed {
            event: Event::P,
            centre_s: p_c,
            sigma_up_s: sp,
            sigma_down_s: sp,
        },
        qrs_shape(Q_SHAPE, Event::Q),
        qrs_shape(R_SHAPE, Event::R),
        qrs_shape(S_SHAPE, Event::S),
        Placed {
            event: Event::T,
            centre_s: t_c,
            sigma_up_s: t_up,
            sigma_down_s: t_down,
        },
    ];
    let truth = TruthBeat {
        p: WaveTimes {
            onset_s: p_c - k * sp * lay.p_fmax,
            peak_s: p_c,
            end_s: p_c + k * sp * lay.p_fmax,
        },
        qrs: WaveTimes {
            onset_s: qrs_on,
            peak_s: r_s,
            end_s: r_s + lay.qrs_end_off_s,
        },
        t: WaveTimes {
            onset_s: t_c - k * t_up * lay.t_fmax,
            peak_s: t_c,
            end_s: t_end,
        },
        rr_ms,
        qt_ms: (t_end - qrs_on) * 1000.0,
    };
    (placed, truth)
}

/// Per-lead truth of a placed beat.
fn lead_truth(spec: &SynthSpec, lay: &Layout, placed: &[Placed; 5], lead: usize) -> LeadTruthBeat {
    let k = spec.boundary_k;
    let sig = lay.sig[lead];
    let wave = |p: &Placed| {
        let f = width_factor(p.event, lead);
        WaveTimes {
            onset_s: p.centre_s - k * p.sigma_up_s * f,
            peak_s: p.centre_s,
            end_s: p.centre_s + k * p.sigma_down_s * f,
        }
    };
    let mut qrs: Option<WaveTimes> = None;
    for p in &placed[1..4] {
        if sig[event_index(p.event)] {
            let w = wave(p);
            qrs = Some(match qrs {
                None => WaveTimes {
                    peak_s: placed[2].centre_s,
                    ..w
                },
                Some(q) => WaveTimes {
                    onset_s: q.onset_s.min(w.onset_s),
                    peak_s: q.peak_s,
                    end_s: q.end_s.max(w.end_s),
                },
            });
        }
    }
    LeadTruthBeat {
        p: sig[0].then(|| wave(&placed[0])),
        qrs,
        t: sig[4].then(|| wave(&placed[4])),
    }
}

/// Value of an (asymmetric) Gaussian event of unit amplitude at time `t`.
fn gauss(p: &Placed, f: f64, t: f64) -> f64 {
    let d = t - p.centre_s;
    let s = if d < 0.0 {
        p.sigma_up_s
    } else {
        p.sigma_down_s
    } * f;
    (-0.5 * (d / s) * (d / s)).exp()
}

/// Generate a recording from `spec` (validated first).
pub fn generate(spec: &SynthSpec) -> Result<SynthRecord, SynthError> {
    spec.validate().map_err(SynthError::Invalid)?;
    let lay = layout(spec)?;
    let fs = spec.fs_hz;
    let n = (spec.duration_s * fs).round() as usize;
    let rec_end_s = (n as f64 - 1.0) / fs;

    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(STREAM_RR);
    let tach = Tachogram::new(spec.mean_rr_ms(), spec.rr_sd_ms, spec.lf_hf_ratio, &mut rng);
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(STREAM_PHASE);
    let phase: f64 = rng.gen();

    // R centres from before the start to after the end.
    let mut r_times = vec![-MARGIN_S - phase * spec.mean_rr_ms() / 1000.0];
    while *r_times.last().expect("non-empty") < spec.duration_s + MARGIN_S {
        let t = *r_times.last().expect("non-empty");
        r_times.push(t + tach.rr_at(t) / 1000.0);
    }

    let nl = LEAD_NAMES.len();
    let mut signal = vec![vec![0.0; n]; nl];
    let mut truth_global = Vec::new();
    let mut truth_per_lead: Vec<Vec<LeadTruthBeat>> = vec![Vec::new(); nl];
    let mut beats = Vec::with_capacity(r_times.len());
    for w in r_times.windows(2) {
        let rr_ms = (w[1] - w[0]) * 1000.0;
        beats.push(place_beat(spec, &lay, w[1], rr_ms));
    }
    for (i, (placed, truth)) in beats.iter().enumerate() {
        if let Some((_, next)) = beats.get(i + 1) {
            if truth.t.end_s >= next.p.onset_s {
                return Err(SynthError::Geometry {
                    message: format!(
                        "T wave ending at {:.3} s overlaps the next P wave starting at {:.3} s: \
                         lower qt1000_ms or pr_ms, or hr_bpm",
                        truth.t.end_s, next.p.onset_s
                    ),
                });
            }
        }
        for p in placed {
            let e = event_index(p.event);
            let lo = ((p.centre_s - SUPPORT_SIGMAS * p.sigma_up_s * 1.2) * fs)
                .floor()
                .max(0.0);
            let hi = ((p.centre_s + SUPPORT_SIGMAS * p.sigma_down_s * 1.2) * fs).ceil();
            if hi < 0.0 || lo >= n as f64 {
                continue;
            }
            let (lo, hi) = (lo as usize, (hi as usize).min(n - 1));
            for (l, lead) in signal.iter_mut().enumerate() {
                let a = lay.amp[l][e];
                let f = width_factor(p.event, l);
                for (j, v) in lead[lo..=hi].iter_mut().enumerate() {
                    *v += a * gauss(p, f, (lo + j) as f64 / fs);
                }
            }
        }
        if truth.p.onset_s >= 0.0 && truth.t.end_s <= rec_end_s {
            truth_global.push(*truth);
            for (l, tl) in truth_per_lead.iter_mut().enumerate() {
                tl.push(lead_truth(spec, &lay, placed, l));
            }
        }
    }

    if spec.noise.any() {
        noise::add_noise(&mut signal, fs, &spec.noise, spec.seed)?;
    }

    Ok(SynthRecord {
        fs_hz: fs,
        lead_names: LEAD_NAMES.iter().map(|s| s.to_string()).collect(),
        leads: signal,
        truth_global,
        truth_per_lead,
        amplitudes_mv: lay.amp,
    })
}

/// Slow reference evaluation of the clean signal of lead `lead` at time `t_s`:
/// every event of every beat, no support window. Used as a test oracle.
pub fn clean_value_slow(
    spec: &SynthSpec,
    lead: usize,
    t_s: &[f64],
) -> Result<Vec<f64>, SynthError> {
    spec.validate().map_err(SynthError::Invalid)?;
    let lay = layout(spec)?;
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(STREAM_RR);
    let tach = Tachogram::new(spec.mean_rr_ms(), spec.rr_sd_ms, spec.lf_hf_ratio, &mut rng);
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(STREAM_PHASE);
    let phase: f64 = rng.gen();
    let mut r = vec![-MARGIN_S - phase * spec.mean_rr_ms() / 1000.0];
    while *r.last().expect("non-empty") < spec.duration_s + MARGIN_S {
        let t = *r.last().expect("non-empty");
        r.push(t + tach.rr_at(t) / 1000.0);
    }
    let mut out = vec![0.0; t_s.len()];
    for w in r.windows(2) {
        let (placed, _) = place_beat(spec, &lay, w[1], (w[1] - w[0]) * 1000.0);
        for p in &placed {
            let a = lay.amp[lead][event_index(p.event)];
            let f = width_factor(p.event, lead);
            for (o, &t) in out.iter_mut().zip(t_s) {
                *o += a * gauss(p, f, t);
            }
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    /// The closed form used here against a numerical integration of the z
    /// equation of McSharry et al. (2003), eq. (3), without its relaxation
    /// term: dz/dt = −Σ aᵢ·Δθᵢ·ω/bᵢ²·exp(−Δθᵢ²/2bᵢ²), θ advancing at ω = 2π/RR,
    /// Δθᵢ = (θ − θᵢ) wrapped to [−π, π). Classic RK4 at a 10-µs step.
    #[test]
    fn closed_form_matches_rk4_integration_of_the_limit_cycle_equation() {
        let spec = SynthSpec {
            rr_sd_ms: 0.0,
            hr_bpm: 60.0,
            ..SynthSpec::default()
        };
        let rec = generate(&spec).unwrap();
        let lay = layout(&spec).unwrap();
        let rr_s = 1.0;
        let omega = 2.0 * PI / rr_s;
        let r = rec.truth_global[3].qrs.peak_s;
        let (placed, _) = place_beat(&spec, &lay, r, rr_s * 1000.0);
        for lead in [1usize, 8] {
            // Event angles and (asymmetric) widths in phase for this constant RR.
            let ev: Vec<(f64, f64, f64, f64)> = placed
                .iter()
                .map(|p| {
                    let f = width_factor(p.event, lead);
                    (
                        lay.amp[lead][event_index(p.event)],
                        omega * (p.centre_s - r),
                        omega * p.sigma_up_s * f,
                        omega * p.sigma_down_s * f,
                    )
                })
                .collect();
            let dz = |t: f64| -> f64 {
                let theta = omega * (t - r);
                ev.iter()
                    .map(|&(a, th, bu, bd)| {
                        let d = (theta - th + PI).rem_euclid(2.0 * PI) - PI;
                        let b = if d < 0.0 { bu } else { bd };
                        -a * d * omega / (b * b) * (-d * d / (2.0 * b * b)).exp()
                    })
                    .sum()
            };
            let fs = rec.fs_hz;
            let i0 = ((r - 0.5) * fs).round() as usize;
            let mut z = rec.leads[lead][i0];
            let h = 1e-5;
            let steps_per_sample = (1.0 / fs / h).round() as usize;
            let mut t = i0 as f64 / fs;
            let mut max_err: f64 = 0.0;
            for i in i0 + 1..i0 + 500 {
                for _ in 0..steps_per_sample {
                    let k1 = dz(t);
                    let k2 = dz(t + h / 2.0);
                    let k4 = dz(t + h);
                    // dz does not depend on z: RK4 reduces to Simpson's rule.
                    z += h / 6.0 * (k1 + 4.0 * k2 + k4);
                    t += h;
                }
                t = i as f64 / fs;
                max_err = max_err.max((z - rec.leads[lead][i]).abs());
            }
            assert!(max_err < 1e-6, "lead {lead}: max error {max_err} mV");
        }
    }
}
