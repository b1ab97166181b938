//! The FixedSizeBinary column builder: unsigned256 values, and in the
//! native layout addresses and MAC addresses as sent.
//!
//! Arrow's own builder checks each value's length and returns a `Result`
//! per value; a column of a fixed-layout set is known to have the width
//! before the loop, so here a whole column is copied at a fixed size with
//! no per-value check. The buffers become a [`FixedSizeBinaryArray`]
//! through Arrow's checked constructor.

use std::sync::Arc;

use arrow::array::builder::NullBufferBuilder;
use arrow::array::{ArrayBuilder, ArrayRef, FixedSizeBinaryArray};
use arrow::buffer::Buffer;

/// Appends the `L` octets at `s` of every record to `values`, end to end,
/// each as one fixed-size copy; false, with `values` as it was, when a
/// record is too short.
#[inline]
pub(crate) fn copy_fields<'r, const L: usize>(
    values: &mut Vec<u8>,
    records: impl ExactSizeIterator<Item = &'r [u8]>,
    s: usize,
) -> bool {
    let start = values.len();
    if L < 16 {
        // Short values: zero-filled at once, then overwritten in place
        // (for 4-octet addresses 8 M fewer instructions a decode-bench
        // iteration than appending each, callgrind).
        values.resize(start.saturating_add(records.len().saturating_mul(L)), 0);
        let mut whole = true;
        if let Some(dst) = values.get_mut(start..) {
            for (d, r) in dst.chunks_exact_mut(L).zip(records) {
                match (d.first_chunk_mut::<L>(), r.get(s..).and_then(|t| t.first_chunk::<L>())) {
                    (Some(d), Some(v)) => *d = *v,
                    _ => whole = false,
                }
            }
        }
        if !whole {
            values.truncate(start);
        }
        return whole;
    }
    // Longer ones: reserved once and appended, so the column is written
    // once rather than zero-filled and written again.
    values.reserve(records.len().saturating_mul(L));
    for r in records {
        match r.get(s..).and_then(|t| t.first_chunk::<L>()) {
            Some(v) => values.extend_from_slice(v),
            None => {
                values.truncate(start);
                return false;
            }
        }
    }
    true
}

/// A FixedSizeBinary column under construction.
#[derive(Debug)]
pub(crate) struct FixedBuilder {
    width: usize,
    values: Vec<u8>,
    nulls: NullBufferBuilder,
}

impl FixedBuilder {
    /// Values of `width` octets, room for `items`.
    pub(crate) fn with_capacity(width: usize, items: usize) -> Self {
        Self {
            width,
            values: Vec::with_capacity(width.saturating_mul(items)),
            nulls: NullBufferBuilder::new(items),
        }
    }

    /// The width of every value.
    pub(crate) const fn width(&self) -> usize {
        self.width
    }

    /// Appends `v`; false, with nothing appended, when it is not `width`
    /// octets long.
    #[inline]
    pub(crate) fn append_value(&mut self, v: &[u8]) -> bool {
        if v.len() != self.width {
            return false;
        }
        self.values.extend_from_slice(v);
        self.nulls.append_non_null();
        true
    }

    /// Appends the `n` values laid end to end in `packed` (the caller
    /// checks that it holds `n` times the width).
    #[inline]
    pub(crate) fn append_packed(&mut self, packed: &[u8], n: usize) {
        debug_assert_eq!(n * self.width, packed.len());
        self.values.extend_from_slice(packed.get(..n * self.width).unwrap_or_default());
        self.nulls.append_n_non_nulls(n);
    }

    /// Appends a null (`width` zero octets in the values).
    pub(crate) fn append_null(&mut self) {
        self.append_nulls(1);
    }

    /// Appends `n` nulls.
    pub(crate) fn append_nulls(&mut self, n: usize) {
        let len = self.values.len().saturating_add(self.width.saturating_mul(n));
        self.values.resize(len, 0);
        self.nulls.append_n_nulls(n);
    }

    /// Appends the `L` octets at `s` of every record (`L` must be the
    /// width); false, with nothing appended, otherwise or when a record is
    /// too short.
    #[inline]
    pub(crate) fn append_column<'r, const L: usize>(
        &mut self,
        records: impl ExactSizeIterator<Item = &'r [u8]>,
        s: usize,
    ) -> bool {
        let n = records.len();
        if L != self.width {
            return false;
        }
        if !copy_fields::<L>(&mut self.values, records, s) {
            return false;
        }
        self.nulls.append_n_non_nulls(n);
        true
    }

    fn build(width: usize, values: Vec<u8>, nulls: Option<arrow::buffer::NullBuffer>) -> ArrayRef {
        let w = i32::try_from(width).unwrap_or(i32::MAX);
        let len = values.len().checked_div(width).unwrap_or(0);
        FixedSizeBinaryArray::try_new(w, Buffer::from_vec(values), nulls).map_or_else(
            |e| {
                // Every writer here appends `width` octets per value.
                debug_assert!(false, "fixed-width column: {e}");
                Arc::new(FixedSizeBinaryArray::new_null(w, len)) as ArrayRef
            },
            |a| Arc::new(a) as ArrayRef,
        )
    }
}

impl ArrayBuilder for FixedBuilder {
    fn len(&self) -> usize {
        self.nulls.len()
    }

    fn finish(&mut self) -> ArrayRef {
        let values = std::mem::take(&mut self.values);
        let nulls = self.nulls.finish();
        Self::build(self.width, values, nulls)
    }

    fn finish_cloned(&self) -> ArrayRef {
        Self::build(self.width, self.values.clone(), self.nulls.finish_cloned())
    }

    super::any_impls!();
}
