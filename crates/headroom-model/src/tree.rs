//! Builds the radial tree from node and branch records, reporting every problem found.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use crate::diagnostic::{Diagnostic, ModelErrors};
use crate::feeder::{
    Branch, BranchRecord, BusIdx, Feeder, FeederHeader, Node, NodeRecord, OpenBranch,
};

impl Feeder {
    /// Validates records built in memory (for example by a generator) into a feeder. Problems are
    /// reported against `<id>/nodes.csv` and `<id>/branches.csv`.
    pub fn from_records(
        id: &str,
        header: FeederHeader,
        nodes: Vec<NodeRecord>,
        branches: Vec<BranchRecord>,
    ) -> Result<Feeder, ModelErrors> {
        Feeder::from_records_at(Path::new(id), id, header, nodes, branches, Vec::new())
    }

    /// Validates records read from `folder` into a feeder; `warnings` found while reading are
    /// kept on the feeder.
    pub fn from_records_at(
        folder: &Path,
        id: &str,
        header: FeederHeader,
        nodes: Vec<NodeRecord>,
        branches: Vec<BranchRecord>,
        warnings: Vec<Diagnostic>,
    ) -> Result<Feeder, ModelErrors> {
        let nodes_file = folder.join("nodes.csv");
        let branches_file = folder.join("branches.csv");
        let header_file = folder.join("feeder.toml");
        let mut errors = Vec::new();

        check_header(&header, &header_file, &mut errors);
        check_node_values(&nodes, &nodes_file, &mut errors);
        check_branch_values(&branches, &branches_file, &mut errors);

        // Node ids.
        let mut record_of: HashMap<&str, usize> = HashMap::with_capacity(nodes.len());
        for (i, node) in nodes.iter().enumerate() {
            if node.id.is_empty() {
                // Reported by check_node_values.
                continue;
            }
            if let Some(&first) = record_of.get(node.id.as_str()) {
                errors.push(
                    Diagnostic::error(&nodes_file, "duplicate node id")
                        .at_line(node.line)
                        .at_column("id")
                        .with_value(&node.id)
                        .tap_first(nodes[first].line),
                );
            } else {
                record_of.insert(node.id.as_str(), i);
            }
        }
        let head_record = record_of.get(header.head.as_str()).copied();
        if head_record.is_none() {
            errors.push(
                Diagnostic::error(&header_file, "head is not a node of nodes.csv")
                    .at_column("head")
                    .with_value(&header.head),
            );
        }

        // Branch ids, endpoints, self-loops; adjacency over closed branches.
        let mut branch_ids: HashMap<&str, usize> = HashMap::with_capacity(branches.len());
        let mut adjacency: Vec<Vec<(usize, usize)>> = vec![Vec::new(); nodes.len()];
        let mut open_branches = Vec::new();
        for (b, branch) in branches.iter().enumerate() {
            if branch.id.is_empty() {
                // Reported by check_branch_values.
            } else if let Some(&first) = branch_ids.get(branch.id.as_str()) {
                errors.push(
                    Diagnostic::error(&branches_file, "duplicate branch id")
                        .at_line(branch.line)
                        .at_column("id")
                        .with_value(&branch.id)
                        .tap_first(branches[first].line),
                );
            } else {
                branch_ids.insert(branch.id.as_str(), b);
            }
            if !branch.closed {
                open_branches.push(OpenBranch {
                    id: branch.id.clone(),
                    from: branch.from.clone(),
                    to: branch.to.clone(),
                    line: branch.line,
                });
                continue;
            }
            let mut ends = [None, None];
            for (slot, (column, end)) in [("from", &branch.from), ("to", &branch.to)]
                .into_iter()
                .enumerate()
            {
                match record_of.get(end.as_str()) {
                    Some(&i) => ends[slot] = Some(i),
                    None if end.is_empty() => errors.push(
                        Diagnostic::error(&branches_file, "node id is empty")
                            .at_line(branch.line)
                            .at_column(column),
                    ),
                    None => errors.push(
                        Diagnostic::error(&branches_file, "unknown node")
                            .at_line(branch.line)
                            .at_column(column)
                            .with_value(end),
                    ),
                }
            }
            if branch.from == branch.to && !branch.from.is_empty() {
                errors.push(
                    Diagnostic::error(&branches_file, "branch connects a node to itself")
                        .at_line(branch.line)
                        .at_column("to")
                        .with_value(&branch.to),
                );
                continue;
            }
            if let [Some(a), Some(z)] = ends {
                adjacency[a].push((z, b));
                adjacency[z].push((a, b));
            }
        }

        // Depth-first walk from the head: orders the nodes and finds loops and islands.
        let mut order: Vec<usize> = Vec::with_capacity(nodes.len());
        let mut parent_record = vec![usize::MAX; nodes.len()];
        let mut via_branch = vec![usize::MAX; nodes.len()];
        let mut visited = vec![false; nodes.len()];
        let mut loop_reported = vec![false; branches.len()];
        if let Some(head) = head_record {
            // Stack of (record, next adjacency position); preorder assigned on first visit.
            let mut stack: Vec<(usize, usize)> = vec![(head, 0)];
            visited[head] = true;
            order.push(head);
            while let Some(top) = stack.last_mut() {
                let (at, next) = *top;
                if next == adjacency[at].len() {
                    stack.pop();
                    continue;
                }
                top.1 += 1;
                let (other, b) = adjacency[at][next];
                if b == via_branch[at] {
                    continue;
                }
                if visited[other] {
                    // Every loop is seen from both ends; report it once, at the closing branch.
                    if !loop_reported[b] {
                        loop_reported[b] = true;
                        let branch = &branches[b];
                        errors.push(
                            Diagnostic::error(
                                &branches_file,
                                format!(
                                    "closed branch makes a loop (node {:?} is already reached \
                                     from head {:?}); open one branch of the loop (closed = false)",
                                    nodes[other].id, header.head
                                ),
                            )
                            .at_line(branch.line)
                            .at_column("id")
                            .with_value(&branch.id),
                        );
                    }
                    continue;
                }
                visited[other] = true;
                parent_record[other] = at;
                via_branch[other] = b;
                order.push(other);
                stack.push((other, 0));
            }
            for (i, node) in nodes.iter().enumerate() {
                if !visited[i] && record_of.get(node.id.as_str()) == Some(&i) {
                    errors.push(
                        Diagnostic::error(
                            &nodes_file,
                            format!(
                                "node is not connected to head {:?} through closed branches (island)",
                                header.head
                            ),
                        )
                        .at_line(node.line)
                        .at_column("id")
                        .with_value(&node.id),
                    );
                }
            }
        }

        if !errors.is_empty() {
            return Err(ModelErrors::new(errors));
        }

        // Renumber into depth-first order.
        let mut bus_of_record = vec![0u32; nodes.len()];
        for (bus, &record) in order.iter().enumerate() {
            bus_of_record[record] = bus as u32;
        }
        let mut parent = Vec::with_capacity(order.len());
        let mut feeder_branches = Vec::with_capacity(order.len().saturating_sub(1));
        for (bus, &record) in order.iter().enumerate() {
            if bus == 0 {
                parent.push(BusIdx::HEAD);
                continue;
            }
            let from = BusIdx::new(bus_of_record[parent_record[record]]);
            parent.push(from);
            let branch = &branches[via_branch[record]];
            feeder_branches.push(Branch {
                id: branch.id.clone(),
                from,
                to: BusIdx::new(bus as u32),
                r_ohm: branch.r_ohm,
                x_ohm: branch.x_ohm,
                rating_a: branch.rating_a,
                conductor: branch.conductor.clone(),
                length_km: branch.length_km,
                line: branch.line,
            });
        }
        let mut subtree_end: Vec<u32> = (1..=order.len() as u32).collect();
        for bus in (1..order.len()).rev() {
            let up = parent[bus].index();
            subtree_end[up] = subtree_end[up].max(subtree_end[bus]);
        }
        let mut by_id = HashMap::with_capacity(order.len());
        let mut ordered_nodes = Vec::with_capacity(order.len());
        for (bus, &record) in order.iter().enumerate() {
            let n = &nodes[record];
            by_id.insert(n.id.clone(), BusIdx::new(bus as u32));
            ordered_nodes.push(Node {
                id: n.id.clone(),
                x: n.x,
                y: n.y,
                load_kw: n.load_kw,
                load_kvar: n.load_kvar,
                gen_kw: n.gen_kw,
                gen_kvar: n.gen_kvar,
                line: n.line,
            });
        }
        Ok(Feeder {
            id: id.to_string(),
            folder: PathBuf::from(folder),
            header,
            nodes: ordered_nodes,
            parent,
            subtree_end,
            branches: feeder_branches,
            open_branches,
            by_id,
            warnings,
        })
    }
}

