//! Building and fitting the latent-variable model of named constructs: what `measure`,
//! `structure` and `sensitivity`'s refits share. Central function: `fit_constructs`, which
//! resolves item names to matrix rows, fixes single indicators' error variances from their
//! reliability, and calls `construe_stats::sem` with the estimator `plan` chose (ML with
//! information or sandwich SEs, or DWLS on the correlations). No numerics of its own beyond
//! that assembly; the words of the estimation statement (results.json, report) live here.

use std::sync::{Arc, Mutex};

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};

use super::StepError;
use super::covariance::{CovarianceOutput, PairMethod};
use super::impurities::{DeclaredImpurity, apply, start_from};
use super::load::{ItemKind, LoadOutput};
use super::sampling::{Moments, Theory, sampling_covariance};
use crate::spec::types::{Estimation, EstimationMethod, Identification, Impurities, OrdinalEstimation, StandardErrors};
use construe_stats::StatsError;
use construe_stats::acov::{Dense, Element, SamplingCovariance};
use construe_stats::sem::{
    self, Correction, FitOptions, SemFit, SemModel, StatisticCorrection, Subset, fit_dwls, ml_sandwich,
    robust::FULL_BLOCK_MAX,
};

pub fn identification(i: Identification) -> sem::Identification {
    match i {
        Identification::UnitVariance => sem::Identification::UnitLatentVariance,
        Identification::FirstLoading => sem::Identification::UnitFirstLoading,
    }
}

/// The estimator actually used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    /// Maximum likelihood on the covariance matrix (Jöreskog 1969).
    Ml,
    /// Diagonally weighted least squares on the correlation matrix (Muthén, du Toit & Spisic 1997).
    Dwls,
}

/// Where the standard errors came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Errors {
    /// The inverse expected information (normal theory).
    Information,
    /// Sandwich: robust to the items' distribution, from the moments' sampling covariance.
    Sandwich,
}

/// `auto` resolved against the data: the estimator, the SEs, and why.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Plan {
    pub method: Method,
    pub errors: Errors,
    pub reason: String,
}

impl Plan {
    /// The plan a fitted measurement model used (`structure` follows `measure`).
    pub fn of(record: &EstimationRecord) -> Plan {
        Plan { method: record.method, errors: record.standard_errors, reason: record.reason.clone() }
    }
}

/// The moments' sampling covariance, built once and shared by the refits of one step run over
/// the same `load` and `covariance` artifacts (sensitivity refits measure and structure for
/// every reliability; rebuilding the contributions each time dominated its time).
#[derive(Default)]
pub struct SharedAcov(Mutex<Vec<Held>>);

/// One sampling covariance held for a plan, over the moments of the items `index` (rows of
/// the covariance step's matrix).
struct Held {
    method: Method,
    errors: Errors,
    index: Vec<usize>,
    acov: Arc<dyn SamplingCovariance>,
}

impl std::fmt::Debug for SharedAcov {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("SharedAcov")
    }
}

