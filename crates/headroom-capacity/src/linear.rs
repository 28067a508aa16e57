//! The base case's linear response to a current injected at one node, the loads' response
//! included: the start of a solve far from any solved injection, and the fast search's forecast
//! of where a criterion binds ([`crate::forecast`]).
//!
//! A constant-power load draws I = conj(S / V), so a small voltage change ΔV changes its
//! current by −conj(S) / conj(V)² · conj(ΔV): linear in the real and imaginary parts of ΔV but
//! not in ΔV as a complex number. Every relation here is therefore a real 2×2 matrix acting on
//! (re, im). Per node, from the leaves up:
//!
//! - `Y_i`, the subtree's input admittance at node i: its load's plus, per child c,
//!   `G_c·Y_c` with `G_c = (1 + Y_c·Z_c)⁻¹` (the current into a child's branch answers the
//!   voltage change at its top through the branch impedance `Z_c`);
//! - `A_i = 1 − Z_i·G_i·Y_i`: with no current injected below it, a node's voltage change is
//!   `A_i` times its parent's.
//!
//! A current ΔI injected at node k adds, along k's path to the head, `H_j·P_j·ΔI` to the change
//! at path node j, where `H_j = Z_j·G_j` and `P_j` is the product of the `G` of the path nodes
//! below j down to k. Everywhere else the change follows the parent's through `A`. With every
//! load left out (`Y = 0`), this is the superposition of ΔI through the path impedance each node
//! shares with k.
//!
//! A start needs the change at every node. Off k's path it is the change at the path node m
//! where the node's own path leaves k's, times the `A` of the nodes in between: with
//! `C_i = A_i·A_parent·…` (the product from the head down to i, computed once per scenario),
//! that is `C_i·C_m⁻¹` times m's change. The nodes hanging from one path node are one or two
//! index ranges (nodes are numbered depth first), so a start is one walk down the path and, per
//! path node, a loop over its ranges with no dependence from node to node.

use std::ops::Range;

use headroom_flow::{Demand, FlowState, Network};

/// A real 2×2 matrix, row-major, acting on (re, im).
pub(crate) type M2 = [f64; 4];

/// The linear response's error at a solved injection P_a is scaled by (P / P_a)² to correct it
/// at P, but by at most this factor (up to P = 3·P_a): far beyond a close anchor, the rounding
/// of its solution would be magnified instead.
pub(crate) const MAX_ERROR_SCALE: f64 = 9.0;

pub(crate) const IDENTITY: M2 = [1.0, 0.0, 0.0, 1.0];

/// Largest condition number of a product `C_i` the starts invert: a start's change off the
/// path then keeps about 1e-10 of relative precision. Products of the per-node matrices of a
/// base case with a solution are near conformal (a complex factor and a small conjugate
/// part), with condition numbers near 1 (unit test); this guards against a degenerate base
/// case only.
const MAX_REACH_CONDITION: f64 = 1e6;

pub(crate) fn mul(a: &M2, b: &M2) -> M2 {
    [
        a[0] * b[0] + a[1] * b[2],
        a[0] * b[1] + a[1] * b[3],
        a[2] * b[0] + a[3] * b[2],
        a[2] * b[1] + a[3] * b[3],
    ]
}

fn add(a: &M2, b: &M2) -> M2 {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2], a[3] + b[3]]
}

pub(crate) fn sub(a: &M2, b: &M2) -> M2 {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2], a[3] - b[3]]
}

fn inverse(a: &M2) -> M2 {
    let det = a[0] * a[3] - a[1] * a[2];
    [a[3] / det, -a[1] / det, -a[2] / det, a[0] / det]
}

/// `a` applied to the vector (re, im).
pub(crate) fn apply(a: &M2, (re, im): (f64, f64)) -> (f64, f64) {
    (a[0] * re + a[1] * im, a[2] * re + a[3] * im)
}

/// The series impedance r + jx as a matrix.
fn impedance(r: f64, x: f64) -> M2 {
    [r, -x, x, r]
}

