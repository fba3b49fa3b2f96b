//! Long tables in: rows grouped by tag, each tag's readings placed on a regular grid.

use std::collections::BTreeMap;

use arrow_array::cast::AsArray;
use arrow_array::types::{
    Float32Type, Float64Type, Int64Type, TimestampMicrosecondType, TimestampMillisecondType,
    TimestampNanosecondType, TimestampSecondType,
};
use arrow_array::{Array, RecordBatch};
use arrow_schema::{DataType, TimeUnit};
use lagwise::{GridSettings, GriddedSeries};

use crate::{Result, TableError};

/// Which columns of a long table hold the tag, the timestamp and the value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TableLayout {
    tag: String,
    time: String,
    value: String,
}

impl TableLayout {
    /// The columns named `tag`, `time` and `value`.
    pub fn new(tag: impl Into<String>, time: impl Into<String>, value: impl Into<String>) -> Self {
        TableLayout {
            tag: tag.into(),
            time: time.into(),
            value: value.into(),
        }
    }
}

/// One tag's readings on a regular grid, with the report of how they got there.
#[derive(Debug, Clone, PartialEq)]
pub struct TagSeries {
    /// The tag.
    pub tag: String,
    /// Its readings on the grid (time axis, values with NaN for empty slots, report).
    pub series: GriddedSeries,
}

fn column<'a>(batch: &'a RecordBatch, name: &str) -> Result<&'a dyn Array> {
    batch
        .column_by_name(name)
        .map(|c| c.as_ref())
        .ok_or_else(|| TableError::MissingColumn(name.to_string()))
}

fn type_error(column: &str, found: &DataType, expected: &'static str) -> TableError {
    TableError::ColumnType {
        column: column.to_string(),
        found: found.to_string(),
        expected,
    }
}

/// Tags of a column as strings (Utf8, LargeUtf8 or Utf8View).
fn tags_of(a: &dyn Array, name: &str, batch: usize) -> Result<Vec<String>> {
    let get = |i: usize, v: Option<&str>| {
        v.map(str::to_string).ok_or(TableError::NullKey {
            batch,
            row: i,
            what: "tag",
        })
    };
    match a.data_type() {
        DataType::Utf8 => a
            .as_string::<i32>()
            .iter()
            .enumerate()
            .map(|(i, v)| get(i, v))
            .collect(),
        DataType::LargeUtf8 => a
            .as_string::<i64>()
            .iter()
            .enumerate()
            .map(|(i, v)| get(i, v))
            .collect(),
        DataType::Utf8View => a
            .as_string_view()
            .iter()
            .enumerate()
            .map(|(i, v)| get(i, v))
            .collect(),
        other => Err(type_error(name, other, "Utf8, LargeUtf8 or Utf8View")),
    }
}

/// Timestamps as UTC epoch milliseconds (sub-millisecond parts rounded towards −∞).
fn times_of(a: &dyn Array, name: &str, batch: usize) -> Result<Vec<i64>> {
    let conv = |values: Vec<Option<i64>>, per_ms: i64, mul: i64| -> Result<Vec<i64>> {
        values
            .into_iter()
            .enumerate()
            .map(|(i, v)| {
                v.map(|v| v.div_euclid(per_ms).saturating_mul(mul))
                    .ok_or(TableError::NullKey {
                        batch,
                        row: i,
                        what: "timestamp",
                    })
            })
            .collect()
    };
    match a.data_type() {
        DataType::Int64 => conv(a.as_primitive::<Int64Type>().iter().collect(), 1, 1),
        DataType::Timestamp(TimeUnit::Second, _) => conv(
            a.as_primitive::<TimestampSecondType>().iter().collect(),
            1,
            1000,
        ),
        DataType::Timestamp(TimeUnit::Millisecond, _) => conv(
            a.as_primitive::<TimestampMillisecondType>()
                .iter()
                .collect(),
            1,
            1,
        ),
        DataType::Timestamp(TimeUnit::Microsecond, _) => conv(
            a.as_primitive::<TimestampMicrosecondType>()
                .iter()
                .collect(),
            1000,
            1,
        ),
        DataType::Timestamp(TimeUnit::Nanosecond, _) => conv(
            a.as_primitive::<TimestampNanosecondType>().iter().collect(),
            1_000_000,
            1,
        ),
        other => Err(type_error(
            name,
            other,
            "Timestamp (any unit) or Int64 epoch milliseconds",
        )),
    }
}

/// Values as f64, nulls as NaN (missing readings).
fn values_of(a: &dyn Array, name: &str) -> Result<Vec<f64>> {
    Ok(match a.data_type() {
        DataType::Float64 => a
            .as_primitive::<Float64Type>()
            .iter()
            .map(|v| v.unwrap_or(f64::NAN))
            .collect(),
        DataType::Float32 => a
            .as_primitive::<Float32Type>()
            .iter()
            .map(|v| v.map_or(f64::NAN, f64::from))
            .collect(),
        DataType::Int64 => a
            .as_primitive::<Int64Type>()
            .iter()
            .map(|v| v.map_or(f64::NAN, |v| v as f64))
            .collect(),
        other => return Err(type_error(name, other, "Float64, Float32 or Int64")),
    })
}

/// Group the rows of `batches` by tag and place each tag's readings on the grid of
/// `grid` (see [`lagwise::place_on_grid`] for duplicates, jitter, order and outages).
/// Tags come out in sorted order. Errors name the column, row or tag at fault.
pub fn tags_from_batches(
    batches: &[RecordBatch],
    layout: &TableLayout,
    grid: &GridSettings,
) -> Result<Vec<TagSeries>> {
    let mut by_tag: BTreeMap<String, (Vec<i64>, Vec<f64>)> = BTreeMap::new();
    for (b, batch) in batches.iter().enumerate() {
        let tags = tags_of(column(batch, &layout.tag)?, &layout.tag, b)?;
        let times = times_of(column(batch, &layout.time)?, &layout.time, b)?;
        let values = values_of(column(batch, &layout.value)?, &layout.value)?;
        for ((tag, t), v) in tags.into_iter().zip(times).zip(values) {
            let entry = by_tag.entry(tag).or_default();
            entry.0.push(t);
            entry.1.push(v);
        }
    }
    by_tag
        .into_iter()
        .map(
            |(tag, (times, values))| match lagwise::place_on_grid(&times, &values, grid) {
                Ok(series) => Ok(TagSeries { tag, series }),
                Err(source) => Err(TableError::Series { tag, source }),
            },
        )
        .collect()
}
