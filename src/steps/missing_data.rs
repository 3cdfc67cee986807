//! Values missing at random (issue 17): what `covariance: {missing: fiml}` estimates, Little's
//! test of missing completely at random for every run with missing values, and the completed
//! data sets the sampling covariance of `steps::sampling` is rebuilt from. Shared by the
//! `covariance` step (which estimates) and `sampling` (which rebuilds); no numerics of its own
//! beyond assembling `construe_stats::missing` and `construe_stats::impute` calls.

use std::borrow::Cow;

use construe_stats::impute::{ImputeOptions, Pooled, impute};
use construe_stats::missing::{self, EmOptions, Patterns, TwoStage};
use construe_stats::mixed::{Column, MISSING_CODE, mixed_correlation};
use construe_stats::moments::sample_variance;
use construe_stats::polychoric::OrdinalFit;
use construe_stats::{StatsError, mixed};
use nalgebra::{DMatrix, DVector};
use schemars::JsonSchema;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

use super::StepError;
use super::load::{ItemKind, LoadOutput};
use crate::data::Table;
use crate::data::table::Column as DataColumn;

/// Imputations drawn for ordinal and mixed items.
pub const IMPUTATIONS: usize = 20;
/// Gibbs sweeps discarded before the first imputation, and between two.
pub const BURN_IN: usize = 500;
pub const THIN: usize = 25;
/// The imputation sampler's seed (fixed: the same data give the same imputations).
pub const SEED: u64 = 17;

/// Little's test runs on at most this many items and missing-data patterns (its EM costs
/// O(patterns · p³) per iteration); beyond, results.json says why it was not run.
pub const MCAR_MAX_ITEMS: usize = 60;
pub const MCAR_MAX_PATTERNS: usize = 500;

/// Values filled in by multiple imputation, per imputation, per item, in row order of the
/// item's missing answers. Respondent-level: stored in the cache artifact (a binary format),
/// never published — in results.json (any human-readable format) it shows only its counts.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ImputedValues(pub Vec<Vec<Vec<f64>>>);

/// What results.json shows of `ImputedValues`.
#[derive(Serialize, JsonSchema)]
pub struct ImputedCounts {
    /// Completed data sets.
    pub sets: usize,
    /// Values filled in each set.
    pub values_per_set: usize,
}

impl ImputedValues {
    fn counts(&self) -> ImputedCounts {
        ImputedCounts { sets: self.0.len(), values_per_set: self.0.first().map_or(0, |s| s.iter().map(Vec::len).sum()) }
    }
}

impl Serialize for ImputedValues {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        if serializer.is_human_readable() { self.counts().serialize(serializer) } else { self.0.serialize(serializer) }
    }
}

impl<'de> Deserialize<'de> for ImputedValues {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        if deserializer.is_human_readable() {
            return Err(serde::de::Error::custom("imputed values are read only from the cache's binary artifacts"));
        }
        Ok(ImputedValues(Vec::deserialize(deserializer)?))
    }
}

impl JsonSchema for ImputedValues {
    fn schema_name() -> Cow<'static, str> {
        "ImputedCounts".into()
    }

    fn json_schema(generator: &mut schemars::SchemaGenerator) -> schemars::Schema {
        ImputedCounts::json_schema(generator)
    }
}

/// How `missing: fiml` estimated the matrix (results.json `covariance.missing_data`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct MissingData {
    /// The method, in one sentence a reviewer can quote.
    pub method: String,
    /// Respondents with at least one answer (all of them enter the estimates).
    pub rows_used: usize,
    /// Respondents with no answer to any analysed item (they carry no information).
    pub rows_without_answers: usize,
    /// Distinct patterns of answered items.
    pub patterns: usize,
    /// The EM means of the items (continuous items; the EM covariance is the step's
    /// `covariance`), kept so the sampling covariance is built without rerunning EM.
    pub mean: Option<Vec<f64>>,
    /// EM iterations (continuous items).
    pub iterations: Option<usize>,
    /// Whether EM met its convergence criterion (continuous items).
    pub converged: Option<bool>,
    /// Completed data sets (ordinal and mixed items).
    pub imputations: Option<usize>,
    /// Largest fraction of missing information over the correlations (ordinal and mixed items;
    /// Rubin 1987).
    pub max_missing_information: Option<f64>,
    /// The values filled in (counts only in results.json).
    pub imputed: ImputedValues,
}

