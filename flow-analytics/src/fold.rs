//! Drops' level-1 aggregation for fixed-width keys: one ordered pass over
//! the scan's batches, with each row's keys packed into three 64-bit words.
//!
//! Polars' streaming group-by encodes every row's keys and updates one
//! reduction per aggregate. A drop query's level-1 keys are usually a few
//! unsigned integers (interface ids, forwardingStatus, sampling rate), so
//! packing them into one integer, finding the group in one hash table and
//! summing in place does the same work in a fraction of the time. The
//! polars scan still reads the files, with projection and predicate
//! pushdown; only the grouping is done here.
//!
//! The result is the frame of
//! `group_by(keys).agg([len(), sum(s)…, min(time), max(time)])`, which
//! `drops_stage1` builds with polars for every other shape of keys.
//! Sums skip nulls and wrap on overflow as polars' do; a group's time
//! bounds are null when all of its values are.

use std::sync::{Arc, Mutex};

use polars::prelude::*;

use crate::error::Error;

/// One key column's place in the packed key: word `word` (of [`WORDS`]) holds,
/// from bit `shift` up, the value's `bits` bits and above them a validity
/// bit (all zero for a null).
struct KeyField {
    name: String,
    dtype: DataType,
    word: usize,
    shift: u32,
    bits: u32,
}

/// The record-time column and the names of its minimum and maximum.
struct Time {
    column: String,
    dtype: DataType,
    first: String,
    last: String,
}

/// What to fold: key, sum and time columns, and output names.
pub(crate) struct Spec {
    keys: Vec<KeyField>,
    /// UInt64 columns summed (the caller casts them), output under the
    /// same names.
    sums: Vec<String>,
    time: Option<Time>,
    /// Output name of the row count.
    records: String,
}

impl Spec {
    /// The spec for `keys` of `schema`; `None` when a key is not an
    /// unsigned integer of at most 32 bits or a boolean, the keys do not fit
    /// [`WORDS`] 64-bit words or the time column is not a datetime.
    ///
    /// `time` is (column, minimum's name, maximum's name).
    pub(crate) fn new(
        schema: &Schema,
        keys: &[String],
        sums: Vec<String>,
        time: Option<(String, String, String)>,
        records: &str,
    ) -> Option<Spec> {
        if keys.is_empty() {
            return None;
        }
        let mut fields = Vec::with_capacity(keys.len());
        // Bits used in each word; a field never straddles two.
        let mut used = [0u32; WORDS];
        for name in keys {
            let dtype = schema.get(name.as_str())?.clone();
            let bits = match dtype {
                DataType::Boolean => 1,
                DataType::UInt8 => 8,
                DataType::UInt16 => 16,
                DataType::UInt32 => 32,
                _ => return None,
            };
            // The value bits and the validity bit.
            let word = used.iter().position(|u| u + bits < u64::BITS)?;
            let shift = *used.get(word)?;
            if let Some(u) = used.get_mut(word) {
                *u += bits + 1;
            }
            fields.push(KeyField {
                name: name.clone(),
                dtype,
                word,
                shift,
                bits,
            });
        }
        let time = match time {
            Some((column, first, last)) => match schema.get(column.as_str()) {
                Some(dtype @ DataType::Datetime(_, _)) => Some(Time {
                    dtype: dtype.clone(),
                    column,
                    first,
                    last,
                }),
                _ => return None,
            },
            None => None,
        };
        Some(Spec {
            keys: fields,
            sums,
            time,
            records: records.to_string(),
        })
    }
}

/// Runs `scan` (which must yield the spec's columns) and folds its batches
/// in input order.
pub(crate) fn fold(scan: LazyFrame, spec: Spec) -> Result<DataFrame, Error> {
    let spec = Arc::new(spec);
    let state = Arc::new(Mutex::new(State::new(&spec)));
    let (for_sink, into) = (Arc::clone(&spec), Arc::clone(&state));
    let sink = scan.sink_batches(
        PlanCallback::new(move |batch: DataFrame| {
            let mut state = into.lock().map_err(|_| poisoned())?;
            state.add(&for_sink, &batch)?;
            // Never stop early.
            Ok(false)
        }),
        true,
        None,
    )?;
    sink.collect_with_engine(Engine::Streaming)?;
    let state = {
        let mut guard = state.lock().map_err(|_| poisoned())?;
        std::mem::replace(&mut *guard, State::new(&spec))
    };
    Ok(state.finish(&spec)?)
}

