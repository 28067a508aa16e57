//! Command-line arguments (clap).

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand, ValueEnum};

/// How much new generation can each node of a radial feeder take?
///
/// headroom reads feeder models (feeder.toml, nodes.csv, branches.csv, conductors.csv), runs
/// exact radial load flows and finds, node by node and scenario by scenario, the largest new
/// generation before a limit breaks: overvoltage, undervoltage, thermal overload, voltage change
/// when the plant trips, reverse power at the substation. Results are GeoParquet maps.
///
/// Results are planning estimates: confirm them under local codes and by licensed engineers.
#[derive(Debug, Parser)]
#[command(name = "headroom", version, about, long_about, max_term_width = 100)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Check feeder files and study settings; report every problem with file, line and value.
    Validate(ValidateArgs),
    /// Solve one load flow per scenario and write node voltages and branch flows.
    Flow(FlowArgs),
    /// Hosting capacity of every node, every scenario: the main job. Writes GeoParquet maps.
    Map(MapArgs),
    /// Write a seeded synthetic feeder (or a region of them) in the feeder format.
    Synth(SynthArgs),
    /// Screen an application to connect new generation at one node (accept or refuse, per
    /// scenario, with what-ifs for a refusal), or decide a queue of them in order.
    Check(CheckArgs),
    /// One self-contained HTML report (maps, charts, tables) from the folder of a map run.
    Report(ReportArgs),
}

#[derive(Debug, Args)]
pub struct ValidateArgs {
    /// A feeder folder, or a folder of feeder folders.
    pub path: PathBuf,
    /// Study settings to check as well (study.toml).
    #[arg(long, value_name = "FILE")]
    pub study: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct FlowArgs {
    /// A feeder folder, or a folder of feeder folders.
    pub feeder: PathBuf,
    /// Folder to write flow_nodes.parquet and flow_branches.parquet into (created if missing).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Study settings (study.toml); default: the format's defaults (scenarios min-load and
    /// peak-load).
    #[arg(long, value_name = "FILE")]
    pub study: Option<PathBuf>,
    /// Solve only this scenario of the study.
    #[arg(long, value_name = "NAME")]
    pub scenario: Option<String>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SearchArg {
    /// Predict each limit from the network's impedances, then certify it with full load flows.
    Fast,
    /// Step by step_kw from 0, then refine: the slow reference of the definition.
    Stepped,
}

#[derive(Debug, Args)]
pub struct MapArgs {
    /// A feeder folder, or a folder of feeder folders.
    pub path: PathBuf,
    /// Folder to write nodes.parquet, branches.parquet, feeders.parquet, baseline.parquet and
    /// run.json into (created if missing). A run stopped part-way and started again with the
    /// same arguments keeps the feeders already done there and maps the rest.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Study settings (study.toml); default: the format's defaults.
    #[arg(long, value_name = "FILE")]
    pub study: Option<PathBuf>,
    /// Worker threads (default: one per core). Results are identical for any number.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..=1024))]
    pub threads: Option<u32>,
    /// Search method; both give the same numbers.
    #[arg(long, value_enum, default_value_t = SearchArg::Fast)]
    pub search: SearchArg,
    /// Skip the capacity under each criterion alone (hosting_kw_voltage, _thermal, _change,
    /// _reverse are then empty). They take more than half of a map's load flows, so this
    /// makes a map two to three times faster.
    #[arg(long)]
    pub no_criteria_detail: bool,
    /// PROJJSON file describing the CRS of the coordinates, for a `crs` that is neither
    /// EPSG:4326 nor a WGS 84 UTM zone (EPSG:326NN / EPSG:327NN).
    #[arg(long, value_name = "FILE")]
    pub crs_projjson: Option<PathBuf>,
    /// No progress bar.
    #[arg(long, short)]
    pub quiet: bool,
    /// Map only shard I of N of the feeders (1-based, e.g. 2/3), chosen from the feeder id
    /// alone; files are named nodes-shard-I-of-N.parquet etc. Default: from a Slurm job array
    /// or a Kubernetes Indexed Job when run in one, else all feeders.
    #[arg(long, value_name = "I/N", value_parser = parse_shard)]
    pub shard: Option<headroom_capacity::Shard>,
    /// Number of shards when the index comes from JOB_COMPLETION_INDEX (Kubernetes Indexed Job);
    /// the variable HEADROOM_SHARD_COUNT does the same.
    #[arg(
        long,
        value_name = "N",
        conflicts_with = "shard",
        value_parser = clap::value_parser!(u32).range(1..=i64::from(headroom_capacity::MAX_SHARDS))
    )]
    pub shard_count: Option<u32>,
    /// Start over: remove this run's earlier results and unfinished work in DIR instead of
    /// resuming.
    #[arg(long)]
    pub fresh: bool,
}

fn parse_shard(text: &str) -> Result<headroom_capacity::Shard, String> {
    headroom_capacity::Shard::parse(text).map_err(|e| e.to_string())
}

