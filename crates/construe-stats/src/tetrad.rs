//! Tetrad differences of a covariance matrix and their sampling tests (Spearman 1904;
//! Wishart 1928; Bollen & Ting 1993). Central type: `TetradTester`, which holds a covariance
//! (or correlation) matrix, its sample size and what its sampling theory needs: nothing more
//! for the Wishart test, the centred complete-case data for the raw-data delta test, or the
//! sampling covariance of the matrix's own estimates (`acov::SamplingCovariance`) for the delta
//! test on exactly the matrix that is fitted (polychoric, polyserial or Pearson).
//! Labelling for items (i, j, k, l), fixed everywhere: t1 = s_ij s_kl - s_ik s_jl,
//! t2 = s_ij s_kl - s_il s_jk, t3 = s_ik s_jl - s_il s_jk (= t2 - t1, so two are independent).
//! This module only measures and tests tetrads; it never decides which items are pure
//! (that is `purify` and `cluster`).

use std::collections::BTreeMap;
use std::sync::Arc;

use nalgebra::{DMatrix, Matrix4};
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF, Normal};

use super::StatsError;
use super::acov::{Element, SamplingCovariance, check_element};

/// The six off-diagonal pairs of a quad, as positions 0..4 in the quad's item order.
pub const PAIRS: [(usize, usize); 6] = [(0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3)];

/// For each tetrad w: indices into `PAIRS` of the two factors of its positive term, then of its
/// negative term. t1 = s01 s23 - s02 s13, t2 = s01 s23 - s03 s12, t3 = s02 s13 - s03 s12.
pub const TERMS: [[usize; 4]; 3] = [[0, 5, 1, 4], [0, 5, 2, 3], [1, 4, 2, 3]];

/// The 2 + 2 split of quad positions whose cross-covariance block has determinant t_w:
/// t1 = det S[{i,l},{j,k}], t2 = det S[{i,k},{j,l}], t3 = det S[{i,j},{k,l}].
/// A tetrad vanishes in the population when the two items of either side measure one latent
/// only through a common factor (Spirtes, Glymour & Scheines 2000, ch. 12); `purify` uses this.
pub const PARTITIONS: [([usize; 2], [usize; 2]); 3] = [([0, 3], [1, 2]), ([0, 2], [1, 3]), ([0, 1], [2, 3])];

/// Which sampling theory a tetrad test uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TetradTestKind {
    /// Multivariate-normal theory: Wishart's (1928) exact variance for a single tetrad, the
    /// normal-theory asymptotic covariance of the sample covariances for joint tests.
    Wishart,
    /// Distribution-free delta method from fourth-order sample moments of the raw scores
    /// (Bollen & Ting 1993), on their own Pearson covariance matrix.
    Delta,
    /// Delta method on a given matrix with a given sampling covariance of its off-diagonal
    /// estimates (`acov::SamplingCovariance`): Bollen & Ting's (1993) variance g' V g with V
    /// whatever the matrix's estimator calls for (distribution-free from respondents'
    /// contributions for polychoric, polyserial and non-normal Pearson correlations, or normal
    /// theory for a summary matrix).
    Sampling,
}

/// One tetrad difference: four item indices (in this order) and which of the three (0, 1, 2
/// for t1, t2, t3 in the module's labelling).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub struct Tetrad {
    pub items: [usize; 4],
    pub which: usize,
}

/// The test of one vanishing tetrad: H0 tau = 0, z = diff / se, two-sided normal p-value.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TetradTest {
    pub items: [usize; 4],
    /// 0, 1, 2 for t1, t2, t3.
    pub which: usize,
    /// The sample tetrad difference.
    pub diff: f64,
    /// Its estimated standard error.
    pub se: f64,
    /// z = diff / se.
    pub stat: f64,
    /// Two-sided p-value, 2 (1 - Phi(|z|)).
    pub p: f64,
}

/// Joint test that several tetrads vanish: chi-square = t' Omega^+ t with df = rank(Omega).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct JointTetradTest {
    pub tetrads: Vec<Tetrad>,
    pub diffs: Vec<f64>,
    pub stat: f64,
    pub df: usize,
    pub p: f64,
}

/// The three tetrad differences (t1, t2, t3) of `items` in a covariance or correlation matrix,
/// in the module's labelling (Spearman 1904's tetrad differences, written for covariances).
pub fn tetrad_differences(cov: &DMatrix<f64>, items: [usize; 4]) -> Result<[f64; 3], StatsError> {
    check_square(cov)?;
    check_items(cov.nrows(), items)?;
    Ok(differences(&submatrix(cov, items)))
}

/// Close-fit p-value of one tetrad: the test of H0 |tau| <= `tolerance` against |tau| >
/// `tolerance`, for a sample tetrad `diff` with standard error `se` and tau its population
/// value. This is the idea of the close-fit test of RMSEA (Browne & Cudeck 1993; MacCallum,
/// Browne & Sugawara 1996) applied to one tetrad: judge a constraint by whether its violation is
/// larger than a negligible size, not by whether it is exactly zero. With the sample tetrad
/// approximately N(tau, se^2), the probability of a |t| at least as large as the observed one is
/// largest on the boundary |tau| = tolerance, where |t| / se is a folded normal:
///
/// `p = Phi(-(|t| - tol) / se) + Phi(-(|t| + tol) / se)`,
///
/// the supremum of the rejection probability over the null (so the test holds its level for
/// every |tau| <= tol). `tolerance = 0` gives the usual two-sided p-value 2 (1 - Phi(|t| / se)).
/// Units: `diff`, `se` and `tolerance` in the units of the matrix's tetrads (correlation
/// products for a correlation matrix).
pub fn close_fit_p(diff: f64, se: f64, tolerance: f64) -> f64 {
    let normal = Normal::standard();
    let a = diff.abs();
    (normal.cdf(-(a - tolerance) / se) + normal.cdf(-(a + tolerance) / se)).min(1.0)
}

/// Wishart's (1928) exact sampling variance of one tetrad difference of the unbiased sample
/// covariance matrix (divisor N - 1) of N multivariate-normal rows, when the population
/// tetrad vanishes; `cov` is taken as the population matrix (plug in a sample one for a test).
///
/// Write the tetrad as the determinant of the cross block between the item pairs {a, b} and
/// {c, d} of `PARTITIONS`, let D_ab = s_aa s_bb - s_ab^2, D_cd likewise, D the determinant of
/// the 4 x 4 matrix of the quad, and nu = N - 1. Then
///
/// `var(t) = (nu - 1) / nu^2 * [ (nu + 2) / nu * D_ab * D_cd - D ]`.
///
/// This is the second moment of the cross-block determinant of a Wishart matrix
/// A ~ W(Sigma, nu), E T^2 = nu (nu - 1) [(nu + 2) D_ab D_cd - nu D] under the null, divided
/// by nu^4. Its leading term (D_ab D_cd - D) / N is the normal-theory delta-method variance;
/// its bracket is the one of the form commonly quoted after Wishart (1928) in the tetrad
/// literature, var = [ (N + 1)/(N - 1) D_ab D_cd - D ] / (N - 2), whose prefactor 1/(N - 2)
/// differs from (N - 2)/(N - 1)^2 by a factor 1 + O(1/N). The finite-sample constants used
/// here were checked against a 400 000-replicate numpy Monte Carlo at N = 8, 15, 50
/// (tests/reference/tetrad), which matches this form within Monte Carlo error and rejects the
/// quoted prefactor at small N (by some 35 % at N = 8). By Fischer's inequality D <= D_ab D_cd,
/// so the variance is positive for a positive-definite matrix. `n_obs` is N, at least 4.
pub fn wishart_variance(cov: &DMatrix<f64>, n_obs: usize, tetrad: Tetrad) -> Result<f64, StatsError> {
    check_square(cov)?;
    check_items(cov.nrows(), tetrad.items)?;
    check_which(tetrad.which)?;
    check_n(n_obs)?;
    let sub = submatrix(cov, tetrad.items);
    let var = wishart_var_sub(&sub, sub.determinant(), tetrad.which, n_obs);
    positive_variance(var, tetrad.items)
}

