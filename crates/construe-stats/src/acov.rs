//! Sampling covariance of the moments the covariance step estimates (DESIGN.md §8: every
//! estimate travels with its sampling uncertainty). Central trait: `SamplingCovariance`, which
//! later tests and fits ask for the block they need (the six correlations of a tetrad, the
//! moments a model is fitted to) instead of a full k x k matrix (k = p(p+1)/2).
//!
//! Conventions, fixed everywhere:
//! - A moment is an `Element` (j, l) with j <= l: the covariance (or correlation) of items j
//!   and l; (j, j) is item j's variance. For correlation matrices only j < l elements exist
//!   (the unit diagonal is not estimated) and asking for a diagonal element is an error.
//! - Blocks are the estimated sampling covariance of the estimates themselves,
//!   cov(ŝ_e, ŝ_f), already divided by the sample size (for pairwise-present data each pair's
//!   own n enters), so a test statistic is `t' block^-1 t` with no further n.
//!
//! Implementations: `Dense` (a full matrix over a list of elements: small problems, tests),
//! `adf_covariances` (distribution-free, Browne 1984, for complete continuous rows).

use std::collections::HashMap;

use nalgebra::DMatrix;

use super::StatsError;

/// One moment: items (j, l), j <= l.
pub type Element = (usize, usize);

/// The estimated sampling covariance of a matrix of moments.
pub trait SamplingCovariance: std::fmt::Debug + Send + Sync {
    /// Number of items (rows of the moment matrix).
    fn n_items(&self) -> usize;

    /// The sample size a fit statistic is scaled by (T = n F): the number of respondents, or
    /// for pairwise-present data the smallest pair count.
    fn n_obs(&self) -> usize;

    /// True when the moments are correlations (only j < l elements have sampling variance).
    fn is_correlation(&self) -> bool;

    /// The sampling covariance matrix of `elements`, in that order (symmetric, one row and
    /// column per element). Errors: an item index out of range, j > l, or a diagonal element
    /// of a correlation matrix.
    fn block(&self, elements: &[Element]) -> Result<DMatrix<f64>, StatsError>;

    /// `A' V A` where V is the sampling covariance of `elements` and `a` has one row per
    /// element: the middle of a sandwich. Implementations backed by per-respondent
    /// contributions compute it without forming V; the default forms the block.
    fn sandwich(&self, elements: &[Element], a: &DMatrix<f64>) -> Result<DMatrix<f64>, StatsError> {
        if a.nrows() != elements.len() {
            return Err(StatsError::SizeMismatch {
                what: "sandwich weights",
                expected: elements.len(),
                found: a.nrows(),
            });
        }
        let v = self.block(elements)?;
        Ok(a.transpose() * v * a)
    }
}

/// Checks one element against `p` items and the correlation convention.
pub fn check_element(p: usize, correlation: bool, (j, l): Element) -> Result<(), StatsError> {
    if l >= p {
        return Err(StatsError::OutOfRange { what: "item", index: l, len: p });
    }
    if j > l {
        return Err(StatsError::InvalidInput(format!("element ({j}, {l}) is not ordered j <= l")));
    }
    if correlation && j == l {
        return Err(StatsError::InvalidInput(format!(
            "a correlation matrix has no sampling variance on its diagonal (item {j})"
        )));
    }
    Ok(())
}

/// A full sampling covariance over a fixed list of elements.
#[derive(Debug, Clone, PartialEq)]
pub struct Dense {
    p: usize,
    n_obs: usize,
    correlation: bool,
    index: HashMap<Element, usize>,
    matrix: DMatrix<f64>,
}

impl Dense {
    /// `matrix` is the sampling covariance of `elements` (in that order).
    pub fn new(
        p: usize,
        n_obs: usize,
        correlation: bool,
        elements: &[Element],
        matrix: DMatrix<f64>,
    ) -> Result<Self, StatsError> {
        if matrix.nrows() != elements.len() || matrix.ncols() != elements.len() {
            return Err(StatsError::SizeMismatch {
                what: "dense sampling covariance",
                expected: elements.len(),
                found: matrix.nrows(),
            });
        }
        let mut index = HashMap::with_capacity(elements.len());
        for (k, &e) in elements.iter().enumerate() {
            check_element(p, correlation, e)?;
            if index.insert(e, k).is_some() {
                return Err(StatsError::InvalidInput(format!("element {e:?} listed twice")));
            }
        }
        Ok(Self { p, n_obs, correlation, index, matrix })
    }
}

impl SamplingCovariance for Dense {
    fn n_items(&self) -> usize {
        self.p
    }

