//! Product-moment covariances and correlations of item columns with missing values.
//! Central type: `PairwiseMoments` (covariance, correlation and n for every item pair).
//! Conventions: covariances divide by n - 1 (the unbiased estimator, as numpy.cov and R's cov);
//! missing values are `None`. Never imputes: a pair uses only rows where both values are present.

use nalgebra::DMatrix;

use super::StatsError;

/// How rows with missing values are treated when forming a covariance matrix.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Deletion {
    /// Each pair uses every row where both of its items are present (n differs per pair).
    Pairwise,
    /// Only rows where every item is present are used (one n for all pairs).
    Listwise,
}

/// Covariances, correlations and the number of rows behind each pair.
#[derive(Debug, Clone, PartialEq)]
pub struct PairwiseMoments {
    pub covariance: DMatrix<f64>,
    pub correlation: DMatrix<f64>,
    pub n: DMatrix<usize>,
}

/// Sample covariance and correlation of every pair of columns (Pearson 1896), with the mean of
/// each pair taken over that pair's complete rows, as R's `cov(..., use = "pairwise")` does.
/// Divides by n - 1. A column with no variation among a pair's rows is an error naming it.
pub fn pearson(columns: &[Vec<Option<f64>>], deletion: Deletion) -> Result<PairwiseMoments, StatsError> {
    let p = columns.len();
    let rows = columns.first().map_or(0, Vec::len);
    if columns.iter().any(|c| c.len() != rows) {
        return Err(StatsError::InvalidInput("columns of unequal length".into()));
    }
    let keep: Vec<bool> = match deletion {
        Deletion::Pairwise => vec![true; rows],
        Deletion::Listwise => (0..rows).map(|r| columns.iter().all(|c| c[r].is_some())).collect(),
    };
    // Columns with no gap among the kept rows are centred once: for a pair of them the pair's
    // rows are all kept rows, so the per-pair means equal these means (same sums, same order)
    // and the results are bit-identical to the general path, which handles gaps per pair.
    let centred: Vec<Option<Vec<f64>>> = columns
        .iter()
        .map(|c| {
            let values: Option<Vec<f64>> = (0..rows).filter(|&r| keep[r]).map(|r| c[r]).collect();
            values.map(|v| {
                let mean = v.iter().fold(0.0, |acc, x| acc + x) / v.len() as f64;
                v.into_iter().map(|x| x - mean).collect()
            })
        })
        .collect();
    let mut covariance = DMatrix::zeros(p, p);
    let mut correlation = DMatrix::identity(p, p);
    let mut n = DMatrix::zeros(p, p);
    for a in 0..p {
        for b in a..p {
            let (m, (cab, vaa, vbb)) = match (&centred[a], &centred[b]) {
                (Some(ca), Some(cb)) => (ca.len(), centred_dot(ca, cb)),
                _ => {
                    let pairs: Vec<(f64, f64)> =
                        (0..rows).filter(|&r| keep[r]).filter_map(|r| Some((columns[a][r]?, columns[b][r]?))).collect();
                    (pairs.len(), if pairs.len() < 2 { (0.0, 0.0, 0.0) } else { centred_products(&pairs) })
                }
            };
            n[(a, b)] = m;
            n[(b, a)] = m;
            if m < 2 {
                return Err(StatsError::NotEnoughData {
                    what: format!("the covariance of columns {a} and {b}"),
                    needed: 2,
                    found: m,
                });
            }
            covariance[(a, b)] = cab;
            covariance[(b, a)] = cab;
            if a != b {
                if vaa <= 0.0 || vbb <= 0.0 {
                    let which = if vaa <= 0.0 { a } else { b };
                    return Err(StatsError::Constant {
                        what: format!(
                            "column {which} (among the rows it shares with column {})",
                            if which == a { b } else { a }
                        ),
                    });
                }
                let r = cab / (vaa * vbb).sqrt();
                correlation[(a, b)] = r;
                correlation[(b, a)] = r;
            } else if vaa <= 0.0 {
                return Err(StatsError::Constant { what: format!("column {a}") });
            }
        }
    }
    Ok(PairwiseMoments { covariance, correlation, n })
}

