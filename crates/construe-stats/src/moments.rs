//! Product-moment covariances and correlations of item columns with missing values.
//! Central type: `PairwiseMoments` (covariance, correlation and n for every item pair).
//! Conventions: covariances divide by n - 1 (the unbiased estimator, as numpy.cov and R's cov);
//! missing values are `None`. Never imputes: a pair uses only rows where both values are present.

use nalgebra::{DMatrix, DMatrixView};
use rayon::prelude::*;

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
/// `None` marks a missing value; see `pearson_columns` for the NaN-coded form it calls.
pub fn pearson(columns: &[Vec<Option<f64>>], deletion: Deletion) -> Result<PairwiseMoments, StatsError> {
    let coded: Vec<Vec<f64>> = columns.iter().map(|c| c.iter().map(|v| v.unwrap_or(f64::NAN)).collect()).collect();
    let views: Vec<&[f64]> = coded.iter().map(Vec::as_slice).collect();
    pearson_columns(&views, deletion)
}

/// Rows per chunk. Fixed, not derived from the thread count, so partial sums are grouped (and
/// rounded) identically on every machine setting: the artifact hash does not depend on threads.
const CHUNK_ROWS: usize = 16_384;
/// Rows per matrix-product block inside a chunk: a block of all items stays in cache.
const BLOCK_ROWS: usize = 512;

/// `pearson` on NaN-coded columns (NaN = missing), without copying them.
///
/// Blocked cross-products (the BLAS formulation of the covariance, as numpy.cov uses): each
/// item is first shifted by its own mean, then per block of rows Z'Z is one matrix product
/// (matrixmultiply's gemm kernel). With gaps, three more products of Z and the 0/1 presence
/// matrix M give every pair's own n (M'M), sums (Z'M) and sums of squares ((Z*Z)'M), so each
/// pair still uses exactly its complete rows. The shift makes the one-pass formula as accurate
/// as the two-pass one: the per-pair mean offset it leaves is small. Costs O(n p^2) flops in
/// O(p^2 + p x BLOCK_ROWS) memory beyond the input; chunks run in parallel and are summed in
/// chunk order.
pub fn pearson_columns(columns: &[&[f64]], deletion: Deletion) -> Result<PairwiseMoments, StatsError> {
    let rows = columns.first().map_or(0, |c| c.len());
    if columns.iter().any(|c| c.len() != rows) {
        return Err(StatsError::InvalidInput("columns of unequal length".into()));
    }
    let keep: Option<Vec<bool>> = match deletion {
        Deletion::Pairwise => None,
        Deletion::Listwise => Some((0..rows).map(|r| columns.iter().all(|c| !c[r].is_nan())).collect()),
    };
    let kept = |r: usize| keep.as_ref().is_none_or(|k| k[r]);
    let shifts: Vec<Shift> = columns.par_iter().map(|c| Shift::of(c, &kept)).collect();
    let gaps = shifts.iter().any(|s| s.gap);
    let sums = cross_products(columns, &shifts, keep.as_deref(), gaps);
    finish(&shifts, &sums, gaps)
}

/// A column's mean over its used rows, subtracted before the products, and whether any used row
/// lacks a value.
struct Shift {
    mean: f64,
    count: usize,
    gap: bool,
}

impl Shift {
    fn of(column: &[f64], kept: &impl Fn(usize) -> bool) -> Shift {
        let (mut sum, mut count, mut gap) = (0.0, 0usize, false);
        for (r, &v) in column.iter().enumerate() {
            if !kept(r) {
                continue;
            }
            if v.is_nan() {
                gap = true;
            } else {
                sum += v;
                count += 1;
            }
        }
        Shift { mean: if count > 0 { sum / count as f64 } else { 0.0 }, count, gap }
    }
}

/// Sums over rows of the shifted values z (0 where missing or not kept).
struct CrossProducts {
    /// Z'Z.
    zz: DMatrix<f64>,
    /// Gap-free data: each column's sum of z.
    z: Vec<f64>,
    /// With gaps: Z'M, (Z*Z)'M and M'M (entry (a, b): over rows where b is present).
    zm: DMatrix<f64>,
    z2m: DMatrix<f64>,
    mm: DMatrix<f64>,
}

impl CrossProducts {
    fn zeros(p: usize, gaps: bool) -> CrossProducts {
        let q = if gaps { p } else { 0 };
        CrossProducts {
            zz: DMatrix::zeros(p, p),
            z: vec![0.0; p],
            zm: DMatrix::zeros(q, q),
            z2m: DMatrix::zeros(q, q),
            mm: DMatrix::zeros(q, q),
        }
    }

    fn add(&mut self, other: &CrossProducts) {
        self.zz += &other.zz;
        self.zm += &other.zm;
        self.z2m += &other.z2m;
        self.mm += &other.mm;
        for (a, b) in self.z.iter_mut().zip(&other.z) {
            *a += b;
        }
    }
}

