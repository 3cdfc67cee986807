//! Conditional-independence tests of rho(i, j | S) = 0 among variables (latent constructs):
//! the Fisher-z test on a covariance at sample size n, the delta-method Wald test that carries
//! the estimation uncertainty of a latent covariance (the asymptotic covariance of its vech),
//! and a d-separation oracle for tests. Central trait: `CiTest`.
//! Vech convention everywhere: column-major lower triangle (0,0), (1,0), ..., (m-1,0), (1,1), ...
//! Never looks at data rows; never decides alpha (the search does).

use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};
use statrs::function::erf::erfc;

use super::graph::Graph;
use crate::StatsError;

/// Outcome of one test: `stat` is a standard-normal statistic (signed like the partial
/// correlation), `p` its two-sided p-value, `partial` the estimated partial correlation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CiResult {
    pub stat: f64,
    pub p: f64,
    pub partial: f64,
}

/// A test of the conditional independence of variables i and j given the set s.
pub trait CiTest {
    /// Number of variables the test speaks about (indices `0..n_vars()`).
    fn n_vars(&self) -> usize;
    /// Tests i ⊥ j | s; i != j, neither in s, all indices below `n_vars()`.
    fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError>;
}

/// Position of element (i, j) of a symmetric m x m matrix in its vech, column-major lower
/// triangle: (0,0), (1,0), ..., (m-1,0), (1,1), (2,1), ... (Magnus & Neudecker 1980's vech).
/// Order of i and j does not matter.
pub fn vech_index(i: usize, j: usize, m: usize) -> usize {
    let (r, c) = if i >= j { (i, j) } else { (j, i) };
    // column c starts after columns 0..c, of lengths m, m - 1, ..., m - c + 1
    c * (2 * m + 1 - c) / 2 + (r - c)
}

/// The (row, column) pairs of the vech of an m x m matrix in order, row >= column; this is the
/// `pairs` argument the SEM engine's latent-covariance Jacobian takes to produce the rows of
/// the asymptotic covariance `WaldPartial` expects.
pub fn vech_pairs(m: usize) -> Vec<(usize, usize)> {
    let mut out = Vec::with_capacity(m * (m + 1) / 2);
    for c in 0..m {
        for r in c..m {
            out.push((r, c));
        }
    }
    out
}

/// Normal-theory asymptotic covariance of the vech of a sample covariance at sample size n:
/// acov(s_ij, s_kl) = (c_ik c_jl + c_il c_jk) / n (Browne 1974; Anderson 2003, section 3.4, numbering from memory).
pub fn normal_theory_acov(c: &DMatrix<f64>, n: f64) -> DMatrix<f64> {
    let m = c.nrows();
    let pairs = vech_pairs(m);
    let q = pairs.len();
    let mut g = DMatrix::zeros(q, q);
    for (u, &(i, j)) in pairs.iter().enumerate() {
        for (v, &(k, l)) in pairs.iter().enumerate() {
            g[(u, v)] = (c[(i, k)] * c[(j, l)] + c[(i, l)] * c[(j, k)]) / n;
        }
    }
    g
}

/// Two-sided standard-normal p-value 2 (1 - Phi(|z|)) = erfc(|z| / sqrt 2), accurate in the
/// far tail (common practice).
pub fn two_sided_p(z: f64) -> f64 {
    erfc(z.abs() / std::f64::consts::SQRT_2)
}

fn check_indices(m: usize, i: usize, j: usize, s: &[usize]) -> Result<(), StatsError> {
    if i == j || i >= m || j >= m || s.iter().any(|&k| k >= m || k == i || k == j) {
        return Err(StatsError::InvalidInput(format!(
            "conditional-independence test of {i} and {j} given {s:?} over {m} variables"
        )));
    }
    Ok(())
}

/// Inverse of the submatrix of `c` on [i, j, s...] (the precision of that subvector).
fn sub_precision(c: &DMatrix<f64>, i: usize, j: usize, s: &[usize]) -> Result<(Vec<usize>, DMatrix<f64>), StatsError> {
    let idx: Vec<usize> = [i, j].into_iter().chain(s.iter().copied()).collect();
    let k = idx.len();
    let sub = DMatrix::from_fn(k, k, |a, b| c[(idx[a], idx[b])]);
    let p = sub.cholesky().map(|ch| ch.inverse()).ok_or_else(|| StatsError::Singular {
        what: "covariance of the variables in a conditional-independence test".into(),
    })?;
    Ok((idx, p))
}

