//! Reading feeder folders and study.toml from disk: good input loads, each kind of bad input
//! gives exactly the expected diagnostics.

mod feeders;
mod study;
mod support;
