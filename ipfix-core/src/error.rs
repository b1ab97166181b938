//! Errors: what was malformed and where.

use std::fmt;

use crate::field::{ObservationDomainId, TemplateId};
use crate::transport::TransportSession;

/// Why a message was discarded whole (RFC 7011 §9.1: "the Collecting Process
/// MUST discard the whole message"). Every variant carries the byte `offset`
/// from the start of the message where the problem was found.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum Malformed {
    /// Fewer octets than a header or field needs.
    #[error("truncated at offset {offset}: needed {needed} octets, {available} available")]
    Truncated {
        /// Where the short read started.
        offset: usize,
        /// Octets needed.
        needed: usize,
        /// Octets present.
        available: usize,
    },
    /// Version is not 10 (RFC 7011 §3.1).
    #[error("version {version} is not IPFIX (10)")]
    BadVersion {
        /// The version found.
        version: u16,
    },
    /// Message header Length disagrees with the octets given (RFC 7011 §3.1).
    #[error("message header declares length {declared}, but {available} octets were received")]
    LengthMismatch {
        /// Length from the header.
        declared: usize,
        /// Octets actually present.
        available: usize,
    },
    /// A Set Length below 4 or past the end of the message (RFC 7011 §3.3.2).
    #[error("set {set_id} at offset {offset} declares length {length}, but {remaining} octets remain")]
    BadSetLength {
        /// Offset of the Set Header.
        offset: usize,
        /// The Set ID.
        set_id: u16,
        /// Declared length.
        length: usize,
        /// Octets left in the message from the Set Header on.
        remaining: usize,
    },
    /// A Template or Options Template Record runs past its Set.
    #[error("template record {template_id} at offset {offset} runs past the end of its set")]
    TemplateOverrun {
        /// Offset of the Template Record.
        offset: usize,
        /// Template ID from the record header.
        template_id: u16,
    },
    /// A Data Record's variable-length field runs past its Set (RFC 7011 §9.1).
    #[error("record of template {template_id} at offset {offset}: field {field_index} needs {needed} octets, {available} remain in the set")]
    RecordOverrun {
        /// Offset of the field.
        offset: usize,
        /// Template describing the record.
        template_id: TemplateId,
        /// Index of the field in the template.
        field_index: usize,
        /// Octets needed.
        needed: usize,
        /// Octets left in the set.
        available: usize,
    },
    /// A structured-data list (RFC 6313) whose lengths make no sense.
    #[error("list in template {template_id} at offset {offset}: {problem}")]
    BadList {
        /// Offset of the problem.
        offset: usize,
        /// Outermost template of the record.
        template_id: TemplateId,
        /// What is wrong.
        problem: ListProblem,
    },
}

/// What is wrong with an RFC 6313 list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum ListProblem {
    /// The list header does not fit in the field.
    #[error("header needs {needed} octets, field has {available}")]
    ShortHeader {
        /// Octets needed.
        needed: usize,
        /// Octets present.
        available: usize,
    },
    /// An element or record runs past the end of the list.
    #[error("element runs past the end of the list")]
    ElementOverrun,
    /// Lists nested deeper than the configured bound.
    #[error("nested deeper than {limit} levels")]
    TooDeep {
        /// The configured bound.
        limit: usize,
    },
    /// A subTemplateMultiList Data Records Length below 4.
    #[error("subTemplateMultiList entry length {length} is shorter than its 4-octet header")]
    BadEntryLength {
        /// The declared length.
        length: u16,
    },
    /// A basicList element length of zero with a fixed-size type, which
    /// would describe infinitely many elements.
    #[error("basicList element length 0")]
    ZeroElementLength,
}

/// Why a template was not accepted (RFC 7011 §3.4.1, §3.4.2.2).
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum TemplateProblem {
    /// Template IDs 0..=255 are not usable by templates (§3.4.1).
    #[error("template id below 256")]
    ReservedId,
    /// Scope Field Count 0 in an Options Template (§3.4.2.2: "MUST NOT be zero").
    #[error("options template with scope field count 0")]
    NoScope,
    /// Scope Field Count greater than Field Count.
    #[error("scope field count exceeds field count")]
    ScopeExceedsFields,
    /// Every field has length 0, so a record would take no octets.
    #[error("records would be empty")]
    EmptyRecord,
    /// More fields than the configured bound.
    #[error("too many fields")]
    TooManyFields,
    /// The session already holds the configured maximum of templates.
    #[error("template limit for the session reached")]
    LimitReached,
}

/// A message that was discarded, with where it came from.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("malformed message from {session}{}: {problem}", domain.map(|d| format!(", observation domain {d}")).unwrap_or_default())]
pub struct MessageError {
    /// The Transport Session (exporter) it came on.
    pub session: TransportSession,
    /// The Observation Domain ID, when the header could be read.
    pub domain: Option<ObservationDomainId>,
    /// What was malformed, and where.
    pub problem: Malformed,
}

impl Malformed {
    /// A short, stable, lower-case-hyphenated name for counters.
    pub const fn reason(&self) -> &'static str {
        match self {
            Self::Truncated { .. } => "truncated",
            Self::BadVersion { .. } => "bad-version",
            Self::LengthMismatch { .. } => "length-mismatch",
            Self::BadSetLength { .. } => "bad-set-length",
            Self::TemplateOverrun { .. } => "template-overrun",
            Self::RecordOverrun { .. } => "record-overrun",
            Self::BadList { .. } => "bad-list",
        }
    }
}

/// Reasons a Set's records were not decoded. Counted, never silent.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
#[non_exhaustive]
pub enum SkipReason {
    /// Data Set whose template is unknown and could not be buffered.
    UnknownTemplate,
    /// Buffered Data Set whose template never arrived in time.
    TemplateNeverArrived,
    /// Buffering bound reached (`Config::max_pending_bytes`).
    PendingBufferFull,
    /// Set ID 0, 1 or 4..=255 (RFC 7011 §3.3.2: not used / reserved).
    ReservedSetId,
    /// Too many Transport Sessions (`Config::max_sessions`).
    SessionLimit,
    /// A buffered Data Set whose lengths did not fit its template once the
    /// template arrived (its message had been accepted before).
    MalformedWhenReplayed,
}

impl SkipReason {
    /// Lower-case-hyphenated name.
    pub const fn name(self) -> &'static str {
        match self {
            Self::UnknownTemplate => "unknown-template",
            Self::TemplateNeverArrived => "template-never-arrived",
            Self::PendingBufferFull => "pending-buffer-full",
            Self::ReservedSetId => "reserved-set-id",
            Self::SessionLimit => "session-limit",
            Self::MalformedWhenReplayed => "malformed-when-replayed",
        }
    }
}

impl fmt::Display for SkipReason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}
