//! Annotation reader/writer: round trips over the reference annotation files,
//! the sticky `num`/`chan` encoding, and clear errors on bad input.
//!
//! Field-by-field agreement with `wfdb.rdann` (the reference reader) is checked
//! in `tests/python/test_formats_annotations.py`; here the files are
//! `../shared/data` (QTDB 1.0.0, LUDB 1.0.1, wfdb-python sample data).

use std::path::{Path, PathBuf};

use tendline_formats::annotation::{
    encode_annotation_file, encode_annotations, parse_annotation_file, parse_annotations,
    read_annotation_file, read_annotations, write_annotations, Annotation, AnnotationFile, CHN,
    NUM,
};
use tendline_formats::FormatError;

fn data_dir() -> Option<PathBuf> {
    let d = PathBuf::from(concat!(env!("CARGO_MANIFEST_DIR"), "/../../../shared/data"));
    if d.is_dir() {
        Some(d)
    } else {
        eprintln!("SKIP: reference data not found at {}", d.display());
        None
    }
}

fn reference_files(data: &Path) -> Vec<PathBuf> {
    let mut files = Vec::new();
    for f in ["100.atr", "1003.atr", "huge.qrs"] {
        files.push(data.join("wfdb-conformance").join(f));
    }
    let qt_exts = ["atr", "man", "q1c", "q2c", "qt1", "qt2"];
    let mut qt: Vec<PathBuf> = std::fs::read_dir(data.join("qtdb"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| {
            p.extension()
                .is_some_and(|e| qt_exts.contains(&e.to_str().unwrap_or("")))
        })
        .collect();
    qt.sort();
    files.extend(qt);
    let leads = [
        "i", "ii", "iii", "avr", "avl", "avf", "v1", "v2", "v3", "v4", "v5", "v6",
    ];
    for r in 1..=100 {
        for l in leads {
            files.push(data.join("ludb").join(format!("{r}.{l}")));
        }
    }
    files
}

fn tmp_dir(name: &str) -> PathBuf {
    let d = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(name);
    std::fs::create_dir_all(&d).unwrap();
    d
}

#[test]
fn every_reference_file_round_trips() {
    let Some(data) = data_dir() else { return };
    let files = reference_files(&data);
    // 3 conformance + 417 QTDB (81 atr, 105 man, 105 q1c, 11 q2c, 104 qt1, 11 qt2) + 1200 LUDB.
    assert_eq!(files.len(), 3 + 417 + 1200);
    let mut total = 0usize;
    for f in &files {
        let file = read_annotation_file(f).unwrap_or_else(|e| panic!("{e}"));
        assert!(
            !file.annotations.is_empty(),
            "{}: no annotations",
            f.display()
        );
        total += file.annotations.len();
        let bytes =
            encode_annotation_file(&file).unwrap_or_else(|e| panic!("{}: {e}", f.display()));
        let back = parse_annotation_file(&bytes, f).unwrap();
        assert_eq!(back, file, "{}", f.display());
    }
    // Count of all annotations, as `wfdb.rdann` returns them (measured once with
    // wfdb-python 4.3 over the same files; the Python test compares each field).
    assert!(total > 200_000, "only {total} annotations read");
}

#[test]
fn definitions_are_read_not_returned() {
    let Some(data) = data_dir() else { return };
    // 1003.atr (wfdb-python sample data) opens with custom type definitions; the
    // first real annotation, per wfdb.rdann, is an `N` at sample 73 with aux " ".
    let f = read_annotation_file(&data.join("wfdb-conformance/1003.atr")).unwrap();
    assert_eq!(f.custom_labels.len(), 6);
    assert_eq!(f.custom_labels[0].code, 15);
    assert_eq!(f.custom_labels[0].symbol, "c");
    assert_eq!(f.annotations[0].sample, 73);
    assert_eq!(f.annotations[0].symbol(), "N");
    assert_eq!(f.annotations[0].aux.as_deref(), Some(&b" "[..]));
    assert_eq!(f.annotations.len(), 957); // wfdb.rdann count
                                          // huge.qrs: one N at sample 10,000,000,000 reached through five SKIPs (wfdb.rdann).
    let h = read_annotations(&data.join("wfdb-conformance/huge.qrs")).unwrap();
    assert_eq!(h.len(), 1);
    assert_eq!(h[0].sample, 10_000_000_000);
    assert_eq!(h[0].symbol(), "N");
}

fn ann(sample: i64, code: u8, chan: u8, num: i8) -> Annotation {
    Annotation {
        sample,
        code,
        subtype: 0,
        chan,
        num,
        aux: None,
    }
}

fn count_words(bytes: &[u8], code: u8) -> usize {
    // Walks the words as a reader would, skipping AUX payloads and SKIP intervals.
    let mut n = 0;
    let mut i = 0;
    while i + 1 < bytes.len() {
        let w = u16::from_le_bytes([bytes[i], bytes[i + 1]]);
        let a = (w >> 10) as u8;
        i += 2;
        if a == code {
            n += 1;
        }
        if a == 63 {
            let len = (w & 0xff) as usize;
            i += len + (len & 1);
        } else if a == 59 {
            i += 4;
        }
    }
    n
}

#[test]
fn num_and_chan_are_written_only_when_they_change() {
    let anns = vec![
        ann(10, 1, 0, 0),
        ann(20, 1, 0, 0),
        ann(30, 1, 3, 0),
        ann(40, 1, 3, 0),
        ann(40, 39, 3, -5),
        ann(2000, 40, 3, -5),
        ann(3_000_000_000, 1, 0, -5),
    ];
    let bytes = encode_annotations(&anns).unwrap();
    assert_eq!(count_words(&bytes, CHN), 2);
    assert_eq!(count_words(&bytes, NUM), 1);
    assert_eq!(parse_annotations(&bytes, Path::new("mem")).unwrap(), anns);
}

#[test]
fn subtype_and_aux_reset_and_odd_aux_is_padded() {
    let mut a = Annotation::new(5, "+");
    a.aux = Some(b"(AFIB".to_vec());
    a.subtype = -2;
    let b = Annotation::new(9, "N");
    let bytes = encode_annotations(&[a.clone(), b.clone()]).unwrap();
    // word + SUB + AUX header + 5 bytes padded to 6 + word + EOF word.
    assert_eq!(bytes.len(), 2 + 2 + 2 + 6 + 2 + 2);
    assert_eq!(
        parse_annotations(&bytes, Path::new("mem")).unwrap(),
        vec![a, b]
    );
}

#[test]
fn writer_is_atomic_and_rereads() {
    let dir = tmp_dir("ann_write");
    let path = dir.join("x.atr");
    let anns = vec![Annotation::new(0, "N"), Annotation::new(1500, "V")];
    write_annotations(&path, &anns).unwrap();
    assert_eq!(read_annotations(&path).unwrap(), anns);
    let leftovers: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains(".tmp-"))
        .collect();
    assert!(leftovers.is_empty());
}

