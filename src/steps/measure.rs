//! `measure`: the maximum-likelihood CFA of the (purified) constructs, with single indicators'
//! error variances fixed from their stated reliability, fit indices beside the unpurified
//! model's, and reliability per construct. The estimator follows `estimation` (by default
//! from the item types: DWLS with sandwich SEs for ordinal items, ML with sandwich SEs for
//! continuous rows, normal-theory ML for a summary matrix; see `constructs::plan`).
//! Central type: `MeasureOutput` (also what the structure search reads: the latent covariance
//! and its asymptotic covariance, robust where the SEs are).

use indexmap::IndexMap;
use nalgebra::DMatrix;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use std::sync::Arc;

use super::constructs::{EstimationRecord, ModelInput, SharedAcov, fit_constructs, pair_methods};
use super::impurities::{DeclaredImpurity, Diagnosis, ResidualRecord, Suggestion};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::spec::SpecFile;
use crate::spec::types::{Identification, Impurities, MeasureSpec};
use construe_stats::reliability::{cronbach_alpha, mcdonald_omega};
use construe_stats::sem::{FitIndices, LatentMoments, Matrix, ParameterKind, SemFit};

/// Bump when the fit changes for the same covariances, purification and parameters.
/// v3: estimation chosen from the item types (DWLS / sandwich SEs, corrected statistics);
/// reads `load` for the moments' sampling covariance; `estimation` record added.
/// v4: declared impurities modelled (`declared`); diagnosis (`suggestions`, `residuals`).
/// v5: `warnings` (constructs not distinct: latent correlation above 0.9 or HTMT above 0.90;
/// correlations beyond ±1).
pub const VERSION: u32 = 5;

/// A parameter estimate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Estimate {
    /// The estimate.
    pub est: f64,
    /// Its standard error (information matrix); `null` where not defined.
    pub se: Option<f64>,
    /// The completely standardized estimate.
    pub std: Option<f64>,
}

/// An item's error variance.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ErrorVariance {
    /// The estimate.
    pub est: f64,
    /// Its standard error; `null` when fixed.
    pub se: Option<f64>,
    /// Fixed from a stated reliability rather than estimated.
    pub fixed: bool,
}

/// A square matrix with its row and column names.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct NamedMatrix {
    /// Row and column names.
    pub names: Vec<String>,
    /// The matrix, row by row.
    pub matrix: Vec<Vec<f64>>,
}

/// A construct's reliability.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Reliability {
    /// McDonald's omega from the fitted loadings; `null` for a single indicator (or when it cannot
    /// be computed). When declared impurities touch the construct's items, its denominator is
    /// the model-implied variance of their sum.
    pub omega: Option<f64>,
    /// Cronbach's alpha of the kept items; `null` for a single indicator (or when it cannot be
    /// computed).
    pub alpha: Option<f64>,
}

/// An improper estimate (Heywood case).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct HeywoodRecord {
    /// What is improper (for example a negative variance).
    pub kind: String,
    /// The parameter, in words.
    pub parameter: String,
    /// Its value.
    pub value: f64,
}

/// The latent covariance with the delta-method covariance of its lower-triangle elements,
/// for the structure search's Wald tests.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct LatentCovariance {
    /// The constructs.
    pub names: Vec<String>,
    /// Their covariance matrix.
    pub matrix: Vec<Vec<f64>>,
    /// (i, j), i >= j, column-major lower triangle: the order of `acov`.
    pub pairs: Vec<(usize, usize)>,
    /// Delta-method covariance of the lower-triangle elements, in the order of `pairs`.
    pub acov: Vec<Vec<f64>>,
}

