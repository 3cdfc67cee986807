//! The spec format, version 1, as serde types: one YAML file per analysis (DESIGN.md §2).
//! Central type: `Spec`. Every struct rejects unknown keys; defaults live here and nowhere else.
//! Changing this file's meaning is a format change: add optional keys, never rename.
//! The doc comments of the types and fields are the descriptions of the published JSON Schema
//! (`construe schema spec`, `schemas/spec.schema.json`): write them for the spec's author.
//! Bounds that `validate.rs` checks are stated with `#[schemars(range(...))]` over the same
//! `MAX_*` constants, or with the bounded number types at the end of this file, whose `holds`
//! is what `validate.rs` tests.

use std::path::PathBuf;

use std::borrow::Cow;

use indexmap::IndexMap;
use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::{Deserialize, Deserializer, Serialize};

use super::validate::{MAX_DRAWS, MAX_GRID_POINTS, MAX_MATRIX_N, MAX_MIN_ITEMS, MAX_REPLICATES, MAX_TITLE_CHARS};

/// The spec format version this build reads.
pub const FORMAT_VERSION: u32 = 1;

/// A construe analysis spec: the data, the constructs and their items, what is known about
/// their order, the analyses to run and the report to write. One YAML file per analysis.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
#[schemars(title = "construe spec")]
pub struct Spec {
    /// Spec format version; this construe reads version 1.
    #[schemars(range(min = FORMAT_VERSION, max = FORMAT_VERSION))]
    pub construe: u32,
    /// The analysis's name; the report folder is named after it.
    #[schemars(length(max = MAX_TITLE_CHARS))]
    pub title: String,
    /// Where the answers are: survey waves of respondent rows, or one published summary matrix.
    pub data: DataSpec,
    /// The constructs (latent variables), each named by its key, with the items that measure it.
    pub constructs: IndexMap<String, ConstructSpec>,
    /// What is known in advance about the order of the constructs (for the structure search).
    #[serde(default)]
    pub knowledge: Knowledge,
    /// The analyses to run; each key present means that analysis runs.
    #[serde(default)]
    pub analyses: Analyses,
    /// Where and in which formats the report is written.
    #[serde(default)]
    pub report: ReportSpec,
    /// Impurities known in advance (shared wording, reverse-worded items, an item that also
    /// reflects a second construct): the measurement and structural models estimate them
    /// instead of purification having to drop the items.
    #[serde(default, skip_serializing_if = "Impurities::is_empty")]
    pub impurities: Impurities,
}

/// The data: either `waves` (one or more files of respondent rows) or `matrix` (a published
/// summary matrix), not both.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
#[schemars(transform = waves_or_matrix)]
pub struct DataSpec {
    /// Survey waves, each a CSV or Parquet file of respondent rows with one column per item.
    #[serde(default)]
    pub waves: Vec<WaveSpec>,
    /// A published correlation or covariance matrix used instead of respondent rows.
    #[serde(default)]
    pub matrix: Option<MatrixSpec>,
    /// The column that identifies a respondent (not an item).
    #[serde(default)]
    pub id_column: Option<String>,
    /// Answer codes that mean "missing" (for example -9).
    #[serde(default)]
    pub missing_codes: Vec<f64>,
    /// Which items are ordinal: `auto` (integer items with at most 10 levels), `none`, or a list
    /// of item names.
    #[serde(default)]
    pub ordinal: OrdinalSpec,
    /// Items to reverse, each with its scale's lowest and highest value: `{item: [1, 5]}`
    /// turns an answer x into 1 + 5 - x.
    #[serde(default)]
    pub reverse: IndexMap<String, [f64; 2]>,
}

