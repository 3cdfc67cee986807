//! `Contributions`: a distribution-free sampling covariance held as each respondent's
//! contribution to each estimate, never as a k x k matrix. For element e estimated on its
//! pair's complete rows (n_e of them), respondent i contributes c_ie = IF_e(i) / n_e (0 when i
//! lacks either item), IF_e the estimate's empirical influence function; then
//! cov(ê, f̂) ≈ Σ_i c_ie c_if, which for pairwise-present data weighs the overlap of the two
//! pairs' rows by 1/(n_e n_f) as it should. A block of b elements costs O(n b²) and a sandwich
//! A' V A with m columns O(n b m), both by matrix products over row blocks.
//!
//! Determinism: rows are cut into chunks whose size depends only on the number of elements;
//! chunks are summed in chunk order (in batches computed in parallel), so results do not
//! depend on the rayon thread count.

use std::ops::Range;

use nalgebra::DMatrix;
use rayon::prelude::*;

use super::ordinal::{Polyserial, polychoric_table};
use super::{Element, SamplingCovariance, check_element};
use crate::StatsError;
use crate::mixed::{Column, MIN_PAIR_N, MISSING_CODE, MixedCorrelation};

/// Values (rows x elements) per chunk of the contribution matrix: 16 MB, but at least
/// `MIN_CHUNK_ROWS` rows, so that a sandwich's weights (packed once per chunk by the matrix
/// product) are reused over enough rows; at most `MAX_CHUNK_ROWS`.
const CHUNK_VALUES: usize = 2_000_000;
const MIN_CHUNK_ROWS: usize = 128;
const MAX_CHUNK_ROWS: usize = 4096;
/// Chunks computed in parallel before their partial sums are added in order (this bounds the
/// memory in flight: at most `BATCH` chunks at once).
const BATCH: usize = 8;

/// One item's rows, owned.
#[derive(Debug, Clone)]
enum Data {
    /// NaN marks missing.
    Continuous(Vec<f64>),
    /// `MISSING_CODE` marks missing.
    Ordinal(Vec<u8>),
}

/// How one element's contributions are computed from its two items' rows.
#[derive(Debug, Clone)]
enum Kernel {
    /// Pearson r: IF = z_j z_l - r (z_j² + z_l²)/2 with z standardised by the pair's own
    /// means and standard deviations (divisor n).
    Pearson { mean: [f64; 2], sd: [f64; 2], r: f64, inv_n: f64 },
    /// Covariance (or variance when j = l) with divisor n: IF = (x_j - x̄_j)(x_l - x̄_l) - s.
    Covariance { mean: [f64; 2], s: f64, inv_n: f64 },
    /// Polychoric: IF / n per (code_j, code_l), row-major with `levels` columns.
    Table { levels: usize, values: Vec<f64> },
    /// Polyserial; `continuous_first` when item j is the continuous one.
    Polyserial { kernel: Box<Polyserial>, continuous_first: bool },
}

/// Distribution-free sampling covariance from per-respondent contributions (see the module
/// documentation). Built by `correlations` (Pearson, polychoric, polyserial; pairwise-present
/// rows) or `covariances` (product-moment covariances and variances of continuous columns).
#[derive(Debug, Clone)]
pub struct Contributions {
    p: usize,
    rows: usize,
    n_obs: usize,
    correlation: bool,
    data: Vec<Data>,
    /// Indexed j * p + l for j <= l.
    kernels: Vec<Option<Kernel>>,
}

fn pair_error(j: usize, l: usize) -> impl FnOnce(StatsError) -> StatsError {
    move |e| StatsError::Pair { first: j, second: l, source: Box::new(e) }
}

/// Mean and standard deviation (divisor n) of the pair's complete rows, and their count.
fn pair_moments(x: &[f64], y: &[f64]) -> ([f64; 2], [f64; 2], usize) {
    let (mut n, mut sx, mut sy) = (0_usize, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        if !a.is_nan() && !b.is_nan() {
            n += 1;
            sx += a;
            sy += b;
        }
    }
    let nf = n as f64;
    let mean = [sx / nf, sy / nf];
    let (mut vx, mut vy) = (0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        if !a.is_nan() && !b.is_nan() {
            vx += (a - mean[0]).powi(2);
            vy += (b - mean[1]).powi(2);
        }
    }
    (mean, [(vx / nf).sqrt(), (vy / nf).sqrt()], n)
}

