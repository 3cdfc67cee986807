//! `purify`: within and across the declared constructs, drop the items that vanishing-tetrad
//! tests condemn (an item that also measures another construct, or shares error with another
//! item), keeping at least `min_items` per construct. Central type: `PurifyOutput`.
//! Constructs with fewer than two items take part only as partners in cross-construct tetrads.
//! Impurity is judged by its size (`tolerance`, issue 16); the output warns when a construct
//! is cut to `min_items` or loses a whole facet or content group, and lists the largest
//! tetrads left among the kept items (`remaining`).

use indexmap::IndexMap;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::tetrads::{TetradMethod, tetrad_tester};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::spec::SpecFile;
use crate::spec::types::{PurifySpec, TetradTest};
use construe_stats::purify::{PurifyRule, TetradEvidence, content_groups, purify_with};
use construe_stats::tetrad::PARTITIONS;

/// Bump when purification results change for the same covariances and parameters.
/// v2: tetrads of the fitted correlation matrix tested with its sampling covariance (`auto`,
/// the new default, and `delta`); the artifact records which test ran and why.
/// v3: the size criterion (`tolerance`: close-fit tetrad tests and the misfit stopping rule),
/// warnings, remaining tetrads.
pub const VERSION: u32 = 3;

/// One tetrad test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct TetradRecord {
    /// The four items.
    pub items: [String; 4],
    /// Which of the three tetrad differences (1, 2 or 3; see `stats::tetrad`).
    pub which: usize,
    /// The tetrad difference.
    pub diff: f64,
    /// Its standard error.
    pub se: f64,
    /// The test statistic (standard normal under the null of a vanishing tetrad).
    pub stat: f64,
    /// The p-value of the close-fit test (the tetrad is within the tolerance); with tolerance
    /// 0 the p-value of the test that it vanishes.
    pub p: f64,
    /// Benjamini–Hochberg adjusted over the round's family of tests.
    pub p_adjusted: f64,
}

/// An item purification dropped, with the tetrads that implicated it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DroppedRecord {
    /// The dropped item.
    pub item: String,
    /// The round it was dropped in (0 first; round r tests the items kept after r drops).
    pub round: usize,
    /// The violations of that round that involve the item, most significant first.
    pub tetrads: Vec<TetradRecord>,
    /// Its largest absolute residual correlation under the pure model of that round's items
    /// (null when it cannot be estimated).
    pub misfit: Option<f64>,
}

/// A tetrad left among the kept items.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct RemainingTetrad {
    /// The tetrad.
    pub tetrad: TetradRecord,
    /// The two item pairs whose cross-covariance determinant the tetrad is, as "a b | c d".
    pub split: String,
    /// Its size is within the tolerance (|difference| <= tolerance).
    pub within_tolerance: bool,
    /// The close-fit test rejects it after adjustment (it is significantly above the tolerance).
    pub beyond_tolerance: bool,
    /// One sentence for the report.
    pub sentence: String,
}

/// What a purification warning is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum PurifyWarningKind {
    /// Purification cut the construct to `min_items` items (or would have cut it further).
    MinimumReached,
    /// Every item of a facet the spec declares was dropped.
    FacetRemoved,
    /// Every item of a group of items that correlate more with each other than the construct
    /// explains (residual correlations above 0.10 under its one-factor model) was dropped.
    ContentGroupRemoved,
}

/// Something about a construct's purification a reader should know (results.json:
/// `purify.constructs.<name>.warnings`; the report's cautions).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct PurifyWarning {
    /// What it is about.
    pub kind: PurifyWarningKind,
    /// The facet's name (`facet_removed` only).
    pub facet: Option<String>,
    /// The items concerned: the kept items (`minimum_reached`) or the removed group.
    pub items: Vec<String>,
    /// The warning in words.
    pub message: String,
}

impl PurifyWarning {
    fn minimum(kept: &[String]) -> Self {
        let message = format!(
            "purification stopped at the minimum of {} ({}); check that they still cover the construct's content",
            crate::spec::diagnostic::plural(kept.len(), "item"),
            kept.join(", ")
        );
        PurifyWarning { kind: PurifyWarningKind::MinimumReached, facet: None, items: kept.to_vec(), message }
    }

