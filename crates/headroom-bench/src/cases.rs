//! The cases the flow and map benchmarks time, shared by the divan benches and the `figures`
//! example so that both measure the same thing.

use std::time::Instant;

use headroom_capacity::{CapacityOptions, RunStats, SearchMethod, map_feeders};
use headroom_flow::{Converged, Demand, FlowState, Injection, Network, SolveSettings, solve};
use headroom_model::{BusIdx, Feeder, Study};
use headroom_synth::{SynthSettings, generate};

/// Nodes of the feeder timed by the load-flow and full-map benchmarks.
pub const LARGE_NODES: usize = 5_000;
/// Nodes of the feeder on which the divan bench compares the stepped and the fast search in a
/// few seconds (the `figures` example compares them on the [`LARGE_NODES`] feeder).
pub const SMALL_NODES: usize = 500;
/// Seed of the synthetic feeders.
pub const SEED: u64 = 1;
/// New generation injected at the far node for the warm-start load flow, kW.
pub const WARM_INJECTION_KW: f64 = 500.0;

/// A seeded synthetic 11 kV feeder of `n_nodes` nodes (headroom-synth defaults).
///
/// # Panics
/// When the generator produces an invalid feeder (a generator bug).
pub fn synthetic_feeder(n_nodes: usize, seed: u64) -> Feeder {
    generate(&SynthSettings::new(n_nodes, seed))
        .to_feeder(&format!("synthetic-{n_nodes}"))
        .expect("synthetic feeders are valid")
}

/// The node with the largest series resistance from the head: where an injection moves the
/// voltages most.
pub fn far_node(network: &Network) -> BusIdx {
    let parents = network.parents();
    let mut path_r_pu = vec![0.0; network.n_nodes()];
    for i in 1..network.n_nodes() {
        path_r_pu[i] = path_r_pu[parents[i] as usize] + network.r_pu()[i];
    }
    let far = (0..network.n_nodes())
        .max_by(|&a, &b| path_r_pu[a].total_cmp(&path_r_pu[b]))
        .unwrap_or(0);
    BusIdx::new(far as u32)
}

/// One load flow of a large feeder at peak load (loads × 1, existing generation × 0, the
/// `peak-load` scenario of the format's defaults), from a flat start and from a warm start.
#[derive(Debug, Clone)]
pub struct FlowCase {
    /// The feeder in per unit.
    pub network: Network,
    /// Peak-load demand.
    pub demand: Demand,
    /// The solved base case: the warm start.
    pub base: FlowState,
    /// [`WARM_INJECTION_KW`] of unity-power-factor generation at the far node.
    pub injection: [Injection; 1],
    /// Solver settings (the defaults: 1e-9 pu).
    pub settings: SolveSettings,
}

impl FlowCase {
    /// Builds the case on a synthetic feeder of `n_nodes` nodes.
    ///
    /// # Panics
    /// When the base case does not converge.
    pub fn new(n_nodes: usize) -> FlowCase {
        let feeder = synthetic_feeder(n_nodes, SEED);
        let network = Network::new(&feeder);
        let demand = Demand::from_feeder(&feeder, &network, 1.0, 0.0);
        let settings = SolveSettings::default();
        let mut base = FlowState::flat(&network);
        solve(&network, &demand, &[], &mut base, &settings).expect("base case converges");
        let injection = [Injection {
            bus: far_node(&network),
            p_pu: network.kw_to_pu(WARM_INJECTION_KW),
            q_pu: 0.0,
        }];
        FlowCase {
            network,
            demand,
            base,
            injection,
            settings,
        }
    }

    /// Nodes, the head included.
    pub fn n_nodes(&self) -> usize {
        self.network.n_nodes()
    }

    /// A flat-start state to solve from.
    pub fn flat_state(&self) -> FlowState {
        FlowState::flat(&self.network)
    }

    /// Solves the base case into `state` (call with a flat state).
    ///
    /// # Panics
    /// When the solve does not converge.
    pub fn solve_flat(&self, state: &mut FlowState) -> Converged {
        solve(&self.network, &self.demand, &[], state, &self.settings).expect("converges")
    }

    /// Solves the base case plus the injection into `state` (call with a copy of the base).
    ///
    /// # Panics
    /// When the solve does not converge.
    pub fn solve_warm(&self, state: &mut FlowState) -> Converged {
        solve(
            &self.network,
            &self.demand,
            &self.injection,
            state,
            &self.settings,
        )
        .expect("converges")
    }

    /// Sweep iterations of the flat-start solve.
    pub fn flat_iterations(&self) -> u32 {
        self.solve_flat(&mut self.flat_state()).iterations
    }

    /// Sweep iterations of the warm-start solve.
    pub fn warm_iterations(&self) -> u32 {
        self.solve_warm(&mut self.base.clone()).iterations
    }
}

/// Capacity options: the given search, with or without the per-criterion capacities.
pub fn options(method: SearchMethod, criteria_detail: bool) -> CapacityOptions {
    CapacityOptions {
        method,
        criteria_detail,
    }
}

/// Maps `feeders` with the format's default study (scenarios `min-load` and `peak-load`) on the
/// current rayon pool; returns the run's counts and its wall time, s.
pub fn map_default_study(feeders: &[Feeder], options: &CapacityOptions) -> (RunStats, f64) {
    let study = Study::default();
    let started = Instant::now();
    let (maps, stats) = map_feeders(feeders, &study, options, &|_| {});
    let seconds = started.elapsed().as_secs_f64();
    drop(maps);
    (stats, seconds)
}
