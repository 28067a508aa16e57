//! The demo region Tessary Vale (feeders/) mapped with its study settings, checked the way a
//! planner would read the result: each feeder shows the limit it was designed to show
//! (feeders/README.md), capacity falls with electrical distance along the rural line, the
//! feeder with problems at P = 0 has them reported as baseline violations, and the open point
//! of the ring feeder is modelled open.
//!
//! The expected shares are the design of the demo data, cross-checked by the region's own
//! stand-alone script (feeders/tools/check_demo_region.py, table "What binds" in
//! feeders/README.md); the thresholds below leave room for the finer search of the program.

use std::collections::{BTreeMap, BTreeSet};
use std::ffi::OsStr;
use std::path::PathBuf;
use std::sync::OnceLock;

use headroom_model::{BusIdx, Feeder, load_feeders};

use crate::command::{ParquetTable, repo_path, run_ok, scratch_folder};

const UPLANDS: &str = "corrowmoor-uplands-33";
const QUARRY_ROAD: &str = "corrowmoor-quarry-road-11";
const TOWN_CENTRE: &str = "hallowick-town-centre-11";
const EASTFIELDS: &str = "hallowick-eastfields-11";
const MILLBROOK: &str = "hallowick-millbrook-11";

/// The map of the region, run once for the whole module.
struct DemoMap {
    out: PathBuf,
    stdout: String,
    feeders: Vec<Feeder>,
    nodes: Vec<NodeRow>,
}

struct NodeRow {
    feeder: String,
    scenario: String,
    node: String,
    hosting_kw: f64,
    limit: String,
    limit_element: Option<String>,
    v_base_pu: f64,
}

fn demo() -> &'static DemoMap {
    static DEMO: OnceLock<DemoMap> = OnceLock::new();
    DEMO.get_or_init(|| {
        // Below the build's scratch folder: one folder per test process, kept for inspection
        // until a later run finds its process gone.
        let out = scratch_folder("demo-region-map");
        let stdout = run_ok(&[
            OsStr::new("map"),
            repo_path("feeders").as_os_str(),
            OsStr::new("--study"),
            repo_path("feeders/study.toml").as_os_str(),
            OsStr::new("--out"),
            out.as_os_str(),
            OsStr::new("--quiet"),
        ]);
        let table = ParquetTable::read(&out.join("nodes.parquet"));
        let feeder = table.strings("feeder");
        let scenario = table.strings("scenario");
        let node = table.strings("node");
        let hosting_kw = table.f64s("hosting_kw");
        let limit = table.strings("limit");
        let limit_element = table.opt_strings("limit_element");
        let v_base_pu = table.f64s("v_base_pu");
        let nodes = (0..table.n_rows())
            .map(|i| NodeRow {
                feeder: feeder[i].clone(),
                scenario: scenario[i].clone(),
                node: node[i].clone(),
                hosting_kw: hosting_kw[i],
                limit: limit[i].clone(),
                limit_element: limit_element[i].clone(),
                v_base_pu: v_base_pu[i],
            })
            .collect();
        DemoMap {
            out,
            stdout,
            feeders: load_feeders(&repo_path("feeders")).expect("the demo region is valid"),
            nodes,
        }
    })
}

impl DemoMap {
    fn feeder(&self, id: &str) -> &Feeder {
        self.feeders
            .iter()
            .find(|f| f.id() == id)
            .unwrap_or_else(|| panic!("no feeder {id}"))
    }

    fn rows(&self, feeder: &str, scenario: &str) -> Vec<&NodeRow> {
        let rows: Vec<&NodeRow> = self
            .nodes
            .iter()
            .filter(|r| r.feeder == feeder && r.scenario == scenario)
            .collect();
        assert_eq!(
            rows.len(),
            self.feeder(feeder).n_nodes() - 1,
            "{feeder} / {scenario}: one row per node but the head"
        );
        rows
    }

    /// Share of the nodes of a feeder and scenario whose binding limit is one of `limits`.
    fn share(&self, feeder: &str, scenario: &str, limits: &[&str]) -> f64 {
        let rows = self.rows(feeder, scenario);
        let n = rows
            .iter()
            .filter(|r| limits.contains(&r.limit.as_str()))
            .count();
        n as f64 / rows.len() as f64
    }

    fn median_kw(&self, feeder: &str, scenario: &str) -> f64 {
        let mut kw: Vec<f64> = self
            .rows(feeder, scenario)
            .iter()
            .map(|r| r.hosting_kw)
            .collect();
        kw.sort_by(f64::total_cmp);
        kw[kw.len() / 2]
    }

