//! `invariance`: do the items measure the same constructs in every wave or group, and did the
//! constructs change? Splits `load`'s rows into groups (waves, or the values of a column),
//! takes each group's complete rows on the kept items, and runs the invariance ladder of
//! `construe_stats::invariance` with the engine the item types call for. Central type:
//! `InvarianceOutput` (results.json `invariance`). Thin: the grouping and id columns are
//! read here as labels (only they; `load`'s artifact and key stay as they are), every number
//! comes from `construe_stats`. Refuses waves that share respondents (ids in two groups).

use std::borrow::Cow;
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::path::PathBuf;

use indexmap::IndexMap;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use thiserror::Error;

use super::group_structure::{self, GroupStructures};
use super::load::ItemKind;
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::data::read_labels;
use crate::spec::SpecFile;
use crate::spec::types::{ACROSS_WAVES, InvarianceSpec, Knowledge as KnowledgeSpec};
use crate::spec::validate_invariance::MIN_GROUP_ROWS;
use construe_stats::groups_continuous::{ContinuousEngine, ContinuousOptions, GroupMoments};
use construe_stats::groups_ordinal::{GroupData, OrdinalGroups};
use construe_stats::invariance::{GroupDesign, Ladder, LadderNote, LadderOptions, Level, ParamKind, run_ladder};
use construe_stats::mixed::MISSING_CODE;

/// Bump when the ladder's results change for the same rows and parameters.
pub const VERSION: u32 = 1;

/// Why the groups cannot be compared.
#[derive(Debug, Error)]
pub enum InvarianceError {
    /// The grouping column holds fewer than two distinct values.
    #[error("column `{column}` has {} in the rows with answers, so there is nothing to compare", plural_groups(*found))]
    OneGroup { column: String, found: usize },
    /// A group has too few complete rows.
    #[error(
        "group `{group}` has {rows} respondents who answered every item of the model; `invariance` needs at least {min} per group"
    )]
    SmallGroup { group: String, rows: usize, min: usize },
    /// `reference` names no group.
    #[error("`invariance.reference` names `{reference}`, which is not a value of `{column}` (values: {})", .groups.join(", "))]
    UnknownReference { reference: String, column: String, groups: Vec<String> },
    /// The same respondents are in several groups (a panel): the groups are not independent.
    #[error(
        "{count} {} of id column `{column}` appear in more than one group (for example in `{first}` and `{second}`): the same respondents answered in several groups, so the groups are not independent samples and the multi-group comparison would understate its uncertainty; comparing waves of a panel needs the longitudinal model, which construe does not fit yet",
        if *count == 1 { "value" } else { "values" }
    )]
    SharedRespondents { column: String, count: usize, first: String, second: String },
    /// A column read for the groups does not have one value per loaded row.
    #[error("column `{column}` of `{}` has {found} rows, but {expected} were loaded from it", path.display())]
    RowMismatch { column: String, path: PathBuf, found: usize, expected: usize },
    /// No construct has the two items a multi-group model needs.
    #[error("no construct has at least two items, so no measurement model can be compared across groups")]
    NoConstructs,
}

fn plural_groups(n: usize) -> String {
    if n == 1 { "1 value".into() } else { format!("{n} values") }
}

/// A rung of the ladder.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum InvarianceLevel {
    /// Same pattern of loadings, all parameters free per group.
    Configural,
    /// Equal loadings.
    Metric,
    /// Equal loadings and intercepts (thresholds for ordinal items).
    Scalar,
    /// Equal loadings, intercepts and residual variances.
    Strict,
}

impl From<Level> for InvarianceLevel {
    fn from(l: Level) -> Self {
        match l {
            Level::Configural => InvarianceLevel::Configural,
            Level::Metric => InvarianceLevel::Metric,
            Level::Scalar => InvarianceLevel::Scalar,
            Level::Strict => InvarianceLevel::Strict,
        }
    }
}

/// A kind of measurement parameter.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Parameter {
    /// The item's loading.
    Loading,
    /// The item's intercept (its mean at a construct value of 0).
    Intercept,
    /// The item's thresholds (ordinal items).
    Threshold,
    /// The item's residual variance.
    Residual,
}

