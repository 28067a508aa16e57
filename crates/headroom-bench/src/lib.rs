//! Shared helpers for the benchmarks.

pub mod cases;
