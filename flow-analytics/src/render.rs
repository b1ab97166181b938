//! Rendering a [`DropTable`]: a headline and aligned table for people, JSON
//! and CSV for programs.
//!
//! - Table: counts with thousands separators, ratios as percentages,
//!   interface and VRF names beside their ids, label stacks as
//!   `16005/24001/3` (top first), SRv6 segment lists in path order joined
//!   with arrows (the stored list has the last segment first, IANA IE 496).
//! - JSON: an array of objects, one per row, keys in column order; lists
//!   as arrays in stored order, times as RFC 3339 text.
//! - CSV: a header row of column names, then one row per group; lists as
//!   their elements joined by single spaces in stored order, times as RFC
//!   3339 text, nulls empty.

use std::io::{self, Write};
use std::time::Duration;

use chrono::{DateTime, SecondsFormat, Utc};
use polars::prelude::{AnyValue, DataFrame, Series, TimeUnit};

use crate::dimension::{DimensionPlan, Style};
use crate::error::Error;
use crate::query::columns::*;
use crate::table::{DropSummary, DropTable, SamplingCoverage};

/// Shown for a null dimension value.
const NONE_TEXT: &str = "(none)";

/// Writes the headline, a blank line, then the aligned table.
///
/// # Errors
/// Writing to `out` failed.
pub fn write_table(table: &DropTable, out: &mut impl Write) -> io::Result<()> {
    writeln!(out, "{}", headline(table))?;
    let frame = table.frame();
    if frame.height() == 0 {
        return Ok(());
    }
    writeln!(out)?;
    let columns = table_columns(table).map_err(io::Error::other)?;
    let widths: Vec<usize> = columns
        .iter()
        .map(|c| {
            c.cells
                .iter()
                .map(|s| s.chars().count())
                .chain(std::iter::once(c.heading.chars().count()))
                .max()
                .unwrap_or(0)
        })
        .collect();
    let line = |cells: Vec<(&str, usize, bool)>| {
        let parts: Vec<String> = cells
            .into_iter()
            .map(|(text, width, right)| {
                if right {
                    format!("{text:>width$}")
                } else {
                    format!("{text:<width$}")
                }
            })
            .collect();
        parts.join("  ").trim_end().to_string()
    };
    let head = columns
        .iter()
        .zip(&widths)
        .map(|(c, &w)| (c.heading.as_str(), w, c.right))
        .collect();
    writeln!(out, "{}", line(head))?;
    for row in 0..frame.height() {
        let cells = columns
            .iter()
            .zip(&widths)
            .map(|(c, &w)| (c.cells.get(row).map_or("", String::as_str), w, c.right))
            .collect();
        writeln!(out, "{}", line(cells))?;
    }
    if table.group_count() > frame.height() {
        writeln!(
            out,
            "(showing {} of {} rows)",
            thousands(frame.height() as u64),
            thousands(table.group_count() as u64)
        )?;
    }
    Ok(())
}

/// One line summing up the query: drop ratio over all matching records,
/// the group that sorts first and its main reason, the time range, and
/// whether figures are sampled estimates.
pub fn headline(table: &DropTable) -> String {
    let s = table.summary();
    if s.flow_records == 0 {
        return "no matching flow records".to_string();
    }
    let mut parts = Vec::new();
    let ratio = s.drop_ratio.map_or_else(|| "-".to_string(), percent);
    let mut drops = format!(
        "{} of {} packets dropped ({} packets",
        ratio,
        thousands(s.total_packets),
        thousands(s.dropped_packets)
    );
    if s.scaled {
        if let (Some(low), Some(high)) = (s.dropped_packets_low, s.dropped_packets_high) {
            drops.push_str(&format!(", 95% range {}", range(low, high)));
        }
    }
    drops.push(')');
    parts.push(drops);
    if let Some(top) = &s.top {
        let what: Vec<String> = top
            .dimensions
            .iter()
            .map(|(heading, value)| format!("{heading} {value}"))
            .collect();
        let mut text = format!("top: {}", what.join(", "));
        if table.has_top_reason && top.dropped_packets > 0 {
            let reason = top.reason.as_deref().unwrap_or("(unknown reason)");
            text.push_str(&format!(", mostly {reason}"));
        }
        text.push_str(&format!(" ({} dropped)", thousands(top.dropped_packets)));
        parts.push(text);
    }
    if let (Some(first), Some(last)) = (s.first, s.last) {
        let mut text = format!("{} to {}", rfc3339(&first), rfc3339(&last));
        if let Some(every) = table.every() {
            text.push_str(&format!(" in {} buckets", duration_text(every)));
        }
        parts.push(text);
    }
    parts.push(sampling_text(s));
    parts.join(" | ")
}

