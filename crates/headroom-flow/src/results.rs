//! Reading a solved state in engineering units.

use crate::network::Network;
use crate::sweep::FlowState;

/// Flow in one branch, at its sending end (the end toward the head).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BranchFlow {
    /// Current magnitude, A.
    pub current_a: f64,
    /// Active power leaving the sending end toward the fed node, kW (negative = reverse).
    pub p_kw: f64,
    /// Reactive power leaving the sending end toward the fed node, kvar.
    pub q_kvar: f64,
    /// Active power lost in the branch, kW.
    pub loss_kw: f64,
    /// Reactive power absorbed by the branch reactance, kvar.
    pub loss_kvar: f64,
}

/// A solved state read against its network.
#[derive(Debug, Clone, Copy)]
pub struct Solution<'a> {
    network: &'a Network,
    state: &'a FlowState,
}

impl<'a> Solution<'a> {
    /// Pairs a state with the network it was solved for.
    ///
    /// # Panics
    /// When the sizes differ.
    pub fn new(network: &'a Network, state: &'a FlowState) -> Solution<'a> {
        assert_eq!(
            network.n_nodes(),
            state.n_nodes(),
            "state of another network"
        );
        Solution { network, state }
    }

    /// Voltage magnitude at node `i`, pu.
    pub fn v_pu(&self, i: usize) -> f64 {
        self.state.v_mag_pu(i)
    }

    /// Voltage angle at node `i` relative to the head, degrees.
    pub fn angle_deg(&self, i: usize) -> f64 {
        self.state.v_im[i].atan2(self.state.v_re[i]).to_degrees()
    }

    /// Flow in the branch feeding node `i` (`i ≥ 1`).
    pub fn branch_flow(&self, i: usize) -> BranchFlow {
        let up = self.network.parent[i] as usize;
        let (jr, ji) = (self.state.j_re[i], self.state.j_im[i]);
        let (vr, vi) = (self.state.v_re[up], self.state.v_im[up]);
        // S = V · conj(J)
        let p_pu = vr * jr + vi * ji;
        let q_pu = vi * jr - vr * ji;
        let j2 = jr * jr + ji * ji;
        BranchFlow {
            current_a: j2.sqrt() * self.network.i_base_a(),
            p_kw: self.network.pu_to_kw(p_pu),
            q_kvar: self.network.pu_to_kw(q_pu),
            loss_kw: self.network.pu_to_kw(j2 * self.network.r_pu[i]),
            loss_kvar: self.network.pu_to_kw(j2 * self.network.x_pu[i]),
        }
    }

    /// Power from the head node into its branches, kW and kvar (negative kW = reverse flow).
    pub fn head_power(&self) -> (f64, f64) {
        let (mut p_kw, mut q_kvar) = (0.0, 0.0);
        for i in 1..self.network.n_nodes() {
            if self.network.parent[i] == 0 {
                let flow = self.branch_flow(i);
                p_kw += flow.p_kw;
                q_kvar += flow.q_kvar;
            }
        }
        (p_kw, q_kvar)
    }

    /// Total series losses, kW and kvar.
    pub fn losses(&self) -> (f64, f64) {
        (1..self.network.n_nodes())
            .map(|i| self.branch_flow(i))
            .fold((0.0, 0.0), |(p, q), f| (p + f.loss_kw, q + f.loss_kvar))
    }
}