    fn facet(facet: &str, items: &[String]) -> Self {
        let message = format!(
            "purification removed the whole facet {facet} ({}); the kept items may no longer cover that content",
            items.join(", ")
        );
        PurifyWarning {
            kind: PurifyWarningKind::FacetRemoved,
            facet: Some(facet.to_string()),
            items: items.to_vec(),
            message,
        }
    }

    fn content_group(items: &[String]) -> Self {
        let message = format!(
            "purification removed {}, items that share content beyond the construct (residual correlations above 0.10); the kept items may no longer cover it",
            items.join(", ")
        );
        PurifyWarning { kind: PurifyWarningKind::ContentGroupRemoved, facet: None, items: items.to_vec(), message }
    }
}

/// One construct's purification.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ConstructPurity {
    /// Items kept.
    pub kept: Vec<String>,
    /// Items dropped, in the order they were dropped.
    pub dropped: Vec<DroppedRecord>,
    /// Purification stopped here because dropping more would leave fewer than `min_items`.
    pub min_items_reached: bool,
    /// Kept item -> its largest absolute residual correlation under the pure model of the kept
    /// items (null when it cannot be estimated).
    pub misfit: IndexMap<String, Option<f64>>,
    /// Items implicated by standing violations but kept because their misfit is within the
    /// threshold (`misfit_threshold`).
    pub spared: Vec<String>,
    /// The largest tetrads left that involve a kept item, largest first (at most 3).
    pub remaining: Vec<RemainingTetrad>,
    /// Warnings: the minimum reached, a facet or content group removed.
    pub warnings: Vec<PurifyWarning>,
}

/// Item purification by vanishing tetrads.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct PurifyOutput {
    /// Construct -> its purification.
    pub constructs: IndexMap<String, ConstructPurity>,
    /// The test the spec asked for (`auto`, `wishart` or `delta`).
    pub test: TetradTest,
    /// The test that ran, on which matrix, and why.
    pub method: TetradMethod,
    /// The false discovery rate used.
    pub alpha: f64,
    /// The fewest items a construct kept.
    pub min_items: usize,
    /// The sample size of the tests.
    pub n: usize,
    /// Tests per round (the false-discovery-rate family of each round).
    pub family_sizes: Vec<usize>,
    /// Violations left standing: when a construct reached `min_items`, or when the implicated
    /// items' misfit was within the threshold.
    pub unresolved: Vec<TetradRecord>,
    /// Size of a negligible tetrad (correlation units; 0: the exact test).
    pub tolerance: f64,
    /// An implicated item is dropped only when a residual correlation exceeds this.
    pub misfit_threshold: f64,
    /// The decision rule in one sentence, for the report.
    pub rule: String,
}

impl PurifyOutput {
    /// The kept items of each construct, in construct order.
    pub fn kept(&self) -> IndexMap<String, Vec<String>> {
        self.constructs.iter().map(|(c, p)| (c.clone(), p.kept.clone())).collect()
    }
}

pub struct PurifyStep {
    params: PurifySpec,
    /// (construct, items) in spec order.
    constructs: Vec<(String, Vec<String>)>,
    /// Construct -> its declared facets (facet -> items).
    facets: IndexMap<String, IndexMap<String, Vec<String>>>,
    /// Item pairs whose covariance is known to carry extra shared variance (declared
    /// impurities): tetrads over them are not tested, and their residuals do not count.
    declared_pairs: Vec<(String, String)>,
}

/// The item pairs whose covariance the spec's `impurities:` declares to carry extra shared
/// variance: each correlated error; every pair of items sharing a method factor; and a
/// cross-loading item with each item of the construct it also reflects. Purification leaves the
/// tetrads over these pairs out, so a declared impurity is modelled by `measure`, not dropped.
fn declared_pairs(file: &SpecFile) -> Vec<(String, String)> {
    let declared = &file.spec.impurities;
    let mut pairs: Vec<(String, String)> =
        declared.correlated_errors.iter().map(|[a, b]| (a.clone(), b.clone())).collect();
    for items in declared.method_factors.values() {
        for (k, a) in items.iter().enumerate() {
            pairs.extend(items[k + 1..].iter().map(|b| (a.clone(), b.clone())));
        }
    }
    for cross in &declared.cross_loadings {
        if let Some(other) = file.spec.constructs.get(&cross.also) {
            pairs.extend(other.items.iter().filter(|b| **b != cross.item).map(|b| (cross.item.clone(), b.clone())));
        }
    }
    pairs
}

