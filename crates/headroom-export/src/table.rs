//! The result-agnostic [`Table`]: named, typed, equally long columns plus file-level metadata.

use std::collections::BTreeMap;

use crate::crs::Crs;

/// A 2D coordinate in the table's CRS: `x` is easting or longitude, `y` northing or latitude.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Coord {
    /// Easting (projected CRS) or longitude in degrees (lon/lat CRS).
    pub x: f64,
    /// Northing (projected CRS) or latitude in degrees (lon/lat CRS).
    pub y: f64,
}

impl Coord {
    /// A coordinate from `x` (easting/longitude) and `y` (northing/latitude).
    pub const fn new(x: f64, y: f64) -> Coord {
        Coord { x, y }
    }

    fn is_finite(self) -> bool {
        self.x.is_finite() && self.y.is_finite()
    }
}

/// The typed values of one column. Every variant holds one entry per row.
///
/// | variant | Arrow type | nullable |
/// |---|---|---|
/// | `Utf8` | `Utf8` | no |
/// | `Utf8Dictionary` | `Dictionary(Int32, Utf8)` | no |
/// | `NullableUtf8` | `Utf8` | yes |
/// | `Float64` | `Float64` | no |
/// | `NullableFloat64` | `Float64` | yes |
/// | `UInt32` / `UInt64` / `Int64` | same | no |
/// | `Boolean` | `Boolean` | no |
/// | `Point` | `Binary` (WKB Point) | yes |
/// | `LineString` | `Binary` (WKB LineString) | yes |
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnData {
    /// Text, one value per row.
    Utf8(Vec<String>),
    /// Text with few distinct values (feeder, scenario, limit), stored dictionary-encoded.
    Utf8Dictionary(Vec<String>),
    /// Text that may be missing.
    NullableUtf8(Vec<Option<String>>),
    /// 64-bit floats (NaN and infinities are stored as given).
    Float64(Vec<f64>),
    /// 64-bit floats that may be missing.
    NullableFloat64(Vec<Option<f64>>),
    /// Unsigned 32-bit integers.
    UInt32(Vec<u32>),
    /// Unsigned 64-bit integers.
    UInt64(Vec<u64>),
    /// Signed 64-bit integers.
    Int64(Vec<i64>),
    /// Booleans.
    Boolean(Vec<bool>),
    /// Points, written as WKB Point; `None` is a null geometry. Coordinates must be finite.
    Point(Vec<Option<Coord>>),
    /// Line strings, written as WKB LineString; `None` is a null geometry. Each line has at
    /// least two points and finite coordinates.
    LineString(Vec<Option<Vec<Coord>>>),
}

impl ColumnData {
    /// Number of rows (entries) held.
    pub fn len(&self) -> usize {
        match self {
            ColumnData::Utf8(values) | ColumnData::Utf8Dictionary(values) => values.len(),
            ColumnData::NullableUtf8(values) => values.len(),
            ColumnData::Float64(values) => values.len(),
            ColumnData::NullableFloat64(values) => values.len(),
            ColumnData::UInt32(values) => values.len(),
            ColumnData::UInt64(values) => values.len(),
            ColumnData::Int64(values) => values.len(),
            ColumnData::Boolean(values) => values.len(),
            ColumnData::Point(values) => values.len(),
            ColumnData::LineString(values) => values.len(),
        }
    }

    /// True when the column holds no rows.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The GeoParquet geometry type name (`"Point"`, `"LineString"`), `None` for plain columns.
    pub fn geometry_type(&self) -> Option<&'static str> {
        match self {
            ColumnData::Point(_) => Some("Point"),
            ColumnData::LineString(_) => Some("LineString"),
            _ => None,
        }
    }

    /// Checks geometry values: finite coordinates, at least two points per line.
    fn check_geometry(&self, column: &str) -> Result<(), TableError> {
        match self {
            ColumnData::Point(points) => {
                for (row_idx, point) in points.iter().enumerate() {
                    if point.is_some_and(|point| !point.is_finite()) {
                        return Err(TableError::NonFiniteCoordinate {
                            column: column.to_owned(),
                            row_idx,
                        });
                    }
                }
            }
            ColumnData::LineString(lines) => {
                for (row_idx, line) in lines.iter().enumerate() {
                    let Some(line) = line else { continue };
                    if line.len() < 2 {
                        return Err(TableError::LineStringTooShort {
                            column: column.to_owned(),
                            row_idx,
                            n_points: line.len(),
                        });
                    }
                    if line.len() > u32::MAX as usize {
                        return Err(TableError::LineStringTooLong {
                            column: column.to_owned(),
                            row_idx,
                            n_points: line.len(),
                        });
                    }
                    if line.iter().any(|point| !point.is_finite()) {
                        return Err(TableError::NonFiniteCoordinate {
                            column: column.to_owned(),
                            row_idx,
                        });
                    }
                }
            }
            _ => {}
        }
        Ok(())
    }
}

