//! Data Records (RFC 7011 §3.4.3) and their values (RFC 7011 §6.1).

use std::collections::HashMap;
use std::net::{Ipv4Addr, Ipv6Addr};
use std::sync::Arc;

use crate::data_type::DataType;
use crate::field::FieldSpecifier;
use crate::plan::{Decode, Plan, PlanField, Step};
use crate::structured::{BasicList, SubTemplateList, SubTemplateMultiList};

/// Templates known in one Observation Domain of one Transport Session, by
/// Template ID; used to resolve templates referenced from RFC 6313 lists.
pub type TemplateTable = HashMap<u16, Arc<Plan>, foldhash::fast::RandomState>;

/// Seconds between the NTP epoch (1900-01-01) and the UNIX epoch
/// (1970-01-01): 25,567 days × 86,400 s.
pub const NTP_UNIX_OFFSET: i64 = 2_208_988_800;

/// A point in time, UTC: seconds and nanoseconds since the UNIX epoch.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, serde::Serialize)]
pub struct DateTime {
    /// Whole seconds since 1970-01-01 00:00 UTC (negative before).
    pub secs: i64,
    /// Nanoseconds within the second, 0..1_000_000_000.
    pub nanos: u32,
}

impl DateTime {
    /// From whole seconds since the UNIX epoch (dateTimeSeconds, RFC 7011 §6.1.7).
    pub const fn from_unix_seconds(secs: u32) -> Self {
        Self { secs: secs as i64, nanos: 0 }
    }

    /// From milliseconds since the UNIX epoch (dateTimeMilliseconds, RFC 7011 §6.1.8).
    pub const fn from_unix_millis(ms: u64) -> Self {
        Self { secs: (ms / 1000) as i64, nanos: ((ms % 1000) * 1_000_000) as u32 }
    }

    /// From an NTP timestamp (RFC 7011 §6.1.9, §6.1.10): 32-bit seconds since
    /// 1900 and a 32-bit binary fraction. For dateTimeMicroseconds pass
    /// `micro = true`: "the lower 11 bits of the fraction field ... MUST be
    /// ignored" (§6.1.9), and the result is rounded down to a microsecond.
    ///
    /// The era is inferred as RFC 4330 §3 suggests (from memory,
    /// unconfirmed): seconds with the top bit clear are taken as era 1
    /// (after 2036-02-07), so values span 1968 to 2104.
    pub const fn from_ntp(seconds: u32, fraction: u32, micro: bool) -> Self {
        let era_secs = if seconds & 0x8000_0000 == 0 { seconds as i64 + (1i64 << 32) } else { seconds as i64 };
        let nanos = if micro {
            let frac = (fraction & !0x7ff) as u64;
            (((frac * 1_000_000) >> 32) * 1000) as u32
        } else {
            ((fraction as u64 * 1_000_000_000) >> 32) as u32
        };
        Self { secs: era_secs - NTP_UNIX_OFFSET, nanos }
    }

    /// Converts back to an NTP (seconds, fraction) pair, era dropped.
    pub const fn to_ntp(self) -> (u32, u32) {
        let secs = (self.secs + NTP_UNIX_OFFSET) as u64 as u32;
        // Round up so that decoding the fraction gives back the same nanos.
        let frac = (((self.nanos as u64) << 32).div_ceil(1_000_000_000)) as u32;
        (secs, frac)
    }

    /// Nanoseconds since the UNIX epoch, if it fits in an i64 (years 1678-2262).
    pub const fn unix_nanos(self) -> Option<i64> {
        match self.secs.checked_mul(1_000_000_000) {
            Some(n) => n.checked_add(self.nanos as i64),
            None => None,
        }
    }

    /// Milliseconds since the UNIX epoch (rounded down).
    pub const fn unix_millis(self) -> i64 {
        self.secs * 1000 + (self.nanos / 1_000_000) as i64
    }
}

