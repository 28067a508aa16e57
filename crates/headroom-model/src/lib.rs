//! Feeder model: reads the feeder files and study settings, validates them, and hands out a
//! [`Feeder`] whose nodes are ordered from the source.
//!
//! Main types: [`Feeder`] (a validated radial tree), [`Study`] (limits, search settings, the new
//! generation and the scenarios), [`Diagnostic`] / [`ModelErrors`] (every problem found, each
//! naming file, line, column and value).
//!
//! ```
//! use headroom_model::{BranchRecord, Feeder, FeederHeader, NodeRecord};
//! let header = FeederHeader::new("demo", 11.0, "sub");
//! let nodes = vec![NodeRecord::new("sub"), NodeRecord::new("a").with_load(100.0, 30.0)];
//! let branches = vec![BranchRecord::new("b1", "sub", "a", 0.3, 0.35, 300.0)];
//! let feeder = Feeder::from_records("demo", header, nodes, branches).unwrap();
//! assert_eq!(feeder.n_nodes(), 2);
//! assert_eq!(feeder.node(headroom_model::BusIdx::HEAD).id, "sub");
//! ```
//!
//! This crate never solves a load flow, never writes files and never prints.
#![deny(missing_docs)]

mod conductors;
mod csv_table;
mod diagnostic;
mod feeder;
mod read;
mod source;
mod study;
mod study_file;
mod toml_doc;
mod tree;

pub use diagnostic::{Diagnostic, MAX_REPORTED, ModelErrors, Severity};
pub use feeder::{
    Branch, BranchIdx, BranchRecord, BusIdx, Feeder, FeederHeader, Node, NodeRecord, OpenBranch,
};
pub use read::{
    BRANCHES_FILE, CONDUCTORS_FILE, FEEDER_FILE, NODES_FILE, discover_feeders, load_feeder,
    load_feeders,
};
pub use study::{GenerationSettings, Limits, ReverseFlow, Scenario, SearchSettings, Study};