/// (cov_ab, var_a, var_b) from two already centred, gap-free columns of equal length.
fn centred_dot(ca: &[f64], cb: &[f64]) -> (f64, f64, f64) {
    let m = ca.len() as f64;
    let (mut cab, mut vaa, mut vbb) = (0.0, 0.0, 0.0);
    for (&da, &db) in ca.iter().zip(cb) {
        cab += da * db;
        vaa += da * da;
        vbb += db * db;
    }
    (cab / (m - 1.0), vaa / (m - 1.0), vbb / (m - 1.0))
}

/// Returns (cov_ab, var_a, var_b) of paired values, two-pass for accuracy (the centred form
/// avoids the cancellation of the one-pass sum-of-squares formula; common practice).
fn centred_products(pairs: &[(f64, f64)]) -> (f64, f64, f64) {
    let m = pairs.len() as f64;
    let (sa, sb) = pairs.iter().fold((0.0, 0.0), |(x, y), &(a, b)| (x + a, y + b));
    let (ma, mb) = (sa / m, sb / m);
    let (mut cab, mut vaa, mut vbb) = (0.0, 0.0, 0.0);
    for &(a, b) in pairs {
        let (da, db) = (a - ma, b - mb);
        cab += da * db;
        vaa += da * da;
        vbb += db * db;
    }
    (cab / (m - 1.0), vaa / (m - 1.0), vbb / (m - 1.0))
}

/// Pearson correlation of two complete slices (n - 1 divisor cancels). Used for single pairs.
pub fn correlation_of(a: &[f64], b: &[f64]) -> Result<f64, StatsError> {
    if a.len() != b.len() {
        return Err(StatsError::InvalidInput("slices of unequal length".into()));
    }
    let pairs: Vec<(f64, f64)> = a.iter().copied().zip(b.iter().copied()).collect();
    if pairs.len() < 2 {
        return Err(StatsError::NotEnoughData { what: "a correlation".into(), needed: 2, found: pairs.len() });
    }
    let (cab, vaa, vbb) = centred_products(&pairs);
    if vaa <= 0.0 || vbb <= 0.0 {
        return Err(StatsError::Constant { what: "one of the two variables".into() });
    }
    Ok(cab / (vaa * vbb).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-computed: x = 1,2,3,4; y = 2,4,5,9. mean x 2.5, mean y 5; sum dx dy = 11,
    // sum dx^2 = 5, sum dy^2 = 26 -> cov 11/3, r = 11 / sqrt(130).
    #[test]
    fn hand_computed_pair() {
        let cols =
            vec![vec![Some(1.0), Some(2.0), Some(3.0), Some(4.0)], vec![Some(2.0), Some(4.0), Some(5.0), Some(9.0)]];
        let m = pearson(&cols, Deletion::Pairwise).unwrap();
        assert!((m.covariance[(0, 1)] - 11.0 / 3.0).abs() < 1e-14);
        assert!((m.correlation[(0, 1)] - 11.0 / 130f64.sqrt()).abs() < 1e-14);
        assert_eq!(m.n[(0, 1)], 4);
    }

    // Pairwise vs listwise differ exactly where a third column's gaps remove rows.
    #[test]
    fn listwise_drops_incomplete_rows() {
        let cols = vec![
            vec![Some(1.0), Some(2.0), Some(3.0), Some(4.0), Some(0.0)],
            vec![Some(2.0), Some(4.0), Some(5.0), Some(9.0), Some(1.0)],
            vec![Some(1.0), Some(0.0), Some(1.0), Some(3.0), None],
        ];
        let pw = pearson(&cols, Deletion::Pairwise).unwrap();
        let lw = pearson(&cols, Deletion::Listwise).unwrap();
        assert_eq!(pw.n[(0, 1)], 5);
        assert_eq!(lw.n[(0, 1)], 4);
        assert!((lw.covariance[(0, 1)] - 11.0 / 3.0).abs() < 1e-14);
    }

    #[test]
    fn constant_column_is_an_error() {
        let cols = vec![vec![Some(1.0), Some(1.0), Some(1.0)], vec![Some(1.0), Some(2.0), Some(3.0)]];
        assert!(matches!(pearson(&cols, Deletion::Pairwise), Err(StatsError::Constant { .. })));
    }
}
