//! Typed column builders and the table builder that appends Data Sets.

use std::fmt::Write as _;
use std::sync::Arc;

use arrow::array::{
    ArrayBuilder, ArrayRef, ArrowPrimitiveType, BooleanBuilder, ListBuilder, RecordBatch, StringBuilder, StructBuilder,
    UInt16Builder, UInt8Builder,
};
use arrow::datatypes::{
    Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Int8Type, TimestampMicrosecondType,
    TimestampMillisecondType, TimestampNanosecondType, TimestampSecondType, UInt16Type, UInt32Type, UInt64Type,
    UInt8Type,
};
use arrow::datatypes::{DataType as ArrowType, Field, TimeUnit};

use super::derive::{absolute_ns, be_uint, forwarding_texts, group, DerivedPlan, DerivedRow, SetContext, TimeSource};
use super::enrich::{Enrichment, IdMap};
use super::fixed::FixedBuilder;
use super::prim::Prim;
use super::schema::{
    column_name, element_type_in, name_value_fields, record_struct_fields, timestamp, write_field_name, ColumnRole,
    TableKind, TableSchema,
};
use super::text::{write_mac, write_value_text};
use super::utf8::{ipv4_text, ipv6_text, TextBuilder};
use super::{ColumnarError, ColumnarStats};
use crate::plan::{Decode, Plan, Step};
use crate::record::{decode_value, field_span, whole_count, DateTime, Record, Scope, TemplateTable, Value};
use crate::session::DataSet;
use crate::structured::Records;

/// A builder for one scalar Arrow type. Also the item builder of list
/// columns, hence the [`ArrayBuilder`] impl.
#[derive(Debug)]
pub(crate) enum Scalar {
    U8(Prim<UInt8Type>),
    U16(Prim<UInt16Type>),
    U32(Prim<UInt32Type>),
    U64(Prim<UInt64Type>),
    I8(Prim<Int8Type>),
    I16(Prim<Int16Type>),
    I32(Prim<Int32Type>),
    I64(Prim<Int64Type>),
    F32(Prim<Float32Type>),
    F64(Prim<Float64Type>),
    Bool(BooleanBuilder),
    Utf8(TextBuilder),
    Binary(TextBuilder),
    /// FixedSizeBinary: unsigned256 (32 octets), and in the native layout
    /// addresses (4, 16) and MAC addresses (6).
    Fsb(FixedBuilder),
    TsS(Prim<TimestampSecondType>),
    TsMs(Prim<TimestampMillisecondType>),
    TsUs(Prim<TimestampMicrosecondType>),
    TsNs(Prim<TimestampNanosecondType>),
}

/// Sign-extends a big-endian two's complement value of 1..=8 octets
/// (RFC 7011 §6.2: signedness is preserved in reduced-size encoding).
fn be_int(b: &[u8]) -> Option<i64> {
    if b.is_empty() || b.len() > 8 {
        return None;
    }
    let shift = 64 - 8 * b.len() as u32;
    Some(((be_uint(b) << shift) as i64) >> shift)
}

/// Microseconds since the UNIX epoch, rounded down.
fn unix_micros(t: DateTime) -> Option<i64> {
    t.secs.checked_mul(1_000_000)?.checked_add(i64::from(t.nanos / 1000))
}

/// Milliseconds since the UNIX epoch, rounded down.
fn unix_millis(t: DateTime) -> Option<i64> {
    t.secs.checked_mul(1000)?.checked_add(i64::from(t.nanos / 1_000_000))
}

fn ntp(raw: &[u8], micro: bool) -> Option<DateTime> {
    let (s, f) = raw.split_first_chunk::<4>()?;
    let f: &[u8; 4] = f.try_into().ok()?;
    Some(DateTime::from_ntp(u32::from_be_bytes(*s), u32::from_be_bytes(*f), micro))
}

/// The big-endian unsigned integer of `L` octets at `s` in `r`, widened
/// (RFC 7011 §6.2); 0 when out of bounds (callers slice records by the
/// plan, so it never is).
#[inline(always)]
fn be_at<const L: usize>(r: &[u8], s: usize) -> u64 {
    let Some(b) = r.get(s..).and_then(|t| t.first_chunk::<L>()) else { return 0 };
    let mut w = [0u8; 8];
    if let Some(d) = w.get_mut(8 - L..) {
        d.copy_from_slice(b);
    }
    u64::from_be_bytes(w)
}

/// Appends one value per record, `f` reading it from the record's octets:
/// the builder's values are extended straight from the loop.
#[inline(always)]
fn fill<'r, T: ArrowPrimitiveType>(
    b: &mut Prim<T>,
    records: impl ExactSizeIterator<Item = &'r [u8]>,
    f: impl Fn(&[u8]) -> T::Native,
) {
    b.extend_values(records.map(f));
}

/// [`fill`] with an unsigned field of `len` octets at `s`, converted by
/// `conv` (given `len` fits the column's width). False for other lengths.
#[inline(always)]
fn fill_uint<'r, T: ArrowPrimitiveType>(
    b: &mut Prim<T>,
    records: impl ExactSizeIterator<Item = &'r [u8]>,
    s: usize,
    len: usize,
    conv: impl Fn(u64) -> T::Native + Copy,
) -> bool {
    match len {
        1 => fill(b, records, |r| conv(be_at::<1>(r, s))),
        2 => fill(b, records, |r| conv(be_at::<2>(r, s))),
        3 => fill(b, records, |r| conv(be_at::<3>(r, s))),
        4 => fill(b, records, |r| conv(be_at::<4>(r, s))),
        5 => fill(b, records, |r| conv(be_at::<5>(r, s))),
        6 => fill(b, records, |r| conv(be_at::<6>(r, s))),
        7 => fill(b, records, |r| conv(be_at::<7>(r, s))),
        8 => fill(b, records, |r| conv(be_at::<8>(r, s))),
        _ => return false,
    }
    true
}

/// Sign-extends the low `len` octets of `v` (RFC 7011 §6.2).
#[inline(always)]
fn sign_extend(v: u64, len: usize) -> i64 {
    let shift = 64 - 8 * (len.clamp(1, 8) as u32);
    ((v << shift) as i64) >> shift
}

/// Runs `$e` with `$b` bound to whichever typed builder a [`Scalar`] holds.
macro_rules! each_builder {
    ($scalar:expr, $b:ident => $e:expr) => {
        match $scalar {
            Scalar::U8($b) => $e,
            Scalar::U16($b) => $e,
            Scalar::U32($b) => $e,
            Scalar::U64($b) => $e,
            Scalar::I8($b) => $e,
            Scalar::I16($b) => $e,
            Scalar::I32($b) => $e,
            Scalar::I64($b) => $e,
            Scalar::F32($b) => $e,
            Scalar::F64($b) => $e,
            Scalar::Bool($b) => $e,
            Scalar::Utf8($b) => $e,
            Scalar::Binary($b) => $e,
            Scalar::Fsb($b) => $e,
            Scalar::TsS($b) => $e,
            Scalar::TsMs($b) => $e,
            Scalar::TsUs($b) => $e,
            Scalar::TsNs($b) => $e,
        }
    };
}

macro_rules! append_or_null {
    ($b:expr, $v:expr, $stats:expr, $counter:ident) => {
        match $v {
            Some(v) => $b.append_value(v),
            None => {
                $b.append_null();
                $stats.$counter += 1;
            }
        }
    };
}

impl Scalar {
    fn new(t: &ArrowType, capacity: usize) -> Option<Self> {
        Some(match t {
            ArrowType::UInt8 => Self::U8(Prim::with_capacity(capacity)),
            ArrowType::UInt16 => Self::U16(Prim::with_capacity(capacity)),
            ArrowType::UInt32 => Self::U32(Prim::with_capacity(capacity)),
            ArrowType::UInt64 => Self::U64(Prim::with_capacity(capacity)),
            ArrowType::Int8 => Self::I8(Prim::with_capacity(capacity)),
            ArrowType::Int16 => Self::I16(Prim::with_capacity(capacity)),
            ArrowType::Int32 => Self::I32(Prim::with_capacity(capacity)),
            ArrowType::Int64 => Self::I64(Prim::with_capacity(capacity)),
            ArrowType::Float32 => Self::F32(Prim::with_capacity(capacity)),
            ArrowType::Float64 => Self::F64(Prim::with_capacity(capacity)),
            ArrowType::Boolean => Self::Bool(BooleanBuilder::with_capacity(capacity)),
            ArrowType::Utf8 => Self::Utf8(TextBuilder::with_capacity(capacity, capacity.saturating_mul(16))),
            ArrowType::Binary => Self::Binary(TextBuilder::binary_with_capacity(capacity, capacity.saturating_mul(8))),
            ArrowType::FixedSizeBinary(w) => Self::Fsb(FixedBuilder::with_capacity(usize::try_from(*w).ok()?, capacity)),
            ArrowType::Timestamp(TimeUnit::Second, _) => {
                Self::TsS(Prim::with_capacity(capacity).with_data_type(timestamp(TimeUnit::Second)))
            }
            ArrowType::Timestamp(TimeUnit::Millisecond, _) => {
                Self::TsMs(Prim::with_capacity(capacity).with_data_type(timestamp(TimeUnit::Millisecond)))
            }
            ArrowType::Timestamp(TimeUnit::Microsecond, _) => {
                Self::TsUs(Prim::with_capacity(capacity).with_data_type(timestamp(TimeUnit::Microsecond)))
            }
            ArrowType::Timestamp(TimeUnit::Nanosecond, _) => {
                Self::TsNs(Prim::with_capacity(capacity).with_data_type(timestamp(TimeUnit::Nanosecond)))
            }
            _ => return None,
        })
    }