    fn n_obs(&self) -> usize {
        self.n_obs
    }

    fn is_correlation(&self) -> bool {
        self.correlation
    }

    fn block(&self, elements: &[Element]) -> Result<DMatrix<f64>, StatsError> {
        let at: Vec<usize> = elements
            .iter()
            .map(|&e| {
                check_element(self.p, self.correlation, e)?;
                self.index
                    .get(&e)
                    .copied()
                    .ok_or_else(|| StatsError::InvalidInput(format!("element {e:?} is not held")))
            })
            .collect::<Result<_, _>>()?;
        Ok(DMatrix::from_fn(at.len(), at.len(), |r, c| self.matrix[(at[r], at[c])]))
    }
}

/// Every element (j, l), j <= l (or j < l for a correlation matrix), in row-major order of the
/// upper triangle.
pub fn all_elements(p: usize, correlation: bool) -> Vec<Element> {
    let start = usize::from(correlation);
    (0..p).flat_map(|j| (j + start..p).map(move |l| (j, l))).collect()
}

/// Distribution-free sampling covariance of the sample covariances of complete continuous rows
/// (Browne 1984): with d_i,jl = (x_ij - x̄_j)(x_il - x̄_l),
/// cov(s_jl, s_mr) ≈ (1/n) [ mean_i(d_i,jl d_i,mr) - s_jl s_mr ] (moments with divisor n).
/// `data` is n x p, every value finite.
pub fn adf_covariances(data: &DMatrix<f64>) -> Result<Dense, StatsError> {
    let (n, p) = data.shape();
    if n < 4 {
        return Err(StatsError::InvalidInput(format!("{n} rows are too few for a sampling covariance")));
    }
    if data.iter().any(|v| !v.is_finite()) {
        return Err(StatsError::InvalidInput("the distribution-free sampling covariance needs complete rows".into()));
    }
    let means: Vec<f64> = (0..p).map(|j| data.column(j).sum() / n as f64).collect();
    let elements = all_elements(p, false);
    let k = elements.len();
    let mut d = DMatrix::zeros(n, k);
    for (e, &(j, l)) in elements.iter().enumerate() {
        for i in 0..n {
            d[(i, e)] = (data[(i, j)] - means[j]) * (data[(i, l)] - means[l]);
        }
    }
    let s: Vec<f64> = (0..k).map(|e| d.column(e).sum() / n as f64).collect();
    for e in 0..k {
        for i in 0..n {
            d[(i, e)] -= s[e];
        }
    }
    let gamma = d.transpose() * &d / (n as f64 * n as f64);
    Dense::new(p, n, false, &elements, gamma)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testkit;

    // Under normality Browne's distribution-free matrix estimates the normal-theory one,
    // cov(s_jl, s_mr) = (s_jm s_lr + s_jr s_lm) / n (Anderson 1958, th. 3.4.4); at n = 20,000
    // the two agree to a few percent of the variance.
    #[test]
    fn distribution_free_matches_normal_theory_on_normal_rows() {
        let mut rng = testkit::seeded(7);
        let sigma = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.3, 0.5, 2.0, 0.4, 0.3, 0.4, 1.5]);
        let data = testkit::draw_normal(&sigma, 20_000, &mut rng);
        let adf = adf_covariances(&data).unwrap();
        let s = testkit::sample_cov(&data);
        let n = data.nrows() as f64;
        let elements = all_elements(3, false);
        let block = adf.block(&elements).unwrap();
        for (a, &(j, l)) in elements.iter().enumerate() {
            for (b, &(m, r)) in elements.iter().enumerate() {
                let nt = (s[(j, m)] * s[(l, r)] + s[(j, r)] * s[(l, m)]) / n;
                let scale = (block[(a, a)] * block[(b, b)]).sqrt();
                assert!((block[(a, b)] - nt).abs() < 0.06 * scale, "({j},{l}) x ({m},{r}): {} vs {nt}", block[(a, b)]);
            }
        }
    }

    #[test]
    fn dense_rejects_diagonal_of_a_correlation_and_unknown_elements() {
        let d = Dense::new(3, 100, true, &[(0, 1), (0, 2)], DMatrix::identity(2, 2)).unwrap();
        assert!(d.block(&[(1, 1)]).is_err());
        assert!(d.block(&[(1, 2)]).is_err());
        assert!(d.block(&[(2, 1)]).is_err());
        assert_eq!(d.block(&[(0, 2), (0, 1)]).unwrap(), DMatrix::identity(2, 2));
    }
}
