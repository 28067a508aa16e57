//! Writes tables to files and reads them back with parquet's Arrow reader.

use std::fs::File;
use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, Int32Type, Int64Type, UInt32Type, UInt64Type};
use arrow_array::{Array, RecordBatch};
use headroom_export::{
    ColumnData, Coord, Crs, EncodeError, MAX_BATCH_ROWS, Table, WriteError, arrow_schema,
    line_string_wkb, point_wkb, write_csv, write_parquet,
};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::parquet_to_arrow_schema;
use parquet::file::metadata::KeyValue;
use serde_json::{Value, json};

fn sample_table() -> Table {
    Table::new()
        .with_column(
            "feeder",
            ColumnData::Utf8Dictionary(vec!["f1".into(), "f1".into(), "f1".into()]),
        )
        .unwrap()
        .with_column(
            "node",
            ColumnData::Utf8(vec!["a".into(), "b".into(), "c".into()]),
        )
        .unwrap()
        .with_column(
            "limit_element",
            ColumnData::NullableUtf8(vec![Some("br1".into()), None, Some("c".into())]),
        )
        .unwrap()
        .with_column("hosting_kw", ColumnData::Float64(vec![120.5, 0.0, 9.75]))
        .unwrap()
        .with_column(
            "x",
            ColumnData::NullableFloat64(vec![Some(440_100.0), None, Some(440_300.0)]),
        )
        .unwrap()
        .with_column("n_steps", ColumnData::UInt32(vec![1, 2, 3]))
        .unwrap()
        .with_column("n_flows", ColumnData::UInt64(vec![10, 20, u64::MAX]))
        .unwrap()
        .with_column("offset", ColumnData::Int64(vec![-1, 0, i64::MAX]))
        .unwrap()
        .with_column("converged", ColumnData::Boolean(vec![true, false, true]))
        .unwrap()
        .with_column(
            "geometry",
            ColumnData::Point(vec![
                Some(Coord::new(440_100.0, 4_474_000.0)),
                None,
                Some(Coord::new(440_300.0, 4_473_500.0)),
            ]),
        )
        .unwrap()
        .with_column(
            "route",
            ColumnData::LineString(vec![
                Some(vec![
                    Coord::new(440_000.0, 4_474_100.0),
                    Coord::new(440_100.0, 4_474_000.0),
                ]),
                Some(vec![
                    Coord::new(440_100.0, 4_474_000.0),
                    Coord::new(440_200.0, 4_473_900.0),
                    Coord::new(440_300.0, 4_473_500.0),
                ]),
                None,
            ]),
        )
        .unwrap()
        .with_crs(Crs::from_code("EPSG:32630").unwrap())
        .with_metadata("headroom_version", "0.1.0")
        .unwrap()
        .with_metadata("study", r#"{"scenarios":["peak"]}"#)
        .unwrap()
}

fn read_back(path: &Path) -> (RecordBatch, Vec<KeyValue>, arrow_schema::Schema) {
    let builder = ParquetRecordBatchReaderBuilder::try_new(File::open(path).unwrap()).unwrap();
    let file_metadata = builder.metadata().file_metadata().clone();
    let key_values = file_metadata
        .key_value_metadata()
        .cloned()
        .unwrap_or_default();
    // The Arrow schema as embedded in the file (`ARROW:schema`), without the Parquet key/value
    // pairs merged in: pass only that entry.
    let arrow_only: Vec<KeyValue> = key_values
        .iter()
        .filter(|kv| kv.key == "ARROW:schema")
        .cloned()
        .collect();
    let embedded_schema =
        parquet_to_arrow_schema(file_metadata.schema_descr(), Some(&arrow_only)).unwrap();
    let batches: Vec<RecordBatch> = builder.build().unwrap().map(Result::unwrap).collect();
    let schema = batches
        .first()
        .map(|batch| batch.schema())
        .unwrap_or_else(|| std::sync::Arc::new(embedded_schema.clone()));
    let batch = single_batch(&schema, &batches);
    (batch, key_values, embedded_schema)
}

/// The one batch of a small file (an empty batch for a file without rows).
fn single_batch(schema: &arrow_schema::SchemaRef, batches: &[RecordBatch]) -> RecordBatch {
    match batches {
        [] => RecordBatch::new_empty(schema.clone()),
        [batch] => batch.clone(),
        _ => panic!("expected one batch, got {}", batches.len()),
    }
}

fn key_value<'a>(key_values: &'a [KeyValue], key: &str) -> Option<&'a str> {
    let matches: Vec<_> = key_values.iter().filter(|kv| kv.key == key).collect();
    assert!(
        matches.len() <= 1,
        "key {key} written {} times",
        matches.len()
    );
    matches.first().and_then(|kv| kv.value.as_deref())
}

