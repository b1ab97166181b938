//! End-to-end tests: capture to Parquet to analytics.

mod convert;
