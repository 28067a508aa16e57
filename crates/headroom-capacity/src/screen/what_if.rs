//! What an engineer tries after a refusal, each worked out with full load flows on the model:
//! another power factor, an export limit, a stronger branch, another voltage at the substation.

use std::collections::BTreeMap;

use rayon::prelude::*;
use serde::Serialize;

use headroom_model::{BusIdx, GenerationSettings};

use super::application::Application;
use super::check::{ScenarioCheck, Verdict, capacity_options, fits, sized_for};
use super::request::SolvedRequest;
use crate::criteria::{Element, Limit};
use crate::prepare::FeederStudy;
use crate::search::{NodeCapacity, SearchMethod};

/// Power factors tried (absorbing) after a refusal.
pub const WHAT_IF_POWER_FACTORS: [f64; 2] = [0.95, 0.90];

/// Resolution of the head-voltage what-if, pu (0.1 % of nominal).
pub const HEAD_VOLTAGE_STEP_PU: f64 = 0.001;

/// Largest head-voltage change tried, pu (10 % of nominal).
pub const HEAD_VOLTAGE_MAX_CHANGE_PU: f64 = 0.1;

/// Rounds of the reinforcement what-if (each adds or strengthens one branch) before giving up.
const REINFORCEMENT_ROUNDS: usize = 12;

/// Printed with every set of what-ifs.
pub const WHAT_IF_NOTE: &str = "Planning estimates: each what-if changes one thing, is worked \
out with full load flows on this model, and is not a design. Confirm under local codes and by \
licensed engineers.";

/// The what-ifs of a refusal.
#[derive(Debug, Clone, Serialize)]
pub struct WhatIfs {
    /// [`WHAT_IF_NOTE`].
    pub note: &'static str,
    /// The capacity at each power factor of [`WHAT_IF_POWER_FACTORS`], absorbing.
    pub power_factor: Vec<PowerFactorWhatIf>,
    /// The largest export that passes at the applicant's power factor.
    pub export_limit: ExportLimit,
    /// When the thermal limit binds: the branches to reinforce and the ratings that would free
    /// the request.
    pub reinforcement: Option<Reinforcement>,
    /// When a voltage limit binds: the head voltage that would free the request (a tap change
    /// at the substation).
    pub head_voltage: Option<HeadVoltageWhatIf>,
}

/// A what-if's outcome for the full request, over every scenario.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Assessment {
    /// Whether the full request would pass.
    pub verdict: Verdict,
    /// Capacity left at the node, the least over the scenarios, kW.
    pub hosting_kw: f64,
    /// The scenario where it is least.
    pub scenario: String,
    /// What binds there.
    pub limit: Limit,
    /// Where.
    pub limit_element: Option<String>,
}

/// The request at another power factor.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PowerFactorWhatIf {
    /// Power factor tried.
    pub power_factor: f64,
    /// Always true: the plant absorbs reactive power, which lowers its voltage rise.
    pub absorbing: bool,
    /// Outcome at that power factor.
    #[serde(flatten)]
    pub outcome: Assessment,
}

/// The export limit that would pass.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExportLimit {
    /// The largest export that passes in every scenario at the applicant's power factor, kW (0:
    /// none does). A resolution more is refused.
    pub export_limit_kw: f64,
    /// The scenario that sets it.
    pub scenario: String,
    /// What binds a resolution above it.
    pub limit: Limit,
    /// Where.
    pub limit_element: Option<String>,
}

/// Reinforcing the branches that overload.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Reinforcement {
    /// The branches to reinforce, in branch order, with the ratings tried.
    pub branches: Vec<BranchUpgrade>,
    /// Outcome with those ratings (it may still refuse when another limit binds next).
    #[serde(flatten)]
    pub outcome: Assessment,
}

/// One branch to reinforce.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BranchUpgrade {
    /// Branch id.
    pub branch: String,
    /// Its end toward the head.
    pub from: String,
    /// Its end away from the head.
    pub to: String,
    /// Rating today, A.
    pub rating_a: f64,
    /// Rating tried: a whole number of amperes that carries the request within `thermal_pct`.
    pub needed_rating_a: f64,
    /// Highest current in it at the request over the scenarios, A.
    pub current_at_request_a: f64,
}