/// Tests of vanishing tetrads for one covariance matrix (see `TetradTestKind`).
///
/// Built once per matrix and shared by the callers that run many tests (`purify`, `cluster`);
/// every method validates its item indices and returns a `StatsError` instead of panicking.
#[derive(Debug, Clone)]
pub struct TetradTester {
    kind: TetradTestKind,
    cov: DMatrix<f64>,
    n_obs: usize,
    source: Source,
}

/// What the tester's sampling theory draws on besides the matrix.
#[derive(Debug, Clone)]
enum Source {
    /// Wishart kind: the matrix and n only.
    Matrix,
    /// Delta kind: each item's column of complete-case data minus its mean.
    Centred(Vec<Vec<f64>>),
    /// Sampling kind: the sampling covariance of the matrix's off-diagonal estimates, and what
    /// is asked of it once because a purification or cluster search tests most quads.
    Sampling { sampling: Arc<dyn SamplingCovariance>, cache: Cache },
}

/// What the Sampling kind holds so that a quad's six-element block is a lookup or 21 dot
/// products rather than a fresh request (a fresh block rebuilds the six elements'
/// contributions: about 1 ms at 1,000 rows).
#[derive(Debug, Clone)]
enum Cache {
    /// Nothing: blocks asked for on demand.
    None,
    /// The sampling covariance of every off-diagonal element (`off_diagonal` order).
    Dense(Arc<DMatrix<f64>>),
    /// Every off-diagonal element's per-respondent contributions (rows x elements).
    Contributions(Arc<DMatrix<f64>>),
}

/// Which cache `with_sampling` builds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Tier {
    Dense,
    Contributions,
    OnDemand,
}

/// Up to this many items the Sampling kind asks for the full block of the p (p - 1) / 2
/// off-diagonal elements once (at most 1,225 elements, 12 MB).
pub const DENSE_ITEMS: usize = 50;

/// Beyond `DENSE_ITEMS`, the contributions of every off-diagonal element are fetched once when
/// they come from rows and rows x elements stays within this many values (128 MB); beyond
/// that, blocks are asked for on demand and nothing of size k is held.
pub const CONTRIBUTION_VALUES: usize = 16_000_000;

/// Position of element (j, l), j < l, in `off_diagonal(p)`.
fn off_diagonal_index(p: usize, (j, l): Element) -> usize {
    j * (2 * p - j - 1) / 2 + (l - j - 1)
}

/// Every off-diagonal element (j, l), j < l, row-major.
fn off_diagonal(p: usize) -> Vec<Element> {
    (0..p).flat_map(|j| (j + 1..p).map(move |l| (j, l))).collect()
}

impl TetradTester {
    /// Normal-theory tests on a covariance (or correlation) matrix from `n_obs` rows.
    /// The z statistics are scale invariant (every term of a tetrad and of its variance carries
    /// the same product of standard deviations), so a correlation matrix gives the same z and
    /// p as the covariance matrix it came from.
    pub fn wishart(cov: &DMatrix<f64>, n_obs: usize) -> Result<Self, StatsError> {
        check_square(cov)?;
        check_n(n_obs)?;
        check_finite_symmetric(cov)?;
        Ok(Self { kind: TetradTestKind::Wishart, cov: cov.clone(), n_obs, source: Source::Matrix })
    }

    /// Distribution-free tests (Bollen & Ting 1993) from an n x p matrix of complete rows
    /// (callers do listwise deletion; a non-finite value is an error). The tetrads come from the
    /// data's own unbiased covariance matrix (divisor n - 1), so that they and their
    /// fourth-moment variances describe the same rows.
    pub fn delta(data: &DMatrix<f64>) -> Result<Self, StatsError> {
        let (n_obs, p) = data.shape();
        check_n(n_obs)?;
        if data.iter().any(|v| !v.is_finite()) {
            return Err(StatsError::InvalidInput(
                "the delta tetrad test needs complete rows (a value is missing or not finite)".into(),
            ));
        }
        let mut centred = Vec::with_capacity(p);
        for j in 0..p {
            let col = data.column(j);
            let mean = col.iter().sum::<f64>() / n_obs as f64;
            let c: Vec<f64> = col.iter().map(|v| v - mean).collect();
            if c.iter().all(|v| *v == 0.0) {
                return Err(StatsError::Constant { what: format!("item {j}") });
            }
            centred.push(c);
        }
        let mut cov = DMatrix::zeros(p, p);
        for a in 0..p {
            for b in a..p {
                let s = dot(&centred[a], &centred[b]) / (n_obs - 1) as f64;
                cov[(a, b)] = s;
                cov[(b, a)] = s;
            }
        }
        Ok(Self { kind: TetradTestKind::Delta, cov, n_obs, source: Source::Centred(centred) })
    }

    /// Delta-method tests on `matrix` (a correlation or covariance matrix: the one that is
    /// fitted) with `sampling`, the sampling covariance of its estimates (Bollen & Ting 1993 with
    /// V in place of Gamma / N): var(t) = g' V g over the tetrad's correlations, g the gradient
    /// of t = r_p r_q - r_r r_t. Only off-diagonal elements enter, so a correlation matrix's
    /// sampling covariance (no diagonal) serves. n is `sampling.n_obs()` (for pairwise-present
    /// data the smallest pair count; it is used only by `cluster`'s screen of zero
    /// correlations, the variances carry each pair's own n).
    /// What is fetched up front: the full off-diagonal block up to `DENSE_ITEMS` items, else the
    /// contributions of every off-diagonal element within `CONTRIBUTION_VALUES`, else nothing.
    pub fn with_sampling(matrix: &DMatrix<f64>, sampling: Arc<dyn SamplingCovariance>) -> Result<Self, StatsError> {
        let p = matrix.nrows();
        let k = p * p.saturating_sub(1) / 2;
        let tier = if p <= DENSE_ITEMS {
            Tier::Dense
        } else if sampling.rows().is_some_and(|n| n.saturating_mul(k) <= CONTRIBUTION_VALUES) {
            Tier::Contributions
        } else {
            Tier::OnDemand
        };
        Self::sampling_tester(matrix, sampling, tier)
    }

    fn sampling_tester(
        matrix: &DMatrix<f64>,
        sampling: Arc<dyn SamplingCovariance>,
        tier: Tier,
    ) -> Result<Self, StatsError> {
        check_square(matrix)?;
        check_finite_symmetric(matrix)?;
        if sampling.n_items() != matrix.nrows() {
            return Err(StatsError::SizeMismatch {
                what: "sampling covariance items",
                expected: matrix.nrows(),
                found: sampling.n_items(),
            });
        }
        let n_obs = sampling.n_obs();
        check_n(n_obs)?;
        let elements = off_diagonal(matrix.nrows());
        let cache = match tier {
            Tier::Dense => Cache::Dense(Arc::new(sampling.block(&elements)?)),
            Tier::Contributions => match sampling.rows() {
                Some(rows) => match sampling.contributions(&elements, 0..rows)? {
                    Some(c) => Cache::Contributions(Arc::new(c)),
                    None => Cache::None,
                },
                None => Cache::None,
            },
            Tier::OnDemand => Cache::None,
        };
        Ok(Self {
            kind: TetradTestKind::Sampling,
            cov: matrix.clone(),
            n_obs,
            source: Source::Sampling { sampling, cache },
        })
    }