fn enough(what: &str, n: usize) -> Result<(), StatsError> {
    if n < MIN_PAIR_N {
        return Err(StatsError::NotEnoughData { what: what.into(), needed: MIN_PAIR_N, found: n });
    }
    Ok(())
}

impl Contributions {
    /// Correlations (elements j < l) of mixed columns with pairwise-present rows: per pair
    /// Pearson (distribution-free influence of r), polychoric or polyserial (two-step, thresholds
    /// and the continuous variable's moments accounted for; see `ordinal`), chosen from the
    /// columns' types as `mixed::mixed_correlation` does. The correlations are `estimate`'s
    /// (not refitted); thresholds and moments are recomputed from each pair's complete rows,
    /// merging empty categories as the estimator does. Pairs run in parallel.
    ///
    /// Errors: columns of unequal length or a count different from the estimate's; for the
    /// first failing pair in row-major order, `StatsError::Pair` (too few rows, a constant
    /// variable, a likelihood without negative curvature at the estimate).
    pub fn correlations(columns: &[Column<'_>], estimate: &MixedCorrelation) -> Result<Contributions, StatsError> {
        let p = columns.len();
        if estimate.matrix.nrows() != p {
            return Err(StatsError::SizeMismatch {
                what: "columns for the estimated correlations",
                expected: estimate.matrix.nrows(),
                found: p,
            });
        }
        let data = owned(columns)?;
        let rows = data.first().map_or(0, len);
        let pairs: Vec<Element> = (0..p).flat_map(|j| (j + 1..p).map(move |l| (j, l))).collect();
        let built: Vec<Result<(Kernel, usize), StatsError>> = pairs
            .par_iter()
            .map(|&(j, l)| {
                let rho = estimate.matrix[(j, l)];
                correlation_kernel(&data[j], &data[l], columns, j, l, rho).map_err(pair_error(j, l))
            })
            .collect();
        Self::assemble(p, rows, true, data, &pairs, built)
    }

    /// Covariances and variances (elements j <= l) of continuous columns (NaN missing), each on
    /// its pair's complete rows with the pair's own means (divisor n): the distribution-free
    /// sampling covariance of Browne (1984), to which it reduces with complete rows.
    pub fn covariances(columns: &[&[f64]]) -> Result<Contributions, StatsError> {
        let p = columns.len();
        let cols: Vec<Column<'_>> = columns.iter().map(|c| Column::Continuous((*c).into())).collect();
        let data = owned(&cols)?;
        drop(cols);
        let rows = data.first().map_or(0, len);
        let pairs: Vec<Element> = (0..p).flat_map(|j| (j..p).map(move |l| (j, l))).collect();
        let built: Vec<Result<(Kernel, usize), StatsError>> = pairs
            .par_iter()
            .map(|&(j, l)| {
                let (Data::Continuous(x), Data::Continuous(y)) = (&data[j], &data[l]) else {
                    unreachable!("covariances are built from continuous columns")
                };
                let (mean, _, n) = pair_moments(x, y);
                enough("covariance", n).map_err(pair_error(j, l))?;
                let s = x
                    .iter()
                    .zip(y.iter())
                    .filter(|(a, b)| !a.is_nan() && !b.is_nan())
                    .map(|(a, b)| (a - mean[0]) * (b - mean[1]))
                    .sum::<f64>()
                    / n as f64;
                Ok((Kernel::Covariance { mean, s, inv_n: 1.0 / n as f64 }, n))
            })
            .collect();
        Self::assemble(p, rows, false, data, &pairs, built)
    }

    fn assemble(
        p: usize,
        rows: usize,
        correlation: bool,
        data: Vec<Data>,
        pairs: &[Element],
        built: Vec<Result<(Kernel, usize), StatsError>>,
    ) -> Result<Contributions, StatsError> {
        let mut kernels = vec![None; p * p];
        let mut n_obs = usize::MAX;
        for (&(j, l), result) in pairs.iter().zip(built) {
            let (kernel, n) = result?;
            n_obs = n_obs.min(n);
            kernels[j * p + l] = Some(kernel);
        }
        Ok(Contributions { p, rows, n_obs: if n_obs == usize::MAX { rows } else { n_obs }, correlation, data, kernels })
    }

    fn check(&self, elements: &[Element]) -> Result<(), StatsError> {
        for &e in elements {
            check_element(self.p, self.correlation, e)?;
        }
        Ok(())
    }

    /// Writes element (j, l)'s contributions of `rows` into `out`.
    fn fill_column(&self, (j, l): Element, rows: Range<usize>, out: &mut [f64]) {
        let Some(kernel) = &self.kernels[j * self.p + l] else { return };
        match (kernel, &self.data[j], &self.data[l]) {
            (Kernel::Pearson { mean, sd, r, inv_n }, Data::Continuous(x), Data::Continuous(y)) => {
                for (o, (a, b)) in out.iter_mut().zip(x[rows.clone()].iter().zip(&y[rows])) {
                    *o = if a.is_nan() || b.is_nan() {
                        0.0
                    } else {
                        let (zj, zl) = ((a - mean[0]) / sd[0], (b - mean[1]) / sd[1]);
                        (zj * zl - 0.5 * r * (zj * zj + zl * zl)) * inv_n
                    };
                }
            }
            (Kernel::Covariance { mean, s, inv_n }, Data::Continuous(x), Data::Continuous(y)) => {
                for (o, (a, b)) in out.iter_mut().zip(x[rows.clone()].iter().zip(&y[rows])) {
                    *o = if a.is_nan() || b.is_nan() { 0.0 } else { ((a - mean[0]) * (b - mean[1]) - s) * inv_n };
                }
            }
            (Kernel::Table { levels, values }, Data::Ordinal(x), Data::Ordinal(y)) => {
                for (o, (&a, &b)) in out.iter_mut().zip(x[rows.clone()].iter().zip(&y[rows])) {
                    *o = if a == MISSING_CODE || b == MISSING_CODE {
                        0.0
                    } else {
                        values[a as usize * levels + b as usize]
                    };
                }
            }
            (Kernel::Polyserial { kernel, continuous_first }, first, second) => {
                let (Data::Continuous(x), Data::Ordinal(y)) =
                    (if *continuous_first { (first, second) } else { (second, first) })
                else {
                    unreachable!("a polyserial kernel pairs a continuous and an ordinal item")
                };
                for (o, (&a, &b)) in out.iter_mut().zip(x[rows.clone()].iter().zip(&y[rows])) {
                    *o = if a.is_nan() || b == MISSING_CODE { 0.0 } else { kernel.contribution(a, b) };
                }
            }
            _ => unreachable!("kernels are built for their items' types"),
        }
    }

    /// The contribution matrix (rows.len() x elements.len()), elements already checked.
    fn fill(&self, elements: &[Element], rows: Range<usize>) -> DMatrix<f64> {
        let mut c = DMatrix::zeros(rows.len(), elements.len());
        for (k, &e) in elements.iter().enumerate() {
            self.fill_column(e, rows.clone(), c.column_mut(k).as_mut_slice());
        }
        c
    }

    /// Σ over row chunks of (C A)'(C A), or C'C without `a`; deterministic for any thread count.
    fn accumulate(&self, elements: &[Element], a: Option<&DMatrix<f64>>) -> DMatrix<f64> {
        let b = elements.len();
        let m = a.map_or(b, DMatrix::ncols);
        let chunk = (CHUNK_VALUES / b.max(1)).clamp(MIN_CHUNK_ROWS, MAX_CHUNK_ROWS);
        let chunks: Vec<Range<usize>> = (0..self.rows).step_by(chunk).map(|s| s..(s + chunk).min(self.rows)).collect();
        let mut total = DMatrix::zeros(m, m);
        for batch in chunks.chunks(BATCH) {
            let parts: Vec<DMatrix<f64>> = batch
                .par_iter()
                .map(|range| {
                    let c = self.fill(elements, range.clone());
                    match a {
                        Some(a) => {
                            let ca = c * a;
                            ca.transpose() * ca
                        }
                        None => c.transpose() * c,
                    }
                })
                .collect();
            for part in parts {
                total += part;
            }
        }
        // Exact symmetry against rounding in the products.
        DMatrix::from_fn(m, m, |r, c| if r <= c { total[(r, c)] } else { total[(c, r)] })
    }
}

fn len(d: &Data) -> usize {
    match d {
        Data::Continuous(v) => v.len(),
        Data::Ordinal(v) => v.len(),
    }
}

/// Owned copies of the columns; equal lengths, finite or NaN values, codes within levels.
fn owned(columns: &[Column<'_>]) -> Result<Vec<Data>, StatsError> {
    let rows = columns.first().map_or(0, |c| match c {
        Column::Continuous(v) => v.len(),
        Column::Ordinal { codes, .. } => codes.len(),
    });
    columns
        .iter()
        .enumerate()
        .map(|(k, c)| {
            let d = match c {
                Column::Continuous(v) => {
                    if let Some(r) = v.iter().position(|x| x.is_infinite()) {
                        return Err(StatsError::InvalidInput(format!("column {k} row {r}: value is not finite")));
                    }
                    Data::Continuous(v.to_vec())
                }
                Column::Ordinal { codes, levels } => {
                    if let Some(r) = codes.iter().position(|&x| x != MISSING_CODE && x as usize >= *levels) {
                        return Err(StatsError::InvalidInput(format!(
                            "column {k} row {r}: code outside {levels} levels"
                        )));
                    }
                    Data::Ordinal(codes.to_vec())
                }
            };
            if len(&d) != rows {
                return Err(StatsError::InvalidInput(format!("column {k} has {} rows, column 0 has {rows}", len(&d))));
            }
            Ok(d)
        })
        .collect()
}

fn correlation_kernel(
    x: &Data,
    y: &Data,
    columns: &[Column<'_>],
    j: usize,
    l: usize,
    rho: f64,
) -> Result<(Kernel, usize), StatsError> {
    let levels = |k: usize| match &columns[k] {
        Column::Ordinal { levels, .. } => *levels,
        Column::Continuous(_) => 0,
    };
    match (x, y) {
        (Data::Continuous(a), Data::Continuous(b)) => {
            let (mean, sd, n) = pair_moments(a, b);
            enough("pearson correlation", n)?;
            if sd[0] <= 0.0 {
                return Err(StatsError::Constant { what: "first continuous variable".into() });
            }
            if sd[1] <= 0.0 {
                return Err(StatsError::Constant { what: "second continuous variable".into() });
            }
            Ok((Kernel::Pearson { mean, sd, r: rho, inv_n: 1.0 / n as f64 }, n))
        }
        (Data::Ordinal(a), Data::Ordinal(b)) => {
            let (values, n) = polychoric_table(a, b, levels(j), levels(l), rho)?;
            enough("polychoric correlation", n)?;
            Ok((Kernel::Table { levels: levels(l), values }, n))
        }
        (Data::Continuous(a), Data::Ordinal(b)) => {
            let kernel = Polyserial::new(a, b, levels(l), rho)?;
            let n = kernel.n;
            Ok((Kernel::Polyserial { kernel: Box::new(kernel), continuous_first: true }, n))
        }
        (Data::Ordinal(b), Data::Continuous(a)) => {
            let kernel = Polyserial::new(a, b, levels(j), rho)?;
            let n = kernel.n;
            Ok((Kernel::Polyserial { kernel: Box::new(kernel), continuous_first: false }, n))
        }
    }
}

impl SamplingCovariance for Contributions {
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
        self.check(elements)?;
        Ok(self.accumulate(elements, None))
    }

    /// Σ_i (A' c_i)(A' c_i)' over row chunks: V is never formed.
    fn sandwich(&self, elements: &[Element], a: &DMatrix<f64>) -> Result<DMatrix<f64>, StatsError> {
        if a.nrows() != elements.len() {
            return Err(StatsError::SizeMismatch {
                what: "sandwich weights",
                expected: elements.len(),
                found: a.nrows(),
            });
        }
        self.check(elements)?;
        Ok(self.accumulate(elements, Some(a)))
    }

    fn rows(&self) -> Option<usize> {
        Some(self.rows)
    }

    fn contributions(&self, elements: &[Element], rows: Range<usize>) -> Result<Option<DMatrix<f64>>, StatsError> {
        self.check(elements)?;
        if rows.end > self.rows || rows.start > rows.end {
            return Err(StatsError::OutOfRange { what: "row", index: rows.end, len: self.rows });
        }
        Ok(Some(self.fill(elements, rows)))
    }
}
