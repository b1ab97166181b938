//! `flowsift convert`: captures to analysis-ready Parquet, with an exact
//! account of what was decoded, skipped and lost.
//!
//! Raw flags ([`ConvertArgs`]) become a [`ConvertConfig`] before any work:
//! every input is checked and recognised, the outputs and codec are
//! validated. The work is [`pipeline::convert`].

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{bail, Context};
use ipfix_core::capture::{CaptureOptions, PortFilter};
use ipfix_core::columnar::{Compression, SinkOptions};
use serde::Serialize;

use crate::pipeline::{self, Accounting, ConvertOutcome, ConvertSettings, Inputs, Progress, Runner, StrictViolation};

const AFTER_HELP: &str = "\
Inputs are recognised by their content, never by their name: classic pcap,
pcapng, or IPFIX files (RFC 5655). In captures, UDP datagrams and TCP streams
that carry IPFIX are found on any port (or only on --ports); fragments are
reassembled. '-' reads standard input: it is first copied to a temporary file
(in $TMPDIR, removed at the end), because conversion reads its input twice.

Outputs:
  OUT                  one row per flow record (Data Record of a template)
  OUT.options.parquet  one row per options record (OUT's name with .parquet
                       replaced by .options.parquet; --options-output to move)
Both are always written (an empty table if there was nothing), under a
temporary name first, and renamed when complete. Columns: provenance
(exporter, observationDomainId, templateId, exportTime), one column per
Information Element by its IANA name, then derived columns (forwardingOutcome,
forwardingReason, samplingRate, interface and VRF names from options records,
flowStartTime/flowEndTime, ...).

Memory stays bounded whatever the input size: a first pass reads only
templates and options records, a second converts the records one row group
at a time while a second thread compresses the previous one.

Accounting: at the end a summary goes to standard error (unless --quiet), and
--stats-json writes the full account as JSON: recordsDecoded, recordsSkipped
and recordsSkippedByReason, sequenceGapRecords (records lost before the
capture, by the per-domain Sequence Numbers), malformed messages by reason,
templates, bytes, capture-level skips (packets that are not IPFIX), and per
exporter and observation domain.

Exit status: 0 when the run completed, even if records were skipped (they are
counted); 1 with --strict when a malformed message or a damaged input was
found (nothing is written); 2 on errors (unreadable or unknown input, output
not writable).

Examples:
  # Convert a capture; zstd-compressed Parquet beside it
  flowsift convert exporter-a.pcapng -o flows.parquet

  # Several captures of one maintenance window, and the accounting as JSON
  flowsift convert window-1.pcap window-2.pcap -o window.parquet \\
      --stats-json window.stats.json

  # From standard input, only the IANA IPFIX port, fail on malformed messages
  zcat export.pcap.gz | flowsift convert - -o flows.parquet --ports 4739 --strict

  # Faster, larger files; smaller row groups for many small readers
  flowsift convert big.pcap -o big.parquet --compression lz4 --row-group-rows 65536";

/// Arguments of `flowsift convert`, as given.
#[derive(Debug, clap::Args)]
#[command(after_help = AFTER_HELP)]
pub struct ConvertArgs {
    /// Captures to read: classic pcap, pcapng or RFC 5655 IPFIX files, or -
    /// for standard input.
    #[arg(value_name = "INPUT", required = true)]
    pub inputs: Vec<String>,

    /// The flows table to write (Parquet). Options records go to
    /// OUT.options.parquet beside it.
    #[arg(short = 'o', long, value_name = "OUT")]
    pub output: PathBuf,

    /// Write the options table here instead of OUT.options.parquet.
    #[arg(long, value_name = "PATH")]
    pub options_output: Option<PathBuf>,

    /// Column compression: zstd (level 3), zstd:LEVEL (1-22), snappy, lz4 or
    /// none.
    #[arg(long, value_name = "CODEC", default_value = "zstd")]
    pub compression: String,