    fn builder(&self) -> &dyn ArrayBuilder {
        each_builder!(self, b => b)
    }

    fn builder_mut(&mut self) -> &mut dyn ArrayBuilder {
        each_builder!(self, b => b)
    }

    pub(crate) fn append_nulls(&mut self, n: usize) {
        each_builder!(self, b => b.append_nulls(n))
    }

    /// Appends a field's octets decoded by `decode` (the hot path: no
    /// [`Value`], no allocation). The plan guarantees the octets fit the
    /// column's type; anything else is written as null and counted.
    fn append_raw(&mut self, decode: Decode, raw: &[u8], stats: &mut ColumnarStats) {
        match self {
            Self::U8(b) => append_or_null!(b, u8::try_from(be_uint(raw)).ok(), stats, values_null_invalid),
            Self::U16(b) => append_or_null!(b, u16::try_from(be_uint(raw)).ok(), stats, values_null_invalid),
            Self::U32(b) => append_or_null!(b, u32::try_from(be_uint(raw)).ok(), stats, values_null_invalid),
            Self::U64(b) => append_or_null!(b, (raw.len() <= 8).then(|| be_uint(raw)), stats, values_null_invalid),
            Self::I8(b) => append_or_null!(b, be_int(raw).and_then(|v| i8::try_from(v).ok()), stats, values_null_invalid),
            Self::I16(b) => append_or_null!(b, be_int(raw).and_then(|v| i16::try_from(v).ok()), stats, values_null_invalid),
            Self::I32(b) => append_or_null!(b, be_int(raw).and_then(|v| i32::try_from(v).ok()), stats, values_null_invalid),
            Self::I64(b) => append_or_null!(b, be_int(raw), stats, values_null_invalid),
            Self::F32(b) => {
                let v = raw.first_chunk::<4>().filter(|_| raw.len() == 4).map(|a| f32::from_be_bytes(*a));
                append_or_null!(b, v, stats, values_null_invalid)
            }
            Self::F64(b) => {
                // RFC 7011 §6.2: float64 may be sent as float32.
                let v = match raw.len() {
                    8 => raw.first_chunk::<8>().map(|a| f64::from_be_bytes(*a)),
                    4 => raw.first_chunk::<4>().map(|a| f64::from(f32::from_be_bytes(*a))),
                    _ => None,
                };
                append_or_null!(b, v, stats, values_null_invalid)
            }
            Self::Bool(b) => {
                // RFC 7011 §6.1.5: 1 = true, 2 = false, anything else undefined.
                let v = match raw {
                    [1] => Some(true),
                    [2] => Some(false),
                    _ => None,
                };
                append_or_null!(b, v, stats, values_null_invalid)
            }
            Self::Utf8(b) => match decode {
                Decode::String => match std::str::from_utf8(raw) {
                    Ok(s) => b.append_value(s),
                    Err(_) => {
                        // RFC 7011 §6.1.6: ill-formed UTF-8 "SHOULD" be detected and ignored.
                        b.append_null();
                        stats.values_null_invalid_utf8 += 1;
                    }
                },
                Decode::MacAddress => match raw.first_chunk::<6>().filter(|_| raw.len() == 6) {
                    Some(m) => {
                        let _ = write_mac(m, b);
                        b.append_value("");
                    }
                    None => null_invalid(b, stats),
                },
                Decode::Ipv4Address => match raw.first_chunk::<4>().filter(|_| raw.len() == 4) {
                    Some(a) => append_ipv4(b, *a),
                    None => null_invalid(b, stats),
                },
                Decode::Ipv6Address => match raw.first_chunk::<16>().filter(|_| raw.len() == 16) {
                    Some(a) => append_ipv6(b, a),
                    None => null_invalid(b, stats),
                },
                _ => null_invalid(b, stats),
            },
            Self::Binary(b) => b.append_bytes(raw),
            Self::Fsb(b) if decode != Decode::Unsigned256 => {
                // Native layout: addresses and MAC addresses as sent; the
                // plan guarantees their length.
                if !b.append_value(raw) {
                    null_fsb(b, stats);
                }
            }
            Self::Fsb(b) => {
                // unsigned256 sent reduced (RFC 7011 §6.2 by analogy): left-pad to 32.
                if !append_unsigned256(b, raw) {
                    null_fsb(b, stats);
                }
            }
            Self::TsS(b) => {
                let v = raw.first_chunk::<4>().filter(|_| raw.len() == 4).map(|a| i64::from(u32::from_be_bytes(*a)));
                append_or_null!(b, v, stats, values_null_invalid)
            }
            Self::TsMs(b) => {
                let v = raw.first_chunk::<8>().filter(|_| raw.len() == 8).map(|a| i64::try_from(u64::from_be_bytes(*a)));
                match v {
                    Some(Ok(ms)) => b.append_value(ms),
                    Some(Err(_)) => {
                        b.append_null();
                        stats.values_null_out_of_range += 1;
                    }
                    None => {
                        b.append_null();
                        stats.values_null_invalid += 1;
                    }
                }
            }
            Self::TsUs(b) => match ntp(raw, decode == Decode::DateTimeMicroseconds) {
                Some(t) => append_or_null!(b, unix_micros(t), stats, values_null_out_of_range),
                None => {
                    b.append_null();
                    stats.values_null_invalid += 1;
                }
            },
            Self::TsNs(b) => match ntp(raw, decode == Decode::DateTimeMicroseconds) {
                Some(t) => append_or_null!(b, t.unix_nanos(), stats, values_null_out_of_range),
                None => {
                    b.append_null();
                    stats.values_null_invalid += 1;
                }
            },
        }
    }

