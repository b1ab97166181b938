//! `flowsift drops`: where, and why, packets are dropped.
//!
//! Raw flags ([`DropsArgs`]) are validated into a [`DropsConfig`] before any
//! file is read; the query and rendering live in `flow-analytics`.

use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::{bail, Context};
use flow_analytics::{parse_duration, parse_time, render, Dimension, DropQuery, SortKey};

/// Examples and the dimension list, shown after `--help`.
fn after_help() -> String {
    let mut text = String::from(
        "Dimensions (--by; any other name is taken as a column name):\n",
    );
    for dim in Dimension::NAMED {
        let short = dim.short_name().unwrap_or_default();
        text.push_str(&format!(
            "  {short:<13} {}  [{}]\n",
            dim.description(),
            dim.reads().join(", ")
        ));
    }
    text.push_str(
        "
Measures per group: droppedPackets, droppedOctets, totalPackets, totalOctets,
dropRatio (dropped/total packets), flowRecords, and droppedPacketsLow/High, an
approximate 95% interval on dropped packets. Counts are scaled by the sampling
rate (1-in-N) where it is known; records without a known rate count once, and
the headline says how many there were. Unless grouping by reason, a topReason
column names the reason with the most drops in each group.

Record time is flowEndTime, else exportTime: --every buckets on it (aligned to
whole multiples since 1970), --from is inclusive and --to exclusive.

Examples:
  # Why are packets dropped? (grouped by reason, the default)
  flowsift drops exports/

  # Straight from a capture: where (egress interface) and why
  flowsift drops edge-export.pcapng --by out-if,reason

  # Which next hops drop most, and mainly why, in a maintenance window
  flowsift drops exports/ --by next-hop \\
      --from 2026-11-30T01:00:00Z --to 2026-11-30T03:00:00Z

  # Drops per ingress interface and reason, in 5-minute buckets, top 5 each
  flowsift drops 'exports/date=2026-11-30/**/*.parquet' \\
      --by in-if,reason --every 5m --top 5

  # Only one exporter's TCP traffic, by peer AS, as JSON for a script
  flowsift drops exports/ --by peer-as \\
      --where \"exporter = '192.0.2.1' AND protocolIdentifier = 6\" --format json

  # SRv6: which segment lists lose the largest share of their packets
  flowsift drops exports/ --by segments --sort drop-ratio

Output: the table mode prints a one-line headline, then the groups. JSON (an
array of objects) and CSV print only data; lists keep their stored order there
(segment lists last segment first), while the table shows segment paths in
travel order.",
    );
    text
}

/// Output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// Headline and aligned table.
    Table,
    /// JSON array of objects, one per group.
    Json,
    /// CSV with a header row.
    Csv,
}

/// Arguments of `flowsift drops`, as given.
#[derive(Debug, clap::Args)]
#[command(after_help = after_help())]
pub struct DropsArgs {
    /// Parquet files, directories (searched recursively; key=value
    /// directories become columns) or quoted glob patterns; or captures
    /// (pcap, pcapng, RFC 5655 IPFIX files, - for standard input), which are
    /// decoded on the fly into a temporary Parquet file.
    #[arg(value_name = "INPUT", required = true)]
    pub inputs: Vec<String>,

    /// Group by these dimensions, comma-separated: short names listed below,
    /// or any column name.
    #[arg(long, value_name = "DIM[,DIM...]", default_value = "reason")]
    pub by: String,

    /// Also group into time buckets of this width, e.g. 1m, 5m, 1h, 1h30m.
    #[arg(long, value_name = "DURATION")]
    pub every: Option<String>,

    /// Only records at or after this time (RFC 3339, e.g. 2026-11-30T01:00:00Z).
    #[arg(long, value_name = "TIME")]
    pub from: Option<String>,

    /// Only records before this time (RFC 3339).
    #[arg(long, value_name = "TIME")]
    pub to: Option<String>,

    /// Only records for which this SQL condition over the columns holds,
    /// e.g. "exporter = '192.0.2.1' AND protocolIdentifier = 6".
    #[arg(long = "where", value_name = "SQL")]
    pub filter: Option<String>,

    /// Show this many groups (per bucket with --every); 0 shows all.
    #[arg(long, value_name = "N", default_value_t = 20)]
    pub top: usize,

    /// Order groups by: dropped-packets, dropped-octets, drop-ratio,
    /// total-packets, total-octets or flow-records (largest first).
    #[arg(long, value_name = "KEY", default_value = "dropped-packets")]
    pub sort: String,

