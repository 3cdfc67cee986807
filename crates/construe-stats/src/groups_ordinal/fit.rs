//! Multi-group DWLS for the threshold model: the fit (Gauss-Newton with step halving), robust
//! (sandwich) standard errors, the scaled-and-shifted statistic, and the robust tests of
//! released equalities (score tests) and of one set of constraints against a larger one
//! (difference tests). Central type: `GroupsFit`.
//!
//! With s the statistics of all groups stacked, σ(x) their implied values, W = diag(1/v_e)
//! (v_e the sampling variance of statistic e), V the block-diagonal sampling covariance (groups
//! independent), J = ∂σ/∂x and H = J'WJ:
//! - discrepancy T = Σ_e w_e (s_e - σ_e)² (the weights carry the sample sizes, so T is the
//!   naive statistic with no further n: multi-group DWLS, Muthén, du Toit & Spisic 1997);
//! - acov(x̂) = H⁻¹ J'W V W J H⁻¹ (sandwich);
//! - U = W - W J H⁻¹ J'W; scaled-and-shifted T* = a T + b, a = sqrt(df / tr((UV)²)),
//!   b = df - a tr(UV), on df = dim(s) - dim(x) (Asparouhov & Muthén 2010);
//! - a test of a smaller model M0 against a larger M1 evaluates both Jacobians at M0's
//!   estimate (M1 as M0 with the released parameters made free, so the larger model's tangent
//!   space is spanned even where the released parametrization is redundant; ranks give the df)
//!   and refers the statistic to the mixture Σ λ_i χ²₁ with λ the eigenvalues of
//!   U_d V, U_d = P₁ - P₀, P = W J H⁺ J'W (Satorra 2000), through the same mean-and-variance
//!   adjustment (Asparouhov & Muthén 2006). The difference test uses T₀ - T₁ of the two fits;
//!   the score test the quadratic form e'W J₁ H₁⁺ J₁'W e - e'W J₀ H₀⁺ J₀'W e at M0's residual
//!   e, its first-order equivalent that needs no refit.

use nalgebra::{DMatrix, DVector, SymmetricEigen};
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::OrdinalGroups;
use super::model::{Equalities, ParamMap};
use crate::StatsError;
use crate::invariance::{ParamKind, Release};
use crate::sem::{Correction, FitIndices, StatisticCorrection, robust_indices};

const MAX_ITERATIONS: usize = 500;
const MAX_HALVINGS: usize = 40;
/// Relative eigenvalue below which a direction of J'WJ counts as redundant.
const RANK_TOLERANCE: f64 = 1e-9;

/// One fitted set of constraints.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupsFit {
    pub equalities: Equalities,
    pub map: ParamMap,
    /// The full parameter vector (see `Layout`).
    pub full: Vec<f64>,
    /// Sandwich covariance of the free parameters.
    pub acov: DMatrix<f64>,
    /// Naive DWLS statistic T = Σ w e².
    pub naive: f64,
    pub df: usize,
    pub correction: Correction,
    pub indices: FitIndices,
    pub iterations: usize,
}

impl GroupsFit {
    /// Standard error of full parameter `i`, `None` when it is fixed.
    pub fn se(&self, i: usize) -> Option<f64> {
        match self.map.slots[i] {
            super::model::Slot::Free(k) => Some(self.acov[(k, k)].max(0.0).sqrt()),
            super::model::Slot::Fixed(_) => None,
        }
    }

    /// Sampling covariance of full parameters `i` and `j` (0 when either is fixed).
    pub fn cov(&self, i: usize, j: usize) -> f64 {
        match (self.map.slots[i], self.map.slots[j]) {
            (super::model::Slot::Free(a), super::model::Slot::Free(b)) => self.acov[(a, b)],
            _ => 0.0,
        }
    }
}

/// A robust test of constraints: the naive statistic and its scaled-and-shifted version.
#[derive(Debug, Clone, PartialEq)]
pub struct ConstraintStatistic {
    /// The naive statistic (difference of T, or the score quadratic form).
    pub naive: f64,
    pub df: usize,
    /// tr(U_d V) and tr((U_d V)²).
    pub trace: f64,
    pub trace_squared: f64,
    /// a T + b (clipped at 0).
    pub statistic: f64,
    pub p_value: f64,
}

