//! The output folder of `headroom map`: file names, the work folder of a run in progress,
//! the manifest, and what a new start does with what an earlier run left.
//!
//! Layout of `DIR` for shard `I/N` (`SFX` = `-shard-I-of-N`, empty for a whole run):
//!
//! * `nodes[-CRS]SFX.parquet`, `branches[-CRS]SFX.parquet`, `feedersSFX.parquet`,
//!   `baselineSFX.parquet`: the results, written when every feeder of the run is done.
//! * `runSFX.json`: the manifest, written last: settings, shard, files and one record per feeder.
//!   While it exists, the files it lists are complete and belong to it.
//! * `.headroom-workSFX/`: only while the run is unfinished. `settings.json` (written first),
//!   `done/<feeder>/` (one folder per finished feeder: `part-nodes.parquet`,
//!   `part-branches.parquet`, `part-feeders.parquet`, `part-baseline.parquet`, `summary.json`;
//!   written in `staging/<feeder>/` and renamed, so a folder under `done/` is always whole), and
//!   `staging/`. Part names do not start with `nodes`, so a glob `DIR/**/nodes*.parquet` never
//!   counts a row twice.
//! * `.headroom-lockSFX`: a small file naming the process that holds its lock (`flock`) while
//!   it runs that share of the region, so that a second process started on the same share
//!   stops at once; removed by that process when it ends (a killed run leaves it, unlocked, for
//!   the next one).

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use headroom_capacity::{Limit, RunStats, Shard};
use serde::{Deserialize, Serialize};

use crate::Failure;

/// The tables of a run, in the order they are written.
pub const KINDS: [&str; 4] = ["nodes", "branches", "feeders", "baseline"];
/// Name of the work folder, before the shard suffix.
const WORK_PREFIX: &str = ".headroom-work";
/// Name of the lock file, before the shard suffix.
const LOCK_PREFIX: &str = ".headroom-lock";

/// Settings a run's results depend on; a run resumes only with equal settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    /// headroom version.
    pub version: String,
    /// Study settings in words.
    pub study: String,
    /// Hash of every study setting (FNV-1a of their full listing), hex.
    pub study_key: String,
    /// Scenario names in order.
    pub scenarios: Vec<String>,
    /// Search method.
    pub search: String,
    /// Per-criterion capacities computed.
    pub criteria_detail: bool,
    /// Hash of the `--crs-projjson` file, hex, if one was given.
    pub crs_projjson: Option<String>,
}

/// One scenario of a finished feeder, for the printed summary and the manifest.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ScenarioRecord {
    pub scenario: String,
    pub hosting_kw_min: Option<f64>,
    pub hosting_kw_median: Option<f64>,
    pub hosting_kw_max: Option<f64>,
    /// Node answers per binding criterion (every criterion listed).
    pub binding: BTreeMap<String, u64>,
    pub baseline_violations: u64,
}

impl ScenarioRecord {
    /// Counts per criterion in the order of [`Limit::ALL`].
    pub fn by_limit(&self) -> [u64; 7] {
        let mut counts = [0; 7];
        for (count, limit) in counts.iter_mut().zip(Limit::ALL) {
            *count = self.binding.get(limit.as_str()).copied().unwrap_or(0);
        }
        counts
    }
}

/// Work counts of one feeder.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct StatsRecord {
    pub node_results: u64,
    pub load_flows: u64,
    pub sweep_iterations: u64,
    pub base_sweep_iterations: u64,
    pub base_cases: u64,
    pub baseline_violations: u64,
    /// Answers left to the stepped search next to voltage collapse (absent in work folders
    /// written before it was counted).
    #[serde(default)]
    pub stepped_near_nose: u64,
}

