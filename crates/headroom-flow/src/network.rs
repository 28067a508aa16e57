//! The feeder in per unit as flat arrays, and the demand of one operating case.

use headroom_model::{BusIdx, Feeder};

/// Three-phase power base, kVA.
pub const S_BASE_KVA: f64 = 1000.0;

/// A feeder in per unit: parent index and series impedance of the feeding branch of every node,
/// in the feeder's depth-first order (entry 0, the head, has no branch).
///
/// Built once per feeder; solving never changes it.
#[derive(Debug, Clone)]
pub struct Network {
    pub(crate) parent: Vec<u32>,
    pub(crate) r_pu: Vec<f64>,
    pub(crate) x_pu: Vec<f64>,
    pub(crate) head_v_pu: f64,
    v_base_kv: f64,
    z_base_ohm: f64,
    i_base_a: f64,
}

impl Network {
    /// Converts a validated feeder to per unit.
    pub fn new(feeder: &Feeder) -> Network {
        let v_base_kv = feeder.header().nominal_kv;
        let z_base_ohm = v_base_kv * v_base_kv * 1000.0 / S_BASE_KVA;
        let i_base_a = S_BASE_KVA / (3f64.sqrt() * v_base_kv);
        let n = feeder.n_nodes();
        let mut r_pu = vec![0.0; n];
        let mut x_pu = vec![0.0; n];
        for branch in feeder.branches() {
            r_pu[branch.to.index()] = branch.r_ohm / z_base_ohm;
            x_pu[branch.to.index()] = branch.x_ohm / z_base_ohm;
        }
        let parent = feeder.parents().iter().map(|p| p.index() as u32).collect();
        Network {
            parent,
            r_pu,
            x_pu,
            head_v_pu: feeder.header().head_voltage_pu,
            v_base_kv,
            z_base_ohm,
            i_base_a,
        }
    }

    /// Number of nodes, the head included.
    pub fn n_nodes(&self) -> usize {
        self.parent.len()
    }

    /// Voltage held at the head, pu.
    pub fn head_v_pu(&self) -> f64 {
        self.head_v_pu
    }

    /// The same network with the head held at `head_v_pu` instead (for example a tap change at
    /// the substation).
    pub fn with_head_v_pu(mut self, head_v_pu: f64) -> Network {
        self.head_v_pu = head_v_pu;
        self
    }

    /// Base voltage (line-to-line nominal), kV.
    pub fn v_base_kv(&self) -> f64 {
        self.v_base_kv
    }

    /// Base impedance, ohm.
    pub fn z_base_ohm(&self) -> f64 {
        self.z_base_ohm
    }

    /// Base current, A.
    pub fn i_base_a(&self) -> f64 {
        self.i_base_a
    }

    /// Parent of every node (the head's entry is 0), depth-first order.
    pub fn parents(&self) -> &[u32] {
        &self.parent
    }

    /// Series resistance of the branch feeding each node, pu (0 for the head).
    pub fn r_pu(&self) -> &[f64] {
        &self.r_pu
    }

    /// Series reactance of the branch feeding each node, pu (0 for the head).
    pub fn x_pu(&self) -> &[f64] {
        &self.x_pu
    }

    /// kW (or kvar) to per unit.
    pub fn kw_to_pu(&self, kw: f64) -> f64 {
        kw / S_BASE_KVA
    }

    /// Per unit to kW (or kvar).
    pub fn pu_to_kw(&self, pu: f64) -> f64 {
        pu * S_BASE_KVA
    }
}

/// Net demand (load − existing generation) at every node for one operating case, pu.
#[derive(Debug, Clone, PartialEq)]
pub struct Demand {
    pub(crate) p_pu: Vec<f64>,
    pub(crate) q_pu: Vec<f64>,
}

impl Demand {
    /// Loads scaled by `load_scale`, existing generation by `gen_scale`. The head's own load is
    /// supplied by the source directly and is not part of the flow.
    pub fn from_feeder(
        feeder: &Feeder,
        network: &Network,
        load_scale: f64,
        gen_scale: f64,
    ) -> Demand {
        let mut p_pu = Vec::with_capacity(feeder.n_nodes());
        let mut q_pu = Vec::with_capacity(feeder.n_nodes());
        for node in feeder.nodes() {
            p_pu.push(network.kw_to_pu(node.load_kw * load_scale - node.gen_kw * gen_scale));
            q_pu.push(network.kw_to_pu(node.load_kvar * load_scale - node.gen_kvar * gen_scale));
        }
        p_pu[0] = 0.0;
        q_pu[0] = 0.0;
        Demand { p_pu, q_pu }
    }

    /// Net active demand per node, pu.
    pub fn p_pu(&self) -> &[f64] {
        &self.p_pu
    }

    /// Net reactive demand per node, pu.
    pub fn q_pu(&self) -> &[f64] {
        &self.q_pu
    }

    /// Adds generation at a node permanently (for example an accepted application).
    pub fn add_generation(&mut self, bus: BusIdx, p_pu: f64, q_pu: f64) {
        if bus != BusIdx::HEAD {
            self.p_pu[bus.index()] -= p_pu;
            self.q_pu[bus.index()] -= q_pu;
        }
    }
}

/// Extra generation at one node for one solve, on top of the [`Demand`]; positive = produced.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Injection {
    /// Where; an injection at the head has no effect on the feeder.
    pub bus: BusIdx,
    /// Active power injected, pu.
    pub p_pu: f64,
    /// Reactive power injected, pu (negative = absorbed).
    pub q_pu: f64,
}