    /// Output format.
    #[arg(long, value_enum, value_name = "FORMAT", default_value_t = Format::Table)]
    pub format: Format,
}

/// `flowsift drops`, validated.
#[derive(Debug)]
pub struct DropsConfig {
    /// The query to run.
    pub query: DropQuery,
    /// How to print it.
    pub format: Format,
    /// Captures given as inputs, decoded into a temporary Parquet file
    /// before the query runs.
    pub captures: Vec<String>,
    /// Where that temporary file goes; removed when the run ends.
    pub scratch: Option<tempfile::TempDir>,
}

impl TryFrom<DropsArgs> for DropsConfig {
    type Error = anyhow::Error;

    fn try_from(args: DropsArgs) -> anyhow::Result<Self> {
        let SplitInputs { parquet: inputs, captures, scratch } = split_inputs(&args.inputs, "flowsift-drops-")?;
        let by = Dimension::parse_list(&args.by).context("--by")?;
        let mut query = DropQuery::new(inputs)
            .with_by(by)
            .with_top(args.top)
            .with_sort(args.sort.parse::<SortKey>().context("--sort")?);
        if let Some(every) = &args.every {
            query = query.with_every(parse_duration(every).context("--every")?);
        }
        let from = args.from.as_deref().map(parse_time).transpose().context("--from")?;
        let to = args.to.as_deref().map(parse_time).transpose().context("--to")?;
        if let (Some(from), Some(to)) = (from, to) {
            if from >= to {
                bail!("--from {from} is not before --to {to}");
            }
        }
        if let Some(from) = from {
            query = query.with_from(from);
        }
        if let Some(to) = to {
            query = query.with_to(to);
        }
        if let Some(filter) = args.filter {
            if filter.trim().is_empty() {
                bail!("--where: empty condition");
            }
            query = query.with_filter_sql(filter);
        }
        Ok(DropsConfig {
            query,
            format: args.format,
            captures,
            scratch,
        })
    }
}

/// What an input is.
pub(crate) enum InputKind {
    /// A Parquet file, directory or glob, read by the query.
    Parquet(PathBuf),
    /// A capture (pcap, pcapng, RFC 5655 file, or `-`), decoded first.
    Capture,
}

/// Tells Parquet inputs from captures. Directories and globs are checked by
/// the query; anything else that is not Parquet is sniffed as a capture when
/// it is decoded (with errors naming what its first bytes look like).
pub(crate) fn check_input(input: &str) -> anyhow::Result<InputKind> {
    if input == "-" {
        return Ok(InputKind::Capture);
    }
    let path = Path::new(input);
    if path.is_file() {
        let parquet = flow_analytics::is_parquet(path).with_context(|| format!("{}: cannot read", path.display()))?;
        if !parquet {
            return Ok(InputKind::Capture);
        }
    }
    Ok(InputKind::Parquet(path.to_path_buf()))
}

/// Decodes the capture inputs into one Parquet file in the scratch
/// directory, as `flowsift convert` would (two passes, bounded memory).
fn decode_captures(config: &DropsConfig) -> anyhow::Result<()> {
    decode_into(config.scratch.as_ref(), &config.captures)
}

/// Decodes `captures` into `captures.parquet` in `scratch` (nothing when
/// `scratch` is `None`); shared with `compare`.
/// Inputs sorted into Parquet (read by the query) and captures (decoded
/// first into `captures.parquet` in `scratch`, which is already listed among
/// the Parquet inputs).
pub(crate) struct SplitInputs {
    /// Parquet files, directories and globs, plus the scratch file.
    pub parquet: Vec<PathBuf>,
    /// Capture inputs as given.
    pub captures: Vec<String>,
    /// Where the decoded captures go; removed when dropped.
    pub scratch: Option<tempfile::TempDir>,
}

/// Sorts command-line inputs (see [`SplitInputs`]).
pub(crate) fn split_inputs(raw: &[String], prefix: &str) -> anyhow::Result<SplitInputs> {
    let mut parquet = Vec::new();
    let mut captures = Vec::new();
    for input in raw {
        match check_input(input)? {
            InputKind::Parquet(path) => parquet.push(path),
            InputKind::Capture => captures.push(input.clone()),
        }
    }
    let scratch = if captures.is_empty() {
        None
    } else {
        let dir = tempfile::Builder::new().prefix(prefix).tempdir().context("cannot create a temporary directory")?;
        parquet.push(dir.path().join("captures.parquet"));
        Some(dir)
    };
    Ok(SplitInputs { parquet, captures, scratch })
}