/// The measurement model (confirmatory factor analysis, maximum likelihood).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct MeasureOutput {
    /// Whether the fit converged.
    pub converged: bool,
    /// Fisher scoring iterations.
    pub iterations: usize,
    /// How the latent scales were set.
    pub identification: Identification,
    /// The sample size of the fit.
    pub n: usize,
    /// Construct -> the items it was fitted with (after purification).
    pub constructs: IndexMap<String, Vec<String>>,
    /// Global fit of the measurement model.
    #[schemars(with = "super::stats_schema::FitIndicesSchema")]
    pub fit: FitIndices,
    /// Construct -> item -> loading.
    pub loadings: IndexMap<String, IndexMap<String, Estimate>>,
    /// Item -> error variance.
    pub error_variances: IndexMap<String, ErrorVariance>,
    /// Correlations among the constructs.
    pub latent_correlation: NamedMatrix,
    /// Covariances among the constructs, with their sampling covariance.
    pub latent_covariance: LatentCovariance,
    /// Construct -> reliability.
    pub reliability: IndexMap<String, Reliability>,
    /// Improper estimates, if any.
    pub heywood: Vec<HeywoodRecord>,
    /// How the model was estimated, with the one-sentence statement for the report.
    pub estimation: EstimationRecord,
    /// The declared (unpurified) model's fit, when purification dropped items.
    pub unpurified: Option<UnpurifiedFit>,
    /// The impurities the spec declares (`impurities:`), with their estimates and SEs, or why
    /// one is not modelled (an item dropped by purification takes its declarations with it).
    pub declared: Vec<DeclaredImpurity>,
    /// The largest modification indices of the error covariances and cross-loadings the model
    /// fixes at zero (at most 10, largest first): suggestions to consider, exploratory.
    pub suggestions: Vec<Suggestion>,
    /// The largest residual correlations of the model (at most 10, largest in absolute value first).
    pub residuals: Vec<ResidualRecord>,
    /// Implausible estimates: latent correlations beyond ±1, constructs that may not be distinct
    /// (correlation above 0.9, or heterotrait-monotrait ratio above 0.90).
    pub warnings: Vec<super::structure_checks::StructureWarning>,
}

/// The fit of the declared model before purification.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct UnpurifiedFit {
    /// Whether the fit converged.
    pub converged: bool,
    /// Global fit with every declared item.
    #[schemars(with = "super::stats_schema::FitIndicesSchema")]
    pub fit: FitIndices,
}

/// A construct as the measurement model sees it.
#[derive(Debug, Clone, Serialize)]
struct ConstructModel {
    name: String,
    items: Vec<String>,
    reliability: Option<f64>,
}

#[derive(Clone)]
pub struct MeasureStep {
    params: MeasureSpec,
    declared: Vec<ConstructModel>,
    purified: bool,
    /// The moments' sampling covariance shared by sensitivity's refits (never in the key).
    shared: Option<Arc<SharedAcov>>,
    impurities: Impurities,
    /// Whether to diagnose the model (off for sensitivity's refits, which read only the
    /// latent covariance; never in the key).
    diagnose: bool,
    /// An item left out of its construct (sensitivity's leave-one-out refits).
    left_out: Option<String>,
}

impl MeasureStep {
    pub fn from_spec(file: &SpecFile, params: &MeasureSpec) -> MeasureStep {
        let declared = file
            .spec
            .constructs
            .iter()
            .map(|(n, c)| ConstructModel { name: n.clone(), items: c.items.clone(), reliability: c.reliability })
            .collect();
        MeasureStep {
            params: params.clone(),
            declared,
            purified: file.spec.analyses.purify.is_some(),
            shared: None,
            impurities: file.spec.impurities.clone(),
            diagnose: true,
            left_out: None,
        }
    }
}

impl MeasureStep {
    /// The same step with `construct`'s single-indicator reliability replaced (sensitivity).
    pub fn with_reliability(&self, construct: &str, reliability: f64) -> MeasureStep {
        let mut step = self.clone();
        for c in step.declared.iter_mut().filter(|c| c.name == construct) {
            c.reliability = Some(reliability);
        }
        step
    }

    /// The same step with `item` left out of its construct (sensitivity's leave-one-out refits).
    pub fn without_item(&self, item: &str) -> MeasureStep {
        MeasureStep { left_out: Some(item.to_string()), ..self.clone() }
    }

    /// The same step drawing the moments' sampling covariance from `shared` (refits over the
    /// same `load` and `covariance`).
    pub fn sharing(&self, shared: Arc<SharedAcov>) -> MeasureStep {
        MeasureStep { shared: Some(shared), diagnose: false, ..self.clone() }
    }
}

fn rows(m: &DMatrix<f64>) -> Vec<Vec<f64>> {
    (0..m.nrows()).map(|r| (0..m.ncols()).map(|c| m[(r, c)]).collect()).collect()
}

impl MeasureStep {
    fn constructs(&self, kept: Option<IndexMap<String, Vec<String>>>) -> Vec<(String, Vec<String>, Option<f64>)> {
        self.declared
            .iter()
            .map(|c| {
                let mut items = kept.as_ref().and_then(|k| k.get(&c.name).cloned()).unwrap_or_else(|| c.items.clone());
                items.retain(|i| Some(i) != self.left_out.as_ref());
                (c.name.clone(), items, c.reliability)
            })
            .collect()
    }
}

impl Step for MeasureStep {
    fn kind(&self) -> StepKind {
        StepKind::Measure
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        let mut params = json!({"identification": self.params.identification, "estimation": self.params.estimation, "constructs": self.declared, "impurities": self.impurities});
        if let Some(item) = &self.left_out {
            params["left_out"] = json!(item);
        }
        params
    }

