//! Screening applications: `check_application` agrees with the map on random synthetic feeders,
//! the what-ifs hold when tried for real, queue order matters, and bad queue rows are each
//! reported with their line.

use std::path::Path;

use headroom_capacity::{
    Application, CheckOptions, CheckReport, FeederStudy, Limit, QueuedApplication, Verdict,
    check_application, map_feeders, parse_queue, run_queue,
};
use headroom_flow::SolveSettings;
use headroom_model::{
    BranchRecord, BusIdx, Feeder, FeederHeader, GenerationSettings, NodeRecord, Scenario, Study,
};
use headroom_synth::{SynthSettings, generate};

const UNITY: GenerationSettings = GenerationSettings {
    power_factor: 1.0,
    absorbing: true,
};

/// SplitMix64, for picking nodes reproducibly.
struct Picker(u64);

impl Picker {
    fn below(&mut self, n: usize) -> usize {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) % n as u64) as usize
    }
}

fn check(prepared: &FeederStudy<'_>, bus: BusIdx, p_kw: f64) -> CheckReport {
    let application = Application::new("", bus, p_kw, prepared.study.generation.clone());
    check_application(prepared, &application, &CheckOptions::default())
}

/// A single line from the source: `src` — `far`, with the far end loaded by `load_kw`.
fn line(r_ohm: f64, x_ohm: f64, rating_a: f64, head_voltage_pu: f64) -> Feeder {
    let mut header = FeederHeader::new("line", 11.0, "src");
    header.head_voltage_pu = head_voltage_pu;
    Feeder::from_records(
        "line",
        header,
        vec![
            NodeRecord::new("src"),
            NodeRecord::new("mid").with_load(100.0, 30.0),
            NodeRecord::new("far").with_load(100.0, 30.0),
        ],
        vec![
            BranchRecord::new("b1", "src", "mid", r_ohm / 2.0, x_ohm / 2.0, rating_a),
            BranchRecord::new("b2", "mid", "far", r_ohm / 2.0, x_ohm / 2.0, rating_a),
        ],
    )
    .unwrap()
}

/// One scenario at light load, voltage change off: overvoltage or thermal binds.
fn light_load_study() -> Study {
    let mut study = Study {
        scenarios: vec![Scenario::new("light", 0.3, 1.0)],
        ..Study::default()
    };
    study.limits.voltage_change_pct = 0.0;
    study.search.max_kw = 50_000.0;
    study
}

#[test]
fn check_agrees_with_map_on_random_nodes_of_random_feeders() {
    let mut picker = Picker(2024);
    let mut limits = std::collections::BTreeSet::new();
    for (n_nodes, seed, resolution_kw) in [(60, 1, 1.0), (250, 7, 1.0), (400, 11, 0.5)] {
        let feeder = generate(&SynthSettings::new(n_nodes, seed))
            .to_feeder("synthetic")
            .unwrap();
        let mut study = Study::default();
        study.search.resolution_kw = resolution_kw;
        let feeders = [feeder];
        let (maps, _) = map_feeders(&feeders, &study, &Default::default(), &|_| {});
        let map = &maps[0];
        let prepared = FeederStudy::prepare(&feeders[0], &study);
        for _ in 0..8 {
            let j = picker.below(n_nodes - 1);
            let bus = BusIdx::new(j as u32 + 1);
            let per_scenario: Vec<f64> = map
                .scenarios
                .iter()
                .map(|s| s.nodes[j].hosting_kw)
                .collect();
            let capacity = per_scenario.iter().copied().fold(f64::INFINITY, f64::min);

            let at = check(&prepared, bus, capacity);
            assert_eq!(
                at.verdict,
                Verdict::Accept,
                "{n_nodes}/{seed} node {j}: {at:#?}"
            );
            assert_eq!(at.hosting_kw, capacity);
            assert_eq!(at.margin_kw, 0.0);
            for (s, scenario) in at.scenarios.iter().enumerate() {
                let mapped = &map.scenarios[s].nodes[j];
                assert_eq!(scenario.hosting_kw, mapped.hosting_kw);
                assert_eq!(scenario.limit, mapped.limit);
                assert_eq!(
                    scenario.limit_element.as_deref(),
                    mapped.element.id(&feeders[0])
                );
                assert!(scenario.breaches_at_request.is_empty());
            }

            let above = check(&prepared, bus, capacity + resolution_kw);
            assert_eq!(above.verdict, Verdict::Refuse, "{n_nodes}/{seed} node {j}");
            assert_eq!(above.hosting_kw, capacity);
            assert_eq!(above.margin_kw, -resolution_kw);
            let decider =
                &above.scenarios[per_scenario.iter().position(|&c| c == capacity).unwrap()];
            assert_eq!(above.deciding_scenario, decider.scenario);
            assert_eq!(above.limit, decider.limit);
            limits.insert(above.limit);
            let what_ifs = above.what_ifs.as_ref().expect("a refusal has what-ifs");
            assert_eq!(what_ifs.export_limit.export_limit_kw, capacity);
        }
    }
    // Not only the search ceiling: real limits bind.
    assert!(
        limits.len() >= 2 && !limits.contains(&Limit::SearchMax),
        "{limits:?}"
    );
}

