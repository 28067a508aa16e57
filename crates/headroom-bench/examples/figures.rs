//! Prints every performance figure quoted in docs/performance.md, with its target, in one run:
//! `cargo run --release -p headroom-bench --example figures`.
//!
//! Times are the best of a few repetitions. Each map also reports the CPU time of the process
//! (all threads) and the load average is printed before and after, because the machine may be
//! shared: on a busy machine the wall times grow while the CPU times hardly change. The divan
//! benches (`cargo bench -p headroom-bench`) time the same cases with their own statistics.

use std::time::Instant;

use headroom_bench::cases::{
    FlowCase, LARGE_NODES, SEED, WARM_INJECTION_KW, map_default_study, options, synthetic_feeder,
};
use headroom_capacity::SearchMethod;

/// Best wall time of `repeats` runs of `f`, s.
fn best_seconds(repeats: usize, f: impl FnMut()) -> f64 {
    best_wall_and_cpu(repeats, f).0
}

/// Best wall time and best CPU time (user + system, all threads of the process) of `repeats`
/// runs of `f`, s.
fn best_wall_and_cpu(repeats: usize, mut f: impl FnMut()) -> (f64, f64) {
    let (mut wall_s, mut cpu_s) = (f64::INFINITY, f64::INFINITY);
    for _ in 0..repeats {
        let cpu_before = process_cpu_seconds();
        let started = Instant::now();
        f();
        wall_s = wall_s.min(started.elapsed().as_secs_f64());
        cpu_s = cpu_s.min(process_cpu_seconds() - cpu_before);
    }
    (wall_s, cpu_s)
}

/// CPU time used by this process so far, s: utime + stime of /proc/self/stat (Linux), in clock
/// ticks of 1/100 s (the USER_HZ of Linux on the common architectures). NaN elsewhere.
fn process_cpu_seconds() -> f64 {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else {
        return f64::NAN;
    };
    // Fields after the command name, which is in parentheses and may hold spaces.
    let after = stat.rsplit_once(')').map_or("", |(_, rest)| rest);
    let fields: Vec<&str> = after.split_whitespace().collect();
    // utime and stime are fields 14 and 15 of the line, 12 and 13 after the name.
    let ticks = |i: usize| fields.get(i).and_then(|f| f.parse::<f64>().ok());
    match (ticks(11), ticks(12)) {
        (Some(user), Some(system)) => (user + system) / 100.0,
        _ => f64::NAN,
    }
}

fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|text| {
            text.split_whitespace()
                .take(3)
                .collect::<Vec<_>>()
                .join(" ")
        })
        .unwrap_or_else(|_| "unknown".to_string())
}

fn verdict(met: bool) -> &'static str {
    if met { "met" } else { "MISSED" }
}

fn cpu_model() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, model)| model.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".to_string())
}

/// Rounds of the stepped-vs-fast comparison on the large feeder.
const STEPPED_ROUNDS: usize = 2;

