//! The generator: settings, the seeded growth of a radial tree, loads and solar, conductor sizing
//! and normally-open points.
//!
//! The tree is grown line by line. The trunk leaves the head first; then, until the node count is
//! reached, a tap node is drawn (trunk nodes are the likeliest taps, then laterals, then
//! sub-laterals) and a new line of the next level is run from it: laterals (level 1),
//! sub-laterals (level 2) and short spurs (level 3). Line lengths in sections grow with the cube
//! root of the node count, so the deepest path stays short enough for an 11 kV feeder; sections
//! get shorter as feeders get larger (a denser area).
//!
//! Loads are drawn per node and then scaled down as a whole to a peak-load budget, by default
//! [`DEFAULT_LOAD_BUDGET_KW_PER_KV`] × nominal kV (about 270 A at the head whatever the voltage):
//! a large feeder has many small loads rather than an absurd total. Conductors are sized from
//! the peak current downstream of each section with a 25 % margin, never lighter than the
//! section's place calls for (heavy on the first part of the trunk, medium on the rest of it and
//! at the start of laterals). With these choices a test-only sweep finds, for 11 kV feeders of 30
//! to 5,000 nodes, base-case voltages of about 0.95–1.0 pu at peak and 0.99–1.0 pu at min-load
//! (loads × 0.3 with the existing solar), and no branch above its rating.
//!
//! Open points (closed = false) run from line ends to the nearest node of another line,
//! 46 m to 1 km away: one per 400 nodes, at least one from four nodes up, at most sixteen.
//!
//! Only integer arithmetic and exactly rounded floating-point operations are used, so the output
//! is the same on every platform.

use headroom_model::{BranchRecord, Feeder, FeederHeader, ModelErrors, NodeRecord};

use crate::conductors::{Conductor, ConductorKind, N_TIERS, conductor_library, library_position};
use crate::rng::Rng;

/// Default peak-load budget per kV of nominal voltage, kW/kV. At 11 kV this is 4.95 MW, about
/// 270 A at 0.95 power factor: a well-loaded but not overloaded MV feeder.
pub const DEFAULT_LOAD_BUDGET_KW_PER_KV: f64 = 450.0;

/// Default coordinate reference of generated coordinates (UTM zone 30N, metres).
pub const DEFAULT_CRS: &str = "EPSG:32630";

/// One of eight compass directions, for the first heading of the trunk.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Compass {
    /// Towards increasing easting.
    East,
    /// Between east and north.
    NorthEast,
    /// Towards increasing northing.
    North,
    /// Between north and west.
    NorthWest,
    /// Towards decreasing easting.
    West,
    /// Between south and west.
    SouthWest,
    /// Towards decreasing northing.
    South,
    /// Between south and east.
    SouthEast,
}

impl Compass {
    /// All eight, anticlockwise from east.
    pub const ALL: [Compass; 8] = [
        Compass::East,
        Compass::NorthEast,
        Compass::North,
        Compass::NorthWest,
        Compass::West,
        Compass::SouthWest,
        Compass::South,
        Compass::SouthEast,
    ];

    /// Unit vector (easting, northing).
    pub fn unit_vector(self) -> (f64, f64) {
        const D: f64 = std::f64::consts::FRAC_1_SQRT_2;
        match self {
            Compass::East => (1.0, 0.0),
            Compass::NorthEast => (D, D),
            Compass::North => (0.0, 1.0),
            Compass::NorthWest => (-D, D),
            Compass::West => (-1.0, 0.0),
            Compass::SouthWest => (-D, -D),
            Compass::South => (0.0, -1.0),
            Compass::SouthEast => (D, -D),
        }
    }
}

/// What to generate. Start from [`SynthSettings::new`] (or `Default`) and change fields.
#[derive(Debug, Clone, PartialEq)]
pub struct SynthSettings {
    /// Number of nodes, the head included (0 is taken as 1).
    pub n_nodes: usize,
    /// Seed; the same settings always give the same feeder.
    pub seed: u64,
    /// Line-to-line nominal voltage, kV (default 11.0).
    pub nominal_kv: f64,
    /// Voltage held at the head, pu (default 1.0).
    pub head_voltage_pu: f64,
    /// Total peak load of the feeder is scaled down to at most this, kW. `None` (default):
    /// [`DEFAULT_LOAD_BUDGET_KW_PER_KV`] × `nominal_kv`.
    pub peak_load_budget_kw: Option<f64>,
    /// Share of lines laid as cable rather than overhead, 0–1 (default 0.3). The first sections
    /// out of the substation are always cable.
    pub cable_share: f64,
    /// Display name in feeder.toml (default `synthetic <n_nodes> nodes seed <seed>`).
    pub name: Option<String>,
    /// Substation grouping in feeder.toml.
    pub substation: Option<String>,
    /// Region grouping in feeder.toml.
    pub region: Option<String>,
    /// Coordinate reference written to feeder.toml (default [`DEFAULT_CRS`]).
    pub crs: Option<String>,
    /// Easting of the head, m (default 430 000, a fictional area of UTM zone 30N).
    pub head_easting_m: f64,
    /// Northing of the head, m (default 5 720 000).
    pub head_northing_m: f64,
    /// First heading of the trunk (default east).
    pub trunk_heading: Compass,
}

