//! Development tool for the cross-check tests: writes what the readers read into
//! simple files that a Python test can compare with reference libraries.
//!
//! Usage: `formats-dump <digital|record|write:<adc_gain>> <out_dir> <input>...`
//!
//! For input number `i` it writes `<out_dir>/<i>.json` with the metadata (or
//! `{"error": ..., "kind": ...}` when the reader rejects the input) and:
//! - `digital` (WFDB only): `<i>.d.bin` — every signal's digital samples as
//!   little-endian i32, signal after signal;
//! - `record` (any input type): `<i>.p.bin` — the record's samples (mV where
//!   converted) as little-endian f64, lead after lead;
//! - `write:<adc_gain>`: reads the input as a record and writes it with
//!   `wfdb::write_record` into `<out_dir>/<i>/`; the JSON names the header written.

use std::io::Write;
use std::path::{Path, PathBuf};

use serde_json::{json, Value};
use tendline_formats::{wfdb, FormatError, ReadOptions};

fn err_json(e: &FormatError) -> Value {
    let kind = match e {
        FormatError::Io { .. } => "io",
        FormatError::Invalid { .. } => "invalid",
        FormatError::Unsupported { .. } => "unsupported",
    };
    json!({"error": e.to_string(), "kind": kind})
}

fn write_bin<T: Copy>(
    path: &Path,
    data: impl Iterator<Item = T>,
    to_bytes: impl Fn(T) -> Vec<u8>,
) -> std::io::Result<()> {
    let mut f = std::io::BufWriter::new(std::fs::File::create(path)?);
    for v in data {
        f.write_all(&to_bytes(v))?;
    }
    f.flush()
}

fn dump_digital(input: &Path, out: &Path, i: usize) -> std::io::Result<Value> {
    let w = match wfdb::read_digital(input) {
        Ok(w) => w,
        Err(e) => return Ok(err_json(&e)),
    };
    write_bin(
        &out.join(format!("{i}.d.bin")),
        w.signals.iter().flat_map(|s| s.samples.iter().copied()),
        |v: i32| v.to_le_bytes().to_vec(),
    )?;
    let h = &w.header;
    Ok(json!({
        "name": h.name,
        "fs": w.fs,
        "counter_freq": h.counter_freq,
        "base_counter": h.base_counter,
        "base_time": h.base_time,
        "base_date": h.base_date,
        "n_sig": w.signals.len(),
        "sig_len": w.n_frames,
        "samps_per_frame": w.signals.iter().map(|s| s.spec.samples_per_frame).collect::<Vec<_>>(),
        "lengths": w.signals.iter().map(|s| s.samples.len()).collect::<Vec<_>>(),
        "fmt": w.signals.iter().map(|s| s.spec.format).collect::<Vec<_>>(),
        "adc_gain": w.signals.iter().map(|s| s.spec.adc_gain).collect::<Vec<_>>(),
        "baseline": w.signals.iter().map(|s| s.spec.baseline).collect::<Vec<_>>(),
        "units": w.signals.iter().map(|s| s.spec.units.clone()).collect::<Vec<_>>(),
        "sig_name": w.signals.iter().map(|s| s.spec.description.clone()).collect::<Vec<_>>(),
        "comments": h.comments,
        "warnings": w.warnings,
    }))
}

fn dump_record(input: &Path, out: &Path, i: usize) -> std::io::Result<Value> {
    let r = match tendline_formats::read_record(input, &ReadOptions::default()) {
        Ok(r) => r,
        Err(e) => return Ok(err_json(&e)),
    };
    write_bin(
        &out.join(format!("{i}.p.bin")),
        r.leads.iter().flat_map(|l| l.samples.iter().copied()),
        |v: f64| v.to_le_bytes().to_vec(),
    )?;
    Ok(json!({
        "name": r.name,
        "fs": r.fs,
        "n_samples": r.n_samples(),
        "lead_names": r.leads.iter().map(|l| l.name.clone()).collect::<Vec<_>>(),
        "units": r.leads.iter().map(|l| l.units.clone()).collect::<Vec<_>>(),
        "age": r.meta.age,
        "sex": r.meta.sex.map(|s| s.code()),
        "comments": r.meta.comments,
        "warnings": r.warnings,
        "files": r.files,
    }))
}

fn dump_write(input: &Path, out: &Path, i: usize, gain: f64) -> std::io::Result<Value> {
    let r = match tendline_formats::read_record(input, &ReadOptions::default()) {
        Ok(r) => r,
        Err(e) => return Ok(err_json(&e)),
    };
    Ok(
        match wfdb::write_record(&out.join(i.to_string()), &r, gain) {
            Ok(h) => json!({"header": h}),
            Err(e) => err_json(&e),
        },
    )
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let gain = args
        .first()
        .and_then(|a| a.strip_prefix("write:"))
        .map(str::parse::<f64>);
    if args.len() < 3
        || !(matches!(args[0].as_str(), "digital" | "record") || matches!(gain, Some(Ok(_))))
    {
        eprintln!("usage: formats-dump <digital|record|write:<adc_gain>> <out_dir> <input>...");
        std::process::exit(2);
    }
    let out = PathBuf::from(&args[1]);
    if let Err(e) = std::fs::create_dir_all(&out) {
        eprintln!("formats-dump: cannot create {}: {e}", out.display());
        std::process::exit(1);
    }
    for (i, input) in args[2..].iter().enumerate() {
        let input = Path::new(input);
        let res = match (args[0].as_str(), &gain) {
            ("digital", _) => dump_digital(input, &out, i),
            (_, Some(Ok(g))) => dump_write(input, &out, i, *g),
            _ => dump_record(input, &out, i),
        };
        let written =
            res.and_then(|v| std::fs::write(out.join(format!("{i}.json")), v.to_string()));
        if let Err(e) = written {
            eprintln!("formats-dump: writing output for {}: {e}", input.display());
            std::process::exit(1);
        }
    }
}