impl From<ParamKind> for Parameter {
    fn from(k: ParamKind) -> Self {
        match k {
            ParamKind::Loading => Parameter::Loading,
            ParamKind::Intercept => Parameter::Intercept,
            ParamKind::Threshold => Parameter::Threshold,
            ParamKind::Residual => Parameter::Residual,
        }
    }
}

/// The difference test of a rung against the one below it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DiffRecord {
    /// Chi-square difference (scaled when `scaled`).
    pub chisq: f64,
    /// Its degrees of freedom.
    pub df: usize,
    /// Its p-value.
    pub p: f64,
    /// Whether the Satorra-Bentler (2001) scaled difference was used.
    pub scaled: bool,
}

/// One rung as tested.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct LevelRecord {
    /// The rung.
    pub level: InvarianceLevel,
    /// The multi-group model's chi-square (likelihood ratio against free means and
    /// covariances per group).
    pub chisq: f64,
    /// Its degrees of freedom.
    pub df: usize,
    /// Its p-value.
    pub p: f64,
    /// Comparative fit index against independence within each group.
    pub cfi: f64,
    /// RMSEA with the multi-group correction (Steiger 1998).
    pub rmsea: f64,
    /// The verdict: configural holds when its model converged; each higher rung when its
    /// difference test against the rung below has p >= `alpha` (after freeing constraints, if
    /// any).
    pub holds: bool,
    /// Whether the rung holds only with some constraints freed (partial invariance).
    pub partial: bool,
    /// Whether the fit converged.
    pub converged: bool,
    /// The test against the rung below, with the freed constraints (`null` for configural).
    pub diff: Option<DiffRecord>,
    /// The test before any constraint was freed, when some were.
    pub diff_before_freeing: Option<DiffRecord>,
    /// CFI of this rung minus CFI of the rung below (guidance: <= -0.01 suggests
    /// non-invariance, Cheung & Rensvold 2002).
    pub delta_cfi: Option<f64>,
    /// RMSEA of this rung minus RMSEA of the rung below (guidance: >= 0.015 suggests
    /// non-invariance, Chen 2007).
    pub delta_rmsea: Option<f64>,
    /// Whether ΔCFI passes the guidance cut-off (-0.01).
    pub delta_cfi_flags: Option<bool>,
    /// Whether ΔRMSEA passes the guidance cut-off (0.015).
    pub delta_rmsea_flags: Option<bool>,
}

/// A parameter found to differ between groups and freed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct NoninvariantRecord {
    /// The item.
    pub item: String,
    /// Its construct.
    pub construct: String,
    /// Which of its parameters differs.
    pub parameter: Parameter,
    /// The groups whose value was estimated apart from the reference group's (and the
    /// others').
    pub groups: Vec<String>,
    /// The rung at which it was freed.
    pub level: InvarianceLevel,
    /// The score (Lagrange multiplier) test that chose it.
    pub statistic: f64,
    /// Its degrees of freedom.
    pub df: usize,
    /// Its p-value.
    pub p: f64,
    /// The parameter's estimate in each group in the model where it is free.
    pub estimates: IndexMap<String, f64>,
}

/// A construct's mean and variance in one group, relative to the reference group.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct LatentMeanRecord {
    /// The construct.
    pub construct: String,
    /// The group.
    pub group: String,
    /// Mean minus the reference group's mean, in the reference group's SDs of the construct.
    pub diff: f64,
    /// Its standard error (expected information).
    pub se: f64,
    /// 95% interval, diff ± 1.96 SE.
    pub ci: (f64, f64),
    /// Wald p-value of no difference.
    pub p: f64,
    /// Variance relative to the reference group's.
    pub variance: f64,
    /// Its standard error.
    pub variance_se: Option<f64>,
    /// 95% interval of the variance ratio.
    pub variance_ci: Option<(f64, f64)>,
}

