//! `headroom report`: the numbers of its tables against the run's Parquet, its errors, its
//! reproducibility, and the page as headless Chromium renders it (one map per feeder, one mark
//! per node, a legend, nothing wider than the page).

use std::collections::{BTreeMap, HashMap};
use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

use headroom_report::{DEFAULT_THRESHOLDS_KW, Limit, build_report, read_run};

use crate::command::{ParquetTable, describe, repo_path, run, run_ok, scratch_folder};

/// The demo region mapped once, and its report written with a fixed date.
struct DemoReport {
    run_dir: PathBuf,
    html_path: PathBuf,
}

fn scratch(name: &str) -> PathBuf {
    let dir = scratch_folder(&format!("report-{name}"));
    std::fs::create_dir_all(&dir).expect("scratch folder");
    dir
}

fn demo() -> &'static DemoReport {
    static DEMO: OnceLock<DemoReport> = OnceLock::new();
    DEMO.get_or_init(|| {
        let dir = scratch("demo");
        let run_dir = dir.join("run");
        // Relative paths (the command runs in the repository root), as run.json records them
        // and the page shows them.
        run_ok(&[
            OsStr::new("map"),
            OsStr::new("feeders"),
            OsStr::new("--study"),
            OsStr::new("feeders/study.toml"),
            OsStr::new("--out"),
            run_dir.as_os_str(),
            OsStr::new("--quiet"),
        ]);
        let html_path = dir.join("report.html");
        run_ok(&[
            OsStr::new("report"),
            run_dir.as_os_str(),
            OsStr::new("--out"),
            html_path.as_os_str(),
            OsStr::new("--date"),
            OsStr::new("2025-01-31"),
        ]);
        DemoReport { run_dir, html_path }
    })
}

