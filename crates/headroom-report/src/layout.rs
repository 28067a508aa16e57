//! Where each node of a feeder drawing goes, in drawing pixels: from the feeder's coordinates
//! at one scale for both axes, or, without coordinates, a schematic laid out from the tree.

use std::collections::{HashMap, VecDeque};

use crate::report::FeederReport;

/// How a drawing was laid out.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LayoutKind {
    /// From the node coordinates, one scale for both axes.
    Geographic,
    /// From the tree: depth from the head to the right, each side branch on a new row below.
    Schematic,
}

/// A feeder drawing's node positions and branch polylines, in pixels (y down).
#[derive(Debug, Clone)]
pub struct MapLayout {
    /// How it was laid out.
    pub kind: LayoutKind,
    /// Drawing width, px.
    pub width_px: f64,
    /// Drawing height, px.
    pub height_px: f64,
    /// Position of every node placed, the head included when known.
    pub node_px: HashMap<String, (f64, f64)>,
    /// One polyline per branch drawn.
    pub branch_px: Vec<Vec<(f64, f64)>>,
    /// Coordinate units per pixel (geographic only; `None` for degrees of longitude/latitude).
    pub units_per_px: Option<f64>,
}

/// Size limits of a drawing, px.
#[derive(Debug, Clone, Copy)]
pub struct Frame {
    /// Width of the drawing.
    pub width_px: f64,
    /// Smallest height.
    pub min_height_px: f64,
    /// Largest height.
    pub max_height_px: f64,
    /// Empty margin inside the drawing on every side.
    pub pad_px: f64,
}

/// True for a CRS in degrees of longitude and latitude.
fn is_lon_lat(crs: Option<&str>) -> bool {
    matches!(
        crs.map(str::to_ascii_uppercase).as_deref(),
        Some("EPSG:4326" | "OGC:CRS84" | "CRS84" | "EPSG:4258" | "EPSG:4269")
    )
}

/// Lays out a feeder: from coordinates when every node has them, else a schematic.
pub fn layout(feeder: &FeederReport, frame: Frame) -> MapLayout {
    geographic(feeder, frame).unwrap_or_else(|| schematic(feeder, frame))
}

/// The geographic layout, or `None` when a node lacks coordinates.
pub fn geographic(feeder: &FeederReport, frame: Frame) -> Option<MapLayout> {
    let mut coords: HashMap<&str, (f64, f64)> = HashMap::new();
    for w in &feeder.worst {
        coords.insert(w.node.as_str(), (w.x?, w.y?));
    }
    if coords.is_empty() {
        return None;
    }
    // The head has no node row: its coordinates come from the branch geometries.
    for b in &feeder.branches {
        for (id, xy) in [(&b.from, b.from_xy), (&b.to, b.to_xy)] {
            if let Some(xy) = xy {
                coords.entry(id.as_str()).or_insert(xy);
            }
        }
    }
    let lon_lat = is_lon_lat(feeder.info.crs.as_deref());
    let mean_y = coords.values().map(|c| c.1).sum::<f64>() / coords.len() as f64;
    // Degrees of longitude shrink with latitude; scale x so that shapes keep their proportions.
    let x_factor = if lon_lat {
        mean_y.to_radians().cos().max(0.01)
    } else {
        1.0
    };
    let (mut min_x, mut max_x, mut min_y, mut max_y) = (
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    );
    for &(x, y) in coords.values() {
        min_x = min_x.min(x * x_factor);
        max_x = max_x.max(x * x_factor);
        min_y = min_y.min(y);
        max_y = max_y.max(y);
    }
    let (span_x, span_y) = (max_x - min_x, max_y - min_y);
    let inner_w = frame.width_px - 2.0 * frame.pad_px;
    let inner_max_h = frame.max_height_px - 2.0 * frame.pad_px;
    // One scale for both axes: fit the width, unless the height would then be too large.
    let mut scale = match (span_x > 0.0, span_y > 0.0) {
        (false, false) => 1.0,
        (true, _) => inner_w / span_x,
        (false, true) => inner_max_h / span_y,
    };
    if span_y * scale > inner_max_h {
        scale = inner_max_h / span_y;
    }
    let height_px =
        (span_y * scale + 2.0 * frame.pad_px).clamp(frame.min_height_px, frame.max_height_px);
    let offset_x = (frame.width_px - span_x * scale) / 2.0;
    let offset_y = (height_px - span_y * scale) / 2.0;
    let to_px = |(x, y): (f64, f64)| {
        (
            offset_x + (x * x_factor - min_x) * scale,
            // North up: larger y is higher on the page.
            offset_y + (max_y - y) * scale,
        )
    };
    let node_px: HashMap<String, (f64, f64)> = coords
        .iter()
        .map(|(&id, &xy)| (id.to_string(), to_px(xy)))
        .collect();
    let branch_px = feeder
        .branches
        .iter()
        .filter_map(|b| {
            let a = b.from_xy.or_else(|| coords.get(b.from.as_str()).copied())?;
            let z = b.to_xy.or_else(|| coords.get(b.to.as_str()).copied())?;
            Some(vec![to_px(a), to_px(z)])
        })
        .collect();
    Some(MapLayout {
        kind: LayoutKind::Geographic,
        width_px: frame.width_px,
        height_px,
        node_px,
        branch_px,
        units_per_px: (!lon_lat && scale > 0.0).then(|| 1.0 / scale),
    })
}

