//! Seeded random-mutation robustness test of the ISHNE Holter reader:
//! thousands of corrupted versions of small ISHNE files (bytes changed, header
//! fields swapped for tricky values, cut, spliced) go through `parse_ishne`;
//! they must return Ok or an error naming the file, never panic or allocate
//! what the bytes do not hold, and an Ok record must satisfy the record contract
//! (finite fs > 0, equal lead lengths > 0). Complements the cargo-fuzz target
//! fuzz/fuzz_targets/ishne.rs.

mod ishne_util;
mod mutation_util;

use ishne_util::Ishne;
use mutation_util::Rng;
use std::path::Path;

use tendline_formats::ishne::parse_ishne;

/// Header slots (offset, width) of the ISHNE layout worth corrupting: sizes
/// and offsets, sex, dates, lead count, lead codes and resolutions, rate.
const SLOTS: [(usize, usize); 10] = [
    (10, 4),
    (14, 4),
    (18, 4),
    (22, 4),
    (128, 2),
    (132, 2),
    (156, 2),
    (158, 2),
    (206, 2),
    (272, 2),
];
const VALUES: [i64; 9] = [0, -1, 1, 12, 13, 32767, -32768, 2147483647, -2147483648];

fn mutate(rng: &mut Rng, seed: &[u8]) -> Vec<u8> {
    let mut b = seed.to_vec();
    for _ in 0..1 + rng.below(3) {
        match rng.below(5) {
            0 if !b.is_empty() => {
                let hdr = b.len().min(530);
                let i = if rng.below(2) == 0 {
                    rng.below(hdr)
                } else {
                    rng.below(b.len())
                };
                b[i] = rng.next() as u8;
            }
            1 => {
                let (at, w) = SLOTS[rng.below(SLOTS.len())];
                // Lead slots: any of the 12 entries.
                let at = if at == 158 || at == 206 {
                    at + 2 * rng.below(12)
                } else {
                    at
                };
                let v = VALUES[rng.below(VALUES.len())];
                if b.len() >= at + w {
                    b[at..at + w].copy_from_slice(&v.to_le_bytes()[..w]);
                }
            }
            2 => {
                let n = rng.below(b.len() + 1);
                b.truncate(n);
            }
            3 => {
                let n = rng.below(64);
                let at = rng.below(b.len() + 1);
                let junk: Vec<u8> = (0..n).map(|_| rng.next() as u8).collect();
                b.splice(at..at, junk);
            }
            _ => {
                let n = rng.below(b.len() + 1);
                let at = rng.below(b.len() + 1);
                b.splice(at..at, vec![0; n.min(16)]);
            }
        }
    }
    b
}

#[test]
fn mutated_ishne_files_never_panic() {
    let seeds = [
        Ishne {
            fs: 200,
            codes: vec![6, 11],
            res_nv: vec![2500, 1000],
            data: vec![vec![0, 400, -400, 7], vec![1, -1, 1000, -8]],
            sex: 1,
            birth: (1, 2, 1950),
            recorded: (3, 4, 2020),
            id: "S1".into(),
            var_block: b"note".to_vec(),
        }
        .bytes(),
        Ishne {
            fs: 1000,
            codes: (5..17).collect(),
            res_nv: vec![1000; 12],
            data: (0..12)
                .map(|k| (0..6).map(|i| (i * k) as i16).collect())
                .collect(),
            sex: 0,
            birth: (0, 0, 0),
            recorded: (0, 0, 0),
            id: String::new(),
            var_block: Vec::new(),
        }
        .bytes(),
    ];
    let mut rng = Rng(0x5eed_0005);
    let (mut ok, mut err) = (0usize, 0usize);
    for i in 0..20_000 {
        let input = mutate(&mut rng, &seeds[i % seeds.len()]);
        match parse_ishne(&input, Path::new("mutant.ecg")) {
            Ok(rec) => {
                ok += 1;
                assert!(rec.fs.is_finite() && rec.fs > 0.0);
                let n = rec.n_samples();
                assert!(n > 0 && rec.leads.iter().all(|l| l.samples.len() == n));
            }
            Err(e) => {
                err += 1;
                assert!(e.to_string().contains("mutant.ecg"), "{e}");
            }
        }
    }
    eprintln!("ISHNE mutants: {ok} read as records, {err} rejected");
    assert!(ok > 0 && err > 0, "mutations should produce both outcomes");
}
