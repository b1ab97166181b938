//! `flowsift compare`: drops before, during and after a maintenance window.
//!
//! Raw flags ([`CompareArgs`]) are validated into a [`CompareConfig`]; the
//! comparison, classification and HTML report live in `flow-analytics`
//! (`compare`, `report`).

use std::io::{BufWriter, Write};
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{bail, Context};
use flow_analytics::compare::{pct, Class, CompareQuery, Comparison, Thresholds};
use flow_analytics::{parse_duration, parse_time, Dimension};

use crate::drops::{decode_into, split_inputs, SplitInputs};

const AFTER_HELP: &str = "\
Periods: before = the --baseline span just before the window; during = the
window; after = from the window end to the end of the data (or --after).
Buckets of --every are aligned to whole multiples since 1970; the window
bounds must fall on bucket boundaries.

Per value of the --by dimensions: drop ratio (sampled dropped / sampled
packets) per period with a 95% Wilson score interval (ratio-estimator
variance over flow records, Cochran 1977: a record's packets share one
fate), a one-sided two-proportion z-test of during and after against before
on the share of flow records that dropped (NIST/SEMATECH e-Handbook section
7.3.3), when drops rose above the baseline band, and how long until
--stable-buckets buckets in a row were back within it. A change counts when
p < --alpha and the packet drop ratio rose by at least
--min-increase (absolute, 0.01 = one percentage point). With many values,
lower --alpha for a family-wise level (Bonferroni: alpha / (2 x values)).

Classes: unaffected, transient (rose in the window, came back; with the
time), persistent (still above baseline after the window), new (only after
the window). Verdict: still-dropping > new-drops > recovered > no-change.

Figures are estimates from sampled exports; they support, but do not
replace, your own change procedures and judgement.

Exit codes: 0 done, 1 a class named by --fail-on was found, 2 error.

Examples:
  flowsift compare exports/ --window 2026-11-30T00:50:00Z..2026-11-30T01:10:00Z
  flowsift compare capture.pcapng --window 2026-11-30T00:50:00Z..2026-11-30T01:10:00Z \\
      --by out-if,in-vrf --baseline 30m --every 1m --html window-report.html
  flowsift compare exports/ --window 2026-11-30T00:50:00Z..2026-11-30T01:10:00Z \\
      --format json --fail-on persistent,new";

/// Output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// Verdict, evidence and an aligned table.
    Table,
    /// One JSON object (shape version 1, see `flow_analytics::compare::Comparison`).
    Json,
}

/// Arguments of `flowsift compare`, as given.
#[derive(Debug, clap::Args)]
#[command(after_help = AFTER_HELP)]
pub struct CompareArgs {
    /// Parquet files, directories or quoted globs; or captures (pcap,
    /// pcapng, RFC 5655 IPFIX files), decoded on the fly.
    #[arg(value_name = "INPUT", required = true)]
    pub inputs: Vec<String>,

    /// The maintenance window, START..END in RFC 3339 (end exclusive).
    #[arg(long, value_name = "START..END")]
    pub window: String,

    /// Compare per value of these dimensions (as in `flowsift drops --by`).
    #[arg(long, value_name = "DIM[,DIM...]", default_value = "domain,reason")]
    pub by: String,

    /// The baseline span just before the window.
    #[arg(long, value_name = "DURATION", default_value = "20m")]
    pub baseline: String,

    /// Only this span after the window (default: to the end of the data).
    #[arg(long, value_name = "DURATION")]
    pub after: Option<String>,

    /// Bucket width.
    #[arg(long, value_name = "DURATION", default_value = "1m")]
    pub every: String,

    /// Buckets in a row within the baseline band that count as converged.
    #[arg(long, value_name = "N", default_value_t = 3)]
    pub stable_buckets: usize,

    /// Significance level of each one-sided test.
    #[arg(long, value_name = "P", default_value_t = 0.01)]
    pub alpha: f64,

    /// Smallest absolute rise of the drop ratio that counts (0.01 = 1 point).
    #[arg(long, value_name = "RATIO", default_value_t = 0.01)]
    pub min_increase: f64,

    /// Only records for which this SQL condition holds.
    #[arg(long = "where", value_name = "SQL")]
    pub filter: Option<String>,

    /// Rows in the table (all values are in JSON and the report); 0 = all.
    #[arg(long, value_name = "N", default_value_t = 20)]
    pub top: usize,

    /// Output format.
    #[arg(long, value_enum, value_name = "FORMAT", default_value_t = Format::Table)]
    pub format: Format,