/// The schematic layout: depth from the head along x, the longest path from each node drawn
/// straight on, every other branch starting a new row below. Nodes not reached from the head
/// (a mismatched folder) get rows of their own at the bottom.
pub fn schematic(feeder: &FeederReport, frame: Frame) -> MapLayout {
    // Index every node id met, head first.
    let mut ids: Vec<&str> = Vec::new();
    let mut index: HashMap<&str, usize> = HashMap::new();
    let root = feeder
        .head
        .as_deref()
        .map(|h| intern(h, &mut ids, &mut index));
    let mut edges = Vec::with_capacity(feeder.branches.len());
    for b in &feeder.branches {
        edges.push((
            intern(&b.from, &mut ids, &mut index),
            intern(&b.to, &mut ids, &mut index),
        ));
    }
    for w in &feeder.worst {
        intern(&w.node, &mut ids, &mut index);
    }
    let n = ids.len();
    let mut adjacent: Vec<Vec<usize>> = vec![Vec::new(); n];
    for &(a, z) in &edges {
        adjacent[a].push(z);
        adjacent[z].push(a);
    }

    // Breadth-first from the root: parents, depths and children in branch order.
    let mut depth = vec![usize::MAX; n];
    let mut children: Vec<Vec<usize>> = vec![Vec::new(); n];
    let mut order = Vec::with_capacity(n);
    let mut starts: Vec<usize> = root.into_iter().collect();
    starts.extend(0..n);
    for start in starts {
        if depth[start] != usize::MAX {
            continue;
        }
        depth[start] = 0;
        let mut queue = VecDeque::from([start]);
        while let Some(k) = queue.pop_front() {
            order.push(k);
            for &j in &adjacent[k] {
                if depth[j] == usize::MAX {
                    depth[j] = depth[k] + 1;
                    children[k].push(j);
                    queue.push_back(j);
                }
            }
        }
    }
    // Height of each subtree (longest path down), children before parents.
    let mut height = vec![0usize; n];
    for &k in order.iter().rev() {
        height[k] = children[k]
            .iter()
            .map(|&c| height[c] + 1)
            .max()
            .unwrap_or(0);
    }
    for list in &mut children {
        // Stable: equal heights keep branch order.
        list.sort_by_key(|&c| std::cmp::Reverse(height[c]));
    }

    // Rows in depth-first order: the first (tallest) child continues its parent's row. An
    // explicit stack, since feeders can be thousands of nodes deep.
    let mut row = vec![0usize; n];
    let mut next_row = 0usize;
    let tree_roots: Vec<usize> = order.iter().copied().filter(|&k| depth[k] == 0).collect();
    let mut stack: Vec<(usize, bool)> = tree_roots.iter().rev().map(|&k| (k, false)).collect();
    while let Some((k, continues)) = stack.pop() {
        if !continues {
            row[k] = next_row;
            next_row += 1;
        }
        for (i, &c) in children[k].iter().enumerate().rev() {
            if i == 0 {
                row[c] = row[k];
            }
            stack.push((c, i == 0));
        }
    }
    let n_rows = next_row.max(1);
    let max_depth = depth
        .iter()
        .copied()
        .filter(|&d| d != usize::MAX)
        .max()
        .unwrap_or(0);

    let inner_w = frame.width_px - 2.0 * frame.pad_px;
    let column_px = if max_depth == 0 {
        0.0
    } else {
        (inner_w / max_depth as f64).min(80.0)
    };
    let inner_max_h = frame.max_height_px - 2.0 * frame.pad_px;
    let row_px = if n_rows <= 1 {
        0.0
    } else {
        (inner_max_h / (n_rows - 1) as f64).min(24.0)
    };
    let height_px = ((n_rows.saturating_sub(1)) as f64 * row_px + 2.0 * frame.pad_px)
        .clamp(frame.min_height_px, frame.max_height_px);
    let offset_x = (frame.width_px - max_depth as f64 * column_px) / 2.0;
    let offset_y = (height_px - (n_rows.saturating_sub(1)) as f64 * row_px) / 2.0;
    let px = |k: usize| {
        (
            offset_x + depth[k] as f64 * column_px,
            offset_y + row[k] as f64 * row_px,
        )
    };
    let node_px = (0..n).map(|k| (ids[k].to_string(), px(k))).collect();
    let mut branch_px = Vec::with_capacity(edges.len());
    for k in 0..n {
        for &c in &children[k] {
            let (a, z) = (px(k), px(c));
            branch_px.push(if row[c] == row[k] {
                vec![a, z]
            } else {
                // Down from the parent, then across to the child: a one-line diagram's elbow.
                vec![a, (a.0, z.1), z]
            });
        }
    }
    MapLayout {
        kind: LayoutKind::Schematic,
        width_px: frame.width_px,
        height_px,
        node_px,
        branch_px,
        units_per_px: None,
    }
}