    /// Appends field octets `s..e` of every record of a fixed-layout set,
    /// one column at a time: the type dispatch happens once per set, and
    /// the common types convert in a tight loop. The others go value by
    /// value through [`append_raw`](Self::append_raw).
    fn append_column<'r>(
        &mut self,
        decode: Decode,
        records: impl ExactSizeIterator<Item = &'r [u8]> + Clone,
        s: usize,
        e: usize,
        stats: &mut ColumnarStats,
    ) {
        let len = e.saturating_sub(s);
        let done = match (&mut *self, decode) {
            (Self::U8(b), Decode::Unsigned) if len <= 1 => fill_uint(b, records.clone(), s, len, |v| v as u8),
            (Self::U16(b), Decode::Unsigned) if len <= 2 => fill_uint(b, records.clone(), s, len, |v| v as u16),
            (Self::U32(b), Decode::Unsigned) if len <= 4 => fill_uint(b, records.clone(), s, len, |v| v as u32),
            (Self::U64(b), Decode::Unsigned) => fill_uint(b, records.clone(), s, len, |v| v),
            (Self::I8(b), Decode::Signed) if len <= 1 => fill_uint(b, records.clone(), s, len, |v| sign_extend(v, len) as i8),
            (Self::I16(b), Decode::Signed) if len <= 2 => fill_uint(b, records.clone(), s, len, |v| sign_extend(v, len) as i16),
            (Self::I32(b), Decode::Signed) if len <= 4 => fill_uint(b, records.clone(), s, len, |v| sign_extend(v, len) as i32),
            (Self::I64(b), Decode::Signed) => fill_uint(b, records.clone(), s, len, |v| sign_extend(v, len)),
            (Self::TsS(b), Decode::DateTimeSeconds) if len == 4 => fill_uint(b, records.clone(), s, len, |v| v as i64),
            (Self::TsMs(b), Decode::DateTimeMilliseconds)
                if len == 8 && records.clone().all(|r| i64::try_from(be_at::<8>(r, s)).is_ok()) =>
            {
                fill_uint(b, records.clone(), s, len, |v| v as i64)
            }
            (Self::Utf8(b), Decode::Ipv4Address) if len == 4 => {
                for r in records.clone() {
                    let [w, x, y, z] = (be_at::<4>(r, s) as u32).to_be_bytes();
                    append_ipv4(b, [w, x, y, z]);
                }
                true
            }
            (Self::Fsb(b), Decode::Ipv4Address) if len == 4 => b.append_column::<4>(records.clone(), s),
            (Self::Fsb(b), Decode::Ipv6Address) if len == 16 => b.append_column::<16>(records.clone(), s),
            (Self::Fsb(b), Decode::MacAddress) if len == 6 => b.append_column::<6>(records.clone(), s),
            (Self::Utf8(b), Decode::Ipv6Address) if len == 16 => {
                for r in records.clone() {
                    match r.get(s..).and_then(|t| t.first_chunk::<16>()) {
                        Some(a) => append_ipv6(b, a),
                        None => null_invalid(b, stats),
                    }
                }
                true
            }
            // Octets of a common width in bulk; past 2 GiB value by value.
            (Self::Binary(b), _) if matches!(len, 1..=4 | 8 | 16) => binary_column(b, records.clone(), s, len),
            (Self::Binary(b), _) if (1..=8).contains(&len) && e >= 8 => {
                for r in records.clone() {
                    // The 8 octets that end with the field, shifted so the
                    // field comes first: a fixed-size copy even for a field
                    // at the very end of the record.
                    match r.get(e - 8..e).and_then(|t| t.first_chunk::<8>()) {
                        Some(c) => {
                            let front = u64::from_be_bytes(*c).checked_shl(8 * (8 - len) as u32).unwrap_or(0);
                            b.append_short(&front.to_be_bytes(), len);
                        }
                        None => b.append_bytes(r.get(s..e).unwrap_or_default()),
                    }
                }
                true
            }
            (Self::Binary(b), _) if len <= 16 => {
                for r in records.clone() {
                    // A fixed-size copy where the record leaves room for one.
                    match r.get(s..).and_then(|t| t.first_chunk::<16>()) {
                        Some(c) => b.append_short(c, len),
                        None => b.append_bytes(r.get(s..e).unwrap_or_default()),
                    }
                }
                true
            }
            _ => false,
        };
        if !done {
            for r in records {
                self.append_raw(decode, r.get(s..e).unwrap_or_default(), stats);
            }
        }
    }

    /// Appends a decoded value: list items, whose element may be of any
    /// type. A value of another type than the column's is a null item,
    /// counted in `list_elements_null`; generic (Utf8) items take the text
    /// form of any value.
    fn append_value(&mut self, v: &Value<'_>, stats: &mut ColumnarStats) {
        let ok = match (&mut *self, v) {
            (Self::U8(b), Value::Unsigned(x)) => u8::try_from(*x).map(|x| b.append_value(x)).is_ok(),
            (Self::U16(b), Value::Unsigned(x)) => u16::try_from(*x).map(|x| b.append_value(x)).is_ok(),
            (Self::U32(b), Value::Unsigned(x)) => u32::try_from(*x).map(|x| b.append_value(x)).is_ok(),
            (Self::U64(b), Value::Unsigned(x)) => {
                b.append_value(*x);
                true
            }
            (Self::I8(b), Value::Signed(x)) => i8::try_from(*x).map(|x| b.append_value(x)).is_ok(),
            (Self::I16(b), Value::Signed(x)) => i16::try_from(*x).map(|x| b.append_value(x)).is_ok(),
            (Self::I32(b), Value::Signed(x)) => i32::try_from(*x).map(|x| b.append_value(x)).is_ok(),
            (Self::I64(b), Value::Signed(x)) => {
                b.append_value(*x);
                true
            }
            (Self::F32(b), Value::Float(x)) => {
                b.append_value(*x as f32);
                true
            }
            (Self::F64(b), Value::Float(x)) => {
                b.append_value(*x);
                true
            }
            (Self::Bool(b), Value::Bool(x)) => {
                b.append_value(*x);
                true
            }
            (Self::Utf8(_), Value::Invalid(_)) => false,
            (Self::Utf8(b), Value::Ipv4(a)) => {
                append_ipv4(b, a.octets());
                true
            }
            (Self::Utf8(b), Value::Ipv6(a)) => {
                append_ipv6(b, &a.octets());
                true
            }
            (Self::Utf8(b), v) => {
                let _ = write_value_text(v, b);
                b.append_value("");
                true
            }
            (Self::Binary(b), Value::Octets(x)) => {
                b.append_bytes(x);
                true
            }
            (Self::Fsb(b), Value::Ipv4(a)) => b.append_value(&a.octets()),
            (Self::Fsb(b), Value::Ipv6(a)) => b.append_value(&a.octets()),
            (Self::Fsb(b), Value::Mac(m)) => b.append_value(m),
            (Self::Fsb(b), Value::Unsigned256(x)) => b.width() == 32 && append_unsigned256(b, x),
            (Self::TsS(b), Value::DateTime(t)) => {
                b.append_value(t.secs);
                true
            }
            (Self::TsMs(b), Value::DateTime(t)) => unix_millis(*t).map(|x| b.append_value(x)).is_some(),
            (Self::TsUs(b), Value::DateTime(t)) => unix_micros(*t).map(|x| b.append_value(x)).is_some(),
            (Self::TsNs(b), Value::DateTime(t)) => t.unix_nanos().map(|x| b.append_value(x)).is_some(),
            _ => false,
        };
        if !ok {
            self.append_nulls(1);
            stats.list_elements_null += 1;
        }
    }
}

/// Appends a column of `len`-octet values at `s` in bulk; false, with
/// nothing appended, where [`TextBuilder::append_fixed_width`] declines.
#[inline]
fn binary_column<'r>(
    b: &mut TextBuilder,
    records: impl ExactSizeIterator<Item = &'r [u8]> + Clone,
    s: usize,
    len: usize,
) -> bool {
    match len {
        1 => b.append_fixed_width::<1>(records, s),
        2 => b.append_fixed_width::<2>(records, s),
        3 => b.append_fixed_width::<3>(records, s),
        4 => b.append_fixed_width::<4>(records, s),
        8 => b.append_fixed_width::<8>(records, s),
        16 => b.append_fixed_width::<16>(records, s),
        _ => false,
    }
}

/// Appends an address in dotted decimal.
#[inline]
fn append_ipv4(b: &mut TextBuilder, a: [u8; 4]) {
    let mut buf = [0u8; 16];
    let n = ipv4_text(a, &mut buf);
    b.append_short(&buf, n);
}

/// Appends an address in the RFC 5952 text form.
#[inline]
fn append_ipv6(b: &mut TextBuilder, a: &[u8; 16]) {
    let mut buf = [0u8; 48];
    let n = ipv6_text(a, &mut buf);
    b.append_short(&buf, n);
}

/// Appends an unsigned256 left-padded to 32 octets (RFC 7011 §6.2 by
/// analogy); false, with nothing appended, for more than 32 octets.
fn append_unsigned256(b: &mut FixedBuilder, raw: &[u8]) -> bool {
    let mut wide = [0u8; 32];
    match wide.get_mut(32usize.saturating_sub(raw.len())..) {
        Some(dst) if dst.len() == raw.len() => {
            dst.copy_from_slice(raw);
            b.append_value(&wide)
        }
        _ => false,
    }
}

fn null_fsb(b: &mut FixedBuilder, stats: &mut ColumnarStats) {
    b.append_null();
    stats.values_null_invalid += 1;
}

fn null_invalid(b: &mut TextBuilder, stats: &mut ColumnarStats) {
    b.append_null();
    stats.values_null_invalid += 1;
}

impl ArrayBuilder for Scalar {
    fn len(&self) -> usize {
        self.builder().len()
    }
    fn finish(&mut self) -> ArrayRef {
        self.builder_mut().finish()
    }
    fn finish_cloned(&self) -> ArrayRef {
        self.builder().finish_cloned()
    }
    super::any_impls!();
}

/// One column's builder.
#[derive(Debug)]
pub(crate) enum Column {
    Scalar(Scalar),
    /// basicList, mplsLabelStack, scopeFields.
    List(ListBuilder<Scalar>),
    /// subTemplateList / subTemplateMultiList.
    Records(ListBuilder<StructBuilder>),
}

impl Column {
    pub(crate) fn new(t: &ArrowType, capacity: usize) -> Option<Self> {
        match t {
            ArrowType::List(item) => match item.data_type() {
                ArrowType::Struct(_) => {
                    let inner = ListBuilder::new(StructBuilder::from_fields(name_value_fields(), 0))
                        .with_field(Field::new_list_field(ArrowType::Struct(name_value_fields()), true));
                    let builders: Vec<Box<dyn ArrayBuilder>> =
                        vec![Box::new(UInt8Builder::new()), Box::new(UInt16Builder::new()), Box::new(inner)];
                    let records = StructBuilder::new(record_struct_fields(), builders);
                    Some(Self::Records(ListBuilder::with_capacity(records, capacity).with_field(item.clone())))
                }
                t => Some(Self::List(ListBuilder::with_capacity(Scalar::new(t, capacity)?, capacity).with_field(item.clone()))),
            },
            t => Scalar::new(t, capacity).map(Self::Scalar),
        }
    }

    fn append_nulls(&mut self, n: usize) {
        match self {
            Self::Scalar(s) => s.append_nulls(n),
            Self::List(l) => l.append_nulls(n),
            Self::Records(l) => l.append_nulls(n),
        }
    }