/// One named column.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// Column name as written to the file.
    pub name: String,
    /// The values.
    pub data: ColumnData,
}

/// A problem found while building a [`Table`].
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TableError {
    /// A column name is empty.
    #[error("column names must not be empty")]
    EmptyColumnName,
    /// Two columns share a name.
    #[error("column `{name}` is given twice")]
    DuplicateColumn {
        /// The repeated name.
        name: String,
    },
    /// A column's length differs from the table's row count.
    #[error("column `{column}` has {found_rows} rows but the table has {expected_rows}")]
    LengthMismatch {
        /// The offending column.
        column: String,
        /// Rows of the columns already in the table.
        expected_rows: usize,
        /// Rows of the offending column.
        found_rows: usize,
    },
    /// A geometry holds NaN or an infinite coordinate.
    #[error("column `{column}`, row {row_idx}: coordinates must be finite")]
    NonFiniteCoordinate {
        /// The geometry column.
        column: String,
        /// Zero-based row index.
        row_idx: usize,
    },
    /// A line string has fewer than two points.
    #[error(
        "column `{column}`, row {row_idx}: a line needs at least 2 points, found {n_points} \
         (use a null geometry when there is no line)"
    )]
    LineStringTooShort {
        /// The geometry column.
        column: String,
        /// Zero-based row index.
        row_idx: usize,
        /// Points given.
        n_points: usize,
    },
    /// A line string has more points than WKB can count.
    #[error("column `{column}`, row {row_idx}: {n_points} points is more than WKB can hold")]
    LineStringTooLong {
        /// The geometry column.
        column: String,
        /// Zero-based row index.
        row_idx: usize,
        /// Points given.
        n_points: usize,
    },
    /// The named column does not exist.
    #[error("no column named `{name}`")]
    UnknownColumn {
        /// The name asked for.
        name: String,
    },
    /// The named column is not a geometry column.
    #[error("column `{name}` is not a geometry column")]
    NotGeometry {
        /// The name asked for.
        name: String,
    },
    /// A metadata key is written by this crate itself.
    #[error("metadata key `{key}` is reserved (written by the exporter itself)")]
    ReservedMetadataKey {
        /// The key refused.
        key: String,
    },
}

/// Named columns of equal length, the CRS of their geometries and file-level metadata.
///
/// Invariants, checked as columns are added: names are unique and non-empty, every column has
/// [`Table::n_rows`] entries, geometries have finite coordinates and lines at least two points.
/// The first geometry column added is the primary one unless [`Table::set_primary_geometry`]
/// says otherwise. The CRS applies to every geometry column and defaults to [`Crs::Unknown`].
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    columns: Vec<Column>,
    primary_geometry_idx: Option<usize>,
    crs: Crs,
    metadata: BTreeMap<String, String>,
}

impl Default for Table {
    fn default() -> Table {
        Table::new()
    }
}

impl Table {
    /// An empty table: no columns, unknown CRS, no metadata.
    pub fn new() -> Table {
        Table {
            columns: Vec::new(),
            primary_geometry_idx: None,
            crs: Crs::Unknown,
            metadata: BTreeMap::new(),
        }
    }

    /// Appends a column. Fails when the name is empty or taken, when the length differs from
    /// the columns already present, or when a geometry is invalid (see [`ColumnData`]).
    pub fn add_column(
        &mut self,
        name: impl Into<String>,
        data: ColumnData,
    ) -> Result<(), TableError> {
        let name = name.into();
        if name.is_empty() {
            return Err(TableError::EmptyColumnName);
        }
        if self.column(&name).is_some() {
            return Err(TableError::DuplicateColumn { name });
        }
        if let Some(first) = self.columns.first()
            && first.data.len() != data.len()
        {
            return Err(TableError::LengthMismatch {
                column: name,
                expected_rows: first.data.len(),
                found_rows: data.len(),
            });
        }
        data.check_geometry(&name)?;
        if data.geometry_type().is_some() && self.primary_geometry_idx.is_none() {
            self.primary_geometry_idx = Some(self.columns.len());
        }
        self.columns.push(Column { name, data });
        Ok(())
    }

    /// [`Table::add_column`] in builder form.
    pub fn with_column(
        mut self,
        name: impl Into<String>,
        data: ColumnData,
    ) -> Result<Table, TableError> {
        self.add_column(name, data)?;
        Ok(self)
    }

    /// Makes the named geometry column the primary one (GeoParquet `primary_column`).
    pub fn set_primary_geometry(&mut self, name: &str) -> Result<(), TableError> {
        let column_idx = self
            .columns
            .iter()
            .position(|column| column.name == name)
            .ok_or_else(|| TableError::UnknownColumn {
                name: name.to_owned(),
            })?;
        if self.columns[column_idx].data.geometry_type().is_none() {
            return Err(TableError::NotGeometry {
                name: name.to_owned(),
            });
        }
        self.primary_geometry_idx = Some(column_idx);
        Ok(())
    }

