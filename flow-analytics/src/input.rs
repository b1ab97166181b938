//! Finding the Parquet files behind the inputs and scanning them as one
//! table.
//!
//! An input is a file, a directory (searched recursively) or a glob.
//! Directory and glob inputs may be Hive-style partitioned
//! (`date=2026-11-30/exporter=192.0.2.1/part-0.parquet`): each `key=value`
//! directory below the input root becomes a column.
//!
//! Files may have different schemas. Polars' multi-file scan takes its
//! schema from the first file and rejects columns the first file lacks, so
//! files are grouped by schema (and partition values), each group is
//! scanned on its own, and the groups are aligned to a union schema before
//! they are concatenated. Only the columns a query needs are selected from
//! each scan, which polars pushes down into the Parquet reader.

use std::collections::BTreeMap;
use std::fs;
use std::io::Read;
use std::path::{Component, Path, PathBuf};

use polars::prelude::*;

use crate::contract;
use crate::error::Error;

/// The four bytes every Parquet file starts (and ends) with.
const PARQUET_MAGIC: &[u8; 4] = b"PAR1";

/// Hive's marker for a null partition value.
const HIVE_NULL: &str = "__HIVE_DEFAULT_PARTITION__";

/// Whether `path` is a Parquet file, judged by its first four bytes.
///
/// Returns `Ok(false)` for files shorter than four bytes.
///
/// # Errors
/// The file cannot be opened or read.
pub fn is_parquet(path: &Path) -> std::io::Result<bool> {
    let mut head = [0u8; 4];
    let mut file = fs::File::open(path)?;
    let mut filled = 0;
    while filled < head.len() {
        let Some(rest) = head.get_mut(filled..) else {
            break;
        };
        match file.read(rest)? {
            0 => return Ok(false),
            n => filled += n,
        }
    }
    Ok(&head == PARQUET_MAGIC)
}

/// `key=value` directories of a path, in path order; `None` for Hive's
/// null marker.
type Partitions = Vec<(String, Option<String>)>;

/// A Parquet file with the partition values its path carries.
#[derive(Debug, Clone, PartialEq, Eq)]
struct InputFile {
    path: PathBuf,
    /// `key=value` directories between the input root and the file.
    partitions: Partitions,
}

/// Files sharing one schema and one set of partition values.
struct Group {
    paths: Vec<PathBuf>,
    schema: SchemaRef,
    partitions: Partitions,
}

/// The inputs of a query, opened: files found, schemas read, grouped.
pub(crate) struct Inputs {
    groups: Vec<Group>,
    /// Every column of every file plus the partition columns, with one
    /// type each (the supertype where files disagree).
    union: Schema,
}

impl Inputs {
    /// Expands `inputs` and reads the schema of every file found.
    pub(crate) fn open(inputs: &[PathBuf]) -> Result<Self, Error> {
        if inputs.is_empty() {
            return Err(Error::NoInputs);
        }
        let mut files = Vec::new();
        for input in inputs {
            expand(input, &mut files)?;
        }
        let mut groups: Vec<Group> = Vec::new();
        let mut index: BTreeMap<(String, Partitions), usize> = BTreeMap::new();
        let mut union = Schema::default();
        for file in files {
            let schema = read_schema(&file.path)?;
            for (name, dtype) in schema.iter() {
                merge_dtype(&mut union, name, dtype, &file.path)?;
            }
            for (key, _) in &file.partitions {
                if union.get(key.as_str()).is_none() {
                    let dtype = contract::dtype_of(key).unwrap_or(DataType::String);
                    union.with_column(key.as_str().into(), dtype);
                }
            }
            let fingerprint = format!("{:?}", schema);
            let slot = (fingerprint, file.partitions.clone());
            match index.get(&slot) {
                Some(&at) => {
                    if let Some(group) = groups.get_mut(at) {
                        group.paths.push(file.path);
                    }
                }
                None => {
                    index.insert(slot, groups.len());
                    groups.push(Group {
                        paths: vec![file.path],
                        schema,
                        partitions: file.partitions,
                    });
                }
            }
        }
        Ok(Inputs { groups, union })
    }

