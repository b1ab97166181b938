//! Arrow record batches and Parquet files derived from the decode plans.
//!
//! The converter runs two passes over a capture. Pass 1 decodes templates
//! and options records only: every data template's [`Plan`](crate::Plan)
//! goes to [`TableSchema::flows`] (and every options template's to
//! [`TableSchema::options`]), every options Data Set to
//! [`Enrichment::add_options_set`]. The schema is then fixed. Pass 2 decodes
//! the Data Sets and appends them with [`TableBuilder::append`]; whenever
//! [`TableBuilder::len`] reaches the row-group size the caller moves
//! [`TableBuilder::finish`] into a [`ParquetSink`], so memory stays bounded
//! by one row group. [`TableWriter`] does that bookkeeping for you.
//!
//! # The Parquet contract
//!
//! **Rows.** The flows table has one row per Data Record of a
//! non-options template; the options table one row per options Data
//! Record.
//!
//! **Columns**, in this order:
//! 1. Provenance: `exporter` (Utf8, the exporter's IP address from the
//!    transport; null for RFC 5655 files), `observationDomainId` (UInt32),
//!    `templateId` (UInt16), `exportTime` (Timestamp(Second, "UTC")).
//! 2. Options table only: `scopeFields` (`List<Utf8>`), the column names of
//!    the record's scope fields, in template order.
//! 3. One column per Information Element, the union over all templates in
//!    order of first appearance; a template that lacks a column gives null.
//!    See [`column_name`] for naming and [`element_type`] for types.
//! 4. Flows table only, the derived columns: `forwardingOutcome`,
//!    `forwardingReason`, `mplsLabelStack`, `flowStartTime`,
//!    `flowEndTime`, `samplingRate`, `ingressInterfaceName`,
//!    `egressInterfaceName`, `ingressVRFname`, `egressVRFname`,
//!    `srhEndpointBehaviorName`. Each is documented on [`DerivedColumn`].
//!
//! **Naming** ([`column_name`]): the IANA name exactly
//! (`sourceIPv4Address`); enterprise elements `pen{PEN}_ie{ID}`; IANA ids
//! the registry does not know `ie{ID}`; the n-th occurrence of an element in
//! one template `{name}_{n}` for n ≥ 2 (RFC 7011 §8 allows repeats); an
//! element whose name is a provenance or derived column name (e.g.
//! `templateId`, IE 145) is numbered from `_2` on; a field whose length does
//! not fit its type goes to Binary `{name}_octets`.
//!
//! **Types** ([`element_type`]): unsignedN → UIntN, signedN → IntN, float32/64
//! → Float32/64, boolean → Boolean, macAddress → Utf8 `aa:bb:cc:dd:ee:ff`,
//! string → Utf8 (ill-formed UTF-8 → null, counted), octetArray and every
//! enterprise or unknown element → Binary, ipv4Address/ipv6Address → Utf8
//! (RFC 5952 text for IPv6), dateTimeSeconds/Milliseconds/Microseconds/
//! Nanoseconds → Timestamp(Second/Millisecond/Microsecond/Nanosecond,
//! "UTC"), unsigned256 → FixedSizeBinary(32) (big-endian, left-padded when
//! sent reduced), basicList → List of the element type (see
//! [`basic_list_item_type`]), subTemplateList and subTemplateMultiList →
//! `List<Struct>` with the [record struct layout](record_struct_type):
//!
//! ```text
//! list<struct<
//!     semantic:   uint8,               -- RFC 6313 §4.4 list semantic
//!     templateId: uint16,              -- template of this record
//!     fields:     list<struct<name: utf8, value: utf8>>
//! >>
//! ```
//!
//! one list item per record inside the list (a subTemplateMultiList's
//! entries are flattened in order, each record tagged with its entry's
//! template). `name` follows the column naming rules; `value` is the
//! [text form](crate::columnar) of the value: integers in decimal, floats
//! as shortest round-trip decimal, booleans `true`/`false`, addresses as in
//! the columns, timestamps RFC 3339 UTC (`2026-11-30T01:00:00.5Z`), octets
//! and unsigned256 as lower-case hex, nested lists as `[a,b]` /
//! `[{name=value,...},...]`. A record whose template is unknown gives an
//! item with null `fields` (counted).
//!
//! Reduced-size values widen to the declared type (RFC 7011 §6.2).
//!
//! **In the Parquet file** ([`ParquetSink`]) the table's Arrow schema is
//! embedded under `ARROW:schema`; each element column carries field
//! metadata `ipfix.elementId`, `ipfix.enterpriseNumber` (enterprise only)
//! and `ipfix.dataType`; the schema carries `flowsift.table` = `flows` or
//! `options` and `flowsift.contract` = [`CONTRACT_VERSION`] (also as plain
//! Parquet key-value metadata). Parquet has no seconds unit: Timestamp(Second)
//! columns are stored as TIMESTAMP(MILLIS, UTC), as pyarrow stores them, so
//! readers (pyarrow, parquet's own Arrow reader, and readers without Arrow
//! schema support) see `timestamp[ms, tz=UTC]` with the same instants
//! rather than a bare integer. The other types read back exactly.
//!
//! **Nothing is lost silently.** A value that cannot be placed (ill-formed
//! UTF-8, an undefined boolean, a timestamp outside the Arrow range, a list
//! element of an unexpected type, a field whose column is missing from the
//! schema) becomes null and is counted in [`ColumnarStats`].
//!
//! # Example
//!
//! ```
//! use std::sync::Arc;
//! use ipfix_core::columnar::{Enrichment, ParquetSink, SinkOptions, TableBuilder, TableSchema};
//! use ipfix_core::{Config, Decoder, Event, TransportSession};
//!
//! // RFC 7011 Appendix A.2.1's template and one record (A.3, first row).
//! let msg: Vec<u8> = [
//!     &[0x00, 0x0a, 0x00, 0x44, 0x69, 0x1c, 0x4a, 0x00, 0, 0, 0, 0, 0, 0, 0, 7][..],
//!     &[0x00, 0x02, 0x00, 0x1c, 0x01, 0x00, 0x00, 0x05],
//!     &[0, 8, 0, 4, 0, 12, 0, 4, 0, 15, 0, 4, 0, 2, 0, 4, 0, 1, 0, 4],
//!     &[0x01, 0x00, 0x00, 0x18, 192, 0, 2, 12, 192, 0, 2, 254, 192, 0, 2, 1],
//!     &[0, 0, 0x13, 0x91, 0, 0x51, 0x8c, 0x81],
//! ].concat();
//! let session = TransportSession::udp("192.0.2.1:50000".parse()?, "198.51.100.9:4739".parse()?);
//!
//! // Pass 1: templates and options records.
//! let (mut plans, mut enrichment) = (Vec::new(), Enrichment::new());
//! let mut decoder = Decoder::new(Config::default());
//! for event in decoder.decode(&session, None, &msg)? {
//!     match event {
//!         Event::TemplateLearned { plan, .. } => plans.push(plan),
//!         Event::Data(set) if set.plan().is_options() => { enrichment.add_options_set(&set); }
//!         _ => {}
//!     }
//! }
//! let schema = Arc::new(TableSchema::flows(plans.iter().map(|p| &**p)));
//!
//! // Pass 2: data records into Arrow, then Parquet.
//! let mut builder = TableBuilder::new(schema.clone(), 1024);
//! let mut decoder = Decoder::new(Config::default());
//! for event in decoder.decode(&session, None, &msg)? {
//!     if let Event::Data(set) = event {
//!         builder.append(&set, &enrichment);
//!     }
//! }
//! let mut sink = ParquetSink::try_new(Vec::new(), &schema, SinkOptions::default())?;
//! sink.write(&builder.finish()?)?;
//! let (_parquet_bytes, summary) = sink.finish()?;
//! assert_eq!(summary.rows, 1);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

