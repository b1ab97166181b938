//! IPFIX decoder.
