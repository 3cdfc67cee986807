//! Maximum-likelihood estimation of a `SemModel` from a sample covariance matrix by Fisher
//! scoring with step halving, and the fitted result. Central type: `SemFit`.
//! Never clamps or reflects a parameter: estimates outside the admissible region (Heywood
//! cases) are kept and listed in `SemFit::heywood`; only Sigma must stay positive definite.

use nalgebra::{DMatrix, DVector};

use super::implied::{Implied, implied};
use super::indices::{BaselineFit, FitIndices, fit_indices};
use super::information::{Derivatives, latent_cov_jacobian};
use super::linalg::{cholesky_lower, cholesky_solve, factor_model_inverse, inverse_from_factor, spd_inverse};
use super::model::{Matrix, ModelMatrices, ParamLayout, ParameterKind, SemModel};
use super::standardized::{standardized, standardized_entry};
use super::start::start_values;
use crate::StatsError;

/// Controls of the optimiser.
#[derive(Debug, Clone, PartialEq)]
pub struct FitOptions {
    /// Most Fisher-scoring steps before giving up (reported as `converged = false`).
    pub max_iterations: usize,
    /// Convergence when the scoring decrement g' H^-1 g (the predicted drop of 2 F) is below this.
    pub tolerance: f64,
    /// Starting values indexed as `SemModel::layout`; `None` uses `start::start_values`.
    pub start: Option<Vec<f64>>,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions { max_iterations: 500, tolerance: 1e-12, start: None }
    }
}

/// One entry of the fitted model: free entries and fixed entries that carry meaning (non-zero,
/// or on the diagonal of Psi or Theta).
#[derive(Debug, Clone, PartialEq)]
pub struct ParameterEstimate {
    pub kind: ParameterKind,
    pub matrix: Matrix,
    /// See `ParameterKind` for what row and col index.
    pub row: usize,
    pub col: usize,
    /// Index into `SemFit::values` for a free entry, `None` for a fixed one.
    pub free: Option<usize>,
    pub est: f64,
    /// Standard error from the inverse expected information; `None` for fixed entries.
    pub se: Option<f64>,
    /// Completely standardized value; `None` when an implied variance is not positive.
    pub std: Option<f64>,
}

/// Which admissibility condition an estimate violates.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum HeywoodKind {
    /// A free error variance at or below zero.
    NonPositiveErrorVariance,
    /// A free latent (residual) variance at or below zero.
    NonPositiveLatentVariance,
    /// A standardized loading with absolute value above one.
    StandardizedLoadingAboveOne,
    /// A standardized error covariance (error correlation) with absolute value above one.
    ErrorCorrelationAboveOne,
    /// The implied latent covariance matrix (I - B)^-1 Psi (I - B)^-T is not positive definite.
    LatentCovarianceNotPositiveDefinite,
}

/// One inadmissible estimate (Heywood 1931; Dillon, Kumar & Mulani 1987).
#[derive(Debug, Clone, PartialEq)]
pub struct Heywood {
    pub kind: HeywoodKind,
    /// The entry concerned; `None` for a property of a whole matrix.
    pub entry: Option<(Matrix, usize, usize)>,
    /// The offending value (for a matrix: its smallest eigenvalue).
    pub value: f64,
}

/// Implied latent covariances and correlations with their delta-method covariance.
#[derive(Debug, Clone, PartialEq)]
pub struct LatentMoments {
    /// Pairs (i, j), i >= j, in column-major lower-triangle order: the index of every vector below.
    pub pairs: Vec<(usize, usize)>,
    /// C = (I - B)^-1 Psi (I - B)^-T, m x m.
    pub covariance: DMatrix<f64>,
    /// Asymptotic covariance of the elements of C listed in `pairs`: J acov J'.
    pub covariance_acov: DMatrix<f64>,
    /// Latent correlations C_ij / sqrt(C_ii C_jj), m x m.
    pub correlation: DMatrix<f64>,
    /// Asymptotic covariance of the correlations listed in `pairs` (zero rows for i == j).
    pub correlation_acov: DMatrix<f64>,
    /// Jacobian of the `pairs` elements of C with respect to the free parameters.
    pub jacobian: DMatrix<f64>,
}

