//! Reading a run folder back: every `nodes*`, `branches*`, `feeders*` and `baseline*` Parquet
//! file under it (sharded runs write several), and `run.json` when present.

use std::collections::{BTreeMap, HashMap};
use std::fs::File;
use std::path::{Path, PathBuf};

use arrow_array::cast::AsArray;
use arrow_array::types::{Float32Type, Float64Type, Int32Type, Int64Type, UInt32Type, UInt64Type};
use arrow_array::{Array, ArrayRef, RecordBatch};
use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use crate::error::ReportError;
use crate::limit::Limit;
use crate::wkb::line_string_ends;

/// First and last point of a branch geometry.
type LineEnds = ((f64, f64), (f64, f64));

/// Everything the report needs from one run folder, as read (nothing computed yet).
#[derive(Debug, Clone, Default)]
pub struct Run {
    /// The run folder.
    pub dir: PathBuf,
    /// How the run was made.
    pub meta: RunMeta,
    /// Scenario names in the run's order (run.json, else order of first appearance).
    pub scenarios: Vec<String>,
    /// One entry per feeder met in any table, ordered by region, substation, then id.
    pub feeders: Vec<FeederInfo>,
    /// One row per (feeder, scenario, node), head excluded.
    pub nodes: Vec<NodeRow>,
    /// One row per (feeder, scenario, branch) with no new generation.
    pub branches: Vec<BranchRow>,
    /// Limits already broken with no new generation.
    pub baseline: Vec<BaselineRow>,
}

/// How the run was made: from run.json, else from the Parquet files' metadata.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RunMeta {
    /// Version of the tool that made the run.
    pub version: Option<String>,
    /// The feeder path given to `headroom map`.
    pub input: Option<String>,
    /// Study settings as recorded by the run (limits, search, generation, scenarios).
    pub study: Option<String>,
    /// Search method.
    pub search: Option<String>,
    /// The caution recorded by the run.
    pub caution: Option<String>,
    /// The files read, relative to the run folder, in reading order.
    pub files: Vec<String>,
}

/// One feeder's description.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FeederInfo {
    /// Feeder id (folder name).
    pub id: String,
    /// Display name.
    pub name: Option<String>,
    /// Substation, for grouping.
    pub substation: Option<String>,
    /// Region, for grouping.
    pub region: Option<String>,
    /// Line-to-line nominal voltage, kV.
    pub nominal_kv: Option<f64>,
    /// Coordinate reference of `x`, `y`, e.g. `EPSG:32630`.
    pub crs: Option<String>,
}

/// One row of a node table.
#[derive(Debug, Clone, PartialEq)]
pub struct NodeRow {
    /// Feeder id.
    pub feeder: String,
    /// Scenario name.
    pub scenario: String,
    /// Node id.
    pub node: String,
    /// Easting or longitude, in the feeder's CRS.
    pub x: Option<f64>,
    /// Northing or latitude, in the feeder's CRS.
    pub y: Option<f64>,
    /// Hosting capacity, kW.
    pub hosting_kw: f64,
    /// The criterion that binds first.
    pub limit: Limit,
    /// Where it binds.
    pub limit_element: Option<String>,
    /// Voltage with no new generation, per unit.
    pub v_base_pu: Option<f64>,
}

/// One row of a branch table.
#[derive(Debug, Clone, PartialEq)]
pub struct BranchRow {
    /// Feeder id.
    pub feeder: String,
    /// Scenario name.
    pub scenario: String,
    /// Branch id.
    pub branch: String,
    /// From-node id.
    pub from: String,
    /// To-node id.
    pub to: String,
    /// From-end coordinates from the geometry, when present.
    pub from_xy: Option<(f64, f64)>,
    /// To-end coordinates from the geometry, when present.
    pub to_xy: Option<(f64, f64)>,
    /// Loading with no new generation, % of rating.
    pub loading_pct: Option<f64>,
}

