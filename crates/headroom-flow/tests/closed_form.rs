//! The sweep against the exact two-bus solution.
//!
//! Source: the two-bus (DistFlow) quartic for a line R + jX from a stiff source,
//! V_r⁴ − [V_s² − 2(R·P_L + X·Q_L)]·V_r² + (P_L² + Q_L²)(R² + X²) = 0 with P_L, Q_L the power
//! drawn at the receiving end (generation: P_L = −P_gen), as used by Baran & Wu (1989) and
//! standard textbooks (see ../shared/reference/trade-facts.md §5).

use headroom_flow::{
    Demand, FlowState, Injection, Network, Patience, Solution, SolveSettings, solve,
    solve_patiently,
};
use headroom_model::{BranchRecord, BusIdx, Feeder, FeederHeader, NodeRecord};

fn two_bus(kv: f64, r_ohm: f64, x_ohm: f64, load_kw: f64, load_kvar: f64, head_pu: f64) -> Feeder {
    let mut header = FeederHeader::new("two-bus", kv, "src");
    header.head_voltage_pu = head_pu;
    Feeder::from_records(
        "two-bus",
        header,
        vec![
            NodeRecord::new("src"),
            NodeRecord::new("end").with_load(load_kw, load_kvar),
        ],
        vec![BranchRecord::new("line", "src", "end", r_ohm, x_ohm, 400.0)],
    )
    .unwrap()
}

/// Receiving-end voltage magnitude (pu) from the quartic, for power drawn (p_pu, q_pu).
fn exact_v_pu(vs: f64, r: f64, x: f64, p: f64, q: f64) -> f64 {
    let b = vs * vs - 2.0 * (r * p + x * q);
    let c = (p * p + q * q) * (r * r + x * x);
    ((b + (b * b - 4.0 * c).sqrt()) / 2.0).sqrt()
}

fn solve_two_bus(feeder: &Feeder, extra: &[Injection]) -> (Network, FlowState) {
    let network = Network::new(feeder);
    let demand = Demand::from_feeder(feeder, &network, 1.0, 1.0);
    let mut state = FlowState::flat(&network);
    let settings = SolveSettings {
        tol_pu: 1e-12,
        max_iterations: 200,
    };
    solve(&network, &demand, extra, &mut state, &settings).unwrap();
    (network, state)
}

#[test]
fn load_drop_matches_quartic() {
    for &(kv, r, x, p_kw, q_kvar, vs) in &[
        (11.0, 1.6, 1.75, 3000.0, 1000.0, 1.0),
        (12.66, 0.5, 0.3, 1500.0, 900.0, 1.02),
        (33.0, 4.0, 8.0, 8000.0, -2000.0, 1.0),
    ] {
        let feeder = two_bus(kv, r, x, p_kw, q_kvar, vs);
        let (network, state) = solve_two_bus(&feeder, &[]);
        let z = network.z_base_ohm();
        let expected = exact_v_pu(vs, r / z, x / z, p_kw / 1000.0, q_kvar / 1000.0);
        let got = state.v_mag_pu(1);
        assert!(
            (got - expected).abs() < 1e-9,
            "{kv} kV: {got} vs {expected}"
        );
        assert!(got < vs, "a load lowers the voltage");
    }
}

#[test]
fn generation_rise_matches_quartic() {
    // The worked check of trade-facts.md §5: 11 kV, Z = 1.6 + j1.75 Ω, 4 MW at unity power
    // factor gives an exact rise of 4.89 % (V_r = 1.0489 pu).
    let feeder = two_bus(11.0, 1.6, 1.75, 0.0, 0.0, 1.0);
    let injection = Injection {
        bus: BusIdx::new(1),
        p_pu: 4.0,
        q_pu: 0.0,
    };
    let (network, state) = solve_two_bus(&feeder, &[injection]);
    let z = network.z_base_ohm();
    let expected = exact_v_pu(1.0, 1.6 / z, 1.75 / z, -4.0, 0.0);
    assert!((state.v_mag_pu(1) - expected).abs() < 1e-9);
    assert!(
        (state.v_mag_pu(1) - 1.0489).abs() < 5e-5,
        "published 1.0489 pu"
    );

    // 0.95 absorbing: exact rise 3.02 %; 0.90 absorbing: 2.10 % (same source).
    for &(pf, rise_pct) in &[(0.95f64, 3.02), (0.90f64, 2.10)] {
        let q = -4.0 * (1.0 - pf * pf).sqrt() / pf;
        let injection = Injection {
            bus: BusIdx::new(1),
            p_pu: 4.0,
            q_pu: q,
        };
        let (_, state) = solve_two_bus(&feeder, &[injection]);
        let expected = exact_v_pu(1.0, 1.6 / z, 1.75 / z, -4.0, -q);
        assert!((state.v_mag_pu(1) - expected).abs() < 1e-9);
        assert!(((state.v_mag_pu(1) - 1.0) * 100.0 - rise_pct).abs() < 0.006);
    }
}

