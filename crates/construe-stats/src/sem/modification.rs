//! Diagnosis of a fitted model: for each parameter fixed at zero that could be freed (an error
//! covariance, a cross-loading), the modification index (the score test of freeing it, Sörbom
//! 1989) and the expected parameter change (one scoring step, Saris, Satorra & Sörbom 1987),
//! judged together with the test's power (Saris, Satorra & van der Veld 2009); and the
//! standardized residuals. Central functions: `modification_indices`, `standardized_residuals`.
//! Never refits: everything is evaluated at the fitted model's estimates.
//!
//! One formula serves ML and DWLS. With Delta the Jacobian of the model's moments over all
//! candidate and free parameters, W the estimator's weight (ML: the normal-theory weight at the
//! fitted Sigma; DWLS: 1 / the correlations' sampling variances), e the residual moments,
//! F the free parameters and K_F their normal-equation matrix Delta_F' W Delta_F (for DWLS
//! bordered by the unit-diagonal constraints), freeing candidate j moves it in one
//! Gauss-Newton step by EPC_j = (b_j - k_j' K_F^-1 (b_F, 0)) / s_j, where b = Delta' W e,
//! k_j = (Delta_F' W Delta_j, C_j) and s_j = Delta_j' W Delta_j - k_j' K_F^-1 k_j (the Schur
//! complement). For ML, MI_j = (n - 1) s_j EPC_j^2, which is Sörbom's (n - 1)/2 g_j^2 / [H^-1]_jj^-1
//! with g and H the gradient and expected Hessian of F_ML. For DWLS, whose weight is not the
//! inverse of the moments' covariance V, the index is the robust score test (Satorra 1989):
//! EPC_j = a_j' e with a_j = W (Delta_j - Delta_F u_F) / s_j (u = K_F^-1 k_j), so
//! MI_j = EPC_j^2 / (a_j' V a_j), chi-square on 1 df under the model.

use nalgebra::{DMatrix, DVector};

use super::fit::SemFit;
use super::implied::Implied;
use super::indices::ncx2_cdf;
use super::jacobian::{ml_weighted_jacobian, moment_jacobian};
use super::linalg::spd_inverse;
use super::model::{Matrix, Param, ParamLayout, SemModel};
use super::robust::{FULL_BLOCK_MAX, sampling_variances};
use crate::StatsError;
use crate::acov::{Element, SamplingCovariance, all_elements};

/// What the model was fitted to, and how.
#[derive(Debug, Clone, Copy)]
pub enum Discrepancy<'a> {
    /// Normal-theory ML on the covariance matrix `s` of `n` cases.
    Ml { s: &'a DMatrix<f64>, n: usize },
    /// DWLS on the correlation matrix `r`, with the sampling covariance `v` of its off-diagonal
    /// elements (`sem::robust::fit_dwls`).
    Dwls { r: &'a DMatrix<f64>, v: &'a dyn SamplingCovariance },
}

/// The critical value of chi-square on 1 df at the 0.05 level.
pub const CHI2_1_95: f64 = 3.841_458_820_694_124;

/// Standardized error covariance (error correlation in the metric of the items' implied
/// variances) that counts as material: the misspecification size delta of Saris, Satorra & van
/// der Veld (2009), who leave it to the user; 0.1 is our choice, the size of the correlated
/// errors real instruments are known to carry everywhere.
pub const DELTA_ERROR_COVARIANCE: f64 = 0.1;

/// Standardized cross-loading that counts as material (delta, as above): 0.2 is our choice,
/// between the negligible 0.05-0.10 every real item shows and a clearly material 0.4.
pub const DELTA_CROSS_LOADING: f64 = 0.2;

/// Power at or above which the score test is taken to detect a misspecification of size delta
/// (Saris, Satorra & van der Veld 2009 use 0.75).
pub const HIGH_POWER: f64 = 0.75;

/// Most candidates whose robust (DWLS) index is computed; see `modification_indices`.
pub const ROBUST_MAX: usize = 300;