/// One limit already broken with no new generation.
#[derive(Debug, Clone, PartialEq)]
pub struct BaselineRow {
    /// Feeder id.
    pub feeder: String,
    /// Scenario name.
    pub scenario: String,
    /// The criterion broken.
    pub limit: Limit,
    /// Node or branch where it is broken.
    pub element: Option<String>,
    /// The quantity, in `unit`.
    pub value: f64,
    /// Its limit, in `unit`.
    pub threshold: f64,
    /// `pu`, `A` or `kW`.
    pub unit: String,
}

/// Reads every table of the run folder `dir`. Fails when the folder is missing, holds no
/// `nodes*.parquet`, or a file is unreadable or holds a bad value (the error names the file,
/// the row, the column and the value). Two rows for the same (feeder, scenario, node), e.g.
/// from shards of different runs left in one folder, are an error too.
pub fn read_run(dir: &Path) -> Result<Run, ReportError> {
    if !dir.is_dir() {
        return Err(ReportError::NoRunDir(dir.to_path_buf()));
    }
    let mut files = Vec::new();
    walk(dir, &mut files)?;
    files.sort();
    let kind_files = |prefix: &str| -> Vec<PathBuf> {
        files
            .iter()
            .filter(|p| {
                p.file_name()
                    .and_then(|n| n.to_str())
                    .is_some_and(|n| n.starts_with(prefix) && n.ends_with(".parquet"))
            })
            .cloned()
            .collect()
    };
    let (node_files, branch_files) = (kind_files("nodes"), kind_files("branches"));
    let (feeder_files, baseline_files) = (kind_files("feeders"), kind_files("baseline"));
    if node_files.is_empty() {
        return Err(ReportError::NoNodeFiles(dir.to_path_buf()));
    }

    let mut run = Run {
        dir: dir.to_path_buf(),
        ..Run::default()
    };
    let mut parquet_meta: HashMap<String, String> = HashMap::new();
    let mut seen: HashMap<(String, String, String), PathBuf> = HashMap::new();
    let mut feeders: BTreeMap<String, FeederInfo> = BTreeMap::new();
    for path in &node_files {
        let rows = read_nodes(path, &mut parquet_meta, &mut feeders)?;
        for row in &rows {
            let key = (row.feeder.clone(), row.scenario.clone(), row.node.clone());
            if let Some(first) = seen.insert(key, path.clone()) {
                return Err(invalid(
                    path,
                    format!(
                        "node {:?} of feeder {:?}, scenario {:?} is also in {}; \
                         the folder holds more than one run",
                        row.node,
                        row.feeder,
                        row.scenario,
                        first.display()
                    ),
                ));
            }
        }
        run.nodes.extend(rows);
    }
    for path in &branch_files {
        run.branches.extend(read_branches(path)?);
    }
    for path in &feeder_files {
        read_feeders(path, &mut feeders)?;
    }
    for path in &baseline_files {
        run.baseline.extend(read_baseline(path)?);
    }

    // run.json, or one run-shard-I-of-N.json per shard: feeder records from all of them,
    // settings from the first (they must agree).
    let manifests: Vec<&PathBuf> = files
        .iter()
        .filter(|p| {
            p.file_name()
                .and_then(|n| n.to_str())
                .is_some_and(|n| n == "run.json" || (n.starts_with("run-") && n.ends_with(".json")))
        })
        .collect();
    let mut json: Option<serde_json::Value> = None;
    for path in manifests {
        let value = read_run_json(path, &mut feeders)?;
        match &json {
            None => json = Some(value),
            Some(first) => {
                if first.get("study") != value.get("study") {
                    return Err(invalid(
                        path,
                        format!(
                            "study settings {} differ from those of the other run files ({}); \
                             the folder holds more than one run",
                            value.get("study").unwrap_or(&serde_json::Value::Null),
                            first.get("study").unwrap_or(&serde_json::Value::Null)
                        ),
                    ));
                }
            }
        }
    }
    let from_parquet = |key: &str| parquet_meta.get(key).cloned();
    let json_str =
        |key: &str| -> Option<String> { json.as_ref()?.get(key)?.as_str().map(str::to_string) };
    run.meta = RunMeta {
        version: json_str("version").or_else(|| from_parquet("headroom_version")),
        input: json_str("input"),
        study: json_str("study").or_else(|| from_parquet("headroom_study")),
        search: from_parquet("headroom_search").or_else(|| json_str("search")),
        caution: json_str("caution").or_else(|| from_parquet("headroom_caution")),
        files: node_files
            .iter()
            .chain(&branch_files)
            .chain(&feeder_files)
            .chain(&baseline_files)
            .map(|p| {
                p.strip_prefix(dir)
                    .unwrap_or(p)
                    .to_string_lossy()
                    .into_owned()
            })
            .collect(),
    };

    let mut scenarios: Vec<String> = json
        .as_ref()
        .and_then(|j| j.get("scenarios"))
        .and_then(|s| s.as_array())
        .map(|list| {
            list.iter()
                .filter_map(|s| s.as_str().map(str::to_string))
                .collect()
        })
        .unwrap_or_default();
    for row in &run.nodes {
        if !scenarios.contains(&row.scenario) {
            scenarios.push(row.scenario.clone());
        }
    }
    run.scenarios = scenarios;
    let mut feeders: Vec<FeederInfo> = feeders.into_values().collect();
    feeders.sort_by_cached_key(|f| {
        (
            f.region.is_none(),
            f.region.clone(),
            f.substation.is_none(),
            f.substation.clone(),
            f.id.clone(),
        )
    });
    run.feeders = feeders;
    Ok(run)
}