    fn len(&self) -> usize {
        match self {
            Self::Scalar(s) => s.len(),
            Self::List(l) => l.len(),
            Self::Records(l) => l.len(),
        }
    }

    pub(crate) fn finish(&mut self) -> ArrayRef {
        match self {
            Self::Scalar(s) => s.finish(),
            Self::List(l) => Arc::new(l.finish()),
            Self::Records(l) => Arc::new(l.finish()),
        }
    }

    /// Appends a list-typed field's value.
    fn append_list(&mut self, v: &Value<'_>, stats: &mut ColumnarStats) {
        match (self, v) {
            (Self::List(l), Value::BasicList(_)) => append_basic_list_value(l, v, stats),
            (Self::Records(l), Value::SubTemplateList(list)) => {
                let known = list.plan().is_some();
                append_records(l.values(), list.semantic(), list.template_id(), known, list.records(), stats);
                l.append(true);
            }
            (Self::Records(l), Value::SubTemplateMultiList(list)) => {
                for e in list.entries() {
                    append_records(l.values(), list.semantic(), e.template_id(), e.plan().is_some(), e.records(), stats);
                }
                l.append(true);
            }
            (col, _) => {
                col.append_nulls(1);
                stats.values_null_invalid += 1;
            }
        }
    }
}

/// Appends a decoded basicList item by item (a value of another kind is a
/// null, counted in `values_null_invalid`).
fn append_basic_list_value(l: &mut ListBuilder<Scalar>, v: &Value<'_>, stats: &mut ColumnarStats) {
    match v {
        Value::BasicList(list) => {
            for item in list.iter() {
                l.values().append_value(&item, stats);
            }
            l.append(true);
        }
        _ => {
            l.append_nulls(1);
            stats.values_null_invalid += 1;
        }
    }
}

/// A basicList whose elements can be appended straight from their octets
/// (RFC 6313 §4.5.1: the elements are Element Length octets each).
#[derive(Debug, Clone, Copy)]
struct Direct {
    /// The elements' decode.
    decode: Decode,
    /// Element Length.
    len: usize,
    /// Octets of the list header before the elements.
    head: usize,
}

/// How a basicList's elements can be appended straight from their octets;
/// `None` for variable-length or zero-length elements, and where the item
/// column's type would make the octets path differ from the value path.
fn list_direct(items: &Scalar, raw: &[u8]) -> Option<Direct> {
    let list = crate::structured::basic_list_header(raw)?;
    let len = usize::from(list.element.length);
    if list.element.is_variable() || len == 0 {
        return None;
    }
    let same = matches!(
        (items, list.decode),
        (Scalar::U8(_) | Scalar::U16(_) | Scalar::U32(_) | Scalar::U64(_), Decode::Unsigned)
            | (Scalar::I8(_) | Scalar::I16(_) | Scalar::I32(_) | Scalar::I64(_), Decode::Signed)
            | (Scalar::Utf8(_), Decode::Ipv4Address | Decode::Ipv6Address)
            | (Scalar::Binary(_), Decode::Octets)
    ) || matches!((items, list.decode), (Scalar::Fsb(b), Decode::Ipv4Address | Decode::Ipv6Address) if b.width() == len);
    same.then_some(Direct { decode: list.decode, len, head: raw.len() - list.elements.len() })
}

/// Appends one list (`raw`: the whole value) from its element octets;
/// false, with nothing appended, unless they are whole elements.
fn append_direct(l: &mut ListBuilder<Scalar>, raw: &[u8], d: Direct, stats: &mut ColumnarStats) -> bool {
    let elements = raw.get(d.head..).unwrap_or_default();
    let Some(n) = whole_count(elements.len(), d.len) else { return false };
    match l.values() {
        // Addresses as sent: the elements are the items' octets already.
        Scalar::Fsb(b) => b.append_packed(elements, n),
        items => {
            for element in elements.chunks_exact(d.len) {
                items.append_raw(d.decode, element, stats);
            }
        }
    }
    l.append(true);
    true
}

/// Appends a basicList of fixed-length scalar elements straight from its
/// octets where [`list_direct`] allows. False, with nothing appended, for
/// any other list: the caller takes the general path.
fn append_scalar_list(l: &mut ListBuilder<Scalar>, raw: &[u8], stats: &mut ColumnarStats) -> bool {
    match list_direct(l.values_ref(), raw) {
        Some(d) => append_direct(l, raw, d, stats),
        None => false,
    }
}

/// Appends a column of basicList values, one per record. Where a header
/// (semantic, element id and length, enterprise number) repeats the
/// previous record's, the decision of [`list_direct`] is reused: headers
/// are parsed once per run of equal ones, not once per record.
fn append_basic_lists<'r>(
    l: &mut ListBuilder<Scalar>,
    values: impl Iterator<Item = &'r [u8]>,
    scope: Scope<'r>,
    stats: &mut ColumnarStats,
) {
    // The previous header, zero-padded to 9 octets, and its decision.
    let mut last: Option<([u8; 9], Option<Direct>)> = None;
    for raw in values {
        // The header: 5 octets, 9 with an enterprise number (E bit set).
        let head = match raw.first_chunk::<5>() {
            Some(h) if h[1] & 0x80 == 0 => Some([h[0], h[1], h[2], h[3], h[4], 0, 0, 0, 0]),
            _ => raw.first_chunk::<9>().copied(),
        };
        let direct = match (last, head) {
            (Some((h, d)), Some(now)) if h == now => d,
            _ => {
                let d = list_direct(l.values_ref(), raw);
                last = head.map(|h| (h, d));
                d
            }
        };
        let done = direct.is_some_and(|d| append_direct(l, raw, d, stats));
        if !done {
            append_basic_list_value(l, &decode_value(Decode::BasicList, raw, scope), stats);
        }
    }
}

/// The derived groups [`TableBuilder::append_fixed_set`] computes a column
/// at a time from the record octets alone (no set context).
fn column_groups(derived: &DerivedPlan) -> u8 {
    let absolute = |t: Option<TimeSource>| matches!(t, Some(TimeSource::Absolute(..)));
    let mut g = group::MPLS;
    if derived.fwd.is_some() {
        g |= group::FWD;
    }
    if absolute(derived.start) {
        g |= group::START;
    }
    if absolute(derived.end) {
        g |= group::END;
    }
    g
}

/// Appends one struct item per record (see
/// [`record_struct_type`](super::record_struct_type)).
fn append_records(
    sb: &mut StructBuilder,
    semantic: u8,
    template_id: u16,
    known: bool,
    records: Records<'_>,
    stats: &mut ColumnarStats,
) {
    let head = |sb: &mut StructBuilder| {
        if let Some(b) = sb.field_builder::<UInt8Builder>(0) {
            b.append_value(semantic);
        }
        if let Some(b) = sb.field_builder::<UInt16Builder>(1) {
            b.append_value(template_id);
        }
    };
    if !known {
        // RFC 6313 §5.2: the template must come from the same session and
        // domain; without it the records cannot be read.
        head(sb);
        if let Some(f) = sb.field_builder::<ListBuilder<StructBuilder>>(2) {
            f.append_null();
        }
        sb.append(true);
        stats.list_records_unknown_template += 1;
        return;
    }
    let (mut name, mut value) = (String::new(), String::new());
    // Arrow's string builder panics past 2 GiB of text in one array: a value
    // that would get there is a null, counted.
    let put = |b: &mut StringBuilder, text: &str, stats: &mut ColumnarStats| {
        if b.values_slice().len().saturating_add(text.len()) <= i32::MAX as usize {
            b.append_value(text);
        } else {
            b.append_null();
            stats.values_null_too_long += 1;
        }
    };
    for record in records {
        head(sb);
        if let Some(f) = sb.field_builder::<ListBuilder<StructBuilder>>(2) {
            let nv = f.values();
            for field in record.fields() {
                name.clear();
                write_field_name(field.spec, false, &mut name);
                value.clear();
                let _ = write_value_text(&field.value, &mut value);
                if let Some(n) = nv.field_builder::<StringBuilder>(0) {
                    put(n, &name, stats);
                }
                if let Some(v) = nv.field_builder::<StringBuilder>(1) {
                    put(v, &value, stats);
                }
                nv.append(true);
            }
            f.append(true);
        }
        sb.append(true);
    }
}

/// Where a plan field's values go.
#[derive(Debug, Clone, Copy)]
struct Slot {
    /// Column index, or [`UNPLACED`].
    column: usize,
    decode: Decode,
}

const UNPLACED: usize = usize::MAX;

/// A plan mapped onto the schema once, reused for every set of the plan.
#[derive(Debug)]
struct PlanMap {
    slots: Vec<Slot>,
    /// Element columns this plan does not feed: null in bulk per set.
    absent: Vec<usize>,
    derived: DerivedPlan,
    /// The derived groups appended a column at a time from the octets.
    column_groups: u8,
    /// Options table: the scope column names of this plan.
    scope_names: Vec<String>,
    has_lists: bool,
    /// (start, end) of every field when all are fixed-length and there are
    /// no lists: records are then sliced without walking.
    layout: Option<Vec<(usize, usize)>>,
    /// Plans without a layout: the walk by steps ([`Plan::steps`]), each
    /// appended a column at a time.
    steps: Vec<StepMap>,
    /// Plans without a layout: where each field's octets are in the walk.
    locs: Vec<Loc>,
}

