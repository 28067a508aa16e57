//! `headroom map`: hosting capacity of every node, every scenario, to GeoParquet.
//!
//! The run streams: the feeder folders are listed, every feeder of this run's shard is read and
//! checked once (nothing kept but its id, input hash and CRS), and only then, when the input is
//! valid, anything is written. Feeders are then loaded, solved and written one by one, a few at
//! a time, each into its own part folder; when all are done the parts are concatenated into the
//! result tables, the manifest is written last, and the parts are removed. A run stopped on the
//! way and started again with the same arguments keeps the feeders already written (see
//! `workdir.rs` for the layout and the rules).

use std::collections::BTreeMap;
use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::time::Instant;

use rayon::prelude::*;
use serde::Serialize;

use headroom_capacity::{
    CapacityOptions, FeederMap, Limit, RunStats, SearchMethod, Shard, StreamJob, fnv1a_64,
    map_stream, shard_from_environment,
};
use headroom_export::Crs;
use headroom_model::{
    CONDUCTORS_FILE, Diagnostic, ModelErrors, ReverseFlow, Study, discover_feeders, load_feeder,
};

use crate::args::{MapArgs, SearchArg};
use crate::merge::concat_parts;
use crate::output::{write_table, write_text};
use crate::progress::MapProgress;
use crate::tables::{
    baseline_table, branches_table, custom_crs, feeder_crs, feeders_table, limit_counts,
    nodes_table, stats_line, summarise,
};
use crate::workdir::{
    FeederRecord, KINDS, Layout, ScenarioRecord, Settings, Start, StatsRecord, Wanted, sync_dir,
};
use crate::{CAUTION, Failure};

/// A feeder of this run as the checking pass leaves it: nothing of the model is kept.
struct FeederEntry {
    folder: PathBuf,
    id: String,
    input_hash: String,
    crs_group: String,
    /// Nodes without the head: answers per scenario.
    n_answers: u64,
}

