//! The simulation model file as written (YAML, format version 1): serde types with
//! `deny_unknown_fields`, defaults filled in. Central type: `SimulationModel`. The checks are in
//! `validate.rs`; `SimulationModel::plain` turns a checked file into the numerics' description
//! (`stats::simulate::Model`), which is all drawing needs.

use serde::Deserialize;

use construe_stats::simulate as draw;

/// The only model-file format version this build reads (the `simulate:` key).
pub const MODEL_FORMAT_VERSION: u32 = 1;

fn default_n() -> usize {
    500
}

fn default_seed() -> u64 {
    1
}

fn default_one() -> f64 {
    1.0
}

fn default_id_start() -> i64 {
    1
}

/// A simulation model file (YAML, format version 1). Unknown keys are errors.
///
/// ```yaml
/// simulate: 1                 # format version (required)
/// title: two-construct toy    # optional free text
/// n: 600                      # default number of rows (the caller may override); default 500
/// seed: 7                     # default seed (the caller may override); default 1
/// missing: 0.05               # global rate of values missing at random, in [0, 1); default 0
/// id: {name: rider_id, start: 1}          # optional respondent id column: start, start+1, ...
/// constants: [{name: wave, value: spring}] # optional constant columns (number or text)
/// constructs:                 # latent variables; `variance` of an exogenous construct, or the
///   - {name: a, variance: 1}  # disturbance variance of one with parents; or `total_variance`
///   - {name: b, total_variance: 1}        # (the disturbance is then total minus explained)
/// paths:                      # linear structural paths; must form no cycle
///   - {from: a, to: b, coefficient: 0.5}
/// items:                      # value = mean + loading * construct (+ cross loadings) + error
///   - {name: a1, construct: a, loading: 0.8, error_variance: 0.36}
///   - {name: a2, construct: a, loading: 0.7, error_variance: 0.51,
///      thresholds: [-1.5, -0.5, 0.5, 1.5]} # coarsened to codes 1..5
///   - {name: b1, construct: b, loading: 0.7, error_variance: 0.4,
///      cross_loadings: [{construct: a, loading: 0.3}], missing: 0.1}
/// observed:                   # single continuous measures, each given by its reliability
///   - {name: b_score, construct: b, reliability: 0.7, loading: 1, mean: 0}
/// correlated_errors:          # error covariance between two items (or observed variables)
///   - {items: [a1, b1], covariance: 0.1}
/// ```
///
/// Columns come out in this order: the id column, the constants, the items, the observed
/// variables, each list in file order.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimulationModel {
    /// Model-file format version; must equal [`MODEL_FORMAT_VERSION`].
    pub simulate: u32,
    /// Free text describing the model.
    #[serde(default)]
    pub title: Option<String>,
    /// Default number of rows when the caller gives none.
    #[serde(default = "default_n")]
    pub n: usize,
    /// Default seed when the caller gives none.
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Probability that any analysed value is missing, independently of everything (missing
    /// completely at random); an item's own `missing` overrides it.
    #[serde(default)]
    pub missing: f64,
    /// Optional respondent id column, never missing and never analysed.
    #[serde(default)]
    pub id: Option<IdColumn>,
    /// Optional constant columns (a wave label, a country code), never missing.
    #[serde(default)]
    pub constants: Vec<ConstantColumn>,
    /// The latent constructs.
    pub constructs: Vec<Construct>,
    /// Linear structural paths among the constructs.
    #[serde(default)]
    pub paths: Vec<StructuralPath>,
    /// Multiple-indicator items.
    #[serde(default)]
    pub items: Vec<Item>,
    /// Single observed variables, each a construct plus error of a given reliability.
    #[serde(default)]
    pub observed: Vec<ObservedVariable>,
    /// Pairs of analysed variables whose errors covary.
    #[serde(default)]
    pub correlated_errors: Vec<CorrelatedError>,
}

/// An id column numbered `start`, `start + 1`, ... in row order.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IdColumn {
    pub name: String,
    #[serde(default = "default_id_start")]
    pub start: i64,
}

/// A column holding the same value in every row.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ConstantColumn {
    pub name: String,
    pub value: ConstantValue,
}

/// The value of a constant column: a number (`wave: 2`) or a text label (`wave: spring`).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(untagged)]
pub enum ConstantValue {
    Number(f64),
    Text(String),
}

/// A latent construct. Give at most one of `variance` and `total_variance`; neither means
/// `variance: 1`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Construct {
    pub name: String,
    /// Variance of an exogenous construct, or the disturbance (residual) variance of a
    /// construct with incoming paths.
    #[serde(default)]
    pub variance: Option<f64>,
    /// The construct's total variance; its disturbance variance is this minus the variance its
    /// parents explain (an error if they explain more).
    #[serde(default)]
    pub total_variance: Option<f64>,
}

