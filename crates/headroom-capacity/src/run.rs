//! Every node of every feeder and scenario, in parallel, in a stable order.

use ndarray::Array2;
use rayon::prelude::*;

use headroom_model::{BusIdx, Feeder, Study};

use crate::criteria::{Limit, Violation};
use crate::prepare::{BaseBranch, FeederStudy};
use crate::search::{CapacityOptions, NeighbourError, NodeCapacity};

/// Nodes answered in turn by one worker, in the feeder's depth-first order: each node's fast
/// search starts from the error of the linear start its predecessor measured
/// ([`NeighbourError`]). The runs are fixed, whatever the number of threads, so that the
/// load-flow counts are too.
const NODES_PER_RUN: usize = 32;

/// Answers the nodes `first..end` (indices of answers: node index less one) of scenario `s`
/// in turn, calling `progress` after each.
fn answer_run(
    prepared: &FeederStudy<'_>,
    s: usize,
    (first, end): (usize, usize),
    options: &CapacityOptions,
    progress: &(dyn Fn(u64) + Sync),
) -> Vec<NodeCapacity> {
    let mut neighbour = NeighbourError::default();
    (first..end)
        .map(|j| {
            let bus = BusIdx::new(j as u32 + 1);
            let answer = prepared.node_capacity_after(s, bus, options, &mut neighbour);
            progress(1);
            answer
        })
        .collect()
}

/// The runs of [`NODES_PER_RUN`] answers that cover `n_answers`, as (first, end).
fn runs(n_answers: usize) -> impl Iterator<Item = (usize, usize)> {
    (0..n_answers)
        .step_by(NODES_PER_RUN)
        .map(move |first| (first, (first + NODES_PER_RUN).min(n_answers)))
}

/// One scenario of one feeder's map.
#[derive(Debug, Clone)]
pub struct ScenarioMap {
    /// Scenario name.
    pub scenario: String,
    /// One answer per node, head excluded, in the feeder's depth-first order.
    pub nodes: Vec<NodeCapacity>,
    /// Base-case flow of every branch, in branch order.
    pub base_branches: Vec<BaseBranch>,
    /// Limits broken without new generation.
    pub baseline: Vec<Violation>,
    /// Power from the head into the feeder without new generation, kW and kvar.
    pub base_head_power: (f64, f64),
}

/// The map of one feeder.
#[derive(Debug, Clone)]
pub struct FeederMap<'f> {
    /// The feeder.
    pub feeder: &'f Feeder,
    /// One entry per scenario, in the study's order.
    pub scenarios: Vec<ScenarioMap>,
    /// Hosting capacity, kW, as a grid: one row per scenario, one column per node (head
    /// excluded, depth-first order).
    pub hosting_kw: Array2<f64>,
}

/// Counts of a run, for its closing summary and the benchmarks.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RunStats {
    /// Feeders mapped.
    pub feeders: u64,
    /// Node answers (nodes × scenarios).
    pub node_results: u64,
    /// Load flows solved (base cases included).
    pub load_flows: u64,
    /// Sweep iterations of those load flows.
    pub sweep_iterations: u64,
    /// Sweep iterations of the base cases alone (flat starts): the cost of one load flow.
    pub base_sweep_iterations: u64,
    /// Base cases solved.
    pub base_cases: u64,
    /// Answers per binding criterion, in the order of [`Limit::ALL`].
    pub by_limit: [u64; 7],
    /// Limits broken without new generation, over all feeders and scenarios.
    pub baseline_violations: u64,
    /// Answers the fast search left to the stepped search next to voltage collapse
    /// ([`NodeCapacity::stepped_near_nose`]).
    pub stepped_near_nose: u64,
}

impl RunStats {
    /// Adds another run's counts.
    pub fn add(&mut self, other: &RunStats) {
        self.feeders += other.feeders;
        self.node_results += other.node_results;
        self.load_flows += other.load_flows;
        self.sweep_iterations += other.sweep_iterations;
        self.base_sweep_iterations += other.base_sweep_iterations;
        self.base_cases += other.base_cases;
        for (a, b) in self.by_limit.iter_mut().zip(other.by_limit) {
            *a += b;
        }
        self.baseline_violations += other.baseline_violations;
        self.stepped_near_nose += other.stepped_near_nose;
    }

    /// Average cost of one node answer in load-flow equivalents: sweep iterations per answer
    /// divided by the sweep iterations of one flat-start base case.
    pub fn load_flow_equivalents_per_answer(&self) -> f64 {
        if self.node_results == 0 || self.base_cases == 0 {
            return 0.0;
        }
        let per_flow = self.base_sweep_iterations as f64 / self.base_cases as f64;
        let node_iterations = self.sweep_iterations - self.base_sweep_iterations;
        node_iterations as f64 / self.node_results as f64 / per_flow
    }

    /// Answers whose binding criterion is `limit`.
    pub fn count(&self, limit: Limit) -> u64 {
        let i = Limit::ALL.iter().position(|&l| l == limit).unwrap_or(0);
        self.by_limit[i]
    }
}

