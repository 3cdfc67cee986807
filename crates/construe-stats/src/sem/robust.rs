//! Estimation that does not lean on normally distributed items: diagonally weighted least
//! squares (DWLS) on a correlation matrix for ordinal and mixed items, and ML with sandwich
//! standard errors for continuous non-normal items, each with a corrected test statistic and
//! fit indices computed from it. Central function pair: `fit_dwls` and `ml_sandwich`, both
//! returning a `RobustFit` (a `SemFit` whose `acov`, SEs and `indices` are the robust ones,
//! plus the `Correction` that says how the statistic was corrected).
//! The moments' sampling covariance comes in through `acov::SamplingCovariance`; nothing
//! here knows how it was estimated.
//!
//! Parametrization of the correlation structure (DWLS). The matrices are those of
//! `SemModel` (Lambda, B, Psi, Theta; Sigma = Lambda (I - B)^-1 Psi (I - B)^-T Lambda' +
//! Theta), fitted to the off-diagonal correlations only: the unit diagonal of a correlation
//! matrix carries no information. Each item adds the equality constraint Sigma_ii(theta) = 1.
//! A free error variance is thereby Theta_ii = 1 - (Lambda C Lambda')_ii (C the implied latent
//! covariance), so Theta = I - diag(Lambda C Lambda'); an error variance fixed at 1 - r (a
//! single indicator of stated reliability r) turns the constraint into one on its loading and
//! the latent's variance. Latent paths B and the identification (unit latent or residual
//! variances, or unit first loadings) are as in ML. The constrained problem is solved by
//! Gauss-Newton steps on the Lagrange (KKT) system, and every standard error comes from the
//! bordered inverse, so the constraints are carried exactly (Silvey 1959; Lee & Bentler 1980).

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::fit::{FitOptions, SemFit, estimates, fit, heywood_cases};
use super::implied::{Implied, implied};
use super::indices::{BaselineFit, FitIndices, rmsea_interval};
use super::jacobian::{ml_weight, ml_weighted_jacobian, moment_jacobian};
use super::linalg::spd_inverse;
use super::model::{ParamLayout, SemModel};
use super::standardized::standardized;
use super::start::start_values;
use crate::StatsError;
use crate::acov::{Element, SamplingCovariance, all_elements, check_element};

/// How the test statistic was corrected.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum StatisticCorrection {
    /// None: the normal-theory likelihood-ratio statistic.
    None,
    /// Scaled: T / c with c = tr(U Gamma) / df (Satorra & Bentler 1994).
    Scaled,
    /// Mean-and-variance adjusted, scaled and shifted: a T + b with a = sqrt(df / tr((U Gamma)^2)),
    /// b = df - a tr(U Gamma), referred to chi-square on the model's df (Asparouhov & Muthén
    /// 2010; the mean-and-variance idea of Muthén, du Toit & Spisic 1997 with integer df).
    ScaledShifted,
}

/// The naive statistic and how it became the one the fit indices use.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Correction {
    pub kind: StatisticCorrection,
    /// The uncorrected statistic T (ML: (n - 1) F; DWLS: the weighted residual sum of squares
    /// with weights 1 / var(r_e)).
    pub naive: f64,
    /// tr(U Gamma): the statistic's asymptotic mean under the model.
    pub trace: f64,
    /// tr((U Gamma)^2): half its asymptotic variance (`None` where not needed).
    pub trace_squared: Option<f64>,
    /// a and b of corrected = max(a T + b, 0).
    pub scale: f64,
    pub shift: f64,
    /// The independence baseline's naive statistic and tr(U_B Gamma) (robust CFI, TLI).
    pub baseline_naive: f64,
    pub baseline_trace: f64,
}

/// A fit with robust standard errors and a corrected statistic.
#[derive(Debug, Clone, PartialEq)]
pub struct RobustFit {
    /// `acov` and the parameters' `se` are the sandwich ones; `indices` come from the corrected
    /// statistic (`robust_indices`); `baseline` holds the naive baseline statistic.
    pub fit: SemFit,
    pub correction: Correction,
}

/// A `SamplingCovariance` restricted to some of its items, renumbered 0..len: the moments of
/// the items a model uses, taken from the covariance step's whole matrix.
#[derive(Debug)]
pub struct Subset<'a> {
    inner: &'a dyn SamplingCovariance,
    index: Vec<usize>,
}