/// A decoded field value. Integers are widened (RFC 7011 §6.2); strings and
/// octets borrow from the message.
#[derive(Debug, Clone, PartialEq)]
pub enum Value<'a> {
    /// unsigned8/16/32/64, any wire length 1..=8.
    Unsigned(u64),
    /// signed8/16/32/64, sign-extended from the wire length.
    Signed(i64),
    /// float32 or float64.
    Float(f64),
    /// boolean.
    Bool(bool),
    /// macAddress.
    Mac([u8; 6]),
    /// string (well-formed UTF-8).
    String(&'a str),
    /// octetArray, enterprise-specific, unknown, or length-mismatched fields.
    Octets(&'a [u8]),
    /// dateTimeSeconds/Milliseconds/Microseconds/Nanoseconds.
    DateTime(DateTime),
    /// ipv4Address.
    Ipv4(Ipv4Addr),
    /// ipv6Address.
    Ipv6(Ipv6Addr),
    /// unsigned256, big-endian octets as sent.
    Unsigned256(&'a [u8]),
    /// basicList (RFC 6313 §4.5.1).
    BasicList(BasicList<'a>),
    /// subTemplateList (RFC 6313 §4.5.2).
    SubTemplateList(SubTemplateList<'a>),
    /// subTemplateMultiList (RFC 6313 §4.5.3).
    SubTemplateMultiList(SubTemplateMultiList<'a>),
    /// A value the type does not define: a boolean other than 1 or 2
    /// (§6.1.5), ill-formed UTF-8 (§6.1.6: "SHOULD ... ignore"), or a list
    /// nested past the depth bound. The raw octets are kept.
    Invalid(&'a [u8]),
}

/// Where nested lists look up templates, and how deep they may go.
#[derive(Debug, Clone, Copy)]
pub struct Scope<'a> {
    /// Templates of the record's Observation Domain.
    pub templates: &'a TemplateTable,
    /// Current list nesting depth (0 for a top-level record).
    pub depth: u8,
    /// Maximum nesting depth.
    pub max_depth: u8,
}

/// Big-endian unsigned integer of 0..=8 octets (RFC 7011 §6.2 reduced size).
#[inline]
pub(crate) fn be_uint(b: &[u8]) -> u64 {
    match b {
        [a] => u64::from(*a),
        [a, b] => u64::from(u16::from_be_bytes([*a, *b])),
        [a, b, c, d] => u64::from(u32::from_be_bytes([*a, *b, *c, *d])),
        [a, b, c, d, e, f, g, h] => u64::from_be_bytes([*a, *b, *c, *d, *e, *f, *g, *h]),
        _ => b.iter().fold(0u64, |acc, x| (acc << 8) | u64::from(*x)),
    }
}

/// Decodes one value of the given decoder from exactly its octets.
#[inline]
pub(crate) fn decode_value<'a>(decode: Decode, b: &'a [u8], scope: Scope<'a>) -> Value<'a> {
    match decode {
        Decode::Unsigned if b.len() <= 8 => Value::Unsigned(be_uint(b)),
        Decode::Signed if !b.is_empty() && b.len() <= 8 => {
            // RFC 7011 §6.2: signedness preserved; sign-extend from the top bit sent.
            let shift = 64 - 8 * b.len() as u32;
            Value::Signed(((be_uint(b) << shift) as i64) >> shift)
        }
        Decode::Float32 | Decode::Float64From32 => match b.first_chunk::<4>() {
            Some(a) if b.len() == 4 => Value::Float(f64::from(f32::from_be_bytes(*a))),
            _ => Value::Invalid(b),
        },
        Decode::Float64 => match b.first_chunk::<8>() {
            Some(a) if b.len() == 8 => Value::Float(f64::from_be_bytes(*a)),
            _ => Value::Invalid(b),
        },
        Decode::Boolean => match b {
            [1] => Value::Bool(true),
            [2] => Value::Bool(false),
            _ => Value::Invalid(b),
        },
        Decode::MacAddress => match b.first_chunk::<6>() {
            Some(a) if b.len() == 6 => Value::Mac(*a),
            _ => Value::Invalid(b),
        },
        Decode::String => match std::str::from_utf8(b) {
            Ok(s) => Value::String(s),
            Err(_) => Value::Invalid(b),
        },
        Decode::Octets => Value::Octets(b),
        Decode::DateTimeSeconds => match b.first_chunk::<4>() {
            Some(a) if b.len() == 4 => Value::DateTime(DateTime::from_unix_seconds(u32::from_be_bytes(*a))),
            _ => Value::Invalid(b),
        },
        Decode::DateTimeMilliseconds => match b.first_chunk::<8>() {
            Some(a) if b.len() == 8 => Value::DateTime(DateTime::from_unix_millis(u64::from_be_bytes(*a))),
            _ => Value::Invalid(b),
        },
        Decode::DateTimeMicroseconds | Decode::DateTimeNanoseconds => match b.first_chunk::<8>() {
            Some(a) if b.len() == 8 => {
                let secs = u32::from_be_bytes([a[0], a[1], a[2], a[3]]);
                let frac = u32::from_be_bytes([a[4], a[5], a[6], a[7]]);
                Value::DateTime(DateTime::from_ntp(secs, frac, decode == Decode::DateTimeMicroseconds))
            }
            _ => Value::Invalid(b),
        },
        Decode::Ipv4Address => match b.first_chunk::<4>() {
            Some(a) if b.len() == 4 => Value::Ipv4(Ipv4Addr::from(*a)),
            _ => Value::Invalid(b),
        },
        Decode::Ipv6Address => match b.first_chunk::<16>() {
            Some(a) if b.len() == 16 => Value::Ipv6(Ipv6Addr::from(*a)),
            _ => Value::Invalid(b),
        },
        Decode::Unsigned256 => Value::Unsigned256(b),
        Decode::BasicList => BasicList::parse(b, scope).map_or(Value::Invalid(b), Value::BasicList),
        Decode::SubTemplateList => SubTemplateList::parse(b, scope).map_or(Value::Invalid(b), Value::SubTemplateList),
        Decode::SubTemplateMultiList => {
            SubTemplateMultiList::parse(b, scope).map_or(Value::Invalid(b), Value::SubTemplateMultiList)
        }
        Decode::Unsigned | Decode::Signed => Value::Invalid(b),
    }
}

/// Reads a variable-length prefix at `pos` (RFC 7011 §7): one octet 0..=254,
/// or 255 followed by a 2-octet length. Returns (value start, value length).
pub(crate) fn read_var_len(data: &[u8], pos: usize) -> Option<(usize, usize)> {
    let first = *data.get(pos)?;
    if first < 255 {
        Some((pos + 1, usize::from(first)))
    } else {
        let hi = *data.get(pos + 1)?;
        let lo = *data.get(pos + 2)?;
        Some((pos + 3, usize::from(u16::from_be_bytes([hi, lo]))))
    }
}

/// `x / d` when `d` divides `x` exactly; `None` otherwise and for `d = 0`.
/// Element and field lengths are mostly powers of two, which take a shift
/// and a mask rather than a division (tens of cycles, on paths that run
/// once per list).
#[inline]
pub(crate) fn whole_count(x: usize, d: usize) -> Option<usize> {
    if d.is_power_of_two() {
        (x & (d - 1) == 0).then_some(x >> d.trailing_zeros())
    } else {
        let n = x.checked_div(d)?;
        (n * d == x).then_some(n)
    }
}

/// Finds where the value of a field with specifier length `len` lies, starting
/// at `pos` in `data`. Returns (value start, value end); `None` on overrun.
#[inline]
pub(crate) fn field_span(data: &[u8], pos: usize, spec: &FieldSpecifier) -> Option<(usize, usize)> {
    let (start, len) = if spec.is_variable() { read_var_len(data, pos)? } else { (pos, usize::from(spec.length)) };
    let end = start.checked_add(len)?;
    if end > data.len() {
        return None;
    }
    Some((start, end))
}

/// One Data Record: its octets, the plan that describes them, and the
/// templates nested lists may refer to.
#[derive(Debug, Clone, Copy)]
pub struct Record<'a> {
    plan: &'a Plan,
    data: &'a [u8],
    scope: Scope<'a>,
}

/// A field of a record with its decoded value.
#[derive(Debug, Clone)]
pub struct Field<'a> {
    /// The compiled field (element, type, length).
    pub spec: &'a PlanField,
    /// The decoded value.
    pub value: Value<'a>,
}

impl<'a> Record<'a> {
    pub(crate) const fn new(plan: &'a Plan, data: &'a [u8], scope: Scope<'a>) -> Self {
        Self { plan, data, scope }
    }

    /// The plan (compiled template) of this record.
    pub const fn plan(&self) -> &'a Plan {
        self.plan
    }

    /// The record's octets as sent.
    pub const fn bytes(&self) -> &'a [u8] {
        self.data
    }

    /// Iterates the fields with their raw octets (variable-length prefixes
    /// removed), without decoding: the fastest path, for column builders
    /// that convert by [`PlanField::decode`] themselves (see [`Decode::value`]).
    pub fn raw_fields(&self) -> RawFields<'a> {
        RawFields { plan: self.plan, data: self.data, index: 0, pos: 0 }
    }

    /// The scope nested lists of this record resolve templates in.
    pub const fn scope(&self) -> Scope<'a> {
        self.scope
    }

    /// Iterates the fields with their values, in template order.
    pub fn fields(&self) -> Fields<'a> {
        Fields { plan: self.plan, data: self.data, scope: self.scope, index: 0, pos: 0 }
    }

    /// The octets of field `index` (without any variable-length prefix).
    pub fn raw(&self, index: usize) -> Option<&'a [u8]> {
        let field = self.plan.fields().get(index)?;
        if let Some(off) = field.offset {
            if !field.is_variable() {
                return self.data.get(off..off.checked_add(usize::from(field.spec.length))?);
            }
        }
        let mut pos = 0;
        for (i, f) in self.plan.fields().iter().enumerate() {
            let (start, end) = field_span(self.data, pos, &f.spec)?;
            if i == index {
                return self.data.get(start..end);
            }
            pos = end;
        }
        None
    }

    /// The value of field `index`.
    pub fn value(&self, index: usize) -> Option<Value<'a>> {
        let field = self.plan.fields().get(index)?;
        let raw = self.raw(index)?;
        Some(decode_value(field.decode, raw, self.scope))
    }

    /// The value of the first field carrying IANA element `id`.
    pub fn get(&self, id: u16) -> Option<Value<'a>> {
        self.value(self.plan.position(id)?)
    }

    /// The first field carrying IANA element `id` as an unsigned integer.
    pub fn get_u64(&self, id: u16) -> Option<u64> {
        match self.get(id)? {
            Value::Unsigned(v) => Some(v),
            _ => None,
        }
    }
}

