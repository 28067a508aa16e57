//! Results do not depend on how they were computed: `headroom map` on a synthetic region gives
//! byte-identical tables with one worker thread and with two, and the stepped reference search
//! of the definition gives the same capacity, binding criterion and element as the fast search.

use std::collections::BTreeMap;
use std::ffi::OsStr;
use std::path::{Path, PathBuf};

use crate::command::{ParquetTable, run_ok};

/// Writes a synthetic region of two 400-node feeders (seed 7) below `dir` and returns its folder.
/// A region, not a single feeder folder: the shared conductor library is the region's
/// conductors.csv, the parent of each feeder folder.
fn synthetic_region(dir: &Path) -> PathBuf {
    let region = dir.join("region");
    run_ok(&[
        OsStr::new("synth"),
        OsStr::new("--nodes"),
        OsStr::new("400"),
        OsStr::new("--seed"),
        OsStr::new("7"),
        OsStr::new("--feeders"),
        OsStr::new("2"),
        OsStr::new("--out"),
        region.as_os_str(),
    ]);
    assert!(region.join("conductors.csv").is_file());
    region
}

/// `headroom map PATH --out OUT --quiet EXTRA...`; returns what it prints.
fn map(path: &Path, out: &Path, extra: &[&str]) -> String {
    let mut args = vec![
        OsStr::new("map"),
        path.as_os_str(),
        OsStr::new("--out"),
        out.as_os_str(),
        OsStr::new("--quiet"),
    ];
    args.extend(extra.iter().map(OsStr::new));
    run_ok(&args)
}

const TABLES: [&str; 4] = [
    "nodes.parquet",
    "branches.parquet",
    "feeders.parquet",
    "baseline.parquet",
];

#[test]
fn one_and_two_threads_write_byte_identical_tables() {
    let dir = tempfile::tempdir().unwrap();
    let region = synthetic_region(dir.path());
    let one = dir.path().join("one-thread");
    let two = dir.path().join("two-threads");
    map(&region, &one, &["--threads", "1"]);
    map(&region, &two, &["--threads", "2"]);
    for table in TABLES {
        let a = std::fs::read(one.join(table)).unwrap();
        let b = std::fs::read(two.join(table)).unwrap();
        assert!(a == b, "{table} differs between one and two threads");
    }
    // Not a vacuous comparison: both feeders, both default scenarios, every node but the heads.
    let nodes = ParquetTable::read(&one.join("nodes.parquet"));
    assert_eq!(nodes.n_rows(), 2 * 2 * 399);
    assert!(nodes.f64s("hosting_kw").iter().any(|&kw| kw > 0.0));
}

/// (feeder, scenario, node) → (hosting_kw, limit, limit_element).
type Answers = BTreeMap<(String, String, String), (f64, String, Option<String>)>;

fn answers(out: &Path) -> Answers {
    let table = ParquetTable::read(&out.join("nodes.parquet"));
    let keys = table
        .strings("feeder")
        .into_iter()
        .zip(table.strings("scenario"))
        .zip(table.strings("node"))
        .map(|((f, s), n)| (f, s, n));
    let values = table
        .f64s("hosting_kw")
        .into_iter()
        .zip(table.strings("limit"))
        .zip(table.opt_strings("limit_element"))
        .map(|((kw, l), e)| (kw, l, e));
    let answers: Answers = keys.zip(values).collect();
    assert_eq!(answers.len(), table.n_rows(), "rows are unique");
    answers
}

#[test]
fn stepped_and_fast_search_give_the_same_answers() {
    let dir = tempfile::tempdir().unwrap();
    let region = synthetic_region(dir.path());
    // One feeder of the region (it reads the region's conductors.csv); the stepped reference
    // steps 50 kW at a time, so it is kept to one feeder and without the per-criterion detail.
    let feeder = std::fs::read_dir(&region)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.is_dir())
        .min()
        .expect("a feeder folder");
    let fast = dir.path().join("fast");
    let stepped = dir.path().join("stepped");
    map(&feeder, &fast, &[]);
    map(
        &feeder,
        &stepped,
        &["--search", "stepped", "--no-criteria-detail"],
    );
    let fast = answers(&fast);
    let stepped = answers(&stepped);
    assert_eq!(fast.len(), 2 * 399);
    assert_eq!(
        fast.keys().collect::<Vec<_>>(),
        stepped.keys().collect::<Vec<_>>()
    );
    let differing: Vec<String> = fast
        .iter()
        .filter(|(key, answer)| stepped[*key] != **answer)
        .map(|(key, answer)| format!("{key:?}: fast {answer:?}, stepped {:?}", stepped[key]))
        .collect();
    assert!(
        differing.is_empty(),
        "{} of {} answers differ:\n{}",
        differing.len(),
        fast.len(),
        differing.join("\n")
    );
    // More than one criterion binds on this feeder, so the comparison covers the element too.
    let limits: std::collections::BTreeSet<&str> =
        fast.values().map(|(_, limit, _)| limit.as_str()).collect();
    assert!(limits.len() >= 2, "{limits:?}");
}

