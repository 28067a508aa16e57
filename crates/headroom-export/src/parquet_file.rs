//! Parquet / GeoParquet writing: Arrow schema and arrays from a [`Table`], zstd compression,
//! and the `geo` metadata in both the Parquet key/value metadata and the Arrow schema.
//!
//! Output is deterministic: the same table gives the same bytes (no timestamps; metadata is
//! written in a fixed order). Rows go out in batches of at most [`MAX_BATCH_ROWS`] rows and
//! about [`MAX_BATCH_BYTES`] bytes of text and WKB, so 32-bit Arrow offsets never overflow.

use std::io::Write;
use std::ops::Range;
use std::path::Path;
use std::sync::Arc;

use arrow_array::builder::BinaryBuilder;
use arrow_array::types::Int32Type;
use arrow_array::{
    ArrayRef, BooleanArray, DictionaryArray, Float64Array, Int64Array, RecordBatch, StringArray,
    UInt32Array, UInt64Array,
};
use arrow_schema::{DataType, Field, Metadata, Schema, SchemaRef};
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;

use crate::atomic::write_atomically;
use crate::error::{EncodeError, WriteError};
use crate::geo::{GEO_METADATA_KEY, geo_metadata};
use crate::table::{ColumnData, Table};
use crate::wkb;

/// zstd level used for every column (a fair speed/size balance).
const ZSTD_LEVEL: i32 = 3;
/// Most rows per Arrow batch.
pub const MAX_BATCH_ROWS: usize = 65_536;
/// Soft cap on variable-width bytes (text, WKB) per Arrow batch.
pub const MAX_BATCH_BYTES: usize = 512 * 1024 * 1024;

/// Writes `table` as zstd-compressed (Geo)Parquet at `path`, atomically: the bytes go to a
/// temporary file beside `path` that is renamed when complete and removed on failure.
pub fn write_parquet(path: &Path, table: &Table) -> Result<(), WriteError> {
    write_atomically(path, |writer| write_parquet_to(writer, table))
}

/// Writes `table` as zstd-compressed (Geo)Parquet to `writer`.
pub fn write_parquet_to<W: Write + Send>(writer: W, table: &Table) -> Result<(), EncodeError> {
    if table.columns().is_empty() {
        return Err(EncodeError::NoColumns);
    }
    let schema: SchemaRef = Arc::new(arrow_schema(table));
    let mut key_value_metadata = Vec::new();
    if let Some(geo) = schema.metadata().get(GEO_METADATA_KEY) {
        key_value_metadata.push(KeyValue::new(GEO_METADATA_KEY.to_owned(), geo.clone()));
    }
    for (key, value) in table.metadata() {
        key_value_metadata.push(KeyValue::new(key.clone(), value.clone()));
    }
    let properties = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(ZSTD_LEVEL)?))
        .set_key_value_metadata(Some(key_value_metadata))
        .build();
    let mut arrow_writer = ArrowWriter::try_new(writer, schema.clone(), Some(properties))?;
    for rows in batch_ranges(table)? {
        let arrays = table
            .columns()
            .iter()
            .map(|column| column_array(&column.data, rows.clone()))
            .collect();
        let batch = RecordBatch::try_new(schema.clone(), arrays)?;
        arrow_writer.write(&batch)?;
    }
    arrow_writer.close()?;
    Ok(())
}

/// The Arrow schema written for `table`: one field per column (types as in
/// [`ColumnData`]), with the `geo` JSON and the table's metadata as schema metadata.
pub fn arrow_schema(table: &Table) -> Schema {
    let fields: Vec<Field> = table
        .columns()
        .iter()
        .map(|column| {
            let (data_type, nullable) = arrow_type(&column.data);
            Field::new(column.name.clone(), data_type, nullable)
        })
        .collect();
    let mut metadata = Metadata::new();
    if let Some(geo) = geo_metadata(table) {
        metadata.insert(GEO_METADATA_KEY, geo.to_string());
    }
    for (key, value) in table.metadata() {
        metadata.insert(key.clone(), value.clone());
    }
    Schema::new_with_metadata(fields, metadata)
}

/// The Arrow type of a column and whether it is nullable.
fn arrow_type(data: &ColumnData) -> (DataType, bool) {
    match data {
        ColumnData::Utf8(_) => (DataType::Utf8, false),
        ColumnData::Utf8Dictionary(_) => (
            DataType::Dictionary(Box::new(DataType::Int32), Box::new(DataType::Utf8)),
            false,
        ),
        ColumnData::NullableUtf8(_) => (DataType::Utf8, true),
        ColumnData::Float64(_) => (DataType::Float64, false),
        ColumnData::NullableFloat64(_) => (DataType::Float64, true),
        ColumnData::UInt32(_) => (DataType::UInt32, false),
        ColumnData::UInt64(_) => (DataType::UInt64, false),
        ColumnData::Int64(_) => (DataType::Int64, false),
        ColumnData::Boolean(_) => (DataType::Boolean, false),
        ColumnData::Point(_) | ColumnData::LineString(_) => (DataType::Binary, true),
    }
}

/// Bytes a row adds to a variable-width column's Arrow buffer (0 for fixed-width columns).
fn row_bytes(data: &ColumnData, row_idx: usize) -> usize {
    match data {
        ColumnData::Utf8(values) | ColumnData::Utf8Dictionary(values) => values[row_idx].len(),
        ColumnData::NullableUtf8(values) => values[row_idx].as_ref().map_or(0, String::len),
        ColumnData::Point(values) => values[row_idx].map_or(0, |_| 21),
        ColumnData::LineString(values) => values[row_idx]
            .as_ref()
            .map_or(0, |line| 9 + 16 * line.len()),
        _ => 0,
    }
}

