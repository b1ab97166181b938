//! Compiled decode plans: each template is compiled once into an immutable,
//! shareable plan that the record decoder walks without per-field lookups.

use std::sync::Arc;

use crate::data_type::DataType;
use crate::error::TemplateProblem;
use crate::field::{FieldSpecifier, TemplateId, VARIABLE_LENGTH};
use crate::ie::{self, InformationElement};
use crate::template::Template;

/// How one field's octets turn into a value. Chosen at compile time from the
/// element's abstract type and the Field Length on the wire.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Decode {
    /// Big-endian unsigned integer in 1..=8 octets, widened to u64 (RFC 7011 §6.2).
    Unsigned,
    /// Big-endian two's complement in 1..=8 octets, sign-extended (RFC 7011 §6.2).
    Signed,
    /// IEEE 754 binary32 (RFC 7011 §6.1.3).
    Float32,
    /// IEEE 754 binary64 (RFC 7011 §6.1.4).
    Float64,
    /// float64 sent as float32 (RFC 7011 §6.2).
    Float64From32,
    /// 1 = true, 2 = false (RFC 7011 §6.1.5).
    Boolean,
    /// MAC-48 (RFC 7011 §6.1.2).
    MacAddress,
    /// UTF-8 (RFC 7011 §6.1.6).
    String,
    /// Raw octets: octetArray, unknown or enterprise elements, and fields whose
    /// length does not fit their type.
    Octets,
    /// dateTimeSeconds (RFC 7011 §6.1.7).
    DateTimeSeconds,
    /// dateTimeMilliseconds (RFC 7011 §6.1.8).
    DateTimeMilliseconds,
    /// dateTimeMicroseconds (RFC 7011 §6.1.9).
    DateTimeMicroseconds,
    /// dateTimeNanoseconds (RFC 7011 §6.1.10).
    DateTimeNanoseconds,
    /// ipv4Address.
    Ipv4Address,
    /// ipv6Address.
    Ipv6Address,
    /// unsigned256 (IANA type 23), kept as octets.
    Unsigned256,
    /// basicList (RFC 6313 §4.5.1).
    BasicList,
    /// subTemplateList (RFC 6313 §4.5.2).
    SubTemplateList,
    /// subTemplateMultiList (RFC 6313 §4.5.3).
    SubTemplateMultiList,
}

impl Decode {
    /// True for the RFC 6313 list types, whose content is checked and
    /// decoded recursively.
    pub const fn is_list(self) -> bool {
        matches!(self, Self::BasicList | Self::SubTemplateList | Self::SubTemplateMultiList)
    }

    /// Chooses the decoder for `data_type` sent in `length` octets; falls back
    /// to [`Decode::Octets`] when the length is not allowed for the type.
    pub const fn choose(data_type: DataType, length: u16) -> (Self, bool) {
        if !data_type.accepts_length(length) {
            return (Self::Octets, true);
        }
        let d = match data_type {
            DataType::OctetArray => Self::Octets,
            DataType::Unsigned8 | DataType::Unsigned16 | DataType::Unsigned32 | DataType::Unsigned64 => Self::Unsigned,
            DataType::Signed8 | DataType::Signed16 | DataType::Signed32 | DataType::Signed64 => Self::Signed,
            DataType::Float32 => Self::Float32,
            DataType::Float64 => {
                if length == 4 {
                    Self::Float64From32
                } else {
                    Self::Float64
                }
            }
            DataType::Boolean => Self::Boolean,
            DataType::MacAddress => Self::MacAddress,
            DataType::String => Self::String,
            DataType::DateTimeSeconds => Self::DateTimeSeconds,
            DataType::DateTimeMilliseconds => Self::DateTimeMilliseconds,
            DataType::DateTimeMicroseconds => Self::DateTimeMicroseconds,
            DataType::DateTimeNanoseconds => Self::DateTimeNanoseconds,
            DataType::Ipv4Address => Self::Ipv4Address,
            DataType::Ipv6Address => Self::Ipv6Address,
            DataType::BasicList => Self::BasicList,
            DataType::SubTemplateList => Self::SubTemplateList,
            DataType::SubTemplateMultiList => Self::SubTemplateMultiList,
            DataType::Unsigned256 => Self::Unsigned256,
        };
        (d, false)
    }
}