/// Measurement invariance across groups and the constructs' change (results.json
/// `invariance`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct InvarianceOutput {
    /// `wave` or the grouping column.
    pub across: String,
    /// The groups: the waves in spec order, or the column's values sorted (numerically when
    /// they are numbers).
    pub groups: Vec<String>,
    /// The group the others are compared with.
    pub reference: String,
    /// Respondents per group who answered every item of the model (the rows used).
    pub n: IndexMap<String, usize>,
    /// Rows left out: no group value, or an item unanswered.
    pub rows_left_out: usize,
    /// Construct -> the items compared (after purification).
    pub constructs: IndexMap<String, Vec<String>>,
    /// Constructs with fewer than two items, which a multi-group model cannot compare.
    pub constructs_left_out: Vec<String>,
    /// Items of the other scale, left out: one model compares either ordinal items (by their
    /// thresholds) or continuous ones (by their intercepts), whichever are more numerous.
    #[serde(default)]
    pub items_left_out: Vec<String>,
    /// How the models were estimated.
    pub estimator: String,
    /// Significance level of the difference and score tests.
    pub alpha: f64,
    /// The rungs tested, in order, up to the first that failed.
    pub levels: Vec<LevelRecord>,
    /// The highest rung that holds (fully or partially).
    pub highest: Option<InvarianceLevel>,
    /// Parameters found to differ between groups.
    pub noninvariant: Vec<NoninvariantRecord>,
    /// Construct means and variances of each group relative to the reference group; empty
    /// when (partial) scalar invariance does not hold.
    pub latent_means: Vec<LatentMeanRecord>,
    /// The rung the latent means come from.
    pub means_from: Option<InvarianceLevel>,
    /// What the ladder had to say in words (why no means are compared, non-convergence).
    pub notes: Vec<String>,
    /// The structure search run in each group and compared (when `structure` is in the spec).
    pub structure_by_group: Option<GroupStructures>,
}

pub struct InvarianceStep {
    params: InvarianceSpec,
    /// (construct, items) as declared.
    declared: Vec<(String, Vec<String>)>,
    purified: bool,
    /// (wave id, resolved path) in spec order.
    waves: Vec<(String, PathBuf)>,
    id_column: Option<String>,
    missing_codes: Vec<f64>,
    /// `structure.alpha` when the spec searches the structure (then also per group).
    structure_alpha: Option<f64>,
    knowledge: KnowledgeSpec,
}

impl InvarianceStep {
    pub fn from_spec(file: &SpecFile, params: &InvarianceSpec) -> InvarianceStep {
        let s = &file.spec;
        InvarianceStep {
            params: params.clone(),
            declared: s.constructs.iter().map(|(n, c)| (n.clone(), c.items.clone())).collect(),
            purified: s.analyses.purify.is_some(),
            waves: s.data.waves.iter().map(|w| (w.id.clone(), file.resolve(&w.file))).collect(),
            id_column: s.data.id_column.clone(),
            missing_codes: s.data.missing_codes.clone(),
            structure_alpha: s.analyses.structure.as_ref().map(|st| st.alpha),
            knowledge: s.knowledge.clone(),
        }
    }

    fn by_column(&self) -> bool {
        self.params.across != ACROSS_WAVES
    }

    /// A column over all waves, stacked in wave order as `load` stacks rows; a label equal to
    /// a missing code is missing.
    fn stacked_labels(&self, column: &str, rows: usize) -> Result<Vec<Option<String>>, StepError> {
        let mut out = Vec::with_capacity(rows);
        for (_, path) in &self.waves {
            out.extend(
                read_labels(path, column)?
                    .into_iter()
                    .map(|v| v.filter(|t| !t.parse::<f64>().is_ok_and(|x| self.missing_codes.contains(&x)))),
            );
        }
        if out.len() != rows {
            let path = self.waves.first().map(|w| w.1.clone()).unwrap_or_default();
            return Err(
                InvarianceError::RowMismatch { column: column.into(), path, found: out.len(), expected: rows }.into()
            );
        }
        Ok(out)
    }
}

/// Distinct labels in order: numerically when every one is a number, else as text.
fn sorted_levels(labels: &[Option<String>]) -> Vec<String> {
    let set: BTreeSet<&String> = labels.iter().flatten().collect();
    let mut levels: Vec<String> = set.into_iter().cloned().collect();
    if levels.iter().all(|l| l.parse::<f64>().is_ok()) {
        levels.sort_by(|a, b| a.parse::<f64>().unwrap_or(0.0).total_cmp(&b.parse::<f64>().unwrap_or(0.0)));
    }
    levels
}

