//! Result structs → export tables (columns per the output contract, plus extras).

use std::collections::BTreeMap;
use std::path::Path;

use headroom_capacity::{Element, FeederMap, Limit, RunStats};
use headroom_export::{ColumnData, Coord, Crs, Table};
use headroom_model::{Diagnostic, Feeder, ModelErrors};

use crate::Failure;

/// Columns in order; the first geometry column becomes the primary geometry.
pub struct Columns {
    table: Table,
}

impl Columns {
    pub fn new(crs: &Crs) -> Columns {
        Columns {
            table: Table::new().with_crs(crs.clone()),
        }
    }

    pub fn add(&mut self, name: &str, data: ColumnData) -> &mut Columns {
        // Lengths are equal by construction below; a mismatch is a bug, caught by the tests.
        self.table
            .add_column(name, data)
            .unwrap_or_else(|e| panic!("column {name}: {e}"));
        self
    }

    pub fn meta(&mut self, key: &str, value: &str) -> &mut Columns {
        self.table
            .insert_metadata(key, value)
            .unwrap_or_else(|e| panic!("metadata {key}: {e}"));
        self
    }

    pub fn finish(self) -> Table {
        self.table
    }
}

/// Feeders grouped by the CRS of their coordinates: one output file per group. With a single
/// group the file names carry no suffix; otherwise `-<crs>` (e.g. `nodes-epsg32630.parquet`).
pub struct CrsGroup {
    pub crs: Crs,
    pub suffix: String,
    pub feeders: Vec<usize>,
}

/// Reads the `--crs-projjson` file, if any; a bad file is an input error naming it.
pub fn custom_crs(projjson: Option<&Path>) -> Result<Option<Crs>, Failure> {
    match projjson {
        Some(path) => Ok(Some(Crs::from_projjson_file(path).map_err(|e| {
            Failure::Invalid(format!(
                "error: {}: {e}\nnothing was written.",
                path.display()
            ))
        })?)),
        None => Ok(None),
    }
}

/// One feeder's CRS and the key of its output group (`nocrs`, or the code's letters and digits
/// in lower case, e.g. `epsg32630`). An unsupported code without `custom` is an input error
/// naming the feeder.toml and the value.
pub fn feeder_crs(feeder: &Feeder, custom: Option<&Crs>) -> Result<(String, Crs), Diagnostic> {
    let code = feeder.header().crs.as_deref();
    let crs = match Crs::from_optional_code(code) {
        Ok(crs) => crs,
        Err(e) => match custom {
            Some(crs) => crs.clone(),
            None => {
                return Err(Diagnostic::error(
                    feeder.folder().join("feeder.toml"),
                    format!("{e}; or give the CRS as a PROJJSON file with --crs-projjson"),
                )
                .at_column("crs")
                .with_value(code.unwrap_or_default()));
            }
        },
    };
    let key = match code {
        None => "nocrs".to_string(),
        Some(code) => code
            .chars()
            .filter(|c| c.is_ascii_alphanumeric())
            .collect::<String>()
            .to_ascii_lowercase(),
    };
    Ok((key, crs))
}

/// Resolves every feeder's `crs` (see [`feeder_crs`]), reporting every bad one.
pub fn crs_groups(feeders: &[Feeder], projjson: Option<&Path>) -> Result<Vec<CrsGroup>, Failure> {
    let custom = custom_crs(projjson)?;
    let mut errors = Vec::new();
    let mut groups: BTreeMap<String, CrsGroup> = BTreeMap::new();
    for (i, feeder) in feeders.iter().enumerate() {
        match feeder_crs(feeder, custom.as_ref()) {
            Ok((key, crs)) => groups
                .entry(key.clone())
                .or_insert_with(|| CrsGroup {
                    crs,
                    suffix: format!("-{key}"),
                    feeders: Vec::new(),
                })
                .feeders
                .push(i),
            Err(error) => errors.push(error),
        }
    }
    if !errors.is_empty() {
        return Err(ModelErrors { errors }.into());
    }
    let mut groups: Vec<CrsGroup> = groups.into_values().collect();
    if groups.len() == 1 {
        groups[0].suffix.clear();
    }
    Ok(groups)
}

fn coord(x: Option<f64>, y: Option<f64>) -> Option<Coord> {
    Some(Coord::new(x?, y?))
}

fn element_id(feeder: &Feeder, element: Element) -> Option<String> {
    element.id(feeder).map(str::to_string)
}

