//! The fast search, the stepped reference and a brute-force 1 kW scan agree on every node of
//! random synthetic feeders, and an independent check of the criteria (written here from the
//! definition in the feeder format, with the load flow alone) confirms each answer: no
//! violation at the capacity, a violation one resolution above it.

use headroom_capacity::{CapacityOptions, FeederStudy, Limit, NodeCapacity, SearchMethod};
use headroom_flow::{Demand, FlowState, Injection, Network, Solution, SolveSettings, solve};
use headroom_model::{BusIdx, Feeder, ReverseFlow, Study};
use headroom_synth::{SynthSettings, generate};
use proptest::prelude::*;

fn synthetic(n_nodes: usize, seed: u64, nominal_kv: f64) -> Feeder {
    let mut settings = SynthSettings::new(n_nodes, seed);
    settings.nominal_kv = nominal_kv;
    generate(&settings).to_feeder("synthetic").unwrap()
}

/// Every (scenario, node) answer, scenario-major.
fn answers(prepared: &FeederStudy<'_>, method: SearchMethod) -> Vec<NodeCapacity> {
    scenario_answers(prepared, method)
        .into_iter()
        .map(|(_, answer)| answer)
        .collect()
}

fn scenario_answers(
    prepared: &FeederStudy<'_>,
    method: SearchMethod,
) -> Vec<(usize, NodeCapacity)> {
    let options = CapacityOptions {
        method,
        criteria_detail: true,
    };
    (0..prepared.cases.len())
        .flat_map(|s| (1..prepared.feeder.n_nodes()).map(move |i| (s, BusIdx::new(i as u32))))
        .map(|(s, bus)| (s, prepared.node_capacity(s, bus, &options)))
        .collect()
}

fn same_answer(a: &NodeCapacity, b: &NodeCapacity) -> bool {
    a.hosting_kw == b.hosting_kw
        && a.limit == b.limit
        && a.element == b.element
        && a.hosting_kw_voltage == b.hosting_kw_voltage
        && a.hosting_kw_thermal == b.hosting_kw_thermal
        && a.hosting_kw_change == b.hosting_kw_change
        && a.hosting_kw_reverse == b.hosting_kw_reverse
}

/// The criteria of the definition, checked from a fresh flat-start load flow: which criterion
/// (if any) does an injection of `p_kw` at `bus` violate in scenario `s`?
fn independent_violation(
    feeder: &Feeder,
    study: &Study,
    s: usize,
    bus: BusIdx,
    p_kw: f64,
) -> Option<&'static str> {
    let scenario = &study.scenarios[s];
    let network = Network::new(feeder);
    let demand = Demand::from_feeder(feeder, &network, scenario.load_scale, scenario.gen_scale);
    let settings = SolveSettings {
        tol_pu: 1e-12,
        max_iterations: 500,
    };
    let mut base = FlowState::flat(&network);
    solve(&network, &demand, &[], &mut base, &settings).ok()?;
    let p_pu = p_kw / 1000.0;
    let injection = Injection {
        bus,
        p_pu,
        q_pu: p_pu * study.generation.q_per_p(),
    };
    let mut with = FlowState::flat(&network);
    if solve(&network, &demand, &[injection], &mut with, &settings).is_err() {
        return Some("not_converged");
    }
    let (b, w) = (
        Solution::new(&network, &base),
        Solution::new(&network, &with),
    );
    let limits = &study.limits;
    // Numerical allowance: "worse than at P = 0" by more than a rounding of the load flow.
    let eps = 1e-7;
    for i in 0..feeder.n_nodes() {
        let (v0, v) = (b.v_pu(i), w.v_pu(i));
        if v > limits.v_max_pu + eps && v > v0 + eps {
            return Some("overvoltage");
        }
        if v < limits.v_min_pu - eps && v < v0 - eps {
            return Some("undervoltage");
        }
        if limits.voltage_change_pct > 0.0
            && (v - v0).abs() > limits.voltage_change_pct / 100.0 + eps
        {
            return Some("voltage_change");
        }
    }
    for branch in feeder.branches() {
        let i0 = b.branch_flow(branch.to.index()).current_a;
        let i = w.branch_flow(branch.to.index()).current_a;
        let limit_a = branch.rating_a * limits.thermal_pct / 100.0;
        if i > limit_a * (1.0 + eps) && i > i0 * (1.0 + eps) {
            return Some("thermal");
        }
    }
    if limits.reverse_flow == ReverseFlow::Forbid {
        let (p0, p) = (b.head_power().0, w.head_power().0);
        if p < -eps && p < p0 - eps {
            return Some("reverse_flow");
        }
    }
    None
}