/// `data` must name its source: `waves` with at least one wave, or `matrix` (then `waves` is
/// empty or absent). `validate.rs` reports the same two cases (`NoData`, `WavesAndMatrix`).
fn waves_or_matrix(schema: &mut Schema) {
    schema.insert(
        "oneOf".into(),
        serde_json::json!([
            {"required": ["waves"], "properties": {"waves": {"minItems": 1}}, "not": {"required": ["matrix"]}},
            {"required": ["matrix"], "properties": {"waves": {"maxItems": 0}}}
        ]),
    );
}

/// One survey wave.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct WaveSpec {
    /// The wave's name (unique within the spec).
    pub id: String,
    /// The wave's data file (`.csv` or `.parquet`), relative to the spec file's folder.
    pub file: PathBuf,
}

/// A published summary matrix used instead of respondent rows.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MatrixSpec {
    /// The matrix file (CSV with item names as header and first column), relative to the
    /// spec file's folder.
    pub file: PathBuf,
    /// Whether the file holds correlations or covariances.
    pub kind: MatrixKind,
    /// The number of respondents the matrix was computed from (more than the number of items).
    #[schemars(range(min = 1, max = MAX_MATRIX_N))]
    pub n: usize,
}

/// What a summary matrix holds.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum MatrixKind {
    /// Correlations (unit diagonal).
    Correlation,
    /// Covariances.
    Covariance,
}

/// Which items are ordinal: decided from the data (`auto`), never (`none`), or listed.
#[derive(Debug, Clone, Default, PartialEq)]
pub enum OrdinalSpec {
    /// Integer items with at most `AUTO_MAX_LEVELS` distinct values are ordinal.
    #[default]
    Auto,
    None,
    Items(Vec<String>),
}

/// Written as the spec writes it: `"auto"`, `"none"` or the list. (An untagged derive wrote
/// both words as `null`, so the two settings shared a `load` key and a spec hash.)
impl Serialize for OrdinalSpec {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self {
            OrdinalSpec::Auto => s.serialize_str("auto"),
            OrdinalSpec::None => s.serialize_str("none"),
            OrdinalSpec::Items(items) => items.serialize(s),
        }
    }
}

/// The level count below which an all-integer item is read as ordinal under `ordinal: auto`.
pub const AUTO_MAX_LEVELS: usize = 10;

/// The words and the list `Deserialize` accepts (an untagged enum's unit variants would derive
/// as `null`).
impl JsonSchema for OrdinalSpec {
    fn schema_name() -> Cow<'static, str> {
        "OrdinalSpec".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": format!("Which items are ordinal: `auto` (integer items with at most {AUTO_MAX_LEVELS} distinct values), `none`, or a list of item names."),
            "oneOf": [
                {"type": "string", "enum": ["auto", "none"]},
                {"type": "array", "items": {"type": "string"}}
            ]
        })
    }
}

impl<'de> Deserialize<'de> for OrdinalSpec {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        #[derive(Deserialize)]
        #[serde(untagged)]
        enum Raw {
            Word(String),
            Items(Vec<String>),
        }
        match Raw::deserialize(deserializer)? {
            Raw::Word(w) if w == "auto" => Ok(OrdinalSpec::Auto),
            Raw::Word(w) if w == "none" => Ok(OrdinalSpec::None),
            Raw::Word(w) => {
                Err(serde::de::Error::custom(format!("`ordinal` must be `auto`, `none` or a list of items, not `{w}`")))
            }
            Raw::Items(items) => Ok(OrdinalSpec::Items(items)),
        }
    }
}

/// One construct: the items (data columns) that measure it.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ConstructSpec {
    /// The construct's items, by column name; three or more identify a construct on its own,
    /// a single item needs `reliability`.
    #[schemars(length(min = 1))]
    pub items: Vec<String>,
    /// Reliability of a single indicator, in (0, 1]: its error variance is fixed at
    /// (1 - reliability) x variance.
    #[serde(default)]
    #[schemars(with = "Option<Reliability>")]
    pub reliability: Option<f64>,
    /// Content groups of the construct's items (facet name -> its items, each an item of this
    /// construct): purification warns when it removes every item of a facet.
    #[serde(default, skip_serializing_if = "IndexMap::is_empty")]
    pub facets: IndexMap<String, Vec<String>>,
}