    /// The summary lines printed for one feeder: its header line and its scenario lines.
    fn printed(&self, feeder: &str) -> Vec<&str> {
        let mut lines = self.stdout.lines().skip_while(|l| !l.starts_with(feeder));
        let header = lines
            .next()
            .unwrap_or_else(|| panic!("no summary of {feeder}"));
        std::iter::once(header)
            .chain(lines.take_while(|l| l.starts_with("  ")))
            .collect()
    }
}

#[test]
fn every_node_of_every_feeder_has_an_answer_in_both_scenarios() {
    let demo = demo();
    let scenarios: BTreeSet<&str> = demo.nodes.iter().map(|r| r.scenario.as_str()).collect();
    assert_eq!(scenarios, BTreeSet::from(["min-load", "peak-load"]));
    for feeder in &demo.feeders {
        for scenario in &scenarios {
            for row in demo.rows(feeder.id(), scenario) {
                assert!(
                    row.hosting_kw.is_finite()
                        && row.hosting_kw >= 0.0
                        && row.hosting_kw <= 20_000.0
                        && row.hosting_kw % 1.0 == 0.0,
                    "{} / {} / {}: {}",
                    row.feeder,
                    row.scenario,
                    row.node,
                    row.hosting_kw
                );
                assert!(row.limit != "not_converged", "{}", row.node);
            }
        }
    }
}

#[test]
fn the_rural_33_kv_line_is_limited_by_voltage() {
    let demo = demo();
    // Light load with the existing generation running: overvoltage (check script: 520 of 559).
    let min_load = demo.share(UPLANDS, "min-load", &["overvoltage"]);
    assert!(
        min_load >= 0.8,
        "overvoltage binds at {min_load:.2} of the nodes"
    );
    // Peak load: the voltage change when the plant trips (check script: 478 of 559).
    let peak = demo.share(UPLANDS, "peak-load", &["voltage_change"]);
    assert!(
        peak >= 0.7,
        "voltage change binds at {peak:.2} of the nodes"
    );
    // Voltage binds at nodes: the element is a node of the feeder.
    let feeder = demo.feeder(UPLANDS);
    for row in demo.rows(UPLANDS, "min-load") {
        if row.limit == "overvoltage" {
            let element = row.limit_element.as_deref().expect("a node");
            assert!(feeder.node_by_id(element).is_some(), "{element}");
        }
    }
}

/// Spearman's rank correlation of two samples (average ranks for ties).
fn spearman(a: &[f64], b: &[f64]) -> f64 {
    fn ranks(v: &[f64]) -> Vec<f64> {
        let mut order: Vec<usize> = (0..v.len()).collect();
        order.sort_by(|&i, &j| v[i].total_cmp(&v[j]));
        let mut rank = vec![0.0; v.len()];
        let mut start = 0;
        while start < order.len() {
            let mut end = start;
            while end + 1 < order.len() && v[order[end + 1]] == v[order[start]] {
                end += 1;
            }
            let average = (start + end) as f64 / 2.0 + 1.0;
            for &i in &order[start..=end] {
                rank[i] = average;
            }
            start = end + 1;
        }
        rank
    }
    let (ra, rb) = (ranks(a), ranks(b));
    let n = a.len() as f64;
    let (ma, mb) = (ra.iter().sum::<f64>() / n, rb.iter().sum::<f64>() / n);
    let cov: f64 = ra.iter().zip(&rb).map(|(x, y)| (x - ma) * (y - mb)).sum();
    let va: f64 = ra.iter().map(|x| (x - ma).powi(2)).sum();
    let vb: f64 = rb.iter().map(|y| (y - mb).powi(2)).sum();
    cov / (va * vb).sqrt()
}