/// The columns of one step of the walk over a record.
#[derive(Debug)]
enum StepMap {
    /// Fixed-length fields from index `first` on, at `spans` (start, end)
    /// within the step's octets.
    Fixed { first: usize, spans: Vec<(usize, usize)> },
    /// A variable-length field or a list: the field at this index.
    Field(usize),
}

/// Where a field's octets are: within step `step`'s octets at `within`
/// (start, end), or all of them (`None`: a variable-length field or list).
#[derive(Debug, Clone, Copy)]
struct Loc {
    step: usize,
    within: Option<(usize, usize)>,
}

/// The columns of each step of [`Plan::steps`], and where each field's
/// octets are in the walk.
fn step_maps(plan: &Plan) -> (Vec<StepMap>, Vec<Loc>) {
    let fields = plan.fields();
    let mut locs = vec![Loc { step: 0, within: None }; fields.len()];
    let mut put = |i: usize, loc: Loc| {
        if let Some(l) = locs.get_mut(i) {
            *l = loc;
        }
    };
    let steps = plan
        .steps()
        .iter()
        .enumerate()
        .map(|(step, s)| match *s {
            Step::Fixed { first, count, .. } => {
                let mut at = 0;
                let mut spans = Vec::with_capacity(count);
                for (i, f) in fields.iter().enumerate().skip(first).take(count) {
                    let span = (at, at + usize::from(f.spec.length));
                    spans.push(span);
                    put(i, Loc { step, within: Some(span) });
                    at = span.1;
                }
                StepMap::Fixed { first, spans }
            }
            Step::Field(i) => {
                put(i, Loc { step, within: None });
                StepMap::Field(i)
            }
        })
        .collect();
    (steps, locs)
}

/// Walks `n` records of `body` by the plan's steps: for every step `k`,
/// `walk[k]` receives the (start, end) of the step's octets in each record
/// (for a variable-length field, its value without the length prefix),
/// plus `base`. Returns where the last record ends; `None`, with `walk`
/// as it was, when a record does not walk, which only a caller-built set
/// can cause: the decoder checked every length when it accepted the message.
fn walk_steps(plan: &Plan, body: &[u8], n: usize, walk: &mut Vec<Vec<(u32, u32)>>, base: usize) -> Option<usize> {
    // Offsets are u32: `base` plus the body must fit.
    u32::try_from(base.checked_add(body.len())?).ok()?;
    let steps = plan.steps();
    walk.resize_with(steps.len(), Vec::new);
    let before = walk.first().map_or(0, Vec::len);
    let mut at = 0usize;
    for _ in 0..n {
        for (step, w) in steps.iter().zip(walk.iter_mut()) {
            let span = match *step {
                Step::Fixed { len, .. } => at.checked_add(len).filter(|e| *e <= body.len()).map(|e| (at, e)),
                Step::Field(i) => plan.fields().get(i).and_then(|f| field_span(body, at, &f.spec)),
            };
            let Some((s, e)) = span else {
                walk.iter_mut().for_each(|w| w.truncate(before));
                return None;
            };
            // Both within `body`, so `base` plus either fits in a u32.
            w.push(((base + s) as u32, (base + e) as u32));
            at = e;
        }
    }
    Some(at)
}

/// Column positions that do not depend on the plan.
#[derive(Debug, Clone, Copy)]
struct Fixed {
    exporter: usize,
    domain: usize,
    template: usize,
    export_time: usize,
    scope_fields: Option<usize>,
    derived: Option<usize>,
}

/// Appends Data Sets to Arrow column builders and finishes them into
/// [`RecordBatch`]es of a [`TableSchema`].
///
/// Each plan is mapped to its columns once (cached by `Arc<Plan>`
/// identity); values are then appended a column at a time to typed builders
/// without name lookups or per-value allocation, and columns the template
/// lacks get their nulls in bulk per set. The records of consecutive sets of
/// one plan are gathered (up to 1024; records with variable-length fields
/// or lists walked once by the plan's steps) and their columns converted in
/// one run; [`len`](Self::len) counts them at once and
/// [`finish`](Self::finish) converts what is waiting.
#[derive(Debug)]
pub struct TableBuilder {
    schema: Arc<TableSchema>,
    columns: Vec<Column>,
    fixed: Fixed,
    plans: IdMap<usize, (Arc<Plan>, Arc<PlanMap>)>,
    /// The plan of the previous set: most sets repeat it.
    last: Option<(Arc<Plan>, Arc<PlanMap>)>,
    capacity: usize,
    rows: usize,
    stats: ColumnarStats,
    spans: Vec<Option<(usize, usize)>>,
    /// The walk by steps of a set appended at once, not gathered (its own
    /// buffer: the gathered walk must stay empty between flushes).
    walk: Vec<Vec<(u32, u32)>>,
    labels: Vec<u32>,
    text: String,
    /// The exporter whose address `text` holds.
    text_of: Option<std::net::IpAddr>,
    /// Records of fixed-layout sets waiting to be appended a column at a time.
    stage: Stage,
    /// Tests only: append every set record by record, field by field, to
    /// compare the column paths with it.
    #[cfg(test)]
    pub(crate) row_path: bool,
}

/// The records of a fixed-layout set: `left` slices of `stride` octets.
///
/// Like `chunks_exact`, but its length is kept rather than computed: the
/// standard iterator divides by the stride whenever its length is asked
/// (each `zip`, `extend` and `len`), which costs more than converting a
/// column of a small set.
#[derive(Debug, Clone)]
struct Rows<'a> {
    rest: &'a [u8],
    stride: usize,
    left: usize,
}

impl<'a> Iterator for Rows<'a> {
    type Item = &'a [u8];

    #[inline]
    fn next(&mut self) -> Option<&'a [u8]> {
        if self.left == 0 {
            return None;
        }
        let (r, rest) = self.rest.split_at_checked(self.stride)?;
        self.rest = rest;
        self.left -= 1;
        Some(r)
    }

    #[inline]
    fn size_hint(&self) -> (usize, Option<usize>) {
        (self.left, Some(self.left))
    }
}

impl ExactSizeIterator for Rows<'_> {}

/// The records of consecutive fixed-layout sets of one plan, gathered so
/// their columns are converted in long runs: sets over UDP hold a dozen or
/// two records, and converting a column has a cost per run as well as per
/// value. Only the element columns (and the derived ones computed from them
/// alone) wait here; the provenance and constant columns of each set are
/// appended at once, so every column still receives the sets in order.
#[derive(Debug, Default)]
struct Stage {
    /// What the waiting records are.
    of: Option<Staged>,
    /// The records end to end: the plan's record length each when it has
    /// a fixed layout.
    bytes: Vec<u8>,
    /// Plans without a fixed layout: the records' walk by steps
    /// ([`walk_steps`]), offsets in `bytes`.
    walk: Vec<Vec<(u32, u32)>>,
}

/// The plan, its mapping and the derived groups of gathered records, and
/// the templates their nested lists decode with.
#[derive(Debug)]
struct Staged {
    plan: Arc<Plan>,
    map: Arc<PlanMap>,
    groups: u8,
    templates: Arc<TemplateTable>,
    max_depth: u8,
}

/// Records gathered before their columns are converted.
const STAGE_ROWS: usize = 1024;

/// Octets of variable-length records gathered before their columns are
/// converted (records of up to 64 KiB each).
const STAGE_BYTES: usize = 1 << 20;

/// Rows reserved past the capacity: callers finish a batch once it reaches
/// the capacity, which the last set usually passes by a few records; the
/// slack spares every column a reallocation (and copy) per batch.
const SET_SLACK: usize = 256;

/// Most plans kept in the mapping cache; past it the cache is cleared
/// (plans are re-mapped on their next set).
const MAX_CACHED_PLANS: usize = 4096;

impl TableBuilder {
    /// A builder for `schema`, reserving room for `capacity` rows (use the
    /// row-group size).
    pub fn new(schema: Arc<TableSchema>, capacity: usize) -> Self {
        let columns: Vec<Column> = schema
            .columns()
            .iter()
            .map(|c| {
                // Every schema type has a builder (tests check each); Binary
                // is only a defensive fallback.
                Column::new(&c.data_type, capacity.saturating_add(SET_SLACK))
                    .unwrap_or_else(|| Column::Scalar(Scalar::Binary(TextBuilder::binary_with_capacity(capacity, 0))))
            })
            .collect();
        let pos = |name: &str| schema.column_index(name).unwrap_or(UNPLACED);
        let fixed = Fixed {
            exporter: pos("exporter"),
            domain: pos("observationDomainId"),
            template: pos("templateId"),
            export_time: pos("exportTime"),
            scope_fields: schema.column_index(super::schema::SCOPE_FIELDS),
            derived: schema
                .columns()
                .iter()
                .position(|c| matches!(c.role, ColumnRole::Derived(_))),
        };
        Self {
            schema,
            columns,
            fixed,
            plans: IdMap::default(),
            last: None,
            capacity,
            rows: 0,
            stats: ColumnarStats::default(),
            spans: Vec::new(),
            walk: Vec::new(),
            labels: Vec::new(),
            text: String::new(),
            text_of: None,
            stage: Stage::default(),
            #[cfg(test)]
            row_path: false,
        }
    }

