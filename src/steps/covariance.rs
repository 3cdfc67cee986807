//! `covariance`: the item correlation and covariance matrices the later analyses start from,
//! with the estimator chosen per pair from the items' types, n per pair, and a definiteness
//! check naming the items behind a singular or indefinite matrix.
//! Central type: `CovarianceOutput` (the `covariance` block of results.json).

use std::borrow::Cow;

use indexmap::IndexMap;
use nalgebra::DMatrix;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::load::{ItemKind, LoadOutput};
use super::missing_data::{McarRecord, MissingData, Missingness};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::data::Table;
use crate::data::table::{Column as DataColumn, MISSING};
use crate::spec::types::{CovarianceSpec, MatrixKind, Missing, OrdinalEstimation};
use construe_stats::mixed::{self, Column, mixed_correlation, response_scale_covariance};
use construe_stats::moments::{Deletion, pearson_columns, sample_variance};
use construe_stats::polychoric::OrdinalFit;
use construe_stats::smoothing::{self, smooth_correlation};

/// Bump when the matrices change for the same loaded data and parameters.
/// v2: polychoric / polyserial correlations for ordinal items, smoothing. v3: all-continuous
/// data take one product-moment pass (last-digit differences in correlations). v4: blocked
/// cross-products on shifted data (last-digit differences again). v5: item pairs stored as
/// typed `ItemPair`s (the artifact's bytes changed; results.json did not). (v6 unchanged by the
/// compact table of load v4: the ordinal codes are borrowed, the figures are bit-identical.)
/// v7: the artifact records the ordinal estimator, the unsmoothed correlations of a smoothed
/// matrix and which sampling theory later steps can use (`steps::sampling`). v8: `missing: fiml`
/// (EM or multiple imputation) and Little's MCAR test recorded whenever values are missing.
pub const VERSION: u32 = 8;

/// Two items of the matrix, `first` before `second` in item order: the key of every per-pair
/// fact. results.json writes it `"first|second"` (scripts read those keys); the exact artifact
/// encoding (postcard, not human-readable) keeps the two names apart, so a `|` inside an item
/// name never splits a pair wrongly. Code compares and looks up pairs, never splits text.
#[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct ItemPair {
    pub first: String,
    pub second: String,
}

impl ItemPair {
    pub fn new(first: impl Into<String>, second: impl Into<String>) -> ItemPair {
        ItemPair { first: first.into(), second: second.into() }
    }

    /// Items `a` and `b` (a < b) of `items`.
    fn of(items: &[String], a: usize, b: usize) -> ItemPair {
        ItemPair::new(items[a].clone(), items[b].clone())
    }

    /// Whether `item` is one of the two.
    pub fn contains(&self, item: &str) -> bool {
        self.first == item || self.second == item
    }
}

/// `first|second`, the key results.json shows.
impl std::fmt::Display for ItemPair {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}|{}", self.first, self.second)
    }
}

impl Serialize for ItemPair {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if s.is_human_readable() { s.collect_str(self) } else { (&self.first, &self.second).serialize(s) }
    }
}

impl<'de> Deserialize<'de> for ItemPair {
    /// From the artifact encoding, exactly; from the text key only when it has one `|`
    /// (construe itself never reads pairs back from results.json).
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<ItemPair, D::Error> {
        if d.is_human_readable() {
            let key = String::deserialize(d)?;
            match key.split_once('|') {
                Some((a, b)) if !b.contains('|') => Ok(ItemPair::new(a, b)),
                _ => Err(serde::de::Error::custom(format!("`{key}` is not one `first|second` item pair"))),
            }
        } else {
            let (first, second) = <(String, String)>::deserialize(d)?;
            Ok(ItemPair { first, second })
        }
    }
}

/// A pair key of results.json: `"first|second"`.
impl JsonSchema for ItemPair {
    fn schema_name() -> std::borrow::Cow<'static, str> {
        "ItemPair".into()
    }

    fn json_schema(_: &mut schemars::SchemaGenerator) -> schemars::Schema {
        schemars::json_schema!({
            "description": "Two items of the matrix, `first|second`, the first before the second in item order.",
            "type": "string",
            "pattern": "\\|",
        })
    }
}