/// What is known before looking at the data, as constraints on the structure search.
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Knowledge {
    /// Construct names in causal order: a construct never causes one in an earlier tier.
    #[serde(default)]
    pub tiers: Vec<Vec<String>>,
    /// Edges that may not exist, each `[from, to]`.
    #[serde(default)]
    pub forbid: Vec<[String; 2]>,
    /// Edges that must exist, each `[from, to]`.
    #[serde(default)]
    pub require: Vec<[String; 2]>,
}

/// The analyses to run. Each key present means that analysis runs (`{}` takes the defaults).
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Analyses {
    /// The item correlation matrix (Pearson, polychoric or polyserial per pair).
    #[serde(default)]
    pub covariance: Option<CovarianceSpec>,
    /// Drops items that break their construct's one-factor structure (tetrad tests).
    #[serde(default)]
    pub purify: Option<PurifySpec>,
    /// Searches the item pool for pure one-factor clusters.
    #[serde(default)]
    pub discover: Option<DiscoverSpec>,
    /// Fits the measurement model of the declared constructs.
    #[serde(default)]
    pub measure: Option<MeasureSpec>,
    /// Searches the causal structure among the constructs and fits it.
    #[serde(default)]
    pub structure: Option<StructureSpec>,
    /// Refits with other reliabilities of single indicators (needs `structure`).
    #[serde(default)]
    pub sensitivity: Option<SensitivitySpec>,
    /// Bootstrap of the whole analysis (needs respondent rows).
    #[serde(default)]
    pub resample: Option<ResampleSpec>,
    /// Measurement invariance across waves or groups, and the change in the constructs'
    /// means (needs respondent rows).
    #[serde(default)]
    pub invariance: Option<InvarianceSpec>,
}

/// How the item correlation matrix is estimated.
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CovarianceSpec {
    /// How missing answers are handled.
    #[serde(default)]
    pub missing: Missing,
    /// How ordinal pairs are estimated: two-step (thresholds from the marginals) or full ML.
    #[serde(default)]
    pub ordinal: OrdinalEstimation,
}

/// How missing answers are handled.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Missing {
    /// Each pair of items uses every respondent who answered both.
    #[default]
    Pairwise,
    /// Only respondents who answered every item.
    Listwise,
    /// Every respondent's answers, valid when values are missing at random (MAR): full-information
    /// maximum likelihood for continuous items (the saturated mean and covariance by EM, with
    /// the two-stage sampling covariance), multiple imputation under a latent-normal model with
    /// Rubin's rules for ordinal and mixed items.
    Fiml,
}

/// How ordinal pairs are estimated.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum OrdinalEstimation {
    /// Thresholds from each item's marginal distribution, then the correlation.
    #[default]
    TwoStep,
    /// Thresholds and correlation jointly by maximum likelihood.
    Full,
}

/// Item purification by tetrad tests.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PurifySpec {
    /// The tetrad test.
    #[serde(default)]
    pub test: TetradTest,
    /// False discovery rate of the tetrad tests, in (0, 1).
    #[serde(default = "default_tetrad_alpha")]
    #[schemars(with = "Alpha")]
    pub alpha: f64,
    /// Items a construct keeps at least; purification stops there.
    #[serde(default = "default_min_items")]
    #[schemars(range(min = MIN_ITEMS_FLOOR, max = MAX_MIN_ITEMS))]
    pub min_items: usize,
    /// Size of a negligible tetrad, in correlation units, from 0 to 0.5: a tetrad counts against
    /// an item only when it is significantly larger than this, and an implicated item is
    /// dropped only when one of its residual correlations also exceeds 0.10. 0 is the exact
    /// test (any significant tetrad counts, every implicated item can go).
    #[serde(default = "default_tolerance")]
    #[schemars(with = "Tolerance")]
    pub tolerance: f64,
}

