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
//! `adf_covariances` (distribution-free, Browne 1984, for complete continuous rows),
//! `Contributions` (distribution-free from each respondent's contribution: Pearson,
//! polychoric and polyserial correlations with pairwise-present rows, or covariances; blocks and
//! sandwiches from row blocks, never the full matrix), `NormalTheory` (from a summary matrix and
//! n, no rows).

mod contributions;
mod normal;
mod ordinal;

use std::collections::HashMap;
use std::ops::Range;

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

    /// The number of respondents' rows behind `contributions`; `None` when the sampling
    /// covariance does not come from rows (normal theory from a summary matrix, `Dense`).
    fn rows(&self) -> Option<usize> {
        None
    }

    /// Per-respondent contributions c_i of `elements` for the respondents `rows` (one matrix
    /// row per respondent, one column per element), such that the sampling covariance of any
    /// two elements is Σ_i c_ie c_if over all rows `0..rows()`: summing `C' C` over row ranges
    /// that partition the rows gives `block`, and `C A` the rows of a sandwich. A respondent
    /// outside an element's pair-complete rows contributes 0 to it. For adjusted statistics
    /// that need traces of U V (U V) without V: tr(U V) = Σ_i c_i' U c_i. `Ok(None)` when the
    /// implementation has no rows (the default). Errors: an invalid element, a range past
    /// `rows()`.
    fn contributions(&self, elements: &[Element], rows: Range<usize>) -> Result<Option<DMatrix<f64>>, StatsError> {
        for &e in elements {
            check_element(self.n_items(), self.is_correlation(), e)?;
        }
        let _ = rows;
        Ok(None)
    }
}