/// Another voltage held at the head (a tap change at the substation).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HeadVoltageWhatIf {
    /// The feeder's head voltage today, pu.
    pub head_voltage_pu: f64,
    /// The setting tried: the smallest change (in steps of [`HEAD_VOLTAGE_STEP_PU`]) that
    /// frees the request, or the largest change tried when none does.
    pub new_head_voltage_pu: f64,
    /// The change, percent of nominal (negative: lower).
    pub change_pct: f64,
    /// Outcome at the new setting.
    #[serde(flatten)]
    pub outcome: Assessment,
    /// Lowest voltage without the plant at the new setting, over the scenarios, pu.
    pub base_v_min_pu: f64,
    /// Highest voltage without the plant at the new setting, over the scenarios, pu.
    pub base_v_max_pu: f64,
    /// Limits broken without the plant at the new setting that are not broken today: a setting
    /// that creates them is not a fix on its own.
    pub new_baseline_violations: usize,
}

/// An assessment with the binding element still as an index.
struct Assessed {
    outcome: Assessment,
    element: Element,
    load_flows: u32,
}

/// The capacity at `bus` in every scenario of `study`, and whether `p_kw` fits in all.
fn assess(study: &FeederStudy<'_>, bus: BusIdx, p_kw: f64, method: SearchMethod) -> Assessed {
    let capacities: Vec<NodeCapacity> = (0..study.cases.len())
        .into_par_iter()
        .map(|s| study.node_capacity(s, bus, &capacity_options(method)))
        .collect();
    let resolution_kw = study.study.search.resolution_kw;
    let mut least = 0;
    for (s, c) in capacities.iter().enumerate() {
        if c.hosting_kw < capacities[least].hosting_kw {
            least = s;
        }
    }
    let c = &capacities[least];
    let verdict = if capacities
        .iter()
        .all(|c| fits(p_kw, c.hosting_kw, resolution_kw))
    {
        Verdict::Accept
    } else {
        Verdict::Refuse
    };
    Assessed {
        outcome: Assessment {
            verdict,
            hosting_kw: c.hosting_kw,
            scenario: study.cases[least].scenario.name.clone(),
            limit: c.limit,
            limit_element: c.element.id(study.feeder).map(str::to_string),
        },
        element: c.element,
        load_flows: capacities.iter().map(|c| c.load_flows).sum(),
    }
}

/// Every what-if of a refused application; returns them with the load flows they cost.
pub(crate) fn what_ifs(
    prepared: &FeederStudy<'_>,
    sized: &FeederStudy<'_>,
    application: &Application,
    scenarios: &[ScenarioCheck],
    requests: &[&SolvedRequest],
    method: SearchMethod,
) -> (WhatIfs, u32) {
    let (bus, p_kw) = (application.bus, application.p_kw);
    let refusing = || scenarios.iter().filter(|s| s.verdict == Verdict::Refuse);
    let thermal = refusing().any(|s| s.limit == Limit::Thermal);
    let direction = if refusing().any(|s| s.limit == Limit::Overvoltage) {
        Some(-1.0)
    } else if refusing().any(|s| s.limit == Limit::Undervoltage) {
        Some(1.0)
    } else {
        None
    };
    // Independent of each other: side by side.
    let ((power_factor, reinforcement), head_voltage) = rayon::join(
        || {
            rayon::join(
                || power_factors(prepared, bus, p_kw, method),
                || thermal.then(|| reinforce(sized, bus, p_kw, requests, method)),
            )
        },
        || direction.map(|d| head_voltage(sized, bus, p_kw, requests, d, method)),
    );
    let mut least = &scenarios[0];
    for s in scenarios {
        if s.hosting_kw < least.hosting_kw {
            least = s;
        }
    }
    let export_limit = ExportLimit {
        export_limit_kw: least.hosting_kw,
        scenario: least.scenario.clone(),
        limit: least.limit,
        limit_element: least.limit_element.clone(),
    };
    let mut load_flows = power_factor.1;
    load_flows += reinforcement.as_ref().map_or(0, |r| r.1);
    load_flows += head_voltage.as_ref().map_or(0, |h| h.1);
    (
        WhatIfs {
            note: WHAT_IF_NOTE,
            power_factor: power_factor.0,
            export_limit,
            reinforcement: reinforcement.map(|r| r.0),
            head_voltage: head_voltage.map(|h| h.0),
        },
        load_flows,
    )
}