/// The smallest `purify.min_items`: a tetrad needs 4 items, a latent variable 3.
pub const MIN_ITEMS_FLOOR: usize = 3;

/// How `purify` and `discover` test vanishing tetrads of the covariance step's correlation
/// matrix (the matrix that is fitted).
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum TetradTest {
    /// `delta` when there are respondents' rows; for a summary matrix, the delta method with
    /// the normal-theory sampling covariance of the matrix and its n.
    #[default]
    Auto,
    /// Normal theory (Wishart 1928): every item must be continuous.
    Wishart,
    /// The delta method with the distribution-free sampling covariance of the matrix's
    /// estimates from respondents' contributions (needs rows).
    Delta,
}

fn default_tetrad_alpha() -> f64 {
    0.01
}
fn default_min_items() -> usize {
    3
}
fn default_tolerance() -> f64 {
    construe_stats::purify::DEFAULT_TOLERANCE
}
fn default_discover_tolerance() -> f64 {
    construe_stats::cluster::DEFAULT_TOLERANCE
}
fn default_structure_alpha() -> f64 {
    0.05
}

/// Cluster discovery in an item pool.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DiscoverSpec {
    /// The item pool: `all` (every item of the data) or a list of item names.
    #[serde(default)]
    #[schemars(extend("default" = "all"))]
    pub items: ItemPool,
    /// False discovery rate of the tetrad tests, in (0, 1).
    #[serde(default = "default_tetrad_alpha")]
    #[schemars(with = "Alpha")]
    pub alpha: f64,
    /// The tetrad test.
    #[serde(default)]
    pub test: TetradTest,
    /// Size of a negligible tetrad, in correlation units, from 0 to 0.5: purity is judged
    /// against it, and a cluster is reported only when the sample could tell a material tetrad
    /// (0.10, or twice this if larger) from it. 0 is the exact test.
    #[serde(default = "default_discover_tolerance")]
    #[schemars(with = "DiscoverTolerance")]
    pub tolerance: f64,
}

/// The item pool of cluster discovery: every item of the data, or a list.
#[derive(Debug, Clone, Default, Serialize, PartialEq)]
#[serde(untagged)]
pub enum ItemPool {
    #[default]
    All,
    Items(Vec<String>),
}

/// The word and the list `Deserialize` accepts.
impl JsonSchema for ItemPool {
    fn schema_name() -> Cow<'static, str> {
        "ItemPool".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "The item pool: `all` (every item of the data) or a list of item names.",
            "oneOf": [
                {"type": "string", "enum": ["all"]},
                {"type": "array", "items": {"type": "string"}}
            ]
        })
    }
}

impl<'de> Deserialize<'de> for ItemPool {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        #[derive(Deserialize)]
        #[serde(untagged)]
        enum Raw {
            Word(String),
            Items(Vec<String>),
        }
        match Raw::deserialize(deserializer)? {
            Raw::Word(w) if w == "all" => Ok(ItemPool::All),
            Raw::Word(w) => {
                Err(serde::de::Error::custom(format!("`items` must be `all` or a list of items, not `{w}`")))
            }
            Raw::Items(items) => Ok(ItemPool::Items(items)),
        }
    }
}

/// The measurement model.
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MeasureSpec {
    /// How each construct's scale is set.
    #[serde(default)]
    pub identification: Identification,
    /// How the measurement (and structural) model is estimated; `structure` follows `measure`.
    #[serde(default)]
    pub estimation: Estimation,
}

/// `analyses.measure.estimation`: the estimator and the kind of standard errors.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Estimation {
    /// The estimator: `auto` (from the item types), `ml` or `dwls`.
    #[serde(default)]
    pub method: EstimationMethod,
    /// The standard errors: `auto`, `information` or `sandwich`.
    #[serde(default)]
    pub standard_errors: StandardErrors,
}