fn poisoned() -> PolarsError {
    PolarsError::ComputeError("a batch of the drop query failed".into())
}

fn short() -> PolarsError {
    PolarsError::ComputeError("a column is shorter than its batch".into())
}

/// The groups found so far and their running aggregates, by group index.
struct State {
    table: Table,
    /// Packed keys by group.
    keys: Vec<Key>,
    records: Vec<u64>,
    /// Per sum column, per group.
    sums: Vec<Vec<u64>>,
    first: Vec<Option<i64>>,
    last: Vec<Option<i64>>,
    /// Per batch: the words of the packed keys and the group of each row.
    words: [Vec<u64>; WORDS],
    hashes: Vec<u64>,
    groups: Vec<u32>,
}

impl State {
    fn new(spec: &Spec) -> Self {
        State {
            table: Table::new(),
            keys: Vec::new(),
            records: Vec::new(),
            sums: vec![Vec::new(); spec.sums.len()],
            first: Vec::new(),
            last: Vec::new(),
            words: [Vec::new(), Vec::new(), Vec::new()],
            hashes: Vec::new(),
            groups: Vec::new(),
        }
    }

    /// Adds one batch.
    fn add(&mut self, spec: &Spec, batch: &DataFrame) -> PolarsResult<()> {
        let n = batch.height();
        for word in &mut self.words {
            word.clear();
            word.resize(n, 0);
        }
        for key in &spec.keys {
            let word = self.words.get_mut(key.word).ok_or_else(short)?;
            pack(batch.column(&key.name)?.as_materialized_series(), key, word)?;
        }
        self.assign_groups()?;
        for (name, acc) in spec.sums.iter().zip(self.sums.iter_mut()) {
            let values = batch.column(name)?.as_materialized_series().u64()?;
            sum_into(values, &self.groups, acc)?;
        }
        if let Some(time) = &spec.time {
            let series = batch.column(&time.column)?.as_materialized_series().to_physical_repr();
            bounds_into(series.i64()?, &self.groups, &mut self.first, &mut self.last)?;
        }
        Ok(())
    }

    /// Finds (or opens) the group of every row of the batch and counts it.
    ///
    /// The hashes come first, in a loop of their own, so that the probes
    /// of consecutive rows do not wait for each other.
    fn assign_groups(&mut self) -> PolarsResult<()> {
        let [w0, w1, w2] = &self.words;
        self.hashes.clear();
        self.hashes.extend(
            w0.iter()
                .zip(w1)
                .zip(w2)
                .map(|((&a, &b), &c)| Table::hash([a, b, c])),
        );
        self.groups.clear();
        for (((&a, &b), &c), &hash) in w0.iter().zip(w1).zip(w2).zip(&self.hashes) {
            let key = [a, b, c];
            let g = match self.table.find(key, hash, &self.keys) {
                Some(g) => g,
                None => {
                    let g = u32::try_from(self.keys.len())
                        .ok()
                        .filter(|g| *g != EMPTY)
                        .ok_or_else(|| PolarsError::ComputeError("too many groups".into()))?;
                    self.keys.push(key);
                    self.table.insert(hash, g, &self.keys)?;
                    self.records.push(0);
                    for s in &mut self.sums {
                        s.push(0);
                    }
                    self.first.push(None);
                    self.last.push(None);
                    g
                }
            };
            if let Some(r) = self.records.get_mut(g as usize) {
                *r += 1;
            }
            self.groups.push(g);
        }
        Ok(())
    }