    /// The sampling covariance of `elements` (off-diagonal) for the Sampling kind, from the
    /// cache when there is one.
    fn sampling_block(
        &self,
        sampling: &dyn SamplingCovariance,
        cache: &Cache,
        elements: &[Element],
    ) -> Result<DMatrix<f64>, StatsError> {
        let p = self.n_items();
        let at = || -> Result<Vec<usize>, StatsError> {
            elements
                .iter()
                .map(|&e| {
                    check_element(p, true, e)?;
                    Ok(off_diagonal_index(p, e))
                })
                .collect()
        };
        match cache {
            Cache::None => sampling.block(elements),
            Cache::Dense(v) => {
                let at = at()?;
                Ok(DMatrix::from_fn(at.len(), at.len(), |r, c| v[(at[r], at[c])]))
            }
            Cache::Contributions(c) => {
                let at = at()?;
                let m = at.len();
                let mut out = DMatrix::zeros(m, m);
                for x in 0..m {
                    for y in x..m {
                        let v = c.column(at[x]).dot(&c.column(at[y]));
                        out[(x, y)] = v;
                        out[(y, x)] = v;
                    }
                }
                Ok(out)
            }
        }
    }

    /// Builds the tester `kind` asks for: `wishart(cov, n_obs)`, or `delta(data)` (which then
    /// requires `data` whose column count matches `cov`; `cov` and `n_obs` serve as checks only).
    pub fn new(
        kind: TetradTestKind,
        cov: &DMatrix<f64>,
        n_obs: usize,
        data: Option<&DMatrix<f64>>,
    ) -> Result<Self, StatsError> {
        match kind {
            TetradTestKind::Wishart => Self::wishart(cov, n_obs),
            TetradTestKind::Delta => {
                let data = data.ok_or_else(|| {
                    StatsError::InvalidInput("the delta tetrad test needs the respondent-level data".into())
                })?;
                if data.ncols() != cov.ncols() {
                    return Err(StatsError::InvalidInput(format!(
                        "data has {} columns but the covariance matrix has {}",
                        data.ncols(),
                        cov.ncols()
                    )));
                }
                Self::delta(data)
            }
            TetradTestKind::Sampling => Err(StatsError::InvalidInput(
                "the delta test on a fitted matrix needs its sampling covariance (TetradTester::with_sampling)".into(),
            )),
        }
    }

    pub fn kind(&self) -> TetradTestKind {
        self.kind
    }

    /// Number of rows behind the covariance matrix.
    pub fn n_obs(&self) -> usize {
        self.n_obs
    }

    /// Number of items (rows of the covariance matrix).
    pub fn n_items(&self) -> usize {
        self.cov.nrows()
    }

    /// The covariance matrix the tetrads are taken from.
    pub fn covariance(&self) -> &DMatrix<f64> {
        &self.cov
    }

    /// Test of one vanishing tetrad (see `test_quad` for the standard errors).
    pub fn test(&self, tetrad: Tetrad) -> Result<TetradTest, StatsError> {
        check_which(tetrad.which)?;
        let all = self.test_quad(tetrad.items)?;
        Ok(all[tetrad.which])
    }

    /// Tests of the three tetrads of one quad. Standard errors: Wishart kind, the square root of
    /// `wishart_variance` with the sample matrix plugged in (Wishart 1928); Delta kind,
    /// sqrt(g' Gamma g / N) with g the gradient of the tetrad with respect to the covariances
    /// and Gamma_{ab,cd} = m_abcd - m_ab m_cd estimated from fourth-order moments about the
    /// sample means, divisor N (Bollen & Ting 1993, eqs. for the asymptotic variance; Browne
    /// 1984 for Gamma); Sampling kind, sqrt(g' V g) with V the supplied sampling covariance of
    /// the quad's six correlations. p-values are two-sided standard normal.
    pub fn test_quad(&self, items: [usize; 4]) -> Result<[TetradTest; 3], StatsError> {
        check_items(self.n_items(), items)?;
        let sub = submatrix(&self.cov, items);
        let diffs = differences(&sub);
        let variances: [f64; 3] = match self.kind {
            TetradTestKind::Wishart => {
                let det = sub.determinant();
                [0, 1, 2].map(|w| wishart_var_sub(&sub, det, w, self.n_obs))
            }
            TetradTestKind::Delta | TetradTestKind::Sampling => {
                let omega = self.quad_omega(items, &sub)?;
                [omega[0][0], omega[1][1], omega[2][2]]
            }
        };
        let normal = Normal::standard();
        let mut out = [TetradTest { items, which: 0, diff: 0.0, se: 0.0, stat: 0.0, p: 1.0 }; 3];
        for w in 0..3 {
            let se = positive_variance(variances[w], items)?.sqrt();
            let stat = diffs[w] / se;
            out[w] =
                TetradTest { items, which: w, diff: diffs[w], se, stat, p: (2.0 * normal.sf(stat.abs())).min(1.0) };
        }
        Ok(out)
    }

    /// The quad's three tetrad differences and their asymptotic covariance Omega,
    /// by the tester's kind (see `quad_chi2`).
    fn quad_parts(&self, items: [usize; 4]) -> Result<([f64; 3], [[f64; 3]; 3]), StatsError> {
        check_items(self.n_items(), items)?;
        let sub = submatrix(&self.cov, items);
        let t = differences(&sub);
        let omega = match self.kind {
            TetradTestKind::Wishart => normal_omega(&sub, self.n_obs),
            TetradTestKind::Delta | TetradTestKind::Sampling => self.quad_omega(items, &sub)?,
        };
        Ok((t, omega))
    }

    /// Chi-square statistic (df 2) of the joint test that all three tetrads of a quad vanish,
    /// from the two independent ones (t1, t2) and their asymptotic covariance Omega
    /// (Bollen & Ting 1993): chi2 = t' Omega^-1 t, p = exp(-chi2 / 2). Omega is the
    /// normal-theory delta-method covariance for the Wishart kind (Gamma_{ab,cd} =
    /// s_ac s_bd + s_ad s_bc, divided by N - 1), the fourth-moment one for the Delta kind and
    /// G V G' with the supplied sampling covariance V for the Sampling kind.
    /// The statistic does not depend on the order of the four items (t1, t2, t3 span the same
    /// plane under every relabelling). A singular Omega falls back to the larger-variance
    /// tetrad alone (a df-1 statistic mapped to the df-2 scale by equal p-value).
    pub fn quad_chi2(&self, items: [usize; 4]) -> Result<f64, StatsError> {
        let (t, omega) = self.quad_parts(items)?;
        let (a, b, c) = (omega[0][0], omega[0][1], omega[1][1]);
        let det = a * c - b * b;
        if det > 1e-12 * (a * c).abs() && a > 0.0 && c > 0.0 {
            return Ok((c * t[0] * t[0] - 2.0 * b * t[0] * t[1] + a * t[1] * t[1]) / det);
        }
        let (v, d) = if a >= c { (a, t[0]) } else { (c, t[1]) };
        let var = positive_variance(v, items)?;
        let chi1 = d * d / var;
        let p = ChiSquared::new(1.0).map_err(|e| StatsError::InvalidInput(e.to_string()))?.sf(chi1);
        Ok(-2.0 * p.max(f64::MIN_POSITIVE).ln())
    }

    /// Close-fit version of `quad_chi2`: the statistic of the test that the quad's tetrads are
    /// all within `tolerance` of zero (H0: |tau1|, |tau2|, |tau3| <= tol, with tau3 = tau2 - tau1),
    /// the idea of RMSEA's close-fit test (Browne & Cudeck 1993; MacCallum, Browne & Sugawara
    /// 1996). The statistic is the squared Mahalanobis distance, in the metric Omega^-1 of
    /// `quad_chi2`, from the sample (t1, t2) to the hexagon {|t1| <= tol, |t2| <= tol,
    /// |t2 - t1| <= tol}: zero inside, else the smallest distance to its six edges. For any
    /// tau in that convex set the distance to the set is at most the distance to tau, which is
    /// asymptotically chi-square(2), so comparing it with the df-2 chi-square keeps the level
    /// over the whole null. `tolerance = 0` is `quad_chi2` itself. With a singular Omega the
    /// larger-variance tetrad alone is used, its excess (|t| - tol)+ in place of |t|.
    pub fn quad_excess_chi2(&self, items: [usize; 4], tolerance: f64) -> Result<f64, StatsError> {
        if tolerance <= 0.0 {
            return self.quad_chi2(items);
        }
        let (t, omega) = self.quad_parts(items)?;
        let (a, b, c) = (omega[0][0], omega[0][1], omega[1][1]);
        let det = a * c - b * b;
        if det > 1e-12 * (a * c).abs() && a > 0.0 && c > 0.0 {
            let w = [[c / det, -b / det], [-b / det, a / det]];
            return Ok(hexagon_distance([t[0], t[1]], w, tolerance));
        }
        let (v, d) = if a >= c { (a, t[0]) } else { (c, t[1]) };
        let var = positive_variance(v, items)?;
        let excess = (d.abs() - tolerance).max(0.0);
        let chi1 = excess * excess / var;
        let p = ChiSquared::new(1.0).map_err(|e| StatsError::InvalidInput(e.to_string()))?.sf(chi1);
        Ok(-2.0 * p.max(f64::MIN_POSITIVE).ln())
    }