impl<'a> Subset<'a> {
    /// Item i of the subset is item `index[i]` of `inner`.
    pub fn new(inner: &'a dyn SamplingCovariance, index: Vec<usize>) -> Result<Self, StatsError> {
        let p = inner.n_items();
        if let Some(&bad) = index.iter().find(|&&i| i >= p) {
            return Err(StatsError::OutOfRange { what: "item", index: bad, len: p });
        }
        Ok(Subset { inner, index })
    }

    fn map(&self, elements: &[Element]) -> Result<Vec<Element>, StatsError> {
        elements
            .iter()
            .map(|&e| {
                check_element(self.index.len(), self.inner.is_correlation(), e)?;
                let (a, b) = (self.index[e.0], self.index[e.1]);
                Ok((a.min(b), a.max(b)))
            })
            .collect()
    }
}

impl SamplingCovariance for Subset<'_> {
    fn n_items(&self) -> usize {
        self.index.len()
    }

    fn n_obs(&self) -> usize {
        self.inner.n_obs()
    }

    fn is_correlation(&self) -> bool {
        self.inner.is_correlation()
    }

    fn block(&self, elements: &[Element]) -> Result<DMatrix<f64>, StatsError> {
        self.inner.block(&self.map(elements)?)
    }

    fn sandwich(&self, elements: &[Element], a: &DMatrix<f64>) -> Result<DMatrix<f64>, StatsError> {
        self.inner.sandwich(&self.map(elements)?, a)
    }

    fn rows(&self) -> Option<usize> {
        self.inner.rows()
    }

    fn contributions(
        &self,
        elements: &[Element],
        rows: std::ops::Range<usize>,
    ) -> Result<Option<DMatrix<f64>>, StatsError> {
        self.inner.contributions(&self.map(elements)?, rows)
    }
}

/// Fit indices from a corrected statistic T* = max(a T + b, 0) on `df` (a = 1/c, b = 0 for the
/// scaled statistic), with N the multiplier of the discrepancy in T (n - 1 for ML, n for DWLS).
/// - p: upper chi-square tail of T* on df.
/// - RMSEA (population-corrected robust RMSEA, Brosseau-Liard, Savalei & Li 2012; for the
///   scaled-and-shifted statistic Savalei 2018): sqrt(max(T - tr(U Gamma), 0) / (N df)), which
///   equals sqrt(max(T* - df, 0) / (a N df)); its 90% interval is that of the noncentrality of
///   T* (Browne & Cudeck 1993) divided by a N df.
/// - CFI (robust CFI, Brosseau-Liard & Savalei 2014): 1 - max(T - tr(U Gamma), 0) /
///   max(T_B - tr(U_B Gamma), T - tr(U Gamma), 0); TLI likewise: 1 - [(T - tr(U Gamma))/df] /
///   [(T_B - tr(U_B Gamma))/df_B].
pub fn robust_indices(
    correction: &Correction,
    df: usize,
    baseline_df: usize,
    n_scale: f64,
    srmr: f64,
) -> Result<FitIndices, StatsError> {
    let c = correction;
    let chisq = (c.scale * c.naive + c.shift).max(0.0);
    let dff = df as f64;
    let excess = (c.naive - c.trace).max(0.0);
    let (p_value, rmsea, rmsea_ci) = if df == 0 {
        (1.0, 0.0, (0.0, 0.0))
    } else {
        let chi = ChiSquared::new(dff).map_err(|e| StatsError::InvalidInput(e.to_string()))?;
        // rmsea_interval divides the noncentrality by df (n - 1); here by df N a.
        let (lo, hi) = rmsea_interval(chisq, df, 2, 0.90)?;
        let k = (n_scale * c.scale).sqrt();
        (chi.sf(chisq), (excess / (n_scale * dff)).sqrt(), (lo / k, hi / k))
    };
    let d_base = (c.baseline_naive - c.baseline_trace).max(0.0);
    let denominator = d_base.max(c.naive - c.trace).max(0.0);
    let cfi = if denominator > 0.0 { 1.0 - excess / denominator } else { 1.0 };
    let tli = if df == 0 || baseline_df == 0 || d_base <= 0.0 {
        1.0
    } else {
        1.0 - ((c.naive - c.trace) / dff) / ((c.baseline_naive - c.baseline_trace) / baseline_df as f64)
    };
    Ok(FitIndices { chisq, df, p_value, rmsea, rmsea_ci, cfi, tli, srmr })
}

