//! The capacity map: every node of a 5,000-node synthetic feeder in the two default scenarios
//! with the fast search (rayon, all cores), with and without the per-criterion capacities; and
//! the stepped reference against the fast search on a 500-node feeder.

use std::sync::OnceLock;

use divan::Bencher;
use headroom_bench::cases::{
    LARGE_NODES, SEED, SMALL_NODES, map_default_study, options, synthetic_feeder,
};
use headroom_capacity::SearchMethod;
use headroom_model::Feeder;

fn large() -> &'static [Feeder] {
    static FEEDERS: OnceLock<Vec<Feeder>> = OnceLock::new();
    FEEDERS.get_or_init(|| vec![synthetic_feeder(LARGE_NODES, SEED)])
}

fn small() -> &'static [Feeder] {
    static FEEDERS: OnceLock<Vec<Feeder>> = OnceLock::new();
    FEEDERS.get_or_init(|| vec![synthetic_feeder(SMALL_NODES, SEED)])
}

#[allow(clippy::print_stdout)]
fn main() {
    for (name, feeders, method, detail) in [
        (
            "5,000 nodes, fast, per-criterion detail",
            large(),
            SearchMethod::Fast,
            true,
        ),
        ("5,000 nodes, fast", large(), SearchMethod::Fast, false),
        ("500 nodes, fast", small(), SearchMethod::Fast, false),
        ("500 nodes, stepped", small(), SearchMethod::Stepped, false),
    ] {
        let (stats, _) = map_default_study(feeders, &options(method, detail));
        println!(
            "map, {name}: {} answers, {:.2} load-flow equivalents per answer",
            stats.node_results,
            stats.load_flow_equivalents_per_answer()
        );
    }
    divan::main();
}

#[divan::bench(sample_count = 3, sample_size = 1)]
fn large_fast_with_detail(bencher: Bencher) {
    let feeders = large();
    bencher.bench(|| map_default_study(feeders, &options(SearchMethod::Fast, true)));
}

#[divan::bench(sample_count = 3, sample_size = 1)]
fn large_fast(bencher: Bencher) {
    let feeders = large();
    bencher.bench(|| map_default_study(feeders, &options(SearchMethod::Fast, false)));
}

#[divan::bench(sample_count = 5, sample_size = 1)]
fn small_fast(bencher: Bencher) {
    let feeders = small();
    bencher.bench(|| map_default_study(feeders, &options(SearchMethod::Fast, false)));
}

#[divan::bench(sample_count = 3, sample_size = 1)]
fn small_stepped(bencher: Bencher) {
    let feeders = small();
    bencher.bench(|| map_default_study(feeders, &options(SearchMethod::Stepped, false)));
}
