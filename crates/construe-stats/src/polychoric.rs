//! Polychoric correlation of two ordinal items: the pair's contingency table, thresholds from
//! its margins, and the latent bivariate-normal correlation by maximum likelihood (two-step,
//! Olsson 1979, or joint with the thresholds). Central types: `ContingencyTable`,
//! `PolychoricEstimate`. After the table is built (O(n)) every likelihood evaluation works on
//! the k × k table only. Must never return NaN for empty cells or empty categories: an empty
//! category is merged and recorded, a zero cell contributes nothing to the likelihood.

use super::StatsError;
use super::bvn::{bvn_cdf, bvn_pdf, norm_cdf, norm_pdf, norm_quantile};
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Correlations are confined to [-MAX_CORRELATION, MAX_CORRELATION]: at |ρ| = 1 the latent
/// density is singular and the likelihood's derivatives are undefined. 0.9999 is the bound
/// R's polycor uses, so estimates at the boundary agree with the reference.
pub const MAX_CORRELATION: f64 = 0.9999;

/// Smallest probability a populated cell may take in the log-likelihood; guards log(0) when a
/// cell probability underflows or cancels to zero at extreme thresholds (it never binds at an
/// interior optimum).
const MIN_CELL_PROBABILITY: f64 = 1e-300;

const MAX_ITERATIONS: usize = 200;

/// Which estimator of the ordinal model to use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub enum OrdinalFit {
    /// Thresholds from the margins, then ρ by ML with the thresholds fixed (Olsson 1979;
    /// Olsson, Drasgow & Dorans 1982). The standard choice for correlation matrices.
    #[default]
    TwoStep,
    /// ρ and all thresholds jointly by ML; its SE of ρ comes from the full information matrix.
    Full,
}

/// Which variable of a pair a category merge concerns.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Margin {
    /// The first slice passed (rows of the table).
    First,
    /// The second slice passed (columns of the table).
    Second,
}

/// A category with no observations among the pair's complete rows, merged into a neighbour.
/// Codes are the caller's zero-based codes. Because the category is empty, merging it changes
/// no count; it removes a threshold that would otherwise be duplicated.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct CategoryMerge {
    pub margin: Margin,
    /// The empty category.
    pub empty: u32,
    /// The non-empty category it was merged into: the next higher one, or the next lower one
    /// when no higher category has data.
    pub into: u32,
}

/// Counts of a two-way table of ordinal codes, row-major (`rows` categories of the first
/// variable × `cols` of the second).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ContingencyTable {
    rows: usize,
    cols: usize,
    counts: Vec<u64>,
}

impl ContingencyTable {
    /// A table from its counts, row-major. Errors when `counts.len() != rows * cols`.
    pub fn from_counts(rows: usize, cols: usize, counts: Vec<u64>) -> Result<Self, StatsError> {
        if counts.len() != rows * cols {
            return Err(StatsError::InvalidInput(format!(
                "a {rows} x {cols} table needs {} counts, got {}",
                rows * cols,
                counts.len()
            )));
        }
        Ok(Self { rows, cols, counts })
    }

    /// Cross-tabulate two equally long slices of zero-based codes (complete pairs), with
    /// `levels_x` and `levels_y` categories. Errors on unequal lengths or a code out of range.
    pub fn from_codes(x: &[u32], y: &[u32], levels_x: usize, levels_y: usize) -> Result<Self, StatsError> {
        if x.len() != y.len() {
            return Err(StatsError::InvalidInput(format!(
                "ordinal slices differ in length ({} and {})",
                x.len(),
                y.len()
            )));
        }
        Self::from_pairs(x.iter().copied().zip(y.iter().copied()), levels_x, levels_y)
    }

    /// Cross-tabulate an iterator of complete (first, second) code pairs.
    pub fn from_pairs(
        pairs: impl IntoIterator<Item = (u32, u32)>,
        levels_x: usize,
        levels_y: usize,
    ) -> Result<Self, StatsError> {
        let mut counts = vec![0_u64; levels_x * levels_y];
        for (a, b) in pairs {
            let (a, b) = (a as usize, b as usize);
            if a >= levels_x || b >= levels_y {
                return Err(StatsError::InvalidInput(format!(
                    "code pair ({a}, {b}) outside {levels_x} x {levels_y} levels"
                )));
            }
            counts[a * levels_y + b] += 1;
        }
        Ok(Self { rows: levels_x, cols: levels_y, counts })
    }

    pub fn rows(&self) -> usize {
        self.rows
    }

    pub fn cols(&self) -> usize {
        self.cols
    }

