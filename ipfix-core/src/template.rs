//! Template and Options Template Records (RFC 7011 §3.4.1, §3.4.2) and
//! Template Withdrawal (RFC 7011 §8.1).

use crate::error::Malformed;
use crate::field::{FieldSpecifier, TemplateId};

/// A Template or Options Template definition (RFC 7011 §3.4.1, §3.4.2.2).
#[derive(Debug, Clone, PartialEq, Eq, Hash, serde::Serialize)]
#[serde(rename_all = "camelCase")]
pub struct Template {
    /// Template ID, 256..=65535.
    pub id: TemplateId,
    /// Number of leading scope fields; 0 for a (non-options) Template.
    pub scope_field_count: u16,
    /// Field Specifiers in record order.
    pub fields: Vec<FieldSpecifier>,
}

impl Template {
    /// True for an Options Template (it has scope fields).
    pub const fn is_options(&self) -> bool {
        self.scope_field_count > 0
    }

    /// The scope fields (empty for a Template).
    pub fn scope_fields(&self) -> &[FieldSpecifier] {
        self.fields.get(..usize::from(self.scope_field_count)).unwrap_or_default()
    }
}

/// One record of a Template Set or Options Template Set.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TemplateRecord {
    /// A definition.
    Define(Template),
    /// Withdrawal of one template (Field Count 0, RFC 7011 §8.1).
    Withdraw(TemplateId),
    /// Withdrawal of all templates (ID 2 in a Template Set) or all options
    /// templates (ID 3 in an Options Template Set) of the domain (§8.1).
    WithdrawAll,
}

/// A Template Record with where it was found.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LocatedTemplateRecord {
    /// Offset of the record from the start of the message.
    pub offset: usize,
    /// The record.
    pub record: TemplateRecord,
}

fn be16(b: &[u8], at: usize) -> Option<u16> {
    let s = b.get(at..at.checked_add(2)?)?;
    Some(u16::from_be_bytes([*s.first()?, *s.get(1)?]))
}

fn be32(b: &[u8], at: usize) -> Option<u32> {
    let s = b.get(at..at.checked_add(4)?)?;
    let a: [u8; 4] = s.try_into().ok()?;
    Some(u32::from_be_bytes(a))
}