/// Next to voltage collapse (a weak 3.3 kV feeder, limits loosened to 0.5–1.5 pu and 2,000 %
/// until the nose of the P–V curve matters) the fast search hands nodes to the stepped search:
/// the answers still equal the stepped search's, and the run's summary says how many answers
/// were searched step by step.
#[test]
fn next_to_voltage_collapse_the_summary_counts_the_answers_searched_step_by_step() {
    let dir = tempfile::tempdir().unwrap();
    let feeder = dir.path().join("weak");
    run_ok(&[
        OsStr::new("synth"),
        OsStr::new("--nodes"),
        OsStr::new("60"),
        OsStr::new("--seed"),
        OsStr::new("7"),
        OsStr::new("--kv"),
        OsStr::new("3.3"),
        OsStr::new("--out"),
        feeder.as_os_str(),
    ]);
    let study = dir.path().join("loose.toml");
    std::fs::write(
        &study,
        "[limits]\nv_max_pu = 1.5\nv_min_pu = 0.5\nthermal_pct = 2000.0\n\
         voltage_change_pct = 0.0\n\n[search]\nstep_kw = 100.0\n",
    )
    .unwrap();
    let study = study.to_str().expect("a UTF-8 temporary path");
    let (fast, stepped) = (dir.path().join("fast"), dir.path().join("stepped"));
    let summary = map(&feeder, &fast, &["--study", study]);
    let reference = map(
        &feeder,
        &stepped,
        &["--study", study, "--search", "stepped"],
    );
    assert_eq!(answers(&fast), answers(&stepped));
    let counted = |text: &str| {
        text.lines()
            .find_map(|line| {
                line.split("searched step by step next to voltage collapse: ")
                    .nth(1)
            })
            .map(|n| n.trim().parse::<u64>().unwrap())
    };
    let handed = counted(&summary).unwrap_or_else(|| panic!("no count in:\n{summary}"));
    assert!(handed > 0 && handed <= 2 * 59, "{handed}");
    // The stepped search hands nothing over, and says nothing about it.
    assert_eq!(counted(&reference), None, "{reference}");
}

/// Two nodes' voltage changes cross their limit 1e-3 of a resolution apart, within 1e-9 of the
/// edge of what counts as a tie: the fast and the stepped search end on solutions that differ
/// in the last digits (they start from different places), and they named different binding
/// nodes before the element was decided, next to such an edge, on solutions that depend on
/// the injection alone. Feeder mossgarrow-01 of `headroom synth --nodes 1000 --seed 3
/// --feeders 200` (tests/data/near-tie), node n672, scenario min-load.
#[test]
fn fast_and_stepped_name_the_same_element_at_the_edge_of_a_tie() {
    use headroom_capacity::{CapacityOptions, FeederStudy, SearchMethod};
    use headroom_model::{BusIdx, Study, load_feeders};

    let feeders = load_feeders(&crate::command::repo_path("tests/data/near-tie"))
        .expect("the near-tie feeder is valid");
    let feeder = &feeders[0];
    let bus = (0..feeder.n_nodes() as u32)
        .map(BusIdx::new)
        .find(|&bus| feeder.node(bus).id == "n672")
        .expect("node n672");
    let prepared = FeederStudy::prepare(feeder, &Study::default());
    let [fast, stepped] = [SearchMethod::Fast, SearchMethod::Stepped].map(|method| {
        let options = CapacityOptions {
            method,
            criteria_detail: true,
        };
        prepared.node_capacity(0, bus, &options)
    });
    assert_eq!(prepared.study.scenarios[0].name, "min-load");
    assert_eq!(fast.hosting_kw, 2994.0);
    assert_eq!(
        (fast.hosting_kw, fast.limit, fast.element),
        (stepped.hosting_kw, stepped.limit, stepped.element)
    );
}
