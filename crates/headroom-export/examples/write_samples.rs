//! Writes sample GeoParquet, Parquet and CSV files into a folder, for checking them with
//! `tests/python/check_geoparquet.py` (pyarrow, geopandas, DuckDB).
//!
//! ```text
//! cargo run -p headroom-export --example write_samples -- /tmp/headroom-samples
//! python3 tests/python/check_geoparquet.py /tmp/headroom-samples \
//!     --expect-rows nodes_utm30n=3 --expect-rows branches_utm33s=2
//! ```

use std::path::PathBuf;

use headroom_export::{ColumnData, Coord, Crs, Table, write_csv, write_parquet};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let out_dir = PathBuf::from(
        std::env::args_os()
            .nth(1)
            .ok_or("usage: write_samples OUT_DIR")?,
    );
    std::fs::create_dir_all(&out_dir)?;
    std::fs::create_dir_all(out_dir.join("feeder=demo"))?;

    let node_ids = || ColumnData::Utf8(vec!["n1".into(), "n2".into(), "n3".into()]);
    let nodes =
        |points: Vec<Option<Coord>>, crs: Crs| -> Result<Table, Box<dyn std::error::Error>> {
            Ok(Table::new()
                .with_column("feeder", ColumnData::Utf8Dictionary(vec!["demo".into(); 3]))?
                .with_column(
                    "scenario",
                    ColumnData::Utf8Dictionary(vec!["peak".into(); 3]),
                )?
                .with_column("node", node_ids())?
                .with_column(
                    "x",
                    ColumnData::NullableFloat64(points.iter().map(|p| p.map(|p| p.x)).collect()),
                )?
                .with_column(
                    "y",
                    ColumnData::NullableFloat64(points.iter().map(|p| p.map(|p| p.y)).collect()),
                )?
                .with_column("geometry", ColumnData::Point(points))?
                .with_column("hosting_kw", ColumnData::Float64(vec![850.0, 420.5, 0.0]))?
                .with_column(
                    "limit",
                    ColumnData::Utf8Dictionary(vec![
                        "thermal".into(),
                        "overvoltage".into(),
                        "overvoltage".into(),
                    ]),
                )?
                .with_column(
                    "limit_element",
                    ColumnData::NullableUtf8(vec![Some("b1".into()), Some("n2".into()), None]),
                )?
                .with_column("v_base_pu", ColumnData::Float64(vec![1.0, 0.991, 0.985]))?
                .with_crs(crs)
                .with_metadata("headroom_version", env!("CARGO_PKG_VERSION"))?)
        };

    // WGS 84 / UTM 30N (Madrid area).
    let utm_points = vec![
        Some(Coord::new(440_100.0, 4_474_000.0)),
        None,
        Some(Coord::new(440_300.0, 4_473_500.0)),
    ];
    let utm30n = nodes(utm_points.clone(), Crs::from_code("EPSG:32630")?)?;
    write_parquet(&out_dir.join("nodes_utm30n.parquet"), &utm30n)?;
    write_csv(&out_dir.join("nodes_utm30n.csv"), &utm30n)?;

    // Lon/lat (EPSG:4326 given, written as OGC:CRS84).
    let lon_lat_points = vec![
        Some(Coord::new(-3.70, 40.42)),
        Some(Coord::new(-3.69, 40.41)),
        None,
    ];
    write_parquet(
        &out_dir.join("nodes_lonlat.parquet"),
        &nodes(lon_lat_points, Crs::from_code("EPSG:4326")?)?,
    )?;

    // No CRS known.
    write_parquet(
        &out_dir.join("nodes_nocrs.parquet"),
        &nodes(utm_points.clone(), Crs::Unknown)?,
    )?;

    // Hive-style folder, no `feeder` column inside.
    let hive = Table::new()
        .with_column("node", node_ids())?
        .with_column("geometry", ColumnData::Point(utm_points))?
        .with_crs(Crs::from_code("EPSG:32630")?);
    write_parquet(&out_dir.join("feeder=demo").join("part-0.parquet"), &hive)?;

    // Lines in WGS 84 / UTM 33S (12°E to 18°E, south of the equator).
    let branches = Table::new()
        .with_column("branch", ColumnData::Utf8(vec!["b1".into(), "b2".into()]))?
        .with_column("from", ColumnData::Utf8(vec!["n1".into(), "n2".into()]))?
        .with_column("to", ColumnData::Utf8(vec!["n2".into(), "n3".into()]))?
        .with_column(
            "geometry",
            ColumnData::LineString(vec![
                Some(vec![
                    Coord::new(300_000.0, 9_000_000.0),
                    Coord::new(300_150.0, 9_000_050.0),
                ]),
                Some(vec![
                    Coord::new(300_150.0, 9_000_050.0),
                    Coord::new(300_200.0, 9_000_120.0),
                    Coord::new(300_260.0, 9_000_180.0),
                ]),
            ]),
        )?
        .with_column("current_a", ColumnData::Float64(vec![120.0, 64.5]))?
        .with_column("rating_a", ColumnData::Float64(vec![300.0, 200.0]))?
        .with_column("loading_pct", ColumnData::Float64(vec![40.0, 32.25]))?
        .with_crs(Crs::from_code("EPSG:32733")?);
    write_parquet(&out_dir.join("branches_utm33s.parquet"), &branches)?;

    // Geometry column with no rows: no bbox.
    let empty = Table::new()
        .with_column("node", ColumnData::Utf8(vec![]))?
        .with_column("geometry", ColumnData::Point(vec![]))?
        .with_crs(Crs::from_code("EPSG:32630")?);
    write_parquet(&out_dir.join("nodes_empty.parquet"), &empty)?;

    // A plain table without geometry.
    let flow = Table::new()
        .with_column("node", node_ids())?
        .with_column("v_pu", ColumnData::Float64(vec![1.0, 0.99, 0.98]))?
        .with_column("angle_deg", ColumnData::Float64(vec![0.0, -0.4, -0.7]))?
        .with_column("n_iterations", ColumnData::UInt32(vec![4, 4, 4]))?
        .with_column("converged", ColumnData::Boolean(vec![true, true, true]))?;
    write_parquet(&out_dir.join("flow_nodes.parquet"), &flow)?;
    Ok(())
}
