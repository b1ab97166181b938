//! Two passes from captures to the flows and options Parquet tables.
//!
//! Pass 1 decodes templates and options records only: every template
//! learned (including redefinitions) goes into the schema, every options
//! record into the [`Enrichment`]. Nothing is kept per data record, so
//! memory does not grow with the input. Pass 2 decodes the records with a
//! fresh decoder and appends them to Arrow builders; every 32,768 rows the
//! batch is handed over a bounded channel to a writer thread that encodes
//! and compresses it and closes each row group when it is full, so
//! decoding and compression overlap on two cores. Memory holds a few
//! batches and one row group's encoded pages at any time (peak RSS about
//! 170-200 MiB on 49-column tables, the same for 1 and 20 million records).
//!
//! Both files are written under temporary names in the output directory
//! and renamed when complete, so a failed run leaves no half-written file.

use std::cell::Cell;
use std::collections::HashSet;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::mpsc::{sync_channel, Receiver};
use std::sync::Arc;
use std::thread;
use std::time::{Duration, Instant};

use anyhow::{anyhow, Context};
use arrow::array::RecordBatch;
use ipfix_core::columnar::{
    ColumnarStats, Enrichment, EnrichmentStats, ParquetSink, SinkOptions, TableBuilder, TableKind, TableSchema,
    DEFAULT_BATCH_ROWS,
};
use ipfix_core::{Event, Plan, Template};
use serde::Serialize;

use super::{Accounting, Inputs, Progress, Runner};

/// Batches waiting for the writer thread. Two keep the decoder busy while
/// one is compressed.
const CHANNEL_BATCHES: usize = 2;
/// Rows reserved up front for the options builder (options tables are small).
const OPTIONS_CAPACITY: usize = 8192;

/// What [`convert`] writes, and how.
#[derive(Debug, Clone)]
pub struct ConvertSettings {
    /// The flows table.
    pub flows: PathBuf,
    /// The options table.
    pub options: PathBuf,
    /// Compression and row-group size.
    pub sink: SinkOptions,
    /// Capture and decoder limits, strictness.
    pub runner: Runner,
}

/// One written table.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct TableSummary {
    /// Where it is.
    pub path: String,
    /// Rows written.
    pub rows: u64,
    /// Row groups written.
    pub row_groups: usize,
    /// Columns in the schema.
    pub columns: usize,
    /// Octets of the file.
    pub bytes: u64,
}

/// What [`convert`] did.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct ConvertOutcome {
    /// The flows table.
    pub flows: TableSummary,
    /// The options table.
    pub options: TableSummary,
    /// Values of the flows table that could not be placed as their type
    /// asks (written as null, or as octets), and other builder counters.
    pub flows_values: ColumnarStats,
    /// The same for the options table.
    pub options_values: ColumnarStats,
    /// What the options records taught the derived columns.
    pub enrichment: EnrichmentStats,
    /// Templates that went into the schemas (distinct definitions).
    pub schema_templates: usize,
    /// Wall-clock seconds of each pass (pass 2 includes finishing the files).
    pub seconds: PassSeconds,
    /// The accounting of pass 2 (the one that wrote the records).
    pub accounting: Accounting,
}

/// Wall-clock time of the two passes.
#[derive(Debug, Clone, Copy, Serialize)]
#[serde(rename_all = "camelCase")]
pub struct PassSeconds {
    /// Pass 1: templates and options records.
    pub templates: f64,
    /// Pass 2: records, compression, writing.
    pub records: f64,
    /// Of pass 2, time the decoding thread waited for the writer (a full
    /// channel): high when compression is the bottleneck.
    pub waiting_for_writer: f64,
    /// Time the writer thread spent encoding, compressing and writing.
    pub writer_busy: f64,
}

