//! Utility-scale runs: a `headroom map` killed part-way and started again finishes with nothing
//! lost, nothing counted twice and no stray file; a second process on the same share is refused
//! while the first runs; three shards run as separate processes give exactly the rows of one
//! run; the shard of a Slurm job array or a Kubernetes Indexed Job is read from the environment
//! as documented.

use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use headroom_capacity::{Shard, ShardError, ShardSource, shard_from_environment};

use crate::command::{ParquetTable, describe, headroom, run_ok};

/// Scheduler variables cleared in every child, so the tests behave the same inside a job.
const SCHEDULER_VARIABLES: [&str; 7] = [
    "SLURM_ARRAY_TASK_ID",
    "SLURM_ARRAY_TASK_MIN",
    "SLURM_ARRAY_TASK_MAX",
    "SLURM_ARRAY_TASK_STEP",
    "SLURM_ARRAY_TASK_COUNT",
    "JOB_COMPLETION_INDEX",
    "HEADROOM_SHARD_COUNT",
];

/// `headroom map REGION --out OUT --quiet EXTRA...`, with no scheduler variables.
fn map_command(region: &Path, out: &Path, extra: &[&str]) -> Command {
    let mut command = headroom();
    command
        .arg("map")
        .arg(region)
        .arg("--out")
        .arg(out)
        .arg("--quiet")
        .args(extra);
    for variable in SCHEDULER_VARIABLES {
        command.env_remove(variable);
    }
    command
}

fn map_ok(region: &Path, out: &Path, extra: &[&str]) -> String {
    let output = map_command(region, out, extra)
        .output()
        .expect("headroom can be started");
    assert!(output.status.success(), "{}", describe(&output));
    String::from_utf8(output.stdout).expect("stdout is UTF-8")
}

/// Runs `headroom map`, expects a refusal (exit 2) and returns its message.
fn map_refused(region: &Path, out: &Path, extra: &[&str]) -> String {
    let output = map_command(region, out, extra)
        .output()
        .expect("headroom can be started");
    assert_eq!(output.status.code(), Some(2), "{}", describe(&output));
    String::from_utf8_lossy(&output.stderr).into_owned()
}

/// A synthetic region of `n_feeders` feeders of `n_nodes` nodes below `dir`.
fn region(dir: &Path, n_feeders: u32, n_nodes: u32, seed: u32) -> PathBuf {
    let region = dir.join("region");
    let (f, n, s) = (n_feeders.to_string(), n_nodes.to_string(), seed.to_string());
    run_ok(&[
        OsStr::new("synth"),
        OsStr::new("--feeders"),
        OsStr::new(&f),
        OsStr::new("--nodes"),
        OsStr::new(&n),
        OsStr::new("--seed"),
        OsStr::new(&s),
        OsStr::new("--out"),
        region.as_os_str(),
    ]);
    region
}

/// One node row, floats as bits so that equality is exact.
type NodeRow = (
    String,
    String,
    String,
    u64,
    String,
    Option<String>,
    u64,
    u64,
);

/// Every row of every `nodes*.parquet` anywhere under `dir` (the glob `dir/**/nodes*.parquet`
/// of the output contract), sorted.
fn node_rows(dir: &Path) -> Vec<NodeRow> {
    let mut rows = Vec::new();
    for path in files_under(dir) {
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        if !(name.starts_with("nodes") && name.ends_with(".parquet")) {
            continue;
        }
        let table = ParquetTable::read(&path);
        let feeder = table.strings("feeder");
        let scenario = table.strings("scenario");
        let node = table.strings("node");
        let hosting_kw = table.f64s("hosting_kw");
        let limit = table.strings("limit");
        let element = table.opt_strings("limit_element");
        let v_base_pu = table.f64s("v_base_pu");
        let x = table.f64s("x");
        for i in 0..table.n_rows() {
            rows.push((
                feeder[i].clone(),
                scenario[i].clone(),
                node[i].clone(),
                hosting_kw[i].to_bits(),
                limit[i].clone(),
                element[i].clone(),
                v_base_pu[i].to_bits(),
                x[i].to_bits(),
            ));
        }
    }
    rows.sort();
    rows
}