impl SynthSettings {
    /// Defaults for `n_nodes` nodes and `seed`.
    pub fn new(n_nodes: usize, seed: u64) -> SynthSettings {
        SynthSettings {
            n_nodes,
            seed,
            nominal_kv: 11.0,
            head_voltage_pu: 1.0,
            peak_load_budget_kw: None,
            cable_share: 0.3,
            name: None,
            substation: None,
            region: None,
            crs: Some(DEFAULT_CRS.to_string()),
            head_easting_m: 430_000.0,
            head_northing_m: 5_720_000.0,
            trunk_heading: Compass::East,
        }
    }

    /// The peak-load budget in force, kW.
    pub fn resolved_load_budget_kw(&self) -> f64 {
        self.peak_load_budget_kw
            .unwrap_or(DEFAULT_LOAD_BUDGET_KW_PER_KV * self.nominal_kv)
    }
}

impl Default for SynthSettings {
    /// 100 nodes, seed 0.
    fn default() -> SynthSettings {
        SynthSettings::new(100, 0)
    }
}

/// A generated feeder, as records ready for [`Feeder::from_records`] or for writing.
#[derive(Debug, Clone, PartialEq)]
pub struct SyntheticFeeder {
    /// feeder.toml.
    pub header: FeederHeader,
    /// nodes.csv rows; the head is `n0`, node `nK` is fed by branch `bK`.
    pub nodes: Vec<NodeRecord>,
    /// branches.csv rows: the closed branches `b1..` in node order, then the normally-open
    /// points `open1..`. Every row carries `conductor` and `length_km` and the impedance and
    /// rating resolved from them.
    pub branches: Vec<BranchRecord>,
    /// The conductor library the branches refer to.
    pub conductors: Vec<Conductor>,
}

impl SyntheticFeeder {
    /// Validates the records into a feeder with id `id`.
    pub fn to_feeder(&self, id: &str) -> Result<Feeder, ModelErrors> {
        Feeder::from_records(
            id,
            self.header.clone(),
            self.nodes.clone(),
            self.branches.clone(),
        )
    }

    /// Total peak load, kW.
    pub fn total_load_kw(&self) -> f64 {
        self.nodes.iter().map(|node| node.load_kw).sum()
    }

    /// Total existing generation, kW.
    pub fn total_gen_kw(&self) -> f64 {
        self.nodes.iter().map(|node| node.gen_kw).sum()
    }
}

// Independent random streams, one per stage.
const STREAM_TOPOLOGY: u64 = 1;
const STREAM_LOADS: u64 = 2;
const STREAM_TIES: u64 = 3;

/// Deepest line level: 0 trunk, 1 lateral, 2 sub-lateral, 3 spur.
const MAX_LEVEL: u8 = 3;
/// Relative chance of a tap on a node of level 0, 1, 2 (per node).
const TAP_WEIGHT: [u64; MAX_LEVEL as usize] = [4, 3, 1];
/// A node with this many children is avoided as a tap.
const MAX_CHILDREN: u32 = 3;
/// Mean section length by level before the density factor, km.
const MEAN_SECTION_KM: [f64; 4] = [0.45, 0.35, 0.25, 0.15];
const MIN_SECTION_KM: f64 = 0.05;
const MAX_SECTION_KM: f64 = 1.0;
/// Share of nodes with a load, and of overhead sections that are short cable crossings.
const LOADED_SHARE: f64 = 0.75;
const CROSSING_SHARE: f64 = 0.04;
/// Conductors are sized so that rating ≥ this × peak current downstream.
const SIZING_MARGIN: f64 = 1.25;
/// Open points join nodes at least and at most this far apart (as the crow flies), m; the
/// lower bound keeps a tie's length (1.1 × distance) at 0.05 km or more.
const TIE_MIN_M: f64 = 46.0;
const TIE_REACH_M: f64 = 1000.0;

