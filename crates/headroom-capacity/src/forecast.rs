//! Where the fast search expects a criterion to bind: the base case's linear response to the
//! plant's current ([`crate::linear`], loads included), evaluated at the elements the search
//! watches and corrected by the error it shows at a solved injection.
//!
//! The plant injects I = conj(S / V_k); the linear response gives every watched node's voltage
//! and every path branch's current as the base case's plus a real 2×2 matrix times I, and V_k
//! itself through k's Thévenin matrix, so I at a given P is a fixed point of a few steps. The
//! response is the load flow's own derivative at P = 0, so its error grows as P²: anchored at
//! a solved injection P_a, each quantity's error there, scaled by (P / P_a)², is added back.
//! A prediction is only a place to solve next: every answer is still certified by solves.

use headroom_flow::FlowState;

use crate::criteria::{CHANGE, OVER, REVERSE, Snapshot, THERMAL, Thresholds, UNDER, Watched};
use crate::linear::{IDENTITY, LinearResponse, M2, MAX_ERROR_SCALE, PathResponse, apply, mul};

/// Fixed-point steps for the plant's current: each shrinks the error by about the plant's
/// share of the voltage (a few percent), so this is exact to rounding well short of the nose.
const CURRENT_STEPS: usize = 8;

/// Secant rounds of a prediction, at most.
const ROUNDS: usize = 8;

/// A prediction stops once it moves by less than this, pu (a thousandth of a kW).
const SETTLED_PU: f64 = 1e-6;

/// The watched elements of one plant and their linear response.
pub(crate) struct Forecast {
    /// The plant's base voltage (re, im).
    plant_base: (f64, f64),
    /// The plant's Thévenin matrix.
    thevenin: M2,
    /// Watched nodes: index, base voltage, voltage change per injected current.
    nodes: Vec<(usize, (f64, f64), M2)>,
    /// Watched branches (by the node they feed): index, base current, current change per
    /// injected current.
    branches: Vec<(usize, (f64, f64), M2)>,
    /// The head's voltage, the current it sends into the feeder and that current's change per
    /// injected current.
    head: ((f64, f64), (f64, f64), M2),
}

/// One (criterion, element) followed by a prediction: which quantity, its threshold in "upper"
/// form (violated above) and the anchor's correction.
#[derive(Clone, Copy)]
struct Followed {
    quantity: Quantity,
    threshold: f64,
    correction: f64,
}

#[derive(Clone, Copy)]
enum Quantity {
    /// |V| of a watched node (by position in `nodes`).
    Over(u32),
    /// −|V|.
    Under(u32),
    /// | |V| − |V(0)| |, with |V(0)|.
    Change(u32, f64),
    /// |J| of a watched branch (by position in `branches`).
    Thermal(u32),
    /// −(head power).
    Reverse,
}

/// The quantities of the watched elements at one injection.
struct Evaluated {
    v: Vec<f64>,
    i: Vec<f64>,
    head_p: f64,
}

impl Forecast {
    /// The forecast for the plant at the end of `response`'s path, watching `watched`.
    pub(crate) fn new(
        linear: &LinearResponse,
        response: &PathResponse,
        parents: &[u32],
        base: &FlowState,
        watched: &Watched,
    ) -> Forecast {
        let path = response.path();
        let along = response.along_path(linear);
        let (vr, vi) = (base.v_re(), base.v_im());
        let (jr, ji) = (base.j_re(), base.j_im());
        let on_path = |node: u32| path.binary_search(&node).ok();
        let nodes = watched
            .nodes
            .iter()
            .map(|&w| {
                // Off the path, a node's change follows the path node it hangs from.
                let mut follow = IDENTITY;
                let mut at = w;
                let change = loop {
                    if let Some(position) = on_path(at) {
                        break mul(&follow, &along[position].0);
                    }
                    follow = mul(&follow, &linear.follow[at as usize]);
                    at = parents[at as usize];
                };
                let w = w as usize;
                (w, (vr[w], vi[w]), change)
            })
            .collect();
        let branches = watched
            .branches
            .iter()
            .filter_map(|&m| {
                let position = on_path(m)?;
                let m = m as usize;
                Some((m, (jr[m], ji[m]), along[position].1))
            })
            .collect();
        let k = *path.last().expect("a path ends at the plant") as usize;
        Forecast {
            plant_base: (vr[k], vi[k]),
            thevenin: *response.thevenin(),
            nodes,
            branches,
            head: ((vr[0], vi[0]), (jr[0], ji[0]), along[0].1),
        }
    }

