//! Field Specifiers (RFC 7011 §3.2) and the ids they carry.

use std::fmt;

/// The Field Length that announces a variable-length field (RFC 7011 §7).
pub const VARIABLE_LENGTH: u16 = 65535;

/// Private Enterprise Number of "IPFIX Reverse Information Element" (RFC 5103 §6.1).
pub const REVERSE_PEN: u32 = 29305;

/// Identifies an Information Element: an IANA id, or an enterprise-specific
/// id qualified by a Private Enterprise Number (RFC 7011 §3.2).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
pub struct ElementId {
    /// The 15-bit Information Element identifier.
    pub id: u16,
    /// `Some(pen)` when the Enterprise bit was set; `None` for IANA elements.
    pub enterprise: Option<u32>,
}

impl ElementId {
    /// An IANA-registered element (Enterprise bit clear).
    pub const fn iana(id: u16) -> Self {
        Self { id, enterprise: None }
    }

    /// An enterprise-specific element (Enterprise bit set).
    pub const fn enterprise(pen: u32, id: u16) -> Self {
        Self { id, enterprise: Some(pen) }
    }

    /// True for an IANA element with the given id.
    pub const fn is_iana(&self, id: u16) -> bool {
        self.enterprise.is_none() && self.id == id
    }
}

impl fmt::Display for ElementId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.enterprise {
            None => write!(f, "{}", self.id),
            Some(pen) => write!(f, "{}/{}", pen, self.id),
        }
    }
}

/// A Field Specifier: which element, and how many octets it takes on the
/// wire (RFC 7011 §3.2). [`VARIABLE_LENGTH`] marks a variable-length field.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub struct FieldSpecifier {
    /// The Information Element.
    pub element: ElementId,
    /// Field Length in octets, or [`VARIABLE_LENGTH`].
    pub length: u16,
}

impl FieldSpecifier {
    /// A field specifier for an IANA element.
    pub const fn iana(id: u16, length: u16) -> Self {
        Self { element: ElementId::iana(id), length }
    }

    /// A field specifier for an enterprise-specific element.
    pub const fn enterprise(pen: u32, id: u16, length: u16) -> Self {
        Self { element: ElementId::enterprise(pen, id), length }
    }

    /// True when the field is variable-length (RFC 7011 §7).
    pub const fn is_variable(&self) -> bool {
        self.length == VARIABLE_LENGTH
    }

    /// Octets this specifier takes inside a Template Record: 4, or 8 with an
    /// Enterprise Number (RFC 7011 §3.2).
    pub const fn wire_size(&self) -> usize {
        if self.element.enterprise.is_some() { 8 } else { 4 }
    }
}

/// A Template ID (RFC 7011 §3.4.1): 256..=65535 for templates; 2 and 3 appear
/// only in the all-templates withdrawals of RFC 7011 §8.1.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize)]
pub struct TemplateId(pub u16);

impl TemplateId {
    /// The lowest Template ID a template may use (RFC 7011 §3.4.1).
    pub const MIN_DATA: u16 = 256;
}

impl fmt::Display for TemplateId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}

/// An Observation Domain ID (RFC 7011 §3.1).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Default, serde::Serialize, serde::Deserialize)]
pub struct ObservationDomainId(pub u32);

impl fmt::Display for ObservationDomainId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.0)
    }
}