    fn inputs(&self) -> Vec<StepKind> {
        if self.purified {
            vec![StepKind::Load, StepKind::Covariance, StepKind::Purify]
        } else {
            vec![StepKind::Load, StepKind::Covariance]
        }
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let cov = inputs.covariance()?;
        let kept = if self.purified { Some(inputs.purify()?.kept()) } else { None };
        let constructs = self.constructs(kept);
        // One plan for the purified and the declared model: from the declared items.
        let declared_items: Vec<String> = self.declared.iter().flat_map(|c| c.items.iter().cloned()).collect();
        let input =
            ModelInput::new(inputs.load()?, cov, self.params.estimation, &declared_items, self.shared.as_deref())?;
        let n = input.n;
        let ident = self.params.identification;
        let fitted = fit_constructs(&constructs, &input, ident, &[], &self.impurities, "the measurement model")?;
        let unpurified = if self.purified && constructs.iter().zip(&self.declared).any(|(c, d)| c.1 != d.items) {
            let declared = self.constructs(None);
            fit_constructs(&declared, &input, ident, &[], &self.impurities, "the declared model")
                .ok()
                .map(|f| UnpurifiedFit { converged: f.fit.converged, fit: f.fit.indices.clone() })
        } else {
            None
        };
        // A diagnosis that cannot be computed (a singular information) leaves the lists empty
        // rather than failing the measurement model.
        let diagnosis = if self.diagnose {
            fitted.diagnose(&input, constructs.len()).unwrap_or_default()
        } else {
            Diagnosis::default()
        };
        let estimation =
            EstimationRecord::new("measurement model", &input.plan, &pair_methods(cov), n, fitted.correction.clone());
        let mut out = summarise(
            &fitted.fit,
            &constructs,
            &fitted.observed,
            &input.covariance,
            &cov.items,
            n,
            ident,
            unpurified,
            estimation,
        );
        out.declared = fitted.declared;
        out.suggestions = diagnosis.suggestions;
        out.residuals = diagnosis.residuals;
        out.warnings = super::structure_checks::measure_warnings(&out, &input.correlation, &cov.items);
        Ok(Artifact::Measure(Box::new(out)))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Measure(m) = artifact else { return String::new() };
        let f = &m.fit;
        let status = if m.converged { "converged" } else { "DID NOT CONVERGE" };
        let heywood =
            if m.heywood.is_empty() { String::new() } else { format!(", {} Heywood case(s)", m.heywood.len()) };
        format!(
            "{status} in {} iterations; chisq {:.1} on {} df, RMSEA {:.3}, CFI {:.3}{heywood}",
            m.iterations, f.chisq, f.df, f.rmsea, f.cfi
        )
    }
}