pub use contributions::Contributions;
pub use normal::NormalTheory;

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
    use crate::mixed;
    use crate::polychoric::OrdinalFit;
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

    fn continuous(data: &DMatrix<f64>) -> Vec<Vec<f64>> {
        (0..data.ncols()).map(|j| data.column(j).iter().copied().collect()).collect()
    }

    // With complete rows the contributions reproduce Browne's (1984) matrix exactly (the same
    // formula summed another way), and A' V A by row blocks equals A' (block) A.
    #[test]
    fn covariance_contributions_equal_browne_and_sandwich_equals_block() {
        let mut rng = testkit::seeded(11);
        let sigma = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.3, 0.5, 2.0, 0.4, 0.3, 0.4, 1.5]);
        let data = testkit::draw_normal(&sigma, 5_000, &mut rng);
        let cols = continuous(&data);
        let views: Vec<&[f64]> = cols.iter().map(Vec::as_slice).collect();
        let c = Contributions::covariances(&views).unwrap();
        let elements = all_elements(3, false);
        let want = adf_covariances(&data).unwrap().block(&elements).unwrap();
        let got = c.block(&elements).unwrap();
        assert!((&got - &want).amax() < 1e-12 * want.amax(), "{got} vs {want}");
        assert_eq!((c.n_obs(), c.rows(), c.is_correlation()), (5_000, Some(5_000), false));
        let a = DMatrix::from_fn(6, 2, |r, k| (r as f64 - 2.0) * 0.3 + k as f64);
        let sandwich = c.sandwich(&elements, &a).unwrap();
        let direct = a.transpose() * &got * &a;
        assert!((&sandwich - &direct).amax() < 1e-12 * direct.amax());
        // The contributions over a split of the rows sum to the block.
        let top = c.contributions(&elements, 0..1_234).unwrap().unwrap();
        let rest = c.contributions(&elements, 1_234..5_000).unwrap().unwrap();
        let summed = top.transpose() * &top + rest.transpose() * &rest;
        assert!((&summed - &got).amax() < 1e-12 * got.amax());
        assert!(c.contributions(&elements, 0..5_001).is_err());
        assert!(c.block(&[(2, 3)]).is_err());
        assert!(NormalTheory::covariances(&sigma, 100).unwrap().contributions(&elements, 0..10).unwrap().is_none());
    }

    // On normal rows the distribution-free sampling covariance of Pearson correlations estimates
    // the normal-theory one (Olkin & Siotani 1976); at n = 20,000 within a few percent of the
    // variances. Also: the normal-theory variance is (1 - r²)²/n (Fisher 1915), blocks do not
    // depend on the thread count, and missing values enter per pair.
    #[test]
    fn pearson_contributions_match_normal_theory_on_normal_rows() {
        let mut rng = testkit::seeded(5);
        let sigma = DMatrix::from_row_slice(
            4,
            4,
            &[1.0, 0.6, 0.4, 0.3, 0.6, 1.0, 0.5, 0.2, 0.4, 0.5, 1.0, 0.45, 0.3, 0.2, 0.45, 1.0],
        );
        let data = testkit::draw_normal(&sigma, 20_000, &mut rng);
        let cols = continuous(&data);
        let columns: Vec<mixed::Column> = cols.iter().map(|c| mixed::Column::Continuous(c.as_slice().into())).collect();
        let est = mixed::mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
        let df = Contributions::correlations(&columns, &est).unwrap();
        let nt = NormalTheory::correlations(&est.matrix, 20_000).unwrap();
        let elements = all_elements(4, true);
        let (a, b) = (df.block(&elements).unwrap(), nt.block(&elements).unwrap());
        for e in 0..elements.len() {
            for f in 0..elements.len() {
                let scale = (b[(e, e)] * b[(f, f)]).sqrt();
                assert!(
                    (a[(e, f)] - b[(e, f)]).abs() < 0.08 * scale,
                    "{:?} {:?}: {} vs {}",
                    elements[e],
                    elements[f],
                    a[(e, f)],
                    b[(e, f)]
                );
            }
            let r = est.matrix[(elements[e].0, elements[e].1)];
            assert!((b[(e, e)] - (1.0 - r * r).powi(2) / 20_000.0).abs() < 1e-15);
        }
        let one =
            rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap().install(|| df.block(&elements).unwrap());
        assert_eq!(one, a);
        // Missing values: a pair's variance grows as its n shrinks (about n_full / n_pair).
        let mut holes = cols.clone();
        for v in holes[0].iter_mut().step_by(2) {
            *v = f64::NAN;
        }
        let columns: Vec<mixed::Column> =
            holes.iter().map(|c| mixed::Column::Continuous(c.as_slice().into())).collect();
        let est = mixed::mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
        let gappy = Contributions::correlations(&columns, &est).unwrap();
        assert_eq!(gappy.n_obs(), 10_000);
        let v = gappy.block(&[(0, 1), (2, 3)]).unwrap();
        assert!((v[(0, 0)] / a[(0, 0)] - 2.0).abs() < 0.15, "{}", v[(0, 0)] / a[(0, 0)]);
        assert!((v[(1, 1)] / a[(5, 5)] - 1.0).abs() < 0.01);
    }

    // Reference: tests/reference/acov/make_acov.py (numpy/scipy, its own estimates): each
    // pair's two-step estimator as stacked estimating equations with numerically differentiated
    // Jacobians — Pearson (Browne 1984), polychoric (Olsson 1979) and polyserial (Olsson,
    // Drasgow & Dorans 1982) with the thresholds' and moments' estimation accounted for
    // (Muthén 1984; Jöreskog 1994) — on 300 rows with missing values, binary items and an empty
    // category. Every entry of the 28 x 28 V to 1e-4 of the entries' scale (measured: 2e-9);
    // the normal-theory V of the same correlations to 1e-10.
    #[test]
    fn mixed_contributions_match_numpy_reference() {
        let fx: serde_json::Value = crate::reference!("acov/acov.json");
        let levels: Vec<usize> =
            fx["levels"].as_array().unwrap().iter().map(|v| v.as_u64().unwrap() as usize).collect();
        let columns: Vec<mixed::Column> = fx["columns"]
            .as_array()
            .unwrap()
            .iter()
            .zip(fx["kinds"].as_array().unwrap())
            .zip(&levels)
            .map(|((col, kind), &levels)| {
                let values = col.as_array().unwrap();
                if kind == "ordinal" {
                    let codes: Vec<u8> =
                        values.iter().map(|v| v.as_u64().map_or(mixed::MISSING_CODE, |c| c as u8)).collect();
                    mixed::Column::Ordinal { codes: codes.into(), levels }
                } else {
                    mixed::Column::Continuous(
                        values.iter().map(|v| v.as_f64().unwrap_or(f64::NAN)).collect::<Vec<_>>().into(),
                    )
                }
            })
            .collect();
        let est = mixed::mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
        let elements: Vec<Element> = fx["elements"]
            .as_array()
            .unwrap()
            .iter()
            .map(|e| (e[0].as_u64().unwrap() as usize, e[1].as_u64().unwrap() as usize))
            .collect();
        for (e, rho) in elements.iter().zip(fx["rho"].as_array().unwrap()) {
            assert!((est.matrix[*e] - rho.as_f64().unwrap()).abs() < 1e-7, "{e:?}");
        }
        let want: Vec<Vec<f64>> = serde_json::from_value(fx["v"].clone()).unwrap();
        let got = Contributions::correlations(&columns, &est).unwrap().block(&elements).unwrap();
        let mut worst = 0.0_f64;
        for a in 0..elements.len() {
            for b in 0..elements.len() {
                let scale = (want[a][a] * want[b][b]).sqrt();
                worst = worst.max((got[(a, b)] - want[a][b]).abs() / scale);
                assert!(
                    (got[(a, b)] - want[a][b]).abs() < 1e-4 * scale,
                    "{:?} x {:?}: {} vs {}",
                    elements[a],
                    elements[b],
                    got[(a, b)],
                    want[a][b]
                );
            }
        }
        eprintln!("largest deviation from the reference: {worst:.2e} of the entries' scale");
        // Normal theory (Olkin & Siotani 1976's closed form) against the fixture's Wishart
        // moments carried through the correlations' Jacobian, at the fixture's correlations.
        let p = levels.len();
        let mut r = DMatrix::identity(p, p);
        for (&(j, l), rho) in elements.iter().zip(fx["rho"].as_array().unwrap()) {
            r[(j, l)] = rho.as_f64().unwrap();
            r[(l, j)] = r[(j, l)];
        }
        let normal: Vec<Vec<f64>> = serde_json::from_value(fx["v_normal"].clone()).unwrap();
        let nt = NormalTheory::correlations(&r, 300).unwrap().block(&elements).unwrap();
        for a in 0..elements.len() {
            for b in 0..elements.len() {
                let scale = (normal[a][a] * normal[b][b]).sqrt();
                assert!((nt[(a, b)] - normal[a][b]).abs() < 1e-10 * scale, "{:?} x {:?}", elements[a], elements[b]);
            }
        }
        // The same figures with one rayon thread (chunks are summed in a fixed order).
        let contributions = Contributions::correlations(&columns, &est).unwrap();
        let a = DMatrix::from_fn(elements.len(), 3, |r, c| ((r * 5 + c) % 7) as f64 - 3.0);
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap()
            .install(|| (contributions.block(&elements).unwrap(), contributions.sandwich(&elements, &a).unwrap()));
        assert_eq!(one, (got, contributions.sandwich(&elements, &a).unwrap()));
    }

    /// `n` rows of ordinal answers from a one-factor model (item = λF + √(1-λ²)e cut at `cuts`).
    fn ordinal_columns(
        n: usize,
        loadings: &[f64],
        cuts: &[f64],
        continuous_first: bool,
        rng: &mut impl rand::Rng,
    ) -> Vec<mixed::Column<'static>> {
        use rand_distr::{Distribution, StandardNormal};
        let mut codes = vec![Vec::with_capacity(n); loadings.len()];
        let mut first = Vec::with_capacity(n);
        for _ in 0..n {
            let f: f64 = StandardNormal.sample(rng);
            for (k, &l) in loadings.iter().enumerate() {
                let e: f64 = StandardNormal.sample(rng);
                let v = l * f + (1.0 - l * l).sqrt() * e;
                if k == 0 {
                    first.push(v);
                }
                codes[k].push(cuts.iter().filter(|&&c| v > c).count() as u8);
            }
        }
        let mut cols: Vec<mixed::Column<'static>> =
            codes.into_iter().map(|c| mixed::Column::Ordinal { codes: c.into(), levels: cuts.len() + 1 }).collect();
        if continuous_first {
            cols[0] = mixed::Column::Continuous(first.into());
        }
        cols
    }

    /// (replicate SD of g'r̂, root mean predicted variance g'Vg) over `reps` samples.
    fn monte_carlo(
        reps: usize,
        n: usize,
        loadings: &[f64],
        cuts: &[f64],
        continuous_first: bool,
        elements: &[Element],
        seed: u64,
    ) -> (f64, f64) {
        let mut rng = testkit::seeded(seed);
        let (mut values, mut predicted) = (Vec::with_capacity(reps), 0.0);
        for _ in 0..reps {
            let cols = ordinal_columns(n, loadings, cuts, continuous_first, &mut rng);
            let est = mixed::mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap();
            let r: Vec<f64> = elements.iter().map(|&e| est.matrix[e]).collect();
            // One correlation, or the tetrad r0 r1 - r2 r3 and its gradient.
            let (value, g) = if elements.len() == 1 {
                (r[0], DMatrix::from_element(1, 1, 1.0))
            } else {
                (r[0] * r[1] - r[2] * r[3], DMatrix::from_column_slice(4, 1, &[r[1], r[0], -r[3], -r[2]]))
            };
            let v = Contributions::correlations(&cols, &est).unwrap().sandwich(elements, &g).unwrap();
            values.push(value);
            predicted += v[(0, 0)] / reps as f64;
        }
        let mean = values.iter().sum::<f64>() / reps as f64;
        let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (reps - 1) as f64).sqrt();
        (sd, predicted.sqrt())
    }

    // Monte Carlo check of the polychoric sampling covariance (Olsson 1979; Muthén 1984): over
    // 300 samples of n = 500 the predicted SD matches the replicate SD within 10% (the replicate
    // SD's own sampling error is about 4%) for a 5-point pair, a binary 80/20 pair and a
    // vanishing tetrad of four 5-point items.
    #[test]
    fn polychoric_sampling_sd_matches_monte_carlo() {
        let five = [-1.5, -0.5, 0.4, 1.3];
        let binary = [0.841_621_233_572_914_2];
        let half = 0.5_f64.sqrt();
        for (what, loadings, cuts, elements) in [
            ("5-point pair", vec![half, half], &five[..], vec![(0, 1)]),
            ("binary pair", vec![half, half], &binary[..], vec![(0, 1)]),
            ("tetrad", vec![0.8, 0.7, 0.6, 0.7], &five[..], vec![(0, 1), (2, 3), (0, 2), (1, 3)]),
        ] {
            let (sd, predicted) = monte_carlo(300, 500, &loadings, cuts, false, &elements, 17);
            eprintln!("{what}: predicted SD / replicate SD = {:.3}", predicted / sd);
            assert!((predicted / sd - 1.0).abs() < 0.10, "{what}: predicted {predicted}, replicate {sd}");
        }
    }

    // The long version: 2,000 samples each (the replicate SD's own error about 1.6%) at n = 500
    // and 2,000, for 5-point symmetric, 5-point skewed (most answers in the top two categories)
    // and binary 80/20 pairs, a polyserial pair and vanishing tetrads; within 5%.
    // cargo test -p construe-stats --release -- --ignored --nocapture polychoric_sampling_sd_matches_monte_carlo_long
    #[test]
    #[ignore = "long calibration"]
    fn polychoric_sampling_sd_matches_monte_carlo_long() {
        let five = [-1.5, -0.5, 0.4, 1.3];
        let skewed = [-2.0, -1.4, -0.7, 0.1];
        let binary = [0.841_621_233_572_914_2];
        let half = 0.5_f64.sqrt();
        let tetrad = vec![(0, 1), (2, 3), (0, 2), (1, 3)];
        let mut worst = 0.0_f64;
        for n in [500, 2_000] {
            for (what, loadings, cuts, continuous, elements) in [
                ("5-point pair", vec![half, half], &five[..], false, vec![(0, 1)]),
                ("skewed 5-point pair", vec![half, half], &skewed[..], false, vec![(0, 1)]),
                ("binary pair", vec![half, half], &binary[..], false, vec![(0, 1)]),
                ("polyserial pair", vec![half, half], &five[..], true, vec![(0, 1)]),
                ("5-point tetrad", vec![0.8, 0.7, 0.6, 0.7], &five[..], false, tetrad.clone()),
                ("skewed tetrad", vec![0.8, 0.7, 0.6, 0.7], &skewed[..], false, tetrad.clone()),
                ("binary tetrad", vec![0.8, 0.7, 0.6, 0.7], &binary[..], false, tetrad.clone()),
            ] {
                let (sd, predicted) = monte_carlo(2_000, n, &loadings, cuts, continuous, &elements, 23);
                eprintln!(
                    "n = {n}, {what}: predicted SD {predicted:.5}, replicate SD {sd:.5}, ratio {:.3}",
                    predicted / sd
                );
                worst = worst.max((predicted / sd - 1.0).abs());
            }
        }
        assert!(worst < 0.05, "largest relative error {worst}");
    }

    // The normal-theory sandwich computed through p x p traces equals A' (block) A, for
    // covariances and correlations, with elements in any order and a subset of them.
    #[test]
    fn normal_theory_sandwich_without_v_equals_the_block_form() {
        let s: DMatrix<f64> = DMatrix::from_row_slice(
            4,
            4,
            &[2.0, 0.6, 0.4, 0.3, 0.6, 1.0, 0.5, 0.2, 0.4, 0.5, 1.5, 0.45, 0.3, 0.2, 0.45, 1.2],
        );
        let sd = DMatrix::from_fn(4, 4, |r, c| s[(r, c)] / (s[(r, r)] * s[(c, c)]).sqrt());
        for (theory, correlation) in [
            (NormalTheory::covariances(&s, 300).unwrap(), false),
            (NormalTheory::correlations(&sd, 300).unwrap(), true),
        ] {
            let mut elements = all_elements(4, correlation);
            elements.reverse();
            elements.pop();
            let a = DMatrix::from_fn(elements.len(), 3, |r, c| ((r * 7 + c * 3) % 5) as f64 - 2.0 + 0.1 * c as f64);
            let direct = a.transpose() * theory.block(&elements).unwrap() * &a;
            let fast = theory.sandwich(&elements, &a).unwrap();
            assert!((&fast - &direct).amax() < 1e-12 * direct.amax(), "{fast} vs {direct}");
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