/// Iterator over (field, raw octets) of a [`Record`].
#[derive(Debug, Clone)]
pub struct RawFields<'a> {
    plan: &'a Plan,
    data: &'a [u8],
    index: usize,
    pos: usize,
}

impl<'a> Iterator for RawFields<'a> {
    type Item = (&'a PlanField, &'a [u8]);

    #[inline]
    fn next(&mut self) -> Option<Self::Item> {
        let spec = self.plan.fields().get(self.index)?;
        self.index += 1;
        let (start, end) = field_span(self.data, self.pos, &spec.spec)?;
        self.pos = end;
        Some((spec, self.data.get(start..end)?))
    }
}

impl Decode {
    /// Decodes one value from exactly its octets (RFC 7011 §6.1, §6.2).
    #[inline]
    pub fn value<'a>(self, raw: &'a [u8], scope: Scope<'a>) -> Value<'a> {
        decode_value(self, raw, scope)
    }

    /// A big-endian unsigned integer of 1..=8 octets, widened (RFC 7011 §6.2).
    #[inline]
    pub fn unsigned(raw: &[u8]) -> u64 {
        be_uint(raw)
    }
}

/// Iterator over the fields of a [`Record`].
#[derive(Debug, Clone)]
pub struct Fields<'a> {
    plan: &'a Plan,
    data: &'a [u8],
    scope: Scope<'a>,
    index: usize,
    pos: usize,
}

