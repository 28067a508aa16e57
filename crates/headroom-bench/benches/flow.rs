//! One load flow of a 5,000-node synthetic feeder at peak load: from a flat start, and from a
//! warm start (the solved base case) after 500 kW is added at the far node. Throughput is in
//! node-iterations (nodes × sweep iterations), so ns per node-iteration = 1 / throughput.

use std::sync::OnceLock;

use divan::Bencher;
use divan::counter::ItemsCount;
use headroom_bench::cases::{FlowCase, LARGE_NODES};

fn case() -> &'static FlowCase {
    static CASE: OnceLock<FlowCase> = OnceLock::new();
    CASE.get_or_init(|| FlowCase::new(LARGE_NODES))
}

#[allow(clippy::print_stdout)]
fn main() {
    let case = case();
    println!(
        "load flow, {} nodes, tolerance 1e-9 pu: {} sweep iterations from a flat start, {} from \
         the warm start",
        case.n_nodes(),
        case.flat_iterations(),
        case.warm_iterations()
    );
    divan::main();
}

#[divan::bench]
fn flat_start(bencher: Bencher) {
    let case = case();
    let items = case.n_nodes() * case.flat_iterations() as usize;
    bencher
        .counter(ItemsCount::new(items))
        .with_inputs(|| case.flat_state())
        .bench_local_refs(|state| case.solve_flat(state));
}

#[divan::bench]
fn warm_start(bencher: Bencher) {
    let case = case();
    let items = case.n_nodes() * case.warm_iterations() as usize;
    bencher
        .counter(ItemsCount::new(items))
        .with_inputs(|| case.base.clone())
        .bench_local_refs(|state| case.solve_warm(state));
}
