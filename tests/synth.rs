//! `headroom synth`: what it writes reads back as a valid feeder, alone or as a region.

use crate::command::{run, run_ok};

#[test]
fn a_lone_synthetic_feeder_validates_and_maps() {
    let dir = tempfile::tempdir().unwrap();
    let feeder = dir.path().join("f1");
    run_ok(&[
        "synth".as_ref(),
        "--nodes".as_ref(),
        "120".as_ref(),
        "--seed".as_ref(),
        "3".as_ref(),
        "--out".as_ref(),
        feeder.as_os_str(),
    ]);
    let report = run_ok(&["validate".as_ref(), feeder.as_os_str()]);
    assert!(report.contains("120 nodes"), "{report}");
    let out = dir.path().join("out");
    run_ok(&[
        "map".as_ref(),
        feeder.as_os_str(),
        "--out".as_ref(),
        out.as_os_str(),
        "--quiet".as_ref(),
        "--no-criteria-detail".as_ref(),
    ]);
    let nodes = crate::command::ParquetTable::read(&out.join("nodes.parquet"));
    assert_eq!(nodes.n_rows(), 119 * 2, "nodes × scenarios, head excluded");
}

#[test]
fn a_synthetic_region_validates_feeder_by_feeder() {
    let dir = tempfile::tempdir().unwrap();
    let region = dir.path().join("region");
    run_ok(&[
        "synth".as_ref(),
        "--nodes".as_ref(),
        "30".as_ref(),
        "--feeders".as_ref(),
        "3".as_ref(),
        "--out".as_ref(),
        region.as_os_str(),
    ]);
    let report = run_ok(&["validate".as_ref(), region.as_os_str()]);
    assert!(report.contains("3 feeder(s) valid"), "{report}");
    // A bad size is a usage error.
    let output = run(&[
        "synth".as_ref(),
        "--nodes".as_ref(),
        "1".as_ref(),
        "--out".as_ref(),
        region.as_os_str(),
    ]);
    assert_eq!(output.status.code(), Some(2));
}
