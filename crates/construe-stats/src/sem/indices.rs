//! Global fit of an ML SEM: chi-square, its p-value, RMSEA with its interval, CFI, TLI, SRMR,
//! all against the independence baseline (free variances, zero covariances). Central type:
//! `FitIndices`, the one fit-index record of the project (a `fit` block of results.json
//! serializes it). Cut-offs are never applied here; they are guidance for the report only.
//! Also owns the noncentral chi-square CDF the RMSEA interval needs.

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};
use statrs::function::gamma::{gamma_lr, ln_gamma};

use crate::StatsError;

/// Global fit statistics of one ML fit. Serialized with the field names of results.json's
/// `fit` blocks (`p` for the p-value, `rmsea_ci` as a two-element array), in this order.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitIndices {
    /// Likelihood-ratio statistic (n - 1) F_min.
    pub chisq: f64,
    /// p(p + 1)/2 minus the number of free parameters.
    pub df: usize,
    /// Upper-tail chi-square probability of `chisq` on `df`; 1 when df = 0.
    #[serde(rename = "p")]
    pub p_value: f64,
    /// Root mean square error of approximation; 0 when df = 0.
    pub rmsea: f64,
    /// 90% interval of RMSEA; (0, 0) when df = 0.
    pub rmsea_ci: (f64, f64),
    /// Comparative fit index; 1 when the baseline noncentrality is zero.
    pub cfi: f64,
    /// Tucker-Lewis index; 1 when df = 0 (nothing to penalise).
    pub tli: f64,
    /// Standardized root mean square residual over the p(p + 1)/2 distinct elements.
    pub srmr: f64,
}

/// The independence baseline model the incremental indices (CFI, TLI) compare with.
#[derive(Debug, Clone, PartialEq)]
pub struct BaselineFit {
    /// Chi-square of the independence baseline, (n - 1) (ln|diag S| - ln|S|).
    pub chisq: f64,
    /// Degrees of freedom of the baseline, p(p - 1)/2.
    pub df: usize,
}

/// Compute every index from the minimised discrepancy `f_min`, the sample covariance `s`, the
/// implied covariance `sigma`, the sample size `n` and the model's `df`; also returns the
/// independence baseline they were computed against.
/// chisq = (n - 1) F (Joreskog 1969); RMSEA = sqrt(max(chisq - df, 0) / (df (n - 1)))
/// (Steiger & Lind 1980) with the 90% interval of Browne & Cudeck (1993); CFI = 1 -
/// max(chisq - df, 0) / max(chisq0 - df0, chisq - df, 0) (Bentler 1990); TLI = (chisq0/df0 -
/// chisq/df) / (chisq0/df0 - 1) (Tucker & Lewis 1973); SRMR = sqrt(mean over i >= j of
/// ((s_ij - sigma_ij) / sqrt(s_ii s_jj))^2) (Joreskog & Sorbom 1981, residuals scaled by the
/// sample standard deviations, diagonal included).
pub fn fit_indices(
    f_min: f64,
    s: &DMatrix<f64>,
    sigma: &DMatrix<f64>,
    n: usize,
    df: usize,
) -> Result<(FitIndices, BaselineFit), StatsError> {
    let p = s.nrows();
    let nm1 = (n as f64) - 1.0;
    // F is non-negative at a minimum; a tiny negative value is round-off of a saturated fit.
    let chisq = (nm1 * f_min).max(0.0);
    let ln_det_s = s
        .clone()
        .cholesky()
        .ok_or_else(|| StatsError::Singular { what: "sample covariance matrix".into() })?
        .l()
        .diagonal()
        .iter()
        .map(|d| 2.0 * d.ln())
        .sum::<f64>();
    let ln_det_diag: f64 = s.diagonal().iter().map(|d| d.ln()).sum();
    let baseline_chisq = nm1 * (ln_det_diag - ln_det_s);
    let baseline_df = p * (p - 1) / 2;
    let dff = df as f64;
    let (p_value, rmsea, rmsea_ci) = if df == 0 {
        (1.0, 0.0, (0.0, 0.0))
    } else {
        let chi = ChiSquared::new(dff).map_err(|e| StatsError::InvalidInput(e.to_string()))?;
        let rmsea = ((chisq - dff).max(0.0) / (dff * nm1)).sqrt();
        (chi.sf(chisq), rmsea, rmsea_interval(chisq, df, n, 0.90)?)
    };
    let d_model = (chisq - dff).max(0.0);
    let d_base = (baseline_chisq - baseline_df as f64).max(d_model);
    let cfi = if d_base > 0.0 { 1.0 - d_model / d_base } else { 1.0 };
    let tli = if df == 0 || baseline_df == 0 {
        1.0
    } else {
        let r0 = baseline_chisq / baseline_df as f64;
        (r0 - chisq / dff) / (r0 - 1.0)
    };
    let mut sum = 0.0;
    for j in 0..p {
        for i in j..p {
            let r = (s[(i, j)] - sigma[(i, j)]) / (s[(i, i)] * s[(j, j)]).sqrt();
            sum += r * r;
        }
    }
    let srmr = (sum / (p * (p + 1) / 2) as f64).sqrt();
    Ok((
        FitIndices { chisq, df, p_value, rmsea, rmsea_ci, cfi, tli, srmr },
        BaselineFit { chisq: baseline_chisq, df: baseline_df },
    ))
}