/// A finished feeder: what the manifest lists and the summary prints.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FeederRecord {
    pub feeder: String,
    pub name: String,
    pub substation: Option<String>,
    pub region: Option<String>,
    pub nominal_kv: f64,
    pub crs: Option<String>,
    /// Nodes, head included.
    pub nodes: usize,
    /// Hash of the feeder's input files, hex: a feeder whose files changed is mapped again.
    pub input_hash: String,
    /// Key of the CRS group (`nocrs`, `epsg32630`, ...).
    pub crs_group: String,
    pub scenarios: Vec<ScenarioRecord>,
    pub stats: StatsRecord,
}

impl FeederRecord {
    /// The feeder's counts as [`RunStats`].
    pub fn run_stats(&self) -> RunStats {
        let mut by_limit = [0; 7];
        for scenario in &self.scenarios {
            for (total, count) in by_limit.iter_mut().zip(scenario.by_limit()) {
                *total += count;
            }
        }
        RunStats {
            feeders: 1,
            node_results: self.stats.node_results,
            load_flows: self.stats.load_flows,
            sweep_iterations: self.stats.sweep_iterations,
            base_sweep_iterations: self.stats.base_sweep_iterations,
            base_cases: self.stats.base_cases,
            by_limit,
            baseline_violations: self.stats.baseline_violations,
            stepped_near_nose: self.stats.stepped_near_nose,
        }
    }
}

/// What `settings.json` of a work folder holds.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct WorkSettings {
    shard: String,
    settings: Settings,
}

/// The manifest `runSFX.json`, as far as a new start reads it.
#[derive(Debug, Clone, Deserialize)]
struct ManifestHead {
    state: String,
    settings: Settings,
    files: Vec<String>,
    feeders: Vec<FeederRecord>,
}

/// The feeders of this run as the validation pass found them: id and input hash.
pub struct Wanted<'a> {
    pub id: &'a str,
    pub input_hash: &'a str,
}

/// Names and places of one run's files.
pub struct Layout {
    pub out: PathBuf,
    pub shard: Shard,
}

impl Layout {
    pub fn suffix(&self) -> String {
        self.shard.file_suffix()
    }

    /// `runSFX.json`.
    pub fn manifest_name(&self) -> String {
        format!("run{}.json", self.suffix())
    }

    pub fn manifest(&self) -> PathBuf {
        self.out.join(self.manifest_name())
    }

    /// `.headroom-lockSFX`.
    pub fn lock_file(&self) -> PathBuf {
        self.out.join(lock_name(self.own_split()))
    }

    pub fn work(&self) -> PathBuf {
        self.out.join(format!("{WORK_PREFIX}{}", self.suffix()))
    }

    fn settings_file(&self) -> PathBuf {
        self.work().join("settings.json")
    }

    pub fn done_dir(&self) -> PathBuf {
        self.work().join("done")
    }

    pub fn staging_dir(&self) -> PathBuf {
        self.work().join("staging")
    }

    /// A results file: `nodes-epsg32630-shard-2-of-3.parquet`.
    pub fn table_name(&self, kind: &str, crs_suffix: &str) -> String {
        format!("{kind}{crs_suffix}{}.parquet", self.suffix())
    }

    /// A feeder's part file of `kind` in its folder.
    pub fn part_file(folder: &Path, kind: &str) -> PathBuf {
        folder.join(format!("part-{kind}.parquet"))
    }

    fn own_split(&self) -> Split {
        if self.shard.is_whole() {
            Split::Whole
        } else {
            Split::Shard(self.shard.index(), self.shard.count())
        }
    }
}

/// This run's hold on its share of the output folder: while it lives, another process asking
/// for the same share is refused. Dropping it removes the lock file and lets go.
pub struct RunLock {
    path: PathBuf,
    /// `None` where the file system cannot lock (the run goes on unguarded).
    file: Option<std::fs::File>,
}