pub fn run(args: &MapArgs) -> Result<(), Failure> {
    let started = Instant::now();
    let shard_choice = shard_from_environment(args.shard, args.shard_count, &|name| {
        std::env::var(name).ok()
    })
    .map_err(|e| Failure::Usage(e.to_string()))?;
    let shard = shard_choice.as_ref().map_or_else(Shard::whole, |(s, _)| *s);
    let study = Study::load(args.study.as_deref());
    let folders = match discover_feeders(&args.path) {
        Ok(folders) => folders,
        Err(found) => return Err(invalid_input(found.errors, study.err())),
    };
    let custom = custom_crs(args.crs_projjson.as_deref())?;
    let options = CapacityOptions {
        method: match args.search {
            SearchArg::Fast => SearchMethod::Fast,
            SearchArg::Stepped => SearchMethod::Stepped,
        },
        criteria_detail: !args.no_criteria_detail,
    };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(args.threads.unwrap_or(0) as usize)
        .build()
        .map_err(|e| Failure::Usage(format!("cannot start worker threads: {e}")))?;

    let n_region = folders.len();
    let own: Vec<PathBuf> = folders
        .into_iter()
        .filter(|folder| shard.contains(&folder_id(folder)))
        .collect();
    if let Some((shard, source)) = &shard_choice {
        say!(
            "Shard {shard} (from {source}): {} of the {n_region} feeder(s) under {}",
            own.len(),
            args.path.display()
        );
    }
    // Errors of the feeders and of the study are reported together, as `headroom validate` does.
    let (entries, study) = match (pool.install(|| check_feeders(&own, custom.as_ref())), study) {
        (Ok(entries), Ok(study)) => (entries, study),
        (entries, study) => {
            return Err(invalid_input(
                entries.err().unwrap_or_default(),
                study.err(),
            ));
        }
    };
    let crs_of_group = crs_of_groups(&entries, custom.as_ref())?;

    let settings = run_settings(&study, &options, args.crs_projjson.as_deref())?;
    let layout = Layout {
        out: args.out.clone(),
        shard,
    };
    let wanted: Vec<Wanted<'_>> = entries
        .iter()
        .map(|e| Wanted {
            id: &e.id,
            input_hash: &e.input_hash,
        })
        .collect();
    // Held until the run ends: a second process on the same share of the region stops here.
    let _lock = crate::workdir::lock(&layout)?;
    let done = match crate::workdir::start(&layout, &settings, &wanted, args.fresh)? {
        Start::Complete(records) => {
            print_summary(&records);
            let seconds = started.elapsed().as_secs_f64();
            say!("{}", stats_line(&total_stats(&records), seconds));
            say!(
                "{} already held this run, complete, with the same settings and inputs: nothing \
                 was mapped again (--fresh maps it again).",
                args.out.display()
            );
            say!("Results in {}", args.out.display());
            say!("{CAUTION}");
            return Ok(());
        }
        Start::Run { done } => done,
    };
    let n_resumed = done.len();

    let metadata = run_metadata(&study, &options);
    let todo: Vec<&FeederEntry> = entries.iter().filter(|e| !done.contains(&e.id)).collect();
    let n_scenarios = study.scenarios.len() as u64;
    let answers_todo: u64 = todo.iter().map(|e| e.n_answers * n_scenarios).sum();
    let progress = MapProgress::new(
        entries.len() as u64,
        n_resumed as u64,
        answers_todo,
        args.quiet,
    );
    let load = |i: usize| {
        load_feeder(&todo[i].folder).map_err(|errors| {
            let n = errors.errors.len();
            Failure::Invalid(format!(
                "{errors}\n{n} error{} found in {}, which changed while the run was under way; \
                 the feeders finished so far are kept in {}: fix the input and run again to \
                 finish.",
                if n == 1 { "" } else { "s" },
                todo[i].folder.display(),
                args.out.display()
            ))
        })
    };
    let finish = |i: usize, map: &FeederMap<'_>, stats: &RunStats| {
        let entry = todo[i];
        let record = feeder_record(map, stats, entry);
        let crs = &crs_of_group[&entry.crs_group];
        write_feeder_parts(&layout, map, &record, crs, &metadata)?;
        progress.feeder_done();
        Ok(())
    };
    let job = StreamJob {
        n_feeders: todo.len(),
        // Two more than the threads: while some feeders are read or written (file syncs wait on
        // the disk), the others keep every thread busy.
        feeders_in_flight: (pool.current_num_threads() + 2).min(10),
        study: &study,
        options: &options,
        load: &load,
        progress: &|n| progress.answers(n),
        finish: &finish,
    };
    let result = map_stream(&job, &pool);
    progress.finish();
    result?;

    // Results, then the manifest, from the parts on disk: one feeder's record in memory at a time.
    let files = pool.install(|| write_results(&layout, &entries))?;
    let manifest = Manifest {
        tool: "headroom",
        version: env!("CARGO_PKG_VERSION"),
        state: "complete",
        input: args.path.display().to_string(),
        study: study_text(&study),
        scenarios: study.scenarios.iter().map(|s| s.name.clone()).collect(),
        search: search_text(&options),
        criteria_detail: options.criteria_detail,
        shard: shard_choice.as_ref().map(|(shard, source)| ShardInfo {
            index: shard.index(),
            count: shard.count(),
            source: source.to_string(),
            rule: "FNV-1a 64 of the feeder id, modulo count, plus 1",
        }),
        settings: &settings,
        files: &files,
        feeders: RecordsOnDisk {
            layout: &layout,
            entries: &entries,
        },
        caution: CAUTION,
    };
    write_json(&layout.manifest(), &manifest)?;
    sync_dir(&layout.out);

    let mut total = RunStats::default();
    for entry in &entries {
        let record = read_record(&layout, &entry.id)?;
        print_feeder(&record);
        total.add(&record.run_stats());
    }
    std::fs::remove_dir_all(layout.work())
        .map_err(|e| Failure::Output(format!("cannot remove {}: {e}", layout.work().display())))?;
    sync_dir(&layout.out);
    let seconds = started.elapsed().as_secs_f64();
    if entries.is_empty() {
        say!("No feeder falls in shard {shard}: nothing to map.");
    }
    say!("{}", stats_line(&total, seconds));
    if n_resumed > 0 {
        say!(
            "{n_resumed} of these feeder(s) were finished by an earlier run that was stopped; \
             {} mapped now.",
            entries.len() - n_resumed
        );
    }
    say!("Results in {}", args.out.display());
    say!("{CAUTION}");
    Ok(())
}

