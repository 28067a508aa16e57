//! The GeoParquet 1.1 `geo` metadata of a table: encoding, geometry types, bbox and CRS.

use serde_json::{Map, Value, json};

use crate::table::{ColumnData, Coord, Table};

/// Key of the GeoParquet metadata, in both the Parquet key/value metadata and the Arrow schema.
pub const GEO_METADATA_KEY: &str = "geo";
/// The GeoParquet version written.
pub const GEOPARQUET_VERSION: &str = "1.1.0";

/// Bounding box of a geometry column, in the table's CRS units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BoundingBox {
    /// Smallest x.
    pub x_min: f64,
    /// Smallest y.
    pub y_min: f64,
    /// Largest x.
    pub x_max: f64,
    /// Largest y.
    pub y_max: f64,
}

impl BoundingBox {
    fn of_point(point: Coord) -> BoundingBox {
        BoundingBox {
            x_min: point.x,
            y_min: point.y,
            x_max: point.x,
            y_max: point.y,
        }
    }

    fn include(&mut self, point: Coord) {
        self.x_min = self.x_min.min(point.x);
        self.y_min = self.y_min.min(point.y);
        self.x_max = self.x_max.max(point.x);
        self.y_max = self.y_max.max(point.y);
    }

    /// `[xmin, ymin, xmax, ymax]`, the GeoParquet order.
    pub fn to_array(self) -> [f64; 4] {
        [self.x_min, self.y_min, self.x_max, self.y_max]
    }
}

/// Bounding box over every non-null geometry of a column; `None` when the column has no
/// geometry (all null, no rows, or not a geometry column).
pub fn bounding_box(data: &ColumnData) -> Option<BoundingBox> {
    let mut bbox: Option<BoundingBox> = None;
    let mut include = |point: Coord| match bbox.as_mut() {
        Some(bbox) => bbox.include(point),
        None => bbox = Some(BoundingBox::of_point(point)),
    };
    match data {
        ColumnData::Point(points) => points.iter().flatten().copied().for_each(&mut include),
        ColumnData::LineString(lines) => lines
            .iter()
            .flatten()
            .flatten()
            .copied()
            .for_each(&mut include),
        _ => {}
    }
    bbox
}

/// The GeoParquet 1.1 `geo` object of a table, or `None` when it has no geometry column.
///
/// Every geometry column is listed with `encoding` `"WKB"`, its `geometry_types`, its `bbox`
/// (left out when it holds no geometry) and the table's CRS (`crs` left out for CRS84,
/// `null` when unknown).
pub fn geo_metadata(table: &Table) -> Option<Value> {
    let primary_column = table.primary_geometry()?;
    let mut columns = Map::new();
    for column in table.columns() {
        let Some(geometry_type) = column.data.geometry_type() else {
            continue;
        };
        let mut entry = Map::new();
        entry.insert("encoding".to_owned(), json!("WKB"));
        entry.insert("geometry_types".to_owned(), json!([geometry_type]));
        if let Some(bbox) = bounding_box(&column.data) {
            entry.insert("bbox".to_owned(), json!(bbox.to_array()));
        }
        if let Some(crs) = table.crs().geoparquet_value() {
            entry.insert("crs".to_owned(), crs);
        }
        columns.insert(column.name.clone(), Value::Object(entry));
    }
    Some(json!({
        "version": GEOPARQUET_VERSION,
        "primary_column": primary_column,
        "columns": columns,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::crs::Crs;

    #[test]
    fn bbox_spans_points_and_line_vertices() {
        let points = ColumnData::Point(vec![
            Some(Coord::new(3.0, -1.0)),
            None,
            Some(Coord::new(-2.0, 4.0)),
        ]);
        assert_eq!(
            bounding_box(&points).map(BoundingBox::to_array),
            Some([-2.0, -1.0, 3.0, 4.0])
        );
        let lines = ColumnData::LineString(vec![
            None,
            Some(vec![
                Coord::new(10.0, 10.0),
                Coord::new(12.0, 9.0),
                Coord::new(11.0, 15.0),
            ]),
        ]);
        assert_eq!(
            bounding_box(&lines).map(BoundingBox::to_array),
            Some([10.0, 9.0, 12.0, 15.0])
        );
        assert_eq!(bounding_box(&ColumnData::Point(vec![None, None])), None);
        assert_eq!(bounding_box(&ColumnData::Float64(vec![1.0])), None);
    }

    #[test]
    fn metadata_lists_geometry_columns_with_crs() {
        let table = Table::new()
            .with_column(
                "geometry",
                ColumnData::Point(vec![Some(Coord::new(1.0, 2.0))]),
            )
            .unwrap()
            .with_column("route", ColumnData::LineString(vec![None]))
            .unwrap()
            .with_crs(Crs::from_code("EPSG:32630").unwrap());
        let geo = geo_metadata(&table).unwrap();
        assert_eq!(geo["version"], "1.1.0");
        assert_eq!(geo["primary_column"], "geometry");
        assert_eq!(geo["columns"]["geometry"]["encoding"], "WKB");
        assert_eq!(
            geo["columns"]["geometry"]["geometry_types"],
            json!(["Point"])
        );
        assert_eq!(
            geo["columns"]["geometry"]["bbox"],
            json!([1.0, 2.0, 1.0, 2.0])
        );
        assert_eq!(geo["columns"]["geometry"]["crs"]["id"]["code"], 32630);
        assert_eq!(
            geo["columns"]["route"]["geometry_types"],
            json!(["LineString"])
        );
        assert!(geo["columns"]["route"].get("bbox").is_none());
    }

    #[test]
    fn crs84_omits_crs_and_unknown_writes_null() {
        let base = Table::new()
            .with_column("geometry", ColumnData::Point(vec![None]))
            .unwrap();
        let lon_lat = geo_metadata(&base.clone().with_crs(Crs::LonLatWgs84)).unwrap();
        assert!(lon_lat["columns"]["geometry"].get("crs").is_none());
        let unknown = geo_metadata(&base.with_crs(Crs::Unknown)).unwrap();
        assert_eq!(
            unknown["columns"]["geometry"].get("crs"),
            Some(&Value::Null)
        );
        assert_eq!(geo_metadata(&Table::new()), None);
    }
}