/// The estimator used for one item pair.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum PairMethod {
    Pearson,
    Polychoric,
    Polyserial,
    /// Taken from a published summary matrix.
    Given,
}

/// Whether the correlation matrix is positive definite, and if not, which items are involved.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Definiteness {
    /// Whether every eigenvalue is positive.
    pub positive_definite: bool,
    /// The smallest eigenvalue.
    pub min_eigenvalue: f64,
    /// Items with the largest weights in the eigenvector of the smallest eigenvalue, when that
    /// eigenvalue is not clearly positive: the items whose combination is (nearly) degenerate.
    pub involved: Vec<String>,
}

/// The item correlations and covariances.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct CovarianceOutput {
    /// The items of the matrix, in order (rows and columns of every matrix here).
    pub items: Vec<String>,
    /// Item -> how it is analysed.
    pub kind: IndexMap<String, ItemKind>,
    /// Per pair a < b in item order (results.json: keys `"a|b"`).
    pub method: IndexMap<ItemPair, PairMethod>,
    /// The item correlation matrix (after smoothing, if any).
    pub correlation: Vec<Vec<f64>>,
    /// The item covariance matrix the models fit (ordinal pairs: correlation times the response-scale standard deviations).
    pub covariance: Vec<Vec<f64>>,
    /// Respondents behind each entry (pairwise complete answers).
    pub n: Vec<Vec<usize>>,
    /// Whether the matrix was smoothed to be positive definite.
    pub smoothed: bool,
    /// How missing answers were handled.
    pub missing: Missing,
    /// Whether the estimated matrix was positive definite, before any smoothing.
    pub definiteness: Definiteness,
    /// Standard error of each pair's correlation, where defined.
    pub se: IndexMap<ItemPair, Option<f64>>,
    /// Categories empty among a pair's complete rows, merged with a neighbour for that pair.
    pub merges: Vec<Merge>,
    /// How much smoothing changed the matrix, when it did.
    pub smoothing: Option<SmoothingSummary>,
    /// Pairs whose polychoric or polyserial estimate reached the bound |rho| = 0.9999.
    pub at_bound: Vec<ItemPair>,
    /// The ordinal estimator the correlations came from.
    pub ordinal: OrdinalEstimation,
    /// When the matrix was smoothed: the correlations as estimated, before smoothing (the
    /// estimates the sampling covariance of `steps::sampling` belongs to).
    pub unsmoothed: Option<Vec<Vec<f64>>>,
    /// Which sampling covariance of these moments later tests and fits can use, in words.
    pub sampling: String,
    /// A caveat on that sampling covariance, when one applies (a smoothed matrix).
    pub sampling_note: Option<String>,
    /// How `missing: fiml` estimated the matrix (None for pairwise and listwise deletion).
    pub missing_data: Option<MissingData>,
    /// Little's (1988) test of missing completely at random, whenever values are missing.
    pub mcar: Option<McarRecord>,
    /// Where answers are missing: per wave and item, and the common patterns.
    pub missingness: Option<Missingness>,
}

/// An empty category merged with a neighbour for one pair's estimate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Merge {
    /// The pair whose table had the empty category.
    pub pair: ItemPair,
    /// The item whose category was empty.
    pub item: String,
    /// The empty category and the one it was merged into, as 1-based positions among the
    /// item's response levels (lowest first), never as response values: a category that is
    /// empty for one pair may hold a single respondent's rare answer overall (issue 13).
    pub empty_level: u32,
    /// See `empty_level`.
    pub into_level: u32,
}

/// How smoothing changed the correlation matrix.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct SmoothingSummary {
    /// How the matrix was smoothed.
    pub method: String,
    /// Smallest eigenvalue before smoothing.
    pub min_eigenvalue_before: f64,
    /// Smallest eigenvalue after smoothing.
    pub min_eigenvalue_after: f64,
    /// Largest absolute change of a correlation.
    pub max_abs_change: f64,
    /// Frobenius norm of the change.
    pub frobenius_change: f64,
}

