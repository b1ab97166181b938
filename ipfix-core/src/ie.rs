//! The IANA IPFIX Information Element registry.
