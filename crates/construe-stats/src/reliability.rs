//! Reliability coefficients of composite scores and the classical corrections built on them:
//! Cronbach's alpha, McDonald's omega, the Spearman-Brown prophecy and the correction for
//! attenuation. Pure functions of covariances, loadings and coefficients; never fits a model
//! (omega takes the loadings and error variances of an already fitted congeneric model).

use nalgebra::DMatrix;

use super::StatsError;

/// Cronbach's (1951) alpha of the unit-weighted sum of `items`: alpha = k/(k - 1) (1 - sum_i
/// s_ii / sum_ij s_ij), from the covariance submatrix (any divisor: it cancels). Needs k >= 2
/// and a positive variance of the sum.
pub fn cronbach_alpha(cov: &DMatrix<f64>, items: &[usize]) -> Result<f64, StatsError> {
    let k = items.len();
    if k < 2 {
        return Err(StatsError::InvalidInput(format!("alpha needs at least 2 items, got {k}")));
    }
    if let Some(&i) = items.iter().find(|&&i| i >= cov.nrows() || i >= cov.ncols()) {
        return Err(StatsError::InvalidInput(format!(
            "item {i} is outside the {}x{} covariance matrix",
            cov.nrows(),
            cov.ncols()
        )));
    }
    let diag: f64 = items.iter().map(|&i| cov[(i, i)]).sum();
    let total: f64 = items.iter().map(|&i| items.iter().map(|&j| cov[(i, j)]).sum::<f64>()).sum();
    if total <= 0.0 {
        return Err(StatsError::Constant { what: "sum of the items".into() });
    }
    let k = k as f64;
    Ok(k / (k - 1.0) * (1.0 - diag / total))
}

/// McDonald's (1999, eq. 6.20) omega of the unit-weighted sum of the indicators of a
/// congeneric one-factor model with the factor variance fixed at 1: omega = (sum lambda)^2 /
/// ((sum lambda)^2 + sum theta). Loadings must be on the unit-factor-variance scale
/// (multiply by the factor's standard deviation otherwise); uncorrelated errors assumed.
pub fn mcdonald_omega(loadings: &[f64], error_variances: &[f64]) -> Result<f64, StatsError> {
    if loadings.is_empty() || loadings.len() != error_variances.len() {
        return Err(StatsError::InvalidInput(format!(
            "omega needs one error variance per loading, got {} loadings and {} error variances",
            loadings.len(),
            error_variances.len()
        )));
    }
    let common = loadings.iter().sum::<f64>().powi(2);
    let total = common + error_variances.iter().sum::<f64>();
    if total <= 0.0 {
        return Err(StatsError::Constant { what: "composite of the indicators".into() });
    }
    Ok(common / total)
}

/// Spearman-Brown prophecy (Spearman 1910; Brown 1910): the reliability of a test lengthened
/// by `factor` parallel parts, rho* = factor rho / (1 + (factor - 1) rho). `factor` > 0 (a
/// factor below 1 shortens the test); `reliability` in [0, 1].
pub fn spearman_brown(reliability: f64, factor: f64) -> Result<f64, StatsError> {
    if !(0.0..=1.0).contains(&reliability) || factor <= 0.0 || !factor.is_finite() {
        return Err(StatsError::InvalidInput(format!(
            "spearman-brown needs a reliability in [0, 1] and a positive factor, got {reliability} and {factor}"
        )));
    }
    Ok(factor * reliability / (1.0 + (factor - 1.0) * reliability))
}

/// Correction for attenuation (Spearman 1904): the correlation of the true scores,
/// r_xy / sqrt(r_xx r_yy), from the observed correlation and the two reliabilities (each in
/// (0, 1]). The result may exceed 1 in absolute value when the reliabilities are
/// underestimated; it is returned as is so the caller can report it.
pub fn disattenuate(r_xy: f64, r_xx: f64, r_yy: f64) -> Result<f64, StatsError> {
    if !(r_xx > 0.0 && r_xx <= 1.0 && r_yy > 0.0 && r_yy <= 1.0) {
        return Err(StatsError::InvalidInput(format!(
            "correction for attenuation needs reliabilities in (0, 1], got {r_xx} and {r_yy}"
        )));
    }
    Ok(r_xy / (r_xx * r_yy).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn alpha_of_parallel_items_equals_spearman_brown() {
        // Hand-computed: k parallel items with unit variances and common covariance r have
        // alpha = k r / (1 + (k - 1) r) (Cronbach 1951, p. 305), the Spearman-Brown value.
        let (k, r) = (5, 0.3);
        let cov = DMatrix::from_fn(k, k, |i, j| if i == j { 1.0 } else { r });
        let alpha = cronbach_alpha(&cov, &(0..k).collect::<Vec<_>>()).unwrap();
        let want = 5.0 * 0.3 / (1.0 + 4.0 * 0.3);
        assert!((alpha - want).abs() < 1e-14);
        assert!((spearman_brown(r, k as f64).unwrap() - want).abs() < 1e-14);
        assert!(cronbach_alpha(&cov, &[0]).is_err());
    }

    #[test]
    fn spearman_brown_doubling_and_halving_by_hand() {
        // Hand-computed: doubling a test of reliability .6 gives 1.2 / 1.6 = .75, and halving
        // .75 gives back .6 (Spearman 1910; Brown 1910).
        assert!((spearman_brown(0.6, 2.0).unwrap() - 0.75).abs() < 1e-15);
        assert!((spearman_brown(0.75, 0.5).unwrap() - 0.6).abs() < 1e-15);
        assert!(spearman_brown(1.2, 2.0).is_err());
    }

    #[test]
    fn omega_by_hand_and_equal_to_alpha_for_tau_equivalent_items() {
        // Hand-computed: loadings (.7, .8, .6), errors (.51, .36, .64): (2.1)^2 / (4.41 + 1.51).
        let omega = mcdonald_omega(&[0.7, 0.8, 0.6], &[0.51, 0.36, 0.64]).unwrap();
        assert!((omega - 4.41 / 5.92).abs() < 1e-14);
        // Tau-equivalent items (equal loadings): omega = alpha (McDonald 1999, p. 92).
        let (l, t) = (0.7, [0.4, 0.5, 0.6]);
        let cov = DMatrix::from_fn(3, 3, |i, j| l * l + if i == j { t[i] } else { 0.0 });
        let alpha = cronbach_alpha(&cov, &[0, 1, 2]).unwrap();
        assert!((mcdonald_omega(&[l; 3], &t).unwrap() - alpha).abs() < 1e-14);
        assert!(mcdonald_omega(&[0.7], &[]).is_err());
    }

    #[test]
    fn disattenuation_by_hand() {
        // Hand-computed (Spearman 1904): .3 / sqrt(.8 * .45) = .3 / .6 = .5.
        assert!((disattenuate(0.3, 0.8, 0.45).unwrap() - 0.5).abs() < 1e-15);
        assert!(disattenuate(0.3, 0.0, 0.5).is_err());
    }
}