/// A node while the tree grows.
struct Draft {
    /// Parent position; the head's is its own (0).
    parent: usize,
    level: u8,
    line: usize,
    /// 0-based section number within its line.
    section_in_line: u32,
    x_m: f64,
    y_m: f64,
    /// Direction of the section arriving here (unit vector).
    heading: (f64, f64),
    /// Length of the feeding section, km (0 for the head).
    length_km: f64,
    /// How the feeding section is laid.
    kind: ConductorKind,
    n_children: u32,
}

/// A line: trunk, lateral, sub-lateral or spur.
struct Line {
    level: u8,
    family: usize,
}

/// Generates a feeder. Deterministic: the same settings give the same records on every platform.
///
/// Panics only on nonsensical settings: `nominal_kv` not finite and > 0, or `cable_share`
/// outside 0–1.
pub fn generate(settings: &SynthSettings) -> SyntheticFeeder {
    assert!(
        settings.nominal_kv.is_finite() && settings.nominal_kv > 0.0,
        "nominal_kv must be finite and > 0"
    );
    assert!(
        (0.0..=1.0).contains(&settings.cable_share),
        "cable_share must be within 0–1"
    );
    let n_nodes = settings.n_nodes.max(1);
    let (drafts, lines) = grow_tree(settings, n_nodes);
    let (loads, gens) = draw_loads(settings, drafts.len());
    let library = conductor_library(settings.nominal_kv);
    let section_conductor = size_conductors(settings, &drafts, &lines, &loads, &library);
    let ties = place_ties(settings, &drafts);

    let nodes: Vec<NodeRecord> = drafts
        .iter()
        .enumerate()
        .map(|(i, draft)| {
            let (load_kw, load_kvar) = loads[i];
            NodeRecord::new(node_id(i))
                .at(draft.x_m, draft.y_m)
                .with_load(load_kw, load_kvar)
                .with_gen(gens[i], 0.0)
        })
        .collect();

    let mut branches = Vec::with_capacity(drafts.len() - 1 + ties.len());
    for (i, draft) in drafts.iter().enumerate().skip(1) {
        branches.push(typed_branch(
            format!("b{i}"),
            node_id(draft.parent),
            node_id(i),
            &library[section_conductor[i]],
            draft.length_km,
            true,
        ));
    }
    for (k, tie) in ties.iter().enumerate() {
        let position = library_position(drafts[tie.from].kind, 0, 1);
        branches.push(typed_branch(
            format!("open{}", k + 1),
            node_id(tie.from),
            node_id(tie.to),
            &library[position],
            tie.length_km,
            false,
        ));
    }

    let mut header = FeederHeader::new(
        settings
            .name
            .clone()
            .unwrap_or_else(|| format!("synthetic {n_nodes} nodes seed {}", settings.seed)),
        settings.nominal_kv,
        node_id(0),
    );
    header.head_voltage_pu = settings.head_voltage_pu;
    header.substation = settings.substation.clone();
    header.region = settings.region.clone();
    header.crs = settings.crs.clone();

    SyntheticFeeder {
        header,
        nodes,
        branches,
        conductors: library,
    }
}

fn node_id(position: usize) -> String {
    format!("n{position}")
}

fn typed_branch(
    id: String,
    from: String,
    to: String,
    conductor: &Conductor,
    length_km: f64,
    closed: bool,
) -> BranchRecord {
    let mut branch = BranchRecord::new(
        id,
        from,
        to,
        conductor.r_ohm_per_km * length_km,
        conductor.x_ohm_per_km * length_km,
        conductor.rating_a,
    );
    branch.closed = closed;
    branch.conductor = Some(conductor.name.clone());
    branch.length_km = Some(length_km);
    branch
}

/// Rounds to a multiple of `1 / per_unit` (exact: `round` and the division are IEEE operations).
fn round_to(value: f64, per_unit: f64) -> f64 {
    (value * per_unit).round() / per_unit
}

fn normalized((x, y): (f64, f64)) -> (f64, f64) {
    let length = (x * x + y * y).sqrt();
    (x / length, y / length)
}

/// The vector turned a quarter anticlockwise.
fn perpendicular((x, y): (f64, f64)) -> (f64, f64) {
    (-y, x)
}

/// Largest k with k³ ≤ n.
fn integer_cube_root(n: usize) -> u32 {
    let mut k: u64 = 0;
    while (k + 1) * (k + 1) * (k + 1) <= n as u64 {
        k += 1;
    }
    k as u32
}