impl PurifyStep {
    pub fn from_spec(file: &SpecFile, params: &PurifySpec) -> PurifyStep {
        let constructs = file.spec.constructs.iter().map(|(n, c)| (n.clone(), c.items.clone())).collect();
        let facets = file
            .spec
            .constructs
            .iter()
            .filter(|(_, c)| !c.facets.is_empty())
            .map(|(n, c)| (n.clone(), c.facets.clone()))
            .collect();
        PurifyStep { params: params.clone(), constructs, facets, declared_pairs: declared_pairs(file) }
    }

    /// The same step with `pairs` exempt (see `declared_pairs`).
    pub fn with_declared_pairs(mut self, pairs: Vec<(String, String)>) -> PurifyStep {
        self.declared_pairs = pairs;
        self
    }
}

fn record(items: &[String], t: &TetradEvidence) -> TetradRecord {
    TetradRecord {
        items: t.items.map(|i| items[i].clone()),
        which: t.which + 1,
        diff: t.diff,
        se: t.se,
        stat: t.stat,
        p: t.p,
        p_adjusted: t.p_adjusted,
    }
}

/// A remaining tetrad with its reading against the tolerance.
fn remaining(items: &[String], t: &TetradEvidence, tolerance: f64, alpha: f64) -> RemainingTetrad {
    let ([a, b], [c, d]) = PARTITIONS[t.which];
    let name = |k: usize| items[t.items[k]].as_str();
    let split = format!("{} {} | {} {}", name(a), name(b), name(c), name(d));
    let within_tolerance = t.diff.abs() <= tolerance;
    let beyond_tolerance = t.p_adjusted < alpha;
    let size = format!("{:.3}", t.diff.abs());
    let sentence = if tolerance == 0.0 {
        format!("largest remaining tetrad {size} ({split}), adjusted p {:.3} against zero", t.p_adjusted)
    } else if within_tolerance {
        format!("largest remaining tetrad {size} ({split}), within the tolerance {tolerance}")
    } else if beyond_tolerance {
        format!("largest remaining tetrad {size} ({split}), significantly above the tolerance {tolerance}")
    } else {
        format!(
            "largest remaining tetrad {size} ({split}), above the tolerance {tolerance} but not significantly (adjusted p {:.3})",
            t.p_adjusted
        )
    };
    RemainingTetrad { tetrad: record(items, t), split, within_tolerance, beyond_tolerance, sentence }
}

/// The decision rule in one sentence.
fn rule_sentence(tolerance: f64, misfit: f64) -> String {
    if tolerance == 0.0 {
        "Every tetrad is tested against zero (tolerance 0): any significant tetrad counts against its items.".into()
    } else {
        format!(
            "A tetrad counts against its items only when it is significantly larger than {tolerance} in absolute value (a close-fit test, after Browne and Cudeck 1993), and an implicated item is dropped only when one of its residual correlations under the one-factor-per-construct model exceeds {misfit}."
        )
    }
}

impl Step for PurifyStep {
    fn kind(&self) -> StepKind {
        StepKind::Purify
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({"test": self.params.test, "alpha": self.params.alpha, "min_items": self.params.min_items, "tolerance": self.params.tolerance, "constructs": self.constructs, "facets": self.facets, "declared_pairs": self.declared_pairs})
    }

