//! Structured data: basicList, subTemplateList and subTemplateMultiList
//! (RFC 6313 §4.5).

use crate::data_type::DataType;
use crate::error::ListProblem;
use crate::field::{FieldSpecifier, VARIABLE_LENGTH};
use crate::ie;
use crate::plan::{Decode, Plan};
use crate::record::{decode_value, field_span, read_var_len, record_len, Record, RecordFault, Scope, Value};

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
#[derive(Debug, Clone, Copy)]
pub struct BasicList<'a> {
    semantic: u8,
    element: FieldSpecifier,
    data_type: DataType,
    decode: Decode,
    elements: &'a [u8],
    scope: Scope<'a>,
}

impl PartialEq for BasicList<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.semantic == other.semantic && self.element == other.element && self.elements == other.elements
    }
}

impl<'a> BasicList<'a> {
    /// Decodes a basicList header: Semantic (1), E bit + Field ID (2),
    /// Element Length (2), Enterprise Number (4) when E = 1 (RFC 6313 §4.5.1).
    pub(crate) fn parse(b: &'a [u8], scope: Scope<'a>) -> Option<Self> {
        let semantic = *b.first()?;
        let raw_id = be16(b, 1)?;
        let length = be16(b, 3)?;
        let (element, body) = if raw_id & 0x8000 != 0 {
            let pen = u32::from_be_bytes(b.get(5..9)?.try_into().ok()?);
            (FieldSpecifier::enterprise(pen, raw_id & 0x7fff, length), b.get(9..)?)
        } else {
            (FieldSpecifier::iana(raw_id, length), b.get(5..)?)
        };
        let data_type = match element.element.enterprise {
            None => ie::lookup(element.element.id).and_then(|e| e.data_type).unwrap_or(DataType::OctetArray),
            Some(_) => DataType::OctetArray,
        };
        let (decode, _) = Decode::choose(data_type, length);
        Some(Self { semantic, element, data_type, decode, elements: body, scope })
    }

    /// The list semantic (RFC 6313 §4.4).
    pub const fn semantic(&self) -> u8 {
        self.semantic
    }

    /// The Field Specifier of the elements.
    pub const fn element(&self) -> FieldSpecifier {
        self.element
    }

    /// The elements' abstract type (octetArray when not registered).
    pub const fn data_type(&self) -> DataType {
        self.data_type
    }

    /// Iterates the elements. "There is no element count": the list runs to
    /// the end of the field (RFC 6313 §4.5.1).
    pub fn iter(&self) -> BasicListIter<'a> {
        BasicListIter { list: *self, pos: 0 }
    }
}

/// Iterator over the elements of a [`BasicList`].
#[derive(Debug, Clone)]
pub struct BasicListIter<'a> {
    list: BasicList<'a>,
    pos: usize,
}

impl<'a> Iterator for BasicListIter<'a> {
    type Item = Value<'a>;

    fn next(&mut self) -> Option<Value<'a>> {
        if self.pos >= self.list.elements.len() {
            return None;
        }
        let (start, end) = field_span(self.list.elements, self.pos, &self.list.element)?;
        if end == self.pos {
            // A zero-length fixed element would never advance.
            return None;
        }
        self.pos = end;
        let raw = self.list.elements.get(start..end)?;
        Some(decode_value(self.list.decode, raw, self.list.scope.deeper()?))
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
    semantic: u8,
    template_id: u16,
    plan: Option<&'a Plan>,
    data: &'a [u8],
    scope: Scope<'a>,
}

impl PartialEq for SubTemplateList<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.semantic == other.semantic && self.template_id == other.template_id && self.data == other.data
    }
}

impl<'a> SubTemplateList<'a> {
    /// Decodes Semantic (1) and Template ID (2) (RFC 6313 §4.5.2).
    pub(crate) fn parse(b: &'a [u8], scope: Scope<'a>) -> Option<Self> {
        let semantic = *b.first()?;
        let template_id = be16(b, 1)?;
        let data = b.get(3..)?;
        let plan = scope.templates.get(&template_id).map(|p| &**p);
        Some(Self { semantic, template_id, plan, data, scope })
    }

    /// The list semantic.
    pub const fn semantic(&self) -> u8 {
        self.semantic
    }

    /// The Template ID of the records.
    pub const fn template_id(&self) -> u16 {
        self.template_id
    }

    /// The plan of the referenced template, if it is known in the domain
    /// (RFC 6313 §5.2: resolved in the same session and domain).
    pub const fn plan(&self) -> Option<&'a Plan> {
        self.plan
    }

    /// The records' octets.
    pub const fn bytes(&self) -> &'a [u8] {
        self.data
    }

    /// Iterates the records; empty when the template is unknown.
    pub fn records(&self) -> Records<'a> {
        Records { plan: self.plan, data: self.data, pos: 0, scope: self.scope.deeper() }
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
        let len = record_len(plan, self.data, self.pos, scope).ok()?;
        let bytes = self.data.get(self.pos..self.pos + len)?;
        self.pos += len;
        Some(Record::new(plan, bytes, scope))
    }
}

