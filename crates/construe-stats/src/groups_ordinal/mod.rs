//! Measurement invariance of ordinal items (Likert, binary) across independent groups: the
//! multi-group threshold model fitted by DWLS to each group's thresholds and polychoric
//! correlations, its ladder of equality constraints, robust difference and score tests, and
//! latent means and variances relative to a reference group. Central type: `OrdinalGroups`
//! (built from each group's answers, or from given statistics), whose `fit_equalities` gives a
//! `GroupsFit`.
//!
//! Levels (Wu & Estabrook 2016, who show that for ordinal items thresholds must be constrained
//! before loadings and intercepts can be compared; Millsap & Yun-Tein 2004): configural (same
//! pattern, thresholds and loadings free, latent means 0 and variances 1 in every group);
//! thresholds equal (intercepts and, for 3+ categories, unique variances freed in the other
//! groups); + loadings equal (latent variances freed: "metric"); + intercepts equal (latent
//! means freed: "scalar"); + unique variances equal ("strict"). `Level` maps these in
//! `constraints_for`. Binary items keep their unique variance at 1 in every group (Wu &
//! Estabrook's identification for two categories), so their thresholds step imposes nothing
//! and their strict step is implied by the scalar one.

mod engine;
mod fit;
mod model;
mod statistics;

#[cfg(test)]
mod tests;

use nalgebra::{DMatrix, DVector};

pub use engine::ordinal_kinds;
pub use fit::{ConstraintStatistic, GroupsFit};
pub use model::{Equalities, Layout, ParamMap, Slot};
pub use statistics::{CategoryMerge, GroupData, GroupStatistics};

use crate::StatsError;
use crate::invariance::{GroupDesign, LatentEstimate};

/// The two-group (or more) threshold model's data: the stacked statistics, their weights and
/// sampling covariances. Groups are independent samples.
#[derive(Debug, Clone, PartialEq)]
pub struct OrdinalGroups {
    design: GroupDesign,
    layout: Layout,
    /// Statistics of all groups stacked (each group: thresholds, then correlations).
    values: DVector<f64>,
    /// DWLS weights 1 / v_e.
    weights: DVector<f64>,
    /// Each group's sampling covariance of its statistics.
    acov: Vec<DMatrix<f64>>,
    /// Respondents per group.
    n: Vec<usize>,
    merges: Vec<CategoryMerge>,
}

