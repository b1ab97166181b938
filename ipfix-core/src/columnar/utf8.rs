//! The Utf8 and Binary column builder, shaped for the short values of the
//! hot path: addresses, names, forwarding reasons, label stack sections.
//!
//! Arrow's own string builder copies each value with a call to `memcpy`;
//! for texts of a dozen octets that call costs more than the copy. Here a
//! short text arrives as a fixed-size array and its length: the whole array
//! is appended (one inlined vector store), then the tail is cut off. The
//! buffers become a [`StringArray`] through Arrow's checked constructor, so
//! a bug here shows up as an error, never as an invalid array.
//!
//! Offsets are 32-bit, as Utf8 and Binary require. A value that would carry a batch's
//! text past 2 GiB is written as null and counted rather than panicking.

use std::fmt;
use std::sync::Arc;

use arrow::array::builder::NullBufferBuilder;
use arrow::array::{ArrayBuilder, ArrayRef, BinaryArray, StringArray};
use arrow::buffer::{Buffer, OffsetBuffer, ScalarBuffer};

/// A Utf8 (or Binary) column under construction.
#[derive(Debug)]
pub(crate) struct TextBuilder {
    /// Finish as Binary rather than Utf8.
    binary: bool,
    /// Always one more than the number of values; starts with 0.
    offsets: Vec<i32>,
    values: Vec<u8>,
    nulls: NullBufferBuilder,
    /// Values written as null because the batch's text passed 2 GiB
    /// (taken by [`TextBuilder::take_overflowed`]).
    overflowed: u64,
}

impl TextBuilder {
    /// Room for `items` values of `bytes` octets in all.
    pub(crate) fn with_capacity(items: usize, bytes: usize) -> Self {
        let mut offsets = Vec::with_capacity(items + 1);
        offsets.push(0);
        Self { binary: false, offsets, values: Vec::with_capacity(bytes), nulls: NullBufferBuilder::new(items), overflowed: 0 }
    }

    /// A Binary column with room for `items` values of `bytes` octets in all.
    pub(crate) fn binary_with_capacity(items: usize, bytes: usize) -> Self {
        Self { binary: true, ..Self::with_capacity(items, bytes) }
    }

    /// Closes the value that started at `start` in the values buffer
    /// (octets written with [`fmt::Write`] belong to it too).
    #[inline(always)]
    fn close(&mut self, start: usize) {
        match i32::try_from(self.values.len()) {
            Ok(end) => {
                self.offsets.push(end);
                self.nulls.append_non_null();
            }
            Err(_) => self.overflow(start),
        }
    }

    /// The value would carry the batch's text past 2 GiB: null instead.
    #[cold]
    fn overflow(&mut self, start: usize) {
        debug_assert!(start >= self.pending_start());
        self.values.truncate(self.pending_start());
        self.push_null();
        self.overflowed += 1;
    }

    /// Where the value being written started.
    #[inline]
    fn pending_start(&self) -> usize {
        self.offsets.last().map_or(0, |o| usize::try_from(*o).unwrap_or(0))
    }

    #[inline]
    fn push_null(&mut self) {
        let end = self.offsets.last().copied().unwrap_or(0);
        self.offsets.push(end);
        self.nulls.append_null();
    }

    /// Appends `s`, after any text written with [`fmt::Write`] since the
    /// last value (so `write!(b, ..)` then `append_value("")` appends the
    /// formatted text).
    #[inline]
    pub(crate) fn append_value(&mut self, s: &str) {
        self.append_bytes(s.as_bytes());
    }

    /// Appends octets (Binary columns; UTF-8 only for Utf8 columns).
    #[inline]
    pub(crate) fn append_bytes(&mut self, b: &[u8]) {
        let start = self.values.len();
        self.values.extend_from_slice(b);
        self.close(start);
    }

    /// Appends the first `len` octets of `buf`, which must be UTF-8 in a
    /// Utf8 column (the callers give ASCII): a fixed-size copy, then the
    /// tail is cut off.
    #[inline]
    pub(crate) fn append_short<const N: usize>(&mut self, buf: &[u8; N], len: usize) {
        let start = self.values.len();
        self.values.extend_from_slice(buf);
        self.values.truncate(start + len.min(N));
        self.close(start);
    }