/// Partial correlation rho(i, j | s) = -P_ij / sqrt(P_ii P_jj), P the inverse of the submatrix
/// of `c` on {i, j} ∪ s (Anderson 2003, section 2.5; Whittaker 1990; numbering from memory). `c` may be a
/// covariance or a correlation matrix (the result is scale invariant).
pub fn partial_correlation(c: &DMatrix<f64>, i: usize, j: usize, s: &[usize]) -> Result<f64, StatsError> {
    check_indices(c.nrows(), i, j, s)?;
    let (_, p) = sub_precision(c, i, j, s)?;
    Ok(-p[(0, 1)] / (p[(0, 0)] * p[(1, 1)]).sqrt())
}

/// Partial correlation r = rho(i, j | s) and its gradient with respect to vech(c) (column-major
/// lower triangle, length m(m+1)/2; an off-diagonal element moves c_kl and c_lk together).
/// With P the inverse of the submatrix on A = {i, j} ∪ s, dP = -P dC P, so
/// dP_ab/dc_kl = -(P_ak P_lb + P_al P_kb) off the diagonal and -P_ak P_kb on it, and
/// dr = -dP_ij / sqrt(P_ii P_jj) - (r / 2)(dP_ii / P_ii + dP_jj / P_jj) (delta method;
/// Magnus & Neudecker 1988). Elements outside A × A have zero gradient.
pub fn partial_correlation_gradient(
    c: &DMatrix<f64>,
    i: usize,
    j: usize,
    s: &[usize],
) -> Result<(f64, DVector<f64>), StatsError> {
    let m = c.nrows();
    check_indices(m, i, j, s)?;
    let (idx, p) = sub_precision(c, i, j, s)?;
    let (pii, pjj, pij) = (p[(0, 0)], p[(1, 1)], p[(0, 1)]);
    let root = (pii * pjj).sqrt();
    let r = -pij / root;
    let mut grad = DVector::zeros(m * (m + 1) / 2);
    let k = idx.len();
    for l in 0..k {
        for kk in l..k {
            let d = |a: usize, b: usize| {
                if kk == l { -p[(a, kk)] * p[(kk, b)] } else { -(p[(a, kk)] * p[(l, b)] + p[(a, l)] * p[(kk, b)]) }
            };
            let dr = -d(0, 1) / root - 0.5 * r * (d(0, 0) / pii + d(1, 1) / pjj);
            grad[vech_index(idx[kk], idx[l], m)] += dr;
        }
    }
    Ok((r, grad))
}

/// Fisher-z test of a partial correlation at sample size n: z = sqrt(n - |s| - 3) atanh(r),
/// two-sided p from the standard normal (Fisher 1924; common practice for the PC search,
/// Kalisch & Buhlmann 2007). Assumes a (near) normal sample covariance or correlation.
#[derive(Debug, Clone)]
pub struct FisherZ {
    cov: DMatrix<f64>,
    n: f64,
}

impl FisherZ {
    /// A test on covariance or correlation `cov` estimated from `n` observations.
    pub fn new(cov: DMatrix<f64>, n: f64) -> Result<Self, StatsError> {
        if !cov.is_square() {
            return Err(StatsError::SizeMismatch {
                what: "columns of the Fisher-z test's covariance for its rows",
                expected: cov.nrows(),
                found: cov.ncols(),
            });
        }
        if !n.is_finite() || n <= 0.0 {
            return Err(StatsError::InvalidInput(format!("Fisher-z test needs a positive sample size, got {n}")));
        }
        Ok(FisherZ { cov, n })
    }
}

impl CiTest for FisherZ {
    fn n_vars(&self) -> usize {
        self.cov.nrows()
    }

    fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError> {
        let r = partial_correlation(&self.cov, i, j, s)?;
        let df = self.n - s.len() as f64 - 3.0;
        if df <= 0.0 {
            return Err(StatsError::NotEnoughData {
                what: format!("a Fisher-z test given {} variables", s.len()),
                needed: s.len() + 4,
                found: self.n as usize,
            });
        }
        // clamp so that |r| = 1 from rounding gives a large finite statistic, not infinity
        let rc = r.clamp(-1.0 + 1e-15, 1.0 - 1e-15);
        let z = df.sqrt() * rc.atanh();
        Ok(CiResult { stat: z, p: two_sided_p(z), partial: r })
    }
}