/// Little's (1988) test that values are missing completely at random (results.json
/// `covariance.mcar`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct McarRecord {
    /// Chi-square statistic d² (None when the test was not run).
    pub stat: Option<f64>,
    pub df: Option<usize>,
    pub p: Option<f64>,
    /// Distinct patterns of answered items among respondents with an answer.
    pub patterns: usize,
    /// Why the test was not run, or a caveat (ordinal items enter by their codes).
    pub note: Option<String>,
}

/// Where answers are missing (results.json `covariance.missingness`): per wave, each item's
/// share of missing answers; the most common patterns of missing items. Aggregates only: a
/// pattern shared by fewer than `load::MIN_GROUP` respondents is pooled into `other_rows`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Missingness {
    /// Items in table order (the columns of `by_wave[..].share`).
    pub items: Vec<String>,
    /// One row per wave.
    pub by_wave: Vec<WaveMissing>,
    /// The most common patterns (at most `MAX_PATTERNS_SHOWN`), most frequent first.
    pub patterns: Vec<PatternCount>,
    /// Respondents in the other patterns (rarer ones, or beyond the list).
    pub other_rows: usize,
    /// Respondents who answered every item.
    pub complete_rows: usize,
}

/// One wave's share of missing answers per item.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct WaveMissing {
    /// The wave's id.
    pub wave: String,
    /// Rows of the wave.
    pub rows: usize,
    /// Share of the wave's rows with the item missing, in `items` order.
    pub share: Vec<f64>,
}

/// A pattern of missing items and how many respondents have it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct PatternCount {
    /// The items missing in this pattern.
    pub missing: Vec<String>,
    /// Respondents with exactly this pattern (at least `load::MIN_GROUP`).
    pub rows: usize,
}

/// Most patterns `Missingness` lists.
pub const MAX_PATTERNS_SHOWN: usize = 8;

/// The missingness summary of `table`; `None` when nothing is missing.
pub fn missingness(table: &Table) -> Option<Missingness> {
    let p = table.items.len();
    let rows = table.rows();
    let mut counts: std::collections::BTreeMap<Vec<usize>, usize> = std::collections::BTreeMap::new();
    let mut by_wave: Vec<(usize, Vec<usize>)> = vec![(0, vec![0; p]); table.waves.len()];
    for r in 0..rows {
        let missing: Vec<usize> = (0..p).filter(|&k| table.columns[k].is_missing(r)).collect();
        let w = table.wave_of_row[r] as usize;
        if let Some((n, m)) = by_wave.get_mut(w) {
            *n += 1;
            for &k in &missing {
                m[k] += 1;
            }
        }
        *counts.entry(missing).or_default() += 1;
    }
    let complete_rows = counts.get(&Vec::new()).copied().unwrap_or(0);
    if complete_rows == rows {
        return None;
    }
    let mut listed: Vec<(Vec<usize>, usize)> = counts.into_iter().filter(|(m, _)| !m.is_empty()).collect();
    listed.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
    let incomplete: usize = listed.iter().map(|(_, c)| c).sum();
    let shown: Vec<PatternCount> = listed
        .iter()
        .filter(|(_, c)| *c >= super::load::MIN_GROUP)
        .take(MAX_PATTERNS_SHOWN)
        .map(|(m, c)| PatternCount { missing: m.iter().map(|&k| table.items[k].clone()).collect(), rows: *c })
        .collect();
    let other_rows = incomplete - shown.iter().map(|s| s.rows).sum::<usize>();
    Some(Missingness {
        items: table.items.clone(),
        by_wave: table
            .waves
            .iter()
            .zip(by_wave)
            .map(|(id, (n, m))| WaveMissing {
                wave: id.clone(),
                rows: n,
                share: m.iter().map(|&c| if n == 0 { 0.0 } else { c as f64 / n as f64 }).collect(),
            })
            .collect(),
        patterns: shown,
        other_rows,
        complete_rows,
    })
}