/// (feeder, scenario, id) of every row of the tables of `kind` under `dir`, sorted, with one
/// number of the row as bits.
fn keyed_rows(dir: &Path, kind: &str, id_column: &str, value_column: &str) -> Vec<(String, u64)> {
    let mut rows = Vec::new();
    for path in files_under(dir) {
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        if !(name.starts_with(kind) && name.ends_with(".parquet")) {
            continue;
        }
        let table = ParquetTable::read(&path);
        let feeder = table.strings("feeder");
        let scenario = table.strings("scenario");
        let id = table.opt_strings(id_column);
        let value = table.f64s(value_column);
        for i in 0..table.n_rows() {
            let key = format!("{}|{}|{:?}", feeder[i], scenario[i], id[i]);
            rows.push((key, value[i].to_bits()));
        }
    }
    rows.sort();
    rows
}

/// Every file below `dir`, hidden ones included.
fn files_under(dir: &Path) -> Vec<PathBuf> {
    let mut files = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(folder) = stack.pop() {
        for entry in std::fs::read_dir(&folder).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                stack.push(path);
            } else {
                files.push(path);
            }
        }
    }
    files.sort();
    files
}

/// Names directly in `dir`.
fn names_in(dir: &Path) -> BTreeSet<String> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect()
}

/// The folder of a finished whole-region run holds its four tables and its manifest, and
/// nothing else (no work folder, lock or temporary file).
fn assert_only_results_and_manifest(out: &Path) {
    let expected: BTreeSet<String> = TABLES
        .iter()
        .copied()
        .chain(["run.json"])
        .map(String::from)
        .collect();
    assert_eq!(
        names_in(out),
        expected,
        "nothing but the results and the manifest is left"
    );
}

/// `headroom map` started in the background, its output thrown away.
fn spawn_quiet(region: &Path, out: &Path, extra: &[&str]) -> std::process::Child {
    map_command(region, out, extra)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("headroom can be started")
}

/// Waits until the run `child` writing into `done` has finished `at_least` feeders; fails if it
/// ends first.
fn wait_for_done_feeders(child: &mut std::process::Child, done: &Path, at_least: usize) {
    let deadline = Instant::now() + Duration::from_secs(300);
    while std::fs::read_dir(done).map_or(0, |d| d.count()) < at_least {
        assert!(
            child.try_wait().unwrap().is_none(),
            "the run ended before {at_least} feeder(s) were done"
        );
        assert!(Instant::now() < deadline, "no feeder finished in time");
        std::thread::sleep(Duration::from_millis(2));
    }
}

fn assert_one_row_per_key(rows: &[NodeRow], expected: usize) {
    let keys: BTreeSet<(&str, &str, &str)> = rows
        .iter()
        .map(|r| (r.0.as_str(), r.1.as_str(), r.2.as_str()))
        .collect();
    assert_eq!(rows.len(), expected, "rows");
    assert_eq!(keys.len(), expected, "distinct (feeder, scenario, node)");
}

const TABLES: [&str; 4] = [
    "nodes.parquet",
    "branches.parquet",
    "feeders.parquet",
    "baseline.parquet",
];

#[test]
fn a_run_killed_part_way_resumes_with_nothing_lost_or_doubled() {
    let dir = tempfile::tempdir().unwrap();
    // Large enough that one worker thread takes seconds, so the kill lands mid-run.
    let (n_feeders, n_nodes) = (12, 150);
    let region = region(dir.path(), n_feeders, n_nodes, 11);
    let clean = dir.path().join("clean");
    map_ok(&region, &clean, &["--threads", "2"]);

    let out = dir.path().join("killed");
    let done = out.join(".headroom-work").join("done");
    let mut child = spawn_quiet(&region, &out, &["--threads", "1"]);
    wait_for_done_feeders(&mut child, &done, 3);
    child.kill().unwrap();
    child.wait().unwrap();

    // Stopped mid-run: no results yet, some feeders done, no result file half there.
    let n_done_at_kill = std::fs::read_dir(&done).unwrap().count();
    assert!(
        (3..n_feeders as usize).contains(&n_done_at_kill),
        "{n_done_at_kill} feeders done when stopped"
    );
    assert!(!out.join("run.json").exists());
    assert!(
        node_rows(&out).is_empty(),
        "no nodes*.parquet before the end"
    );
    // Other settings: refused, and nothing touched.
    let message = map_refused(&region, &out, &["--search", "stepped"]);
    assert!(message.contains("other settings"), "{message}");
    assert!(message.contains("--fresh"), "{message}");
    assert_eq!(std::fs::read_dir(&done).unwrap().count(), n_done_at_kill);

    // A temporary file as a power cut leaves it, to be cleared on the restart.
    std::fs::write(out.join(".nodes.parquet.tmp-999999-0"), b"PAR1 half").unwrap();

    // The same arguments again: finishes the rest.
    let stdout = map_ok(&region, &out, &["--threads", "2"]);
    assert!(
        stdout.contains(&format!(
            "{n_done_at_kill} of these feeder(s) were finished by an earlier run"
        )),
        "{stdout}"
    );
    assert_only_results_and_manifest(&out);
    let rows = node_rows(&out);
    assert_one_row_per_key(&rows, n_feeders as usize * 2 * (n_nodes as usize - 1));
    assert_eq!(rows, node_rows(&clean));
    for table in TABLES {
        assert_eq!(
            std::fs::read(out.join(table)).unwrap(),
            std::fs::read(clean.join(table)).unwrap(),
            "{table} differs from the uninterrupted run's"
        );
    }

    // Started once more: complete already, nothing mapped again, nothing changed.
    let before = std::fs::read(out.join("nodes.parquet")).unwrap();
    let stdout = map_ok(&region, &out, &[]);
    assert!(stdout.contains("nothing was mapped again"), "{stdout}");
    assert_eq!(std::fs::read(out.join("nodes.parquet")).unwrap(), before);
}