impl CovarianceOutput {
    pub fn correlation_matrix(&self) -> DMatrix<f64> {
        to_matrix(&self.correlation)
    }

    pub fn covariance_matrix(&self) -> DMatrix<f64> {
        to_matrix(&self.covariance)
    }

    /// The smallest pairwise n: the conservative sample size for tests on the whole matrix.
    pub fn min_n(&self) -> usize {
        self.n.iter().flatten().copied().min().unwrap_or(0)
    }
}

fn to_matrix(rows: &[Vec<f64>]) -> DMatrix<f64> {
    let p = rows.len();
    DMatrix::from_fn(p, p, |r, c| rows[r][c])
}

fn to_rows(m: &DMatrix<f64>) -> Vec<Vec<f64>> {
    (0..m.nrows()).map(|r| (0..m.ncols()).map(|c| m[(r, c)]).collect()).collect()
}

pub struct CovarianceStep {
    missing: Missing,
    ordinal: OrdinalEstimation,
}

impl CovarianceStep {
    pub fn from_spec(spec: &CovarianceSpec) -> CovarianceStep {
        CovarianceStep { missing: spec.missing, ordinal: spec.ordinal }
    }
}

/// Whether the correlation matrix is positive definite and, if not, which items are involved
/// (`stats::smoothing::definiteness`).
pub fn definiteness(correlation: &DMatrix<f64>, items: &[String]) -> Definiteness {
    let (positive_definite, min_eigenvalue, involved) = smoothing::definiteness(correlation);
    Definiteness {
        positive_definite,
        min_eigenvalue,
        involved: involved.into_iter().map(|i| items[i].clone()).collect(),
    }
}

impl CovarianceStep {
    /// Correlations from a published matrix, as given.
    fn from_matrix(m: &super::load::SummaryMatrix, items: &[String]) -> Estimates {
        let p = items.len();
        let given = to_matrix(&m.values);
        let (correlation, covariance) = match m.kind {
            MatrixKind::Correlation => (given.clone(), given),
            MatrixKind::Covariance => {
                let sd: Vec<f64> = (0..p).map(|i| given[(i, i)].sqrt()).collect();
                (DMatrix::from_fn(p, p, |r, c| given[(r, c)] / (sd[r] * sd[c])), given)
            }
        };
        let mut e = Estimates::new(correlation, covariance, vec![vec![m.n; p]; p]);
        for a in 0..p {
            for b in a + 1..p {
                let key = ItemPair::of(items, a, b);
                e.method.insert(key.clone(), PairMethod::Given);
                e.se.insert(key, None);
            }
        }
        e
    }