fn power_factors(
    prepared: &FeederStudy<'_>,
    bus: BusIdx,
    p_kw: f64,
    method: SearchMethod,
) -> (Vec<PowerFactorWhatIf>, u32) {
    let tried: Vec<(PowerFactorWhatIf, u32)> = WHAT_IF_POWER_FACTORS
        .par_iter()
        .map(|&power_factor| {
            let generation = GenerationSettings {
                power_factor,
                absorbing: true,
            };
            let study = sized_for(prepared, &generation);
            let assessed = assess(&study, bus, p_kw, method);
            (
                PowerFactorWhatIf {
                    power_factor,
                    absorbing: true,
                    outcome: assessed.outcome,
                },
                assessed.load_flows,
            )
        })
        .collect();
    let load_flows = tried.iter().map(|t| t.1).sum();
    (tried.into_iter().map(|t| t.0).collect(), load_flows)
}

/// Raises the rating of every branch that overloads at the request to carry its current there
/// (whole amperes), then, while the thermal limit still binds first, raises the binding
/// branch again.
fn reinforce(
    sized: &FeederStudy<'_>,
    bus: BusIdx,
    p_kw: f64,
    requests: &[&SolvedRequest],
    method: SearchMethod,
) -> (Reinforcement, u32) {
    let feeder = sized.feeder;
    let n = feeder.n_nodes();
    let pct = sized.study.limits.thermal_pct;
    let i_base_a = sized.network.i_base_a();
    let rating_a = |i: usize| feeder.branches()[i - 1].rating_a;
    // Per node i (branch i − 1): highest current at the request, and whether it overloads.
    let mut current_a = vec![0.0f64; n];
    let mut overloaded = vec![false; n];
    for (s, request) in requests.iter().enumerate() {
        if let Some(at) = &request.snapshot {
            let th = &sized.cases[s].thresholds.th;
            for i in 1..n {
                current_a[i] = current_a[i].max(at.i_pu[i] * i_base_a);
                overloaded[i] |= at.i_pu[i] > th[i];
            }
        }
    }
    let carries = |i: usize| (current_a[i] * 100.0 / pct).ceil();
    let mut needed: BTreeMap<usize, f64> = (1..n)
        .filter(|&i| overloaded[i])
        .map(|i| (i, carries(i).max(rating_a(i))))
        .collect();
    let mut trial = sized.clone();
    let mut load_flows = 0;
    let mut assessed;
    let mut round = 0;
    loop {
        for case in &mut trial.cases {
            for (&i, &rating) in &needed {
                let limit_pu = rating / i_base_a * pct / 100.0;
                let base_i_pu = case.snapshot.i_pu[i];
                case.thresholds.set_thermal_limit_pu(i, limit_pu, base_i_pu);
            }
        }
        assessed = assess(&trial, bus, p_kw, method);
        load_flows += assessed.load_flows;
        round += 1;
        if assessed.outcome.verdict == Verdict::Accept || round == REINFORCEMENT_ROUNDS {
            break;
        }
        match (assessed.outcome.limit, assessed.element) {
            (Limit::Thermal, Element::Branch(b)) => {
                // Binds between two steps below the request, or on a branch that did not
                // overload at the request itself: 5 % more.
                let i = b.index() + 1;
                let now = needed.get(&i).copied().unwrap_or(rating_a(i));
                needed.insert(i, (now * 1.05).ceil().max(carries(i)));
            }
            _ => break,
        }
    }
    let branches = needed
        .iter()
        .map(|(&i, &needed_rating_a)| {
            let branch = &feeder.branches()[i - 1];
            BranchUpgrade {
                branch: branch.id.clone(),
                from: feeder.node(branch.from).id.clone(),
                to: feeder.node(branch.to).id.clone(),
                rating_a: branch.rating_a,
                needed_rating_a,
                current_at_request_a: current_a[i],
            }
        })
        .collect();
    (
        Reinforcement {
            branches,
            outcome: assessed.outcome,
        },
        load_flows,
    )
}

