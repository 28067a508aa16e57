//! End-to-end tests: one module per area.

mod command;
mod demo_region;
mod determinism;
mod properties;
mod reference;
mod report;
mod scale;
mod synth;
mod validation;