impl OrdinalGroups {
    /// The engine for the ordinal items of `design` from each group's answers (`groups`, in the
    /// order of `design.groups`); `levels[j]` is item j's number of categories (codes
    /// 0..levels[j]). `design.n` is replaced by the groups' row counts. Categories some group
    /// never used are merged with a neighbour in every group (`merges`). Errors: a design that
    /// does not validate, a group count other than the design's, codes out of range, an item
    /// with fewer than two categories used in every group, a pair of items without enough
    /// complete rows in a group.
    pub fn new(design: GroupDesign, groups: &[GroupData<'_>], levels: &[usize]) -> Result<Self, StatsError> {
        design.validate()?;
        if groups.len() != design.groups.len() {
            return Err(StatsError::SizeMismatch {
                what: "groups of answers",
                expected: design.groups.len(),
                found: groups.len(),
            });
        }
        for g in groups {
            if g.items.len() != levels.len() {
                return Err(StatsError::SizeMismatch {
                    what: "item columns in a group",
                    expected: levels.len(),
                    found: g.items.len(),
                });
            }
        }
        let (tables, categories, merges) = statistics::merge_categories(groups, levels)?;
        let stats = groups
            .iter()
            .map(|g| {
                let merged: Vec<Vec<u8>> = g
                    .items
                    .iter()
                    .zip(&tables)
                    .map(|(codes, table)| {
                        codes
                            .iter()
                            .map(|&c| if c == crate::mixed::MISSING_CODE { c } else { table[c as usize] })
                            .collect()
                    })
                    .collect();
                GroupStatistics::from_codes(&merged, &categories)
            })
            .collect::<Result<Vec<_>, _>>()?;
        let mut out = Self::from_statistics(design, stats, &categories)?;
        out.merges = merges;
        Ok(out)
    }

    /// From given statistics (each group's thresholds and correlations in the `Layout` order,
    /// with their sampling covariance, in the order of `design.groups`); the weights are 1 / the
    /// diagonal of each covariance; `design.n` is replaced by the statistics' n.
    pub fn from_statistics(
        mut design: GroupDesign,
        stats: Vec<GroupStatistics>,
        categories: &[usize],
    ) -> Result<Self, StatsError> {
        design.validate()?;
        if stats.len() != design.groups.len() {
            return Err(StatsError::SizeMismatch {
                what: "groups of statistics",
                expected: design.groups.len(),
                found: stats.len(),
            });
        }
        let layout = Layout::new(&design.item_construct, categories, stats.len(), design.reference)?;
        let k = layout.n_stats();
        let mut values = DVector::zeros(k * stats.len());
        let mut weights = DVector::zeros(k * stats.len());
        let mut acov = Vec::with_capacity(stats.len());
        let mut n = Vec::with_capacity(stats.len());
        for (g, s) in stats.into_iter().enumerate() {
            if s.values.len() != k || s.acov.nrows() != k || s.acov.ncols() != k {
                return Err(StatsError::SizeMismatch {
                    what: "statistics in a group",
                    expected: k,
                    found: s.values.len(),
                });
            }
            for e in 0..k {
                let v = s.acov[(e, e)];
                if v <= 0.0 || !v.is_finite() || !s.values[e].is_finite() {
                    return Err(StatsError::Singular {
                        what: format!("the sampling variance of statistic {e} in group {g}"),
                    });
                }
                values[g * k + e] = s.values[e];
                weights[g * k + e] = 1.0 / v;
            }
            acov.push(s.acov);
            n.push(s.n);
        }
        design.n.clone_from(&n);
        Ok(OrdinalGroups { design, layout, values, weights, acov, n, merges: Vec::new() })
    }

    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    pub fn merges(&self) -> &[CategoryMerge] {
        &self.merges
    }

    pub fn group_sizes(&self) -> &[usize] {
        &self.n
    }

    /// Group g's statistics (thresholds then correlations).
    pub fn statistics(&self, g: usize) -> DVector<f64> {
        let k = self.layout.n_stats();
        self.values.rows(g * k, k).into_owned()
    }

    /// Starting values in every group from its own statistics: standardized loadings
    /// l_j = sqrt(mean correlation of j with its construct's other items) (a one-factor model
    /// with equal loadings), turned into the theta parametrization (λ = l / sqrt(1 - l²),
    /// τ = t / sqrt(1 - l²)), latent correlations from the mean cross-construct correlation,
    /// ν = 0, θ = 1, κ = 0, Φ_ff = 1.
    pub fn start_values(&self) -> Vec<f64> {
        let lay = &self.layout;
        let mut full = vec![0.0; lay.groups * lay.per_group()];
        for g in 0..lay.groups {
            let s = self.statistics(g);
            let r = |j: usize, l: usize| s[lay.corr_stat(j.min(l), j.max(l))];
            let std: Vec<f64> = (0..lay.p)
                .map(|j| {
                    let same: Vec<f64> = (0..lay.p)
                        .filter(|&l| l != j && lay.construct[l] == lay.construct[j])
                        .map(|l| r(j, l))
                        .collect();
                    let mean = same.iter().sum::<f64>() / same.len().max(1) as f64;
                    mean.clamp(0.04, 0.81).sqrt()
                })
                .collect();
            for j in 0..lay.p {
                let scale = 1.0 / (1.0 - std[j] * std[j]).sqrt();
                for c in 0..lay.categories[j] - 1 {
                    full[lay.tau(g, j, c)] = s[lay.tau_stat(j, c)] * scale;
                }
                full[lay.lambda(g, j)] = std[j] * scale;
                full[lay.theta(g, j)] = 1.0;
            }
            for a in 0..lay.m {
                full[lay.phi(g, a, a)] = 1.0;
                for b in 0..a {
                    let (mut sum, mut count) = (0.0, 0.0);
                    for j in (0..lay.p).filter(|&j| lay.construct[j] == a) {
                        for l in (0..lay.p).filter(|&l| lay.construct[l] == b) {
                            sum += r(j, l) / (std[j] * std[l]);
                            count += 1.0;
                        }
                    }
                    full[lay.phi(g, a, b)] = (sum / count).clamp(-0.9, 0.9);
                }
            }
        }
        full
    }

    /// Latent means and variances of every construct in every group (the reference's fixed at
    /// 0 and 1), with sandwich SEs where they are free.
    pub fn latent(&self, fit: &GroupsFit) -> Vec<LatentEstimate> {
        let lay = &self.layout;
        let mut out = Vec::new();
        for g in 0..lay.groups {
            for f in 0..lay.m {
                let (mi, vi) = (lay.kappa(g, f), lay.phi(g, f, f));
                out.push(LatentEstimate {
                    group: g,
                    construct: f,
                    mean: fit.full[mi],
                    mean_se: fit.se(mi),
                    variance: fit.full[vi],
                    variance_se: fit.se(vi),
                });
            }
        }
        out
    }
}
