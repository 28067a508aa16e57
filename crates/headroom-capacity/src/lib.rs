//! Hosting capacity: for every node of a feeder and every scenario, the largest new generation
//! the node can take before any criterion of the study is violated, as defined in the feeder
//! format (`hosting capacity`): stepped injections, "beyond the limit and worse than at P = 0",
//! refined to the resolution, with the binding criterion and the element where it binds.
//!
//! Main types: [`FeederStudy`] (a feeder prepared for one study: per-unit network, every
//! scenario's demand and base-case solution), [`NodeCapacity`] (one node's answer), [`Limit`]
//! and [`Element`] (what binds, where), [`SearchMethod`] (the certified fast search or the
//! stepped reference; both return the same numbers), and [`map_feeders`] (every feeder, scenario
//! and node in parallel, in a stable order), [`map_stream`] (feeder by feeder, with bounded
//! memory, for regions of any size) and [`Shard`] (a deterministic share of a region's feeders).
//!
//! ```
//! use headroom_capacity::{CapacityOptions, FeederStudy, Limit};
//! use headroom_model::{BranchRecord, BusIdx, Feeder, FeederHeader, NodeRecord, Study};
//! let feeder = Feeder::from_records(
//!     "line",
//!     FeederHeader::new("line", 11.0, "sub"),
//!     vec![NodeRecord::new("sub"), NodeRecord::new("far")],
//!     vec![BranchRecord::new("b", "sub", "far", 1.6, 1.75, 400.0)],
//! ).unwrap();
//! let study = Study::default();
//! let prepared = FeederStudy::prepare(&feeder, &study);
//! let answer = prepared.node_capacity(0, BusIdx::new(1), &CapacityOptions::default());
//! assert!(answer.hosting_kw > 0.0 && answer.hosting_kw % 1.0 == 0.0);
//! // Generation lifts the far end; with the head at 1.0 pu the 3 % change-on-trip limit comes
//! // before the 1.05 pu overvoltage limit.
//! assert_eq!(answer.limit, Limit::VoltageChange);
//! ```
//!
//! Screening applications builds on the same prepared study: [`check_application`] answers one
//! request at one node (verdict per scenario, capacity left, what binds, the network with and
//! without the plant, what-ifs for a refusal), [`run_queue`] decides a queue in order and
//! [`parse_queue`] reads a queue file's bytes (see docs/check.md).
//!
//! This crate reads no files and writes none; it is the only one that uses threads.
#![deny(missing_docs)]

mod criteria;
mod forecast;
mod linear;
mod prepare;
mod range_min;
mod run;
mod screen;
mod search;
mod shard;
mod stream;

pub use criteria::{Element, Limit, Violation};
pub use prepare::{BaseBranch, FeederStudy, ScenarioCase};
pub use run::{FeederMap, RunStats, ScenarioMap, map_feeder, map_feeders};
pub use screen::{
    Application, ApplicationDate, Assessment, BranchUpgrade, CheckOptions, CheckReport, Decision,
    ExportLimit, HEAD_VOLTAGE_MAX_CHANGE_PU, HEAD_VOLTAGE_STEP_PU, HeadVoltageWhatIf, NetworkState,
    ParsedQueue, PowerFactorWhatIf, QUEUE_COLUMNS, QueueOutcome, QueuedApplication, Reinforcement,
    RequestBreach, ScenarioCheck, Verdict, WHAT_IF_NOTE, WHAT_IF_POWER_FACTORS, WhatIfs,
    check_application, parse_queue, run_queue,
};
pub use search::{CapacityOptions, NeighbourError, NodeCapacity, SearchMethod};
pub use shard::{
    MAX_SHARDS, SHARD_COUNT_VARIABLE, Shard, ShardError, ShardSource, fnv1a_64,
    shard_from_environment,
};
pub use stream::{StreamJob, map_stream};
