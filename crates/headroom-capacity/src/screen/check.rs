//! One application against every scenario: the capacity left at the node with the applicant's
//! power factor, one load flow at the requested export, and the verdict.

use std::borrow::Cow;

use rayon::prelude::*;
use serde::Serialize;

use headroom_model::{BusIdx, GenerationSettings};

use super::application::Application;
use super::request::{SolvedRequest, breaches, solve_request, unit};
use super::what_if::{WhatIfs, what_ifs};
use crate::criteria::{Element, Limit, Snapshot};
use crate::prepare::FeederStudy;
use crate::search::{CapacityOptions, NodeCapacity, SearchMethod};

/// The answer to an application, in one scenario or overall.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// The export fits under every criterion.
    Accept,
    /// Some criterion would be broken (or the search stopped at `max_kw` below the request).
    Refuse,
}

impl Verdict {
    /// `accept` or `refuse`, as in the JSON and the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Accept => "accept",
            Verdict::Refuse => "refuse",
        }
    }
}

impl Serialize for Limit {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.serialize_str(self.as_str())
    }
}

/// How to check.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CheckOptions {
    /// Search method of the capacities (both give the same numbers).
    pub method: SearchMethod,
    /// On a refusal, work out the what-ifs (power factor, export limit, reinforcement, head
    /// voltage); each costs further load flows.
    pub what_ifs: bool,
}

impl Default for CheckOptions {
    /// The fast search, with what-ifs.
    fn default() -> CheckOptions {
        CheckOptions {
            method: SearchMethod::Fast,
            what_ifs: true,
        }
    }
}

/// The outcome of one application: overall and per scenario, with the what-ifs of a refusal.
#[derive(Debug, Clone, Serialize)]
pub struct CheckReport {
    /// Feeder id.
    pub feeder: String,
    /// The application's reference (left out of the JSON when empty).
    #[serde(skip_serializing_if = "String::is_empty")]
    pub id: String,
    /// Node id where the plant would connect.
    pub node: String,
    /// Requested export, kW.
    pub kw: f64,
    /// Reactive power at the requested export, kvar (negative = absorbed).
    pub kvar: f64,
    /// The plant's power factor.
    pub power_factor: f64,
    /// Whether the plant absorbs reactive power (false: it injects).
    pub absorbing: bool,
    /// Accept when every scenario accepts.
    pub verdict: Verdict,
    /// The scenario that decides: the refusing one with the least margin, or, on acceptance,
    /// the one with the least margin.
    pub deciding_scenario: String,
    /// Capacity left at the node in the deciding scenario (the least over the scenarios), kW.
    pub hosting_kw: f64,
    /// `hosting_kw − kw` in the deciding scenario, kW (negative: short by that much).
    pub margin_kw: f64,
    /// What binds in the deciding scenario.
    pub limit: Limit,
    /// Where it binds (node or branch id).
    pub limit_element: Option<String>,
    /// One entry per scenario of the study, in its order.
    pub scenarios: Vec<ScenarioCheck>,
    /// On a refusal (when asked for): what would let the plant connect.
    pub what_ifs: Option<WhatIfs>,
    /// Load flows solved for this check (base cases not included).
    pub load_flows: u32,
}

/// The outcome in one scenario.
#[derive(Debug, Clone, Serialize)]
pub struct ScenarioCheck {
    /// Scenario name.
    pub scenario: String,
    /// Accept when the request is at most the capacity left and the load flow at the request
    /// breaks nothing.
    pub verdict: Verdict,
    /// Capacity left at the node before this application, with the applicant's power factor,
    /// kW (the hosting capacity of the definition).
    pub hosting_kw: f64,
    /// `hosting_kw − kw`, kW.
    pub margin_kw: f64,
    /// The criterion that binds first above the capacity (or, in the rare case where the
    /// request is within the capacity but its own load flow breaks a limit, that limit).
    pub limit: Limit,
    /// Where it binds.
    pub limit_element: Option<String>,
    /// Set when the verdict needs a word more: the request is above the search's `max_kw`, or
    /// the verdict comes from the load flow at the request rather than the capacity.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
    /// The network without the plant (`None` when the base case has no solution).
    pub without_plant: Option<NetworkState>,
    /// The network with the plant at the requested export (`None` when that load flow has no
    /// solution).
    pub with_plant: Option<NetworkState>,
    /// Criteria beyond their limits at the requested export ("beyond the limit and worse than
    /// without the plant", as in the capacity search); empty when it passes.
    pub breaches_at_request: Vec<RequestBreach>,
    /// Limits already broken without the plant (existing problems, never charged to it).
    pub baseline_violations: usize,
}

/// Voltages and loading of one solved state.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct NetworkState {
    /// Voltage at the applicant's node, pu.
    pub v_node_pu: f64,
    /// Highest voltage on the feeder (head included), pu.
    pub v_max_pu: f64,
    /// Where.
    pub v_max_node: String,
    /// Lowest voltage on the feeder, pu.
    pub v_min_pu: f64,
    /// Where.
    pub v_min_node: String,
    /// Highest branch loading, percent of rating.
    pub loading_max_pct: f64,
    /// Where (`None` on a feeder without branches).
    pub loading_max_branch: Option<String>,
    /// Active power from the head into the feeder, kW (negative = reverse flow).
    pub head_p_kw: f64,
}