/// The scaled-and-shifted a and b from tr(U Gamma) and tr((U Gamma)^2) (Asparouhov & Muthén 2010).
fn scaled_shifted(df: usize, trace: f64, trace_squared: f64) -> (f64, f64) {
    if df == 0 || trace_squared <= 0.0 {
        return (1.0, 0.0);
    }
    let a = (df as f64 / trace_squared).sqrt();
    (a, df as f64 - a * trace)
}

/// The Lagrange system [H C'; C 0] of a constrained Gauss-Newton step.
fn bordered(h: &DMatrix<f64>, c: &DMatrix<f64>) -> DMatrix<f64> {
    let (q, r) = (h.nrows(), c.nrows());
    let mut k = DMatrix::zeros(q + r, q + r);
    k.view_mut((0, 0), (q, q)).copy_from(h);
    k.view_mut((q, 0), (r, q)).copy_from(c);
    k.view_mut((0, q), (q, r)).copy_from(&c.transpose());
    k
}

/// One evaluation of the DWLS objective.
struct DwlsPoint {
    imp: Implied,
    /// r_e - rho_e(theta) over the off-diagonal elements.
    residual: DVector<f64>,
    /// Sigma_ii(theta) - 1.
    constraint: DVector<f64>,
    /// F = sum_e w_e residual_e^2.
    f: f64,
}

fn dwls_point(
    model: &SemModel,
    layout: &ParamLayout,
    values: &[f64],
    r: &DMatrix<f64>,
    elements: &[Element],
    w: &DVector<f64>,
) -> Option<DwlsPoint> {
    let imp = implied(&model.matrices(layout, values)).ok()?;
    let residual = DVector::from_iterator(elements.len(), elements.iter().map(|&(j, l)| r[(j, l)] - imp.sigma[(j, l)]));
    let f = residual.iter().zip(w.iter()).map(|(e, w)| w * e * e).sum::<f64>();
    let p = r.nrows();
    let constraint = DVector::from_fn(p, |i, _| imp.sigma[(i, i)] - 1.0);
    (f.is_finite() && constraint.iter().all(|c| c.is_finite())).then_some(DwlsPoint { imp, residual, constraint, f })
}

/// Diagonally weighted least squares on the correlation matrix `r` (unit diagonal) with the
/// sampling covariance `v` of its off-diagonal elements (Muthén, du Toit & Spisic 1997):
/// minimise F = sum_{j<l} (r_jl - rho_jl(theta))^2 / v_jl,jl subject to Sigma_ii(theta) = 1
/// (see the module doc for the parametrization). With Delta the Jacobian of rho, W = diag(1/v),
/// and P the parameter block of [Delta'W Delta  C'; C  0]^-1 (C the constraints' Jacobian):
/// - robust covariance of theta: P Delta'W V W Delta P (the sandwich; V through
///   `SamplingCovariance::sandwich`), which for P = (Delta'W Delta)^-1 is
///   (Delta'W Delta)^-1 Delta'W V W Delta (Delta'W Delta)^-1;
/// - naive statistic T = F (the weights already carry the sample size), U = W - W Delta P
///   Delta'W, and the scaled-and-shifted statistic a T + b on df = p(p - 1)/2 - (q - p)
///   (`StatisticCorrection::ScaledShifted`);
/// - baseline: all correlations zero, T_B = sum r^2 / v, tr(U_B V) = p(p - 1)/2;
/// - SRMR over the p(p + 1)/2 elements (the diagonal residuals are zero).
///
/// Starting values come from the ML fit to `r` (the same model), which is consistent for the
/// same parameters. The full block of V over the p(p - 1)/2 correlations is formed once for
/// tr((UV)^2); everything else uses its diagonal and the sandwich.
pub fn fit_dwls(
    model: &SemModel,
    r: &DMatrix<f64>,
    v: &dyn SamplingCovariance,
    options: &FitOptions,
) -> Result<RobustFit, StatsError> {
    fit_dwls_with(model, r, v, options, FULL_BLOCK_MAX)
}