    /// The type of `column` across the inputs, if any input has it.
    pub(crate) fn dtype(&self, column: &str) -> Option<&DataType> {
        self.union.get(column)
    }

    /// One lazy frame over all inputs with exactly `columns`, each of the
    /// given type. Inputs lacking a column read it as nulls.
    pub(crate) fn frame(&self, columns: &[(String, DataType)]) -> Result<LazyFrame, Error> {
        let mut frames = Vec::with_capacity(self.groups.len());
        for group in &self.groups {
            let paths: Vec<PlRefPath> = group
                .paths
                .iter()
                .map(|p| PlRefPath::new(p.to_string_lossy().as_ref()))
                .collect();
            let args = ScanArgsParquet {
                hive_options: HiveOptions::new_disabled(),
                glob: false,
                ..ScanArgsParquet::default()
            };
            let scan = LazyFrame::scan_parquet_files(paths.into(), args)?;
            let exprs: Vec<Expr> = columns
                .iter()
                .map(|(name, dtype)| column_expr(group, name, dtype))
                .collect();
            frames.push(scan.select(exprs));
        }
        if frames.len() == 1 {
            if let Some(frame) = frames.pop() {
                return Ok(frame);
            }
        }
        Ok(concat(frames, UnionArgs::default())?)
    }
}

/// What the inputs' footers tell without reading any rows.
pub(crate) struct FooterFacts {
    /// The earliest and latest record time (`flowEndTime`, else
    /// `exportTime`) over every row, in nanoseconds since 1970, when the
    /// statistics tell it exactly; `None` when they cannot (statistics
    /// missing, a row group where only some `flowEndTime` values are null,
    /// a time column that is not a Parquet timestamp, or a partition column
    /// of that name), and the rows must be read. The inner `None`s: no row
    /// has a time.
    pub time_bounds: Option<(Option<i64>, Option<i64>)>,
    /// Whether every row of every input carries `forwardingStatus` beside
    /// the `forwardingOutcome` and `forwardingReason` columns derived from
    /// it: each file has the three columns (an unsigned status of at most
    /// 32 bits and two texts, none a partition column) and its statistics
    /// count no null status in any row group. Then outcome and reason are
    /// functions of the status ([`contract::forwarding_names`]).
    pub status_everywhere: bool,
}

impl Inputs {
    /// Reads every input's footer once for [`FooterFacts`].
    pub(crate) fn footer_facts(&self) -> FooterFacts {
        let mut bounds = Some(TimeBounds::default());
        let mut status = true;
        for group in &self.groups {
            status &= group_has_status_columns(group);
            let partitioned = group.partitions.iter().any(|(key, _)| {
                key == contract::FLOW_END_TIME || key == contract::EXPORT_TIME
            });
            if partitioned {
                bounds = None;
            }
            for path in &group.paths {
                let metadata = fs::File::open(path)
                    .ok()
                    .and_then(|mut file| polars_parquet::parquet::read::read_metadata(&mut file).ok());
                let Some(metadata) = metadata else {
                    return FooterFacts {
                        time_bounds: None,
                        status_everywhere: false,
                    };
                };
                if status {
                    status = metadata.row_groups.iter().all(|row_group| {
                        no_nulls(row_group, contract::FORWARDING_STATUS, &metadata.footer_buf)
                    });
                }
                if let Some(b) = bounds.as_mut() {
                    if file_time_bounds(&metadata, b).is_none() {
                        bounds = None;
                    }
                }
            }
        }
        FooterFacts {
            time_bounds: bounds.map(|b| (b.min, b.max)),
            status_everywhere: status,
        }
    }
}

