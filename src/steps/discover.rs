//! `discover`: pure one-factor clusters found from vanishing tetrads alone over an item pool,
//! ignoring the declared constructs, then set beside them. Central type: `DiscoverOutput`.

use indexmap::IndexMap;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::tetrads::{TetradMethod, tetrad_tester};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::spec::types::{DiscoverSpec, ItemPool, TetradTest};
use construe_stats::cluster::{ClusterOptions, find_clusters};

/// Bump when clusters change for the same covariances and parameters.
/// v2: tetrads of the fitted correlation matrix tested with its sampling covariance (`auto`,
/// the new default, and `delta`); the artifact records which test ran and why.
pub const VERSION: u32 = 2;

/// Smallest cluster reported: three items identify a one-factor model.
const MIN_CLUSTER: usize = 3;

/// Which declared constructs a discovered cluster's items come from.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ClusterOrigin {
    /// The cluster's items.
    pub items: Vec<String>,
    /// Declared construct -> how many of the cluster's items it claims.
    pub declared: IndexMap<String, usize>,
}

/// Pure clusters found in the item pool.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DiscoverOutput {
    /// The pure one-factor clusters found, each a list of items.
    pub clusters: Vec<Vec<String>>,
    /// Items in no cluster.
    pub unclustered: Vec<String>,
    /// For each cluster, the declared constructs of its items.
    pub origins: Vec<ClusterOrigin>,
    /// The false discovery rate used.
    pub alpha: f64,
    /// The test the spec asked for (`auto`, `wishart` or `delta`).
    pub test: TetradTest,
    /// The test that ran, on which matrix, and why.
    pub method: TetradMethod,
    /// The sample size of the tests.
    pub n: usize,
}

pub struct DiscoverStep {
    params: DiscoverSpec,
    /// item -> declared construct, for the comparison.
    declared: Vec<(String, String)>,
}

impl DiscoverStep {
    pub fn from_spec(file: &crate::spec::SpecFile, params: &DiscoverSpec) -> DiscoverStep {
        let declared = file
            .spec
            .constructs
            .iter()
            .flat_map(|(c, s)| s.items.iter().map(move |i| (i.clone(), c.clone())))
            .collect();
        DiscoverStep { params: params.clone(), declared }
    }
}

impl Step for DiscoverStep {
    fn kind(&self) -> StepKind {
        StepKind::Discover
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({"items": self.params.items, "alpha": self.params.alpha, "test": self.params.test, "declared": self.declared})
    }

    fn inputs(&self) -> Vec<StepKind> {
        vec![StepKind::Load, StepKind::Covariance]
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let cov = inputs.covariance()?;
        let items = &cov.items;
        let pool: Vec<usize> = match &self.params.items {
            ItemPool::All => (0..items.len()).collect(),
            ItemPool::Items(list) => list.iter().filter_map(|n| items.iter().position(|i| i == n)).collect(),
        };
        let stats_err = |source| StepError::Stats { context: "cluster discovery".into(), source };
        let (tester, method) = tetrad_tester(StepKind::Discover, inputs.load()?, cov, self.params.test, &pool)?;
        let n = tester.n_obs();
        let found = find_clusters(&tester, &pool, &ClusterOptions { alpha: self.params.alpha, min_size: MIN_CLUSTER })
            .map_err(stats_err)?;
        let names = |idx: &[usize]| idx.iter().map(|&i| items[i].clone()).collect::<Vec<_>>();
        let clusters: Vec<Vec<String>> = found.clusters.iter().map(|c| names(c)).collect();
        let origins = clusters
            .iter()
            .map(|c| {
                let mut declared: IndexMap<String, usize> = IndexMap::new();
                for item in c {
                    let construct = self
                        .declared
                        .iter()
                        .find(|(i, _)| i == item)
                        .map_or("(undeclared)".to_string(), |(_, c)| c.clone());
                    *declared.entry(construct).or_default() += 1;
                }
                ClusterOrigin { items: c.clone(), declared }
            })
            .collect();
        Ok(Artifact::Discover(Box::new(DiscoverOutput {
            clusters,
            unclustered: names(&found.unclustered),
            origins,
            alpha: self.params.alpha,
            test: self.params.test,
            method,
            n,
        })))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Discover(d) = artifact else { return String::new() };
        let sizes: Vec<String> = d.clusters.iter().map(|c| c.len().to_string()).collect();
        let unclustered = crate::spec::diagnostic::plural(d.unclustered.len(), "item");
        if d.clusters.is_empty() {
            // Not "0 pure clusters (sizes )" (issue 20).
            return format!("no pure cluster found, {unclustered} unclustered");
        }
        format!(
            "{} (sizes {}), {unclustered} unclustered",
            crate::spec::diagnostic::plural(d.clusters.len(), "pure cluster"),
            sizes.join(", "),
        )
    }
}
