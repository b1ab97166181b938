//! IPFIX decoder.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

mod data_type;
mod error;
mod field;
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

pub use data_type::{DataType, Semantics};
pub use error::{ListProblem, Malformed, MessageError, SkipReason, TemplateProblem};
pub use field::{ElementId, FieldSpecifier, ObservationDomainId, TemplateId, REVERSE_PEN, VARIABLE_LENGTH};
pub use message::{message_length, MessageHeader, HEADER_LEN, VERSION};
pub use plan::{Decode, Plan, PlanField};
pub use record::{decoded_type, DateTime, Field, Fields, OwnedValue, Record, Scope, TemplateTable, Value, NTP_UNIX_OFFSET};
pub use sequence::{SequenceEvent, SequenceTracker};
pub use session::{Config, DataRecords, DataSet, Decoded, Decoder, DomainStats, Event, Stats};
pub use set::{RawSet, SetHeader, SetKind, Sets, MIN_DATA_SET_ID, OPTIONS_TEMPLATE_SET_ID, SET_HEADER_LEN, TEMPLATE_SET_ID};
pub use structured::{semantic, BasicList, BasicListIter, Entries, MultiListEntry, Records, SubTemplateList, SubTemplateMultiList};
pub use template::{parse_template_set, LocatedTemplateRecord, Template, TemplateRecord};
pub use transport::{Transport, TransportSession};