/// Maps every feeder: prepares each (base cases), then solves every (feeder, scenario, node)
/// in parallel on the current rayon pool. `progress` is called with the number of node answers
/// finished since its last call (from worker threads). The result is in input order and, within
/// a feeder, in scenario then node order, whatever the number of threads.
pub fn map_feeders<'f>(
    feeders: &'f [Feeder],
    study: &Study,
    options: &CapacityOptions,
    progress: &(dyn Fn(u64) + Sync),
) -> (Vec<FeederMap<'f>>, RunStats) {
    let prepared: Vec<FeederStudy<'f>> = feeders
        .par_iter()
        .map(|feeder| FeederStudy::prepare(feeder, study))
        .collect();
    let n_scenarios = study.scenarios.len();
    let tasks: Vec<(usize, usize, (usize, usize))> = prepared
        .iter()
        .enumerate()
        .flat_map(|(f, p)| {
            (0..n_scenarios)
                .flat_map(move |s| runs(p.feeder.n_nodes() - 1).map(move |run| (f, s, run)))
        })
        .collect();
    let answers: Vec<Vec<NodeCapacity>> = tasks
        .par_iter()
        .map(|&(f, s, run)| answer_run(&prepared[f], s, run, options, progress))
        .collect();
    let mut answers = answers.into_iter().flatten();

    let mut stats = RunStats::default();
    let mut maps = Vec::with_capacity(prepared.len());
    for p in &prepared {
        let n_answers = p.feeder.n_nodes() - 1;
        let feeder_answers: Vec<NodeCapacity> =
            answers.by_ref().take(n_answers * n_scenarios).collect();
        let (map, feeder_stats) = assemble(p, feeder_answers);
        stats.add(&feeder_stats);
        maps.push(map);
    }
    (maps, stats)
}

/// Maps one feeder: prepares it (base cases), then solves every (scenario, node) in parallel on
/// the current rayon pool. `progress` is called with the number of node answers finished since
/// its last call (from worker threads). Gives the same answers, in the same order, as the
/// feeder's entry of [`map_feeders`], whatever the number of threads.
pub fn map_feeder<'f>(
    feeder: &'f Feeder,
    study: &Study,
    options: &CapacityOptions,
    progress: &(dyn Fn(u64) + Sync),
) -> (FeederMap<'f>, RunStats) {
    let prepared = FeederStudy::prepare(feeder, study);
    let n_answers = feeder.n_nodes() - 1;
    // Scenario-major, then depth-first node order (the head, index 0, excluded).
    let tasks: Vec<(usize, (usize, usize))> = (0..study.scenarios.len())
        .flat_map(|s| runs(n_answers).map(move |run| (s, run)))
        .collect();
    let answers: Vec<Vec<NodeCapacity>> = tasks
        .par_iter()
        .map(|&(s, run)| answer_run(&prepared, s, run, options, progress))
        .collect();
    assemble(&prepared, answers.into_iter().flatten().collect())
}

/// One feeder's map and counts from its answers, scenario-major then node order.
fn assemble<'f>(p: &FeederStudy<'f>, answers: Vec<NodeCapacity>) -> (FeederMap<'f>, RunStats) {
    let n_scenarios = p.cases.len();
    let n_answers = p.feeder.n_nodes() - 1;
    debug_assert_eq!(answers.len(), n_scenarios * n_answers);
    let mut stats = RunStats::default();
    let mut answers = answers.into_iter();
    let mut hosting_kw = Array2::zeros((n_scenarios, n_answers));
    let mut scenarios = Vec::with_capacity(n_scenarios);
    for (s, case) in p.cases.iter().enumerate() {
        let nodes: Vec<NodeCapacity> = answers.by_ref().take(n_answers).collect();
        for (j, answer) in nodes.iter().enumerate() {
            hosting_kw[[s, j]] = answer.hosting_kw;
            stats.load_flows += u64::from(answer.load_flows);
            stats.sweep_iterations += u64::from(answer.sweep_iterations);
            stats.stepped_near_nose += u64::from(answer.stepped_near_nose);
            let l = Limit::ALL
                .iter()
                .position(|&l| l == answer.limit)
                .unwrap_or(0);
            stats.by_limit[l] += 1;
        }
        let base_iterations = match &case.base_result {
            Ok(c) => c.iterations,
            Err(e) => e.iterations,
        };
        stats.load_flows += 1;
        stats.base_cases += 1;
        stats.sweep_iterations += u64::from(base_iterations);
        stats.base_sweep_iterations += u64::from(base_iterations);
        stats.node_results += nodes.len() as u64;
        let baseline = p.baseline_violations(s);
        stats.baseline_violations += baseline.len() as u64;
        scenarios.push(ScenarioMap {
            scenario: case.scenario.name.clone(),
            nodes,
            base_branches: p.base_branches(s),
            baseline,
            base_head_power: p.base_head_power(s),
        });
    }
    stats.feeders += 1;
    let map = FeederMap {
        feeder: p.feeder,
        scenarios,
        hosting_kw,
    };
    (map, stats)
}