/// Range of a line's length in sections, by level; `scale` grows with the cube root of the
/// node count.
fn sections_range(level: u8, scale: u32) -> (u32, u32) {
    match level {
        0 => (scale, scale + 2 * scale / 5),
        1 => ((scale / 4).max(1), (3 * scale / 4).max(1)),
        2 => ((scale / 6).max(1), (scale / 2).max(1)),
        _ => (1, (scale / 5).max(1)),
    }
}

fn grow_tree(settings: &SynthSettings, n_nodes: usize) -> (Vec<Draft>, Vec<Line>) {
    let mut rng = Rng::for_stream(settings.seed, STREAM_TOPOLOGY);
    let scale = (3 * integer_cube_root(n_nodes)).div_ceil(2).max(2);
    // Larger feeders cover a denser area: shorter sections (sqrt is exactly rounded).
    let density = (300.0 / n_nodes as f64).sqrt().clamp(0.35, 1.0);

    let mut drafts = Vec::with_capacity(n_nodes);
    let mut lines: Vec<Line> = Vec::new();
    drafts.push(Draft {
        parent: 0,
        level: 0,
        line: 0,
        section_in_line: 0,
        x_m: settings.head_easting_m,
        y_m: settings.head_northing_m,
        heading: settings.trunk_heading.unit_vector(),
        length_km: 0.0,
        kind: ConductorKind::Cable,
        n_children: 0,
    });
    // Tap candidates by level (the head is never a tap: one trunk per feeder).
    let mut taps: [Vec<usize>; MAX_LEVEL as usize] = Default::default();

    let mut first_line = true;
    while drafts.len() < n_nodes {
        let remaining = (n_nodes - drafts.len()) as u32;
        let (tap, level) = if first_line {
            (0, 0)
        } else {
            let tap = draw_tap(&mut rng, &taps, &drafts);
            (tap, drafts[tap].level + 1)
        };
        first_line = false;
        let (low, high) = sections_range(level, scale);
        let n_sections = rng.between(low, high).min(remaining);
        let line_kind = if rng.chance(settings.cable_share) {
            ConductorKind::Cable
        } else {
            ConductorKind::Overhead
        };
        let family = rng.index(2);
        let line = lines.len();
        lines.push(Line { level, family });

        let parent_heading = drafts[tap].heading;
        let mut heading = if level == 0 {
            parent_heading
        } else {
            // Leave to one side, roughly square to the parent line.
            let side = if rng.chance(0.5) { 1.0 } else { -1.0 };
            let (px, py) = perpendicular(parent_heading);
            let forward = rng.uniform(-0.2, 0.6);
            normalized((
                side * px + forward * parent_heading.0,
                side * py + forward * parent_heading.1,
            ))
        };
        // Substation exit: the first one to three trunk sections are cable.
        let n_exit_sections = if level == 0 { rng.between(1, 3) } else { 0 };

        let mut parent = tap;
        for section in 0..n_sections {
            let (px, py) = perpendicular(heading);
            let wobble = rng.uniform(-0.2, 0.2);
            heading = normalized((heading.0 + wobble * px, heading.1 + wobble * py));
            let length_km = round_to(
                (density * MEAN_SECTION_KM[level as usize] * rng.uniform(0.4, 1.6))
                    .clamp(MIN_SECTION_KM, MAX_SECTION_KM),
                1000.0,
            );
            // Lines are not straight: the crow-flies step is 0–10 % shorter than the length.
            let step_m = length_km * 1000.0 / rng.uniform(1.0, 1.1);
            let kind = if section < n_exit_sections || rng.chance(CROSSING_SHARE) {
                ConductorKind::Cable
            } else {
                line_kind
            };
            let x_m = round_to(drafts[parent].x_m + step_m * heading.0, 10.0);
            let y_m = round_to(drafts[parent].y_m + step_m * heading.1, 10.0);
            let position = drafts.len();
            drafts[parent].n_children += 1;
            drafts.push(Draft {
                parent,
                level,
                line,
                section_in_line: section,
                x_m,
                y_m,
                heading,
                length_km,
                kind,
                n_children: 0,
            });
            if level < MAX_LEVEL {
                taps[level as usize].push(position);
            }
            parent = position;
        }
    }
    (drafts, lines)
}

