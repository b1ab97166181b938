//! The drop query: a builder, and the polars plan it runs.
//!
//! # Measures
//!
//! Per record, with `N` the record's `samplingRate` (1-in-N) when known and
//! non-zero, else 1:
//!
//! - total packets `t` = `packetDeltaCount`, else `packetTotalCount`, else 0;
//! - dropped packets `k` = `t` when `forwardingOutcome` is `dropped` (falling
//!   back to `droppedPacketDeltaCount` when the record has no packet count),
//!   else `droppedPacketDeltaCount`, else 0;
//! - octets likewise from `octetDeltaCount` / `octetTotalCount` /
//!   `droppedOctetDeltaCount`.
//!
//! Group figures are sums of `N·t` and `N·k`: each sampled packet stands for
//! N packets, the inverse-selection-fraction scaling of RFC 5474 §5.4 and
//! RFC 5475. Records whose rate is unknown count once, and the summary says
//! so ([`SamplingCoverage`]).
//!
//! # Interval on dropped packets
//!
//! Model: 1-in-N sampling as uniform probabilistic sampling (RFC 5475
//! §5.2.2.1), each packet selected independently with probability `p = 1/N`.
//! The Horvitz–Thompson estimator (Horvitz & Thompson 1952, "A
//! generalization of sampling without replacement from a finite universe",
//! JASA 47(260)) weights each selected packet by `1/p = N`, giving `Σ N·k`.
//! Under independent selection its unbiased variance estimate is
//! `Σ (1−p)/p² = Σ N(N−1)` over selected packets, that is `Σ N(N−1)·k` over
//! records. The approximate 95% interval is the normal one,
//! `estimate ± 1.96·√var`, with the lower bound raised to the sampled count
//! `Σ k` (at least the packets seen were dropped). Unsampled and unknown-rate
//! records (`N = 1`) add no variance.

use std::path::PathBuf;
use std::str::FromStr;
use std::sync::{Arc, Mutex};
use std::time::Duration as StdDuration;

use chrono::{DateTime, Utc};
use polars::prelude::*;
use polars_core::query_result::QueryResult;

use crate::contract::{self, time_dtype};
use crate::dimension::{Dimension, DimensionPlan};
use crate::error::Error;
use crate::fold;
use crate::input::Inputs;
use crate::table::{DropSummary, DropTable, SamplingCoverage, TopGroup};

/// The normal quantile for a two-sided 95% interval (z₀.₉₇₅ ≈ 1.959964;
/// any statistics table, e.g. NIST/SEMATECH e-Handbook §1.3.6.7.1).
const Z_95: f64 = 1.96;

/// Output column names of the measures.
pub mod columns {
    /// Estimated dropped packets.
    pub const DROPPED_PACKETS: &str = "droppedPackets";
    /// Estimated dropped octets.
    pub const DROPPED_OCTETS: &str = "droppedOctets";
    /// Estimated total packets.
    pub const TOTAL_PACKETS: &str = "totalPackets";
    /// Estimated total octets.
    pub const TOTAL_OCTETS: &str = "totalOctets";
    /// `droppedPackets / totalPackets`, null when no packets.
    pub const DROP_RATIO: &str = "dropRatio";
    /// Number of flow records in the group.
    pub const FLOW_RECORDS: &str = "flowRecords";
    /// Lower bound of the approximate 95% interval on dropped packets.
    pub const DROPPED_PACKETS_LOW: &str = "droppedPacketsLow";
    /// Upper bound of the approximate 95% interval on dropped packets.
    pub const DROPPED_PACKETS_HIGH: &str = "droppedPacketsHigh";
    /// Start of the time bucket (with `every`).
    pub const BUCKET_START: &str = "bucketStart";
    /// The forwarding reason with the most dropped packets in the group
    /// (present when `reason` is not itself a dimension).
    pub const TOP_REASON: &str = "topReason";
    /// All measure columns, in output order.
    pub const MEASURES: [&str; 8] = [
        DROPPED_PACKETS,
        DROPPED_OCTETS,
        TOTAL_PACKETS,
        TOTAL_OCTETS,
        DROP_RATIO,
        FLOW_RECORDS,
        DROPPED_PACKETS_LOW,
        DROPPED_PACKETS_HIGH,
    ];
}

use columns::*;

// Working columns, never in the output.
const W_N: &str = "_fs_n";
const W_K: &str = "_fs_k";
const W_DP: &str = "_fs_dp";
const W_DO: &str = "_fs_do";
const W_TP: &str = "_fs_tp";
const W_TO: &str = "_fs_to";
const W_VAR: &str = "_fs_var";
const W_KNOWN: &str = "_fs_known";
const W_TIME: &str = "_fs_time";
const A_SAMPLED: &str = "_fs_sampled";
const A_SAMPLED_TOTAL: &str = "_fs_sampled_total";
const W_T: &str = "_fs_t";
const A_KK: &str = "_fs_kk";
const A_DROP_RECORDS: &str = "_fs_drop_records";
const A_TT: &str = "_fs_tt";
const A_KT: &str = "_fs_kt";
const A_MAX_RATE: &str = "_fs_max_rate";
const A_FIRST: &str = "_fs_first";
const A_LAST: &str = "_fs_last";

/// What the groups are ordered by (always largest first).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[non_exhaustive]
pub enum SortKey {
    /// Estimated dropped packets (the default).
    #[default]
    DroppedPackets,
    /// Estimated dropped octets.
    DroppedOctets,
    /// Drop ratio.
    DropRatio,
    /// Estimated total packets.
    TotalPackets,
    /// Estimated total octets.
    TotalOctets,
    /// Number of flow records.
    FlowRecords,
}

impl SortKey {
    /// The names [`SortKey::from_str`] accepts, in variant order.
    pub const NAMES: [&'static str; 6] = [
        "dropped-packets",
        "dropped-octets",
        "drop-ratio",
        "total-packets",
        "total-octets",
        "flow-records",
    ];

    /// The output column this key sorts on.
    pub fn column(self) -> &'static str {
        match self {
            SortKey::DroppedPackets => DROPPED_PACKETS,
            SortKey::DroppedOctets => DROPPED_OCTETS,
            SortKey::DropRatio => DROP_RATIO,
            SortKey::TotalPackets => TOTAL_PACKETS,
            SortKey::TotalOctets => TOTAL_OCTETS,
            SortKey::FlowRecords => FLOW_RECORDS,
        }
    }
}

impl FromStr for SortKey {
    type Err = Error;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        Ok(match text.trim() {
            "dropped-packets" => SortKey::DroppedPackets,
            "dropped-octets" => SortKey::DroppedOctets,
            "drop-ratio" => SortKey::DropRatio,
            "total-packets" => SortKey::TotalPackets,
            "total-octets" => SortKey::TotalOctets,
            "flow-records" => SortKey::FlowRecords,
            other => {
                return Err(Error::UnknownSortKey {
                    name: other.to_string(),
                })
            }
        })
    }
}

/// A drop query over flowsift Parquet files: where, and why, packets were
/// dropped, grouped by [`Dimension`]s.
///
/// Built with `with_*` methods, then [`run`](DropQuery::run). Defaults:
/// grouped by [`Dimension::Reason`], no time buckets, no time bounds, no
/// filter, every group kept, sorted by dropped packets.
#[derive(Debug, Clone)]
pub struct DropQuery {
    inputs: Vec<PathBuf>,
    by: Vec<Dimension>,
    every: Option<StdDuration>,
    from: Option<DateTime<Utc>>,
    to: Option<DateTime<Utc>>,
    filter_sql: Option<String>,
    top: usize,
    sort: SortKey,
}

impl DropQuery {
    /// A query over Parquet files, directories (searched recursively, Hive
    /// partitions read as columns) or glob patterns.
    pub fn new<I, P>(inputs: I) -> Self
    where
        I: IntoIterator<Item = P>,
        P: Into<PathBuf>,
    {
        DropQuery {
            inputs: inputs.into_iter().map(Into::into).collect(),
            by: vec![Dimension::Reason],
            every: None,
            from: None,
            to: None,
            filter_sql: None,
            top: 0,
            sort: SortKey::default(),
        }
    }