/// What the figures are, given how many records had a sampling rate.
fn sampling_text(s: &DropSummary) -> String {
    match s.sampling {
        SamplingCoverage::NoRecords => "no matching records".to_string(),
        SamplingCoverage::Complete if s.scaled => {
            "sampled estimates (rate known for every record)".to_string()
        }
        SamplingCoverage::Complete => "exact counts (every record unsampled)".to_string(),
        SamplingCoverage::Partial { known, unknown } => format!(
            "{}sampling rate unknown for {} of {} records (counted unscaled)",
            if s.scaled { "sampled estimates; " } else { "" },
            thousands(unknown),
            thousands(known.saturating_add(unknown))
        ),
        SamplingCoverage::Absent => {
            "sampling rate unknown for every record: counts as exported, unscaled".to_string()
        }
    }
}

/// A table column, rendered.
struct TextColumn {
    heading: String,
    right: bool,
    cells: Vec<String>,
}

/// The human table's columns, cells rendered.
fn table_columns(table: &DropTable) -> Result<Vec<TextColumn>, Error> {
    let frame = table.frame();
    let rows = 0..frame.height();
    let mut out = Vec::new();
    if table.every().is_some() {
        let column = frame.column(BUCKET_START)?;
        let cells = rows
            .clone()
            .map(|r| Ok(any_to_time(&column.get(r)?).map_or_else(|| "-".to_string(), |t| rfc3339(&t))))
            .collect::<Result<_, Error>>()?;
        out.push(TextColumn {
            heading: "bucket start".to_string(),
            right: false,
            cells,
        });
    }
    for plan in &table.plans {
        let cells = rows
            .clone()
            .map(|r| key_text(frame, r, plan))
            .collect::<Result<_, Error>>()?;
        out.push(TextColumn {
            heading: plan.heading.clone(),
            right: false,
            cells,
        });
    }
    if table.has_top_reason {
        let column = frame.column(TOP_REASON)?;
        let dropped = frame.column(DROPPED_PACKETS)?;
        let cells = rows
            .clone()
            .map(|r| {
                Ok(match plain_text(&column.get(r)?) {
                    Some(reason) => reason,
                    // Drops whose records named no reason.
                    None if any_u64(&dropped.get(r)?).unwrap_or(0) > 0 => "(unknown)".to_string(),
                    None => "-".to_string(),
                })
            })
            .collect::<Result<_, Error>>()?;
        out.push(TextColumn {
            heading: "top reason".to_string(),
            right: false,
            cells,
        });
    }
    let counts = |name: &str, heading: &str| -> Result<TextColumn, Error> {
        let column = frame.column(name)?;
        let cells = rows
            .clone()
            .map(|r| Ok(any_u64(&column.get(r)?).map_or_else(|| "-".to_string(), thousands)))
            .collect::<Result<_, Error>>()?;
        Ok(TextColumn {
            heading: heading.to_string(),
            right: true,
            cells,
        })
    };
    out.push(counts(DROPPED_PACKETS, "dropped pkts")?);
    if table.summary().scaled {
        let low = frame.column(DROPPED_PACKETS_LOW)?;
        let high = frame.column(DROPPED_PACKETS_HIGH)?;
        let cells = rows
            .clone()
            .map(|r| {
                Ok(match (any_f64(&low.get(r)?), any_f64(&high.get(r)?)) {
                    (Some(l), Some(h)) => range(l, h),
                    _ => "-".to_string(),
                })
            })
            .collect::<Result<_, Error>>()?;
        out.push(TextColumn {
            heading: "95% range".to_string(),
            right: true,
            cells,
        });
    }
    let ratio = frame.column(DROP_RATIO)?;
    let cells = rows
        .clone()
        .map(|r| Ok(any_f64(&ratio.get(r)?).map_or_else(|| "-".to_string(), percent)))
        .collect::<Result<_, Error>>()?;
    out.push(TextColumn {
        heading: "drop %".to_string(),
        right: true,
        cells,
    });
    out.push(counts(TOTAL_PACKETS, "total pkts")?);
    out.push(counts(DROPPED_OCTETS, "dropped bytes")?);
    out.push(counts(FLOW_RECORDS, "records")?);
    Ok(out)
}