/// What the modification index and its power say together (Saris, Satorra & van der Veld 2009,
/// table 2).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Judgement {
    /// Significant index and low power, or high power with a change at least delta.
    Misspecified,
    /// Significant index with high power but a change below delta: detectable, not material.
    Negligible,
    /// Non-significant index with high power.
    NotMisspecified,
    /// Non-significant index with low power.
    Inconclusive,
}

/// One candidate parameter's diagnosis.
#[derive(Debug, Clone, PartialEq)]
pub struct Modification {
    /// `Matrix::Theta` (row > col: items) or `Matrix::Lambda` (row: item, col: latent).
    pub matrix: Matrix,
    pub row: usize,
    pub col: usize,
    /// The modification index (chi-square on 1 df).
    pub mi: f64,
    /// The expected parameter change in the model's metric.
    pub epc: f64,
    /// The change completely standardized (Bollen 1989, p. 349, as `sem::standardized`);
    /// `None` when an implied variance is not positive.
    pub std_epc: Option<f64>,
    /// The size that counts as material for this kind of parameter (standardized).
    pub delta: f64,
    /// Power of the index's test against a standardized change of `delta`:
    /// P(chi2_1(lambda) > 3.84) with lambda = mi (delta / std_epc)^2.
    pub power: f64,
    pub judgement: Judgement,
}

/// A residual correlation between two observed variables.
#[derive(Debug, Clone, PartialEq)]
pub struct Residual {
    /// The two variables, row > col.
    pub row: usize,
    pub col: usize,
    /// Observed minus implied correlation.
    pub residual: f64,
    /// The moment's residual divided by its asymptotic standard error under the model;
    /// `None` where that variance is not positive or (DWLS with more than
    /// `sem::robust::FULL_BLOCK_MAX` correlations) not computed.
    pub z: Option<f64>,
}

/// Every parameter a diagnosis considers: each error covariance between two observed
/// variables and each loading of an observed variable on one of `latents` that the model fixes
/// at zero.
pub fn candidates(model: &SemModel, latents: &[usize]) -> Vec<(Matrix, usize, usize)> {
    let p = model.p();
    let mut out = Vec::new();
    for i in 0..p {
        for j in 0..i {
            if model.param(Matrix::Theta, i, j).is_zero() {
                out.push((Matrix::Theta, i, j));
            }
        }
    }
    for i in 0..p {
        for &k in latents {
            if model.param(Matrix::Lambda, i, k).is_zero() {
                out.push((Matrix::Lambda, i, k));
            }
        }
    }
    out
}

/// The pieces both functions need: Delta and W Delta over the moments, the residuals, and
/// (DWLS) the constraint Jacobian, for a layout.
struct Moments {
    elements: Vec<Element>,
    delta: DMatrix<f64>,
    wdelta: DMatrix<f64>,
    constraint: Option<DMatrix<f64>>,
    residual: DVector<f64>,
}

fn moments(layout: &ParamLayout, imp: &Implied, d: &Discrepancy) -> Result<Moments, StatsError> {
    let p = imp.sigma.nrows();
    let singular = || StatsError::Singular { what: "implied covariance matrix".into() };
    match *d {
        Discrepancy::Ml { s, .. } => {
            let elements = all_elements(p, false);
            let (k, _) = spd_inverse(&imp.sigma).ok_or_else(singular)?;
            let delta = moment_jacobian(layout, imp, &elements);
            let wdelta = ml_weighted_jacobian(layout, imp, &k, &elements);
            let residual =
                DVector::from_iterator(elements.len(), elements.iter().map(|&(j, l)| s[(j, l)] - imp.sigma[(j, l)]));
            Ok(Moments { elements, delta, wdelta, constraint: None, residual })
        }
        Discrepancy::Dwls { r, v } => {
            let elements = all_elements(p, true);
            let w = sampling_variances(v, &elements)?.map(|x| 1.0 / x);
            if w.iter().any(|x| !x.is_finite() || *x <= 0.0) {
                return Err(StatsError::Singular { what: "sampling variances of the correlations".into() });
            }
            let delta = moment_jacobian(layout, imp, &elements);
            let wdelta = DMatrix::from_fn(delta.nrows(), delta.ncols(), |e, t| w[e] * delta[(e, t)]);
            let diagonal: Vec<Element> = (0..p).map(|i| (i, i)).collect();
            let constraint = Some(moment_jacobian(layout, imp, &diagonal));
            let residual =
                DVector::from_iterator(elements.len(), elements.iter().map(|&(j, l)| r[(j, l)] - imp.sigma[(j, l)]));
            Ok(Moments { elements, delta, wdelta, constraint, residual })
        }
    }
}