    /// Count of cell (i, j).
    pub fn count(&self, i: usize, j: usize) -> u64 {
        self.counts[i * self.cols + j]
    }

    /// Total count n.
    pub fn total(&self) -> u64 {
        self.counts.iter().sum()
    }

    pub fn row_sums(&self) -> Vec<u64> {
        (0..self.rows).map(|i| (0..self.cols).map(|j| self.count(i, j)).sum()).collect()
    }

    pub fn col_sums(&self) -> Vec<u64> {
        (0..self.cols).map(|j| (0..self.rows).map(|i| self.count(i, j)).sum()).collect()
    }

    /// Drop empty rows and columns, recording each as a merge into its neighbour.
    fn collapse_empty(&self) -> (ContingencyTable, Vec<CategoryMerge>) {
        let (keep_r, mut merged) = non_empty(&self.row_sums(), Margin::First);
        let (keep_c, merged_c) = non_empty(&self.col_sums(), Margin::Second);
        merged.extend(merged_c);
        let mut counts = Vec::with_capacity(keep_r.len() * keep_c.len());
        for &i in &keep_r {
            for &j in &keep_c {
                counts.push(self.count(i, j));
            }
        }
        let table = ContingencyTable { rows: keep_r.len(), cols: keep_c.len(), counts };
        (table, merged)
    }
}

/// Indices of the non-empty categories and the merges of the empty ones.
pub(crate) fn non_empty(margin_counts: &[u64], margin: Margin) -> (Vec<usize>, Vec<CategoryMerge>) {
    let keep: Vec<usize> = (0..margin_counts.len()).filter(|&c| margin_counts[c] > 0).collect();
    let mut merges = Vec::new();
    if keep.is_empty() {
        return (keep, merges);
    }
    for c in (0..margin_counts.len()).filter(|&c| margin_counts[c] == 0) {
        let into = keep.iter().copied().find(|&k| k > c).or_else(|| keep.iter().copied().rev().find(|&k| k < c));
        if let Some(into) = into {
            merges.push(CategoryMerge { margin, empty: code(c), into: code(into) });
        }
    }
    (keep, merges)
}

fn code(c: usize) -> u32 {
    u32::try_from(c).unwrap_or(u32::MAX)
}

/// Thresholds τ_j = Φ⁻¹(N_j / n), j = 1..k-1, from the cumulative margin counts N_j of k
/// non-empty categories (Olsson 1979, eq. 6: the first step of the two-step estimator).
pub fn thresholds_from_counts(counts: &[u64]) -> Vec<f64> {
    let n: u64 = counts.iter().sum();
    let mut cum = 0_u64;
    counts
        .iter()
        .take(counts.len().saturating_sub(1))
        .map(|&c| {
            cum += c;
            // `+ 0.0` turns the -0.0 of a median split into 0.0 for tidy reports.
            norm_quantile(cum as f64 / n as f64) + 0.0
        })
        .collect()
}

/// Result of a polychoric fit. Thresholds are those of the collapsed table (one fewer than the
/// number of non-empty categories of each variable).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PolychoricEstimate {
    pub rho: f64,
    /// Standard error of ρ from the observed information (see `polychoric_table`); `None` with
    /// ρ at the bound, where the information-based SE has no meaning, or when the information
    /// is not positive.
    pub se: Option<f64>,
    pub thresholds_x: Vec<f64>,
    pub thresholds_y: Vec<f64>,
    /// Number of complete pairs.
    pub n: usize,
    pub merged: Vec<CategoryMerge>,
    /// Newton iterations used.
    pub iterations: usize,
    pub fit: OrdinalFit,
    /// ρ reached ±`MAX_CORRELATION` (the likelihood still rose towards ±1, typically a table
    /// with empty off-diagonal corners).
    pub at_bound: bool,
    /// Maximised log-likelihood Σ n_ij log P_ij (multinomial constant omitted).
    pub log_likelihood: f64,
}

/// Polychoric correlation of two ordinal variables given as zero-based codes of complete pairs
/// (`x[i]`, `y[i]`), with `levels_x` and `levels_y` categories. See `polychoric_table`.
pub fn polychoric(
    x: &[u32],
    y: &[u32],
    levels_x: usize,
    levels_y: usize,
    fit: OrdinalFit,
) -> Result<PolychoricEstimate, StatsError> {
    polychoric_table(&ContingencyTable::from_codes(x, y, levels_x, levels_y)?, fit)
}

