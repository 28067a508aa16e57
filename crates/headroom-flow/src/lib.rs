//! Positive-sequence radial load flow by backward/forward sweep.
//!
//! Main types: [`Network`] (a feeder in per unit, as flat arrays in depth-first order),
//! [`Demand`] (net demand per node for one operating case), [`FlowState`] (voltages and branch
//! currents, reused between solves so a solve allocates nothing), [`solve`] (and
//! [`solve_patiently`], which goes past the sweep cap while the sweep converges) and its result
//! [`Converged`] or [`NotConverged`], and [`Solution`] for reading results in engineering units.
//!
//! Conventions:
//! - Per-unit bases: 1 MVA three-phase, the feeder's line-to-line nominal kV; so
//!   `Z_base = kV² / 1 MVA` ohm and `I_base = 1000 / (√3·kV)` A.
//! - Demand is positive when consumed (loads); an [`Injection`] is positive when produced
//!   (generation). Reactive power of a load is positive when inductive; of an injection, positive
//!   when injected.
//! - Branch currents flow away from the head; the head voltage is held at `head_voltage_pu`
//!   with angle 0.
//! - Convergence: the largest change of any complex node voltage between two sweeps is at most
//!   `tol_pu` (default 1e-9 pu).
//!
//! ```
//! use headroom_model::{BranchRecord, Feeder, FeederHeader, NodeRecord};
//! use headroom_flow::{Demand, FlowState, Network, SolveSettings, solve};
//! let feeder = Feeder::from_records(
//!     "two-bus",
//!     FeederHeader::new("two-bus", 11.0, "sub"),
//!     vec![NodeRecord::new("sub"), NodeRecord::new("end").with_load(1000.0, 0.0)],
//!     vec![BranchRecord::new("line", "sub", "end", 1.21, 0.0, 400.0)],
//! ).unwrap();
//! let network = Network::new(&feeder);
//! let demand = Demand::from_feeder(&feeder, &network, 1.0, 1.0);
//! let mut state = FlowState::flat(&network);
//! solve(&network, &demand, &[], &mut state, &SolveSettings::default()).unwrap();
//! // r = 0.01 pu, p = 1 pu: v² − v + 0.01 = 0, so v = (1 + √0.96) / 2.
//! let v_end = state.v_mag_pu(1);
//! assert!((v_end - (1.0 + 0.96f64.sqrt()) / 2.0).abs() < 1e-9);
//! ```
//!
//! This crate does no I/O, no printing and no threading: callers parallelise over solves.
#![deny(missing_docs)]

mod network;
mod results;
mod sweep;

pub use network::{Demand, Injection, Network, S_BASE_KVA};
pub use results::{BranchFlow, Solution};
pub use sweep::{
    Converged, FlowState, NotConverged, NotConvergedReason, Patience, SolveSettings, solve,
    solve_patiently,
};