#[test]
fn a_second_process_on_the_same_share_is_refused_while_the_first_runs() {
    let dir = tempfile::tempdir().unwrap();
    // Many feeders, so that the first run is still going while the others are refused.
    let region = region(dir.path(), 24, 150, 13);
    let out = dir.path().join("out");
    let done = out.join(".headroom-work").join("done");
    let mut first = spawn_quiet(&region, &out, &["--threads", "1"]);
    wait_for_done_feeders(&mut first, &done, 1);

    // The same share: refused at once, naming the process that holds it.
    let message = map_refused(&region, &out, &["--threads", "1"]);
    assert!(message.contains("another headroom process"), "{message}");
    assert!(
        message.contains(&format!("process {}", first.id())),
        "{message}"
    );
    // Another split with --fresh would delete the running split's files: refused too.
    let message = map_refused(&region, &out, &["--shard", "1/2", "--fresh"]);
    assert!(
        message.contains("--fresh would delete its files"),
        "{message}"
    );
    assert!(done.exists(), "the running split's work is untouched");
    assert!(
        first.try_wait().unwrap().is_none(),
        "the first run ended while the others were refused: the region is too small to tell"
    );

    // Killed, the first run leaves its lock file but no lock: a new run of the share goes
    // ahead (started over, the cheaper way) and leaves nothing but the results and the
    // manifest.
    first.kill().unwrap();
    first.wait().unwrap();
    assert!(out.join(".headroom-lock").exists());
    map_ok(
        &region,
        &out,
        &["--threads", "2", "--fresh", "--no-criteria-detail"],
    );
    assert_only_results_and_manifest(&out);
}

