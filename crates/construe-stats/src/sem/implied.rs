//! Model-implied moments: Sigma = Lambda A Psi A' Lambda' + Theta with A = (I - B)^-1
//! (Joreskog 1973; Bollen 1989, eq. 8.24). Central type: `Implied`, which also keeps the
//! products Lambda A and Lambda C that the gradient and information reuse.
//! Never checks positive definiteness; the fit decides what to do with an indefinite Sigma.

use nalgebra::DMatrix;

use super::model::ModelMatrices;
use crate::StatsError;

/// Implied covariances at one parameter value.
#[derive(Debug, Clone, PartialEq)]
pub struct Implied {
    /// A = (I - B)^-1, m x m: total effects plus identity.
    pub a: DMatrix<f64>,
    /// C = A Psi A', m x m: the implied covariance matrix of the latent variables.
    pub latent_cov: DMatrix<f64>,
    /// Lambda A, p x m.
    pub lambda_a: DMatrix<f64>,
    /// Lambda C, p x m.
    pub lambda_c: DMatrix<f64>,
    /// Sigma, p x p: the implied covariance matrix of the observed variables.
    pub sigma: DMatrix<f64>,
}

/// Evaluate Sigma = Lambda (I - B)^-1 Psi (I - B)^-T Lambda' + Theta (Bollen 1989, eq. 8.24).
/// Errors when I - B is singular (a non-recursive model whose feedback loops have gain one).
pub fn implied(mm: &ModelMatrices) -> Result<Implied, StatsError> {
    let m = mm.beta.nrows();
    let i_minus_b = DMatrix::identity(m, m) - &mm.beta;
    let a =
        i_minus_b.try_inverse().ok_or_else(|| StatsError::Singular { what: "I - B (latent path matrix)".into() })?;
    let mut latent_cov = &a * &mm.psi * a.transpose();
    // Symmetrise so tiny round-off asymmetries never leak into Cholesky factorisations.
    latent_cov = (&latent_cov + latent_cov.transpose()) * 0.5;
    let lambda_a = &mm.lambda * &a;
    let lambda_c = &mm.lambda * &latent_cov;
    let mut sigma = &lambda_c * mm.lambda.transpose() + &mm.theta;
    sigma = (&sigma + sigma.transpose()) * 0.5;
    Ok(Implied { a, latent_cov, lambda_a, lambda_c, sigma })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sem::model::{Identification, Matrix, SemModel};

    #[test]
    fn chain_of_two_latents_matches_the_scalar_path_formulas() {
        // eta = b xi + zeta: var(eta) = b^2 var(xi) + var(zeta), cov = b var(xi)
        // (path tracing, Wright 1921); indicator covariance across factors = l1 l2 cov.
        let model = SemModel::sem(&[vec![0, 1], vec![2, 3]], 4, Identification::UnitFirstLoading, &[(0, 1)]).unwrap();
        let layout = model.layout().unwrap();
        let mut values = vec![0.0; layout.len()];
        for e in &layout.entries {
            values[e.index] = match (e.matrix, e.row, e.col) {
                (Matrix::Lambda, 1, 0) => 0.8,
                (Matrix::Lambda, 3, 1) => 1.2,
                (Matrix::Beta, 1, 0) => 0.5,
                (Matrix::Psi, 0, 0) => 2.0,
                (Matrix::Psi, 1, 1) => 0.7,
                (Matrix::Theta, _, _) => 0.3,
                other => panic!("unexpected free entry {other:?}"),
            };
        }
        let imp = implied(&model.matrices(&layout, &values)).unwrap();
        let var_eta = 0.25 * 2.0 + 0.7;
        assert!((imp.latent_cov[(1, 1)] - var_eta).abs() < 1e-12);
        assert!((imp.latent_cov[(1, 0)] - 0.5 * 2.0).abs() < 1e-12);
        assert!((imp.sigma[(3, 1)] - 1.2 * 0.8 * 1.0).abs() < 1e-12);
        assert!((imp.sigma[(3, 3)] - (1.44 * var_eta + 0.3)).abs() < 1e-12);
    }
}