/// Most correlations (k = p(p - 1)/2 of the model's items) for which `fit_dwls` forms the full
/// k x k block of V to compute tr((UV)^2) and the scaled-and-shifted statistic: 2,556 is 72
/// items (a 52 MB block; from respondents' contributions n k^2 operations). Above it the fit
/// uses only V's diagonal and the sandwich, and corrects the statistic by scaling
/// (`StatisticCorrection::Scaled`, T df / tr(UV): the mean-adjusted form of Satorra & Bentler
/// 1994 for the DWLS discrepancy), which the report then names.
pub const FULL_BLOCK_MAX: usize = 2_556;

/// The sampling variances of `elements`: from respondents' contributions in row chunks where
/// the covariance has rows (V's diagonal without its off-diagonal), else one element at a time.
pub fn sampling_variances(v: &dyn SamplingCovariance, elements: &[Element]) -> Result<DVector<f64>, StatsError> {
    let mut out = DVector::zeros(elements.len());
    if let Some(rows) = v.rows() {
        let chunk = 4096;
        let mut start = 0;
        while start < rows {
            let end = (start + chunk).min(rows);
            let Some(c) = v.contributions(elements, start..end)? else { break };
            for (e, x) in out.iter_mut().enumerate() {
                *x += c.column(e).norm_squared();
            }
            start = end;
        }
        if start >= rows {
            return Ok(out);
        }
    }
    for (e, &el) in elements.iter().enumerate() {
        out[e] = v.block(&[el])?[(0, 0)];
    }
    Ok(out)
}

