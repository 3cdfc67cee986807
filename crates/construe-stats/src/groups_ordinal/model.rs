//! The multi-group threshold model's parameters, which of them are free, fixed or equal across
//! groups at each set of equality constraints, and the implied thresholds and polychoric
//! correlations with their analytic Jacobian. Central types: `Layout` (where each parameter
//! sits in the full per-group vector), `Equalities` and `ParamMap` (full vector <- free vector).
//!
//! Model (theta parametrization; Millsap & Yun-Tein 2004; Wu & Estabrook 2016): in group g the
//! latent response of item j is y*_j = ν_jg + λ_jg η_f(j) + ε_j with η ~ N(κ_g, Φ_g),
//! ε_j ~ N(0, θ_jg) independent; answer c when τ_jc <= y*_j < τ_j,c+1. The statistics are the
//! standardized thresholds and the polychoric correlations:
//! t_jc = (τ_jcg - ν_jg - λ_jg κ_gf) / s_jg,  r_jl = λ_jg λ_lg Φ_g,f(j)f(l) / (s_jg s_lg),
//! s_jg² = λ_jg² Φ_g,ff + θ_jg.

use nalgebra::{DMatrix, DVector};

use crate::StatsError;
use crate::invariance::{Constraints, ParamKind, Release};

/// Cumulative equality constraints across groups, in the order of Wu & Estabrook (2016):
/// thresholds, then loadings, then intercepts, then unique variances; minus `released`.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Equalities {
    pub thresholds: bool,
    pub loadings: bool,
    pub intercepts: bool,
    pub residuals: bool,
    pub released: Vec<Release>,
}

impl Equalities {
    /// Errors unless each set of constraints includes the ones before it.
    pub(super) fn check(&self) -> Result<(), StatsError> {
        let ok = (!self.loadings || self.thresholds)
            && (!self.intercepts || self.loadings)
            && (!self.residuals || self.intercepts);
        if ok {
            Ok(())
        } else {
            Err(StatsError::InvalidInput(
                "ordinal invariance constraints must be cumulative: thresholds, loadings, intercepts, residual variances".into(),
            ))
        }
    }

    /// The constraints of the shared ladder: each kind held equal sets its flag.
    pub fn from_constraints(c: &Constraints) -> Self {
        let has = |k: ParamKind| c.kinds.contains(&k);
        Equalities {
            thresholds: has(ParamKind::Threshold),
            loadings: has(ParamKind::Loading),
            intercepts: has(ParamKind::Intercept),
            residuals: has(ParamKind::Residual),
            released: c.released.clone(),
        }
    }

    fn released(&self, item: usize, kind: ParamKind, group: usize) -> bool {
        self.released.iter().any(|r| r.item == item && r.kind == kind && r.group == group)
    }

    /// Whether `kind` of `item` in non-reference `group` is held equal to the reference
    /// group's under these constraints. Every other constraint of an item binds only while its
    /// thresholds are equal: with free thresholds the item's latent response has no common
    /// location or scale across groups, so neither its intercept nor its loading nor its unique
    /// variance can be compared (Wu & Estabrook 2016), and releasing an item's thresholds
    /// releases the rest of it. A unique variance binds only for items of three or more
    /// categories (see `Layout::map`).
    pub fn constrained(&self, item: usize, kind: ParamKind, group: usize, categories: usize) -> bool {
        let free = |k: ParamKind| self.released(item, k, group);
        let thresholds = self.thresholds && !free(ParamKind::Threshold);
        match kind {
            ParamKind::Threshold => thresholds,
            ParamKind::Loading => thresholds && self.loadings && !free(ParamKind::Loading),
            ParamKind::Intercept => thresholds && self.intercepts && !free(ParamKind::Intercept),
            ParamKind::Residual => thresholds && categories > 2 && self.residuals && !free(ParamKind::Residual),
        }
    }
}

/// Where each parameter of each group sits in the full parameter vector (groups one after
/// another, each: thresholds item by item, ν, λ, θ per item, κ per construct, Φ's lower
/// triangle row by row), and where each statistic sits in a group's statistics vector
/// (thresholds item by item, then the correlations j < l row-major).
#[derive(Debug, Clone, PartialEq)]
pub struct Layout {
    pub p: usize,
    pub m: usize,
    pub groups: usize,
    pub reference: usize,
    pub construct: Vec<usize>,
    /// Categories of each item (at least 2).
    pub categories: Vec<usize>,
    tau_offset: Vec<usize>,
    n_tau: usize,
}

/// One full parameter: a constant, or free parameter k.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Slot {
    Fixed(f64),
    Free(usize),
}

