//! A run's rows arranged for the page: per feeder its worst-case nodes, branches and summaries;
//! per region and substation the grouped summaries; the baseline list in a stable order.

use std::collections::{BTreeSet, HashMap, HashSet};

use crate::limit::Limit;
use crate::read::{BaselineRow, BranchRow, FeederInfo, NodeRow, Run, RunMeta};
use crate::stats::{CapacitySummary, WorstNode, summarise, worst_case};

/// Thresholds of the "share of nodes below" columns when none are given, kW.
pub const DEFAULT_THRESHOLDS_KW: [f64; 2] = [100.0, 1000.0];

/// One branch of a feeder drawing (topology and end coordinates; the same in every scenario).
#[derive(Debug, Clone, PartialEq)]
pub struct BranchLine {
    /// Branch id.
    pub branch: String,
    /// From-node id.
    pub from: String,
    /// To-node id.
    pub to: String,
    /// From-end coordinates.
    pub from_xy: Option<(f64, f64)>,
    /// To-end coordinates.
    pub to_xy: Option<(f64, f64)>,
}

/// Everything shown for one feeder.
#[derive(Debug, Clone)]
pub struct FeederReport {
    /// Id, name, grouping, voltage, CRS.
    pub info: FeederInfo,
    /// Each node's worst case over the scenarios, in node-table order.
    pub worst: Vec<WorstNode>,
    /// Summary of the worst cases.
    pub overall: CapacitySummary,
    /// Summary per scenario, in the run's scenario order.
    pub per_scenario: Vec<(String, CapacitySummary)>,
    /// The branches, from the first scenario that has them.
    pub branches: Vec<BranchLine>,
    /// The head node: a branch end without a node row (the node tables leave the head out).
    pub head: Option<String>,
    /// Baseline violations of this feeder, all scenarios.
    pub n_baseline: usize,
}

/// One row of the region table: a substation of a region, or a region's total.
#[derive(Debug, Clone)]
pub struct GroupRow {
    /// Region (`None`: feeders without one).
    pub region: Option<String>,
    /// Substation; `None` with `is_total` for the region's total row, else feeders without one.
    pub substation: Option<String>,
    /// True for the total of a region over its substations.
    pub is_total: bool,
    /// Feeders in the group.
    pub n_feeders: usize,
    /// Summary of the worst cases of every node of the group.
    pub summary: CapacitySummary,
}

/// The whole report's content, computed from a [`Run`] and nothing else.
#[derive(Debug, Clone)]
pub struct Report {
    /// How the run was made.
    pub meta: RunMeta,
    /// Scenario names in the run's order.
    pub scenarios: Vec<String>,
    /// Thresholds of the "below" columns, kW.
    pub thresholds_kw: Vec<f64>,
    /// Feeders ordered by region, substation, id.
    pub feeders: Vec<FeederReport>,
    /// Region table rows: each region's substations, then the region's total.
    pub groups: Vec<GroupRow>,
    /// Baseline violations ordered by feeder (as above), scenario, criterion, element.
    pub baseline: Vec<BaselineRow>,
}

