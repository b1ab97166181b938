//! Drop analysis over flowsift Parquet files: where, and why, are packets
//! being dropped?
//!
//! `flowsift convert` writes one Parquet row per IPFIX data record, with
//! columns named by IANA Information Elements plus derived columns such as
//! `forwardingOutcome`, `forwardingReason` and `samplingRate`. This crate
//! answers drop questions
//! over any number of such files with polars lazy scans: only the columns a
//! query needs are read, and time bounds and filters are pushed into the
//! scan.
//!
//! A [`DropQuery`] groups records by [`Dimension`]s (next hop, interface,
//! MPLS labels, SRv6 segments, peer AS, VRF, reason, or any column),
//! optionally in time buckets, and yields a [`DropTable`]: per group the
//! dropped and total packets and octets, scaled by the sampling rate where
//! known, the drop ratio, the flow-record count and an approximate 95%
//! interval on dropped packets; plus a [`DropSummary`] for a headline. The
//! [`render`] functions turn it into an aligned table, JSON or CSV.
//!
//! # Example
//!
//! ```
//! use flow_analytics::{render, Dimension, DropQuery};
//! use polars::prelude::*;
//!
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! let dir = tempfile::tempdir()?;
//! let path = dir.path().join("drops.parquet");
//! let mut df = df!(
//!     "ipNextHopIPv4Address" => ["192.0.2.1", "192.0.2.1", "198.51.100.7"],
//!     "packetDeltaCount" => [100u64, 40, 500],
//!     "octetDeltaCount" => [150_000u64, 6_000, 700_000],
//!     "forwardingOutcome" => ["forwarded", "dropped", "forwarded"],
//!     "forwardingReason" => [None, Some("acl-deny"), None],
//!     "samplingRate" => [1000u32, 1000, 1000],
//! )?;
//! ParquetWriter::new(std::fs::File::create(&path)?).finish(&mut df)?;
//!
//! let table = DropQuery::new([&path])
//!     .with_by([Dimension::NextHop])
//!     .run()?;
//! let summary = table.summary();
//! assert_eq!(summary.dropped_packets, 40_000); // 40 sampled × 1000
//! assert_eq!(summary.total_packets, 640_000);
//! assert_eq!(
//!     summary.top.as_ref().and_then(|t| t.reason.as_deref()),
//!     Some("acl-deny")
//! );
//!
//! let mut out = Vec::new();
//! render::write_table(&table, &mut out)?;
//! let text = String::from_utf8(out)?;
//! assert!(text.contains("192.0.2.1"));
//! # Ok(())
//! # }
//! ```
//!
//! # Inputs
//!
//! Inputs are Parquet files, directories (searched recursively, skipping
//! names that start with `.` or `_`) and glob patterns. `key=value`
//! directories below a directory or glob root are read as columns (Hive
//! partitioning). Files may carry different columns: a column missing from
//! a file reads as null there, and a column no file has reads as null
//! throughout if the Parquet contract lists it (an error otherwise).

#![warn(missing_docs)]
#![forbid(unsafe_code)]

pub mod compare;
mod contract;
mod dimension;
mod error;
mod fold;
mod input;
mod query;
pub mod render;
pub mod report;
mod table;

pub use chrono::{DateTime, Utc};
pub use contract::forwarding_names;
pub use dimension::Dimension;
pub use error::Error;
pub use input::is_parquet;
pub use query::{columns, parse_duration, parse_time, DropQuery, SortKey};
pub use table::{DropSummary, DropTable, SamplingCoverage, TopGroup};
