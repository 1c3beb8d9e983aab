//! Development tool for the cross-checks in `tests/python`: dumps what the
//! tendline readers return as JSON lines, and rewrites files with tendline's
//! writers, so the Python tests can compare both directions with the `wfdb`
//! and `pyedflib` packages.
//!
//! ```text
//! annot-dump read <annotation file>       one JSON object per annotation
//! annot-dump copy <in> <out>              read an annotation file and write it again
//! annot-dump codes                        the code table: code, symbol, is_beat
//! annot-dump edf <file.edf>               header line, then one line per lead
//! annot-dump edf-ann <file.edf>           one JSON object per EDF+ annotation
//! annot-dump edf-copy <in.edf> <out.edf>  read an EDF file and write it again
//! ```

use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

use serde_json::json;
use tendline_formats::annotation::{self, read_annotation_file, write_annotation_file};
use tendline_formats::edf;

fn run(args: &[String]) -> Result<(), String> {
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    // A closed pipe (e.g. `| head`) ends the dump with an error message, not a panic.
    let mut emit =
        |v: serde_json::Value| writeln!(out, "{v}").map_err(|e| format!("writing to stdout: {e}"));
    let usage = "usage: annot-dump read <file> | copy <in> <out> | codes | edf <file> | edf-ann <file> | edf-copy <in> <out>";
    let arg = |i: usize| args.get(i).map(|s| Path::new(s.as_str())).ok_or(usage);
    match args.first().map(String::as_str) {
        Some("read") => {
            let file = read_annotation_file(arg(1)?).map_err(|e| e.to_string())?;
            for a in &file.annotations {
                let line = json!({
                    "sample": a.sample,
                    "code": a.code,
                    "symbol": file.symbol_of(a.code),
                    "subtype": a.subtype,
                    "chan": a.chan,
                    "num": a.num,
                    "aux_note": a.aux_text().unwrap_or_default(),
                });
                emit(line)?;
            }
        }
        Some("copy") => {
            let file = read_annotation_file(arg(1)?).map_err(|e| e.to_string())?;
            write_annotation_file(arg(2)?, &file).map_err(|e| e.to_string())?;
        }
        Some("codes") => {
            for code in 0..=annotation::ACMAX {
                let line = json!({
                    "code": code,
                    "symbol": annotation::symbol_of(code),
                    "is_beat": annotation::is_beat_code(code),
                });
                emit(line)?;
            }
        }
        Some("edf") => {
            let rec = edf::read_edf(arg(1)?).map_err(|e| e.to_string())?;
            let header = json!({
                "name": rec.name,
                "fs": rec.fs,
                "n_samples": rec.n_samples(),
                "leads": rec.leads.iter().map(|l| l.name.clone()).collect::<Vec<_>>(),
                "units": rec.leads.iter().map(|l| l.units.clone()).collect::<Vec<_>>(),
                "age": rec.meta.age,
                "sex": rec.meta.sex.map(|s| s.code()),
                "comments": rec.meta.comments,
            });
            emit(header)?;
            for l in &rec.leads {
                emit(json!({"name": l.name, "samples": l.samples}))?;
            }
        }
        Some("edf-ann") => {
            let anns = edf::read_edf_annotations(arg(1)?).map_err(|e| e.to_string())?;
            for a in &anns {
                let line = json!({
                    "onset_s": a.onset_s,
                    "duration_s": a.duration_s,
                    "text": a.text,
                });
                emit(line)?;
            }
        }
        Some("edf-copy") => {
            let rec = edf::read_edf(arg(1)?).map_err(|e| e.to_string())?;
            edf::write_edf(arg(2)?, &rec).map_err(|e| e.to_string())?;
        }
        _ => return Err(usage.to_string()),
    }
    out.flush().map_err(|e| format!("writing to stdout: {e}"))
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match run(&args) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("annot-dump: {e}");
            ExitCode::FAILURE
        }
    }
}