    /// The values written as null for passing 2 GiB since the last call.
    pub(crate) fn take_overflowed(&mut self) -> u64 {
        std::mem::take(&mut self.overflowed)
    }

    /// Appends a null.
    #[inline]
    pub(crate) fn append_null(&mut self) {
        self.values.truncate(self.pending_start());
        self.push_null();
    }

    /// Appends `n` nulls.
    pub(crate) fn append_nulls(&mut self, n: usize) {
        self.values.truncate(self.pending_start());
        let end = self.offsets.last().copied().unwrap_or(0);
        self.offsets.extend(std::iter::repeat_n(end, n));
        self.nulls.append_n_nulls(n);
    }

    /// Appends `s`, or a null.
    #[inline]
    pub(crate) fn append_option(&mut self, s: Option<&str>) {
        match s {
            Some(s) => self.append_value(s),
            None => self.append_null(),
        }
    }

    /// Appends the `L` octets at `s` of every record (Binary columns):
    /// values and offsets in bulk. False, with nothing appended, when a
    /// record is too short or the batch would pass 2 GiB.
    #[inline]
    pub(crate) fn append_fixed_width<'r, const L: usize>(
        &mut self,
        records: impl ExactSizeIterator<Item = &'r [u8]> + Clone,
        s: usize,
    ) -> bool {
        let n = records.len();
        let start = self.pending_start();
        let Some(end) = n.checked_mul(L).and_then(|b| b.checked_add(start)) else { return false };
        if i32::try_from(end).is_err() {
            return false;
        }
        self.values.truncate(start);
        if !super::fixed::copy_fields::<L>(&mut self.values, records, s) {
            return false;
        }
        // `end` fits an i32, so every offset up to it does.
        let base = start as i32;
        self.offsets.extend((1..=n as i32).map(|i| base + i * L as i32));
        self.nulls.append_n_non_nulls(n);
        true
    }

    /// Appends `s` `n` times.
    pub(crate) fn append_repeated(&mut self, s: &str, n: usize) {
        let start = self.pending_start();
        let fits = s.len().checked_mul(n).and_then(|b| b.checked_add(start)).is_some_and(|end| i32::try_from(end).is_ok());
        if !fits || s.is_empty() {
            // Value by value: past 2 GiB each is nulled and counted.
            for _ in 0..n {
                let at = self.values.len();
                self.values.extend_from_slice(s.as_bytes());
                self.close(at);
            }
            return;
        }
        // The text once, then doubled in place; offsets in one pass.
        self.values.truncate(start);
        self.values.extend_from_slice(s.as_bytes());
        let end = start + s.len() * n;
        while self.values.len() < end {
            let have = self.values.len() - start;
            let take = have.min(end - self.values.len());
            self.values.extend_from_within(start..start + take);
        }
        // `end` fits an i32 (checked above), so every offset does.
        let (base, len) = (start as i32, s.len() as i32);
        self.offsets.extend((1..=n as i32).map(|i| base + i * len));
        self.nulls.append_n_non_nulls(n);
    }

    fn build(binary: bool, offsets: Vec<i32>, values: Vec<u8>, nulls: Option<arrow::buffer::NullBuffer>) -> ArrayRef {
        let len = offsets.len().saturating_sub(1);
        let empty = || -> ArrayRef {
            if binary {
                Arc::new(BinaryArray::new_null(len))
            } else {
                Arc::new(StringArray::new_null(len))
            }
        };
        if offsets.is_empty() {
            return empty();
        }
        let offsets = OffsetBuffer::new(ScalarBuffer::from(offsets));
        let values = Buffer::from_vec(values);
        let built: Result<ArrayRef, _> = if binary {
            BinaryArray::try_new(offsets, values, nulls).map(|a| Arc::new(a) as ArrayRef)
        } else {
            StringArray::try_new(offsets, values, nulls).map(|a| Arc::new(a) as ArrayRef)
        };
        built.unwrap_or_else(|e| {
            // Every writer here gives UTF-8 (Utf8) and monotonic offsets.
            debug_assert!(false, "text column: {e}");
            empty()
        })
    }
}