#[test]
fn three_shards_in_separate_processes_give_the_rows_of_one_run() {
    let dir = tempfile::tempdir().unwrap();
    let (n_feeders, n_nodes) = (12, 60);
    let region = region(dir.path(), n_feeders, n_nodes, 5);
    let whole = dir.path().join("whole");
    map_ok(&region, &whole, &[]);

    // One folder on "shared storage"; the three shards run at the same time, each taking its
    // shard from a different place: Slurm (array 0-2), the argument, Kubernetes.
    let shared = dir.path().join("shared");
    let mut slurm = map_command(&region, &shared, &["--threads", "1"]);
    slurm
        .env("SLURM_ARRAY_TASK_ID", "0")
        .env("SLURM_ARRAY_TASK_MIN", "0")
        .env("SLURM_ARRAY_TASK_MAX", "2")
        .env("SLURM_ARRAY_TASK_COUNT", "3");
    let argument = map_command(&region, &shared, &["--threads", "1", "--shard", "2/3"]);
    let mut kubernetes = map_command(&region, &shared, &["--threads", "1"]);
    kubernetes
        .env("JOB_COMPLETION_INDEX", "2")
        .env("HEADROOM_SHARD_COUNT", "3");
    let children: Vec<_> = [slurm, argument, kubernetes]
        .into_iter()
        .map(|mut c| {
            c.stdout(Stdio::piped())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    let outputs: Vec<_> = children
        .into_iter()
        .map(|c| c.wait_with_output().unwrap())
        .collect();
    for output in &outputs {
        assert!(output.status.success(), "{}", describe(output));
    }
    let stdout = |i: usize| String::from_utf8_lossy(&outputs[i].stdout).into_owned();
    assert!(
        stdout(0).contains("Shard 1/3 (from Slurm job array"),
        "{}",
        stdout(0)
    );
    assert!(
        stdout(1).contains("Shard 2/3 (from --shard)"),
        "{}",
        stdout(1)
    );
    assert!(
        stdout(2).contains("Shard 3/3 (from Kubernetes Indexed Job"),
        "{}",
        stdout(2)
    );

    let mut expected_names: BTreeSet<String> = BTreeSet::new();
    for i in 1..=3 {
        for kind in ["nodes", "branches", "feeders", "baseline"] {
            expected_names.insert(format!("{kind}-shard-{i}-of-3.parquet"));
        }
        expected_names.insert(format!("run-shard-{i}-of-3.json"));
    }
    assert_eq!(names_in(&shared), expected_names);

    // Row for row, the union of the shards is the single run.
    let rows = node_rows(&shared);
    assert_one_row_per_key(&rows, n_feeders as usize * 2 * (n_nodes as usize - 1));
    assert_eq!(rows, node_rows(&whole));
    assert_eq!(
        keyed_rows(&shared, "branches", "branch", "current_a"),
        keyed_rows(&whole, "branches", "branch", "current_a")
    );
    assert_eq!(
        keyed_rows(&shared, "feeders", "name", "hosting_kw_median"),
        keyed_rows(&whole, "feeders", "name", "hosting_kw_median")
    );

    // Each feeder sits in the shard its id hashes to, and in no other.
    let mut shard_of: BTreeMap<String, u32> = BTreeMap::new();
    for i in 1..=3u32 {
        let table = ParquetTable::read(&shared.join(format!("nodes-shard-{i}-of-3.parquet")));
        for feeder in table.strings("feeder") {
            let earlier = shard_of.insert(feeder.clone(), i);
            assert!(earlier.is_none_or(|e| e == i), "{feeder} in two shards");
        }
    }
    assert_eq!(shard_of.len(), n_feeders as usize);
    for (feeder, i) in &shard_of {
        assert_eq!(Shard::of_feeder(feeder, 3), *i, "{feeder}");
    }

    // A whole-region run into the same folder would double count: refused.
    let refused = map_command(&region, &shared, &[]).output().unwrap();
    assert_eq!(refused.status.code(), Some(2), "{}", describe(&refused));
    assert!(String::from_utf8_lossy(&refused.stderr).contains("counted twice"));
}

/// Looks a variable up in `pairs`.
fn lookup(pairs: &[(&str, &str)]) -> impl Fn(&str) -> Option<String> {
    let map: HashMap<String, String> = pairs
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    move |name| map.get(name).cloned()
}

fn shard_of(
    argument: Option<Shard>,
    count: Option<u32>,
    pairs: &[(&str, &str)],
) -> Result<Option<(u32, u32)>, ShardError> {
    let variable = lookup(pairs);
    shard_from_environment(argument, count, &variable)
        .map(|found| found.map(|(s, _)| (s.index(), s.count())))
}

#[test]
fn slurm_array_ids_map_to_shards_whatever_the_range_start() {
    let slurm = |id: &str, min: &str, count: &str| {
        shard_of(
            None,
            None,
            &[
                ("SLURM_ARRAY_TASK_ID", id),
                ("SLURM_ARRAY_TASK_MIN", min),
                ("SLURM_ARRAY_TASK_COUNT", count),
            ],
        )
    };
    // --array=0-2 and --array=1-3 both give 1/3 .. 3/3.
    assert_eq!(slurm("0", "0", "3"), Ok(Some((1, 3))));
    assert_eq!(slurm("2", "0", "3"), Ok(Some((3, 3))));
    assert_eq!(slurm("1", "1", "3"), Ok(Some((1, 3))));
    assert_eq!(slurm("3", "1", "3"), Ok(Some((3, 3))));
    // --array=10-40:10 (4 tasks, step 10).
    let stepped = |id: &str| {
        shard_of(
            None,
            None,
            &[
                ("SLURM_ARRAY_TASK_ID", id),
                ("SLURM_ARRAY_TASK_MIN", "10"),
                ("SLURM_ARRAY_TASK_STEP", "10"),
                ("SLURM_ARRAY_TASK_COUNT", "4"),
            ],
        )
    };
    assert_eq!(stepped("10"), Ok(Some((1, 4))));
    assert_eq!(stepped("40"), Ok(Some((4, 4))));
    assert!(matches!(
        stepped("25"),
        Err(ShardError::SlurmNotContiguous { .. })
    ));
    // --array=1,5,7: not a range; refused rather than guessed.
    assert!(matches!(
        slurm("7", "1", "3"),
        Err(ShardError::SlurmNotContiguous { .. })
    ));
    // Count from the range when SLURM_ARRAY_TASK_COUNT is missing.
    assert_eq!(
        shard_of(
            None,
            None,
            &[
                ("SLURM_ARRAY_TASK_ID", "4"),
                ("SLURM_ARRAY_TASK_MIN", "0"),
                ("SLURM_ARRAY_TASK_MAX", "4"),
            ],
        ),
        Ok(Some((5, 5)))
    );
    // Without the first id the index is ambiguous.
    assert!(matches!(
        shard_of(
            None,
            None,
            &[
                ("SLURM_ARRAY_TASK_ID", "1"),
                ("SLURM_ARRAY_TASK_COUNT", "3")
            ]
        ),
        Err(ShardError::Missing { .. })
    ));
    assert!(matches!(
        slurm("one", "0", "3"),
        Err(ShardError::NotANumber {
            variable: "SLURM_ARRAY_TASK_ID",
            ..
        })
    ));
    // --shard-count must agree with the array.
    assert!(matches!(
        shard_of(
            None,
            Some(4),
            &[
                ("SLURM_ARRAY_TASK_ID", "0"),
                ("SLURM_ARRAY_TASK_MIN", "0"),
                ("SLURM_ARRAY_TASK_COUNT", "3"),
            ],
        ),
        Err(ShardError::CountMismatch { .. })
    ));
    let variable = lookup(&[
        ("SLURM_ARRAY_TASK_ID", "5"),
        ("SLURM_ARRAY_TASK_MIN", "4"),
        ("SLURM_ARRAY_TASK_COUNT", "8"),
    ]);
    let (shard, source) = shard_from_environment(None, None, &variable)
        .unwrap()
        .unwrap();
    assert_eq!(shard.to_string(), "2/8");
    assert_eq!(
        source,
        ShardSource::Slurm {
            task_id: 5,
            task_min: 4,
            task_step: 1
        }
    );
    assert!(source.to_string().contains("SLURM_ARRAY_TASK_ID=5"));
}

#[test]
fn kubernetes_indexes_are_zero_based_and_need_a_count() {
    let index = [("JOB_COMPLETION_INDEX", "0")];
    assert_eq!(shard_of(None, Some(4), &index), Ok(Some((1, 4))));
    assert_eq!(
        shard_of(
            None,
            None,
            &[("JOB_COMPLETION_INDEX", "3"), ("HEADROOM_SHARD_COUNT", "4")]
        ),
        Ok(Some((4, 4)))
    );
    assert!(matches!(
        shard_of(None, None, &index),
        Err(ShardError::Missing { .. })
    ));
    assert!(matches!(
        shard_of(None, Some(3), &[("JOB_COMPLETION_INDEX", "3")]),
        Err(ShardError::OutOfRange { index: 4, count: 3 })
    ));
    assert!(matches!(
        shard_of(
            None,
            Some(3),
            &[("JOB_COMPLETION_INDEX", "0"), ("HEADROOM_SHARD_COUNT", "4")]
        ),
        Err(ShardError::CountMismatch { .. })
    ));
}

#[test]
fn the_argument_wins_and_nothing_means_the_whole_run() {
    let everything = [
        ("SLURM_ARRAY_TASK_ID", "0"),
        ("SLURM_ARRAY_TASK_MIN", "0"),
        ("SLURM_ARRAY_TASK_COUNT", "3"),
        ("JOB_COMPLETION_INDEX", "1"),
        ("HEADROOM_SHARD_COUNT", "3"),
    ];
    let argument = Shard::parse("3/5").unwrap();
    assert_eq!(
        shard_of(Some(argument), None, &everything),
        Ok(Some((3, 5)))
    );
    // Slurm before Kubernetes.
    assert_eq!(shard_of(None, None, &everything), Ok(Some((1, 3))));
    assert_eq!(shard_of(None, None, &[]), Ok(None));
    // A count on its own is refused, not ignored.
    assert!(matches!(
        shard_of(None, Some(3), &[]),
        Err(ShardError::Missing { .. })
    ));
    // HEADROOM_SHARD_COUNT alone is harmless (set for the whole cluster, say).
    assert_eq!(
        shard_of(None, None, &[("HEADROOM_SHARD_COUNT", "3")]),
        Ok(None)
    );
    assert!(Shard::parse("0/3").is_err());
    assert!(Shard::parse("4/3").is_err());
    assert!(Shard::parse("2-3").is_err());
    assert_eq!(
        Shard::parse(" 2 / 3 ").unwrap().file_suffix(),
        "-shard-2-of-3"
    );
    assert_eq!(Shard::parse("1/1").unwrap().file_suffix(), "");
}