/// Resolves `analyses.measure.estimation` against the item types of the model and whether
/// respondent rows exist. `auto`: any ordinal item -> DWLS with sandwich SEs (the only
/// estimator here whose SEs and statistic hold on polychoric correlations); all items
/// continuous with rows -> ML with sandwich SEs and the scaled statistic (valid whatever the
/// items' distribution); a summary matrix -> ML with normal-theory SEs (a matrix carries no
/// fourth moments, so normal theory is the only estimate of the moments' sampling covariance,
/// and under it the sandwich equals the information).
/// `data_ordinal`: some item of the data (in the model or not) is ordinal, so the covariances'
/// distribution-free sampling covariance (`steps::sampling`) does not exist.
pub fn plan(spec: Estimation, kinds: &[ItemKind], rows: bool, data_ordinal: bool) -> Result<Plan, StepError> {
    let ordinal = kinds.contains(&ItemKind::Ordinal);
    let unavailable = |what: &'static str, hint: &'static str| StepError::EstimationUnavailable { what, hint };
    let method = match (spec.method, ordinal, rows) {
        (EstimationMethod::Dwls, _, false) => {
            return Err(unavailable("DWLS", "DWLS needs respondent rows; use `method: ml` on a summary matrix"));
        }
        (EstimationMethod::Dwls, ..) | (EstimationMethod::Auto, true, true) => Method::Dwls,
        _ => Method::Ml,
    };
    let (errors, reason) = match (method, spec.standard_errors, ordinal, rows) {
        (Method::Dwls, StandardErrors::Information, ..) => {
            return Err(unavailable("information-matrix standard errors for DWLS", "use `standard_errors: sandwich`"));
        }
        (Method::Dwls, ..) if spec.method == EstimationMethod::Auto => {
            (Errors::Sandwich, "ordinal items: DWLS on their polychoric and polyserial correlations")
        }
        (Method::Dwls, ..) => (Errors::Sandwich, "DWLS as the spec asks"),
        (Method::Ml, StandardErrors::Sandwich, true, _) => {
            return Err(unavailable(
                "sandwich standard errors for ML with ordinal items",
                "use `method: dwls` (or `auto`), or `standard_errors: information`",
            ));
        }
        (Method::Ml, StandardErrors::Sandwich, false, false) => {
            return Err(unavailable("sandwich standard errors", "a summary matrix has no respondent rows"));
        }
        (Method::Ml, StandardErrors::Information, ..) => {
            (Errors::Information, "normal-theory standard errors as the spec asks")
        }
        (Method::Ml, StandardErrors::Sandwich, false, true) if data_ordinal => {
            return Err(unavailable(
                "sandwich standard errors for ML when the data hold ordinal items",
                "use `method: dwls`, or `standard_errors: information`",
            ));
        }
        (Method::Ml, _, false, true) if data_ordinal => (
            Errors::Information,
            "ML on continuous items among ordinal ones, whose covariances have no distribution-free sampling covariance",
        ),
        (Method::Ml, _, false, true) => {
            (Errors::Sandwich, "continuous items: ML with standard errors and statistic robust to non-normality")
        }
        (Method::Ml, _, true, _) => (
            Errors::Information,
            "ML on the response-scale covariances of ordinal items, which have no distribution-free sampling covariance",
        ),
        (Method::Ml, _, false, false) => (
            Errors::Information,
            "a summary matrix carries no fourth moments, so the normal-theory information is the only estimate of the sampling variability",
        ),
    };
    Ok(Plan { method, errors, reason: reason.to_string() })
}

/// What the models of one step are fitted to: the covariance step's matrices, the plan, and
/// (for DWLS and sandwich SEs) the moments' sampling covariance over all its items.
pub struct ModelInput {
    /// The covariance step's items, in its order (the rows of both matrices and of `acov`).
    pub items: Vec<String>,
    pub covariance: DMatrix<f64>,
    pub correlation: DMatrix<f64>,
    /// The smallest pairwise n.
    pub n: usize,
    pub plan: Plan,
    pub acov: Option<Arc<dyn SamplingCovariance>>,
}

impl ModelInput {
    /// Plans the estimation for `items` (the declared constructs' items) and builds the
    /// sampling covariance the plan needs (`steps::sampling`).
    pub fn new(
        load: &LoadOutput,
        cov: &CovarianceOutput,
        spec: Estimation,
        items: &[String],
        shared: Option<&SharedAcov>,
    ) -> Result<ModelInput, StepError> {
        let kinds: Vec<ItemKind> = items.iter().filter_map(|i| cov.kind.get(i).copied()).collect();
        let data_ordinal = cov.kind.values().any(|k| *k == ItemKind::Ordinal);
        let mut plan = plan(spec, &kinds, load.table.is_some(), data_ordinal)?;
        if plan.method == Method::Dwls
            && spec.method == EstimationMethod::Auto
            && cov.ordinal == OrdinalEstimation::Full
        {
            // The joint ordinal estimator leaves no respondent contributions (`steps::sampling`).
            plan = Plan {
                method: Method::Ml,
                errors: Errors::Information,
                reason: "ordinal correlations estimated jointly with their thresholds (`ordinal: full`) have no \
                         sampling covariance here, so normal-theory ML on the response-scale covariances"
                    .into(),
            };
        }
        Self::with_plan(load, cov, plan, items, shared)
    }