/// The full parameter vector as a function of the free one: full_i = x_k for `Slot::Free(k)`,
/// else the constant.
#[derive(Debug, Clone, PartialEq)]
pub struct ParamMap {
    pub slots: Vec<Slot>,
    pub free: usize,
}

impl ParamMap {
    pub fn full(&self, x: &[f64]) -> Vec<f64> {
        self.slots
            .iter()
            .map(|s| match *s {
                Slot::Fixed(v) => v,
                Slot::Free(k) => x[k],
            })
            .collect()
    }

    /// The free vector read from a full one (the first full entry of each free parameter).
    pub fn free_values(&self, full: &[f64]) -> Vec<f64> {
        let mut x = vec![f64::NAN; self.free];
        for (i, s) in self.slots.iter().enumerate() {
            if let Slot::Free(k) = *s
                && x[k].is_nan()
            {
                x[k] = full[i];
            }
        }
        x
    }

    /// The map with the full entries `slots` made free parameters of their own (new columns at
    /// the end), at whatever value they have: the larger model of a score or difference test.
    pub fn release(&self, slots: &[usize]) -> ParamMap {
        let mut out = self.clone();
        for &i in slots {
            out.slots[i] = Slot::Free(out.free);
            out.free += 1;
        }
        out
    }
}

impl Layout {
    pub fn new(construct: &[usize], categories: &[usize], groups: usize, reference: usize) -> Result<Self, StatsError> {
        let p = construct.len();
        if categories.len() != p {
            return Err(StatsError::SizeMismatch {
                what: "item category counts",
                expected: p,
                found: categories.len(),
            });
        }
        if let Some(&k) = categories.iter().find(|&&k| k < 2) {
            return Err(StatsError::InvalidInput(format!("an ordinal item needs at least 2 categories, found {k}")));
        }
        if groups < 2 {
            return Err(StatsError::NotEnoughData {
                what: "a multi-group comparison".into(),
                needed: 2,
                found: groups,
            });
        }
        if reference >= groups {
            return Err(StatsError::OutOfRange { what: "reference group", index: reference, len: groups });
        }
        let m = construct.iter().max().map_or(0, |&f| f + 1);
        for f in 0..m {
            let size = construct.iter().filter(|&&c| c == f).count();
            if size < 2 {
                return Err(StatsError::NotEnoughData { what: format!("construct {f}"), needed: 2, found: size });
            }
        }
        let mut tau_offset = Vec::with_capacity(p);
        let mut n_tau = 0;
        for &k in categories {
            tau_offset.push(n_tau);
            n_tau += k - 1;
        }
        Ok(Layout {
            p,
            m,
            groups,
            reference,
            construct: construct.to_vec(),
            categories: categories.to_vec(),
            tau_offset,
            n_tau,
        })
    }

    pub fn n_tau(&self) -> usize {
        self.n_tau
    }

    /// Statistics per group: thresholds and correlations.
    pub fn n_stats(&self) -> usize {
        self.n_tau + self.p * (self.p - 1) / 2
    }

    pub fn per_group(&self) -> usize {
        self.n_tau + 3 * self.p + self.m + self.m * (self.m + 1) / 2
    }

    pub fn tau(&self, g: usize, j: usize, c: usize) -> usize {
        g * self.per_group() + self.tau_offset[j] + c
    }

    pub fn tau_stat(&self, j: usize, c: usize) -> usize {
        self.tau_offset[j] + c
    }

    pub fn nu(&self, g: usize, j: usize) -> usize {
        g * self.per_group() + self.n_tau + j
    }

    pub fn lambda(&self, g: usize, j: usize) -> usize {
        g * self.per_group() + self.n_tau + self.p + j
    }

    pub fn theta(&self, g: usize, j: usize) -> usize {
        g * self.per_group() + self.n_tau + 2 * self.p + j
    }

    pub fn kappa(&self, g: usize, f: usize) -> usize {
        g * self.per_group() + self.n_tau + 3 * self.p + f
    }

    /// Φ_ab of group g (either order).
    pub fn phi(&self, g: usize, a: usize, b: usize) -> usize {
        let (a, b) = (a.max(b), a.min(b));
        g * self.per_group() + self.n_tau + 3 * self.p + self.m + a * (a + 1) / 2 + b
    }

    /// Index of correlation (j, l), j < l, in a group's statistics vector.
    pub fn corr_stat(&self, j: usize, l: usize) -> usize {
        self.n_tau + j * self.p - j * (j + 1) / 2 + (l - j - 1)
    }

    /// The full slots that releasing `kind` of `item` in `group` makes free.
    pub fn release_slots(&self, item: usize, kind: ParamKind, group: usize) -> Vec<usize> {
        match kind {
            ParamKind::Threshold => (0..self.categories[item] - 1).map(|c| self.tau(group, item, c)).collect(),
            ParamKind::Loading => vec![self.lambda(group, item)],
            ParamKind::Intercept => vec![self.nu(group, item)],
            ParamKind::Residual => vec![self.theta(group, item)],
        }
    }