/// Decodes the records of a Template Set (`options == false`, RFC 7011
/// §3.4.1) or Options Template Set (`options == true`, §3.4.2.2). `body` is
/// the Set after its header; `offset` its position in the message.
///
/// Trailing octets too short for a record, or all zero, are padding
/// (§3.3.1: padding "MUST be shorter than any allowable record").
pub fn parse_template_set(body: &[u8], offset: usize, options: bool) -> Result<Vec<LocatedTemplateRecord>, Malformed> {
    let mut out = Vec::new();
    let mut at = 0usize;
    loop {
        let rest = body.get(at..).unwrap_or_default();
        // Shortest record: a 4-octet withdrawal. Zero octets left over in an
        // options set (6-octet header) are padding too.
        if rest.len() < 4 || rest.iter().all(|b| *b == 0) {
            break;
        }
        let rec_offset = offset + at;
        let id = be16(body, at).unwrap_or(0);
        let field_count = be16(body, at + 2).unwrap_or(0);
        if field_count == 0 {
            // RFC 7011 §8.1: withdrawal records carry no Scope Field Count.
            let all_id = if options { 3 } else { 2 };
            let record = if id == all_id { TemplateRecord::WithdrawAll } else { TemplateRecord::Withdraw(TemplateId(id)) };
            out.push(LocatedTemplateRecord { offset: rec_offset, record });
            at += 4;
            continue;
        }
        let mut pos = at + 4;
        let scope_field_count = if options {
            let Some(scope) = be16(body, pos) else {
                return Err(Malformed::TemplateOverrun { offset: rec_offset, template_id: id });
            };
            pos += 2;
            scope
        } else {
            0
        };
        let mut fields = Vec::with_capacity(usize::from(field_count).min(rest.len() / 4));
        for _ in 0..field_count {
            let (Some(raw_id), Some(length)) = (be16(body, pos), be16(body, pos + 2)) else {
                return Err(Malformed::TemplateOverrun { offset: rec_offset, template_id: id });
            };
            pos += 4;
            // RFC 7011 §3.2: the Enterprise bit is the top bit of the id.
            let field = if raw_id & 0x8000 != 0 {
                let Some(pen) = be32(body, pos) else {
                    return Err(Malformed::TemplateOverrun { offset: rec_offset, template_id: id });
                };
                pos += 4;
                FieldSpecifier::enterprise(pen, raw_id & 0x7fff, length)
            } else {
                FieldSpecifier::iana(raw_id, length)
            };
            fields.push(field);
        }
        out.push(LocatedTemplateRecord {
            offset: rec_offset,
            record: TemplateRecord::Define(Template { id: TemplateId(id), scope_field_count, fields }),
        });
        at = pos;
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn hex(s: &str) -> Vec<u8> {
        s.split_whitespace().map(|b| u8::from_str_radix(b, 16).unwrap()).collect()
    }

    #[test]
    fn rfc7011_a21_template_set() {
        // RFC 7011 Appendix A.2.1 (body after the Set Header 00 02 00 1c).
        let body = hex("01 00 00 05 00 08 00 04 00 0c 00 04 00 0f 00 04 00 02 00 04 00 01 00 04");
        let recs = parse_template_set(&body, 20, false).unwrap();
        let TemplateRecord::Define(t) = &recs[0].record else { panic!() };
        assert_eq!(t.id, TemplateId(256));
        let ids: Vec<u16> = t.fields.iter().map(|f| f.element.id).collect();
        assert_eq!(ids, [8, 12, 15, 2, 1]);
        assert!(t.fields.iter().all(|f| f.length == 4));
    }

    #[test]
    fn rfc7011_a41_options_template_with_padding() {
        // RFC 7011 Appendix A.4.1: 2 octets of padding after the record.
        let body = hex("01 02 00 03 00 01 00 8d 00 04 00 29 00 02 00 2a 00 02 00 00");
        let recs = parse_template_set(&body, 20, true).unwrap();
        assert_eq!(recs.len(), 1);
        let TemplateRecord::Define(t) = &recs[0].record else { panic!() };
        assert_eq!(t.scope_field_count, 1);
        assert_eq!(t.scope_fields()[0], FieldSpecifier::iana(141, 4));
    }

    #[test]
    fn rfc7011_a43_enterprise_scope() {
        // RFC 7011 Appendix A.4.3 with PEN 32473 (RFC 5612 documentation PEN).
        let body = hex("01 04 00 03 00 01 80 7b 00 04 00 00 7e d9 00 29 00 02 00 2a 00 02 00 00");
        let recs = parse_template_set(&body, 20, true).unwrap();
        let TemplateRecord::Define(t) = &recs[0].record else { panic!() };
        assert_eq!(t.fields[0], FieldSpecifier::enterprise(32473, 123, 4));
    }

    #[test]
    fn withdrawals() {
        // RFC 7011 §8.1 Figures T, U, V.
        let recs = parse_template_set(&hex("01 00 00 00 01 01 00 00"), 20, false).unwrap();
        assert_eq!(recs[0].record, TemplateRecord::Withdraw(TemplateId(256)));
        assert_eq!(recs[1].record, TemplateRecord::Withdraw(TemplateId(257)));
        let recs = parse_template_set(&hex("00 02 00 00"), 20, false).unwrap();
        assert_eq!(recs[0].record, TemplateRecord::WithdrawAll);
        let recs = parse_template_set(&hex("00 03 00 00"), 20, true).unwrap();
        assert_eq!(recs[0].record, TemplateRecord::WithdrawAll);
    }

    #[test]
    fn overrun_is_malformed() {
        let body = hex("01 00 00 05 00 08 00 04");
        assert!(matches!(parse_template_set(&body, 20, false), Err(Malformed::TemplateOverrun { template_id: 256, .. })));
    }
}