    /// Joint chi-square test that all `tetrads` vanish (Bollen & Ting 1993): with t the vector
    /// of sample tetrads and G their gradient with respect to the sample covariances,
    /// Omega = G Gamma G' / N_k, chi2 = t' Omega^+ t (Moore-Penrose inverse), df = rank(Omega),
    /// so redundant sets (for instance all three tetrads of one quad, t3 = t2 - t1) are handled
    /// by their rank. Gamma is normal-theory (s_ac s_bd + s_ad s_bc, N_k = N - 1) for the
    /// Wishart kind and distribution-free (m_abcd - m_ab m_cd, N_k = N) for the Delta kind;
    /// for the Sampling kind Omega = G V G' with V the supplied sampling covariance of all the
    /// correlations involved (one block, asked for once).
    /// Eigenvalues below 1e-10 times the largest count as zero.
    pub fn joint(&self, tetrads: &[Tetrad]) -> Result<JointTetradTest, StatsError> {
        if tetrads.is_empty() {
            return Err(StatsError::InvalidInput("a joint tetrad test needs a tetrad".into()));
        }
        let mut pair_index: BTreeMap<(usize, usize), usize> = BTreeMap::new();
        let mut grads: Vec<[(usize, f64); 4]> = Vec::with_capacity(tetrads.len());
        let mut diffs = Vec::with_capacity(tetrads.len());
        for tet in tetrads {
            check_items(self.n_items(), tet.items)?;
            check_which(tet.which)?;
            let sub = submatrix(&self.cov, tet.items);
            diffs.push(differences(&sub)[tet.which]);
            let local = gradient(&sub, tet.which);
            let terms = TERMS[tet.which];
            let mut g = [(0usize, 0.0f64); 4];
            for (slot, &u) in terms.iter().enumerate() {
                let (pa, pb) = PAIRS[u];
                let (x, y) = (tet.items[pa], tet.items[pb]);
                let key = (x.min(y), x.max(y));
                let next = pair_index.len();
                let idx = *pair_index.entry(key).or_insert(next);
                g[slot] = (idx, local[u]);
            }
            grads.push(g);
        }
        let pairs: Vec<(usize, usize)> = {
            let mut v = vec![(0, 0); pair_index.len()];
            for (&k, &i) in &pair_index {
                v[i] = k;
            }
            v
        };
        let m = tetrads.len();
        let mut omega = DMatrix::zeros(m, m);
        match &self.source {
            Source::Sampling { sampling, cache } => {
                let mut a = DMatrix::zeros(pairs.len(), m);
                for (u, g) in grads.iter().enumerate() {
                    for &(e, ge) in g {
                        a[(e, u)] += ge;
                    }
                }
                omega = match cache {
                    Cache::None => sampling.sandwich(&pairs, &a)?,
                    _ => a.transpose() * self.sampling_block(sampling.as_ref(), cache, &pairs)? * &a,
                };
            }
            Source::Matrix => {
                let nu = (self.n_obs - 1) as f64;
                let s = &self.cov;
                let gamma = |e: usize, f: usize| {
                    let ((a, b), (c, d)) = (pairs[e], pairs[f]);
                    s[(a, c)] * s[(b, d)] + s[(a, d)] * s[(b, c)]
                };
                for u in 0..m {
                    for v in u..m {
                        let mut acc = 0.0;
                        for &(e, ge) in &grads[u] {
                            for &(f, gf) in &grads[v] {
                                acc += ge * gf * gamma(e, f);
                            }
                        }
                        omega[(u, v)] = acc / nu;
                        omega[(v, u)] = acc / nu;
                    }
                }
            }
            Source::Centred(centred) => {
                let n = self.n_obs;
                let means: Vec<f64> = pairs.iter().map(|&(a, b)| dot(&centred[a], &centred[b]) / n as f64).collect();
                // q[r][u]: influence of row r on tetrad u, sum_e g_ue (z_ra z_rb - m_ab).
                let mut q = DMatrix::zeros(n, m);
                for (u, g) in grads.iter().enumerate() {
                    for &(e, ge) in g {
                        let (a, b) = pairs[e];
                        let (ca, cb) = (&centred[a], &centred[b]);
                        for r in 0..n {
                            q[(r, u)] += ge * (ca[r] * cb[r] - means[e]);
                        }
                    }
                }
                omega = q.tr_mul(&q) / (n as f64 * n as f64);
            }
        }
        let eig = omega.symmetric_eigen();
        let max_eig = eig.eigenvalues.iter().copied().fold(0.0_f64, f64::max);
        if max_eig <= 0.0 || !max_eig.is_finite() {
            return Err(StatsError::Singular { what: "the covariance matrix of the tetrad differences".into() });
        }
        let t = nalgebra::DVector::from_vec(diffs.clone());
        let mut stat = 0.0;
        let mut df = 0usize;
        for (k, &lambda) in eig.eigenvalues.iter().enumerate() {
            if lambda > 1e-10 * max_eig {
                let proj = eig.eigenvectors.column(k).dot(&t);
                stat += proj * proj / lambda;
                df += 1;
            }
        }
        let p = ChiSquared::new(df as f64).map_err(|e| StatsError::InvalidInput(e.to_string()))?.sf(stat);
        Ok(JointTetradTest { tetrads: tetrads.to_vec(), diffs, stat, df, p })
    }

    /// 3 x 3 sampling covariance of (t1, t2, t3) of a quad for the two delta-method kinds.
    fn quad_omega(&self, items: [usize; 4], sub: &Matrix4<f64>) -> Result<[[f64; 3]; 3], StatsError> {
        match &self.source {
            Source::Matrix => Ok(normal_omega(sub, self.n_obs)),
            Source::Centred(centred) => Ok(self.delta_omega(centred, items, sub)),
            Source::Sampling { sampling, cache } => {
                let elements: [Element; 6] = PAIRS.map(|(a, b)| {
                    let (x, y) = (items[a], items[b]);
                    (x.min(y), x.max(y))
                });
                let v = self.sampling_block(sampling.as_ref(), cache, &elements)?;
                Ok(sampling_omega(&v, sub))
            }
        }
    }

    /// 3 x 3 fourth-moment covariance of (t1, t2, t3) of a quad, divided by N (Bollen & Ting
    /// 1993): Omega = (1/N^2) sum_r q_r q_r', q_r = G (z_ra z_rb - m_ab)_{pairs}. Equal to
    /// G Gamma G' / N with Gamma_{ab,cd} = m_abcd - m_ab m_cd.
    fn delta_omega(&self, centred: &[Vec<f64>], items: [usize; 4], sub: &Matrix4<f64>) -> [[f64; 3]; 3] {
        let n = self.n_obs;
        let cols = items.map(|i| centred[i].as_slice());
        let mut means = [0.0; 6];
        for (u, &(a, b)) in PAIRS.iter().enumerate() {
            means[u] = dot(cols[a], cols[b]) / n as f64;
        }
        let g = [0, 1, 2].map(|w| gradient(sub, w));
        let mut acc = [[0.0; 3]; 3];
        let rows = cols[0].iter().zip(cols[1]).zip(cols[2]).zip(cols[3]);
        for (((&x0, &x1), &x2), &x3) in rows {
            let x = [x0, x1, x2, x3];
            let mut y = [0.0; 6];
            for (u, &(a, b)) in PAIRS.iter().enumerate() {
                y[u] = x[a] * x[b] - means[u];
            }
            let q = [0, 1, 2].map(|w| (0..6).map(|u| g[w][u] * y[u]).sum::<f64>());
            for v in 0..3 {
                for w in v..3 {
                    acc[v][w] += q[v] * q[w];
                }
            }
        }
        let scale = 1.0 / (n as f64 * n as f64);
        let mut out = [[0.0; 3]; 3];
        for v in 0..3 {
            for w in v..3 {
                out[v][w] = acc[v][w] * scale;
                out[w][v] = out[v][w];
            }
        }
        out
    }
}

