//! `headroom map`: hosting capacity of every node, every scenario, to GeoParquet.

use std::time::Instant;

use headroom_capacity::{CapacityOptions, FeederMap, SearchMethod, map_feeders};
use headroom_model::{ReverseFlow, Study};

use crate::args::{MapArgs, SearchArg};
use crate::output::{load_inputs, prepare_out_dir, write_table, write_text};
use crate::tables::{
    baseline_table, branches_table, crs_groups, feeders_table, limit_counts, nodes_table,
    stats_line, summarise,
};
use crate::{CAUTION, Failure, progress};

#[allow(clippy::print_stdout)]
pub fn run(args: &MapArgs) -> Result<(), Failure> {
    let (feeders, study) = load_inputs(&args.path, args.study.as_deref())?;
    let groups = crs_groups(&feeders, args.crs_projjson.as_deref())?;
    let options = CapacityOptions {
        method: match args.search {
            SearchArg::Fast => SearchMethod::Fast,
            SearchArg::Stepped => SearchMethod::Stepped,
        },
        criteria_detail: !args.no_criteria_detail,
    };
    let total: u64 = feeders
        .iter()
        .map(|f| (f.n_nodes() as u64 - 1) * study.scenarios.len() as u64)
        .sum();
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(args.threads.unwrap_or(0) as usize)
        .build()
        .map_err(|e| Failure::Usage(format!("cannot start worker threads: {e}")))?;

    let started = Instant::now();
    let bar = progress::bar(total, args.quiet);
    let (maps, stats) = pool.install(|| map_feeders(&feeders, &study, &options, &|n| bar.inc(n)));
    bar.finish_and_clear();
    let seconds = started.elapsed().as_secs_f64();

    prepare_out_dir(&args.out)?;
    let metadata = run_metadata(&study, &options);
    let all: Vec<&FeederMap<'_>> = maps.iter().collect();
    for group in &groups {
        let members: Vec<&FeederMap<'_>> = group.feeders.iter().map(|&i| &maps[i]).collect();
        write_table(
            &args.out,
            &format!("nodes{}.parquet", group.suffix),
            &nodes_table(&members, &group.crs, &metadata),
        )?;
        write_table(
            &args.out,
            &format!("branches{}.parquet", group.suffix),
            &branches_table(&members, &group.crs, &metadata),
        )?;
    }
    write_table(
        &args.out,
        "feeders.parquet",
        &feeders_table(&all, &metadata),
    )?;
    write_table(
        &args.out,
        "baseline.parquet",
        &baseline_table(&all, &metadata),
    )?;
    write_text(
        &args.out.join("run.json"),
        &run_json(&args.path.display().to_string(), &study, &options, &maps),
    )?;

    for map in &maps {
        let f = map.feeder;
        println!(
            "{} ({}, {:.0} kV, {} nodes)",
            f.id(),
            f.header().name,
            f.header().nominal_kv,
            f.n_nodes()
        );
        for (s, sc) in map.scenarios.iter().enumerate() {
            let summary = summarise(map, s);
            let (low, median, high) = summary.hosting.unwrap_or((0.0, 0.0, 0.0));
            println!(
                "  {:<12} capacity kW: lowest {:>8.0}  median {:>8.0}  highest {:>8.0}   binds: {}{}",
                sc.scenario,
                low,
                median,
                high,
                limit_counts(&summary.by_limit),
                if summary.baseline > 0 {
                    format!(
                        "; {} baseline violation(s) present without new generation",
                        summary.baseline
                    )
                } else {
                    String::new()
                }
            );
        }
    }
    println!("{}", stats_line(&stats, seconds));
    println!("Results in {}", args.out.display());
    println!("{CAUTION}");
    Ok(())
}

/// Settings stored in every table's metadata, so a file tells how it was made.
pub fn run_metadata(study: &Study, options: &CapacityOptions) -> Vec<(&'static str, String)> {
    vec![
        ("headroom_version", env!("CARGO_PKG_VERSION").to_string()),
        ("headroom_study", study_text(study)),
        (
            "headroom_search",
            format!(
                "{:?}{}",
                options.method,
                if options.criteria_detail {
                    " with per-criterion capacities"
                } else {
                    ""
                }
            )
            .to_lowercase(),
        ),
        ("headroom_caution", CAUTION.to_string()),
    ]
}

fn study_text(study: &Study) -> String {
    let l = &study.limits;
    let s = &study.search;
    let g = &study.generation;
    let scenarios: Vec<String> = study
        .scenarios
        .iter()
        .map(|sc| {
            format!(
                "{} (loads x{}, generation x{})",
                sc.name, sc.load_scale, sc.gen_scale
            )
        })
        .collect();
    format!(
        "v_min_pu={} v_max_pu={} thermal_pct={} voltage_change_pct={} reverse_flow={}; \
         step_kw={} resolution_kw={} max_kw={}; power_factor={} {}; scenarios: {}",
        l.v_min_pu,
        l.v_max_pu,
        l.thermal_pct,
        l.voltage_change_pct,
        match l.reverse_flow {
            ReverseFlow::Allow => "allow",
            ReverseFlow::Forbid => "forbid",
        },
        s.step_kw,
        s.resolution_kw,
        s.max_kw,
        g.power_factor,
        if g.absorbing {
            "absorbing"
        } else {
            "injecting"
        },
        scenarios.join(", ")
    )
}

fn run_json(
    input: &str,
    study: &Study,
    options: &CapacityOptions,
    maps: &[FeederMap<'_>],
) -> String {
    let feeders: Vec<serde_json::Value> = maps
        .iter()
        .map(|m| {
            serde_json::json!({
                "feeder": m.feeder.id(),
                "name": m.feeder.header().name,
                "substation": m.feeder.header().substation,
                "region": m.feeder.header().region,
                "nominal_kv": m.feeder.header().nominal_kv,
                "crs": m.feeder.header().crs,
                "nodes": m.feeder.n_nodes(),
            })
        })
        .collect();
    let value = serde_json::json!({
        "tool": "headroom",
        "version": env!("CARGO_PKG_VERSION"),
        "input": input,
        "study": study_text(study),
        "scenarios": study.scenarios.iter().map(|s| s.name.clone()).collect::<Vec<_>>(),
        "search": format!("{:?}", options.method).to_lowercase(),
        "criteria_detail": options.criteria_detail,
        "feeders": feeders,
        "caution": CAUTION,
    });
    serde_json::to_string_pretty(&value).unwrap_or_default() + "\n"
}