impl<'a> Iterator for Fields<'a> {
    type Item = Field<'a>;

    #[inline]
    fn next(&mut self) -> Option<Field<'a>> {
        let spec = self.plan.fields().get(self.index)?;
        self.index += 1;
        // Record bounds were checked when the message was accepted; a short
        // record here can only come from a caller-built Record, so stop.
        let (start, end) = field_span(self.data, self.pos, &spec.spec)?;
        self.pos = end;
        let raw = self.data.get(start..end)?;
        Some(Field { spec, value: decode_value(spec.decode, raw, self.scope) })
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        let left = self.plan.fields().len().saturating_sub(self.index);
        (0, Some(left))
    }
}

/// Length of the record starting at `pos` in `data`, walking only the
/// field lengths. For records already checked by [`record_len`] when their
/// message was accepted, so nested lists are not validated a second time on
/// the decode path; still bounds-checked (`None` on overrun).
#[inline]
pub(crate) fn record_span(plan: &Plan, data: &[u8], pos: usize) -> Option<usize> {
    if let Some(len) = plan.fixed_len() {
        return (data.len().saturating_sub(pos) >= len).then_some(len);
    }
    let mut at = pos;
    for step in plan.steps() {
        at = match *step {
            Step::Fixed { len, .. } => at.checked_add(len).filter(|e| *e <= data.len())?,
            Step::Field(i) => field_span(data, at, &plan.fields().get(i)?.spec)?.1,
        };
    }
    Some(at - pos)
}