    /// Which parameters are free, fixed or equal under `eq` (Wu & Estabrook 2016's
    /// identification, theta parametrization):
    /// - reference group: thresholds and loadings free, ν = 0, θ = 1, κ = 0, Φ_ff = 1, latent
    ///   covariances free;
    /// - other groups, per item: thresholds equal to the reference's or free; loading equal or
    ///   free (free whenever its thresholds are: `Equalities::constrained`); with its
    ///   thresholds free the item keeps ν = 0, θ = 1 (configural); with equal
    ///   thresholds ν is free (fixed 0 under intercept equality) and θ is free for items of 3 or
    ///   more categories (fixed 1 under residual equality), while a binary item keeps θ = 1
    ///   throughout (one threshold cannot carry both a location and a scale);
    /// - other groups, per construct: Φ_ff free once loadings are equal, κ free once intercepts
    ///   are; latent covariances free.
    pub fn map(&self, eq: &Equalities) -> Result<ParamMap, StatsError> {
        eq.check()?;
        let size = self.groups * self.per_group();
        let mut slots = vec![Slot::Fixed(0.0); size];
        let mut free = 0;
        let mut new = |slots: &mut Vec<Slot>, i: usize| {
            slots[i] = Slot::Free(free);
            free += 1;
        };
        let r = self.reference;
        for j in 0..self.p {
            for c in 0..self.categories[j] - 1 {
                new(&mut slots, self.tau(r, j, c));
            }
            new(&mut slots, self.lambda(r, j));
            slots[self.theta(r, j)] = Slot::Fixed(1.0);
        }
        for a in 0..self.m {
            slots[self.phi(r, a, a)] = Slot::Fixed(1.0);
            for b in 0..a {
                new(&mut slots, self.phi(r, a, b));
            }
        }
        for g in (0..self.groups).filter(|&g| g != r) {
            for j in 0..self.p {
                let k = self.categories[j];
                let equal_tau = eq.constrained(j, ParamKind::Threshold, g, k);
                for c in 0..k - 1 {
                    if equal_tau {
                        slots[self.tau(g, j, c)] = slots[self.tau(r, j, c)];
                    } else {
                        new(&mut slots, self.tau(g, j, c));
                    }
                }
                if eq.constrained(j, ParamKind::Loading, g, k) {
                    slots[self.lambda(g, j)] = slots[self.lambda(r, j)];
                } else {
                    new(&mut slots, self.lambda(g, j));
                }
                if equal_tau && !eq.constrained(j, ParamKind::Intercept, g, k) {
                    new(&mut slots, self.nu(g, j));
                }
                slots[self.theta(g, j)] = Slot::Fixed(1.0);
                if equal_tau && k > 2 && !eq.constrained(j, ParamKind::Residual, g, k) {
                    new(&mut slots, self.theta(g, j));
                }
            }
            for a in 0..self.m {
                if eq.intercepts {
                    new(&mut slots, self.kappa(g, a));
                }
                if eq.loadings {
                    new(&mut slots, self.phi(g, a, a));
                } else {
                    slots[self.phi(g, a, a)] = Slot::Fixed(1.0);
                }
                for b in 0..a {
                    new(&mut slots, self.phi(g, a, b));
                }
            }
        }
        Ok(ParamMap { slots, free })
    }

    /// Latent response scales s_jg of group g, `None` if one is not positive.
    fn scales(&self, full: &[f64], g: usize) -> Option<Vec<f64>> {
        (0..self.p)
            .map(|j| {
                let f = self.construct[j];
                let l = full[self.lambda(g, j)];
                let v = l * l * full[self.phi(g, f, f)] + full[self.theta(g, j)];
                (v > 0.0 && v.is_finite()).then(|| v.sqrt())
            })
            .collect()
    }

    /// The implied statistics of group g, `None` where a latent response variance is not
    /// positive.
    pub fn implied(&self, full: &[f64], g: usize) -> Option<DVector<f64>> {
        let s = self.scales(full, g)?;
        let mut out = DVector::zeros(self.n_stats());
        for j in 0..self.p {
            let f = self.construct[j];
            let loc = full[self.nu(g, j)] + full[self.lambda(g, j)] * full[self.kappa(g, f)];
            for c in 0..self.categories[j] - 1 {
                out[self.tau_stat(j, c)] = (full[self.tau(g, j, c)] - loc) / s[j];
            }
            for l in j + 1..self.p {
                let fl = self.construct[l];
                out[self.corr_stat(j, l)] =
                    full[self.lambda(g, j)] * full[self.lambda(g, l)] * full[self.phi(g, f, fl)] / (s[j] * s[l]);
            }
        }
        Some(out)
    }

