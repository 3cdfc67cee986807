//! Completely standardized solution: every latent and observed variable rescaled to unit
//! implied variance (Bollen 1989, p. 349). Central function: `standardized`.
//! Never hides a Heywood case: a non-positive implied variance gives NaN entries, which callers
//! report as "no standardized value".

use nalgebra::DMatrix;

use super::implied::Implied;
use super::model::{Matrix, ModelMatrices};

/// Standardize the parameter matrices with the implied latent variances C_kk and observed
/// variances Sigma_ii: lambda*_ik = lambda_ik sqrt(C_kk / Sigma_ii), b*_ij = b_ij
/// sqrt(C_jj / C_ii), psi*_kl = psi_kl / sqrt(C_kk C_ll), theta*_ij = theta_ij /
/// sqrt(Sigma_ii Sigma_jj) (Bollen 1989, p. 349). For a latent with incoming paths psi*_kk is
/// the share of its variance left unexplained.
pub fn standardized(mm: &ModelMatrices, imp: &Implied) -> ModelMatrices {
    let sd_latent: Vec<f64> = imp.latent_cov.diagonal().iter().map(|v| v.sqrt()).collect();
    let sd_obs: Vec<f64> = imp.sigma.diagonal().iter().map(|v| v.sqrt()).collect();
    let scale = |x: &DMatrix<f64>, left: &[f64], right: &[f64], divide_left: bool| {
        DMatrix::from_fn(x.nrows(), x.ncols(), |r, c| {
            if divide_left { x[(r, c)] / (left[r] * right[c]) } else { x[(r, c)] * right[c] / left[r] }
        })
    };
    ModelMatrices {
        lambda: scale(&mm.lambda, &sd_obs, &sd_latent, false),
        beta: scale(&mm.beta, &sd_latent, &sd_latent, false),
        psi: scale(&mm.psi, &sd_latent, &sd_latent, true),
        theta: scale(&mm.theta, &sd_obs, &sd_obs, true),
    }
}

/// The standardized value of one entry, `None` when it is not finite (a non-positive variance).
pub fn standardized_entry(std: &ModelMatrices, matrix: Matrix, row: usize, col: usize) -> Option<f64> {
    let v = std.get(matrix)[(row, col)];
    v.is_finite().then_some(v)
}
