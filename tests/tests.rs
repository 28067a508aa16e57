//! End-to-end tests: one module per area.