/// The `Any` conversions every `ArrayBuilder` of ours implements alike.
macro_rules! any_impls {
    () => {
        fn as_any(&self) -> &dyn std::any::Any {
            self
        }
        fn as_any_mut(&mut self) -> &mut dyn std::any::Any {
            self
        }
        fn into_box_any(self: Box<Self>) -> Box<dyn std::any::Any> {
            self
        }
    };
}
use any_impls;

mod builder;
mod derive;
mod enrich;
mod fixed;
mod prim;
mod schema;
mod sink;
mod text;
mod utf8;

#[cfg(test)]
mod tests;

use std::sync::Arc;

pub use builder::TableBuilder;
pub use derive::DerivedColumn;
pub use enrich::{Enrichment, EnrichmentStats};
pub use schema::{
    basic_list_item_type, basic_list_item_type_in, column_name, element_type, element_type_in, record_struct_type,
    ColumnRole, ColumnSpec, Layout, Provenance, TableKind, TableSchema, CONTRACT_VERSION,
};
pub use sink::{
    Compression, ParquetSink, SinkOptions, SinkSummary, TableWriter, DEFAULT_BATCH_ROWS, DEFAULT_ROW_GROUP_ROWS,
};
pub use text::write_value_text;

/// What can go wrong building batches or writing Parquet. Input never
/// causes one: undecodable values are counted in [`ColumnarStats`].
#[derive(Debug, Clone, thiserror::Error)]
#[non_exhaustive]
pub enum ColumnarError {
    /// Arrow refused to assemble a batch (a bug: columns out of step).
    #[error("arrow: {0}")]
    Arrow(Arc<arrow::error::ArrowError>),
    /// The Parquet writer failed (often an I/O error underneath).
    #[error("parquet: {0}")]
    Parquet(Arc<parquet::errors::ParquetError>),
    /// A batch whose schema is not the sink's was written.
    #[error("batch schema does not match the sink's schema")]
    SchemaMismatch,
}