/// Whether a group's files carry `forwardingStatus` (unsigned, at most 32
/// bits), `forwardingOutcome` and `forwardingReason` (texts) themselves,
/// with no partition column of those names.
fn group_has_status_columns(group: &Group) -> bool {
    use contract::{FORWARDING_OUTCOME, FORWARDING_REASON, FORWARDING_STATUS};
    let partitioned = group.partitions.iter().any(|(key, _)| {
        key == FORWARDING_STATUS || key == FORWARDING_OUTCOME || key == FORWARDING_REASON
    });
    let status = matches!(
        group.schema.get(FORWARDING_STATUS),
        Some(DataType::UInt8 | DataType::UInt16 | DataType::UInt32)
    );
    let texts = [FORWARDING_OUTCOME, FORWARDING_REASON]
        .iter()
        .all(|name| matches!(group.schema.get(name), Some(DataType::String)));
    !partitioned && status && texts
}

/// Whether a row group's statistics say that the top-level integer column
/// `name` has no nulls (false when the column or its statistics are
/// missing).
fn no_nulls(
    row_group: &polars_parquet::parquet::metadata::RowGroupMetadata,
    name: &str,
    footer: &[u8],
) -> bool {
    use polars_parquet::parquet::statistics::Statistics;
    let Some(mut chunks) = row_group.columns_under_root_iter(name) else {
        return false;
    };
    let (Some(chunk), None) = (chunks.next(), chunks.next()) else {
        return false;
    };
    let nulls = match chunk.statistics(footer) {
        Some(Ok(Statistics::Int32(stats))) => stats.null_count,
        Some(Ok(Statistics::Int64(stats))) => stats.null_count,
        _ => None,
    };
    nulls == Some(0)
}

/// Running minimum and maximum of record times, in nanoseconds.
#[derive(Default)]
struct TimeBounds {
    min: Option<i64>,
    max: Option<i64>,
}

impl TimeBounds {
    fn add(&mut self, min: i64, max: i64) {
        self.min = Some(self.min.map_or(min, |m| m.min(min)));
        self.max = Some(self.max.map_or(max, |m| m.max(max)));
    }
}

/// Statistics of one time column in one row group.
struct ChunkTimes {
    nulls: usize,
    /// Minimum and maximum in nanoseconds; `None` when every value is null.
    range: Option<(i64, i64)>,
}

/// Adds the record-time range of one file to `bounds`; `None` when its
/// footer cannot tell exactly.
fn file_time_bounds(
    metadata: &polars_parquet::parquet::metadata::FileMetadata,
    bounds: &mut TimeBounds,
) -> Option<()> {
    for row_group in &metadata.row_groups {
        let rows = row_group.num_rows();
        let end = chunk_times(row_group, contract::FLOW_END_TIME, &metadata.footer_buf)?;
        let export = chunk_times(row_group, contract::EXPORT_TIME, &metadata.footer_buf)?;
        // Rows take flowEndTime when it is there, else exportTime.
        let range = match end {
            Some(end) if end.nulls == 0 => Some(end.range?),
            Some(end) if end.nulls == rows => export.and_then(|e| e.range),
            Some(_) => return None,
            None => export.and_then(|e| e.range),
        };
        if let Some((min, max)) = range {
            bounds.add(min, max);
        }
    }
    Some(())
}

/// The statistics of a top-level timestamp column in a row group:
/// `Some(None)` when the file has no such column, `None` when the
/// statistics are missing or the column is not an INT64 timestamp.
fn chunk_times(
    row_group: &polars_parquet::parquet::metadata::RowGroupMetadata,
    name: &str,
    footer: &[u8],
) -> Option<Option<ChunkTimes>> {
    use polars_parquet::parquet::schema::types::{PrimitiveLogicalType, TimeUnit as PqUnit};
    use polars_parquet::parquet::statistics::Statistics;
    let Some(mut chunks) = row_group.columns_under_root_iter(name) else {
        return Some(None);
    };
    let chunk = chunks.next()?;
    if chunks.next().is_some() {
        return None;
    }
    let scale: i64 = match chunk.descriptor().descriptor.primitive_type.logical_type {
        Some(PrimitiveLogicalType::Timestamp { unit, .. }) => match unit {
            PqUnit::Milliseconds => 1_000_000,
            PqUnit::Microseconds => 1_000,
            PqUnit::Nanoseconds => 1,
        },
        _ => return None,
    };
    let Statistics::Int64(stats) = chunk.statistics(footer)?.ok()? else {
        return None;
    };
    let nulls = usize::try_from(stats.null_count?).ok()?;
    let range = match (stats.min_value, stats.max_value) {
        (Some(min), Some(max)) => Some((min.checked_mul(scale)?, max.checked_mul(scale)?)),
        (None, None) if nulls == row_group.num_rows() => None,
        _ => return None,
    };
    Some(Some(ChunkTimes { nulls, range }))
}