#[test]
fn suggested_export_limit_passes_and_one_resolution_more_fails() {
    let feeder = generate(&SynthSettings::new(300, 5))
        .to_feeder("synthetic")
        .unwrap();
    let study = Study::default();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let mut picker = Picker(9);
    let mut refused = 0;
    for _ in 0..5 {
        let bus = BusIdx::new(picker.below(feeder.n_nodes() - 1) as u32 + 1);
        let first = check(&prepared, bus, 19_000.0);
        if first.verdict == Verdict::Accept {
            continue;
        }
        refused += 1;
        let limit_kw = first.what_ifs.unwrap().export_limit.export_limit_kw;
        assert_eq!(check(&prepared, bus, limit_kw).verdict, Verdict::Accept);
        let above = check(&prepared, bus, limit_kw + study.search.resolution_kw);
        assert_eq!(above.verdict, Verdict::Refuse);
    }
    assert!(refused >= 3, "only {refused} of 5 requests refused");
}

#[test]
fn absorbing_power_factor_frees_capacity_on_a_voltage_bound_node() {
    // X/R = 1.1: absorbing reactive power offsets part of the rise.
    let feeder = line(3.0, 3.3, 2000.0, 1.0);
    let study = light_load_study();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let far = feeder.node_by_id("far").unwrap();
    let report = check(&prepared, far, 20_000.0);
    assert_eq!(report.verdict, Verdict::Refuse);
    assert_eq!(report.limit, Limit::Overvoltage);
    let what_ifs = report.what_ifs.unwrap();
    let [pf95, pf90] = &what_ifs.power_factor[..] else {
        panic!("two power factors")
    };
    assert_eq!((pf95.power_factor, pf90.power_factor), (0.95, 0.90));
    assert!(pf95.absorbing && pf90.absorbing);
    assert!(pf95.outcome.hosting_kw > report.hosting_kw, "{pf95:?}");
    assert!(
        pf90.outcome.hosting_kw > pf95.outcome.hosting_kw,
        "{pf90:?}"
    );
    // The what-if is a real check at that power factor.
    let at_pf = check_application(
        &prepared,
        &Application::new(
            "",
            far,
            pf90.outcome.hosting_kw,
            GenerationSettings {
                power_factor: 0.90,
                absorbing: true,
            },
        ),
        &CheckOptions::default(),
    );
    assert_eq!(at_pf.verdict, Verdict::Accept);
    assert_eq!(at_pf.hosting_kw, pf90.outcome.hosting_kw);
}