    /// Groups by these dimensions, in this order. An empty list gives one
    /// row of totals.
    pub fn with_by(mut self, dims: impl IntoIterator<Item = Dimension>) -> Self {
        self.by = dims.into_iter().collect();
        self
    }

    /// Adds time buckets of this width (aligned to the Unix epoch) as the
    /// first dimension, output column `bucketStart`. Record time is
    /// `flowEndTime`, else `exportTime`.
    pub fn with_every(mut self, every: StdDuration) -> Self {
        self.every = Some(every);
        self
    }

    /// Keeps records whose time (`flowEndTime`, else `exportTime`) is at
    /// or after `from`.
    pub fn with_from(mut self, from: DateTime<Utc>) -> Self {
        self.from = Some(from);
        self
    }

    /// Keeps records whose time is before `to` (exclusive).
    pub fn with_to(mut self, to: DateTime<Utc>) -> Self {
        self.to = Some(to);
        self
    }

    /// Keeps records for which this SQL boolean expression over the input
    /// columns is true, e.g. `protocolIdentifier = 6 AND exporter =
    /// '192.0.2.1'`. Parsed by polars' SQL front end; identifiers are
    /// case-sensitive column names.
    pub fn with_filter_sql(mut self, expr: impl Into<String>) -> Self {
        self.filter_sql = Some(expr.into());
        self
    }

    /// Keeps the first `n` groups after sorting (per time bucket with
    /// [`with_every`](Self::with_every)); 0 keeps all.
    pub fn with_top(mut self, n: usize) -> Self {
        self.top = n;
        self
    }

    /// Orders groups by this measure, largest first.
    pub fn with_sort(mut self, key: SortKey) -> Self {
        self.sort = key;
        self
    }

    /// Runs the query.
    ///
    /// Reads only the columns the dimensions, measures and filter need;
    /// the time bounds and filter are pushed down to the Parquet scan.
    ///
    /// # Errors
    /// Inputs missing or not Parquet, unknown columns, a filter that does
    /// not parse or is not boolean, an empty time range or zero bucket
    /// width, or a polars failure.
    pub fn run(&self) -> Result<DropTable, Error> {
        let prepared = self.prepare(false)?;
        let Prepared {
            stage1,
            plans,
            key_names,
            companions,
            names,
            reason_is_key,
            time_bounds,
        } = prepared;
        let bucketed = self.every.is_some();
        let stage1 = stage1.collect()?;

        // Stage 2: merge reasons into groups, naming the top reason.
        let mut out_keys: Vec<String> = Vec::new();
        if bucketed {
            out_keys.push(BUCKET_START.to_string());
        }
        out_keys.extend(key_names.iter().cloned());
        let table = regroup(&stage1, &out_keys, &companions, !reason_is_key)?;
        let table = sort_groups(table, &out_keys, self.sort, bucketed)?;

        let totals = regroup(&stage1, &[], &[], false)?;
        let headline_groups = if plans.is_empty() {
            None
        } else if bucketed {
            let groups = regroup(&stage1, &key_names, &companions, !reason_is_key)?;
            Some(sort_groups(groups, &key_names, self.sort, false)?)
        } else {
            Some(table.clone())
        };
        let groups = table.height();
        let table = keep_top(table, self.top, bucketed)?;
        // The headline needs the first group only.
        let headline = headline_groups.map(|g| g.head(Some(1)));
        let (table, headline) = match names {
            Some(names) => {
                let mut frames = vec![table];
                frames.extend(headline);
                let mut frames = names.name(frames)?.into_iter();
                match frames.next() {
                    Some(table) => (table, frames.next()),
                    None => return Err(PolarsError::NoData("no groups".into()).into()),
                }
            }
            None => (table, headline),
        };
        let top = match &headline {
            Some(groups) if groups.height() > 0 => Some(top_group(groups, &plans, reason_is_key)?),
            _ => None,
        };
        let summary = summarize(&totals, top, time_bounds)?;
        let mut order: Vec<String> = Vec::new();
        for key in &out_keys {
            order.push(key.clone());
            // Names go right after their ids.
            for plan in &plans {
                if plan.keys.first().map(|(k, _)| k) == Some(key) {
                    order.extend(plan.companions.iter().cloned());
                }
            }
        }
        if !reason_is_key {
            order.push(TOP_REASON.to_string());
        }
        order.extend(MEASURES.iter().map(|s| s.to_string()));
        let frame = table.select(order)?;
        Ok(DropTable {
            frame,
            plans,
            every: self.every,
            has_top_reason: !reason_is_key,
            groups,
            summary,
        })
    }

    /// The optimized polars plan of the scan-and-group stage, as text:
    /// shows which columns each Parquet scan reads and which filters it
    /// applies.
    ///
    /// # Errors
    /// As [`run`](Self::run), short of executing the query.
    pub fn explain(&self) -> Result<String, Error> {
        self.prepare(false)?.stage1.describe()
    }

