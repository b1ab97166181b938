//! The text form of values, used where a column's type cannot follow the
//! value's: items of generic basicList columns and the `value` of
//! sub-template record structs.

use std::fmt::{self, Write};

use super::schema::write_field_name;
use crate::record::{DateTime, Value};

const HEX: &[u8; 16] = b"0123456789abcdef";

/// Writes `bytes` as lower-case hex without separators.
pub(crate) fn write_hex(bytes: &[u8], out: &mut impl Write) -> fmt::Result {
    for b in bytes {
        out.write_char(char::from(*HEX.get(usize::from(b >> 4)).unwrap_or(&b'0')))?;
        out.write_char(char::from(*HEX.get(usize::from(b & 0x0f)).unwrap_or(&b'0')))?;
    }
    Ok(())
}

/// Writes a MAC-48 address as lower-case colon-separated hex,
/// `aa:bb:cc:dd:ee:ff`.
pub(crate) fn write_mac(mac: &[u8; 6], out: &mut impl Write) -> fmt::Result {
    let mut buf = [b':'; 17];
    for (i, b) in mac.iter().enumerate() {
        if let Some(pair) = buf.get_mut(i * 3..i * 3 + 2) {
            pair.copy_from_slice(&[
                *HEX.get(usize::from(b >> 4)).unwrap_or(&b'0'),
                *HEX.get(usize::from(b & 0x0f)).unwrap_or(&b'0'),
            ]);
        }
    }
    out.write_str(std::str::from_utf8(&buf).unwrap_or_default())
}

/// Writes an IPv4 address in dotted decimal without going through
/// `fmt::Display` (the hot path of address columns).
pub(crate) fn write_ipv4(a: [u8; 4], out: &mut impl Write) -> fmt::Result {
    let mut buf = [0u8; 16];
    let n = super::utf8::ipv4_text(a, &mut buf);
    out.write_str(buf.get(..n).and_then(|b| std::str::from_utf8(b).ok()).unwrap_or_default())
}

/// Writes an IPv6 address in the RFC 5952 text form.
pub(crate) fn write_ipv6(a: &[u8; 16], out: &mut impl Write) -> fmt::Result {
    let mut buf = [0u8; 48];
    let n = super::utf8::ipv6_text(a, &mut buf);
    out.write_str(buf.get(..n).and_then(|b| std::str::from_utf8(b).ok()).unwrap_or_default())
}

/// Days since 1970-01-01 → (year, month, day) in the proleptic Gregorian
/// calendar (the "civil from days" algorithm: 400-year eras of 146,097 days).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d)
}

/// Writes a timestamp as RFC 3339 UTC, with as many fraction digits as
/// needed (none, 3, 6 or 9): `2026-11-30T01:00:00.5Z` is written
/// `2026-11-30T01:00:00.500Z`.
pub(crate) fn write_datetime(t: DateTime, out: &mut impl Write) -> fmt::Result {
    let days = t.secs.div_euclid(86_400);
    let rem = t.secs.rem_euclid(86_400);
    let (y, m, d) = civil_from_days(days);
    write!(out, "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}", rem / 3600, rem / 60 % 60, rem % 60)?;
    match t.nanos {
        0 => {}
        n if n % 1_000_000 == 0 => write!(out, ".{:03}", n / 1_000_000)?,
        n if n % 1000 == 0 => write!(out, ".{:06}", n / 1000)?,
        n => write!(out, ".{n:09}")?,
    }
    out.write_char('Z')
}

/// Writes the text form of a value (see the [module docs](super)):
/// integers in decimal, floats as the shortest decimal that reads back the
/// same, booleans `true`/`false`, MAC and IP addresses as in their columns,
/// timestamps in RFC 3339 UTC, octets/unsigned256/undefined values in
/// lower-case hex, a basicList as `[a,b]`, sub-template lists as
/// `[{name=value,...},...]`.
pub fn write_value_text(v: &Value<'_>, out: &mut impl Write) -> fmt::Result {
    match v {
        Value::Unsigned(x) => write!(out, "{x}"),
        Value::Signed(x) => write!(out, "{x}"),
        Value::Float(x) => write!(out, "{x}"),
        Value::Bool(x) => write!(out, "{x}"),
        Value::Mac(m) => write_mac(m, out),
        Value::String(s) => out.write_str(s),
        Value::Octets(b) | Value::Unsigned256(b) | Value::Invalid(b) => write_hex(b, out),
        Value::DateTime(t) => write_datetime(*t, out),
        Value::Ipv4(a) => write_ipv4(a.octets(), out),
        Value::Ipv6(a) => write_ipv6(&a.octets(), out),
        Value::BasicList(list) => {
            out.write_char('[')?;
            for (i, item) in list.iter().enumerate() {
                if i > 0 {
                    out.write_char(',')?;
                }
                write_value_text(&item, out)?;
            }
            out.write_char(']')
        }
        Value::SubTemplateList(list) => {
            out.write_char('[')?;
            write_records(list.records(), &mut true, out)?;
            out.write_char(']')
        }
        Value::SubTemplateMultiList(list) => {
            out.write_char('[')?;
            let mut first = true;
            for entry in list.entries() {
                write_records(entry.records(), &mut first, out)?;
            }
            out.write_char(']')
        }
    }
}

fn write_records<'a>(records: impl Iterator<Item = crate::Record<'a>>, first: &mut bool, out: &mut impl Write) -> fmt::Result {
    let mut name = String::new();
    for record in records {
        if !std::mem::take(first) {
            out.write_char(',')?;
        }
        out.write_char('{')?;
        for (i, field) in record.fields().enumerate() {
            if i > 0 {
                out.write_char(',')?;
            }
            name.clear();
            write_field_name(field.spec, false, &mut name);
            out.write_str(&name)?;
            out.write_char('=')?;
            write_value_text(&field.value, out)?;
        }
        out.write_char('}')?;
    }
    Ok(())
}

/// The fast IPv4 writer's text, for tests that compare it with std.
#[cfg(test)]
pub(crate) fn ipv4_text(a: std::net::Ipv4Addr) -> String {
    let mut s = String::new();
    let _ = write_ipv4(a.octets(), &mut s);
    s
}
