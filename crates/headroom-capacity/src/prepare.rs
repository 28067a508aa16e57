//! A feeder prepared for one study: per-unit network, each scenario's demand, base-case solution
//! and thresholds, and the path impedances the fast search predicts from.

use std::sync::Arc;

use headroom_flow::{
    Converged, Demand, FlowState, Network, NotConverged, Patience, Solution, SolveSettings,
    solve_patiently,
};
use headroom_model::{BranchIdx, BusIdx, Feeder, Scenario, Study};

use crate::criteria::{Element, Limit, Snapshot, Thresholds, Violation};
use crate::linear::LinearResponse;
use crate::range_min::RangeArgmin;

/// One scenario of a prepared feeder: its demand and its solution without new generation.
#[derive(Debug, Clone)]
pub struct ScenarioCase {
    /// The scenario.
    pub scenario: Scenario,
    /// Net demand per node.
    pub demand: Demand,
    /// The solved base case (P = 0); warm start of every injection.
    pub base: FlowState,
    /// How the base case solved.
    pub base_result: Result<Converged, NotConverged>,
    pub(crate) snapshot: Arc<Snapshot>,
    pub(crate) thresholds: Thresholds,
    /// Per node: least headroom to the overvoltage threshold over its subtree, pu.
    pub(crate) subtree_ov_headroom: Vec<f64>,
    /// Per node: least headroom to the undervoltage threshold over its subtree, pu.
    pub(crate) subtree_uv_headroom: Vec<f64>,
    /// Σ |S| of the net demand over every node, pu: a branch current (pu) moves by at most
    /// about this times a small voltage error (pu) of the nodes it feeds.
    pub(crate) demand_mva_pu: f64,
    /// The base case's linear response to a current injected at a node (the start of solves
    /// far from any solved injection).
    pub(crate) linear: LinearResponse,
    /// Bound on how much one sweep shrinks a solve's error, times the square of the lowest
    /// node voltage (pu²): over every node, the sum along its path of each branch's |Z| times
    /// the |S| of the demand it feeds (see [`crate::search`]'s settled verdicts).
    pub(crate) sweep_contraction: f64,
    /// Nodes of least headroom to the overvoltage threshold over index ranges.
    pub(crate) least_ov_headroom: RangeArgmin,
    /// Nodes of least headroom to the undervoltage threshold over index ranges.
    pub(crate) least_uv_headroom: RangeArgmin,
}

/// Base-case flow of one branch in one scenario.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BaseBranch {
    /// Current, A.
    pub current_a: f64,
    /// Loading, percent of the rating.
    pub loading_pct: f64,
    /// Active power at the sending end, kW.
    pub p_kw: f64,
    /// Reactive power at the sending end, kvar.
    pub q_kvar: f64,
    /// Series losses, kW.
    pub loss_kw: f64,
}

/// A feeder prepared for a study (see the crate docs).
#[derive(Debug, Clone)]
pub struct FeederStudy<'f> {
    /// The feeder.
    pub feeder: &'f Feeder,
    /// The feeder in per unit.
    pub network: Network,
    /// The study settings.
    pub study: Study,
    /// One entry per scenario of the study, in its order.
    pub cases: Vec<ScenarioCase>,
    /// Cumulative series resistance from the head to each node, pu.
    pub(crate) path_r_pu: Vec<f64>,
    /// Cumulative series reactance from the head to each node, pu.
    pub(crate) path_x_pu: Vec<f64>,
    /// Cumulative |Z| of the series impedances from the head to each node, pu.
    pub(crate) path_z_abs_pu: Vec<f64>,
    pub(crate) solve_settings: SolveSettings,
}

