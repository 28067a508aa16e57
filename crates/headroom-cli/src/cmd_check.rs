//! `headroom check`: screen one application (a plain report, or JSON), or decide a queue of
//! them in order and write the decisions table.

use std::fmt::Write as _;
use std::path::Path;
use std::time::Instant;

use headroom_capacity::{
    Application, CapacityOptions, CheckOptions, CheckReport, FeederStudy, Limit, QueueOutcome,
    ScenarioCheck, SearchMethod, Verdict, WhatIfs, check_application, parse_queue, run_queue,
};
use headroom_export::{ColumnData, Crs, write_csv};
use headroom_model::{BusIdx, Feeder, GenerationSettings, Study};
use serde::Serialize;

use crate::args::CheckArgs;
use crate::output::{load_inputs, prepare_out_dir, write_table, write_text};
use crate::tables::Columns;
use crate::{CAUTION, Failure};

/// A report as printed with `--json`: the library's report plus the caution line.
#[derive(Serialize)]
struct WithCaution<'a, T: Serialize> {
    #[serde(flatten)]
    report: &'a T,
    caution: &'static str,
}

pub fn run(args: &CheckArgs) -> Result<(), Failure> {
    let (feeders, study) = load_inputs(&args.feeder, args.study.as_deref())?;
    let generation = GenerationSettings {
        power_factor: args.power_factor.unwrap_or(study.generation.power_factor),
        absorbing: if args.absorbing {
            true
        } else if args.injecting {
            false
        } else {
            study.generation.absorbing
        },
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(args.threads.unwrap_or(0) as usize)
        .build()
        .map_err(|e| Failure::Usage(format!("cannot start worker threads: {e}")))?;
    match (&args.queue, &args.node, args.kw) {
        (Some(queue), _, _) => {
            let out = args
                .out
                .as_deref()
                .ok_or_else(|| Failure::Usage("--queue needs --out DIR".to_string()))?;
            check_queue(args, &feeders, &study, &generation, queue, out, &pool)
        }
        (None, Some(node), Some(kw)) => {
            check_one(args, &feeders, &study, &generation, node, kw, &pool)
        }
        _ => Err(Failure::Usage(
            "give --node ID --kw P, or --queue FILE --out DIR".to_string(),
        )),
    }
}

/// The feeder and node of `--node` (and `--feeder-id`), or a usage error that says why not.
fn find_node<'f>(
    feeders: &'f [Feeder],
    node: &str,
    feeder_id: Option<&str>,
) -> Result<(&'f Feeder, BusIdx), Failure> {
    let ids = || {
        feeders
            .iter()
            .map(Feeder::id)
            .take(10)
            .collect::<Vec<_>>()
            .join(", ")
    };
    let candidates: Vec<&Feeder> = match feeder_id {
        Some(id) => match feeders.iter().find(|f| f.id() == id) {
            Some(f) => vec![f],
            None => {
                return Err(Failure::Usage(format!(
                    "no feeder {id:?} here (feeders: {})",
                    ids()
                )));
            }
        },
        None => feeders.iter().collect(),
    };
    let found: Vec<(&Feeder, BusIdx)> = candidates
        .iter()
        .filter_map(|f| f.node_by_id(node).map(|bus| (*f, bus)))
        .collect();
    let like = || Feeder::did_you_mean(candidates.iter().copied(), node);
    match found.as_slice() {
        [] => Err(Failure::Usage(match candidates.as_slice() {
            [f] => format!("no node {node:?} in feeder {}{}", f.id(), like()),
            _ => format!("no node {node:?} in any feeder ({}){}", ids(), like()),
        })),
        [(f, bus)] if *bus == BusIdx::HEAD => Err(Failure::Usage(format!(
            "node {node:?} is the head of feeder {} (the substation busbar): check a node \
             downstream of it",
            f.id()
        ))),
        [one] => Ok(*one),
        several => Err(Failure::Usage(format!(
            "node {node:?} is in several feeders ({}): choose one with --feeder-id",
            several
                .iter()
                .map(|(f, _)| f.id())
                .collect::<Vec<_>>()
                .join(", ")
        ))),
    }
}