/// A fixed text (a registry name) kept padded for fixed-size copies.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Name {
    /// Up to 32 octets, padded.
    Short([u8; 32], usize),
    /// Longer names, copied as usual.
    Long(&'static str),
}

impl Name {
    pub(crate) fn new(s: &'static str) -> Self {
        let mut padded = [0u8; 32];
        match padded.get_mut(..s.len()) {
            Some(dst) => {
                dst.copy_from_slice(s.as_bytes());
                Self::Short(padded, s.len())
            }
            None => Self::Long(s),
        }
    }
}

impl TextBuilder {
    /// Appends a [`Name`].
    #[inline]
    pub(crate) fn append_name(&mut self, name: &Name) {
        match name {
            Name::Short(bytes, len) => self.append_short(bytes, *len),
            Name::Long(s) => self.append_value(s),
        }
    }
}

impl fmt::Write for TextBuilder {
    #[inline]
    fn write_str(&mut self, s: &str) -> fmt::Result {
        self.values.extend_from_slice(s.as_bytes());
        Ok(())
    }
}

impl ArrayBuilder for TextBuilder {
    fn len(&self) -> usize {
        self.offsets.len().saturating_sub(1)
    }

    fn finish(&mut self) -> ArrayRef {
        self.values.truncate(self.pending_start());
        let offsets = std::mem::replace(&mut self.offsets, vec![0]);
        let values = std::mem::take(&mut self.values);
        let nulls = self.nulls.finish();
        Self::build(self.binary, offsets, values, nulls)
    }

    fn finish_cloned(&self) -> ArrayRef {
        let mut values = self.values.clone();
        values.truncate(self.pending_start());
        Self::build(self.binary, self.offsets.clone(), values, self.nulls.finish_cloned())
    }

    super::any_impls!();
}

/// Dotted-decimal text of every octet value, padded to 4 octets with the
/// length in the last: `b"192\x03"`, `b"7\0\0\x01"`.
#[allow(clippy::indexing_slicing, reason = "const fn; i < 256 by the loop")]
const fn octet_texts() -> [[u8; 4]; 256] {
    let mut t = [[0u8; 4]; 256];
    let mut i = 0;
    while i < 256 {
        let v = i as u8;
        t[i] = if v >= 100 {
            [b'0' + v / 100, b'0' + v / 10 % 10, b'0' + v % 10, 3]
        } else if v >= 10 {
            [b'0' + v / 10, b'0' + v % 10, 0, 2]
        } else {
            [b'0' + v, 0, 0, 1]
        };
        i += 1;
    }
    t
}

static OCTETS: [[u8; 4]; 256] = octet_texts();

/// Writes an IPv4 address in dotted decimal into `out`; returns the length
/// (7 to 15).
#[inline]
pub(crate) fn ipv4_text(a: [u8; 4], out: &mut [u8; 16]) -> usize {
    let mut n = 0usize;
    for (i, octet) in a.into_iter().enumerate() {
        let [d0, d1, d2, len] = OCTETS.get(usize::from(octet)).copied().unwrap_or([b'0', 0, 0, 1]);
        if let Some(dst) = out.get_mut(n..n + 4) {
            dst.copy_from_slice(&[d0, d1, d2, b'.']);
        }
        n += usize::from(len);
        if i < 3 {
            if let Some(dot) = out.get_mut(n) {
                *dot = b'.';
            }
            n += 1;
        }
    }
    n
}

/// Lower-case hex of every octet value.
const fn hex_pairs() -> [[u8; 2]; 256] {
    const HEX: &[u8; 16] = b"0123456789abcdef";
    let mut t = [[0u8; 2]; 256];
    let mut i = 0;
    while i < 256 {
        #[allow(clippy::indexing_slicing, reason = "const fn; i < 256 and nibbles < 16")]
        {
            t[i] = [HEX[i >> 4], HEX[i & 0xf]];
        }
        i += 1;
    }
    t
}

static HEX_PAIRS: [[u8; 2]; 256] = hex_pairs();

