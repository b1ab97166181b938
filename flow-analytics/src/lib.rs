//! Drop analysis over flowsift Parquet files.
