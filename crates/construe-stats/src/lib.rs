//! Pure numerics: moments, polychoric correlations, tetrads, SEM, search, simulation.
//! Invariant: reads no file, clock or environment; takes slices and matrices, returns numbers
//! or a `StatsError`. Nothing here knows about specs, YAML, caches or templates.

pub mod acov;
pub mod bootstrap;
pub mod bvn;
pub mod cluster;
pub mod disclosure;
pub mod discriminant;
pub mod error;
pub mod fdr;
pub mod groups_continuous;
pub mod groups_ordinal;
pub mod impute;
pub mod invariance;
pub mod missing;
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
pub mod testkit;
pub mod tetrad;

pub use error::StatsError;

/// Parses a committed reference fixture from the repository's `tests/reference/` (unit tests
/// only; each fixture's generator and library versions sit beside it).
#[cfg(test)]
macro_rules! reference {
    ($path:literal) => {
        serde_json::from_str(include_str!(concat!(env!("CARGO_MANIFEST_DIR"), "/../../tests/reference/", $path)))
            .expect(concat!("reference fixture ", $path))
    };
}
#[cfg(test)]
pub(crate) use reference;
