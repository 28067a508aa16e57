//! Concatenating per-feeder Parquet part files into one table file, batch by batch, so memory
//! stays flat however many parts there are.
//!
//! The parts of one table share their columns (they were written from the same table builder);
//! the output takes the first part's schema and key/value metadata, with the GeoParquet `geo`
//! bounding boxes widened to cover every part. It is written to `.NAME.tmp-PID-N` beside the
//! target, synced, and renamed: the final name never holds half a file.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};

use arrow_array::RecordBatch;
use arrow_schema::{Schema, SchemaRef};
use parquet::arrow::ArrowWriter;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;
use serde_json::Value;

use crate::Failure;

/// zstd level of the merged files (as the export crate's).
const ZSTD_LEVEL: i32 = 3;
/// Rows per row group of a merged file: bounds the writer's buffer whatever the file's size
/// (a few MB per file being merged; files come out about 8 % larger than with 65,536).
const ROW_GROUP_ROWS: usize = 8_192;
/// Rows per batch read from a part.
const READ_BATCH_ROWS: usize = 8_192;
/// Key of the Arrow schema the Parquet writer stores itself.
const ARROW_SCHEMA_KEY: &str = "ARROW:schema";
/// Key of the GeoParquet metadata.
const GEO_KEY: &str = "geo";

static TEMP_COUNTER: AtomicU64 = AtomicU64::new(0);

fn read_failure(path: &Path, e: impl std::fmt::Display) -> Failure {
    Failure::Output(format!("cannot read {}: {e}", path.display()))
}

fn open(path: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>, Failure> {
    let file = File::open(path).map_err(|e| read_failure(path, e))?;
    ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| read_failure(path, e))
}

fn key_values(builder: &ParquetRecordBatchReaderBuilder<File>) -> Vec<KeyValue> {
    builder
        .metadata()
        .file_metadata()
        .key_value_metadata()
        .cloned()
        .unwrap_or_default()
}

/// Widens every `bbox` of `geo` to include the one of `other` (same columns).
fn widen_bboxes(geo: &mut Value, other: &Value) {
    let Some(columns) = geo.get_mut("columns").and_then(Value::as_object_mut) else {
        return;
    };
    for (name, column) in columns.iter_mut() {
        let theirs = other
            .get("columns")
            .and_then(|c| c.get(name))
            .and_then(|c| c.get("bbox"))
            .and_then(Value::as_array)
            .and_then(|b| b.iter().map(Value::as_f64).collect::<Option<Vec<f64>>>());
        let Some(theirs) = theirs.filter(|b| b.len() == 4) else {
            continue;
        };
        let Some(entry) = column.as_object_mut() else {
            continue;
        };
        let ours = entry
            .get("bbox")
            .and_then(Value::as_array)
            .and_then(|b| b.iter().map(Value::as_f64).collect::<Option<Vec<f64>>>())
            .filter(|b| b.len() == 4);
        let merged = match ours {
            None => theirs,
            Some(o) => vec![
                o[0].min(theirs[0]),
                o[1].min(theirs[1]),
                o[2].max(theirs[2]),
                o[3].max(theirs[3]),
            ],
        };
        entry.insert("bbox".to_string(), serde_json::json!(merged));
    }
}

/// Writes the rows of every file of `parts`, in order, to `out` (see the module docs). `parts`
/// must not be empty.
pub fn concat_parts(parts: &[PathBuf], out: &Path) -> Result<(), Failure> {
    let Some(first_path) = parts.first() else {
        return Err(Failure::Output(format!(
            "cannot write {}: no part to take the columns from",
            out.display()
        )));
    };
    // First pass, footers only: the schema, the metadata and the union of the bounding boxes.
    let first = open(first_path)?;
    let schema = first.schema().clone();
    let mut kv = key_values(&first);
    drop(first);
    let first_geo: Option<Value> = kv
        .iter()
        .find(|k| k.key == GEO_KEY)
        .and_then(|k| k.value.as_deref())
        .and_then(|v| serde_json::from_str(v).ok());
    let geo_text = match first_geo {
        None => None,
        Some(mut geo) => {
            if let Some(columns) = geo.get_mut("columns").and_then(Value::as_object_mut) {
                for column in columns.values_mut() {
                    if let Some(entry) = column.as_object_mut() {
                        entry.remove("bbox");
                    }
                }
            }
            for path in parts {
                let part = open(path)?;
                let theirs = key_values(&part)
                    .into_iter()
                    .find(|k| k.key == GEO_KEY)
                    .and_then(|k| k.value)
                    .and_then(|v| serde_json::from_str::<Value>(&v).ok());
                if let Some(theirs) = theirs {
                    widen_bboxes(&mut geo, &theirs);
                }
            }
            Some(geo.to_string())
        }
    };
    kv.retain(|k| k.key != ARROW_SCHEMA_KEY);
    let mut schema_metadata = schema.metadata().clone();
    if let Some(geo) = &geo_text {
        for k in kv.iter_mut().filter(|k| k.key == GEO_KEY) {
            k.value = Some(geo.clone());
        }
        schema_metadata.insert(GEO_KEY, geo.clone());
    }
    let schema: SchemaRef = Arc::new(Schema::new_with_metadata(
        schema.fields().clone(),
        schema_metadata,
    ));
    let level = ZstdLevel::try_new(ZSTD_LEVEL)
        .map_err(|e| Failure::Output(format!("cannot write {}: {e}", out.display())))?;
    let properties = WriterProperties::builder()
        .set_compression(Compression::ZSTD(level))
        .set_key_value_metadata(Some(kv))
        .set_max_row_group_row_count(Some(ROW_GROUP_ROWS))
        .build();

    let dir = out.parent().unwrap_or(Path::new("."));
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let temp = dir.join(format!(
        ".{name}.tmp-{}-m{}",
        std::process::id(),
        TEMP_COUNTER.fetch_add(1, Ordering::Relaxed)
    ));
    let result = write_parts(parts, &temp, schema, properties);
    let result = result.and_then(|()| {
        std::fs::rename(&temp, out)
            .map_err(|e| Failure::Output(format!("cannot write {}: {e}", out.display())))
    });
    if result.is_err() {
        let _ = std::fs::remove_file(&temp);
    }
    result
}

/// Second pass: every batch of every part into one writer at `temp`, then synced.
fn write_parts(
    parts: &[PathBuf],
    temp: &Path,
    schema: SchemaRef,
    properties: WriterProperties,
) -> Result<(), Failure> {
    let write_failure = |e: &dyn std::fmt::Display| {
        Failure::Output(format!("cannot write {}: {e}", temp.display()))
    };
    let file = File::create(temp).map_err(|e| write_failure(&e))?;
    let mut writer = ArrowWriter::try_new(file, schema.clone(), Some(properties))
        .map_err(|e| write_failure(&e))?;
    for path in parts {
        let reader = open(path)?
            .with_batch_size(READ_BATCH_ROWS)
            .build()
            .map_err(|e| read_failure(path, e))?;
        for batch in reader {
            let batch = batch.map_err(|e| read_failure(path, e))?;
            // Same columns; only the schema metadata (the part's own bbox) differs.
            let batch =
                RecordBatch::try_new(schema.clone(), batch.columns().to_vec()).map_err(|e| {
                    read_failure(path, format!("columns differ from the first part: {e}"))
                })?;
            writer.write(&batch).map_err(|e| write_failure(&e))?;
        }
    }
    let file = writer.into_inner().map_err(|e| write_failure(&e))?;
    file.sync_all().map_err(|e| write_failure(&e))
}