    /// The schema.
    pub fn schema(&self) -> &Arc<TableSchema> {
        &self.schema
    }

    /// Rows appended since the last [`finish`](Self::finish).
    pub const fn len(&self) -> usize {
        self.rows
    }

    /// True when no row is waiting.
    pub const fn is_empty(&self) -> bool {
        self.rows == 0
    }

    /// Counters since the builder was made. Records of fixed-layout sets
    /// may wait to be converted in a longer run (see [`TableBuilder`]); the
    /// value counters of those records are added when they are, at the
    /// latest by [`finish`](Self::finish).
    pub const fn stats(&self) -> &ColumnarStats {
        &self.stats
    }

    fn map_plan(&self, plan: &Plan) -> PlanMap {
        let mut used = vec![false; self.columns.len()];
        let mut slots = Vec::with_capacity(plan.fields().len());
        let mut scope_names = Vec::new();
        for field in plan.fields() {
            let name = column_name(field);
            let column = match self.schema.column_index(&name) {
                Some(c)
                    if !used.get(c).copied().unwrap_or(true)
                        && self.schema.columns().get(c).is_some_and(|spec| {
                            matches!(spec.role, ColumnRole::Element { .. })
                                && spec.data_type == element_type_in(field, self.schema.layout())
                        }) =>
                {
                    if let Some(u) = used.get_mut(c) {
                        *u = true;
                    }
                    c
                }
                _ => UNPLACED,
            };
            if field.is_scope {
                scope_names.push(name);
            }
            slots.push(Slot { column, decode: field.decode });
        }
        let absent = self
            .schema
            .columns()
            .iter()
            .enumerate()
            .filter(|(i, c)| matches!(c.role, ColumnRole::Element { .. }) && !used.get(*i).copied().unwrap_or(false))
            .map(|(i, _)| i)
            .collect();
        let derived = match self.schema.kind() {
            TableKind::Flows => DerivedPlan::new(plan),
            TableKind::Options => DerivedPlan::default(),
        };
        let has_lists = slots.iter().any(|s| s.decode.is_list());
        let layout = match (plan.fixed_len(), has_lists) {
            (Some(_), false) => plan
                .fields()
                .iter()
                .map(|f| f.offset.map(|o| (o, o + usize::from(f.spec.length))))
                .collect::<Option<Vec<_>>>(),
            _ => None,
        };
        let (steps, locs) = match layout {
            Some(_) => Default::default(),
            None => step_maps(plan),
        };
        let column_groups = column_groups(&derived);
        PlanMap { slots, absent, derived, column_groups, scope_names, has_lists, layout, steps, locs }
    }

    fn plan_map(&mut self, plan: &Arc<Plan>) -> Arc<PlanMap> {
        if let Some((p, map)) = &self.last {
            if Arc::ptr_eq(p, plan) {
                return map.clone();
            }
        }
        let key = Arc::as_ptr(plan) as usize;
        if let Some((_, map)) = self.plans.get(&key) {
            let map = map.clone();
            self.last = Some((plan.clone(), map.clone()));
            return map;
        }
        if self.plans.len() >= MAX_CACHED_PLANS {
            self.plans.clear();
        }
        let map = Arc::new(self.map_plan(plan));
        // The Arc<Plan> is kept so the pointer cannot be reused by another plan.
        self.plans.insert(key, (plan.clone(), map.clone()));
        self.last = Some((plan.clone(), map.clone()));
        map
    }

    /// Appends every record of `set`, deriving columns with `enrichment`.
    /// Returns the number of rows appended (0 for a set of the other
    /// table's kind, which is counted in
    /// [`ColumnarStats::sets_other_table`]).
    ///
    /// The exporter is taken from the set's Transport Session.
    pub fn append(&mut self, set: &DataSet<'_>, enrichment: &Enrichment) -> usize {
        let wanted = match self.schema.kind() {
            TableKind::Flows => !set.plan().is_options(),
            TableKind::Options => set.plan().is_options(),
        };
        if !wanted {
            self.stats.sets_other_table += 1;
            return 0;
        }
        let map = self.plan_map(set.plan());
        let exporter = set.session().exporter.map(|a| a.ip());
        let domain = set.domain().0;
        let export_time = set.export_time();
        let ctx = SetContext::new(export_time, enrichment.domain(exporter, domain));
        let groups = match self.fixed.derived {
            Some(_) => map.derived.per_record(&ctx),
            None => 0,
        };

        let n = match self.fixed_records(&map, set) {
            Some(records) if groups & !map.column_groups == 0 => self.stage_set(set.plan(), &map, groups, records),
            Some(records) => {
                self.flush_stage();
                self.append_fixed_set(&map, set.plan(), records, Some(&ctx), groups)
            }
            None if groups & !map.column_groups == 0 && self.stage_walked(set, &map, groups) => set.len(),
            None => {
                self.flush_stage();
                match self.append_stepped_set(&map, set, &ctx, groups) {
                    Some(n) => n,
                    None => {
                        let mut n = 0usize;
                        for record in set.records() {
                            self.append_record(&map, &record, &ctx, groups);
                            n += 1;
                        }
                        n
                    }
                }
            }
        };
        if let Some(base) = self.fixed.derived {
            self.append_constant_derived(base, groups, &ctx, n);
        }

        // Provenance and absent columns, in bulk.
        if self.text_of != exporter {
            // Sets come in runs from one exporter: format its address once.
            self.text.clear();
            if let Some(ip) = exporter {
                let _ = write!(self.text, "{ip}");
            }
            self.text_of = exporter;
        }
        let f = self.fixed;
        if let Some(Column::Scalar(Scalar::Utf8(b))) = self.columns.get_mut(f.exporter) {
            match exporter {
                Some(_) => b.append_repeated(&self.text, n),
                None => b.append_nulls(n),
            }
        }
        if let Some(Column::Scalar(Scalar::U32(b))) = self.columns.get_mut(f.domain) {
            b.append_value_n(domain, n);
        }
        if let Some(Column::Scalar(Scalar::U16(b))) = self.columns.get_mut(f.template) {
            b.append_value_n(set.plan().id().0, n);
        }
        if let Some(Column::Scalar(Scalar::TsS(b))) = self.columns.get_mut(f.export_time) {
            b.append_value_n(i64::from(export_time), n);
        }
        if let Some(Column::List(l)) = f.scope_fields.and_then(|i| self.columns.get_mut(i)) {
            for _ in 0..n {
                if let Scalar::Utf8(items) = l.values() {
                    for name in &map.scope_names {
                        items.append_value(name);
                    }
                }
                l.append(true);
            }
        }
        for c in &map.absent {
            if let Some(col) = self.columns.get_mut(*c) {
                col.append_nulls(n);
            }
        }
        self.rows += n;
        self.stats.rows += n as u64;
        self.stats.sets += 1;
        n
    }

    /// Whether a test asked for the record-by-record path.
    #[inline]
    const fn row_path(&self) -> bool {
        #[cfg(test)]
        return self.row_path;
        #[cfg(not(test))]
        false
    }

    /// The records of a set whose plan has a fixed layout, as equal chunks.
    fn fixed_records<'s>(&self, map: &PlanMap, set: &'s DataSet<'_>) -> Option<Rows<'s>> {
        if self.row_path() {
            return None;
        }
        map.layout.as_ref()?;
        let len = set.plan().fixed_len().filter(|l| *l > 0)?;
        let body = set.bytes().get(..set.len().checked_mul(len)?)?;
        Some(Rows { rest: body, stride: len, left: set.len() })
    }