impl Step for InvarianceStep {
    fn kind(&self) -> StepKind {
        StepKind::Invariance
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({
            "across": self.params.across,
            "reference": self.params.reference,
            "alpha": self.params.alpha,
            "strict": self.params.strict,
            "partial": self.params.partial,
            "constructs": self.declared,
            "id_column": self.id_column,
            "structure_alpha": self.structure_alpha,
            "knowledge": self.knowledge,
        })
    }

    fn inputs(&self) -> Vec<StepKind> {
        if self.purified { vec![StepKind::Load, StepKind::Purify] } else { vec![StepKind::Load] }
    }

    /// The wave files, when a grouping or id column is read from them.
    fn files(&self) -> Vec<PathBuf> {
        if self.by_column() || self.id_column.is_some() {
            self.waves.iter().map(|w| w.1.clone()).collect()
        } else {
            Vec::new()
        }
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let load = inputs.load()?;
        let table = load.table.as_ref().ok_or(StepError::EstimationUnavailable {
            what: "measurement invariance",
            hint: "it needs respondent rows, not a summary matrix",
        })?;
        let rows = table.rows();
        // Constructs and items: purification's kept items where it ran.
        let kept = if self.purified { Some(inputs.purify()?.kept()) } else { None };
        // One model takes one kind of item: the threshold model ordinal items, the
        // mean-structure model continuous ones. With both kinds, the more numerous kind is
        // compared and the others are listed as left out.
        let is_ordinal =
            |item: &String| load.summary.items.iter().any(|s| &s.name == item && s.kind == ItemKind::Ordinal);
        let candidates: Vec<(String, Vec<String>)> = self
            .declared
            .iter()
            .map(|(name, items)| {
                (name.clone(), kept.as_ref().and_then(|k| k.get(name).cloned()).unwrap_or_else(|| items.clone()))
            })
            .collect();
        let all: Vec<&String> = candidates.iter().flat_map(|(_, items)| items).collect();
        let n_ordinal = all.iter().filter(|i| is_ordinal(i)).count();
        let ordinal_model = 2 * n_ordinal >= all.len() && n_ordinal > 0;
        let mut constructs: IndexMap<String, Vec<String>> = IndexMap::new();
        let mut left_out = Vec::new();
        let mut items_left_out = Vec::new();
        for (name, items) in candidates {
            let (keep, other): (Vec<String>, Vec<String>) =
                items.into_iter().partition(|i| is_ordinal(i) == ordinal_model);
            items_left_out.extend(other);
            if keep.len() >= 2 {
                constructs.insert(name, keep);
            } else {
                left_out.push(name);
            }
        }
        if constructs.is_empty() {
            return Err(InvarianceError::NoConstructs.into());
        }
        let items: Vec<String> = constructs.values().flatten().cloned().collect();

        // Groups of rows.
        let (column, groups, group_of_row): (String, Vec<String>, Vec<Option<usize>>) = if self.by_column() {
            let labels = self.stacked_labels(&self.params.across, rows)?;
            let levels = sorted_levels(&labels);
            let index: HashMap<&str, usize> = levels.iter().enumerate().map(|(k, l)| (l.as_str(), k)).collect();
            let of_row = labels.iter().map(|l| l.as_deref().map(|l| index[l])).collect();
            (self.params.across.clone(), levels, of_row)
        } else {
            ("wave".into(), table.waves.clone(), table.wave_of_row.iter().map(|&w| Some(w as usize)).collect())
        };
        if groups.len() < 2 {
            return Err(InvarianceError::OneGroup { column, found: groups.len() }.into());
        }
        let reference = match &self.params.reference {
            Some(r) => groups.iter().position(|g| g == r).ok_or_else(|| InvarianceError::UnknownReference {
                reference: r.clone(),
                column: column.clone(),
                groups: groups.clone(),
            })?,
            None => 0,
        };
        if let Some(id) = &self.id_column {
            check_independent(&self.stacked_labels(id, rows)?, &group_of_row, &groups, id)?;
        }

        let cols: Vec<&crate::data::Column> = items.iter().filter_map(|i| table.column(i)).collect();
        if cols.len() != items.len() {
            return Err(StepError::ItemNotInMatrix {
                item: items.iter().find(|i| table.column(i).is_none()).cloned().unwrap_or_default(),
            });
        }
        let stats = |context: &str| {
            let context = context.to_string();
            move |source: construe_stats::StatsError| StepError::Stats { context: context.clone(), source }
        };
        let item_construct: Vec<usize> =
            constructs.values().enumerate().flat_map(|(c, its)| std::iter::repeat_n(c, its.len())).collect();
        let options = LadderOptions {
            alpha: self.params.alpha,
            strict: self.params.strict,
            partial: self.params.partial,
            ..LadderOptions::default()
        };
        if ordinal_model {
            // Ordinal items: the threshold model on each group's thresholds and polychoric
            // correlations, from every answer given (pairwise present).
            let categories: Vec<Vec<f64>> = items
                .iter()
                .map(|i| {
                    load.summary
                        .items
                        .iter()
                        .find(|s| &s.name == i)
                        .and_then(|s| s.categories.clone())
                        .unwrap_or_default()
                })
                .collect();
            let mut codes: Vec<Vec<Vec<u8>>> = vec![vec![Vec::new(); items.len()]; groups.len()];
            let mut used = 0;
            for (r, group) in group_of_row.iter().enumerate() {
                let Some(g) = *group else { continue };
                used += 1;
                for (j, c) in cols.iter().enumerate() {
                    let code = if c.is_missing(r) {
                        MISSING_CODE
                    } else {
                        let v = c.get(r);
                        categories[j]
                            .iter()
                            .position(|&l| l == v)
                            .and_then(|k| u8::try_from(k).ok())
                            .unwrap_or(MISSING_CODE)
                    };
                    codes[g][j].push(code);
                }
            }
            let min = MIN_GROUP_ROWS.max(items.len() + 1);
            for (g, data) in codes.iter().enumerate() {
                let n = data.first().map_or(0, Vec::len);
                if n < min {
                    return Err(InvarianceError::SmallGroup { group: groups[g].clone(), rows: n, min }.into());
                }
            }
            let data: Vec<GroupData<'_>> = codes
                .iter()
                .map(|g| GroupData { items: g.iter().map(|c| Cow::Borrowed(c.as_slice())).collect() })
                .collect();
            let design = GroupDesign {
                items: items.clone(),
                constructs: constructs.keys().cloned().collect(),
                item_construct,
                groups: groups.clone(),
                n: codes.iter().map(|g| g.first().map_or(0, Vec::len)).collect(),
                reference,
            };
            let levels: Vec<usize> = categories.iter().map(Vec::len).collect();
            let engine =
                OrdinalGroups::new(design, &data, &levels).map_err(stats("the multi-group threshold model"))?;
            let ladder = run_ladder(&engine, &options).map_err(stats("the invariance ladder"))?;
            let mut out = summarise(
                &ladder,
                &self.params.across,
                constructs,
                left_out,
                rows - used,
                "DWLS on each group's thresholds and polychoric correlations (every answer given), Wu & Estabrook (2016) identification, robust (scaled-and-shifted) statistics",
            );
            out.items_left_out = items_left_out;
            return Ok(Artifact::Invariance(Box::new(out)));
        }

        // Continuous items: each group's complete rows on the model's items.
        let mut per_group: Vec<Vec<Vec<f64>>> = vec![vec![Vec::new(); items.len()]; groups.len()];
        let mut used = 0;
        for (r, group) in group_of_row.iter().enumerate() {
            let Some(g) = *group else { continue };
            if cols.iter().any(|c| c.is_missing(r)) {
                continue;
            }
            used += 1;
            for (j, c) in cols.iter().enumerate() {
                per_group[g][j].push(c.get(r));
            }
        }
        let min = MIN_GROUP_ROWS.max(items.len() + 1);
        for (g, data) in per_group.iter().enumerate() {
            let n = data.first().map_or(0, Vec::len);
            if n < min {
                return Err(InvarianceError::SmallGroup { group: groups[g].clone(), rows: n, min }.into());
            }
        }
        let moments: Vec<GroupMoments> = per_group
            .iter()
            .map(|cols| GroupMoments::from_columns(cols))
            .collect::<Result<_, _>>()
            .map_err(stats("group moments"))?;
        let design = GroupDesign {
            items: items.clone(),
            constructs: constructs.keys().cloned().collect(),
            item_construct,
            groups: groups.clone(),
            n: moments.iter().map(|m| m.n).collect(),
            reference,
        };
        let engine = ContinuousEngine::new(design, moments, ContinuousOptions::default())
            .map_err(stats("the multi-group model"))?;
        let ladder = run_ladder(&engine, &options).map_err(stats("the invariance ladder"))?;
        // Per-group structure from the highest rung that holds (latent correlations are free
        // per group on every rung).
        let structure_by_group = match (self.structure_alpha, ladder.levels.iter().rev().find(|l| l.holds)) {
            (Some(alpha), Some(rung)) if ladder.design.constructs.len() >= 2 => {
                let covs: Vec<_> = (0..groups.len()).map(|g| engine.latent_covariance(&rung.fit, g)).collect();
                Some(group_structure::compare(
                    &ladder.design.constructs,
                    &groups,
                    &covs,
                    &ladder.design.n,
                    &self.knowledge,
                    alpha,
                )?)
            }
            _ => None,
        };
        let mut out = summarise(
            &ladder,
            &self.params.across,
            constructs,
            left_out,
            rows - used,
            "maximum likelihood with a mean structure, per group (complete rows)",
        );
        out.structure_by_group = structure_by_group;
        out.items_left_out = items_left_out;
        Ok(Artifact::Invariance(Box::new(out)))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Invariance(a) = artifact else { return String::new() };
        let highest = a.highest.map_or("none".to_string(), |l| format!("{l:?}").to_lowercase());
        format!(
            "{} groups by {}; highest rung that holds: {highest}; {} non-invariant parameter(s); {} latent mean(s) compared",
            a.groups.len(),
            a.across,
            a.noninvariant.len(),
            a.latent_means.len()
        )
    }
}