/// Per node of one scenario's base case: see the module documentation.
#[derive(Debug, Clone)]
pub(crate) struct LinearResponse {
    /// `A_i`: a node's voltage change per change of its parent's, when no current is injected
    /// in its subtree (the identity for the head).
    pub(crate) follow: Vec<M2>,
    /// `G_i = (1 + Y_i·Z_i)⁻¹`.
    pub(crate) pass_up: Vec<M2>,
    /// `H_i = Z_i·G_i`.
    pub(crate) drop: Vec<M2>,
    /// `G_i·Y_i`: the change of the current into node i's branch per change of its parent's
    /// voltage, when no current is injected in its subtree.
    pub(crate) branch: Vec<M2>,
    /// `C_i = A_i·C_parent` (the identity for the head): see the module documentation. Entry
    /// e of every node's matrix in `reach[e]`, so that a loop over nodes reads each in turn.
    reach: [Vec<f64>; 4],
    /// One past the last node of each node's subtree (depth-first numbering).
    subtree_end: Vec<u32>,
}

impl LinearResponse {
    /// The response around the solved base case `base` of `demand`; where that is not finite
    /// (a base case without a solution), or a product `C_i` too near singular to be inverted
    /// without losing the start's precision, the response with every load left out (whose
    /// products are the identity).
    pub(crate) fn new(network: &Network, demand: &Demand, base: &FlowState) -> LinearResponse {
        let with_loads = LinearResponse::build(network, Some((demand, base)));
        let finite = [
            &with_loads.follow,
            &with_loads.pass_up,
            &with_loads.drop,
            &with_loads.branch,
        ]
        .iter()
        .all(|matrices| matrices.iter().flatten().all(|v| v.is_finite()));
        // ‖C‖²_F / |det C| bounds the condition number of a 2×2 matrix from above.
        let [c0, c1, c2, c3] = &with_loads.reach;
        let invertible = (0..c0.len()).all(|i| {
            let det = c0[i] * c3[i] - c1[i] * c2[i];
            let norm2 = c0[i] * c0[i] + c1[i] * c1[i] + c2[i] * c2[i] + c3[i] * c3[i];
            norm2.is_finite() && norm2 <= MAX_REACH_CONDITION * det.abs()
        });
        if finite && invertible {
            with_loads
        } else {
            LinearResponse::build(network, None)
        }
    }

    fn build(network: &Network, loads: Option<(&Demand, &FlowState)>) -> LinearResponse {
        let n = network.n_nodes();
        let parents = network.parents();
        let (r, x) = (network.r_pu(), network.x_pu());
        let mut admittance = vec![[0.0; 4]; n];
        if let Some((demand, base)) = loads {
            let (p, q) = (demand.p_pu(), demand.q_pu());
            let (vr, vi) = (base.v_re(), base.v_im());
            for i in 1..n {
                // ΔI = B·conj(ΔV), B = −conj(S) / conj(V)².
                let (cr, ci) = (vr[i] * vr[i] - vi[i] * vi[i], -2.0 * vr[i] * vi[i]);
                let d = cr * cr + ci * ci;
                let (sr, si) = (-p[i], q[i]); // −conj(S)
                let (br, bi) = ((sr * cr + si * ci) / d, (si * cr - sr * ci) / d);
                admittance[i] = [br, bi, bi, -br];
            }
        }
        let mut follow = vec![IDENTITY; n];
        let mut pass_up = vec![IDENTITY; n];
        let mut drop = vec![[0.0; 4]; n];
        let mut branches = vec![[0.0; 4]; n];
        // Children have higher indices than their parent: walking down the indices completes
        // each subtree's admittance before it is passed up.
        for i in (1..n).rev() {
            let z = impedance(r[i], x[i]);
            let y = admittance[i];
            let g = inverse(&add(&IDENTITY, &mul(&y, &z)));
            let branch = mul(&g, &y);
            let up = parents[i] as usize;
            admittance[up] = add(&admittance[up], &branch);
            follow[i] = sub(&IDENTITY, &mul(&z, &branch));
            drop[i] = mul(&z, &g);
            pass_up[i] = g;
            branches[i] = branch;
        }
        let mut products = vec![IDENTITY; n];
        for i in 1..n {
            products[i] = mul(&follow[i], &products[parents[i] as usize]);
        }
        let reach = [0, 1, 2, 3].map(|e| products.iter().map(|c| c[e]).collect());
        let mut subtree_end: Vec<u32> = (1..=n as u32).collect();
        for i in (1..n).rev() {
            let up = parents[i] as usize;
            subtree_end[up] = subtree_end[up].max(subtree_end[i]);
        }
        LinearResponse {
            follow,
            pass_up,
            drop,
            branch: branches,
            reach,
            subtree_end,
        }
    }