fn invalid_message(r: Result<impl std::fmt::Debug, FormatError>, name: &str) -> String {
    match r {
        Err(e @ FormatError::Invalid { .. }) => {
            let m = e.to_string();
            assert!(m.contains(name), "error does not name the file: {m}");
            m
        }
        other => panic!("expected an Invalid error, got {other:?}"),
    }
}

#[test]
fn bad_input_gives_clear_errors() {
    let dir = tmp_dir("ann_bad");
    let good = encode_annotations(&[
        {
            let mut a = Annotation::new(5, "+");
            a.aux = Some(b"(N".to_vec());
            a
        },
        Annotation::new(5_000, "N"),
    ])
    .unwrap();
    // Cut inside the AUX payload.
    let p = dir.join("cut_aux.atr");
    std::fs::write(&p, &good[..5]).unwrap();
    let m = invalid_message(read_annotations(&p), "cut_aux.atr");
    assert!(m.contains("AUX"), "{m}");
    // Cut inside the SKIP interval (SKIP starts after word + AUX word + 2 bytes).
    let p = dir.join("cut_skip.atr");
    std::fs::write(&p, &good[..10]).unwrap();
    let m = invalid_message(read_annotations(&p), "cut_skip.atr");
    assert!(m.contains("SKIP"), "{m}");
    // Odd byte count.
    let p = dir.join("odd.atr");
    std::fs::write(&p, &good[..3]).unwrap();
    let m = invalid_message(read_annotations(&p), "odd.atr");
    assert!(m.contains("odd trailing byte"), "{m}");
    // A field word before any annotation.
    let p = dir.join("num_first.atr");
    std::fs::write(&p, [5u8, NUM << 2, 0, 0]).unwrap();
    invalid_message(read_annotations(&p), "num_first.atr");
    // Missing file: an Io error naming it.
    let p = dir.join("absent.atr");
    match read_annotations(&p) {
        Err(e @ FormatError::Io { .. }) => assert!(e.to_string().contains("absent.atr")),
        other => panic!("{other:?}"),
    }
    // Empty file: no annotations, like a file holding only the end word.
    let p = dir.join("empty.atr");
    std::fs::write(&p, []).unwrap();
    assert!(read_annotations(&p).unwrap().is_empty());
}

#[test]
fn writer_rejects_what_the_format_cannot_hold() {
    let dir = tmp_dir("ann_wbad");
    let p = dir.join("w.atr");
    let unsorted = [Annotation::new(10, "N"), Annotation::new(5, "N")];
    let m = invalid_message(write_annotations(&p, &unsorted), "w.atr");
    assert!(m.contains("not sorted"), "{m}");
    assert!(!p.exists());
    invalid_message(write_annotations(&p, &[Annotation::new(-1, "N")]), "w.atr");
    invalid_message(write_annotations(&p, &[ann(1, 0, 0, 0)]), "w.atr");
    invalid_message(write_annotations(&p, &[ann(1, 60, 0, 0)]), "w.atr");
    let mut long = Annotation::new(1, "\"");
    long.aux = Some(vec![b'x'; 256]);
    invalid_message(write_annotations(&p, &[long]), "w.atr");
    let bad_def = AnnotationFile {
        time_resolution_hz: Some(f64::NAN),
        ..Default::default()
    };
    assert!(encode_annotation_file(&bad_def).is_err());
}
