//! Each respondent's influence on a two-step polychoric or polyserial correlation, with the
//! estimation of the thresholds (and, for polyserial, of the continuous variable's mean and
//! standard deviation) accounted for.
//!
//! The two-step estimator solves stacked estimating equations Σ_i Ψ(i; θ) = 0 with
//! θ = (thresholds [, mean, sd], ρ): per threshold Ψ_τk = 1[category < k] - Φ(τ_k) (the
//! margins, Olsson 1979 eq. 6), for polyserial Ψ_μ = x - μ and Ψ_σ = (x - μ)² - (n-1)/n σ²
//! (σ with divisor n - 1), and Ψ_ρ = ∂ log P(respondent's answers) / ∂ρ with the thresholds
//! fixed. Linearising at the estimate (the M-estimator influence function; Muthén 1984,
//! Jöreskog 1994 for the threshold correction) gives
//! IF_ρ(i) = -[ψ_ρ(i) + Σ_τ D_τ IF_τ(i) (+ D_μ IF_μ(i) + D_σ IF_σ(i))] / D_ρ
//! with D_θ = (1/n) Σ_i ∂ψ_ρ(i)/∂θ at the estimate (observed, not expected, derivatives),
//! IF_τk(i) = (1[category_i < k] - F_k)/φ(τ_k), IF_μ = x - x̄, IF_σ = σ(z² - c)/(2c),
//! c = (n-1)/n. ρ̂ - ρ ≈ (1/n) Σ_i IF_ρ(i), and the IFs sum to zero at the estimate.
//! A polychoric respondent's influence depends only on the two categories: one table per pair.

use crate::StatsError;
use crate::bvn::{bvn_cdf, bvn_pdf, norm_cdf, norm_pdf};
use crate::mixed::MISSING_CODE;
use crate::polychoric::{Margin, non_empty, thresholds_from_counts};

/// Floor of a cell or category probability inside a ratio (as in the likelihoods).
const MIN_PROBABILITY: f64 = 1e-300;

fn pad(t: &[f64]) -> Vec<f64> {
    let mut v = Vec::with_capacity(t.len() + 2);
    v.push(f64::NEG_INFINITY);
    v.extend_from_slice(t);
    v.push(f64::INFINITY);
    v
}

/// The per-category threshold terms Σ_k D_k IF_τk(category) of one ordinal margin, given the
/// derivatives `d[k-1]` = D_τk (k = 1..K-1), the collapsed category counts and the padded
/// thresholds.
fn threshold_terms(d: &[f64], counts: &[u64], tau: &[f64]) -> Vec<f64> {
    let n: u64 = counts.iter().sum();
    let k_cats = counts.len();
    let mut cum = 0_u64;
    let f: Vec<f64> = counts[..k_cats - 1]
        .iter()
        .map(|&c| {
            cum += c;
            cum as f64 / n as f64
        })
        .collect();
    (0..k_cats)
        .map(|cat| {
            (1..k_cats)
                .map(|k| {
                    let below = if cat < k { 1.0 } else { 0.0 };
                    d[k - 1] * (below - f[k - 1]) / norm_pdf(tau[k])
                })
                .sum()
        })
        .collect()
}

fn check_curvature(d_rho: f64, what: &str) -> Result<(), StatsError> {
    if d_rho < 0.0 && d_rho.is_finite() {
        Ok(())
    } else {
        Err(StatsError::Singular { what: format!("the {what} likelihood's curvature in rho") })
    }
}