    /// Validates the query, opens the inputs and builds the lazy stage-1
    /// plan: records scanned, filtered, and grouped by dimensions, bucket
    /// and reason. `with_moments` adds the second moments that `compare`
    /// needs for its ratio-estimator variance (drops skips them).
    fn prepare(&self, with_moments: bool) -> Result<Prepared, Error> {
        let every_ns = self.every.map(every_nanos).transpose()?;
        let from_ns = self.from.map(|t| time_nanos(&t)).transpose()?;
        let to_ns = self.to.map(|t| time_nanos(&t)).transpose()?;
        if let (Some(from), Some(to)) = (self.from, self.to) {
            if from >= to {
                return Err(Error::EmptyTimeRange {
                    from: crate::render::rfc3339(&from),
                    to: crate::render::rfc3339(&to),
                });
            }
        }
        let plans: Vec<DimensionPlan> = self.by.iter().map(Dimension::plan).collect();
        let key_names = key_names(&plans)?;
        let filter = self.parse_filter()?;

        let inputs = Inputs::open(&self.inputs)?;
        // Over all rows (no filter, no time bounds, no buckets) the time
        // range of drops' summary is in the footers' statistics when they
        // tell it exactly; then the time columns are not read at all.
        let unfiltered = filter.is_none() && every_ns.is_none() && from_ns.is_none() && to_ns.is_none();
        let companions: Vec<String> = plans
            .iter()
            .flat_map(|p| p.companions.iter().cloned())
            .collect();
        // Drops names the ids that survive `top` afterwards (`NameScan`);
        // compare carries the names through stage 1.
        let carried: Vec<String> = if with_moments {
            companions.clone()
        } else {
            Vec::new()
        };
        // Footers are read when drops has a use for them: the time range
        // (above) and whether every row has a forwardingStatus (below).
        let facts = (!with_moments).then(|| inputs.footer_facts());
        let time_bounds = match &facts {
            Some(facts) if unfiltered => facts.time_bounds,
            _ => None,
        };
        let two_level = !with_moments;
        // Outcome and reason keys from the numeric status, when every row
        // has one (see `drops_stage1`): the text columns are then not read
        // unless the filter names them.
        let by_status = two_level && facts.as_ref().is_some_and(|f| f.status_everywhere);
        let from_status = |name: &str| {
            by_status && (name == contract::FORWARDING_REASON || name == contract::FORWARDING_OUTCOME)
        };

        // Which input columns to read, and as which type.
        let outcome_columns: &[&str] = if by_status {
            &[contract::FORWARDING_STATUS]
        } else {
            &[contract::FORWARDING_OUTCOME, contract::FORWARDING_REASON]
        };
        let mut wanted: Vec<String> = [
            contract::PACKET_DELTA_COUNT,
            contract::PACKET_TOTAL_COUNT,
            contract::OCTET_DELTA_COUNT,
            contract::OCTET_TOTAL_COUNT,
            contract::DROPPED_PACKET_DELTA_COUNT,
            contract::DROPPED_OCTET_DELTA_COUNT,
        ]
        .iter()
        .chain(outcome_columns)
        .chain(&[contract::SAMPLING_RATE, contract::FLOW_END_TIME, contract::EXPORT_TIME])
        .map(|s| s.to_string())
        .collect();
        let looked_up = |name: &str| !with_moments && companions.iter().any(|c| c == name);
        for plan in &plans {
            wanted.extend(
                plan.reads
                    .iter()
                    .filter(|r| !from_status(r) && !looked_up(r))
                    .cloned(),
            );
        }
        let filter_columns: Vec<String> = match &filter {
            Some((_, expr)) => expr
                .clone()
                .meta()
                .root_names()
                .iter()
                .map(|s| s.to_string())
                .collect(),
            None => Vec::new(),
        };
        wanted.extend(filter_columns.iter().cloned());
        let typed = |wanted: Vec<String>| -> Result<Vec<(String, DataType)>, Error> {
            let mut columns: Vec<(String, DataType)> = Vec::new();
            for name in wanted {
                if columns.iter().any(|(seen, _)| *seen == name) {
                    continue;
                }
                let dtype = match (inputs.dtype(&name), contract::dtype_of(&name)) {
                    (Some(dtype), _) => dtype.clone(),
                    (None, Some(dtype)) => dtype,
                    (None, None) => return Err(Error::UnknownColumn { name }),
                };
                columns.push((name, dtype));
            }
            Ok(columns)
        };
        let mut lf = inputs.frame(&typed(wanted)?)?;

        // Filters first, on input columns only, so polars can push them
        // into the scan.
        let record_time = coalesce(&[
            col(contract::FLOW_END_TIME).cast(time_dtype()),
            col(contract::EXPORT_TIME).cast(time_dtype()),
        ]);
        let mut predicates: Vec<Expr> = Vec::new();
        if let Some((text, expr)) = filter {
            let dtype = lf
                .clone()
                .select([expr.clone().alias("_fs_filter")])
                .collect_schema()
                .map_err(|e| Error::BadFilter {
                    expr: text.clone(),
                    reason: e.to_string(),
                })?
                .get("_fs_filter")
                .cloned()
                .unwrap_or(DataType::Null);
            if dtype != DataType::Boolean {
                return Err(Error::FilterNotBoolean {
                    expr: text,
                    dtype: dtype.to_string(),
                });
            }
            predicates.push(expr);
        }
        if let Some(from) = from_ns {
            predicates.push(record_time.clone().gt_eq(lit(from).cast(time_dtype())));
        }
        if let Some(to) = to_ns {
            predicates.push(record_time.clone().lt(lit(to).cast(time_dtype())));
        }
        for predicate in &predicates {
            lf = lf.filter(predicate.clone());
        }

        // Drops' names: the ids and names, and the columns the filters
        // read, filtered alike.
        let names = if with_moments || companions.is_empty() {
            None
        } else {
            let mut pairs: Vec<(String, String)> = Vec::new();
            for plan in &plans {
                if let (Some((id, _)), Some(name)) = (plan.keys.first(), plan.companions.first()) {
                    pairs.push((id.clone(), name.clone()));
                }
            }
            let mut wanted: Vec<String> = pairs
                .iter()
                .flat_map(|(id, name)| [id.clone(), name.clone()])
                .collect();
            wanted.extend(filter_columns.iter().cloned());
            if from_ns.is_some() || to_ns.is_some() {
                wanted.push(contract::FLOW_END_TIME.to_string());
                wanted.push(contract::EXPORT_TIME.to_string());
            }
            let mut scan = inputs.frame(&typed(wanted)?)?;
            for predicate in &predicates {
                scan = scan.filter(predicate.clone());
            }
            Some(NameScan { scan, pairs })
        };

        let present = |name: &str| inputs.dtype(name).is_some();
        let record_time = time_bounds.is_none().then_some(record_time);
        let with_time = record_time.is_some();
        let mut derived: Vec<Expr> = Vec::new();
        let mut group1: Vec<String> = Vec::new();
        if let Some(every) = every_ns {
            derived.push(
                (col(W_TIME).cast(DataType::Int64).floor_div(lit(every)) * lit(every))
                    .cast(time_dtype())
                    .alias(BUCKET_START),
            );
            group1.push(BUCKET_START.to_string());
        }
        for plan in &plans {
            for (name, expr) in &plan.keys {
                // Keys named from the status are plain columns: added
                // after level 1.
                if !from_status(name) {
                    derived.push(expr.clone().alias(name.as_str()));
                }
                group1.push(name.clone());
            }
        }
        let reason_is_key = key_names.iter().any(|k| k == contract::FORWARDING_REASON);
        if !reason_is_key {
            group1.push(contract::FORWARDING_REASON.to_string());
        }

        // Stage 1: one row per group and reason (and bucket).
        let stage1 = if !two_level {
            let mut aggs = stage1_aggs(with_moments, with_time);
            aggs.extend(companion_aggs(&carried));
            Stage1::Plan(
                lf.with_columns(record_measures(record_time, &present))
                    .with_columns(derived)
                    .group_by(group1.iter().map(|s| col(s.as_str())).collect::<Vec<_>>())
                    .agg(aggs),
            )
        } else {
            drops_stage1(
                lf,
                record_time,
                &present,
                derived,
                &group1,
                by_status,
            )?
        };
        Ok(Prepared {
            stage1,
            plans,
            key_names,
            companions: carried,
            names,
            reason_is_key,
            time_bounds,
        })
    }

    /// Parses the SQL filter, if any.
    fn parse_filter(&self) -> Result<Option<(String, Expr)>, Error> {
        let Some(text) = &self.filter_sql else {
            return Ok(None);
        };
        let expr = polars::sql::sql_expr(text).map_err(|e| Error::BadFilter {
            expr: text.clone(),
            reason: e.to_string(),
        })?;
        Ok(Some((text.clone(), expr)))
    }
}

/// Collects a plan with the streaming engine: it reads the Parquet row
/// groups in batches and aggregates as it goes, so memory follows the
/// number of groups, not the number of records.
fn collect_streaming(plan: LazyFrame) -> Result<DataFrame, Error> {
    match plan.collect_with_engine(Engine::Streaming)? {
        QueryResult::Single(frame) => Ok(frame),
        QueryResult::Multiple(mut frames) => match frames.pop() {
            Some(frame) if frames.is_empty() => Ok(frame),
            _ => Err(PolarsError::ComputeError(
                "streaming engine returned several results for one query".into(),
            )
            .into()),
        },
    }
}

/// Stage-1 rows of a query, for analyses built on the same measures
/// (`compare`): one row per bucket, dimension keys and reason, with
/// `droppedPackets`, `totalPackets` (scaled), [`SAMPLED_DROPPED`] and
/// [`SAMPLED_TOTAL`] (as selected, unscaled).
pub(crate) struct Stage1Rows {
    /// The rows.
    pub frame: DataFrame,
    /// The dimensions' plans, in `by` order.
    pub plans: Vec<DimensionPlan>,
    /// Whether `forwardingReason` is one of the dimension keys.
    pub reason_is_key: bool,
}

/// Sampled (unscaled) dropped packets in a stage-1 row.
pub(crate) const SAMPLED_DROPPED: &str = A_SAMPLED;
/// Sampled (unscaled) total packets in a stage-1 row.
pub(crate) const SAMPLED_TOTAL: &str = A_SAMPLED_TOTAL;
/// Records with at least one dropped packet.
pub(crate) const DROPPED_RECORDS: &str = A_DROP_RECORDS;
/// Σ k² over records (k = sampled dropped packets of a record).
pub(crate) const SUM_KK: &str = A_KK;
/// Σ t² over records (t = sampled packets of a record).
pub(crate) const SUM_TT: &str = A_TT;
/// Σ k·t over records.
pub(crate) const SUM_KT: &str = A_KT;

impl DropQuery {
    /// Runs stage 1 only (see [`Stage1Rows`]).
    pub(crate) fn stage1_rows(&self) -> Result<Stage1Rows, Error> {
        let prepared = self.prepare(true)?;
        Ok(Stage1Rows {
            frame: prepared.stage1.collect()?,
            plans: prepared.plans,
            reason_is_key: prepared.reason_is_key,
        })
    }
}

