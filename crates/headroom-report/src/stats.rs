//! The numbers of the report's tables and charts, as pure functions of node rows: each node's
//! worst case over the scenarios, capacity summaries, shares below thresholds, histograms.

use std::collections::HashMap;

use crate::limit::{Limit, LimitCounts};
use crate::read::NodeRow;

/// One node's worst case over the scenarios: the lowest hosting capacity, and what binds there.
#[derive(Debug, Clone, PartialEq)]
pub struct WorstNode {
    /// Node id.
    pub node: String,
    /// Easting or longitude.
    pub x: Option<f64>,
    /// Northing or latitude.
    pub y: Option<f64>,
    /// The lowest hosting capacity over the scenarios, kW.
    pub hosting_kw: f64,
    /// The criterion that binds in that scenario.
    pub limit: Limit,
    /// Where it binds.
    pub limit_element: Option<String>,
    /// The scenario giving the lowest capacity (the earlier one in the run's order on a tie).
    pub scenario: String,
}

/// Each node's worst case over the scenarios of `rows` (rows of one feeder). A tie goes to the
/// scenario that comes first in `scenario_order`; nodes keep the order of their first row.
pub fn worst_case<'a>(
    rows: impl IntoIterator<Item = &'a NodeRow>,
    scenario_order: &[String],
) -> Vec<WorstNode> {
    let rank = |s: &str| {
        scenario_order
            .iter()
            .position(|o| o == s)
            .unwrap_or(usize::MAX)
    };
    let mut index: HashMap<&str, usize> = HashMap::new();
    let mut worst: Vec<(WorstNode, usize)> = Vec::new();
    for row in rows {
        let candidate = (
            WorstNode {
                node: row.node.clone(),
                x: row.x,
                y: row.y,
                hosting_kw: row.hosting_kw,
                limit: row.limit,
                limit_element: row.limit_element.clone(),
                scenario: row.scenario.clone(),
            },
            rank(&row.scenario),
        );
        match index.get(row.node.as_str()) {
            None => {
                index.insert(row.node.as_str(), worst.len());
                worst.push(candidate);
            }
            Some(&i) => {
                let (held, held_rank) = &worst[i];
                let lower = candidate.0.hosting_kw < held.hosting_kw
                    || (candidate.0.hosting_kw == held.hosting_kw && candidate.1 < *held_rank);
                if lower {
                    // Coordinates are the same in every scenario; keep any that are present.
                    let (x, y) = (held.x, held.y);
                    worst[i] = candidate;
                    worst[i].0.x = worst[i].0.x.or(x);
                    worst[i].0.y = worst[i].0.y.or(y);
                }
            }
        }
    }
    worst.into_iter().map(|(w, _)| w).collect()
}

/// Nodes strictly below a capacity threshold.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Below {
    /// The threshold, kW.
    pub threshold_kw: f64,
    /// Nodes with a hosting capacity below it.
    pub n_nodes: u64,
}

/// Capacity statistics of a set of nodes.
#[derive(Debug, Clone, PartialEq)]
pub struct CapacitySummary {
    /// Nodes counted.
    pub n_nodes: u64,
    /// Lowest hosting capacity, kW (`None` without nodes).
    pub lowest_kw: Option<f64>,
    /// Median hosting capacity, kW: the middle value, or the mean of the two middle values.
    pub median_kw: Option<f64>,
    /// Highest hosting capacity, kW.
    pub highest_kw: Option<f64>,
    /// Nodes below each threshold, in the order given.
    pub below: Vec<Below>,
    /// Nodes per binding criterion.
    pub by_limit: LimitCounts,
}

impl CapacitySummary {
    /// Share of the nodes below the `i`-th threshold, 0 to 1 (0 without nodes).
    pub fn share_below(&self, i: usize) -> f64 {
        match self.below.get(i) {
            Some(b) if self.n_nodes > 0 => b.n_nodes as f64 / self.n_nodes as f64,
            _ => 0.0,
        }
    }
}

/// Summarises `(hosting_kw, limit)` pairs, one per node; `thresholds_kw` are the "below"
/// thresholds, e.g. `[100.0, 1000.0]`.
pub fn summarise(nodes: &[(f64, Limit)], thresholds_kw: &[f64]) -> CapacitySummary {
    let mut sorted: Vec<f64> = nodes.iter().map(|&(kw, _)| kw).collect();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    let median_kw = match n {
        0 => None,
        _ if n % 2 == 1 => Some(sorted[n / 2]),
        _ => Some((sorted[n / 2 - 1] + sorted[n / 2]) / 2.0),
    };
    let mut by_limit = LimitCounts::default();
    for &(_, limit) in nodes {
        by_limit.add(limit);
    }
    CapacitySummary {
        n_nodes: n as u64,
        lowest_kw: sorted.first().copied(),
        median_kw,
        highest_kw: sorted.last().copied(),
        below: thresholds_kw
            .iter()
            .map(|&threshold_kw| Below {
                threshold_kw,
                // Sorted ascending: the count below is the partition point.
                n_nodes: sorted.partition_point(|&kw| kw < threshold_kw) as u64,
            })
            .collect(),
        by_limit,
    }
}

/// Counts of values in equal bins `[k·step_kw, (k+1)·step_kw)` from 0; the last bin also holds
/// the largest value when it falls on its upper edge.
#[derive(Debug, Clone, PartialEq)]
pub struct Histogram {
    /// Bin width, kW.
    pub step_kw: f64,
    /// Nodes per bin, from 0 kW up.
    pub counts: Vec<u64>,
}