/// Two-sided `level` interval of RMSEA (Browne & Cudeck 1993; Steiger & Lind 1980): find the
/// noncentralities lambda_lo, lambda_hi with P(X <= chisq | df, lambda) = (1 + level)/2 and
/// (1 - level)/2 for X noncentral chi-square (0 where the central CDF already falls below the
/// target), then RMSEA = sqrt(lambda / (df (n - 1))).
pub fn rmsea_interval(chisq: f64, df: usize, n: usize, level: f64) -> Result<(f64, f64), StatsError> {
    if df == 0 || n < 2 || !(0.0..1.0).contains(&level) {
        return Err(StatsError::InvalidInput(format!(
            "rmsea interval needs df > 0, n > 1 and a level in (0, 1), got df {df}, n {n}, level {level}"
        )));
    }
    let scale = df as f64 * (n as f64 - 1.0);
    let lo = noncentrality_for(chisq, df as f64, 0.5 + level / 2.0)?;
    let hi = noncentrality_for(chisq, df as f64, 0.5 - level / 2.0)?;
    Ok(((lo / scale).sqrt(), (hi / scale).sqrt()))
}

/// The noncentrality lambda >= 0 with ncx2_cdf(x, df, lambda) = target, or 0 if even lambda = 0
/// gives a CDF below the target. The CDF falls monotonically in lambda with derivative
/// dF/dlambda = -(F(x; df, lambda) - F(x; df + 2, lambda)) / 2 (Johnson, Kotz & Balakrishnan
/// 1995, eq. 29.16), which the same Poisson sum yields; so the root is bracketed by doubling
/// and then found by Newton steps, falling back to bisection whenever a step leaves the
/// bracket, to a relative width of 1e-12 (a handful of CDFs instead of some fifty bisections).
fn noncentrality_for(x: f64, df: f64, target: f64) -> Result<f64, StatsError> {
    if ncx2_cdf(x, df, 0.0) <= target {
        return Ok(0.0);
    }
    let (mut lo, mut hi) = (0.0, x.max(1.0));
    let mut doublings = 0;
    let (mut f_hi, _) = ncx2_cdf_pair(x, df, hi);
    while f_hi > target {
        lo = hi;
        hi *= 2.0;
        doublings += 1;
        if doublings > 200 {
            return Err(StatsError::NoConvergence { what: "rmsea interval bracket".into(), iterations: doublings });
        }
        f_hi = ncx2_cdf_pair(x, df, hi).0;
    }
    let mut lambda = 0.5 * (lo + hi);
    for _ in 0..200 {
        let (f, f_next) = ncx2_cdf_pair(x, df, lambda);
        if f > target {
            lo = lambda;
        } else {
            hi = lambda;
        }
        let slope = -(f - f_next) / 2.0;
        let newton = lambda - (f - target) / slope;
        let next = if slope < 0.0 && newton > lo && newton < hi { newton } else { 0.5 * (lo + hi) };
        let converged = (next - lambda).abs() <= 1e-12 * next.max(1e-300) || hi - lo <= 1e-12 * hi.max(1e-300);
        lambda = next;
        if converged {
            break;
        }
    }
    Ok(lambda)
}

/// CDF of the noncentral chi-square with `df` degrees of freedom and noncentrality `lambda`
/// at `x`, as the Poisson(lambda/2) mixture of central chi-square CDFs (Johnson, Kotz &
/// Balakrishnan 1995, eq. 29.2). See `ncx2_cdf_pair`.
pub fn ncx2_cdf(x: f64, df: f64, lambda: f64) -> f64 {
    ncx2_cdf_pair(x, df, lambda).0
}