/// A dimension's value in `row`, as the table shows it.
pub(crate) fn key_text(frame: &DataFrame, row: usize, plan: &DimensionPlan) -> Result<String, Error> {
    let value = |i: usize| -> Result<AnyValue<'_>, Error> {
        match plan.keys.get(i) {
            Some((name, _)) => Ok(frame.column(name)?.get(row)?),
            None => Ok(AnyValue::Null),
        }
    };
    let companion = || -> Result<Option<String>, Error> {
        match plan.companions.first() {
            Some(name) => Ok(plain_text(&frame.column(name)?.get(row)?)),
            None => Ok(None),
        }
    };
    let first = value(0)?;
    Ok(match plan.style {
        Style::Plain => plain_text(&first).unwrap_or_else(|| NONE_TEXT.to_string()),
        Style::IdWithName => {
            let id = plain_text(&first).unwrap_or_else(|| NONE_TEXT.to_string());
            match companion()? {
                Some(name) => format!("{id} ({name})"),
                None => id,
            }
        }
        Style::LabelStack => match list_texts(&first) {
            Some(labels) if labels.is_empty() => "(empty)".to_string(),
            Some(labels) => labels.join("/"),
            None => NONE_TEXT.to_string(),
        },
        Style::SegmentPath => match list_texts(&first) {
            Some(segments) if segments.is_empty() => "(empty)".to_string(),
            Some(mut segments) => {
                // Stored last segment first (IANA IE 496): reverse for the
                // order packets travel.
                segments.reverse();
                segments.join(" → ")
            }
            None => NONE_TEXT.to_string(),
        },
        Style::LabelWithType => {
            let label = plain_text(&first).unwrap_or_else(|| NONE_TEXT.to_string());
            match any_u64(&value(1)?) {
                Some(code) => format!("{label} ({})", label_type_name(code)),
                None => label,
            }
        }
    })
}

/// Names of `mplsTopLabelType` values (IANA "IPFIX MPLS label type"
/// registry; values and names from memory, unconfirmed).
fn label_type_name(code: u64) -> String {
    match code {
        0 => "unknown".to_string(),
        1 => "TE-MIDPT".to_string(),
        2 => "pseudowire".to_string(),
        3 => "VPN".to_string(),
        4 => "BGP".to_string(),
        5 => "LDP".to_string(),
        6 => "PCE".to_string(),
        7 => "OSPFv2 SR".to_string(),
        8 => "OSPFv3 SR".to_string(),
        9 => "IS-IS SR".to_string(),
        10 => "BGP SR prefix-SID".to_string(),
        other => format!("type {other}"),
    }
}

/// Writes the rows as a JSON array of objects, one object per line.
///
/// # Errors
/// Writing to `out` failed.
pub fn write_json(table: &DropTable, out: &mut impl Write) -> io::Result<()> {
    let frame = table.frame();
    let columns = frame.columns();
    writeln!(out, "[")?;
    for row in 0..frame.height() {
        let mut fields = Vec::with_capacity(columns.len());
        for column in columns {
            let value = column.get(row).map_err(io::Error::other)?;
            let key = serde_json::Value::String(column.name().to_string());
            fields.push(format!("{}:{}", key, json_value(&value)));
        }
        let comma = if row + 1 < frame.height() { "," } else { "" };
        writeln!(out, "{{{}}}{comma}", fields.join(","))?;
    }
    writeln!(out, "]")
}

