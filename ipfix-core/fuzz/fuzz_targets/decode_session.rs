#![no_main]
//! Messages fed through one decoder with session state; see `ipfix_core::harness::decode_session`.
libfuzzer_sys::fuzz_target!(|data: &[u8]| ipfix_core::harness::decode_session(data));