/// Polychoric correlation of a contingency table.
///
/// Model (Olsson 1979): the table arises by cutting a standard bivariate normal with
/// correlation ρ at thresholds a_1 < … < a_{r-1} and b_1 < … < b_{c-1};
/// P_ij = Φ₂(a_i, b_j) - Φ₂(a_{i-1}, b_j) - Φ₂(a_i, b_{j-1}) + Φ₂(a_{i-1}, b_{j-1}) and the
/// log-likelihood is ℓ = Σ n_ij log P_ij. `TwoStep`: thresholds Φ⁻¹ of the cumulative marginal
/// proportions, then ρ maximises ℓ by safeguarded Newton with the analytic derivatives
/// ∂Φ₂/∂ρ = φ₂ (Plackett 1954) and ∂φ₂/∂ρ; SE = (-∂²ℓ/∂ρ²)^{-1/2} with thresholds held fixed,
/// the quantity R's polycor::polychor(ML = FALSE, std.err = TRUE) reports. `Full`: Newton on
/// (ρ, a, b) jointly from the two-step solution, SE of ρ from the inverse observed information.
/// Empty categories are merged first (recorded in `merged`); ρ is confined to
/// ±`MAX_CORRELATION`.
pub fn polychoric_table(table: &ContingencyTable, fit: OrdinalFit) -> Result<PolychoricEstimate, StatsError> {
    let (tab, merged) = table.collapse_empty();
    let n = tab.total();
    if n == 0 {
        return Err(StatsError::NotEnoughData { what: "polychoric correlation".into(), needed: 2, found: 0 });
    }
    if tab.rows < 2 {
        return Err(StatsError::Constant { what: "first ordinal variable".into() });
    }
    if tab.cols < 2 {
        return Err(StatsError::Constant { what: "second ordinal variable".into() });
    }
    let a = thresholds_from_counts(&tab.row_sums());
    let b = thresholds_from_counts(&tab.col_sums());
    let lik = TableLikelihood::new(&tab, &a, &b);
    let start = start_value(&tab);
    let (rho, iterations) = maximize_rho(|r| lik.eval(r), start, "polychoric correlation")?;
    let (ll, _, d2) = lik.eval(rho);
    let at_bound = rho.abs() >= MAX_CORRELATION - 1e-9;
    let two_step = PolychoricEstimate {
        rho,
        se: if at_bound { None } else { se_from_curvature(d2) },
        thresholds_x: a,
        thresholds_y: b,
        n: usize::try_from(n).unwrap_or(usize::MAX),
        merged,
        iterations,
        fit: OrdinalFit::TwoStep,
        at_bound,
        log_likelihood: ll,
    };
    match fit {
        OrdinalFit::TwoStep => Ok(two_step),
        OrdinalFit::Full => full_ml(&tab, two_step),
    }
}

/// Start for Newton: the correlation of the category ranks' normal scores, a cheap value that
/// has the sign and rough size of ρ, shrunk away from the bounds.
fn start_value(tab: &ContingencyTable) -> f64 {
    let score = |counts: &[u64]| -> Vec<f64> {
        let n: u64 = counts.iter().sum();
        let mut cum = 0_u64;
        counts
            .iter()
            .map(|&c| {
                let mid = cum as f64 + c as f64 / 2.0;
                cum += c;
                norm_quantile(mid / n as f64)
            })
            .collect()
    };
    let (sx, sy) = (score(&tab.row_sums()), score(&tab.col_sums()));
    let n = tab.total() as f64;
    let cells = || {
        sx.iter()
            .enumerate()
            .flat_map(|(i, &a)| sy.iter().enumerate().map(move |(j, &b)| (tab.count(i, j) as f64 / n, a, b)))
    };
    let (mx, my) = cells().fold((0.0, 0.0), |(mx, my), (w, a, b)| (mx + w * a, my + w * b));
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (w, a, b) in cells() {
        sxy += w * (a - mx) * (b - my);
        sxx += w * (a - mx).powi(2);
        syy += w * (b - my).powi(2);
    }
    let r = sxy / (sxx * syy).sqrt();
    if r.is_finite() { r.clamp(-0.95, 0.95) } else { 0.0 }
}

pub(crate) fn se_from_curvature(d2: f64) -> Option<f64> {
    if d2 < 0.0 && d2.is_finite() { Some((-d2).sqrt().recip()) } else { None }
}

/// ℓ(ρ) of a table with fixed thresholds and its first two derivatives in ρ.
struct TableLikelihood<'a> {
    tab: &'a ContingencyTable,
    /// Thresholds padded with -∞ and +∞.
    a: Vec<f64>,
    b: Vec<f64>,
}

impl<'a> TableLikelihood<'a> {
    fn new(tab: &'a ContingencyTable, a: &[f64], b: &[f64]) -> Self {
        let pad = |t: &[f64]| {
            let mut v = Vec::with_capacity(t.len() + 2);
            v.push(f64::NEG_INFINITY);
            v.extend_from_slice(t);
            v.push(f64::INFINITY);
            v
        };
        Self { tab, a: pad(a), b: pad(b) }
    }