impl Drop for RunLock {
    fn drop(&mut self) {
        // Removed while still held, so no other process can hold this file meanwhile; one that
        // opened it before and locks it after checks that the name still leads to it.
        if self.file.is_some() {
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

/// Whether `file` is the file `path` names now (same device and inode).
#[cfg(unix)]
fn still_named(file: &std::fs::File, path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (file.metadata(), std::fs::metadata(path)) {
        (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
        _ => false,
    }
}

/// Elsewhere there is no inode to compare: the name is taken to lead to the file while it exists.
#[cfg(not(unix))]
fn still_named(_file: &std::fs::File, path: &Path) -> bool {
    path.exists()
}

/// Takes this run's lock in `layout.out` (creating the folder): refused (exit 2), naming the
/// holder, while another process runs the same share of the region into the same folder.
/// Where the file system has no locks (some network file systems), warns and goes on.
#[allow(clippy::print_stderr)]
pub fn lock(layout: &Layout) -> Result<RunLock, Failure> {
    let out = &layout.out;
    crate::output::prepare_out_dir(out)?;
    let path = layout.lock_file();
    loop {
        let mut file = std::fs::OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(false)
            .open(&path)
            .map_err(|e| io_failure("create", &path, e))?;
        match file.try_lock() {
            Ok(()) => {
                if !still_named(&file, &path) {
                    // Removed by the run that held it as it ended: lock the new one.
                    continue;
                }
                use std::io::Write;
                let _ = file.set_len(0);
                let _ = writeln!(file, "{}", holder_name());
                return Ok(RunLock {
                    path,
                    file: Some(file),
                });
            }
            Err(std::fs::TryLockError::WouldBlock) => {
                let holder = std::fs::read_to_string(&path).unwrap_or_default();
                let holder = holder.trim();
                let holder = if holder.is_empty() {
                    String::new()
                } else {
                    format!(" ({holder})")
                };
                return Err(Failure::Usage(format!(
                    "another headroom process{holder} is running {} into {}: it holds {}. Wait \
                     for it to end or stop it, or use another --out folder",
                    describe(layout.own_split()),
                    out.display(),
                    path.display()
                )));
            }
            Err(std::fs::TryLockError::Error(e)) => {
                eprintln!(
                    "warning: cannot lock {} ({e}); nothing stops a second process from \
                     running {} into this folder at the same time",
                    path.display(),
                    describe(layout.own_split())
                );
                return Ok(RunLock { path, file: None });
            }
        }
    }
}

/// The lock file name of `split`.
fn lock_name(split: Split) -> String {
    match split {
        Split::Whole => LOCK_PREFIX.to_string(),
        Split::Shard(i, n) => format!("{LOCK_PREFIX}-shard-{i}-of-{n}"),
    }
}

/// Whether another process holds the lock at `path` now (false when there is no such file or
/// the file system cannot lock).
fn lock_is_held(path: &Path) -> bool {
    let Ok(file) = std::fs::File::open(path) else {
        return false;
    };
    matches!(
        file.try_lock_shared(),
        Err(std::fs::TryLockError::WouldBlock)
    )
}

/// `process PID on HOST`, for the message a refused run prints.
fn holder_name() -> String {
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .ok()
        .map(|h| h.trim().to_string())
        .filter(|h| !h.is_empty());
    match host {
        Some(host) => format!("process {} on {host}", std::process::id()),
        None => format!("process {}", std::process::id()),
    }
}

/// Which run a headroom file name belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Split {
    Whole,
    /// Shard index (1-based) and count.
    Shard(u32, u32),
}

/// The run a name in the output folder belongs to: results (`nodes*.parquet`, ...), manifests
/// (`run*.json`) and work folders. `None` for anything else.
fn split_of_name(name: &str) -> Option<Split> {
    let stem = if let Some(stem) = name.strip_suffix(".parquet") {
        if !KINDS.iter().any(|kind| stem.starts_with(kind)) {
            return None;
        }
        stem
    } else if let Some(stem) = name.strip_suffix(".json") {
        if stem != "run" && !stem.starts_with("run-shard-") {
            return None;
        }
        stem
    } else if name.starts_with(WORK_PREFIX) {
        name
    } else {
        return None;
    };
    let Some(at) = stem.rfind("-shard-") else {
        return Some(Split::Whole);
    };
    let (index, count) = stem[at + "-shard-".len()..].split_once("-of-")?;
    let index: u32 = index.parse().ok()?;
    let count: u32 = count.parse().ok()?;
    (index >= 1 && index <= count).then_some(Split::Shard(index, count))
}

/// The target of a temporary file `.NAME.tmp-...` of the atomic writers.
fn temp_target(name: &str) -> Option<&str> {
    let rest = name.strip_prefix('.')?;
    let at = rest.find(".tmp-")?;
    Some(&rest[..at])
}

fn io_failure(action: &str, path: &Path, e: std::io::Error) -> Failure {
    Failure::Output(format!("cannot {action} {}: {e}", path.display()))
}

fn remove_path(path: &Path) -> Result<(), Failure> {
    let result = if path.is_dir() {
        std::fs::remove_dir_all(path)
    } else {
        std::fs::remove_file(path)
    };
    match result {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(io_failure("remove", path, e)),
    }
}

/// Syncs a folder so that renames in it survive a power cut (best effort: not every file
/// system allows opening a folder).
pub fn sync_dir(dir: &Path) {
    if let Ok(handle) = std::fs::File::open(dir) {
        let _ = handle.sync_all();
    }
}

fn read_json<T: for<'de> Deserialize<'de>>(path: &Path) -> Option<T> {
    let text = std::fs::read_to_string(path).ok()?;
    serde_json::from_str(&text).ok()
}

/// The settings a manifest or work folder of another shard was made with.
fn settings_of(out: &Path, name: &str) -> Option<Settings> {
    let path = out.join(name);
    if name.starts_with(WORK_PREFIX) {
        read_json::<WorkSettings>(&path.join("settings.json")).map(|w| w.settings)
    } else if name.ends_with(".json") {
        read_json::<ManifestHead>(&path).map(|m| m.settings)
    } else {
        None
    }
}

/// How a run starts.
pub enum Start {
    /// The folder already holds this run, complete, with the same settings and inputs: the
    /// records of its feeders, in id order.
    Complete(Vec<FeederRecord>),
    /// Map every feeder not in `done` (the ids of the feeders an earlier, interrupted run
    /// finished with the same settings and inputs; their parts are in `done/`).
    Run { done: BTreeSet<String> },
}

/// Looks at what earlier runs left in the output folder and gets it ready (see the module
/// docs). Refuses, naming the file, when the folder holds another split of the region (a whole
/// run beside shards, or shards of another count) or another shard of this split made with other
/// settings, and when an interrupted run of this shard has other settings; `fresh` removes this
/// run's own files first (and those of other splits, which a glob would count twice), never
/// another shard of the same split. Prints what it does to stderr.
#[allow(clippy::print_stderr)]
pub fn start(
    layout: &Layout,
    settings: &Settings,
    wanted: &[Wanted<'_>],
    fresh: bool,
) -> Result<Start, Failure> {
    let out = &layout.out;
    crate::output::prepare_out_dir(out)?;
    let own = layout.own_split();
    let mut names: Vec<String> = std::fs::read_dir(out)
        .map_err(|e| io_failure("list", out, e))?
        .filter_map(|entry| entry.ok())
        .map(|entry| entry.file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();

    // Other runs in the same folder.
    for name in &names {
        let Some(split) = split_of_name(name) else {
            continue;
        };
        let same_split = match (split, own) {
            (Split::Whole, Split::Whole) => true,
            (Split::Shard(_, n), Split::Shard(_, m)) => n == m,
            _ => false,
        };
        if !same_split {
            if fresh {
                if lock_is_held(&out.join(lock_name(split))) {
                    return Err(Failure::Usage(format!(
                        "{} holds {name}, from {} that another headroom process is running \
                         now; --fresh would delete its files. Wait for it to end, or use \
                         another --out folder",
                        out.display(),
                        describe(split),
                    )));
                }
                eprintln!("note: removing {} (another split of the region)", name);
                remove_path(&out.join(name))?;
                continue;
            }
            return Err(Failure::Usage(format!(
                "{} holds {name}, from {}; results of this run ({}) beside it would be counted \
                 twice by a glob over the folder. Use another --out folder, or --fresh to remove \
                 the other files",
                out.display(),
                describe(split),
                describe(own),
            )));
        }
        if split != own
            && let Some(theirs) = settings_of(out, name)
            && theirs != *settings
        {
            return Err(Failure::Usage(format!(
                "{} holds {name}, from {} made with other settings ({}); shards of one run must \
                 share their settings. Use another --out folder, or remove that shard's files",
                out.display(),
                describe(split),
                differences(&theirs, settings)
            )));
        }
    }

    // An unfinished run of this shard with other settings: refused before anything is touched.
    let manifest = layout.manifest();
    let work = layout.work();
    let earlier: Option<WorkSettings> = read_json(&layout.settings_file());
    if !fresh
        && !manifest.is_file()
        && let Some(earlier) = &earlier
        && earlier.settings != *settings
    {
        return Err(Failure::Usage(format!(
            "{} holds an unfinished run made with other settings ({}); run again with the same \
             settings to finish it, or add --fresh to start over",
            out.display(),
            differences(&earlier.settings, settings)
        )));
    }

    // Temporary files of this run's writers, left by a process that was stopped.
    for name in &names {
        if let Some(target) = temp_target(name)
            && split_of_name(target) == Some(own)
        {
            remove_path(&out.join(name))?;
        }
    }

    if fresh {
        remove_own_results(layout, &names)?;
        remove_path(&work)?;
    }

    if manifest.is_file() {
        // A finished run (perhaps stopped while tidying up its work folder).
        remove_path(&work)?;
        sync_dir(out);
        let head: Option<ManifestHead> = read_json(&manifest);
        let unchanged = head.as_ref().is_some_and(|head| {
            head.state == "complete"
                && head.settings == *settings
                && head.feeders.len() == wanted.len()
                && head
                    .feeders
                    .iter()
                    .zip(wanted)
                    .all(|(r, w)| r.feeder == w.id && r.input_hash == w.input_hash)
                && head.files.iter().all(|f| out.join(f).is_file())
        });
        if unchanged && let Some(head) = head {
            return Ok(Start::Complete(head.feeders));
        }
        eprintln!(
            "note: {} holds an earlier run with other settings or inputs; mapping again",
            manifest.display()
        );
    }
    // Results without a manifest are from a run stopped while writing them: they are rebuilt.
    remove_own_results(layout, &names)?;

    let mut done = BTreeSet::new();
    if work.is_dir() {
        match earlier {
            Some(earlier) if earlier.settings == *settings => {
                done = resume(layout, wanted)?;
                if !done.is_empty() {
                    eprintln!(
                        "note: resuming the run in {}: {} of {} feeder(s) already done",
                        out.display(),
                        done.len(),
                        wanted.len()
                    );
                }
            }
            // Stopped before its settings were written, or left by a finished run with other
            // settings: nothing of it can be used.
            _ => remove_path(&work)?,
        }
    }
    if !work.is_dir() {
        std::fs::create_dir_all(layout.done_dir())
            .map_err(|e| io_failure("create folder", &layout.done_dir(), e))?;
        let text = serde_json::to_string_pretty(&WorkSettings {
            shard: layout.shard.to_string(),
            settings: settings.clone(),
        })
        .unwrap_or_default();
        crate::output::write_text(&layout.settings_file(), &(text + "\n"))?;
        sync_dir(&work);
        sync_dir(out);
    }
    remove_path(&layout.staging_dir())?;
    std::fs::create_dir_all(layout.staging_dir())
        .map_err(|e| io_failure("create folder", &layout.staging_dir(), e))?;
    Ok(Start::Run { done })
}

/// The finished feeders of an interrupted run that are still wanted with the same input;
/// the folders of the others are removed.
fn resume(layout: &Layout, wanted: &[Wanted<'_>]) -> Result<BTreeSet<String>, Failure> {
    let wanted: BTreeMap<&str, &str> = wanted.iter().map(|w| (w.id, w.input_hash)).collect();
    let done_dir = layout.done_dir();
    let mut done = BTreeSet::new();
    let listing = match std::fs::read_dir(&done_dir) {
        Ok(listing) => listing,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(done),
        Err(e) => return Err(io_failure("list", &done_dir, e)),
    };
    let mut stale = Vec::new();
    for entry in listing.filter_map(|e| e.ok()) {
        let folder = entry.path();
        let record: Option<FeederRecord> = read_json(&folder.join("summary.json"));
        let whole = KINDS
            .iter()
            .all(|kind| Layout::part_file(&folder, kind).is_file());
        match record {
            Some(record)
                if whole
                    && folder.file_name().is_some_and(|n| *n == *record.feeder)
                    && wanted.get(record.feeder.as_str()) == Some(&record.input_hash.as_str()) =>
            {
                done.insert(record.feeder);
            }
            _ => stale.push(folder),
        }
    }
    for folder in stale {
        remove_path(&folder)?;
    }
    Ok(done)
}

/// Removes this run's results and manifest (the manifest first).
fn remove_own_results(layout: &Layout, names: &[String]) -> Result<(), Failure> {
    remove_path(&layout.manifest())?;
    let own = layout.own_split();
    for name in names {
        if name.ends_with(".parquet") && split_of_name(name) == Some(own) {
            remove_path(&layout.out.join(name))?;
        }
    }
    Ok(())
}

fn describe(split: Split) -> String {
    match split {
        Split::Whole => "a whole-region run".to_string(),
        Split::Shard(i, n) => format!("shard {i}/{n}"),
    }
}

/// Which settings differ, in words.
fn differences(a: &Settings, b: &Settings) -> String {
    let mut parts = Vec::new();
    if a.version != b.version {
        parts.push(format!("version {} vs {}", a.version, b.version));
    }
    if a.study_key != b.study_key {
        parts.push(format!("study \"{}\" vs \"{}\"", a.study, b.study));
    }
    if a.search != b.search {
        parts.push(format!("search {} vs {}", a.search, b.search));
    }
    if a.criteria_detail != b.criteria_detail {
        parts.push("--no-criteria-detail differs".to_string());
    }
    if a.crs_projjson != b.crs_projjson {
        parts.push("--crs-projjson differs".to_string());
    }
    if parts.is_empty() {
        "settings differ".to_string()
    } else {
        parts.join("; ")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_told_apart_by_split() {
        assert_eq!(split_of_name("nodes.parquet"), Some(Split::Whole));
        assert_eq!(split_of_name("nodes-epsg32630.parquet"), Some(Split::Whole));
        assert_eq!(split_of_name("run.json"), Some(Split::Whole));
        assert_eq!(
            split_of_name("branches-epsg4326-shard-2-of-3.parquet"),
            Some(Split::Shard(2, 3))
        );
        assert_eq!(
            split_of_name("run-shard-1-of-3.json"),
            Some(Split::Shard(1, 3))
        );
        assert_eq!(
            split_of_name(".headroom-work-shard-3-of-3"),
            Some(Split::Shard(3, 3))
        );
        assert_eq!(split_of_name(".headroom-work"), Some(Split::Whole));
        assert_eq!(split_of_name("report.html"), None);
        assert_eq!(split_of_name("part-nodes.parquet"), None);
        assert_eq!(split_of_name("settings.json"), None);
        assert_eq!(
            temp_target(".nodes.parquet.tmp-12-0"),
            Some("nodes.parquet")
        );
        assert_eq!(temp_target("nodes.parquet"), None);
    }
}