/// One criterion broken at the requested export.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RequestBreach {
    /// Which criterion.
    pub limit: Limit,
    /// At how many nodes or branches.
    pub elements: usize,
    /// The worst of them (node or branch id).
    pub worst_element: Option<String>,
    /// Its quantity: voltage or voltage change in pu, current in A, head power in kW.
    pub value: f64,
    /// The threshold it is beyond, same unit.
    pub threshold: f64,
    /// `pu`, `A` or `kW`.
    pub unit: &'static str,
}

/// The study with the new generation's power factor taken from `generation` (borrowed when it
/// is the study's own).
pub(crate) fn sized_for<'a, 'f>(
    prepared: &'a FeederStudy<'f>,
    generation: &GenerationSettings,
) -> Cow<'a, FeederStudy<'f>> {
    if prepared.study.generation == *generation {
        Cow::Borrowed(prepared)
    } else {
        let mut sized = prepared.clone();
        sized.study.generation = generation.clone();
        Cow::Owned(sized)
    }
}

/// `p_kw` moved onto the grid of the resolution when it is within rounding of a multiple, so
/// that a request equal to a capacity solves exactly the injection the search solved.
pub(crate) fn on_grid(p_kw: f64, resolution_kw: f64) -> f64 {
    let steps = (p_kw / resolution_kw).round();
    if (p_kw / resolution_kw - steps).abs() < 1e-9 {
        steps * resolution_kw
    } else {
        p_kw
    }
}

/// True when `p_kw` is at most `hosting_kw` (up to rounding of the resolution grid).
pub(crate) fn fits(p_kw: f64, hosting_kw: f64, resolution_kw: f64) -> bool {
    p_kw <= hosting_kw + 1e-9 * resolution_kw
}

/// Capacity options of a check: no per-criterion capacities (not reported).
pub(crate) fn capacity_options(method: SearchMethod) -> CapacityOptions {
    CapacityOptions {
        method,
        criteria_detail: false,
    }
}

/// Checks one application against every scenario of `prepared` (whose base cases already hold
/// any earlier accepted generation).
///
/// The capacity left at the node is its hosting capacity with the study's `[generation]`
/// replaced by the applicant's power factor; a scenario accepts when the request is at most
/// that capacity and one load flow at the request breaks no criterion. So a request equal to
/// the node's capacity in `map` is accepted, and one a resolution above it refused. Scenarios
/// run in parallel on the current rayon pool; the report does not depend on the thread count.
///
/// # Panics
/// When the application's node is the head or not a node of the feeder, or its export is not
/// a finite number ≥ 0.
pub fn check_application(
    prepared: &FeederStudy<'_>,
    application: &Application,
    options: &CheckOptions,
) -> CheckReport {
    let feeder = prepared.feeder;
    let bus = application.bus;
    assert!(
        bus != BusIdx::HEAD && bus.index() < feeder.n_nodes(),
        "application at the head or outside the feeder"
    );
    assert!(
        application.p_kw.is_finite() && application.p_kw >= 0.0,
        "export must be finite and not negative"
    );
    let sized = sized_for(prepared, &application.generation);
    let resolution_kw = sized.study.search.resolution_kw;
    let p_kw = application.p_kw;
    let p_solve_kw = on_grid(p_kw, resolution_kw);
    let q_per_p = application.generation.q_per_p();
    let n_scenarios = sized.cases.len();
    let work: Vec<(NodeCapacity, SolvedRequest)> = (0..n_scenarios)
        .into_par_iter()
        .map(|s| {
            let capacity = sized.node_capacity(s, bus, &capacity_options(options.method));
            let request = solve_request(&sized, s, bus, p_solve_kw, q_per_p);
            (capacity, request)
        })
        .collect();
    let mut load_flows = 0;
    let scenarios: Vec<ScenarioCheck> = work
        .iter()
        .enumerate()
        .map(|(s, (capacity, request))| {
            load_flows += capacity.load_flows + request.load_flows;
            scenario_check(&sized, s, p_kw, capacity, request)
        })
        .collect();
    let deciding = deciding_scenario(&scenarios);
    let decided = &scenarios[deciding];
    let verdict = if scenarios.iter().all(|s| s.verdict == Verdict::Accept) {
        Verdict::Accept
    } else {
        Verdict::Refuse
    };
    let what_ifs = (verdict == Verdict::Refuse && options.what_ifs).then(|| {
        let requests: Vec<&SolvedRequest> = work.iter().map(|(_, r)| r).collect();
        let (what_ifs, flows) = what_ifs(
            prepared,
            &sized,
            application,
            &scenarios,
            &requests,
            options.method,
        );
        load_flows += flows;
        what_ifs
    });
    CheckReport {
        feeder: feeder.id().to_string(),
        id: application.id.clone(),
        node: feeder.node(bus).id.clone(),
        kw: p_kw,
        kvar: application.q_kvar(),
        power_factor: application.generation.power_factor,
        absorbing: application.generation.absorbing,
        verdict,
        deciding_scenario: decided.scenario.clone(),
        hosting_kw: decided.hosting_kw,
        margin_kw: decided.margin_kw,
        limit: decided.limit,
        limit_element: decided.limit_element.clone(),
        what_ifs,
        scenarios,
        load_flows,
    }
}