/// Every file under `dir`, skipping hidden names (temporary files of a write in progress).
fn walk(dir: &Path, out: &mut Vec<PathBuf>) -> Result<(), ReportError> {
    let entries = std::fs::read_dir(dir).map_err(|e| read_error(dir, e))?;
    for entry in entries {
        let entry = entry.map_err(|e| read_error(dir, e))?;
        let path = entry.path();
        if entry.file_name().to_string_lossy().starts_with('.') {
            continue;
        }
        let kind = entry.file_type().map_err(|e| read_error(&path, e))?;
        if kind.is_dir() {
            walk(&path, out)?;
        } else {
            out.push(path);
        }
    }
    Ok(())
}

fn read_error(path: &Path, e: impl std::fmt::Display) -> ReportError {
    ReportError::Read {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

fn invalid(path: &Path, message: String) -> ReportError {
    ReportError::Invalid {
        path: path.to_path_buf(),
        message,
    }
}

/// All record batches of a Parquet file, with its Arrow schema metadata.
fn read_parquet(path: &Path) -> Result<(Vec<RecordBatch>, HashMap<String, String>), ReportError> {
    let file = File::open(path).map_err(|e| read_error(path, e))?;
    let builder =
        ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| read_error(path, e))?;
    let metadata: HashMap<String, String> = builder
        .schema()
        .metadata()
        .iter()
        .map(|(k, v)| (k.clone(), v.clone()))
        .collect();
    let reader = builder.build().map_err(|e| read_error(path, e))?;
    let batches = reader
        .collect::<Result<Vec<_>, _>>()
        .map_err(|e| read_error(path, e))?;
    Ok((batches, metadata))
}

/// Column access for one batch, with errors that name the file, the column and the row.
struct Batch<'a> {
    path: &'a Path,
    batch: &'a RecordBatch,
    /// Rows of the file before this batch, for 1-based row numbers in messages.
    first_row: usize,
}