/// Length of the record starting at `pos` in `data`, checking every
/// variable-length field (and nested list) against the end of the data.
/// On overrun returns (field index, offset of field, needed, available).
pub(crate) fn record_len(
    plan: &Plan,
    data: &[u8],
    pos: usize,
    scope: Scope<'_>,
) -> Result<usize, RecordFault> {
    if let Some(len) = plan.fixed_len() {
        if !plan.has_lists() {
            let available = data.len().saturating_sub(pos);
            if len > available {
                return Err(RecordFault::Overrun { field_index: 0, offset: pos, needed: len, available });
            }
            return Ok(len);
        }
    }
    // The walk by steps; a record it does not accept is walked again field
    // by field to say which field failed and where.
    let mut at = pos;
    for step in plan.steps() {
        let next = match *step {
            Step::Fixed { len, .. } => at.checked_add(len).filter(|e| *e <= data.len()),
            Step::Field(i) => plan.fields().get(i).and_then(|f| {
                let (start, end) = field_span(data, at, &f.spec)?;
                // Only lists have content to check.
                let ok = !f.decode.is_list()
                    || data.get(start..end).is_some_and(|v| crate::structured::validate(f.decode, v, scope).is_ok());
                ok.then_some(end)
            }),
        };
        match next {
            Some(end) => at = end,
            None => return record_fault(plan, data, pos, scope),
        }
    }
    Ok(at - pos)
}

/// The field-by-field walk of [`record_len`], for a record that fails.
#[cold]
fn record_fault(plan: &Plan, data: &[u8], pos: usize, scope: Scope<'_>) -> Result<usize, RecordFault> {
    let mut at = pos;
    for (i, f) in plan.fields().iter().enumerate() {
        let Some((start, end)) = field_span(data, at, &f.spec) else {
            let available = data.len().saturating_sub(at);
            let needed = if f.spec.is_variable() {
                read_var_len(data, at).map_or(3, |(s, l)| s - at + l)
            } else {
                usize::from(f.spec.length)
            };
            return Err(RecordFault::Overrun { field_index: i, offset: at, needed, available });
        };
        if plan.has_lists() {
            if let Some(value) = data.get(start..end) {
                crate::structured::validate(f.decode, value, scope)
                    .map_err(|(offset, problem)| RecordFault::List { offset: start + offset, problem })?;
            }
        }
        at = end;
    }
    Ok(at - pos)
}

/// What went wrong walking a record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum RecordFault {
    Overrun { field_index: usize, offset: usize, needed: usize, available: usize },
    List { offset: usize, problem: crate::error::ListProblem },
}