pub(crate) fn decode_into(scratch: Option<&tempfile::TempDir>, captures: &[String]) -> anyhow::Result<()> {
    let Some(dir) = scratch else { return Ok(()) };
    let inputs = crate::pipeline::Inputs::open(captures)?;
    let flows = dir.path().join("captures.parquet");
    let settings = crate::pipeline::ConvertSettings {
        options: crate::pipeline::options_path_for(&flows),
        flows,
        sink: ipfix_core::columnar::SinkOptions::default().with_compression(ipfix_core::columnar::Compression::Snappy),
        runner: crate::pipeline::Runner {
            capture: crate::convert::capture_options(&[]),
            ..crate::pipeline::Runner::default()
        },
    };
    let progress = crate::pipeline::Progress::new(std::io::IsTerminal::is_terminal(&std::io::stderr()));
    let outcome = crate::pipeline::convert(&inputs, &settings, &progress)?;
    progress.finish();
    let acc = &outcome.accounting;
    eprintln!(
        "note: decoded {} flow records from {} capture input(s); {} record(s) skipped, {} malformed message(s), \
         {} record(s) missing by sequence numbers (run `flowsift convert` to keep the Parquet and see the full accounting)",
        outcome.flows.rows,
        captures.len(),
        acc.records_skipped,
        acc.messages_malformed,
        acc.sequence_gap_records,
    );
    Ok(())
}

/// Runs `flowsift drops`.
pub fn run(args: DropsArgs) -> anyhow::Result<ExitCode> {
    let config = DropsConfig::try_from(args)?;
    decode_captures(&config)?;
    let table = config.query.run()?;
    let stdout = std::io::stdout();
    let mut out = BufWriter::new(stdout.lock());
    match config.format {
        Format::Table => render::write_table(&table, &mut out)?,
        Format::Json => render::write_json(&table, &mut out)?,
        Format::Csv => render::write_csv(&table, &mut out)?,
    }
    out.flush()?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    struct Harness {
        #[command(flatten)]
        args: DropsArgs,
    }

    fn parse(argv: &[&str]) -> anyhow::Result<DropsConfig> {
        let harness = Harness::try_parse_from(std::iter::once("drops").chain(argv.iter().copied()))?;
        DropsConfig::try_from(harness.args)
    }

    #[test]
    fn defaults_validate() {
        let config = parse(&["somewhere/"]);
        assert!(config.is_ok(), "{config:?}");
    }

    #[test]
    fn bad_values_are_rejected_before_running() {
        assert!(parse(&["x", "--every", "5"]).is_err());
        assert!(parse(&["x", "--every", "0m"]).is_err());
        assert!(parse(&["x", "--from", "yesterday"]).is_err());
        assert!(parse(&["x", "--sort", "loudest"]).is_err());
        assert!(parse(&["x", "--by", "reason,reason"]).is_err());
        assert!(parse(&[
            "x",
            "--from",
            "2026-11-30T02:00:00Z",
            "--to",
            "2026-11-30T01:00:00Z"
        ])
        .is_err());
    }

    #[test]
    fn capture_inputs_are_decoded_first() {
        let dir = tempfile::tempdir().ok();
        let Some(dir) = dir else { return };
        let path = dir.path().join("export.pcap");
        assert!(std::fs::write(&path, [0xd4, 0xc3, 0xb2, 0xa1, 2, 0, 4, 0]).is_ok());
        let text = path.to_string_lossy().to_string();
        let config = parse(&[text.as_str()]);
        assert!(config.as_ref().is_ok_and(|c| c.captures == [text.clone()] && c.scratch.is_some()), "{config:?}");
    }

    #[test]
    fn drops_names_statuses_as_convert_does() {
        // flow-analytics groups on forwardingStatus and names the groups
        // afterwards; convert derives the text columns. Both must read the
        // IANA forwardingStatus registry alike for every octet (RFC 7270
        // §4.12: only the least-significant octet has a meaning), whatever
        // the reserved bits above it.
        for octet in 0u32..=0xFF {
            for high in [0u32, 0x0100, 0x1234_5600, 0xFFFF_FF00] {
                let status = ipfix_core::ie::ForwardingStatus(high | octet);
                assert_eq!(
                    flow_analytics::forwarding_names(high | octet),
                    (status.outcome().name(), status.reason_name()),
                    "status {:#x}",
                    high | octet
                );
            }
        }
    }
}
