//! Signals with a different number of samples per frame (WFDB) or per data
//! record (EDF) brought to the record's count, so that every signal of a
//! record shares one sampling rate. Positions are exact integer ratios: with
//! `k` samples per frame in and `spf` out, output sample `i` lies at input
//! position `i·k/spf` (both counted from the record's first sample).

/// A signal with `k` samples per frame brought to `spf` samples per frame
/// (`k < spf`): output sample `i` lies at `i·k/spf` of the input's samples,
/// linearly interpolated; past the last input sample it is held.
pub(crate) fn upsample_linear(x: &[f64], k: usize, spf: usize) -> Vec<f64> {
    let frames = x.len() / k;
    let n = frames * spf;
    let last = x.len().saturating_sub(1);
    (0..n)
        .map(|i| {
            // Exact integer position: input index (i·k) / spf, remainder r / spf.
            let num = i * k;
            let (j, r) = (num / spf, num % spf);
            if r == 0 || j >= last {
                x[j.min(last)]
            } else {
                let f = r as f64 / spf as f64;
                x[j] + (x[j + 1] - x[j]) * f
            }
        })
        .collect()
}

/// A signal with `k` samples per frame brought to `spf` samples per frame
/// (`k > spf`): output sample `i` is the mean of the input samples within half
/// an output period of its time, both ends included (positions `i·k/spf ±
/// k/(2·spf)`), so that an even ratio still centres the mean; a box-car
/// low-pass, the signal is not otherwise filtered.
pub(crate) fn downsample_mean(x: &[f64], k: usize, spf: usize) -> Vec<f64> {
    let n = (x.len() / k) * spf;
    let last = x.len().saturating_sub(1);
    (0..n)
        .map(|i| {
            // In units of 1/(2·spf) input samples: centre 2ik, half-width k.
            let (c, h, d) = (2 * i * k, k, 2 * spf);
            let lo = c.saturating_sub(h).div_ceil(d).min(last);
            let hi = ((c + h) / d + 1).clamp(lo + 1, last + 1);
            x[lo..hi].iter().sum::<f64>() / (hi - lo) as f64
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn upsampling_equals_interpolation_at_each_output_time() {
        // Oracle: the time of output sample i is i/spf frames; the input's
        // sample m lies at m/k frames; interpolate between the two around it.
        let x: Vec<f64> = (0..13)
            .map(|m| ((m * 7) % 5) as f64 - 0.3 * m as f64)
            .collect();
        for (k, spf) in [(1usize, 4usize), (2, 4), (51, 200), (3, 4), (1, 1)] {
            let xs = &x[..(x.len() / k) * k];
            let y = upsample_linear(xs, k, spf);
            assert_eq!(y.len(), xs.len() / k * spf);
            for (i, &v) in y.iter().enumerate() {
                let t = i as f64 / spf as f64; // frames
                let pos = t * k as f64; // input samples
                let m = pos.floor() as usize;
                let want = if m + 1 >= xs.len() {
                    xs[xs.len() - 1]
                } else {
                    xs[m] + (xs[m + 1] - xs[m]) * (pos - m as f64)
                };
                assert!(
                    (v - want).abs() < 1e-12,
                    "k {k} spf {spf} i {i}: {v} vs {want}"
                );
            }
        }
    }

    #[test]
    fn downsampling_averages_within_half_an_output_period() {
        // Oracle: output sample i at time i/spf frames; average the input
        // samples m (at m/k frames) with |m/k - i/spf| <= 1/(2 spf).
        let x: Vec<f64> = (0..48)
            .map(|m| ((m * 5) % 7) as f64 + 0.1 * m as f64)
            .collect();
        for (k, spf) in [(2usize, 1usize), (16, 8), (3, 2), (12, 5), (4, 4)] {
            let xs = &x[..(x.len() / k) * k];
            let y = downsample_mean(xs, k, spf);
            assert_eq!(y.len(), xs.len() / k * spf);
            for (i, &v) in y.iter().enumerate() {
                let t = i as f64 / spf as f64;
                let near: Vec<f64> = (0..xs.len())
                    .filter(|&m| (m as f64 / k as f64 - t).abs() <= 0.5 / spf as f64 + 1e-12)
                    .map(|m| xs[m])
                    .collect();
                let want = near.iter().sum::<f64>() / near.len() as f64;
                assert!(
                    (v - want).abs() < 1e-12,
                    "k {k} spf {spf} i {i}: {v} vs {want}"
                );
            }
        }
    }
}