/// nodes table: one row per (feeder, scenario, node), head excluded.
pub fn nodes_table(maps: &[&FeederMap<'_>], crs: &Crs, metadata: &[(&str, String)]) -> Table {
    let mut feeder = Vec::new();
    let mut scenario = Vec::new();
    let mut node = Vec::new();
    let (mut x, mut y, mut geometry) = (Vec::new(), Vec::new(), Vec::new());
    let mut hosting_kw = Vec::new();
    let mut limit = Vec::new();
    let mut limit_element = Vec::new();
    let mut v_base_pu = Vec::new();
    let (mut kw_voltage, mut kw_thermal, mut kw_change, mut kw_reverse) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut substation, mut region) = (Vec::new(), Vec::new());
    let mut load_flows = Vec::new();
    for map in maps {
        let f = map.feeder;
        for s in &map.scenarios {
            for answer in &s.nodes {
                let n = f.node(answer.bus);
                feeder.push(f.id().to_string());
                scenario.push(s.scenario.clone());
                node.push(n.id.clone());
                x.push(n.x);
                y.push(n.y);
                geometry.push(coord(n.x, n.y));
                hosting_kw.push(answer.hosting_kw);
                limit.push(answer.limit.as_str().to_string());
                limit_element.push(element_id(f, answer.element));
                v_base_pu.push(answer.v_base_pu);
                kw_voltage.push(answer.hosting_kw_voltage);
                kw_thermal.push(answer.hosting_kw_thermal);
                kw_change.push(answer.hosting_kw_change);
                kw_reverse.push(answer.hosting_kw_reverse);
                substation.push(f.header().substation.clone());
                region.push(f.header().region.clone());
                load_flows.push(answer.load_flows);
            }
        }
    }
    let mut c = Columns::new(crs);
    c.add("feeder", ColumnData::Utf8Dictionary(feeder))
        .add("scenario", ColumnData::Utf8Dictionary(scenario))
        .add("node", ColumnData::Utf8(node))
        .add("x", ColumnData::NullableFloat64(x))
        .add("y", ColumnData::NullableFloat64(y))
        .add("geometry", ColumnData::Point(geometry))
        .add("hosting_kw", ColumnData::Float64(hosting_kw))
        .add("limit", ColumnData::Utf8Dictionary(limit))
        .add("limit_element", ColumnData::NullableUtf8(limit_element))
        .add("v_base_pu", ColumnData::Float64(v_base_pu))
        .add(
            "hosting_kw_voltage",
            ColumnData::NullableFloat64(kw_voltage),
        )
        .add(
            "hosting_kw_thermal",
            ColumnData::NullableFloat64(kw_thermal),
        )
        .add("hosting_kw_change", ColumnData::NullableFloat64(kw_change))
        .add(
            "hosting_kw_reverse",
            ColumnData::NullableFloat64(kw_reverse),
        )
        .add("substation", ColumnData::NullableUtf8(substation))
        .add("region", ColumnData::NullableUtf8(region))
        .add("load_flows", ColumnData::UInt32(load_flows));
    for (key, value) in metadata {
        c.meta(key, value);
    }
    c.finish()
}