impl<'f> FeederStudy<'f> {
    /// Builds the network and solves every scenario's base case (flat start).
    pub fn prepare(feeder: &'f Feeder, study: &Study) -> FeederStudy<'f> {
        FeederStudy::prepare_with(feeder, study, SolveSettings::default(), &[])
    }

    /// As [`FeederStudy::prepare`], with solver settings and extra permanent generation
    /// (`(node, kW, kvar injected)` at rated output, for example accepted applications). The
    /// extra generation is generation like any other: each scenario scales it by its
    /// `gen_scale`, as it scales the feeder's own `gen_kw` and `gen_kvar` (with the default
    /// scenarios, full output at `min-load` and none at `peak-load`).
    pub fn prepare_with(
        feeder: &'f Feeder,
        study: &Study,
        solve_settings: SolveSettings,
        extra_generation: &[(BusIdx, f64, f64)],
    ) -> FeederStudy<'f> {
        let network = Network::new(feeder);
        let demands = study
            .scenarios
            .iter()
            .map(|scenario| {
                let mut demand =
                    Demand::from_feeder(feeder, &network, scenario.load_scale, scenario.gen_scale);
                for &(bus, p_kw, q_kvar) in extra_generation {
                    let scale = scenario.gen_scale;
                    demand.add_generation(
                        bus,
                        network.kw_to_pu(p_kw * scale),
                        network.kw_to_pu(q_kvar * scale),
                    );
                }
                demand
            })
            .collect();
        FeederStudy::from_demands(feeder, network, study, solve_settings, demands)
    }

