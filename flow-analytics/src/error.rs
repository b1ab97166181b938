//! The crate's error type.

use std::path::PathBuf;
use std::sync::Arc;

/// Why a drop query could not be built or run.
///
/// Cheap to clone: foreign errors are shared behind an `Arc`.
#[derive(Debug, Clone, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// The query was given no input paths.
    #[error("no input given")]
    NoInputs,
    /// An input path names nothing on disk and is not a glob.
    #[error("{}: no such file or directory", path.display())]
    InputNotFound {
        /// The path as given.
        path: PathBuf,
    },
    /// A glob matched no Parquet file, or a directory held none.
    #[error("{pattern}: matched no Parquet file")]
    NoParquetFiles {
        /// The glob or directory as given.
        pattern: String,
    },
    /// A glob pattern does not parse.
    #[error("{pattern}: bad glob pattern: {reason}")]
    BadGlob {
        /// The pattern as given.
        pattern: String,
        /// What is wrong with it.
        reason: String,
    },
    /// A file named explicitly does not start with the Parquet magic `PAR1`.
    #[error("{}: not a Parquet file (no PAR1 magic at start)", path.display())]
    NotParquet {
        /// The offending file.
        path: PathBuf,
    },
    /// Reading an input failed.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file or directory being read.
        path: PathBuf,
        /// The underlying error.
        #[source]
        source: Arc<std::io::Error>,
    },
    /// A column requested by a dimension or the filter exists in no input
    /// and is not part of the Parquet contract.
    #[error("no input has a column named `{name}`, and the flowsift Parquet contract lists none by that name")]
    UnknownColumn {
        /// The name as written.
        name: String,
    },
    /// Two inputs carry the same column with types that have no common
    /// supertype.
    #[error("column `{column}` is {first} in one input but {other} in {}", path.display())]
    SchemaConflict {
        /// The column.
        column: String,
        /// Its type in earlier inputs.
        first: String,
        /// Its type in `path`.
        other: String,
        /// The input that disagrees.
        path: PathBuf,
    },
    /// The `where` expression does not parse as SQL.
    #[error("cannot parse filter `{expr}`: {reason}")]
    BadFilter {
        /// The expression as given.
        expr: String,
        /// The parser's message.
        reason: String,
    },
    /// The `where` expression parses but does not yield true/false.
    #[error("filter `{expr}` yields {dtype}, not a boolean")]
    FilterNotBoolean {
        /// The expression as given.
        expr: String,
        /// The type it yields.
        dtype: String,
    },
    /// A dimension was named twice.
    #[error("dimension `{name}` given twice")]
    DuplicateDimension {
        /// The name as written.
        name: String,
    },
    /// A dimension name is empty.
    #[error("empty dimension name")]
    EmptyDimension,
    /// The bucket width is zero or too large to count in nanoseconds.
    #[error("bucket width must be between 1 ns and 292 years")]
    BadEvery,
    /// A duration text does not parse (expected e.g. `30s`, `5m`, `1h`).
    #[error("bad duration `{text}`: expected a whole number and a unit (s, m, h, d), e.g. `5m`")]
    BadDuration {
        /// The text as given.
        text: String,
    },
    /// A timestamp text is not RFC 3339.
    #[error("bad time `{text}`: expected RFC 3339, e.g. 2026-11-30T01:00:00Z")]
    BadTime {
        /// The text as given.
        text: String,
    },
    /// A time lies outside what nanoseconds since 1970 in an `i64` can hold.
    #[error("time {text} is out of range (years 1678 to 2261)")]
    TimeOutOfRange {
        /// The time, RFC 3339.
        text: String,
    },
    /// `from` is not before `to`.
    #[error("empty time range: from {from} is not before to {to}")]
    EmptyTimeRange {
        /// Start, RFC 3339.
        from: String,
        /// End, RFC 3339.
        to: String,
    },
    /// A sort key name is unknown.
    #[error("unknown sort key `{name}`; expected one of: {}", crate::SortKey::NAMES.join(", "))]
    UnknownSortKey {
        /// The name as written.
        name: String,
    },
    /// A comparison's window, spans or thresholds are unusable.
    #[error("compare: {reason}")]
    BadCompare {
        /// What is wrong.
        reason: String,
    },
    /// Polars failed while planning or running the query.
    #[error("query failed: {0}")]
    Polars(Arc<polars::prelude::PolarsError>),
}

impl From<polars::prelude::PolarsError> for Error {
    fn from(err: polars::prelude::PolarsError) -> Self {
        Error::Polars(Arc::new(err))
    }
}

impl Error {
    pub(crate) fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source: Arc::new(source),
        }
    }
}