/// A query ready to collect.
struct Prepared {
    /// Records grouped by bucket, dimension keys and reason.
    stage1: Stage1,
    plans: Vec<DimensionPlan>,
    /// Dimension key columns (companions excluded), without the bucket.
    key_names: Vec<String>,
    /// Columns carried beside keys through stage 1 (`compare`).
    companions: Vec<String>,
    /// Drops' names, looked up for the groups that survive `top`.
    names: Option<NameScan>,
    /// Whether `forwardingReason` is one of the keys.
    reason_is_key: bool,
    /// Earliest and latest record time (ns) from the footers; stage 1 then
    /// has no `_fs_first`/`_fs_last`.
    time_bounds: Option<(Option<i64>, Option<i64>)>,
}

/// Drops' names beside ids (interface and VRF names), looked up for the
/// groups that are shown rather than carried through stage 1.
///
/// The name beside an id is the first non-null name in input order among
/// the records the query keeps (filters and time bounds apply alike) that
/// have that id. Looking it up afterwards reads only the id and name
/// columns, only for the ids shown, and stops as soon as each has a name.
struct NameScan {
    /// The inputs' id and name columns (and what the filters read), with
    /// the query's filters applied.
    scan: LazyFrame,
    /// (id column, name column) per named dimension.
    pairs: Vec<(String, String)>,
}

impl NameScan {
    /// Adds each name column to every frame, beside its id.
    fn name(self, mut frames: Vec<DataFrame>) -> Result<Vec<DataFrame>, Error> {
        for (id, name) in &self.pairs {
            // The ids to name, once each (null included).
            let mut ids: Option<Series> = None;
            for frame in &frames {
                let column = frame.column(id)?.as_materialized_series().clone();
                ids = Some(match ids {
                    None => column,
                    Some(mut all) => {
                        all.append(&column)?;
                        all
                    }
                });
            }
            let found = match ids {
                Some(ids) if !ids.is_empty() => {
                    first_names(self.scan.clone(), id, name, &ids.unique()?, NAME_PREFIX_ROWS)?
                }
                _ => PlHashMap::new(),
            };
            for frame in &mut frames {
                let ids = frame.column(id)?.as_materialized_series();
                let mut names: Vec<Option<String>> = Vec::with_capacity(ids.len());
                for i in 0..ids.len() {
                    names.push(found.get(&ids.get(i)?.into_static()).cloned());
                }
                frame.with_column(Column::new(name.as_str().into(), names))?;
            }
        }
        Ok(frames)
    }
}

/// Rows the first pass of a name lookup reads before it leaves the ids
/// still without a name to a filtered scan (see [`first_names`]).
const NAME_PREFIX_ROWS: usize = 1 << 20;

/// The first non-null `name` of each of `ids` (unique, null included) in
/// the scan's order; ids without one are absent.
///
/// Two passes, each reading the id and name columns only. The first reads
/// the inputs from the start until every id has a name, for at most
/// `prefix_rows` rows ([`NAME_PREFIX_ROWS`] in queries): named ids are usually named early. The ids
/// left (often one that is never named, such as interface 0) are then
/// looked for from the start again with `id IN (...)` pushed into the
/// scan, so the names are decoded only for their rows. A predicate on the
/// name itself would make the reader decode every name (measured: about
/// 0.8 s more CPU over 20 million rows).
fn first_names(
    scan: LazyFrame,
    id: &str,
    name: &str,
    ids: &Series,
    prefix_rows: usize,
) -> Result<PlHashMap<AnyValue<'static>, String>, Error> {
    let mut found = PlHashMap::new();
    let missing = scan_names(scan.clone(), id, name, ids.clone(), prefix_rows, &mut found)?;
    if !missing.is_empty() {
        let named = missing.drop_nulls();
        let mut predicate = col(id).is_in(lit(named.implode()?.into_series()), false);
        if missing.null_count() > 0 {
            predicate = predicate.or(col(id).is_null());
        }
        // Whatever is still missing has no name in the inputs.
        let _unnamed = scan_names(scan.filter(predicate), id, name, missing, usize::MAX, &mut found)?;
    }
    Ok(found)
}

/// One pass of [`first_names`]: adds to `found` the first name of each
/// `missing` id in `scan`'s order, reading at most about `limit` rows
/// (whole batches); returns the ids still missing.
fn scan_names(
    scan: LazyFrame,
    id: &str,
    name: &str,
    missing: Series,
    limit: usize,
    found: &mut PlHashMap<AnyValue<'static>, String>,
) -> Result<Series, Error> {
    let scan = scan.select([col(id), col(name).cast(DataType::String)]);
    let state = Arc::new(Mutex::new((std::mem::take(found), missing, 0usize)));
    let into = Arc::clone(&state);
    let (id_column, name_column) = (id.to_string(), name.to_string());
    let failed = || PolarsError::ComputeError("a batch of the name lookup failed".into());
    let sink = scan.sink_batches(
        PlanCallback::new(move |batch: DataFrame| {
            let mut guard = into.lock().map_err(|_| failed())?;
            let (found, missing, rows) = &mut *guard;
            if missing.is_empty() || *rows >= limit {
                return Ok(true);
            }
            *rows = rows.saturating_add(batch.height());
            let ids = batch.column(&id_column)?.as_materialized_series();
            let names = batch.column(&name_column)?.as_materialized_series();
            let mask = is_in(ids, &missing.implode()?.into_series(), true)? & names.is_not_null();
            if mask.any() {
                // Each missing id's first named row in the batch; batches
                // come in order.
                let firsts = batch.filter(&mask)?.unique_stable(
                    Some(std::slice::from_ref(&id_column)),
                    UniqueKeepStrategy::First,
                    None,
                )?;
                let ids = firsts.column(&id_column)?.as_materialized_series();
                let names = firsts.column(&name_column)?.as_materialized_series().str()?;
                for i in 0..firsts.height() {
                    if let Some(text) = names.get(i) {
                        found
                            .entry(ids.get(i)?.into_static())
                            .or_insert_with(|| text.to_string());
                    }
                }
                let still = !is_in(missing, &ids.implode()?.into_series(), true)?;
                *missing = missing.filter(&still)?;
            }
            Ok(missing.is_empty() || *rows >= limit)
        }),
        true,
        None,
    )?;
    sink.collect_with_engine(Engine::Streaming)?;
    let mut guard = state.lock().map_err(|_| failed())?;
    let (names, missing, _) = &mut *guard;
    *found = std::mem::take(names);
    Ok(std::mem::take(missing))
}

/// The group-key output names of the dimensions, checked for clashes.
fn key_names(plans: &[DimensionPlan]) -> Result<Vec<String>, Error> {
    let mut names: Vec<String> = Vec::new();
    for plan in plans {
        for name in plan
            .keys
            .iter()
            .map(|(k, _)| k)
            .chain(plan.companions.iter())
        {
            if names.contains(name) || name == BUCKET_START || MEASURES.contains(&name.as_str()) {
                return Err(Error::DuplicateDimension { name: name.clone() });
            }
            names.push(name.clone());
        }
    }
    // Companions are carried, not grouped on.
    let companions: Vec<&String> = plans.iter().flat_map(|p| p.companions.iter()).collect();
    Ok(names
        .into_iter()
        .filter(|n| !companions.contains(&n))
        .collect())
}