/// For every mask of zero groups (bit i: group i is zero), the start and
/// length of the run RFC 5952 §4.2 shortens to `::`: the longest of two or
/// more, the first if tied; (8, 0) when there is none.
const fn zero_runs() -> [(u8, u8); 256] {
    let mut t = [(8u8, 0u8); 256];
    let mut mask = 0usize;
    while mask < 256 {
        let (mut best, mut best_len, mut run, mut run_len, mut i) = (8u8, 0u8, 0u8, 0u8, 0u8);
        while i < 8 {
            if mask & (1 << i) != 0 {
                if run_len == 0 {
                    run = i;
                }
                run_len += 1;
                if run_len > best_len {
                    best = run;
                    best_len = run_len;
                }
            } else {
                run_len = 0;
            }
            i += 1;
        }
        #[allow(clippy::indexing_slicing, reason = "const fn; mask < 256")]
        {
            t[mask] = if best_len >= 2 { (best, best_len) } else { (8, 0) };
        }
        mask += 1;
    }
    t
}

static ZERO_RUNS: [(u8, u8); 256] = zero_runs();

/// Writes an IPv6 address in the RFC 5952 text form into `out`; returns the
/// length. Lower-case hex without leading zeros (§4.1, §4.3), the longest
/// run of two or more zero groups as `::`, the first of equal runs (§4.2);
/// IPv4-mapped addresses as `::ffff:a.b.c.d` (§5). The same text as std's
/// `Display` for `Ipv6Addr` (a property test compares them).
#[inline]
pub(crate) fn ipv6_text(a: &[u8; 16], out: &mut [u8; 48]) -> usize {
    let mut seg = [0u16; 8];
    for (s, pair) in seg.iter_mut().zip(a.chunks_exact(2)) {
        *s = u16::from_be_bytes([pair.first().copied().unwrap_or(0), pair.get(1).copied().unwrap_or(0)]);
    }
    let mut n = 0usize;
    // Writes up to 4 octets at `n` (the buffer has room past the longest text).
    let mut put4 = |w: [u8; 4], len: usize, n: &mut usize| {
        if let Some(dst) = out.get_mut(*n..*n + 4) {
            dst.copy_from_slice(&w);
        }
        *n += len;
    };
    if let [0, 0, 0, 0, 0, 0xffff, _, _] = seg {
        // §5: IPv4-mapped, the last 32 bits in dotted decimal.
        put4(*b"::ff", 4, &mut n);
        put4(*b"ff:\0", 3, &mut n);
        let mut v4 = [0u8; 16];
        let [.., w, x, y, z] = *a;
        let len = ipv4_text([w, x, y, z], &mut v4);
        for chunk in v4.chunks_exact(4).take(len.div_ceil(4)) {
            let c: [u8; 4] = chunk.try_into().unwrap_or_default();
            put4(c, 4, &mut n);
        }
        return 7 + len;
    }
    // §4.2.3: the longest run of zero groups, the first if tied; §4.2.2: not
    // a single one. Looked up by the mask of zero groups.
    let mut zeros = 0u8;
    for (i, s) in seg.iter().enumerate() {
        zeros |= u8::from(*s == 0) << i;
    }
    let (best, best_len) = ZERO_RUNS.get(usize::from(zeros)).map_or((8, 0), |(b, l)| (usize::from(*b), usize::from(*l)));
    let mut i = 0usize;
    while i < 8 {
        if i == best {
            put4(*b"::\0\0", 2, &mut n);
            i += best_len;
            continue;
        }
        if i > 0 && i != best + best_len {
            put4(*b":\0\0\0", 1, &mut n);
        }
        let s = seg.get(i).copied().unwrap_or(0);
        let [hi, lo] = s.to_be_bytes();
        let [h0, h1] = HEX_PAIRS.get(usize::from(hi)).copied().unwrap_or_default();
        let [l0, l1] = HEX_PAIRS.get(usize::from(lo)).copied().unwrap_or_default();
        // §4.1: no leading zeros; the digits are shifted to the front.
        let digits = (4 - (s.leading_zeros() / 4) as usize).max(1);
        let w = u32::from_be_bytes([h0, h1, l0, l1]) << (8 * (4 - digits));
        put4(w.to_be_bytes(), digits, &mut n);
        i += 1;
    }
    n
}