/// The contribution of each (first, second) category pair to a polychoric correlation ρ̂ (the
/// two-step estimate on the pair's complete rows), IF_ρ / n, row-major over the original codes
/// (`levels_x` × `levels_y`); 0 for cells no respondent occupies. Returns (table, n).
pub(super) fn polychoric_table(
    x: &[u8],
    y: &[u8],
    levels_x: usize,
    levels_y: usize,
    rho: f64,
) -> Result<(Vec<f64>, usize), StatsError> {
    let mut counts = vec![0_u64; levels_x * levels_y];
    for (&a, &b) in x.iter().zip(y) {
        if a != MISSING_CODE && b != MISSING_CODE {
            counts[a as usize * levels_y + b as usize] += 1;
        }
    }
    let n: u64 = counts.iter().sum();
    let rows: Vec<u64> = (0..levels_x).map(|a| (0..levels_y).map(|b| counts[a * levels_y + b]).sum()).collect();
    let cols: Vec<u64> = (0..levels_y).map(|b| (0..levels_x).map(|a| counts[a * levels_y + b]).sum()).collect();
    let (keep_r, _) = non_empty(&rows, Margin::First);
    let (keep_c, _) = non_empty(&cols, Margin::Second);
    let (r, c) = (keep_r.len(), keep_c.len());
    if r < 2 {
        return Err(StatsError::Constant { what: "first ordinal variable".into() });
    }
    if c < 2 {
        return Err(StatsError::Constant { what: "second ordinal variable".into() });
    }
    let row_counts: Vec<u64> = keep_r.iter().map(|&a| rows[a]).collect();
    let col_counts: Vec<u64> = keep_c.iter().map(|&b| cols[b]).collect();
    let ha = pad(&thresholds_from_counts(&row_counts));
    let kb = pad(&thresholds_from_counts(&col_counts));
    let count = |a: usize, b: usize| counts[keep_r[a] * levels_y + keep_c[b]];

    // Corner grids, (r+1) x (c+1): Φ₂, φ₂, ∂φ₂/∂ρ, ∂Φ₂/∂h, ∂Φ₂/∂k, ∂φ₂/∂h, ∂φ₂/∂k.
    let w = c + 1;
    let one_minus = 1.0 - rho * rho;
    let s = one_minus.sqrt();
    let size = (r + 1) * w;
    let (mut cdf, mut pdf, mut dpdf) = (vec![0.0; size], vec![0.0; size], vec![0.0; size]);
    let (mut gh, mut gk, mut dh, mut dk) = (vec![0.0; size], vec![0.0; size], vec![0.0; size], vec![0.0; size]);
    for (i, &h) in ha.iter().enumerate() {
        for (j, &k) in kb.iter().enumerate() {
            let at = i * w + j;
            cdf[at] = bvn_cdf(h, k, rho);
            // ∂Φ₂/∂h = φ(h) Φ((k - ρh)/√(1-ρ²)) (infinite k gives Φ(±∞)).
            if h.is_finite() {
                gh[at] = norm_pdf(h) * if k.is_finite() { norm_cdf((k - rho * h) / s) } else { f64::from(k > 0.0) };
            }
            if k.is_finite() {
                gk[at] = norm_pdf(k) * if h.is_finite() { norm_cdf((h - rho * k) / s) } else { f64::from(h > 0.0) };
            }
            if h.is_finite() && k.is_finite() {
                let d = bvn_pdf(h, k, rho);
                let q = h * h - 2.0 * rho * h * k + k * k;
                pdf[at] = d;
                dpdf[at] = d * ((rho + h * k) / one_minus - rho * q / (one_minus * one_minus));
                dh[at] = -d * (h - rho * k) / one_minus;
                dk[at] = -d * (k - rho * h) / one_minus;
            }
        }
    }
    let cell =
        |g: &[f64], a: usize, b: usize| g[(a + 1) * w + b + 1] - g[a * w + b + 1] - g[(a + 1) * w + b] + g[a * w + b];

    let nf = n as f64;
    let mut psi = vec![0.0; r * c];
    let mut d_rho = 0.0;
    // D for row thresholds h_1..h_{r-1} and column thresholds k_1..k_{c-1}.
    let mut d_row = vec![0.0; r - 1];
    let mut d_col = vec![0.0; c - 1];
    for a in 0..r {
        for b in 0..c {
            let nab = count(a, b);
            if nab == 0 {
                continue;
            }
            let wgt = nab as f64 / nf;
            let p = cell(&cdf, a, b).max(MIN_PROBABILITY);
            let p_rho = cell(&pdf, a, b);
            let p_rho2 = cell(&dpdf, a, b);
            let ps = p_rho / p;
            psi[a * c + b] = ps;
            d_rho += wgt * (p_rho2 / p - ps * ps);
            // ∂ψ/∂θ = (∂P_ρ/∂θ)/P - ψ (∂P/∂θ)/P for the cell's own bounds.
            let edge_h = |i: usize| (gh[i * w + b + 1] - gh[i * w + b], dh[i * w + b + 1] - dh[i * w + b]);
            let edge_k = |j: usize| (gk[(a + 1) * w + j] - gk[a * w + j], dk[(a + 1) * w + j] - dk[a * w + j]);
            if a + 1 < r {
                let (p_t, p_rt) = edge_h(a + 1);
                d_row[a] += wgt * (p_rt / p - ps * p_t / p);
            }
            if a > 0 {
                let (p_t, p_rt) = edge_h(a);
                d_row[a - 1] -= wgt * (p_rt / p - ps * p_t / p);
            }
            if b + 1 < c {
                let (p_t, p_rt) = edge_k(b + 1);
                d_col[b] += wgt * (p_rt / p - ps * p_t / p);
            }
            if b > 0 {
                let (p_t, p_rt) = edge_k(b);
                d_col[b - 1] -= wgt * (p_rt / p - ps * p_t / p);
            }
        }
    }
    check_curvature(d_rho, "polychoric")?;
    let t_row = threshold_terms(&d_row, &row_counts, &ha);
    let t_col = threshold_terms(&d_col, &col_counts, &kb);
    let mut table = vec![0.0; levels_x * levels_y];
    for a in 0..r {
        for b in 0..c {
            if count(a, b) > 0 {
                let influence = -(psi[a * c + b] + t_row[a] + t_col[b]) / d_rho;
                table[keep_r[a] * levels_y + keep_c[b]] = influence / nf;
            }
        }
    }
    Ok((table, usize::try_from(n).unwrap_or(usize::MAX)))
}

