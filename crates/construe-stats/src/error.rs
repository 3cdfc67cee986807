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
    /// Inputs out of range in ways no caller branches on (a bug in the caller or bad data).
    /// Callers that need to tell cases apart get a variant of their own below.
    #[error("invalid input: {0}")]
    InvalidInput(String),
    /// An index (an indicator, a node) is not below the number of them.
    #[error("{what} {index} is out of range for {len}")]
    OutOfRange { what: &'static str, index: usize, len: usize },
    /// Two inputs disagree in size: `what` counts `found` where `expected` are needed.
    #[error("{found} {what}, expected {expected}")]
    SizeMismatch { what: &'static str, expected: usize, found: usize },
    /// More free parameters than distinct variances and covariances: the model is not
    /// identified, whatever the data.
    #[error("the model has {free} free parameters but only {moments} distinct variances and covariances")]
    NotIdentified { free: usize, moments: usize },
    /// Background knowledge that contradicts itself or names no node of the search.
    #[error(transparent)]
    Knowledge(#[from] crate::search::KnowledgeError),
    /// A variable has no variation, so correlations with it are undefined.
    #[error("{what} is constant")]
    Constant { what: String },
    /// A pairwise statistic failed for columns `first` < `second` (zero-based) of a matrix.
    #[error("columns {first} and {second}: {source}")]
    Pair { first: usize, second: usize, source: Box<StatsError> },
}
