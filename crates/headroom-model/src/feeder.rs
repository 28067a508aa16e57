//! The validated feeder: nodes in depth-first order from the head, one feeding branch per node.

use std::collections::HashMap;
use std::path::PathBuf;

use crate::diagnostic::Diagnostic;

/// Index of a node in a [`Feeder`]'s depth-first order; the head is `BusIdx::HEAD`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct BusIdx(u32);

impl BusIdx {
    /// The head node (the substation busbar) is always first.
    pub const HEAD: BusIdx = BusIdx(0);

    /// The node at position `index` of the depth-first order.
    pub const fn new(index: u32) -> BusIdx {
        BusIdx(index)
    }

    /// Position in the depth-first order, for indexing flat arrays.
    pub const fn index(self) -> usize {
        self.0 as usize
    }
}

/// Index of a closed branch in a [`Feeder`]; branch `b` feeds node `b + 1`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct BranchIdx(u32);

impl BranchIdx {
    /// The branch at position `index`.
    pub const fn new(index: u32) -> BranchIdx {
        BranchIdx(index)
    }

    /// Position, for indexing flat arrays.
    pub const fn index(self) -> usize {
        self.0 as usize
    }

    /// The node this branch feeds (its end away from the head).
    pub const fn fed_node(self) -> BusIdx {
        BusIdx(self.0 + 1)
    }
}

/// Header of a feeder (feeder.toml).
#[derive(Debug, Clone, PartialEq)]
pub struct FeederHeader {
    /// Display name (defaults to the folder name).
    pub name: String,
    /// Line-to-line nominal voltage, kV.
    pub nominal_kv: f64,
    /// Id of the node held by the source.
    pub head: String,
    /// Voltage magnitude held at the head, per unit of nominal.
    pub head_voltage_pu: f64,
    /// Grouping for regional reports.
    pub substation: Option<String>,
    /// Grouping for regional reports.
    pub region: Option<String>,
    /// Coordinate reference of node `x`, `y`, as written (e.g. `EPSG:32630`).
    pub crs: Option<String>,
}

impl FeederHeader {
    /// A header with the given name, nominal voltage and head, head held at 1.0 pu.
    pub fn new(name: impl Into<String>, nominal_kv: f64, head: impl Into<String>) -> FeederHeader {
        FeederHeader {
            name: name.into(),
            nominal_kv,
            head: head.into(),
            head_voltage_pu: 1.0,
            substation: None,
            region: None,
            crs: None,
        }
    }
}

/// One row of nodes.csv, before the tree is built.
#[derive(Debug, Clone, PartialEq)]
pub struct NodeRecord {
    /// Node id, unique within the feeder.
    pub id: String,
    /// Easting or longitude in the feeder's CRS.
    pub x: Option<f64>,
    /// Northing or latitude in the feeder's CRS.
    pub y: Option<f64>,
    /// Peak demand, kW (three-phase total).
    pub load_kw: f64,
    /// Peak reactive demand, kvar (> 0 inductive).
    pub load_kvar: f64,
    /// Existing generation at rated output, kW.
    pub gen_kw: f64,
    /// Existing generation reactive output, kvar (> 0 injected).
    pub gen_kvar: f64,
    /// 1-based line in nodes.csv (0 when not read from a file).
    pub line: usize,
}

impl NodeRecord {
    /// A node with no load, no generation and no coordinates.
    pub fn new(id: impl Into<String>) -> NodeRecord {
        NodeRecord {
            id: id.into(),
            x: None,
            y: None,
            load_kw: 0.0,
            load_kvar: 0.0,
            gen_kw: 0.0,
            gen_kvar: 0.0,
            line: 0,
        }
    }

    /// Sets the peak load.
    pub fn with_load(mut self, load_kw: f64, load_kvar: f64) -> NodeRecord {
        self.load_kw = load_kw;
        self.load_kvar = load_kvar;
        self
    }

    /// Sets the existing generation.
    pub fn with_gen(mut self, gen_kw: f64, gen_kvar: f64) -> NodeRecord {
        self.gen_kw = gen_kw;
        self.gen_kvar = gen_kvar;
        self
    }