/// A polyserial pair's influence, evaluated per respondent from (x, category).
#[derive(Debug, Clone)]
pub(super) struct Polyserial {
    mean: f64,
    sd: f64,
    rho: f64,
    /// Collapsed thresholds, padded with ∓∞.
    tau: Vec<f64>,
    /// Original code -> collapsed category (`usize::MAX` for an empty one).
    category: Vec<usize>,
    /// Σ_k D_τk IF_τk per collapsed category.
    threshold_terms: Vec<f64>,
    /// (1/n) Σ ∂ψ/∂z and (1/n) Σ z ∂ψ/∂z.
    dz: f64,
    dzz: f64,
    /// (n - 1)/n.
    c: f64,
    /// -1 / (D_ρ n).
    scale: f64,
    pub(super) n: usize,
}

/// ψ = ∂ log P(category | z)/∂ρ and its derivatives in ρ, z, the lower and the upper threshold.
struct Scores {
    psi: f64,
    psi_rho: f64,
    psi_z: f64,
    psi_lo: f64,
    psi_hi: f64,
}

/// One bound's terms: (Φ(u), ∂/∂ρ, ∂²/∂ρ², ∂/∂z, ∂²/∂ρ∂z, ∂/∂t, ∂²/∂ρ∂t) of Φ(u) with
/// u = (t - ρz)/√(1-ρ²); an infinite bound contributes a constant.
fn bound(t: f64, z: f64, rho: f64) -> [f64; 7] {
    if t.is_infinite() {
        return [f64::from(t > 0.0), 0.0, 0.0, 0.0, 0.0, 0.0, 0.0];
    }
    let one_minus = 1.0 - rho * rho;
    let s = one_minus.sqrt();
    let s3 = s * one_minus;
    let s5 = s3 * one_minus;
    let u = (t - rho * z) / s;
    let u_r = (rho * t - z) / s3;
    let u_rr = t / s3 + 3.0 * rho * (rho * t - z) / s5;
    let (u_z, u_rz) = (-rho / s, -1.0 / s3);
    let (u_t, u_rt) = (1.0 / s, rho / s3);
    let f = norm_pdf(u);
    [
        norm_cdf(u),
        f * u_r,
        f * (u_rr - u * u_r * u_r),
        f * u_z,
        f * (u_rz - u * u_z * u_r),
        f * u_t,
        f * (u_rt - u * u_t * u_r),
    ]
}