/// The normal-equation matrix of the parameters `cols`, bordered by the constraints' Jacobian
/// when there are constraints: [Delta'W Delta, C'; C, 0].
fn system(m: &Moments, h: &dyn Fn(usize, usize) -> f64, cols: &[usize]) -> DMatrix<f64> {
    let q = cols.len();
    let r = m.constraint.as_ref().map_or(0, DMatrix::nrows);
    let mut k = DMatrix::zeros(q + r, q + r);
    for (a, &t) in cols.iter().enumerate() {
        for (b, &u) in cols.iter().enumerate() {
            k[(a, b)] = h(t, u);
        }
    }
    if let Some(c) = &m.constraint {
        for i in 0..r {
            for (a, &t) in cols.iter().enumerate() {
                k[(q + i, a)] = c[(i, t)];
                k[(a, q + i)] = c[(i, t)];
            }
        }
    }
    k
}

/// The modification index, expected parameter change and judgement of each candidate (entries
/// the model fixes at zero: Theta (row > col) or Lambda), for a model `model` fitted as `fit` to
/// the moments `d` (see the module doc for the formulas). Candidates whose information given
/// the free parameters is nil (not identified if freed) are left out. Errors when a candidate
/// is not fixed at zero.
pub fn modification_indices(
    model: &SemModel,
    fit: &SemFit,
    d: Discrepancy,
    candidates: &[(Matrix, usize, usize)],
) -> Result<Vec<Modification>, StatsError> {
    let mut wide = model.clone();
    for &(matrix, row, col) in candidates {
        if !model.param(matrix, row, col).is_zero() {
            return Err(StatsError::InvalidInput(format!("candidate {matrix:?}[{row}, {col}] is not fixed at zero")));
        }
        match matrix {
            Matrix::Theta if row != col => wide.free_error_covariance(row, col),
            Matrix::Lambda => wide.set_loading(row, col, Param::free()),
            _ => {
                return Err(StatsError::InvalidInput(format!(
                    "candidate {matrix:?}[{row}, {col}] is neither an error covariance nor a loading"
                )));
            }
        };
    }
    let layout = wide.layout()?;
    let index_of = |matrix: Matrix, row: usize, col: usize| {
        layout.entries.iter().find(|e| e.matrix == matrix && e.row == row && e.col == col).map(|e| e.index)
    };
    let mut free: Vec<usize> =
        fit.layout.entries.iter().filter_map(|e| index_of(e.matrix, e.row, e.col)).collect::<Vec<_>>();
    free.sort_unstable();
    free.dedup();
    let imp = &fit.moments;
    let m = moments(&layout, imp, &d)?;
    // Only the rows of the free parameters and the candidates' own diagonal entries of
    // Delta'W Delta are needed: q x Q products rather than Q x Q.
    let delta_free = DMatrix::from_fn(m.delta.nrows(), free.len(), |e, a| m.delta[(e, free[a])]);
    let h_free = delta_free.transpose() * &m.wdelta;
    let h = |t: usize, u: usize| match free.binary_search(&t) {
        Ok(a) => h_free[(a, u)],
        Err(_) if t == u => m.delta.column(t).dot(&m.wdelta.column(t)),
        Err(_) => match free.binary_search(&u) {
            Ok(b) => h_free[(b, t)],
            Err(_) => f64::NAN, // two candidates: never asked for
        },
    };
    let b = m.wdelta.transpose() * &m.residual;
    let q = free.len();
    let kf = system(&m, &h, &free);
    let kinv = kf.try_inverse().ok_or_else(|| StatsError::Singular {
        what: "normal equations of the fitted model (the model may not be identified)".into(),
    })?;
    let mut rhs = DVector::zeros(kinv.nrows());
    for (a, &t) in free.iter().enumerate() {
        rhs[a] = b[t];
    }
    let z = &kinv * &rhs;
    let sd_obs: Vec<f64> = imp.sigma.diagonal().iter().map(|v| v.sqrt()).collect();
    let sd_lat: Vec<f64> = imp.latent_cov.diagonal().iter().map(|v| v.sqrt()).collect();
    struct Raw {
        at: (Matrix, usize, usize),
        epc: f64,
        schur: f64,
        a: Option<DVector<f64>>,
    }
    let mut raw = Vec::new();
    for &(matrix, row, col) in candidates {
        let Some(j) = index_of(matrix, row, col) else { continue };
        let mut kj = DVector::zeros(kinv.nrows());
        for (a, &t) in free.iter().enumerate() {
            kj[a] = h(t, j);
        }
        if let Some(c) = &m.constraint {
            for i in 0..c.nrows() {
                kj[q + i] = c[(i, j)];
            }
        }
        let u = &kinv * &kj;
        let hjj = h(j, j);
        let schur = hjj - kj.dot(&u);
        // Nil (or NaN) information given the free parameters: not identified if freed.
        if schur.is_nan() || schur <= 1e-10 * hjj.abs().max(f64::MIN_POSITIVE) {
            continue;
        }
        let epc = (b[j] - kj.dot(&z)) / schur;
        let a = match d {
            Discrepancy::Dwls { .. } => {
                let mut a = m.wdelta.column(j).into_owned();
                for (pos, &t) in free.iter().enumerate() {
                    a -= m.wdelta.column(t) * u[pos];
                }
                Some(a / schur)
            }
            Discrepancy::Ml { .. } => None,
        };
        raw.push(Raw { at: (matrix, row, col), epc, schur, a });
    }
    if matches!(d, Discrepancy::Dwls { .. }) && raw.len() > ROBUST_MAX {
        // The robust variance costs a sandwich per candidate: only the `ROBUST_MAX` with the
        // largest naive index (EPC^2 times the information, the index DWLS would have if its
        // weight were V's inverse) are carried on; the largest robust ones are among them.
        raw.sort_by(|x, y| (y.epc * y.epc * y.schur).total_cmp(&(x.epc * x.epc * x.schur)));
        raw.truncate(ROBUST_MAX);
    }
    let variances: Option<Vec<f64>> = match d {
        Discrepancy::Dwls { v, .. } if !raw.is_empty() => {
            let a = DMatrix::from_fn(m.elements.len(), raw.len(), |e, c| raw[c].a.as_ref().map_or(0.0, |a| a[e]));
            let s = v.sandwich(&m.elements, &a)?;
            Some((0..raw.len()).map(|c| s[(c, c)]).collect())
        }
        _ => None,
    };
    let mut out = Vec::with_capacity(raw.len());
    for (c, r) in raw.iter().enumerate() {
        let (matrix, row, col) = r.at;
        let mi = match (d, &variances) {
            (Discrepancy::Ml { n, .. }, _) => (n as f64 - 1.0) * r.schur * r.epc * r.epc,
            (Discrepancy::Dwls { .. }, Some(var)) if var[c] > 0.0 => r.epc * r.epc / var[c],
            _ => continue,
        };
        let (std_epc, delta) = match matrix {
            Matrix::Lambda => (r.epc * sd_lat[col] / sd_obs[row], DELTA_CROSS_LOADING),
            _ => (r.epc / (sd_obs[row] * sd_obs[col]), DELTA_ERROR_COVARIANCE),
        };
        let std_epc = std_epc.is_finite().then_some(std_epc);
        let power = match std_epc {
            Some(s) if s != 0.0 => 1.0 - ncx2_cdf(CHI2_1_95, 1.0, mi * (delta / s).powi(2)),
            _ => 1.0,
        };
        let significant = mi > CHI2_1_95;
        let high = power >= HIGH_POWER;
        let judgement = match (significant, high) {
            (true, false) => Judgement::Misspecified,
            (true, true) if std_epc.is_some_and(|s| s.abs() >= delta) => Judgement::Misspecified,
            (true, true) => Judgement::Negligible,
            (false, true) => Judgement::NotMisspecified,
            (false, false) => Judgement::Inconclusive,
        };
        out.push(Modification { matrix, row, col, mi, epc: r.epc, std_epc, delta, power, judgement });
    }
    Ok(out)
}