/// One field of a compiled plan.
#[derive(Debug, Clone)]
pub struct PlanField {
    /// The Field Specifier as the template sent it.
    pub spec: FieldSpecifier,
    /// The IANA registry entry (IANA elements with a known id only).
    pub ie: Option<&'static InformationElement>,
    /// The abstract type used for decoding: the registry's for IANA
    /// elements, octetArray for enterprise and unknown ones.
    pub data_type: DataType,
    /// How to decode the octets.
    pub decode: Decode,
    /// True when the Field Length was not valid for the type (decoded as octets).
    pub length_mismatch: bool,
    /// Offset in the record when every earlier field is fixed-length.
    pub offset: Option<usize>,
    /// True for an Options Template scope field.
    pub is_scope: bool,
    /// 1 for the first occurrence of this element in the template, 2 for the
    /// second, ... (RFC 7011 §8: repeated elements are legal).
    pub occurrence: u16,
}

impl PlanField {
    /// The element's IANA name, if registered.
    pub fn name(&self) -> Option<&'static str> {
        self.ie.map(|e| e.name).filter(|n| !n.is_empty())
    }

    /// True when the field is variable-length on the wire (RFC 7011 §7).
    pub const fn is_variable(&self) -> bool {
        self.spec.length == VARIABLE_LENGTH
    }
}

/// A compiled template: per field the element, wire length, decoder and
/// fixed offset; plus the record length when every field is fixed.
#[derive(Debug, Clone)]
pub struct Plan {
    template: Template,
    fields: Vec<PlanField>,
    fixed_len: Option<usize>,
    min_len: usize,
    has_lists: bool,
    /// The record walk: runs of fixed-length non-list fields merged.
    steps: Vec<Step>,
}

/// One step of the walk over a record (see [`Plan::steps`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Step {
    /// `count` fixed-length fields that are not lists, from index `first`
    /// on: `len` octets in all.
    Fixed { len: usize, first: usize, count: usize },
    /// A variable-length field or a list (whose content is checked): the
    /// field at this index.
    Field(usize),
}

/// Upper bound on fields in one template: more than fit in a maximal
/// message can never be sent (65535 octets / 4 per specifier).
pub const MAX_FIELDS: usize = 16_380;

impl Plan {
    /// Compiles a template, rejecting impossible ones (RFC 7011 §3.4.1,
    /// §3.4.2.2).
    pub fn compile(template: Template) -> Result<Arc<Self>, TemplateProblem> {
        if template.id.0 < TemplateId::MIN_DATA {
            return Err(TemplateProblem::ReservedId);
        }
        if usize::from(template.scope_field_count) > template.fields.len() {
            return Err(TemplateProblem::ScopeExceedsFields);
        }
        if template.fields.len() > MAX_FIELDS {
            return Err(TemplateProblem::TooManyFields);
        }
        let mut fields = Vec::with_capacity(template.fields.len());
        let mut offset = Some(0usize);
        let mut min_len = 0usize;
        let mut has_lists = false;
        for (index, spec) in template.fields.iter().enumerate() {
            let ie = match spec.element.enterprise {
                None => ie::lookup(spec.element.id),
                Some(_) => None,
            };
            let data_type = ie.and_then(|e| e.data_type).unwrap_or(DataType::OctetArray);
            let (decode, length_mismatch) = Decode::choose(data_type, spec.length);
            has_lists |= decode.is_list();
            let occurrence = template
                .fields
                .iter()
                .take(index)
                .filter(|f| f.element == spec.element)
                .count();
            fields.push(PlanField {
                spec: *spec,
                ie,
                data_type,
                decode,
                length_mismatch,
                offset,
                is_scope: index < usize::from(template.scope_field_count),
                occurrence: u16::try_from(occurrence + 1).unwrap_or(u16::MAX),
            });
            if spec.is_variable() {
                // Shortest variable field: a 1-octet zero length (RFC 7011 §7).
                min_len += 1;
                offset = None;
            } else {
                min_len += usize::from(spec.length);
                offset = offset.map(|o| o + usize::from(spec.length));
            }
        }
        if min_len == 0 {
            return Err(TemplateProblem::EmptyRecord);
        }
        let mut steps = Vec::new();
        for (i, f) in fields.iter().enumerate() {
            match steps.last_mut() {
                _ if f.is_variable() || f.decode.is_list() => steps.push(Step::Field(i)),
                Some(Step::Fixed { len, count, .. }) => {
                    *len += usize::from(f.spec.length);
                    *count += 1;
                }
                _ => steps.push(Step::Fixed { len: usize::from(f.spec.length), first: i, count: 1 }),
            }
        }
        Ok(Arc::new(Self { template, fields, fixed_len: offset, min_len, has_lists, steps }))
    }