/// `fit_dwls` with the full-block limit given (tests use it to exercise both paths).
pub fn fit_dwls_with(
    model: &SemModel,
    r: &DMatrix<f64>,
    v: &dyn SamplingCovariance,
    options: &FitOptions,
    full_block_max: usize,
) -> Result<RobustFit, StatsError> {
    let p = model.p();
    if r.nrows() != p || r.ncols() != p {
        return Err(StatsError::SizeMismatch {
            what: "correlation matrix rows for the model",
            expected: p,
            found: r.nrows(),
        });
    }
    if v.n_items() != p || !v.is_correlation() {
        return Err(StatsError::InvalidInput(format!(
            "DWLS needs the sampling covariance of the {p} items' correlations, got {} items{}",
            v.n_items(),
            if v.is_correlation() { "" } else { " of covariances" }
        )));
    }
    let n = v.n_obs();
    let layout = model.layout()?;
    let q = layout.len();
    let elements = all_elements(p, true);
    let k = elements.len();
    if q > k + p {
        return Err(StatsError::NotIdentified { free: q, moments: k + p });
    }
    let df = k + p - q;
    // The full block of V only where tr((UV)^2) is affordable (see `FULL_BLOCK_MAX`).
    let vfull = if k <= full_block_max { Some(v.block(&elements)?) } else { None };
    let w = match &vfull {
        Some(b) => DVector::from_fn(k, |e, _| 1.0 / b[(e, e)]),
        None => sampling_variances(v, &elements)?.map(|x| 1.0 / x),
    };
    if w.iter().any(|x| !x.is_finite() || *x <= 0.0) {
        return Err(StatsError::Singular { what: "sampling variances of the correlations".into() });
    }
    let diagonal: Vec<Element> = (0..p).map(|i| (i, i)).collect();
    let start = match &options.start {
        Some(s) if s.len() == q => s.clone(),
        _ => match fit(model, r, n.max(2), &FitOptions::default()) {
            Ok(f) => f.values,
            Err(_) => start_values(model, &layout, r),
        },
    };
    let not_identified =
        || StatsError::Singular { what: "DWLS normal equations (the model may not be identified)".into() };
    let mut values = start;
    let mut point = dwls_point(model, &layout, &values, r, &elements, &w)
        .ok_or_else(|| StatsError::Singular { what: "implied correlations at the starting values".into() })?;
    let (mut converged, mut iterations, mut penalty) = (false, 0usize, 0.0f64);
    let mut step_size;
    let system = |point: &DwlsPoint| {
        let delta = moment_jacobian(&layout, &point.imp, &elements);
        let cjac = moment_jacobian(&layout, &point.imp, &diagonal);
        let wd = DMatrix::from_fn(k, q, |e, t| w[e] * delta[(e, t)]);
        let h = delta.transpose() * &wd;
        (delta, cjac, wd, h)
    };
    loop {
        let (_, cjac, wd, h) = system(&point);
        let g = wd.transpose() * &point.residual;
        let mut rhs = DVector::zeros(q + p);
        rhs.rows_mut(0, q).copy_from(&g);
        rhs.rows_mut(q, p).copy_from(&(-&point.constraint));
        let sol = bordered(&h, &cjac).lu().solve(&rhs).ok_or_else(not_identified)?;
        let d = sol.rows(0, q).into_owned();
        let mu = sol.rows(q, p).into_owned();
        let violation = point.constraint.amax();
        step_size = d.iter().zip(&values).map(|(d, x)| d.abs() / (1.0 + x.abs())).fold(0.0, f64::max);
        if step_size < 1e-10 && violation < 1e-12 {
            converged = true;
            break;
        }
        if iterations >= options.max_iterations {
            break;
        }
        iterations += 1;
        // Merit F + nu |c|_1 with nu above the multipliers (an exact penalty; Han 1977).
        penalty = penalty.max(2.0 * mu.amax() + 1e-8);
        let merit = |pt: &DwlsPoint| pt.f + penalty * pt.constraint.iter().map(|c| c.abs()).sum::<f64>();
        let here = merit(&point);
        let mut alpha = 1.0;
        let mut accepted = None;
        for _ in 0..40 {
            let trial: Vec<f64> = values.iter().zip(d.iter()).map(|(x, d)| x + alpha * d).collect();
            if let Some(next) = dwls_point(model, &layout, &trial, r, &elements, &w)
                && merit(&next) <= here + 1e-13 * here.max(1.0)
            {
                accepted = Some((trial, next));
                break;
            }
            alpha *= 0.5;
        }
        let Some((trial, next)) = accepted else { break };
        values = trial;
        point = next;
    }
    let (delta, cjac, wd, h) = system(&point);
    let inverse = bordered(&h, &cjac).try_inverse().ok_or_else(not_identified)?;
    let pmat = inverse.view((0, 0), (q, q)).into_owned();
    let middle = v.sandwich(&elements, &wd)?;
    let acov = &pmat * &middle * &pmat;
    let (kind, trace, trace_squared, scale, shift) = match &vfull {
        Some(vfull) => {
            // U V = W V - W Delta P Delta'W V.
            let wv = DMatrix::from_fn(k, k, |a, b| w[a] * vfull[(a, b)]);
            let uv = &wv - (&wd * &pmat) * (wd.transpose() * vfull);
            let trace = uv.trace();
            let trace_squared = uv.component_mul(&uv.transpose()).sum();
            let (scale, shift) = scaled_shifted(df, trace, trace_squared);
            (StatisticCorrection::ScaledShifted, trace, Some(trace_squared), scale, shift)
        }
        None => {
            // tr(UV) = tr(WV) - tr(P Delta'W V W Delta) with tr(WV) = k (w = 1 / v_ee): the
            // diagonal of V and the sandwich suffice; the scaled statistic T df / tr(UV).
            let trace = k as f64 - (&pmat * &middle).trace();
            let scale = if df == 0 || trace <= 0.0 { 1.0 } else { df as f64 / trace };
            (StatisticCorrection::Scaled, trace, None, scale, 0.0)
        }
    };
    let baseline_naive: f64 = elements.iter().zip(w.iter()).map(|(&(j, l), w)| w * r[(j, l)].powi(2)).sum();
    let correction = Correction {
        kind,
        naive: point.f,
        trace,
        trace_squared,
        scale,
        shift,
        baseline_naive,
        baseline_trace: k as f64,
    };
    let srmr = (point.residual.norm_squared() / (p * (p + 1) / 2) as f64).sqrt();
    let indices = robust_indices(&correction, df, k, n as f64, srmr)?;
    let gradient = delta.transpose() * DVector::from_fn(k, |e, _| -2.0 * w[e] * point.residual[e]);
    let matrices = model.matrices(&layout, &values);
    let std = standardized(&matrices, &point.imp);
    let parameters = estimates(model, &layout, &matrices, &std, &acov);
    let heywood = heywood_cases(&parameters, &point.imp);
    Ok(RobustFit {
        fit: SemFit {
            converged,
            iterations,
            gradient_norm: gradient.amax(),
            decrement: step_size,
            discrepancy: point.f,
            n,
            df,
            indices,
            baseline: BaselineFit { chisq: baseline_naive, df: k },
            parameters,
            values,
            layout,
            acov,
            matrices,
            standardized: std,
            implied: point.imp.sigma.clone(),
            heywood,
            moments: point.imp,
        },
        correction,
    })
}