/// A round step (1, 2, 2.5 or 5 times a power of ten) that cuts `0..range` into at most
/// `max_parts` parts (at least one).
pub fn nice_step(range: f64, max_parts: usize) -> f64 {
    if range <= 0.0 || !range.is_finite() {
        return 1.0;
    }
    let rough = range / max_parts.max(1) as f64;
    let mut power = 10f64.powf(rough.log10().floor());
    loop {
        for factor in [1.0, 2.0, 2.5, 5.0] {
            let step = factor * power;
            if (range / step).ceil() <= max_parts.max(1) as f64 {
                return step;
            }
        }
        power *= 10.0;
    }
}

/// Histogram of capacities from 0 kW up to the largest value, with at most `max_bins` bins of
/// a round width.
pub fn histogram(values_kw: &[f64], max_bins: usize) -> Histogram {
    let highest = values_kw.iter().copied().fold(0.0, f64::max);
    let step_kw = nice_step(highest, max_bins);
    let n_bins = ((highest / step_kw).ceil() as usize).max(1);
    let mut counts = vec![0u64; n_bins];
    for &kw in values_kw {
        let bin = ((kw / step_kw).floor().max(0.0) as usize).min(n_bins - 1);
        counts[bin] += 1;
    }
    Histogram { step_kw, counts }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(scenario: &str, node: &str, kw: f64, limit: Limit) -> NodeRow {
        NodeRow {
            feeder: "f".into(),
            scenario: scenario.into(),
            node: node.into(),
            x: None,
            y: None,
            hosting_kw: kw,
            limit,
            limit_element: Some(format!("{node}-el")),
            v_base_pu: Some(1.0),
        }
    }

    #[test]
    fn worst_case_takes_the_lowest_scenario_and_breaks_ties_by_run_order() {
        let order = vec!["min-load".to_string(), "peak-load".to_string()];
        let rows = [
            row("peak-load", "a", 300.0, Limit::Thermal),
            row("min-load", "a", 250.0, Limit::Overvoltage),
            row("peak-load", "b", 80.0, Limit::Thermal),
            row("min-load", "b", 80.0, Limit::VoltageChange),
            row("min-load", "c", 1000.0, Limit::SearchMax),
        ];
        let worst = worst_case(&rows, &order);
        let summary: Vec<(&str, f64, Limit, &str)> = worst
            .iter()
            .map(|w| (w.node.as_str(), w.hosting_kw, w.limit, w.scenario.as_str()))
            .collect();
        assert_eq!(
            summary,
            vec![
                ("a", 250.0, Limit::Overvoltage, "min-load"),
                ("b", 80.0, Limit::VoltageChange, "min-load"),
                ("c", 1000.0, Limit::SearchMax, "min-load"),
            ]
        );
    }

    #[test]
    fn summary_of_an_odd_and_an_even_count() {
        // Worked by hand: sorted 50, 99.9, 100, 900, 4000 → median 100; below 100 kW: 2 of 5;
        // below 1000 kW: 4 of 5.
        let nodes = [
            (900.0, Limit::Thermal),
            (50.0, Limit::Overvoltage),
            (4000.0, Limit::Thermal),
            (100.0, Limit::VoltageChange),
            (99.9, Limit::Overvoltage),
        ];
        let s = summarise(&nodes, &[100.0, 1000.0]);
        assert_eq!(s.n_nodes, 5);
        assert_eq!(
            (s.lowest_kw, s.median_kw, s.highest_kw),
            (Some(50.0), Some(100.0), Some(4000.0))
        );
        assert_eq!(s.below[0].n_nodes, 2);
        assert_eq!(s.below[1].n_nodes, 4);
        assert!((s.share_below(0) - 0.4).abs() < 1e-12);
        assert!((s.share_below(1) - 0.8).abs() < 1e-12);
        assert_eq!(s.by_limit.get(Limit::Overvoltage), 2);
        assert_eq!(s.by_limit.get(Limit::Thermal), 2);
        assert_eq!(s.by_limit.get(Limit::VoltageChange), 1);

        // Even count: mean of the two middle values (100 and 900).
        let even = summarise(&nodes[..4], &[]);
        assert_eq!(even.median_kw, Some(500.0));
    }

    #[test]
    fn summary_of_no_nodes_is_empty_not_zero() {
        let s = summarise(&[], &[100.0]);
        assert_eq!(s.n_nodes, 0);
        assert_eq!((s.lowest_kw, s.median_kw, s.highest_kw), (None, None, None));
        assert_eq!(s.share_below(0), 0.0);
    }

    #[test]
    fn nice_steps_are_round_and_respect_the_bin_count() {
        assert_eq!(nice_step(20_000.0, 20), 1000.0);
        assert_eq!(nice_step(8479.0, 20), 500.0);
        assert_eq!(nice_step(4962.0, 20), 250.0);
        assert_eq!(nice_step(19.0, 20), 1.0);
        assert_eq!(nice_step(0.0, 20), 1.0);
        for range in [1.0, 7.3, 99.0, 101.0, 1234.5, 15_222.0, 1e6] {
            let step = nice_step(range, 16);
            assert!((range / step).ceil() <= 16.0, "{range} {step}");
            assert!(
                (range / (step / 2.0)).ceil() > 16.0 || step <= 1.0,
                "{range} {step}"
            );
        }
    }

    #[test]
    fn histogram_counts_every_value_once_with_the_top_edge_in_the_last_bin() {
        let values = [0.0, 499.0, 500.0, 999.0, 1000.0, 2000.0];
        let h = histogram(&values, 4);
        assert_eq!(h.step_kw, 500.0);
        assert_eq!(h.counts, vec![2, 2, 1, 1]);
        assert_eq!(h.counts.iter().sum::<u64>(), values.len() as u64);
    }
}