/// A linear structural path: `to` gains `coefficient * from`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StructuralPath {
    pub from: String,
    pub to: String,
    pub coefficient: f64,
}

/// An indicator item: `mean + loading * construct + sum(cross loadings) + error`, optionally
/// coarsened into ordered categories.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Item {
    pub name: String,
    pub construct: String,
    /// Unstandardised loading on `construct` (negative for a reverse-worded item).
    pub loading: f64,
    /// Variance of the item's own error.
    pub error_variance: f64,
    /// Extra loadings on other constructs: a planted impurity.
    #[serde(default)]
    pub cross_loadings: Vec<CrossLoading>,
    /// Cut points on the item's continuous value, strictly increasing; k - 1 thresholds give
    /// codes 1..k, code c meaning threshold[c-2] < value <= threshold[c-1]. Absent: continuous.
    #[serde(default)]
    pub thresholds: Option<Vec<f64>>,
    /// Added to the continuous value before coarsening.
    #[serde(default)]
    pub mean: f64,
    /// This item's missing rate, overriding the model's global `missing`.
    #[serde(default)]
    pub missing: Option<f64>,
}

/// An extra loading of an item on a second construct.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CrossLoading {
    pub construct: String,
    pub loading: f64,
}

/// A single continuous measure of a construct: `mean + loading * construct + error`, the error
/// variance set so that the share of the variance due to the construct equals `reliability`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ObservedVariable {
    pub name: String,
    pub construct: String,
    /// In (0, 1]: loading^2 var(construct) / var(variable).
    pub reliability: f64,
    /// Scale of the variable (default 1).
    #[serde(default = "default_one")]
    pub loading: f64,
    #[serde(default)]
    pub mean: f64,
    #[serde(default)]
    pub missing: Option<f64>,
}

/// A covariance between the errors of two analysed variables: a planted impurity.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CorrelatedError {
    pub items: [String; 2],
    pub covariance: f64,
}

impl SimulationModel {
    /// The numerics' description of this model (what `draw` and `truth` use). Meant for a
    /// model that passed `validate::validate`; `title`, `n` and `seed` are the caller's.
    pub fn plain(&self) -> draw::Model {
        draw::Model {
            missing: self.missing,
            id: self.id.as_ref().map(|id| draw::IdColumn { name: id.name.clone(), start: id.start }),
            constants: self
                .constants
                .iter()
                .map(|c| draw::ConstantColumn {
                    name: c.name.clone(),
                    value: match &c.value {
                        ConstantValue::Number(v) => draw::ConstantValue::Number(*v),
                        ConstantValue::Text(t) => draw::ConstantValue::Text(t.clone()),
                    },
                })
                .collect(),
            constructs: self
                .constructs
                .iter()
                .map(|c| draw::Construct {
                    name: c.name.clone(),
                    variance: match (c.variance, c.total_variance) {
                        (None, Some(total)) => draw::LatentVariance::Total(total),
                        (Some(v), _) => draw::LatentVariance::Own(v),
                        (None, None) => draw::LatentVariance::Own(1.0),
                    },
                })
                .collect(),
            paths: self
                .paths
                .iter()
                .map(|p| draw::StructuralPath { from: p.from.clone(), to: p.to.clone(), coefficient: p.coefficient })
                .collect(),
            items: self
                .items
                .iter()
                .map(|it| draw::Item {
                    name: it.name.clone(),
                    construct: it.construct.clone(),
                    loading: it.loading,
                    error_variance: it.error_variance,
                    cross_loadings: it
                        .cross_loadings
                        .iter()
                        .map(|c| draw::CrossLoading { construct: c.construct.clone(), loading: c.loading })
                        .collect(),
                    thresholds: it.thresholds.clone(),
                    mean: it.mean,
                    missing: it.missing,
                })
                .collect(),
            observed: self
                .observed
                .iter()
                .map(|o| draw::ObservedVariable {
                    name: o.name.clone(),
                    construct: o.construct.clone(),
                    reliability: o.reliability,
                    loading: o.loading,
                    mean: o.mean,
                    missing: o.missing,
                })
                .collect(),
            correlated_errors: self
                .correlated_errors
                .iter()
                .map(|c| draw::CorrelatedError { items: c.items.clone(), covariance: c.covariance })
                .collect(),
        }
    }

    /// Columns the drawn table has: the id, the constants, the items and the observed variables.
    pub fn column_count(&self) -> usize {
        usize::from(self.id.is_some()) + self.constants.len() + self.items.len() + self.observed.len()
    }
}
