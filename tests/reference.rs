//! Published test systems: base-case losses and lowest voltage of the Baran & Wu 33-bus and the
//! Das, Kothari & Kalam 69-bus feeders, through the library and through `headroom flow`.
//!
//! Sources of the published values (tests/data/reference, copied from the project's reference
//! notes, which give the transcription and its cross-checks):
//! - 33-bus: M. E. Baran and F. F. Wu, "Network reconfiguration in distribution systems for loss
//!   reduction and load balancing", IEEE Trans. Power Delivery 4(2):1401–1407, 1989. Total
//!   losses ≈ 202.7 kW, lowest voltage ≈ 0.9131 pu at bus 18 (widely reproduced).
//! - 69-bus: D. Das, D. P. Kothari and A. Kalam, "Simple and efficient method for load flow
//!   solution of radial distribution networks", Int. J. Electrical Power & Energy Systems
//!   17(5):335–346, 1995. Losses ≈ 224.9 kW, lowest voltage ≈ 0.9092 pu at bus 65. The reference
//!   notes find 225.00 kW on these files with an independent sweep, 0.05 % above the quoted
//!   value, and ask any check against 224.9 kW to allow at least ±0.2 kW.
//!
//! Both cases: head held at 1.0 pu, loads at their listed values (load_scale 1), constant power.

use std::ffi::OsStr;
use std::path::{Path, PathBuf};

use headroom_flow::{Demand, FlowState, Network, Solution, SolveSettings, solve};
use headroom_model::load_feeder;

use crate::command::{ParquetTable, repo_path, run_ok};

/// One published base case.
struct Published {
    folder: &'static str,
    /// Published total series losses, kW, and the allowed difference.
    losses_kw: f64,
    losses_tol_kw: f64,
    /// Published lowest voltage, pu (four decimals, so ±0.00005), and where.
    v_min_pu: f64,
    v_min_node: &'static str,
    /// Total load as listed in the paper's tables, kW and kvar.
    load_kw: f64,
    load_kvar: f64,
}

/// Baran & Wu (1989), 33-bus. Losses quoted as 202.7 kW (one decimal: ±0.05 kW).
const BARAN_WU_33: Published = Published {
    folder: "tests/data/reference/bw33",
    losses_kw: 202.7,
    losses_tol_kw: 0.05,
    v_min_pu: 0.9131,
    v_min_node: "18",
    load_kw: 3715.0,
    load_kvar: 2300.0,
};

/// Das, Kothari & Kalam (1995), 69-bus. Losses 224.9 kW with the ±0.2 kW the reference notes
/// ask for (see the module doc).
const DAS_KOTHARI_KALAM_69: Published = Published {
    folder: "tests/data/reference/das69",
    losses_kw: 224.9,
    losses_tol_kw: 0.2,
    v_min_pu: 0.9092,
    v_min_node: "65",
    load_kw: 3802.19,
    load_kvar: 2694.60,
};

/// Half a unit in the fourth decimal: the precision of the published voltages.
const V_TOL_PU: f64 = 0.00005;

fn check_library(case: &Published) {
    let feeder = load_feeder(&repo_path(case.folder)).expect("reference feeder is valid");
    // The transcription carries the paper's load totals.
    let load_kw: f64 = feeder.nodes().iter().map(|n| n.load_kw).sum();
    let load_kvar: f64 = feeder.nodes().iter().map(|n| n.load_kvar).sum();
    assert!(
        (load_kw - case.load_kw).abs() < 1e-6,
        "total load {load_kw} kW"
    );
    assert!(
        (load_kvar - case.load_kvar).abs() < 1e-6,
        "total load {load_kvar} kvar"
    );

    let network = Network::new(&feeder);
    let demand = Demand::from_feeder(&feeder, &network, 1.0, 1.0);
    let mut state = FlowState::flat(&network);
    solve(
        &network,
        &demand,
        &[],
        &mut state,
        &SolveSettings::default(),
    )
    .expect("base case converges");
    let solution = Solution::new(&network, &state);

    let (losses_kw, _) = solution.losses();
    assert!(
        (losses_kw - case.losses_kw).abs() <= case.losses_tol_kw,
        "{}: losses {losses_kw:.3} kW, published {} ± {} kW",
        case.folder,
        case.losses_kw,
        case.losses_tol_kw
    );

    let lowest = (0..feeder.n_nodes())
        .min_by(|&a, &b| solution.v_pu(a).total_cmp(&solution.v_pu(b)))
        .expect("nodes");
    assert_eq!(
        feeder.nodes()[lowest].id,
        case.v_min_node,
        "{}",
        case.folder
    );
    assert!(
        (solution.v_pu(lowest) - case.v_min_pu).abs() <= V_TOL_PU,
        "{}: lowest voltage {:.5} pu, published {}",
        case.folder,
        solution.v_pu(lowest),
        case.v_min_pu
    );
    // The head is held at 1.0 pu.
    assert!((solution.v_pu(0) - 1.0).abs() < 1e-12);

    // Conservation of active power: what enters at the head is the load plus the losses.
    let (head_kw, _) = solution.head_power();
    assert!(
        (head_kw - (case.load_kw + losses_kw)).abs() < 1e-6 * case.load_kw,
        "head {head_kw} kW vs load {} + losses {losses_kw}",
        case.load_kw
    );
}