    /// (ℓ, dℓ/dρ, d²ℓ/dρ²) at ρ. Grid values of Φ₂, φ₂ and ∂φ₂/∂ρ at the (r+1)(c+1) threshold
    /// corners are computed once and differenced per cell.
    fn eval(&self, rho: f64) -> (f64, f64, f64) {
        let (r, c) = (self.tab.rows, self.tab.cols);
        let w = c + 1;
        let mut cdf = vec![0.0; (r + 1) * w];
        let mut pdf = vec![0.0; (r + 1) * w];
        let mut dpdf = vec![0.0; (r + 1) * w];
        let one_minus = 1.0 - rho * rho;
        for (i, &h) in self.a.iter().enumerate() {
            for (j, &k) in self.b.iter().enumerate() {
                cdf[i * w + j] = bvn_cdf(h, k, rho);
                if h.is_finite() && k.is_finite() {
                    let d = bvn_pdf(h, k, rho);
                    // d log φ₂ / dρ = ρ/(1-ρ²) + hk/(1-ρ²) - ρ(h² - 2ρhk + k²)/(1-ρ²)².
                    let q = h * h - 2.0 * rho * h * k + k * k;
                    let dlog = (rho + h * k) / one_minus - rho * q / (one_minus * one_minus);
                    pdf[i * w + j] = d;
                    dpdf[i * w + j] = d * dlog;
                }
            }
        }
        let cell = |g: &[f64], i: usize, j: usize| {
            g[(i + 1) * w + j + 1] - g[i * w + j + 1] - g[(i + 1) * w + j] + g[i * w + j]
        };
        let (mut ll, mut d1, mut d2) = (0.0, 0.0, 0.0);
        for i in 0..r {
            for j in 0..c {
                let nij = self.tab.count(i, j);
                if nij == 0 {
                    continue;
                }
                let nij = nij as f64;
                let p = cell(&cdf, i, j).max(MIN_CELL_PROBABILITY);
                let dp = cell(&pdf, i, j);
                let ddp = cell(&dpdf, i, j);
                ll += nij * p.ln();
                d1 += nij * dp / p;
                d2 += nij * (ddp / p - (dp / p).powi(2));
            }
        }
        (ll, d1, d2)
    }
}

/// Maximise a smooth one-parameter log-likelihood over ρ ∈ [-MAX_CORRELATION,
/// MAX_CORRELATION] given `eval(ρ) = (ℓ, ℓ', ℓ'')`: Newton steps kept inside a bracket that the
/// sign of ℓ' shrinks, bisection whenever Newton would leave it or ℓ'' >= 0 (a standard
/// safeguarded Newton; Press et al., Numerical Recipes, §9.4 "rtsafe"). Returns (ρ̂, iterations).
pub(crate) fn maximize_rho(
    eval: impl Fn(f64) -> (f64, f64, f64),
    start: f64,
    what: &str,
) -> Result<(f64, usize), StatsError> {
    let (mut lo, mut hi) = (-MAX_CORRELATION, MAX_CORRELATION);
    // Whether ℓ' has been seen negative at `hi` / positive at `lo`; until then a bound may be
    // the maximiser, which Newton and bisection only approach geometrically, so it is checked
    // once directly when an iterate comes near it.
    let (mut hi_known, mut lo_known) = (false, false);
    let mut rho = start.clamp(lo, hi);
    let bad = |iterations| StatsError::NoConvergence { what: what.into(), iterations };
    for it in 1..=MAX_ITERATIONS {
        let (ll, g, h) = eval(rho);
        if !(ll.is_finite() && g.is_finite() && h.is_finite()) {
            return Err(bad(it));
        }
        if g > 0.0 {
            lo = rho;
            lo_known = true;
        } else {
            hi = rho;
            hi_known = true;
        }
        let newton = if h < 0.0 { rho - g / h } else { f64::NAN };
        let mut next = if newton > lo && newton < hi { newton } else { 0.5 * (lo + hi) };
        if !hi_known && next > MAX_CORRELATION - 1e-3 {
            hi_known = true;
            let (_, g_end, _) = eval(MAX_CORRELATION);
            if g_end >= 0.0 {
                return Ok((MAX_CORRELATION, it));
            }
        }
        if !lo_known && next < -MAX_CORRELATION + 1e-3 {
            lo_known = true;
            let (_, g_end, _) = eval(-MAX_CORRELATION);
            if g_end <= 0.0 {
                return Ok((-MAX_CORRELATION, it));
            }
        }
        next = next.clamp(lo, hi);
        if (next - rho).abs() < 1e-11 || hi - lo < 1e-11 {
            return Ok((next, it));
        }
        rho = next;
    }
    Err(bad(MAX_ITERATIONS))
}