/// Sandwich standard errors and the Satorra-Bentler (1994) scaled statistic for an ML fit `ml`
/// of the sample covariance matrix `s`, with `v` the (distribution-free) sampling covariance
/// of the sample covariances, variances included (elements j <= l):
/// - acov = (Delta'W Delta)^-1 Delta'W V W Delta (Delta'W Delta)^-1, W the normal-theory ML
///   weight at the fitted Sigma (`jacobian::ml_weight`); under normality V = W^-1 / n and this
///   is the information-based covariance (Browne 1984; Satorra & Bentler 1994);
/// - U = W - W Delta (Delta'W Delta)^-1 Delta'W, trace = (n - 1) tr(U V), the scaled statistic
///   T / c with c = trace / df (Satorra & Bentler 1994), T = (n - 1) F the naive one;
/// - baseline (independence, Sigma_B = diag S): U_B is W_B on the covariances and zero on the
///   variances, so tr(U_B V) = sum_{j<l} v_jl,jl / (s_jj s_ll);
/// - indices by `robust_indices` with N = n - 1; SRMR as in the ML fit.
pub fn ml_sandwich(ml: &SemFit, s: &DMatrix<f64>, v: &dyn SamplingCovariance) -> Result<RobustFit, StatsError> {
    let p = ml.implied.nrows();
    if v.n_items() != p || v.is_correlation() {
        return Err(StatsError::InvalidInput(format!(
            "ML sandwich needs the sampling covariance of the {p} items' covariances, got {} items{}",
            v.n_items(),
            if v.is_correlation() { " of correlations" } else { "" }
        )));
    }
    let elements = all_elements(p, false);
    let k = elements.len();
    let (kinv, _) =
        spd_inverse(&ml.implied).ok_or_else(|| StatsError::Singular { what: "implied covariance matrix".into() })?;
    let delta = moment_jacobian(&ml.layout, &ml.moments, &elements);
    let wd = ml_weighted_jacobian(&ml.layout, &ml.moments, &kinv, &elements);
    let h = delta.transpose() * &wd;
    let hinv = spd_inverse(&h)
        .ok_or_else(|| StatsError::Singular { what: "ML information matrix (the model may not be identified)".into() })?
        .0;
    let middle = v.sandwich(&elements, &wd)?;
    let acov = &hinv * &middle * &hinv;
    let vfull = v.block(&elements)?;
    let mut trace_wv = 0.0;
    for a in 0..k {
        for b in 0..k {
            trace_wv += ml_weight(&kinv, elements[a], elements[b]) * vfull[(b, a)];
        }
    }
    let nm1 = ml.n as f64 - 1.0;
    let trace = nm1 * (trace_wv - (&hinv * &middle).trace());
    let df = ml.df;
    let scale = if df == 0 || trace <= 0.0 { 1.0 } else { df as f64 / trace };
    let baseline_trace = nm1
        * elements
            .iter()
            .enumerate()
            .filter(|(_, (j, l))| j != l)
            .map(|(e, &(j, l))| vfull[(e, e)] / (s[(j, j)] * s[(l, l)]))
            .sum::<f64>();
    let correction = Correction {
        kind: StatisticCorrection::Scaled,
        naive: ml.indices.chisq,
        trace,
        trace_squared: None,
        scale,
        shift: 0.0,
        baseline_naive: ml.baseline.chisq,
        baseline_trace,
    };
    let indices = robust_indices(&correction, df, ml.baseline.df, nm1, ml.indices.srmr)?;
    let mut fit = ml.clone();
    for e in &mut fit.parameters {
        e.se = e.free.map(|t| acov[(t, t)].sqrt());
    }
    fit.acov = acov;
    fit.indices = indices;
    Ok(RobustFit { fit, correction })
}

#[cfg(test)]
mod tests;
