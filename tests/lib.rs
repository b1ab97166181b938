//! End-to-end test harness crate (tests live in `e2e/`).