#[test]
fn reinforcement_rating_frees_a_thermally_bound_request() {
    let feeder = line(0.2, 0.2, 150.0, 1.0);
    let study = light_load_study();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let far = feeder.node_by_id("far").unwrap();
    let report = check(&prepared, far, 4000.0);
    assert_eq!(report.verdict, Verdict::Refuse);
    assert_eq!(report.limit, Limit::Thermal);
    let reinforcement = report
        .what_ifs
        .unwrap()
        .reinforcement
        .expect("thermal binds");
    assert_eq!(reinforcement.outcome.verdict, Verdict::Accept);
    let ids: Vec<&str> = reinforcement
        .branches
        .iter()
        .map(|b| b.branch.as_str())
        .collect();
    assert_eq!(ids, ["b1", "b2"]);
    // Rebuild the feeder with the suggested ratings: accepted; one ampere less on b1: refused.
    let rated = |b1_a: f64, b2_a: f64| {
        Feeder::from_records(
            "line",
            FeederHeader::new("line", 11.0, "src"),
            vec![
                NodeRecord::new("src"),
                NodeRecord::new("mid").with_load(100.0, 30.0),
                NodeRecord::new("far").with_load(100.0, 30.0),
            ],
            vec![
                BranchRecord::new("b1", "src", "mid", 0.1, 0.1, b1_a),
                BranchRecord::new("b2", "mid", "far", 0.1, 0.1, b2_a),
            ],
        )
        .unwrap()
    };
    let (b1, b2) = (
        reinforcement.branches[0].needed_rating_a,
        reinforcement.branches[1].needed_rating_a,
    );
    assert!(b1 > 150.0 && b1 == b1.round());
    let strong = rated(b1, b2);
    let check_on = |feeder: &Feeder| {
        let prepared = FeederStudy::prepare(feeder, &study);
        check(&prepared, far, 4000.0).verdict
    };
    assert_eq!(check_on(&strong), Verdict::Accept);
    assert_eq!(check_on(&rated(b1 - 1.0, b2)), Verdict::Refuse);
}

#[test]
fn head_voltage_what_if_is_the_smallest_drop_that_passes() {
    let feeder = line(3.0, 3.3, 2000.0, 1.03);
    let study = light_load_study();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let far = feeder.node_by_id("far").unwrap();
    let p_kw = 2500.0;
    let report = check(&prepared, far, p_kw);
    assert_eq!(report.verdict, Verdict::Refuse);
    assert_eq!(report.limit, Limit::Overvoltage);
    let head = report
        .what_ifs
        .unwrap()
        .head_voltage
        .expect("overvoltage binds");
    assert_eq!(head.head_voltage_pu, 1.03);
    assert_eq!(head.outcome.verdict, Verdict::Accept);
    assert!(head.change_pct < 0.0);
    assert_eq!(
        head.new_head_voltage_pu,
        ((1.03 + head.change_pct / 100.0) * 1e6).round() / 1e6
    );
    // Rebuild the feeder at that head voltage: accepted; one step (0.1 %) less drop: refused.
    let at = |v: f64| {
        let feeder = line(3.0, 3.3, 2000.0, v);
        let prepared = FeederStudy::prepare(&feeder, &study);
        check(&prepared, far, p_kw).verdict
    };
    assert_eq!(at(head.new_head_voltage_pu), Verdict::Accept);
    assert_eq!(at(head.new_head_voltage_pu + 0.001), Verdict::Refuse);
}

#[test]
fn with_plant_state_is_the_load_flow_at_the_request() {
    let feeder = line(3.0, 3.3, 2000.0, 1.0);
    let study = light_load_study();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let far = feeder.node_by_id("far").unwrap();
    let report = check(&prepared, far, 500.0);
    assert_eq!(report.verdict, Verdict::Accept);
    assert!(report.what_ifs.is_none());
    let s = &report.scenarios[0];
    let (without, with) = (
        s.without_plant.as_ref().unwrap(),
        s.with_plant.as_ref().unwrap(),
    );
    assert!(with.v_node_pu > without.v_node_pu);
    assert_eq!(with.v_max_node, "far");
    assert_eq!(without.v_max_node, "src");
    // 60 kW of light load: the plant reverses the flow at the head.
    assert!(without.head_p_kw > 0.0 && with.head_p_kw < 0.0);
    assert!(report.load_flows >= 2);
}

