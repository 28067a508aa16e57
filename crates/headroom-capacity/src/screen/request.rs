//! One load flow at the requested export: what the network looks like with the plant, and
//! which criteria it breaks.

use headroom_flow::{FlowState, Injection, SolveSettings, solve};
use headroom_model::BusIdx;

use crate::criteria::{ALL, Element, Limit, Snapshot};
use crate::prepare::FeederStudy;

/// Tolerance of the second solve that settles a verdict lying within a hair of a threshold,
/// as the capacity searches do, pu.
const TIGHT_TOL_PU: f64 = 1e-12;

/// The solved injection of one request in one scenario.
#[derive(Debug, Clone)]
pub(crate) struct SolvedRequest {
    /// What the criteria see; `None` when the base case or this load flow did not converge.
    pub snapshot: Option<Snapshot>,
    /// Criteria violated (bits of [`crate::criteria`]); 0 when not converged.
    pub mask: u8,
    /// Load flows solved.
    pub load_flows: u32,
}

/// Solves scenario `s` of `study` with `p_kw` of new generation at `bus`, reactive power
/// `p_kw · q_per_p`. Starts from the base case plus the linear voltage change of the injection
/// and, like the searches, settles a near-threshold verdict on a tighter solve.
pub(crate) fn solve_request(
    study: &FeederStudy<'_>,
    s: usize,
    bus: BusIdx,
    p_kw: f64,
    q_per_p: f64,
) -> SolvedRequest {
    let case = &study.cases[s];
    if case.base_result.is_err() {
        return SolvedRequest {
            snapshot: None,
            mask: 0,
            load_flows: 0,
        };
    }
    let network = &study.network;
    let p_pu = network.kw_to_pu(p_kw);
    let injection = [Injection {
        bus,
        p_pu,
        q_pu: p_pu * q_per_p,
    }];
    let mut state = case.base.clone();
    warm_start(
        study,
        s,
        bus,
        injection[0].p_pu,
        injection[0].q_pu,
        &mut state,
    );
    let settings = &study.solve_settings;
    let mut load_flows = 1;
    match solve(network, &case.demand, &injection, &mut state, settings) {
        Ok(_) => {
            let (mut mask, margin_pu) = case.thresholds.violated(network, &state);
            if margin_pu < crate::criteria::NEAR_PU {
                let tight = SolveSettings {
                    tol_pu: TIGHT_TOL_PU,
                    max_iterations: settings.max_iterations,
                };
                load_flows += 1;
                if solve(network, &case.demand, &injection, &mut state, &tight).is_ok() {
                    mask = case.thresholds.violated(network, &state).0;
                }
            }
            SolvedRequest {
                snapshot: Some(Snapshot::capture(network, &state)),
                mask,
                load_flows,
            }
        }
        Err(_) => SolvedRequest {
            snapshot: None,
            mask: 0,
            load_flows,
        },
    }
}

/// Base case plus the voltage change of the injected current through the impedance each node
/// shares with the plant's path to the head (superposition).
fn warm_start(
    study: &FeederStudy<'_>,
    s: usize,
    bus: BusIdx,
    p_pu: f64,
    q_pu: f64,
    state: &mut FlowState,
) {
    let base = &study.cases[s].base;
    let n = study.feeder.n_nodes();
    let mut on_path = vec![false; n];
    for node in study.feeder.path_to_head(bus) {
        on_path[node.index()] = true;
    }
    // The deepest node of the plant's path that each node's own path goes through; parents
    // come before their children, so theirs is known.
    let parents = study.network.parents();
    let mut shared = vec![0usize; n];
    for i in 1..n {
        shared[i] = if on_path[i] {
            i
        } else {
            shared[parents[i] as usize]
        };
    }
    let k = bus.index();
    let (vr, vi) = (base.v_re()[k], base.v_im()[k]);
    let inv = 1.0 / (vr * vr + vi * vi);
    let (ir, ii) = ((p_pu * vr + q_pu * vi) * inv, (p_pu * vi - q_pu * vr) * inv);
    state.set_voltages(|i| {
        let (r, x) = (study.path_r_pu[shared[i]], study.path_x_pu[shared[i]]);
        (
            base.v_re()[i] + r * ir - x * ii,
            base.v_im()[i] + r * ii + x * ir,
        )
    });
}

/// One criterion beyond its threshold at the requested export: how many elements, and the
/// worst one in engineering units.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Breach {
    pub limit: Limit,
    pub count: usize,
    pub worst: Element,
    pub value: f64,
    pub threshold: f64,
}

/// Every criterion beyond its threshold in `at` (same thresholds as the searches: "beyond the
/// limit and worse than at P = 0"), in the order of [`Limit::ALL`].
pub(crate) fn breaches(study: &FeederStudy<'_>, s: usize, at: &Snapshot) -> Vec<Breach> {
    let case = &study.cases[s];
    let i_base_a = study.network.i_base_a();
    let mut found: Vec<(Breach, f64)> = Vec::new();
    case.thresholds
        .for_each_quantity(ALL, &case.snapshot, at, |limit, element, q, t| {
            if q <= t {
                return;
            }
            // Back from the "upper" form to engineering units.
            let (value, threshold) = match limit {
                Limit::Undervoltage => (-q, -t),
                Limit::Thermal => (q * i_base_a, t * i_base_a),
                Limit::ReverseFlow => (study.network.pu_to_kw(-q), study.network.pu_to_kw(-t)),
                _ => (q, t),
            };
            let excess = q - t;
            match found.iter_mut().find(|(b, _)| b.limit == limit) {
                Some((b, worst_excess)) => {
                    b.count += 1;
                    if excess > *worst_excess {
                        *worst_excess = excess;
                        b.worst = element;
                        b.value = value;
                        b.threshold = threshold;
                    }
                }
                None => found.push((
                    Breach {
                        limit,
                        count: 1,
                        worst: element,
                        value,
                        threshold,
                    },
                    excess,
                )),
            }
        });
    let mut found: Vec<Breach> = found.into_iter().map(|(b, _)| b).collect();
    found.sort_by_key(|b| b.limit);
    found
}

/// Unit of a breach's value and threshold.
pub(crate) fn unit(limit: Limit) -> &'static str {
    match limit {
        Limit::Overvoltage | Limit::Undervoltage | Limit::VoltageChange => "pu",
        Limit::Thermal => "A",
        Limit::ReverseFlow => "kW",
        Limit::NotConverged | Limit::SearchMax => "",
    }
}
