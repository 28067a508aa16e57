//! `headroom check`: one application (report and JSON), agreement with `map`, usage errors, and
//! queues (decisions table, order, bad rows).

use std::path::Path;

use assert_cmd::Command;
use serde_json::Value;

use crate::command::{ParquetTable, repo_path};

const CAUTION: &str = "Caution: planning estimates only.";

/// The shared `headroom` command, with assert_cmd's assertions.
fn headroom() -> Command {
    Command::from_std(crate::command::headroom())
}

fn bw33() -> String {
    repo_path("tests/data/reference/bw33").display().to_string()
}

/// A study with the voltage-change criterion off, so that overvoltage binds on bw33.
fn no_change_study(dir: &Path) -> String {
    let path = dir.join("study.toml");
    std::fs::write(&path, "[limits]\nvoltage_change_pct = 0\n").unwrap();
    path.display().to_string()
}

fn check_json(args: &[&str]) -> Value {
    let output = headroom()
        .args(["check"])
        .args(args)
        .arg("--json")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    serde_json::from_slice(&output).expect("stdout is one JSON document")
}

#[test]
fn json_report_has_the_contract_fields() {
    let report = check_json(&[&bw33(), "--node", "18", "--kw", "100"]);
    assert_eq!(report["verdict"], "accept");
    assert_eq!(report["node"], "18");
    assert_eq!(report["kw"], 100.0);
    assert_eq!(report["feeder"], "bw33");
    assert!(report["caution"].as_str().unwrap().starts_with(CAUTION));
    let scenarios = report["scenarios"].as_array().unwrap();
    let names: Vec<&str> = scenarios
        .iter()
        .map(|s| s["scenario"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["min-load", "peak-load"]);
    for s in scenarios {
        assert_eq!(s["verdict"], "accept");
        let hosting_kw = s["hosting_kw"].as_f64().unwrap();
        assert_eq!(s["margin_kw"].as_f64().unwrap(), hosting_kw - 100.0);
        assert!(s["limit"].is_string());
        assert!(s.get("limit_element").is_some());
        let (without, with) = (&s["without_plant"], &s["with_plant"]);
        assert!(with["v_node_pu"].as_f64().unwrap() > without["v_node_pu"].as_f64().unwrap());
        assert!(with["v_max_pu"].is_f64() && with["loading_max_pct"].is_f64());
    }
    // Accepted: no what-ifs.
    assert!(report["what_ifs"].is_null());
    assert!(report["deciding_scenario"].is_string());
}

#[test]
fn refusal_is_data_and_comes_with_what_ifs() {
    let dir = tempfile::tempdir().unwrap();
    let study = no_change_study(dir.path());
    let report = check_json(&[&bw33(), "--node", "18", "--kw", "2000", "--study", &study]);
    assert_eq!(report["verdict"], "refuse");
    assert_eq!(report["limit"], "overvoltage");
    let hosting_kw = report["hosting_kw"].as_f64().unwrap();
    assert_eq!(report["margin_kw"].as_f64().unwrap(), hosting_kw - 2000.0);
    let what_ifs = &report["what_ifs"];
    assert!(
        what_ifs["note"]
            .as_str()
            .unwrap()
            .starts_with("Planning estimates")
    );
    let pfs: Vec<f64> = what_ifs["power_factor"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["power_factor"].as_f64().unwrap())
        .collect();
    assert_eq!(pfs, [0.95, 0.90]);
    for p in what_ifs["power_factor"].as_array().unwrap() {
        assert!(p["hosting_kw"].as_f64().unwrap() >= hosting_kw);
    }
    assert_eq!(
        what_ifs["export_limit"]["export_limit_kw"]
            .as_f64()
            .unwrap(),
        hosting_kw
    );
    let head = &what_ifs["head_voltage"];
    assert!(head["new_head_voltage_pu"].as_f64().unwrap() < 1.0);
    assert!(head["change_pct"].as_f64().unwrap() < 0.0);

    // The export limit passes; a kilowatt more does not.
    let at = |kw: f64| {
        check_json(&[
            &bw33(),
            "--node",
            "18",
            "--kw",
            &kw.to_string(),
            "--study",
            &study,
            "--no-what-ifs",
        ])["verdict"]
            .clone()
    };
    assert_eq!(at(hosting_kw), "accept");
    assert_eq!(at(hosting_kw + 1.0), "refuse");

    // The plain report says the same, with the caution line.
    let assert = headroom()
        .args([
            "check",
            &bw33(),
            "--node",
            "18",
            "--kw",
            "2000",
            "--study",
            &study,
        ])
        .assert()
        .success();
    let text = String::from_utf8_lossy(&assert.get_output().stdout).into_owned();
    assert!(text.contains("Verdict: REFUSE"), "{text}");
    assert!(text.contains("What-ifs (planning estimates"), "{text}");
    assert!(text.contains("power factor 0.95 absorbing"), "{text}");
    assert!(text.contains("export limit"), "{text}");
    assert!(
        text.trim_end().ends_with("before any connection decision."),
        "{text}"
    );
}

#[test]
fn check_agrees_with_map_at_the_capacity_and_one_kilowatt_above() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("map");
    headroom()
        .args(["map", &bw33(), "--quiet", "--out"])
        .arg(&out)
        .assert()
        .success();
    let nodes = ParquetTable::read(&out.join("nodes.parquet"));
    let node_ids = nodes.opt_strings("node");
    let hosting = nodes.f64s("hosting_kw");
    for node in ["2", "9", "18", "25", "33"] {
        let capacity = node_ids
            .iter()
            .zip(&hosting)
            .filter(|(id, _)| id.as_deref() == Some(node))
            .map(|(_, kw)| *kw)
            .fold(f64::INFINITY, f64::min);
        assert!(capacity.is_finite() && capacity > 0.0, "node {node}");
        let at = check_json(&[&bw33(), "--node", node, "--kw", &capacity.to_string()]);
        assert_eq!(at["verdict"], "accept", "node {node} at {capacity} kW");
        assert_eq!(at["hosting_kw"].as_f64().unwrap(), capacity);
        let above = check_json(&[
            &bw33(),
            "--node",
            node,
            "--kw",
            &(capacity + 1.0).to_string(),
            "--no-what-ifs",
        ]);
        assert_eq!(
            above["verdict"], "refuse",
            "node {node} at {capacity} + 1 kW"
        );
    }
}

