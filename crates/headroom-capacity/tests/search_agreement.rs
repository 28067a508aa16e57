//! The fast search, the stepped reference and a brute-force 1 kW scan agree on every node of
//! random synthetic feeders, and an independent check of the criteria (written here from the
//! definition in the feeder format, with the load flow alone) confirms each answer: no
//! violation at the capacity, a violation one resolution above it.

use headroom_capacity::{
    CapacityOptions, FeederStudy, Limit, NeighbourError, NodeCapacity, SearchMethod,
};
use headroom_flow::{Demand, FlowState, Injection, Network, Solution, SolveSettings, solve};
use headroom_model::{BusIdx, Feeder, ReverseFlow, Study};
use headroom_synth::{SynthSettings, generate};
use proptest::prelude::*;
use proptest::test_runner::TestCaseError;

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
    // Each scenario's nodes in turn, as the map answers them: each fast search starts from
    // the error its predecessor measured.
    (0..prepared.cases.len())
        .flat_map(|s| {
            let mut neighbour = NeighbourError::default();
            (1..prepared.feeder.n_nodes())
                .map(|i| {
                    (
                        s,
                        prepared.node_capacity_after(
                            s,
                            BusIdx::new(i as u32),
                            &options,
                            &mut neighbour,
                        ),
                    )
                })
                .collect::<Vec<_>>()
        })
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

/// Voltage and thermal limits loosened to these, no voltage-change limit, 100 kW steps: on weak
/// feeders the nose of the P–V curve then matters (the voltage rise peaks and turns back,
/// solves converge slowly or not at all).
fn loose_limits(v_min_pu: f64, v_max_pu: f64, thermal_pct: f64) -> Study {
    let mut study = Study::default();
    study.limits.v_min_pu = v_min_pu;
    study.limits.v_max_pu = v_max_pu;
    study.limits.thermal_pct = thermal_pct;
    study.limits.voltage_change_pct = 0.0;
    study.search.step_kw = 100.0;
    study
}