/// The smallest change of the head voltage, in `direction` (−1 lower, +1 higher), that frees
/// the request: a first guess from how far the worst node is beyond its limit at the request,
/// doubled until the request passes, then bisected.
fn head_voltage(
    sized: &FeederStudy<'_>,
    bus: BusIdx,
    p_kw: f64,
    requests: &[&SolvedRequest],
    direction: f64,
    method: SearchMethod,
) -> (HeadVoltageWhatIf, u32) {
    let v0 = sized.network.head_v_pu();
    let mut excess_pu = 0.0f64;
    for (s, request) in requests.iter().enumerate() {
        if let Some(at) = &request.snapshot {
            let t = &sized.cases[s].thresholds;
            for (i, &v) in at.v_pu.iter().enumerate() {
                let beyond = if direction < 0.0 {
                    v - t.ov[i]
                } else {
                    t.uv[i] - v
                };
                excess_pu = excess_pu.max(beyond);
            }
        }
    }
    let max_steps = (HEAD_VOLTAGE_MAX_CHANGE_PU / HEAD_VOLTAGE_STEP_PU).round() as u32;
    let setting = |steps: u32| round6(v0 + direction * f64::from(steps) * HEAD_VOLTAGE_STEP_PU);
    let mut load_flows = 0;
    let mut evaluate = |steps: u32| {
        let trial = sized.with_head_voltage(setting(steps));
        let assessed = assess(&trial, bus, p_kw, method);
        load_flows += assessed.load_flows + trial.cases.len() as u32;
        (trial, assessed)
    };
    let passes = |a: &Assessed| a.outcome.verdict == Verdict::Accept;

    // `lo` is known to refuse (today's setting, 0), `hi` to pass.
    let mut lo = 0u32;
    let mut steps = ((excess_pu / HEAD_VOLTAGE_STEP_PU).ceil() as u32).clamp(1, max_steps);
    let mut hi = None;
    let mut last = None;
    loop {
        let tried = evaluate(steps);
        if passes(&tried.1) {
            hi = Some((steps, tried));
            break;
        }
        lo = steps;
        last = Some((steps, tried));
        if steps == max_steps {
            break;
        }
        steps = (steps * 2).min(max_steps);
    }
    if let Some((h, _)) = &hi {
        // The first guess is usually right or one step out: try just below before bisecting.
        let mut below = (*h - 1).max(lo);
        while below > lo {
            let tried = evaluate(below);
            if passes(&tried.1) {
                hi = Some((below, tried));
            } else {
                lo = below;
            }
            let h = hi.as_ref().map_or(lo, |(h, _)| *h);
            below = lo + (h - lo) / 2;
        }
        last = hi;
    }
    let (steps, (trial, assessed)) = last.expect("at least one setting was tried");
    let (mut base_v_min_pu, mut base_v_max_pu) = (f64::INFINITY, f64::NEG_INFINITY);
    let mut new_baseline_violations = 0;
    for (s, case) in trial.cases.iter().enumerate() {
        if case.base_result.is_ok() {
            for &v in &case.snapshot.v_pu {
                base_v_min_pu = base_v_min_pu.min(v);
                base_v_max_pu = base_v_max_pu.max(v);
            }
        }
        let today: Vec<_> = sized
            .baseline_violations(s)
            .iter()
            .map(|v| (v.limit, v.element))
            .collect();
        new_baseline_violations += trial
            .baseline_violations(s)
            .iter()
            .filter(|v| !today.contains(&(v.limit, v.element)))
            .count();
    }
    (
        HeadVoltageWhatIf {
            head_voltage_pu: v0,
            new_head_voltage_pu: setting(steps),
            change_pct: round6(direction * f64::from(steps) * HEAD_VOLTAGE_STEP_PU * 100.0),
            outcome: assessed.outcome,
            base_v_min_pu,
            base_v_max_pu,
            new_baseline_violations,
        },
        load_flows,
    )
}

/// Rounds to 6 decimals, so that settings built from steps read as written (0.985, not
/// 0.9850000000000001).
fn round6(x: f64) -> f64 {
    (x * 1e6).round() / 1e6
}