    /// The response to a current injected at the end of `path` (head first, ending at the
    /// injecting node k).
    pub(crate) fn path_response(&self, path: Vec<u32>) -> PathResponse {
        let mut terms = vec![[0.0; 4]; path.len()];
        let mut shares = vec![[0.0; 4]; path.len()];
        let mut below = IDENTITY;
        for ((term, share), &node) in terms.iter_mut().zip(&mut shares).zip(&path).rev() {
            let j = node as usize;
            *term = mul(&self.drop[j], &below);
            below = mul(&self.pass_up[j], &below);
            *share = below;
        }
        let mut thevenin = [0.0; 4];
        for (term, &node) in terms.iter().zip(&path) {
            thevenin = add(&mul(&self.follow[node as usize], &thevenin), term);
        }
        let end = |node: u32| self.subtree_end[node as usize];
        let hanging = path
            .iter()
            .enumerate()
            .map(|(at, &m)| match path.get(at + 1) {
                Some(&child) => [(m, child), (end(child), end(m))],
                None => [(m, end(m)), (end(m), end(m))],
            })
            .collect();
        let unreach = path
            .iter()
            .map(|&m| {
                let m = m as usize;
                inverse(&self.reach.each_ref().map(|entry| entry[m]))
            })
            .collect();
        PathResponse {
            path,
            terms,
            shares,
            thevenin,
            hanging,
            unreach,
        }
    }
}

/// [`LinearResponse`] to a current injected at one node k.
#[derive(Debug, Clone)]
pub(crate) struct PathResponse {
    /// k's path to the head, head first (increasing indices).
    path: Vec<u32>,
    /// Per node of the path, `H_j·P_j`: what its voltage change takes from the current, besides
    /// following its parent's.
    terms: Vec<M2>,
    /// Per node of the path, `G_j·P_j`: the share of the current that flows up its branch
    /// (the head's entry unused).
    shares: Vec<M2>,
    /// k's Thévenin matrix: its voltage change per injected current.
    thevenin: M2,
    /// Per node m of the path, the nodes whose path to the head leaves k's at m (m itself
    /// included): two index ranges, (start, end), the second empty for k.
    hanging: Vec<[(u32, u32); 2]>,
    /// Per node m of the path, `C_m⁻¹`.
    unreach: Vec<M2>,
}

impl PathResponse {
    /// k's path to the head, head first.
    pub(crate) fn path(&self) -> &[u32] {
        &self.path
    }

    /// k's Thévenin matrix: its voltage change per injected current.
    pub(crate) fn thevenin(&self) -> &M2 {
        &self.thevenin
    }

    /// Per node of the path (head first): its voltage change per injected current, and the
    /// change of the current into its branch per injected current (the head's: the change of
    /// the current the head sends into the feeder).
    pub(crate) fn along_path(&self, linear: &LinearResponse) -> Vec<(M2, M2)> {
        let mut out = Vec::with_capacity(self.path.len());
        let mut parent_change = [0.0; 4];
        for (at, (&node, term)) in self.path.iter().zip(&self.terms).enumerate() {
            let j = node as usize;
            let change = add(&mul(&linear.follow[j], &parent_change), term);
            // ΔJ_j = G_j·Y_j·ΔV_parent − G_j·P_j·ΔI: the loads' answer less the plant's share.
            let current = sub(&mul(&linear.branch[j], &parent_change), &self.shares[at]);
            out.push((change, current));
            parent_change = change;
        }
        // The head sends into the feeder what its path child's branch draws more (its other
        // branches see no change at the held head voltage).
        if out.len() > 1 {
            out[0].1 = out[1].1;
        }
        out
    }

    /// The voltage change at k from an injected `current` (re, im; pu).
    pub(crate) fn at_node(&self, current: (f64, f64)) -> (f64, f64) {
        apply(&self.thevenin, current)
    }