/// Draws a tap node: a level by weight × count, then a node of that level, avoiding crowded
/// nodes for a few tries.
fn draw_tap(rng: &mut Rng, taps: &[Vec<usize>; MAX_LEVEL as usize], drafts: &[Draft]) -> usize {
    let total: u64 = taps
        .iter()
        .zip(TAP_WEIGHT)
        .map(|(list, weight)| list.len() as u64 * weight)
        .sum();
    let mut choice = 0;
    for _ in 0..16 {
        let mut ticket = rng.below(total);
        for (list, weight) in taps.iter().zip(TAP_WEIGHT) {
            let span = list.len() as u64 * weight;
            if ticket < span {
                choice = list[(ticket / weight) as usize];
                break;
            }
            ticket -= span;
        }
        if drafts[choice].n_children < MAX_CHILDREN {
            break;
        }
    }
    choice
}

/// Peak (load_kw, load_kvar) and existing solar gen_kw per node, scaled to the load budget.
fn draw_loads(settings: &SynthSettings, n_nodes: usize) -> (Vec<(f64, f64)>, Vec<f64>) {
    let mut rng = Rng::for_stream(settings.seed, STREAM_LOADS);
    let solar_share = rng.uniform(0.10, 0.20);
    let mut loads = vec![(0.0, 0.0); n_nodes];
    // kvar per kW from the power factor: tan(acos(pf)) = sqrt(1/pf² − 1).
    let mut kvar_per_kw = vec![0.0; n_nodes];
    let mut gens = vec![0.0; n_nodes];
    for i in 1..n_nodes {
        if rng.chance(LOADED_SHARE) {
            let pick = rng.unit_f64();
            let load_kw = if pick < 0.55 {
                rng.uniform(5.0, 60.0)
            } else if pick < 0.85 {
                rng.uniform(60.0, 180.0)
            } else {
                rng.uniform(180.0, 300.0)
            };
            let power_factor = rng.uniform(0.90, 0.98);
            loads[i].0 = load_kw;
            kvar_per_kw[i] = (1.0 / (power_factor * power_factor) - 1.0).sqrt();
        }
        if rng.chance(solar_share) {
            let pick = rng.unit_f64();
            gens[i] = if pick < 0.6 {
                rng.uniform(10.0, 60.0)
            } else if pick < 0.9 {
                rng.uniform(60.0, 150.0)
            } else {
                rng.uniform(150.0, 300.0)
            };
        }
    }
    let natural_kw: f64 = loads.iter().map(|load| load.0).sum();
    let budget_kw = settings.resolved_load_budget_kw();
    let factor = if natural_kw > budget_kw {
        budget_kw / natural_kw
    } else {
        1.0
    };
    for i in 0..n_nodes {
        let load_kw = round_to(loads[i].0 * factor, 1000.0);
        loads[i] = (load_kw, round_to(load_kw * kvar_per_kw[i], 1000.0));
        gens[i] = round_to(gens[i] * factor, 1000.0);
    }
    (loads, gens)
}

/// The library position of each section's conductor (index 0, the head, is unused).
fn size_conductors(
    settings: &SynthSettings,
    drafts: &[Draft],
    lines: &[Line],
    loads: &[(f64, f64)],
    library: &[Conductor],
) -> Vec<usize> {
    let n = drafts.len();
    // Peak power downstream of each node (parents always come before children).
    let mut downstream = loads.to_vec();
    for i in (1..n).rev() {
        let parent = drafts[i].parent;
        downstream[parent].0 += downstream[i].0;
        downstream[parent].1 += downstream[i].1;
    }
    let trunk_sections = drafts.iter().filter(|d| d.line == 0).count() as u32;
    let heavy_trunk_sections = (3 * trunk_sections).div_ceil(5);
    let kv_times_sqrt3 = settings.nominal_kv * 3f64.sqrt();

    let mut positions = vec![0; n];
    for i in 1..n {
        let draft = &drafts[i];
        let line = &lines[draft.line];
        let min_tier = match line.level {
            0 if draft.section_in_line < heavy_trunk_sections => 2,
            0 => 1,
            1 if draft.section_in_line < 3 => 1,
            _ => 0,
        };
        let (p_kw, q_kvar) = downstream[i];
        let current_a = (p_kw * p_kw + q_kvar * q_kvar).sqrt() / kv_times_sqrt3;
        // A cable crossing in an overhead line takes the cable of the line's family number.
        let family = line.family;
        let tier = (min_tier..N_TIERS)
            .find(|&tier| {
                let rating_a = library[library_position(draft.kind, family, tier)].rating_a;
                rating_a >= SIZING_MARGIN * current_a
            })
            .unwrap_or(N_TIERS - 1);
        positions[i] = library_position(draft.kind, family, tier);
    }
    positions
}