    /// The groups as a frame, keys unpacked to their types.
    fn finish(self, spec: &Spec) -> PolarsResult<DataFrame> {
        let mut columns: Vec<Column> = Vec::new();
        for key in &spec.keys {
            let valid = 1u64 << key.bits;
            let mask = valid - 1;
            let values: Vec<Option<u64>> = self
                .keys
                .iter()
                .map(|k| {
                    let field = k.get(key.word).map_or(0, |w| w >> key.shift);
                    (field & valid != 0).then_some(field & mask)
                })
                .collect();
            let name = key.name.as_str().into();
            let column = if key.dtype == DataType::Boolean {
                let flags: Vec<Option<bool>> = values.iter().map(|v| v.map(|v| v != 0)).collect();
                Column::new(name, flags)
            } else {
                Column::new(name, values).cast(&key.dtype)?
            };
            columns.push(column);
        }
        columns.push(Column::new(spec.records.as_str().into(), self.records));
        for (name, sums) in spec.sums.iter().zip(self.sums) {
            columns.push(Column::new(name.as_str().into(), sums));
        }
        if let Some(time) = &spec.time {
            columns.push(Column::new(time.first.as_str().into(), self.first).cast(&time.dtype)?);
            columns.push(Column::new(time.last.as_str().into(), self.last).cast(&time.dtype)?);
        }
        DataFrame::new_infer_height(columns)
    }
}

/// ORs one key column into its word of the packed keys.
fn pack(series: &Series, key: &KeyField, word: &mut [u64]) -> PolarsResult<()> {
    match series.dtype() {
        DataType::Boolean => {
            let valid = 1u64 << key.bits;
            let mut offset = 0usize;
            for array in series.bool()?.downcast_iter() {
                let end = offset + array.len();
                let dst = word.get_mut(offset..end).ok_or_else(short)?;
                let validity = array.validity();
                for (i, d) in dst.iter_mut().enumerate() {
                    if validity.is_none_or(|v| v.get_bit(i)) {
                        *d |= (valid | u64::from(array.values().get_bit(i))) << key.shift;
                    }
                }
                offset = end;
            }
            Ok(())
        }
        DataType::UInt8 => pack_ints(series.u8()?, key, word),
        DataType::UInt16 => pack_ints(series.u16()?, key, word),
        DataType::UInt32 => pack_ints(series.u32()?, key, word),
        other => Err(PolarsError::ComputeError(
            format!("cannot pack a key of type {other}").into(),
        )),
    }
}

fn pack_ints<T>(values: &ChunkedArray<T>, key: &KeyField, word: &mut [u64]) -> PolarsResult<()>
where
    T: PolarsNumericType,
    T::Native: Into<u64>,
{
    let valid = 1u64 << key.bits;
    let shift = key.shift;
    let mut offset = 0usize;
    for array in values.downcast_iter() {
        let slice = array.values().as_slice();
        let end = offset + slice.len();
        let dst = word.get_mut(offset..end).ok_or_else(short)?;
        match array.validity().filter(|v| v.unset_bits() > 0) {
            None => {
                for (d, v) in dst.iter_mut().zip(slice) {
                    *d |= (valid | (*v).into()) << shift;
                }
            }
            Some(ok) => {
                for ((d, v), ok) in dst.iter_mut().zip(slice).zip(ok.iter()) {
                    if ok {
                        *d |= (valid | (*v).into()) << shift;
                    }
                }
            }
        }
        offset = end;
    }
    Ok(())
}

/// Adds each non-null value to its group's sum.
fn sum_into(values: &UInt64Chunked, groups: &[u32], acc: &mut [u64]) -> PolarsResult<()> {
    let mut offset = 0usize;
    for array in values.downcast_iter() {
        let slice = array.values().as_slice();
        let end = offset + slice.len();
        let gs = groups.get(offset..end).ok_or_else(short)?;
        match array.validity().filter(|v| v.unset_bits() > 0) {
            None => {
                for (g, v) in gs.iter().zip(slice) {
                    if let Some(a) = acc.get_mut(*g as usize) {
                        *a = a.wrapping_add(*v);
                    }
                }
            }
            Some(ok) => {
                for ((g, v), ok) in gs.iter().zip(slice).zip(ok.iter()) {
                    if let (true, Some(a)) = (ok, acc.get_mut(*g as usize)) {
                        *a = a.wrapping_add(*v);
                    }
                }
            }
        }
        offset = end;
    }
    Ok(())
}

