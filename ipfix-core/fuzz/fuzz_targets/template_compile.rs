#![no_main]
//! Template Set parsing and plan compilation; see `ipfix_core::harness::template_compile`.
libfuzzer_sys::fuzz_target!(|data: &[u8]| ipfix_core::harness::template_compile(data));