/// The manifest `runSFX.json` (see workdir.rs), written last.
#[derive(Serialize)]
struct Manifest<'a> {
    tool: &'static str,
    version: &'static str,
    state: &'static str,
    input: String,
    study: String,
    scenarios: Vec<String>,
    search: String,
    criteria_detail: bool,
    shard: Option<ShardInfo>,
    settings: &'a Settings,
    files: &'a [String],
    feeders: RecordsOnDisk<'a>,
    caution: &'static str,
}

#[derive(Serialize)]
struct ShardInfo {
    index: u32,
    count: u32,
    source: String,
    rule: &'static str,
}

/// The records of the finished feeders, read from their part folders one at a time as the
/// manifest is written.
struct RecordsOnDisk<'a> {
    layout: &'a Layout,
    entries: &'a [FeederEntry],
}

impl Serialize for RecordsOnDisk<'_> {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        use serde::ser::{Error, SerializeSeq};
        let mut seq = serializer.serialize_seq(Some(self.entries.len()))?;
        for entry in self.entries {
            let record = read_record(self.layout, &entry.id).map_err(|e| match e {
                Failure::Invalid(m) | Failure::Usage(m) | Failure::Output(m) => S::Error::custom(m),
            })?;
            seq.serialize_element(&record)?;
        }
        seq.end()
    }
}

/// A finished feeder's record, from its part folder.
fn read_record(layout: &Layout, feeder: &str) -> Result<FeederRecord, Failure> {
    let path = layout.done_dir().join(feeder).join("summary.json");
    let text = std::fs::read_to_string(&path)
        .map_err(|e| Failure::Output(format!("cannot read {}: {e}", path.display())))?;
    serde_json::from_str(&text)
        .map_err(|e| Failure::Output(format!("cannot read {}: {e}", path.display())))
}

/// Writes `value` as pretty JSON to `path`, streamed into a temporary file beside it, synced,
/// then renamed.
fn write_json(path: &Path, value: &impl Serialize) -> Result<(), Failure> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let name = path.file_name().and_then(|n| n.to_str()).unwrap_or("out");
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let write = || -> Result<(), String> {
        let file = std::fs::File::create(&tmp).map_err(|e| e.to_string())?;
        let mut writer = std::io::BufWriter::new(file);
        serde_json::to_writer_pretty(&mut writer, value).map_err(|e| e.to_string())?;
        writer.write_all(b"\n").map_err(|e| e.to_string())?;
        let file = writer.into_inner().map_err(|e| e.to_string())?;
        file.sync_all().map_err(|e| e.to_string())?;
        std::fs::rename(&tmp, path).map_err(|e| e.to_string())
    };
    write().map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Failure::Output(format!("cannot write {}: {e}", path.display()))
    })
}

/// The feeder id of a folder: its name (as the model reader names feeders).
fn folder_id(folder: &Path) -> String {
    match folder.file_name() {
        Some(name) => name.to_string_lossy().into_owned(),
        None => std::fs::canonicalize(folder)
            .ok()
            .and_then(|full| full.file_name().map(|n| n.to_string_lossy().into_owned()))
            .unwrap_or_else(|| "feeder".to_string()),
    }
}

/// Feeder errors, then study errors, as one failure.
fn invalid_input(mut errors: Vec<Diagnostic>, study: Option<ModelErrors>) -> Failure {
    if let Some(study) = study {
        errors.extend(study.errors);
    }
    ModelErrors { errors }.into()
}