/// Joint ML of (ρ, a, b) from the two-step solution.
fn full_ml(tab: &ContingencyTable, two_step: PolychoricEstimate) -> Result<PolychoricEstimate, StatsError> {
    let (r, c) = (tab.rows, tab.cols);
    let mut theta = Vec::with_capacity(r + c - 1);
    theta.push(two_step.rho);
    theta.extend_from_slice(&two_step.thresholds_x);
    theta.extend_from_slice(&two_step.thresholds_y);
    let split = |t: &[f64]| (t[0], t[1..r].to_vec(), t[r..].to_vec());
    let value_grad = |t: &[f64]| {
        let (rho, a, b) = split(t);
        full_gradient(tab, rho, &a, &b)
    };
    let feasible = |t: &[f64]| {
        let (rho, a, b) = split(t);
        rho.abs() <= MAX_CORRELATION && increasing(&a) && increasing(&b)
    };
    let opt = maximize_newton(theta, value_grad, feasible, "polychoric joint ML")?;
    let (rho, a, b) = split(&opt.theta);
    let at_bound = rho.abs() >= MAX_CORRELATION - 1e-9;
    let se = opt.covariance.as_ref().and_then(|cov| {
        let v = cov[(0, 0)];
        (v > 0.0 && !at_bound).then(|| v.sqrt())
    });
    Ok(PolychoricEstimate {
        rho,
        se,
        thresholds_x: a,
        thresholds_y: b,
        fit: OrdinalFit::Full,
        at_bound,
        iterations: two_step.iterations + opt.iterations,
        log_likelihood: opt.value,
        ..two_step
    })
}

pub(crate) fn increasing(t: &[f64]) -> bool {
    t.iter().all(|x| x.is_finite()) && t.windows(2).all(|w| w[0] < w[1])
}

/// ℓ and its gradient in (ρ, a_1..a_{r-1}, b_1..b_{c-1}). With F = Φ₂:
/// ∂F/∂h = φ(h) Φ((k - ρh)/√(1-ρ²)), ∂F/∂k symmetric, ∂F/∂ρ = φ₂ (Plackett 1954).
fn full_gradient(tab: &ContingencyTable, rho: f64, a: &[f64], b: &[f64]) -> (f64, Vec<f64>) {
    let (r, c) = (tab.rows, tab.cols);
    let lik = TableLikelihood::new(tab, a, b);
    let (pa, pb) = (&lik.a, &lik.b);
    let w = c + 1;
    let s = (1.0 - rho * rho).sqrt();
    let mut cdf = vec![0.0; (r + 1) * w];
    let mut pdf = vec![0.0; (r + 1) * w];
    let mut dh = vec![0.0; (r + 1) * w];
    let mut dk = vec![0.0; (r + 1) * w];
    for (i, &h) in pa.iter().enumerate() {
        for (j, &k) in pb.iter().enumerate() {
            cdf[i * w + j] = bvn_cdf(h, k, rho);
            pdf[i * w + j] = bvn_pdf(h, k, rho);
            if h.is_finite() {
                dh[i * w + j] = norm_pdf(h) * norm_cdf((k - rho * h) / s);
            }
            if k.is_finite() {
                dk[i * w + j] = norm_pdf(k) * norm_cdf((h - rho * k) / s);
            }
        }
    }
    let mut ratio = vec![0.0; r * c];
    let mut ll = 0.0;
    let mut g_rho = 0.0;
    for i in 0..r {
        for j in 0..c {
            let nij = tab.count(i, j);
            if nij == 0 {
                continue;
            }
            let at = |g: &[f64]| g[(i + 1) * w + j + 1] - g[i * w + j + 1] - g[(i + 1) * w + j] + g[i * w + j];
            let p = at(&cdf).max(MIN_CELL_PROBABILITY);
            let q = nij as f64 / p;
            ll += nij as f64 * p.ln();
            g_rho += q * at(&pdf);
            ratio[i * c + j] = q;
        }
    }
    let mut grad = Vec::with_capacity(r + c - 1);
    grad.push(g_rho);
    // Threshold a_p (padded index p) is the upper bound of row p-1 and the lower bound of row p.
    for p in 1..r {
        let mut g = 0.0;
        for j in 0..c {
            let slope = dh[p * w + j + 1] - dh[p * w + j];
            g += (ratio[(p - 1) * c + j] - ratio[p * c + j]) * slope;
        }
        grad.push(g);
    }
    for q in 1..c {
        let mut g = 0.0;
        for i in 0..r {
            let slope = dk[(i + 1) * w + q] - dk[i * w + q];
            g += (ratio[i * c + q - 1] - ratio[i * c + q]) * slope;
        }
        grad.push(g);
    }
    (ll, grad)
}