/// Result of an ML fit.
#[derive(Debug, Clone, PartialEq)]
pub struct SemFit {
    /// Whether the scoring decrement fell below the tolerance.
    pub converged: bool,
    /// Fisher-scoring steps taken.
    pub iterations: usize,
    /// Largest absolute gradient component of F at the final estimates.
    pub gradient_norm: f64,
    /// Final scoring decrement g' H^-1 g.
    pub decrement: f64,
    /// Minimised F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p.
    pub discrepancy: f64,
    /// Sample size the covariance matrix came from.
    pub n: usize,
    /// The model's degrees of freedom, p(p + 1)/2 - q (the same number as `indices.df`).
    pub df: usize,
    /// Chi-square, RMSEA, CFI, TLI, SRMR: the one fit-index record (`indices::FitIndices`).
    pub indices: FitIndices,
    /// The independence model CFI and TLI compare with.
    pub baseline: BaselineFit,
    /// Every meaningful entry with estimate, SE and standardized value.
    pub parameters: Vec<ParameterEstimate>,
    /// Free-parameter vector, indexed as `layout`.
    pub values: Vec<f64>,
    pub layout: ParamLayout,
    /// Asymptotic covariance of `values`: (n - 1)/2 times the expected Hessian of F, inverted.
    pub acov: DMatrix<f64>,
    /// Estimated parameter matrices.
    pub matrices: ModelMatrices,
    /// Completely standardized parameter matrices.
    pub standardized: ModelMatrices,
    /// Implied covariance matrix Sigma of the observed variables.
    pub implied: DMatrix<f64>,
    /// Inadmissible estimates, empty when all are admissible.
    pub heywood: Vec<Heywood>,
    pub(super) moments: Implied,
}

impl SemModel {
    /// Fit this model by ML to the covariance matrix `s` (divided by n - 1) of `n` cases; see `fit`.
    pub fn fit(&self, s: &DMatrix<f64>, n: usize, options: &FitOptions) -> Result<SemFit, StatsError> {
        fit(self, s, n, options)
    }
}

/// Value of F and what the derivatives need at one point; `None` when Sigma is not PD.
struct Point {
    f: f64,
    imp: Implied,
    k: DMatrix<f64>,
}

/// Smallest share of an item's implied variance its error variance may have for Sigma to be
/// inverted by the Woodbury identity (see `linalg::factor_model_inverse`).
const WOODBURY_MIN_ERROR_SHARE: f64 = 1e-3;

/// Below this scoring decrement, steps that shrink it tenfold reuse the information factor.
const CHORD_BELOW: f64 = 1e-2;

/// What `evaluate` needs besides the parameter values.
struct Objective<'a> {
    model: &'a SemModel,
    layout: &'a ParamLayout,
    s: &'a DMatrix<f64>,
    ln_det_s: f64,
    /// Theta is diagonal by the model's structure (no error covariance, free or fixed), so
    /// Sigma may be inverted through the factor structure.
    diagonal_errors: bool,
}

fn evaluate(obj: &Objective, values: &[f64]) -> Option<Point> {
    let (model, s) = (obj.model, obj.s);
    let mm = model.matrices(obj.layout, values);
    let imp = implied(&mm).ok()?;
    let factored = if obj.diagonal_errors && model.m() > 0 {
        let theta: Vec<f64> = mm.theta.diagonal().iter().copied().collect();
        let sigma_diagonal: Vec<f64> = imp.sigma.diagonal().iter().copied().collect();
        factor_model_inverse(&mm.lambda, &imp.latent_cov, &theta, &sigma_diagonal, WOODBURY_MIN_ERROR_SHARE)
    } else {
        None
    };
    let (k, ln_det) = match factored {
        Some(inverse) => inverse,
        None => spd_inverse(&imp.sigma)?,
    };
    let ln_det_s = obj.ln_det_s;
    let trace: f64 = s.as_slice().iter().zip(k.as_slice()).map(|(a, b)| a * b).sum();
    let f = ln_det + trace - ln_det_s - s.nrows() as f64;
    f.is_finite().then_some(Point { f, imp, k })
}

