//! The by-tag functions' accumulator: a coarse group's rows (a bucket of tags, a site, a
//! file partition) split by tag inside the function, each tag's result the per-tag
//! function's.

use std::borrow::Cow;
use std::sync::Arc;

use datafusion::arrow::array::{Array, ArrayRef, AsArray, StringArray, StringBuilder, StructArray};
use datafusion::arrow::datatypes::{DataType, Field, Fields};
use datafusion::common::{Result, ScalarValue, exec_err};
use datafusion::logical_expr::{Accumulator, EmitTo, GroupsAccumulator};

use crate::{
    Gathered, GroupTimes, Task, one_row_lists, readings_of, result_rows, run, state_lists, times_ms,
};

/// The result type of a by-tag function: a list with one struct per tag, the tag first.
pub(crate) fn tagged_rows(fields: &Fields) -> DataType {
    DataType::List(list_item(tagged_fields(fields)))
}

/// `tag`, then `fields`.
fn tagged_fields(fields: &Fields) -> Fields {
    let mut all = vec![Arc::new(Field::new("tag", DataType::Utf8, true))];
    all.extend(fields.iter().cloned());
    all.into()
}

/// The item of a list of structs with `fields`.
fn list_item(fields: Fields) -> Arc<Field> {
    Arc::new(Field::new("item", DataType::Struct(fields), true))
}

/// A tag column of any string type, read row by row.
pub(crate) enum Tags<'a> {
    Plain(&'a datafusion::arrow::array::StringArray),
    Large(&'a datafusion::arrow::array::LargeStringArray),
    View(&'a datafusion::arrow::array::StringViewArray),
}

impl<'a> Tags<'a> {
    fn of(array: &'a ArrayRef, what: &str) -> Result<Self> {
        Ok(match array.data_type() {
            DataType::Utf8 => Tags::Plain(array.as_string::<i32>()),
            DataType::LargeUtf8 => Tags::Large(array.as_string::<i64>()),
            DataType::Utf8View => Tags::View(array.as_string_view()),
            other => return exec_err!("{what}: tag column of type {other}"),
        })
    }

    fn len(&self) -> usize {
        match self {
            Tags::Plain(a) => a.len(),
            Tags::Large(a) => a.len(),
            Tags::View(a) => a.len(),
        }
    }

    /// Row `i`'s tag (`None` for a null).
    fn get(&self, i: usize) -> Option<&'a str> {
        match self {
            Tags::Plain(a) => a.is_valid(i).then(|| a.value(i)),
            Tags::Large(a) => a.is_valid(i).then(|| a.value(i)),
            Tags::View(a) => a.is_valid(i).then(|| a.value(i)),
        }
    }

    /// Whether rows `i` and `j` carry the same tag. Two equal views are the same text (a
    /// view holds the length and either all the bytes or where they are), which is how a
    /// reader hands over one dictionary entry repeated: no bytes compared.
    fn same(&self, i: usize, j: usize) -> bool {
        if let Tags::View(a) = self
            && a.views()[i] == a.views()[j]
            && a.is_valid(i) == a.is_valid(j)
        {
            return true;
        }
        self.get(i) == self.get(j)
    }
}

/// A batch's tags, epoch milliseconds and readings (NaN = missing).
type TaggedRows<'a> = (Tags<'a>, Cow<'a, [i64]>, Cow<'a, [f64]>);

/// One group's tags, each with its series.
#[derive(Debug, Default)]
struct TagSet {
    /// Each tag's series index.
    index: std::collections::HashMap<Box<str>, usize>,
    /// The series of rows without a tag.
    untagged: Option<usize>,
    /// The tag of each series (`None`: rows without a tag).
    names: Vec<Option<Box<str>>>,
    gathered: Gathered,
    /// Bytes of the tags' text (held twice: index and names).
    text_bytes: usize,
}

impl TagSet {
    /// The series index of `tag`, a new series for a tag not seen before.
    fn slot(&mut self, tag: Option<&str>) -> usize {
        let next = self.names.len();
        let found = match tag {
            Some(t) => self.index.get(t).copied(),
            None => self.untagged,
        };
        if let Some(k) = found {
            return k;
        }
        match tag {
            Some(t) => {
                self.index.insert(t.into(), next);
                self.text_bytes += 2 * t.len();
            }
            None => self.untagged = Some(next),
        }
        self.names.push(tag.map(Into::into));
        self.gathered.grow_to(next + 1);
        next
    }

    /// Heap bytes held (the index's table estimated from its capacity).
    fn heap_bytes(&self) -> usize {
        self.gathered.heap_bytes()
            + self.text_bytes
            + self.index.capacity() * (std::mem::size_of::<(Box<str>, usize)>() + 1)
            + self.names.capacity() * std::mem::size_of::<Option<Box<str>>>()
    }
}