/// Refuses groups that share respondents: an id (non-missing) in two groups.
fn check_independent(
    ids: &[Option<String>],
    group_of_row: &[Option<usize>],
    groups: &[String],
    column: &str,
) -> Result<(), InvarianceError> {
    let mut first_group: HashMap<&str, usize> = HashMap::new();
    let mut shared: BTreeMap<&str, (usize, usize)> = BTreeMap::new();
    for (id, g) in ids.iter().zip(group_of_row) {
        let (Some(id), Some(g)) = (id, g) else { continue };
        match first_group.get(id.as_str()) {
            Some(&f) if f != *g => {
                shared.entry(id.as_str()).or_insert((f.min(*g), f.max(*g)));
            }
            Some(_) => {}
            None => {
                first_group.insert(id, *g);
            }
        }
    }
    match shared.values().next() {
        None => Ok(()),
        Some(&(a, b)) => Err(InvarianceError::SharedRespondents {
            column: column.to_string(),
            count: shared.len(),
            first: groups[a].clone(),
            second: groups[b].clone(),
        }),
    }
}

/// The ladder as results.json shows it.
fn summarise(
    ladder: &Ladder,
    across: &str,
    constructs: IndexMap<String, Vec<String>>,
    constructs_left_out: Vec<String>,
    rows_left_out: usize,
    estimator: &str,
) -> InvarianceOutput {
    let d = &ladder.design;
    let diff =
        |t: &construe_stats::invariance::DiffTest| DiffRecord { chisq: t.chisq, df: t.df, p: t.p, scaled: t.scaled };
    let levels = ladder
        .levels
        .iter()
        .map(|l| LevelRecord {
            level: l.level.into(),
            chisq: l.fit.chisq,
            df: l.fit.df,
            p: l.fit.p,
            cfi: l.fit.cfi,
            rmsea: l.fit.rmsea,
            holds: l.holds,
            partial: l.partial,
            converged: l.fit.converged,
            diff: l.diff.as_ref().map(diff),
            diff_before_freeing: l.diff_full.as_ref().map(diff),
            delta_cfi: l.guidance.as_ref().map(|g| g.delta_cfi),
            delta_rmsea: l.guidance.as_ref().map(|g| g.delta_rmsea),
            delta_cfi_flags: l.guidance.as_ref().map(|g| g.cfi_flags),
            delta_rmsea_flags: l.guidance.as_ref().map(|g| g.rmsea_flags),
        })
        .collect();
    // Each freed parameter's estimates per group, from the highest rung that holds.
    let final_fit = ladder.levels.iter().rev().find(|l| l.holds).map(|l| &l.fit);
    let noninvariant = ladder
        .noninvariant
        .iter()
        .map(|t| {
            let r = t.release;
            let level = ladder
                .levels
                .iter()
                .find(|l| l.released.iter().any(|x| x.release == r))
                .map_or(InvarianceLevel::Scalar, |l| l.level.into());
            let estimates = final_fit
                .map(|f| {
                    f.items
                        .iter()
                        .filter(|e| e.item == r.item && e.kind == r.kind)
                        .map(|e| (d.groups[e.group].clone(), e.est))
                        .collect()
                })
                .unwrap_or_default();
            NoninvariantRecord {
                item: d.items[r.item].clone(),
                construct: d.constructs[d.item_construct[r.item]].clone(),
                parameter: r.kind.into(),
                groups: vec![d.groups[r.group].clone()],
                level,
                statistic: t.statistic,
                df: t.df,
                p: t.p,
                estimates,
            }
        })
        .collect();
    let latent_means = ladder
        .latent_means
        .iter()
        .map(|m| LatentMeanRecord {
            construct: d.constructs[m.construct].clone(),
            group: d.groups[m.group].clone(),
            diff: m.diff,
            se: m.se,
            ci: m.ci,
            p: m.p,
            variance: m.variance,
            variance_se: m.variance_se,
            variance_ci: m.variance_ci,
        })
        .collect();
    let notes = ladder
        .notes
        .iter()
        .map(|n| match n {
            LadderNote::FewInvariant { construct, group, invariant } => format!(
                "construct `{}` keeps {invariant} invariant {} in group `{}`; its comparison rests on {}",
                d.constructs[*construct],
                if *invariant == 1 { "item" } else { "items" },
                d.groups[*group],
                if *invariant == 1 { "it" } else { "them" }
            ),
            other => other.to_string(),
        })
        .collect();
    InvarianceOutput {
        across: across.to_string(),
        groups: d.groups.clone(),
        reference: d.groups[d.reference].clone(),
        n: d.groups.iter().cloned().zip(d.n.iter().copied()).collect(),
        rows_left_out,
        constructs,
        constructs_left_out,
        items_left_out: Vec::new(),
        estimator: estimator.to_string(),
        alpha: ladder.options.alpha,
        levels,
        highest: ladder.highest().map(Into::into),
        noninvariant,
        latent_means,
        means_from: ladder.means_from.map(Into::into),
        notes,
        structure_by_group: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shared_ids_between_groups_are_refused() {
        let ids: Vec<Option<String>> = ["1", "2", "3", "1", "4", "2"].iter().map(|s| Some((*s).to_string())).collect();
        let groups = vec!["spring".to_string(), "autumn".to_string()];
        let of_row = vec![Some(0), Some(0), Some(0), Some(1), Some(1), Some(1)];
        let err = check_independent(&ids, &of_row, &groups, "rider_id").unwrap_err();
        assert!(matches!(err, InvarianceError::SharedRespondents { count: 2, .. }), "{err}");
        assert!(err.to_string().starts_with("2 values of id column `rider_id` appear in more than one group"));
        // Distinct ids, and repeats within one group, are fine.
        let of_row = vec![Some(0), Some(0), Some(0), Some(0), Some(1), Some(0)];
        assert!(check_independent(&ids, &of_row, &groups, "rider_id").is_ok());
    }

    #[test]
    fn numeric_labels_sort_as_numbers() {
        let labels: Vec<Option<String>> =
            ["10", "9", "2", "9"].iter().map(|s| Some((*s).to_string())).chain([None]).collect();
        assert_eq!(sorted_levels(&labels), ["2", "9", "10"]);
        let labels: Vec<Option<String>> = ["north", "east"].iter().map(|s| Some((*s).to_string())).collect();
        assert_eq!(sorted_levels(&labels), ["east", "north"]);
    }
}