    /// Sets the CRS of every geometry column.
    pub fn set_crs(&mut self, crs: Crs) {
        self.crs = crs;
    }

    /// [`Table::set_crs`] in builder form.
    pub fn with_crs(mut self, crs: Crs) -> Table {
        self.crs = crs;
        self
    }

    /// Adds (or replaces) a file-level key/value pair, e.g. the tool version or study settings.
    /// The keys `geo` and `ARROW:*` are reserved.
    pub fn insert_metadata(
        &mut self,
        key: impl Into<String>,
        value: impl Into<String>,
    ) -> Result<(), TableError> {
        let key = key.into();
        if key == crate::geo::GEO_METADATA_KEY || key.starts_with("ARROW:") {
            return Err(TableError::ReservedMetadataKey { key });
        }
        self.metadata.insert(key, value.into());
        Ok(())
    }

    /// [`Table::insert_metadata`] in builder form.
    pub fn with_metadata(
        mut self,
        key: impl Into<String>,
        value: impl Into<String>,
    ) -> Result<Table, TableError> {
        self.insert_metadata(key, value)?;
        Ok(self)
    }

    /// Number of rows (0 for a table without columns).
    pub fn n_rows(&self) -> usize {
        self.columns.first().map_or(0, |column| column.data.len())
    }

    /// The columns, in order.
    pub fn columns(&self) -> &[Column] {
        &self.columns
    }

    /// The column with this name.
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|column| column.name == name)
    }

    /// Name of the primary geometry column, if the table has geometry.
    pub fn primary_geometry(&self) -> Option<&str> {
        self.primary_geometry_idx
            .map(|column_idx| self.columns[column_idx].name.as_str())
    }

    /// The CRS of the geometry columns.
    pub fn crs(&self) -> &Crs {
        &self.crs
    }

    /// The extra file-level metadata, sorted by key.
    pub fn metadata(&self) -> &BTreeMap<String, String> {
        &self.metadata
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mismatched_lengths_are_refused() {
        let mut table = Table::new();
        table
            .add_column("a", ColumnData::Float64(vec![1.0, 2.0]))
            .unwrap();
        let error = table
            .add_column("b", ColumnData::UInt32(vec![1]))
            .unwrap_err();
        assert_eq!(
            error,
            TableError::LengthMismatch {
                column: "b".into(),
                expected_rows: 2,
                found_rows: 1
            }
        );
        assert_eq!(
            error.to_string(),
            "column `b` has 1 rows but the table has 2"
        );
        assert_eq!(table.columns().len(), 1);
    }

    #[test]
    fn names_must_be_unique_and_non_empty() {
        let mut table = Table::new();
        table.add_column("a", ColumnData::Boolean(vec![])).unwrap();
        assert!(matches!(
            table.add_column("a", ColumnData::Boolean(vec![])),
            Err(TableError::DuplicateColumn { .. })
        ));
        assert_eq!(
            table.add_column("", ColumnData::Boolean(vec![])),
            Err(TableError::EmptyColumnName)
        );
    }

    #[test]
    fn bad_geometries_are_refused() {
        let nan_point = ColumnData::Point(vec![None, Some(Coord::new(f64::NAN, 1.0))]);
        assert_eq!(
            Table::new().add_column("geometry", nan_point),
            Err(TableError::NonFiniteCoordinate {
                column: "geometry".into(),
                row_idx: 1
            })
        );
        let short_line = ColumnData::LineString(vec![Some(vec![Coord::new(0.0, 0.0)])]);
        assert!(matches!(
            Table::new().add_column("geometry", short_line),
            Err(TableError::LineStringTooShort { n_points: 1, .. })
        ));
    }

    #[test]
    fn first_geometry_is_primary_until_changed() {
        let mut table = Table::new()
            .with_column("node", ColumnData::Utf8(vec!["a".into()]))
            .unwrap()
            .with_column("site", ColumnData::Point(vec![None]))
            .unwrap()
            .with_column("route", ColumnData::LineString(vec![None]))
            .unwrap();
        assert_eq!(table.primary_geometry(), Some("site"));
        table.set_primary_geometry("route").unwrap();
        assert_eq!(table.primary_geometry(), Some("route"));
        assert!(matches!(
            table.set_primary_geometry("node"),
            Err(TableError::NotGeometry { .. })
        ));
        assert!(matches!(
            table.set_primary_geometry("nope"),
            Err(TableError::UnknownColumn { .. })
        ));
    }

    #[test]
    fn reserved_metadata_keys_are_refused() {
        let mut table = Table::new();
        assert!(table.insert_metadata("geo", "{}").is_err());
        assert!(table.insert_metadata("ARROW:schema", "x").is_err());
        table.insert_metadata("headroom_version", "0.1.0").unwrap();
        assert_eq!(table.metadata().len(), 1);
    }
}