    /// The input for a given plan (`structure` takes `measure`'s) and the models' `items`. The
    /// sampling covariance of those items' moments is formed once as a dense block (every fit
    /// needs that block for its statistic's correction anyway, and a contributions-backed
    /// covariance recomputes its scores on every request), except for DWLS above
    /// `sem::robust::FULL_BLOCK_MAX` correlations, where the fit never asks for the block;
    /// from `shared` when it already holds one covering the items.
    pub fn with_plan(
        load: &LoadOutput,
        cov: &CovarianceOutput,
        plan: Plan,
        items: &[String],
        shared: Option<&SharedAcov>,
    ) -> Result<ModelInput, StepError> {
        let moments = match (plan.method, plan.errors) {
            (Method::Dwls, _) => Some(Moments::Correlations),
            (Method::Ml, Errors::Sandwich) => Some(Moments::Covariances),
            (Method::Ml, Errors::Information) => None,
        };
        let mut index: Vec<usize> = items.iter().filter_map(|i| cov.items.iter().position(|a| a == i)).collect();
        index.sort_unstable();
        index.dedup();
        let build = |m: Moments| -> Result<Arc<dyn SamplingCovariance>, StepError> {
            let v = sampling_covariance(load, cov, m, Theory::DistributionFree)?;
            let correlation = m == Moments::Correlations;
            if correlation && index.len() * index.len().saturating_sub(1) / 2 > FULL_BLOCK_MAX {
                // Too many correlations for the full block: the fit asks for V's diagonal
                // and sandwiches only, computed from the contributions on demand.
                return Ok(Arc::from(v));
            }
            let elements: Vec<Element> = index
                .iter()
                .enumerate()
                .flat_map(|(a, &j)| index[a + usize::from(correlation)..].iter().map(move |&l| (j, l)))
                .collect();
            let stats = |source| StepError::Stats { context: "the moments' sampling covariance".into(), source };
            let block = v.block(&elements).map_err(stats)?;
            Ok(Arc::new(Dense::new(v.n_items(), v.n_obs(), correlation, &elements, block).map_err(stats)?))
        };
        let acov = match (moments, shared) {
            (None, _) => None,
            (Some(m), None) => Some(build(m)?),
            (Some(m), Some(shared)) => {
                let mut held = shared.0.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
                let covers = |h: &Held| {
                    (h.method, h.errors) == (plan.method, plan.errors) && index.iter().all(|i| h.index.contains(i))
                };
                match held.iter().find(|h| covers(h)) {
                    Some(h) => Some(h.acov.clone()),
                    None => {
                        let acov = build(m)?;
                        held.push(Held {
                            method: plan.method,
                            errors: plan.errors,
                            index: index.clone(),
                            acov: acov.clone(),
                        });
                        Some(acov)
                    }
                }
            }
        };
        Ok(ModelInput {
            items: cov.items.clone(),
            covariance: cov.covariance_matrix(),
            correlation: cov.correlation_matrix(),
            n: cov.min_n(),
            plan,
            acov,
        })
    }
}

/// How one model was estimated: for results.json (`estimation`) and the report's sentence.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
pub struct EstimationRecord {
    /// The estimator.
    pub method: Method,
    /// Where the standard errors came from.
    pub standard_errors: Errors,
    /// How the test statistic was corrected.
    #[schemars(with = "super::stats_schema::StatisticCorrectionSchema")]
    pub statistic: StatisticCorrection,
    /// The sample size the fit used (the smallest pairwise n).
    pub n: usize,
    /// Why this estimator (how `auto` was resolved, or the spec's choice).
    pub reason: String,
    /// The naive statistic and its correction (absent for normal-theory ML).
    #[schemars(with = "Option<super::stats_schema::CorrectionSchema>")]
    pub correction: Option<Correction>,
    /// One sentence a reviewer can quote.
    pub statement: String,
}

/// A number with thousands separators (1,184).
fn grouped(n: usize) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