#[test]
fn existing_generation_in_demand_equals_an_injection() {
    let feeder = two_bus(11.0, 1.6, 1.75, 0.0, 0.0, 1.0);
    let with_injection = solve_two_bus(
        &feeder,
        &[Injection {
            bus: BusIdx::new(1),
            p_pu: 2.0,
            q_pu: 0.5,
        }],
    )
    .1;
    let mut header = FeederHeader::new("two-bus", 11.0, "src");
    header.head_voltage_pu = 1.0;
    let with_gen = Feeder::from_records(
        "two-bus",
        header,
        vec![
            NodeRecord::new("src"),
            NodeRecord::new("end").with_gen(2000.0, 500.0),
        ],
        vec![BranchRecord::new("line", "src", "end", 1.6, 1.75, 400.0)],
    )
    .unwrap();
    let via_demand = solve_two_bus(&with_gen, &[]).1;
    assert!((with_injection.v_mag_pu(1) - via_demand.v_mag_pu(1)).abs() < 1e-12);
}

#[test]
fn head_power_balances_load_and_losses() {
    let feeder = two_bus(11.0, 1.6, 1.75, 3000.0, 1000.0, 1.0);
    let (network, state) = solve_two_bus(&feeder, &[]);
    let solution = Solution::new(&network, &state);
    let (p_head, q_head) = solution.head_power();
    let (loss_kw, loss_kvar) = solution.losses();
    assert!((p_head - 3000.0 - loss_kw).abs() < 1e-6);
    assert!((q_head - 1000.0 - loss_kvar).abs() < 1e-6);
    // Current from the sending-end power: I = |S| / (√3 · V_LL).
    let flow = solution.branch_flow(1);
    let s_kva = p_head.hypot(q_head);
    assert!((flow.current_a - s_kva / (3f64.sqrt() * 11.0)).abs() < 1e-6);
}

#[test]
fn collapse_is_reported_not_panicked() {
    // 20 MW through 3 Ω at 11 kV is far beyond the nose of the PV curve: no solution exists.
    let feeder = two_bus(11.0, 3.0, 3.0, 20000.0, 5000.0, 1.0);
    let network = Network::new(&feeder);
    let demand = Demand::from_feeder(&feeder, &network, 1.0, 1.0);
    let mut state = FlowState::flat(&network);
    let err = solve(
        &network,
        &demand,
        &[],
        &mut state,
        &SolveSettings::default(),
    )
    .unwrap_err();
    assert!(err.iterations >= 1);
}