    /// The plant's current at injection `p_pu` (reactive `q_per_p` per unit of P), taken at
    /// the voltage it gives its own node.
    fn plant_current(&self, p_pu: f64, q_per_p: f64) -> (f64, f64) {
        let (br, bi) = self.plant_base;
        let mut current = crate::search::current_of(p_pu, q_per_p, br, bi);
        for _ in 0..CURRENT_STEPS {
            let (dr, di) = apply(&self.thevenin, current);
            let next = crate::search::current_of(p_pu, q_per_p, br + dr, bi + di);
            if !(next.0.is_finite() && next.1.is_finite()) {
                break;
            }
            current = next;
        }
        current
    }

    fn evaluate(&self, p_pu: f64, q_per_p: f64, out: &mut Evaluated) {
        let current = self.plant_current(p_pu, q_per_p);
        let magnitude = |(br, bi): (f64, f64), m: &M2| {
            let (dr, di) = apply(m, current);
            ((br + dr) * (br + dr) + (bi + di) * (bi + di)).sqrt()
        };
        out.v.clear();
        out.v
            .extend(self.nodes.iter().map(|(_, base, m)| magnitude(*base, m)));
        out.i.clear();
        out.i
            .extend(self.branches.iter().map(|(_, base, m)| magnitude(*base, m)));
        let ((hr, hi), (jr, ji), m) = &self.head;
        let (dr, di) = apply(m, current);
        out.head_p = hr * (jr + dr) + hi * (ji + di);
    }