/// Widens each group's time bounds by its non-null values.
fn bounds_into(
    values: &Int64Chunked,
    groups: &[u32],
    first: &mut [Option<i64>],
    last: &mut [Option<i64>],
) -> PolarsResult<()> {
    let mut offset = 0usize;
    for array in values.downcast_iter() {
        let end = offset + array.len();
        let gs = groups.get(offset..end).ok_or_else(short)?;
        for (g, v) in gs.iter().zip(array.iter()) {
            let (Some(v), Some(lo), Some(hi)) =
                (v, first.get_mut(*g as usize), last.get_mut(*g as usize))
            else {
                continue;
            };
            *lo = Some(lo.map_or(*v, |m| m.min(*v)));
            *hi = Some(hi.map_or(*v, |m| m.max(*v)));
        }
        offset = end;
    }
    Ok(())
}

/// 64-bit words in a packed key.
const WORDS: usize = 3;

/// A packed key.
type Key = [u64; WORDS];

/// The group index a [`Table`] slot holds when empty.
const EMPTY: u32 = u32::MAX;

/// An open-addressing hash table from packed keys to group indexes
/// (linear probing, at most a quarter full: few collisions, and still in
/// the first-level cache for the few hundred groups of a usual query). The
/// keys themselves live in [`State::keys`]; a slot holds the group index.
struct Table {
    slots: Vec<u32>,
}

impl Table {
    fn new() -> Self {
        Table {
            slots: vec![EMPTY; 1024],
        }
    }

    /// Folded 128-bit multiplies of the words (the mixing step of several
    /// fast non-cryptographic hashes); the keys come from local files, so
    /// flooding is no concern.
    fn hash(key: Key) -> u64 {
        let mix = |a: u64, b: u64| {
            let product = u128::from(a) * u128::from(b);
            (product as u64) ^ ((product >> 64) as u64)
        };
        let [a, b, c] = key;
        mix(
            mix(a ^ 0x9e37_79b9_7f4a_7c15, b ^ 0xc2b2_ae3d_27d4_eb4f) ^ c,
            0x1656_67b1_9e37_79f9,
        )
    }

    /// The group of `key` (whose hash is `hash`), if it has one. `keys` are
    /// the keys of the groups.
    #[inline]
    fn find(&self, key: Key, hash: u64, keys: &[Key]) -> Option<u32> {
        let mask = self.slots.len() - 1;
        let mut at = hash as usize & mask;
        loop {
            let g = *self.slots.get(at)?;
            let [a, b, c] = *keys.get(g as usize)?;
            let [x, y, z] = key;
            if a == x && b == y && c == z {
                return Some(g);
            }
            at = (at + 1) & mask;
        }
    }

    /// Adds group `g`, whose key is the last of `keys` and hashes to
    /// `hash`.
    fn insert(&mut self, hash: u64, g: u32, keys: &[Key]) -> PolarsResult<()> {
        if keys.len() * 4 > self.slots.len() {
            self.grow(keys);
            return Ok(());
        }
        let mask = self.slots.len() - 1;
        let mut at = hash as usize & mask;
        for _ in 0..self.slots.len() {
            let slot = self.slots.get_mut(at).ok_or_else(short)?;
            if *slot == EMPTY {
                *slot = g;
                return Ok(());
            }
            at = (at + 1) & mask;
        }
        Err(PolarsError::ComputeError("group table full".into()))
    }

    /// Doubles the slots and places every group again.
    fn grow(&mut self, keys: &[Key]) {
        let size = self.slots.len() * 2;
        let mask = size - 1;
        let mut slots = vec![EMPTY; size];
        for (g, key) in (0u32..).zip(keys) {
            let mut at = Self::hash(*key) as usize & mask;
            while let Some(slot) = slots.get_mut(at) {
                if *slot == EMPTY {
                    *slot = g;
                    break;
                }
                at = (at + 1) & mask;
            }
        }
        self.slots = slots;
    }
}

#[cfg(test)]
mod tests {
    #![allow(clippy::unwrap_used, clippy::indexing_slicing)]

    use super::*;