/// H⁺ (pseudo-inverse by the symmetric eigendecomposition) and the rank of a symmetric
/// positive semi-definite H.
fn pseudo_inverse(h: &DMatrix<f64>) -> (DMatrix<f64>, usize) {
    let eig = SymmetricEigen::new(h.clone());
    let top = eig.eigenvalues.iter().copied().fold(0.0_f64, f64::max);
    let q = h.nrows();
    let mut inv = DMatrix::zeros(q, q);
    let mut rank = 0;
    for (k, &ev) in eig.eigenvalues.iter().enumerate() {
        if ev > RANK_TOLERANCE * top && ev > 0.0 {
            rank += 1;
            let v = eig.eigenvectors.column(k);
            inv += (v * v.transpose()) / ev;
        }
    }
    (inv, rank)
}

fn adjusted(naive: f64, df: usize, trace: f64, trace_squared: f64) -> Result<ConstraintStatistic, StatsError> {
    let naive = naive.max(0.0);
    if df == 0 {
        return Ok(ConstraintStatistic { naive, df, trace, trace_squared, statistic: 0.0, p_value: 1.0 });
    }
    let (a, b) = if trace_squared > 0.0 {
        let a = (df as f64 / trace_squared).sqrt();
        (a, df as f64 - a * trace)
    } else {
        (1.0, 0.0)
    };
    let statistic = (a * naive + b).max(0.0);
    let chi = ChiSquared::new(df as f64).map_err(|e| StatsError::InvalidInput(e.to_string()))?;
    Ok(ConstraintStatistic { naive, df, trace, trace_squared, statistic, p_value: chi.sf(statistic) })
}

impl OrdinalGroups {
    fn residual(&self, sigma: &DVector<f64>) -> DVector<f64> {
        &self.values - sigma
    }

    fn weighted_ss(&self, e: &DVector<f64>) -> f64 {
        e.iter().zip(self.weights.iter()).map(|(e, w)| w * e * e).sum()
    }

    /// T at the free vector `x`, `None` outside the model's domain.
    fn objective(&self, map: &ParamMap, x: &[f64]) -> Option<f64> {
        let (sigma, _) = self.layout.evaluate(map, &map.full(x), false)?;
        let f = self.weighted_ss(&self.residual(&sigma));
        f.is_finite().then_some(f)
    }

    /// W J (rows scaled by the weights).
    fn weighted(&self, j: &DMatrix<f64>) -> DMatrix<f64> {
        let mut wj = j.clone();
        for (mut row, &w) in wj.row_iter_mut().zip(self.weights.iter()) {
            row *= w;
        }
        wj
    }

    /// M V for the block-diagonal V (one block per group).
    fn times_v(&self, m: &DMatrix<f64>) -> DMatrix<f64> {
        let k = self.layout.n_stats();
        let mut out = DMatrix::zeros(m.nrows(), m.ncols());
        for (g, v) in self.acov.iter().enumerate() {
            let block = m.columns(g * k, k) * v;
            out.columns_mut(g * k, k).copy_from(&block);
        }
        out
    }

    /// tr(M V) and tr((M V)²).
    fn traces(&self, m: &DMatrix<f64>) -> (f64, f64) {
        let mv = self.times_v(m);
        let t1 = mv.trace();
        let t2 = mv.component_mul(&mv.transpose()).sum();
        (t1, t2)
    }

    /// P = W J H⁺ J'W and rank(J'WJ).
    fn projector(&self, j: &DMatrix<f64>) -> (DMatrix<f64>, usize) {
        let wj = self.weighted(j);
        let (h_inv, rank) = pseudo_inverse(&(j.transpose() * &wj));
        (&wj * h_inv * wj.transpose(), rank)
    }