/// The options table's path for a flows table at `flows`:
/// `OUT.parquet` → `OUT.options.parquet`, any other name gets
/// `.options.parquet` appended.
pub fn options_path_for(flows: &Path) -> PathBuf {
    let name = flows.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let stem = name.strip_suffix(".parquet").unwrap_or(&name);
    flows.with_file_name(format!("{stem}.options.parquet"))
}

/// Converts `inputs` to the flows and options tables (see the module docs).
pub fn convert(inputs: &Inputs, settings: &ConvertSettings, progress: &Progress) -> anyhow::Result<ConvertOutcome> {
    let runner = &settings.runner;

    // Pass 1: templates and options records.
    let started = Instant::now();
    let mut plans: Vec<Arc<Plan>> = Vec::new();
    let mut seen: HashSet<Template> = HashSet::new();
    let mut enrichment = Enrichment::new();
    runner.run_pass(inputs, progress, "pass 1/2", |_, event| {
        match event {
            Event::TemplateLearned { plan, .. } if seen.insert(plan.template().clone()) => plans.push(plan),
            Event::Data(set) if set.plan().is_options() => {
                enrichment.add_options_set(&set);
            }
            _ => {}
        }
        Ok(())
    })?;
    let flows_schema = Arc::new(TableSchema::flows(plans.iter().map(|p| &**p)));
    let options_schema = Arc::new(TableSchema::options(plans.iter().map(|p| &**p)));
    let schema_templates = plans.len();
    drop(seen);
    drop(plans);

    // Pass 2: records, with a writer thread.
    let pass1 = started.elapsed().as_secs_f64();
    let flows_out = Output::create(&settings.flows)?;
    let options_out = Output::create(&settings.options)?;
    let flows_sink = ParquetSink::try_new(flows_out.writer()?, &flows_schema, settings.sink)?;
    let options_sink = ParquetSink::try_new(options_out.writer()?, &options_schema, settings.sink)?;
    let (tx, rx) = sync_channel::<(TableKind, RecordBatch)>(CHANNEL_BATCHES);
    let writer = thread::Builder::new()
        .name("parquet-writer".into())
        .spawn(move || write_batches(rx, flows_sink, options_sink))
        .context("cannot start the Parquet writer thread")?;

    // Batches smaller than a row group: the writer encodes each as it comes
    // and closes the row group when it is full, so memory holds a few small
    // batches plus one row group's encoded pages.
    let rows = settings.sink.row_group_rows.clamp(1, DEFAULT_BATCH_ROWS);
    let mut flows = TableBuilder::new(flows_schema.clone(), rows);
    let mut options = TableBuilder::new(options_schema.clone(), rows.min(OPTIONS_CAPACITY));
    let waited = Cell::new(Duration::ZERO);
    let send = |kind: TableKind, builder: &mut TableBuilder| -> anyhow::Result<()> {
        let batch = builder.finish()?;
        let t = Instant::now();
        // A closed channel means the writer stopped on an error, reported
        // when it is joined below.
        let sent = tx.send((kind, batch)).map_err(|_| anyhow!("the Parquet writer stopped"));
        waited.set(waited.get() + t.elapsed());
        sent
    };
    let pass = runner.run_pass(inputs, progress, "pass 2/2", |_, event| {
        if let Event::Data(set) = event {
            if set.plan().is_options() {
                options.append(&set, &enrichment);
                if options.len() >= rows {
                    send(TableKind::Options, &mut options)?;
                }
            } else {
                flows.append(&set, &enrichment);
                if flows.len() >= rows {
                    send(TableKind::Flows, &mut flows)?;
                }
            }
        }
        Ok(())
    });
    let tail = pass.and_then(|acc| {
        if !flows.is_empty() {
            send(TableKind::Flows, &mut flows)?;
        }
        if !options.is_empty() {
            send(TableKind::Options, &mut options)?;
        }
        Ok(acc)
    });
    drop(tx);
    let written = writer.join().map_err(|_| anyhow!("the Parquet writer thread panicked"))?;
    // A writer error explains a failed send; report it first.
    let (flows_w, options_w, writer_busy) = written?;
    let accounting = tail?;

    let flows_summary = flows_out.finish(flows_w, flows_schema.columns().len())?;
    let options_summary = options_out.finish(options_w, options_schema.columns().len())?;
    let seconds = PassSeconds {
        templates: pass1,
        records: started.elapsed().as_secs_f64() - pass1,
        waiting_for_writer: waited.get().as_secs_f64(),
        writer_busy,
    };
    Ok(ConvertOutcome {
        seconds,
        flows: flows_summary,
        options: options_summary,
        flows_values: flows.stats().clone(),
        options_values: options.stats().clone(),
        enrichment: enrichment.stats().clone(),
        schema_templates,
        accounting,
    })
}

