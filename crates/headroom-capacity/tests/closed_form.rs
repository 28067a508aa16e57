//! Capacities on a single line from a stiff source, against closed forms.

use headroom_capacity::{CapacityOptions, Element, FeederStudy, Limit, SearchMethod};
use headroom_model::{BranchRecord, BusIdx, Feeder, FeederHeader, NodeRecord, Scenario, Study};

fn line(kv: f64, r_ohm: f64, x_ohm: f64, rating_a: f64) -> Feeder {
    Feeder::from_records(
        "line",
        FeederHeader::new("line", kv, "src"),
        vec![NodeRecord::new("src"), NodeRecord::new("far")],
        vec![BranchRecord::new("b", "src", "far", r_ohm, x_ohm, rating_a)],
    )
    .unwrap()
}

fn study_no_load() -> Study {
    let mut study = Study {
        scenarios: vec![Scenario::new("empty", 0.0, 0.0)],
        ..Study::default()
    };
    study.limits.voltage_change_pct = 0.0;
    study
}

/// Generation P (pu) that lifts the receiving end of a line r + jx (pu) from a stiff source at
/// `vs` to exactly `vr`, at unity power factor: the two-bus quartic
/// V_r⁴ − (V_s² + 2RP)·V_r² + P²(R² + X²) = 0 solved for P, smaller root (the normal operating
/// side of the curve). Source: Baran & Wu (1989) DistFlow; trade-facts.md §5.
fn exact_p_at_voltage(vs: f64, vr: f64, r: f64, x: f64) -> f64 {
    let a = r * r + x * x;
    let b = -2.0 * r * vr * vr;
    let c = vr.powi(4) - vs * vs * vr * vr;
    (-b - (b * b - 4.0 * a * c).sqrt()) / (2.0 * a)
}

#[test]
fn voltage_limited_capacity_is_the_two_bus_solution_at_v_max() {
    for &(kv, r_ohm, x_ohm) in &[(11.0, 1.6, 1.75), (22.0, 6.0, 7.0), (33.0, 3.0, 9.0)] {
        let feeder = line(kv, r_ohm, x_ohm, 2000.0);
        let mut study = study_no_load();
        study.search.max_kw = 100_000.0;
        let z_base = kv * kv;
        let p_kw = 1000.0 * exact_p_at_voltage(1.0, 1.05, r_ohm / z_base, x_ohm / z_base);
        let prepared = FeederStudy::prepare(&feeder, &study);
        for method in [SearchMethod::Fast, SearchMethod::Stepped] {
            let options = CapacityOptions {
                method,
                criteria_detail: true,
            };
            let answer = prepared.node_capacity(0, BusIdx::new(1), &options);
            assert_eq!(
                answer.hosting_kw,
                p_kw.floor(),
                "{kv} kV {method:?}: exact {p_kw}"
            );
            assert_eq!(answer.limit, Limit::Overvoltage);
            assert_eq!(answer.element, Element::Node(BusIdx::new(1)));
            assert_eq!(answer.hosting_kw_voltage, Some(answer.hosting_kw));
        }
    }
}

#[test]
fn thermal_capacity_is_root3_v_i() {
    // Three-phase apparent power S = √3·V_LL·I (trade-facts.md §4): on a short 11 kV cable
    // rated 400 A, the generation that drives 400 A is ≈ √3 · 11 kV · 400 A = 7621 kW (a little
    // more, since the far end sits slightly above nominal).
    let feeder = line(11.0, 0.01, 0.005, 400.0);
    let study = study_no_load();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let answer = prepared.node_capacity(0, BusIdx::new(1), &CapacityOptions::default());
    let expected_kw = 3f64.sqrt() * 11.0 * 400.0;
    assert_eq!(answer.limit, Limit::Thermal);
    assert_eq!(
        answer.element,
        Element::Branch(headroom_model::BranchIdx::new(0))
    );
    assert!(
        (answer.hosting_kw - expected_kw).abs() / expected_kw < 0.002,
        "{} vs {expected_kw}",
        answer.hosting_kw
    );
    assert_eq!(answer.hosting_kw_thermal, Some(answer.hosting_kw));
    assert!(answer.hosting_kw_voltage.unwrap() > answer.hosting_kw);
}