fn cross_products(columns: &[&[f64]], shifts: &[Shift], keep: Option<&[bool]>, gaps: bool) -> CrossProducts {
    let p = columns.len();
    let rows = columns.first().map_or(0, |c| c.len());
    let chunks: Vec<usize> = (0..rows).step_by(CHUNK_ROWS).collect();
    let mut total = CrossProducts::zeros(p, gaps);
    // A bounded number of chunk partials exist at once; adding them in chunk order keeps the
    // result independent of which thread computed which chunk.
    let wave = 2 * rayon::current_num_threads().max(1);
    for group in chunks.chunks(wave) {
        let partials: Vec<CrossProducts> = group
            .par_iter()
            .map(|&start| chunk_products(columns, shifts, keep, gaps, start..(start + CHUNK_ROWS).min(rows)))
            .collect();
        for part in &partials {
            total.add(part);
        }
    }
    total
}

fn chunk_products(
    columns: &[&[f64]],
    shifts: &[Shift],
    keep: Option<&[bool]>,
    gaps: bool,
    range: std::ops::Range<usize>,
) -> CrossProducts {
    let p = columns.len();
    let mut out = CrossProducts::zeros(p, gaps);
    let mut z = vec![0.0; BLOCK_ROWS * p];
    let mut zt = vec![0.0; BLOCK_ROWS * p];
    let mut z2 = if gaps { vec![0.0; BLOCK_ROWS * p] } else { Vec::new() };
    let mut m = if gaps { vec![0.0; BLOCK_ROWS * p] } else { Vec::new() };
    let mut start = range.start;
    while start < range.end {
        let b = BLOCK_ROWS.min(range.end - start);
        // Column-major b x p blocks: item j's rows at [j * b, (j + 1) * b).
        for (j, column) in columns.iter().enumerate() {
            let shift = shifts[j].mean;
            for (i, &v) in column[start..start + b].iter().enumerate() {
                let used = !v.is_nan() && keep.is_none_or(|k| k[start + i]);
                let d = if used { v - shift } else { 0.0 };
                z[j * b + i] = d;
                if gaps {
                    z2[j * b + i] = d * d;
                    m[j * b + i] = if used { 1.0 } else { 0.0 };
                }
            }
        }
        // Plain column-major operands only: nalgebra's small-size gemm path mishandles strided
        // (transposed) views, so the transposes are copied (O(b p), small beside the product).
        transpose_into(&z[..b * p], b, p, &mut zt);
        let zv = DMatrixView::from_slice(&z[..b * p], b, p);
        out.zz.gemm(1.0, &DMatrixView::from_slice(&zt[..b * p], p, b), &zv, 1.0);
        if gaps {
            let mv = DMatrixView::from_slice(&m[..b * p], b, p);
            out.zm.gemm(1.0, &DMatrixView::from_slice(&zt[..b * p], p, b), &mv, 1.0);
            transpose_into(&z2[..b * p], b, p, &mut zt);
            out.z2m.gemm(1.0, &DMatrixView::from_slice(&zt[..b * p], p, b), &mv, 1.0);
            transpose_into(&m[..b * p], b, p, &mut zt);
            out.mm.gemm(1.0, &DMatrixView::from_slice(&zt[..b * p], p, b), &mv, 1.0);
        } else {
            for j in 0..p {
                out.z[j] += z[j * b..(j + 1) * b].iter().sum::<f64>();
            }
        }
        start += b;
    }
    out
}

/// Writes the transpose of the column-major `rows x cols` matrix `from` into `to`.
fn transpose_into(from: &[f64], rows: usize, cols: usize, to: &mut [f64]) {
    for j in 0..cols {
        for i in 0..rows {
            to[i * cols + j] = from[j * rows + i];
        }
    }
}

/// Relative size below which a variance counts as zero: rounding in the shift leaves about
/// this much of a constant column's magnitude.
const CONSTANT_TOLERANCE: f64 = 1e-12;