    /// Per pair Pearson, polychoric or polyserial (Olsson 1979; Olsson, Drasgow & Dorans 1982)
    /// on the pair's complete rows. Covariances: product-moment for two continuous items (so
    /// they equal the usual sample covariance); otherwise r_ab x sd_a x sd_b with each item's
    /// standard deviation on its response scale, the scaling of the underlying response.
    fn estimate_from_rows(&self, load: &LoadOutput, table: &Table) -> Result<Estimates, StepError> {
        let items = &table.items;
        let p = items.len();
        let kinds = load.item_kinds();
        if self.missing == Missing::Fiml {
            return self.fiml_estimates(load, table);
        }
        if kinds.iter().all(|k| *k == ItemKind::Continuous) {
            return self.product_moment_estimates(table);
        }
        let complete = complete_rows(table, self.missing);
        let masked = |k: usize| masked_values(table, k, complete.as_deref());
        let columns = estimator_columns(load, table, complete.as_deref());
        let fit = match self.ordinal {
            OrdinalEstimation::TwoStep => OrdinalFit::TwoStep,
            OrdinalEstimation::Full => OrdinalFit::Full,
        };
        let mixed = mixed_correlation(&columns, fit)
            .map_err(|source| StepError::Stats { context: pair_context(items, &source), source })?;
        drop(columns);
        // Product moments only where they are used: among continuous items (so their
        // covariances equal the usual sample covariances), and each item's own variance.
        // Listwise deletion spans every item, ordinal ones included: the continuous columns
        // are masked to the complete rows (pairwise borrows them).
        let cont: Vec<usize> = (0..p).filter(|&k| kinds[k] == ItemKind::Continuous).collect();
        let moments = if cont.is_empty() {
            None
        } else {
            let copies: Vec<Cow<'_, [f64]>> = cont.iter().map(|&k| masked(k)).collect();
            let cols: Vec<&[f64]> = copies.iter().map(AsRef::as_ref).collect();
            Some(
                pearson_columns(&cols, Deletion::Pairwise)
                    .map_err(|source| StepError::Stats { context: "product-moment covariances".into(), source })?,
            )
        };
        let variance: Vec<f64> = (0..p)
            .map(|k| match (cont.iter().position(|&c| c == k), &moments) {
                (Some(i), Some(m)) => m.covariance[(i, i)],
                _ => sample_variance(&masked(k)),
            })
            .collect();
        let correlation = mixed.matrix.clone();
        let covariance =
            response_scale_covariance(&correlation, &cont, moments.as_ref().map(|m| &m.covariance), &variance);
        let n = (0..p).map(|r| (0..p).map(|c| mixed.n[(r, c)]).collect()).collect();
        let mut e = Estimates::new(correlation, covariance, n);
        for pair in &mixed.pairs {
            let key = ItemPair::of(items, pair.first, pair.second);
            let method = match pair.method {
                mixed::PairMethod::Pearson => PairMethod::Pearson,
                mixed::PairMethod::Polychoric => PairMethod::Polychoric,
                mixed::PairMethod::Polyserial => PairMethod::Polyserial,
            };
            e.method.insert(key.clone(), method);
            e.se.insert(key.clone(), pair.se);
            if pair.at_bound {
                e.at_bound.push(key.clone());
            }
            for m in &pair.merged {
                e.merges.push(Merge {
                    pair: key.clone(),
                    item: items[m.column].clone(),
                    empty_level: m.empty + 1,
                    into_level: m.into + 1,
                });
            }
        }
        Ok(e)
    }
}

/// Listwise deletion: the rows where every item is present (`None` for pairwise).
pub(crate) fn complete_rows(table: &Table, missing: Missing) -> Option<Vec<bool>> {
    match missing {
        Missing::Pairwise | Missing::Fiml => None,
        Missing::Listwise => Some((0..table.rows()).map(|r| table.columns.iter().all(|c| !c.is_missing(r))).collect()),
    }
}

/// Item `k` as numbers, NaN outside the `complete` rows: borrowed where nothing changes.
pub(crate) fn masked_values<'a>(table: &'a Table, k: usize, complete: Option<&[bool]>) -> Cow<'a, [f64]> {
    match complete {
        None => table.columns[k].values(),
        Some(c) => {
            let col = &table.columns[k];
            Cow::Owned((0..table.rows()).map(|r| if c[r] { col.get(r) } else { f64::NAN }).collect())
        }
    }
}

/// The columns the mixed estimator sees: ordinal items as category positions, the others as
/// numbers, missing outside the `complete` rows (listwise deletion).
pub(crate) fn estimator_columns<'a>(load: &LoadOutput, table: &'a Table, complete: Option<&[bool]>) -> Vec<Column<'a>> {
    let kinds = load.item_kinds();
    (0..table.items.len())
        .map(|k| match (&kinds[k], &load.summary.items[k].categories) {
            (ItemKind::Ordinal, Some(levels)) => {
                Column::Ordinal { codes: ordinal_codes(&table.columns[k], levels, complete), levels: levels.len() }
            }
            _ => Column::Continuous(masked_values(table, k, complete)),
        })
        .collect()
}

