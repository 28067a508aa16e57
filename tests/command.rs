//! Shared helpers: the `headroom` binary (rebuilt once per test run, so it is never stale),
//! paths of the repository's data, and reading Parquet tables back as plain columns.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

use arrow_array::cast::AsArray;
use arrow_array::{Array, ArrayRef, Float64Array, RecordBatch, StringArray, UInt64Array};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

/// The path of a folder `<prefix>-<pid>` below the build's scratch folder, for one test
/// process: removed if it exists, not created. It is kept after the tests for inspection;
/// folders of the same prefix whose process has ended are removed here (on Linux, where /proc
/// tells; elsewhere they are left).
pub fn scratch_folder(prefix: &str) -> PathBuf {
    let scratch = PathBuf::from(env!("CARGO_TARGET_TMPDIR"));
    if Path::new("/proc/self").exists()
        && let Ok(entries) = std::fs::read_dir(&scratch)
    {
        for entry in entries.flatten() {
            let name = entry.file_name();
            let ended = name
                .to_str()
                .and_then(|n| n.strip_prefix(prefix))
                .and_then(|rest| rest.strip_prefix('-'))
                .and_then(|pid| pid.parse::<u32>().ok())
                .is_some_and(|pid| !Path::new(&format!("/proc/{pid}")).exists());
            if ended {
                let _ = std::fs::remove_dir_all(entry.path());
            }
        }
    }
    let dir = scratch.join(format!("{prefix}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    dir
}

/// The repository root (the parent of the tests crate).
pub fn repo_root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("the tests crate sits in the repository root")
        .to_path_buf()
}

/// A path below the repository root.
pub fn repo_path(relative: &str) -> PathBuf {
    repo_root().join(relative)
}

/// Path of the `headroom` binary, built by `cargo build -p headroom-cli` the first time it is
/// asked for. `cargo test` does not rebuild another package's binary, so without this the tests
/// could run an old one.
pub fn headroom_path() -> &'static Path {
    static PATH: OnceLock<PathBuf> = OnceLock::new();
    PATH.get_or_init(|| {
        // The test binary lives in <target>/<profile>/deps/.
        let exe = std::env::current_exe().expect("path of the test binary");
        let profile_dir = exe
            .parent()
            .and_then(Path::parent)
            .expect("test binary inside <target>/<profile>/deps")
            .to_path_buf();
        let target_dir = profile_dir
            .parent()
            .expect("profile folder inside the target folder");
        let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
        let mut build = Command::new(cargo);
        build
            .args([
                "build",
                "--quiet",
                "-p",
                "headroom-cli",
                "--bin",
                "headroom",
            ])
            .arg("--target-dir")
            .arg(target_dir)
            .current_dir(repo_root());
        if profile_dir.file_name().and_then(|n| n.to_str()) == Some("release") {
            build.arg("--release");
        }
        let output = build.output().expect("cargo can be started");
        assert!(
            output.status.success(),
            "building the headroom binary failed:\n{}",
            String::from_utf8_lossy(&output.stderr)
        );
        let path = profile_dir.join(format!("headroom{}", std::env::consts::EXE_SUFFIX));
        assert!(path.is_file(), "no binary at {}", path.display());
        path
    })
}

/// A `headroom` command run from the repository root.
pub fn headroom() -> Command {
    let mut command = Command::new(headroom_path());
    command.current_dir(repo_root());
    command
}

/// Runs `headroom` with `args` and returns what it did.
pub fn run(args: &[&std::ffi::OsStr]) -> Output {
    headroom()
        .args(args)
        .output()
        .expect("headroom can be started")
}

/// Stdout and stderr as text, for assertion messages.
pub fn describe(output: &Output) -> String {
    format!(
        "exit {:?}\n--- stdout\n{}\n--- stderr\n{}",
        output.status.code(),
        String::from_utf8_lossy(&output.stdout),
        String::from_utf8_lossy(&output.stderr)
    )
}

/// Runs `headroom` with `args`, asserting exit code 0; returns stdout.
pub fn run_ok(args: &[&std::ffi::OsStr]) -> String {
    let output = run(args);
    assert!(
        output.status.success(),
        "headroom {args:?} failed:\n{}",
        describe(&output)
    );
    String::from_utf8(output.stdout).expect("stdout is UTF-8")
}

/// A Parquet file read whole, with its columns by name.
pub struct ParquetTable {
    batches: Vec<RecordBatch>,
}

impl ParquetTable {
    /// Reads every row group.
    pub fn read(path: &Path) -> ParquetTable {
        let file = File::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let reader = ParquetRecordBatchReaderBuilder::try_new(file)
            .and_then(|b| b.build())
            .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let batches = reader
            .collect::<Result<Vec<_>, _>>()
            .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        ParquetTable { batches }
    }

    /// Number of rows.
    pub fn n_rows(&self) -> usize {
        self.batches.iter().map(RecordBatch::num_rows).sum()
    }

    fn columns(&self, name: &str) -> Vec<ArrayRef> {
        self.batches
            .iter()
            .map(|b| {
                b.column_by_name(name)
                    .unwrap_or_else(|| panic!("no column {name:?}"))
                    .clone()
            })
            .collect()
    }

    /// A float64 column; nulls become NaN.
    pub fn f64s(&self, name: &str) -> Vec<f64> {
        let mut out = Vec::new();
        for array in self.columns(name) {
            let values = array
                .as_any()
                .downcast_ref::<Float64Array>()
                .unwrap_or_else(|| panic!("column {name:?} is not float64"));
            out.extend((0..values.len()).map(|i| {
                if values.is_null(i) {
                    f64::NAN
                } else {
                    values.value(i)
                }
            }));
        }
        out
    }

    /// A uint64 column without nulls.
    pub fn u64s(&self, name: &str) -> Vec<u64> {
        let mut out = Vec::new();
        for array in self.columns(name) {
            let values = array
                .as_any()
                .downcast_ref::<UInt64Array>()
                .unwrap_or_else(|| panic!("column {name:?} is not uint64"));
            assert_eq!(values.null_count(), 0, "nulls in column {name:?}");
            out.extend(values.values().iter().copied());
        }
        out
    }

    /// A text column, plain or dictionary-encoded; nulls become `None`.
    pub fn opt_strings(&self, name: &str) -> Vec<Option<String>> {
        let mut out = Vec::new();
        for array in self.columns(name) {
            if let Some(dictionary) = array.as_any_dictionary_opt() {
                let values = dictionary
                    .values()
                    .as_any()
                    .downcast_ref::<StringArray>()
                    .unwrap_or_else(|| panic!("column {name:?} is not a text dictionary"));
                let keys = dictionary.normalized_keys();
                out.extend(
                    (0..array.len())
                        .map(|i| (!array.is_null(i)).then(|| values.value(keys[i]).to_string())),
                );
            } else {
                let values = array
                    .as_any()
                    .downcast_ref::<StringArray>()
                    .unwrap_or_else(|| panic!("column {name:?} is not utf8"));
                out.extend(
                    (0..values.len()).map(|i| (!values.is_null(i)).then(|| values.value(i).into())),
                );
            }
        }
        out
    }

    /// A text column without nulls.
    pub fn strings(&self, name: &str) -> Vec<String> {
        self.opt_strings(name)
            .into_iter()
            .map(|v| v.unwrap_or_else(|| panic!("null in column {name:?}")))
            .collect()
    }
}