trait TapFirst {
    fn tap_first(self, first_line: usize) -> Self;
}

impl TapFirst for Diagnostic {
    /// Appends where the first occurrence was.
    fn tap_first(mut self, first_line: usize) -> Diagnostic {
        if first_line > 0 {
            self.message = format!("{} (first defined on line {first_line})", self.message);
        }
        self
    }
}

fn check_header(header: &FeederHeader, file: &Path, errors: &mut Vec<Diagnostic>) {
    if !(header.nominal_kv.is_finite() && header.nominal_kv > 0.0) {
        errors.push(
            Diagnostic::error(file, "must be a finite number greater than 0")
                .at_column("nominal_kv")
                .with_value(header.nominal_kv.to_string()),
        );
    }
    // A head voltage outside this band is almost certainly a typing error (kV for pu).
    if !(header.head_voltage_pu.is_finite()
        && header.head_voltage_pu >= 0.5
        && header.head_voltage_pu <= 1.5)
    {
        errors.push(
            Diagnostic::error(file, "must be a per-unit value between 0.5 and 1.5")
                .at_column("head_voltage_pu")
                .with_value(header.head_voltage_pu.to_string()),
        );
    }
}

fn check_node_values(nodes: &[NodeRecord], file: &Path, errors: &mut Vec<Diagnostic>) {
    for node in nodes {
        if node.id.is_empty() {
            errors.push(
                Diagnostic::error(file, "node id is empty")
                    .at_line(node.line)
                    .at_column("id"),
            );
        }
        let values = [
            ("x", node.x),
            ("y", node.y),
            ("load_kw", Some(node.load_kw)),
            ("load_kvar", Some(node.load_kvar)),
            ("gen_kw", Some(node.gen_kw)),
            ("gen_kvar", Some(node.gen_kvar)),
        ];
        for (column, value) in values {
            if let Some(v) = value
                && !v.is_finite()
            {
                errors.push(
                    Diagnostic::error(file, "must be a finite number")
                        .at_line(node.line)
                        .at_column(column)
                        .with_value(v.to_string()),
                );
            }
        }
        if node.x.is_some() != node.y.is_some() {
            errors.push(
                Diagnostic::error(file, "give both x and y, or neither")
                    .at_line(node.line)
                    .at_column(if node.x.is_some() { "y" } else { "x" }),
            );
        }
    }
}

