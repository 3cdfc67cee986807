//! The spec format, version 1, as serde types: one YAML file per analysis (DESIGN.md §2).
//! Central type: `Spec`. Every struct rejects unknown keys; defaults live here and nowhere else.
//! Changing this file's meaning is a format change: add optional keys, never rename.

use std::path::PathBuf;

use indexmap::IndexMap;
use serde::{Deserialize, Deserializer, Serialize};

/// The spec format version this build reads.
pub const FORMAT_VERSION: u32 = 1;

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Spec {
    /// Spec format version; must equal `FORMAT_VERSION`.
    pub construe: u32,
    pub title: String,
    pub data: DataSpec,
    pub constructs: IndexMap<String, ConstructSpec>,
    #[serde(default)]
    pub knowledge: Knowledge,
    #[serde(default)]
    pub analyses: Analyses,
    #[serde(default)]
    pub report: ReportSpec,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct DataSpec {
    #[serde(default)]
    pub waves: Vec<WaveSpec>,
    #[serde(default)]
    pub matrix: Option<MatrixSpec>,
    #[serde(default)]
    pub id_column: Option<String>,
    #[serde(default)]
    pub missing_codes: Vec<f64>,
    #[serde(default)]
    pub ordinal: OrdinalSpec,
    #[serde(default)]
    pub reverse: IndexMap<String, [f64; 2]>,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct WaveSpec {
    pub id: String,
    /// Relative to the spec file's folder.
    pub file: PathBuf,
}

/// A published summary matrix used instead of respondent rows.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct MatrixSpec {
    pub file: PathBuf,
    pub kind: MatrixKind,
    pub n: usize,
}

#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum MatrixKind {
    Correlation,
    Covariance,
}

/// Which items are ordinal: decided from the data (`auto`), never (`none`), or listed.
#[derive(Debug, Clone, Default, Serialize, PartialEq)]
#[serde(untagged)]
pub enum OrdinalSpec {
    /// Integer items with at most `AUTO_MAX_LEVELS` distinct values are ordinal.
    #[default]
    Auto,
    None,
    Items(Vec<String>),
}

/// The level count below which an all-integer item is read as ordinal under `ordinal: auto`.
pub const AUTO_MAX_LEVELS: usize = 10;

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

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ConstructSpec {
    pub items: Vec<String>,
    /// Reliability of a single indicator, in (0, 1]: its error variance is fixed at
    /// (1 - reliability) x variance.
    #[serde(default)]
    pub reliability: Option<f64>,
}

#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Knowledge {
    #[serde(default)]
    pub tiers: Vec<Vec<String>>,
    #[serde(default)]
    pub forbid: Vec<[String; 2]>,
    #[serde(default)]
    pub require: Vec<[String; 2]>,
}

/// Each key present means that analysis runs.
#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct Analyses {
    #[serde(default)]
    pub covariance: Option<CovarianceSpec>,
    #[serde(default)]
    pub purify: Option<PurifySpec>,
    #[serde(default)]
    pub discover: Option<DiscoverSpec>,
    #[serde(default)]
    pub measure: Option<MeasureSpec>,
    #[serde(default)]
    pub structure: Option<StructureSpec>,
    #[serde(default)]
    pub sensitivity: Option<SensitivitySpec>,
    #[serde(default)]
    pub resample: Option<ResampleSpec>,
}

#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct CovarianceSpec {
    #[serde(default)]
    pub missing: Missing,
    /// How ordinal pairs are estimated: two-step (thresholds from the marginals) or full ML.
    #[serde(default)]
    pub ordinal: OrdinalEstimation,
}

#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Missing {
    #[default]
    Pairwise,
    Listwise,
}

#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum OrdinalEstimation {
    #[default]
    TwoStep,
    Full,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct PurifySpec {
    #[serde(default)]
    pub test: TetradTest,
    #[serde(default = "default_tetrad_alpha")]
    pub alpha: f64,
    #[serde(default = "default_min_items")]
    pub min_items: usize,
}

/// How `purify` and `discover` test vanishing tetrads of the covariance step's correlation
/// matrix (the matrix that is fitted).
#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq)]
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
fn default_structure_alpha() -> f64 {
    0.05
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct DiscoverSpec {
    #[serde(default)]
    pub items: ItemPool,
    #[serde(default = "default_tetrad_alpha")]
    pub alpha: f64,
    #[serde(default)]
    pub test: TetradTest,
}

/// The item pool of cluster discovery: every item of the data, or a list.
#[derive(Debug, Clone, Default, Serialize, PartialEq)]
#[serde(untagged)]
pub enum ItemPool {
    #[default]
    All,
    Items(Vec<String>),
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

#[derive(Debug, Clone, Default, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct MeasureSpec {
    #[serde(default)]
    pub identification: Identification,
}

#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum Identification {
    /// Latent variances fixed at 1.
    #[default]
    UnitVariance,
    /// The first kept item's loading fixed at 1.
    FirstLoading,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct StructureSpec {
    #[serde(default = "default_structure_alpha")]
    pub alpha: f64,
    #[serde(default)]
    pub test: CiTest,
}

#[derive(Debug, Clone, Copy, Default, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum CiTest {
    /// Wald test of the partial correlation carrying the measurement model's uncertainty.
    #[default]
    Wald,
    /// Fisher-z on the latent correlations at the sample size.
    Fisher,
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct SensitivitySpec {
    #[serde(default)]
    pub reliability: IndexMap<String, Vec<f64>>,
    #[serde(default)]
    pub prior: IndexMap<String, PriorSpec>,
    #[serde(default = "default_draws")]
    pub draws: usize,
    #[serde(default)]
    pub alpha: Vec<f64>,
    #[serde(default = "default_seed")]
    pub seed: u64,
}

fn default_draws() -> usize {
    500
}
fn default_seed() -> u64 {
    1
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct PriorSpec {
    pub beta: [f64; 2],
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ResampleSpec {
    #[serde(default = "default_replicates")]
    pub replicates: usize,
    #[serde(default = "default_seed")]
    pub seed: u64,
}

fn default_replicates() -> usize {
    200
}

#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ReportSpec {
    #[serde(default = "default_formats")]
    pub formats: Vec<ReportFormat>,
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

#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum ReportFormat {
    Html,
    Markdown,
}

fn default_formats() -> Vec<ReportFormat> {
    vec![ReportFormat::Html, ReportFormat::Markdown]
}
fn default_report_dir() -> PathBuf {
    PathBuf::from("reports")
}