/// The index of `id`, adding it when new.
fn intern<'a>(id: &'a str, ids: &mut Vec<&'a str>, index: &mut HashMap<&'a str, usize>) -> usize {
    *index.entry(id).or_insert_with(|| {
        ids.push(id);
        ids.len() - 1
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::limit::Limit;
    use crate::read::FeederInfo;
    use crate::report::BranchLine;
    use crate::stats::{WorstNode, summarise};

    const FRAME: Frame = Frame {
        width_px: 400.0,
        min_height_px: 100.0,
        max_height_px: 400.0,
        pad_px: 10.0,
    };

    fn feeder(nodes: &[(&str, Option<(f64, f64)>)], branches: &[(&str, &str)]) -> FeederReport {
        let worst: Vec<WorstNode> = nodes
            .iter()
            .map(|&(id, xy)| WorstNode {
                node: id.into(),
                x: xy.map(|c| c.0),
                y: xy.map(|c| c.1),
                hosting_kw: 100.0,
                limit: Limit::Thermal,
                limit_element: None,
                scenario: "s".into(),
            })
            .collect();
        FeederReport {
            info: FeederInfo::default(),
            overall: summarise(&[], &[]),
            per_scenario: Vec::new(),
            branches: branches
                .iter()
                .enumerate()
                .map(|(i, &(a, z))| BranchLine {
                    branch: format!("b{i}"),
                    from: a.into(),
                    to: z.into(),
                    from_xy: None,
                    to_xy: None,
                })
                .collect(),
            head: Some("h".into()),
            n_baseline: 0,
            worst,
        }
    }

    #[test]
    fn geographic_keeps_proportions_and_puts_north_up() {
        let mut f = feeder(
            &[("a", Some((1000.0, 0.0))), ("b", Some((1000.0, 500.0)))],
            &[("h", "a"), ("a", "b")],
        );
        f.branches[0].from_xy = Some((0.0, 0.0));
        f.branches[0].to_xy = Some((1000.0, 0.0));
        let m = layout(&f, FRAME);
        assert_eq!(m.kind, LayoutKind::Geographic);
        let (h, a, b) = (m.node_px["h"], m.node_px["a"], m.node_px["b"]);
        // 1000 units across 380 px: same scale on both axes.
        assert!((a.0 - h.0 - 380.0).abs() < 1e-9);
        assert!(
            (a.1 - b.1 - 190.0).abs() < 1e-9,
            "north (larger y) is higher up"
        );
        assert!((m.units_per_px.unwrap() - 1000.0 / 380.0).abs() < 1e-9);
        assert_eq!(m.branch_px.len(), 2);
        for &(x, y) in m.node_px.values() {
            assert!((0.0..=m.width_px).contains(&x) && (0.0..=m.height_px).contains(&y));
        }
    }

    #[test]
    fn a_node_without_coordinates_makes_the_whole_drawing_schematic() {
        let f = feeder(
            &[("a", Some((1.0, 1.0))), ("b", None)],
            &[("h", "a"), ("a", "b")],
        );
        assert_eq!(layout(&f, FRAME).kind, LayoutKind::Schematic);
    }

    #[test]
    fn schematic_runs_the_longest_path_straight_and_side_branches_below() {
        // h - a - b - c (main line), a - s (side branch), b - t - u (longer side branch).
        let f = feeder(
            &[
                ("a", None),
                ("b", None),
                ("c", None),
                ("s", None),
                ("t", None),
                ("u", None),
            ],
            &[
                ("h", "a"),
                ("a", "s"),
                ("a", "b"),
                ("b", "c"),
                ("b", "t"),
                ("t", "u"),
            ],
        );
        let m = layout(&f, FRAME);
        assert_eq!(m.kind, LayoutKind::Schematic);
        let p = |id: &str| m.node_px[id];
        // Depths 0..3 from the head: h a b (c|t) u.
        assert!(p("h").0 < p("a").0 && p("a").0 < p("b").0 && p("b").0 < p("t").0);
        assert_eq!(p("t").0, p("c").0);
        // The tallest branch from b is t-u, so it continues the main row; c gets a new row.
        assert_eq!(p("h").1, p("a").1);
        assert_eq!(p("a").1, p("b").1);
        assert_eq!(p("b").1, p("t").1);
        assert_eq!(p("t").1, p("u").1);
        assert!(p("c").1 > p("u").1);
        assert!(p("s").1 > p("c").1, "rows in depth-first order");
        assert_eq!(m.branch_px.len(), 6);
        // No two nodes share a position.
        let mut seen: Vec<(i64, i64)> = m
            .node_px
            .values()
            .map(|&(x, y)| ((x * 1000.0) as i64, (y * 1000.0) as i64))
            .collect();
        seen.sort();
        seen.dedup();
        assert_eq!(seen.len(), 7);
    }

    #[test]
    fn schematic_of_a_very_deep_chain_does_not_recurse() {
        let n = 50_000;
        let names: Vec<String> = (0..n).map(|i| format!("n{i}")).collect();
        let nodes: Vec<(&str, Option<(f64, f64)>)> =
            names.iter().map(|s| (s.as_str(), None)).collect();
        let mut branches = vec![("h", names[0].as_str())];
        branches.extend(names.windows(2).map(|w| (w[0].as_str(), w[1].as_str())));
        let m = layout(&feeder(&nodes, &branches), FRAME);
        assert_eq!(m.node_px.len(), n + 1);
        let last = m.node_px[names[n - 1].as_str()];
        assert!(last.0 <= FRAME.width_px - FRAME.pad_px + 1e-6);
    }
}