    /// Rows per row group. Memory does not depend on it much: records go
    /// to the writer in batches of at most 32,768 rows.
    #[arg(long, value_name = "N", default_value_t = SinkOptions::default().row_group_rows)]
    pub row_group_rows: usize,

    /// Also write the accounting as JSON to FILE ('-' for standard output).
    #[arg(long, value_name = "FILE")]
    pub stats_json: Option<PathBuf>,

    /// Stop with exit status 1, writing nothing, at the first malformed IPFIX
    /// message or damaged (e.g. truncated) input.
    #[arg(long)]
    pub strict: bool,

    /// Take only UDP/TCP traffic to or from these ports as IPFIX
    /// (comma-separated, e.g. 4739,4740). Default: any port, recognised by
    /// content.
    #[arg(long, value_name = "PORT[,PORT...]", value_delimiter = ',')]
    pub ports: Vec<u16>,

    /// No progress bar and no summary on standard error (warnings and errors
    /// still show).
    #[arg(short, long)]
    pub quiet: bool,
}

/// `flowsift convert`, validated.
#[derive(Debug)]
pub struct ConvertConfig {
    /// The inputs, checked and recognised.
    pub inputs: Inputs,
    /// Outputs, codec and limits.
    pub settings: ConvertSettings,
    /// Where the JSON accounting goes.
    pub stats_json: Option<PathBuf>,
    /// No bar, no summary.
    pub quiet: bool,
}

/// Parses `--compression`.
pub fn parse_compression(text: &str) -> anyhow::Result<Compression> {
    let t = text.trim().to_ascii_lowercase();
    Ok(match t.as_str() {
        "zstd" => Compression::Zstd(3),
        "snappy" => Compression::Snappy,
        "lz4" => Compression::Lz4,
        "none" | "uncompressed" => Compression::None,
        _ => match t.strip_prefix("zstd:").map(str::parse::<i32>) {
            Some(Ok(level)) if (1..=22).contains(&level) => Compression::Zstd(level),
            Some(_) => bail!("zstd level must be 1 to 22, as in zstd:3 (got {text:?})"),
            None => bail!("unknown codec {text:?}: use zstd, zstd:LEVEL, snappy, lz4 or none"),
        },
    })
}

/// The capture options for `--ports`.
pub fn capture_options(ports: &[u16]) -> CaptureOptions {
    let filter = if ports.is_empty() { PortFilter::Any } else { PortFilter::Only(ports.to_vec()) };
    CaptureOptions::default().with_ports(filter)
}

impl TryFrom<ConvertArgs> for ConvertConfig {
    type Error = anyhow::Error;

    fn try_from(args: ConvertArgs) -> anyhow::Result<Self> {
        let compression = parse_compression(&args.compression).context("--compression")?;
        if args.row_group_rows == 0 {
            bail!("--row-group-rows must be at least 1");
        }
        if args.output.as_os_str() == "-" {
            bail!("-o: Parquet cannot be streamed to standard output; give a file name");
        }
        if args.output.is_dir() {
            bail!("-o {}: is a directory; give a file name such as flows.parquet", args.output.display());
        }
        let options = args.options_output.clone().unwrap_or_else(|| pipeline::options_path_for(&args.output));
        if options == args.output {
            bail!("--options-output must differ from -o ({})", options.display());
        }
        for out in [&args.output, &options] {
            if let Some(dir) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
                if !dir.is_dir() {
                    bail!("cannot write {}: directory {} does not exist", out.display(), dir.display());
                }
            }
        }
        let inputs = Inputs::open(&args.inputs)?;
        for input in inputs.iter() {
            let same = |out: &PathBuf| std::fs::canonicalize(out).ok().is_some_and(|o| std::fs::canonicalize(&input.path).ok() == Some(o));
            if same(&args.output) || same(&options) {
                bail!("input {} is also an output", input.name);
            }
        }
        let runner = Runner { capture: capture_options(&args.ports), strict: args.strict, ..Runner::default() };
        let sink = SinkOptions::default().with_compression(compression).with_row_group_rows(args.row_group_rows);
        Ok(Self {
            inputs,
            settings: ConvertSettings { flows: args.output, options, sink, runner },
            stats_json: args.stats_json,
            quiet: args.quiet,
        })
    }
}

