//! `headroom flow`: one load flow per scenario, node voltages and branch flows to Parquet.

use headroom_export::ColumnData;
use headroom_flow::{
    Demand, FlowState, Network, Patience, Solution, SolveSettings, solve_patiently,
};

use crate::args::FlowArgs;
use crate::output::{load_inputs, prepare_out_dir, write_table};
use crate::tables::{Columns, crs_groups};
use crate::{CAUTION, Failure};

struct Solved {
    feeder: usize,
    scenario: String,
    network: Network,
    state: FlowState,
}

pub fn run(args: &FlowArgs) -> Result<(), Failure> {
    let (feeders, study) = load_inputs(&args.feeder, args.study.as_deref())?;
    let groups = crs_groups(&feeders, None)?;
    let scenarios: Vec<_> = match &args.scenario {
        None => study.scenarios.iter().collect(),
        Some(name) => match study.scenario(name) {
            Some(s) => vec![s],
            None => {
                return Err(Failure::Usage(format!(
                    "no scenario named {name:?} in the study (it has: {})",
                    study
                        .scenarios
                        .iter()
                        .map(|s| s.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                )));
            }
        },
    };

    let mut solved = Vec::new();
    let mut failures = Vec::new();
    for (f, feeder) in feeders.iter().enumerate() {
        let network = Network::new(feeder);
        for scenario in &scenarios {
            let demand =
                Demand::from_feeder(feeder, &network, scenario.load_scale, scenario.gen_scale);
            let mut state = FlowState::flat(&network);
            // Past the sweep cap while it converges, as the base cases of `map` are.
            match solve_patiently(
                &network,
                &demand,
                &[],
                &mut state,
                &SolveSettings::default(),
                &Patience::default(),
            ) {
                Ok(_) => solved.push(Solved {
                    feeder: f,
                    scenario: scenario.name.clone(),
                    network: network.clone(),
                    state,
                }),
                Err(e) => failures.push(format!(
                    "error: {}: scenario {}: {e}; check loads and impedances",
                    feeder.folder().display(),
                    scenario.name
                )),
            }
        }
    }
    if !failures.is_empty() {
        return Err(Failure::Invalid(format!(
            "{}\nnothing was written.",
            failures.join("\n")
        )));
    }

    prepare_out_dir(&args.out)?;
    for group in &groups {
        let members: Vec<&Solved> = solved
            .iter()
            .filter(|s| group.feeders.contains(&s.feeder))
            .collect();
        write_table(
            &args.out,
            &format!("flow_nodes{}.parquet", group.suffix),
            &nodes(&feeders, &members, &group.crs),
        )?;
        write_table(
            &args.out,
            &format!("flow_branches{}.parquet", group.suffix),
            &branches(&feeders, &members, &group.crs),
        )?;
    }

    for s in &solved {
        let feeder = &feeders[s.feeder];
        let solution = Solution::new(&s.network, &s.state);
        let n = feeder.n_nodes();
        let lowest = (0..n)
            .min_by(|&a, &b| solution.v_pu(a).total_cmp(&solution.v_pu(b)))
            .unwrap_or(0);
        let highest = (0..n)
            .max_by(|&a, &b| solution.v_pu(a).total_cmp(&solution.v_pu(b)))
            .unwrap_or(0);
        let (loss_kw, loss_kvar) = solution.losses();
        let (p_kw, q_kvar) = solution.head_power();
        let loading = feeder
            .branches()
            .iter()
            .map(|b| {
                (
                    b,
                    100.0 * solution.branch_flow(b.to.index()).current_a / b.rating_a,
                )
            })
            .max_by(|a, b| a.1.total_cmp(&b.1));
        say!("{} / {}:", feeder.id(), s.scenario);
        say!(
            "  lowest voltage  {:.5} pu at node {}",
            solution.v_pu(lowest),
            feeder.nodes()[lowest].id
        );
        say!(
            "  highest voltage {:.5} pu at node {}",
            solution.v_pu(highest),
            feeder.nodes()[highest].id
        );
        say!("  total losses    {loss_kw:.2} kW, {loss_kvar:.2} kvar");
        say!("  power at head   {p_kw:.2} kW, {q_kvar:.2} kvar (into the feeder)");
        if let Some((branch, pct)) = loading {
            say!(
                "  highest loading {pct:.1} % of rating on branch {}",
                branch.id
            );
        }
    }
    say!("Results in {}", args.out.display());
    say!("{CAUTION}");
    Ok(())
}

fn nodes(
    feeders: &[headroom_model::Feeder],
    solved: &[&Solved],
    crs: &headroom_export::Crs,
) -> headroom_export::Table {
    let (mut feeder, mut scenario, mut node) = (Vec::new(), Vec::new(), Vec::new());
    let (mut v_pu, mut angle_deg) = (Vec::new(), Vec::new());
    let (mut x, mut y, mut geometry) = (Vec::new(), Vec::new(), Vec::new());
    for s in solved {
        let f = &feeders[s.feeder];
        let solution = Solution::new(&s.network, &s.state);
        for (i, n) in f.nodes().iter().enumerate() {
            feeder.push(f.id().to_string());
            scenario.push(s.scenario.clone());
            node.push(n.id.clone());
            v_pu.push(solution.v_pu(i));
            angle_deg.push(solution.angle_deg(i));
            x.push(n.x);
            y.push(n.y);
            geometry.push(n.x.zip(n.y).map(|(x, y)| headroom_export::Coord::new(x, y)));
        }
    }
    let mut c = Columns::new(crs);
    c.add("feeder", ColumnData::Utf8Dictionary(feeder))
        .add("scenario", ColumnData::Utf8Dictionary(scenario))
        .add("node", ColumnData::Utf8(node))
        .add("v_pu", ColumnData::Float64(v_pu))
        .add("angle_deg", ColumnData::Float64(angle_deg))
        .add("x", ColumnData::NullableFloat64(x))
        .add("y", ColumnData::NullableFloat64(y))
        .add("geometry", ColumnData::Point(geometry))
        .meta("headroom_caution", CAUTION);
    c.finish()
}

fn branches(
    feeders: &[headroom_model::Feeder],
    solved: &[&Solved],
    crs: &headroom_export::Crs,
) -> headroom_export::Table {
    let (mut feeder, mut scenario, mut branch) = (Vec::new(), Vec::new(), Vec::new());
    let (mut from, mut to) = (Vec::new(), Vec::new());
    let (mut current_a, mut loading_pct) = (Vec::new(), Vec::new());
    let (mut p_kw, mut q_kvar, mut loss_kw) = (Vec::new(), Vec::new(), Vec::new());
    let (mut rating_a, mut geometry) = (Vec::new(), Vec::new());
    for s in solved {
        let f = &feeders[s.feeder];
        let solution = Solution::new(&s.network, &s.state);
        for b in f.branches() {
            let flow = solution.branch_flow(b.to.index());
            let (a, z) = (f.node(b.from), f.node(b.to));
            feeder.push(f.id().to_string());
            scenario.push(s.scenario.clone());
            branch.push(b.id.clone());
            from.push(a.id.clone());
            to.push(z.id.clone());
            current_a.push(flow.current_a);
            loading_pct.push(100.0 * flow.current_a / b.rating_a);
            p_kw.push(flow.p_kw);
            q_kvar.push(flow.q_kvar);
            loss_kw.push(flow.loss_kw);
            rating_a.push(b.rating_a);
            let point = |n: &headroom_model::Node| {
                n.x.zip(n.y).map(|(x, y)| headroom_export::Coord::new(x, y))
            };
            geometry.push(point(a).zip(point(z)).map(|(p, q)| vec![p, q]));
        }
    }
    let mut c = Columns::new(crs);
    c.add("feeder", ColumnData::Utf8Dictionary(feeder))
        .add("scenario", ColumnData::Utf8Dictionary(scenario))
        .add("branch", ColumnData::Utf8(branch))
        .add("from", ColumnData::Utf8(from))
        .add("to", ColumnData::Utf8(to))
        .add("current_a", ColumnData::Float64(current_a))
        .add("loading_pct", ColumnData::Float64(loading_pct))
        .add("p_kw", ColumnData::Float64(p_kw))
        .add("q_kvar", ColumnData::Float64(q_kvar))
        .add("loss_kw", ColumnData::Float64(loss_kw))
        .add("rating_a", ColumnData::Float64(rating_a))
        .add("geometry", ColumnData::LineString(geometry))
        .meta("headroom_caution", CAUTION);
    c.finish()
}