#[test]
fn usage_errors_exit_2_and_invalid_input_exits_1() {
    let usage = |args: &[&str], says: &str| {
        let assert = headroom().arg("check").args(args).assert().code(2);
        let stderr = String::from_utf8_lossy(&assert.get_output().stderr).into_owned();
        assert!(stderr.contains(says), "{args:?}: {stderr}");
    };
    let b = bw33();
    usage(
        &[
            &b,
            "--node",
            "18",
            "--kw",
            "100",
            "--absorbing",
            "--injecting",
        ],
        "cannot be used with",
    );
    usage(
        &[&b, "--node", "nowhere", "--kw", "100"],
        "no node \"nowhere\" in feeder bw33",
    );
    usage(&[&b, "--node", "1", "--kw", "100"], "head of feeder bw33");
    // An id that differs from a node's only in letter case or surrounding spaces is pointed at.
    let millbrook = repo_path("feeders/hallowick-millbrook-11")
        .display()
        .to_string();
    usage(
        &[&millbrook, "--node", "mlb-004", "--kw", "100"],
        "no node \"mlb-004\" in feeder hallowick-millbrook-11 (did you mean \"MLB-004\"?)",
    );
    usage(
        &[&b, "--node", " 18 ", "--kw", "100"],
        "(did you mean \"18\"?)",
    );
    usage(&[&b, "--node", "18", "--kw", "-5"], "greater than 0");
    usage(&[&b, "--node", "18", "--kw", "lots"], "not a number");
    usage(
        &[&b, "--node", "18", "--kw", "100", "--power-factor", "1.2"],
        "(0, 1]",
    );
    usage(
        &[&b, "--node", "18", "--kw", "100", "--power-factor", "-0.9"],
        "(0, 1]",
    );
    usage(&[&b, "--node", "18"], "--kw");
    usage(&[&b], "--node");
    usage(&[&b, "--queue", "q.csv"], "--out");
    // A broken study file is invalid input.
    let dir = tempfile::tempdir().unwrap();
    let study = dir.path().join("study.toml");
    std::fs::write(&study, "[generation]\npower_factor = 2.0\n").unwrap();
    headroom()
        .args(["check", &b, "--node", "18", "--kw", "100", "--study"])
        .arg(&study)
        .assert()
        .code(1);
}

fn run_queue(dir: &Path, name: &str, rows: &str, study: &str) -> (String, std::path::PathBuf) {
    let queue = dir.join(format!("{name}.csv"));
    std::fs::write(&queue, rows).unwrap();
    let out = dir.join(name);
    let assert = headroom()
        .args(["check", &bw33(), "--study", study, "--queue"])
        .arg(&queue)
        .arg("--out")
        .arg(&out)
        .assert()
        .success();
    let stdout = String::from_utf8_lossy(&assert.get_output().stdout).into_owned();
    (stdout, out)
}

fn decisions(out: &Path) -> Vec<(String, String)> {
    let table = ParquetTable::read(&out.join("decisions.parquet"));
    let ids = table.opt_strings("id");
    let verdicts = table.opt_strings("verdict");
    ids.into_iter()
        .zip(verdicts)
        .map(|(i, v)| (i.unwrap(), v.unwrap()))
        .collect()
}