    fn inputs(&self) -> Vec<StepKind> {
        vec![StepKind::Load, StepKind::Covariance]
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let cov = inputs.covariance()?;
        let items = &cov.items;
        let index = |name: &String| items.iter().position(|i| i == name).unwrap_or(usize::MAX);
        let groups: Vec<Vec<usize>> =
            self.constructs.iter().map(|(_, list)| list.iter().map(index).collect()).collect();
        let involved: Vec<usize> = groups.iter().flatten().copied().collect();
        let (tester, method) = tetrad_tester(StepKind::Purify, inputs.load()?, cov, self.params.test, &involved)?;
        let n = tester.n_obs();
        let declared: Vec<(usize, usize)> = self
            .declared_pairs
            .iter()
            .filter_map(|(a, b)| Some((items.iter().position(|i| i == a)?, items.iter().position(|i| i == b)?)))
            .collect();
        let rule = PurifyRule::sized(self.params.alpha, self.params.min_items, self.params.tolerance);
        let result = purify_with(&tester, &groups, &rule, &declared)
            .map_err(|source| StepError::Stats { context: "tetrad purification".into(), source })?;
        let corr = tester.covariance();
        let constructs = self
            .constructs
            .iter()
            .zip(&groups)
            .zip(&result.groups)
            .map(|(((name, _), declared_group), g)| {
                let dropped: Vec<String> = g.dropped.iter().map(|d| items[d.item].clone()).collect();
                let mut warnings = Vec::new();
                let cut = !g.dropped.is_empty() && g.kept.len() <= self.params.min_items;
                let kept: Vec<String> = g.kept.iter().map(|&i| items[i].clone()).collect();
                if g.min_items_reached || cut {
                    warnings.push(PurifyWarning::minimum(&kept));
                }
                let all_dropped = |list: &[String]| !list.is_empty() && list.iter().all(|i| dropped.contains(i));
                match self.facets.get(name) {
                    Some(facets) => {
                        for (facet, list) in facets {
                            if all_dropped(list) {
                                warnings.push(PurifyWarning::facet(facet, list));
                            }
                        }
                    }
                    None => {
                        for group in content_groups(corr, declared_group) {
                            let list: Vec<String> = group.iter().map(|&i| items[i].clone()).collect();
                            if all_dropped(&list) {
                                warnings.push(PurifyWarning::content_group(&list));
                            }
                        }
                    }
                }
                let purity = ConstructPurity {
                    kept,
                    dropped: g
                        .dropped
                        .iter()
                        .map(|d| DroppedRecord {
                            item: items[d.item].clone(),
                            round: d.round,
                            tetrads: d.tetrads.iter().map(|t| record(items, t)).collect(),
                            misfit: d.misfit.is_finite().then_some(d.misfit),
                        })
                        .collect(),
                    min_items_reached: g.min_items_reached,
                    misfit: g
                        .kept
                        .iter()
                        .zip(&g.misfit)
                        .map(|(&i, &m)| (items[i].clone(), m.is_finite().then_some(m)))
                        .collect(),
                    spared: g.spared.iter().map(|&i| items[i].clone()).collect(),
                    remaining: g
                        .remaining
                        .iter()
                        .map(|t| remaining(items, t, self.params.tolerance, self.params.alpha))
                        .collect(),
                    warnings,
                };
                (name.clone(), purity)
            })
            .collect();
        Ok(Artifact::Purify(Box::new(PurifyOutput {
            constructs,
            test: self.params.test,
            method,
            alpha: self.params.alpha,
            min_items: self.params.min_items,
            n,
            family_sizes: result.family_sizes,
            unresolved: result.unresolved.iter().map(|t| record(items, t)).collect(),
            tolerance: self.params.tolerance,
            misfit_threshold: rule.misfit,
            rule: rule_sentence(self.params.tolerance, rule.misfit),
        })))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Purify(p) = artifact else { return String::new() };
        let dropped: Vec<&str> =
            p.constructs.values().flat_map(|c| c.dropped.iter().map(|d| d.item.as_str())).collect();
        let tests: usize = p.family_sizes.iter().sum();
        if dropped.is_empty() {
            format!("all items kept ({tests} tetrad tests)")
        } else {
            format!(
                "dropped {} ({}) after {tests} tetrad tests",
                crate::spec::diagnostic::plural(dropped.len(), "item"),
                dropped.join(", ")
            )
        }
    }
}

#[cfg(test)]
mod tests {
    use super::declared_pairs;
    use crate::spec::SpecFile;

    #[test]
    fn declared_impurities_become_exempt_pairs() {
        let spec = "construe: 1\ntitle: t\ndata:\n  waves: [{id: w, file: w.csv}]\nconstructs:\n  a: {items: [a1, a2, a3, a4]}\n  b: {items: [b1, b2, b3]}\nimpurities:\n  correlated_errors: [[a1, a2]]\n  cross_loadings: [{item: a4, also: b}]\n  method_factors: {reversed: [a3, b2, b3]}\n";
        let dir = tempfile::tempdir().unwrap();
        let file = SpecFile::parse(&dir.path().join("spec.yaml"), spec.into()).unwrap();
        let declared = declared_pairs(&file);
        let pairs: Vec<(&str, &str)> = declared.iter().map(|(a, b)| (a.as_str(), b.as_str())).collect();
        assert_eq!(
            pairs,
            [("a1", "a2"), ("a3", "b2"), ("a3", "b3"), ("b2", "b3"), ("a4", "b1"), ("a4", "b2"), ("a4", "b3")]
        );
    }
}