/// The by-tag functions' accumulator: per group, the readings of every tag in it. The
/// engine groups rows by a coarse key (a bucket of tags, a site, a file partition) and
/// this splits each group's rows by tag itself: a tag's readings usually come in runs,
/// and one look-up per run replaces the engine's hashing of the tag on every row. Each
/// group's result is a list with one row per tag, in tag order, each row the same function
/// of the tag's readings as the per-tag function's result.
#[derive(Debug)]
pub(crate) struct TagGroups {
    task: Task,
    sets: Vec<TagSet>,
    /// Heap bytes of all sets (kept current as they grow).
    bytes: usize,
}

impl TagGroups {
    pub(crate) fn new(task: Task) -> Self {
        TagGroups {
            task,
            sets: Vec::new(),
            bytes: 0,
        }
    }

    fn grow_to(&mut self, groups: usize) {
        if self.sets.len() < groups {
            self.sets.resize_with(groups, TagSet::default);
        }
    }

    /// Rows `tags`, `times`, `readings` into the groups `group_of(row)`, the rows a
    /// `filter` passes only; one look-up per run of rows with the same group and tag.
    fn add(
        &mut self,
        tags: &Tags<'_>,
        times: &[i64],
        readings: &[f64],
        group_of: impl Fn(usize) -> usize,
        filter: Option<&datafusion::arrow::array::BooleanArray>,
    ) {
        let n = times.len();
        let mut row = 0;
        while row < n {
            let g = group_of(row);
            let mut end = row + 1;
            while end < n && group_of(end) == g && tags.same(end, row) {
                end += 1;
            }
            let set = &mut self.sets[g];
            let before = set.heap_bytes();
            let k = set.slot(tags.get(row));
            set.gathered
                .extend_rows(k, times, readings, row..end, filter);
            self.bytes = self.bytes + set.heap_bytes() - before;
            row = end;
        }
    }

    /// The sets `emit_to` asks for, removed.
    fn take(&mut self, emit_to: EmitTo) -> Vec<TagSet> {
        let sets = emit_to.take_needed(&mut self.sets);
        let gone: usize = sets.iter().map(TagSet::heap_bytes).sum();
        self.bytes -= gone.min(self.bytes);
        sets
    }

    /// The columns `[tag, ts, value]` of `values`, checked.
    fn columns<'a>(&self, values: &'a [ArrayRef]) -> Result<TaggedRows<'a>> {
        let what = self.task.name();
        let [tags, times, readings, ..] = values else {
            return exec_err!("{what}: expected tag, time and value columns");
        };
        let (tags, times, readings) = (
            Tags::of(tags, what)?,
            times_ms(times, what)?,
            readings_of(readings)?,
        );
        let n = times.len();
        if readings.len() != n || tags.len() != n {
            return exec_err!("{what}: tag, time and value columns differ in length");
        }
        Ok((tags, times, readings))
    }
}