fn check_one(
    args: &CheckArgs,
    feeders: &[Feeder],
    study: &Study,
    generation: &GenerationSettings,
    node: &str,
    kw: f64,
    pool: &rayon::ThreadPool,
) -> Result<(), Failure> {
    let (feeder, bus) = find_node(feeders, node, args.feeder_id.as_deref())?;
    let application = Application::new("", bus, kw, generation.clone());
    let options = CheckOptions {
        method: SearchMethod::Fast,
        what_ifs: !args.no_what_ifs,
    };
    let report = pool.install(|| {
        let prepared = FeederStudy::prepare(feeder, study);
        check_application(&prepared, &application, &options)
    });
    if args.json {
        say!("{}", to_json(&report)?);
    } else {
        say!("{}", render_report(&report).trim_end_matches('\n'));
        say!("{CAUTION}");
    }
    Ok(())
}

fn to_json<T: Serialize>(report: &T) -> Result<String, Failure> {
    serde_json::to_string_pretty(&WithCaution {
        report,
        caution: CAUTION,
    })
    .map_err(|e| Failure::Output(format!("cannot write the JSON report: {e}")))
}

/// A number of kW as written by a person: no trailing zeros, no rounding noise.
fn kw(value: f64) -> String {
    let rounded = (value * 1e6).round() / 1e6;
    if rounded == 0.0 {
        "0".to_string()
    } else {
        rounded.to_string()
    }
}

fn power_factor_text(power_factor: f64, absorbing: bool) -> String {
    if power_factor >= 1.0 {
        "unity power factor".to_string()
    } else {
        format!(
            "power factor {power_factor} {}",
            if absorbing { "absorbing" } else { "injecting" }
        )
    }
}

fn binds(limit: Limit, element: Option<&str>) -> String {
    let what = match limit {
        Limit::Thermal => "branch",
        Limit::ReverseFlow => "head",
        _ => "node",
    };
    match element {
        Some(id) => format!("{limit} at {what} {id}"),
        None => limit.to_string(),
    }
}

/// The plain report of one check.
fn render_report(report: &CheckReport) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Application: {} kW at node {} of feeder {}, {}",
        kw(report.kw),
        report.node,
        report.feeder,
        power_factor_text(report.power_factor, report.absorbing)
    );
    let binding = binds(report.limit, report.limit_element.as_deref());
    let _ = match report.verdict {
        Verdict::Accept => writeln!(
            out,
            "Verdict: ACCEPT. Tightest scenario {}: capacity left {} kW, margin {} kW \
             ({binding} binds next).",
            report.deciding_scenario,
            kw(report.hosting_kw),
            kw(report.margin_kw)
        ),
        Verdict::Refuse => writeln!(
            out,
            "Verdict: REFUSE. Decided by scenario {}: capacity left {} kW, short by {} kW \
             ({binding}).",
            report.deciding_scenario,
            kw(report.hosting_kw),
            kw(-report.margin_kw)
        ),
    };
    let _ = writeln!(out);
    let width = report
        .scenarios
        .iter()
        .map(|s| s.scenario.chars().count())
        .max()
        .unwrap_or(8)
        .max(8);
    let _ = writeln!(
        out,
        "  {:<width$}  verdict  capacity kW   margin kW  binds",
        "scenario"
    );
    for s in &report.scenarios {
        let _ = writeln!(
            out,
            "  {:<width$}  {:<7}  {:>11}  {:>10}  {}",
            s.scenario,
            s.verdict.as_str(),
            kw(s.hosting_kw),
            kw(s.margin_kw),
            binds(s.limit, s.limit_element.as_deref())
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "  Without -> with the plant:");
    for s in &report.scenarios {
        render_states(&mut out, s, &report.node, width);
    }
    if let Some(what_ifs) = &report.what_ifs {
        let _ = writeln!(out);
        render_what_ifs(&mut out, what_ifs);
    }
    out
}