    /// Fits the model under `eq` by Gauss-Newton on T, from `start` (a full parameter vector,
    /// e.g. a previous fit's) or from `start_values`.
    pub fn fit_equalities(&self, eq: &Equalities, start: Option<&[f64]>) -> Result<GroupsFit, StatsError> {
        let map = self.layout.map(eq)?;
        let total = self.values.len();
        if map.free > total {
            return Err(StatsError::NotIdentified { free: map.free, moments: total });
        }
        let start_full = match start {
            Some(s) => s.to_vec(),
            None => self.start_values(),
        };
        let mut x = map.free_values(&start_full);
        if x.iter().any(|v| !v.is_finite()) {
            return Err(StatsError::InvalidInput("starting values are not finite".into()));
        }
        let not_domain = || StatsError::InvalidInput("a latent response variance is not positive at the start".into());
        let mut f = self.objective(&map, &x).ok_or_else(not_domain)?;
        let mut iterations = 0;
        let mut converged = false;
        while iterations < MAX_ITERATIONS {
            iterations += 1;
            let (sigma, j) = self.layout.evaluate(&map, &map.full(&x), true).ok_or_else(not_domain)?;
            let e = self.residual(&sigma);
            let wj = self.weighted(&j);
            let g = wj.transpose() * &e;
            let h = j.transpose() * &wj;
            let d = match h.clone().cholesky() {
                Some(ch) => ch.solve(&g),
                None => {
                    let mut ridge = h.clone();
                    for k in 0..ridge.nrows() {
                        ridge[(k, k)] += 1e-8 * (1.0 + h[(k, k)]);
                    }
                    ridge
                        .cholesky()
                        .ok_or_else(|| StatsError::Singular { what: "the ordinal multi-group information".into() })?
                        .solve(&g)
                }
            };
            let expected = g.dot(&d);
            let mut t = 1.0;
            let mut accepted = None;
            for _ in 0..MAX_HALVINGS {
                let trial: Vec<f64> = x.iter().zip(d.iter()).map(|(a, b)| a + t * b).collect();
                if let Some(ft) = self.objective(&map, &trial)
                    && ft <= f + 1e-12 * f.abs().max(1e-300)
                {
                    accepted = Some((trial, ft));
                    break;
                }
                t *= 0.5;
            }
            let Some((trial, ft)) = accepted else {
                converged = expected.abs() < 1e-10;
                break;
            };
            let step = d.amax() * t;
            x = trial;
            let change = f - ft;
            f = ft;
            if (step < 1e-10 && expected.abs() < 1e-10) || (expected.abs() < 1e-16 && change.abs() < 1e-16) {
                converged = true;
                break;
            }
        }
        if !converged {
            return Err(StatsError::NoConvergence { what: "the ordinal multi-group fit".into(), iterations });
        }
        self.finish(eq, map, &x, iterations)
    }

    /// Standard errors, corrected statistic and indices at the estimate.
    fn finish(&self, eq: &Equalities, map: ParamMap, x: &[f64], iterations: usize) -> Result<GroupsFit, StatsError> {
        let full = map.full(x);
        let (sigma, j) = self.layout.evaluate(&map, &full, true).ok_or_else(|| {
            StatsError::InvalidInput("a latent response variance is not positive at the estimate".into())
        })?;
        let e = self.residual(&sigma);
        let naive = self.weighted_ss(&e);
        let wj = self.weighted(&j);
        let h = j.transpose() * &wj;
        let (h_inv, rank) = pseudo_inverse(&h);
        if rank < map.free {
            return Err(StatsError::Singular {
                what: "the ordinal multi-group information (a parameter is not identified)".into(),
            });
        }
        let total = self.values.len();
        let df = total - map.free;
        let meat = self.times_v(&wj.transpose()) * &wj;
        let meat = (&meat + meat.transpose()) * 0.5;
        let acov = &h_inv * meat * &h_inv;
        let p = &wj * &h_inv * wj.transpose();
        let mut u = -p;
        for (k, &w) in self.weights.iter().enumerate() {
            u[(k, k)] += w;
        }
        let (trace, trace_squared) = self.traces(&u);
        let (scale, shift) = if df > 0 && trace_squared > 0.0 {
            let a = (df as f64 / trace_squared).sqrt();
            (a, df as f64 - a * trace)
        } else {
            (1.0, 0.0)
        };
        let k = self.layout.n_stats();
        let n_tau = self.layout.n_tau();
        let (mut baseline_naive, mut srmr_sum) = (0.0, 0.0);
        for g in 0..self.layout.groups {
            for i in g * k + n_tau..(g + 1) * k {
                baseline_naive += self.weights[i] * self.values[i] * self.values[i];
                srmr_sum += e[i] * e[i];
            }
        }
        let n_corr = self.layout.groups * (k - n_tau);
        let correction = Correction {
            kind: StatisticCorrection::ScaledShifted,
            naive,
            trace,
            trace_squared: Some(trace_squared),
            scale,
            shift,
            baseline_naive,
            baseline_trace: n_corr as f64,
        };
        let p_items = self.layout.p as f64;
        let srmr = (srmr_sum / (self.layout.groups as f64 * p_items * (p_items + 1.0) / 2.0)).sqrt();
        let n_total: usize = self.n.iter().sum();
        let indices = robust_indices(&correction, df, n_corr, n_total as f64, srmr)?;
        Ok(GroupsFit { equalities: eq.clone(), map, full, acov, naive, df, correction, indices, iterations })
    }

    /// The projectors P₀ (of `map`) and P₁ (of `map` with `slots` released) at `full`, and the
    /// rank gained.
    fn released_projectors(
        &self,
        map: &ParamMap,
        full: &[f64],
        slots: &[usize],
    ) -> Result<(DMatrix<f64>, DMatrix<f64>, usize), StatsError> {
        let general = map.release(slots);
        let (_, j0) = self.layout.evaluate(map, full, true).ok_or_else(outside)?;
        let (_, j1) = self.layout.evaluate(&general, full, true).ok_or_else(outside)?;
        let (p0, r0) = self.projector(&j0);
        let (p1, r1) = self.projector(&j1);
        Ok((p0, p1, r1.saturating_sub(r0)))
    }

