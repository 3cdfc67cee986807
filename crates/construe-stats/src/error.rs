//! The one error type of `stats/`: numerical routines fail with a `StatsError`, never a panic.
//! Variants carry typed fields; only `Display` writes words, so callers in `steps/` can map
//! them to diagnostics that name items and constructs.

use thiserror::Error;

/// Why a numerical routine could not produce a result.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum StatsError {
    /// Fewer usable observations than the method needs.
    #[error("{what} needs at least {needed} observations, found {found}")]
    NotEnoughData { what: String, needed: usize, found: usize },
    /// A matrix that had to be inverted or factored is singular or not positive definite.
    #[error("{what} is singular or not positive definite")]
    Singular { what: String },
    /// An iterative method stopped before meeting its convergence criterion.
    #[error("{what} did not converge after {iterations} iterations")]
    NoConvergence { what: String, iterations: usize },
    /// Inputs of mismatched shape or out of range (a bug in the caller or bad data).
    #[error("invalid input: {0}")]
    InvalidInput(String),
    /// A variable has no variation, so correlations with it are undefined.
    #[error("{what} is constant")]
    Constant { what: String },
    /// A pairwise statistic failed for columns `first` < `second` (zero-based) of a matrix.
    #[error("columns {first} and {second}: {source}")]
    Pair { first: usize, second: usize, source: Box<StatsError> },
}
