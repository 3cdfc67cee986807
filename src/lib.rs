//! construe: a whole latent-structure analysis of survey constructs from one declarative spec.
//! Data flows one way: spec -> plan -> steps -> artifacts -> report. `main.rs` only parses
//! arguments and calls `app`; tests and benches call the same functions.

pub mod app;
pub mod cli;
pub mod data;
pub mod fsguard;
pub mod model;
pub mod pipeline;
pub mod report;
pub mod spec;
pub use construe_stats as stats;
pub mod steps;