/// Arranges a run for the page; `thresholds_kw` are the "share below" thresholds.
pub fn build_report(run: &Run, thresholds_kw: &[f64]) -> Report {
    let mut nodes_of: HashMap<&str, Vec<&NodeRow>> = HashMap::new();
    for row in &run.nodes {
        nodes_of.entry(row.feeder.as_str()).or_default().push(row);
    }
    let mut branches_of: HashMap<&str, Vec<&BranchRow>> = HashMap::new();
    for row in &run.branches {
        branches_of
            .entry(row.feeder.as_str())
            .or_default()
            .push(row);
    }
    let mut baseline_of: HashMap<&str, usize> = HashMap::new();
    for row in &run.baseline {
        *baseline_of.entry(row.feeder.as_str()).or_default() += 1;
    }

    let feeders: Vec<FeederReport> = run
        .feeders
        .iter()
        .map(|info| {
            let rows = nodes_of.remove(info.id.as_str()).unwrap_or_default();
            let worst = worst_case(rows.iter().copied(), &run.scenarios);
            let pairs: Vec<(f64, Limit)> = worst.iter().map(|w| (w.hosting_kw, w.limit)).collect();
            let per_scenario = run
                .scenarios
                .iter()
                .filter_map(|s| {
                    let pairs: Vec<(f64, Limit)> = rows
                        .iter()
                        .filter(|r| &r.scenario == s)
                        .map(|r| (r.hosting_kw, r.limit))
                        .collect();
                    (!pairs.is_empty()).then(|| (s.clone(), summarise(&pairs, thresholds_kw)))
                })
                .collect();
            let branches = feeder_branches(
                branches_of
                    .get(info.id.as_str())
                    .map_or(&[][..], Vec::as_slice),
                &run.scenarios,
            );
            let head = find_head(&worst, &branches);
            FeederReport {
                info: info.clone(),
                overall: summarise(&pairs, thresholds_kw),
                worst,
                per_scenario,
                branches,
                head,
                n_baseline: baseline_of.get(info.id.as_str()).copied().unwrap_or(0),
            }
        })
        .collect();

    let groups = group_rows(&feeders, thresholds_kw);
    let position: HashMap<&str, usize> = feeders
        .iter()
        .enumerate()
        .map(|(i, f)| (f.info.id.as_str(), i))
        .collect();
    let scenario_rank = |s: &str| run.scenarios.iter().position(|o| o == s);
    let mut baseline = run.baseline.clone();
    baseline.sort_by(|a, b| {
        (
            position.get(a.feeder.as_str()),
            scenario_rank(&a.scenario),
            a.limit,
        )
            .cmp(&(
                position.get(b.feeder.as_str()),
                scenario_rank(&b.scenario),
                b.limit,
            ))
            .then_with(|| a.element.cmp(&b.element))
            .then_with(|| a.value.total_cmp(&b.value))
    });
    Report {
        meta: run.meta.clone(),
        scenarios: run.scenarios.clone(),
        thresholds_kw: thresholds_kw.to_vec(),
        feeders,
        groups,
        baseline,
    }
}

/// One drawing's branches: those of the first scenario (in run order) that has rows, once each.
fn feeder_branches(rows: &[&BranchRow], scenarios: &[String]) -> Vec<BranchLine> {
    let first = scenarios
        .iter()
        .find(|s| rows.iter().any(|r| &r.scenario == *s))
        .cloned()
        .or_else(|| rows.first().map(|r| r.scenario.clone()));
    let mut seen = HashSet::new();
    rows.iter()
        .filter(|r| Some(&r.scenario) == first.as_ref() && seen.insert(r.branch.as_str()))
        .map(|r| BranchLine {
            branch: r.branch.clone(),
            from: r.from.clone(),
            to: r.to.clone(),
            from_xy: r.from_xy,
            to_xy: r.to_xy,
        })
        .collect()
}

/// The head: the branch end that has no node row (the first by id if several, as in a
/// mismatched folder).
fn find_head(worst: &[WorstNode], branches: &[BranchLine]) -> Option<String> {
    let nodes: HashSet<&str> = worst.iter().map(|w| w.node.as_str()).collect();
    let candidates: BTreeSet<&str> = branches
        .iter()
        .flat_map(|b| [b.from.as_str(), b.to.as_str()])
        .filter(|n| !nodes.contains(n))
        .collect();
    candidates.into_iter().next().map(str::to_string)
}

/// Region table rows: per region (in feeder order), one row per substation and a total row.
pub fn group_rows(feeders: &[FeederReport], thresholds_kw: &[f64]) -> Vec<GroupRow> {
    let mut regions: Vec<Option<&String>> = Vec::new();
    for f in feeders {
        if !regions.contains(&f.info.region.as_ref()) {
            regions.push(f.info.region.as_ref());
        }
    }
    let mut rows = Vec::new();
    for region in regions {
        let members: Vec<&FeederReport> = feeders
            .iter()
            .filter(|f| f.info.region.as_ref() == region)
            .collect();
        let mut substations: Vec<Option<&String>> = Vec::new();
        for f in &members {
            if !substations.contains(&f.info.substation.as_ref()) {
                substations.push(f.info.substation.as_ref());
            }
        }
        let row = |group: &[&FeederReport], substation: Option<&String>, is_total: bool| {
            let pairs: Vec<(f64, Limit)> = group
                .iter()
                .flat_map(|f| f.worst.iter().map(|w| (w.hosting_kw, w.limit)))
                .collect();
            GroupRow {
                region: region.cloned(),
                substation: substation.cloned(),
                is_total,
                n_feeders: group.len(),
                summary: summarise(&pairs, thresholds_kw),
            }
        };
        for substation in substations {
            let group: Vec<&FeederReport> = members
                .iter()
                .copied()
                .filter(|f| f.info.substation.as_ref() == substation)
                .collect();
            rows.push(row(&group, substation, false));
        }
        rows.push(row(&members, None, true));
    }
    rows
}