#[derive(Debug, Args)]
pub struct SynthArgs {
    /// Nodes per feeder, the head included.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u64).range(2..=2_000_000))]
    pub nodes: u64,
    /// Seed: the same seed always gives the same feeder.
    #[arg(long, value_name = "S", default_value_t = 1)]
    pub seed: u64,
    /// Write a region of this many feeders (one folder each, shared conductors.csv).
    #[arg(long, value_name = "F", value_parser = clap::value_parser!(u64).range(1..=100_000))]
    pub feeders: Option<u64>,
    /// Line-to-line nominal voltage, kV (default: chosen from the size).
    #[arg(long, value_name = "KV")]
    pub kv: Option<f64>,
    /// Folder to write into: the feeder folder itself, or the region folder with --feeders.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
}

#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The --out folder of `headroom map` (every nodes*, branches*, feeders* and baseline*
    /// Parquet file under it is read, and run.json).
    pub run_dir: PathBuf,
    /// The HTML file to write (written whole or not at all).
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Date printed on the report, YYYY-MM-DD. Default: from SOURCE_DATE_EPOCH (seconds since
    /// 1970) when set, else today (UTC).
    #[arg(long, value_name = "YYYY-MM-DD", value_parser = crate::cmd_report::parse_date_arg)]
    pub date: Option<String>,
    /// Thresholds of the "share of nodes below" columns, kW, comma-separated.
    #[arg(
        long,
        value_name = "KW,...",
        value_delimiter = ',',
        default_values_t = [100.0, 1000.0],
        value_parser = crate::cmd_report::parse_threshold_kw
    )]
    pub below_kw: Vec<f64>,
}

#[derive(Debug, Args)]
#[command(group(clap::ArgGroup::new("what").required(true).args(["node", "queue"])))]
pub struct CheckArgs {
    /// A feeder folder, or a folder of feeder folders.
    pub feeder: PathBuf,
    /// Node where the plant would connect (its id in nodes.csv).
    #[arg(long, value_name = "ID", requires = "kw")]
    pub node: Option<String>,
    /// Requested export at rated output, kW (> 0).
    #[arg(long, value_name = "KW", requires = "node", value_parser = parse_check_kw,
          allow_negative_numbers = true)]
    pub kw: Option<f64>,
    /// With a folder of feeders: the feeder of --node, when several feeders have that node id.
    #[arg(long, value_name = "ID", requires = "node")]
    pub feeder_id: Option<String>,
    /// Power factor of the plant, in (0, 1]; default: the study's [generation] power_factor.
    /// With --queue, the default for rows that leave it empty.
    #[arg(long, value_name = "PF", value_parser = parse_power_factor,
          allow_negative_numbers = true)]
    pub power_factor: Option<f64>,
    /// The plant absorbs reactive power (lowers its voltage rise); default: the study's.
    #[arg(long, conflicts_with = "injecting")]
    pub absorbing: bool,
    /// The plant injects reactive power; default: the study's.
    #[arg(long)]
    pub injecting: bool,
    /// Study settings (study.toml); default: the format's defaults.
    #[arg(long, value_name = "FILE")]
    pub study: Option<PathBuf>,
    /// Print one JSON document instead of the report.
    #[arg(long)]
    pub json: bool,
    /// Skip the what-ifs of a refusal (power factor, export limit, reinforcement, head voltage).
    #[arg(long)]
    pub no_what_ifs: bool,
    /// Decide a queue of applications in order instead (CSV: id, node, kw, and optionally
    /// power_factor, absorbing, date, feeder); each accepted one becomes existing generation
    /// for the ones after it.
    #[arg(long, value_name = "FILE", requires = "out", conflicts_with_all = ["node", "kw"])]
    pub queue: Option<PathBuf>,
    /// With --queue: folder to write decisions.csv, decisions.parquet and run.json into
    /// (created if missing).
    #[arg(long, value_name = "DIR", requires = "queue")]
    pub out: Option<PathBuf>,
    /// Worker threads (default: one per core). Results are identical for any number.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..=1024))]
    pub threads: Option<u32>,
}

fn parse_check_kw(text: &str) -> Result<f64, String> {
    match text.trim().parse::<f64>() {
        Ok(kw) if kw.is_finite() && kw > 0.0 => Ok(kw),
        Ok(_) => Err("must be a number greater than 0 (the export in kW)".to_string()),
        Err(_) => Err("not a number: give the export in kW, e.g. 250".to_string()),
    }
}

fn parse_power_factor(text: &str) -> Result<f64, String> {
    match text.trim().parse::<f64>() {
        Ok(pf) if pf > 0.0 && pf <= 1.0 => Ok(pf),
        Ok(_) => Err("must be in (0, 1]: 1 is unity, 0.95 a common setting".to_string()),
        Err(_) => Err("not a number: give a power factor in (0, 1], e.g. 0.95".to_string()),
    }
}