/// The `--stats-json` document: the accounting, the tables written and
/// the value-level counters.
#[derive(Debug, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct StatsDocument<'a> {
    /// Always `convert`.
    pub command: &'static str,
    /// Records written to the two tables (equals recordsDecoded).
    pub records_written: u64,
    /// The tables.
    pub output: Outputs<'a>,
    /// Everything the decoding pass counted.
    #[serde(flatten)]
    pub accounting: &'a Accounting,
    /// Values written as null or octets, per table.
    pub values: Values<'a>,
    /// What the options records taught the derived columns.
    pub enrichment: &'a ipfix_core::columnar::EnrichmentStats,
    /// Wall-clock seconds per pass.
    pub seconds: pipeline::PassSeconds,
}

/// The two tables.
#[derive(Debug, Serialize)]
pub struct Outputs<'a> {
    /// Flows table.
    pub flows: &'a pipeline::TableSummary,
    /// Options table.
    pub options: &'a pipeline::TableSummary,
}

/// Value counters per table.
#[derive(Debug, Serialize)]
pub struct Values<'a> {
    /// Flows table.
    pub flows: &'a ipfix_core::columnar::ColumnarStats,
    /// Options table.
    pub options: &'a ipfix_core::columnar::ColumnarStats,
}

/// Builds the `--stats-json` document of an outcome.
pub fn stats_document(outcome: &ConvertOutcome) -> StatsDocument<'_> {
    StatsDocument {
        command: "convert",
        records_written: outcome.flows.rows + outcome.options.rows,
        output: Outputs { flows: &outcome.flows, options: &outcome.options },
        accounting: &outcome.accounting,
        values: Values { flows: &outcome.flows_values, options: &outcome.options_values },
        enrichment: &outcome.enrichment,
        seconds: outcome.seconds,
    }
}