#[cfg(test)]
mod tests {
    use super::*;

    fn node(feeder: &str, scenario: &str, node: &str, kw: f64, limit: Limit) -> NodeRow {
        NodeRow {
            feeder: feeder.into(),
            scenario: scenario.into(),
            node: node.into(),
            x: None,
            y: None,
            hosting_kw: kw,
            limit,
            limit_element: None,
            v_base_pu: None,
        }
    }

    fn info(id: &str, region: &str, substation: &str) -> FeederInfo {
        FeederInfo {
            id: id.into(),
            region: Some(region.into()),
            substation: Some(substation.into()),
            ..FeederInfo::default()
        }
    }

    fn branch(feeder: &str, scenario: &str, id: &str, from: &str, to: &str) -> BranchRow {
        BranchRow {
            feeder: feeder.into(),
            scenario: scenario.into(),
            branch: id.into(),
            from: from.into(),
            to: to.into(),
            from_xy: None,
            to_xy: None,
            loading_pct: None,
        }
    }

    #[test]
    fn groups_total_the_worst_cases_of_their_feeders() {
        let scenarios = vec!["lo".to_string(), "hi".to_string()];
        let run = Run {
            scenarios: scenarios.clone(),
            feeders: vec![
                info("f1", "R", "S1"),
                info("f2", "R", "S1"),
                info("f3", "R", "S2"),
            ],
            nodes: vec![
                node("f1", "lo", "a", 50.0, Limit::Overvoltage),
                node("f1", "hi", "a", 70.0, Limit::Thermal),
                node("f1", "lo", "b", 3000.0, Limit::Thermal),
                node("f1", "hi", "b", 2000.0, Limit::Thermal),
                node("f2", "lo", "c", 900.0, Limit::VoltageChange),
                node("f2", "hi", "c", 950.0, Limit::Thermal),
                node("f3", "lo", "d", 20_000.0, Limit::SearchMax),
                node("f3", "hi", "d", 20_000.0, Limit::SearchMax),
            ],
            branches: vec![
                branch("f1", "lo", "b1", "h", "a"),
                branch("f1", "lo", "b2", "a", "b"),
                branch("f1", "hi", "b1", "h", "a"),
                branch("f1", "hi", "b2", "a", "b"),
            ],
            ..Run::default()
        };
        let report = build_report(&run, &DEFAULT_THRESHOLDS_KW);
        // Worst cases: a 50 (lo, overvoltage), b 2000 (hi, thermal), c 900, d 20000.
        let rows: Vec<_> = report
            .groups
            .iter()
            .map(|g| {
                (
                    g.substation.as_deref(),
                    g.is_total,
                    g.n_feeders,
                    g.summary.n_nodes,
                    g.summary.median_kw,
                    g.summary.below[0].n_nodes,
                    g.summary.below[1].n_nodes,
                )
            })
            .collect();
        assert_eq!(
            rows,
            vec![
                (Some("S1"), false, 2, 3, Some(900.0), 1, 2),
                (Some("S2"), false, 1, 1, Some(20_000.0), 0, 0),
                (None, true, 3, 4, Some(1450.0), 1, 2),
            ]
        );
        let total = &report.groups[2].summary;
        assert_eq!(total.by_limit.get(Limit::Overvoltage), 1);
        assert_eq!(total.by_limit.get(Limit::Thermal), 1);
        assert_eq!(total.by_limit.get(Limit::VoltageChange), 1);
        assert_eq!(total.by_limit.get(Limit::SearchMax), 1);

        let f1 = &report.feeders[0];
        assert_eq!(f1.head.as_deref(), Some("h"));
        assert_eq!(f1.branches.len(), 2, "branches of one scenario only");
        assert_eq!(f1.per_scenario[0].0, "lo");
        assert_eq!(f1.per_scenario[0].1.lowest_kw, Some(50.0));
        assert_eq!(f1.per_scenario[1].1.lowest_kw, Some(70.0));
        assert_eq!(f1.overall.lowest_kw, Some(50.0));
        assert_eq!(f1.overall.highest_kw, Some(2000.0));
    }
}
