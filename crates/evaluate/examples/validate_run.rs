//! Developer entry point until the CLI's `tendline validate` exists:
//! `cargo run -p tendline-evaluate --example validate_run -- <run_dir> <data_dir> <out_dir> [auto|beats|global|per-lead] [floors.toml]`
//! Writes report.json/.md/.html to `out_dir` and prints floor violations (exit 1 if any).

use std::path::PathBuf;
use std::process::ExitCode;
use tendline_evaluate::{
    check_floors, validate, write_report, Floors, ReferenceKind, ValidateOptions,
};

fn main() -> ExitCode {
    let a: Vec<String> = std::env::args().skip(1).collect();
    if a.len() < 3 {
        eprintln!("usage: validate_run <run_dir> <data_dir> <out_dir> [auto|beats|global|per-lead] [floors.toml]");
        return ExitCode::from(2);
    }
    let reference = match a.get(3).map(String::as_str) {
        None | Some("auto") => ReferenceKind::Auto,
        Some("beats") => ReferenceKind::Beats,
        Some("global") => ReferenceKind::Global,
        Some("per-lead") => ReferenceKind::PerLead,
        Some(o) => {
            eprintln!("unknown reference kind `{o}`");
            return ExitCode::from(2);
        }
    };
    let opts = ValidateOptions {
        run_dir: PathBuf::from(&a[0]),
        data_dir: PathBuf::from(&a[1]),
        out_dir: PathBuf::from(&a[2]),
        reference,
        ..Default::default()
    };
    let report = match validate(&opts).and_then(|r| write_report(&r, &opts.out_dir).map(|_| r)) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(1);
        }
    };
    println!("{}", tendline_evaluate::markdown::render(&report));
    if let Some(f) = a.get(4) {
        match Floors::read(&PathBuf::from(f)) {
            Ok(fl) => {
                let v = check_floors(&report, &fl);
                for x in &v {
                    eprintln!("FLOOR: {x}");
                }
                if !v.is_empty() {
                    return ExitCode::from(1);
                }
            }
            Err(e) => {
                eprintln!("error: {e}");
                return ExitCode::from(1);
            }
        }
    }
    ExitCode::SUCCESS
}
