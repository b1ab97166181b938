//! `flowsift drops`.

use std::process::ExitCode;

/// Arguments of `flowsift drops`.
#[derive(Debug, clap::Args)]
pub struct DropsArgs {
    /// Parquet files, directories or globs.
    pub inputs: Vec<String>,
}

/// Runs `flowsift drops`.
pub fn run(_args: DropsArgs) -> anyhow::Result<ExitCode> {
    Ok(ExitCode::SUCCESS)
}
