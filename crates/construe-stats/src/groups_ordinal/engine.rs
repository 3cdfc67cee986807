//! `OrdinalGroups` as a `GroupEngine` of the shared invariance ladder: which constraints each
//! `Level` means for ordinal items, and the conversion of fits and tests to the ladder's types.
//!
//! Levels for ordinal items (Wu & Estabrook 2016: thresholds are constrained together with,
//! or before, loadings, never loadings alone): configural = nothing equal; metric = thresholds
//! and loadings equal; scalar = + intercepts (the location of all an item's thresholds)
//! equal; strict = + unique variances equal. A release of an item's thresholds releases the
//! rest of that item in that group (`Equalities::constrained`).

use super::OrdinalGroups;
use super::fit::GroupsFit;
use super::model::Equalities;
use crate::StatsError;
use crate::invariance::{
    ConstraintTest, Constraints, DiffTest, GroupDesign, GroupEngine, ItemEstimate, Level, LevelFit, ParamKind, Release,
    ScaledStatistic, chisq_difference, chisq_upper,
};

/// Parameter kinds held equal at `level` for ordinal items (see the module doc).
pub fn ordinal_kinds(level: Level) -> Vec<ParamKind> {
    match level {
        Level::Configural => vec![],
        Level::Metric => vec![ParamKind::Threshold, ParamKind::Loading],
        Level::Scalar => vec![ParamKind::Threshold, ParamKind::Loading, ParamKind::Intercept],
        Level::Strict => vec![ParamKind::Threshold, ParamKind::Loading, ParamKind::Intercept, ParamKind::Residual],
    }
}

impl OrdinalGroups {
    /// The ladder's record of a fit: `chisq` the naive DWLS statistic T (= N F with
    /// `discrepancy` F = T / N) and `p` its chi-square tail (too small for DWLS: read
    /// `scaled`); `scaled` the mean-scaled statistic T / c, c = tr(UV) / df (Satorra & Bentler
    /// 1994's scaling for DWLS); `cfi` and `rmsea` the robust indices of `GroupsFit::indices`;
    /// every item parameter of every group with its SE (none where fixed); `raw` the full
    /// parameter vector.
    pub fn level_fit(&self, c: &Constraints, fit: &GroupsFit) -> LevelFit {
        let lay = &self.layout;
        let n_total: usize = self.n.iter().sum();
        let mut items = Vec::new();
        for g in 0..lay.groups {
            for j in 0..lay.p {
                let mut push = |kind: ParamKind, index: usize, i: usize| {
                    items.push(ItemEstimate { item: j, group: g, kind, index, est: fit.full[i], se: fit.se(i) });
                };
                for t in 0..lay.categories[j] - 1 {
                    push(ParamKind::Threshold, t, lay.tau(g, j, t));
                }
                push(ParamKind::Loading, 0, lay.lambda(g, j));
                push(ParamKind::Intercept, 0, lay.nu(g, j));
                push(ParamKind::Residual, 0, lay.theta(g, j));
            }
        }
        let scaled = (fit.df > 0 && fit.correction.trace > 0.0).then(|| {
            let correction = fit.correction.trace / fit.df as f64;
            let chisq = fit.naive / correction;
            ScaledStatistic { chisq, df: fit.df as f64, p: chisq_upper(chisq, fit.df), correction }
        });
        LevelFit {
            constraints: c.clone(),
            discrepancy: fit.naive / n_total as f64,
            chisq: fit.naive,
            df: fit.df,
            p: chisq_upper(fit.naive, fit.df),
            cfi: fit.indices.cfi,
            rmsea: fit.indices.rmsea,
            scaled,
            converged: true,
            iterations: fit.iterations,
            items,
            latent: self.latent(fit),
            raw: fit.full.clone(),
        }
    }

    fn raw_ok(&self, raw: &[f64]) -> bool {
        raw.len() == self.layout.groups * self.layout.per_group() && raw.iter().all(|v| v.is_finite())
    }
}

impl GroupEngine for OrdinalGroups {
    fn design(&self) -> &GroupDesign {
        &self.design
    }

    fn level_kinds(&self, level: Level) -> Vec<ParamKind> {
        ordinal_kinds(level)
    }

    /// Fits from `start`'s parameters when given (falling back to `start_values` if that
    /// fails), else from `start_values`.
    fn fit(&self, c: &Constraints, start: Option<&LevelFit>) -> Result<LevelFit, StatsError> {
        let eq = Equalities::from_constraints(c);
        let warm = start.map(|s| s.raw.as_slice()).filter(|r| self.raw_ok(r));
        let fit = match warm {
            Some(raw) => self.fit_equalities(&eq, Some(raw)).or_else(|_| self.fit_equalities(&eq, None)),
            None => self.fit_equalities(&eq, None),
        }?;
        Ok(self.level_fit(c, &fit))
    }

    /// `OrdinalGroups::score_release` for each candidate; `statistic` is the
    /// scaled-and-shifted one.
    fn score_tests(
        &self,
        c: &Constraints,
        fit: &LevelFit,
        candidates: &[Release],
    ) -> Result<Vec<ConstraintTest>, StatsError> {
        let eq = Equalities::from_constraints(c);
        if !self.raw_ok(&fit.raw) {
            return Err(StatsError::SizeMismatch {
                what: "parameters of the ordinal fit",
                expected: self.layout.groups * self.layout.per_group(),
                found: fit.raw.len(),
            });
        }
        candidates
            .iter()
            .map(|&r| {
                let s = self.score_release(&eq, &fit.raw, r)?;
                Ok(ConstraintTest { release: r, statistic: s.statistic, df: s.df, p: s.p_value })
            })
            .collect()
    }

    /// The robust difference of `OrdinalGroups::difference_at` (scaled and shifted, at the
    /// restricted estimate; `correction` = tr(U_d V) / df); the unscaled difference if it
    /// cannot be computed.
    fn difference(&self, restricted: &LevelFit, free: &LevelFit) -> DiffTest {
        let r = Equalities::from_constraints(&restricted.constraints);
        let f = Equalities::from_constraints(&free.constraints);
        if !self.raw_ok(&restricted.raw) {
            return chisq_difference(restricted, free);
        }
        match self.difference_at(&r, &restricted.raw, restricted.chisq, &f, free.chisq) {
            Ok(s) => DiffTest {
                chisq: s.statistic,
                df: s.df,
                p: s.p_value,
                scaled: true,
                correction: (s.df > 0).then(|| s.trace / s.df as f64),
            },
            Err(_) => chisq_difference(restricted, free),
        }
    }
}