type Sink = ParquetSink<BufWriter<File>>;
type Written = (Finished, Finished, f64);

/// A finished sink: the file and its row counts.
struct Finished {
    file: BufWriter<File>,
    rows: u64,
    row_groups: usize,
}

fn write_batches(rx: Receiver<(TableKind, RecordBatch)>, mut flows: Sink, mut options: Sink) -> anyhow::Result<Written> {
    let mut busy = Duration::ZERO;
    for (kind, batch) in rx {
        let t = Instant::now();
        let sink = match kind {
            TableKind::Flows => &mut flows,
            TableKind::Options => &mut options,
        };
        sink.write(&batch).context("cannot write Parquet")?;
        busy += t.elapsed();
    }
    let t = Instant::now();
    let finish = |sink: Sink| -> anyhow::Result<Finished> {
        let (file, summary) = sink.finish().context("cannot finish the Parquet file")?;
        Ok(Finished { file, rows: summary.rows, row_groups: summary.row_groups })
    };
    let done = (finish(flows)?, finish(options)?);
    busy += t.elapsed();
    Ok((done.0, done.1, busy.as_secs_f64()))
}

/// An output file written under a temporary name beside its final path.
struct Output {
    path: PathBuf,
    temp: tempfile::NamedTempFile,
}

impl Output {
    fn create(path: &Path) -> anyhow::Result<Self> {
        let dir = match path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        let temp = tempfile::Builder::new()
            .prefix(".flowsift-")
            .suffix(".partial")
            .tempfile_in(dir)
            .with_context(|| format!("cannot create output {} (in directory {})", path.display(), dir.display()))?;
        Ok(Self { path: path.to_path_buf(), temp })
    }

    fn writer(&self) -> anyhow::Result<BufWriter<File>> {
        let file = self.temp.reopen().with_context(|| format!("cannot open output {}", self.path.display()))?;
        Ok(BufWriter::with_capacity(1 << 20, file))
    }

    fn finish(self, written: Finished, columns: usize) -> anyhow::Result<TableSummary> {
        let mut file = written.file;
        file.flush().with_context(|| format!("cannot write output {}", self.path.display()))?;
        let file = file.into_inner().map_err(|e| anyhow!("cannot write output {}: {}", self.path.display(), e.error()))?;
        let bytes = file.metadata().map(|m| m.len()).unwrap_or(0);
        drop(file);
        self.temp
            .persist(&self.path)
            .map_err(|e| anyhow!("cannot rename the finished output to {}: {}", self.path.display(), e.error))?;
        Ok(TableSummary {
            path: self.path.display().to_string(),
            rows: written.rows,
            row_groups: written.row_groups,
            columns,
            bytes,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn options_path_beside_flows() {
        assert_eq!(options_path_for(Path::new("out/flows.parquet")), PathBuf::from("out/flows.options.parquet"));
        assert_eq!(options_path_for(Path::new("flows")), PathBuf::from("flows.options.parquet"));
        assert_eq!(options_path_for(Path::new("a.pq")), PathBuf::from("a.pq.options.parquet"));
    }
}