impl Batch<'_> {
    fn column(&self, name: &str, required: bool) -> Result<Option<&ArrayRef>, ReportError> {
        match self.batch.column_by_name(name) {
            Some(c) => Ok(Some(c)),
            None if required => Err(invalid(self.path, format!("no column {name:?}"))),
            None => Ok(None),
        }
    }

    fn strings(&self, name: &str, required: bool) -> Result<Vec<Option<String>>, ReportError> {
        match self.column(name, required)? {
            None => Ok(vec![None; self.batch.num_rows()]),
            Some(array) => strings_of(array).ok_or_else(|| {
                invalid(
                    self.path,
                    format!("column {name:?} is {}, expected text", array.data_type()),
                )
            }),
        }
    }

    /// Text that must be present in every row.
    fn texts(&self, name: &str) -> Result<Vec<String>, ReportError> {
        self.strings(name, true)?
            .into_iter()
            .enumerate()
            .map(|(i, v)| v.ok_or_else(|| self.empty(name, i)))
            .collect()
    }

    fn floats(&self, name: &str, required: bool) -> Result<Vec<Option<f64>>, ReportError> {
        match self.column(name, required)? {
            None => Ok(vec![None; self.batch.num_rows()]),
            Some(array) => floats_of(array).ok_or_else(|| {
                invalid(
                    self.path,
                    format!("column {name:?} is {}, expected numbers", array.data_type()),
                )
            }),
        }
    }

    /// Finite numbers that must be present in every row.
    fn numbers(&self, name: &str) -> Result<Vec<f64>, ReportError> {
        self.floats(name, true)?
            .into_iter()
            .enumerate()
            .map(|(i, v)| match v {
                None => Err(self.empty(name, i)),
                Some(v) if !v.is_finite() => Err(self.bad(name, i, &v.to_string(), "not finite")),
                Some(v) => Ok(v),
            })
            .collect()
    }

    fn line_ends(&self, name: &str) -> Result<Vec<Option<LineEnds>>, ReportError> {
        let Some(array) = self.column(name, false)? else {
            return Ok(vec![None; self.batch.num_rows()]);
        };
        let bytes: Vec<Option<&[u8]>> = match array.data_type() {
            DataType::Binary => array.as_binary::<i32>().iter().collect(),
            DataType::LargeBinary => array.as_binary::<i64>().iter().collect(),
            DataType::BinaryView => array.as_binary_view().iter().collect(),
            other => {
                return Err(invalid(
                    self.path,
                    format!("column {name:?} is {other}, expected WKB"),
                ));
            }
        };
        bytes
            .into_iter()
            .enumerate()
            .map(|(i, b)| match b {
                None => Ok(None),
                Some(b) => line_string_ends(b)
                    .map(Some)
                    .ok_or_else(|| self.bad(name, i, "(bytes)", "not a 2D WKB LineString")),
            })
            .collect()
    }

    fn limits(&self, name: &str) -> Result<Vec<Limit>, ReportError> {
        self.texts(name)?
            .into_iter()
            .enumerate()
            .map(|(i, v)| {
                Limit::parse(&v).ok_or_else(|| {
                    self.bad(
                        name,
                        i,
                        &v,
                        "not one of overvoltage, undervoltage, thermal, voltage_change, \
                         reverse_flow, not_converged, search_max",
                    )
                })
            })
            .collect()
    }

    fn empty(&self, name: &str, i: usize) -> ReportError {
        invalid(
            self.path,
            format!("row {}: column {name:?} is empty", self.first_row + i + 1),
        )
    }

    fn bad(&self, name: &str, i: usize, value: &str, why: &str) -> ReportError {
        invalid(
            self.path,
            format!(
                "row {}: column {name:?}: {value:?} is {why}",
                self.first_row + i + 1
            ),
        )
    }
}