/// ML estimation (Joreskog 1969; Bollen 1989, ch. 4): minimise
/// F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p over the free parameters by Fisher scoring, theta <- theta - alpha H^-1 g with
/// H = E[d2F] = [tr(K dSigma_t K dSigma_u)] (Lee & Jennrich 1979). The step length alpha starts
/// at 1 and is halved until F satisfies the Armijo condition and Sigma is positive definite.
/// Near the optimum H's factor is reused across steps (chord steps) while each full step still
/// shrinks the decrement tenfold; convergence is always confirmed, and the SEs taken, with the
/// information at the final point, followed by one full scoring step.
///
/// Why scoring rather than BFGS: H is needed anyway for the standard errors, the rank-two
/// structure of dSigma makes it cost O(q^2) per step, it is positive definite wherever the
/// model is identified (so every step descends), and it makes the steps invariant to the
/// scale of the variables; at a well-fitting solution it is close to the true Hessian, so the
/// iteration converges in a handful of steps where BFGS would still be learning curvature.
///
/// SEs: acov = [(n - 1)/2 H]^-1, the inverse expected information under normality
/// ((n-1)/2 Delta' D'(Sigma^-1 (x) Sigma^-1) D Delta over vech(Sigma), written without the
/// Kronecker product). df = p(p + 1)/2 - q; indices as in `indices::fit_indices`.
/// A fit that stops early returns `converged = false` with the estimates reached.
pub fn fit(model: &SemModel, s: &DMatrix<f64>, n: usize, options: &FitOptions) -> Result<SemFit, StatsError> {
    let p = model.p();
    if s.nrows() != p {
        return Err(StatsError::SizeMismatch {
            what: "covariance matrix rows for the model's observed variables",
            expected: p,
            found: s.nrows(),
        });
    }
    if s.ncols() != p {
        return Err(StatsError::SizeMismatch {
            what: "covariance matrix columns for the model's observed variables",
            expected: p,
            found: s.ncols(),
        });
    }
    if n < 2 {
        return Err(StatsError::NotEnoughData { what: "ML structural equation model".into(), needed: 2, found: n });
    }
    let s = (s + s.transpose()) * 0.5;
    let ln_det_s: f64 = cholesky_lower(&s)
        .ok_or_else(|| StatsError::Singular { what: "sample covariance matrix".into() })?
        .diagonal()
        .iter()
        .map(|d| 2.0 * d.ln())
        .sum();
    let layout = model.layout()?;
    let q = layout.len();
    let moments_count = p * (p + 1) / 2;
    if q > moments_count {
        return Err(StatsError::NotIdentified { free: q, moments: moments_count });
    }
    let df = moments_count - q;
    let mut values = match &options.start {
        Some(v) if v.len() == q => v.clone(),
        Some(v) => {
            return Err(StatsError::SizeMismatch {
                what: "starting values for the free parameters",
                expected: q,
                found: v.len(),
            });
        }
        None => start_values(model, &layout, &s),
    };
    let derivs = Derivatives::new(&layout, p, model.m());
    let diagonal_errors = (0..p).all(|i| (0..i).all(|j| model.param(Matrix::Theta, i, j).is_zero()));
    let objective = Objective { model, layout: &layout, s: &s, ln_det_s, diagonal_errors };
    let mut point = evaluate(&objective, &values)
        .ok_or_else(|| StatsError::Singular { what: "implied covariance matrix at the starting values".into() })?;
    let not_identified =
        || StatsError::Singular { what: "expected information matrix (the model may not be identified)".into() };
    let mut iterations = 0;
    let mut converged = false;
    let information = |point: &Point| cholesky_lower(&derivs.hessian(&point.imp, &point.k)).ok_or_else(not_identified);
    let mut g = derivs.gradient(&point.imp, &point.k, &s);
    let mut factor = information(&point)?;
    // Whether `factor` belongs to the current point (chord steps reuse an older one), and
    // whether the last convergence test had to be repeated with a fresh factor.
    let (mut fresh, mut rejudged) = (true, false);
    let mut decrement;
    let mut previous = f64::INFINITY;
    loop {
        let step = cholesky_solve(&factor, &g);
        decrement = g.dot(&step);
        let stop = decrement <= options.tolerance || iterations >= options.max_iterations;
        if stop && !fresh {
            // Judge convergence, and take the SEs, from the information at this very point.
            factor = information(&point)?;
            (fresh, rejudged) = (true, true);
            continue;
        }
        if stop {
            converged = decrement <= options.tolerance;
            if converged && rejudged {
                // Chord steps converge linearly; one full scoring step with the fresh factor
                // restores the accuracy of a scoring iteration at the optimum (quadratic for
                // a model that fits exactly). The SEs keep that factor, one tiny step away.
                let trial: Vec<f64> = values.iter().zip(step.iter()).map(|(v, d)| v - d).collect();
                let allowance = 1e-13 * point.f.abs().max(1.0);
                if let Some(next) = evaluate(&objective, &trial).filter(|next| next.f <= point.f + allowance) {
                    iterations += 1;
                    values = trial;
                    point = next;
                    g = derivs.gradient(&point.imp, &point.k, &s);
                }
            }
            break;
        }
        iterations += 1;
        let mut alpha = 1.0;
        let mut accepted = None;
        for _ in 0..40 {
            let trial: Vec<f64> = values.iter().zip(step.iter()).map(|(v, d)| v - alpha * d).collect();
            if let Some(next) = evaluate(&objective, &trial) {
                // Armijo with a round-off allowance, so the last steps near the optimum are
                // not refused for decreases below machine precision.
                let allowance = 1e-13 * point.f.abs().max(1.0);
                if next.f <= point.f - 1e-4 * alpha * decrement + allowance {
                    accepted = Some((trial, next));
                    break;
                }
            }
            alpha *= 0.5;
        }
        let Some((trial, next)) = accepted else {
            if fresh {
                break;
            }
            // A stale factor may point badly: retry from this point with its own information.
            factor = information(&point)?;
            fresh = true;
            continue;
        };
        // Chord steps (Ortega & Rheinboldt 1970, sec. 7.1): close to the optimum, where full
        // steps shrink the decrement tenfold or more, the information matrix barely changes,
        // so its factor is kept and only the gradient is recomputed.
        let reuse = alpha == 1.0 && decrement < CHORD_BELOW && decrement < 0.1 * previous;
        previous = decrement;
        values = trial;
        point = next;
        g = derivs.gradient(&point.imp, &point.k, &s);
        if reuse {
            fresh = false;
        } else {
            factor = information(&point)?;
            fresh = true;
        }
    }
    let acov = inverse_from_factor(&factor) * (2.0 / (n as f64 - 1.0));
    let matrices = model.matrices(&layout, &values);
    let std = standardized(&matrices, &point.imp);
    let parameters = estimates(model, &layout, &matrices, &std, &acov);
    let heywood = heywood_cases(&parameters, &point.imp);
    let (indices, baseline) = fit_indices(point.f, &s, &point.imp.sigma, n, df)?;
    Ok(SemFit {
        converged,
        iterations,
        gradient_norm: g.amax(),
        decrement,
        discrepancy: point.f,
        n,
        df,
        indices,
        baseline,
        parameters,
        values,
        layout,
        acov,
        matrices,
        standardized: std,
        implied: point.imp.sigma.clone(),
        heywood,
        moments: point.imp,
    })
}