fn study_variant(variant: u8) -> Study {
    let mut study = Study::default();
    match variant % 4 {
        0 => {}
        1 => {
            study.generation.power_factor = 0.95;
            study.generation.absorbing = true;
        }
        2 => {
            study.limits.reverse_flow = ReverseFlow::Forbid;
            study.limits.voltage_change_pct = 0.0;
        }
        _ => {
            study.generation.power_factor = 0.9;
            study.generation.absorbing = false;
            study.limits.thermal_pct = 80.0;
            study.search.step_kw = 100.0;
            study.search.resolution_kw = 5.0;
        }
    }
    study
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 24, ..ProptestConfig::default() })]

    #[test]
    fn fast_equals_stepped_on_every_node(
        n_nodes in 3usize..60,
        seed in 0u64..1_000_000,
        kv_index in 0usize..3,
        variant in 0u8..4,
    ) {
        let nominal_kv = [6.6, 11.0, 22.0][kv_index];
        let feeder = synthetic(n_nodes, seed, nominal_kv);
        let study = study_variant(variant);
        let prepared = FeederStudy::prepare(&feeder, &study);
        let fast = answers(&prepared, SearchMethod::Fast);
        let stepped = answers(&prepared, SearchMethod::Stepped);
        for (f, s) in fast.iter().zip(&stepped) {
            prop_assert!(same_answer(f, s), "fast {f:?}\nstepped {s:?}");
        }
    }
}

#[test]
fn answers_hold_under_an_independent_check_of_the_criteria() {
    for (seed, variant) in [(11u64, 0u8), (12, 1), (13, 2), (14, 3)] {
        let feeder = synthetic(40, seed, 11.0);
        let study = study_variant(variant);
        let prepared = FeederStudy::prepare(&feeder, &study);
        let resolution_kw = study.search.resolution_kw;
        for (s, answer) in scenario_answers(&prepared, SearchMethod::Fast) {
            let at = independent_violation(&feeder, &study, s, answer.bus, answer.hosting_kw);
            assert_eq!(at, None, "violation at the capacity: {answer:?}");
            if answer.limit != Limit::SearchMax {
                let above = independent_violation(
                    &feeder,
                    &study,
                    s,
                    answer.bus,
                    answer.hosting_kw + resolution_kw,
                );
                assert_eq!(
                    above,
                    Some(answer.limit.as_str()),
                    "one resolution above the capacity: {answer:?}"
                );
            }
        }
    }
}

#[test]
fn fast_equals_a_brute_force_one_kw_scan_on_small_feeders() {
    let mut bound_below_max = 0;
    for seed in 0..6u64 {
        let feeder = synthetic(8, seed, 6.6);
        let mut study = Study::default();
        study.search.max_kw = 6000.0;
        let prepared = FeederStudy::prepare(&feeder, &study);
        let fast = answers(&prepared, SearchMethod::Fast);
        // Steps of 1 kW: the stepped search becomes a scan of every kW from 0.
        study.search.step_kw = 1.0;
        let scan = FeederStudy::prepare(&feeder, &study);
        let brute = answers(&scan, SearchMethod::Stepped);
        for (f, b) in fast.iter().zip(&brute) {
            assert!(same_answer(f, b), "fast {f:?}\nscan {b:?}");
        }
        bound_below_max += fast.iter().filter(|a| a.limit != Limit::SearchMax).count();
    }
    // The scan is only a check where limits bind inside the searched range.
    assert!(
        bound_below_max > 20,
        "{bound_below_max} answers bound below max_kw"
    );
}