/// An owned value, for callers that keep values past the message and for
/// the encoder.
#[derive(Debug, Clone, PartialEq)]
pub enum OwnedValue {
    /// unsigned integer.
    Unsigned(u64),
    /// signed integer.
    Signed(i64),
    /// float32/float64.
    Float(f64),
    /// boolean.
    Bool(bool),
    /// macAddress.
    Mac([u8; 6]),
    /// string.
    String(String),
    /// octetArray and other raw octets.
    Octets(Vec<u8>),
    /// any dateTime type.
    DateTime(DateTime),
    /// ipv4Address.
    Ipv4(Ipv4Addr),
    /// ipv6Address.
    Ipv6(Ipv6Addr),
    /// unsigned256 octets.
    Unsigned256(Vec<u8>),
    /// basicList: semantic, element specifier, elements.
    BasicList {
        /// Semantic (RFC 6313 §4.4).
        semantic: u8,
        /// Element Field Specifier (length 65535 for variable elements).
        element: FieldSpecifier,
        /// The elements.
        values: Vec<OwnedValue>,
    },
    /// subTemplateList: semantic, template, records.
    SubTemplateList {
        /// Semantic (RFC 6313 §4.4).
        semantic: u8,
        /// Template ID of the records.
        template_id: u16,
        /// Records, each a list of field values.
        records: Vec<Vec<OwnedValue>>,
    },
    /// subTemplateMultiList: semantic and (template, records) entries.
    SubTemplateMultiList {
        /// Semantic (RFC 6313 §4.4).
        semantic: u8,
        /// Entries: template ID and its records.
        entries: Vec<(u16, Vec<Vec<OwnedValue>>)>,
    },
    /// An undefined value, raw octets kept.
    Invalid(Vec<u8>),
}

impl Value<'_> {
    /// Copies the value (and nested lists) into an [`OwnedValue`].
    pub fn to_owned_value(&self) -> OwnedValue {
        match self {
            Value::Unsigned(v) => OwnedValue::Unsigned(*v),
            Value::Signed(v) => OwnedValue::Signed(*v),
            Value::Float(v) => OwnedValue::Float(*v),
            Value::Bool(v) => OwnedValue::Bool(*v),
            Value::Mac(v) => OwnedValue::Mac(*v),
            Value::String(v) => OwnedValue::String((*v).to_owned()),
            Value::Octets(v) => OwnedValue::Octets(v.to_vec()),
            Value::DateTime(v) => OwnedValue::DateTime(*v),
            Value::Ipv4(v) => OwnedValue::Ipv4(*v),
            Value::Ipv6(v) => OwnedValue::Ipv6(*v),
            Value::Unsigned256(v) => OwnedValue::Unsigned256(v.to_vec()),
            Value::Invalid(v) => OwnedValue::Invalid(v.to_vec()),
            Value::BasicList(l) => OwnedValue::BasicList {
                semantic: l.semantic(),
                element: l.element(),
                values: l.iter().map(|v| v.to_owned_value()).collect(),
            },
            Value::SubTemplateList(l) => OwnedValue::SubTemplateList {
                semantic: l.semantic(),
                template_id: l.template_id(),
                records: l.records().map(|r| r.fields().map(|f| f.value.to_owned_value()).collect()).collect(),
            },
            Value::SubTemplateMultiList(l) => OwnedValue::SubTemplateMultiList {
                semantic: l.semantic(),
                entries: l
                    .entries()
                    .map(|e| (e.template_id(), e.records().map(|r| r.fields().map(|f| f.value.to_owned_value()).collect()).collect()))
                    .collect(),
            },
        }
    }

    /// The value as an unsigned integer, if it is one.
    pub const fn as_u64(&self) -> Option<u64> {
        match self {
            Value::Unsigned(v) => Some(*v),
            _ => None,
        }
    }
}