/// The estimator: chosen from the item types (`auto`), or named.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum EstimationMethod {
    /// Any ordinal item: `dwls`; otherwise `ml`.
    #[default]
    Auto,
    /// Maximum likelihood on the covariance matrix.
    Ml,
    /// Diagonally weighted least squares on the correlation matrix (needs respondent rows).
    Dwls,
}

/// Where the standard errors come from.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum StandardErrors {
    /// `sandwich` whenever respondent rows allow it, else `information`.
    #[default]
    Auto,
    /// The inverse expected information (ML under normality only).
    Information,
    /// The robust (sandwich) covariance from the moments' sampling covariance.
    Sandwich,
}

/// How each construct's scale is set.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Identification {
    /// Latent variances fixed at 1.
    #[default]
    UnitVariance,
    /// The first kept item's loading fixed at 1.
    FirstLoading,
}

/// The structure search among the constructs.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct StructureSpec {
    /// Significance level of the conditional independence tests, in (0, 1).
    #[serde(default = "default_structure_alpha")]
    #[schemars(with = "Alpha")]
    pub alpha: f64,
    /// The conditional independence test.
    #[serde(default)]
    pub test: CiTest,
    /// The search: `pc` (no hidden common causes of the constructs), `fci` (allows them), or
    /// `both` (PC with its fitted model, and FCI beside it).
    #[serde(default)]
    pub search: Search,
    /// How unshielded triples are judged colliders.
    #[serde(default)]
    pub colliders: Colliders,
}

/// Which structure search runs.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Search {
    /// PC: assumes no unmeasured common cause of two constructs; fits the structural model.
    #[default]
    Pc,
    /// FCI: allows unmeasured common causes; returns a partial ancestral graph, no fitted model.
    Fci,
    /// PC and its fitted model, with FCI's graph beside it.
    Both,
}

/// How the structure search judges an unshielded triple a - c - b a collider a -> c <- b.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Colliders {
    /// A collider iff c lies in none of the separating sets of a and b among the subsets of
    /// their neighbours, a non-collider iff in all, otherwise left unoriented (Ramsey, Zhang &
    /// Spirtes 2006). The fewest wrong arrowheads in small samples.
    #[default]
    Conservative,
    /// A collider iff c lies in fewer than half of those separating sets (Colombo & Maathuis 2014).
    Majority,
    /// A collider iff c is not in the first separating set found (Spirtes & Glymour 1991).
    Standard,
}

/// The conditional independence test of the structure search.
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum CiTest {
    /// Wald test of the partial correlation carrying the measurement model's uncertainty.
    #[default]
    Wald,
    /// Fisher-z on the latent correlations at the sample size.
    Fisher,
}

/// Sensitivity of the conclusions to the assumed reliability of single indicators.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SensitivitySpec {
    /// Per single-indicator construct, the reliabilities to refit with, each in (0, 1].
    #[serde(default)]
    #[schemars(with = "IndexMap<String, ReliabilityGrid>")]
    pub reliability: IndexMap<String, Vec<f64>>,
    /// Per single-indicator construct, a prior on its reliability for Monte Carlo draws.
    #[serde(default)]
    pub prior: IndexMap<String, PriorSpec>,
    /// Monte Carlo draws from the priors (at least 1 when a prior is given).
    #[serde(default = "default_draws")]
    #[schemars(range(max = MAX_DRAWS))]
    pub draws: usize,
    /// Other significance levels of the structure search to try, each in (0, 1).
    #[serde(default)]
    #[schemars(with = "Vec<Alpha>")]
    pub alpha: Vec<f64>,
    /// Seed of the prior draws.
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Refit and search again leaving out each kept item of every construct with at least 3
    /// kept items, one at a time: does each conclusion survive without any one item?
    #[serde(default)]
    pub leave_one_out: bool,
}

fn default_draws() -> usize {
    500
}
fn default_seed() -> u64 {
    1
}

