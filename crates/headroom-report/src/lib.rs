//! The regional report: one self-contained HTML page from the tables of a `headroom map` run.
//!
//! This crate owns reading a run folder back ([`read_run`]: every `nodes*`, `branches*`,
//! `feeders*` and `baseline*` Parquet file under it, and `run.json`) into plain rows
//! ([`Run`]), the numbers of the report ([`build_report`] → [`Report`]: each node's worst case
//! over the scenarios, summaries per region, substation, feeder and scenario, shares below
//! thresholds, counts per binding criterion), the drawings (feeder maps from coordinates or a
//! schematic from the tree, histograms, bar charts, as hand-written SVG) and the page
//! ([`render_html`]). Capacities are coloured in kW bins ([`BIN_EDGES_KW`]) with a sequential
//! ramp of rising lightness ([`BIN_COLOURS`]).
//!
//! ```
//! use headroom_report::{
//!     FeederInfo, Limit, NodeRow, PageOptions, Run, build_report, render_html,
//! };
//!
//! let row = |scenario: &str, node: &str, hosting_kw: f64, limit: Limit| NodeRow {
//!     feeder: "f1".into(),
//!     scenario: scenario.into(),
//!     node: node.into(),
//!     x: None,
//!     y: None,
//!     hosting_kw,
//!     limit,
//!     limit_element: None,
//!     v_base_pu: None,
//! };
//! let run = Run {
//!     scenarios: vec!["light".into(), "peak".into()],
//!     feeders: vec![FeederInfo { id: "f1".into(), ..FeederInfo::default() }],
//!     nodes: vec![
//!         row("light", "n1", 80.0, Limit::Overvoltage),
//!         row("peak", "n1", 400.0, Limit::Thermal),
//!         row("light", "n2", 1500.0, Limit::Thermal),
//!         row("peak", "n2", 1200.0, Limit::Thermal),
//!     ],
//!     ..Run::default()
//! };
//! let report = build_report(&run, &[100.0, 1000.0]);
//! // Worst cases: n1 80 kW (light), n2 1200 kW (peak).
//! let total = &report.groups.last().unwrap().summary;
//! assert_eq!((total.lowest_kw, total.median_kw), (Some(80.0), Some(640.0)));
//! assert_eq!(total.below[0].n_nodes, 1);
//!
//! let html = render_html(&report, &PageOptions { date: "2025-01-31".into() });
//! assert!(html.contains("class=\"feeder-map\""));
//! assert_eq!(html.matches("class=\"node-mark\"").count(), 2);
//! assert!(!html.contains("<script"));
//! ```
//!
//! This crate never runs load flows or searches (it shows the run's numbers), never writes
//! files (the caller writes the returned text), never fetches anything (the page is
//! self-contained and has no scripts), and never reads the clock: the date is given.
#![deny(missing_docs)]

mod date;
mod error;
mod escape;
mod html;
mod layout;
mod limit;
mod palette;
mod read;
mod report;
mod stats;
mod svg;
mod wkb;

pub use date::{date_from_unix_seconds, parse_date};
pub use error::ReportError;
pub use escape::escape;
pub use html::{CAUTION, MAX_BASELINE_ROWS, PageOptions, render_html};
pub use layout::{Frame, LayoutKind, MapLayout, geographic, layout, schematic};
pub use limit::{Limit, LimitCounts};
pub use palette::{BIN_COLOURS, BIN_EDGES_KW, N_BINS, bin_label, bin_of, group_thousands};
pub use read::{BaselineRow, BranchRow, FeederInfo, NodeRow, Run, RunMeta, read_run};
pub use report::{
    BranchLine, DEFAULT_THRESHOLDS_KW, FeederReport, GroupRow, Report, build_report, group_rows,
};
pub use stats::{
    Below, CapacitySummary, Histogram, WorstNode, histogram, nice_step, summarise, worst_case,
};
pub use svg::{feeder_map, histogram_svg, limits_svg};
pub use wkb::line_string_ends;