    /// Sets the coordinates.
    pub fn at(mut self, x: f64, y: f64) -> NodeRecord {
        self.x = Some(x);
        self.y = Some(y);
        self
    }
}

/// One row of branches.csv with its impedance resolved (from `type` × `length_km`, or given).
#[derive(Debug, Clone, PartialEq)]
pub struct BranchRecord {
    /// Branch id, unique within the feeder.
    pub id: String,
    /// One end (direction is not significant).
    pub from: String,
    /// The other end.
    pub to: String,
    /// Total series resistance per phase, ohm.
    pub r_ohm: f64,
    /// Total series reactance per phase, ohm.
    pub x_ohm: f64,
    /// Continuous current rating per phase, A.
    pub rating_a: f64,
    /// False for a normally-open point (ignored by the flow).
    pub closed: bool,
    /// Conductor type, where the impedance came from the library.
    pub conductor: Option<String>,
    /// Length, where given.
    pub length_km: Option<f64>,
    /// 1-based line in branches.csv (0 when not read from a file).
    pub line: usize,
}

impl BranchRecord {
    /// A closed branch with the given impedance and rating.
    pub fn new(
        id: impl Into<String>,
        from: impl Into<String>,
        to: impl Into<String>,
        r_ohm: f64,
        x_ohm: f64,
        rating_a: f64,
    ) -> BranchRecord {
        BranchRecord {
            id: id.into(),
            from: from.into(),
            to: to.into(),
            r_ohm,
            x_ohm,
            rating_a,
            closed: true,
            conductor: None,
            length_km: None,
            line: 0,
        }
    }
}

/// A node of a validated feeder.
#[derive(Debug, Clone, PartialEq)]
pub struct Node {
    /// Node id as written.
    pub id: String,
    /// Easting or longitude in the feeder's CRS.
    pub x: Option<f64>,
    /// Northing or latitude in the feeder's CRS.
    pub y: Option<f64>,
    /// Peak demand, kW.
    pub load_kw: f64,
    /// Peak reactive demand, kvar (> 0 inductive).
    pub load_kvar: f64,
    /// Existing generation, kW.
    pub gen_kw: f64,
    /// Existing generation, kvar (> 0 injected).
    pub gen_kvar: f64,
    /// 1-based line in nodes.csv (0 when built in memory).
    pub line: usize,
}

/// A closed branch of a validated feeder, oriented away from the head.
#[derive(Debug, Clone, PartialEq)]
pub struct Branch {
    /// Branch id as written.
    pub id: String,
    /// End toward the head.
    pub from: BusIdx,
    /// End away from the head; always `BusIdx(b + 1)` for branch `b`.
    pub to: BusIdx,
    /// Series resistance per phase, ohm.
    pub r_ohm: f64,
    /// Series reactance per phase, ohm.
    pub x_ohm: f64,
    /// Continuous current rating per phase, A.
    pub rating_a: f64,
    /// Conductor type, where the impedance came from the library.
    pub conductor: Option<String>,
    /// Length, where given.
    pub length_km: Option<f64>,
    /// 1-based line in branches.csv (0 when built in memory).
    pub line: usize,
}

/// A normally-open branch (an open point to a neighbour), kept for maps and reports.
#[derive(Debug, Clone, PartialEq)]
pub struct OpenBranch {
    /// Branch id as written.
    pub id: String,
    /// One end as written (may be a node of another feeder).
    pub from: String,
    /// The other end as written.
    pub to: String,
    /// 1-based line in branches.csv.
    pub line: usize,
}

/// A validated radial feeder.
///
/// Guarantees: the closed branches form one tree spanning every node, rooted at the head; node
/// and branch ids are unique; every number is finite, ratings and nominal voltage are > 0,
/// impedances are ≥ 0 and not both zero. Nodes are in depth-first preorder from the head, so
/// the parent of node `i` has an index below `i` and the subtree of node `i` is the contiguous
/// range `i..subtree_end(i)`. Branch `b` feeds node `b + 1`. Later code takes `&Feeder` and never
/// re-checks any of this.
#[derive(Debug, Clone)]
pub struct Feeder {
    pub(crate) id: String,
    pub(crate) folder: PathBuf,
    pub(crate) header: FeederHeader,
    pub(crate) nodes: Vec<Node>,
    pub(crate) parent: Vec<BusIdx>,
    pub(crate) subtree_end: Vec<u32>,
    pub(crate) branches: Vec<Branch>,
    pub(crate) open_branches: Vec<OpenBranch>,
    pub(crate) by_id: HashMap<String, BusIdx>,
    pub(crate) warnings: Vec<Diagnostic>,
}

