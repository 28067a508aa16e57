//! Screening applications on a 5,000-node synthetic feeder (the format's default study): one
//! check that is accepted; refusals with their what-ifs where the voltage change on trip binds
//! (power factors and export limit), and, with that criterion off, where thermal binds (adding
//! the reinforcement) and where overvoltage binds (adding the head-voltage search, the dearest
//! what-if); prepare + check (a whole `headroom check` less reading the files); and a queue of
//! 500 applications on 2 threads.
//! Targets: a single check ≤ 50 ms; the 500-application queue ≤ 10 s on 2 cores.
//!
//! `cargo bench -p headroom-bench --bench check`

use std::sync::OnceLock;

use divan::Bencher;
use headroom_capacity::{
    Application, CheckOptions, FeederStudy, QueuedApplication, Verdict, check_application,
    run_queue,
};
use headroom_model::{BusIdx, Feeder, Study};
use headroom_synth::{SynthSettings, generate};

/// Nodes of the feeder.
const NODES: usize = 5_000;
/// Applications in the queue.
const QUEUE_LENGTH: usize = 500;
/// Request refused on the thermal limit when the voltage-change criterion is off (at
/// [`node`]), kW.
const THERMAL_REQUEST_KW: f64 = 6000.0;

fn feeder() -> &'static Feeder {
    static FEEDER: OnceLock<Feeder> = OnceLock::new();
    FEEDER.get_or_init(|| {
        generate(&SynthSettings::new(NODES, 1))
            .to_feeder("synthetic-5000")
            .expect("synthetic feeders are valid")
    })
}

fn prepared() -> &'static FeederStudy<'static> {
    static PREPARED: OnceLock<FeederStudy<'static>> = OnceLock::new();
    PREPARED.get_or_init(|| FeederStudy::prepare(feeder(), &Study::default()))
}

/// The default study with the voltage-change criterion off: overvoltage binds instead.
fn prepared_no_change() -> &'static FeederStudy<'static> {
    static PREPARED: OnceLock<FeederStudy<'static>> = OnceLock::new();
    PREPARED.get_or_init(|| {
        let mut study = Study::default();
        study.limits.voltage_change_pct = 0.0;
        FeederStudy::prepare(feeder(), &study)
    })
}

/// SplitMix64: reproducible nodes and sizes.
fn splitmix(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The node checked: three quarters of the way down the node order (deep in the feeder).
fn node() -> BusIdx {
    BusIdx::new((NODES * 3 / 4) as u32)
}

/// The node's capacity left (the least over the scenarios), kW.
fn capacity_kw() -> f64 {
    static CAPACITY: OnceLock<f64> = OnceLock::new();
    *CAPACITY.get_or_init(|| {
        let options = CheckOptions {
            what_ifs: false,
            ..CheckOptions::default()
        };
        check_application(prepared(), &application(1.0), &options).hosting_kw
    })
}

fn application(p_kw: f64) -> Application {
    Application::new("bench", node(), p_kw, Study::default().generation)
}

/// With the voltage-change criterion off: the first node (every 97th, from the far end of the
/// node order) whose capacity overvoltage ends, and twice that capacity.
fn overvoltage_case() -> (Application, f64) {
    static CASE: OnceLock<(BusIdx, f64)> = OnceLock::new();
    let &(bus, capacity_kw) = CASE.get_or_init(|| {
        let options = CheckOptions {
            what_ifs: false,
            ..CheckOptions::default()
        };
        (1..NODES)
            .rev()
            .step_by(97)
            .map(|i| BusIdx::new(i as u32))
            .find_map(|bus| {
                let probe = Application::new("probe", bus, 1.0, Study::default().generation);
                let report = check_application(prepared_no_change(), &probe, &options);
                (report.limit == headroom_capacity::Limit::Overvoltage)
                    .then_some((bus, report.hosting_kw))
            })
            .expect("some node is bound by overvoltage")
    });
    (
        Application::new("bench", bus, 2.0 * capacity_kw, Study::default().generation),
        capacity_kw,
    )
}

/// 500 applications at random nodes, 10–150 kW each (rooftop to small ground-mounted solar),
/// in file order.
fn queue() -> &'static [QueuedApplication] {
    static QUEUE: OnceLock<Vec<QueuedApplication>> = OnceLock::new();
    QUEUE.get_or_init(|| {
        let mut state = 2024;
        (0..QUEUE_LENGTH)
            .map(|k| {
                let bus = BusIdx::new(1 + (splitmix(&mut state) % (NODES as u64 - 1)) as u32);
                let p_kw = 10.0 + (splitmix(&mut state) % 15) as f64 * 10.0;
                QueuedApplication {
                    feeder: 0,
                    application: Application::new(
                        format!("app-{k}"),
                        bus,
                        p_kw,
                        Study::default().generation,
                    ),
                    date: None,
                    line: k + 2,
                }
            })
            .collect()
    })
}