/// Outcome of `maximize_newton`.
pub(crate) struct NewtonResult {
    pub theta: Vec<f64>,
    pub value: f64,
    /// Inverse of the observed information (-Hessian)⁻¹ at the optimum, if it is positive
    /// definite.
    pub covariance: Option<DMatrix<f64>>,
    pub iterations: usize,
}

/// Maximise a smooth log-likelihood from an analytic gradient: Newton steps on a Hessian from
/// central differences of the gradient (step 1e-5), Levenberg damping when -H is not positive
/// definite, and step halving until the value rises and `feasible` holds (Nocedal & Wright 2006,
/// ch. 3 and 10). Converged when the Newton decrement gᵀ(-H)⁻¹g / 2 < 1e-10.
pub(crate) fn maximize_newton(
    mut theta: Vec<f64>,
    value_grad: impl Fn(&[f64]) -> (f64, Vec<f64>),
    feasible: impl Fn(&[f64]) -> bool,
    what: &str,
) -> Result<NewtonResult, StatsError> {
    let m = theta.len();
    let no_convergence = |iterations| StatsError::NoConvergence { what: what.into(), iterations };
    let (mut value, mut grad) = value_grad(&theta);
    for it in 1..=MAX_ITERATIONS {
        let info = neg_hessian(&theta, &grad, &value_grad);
        let g = DVector::from_column_slice(&grad);
        let mut damping = 0.0;
        let step = loop {
            let mut a = info.clone();
            for d in 0..m {
                a[(d, d)] += damping;
            }
            if let Some(ch) = a.cholesky() {
                break ch.solve(&g);
            }
            damping = if damping == 0.0 { 1e-6 * (1.0 + info.diagonal().amax()) } else { damping * 10.0 };
            if !damping.is_finite() {
                return Err(no_convergence(it));
            }
        };
        let decrement = g.dot(&step) / 2.0;
        if !decrement.is_finite() {
            return Err(no_convergence(it));
        }
        if decrement < 1e-10 {
            let covariance = info.clone().cholesky().map(|ch| ch.inverse());
            return Ok(NewtonResult { theta, value, covariance, iterations: it });
        }
        let mut t = 1.0;
        let mut accepted = false;
        for _ in 0..60 {
            let cand: Vec<f64> = theta.iter().zip(step.iter()).map(|(x, s)| x + t * s).collect();
            if feasible(&cand) {
                let (v, gr) = value_grad(&cand);
                if v.is_finite() && v >= value {
                    theta = cand;
                    value = v;
                    grad = gr;
                    accepted = true;
                    break;
                }
            }
            t /= 2.0;
        }
        if !accepted {
            // No ascent along the Newton direction within rounding: at the optimum.
            let covariance = info.cholesky().map(|ch| ch.inverse());
            return Ok(NewtonResult { theta, value, covariance, iterations: it });
        }
    }
    Err(no_convergence(MAX_ITERATIONS))
}