/// Delta-method covariance of (t1, t2, t3) from the sampling covariance V of the quad's six
/// off-diagonal estimates (in `PAIRS` order): G V G' (Bollen & Ting 1993 with V for Gamma / N), G the 3 x 6
/// gradient of `gradient`.
fn sampling_omega(v: &DMatrix<f64>, sub: &Matrix4<f64>) -> [[f64; 3]; 3] {
    let g = [0, 1, 2].map(|w| gradient(sub, w));
    let mut out = [[0.0; 3]; 3];
    for x in 0..3 {
        for y in x..3 {
            let mut acc = 0.0;
            for e in 0..6 {
                if g[x][e] == 0.0 {
                    continue;
                }
                for f in 0..6 {
                    acc += g[x][e] * g[y][f] * v[(e, f)];
                }
            }
            out[x][y] = acc;
            out[y][x] = acc;
        }
    }
    out
}

/// Squared distance (x - t)' W (x - t) from `t` to the hexagon {|x1| <= tol, |x2| <= tol,
/// |x2 - x1| <= tol}, W positive definite: zero inside; outside, the minimum lies on the
/// boundary, so it is the smallest over the six edges of the convex quadratic along each edge
/// (minimised in closed form, clamped to the edge).
fn hexagon_distance(t: [f64; 2], w: [[f64; 2]; 2], tol: f64) -> f64 {
    let inside = t[0].abs() <= tol && t[1].abs() <= tol && (t[1] - t[0]).abs() <= tol;
    if inside {
        return 0.0;
    }
    let quad =
        |x: [f64; 2], y: [f64; 2]| x[0] * (w[0][0] * y[0] + w[0][1] * y[1]) + x[1] * (w[1][0] * y[0] + w[1][1] * y[1]);
    let vertices = [[tol, tol], [0.0, tol], [-tol, 0.0], [-tol, -tol], [0.0, -tol], [tol, 0.0]];
    let mut best = f64::INFINITY;
    for k in 0..6 {
        let (p, q) = (vertices[k], vertices[(k + 1) % 6]);
        let d = [q[0] - p[0], q[1] - p[1]];
        let r = [p[0] - t[0], p[1] - t[1]];
        let s = (-quad(r, d) / quad(d, d)).clamp(0.0, 1.0);
        let x = [r[0] + s * d[0], r[1] + s * d[1]];
        best = best.min(quad(x, x));
    }
    best
}

/// Normal-theory delta-method covariance of (t1, t2, t3): G Gamma G' / (N - 1) with
/// Gamma_{ab,cd} = s_ac s_bd + s_ad s_bc (the exact covariance of unbiased sample covariances
/// under normality times N - 1; Anderson 2003, sec. 3.4; common practice).
fn normal_omega(sub: &Matrix4<f64>, n_obs: usize) -> [[f64; 3]; 3] {
    let mut gamma = [[0.0; 6]; 6];
    for (u, &(a, b)) in PAIRS.iter().enumerate() {
        for (v, &(c, d)) in PAIRS.iter().enumerate() {
            gamma[u][v] = sub[(a, c)] * sub[(b, d)] + sub[(a, d)] * sub[(b, c)];
        }
    }
    let g = [0, 1, 2].map(|w| gradient(sub, w));
    let nu = (n_obs - 1) as f64;
    let mut out = [[0.0; 3]; 3];
    for v in 0..3 {
        for w in v..3 {
            let mut acc = 0.0;
            for e in 0..6 {
                if g[v][e] == 0.0 {
                    continue;
                }
                for f in 0..6 {
                    acc += g[v][e] * g[w][f] * gamma[e][f];
                }
            }
            out[v][w] = acc / nu;
            out[w][v] = out[v][w];
        }
    }
    out
}

/// Gradient of tetrad w with respect to the six off-diagonal covariances of the quad
/// (in `PAIRS` order): d(s_p s_q - s_r s_t) = s_q ds_p + s_p ds_q - s_t ds_r - s_r ds_t.
fn gradient(sub: &Matrix4<f64>, which: usize) -> [f64; 6] {
    let s = pair_values(sub);
    let [p, q, r, t] = TERMS[which];
    let mut g = [0.0; 6];
    g[p] += s[q];
    g[q] += s[p];
    g[r] -= s[t];
    g[t] -= s[r];
    g
}

fn pair_values(sub: &Matrix4<f64>) -> [f64; 6] {
    PAIRS.map(|(a, b)| sub[(a, b)])
}

fn differences(sub: &Matrix4<f64>) -> [f64; 3] {
    let s = pair_values(sub);
    TERMS.map(|[p, q, r, t]| s[p] * s[q] - s[r] * s[t])
}

fn wishart_var_sub(sub: &Matrix4<f64>, det: f64, which: usize, n_obs: usize) -> f64 {
    let ([a, b], [c, d]) = PARTITIONS[which];
    let d_ab = sub[(a, a)] * sub[(b, b)] - sub[(a, b)] * sub[(a, b)];
    let d_cd = sub[(c, c)] * sub[(d, d)] - sub[(c, d)] * sub[(c, d)];
    let nu = (n_obs - 1) as f64;
    (nu - 1.0) / (nu * nu) * ((nu + 2.0) / nu * d_ab * d_cd - det)
}

