//! QRS onsets of paced beats held after the pacing stimulus.
//!
//! The filter stage removes pacing stimuli before filtering (it replaces
//! each by the straight line joining its neighbours, `filter.pacing_blank`).
//! A paced complex starts after its stimulus, but its first slope is often
//! slow, and the onset search (back from the complex's first significant
//! W_2 maximum until |W_2| falls below the threshold) may run on through
//! the straight-line stretch to where the stimulus was, or before it. Such
//! an onset is moved to `qrs_stimulus_latency_ms` after the stimulus end.
//!
//! Conventions: stimulus ends are input samples one past the last sample
//! the stimulus occupied, sorted ascending; a beat's stimulus is the latest
//! one ending at or before its QRS peak and no more than `qrs_pre_ms` before
//! it. An onset that would reach the QRS peak is not moved.

use crate::{BeatMarks, DelineateConfig, Mark};

/// Apply the rule of the module docs to the beats of one lead (or the
/// global marks) at input rate `fs`. Public for the median beats of the
/// measurement stage, whose stimulus ends are in median-beat samples.
pub fn onsets_after_stimuli(
    marks: &mut [BeatMarks],
    stimulus_ends: &[usize],
    fs: f64,
    cfg: &DelineateConfig,
) {
    if stimulus_ends.is_empty() || cfg.qrs_stimulus_latency_ms < 0.0 {
        return;
    }
    let latency = (cfg.qrs_stimulus_latency_ms * fs / 1000.0).round() as usize;
    let reach = (cfg.qrs_pre_ms * fs / 1000.0).round() as usize;
    for b in marks.iter_mut() {
        let (Some(peak), Some(on)) = (b.qrs_peak, b.qrs_on) else {
            continue;
        };
        let k = stimulus_ends.partition_point(|&e| e <= peak.sample);
        let Some(&end) = k.checked_sub(1).map(|k| &stimulus_ends[k]) else {
            continue;
        };
        let floor = end + latency;
        if peak.sample - end <= reach && on.sample < floor && floor < peak.sample {
            b.qrs_on = Some(Mark {
                sample: floor,
                confidence: on.confidence,
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::test_marks::m;

    fn beat(on: usize, peak: usize) -> BeatMarks {
        BeatMarks {
            qrs_on: m(on),
            qrs_peak: m(peak),
            ..Default::default()
        }
    }

    #[test]
    fn onsets_before_a_stimulus_end_move_after_it_and_others_stay() {
        // 500 Hz, latency 10 ms = 5 samples, `qrs_pre_ms` 100 ms = 50
        // samples. Stimuli end at 100, 1000 and 2000.
        let cfg = DelineateConfig {
            qrs_stimulus_latency_ms: 10.0,
            qrs_pre_ms: 100.0,
            ..DelineateConfig::default()
        };
        let mut b = vec![
            beat(98, 130),    // before the stimulus end: to 105
            beat(103, 130),   // after the end, within the latency: to 105
            beat(110, 130),   // after end + latency: stays
            beat(990, 1003),  // end + latency reaches past the peak: stays
            beat(1900, 1990), // stimulus at 2000 is after the peak: stays
            beat(2900, 3060), // the last stimulus (2000) is too far back: stays
        ];
        onsets_after_stimuli(&mut b, &[100, 1000, 2000], 500.0, &cfg);
        let on: Vec<usize> = b.iter().map(|b| b.qrs_on.unwrap().sample).collect();
        assert_eq!(on, [105, 105, 110, 990, 1900, 2900]);
        // Off (negative latency) or no stimuli: nothing moves.
        let off = DelineateConfig {
            qrs_stimulus_latency_ms: -1.0,
            ..cfg.clone()
        };
        let mut c = vec![beat(98, 130)];
        onsets_after_stimuli(&mut c, &[100], 500.0, &off);
        onsets_after_stimuli(&mut c, &[], 500.0, &cfg);
        assert_eq!(c[0].qrs_on, m(98));
    }
}
