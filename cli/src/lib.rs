//! The `flowsift` command-line tool: wiring between the decoder
//! (`ipfix-core`), the Parquet writer and the analytics (`flow-analytics`).
//!
//! Library crates do the work; this crate turns raw flags into a validated
//! configuration, runs the job, and maps errors to exit codes.

use std::io::ErrorKind;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

pub mod compare;
pub mod convert;
pub mod drops;
pub mod synth;
pub mod inspect;
pub mod pipeline;

/// Where, and why, are packets being dropped?
///
/// flowsift reads IPFIX exports (pcap, pcapng or RFC 5655 files), writes
/// analysis-ready Parquet, and answers drop questions from the shell.
#[derive(Debug, Parser)]
#[command(name = "flowsift", version, about, long_about = None, propagate_version = true)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Drop figures grouped by where (next hop, interface, labels, segments, peer AS, VRF) and why.
    Drops(drops::DropsArgs),
    /// Drops before, during and after a maintenance window: what changed, where, and did it settle.
    Compare(compare::CompareArgs),
    /// Synthetic IPFIX captures of invented scenarios, with their ground truth.
    Synth(synth::SynthArgs),
    /// Convert captures (pcap, pcapng, RFC 5655 IPFIX files) to Parquet, with an exact account of what was decoded, skipped and lost.
    Convert(convert::ConvertArgs),
    /// Show what a capture holds: exporters, observation domains, templates and their fields, loss, malformed messages.
    Inspect(inspect::InspectArgs),
}

/// Parses the command line, runs it, and maps the outcome to an exit code.
/// A closed standard output (broken pipe) counts as success.
pub fn run_main() -> ExitCode {
    let cli = Cli::parse();
    let result = match cli.command {
        Command::Drops(args) => drops::run(args),
        Command::Compare(args) => compare::run(args),
        Command::Synth(args) => synth::run(args),
        Command::Convert(args) => convert::run(args),
        Command::Inspect(args) => inspect::run(args),
    };
    match result {
        Ok(code) => code,
        Err(err) => {
            if is_broken_pipe(&err) {
                return ExitCode::SUCCESS;
            }
            eprintln!("flowsift: error: {err:#}");
            ExitCode::from(2)
        }
    }
}

fn is_broken_pipe(err: &anyhow::Error) -> bool {
    err.chain().any(|cause| {
        cause
            .downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == ErrorKind::BrokenPipe)
    })
}