impl EstimationRecord {
    /// The record of a fit of `what` ("measurement model", "structural model").
    /// `methods`: the estimator of each item pair of the covariance step.
    pub fn new(what: &str, plan: &Plan, methods: &[PairMethod], n: usize, correction: Option<Correction>) -> Self {
        let statistic = correction.as_ref().map_or(StatisticCorrection::None, |c| c.kind);
        let moments = if plan.method == Method::Dwls {
            let methods: std::collections::BTreeSet<&str> = methods
                .iter()
                .map(|m| match m {
                    PairMethod::Polychoric => "polychoric",
                    PairMethod::Polyserial => "polyserial",
                    _ => "Pearson",
                })
                .collect();
            let list: Vec<&str> =
                ["polychoric", "polyserial", "Pearson"].into_iter().filter(|m| methods.contains(m)).collect();
            let joined = match list.as_slice() {
                [] => "the".to_string(),
                [one] => (*one).to_string(),
                [init @ .., last] => format!("{} and {last}", init.join(", ")),
            };
            format!("{joined} correlations")
        } else {
            "the item covariances".to_string()
        };
        let (estimator, errors) = match (plan.method, plan.errors) {
            (Method::Dwls, _) => ("diagonally weighted least squares", "robust (sandwich)"),
            (Method::Ml, Errors::Sandwich) => ("maximum likelihood", "robust (sandwich, distribution-free)"),
            (Method::Ml, Errors::Information) => {
                ("maximum likelihood", "from the expected information (normal theory)")
            }
        };
        let test = match statistic {
            StatisticCorrection::ScaledShifted => {
                "chi-square mean-and-variance adjusted (scaled and shifted, Asparouhov & Muthén 2010); RMSEA, CFI and TLI from the adjusted statistic (Brosseau-Liard, Savalei & Li 2012; Brosseau-Liard & Savalei 2014; Savalei 2018)"
            }
            StatisticCorrection::Scaled => {
                "chi-square scaled (Satorra & Bentler 1994); RMSEA, CFI and TLI from the scaled statistic (Brosseau-Liard, Savalei & Li 2012; Brosseau-Liard & Savalei 2014)"
            }
            StatisticCorrection::None => "chi-square the normal-theory likelihood ratio; RMSEA, CFI and TLI from it",
        };
        let statement = format!(
            "{} estimated by {estimator} on {moments} (n = {} respondents); standard errors {errors}; {test}.",
            capitalised(what),
            grouped(n)
        );
        EstimationRecord {
            method: plan.method,
            standard_errors: plan.errors,
            statistic,
            n,
            reason: plan.reason.clone(),
            correction,
            statement,
        }
    }
}

/// The estimator of each item pair of the covariance step (for the statement's words).
pub fn pair_methods(cov: &CovarianceOutput) -> Vec<PairMethod> {
    cov.method.values().copied().collect()
}

fn capitalised(s: &str) -> String {
    let mut c = s.chars();
    c.next().map(|f| f.to_uppercase().chain(c).collect()).unwrap_or_default()
}

/// A fitted model of named constructs, with what the diagnosis (`Fitted::diagnose`) needs.
pub struct Fitted {
    /// The fit (robust SEs and corrected indices where the plan asks).
    pub fit: SemFit,
    /// The observed items in model order.
    pub observed: Vec<String>,
    /// The statistic's correction.
    pub correction: Option<Correction>,
    /// The model fitted: the constructs' latents first, then the method factors.
    pub model: SemModel,
    /// The matrix fitted (covariances for ML, correlations for DWLS), in model order.
    pub s: DMatrix<f64>,
    /// Rows of the covariance step's matrix, in model order.
    pub index: Vec<usize>,
    /// The declared impurities and what became of each.
    pub declared: Vec<DeclaredImpurity>,
}

/// Fits the model of `constructs` (with latent `paths`) and the declared `impurities` by the
/// input's plan; a failing fit is a `StepError::Stats` with `context` ("the measurement
/// model"). See `impurities::apply` for how the declarations enter the model.
/// `paths` empty: the measurement model (`SemModel::cfa`, correlated constructs); else the
/// paths with free covariances among exogenous constructs (`SemModel::sem`).
pub fn fit_constructs(
    constructs: &[(String, Vec<String>, Option<f64>)],
    input: &ModelInput,
    ident: Identification,
    paths: &[(usize, usize)],
    impurities: &Impurities,
    context: &'static str,
) -> Result<Fitted, StepError> {
    let latents = if paths.is_empty() { Latents::Correlated } else { Latents::FreeExogenous(paths) };
    fit_latents(constructs, input, ident, latents, impurities, context)
}

