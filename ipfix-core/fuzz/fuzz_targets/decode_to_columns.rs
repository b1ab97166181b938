#![no_main]
//! Messages through one decoder and on to the column builders of both layouts; see `ipfix_core::harness::decode_to_columns`.
libfuzzer_sys::fuzz_target!(|data: &[u8]| ipfix_core::harness::decode_to_columns(data));