    /// The same study with the head held at `head_v_pu` instead of the feeder's own setting (a
    /// what-if tap change at the substation): every scenario's base case is solved again, from
    /// a flat start, on the same demand (extra generation included).
    pub fn with_head_voltage(&self, head_v_pu: f64) -> FeederStudy<'f> {
        let network = self.network.clone().with_head_v_pu(head_v_pu);
        let demands = self.cases.iter().map(|c| c.demand.clone()).collect();
        FeederStudy::from_demands(
            self.feeder,
            network,
            &self.study,
            self.solve_settings,
            demands,
        )
    }

    /// Path impedances, and every scenario's base case, snapshot and thresholds, from one
    /// demand per scenario of `study` (in its order).
    fn from_demands(
        feeder: &'f Feeder,
        network: Network,
        study: &Study,
        solve_settings: SolveSettings,
        demands: Vec<Demand>,
    ) -> FeederStudy<'f> {
        debug_assert_eq!(demands.len(), study.scenarios.len());
        let n = feeder.n_nodes();
        let parents = network.parents();
        let mut path_r_pu = vec![0.0; n];
        let mut path_x_pu = vec![0.0; n];
        let mut path_z_abs_pu = vec![0.0; n];
        let branch_z_abs = |i: usize| network.r_pu()[i].hypot(network.x_pu()[i]);
        for i in 1..n {
            let up = parents[i] as usize;
            path_r_pu[i] = path_r_pu[up] + network.r_pu()[i];
            path_x_pu[i] = path_x_pu[up] + network.x_pu()[i];
            path_z_abs_pu[i] = path_z_abs_pu[up] + branch_z_abs(i);
        }
        let cases = study
            .scenarios
            .iter()
            .zip(demands)
            .map(|(scenario, demand)| {
                let mut base = FlowState::flat(&network);
                // Past the sweep cap while it converges: a heavily loaded case next to the
                // nose of the P–V curve converges slowly but has a solution.
                let base_result = solve_patiently(
                    &network,
                    &demand,
                    &[],
                    &mut base,
                    &solve_settings,
                    &Patience::default(),
                );
                let snapshot = Snapshot::capture(&base);
                let thresholds = Thresholds::new(feeder, &network, &study.limits, &snapshot);
                let ov_headroom: Vec<f64> = (0..n)
                    .map(|i| thresholds.ov[i] - snapshot.v_pu[i])
                    .collect();
                let uv_headroom: Vec<f64> = (0..n)
                    .map(|i| snapshot.v_pu[i] - thresholds.uv[i])
                    .collect();
                let mut subtree_ov_headroom = ov_headroom.clone();
                let mut subtree_uv_headroom = uv_headroom.clone();
                for i in (1..n).rev() {
                    let up = parents[i] as usize;
                    subtree_ov_headroom[up] = subtree_ov_headroom[up].min(subtree_ov_headroom[i]);
                    subtree_uv_headroom[up] = subtree_uv_headroom[up].min(subtree_uv_headroom[i]);
                }
                let demand_mva_pu = demand
                    .p_pu()
                    .iter()
                    .zip(demand.q_pu())
                    .map(|(p, q)| p.hypot(*q))
                    .sum();
                let linear = LinearResponse::new(&network, &demand, &base);
                // Σ |S| of each subtree, then along every path Σ |Z|·(that sum).
                let mut fed: Vec<f64> = (0..n)
                    .map(|i| demand.p_pu()[i].hypot(demand.q_pu()[i]))
                    .collect();
                for i in (1..n).rev() {
                    let up = parents[i] as usize;
                    fed[up] += fed[i];
                }
                let mut along = vec![0.0; n];
                for i in 1..n {
                    along[i] = along[parents[i] as usize] + branch_z_abs(i) * fed[i];
                }
                let sweep_contraction = along.iter().copied().fold(0.0, f64::max);
                ScenarioCase {
                    sweep_contraction,
                    scenario: scenario.clone(),
                    linear,
                    least_ov_headroom: RangeArgmin::new(ov_headroom),
                    least_uv_headroom: RangeArgmin::new(uv_headroom),
                    demand_mva_pu,
                    demand,
                    base,
                    base_result,
                    snapshot: Arc::new(snapshot),
                    thresholds,
                    subtree_ov_headroom,
                    subtree_uv_headroom,
                }
            })
            .collect();
        FeederStudy {
            feeder,
            network,
            study: study.clone(),
            cases,
            path_r_pu,
            path_x_pu,
            path_z_abs_pu,
            solve_settings,
        }
    }

    /// Base-case voltage at a node in scenario `s`, pu.
    pub fn v_base_pu(&self, s: usize, bus: BusIdx) -> f64 {
        self.cases[s].snapshot.v_pu[bus.index()]
    }

    /// Base-case flow of every branch in scenario `s`, in branch order.
    pub fn base_branches(&self, s: usize) -> Vec<BaseBranch> {
        let solution = Solution::new(&self.network, &self.cases[s].base);
        self.feeder
            .branches()
            .iter()
            .map(|branch| {
                let flow = solution.branch_flow(branch.to.index());
                BaseBranch {
                    current_a: flow.current_a,
                    loading_pct: 100.0 * flow.current_a / branch.rating_a,
                    p_kw: flow.p_kw,
                    q_kvar: flow.q_kvar,
                    loss_kw: flow.loss_kw,
                }
            })
            .collect()
    }

    /// Power from the head into the feeder in the base case of scenario `s`, kW and kvar.
    pub fn base_head_power(&self, s: usize) -> (f64, f64) {
        Solution::new(&self.network, &self.cases[s].base).head_power()
    }

    /// Limits already broken without any new generation in scenario `s` (problems of the
    /// existing network, never charged to an applicant): nodes outside the voltage band,
    /// branches above their thermal limit, reverse flow when forbidden, or a base case that
    /// does not solve. Sorted by criterion, then element.
    pub fn baseline_violations(&self, s: usize) -> Vec<Violation> {
        let case = &self.cases[s];
        if case.base_result.is_err() {
            return vec![Violation {
                limit: Limit::NotConverged,
                element: Element::None,
                value: f64::NAN,
                threshold: f64::NAN,
            }];
        }
        let limits = &self.study.limits;
        let mut found = Vec::new();
        for (i, &v) in case.snapshot.v_pu.iter().enumerate() {
            let element = Element::Node(BusIdx::new(i as u32));
            if v > limits.v_max_pu {
                found.push(Violation {
                    limit: Limit::Overvoltage,
                    element,
                    value: v,
                    threshold: limits.v_max_pu,
                });
            }
            if v < limits.v_min_pu {
                found.push(Violation {
                    limit: Limit::Undervoltage,
                    element,
                    value: v,
                    threshold: limits.v_min_pu,
                });
            }
        }
        for (b, branch) in self.feeder.branches().iter().enumerate() {
            let current_a = case.snapshot.i_pu[b + 1] * self.network.i_base_a();
            let limit_a = branch.rating_a * limits.thermal_pct / 100.0;
            if current_a > limit_a {
                found.push(Violation {
                    limit: Limit::Thermal,
                    element: Element::Branch(BranchIdx::new(b as u32)),
                    value: current_a,
                    threshold: limit_a,
                });
            }
        }
        if limits.reverse_flow == headroom_model::ReverseFlow::Forbid
            && case.snapshot.head_p_pu < 0.0
        {
            found.push(Violation {
                limit: Limit::ReverseFlow,
                element: Element::Head,
                value: self.network.pu_to_kw(case.snapshot.head_p_pu),
                threshold: 0.0,
            });
        }
        found.sort_by_key(|v| (v.limit, v.element));
        found
    }
}