/// A normally-open point between two nodes.
struct Tie {
    from: usize,
    to: usize,
    length_km: f64,
}

/// A few open points from line ends to the nearest node of another line, within reach.
fn place_ties(settings: &SynthSettings, drafts: &[Draft]) -> Vec<Tie> {
    let n = drafts.len();
    if n < 4 {
        return Vec::new();
    }
    let mut rng = Rng::for_stream(settings.seed, STREAM_TIES);
    let target = (n / 400).clamp(1, 16);
    let leaves: Vec<usize> = (1..n).filter(|&i| drafts[i].n_children == 0).collect();
    let mut ties: Vec<Tie> = Vec::new();
    let is_tied = |ties: &[Tie], a: usize| ties.iter().any(|tie| tie.from == a || tie.to == a);

    for _ in 0..8 * target {
        if ties.len() == target {
            break;
        }
        let leaf = leaves[rng.index(leaves.len())];
        if is_tied(&ties, leaf) {
            continue;
        }
        let candidate = nearest(drafts, leaf, TIE_MIN_M, |j| {
            drafts[j].line != drafts[leaf].line && j != drafts[leaf].parent && !is_tied(&ties, j)
        });
        if let Some((to, distance_m)) = candidate
            && (TIE_MIN_M..=TIE_REACH_M).contains(&distance_m)
        {
            ties.push(tie(leaf, to, distance_m));
        }
    }
    if ties.is_empty() {
        // Small or stringy feeders: any node that is not a neighbour, however far.
        let leaf = *leaves.last().expect("a tree of 2+ nodes has a leaf");
        if let Some((to, distance_m)) = nearest(drafts, leaf, 0.0, |j| {
            j != drafts[leaf].parent && drafts[j].parent != leaf
        }) {
            ties.push(tie(leaf, to, distance_m));
        }
    }
    ties
}

fn tie(from: usize, to: usize, distance_m: f64) -> Tie {
    Tie {
        from,
        to,
        length_km: round_to((1.1 * distance_m / 1000.0).max(MIN_SECTION_KM), 1000.0),
    }
}

/// The nearest node to `from` (head excluded), at least `min_distance_m` away, that passes
/// `allowed`, with its distance in m; equal distances go to the lowest position.
fn nearest(
    drafts: &[Draft],
    from: usize,
    min_distance_m: f64,
    allowed: impl Fn(usize) -> bool,
) -> Option<(usize, f64)> {
    let (x0, y0) = (drafts[from].x_m, drafts[from].y_m);
    let min_squared = min_distance_m * min_distance_m;
    let mut best: Option<(usize, f64)> = None;
    for (j, draft) in drafts.iter().enumerate().skip(1) {
        if j == from {
            continue;
        }
        let squared = (draft.x_m - x0) * (draft.x_m - x0) + (draft.y_m - y0) * (draft.y_m - y0);
        if squared >= min_squared
            && best.is_none_or(|(_, best_squared)| squared < best_squared)
            && allowed(j)
        {
            best = Some((j, squared));
        }
    }
    best.map(|(j, squared)| (j, squared.sqrt()))
}

#[cfg(test)]
mod tests {
    use super::*;

    const SIZES: [usize; 16] = [
        2, 3, 4, 5, 6, 7, 9, 12, 20, 33, 64, 100, 250, 600, 1200, 2000,
    ];

    fn seeds_for(n_nodes: usize) -> std::ops::Range<u64> {
        if n_nodes <= 100 { 0..12 } else { 0..3 }
    }

    #[test]
    fn same_settings_give_the_same_feeder() {
        for n_nodes in [2, 50, 700] {
            let settings = SynthSettings::new(n_nodes, 99);
            assert_eq!(generate(&settings), generate(&settings));
        }
        assert_ne!(
            generate(&SynthSettings::new(50, 1)),
            generate(&SynthSettings::new(50, 2))
        );
    }