/// An ordinal item's codes as positions in `categories` (its observed levels, from `load`),
/// missing outside the `complete` rows: the table's own codes, borrowed, when they already are.
fn ordinal_codes<'a>(col: &'a DataColumn, categories: &[f64], complete: Option<&[bool]>) -> Cow<'a, [u8]> {
    let position =
        |v: f64| categories.iter().position(|&l| l == v).and_then(|i| u8::try_from(i).ok()).unwrap_or(MISSING);
    match col {
        DataColumn::Codes { levels, codes } => {
            if complete.is_none() && levels.as_slice() == categories {
                return Cow::Borrowed(codes);
            }
            let remap: Vec<u8> = levels.iter().map(|&l| position(l)).collect();
            let keep = |r: usize| complete.is_none_or(|c| c[r]);
            Cow::Owned(
                codes
                    .iter()
                    .enumerate()
                    .map(|(r, &c)| if c == MISSING || !keep(r) { MISSING } else { remap[c as usize] })
                    .collect(),
            )
        }
        DataColumn::Values(values) => Cow::Owned(
            values
                .iter()
                .enumerate()
                .map(|(r, &v)| if v.is_nan() || !complete.is_none_or(|c| c[r]) { MISSING } else { position(v) })
                .collect(),
        ),
    }
}

impl CovarianceStep {
    /// `missing: fiml`: every respondent's answers under MAR (`steps::missing_data`).
    fn fiml_estimates(&self, load: &LoadOutput, table: &Table) -> Result<Estimates, StepError> {
        let p = table.items.len();
        let columns = estimator_columns(load, table, None);
        let fit = match self.ordinal {
            OrdinalEstimation::TwoStep => OrdinalFit::TwoStep,
            OrdinalEstimation::Full => OrdinalFit::Full,
        };
        let f = super::missing_data::fiml(load, table, &columns, fit)?;
        let kinds = load.item_kinds();
        let mut e = Estimates::new(f.correlation, f.covariance, vec![vec![f.n; p]; p]);
        for a in 0..p {
            for b in a + 1..p {
                let method = match (kinds[a], kinds[b]) {
                    (ItemKind::Continuous, ItemKind::Continuous) => PairMethod::Pearson,
                    (ItemKind::Ordinal, ItemKind::Ordinal) => PairMethod::Polychoric,
                    _ => PairMethod::Polyserial,
                };
                let key = ItemPair::of(&table.items, a, b);
                e.method.insert(key.clone(), method);
                e.se.insert(key, None);
            }
        }
        e.missing_data = Some(f.record);
        Ok(e)
    }

    /// The moment routines' name for the spec's missing-data rule.
    fn deletion(&self) -> Deletion {
        match self.missing {
            Missing::Pairwise => Deletion::Pairwise,
            Missing::Listwise => Deletion::Listwise,
            // `fiml` never reaches the deletion-based estimators.
            Missing::Fiml => Deletion::Pairwise,
        }
    }

    /// All items continuous: one pass of product moments gives every pair (the mixed estimator
    /// would compute the same Pearson correlations a second time).
    fn product_moment_estimates(&self, table: &Table) -> Result<Estimates, StepError> {
        let p = table.items.len();
        let deletion = self.deletion();
        // Coded continuous items (few distinct values) are expanded here, one copy each.
        let values: Vec<Cow<'_, [f64]>> = table.columns.iter().map(DataColumn::values).collect();
        let columns: Vec<&[f64]> = values.iter().map(AsRef::as_ref).collect();
        let m = pearson_columns(&columns, deletion)
            .map_err(|source| StepError::Stats { context: "product-moment covariances".into(), source })?;
        let n = (0..p).map(|r| (0..p).map(|c| m.n[(r, c)]).collect()).collect();
        let mut e = Estimates::new(m.correlation.clone(), m.covariance.clone(), n);
        for a in 0..p {
            for b in a + 1..p {
                let key = ItemPair::of(&table.items, a, b);
                let r = m.correlation[(a, b)];
                // Large-sample standard error of r, (1 - r^2) / sqrt(n), as the mixed estimator
                // reports for Pearson pairs (common practice).
                let se = (1.0 - r * r) / (m.n[(a, b)] as f64).sqrt();
                e.method.insert(key.clone(), PairMethod::Pearson);
                e.se.insert(key, Some(se));
            }
        }
        Ok(e)
    }
}

/// Sample variance (n - 1 divisor) of the present (non-NaN) values.
/// The matrices and per-pair facts before the definiteness check.
struct Estimates {
    correlation: DMatrix<f64>,
    covariance: DMatrix<f64>,
    n: Vec<Vec<usize>>,
    method: IndexMap<ItemPair, PairMethod>,
    se: IndexMap<ItemPair, Option<f64>>,
    merges: Vec<Merge>,
    at_bound: Vec<ItemPair>,
    missing_data: Option<MissingData>,
}