/// Per-record working columns: rate, sampled and scaled counts, variance
/// term, record time (when given).
///
/// `present` tells whether any input has a column. A column no input has
/// reads as nulls throughout, so it is left out of the expressions instead
/// of being materialised and coalesced row by row: `coalesce(x, null)` is
/// `x`, and a count with no column at all is 0. The values are the same.
fn record_measures(record_time: Option<Expr>, present: &dyn Fn(&str) -> bool) -> Vec<Expr> {
    use contract::*;
    let u64_0 = || lit(0u64);
    let u64c = |name: &str| present(name).then(|| col(name).cast(DataType::UInt64));
    // The first non-null of the columns that exist; `None` when none does.
    let first_of = |exprs: Vec<Option<Expr>>| {
        let mut exprs: Vec<Expr> = exprs.into_iter().flatten().collect();
        if exprs.len() > 1 {
            Some(coalesce(&exprs))
        } else {
            exprs.pop()
        }
    };
    let or_0 = |expr: Option<Expr>| match expr {
        Some(expr) => coalesce(&[expr, u64_0()]),
        None => u64_0(),
    };
    let (known, n) = if present(SAMPLING_RATE) {
        let rate = col(SAMPLING_RATE).cast(DataType::UInt64);
        let known = rate.clone().gt(u64_0()).fill_null(lit(false));
        (known.clone(), when(known).then(rate).otherwise(lit(1u64)))
    } else {
        (lit(false), lit(1u64))
    };
    let whole_drop = present(FORWARDING_OUTCOME).then(|| {
        col(FORWARDING_OUTCOME)
            .eq(lit(OUTCOME_DROPPED))
            .fill_null(lit(false))
    });
    let counts = |delta: &str, total: &str, dropped: &str| {
        let t = first_of(vec![u64c(delta), u64c(total)]);
        let dropped = u64c(dropped);
        let k = match &whole_drop {
            Some(whole_drop) => when(whole_drop.clone())
                .then(or_0(first_of(vec![t.clone(), dropped.clone()])))
                .otherwise(or_0(dropped)),
            None => or_0(dropped),
        };
        (or_0(t), k)
    };
    let (tp, kp) = counts(
        PACKET_DELTA_COUNT,
        PACKET_TOTAL_COUNT,
        DROPPED_PACKET_DELTA_COUNT,
    );
    let (to, ko) = counts(OCTET_DELTA_COUNT, OCTET_TOTAL_COUNT, DROPPED_OCTET_DELTA_COUNT);
    let nf = n.clone().cast(DataType::Float64);
    let mut exprs = vec![
        n.clone().alias(W_N),
        kp.clone().alias(W_K),
        tp.clone().alias(W_T),
        (kp.clone() * n.clone()).alias(W_DP),
        (ko * n.clone()).alias(W_DO),
        (tp * n.clone()).alias(W_TP),
        (to * n).alias(W_TO),
        // Horvitz–Thompson variance term N(N−1)·k (see module docs).
        (nf.clone() * (nf - lit(1.0)) * kp.cast(DataType::Float64)).alias(W_VAR),
        known.cast(DataType::UInt64).alias(W_KNOWN),
    ];
    if let Some(record_time) = record_time {
        exprs.push(record_time.alias(W_TIME));
    }
    exprs
}

// Working columns of the two-level drops stage 1.
const G_DROP: &str = "_fs_g_drop";
const G_STATUS: &str = "_fs_g_status";
const G_RATE: &str = "_fs_g_rate";
const G_T: &str = "_fs_g_t";
const G_TD: &str = "_fs_g_td";
const G_D: &str = "_fs_g_d";
const G_TO: &str = "_fs_g_to";
const G_TDO: &str = "_fs_g_tdo";
const G_DO: &str = "_fs_g_do";

/// Stage 1 of a query, ready to run.
#[allow(clippy::large_enum_variant, reason = "one value per query")]
enum Stage1 {
    /// One polars plan (`compare`, and drops where the two levels do not
    /// apply).
    Plan(LazyFrame),
    /// Drops' two levels (see [`drops_stage1`]).
    TwoLevel(TwoLevel),
}

/// How drops' level 1 runs.
#[allow(clippy::large_enum_variant, reason = "one value per query")]
enum Level1 {
    /// A polars group-by.
    Polars(LazyFrame),
    /// [`fold`] over the scan's batches (fixed-width keys only).
    Fold(LazyFrame, fold::Spec),
}

/// Drops' two-level stage 1.
struct TwoLevel {
    level1: Level1,
    /// Whether level 1 grouped on `forwardingStatus` ([`G_STATUS`]) instead
    /// of the outcome flag and the text keys in `from_status`.
    by_status: bool,
    /// Keys of `group1` computed from the status after level 1.
    from_status: Vec<String>,
    level2: Level2,
}

/// What level 2 needs to know about level 1's columns.
struct Level2 {
    group1: Vec<String>,
    /// Which of (Σt, Σcoalesce(t, d), Σd) level 1 has, packets and octets.
    have_p: [bool; 3],
    have_o: [bool; 3],
    has_outcome: bool,
    has_rate: bool,
    with_time: bool,
}

impl Stage1 {
    /// Runs the stage.
    fn collect(self) -> Result<DataFrame, Error> {
        match self {
            Stage1::Plan(plan) => collect_streaming(plan),
            Stage1::TwoLevel(two) => {
                let level1 = match two.level1 {
                    Level1::Polars(plan) => collect_streaming(plan)?,
                    Level1::Fold(scan, spec) => fold::fold(scan, spec)?,
                };
                let level1 = if two.by_status {
                    with_status_names(level1, &two.from_status)?
                } else {
                    level1
                };
                Ok(level2(level1.lazy(), &two.level2).collect()?)
            }
        }
    }

    /// The optimized polars plan of the part that reads the Parquet files.
    fn describe(&self) -> Result<String, Error> {
        Ok(match self {
            Stage1::Plan(plan) | Stage1::TwoLevel(TwoLevel { level1: Level1::Polars(plan), .. }) => {
                plan.describe_optimized_plan()?
            }
            Stage1::TwoLevel(TwoLevel { level1: Level1::Fold(scan, _), .. }) => format!(
                "{}\nthen summed by fixed-width keys in one ordered pass",
                scan.describe_optimized_plan()?
            ),
        })
    }
}