/// Residual correlations of every pair of observed variables with their standardized values
/// (residual / asymptotic SE under the model), in element order (row > col).
/// - ML: the covariance residual s_jl - sigma_jl has asymptotic variance
///   [Gamma - Delta (Delta'W Delta)^-1 Delta'] / (n - 1) with Gamma_(jl) = sigma_jj sigma_ll +
///   sigma_jl^2 the normal-theory variance of s_jl (Jöreskog & Sörbom's standardized residuals;
///   Bollen 1989, p. 258; Browne 1984 for the projection); z = residual / its SE.
/// - DWLS: the residual r - rho(theta) = M eps with M = I - Delta P Delta'W (P the parameter
///   block of the bordered inverse), so its covariance is M V M'; z from its diagonal.
///
/// The residual correlation is the observed minus the implied correlation.
pub fn standardized_residuals(model: &SemModel, fit: &SemFit, d: Discrepancy) -> Result<Vec<Residual>, StatsError> {
    let layout = &fit.layout;
    let imp = &fit.moments;
    let p = model.p();
    let m = moments(layout, imp, &d)?;
    let h = m.delta.transpose() * &m.wdelta;
    let all: Vec<usize> = (0..layout.len()).collect();
    let kinv = system(&m, &|t, u| h[(t, u)], &all).try_inverse().ok_or_else(|| StatsError::Singular {
        what: "normal equations of the fitted model (the model may not be identified)".into(),
    })?;
    let q = layout.len();
    let pmat = kinv.view((0, 0), (q, q)).into_owned();
    let sigma = &imp.sigma;
    let variances: Option<Vec<f64>> = match d {
        Discrepancy::Ml { n, .. } => {
            let g = &m.delta * &pmat;
            Some(
                m.elements
                    .iter()
                    .enumerate()
                    .map(|(e, &(j, l))| {
                        let gamma = sigma[(j, j)] * sigma[(l, l)] + sigma[(j, l)].powi(2);
                        (gamma - g.row(e).dot(&m.delta.row(e))) / (n as f64 - 1.0)
                    })
                    .collect(),
            )
        }
        Discrepancy::Dwls { v, .. } if m.elements.len() <= FULL_BLOCK_MAX => {
            // diag(M V M') = diag(V) - 2 diag(G (W Delta)' V) + diag(G (W Delta)' V (W Delta) G')
            // with G = Delta P, all O(k^2 q).
            let vfull = v.block(&m.elements)?;
            let g = &m.delta * &pmat;
            let wdv = m.wdelta.transpose() * &vfull;
            let middle = &wdv * &m.wdelta;
            let gm = &g * &middle;
            Some(
                (0..m.elements.len())
                    .map(|e| vfull[(e, e)] - 2.0 * g.row(e).dot(&wdv.column(e).transpose()) + gm.row(e).dot(&g.row(e)))
                    .collect(),
            )
        }
        Discrepancy::Dwls { .. } => None,
    };
    let observed = match d {
        Discrepancy::Ml { s, .. } => s,
        Discrepancy::Dwls { r, .. } => r,
    };
    let mut out = Vec::new();
    for (e, &(j, l)) in m.elements.iter().enumerate() {
        if j == l {
            continue;
        }
        let corr = |x: &DMatrix<f64>| x[(j, l)] / (x[(j, j)] * x[(l, l)]).sqrt();
        let residual = corr(observed) - corr(sigma);
        let z = variances.as_ref().and_then(|v| (v[e] > 0.0).then(|| m.residual[e] / v[e].sqrt()));
        out.push(Residual { row: l, col: j, residual, z });
    }
    debug_assert!(out.iter().all(|r| r.row < p));
    Ok(out)
}

#[cfg(test)]
mod tests;