#[test]
fn accepted_generation_follows_gen_scale() {
    // Default scenarios: min-load runs existing generation at full output, peak-load at none.
    let feeder = line(3.0, 3.3, 2000.0, 1.0);
    let mut study = Study::default();
    study.limits.voltage_change_pct = 0.0;
    let far = feeder.node_by_id("far").unwrap();
    let before = FeederStudy::prepare(&feeder, &study);
    let after = FeederStudy::prepare_with(
        &feeder,
        &study,
        SolveSettings::default(),
        &[(far, 400.0, 0.0)],
    );
    let a = check(&before, far, 100.0);
    let b = check(&after, far, 100.0);
    let (min_a, min_b) = (a.scenarios[0].hosting_kw, b.scenarios[0].hosting_kw);
    assert!((min_a - min_b - 400.0).abs() < 30.0, "{min_a} {min_b}");
    assert_eq!(a.scenarios[1].hosting_kw, b.scenarios[1].hosting_kw);
    assert_eq!(a.scenarios[1].without_plant, b.scenarios[1].without_plant);
}

fn queued(feeder: &Feeder, id: &str, node: &str, p_kw: f64) -> QueuedApplication {
    QueuedApplication {
        feeder: 0,
        application: Application::new(id, feeder.node_by_id(node).unwrap(), p_kw, UNITY),
        date: None,
        line: 0,
    }
}

#[test]
fn queue_order_matters() {
    let feeder = line(3.0, 3.3, 2000.0, 1.0);
    let study = light_load_study();
    let prepared = FeederStudy::prepare(&feeder, &study);
    let capacity = check(&prepared, feeder.node_by_id("far").unwrap(), 1.0).hosting_kw;
    // Each fits alone; together they do not.
    let big = queued(&feeder, "big", "far", (0.7 * capacity).round());
    let small = queued(&feeder, "small", "mid", (0.7 * capacity).round());
    let feeders = [feeder.clone()];
    let options = CheckOptions {
        what_ifs: false,
        ..CheckOptions::default()
    };
    let forward = run_queue(&feeders, &study, &[big.clone(), small.clone()], &options);
    let verdicts = |o: &headroom_capacity::QueueOutcome| -> Vec<(String, Verdict)> {
        o.decisions
            .iter()
            .map(|d| (d.id.clone(), d.verdict))
            .collect()
    };
    assert_eq!(
        verdicts(&forward),
        [
            ("big".to_string(), Verdict::Accept),
            ("small".to_string(), Verdict::Refuse)
        ]
    );
    let backward = run_queue(&feeders, &study, &[small, big], &options);
    assert_eq!(
        verdicts(&backward),
        [
            ("small".to_string(), Verdict::Accept),
            ("big".to_string(), Verdict::Refuse)
        ]
    );
    // The second decision sees the first plant: its capacity left is smaller than alone.
    assert!(forward.decisions[1].hosting_kw < capacity);
    assert_eq!(forward.accepted, 1);
    assert_eq!(forward.refused, 1);
    // A refused application leaves the network as it was.
    let three = [
        queued(&feeder, "a", "far", 2.0 * capacity),
        queued(&feeder, "b", "far", capacity),
    ];
    let outcome = run_queue(&feeders, &study, &three, &options);
    assert_eq!(outcome.decisions[0].verdict, Verdict::Refuse);
    assert_eq!(outcome.decisions[1].verdict, Verdict::Accept);
    assert_eq!(outcome.decisions[1].hosting_kw, capacity);
}