/// -∂²ℓ by central differences of the analytic gradient, symmetrised.
fn neg_hessian(theta: &[f64], grad: &[f64], value_grad: &impl Fn(&[f64]) -> (f64, Vec<f64>)) -> DMatrix<f64> {
    let m = theta.len();
    let mut h = DMatrix::zeros(m, m);
    for d in 0..m {
        let step = 1e-5 * (1.0 + theta[d].abs());
        let mut plus = theta.to_vec();
        let mut minus = theta.to_vec();
        plus[d] += step;
        minus[d] -= step;
        let (_, gp) = value_grad(&plus);
        let (_, gm) = value_grad(&minus);
        for e in 0..m {
            let v = (gp[e] - gm[e]) / (2.0 * step);
            h[(e, d)] = if v.is_finite() { -v } else { -grad[e] };
        }
    }
    (&h + h.transpose()) * 0.5
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{Distribution, StandardNormal};
    use serde::Deserialize;

    #[derive(Deserialize)]
    struct Fixture {
        cases: Vec<Case>,
    }

    #[derive(Deserialize)]
    struct Case {
        name: String,
        table: Vec<Vec<f64>>,
        two_step: Reference,
        two_step_tight: Reference,
        full_polished: Reference,
    }

    #[derive(Deserialize)]
    struct Reference {
        rho: f64,
        se: f64,
        #[serde(default)]
        row_cuts: Vec<f64>,
        #[serde(default)]
        col_cuts: Vec<f64>,
        #[serde(default)]
        log_likelihood: Option<f64>,
    }

    fn fixture() -> Fixture {
        crate::reference!("polychoric/polychoric.json")
    }

    fn table_of(rows: &[Vec<f64>]) -> ContingencyTable {
        let counts = rows.iter().flatten().map(|&v| v as u64).collect();
        ContingencyTable::from_counts(rows.len(), rows[0].len(), counts).unwrap()
    }

    fn codes_of(rows: &[Vec<f64>]) -> (Vec<u32>, Vec<u32>) {
        let (mut x, mut y) = (Vec::new(), Vec::new());
        for (i, row) in rows.iter().enumerate() {
            for (j, &n) in row.iter().enumerate() {
                for _ in 0..n as usize {
                    x.push(i as u32);
                    y.push(j as u32);
                }
            }
        }
        (x, y)
    }

    // Reference: R 4.2.2, polycor 0.8.1 polychor(tab, ML = FALSE, std.err = TRUE) with
    // control = list(reltol = 1e-14) (the default reltol stops BFGS up to 8e-5 from the
    // optimum; the SE is compared with the default call), thresholds from the same call.
    #[test]
    fn two_step_matches_polycor() {
        let fx = fixture();
        assert!(fx.cases.len() >= 6);
        for case in &fx.cases {
            let (x, y) = codes_of(&case.table);
            let (lx, ly) = (case.table.len(), case.table[0].len());
            let est = polychoric(&x, &y, lx, ly, OrdinalFit::TwoStep).unwrap();
            assert!(
                (est.rho - case.two_step_tight.rho).abs() < 1e-4,
                "{}: rho {} vs {}",
                case.name,
                est.rho,
                case.two_step_tight.rho
            );
            assert!((est.rho - case.two_step.rho).abs() < 1e-4, "{}", case.name);
            let se = est.se.unwrap();
            assert!((se - case.two_step.se).abs() < 1e-3, "{}: se {se}", case.name);
            assert!((se - case.two_step_tight.se).abs() < 1e-3, "{}", case.name);
            for (t, w) in est.thresholds_x.iter().zip(&case.two_step.row_cuts) {
                assert!((t - w).abs() < 1e-10, "{}", case.name);
            }
            for (t, w) in est.thresholds_y.iter().zip(&case.two_step.col_cuts) {
                assert!((t - w).abs() < 1e-10, "{}", case.name);
            }
            assert_eq!(est.thresholds_x.len(), case.two_step.row_cuts.len());
            assert_eq!(est.thresholds_y.len(), case.two_step.col_cuts.len());
            // The table entry point gives the same numbers as the code entry point.
            let via_table = polychoric_table(&table_of(&case.table), OrdinalFit::TwoStep).unwrap();
            assert_eq!(via_table.rho, est.rho);
        }
    }

    // Same fixture, joint ML. Reference: R 4.2.2, polycor 0.8.1 polychor(tab, ML = TRUE,
    // std.err = TRUE) polished by optim(method = "BFGS", hessian = TRUE) on polycor's own
    // likelihood (polycor:::binBvn); polychor's Nelder–Mead alone stalls up to 3e-3 short on
    // the 5 x 7 and 7 x 7 tables (see make_fixtures.R).
    #[test]
    fn full_ml_matches_polycor() {
        for case in &fixture().cases {
            let tab = table_of(&case.table);
            let est = polychoric_table(&tab, OrdinalFit::Full).unwrap();
            let two = polychoric_table(&tab, OrdinalFit::TwoStep).unwrap();
            let reference = &case.full_polished;
            assert!(est.log_likelihood >= two.log_likelihood - 1e-9, "{}", case.name);
            assert!(est.log_likelihood >= reference.log_likelihood.unwrap() - 1e-6, "{}", case.name);
            assert!((est.rho - reference.rho).abs() < 1e-4, "{}: rho {} vs {}", case.name, est.rho, reference.rho);
            assert!(
                (est.se.unwrap() - reference.se).abs() < 1e-3,
                "{}: se {:?} vs {}",
                case.name,
                est.se,
                reference.se
            );
            for (t, w) in est.thresholds_x.iter().zip(&reference.row_cuts) {
                assert!((t - w).abs() < 1e-3, "{}", case.name);
            }
            for (t, w) in est.thresholds_y.iter().zip(&reference.col_cuts) {
                assert!((t - w).abs() < 1e-3, "{}", case.name);
            }
        }
    }

    // The fixture's 4 x 5 table has an empty third column; polycor drops it (same numbers as a
    // merge, since the category holds no one). We record the merge.
    #[test]
    fn empty_category_is_merged_and_recorded() {
        let fx = fixture();
        let case = fx.cases.iter().find(|c| c.name.contains("empty")).unwrap();
        let est = polychoric_table(&table_of(&case.table), OrdinalFit::TwoStep).unwrap();
        assert_eq!(est.merged, vec![CategoryMerge { margin: Margin::Second, empty: 2, into: 3 }]);
        assert_eq!(est.thresholds_y.len(), 3);
        let top = ContingencyTable::from_counts(2, 3, vec![5, 3, 0, 2, 6, 0]).unwrap();
        let est = polychoric_table(&top, OrdinalFit::TwoStep).unwrap();
        assert_eq!(est.merged[0].into, 1);
        assert!(est.rho.is_finite());
    }

    // Zero cells never give NaN; a 2 x 2 table with an empty off-diagonal cell has its
    // likelihood maximum at ρ -> 1, so the estimate sits at the bound (common practice: the
    // tetrachoric of such a table is 1).
    #[test]
    fn zero_cells_and_boundary() {
        let tab = ContingencyTable::from_counts(2, 2, vec![30, 0, 10, 40]).unwrap();
        for fit in [OrdinalFit::TwoStep, OrdinalFit::Full] {
            let est = polychoric_table(&tab, fit).unwrap();
            assert!(est.rho.is_finite() && est.at_bound, "{est:?}");
            assert!((est.rho - MAX_CORRELATION).abs() < 1e-6);
            assert_eq!(est.se, None);
        }
    }

    #[test]
    fn degenerate_inputs_are_errors() {
        assert!(matches!(
            polychoric(&[1, 1, 1], &[0, 1, 2], 3, 3, OrdinalFit::TwoStep),
            Err(StatsError::Constant { .. })
        ));
        assert!(matches!(polychoric(&[0, 1], &[0], 2, 2, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
        assert!(matches!(polychoric(&[0, 3], &[0, 1], 2, 2, OrdinalFit::TwoStep), Err(StatsError::InvalidInput(_))));
    }

    /// Cut a standard bivariate normal sample with correlation `rho` at `cuts`.
    fn coarsened_sample(n: usize, rho: f64, cuts: &[f64], seed: u64) -> (Vec<u32>, Vec<u32>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let cat = |v: f64| cuts.iter().filter(|&&c| v > c).count() as u32;
        let (mut x, mut y) = (Vec::with_capacity(n), Vec::with_capacity(n));
        for _ in 0..n {
            let z1: f64 = StandardNormal.sample(&mut rng);
            let z2: f64 = StandardNormal.sample(&mut rng);
            let v = rho * z1 + (1.0 - rho * rho).sqrt() * z2;
            x.push(cat(z1));
            y.push(cat(v));
        }
        (x, y)
    }

    fn pearson(x: &[u32], y: &[u32]) -> f64 {
        let n = x.len() as f64;
        let mx = x.iter().map(|&v| f64::from(v)).sum::<f64>() / n;
        let my = y.iter().map(|&v| f64::from(v)).sum::<f64>() / n;
        let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
        for (&a, &b) in x.iter().zip(y) {
            let (da, db) = (f64::from(a) - mx, f64::from(b) - my);
            sxy += da * db;
            sxx += da * da;
            syy += db * db;
        }
        sxy / (sxx * syy).sqrt()
    }

    // Simulation (common practice, no single source: coarsening attenuates Pearson correlations,
    // the polychoric recovers the latent one). Latent ρ = 0.6, five skewed categories as
    // in Likert items, n = 20,000, fixed seed.
    #[test]
    fn coarsening_attenuates_pearson_not_polychoric() {
        let cuts = [-1.6, -0.8, 0.1, 1.0];
        let (x, y) = coarsened_sample(20_000, 0.6, &cuts, 42);
        let r = pearson(&x, &y);
        let est = polychoric(&x, &y, 5, 5, OrdinalFit::TwoStep).unwrap();
        assert!(r < 0.57, "pearson {r}");
        assert!((est.rho - 0.6).abs() < 0.02, "polychoric {}", est.rho);
        // The SE (thresholds fixed) is about (1 - ρ²)/√n inflated by the information lost
        // to coarsening; it must be of that order (common practice, no single source).
        let se = est.se.unwrap();
        assert!(se > 0.64 / (20_000_f64).sqrt() && se < 0.02, "se {se}");
        for (t, c) in est.thresholds_x.iter().zip(&cuts) {
            assert!((t - c).abs() < 0.05);
        }
    }
}
