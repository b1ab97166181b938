//! Structured data: basicList, subTemplateList and subTemplateMultiList
//! (RFC 6313 §4.5).

use crate::data_type::DataType;
use crate::error::ListProblem;
use crate::field::FieldSpecifier;
use crate::ie;
use crate::plan::{Decode, Plan};
use crate::record::{decode_value, field_span, record_len, record_span, whole_count, Record, RecordFault, Scope, Value};

/// List semantics (RFC 6313 §4.4; IANA "IPFIX Structured Data Types Semantics").
pub mod semantic {
    /// No element applies.
    pub const NONE_OF: u8 = 0x00;
    /// Exactly one element applies.
    pub const EXACTLY_ONE_OF: u8 = 0x01;
    /// At least one element applies.
    pub const ONE_OR_MORE_OF: u8 = 0x02;
    /// All elements apply.
    pub const ALL_OF: u8 = 0x03;
    /// Elements are in a meaningful order.
    pub const ORDERED: u8 = 0x04;
    /// Semantic not specified (the default).
    pub const UNDEFINED: u8 = 0xff;

    /// The registry name of a semantic value.
    pub const fn name(v: u8) -> Option<&'static str> {
        match v {
            NONE_OF => Some("noneOf"),
            EXACTLY_ONE_OF => Some("exactlyOneOf"),
            ONE_OR_MORE_OF => Some("oneOrMoreOf"),
            ALL_OF => Some("allOf"),
            ORDERED => Some("ordered"),
            UNDEFINED => Some("undefined"),
            _ => None,
        }
    }
}

fn be16(b: &[u8], at: usize) -> Option<u16> {
    Some(u16::from_be_bytes([*b.get(at)?, *b.get(at + 1)?]))
}

/// A basicList (RFC 6313 §4.5.1): elements of one Information Element.
///
/// Holds the field's octets; the header is read on access so that a
/// [`Value`] stays small.
#[derive(Debug, Clone, Copy)]
pub struct BasicList<'a> {
    raw: &'a [u8],
    scope: Scope<'a>,
}

impl PartialEq for BasicList<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.raw == other.raw
    }
}

/// The decoded header of a basicList.
#[derive(Debug, Clone, Copy)]
pub(crate) struct BasicListHeader<'a> {
    pub(crate) element: FieldSpecifier,
    pub(crate) data_type: DataType,
    pub(crate) decode: Decode,
    pub(crate) elements: &'a [u8],
}

/// Decodes a basicList header: Semantic (1), E bit + Field ID (2), Element
/// Length (2), Enterprise Number (4) when E = 1 (RFC 6313 §4.5.1).
pub(crate) fn basic_list_header(b: &[u8]) -> Option<BasicListHeader<'_>> {
    let (element, data_type, elements) = basic_list_parts(b)?;
    let (decode, _) = Decode::choose(data_type, element.length);
    Some(BasicListHeader { element, data_type, decode, elements })
}

/// The element's Field Specifier and abstract type (octetArray when not
/// registered), and the element octets, of a basicList.
#[inline]
fn basic_list_parts(b: &[u8]) -> Option<(FieldSpecifier, DataType, &[u8])> {
    let raw_id = be16(b, 1)?;
    let length = be16(b, 3)?;
    let (element, elements) = if raw_id & 0x8000 != 0 {
        let pen = u32::from_be_bytes(b.get(5..9)?.try_into().ok()?);
        (FieldSpecifier::enterprise(pen, raw_id & 0x7fff, length), b.get(9..)?)
    } else {
        (FieldSpecifier::iana(raw_id, length), b.get(5..)?)
    };
    let data_type = match element.element.enterprise {
        None => ie::lookup(element.element.id).and_then(|e| e.data_type).unwrap_or(DataType::OctetArray),
        Some(_) => DataType::OctetArray,
    };
    Some((element, data_type, elements))
}

impl<'a> BasicList<'a> {
    pub(crate) fn parse(b: &'a [u8], scope: Scope<'a>) -> Option<Self> {
        basic_list_header(b)?;
        Some(Self { raw: b, scope })
    }

    fn header(&self) -> Option<BasicListHeader<'a>> {
        basic_list_header(self.raw)
    }

    /// The list semantic (RFC 6313 §4.4).
    pub fn semantic(&self) -> u8 {
        self.raw.first().copied().unwrap_or(semantic::UNDEFINED)
    }

    /// The Field Specifier of the elements.
    pub fn element(&self) -> FieldSpecifier {
        self.header().map_or(FieldSpecifier::iana(0, 0), |h| h.element)
    }

    /// The elements' abstract type (octetArray when not registered).
    pub fn data_type(&self) -> DataType {
        self.header().map_or(DataType::OctetArray, |h| h.data_type)
    }

    /// The field's octets, list header included.
    pub const fn bytes(&self) -> &'a [u8] {
        self.raw
    }

    /// Iterates the elements. "There is no element count": the list runs to
    /// the end of the field (RFC 6313 §4.5.1).
    pub fn iter(&self) -> BasicListIter<'a> {
        BasicListIter { header: self.header(), scope: self.scope.deeper(), pos: 0 }
    }
}