fn stats(context: &str) -> impl Fn(StatsError) -> StepError + '_ {
    move |source| StepError::Stats { context: context.into(), source }
}

/// Little's test on the table's items (ordinal items by their numeric codes: an approximation,
/// said in the note). `None` when no value is missing. `em`: the EM mean and covariance of the
/// same values when `fiml` already computed them (continuous items), so EM runs once.
pub fn mcar(
    load: &LoadOutput,
    table: &Table,
    em: Option<(&[f64], &DMatrix<f64>)>,
) -> Result<Option<McarRecord>, StepError> {
    let values: Vec<Cow<'_, [f64]>> = table.columns.iter().map(DataColumn::values).collect();
    let views: Vec<&[f64]> = values.iter().map(AsRef::as_ref).collect();
    if !views.iter().any(|c| c.iter().any(|v| v.is_nan())) {
        return Ok(None);
    }
    let patterns = Patterns::new(&views).map_err(stats("the missing-data patterns"))?;
    let skip = |note: String| {
        Ok(Some(McarRecord { stat: None, df: None, p: None, patterns: patterns.len(), note: Some(note) }))
    };
    if views.len() > MCAR_MAX_ITEMS {
        return skip(format!("not run: more than {MCAR_MAX_ITEMS} items"));
    }
    if patterns.len() > MCAR_MAX_PATTERNS {
        return skip(format!("not run: more than {MCAR_MAX_PATTERNS} patterns of answered items"));
    }
    let (mean, cov) = match em {
        Some((mean, cov)) => (DVector::from_column_slice(mean), cov.clone()),
        None => match missing::em_patterns(&views, &patterns, &EmOptions::default()) {
            Ok(e) => (e.mean, e.cov),
            Err(e) => return skip(format!("not run: {e}")),
        },
    };
    let ordinal = load.item_kinds().contains(&ItemKind::Ordinal);
    let note = ordinal.then(|| "ordinal items enter by their response codes (normal-theory approximation)".to_string());
    Ok(missing::little_mcar_at(&views, &patterns, &mean, &cov)
        .map_err(stats("Little's MCAR test"))?
        .map(|t| McarRecord { stat: Some(t.stat), df: Some(t.df), p: Some(t.p), patterns: t.patterns, note }))
}

/// What `fiml` estimated: the matrices, the rows behind them, the record.
pub struct FimlEstimate {
    pub correlation: DMatrix<f64>,
    pub covariance: DMatrix<f64>,
    pub n: usize,
    pub record: MissingData,
}