#[test]
fn voltage_change_binds_before_overvoltage_when_tight() {
    // 1 % change limit with the head at 0.97 pu: the plant may raise the far end by 1 %.
    let feeder = line(11.0, 1.6, 1.75, 2000.0);
    let mut study = study_no_load();
    study.limits.voltage_change_pct = 1.0;
    let prepared = FeederStudy::prepare(&feeder, &study);
    let answer = prepared.node_capacity(0, BusIdx::new(1), &CapacityOptions::default());
    assert_eq!(answer.limit, Limit::VoltageChange);
    let z_base = 121.0;
    let p_kw = 1000.0 * exact_p_at_voltage(1.0, 1.01, 1.6 / z_base, 1.75 / z_base);
    assert_eq!(answer.hosting_kw, p_kw.floor());
    assert!(answer.hosting_kw_voltage.unwrap() > answer.hosting_kw);
    assert_eq!(answer.hosting_kw_change, Some(answer.hosting_kw));
}

#[test]
fn reverse_flow_binds_at_the_feeder_load() {
    // With 300 kW of load at the far end and reverse flow forbidden, generation there may cover
    // the load and its own losses but not export: the capacity is a little above 300 kW.
    let feeder = Feeder::from_records(
        "line",
        FeederHeader::new("line", 11.0, "src"),
        vec![
            NodeRecord::new("src"),
            NodeRecord::new("far").with_load(300.0, 100.0),
        ],
        vec![BranchRecord::new("b", "src", "far", 0.5, 0.4, 400.0)],
    )
    .unwrap();
    let mut study = Study {
        scenarios: vec![Scenario::new("peak", 1.0, 0.0)],
        ..Study::default()
    };
    study.limits.reverse_flow = headroom_model::ReverseFlow::Forbid;
    let prepared = FeederStudy::prepare(&feeder, &study);
    let answer = prepared.node_capacity(0, BusIdx::new(1), &CapacityOptions::default());
    assert_eq!(answer.limit, Limit::ReverseFlow);
    assert_eq!(answer.element, Element::Head);
    assert!(
        answer.hosting_kw >= 300.0 && answer.hosting_kw < 302.0,
        "{}",
        answer.hosting_kw
    );
}

#[test]
fn search_max_when_nothing_binds() {
    let feeder = line(33.0, 0.01, 0.01, 2000.0);
    let mut study = study_no_load();
    study.search.max_kw = 5000.0;
    let prepared = FeederStudy::prepare(&feeder, &study);
    for method in [SearchMethod::Fast, SearchMethod::Stepped] {
        let options = CapacityOptions {
            method,
            criteria_detail: true,
        };
        let answer = prepared.node_capacity(0, BusIdx::new(1), &options);
        assert_eq!(answer.hosting_kw, 5000.0);
        assert_eq!(answer.limit, Limit::SearchMax);
        assert_eq!(answer.element, Element::None);
    }
}

#[test]
fn baseline_overvoltage_not_worsened_is_not_charged_but_deepening_is() {
    // The head held at 1.06 pu is above the 1.05 limit already. Any generation raises the far
    // end above that, so it deepens the violation: capacity 0 at the far node.
    let mut feeder = line(11.0, 1.6, 1.75, 2000.0);
    let mut header = feeder.header().clone();
    header.head_voltage_pu = 1.06;
    feeder = Feeder::from_records(
        "line",
        header,
        vec![NodeRecord::new("src"), NodeRecord::new("far")],
        vec![BranchRecord::new("b", "src", "far", 1.6, 1.75, 2000.0)],
    )
    .unwrap();
    let study = study_no_load();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let baseline = prepared.baseline_violations(0);
    assert_eq!(baseline.len(), 2, "both nodes sit at 1.06 pu: {baseline:?}");
    let answer = prepared.node_capacity(0, BusIdx::new(1), &CapacityOptions::default());
    assert_eq!(answer.hosting_kw, 0.0);
    assert_eq!(answer.limit, Limit::Overvoltage);
}