/// A prior on a reliability.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PriorSpec {
    /// Beta distribution parameters `[a, b]`, both positive (mean a / (a + b)).
    #[schemars(with = "[Positive; 2]")]
    pub beta: [f64; 2],
}

/// The bootstrap.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ResampleSpec {
    /// Bootstrap replicates; each reruns every analysis.
    #[serde(default = "default_replicates")]
    #[schemars(range(min = 1, max = MAX_REPLICATES))]
    pub replicates: usize,
    /// Seed of the resampling.
    #[serde(default = "default_seed")]
    pub seed: u64,
}

fn default_replicates() -> usize {
    200
}

/// The report.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ReportSpec {
    /// The report formats to write (at least one).
    #[serde(default = "default_formats")]
    #[schemars(length(min = 1))]
    pub formats: Vec<ReportFormat>,
    /// The folder the report versions go to, relative to the spec file's folder.
    #[serde(default = "default_report_dir")]
    pub dir: PathBuf,
    /// A `construe simulate` model file the data were drawn from (relative to the spec): the
    /// report then sets the findings beside the known truth. For demos and power checks.
    #[serde(default)]
    pub truth_model: Option<PathBuf>,
}

impl Default for ReportSpec {
    fn default() -> Self {
        ReportSpec { formats: default_formats(), dir: default_report_dir(), truth_model: None }
    }
}

/// A report format.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum ReportFormat {
    /// `report.html`, one self-contained page.
    Html,
    /// `report.md`.
    Markdown,
}

fn default_formats() -> Vec<ReportFormat> {
    vec![ReportFormat::Html, ReportFormat::Markdown]
}
fn default_report_dir() -> PathBuf {
    PathBuf::from("reports")
}

/// A significance level or false discovery rate: strictly between 0 and 1. Schema only (the
/// spec holds a plain `f64`); `validate.rs` tests `Alpha::holds`.
pub struct Alpha;

impl Alpha {
    pub fn holds(value: f64) -> bool {
        value > 0.0 && value < 1.0
    }
}

impl JsonSchema for Alpha {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "Alpha".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({"type": "number", "exclusiveMinimum": 0.0, "exclusiveMaximum": 1.0})
    }
}

/// A reliability: above 0, at most 1. Schema only; `validate.rs` tests `Reliability::holds`.
pub struct Reliability;

impl Reliability {
    pub fn holds(value: f64) -> bool {
        value > 0.0 && value <= 1.0
    }
}

impl JsonSchema for Reliability {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "Reliability".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({"type": "number", "exclusiveMinimum": 0.0, "maximum": 1.0})
    }
}

/// A sensitivity grid of reliabilities: at most `MAX_GRID_POINTS` values. Schema only.
pub struct ReliabilityGrid;

impl JsonSchema for ReliabilityGrid {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "ReliabilityGrid".into()
    }

    fn json_schema(generator: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "type": "array",
            "items": generator.subschema_for::<Reliability>(),
            "maxItems": MAX_GRID_POINTS,
        })
    }
}

/// A number above 0. Schema only; `validate.rs` tests `Positive::holds`.
pub struct Positive;

impl Positive {
    pub fn holds(value: f64) -> bool {
        value > 0.0
    }
}

impl JsonSchema for Positive {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "Positive".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({"type": "number", "exclusiveMinimum": 0.0})
    }
}