fn scores(z: f64, lo: f64, hi: f64, rho: f64) -> Scores {
    let l = bound(lo, z, rho);
    let h = bound(hi, z, rho);
    // P computed on the side of the mean where it does not cancel.
    let one_minus = 1.0 - rho * rho;
    let s = one_minus.sqrt();
    let p = if lo.is_finite() && (lo - rho * z) / s > 0.0 {
        norm_cdf(-(lo - rho * z) / s) - if hi.is_finite() { norm_cdf(-(hi - rho * z) / s) } else { 0.0 }
    } else {
        h[0] - l[0]
    }
    .max(MIN_PROBABILITY);
    let psi = (h[1] - l[1]) / p;
    Scores {
        psi,
        psi_rho: (h[2] - l[2]) / p - psi * psi,
        psi_z: (h[4] - l[4]) / p - psi * (h[3] - l[3]) / p,
        psi_lo: -(l[6] / p - psi * l[5] / p),
        psi_hi: h[6] / p - psi * h[5] / p,
    }
}

impl Polyserial {
    /// From the pair's complete rows of `x` (NaN missing) and `y` (codes, `MISSING_CODE`
    /// missing), at the estimate `rho`.
    pub(super) fn new(x: &[f64], y: &[u8], levels: usize, rho: f64) -> Result<Polyserial, StatsError> {
        let rows: Vec<(f64, usize)> = x
            .iter()
            .zip(y)
            .filter(|(v, c)| !v.is_nan() && **c != MISSING_CODE)
            .map(|(v, c)| (*v, *c as usize))
            .collect();
        let n = rows.len();
        if n < 3 {
            return Err(StatsError::NotEnoughData { what: "polyserial correlation".into(), needed: 3, found: n });
        }
        let mut counts = vec![0_u64; levels];
        for &(_, c) in &rows {
            counts[c] += 1;
        }
        let (keep, _) = non_empty(&counts, Margin::Second);
        if keep.len() < 2 {
            return Err(StatsError::Constant { what: "ordinal variable".into() });
        }
        let mut category = vec![usize::MAX; levels];
        for (new, &old) in keep.iter().enumerate() {
            category[old] = new;
        }
        let kept: Vec<u64> = keep.iter().map(|&k| counts[k]).collect();
        let tau = pad(&thresholds_from_counts(&kept));
        let nf = n as f64;
        let mean = rows.iter().map(|r| r.0).sum::<f64>() / nf;
        let sd = (rows.iter().map(|r| (r.0 - mean).powi(2)).sum::<f64>() / (nf - 1.0)).sqrt();
        if sd <= 0.0 || !sd.is_finite() {
            return Err(StatsError::Constant { what: "continuous variable".into() });
        }
        let (mut d_rho, mut dz, mut dzz) = (0.0, 0.0, 0.0);
        let mut d_tau = vec![0.0; keep.len() - 1];
        for &(v, code) in &rows {
            let z = (v - mean) / sd;
            let cat = category[code];
            let sc = scores(z, tau[cat], tau[cat + 1], rho);
            d_rho += sc.psi_rho / nf;
            dz += sc.psi_z / nf;
            dzz += sc.psi_z * z / nf;
            if cat > 0 {
                d_tau[cat - 1] += sc.psi_lo / nf;
            }
            if cat + 1 < keep.len() {
                d_tau[cat] += sc.psi_hi / nf;
            }
        }
        check_curvature(d_rho, "polyserial")?;
        let threshold_terms = threshold_terms(&d_tau, &kept, &tau);
        Ok(Polyserial {
            mean,
            sd,
            rho,
            tau,
            category,
            threshold_terms,
            dz,
            dzz,
            c: (nf - 1.0) / nf,
            scale: -1.0 / (d_rho * nf),
            n,
        })
    }

    /// IF_ρ / n of a respondent with value `x` and ordinal `code` (both present).
    pub(super) fn contribution(&self, x: f64, code: u8) -> f64 {
        let z = (x - self.mean) / self.sd;
        let cat = self.category[code as usize];
        if cat == usize::MAX {
            return 0.0;
        }
        let psi = scores(z, self.tau[cat], self.tau[cat + 1], self.rho).psi;
        let moments = -self.dz * z - self.dzz * (z * z - self.c) / (2.0 * self.c);
        (psi + self.threshold_terms[cat] + moments) * self.scale
    }
}