/// The refusing scenario with the least margin, else the accepting one with the least margin;
/// ties go to the study's order.
pub(crate) fn deciding_scenario(scenarios: &[ScenarioCheck]) -> usize {
    let mut best = 0;
    for (i, s) in scenarios.iter().enumerate().skip(1) {
        let b = &scenarios[best];
        let (s_refuses, b_refuses) = (s.verdict == Verdict::Refuse, b.verdict == Verdict::Refuse);
        if (s_refuses && !b_refuses) || (s_refuses == b_refuses && s.margin_kw < b.margin_kw) {
            best = i;
        }
    }
    best
}

fn scenario_check(
    study: &FeederStudy<'_>,
    s: usize,
    p_kw: f64,
    capacity: &NodeCapacity,
    request: &SolvedRequest,
) -> ScenarioCheck {
    let feeder = study.feeder;
    let case = &study.cases[s];
    let resolution_kw = study.study.search.resolution_kw;
    let request_breaches = match &request.snapshot {
        Some(at) => breaches(study, s, at),
        None => Vec::new(),
    };
    let fits = fits(p_kw, capacity.hosting_kw, resolution_kw);
    let clean = request.snapshot.is_some() && request.mask == 0;
    let (verdict, limit, element, note) = if !fits {
        let note = (capacity.limit == Limit::SearchMax).then(|| {
            format!(
                "the request is above the study's search max_kw ({} kW): raise it to look \
                 further",
                study.study.search.max_kw
            )
        });
        (Verdict::Refuse, capacity.limit, capacity.element, note)
    } else if clean {
        (Verdict::Accept, capacity.limit, capacity.element, None)
    } else {
        // Every step up to the capacity passes, yet the request itself does not: a limit
        // crossed between two steps, or no solution at the request.
        let (limit, element) = match request_breaches.first() {
            Some(b) if request.snapshot.is_some() => (b.limit, b.worst),
            _ => (Limit::NotConverged, Element::None),
        };
        let note = format!(
            "the request is within the capacity of {} kW, but the load flow at the request \
             breaks {limit}",
            capacity.hosting_kw
        );
        (Verdict::Refuse, limit, element, Some(note))
    };
    let without_plant = case
        .base_result
        .is_ok()
        .then(|| network_state(study, capacity.bus, &case.snapshot));
    let with_plant = request
        .snapshot
        .as_ref()
        .map(|at| network_state(study, capacity.bus, at));
    ScenarioCheck {
        scenario: case.scenario.name.clone(),
        verdict,
        hosting_kw: capacity.hosting_kw,
        margin_kw: capacity.hosting_kw - p_kw,
        limit,
        limit_element: element.id(feeder).map(str::to_string),
        note,
        without_plant,
        with_plant,
        breaches_at_request: request_breaches
            .iter()
            .map(|b| RequestBreach {
                limit: b.limit,
                elements: b.count,
                worst_element: b.worst.id(feeder).map(str::to_string),
                value: b.value,
                threshold: b.threshold,
                unit: unit(b.limit),
            })
            .collect(),
        baseline_violations: study.baseline_violations(s).len(),
    }
}

/// Voltages and loading of a solved state, read at `bus` and over the feeder.
pub(crate) fn network_state(study: &FeederStudy<'_>, bus: BusIdx, at: &Snapshot) -> NetworkState {
    let feeder = study.feeder;
    let (mut i_max, mut i_min) = (0, 0);
    for (i, &v) in at.v_pu.iter().enumerate() {
        if v > at.v_pu[i_max] {
            i_max = i;
        }
        if v < at.v_pu[i_min] {
            i_min = i;
        }
    }
    let i_base_a = study.network.i_base_a();
    let loading = feeder
        .branches()
        .iter()
        .enumerate()
        .map(|(b, branch)| (b, 100.0 * at.i_pu[b + 1] * i_base_a / branch.rating_a))
        .fold(None, |best: Option<(usize, f64)>, (b, pct)| match best {
            Some((_, top)) if top >= pct => best,
            _ => Some((b, pct)),
        });
    NetworkState {
        v_node_pu: at.v_pu[bus.index()],
        v_max_pu: at.v_pu[i_max],
        v_max_node: feeder.nodes()[i_max].id.clone(),
        v_min_pu: at.v_pu[i_min],
        v_min_node: feeder.nodes()[i_min].id.clone(),
        loading_max_pct: loading.map_or(0.0, |(_, pct)| pct),
        loading_max_branch: loading.map(|(b, _)| feeder.branches()[b].id.clone()),
        head_p_kw: study.network.pu_to_kw(at.head_p_pu),
    }
}
