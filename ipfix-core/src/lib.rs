//! IPFIX decoder.
#![forbid(unsafe_code)]
#![warn(missing_docs)]

mod data_type;
mod field;
pub mod ie;
mod transport;

#[cfg(feature = "capture")]
pub mod capture;

pub use data_type::{DataType, Semantics};
pub use field::{ElementId, FieldSpecifier, ObservationDomainId, TemplateId, REVERSE_PEN, VARIABLE_LENGTH};
pub use transport::{Transport, TransportSession};
