//! Seeded synthetic radial feeders, for benchmarks, property tests and trying the tool at scale.
//!
//! This crate owns the generator and its conductor library. Main types: [`SynthSettings`] (node
//! count, seed, voltage, load budget, ...), [`SyntheticFeeder`] (the records of one feeder:
//! header, nodes, branches and the [`Conductor`] library they refer to), and the region
//! functions [`generate_region`] / [`write_region`] for many feeders at once.
//!
//! A feeder has a trunk from the head with laterals, sub-laterals and spurs; mixed overhead and
//! cable sections, heavier near the head; loads with power factors of 0.90–0.98; existing solar on
//! 10–20 % of the nodes; a few normally-open points; coordinates in EPSG:32630 around a fictional
//! area. The total peak load is held to a budget that grows with the voltage, not with the node
//! count, so that even a 5,000-node 11 kV feeder has a plausible load flow (see
//! [`DEFAULT_LOAD_BUDGET_KW_PER_KV`]). The same settings give the same feeder byte for byte on
//! every platform: the generator has its own random number generator and uses only exactly
//! rounded arithmetic.
//!
//! ```
//! use headroom_synth::{SynthSettings, generate};
//! let synthetic = generate(&SynthSettings::new(200, 7));
//! assert_eq!(synthetic.nodes.len(), 200);
//! let feeder = synthetic.to_feeder("demo").unwrap();
//! assert_eq!(feeder.n_nodes(), 200);
//! assert!(!feeder.open_branches().is_empty());
//! assert_eq!(synthetic, generate(&SynthSettings::new(200, 7)));
//!
//! let dir = tempfile::tempdir().unwrap();
//! synthetic.write(&dir.path().join("demo")).unwrap();
//! synthetic.write_conductors(&dir.path().join("conductors.csv")).unwrap();
//! ```
//!
//! This crate never reads files, never solves a load flow, never prints, and never draws on the
//! operating system's randomness or clock.
#![deny(missing_docs)]

mod conductors;
mod generate;
mod region;
mod rng;
mod write;

#[cfg(test)]
mod plausibility;

pub use conductors::{Conductor, ConductorKind, conductor_library};
pub use generate::{
    Compass, DEFAULT_CRS, DEFAULT_LOAD_BUDGET_KW_PER_KV, SynthSettings, SyntheticFeeder, generate,
};
pub use region::{generate_region, generate_region_with};
pub use write::{SynthError, write_region};