fn check_branch_values(branches: &[BranchRecord], file: &Path, errors: &mut Vec<Diagnostic>) {
    for branch in branches {
        if branch.id.is_empty() {
            errors.push(
                Diagnostic::error(file, "branch id is empty")
                    .at_line(branch.line)
                    .at_column("id"),
            );
        }
        for (column, v) in [("r_ohm", branch.r_ohm), ("x_ohm", branch.x_ohm)] {
            if !(v.is_finite() && v >= 0.0) {
                errors.push(
                    Diagnostic::error(file, "must be a finite number, 0 or more")
                        .at_line(branch.line)
                        .at_column(column)
                        .with_value(v.to_string()),
                );
            }
        }
        if branch.r_ohm == 0.0 && branch.x_ohm == 0.0 {
            errors.push(
                Diagnostic::error(
                    file,
                    "r_ohm and x_ohm are both zero (a branch needs an impedance)",
                )
                .at_line(branch.line)
                .at_column("r_ohm")
                .with_value("0"),
            );
        }
        if !(branch.rating_a.is_finite() && branch.rating_a > 0.0) {
            errors.push(
                Diagnostic::error(file, "must be a finite number greater than 0")
                    .at_line(branch.line)
                    .at_column("rating_a")
                    .with_value(branch.rating_a.to_string()),
            );
        }
        if let Some(length) = branch.length_km
            && !(length.is_finite() && length > 0.0)
        {
            errors.push(
                Diagnostic::error(file, "must be a finite number greater than 0")
                    .at_line(branch.line)
                    .at_column("length_km")
                    .with_value(length.to_string()),
            );
        }
    }
}
