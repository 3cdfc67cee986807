//! Mixed correlation matrix of continuous and ordinal columns with pairwise deletion: per pair
//! Pearson, polychoric or polyserial on the pair's complete rows, computed in parallel over
//! pairs. Central type: `MixedCorrelation`. Results never depend on the rayon thread count
//! (each pair is computed sequentially and collected in pair order), and a failing pair is an
//! error naming both column indices, never a panic. Columns are borrowed (`Cow`), so a caller
//! holding compact codes passes them without a copy.

use std::borrow::Cow;

use super::StatsError;
use super::polychoric::{ContingencyTable, Margin, OrdinalFit, polychoric_table};
use super::polyserial::polyserial;
use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Fewest complete rows a pair needs for any of the three methods.
pub const MIN_PAIR_N: usize = 3;

/// The ordinal code that marks a missing answer.
pub const MISSING_CODE: u8 = u8::MAX;

/// Most categories of an ordinal column (codes 0..=254; 255 is `MISSING_CODE`).
pub const MAX_LEVELS: usize = 255;

/// One column of respondent data, borrowed or owned.
#[derive(Debug, Clone, PartialEq)]
pub enum Column<'a> {
    /// NaN marks missing.
    Continuous(Cow<'a, [f64]>),
    /// Zero-based category codes below `levels` (at most `MAX_LEVELS`); `MISSING_CODE` marks
    /// missing.
    Ordinal { codes: Cow<'a, [u8]>, levels: usize },
}

impl Column<'_> {
    fn len(&self) -> usize {
        match self {
            Column::Continuous(v) => v.len(),
            Column::Ordinal { codes, .. } => codes.len(),
        }
    }
}

/// Which estimator a pair used, chosen from the two column types.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum PairMethod {
    Pearson,
    Polychoric,
    Polyserial,
}

/// An empty category of `column` among the pair's complete rows, merged into `into`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct ColumnMerge {
    pub column: usize,
    pub empty: u32,
    pub into: u32,
}

/// The estimate for columns `first` < `second`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PairEstimate {
    pub first: usize,
    pub second: usize,
    pub method: PairMethod,
    pub rho: f64,
    /// Pearson: large-sample normal-theory (1 - r²)/√n; polychoric/polyserial: from the
    /// observed information (see those modules); `None` where undefined (ρ at the bound).
    pub se: Option<f64>,
    /// Complete rows of the pair.
    pub n: usize,
    pub merged: Vec<ColumnMerge>,
    /// Newton iterations (0 for Pearson).
    pub iterations: usize,
    /// Polychoric/polyserial ρ reached ±`MAX_CORRELATION`.
    pub at_bound: bool,
}

/// Result of `mixed_correlation`. (No serde derive: nalgebra is built without its serde
/// feature; steps/ copies the matrices into its artifact.)
#[derive(Debug, Clone, PartialEq)]
pub struct MixedCorrelation {
    /// Correlation matrix, unit diagonal, symmetric.
    pub matrix: DMatrix<f64>,
    /// Complete rows per pair; the diagonal holds each column's non-missing count.
    pub n: DMatrix<usize>,
    /// One entry per pair (first < second), in row-major order of the upper triangle.
    pub pairs: Vec<PairEstimate>,
}

