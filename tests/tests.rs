//! End-to-end tests: one module per area.

mod check;
mod command;
mod demo_region;
mod determinism;
mod properties;
mod reference;
mod report;
mod scale;
mod synth;
mod validation;