    /// The smallest injection (pu) above the anchor at which some watched element of `subset`
    /// is predicted to cross its threshold: from `anchor` (a solved injection and what the
    /// criteria saw there; the base case when `None`), starting the secant rounds from the
    /// guess `guess_pu`. Infinite when nothing is heading for its threshold, NaN when the
    /// model has no solution there.
    pub(crate) fn crossing_pu(
        &self,
        thresholds: &Thresholds,
        subset: u8,
        base: &Snapshot,
        anchor: Option<(f64, &Snapshot)>,
        q_per_p: f64,
        guess_pu: f64,
    ) -> f64 {
        let mut at = Evaluated {
            v: Vec::with_capacity(self.nodes.len()),
            i: Vec::with_capacity(self.branches.len()),
            head_p: 0.0,
        };
        let anchor_pu = anchor.map_or(0.0, |(p, _)| p);
        self.evaluate(anchor_pu, q_per_p, &mut at);
        let mut followed = Vec::new();
        // (quantity at the anchor by the model, as solved)
        let corrected = |model: f64, solved: Option<f64>| solved.map_or(0.0, |s| s - model);
        let solved = |f: &dyn Fn(&Snapshot) -> f64| anchor.map(|(_, snapshot)| f(snapshot));
        for (slot, &(node, _, _)) in self.nodes.iter().enumerate() {
            let v = at.v[slot];
            let slot = slot as u32;
            if subset & OVER != 0 {
                followed.push(Followed {
                    quantity: Quantity::Over(slot),
                    threshold: thresholds.ov[node],
                    correction: corrected(v, solved(&|s| s.v_pu[node])),
                });
            }
            if subset & UNDER != 0 {
                followed.push(Followed {
                    quantity: Quantity::Under(slot),
                    threshold: -thresholds.uv[node],
                    correction: corrected(-v, solved(&|s| -s.v_pu[node])),
                });
            }
            if subset & CHANGE != 0 && thresholds.change_pu.is_finite() {
                let v0 = base.v_pu[node];
                followed.push(Followed {
                    quantity: Quantity::Change(slot, v0),
                    threshold: thresholds.change_pu,
                    correction: corrected((v - v0).abs(), solved(&|s| (s.v_pu[node] - v0).abs())),
                });
            }
        }
        if subset & THERMAL != 0 {
            for (slot, &(node, _, _)) in self.branches.iter().enumerate() {
                followed.push(Followed {
                    quantity: Quantity::Thermal(slot as u32),
                    threshold: thresholds.th[node],
                    correction: corrected(at.i[slot], solved(&|s| s.i_pu[node])),
                });
            }
        }
        if subset & REVERSE != 0 && thresholds.head_p_min_pu > f64::NEG_INFINITY {
            followed.push(Followed {
                quantity: Quantity::Reverse,
                threshold: -thresholds.head_p_min_pu,
                correction: corrected(-at.head_p, solved(&|s| -s.head_p_pu)),
            });
        }
        let margins = |at: &Evaluated, p_pu: f64, out: &mut Vec<f64>| {
            let scale = if anchor_pu > 0.0 {
                ((p_pu / anchor_pu) * (p_pu / anchor_pu)).min(MAX_ERROR_SCALE)
            } else {
                0.0
            };
            out.clear();
            out.extend(followed.iter().map(|f| {
                let q = match f.quantity {
                    Quantity::Over(slot) => at.v[slot as usize],
                    Quantity::Under(slot) => -at.v[slot as usize],
                    Quantity::Change(slot, v0) => (at.v[slot as usize] - v0).abs(),
                    Quantity::Thermal(slot) => at.i[slot as usize],
                    Quantity::Reverse => -at.head_p,
                };
                f.threshold - (q + f.correction * scale)
            }));
        };
        let mut before = Vec::with_capacity(followed.len());
        let mut after = Vec::with_capacity(followed.len());
        margins(&at, anchor_pu, &mut before);
        let mut p_before = anchor_pu;
        let mut p_after = if guess_pu.is_finite() && guess_pu > anchor_pu {
            guess_pu
        } else {
            anchor_pu + anchor_pu.max(1.0)
        };
        let mut predicted = f64::INFINITY;
        for _ in 0..ROUNDS {
            self.evaluate(p_after, q_per_p, &mut at);
            margins(&at, p_after, &mut after);
            // Per element, the secant through its margins at the last two injections, where
            // it falls as the injection grows: the earliest such crossing above the anchor.
            let (p_low, p_high) = (p_before.min(p_after), p_before.max(p_after));
            let width = p_high - p_low;
            let mut next = f64::INFINITY;
            for (&m0, &m1) in before.iter().zip(&after) {
                let (m_low, m_high) = if p_before < p_after {
                    (m0, m1)
                } else {
                    (m1, m0)
                };
                if m_high < m_low {
                    let p = p_low + m_low * width / (m_low - m_high);
                    if p < next && p >= anchor_pu {
                        next = p;
                    }
                }
            }
            if next.is_nan() || after.iter().any(|m| m.is_nan()) {
                return f64::NAN;
            }
            if !next.is_finite() {
                return f64::INFINITY;
            }
            let settled = (next - p_after).abs() < SETTLED_PU;
            predicted = next;
            if settled {
                break;
            }
            std::mem::swap(&mut before, &mut after);
            p_before = p_after;
            p_after = next;
        }
        predicted
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::criteria::ALL;
    use crate::prepare::FeederStudy;
    use headroom_model::{BranchRecord, Feeder, FeederHeader, NodeRecord, Scenario, Study};

    /// On a single line from a stiff source with no load, the linear response is exact (the
    /// voltage change is Z·I) and the plant's current is solved to rounding, so the forecast is
    /// the closed form: the P that lifts the far end to v_max at unity power factor, the
    /// smaller root of V_r⁴ − (V_s² + 2RP)·V_r² + P²(R² + X²) = 0 (the two-bus quartic; source:
    /// Baran & Wu (1989) DistFlow, as in tests/closed_form.rs).
    #[test]
    fn on_a_line_without_load_the_forecast_is_the_two_bus_solution() {
        let (kv, r_ohm, x_ohm) = (11.0, 1.6, 1.75);
        let feeder = Feeder::from_records(
            "line",
            FeederHeader::new("line", kv, "src"),
            vec![NodeRecord::new("src"), NodeRecord::new("far")],
            vec![BranchRecord::new("b", "src", "far", r_ohm, x_ohm, 2000.0)],
        )
        .unwrap();
        let mut study = Study {
            scenarios: vec![Scenario::new("empty", 0.0, 0.0)],
            ..Study::default()
        };
        study.limits.voltage_change_pct = 0.0;
        let prepared = FeederStudy::prepare(&feeder, &study);
        let case = &prepared.cases[0];
        let response = case.linear.path_response(vec![0, 1]);
        let watched = Watched {
            nodes: vec![1, 0],
            branches: vec![1],
        };
        let forecast = Forecast::new(
            &case.linear,
            &response,
            prepared.network.parents(),
            &case.base,
            &watched,
        );
        let z_base = kv * kv;
        let (r, x) = (r_ohm / z_base, x_ohm / z_base);
        let (vs, vr) = (1.0, 1.05);
        let a = r * r + x * x;
        let b = -2.0 * r * vr * vr;
        let c = vr.powi(4) - vs * vs * vr * vr;
        let exact = (-b - (b * b - 4.0 * a * c).sqrt()) / (2.0 * a);
        for guess in [0.5 * exact, 2.0 * exact, f64::INFINITY] {
            let p = forecast.crossing_pu(&case.thresholds, ALL, &case.snapshot, None, 0.0, guess);
            assert!(
                (p - exact).abs() < 1e-9 * exact,
                "guess {guess}: forecast {p} pu, two-bus {exact} pu"
            );
        }
    }
}