/// Mixed correlation matrix with pairwise deletion.
///
/// Per pair of columns, on the rows where both are present: two continuous -> Pearson's
/// sample correlation r = Σ(x-x̄)(y-ȳ) / √(Σ(x-x̄)² Σ(y-ȳ)²) (divisor n - 1 cancels); two
/// ordinal -> polychoric (Olsson 1979) from the pair's contingency table, built in one O(n)
/// pass; one of each -> polyserial (Olsson, Drasgow & Dorans 1982). `fit` selects the two-step
/// or joint estimator for the ordinal methods. Pairs run in parallel on the current rayon pool.
///
/// Errors: columns of unequal length, an infinite continuous value, an ordinal code outside
/// its levels, zero or more than `MAX_LEVELS` levels -> `InvalidInput`; a pair with fewer than `MIN_PAIR_N` complete
/// rows, a variable constant within the pair, or a non-converging fit -> `StatsError::Pair`
/// for the first such pair in row-major order (the same pair whatever the thread count).
pub fn mixed_correlation(columns: &[Column<'_>], fit: OrdinalFit) -> Result<MixedCorrelation, StatsError> {
    check(columns)?;
    let p = columns.len();
    let pairs: Vec<(usize, usize)> = (0..p).flat_map(|i| (i + 1..p).map(move |j| (i, j))).collect();
    let results: Vec<Result<PairEstimate, StatsError>> = pairs
        .par_iter()
        .map(|&(i, j)| {
            pair_estimate(columns, i, j, fit).map_err(|e| StatsError::Pair { first: i, second: j, source: Box::new(e) })
        })
        .collect();
    let mut matrix = DMatrix::<f64>::identity(p, p);
    let mut n = DMatrix::<usize>::zeros(p, p);
    for (i, col) in columns.iter().enumerate() {
        n[(i, i)] = match col {
            Column::Continuous(v) => v.iter().filter(|x| !x.is_nan()).count(),
            Column::Ordinal { codes, .. } => codes.iter().filter(|&&x| x != MISSING_CODE).count(),
        };
    }
    let mut estimates = Vec::with_capacity(results.len());
    for result in results {
        let est = result?;
        let (i, j) = (est.first, est.second);
        matrix[(i, j)] = est.rho;
        matrix[(j, i)] = est.rho;
        n[(i, j)] = est.n;
        n[(j, i)] = est.n;
        estimates.push(est);
    }
    Ok(MixedCorrelation { matrix, n, pairs: estimates })
}

/// The input checks, without copying any column.
fn check(columns: &[Column<'_>]) -> Result<(), StatsError> {
    let rows = columns.first().map_or(0, Column::len);
    for (c, col) in columns.iter().enumerate() {
        if col.len() != rows {
            return Err(StatsError::InvalidInput(format!("column {c} has {} rows, column 0 has {rows}", col.len())));
        }
        match col {
            Column::Continuous(v) => {
                if let Some(r) = v.iter().position(|x| x.is_infinite()) {
                    return Err(StatsError::InvalidInput(format!("column {c} row {r}: value is not finite")));
                }
            }
            Column::Ordinal { codes, levels } => {
                if *levels == 0 || *levels > MAX_LEVELS {
                    return Err(StatsError::InvalidInput(format!(
                        "ordinal column {c} has {levels} levels; it needs 1 to {MAX_LEVELS}"
                    )));
                }
                if let Some(r) = codes.iter().position(|&x| x != MISSING_CODE && x as usize >= *levels) {
                    return Err(StatsError::InvalidInput(format!(
                        "column {c} row {r}: code {} outside {levels} levels",
                        codes[r]
                    )));
                }
            }
        }
    }
    Ok(())
}

fn too_few(what: &str, found: usize) -> Result<(), StatsError> {
    if found < MIN_PAIR_N {
        return Err(StatsError::NotEnoughData { what: what.into(), needed: MIN_PAIR_N, found });
    }
    Ok(())
}

fn pair_estimate(cols: &[Column<'_>], i: usize, j: usize, fit: OrdinalFit) -> Result<PairEstimate, StatsError> {
    match (&cols[i], &cols[j]) {
        (Column::Continuous(x), Column::Continuous(y)) => {
            let (xs, ys): (Vec<f64>, Vec<f64>) =
                x.iter().zip(y.iter()).filter(|(a, b)| !a.is_nan() && !b.is_nan()).map(|(a, b)| (*a, *b)).unzip();
            too_few("pearson correlation", xs.len())?;
            let rho = pearson(&xs, &ys)?;
            let n = xs.len();
            Ok(PairEstimate {
                first: i,
                second: j,
                method: PairMethod::Pearson,
                rho,
                se: Some((1.0 - rho * rho) / (n as f64).sqrt()),
                n,
                merged: Vec::new(),
                iterations: 0,
                at_bound: false,
            })
        }
        (Column::Ordinal { codes: x, levels: lx }, Column::Ordinal { codes: y, levels: ly }) => {
            let complete = x
                .iter()
                .zip(y.iter())
                .filter(|(a, b)| **a != MISSING_CODE && **b != MISSING_CODE)
                .map(|(a, b)| (u32::from(*a), u32::from(*b)));
            let table = ContingencyTable::from_pairs(complete, *lx, *ly)?;
            let n = usize::try_from(table.total()).unwrap_or(usize::MAX);
            too_few("polychoric correlation", n)?;
            let est = polychoric_table(&table, fit)?;
            let merged = est
                .merged
                .iter()
                .map(|m| ColumnMerge {
                    column: if m.margin == Margin::First { i } else { j },
                    empty: m.empty,
                    into: m.into,
                })
                .collect();
            Ok(PairEstimate {
                first: i,
                second: j,
                method: PairMethod::Polychoric,
                rho: est.rho,
                se: est.se,
                n: est.n,
                merged,
                iterations: est.iterations,
                at_bound: est.at_bound,
            })
        }
        (Column::Continuous(x), Column::Ordinal { codes: y, levels }) => {
            polyserial_pair(x, y, *levels, j, fit).map(|e| PairEstimate { first: i, second: j, ..e })
        }
        (Column::Ordinal { codes: y, levels }, Column::Continuous(x)) => {
            polyserial_pair(x, y, *levels, i, fit).map(|e| PairEstimate { first: i, second: j, ..e })
        }
    }
}

/// Polyserial on the complete rows; `ordinal_column` names the ordinal column for merges.
fn polyserial_pair(
    x: &[f64],
    y: &[u8],
    levels: usize,
    ordinal_column: usize,
    fit: OrdinalFit,
) -> Result<PairEstimate, StatsError> {
    let (xs, ys): (Vec<f64>, Vec<u32>) =
        x.iter().zip(y).filter(|(a, b)| !a.is_nan() && **b != MISSING_CODE).map(|(a, b)| (*a, u32::from(*b))).unzip();
    too_few("polyserial correlation", xs.len())?;
    let est = polyserial(&xs, &ys, levels, fit)?;
    Ok(PairEstimate {
        first: 0,
        second: 0,
        method: PairMethod::Polyserial,
        rho: est.rho,
        se: est.se,
        n: est.n,
        merged: est
            .merged
            .iter()
            .map(|m| ColumnMerge { column: ordinal_column, empty: m.empty, into: m.into })
            .collect(),
        iterations: est.iterations,
        at_bound: est.at_bound,
    })
}

/// Pearson's r by two passes (means first, then centred sums) for accuracy; clamped to
/// [-1, 1] against rounding. `Constant` when either variable has zero variance.
fn pearson(x: &[f64], y: &[f64]) -> Result<f64, StatsError> {
    let n = x.len() as f64;
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        let (da, db) = (a - mx, b - my);
        sxy += da * db;
        sxx += da * da;
        syy += db * db;
    }
    if sxx <= 0.0 {
        return Err(StatsError::Constant { what: "first continuous variable".into() });
    }
    if syy <= 0.0 {
        return Err(StatsError::Constant { what: "second continuous variable".into() });
    }
    Ok((sxy / (sxx * syy).sqrt()).clamp(-1.0, 1.0))
}

/// The covariance matrix on the items' response scales from their mixed correlations:
/// product-moment covariances among continuous items (`continuous` lists their indices in
/// ascending order, `moments` is their covariance matrix in that order), each item's own
/// `variance` on the diagonal, and r_ab · sd_a · sd_b elsewhere — the scaling of the
/// latent-response correlation to the observed response scale (common practice; Jöreskog 1994).
pub fn response_scale_covariance(
    correlation: &DMatrix<f64>,
    continuous: &[usize],
    moments: Option<&DMatrix<f64>>,
    variance: &[f64],
) -> DMatrix<f64> {
    let p = correlation.nrows();
    let sd: Vec<f64> = variance.iter().map(|v| v.sqrt()).collect();
    DMatrix::from_fn(p, p, |a, b| {
        match (continuous.iter().position(|&c| c == a), continuous.iter().position(|&c| c == b), moments) {
            (Some(i), Some(j), Some(m)) => m[(i, j)],
            _ if a == b => variance[a],
            _ => correlation[(a, b)] * sd[a] * sd[b],
        }
    })
}

#[cfg(test)]
mod tests {

    // Hand-computed: two continuous items (0, 2) keep their product moments, the ordinal item
    // 1 gets r * sd * sd with both variances, and every diagonal is the item's variance.
    #[test]
    fn response_scale_covariance_by_hand() {
        let r = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.2, 0.5, 1.0, 0.4, 0.2, 0.4, 1.0]);
        let m = DMatrix::from_row_slice(2, 2, &[4.0, 0.7, 0.7, 9.0]);
        let c = response_scale_covariance(&r, &[0, 2], Some(&m), &[4.0, 0.25, 9.0]);
        assert_eq!(c[(0, 2)], 0.7);
        assert_eq!(c[(0, 1)], 0.5 * 2.0 * 0.5);
        assert_eq!(c[(1, 2)], 0.4 * 0.5 * 3.0);
        assert_eq!((c[(0, 0)], c[(1, 1)], c[(2, 2)]), (4.0, 0.25, 9.0));
        assert_eq!(c, c.transpose());
    }
    use super::*;
    use crate::polychoric::polychoric;
    use crate::testkit::one_factor_columns;

    // Reference: R 4.2.2 cor(cbind(a, b, d), use = "pairwise.complete.obs") on the data
    // below (printed with 17 digits).
    #[test]
    fn pearson_pairwise_matches_r() {
        let col = |v: [f64; 8]| Column::Continuous(v.to_vec().into());
        let nan = f64::NAN;
        let cols = [
            col([1.5, 2.0, nan, 7.0, 3.0, 4.5, 6.0, 2.5]),
            col([2.0, 1.0, 5.0, 8.0, nan, 3.0, 7.5, 1.0]),
            col([0.3, nan, 1.1, 2.9, 0.8, 1.7, nan, 0.2]),
        ];
        let m = mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap();
        let want = [(0, 1, 0.936_677_593_754_682_5), (0, 2, 0.979_487_707_143_206_3), (1, 2, 0.893_929_762_946_363_6)];
        for (i, j, w) in want {
            assert!((m.matrix[(i, j)] - w).abs() < 1e-14);
            assert_eq!(m.matrix[(i, j)], m.matrix[(j, i)]);
        }
        assert_eq!(m.n[(0, 1)], 6);
        assert_eq!(m.n[(0, 0)], 7);
        assert!(m.pairs.iter().all(|p| p.method == PairMethod::Pearson));
    }

    // Each entry equals the stand-alone estimator on the pair's complete rows (those are
    // checked against R's polycor in their modules), and the assembly is identical with 1 and
    // 2 rayon threads.
    #[test]
    fn mixed_matrix_is_consistent_and_thread_count_invariant() {
        let cols = one_factor_columns(600, 6, 2, 0.05, 3);
        let run = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap())
        };
        let one = run(1);
        let two = run(2);
        assert_eq!(one, two);
        assert_eq!(one.pairs.len(), 15);
        for i in 0..6 {
            assert_eq!(one.matrix[(i, i)], 1.0);
        }
        let method = |i: usize, j: usize| one.pairs.iter().find(|p| p.first == i && p.second == j);
        assert_eq!(method(0, 1).unwrap().method, PairMethod::Pearson);
        assert_eq!(method(1, 2).unwrap().method, PairMethod::Polyserial);
        assert_eq!(method(2, 3).unwrap().method, PairMethod::Polychoric);
        let Column::Ordinal { codes: a, .. } = &cols[2] else { unreachable!() };
        let Column::Ordinal { codes: b, .. } = &cols[4] else { unreachable!() };
        let (x, y): (Vec<u32>, Vec<u32>) = a
            .iter()
            .zip(b.iter())
            .filter(|(p, q)| **p != MISSING_CODE && **q != MISSING_CODE)
            .map(|(p, q)| (u32::from(*p), u32::from(*q)))
            .unzip();
        let direct = polychoric(&x, &y, 5, 5, OrdinalFit::TwoStep).unwrap();
        let pair = method(2, 4).unwrap();
        assert_eq!(pair.rho, direct.rho);
        assert_eq!(pair.n, x.len());
        assert_eq!(one.n[(2, 4)], x.len());
        // Ordinal first, continuous second: the polyserial is symmetric in which comes first.
        let swapped: Vec<Column> = vec![cols[3].clone(), cols[0].clone()];
        let s = mixed_correlation(&swapped, OrdinalFit::TwoStep).unwrap();
        assert_eq!(s.matrix[(0, 1)], one.matrix[(0, 3)]);
        let full = mixed_correlation(&cols, OrdinalFit::Full).unwrap();
        assert!((full.matrix - &one.matrix).amax() < 0.02);
    }

    #[test]
    fn pair_errors_name_the_pair() {
        let mut cols = one_factor_columns(50, 3, 1, 0.0, 5);
        // Column 2 is constant on the rows where column 1 is present.
        let Column::Ordinal { codes, .. } = &mut cols[1] else { unreachable!() };
        for c in codes.to_mut().iter_mut().skip(10) {
            *c = MISSING_CODE;
        }
        cols[2] = Column::Ordinal { codes: (0..50).map(|r| u8::from(r >= 10)).collect(), levels: 2 };
        let err = mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap_err();
        match err {
            StatsError::Pair { first, second, source } => {
                assert_eq!((first, second), (1, 2));
                assert!(matches!(*source, StatsError::Constant { .. }));
            }
            other => panic!("unexpected {other:?}"),
        }
        let bad = vec![Column::Continuous(vec![1.0, f64::INFINITY].into()), Column::Continuous(vec![1.0, 2.0].into())];
        assert!(matches!(mixed_correlation(&bad, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
        let short = vec![
            Column::Continuous(vec![1.0, 2.0, 3.0].into()),
            Column::Ordinal { codes: vec![0, 1].into(), levels: 2 },
        ];
        assert!(matches!(mixed_correlation(&short, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
        let outside = vec![
            Column::Continuous(vec![1.0, 2.0, 3.0].into()),
            Column::Ordinal { codes: vec![0, 1, 2].into(), levels: 2 },
        ];
        assert!(matches!(mixed_correlation(&outside, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
        let too_many = vec![Column::Ordinal { codes: vec![0, 1, 2].into(), levels: 256 }];
        assert!(matches!(mixed_correlation(&too_many, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
    }

    #[test]
    fn merges_carry_the_column_index() {
        let mut cols = one_factor_columns(400, 3, 1, 0.0, 9);
        // Recode column 2 so that category 1 never occurs.
        let Column::Ordinal { codes, .. } = &mut cols[2] else { unreachable!() };
        for c in codes.to_mut().iter_mut() {
            if *c == 1 {
                *c = 0;
            }
        }
        let m = mixed_correlation(&cols, OrdinalFit::TwoStep).unwrap();
        for p in &m.pairs {
            if p.second == 2 {
                assert_eq!(p.merged, vec![ColumnMerge { column: 2, empty: 1, into: 2 }]);
            } else {
                assert!(p.merged.is_empty());
            }
        }
    }
}