#[test]
fn capacity_falls_with_electrical_distance_along_the_rural_line() {
    let demo = demo();
    let feeder = demo.feeder(UPLANDS);
    // Series resistance from the head to every node, ohm (nodes are ordered parents first).
    let mut path_r_ohm = vec![0.0; feeder.n_nodes()];
    for branch in feeder.branches() {
        path_r_ohm[branch.to.index()] = path_r_ohm[branch.from.index()] + branch.r_ohm;
    }
    // The path from the head to the electrically farthest node: the trunk, then its last spur.
    let far = (1..feeder.n_nodes())
        .max_by(|&a, &b| path_r_ohm[a].total_cmp(&path_r_ohm[b]))
        .unwrap();
    let path: Vec<BusIdx> = feeder
        .path_to_head(BusIdx::new(far as u32))
        .filter(|&bus| bus != BusIdx::HEAD)
        .collect();
    assert!(path.len() >= 50, "the trunk has {} nodes", path.len());
    for scenario in ["min-load", "peak-load"] {
        let kw_by_node: BTreeMap<&str, f64> = demo
            .rows(UPLANDS, scenario)
            .into_iter()
            .map(|r| (r.node.as_str(), r.hosting_kw))
            .collect();
        let r_ohm: Vec<f64> = path.iter().map(|b| path_r_ohm[b.index()]).collect();
        let kw: Vec<f64> = path
            .iter()
            .map(|b| kw_by_node[feeder.node(*b).id.as_str()])
            .collect();
        let rho = spearman(&r_ohm, &kw);
        assert!(rho < -0.8, "{scenario}: rank correlation {rho:.3}");
        // And in plain numbers: the far end takes well under half of what the first node takes.
        let (near, far) = (kw[kw.len() - 1], kw[0]);
        assert!(
            far < 0.5 * near,
            "{scenario}: far end {far} kW, near the head {near} kW"
        );
    }
}

#[test]
fn the_town_centre_cables_are_limited_by_their_ratings() {
    let demo = demo();
    let feeder = demo.feeder(TOWN_CENTRE);
    for scenario in ["min-load", "peak-load"] {
        let share = demo.share(TOWN_CENTRE, scenario, &["thermal"]);
        assert!(share >= 0.9, "{scenario}: thermal binds at {share:.2}");
        for row in demo.rows(TOWN_CENTRE, scenario) {
            if row.limit == "thermal" {
                let element = row.limit_element.as_deref().expect("a branch");
                assert!(
                    feeder.branches().iter().any(|b| b.id == element),
                    "{element} is a closed branch of the feeder"
                );
            }
        }
    }
}

#[test]
fn eastfields_is_limited_by_overvoltage_at_light_load_with_base_voltages_near_the_limit() {
    let demo = demo();
    let rows = demo.rows(EASTFIELDS, "min-load");
    let share = demo.share(EASTFIELDS, "min-load", &["overvoltage"]);
    assert!(share >= 0.8, "overvoltage binds at {share:.2}");
    // Base voltages within 0.015 pu under the 1.05 pu limit of feeders/study.toml, not above it.
    let v_max = rows.iter().map(|r| r.v_base_pu).fold(0.0, f64::max);
    assert!(
        (1.035..1.05).contains(&v_max),
        "highest base voltage {v_max}"
    );
    // Little is left: the lowest median of the region at light load.
    let median = demo.median_kw(EASTFIELDS, "min-load");
    for feeder in [UPLANDS, QUARRY_ROAD, TOWN_CENTRE, MILLBROOK] {
        assert!(
            median < demo.median_kw(feeder, "min-load"),
            "Eastfields median {median} kW vs {feeder}"
        );
    }
    assert!(median < demo.median_kw(EASTFIELDS, "peak-load"));
}