fn two_threads() -> &'static rayon::ThreadPool {
    static POOL: OnceLock<rayon::ThreadPool> = OnceLock::new();
    POOL.get_or_init(|| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(2)
            .build()
            .expect("a pool of 2 threads")
    })
}

#[allow(clippy::print_stdout)]
fn main() {
    let capacity = capacity_kw();
    let accept = check_application(
        prepared(),
        &application(capacity / 2.0),
        &CheckOptions::default(),
    );
    let refuse = check_application(
        prepared(),
        &application(2.0 * capacity),
        &CheckOptions::default(),
    );
    let thermal = check_application(
        prepared_no_change(),
        &application(THERMAL_REQUEST_KW),
        &CheckOptions::default(),
    );
    let (overvoltage_application, overvoltage_capacity) = overvoltage_case();
    let overvoltage = check_application(
        prepared_no_change(),
        &overvoltage_application,
        &CheckOptions::default(),
    );
    assert_eq!(accept.verdict, Verdict::Accept);
    assert_eq!(refuse.verdict, Verdict::Refuse);
    println!(
        "check at node {} (capacity {capacity} kW, {} binds): accepted request {} load flows, \
         refused request with what-ifs {} load flows",
        feeder().node(node()).id,
        accept.limit,
        accept.load_flows,
        refuse.load_flows
    );
    for (name, report) in [("thermal", &thermal), ("overvoltage", &overvoltage)] {
        let what_ifs = report.what_ifs.as_ref().expect("refused");
        println!(
            "voltage change off, {name} case: {} kW at node {} refused ({} binds, capacity {} \
             kW), with what-ifs {} load flows; reinforcement: {}; head voltage: {}",
            report.kw,
            report.node,
            report.limit,
            report.hosting_kw,
            report.load_flows,
            what_ifs
                .reinforcement
                .as_ref()
                .map_or("none".to_string(), |r| format!(
                    "{} branch(es), request {}",
                    r.branches.len(),
                    r.outcome.verdict.as_str()
                )),
            what_ifs
                .head_voltage
                .as_ref()
                .map_or("none".to_string(), |h| format!(
                    "{:+} %, request {}",
                    h.change_pct,
                    h.outcome.verdict.as_str()
                )),
        );
    }
    assert!(overvoltage_capacity > 0.0);
    let outcome = two_threads().install(|| {
        run_queue(
            std::slice::from_ref(feeder()),
            &Study::default(),
            queue(),
            &CheckOptions {
                what_ifs: false,
                ..CheckOptions::default()
            },
        )
    });
    println!(
        "queue of {QUEUE_LENGTH}: {} accepted ({} kW), {} refused, {} load flows",
        outcome.accepted, outcome.accepted_kw, outcome.refused, outcome.load_flows
    );
    divan::main();
}

#[divan::bench(sample_count = 20, sample_size = 1)]
fn check_accepted(bencher: Bencher) {
    let application = application(capacity_kw() / 2.0);
    bencher.bench(|| check_application(prepared(), &application, &CheckOptions::default()));
}

#[divan::bench(sample_count = 20, sample_size = 1)]
fn check_refused_with_what_ifs(bencher: Bencher) {
    let application = application(2.0 * capacity_kw());
    bencher.bench(|| check_application(prepared(), &application, &CheckOptions::default()));
}

#[divan::bench(sample_count = 20, sample_size = 1)]
fn check_refused_thermal_with_what_ifs(bencher: Bencher) {
    let application = application(THERMAL_REQUEST_KW);
    bencher
        .bench(|| check_application(prepared_no_change(), &application, &CheckOptions::default()));
}

#[divan::bench(sample_count = 20, sample_size = 1)]
fn check_refused_overvoltage_with_what_ifs(bencher: Bencher) {
    let (application, _) = overvoltage_case();
    bencher
        .bench(|| check_application(prepared_no_change(), &application, &CheckOptions::default()));
}

#[divan::bench(sample_count = 20, sample_size = 1)]
fn prepare_and_check_accepted(bencher: Bencher) {
    let application = application(capacity_kw() / 2.0);
    bencher.bench(|| {
        let prepared = FeederStudy::prepare(feeder(), &Study::default());
        check_application(&prepared, &application, &CheckOptions::default())
    });
}

#[divan::bench(sample_count = 3, sample_size = 1)]
fn queue_of_500_on_2_threads(bencher: Bencher) {
    let options = CheckOptions {
        what_ifs: false,
        ..CheckOptions::default()
    };
    bencher.bench(|| {
        two_threads().install(|| {
            run_queue(
                std::slice::from_ref(feeder()),
                &Study::default(),
                queue(),
                &options,
            )
        })
    });
}
