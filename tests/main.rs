//! construe's one integration-test binary: one module per feature, all driving the real CLI
//! through the `Case` harness (each case in its own temporary folder, `CONSTRUE_*` cleared).

mod harness;

mod caching;
mod check;
mod coverage;
mod demo;
mod diff;
mod faults;
mod inputs;
mod reference;
mod report;
mod robustness;
mod sensitivity;
mod simulate;
mod verify;
