//! The `flowsift` command-line tool: wiring between the decoder, the Parquet writer and the analytics.