/// `missing: fiml` on the table: EM for all-continuous items, else multiple imputation with
/// the correlations pooled by Rubin's rules. `columns` are the estimator's columns (ordinal
/// codes, continuous values; nothing masked).
pub fn fiml(
    load: &LoadOutput,
    table: &Table,
    columns: &[Column<'_>],
    fit: OrdinalFit,
) -> Result<FimlEstimate, StepError> {
    let kinds = load.item_kinds();
    let p = table.items.len();
    if kinds.iter().all(|k| *k == ItemKind::Continuous) {
        let values: Vec<Cow<'_, [f64]>> = table.columns.iter().map(DataColumn::values).collect();
        let views: Vec<&[f64]> = values.iter().map(AsRef::as_ref).collect();
        let patterns = Patterns::new(&views).map_err(stats("the missing-data patterns"))?;
        let est = missing::em_patterns(&views, &patterns, &EmOptions::default())
            .map_err(stats("EM for the mean and covariance"))?;
        let sd: Vec<f64> = (0..p).map(|k| est.cov[(k, k)].sqrt()).collect();
        let correlation = DMatrix::from_fn(p, p, |a, b| if a == b { 1.0 } else { est.cov[(a, b)] / (sd[a] * sd[b]) });
        let record = MissingData {
            method: "full-information maximum likelihood: the saturated mean and covariance by EM under values \
                     missing at random (Dempster, Laird & Rubin 1977), their sampling covariance from the observed \
                     information, robust (sandwich) where distribution-free (two-stage ML; Yuan & Bentler 2000; \
                     Savalei & Bentler 2009)"
                .into(),
            rows_used: est.n_used,
            rows_without_answers: est.rows_without_answers,
            patterns: patterns.len(),
            mean: Some(est.mean.iter().copied().collect()),
            iterations: Some(est.iterations),
            converged: Some(est.converged),
            imputations: None,
            max_missing_information: None,
            imputed: ImputedValues::default(),
        };
        return Ok(FimlEstimate { correlation, covariance: est.cov, n: est.n_used, record });
    }
    let options = ImputeOptions { imputations: IMPUTATIONS, burn_in: BURN_IN, thin: THIN, seed: SEED };
    let drawn = impute(columns, &options).map_err(stats("multiple imputation"))?;
    let fills: Vec<Vec<Vec<f64>>> = drawn
        .sets
        .iter()
        .map(|set| {
            set.iter()
                .zip(columns)
                .map(|(done, original)| missing_rows(original).map(|r| value_at(done, r)).collect())
                .collect()
        })
        .collect();
    let imputed = ImputedValues(fills);
    let pooled = pool(columns, &imputed, fit)?;
    let correlation = pooled.estimate().clone();
    let max_missing_information = (0..p)
        .flat_map(|a| (a + 1..p).map(move |b| (a, b)))
        .map(|e| pooled.missing_information(e).unwrap_or(0.0))
        .fold(0.0, f64::max);
    // Response-scale covariance: each item's variance averaged over the completed sets.
    let sets = completed_sets(columns, &imputed);
    let variance: Vec<f64> = (0..p)
        .map(|k| sets.iter().map(|set| sample_variance(&numbers(&set[k], load, k))).sum::<f64>() / sets.len() as f64)
        .collect();
    let cont: Vec<usize> = (0..p).filter(|&k| kinds[k] == ItemKind::Continuous).collect();
    let moments = (!cont.is_empty()).then(|| {
        let mut acc = DMatrix::zeros(cont.len(), cont.len());
        for set in &sets {
            let cols: Vec<Vec<f64>> = cont.iter().map(|&k| numbers(&set[k], load, k)).collect();
            for (a, x) in cols.iter().enumerate() {
                for (b, y) in cols.iter().enumerate() {
                    acc[(a, b)] += covariance_of(x, y);
                }
            }
        }
        acc / sets.len() as f64
    });
    let covariance = mixed::response_scale_covariance(&correlation, &cont, moments.as_ref(), &variance);
    let rows_without_answers = (0..table.rows()).filter(|&r| table.columns.iter().all(|c| c.is_missing(r))).count();
    let values: Vec<Cow<'_, [f64]>> = table.columns.iter().map(DataColumn::values).collect();
    let views: Vec<&[f64]> = values.iter().map(AsRef::as_ref).collect();
    let patterns = Patterns::new(&views).map_err(stats("the missing-data patterns"))?.len();
    let record = MissingData {
        method: format!(
            "multiple imputation under a latent-normal (Gaussian copula) model, {IMPUTATIONS} completed data sets \
             drawn by the rank-likelihood Gibbs sampler (Hoff 2007; burn-in {BURN_IN}, thinning {THIN}), \
             polychoric and polyserial correlations pooled by Rubin's rules (Rubin 1987) with each set's \
             sampling covariance from respondents' contributions"
        ),
        rows_used: table.rows() - rows_without_answers,
        rows_without_answers,
        patterns,
        mean: None,
        iterations: None,
        converged: None,
        imputations: Some(IMPUTATIONS),
        max_missing_information: Some(max_missing_information),
        imputed,
    };
    Ok(FimlEstimate { correlation, covariance, n: table.rows() - rows_without_answers, record })
}

fn covariance_of(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    let (mx, my) = (x.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum::<f64>() / (n - 1.0)
}

/// A completed column's values on the response scale (ordinal codes back to their levels).
fn numbers(col: &Column<'_>, load: &LoadOutput, k: usize) -> Vec<f64> {
    match col {
        Column::Continuous(v) => v.to_vec(),
        Column::Ordinal { codes, .. } => {
            let levels = load.summary.items[k].categories.as_deref().unwrap_or(&[]);
            codes.iter().map(|&c| levels.get(usize::from(c)).copied().unwrap_or(f64::NAN)).collect()
        }
    }
}

fn missing_rows<'a>(col: &'a Column<'_>) -> Box<dyn Iterator<Item = usize> + 'a> {
    match col {
        Column::Continuous(v) => Box::new(v.iter().enumerate().filter(|(_, x)| x.is_nan()).map(|(r, _)| r)),
        Column::Ordinal { codes, .. } => {
            Box::new(codes.iter().enumerate().filter(|(_, c)| **c == MISSING_CODE).map(|(r, _)| r))
        }
    }
}

fn value_at(col: &Column<'_>, r: usize) -> f64 {
    match col {
        Column::Continuous(v) => v[r],
        Column::Ordinal { codes, .. } => f64::from(codes[r]),
    }
}

/// The completed data sets: each column with its missing answers replaced by the stored fills.
pub fn completed_sets(columns: &[Column<'_>], imputed: &ImputedValues) -> Vec<Vec<Column<'static>>> {
    imputed
        .0
        .iter()
        .map(|set| {
            columns
                .iter()
                .zip(set)
                .map(|(col, fills)| {
                    let mut fill = fills.iter();
                    match col {
                        Column::Continuous(v) => Column::Continuous(
                            v.iter().map(|&x| if x.is_nan() { *fill.next().unwrap_or(&f64::NAN) } else { x }).collect(),
                        ),
                        Column::Ordinal { codes, levels } => {
                            Column::Ordinal {
                                codes: codes
                                    .iter()
                                    .map(|&c| {
                                        if c == MISSING_CODE {
                                            fill.next().map_or(MISSING_CODE, |&v| v as u8)
                                        } else {
                                            c
                                        }
                                    })
                                    .collect(),
                                levels: *levels,
                            }
                        }
                    }
                })
                .collect()
        })
        .collect()
}

/// Rubin's rules over the completed sets: each set's mixed correlations and their
/// distribution-free sampling covariance.
pub fn pool(columns: &[Column<'_>], imputed: &ImputedValues, fit: OrdinalFit) -> Result<Pooled, StepError> {
    let mut estimates = Vec::new();
    let mut within: Vec<Box<dyn construe_stats::acov::SamplingCovariance>> = Vec::new();
    for set in completed_sets(columns, imputed) {
        let mc = mixed_correlation(&set, fit).map_err(stats("the correlations of a completed data set"))?;
        let contributions = construe_stats::acov::Contributions::correlations(&set, &mc)
            .map_err(stats("the sampling covariance of a completed data set"))?;
        estimates.push(mc.matrix.clone());
        within.push(Box::new(contributions));
    }
    Pooled::new(estimates, within).map_err(stats("pooling the imputations"))
}

/// The two-stage sampling covariance at the EM estimates the covariance step stored
/// (continuous items under `fiml`: `record.mean` and the step's covariance `cov`).
pub fn two_stage(
    table: &Table,
    record: &MissingData,
    cov: &DMatrix<f64>,
    robust: bool,
    correlations: bool,
) -> Result<TwoStage, StepError> {
    let values: Vec<Cow<'_, [f64]>> = table.columns.iter().map(DataColumn::values).collect();
    let views: Vec<&[f64]> = values.iter().map(AsRef::as_ref).collect();
    let patterns = Patterns::new(&views).map_err(stats("the missing-data patterns"))?;
    let mean = record.mean.as_ref().ok_or_else(|| StepError::Stats {
        context: "the two-stage sampling covariance".into(),
        source: StatsError::InvalidInput("the covariance step stored no EM means".into()),
    })?;
    let two = TwoStage::at(&views, &patterns, &DVector::from_column_slice(mean), cov, robust)
        .map_err(stats("the two-stage sampling covariance"))?;
    Ok(if correlations { two.correlations() } else { two })
}
