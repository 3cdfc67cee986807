//! results.json as one typed value: `Results` borrows each analysis's artifact, so the file,
//! its JSON Schema (`construe schema results`) and the CSV tables come from the same types.
//! Central type: `Results`. The shape is versioned by `RESULTS_FORMAT` (see CHANGELOG.md,
//! "results.json shape", and DEVELOPERS.md: additions only within a major version).

use std::collections::BTreeMap;

use schemars::JsonSchema;
use serde::Serialize;
use serde_json::Value;

use crate::steps::load::DataSummary;
use crate::steps::{
    Artifact, CovarianceOutput, DiscoverOutput, MeasureOutput, PurifyOutput, ResampleOutput, SensitivityOutput,
    StepKind, StructureOutput,
};

/// The version of results.json's shape, `major.minor`. The minor number grows when fields are
/// added; the major number only when a field is renamed, removed or changes its type.
pub const RESULTS_FORMAT: &str = "1.2";

/// The results of one construe report version: aggregates only, no respondent's answers. One
/// key per analysis that ran (`data` is the load step's summary).
#[derive(Debug, Serialize, JsonSchema)]
#[schemars(title = "construe results", transform = data_is_required)]
pub struct Results<'a> {
    /// The version of this file's shape, `major.minor`: the major number changes only when a
    /// field is renamed, removed or changes its type; the minor number when fields are added.
    #[schemars(extend("pattern" = r"^1\.[0-9]+$"))]
    pub results_format: &'static str,
    /// What was read: waves and rows, and each item's summary.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "DataSummary")]
    pub data: Option<&'a DataSummary>,
    /// The item correlation and covariance matrices.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "CovarianceOutput")]
    pub covariance: Option<&'a CovarianceOutput>,
    /// Item purification: the items each construct kept and dropped, with the tetrads that
    /// dropped them.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "PurifyOutput")]
    pub purify: Option<&'a PurifyOutput>,
    /// The pure clusters found in the item pool.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "DiscoverOutput")]
    pub discover: Option<&'a DiscoverOutput>,
    /// The measurement model: loadings, error variances, latent correlations, reliability, fit.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "MeasureOutput")]
    pub measure: Option<&'a MeasureOutput>,
    /// The structure among the constructs: edges, removed adjacencies, effects, fit.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "StructureOutput")]
    pub structure: Option<&'a StructureOutput>,
    /// Which conclusions hold over the reliability grid, the prior and other alphas.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "SensitivityOutput")]
    pub sensitivity: Option<&'a SensitivityOutput>,
    /// The bootstrap: how often items, clusters and edges recur, and effect intervals.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schemars(with = "ResampleOutput")]
    pub resample: Option<&'a ResampleOutput>,
}

/// `data` is optional in the type only because `of` takes whatever artifacts it is given; every
/// run loads data, so every results.json has it.
fn data_is_required(schema: &mut schemars::Schema) {
    if let Some(serde_json::Value::Array(required)) = schema.get_mut("required") {
        required.push("data".into());
    }
}

impl<'a> Results<'a> {
    /// The results of the artifacts a run or a verification computed.
    pub fn of(artifacts: &'a BTreeMap<StepKind, Artifact>) -> Results<'a> {
        let mut r = Results {
            results_format: RESULTS_FORMAT,
            data: None,
            covariance: None,
            purify: None,
            discover: None,
            measure: None,
            structure: None,
            sensitivity: None,
            resample: None,
        };
        for artifact in artifacts.values() {
            match artifact {
                Artifact::Load(a) => r.data = Some(&a.summary),
                Artifact::Covariance(a) => r.covariance = Some(a.as_ref()),
                Artifact::Purify(a) => r.purify = Some(a.as_ref()),
                Artifact::Discover(a) => r.discover = Some(a.as_ref()),
                Artifact::Measure(a) => r.measure = Some(a.as_ref()),
                Artifact::Structure(a) => r.structure = Some(a.as_ref()),
                Artifact::Sensitivity(a) => r.sensitivity = Some(a.as_ref()),
                Artifact::Resample(a) => r.resample = Some(a.as_ref()),
            }
        }
        r
    }

    /// The JSON value results.json holds (non-finite numbers are written as `null`).
    pub fn to_value(&self) -> Value {
        serde_json::to_value(self).unwrap_or(Value::Null)
    }
}