impl From<arrow::error::ArrowError> for ColumnarError {
    fn from(e: arrow::error::ArrowError) -> Self {
        Self::Arrow(Arc::new(e))
    }
}

impl From<parquet::errors::ParquetError> for ColumnarError {
    fn from(e: parquet::errors::ParquetError) -> Self {
        Self::Parquet(Arc::new(e))
    }
}

/// Counters of a [`TableBuilder`]: every value that could not be placed as
/// its type asks is counted here (it is null in the table).
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "camelCase")]
#[non_exhaustive]
pub struct ColumnarStats {
    /// Rows appended.
    pub rows: u64,
    /// Data Sets appended.
    pub sets: u64,
    /// Data Sets skipped because they belong to the other table (an options
    /// set given to the flows builder or the reverse).
    pub sets_other_table: u64,
    /// string values that were not well-formed UTF-8 (RFC 7011 §6.1.6:
    /// "SHOULD ... ignore"), written as null.
    pub values_null_invalid_utf8: u64,
    /// Other values their type does not define (a boolean other than 1 or 2,
    /// §6.1.5; a malformed list), written as null.
    pub values_null_invalid: u64,
    /// Timestamps outside the range of their Arrow unit (Nanosecond covers
    /// 1677–2262), written as null.
    pub values_null_out_of_range: u64,
    /// Values of fields whose length did not fit their type, written as
    /// octets to a `{name}_octets` column.
    pub values_octets_fallback: u64,
    /// Values of fields that have no column because their template was not
    /// given to the schema.
    pub values_unplaced: u64,
    /// basicList elements whose type differs from the column's item type,
    /// written as null items.
    pub list_elements_null: u64,
    /// Records inside subTemplateList/subTemplateMultiList values whose
    /// template is unknown in the domain (RFC 6313 §5.2), written as an item
    /// with null fields.
    pub list_records_unknown_template: u64,
    /// flowStart/EndSysUpTime values with no systemInitTimeMilliseconds in
    /// the record or the exporter's options: the derived time is null.
    pub times_unresolved_sys_up_time: u64,
    /// Records naming a sampler or selector with no matching options record,
    /// or naming none while their exporter+domain has several different
    /// rates: samplingRate is null.
    pub sampling_unresolved: u64,
    /// Text or octet values written as null because one batch's values in
    /// their column would pass 2 GiB (Arrow's 32-bit offsets). Column values
    /// are counted when the batch is finished, sub-template record texts
    /// when appended.
    pub values_null_too_long: u64,
}

/// The version of the Parquet contract written in the schema metadata.
pub(crate) const CONTRACT_KEY: &str = "flowsift.contract";
/// The schema metadata key naming a layout other than the readable one.
pub(crate) const LAYOUT_KEY: &str = "flowsift.layout";
/// The schema metadata key naming the table.
pub(crate) const TABLE_KEY: &str = "flowsift.table";
