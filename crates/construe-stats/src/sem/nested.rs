//! The chi-square difference test of two nested models fitted to the same moments: a
//! restricted model (more df) against a more general one. Central function: `difference`,
//! returning a `NestedTest`.
//!
//! - Without corrections (normal-theory ML): T_d = T_0 - T_1 on d_0 - d_1 df, the likelihood
//!   ratio of the two models (Steiger, Shapiro & Browne 1985).
//! - With corrected statistics (ML with sandwich SEs, or DWLS; `robust::Correction`): the
//!   scaled difference of Satorra & Bentler (2001), T_d = (T_0 - T_1) / c_d with
//!   c_d = (d_0 c_0 - d_1 c_1) / (d_0 - d_1) and c_i = tr(U_i V) / d_i, so
//!   d_i c_i = tr(U_i V): the difference's asymptotic mean over its df. For DWLS the weight
//!   (the inverse sampling variances) is the same for both models, so the difference of the
//!   naive statistics is a quadratic form of the residuals with mean tr(U_0 V) - tr(U_1 V),
//!   and the same scaling applies. In small samples c_d can come out at or below zero (Satorra
//!   & Bentler 2010); then the restricted model's c_0 is used, which the record says.

use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::fit::SemFit;
use super::robust::Correction;
use crate::StatsError;

/// How the difference statistic was formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DifferenceMethod {
    /// T_0 - T_1, normal-theory likelihood ratio.
    LikelihoodRatio,
    /// (T_0 - T_1) / c_d, Satorra & Bentler (2001).
    ScaledDifference,
    /// c_d was not positive; the restricted model's scaling c_0 was used instead.
    ScaledByRestricted,
}

/// A chi-square difference test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NestedTest {
    /// The difference statistic (never below zero).
    pub chisq: f64,
    /// d_0 - d_1.
    pub df: usize,
    /// Upper chi-square tail of `chisq` on `df`; `None` when df = 0 (nothing restricted).
    pub p: Option<f64>,
    pub method: DifferenceMethod,
    /// The scaling c_d the naive difference was divided by (1 for the likelihood ratio).
    pub scale: f64,
}

/// One fitted model and, for robust estimation, the correction of its statistic.
#[derive(Debug, Clone, Copy)]
pub struct Fitted<'a> {
    pub fit: &'a SemFit,
    pub correction: Option<&'a Correction>,
}

impl Fitted<'_> {
    /// The uncorrected statistic: the correction's, or the fit's own (normal-theory ML).
    fn naive(&self) -> f64 {
        self.correction.map_or(self.fit.indices.chisq, |c| c.naive)
    }
}

/// Tests `restricted` against `general`, both fitted to the same moments with the same
/// estimator (both corrected or neither). The restricted model must have at least as many df.
pub fn difference(restricted: Fitted<'_>, general: Fitted<'_>) -> Result<NestedTest, StatsError> {
    let (d0, d1) = (restricted.fit.df, general.fit.df);
    if d0 < d1 {
        return Err(StatsError::InvalidInput(format!(
            "the restricted model has fewer df ({d0}) than the general one ({d1})"
        )));
    }
    if restricted.fit.n != general.fit.n {
        return Err(StatsError::SizeMismatch {
            what: "sample size of the general model",
            expected: restricted.fit.n,
            found: general.fit.n,
        });
    }
    let df = d0 - d1;
    let raw = (restricted.naive() - general.naive()).max(0.0);
    let (scale, method) = match (restricted.correction, general.correction) {
        (None, None) => (1.0, DifferenceMethod::LikelihoodRatio),
        (Some(c0), Some(c1)) => {
            let cd = if df == 0 { 0.0 } else { (c0.trace - c1.trace) / df as f64 };
            if cd > 0.0 && cd.is_finite() {
                (cd, DifferenceMethod::ScaledDifference)
            } else {
                let c = if d0 == 0 || c0.trace <= 0.0 { 1.0 } else { c0.trace / d0 as f64 };
                (c, DifferenceMethod::ScaledByRestricted)
            }
        }
        _ => {
            return Err(StatsError::InvalidInput(
                "a difference test needs both models' statistics corrected, or neither".into(),
            ));
        }
    };
    let chisq = if df == 0 { raw } else { raw / scale };
    let p = if df == 0 {
        None
    } else {
        let dist = ChiSquared::new(df as f64).map_err(|e| StatsError::InvalidInput(e.to_string()))?;
        Some(1.0 - dist.cdf(chisq))
    };
    Ok(NestedTest { chisq, df, p, method, scale })
}