/// A subTemplateMultiList (RFC 6313 §4.5.3): a sequence of entries, each
/// with its own template and records.
#[derive(Debug, Clone, Copy)]
pub struct SubTemplateMultiList<'a> {
    semantic: u8,
    data: &'a [u8],
    scope: Scope<'a>,
}

impl PartialEq for SubTemplateMultiList<'_> {
    fn eq(&self, other: &Self) -> bool {
        self.semantic == other.semantic && self.data == other.data
    }
}

impl<'a> SubTemplateMultiList<'a> {
    pub(crate) fn parse(b: &'a [u8], scope: Scope<'a>) -> Option<Self> {
        Some(Self { semantic: *b.first()?, data: b.get(1..)?, scope })
    }

    /// The list semantic.
    pub const fn semantic(&self) -> u8 {
        self.semantic
    }

    /// Iterates the entries.
    pub fn entries(&self) -> Entries<'a> {
        Entries { list: *self, pos: 0 }
    }
}

/// One entry of a subTemplateMultiList: Template ID, Data Records Length
/// (which "includes" the 4-octet entry header), records.
#[derive(Debug, Clone, Copy)]
pub struct MultiListEntry<'a> {
    template_id: u16,
    inner: SubTemplateList<'a>,
}

impl<'a> MultiListEntry<'a> {
    /// The Template ID of this entry's records.
    pub const fn template_id(&self) -> u16 {
        self.template_id
    }

    /// The plan of the template, if known.
    pub const fn plan(&self) -> Option<&'a Plan> {
        self.inner.plan
    }

    /// Iterates the records of this entry.
    pub fn records(&self) -> Records<'a> {
        self.inner.records()
    }
}

/// Iterator over [`MultiListEntry`] values.
#[derive(Debug, Clone)]
pub struct Entries<'a> {
    list: SubTemplateMultiList<'a>,
    pos: usize,
}

impl<'a> Iterator for Entries<'a> {
    type Item = MultiListEntry<'a>;

    fn next(&mut self) -> Option<MultiListEntry<'a>> {
        let data = self.list.data;
        let template_id = be16(data, self.pos)?;
        let len = usize::from(be16(data, self.pos + 2)?);
        if len < 4 {
            return None;
        }
        let records = data.get(self.pos + 4..self.pos + len)?;
        self.pos += len;
        let plan = self.list.scope.templates.get(&template_id).map(|p| &**p);
        let inner = SubTemplateList { semantic: self.list.semantic, template_id, plan, data: records, scope: self.list.scope };
        Some(MultiListEntry { template_id, inner })
    }
}

/// Checks the lengths inside a list-typed value (recursively, bounded by
/// `scope.max_depth`). Returns the offset (within `b`) and the problem.
pub(crate) fn validate(decode: Decode, b: &[u8], scope: Scope<'_>) -> Result<(), (usize, ListProblem)> {
    match decode {
        Decode::BasicList | Decode::SubTemplateList | Decode::SubTemplateMultiList => {}
        _ => return Ok(()),
    }
    let Some(inner) = scope.deeper() else {
        return Err((0, ListProblem::TooDeep { limit: scope.max_depth }));
    };
    match decode {
        Decode::BasicList => {
            let list = BasicList::parse(b, scope).ok_or((0, ListProblem::ShortHeader { needed: 5, available: b.len() }))?;
            if list.element.element.enterprise.is_some() && b.len() < 9 {
                return Err((0, ListProblem::ShortHeader { needed: 9, available: b.len() }));
            }
            let header = b.len() - list.elements.len();
            let mut pos = 0;
            while pos < list.elements.len() {
                if list.element.length == 0 {
                    return Err((header + pos, ListProblem::ZeroElementLength));
                }
                let (start, end) =
                    field_span(list.elements, pos, &list.element).ok_or((header + pos, ListProblem::ElementOverrun))?;
                if let Some(raw) = list.elements.get(start..end) {
                    validate(list.decode, raw, inner).map_err(|(o, p)| (header + start + o, p))?;
                }
                pos = end;
            }
            Ok(())
        }
        Decode::SubTemplateList => {
            let list = SubTemplateList::parse(b, scope).ok_or((0, ListProblem::ShortHeader { needed: 3, available: b.len() }))?;
            validate_records(list.plan, list.data, inner).map_err(|(o, p)| (3 + o, p))
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

/// Encodes a variable-length prefix (RFC 7011 §7), choosing the 3-octet
/// form when `three_octet` is set or the length needs it.
pub fn encode_var_len(out: &mut Vec<u8>, len: usize, three_octet: bool) {
    if len < 255 && !three_octet {
        out.push(len as u8);
    } else {
        out.push(255);
        out.extend_from_slice(&(len.min(usize::from(VARIABLE_LENGTH)) as u16).to_be_bytes());
    }
}

#[allow(dead_code)]
pub(crate) fn var_len_of(data: &[u8]) -> Option<(usize, usize)> {
    read_var_len(data, 0)
}