/// branches table: one row per (feeder, scenario, closed branch), base case (P = 0).
pub fn branches_table(maps: &[&FeederMap<'_>], crs: &Crs, metadata: &[(&str, String)]) -> Table {
    let (mut feeder, mut scenario, mut branch) = (Vec::new(), Vec::new(), Vec::new());
    let (mut from, mut to, mut geometry) = (Vec::new(), Vec::new(), Vec::new());
    let (mut current_a, mut rating_a, mut loading_pct) = (Vec::new(), Vec::new(), Vec::new());
    let (mut p_kw, mut q_kvar, mut loss_kw) = (Vec::new(), Vec::new(), Vec::new());
    let (mut conductor, mut length_km) = (Vec::new(), Vec::new());
    for map in maps {
        let f = map.feeder;
        for s in &map.scenarios {
            for (b, flow) in f.branches().iter().zip(&s.base_branches) {
                let (a, z) = (f.node(b.from), f.node(b.to));
                feeder.push(f.id().to_string());
                scenario.push(s.scenario.clone());
                branch.push(b.id.clone());
                from.push(a.id.clone());
                to.push(z.id.clone());
                geometry.push(
                    coord(a.x, a.y)
                        .zip(coord(z.x, z.y))
                        .map(|(p, q)| vec![p, q]),
                );
                current_a.push(flow.current_a);
                rating_a.push(b.rating_a);
                loading_pct.push(flow.loading_pct);
                p_kw.push(flow.p_kw);
                q_kvar.push(flow.q_kvar);
                loss_kw.push(flow.loss_kw);
                conductor.push(b.conductor.clone());
                length_km.push(b.length_km);
            }
        }
    }
    let mut c = Columns::new(crs);
    c.add("feeder", ColumnData::Utf8Dictionary(feeder))
        .add("scenario", ColumnData::Utf8Dictionary(scenario))
        .add("branch", ColumnData::Utf8(branch))
        .add("from", ColumnData::Utf8(from))
        .add("to", ColumnData::Utf8(to))
        .add("geometry", ColumnData::LineString(geometry))
        .add("current_a", ColumnData::Float64(current_a))
        .add("rating_a", ColumnData::Float64(rating_a))
        .add("loading_pct", ColumnData::Float64(loading_pct))
        .add("p_kw", ColumnData::Float64(p_kw))
        .add("q_kvar", ColumnData::Float64(q_kvar))
        .add("loss_kw", ColumnData::Float64(loss_kw))
        .add("conductor", ColumnData::NullableUtf8(conductor))
        .add("length_km", ColumnData::NullableFloat64(length_km));
    for (key, value) in metadata {
        c.meta(key, value);
    }
    c.finish()
}

/// Per (feeder, scenario) summary numbers, shared by the feeders table and the printed summary.
pub struct FeederSummary {
    pub hosting: Option<(f64, f64, f64)>,
    pub by_limit: [u64; 7],
    pub baseline: usize,
    pub v_min_pu: f64,
    pub v_max_pu: f64,
    pub max_loading_pct: f64,
}

pub fn summarise(map: &FeederMap<'_>, s: usize) -> FeederSummary {
    let scenario = &map.scenarios[s];
    let row = map.hosting_kw.row(s);
    let hosting = crate::output::low_median_high(row.as_slice().unwrap_or(&row.to_vec()));
    let mut by_limit = [0u64; 7];
    for answer in &scenario.nodes {
        let i = Limit::ALL
            .iter()
            .position(|&l| l == answer.limit)
            .unwrap_or(0);
        by_limit[i] += 1;
    }
    let v = scenario.nodes.iter().map(|a| a.v_base_pu);
    FeederSummary {
        hosting,
        by_limit,
        baseline: scenario.baseline.len(),
        v_min_pu: v.clone().fold(f64::INFINITY, f64::min),
        v_max_pu: v.fold(f64::NEG_INFINITY, f64::max),
        max_loading_pct: scenario
            .base_branches
            .iter()
            .map(|b| b.loading_pct)
            .fold(0.0, f64::max),
    }
}

/// feeders table: one row per (feeder, scenario).
pub fn feeders_table(maps: &[&FeederMap<'_>], metadata: &[(&str, String)]) -> Table {
    let (mut feeder, mut scenario, mut name) = (Vec::new(), Vec::new(), Vec::new());
    let (mut substation, mut region, mut nominal_kv) = (Vec::new(), Vec::new(), Vec::new());
    let mut n_nodes = Vec::new();
    let (mut low, mut median, mut high) = (Vec::new(), Vec::new(), Vec::new());
    let mut per_limit: Vec<Vec<u64>> = vec![Vec::new(); 7];
    let (mut baseline, mut v_min, mut v_max, mut max_loading) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let (mut head_p, mut head_q) = (Vec::new(), Vec::new());
    for map in maps {
        let f = map.feeder;
        for (s, sc) in map.scenarios.iter().enumerate() {
            let summary = summarise(map, s);
            feeder.push(f.id().to_string());
            scenario.push(sc.scenario.clone());
            name.push(f.header().name.clone());
            substation.push(f.header().substation.clone());
            region.push(f.header().region.clone());
            nominal_kv.push(f.header().nominal_kv);
            n_nodes.push(sc.nodes.len() as u64);
            low.push(summary.hosting.map(|h| h.0));
            median.push(summary.hosting.map(|h| h.1));
            high.push(summary.hosting.map(|h| h.2));
            for (column, count) in per_limit.iter_mut().zip(summary.by_limit) {
                column.push(count);
            }
            baseline.push(summary.baseline as u64);
            v_min.push(summary.v_min_pu);
            v_max.push(summary.v_max_pu);
            max_loading.push(summary.max_loading_pct);
            head_p.push(sc.base_head_power.0);
            head_q.push(sc.base_head_power.1);
        }
    }
    let mut c = Columns::new(&Crs::Unknown);
    c.add("feeder", ColumnData::Utf8Dictionary(feeder))
        .add("scenario", ColumnData::Utf8Dictionary(scenario))
        .add("name", ColumnData::Utf8(name))
        .add("substation", ColumnData::NullableUtf8(substation))
        .add("region", ColumnData::NullableUtf8(region))
        .add("nominal_kv", ColumnData::Float64(nominal_kv))
        .add("nodes", ColumnData::UInt64(n_nodes))
        .add("hosting_kw_min", ColumnData::NullableFloat64(low))
        .add("hosting_kw_median", ColumnData::NullableFloat64(median))
        .add("hosting_kw_max", ColumnData::NullableFloat64(high));
    for (limit, column) in Limit::ALL.iter().zip(per_limit) {
        c.add(
            &format!("nodes_{}", limit.as_str()),
            ColumnData::UInt64(column),
        );
    }
    c.add("baseline_violations", ColumnData::UInt64(baseline))
        .add("v_base_min_pu", ColumnData::Float64(v_min))
        .add("v_base_max_pu", ColumnData::Float64(v_max))
        .add("loading_base_max_pct", ColumnData::Float64(max_loading))
        .add("head_p_kw", ColumnData::Float64(head_p))
        .add("head_q_kvar", ColumnData::Float64(head_q));
    for (key, value) in metadata {
        c.meta(key, value);
    }
    c.finish()
}

/// baseline table: limits already broken without new generation.
pub fn baseline_table(maps: &[&FeederMap<'_>], metadata: &[(&str, String)]) -> Table {
    let (mut feeder, mut scenario, mut limit) = (Vec::new(), Vec::new(), Vec::new());
    let (mut element, mut value, mut threshold, mut unit) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for map in maps {
        let f = map.feeder;
        for sc in &map.scenarios {
            for v in &sc.baseline {
                feeder.push(f.id().to_string());
                scenario.push(sc.scenario.clone());
                limit.push(v.limit.as_str().to_string());
                element.push(element_id(f, v.element));
                value.push(v.value);
                threshold.push(v.threshold);
                unit.push(
                    match v.limit {
                        Limit::Thermal => "A",
                        Limit::ReverseFlow => "kW",
                        Limit::Overvoltage | Limit::Undervoltage => "pu",
                        _ => "",
                    }
                    .to_string(),
                );
            }
        }
    }
    let mut c = Columns::new(&Crs::Unknown);
    c.add("feeder", ColumnData::Utf8Dictionary(feeder))
        .add("scenario", ColumnData::Utf8Dictionary(scenario))
        .add("limit", ColumnData::Utf8Dictionary(limit))
        .add("element", ColumnData::NullableUtf8(element))
        .add("value", ColumnData::Float64(value))
        .add("threshold", ColumnData::Float64(threshold))
        .add("unit", ColumnData::Utf8Dictionary(unit));
    for (key, value) in metadata {
        c.meta(key, value);
    }
    c.finish()
}

/// Counts per limit as "overvoltage 12, thermal 3".
pub fn limit_counts(by_limit: &[u64; 7]) -> String {
    let parts: Vec<String> = Limit::ALL
        .iter()
        .zip(by_limit)
        .filter(|(_, n)| **n > 0)
        .map(|(l, n)| format!("{} {n}", l.as_str()))
        .collect();
    if parts.is_empty() {
        "none".to_string()
    } else {
        parts.join(", ")
    }
}

/// Totals line of a run.
pub fn stats_line(stats: &RunStats, seconds: f64) -> String {
    let mut line = format!(
        "{} node answers on {} feeder(s) in {:.2} s: {} load flows, {} sweep iterations \
         ({:.2} load-flow equivalents per answer); binding: {}; baseline violations: {}",
        stats.node_results,
        stats.feeders,
        seconds,
        stats.load_flows,
        stats.sweep_iterations,
        stats.load_flow_equivalents_per_answer(),
        limit_counts(&stats.by_limit),
        stats.baseline_violations
    );
    if stats.stepped_near_nose > 0 {
        line.push_str(&format!(
            "; searched step by step next to voltage collapse: {}",
            stats.stepped_near_nose
        ));
    }
    line
}
