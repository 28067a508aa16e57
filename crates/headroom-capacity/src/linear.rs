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

use headroom_flow::{Demand, FlowState, Network};

/// A real 2×2 matrix, row-major, acting on (re, im).
pub(crate) type M2 = [f64; 4];

/// The linear response's error at a solved injection P_a is scaled by (P / P_a)² to correct it
/// at P, but by at most this factor (up to P = 3·P_a): far beyond a close anchor, the rounding
/// of its solution would be magnified instead.
pub(crate) const MAX_ERROR_SCALE: f64 = 9.0;

pub(crate) const IDENTITY: M2 = [1.0, 0.0, 0.0, 1.0];

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
}

impl LinearResponse {
    /// The response around the solved base case `base` of `demand`; where that is not finite
    /// (a base case without a solution), the response with every load left out.
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
        if finite {
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
        LinearResponse {
            follow,
            pass_up,
            drop,
            branch: branches,
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
        PathResponse {
            path,
            terms,
            shares,
            thevenin,
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

    /// Fills `out` with the voltage change at every node per unit current injected at k, real
    /// and imaginary: one pass down the feeder for both.
    pub(crate) fn unit_changes(
        &self,
        linear: &LinearResponse,
        network: &Network,
        out: &mut UnitChanges,
    ) {
        let n = network.n_nodes();
        let parents = &network.parents()[..n];
        let follow = &linear.follow[..n];
        out.resize(n);
        let UnitChanges { re, im } = out;
        let (re, im) = (&mut re[..n], &mut im[..n]);
        // Per node: the change per unit real current (re[0], im[0]) and per unit imaginary
        // current (re[1], im[1]), in [f64; 2] pairs.
        re[0] = [0.0; 2];
        im[0] = [0.0; 2];
        let mut on_path = self.path.iter().zip(&self.terms).skip(1).peekable();
        let mut previous = ([0.0; 2], [0.0; 2]);
        for i in 1..n {
            let up = parents[i] as usize;
            // The parent is usually the node just before: its change is still at hand.
            let (pr, pi) = if up + 1 == i {
                previous
            } else {
                (re[up], im[up])
            };
            let f = &follow[i];
            let mut r = [f[0] * pr[0] + f[1] * pi[0], f[0] * pr[1] + f[1] * pi[1]];
            let mut m = [f[2] * pr[0] + f[3] * pi[0], f[2] * pr[1] + f[3] * pi[1]];
            if let Some((_, term)) = on_path.next_if(|(node, _)| **node as usize == i) {
                // The term applied to (1, 0) and (0, 1): its columns.
                r[0] += term[0];
                m[0] += term[2];
                r[1] += term[1];
                m[1] += term[3];
            }
            re[i] = r;
            im[i] = m;
            previous = (r, m);
        }
    }
}

/// The voltage change at every node per unit current injected at one node: per node, the real
/// parts `re[i]` and imaginary parts `im[i]` of the change per unit real current (index 0)
/// and per unit imaginary current (index 1).
#[derive(Debug, Clone, Default)]
pub(crate) struct UnitChanges {
    re: Vec<[f64; 2]>,
    im: Vec<[f64; 2]>,
}

impl UnitChanges {
    fn resize(&mut self, n: usize) {
        self.re.resize(n, [0.0; 2]);
        self.im.resize(n, [0.0; 2]);
    }

    /// Number of nodes.
    pub(crate) fn n_nodes(&self) -> usize {
        self.re.len()
    }

    /// Sets `out` to `solution` less the linear change from an injected `current` (re, im;
    /// pu). With `solution` the load flow's at that current, `out − base` is the linear
    /// response's error there.
    pub(crate) fn set_less_change(
        &self,
        solution: &FlowState,
        (cr, ci): (f64, f64),
        out: &mut FlowState,
    ) {
        let n = self.re.len();
        let (re, im) = (&self.re[..n], &self.im[..n]);
        let (sr, si) = (&solution.v_re()[..n], &solution.v_im()[..n]);
        out.set_voltages(|i| {
            (
                sr[i] - cr * re[i][0] - ci * re[i][1],
                si[i] - cr * im[i][0] - ci * im[i][1],
            )
        });
    }

    /// Sets `work` to `base` plus the linear change from an injected `current` (re, im; pu);
    /// with `blend` = (anchor, s), to `base + s·(anchor − base)` plus that change instead.
    pub(crate) fn set_changed(
        &self,
        base: &FlowState,
        blend: Option<(&FlowState, f64)>,
        (cr, ci): (f64, f64),
        work: &mut FlowState,
    ) {
        let n = self.re.len();
        let (re, im) = (&self.re[..n], &self.im[..n]);
        let (br, bi) = (&base.v_re()[..n], &base.v_im()[..n]);
        match blend {
            None => work.set_voltages(|i| {
                (
                    br[i] + cr * re[i][0] + ci * re[i][1],
                    bi[i] + cr * im[i][0] + ci * im[i][1],
                )
            }),
            Some((anchor, s)) => {
                let (ar, ai) = (&anchor.v_re()[..n], &anchor.v_im()[..n]);
                work.set_voltages(|i| {
                    (
                        br[i] + s * (ar[i] - br[i]) + cr * re[i][0] + ci * re[i][1],
                        bi[i] + s * (ai[i] - bi[i]) + cr * im[i][0] + ci * im[i][1],
                    )
                })
            }
        }
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
                let mut units = UnitChanges::default();
                response.unit_changes(&linear, network, &mut units);
                units.set_changed(&case.base, None, current, &mut started);
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
}