    /// The template this plan was compiled from.
    pub const fn template(&self) -> &Template {
        &self.template
    }

    /// The Template ID.
    pub const fn id(&self) -> TemplateId {
        self.template.id
    }

    /// The compiled fields, in record order.
    pub fn fields(&self) -> &[PlanField] {
        &self.fields
    }

    /// Record length when every field is fixed-length.
    pub const fn fixed_len(&self) -> Option<usize> {
        self.fixed_len
    }

    /// The shortest possible record (variable fields counted as 1 octet).
    pub const fn min_len(&self) -> usize {
        self.min_len
    }

    /// The record walk: runs of fixed-length fields as one step each.
    pub(crate) fn steps(&self) -> &[Step] {
        &self.steps
    }

    /// True when any field is an RFC 6313 list.
    pub const fn has_lists(&self) -> bool {
        self.has_lists
    }

    /// True for an Options Template.
    pub const fn is_options(&self) -> bool {
        self.template.is_options()
    }

    /// Index of the first field carrying IANA element `id`.
    pub fn position(&self, id: u16) -> Option<usize> {
        self.fields.iter().position(|f| f.spec.element.is_iana(id))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn compiles_offsets_and_lengths() {
        // RFC 7011 Appendix A.2.1 template: five 4-octet fields.
        let t = Template {
            id: TemplateId(256),
            scope_field_count: 0,
            fields: [8, 12, 15, 2, 1].map(|id| FieldSpecifier::iana(id, 4)).to_vec(),
        };
        let plan = Plan::compile(t).unwrap();
        assert_eq!(plan.fixed_len(), Some(20));
        assert_eq!(plan.fields()[3].offset, Some(12));
        // packetDeltaCount is unsigned64 (IANA) sent reduced to 4 octets (§6.2).
        assert_eq!(plan.fields()[3].decode, Decode::Unsigned);
        assert_eq!(plan.fields()[0].decode, Decode::Ipv4Address);
    }

    #[test]
    fn variable_fields_end_fixed_offsets() {
        let t = Template {
            id: TemplateId(300),
            scope_field_count: 0,
            fields: vec![FieldSpecifier::iana(82, VARIABLE_LENGTH), FieldSpecifier::iana(10, 4)],
        };
        let plan = Plan::compile(t).unwrap();
        assert_eq!(plan.fixed_len(), None);
        assert_eq!(plan.min_len(), 5);
        assert_eq!(plan.fields()[1].offset, None);
    }

    #[test]
    fn rejects_impossible_templates() {
        let t = |id, scope, fields: Vec<FieldSpecifier>| Template { id: TemplateId(id), scope_field_count: scope, fields };
        assert_eq!(Plan::compile(t(255, 0, vec![FieldSpecifier::iana(1, 8)])).err(), Some(TemplateProblem::ReservedId));
        assert_eq!(Plan::compile(t(256, 2, vec![FieldSpecifier::iana(1, 8)])).err(), Some(TemplateProblem::ScopeExceedsFields));
        assert_eq!(Plan::compile(t(256, 0, vec![FieldSpecifier::iana(1, 0)])).err(), Some(TemplateProblem::EmptyRecord));
    }

    #[test]
    fn wrong_length_decodes_as_octets() {
        // RFC 7011 §6.2: reduced size "MUST NOT" be used for addresses.
        let t = Template { id: TemplateId(256), scope_field_count: 0, fields: vec![FieldSpecifier::iana(8, 3)] };
        let plan = Plan::compile(t).unwrap();
        assert_eq!(plan.fields()[0].decode, Decode::Octets);
        assert!(plan.fields()[0].length_mismatch);
    }

    #[test]
    fn counts_repeated_elements() {
        // RFC 7011 §8: the same element may appear twice (e.g. outer and inner address).
        let t = Template {
            id: TemplateId(256),
            scope_field_count: 0,
            fields: vec![FieldSpecifier::iana(8, 4), FieldSpecifier::iana(8, 4)],
        };
        let plan = Plan::compile(t).unwrap();
        assert_eq!(plan.fields()[1].occurrence, 2);
    }
}