/// Free entries plus fixed entries that mean something (non-zero, or a Psi / Theta diagonal).
pub(super) fn estimates(
    model: &SemModel,
    layout: &ParamLayout,
    mm: &ModelMatrices,
    std: &ModelMatrices,
    acov: &DMatrix<f64>,
) -> Vec<ParameterEstimate> {
    let mut out = Vec::new();
    for matrix in [Matrix::Lambda, Matrix::Beta, Matrix::Psi, Matrix::Theta] {
        let (rows, cols) = model.shape(matrix);
        let symmetric = matches!(matrix, Matrix::Psi | Matrix::Theta);
        // Free-parameter index of each entry, looked up once rather than searched per entry.
        let mut free_at = vec![None; rows * cols];
        for e in layout.entries.iter().filter(|e| e.matrix == matrix) {
            free_at[e.row * cols + e.col] = Some(e.index);
        }
        for row in 0..rows {
            let last = if symmetric { row + 1 } else { cols };
            for col in 0..last {
                let free = free_at[row * cols + col];
                let est = mm.get(matrix)[(row, col)];
                let meaningful = free.is_some() || est != 0.0 || (symmetric && row == col);
                if !meaningful {
                    continue;
                }
                out.push(ParameterEstimate {
                    kind: ParameterKind::of(matrix, row, col),
                    matrix,
                    row,
                    col,
                    free,
                    est,
                    se: free.map(|t| acov[(t, t)].sqrt()),
                    std: standardized_entry(std, matrix, row, col),
                });
            }
        }
    }
    out
}