/// Text of a Utf8, LargeUtf8, Utf8View or dictionary-of-text column; `None` for other types.
fn strings_of(array: &ArrayRef) -> Option<Vec<Option<String>>> {
    let own = |v: Option<&str>| v.map(str::to_string);
    Some(match array.data_type() {
        DataType::Utf8 => array.as_string::<i32>().iter().map(own).collect(),
        DataType::LargeUtf8 => array.as_string::<i64>().iter().map(own).collect(),
        DataType::Utf8View => array.as_string_view().iter().map(own).collect(),
        DataType::Dictionary(_, _) => {
            let dictionary = array.as_any_dictionary_opt()?;
            let values = strings_of(dictionary.values())?;
            if values.is_empty() {
                return Some(vec![None; array.len()]);
            }
            dictionary
                .normalized_keys()
                .into_iter()
                .enumerate()
                .map(|(i, k)| {
                    if array.is_null(i) {
                        None
                    } else {
                        values[k].clone()
                    }
                })
                .collect()
        }
        _ => return None,
    })
}

/// Numbers of a float or integer column as f64; `None` for other types.
fn floats_of(array: &ArrayRef) -> Option<Vec<Option<f64>>> {
    Some(match array.data_type() {
        DataType::Float64 => array.as_primitive::<Float64Type>().iter().collect(),
        DataType::Float32 => array
            .as_primitive::<Float32Type>()
            .iter()
            .map(|v| v.map(f64::from))
            .collect(),
        DataType::Int32 => array
            .as_primitive::<Int32Type>()
            .iter()
            .map(|v| v.map(f64::from))
            .collect(),
        DataType::Int64 => array
            .as_primitive::<Int64Type>()
            .iter()
            .map(|v| v.map(|v| v as f64))
            .collect(),
        DataType::UInt32 => array
            .as_primitive::<UInt32Type>()
            .iter()
            .map(|v| v.map(f64::from))
            .collect(),
        DataType::UInt64 => array
            .as_primitive::<UInt64Type>()
            .iter()
            .map(|v| v.map(|v| v as f64))
            .collect(),
        _ => return None,
    })
}

/// Runs `each` over the batches of a file with row numbering across batches.
fn for_batches(
    path: &Path,
    mut each: impl FnMut(&Batch<'_>) -> Result<(), ReportError>,
) -> Result<HashMap<String, String>, ReportError> {
    let (batches, metadata) = read_parquet(path)?;
    let mut first_row = 0;
    for batch in &batches {
        each(&Batch {
            path,
            batch,
            first_row,
        })?;
        first_row += batch.num_rows();
    }
    Ok(metadata)
}

fn feeder_entry<'a>(feeders: &'a mut BTreeMap<String, FeederInfo>, id: &str) -> &'a mut FeederInfo {
    feeders.entry(id.to_string()).or_insert_with(|| FeederInfo {
        id: id.to_string(),
        ..FeederInfo::default()
    })
}

fn read_nodes(
    path: &Path,
    parquet_meta: &mut HashMap<String, String>,
    feeders: &mut BTreeMap<String, FeederInfo>,
) -> Result<Vec<NodeRow>, ReportError> {
    let mut rows = Vec::new();
    let metadata = for_batches(path, |b| {
        let feeder = b.texts("feeder")?;
        let scenario = b.texts("scenario")?;
        let node = b.texts("node")?;
        let (x, y) = (b.floats("x", false)?, b.floats("y", false)?);
        let hosting_kw = b.numbers("hosting_kw")?;
        let limit = b.limits("limit")?;
        let limit_element = b.strings("limit_element", false)?;
        let v_base_pu = b.floats("v_base_pu", false)?;
        let substation = b.strings("substation", false)?;
        let region = b.strings("region", false)?;
        for (i, kw) in hosting_kw.iter().enumerate() {
            if *kw < 0.0 {
                return Err(b.bad("hosting_kw", i, &kw.to_string(), "negative"));
            }
        }
        for i in 0..b.batch.num_rows() {
            let info = feeder_entry(feeders, &feeder[i]);
            if info.substation.is_none() {
                info.substation.clone_from(&substation[i]);
            }
            if info.region.is_none() {
                info.region.clone_from(&region[i]);
            }
            let finite = |v: Option<f64>| v.filter(|v| v.is_finite());
            rows.push(NodeRow {
                feeder: feeder[i].clone(),
                scenario: scenario[i].clone(),
                node: node[i].clone(),
                x: finite(x[i]),
                y: finite(y[i]),
                hosting_kw: hosting_kw[i],
                limit: limit[i],
                limit_element: limit_element[i].clone().filter(|e| !e.is_empty()),
                v_base_pu: v_base_pu[i],
            });
        }
        Ok(())
    })?;
    for (key, value) in metadata {
        if key.starts_with("headroom_") {
            parquet_meta.entry(key).or_insert(value);
        }
    }
    Ok(rows)
}