    /// ∂(implied statistics of group g) / ∂(group g's full parameters), n_stats x per_group
    /// (columns in the order of the group's block of the full vector). See the module doc for
    /// the model; with s_j² = λ_j² Φ_ff + θ_j: ∂s_j/∂λ_j = λ_j Φ_ff / s_j, ∂s_j/∂θ_j = 1/(2 s_j),
    /// ∂s_j/∂Φ_ff = λ_j²/(2 s_j), and every statistic's derivative through s_j is
    /// -statistic (∂s_j/∂·)/s_j.
    pub fn jacobian(&self, full: &[f64], g: usize) -> Option<DMatrix<f64>> {
        let s = self.scales(full, g)?;
        let base = g * self.per_group();
        let col = |i: usize| i - base;
        let mut d = DMatrix::zeros(self.n_stats(), self.per_group());
        let lam = |j: usize| full[self.lambda(g, j)];
        let phi = |a: usize, b: usize| full[self.phi(g, a, b)];
        // Relative derivatives of s_j: (∂s_j/∂λ_j)/s_j, (∂s_j/∂θ_j)/s_j, (∂s_j/∂Φ_ff)/s_j.
        let ds = |j: usize| {
            let f = self.construct[j];
            let v = s[j] * s[j];
            (lam(j) * phi(f, f) / v, 0.5 / v, 0.5 * lam(j) * lam(j) / v)
        };
        for j in 0..self.p {
            let f = self.construct[j];
            let (dl, dt, dp) = ds(j);
            let kappa = full[self.kappa(g, f)];
            let loc = full[self.nu(g, j)] + lam(j) * kappa;
            for c in 0..self.categories[j] - 1 {
                let row = self.tau_stat(j, c);
                let t = (full[self.tau(g, j, c)] - loc) / s[j];
                d[(row, col(self.tau(g, j, c)))] = 1.0 / s[j];
                d[(row, col(self.nu(g, j)))] = -1.0 / s[j];
                d[(row, col(self.kappa(g, f)))] = -lam(j) / s[j];
                d[(row, col(self.lambda(g, j)))] = -kappa / s[j] - t * dl;
                d[(row, col(self.theta(g, j)))] = -t * dt;
                d[(row, col(self.phi(g, f, f)))] = -t * dp;
            }
            for l in j + 1..self.p {
                let fl = self.construct[l];
                let row = self.corr_stat(j, l);
                let ss = s[j] * s[l];
                let r = lam(j) * lam(l) * phi(f, fl) / ss;
                let (dl_l, dt_l, dp_l) = ds(l);
                d[(row, col(self.lambda(g, j)))] = lam(l) * phi(f, fl) / ss - r * dl;
                d[(row, col(self.lambda(g, l)))] = lam(j) * phi(f, fl) / ss - r * dl_l;
                d[(row, col(self.theta(g, j)))] = -r * dt;
                d[(row, col(self.theta(g, l)))] = -r * dt_l;
                // Φ_ff and Φ_{fl fl} through the scales; Φ_{f fl} through the numerator (when
                // f = fl that is the same entry, so the terms add).
                d[(row, col(self.phi(g, f, f)))] -= r * dp;
                d[(row, col(self.phi(g, fl, fl)))] -= r * dp_l;
                d[(row, col(self.phi(g, f, fl)))] += lam(j) * lam(l) / ss;
            }
        }
        Some(d)
    }

    /// Implied statistics of every group stacked, and the Jacobian in the free parameters of
    /// `map` (n_stats G x free); `None` where a latent response variance is not positive.
    pub fn evaluate(&self, map: &ParamMap, full: &[f64], jacobian: bool) -> Option<(DVector<f64>, DMatrix<f64>)> {
        let k = self.n_stats();
        let mut sigma = DVector::zeros(k * self.groups);
        let mut jac = DMatrix::zeros(if jacobian { k * self.groups } else { 0 }, if jacobian { map.free } else { 0 });
        let pg = self.per_group();
        for g in 0..self.groups {
            sigma.rows_mut(g * k, k).copy_from(&self.implied(full, g)?);
            if jacobian {
                let d = self.jacobian(full, g)?;
                for (c, slot) in map.slots[g * pg..(g + 1) * pg].iter().enumerate() {
                    if let Slot::Free(x) = *slot {
                        let mut target = jac.view_mut((g * k, x), (k, 1));
                        target += d.column(c);
                    }
                }
            }
        }
        Some((sigma, jac))
    }
}
