//! Structural equation models (Joreskog 1969, 1973; Bollen 1989): model specification,
//! implied moments, Fisher-scoring ML fit with analytic derivatives, standard errors from the
//! expected information, global fit indices and the standardized solution; and (`robust`)
//! DWLS on correlations and ML with sandwich standard errors and corrected statistics.
//! Central types: `SemModel` (what is estimated), `SemFit` (what came out) and `RobustFit`.
//! Knows no spec types: latents and observed variables are indices with plain-string names.

pub mod fit;
pub mod implied;
pub mod indices;
pub mod information;
pub mod jacobian;
pub mod linalg;
pub mod model;
pub mod modification;
pub mod nested;
pub mod robust;
pub mod standardized;
pub mod start;

pub use fit::{FitOptions, Heywood, HeywoodKind, LatentMoments, ParameterEstimate, SemFit, fit};
pub use indices::{BaselineFit, FitIndices, fit_indices, ncx2_cdf, rmsea_interval};
pub use model::{Identification, Matrix, Param, ParamLayout, ParameterKind, SemModel};
pub use modification::{Discrepancy, Judgement, Modification, Residual, modification_indices, standardized_residuals};
pub use nested::{DifferenceMethod, Fitted, NestedTest, difference};
pub use robust::{Correction, RobustFit, StatisticCorrection, Subset, fit_dwls, ml_sandwich, robust_indices};

#[cfg(test)]
mod tests;