fn render_states(out: &mut String, s: &ScenarioCheck, node: &str, width: usize) {
    let (Some(a), Some(b)) = (&s.without_plant, &s.with_plant) else {
        let _ = writeln!(
            out,
            "  {:<width$}  the load flow has no solution {}",
            s.scenario,
            if s.without_plant.is_none() {
                "even without the plant"
            } else {
                "with the plant"
            }
        );
        return;
    };
    let pad = "";
    let _ = writeln!(
        out,
        "  {:<width$}  voltage at {node}: {:.4} -> {:.4} pu",
        s.scenario, a.v_node_pu, b.v_node_pu
    );
    let _ = writeln!(
        out,
        "  {pad:<width$}  highest voltage: {:.4} pu ({}) -> {:.4} pu ({})",
        a.v_max_pu, a.v_max_node, b.v_max_pu, b.v_max_node
    );
    let _ = writeln!(
        out,
        "  {pad:<width$}  lowest voltage: {:.4} pu ({}) -> {:.4} pu ({})",
        a.v_min_pu, a.v_min_node, b.v_min_pu, b.v_min_node
    );
    let _ = writeln!(
        out,
        "  {pad:<width$}  highest loading: {:.1} % ({}) -> {:.1} % ({})",
        a.loading_max_pct,
        a.loading_max_branch.as_deref().unwrap_or("-"),
        b.loading_max_pct,
        b.loading_max_branch.as_deref().unwrap_or("-"),
    );
    for breach in &s.breaches_at_request {
        let _ = writeln!(
            out,
            "  {pad:<width$}  at the request: {} at {} element(s), worst {} at {} {} (limit {} {})",
            breach.limit,
            breach.elements,
            breach.worst_element.as_deref().unwrap_or("-"),
            quantity(breach.value, breach.unit),
            breach.unit,
            quantity(breach.threshold, breach.unit),
            breach.unit
        );
    }
    if let Some(note) = &s.note {
        let _ = writeln!(out, "  {pad:<width$}  note: {note}");
    }
    if s.baseline_violations > 0 {
        let _ = writeln!(
            out,
            "  {pad:<width$}  {} limit(s) already broken without the plant (not charged to it)",
            s.baseline_violations
        );
    }
}

/// A breach's quantity at a precision that suits its unit.
fn quantity(value: f64, unit: &str) -> String {
    match unit {
        "pu" => format!("{value:.4}"),
        _ => format!("{value:.1}"),
    }
}

fn would(verdict: Verdict) -> &'static str {
    match verdict {
        Verdict::Accept => "the request would pass",
        Verdict::Refuse => "still refused",
    }
}

fn render_what_ifs(out: &mut String, what_ifs: &WhatIfs) {
    let _ = writeln!(
        out,
        "What-ifs (planning estimates, each worked out with full load flows):"
    );
    for pf in &what_ifs.power_factor {
        let o = &pf.outcome;
        let _ = writeln!(
            out,
            "  - at power factor {:.2} absorbing: capacity {} kW ({}, {}): {}",
            pf.power_factor,
            kw(o.hosting_kw),
            o.scenario,
            binds(o.limit, o.limit_element.as_deref()),
            would(o.verdict)
        );
    }
    let e = &what_ifs.export_limit;
    if e.export_limit_kw > 0.0 {
        let _ = writeln!(
            out,
            "  - export limit: {} kW passes at the requested power factor; more is refused \
             ({}, {})",
            kw(e.export_limit_kw),
            e.scenario,
            binds(e.limit, e.limit_element.as_deref())
        );
    } else {
        let _ = writeln!(
            out,
            "  - export limit: no export passes at this node ({}, {})",
            e.scenario,
            binds(e.limit, e.limit_element.as_deref())
        );
    }
    if let Some(r) = &what_ifs.reinforcement {
        let branches: Vec<String> = r
            .branches
            .iter()
            .map(|b| {
                format!(
                    "branch {} ({}-{}) {} A -> {} A",
                    b.branch,
                    b.from,
                    b.to,
                    kw(b.rating_a),
                    kw(b.needed_rating_a)
                )
            })
            .collect();
        let o = &r.outcome;
        let then = match o.verdict {
            Verdict::Accept => would(o.verdict).to_string(),
            Verdict::Refuse => format!(
                "{}: capacity {} kW, then {} binds",
                would(o.verdict),
                kw(o.hosting_kw),
                binds(o.limit, o.limit_element.as_deref())
            ),
        };
        let _ = writeln!(
            out,
            "  - reinforce {}: {then}",
            if branches.is_empty() {
                "nothing identified".to_string()
            } else {
                branches.join(", ")
            }
        );
    }
    if let Some(h) = &what_ifs.head_voltage {
        let o = &h.outcome;
        let change = if h.change_pct < 0.0 { "lower" } else { "raise" };
        let side = if o.verdict == Verdict::Accept {
            format!(
                "{change} the substation voltage from {:.3} to {:.3} pu ({:+} %, a tap change): {}",
                h.head_voltage_pu,
                h.new_head_voltage_pu,
                h.change_pct,
                would(o.verdict)
            )
        } else {
            format!(
                "even at {:.3} pu ({:+} %) at the substation the request is {} (capacity {} kW, \
                 {})",
                h.new_head_voltage_pu,
                h.change_pct,
                would(o.verdict),
                kw(o.hosting_kw),
                binds(o.limit, o.limit_element.as_deref())
            )
        };
        let _ = writeln!(out, "  - {side}");
        let _ = writeln!(
            out,
            "    without the plant the feeder would then range {:.4}-{:.4} pu{}",
            h.base_v_min_pu,
            h.base_v_max_pu,
            if h.new_baseline_violations > 0 {
                format!(
                    "; {} limit(s) newly broken without the plant: not a fix on its own",
                    h.new_baseline_violations
                )
            } else {
                String::new()
            }
        );
    }
}

