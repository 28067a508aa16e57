//! Test-only: a small backward/forward sweep to check that generated feeders have a plausible
//! load flow (the real solver lives in another crate).

use headroom_model::Feeder;

use crate::generate::{SynthSettings, generate};

/// Result of one sweep.
pub(crate) struct SweepResult {
    /// Voltage magnitude per node (depth-first order), pu.
    pub v_pu: Vec<f64>,
    /// Current per closed branch, A.
    pub current_a: Vec<f64>,
    /// Active power from the head into the feeder, kW.
    pub head_p_kw: f64,
}

#[derive(Clone, Copy)]
struct C(f64, f64);

impl C {
    fn add(self, o: C) -> C {
        C(self.0 + o.0, self.1 + o.1)
    }
    fn sub(self, o: C) -> C {
        C(self.0 - o.0, self.1 - o.1)
    }
    fn mul(self, o: C) -> C {
        C(self.0 * o.0 - self.1 * o.1, self.0 * o.1 + self.1 * o.0)
    }
    fn div(self, o: C) -> C {
        let d = o.0 * o.0 + o.1 * o.1;
        C(
            (self.0 * o.0 + self.1 * o.1) / d,
            (self.1 * o.0 - self.0 * o.1) / d,
        )
    }
    fn conj(self) -> C {
        C(self.0, -self.1)
    }
    fn abs(self) -> f64 {
        (self.0 * self.0 + self.1 * self.1).sqrt()
    }
}

/// Constant-power sweep on a 1 MVA base; `None` if it does not converge in 100 iterations.
pub(crate) fn sweep(feeder: &Feeder, load_scale: f64, gen_scale: f64) -> Option<SweepResult> {
    let n = feeder.n_nodes();
    let kv = feeder.header().nominal_kv;
    let z_base_ohm = kv * kv; // kV² / 1 MVA
    let i_base_a = 1000.0 / (3f64.sqrt() * kv);
    let injection: Vec<C> = feeder
        .nodes()
        .iter()
        .map(|node| {
            C(
                (node.gen_kw * gen_scale - node.load_kw * load_scale) / 1000.0,
                (node.gen_kvar * gen_scale - node.load_kvar * load_scale) / 1000.0,
            )
        })
        .collect();
    let impedance: Vec<C> = feeder
        .branches()
        .iter()
        .map(|b| C(b.r_ohm / z_base_ohm, b.x_ohm / z_base_ohm))
        .collect();
    let parents = feeder.parents();
    let head_v = C(feeder.header().head_voltage_pu, 0.0);
    let mut v = vec![head_v; n];
    let mut flow = vec![C(0.0, 0.0); n]; // current into node i from its parent
    for _ in 0..100 {
        for (i, f) in flow.iter_mut().enumerate() {
            // Current drawn by the node = −conj(S_injected / V).
            *f = C(0.0, 0.0).sub(injection[i].div(v[i]).conj());
        }
        for i in (1..n).rev() {
            let up = parents[i].index();
            flow[up] = flow[up].add(flow[i]);
        }
        let mut change: f64 = 0.0;
        for i in 1..n {
            let up = parents[i].index();
            let new_v = v[up].sub(impedance[i - 1].mul(flow[i]));
            change = change.max(new_v.sub(v[i]).abs());
            v[i] = new_v;
        }
        if change < 1e-10 {
            let head_s = v[0].mul(flow[0].conj());
            return Some(SweepResult {
                v_pu: v.iter().map(|x| x.abs()).collect(),
                current_a: (1..n).map(|i| flow[i].abs() * i_base_a).collect(),
                head_p_kw: head_s.0 * 1000.0,
            });
        }
    }
    None
}

fn extremes(values: &[f64]) -> (f64, f64) {
    values
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(v), hi.max(v))
        })
}

#[test]
fn sweep_matches_a_two_bus_hand_calculation() {
    use headroom_model::{BranchRecord, FeederHeader, NodeRecord};
    // 11 kV, Z = 1.21 + j1.21 Ω = 0.01 + j0.01 pu, load 1 MW at unity: V ≈ 1 − 0.01.
    let feeder = Feeder::from_records(
        "two",
        FeederHeader::new("two", 11.0, "a"),
        vec![
            NodeRecord::new("a"),
            NodeRecord::new("b").with_load(1000.0, 0.0),
        ],
        vec![BranchRecord::new("ab", "a", "b", 1.21, 1.21, 300.0)],
    )
    .unwrap();
    let result = sweep(&feeder, 1.0, 0.0).unwrap();
    // Exact (trade-facts §5, two-bus quartic): V⁴ − 0.98·V² + 0.0002 = 0, V = 0.9898464.
    let exact = ((0.98 + (0.98f64 * 0.98 - 0.0008).sqrt()) / 2.0).sqrt();
    assert!((result.v_pu[1] - exact).abs() < 1e-9, "{}", result.v_pu[1]);
    assert!(result.head_p_kw > 1000.0);
}

/// The spec's default study (peak: loads × 1, no generation; min-load: loads × 0.3 with the
/// existing generation) gives base-case voltages within about 0.92–1.05 pu and no overloads at
/// peak, for large 11 kV feeders as for small ones.
#[test]
fn base_case_voltages_are_plausible() {
    let cases: &[(usize, f64, &[u64])] = &[
        (5_000, 11.0, &[1, 2, 3]),
        (5_000, 33.0, &[4]),
        (2_000, 11.0, &[5, 6, 7, 8]),
        (500, 11.0, &[9, 10, 11, 12, 13]),
        (100, 11.0, &[14, 15, 16, 17, 18, 19]),
        (100, 22.0, &[20]),
        (30, 11.0, &[21, 22, 23, 24, 25, 26]),
    ];
    for &(n_nodes, nominal_kv, seeds) in cases {
        for &seed in seeds {
            let settings = SynthSettings {
                nominal_kv,
                ..SynthSettings::new(n_nodes, seed)
            };
            let feeder = generate(&settings).to_feeder("plausible").unwrap();
            let peak = sweep(&feeder, 1.0, 0.0).expect("peak converges");
            let min_load = sweep(&feeder, 0.3, 1.0).expect("min-load converges");
            let (peak_lo, peak_hi) = extremes(&peak.v_pu);
            let (min_lo, min_hi) = extremes(&min_load.v_pu);
            let worst_loading = feeder
                .branches()
                .iter()
                .zip(&peak.current_a)
                .map(|(b, i)| i / b.rating_a)
                .fold(0.0, f64::max);
            let context = format!(
                "n {n_nodes} {nominal_kv} kV seed {seed}: peak {peak_lo:.4}..{peak_hi:.4}, min-load \
                 {min_lo:.4}..{min_hi:.4}, worst loading {worst_loading:.2}"
            );
            assert!(peak_lo >= 0.92 && peak_hi <= 1.05, "{context}");
            assert!(min_lo >= 0.92 && min_hi <= 1.05, "{context}");
            assert!(worst_loading <= 1.0, "{context}");
            // Power flows into the feeder at peak, about the whole load plus losses.
            let load_kw: f64 = feeder.nodes().iter().map(|n| n.load_kw).sum();
            assert!(
                peak.head_p_kw >= load_kw && peak.head_p_kw < 1.05 * load_kw,
                "{context}"
            );
        }
    }
}