#[cfg(test)]
mod tests {
    use std::fmt::Write as _;
    use std::net::{Ipv4Addr, Ipv6Addr};

    use arrow::array::Array;
    use proptest::prelude::*;

    use super::*;

    fn v6(a: [u8; 16]) -> String {
        let mut buf = [0u8; 48];
        let n = ipv6_text(&a, &mut buf);
        String::from_utf8(buf[..n].to_vec()).unwrap()
    }

    #[test]
    fn rfc5952_examples() {
        // RFC 5952 §4.2.1, §4.2.2, §4.2.3, §4.3, §5 (examples from the text).
        for (addr, text) in [
            ("2001:db8:0:0:0:0:2:1", "2001:db8::2:1"),
            ("2001:db8:0:1:1:1:1:1", "2001:db8:0:1:1:1:1:1"),
            ("2001:0:0:1:0:0:0:1", "2001:0:0:1::1"),
            ("2001:db8:0:0:1:0:0:1", "2001:db8::1:0:0:1"),
            ("2001:DB8::AAAA", "2001:db8::aaaa"),
            ("::ffff:192.0.2.1", "::ffff:192.0.2.1"),
            ("::", "::"),
            ("::1", "::1"),
            ("1::", "1::"),
        ] {
            let a: Ipv6Addr = addr.parse().unwrap();
            assert_eq!(v6(a.octets()), text, "{addr}");
        }
    }

    proptest! {
        /// The same text as std's Display (RFC 5952), for addresses with many zero groups.
        #[test]
        fn ipv6_matches_std(groups in proptest::array::uniform8(prop_oneof![Just(0u16), Just(0xffffu16), any::<u16>()])) {
            let a = Ipv6Addr::from(groups);
            prop_assert_eq!(v6(a.octets()), a.to_string());
        }

        #[test]
        fn ipv4_matches_std(a in any::<[u8; 4]>()) {
            let mut buf = [0u8; 16];
            let n = ipv4_text(a, &mut buf);
            prop_assert_eq!(std::str::from_utf8(&buf[..n]).unwrap(), Ipv4Addr::from(a).to_string());
        }
    }

    #[test]
    fn text_builder_round_trip() {
        let mut b = TextBuilder::with_capacity(4, 8);
        b.append_short(b"abcdefgh", 3);
        b.append_null();
        let _ = write!(b, "x{}", 7);
        b.append_value("y");
        b.append_nulls(2);
        b.append_repeated("zz", 2);
        b.append_option(None);
        b.append_name(&Name::new("acl-deny"));
        b.append_name(&Name::new("a-registry-name-longer-than-32-octets"));
        let a = b.finish();
        let a = a.as_any().downcast_ref::<StringArray>().unwrap();
        let got: Vec<Option<&str>> = a.iter().collect();
        assert_eq!(got, [Some("abc"), None, Some("x7y"), None, None, Some("zz"), Some("zz"), None, Some("acl-deny"), Some("a-registry-name-longer-than-32-octets")]);
        assert_eq!(b.len(), 0);
        b.append_value("again");
        assert_eq!(b.finish().len(), 1);
    }

    #[test]
    fn binary_columns_take_any_octets() {
        let mut b = TextBuilder::binary_with_capacity(2, 8);
        b.append_short(&[0xff, 0x00, 0x80, 0, 0, 0, 0, 0], 3);
        b.append_bytes(&[0xc3]);
        b.append_null();
        let a = b.finish();
        let a = a.as_any().downcast_ref::<BinaryArray>().unwrap();
        assert_eq!(a.iter().collect::<Vec<_>>(), [Some(&[0xff, 0x00, 0x80][..]), Some(&[0xc3][..]), None]);
    }

    #[test]
    fn null_discards_half_written_text() {
        let mut b = TextBuilder::with_capacity(2, 8);
        let _ = write!(b, "lost");
        b.append_null();
        b.append_value("kept");
        let a = b.finish();
        let a = a.as_any().downcast_ref::<StringArray>().unwrap();
        assert_eq!(a.iter().collect::<Vec<_>>(), [None, Some("kept")]);
    }
}