/// Reads and checks every feeder (in parallel, one model in memory per thread), returning the
/// errors of all of them together, each once. Warnings go to stderr, each once.
#[allow(clippy::print_stderr)]
fn check_feeders(
    folders: &[PathBuf],
    custom: Option<&Crs>,
) -> Result<Vec<FeederEntry>, Vec<Diagnostic>> {
    let results: Vec<(Checked, Vec<Diagnostic>)> = folders
        .par_iter()
        .map(|folder| check_feeder(folder, custom))
        .collect();
    let mut entries = Vec::with_capacity(results.len());
    let mut errors = Vec::new();
    let mut seen = std::collections::HashSet::new();
    for (result, warnings) in results {
        for warning in warnings {
            if seen.insert(warning.to_string()) {
                eprintln!("warning: {warning}");
            }
        }
        match result {
            Ok(entry) => entries.push(entry),
            // A shared conductors.csv is read with every feeder: report its errors once.
            Err(found) => errors.extend(
                found
                    .into_iter()
                    .filter(|error| seen.insert(error.to_string())),
            ),
        }
    }
    if errors.is_empty() {
        Ok(entries)
    } else {
        Err(errors)
    }
}

/// A feeder checked: its entry, or its errors.
type Checked = Result<FeederEntry, Vec<Diagnostic>>;

/// Reads and checks one feeder; also returns its warnings.
fn check_feeder(folder: &Path, custom: Option<&Crs>) -> (Checked, Vec<Diagnostic>) {
    let feeder = match load_feeder(folder) {
        Ok(feeder) => feeder,
        Err(errors) => return (Err(errors.errors), Vec::new()),
    };
    let warnings = feeder.warnings().to_vec();
    let crs_group = match feeder_crs(&feeder, custom) {
        Ok((key, _)) => key,
        Err(error) => return (Err(vec![error]), warnings),
    };
    let hash = match input_hash(folder) {
        Ok(hash) => hash,
        Err(error) => return (Err(vec![error]), warnings),
    };
    let entry = FeederEntry {
        folder: folder.to_path_buf(),
        id: feeder.id().to_string(),
        input_hash: format!("{hash:016x}"),
        crs_group,
        n_answers: feeder.n_nodes() as u64 - 1,
    };
    (Ok(entry), warnings)
}

/// Hash of a feeder's input files (its own and the shared conductor library): a resumed run
/// maps again every feeder whose files changed.
fn input_hash(folder: &Path) -> Result<u64, Diagnostic> {
    let full = std::fs::canonicalize(folder).unwrap_or_else(|_| folder.to_path_buf());
    let shared = full.parent().map(|parent| parent.join(CONDUCTORS_FILE));
    let files = ["feeder.toml", "nodes.csv", "branches.csv", CONDUCTORS_FILE]
        .iter()
        .map(|name| full.join(name))
        .chain(shared);
    let mut listing = String::new();
    for (i, file) in files.enumerate() {
        match std::fs::read(&file) {
            Ok(bytes) => listing.push_str(&format!("{i}:{:016x};", fnv1a_64(&bytes))),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                listing.push_str(&format!("{i}:-;"));
            }
            Err(e) => return Err(Diagnostic::error(&file, format!("cannot read: {e}"))),
        }
    }
    Ok(fnv1a_64(listing.as_bytes()))
}

/// The CRS of every group of this run's feeders.
fn crs_of_groups(
    entries: &[FeederEntry],
    custom: Option<&Crs>,
) -> Result<BTreeMap<String, Crs>, Failure> {
    let mut groups = BTreeMap::new();
    for entry in entries {
        if groups.contains_key(&entry.crs_group) {
            continue;
        }
        // Read again for its header only; the checking pass found it valid.
        let feeder = load_feeder(&entry.folder)?;
        let (key, crs) =
            feeder_crs(&feeder, custom).map_err(|e| ModelErrors { errors: vec![e] })?;
        groups.insert(key, crs);
    }
    Ok(groups)
}

/// The settings a resumed run must share.
fn run_settings(
    study: &Study,
    options: &CapacityOptions,
    crs_projjson: Option<&Path>,
) -> Result<Settings, Failure> {
    let crs_projjson = match crs_projjson {
        None => None,
        Some(path) => {
            let bytes = std::fs::read(path).map_err(|e| {
                Failure::Invalid(format!("error: {}: cannot read: {e}", path.display()))
            })?;
            Some(format!("{:016x}", fnv1a_64(&bytes)))
        }
    };
    Ok(Settings {
        version: env!("CARGO_PKG_VERSION").to_string(),
        study: study_text(study),
        study_key: format!("{:016x}", fnv1a_64(format!("{study:?}").as_bytes())),
        scenarios: study.scenarios.iter().map(|s| s.name.clone()).collect(),
        search: search_text(options),
        criteria_detail: options.criteria_detail,
        crs_projjson,
    })
}

