//! Malformed inputs through `headroom validate` and `headroom map`: exit code 1, one message per
//! problem naming the file, the line and the value, every problem reported in one run, and
//! nothing written; bad command lines exit 2, also writing nothing. (The reading rules
//! themselves are tested in crates/headroom-model/tests; this checks what a user sees.)

use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::Output;

use crate::command::{describe, run};

/// A region folder with a shared conductor library and two valid feeders, `f1` (changed by
/// each case) and `f2` (always valid: a bad feeder stops the whole run).
struct Region {
    dir: tempfile::TempDir,
}

const CONDUCTORS: &str = "\
type,r_ohm_per_km,x_ohm_per_km,rating_a
OH-50,0.6,0.35,200
CAB-95,0.32,0.1,250
";

const FEEDER_TOML: &str = "\
nominal_kv = 11.0
head = \"sub\"
head_voltage_pu = 1.0
";

/// Line numbers: the header is line 1, so node `sub` is line 2 and `n4` line 6.
const NODES: &str = "\
id,x,y,load_kw,load_kvar,gen_kw,gen_kvar
sub,0,0,0,0,0,0
n1,100,0,200,50,0,0
n2,200,0,150,40,50,0
n3,300,0,100,20,0,0
n4,200,100,80,20,0,0
";

/// `b1` is line 2 and the open point `b5` line 6; `b4` is given by impedance.
const BRANCHES: &str = "\
id,from,to,type,length_km,r_ohm,x_ohm,rating_a,closed
b1,sub,n1,CAB-95,0.5,,,,true
b2,n1,n2,OH-50,1.2,,,,true
b3,n2,n3,OH-50,0.8,,,,true
b4,n2,n4,,,0.3,0.2,150,true
b5,n3,n4,OH-50,0.4,,,,false
";

impl Region {
    fn good() -> Region {
        let region = Region {
            dir: tempfile::tempdir().unwrap(),
        };
        region.write("region/conductors.csv", CONDUCTORS);
        for feeder in ["f1", "f2"] {
            region.write(&format!("region/{feeder}/feeder.toml"), FEEDER_TOML);
            region.write(&format!("region/{feeder}/nodes.csv"), NODES);
            region.write(&format!("region/{feeder}/branches.csv"), BRANCHES);
        }
        region
    }

    fn path(&self, relative: &str) -> PathBuf {
        self.dir.path().join(relative)
    }

    fn write(&self, relative: &str, content: impl AsRef<[u8]>) {
        let path = self.path(relative);
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(path, content).unwrap();
    }

    /// Replaces the one occurrence of `from` in a file below `region/`.
    fn edit(&self, relative: &str, from: &str, to: &str) {
        let path = self.path(&format!("region/{relative}"));
        let text = std::fs::read_to_string(&path).unwrap();
        assert_eq!(text.matches(from).count(), 1, "{from:?} in {relative}");
        std::fs::write(path, text.replace(from, to)).unwrap();
    }

    /// Runs `headroom` with the region and `args`; the output folder is `out`.
    fn run(&self, command: &str, args: &[&str]) -> Output {
        let region = self.path("region");
        let out = self.path("out");
        let mut all: Vec<&OsStr> = vec![OsStr::new(command), region.as_os_str()];
        if command != "validate" {
            all.extend([OsStr::new("--out"), out.as_os_str()]);
        }
        all.extend(args.iter().map(OsStr::new));
        let output = run(&all);
        assert!(
            !out.exists(),
            "headroom {command} {args:?} created the output folder:\n{}",
            describe(&output)
        );
        output
    }

