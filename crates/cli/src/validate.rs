//! `tendline validate`: wiring of the evaluation library to the command line.

use anyhow::Result;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct ValidateArgs {
    /// A finished run folder (holding annotations/).
    pub run: PathBuf,
    /// Folder with the reference records and annotation files.
    #[arg(long)]
    pub data: PathBuf,
    /// Report folder (default: <RUN>/validation).
    #[arg(long)]
    pub out: Option<PathBuf>,
}

pub fn cmd_validate(_a: ValidateArgs) -> Result<ExitCode> {
    anyhow::bail!("validate: not wired yet")
}