fn read_branches(path: &Path) -> Result<Vec<BranchRow>, ReportError> {
    let mut rows = Vec::new();
    for_batches(path, |b| {
        let feeder = b.texts("feeder")?;
        let scenario = b.texts("scenario")?;
        let branch = b.texts("branch")?;
        let (from, to) = (b.texts("from")?, b.texts("to")?);
        let ends = b.line_ends("geometry")?;
        let loading_pct = b.floats("loading_pct", false)?;
        for i in 0..b.batch.num_rows() {
            rows.push(BranchRow {
                feeder: feeder[i].clone(),
                scenario: scenario[i].clone(),
                branch: branch[i].clone(),
                from: from[i].clone(),
                to: to[i].clone(),
                from_xy: ends[i].map(|e| e.0),
                to_xy: ends[i].map(|e| e.1),
                loading_pct: loading_pct[i],
            });
        }
        Ok(())
    })?;
    Ok(rows)
}

fn read_feeders(
    path: &Path,
    feeders: &mut BTreeMap<String, FeederInfo>,
) -> Result<(), ReportError> {
    for_batches(path, |b| {
        let feeder = b.texts("feeder")?;
        let name = b.strings("name", false)?;
        let substation = b.strings("substation", false)?;
        let region = b.strings("region", false)?;
        let nominal_kv = b.floats("nominal_kv", false)?;
        for i in 0..b.batch.num_rows() {
            // Only feeders with node rows are reported.
            let Some(info) = feeders.get_mut(&feeder[i]) else {
                continue;
            };
            if info.name.is_none() {
                info.name.clone_from(&name[i]);
            }
            if info.substation.is_none() {
                info.substation.clone_from(&substation[i]);
            }
            if info.region.is_none() {
                info.region.clone_from(&region[i]);
            }
            if info.nominal_kv.is_none() {
                info.nominal_kv = nominal_kv[i];
            }
        }
        Ok(())
    })?;
    Ok(())
}

fn read_baseline(path: &Path) -> Result<Vec<BaselineRow>, ReportError> {
    let mut rows = Vec::new();
    for_batches(path, |b| {
        let feeder = b.texts("feeder")?;
        let scenario = b.texts("scenario")?;
        let limit = b.limits("limit")?;
        let element = b.strings("element", false)?;
        let value = b.numbers("value")?;
        let threshold = b.numbers("threshold")?;
        let unit = b.strings("unit", false)?;
        for i in 0..b.batch.num_rows() {
            rows.push(BaselineRow {
                feeder: feeder[i].clone(),
                scenario: scenario[i].clone(),
                limit: limit[i],
                element: element[i].clone().filter(|e| !e.is_empty()),
                value: value[i],
                threshold: threshold[i],
                unit: unit[i].clone().unwrap_or_default(),
            });
        }
        Ok(())
    })?;
    Ok(rows)
}

