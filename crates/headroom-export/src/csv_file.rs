//! CSV writing of a [`Table`]: one header row of column names, then one line per row.
//!
//! Cells: text as is (quoted by the CSV rules when needed); numbers in Rust's shortest
//! round-trip form (`0.1`, `500000`, `NaN`, `inf`); booleans `true`/`false`; geometry columns
//! as WKT (`POINT (x y)`, `LINESTRING (x1 y1, x2 y2)`), which QGIS and GDAL read from CSV;
//! a null (missing text, number or geometry) is an empty cell. The CRS and the file-level
//! metadata are not written.

use std::io::Write;
use std::path::Path;

use crate::atomic::write_atomically;
use crate::error::{EncodeError, WriteError};
use crate::table::{ColumnData, Table};
use crate::wkb::{line_string_wkt, point_wkt};

/// Writes `table` as CSV at `path`, atomically (temporary file beside it, then rename).
pub fn write_csv(path: &Path, table: &Table) -> Result<(), WriteError> {
    write_atomically(path, |writer| write_csv_to(writer, table))
}

/// Writes `table` as CSV to `writer`.
pub fn write_csv_to<W: Write>(writer: W, table: &Table) -> Result<(), EncodeError> {
    if table.columns().is_empty() {
        return Err(EncodeError::NoColumns);
    }
    let mut csv_writer = csv::Writer::from_writer(writer);
    csv_writer.write_record(table.columns().iter().map(|column| column.name.as_str()))?;
    let mut record: Vec<String> = Vec::with_capacity(table.columns().len());
    for row_idx in 0..table.n_rows() {
        record.clear();
        record.extend(
            table
                .columns()
                .iter()
                .map(|column| cell_text(&column.data, row_idx)),
        );
        csv_writer.write_record(&record)?;
    }
    csv_writer.flush()?;
    Ok(())
}

/// The CSV text of one cell.
fn cell_text(data: &ColumnData, row_idx: usize) -> String {
    match data {
        ColumnData::Utf8(values) | ColumnData::Utf8Dictionary(values) => values[row_idx].clone(),
        ColumnData::NullableUtf8(values) => values[row_idx].clone().unwrap_or_default(),
        ColumnData::Float64(values) => values[row_idx].to_string(),
        ColumnData::NullableFloat64(values) => {
            values[row_idx].map_or_else(String::new, |value| value.to_string())
        }
        ColumnData::UInt32(values) => values[row_idx].to_string(),
        ColumnData::UInt64(values) => values[row_idx].to_string(),
        ColumnData::Int64(values) => values[row_idx].to_string(),
        ColumnData::Boolean(values) => values[row_idx].to_string(),
        ColumnData::Point(values) => values[row_idx].map_or_else(String::new, point_wkt),
        ColumnData::LineString(values) => values[row_idx]
            .as_deref()
            .map_or_else(String::new, line_string_wkt),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::table::Coord;

    #[test]
    fn cells_follow_the_documented_forms() {
        let table = Table::new()
            .with_column("node", ColumnData::Utf8(vec!["a,1".into(), "b".into()]))
            .unwrap()
            .with_column("kw", ColumnData::NullableFloat64(vec![Some(0.1), None]))
            .unwrap()
            .with_column("ok", ColumnData::Boolean(vec![true, false]))
            .unwrap()
            .with_column(
                "geometry",
                ColumnData::Point(vec![Some(Coord::new(500000.0, 2.5)), None]),
            )
            .unwrap()
            .with_column(
                "route",
                ColumnData::LineString(vec![
                    None,
                    Some(vec![Coord::new(0.0, 0.0), Coord::new(1.0, -1.0)]),
                ]),
            )
            .unwrap();
        let mut bytes = Vec::new();
        write_csv_to(&mut bytes, &table).unwrap();
        assert_eq!(
            String::from_utf8(bytes).unwrap(),
            "node,kw,ok,geometry,route\n\
             \"a,1\",0.1,true,POINT (500000 2.5),\n\
             b,,false,,\"LINESTRING (0 0, 1 -1)\"\n"
        );
    }

    #[test]
    fn tables_without_columns_are_refused() {
        assert!(matches!(
            write_csv_to(Vec::new(), &Table::new()),
            Err(EncodeError::NoColumns)
        ));
    }
}