fn finish(shifts: &[Shift], sums: &CrossProducts, gaps: bool) -> Result<PairwiseMoments, StatsError> {
    let p = shifts.len();
    let mut covariance = DMatrix::zeros(p, p);
    let mut correlation = DMatrix::identity(p, p);
    let mut n = DMatrix::zeros(p, p);
    let is_zero = |v: f64, a: usize| v <= (CONSTANT_TOLERANCE * shifts[a].mean.abs()).powi(2);
    for a in 0..p {
        for b in a..p {
            // (n, sum z_a, sum z_b, sum z_a^2, sum z_b^2) over the pair's rows.
            let (m, sa, sb, qa, qb) = if gaps {
                let m = sums.mm[(a, b)];
                (m, sums.zm[(a, b)], sums.zm[(b, a)], sums.z2m[(a, b)], sums.z2m[(b, a)])
            } else {
                let m = shifts[a].count as f64;
                (m, sums.z[a], sums.z[b], sums.zz[(a, a)], sums.zz[(b, b)])
            };
            let count = m as usize;
            n[(a, b)] = count;
            n[(b, a)] = count;
            if count < 2 {
                return Err(StatsError::NotEnoughData {
                    what: format!("the covariance of columns {a} and {b}"),
                    needed: 2,
                    found: count,
                });
            }
            let cab = (sums.zz[(a, b)] - sa * sb / m) / (m - 1.0);
            let vaa = (qa - sa * sa / m) / (m - 1.0);
            let vbb = (qb - sb * sb / m) / (m - 1.0);
            covariance[(a, b)] = cab;
            covariance[(b, a)] = cab;
            if a == b {
                if is_zero(vaa, a) {
                    return Err(StatsError::Constant { what: format!("column {a}") });
                }
                continue;
            }
            if is_zero(vaa, a) || is_zero(vbb, b) {
                let (which, other) = if is_zero(vaa, a) { (a, b) } else { (b, a) };
                return Err(StatsError::Constant {
                    what: format!("column {which} (among the rows it shares with column {other})"),
                });
            }
            let r = (cab / (vaa * vbb).sqrt()).clamp(-1.0, 1.0);
            correlation[(a, b)] = r;
            correlation[(b, a)] = r;
        }
    }
    Ok(PairwiseMoments { covariance, correlation, n })
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

/// The sample variance of the present (non-NaN) values, dividing by n - 1 (by 1 when n < 2);
/// NaN when no value is present.
pub fn sample_variance(values: &[f64]) -> f64 {
    let present: Vec<f64> = values.iter().copied().filter(|v| !v.is_nan()).collect();
    let n = present.len() as f64;
    let mean = present.iter().sum::<f64>() / n;
    present.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0).max(1.0)
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

    // The hand-computed pair above, repeated 10,000 times (40,000 rows, three chunks) on an
    // offset of 1e6: sum dx dy = 10,000 x 11 over n - 1 = 39,999. The mean shift must keep the
    // one-pass products as accurate as the two-pass form despite the offset.
    #[test]
    fn many_chunks_on_a_large_offset_match_the_hand_value() {
        let x: Vec<f64> = (0..40_000).map(|i| 1e6 + [1.0, 2.0, 3.0, 4.0][i % 4]).collect();
        let y: Vec<f64> = (0..40_000).map(|i| 1e6 + [2.0, 4.0, 5.0, 9.0][i % 4]).collect();
        let m = pearson_columns(&[&x, &y], Deletion::Pairwise).unwrap();
        let expected = 10_000.0 * 11.0 / 39_999.0;
        assert!((m.covariance[(0, 1)] - expected).abs() < 1e-9 * expected, "{}", m.covariance[(0, 1)]);
        assert!((m.correlation[(0, 1)] - 11.0 / 130f64.sqrt()).abs() < 1e-12);
        assert_eq!(m.n[(0, 1)], 40_000);
    }

    // Gaps in one column: the pair uses only rows where both are present, so blanking every
    // fourth row of y (the rows where x = 4, y = 9) leaves x = 1,2,3 / y = 2,4,5 repeated:
    // per triple sum dx dy = 3, over 30,000 rows -> 10,000 x 3 / 29,999 (hand-computed).
    #[test]
    fn pairwise_gaps_use_each_pairs_complete_rows() {
        let x: Vec<f64> = (0..40_000).map(|i| [1.0, 2.0, 3.0, 4.0][i % 4]).collect();
        let y: Vec<f64> = (0..40_000).map(|i| [2.0, 4.0, 5.0, f64::NAN][i % 4]).collect();
        let m = pearson_columns(&[&x, &y], Deletion::Pairwise).unwrap();
        assert_eq!(m.n[(0, 1)], 30_000);
        assert_eq!(m.n[(0, 0)], 40_000);
        let expected = 10_000.0 * 3.0 / 29_999.0;
        assert!((m.covariance[(0, 1)] - expected).abs() < 1e-12 * expected);
        // x = 1,2,3 against y = 2,4,5: r = 3 / sqrt(2 x 4.666...) = 3 / sqrt(28 / 3).
        assert!((m.correlation[(0, 1)] - 3.0 / (28.0f64 / 3.0).sqrt()).abs() < 1e-12);
    }

    // Chunks are fixed in size and summed in order, so one thread and two give the same bits.
    #[test]
    fn results_do_not_depend_on_the_thread_count() {
        let col = |k: u64| -> Vec<f64> {
            (0..50_000u64)
                .map(|i| {
                    let h = (i * 2_654_435_761 + k * 40_503) % 1_000;
                    if h < 30 { f64::NAN } else { h as f64 / 7.0 }
                })
                .collect()
        };
        let columns: Vec<Vec<f64>> = (0..6).map(col).collect();
        let views: Vec<&[f64]> = columns.iter().map(Vec::as_slice).collect();
        let run = |threads: usize| {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            pool.install(|| pearson_columns(&views, Deletion::Pairwise).unwrap())
        };
        let (one, two) = (run(1), run(2));
        assert_eq!(one.covariance.as_slice(), two.covariance.as_slice());
        assert_eq!(one.n, two.n);
    }

    #[test]
    fn constant_column_is_an_error() {
        let cols = vec![vec![Some(1.0), Some(1.0), Some(1.0)], vec![Some(1.0), Some(2.0), Some(3.0)]];
        assert!(matches!(pearson(&cols, Deletion::Pairwise), Err(StatsError::Constant { .. })));
    }
}
