//! Parquet files in and out.

use std::fs::File;
use std::path::Path;

use arrow_array::RecordBatch;
use parquet::arrow::ArrowWriter;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use crate::{Result, TableError};

/// Write `batches` (one schema) to a Parquet file at `path` (Snappy-compressed).
pub fn write_parquet(path: impl AsRef<Path>, batches: &[RecordBatch]) -> Result<()> {
    let path = path.as_ref();
    let Some(first) = batches.first() else {
        return Err(TableError::Arrow(
            arrow_schema::ArrowError::InvalidArgumentError("no batch to write".into()),
        ));
    };
    let file = File::create(path).map_err(|source| TableError::File {
        path: path.to_path_buf(),
        source,
    })?;
    let props = parquet::file::properties::WriterProperties::builder()
        .set_compression(parquet::basic::Compression::SNAPPY)
        .build();
    let mut writer = ArrowWriter::try_new(file, first.schema(), Some(props))?;
    for b in batches {
        writer.write(b)?;
    }
    writer.close()?;
    Ok(())
}

/// Read every record batch of a Parquet file.
pub fn read_parquet(path: impl AsRef<Path>) -> Result<Vec<RecordBatch>> {
    let path = path.as_ref();
    let file = File::open(path).map_err(|source| TableError::File {
        path: path.to_path_buf(),
        source,
    })?;
    let reader = ParquetRecordBatchReaderBuilder::try_new(file)?.build()?;
    Ok(reader.collect::<std::result::Result<Vec<_>, _>>()?)
}
