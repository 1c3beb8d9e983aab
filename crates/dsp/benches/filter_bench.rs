//! Speed of conditioning one QTDB-size lead (225 000 samples at 250 Hz, i.e.
//! 15 minutes) and of the building blocks it uses. Run with
//! `cargo bench -p tendline-dsp --bench filter_bench`.

use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use tendline_dsp::filter::{
    butterworth_bandpass_sos, filtfilt_sos, ConditioningFilter, FilterConfig, Powerline,
};
use tendline_dsp::resample::{resample, resample_poly};

const FS: f64 = 250.0;
const N: usize = 225_000;

/// Deterministic test lead: a 1.2 Hz spiky "beat" train, 0.2 Hz wander,
/// 50 Hz interference and pseudo-random noise.
fn lead() -> Vec<f64> {
    let mut state = 0x2545_f491_4f6c_dd1d_u64;
    (0..N)
        .map(|i| {
            let t = i as f64 / FS;
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            let noise = (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
            let phase = (t * 1.2).fract();
            let beat = (-((phase - 0.3) / 0.01).powi(2)).exp();
            beat + 0.5 * (2.0 * std::f64::consts::PI * 0.2 * t).sin()
                + 0.05 * (2.0 * std::f64::consts::PI * 50.0 * t).sin()
                + 0.02 * noise
        })
        .collect()
}

fn bench(c: &mut Criterion) {
    let x = lead();
    let mut g = c.benchmark_group("qtdb_lead_225000_at_250hz");
    g.throughput(Throughput::Elements(N as u64));
    g.sample_size(20);

    let fixed = ConditioningFilter::design(
        FS,
        &FilterConfig {
            powerline: Powerline::Hz50,
            ..FilterConfig::default()
        },
    )
    .expect("default design");
    g.bench_function("condition_fixed_50hz", |b| {
        b.iter(|| fixed.apply(black_box(&x)))
    });

    let auto = ConditioningFilter::design(FS, &FilterConfig::default()).expect("default design");
    g.bench_function("condition_auto_detect", |b| {
        b.iter(|| auto.apply(black_box(&x)))
    });
    // The pacing-spike search run on every record before filtering (one
    // lead here; a record's cost grows with its number of leads).
    let rule = FilterConfig::default().spike_rule();
    g.bench_function("pacing_spike_search", |b| {
        b.iter(|| tendline_dsp::pacing::lead_spikes(black_box(&x), FS, &rule))
    });
    g.bench_function("detect_powerline_only", |b| {
        b.iter(|| ConditioningFilter::detect_powerline(black_box(&x), FS, auto.config()))
    });

    let bp = butterworth_bandpass_sos(2, 5.0, 15.0, FS).expect("band-pass design");
    g.bench_function("filtfilt_bandpass_5_15hz_order2", |b| {
        b.iter(|| filtfilt_sos(&bp, black_box(&x)))
    });

    g.bench_function("resample_fft_250_to_1000", |b| {
        b.iter(|| resample(black_box(&x), FS, 1000.0))
    });
    g.bench_function("resample_poly_250_to_1000", |b| {
        b.iter(|| resample_poly(black_box(&x), 4, 1))
    });
    g.finish();

    // Design cost, paid once per sampling rate thanks to the cache.
    c.bench_function("design_default_chain", |b| {
        b.iter(|| ConditioningFilter::design(black_box(FS), &FilterConfig::default()))
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