#[test]
fn round_trip_keeps_schema_values_and_geo_metadata() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("nodes.parquet");
    write_parquet(&path, &sample_table()).unwrap();
    let (batch, key_values, embedded_schema) = read_back(&path);

    // Schema.
    let schema = batch.schema();
    let described: Vec<String> = schema
        .fields()
        .iter()
        .map(|field| {
            format!(
                "{}: {} nullable={}",
                field.name(),
                field.data_type(),
                field.is_nullable()
            )
        })
        .collect();
    assert_eq!(
        described.join("\n"),
        "feeder: Dictionary(Int32, Utf8) nullable=false\n\
         node: Utf8 nullable=false\n\
         limit_element: Utf8 nullable=true\n\
         hosting_kw: Float64 nullable=false\n\
         x: Float64 nullable=true\n\
         n_steps: UInt32 nullable=false\n\
         n_flows: UInt64 nullable=false\n\
         offset: Int64 nullable=false\n\
         converged: Boolean nullable=false\n\
         geometry: Binary nullable=true\n\
         route: Binary nullable=true"
    );

    // Values.
    assert_eq!(batch.num_rows(), 3);
    let feeder = batch.column(0).as_dictionary::<Int32Type>();
    let feeder_values = feeder.values().as_string::<i32>();
    assert!(
        feeder
            .keys()
            .iter()
            .all(|key| feeder_values.value(key.unwrap() as usize) == "f1")
    );
    let node = batch.column(1).as_string::<i32>();
    assert_eq!(
        node.iter().collect::<Vec<_>>(),
        [Some("a"), Some("b"), Some("c")]
    );
    let limit_element = batch.column(2).as_string::<i32>();
    assert_eq!(
        limit_element.iter().collect::<Vec<_>>(),
        [Some("br1"), None, Some("c")]
    );
    let hosting_kw = batch.column(3).as_primitive::<Float64Type>();
    assert_eq!(hosting_kw.values().to_vec(), [120.5, 0.0, 9.75]);
    let x = batch.column(4).as_primitive::<Float64Type>();
    assert_eq!(
        x.iter().collect::<Vec<_>>(),
        [Some(440_100.0), None, Some(440_300.0)]
    );
    assert_eq!(
        batch
            .column(5)
            .as_primitive::<UInt32Type>()
            .values()
            .to_vec(),
        [1, 2, 3]
    );
    assert_eq!(
        batch
            .column(6)
            .as_primitive::<UInt64Type>()
            .values()
            .to_vec(),
        [10, 20, u64::MAX]
    );
    assert_eq!(
        batch
            .column(7)
            .as_primitive::<Int64Type>()
            .values()
            .to_vec(),
        [-1, 0, i64::MAX]
    );
    let converged = batch.column(8).as_boolean();
    assert_eq!(
        converged.iter().collect::<Vec<_>>(),
        [Some(true), Some(false), Some(true)]
    );
    let geometry = batch.column(9).as_binary::<i32>();
    assert_eq!(
        geometry.value(0),
        point_wkb(Coord::new(440_100.0, 4_474_000.0))
    );
    assert!(geometry.is_null(1));
    let route = batch.column(10).as_binary::<i32>();
    assert_eq!(
        route.value(1),
        line_string_wkb(&[
            Coord::new(440_100.0, 4_474_000.0),
            Coord::new(440_200.0, 4_473_900.0),
            Coord::new(440_300.0, 4_473_500.0),
        ])
        .unwrap()
    );
    assert!(route.is_null(2));

    // `geo` in the Parquet key/value metadata and in the Arrow schema, identical.
    let geo_text = key_value(&key_values, "geo").expect("geo in the Parquet key/value metadata");
    assert_eq!(
        embedded_schema.metadata().get("geo").map(String::as_str),
        Some(geo_text)
    );
    let geo: Value = serde_json::from_str(geo_text).unwrap();
    assert_eq!(geo["version"], "1.1.0");
    assert_eq!(geo["primary_column"], "geometry");
    let point_meta = &geo["columns"]["geometry"];
    assert_eq!(point_meta["encoding"], "WKB");
    assert_eq!(point_meta["geometry_types"], json!(["Point"]));
    assert_eq!(
        point_meta["bbox"],
        json!([440_100.0, 4_473_500.0, 440_300.0, 4_474_000.0])
    );
    assert_eq!(point_meta["crs"]["type"], "ProjectedCRS");
    assert_eq!(
        point_meta["crs"]["id"],
        json!({"authority": "EPSG", "code": 32630})
    );
    let line_meta = &geo["columns"]["route"];
    assert_eq!(line_meta["geometry_types"], json!(["LineString"]));
    assert_eq!(
        line_meta["bbox"],
        json!([440_000.0, 4_473_500.0, 440_300.0, 4_474_100.0])
    );

    // Extra metadata in both places too.
    assert_eq!(key_value(&key_values, "headroom_version"), Some("0.1.0"));
    assert_eq!(
        embedded_schema.metadata().get("study").map(String::as_str),
        Some(r#"{"scenarios":["peak"]}"#)
    );
}

