//! The primitive column builder (integers, floats, timestamps).
//!
//! Arrow's `PrimitiveBuilder` appends repeated values one at a time and
//! gives no way to extend its values from an iterator; a column of a
//! fixed-layout set is converted in one loop, so here the values are a
//! plain vector that such a loop extends directly (with no capacity check
//! per value), next to a null buffer. The vector becomes a
//! [`PrimitiveArray`] through Arrow's checked constructor.

use std::sync::Arc;

use arrow::array::builder::NullBufferBuilder;
use arrow::array::{ArrayBuilder, ArrayRef, ArrowPrimitiveType, PrimitiveArray};
use arrow::buffer::ScalarBuffer;
use arrow::datatypes::DataType as ArrowType;

/// A primitive column under construction.
#[derive(Debug)]
pub(crate) struct Prim<T: ArrowPrimitiveType> {
    values: Vec<T::Native>,
    nulls: NullBufferBuilder,
    data_type: ArrowType,
}

impl<T: ArrowPrimitiveType> Prim<T> {
    /// Room for `items` values.
    pub(crate) fn with_capacity(items: usize) -> Self {
        Self { values: Vec::with_capacity(items), nulls: NullBufferBuilder::new(items), data_type: T::DATA_TYPE }
    }

    /// The same values under `data_type` (a Timestamp with its time zone);
    /// it must have `T`'s physical type.
    pub(crate) fn with_data_type(self, data_type: ArrowType) -> Self {
        Self { data_type, ..self }
    }

    #[inline]
    pub(crate) fn append_value(&mut self, v: T::Native) {
        self.values.push(v);
        self.nulls.append_non_null();
    }

    #[inline]
    pub(crate) fn append_null(&mut self) {
        self.values.push(T::Native::default());
        self.nulls.append_null();
    }

    pub(crate) fn append_nulls(&mut self, n: usize) {
        self.values.resize(self.values.len().saturating_add(n), T::Native::default());
        self.nulls.append_n_nulls(n);
    }

    #[inline]
    pub(crate) fn append_option(&mut self, v: Option<T::Native>) {
        match v {
            Some(v) => self.append_value(v),
            None => self.append_null(),
        }
    }

    pub(crate) fn append_slice(&mut self, v: &[T::Native]) {
        self.values.extend_from_slice(v);
        self.nulls.append_n_non_nulls(v.len());
    }

    /// Appends `v` `n` times.
    pub(crate) fn append_value_n(&mut self, v: T::Native, n: usize) {
        self.values.resize(self.values.len().saturating_add(n), v);
        self.nulls.append_n_non_nulls(n);
    }

    /// Appends every value `values` yields (none null).
    #[inline]
    pub(crate) fn extend_values(&mut self, values: impl ExactSizeIterator<Item = T::Native>) {
        let n = values.len();
        let start = self.values.len();
        // Filled at once, then overwritten in place: no capacity check per
        // value, which `Vec::extend` does for iterators of unknown origin.
        self.values.resize(start.saturating_add(n), T::Native::default());
        if let Some(dst) = self.values.get_mut(start..) {
            for (d, v) in dst.iter_mut().zip(values) {
                *d = v;
            }
        }
        self.nulls.append_n_non_nulls(n);
    }

    fn build(values: Vec<T::Native>, nulls: Option<arrow::buffer::NullBuffer>, data_type: &ArrowType) -> ArrayRef {
        let len = values.len();
        match PrimitiveArray::<T>::try_new(ScalarBuffer::from(values), nulls) {
            Ok(a) if PrimitiveArray::<T>::is_compatible(data_type) => Arc::new(a.with_data_type(data_type.clone())),
            other => {
                // Every writer here keeps values and nulls in step, and the
                // types are the schema's.
                debug_assert!(false, "primitive column: {:?}", other.err());
                arrow::array::new_null_array(data_type, len)
            }
        }
    }
}

impl<T: ArrowPrimitiveType> ArrayBuilder for Prim<T> {
    fn len(&self) -> usize {
        self.values.len()
    }

    fn finish(&mut self) -> ArrayRef {
        let values = std::mem::take(&mut self.values);
        let nulls = self.nulls.finish();
        Self::build(values, nulls, &self.data_type)
    }

    fn finish_cloned(&self) -> ArrayRef {
        Self::build(self.values.clone(), self.nulls.finish_cloned(), &self.data_type)
    }

    super::any_impls!();
}