/// Inadmissible estimates: free variances <= 0, |standardized loading| > 1, |error
/// correlation| > 1, and a latent covariance matrix that is not positive definite
/// (Dillon, Kumar & Mulani 1987 list these as the improper solutions of ML factor analysis).
pub(super) fn heywood_cases(parameters: &[ParameterEstimate], imp: &Implied) -> Vec<Heywood> {
    let mut out = Vec::new();
    for e in parameters {
        let entry = Some((e.matrix, e.row, e.col));
        let std = e.std.unwrap_or(f64::NAN);
        let kind = match e.kind {
            ParameterKind::ErrorVariance if e.free.is_some() && e.est <= 0.0 => {
                Some((HeywoodKind::NonPositiveErrorVariance, e.est))
            }
            ParameterKind::LatentVariance if e.free.is_some() && e.est <= 0.0 => {
                Some((HeywoodKind::NonPositiveLatentVariance, e.est))
            }
            ParameterKind::Loading if std.abs() > 1.0 => Some((HeywoodKind::StandardizedLoadingAboveOne, std)),
            ParameterKind::ErrorCovariance if std.abs() > 1.0 => Some((HeywoodKind::ErrorCorrelationAboveOne, std)),
            _ => None,
        };
        if let Some((kind, value)) = kind {
            out.push(Heywood { kind, entry, value });
        }
    }
    if imp.latent_cov.nrows() == 0 {
        return out;
    }
    let min_eig = imp.latent_cov.symmetric_eigenvalues().min();
    if min_eig <= 0.0 {
        out.push(Heywood { kind: HeywoodKind::LatentCovarianceNotPositiveDefinite, entry: None, value: min_eig });
    }
    out
}

impl SemFit {
    /// The estimate of free parameter `name` (a label, or the generated name of an unlabelled entry).
    pub fn value(&self, name: &str) -> Option<f64> {
        self.layout.names.iter().position(|n| n == name).map(|t| self.values[t])
    }

    /// The estimate record of one entry, if it is free or meaningful (see `parameters`).
    pub fn entry(&self, matrix: Matrix, row: usize, col: usize) -> Option<&ParameterEstimate> {
        let (row, col) =
            if matches!(matrix, Matrix::Psi | Matrix::Theta) && col > row { (col, row) } else { (row, col) };
        self.parameters.iter().find(|e| e.matrix == matrix && e.row == row && e.col == col)
    }

    /// Implied latent covariances C = (I - B)^-1 Psi (I - B)^-T and correlations, with their
    /// asymptotic covariances by the delta method (Rao 1973, 6a.2): acov(vech C) = J acov J'
    /// with J from `information::latent_cov_jacobian`; for r_ij = C_ij / sqrt(C_ii C_jj),
    /// dr_ij = dC_ij / sqrt(C_ii C_jj) - r_ij (dC_ii / C_ii + dC_jj / C_jj) / 2.
    pub fn latent_moments(&self) -> LatentMoments {
        let c = &self.moments.latent_cov;
        let m = c.nrows();
        let pairs: Vec<(usize, usize)> = (0..m).flat_map(|j| (j..m).map(move |i| (i, j))).collect();
        let jacobian = latent_cov_jacobian(&self.layout, &self.moments, &pairs);
        let covariance_acov = &jacobian * &self.acov * jacobian.transpose();
        let correlation = DMatrix::from_fn(m, m, |i, j| c[(i, j)] / (c[(i, i)] * c[(j, j)]).sqrt());
        let pos = |i: usize, j: usize| pairs.iter().position(|&x| x == (i.max(j), i.min(j)));
        let mut rjac = DMatrix::zeros(pairs.len(), self.layout.len());
        for (row, &(i, j)) in pairs.iter().enumerate() {
            if i == j {
                continue;
            }
            let (Some(ij), Some(ii), Some(jj)) = (pos(i, j), pos(i, i), pos(j, j)) else {
                continue;
            };
            let (sd, r) = ((c[(i, i)] * c[(j, j)]).sqrt(), correlation[(i, j)]);
            let d = jacobian.row(ij) / sd - (jacobian.row(ii) / c[(i, i)] + jacobian.row(jj) / c[(j, j)]) * (r / 2.0);
            rjac.row_mut(row).copy_from(&d);
        }
        let correlation_acov = &rjac * &self.acov * rjac.transpose();
        LatentMoments { pairs, covariance: c.clone(), covariance_acov, correlation, correlation_acov, jacobian }
    }

    /// Gradient of F at the estimates, recomputed (a check that callers and tests can use).
    pub fn gradient(&self, s: &DMatrix<f64>) -> Option<DVector<f64>> {
        let (k, _) = spd_inverse(&self.implied)?;
        let derivs = Derivatives::new(&self.layout, self.implied.nrows(), self.moments.latent_cov.nrows());
        Some(derivs.gradient(&self.moments, &k, s))
    }
}