fn search_text(options: &CapacityOptions) -> String {
    format!("{:?}", options.method).to_lowercase()
}

/// The record of one solved feeder.
fn feeder_record(map: &FeederMap<'_>, stats: &RunStats, entry: &FeederEntry) -> FeederRecord {
    let f = map.feeder;
    let header = f.header();
    let scenarios = map
        .scenarios
        .iter()
        .enumerate()
        .map(|(s, sc)| {
            let summary = summarise(map, s);
            ScenarioRecord {
                scenario: sc.scenario.clone(),
                hosting_kw_min: summary.hosting.map(|h| h.0),
                hosting_kw_median: summary.hosting.map(|h| h.1),
                hosting_kw_max: summary.hosting.map(|h| h.2),
                binding: Limit::ALL
                    .iter()
                    .zip(summary.by_limit)
                    .map(|(l, n)| (l.as_str().to_string(), n))
                    .collect(),
                baseline_violations: summary.baseline as u64,
            }
        })
        .collect();
    FeederRecord {
        feeder: entry.id.clone(),
        name: header.name.clone(),
        substation: header.substation.clone(),
        region: header.region.clone(),
        nominal_kv: header.nominal_kv,
        crs: header.crs.clone(),
        nodes: f.n_nodes(),
        input_hash: entry.input_hash.clone(),
        crs_group: entry.crs_group.clone(),
        scenarios,
        stats: StatsRecord {
            node_results: stats.node_results,
            load_flows: stats.load_flows,
            sweep_iterations: stats.sweep_iterations,
            base_sweep_iterations: stats.base_sweep_iterations,
            base_cases: stats.base_cases,
            baseline_violations: stats.baseline_violations,
            stepped_near_nose: stats.stepped_near_nose,
        },
    }
}

