//! Parquet output: a thin layer over parquet's `ArrowWriter` with the
//! project's defaults, and a writer that flushes row groups as it goes.

use std::io::Write;
use std::sync::Arc;

use arrow::array::{ArrayRef, RecordBatch};
use arrow::datatypes::{DataType as ArrowType, Field, Schema, SchemaRef, TimeUnit};
use parquet::arrow::arrow_writer::ArrowWriterOptions;
use parquet::arrow::{encode_arrow_schema, ArrowWriter, ARROW_SCHEMA_META_KEY};
use parquet::basic::{Compression as PqCompression, ZstdLevel};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;

use super::builder::TableBuilder;
use super::enrich::Enrichment;
use super::schema::TableSchema;
use super::{ColumnarError, ColumnarStats};
use crate::session::DataSet;

/// Column chunk compression.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum Compression {
    /// Zstandard at the given level (1..=22; out-of-range levels use 3).
    Zstd(i32),
    /// Snappy.
    Snappy,
    /// LZ4 (Parquet's `LZ4_RAW` codec).
    Lz4,
    /// No compression.
    None,
}

impl Default for Compression {
    /// Zstandard level 3.
    fn default() -> Self {
        Self::Zstd(3)
    }
}

impl Compression {
    fn parquet(self) -> PqCompression {
        match self {
            Self::Zstd(level) => {
                PqCompression::ZSTD(ZstdLevel::try_new(level).unwrap_or_default())
            }
            Self::Snappy => PqCompression::SNAPPY,
            Self::Lz4 => PqCompression::LZ4_RAW,
            Self::None => PqCompression::UNCOMPRESSED,
        }
    }
}

/// Default rows per row group (and per batch of a [`TableWriter`]).
pub const DEFAULT_ROW_GROUP_ROWS: usize = 128 * 1024;

/// Rows per Arrow batch handed to the Parquet writer. Smaller than a row
/// group: the writer encodes each batch as it comes and closes the row group
/// when it is full, so the row groups are the same whatever the batch size.
/// Measured on `scripts/bench-convert` (5 M records): 8k-row batches cut
/// peak memory to 119 MiB but the writer's per-batch work cost about 10 %
/// more CPU; 128k-row batches used 535 MiB for no gain over 32k (210 MiB).
pub const DEFAULT_BATCH_ROWS: usize = 32 * 1024;

/// How a [`ParquetSink`] writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SinkOptions {
    /// Column chunk compression.
    pub compression: Compression,
    /// Rows per row group; also the batch size of a [`TableWriter`], so
    /// memory holds about one row group.
    pub row_group_rows: usize,
}

impl Default for SinkOptions {
    fn default() -> Self {
        Self { compression: Compression::default(), row_group_rows: DEFAULT_ROW_GROUP_ROWS }
    }
}

impl SinkOptions {
    /// Sets [`SinkOptions::compression`].
    #[must_use]
    pub const fn with_compression(mut self, c: Compression) -> Self {
        self.compression = c;
        self
    }

    /// Sets [`SinkOptions::row_group_rows`] (at least 1).
    #[must_use]
    pub const fn with_row_group_rows(mut self, rows: usize) -> Self {
        self.row_group_rows = if rows == 0 { 1 } else { rows };
        self
    }
}

/// What a finished file holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "camelCase")]
pub struct SinkSummary {
    /// Rows written.
    pub rows: u64,
    /// Row groups written.
    pub row_groups: usize,
}

/// Writes batches of one [`TableSchema`] to a Parquet file.
///
/// The Arrow schema of the table is embedded in the file's key-value
/// metadata under `ARROW:schema` (base64 Arrow IPC, as parquet's
/// `ArrowWriter` and pyarrow write it), next to plain `flowsift.table` and
/// `flowsift.contract` keys.
///
/// **Seconds.** Parquet has no seconds unit for timestamps, and parquet's
/// `ArrowWriter` would store Timestamp(Second) columns (`exportTime`,
/// dateTimeSeconds elements) as bare INT64, which general readers show as
/// plain integers. So, like pyarrow for the same Arrow type, the sink
/// stores them as TIMESTAMP(MILLIS, UTC-adjusted), values × 1000; the
/// embedded schema still says Timestamp(Second, "UTC"). Readers seen doing
/// this (pyarrow, parquet's Arrow reader) return `timestamp[ms, tz=UTC]`
/// with the same instants: a seconds column does not survive Parquet in
/// either, not even one pyarrow wrote itself.
pub struct ParquetSink<W: Write + Send> {
    writer: ArrowWriter<W>,
    schema: SchemaRef,
    storage: SchemaRef,
    /// Per column: stored with another type than the table's.
    coerced: Vec<bool>,
    rows: u64,
}

/// The type a column is stored as: Timestamp(Second) → Timestamp(Millisecond),
/// also as list items.
fn storage_type(t: &ArrowType) -> ArrowType {
    match t {
        ArrowType::Timestamp(TimeUnit::Second, tz) => ArrowType::Timestamp(TimeUnit::Millisecond, tz.clone()),
        ArrowType::List(item) => {
            ArrowType::List(Arc::new(item.as_ref().clone().with_data_type(storage_type(item.data_type()))))
        }
        other => other.clone(),
    }
}