/// [`loose_limits`] at 0.5–1.5 pu and 2,000 %; odd variants also inject reactive power and
/// forbid reverse flow.
fn loosened_study(variant: u8) -> Study {
    let mut study = loose_limits(0.5, 1.5, 2000.0);
    if variant % 2 == 1 {
        study.generation.power_factor = 0.95;
        study.generation.absorbing = false;
        study.limits.reverse_flow = ReverseFlow::Forbid;
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
        searches_agree(&prepared).map_err(TestCaseError::fail)?;
    }

    #[test]
    fn fast_equals_stepped_next_to_the_nose(
        n_nodes in 3usize..60,
        seed in 0u64..1_000_000,
        kv_index in 0usize..2,
        variant in 0u8..2,
    ) {
        let nominal_kv = [3.3, 6.6][kv_index];
        let feeder = synthetic(n_nodes, seed, nominal_kv);
        let prepared = FeederStudy::prepare(&feeder, &loosened_study(variant));
        searches_agree(&prepared).map_err(TestCaseError::fail)?;
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

/// The first feeder of a synthetic 3.3 kV region of 200-node feeders: long, weak overhead
/// lines whose P–V curves reach their nose within the default `max_kw`.
fn weak_region_feeder(seed: u64) -> Feeder {
    let mut settings = SynthSettings::new(200, seed);
    settings.nominal_kv = 3.3;
    let region = headroom_synth::generate_region_with(1, &settings);
    region[0].1.to_feeder(&region[0].0).unwrap()
}

/// Whether the two searches give the same answers on every node and scenario; if not, how
/// many differ and the first of them.
fn searches_agree(prepared: &FeederStudy<'_>) -> Result<(), String> {
    let fast = answers(prepared, SearchMethod::Fast);
    let stepped = answers(prepared, SearchMethod::Stepped);
    let differing: Vec<_> = fast
        .iter()
        .zip(&stepped)
        .filter(|(f, s)| !same_answer(f, s))
        .collect();
    match differing.first() {
        None => Ok(()),
        Some((f, s)) => Err(format!(
            "{} answers differ, e.g. fast {f:?}\nstepped {s:?}",
            differing.len()
        )),
    }
}

/// A large current a hair over its rating: at node 4 of this 22 kV feeder (min-load, 0.95 power
/// factor absorbing) the branch into the node carries 15.24 pu at 14,738 kW, 1.4e-9 pu over its
/// rating, and 1.0e-3 pu under it at 14,737 kW. A solve to the study's tolerance (1e-9 pu of
/// voltage) leaves currents of 15 pu up to about 15 times that in error, so the 1e-8 pu margin
/// that settled a verdict at that tolerance did not: started from the error its neighbour
/// measured, the fast search took 14,738 kW for a pass. A verdict now also waits until every
/// margin exceeds the error bounds of the solution's currents and voltages.
#[test]
fn fast_equals_stepped_where_a_large_current_ends_a_hair_over_its_rating() {
    let feeder = synthetic(54, 208_917, 22.0);
    let prepared = FeederStudy::prepare(&feeder, &study_variant(1));
    if let Err(differing) = searches_agree(&prepared) {
        panic!("{differing}");
    }
    let stepped = prepared.node_capacity(
        0,
        BusIdx::new(4),
        &CapacityOptions {
            method: SearchMethod::Stepped,
            criteria_detail: false,
        },
    );
    assert_eq!(
        (stepped.hosting_kw, stepped.limit),
        (14_737.0, Limit::Thermal)
    );
}

/// Next to the nose of the P–V curve (voltage collapse) the sweep converges slowly, and whether
/// it converged within the sweep cap used to depend on where it started: on this feeder, with
/// limits loosened until the nose matters, the two searches disagreed on the thermal-only
/// capacity of eight answers (8,386 kW fast against 8,365 kW stepped at node n115, min-load),
/// because the stepped search's solve at 8,366 kW ran out of sweeps while the solution exists.
/// A slow solve now goes on past the cap while it converges, so no search sees a solution fail
/// for want of sweeps; and an answer this close to the nose is left to the stepped search (see
/// the next test).
#[test]
fn fast_equals_stepped_next_to_voltage_collapse() {
    let feeder = weak_region_feeder(5);
    let prepared = FeederStudy::prepare(&feeder, &loose_limits(0.90, 1.10, 400.0));
    if let Err(differing) = searches_agree(&prepared) {
        panic!("{differing}");
    }
    // The feeder does reach the nose within the search: some thermal-only capacity is set by
    // the overload just before it (the case this test is about), well below max_kw.
    let thermal: Vec<f64> = answers(&prepared, SearchMethod::Fast)
        .iter()
        .filter_map(|a| a.hosting_kw_thermal)
        .collect();
    assert!(
        thermal.iter().any(|&kw| kw < 9_000.0),
        "no thermal-only capacity below 9 MW: the feeder no longer reaches the nose"
    );
}

/// Near the nose the voltage rise peaks and turns back, so a node can be over its limit for a
/// stretch of injections and within it again above: with a 1.5 pu limit, node n130 of this
/// feeder (peak load) is over it from 7,396 kW to about 9,880 kW and has no solution from
/// about 10,063 kW. The fast search certified a pass at 10,062 kW and a failure above it; the
/// definition asks every step below to pass too, and the stepped search found 7,395 kW. Answers
/// that reach halfway to the nose of the node's two-bus model are now left to the stepped
/// search.
#[test]
fn fast_equals_stepped_where_the_voltage_rise_turns_back() {
    let feeder = weak_region_feeder(7);
    let prepared = FeederStudy::prepare(&feeder, &loose_limits(0.5, 1.5, 2000.0));
    let n130 = feeder.node_by_id("n130").unwrap();
    let at_n130 = assert_agree_at(&prepared, &[n130]);
    assert!(
        at_n130.iter().any(|answer| answer.stepped_near_nose),
        "the fast search no longer hands n130 to the stepped search: {at_n130:?}"
    );
}

/// Asserts that the two searches agree at `named` and at every 25th node (the stepped search is
/// slow next to the nose: every solve is), in every scenario; returns the answers at `named`.
fn assert_agree_at(prepared: &FeederStudy<'_>, named: &[BusIdx]) -> Vec<NodeCapacity> {
    let options = |method| CapacityOptions {
        method,
        criteria_detail: true,
    };
    let nodes = (1..prepared.feeder.n_nodes())
        .step_by(25)
        .map(|i| BusIdx::new(i as u32))
        .chain(named.iter().copied());
    let mut at_named = Vec::new();
    for bus in nodes {
        for s in 0..prepared.cases.len() {
            let fast = prepared.node_capacity(s, bus, &options(SearchMethod::Fast));
            let stepped = prepared.node_capacity(s, bus, &options(SearchMethod::Stepped));
            assert!(
                same_answer(&fast, &stepped),
                "fast {fast:?}\nstepped {stepped:?}"
            );
            if named.contains(&bus) {
                at_named.push(fast);
            }
        }
    }
    at_named
}

/// A large injection on a weak feeder (20 MW at 3.3 kV, limits loosened until only reverse
/// flow and the voltage limits bind before it) can lie so far from the base case that a sweep
/// started from the base case's estimate runs away although a solution exists, which a sweep
/// started from a nearby injection finds. A solution found once is kept (it is not solved again
/// from the base case's start), and an answer certified by such a failure is left to the
/// stepped search: at nodes n98, n99 and n125 the thermal-only capacity is 20 MW, and a fast
/// search that took the failure at face value said 19,995 kW.
#[test]
fn fast_equals_stepped_where_the_base_case_start_runs_away() {
    let feeder = weak_region_feeder(11);
    let mut study = loose_limits(0.8, 1.2, 800.0);
    study.limits.reverse_flow = ReverseFlow::Forbid;
    study.generation.power_factor = 0.95;
    study.generation.absorbing = false;
    let prepared = FeederStudy::prepare(&feeder, &study);
    let named = ["n98", "n99", "n125"].map(|id| feeder.node_by_id(id).unwrap());
    let at_max = assert_agree_at(&prepared, &named)
        .iter()
        .filter(|answer| answer.hosting_kw_thermal == Some(20_000.0))
        .count();
    assert!(
        at_max >= 3,
        "only {at_max} named answers reach 20 MW thermal-only"
    );
}