/// Writes one feeder's four tables and its record into a staging folder, then renames the
/// folder into `done/`: a feeder is either wholly there or not at all.
fn write_feeder_parts(
    layout: &Layout,
    map: &FeederMap<'_>,
    record: &FeederRecord,
    crs: &Crs,
    metadata: &[(&'static str, String)],
) -> Result<(), Failure> {
    let staging = layout.staging_dir().join(&record.feeder);
    let done = layout.done_dir().join(&record.feeder);
    let io = |action: &str, path: &Path, e: std::io::Error| {
        Failure::Output(format!("cannot {action} {}: {e}", path.display()))
    };
    if staging.exists() {
        std::fs::remove_dir_all(&staging).map_err(|e| io("remove", &staging, e))?;
    }
    std::fs::create_dir_all(&staging).map_err(|e| io("create folder", &staging, e))?;
    let maps = [map];
    let name = |kind: &str| format!("part-{kind}.parquet");
    write_table(&staging, &name("nodes"), &nodes_table(&maps, crs, metadata))?;
    write_table(
        &staging,
        &name("branches"),
        &branches_table(&maps, crs, metadata),
    )?;
    write_table(&staging, &name("feeders"), &feeders_table(&maps, metadata))?;
    write_table(
        &staging,
        &name("baseline"),
        &baseline_table(&maps, metadata),
    )?;
    let summary = serde_json::to_string_pretty(record).unwrap_or_default() + "\n";
    write_text(&staging.join("summary.json"), &summary)?;
    sync_dir(&staging);
    if done.exists() {
        std::fs::remove_dir_all(&done).map_err(|e| io("remove", &done, e))?;
    }
    std::fs::rename(&staging, &done).map_err(|e| io("rename", &staging, e))?;
    sync_dir(&layout.done_dir());
    Ok(())
}

/// Concatenates the parts into the result tables (one nodes and branches file per CRS group,
/// feeders in id order; the files in parallel, each by one thread) and returns the file names
/// written.
fn write_results(layout: &Layout, entries: &[FeederEntry]) -> Result<Vec<String>, Failure> {
    if entries.is_empty() {
        return Ok(Vec::new());
    }
    let mut groups: BTreeMap<&str, Vec<&FeederEntry>> = BTreeMap::new();
    for entry in entries {
        groups.entry(&entry.crs_group).or_default().push(entry);
    }
    let several = groups.len() > 1;
    let all: Vec<&FeederEntry> = entries.iter().collect();
    // (file name, the parts it is made of), in the order listed in the manifest.
    let mut files: Vec<(String, Vec<PathBuf>)> = Vec::new();
    let mut add = |kind: &str, suffix: &str, members: &[&FeederEntry]| {
        let parts = members
            .iter()
            .map(|e| Layout::part_file(&layout.done_dir().join(&e.id), kind))
            .collect();
        files.push((layout.table_name(kind, suffix), parts));
    };
    for (key, members) in &groups {
        let suffix = if several {
            format!("-{key}")
        } else {
            String::new()
        };
        add(KINDS[0], &suffix, members);
        add(KINDS[1], &suffix, members);
    }
    add(KINDS[2], "", &all);
    add(KINDS[3], "", &all);
    files
        .par_iter()
        .map(|(name, parts)| concat_parts(parts, &layout.out.join(name)))
        .collect::<Result<Vec<()>, Failure>>()?;
    Ok(files.into_iter().map(|(name, _)| name).collect())
}

fn total_stats(records: &[FeederRecord]) -> RunStats {
    let mut total = RunStats::default();
    for record in records {
        total.add(&record.run_stats());
    }
    total
}

/// Per feeder and scenario: lowest, median and highest capacity, and what binds.
fn print_summary(records: &[FeederRecord]) {
    for record in records {
        print_feeder(record);
    }
}

/// One feeder's lines of the summary.
fn print_feeder(record: &FeederRecord) {
    say!(
        "{} ({}, {:.0} kV, {} nodes)",
        record.feeder,
        record.name,
        record.nominal_kv,
        record.nodes
    );
    for sc in &record.scenarios {
        say!(
            "  {:<12} capacity kW: lowest {:>8.0}  median {:>8.0}  highest {:>8.0}   binds: {}{}",
            sc.scenario,
            sc.hosting_kw_min.unwrap_or(0.0),
            sc.hosting_kw_median.unwrap_or(0.0),
            sc.hosting_kw_max.unwrap_or(0.0),
            limit_counts(&sc.by_limit()),
            if sc.baseline_violations > 0 {
                format!(
                    "; {} baseline violation(s) present without new generation",
                    sc.baseline_violations
                )
            } else {
                String::new()
            }
        );
    }
}

/// Settings stored in every table's metadata, so a file tells how it was made.
pub fn run_metadata(study: &Study, options: &CapacityOptions) -> Vec<(&'static str, String)> {
    vec![
        ("headroom_version", env!("CARGO_PKG_VERSION").to_string()),
        ("headroom_study", study_text(study)),
        (
            "headroom_search",
            format!(
                "{}{}",
                search_text(options),
                if options.criteria_detail {
                    " with per-criterion capacities"
                } else {
                    ""
                }
            ),
        ),
        ("headroom_caution", CAUTION.to_string()),
    ]
}

fn study_text(study: &Study) -> String {
    let l = &study.limits;
    let s = &study.search;
    let g = &study.generation;
    let scenarios: Vec<String> = study
        .scenarios
        .iter()
        .map(|sc| {
            format!(
                "{} (loads x{}, generation x{})",
                sc.name, sc.load_scale, sc.gen_scale
            )
        })
        .collect();
    format!(
        "v_min_pu={} v_max_pu={} thermal_pct={} voltage_change_pct={} reverse_flow={}; \
         step_kw={} resolution_kw={} max_kw={}; power_factor={} {}; scenarios: {}",
        l.v_min_pu,
        l.v_max_pu,
        l.thermal_pct,
        l.voltage_change_pct,
        match l.reverse_flow {
            ReverseFlow::Allow => "allow",
            ReverseFlow::Forbid => "forbid",
        },
        s.step_kw,
        s.resolution_kw,
        s.max_kw,
        g.power_factor,
        // At unity power factor there is no reactive power to absorb or inject.
        if g.power_factor >= 1.0 {
            "(unity)"
        } else if g.absorbing {
            "absorbing"
        } else {
            "injecting"
        },
        scenarios.join(", ")
    )
}
