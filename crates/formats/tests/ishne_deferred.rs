//! ISHNE Holter files read with their samples kept digital
//! (`read_ishne_deferred`) against the whole-file reader `read_ishne` as the
//! oracle: the same record, the same values bit for bit, the same errors.
//! Files built byte by byte (tests/ishne_util).

mod ishne_util;

use std::path::{Path, PathBuf};

use ishne_util::Ishne;
use tendline_formats::deferred::Loaded;
use tendline_formats::ishne::{read_ishne, read_ishne_deferred, read_ishne_header};

fn write(name: &str, bytes: &[u8]) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("ishne_deferred");
    std::fs::create_dir_all(&d).unwrap();
    let p = d.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

fn same_bits(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| x.to_bits() == y.to_bits())
}

/// A file of `nl` leads and `n` samples per lead, values over the whole
/// 16-bit range.
fn file(nl: usize, n: usize) -> Ishne {
    let mut x = 12345u64;
    let data = (0..nl)
        .map(|_| {
            (0..n)
                .map(|_| {
                    x = x
                        .wrapping_mul(6364136223846793005)
                        .wrapping_add(1442695040888963407);
                    (x >> 48) as u16 as i16
                })
                .collect()
        })
        .collect();
    Ishne {
        fs: 1000,
        codes: (0..nl as i16).map(|k| 5 + k).collect(),
        res_nv: (0..nl as i16).map(|k| 1000 + 250 * k).collect(),
        data,
        sex: 1,
        birth: (1, 2, 1961),
        recorded: (3, 4, 2021),
        id: "H-1".into(),
        var_block: b"recorder notes".to_vec(),
    }
}

fn check_deferred(p: &Path) {
    let whole = read_ishne(p).unwrap();
    let Loaded::Deferred(d) = read_ishne_deferred(p, &|_, _, _| true).unwrap() else {
        panic!("{}: not deferred", p.display());
    };
    assert_eq!(
        read_ishne_header(p).unwrap(),
        (whole.fs, whole.n_samples(), whole.leads.len())
    );
    assert_eq!(d.first_difference(&whole), None, "{}", p.display());
    let back = d.into_record();
    assert_eq!(back.meta, whole.meta);
    for (x, y) in back.leads.iter().zip(&whole.leads) {
        assert_eq!((&x.name, &x.units), (&y.name, &y.units));
        assert!(same_bits(&x.samples, &y.samples), "{}", x.name);
    }
    let Loaded::Physical(r) = read_ishne_deferred(p, &|_, _, _| false).unwrap() else {
        panic!("{}: deferred when not asked", p.display());
    };
    assert_eq!(r, whole);
}

#[test]
fn deferred_files_read_as_the_whole_file() {
    // 12 leads × 50 000 samples: 1.2 MB of samples, more than one block.
    let big = file(12, 50_000).bytes();
    check_deferred(&write("big.ecg", &big));
    // A changed header byte (CRC warning) and bytes after the samples.
    let mut b = file(3, 1000).bytes();
    b[240] ^= 1;
    b.extend_from_slice(&[1, 2, 3]);
    let p = write("warned.ecg", &b);
    check_deferred(&p);
    assert_eq!(read_ishne(&p).unwrap().warnings.len(), 2);
}

#[test]
fn damaged_files_give_the_same_errors() {
    let good = file(2, 100).bytes();
    let mut cases: Vec<(&str, Vec<u8>)> = vec![
        ("cut_data.ecg", good[..good.len() - 1].to_vec()),
        ("cut_header.ecg", good[..300].to_vec()),
        ("empty.ecg", Vec::new()),
    ];
    let mut ann = good.clone();
    ann[..8].copy_from_slice(b"ANN  1.0");
    cases.push(("ann.ecg", ann));
    let mut b = good.clone();
    b[22..26].copy_from_slice(&500i32.to_le_bytes());
    cases.push(("offset.ecg", b));
    let mut b = good.clone();
    b[22..26].copy_from_slice(&i32::MAX.to_le_bytes());
    cases.push(("far_offset.ecg", b));
    let mut b = good.clone();
    b[206..208].copy_from_slice(&0i16.to_le_bytes());
    cases.push(("resolution.ecg", b));
    for (name, bytes) in cases {
        let p = write(name, &bytes);
        let a = read_ishne(&p).unwrap_err().to_string();
        let b = read_ishne_deferred(&p, &|_, _, _| true)
            .unwrap_err()
            .to_string();
        assert_eq!(a, b, "{name}");
        assert!(a.contains(name), "{a}");
    }
}
