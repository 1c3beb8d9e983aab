//! Builds EDF bytes field by field, following the header layout of the EDF
//! specification (Kemp et al. 1992), independently of the crate's writer, so
//! tests can craft valid and broken files.
#![allow(dead_code)]

pub struct Sig {
    pub label: String,
    pub units: String,
    pub pmin: String,
    pub pmax: String,
    pub dmin: String,
    pub dmax: String,
    pub spr: String,
    /// Raw bytes of each data record for this signal.
    pub records: Vec<Vec<u8>>,
}

impl Sig {
    /// An ordinary signal; `data` holds the digital values of all records in order.
    pub fn ecg(label: &str, spr: usize, units: &str, pmin: f64, pmax: f64, data: &[i16]) -> Sig {
        let records = data
            .chunks(spr)
            .map(|c| c.iter().flat_map(|d| d.to_le_bytes()).collect())
            .collect();
        Sig {
            label: label.into(),
            units: units.into(),
            pmin: pmin.to_string(),
            pmax: pmax.to_string(),
            dmin: "-32768".into(),
            dmax: "32767".into(),
            spr: spr.to_string(),
            records,
        }
    }

    /// A BDF (24-bit) signal over the full 24-bit digital range; `data` holds
    /// the digital values of all records in order, stored as 3-byte
    /// little-endian two's complement (BDF layout, from memory).
    pub fn bdf(label: &str, spr: usize, units: &str, pmin: f64, pmax: f64, data: &[i32]) -> Sig {
        let records = data
            .chunks(spr)
            .map(|c| {
                c.iter()
                    .flat_map(|d| d.to_le_bytes()[..3].to_vec())
                    .collect()
            })
            .collect();
        Sig {
            label: label.into(),
            units: units.into(),
            pmin: pmin.to_string(),
            pmax: pmax.to_string(),
            dmin: "-8388608".into(),
            dmax: "8388607".into(),
            spr: spr.to_string(),
            records,
        }
    }

    /// A `BDF Annotations` signal (BDF+), one TAL byte string per data record,
    /// padded with zero bytes to whole 3-byte samples.
    pub fn bdf_annotations_per_record(recs: &[&[u8]]) -> Sig {
        Sig::tal_signal("BDF Annotations", 3, "-8388608", "8388607", recs)
    }

    /// An `EDF Annotations` signal with `tals` in a single data record.
    pub fn annotations(tals: &[u8]) -> Sig {
        Sig::annotations_per_record(&[tals])
    }

    /// An `EDF Annotations` signal, one TAL byte string per data record.
    pub fn annotations_per_record(recs: &[&[u8]]) -> Sig {
        Sig::tal_signal("EDF Annotations", 2, "-32768", "32767", recs)
    }

    /// An annotation signal of `width`-byte samples, long enough for the
    /// longest TAL string, each record zero-padded to it.
    fn tal_signal(label: &str, width: usize, dmin: &str, dmax: &str, recs: &[&[u8]]) -> Sig {
        let max = recs
            .iter()
            .map(|r| r.len())
            .max()
            .unwrap_or(0)
            .div_ceil(width)
            .max(1);
        Sig {
            label: label.into(),
            units: "".into(),
            pmin: "-1".into(),
            pmax: "1".into(),
            dmin: dmin.into(),
            dmax: dmax.into(),
            spr: max.to_string(),
            records: recs
                .iter()
                .map(|r| {
                    let mut v = r.to_vec();
                    v.resize(max * width, 0);
                    v
                })
                .collect(),
        }
    }
}

fn field(out: &mut Vec<u8>, s: &str, width: usize) {
    let mut b = s.as_bytes().to_vec();
    b.resize(width, b' ');
    out.extend_from_slice(&b[..width]);
}

/// Header + data records. `n_records` is written as given; data records are
/// taken from the signals (each must have that many).
pub fn build_edf(
    patient: &str,
    recording: &str,
    reserved: &str,
    n_records: usize,
    duration: &str,
    sigs: &[Sig],
) -> Vec<u8> {
    build_edf_raw(
        patient,
        recording,
        reserved,
        &n_records.to_string(),
        duration,
        sigs,
        None,
    )
}

/// Like [`build_edf`] with the record count and header-size fields as text
/// (to write broken values); `header_bytes` overrides the computed size.
pub fn build_edf_raw(
    patient: &str,
    recording: &str,
    reserved: &str,
    n_records: &str,
    duration: &str,
    sigs: &[Sig],
    header_bytes: Option<&str>,
) -> Vec<u8> {
    let ns = sigs.len();
    let mut out = Vec::new();
    field(&mut out, "0", 8);
    field(&mut out, patient, 80);
    field(&mut out, recording, 80);
    field(&mut out, "02.03.02", 8);
    field(&mut out, "10.00.00", 8);
    let hb = (256 * (ns + 1)).to_string();
    field(&mut out, header_bytes.unwrap_or(&hb), 8);
    field(&mut out, reserved, 44);
    field(&mut out, n_records, 8);
    field(&mut out, duration, 8);
    field(&mut out, &ns.to_string(), 4);
    for s in sigs {
        field(&mut out, &s.label, 16);
    }
    for _ in sigs {
        field(&mut out, "", 80);
    }
    for s in sigs {
        field(&mut out, &s.units, 8);
    }
    for s in sigs {
        field(&mut out, &s.pmin, 8);
    }
    for s in sigs {
        field(&mut out, &s.pmax, 8);
    }
    for s in sigs {
        field(&mut out, &s.dmin, 8);
    }
    for s in sigs {
        field(&mut out, &s.dmax, 8);
    }
    for _ in sigs {
        field(&mut out, "", 80);
    }
    for s in sigs {
        field(&mut out, &s.spr, 8);
    }
    for _ in sigs {
        field(&mut out, "", 32);
    }
    let nrec = sigs.iter().map(|s| s.records.len()).max().unwrap_or(0);
    for r in 0..nrec {
        for s in sigs {
            if let Some(b) = s.records.get(r) {
                out.extend_from_slice(b);
            }
        }
    }
    out
}

/// [`build_edf`] with the BDF identification: first byte 0xFF, then `BIOSEMI`
/// in the version field (BioSemi BDF, from memory).
pub fn build_bdf(
    patient: &str,
    recording: &str,
    reserved: &str,
    n_records: usize,
    duration: &str,
    sigs: &[Sig],
) -> Vec<u8> {
    let mut b = build_edf(patient, recording, reserved, n_records, duration, sigs);
    b[0] = 0xff;
    b[1..8].copy_from_slice(b"BIOSEMI");
    b
}