impl GroupsAccumulator for TagGroups {
    fn update_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        opt_filter: Option<&datafusion::arrow::array::BooleanArray>,
        total_num_groups: usize,
    ) -> Result<()> {
        let (tags, times, readings) = self.columns(values)?;
        if group_indices.len() != times.len() {
            return exec_err!("{}: group indices and rows differ", self.task.name());
        }
        self.grow_to(total_num_groups);
        self.add(&tags, &times, &readings, |i| group_indices[i], opt_filter);
        Ok(())
    }

    fn merge_batch(
        &mut self,
        values: &[ArrayRef],
        group_indices: &[usize],
        total_num_groups: usize,
    ) -> Result<()> {
        let [tags, times, readings, ..] = values else {
            return exec_err!("{}: state of three lists expected", self.task.name());
        };
        let (tags, times, readings) = (
            tags.as_list::<i32>(),
            times.as_list::<i32>(),
            readings.as_list::<i32>(),
        );
        self.grow_to(total_num_groups);
        for (row, &g) in group_indices.iter().enumerate() {
            if times.is_null(row) {
                continue;
            }
            let columns = [tags.value(row), times.value(row), readings.value(row)];
            let (t, ms, v) = self.columns(&columns)?;
            self.add(&t, &ms, &v, |_| g, None);
        }
        Ok(())
    }

    fn state(&mut self, emit_to: EmitTo) -> Result<Vec<ArrayRef>> {
        use datafusion::arrow::array::{Float64Array, Int64Array};
        use datafusion::arrow::buffer::OffsetBuffer;
        let sets = self.take(emit_to);
        let per_set = |s: &TagSet| s.gathered.times.iter().map(GroupTimes::len).sum::<usize>();
        let offsets = OffsetBuffer::<i32>::from_lengths(sets.iter().map(per_set));
        let total: usize = sets.iter().map(per_set).sum();
        let mut tags = StringBuilder::with_capacity(total, 0);
        let mut all_times = Vec::with_capacity(total);
        let mut all_values = Vec::with_capacity(total);
        let mut buffer = Vec::new();
        for set in &sets {
            for ((name, t), v) in set
                .names
                .iter()
                .zip(&set.gathered.times)
                .zip(&set.gathered.values)
            {
                for _ in 0..t.len() {
                    tags.append_option(name.as_deref());
                }
                all_times.extend_from_slice(t.as_slice(&mut buffer));
                all_values.extend_from_slice(v);
            }
        }
        Ok(state_lists(
            &offsets,
            None,
            vec![
                Arc::new(tags.finish()),
                Arc::new(Int64Array::from(all_times)),
                Arc::new(Float64Array::from(all_values)),
            ],
        ))
    }

    fn evaluate(&mut self, emit_to: EmitTo) -> Result<ArrayRef> {
        use datafusion::arrow::array::ListArray;
        use datafusion::arrow::buffer::OffsetBuffer;
        let sets = self.take(emit_to);
        // Each set's series in tag order (rows without a tag first).
        let mut order = Vec::new();
        let mut lengths = Vec::with_capacity(sets.len());
        for (s, set) in sets.iter().enumerate() {
            let start = order.len();
            order.extend((0..set.names.len()).map(|k| (s, k)));
            order[start..].sort_by(|a, b| set.names[a.1].cmp(&set.names[b.1]));
            lengths.push(set.names.len());
        }
        let task = &self.task;
        let outcomes = order.iter().map(|&(s, k)| {
            let g = &sets[s].gathered;
            run(task, &g.times[k], &g.values[k])
        });
        let rows = result_rows(task, outcomes);
        let tags: StringArray = order
            .iter()
            .map(|&(s, k)| sets[s].names[k].as_deref())
            .collect();
        let fields = tagged_fields(rows.fields());
        let (_, columns, _) = rows.into_parts();
        let mut all: Vec<ArrayRef> = vec![Arc::new(tags)];
        all.extend(columns);
        let rows = StructArray::try_new(fields.clone(), all, None)?;
        Ok(Arc::new(ListArray::try_new(
            list_item(fields),
            OffsetBuffer::<i32>::from_lengths(lengths),
            Arc::new(rows),
            None,
        )?))
    }

    /// Each row as its own group's state (one reading per list; a row the filter drops is
    /// a null list, which `merge_batch` skips).
    fn convert_to_state(
        &self,
        values: &[ArrayRef],
        opt_filter: Option<&datafusion::arrow::array::BooleanArray>,
    ) -> Result<Vec<ArrayRef>> {
        use datafusion::arrow::array::{Float64Array, Int64Array};
        let (tags, times, readings) = self.columns(values)?;
        let tags: StringArray = (0..times.len()).map(|i| tags.get(i)).collect();
        Ok(one_row_lists(
            vec![
                Arc::new(tags),
                Arc::new(Int64Array::from(times.into_owned())),
                Arc::new(Float64Array::from(readings.into_owned())),
            ],
            opt_filter,
        ))
    }

    fn size(&self) -> usize {
        std::mem::size_of_val(self)
            + self.bytes
            + self.sets.capacity() * std::mem::size_of::<TagSet>()
            + self.task.levels.capacity() * std::mem::size_of::<f64>()
    }
}

/// A by-tag function without `GROUP BY` (the whole input one group).
#[derive(Debug)]
pub(crate) struct TagAccumulator(pub(crate) TagGroups);

impl Accumulator for TagAccumulator {
    fn update_batch(&mut self, values: &[ArrayRef]) -> Result<()> {
        let (tags, times, readings) = self.0.columns(values)?;
        self.0.grow_to(1);
        self.0.add(&tags, &times, &readings, |_| 0, None);
        Ok(())
    }

    fn merge_batch(&mut self, states: &[ArrayRef]) -> Result<()> {
        let rows = states.first().map_or(0, |s| s.len());
        self.0.merge_batch(states, &vec![0; rows], 1)
    }

    fn state(&mut self) -> Result<Vec<ScalarValue>> {
        self.0.grow_to(1);
        self.0
            .state(EmitTo::All)?
            .iter()
            .map(|a| ScalarValue::try_from_array(a, 0))
            .collect()
    }

    fn evaluate(&mut self) -> Result<ScalarValue> {
        self.0.grow_to(1);
        ScalarValue::try_from_array(&self.0.evaluate(EmitTo::All)?, 0)
    }