    #[test]
    fn feeders_are_radial_and_valid_with_the_exact_node_count() {
        for n_nodes in SIZES {
            for seed in seeds_for(n_nodes) {
                let synthetic = generate(&SynthSettings::new(n_nodes, seed));
                let context = format!("n {n_nodes} seed {seed}");
                assert_eq!(synthetic.nodes.len(), n_nodes, "{context}");
                let feeder = synthetic
                    .to_feeder("valid")
                    .unwrap_or_else(|errors| panic!("{context}: {errors}"));
                assert_eq!(feeder.n_nodes(), n_nodes, "{context}");
                assert_eq!(feeder.n_branches(), n_nodes - 1, "{context}");
                let n_open = synthetic.branches.iter().filter(|b| !b.closed).count();
                assert_eq!(feeder.open_branches().len(), n_open, "{context}");
                if n_nodes >= 4 {
                    assert!(n_open >= 1, "{context}: no open point");
                }
                for open in feeder.open_branches() {
                    assert!(feeder.node_by_id(&open.from).is_some(), "{context}");
                    assert!(feeder.node_by_id(&open.to).is_some(), "{context}");
                    assert_ne!(open.from, open.to, "{context}");
                }
            }
        }
    }

    #[test]
    fn tiny_node_counts_give_just_the_head() {
        for n_nodes in [0, 1] {
            let synthetic = generate(&SynthSettings::new(n_nodes, 5));
            assert_eq!(synthetic.nodes.len(), 1);
            assert!(synthetic.branches.is_empty());
            assert_eq!(synthetic.to_feeder("one").unwrap().n_nodes(), 1);
        }
    }

    #[test]
    fn every_number_is_finite_and_in_its_range() {
        for n_nodes in [3, 40, 800, 2000] {
            for seed in 0..3 {
                let synthetic = generate(&SynthSettings::new(n_nodes, seed));
                let context = format!("n {n_nodes} seed {seed}");
                for node in &synthetic.nodes {
                    let (x, y) = (node.x.unwrap(), node.y.unwrap());
                    for v in [
                        x,
                        y,
                        node.load_kw,
                        node.load_kvar,
                        node.gen_kw,
                        node.gen_kvar,
                    ] {
                        assert!(v.is_finite(), "{context}: {node:?}");
                    }
                    assert!((0.0..=300.0).contains(&node.load_kw), "{context}: {node:?}");
                    assert!((0.0..=300.0).contains(&node.gen_kw), "{context}: {node:?}");
                    assert_eq!(node.gen_kvar, 0.0);
                    if node.load_kw >= 1.0 {
                        // Power factor 0.90–0.98: kvar/kW between tan(acos 0.98) and tan(acos 0.9).
                        let ratio = node.load_kvar / node.load_kw;
                        assert!((0.2025..=0.4848).contains(&ratio), "{context}: {node:?}");
                    }
                }
                for branch in &synthetic.branches {
                    let length_km = branch.length_km.unwrap();
                    for v in [branch.r_ohm, branch.x_ohm, branch.rating_a, length_km] {
                        assert!(v.is_finite() && v > 0.0, "{context}: {branch:?}");
                    }
                    if branch.closed {
                        assert!((0.05..=1.0).contains(&length_km), "{context}: {branch:?}");
                    }
                    let name = branch.conductor.as_deref().unwrap();
                    let conductor = synthetic
                        .conductors
                        .iter()
                        .find(|c| c.name == name)
                        .unwrap();
                    assert_eq!(branch.r_ohm, conductor.r_ohm_per_km * length_km);
                    assert_eq!(branch.x_ohm, conductor.x_ohm_per_km * length_km);
                    assert_eq!(branch.rating_a, conductor.rating_a);
                }
            }
        }
    }

    #[test]
    fn branch_lengths_agree_with_coordinates() {
        let synthetic = generate(&SynthSettings::new(1500, 8));
        let position = |id: &str| {
            let node = synthetic.nodes.iter().find(|n| n.id == id).unwrap();
            (node.x.unwrap(), node.y.unwrap())
        };
        for branch in &synthetic.branches {
            let (x1, y1) = position(&branch.from);
            let (x2, y2) = position(&branch.to);
            let distance_m = ((x2 - x1) * (x2 - x1) + (y2 - y1) * (y2 - y1)).sqrt();
            let length_m = branch.length_km.unwrap() * 1000.0;
            // Routes are 0–10 % longer than the straight line (ties: 10 %); coordinates are
            // rounded to 0.1 m and tie lengths to 1 m.
            assert!(distance_m <= length_m + 0.2, "{branch:?} {distance_m}");
            assert!(
                distance_m * 1.1 >= length_m - 0.6,
                "{branch:?} {distance_m}"
            );
        }
    }