#[test]
fn file_is_zstd_compressed() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("nodes.parquet");
    write_parquet(&path, &sample_table()).unwrap();
    let builder = ParquetRecordBatchReaderBuilder::try_new(File::open(&path).unwrap()).unwrap();
    for row_group in builder.metadata().row_groups() {
        for column in row_group.columns() {
            assert!(matches!(
                column.compression(),
                parquet::basic::Compression::ZSTD(_)
            ));
        }
    }
}

#[test]
fn same_table_gives_identical_bytes() {
    let dir = tempfile::tempdir().unwrap();
    let first = dir.path().join("first.parquet");
    let second = dir.path().join("second.parquet");
    write_parquet(&first, &sample_table()).unwrap();
    write_parquet(&second, &sample_table()).unwrap();
    assert_eq!(
        std::fs::read(&first).unwrap(),
        std::fs::read(&second).unwrap()
    );
    let first_csv = dir.path().join("first.csv");
    let second_csv = dir.path().join("second.csv");
    write_csv(&first_csv, &sample_table()).unwrap();
    write_csv(&second_csv, &sample_table()).unwrap();
    assert_eq!(
        std::fs::read(&first_csv).unwrap(),
        std::fs::read(&second_csv).unwrap()
    );
}

#[test]
fn atomic_write_leaves_only_the_final_file() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("nodes.parquet");
    write_parquet(&path, &sample_table()).unwrap();
    // Overwriting an existing file works too.
    write_parquet(&path, &sample_table()).unwrap();
    write_csv(&dir.path().join("nodes.csv"), &sample_table()).unwrap();
    let mut names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|entry| entry.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names, ["nodes.csv", "nodes.parquet"]);
}