fn submatrix(cov: &DMatrix<f64>, items: [usize; 4]) -> Matrix4<f64> {
    Matrix4::from_fn(|r, c| cov[(items[r], items[c])])
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

fn positive_variance(var: f64, items: [usize; 4]) -> Result<f64, StatsError> {
    if var > 0.0 && var.is_finite() {
        Ok(var)
    } else {
        Err(StatsError::Singular { what: format!("the covariance matrix of items {items:?}") })
    }
}

fn check_square(cov: &DMatrix<f64>) -> Result<(), StatsError> {
    if cov.nrows() != cov.ncols() {
        return Err(StatsError::InvalidInput(format!(
            "covariance matrix is {} x {}, not square",
            cov.nrows(),
            cov.ncols()
        )));
    }
    Ok(())
}

fn check_finite_symmetric(cov: &DMatrix<f64>) -> Result<(), StatsError> {
    let p = cov.nrows();
    for a in 0..p {
        if !(cov[(a, a)] > 0.0 && cov[(a, a)].is_finite()) {
            return Err(StatsError::InvalidInput(format!(
                "variance of item {a} is {} (must be positive)",
                cov[(a, a)]
            )));
        }
        for b in 0..a {
            let (x, y) = (cov[(a, b)], cov[(b, a)]);
            if !x.is_finite() || (x - y).abs() > 1e-9 * (1.0 + x.abs().max(y.abs())) {
                return Err(StatsError::InvalidInput(format!(
                    "covariance matrix is not finite and symmetric at ({a}, {b})"
                )));
            }
        }
    }
    Ok(())
}

fn check_items(p: usize, items: [usize; 4]) -> Result<(), StatsError> {
    for (x, &a) in items.iter().enumerate() {
        if a >= p {
            return Err(StatsError::InvalidInput(format!("item {a} is out of range for {p} items")));
        }
        if items[..x].contains(&a) {
            return Err(StatsError::InvalidInput(format!("a tetrad needs four distinct items, got {items:?}")));
        }
    }
    Ok(())
}

fn check_which(which: usize) -> Result<(), StatsError> {
    if which < 3 { Ok(()) } else { Err(StatsError::InvalidInput(format!("tetrad index {which} is not 0, 1 or 2"))) }
}

fn check_n(n_obs: usize) -> Result<(), StatsError> {
    // Wishart's variance needs nu = N - 1 >= 2; fewer than 4 rows leave no 4 x 4 covariance.
    if n_obs < 5 {
        return Err(StatsError::NotEnoughData { what: "a tetrad test".into(), needed: 5, found: n_obs });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testkit::{draw_normal, factor_cov, sample_cov};
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;
    use serde_json::Value;

    fn fixture() -> Value {
        crate::reference!("tetrad/tetrad.json")
    }

    fn matrix(v: &Value) -> DMatrix<f64> {
        let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).unwrap();
        DMatrix::from_fn(rows.len(), rows[0].len(), |r, c| rows[r][c])
    }

    fn quads(p: usize) -> Vec<[usize; 4]> {
        let mut out = Vec::new();
        for i in 0..p {
            for j in i + 1..p {
                for k in j + 1..p {
                    for l in k + 1..p {
                        out.push([i, j, k, l]);
                    }
                }
            }
        }
        out
    }

    // Spearman (1904): in a one-factor model sigma_ab = lambda_a lambda_b for a != b, so every
    // tetrad difference of four indicators vanishes exactly, whatever the loadings and
    // error variances. Random loadings (both signs), several seeds.
    #[test]
    fn population_tetrads_vanish_for_one_factor() {
        let mut rng = ChaCha8Rng::seed_from_u64(1904);
        for _ in 0..20 {
            let p = 7;
            let lambda = DMatrix::from_fn(p, 1, |_, _| rng.random_range(-2.0..2.0));
            let theta = DMatrix::from_diagonal(&nalgebra::DVector::from_fn(p, |_, _| rng.random_range(0.1..3.0)));
            let sigma = factor_cov(&lambda, &DMatrix::identity(1, 1), &theta);
            for q in quads(p) {
                for t in tetrad_differences(&sigma, q).unwrap() {
                    assert!(t.abs() < 1e-12, "tetrad {t} of {q:?}");
                }
            }
        }
    }

    // Labelling check by hand: t1 = s01 s23 - s02 s13, t2 = s01 s23 - s03 s12,
    // t3 = s02 s13 - s03 s12 = t2 - t1 on an arbitrary symmetric matrix.
    #[test]
    fn labelling_by_hand() {
        let s = DMatrix::from_row_slice(
            4,
            4,
            &[4.0, 1.0, 2.0, 3.0, 1.0, 5.0, 0.5, 0.7, 2.0, 0.5, 6.0, 1.1, 3.0, 0.7, 1.1, 7.0],
        );
        let t = tetrad_differences(&s, [0, 1, 2, 3]).unwrap();
        assert!((t[0] - (1.0 * 1.1 - 2.0 * 0.7)).abs() < 1e-15);
        assert!((t[1] - (1.0 * 1.1 - 3.0 * 0.5)).abs() < 1e-15);
        assert!((t[2] - (2.0 * 0.7 - 3.0 * 0.5)).abs() < 1e-15);
        assert!((t[2] - (t[1] - t[0])).abs() < 1e-15);
    }

    // Wishart (1928) exact variance against the numpy Monte Carlo of the fixture
    // (tests/reference/tetrad/make_tetrad.py, 400 000 replicates per case, numpy version in the
    // JSON). Tolerance: 4 Monte Carlo standard errors.
    #[test]
    fn wishart_variance_matches_numpy_monte_carlo() {
        let fx = fixture();
        for case in fx["wishart_mc"].as_array().unwrap() {
            let sigma = matrix(&case["sigma"]);
            let n = case["n_obs"].as_u64().unwrap() as usize;
            for w in 0..3 {
                let mc = case["var"][w].as_f64().unwrap();
                let se = case["var_mc_se"][w].as_f64().unwrap();
                let got = wishart_variance(&sigma, n, Tetrad { items: [0, 1, 2, 3], which: w }).unwrap();
                assert!((got - mc).abs() < 4.0 * se, "N {n} t{} {got} vs MC {mc} +- {se}", w + 1);
            }
        }
    }

    // Wishart (1928) variance against a Monte Carlo in Rust: 2000 normal samples of N = 100
    // from a one-factor model; the variance of each sample tetrad must be within 10 % of the
    // formula (the Monte Carlo relative standard error is about 3 %).
    #[test]
    fn wishart_variance_matches_rust_monte_carlo() {
        let lambda = DMatrix::from_column_slice(4, 1, &[0.8, 0.6, 0.7, 0.5]);
        let theta = DMatrix::from_diagonal(&nalgebra::DVector::from_column_slice(&[0.36, 0.64, 0.51, 0.75]));
        let sigma = factor_cov(&lambda, &DMatrix::identity(1, 1), &theta);
        let n = 100;
        let reps = 2000;
        let mut rng = ChaCha8Rng::seed_from_u64(1928);
        let mut sq = [0.0; 3];
        for _ in 0..reps {
            let s = sample_cov(&draw_normal(&sigma, n, &mut rng));
            let t = tetrad_differences(&s, [0, 1, 2, 3]).unwrap();
            for w in 0..3 {
                sq[w] += t[w] * t[w] / reps as f64;
            }
        }
        for (w, mc) in sq.iter().enumerate() {
            let want = wishart_variance(&sigma, n, Tetrad { items: [0, 1, 2, 3], which: w }).unwrap();
            assert!((mc / want - 1.0).abs() < 0.10, "t{}: MC {mc} vs Wishart {want}", w + 1);
        }
    }

    // Bollen & Ting (1993) delta-method standard errors, p-values and the joint df-2 test of
    // (t1, t2) against an independent numpy implementation built on the full vech covariance
    // matrix (tests/reference/tetrad/make_tetrad.py); the normal-theory standard errors likewise.
    #[test]
    fn delta_and_normal_theory_match_numpy() {
        let fx = fixture();
        let d = &fx["delta"];
        let data = matrix(&d["data"]);
        let tester = TetradTester::delta(&data).unwrap();
        let cov = matrix(&d["covariance"]);
        assert!((tester.covariance() - &cov).abs().max() < 1e-12);
        let tests = tester.test_quad([0, 1, 2, 3]).unwrap();
        for w in 0..3 {
            let rel = |a: f64, b: f64| (a - b).abs() / b.abs();
            assert!(rel(tests[w].diff, d["tetrads"][w].as_f64().unwrap()) < 1e-10);
            assert!(rel(tests[w].se, d["delta_se"][w].as_f64().unwrap()) < 1e-10);
            assert!(rel(tests[w].p, d["delta_p"][w].as_f64().unwrap()) < 1e-8);
        }
        let chi = tester.quad_chi2([0, 1, 2, 3]).unwrap();
        let want = d["joint12_delta_stat"].as_f64().unwrap();
        assert!((chi - want).abs() < 1e-9 * want);
        let pair = [Tetrad { items: [0, 1, 2, 3], which: 0 }, Tetrad { items: [0, 1, 2, 3], which: 1 }];
        let joint = tester.joint(&pair).unwrap();
        assert_eq!(joint.df, 2);
        assert!((joint.stat - want).abs() < 1e-9 * want);
        assert!((joint.p - d["joint12_delta_p"].as_f64().unwrap()).abs() < 1e-10);

        let normal = TetradTester::wishart(&cov, data.nrows()).unwrap();
        let want = d["joint12_normal_stat"].as_f64().unwrap();
        assert!((normal.quad_chi2([0, 1, 2, 3]).unwrap() - want).abs() < 1e-9 * want);
        assert!((normal.joint(&pair).unwrap().stat - want).abs() < 1e-9 * want);
        for w in 0..3 {
            let single = normal.joint(&[Tetrad { items: [0, 1, 2, 3], which: w }]).unwrap();
            let se = d["normal_se"][w].as_f64().unwrap();
            let z = d["tetrads"][w].as_f64().unwrap() / se;
            assert_eq!(single.df, 1);
            assert!((single.stat - z * z).abs() < 1e-9 * z * z);
        }
    }

    // The delta test on a given matrix with a given sampling covariance (the Sampling kind)
    // against the same numpy implementation of Bollen & Ting (1993): with the matrix the data's
    // unbiased covariance matrix and V Browne's (1984) distribution-free covariance of the
    // sample covariances (`acov::adf_covariances`), g' V g is exactly the fixture's variance,
    // for single tetrads, the df-2 quad statistic and the joint test.
    #[test]
    fn sampling_kind_matches_numpy_with_the_distribution_free_covariance() {
        let fx = fixture();
        let d = &fx["delta"];
        let data = matrix(&d["data"]);
        let cov = matrix(&d["covariance"]);
        let adf: Arc<dyn SamplingCovariance> = Arc::new(crate::acov::adf_covariances(&data).unwrap());
        let tester = TetradTester::with_sampling(&cov, adf).unwrap();
        assert_eq!(tester.kind(), TetradTestKind::Sampling);
        assert_eq!(tester.n_obs(), data.nrows());
        let rel = |a: f64, b: f64| (a - b).abs() / b.abs();
        let tests = tester.test_quad([0, 1, 2, 3]).unwrap();
        for w in 0..3 {
            assert!(rel(tests[w].diff, d["tetrads"][w].as_f64().unwrap()) < 1e-10);
            assert!(rel(tests[w].se, d["delta_se"][w].as_f64().unwrap()) < 1e-9);
            assert!(rel(tests[w].p, d["delta_p"][w].as_f64().unwrap()) < 1e-8);
        }
        let want = d["joint12_delta_stat"].as_f64().unwrap();
        assert!(rel(tester.quad_chi2([0, 1, 2, 3]).unwrap(), want) < 1e-9);
        let pair = [Tetrad { items: [0, 1, 2, 3], which: 0 }, Tetrad { items: [0, 1, 2, 3], which: 1 }];
        let joint = tester.joint(&pair).unwrap();
        assert_eq!(joint.df, 2);
        assert!(rel(joint.stat, want) < 1e-9);
        assert!((joint.p - d["joint12_delta_p"].as_f64().unwrap()).abs() < 1e-10);
    }

    // The Sampling kind's per-quad path (six-element blocks) and its joint path (one block over
    // every pair involved, through `sandwich`) agree, so do the three ways of holding the
    // sampling covariance (the full block, every element's contributions, blocks on demand);
    // a mismatched or missing sampling covariance is an error.
    #[test]
    fn sampling_kind_quad_and_joint_paths_agree() {
        let mut rng = ChaCha8Rng::seed_from_u64(15);
        let lambda = DMatrix::from_column_slice(6, 1, &[0.8, 0.6, 0.7, 0.5, 0.4, 0.65]);
        let theta =
            DMatrix::from_diagonal(&nalgebra::DVector::from_fn(6, |i, _| 1.0 - lambda[(i, 0)] * lambda[(i, 0)]));
        let sigma = factor_cov(&lambda, &DMatrix::identity(1, 1), &theta);
        let data = draw_normal(&sigma, 400, &mut rng);
        let adf: Arc<dyn SamplingCovariance> = Arc::new(crate::acov::adf_covariances(&data).unwrap());
        let tester = TetradTester::with_sampling(&sample_cov(&data), adf.clone()).unwrap();
        for q in [[0, 2, 4, 5], [5, 1, 3, 0]] {
            for (w, single) in tester.test_quad(q).unwrap().iter().enumerate() {
                let j = tester.joint(&[Tetrad { items: q, which: w }]).unwrap();
                assert!((j.stat - single.stat.powi(2)).abs() < 1e-9 * j.stat.max(1e-12));
            }
        }
        // Browne's covariances again, from contributions (which have rows): all three caches.
        let columns: Vec<Vec<f64>> = (0..6).map(|j| data.column(j).iter().copied().collect()).collect();
        let views: Vec<&[f64]> = columns.iter().map(Vec::as_slice).collect();
        let rows: Arc<dyn SamplingCovariance> = Arc::new(crate::acov::Contributions::covariances(&views).unwrap());
        let s = sample_cov(&data);
        let testers = [Tier::Dense, Tier::Contributions, Tier::OnDemand]
            .map(|tier| TetradTester::sampling_tester(&s, rows.clone(), tier).unwrap());
        assert!(matches!(&testers[1].source, Source::Sampling { cache: Cache::Contributions(_), .. }));
        let many: Vec<Tetrad> = [[0, 1, 2, 3], [1, 2, 4, 5], [0, 3, 4, 5]]
            .iter()
            .flat_map(|&items| [0, 2].map(|which| Tetrad { items, which }))
            .collect();
        let base = testers[0].joint(&many).unwrap();
        for other in &testers[1..] {
            for q in [[0, 2, 4, 5], [5, 1, 3, 0]] {
                let (a, b) = (testers[0].test_quad(q).unwrap(), other.test_quad(q).unwrap());
                for w in 0..3 {
                    assert!((a[w].se - b[w].se).abs() < 1e-12 * a[w].se);
                }
                let (a, b) = (testers[0].quad_chi2(q).unwrap(), other.quad_chi2(q).unwrap());
                assert!((a - b).abs() < 1e-10 * a.max(1e-12));
            }
            let j = other.joint(&many).unwrap();
            assert_eq!(j.df, base.df);
            assert!((j.stat - base.stat).abs() < 1e-9 * base.stat);
        }
        assert!(TetradTester::with_sampling(&DMatrix::identity(5, 5), adf).is_err());
        assert!(TetradTester::new(TetradTestKind::Sampling, &sigma, 400, Some(&data)).is_err());
    }

    // Rank handling (Bollen & Ting 1993: only two tetrads of a quad are independent): the joint
    // test of all three has df 2 and the same statistic as (t1, t2); the per-quad statistic does
    // not depend on the order of the items.
    #[test]
    fn joint_rank_and_order_invariance() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let lambda = DMatrix::from_column_slice(5, 1, &[0.8, 0.6, 0.7, 0.5, 0.4]);
        let theta = DMatrix::from_diagonal(&nalgebra::DVector::from_column_slice(&[0.36, 0.64, 0.51, 0.75, 0.84]));
        let sigma = factor_cov(&lambda, &DMatrix::identity(1, 1), &theta);
        let data = draw_normal(&sigma, 300, &mut rng);
        for tester in [TetradTester::wishart(&sample_cov(&data), 300).unwrap(), TetradTester::delta(&data).unwrap()] {
            let q = [0, 2, 3, 4];
            let all: Vec<Tetrad> = (0..3).map(|which| Tetrad { items: q, which }).collect();
            let j3 = tester.joint(&all).unwrap();
            let j2 = tester.joint(&all[..2]).unwrap();
            assert_eq!(j3.df, 2);
            assert!((j3.stat - j2.stat).abs() < 1e-8 * j2.stat.max(1e-12));
            let base = tester.quad_chi2(q).unwrap();
            for perm in [[4, 3, 2, 0], [2, 0, 4, 3], [3, 4, 0, 2]] {
                let other = tester.quad_chi2(perm).unwrap();
                assert!((other - base).abs() < 1e-9 * base.max(1e-12), "{other} vs {base}");
            }
        }
    }

    // Calibration (simulation check, REFERENCES.md): under a one-factor null with skewed
    // (centred chi-square(3)) factor and errors, delta-test p-values are roughly uniform:
    // type-I error near 0.05 and the median near 0.5 over 300 replicates of n = 400.
    // The longer version (more replicates, both tests) is `calibration_long` below.
    #[test]
    fn delta_test_is_calibrated_under_the_null() {
        let (rej, below_half) = null_calibration(300, 400, TetradTestKind::Delta, 99);
        assert!((0.02..=0.09).contains(&rej), "type-I error {rej}");
        assert!((0.40..=0.60).contains(&below_half), "P(p < 0.5) = {below_half}");
    }

    // Calibration of the joint test over several quads sharing three items (simulation check):
    // under a normal one-factor null, the chi-square of t1, t2 of {0, 1, 2, d} for d = 3..8
    // (df 12) has mean near 12 and rejects near 5 % at alpha = 0.05, for both kinds
    // (200 replicates of n = 400).
    #[test]
    fn joint_test_is_calibrated_across_quads() {
        let lambda = DMatrix::from_column_slice(9, 1, &[0.8, 0.7, 0.6, 0.5, 0.75, 0.65, 0.55, 0.7, 0.6]);
        let theta =
            DMatrix::from_diagonal(&nalgebra::DVector::from_fn(9, |i, _| 1.0 - lambda[(i, 0)] * lambda[(i, 0)]));
        let sigma = factor_cov(&lambda, &DMatrix::identity(1, 1), &theta);
        let tetrads: Vec<Tetrad> =
            (3..9).flat_map(|d| [0, 1].map(|which| Tetrad { items: [0, 1, 2, d], which })).collect();
        let mut rng = ChaCha8Rng::seed_from_u64(31);
        let reps = 200;
        let (mut mean, mut rej) = ([0.0; 2], [0usize; 2]);
        for _ in 0..reps {
            let x = draw_normal(&sigma, 400, &mut rng);
            let testers = [TetradTester::wishart(&sample_cov(&x), 400).unwrap(), TetradTester::delta(&x).unwrap()];
            for (k, t) in testers.iter().enumerate() {
                let j = t.joint(&tetrads).unwrap();
                assert_eq!(j.df, 12);
                mean[k] += j.stat / reps as f64;
                rej[k] += usize::from(j.p < 0.05);
            }
        }
        for k in 0..2 {
            assert!((mean[k] - 12.0).abs() < 1.5, "mean chi-square {}", mean[k]);
            let rate = rej[k] as f64 / reps as f64;
            assert!((0.015..=0.10).contains(&rate), "type-I error {rate}");
        }
    }

    fn skewed_one_factor(n: usize, rng: &mut ChaCha8Rng) -> DMatrix<f64> {
        let chi = rand_distr::ChiSquared::new(3.0).unwrap();
        let lam = [0.8, 0.7, 0.6, 0.5];
        let mut x = DMatrix::zeros(n, 4);
        for r in 0..n {
            let f = (chi.sample(rng) - 3.0) / 6f64.sqrt();
            for (c, l) in lam.iter().enumerate() {
                let e = (chi.sample(rng) - 3.0) / 6f64.sqrt();
                x[(r, c)] = l * f + (1.0 - l * l).sqrt() * e;
            }
        }
        x
    }

    use rand_distr::Distribution;

    fn null_calibration(reps: usize, n: usize, kind: TetradTestKind, seed: u64) -> (f64, f64) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let (mut rej, mut half) = (0usize, 0usize);
        for _ in 0..reps {
            let x = skewed_one_factor(n, &mut rng);
            let tester = match kind {
                TetradTestKind::Delta => TetradTester::delta(&x).unwrap(),
                TetradTestKind::Wishart => TetradTester::wishart(&sample_cov(&x), n).unwrap(),
                TetradTestKind::Sampling => {
                    let adf = Arc::new(crate::acov::adf_covariances(&x).unwrap());
                    TetradTester::with_sampling(&sample_cov(&x), adf).unwrap()
                }
            };
            let p = tester.test(Tetrad { items: [0, 1, 2, 3], which: 0 }).unwrap().p;
            rej += usize::from(p < 0.05);
            half += usize::from(p < 0.5);
        }
        (rej as f64 / reps as f64, half as f64 / reps as f64)
    }

    // Long calibration: `cargo test --release calibration_long -- --ignored --nocapture`.
    // Prints the type-I error at 0.05 of both tests on skewed data (5000 replicates).
    #[test]
    #[ignore]
    fn calibration_long() {
        for kind in [TetradTestKind::Delta, TetradTestKind::Wishart] {
            let (rej, half) = null_calibration(5000, 400, kind, 5);
            println!("{kind:?}: P(p < .05) = {rej:.4}, P(p < .5) = {half:.4}");
            if kind == TetradTestKind::Delta {
                assert!((0.04..=0.065).contains(&rej));
            }
        }
    }

    // Close-fit p-values and the hexagon distance against an independent numpy/scipy
    // computation (tests/reference/tolerance/make_fixture.py: the supremum over a grid of the
    // null's tau values, and a constrained SLSQP minimisation); Browne & Cudeck (1993)'s
    // close-fit idea applied to tetrads.
    #[test]
    fn close_fit_matches_scipy() {
        let v: Value = crate::reference!("tolerance/tolerance.json");
        for c in v["close_fit"].as_array().unwrap() {
            let f = |k: &str| c[k].as_f64().unwrap();
            let got = close_fit_p(f("diff"), f("se"), f("tol"));
            assert!((got - f("p")).abs() < 1e-6 * (1.0 + f("p")), "{c}: {got}");
        }
        for c in v["hexagon"].as_array().unwrap() {
            let t = [c["t"][0].as_f64().unwrap(), c["t"][1].as_f64().unwrap()];
            let w = [0, 1].map(|r| [0, 1].map(|k| c["w"][r][k].as_f64().unwrap()));
            let want = c["distance"].as_f64().unwrap();
            let got = hexagon_distance(t, w, c["tol"].as_f64().unwrap());
            assert!((got - want).abs() < 1e-5 * (1.0 + want), "{c}: {got}");
        }
    }

    // tolerance 0 is the exact test; a positive tolerance never makes a quad look worse, and a
    // quad whose tetrads are all inside it scores 0.
    #[test]
    fn close_fit_reduces_to_the_exact_test() {
        let mut rng = ChaCha8Rng::seed_from_u64(16);
        let lambda: DMatrix<f64> = DMatrix::from_column_slice(6, 1, &[0.8, 0.7, 0.6, 0.75, 0.65, 0.55]);
        let theta = DMatrix::from_diagonal(&nalgebra::DVector::from_fn(6, |i, _| 1.0 - lambda[(i, 0)].powi(2)));
        let sigma = factor_cov(&lambda, &DMatrix::identity(1, 1), &theta);
        let x = draw_normal(&sigma, 400, &mut rng);
        let tester = TetradTester::wishart(&sample_cov(&x), 400).unwrap();
        for q in quads(6) {
            let exact = tester.quad_chi2(q).unwrap();
            assert_eq!(tester.quad_excess_chi2(q, 0.0).unwrap(), exact);
            let loose = tester.quad_excess_chi2(q, 0.02).unwrap();
            assert!(loose <= exact + 1e-12 && loose >= 0.0);
            assert_eq!(tester.quad_excess_chi2(q, 1.0).unwrap(), 0.0);
            for t in tester.test_quad(q).unwrap() {
                assert!((close_fit_p(t.diff, t.se, 0.0) - t.p).abs() < 1e-12);
                assert!(close_fit_p(t.diff, t.se, 0.02) >= t.p);
            }
        }
    }

    #[test]
    fn invalid_inputs_are_errors() {
        let s = DMatrix::<f64>::identity(5, 5);
        assert!(tetrad_differences(&s, [0, 1, 1, 2]).is_err());
        assert!(tetrad_differences(&s, [0, 1, 2, 5]).is_err());
        let t = TetradTester::wishart(&s, 100).unwrap();
        assert!(t.test(Tetrad { items: [0, 1, 2, 3], which: 3 }).is_err());
        assert!(TetradTester::wishart(&s, 3).is_err());
        assert!(t.joint(&[]).is_err());
        let bad = DMatrix::from_element(10, 4, f64::NAN);
        assert!(TetradTester::delta(&bad).is_err());
        assert!(TetradTester::new(TetradTestKind::Delta, &s, 100, None).is_err());
    }
}