    fn size(&self) -> usize {
        self.0.size()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tests::{ar1_task, interleaved};
    use datafusion::arrow::datatypes::{Float64Type, Int64Type};

    /// Tags as views: equal views are equal tags without comparing bytes, and unequal
    /// views can still be equal tags (the same text in two buffers, or written twice);
    /// nulls are a tag of their own.
    #[test]
    fn view_tags_compare_by_text() {
        use datafusion::arrow::array::StringViewBuilder;
        let long = "KB-SS000123-DIFFPRESS";
        let mut b = StringViewBuilder::new().with_fixed_block_size(64);
        b.append_value(long);
        b.append_value(long);
        b.append_value("KB-SS000124-DIFFPRESS");
        b.append_null();
        b.append_null();
        b.append_value("short");
        b.append_value("short");
        // Fill the block so the next copy lands in another buffer.
        b.append_value("x".repeat(60));
        b.append_value(long);
        let a: ArrayRef = Arc::new(b.finish());
        let tags = Tags::of(&a, "test").unwrap();
        let Tags::View(v) = &tags else { panic!() };
        assert_ne!(v.views()[0], v.views()[8], "two copies of the text");
        assert!(tags.same(0, 1) && tags.same(0, 8) && tags.same(8, 0));
        assert!(!tags.same(0, 2) && !tags.same(2, 8));
        assert!(tags.same(3, 4) && !tags.same(3, 0) && !tags.same(5, 3));
        assert!(tags.same(5, 6) && !tags.same(5, 7));
        assert_eq!(tags.get(3), None);
        assert_eq!(tags.get(8), Some(long));
    }

    /// The by-tag accumulator: rows of three tags (and untagged rows) interleaved over two
    /// groups give each group a list in tag order whose rows equal the per-tag fits; its
    /// size covers the readings held and returns to its fixed part when they leave; a
    /// state merged elsewhere gives the same results.
    #[test]
    fn by_tag_groups_split_rows_by_tag() {
        let mut task = ar1_task();
        task.tagged = true;
        let n = 300;
        let (arrays, _, series) = interleaved(n);
        // Rows alternate tags A and B (newest first); tag B's rows go to group 1, and
        // every third of A's rows to group 1 as well.
        let tags: Vec<&str> = (0..2 * n)
            .map(|i| if i % 2 == 0 { "A" } else { "B" })
            .collect();
        let groups: Vec<usize> = (0..2 * n)
            .map(|i| usize::from(i % 2 == 1 || (i / 2) % 3 == 0))
            .collect();
        let tag_column: ArrayRef = Arc::new(StringArray::from(tags));
        let columns = [tag_column, arrays[0].clone(), arrays[1].clone()];
        let mut acc = TagGroups::new(task);
        let empty = acc.size();
        acc.update_batch(&columns, &groups, None, 2).unwrap();
        assert!(acc.bytes >= 16 * n, "{}", acc.bytes);
        assert!(acc.size() >= empty + acc.bytes);
        let state = acc.state(EmitTo::All).unwrap();
        assert_eq!(acc.bytes, 0);
        assert_eq!(state.len(), 3);
        assert_eq!(
            state[1].as_list::<i32>().value(0).len() + state[1].as_list::<i32>().value(1).len(),
            2 * n
        );
        let mut last = TagGroups::new(acc.task.clone());
        last.merge_batch(&state, &[0, 1], 2).unwrap();
        let out = last.evaluate(EmitTo::All).unwrap();
        let lists = out.as_list::<i32>();
        // Group 0: A's rows not sent to group 1; group 1: B whole, and the rest of A.
        let g0 = lists.value(0);
        let g1 = lists.value(1);
        let (g0, g1) = (g0.as_struct(), g1.as_struct());
        let names = |s: &StructArray| {
            let t = s.column(0).as_string::<i32>();
            (0..s.len())
                .map(|i| t.value(i).to_string())
                .collect::<Vec<_>>()
        };
        assert_eq!(names(g0), ["A"]);
        assert_eq!(names(g1), ["A", "B"]);
        let sigma2 = g1
            .column_by_name("sigma2")
            .unwrap()
            .as_primitive::<Float64Type>();
        let direct = ar1_task().blueprint.unwrap().fit(&series[1]).unwrap();
        assert_eq!(sigma2.value(1), direct.innovation_variance());
        // Group 1's A: every third reading of A, times three seconds apart: on a grid of
        // 1 s between its first and last reading, two of every three slots are missing.
        let missing = g1
            .column_by_name("missing")
            .unwrap()
            .as_primitive::<Int64Type>();
        let kept = n / 3;
        assert_eq!(missing.value(0) as usize, 3 * (kept - 1) + 1 - kept);
        let readings = g0
            .column_by_name("readings")
            .unwrap()
            .as_primitive::<Int64Type>();
        assert_eq!(readings.value(0) as usize, n - kept);
    }
}
