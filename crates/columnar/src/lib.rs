//! Arrow and Parquet in and out of lagwise fleets, for data engineers whose readings live
//! in long tables — one row per reading: tag, timestamp, value — exported from a
//! historian, irregular, out of order, with duplicates and outages.
//!
//! - [`TableLayout`] names the columns; [`tags_from_batches`] groups the rows by tag and
//!   places each tag's readings on a regular grid ([`lagwise::place_on_grid`]: duplicates
//!   combined, jitter within a tolerance, outages as NaN), keeping each tag's report.
//! - [`FleetTables`] runs a fleet fit or order search over the tags and returns result
//!   tables as `RecordBatch`es: one row per tag ([`FleetTables::models`]: the model's
//!   label, coefficients with standard errors, σ², criteria, whiteness verdict, warnings,
//!   the error text for a tag that failed), forecasts ([`FleetTables::forecasts`]: tag,
//!   step, timestamp, mean, bounds per level), and overnight checks of new readings
//!   ([`FleetTables::watch`]: tag, timestamp, reading, interval, z, alarm).
//! - [`write_parquet`] and [`read_parquet`] move any of them to and from Parquet files.
//!
//! Tags may come as `Utf8`, `LargeUtf8` or `Utf8View` (DataFusion reads Parquet strings as
//! views); timestamps as Arrow timestamps of any unit (time zone ignored: instants are
//! UTC) or `Int64` epoch milliseconds; values as `Float64`, `Float32` or `Int64` (nulls
//! are missing readings). Arrow majors follow DataFusion 55 (arrow 59).
//!
//! ```
//! use std::sync::Arc;
//! use arrow_array::{Float64Array, Int64Array, RecordBatch, StringArray};
//! use arrow_schema::{DataType, Field, Schema};
//! use lagwise_columnar::{tags_from_batches, FleetTables, TableLayout};
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! let q = 900_000i64; // 15 minutes
//! let n = 300;
//! let mut tags = Vec::new();
//! let mut times = Vec::new();
//! let mut values = Vec::new();
//! for (k, tag) in ["KB-SS0001-TS", "KB-SS0002-TS"].iter().enumerate() {
//!     let x = lagwise::Simulator::builder().autoregressive(&[0.7]).level(88.0).build()?.generate(n, k as u64);
//!     for (i, v) in x.iter().enumerate() {
//!         tags.push(*tag);
//!         times.push(1_795_564_800_000 + i as i64 * q);
//!         values.push(*v);
//!     }
//! }
//! let schema = Arc::new(Schema::new(vec![
//!     Field::new("tag", DataType::Utf8, false),
//!     Field::new("ts", DataType::Int64, false),
//!     Field::new("value", DataType::Float64, true),
//! ]));
//! let batch = RecordBatch::try_new(schema, vec![
//!     Arc::new(StringArray::from(tags)),
//!     Arc::new(Int64Array::from(times)),
//!     Arc::new(Float64Array::from(values)),
//! ])?;
//! let layout = TableLayout::new("tag", "ts", "value");
//! let grid = lagwise::GridSettings::builder(q).build()?;
//! let series = tags_from_batches(&[batch], &layout, &grid)?;
//! let bp = lagwise::Blueprint::builder().nonseasonal(1, 0, 0).build()?;
//! let tables = FleetTables::fit(&series, &bp, &lagwise::Fleet::builder().build()?);
//! let models = tables.models()?;
//! assert_eq!(models.num_rows(), 2);
//! let day = tables.forecasts(96, &[0.8, 0.95])?;
//! assert_eq!(day.num_rows(), 2 * 96);
//! # Ok(()) }
//! ```
#![forbid(unsafe_code)]

mod input;
mod output;
mod parquet_io;

pub use input::{TableLayout, TagSeries, tags_from_batches};
pub use output::FleetTables;
pub use parquet_io::{read_parquet, write_parquet};

/// Why a table could not be read or written.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum TableError {
    /// A named column is absent.
    #[error("column {0:?} not found in the table")]
    MissingColumn(String),
    /// A column has a type this crate does not read.
    #[error("column {column:?} has type {found}; expected {expected}")]
    ColumnType {
        /// The column.
        column: String,
        /// Its type.
        found: String,
        /// What would do.
        expected: &'static str,
    },
    /// A row has no tag or no timestamp.
    #[error("row {row} of batch {batch} has no {what}")]
    NullKey {
        /// Batch number.
        batch: usize,
        /// Row in the batch.
        row: usize,
        /// "tag" or "timestamp".
        what: &'static str,
    },
    /// lagwise refused the data (e.g. a tag's timestamps span too many slots).
    #[error("tag {tag:?}: {source}")]
    Series {
        /// The tag.
        tag: String,
        /// lagwise's error.
        source: lagwise::Error,
    },
    /// New readings do not fit a tag's history (another cadence).
    #[error("tag {tag:?}: {reason}")]
    Mismatch {
        /// The tag.
        tag: String,
        /// Why.
        reason: String,
    },
    /// Arrow refused to build a result table (a bug in this crate if it ever happens).
    #[error("arrow: {0}")]
    Arrow(#[from] arrow_schema::ArrowError),
    /// Parquet reading or writing failed.
    #[error("parquet: {0}")]
    Parquet(#[from] parquet::errors::ParquetError),
    /// The file could not be opened or created.
    #[error("file {path:?}: {source}")]
    File {
        /// The path.
        path: std::path::PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
}

/// Results of this crate.
pub type Result<T> = std::result::Result<T, TableError>;