#[test]
fn baran_wu_33_bus_base_case_through_the_library() {
    check_library(&BARAN_WU_33);
}

#[test]
fn das_kothari_kalam_69_bus_base_case_through_the_library() {
    check_library(&DAS_KOTHARI_KALAM_69);
}

/// A study with one scenario at the listed loads.
fn full_load_study(dir: &Path) -> PathBuf {
    let path = dir.join("study.toml");
    std::fs::write(
        &path,
        "[[scenario]]\nname = \"listed-load\"\nload_scale = 1.0\ngen_scale = 1.0\n",
    )
    .unwrap();
    path
}

/// The number after `label` on the summary line that starts with it, and the rest of the line.
fn summary_value<'a>(stdout: &'a str, label: &str) -> (f64, &'a str) {
    let line = stdout
        .lines()
        .map(str::trim)
        .find(|l| l.starts_with(label))
        .unwrap_or_else(|| panic!("no line {label:?} in:\n{stdout}"));
    let rest = line[label.len()..].trim_start();
    let (number, rest) = rest.split_once(' ').unwrap_or((rest, ""));
    (
        number
            .parse()
            .unwrap_or_else(|_| panic!("no number in {line:?}")),
        rest,
    )
}

fn check_cli(case: &Published) {
    let dir = tempfile::tempdir().unwrap();
    let study = full_load_study(dir.path());
    let out = dir.path().join("out");
    let stdout = run_ok(&[
        OsStr::new("flow"),
        repo_path(case.folder).as_os_str(),
        OsStr::new("--out"),
        out.as_os_str(),
        OsStr::new("--study"),
        study.as_os_str(),
    ]);

    // The printed summary gives the published lowest voltage, where it is, and the losses.
    let (v_min_pu, rest) = summary_value(&stdout, "lowest voltage");
    assert!(
        (v_min_pu - case.v_min_pu).abs() <= V_TOL_PU,
        "printed lowest voltage {v_min_pu}, published {}\n{stdout}",
        case.v_min_pu
    );
    assert!(
        rest.ends_with(&format!("at node {}", case.v_min_node)),
        "{rest:?}"
    );
    let (losses_kw, _) = summary_value(&stdout, "total losses");
    assert!(
        (losses_kw - case.losses_kw).abs() <= case.losses_tol_kw,
        "printed losses {losses_kw} kW, published {}",
        case.losses_kw
    );

    // The node table holds every node once, with the published lowest voltage at its node.
    let nodes = ParquetTable::read(&out.join("flow_nodes.parquet"));
    let feeder = load_feeder(&repo_path(case.folder)).unwrap();
    assert_eq!(nodes.n_rows(), feeder.n_nodes());
    let ids = nodes.strings("node");
    let v_pu = nodes.f64s("v_pu");
    assert!(nodes.strings("scenario").iter().all(|s| s == "listed-load"));
    let at = ids
        .iter()
        .position(|id| id == case.v_min_node)
        .expect("row of the lowest-voltage node");
    assert!(
        (v_pu[at] - case.v_min_pu).abs() <= V_TOL_PU,
        "v_pu at node {} is {}",
        case.v_min_node,
        v_pu[at]
    );
    assert!(
        v_pu.iter().all(|&v| v >= v_pu[at]),
        "node {} is lowest",
        ids[at]
    );

    // The branch table's losses add up to the published total.
    let branches = ParquetTable::read(&out.join("flow_branches.parquet"));
    assert_eq!(branches.n_rows(), feeder.n_branches());
    let table_losses_kw: f64 = branches.f64s("loss_kw").iter().sum();
    assert!(
        (table_losses_kw - case.losses_kw).abs() <= case.losses_tol_kw,
        "loss_kw sums to {table_losses_kw}"
    );
}

#[test]
fn baran_wu_33_bus_base_case_through_headroom_flow() {
    check_cli(&BARAN_WU_33);
}

#[test]
fn das_kothari_kalam_69_bus_base_case_through_headroom_flow() {
    check_cli(&DAS_KOTHARI_KALAM_69);
}
