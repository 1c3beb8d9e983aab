//! Decoding speed of WFDB formats 16 and 212 (target: ≥ 200 million samples/s on
//! one core), on synthetic buffers and on all of QTDB (format 212) and LUDB
//! (format 16) from `../shared/data`.
//!
//! Run: `cargo bench -p tendline-formats --bench decode`. Criterion prints the
//! throughput in elements (samples) per second.

use std::path::PathBuf;

use criterion::{criterion_group, criterion_main, BatchSize, Criterion, Throughput};
use tendline_formats::wfdb;

fn pseudo_random_bytes(n: usize) -> Vec<u8> {
    let mut x = 0x2545f4914f6cdd1du64;
    (0..n)
        .map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            x as u8
        })
        .collect()
}

fn synthetic(c: &mut Criterion) {
    let n = 4_000_000usize;
    let mut g = c.benchmark_group("decode_synthetic");
    g.throughput(Throughput::Elements(n as u64));
    for format in [16u32, 212] {
        let bytes =
            pseudo_random_bytes(wfdb::bytes_for_samples(format, n as u64).unwrap() as usize);
        let mut out = vec![0i32; n];
        g.bench_function(format!("fmt{format}"), |b| {
            b.iter(|| {
                wfdb::decode_into(format, std::hint::black_box(&bytes), &mut out);
                std::hint::black_box(&out);
            })
        });
    }
    g.finish();
}

fn database(name: &str) -> Option<Vec<PathBuf>> {
    let d = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data")).join(name);
    let list = std::fs::read_to_string(d.join("RECORDS")).ok()?;
    Some(
        list.split_whitespace()
            .map(|r| d.join(format!("{r}.hea")))
            .collect(),
    )
}

fn reference_databases(c: &mut Criterion) {
    for (db, format) in [("qtdb", 212u32), ("ludb", 16)] {
        let Some(headers) = database(db) else {
            eprintln!("SKIP {db}: reference data not found");
            continue;
        };
        // Signal files in memory: pure decoding speed.
        let dats: Vec<Vec<u8>> = headers
            .iter()
            .map(|h| std::fs::read(h.with_extension("dat")).expect("signal file"))
            .collect();
        let total: u64 = dats
            .iter()
            .map(|d| wfdb::samples_in_bytes(format, d.len() as u64))
            .sum();
        eprintln!("{db}: {} records, {total} samples", headers.len());
        let mut g = c.benchmark_group(db);
        g.sample_size(10);
        g.throughput(Throughput::Elements(total));
        let mut out = Vec::new();
        g.bench_function(format!("decode_fmt{format}_all"), |b| {
            b.iter(|| {
                for d in &dats {
                    out.resize(wfdb::samples_in_bytes(format, d.len() as u64) as usize, 0);
                    wfdb::decode_into(format, d, &mut out);
                    std::hint::black_box(&out);
                }
            })
        });
        // The whole reader: header parsing, file reading (page cache), de-interleaving,
        // checks and conversion to mV.
        g.bench_function("read_record_all", |b| {
            b.iter_batched(
                || (),
                |_| {
                    for h in &headers {
                        std::hint::black_box(wfdb::read_record(h).expect("record"));
                    }
                },
                BatchSize::PerIteration,
            )
        });
        g.bench_function("read_digital_all", |b| {
            b.iter(|| {
                for h in &headers {
                    std::hint::black_box(wfdb::read_digital(h).expect("record"));
                }
            })
        });
        g.finish();
    }
}

criterion_group!(benches, synthetic, reference_databases);
criterion_main!(benches);