    /// Runs `validate` and `map` (with `args`, e.g. a study file); both must fail with exit 1,
    /// print nothing on stdout, write nothing and give the same errors. Returns the error lines
    /// with the temporary folder left out of the paths.
    fn errors(&self, args: &[&str]) -> Vec<String> {
        let mut seen: Option<Vec<String>> = None;
        for command in ["validate", "map"] {
            let output = self.run(command, args);
            assert_eq!(output.status.code(), Some(1), "{}", describe(&output));
            assert!(output.stdout.is_empty(), "{}", describe(&output));
            let stderr = String::from_utf8_lossy(&output.stderr).replace(
                &format!("{}{}", self.dir.path().display(), std::path::MAIN_SEPARATOR),
                "",
            );
            assert!(stderr.contains("nothing was written"), "{stderr}");
            let lines: Vec<String> = stderr
                .lines()
                .filter(|l| l.starts_with("error: "))
                .map(str::to_string)
                .collect();
            assert!(
                stderr.contains(&format!(
                    "{} error{} found",
                    lines.len(),
                    if lines.len() == 1 { "" } else { "s" }
                )),
                "{stderr}"
            );
            match &seen {
                None => seen = Some(lines),
                Some(first) => assert_eq!(first, &lines, "validate and map differ"),
            }
        }
        seen.unwrap()
    }
}

/// One expected problem: the file (below the region folder), the (line, value) pairs of which
/// any one may be named, and a word of the message.
struct Problem {
    file: &'static str,
    at: &'static [(usize, &'static str)],
    says: &'static str,
}

impl Problem {
    fn matches(&self, line: &str) -> bool {
        let file = format!("error: region/{}: ", self.file);
        line.starts_with(&file)
            && line.contains(self.says)
            && (self.at.is_empty()
                || self.at.iter().any(|(n, value)| {
                    line.contains(&format!(": line {n}: "))
                        && (value.is_empty() || line.contains(&format!("value \"{value}\"")))
                }))
    }
}

/// Every problem is reported by exactly one error line, and there are no others.
fn assert_reports(lines: &[String], problems: &[Problem]) {
    assert_eq!(
        lines.len(),
        problems.len(),
        "expected {} errors:\n{}",
        problems.len(),
        lines.join("\n")
    );
    for problem in problems {
        let hits = lines.iter().filter(|l| problem.matches(l)).count();
        assert_eq!(
            hits,
            1,
            "one error in {} saying {:?} at {:?}:\n{}",
            problem.file,
            problem.says,
            problem.at,
            lines.join("\n")
        );
    }
}

#[test]
fn the_fixture_is_valid_and_maps() {
    let region = Region::good();
    let output = region.run("validate", &[]);
    assert!(output.status.success(), "{}", describe(&output));
    let out = region.path("out");
    let output = run(&[
        OsStr::new("map"),
        region.path("region").as_os_str(),
        OsStr::new("--out"),
        out.as_os_str(),
        OsStr::new("--quiet"),
    ]);
    assert!(output.status.success(), "{}", describe(&output));
    assert!(out.join("nodes.parquet").is_file());
}

#[test]
fn a_closed_loop_names_the_branch_that_closes_it() {
    let region = Region::good();
    region.edit("f1/branches.csv", "0.4,,,,false", "0.4,,,,true");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/branches.csv",
            at: &[(4, "b3"), (5, "b4"), (6, "b5")],
            says: "loop",
        }],
    );
}

#[test]
fn an_island_names_the_cut_off_node() {
    let region = Region::good();
    region.edit(
        "f1/nodes.csv",
        "n4,200,100,80,20,0,0\n",
        "n4,200,100,80,20,0,0\nn9,0,0,10,0,0,0\n",
    );
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/nodes.csv",
            at: &[(7, "n9")],
            says: "island",
        }],
    );
}

#[test]
fn a_branch_to_an_unknown_node_is_named_and_the_node_it_cut_off_too() {
    let region = Region::good();
    region.edit("f1/branches.csv", "b3,n2,n3", "b3,n2,zz");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[
            Problem {
                file: "f1/branches.csv",
                at: &[(4, "zz")],
                says: "unknown node",
            },
            // n3 was fed by that branch only (its tie b5 is open).
            Problem {
                file: "f1/nodes.csv",
                at: &[(5, "n3")],
                says: "island",
            },
        ],
    );
}