impl<W: Write + Send> std::fmt::Debug for ParquetSink<W> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ParquetSink").field("rows", &self.rows).finish_non_exhaustive()
    }
}

impl<W: Write + Send> ParquetSink<W> {
    /// Starts a file on `out` for tables of `schema`.
    pub fn try_new(out: W, schema: &TableSchema, options: SinkOptions) -> Result<Self, ColumnarError> {
        let arrow = schema.arrow_schema().clone();
        let fields: Vec<Field> =
            arrow.fields().iter().map(|f| f.as_ref().clone().with_data_type(storage_type(f.data_type()))).collect();
        let coerced = arrow.fields().iter().zip(&fields).map(|(a, b)| a.data_type() != b.data_type()).collect();
        let storage = Arc::new(Schema::new_with_metadata(fields, arrow.metadata().clone()));
        let mut metadata = vec![KeyValue::new(ARROW_SCHEMA_META_KEY.to_owned(), encode_arrow_schema(&arrow))];
        let mut plain: Vec<_> = arrow.metadata().iter().collect();
        plain.sort();
        metadata.extend(plain.into_iter().map(|(k, v)| KeyValue::new(k.clone(), v.clone())));
        let props = WriterProperties::builder()
            .set_compression(options.compression.parquet())
            .set_max_row_group_row_count(Some(options.row_group_rows.max(1)))
            .set_key_value_metadata(Some(metadata))
            .build();
        // The writer would embed the storage schema; the table's is embedded above.
        let writer_options = ArrowWriterOptions::new().with_properties(props).with_skip_arrow_metadata(true);
        let writer = ArrowWriter::try_new_with_options(out, storage.clone(), writer_options)?;
        Ok(Self { writer, schema: arrow, storage, coerced, rows: 0 })
    }

    /// Writes a batch; full row groups are flushed to `out` as they fill.
    pub fn write(&mut self, batch: &RecordBatch) -> Result<(), ColumnarError> {
        if batch.schema() != self.schema {
            return Err(ColumnarError::SchemaMismatch);
        }
        if self.coerced.iter().any(|c| *c) {
            let columns = batch
                .columns()
                .iter()
                .zip(self.storage.fields())
                .zip(&self.coerced)
                .map(|((c, f), coerce)| {
                    if *coerce {
                        arrow::compute::cast(c, f.data_type())
                    } else {
                        Ok(c.clone())
                    }
                })
                .collect::<Result<Vec<ArrayRef>, _>>()?;
            self.writer.write(&RecordBatch::try_new(self.storage.clone(), columns)?)?;
        } else {
            self.writer.write(batch)?;
        }
        self.rows += batch.num_rows() as u64;
        Ok(())
    }

    /// Rows written so far.
    pub const fn rows(&self) -> u64 {
        self.rows
    }

    /// Closes the current row group even if it is not full.
    pub fn flush(&mut self) -> Result<(), ColumnarError> {
        self.writer.flush()?;
        Ok(())
    }

    /// Writes the footer and returns the output and a summary.
    pub fn finish(mut self) -> Result<(W, SinkSummary), ColumnarError> {
        self.writer.flush()?;
        let row_groups = self.writer.flushed_row_groups().len();
        let out = self.writer.into_inner()?;
        Ok((out, SinkSummary { rows: self.rows, row_groups }))
    }
}

/// A [`TableBuilder`] and a [`ParquetSink`] together: appends Data Sets and
/// writes a row group whenever one is full, so memory holds about one row
/// group.
#[derive(Debug)]
pub struct TableWriter<W: Write + Send> {
    builder: TableBuilder,
    sink: ParquetSink<W>,
    rows_per_batch: usize,
}

impl<W: Write + Send> TableWriter<W> {
    /// Starts a file on `out` for `schema`.
    pub fn try_new(out: W, schema: Arc<TableSchema>, options: SinkOptions) -> Result<Self, ColumnarError> {
        let sink = ParquetSink::try_new(out, &schema, options)?;
        let rows_per_batch = options.row_group_rows.clamp(1, DEFAULT_BATCH_ROWS);
        let builder = TableBuilder::new(schema, rows_per_batch);
        Ok(Self { builder, sink, rows_per_batch })
    }

    /// Appends a Data Set (see [`TableBuilder::append`]) and writes a batch
    /// when a row group's worth of rows is waiting. Returns rows appended.
    pub fn append(&mut self, set: &DataSet<'_>, enrichment: &Enrichment) -> Result<usize, ColumnarError> {
        let n = self.builder.append(set, enrichment);
        if self.builder.len() >= self.rows_per_batch {
            let batch = self.builder.finish()?;
            self.sink.write(&batch)?;
        }
        Ok(n)
    }

    /// Counters of the builder.
    pub const fn stats(&self) -> &ColumnarStats {
        self.builder.stats()
    }

    /// Writes what is left and the footer.
    pub fn finish(mut self) -> Result<(W, SinkSummary, ColumnarStats), ColumnarError> {
        if !self.builder.is_empty() {
            let batch = self.builder.finish()?;
            self.sink.write(&batch)?;
        }
        let stats = self.builder.stats().clone();
        let (out, summary) = self.sink.finish()?;
        Ok((out, summary, stats))
    }
}