/// How one group supplies `name`: its own column (cast if its type differs
/// from the union's), else its partition value, else typed nulls. When both
/// the file and the path carry a value, the file's wins unless null.
fn column_expr(group: &Group, name: &str, dtype: &DataType) -> Expr {
    let from_path = group
        .partitions
        .iter()
        .rev()
        .find(|(key, _)| key == name)
        .map(|(_, value)| match value {
            Some(text) => lit(text.as_str()).cast(dtype.clone()),
            None => lit(NULL).cast(dtype.clone()),
        });
    let from_file = group.schema.get(name).map(|own| {
        if own == dtype {
            col(name)
        } else {
            col(name).cast(dtype.clone())
        }
    });
    let expr = match (from_file, from_path) {
        (Some(file), Some(path)) => coalesce(&[file, path]),
        (Some(file), None) => file,
        (None, Some(path)) => path,
        (None, None) => lit(NULL).cast(dtype.clone()),
    };
    expr.alias(name)
}

/// Adds `name: dtype` to the union, widening to the supertype on conflict.
fn merge_dtype(
    union: &mut Schema,
    name: &PlSmallStr,
    dtype: &DataType,
    path: &Path,
) -> Result<(), Error> {
    let merged = match union.get(name) {
        None => dtype.clone(),
        Some(seen) if seen == dtype => return Ok(()),
        Some(seen) => supertype(seen, dtype).ok_or_else(|| Error::SchemaConflict {
            column: name.to_string(),
            first: seen.to_string(),
            other: dtype.to_string(),
            path: path.to_path_buf(),
        })?,
    };
    union.with_column(name.clone(), merged);
    Ok(())
}

/// The narrowest type both `a` and `b` convert to without loss, for the
/// differences writers plausibly produce: integer widths, floats, time
/// units, all-null columns, and lists of those. `None` otherwise.
fn supertype(a: &DataType, b: &DataType) -> Option<DataType> {
    use DataType as D;
    fn bits(d: &DataType) -> Option<(bool, u32)> {
        Some(match d {
            D::UInt8 => (false, 8),
            D::UInt16 => (false, 16),
            D::UInt32 => (false, 32),
            D::UInt64 => (false, 64),
            D::Int8 => (true, 8),
            D::Int16 => (true, 16),
            D::Int32 => (true, 32),
            D::Int64 => (true, 64),
            _ => return None,
        })
    }
    fn int(signed: bool, width: u32) -> Option<DataType> {
        Some(match (signed, width) {
            (false, 8) => D::UInt8,
            (false, 16) => D::UInt16,
            (false, 32) => D::UInt32,
            (false, 64) => D::UInt64,
            (true, 8) => D::Int8,
            (true, 16) => D::Int16,
            (true, 32) => D::Int32,
            (true, 64) => D::Int64,
            _ => return None,
        })
    }
    fn fine(unit: TimeUnit) -> u8 {
        match unit {
            TimeUnit::Milliseconds => 0,
            TimeUnit::Microseconds => 1,
            TimeUnit::Nanoseconds => 2,
        }
    }
    if a == b {
        return Some(a.clone());
    }
    match (a, b) {
        (D::Null, other) | (other, D::Null) => Some(other.clone()),
        (D::Float32 | D::Float64, D::Float32 | D::Float64) => Some(D::Float64),
        (D::List(x), D::List(y)) => Some(D::List(Box::new(supertype(x, y)?))),
        (D::Datetime(u1, tz1), D::Datetime(u2, tz2)) if tz1 == tz2 => {
            let unit = if fine(*u1) >= fine(*u2) { *u1 } else { *u2 };
            Some(D::Datetime(unit, tz1.clone()))
        }
        _ => match (bits(a)?, bits(b)?) {
            ((true, ws), (false, wu)) | ((false, wu), (true, ws)) => {
                // Mixed signs: a signed type wide enough for the unsigned one.
                int(true, ws.max(wu * 2))
            }
            ((signed, wa), (_, wb)) => int(signed, wa.max(wb)),
        },
    }
}