/// Reads run.json; feeder descriptions there take precedence over the tables.
fn read_run_json(
    path: &Path,
    feeders: &mut BTreeMap<String, FeederInfo>,
) -> Result<serde_json::Value, ReportError> {
    let text = std::fs::read_to_string(path).map_err(|e| read_error(path, e))?;
    let json: serde_json::Value =
        serde_json::from_str(&text).map_err(|e| invalid(path, format!("not valid JSON: {e}")))?;
    if !json.is_object() {
        return Err(invalid(path, "expected a JSON object".to_string()));
    }
    let list = json.get("feeders").and_then(|f| f.as_array());
    for entry in list.into_iter().flatten() {
        let text = |key: &str| entry.get(key).and_then(|v| v.as_str()).map(str::to_string);
        let Some(id) = text("feeder") else { continue };
        // Only feeders that have rows in the tables are reported.
        let Some(info) = feeders.get_mut(&id) else {
            continue;
        };
        let keep = |new: Option<String>, old: &mut Option<String>| {
            if new.is_some() {
                *old = new;
            }
        };
        keep(text("name"), &mut info.name);
        keep(text("substation"), &mut info.substation);
        keep(text("region"), &mut info.region);
        keep(text("crs"), &mut info.crs);
        if let Some(kv) = entry.get("nominal_kv").and_then(|v| v.as_f64()) {
            info.nominal_kv = Some(kv);
        }
    }
    Ok(json)
}

#[cfg(test)]
mod tests {
    use super::*;
    use headroom_export::{ColumnData, Coord, Crs, Table, write_parquet};

    fn nodes_table(feeder: &str, rows: &[(&str, &str, f64, &str)]) -> Table {
        let n = rows.len();
        Table::new()
            .with_column("feeder", ColumnData::Utf8Dictionary(vec![feeder.into(); n]))
            .unwrap()
            .with_column(
                "scenario",
                ColumnData::Utf8(rows.iter().map(|r| r.0.to_string()).collect()),
            )
            .unwrap()
            .with_column(
                "node",
                ColumnData::Utf8(rows.iter().map(|r| r.1.to_string()).collect()),
            )
            .unwrap()
            .with_column("x", ColumnData::NullableFloat64(vec![Some(1.0); n]))
            .unwrap()
            .with_column("y", ColumnData::NullableFloat64(vec![None; n]))
            .unwrap()
            .with_column(
                "hosting_kw",
                ColumnData::Float64(rows.iter().map(|r| r.2).collect()),
            )
            .unwrap()
            .with_column(
                "limit",
                ColumnData::Utf8Dictionary(rows.iter().map(|r| r.3.to_string()).collect()),
            )
            .unwrap()
            .with_column("limit_element", ColumnData::NullableUtf8(vec![None; n]))
            .unwrap()
            .with_column(
                "substation",
                ColumnData::NullableUtf8(vec![Some("S".into()); n]),
            )
            .unwrap()
            .with_metadata("headroom_version", "9.9.9")
            .unwrap()
    }

    fn branches_table(feeder: &str) -> Table {
        Table::new()
            .with_column("feeder", ColumnData::Utf8Dictionary(vec![feeder.into()]))
            .unwrap()
            .with_column("scenario", ColumnData::Utf8Dictionary(vec!["lo".into()]))
            .unwrap()
            .with_column("branch", ColumnData::Utf8(vec!["b1".into()]))
            .unwrap()
            .with_column("from", ColumnData::Utf8(vec!["h".into()]))
            .unwrap()
            .with_column("to", ColumnData::Utf8(vec!["a".into()]))
            .unwrap()
            .with_column(
                "geometry",
                ColumnData::LineString(vec![Some(vec![
                    Coord::new(0.0, 0.0),
                    Coord::new(3.0, 4.0),
                ])]),
            )
            .unwrap()
            .with_crs(Crs::Unknown)
    }