/// The abstract type a decoder produces, for schema derivation.
pub const fn decoded_type(field: &PlanField) -> DataType {
    if field.length_mismatch {
        DataType::OctetArray
    } else {
        field.data_type
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scope(t: &TemplateTable) -> Scope<'_> {
        Scope { templates: t, depth: 0, max_depth: 8 }
    }

    #[test]
    fn reduced_size_widen_and_sign_extend() {
        let t = TemplateTable::default();
        // RFC 7011 §6.2: unsigned64 in 3 octets.
        assert_eq!(decode_value(Decode::Unsigned, &[0x01, 0x00, 0x00], scope(&t)), Value::Unsigned(65536));
        // RFC 7011 §6.2: signed values keep their sign: 0xff in one octet is -1.
        assert_eq!(decode_value(Decode::Signed, &[0xff], scope(&t)), Value::Signed(-1));
        assert_eq!(decode_value(Decode::Signed, &[0xff, 0x7f], scope(&t)), Value::Signed(-129));
        assert_eq!(decode_value(Decode::Signed, &[0x7f, 0xff], scope(&t)), Value::Signed(32767));
    }

    #[test]
    fn boolean_one_true_two_false() {
        // RFC 7011 §6.1.5: 1 = true, 2 = false.
        let t = TemplateTable::default();
        assert_eq!(decode_value(Decode::Boolean, &[1], scope(&t)), Value::Bool(true));
        assert_eq!(decode_value(Decode::Boolean, &[2], scope(&t)), Value::Bool(false));
        assert_eq!(decode_value(Decode::Boolean, &[0], scope(&t)), Value::Invalid(&[0]));
    }

    #[test]
    fn ntp_timestamps() {
        // RFC 7011 §6.1.9/§6.1.10: NTP epoch 1900; 2,208,988,800 s to 1970.
        // NTP seconds 0xE000_0000 = 3,758,096,384 → UNIX 1,549,107,584.
        let d = DateTime::from_ntp(0xE000_0000, 0x8000_0000, false);
        assert_eq!(d, DateTime { secs: 1_549_107_584, nanos: 500_000_000 });
        // Microseconds: the low 11 fraction bits MUST be ignored (§6.1.9).
        let m = DateTime::from_ntp(0xE000_0000, 0x8000_07ff, true);
        assert_eq!(m.nanos, 500_000_000);
        let (s, f) = d.to_ntp();
        assert_eq!(DateTime::from_ntp(s, f, false), d);
    }

    #[test]
    fn variable_length_prefixes() {
        // RFC 7011 §7 / Appendix A.5: 1-octet and 3-octet length forms.
        assert_eq!(read_var_len(&[5, 0, 0, 0, 0, 0], 0), Some((1, 5)));
        assert_eq!(read_var_len(&[0xff, 0x03, 0xe8], 0), Some((3, 1000)));
        assert_eq!(read_var_len(&[0xff, 0x03], 0), None);
    }
}

#[cfg(test)]
mod size_tests {
    #[test]
    fn value_stays_small() {
        // Values are returned per field on the hot path; keep them compact.
        assert!(std::mem::size_of::<super::Value<'static>>() <= 40);
    }
}

#[cfg(test)]
mod walk_tests {
    use proptest::prelude::*;

    use super::*;
    use crate::field::{FieldSpecifier, TemplateId, VARIABLE_LENGTH};
    use crate::template::Template;

    proptest! {
        /// The walk by merged steps accepts exactly the records the
        /// field-by-field walk accepts (RFC 7011 §7 variable-length
        /// fields, RFC 6313 lists), with the same length; `record_span`
        /// agrees on the length too.
        /// `whole_count` is exact division, whatever the divisor.
        #[test]
        fn whole_count_is_exact_division(x in 0usize..1 << 20, d in 0usize..70) {
            let expected = (d > 0 && x % d == 0).then(|| x / d);
            prop_assert_eq!(whole_count(x, d), expected);
        }

        #[test]
        fn step_walk_equals_field_walk(
            // (element, length): fixed and variable fields, basicList (291)
            // and subTemplateList (292) among them.
            fields in proptest::collection::vec(
                prop_oneof![Just((8u16, 4u16)), Just((2, 8)), Just((27, 16)), Just((82, VARIABLE_LENGTH)),
                            Just((291, VARIABLE_LENGTH)), Just((292, VARIABLE_LENGTH)), Just((4, 1))],
                1..8),
            data in proptest::collection::vec(any::<u8>(), 0..120),
            pos in 0usize..8,
        ) {
            let t = Template {
                id: TemplateId(256),
                scope_field_count: 0,
                fields: fields.iter().map(|(id, len)| FieldSpecifier::iana(*id, *len)).collect(),
            };
            let plan = Plan::compile(t).unwrap();
            let templates = TemplateTable::default();
            let scope = Scope { templates: &templates, depth: 0, max_depth: 4 };
            let fast = record_len(&plan, &data, pos, scope);
            let slow = record_fault(&plan, &data, pos, scope);
            // An all-fixed record without lists is checked as a whole
            // (its fault names the record, not a field).
            let whole = plan.fixed_len().is_some() && !plan.has_lists();
            if !(whole && fast.is_err() && slow.is_err()) {
                prop_assert_eq!(fast, slow);
            }
            if let Ok(n) = fast {
                prop_assert_eq!(record_span(&plan, &data, pos), Some(n));
            }
        }
    }
}