/// Writes the rows as CSV with a header row.
///
/// # Errors
/// Writing to `out` failed.
pub fn write_csv(table: &DropTable, out: &mut impl Write) -> io::Result<()> {
    let frame = table.frame();
    let mut writer = csv::Writer::from_writer(out);
    let columns = frame.columns();
    writer.write_record(columns.iter().map(|c| c.name().as_str()))?;
    for row in 0..frame.height() {
        let mut record = Vec::with_capacity(columns.len());
        for column in columns {
            let value = column.get(row).map_err(io::Error::other)?;
            record.push(csv_text(&value));
        }
        writer.write_record(&record)?;
    }
    writer.flush()?;
    Ok(())
}

/// A value as JSON.
fn json_value(value: &AnyValue<'_>) -> serde_json::Value {
    use serde_json::Value as J;
    match value {
        AnyValue::Null => J::Null,
        AnyValue::Boolean(b) => J::Bool(*b),
        AnyValue::String(s) => J::String((*s).to_string()),
        AnyValue::StringOwned(s) => J::String(s.to_string()),
        AnyValue::UInt8(v) => J::from(*v),
        AnyValue::UInt16(v) => J::from(*v),
        AnyValue::UInt32(v) => J::from(*v),
        AnyValue::UInt64(v) => J::from(*v),
        AnyValue::Int8(v) => J::from(*v),
        AnyValue::Int16(v) => J::from(*v),
        AnyValue::Int32(v) => J::from(*v),
        AnyValue::Int64(v) => J::from(*v),
        AnyValue::Float32(v) => serde_json::Number::from_f64(f64::from(*v)).map_or(J::Null, J::Number),
        AnyValue::Float64(v) => serde_json::Number::from_f64(*v).map_or(J::Null, J::Number),
        AnyValue::Datetime(..) | AnyValue::DatetimeOwned(..) => {
            any_to_time(value).map_or(J::Null, |t| J::String(rfc3339(&t)))
        }
        AnyValue::List(series) => J::Array(series_values(series).iter().map(json_value).collect()),
        other => J::String(other.to_string()),
    }
}

/// A value as CSV text.
fn csv_text(value: &AnyValue<'_>) -> String {
    match value {
        AnyValue::Null => String::new(),
        AnyValue::Float64(v) if !v.is_finite() => String::new(),
        AnyValue::Float64(v) => v.to_string(),
        AnyValue::List(_) => list_texts(value).map(|v| v.join(" ")).unwrap_or_default(),
        other => plain_text(other).unwrap_or_default(),
    }
}

/// The elements of a list series.
fn series_values(series: &Series) -> Vec<AnyValue<'_>> {
    series.iter().collect()
}

/// The elements of a list value as text; `None` when null or not a list.
fn list_texts(value: &AnyValue<'_>) -> Option<Vec<String>> {
    match value {
        AnyValue::List(series) => Some(
            series_values(series)
                .iter()
                .map(|v| plain_text(v).unwrap_or_else(|| NONE_TEXT.to_string()))
                .collect(),
        ),
        _ => None,
    }
}

/// A scalar as plain text (ids and AS numbers without separators); `None`
/// when null.
fn plain_text(value: &AnyValue<'_>) -> Option<String> {
    Some(match value {
        AnyValue::Null => return None,
        AnyValue::String(s) => (*s).to_string(),
        AnyValue::StringOwned(s) => s.to_string(),
        AnyValue::Datetime(..) | AnyValue::DatetimeOwned(..) => rfc3339(&any_to_time(value)?),
        AnyValue::List(_) => list_texts(value)?.join(", "),
        other => other.to_string(),
    })
}

