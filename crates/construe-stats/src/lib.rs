//! Pure numerics: moments, polychoric correlations, tetrads, SEM, search, simulation.
//! Invariant: reads no file, clock or environment; takes slices and matrices, returns numbers
//! or a `StatsError`. Nothing here knows about specs, YAML, caches or templates.

pub mod bootstrap;
pub mod bvn;
pub mod cluster;
pub mod error;
pub mod fdr;
pub mod mixed;
pub mod moments;
pub mod polychoric;
pub mod polyserial;
pub mod purify;
pub mod reliability;
pub mod search;
pub mod sem;
pub mod simulate;
pub mod smoothing;
pub mod tetrad;

/// Simulation checks of the measurement-error pitfalls, structure recovery and test calibration.
#[cfg(test)]
mod pitfalls;

/// Acceptance checks: classic-matrix CFA against scipy, purification and cluster recovery.
#[cfg(test)]
mod acceptance;

pub use error::StatsError;