#[test]
fn failed_write_names_the_path_and_leaves_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let missing_dir_path = dir.path().join("no-such-folder").join("nodes.parquet");
    let error = write_parquet(&missing_dir_path, &sample_table()).unwrap_err();
    assert!(matches!(error, WriteError::Io { .. }));
    assert!(
        error
            .to_string()
            .starts_with(&missing_dir_path.display().to_string()),
        "{error}"
    );

    let path = dir.path().join("empty.parquet");
    let error = write_parquet(&path, &Table::new()).unwrap_err();
    assert!(matches!(
        error,
        WriteError::Encode {
            error: EncodeError::NoColumns,
            ..
        }
    ));
    assert_eq!(
        error.to_string(),
        format!("{}: the table has no columns", path.display())
    );
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
}

#[test]
fn empty_and_all_null_geometry_omit_bbox() {
    let dir = tempfile::tempdir().unwrap();
    for (name, n_rows) in [("zero.parquet", 0), ("nulls.parquet", 4)] {
        let table = Table::new()
            .with_column("node", ColumnData::Utf8(vec!["n".into(); n_rows]))
            .unwrap()
            .with_column("geometry", ColumnData::Point(vec![None; n_rows]))
            .unwrap();
        let path = dir.path().join(name);
        write_parquet(&path, &table).unwrap();
        let (batch, key_values, _) = read_back(&path);
        assert_eq!(batch.num_rows(), n_rows);
        let geo: Value = serde_json::from_str(key_value(&key_values, "geo").unwrap()).unwrap();
        let column = &geo["columns"]["geometry"];
        assert!(column.get("bbox").is_none(), "{geo}");
        assert_eq!(column.get("crs"), Some(&Value::Null), "unknown CRS is null");
    }
}

#[test]
fn lon_lat_tables_omit_crs_and_plain_tables_have_no_geo() {
    let dir = tempfile::tempdir().unwrap();
    let lon_lat = Table::new()
        .with_column(
            "geometry",
            ColumnData::Point(vec![Some(Coord::new(-3.7, 40.4))]),
        )
        .unwrap()
        .with_crs(Crs::from_code("EPSG:4326").unwrap());
    let path = dir.path().join("lonlat.parquet");
    write_parquet(&path, &lon_lat).unwrap();
    let (_, key_values, _) = read_back(&path);
    let geo: Value = serde_json::from_str(key_value(&key_values, "geo").unwrap()).unwrap();
    assert!(geo["columns"]["geometry"].get("crs").is_none());
    assert_eq!(
        geo["columns"]["geometry"]["bbox"],
        json!([-3.7, 40.4, -3.7, 40.4])
    );

    let plain = Table::new()
        .with_column("v_pu", ColumnData::Float64(vec![1.0]))
        .unwrap();
    let path = dir.path().join("plain.parquet");
    write_parquet(&path, &plain).unwrap();
    let (batch, key_values, embedded_schema) = read_back(&path);
    assert_eq!(batch.num_rows(), 1);
    assert_eq!(key_value(&key_values, "geo"), None);
    assert!(embedded_schema.metadata().get("geo").is_none());
}

#[test]
fn many_rows_span_several_batches() {
    let n_rows = MAX_BATCH_ROWS + 10;
    let table = Table::new()
        .with_column(
            "scenario",
            ColumnData::Utf8Dictionary((0..n_rows).map(|i| format!("s{}", i % 3)).collect()),
        )
        .unwrap()
        .with_column(
            "geometry",
            ColumnData::Point(
                (0..n_rows)
                    .map(|i| Some(Coord::new(i as f64, 0.0)))
                    .collect(),
            ),
        )
        .unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("big.parquet");
    write_parquet(&path, &table).unwrap();
    let reader = ParquetRecordBatchReaderBuilder::try_new(File::open(&path).unwrap())
        .unwrap()
        .build()
        .unwrap();
    let n_read: usize = reader.map(|batch| batch.unwrap().num_rows()).sum();
    assert_eq!(n_read, n_rows);
    assert_eq!(
        arrow_schema(&table).field(0).data_type().to_string(),
        "Dictionary(Int32, Utf8)"
    );
}