    #[test]
    fn reads_shards_and_manifests_of_one_run() {
        let dir = tempfile::tempdir().unwrap();
        let shard1 = nodes_table(
            "f1",
            &[
                ("lo", "a", 10.0, "thermal"),
                ("hi", "a", 5.0, "overvoltage"),
            ],
        );
        let shard2 = nodes_table("f2", &[("hi", "z", 7.5, "search_max")]);
        write_parquet(&dir.path().join("nodes-shard-1-of-2.parquet"), &shard1).unwrap();
        write_parquet(&dir.path().join("nodes-shard-2-of-2.parquet"), &shard2).unwrap();
        write_parquet(
            &dir.path().join("branches-shard-1-of-2.parquet"),
            &branches_table("f1"),
        )
        .unwrap();
        // A hidden work folder of a run in progress is never read.
        std::fs::create_dir_all(dir.path().join(".work")).unwrap();
        std::fs::write(dir.path().join(".work/nodes.parquet"), b"partial").unwrap();
        let manifest = |feeder: &str, name: &str| {
            format!(
                r#"{{"version":"1.2.3","study":"v_max_pu=1.05","scenarios":["lo","hi"],
                   "feeders":[{{"feeder":"{feeder}","name":"{name}","crs":"EPSG:32630","nominal_kv":11.0}}]}}"#
            )
        };
        std::fs::write(
            dir.path().join("run-shard-1-of-2.json"),
            manifest("f1", "One"),
        )
        .unwrap();
        std::fs::write(
            dir.path().join("run-shard-2-of-2.json"),
            manifest("f2", "Two"),
        )
        .unwrap();

        let run = read_run(dir.path()).unwrap();
        assert_eq!(run.scenarios, vec!["lo", "hi"]);
        assert_eq!(run.nodes.len(), 3);
        assert_eq!(run.nodes[1].limit, Limit::Overvoltage);
        assert_eq!((run.nodes[0].x, run.nodes[0].y), (Some(1.0), None));
        assert_eq!(run.meta.version.as_deref(), Some("1.2.3"));
        let names: Vec<(&str, Option<&str>, Option<&str>)> = run
            .feeders
            .iter()
            .map(|f| (f.id.as_str(), f.name.as_deref(), f.substation.as_deref()))
            .collect();
        assert_eq!(
            names,
            vec![
                ("f1", Some("One"), Some("S")),
                ("f2", Some("Two"), Some("S"))
            ]
        );
        assert_eq!(run.branches[0].to_xy, Some((3.0, 4.0)));
        assert_eq!(run.meta.files.len(), 3);

        // Shards of a run with other settings do not mix.
        std::fs::write(
            dir.path().join("run-shard-2-of-2.json"),
            manifest("f2", "Two").replace("1.05", "1.10"),
        )
        .unwrap();
        let error = read_run(dir.path()).unwrap_err().to_string();
        assert!(
            error.contains("run-shard-2-of-2.json") && error.contains("more than one run"),
            "{error}"
        );
    }

    #[test]
    fn bad_values_name_the_file_row_column_and_value() {
        let dir = tempfile::tempdir().unwrap();
        let table = nodes_table(
            "f1",
            &[("lo", "a", 10.0, "thermal"), ("lo", "b", 5.0, "melting")],
        );
        write_parquet(&dir.path().join("nodes.parquet"), &table).unwrap();
        let error = read_run(dir.path()).unwrap_err().to_string();
        assert!(
            error.contains("nodes.parquet: row 2: column \"limit\": \"melting\""),
            "{error}"
        );

        let table = nodes_table("f1", &[("lo", "a", -1.0, "thermal")]);
        write_parquet(&dir.path().join("nodes.parquet"), &table).unwrap();
        let error = read_run(dir.path()).unwrap_err().to_string();
        assert!(
            error.contains("row 1: column \"hosting_kw\": \"-1\" is negative"),
            "{error}"
        );

        let table = Table::new()
            .with_column("feeder", ColumnData::Utf8(vec!["f".into()]))
            .unwrap();
        write_parquet(&dir.path().join("nodes.parquet"), &table).unwrap();
        let error = read_run(dir.path()).unwrap_err().to_string();
        assert!(error.contains("no column \"scenario\""), "{error}");

        let table = nodes_table("f1", &[("lo", "a", 10.0, "thermal")]);
        write_parquet(&dir.path().join("nodes.parquet"), &table).unwrap();
        std::fs::write(dir.path().join("run.json"), "{not json").unwrap();
        let error = read_run(dir.path()).unwrap_err().to_string();
        assert!(error.contains("run.json: not valid JSON"), "{error}");
    }
}
