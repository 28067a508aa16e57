//! Result tables to Parquet, GeoParquet and CSV files, written atomically.
//!
//! This crate owns the file formats of the results, not their content: callers map their
//! result structs onto a generic [`Table`] of named, typed, equally long columns
//! ([`ColumnData`]: text, dictionary text, numbers, booleans, WKB points and lines) and write
//! it with [`write_parquet`] or [`write_csv`].
//!
//! * Parquet is zstd-compressed and deterministic (same table, same bytes).
//! * A table with geometry is GeoParquet 1.1: the `geo` metadata (encoding `WKB`, geometry
//!   types, bbox, CRS) sits in both the Parquet key/value metadata and the Arrow schema
//!   metadata, so pyarrow, geopandas, DuckDB and QGIS read it unaided.
//! * The [`Crs`] is CRS84 (the `crs` key left out), a full PROJJSON object (generated here for
//!   WGS 84 / UTM zones, or read from a file), or unknown (`"crs": null`).
//! * Files are written to `.NAME.tmp-PID-N` beside the target and renamed when complete; on
//!   failure the temporary file is removed, so the final name never holds half a file.
//!
//! ```
//! use headroom_export::{write_parquet, ColumnData, Coord, Crs, Table};
//!
//! let table = Table::new()
//!     .with_column("node", ColumnData::Utf8(vec!["n1".into(), "n2".into()]))?
//!     .with_column("hosting_kw", ColumnData::Float64(vec![410.0, 95.5]))?
//!     .with_column(
//!         "geometry",
//!         ColumnData::Point(vec![Some(Coord::new(440_000.0, 4_474_000.0)), None]),
//!     )?
//!     .with_crs(Crs::from_code("EPSG:32630")?)
//!     .with_metadata("headroom_version", "0.1.0")?;
//!
//! let dir = tempfile::tempdir()?;
//! let path = dir.path().join("nodes.parquet");
//! write_parquet(&path, &table)?;
//! assert!(path.exists());
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```
//!
//! This crate never computes results, never reads feeder files, never reprojects
//! coordinates, never guesses a CRS and never prints.
#![deny(missing_docs)]

mod atomic;
mod crs;
mod csv_file;
mod error;
mod geo;
mod parquet_file;
mod table;
mod wkb;

pub use crs::{Crs, CrsError, Hemisphere};
pub use csv_file::{write_csv, write_csv_to};
pub use error::{EncodeError, WriteError};
pub use geo::{BoundingBox, GEO_METADATA_KEY, GEOPARQUET_VERSION, bounding_box, geo_metadata};
pub use parquet_file::{
    MAX_BATCH_BYTES, MAX_BATCH_ROWS, arrow_schema, write_parquet, write_parquet_to,
};
pub use table::{Column, ColumnData, Coord, Table, TableError};
pub use wkb::{line_string_wkb, point_wkb, push_line_string_wkb, push_point_wkb};