#[allow(clippy::print_stdout, clippy::print_stderr)]
fn check_queue(
    args: &CheckArgs,
    feeders: &[Feeder],
    study: &Study,
    generation: &GenerationSettings,
    queue: &Path,
    out: &Path,
    pool: &rayon::ThreadPool,
) -> Result<(), Failure> {
    let bytes = std::fs::read(queue).map_err(|e| {
        Failure::Invalid(format!(
            "error: {}: cannot read the queue file: {e}\nnothing was written.",
            queue.display()
        ))
    })?;
    let parsed = parse_queue(queue, &bytes, feeders, generation)?;
    for warning in &parsed.warnings {
        eprintln!("warning: {warning}");
    }
    let options = CheckOptions {
        method: SearchMethod::Fast,
        what_ifs: false,
    };
    let started = Instant::now();
    let outcome = pool.install(|| run_queue(feeders, study, &parsed.applications, &options));
    let seconds = started.elapsed().as_secs_f64();

    prepare_out_dir(out)?;
    let metadata = crate::cmd_map::run_metadata(
        study,
        &CapacityOptions {
            method: SearchMethod::Fast,
            criteria_detail: false,
        },
    );
    let table = decisions_table(&outcome, &metadata);
    write_table(out, "decisions.parquet", &table)?;
    let csv_path = out.join("decisions.csv");
    write_csv(&csv_path, &table)
        .map_err(|e| Failure::Output(format!("cannot write {}: {e}", csv_path.display())))?;
    let order = if parsed.by_date {
        "by date"
    } else {
        "in file order"
    };
    let run = serde_json::json!({
        "tool": "headroom",
        "version": env!("CARGO_PKG_VERSION"),
        "command": "check --queue",
        "input": args.feeder.display().to_string(),
        "queue": queue.display().to_string(),
        "order": order,
        "settings": metadata.iter().map(|(k, v)| (k.to_string(), v.clone())).collect::<std::collections::BTreeMap<_, _>>(),
        "applications": outcome.decisions.len(),
        "accepted": outcome.accepted,
        "refused": outcome.refused,
        "accepted_kw": outcome.accepted_kw,
        "refused_kw": outcome.refused_kw,
        "load_flows": outcome.load_flows,
        "caution": CAUTION,
    });
    write_text(
        &out.join("run.json"),
        &(serde_json::to_string_pretty(&run).unwrap_or_default() + "\n"),
    )?;

    if args.json {
        #[derive(Serialize)]
        struct QueueJson<'a> {
            queue: String,
            order: &'static str,
            #[serde(flatten)]
            outcome: &'a QueueOutcome,
        }
        let document = QueueJson {
            queue: queue.display().to_string(),
            order,
            outcome: &outcome,
        };
        say!("{}", to_json(&document)?);
        return Ok(());
    }
    let n_feeders = {
        let mut ids: Vec<&str> = outcome
            .decisions
            .iter()
            .map(|d| d.feeder.as_str())
            .collect();
        ids.sort_unstable();
        ids.dedup();
        ids.len()
    };
    say!(
        "Queue {}: {} application(s) on {n_feeders} feeder(s), decided {order}",
        queue.display(),
        outcome.decisions.len()
    );
    say!(
        "  accepted {:>5}  {:>12} kW",
        outcome.accepted,
        kw(outcome.accepted_kw)
    );
    let mut by_limit: Vec<(Limit, usize)> = Vec::new();
    for d in outcome
        .decisions
        .iter()
        .filter(|d| d.verdict == Verdict::Refuse)
    {
        match by_limit.iter_mut().find(|(l, _)| *l == d.limit) {
            Some((_, n)) => *n += 1,
            None => by_limit.push((d.limit, 1)),
        }
    }
    by_limit.sort();
    say!(
        "  refused  {:>5}  {:>12} kW{}",
        outcome.refused,
        kw(outcome.refused_kw),
        if by_limit.is_empty() {
            String::new()
        } else {
            format!(
                "   binding: {}",
                by_limit
                    .iter()
                    .map(|(l, n)| format!("{l} {n}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        }
    );
    const SHOWN: usize = 20;
    let refused: Vec<_> = outcome
        .decisions
        .iter()
        .filter(|d| d.verdict == Verdict::Refuse)
        .collect();
    for d in refused.iter().take(SHOWN) {
        say!(
            "  refused #{} {} ({} kW at node {}): capacity left {} kW in {}, {}",
            d.order,
            d.id,
            kw(d.kw),
            d.node,
            kw(d.hosting_kw),
            d.scenario,
            binds(d.limit, d.limit_element.as_deref())
        );
    }
    if refused.len() > SHOWN {
        say!("  ... and {} more refused", refused.len() - SHOWN);
    }
    say!(
        "{} load flows in {seconds:.2} s. Decisions in {} and {}",
        outcome.load_flows,
        csv_path.display(),
        out.join("decisions.parquet").display()
    );
    say!("{CAUTION}");
    Ok(())
}

/// decisions table: one row per application, in processing order.
fn decisions_table(outcome: &QueueOutcome, metadata: &[(&str, String)]) -> headroom_export::Table {
    let d = &outcome.decisions;
    let text = |f: &dyn Fn(&headroom_capacity::Decision) -> String| d.iter().map(f).collect();
    let number = |f: &dyn Fn(&headroom_capacity::Decision) -> f64| d.iter().map(f).collect();
    let mut c = Columns::new(&Crs::Unknown);
    c.add(
        "order",
        ColumnData::UInt64(d.iter().map(|d| d.order as u64).collect()),
    )
    .add("id", ColumnData::Utf8(text(&|d| d.id.clone())))
    .add(
        "feeder",
        ColumnData::Utf8Dictionary(text(&|d| d.feeder.clone())),
    )
    .add("node", ColumnData::Utf8(text(&|d| d.node.clone())))
    .add("kw", ColumnData::Float64(number(&|d| d.kw)))
    .add(
        "power_factor",
        ColumnData::Float64(number(&|d| d.power_factor)),
    )
    .add(
        "absorbing",
        ColumnData::Boolean(d.iter().map(|d| d.absorbing).collect()),
    )
    .add(
        "date",
        ColumnData::NullableUtf8(d.iter().map(|d| d.date.map(|x| x.to_string())).collect()),
    )
    .add(
        "verdict",
        ColumnData::Utf8Dictionary(text(&|d| d.verdict.as_str().to_string())),
    )
    .add("hosting_kw", ColumnData::Float64(number(&|d| d.hosting_kw)))
    .add("margin_kw", ColumnData::Float64(number(&|d| d.margin_kw)))
    .add(
        "limit",
        ColumnData::Utf8Dictionary(text(&|d| d.limit.as_str().to_string())),
    )
    .add(
        "limit_element",
        ColumnData::NullableUtf8(d.iter().map(|d| d.limit_element.clone()).collect()),
    )
    .add(
        "scenario",
        ColumnData::Utf8Dictionary(text(&|d| d.scenario.clone())),
    )
    .add(
        "line",
        ColumnData::UInt64(d.iter().map(|d| d.line as u64).collect()),
    );
    for (key, value) in metadata {
        c.meta(key, value);
    }
    c.finish()
}