/// A load just short of the nose of the P–V curve: 24.9 MW through 1.21 Ω (0.01 pu) at
/// 11 kV, so r·p = 0.249 against the nose at 0.25. The sweep shrinks its error by r·p/V² ≈ 0.88
/// per sweep there and needs about 160 sweeps from a flat start: the capped solve gives up,
/// the patient one reaches the quartic's solution. Just past the nose (25.1 MW) neither finds
/// one, because there is none.
#[test]
fn next_to_the_nose_a_patient_solve_finds_the_solution_a_capped_one_misses() {
    let settings = SolveSettings {
        tol_pu: 1e-12,
        max_iterations: 100,
    };
    let short = two_bus(11.0, 1.21, 0.0, 24_900.0, 0.0, 1.0);
    let network = Network::new(&short);
    let demand = Demand::from_feeder(&short, &network, 1.0, 1.0);
    let mut capped = FlowState::flat(&network);
    assert!(solve(&network, &demand, &[], &mut capped, &settings).is_err());
    let mut state = FlowState::flat(&network);
    let converged = solve_patiently(
        &network,
        &demand,
        &[],
        &mut state,
        &settings,
        &Patience::default(),
    )
    .unwrap();
    assert!(converged.iterations > 100, "{converged:?}");
    let expected = exact_v_pu(1.0, 0.01, 0.0, 24.9, 0.0);
    assert!(
        (state.v_mag_pu(1) - expected).abs() < 1e-9,
        "{} vs {expected}",
        state.v_mag_pu(1)
    );

    let past = two_bus(11.0, 1.21, 0.0, 25_100.0, 0.0, 1.0);
    let demand = Demand::from_feeder(&past, &network, 1.0, 1.0);
    let mut state = FlowState::flat(&network);
    assert!(
        solve_patiently(
            &network,
            &demand,
            &[],
            &mut state,
            &settings,
            &Patience::default()
        )
        .is_err()
    );
}

#[test]
fn rules_of_thumb_of_the_trade() {
    // Common practice, no single source (trade-facts.md §4): ~500 A on a three-phase circuit
    // carries ≈ 0.87 MW per kV ("MW ≈ kV"); a 5 % drop at 500 A, unity power factor, on a
    // 0.075 Ω/km conductor is reached after ≈ 0.77 km per kV ("km ≈ kV"). 66 kV: 57 MW, 51 km.
    let kv = 66.0;
    let p_kw = 3f64.sqrt() * kv * 500.0; // 57.2 MW
    assert!((p_kw / 1000.0 - 57.2).abs() < 0.05);
    let length_km = 0.05 * kv * 1000.0 / 3f64.sqrt() / 500.0 / 0.075; // 50.8 km
    // Draw the 500 A at the far end and check the drop with the full load flow: about 5 %
    // (a little more, since the current at 0.95 pu is above 500 A for the same power).
    let feeder = two_bus(kv, 0.075 * length_km, 0.0, p_kw * 0.95, 0.0, 1.0);
    let (_, state) = solve_two_bus(&feeder, &[]);
    let drop_pct = (1.0 - state.v_mag_pu(1)) * 100.0;
    assert!((drop_pct - 5.0).abs() < 0.3, "drop {drop_pct} %");
}

#[test]
fn the_head_slot_holds_the_current_of_all_head_branches() {
    // Two branches from the head, one of them to a chain: the head's slot must carry the sum of
    // both, the current behind the head power that the reverse-flow criterion reads.
    let header = FeederHeader::new("fork", 11.0, "src");
    let feeder = Feeder::from_records(
        "fork",
        header,
        vec![
            NodeRecord::new("src"),
            NodeRecord::new("a").with_load(800.0, 200.0),
            NodeRecord::new("a2").with_load(300.0, 100.0),
            NodeRecord::new("b").with_load(500.0, 150.0),
        ],
        vec![
            BranchRecord::new("la", "src", "a", 1.0, 0.8, 400.0),
            BranchRecord::new("la2", "a", "a2", 0.5, 0.4, 400.0),
            BranchRecord::new("lb", "src", "b", 1.2, 0.9, 400.0),
        ],
    )
    .unwrap();
    let (network, state) = solve_two_bus(&feeder, &[]);
    let children: Vec<usize> = (1..network.n_nodes())
        .filter(|&i| network.parents()[i] == 0)
        .collect();
    assert_eq!(children.len(), 2);
    let (jr, ji) = children.iter().fold((0.0, 0.0), |(r, i), &c| {
        (r + state.j_re()[c], i + state.j_im()[c])
    });
    assert!((state.j_re()[0] - jr).abs() < 1e-15 && (state.j_im()[0] - ji).abs() < 1e-15);
    // S = V · conj(J) at the head, in kW, against the sum of the sending-end flows.
    let p_pu = state.v_re()[0] * state.j_re()[0] + state.v_im()[0] * state.j_im()[0];
    let (p_head_kw, _) = Solution::new(&network, &state).head_power();
    assert!(
        (p_pu - network.kw_to_pu(p_head_kw)).abs() < 1e-12,
        "{p_pu} vs {p_head_kw} kW"
    );
}