/// Impurities declared by the spec's author, modelled (estimated with standard errors) by
/// `measure` and `structure` rather than dropped. Every item named here must be an item of a
/// construct; an item that purification drops takes its declarations with it.
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Impurities {
    /// Pairs of items whose errors are correlated (for example near-identical wording), each
    /// `[item_a, item_b]`; the two items may belong to the same or to different constructs.
    #[serde(default)]
    pub correlated_errors: Vec<[String; 2]>,
    /// Items that also reflect a second construct: each `{item, also}` adds a loading of
    /// `item` on the construct `also` (not the item's own construct).
    #[serde(default)]
    pub cross_loadings: Vec<CrossLoadingSpec>,
    /// Method factors, each named by its key (not a construct's name) with the items it is
    /// shared by (for example the reverse-worded ones). A method factor has unit variance and
    /// is uncorrelated with the constructs and with other method factors; it never enters the
    /// structure search. Identification needs at least 2 items (with exactly 2, their two
    /// loadings are held equal, since only their product is identified) and may not take
    /// every item of a construct (the two factors could then not be told apart).
    #[serde(default)]
    pub method_factors: IndexMap<String, Vec<String>>,
}

impl Impurities {
    /// Whether nothing is declared.
    pub fn is_empty(&self) -> bool {
        self.correlated_errors.is_empty() && self.cross_loadings.is_empty() && self.method_factors.is_empty()
    }
}

/// An item that also reflects a second construct.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CrossLoadingSpec {
    /// The item (an item of some construct).
    pub item: String,
    /// The other construct it also reflects.
    pub also: String,
}

/// A tetrad tolerance in correlation units: from 0 (the exact test) to `MAX_TOLERANCE`.
/// Schema only; `validate.rs` tests `Tolerance::holds`.
pub struct Tolerance;

/// The largest tetrad tolerance: a tetrad of correlations lies in [-2, 2], and one of 0.5
/// already means a gross violation.
pub const MAX_TOLERANCE: f64 = 0.5;

impl Tolerance {
    pub fn holds(value: f64) -> bool {
        (0.0..=MAX_TOLERANCE).contains(&value)
    }
}

impl JsonSchema for Tolerance {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "Tolerance".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({"type": "number", "minimum": 0.0, "maximum": MAX_TOLERANCE, "default": construe_stats::purify::DEFAULT_TOLERANCE})
    }
}

/// `discover.tolerance`: as `Tolerance`, with discovery's default. Schema only.
pub struct DiscoverTolerance;

impl JsonSchema for DiscoverTolerance {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "DiscoverTolerance".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({"type": "number", "minimum": 0.0, "maximum": MAX_TOLERANCE, "default": construe_stats::cluster::DEFAULT_TOLERANCE})
    }
}

/// `across: wave`: the spec's waves are the groups.
pub const ACROSS_WAVES: &str = "wave";

fn default_across() -> String {
    ACROSS_WAVES.to_string()
}

fn default_invariance_alpha() -> f64 {
    0.05
}

fn default_true() -> bool {
    true
}

/// Do the items measure the same constructs in every group (configural, equal loadings,
/// equal intercepts or thresholds, optionally equal residual variances), and how do the
/// constructs' means and variances differ between groups?
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct InvarianceSpec {
    /// What makes the groups: `wave` (the default: each wave of `data.waves` is a group) or
    /// the name of a data column whose distinct values are the groups (for example `region`).
    #[serde(default = "default_across")]
    pub across: String,
    /// The group the others are compared with (its construct means are 0 and variances 1): a
    /// wave id or a value of the `across` column. Default: the first wave, or the column's
    /// first value in sorted order.
    #[serde(default)]
    pub reference: Option<String>,
    /// Significance level of each rung's chi-square difference test and of the score tests
    /// that free constraints, in (0, 1).
    #[serde(default = "default_invariance_alpha")]
    #[schemars(with = "Alpha")]
    pub alpha: f64,
    /// Also test equal residual variances (strict invariance).
    #[serde(default)]
    pub strict: bool,
    /// When a rung fails, free the constraints responsible one at a time (partial invariance).
    #[serde(default = "default_true")]
    pub partial: bool,
}

impl Default for InvarianceSpec {
    fn default() -> Self {
        InvarianceSpec {
            across: default_across(),
            reference: None,
            alpha: default_invariance_alpha(),
            strict: false,
            partial: true,
        }
    }
}