/// An unsigned integer value.
fn any_u64(value: &AnyValue<'_>) -> Option<u64> {
    match value {
        AnyValue::UInt8(v) => Some(u64::from(*v)),
        AnyValue::UInt16(v) => Some(u64::from(*v)),
        AnyValue::UInt32(v) => Some(u64::from(*v)),
        AnyValue::UInt64(v) => Some(*v),
        AnyValue::Int64(v) => u64::try_from(*v).ok(),
        _ => None,
    }
}

/// A finite float value.
fn any_f64(value: &AnyValue<'_>) -> Option<f64> {
    match value {
        AnyValue::Float64(v) if v.is_finite() => Some(*v),
        _ => None,
    }
}

/// A datetime value as UTC.
pub(crate) fn any_to_time(value: &AnyValue<'_>) -> Option<DateTime<Utc>> {
    let (v, unit) = match value {
        AnyValue::Datetime(v, unit, _) => (*v, *unit),
        AnyValue::DatetimeOwned(v, unit, _) => (*v, *unit),
        _ => return None,
    };
    let nanos = match unit {
        TimeUnit::Nanoseconds => v,
        TimeUnit::Microseconds => v.checked_mul(1_000)?,
        TimeUnit::Milliseconds => v.checked_mul(1_000_000)?,
    };
    Some(DateTime::from_timestamp_nanos(nanos))
}

/// RFC 3339 text in UTC with a `Z`, fractional seconds only when present.
pub(crate) fn rfc3339(time: &DateTime<Utc>) -> String {
    time.to_rfc3339_opts(SecondsFormat::AutoSi, true)
}

/// `1234567` → `1,234,567`.
pub fn thousands(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, ch) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(ch);
    }
    out
}

/// A ratio as a percentage with two decimals; tiny non-zero ratios show
/// as `<0.01%` rather than a misleading `0.00%`.
fn percent(ratio: f64) -> String {
    let pct = ratio * 100.0;
    if pct > 0.0 && pct < 0.005 {
        "<0.01%".to_string()
    } else {
        format!("{pct:.2}%")
    }
}

/// An interval rounded outwards to whole packets.
fn range(low: f64, high: f64) -> String {
    format!("{}–{}", thousands(to_count(low.floor())), thousands(to_count(high.ceil())))
}

/// A non-negative float as a count (saturating).
fn to_count(v: f64) -> u64 {
    if v.is_nan() || v <= 0.0 {
        0
    } else if v >= u64::MAX as f64 {
        u64::MAX
    } else {
        // In range and integral after floor/ceil.
        v as u64
    }
}

/// A duration in the units the CLI accepts (`1h30m`, `5m`, `90s`).
fn duration_text(every: Duration) -> String {
    let mut secs = every.as_secs();
    if secs == 0 {
        return format!("{}ns", every.as_nanos());
    }
    let mut out = String::new();
    for (unit, size) in [("d", 86_400), ("h", 3_600), ("m", 60), ("s", 1)] {
        if secs >= size {
            out.push_str(&format!("{}{unit}", secs / size));
            secs %= size;
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn thousands_separators() {
        assert_eq!(thousands(0), "0");
        assert_eq!(thousands(999), "999");
        assert_eq!(thousands(1_000), "1,000");
        assert_eq!(thousands(1_234_567), "1,234,567");
        assert_eq!(thousands(u64::MAX), "18,446,744,073,709,551,615");
    }

    #[test]
    fn percentages() {
        assert_eq!(percent(0.0), "0.00%");
        assert_eq!(percent(0.00001), "<0.01%");
        assert_eq!(percent(0.0241), "2.41%");
        assert_eq!(percent(1.0), "100.00%");
    }

    #[test]
    fn durations() {
        assert_eq!(duration_text(Duration::from_secs(300)), "5m");
        assert_eq!(duration_text(Duration::from_secs(5400)), "1h30m");
    }

    #[test]
    fn ranges_round_outwards() {
        assert_eq!(range(9411.6, 10588.2), "9,411–10,589");
        assert_eq!(range(-3.0, f64::INFINITY), format!("0–{}", thousands(u64::MAX)));
    }
}