/// Reads a file's schema from its footer.
fn read_schema(path: &Path) -> Result<SchemaRef, Error> {
    let args = ScanArgsParquet {
        hive_options: HiveOptions::new_disabled(),
        glob: false,
        ..ScanArgsParquet::default()
    };
    let mut lf = LazyFrame::scan_parquet(PlRefPath::new(path.to_string_lossy().as_ref()), args)?;
    Ok(lf.collect_schema()?)
}

/// Whether `text` holds glob metacharacters.
fn is_glob(text: &str) -> bool {
    text.contains(['*', '?', '['])
}

/// Appends the Parquet files behind one input to `out`.
fn expand(input: &Path, out: &mut Vec<InputFile>) -> Result<(), Error> {
    let text = input.to_string_lossy();
    if input.is_file() {
        if !is_parquet(input).map_err(|e| Error::io(input, e))? {
            return Err(Error::NotParquet {
                path: input.to_path_buf(),
            });
        }
        out.push(InputFile {
            path: input.to_path_buf(),
            partitions: Vec::new(),
        });
        return Ok(());
    }
    let before = out.len();
    if input.is_dir() {
        walk(input, input, out)?;
    } else if is_glob(&text) {
        let root = glob_root(input);
        let matches = glob::glob(&text).map_err(|e| Error::BadGlob {
            pattern: text.to_string(),
            reason: e.msg.to_string(),
        })?;
        let mut found: Vec<PathBuf> = Vec::new();
        for entry in matches {
            let path = entry.map_err(|e| {
                let path = e.path().to_path_buf();
                Error::io(path, e.into())
            })?;
            found.push(path);
        }
        found.sort();
        for path in found {
            if path.is_dir() {
                walk(&root, &path, out)?;
            } else if !is_hidden(&path) && is_parquet(&path).map_err(|e| Error::io(&path, e))? {
                out.push(InputFile {
                    partitions: partitions(&root, &path),
                    path,
                });
            }
        }
    } else {
        return Err(Error::InputNotFound {
            path: input.to_path_buf(),
        });
    }
    if out.len() == before {
        return Err(Error::NoParquetFiles {
            pattern: text.to_string(),
        });
    }
    Ok(())
}

/// The leading components of a glob that hold no metacharacters: the root
/// from which partition directories are read.
fn glob_root(pattern: &Path) -> PathBuf {
    let mut root = PathBuf::new();
    for component in pattern.components() {
        if is_glob(&component.as_os_str().to_string_lossy()) {
            break;
        }
        root.push(component);
    }
    root
}

/// Files whose names start with `.` or `_` (`_SUCCESS`, `.part.crc`) are
/// bookkeeping of the writers, not data.
fn is_hidden(path: &Path) -> bool {
    path.file_name()
        .map(|n| n.to_string_lossy())
        .is_some_and(|n| n.starts_with('.') || n.starts_with('_'))
}

