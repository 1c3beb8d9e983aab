//! `tendline-synth`: regenerate the demo study (`demo-signals/`) from its seed.
//!
//! `cargo run --release -p tendline-synth -- --out demo-signals --seed 20261202`

use std::path::PathBuf;
use std::process::ExitCode;

use clap::Parser;
use tendline_synth::demo::{write_demo, DEMO_SEED};

/// Write the invented demo study (synthetic 12-lead ECGs with exact ground truth).
#[derive(Parser, Debug)]
#[command(name = "tendline-synth", version)]
struct Args {
    /// Output folder (created if missing; files of the demo are overwritten).
    #[arg(long)]
    out: PathBuf,
    /// Seed of every random choice; the shipped demo uses 20261202.
    #[arg(long, default_value_t = DEMO_SEED)]
    seed: u64,
}

fn main() -> ExitCode {
    let args = Args::parse();
    match write_demo(&args.out, args.seed) {
        Ok(files) => {
            let bytes: u64 = files
                .iter()
                .filter_map(|p| std::fs::metadata(p).ok())
                .map(|m| m.len())
                .sum();
            println!(
                "wrote {} files (+ truth annotations) to {} ({} bytes without annotations)",
                files.len(),
                args.out.display(),
                bytes
            );
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("tendline-synth: {e}");
            ExitCode::from(2)
        }
    }
}