    /// Appends the fields from index `first` on at `spans` (fixed-length
    /// fields, not lists, at those offsets of each of `records`), a column
    /// at a time.
    fn append_field_columns<'r>(
        &mut self,
        map: &PlanMap,
        plan: &Plan,
        first: usize,
        spans: &[(usize, usize)],
        records: impl ExactSizeIterator<Item = &'r [u8]> + Clone,
    ) {
        let n = records.len();
        let slots = map.slots.get(first..).unwrap_or_default();
        let fields = plan.fields().get(first..).unwrap_or_default();
        for ((slot, field), (s, e)) in slots.iter().zip(fields).zip(spans) {
            if slot.column == UNPLACED {
                self.stats.values_unplaced += n as u64;
                continue;
            }
            if field.length_mismatch {
                self.stats.values_octets_fallback += n as u64;
            }
            match self.columns.get_mut(slot.column) {
                Some(Column::Scalar(col)) => col.append_column(slot.decode, records.clone(), *s, *e, &mut self.stats),
                Some(col) => {
                    // These fields are not lists; defensive only.
                    col.append_nulls(n);
                    self.stats.values_null_invalid += n as u64;
                }
                None => {}
            }
        }
    }

    /// Appends a set of a plan without a fixed layout a column at a time
    /// (see [`append_walked`](Self::append_walked)). `None`, with nothing
    /// appended, when a record does not walk (a caller-built set only).
    fn append_stepped_set(&mut self, map: &PlanMap, set: &DataSet<'_>, ctx: &SetContext<'_>, groups: u8) -> Option<usize> {
        if self.row_path() {
            return None;
        }
        let (plan, body, n) = (set.plan(), set.bytes(), set.len());
        let mut walk = std::mem::take(&mut self.walk);
        walk.iter_mut().for_each(Vec::clear);
        let walked = walk_steps(plan, body, n, &mut walk, 0).is_some();
        if walked {
            self.append_walked(map, plan, body, &walk, Some(ctx), groups, set.scope());
        }
        self.walk = walk;
        walked.then_some(n)
    }

    /// Gathers the records of a set of a plan without a fixed layout, with
    /// their walk by steps (flushing those of another plan first); false,
    /// with nothing gathered, when a record does not walk.
    fn stage_walked(&mut self, set: &DataSet<'_>, map: &Arc<PlanMap>, groups: u8) -> bool {
        if self.row_path() {
            return false;
        }
        let (plan, templates) = (set.plan(), set.templates());
        let same = self.stage.of.as_ref().is_some_and(|o| {
            Arc::ptr_eq(&o.plan, plan) && o.groups == groups && Arc::ptr_eq(&o.templates, templates)
        });
        if !same {
            self.flush_stage();
            let max_depth = set.scope().max_depth;
            self.stage.of =
                Some(Staged { plan: plan.clone(), map: map.clone(), groups, templates: templates.clone(), max_depth });
        }
        let base = self.stage.bytes.len();
        let Some(end) = walk_steps(plan, set.bytes(), set.len(), &mut self.stage.walk, base) else {
            return false;
        };
        self.stage.bytes.extend_from_slice(set.bytes().get(..end).unwrap_or_default());
        if self.stage.walk.first().map_or(0, Vec::len) >= STAGE_ROWS || self.stage.bytes.len() >= STAGE_BYTES {
            self.flush_stage();
        }
        true
    }

    /// Appends `n` records of `body` a column at a time, given their walk
    /// by steps: fixed-length runs as in
    /// [`append_fixed_set`](Self::append_fixed_set), then each
    /// variable-length field or list over all records, then the derived
    /// columns record by record. Without `ctx` (gathered sets), only the
    /// derived groups computed from the record alone may be asked.
    #[allow(clippy::too_many_arguments)]
    fn append_walked(
        &mut self,
        map: &PlanMap,
        plan: &Plan,
        body: &[u8],
        walk: &[Vec<(u32, u32)>],
        ctx: Option<&SetContext<'_>>,
        groups: u8,
        scope: Scope<'_>,
    ) {
        let octets = |k: usize| {
            let spans = walk.get(k).map(Vec::as_slice).unwrap_or_default();
            spans.iter().map(move |&(s, e)| body.get(s as usize..e as usize).unwrap_or_default())
        };
        for (k, step) in map.steps.iter().enumerate() {
            match step {
                StepMap::Fixed { first, spans } => self.append_field_columns(map, plan, *first, spans, octets(k)),
                StepMap::Field(i) => self.append_value_column(map, plan, *i, octets(k), scope),
            }
        }
        let Some(base) = self.fixed.derived.filter(|_| groups != 0) else { return };
        debug_assert!(ctx.is_some() || groups & !map.column_groups == 0, "gathered sets have column groups only");
        // The column groups do not read the set context.
        let none = SetContext::new(0, None);
        let ctx = ctx.unwrap_or(&none);
        for r in 0..walk.first().map_or(0, Vec::len) {
            let raw = |i: usize| {
                let loc = map.locs.get(i)?;
                let &(s, e) = walk.get(loc.step)?.get(r)?;
                let (s, e) = (s as usize, e as usize);
                match loc.within {
                    Some((a, b)) => body.get(s + a..s + b),
                    None => body.get(s..e),
                }
            };
            let row = map.derived.compute(groups, raw, ctx, &mut self.labels, &mut self.stats);
            self.append_derived(base, &row, groups);
        }
    }

    /// Appends field `index` (variable-length or a list) of every record,
    /// given its value octets per record.
    fn append_value_column<'r>(
        &mut self,
        map: &PlanMap,
        plan: &Plan,
        index: usize,
        values: impl ExactSizeIterator<Item = &'r [u8]>,
        scope: Scope<'r>,
    ) {
        let n = values.len();
        let (Some(slot), Some(field)) = (map.slots.get(index), plan.fields().get(index)) else { return };
        if slot.column == UNPLACED {
            self.stats.values_unplaced += n as u64;
            return;
        }
        if field.length_mismatch {
            self.stats.values_octets_fallback += n as u64;
        }
        match self.columns.get_mut(slot.column) {
            Some(Column::Scalar(col)) => {
                for raw in values {
                    col.append_raw(slot.decode, raw, &mut self.stats);
                }
            }
            Some(Column::List(l)) if slot.decode == Decode::BasicList => append_basic_lists(l, values, scope, &mut self.stats),
            Some(col) if slot.decode.is_list() => {
                for raw in values {
                    col.append_list(&decode_value(slot.decode, raw, scope), &mut self.stats);
                }
            }
            Some(col) => {
                col.append_nulls(n);
                self.stats.values_null_invalid += n as u64;
            }
            None => {}
        }
    }

    /// Gathers a fixed-layout set's records (flushing those of another plan
    /// first); returns the rows.
    fn stage_set(&mut self, plan: &Arc<Plan>, map: &Arc<PlanMap>, groups: u8, records: Rows<'_>) -> usize {
        let same = self.stage.of.as_ref().is_some_and(|o| Arc::ptr_eq(&o.plan, plan) && o.groups == groups);
        if !same {
            self.flush_stage();
            // Fixed-layout records hold no lists: their templates are not needed.
            let (templates, max_depth) = (Arc::default(), 0);
            self.stage.of = Some(Staged { plan: plan.clone(), map: map.clone(), groups, templates, max_depth });
        }
        let (n, stride) = (records.len(), records.stride);
        self.stage.bytes.extend_from_slice(records.rest);
        if self.stage.bytes.len() >= STAGE_ROWS.saturating_mul(stride) {
            self.flush_stage();
        }
        n
    }

    /// Appends the gathered records' columns.
    fn flush_stage(&mut self) {
        let Some(Staged { plan, map, groups, templates, max_depth }) = self.stage.of.take() else { return };
        let bytes = std::mem::take(&mut self.stage.bytes);
        let mut walk = std::mem::take(&mut self.stage.walk);
        if map.layout.is_some() {
            // Only whole records of this plan were gathered (`stage_set`).
            if let Some(stride) = plan.fixed_len().filter(|l| *l > 0) {
                debug_assert_eq!(bytes.len() % stride, 0, "gathered records are whole");
                let left = bytes.len() / stride;
                self.append_fixed_set(&map, &plan, Rows { rest: &bytes, stride, left }, None, groups);
            }
        } else {
            let scope = Scope { templates: &templates, depth: 0, max_depth };
            self.append_walked(&map, &plan, &bytes, &walk, None, groups, scope);
        }
        // Keep the buffers for the next records.
        self.stage.bytes = bytes;
        self.stage.bytes.clear();
        walk.iter_mut().for_each(Vec::clear);
        self.stage.walk = walk;
    }

    /// Appends a fixed-layout set column by column; returns the rows.
    fn append_fixed_set(
        &mut self,
        map: &PlanMap,
        plan: &Plan,
        records: Rows<'_>,
        ctx: Option<&SetContext<'_>>,
        groups: u8,
    ) -> usize {
        let n = records.len();
        let Some(layout) = map.layout.as_deref() else { return 0 };
        self.append_field_columns(map, plan, 0, layout, records.clone());
        let Some(base) = self.fixed.derived.filter(|_| groups != 0) else { return n };
        let mut groups = groups;
        if let Some((_, end)) = map.derived.fwd.and_then(|i| layout.get(i)).filter(|_| groups & group::FWD != 0) {
            // forwardingOutcome/Reason column by column: only the
            // least-significant octet has a meaning (IANA IE 89).
            let texts = forwarding_texts();
            if let Some([Column::Scalar(Scalar::Utf8(outcome)), Column::Scalar(Scalar::Utf8(reason))]) =
                self.columns.get_mut(base..base + 2)
            {
                for r in records.clone() {
                    let octet = end.checked_sub(1).and_then(|i| r.get(i)).copied().unwrap_or(0);
                    let Some((o, why)) = texts.get(usize::from(octet)) else { continue };
                    outcome.append_name(o);
                    match why {
                        Some(w) => reason.append_name(w),
                        None => reason.append_null(),
                    }
                }
                groups &= !group::FWD;
            }
        }
        if groups & group::MPLS != 0 {
            if let Some(Column::List(l)) = self.columns.get_mut(base + 2) {
                for data in records.clone() {
                    let raw = |i: usize| layout.get(i).and_then(|(s, e)| data.get(*s..*e));
                    if map.derived.labels(&raw, &mut self.labels) {
                        if let Scalar::U32(items) = l.values() {
                            items.append_slice(&self.labels);
                        }
                        l.append(true);
                    } else {
                        l.append_null();
                    }
                }
                groups &= !group::MPLS;
            }
        }
        for (g, offset, source) in [(group::START, 3, map.derived.start), (group::END, 4, map.derived.end)] {
            // Absolute times column by column; the relative ones per record.
            let (true, Some(TimeSource::Absolute(i, decode))) = (groups & g != 0, source) else { continue };
            let (Some((s, e)), Some(Column::Scalar(Scalar::TsNs(b)))) = (layout.get(i), self.columns.get_mut(base + offset))
            else {
                continue;
            };
            for data in records.clone() {
                let ns = data.get(*s..*e).and_then(|raw| absolute_ns(decode, raw));
                if ns.is_none() {
                    self.stats.values_null_out_of_range += 1;
                }
                b.append_option(ns);
            }
            groups &= !g;
        }
        match ctx {
            Some(ctx) if groups != 0 => {
                for data in records {
                    let raw = |i: usize| layout.get(i).and_then(|(s, e)| data.get(*s..*e));
                    let row = map.derived.compute(groups, raw, ctx, &mut self.labels, &mut self.stats);
                    self.append_derived(base, &row, groups);
                }
            }
            // Staged sets need no context: only column groups are left.
            _ => debug_assert_eq!(groups, 0, "staged sets have column groups only"),
        }
        n
    }

    /// Appends one record's fields and its derived columns.
    fn append_record(&mut self, map: &PlanMap, record: &Record<'_>, ctx: &SetContext<'_>, groups: u8) {
        let data = record.bytes();
        let fields = record.plan().fields();
        // Spans are kept for the derived columns only.
        let derived = self.fixed.derived.is_some() && groups != 0;
        self.spans.clear();
        let mut pos = 0;
        let mut ok = true;
        for (i, (slot, field)) in map.slots.iter().zip(fields).enumerate() {
            let span = if ok { field_span(data, pos, &field.spec) } else { None };
            if derived {
                self.spans.push(span);
            }
            let raw = span.and_then(|(s, e)| {
                pos = e;
                data.get(s..e)
            });
            ok &= raw.is_some();
            self.put(map, record, i, *slot, field.length_mismatch, raw);
        }
        let Some(base) = self.fixed.derived.filter(|_| derived) else { return };
        let spans = std::mem::take(&mut self.spans);
        let raw = |i: usize| spans.get(i).copied().flatten().and_then(|(s, e)| data.get(s..e));
        let row = map.derived.compute(groups, raw, ctx, &mut self.labels, &mut self.stats);
        self.append_derived(base, &row, groups);
        self.spans = spans;
    }

    /// Appends one field's value (`raw`: its octets; `None` only for a
    /// record shorter than its plan) to its column.
    #[inline]
    fn put(&mut self, map: &PlanMap, record: &Record<'_>, index: usize, slot: Slot, mismatch: bool, raw: Option<&[u8]>) {
        if slot.column == UNPLACED {
            self.stats.values_unplaced += 1;
            return;
        }
        if mismatch {
            self.stats.values_octets_fallback += 1;
        }
        if slot.decode == Decode::BasicList && !self.row_path() {
            if let (Some(Column::List(l)), Some(raw)) = (self.columns.get_mut(slot.column), raw) {
                if append_scalar_list(l, raw, &mut self.stats) {
                    return;
                }
            }
        }
        let Some(col) = self.columns.get_mut(slot.column) else { return };
        match (col, raw) {
            (Column::Scalar(s), Some(raw)) => s.append_raw(slot.decode, raw, &mut self.stats),
            (col @ (Column::List(_) | Column::Records(_)), Some(_)) if map.has_lists => match record.value(index) {
                Some(v) => col.append_list(&v, &mut self.stats),
                None => {
                    col.append_nulls(1);
                    self.stats.values_null_invalid += 1;
                }
            },
            (col, _) => {
                // Only a caller-built record can be shorter than its plan.
                col.append_nulls(1);
                self.stats.values_null_invalid += 1;
            }
        }
    }

    /// Appends the derived columns of the groups that vary per record.
    fn append_derived(&mut self, base: usize, row: &DerivedRow<'_>, groups: u8) {
        let Some(cols) = self.columns.get_mut(base..) else { return };
        let utf8 = |c: Option<&mut Column>, v: Option<&str>| {
            if let Some(Column::Scalar(Scalar::Utf8(b))) = c {
                b.append_option(v);
            }
        };
        // Offsets: DerivedColumn::ALL order (see `group::COLUMNS`).
        if groups & group::FWD != 0 {
            let (a, b) = cols.split_at_mut(1);
            utf8(a.first_mut(), row.outcome);
            utf8(b.first_mut(), row.reason);
        }
        if groups & group::MPLS != 0 {
            if let Some(Column::List(l)) = cols.get_mut(2) {
                if row.labels {
                    if let Scalar::U32(items) = l.values() {
                        items.append_slice(&self.labels);
                    }
                    l.append(true);
                } else {
                    l.append_null();
                }
            }
        }
        for (g, i, v) in [(group::START, 3, row.start_ns), (group::END, 4, row.end_ns)] {
            if groups & g != 0 {
                if let Some(Column::Scalar(Scalar::TsNs(b))) = cols.get_mut(i) {
                    b.append_option(v);
                }
            }
        }
        if groups & group::RATE != 0 {
            if let Some(Column::Scalar(Scalar::U32(b))) = cols.get_mut(5) {
                b.append_option(row.rate);
            }
        }
        for (g, i, v) in [
            (group::IFACE, 6, row.ingress_name),
            (group::IFACE, 7, row.egress_name),
            (group::VRF, 8, row.ingress_vrf),
            (group::VRF, 9, row.egress_vrf),
            (group::SRH, 10, row.srh),
        ] {
            if groups & g != 0 {
                utf8(cols.get_mut(i), v);
            }
        }
    }

    /// Appends, for `n` rows at once, the derived columns whose value is
    /// the same for the whole set: null, or the set's sampling rate.
    fn append_constant_derived(&mut self, base: usize, groups: u8, ctx: &SetContext<'_>, n: usize) {
        for (g, offset, count) in group::COLUMNS {
            if groups & g != 0 {
                continue;
            }
            for i in base + offset..base + offset + count {
                let Some(col) = self.columns.get_mut(i) else { continue };
                match (g, col) {
                    (group::RATE, Column::Scalar(Scalar::U32(b))) => match ctx.fallback_rate {
                        Ok(Some(rate)) => b.append_value_n(rate, n),
                        Ok(None) => b.append_nulls(n),
                        Err(()) => {
                            b.append_nulls(n);
                            self.stats.sampling_unresolved += n as u64;
                        }
                    },
                    (_, col) => col.append_nulls(n),
                }
            }
        }
    }

    /// Finishes the rows appended so far into a batch and starts afresh
    /// (the schema and plan cache are kept).
    pub fn finish(&mut self) -> Result<RecordBatch, ColumnarError> {
        self.flush_stage();
        debug_assert!(self.columns_in_step(), "every column holds one value per row");
        for col in &mut self.columns {
            let text = match col {
                Column::Scalar(Scalar::Utf8(b) | Scalar::Binary(b)) => Some(b),
                Column::List(l) => match l.values() {
                    Scalar::Utf8(b) | Scalar::Binary(b) => Some(b),
                    _ => None,
                },
                _ => None,
            };
            if let Some(b) = text {
                self.stats.values_null_too_long += b.take_overflowed();
            }
        }
        let arrays: Vec<ArrayRef> = self.columns.iter_mut().map(Column::finish).collect();
        // The arrays took the buffers; start the next batch at full capacity
        // rather than growing from empty again.
        if self.rows > 0 {
            for (col, spec) in self.columns.iter_mut().zip(self.schema.columns()) {
                if let Some(fresh) = Column::new(&spec.data_type, self.capacity.saturating_add(SET_SLACK)) {
                    *col = fresh;
                }
            }
        }
        self.rows = 0;
        Ok(RecordBatch::try_new(self.schema.arrow_schema().clone(), arrays)?)
    }

    /// True when every column holds [`len`](Self::len) values (a check for
    /// tests and debug assertions).
    pub(crate) fn columns_in_step(&mut self) -> bool {
        self.flush_stage();
        self.columns.iter().all(|c| c.len() == self.rows)
    }
}