/// Recursively collects Parquet files below `dir`, in sorted order;
/// partitions are read relative to `root`.
fn walk(root: &Path, dir: &Path, out: &mut Vec<InputFile>) -> Result<(), Error> {
    let mut entries: Vec<PathBuf> = fs::read_dir(dir)
        .map_err(|e| Error::io(dir, e))?
        .map(|entry| entry.map(|e| e.path()))
        .collect::<Result<_, _>>()
        .map_err(|e| Error::io(dir, e))?;
    entries.sort();
    for path in entries {
        if is_hidden(&path) {
            continue;
        }
        if path.is_dir() {
            walk(root, &path, out)?;
        } else if is_parquet(&path).map_err(|e| Error::io(&path, e))? {
            out.push(InputFile {
                partitions: partitions(root, &path),
                path,
            });
        }
    }
    Ok(())
}

/// The `key=value` directories between `root` and the file `path`.
fn partitions(root: &Path, path: &Path) -> Partitions {
    let Ok(relative) = path.strip_prefix(root) else {
        return Vec::new();
    };
    let Some(parent) = relative.parent() else {
        return Vec::new();
    };
    parent
        .components()
        .filter_map(|component| match component {
            Component::Normal(part) => {
                let part = part.to_string_lossy();
                let (key, value) = part.split_once('=')?;
                if key.is_empty() {
                    return None;
                }
                let value = percent_decode(value);
                let value = (value != HIVE_NULL).then_some(value);
                Some((percent_decode(key), value))
            }
            _ => None,
        })
        .collect()
}

/// Decodes `%XX` escapes (as Hive writers escape `/`, `:` and `=`); a
/// malformed escape is kept as written.
fn percent_decode(text: &str) -> String {
    let bytes = text.as_bytes();
    let mut out = Vec::with_capacity(bytes.len());
    let mut i = 0;
    while let Some(&byte) = bytes.get(i) {
        if byte == b'%' {
            let hex = bytes
                .get(i + 1..i + 3)
                .and_then(|h| std::str::from_utf8(h).ok())
                .and_then(|h| u8::from_str_radix(h, 16).ok());
            if let Some(decoded) = hex {
                out.push(decoded);
                i += 3;
                continue;
            }
        }
        out.push(byte);
        i += 1;
    }
    String::from_utf8_lossy(&out).into_owned()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn partitions_from_path() {
        let root = Path::new("/data");
        let path = Path::new("/data/date=2026-11-30/exporter=2001%3Adb8%3A%3A1/x=__HIVE_DEFAULT_PARTITION__/plain/part.parquet");
        assert_eq!(
            partitions(root, path),
            vec![
                ("date".to_string(), Some("2026-11-30".to_string())),
                ("exporter".to_string(), Some("2001:db8::1".to_string())),
                ("x".to_string(), None),
            ]
        );
    }

    #[test]
    fn percent_decode_keeps_malformed_escapes() {
        assert_eq!(percent_decode("a%2"), "a%2");
        assert_eq!(percent_decode("a%zzb"), "a%zzb");
        assert_eq!(percent_decode("%41%42"), "AB");
    }

    #[test]
    fn supertypes() {
        use DataType as D;
        assert_eq!(supertype(&D::UInt32, &D::UInt64), Some(D::UInt64));
        assert_eq!(supertype(&D::UInt32, &D::Int32), Some(D::Int64));
        assert_eq!(supertype(&D::UInt64, &D::Int8), None);
        assert_eq!(supertype(&D::Null, &D::String), Some(D::String));
        assert_eq!(supertype(&D::String, &D::UInt8), None);
        let ms = D::Datetime(TimeUnit::Milliseconds, Some(TimeZone::UTC));
        let ns = D::Datetime(TimeUnit::Nanoseconds, Some(TimeZone::UTC));
        assert_eq!(supertype(&ms, &ns), Some(ns.clone()));
        assert_eq!(
            supertype(&D::List(Box::new(D::UInt16)), &D::List(Box::new(D::UInt32))),
            Some(D::List(Box::new(D::UInt32)))
        );
    }

    #[test]
    fn glob_root_stops_at_first_pattern() {
        assert_eq!(glob_root(Path::new("/d/x=1/*/p*.parquet")), PathBuf::from("/d/x=1"));
    }
}