/// How the constructs relate in a fitted model.
#[derive(Debug, Clone, Copy)]
pub enum Latents<'a> {
    /// All covariances free: the measurement model.
    Correlated,
    /// The paths, covariances free among constructs without parents (`SemModel::sem`).
    FreeExogenous(&'a [(usize, usize)]),
    /// Exactly the DAG of the paths: every other covariance zero (`SemModel::dag`), so each
    /// non-adjacent pair is a restriction the fit tests.
    Dag(&'a [(usize, usize)]),
}

/// `fit_constructs` for any `Latents`.
pub fn fit_latents(
    constructs: &[(String, Vec<String>, Option<f64>)],
    input: &ModelInput,
    ident: Identification,
    latents: Latents<'_>,
    impurities: &Impurities,
    context: &'static str,
) -> Result<Fitted, StepError> {
    let all_items = &input.items;
    let observed: Vec<String> = constructs.iter().flat_map(|(_, items, _)| items.iter().cloned()).collect();
    let index: Vec<usize> = observed
        .iter()
        .map(|i| all_items.iter().position(|a| a == i).ok_or_else(|| StepError::ItemNotInMatrix { item: i.clone() }))
        .collect::<Result<_, _>>()?;
    let stats = |source: StatsError| StepError::Stats { context: context.into(), source };
    let full = match input.plan.method {
        Method::Dwls => &input.correlation,
        Method::Ml => &input.covariance,
    };
    let s = DMatrix::from_fn(index.len(), index.len(), |r, c| full[(index[r], index[c])]);
    let mut offset = 0;
    let groups: Vec<Vec<usize>> = constructs
        .iter()
        .map(|(_, items, _)| {
            let g = (offset..offset + items.len()).collect();
            offset += items.len();
            g
        })
        .collect();
    let names: Vec<String> = constructs.iter().map(|(n, _, _)| n.clone()).collect();
    let mut model = match latents {
        Latents::Correlated => SemModel::cfa(&groups, index.len(), identification(ident)),
        Latents::FreeExogenous(paths) => SemModel::sem(&groups, index.len(), identification(ident), paths),
        Latents::Dag(paths) => SemModel::dag(&groups, index.len(), identification(ident), paths),
    }
    .map_err(stats)?;
    for ((name, _, reliability), g) in constructs.iter().zip(&groups) {
        match (reliability, g.as_slice()) {
            (Some(r), [single]) => {
                model.fix_error_variance(*single, (1.0 - r) * s[(*single, *single)]);
            }
            (None, [_]) => return Err(StepError::NoReliability { construct: name.clone() }),
            _ => {}
        }
    }
    let pure = model.clone().with_names(observed.clone(), names.clone()).map_err(stats)?;
    let (declared, methods) = apply(&mut model, impurities, constructs, &observed);
    let latent_names: Vec<String> = names.iter().cloned().chain(methods).collect();
    let model = model.with_names(observed.clone(), latent_names).map_err(stats)?;
    let n = input.n;
    // With declarations, start from the fit of the model without them (see `start_from`).
    let options = if impurities.is_empty() {
        FitOptions::default()
    } else {
        FitOptions { start: start_from(&pure, &model, &s, n), ..FitOptions::default() }
    };
    let acov = match &input.acov {
        Some(v) => Some(Subset::new(v.as_ref(), index.clone()).map_err(stats)?),
        None => None,
    };
    let (fit, correction) = match (input.plan.method, input.plan.errors, &acov) {
        (Method::Dwls, _, Some(v)) => {
            let robust = fit_dwls(&model, &s, v, &options).map_err(stats)?;
            (robust.fit, Some(robust.correction))
        }
        (Method::Ml, Errors::Sandwich, Some(v)) => {
            let ml = model.fit(&s, n, &options).map_err(stats)?;
            let robust = ml_sandwich(&ml, &s, v).map_err(stats)?;
            (robust.fit, Some(robust.correction))
        }
        _ => (model.fit(&s, n, &options).map_err(stats)?, None),
    };
    let mut declared = declared;
    super::impurities::fill(&mut declared, &fit, &observed, model.latent_names());
    Ok(Fitted { fit, observed, correction, model, s, index, declared })
}

#[cfg(test)]
mod tests {
    use super::*;

    // The two model problems a step can meet before any numerics are typed and name the item
    // or construct.
    #[test]
    fn model_problems_name_the_item_or_construct() {
        let input = ModelInput {
            items: ["a", "b", "c"].map(String::from).to_vec(),
            covariance: DMatrix::<f64>::identity(3, 3),
            correlation: DMatrix::<f64>::identity(3, 3),
            n: 100,
            plan: plan(Estimation::default(), &[ItemKind::Continuous; 3], false, false).unwrap(),
            acov: None,
        };
        let missing = vec![("f".to_string(), vec!["a".to_string(), "b".to_string(), "q".to_string()], None)];
        let none = Impurities::default();
        let e = fit_constructs(&missing, &input, Identification::UnitVariance, &[], &none, "the model").err().unwrap();
        assert!(matches!(&e, StepError::ItemNotInMatrix { item } if item == "q"), "{e:?}");
        let single = vec![("g".to_string(), vec!["c".to_string()], None)];
        let e = fit_constructs(&single, &input, Identification::UnitVariance, &[], &none, "the model").err().unwrap();
        assert!(matches!(&e, StepError::NoReliability { construct } if construct == "g"), "{e:?}");
        assert_eq!(e.to_string(), "construct `g` has one item and no reliability");
    }

    // How `auto` resolves, and the combinations that have no meaning.
    #[test]
    fn auto_picks_the_estimator_from_the_item_types() {
        use ItemKind::{Continuous, Ordinal};
        let auto = Estimation::default();
        let p = plan(auto, &[Continuous, Ordinal], true, true).unwrap();
        assert_eq!((p.method, p.errors), (Method::Dwls, Errors::Sandwich));
        let p = plan(auto, &[Continuous, Continuous], true, false).unwrap();
        assert_eq!((p.method, p.errors), (Method::Ml, Errors::Sandwich));
        let p = plan(auto, &[Continuous, Continuous], false, false).unwrap();
        assert_eq!((p.method, p.errors), (Method::Ml, Errors::Information));
        let ml = Estimation { method: EstimationMethod::Ml, standard_errors: StandardErrors::Auto };
        assert_eq!(plan(ml, &[Ordinal], true, true).unwrap().errors, Errors::Information);
        let ml_sandwich = Estimation { standard_errors: StandardErrors::Sandwich, ..ml };
        assert!(matches!(plan(ml_sandwich, &[Ordinal], true, true), Err(StepError::EstimationUnavailable { .. })));
        let dwls = Estimation { method: EstimationMethod::Dwls, standard_errors: StandardErrors::Auto };
        assert_eq!(plan(dwls, &[Continuous], true, false).unwrap().method, Method::Dwls);
        assert!(plan(dwls, &[Continuous], false, false).is_err());
        // Continuous model items among ordinal data items: no distribution-free covariances.
        assert_eq!(plan(auto, &[Continuous, Continuous], true, true).unwrap().errors, Errors::Information);
        assert!(plan(ml_sandwich, &[Continuous], true, true).is_err());
    }

    // The sentence a reviewer quotes names the estimator, the moments, n, the SEs and the
    // statistic's correction with its source.
    #[test]
    fn statements_name_estimator_moments_n_and_correction() {
        use ItemKind::{Continuous, Ordinal};
        let dwls = plan(Estimation::default(), &[Ordinal, Continuous], true, true).unwrap();
        let correction = Correction {
            kind: StatisticCorrection::ScaledShifted,
            naive: 10.0,
            trace: 8.0,
            trace_squared: Some(9.0),
            scale: 1.0,
            shift: 0.0,
            baseline_naive: 100.0,
            baseline_trace: 10.0,
        };
        let r = EstimationRecord::new(
            "measurement model",
            &dwls,
            &[PairMethod::Polychoric, PairMethod::Polyserial],
            1184,
            Some(correction),
        );
        assert_eq!(
            r.statement,
            "Measurement model estimated by diagonally weighted least squares on polychoric and polyserial \
             correlations (n = 1,184 respondents); standard errors robust (sandwich); chi-square \
             mean-and-variance adjusted (scaled and shifted, Asparouhov & Muthén 2010); RMSEA, CFI and TLI \
             from the adjusted statistic (Brosseau-Liard, Savalei & Li 2012; Brosseau-Liard & Savalei 2014; \
             Savalei 2018)."
        );
        let ml = plan(Estimation::default(), &[Continuous], false, false).unwrap();
        let r = EstimationRecord::new("structural model", &ml, &[PairMethod::Given], 305, None);
        assert_eq!(
            r.statement,
            "Structural model estimated by maximum likelihood on the item covariances (n = 305 respondents); \
             standard errors from the expected information (normal theory); chi-square the normal-theory \
             likelihood ratio; RMSEA, CFI and TLI from it."
        );
        assert_eq!(r.statistic, StatisticCorrection::None);
    }

    #[test]
    fn thousands_are_grouped() {
        assert_eq!(grouped(1184), "1,184");
        assert_eq!(grouped(999), "999");
        assert_eq!(grouped(1_000_000), "1,000,000");
    }
}