fn read_text(path: &Path) -> String {
    std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// Lowest, median (mean of the two middle values for an even count) and highest.
fn low_median_high(values: &mut [f64]) -> (f64, f64, f64) {
    values.sort_by(f64::total_cmp);
    let n = values.len();
    let median = if n % 2 == 1 {
        values[n / 2]
    } else {
        (values[n / 2 - 1] + values[n / 2]) / 2.0
    };
    (values[0], median, values[n - 1])
}

#[test]
fn per_scenario_numbers_match_the_feeder_table_written_by_map() {
    // feeders.parquet is computed by `map` from its results in memory; the report recomputes
    // the same numbers from nodes.parquet. They must agree exactly.
    let demo = demo();
    let report = build_report(&read_run(&demo.run_dir).unwrap(), &DEFAULT_THRESHOLDS_KW);
    let table = ParquetTable::read(&demo.run_dir.join("feeders.parquet"));
    let (feeder, scenario) = (table.strings("feeder"), table.strings("scenario"));
    let nodes = table.u64s("nodes");
    let (low, median, high) = (
        table.f64s("hosting_kw_min"),
        table.f64s("hosting_kw_median"),
        table.f64s("hosting_kw_max"),
    );
    assert_eq!(table.n_rows(), 10, "5 feeders x 2 scenarios");
    for i in 0..table.n_rows() {
        let f = report
            .feeders
            .iter()
            .find(|f| f.info.id == feeder[i])
            .unwrap_or_else(|| panic!("feeder {} missing from the report", feeder[i]));
        let (_, s) = f
            .per_scenario
            .iter()
            .find(|(name, _)| *name == scenario[i])
            .unwrap_or_else(|| panic!("scenario {} missing", scenario[i]));
        let at = format!("{} {}", feeder[i], scenario[i]);
        assert_eq!(s.n_nodes, nodes[i], "{at}");
        assert_eq!(s.lowest_kw, Some(low[i]), "{at}");
        assert_eq!(s.median_kw, Some(median[i]), "{at}");
        assert_eq!(s.highest_kw, Some(high[i]), "{at}");
        for limit in Limit::ALL {
            let column = table.u64s(&format!("nodes_{}", limit.as_str()));
            assert_eq!(s.by_limit.get(limit), column[i], "{at} {}", limit.as_str());
        }
    }
    // The baseline list is the run's baseline table, row for row.
    let baseline = ParquetTable::read(&demo.run_dir.join("baseline.parquet"));
    assert_eq!(report.baseline.len(), baseline.n_rows());
    assert_eq!(
        report.baseline.len(),
        45,
        "the demo's overloaded peak at Quarry Road"
    );
}

#[test]
fn region_table_is_the_worst_case_of_every_node() {
    // Recomputed here from nodes.parquet with its own reader: the worst case of each node over
    // the scenarios, then per substation and per region.
    let demo = demo();
    let nodes = ParquetTable::read(&demo.run_dir.join("nodes.parquet"));
    let (feeder, node) = (nodes.strings("feeder"), nodes.strings("node"));
    let (kw, limit) = (nodes.f64s("hosting_kw"), nodes.strings("limit"));
    let substation = nodes.opt_strings("substation");
    let mut worst: HashMap<(String, String), (f64, String, String)> = HashMap::new();
    for i in 0..nodes.n_rows() {
        let entry = worst
            .entry((feeder[i].clone(), node[i].clone()))
            .or_insert((f64::INFINITY, String::new(), String::new()));
        // Scenarios come in run order in the file; a tie keeps the earlier one.
        if kw[i] < entry.0 {
            *entry = (
                kw[i],
                limit[i].clone(),
                substation[i].clone().unwrap_or_default(),
            );
        }
    }
    let mut by_substation: BTreeMap<String, Vec<(f64, String)>> = BTreeMap::new();
    for (kw, limit, substation) in worst.values() {
        by_substation
            .entry(substation.clone())
            .or_default()
            .push((*kw, limit.clone()));
        by_substation
            .entry("(all)".into())
            .or_default()
            .push((*kw, limit.clone()));
    }
    assert_eq!(by_substation["(all)"].len(), 908, "913 nodes less 5 heads");

    let report = build_report(&read_run(&demo.run_dir).unwrap(), &DEFAULT_THRESHOLDS_KW);
    assert_eq!(
        report.groups.len(),
        3,
        "Corrowmoor, Hallowick, Tessary Vale total"
    );
    for group in &report.groups {
        let key = if group.is_total {
            "(all)".to_string()
        } else {
            group.substation.clone().unwrap()
        };
        let expected = &by_substation[&key];
        let mut values: Vec<f64> = expected.iter().map(|e| e.0).collect();
        let (lo, med, hi) = low_median_high(&mut values);
        let s = &group.summary;
        assert_eq!(s.n_nodes, expected.len() as u64, "{key}");
        assert_eq!(
            (s.lowest_kw, s.median_kw, s.highest_kw),
            (Some(lo), Some(med), Some(hi)),
            "{key}"
        );
        for (b, threshold) in s.below.iter().zip(DEFAULT_THRESHOLDS_KW) {
            let n = expected.iter().filter(|e| e.0 < threshold).count() as u64;
            assert_eq!(b.n_nodes, n, "{key} below {threshold}");
        }
        for l in Limit::ALL {
            let n = expected.iter().filter(|e| e.1 == l.as_str()).count() as u64;
            assert_eq!(s.by_limit.get(l), n, "{key} {}", l.as_str());
        }
    }
    // The region total's median as printed in the page (thousands grouped with U+202F).
    let html = read_text(&demo.html_path);
    let total = report.groups.last().unwrap();
    let median = headroom_report::group_thousands(total.summary.median_kw.unwrap());
    let row_start = html.find("<tr class=\"total\">").expect("total row");
    let row = &html[row_start..row_start + html[row_start..].find("</tr>").unwrap()];
    assert!(row.contains(&format!(">{median}</td>")), "{row}");
    assert!(row.contains(">908</td>"), "{row}");
}

#[test]
fn report_is_self_contained_and_reproducible() {
    let demo = demo();
    let html = read_text(&demo.html_path);
    for forbidden in [
        "<script",
        "<link",
        "<img",
        "<iframe",
        "@import",
        "url(",
        " src=",
        "href=\"http",
    ] {
        assert!(!html.contains(forbidden), "the page contains {forbidden:?}");
    }
    assert!(
        html.contains("licensed engineers"),
        "the caution is printed"
    );
    assert!(html.contains("2025-01-31"));
    // Same run and date, same bytes; the date may come from SOURCE_DATE_EPOCH instead.
    let dir = scratch("repro");
    let again = dir.join("again.html");
    run_ok(&[
        OsStr::new("report"),
        demo.run_dir.as_os_str(),
        OsStr::new("--out"),
        again.as_os_str(),
        OsStr::new("--date"),
        OsStr::new("2025-01-31"),
    ]);
    assert!(std::fs::read(&again).unwrap() == std::fs::read(&demo.html_path).unwrap());
    let from_epoch = dir.join("epoch.html");
    let output = crate::command::headroom()
        .args([
            OsStr::new("report"),
            demo.run_dir.as_os_str(),
            OsStr::new("--out"),
            from_epoch.as_os_str(),
        ])
        .env("SOURCE_DATE_EPOCH", "1738281600") // 2025-01-31T00:00:00Z
        .output()
        .unwrap();
    assert!(output.status.success(), "{}", describe(&output));
    assert!(std::fs::read(&from_epoch).unwrap() == std::fs::read(&demo.html_path).unwrap());
}

#[test]
fn feeder_without_coordinates_is_drawn_as_a_schematic() {
    let dir = scratch("bw33");
    let run_dir = dir.join("run");
    run_ok(&[
        OsStr::new("map"),
        repo_path("tests/data/reference/bw33").as_os_str(),
        OsStr::new("--out"),
        run_dir.as_os_str(),
        OsStr::new("--quiet"),
    ]);
    let html_path = dir.join("report.html");
    run_ok(&[
        OsStr::new("report"),
        run_dir.as_os_str(),
        OsStr::new("--out"),
        html_path.as_os_str(),
        OsStr::new("--date"),
        OsStr::new("2025-01-31"),
    ]);
    let html = read_text(&html_path);
    assert_eq!(html.matches("class=\"feeder-map\"").count(), 1);
    assert!(html.contains("data-layout=\"schematic\""));
    assert_eq!(
        html.matches("class=\"node-mark\"").count(),
        32,
        "33 buses less the head"
    );
    assert_eq!(html.matches("class=\"head-mark\"").count(), 1);
    assert!(html.contains("(no region)"));
}

#[test]
fn bad_run_folders_are_refused_and_nothing_is_written() {
    let dir = scratch("errors");
    let out = dir.join("report.html");
    let refuse = |run_dir: &Path, expect: &str| {
        let output = run(&[
            OsStr::new("report"),
            run_dir.as_os_str(),
            OsStr::new("--out"),
            out.as_os_str(),
        ]);
        assert_eq!(output.status.code(), Some(1), "{}", describe(&output));
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert!(stderr.contains(expect), "{stderr}");
        assert!(!out.exists(), "nothing may be written");
    };
    refuse(&dir.join("missing"), "missing: no such folder");
    let empty = dir.join("empty");
    std::fs::create_dir_all(&empty).unwrap();
    refuse(&empty, "no nodes*.parquet");
    let broken = dir.join("broken");
    std::fs::create_dir_all(&broken).unwrap();
    std::fs::write(broken.join("nodes.parquet"), b"not a parquet file").unwrap();
    refuse(&broken, "nodes.parquet: cannot read");
    // Two runs' node files in one folder: the same rows twice.
    let twice = dir.join("twice");
    std::fs::create_dir_all(&twice).unwrap();
    let nodes = demo().run_dir.join("nodes.parquet");
    std::fs::copy(&nodes, twice.join("nodes.parquet")).unwrap();
    std::fs::copy(&nodes, twice.join("nodes-copy.parquet")).unwrap();
    refuse(&twice, "the folder holds more than one run");

    let output = run(&[
        OsStr::new("report"),
        demo().run_dir.as_os_str(),
        OsStr::new("--out"),
        out.as_os_str(),
        OsStr::new("--date"),
        OsStr::new("2025-02-30"),
    ]);
    assert_eq!(output.status.code(), Some(2), "{}", describe(&output));
    assert!(!out.exists());
}

/// Chromium on PATH, or `None` with a notice. Under CI (env `CI` set) a missing browser fails.
fn chromium() -> Option<PathBuf> {
    let found = ["chromium", "chromium-browser"].iter().find_map(|name| {
        std::env::var_os("PATH").and_then(|paths| {
            std::env::split_paths(&paths)
                .map(|p| p.join(name))
                .find(|p| p.is_file())
        })
    });
    if found.is_none() {
        assert!(
            std::env::var_os("CI").is_none(),
            "CI must have Chromium for the report's browser test (apt-get install chromium)"
        );
        #[allow(clippy::print_stderr)]
        {
            eprintln!(
                "NOTICE: report browser test SKIPPED: no chromium or chromium-browser on PATH \
                 (apt-get install chromium)"
            );
        }
    }
    found
}

/// Runs headless Chromium on a local file with a fresh profile; returns stdout.
fn headless(browser: &Path, page: &Path, extra: &[&str]) -> String {
    let profile = tempfile::tempdir().unwrap();
    let output = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--no-first-run",
            "--hide-scrollbars",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(extra)
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("chromium can be started");
    assert!(
        output.status.success(),
        "chromium failed: {}",
        String::from_utf8_lossy(&output.stderr)
    );
    String::from_utf8_lossy(&output.stdout).into_owned()
}

/// Test-only probe added to a copy of the page: measures every element against the page
/// width and counts the marks of each map, from the browser's own layout and DOM.
const PROBE: &str = r#"<script>
(function () {
  var width = document.documentElement.clientWidth;
  var outside = [];
  document.querySelectorAll('body *').forEach(function (el) {
    var r = el.getBoundingClientRect();
    if (r.width === 0 && r.height === 0) return;
    if (r.left < -0.5 || r.right > width + 0.5) {
      outside.push(el.tagName + ' ' + Math.round(r.left) + '..' + Math.round(r.right));
    }
  });
  var lines = ['scroll ' + document.documentElement.scrollWidth + ' width ' + width];
  document.querySelectorAll('svg.feeder-map').forEach(function (svg) {
    var box = svg.getBoundingClientRect();
    lines.push('map ' + svg.getAttribute('data-feeder') + ' ' +
      svg.querySelectorAll('.node-mark').length + ' ' +
      svg.querySelectorAll('.legend .legend-bin').length + ' ' + Math.round(box.width));
  });
  outside.forEach(function (o) { lines.push('outside ' + o); });
  var pre = document.createElement('pre');
  pre.id = 'layout-check';
  pre.textContent = lines.join('\n');
  document.body.appendChild(pre);
})();
</script>"#;

#[test]
fn report_renders_in_headless_chromium() {
    let Some(browser) = chromium() else { return };
    let demo = demo();
    let run_json: serde_json::Value =
        serde_json::from_str(&read_text(&demo.run_dir.join("run.json"))).unwrap();
    // Nodes per feeder from run.json (the head included there, excluded from the maps).
    let expected: BTreeMap<String, u64> = run_json["feeders"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| {
            (
                f["feeder"].as_str().unwrap().to_string(),
                f["nodes"].as_u64().unwrap() - 1,
            )
        })
        .collect();
    assert_eq!(expected.len(), 5);

    // The shipped page, as the browser parsed it.
    let dom = headless(
        &browser,
        &demo.html_path,
        &["--window-size=1280,4000", "--dump-dom"],
    );
    assert_eq!(dom.matches("<svg class=\"feeder-map\"").count(), 5);
    let total: u64 = expected.values().sum();
    assert_eq!(dom.matches("class=\"node-mark\"").count() as u64, total);
    assert_eq!(dom.matches("class=\"legend\"").count(), 5);

    // A copy with the probe, at a screen width and at about the width of an A4 print.
    let dir = scratch("browser");
    let probe_page = dir.join("probe.html");
    let html = read_text(&demo.html_path);
    std::fs::write(
        &probe_page,
        html.replace("</body>", &format!("{PROBE}</body>")),
    )
    .unwrap();
    for width in [1280, 760] {
        let dom = headless(
            &browser,
            &probe_page,
            &[&format!("--window-size={width},4000"), "--dump-dom"],
        );
        let start = dom.find("<pre id=\"layout-check\">").expect("probe ran") + 23;
        let report = &dom[start..start + dom[start..].find("</pre>").unwrap()];
        let mut maps = BTreeMap::new();
        for line in report.lines() {
            let words: Vec<&str> = line.split(' ').collect();
            match words[0] {
                "scroll" => assert_eq!(words[1], words[3], "page scrolls sideways: {line}"),
                "map" => {
                    let legend_rows: usize = words[3].parse().unwrap();
                    assert_eq!(legend_rows, headroom_report::N_BINS, "{line}");
                    assert!(
                        words[4].parse::<u32>().unwrap() > 300,
                        "map too small: {line}"
                    );
                    maps.insert(words[1].to_string(), words[2].parse::<u64>().unwrap());
                }
                "outside" => panic!("at {width} px an element is outside the page: {report}"),
                _ => panic!("unexpected probe line {line:?}"),
            }
        }
        assert_eq!(maps, expected, "one map per feeder, one mark per node");
    }

    // The probe can fail: a page with one element wider than the window is caught.
    let wide_page = dir.join("wide.html");
    std::fs::write(
        &wide_page,
        html.replace(
            "</body>",
            &format!("<div style=\"width:3000px\">wide</div>{PROBE}</body>"),
        ),
    )
    .unwrap();
    let dom = headless(
        &browser,
        &wide_page,
        &["--window-size=1280,4000", "--dump-dom"],
    );
    assert!(
        dom.contains("outside DIV"),
        "the probe missed a 3000 px element"
    );

    // A screenshot: a real PNG of the page's top. With HEADROOM_UPDATE_SCREENSHOT=1 it
    // replaces docs/report-demo.png.
    let shot = dir.join("report-demo.png");
    headless(
        &browser,
        &demo.html_path,
        &[
            "--window-size=1280,3300",
            "--force-device-scale-factor=0.625",
            &format!("--screenshot={}", shot.display()),
        ],
    );
    let png = std::fs::read(&shot).expect("screenshot written");
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
    assert!(
        png.len() > 50_000,
        "a blank page would compress far smaller"
    );
    if std::env::var_os("HEADROOM_UPDATE_SCREENSHOT").is_some() {
        std::fs::copy(&shot, repo_path("docs/report-demo.png")).unwrap();
    }
}