/// Iterator over the elements of a [`BasicList`].
#[derive(Debug, Clone)]
pub struct BasicListIter<'a> {
    header: Option<BasicListHeader<'a>>,
    scope: Option<Scope<'a>>,
    pos: usize,
}

impl<'a> Iterator for BasicListIter<'a> {
    type Item = Value<'a>;

    fn next(&mut self) -> Option<Value<'a>> {
        let h = self.header?;
        if self.pos >= h.elements.len() {
            return None;
        }
        let (start, end) = field_span(h.elements, self.pos, &h.element)?;
        if end == self.pos {
            // A zero-length fixed element would never advance.
            return None;
        }
        self.pos = end;
        let raw = h.elements.get(start..end)?;
        Some(decode_value(h.decode, raw, self.scope?))
    }
}

impl<'a> Scope<'a> {
    /// The scope one list level deeper; `None` past the bound.
    pub(crate) fn deeper(self) -> Option<Self> {
        if self.depth >= self.max_depth {
            None
        } else {
            Some(Self { depth: self.depth + 1, ..self })
        }
    }
}

/// A subTemplateList (RFC 6313 §4.5.2): records of one template.
#[derive(Debug, Clone, Copy)]
pub struct SubTemplateList<'a> {
    raw: &'a [u8],
    scope: Scope<'a>,
}

impl PartialEq for SubTemplateList<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.raw == other.raw
    }
}

impl<'a> SubTemplateList<'a> {
    /// Checks for Semantic (1) and Template ID (2) (RFC 6313 §4.5.2).
    pub(crate) fn parse(b: &'a [u8], scope: Scope<'a>) -> Option<Self> {
        if b.len() < 3 {
            return None;
        }
        Some(Self { raw: b, scope })
    }

    /// The list semantic.
    pub fn semantic(&self) -> u8 {
        self.raw.first().copied().unwrap_or(semantic::UNDEFINED)
    }

    /// The Template ID of the records.
    pub fn template_id(&self) -> u16 {
        be16(self.raw, 1).unwrap_or(0)
    }

    /// The plan of the referenced template, if it is known in the domain
    /// (RFC 6313 §5.2: resolved in the same session and domain).
    pub fn plan(&self) -> Option<&'a Plan> {
        self.scope.templates.get(&self.template_id()).map(|p| &**p)
    }

    /// The records' octets.
    pub fn bytes(&self) -> &'a [u8] {
        self.raw.get(3..).unwrap_or_default()
    }

    /// Iterates the records; empty when the template is unknown.
    pub fn records(&self) -> Records<'a> {
        Records { plan: self.plan(), data: self.bytes(), pos: 0, scope: self.scope.deeper() }
    }
}

/// Iterator over records inside a list.
#[derive(Debug, Clone)]
pub struct Records<'a> {
    plan: Option<&'a Plan>,
    data: &'a [u8],
    pos: usize,
    scope: Option<Scope<'a>>,
}

impl<'a> Iterator for Records<'a> {
    type Item = Record<'a>;

    fn next(&mut self) -> Option<Record<'a>> {
        let plan = self.plan?;
        let scope = self.scope?;
        if self.data.len().saturating_sub(self.pos) < plan.min_len() {
            return None;
        }
        // Checked with the enclosing record when its message was accepted.
        let len = record_span(plan, self.data, self.pos)?;
        let bytes = self.data.get(self.pos..self.pos + len)?;
        self.pos += len;
        Some(Record::new(plan, bytes, scope))
    }
}

/// A subTemplateMultiList (RFC 6313 §4.5.3): a sequence of entries, each
/// with its own template and records.
#[derive(Debug, Clone, Copy)]
pub struct SubTemplateMultiList<'a> {
    raw: &'a [u8],
    scope: Scope<'a>,
}

impl PartialEq for SubTemplateMultiList<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.raw == other.raw
    }
}

impl<'a> SubTemplateMultiList<'a> {
    pub(crate) fn parse(b: &'a [u8], scope: Scope<'a>) -> Option<Self> {
        if b.is_empty() {
            return None;
        }
        Some(Self { raw: b, scope })
    }

    /// The list semantic.
    pub fn semantic(&self) -> u8 {
        self.raw.first().copied().unwrap_or(semantic::UNDEFINED)
    }

    /// Iterates the entries.
    pub fn entries(&self) -> Entries<'a> {
        Entries { data: self.raw.get(1..).unwrap_or_default(), scope: self.scope, pos: 0 }
    }
}

/// One entry of a subTemplateMultiList: Template ID, Data Records Length
/// (which "includes" the 4-octet entry header), records.
#[derive(Debug, Clone, Copy)]
pub struct MultiListEntry<'a> {
    template_id: u16,
    plan: Option<&'a Plan>,
    data: &'a [u8],
    scope: Scope<'a>,
}

