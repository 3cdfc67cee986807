//! `purify`: within and across the declared constructs, drop the items that vanishing-tetrad
//! tests condemn (an item that also measures another construct, or shares error with another
//! item), keeping at least `min_items` per construct. Central type: `PurifyOutput`.
//! Constructs with fewer than two items take part only as partners in cross-construct tetrads.

use indexmap::IndexMap;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::tetrads::{TetradMethod, tetrad_tester};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::spec::SpecFile;
use crate::spec::types::{PurifySpec, TetradTest};
use construe_stats::purify::{TetradEvidence, purify_with};

/// Bump when purification results change for the same covariances and parameters.
/// v2: tetrads of the fitted correlation matrix tested with its sampling covariance (`auto`,
/// the new default, and `delta`); the artifact records which test ran and why.
pub const VERSION: u32 = 2;

/// One tetrad test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct TetradRecord {
    /// The four items.
    pub items: [String; 4],
    /// Which of the three tetrad differences (1, 2 or 3; see `stats::tetrad`).
    pub which: usize,
    /// The tetrad difference.
    pub diff: f64,
    /// The test statistic (standard normal under the null of a vanishing tetrad).
    pub stat: f64,
    /// The p-value.
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
    /// Violations left when a construct reached `min_items`.
    pub unresolved: Vec<TetradRecord>,
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
}

impl PurifyStep {
    pub fn from_spec(file: &SpecFile, params: &PurifySpec) -> PurifyStep {
        let constructs = file.spec.constructs.iter().map(|(n, c)| (n.clone(), c.items.clone())).collect();
        PurifyStep { params: params.clone(), constructs }
    }
}

fn record(items: &[String], t: &TetradEvidence) -> TetradRecord {
    TetradRecord {
        items: t.items.map(|i| items[i].clone()),
        which: t.which + 1,
        diff: t.diff,
        stat: t.stat,
        p: t.p,
        p_adjusted: t.p_adjusted,
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
        json!({"test": self.params.test, "alpha": self.params.alpha, "min_items": self.params.min_items, "constructs": self.constructs})
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
        let result = purify_with(&tester, &groups, self.params.alpha, self.params.min_items)
            .map_err(|source| StepError::Stats { context: "tetrad purification".into(), source })?;
        let constructs = self
            .constructs
            .iter()
            .zip(&result.groups)
            .map(|((name, _), g)| {
                let purity = ConstructPurity {
                    kept: g.kept.iter().map(|&i| items[i].clone()).collect(),
                    dropped: g
                        .dropped
                        .iter()
                        .map(|d| DroppedRecord {
                            item: items[d.item].clone(),
                            round: d.round,
                            tetrads: d.tetrads.iter().map(|t| record(items, t)).collect(),
                        })
                        .collect(),
                    min_items_reached: g.min_items_reached,
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