/// Runs `flowsift convert`.
pub fn run(args: ConvertArgs) -> anyhow::Result<ExitCode> {
    let config = ConvertConfig::try_from(args)?;
    let progress = Progress::new(!config.quiet);
    let outcome = match pipeline::convert(&config.inputs, &config.settings, &progress) {
        Ok(o) => o,
        Err(e) => {
            if let Some(v) = e.downcast_ref::<StrictViolation>() {
                eprintln!("flowsift: {v}; nothing was written");
                return Ok(ExitCode::from(1));
            }
            return Err(e);
        }
    };
    for w in &outcome.accounting.warnings {
        progress.println(&format!("flowsift: warning: {w}"));
    }
    if !config.quiet {
        let mut err = std::io::stderr().lock();
        write_summary(&mut err, &outcome).ok();
    }
    if let Some(path) = &config.stats_json {
        let doc = stats_document(&outcome);
        let mut text = serde_json::to_string_pretty(&doc).context("cannot serialise the accounting")?;
        text.push('\n');
        if pipeline::is_stdout(path) {
            let mut out = std::io::stdout().lock();
            out.write_all(text.as_bytes())?;
            out.flush()?;
        } else {
            std::fs::write(path, text).with_context(|| format!("cannot write --stats-json {}", path.display()))?;
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// 1234567 → "1,234,567" (one formatter for every command's output).
pub use flow_analytics::render::thousands;

/// "a 3, b 1" from a reason map; empty when the map is.
pub fn reasons(map: &std::collections::BTreeMap<String, u64>) -> String {
    map.iter().map(|(k, v)| format!("{k} {}", thousands(*v))).collect::<Vec<_>>().join(", ")
}

/// Octets in binary units.
pub fn bytes(n: u64) -> String {
    const UNITS: [&str; 5] = ["B", "KiB", "MiB", "GiB", "TiB"];
    let mut v = n as f64;
    let mut unit = 0;
    while v >= 1024.0 && unit + 1 < UNITS.len() {
        v /= 1024.0;
        unit += 1;
    }
    if unit == 0 {
        format!("{n} B")
    } else {
        format!("{v:.1} {}", UNITS.get(unit).copied().unwrap_or("B"))
    }
}

/// The human summary printed at the end.
pub fn write_summary(out: &mut impl Write, o: &ConvertOutcome) -> std::io::Result<()> {
    let a = &o.accounting;
    let line = |label: &str, n: u64, detail: String| {
        let detail = if detail.is_empty() { String::new() } else { format!("  ({detail})") };
        format!("  {label:<22}{:>14}{detail}\n", thousands(n))
    };
    let mut s = format!(
        "flowsift convert: {} input(s), {} read, {} IPFIX messages\n",
        a.inputs.len(),
        bytes(a.bytes.input),
        thousands(a.messages)
    );
    s += &line("records decoded", a.records_decoded, format!("{} options records", thousands(a.options_records_decoded)));
    s += &line("records skipped", a.records_skipped, reasons(&a.records_skipped_by_reason));
    s += &line("sets skipped", a.sets_skipped, reasons(&a.sets_skipped_by_reason));
    s += &line("lost (sequence gaps)", a.sequence_gap_records, String::new());
    s += &line("malformed messages", a.messages_malformed, reasons(&a.malformed_by_reason));
    if let Some(m) = a.malformed_examples.first() {
        s += &format!("    first: {} message #{}: {}\n", m.input, m.message, m.detail);
    }
    s += &line(
        "templates learned",
        a.templates.learned,
        format!(
            "{} redefined, {} withdrawn, {} rejected",
            thousands(a.templates.redefined),
            thousands(a.templates.withdrawn),
            thousands(a.templates.rejected)
        ),
    );
    s += &line("packets not IPFIX", a.capture.packets_skipped(), reasons(&a.capture.packets_skipped_by_reason));
    let domains: usize = a.exporters.iter().map(|e| e.domains.len()).sum();
    s += &format!("  {} session(s), {} observation domain(s)\n", a.exporters.len(), domains);
    let secs = o.seconds.templates + o.seconds.records;
    let rate = if secs > 0.0 { a.records_decoded as f64 / secs } else { 0.0 };
    s += &format!("  {secs:.1} s ({:.1} s templates, {:.1} s records), {:.0} records/s\n", o.seconds.templates, o.seconds.records, rate);
    s += &format!(
        "wrote {} ({} rows, {} row group(s), {}) and {} ({} rows)\n",
        o.flows.path,
        thousands(o.flows.rows),
        o.flows.row_groups,
        bytes(o.flows.bytes),
        o.options.path,
        thousands(o.options.rows)
    );
    out.write_all(s.as_bytes())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codecs() {
        assert_eq!(parse_compression("zstd").ok(), Some(Compression::Zstd(3)));
        assert_eq!(parse_compression("ZSTD:9").ok(), Some(Compression::Zstd(9)));
        assert_eq!(parse_compression("lz4").ok(), Some(Compression::Lz4));
        assert_eq!(parse_compression("none").ok(), Some(Compression::None));
        assert!(parse_compression("zstd:0").is_err());
        assert!(parse_compression("gzip").err().is_some_and(|e| e.to_string().contains("unknown codec")));
    }

    #[test]
    fn number_formatting() {
        assert_eq!(thousands(0), "0");
        assert_eq!(thousands(1234567), "1,234,567");
        assert_eq!(bytes(512), "512 B");
        assert_eq!(bytes(1536), "1.5 KiB");
    }
}
