//! Capture readers.