impl Feeder {
    /// Feeder id (the folder name).
    pub fn id(&self) -> &str {
        &self.id
    }

    /// The folder the feeder was read from (for in-memory feeders, a path named after the id).
    pub fn folder(&self) -> &std::path::Path {
        &self.folder
    }

    /// Header settings.
    pub fn header(&self) -> &FeederHeader {
        &self.header
    }

    /// Number of nodes, the head included.
    pub fn n_nodes(&self) -> usize {
        self.nodes.len()
    }

    /// Number of closed branches (`n_nodes() - 1`).
    pub fn n_branches(&self) -> usize {
        self.branches.len()
    }

    /// All nodes in depth-first order; index with [`BusIdx::index`].
    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    /// One node.
    pub fn node(&self, bus: BusIdx) -> &Node {
        &self.nodes[bus.index()]
    }

    /// All closed branches; branch `b` feeds node `b + 1`.
    pub fn branches(&self) -> &[Branch] {
        &self.branches
    }

    /// One branch.
    pub fn branch(&self, branch: BranchIdx) -> &Branch {
        &self.branches[branch.index()]
    }

    /// Normally-open branches, in file order.
    pub fn open_branches(&self) -> &[OpenBranch] {
        &self.open_branches
    }

    /// Parent of every node (the head is its own parent), indexed by [`BusIdx::index`].
    pub fn parents(&self) -> &[BusIdx] {
        &self.parent
    }

    /// Parent of a node; `None` for the head.
    pub fn parent(&self, bus: BusIdx) -> Option<BusIdx> {
        (bus != BusIdx::HEAD).then(|| self.parent[bus.index()])
    }

    /// The branch feeding a node; `None` for the head.
    pub fn feeding_branch(&self, bus: BusIdx) -> Option<BranchIdx> {
        (bus != BusIdx::HEAD).then(|| BranchIdx::new(bus.0 - 1))
    }

    /// One past the last node of the subtree rooted at `bus` (the subtree is `bus..end`).
    pub fn subtree_end(&self, bus: BusIdx) -> BusIdx {
        BusIdx(self.subtree_end[bus.index()])
    }

    /// The node with this id.
    pub fn node_by_id(&self, id: &str) -> Option<BusIdx> {
        self.by_id.get(id).copied()
    }

    /// The id of a node that `id` names but for letter case (ASCII) and surrounding spaces,
    /// for a "did you mean" in messages: `None` when `id` is a node's exact id or no id is
    /// that close. The first such node in order wins.
    pub fn node_id_like(&self, id: &str) -> Option<&str> {
        if self.by_id.contains_key(id) {
            return None;
        }
        let wanted = id.trim();
        self.nodes
            .iter()
            .map(|node| node.id.as_str())
            .find(|candidate| candidate.eq_ignore_ascii_case(wanted))
    }

    /// " (did you mean "x"?)" for a message about node `id`, naming the first node of
    /// `feeders` that `id` names but for letter case and surrounding spaces
    /// ([`Feeder::node_id_like`]); empty when there is none.
    pub fn did_you_mean<'f>(feeders: impl IntoIterator<Item = &'f Feeder>, id: &str) -> String {
        feeders
            .into_iter()
            .find_map(|feeder| feeder.node_id_like(id))
            .map_or(String::new(), |like| format!(" (did you mean {like:?}?)"))
    }

    /// Warnings found while reading (unknown columns and the like).
    pub fn warnings(&self) -> &[Diagnostic] {
        &self.warnings
    }

    /// Nodes from `bus` up to the head, `bus` first.
    pub fn path_to_head(&self, bus: BusIdx) -> impl Iterator<Item = BusIdx> + '_ {
        let mut next = Some(bus);
        std::iter::from_fn(move || {
            let current = next?;
            next = self.parent(current);
            Some(current)
        })
    }
}