/// Drops' stage 1, the same rows as [`record_measures`] summed by
/// [`stage1_aggs`] (without moments), in two levels.
///
/// Per record, the measures depend on the sampling rate and on whether
/// the outcome is `dropped` only through the factor N and the choice of
/// count. So records are first grouped by `group1` plus the rate and the
/// outcome flag, summing the raw counts (a sum skips nulls, as
/// `coalesce(x, 0)` does), and the few resulting rows get N and the
/// choice applied before they are summed into `group1` groups:
/// `Σ N·k = N·Σ k` where N is the same for every record. No
/// per-record arithmetic is left but the sums. The variance term is
/// `N(N−1)·Σ k` from the exact integer sum rather than a float sum of
/// `N(N−1)·k` record by record: the same while the figures stay below
/// 2⁵³, and at most a rounding apart beyond.
///
/// With `by_status` (every input row has a `forwardingStatus` and the
/// texts derived from it, see [`crate::input::FooterFacts`]), level 1 groups
/// on the numeric status instead of the outcome flag and the
/// `forwardingReason`/`forwardingOutcome` keys, which are then named from
/// the status on the few level-1 rows ([`contract::forwarding_names`]);
/// level 2 merges statuses of the same name. The text columns are not read.
///
/// When every level-1 key is an unsigned integer or a boolean, level 1 is
/// [`fold`]ed in one ordered pass instead of a polars group-by; the rows are
/// the same.
///
/// Names beside ids are not read here: drops looks them up for the
/// groups it shows ([`NameScan`]).
fn drops_stage1(
    lf: LazyFrame,
    record_time: Option<Expr>,
    present: &dyn Fn(&str) -> bool,
    derived: Vec<Expr>,
    group1: &[String],
    by_status: bool,
) -> Result<Stage1, Error> {
    use contract::*;
    let u64c = |name: &str| present(name).then(|| col(name).cast(DataType::UInt64));
    let with_time = record_time.is_some();
    let from_status: Vec<String> = group1
        .iter()
        .filter(|k| by_status && (*k == FORWARDING_REASON || *k == FORWARDING_OUTCOME))
        .cloned()
        .collect();
    let has_outcome = by_status || present(FORWARDING_OUTCOME);
    let has_rate = present(SAMPLING_RATE);
    let mut lf = lf;
    if let Some(record_time) = record_time {
        lf = lf.with_column(record_time.alias(W_TIME));
    }
    let mut lf = lf.with_columns(derived);
    let mut keys: Vec<String> = group1
        .iter()
        .filter(|k| !from_status.contains(k))
        .cloned()
        .collect();
    let mut flags: Vec<Expr> = Vec::new();
    if by_status {
        flags.push(col(FORWARDING_STATUS).cast(DataType::UInt32).alias(G_STATUS));
        keys.push(G_STATUS.to_string());
    } else if has_outcome {
        flags.push(
            col(FORWARDING_OUTCOME)
                .eq(lit(OUTCOME_DROPPED))
                .fill_null(lit(false))
                .alias(G_DROP),
        );
        keys.push(G_DROP.to_string());
    }
    if has_rate {
        flags.push(col(SAMPLING_RATE).alias(G_RATE));
        keys.push(G_RATE.to_string());
    }
    if !flags.is_empty() {
        lf = lf.with_columns(flags);
    }

    // Level 1: raw sums per group, rate and outcome flag (or status).
    // Which sums exist: (Σt, Σcoalesce(t, d), Σd) for packets and octets.
    let mut sums: Vec<(&'static str, Expr)> = Vec::new();
    let mut counts = |delta: &str, total: &str, dropped: &str, names: [&'static str; 3]| {
        let t = match (u64c(delta), u64c(total)) {
            (Some(a), Some(b)) => Some(coalesce(&[a, b])),
            (a, b) => a.or(b),
        };
        let d = u64c(dropped);
        let td = match (&t, &d) {
            (Some(t), Some(d)) => Some(coalesce(&[t.clone(), d.clone()])),
            _ => None,
        };
        let [nt, ntd, nd] = names;
        let mut have = [false; 3];
        for (i, (expr, name)) in [(t, nt), (td, ntd), (d, nd)].into_iter().enumerate() {
            if let Some(expr) = expr {
                sums.push((name, expr));
                if let Some(h) = have.get_mut(i) {
                    *h = true;
                }
            }
        }
        have
    };
    let have_p = counts(
        PACKET_DELTA_COUNT,
        PACKET_TOTAL_COUNT,
        DROPPED_PACKET_DELTA_COUNT,
        [G_T, G_TD, G_D],
    );
    let have_o = counts(
        OCTET_DELTA_COUNT,
        OCTET_TOTAL_COUNT,
        DROPPED_OCTET_DELTA_COUNT,
        [G_TO, G_TDO, G_DO],
    );

    let schema = lf.clone().collect_schema()?;
    let spec = fold::Spec::new(
        &schema,
        &keys,
        sums.iter().map(|(name, _)| name.to_string()).collect(),
        with_time.then(|| (W_TIME.to_string(), A_FIRST.to_string(), A_LAST.to_string())),
        FLOW_RECORDS,
    );
    let level1 = match spec {
        Some(spec) => {
            let mut columns: Vec<Expr> = keys.iter().map(|k| col(k.as_str())).collect();
            columns.extend(sums.into_iter().map(|(name, expr)| expr.alias(name)));
            if with_time {
                columns.push(col(W_TIME));
            }
            Level1::Fold(lf.select(columns), spec)
        }
        None => {
            let mut aggs: Vec<Expr> = vec![len().cast(DataType::UInt64).alias(FLOW_RECORDS)];
            aggs.extend(sums.into_iter().map(|(name, expr)| expr.sum().alias(name)));
            if with_time {
                aggs.push(col(W_TIME).min().alias(A_FIRST));
                aggs.push(col(W_TIME).max().alias(A_LAST));
            }
            Level1::Polars(
                lf.group_by(keys.iter().map(|s| col(s.as_str())).collect::<Vec<_>>())
                    .agg(aggs),
            )
        }
    };
    Ok(Stage1::TwoLevel(TwoLevel {
        level1,
        by_status,
        from_status,
        level2: Level2 {
            group1: group1.to_vec(),
            have_p,
            have_o,
            has_outcome,
            has_rate,
            with_time,
        },
    }))
}

/// Level-1 rows grouped on the status get the outcome flag and the
/// `forwardingReason`/`forwardingOutcome` keys named from it, as `flowsift
/// convert` derives them; the status column goes.
fn with_status_names(level1: DataFrame, from_status: &[String]) -> Result<DataFrame, Error> {
    let status = level1.column(G_STATUS)?.cast(&DataType::UInt32)?;
    let names: Vec<Option<(&str, Option<&str>)>> = status
        .u32()?
        .iter()
        .map(|s| s.map(contract::forwarding_names))
        .collect();
    let dropped: Vec<bool> = names
        .iter()
        .map(|n| matches!(n, Some((outcome, _)) if *outcome == contract::OUTCOME_DROPPED))
        .collect();
    let mut frame = level1.drop(G_STATUS)?;
    frame.with_column(Column::new(G_DROP.into(), dropped))?;
    for key in from_status {
        let texts: Vec<Option<&str>> = if key == contract::FORWARDING_OUTCOME {
            names.iter().map(|n| n.map(|(outcome, _)| outcome)).collect()
        } else {
            names.iter().map(|n| n.and_then(|(_, reason)| reason)).collect()
        };
        frame.with_column(Column::new(key.as_str().into(), texts))?;
    }
    Ok(frame)
}

/// Level 2: N and the choice of count applied to each level-1 row, then
/// the rows summed into `group1` groups.
fn level2(level1: LazyFrame, l2: &Level2) -> LazyFrame {
    let u64_0 = || lit(0u64);
    let (known, n) = if l2.has_rate {
        let rate = col(G_RATE).cast(DataType::UInt64);
        let known = rate.clone().gt(u64_0()).fill_null(lit(false));
        (known.clone(), when(known).then(rate).otherwise(lit(1u64)))
    } else {
        (lit(false), lit(1u64))
    };
    let counts = |have: [bool; 3], names: [&'static str; 3]| {
        let sum = |i: usize| match (have.get(i), names.get(i)) {
            (Some(true), Some(name)) => col(*name),
            _ => u64_0(),
        };
        let [t_ok, td_ok, _] = have;
        // Σ coalesce(t, d, 0) when dropped: whichever of t, d exists.
        let whole = if td_ok {
            sum(1)
        } else if t_ok {
            sum(0)
        } else {
            sum(2)
        };
        let k = if l2.has_outcome {
            when(col(G_DROP)).then(whole).otherwise(sum(2))
        } else {
            sum(2)
        };
        (sum(0), k)
    };
    let (tp, kp) = counts(l2.have_p, [G_T, G_TD, G_D]);
    let (to, ko) = counts(l2.have_o, [G_TO, G_TDO, G_DO]);
    let nf = n.clone().cast(DataType::Float64);
    let measures = vec![
        n.clone().alias(W_N),
        kp.clone().alias(W_K),
        (kp.clone() * n.clone()).alias(W_DP),
        (ko * n.clone()).alias(W_DO),
        (tp * n.clone()).alias(W_TP),
        (to * n).alias(W_TO),
        (nf.clone() * (nf - lit(1.0)) * kp.cast(DataType::Float64)).alias(W_VAR),
        when(known)
            .then(col(FLOW_RECORDS))
            .otherwise(u64_0())
            .alias(W_KNOWN),
    ];

    let mut aggs = vec![
        col(W_DP).sum().alias(DROPPED_PACKETS),
        col(W_DO).sum().alias(DROPPED_OCTETS),
        col(W_TP).sum().alias(TOTAL_PACKETS),
        col(W_TO).sum().alias(TOTAL_OCTETS),
        col(FLOW_RECORDS).sum().alias(FLOW_RECORDS),
        col(W_K).sum().alias(A_SAMPLED),
        col(W_VAR).sum().alias(W_VAR),
        col(W_KNOWN).sum().alias(W_KNOWN),
        col(W_N).max().alias(A_MAX_RATE),
    ];
    if l2.with_time {
        aggs.push(col(A_FIRST).min().alias(A_FIRST));
        aggs.push(col(A_LAST).max().alias(A_LAST));
    }
    level1
        .with_columns(measures)
        .group_by(l2.group1.iter().map(|s| col(s.as_str())).collect::<Vec<_>>())
        .agg(aggs)
}

/// Stage-1 aggregations over records; `with_moments` adds the sampled
/// total packets, the records that dropped and the second moments used by
/// `compare`; `with_time` the earliest and latest record time.
fn stage1_aggs(with_moments: bool, with_time: bool) -> Vec<Expr> {
    let mut aggs = vec![
        col(W_DP).sum().alias(DROPPED_PACKETS),
        col(W_DO).sum().alias(DROPPED_OCTETS),
        col(W_TP).sum().alias(TOTAL_PACKETS),
        col(W_TO).sum().alias(TOTAL_OCTETS),
        len().cast(DataType::UInt64).alias(FLOW_RECORDS),
        col(W_K).sum().alias(A_SAMPLED),
        col(W_VAR).sum().alias(W_VAR),
        col(W_KNOWN).sum().alias(W_KNOWN),
        col(W_N).max().alias(A_MAX_RATE),
    ];
    if with_time {
        aggs.extend([
            col(W_TIME).min().alias(A_FIRST),
            col(W_TIME).max().alias(A_LAST),
        ]);
    }
    if with_moments {
        let f = |c: &str| col(c).cast(DataType::Float64);
        aggs.extend([
            col(W_T).sum().alias(A_SAMPLED_TOTAL),
            col(W_K).gt(lit(0u64)).cast(DataType::UInt64).sum().alias(A_DROP_RECORDS),
            (f(W_K) * f(W_K)).sum().alias(A_KK),
            (f(W_T) * f(W_T)).sum().alias(A_TT),
            (f(W_K) * f(W_T)).sum().alias(A_KT),
        ]);
    }
    aggs
}

/// First non-null value of each carried column.
fn companion_aggs(companions: &[String]) -> Vec<Expr> {
    companions
        .iter()
        .map(|c| col(c.as_str()).drop_nulls().first().alias(c.as_str()))
        .collect()
}

/// Stage 2: merges stage-1 rows into groups by `keys` (one row of totals
/// when `keys` is empty), then adds ratio and interval columns.
fn regroup(
    stage1: &DataFrame,
    keys: &[String],
    companions: &[String],
    with_top_reason: bool,
) -> Result<DataFrame, Error> {
    let mut aggs: Vec<Expr> = [
        DROPPED_PACKETS,
        DROPPED_OCTETS,
        TOTAL_PACKETS,
        TOTAL_OCTETS,
        FLOW_RECORDS,
        A_SAMPLED,
        W_VAR,
        W_KNOWN,
    ]
    .iter()
    .map(|c| col(*c).sum().alias(*c))
    .collect();
    aggs.push(col(A_MAX_RATE).max().alias(A_MAX_RATE));
    if stage1.schema().contains(A_FIRST) {
        aggs.push(col(A_FIRST).min().alias(A_FIRST));
        aggs.push(col(A_LAST).max().alias(A_LAST));
    }
    aggs.extend(companion_aggs(companions));
    if with_top_reason {
        // The reason with most dropped packets; ties go to the name first
        // in alphabetical order. Null when the group dropped nothing.
        let order = SortMultipleOptions::default()
            .with_order_descending_multi([true, false])
            .with_nulls_last(true);
        aggs.push(
            when(col(DROPPED_PACKETS).max().gt(lit(0u64)))
                .then(
                    col(contract::FORWARDING_REASON)
                        .sort_by([col(DROPPED_PACKETS), col(contract::FORWARDING_REASON)], order)
                        .first(),
                )
                .otherwise(lit(NULL).cast(DataType::String))
                .alias(TOP_REASON),
        );
    }
    let lf = stage1.clone().lazy();
    let grouped = if keys.is_empty() {
        lf.select(aggs)
    } else {
        lf.group_by(keys.iter().map(|k| col(k.as_str())).collect::<Vec<_>>())
            .agg(aggs)
    };
    let f64c = |name: &str| col(name).cast(DataType::Float64);
    let half_width = lit(Z_95) * col(W_VAR).sqrt();
    let low = f64c(DROPPED_PACKETS) - half_width.clone();
    let floor = f64c(A_SAMPLED);
    Ok(grouped
        .with_columns([
            when(f64c(TOTAL_PACKETS).gt(lit(0.0)))
                .then(f64c(DROPPED_PACKETS) / f64c(TOTAL_PACKETS))
                .otherwise(lit(NULL).cast(DataType::Float64))
                .alias(DROP_RATIO),
            when(low.clone().gt(floor.clone()))
                .then(low)
                .otherwise(floor)
                .alias(DROPPED_PACKETS_LOW),
            (f64c(DROPPED_PACKETS) + half_width).alias(DROPPED_PACKETS_HIGH),
        ])
        .collect()?)
}

/// Sorts groups: by bucket (oldest first) when bucketed, then the sort key
/// (largest first, nulls last), then the keys for a stable order.
fn sort_groups(
    frame: DataFrame,
    keys: &[String],
    sort: SortKey,
    bucketed: bool,
) -> Result<DataFrame, Error> {
    let mut by: Vec<String> = Vec::new();
    let mut descending: Vec<bool> = Vec::new();
    if bucketed {
        by.push(BUCKET_START.to_string());
        descending.push(false);
    }
    by.push(sort.column().to_string());
    descending.push(true);
    if sort != SortKey::DroppedPackets {
        by.push(DROPPED_PACKETS.to_string());
        descending.push(true);
    }
    for key in keys {
        if by.contains(key) {
            continue;
        }
        // Row encoding orders lists too, but plain keys suffice for a
        // stable order and avoid depending on it.
        let sortable = frame
            .column(key)
            .map(|c| !matches!(c.dtype(), DataType::List(_)))
            .unwrap_or(false);
        if sortable {
            by.push(key.clone());
            descending.push(false);
        }
    }
    let options = SortMultipleOptions::default()
        .with_order_descending_multi(descending)
        .with_nulls_last(true)
        .with_maintain_order(true);
    Ok(frame.sort(by, options)?)
}

/// Keeps the first `n` rows, per bucket when bucketed (rows are sorted by
/// bucket first). `n == 0` keeps all.
fn keep_top(frame: DataFrame, n: usize, bucketed: bool) -> Result<DataFrame, Error> {
    if n == 0 || frame.height() <= n {
        return Ok(frame);
    }
    if !bucketed {
        return Ok(frame.head(Some(n)));
    }
    let buckets = frame.column(BUCKET_START)?.as_materialized_series().clone();
    let mut keep = Vec::with_capacity(frame.height());
    let mut previous: Option<AnyValue<'_>> = None;
    let mut seen = 0usize;
    for i in 0..buckets.len() {
        let bucket = buckets.get(i)?;
        if previous.as_ref() != Some(&bucket) {
            seen = 0;
            previous = Some(bucket);
        }
        seen += 1;
        keep.push(seen <= n);
    }
    let mask = BooleanChunked::from_slice("keep".into(), &keep);
    Ok(frame.filter(&mask)?)
}

/// The first row of sorted groups, described for the headline.
fn top_group(
    groups: &DataFrame,
    plans: &[DimensionPlan],
    reason_is_key: bool,
) -> Result<TopGroup, Error> {
    let dimensions = plans
        .iter()
        .map(|plan| {
            Ok((
                plan.heading.clone(),
                crate::render::key_text(groups, 0, plan)?,
            ))
        })
        .collect::<Result<Vec<_>, Error>>()?;
    let reason_column = if reason_is_key {
        contract::FORWARDING_REASON
    } else {
        TOP_REASON
    };
    let reason = match groups.column(reason_column) {
        Ok(column) => match column.get(0)? {
            AnyValue::String(s) => Some(s.to_string()),
            AnyValue::StringOwned(s) => Some(s.to_string()),
            _ => None,
        },
        Err(_) => None,
    };
    Ok(TopGroup {
        dimensions,
        reason,
        dropped_packets: u64_at(groups, DROPPED_PACKETS, 0)?,
        drop_ratio: f64_at(groups, DROP_RATIO, 0)?,
    })
}

/// Headline facts from the one-row totals frame; the time range from
/// `time_bounds` (ns) when given, else from the frame.
fn summarize(
    totals: &DataFrame,
    top: Option<TopGroup>,
    time_bounds: Option<(Option<i64>, Option<i64>)>,
) -> Result<DropSummary, Error> {
    let records = u64_at(totals, FLOW_RECORDS, 0)?;
    let known = u64_at(totals, W_KNOWN, 0)?;
    let sampling = if records == 0 {
        SamplingCoverage::NoRecords
    } else if known == records {
        SamplingCoverage::Complete
    } else if known == 0 {
        SamplingCoverage::Absent
    } else {
        SamplingCoverage::Partial {
            known,
            unknown: records - known,
        }
    };
    let (first, last) = match time_bounds {
        Some((first, last)) => (
            first.map(DateTime::from_timestamp_nanos),
            last.map(DateTime::from_timestamp_nanos),
        ),
        None => (time_at(totals, A_FIRST, 0)?, time_at(totals, A_LAST, 0)?),
    };
    Ok(DropSummary {
        dropped_packets: u64_at(totals, DROPPED_PACKETS, 0)?,
        dropped_octets: u64_at(totals, DROPPED_OCTETS, 0)?,
        total_packets: u64_at(totals, TOTAL_PACKETS, 0)?,
        total_octets: u64_at(totals, TOTAL_OCTETS, 0)?,
        flow_records: records,
        drop_ratio: f64_at(totals, DROP_RATIO, 0)?,
        dropped_packets_low: f64_at(totals, DROPPED_PACKETS_LOW, 0)?,
        dropped_packets_high: f64_at(totals, DROPPED_PACKETS_HIGH, 0)?,
        first,
        last,
        sampling,
        scaled: u64_at(totals, A_MAX_RATE, 0)? > 1,
        top,
    })
}

/// An unsigned count at `row`, 0 when null or missing.
fn u64_at(frame: &DataFrame, column: &str, row: usize) -> Result<u64, Error> {
    Ok(match frame.column(column)?.get(row)? {
        AnyValue::UInt64(v) => v,
        AnyValue::UInt32(v) => u64::from(v),
        AnyValue::Int64(v) => u64::try_from(v).unwrap_or(0),
        _ => 0,
    })
}

/// A float at `row`, `None` when null or not finite.
fn f64_at(frame: &DataFrame, column: &str, row: usize) -> Result<Option<f64>, Error> {
    Ok(match frame.column(column)?.get(row)? {
        AnyValue::Float64(v) if v.is_finite() => Some(v),
        _ => None,
    })
}

/// A timestamp at `row`.
fn time_at(frame: &DataFrame, column: &str, row: usize) -> Result<Option<DateTime<Utc>>, Error> {
    Ok(crate::render::any_to_time(&frame.column(column)?.get(row)?))
}

/// Bucket width in nanoseconds.
fn every_nanos(every: StdDuration) -> Result<i64, Error> {
    match i64::try_from(every.as_nanos()) {
        Ok(ns) if ns > 0 => Ok(ns),
        _ => Err(Error::BadEvery),
    }
}

/// Nanoseconds since 1970 of a time.
fn time_nanos(time: &DateTime<Utc>) -> Result<i64, Error> {
    time.timestamp_nanos_opt()
        .ok_or_else(|| Error::TimeOutOfRange {
            text: crate::render::rfc3339(time),
        })
}

/// Parses a duration such as `30s`, `5m`, `1h`, `1d` or `1h30m`.
///
/// # Errors
/// [`Error::BadDuration`] for anything else, including zero.
pub fn parse_duration(text: &str) -> Result<StdDuration, Error> {
    let bad = || Error::BadDuration {
        text: text.to_string(),
    };
    let mut total: u64 = 0;
    let mut digits = String::new();
    let mut any = false;
    for ch in text.trim().chars() {
        if ch.is_ascii_digit() {
            digits.push(ch);
            continue;
        }
        let unit: u64 = match ch {
            's' => 1,
            'm' => 60,
            'h' => 3600,
            'd' => 86_400,
            _ => return Err(bad()),
        };
        let value: u64 = digits.parse().map_err(|_| bad())?;
        digits.clear();
        total = value
            .checked_mul(unit)
            .and_then(|s| total.checked_add(s))
            .ok_or_else(bad)?;
        any = true;
    }
    if !digits.is_empty() || !any || total == 0 {
        return Err(bad());
    }
    Ok(StdDuration::from_secs(total))
}

/// Parses an RFC 3339 time such as `2026-11-30T01:00:00Z` (any offset;
/// converted to UTC).
///
/// # Errors
/// [`Error::BadTime`] when the text is not RFC 3339.
pub fn parse_time(text: &str) -> Result<DateTime<Utc>, Error> {
    DateTime::parse_from_rfc3339(text.trim())
        .map(|t| t.with_timezone(&Utc))
        .map_err(|_| Error::BadTime {
            text: text.to_string(),
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations() {
        assert_eq!(parse_duration("1m").ok(), Some(StdDuration::from_secs(60)));
        assert_eq!(parse_duration("5m").ok(), Some(StdDuration::from_secs(300)));
        assert_eq!(parse_duration("1h30m").ok(), Some(StdDuration::from_secs(5400)));
        assert_eq!(parse_duration("1d").ok(), Some(StdDuration::from_secs(86_400)));
        for bad in ["", "5", "m", "0m", "5x", "-5m", "99999999999999999999s"] {
            assert!(parse_duration(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn times() {
        let t = parse_time("2026-11-30T02:00:00+01:00").ok();
        assert_eq!(t.map(|t| t.timestamp()), Some(1_796_000_400));
        assert!(parse_time("2026-11-30 01:00").is_err());
    }

    /// The rule of [`first_names`]: per id, the first non-null name in
    /// input order. Reference: a plain loop over the rows (the rule as
    /// documented on `Dimension`); the two passes must not change it.
    #[test]
    fn first_names_are_first_in_input_order() {
        // Batches of 4 rows; id 3 is named only in the last batch, id 4
        // never, the null id in the second; id 1 has two names.
        let ids: Vec<Option<u32>> = vec![
            Some(1), Some(2), Some(4), Some(1),
            None, Some(2), Some(1), None,
            Some(3), Some(4), Some(3), Some(1),
        ];
        let names: Vec<Option<&str>> = vec![
            None, Some("b"), None, Some("a1"),
            None, Some("b2"), Some("a2"), Some("n"),
            None, None, Some("c"), Some("a3"),
        ];
        let batches: Vec<LazyFrame> = (0..3)
            .map(|b| {
                let range = b * 4..b * 4 + 4;
                df!("id" => &ids[range.clone()], "name" => &names[range])
                    .map(IntoLazy::lazy)
            })
            .collect::<PolarsResult<_>>()
            .unwrap_or_default();
        let scan = concat(batches, UnionArgs::default()).expect("concat");
        let mut expected: Vec<(Option<u32>, Option<&str>)> = Vec::new();
        for (id, name) in ids.iter().zip(&names) {
            match expected.iter_mut().find(|(seen, _)| seen == id) {
                Some((_, first @ None)) => *first = *name,
                Some(_) => {}
                None => expected.push((*id, *name)),
            }
        }
        let wanted = Series::new("id".into(), [Some(1u32), Some(2), Some(3), Some(4), None]);
        for prefix_rows in [1, 4, 8, usize::MAX] {
            let found = first_names(scan.clone(), "id", "name", &wanted, prefix_rows).expect("lookup");
            for (id, name) in &expected {
                let key = match id {
                    Some(id) => AnyValue::UInt32(*id),
                    None => AnyValue::Null,
                };
                assert_eq!(found.get(&key).map(String::as_str), *name, "id {id:?}, prefix {prefix_rows}");
            }
            assert_eq!(found.len(), 4, "id 4 has no name");
        }
    }

    #[test]
    fn sort_key_names_parse() {
        for name in SortKey::NAMES {
            assert!(name.parse::<SortKey>().is_ok(), "{name}");
        }
        assert!("drops".parse::<SortKey>().is_err());
    }
}