impl Estimates {
    fn new(correlation: DMatrix<f64>, covariance: DMatrix<f64>, n: Vec<Vec<usize>>) -> Estimates {
        Estimates {
            correlation,
            covariance,
            n,
            method: IndexMap::new(),
            se: IndexMap::new(),
            merges: Vec::new(),
            at_bound: Vec::new(),
            missing_data: None,
        }
    }
}

/// Names the items of a failing pair instead of their column indices.
fn pair_context(items: &[String], e: &construe_stats::StatsError) -> String {
    match e {
        construe_stats::StatsError::Pair { first, second, .. } => {
            format!(
                "the correlation of `{}` and `{}`",
                items.get(*first).map_or("?", String::as_str),
                items.get(*second).map_or("?", String::as_str)
            )
        }
        _ => "item correlations".into(),
    }
}

impl Step for CovarianceStep {
    fn kind(&self) -> StepKind {
        StepKind::Covariance
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({"missing": self.missing, "ordinal": self.ordinal})
    }

    fn inputs(&self) -> Vec<StepKind> {
        vec![StepKind::Load]
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let load = inputs.load()?;
        let items: Vec<String> = load.summary.items.iter().map(|i| i.name.clone()).collect();
        let mut e = match (&load.matrix, &load.table) {
            (Some(m), _) => Self::from_matrix(m, &items),
            (None, Some(table)) => self.estimate_from_rows(load, table)?,
            (None, None) => return Err(StepError::MissingInput { step: StepKind::Covariance, needs: StepKind::Load }),
        };
        let mut definiteness = definiteness(&e.correlation, &items);
        let mut smoothing = None;
        let mut unsmoothed = None;
        if !definiteness.positive_definite && load.matrix.is_none() {
            let s = smooth_correlation(&e.correlation)
                .map_err(|source| StepError::Stats { context: "smoothing the correlation matrix".into(), source })?;
            if s.changed {
                let sd: Vec<f64> = (0..items.len()).map(|k| e.covariance[(k, k)].sqrt()).collect();
                e.covariance = DMatrix::from_fn(items.len(), items.len(), |a, b| s.matrix[(a, b)] * sd[a] * sd[b]);
                unsmoothed = Some(to_rows(&e.correlation));
                e.correlation = s.matrix.clone();
                smoothing = Some(SmoothingSummary {
                    method: "nearest correlation matrix by alternating projections (Higham 2002)".into(),
                    min_eigenvalue_before: s.min_eigenvalue_before,
                    min_eigenvalue_after: s.min_eigenvalue_after,
                    max_abs_change: s.max_abs_change,
                    frobenius_change: s.frobenius_change,
                });
                // Keep the diagnosis of the unsmoothed matrix (which items were involved).
                definiteness.min_eigenvalue = s.min_eigenvalue_before;
            }
        }
        let kinds = load.item_kinds();
        let sampling = super::sampling::available(load.matrix.is_some(), &kinds, self.ordinal).to_string();
        let sampling_note = smoothing.as_ref().map(|_| super::sampling::SMOOTHED_NOTE.to_string());
        let mcar = match &load.table {
            Some(table) => {
                // `fiml` on continuous items already ran EM on these values: reuse it.
                let em = e.missing_data.as_ref().and_then(|m| m.mean.as_deref()).map(|m| (m, &e.covariance));
                super::missing_data::mcar(load, table, em)?
            }
            None => None,
        };
        let missingness = load.table.as_ref().and_then(super::missing_data::missingness);
        Ok(Artifact::Covariance(Box::new(CovarianceOutput {
            kind: items.iter().cloned().zip(kinds).collect(),
            items,
            method: e.method,
            correlation: to_rows(&e.correlation),
            covariance: to_rows(&e.covariance),
            n: e.n,
            smoothed: smoothing.is_some(),
            missing: self.missing,
            definiteness,
            se: e.se,
            merges: e.merges,
            smoothing,
            at_bound: e.at_bound,
            ordinal: self.ordinal,
            unsmoothed,
            sampling,
            sampling_note,
            missing_data: e.missing_data,
            mcar,
            missingness,
        })))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Covariance(c) = artifact else { return String::new() };
        let p = c.items.len();
        let count = |m: PairMethod| c.method.values().filter(|&&x| x == m).count();
        let mut parts = Vec::new();
        for (m, label) in [
            (PairMethod::Pearson, "Pearson"),
            (PairMethod::Polychoric, "polychoric"),
            (PairMethod::Polyserial, "polyserial"),
            (PairMethod::Given, "given"),
        ] {
            let k = count(m);
            if k > 0 {
                parts.push(format!("{k} {label}"));
            }
        }
        let pd = match (&c.smoothing, c.definiteness.positive_definite) {
            (Some(s), _) => format!("smoothed to positive definite (max change {:.4})", s.max_abs_change),
            (None, true) => "positive definite".to_string(),
            (None, false) => format!("NOT positive definite (items {})", c.definiteness.involved.join(", ")),
        };
        format!("{p}x{p} matrix, {} pairs: {}; {pd}", p * p.saturating_sub(1) / 2, parts.join(", "))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::steps::{read_exact, write_exact};

    /// Pairwise: the table's codes go to the estimator borrowed, not copied; listwise, values
    /// and levels that differ from the categories are mapped to category positions.
    #[test]
    fn ordinal_codes_are_borrowed_when_they_already_fit() {
        let col = DataColumn::Codes { levels: vec![1.0, 2.0, 4.0], codes: vec![0, 2, MISSING, 1] };
        let DataColumn::Codes { codes, .. } = &col else { unreachable!() };
        let cats = [1.0, 2.0, 4.0];
        let Cow::Borrowed(b) = ordinal_codes(&col, &cats, None) else { panic!("copied") };
        assert!(std::ptr::eq(b, codes.as_slice()));
        let listwise = ordinal_codes(&col, &cats, Some(&[true, false, true, true]));
        assert_eq!(listwise.as_ref(), &[0, MISSING, MISSING, 1]);
        let wider = ordinal_codes(&col, &[0.0, 1.0, 2.0, 4.0], None);
        assert_eq!(wider.as_ref(), &[1, 3, MISSING, 2]);
        let values = DataColumn::Values(vec![4.0, f64::NAN, 1.0, 2.0]);
        assert_eq!(ordinal_codes(&values, &cats, None).as_ref(), &[2, MISSING, 0, 1]);
    }

    // results.json keys stay `"a|b"`; the artifact keeps both names, so pairs whose names
    // contain `|` (`x|y` with `z`, `x` with `y|z`: both "x|y|z" as text) stay two pairs.
    #[test]
    fn pairs_key_results_as_text_and_artifacts_exactly() {
        let one = ItemPair::new("x|y", "z");
        let other = ItemPair::new("x", "y|z");
        assert_eq!(one.to_string(), other.to_string());
        let map: IndexMap<ItemPair, PairMethod> =
            [(ItemPair::new("a", "b"), PairMethod::Pearson), (one.clone(), PairMethod::Polychoric)].into();
        let json = serde_json::to_value(&map).unwrap();
        assert_eq!(json, serde_json::json!({"a|b": "pearson", "x|y|z": "polychoric"}));
        let pairs: IndexMap<ItemPair, PairMethod> =
            [(one.clone(), PairMethod::Polychoric), (other.clone(), PairMethod::Polyserial)].into();
        let mut bytes = Vec::new();
        write_exact(&mut bytes, &pairs).unwrap();
        let back: IndexMap<ItemPair, PairMethod> = read_exact(&bytes).unwrap();
        assert_eq!(back, pairs);
        assert!(back[&other] == PairMethod::Polyserial && other.contains("y|z") && !other.contains("y"));
        // Text keys are read back only when they name one pair.
        assert_eq!(serde_json::from_value::<ItemPair>("a|b".into()).unwrap(), ItemPair::new("a", "b"));
        assert!(serde_json::from_value::<ItemPair>("x|y|z".into()).is_err());
    }
}
