//! `discover`: pure one-factor clusters found from vanishing tetrads alone over an item pool,
//! ignoring the declared constructs, then set beside them. Central type: `DiscoverOutput`.
//! With a tolerance (issue 16) purity is judged by size, and clusters the sample cannot judge
//! are withheld with the sample size they would need (`withheld`, `evidence`).

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
/// v3: the size criterion (`tolerance`) and clusters withheld for lack of evidence.
pub const VERSION: u32 = 3;

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
    /// Size of a negligible tetrad (correlation units; 0: the exact test).
    pub tolerance: f64,
    /// Clusters the search grew but does not report: their tetrads could not be told from the
    /// tolerance at this n.
    pub withheld: Vec<WithheldCluster>,
    /// What the evidence supports, in one sentence for the report.
    pub evidence: String,
}

/// A cluster withheld for lack of evidence.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct WithheldCluster {
    /// Its items.
    pub items: Vec<String>,
    /// Median standard error of the tetrads that judged its purity.
    pub se: f64,
    /// The smallest tetrad the sample tells from the tolerance.
    pub detectable: f64,
    /// About the sample size at which a material tetrad would be told from the tolerance.
    pub n_needed: usize,
}

/// The evidence sentence: what was reported, and what was withheld and why.
fn evidence_sentence(reported: usize, withheld: &[WithheldCluster], n: usize, tolerance: f64) -> String {
    if tolerance == 0.0 {
        return "Purity judged by the exact test that tetrads vanish (tolerance 0).".into();
    }
    let rule = format!(
        "A quad counts against purity only when its tetrads are significantly outside {tolerance}, and a cluster is reported only when the sample could tell a material tetrad ({:.2}) from it.",
        construe_stats::cluster::MATERIAL_TETRAD.max(2.0 * tolerance)
    );
    if withheld.is_empty() {
        return rule;
    }
    let detectable = withheld.iter().map(|w| w.detectable).fold(f64::INFINITY, f64::min);
    let needed = withheld.iter().map(|w| w.n_needed).max().unwrap_or(n);
    let what = if reported == 0 {
        "Not enough evidence for any cluster"
    } else {
        "Not enough evidence for the other clusters"
    };
    format!(
        "{rule} {what}: at n = {n} a tetrad would have to exceed {detectable:.2} to be told from the tolerance, so {} grown from the data {} withheld; about n = {needed} would be needed.",
        crate::spec::diagnostic::plural(withheld.len(), "cluster"),
        if withheld.len() == 1 { "is" } else { "are" }
    )
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
        json!({"items": self.params.items, "alpha": self.params.alpha, "test": self.params.test, "tolerance": self.params.tolerance, "declared": self.declared})
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
        let options =
            ClusterOptions { alpha: self.params.alpha, min_size: MIN_CLUSTER, tolerance: self.params.tolerance };
        let found = find_clusters(&tester, &pool, &options).map_err(stats_err)?;
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
        let withheld: Vec<WithheldCluster> = found
            .withheld
            .iter()
            .map(|w| WithheldCluster {
                items: names(&w.items),
                se: w.se,
                detectable: w.detectable,
                n_needed: w.n_needed,
            })
            .collect();
        let evidence = evidence_sentence(clusters.len(), &withheld, n, self.params.tolerance);
        Ok(Artifact::Discover(Box::new(DiscoverOutput {
            clusters,
            unclustered: names(&found.unclustered),
            origins,
            alpha: self.params.alpha,
            test: self.params.test,
            method,
            n,
            tolerance: self.params.tolerance,
            withheld,
            evidence,
        })))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Discover(d) = artifact else { return String::new() };
        let sizes: Vec<String> = d.clusters.iter().map(|c| c.len().to_string()).collect();
        let unclustered = crate::spec::diagnostic::plural(d.unclustered.len(), "item");
        if d.clusters.is_empty() && !d.withheld.is_empty() {
            let needed = d.withheld.iter().map(|w| w.n_needed).max().unwrap_or(d.n);
            return format!("no cluster reported: not enough evidence at n = {} (about n = {needed} needed)", d.n);
        }
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