    /// Also write a self-contained HTML report here.
    #[arg(long, value_name = "FILE")]
    pub html: Option<PathBuf>,

    /// Exit with 1 when any value has one of these classes, comma-separated:
    /// persistent, new, transient, or any (all but unaffected).
    #[arg(long, value_name = "CLASS[,CLASS...]")]
    pub fail_on: Option<String>,
}

/// `flowsift compare`, validated.
#[derive(Debug)]
pub struct CompareConfig {
    /// The comparison.
    pub query: CompareQuery,
    /// Output format.
    pub format: Format,
    /// Table rows.
    pub top: usize,
    /// HTML report path.
    pub html: Option<PathBuf>,
    /// Classes that fail the run.
    pub fail_on: Vec<Class>,
    /// Inputs as given (for the report).
    pub inputs: Vec<String>,
    /// Captures to decode first.
    pub captures: Vec<String>,
    /// Where they go.
    pub scratch: Option<tempfile::TempDir>,
}

impl TryFrom<CompareArgs> for CompareConfig {
    type Error = anyhow::Error;

    fn try_from(args: CompareArgs) -> anyhow::Result<Self> {
        let Some((start, end)) = args.window.split_once("..") else {
            bail!("--window: expected START..END, e.g. 2026-11-30T00:50:00Z..2026-11-30T01:10:00Z");
        };
        let start = parse_time(start).context("--window start")?;
        let end = parse_time(end).context("--window end")?;
        if start >= end {
            bail!("--window: start {start} is not before end {end}");
        }
        let secs = |text: &str, flag: &str| -> anyhow::Result<u64> {
            Ok(parse_duration(text).with_context(|| flag.to_string())?.as_secs())
        };
        let thresholds = Thresholds {
            baseline_seconds: secs(&args.baseline, "--baseline")?,
            after_seconds: args.after.as_deref().map(|a| secs(a, "--after")).transpose()?,
            every_seconds: secs(&args.every, "--every")?,
            stable_buckets: args.stable_buckets,
            alpha: args.alpha,
            min_increase: args.min_increase,
        };
        if args.stable_buckets == 0 {
            bail!("--stable-buckets must be at least 1");
        }
        if !(args.alpha > 0.0 && args.alpha < 1.0) {
            bail!("--alpha must lie between 0 and 1");
        }
        if !(0.0..1.0).contains(&args.min_increase) {
            bail!("--min-increase must lie in [0, 1)");
        }
        let mut fail_on = Vec::new();
        if let Some(list) = &args.fail_on {
            for name in list.split(',').map(str::trim) {
                match name {
                    "persistent" => fail_on.push(Class::Persistent),
                    "new" => fail_on.push(Class::New),
                    "transient" => fail_on.push(Class::Transient),
                    "any" => fail_on.extend([Class::Persistent, Class::New, Class::Transient]),
                    other => bail!("--fail-on: unknown class `{other}`; expected persistent, new, transient or any"),
                }
            }
        }
        let SplitInputs { parquet: inputs, captures, scratch } = split_inputs(&args.inputs, "flowsift-compare-")?;
        let by = Dimension::parse_list(&args.by).context("--by")?;
        let mut query = CompareQuery::new(inputs, start, end).with_by(by).with_thresholds(thresholds);
        if let Some(filter) = args.filter {
            if filter.trim().is_empty() {
                bail!("--where: empty condition");
            }
            query = query.with_filter_sql(filter);
        }
        Ok(CompareConfig {
            query,
            format: args.format,
            top: args.top,
            html: args.html,
            fail_on,
            inputs: args.inputs,
            captures,
            scratch,
        })
    }
}

/// Runs `flowsift compare`.
pub fn run(args: CompareArgs) -> anyhow::Result<ExitCode> {
    let config = CompareConfig::try_from(args)?;
    decode_into(config.scratch.as_ref(), &config.captures)?;
    let result = config.query.run()?;
    if let Some(path) = &config.html {
        let html = flow_analytics::report::html(&result, &config.inputs);
        std::fs::write(path, html).with_context(|| format!("{}: cannot write the report", path.display()))?;
    }
    let stdout = std::io::stdout();
    let mut out = BufWriter::new(stdout.lock());
    match config.format {
        Format::Table => write_table(&result, config.top, &mut out)?,
        Format::Json => {
            serde_json::to_writer_pretty(&mut out, &result)?;
            writeln!(out)?;
        }
    }
    out.flush()?;
    let failed = result.values.iter().any(|v| config.fail_on.contains(&v.class));
    Ok(if failed { ExitCode::from(1) } else { ExitCode::SUCCESS })
}