    /// Calls `fill(nodes, u)` for every range of nodes that leave k's path at one path node m,
    /// with `u = C_m⁻¹·ΔV_m` for an injected `current` (re, im; pu): node i of the range changes
    /// by `C_i·u`.
    fn for_each_hanging(
        &self,
        linear: &LinearResponse,
        current: (f64, f64),
        mut fill: impl FnMut(Range<usize>, (f64, f64)),
    ) {
        // The head's change is 0: its term is never applied.
        let mut change = (0.0, 0.0);
        for (at, (&node, term)) in self.path.iter().zip(&self.terms).enumerate() {
            if at > 0 {
                let (fr, fi) = apply(&linear.follow[node as usize], change);
                let (tr, ti) = apply(term, current);
                change = (fr + tr, fi + ti);
            }
            let u = apply(&self.unreach[at], change);
            for (start, end) in self.hanging[at] {
                if start < end {
                    fill(start as usize..end as usize, u);
                }
            }
        }
    }

    /// Sets `work` to `base` plus the linear change from an injected `current` (re, im; pu);
    /// with `blend` = (anchor, s), to `base + s·(anchor − base)` plus that change instead.
    pub(crate) fn set_changed(
        &self,
        linear: &LinearResponse,
        base: &FlowState,
        blend: Option<(&FlowState, f64)>,
        current: (f64, f64),
        work: &mut FlowState,
    ) {
        let (br, bi) = (base.v_re(), base.v_im());
        // Without a blend the anchor is the base itself, with a weight of 0.
        let (anchor, s) = blend.unwrap_or((base, 0.0));
        let (ar, ai) = (anchor.v_re(), anchor.v_im());
        let (vr, vi) = work.voltages_mut();
        self.for_each_hanging(linear, current, |nodes, (ur, ui)| {
            let n = nodes.len();
            let [c0, c1, c2, c3] = linear.reach.each_ref().map(|e| &e[nodes.clone()][..n]);
            let (br, bi) = (&br[nodes.clone()][..n], &bi[nodes.clone()][..n]);
            let (ar, ai) = (&ar[nodes.clone()][..n], &ai[nodes.clone()][..n]);
            let (vr, vi) = (&mut vr[nodes.clone()][..n], &mut vi[nodes][..n]);
            for j in 0..n {
                vr[j] = br[j] + s * (ar[j] - br[j]) + c0[j] * ur + c1[j] * ui;
                vi[j] = bi[j] + s * (ai[j] - bi[j]) + c2[j] * ur + c3[j] * ui;
            }
        });
    }