#[test]
fn queue_order_matters_and_decisions_are_written() {
    let dir = tempfile::tempdir().unwrap();
    let study = no_change_study(dir.path());
    // Node 18 takes 1150 kW and node 17 1229 kW alone (min-load binds): 800 kW fits at either,
    // but not at both.
    let (stdout, forward) = run_queue(dir.path(), "ab", "id,node,kw\nA,18,800\nB,17,800\n", &study);
    assert_eq!(
        decisions(&forward),
        [("A".into(), "accept".into()), ("B".into(), "refuse".into())]
    );
    assert!(stdout.contains("accepted     1"), "{stdout}");
    assert!(stdout.contains("refused      1"), "{stdout}");
    assert!(stdout.contains(CAUTION), "{stdout}");
    let (_, backward) = run_queue(dir.path(), "ba", "id,node,kw\nB,17,800\nA,18,800\n", &study);
    assert_eq!(
        decisions(&backward),
        [("B".into(), "accept".into()), ("A".into(), "refuse".into())]
    );

    // The table: Parquet and CSV, the capacity at the time of each decision.
    let table = ParquetTable::read(&forward.join("decisions.parquet"));
    assert_eq!(table.f64s("hosting_kw")[0], 1150.0);
    assert!(table.f64s("hosting_kw")[1] < 1229.0);
    assert_eq!(
        table.opt_strings("limit"),
        [Some("overvoltage".into()), Some("overvoltage".into())]
    );
    assert_eq!(
        table.opt_strings("scenario")[0].as_deref(),
        Some("min-load")
    );
    assert_eq!(table.opt_strings("node")[1].as_deref(), Some("17"));
    let csv = std::fs::read_to_string(forward.join("decisions.csv")).unwrap();
    let header = csv.lines().next().unwrap();
    for column in [
        "id",
        "node",
        "kw",
        "verdict",
        "hosting_kw",
        "limit",
        "limit_element",
        "scenario",
    ] {
        assert!(header.split(',').any(|c| c == column), "{header}");
    }
    assert_eq!(csv.lines().count(), 3);
    let run: Value =
        serde_json::from_str(&std::fs::read_to_string(forward.join("run.json")).unwrap()).unwrap();
    assert!(run["caution"].as_str().unwrap().starts_with(CAUTION));

    // Dated rows are decided by date, whatever the file order.
    let (stdout, dated) = run_queue(
        dir.path(),
        "dated",
        "id,node,kw,date\nA,18,800,2025-06-01\nB,17,800,2025-05-01\n",
        &study,
    );
    assert!(stdout.contains("decided by date"), "{stdout}");
    assert_eq!(
        decisions(&dated),
        [("B".into(), "accept".into()), ("A".into(), "refuse".into())]
    );
}

#[test]
fn bad_queue_rows_are_each_reported_and_nothing_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let queue = dir.path().join("queue.csv");
    std::fs::write(
        &queue,
        "id,node,kw,power_factor\nok,18,100,\nx,nowhere,100,\ny,18,-5,\nz,18,lots,\nw,18,100,1.5\n",
    )
    .unwrap();
    let out = dir.path().join("out");
    let assert = headroom()
        .args(["check", &bw33(), "--queue"])
        .arg(&queue)
        .arg("--out")
        .arg(&out)
        .assert()
        .code(1);
    let stderr = String::from_utf8_lossy(&assert.get_output().stderr).into_owned();
    for expected in [
        "line 3: column node: value \"nowhere\"",
        "line 4: column kw: value \"-5\"",
        "line 5: column kw: value \"lots\"",
        "line 6: column power_factor: value \"1.5\"",
    ] {
        assert_eq!(stderr.matches(expected).count(), 1, "{expected}: {stderr}");
    }
    assert!(
        stderr.contains("4 errors found; nothing was written."),
        "{stderr}"
    );
    assert!(stderr.contains("queue.csv"), "{stderr}");
    assert!(!out.exists(), "nothing is written for a bad queue");
}

#[test]
fn queue_json_is_one_document() {
    let dir = tempfile::tempdir().unwrap();
    let queue = dir.path().join("q.csv");
    std::fs::write(&queue, "id,node,kw\nA,18,100\n").unwrap();
    let assert = headroom()
        .args(["check", &bw33(), "--json", "--queue"])
        .arg(&queue)
        .arg("--out")
        .arg(dir.path().join("out"))
        .assert()
        .success();
    let document: Value = serde_json::from_slice(&assert.get_output().stdout).unwrap();
    assert_eq!(document["accepted"], 1);
    assert_eq!(document["decisions"][0]["verdict"], "accept");
    assert_eq!(document["decisions"][0]["id"], "A");
    assert!(document["caution"].as_str().unwrap().starts_with(CAUTION));
}