#[test]
fn quarry_road_reports_its_problems_at_peak_as_baseline_violations() {
    let demo = demo();
    let baseline = ParquetTable::read(&demo.out.join("baseline.parquet"));
    let feeder = baseline.strings("feeder");
    let scenario = baseline.strings("scenario");
    let limit = baseline.strings("limit");
    let element = baseline.opt_strings("element");
    let value = baseline.f64s("value");
    let threshold = baseline.f64s("threshold");
    assert!(baseline.n_rows() > 0);
    // Only Quarry Road at peak load has problems without new generation.
    for i in 0..baseline.n_rows() {
        assert_eq!(
            (feeder[i].as_str(), scenario[i].as_str()),
            (QUARRY_ROAD, "peak-load"),
            "{:?} {:?}",
            limit[i],
            element[i]
        );
    }
    // The derated railway crossing: 160 A rating, about 174 A at peak (feeders/README.md).
    let rail = (0..baseline.n_rows())
        .find(|&i| limit[i] == "thermal" && element[i].as_deref() == Some("QRD-B-RAIL"))
        .expect("the railway crossing is overloaded at peak");
    assert_eq!(threshold[rail], 160.0);
    assert!(
        value[rail] > 160.0 && value[rail] < 190.0,
        "{}",
        value[rail]
    );
    // The end of the line below 0.95 pu, reported node by node.
    let under: Vec<usize> = (0..baseline.n_rows())
        .filter(|&i| limit[i] == "undervoltage")
        .collect();
    assert!(under.len() >= 10, "{} nodes below the limit", under.len());
    for &i in &under {
        assert!(value[i] < 0.95 && threshold[i] == 0.95, "{}", value[i]);
    }
    let lowest = demo
        .rows(QUARRY_ROAD, "peak-load")
        .into_iter()
        .min_by(|a, b| a.v_base_pu.total_cmp(&b.v_base_pu))
        .unwrap();
    assert!(lowest.v_base_pu < 0.95, "{}", lowest.v_base_pu);
    assert!(
        under
            .iter()
            .any(|&i| element[i].as_deref() == Some(lowest.node.as_str())),
        "the lowest node {} is reported",
        lowest.node
    );

    // A problem already there and not worsened is not charged to applicants: every node still
    // has capacity at peak (feeder-format.md, "What hosting capacity means here").
    for row in demo.rows(QUARRY_ROAD, "peak-load") {
        assert!(row.hosting_kw > 0.0, "{}: {}", row.node, row.hosting_kw);
    }

    // The printed summary says so on the peak-load line of Quarry Road, and nowhere else.
    let n = baseline.n_rows();
    for line in demo.stdout.lines() {
        let mentions = line.contains("baseline violation(s) present");
        let expected =
            line.trim_start().starts_with("peak-load") && demo.printed(QUARRY_ROAD).contains(&line);
        assert_eq!(mentions, expected, "{line}");
        if expected {
            assert!(
                line.contains(&format!("; {n} baseline violation")),
                "{line}"
            );
        }
    }

    // The feeder table has a row per feeder and scenario, with the same counts.
    let feeders = ParquetTable::read(&demo.out.join("feeders.parquet"));
    let ids = feeders.strings("feeder");
    let scenarios = feeders.strings("scenario");
    let counts = feeders.u64s("baseline_violations");
    assert_eq!(ids.len(), 2 * demo.feeders.len());
    for i in 0..ids.len() {
        let expected = if ids[i] == QUARRY_ROAD && scenarios[i] == "peak-load" {
            n as u64
        } else {
            0
        };
        assert_eq!(counts[i], expected, "{} / {}", ids[i], scenarios[i]);
    }
}

#[test]
fn millbrook_keeps_its_ring_open_at_the_normally_open_point() {
    let demo = demo();
    let feeder = demo.feeder(MILLBROOK);
    let open: Vec<&str> = feeder
        .open_branches()
        .iter()
        .map(|b| b.id.as_str())
        .collect();
    assert_eq!(open, ["MLB-NOP1"]);
    assert!(feeder.branches().iter().all(|b| b.id != "MLB-NOP1"));
    // Its two ends are fed by different legs: their paths meet only at the head.
    let a = feeder.node_by_id("MLB-A-END").expect("end A");
    let b = feeder.node_by_id("MLB-B-END").expect("end B");
    let path_a: BTreeSet<BusIdx> = feeder.path_to_head(a).collect();
    let path_b: BTreeSet<BusIdx> = feeder.path_to_head(b).collect();
    assert_eq!(
        path_a.intersection(&path_b).copied().collect::<Vec<_>>(),
        [BusIdx::HEAD]
    );
    // Both ends have answers; the open point is not a branch of the results.
    for scenario in ["min-load", "peak-load"] {
        let rows = demo.rows(MILLBROOK, scenario);
        for end in ["MLB-A-END", "MLB-B-END"] {
            assert!(rows.iter().any(|r| r.node == end), "{end}");
        }
    }
    let branches = ParquetTable::read(&demo.out.join("branches.parquet"));
    let ids: Vec<String> = branches
        .strings("feeder")
        .into_iter()
        .zip(branches.strings("branch"))
        .filter(|(f, _)| f == MILLBROOK)
        .map(|(_, b)| b)
        .collect();
    assert_eq!(ids.len(), 2 * feeder.n_branches());
    assert!(!ids.iter().any(|b| b == "MLB-NOP1"));
}

/// `headroom map … | head -1`: a reader that leaves before the summary is printed does not
/// turn a finished run into a crash; the results are written and the exit code is 0.
#[test]
fn a_reader_that_leaves_early_does_not_fail_the_run() {
    let out = scratch_folder("map-reader-gone");
    let mut child = crate::command::headroom()
        .arg("map")
        .arg(repo_path("feeders/hallowick-millbrook-11"))
        .arg("--out")
        .arg(&out)
        .arg("--quiet")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("headroom can be started");
    // Close the reading end before the run prints anything.
    drop(child.stdout.take());
    let output = child.wait_with_output().expect("headroom runs to its end");
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(
        output.status.success() && !stderr.contains("panicked"),
        "exit {:?}, stderr:\n{stderr}",
        output.status.code()
    );
    assert!(out.join("nodes.parquet").is_file());
}