#[cfg(test)]
mod tests {
    use nalgebra::DMatrix;

    use super::*;
    use crate::acov::adf_covariances;
    use crate::sem::{FitOptions, Identification, SemModel, ml_sandwich};
    use crate::testkit;

    /// Four constructs, three items each: a -> c <- b (a collider between two exogenous
    /// constructs) and c -> d. Non-adjacent pairs: a-b, a-d, b-d.
    const PATHS: [(usize, usize); 3] = [(0, 2), (1, 2), (2, 3)];

    fn groups() -> Vec<Vec<usize>> {
        (0..4).map(|k| (3 * k..3 * k + 3).collect()).collect()
    }

    /// The population covariance of the items: latent B with paths 0.5, 0.4, 0.6 and unit
    /// (total) exogenous variances; loadings 0.8, 0.7, 0.6; error variances 1 - loading^2
    /// plus 0.1.
    fn population() -> DMatrix<f64> {
        let mut b = DMatrix::zeros(4, 4);
        for (&(from, to), coef) in PATHS.iter().zip([0.5, 0.4, 0.6]) {
            b[(to, from)] = coef;
        }
        let a = (DMatrix::identity(4, 4) - b).try_inverse().unwrap();
        let psi = DMatrix::identity(4, 4);
        let phi = &a * psi * a.transpose();
        let mut lambda = DMatrix::zeros(12, 4);
        let mut theta = DMatrix::zeros(12, 12);
        for k in 0..4 {
            for (j, l) in [0.8, 0.7, 0.6].into_iter().enumerate() {
                lambda[(3 * k + j, k)] = l;
                theta[(3 * k + j, 3 * k + j)] = 1.0 - l * l + 0.1;
            }
        }
        testkit::factor_cov(&lambda, &phi, &theta)
    }

    // The df identity of the claims test: the DAG's model has the measurement model's df plus
    // one per non-adjacent pair, under both identifications; `sem` (free exogenous
    // covariances) has one fewer here (a-b is not restricted).
    #[test]
    fn dag_model_df_is_measurement_df_plus_non_adjacent_pairs() {
        let s = population();
        for ident in [Identification::UnitLatentVariance, Identification::UnitFirstLoading] {
            let cfa = SemModel::cfa(&groups(), 12, ident).unwrap().fit(&s, 500, &FitOptions::default()).unwrap();
            let dag =
                SemModel::dag(&groups(), 12, ident, &PATHS).unwrap().fit(&s, 500, &FitOptions::default()).unwrap();
            let old =
                SemModel::sem(&groups(), 12, ident, &PATHS).unwrap().fit(&s, 500, &FitOptions::default()).unwrap();
            assert_eq!(dag.df, cfa.df + 3, "{ident:?}");
            assert_eq!(old.df, cfa.df + 2, "{ident:?}");
            // The population satisfies the DAG: both fit it exactly.
            assert!(dag.indices.chisq < 1e-6 && cfa.indices.chisq < 1e-6, "{ident:?}");
            let test =
                difference(Fitted { fit: &dag, correction: None }, Fitted { fit: &cfa, correction: None }).unwrap();
            assert_eq!(test.df, 3);
            assert!(test.p.unwrap() > 0.999);
        }
        // An isolated construct: covariances with all others fixed at zero.
        let lone = SemModel::dag(&groups(), 12, Identification::UnitLatentVariance, &[(0, 1)]).unwrap();
        let cfa = SemModel::cfa(&groups(), 12, Identification::UnitLatentVariance).unwrap();
        assert_eq!(lone.layout().unwrap().len(), cfa.layout().unwrap().len() - 6 + 1);
        assert!(SemModel::dag(&groups(), 12, Identification::UnitLatentVariance, &[(0, 1), (1, 0)]).is_err());
        assert!(SemModel::dag(&groups(), 12, Identification::UnitLatentVariance, &[(0, 1), (1, 2), (2, 0)]).is_err());
    }

    // A construct with two items whose only link is a path (a, item 0 left out) still fits:
    // the paths' starting values come from the latents' regressions, not zero.
    #[test]
    fn two_indicator_exogenous_construct_fits_in_a_dag() {
        let s = population().remove_row(0).remove_column(0);
        let groups: Vec<Vec<usize>> = vec![vec![0, 1], vec![2, 3, 4], vec![5, 6, 7], vec![8, 9, 10]];
        let fit = SemModel::dag(&groups, 11, Identification::UnitLatentVariance, &PATHS)
            .unwrap()
            .fit(&s, 500, &FitOptions::default())
            .unwrap();
        assert!(fit.converged && fit.indices.chisq < 1e-6, "{:?}", fit.indices);
    }