/// F(x; df, lambda) and F(x; df + 2, lambda) from one Poisson sum. Terms are summed outward
/// from the Poisson mode until their weights fall below 1e-17, so large noncentralities cost
/// O(sqrt(lambda)) terms. The central CDFs P(a + j, x/2) come from one regularized incomplete
/// gamma at the mode and the recurrence P(a + 1, y) = P(a, y) - y^a e^-y / Gamma(a + 1)
/// (Abramowitz & Stegun 1964, 6.5.21); the Poisson weights by w_(j+1) = w_j h / (j + 1), and
/// the gaps y^a e^-y / Gamma(a + 1) in logarithms (ln y - ln(a + 1) per step), which cannot
/// underflow to a zero that a plain product recurrence would then never leave.
fn ncx2_cdf_pair(x: f64, df: f64, lambda: f64) -> (f64, f64) {
    if x <= 0.0 {
        return (0.0, 0.0);
    }
    let (a0, y) = (df / 2.0, x / 2.0);
    let half = lambda / 2.0;
    let ln_y = y.ln();
    let ln_gap = |a: f64| a * ln_y - y - ln_gamma(a + 1.0);
    if half == 0.0 {
        let p = gamma_lr(a0, y);
        return (p, (p - ln_gap(a0).exp()).max(0.0));
    }
    let mode = half.floor();
    let w_mode = (-half + mode * half.ln() - ln_gamma(mode + 1.0)).exp();
    let ln_gap_mode = ln_gap(a0 + mode);
    let p_mode = gamma_lr(a0 + mode, y);
    let (mut total, mut total_next) = (0.0, 0.0);
    // Upwards from the mode: P_j = P(a0 + j, y), and P_(j+1) = P_j - gap(a0 + j).
    let (mut j, mut p, mut w, mut lg) = (mode, p_mode, w_mode, ln_gap_mode);
    loop {
        let p_next = (p - lg.exp()).max(0.0);
        total += w * p;
        total_next += w * p_next;
        if (w < 1e-17 && j > mode) || j > mode + 1e6 {
            break;
        }
        w *= half / (j + 1.0);
        lg += ln_y - (a0 + j + 1.0).ln();
        (p, j) = (p_next, j + 1.0);
    }
    // Downwards: P_(j-1) = P_j + gap(a0 + j - 1), gap(a - 1) = gap(a) (a / y).
    let (mut j, mut p, mut w, mut lg) = (mode, p_mode, w_mode, ln_gap_mode);
    while j >= 1.0 {
        lg += (a0 + j).ln() - ln_y;
        let p_prev = (p + lg.exp()).min(1.0);
        w *= j / half;
        j -= 1.0;
        total += w * p_prev;
        total_next += w * p;
        p = p_prev;
        if w < 1e-17 {
            break;
        }
    }
    (total.clamp(0.0, 1.0), total_next.clamp(0.0, 1.0))
}

#[cfg(test)]
mod tests {
    use super::*;

    // One record for every `fit` block of results.json: its field names and order there
    // (`p`, not `p_value`; `rmsea_ci` a two-element array) are what scripts read.
    #[test]
    fn fit_indices_serialize_as_the_results_fit_block() {
        let s = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.4, 0.5, 1.0, 0.3, 0.4, 0.3, 1.0]);
        let sigma = DMatrix::from_row_slice(3, 3, &[1.0, 0.45, 0.45, 0.45, 1.0, 0.35, 0.45, 0.35, 1.0]);
        let (ix, baseline) = fit_indices(0.02, &s, &sigma, 300, 2).unwrap();
        assert_eq!(baseline.df, 3);
        let json = serde_json::to_value(&ix).unwrap();
        let keys: Vec<&str> = json.as_object().unwrap().keys().map(String::as_str).collect();
        assert_eq!(keys, ["chisq", "df", "p", "rmsea", "rmsea_ci", "cfi", "tli", "srmr"]);
        assert_eq!(json["rmsea_ci"], serde_json::json!([ix.rmsea_ci.0, ix.rmsea_ci.1]));
        assert_eq!(json["p"], serde_json::json!(ix.p_value));
        let back: FitIndices = serde_json::from_value(json).unwrap();
        assert_eq!(back, ix);
    }

    #[test]
    fn noncentral_cdf_matches_scipy() {
        // scipy 1.17.1 scipy.stats.ncx2.cdf(x, df, nc), printed to 12 digits.
        let cases = [
            (10.0, 5.0, 3.0, 0.717_236_846_431),
            (40.0, 12.0, 20.0, 0.794_420_580_234),
            (600.0, 400.0, 150.0, 0.906_740_284_691),
        ];
        for (x, df, nc, want) in cases {
            let got = ncx2_cdf(x, df, nc);
            assert!((got - want).abs() < 1e-9, "ncx2({x},{df},{nc}) = {got}, want {want}");
        }
    }
}