#[allow(clippy::print_stdout)]
fn main() {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    println!("machine: {cores} logical cores, {}", cpu_model());
    println!(
        "load average at the start (1, 5, 15 min): {}",
        load_average()
    );
    println!();

    // Load flow, single thread.
    let case = FlowCase::new(LARGE_NODES);
    let n = case.n_nodes() as f64;
    let flat_iterations = case.flat_iterations();
    let warm_iterations = case.warm_iterations();
    let repeats = 200;
    let mut state = case.flat_state();
    let flat_s = best_seconds(repeats, || {
        state.set_flat(&case.network);
        case.solve_flat(&mut state);
    });
    let warm_s = best_seconds(repeats, || {
        state.copy_from(&case.base);
        case.solve_warm(&mut state);
    });
    let flat_ns = flat_s * 1e9 / (n * f64::from(flat_iterations));
    let warm_ns = warm_s * 1e9 / (n * f64::from(warm_iterations));
    println!(
        "load flow, {} nodes at peak load, tolerance 1e-9 pu, one thread (best of {repeats}):",
        case.n_nodes()
    );
    println!(
        "  flat start: {flat_iterations} sweep iterations (target <= 8: {}), {:.1} us per solve, \
         {flat_ns:.2} ns per node-iteration (target <= 6: {})",
        verdict(flat_iterations <= 8),
        flat_s * 1e6,
        verdict(flat_ns <= 6.0)
    );
    println!(
        "  warm start (+{WARM_INJECTION_KW} kW at the far node): {warm_iterations} sweep \
         iterations (target <= 4: {}), {:.1} us per solve, {warm_ns:.2} ns per node-iteration \
         (target <= 6: {})",
        verdict(warm_iterations <= 4),
        warm_s * 1e6,
        verdict(warm_ns <= 6.0)
    );
    println!();

    // Full map of the large feeder, all cores.
    let large = vec![synthetic_feeder(LARGE_NODES, SEED)];
    println!(
        "map, {LARGE_NODES} nodes, scenarios min-load and peak-load, fast search, {cores} threads \
         (best of 2):"
    );
    for detail in [false, true] {
        let options = options(SearchMethod::Fast, detail);
        let (stats, _) = map_default_study(&large, &options);
        let (seconds, cpu_seconds) = best_wall_and_cpu(2, || {
            map_default_study(&large, &options);
        });
        let equivalents = stats.load_flow_equivalents_per_answer();
        println!(
            "  {}: {seconds:.2} s wall (target <= 4 s: {}), {cpu_seconds:.2} s CPU, {} answers, \
             {} load flows, {equivalents:.2} load-flow equivalents per answer (target <= 3: {})",
            if detail {
                "with per-criterion capacities"
            } else {
                "capacity only"
            },
            verdict(seconds <= 4.0),
            stats.node_results,
            stats.load_flows,
            verdict(equivalents <= 3.0)
        );
    }
    println!();

    // The stepped reference against the fast search on the same large feeder: rounds of one
    // stepped map then two fast maps, so that a change in the machine's load falls on both.
    println!(
        "map, {LARGE_NODES} nodes, same scenarios, {cores} threads: stepped vs fast search \
         ({STEPPED_ROUNDS} rounds of one stepped map and two fast maps; best of each):"
    );
    for detail in [false, true] {
        let fast = options(SearchMethod::Fast, detail);
        let stepped = options(SearchMethod::Stepped, detail);
        let (fast_stats, _) = map_default_study(&large, &fast);
        let mut stepped_stats = None;
        let (mut fast_s, mut fast_cpu_s) = (f64::INFINITY, f64::INFINITY);
        let (mut stepped_s, mut stepped_cpu_s) = (f64::INFINITY, f64::INFINITY);
        let mut round_ratios = Vec::new();
        for _ in 0..STEPPED_ROUNDS {
            let (round_stepped_s, round_stepped_cpu_s) = best_wall_and_cpu(1, || {
                stepped_stats = Some(map_default_study(&large, &stepped).0);
            });
            let (round_fast_s, round_fast_cpu_s) = best_wall_and_cpu(2, || {
                map_default_study(&large, &fast);
            });
            round_ratios.push(format!("{:.1}x", round_stepped_s / round_fast_s));
            stepped_s = stepped_s.min(round_stepped_s);
            stepped_cpu_s = stepped_cpu_s.min(round_stepped_cpu_s);
            fast_s = fast_s.min(round_fast_s);
            fast_cpu_s = fast_cpu_s.min(round_fast_cpu_s);
        }
        let stepped_stats = stepped_stats.expect("ran at least once");
        let ratio = stepped_s / fast_s;
        println!(
            "  {}: fast {fast_s:.2} s wall, {fast_cpu_s:.2} s CPU ({:.2} load-flow equivalents \
             per answer); stepped {stepped_s:.1} s wall, {stepped_cpu_s:.1} s CPU ({:.1}); fast is \
             {ratio:.1}x faster by wall time (rounds: {}), {:.1}x by CPU time, {:.1}x in \
             load-flow equivalents (target >= 25x: {})",
            if detail {
                "with per-criterion capacities"
            } else {
                "capacity only"
            },
            fast_stats.load_flow_equivalents_per_answer(),
            stepped_stats.load_flow_equivalents_per_answer(),
            round_ratios.join(", "),
            stepped_cpu_s / fast_cpu_s,
            stepped_stats.load_flow_equivalents_per_answer()
                / fast_stats.load_flow_equivalents_per_answer(),
            verdict(ratio >= 25.0)
        );
    }
    println!();
    println!("load average at the end (1, 5, 15 min): {}", load_average());
}