    /// Rows with nulls in every kind of column and keys of every
    /// supported type.
    fn records() -> DataFrame {
        let n = 500usize;
        // A fixed pseudo-random sequence (64-bit LCG, Knuth's MMIX
        // constants).
        let mut state: u64 = 0x2545_f491_4f6c_dd1d;
        let mut next = move |m: u64| {
            state = state
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (state >> 33) % m
        };
        let mut a = Vec::new();
        let mut b = Vec::new();
        let mut c = Vec::new();
        let mut d = Vec::new();
        let mut s = Vec::new();
        let mut t = Vec::new();
        let mut name = Vec::new();
        for _ in 0..n {
            a.push((next(5) > 0).then(|| u32::MAX - u32::try_from(next(3)).unwrap()));
            b.push((next(6) > 0).then(|| u8::try_from(next(4)).unwrap() * 60));
            c.push((next(7) > 0).then(|| next(2) == 1));
            d.push(Some(u16::try_from(next(2)).unwrap() * 1000));
            s.push((next(4) > 0).then(|| next(1 << 40)));
            t.push((next(4) > 0).then(|| i64::try_from(next(1 << 50)).unwrap()));
            name.push((next(9) == 0).then(|| format!("n{}", next(100))));
        }
        let time = Column::new("time".into(), t)
            .cast(&DataType::Datetime(TimeUnit::Nanoseconds, Some(TimeZone::UTC)))
            .unwrap();
        DataFrame::new_infer_height(vec![
            Column::new("a".into(), a),
            Column::new("b".into(), b),
            Column::new("c".into(), c),
            Column::new("d".into(), d),
            Column::new("s".into(), s),
            time,
            Column::new("name".into(), name),
        ])
        .unwrap()
    }

    #[test]
    fn fold_equals_polars_group_by_over_batches() {
        let df = records();
        let keys: Vec<String> = ["a", "b", "c", "d"].iter().map(|k| k.to_string()).collect();
        let spec = Spec::new(
            &df.schema(),
            &keys,
            vec!["s".to_string()],
            Some(("time".into(), "first".into(), "last".into())),
            "records",
        )
        .unwrap();
        // Three uneven batches: groups and bounds must carry over.
        let mut state = State::new(&spec);
        for (offset, len) in [(0i64, 7usize), (7, 300), (307, 193)] {
            state.add(&spec, &df.slice(offset, len)).unwrap();
        }
        let folded = state.finish(&spec).unwrap();

        let expected = df
            .clone()
            .lazy()
            .group_by(keys.iter().map(|k| col(k.as_str())).collect::<Vec<_>>())
            .agg([
                len().cast(DataType::UInt64).alias("records"),
                col("s").sum().alias("s"),
                col("time").min().alias("first"),
                col("time").max().alias("last"),
            ])
            .collect()
            .unwrap();
        let order = SortMultipleOptions::default().with_nulls_last(true);
        let sorted = |frame: &DataFrame| {
            frame
                .select(expected.get_column_names_owned())
                .unwrap()
                .sort(keys.clone(), order.clone())
                .unwrap()
        };
        assert!(folded.height() > 20, "{folded}");
        assert!(
            sorted(&folded).equals_missing(&sorted(&expected)),
            "{}\n{}",
            sorted(&folded),
            sorted(&expected)
        );
    }

    #[test]
    fn spec_refuses_what_it_cannot_pack() {
        let df = records();
        let spec = |keys: &[&str]| {
            let keys: Vec<String> = keys.iter().map(|k| k.to_string()).collect();
            Spec::new(&df.schema(), &keys, Vec::new(), None, "records")
        };
        assert!(spec(&["a", "b", "c", "d"]).is_some());
        // Signed, 64-bit and text keys go to polars.
        assert!(spec(&["s"]).is_none());
        assert!(spec(&["name"]).is_none());
        assert!(spec(&["time"]).is_none());
        assert!(spec(&[]).is_none());
        // A 32-bit key takes 33 bits with its validity bit and never
        // straddles two words: three fit, four do not.
        let wide = DataFrame::new_infer_height(
            (0..6)
                .map(|i| Column::new(format!("k{i}").into(), [1u32]))
                .collect(),
        )
        .unwrap();
        let keys = |n: usize| (0..n).map(|i| format!("k{i}")).collect::<Vec<_>>();
        let fits = |n: usize| Spec::new(&wide.schema(), &keys(n), Vec::new(), None, "r").is_some();
        assert!(fits(3));
        assert!(!fits(4));
    }
}
