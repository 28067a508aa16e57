//! Screening applications to connect new generation: [`check_application`] answers one
//! (accept or refuse, per scenario, with the capacity left at the node, what binds, the
//! network with and without the plant, and what-ifs for a refusal); [`run_queue`] decides a
//! queue in order, each accepted plant becoming existing generation for the next;
//! [`parse_queue`] reads a queue file. Reports are `serde::Serialize` for other systems.
//!
//! A check reuses the prepared base cases: per scenario one capacity search at the node
//! (a handful of load flows) and one load flow at the request; what-ifs only on a refusal.

mod application;
mod check;
mod queue;
mod queue_file;
mod request;
mod what_if;

pub use application::{Application, ApplicationDate};
pub use check::{
    CheckOptions, CheckReport, NetworkState, RequestBreach, ScenarioCheck, Verdict,
    check_application,
};
pub use queue::{Decision, QueueOutcome, QueuedApplication, run_queue};
pub use queue_file::{ParsedQueue, QUEUE_COLUMNS, parse_queue};
pub use what_if::{
    Assessment, BranchUpgrade, ExportLimit, HEAD_VOLTAGE_MAX_CHANGE_PU, HEAD_VOLTAGE_STEP_PU,
    HeadVoltageWhatIf, PowerFactorWhatIf, Reinforcement, WHAT_IF_NOTE, WHAT_IF_POWER_FACTORS,
    WhatIfs,
};