/// Wald test of rho(i, j | s) = 0 on an estimated latent covariance C (m x m) with the
/// asymptotic covariance `acov` of vech(C) (m(m+1)/2 square, column-major lower triangle, see
/// `vech_pairs`): z = r / se with se^2 = g' acov g, g the gradient of r (delta method; Rao 1973;
/// Bollen 1989), two-sided p from the standard normal. This is how the estimation
/// uncertainty of the measurement model enters the search.
#[derive(Debug, Clone)]
pub struct WaldPartial {
    cov: DMatrix<f64>,
    acov: DMatrix<f64>,
}

impl WaldPartial {
    /// A test on latent covariance `cov` with asymptotic covariance `acov` of its vech.
    pub fn new(cov: DMatrix<f64>, acov: DMatrix<f64>) -> Result<Self, StatsError> {
        let m = cov.nrows();
        let q = m * (m + 1) / 2;
        let size = |what, expected, found| {
            if expected == found { Ok(()) } else { Err(StatsError::SizeMismatch { what, expected, found }) }
        };
        size("columns of the Wald test's covariance for its rows", m, cov.ncols())?;
        size("rows of the Wald test's acov for m(m + 1)/2 covariance elements", q, acov.nrows())?;
        size("columns of the Wald test's acov for m(m + 1)/2 covariance elements", q, acov.ncols())?;
        if cov.iter().chain(acov.iter()).any(|v| !v.is_finite()) {
            return Err(StatsError::InvalidInput("Wald test inputs contain a non-finite value".into()));
        }
        Ok(WaldPartial { cov, acov })
    }

    /// The delta-method standard error of rho(i, j | s) and the estimate itself.
    pub fn partial_and_se(&self, i: usize, j: usize, s: &[usize]) -> Result<(f64, f64), StatsError> {
        let (r, g) = partial_correlation_gradient(&self.cov, i, j, s)?;
        let nz: Vec<usize> = (0..g.len()).filter(|&u| g[u] != 0.0).collect();
        let mut var = 0.0;
        for &u in &nz {
            for &v in &nz {
                var += g[u] * self.acov[(u, v)] * g[v];
            }
        }
        if !var.is_finite() || var <= 0.0 {
            return Err(StatsError::Singular { what: "asymptotic variance of a partial correlation".into() });
        }
        Ok((r, var.sqrt()))
    }
}

impl CiTest for WaldPartial {
    fn n_vars(&self) -> usize {
        self.cov.nrows()
    }

    fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError> {
        let (r, se) = self.partial_and_se(i, j, s)?;
        let z = r / se;
        Ok(CiResult { stat: z, p: two_sided_p(z), partial: r })
    }
}

/// Perfect test from d-separation in a known DAG (Pearl 1988), for checking the search:
/// p = 1, stat = 0, partial = 0 when d-separated; p = 0, stat = 1, partial = 1 otherwise.
#[derive(Debug, Clone)]
pub struct DSepOracle {
    dag: Graph,
}

impl DSepOracle {
    /// An oracle for the directed part of `dag`.
    pub fn new(dag: Graph) -> Self {
        DSepOracle { dag }
    }
}

impl CiTest for DSepOracle {
    fn n_vars(&self) -> usize {
        self.dag.n()
    }

    fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError> {
        check_indices(self.dag.n(), i, j, s)?;
        let sep = self.dag.d_separated(i, j, s);
        let v = if sep { 0.0 } else { 1.0 };
        Ok(CiResult { stat: v, p: 1.0 - v, partial: v })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testkit::{linear_gaussian_cov, sample_cov_of_draws};
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    fn corr3(r12: f64, r13: f64, r23: f64) -> DMatrix<f64> {
        DMatrix::from_row_slice(3, 3, &[1.0, r12, r13, r12, 1.0, r23, r13, r23, 1.0])
    }

    #[test]
    fn vech_order_is_column_major_lower_triangle() {
        let pairs = vech_pairs(4);
        assert_eq!(&pairs[..5], &[(0, 0), (1, 0), (2, 0), (3, 0), (1, 1)]);
        for (u, &(r, c)) in pairs.iter().enumerate() {
            assert_eq!(vech_index(r, c, 4), u);
            assert_eq!(vech_index(c, r, 4), u);
        }
    }

    // First-order partial correlation r12.3 = (r12 - r13 r23) / sqrt((1 - r13^2)(1 - r23^2))
    // (Yule 1897; common practice), and the recursion to second order (Anderson 2003, section 2.5),
    // which uses no matrix inverse.
    #[test]
    fn partial_correlation_matches_recursion_formula() {
        let c = corr3(0.5, 0.3, 0.4);
        let want = (0.5 - 0.3 * 0.4) / ((1.0f64 - 0.09) * (1.0 - 0.16)).sqrt();
        assert!((partial_correlation(&c, 0, 1, &[2]).unwrap() - want).abs() < 1e-14);
        let sigma = linear_gaussian_cov(&super::super::graph::tests::random_dag(5, 0.7, 3), 4);
        let d = sigma.diagonal().map(|v| 1.0 / v.sqrt());
        let r = DMatrix::from_fn(5, 5, |a, b| sigma[(a, b)] * d[a] * d[b]);
        let p1 = |a: usize, b: usize| {
            (r[(a, b)] - r[(a, 2)] * r[(b, 2)]) / ((1.0 - r[(a, 2)].powi(2)) * (1.0 - r[(b, 2)].powi(2))).sqrt()
        };
        let want = (p1(0, 1) - p1(0, 3) * p1(1, 3)) / ((1.0 - p1(0, 3).powi(2)) * (1.0 - p1(1, 3).powi(2))).sqrt();
        let got = partial_correlation(&sigma, 0, 1, &[2, 3]).unwrap();
        assert!((got - want).abs() < 1e-12, "{got} vs {want}");
    }

    // Reference values from scipy 1.17.1 / numpy 2.4.6:
    // z = sqrt(n - k - 3) * arctanh(r), p = 2 * norm.sf(|z|).
    #[test]
    fn fisher_z_matches_scipy() {
        for (r, n, k, z, p) in [
            (0.3, 50.0, 0, 2.121959498469373, 0.03384113931494634),
            (-0.12, 200.0, 2, -1.6838224254200345, 0.09221599191489245),
            (0.05, 1000.0, 1, 1.579290337621643, 0.11426947710752894),
        ] {
            // a correlation matrix whose partial correlation of 0 and 1 given the
            // k independent others is exactly r
            let mut c = DMatrix::identity(2 + k, 2 + k);
            c[(0, 1)] = r;
            c[(1, 0)] = r;
            let s: Vec<usize> = (2..2 + k).collect();
            let t = FisherZ::new(c, n).unwrap().test(0, 1, &s).unwrap();
            // statrs' erfc agrees with scipy's to about 1e-10 relative
            assert!((t.stat - z).abs() < 1e-12 && (t.p / p - 1.0).abs() < 1e-9, "{t:?}");
        }
    }

    #[test]
    fn gradient_matches_central_differences() {
        let sigma = linear_gaussian_cov(&super::super::graph::tests::random_dag(5, 0.6, 8), 9);
        let pairs = vech_pairs(5);
        for s in [vec![], vec![2], vec![2, 4]] {
            let (_, g) = partial_correlation_gradient(&sigma, 0, 3, &s).unwrap();
            for (u, &(a, b)) in pairs.iter().enumerate() {
                let h = 1e-6;
                let bump = |sign: f64| {
                    let mut c = sigma.clone();
                    c[(a, b)] += sign * h;
                    if a != b {
                        c[(b, a)] += sign * h;
                    }
                    partial_correlation(&c, 0, 3, &s).unwrap()
                };
                let num = (bump(1.0) - bump(-1.0)) / (2.0 * h);
                assert!((num - g[u]).abs() < 1e-8, "s {s:?} elem {a},{b}: {num} vs {}", g[u]);
            }
        }
    }

    // With the normal-theory acov of a sample covariance at n, the delta-method variance of a
    // sample partial correlation is (1 - rho^2)^2 / n, the same as for a simple correlation
    // (Fisher 1924; Anderson 2003, section 4.3, from memory: the sample partial correlation given k
    // variables is distributed as a simple correlation from n - k observations).
    #[test]
    fn wald_se_under_normal_theory_is_one_minus_rho_squared_over_root_n() {
        for seed in 0..5u64 {
            let sigma = linear_gaussian_cov(&super::super::graph::tests::random_dag(6, 0.5, seed), seed);
            let n = 500.0;
            let w = WaldPartial::new(sigma.clone(), normal_theory_acov(&sigma, n)).unwrap();
            for s in [vec![], vec![1], vec![1, 4], vec![1, 2, 4]] {
                let (r, se) = w.partial_and_se(0, 5, &s).unwrap();
                let want = (1.0 - r * r) / n.sqrt();
                assert!((se - want).abs() < 1e-12 * want.max(1.0), "{se} vs {want}");
            }
        }
    }

    // Wald z on r and the Fisher z are first-order equivalent: atanh(r) = r + O(r^3) and
    // sqrt(n - k - 3) = sqrt(n) (1 + O(1/n)), while the Wald se is (1 - r^2)/sqrt(n) (above), so
    // under local alternatives r = O(n^-1/2) the two differ by O(n^-1/2) (Fisher 1924; Rao 1973,
    // 6e). Checked on simulated samples at n = 20000 with a true partial of about 0.015.
    #[test]
    fn wald_agrees_with_fisher_z_for_large_n() {
        // 0 <- 2 -> 1 plus a weak direct 0 -> 1, and 3 a child of 1
        let sigma = {
            let b = DMatrix::from_row_slice(
                4,
                4,
                &[
                    0.0, 0.0, 0.6, 0.0, //
                    0.015, 0.0, 0.5, 0.0, //
                    0.0, 0.0, 0.0, 0.0, //
                    0.0, 0.7, 0.0, 0.0,
                ],
            );
            let a = (DMatrix::identity(4, 4) - b).try_inverse().unwrap();
            &a * a.transpose()
        };
        let mut rng = ChaCha8Rng::seed_from_u64(17);
        let n = 20000usize;
        for _ in 0..5 {
            let s = sample_cov_of_draws(&sigma, n, &mut rng);
            let w = WaldPartial::new(s.clone(), normal_theory_acov(&s, n as f64)).unwrap();
            let f = FisherZ::new(s, n as f64).unwrap();
            for cond in [vec![2], vec![2, 3]] {
                let tw = w.test(0, 1, &cond).unwrap();
                let tf = f.test(0, 1, &cond).unwrap();
                println!("wald z {:.5} fisher z {:.5}", tw.stat, tf.stat);
                assert!((tw.stat - tf.stat).abs() < 0.01, "{tw:?} vs {tf:?}");
                assert!((tw.p - tf.p).abs() < 0.005);
            }
        }
    }

    // An acov taken from a known simulation (the Monte Carlo covariance of vech(S) over 2000
    // samples of n = 100, all elements, not only the diagonal) gives a Wald se close to both the
    // normal-theory value (1 - rho^2)/sqrt(n) and the Monte Carlo sd of the sample partial
    // correlation; tolerance 7% covers Monte Carlo error (about 1/sqrt(2 * 2000) = 1.6% per sd)
    // and the O(1/n) bias of the delta method (common practice, no single source).
    #[test]
    fn wald_with_simulated_acov_matches_monte_carlo_sd() {
        let dag = super::super::graph::tests::random_dag(4, 0.6, 21);
        let sigma = linear_gaussian_cov(&dag, 22);
        let mut rng = ChaCha8Rng::seed_from_u64(23);
        let (reps, n) = (2000usize, 100usize);
        let q = 10;
        let mut vechs = DMatrix::zeros(reps, q);
        let mut partials = Vec::with_capacity(reps);
        for rep in 0..reps {
            let s = sample_cov_of_draws(&sigma, n, &mut rng);
            for (u, &(a, b)) in vech_pairs(4).iter().enumerate() {
                vechs[(rep, u)] = s[(a, b)];
            }
            partials.push(partial_correlation(&s, 0, 3, &[1]).unwrap());
        }
        let mean = vechs.row_mean();
        let centred = DMatrix::from_fn(reps, q, |r, c| vechs[(r, c)] - mean[c]);
        let acov = centred.transpose() * &centred / (reps as f64 - 1.0);
        let w = WaldPartial::new(sigma.clone(), acov).unwrap();
        let (rho, se) = w.partial_and_se(0, 3, &[1]).unwrap();
        let pm = partials.iter().sum::<f64>() / reps as f64;
        let sd = (partials.iter().map(|r| (r - pm).powi(2)).sum::<f64>() / (reps as f64 - 1.0)).sqrt();
        let theory = (1.0 - rho * rho) / (n as f64).sqrt();
        println!("rho {rho:.4}: wald se {se:.5}, normal theory {theory:.5}, monte carlo sd {sd:.5}");
        assert!((se / theory - 1.0).abs() < 0.07, "se {se} theory {theory}");
        assert!((se / sd - 1.0).abs() < 0.07, "se {se} mc sd {sd}");
    }

    /// Rejection rate at alpha = 0.05 of the Wald test under a true null, with the acov that of
    /// a sample covariance at n estimated from the sample itself (plug-in normal theory).
    fn wald_type_one_rate(cases: usize, seed: u64) -> f64 {
        // 2 causes 0 and 1; 3 is a common child of 0 and 1: 0 ⊥ 1 | {2} holds, and so does
        // 2 ⊥ 3 | {0, 1}
        let b = DMatrix::from_row_slice(
            4,
            4,
            &[
                0.0, 0.0, 0.6, 0.0, //
                0.0, 0.0, 0.5, 0.0, //
                0.0, 0.0, 0.0, 0.0, //
                0.4, 0.3, 0.0, 0.0,
            ],
        );
        let a = (DMatrix::identity(4, 4) - b).try_inverse().unwrap();
        let sigma = &a * a.transpose();
        assert!(partial_correlation(&sigma, 0, 1, &[2]).unwrap().abs() < 1e-12);
        assert!(partial_correlation(&sigma, 2, 3, &[0, 1]).unwrap().abs() < 1e-12);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let n = 300usize;
        let mut rejections = 0usize;
        for case in 0..cases {
            let s = sample_cov_of_draws(&sigma, n, &mut rng);
            // (c_ik c_jl + c_il c_jk) / (n - 1) is the exact covariance of the unbiased sample
            // covariance under normality (moments of the Wishart distribution; Wishart 1928), here
            // with the sample's own S plugged in, as an estimation routine would supply it
            let w = WaldPartial::new(s.clone(), normal_theory_acov(&s, n as f64 - 1.0)).unwrap();
            let t = if case % 2 == 0 { w.test(0, 1, &[2]).unwrap() } else { w.test(2, 3, &[0, 1]).unwrap() };
            if t.p < 0.05 {
                rejections += 1;
            }
        }
        let rate = rejections as f64 / cases as f64;
        println!("wald type-I rate over {cases} null cases: {rate}");
        rate
    }

    // Short calibration: 100 null cases; the band [0.01, 0.11] is about +-2.7 binomial sds
    // around 0.05 (sd = sqrt(0.05 * 0.95 / 100) = 0.022).
    #[test]
    fn wald_type_one_rate_short() {
        let rate = wald_type_one_rate(100, 101);
        assert!((0.01..=0.11).contains(&rate), "rate {rate}");
    }

    // The project's acceptance check: 500 null cases, rate in [0.03, 0.07].
    // Measured (n = 300): 0.0533 over 80,000 cases (seeds 1-4 x 20,000; binomial sd 0.0008),
    // so the raw-r Wald test is slightly liberal at this n. A 500-case run has sd 0.010 and
    // leaves the band for some seeds: seeds 1-40 gave 0.032-0.068 (all inside), seed 500 gave
    // 0.072. Seed 1 (0.052) is used.
    // Run with: cargo test --release wald_type_one_rate_acceptance -- --ignored --nocapture
    #[test]
    #[ignore]
    fn wald_type_one_rate_acceptance() {
        let rate = wald_type_one_rate(500, 1);
        assert!((0.03..=0.07).contains(&rate), "rate {rate}");
    }

    #[test]
    fn inputs_are_validated() {
        let c = DMatrix::identity(3, 3);
        assert!(matches!(partial_correlation(&c, 0, 0, &[]), Err(StatsError::InvalidInput(_))));
        assert!(matches!(partial_correlation(&c, 0, 1, &[1]), Err(StatsError::InvalidInput(_))));
        assert!(matches!(
            WaldPartial::new(c.clone(), DMatrix::identity(5, 5)),
            Err(StatsError::SizeMismatch { found: 5, .. })
        ));
        assert!(matches!(
            FisherZ::new(DMatrix::identity(3, 2), 10.0),
            Err(StatsError::SizeMismatch { expected: 3, found: 2, .. })
        ));
        let f = FisherZ::new(c.clone(), 4.0).unwrap();
        assert!(matches!(f.test(0, 1, &[2]), Err(StatsError::NotEnoughData { .. })));
        let singular = DMatrix::from_element(3, 3, 1.0);
        assert!(matches!(partial_correlation(&singular, 0, 1, &[2]), Err(StatsError::Singular { .. })));
        let zero = WaldPartial::new(c.clone(), DMatrix::zeros(6, 6)).unwrap();
        assert!(matches!(zero.test(0, 1, &[]), Err(StatsError::Singular { .. })));
    }

    #[test]
    fn oracle_follows_d_separation() {
        let dag = Graph::from_directed(3, &[(0, 1), (2, 1)]);
        let o = DSepOracle::new(dag);
        assert_eq!(o.test(0, 2, &[]).unwrap().p, 1.0);
        assert_eq!(o.test(0, 2, &[1]).unwrap().p, 0.0);
    }
}
