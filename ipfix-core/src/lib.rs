//! A sans-IO IPFIX (RFC 7011) decoder and encoder with the complete IANA
//! Information Element registry.
//!
//! The decoder takes bytes and what only the transport knows (which
//! Transport Session, when it was received) and returns typed events:
//! templates learned or withdrawn, and Data Sets whose records decode
//! lazily through a plan compiled once per template. It owns no socket and
//! reads no clock, so it fits any collector: UDP, TCP (frame with
//! [`message_length`]), SCTP or RFC 5655 files.
//!
//! What it guarantees:
//! - RFC 7011 in full: templates and options templates keyed by Transport
//!   Session, Observation Domain and Template ID; withdrawals honoured over
//!   TCP/SCTP/files and ignored (and counted) over UDP; variable-length and
//!   reduced-size fields; enterprise-specific elements kept; every abstract
//!   data type; RFC 6313 lists, nested to a bounded depth.
//! - A malformed message is discarded whole with a [`MessageError`] saying
//!   what and where; state is untouched and the next message decodes.
//! - Nothing is lost silently: every Data Record is decoded or counted in
//!   [`Stats`] with a reason; sequence numbers are accounted per domain.
//! - Memory is bounded by [`Config`]: sessions, templates, buffered sets.
//!
//! # Example: feeding UDP payloads
//!
//! ```
//! use std::time::Duration;
//! use ipfix_core::{Decoder, Config, Event, TransportSession, Value};
//!
//! // One message as an exporter would send it: RFC 7011 Appendix A.2.1's
//! // template (source, destination, next hop, packets, octets) and one record.
//! let msg: Vec<u8> = [
//!     &[0x00, 0x0a, 0x00, 0x44][..],           // version 10, length 68
//!     &[0x69, 0x1c, 0x4a, 0x00],               // export time
//!     &[0, 0, 0, 0], &[0, 0, 0, 7],            // sequence 0, observation domain 7
//!     &[0x00, 0x02, 0x00, 0x1c, 0x01, 0x00, 0x00, 0x05], // template set: id 256, 5 fields
//!     &[0, 8, 0, 4, 0, 12, 0, 4, 0, 15, 0, 4, 0, 2, 0, 4, 0, 1, 0, 4],
//!     &[0x01, 0x00, 0x00, 0x18],               // data set for template 256
//!     &[192, 0, 2, 12, 192, 0, 2, 254, 192, 0, 2, 1],
//!     &[0, 0, 0x13, 0x91, 0, 0x51, 0x8c, 0x81], // 5009 packets, 5344385 octets
//! ].concat();
//!
//! let mut decoder = Decoder::new(Config::default());
//! let session = TransportSession::udp("192.0.2.1:50000".parse()?, "198.51.100.9:4739".parse()?);
//! let now = Some(Duration::from_secs(1_763_461_000));
//! for event in decoder.decode(&session, now, &msg)? {
//!     if let Event::Data(set) = event {
//!         for record in set.records() {
//!             for field in record.fields() {
//!                 println!("{} = {:?}", field.spec.name().unwrap_or("?"), field.value);
//!             }
//!             assert_eq!(record.get(2), Some(Value::Unsigned(5009))); // packetDeltaCount
//!         }
//!     }
//! }
//! assert_eq!(decoder.stats().records_decoded, 1);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```
//!
//! # Cargo features
//! - `capture`: readers for pcap, pcapng and RFC 5655 files, with link-layer,
//!   IP reassembly and TCP stream handling.
//! - `columnar`: Arrow record batches and Parquet files derived from the
//!   decode plans.
//!
//! With no features the crate pulls in neither Arrow nor a capture reader.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

mod data_type;
mod encoder;
mod error;
mod field;
#[doc(hidden)]
pub mod harness;
pub mod ie;
mod message;
mod plan;
mod record;
mod sequence;
mod session;
mod set;
mod structured;
mod template;
mod transport;

#[cfg(feature = "capture")]
pub mod capture;
#[cfg(feature = "columnar")]
pub mod columnar;

pub use data_type::{DataType, Semantics};
pub use encoder::{EncodeError, LengthPrefix, MessageEncoder, RecordEncoder, MAX_MESSAGE_SIZE};
pub use error::{ListProblem, Malformed, MessageError, SkipReason, TemplateProblem};
pub use field::{ElementId, FieldSpecifier, ObservationDomainId, TemplateId, REVERSE_PEN, VARIABLE_LENGTH};
pub use message::{message_length, MessageHeader, HEADER_LEN, VERSION};
pub use plan::{Decode, Plan, PlanField};
pub use record::{decoded_type, DateTime, Field, Fields, OwnedValue, RawFields, Record, Scope, TemplateTable, Value, NTP_UNIX_OFFSET};
pub use sequence::{SequenceEvent, SequenceTracker};
pub use session::{Config, DataRecords, DataSet, Decoded, Decoder, DomainStats, Event, Stats};
pub use set::{RawSet, SetHeader, SetKind, Sets, MIN_DATA_SET_ID, OPTIONS_TEMPLATE_SET_ID, SET_HEADER_LEN, TEMPLATE_SET_ID};
pub use structured::{semantic, BasicList, BasicListIter, Entries, MultiListEntry, Records, SubTemplateList, SubTemplateMultiList};
pub use template::{parse_template_set, LocatedTemplateRecord, Template, TemplateRecord};
pub use transport::{Transport, TransportSession};

/// Makes glibc's malloc keep the memory of freed batches for reuse.
///
/// Each finished batch (Arrow record batches of the `columnar` feature, or
/// a caller's own vectors) owns fresh buffers. glibc hands memory freed at the
/// top of its heap back to the system once more than its trim threshold
/// (128 KiB at start) is free, and serves requests above its mmap threshold
/// from fresh mappings; both thresholds rise only once a large mapping has
/// been freed (mallopt(3), M_MMAP_THRESHOLD, "dynamic adjustment"). Until
/// then a process that frees its batches once consumed gets their pages
/// back from the system on every batch, and each faults in again on first
/// touch: in our decode bench that doubled decoding times in some runs.
/// Freeing one 31 MiB allocation, zeroed so it is mapped but never
/// touched, raises both thresholds. Call it once at start; other
/// allocators ignore it.
///
/// ```
/// ipfix_core::settle_allocator();
/// ```
pub fn settle_allocator() {
    drop(std::hint::black_box(vec![0u8; 31 << 20]));
}