    /// The full slots `releases` make free.
    fn slots_of(&self, releases: &[Release]) -> Vec<usize> {
        let mut slots: Vec<usize> =
            releases.iter().flat_map(|r| self.layout.release_slots(r.item, r.kind, r.group)).collect();
        slots.sort_unstable();
        slots.dedup();
        slots
    }

    /// Robust score test of freeing the full parameters `slots` at the estimate `full` of the
    /// model `eq` (see the module doc), conditional on freeing `given` as well (0 df and a
    /// statistic of 0 for a release that changes nothing, such as the thresholds of a
    /// 3-category item): Q(slots ∪ given) - Q(given), Q(s) = e'W J_s H_s⁺ J_s'W e.
    fn score(
        &self,
        eq: &Equalities,
        full: &[f64],
        slots: &[usize],
        given: &[usize],
    ) -> Result<ConstraintStatistic, StatsError> {
        let map = self.layout.map(eq)?;
        let (sigma, _) = self.layout.evaluate(&map, full, false).ok_or_else(outside)?;
        let e = self.residual(&sigma);
        let base = map.release(given);
        let (p0, p1, df) = self.released_projectors(&base, full, slots)?;
        let ud = p1 - p0;
        let naive = e.dot(&(&ud * &e));
        let (trace, trace_squared) = self.traces(&ud);
        adjusted(naive, df, trace, trace_squared)
    }

    /// Robust score test of `release` at the estimate `full` of the model `eq`. Releasing an
    /// item's thresholds releases the rest of the item (`Equalities::constrained`); so that the
    /// test of its thresholds does not also carry a loading difference, which the loading's own
    /// test finds, it is conditional on the loading being free: the improvement from freeing
    /// the thresholds beyond freeing the loading.
    pub fn score_release(
        &self,
        eq: &Equalities,
        full: &[f64],
        release: Release,
    ) -> Result<ConstraintStatistic, StatsError> {
        let k = self.layout.categories[release.item];
        let slots = self.slots_of(&[release]);
        let loading = Release { kind: ParamKind::Loading, ..release };
        let given = if release.kind == ParamKind::Threshold
            && eq.constrained(release.item, ParamKind::Loading, release.group, k)
        {
            self.slots_of(&[loading])
        } else {
            Vec::new()
        };
        self.score(eq, full, &slots, &given)
    }

    /// Robust difference test of the fit `restricted` against `general`, a fit with fewer
    /// constraints (each equality of `general` holds in `restricted`): T₀ - T₁ adjusted with U_d
    /// from the parameters `general` frees, evaluated at `restricted`'s estimate.
    pub fn difference_test(
        &self,
        restricted: &GroupsFit,
        general: &GroupsFit,
    ) -> Result<ConstraintStatistic, StatsError> {
        self.difference_at(
            &restricted.equalities,
            &restricted.full,
            restricted.naive,
            &general.equalities,
            general.naive,
        )
    }

    /// `difference_test` from the two models' constraints, the restricted estimate and both
    /// naive statistics.
    pub fn difference_at(
        &self,
        restricted: &Equalities,
        full: &[f64],
        naive_restricted: f64,
        general: &Equalities,
        naive_general: f64,
    ) -> Result<ConstraintStatistic, StatsError> {
        let releases = self.difference_releases(restricted, general);
        let slots = self.slots_of(&releases);
        let map = self.layout.map(restricted)?;
        let (p0, p1, df) = self.released_projectors(&map, full, &slots)?;
        let (trace, trace_squared) = self.traces(&(p1 - p0));
        adjusted(naive_restricted - naive_general, df, trace, trace_squared)
    }

    /// The item parameters constrained under `restricted` but not under `general`.
    pub fn difference_releases(&self, restricted: &Equalities, general: &Equalities) -> Vec<Release> {
        let mut out = Vec::new();
        for g in (0..self.layout.groups).filter(|&g| g != self.layout.reference) {
            for j in 0..self.layout.p {
                let k = self.layout.categories[j];
                for kind in [ParamKind::Threshold, ParamKind::Loading, ParamKind::Intercept, ParamKind::Residual] {
                    if restricted.constrained(j, kind, g, k) && !general.constrained(j, kind, g, k) {
                        out.push(Release { item: j, kind, group: g });
                    }
                }
            }
        }
        out
    }
}

fn outside() -> StatsError {
    StatsError::InvalidInput("a latent response variance is not positive at the estimate".into())
}