    // A missing edge that is false: a and b correlated 0.5 in the population, the DAG says
    // independent; the difference test rejects at n = 500.
    #[test]
    fn difference_rejects_a_false_independence() {
        let mut s = population();
        // Add a common shift making items of a and b covary (0.5 x loadings).
        for i in 0..3 {
            for j in 3..6 {
                let l = [0.8, 0.7, 0.6];
                let c = 0.3 * l[i] * l[j - 3];
                s[(i, j)] += c;
                s[(j, i)] += c;
            }
        }
        let cfa = SemModel::cfa(&groups(), 12, Identification::UnitLatentVariance)
            .unwrap()
            .fit(&s, 500, &FitOptions::default())
            .unwrap();
        let dag = SemModel::dag(&groups(), 12, Identification::UnitLatentVariance, &PATHS)
            .unwrap()
            .fit(&s, 500, &FitOptions::default())
            .unwrap();
        let t = difference(Fitted { fit: &dag, correction: None }, Fitted { fit: &cfa, correction: None }).unwrap();
        assert!(t.p.unwrap() < 1e-3, "{t:?}");
        assert!(difference(Fitted { fit: &cfa, correction: None }, Fitted { fit: &dag, correction: None }).is_err());
    }

    /// Share of `reps` replicates (n rows from the true DAG) whose difference test rejects at
    /// 0.05: normal-theory likelihood ratio and the Satorra-Bentler scaled difference of the ML
    /// sandwich fits (distribution-free sampling covariance, Browne 1984).
    fn rejection_rates(reps: u64, n: usize, seed: u64) -> (f64, f64) {
        let sigma = population();
        let (mut lr, mut scaled) = (0usize, 0usize);
        let ident = Identification::UnitLatentVariance;
        let cfa = SemModel::cfa(&groups(), 12, ident).unwrap();
        let dag = SemModel::dag(&groups(), 12, ident, &PATHS).unwrap();
        for r in 0..reps {
            let mut rng = testkit::seeded(seed + r);
            let x = testkit::draw_normal(&sigma, n, &mut rng);
            let s = testkit::sample_cov(&x);
            let f1 = cfa.fit(&s, n, &FitOptions::default()).unwrap();
            let f0 = dag.fit(&s, n, &FitOptions::default()).unwrap();
            let t = difference(Fitted { fit: &f0, correction: None }, Fitted { fit: &f1, correction: None }).unwrap();
            lr += usize::from(t.p.unwrap() < 0.05);
            let v = adf_covariances(&x).unwrap();
            let r1 = ml_sandwich(&f1, &s, &v).unwrap();
            let r0 = ml_sandwich(&f0, &s, &v).unwrap();
            let t = difference(
                Fitted { fit: &r0.fit, correction: Some(&r0.correction) },
                Fitted { fit: &r1.fit, correction: Some(&r1.correction) },
            )
            .unwrap();
            scaled += usize::from(t.p.unwrap() < 0.05);
        }
        (lr as f64 / reps as f64, scaled as f64 / reps as f64)
    }

    // Short calibration: 120 replicates at n = 400; the size at 0.05 at most 0.116 (the upper
    // 99.9% binomial bound at 0.05, 0.05 + 3.3 sqrt(0.05 0.95 / 120)) and at least one
    // rejection (none has probability 0.95^120 = 0.002).
    #[test]
    fn difference_test_size_short() {
        let (lr, scaled) = rejection_rates(120, 400, 19_001);
        assert!((0.008..=0.116).contains(&lr), "likelihood ratio size {lr}");
        assert!((0.008..=0.116).contains(&scaled), "scaled difference size {scaled}");
    }

    // Long calibration (acceptance of issue 19): 500 replicates at n = 500, size in [0.03, 0.07].
    // cargo test --release -p construe-stats difference_test_size_long -- --ignored --nocapture
    #[test]
    #[ignore]
    fn difference_test_size_long() {
        let (lr, scaled) = rejection_rates(500, 500, 19_500);
        println!("claims test size at 0.05, 500 replicates, n = 500: likelihood ratio {lr:.3}, scaled {scaled:.3}");
        assert!((0.03..=0.07).contains(&lr), "likelihood ratio size {lr}");
        assert!((0.03..=0.07).contains(&scaled), "scaled difference size {scaled}");
    }
}