#[test]
fn bad_queue_rows_are_each_reported_with_their_line() {
    let feeder = line(3.0, 3.3, 2000.0, 1.0);
    let text = "id,node,kw,power_factor,absorbing\n\
                ok1,far,100,,\n\
                a2,nowhere,100,,\n\
                a3,far,-5,,\n\
                a4,far,lots,,\n\
                a5,far,100,1.2,\n\
                a6,far,100,0,\n\
                a7,far,100,0.95,maybe\n\
                ok1,mid,10,,\n\
                a9,src,10,,\n\
                a10,FAR,10,,\n";
    let errors = parse_queue(Path::new("queue.csv"), text.as_bytes(), &[feeder], &UNITY)
        .unwrap_err()
        .errors;
    let found: Vec<(Option<usize>, Option<&str>, Option<&str>)> = errors
        .iter()
        .map(|e| (e.line, e.column.as_deref(), e.value.as_deref()))
        .collect();
    assert_eq!(
        found,
        [
            (Some(3), Some("node"), Some("nowhere")),
            (Some(4), Some("kw"), Some("-5")),
            (Some(5), Some("kw"), Some("lots")),
            (Some(6), Some("power_factor"), Some("1.2")),
            (Some(7), Some("power_factor"), Some("0")),
            (Some(8), Some("absorbing"), Some("maybe")),
            (Some(9), Some("id"), Some("ok1")),
            (Some(10), Some("node"), Some("src")),
            (Some(11), Some("node"), Some("FAR")),
        ]
    );
    let shown = errors[0].to_string();
    assert!(
        shown.starts_with("queue.csv: line 3: column node: value \"nowhere\""),
        "{shown}"
    );
    assert!(!shown.contains("did you mean"), "{shown}");
    // An id that differs from a node's only in letter case is pointed at.
    let shown = errors[8].to_string();
    assert!(shown.ends_with("(did you mean \"far\"?)"), "{shown}");
}

#[test]
fn queue_rows_read_defaults_and_sort_by_date() {
    let feeder = line(3.0, 3.3, 2000.0, 1.0);
    let feeders = [feeder];
    let text = "id, node ,kw,power_factor,absorbing,date,notes\n\
                late,far,100,,,2025-03-01,x\n\
                early,mid,200,0.95,false,2025-01-15,\n\
                \n\
                same-day,far,50,,TRUE,2025-01-15,\n";
    let parsed = parse_queue(Path::new("q.csv"), text.as_bytes(), &feeders, &UNITY).unwrap();
    assert!(parsed.by_date);
    assert_eq!(parsed.warnings.len(), 1, "the notes column");
    let ids: Vec<&str> = parsed
        .applications
        .iter()
        .map(|a| a.application.id.as_str())
        .collect();
    assert_eq!(ids, ["early", "same-day", "late"]);
    let early = &parsed.applications[0];
    assert_eq!(early.line, 3);
    assert_eq!(early.application.p_kw, 200.0);
    assert_eq!(early.application.generation.power_factor, 0.95);
    assert!(!early.application.generation.absorbing);
    assert_eq!(parsed.applications[2].application.generation, UNITY);

    // Dates on some rows only: an error on each row without one.
    let partial = "id,node,kw,date\na,far,1,2025-01-01\nb,far,1,\nc,far,1,\n";
    let errors = parse_queue(Path::new("q.csv"), partial.as_bytes(), &feeders, &UNITY)
        .unwrap_err()
        .errors;
    let lines: Vec<Option<usize>> = errors.iter().map(|e| e.line).collect();
    assert_eq!(lines, [Some(3), Some(4)]);
    assert!(errors.iter().all(|e| e.column.as_deref() == Some("date")));

    // No date column, or every date empty: file order.
    let undated = "id,node,kw,date\nz,far,1,\ny,far,1,\n";
    let parsed = parse_queue(Path::new("q.csv"), undated.as_bytes(), &feeders, &UNITY).unwrap();
    assert!(!parsed.by_date);
    assert_eq!(parsed.applications[0].application.id, "z");

    // A missing required column stops the reading.
    let errors = parse_queue(Path::new("q.csv"), b"id,node\na,far\n", &feeders, &UNITY)
        .unwrap_err()
        .errors;
    assert_eq!(errors.len(), 1);
    assert!(errors[0].message.contains("kw"));
}