    /// Sets `out` to `solution` less the linear change from an injected `current` (re, im;
    /// pu). With `solution` the load flow's at that current, `out − base` is the linear
    /// response's error there.
    pub(crate) fn set_less_change(
        &self,
        linear: &LinearResponse,
        solution: &FlowState,
        current: (f64, f64),
        out: &mut FlowState,
    ) {
        let (sr, si) = (solution.v_re(), solution.v_im());
        let (vr, vi) = out.voltages_mut();
        self.for_each_hanging(linear, current, |nodes, (ur, ui)| {
            let n = nodes.len();
            let [c0, c1, c2, c3] = linear.reach.each_ref().map(|e| &e[nodes.clone()][..n]);
            let (sr, si) = (&sr[nodes.clone()][..n], &si[nodes.clone()][..n]);
            let (vr, vi) = (&mut vr[nodes.clone()][..n], &mut vi[nodes][..n]);
            for j in 0..n {
                vr[j] = sr[j] - (c0[j] * ur + c1[j] * ui);
                vi[j] = si[j] - (c2[j] * ur + c3[j] * ui);
            }
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use headroom_flow::{Injection, SolveSettings, solve};
    use headroom_model::{BusIdx, Study};
    use headroom_synth::{SynthSettings, generate};

    /// A small current injected at a node moves the solved voltages as the linear response
    /// says, to second order: the response is the load flow's own derivative.
    #[test]
    fn a_small_injection_moves_the_solution_as_the_linear_response_says() {
        let feeder = generate(&SynthSettings::new(300, 4))
            .to_feeder("linear")
            .unwrap();
        let prepared = crate::prepare::FeederStudy::prepare(&feeder, &Study::default());
        let network = &prepared.network;
        let tight = SolveSettings {
            tol_pu: 1e-13,
            max_iterations: 500,
        };
        for case in &prepared.cases {
            let linear = LinearResponse::new(network, &case.demand, &case.base);
            for k in [1, feeder.n_nodes() / 3, feeder.n_nodes() - 1] {
                let bus = BusIdx::new(k as u32);
                let mut path: Vec<u32> =
                    feeder.path_to_head(bus).map(|b| b.index() as u32).collect();
                path.reverse();
                let response = linear.path_response(path);
                // A current of 1e-4 pu at the base voltage's angle: P = Re(V·conj(I)).
                let (vr, vi) = (case.base.v_re()[k], case.base.v_im()[k]);
                let scale = 1e-4 / vr.hypot(vi);
                let current = (vr * scale, vi * scale);
                let p_pu = vr * current.0 + vi * current.1;
                let q_pu = vi * current.0 - vr * current.1;
                let mut solved = case.base.clone();
                let injection = [Injection { bus, p_pu, q_pu }];
                solve(network, &case.demand, &injection, &mut solved, &tight).unwrap();
                let mut started = case.base.clone();
                response.set_changed(&linear, &case.base, None, current, &mut started);
                let predicted: Vec<(f64, f64)> = (0..feeder.n_nodes())
                    .map(|i| {
                        (
                            started.v_re()[i] - case.base.v_re()[i],
                            started.v_im()[i] - case.base.v_im()[i],
                        )
                    })
                    .collect();
                let mut worst: f64 = 0.0;
                let mut largest: f64 = 0.0;
                for (i, &(dr, di)) in predicted.iter().enumerate() {
                    let (sr, si) = (
                        solved.v_re()[i] - case.base.v_re()[i],
                        solved.v_im()[i] - case.base.v_im()[i],
                    );
                    worst = worst.max((sr - dr).hypot(si - di));
                    largest = largest.max(sr.hypot(si));
                }
                // Solved to 1e-13 pu, the change (5e-8 pu next to the head, 1e-5 pu at the far
                // end) is known to far better than a thousandth; the linear error is of order
                // change².
                assert!(largest > 1e-8, "node {k}: no change ({largest:.2e})");
                assert!(
                    worst < 1e-3 * largest,
                    "node {k}: linear response off by {worst:.2e} pu of {largest:.2e}"
                );
                // Along the path, the branch currents (and the head's) move as predicted too.
                let path = response.path().to_vec();
                for (&node, (_, current_change)) in path.iter().zip(response.along_path(&linear)) {
                    let j = node as usize;
                    let (pr, pi) = apply(&current_change, current);
                    let (sr, si) = (
                        solved.j_re()[j] - case.base.j_re()[j],
                        solved.j_im()[j] - case.base.j_im()[j],
                    );
                    assert!(
                        (sr - pr).hypot(si - pi) < 1e-3 * 1e-4,
                        "node {k}, path node {j}: current change {sr:.3e}{si:+.3e}j, \
                         predicted {pr:.3e}{pi:+.3e}j"
                    );
                }
                let (tr, ti) = response.at_node(current);
                let (sr, si) = (
                    solved.v_re()[k] - case.base.v_re()[k],
                    solved.v_im()[k] - case.base.v_im()[k],
                );
                assert!((sr - tr).hypot(si - ti) < 1e-3 * sr.hypot(si));
            }
        }
    }

    /// The products `C_i` stay near conformal (a complex factor, whose ‖C‖²_F / |det C| is 2),
    /// so the starts invert them without loss, on 11, 6.6 and 3.3 kV synthetic feeders alike
    /// (2.0001 to 2.19 measured): far inside the guard of `MAX_REACH_CONDITION`.
    #[test]
    fn the_products_from_the_head_are_near_conformal() {
        for (kv, seed) in [(11.0, 1), (6.6, 2), (3.3, 5), (3.3, 7)] {
            let mut settings = SynthSettings::new(1000, seed);
            settings.nominal_kv = kv;
            let feeder = generate(&settings).to_feeder("products").unwrap();
            let prepared = crate::prepare::FeederStudy::prepare(&feeder, &Study::default());
            for case in &prepared.cases {
                let [c0, c1, c2, c3] = &case.linear.reach;
                let worst = (0..c0.len())
                    .map(|i| {
                        let det = c0[i] * c3[i] - c1[i] * c2[i];
                        let norm2 = c0[i] * c0[i] + c1[i] * c1[i] + c2[i] * c2[i] + c3[i] * c3[i];
                        norm2 / det.abs()
                    })
                    .fold(0.0, f64::max);
                assert!(
                    (2.0..2.5).contains(&worst),
                    "{kv} kV, seed {seed}, {}: {worst}",
                    case.scenario.name
                );
            }
        }
    }
}
