//! The result of a drop query: the grouped table and the facts for its
//! headline.

use std::time::Duration;

use chrono::{DateTime, Utc};
use polars::prelude::DataFrame;

use crate::dimension::DimensionPlan;

/// How many records carried a known sampling rate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum SamplingCoverage {
    /// No record matched the query.
    NoRecords,
    /// Every record had its rate: figures are estimates scaled by it (or
    /// exact counts where the rate is 1).
    Complete,
    /// Some records had no known rate and were counted as unsampled.
    Partial {
        /// Records with a known rate.
        known: u64,
        /// Records counted once for want of a rate.
        unknown: u64,
    },
    /// No record had a known rate: figures are the counts as exported.
    Absent,
}

/// The group that sorts first, for the headline.
#[derive(Debug, Clone, PartialEq)]
pub struct TopGroup {
    /// Per dimension: table heading and the value as shown in the table.
    pub dimensions: Vec<(String, String)>,
    /// Its forwarding reason with the most dropped packets (its own reason
    /// when grouping by reason); `None` when it dropped nothing or the
    /// reason is unknown.
    pub reason: Option<String>,
    /// Its estimated dropped packets.
    pub dropped_packets: u64,
    /// Its drop ratio.
    pub drop_ratio: Option<f64>,
}

/// Totals over all records that matched (not only the groups kept by
/// `top`), for the headline.
#[derive(Debug, Clone, PartialEq)]
pub struct DropSummary {
    /// Estimated dropped packets.
    pub dropped_packets: u64,
    /// Estimated dropped octets.
    pub dropped_octets: u64,
    /// Estimated total packets.
    pub total_packets: u64,
    /// Estimated total octets.
    pub total_octets: u64,
    /// Matching flow records.
    pub flow_records: u64,
    /// Dropped over total packets; `None` with no packets.
    pub drop_ratio: Option<f64>,
    /// Lower bound of the approximate 95% interval on dropped packets.
    pub dropped_packets_low: Option<f64>,
    /// Upper bound of the approximate 95% interval on dropped packets.
    pub dropped_packets_high: Option<f64>,
    /// Earliest record time (`flowEndTime`, else `exportTime`).
    pub first: Option<DateTime<Utc>>,
    /// Latest record time.
    pub last: Option<DateTime<Utc>>,
    /// How many records had a known sampling rate.
    pub sampling: SamplingCoverage,
    /// Whether any record was scaled by a rate above 1, making figures
    /// estimates rather than counts.
    pub scaled: bool,
    /// The group that sorts first, when grouping by any dimension.
    pub top: Option<TopGroup>,
}

/// Drop figures per group, with the facts for a headline.
///
/// The frame has, in order: `bucketStart` (with `every`), the dimension
/// columns (names beside their ids), `topReason` (unless grouping by
/// reason), then `droppedPackets`, `droppedOctets`, `totalPackets`,
/// `totalOctets`, `dropRatio`, `flowRecords`, `droppedPacketsLow`,
/// `droppedPacketsHigh`.
#[derive(Debug, Clone)]
pub struct DropTable {
    pub(crate) frame: DataFrame,
    pub(crate) plans: Vec<DimensionPlan>,
    pub(crate) every: Option<Duration>,
    pub(crate) has_top_reason: bool,
    /// Rows before `top` was applied.
    pub(crate) groups: usize,
    pub(crate) summary: DropSummary,
}

impl DropTable {
    /// The grouped figures.
    pub fn frame(&self) -> &DataFrame {
        &self.frame
    }

    /// The grouped figures, owned.
    pub fn into_frame(self) -> DataFrame {
        self.frame
    }

    /// Totals and headline facts.
    pub fn summary(&self) -> &DropSummary {
        &self.summary
    }

    /// How many rows (groups, per bucket when bucketed) matched before
    /// `top` kept the first ones.
    pub fn group_count(&self) -> usize {
        self.groups
    }

    /// The bucket width, when bucketed.
    pub fn every(&self) -> Option<Duration> {
        self.every
    }
}
