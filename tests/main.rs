//! construe's one integration-test binary: one module per feature, all driving the real CLI
//! through the `Case` harness (each case in its own temporary folder, `CONSTRUE_*` cleared).

mod harness;

mod audit;
mod caching;
mod check;
mod claims;
mod compact;
mod coverage;
mod demo;
mod diff;
mod estimation;
mod faults;
mod guard;
mod impurities;
mod inputs;
mod invariance;
mod missing;
mod power;
mod reference;
mod report;
mod robustness;
mod schemas;
mod sensitivity;
mod simulate;
mod structure_fci;
mod tetrads;
mod types;
mod verify;