/// Verdict first, then evidence, thresholds and the values.
fn write_table(result: &Comparison, top: usize, out: &mut impl Write) -> anyhow::Result<()> {
    writeln!(out, "Verdict: {}", result.headline)?;
    for line in &result.evidence {
        writeln!(out, "  - {line}")?;
    }
    let t = &result.thresholds;
    writeln!(
        out,
        "Window {} .. {}; before {} .. {}; after {} .. {}",
        result.window.start, result.window.end, result.before.start, result.before.end, result.after.start, result.after.end
    )?;
    writeln!(
        out,
        "Thresholds: buckets {} s, stable {} bucket(s), alpha {} per test, min increase {:.2} points; counts: {}",
        t.every_seconds,
        t.stable_buckets,
        t.alpha,
        t.min_increase * 100.0,
        result
            .counts
            .iter()
            .map(|(k, v)| format!("{k} {v}"))
            .collect::<Vec<_>>()
            .join(", ")
    )?;
    writeln!(out)?;
    let heading = result.dimensions.join(" · ");
    let rows: Vec<[String; 7]> = result
        .values
        .iter()
        .take(if top == 0 { usize::MAX } else { top })
        .map(|v| {
            let iv = |p: &flow_analytics::compare::Period| match p.drop_ratio {
                Some(_) => format!("{} [{}–{}]", pct(p.drop_ratio), pct(p.ratio_low), pct(p.ratio_high)),
                None => "no traffic".to_string(),
            };
            [
                v.class.name().to_string(),
                v.label.clone(),
                iv(&v.before),
                iv(&v.during),
                iv(&v.after),
                v.onset.clone().map(|o| o.get(11..19).unwrap_or(&o).to_string()).unwrap_or_else(|| "–".into()),
                v.convergence_seconds.map_or("–".to_string(), |s| format!("{s:.0} s")),
            ]
        })
        .collect();
    let head = ["class", heading.as_str(), "before", "during", "after", "onset", "converged in"];
    let mut widths: Vec<usize> = head.iter().map(|h| h.chars().count()).collect();
    for row in &rows {
        for (w, cell) in widths.iter_mut().zip(row.iter()) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let line = |cells: Vec<&str>| -> String {
        cells
            .iter()
            .zip(&widths)
            .map(|(c, w)| format!("{c}{}", " ".repeat(w.saturating_sub(c.chars().count()))))
            .collect::<Vec<_>>()
            .join("  ")
            .trim_end()
            .to_string()
    };
    writeln!(out, "{}", line(head.to_vec()))?;
    for row in &rows {
        writeln!(out, "{}", line(row.iter().map(String::as_str).collect()))?;
    }
    if top != 0 && result.values.len() > top {
        writeln!(out, "({} more value(s); --top 0 shows all)", result.values.len() - top)?;
    }
    writeln!(out)?;
    writeln!(out, "Drop ratio = sampled dropped / sampled packets, 95% Wilson interval; interval with ratio-estimator variance over flow records (Cochran 1977); test: one-sided two-proportion z-test on records that dropped (NIST/SEMATECH e-Handbook 7.3.3).")?;
    writeln!(out, "Note: {}", result.caution)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    struct Harness {
        #[command(flatten)]
        args: CompareArgs,
    }

    fn parse(argv: &[&str]) -> anyhow::Result<CompareConfig> {
        let harness = Harness::try_parse_from(std::iter::once("compare").chain(argv.iter().copied()))?;
        CompareConfig::try_from(harness.args)
    }

    const W: &str = "2026-11-30T00:50:00Z..2026-11-30T01:10:00Z";

    #[test]
    fn defaults_validate() {
        let config = parse(&["somewhere/", "--window", W]);
        assert!(config.is_ok(), "{config:?}");
    }

    #[test]
    fn bad_values_are_rejected() {
        assert!(parse(&["x", "--window", "2026-11-30T00:50:00Z"]).is_err());
        assert!(parse(&["x", "--window", "2026-11-30T01:10:00Z..2026-11-30T00:50:00Z"]).is_err());
        assert!(parse(&["x", "--window", W, "--fail-on", "loud"]).is_err());
        assert!(parse(&["x", "--window", W, "--alpha", "1.5"]).is_err());
        assert!(parse(&["x", "--window", W, "--stable-buckets", "0"]).is_err());
        assert!(parse(&["x", "--window", W, "--baseline", "0m"]).is_err());
        assert!(parse(&["x", "--window", W, "--fail-on", "persistent,new"]).is_ok());
    }
}