#[test]
fn duplicate_node_and_branch_ids_are_both_reported() {
    let region = Region::good();
    region.edit(
        "f1/nodes.csv",
        "n4,200,100,80,20,0,0\n",
        "n4,200,100,80,20,0,0\nn1,5,5,1,0,0,0\n",
    );
    region.edit("f1/branches.csv", "b4,n2,n4", "b3,n2,n4");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[
            Problem {
                file: "f1/nodes.csv",
                at: &[(7, "n1")],
                says: "duplicate",
            },
            Problem {
                file: "f1/branches.csv",
                at: &[(5, "b3")],
                says: "duplicate",
            },
        ],
    );
}

#[test]
fn a_negative_length_is_named() {
    let region = Region::good();
    region.edit("f1/branches.csv", "OH-50,1.2", "OH-50,-1.2");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/branches.csv",
            at: &[(3, "-1.2")],
            says: "length_km",
        }],
    );
}

#[test]
fn a_nan_is_named() {
    let region = Region::good();
    region.edit("f1/nodes.csv", "n3,300,0,100", "n3,300,0,NaN");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/nodes.csv",
            at: &[(5, "NaN")],
            says: "load_kw",
        }],
    );
}

#[test]
fn a_missing_column_is_named_on_the_header_line() {
    let region = Region::good();
    region.write(
        "region/f1/branches.csv",
        "id,from,type,length_km\nb1,sub,OH-50,1\n",
    );
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/branches.csv",
            at: &[(1, "")],
            says: "column to",
        }],
    );
    assert!(lines[0].contains("missing"), "{}", lines[0]);
}

#[test]
fn an_unknown_conductor_type_is_named() {
    let region = Region::good();
    region.edit("f1/branches.csv", "OH-50,0.8", "OH-99,0.8");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/branches.csv",
            at: &[(4, "OH-99")],
            says: "unknown conductor type",
        }],
    );
}

#[test]
fn an_empty_file_is_named() {
    let region = Region::good();
    region.write("region/f1/nodes.csv", "");
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/nodes.csv",
            at: &[],
            says: "empty",
        }],
    );
}

/// Writes f1's nodes.csv from `rows` (bytes, the header first) and checks that the one error
/// is the file's "not UTF-8" at `at`.
fn assert_only_the_utf8_error(rows: &[&[u8]], at: &'static [(usize, &'static str)]) {
    let region = Region::good();
    region.write("region/f1/nodes.csv", rows.concat());
    let lines = region.errors(&[]);
    assert_reports(
        &lines,
        &[Problem {
            file: "f1/nodes.csv",
            at,
            says: "UTF-8",
        }],
    );
}

#[test]
fn a_file_that_is_not_utf8_is_named_with_the_line() {
    // A Latin-1 "é" in a free-text column that the program otherwise ignores.
    assert_only_the_utf8_error(
        &[
            b"id,x,y,load_kw,load_kvar,gen_kw,gen_kvar,name\nsub,0,0,0,0,0,0,\n",
            b"n1,100,0,200,50,0,0,Caf\xe9\n",
            b"n2,200,0,150,40,50,0,\nn3,300,0,100,20,0,0,\nn4,200,100,80,20,0,0,\n",
        ],
        &[(3, "")],
    );
}

#[test]
fn a_bad_byte_inside_a_number_is_reported_once_as_not_utf8() {
    // A Latin-1 "½" (0xBD) typed into load_kw of n2, line 4: one message, the file's, not a
    // second one calling the cell "not a number".
    assert_only_the_utf8_error(
        &[
            b"id,x,y,load_kw,load_kvar,gen_kw,gen_kvar\nsub,0,0,0,0,0,0\n",
            b"n1,100,0,200,50,0,0\nn2,200,0,150\xbd,40,50,0\n",
            b"n3,300,0,100,20,0,0\nn4,200,100,80,20,0,0\n",
        ],
        &[(4, "")],
    );
}

#[test]
fn an_unknown_study_key_is_named() {
    let region = Region::good();
    region.write(
        "region-study.toml",
        "[limits]\nv_max_pu = 1.05\nv_maxx = 1.06\n",
    );
    let study = region.path("region-study.toml");
    let lines = region.errors(&["--study", study.to_str().unwrap()]);
    assert_eq!(lines.len(), 1, "{lines:?}");
    assert!(
        lines[0].starts_with("error: region-study.toml: line 3: ")
            && lines[0].contains("v_maxx")
            && lines[0].contains("unknown key"),
        "{}",
        lines[0]
    );
}