impl<'a> MultiListEntry<'a> {
    /// The Template ID of this entry's records.
    pub const fn template_id(&self) -> u16 {
        self.template_id
    }

    /// The plan of the template, if known.
    pub const fn plan(&self) -> Option<&'a Plan> {
        self.plan
    }

    /// Iterates the records of this entry.
    pub fn records(&self) -> Records<'a> {
        Records { plan: self.plan, data: self.data, pos: 0, scope: self.scope.deeper() }
    }
}

/// Iterator over [`MultiListEntry`] values.
#[derive(Debug, Clone)]
pub struct Entries<'a> {
    data: &'a [u8],
    scope: Scope<'a>,
    pos: usize,
}

impl<'a> Iterator for Entries<'a> {
    type Item = MultiListEntry<'a>;

    fn next(&mut self) -> Option<MultiListEntry<'a>> {
        let template_id = be16(self.data, self.pos)?;
        let len = usize::from(be16(self.data, self.pos + 2)?);
        if len < 4 {
            return None;
        }
        let data = self.data.get(self.pos + 4..self.pos + len)?;
        self.pos += len;
        let plan = self.scope.templates.get(&template_id).map(|p| &**p);
        Some(MultiListEntry { template_id, plan, data, scope: self.scope })
    }
}

/// Checks the lengths inside a list-typed value (recursively, bounded by
/// `scope.max_depth`). Returns the offset (within `b`) and the problem.
pub(crate) fn validate(decode: Decode, b: &[u8], scope: Scope<'_>) -> Result<(), (usize, ListProblem)> {
    if !decode.is_list() {
        return Ok(());
    }
    let Some(inner) = scope.deeper() else {
        return Err((0, ListProblem::TooDeep { limit: usize::from(scope.max_depth) }));
    };
    match decode {
        Decode::BasicList => {
            let (element, data_type, elements) = basic_list_parts(b).ok_or_else(|| {
                let needed = if be16(b, 1).is_some_and(|id| id & 0x8000 != 0) { 9 } else { 5 };
                (0, ListProblem::ShortHeader { needed, available: b.len() })
            })?;
            let header = b.len() - elements.len();
            let element_len = usize::from(element.length);
            // List types accept any length, so their elements decode as
            // lists (`Decode::choose`).
            let nested = data_type.is_list();
            if !element.is_variable() && element_len > 0 && !nested {
                // Fixed-length scalar elements: the list holds whole
                // elements or the first incomplete one overruns.
                return match whole_count(elements.len(), element_len) {
                    Some(_) => Ok(()),
                    None => Err((header + elements.len() / element_len * element_len, ListProblem::ElementOverrun)),
                };
            }
            let decode = Decode::choose(data_type, element.length).0;
            let mut pos = 0;
            while pos < elements.len() {
                if element.length == 0 {
                    return Err((header + pos, ListProblem::ZeroElementLength));
                }
                let (start, end) =
                    field_span(elements, pos, &element).ok_or((header + pos, ListProblem::ElementOverrun))?;
                if let Some(raw) = elements.get(start..end) {
                    validate(decode, raw, inner).map_err(|(o, p)| (header + start + o, p))?;
                }
                pos = end;
            }
            Ok(())
        }
        Decode::SubTemplateList => {
            let list = SubTemplateList::parse(b, scope).ok_or((0, ListProblem::ShortHeader { needed: 3, available: b.len() }))?;
            validate_records(list.plan(), list.bytes(), inner).map_err(|(o, p)| (3 + o, p))
        }
        _ => {
            let mut pos = 1;
            if b.is_empty() {
                return Err((0, ListProblem::ShortHeader { needed: 1, available: 0 }));
            }
            while pos < b.len() {
                let (Some(tid), Some(len)) = (be16(b, pos), be16(b, pos + 2)) else {
                    return Err((pos, ListProblem::ElementOverrun));
                };
                if len < 4 {
                    return Err((pos, ListProblem::BadEntryLength { length: len }));
                }
                let end = pos + usize::from(len);
                let records = b.get(pos + 4..end).ok_or((pos, ListProblem::ElementOverrun))?;
                let plan = scope.templates.get(&tid).map(|p| &**p);
                validate_records(plan, records, inner).map_err(|(o, p)| (pos + 4 + o, p))?;
                pos = end;
            }
            Ok(())
        }
    }
}

fn validate_records(plan: Option<&Plan>, data: &[u8], scope: Scope<'_>) -> Result<(), (usize, ListProblem)> {
    // An unknown template makes the records undecodable, not malformed.
    let Some(plan) = plan else { return Ok(()) };
    let mut pos = 0;
    while data.len() - pos >= plan.min_len() {
        match record_len(plan, data, pos, scope) {
            Ok(len) => pos += len,
            Err(RecordFault::Overrun { offset, .. }) => return Err((offset, ListProblem::ElementOverrun)),
            Err(RecordFault::List { offset, problem }) => return Err((offset, problem)),
        }
    }
    Ok(())
}
