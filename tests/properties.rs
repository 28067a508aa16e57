//! Properties of the load flow on random synthetic feeders: conservation of power. What enters
//! the feeder at the head equals the load, less the existing generation, plus the series
//! losses (Tellegen's theorem / conservation of complex power), to 1e-6 of the power handled.

use headroom_flow::{Demand, FlowState, Network, Solution, SolveSettings, solve};
use headroom_synth::{SynthSettings, generate};
use proptest::prelude::*;

proptest! {
    #![proptest_config(ProptestConfig { cases: 40, ..ProptestConfig::default() })]

    #[test]
    fn power_at_the_head_is_load_minus_generation_plus_losses(
        n_nodes in 2usize..1500,
        seed in any::<u64>(),
        nominal_kv in prop_oneof![Just(11.0), Just(20.0), Just(33.0)],
        load_scale in 0.0f64..1.2,
        gen_scale in 0.0f64..1.0,
    ) {
        let mut settings = SynthSettings::new(n_nodes, seed);
        settings.nominal_kv = nominal_kv;
        let feeder = generate(&settings).to_feeder("random").expect("synthetic feeders are valid");
        let network = Network::new(&feeder);
        let demand = Demand::from_feeder(&feeder, &network, load_scale, gen_scale);
        let mut state = FlowState::flat(&network);
        let converged = solve(&network, &demand, &[], &mut state, &SolveSettings::default());
        prop_assert!(converged.is_ok(), "{converged:?}");
        let solution = Solution::new(&network, &state);

        // Net demand from the feeder records, in engineering units; the head's own load is fed
        // by the source directly and is not part of the feeder's flow.
        let (mut net_kw, mut net_kvar, mut handled_kw) = (0.0, 0.0, 0.0);
        for node in &feeder.nodes()[1..] {
            net_kw += node.load_kw * load_scale - node.gen_kw * gen_scale;
            net_kvar += node.load_kvar * load_scale - node.gen_kvar * gen_scale;
            handled_kw += (node.load_kw * load_scale).abs()
                + (node.load_kvar * load_scale).abs()
                + (node.gen_kw * gen_scale).abs()
                + (node.gen_kvar * gen_scale).abs();
        }
        let (loss_kw, loss_kvar) = solution.losses();
        let (head_kw, head_kvar) = solution.head_power();
        // The scale of the problem: everything handled, with a floor for an empty feeder.
        let tol = 1e-6 * (handled_kw + loss_kw.abs() + loss_kvar.abs()).max(1.0);
        prop_assert!(
            (head_kw - (net_kw + loss_kw)).abs() <= tol,
            "P: head {head_kw} kW, net demand {net_kw} kW, losses {loss_kw} kW"
        );
        prop_assert!(
            (head_kvar - (net_kvar + loss_kvar)).abs() <= tol,
            "Q: head {head_kvar} kvar, net demand {net_kvar} kvar, losses {loss_kvar} kvar"
        );
        prop_assert!(loss_kw >= 0.0 && loss_kvar >= 0.0);
    }
}