/// Turns a fit into the `measure` block of results.json.
#[allow(clippy::too_many_arguments)] // one call site; a parameter struct would only rename these
pub fn summarise(
    fit: &SemFit,
    constructs: &[(String, Vec<String>, Option<f64>)],
    observed: &[String],
    s_full: &DMatrix<f64>,
    all_items: &[String],
    n: usize,
    ident: Identification,
    unpurified: Option<UnpurifiedFit>,
    estimation: EstimationRecord,
) -> MeasureOutput {
    let names: Vec<String> = constructs.iter().map(|c| c.0.clone()).collect();
    let mut loadings: IndexMap<String, IndexMap<String, Estimate>> =
        names.iter().map(|n| (n.clone(), IndexMap::new())).collect();
    let mut error_variances = IndexMap::new();
    for p in &fit.parameters {
        match (p.kind, p.matrix) {
            // A construct's own items only: cross-loadings and method factors are in `declared`.
            (ParameterKind::Loading, Matrix::Lambda)
                if (p.free.is_some() || p.est != 0.0)
                    && constructs.get(p.col).is_some_and(|c| c.1.contains(&observed[p.row])) =>
            {
                if let Some(map) = loadings.get_mut(&names[p.col]) {
                    map.insert(observed[p.row].clone(), Estimate { est: p.est, se: p.se, std: p.std });
                }
            }
            (ParameterKind::ErrorVariance, Matrix::Theta) => {
                error_variances
                    .insert(observed[p.row].clone(), ErrorVariance { est: p.est, se: p.se, fixed: p.free.is_none() });
            }
            _ => {}
        }
    }
    let moments = constructs_only(fit.latent_moments(), names.len());
    let mut offset = 0;
    let reliability = constructs
        .iter()
        .enumerate()
        .map(|(j, (name, items, _))| {
            let idx: Vec<usize> = (offset..offset + items.len()).collect();
            offset += items.len();
            let sd = moments.covariance[(j, j)].max(0.0).sqrt();
            let lambda: Vec<f64> = idx.iter().map(|&i| fit.matrices.lambda[(i, j)] * sd).collect();
            let theta: Vec<f64> = idx.iter().map(|&i| fit.matrices.theta[(i, i)]).collect();
            // With a declared impurity among the construct's items (a cross-loading, a method
            // factor, a correlated error), the variance of their sum is more than (sum of
            // loadings)^2 + sum of error variances: the denominator is then the model-implied
            // variance of the sum (McDonald 1999, eq. 6.20b, with the implied covariances;
            // for a pure construct the two are equal).
            let impure = idx.iter().any(|&i| {
                (0..fit.matrices.lambda.ncols()).any(|k| k != j && fit.matrices.lambda[(i, k)] != 0.0)
                    || idx.iter().any(|&l| l != i && fit.matrices.theta[(i, l)] != 0.0)
            });
            let omega = match (items.len() >= 2, impure) {
                (false, _) => None,
                (true, false) => mcdonald_omega(&lambda, &theta).ok(),
                (true, true) => {
                    let total: f64 =
                        idx.iter().flat_map(|&a| idx.iter().map(move |&b| (a, b))).map(|ab| fit.implied[ab]).sum();
                    let common = lambda.iter().sum::<f64>().powi(2);
                    (total > 0.0).then(|| common / total)
                }
            };
            let full: Vec<usize> = items.iter().filter_map(|i| all_items.iter().position(|a| a == i)).collect();
            let alpha = if items.len() >= 2 { cronbach_alpha(s_full, &full).ok() } else { None };
            (name.clone(), Reliability { omega, alpha })
        })
        .collect();
    let latent = |k: usize| names.get(k).cloned().unwrap_or_else(|| format!("method factor {}", k + 1 - names.len()));
    let heywood = fit
        .heywood
        .iter()
        .map(|h| HeywoodRecord {
            kind: format!("{:?}", h.kind),
            parameter: match h.entry {
                Some((Matrix::Theta, r, c)) if r == c => format!("error variance of `{}`", observed[r]),
                Some((Matrix::Lambda, r, c)) => format!("loading of `{}` on `{}`", observed[r], latent(c)),
                Some((Matrix::Psi, r, c)) => format!("latent (co)variance `{}`, `{}`", latent(r), latent(c)),
                Some((m, r, c)) => format!("{m:?}[{r}, {c}]"),
                None => "latent covariance matrix".into(),
            },
            value: h.value,
        })
        .collect();
    MeasureOutput {
        converged: fit.converged,
        iterations: fit.iterations,
        identification: ident,
        n,
        constructs: constructs.iter().map(|(n, i, _)| (n.clone(), i.clone())).collect(),
        fit: fit.indices.clone(),
        loadings,
        error_variances,
        latent_correlation: NamedMatrix { names: names.clone(), matrix: rows(&moments.correlation) },
        latent_covariance: LatentCovariance {
            names,
            matrix: rows(&moments.covariance),
            pairs: moments.pairs.clone(),
            acov: rows(&moments.covariance_acov),
        },
        reliability,
        heywood,
        estimation,
        unpurified,
        warnings: Vec::new(),
        declared: Vec::new(),
        suggestions: Vec::new(),
        residuals: Vec::new(),
    }
}

/// The latent moments of the first `m` latents (the constructs; method factors come after
/// them and never reach the structure search). The pairs keep their column-major order, so
/// the rows of `covariance_acov` that remain are those of the smaller matrix.
fn constructs_only(full: LatentMoments, m: usize) -> LatentMoments {
    if full.covariance.nrows() == m {
        return full;
    }
    let keep: Vec<usize> = (0..full.pairs.len()).filter(|&e| full.pairs[e].0 < m && full.pairs[e].1 < m).collect();
    let pick = |x: &DMatrix<f64>| DMatrix::from_fn(keep.len(), keep.len(), |a, b| x[(keep[a], keep[b])]);
    LatentMoments {
        pairs: keep.iter().map(|&e| full.pairs[e]).collect(),
        covariance: full.covariance.view((0, 0), (m, m)).into_owned(),
        covariance_acov: pick(&full.covariance_acov),
        correlation: full.correlation.view((0, 0), (m, m)).into_owned(),
        correlation_acov: pick(&full.correlation_acov),
        jacobian: DMatrix::from_fn(keep.len(), full.jacobian.ncols(), |a, t| full.jacobian[(keep[a], t)]),
    }
}