#[test]
fn several_problems_in_several_files_are_all_reported_in_one_run() {
    let region = Region::good();
    region.edit("f1/branches.csv", "OH-50,1.2", "OH-50,-1.2");
    region.edit("f1/branches.csv", "OH-50,0.8", "OH-99,0.8");
    region.edit("f1/nodes.csv", "n3,300,0,100", "n3,300,0,NaN");
    region.edit(
        "f2/nodes.csv",
        "n4,200,100,80,20,0,0\n",
        "n4,200,100,80,20,0,0\nn1,5,5,1,0,0,0\n",
    );
    region.write("region-study.toml", "[search]\nstep_kww = 10\n");
    let study = region.path("region-study.toml");
    let lines = region.errors(&["--study", study.to_str().unwrap()]);
    assert_eq!(lines.len(), 5, "{}", lines.join("\n"));
    let feeder_lines: Vec<String> = lines
        .iter()
        .filter(|l| !l.contains("region-study.toml"))
        .cloned()
        .collect();
    assert_reports(
        &feeder_lines,
        &[
            Problem {
                file: "f1/branches.csv",
                at: &[(3, "-1.2")],
                says: "length_km",
            },
            Problem {
                file: "f1/branches.csv",
                at: &[(4, "OH-99")],
                says: "unknown conductor type",
            },
            Problem {
                file: "f1/nodes.csv",
                at: &[(5, "NaN")],
                says: "load_kw",
            },
            Problem {
                file: "f2/nodes.csv",
                at: &[(7, "n1")],
                says: "duplicate",
            },
        ],
    );
    assert!(
        lines
            .iter()
            .any(|l| l.starts_with("error: region-study.toml: line 2: ") && l.contains("step_kww")),
        "{}",
        lines.join("\n")
    );
}

fn assert_usage_error(region: &Region, command: &str, args: &[&str]) {
    let output = region.run(command, args);
    assert_eq!(output.status.code(), Some(2), "{}", describe(&output));
    assert!(output.stdout.is_empty(), "{}", describe(&output));
    assert!(!output.stderr.is_empty());
}

#[test]
fn bad_command_lines_exit_2_and_write_nothing() {
    let region = Region::good();
    assert_usage_error(&region, "map", &["--threads", "0"]);
    assert_usage_error(&region, "map", &["--search", "sideways"]);
    assert_usage_error(&region, "map", &["--no-such-flag"]);
    assert_usage_error(&region, "flow", &["--scenario", "no-such-scenario"]);
    assert_usage_error(&region, "validate", &["--out", "somewhere"]);

    // A required argument left out, and an unknown subcommand.
    for args in [&["map"][..], &["map", "feeders"], &["frobnicate"]] {
        let args: Vec<&OsStr> = args.iter().map(OsStr::new).collect();
        let output = run(&args);
        assert_eq!(output.status.code(), Some(2), "{}", describe(&output));
    }
    assert!(Path::new(&region.path("out")).symlink_metadata().is_err());
}

/// An `--out` that names an existing file: exit 3 (output not written), the file named and
/// left as it was, for the commands that write a folder of results.
#[test]
fn an_output_folder_that_is_a_file_is_named_and_left_alone() {
    let region = Region::good();
    region.write("out", "not a folder");
    let feeder = region.path("region/f1");
    let out = region.path("out");
    for command in ["map", "flow"] {
        let args: Vec<&OsStr> = vec![
            OsStr::new(command),
            feeder.as_os_str(),
            OsStr::new("--out"),
            out.as_os_str(),
        ];
        let output = run(&args);
        assert_eq!(output.status.code(), Some(3), "{}", describe(&output));
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert!(
            stderr.contains(&format!("{}: it is a file, not a folder", out.display())),
            "{}",
            describe(&output)
        );
        assert_eq!(std::fs::read_to_string(&out).unwrap(), "not a folder");
    }
}