/// Splits the rows into batches small enough for 32-bit offsets.
fn batch_ranges(table: &Table) -> Result<Vec<Range<usize>>, EncodeError> {
    let variable_width: Vec<_> = table
        .columns()
        .iter()
        .filter(|column| {
            matches!(
                column.data,
                ColumnData::Utf8(_)
                    | ColumnData::Utf8Dictionary(_)
                    | ColumnData::NullableUtf8(_)
                    | ColumnData::Point(_)
                    | ColumnData::LineString(_)
            )
        })
        .collect();
    let mut ranges = Vec::new();
    let mut start = 0;
    let mut batch_bytes = 0usize;
    for row_idx in 0..table.n_rows() {
        let mut bytes = 0usize;
        for column in &variable_width {
            let value_bytes = row_bytes(&column.data, row_idx);
            if value_bytes > MAX_BATCH_BYTES {
                return Err(EncodeError::ValueTooLarge {
                    column: column.name.clone(),
                    row_idx,
                    n_bytes: value_bytes,
                });
            }
            bytes += value_bytes;
        }
        let rows_full = row_idx - start >= MAX_BATCH_ROWS;
        let bytes_full = row_idx > start && batch_bytes + bytes > MAX_BATCH_BYTES;
        if rows_full || bytes_full {
            ranges.push(start..row_idx);
            start = row_idx;
            batch_bytes = 0;
        }
        batch_bytes += bytes;
    }
    if start < table.n_rows() {
        ranges.push(start..table.n_rows());
    }
    Ok(ranges)
}

/// The Arrow array of rows `rows` of one column.
fn column_array(data: &ColumnData, rows: Range<usize>) -> ArrayRef {
    match data {
        ColumnData::Utf8(values) => Arc::new(StringArray::from_iter_values(&values[rows])),
        ColumnData::Utf8Dictionary(values) => Arc::new(
            values[rows]
                .iter()
                .map(String::as_str)
                .collect::<DictionaryArray<Int32Type>>(),
        ),
        ColumnData::NullableUtf8(values) => Arc::new(
            values[rows]
                .iter()
                .map(Option::as_deref)
                .collect::<StringArray>(),
        ),
        ColumnData::Float64(values) => {
            Arc::new(Float64Array::from_iter_values(values[rows].iter().copied()))
        }
        ColumnData::NullableFloat64(values) => {
            Arc::new(values[rows].iter().copied().collect::<Float64Array>())
        }
        ColumnData::UInt32(values) => {
            Arc::new(UInt32Array::from_iter_values(values[rows].iter().copied()))
        }
        ColumnData::UInt64(values) => {
            Arc::new(UInt64Array::from_iter_values(values[rows].iter().copied()))
        }
        ColumnData::Int64(values) => {
            Arc::new(Int64Array::from_iter_values(values[rows].iter().copied()))
        }
        ColumnData::Boolean(values) => Arc::new(BooleanArray::from(values[rows].to_vec())),
        ColumnData::Point(points) => {
            let points = &points[rows];
            let mut builder = BinaryBuilder::with_capacity(points.len(), 21 * points.len());
            let mut wkb_bytes = Vec::with_capacity(21);
            for point in points {
                match point {
                    Some(point) => {
                        wkb_bytes.clear();
                        wkb::push_point_wkb(&mut wkb_bytes, *point);
                        builder.append_value(&wkb_bytes);
                    }
                    None => builder.append_null(),
                }
            }
            Arc::new(builder.finish())
        }
        ColumnData::LineString(lines) => {
            let lines = &lines[rows];
            let mut builder = BinaryBuilder::with_capacity(lines.len(), 0);
            let mut wkb_bytes = Vec::new();
            for line in lines {
                match line {
                    // Lines past u32::MAX points were refused when the column was added.
                    Some(line) => {
                        wkb_bytes.clear();
                        match wkb::push_line_string_wkb(&mut wkb_bytes, line) {
                            Some(()) => builder.append_value(&wkb_bytes),
                            None => builder.append_null(),
                        }
                    }
                    None => builder.append_null(),
                }
            }
            Arc::new(builder.finish())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::table::Coord;

    #[test]
    fn batches_split_on_row_count() {
        let n_rows = MAX_BATCH_ROWS * 2 + 5;
        let table = Table::new()
            .with_column("a", ColumnData::UInt32(vec![0; n_rows]))
            .unwrap();
        let ranges = batch_ranges(&table).unwrap();
        assert_eq!(
            ranges,
            vec![
                0..MAX_BATCH_ROWS,
                MAX_BATCH_ROWS..2 * MAX_BATCH_ROWS,
                2 * MAX_BATCH_ROWS..n_rows
            ]
        );
    }

    #[test]
    fn schema_types_follow_the_column_kinds() {
        let table = Table::new()
            .with_column("feeder", ColumnData::Utf8Dictionary(vec!["f".into()]))
            .unwrap()
            .with_column(
                "geometry",
                ColumnData::Point(vec![Some(Coord::new(1.0, 2.0))]),
            )
            .unwrap();
        let schema = arrow_schema(&table);
        assert!(matches!(
            schema.field(0).data_type(),
            DataType::Dictionary(_, _)
        ));
        assert_eq!(schema.field(1).data_type(), &DataType::Binary);
        assert!(schema.field(1).is_nullable());
        assert!(schema.metadata().contains_key("geo"));
    }
}