    #[test]
    fn load_follows_the_budget_and_solar_sits_on_a_tenth_to_a_fifth_of_nodes() {
        let small = generate(&SynthSettings::new(30, 3));
        assert!(small.total_load_kw() < 4950.0);
        for n_nodes in [2000, 5000] {
            let settings = SynthSettings::new(n_nodes, 4);
            let synthetic = generate(&settings);
            let budget_kw = settings.resolved_load_budget_kw();
            assert_eq!(budget_kw, 4950.0);
            let total_kw = synthetic.total_load_kw();
            assert!(
                total_kw <= budget_kw + 1.0 && total_kw >= 0.99 * budget_kw,
                "{total_kw}"
            );
            let with_solar = synthetic.nodes.iter().filter(|n| n.gen_kw > 0.0).count();
            let share = with_solar as f64 / n_nodes as f64;
            assert!((0.08..=0.22).contains(&share), "{share}");
        }
        let settings = SynthSettings {
            peak_load_budget_kw: Some(1000.0),
            ..SynthSettings::new(500, 4)
        };
        assert!(generate(&settings).total_load_kw() <= 1000.5);
    }

    #[test]
    fn mixed_sections_heavier_near_the_head() {
        let synthetic = generate(&SynthSettings::new(2000, 11));
        let feeder = synthetic.to_feeder("mixed").unwrap();
        let kind_of = |branch: &headroom_model::Branch| {
            synthetic
                .conductors
                .iter()
                .find(|c| Some(&c.name) == branch.conductor.as_ref())
                .unwrap()
                .kind
        };
        let n_cable = feeder
            .branches()
            .iter()
            .filter(|b| kind_of(b) == ConductorKind::Cable)
            .count();
        let cable_share = n_cable as f64 / feeder.n_branches() as f64;
        assert!((0.1..0.6).contains(&cable_share), "{cable_share}");
        // The substation exit is heavy cable.
        let exit = &feeder.branches()[0];
        assert_eq!(kind_of(exit), ConductorKind::Cable);
        assert!(exit.rating_a >= 380.0);
        // Ratings fall with depth: sections near the head against those feeding line ends.
        let mut depth = vec![0usize; feeder.n_nodes()];
        for (b, branch) in feeder.branches().iter().enumerate() {
            depth[b + 1] = depth[branch.from.index()] + 1;
        }
        let mean_rating = |keep: &dyn Fn(usize) -> bool| {
            let ratings: Vec<f64> = feeder
                .branches()
                .iter()
                .enumerate()
                .filter(|&(b, _)| keep(b + 1))
                .map(|(_, branch)| branch.rating_a)
                .collect();
            ratings.iter().sum::<f64>() / ratings.len() as f64
        };
        let near_head = mean_rating(&|node| depth[node] <= 3);
        let max_depth = *depth.iter().max().unwrap();
        let far_out = mean_rating(&|node| depth[node] + 5 >= max_depth);
        assert!(near_head > far_out + 50.0, "{near_head} vs {far_out}");
        // X/R by kind in the typical bands.
        for branch in feeder.branches() {
            let x_over_r = branch.x_ohm / branch.r_ohm;
            match kind_of(branch) {
                ConductorKind::Overhead => assert!((0.5..=2.0).contains(&x_over_r)),
                ConductorKind::Cable => assert!((0.25..=1.0).contains(&x_over_r)),
            }
        }
    }

    #[test]
    fn header_follows_the_settings() {
        let settings = SynthSettings {
            nominal_kv: 33.0,
            head_voltage_pu: 1.02,
            name: Some("Test feeder".to_string()),
            substation: Some("Amberlode".to_string()),
            region: Some("Veldmark Coast".to_string()),
            ..SynthSettings::new(300, 1)
        };
        let synthetic = generate(&settings);
        let header = &synthetic.header;
        assert_eq!(header.name, "Test feeder");
        assert_eq!(header.nominal_kv, 33.0);
        assert_eq!(header.head, "n0");
        assert_eq!(header.head_voltage_pu, 1.02);
        assert_eq!(header.substation.as_deref(), Some("Amberlode"));
        assert_eq!(header.region.as_deref(), Some("Veldmark Coast"));
        assert_eq!(header.crs.as_deref(), Some(DEFAULT_CRS));
        // 33 kV reactances from the 30/33 kV column.
        let acsr_50 = synthetic
            .conductors
            .iter()
            .find(|c| c.name == "ACSR-50")
            .unwrap();
        assert_eq!(acsr_50.x_ohm_per_km, 0.379);
        assert_eq!(settings.resolved_load_budget_kw(), 450.0 * 33.0);
        let head = &synthetic.nodes[0];
        assert_eq!((head.x, head.y), (Some(430_000.0), Some(5_720_000.0)));
    }
}
