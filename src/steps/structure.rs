//! `structure`: the PC search among the latent constructs under tiers, forbidden and required
//! edges, on conditional-independence tests that carry the measurement model's uncertainty,
//! then the full SEM of each member of the resulting class. Central type: `StructureOutput`.

use indexmap::IndexMap;
use nalgebra::DMatrix;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use std::sync::Arc;

use super::constructs::{EstimationRecord, Latents, ModelInput, Plan, SharedAcov, fit_latents, pair_methods};
use super::structure_checks::{
    ClaimsTest, ConflictRecord, StructureWarning, claims_test, collider_rule, conflict_records, fit_warnings,
};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::spec::SpecFile;
use crate::spec::types::{
    CiTest as CiTestKind, Colliders, Impurities, Knowledge as KnowledgeSpec, Search, StructureSpec,
};
use construe_stats::bvn::Z_975;
use construe_stats::search::{
    CiTest, EdgeKind, FisherZ, Knowledge, KnowledgeError, PcOptions, Reason, WaldPartial, enumerate_dags, pc,
};
use construe_stats::sem::{FitIndices, Matrix, ParameterKind};

/// Bump when search or fit results change for the same measurement model and parameters.
/// v3: edge kinds stored as `EdgeKind` (the artifact's bytes changed; results.json did not).
/// v4: the measurement model's estimator (DWLS / sandwich SEs) for the structural fits; the
/// Wald tests read measure's robust latent covariance; `estimation` record added.
/// v5: the structural fits model the declared impurities (`impurities:`).
/// v6: `search` (pc | fci | both) and the FCI result (`fci`); edges may carry marks.
/// v7: each member is fitted as exactly its DAG (no free covariance between constructs the
/// graph separates, exogenous ones included); the claims test, conflicts, warnings and the
/// collider rule (default conservative) added.
pub const VERSION: u32 = 7;

/// Class members fitted at most (the rest are counted, not fitted).
const MAX_MEMBERS: usize = 8;

/// An edge of the structure the search found.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct EdgeRecord {
    /// Cause (for an undirected edge, the first of the two).
    pub from: String,
    /// Effect (for an undirected edge, the second).
    pub to: String,
    /// Directed, or undirected when the data cannot orient it (`"directed"` / `"undirected"`).
    #[schemars(with = "super::stats_schema::EdgeKindSchema")]
    pub kind: EdgeKind,
    /// Why the edge has its orientation (for example `tier order`, `collider (...)`, `Meek rule 1`).
    pub reason: String,
    /// `search: fci` only: the marks at `from` and at `to` (`tail`, `arrow`, `circle`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    #[schemars(with = "Option<[super::stats_schema::MarkSchema; 2]>")]
    pub marks: Option<[construe_stats::search::Mark; 2]>,
    /// `search: fci` only: what the edge says, in plain words.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub meaning: Option<String>,
}

/// Two constructs the search left non-adjacent.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct RemovedRecord {
    /// One construct.
    pub a: String,
    /// The other.
    pub b: String,
    /// The constructs conditioned on when the two were found independent.
    pub sepset: Vec<String>,
    /// The p-value of that test; `null` when knowledge removed the edge.
    pub p: Option<f64>,
    /// Never adjacent because `knowledge` forbids both directions (rather than removed by a test).
    pub by_knowledge: bool,
}

/// A path of the structural model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct EffectRecord {
    /// Cause.
    pub from: String,
    /// Effect.
    pub to: String,
    /// The path coefficient.
    pub est: f64,
    /// Its standard error.
    pub se: Option<f64>,
    /// 95% Wald interval, `[lower, upper]`.
    pub ci: [Option<f64>; 2],
    /// The standardized coefficient.
    pub std: Option<f64>,
}

/// One member (DAG) of the equivalence class, fitted as a structural model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct MemberFit {
    /// Its directed edges, each `[from, to]`.
    pub edges: Vec<[String; 2]>,
    /// Whether the fit converged.
    pub converged: bool,
    /// Global fit of the structural model.
    #[schemars(with = "super::stats_schema::FitIndicesSchema")]
    pub fit: FitIndices,
    /// Its paths.
    pub effects: Vec<EffectRecord>,
    /// Construct -> variance explained.
    pub r_squared: IndexMap<String, f64>,
    /// This member against the measurement model: the joint test of the graph's independences.
    pub claims_test: Option<ClaimsTest>,
    /// Implausible estimates of this member's fit.
    pub warnings: Vec<StructureWarning>,
}

/// The structure among the constructs: PC search, then a structural model of each member of the
/// class; or FCI's partial ancestral graph (`search: fci`), or both.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct StructureOutput {
    /// The conditional independence test used.
    pub test: CiTestKind,
    /// Its significance level.
    pub alpha: f64,
    /// The sample size of the tests and fits.
    pub n: usize,
    /// The edges found.
    pub edges: Vec<EdgeRecord>,
    /// Pairs left non-adjacent, with why.
    pub removed: Vec<RemovedRecord>,
    /// Conditional independence tests run.
    pub tests_run: usize,
    /// Effects and fit of the first DAG of the class (the one the report draws).
    pub effects: Vec<EffectRecord>,
    /// Fit of the first member of the class.
    #[schemars(with = "Option<super::stats_schema::FitIndicesSchema>")]
    pub fit: Option<FitIndices>,
    /// Construct -> variance explained (first member).
    pub r_squared: IndexMap<String, f64>,
    /// The fitted members of the class.
    pub members: Vec<MemberFit>,
    /// Members of the equivalence class consistent with the knowledge (at most the cap).
    pub class_size: usize,
    /// Whether every member of the class was enumerated.
    pub class_complete: bool,
    /// How the structural models were estimated (`None` when the class had no member).
    pub estimation: Option<EstimationRecord>,
    /// Which search ran (`pc`, `fci`, `both`). With `fci`, `edges` and `removed` are FCI's and
    /// no structural model is fitted.
    #[serde(default)]
    pub search: Search,
    /// FCI's result, when `search` is `fci` or `both`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fci: Option<super::structure_fci::FciOutput>,
    /// How unshielded triples were judged colliders.
    pub colliders: Colliders,
    /// Unshielded triples whose marks conflict (the tests contradict each other or the knowledge).
    pub conflicts: Vec<ConflictRecord>,
    /// The first member against the measurement model (all constructs correlated): the
    /// chi-square difference on one df per non-adjacent pair, the joint test of every
    /// independence the search claims.
    pub claims_test: Option<ClaimsTest>,
    /// Implausible estimates of the first member's fit (standardized effects beyond ±1, R²
    /// outside 0 to 1, negative variances).
    pub warnings: Vec<StructureWarning>,
}

#[derive(Clone)]
pub struct StructureStep {
    params: StructureSpec,
    knowledge: KnowledgeSpec,
    reliabilities: Vec<(String, Option<f64>)>,
    /// The moments' sampling covariance shared by sensitivity's refits (never in the key).
    shared: Option<Arc<SharedAcov>>,
    impurities: Impurities,
}

impl StructureStep {
    pub fn from_spec(file: &SpecFile, params: &StructureSpec) -> StructureStep {
        let reliabilities = file.spec.constructs.iter().map(|(n, c)| (n.clone(), c.reliability)).collect();
        StructureStep {
            params: params.clone(),
            knowledge: file.spec.knowledge.clone(),
            reliabilities,
            shared: None,
            impurities: file.spec.impurities.clone(),
        }
    }

    /// The same step with `construct`'s reliability replaced (sensitivity).
    pub fn with_reliability(&self, construct: &str, reliability: f64) -> StructureStep {
        let mut step = self.clone();
        for (c, r) in step.reliabilities.iter_mut() {
            if c == construct {
                *r = Some(reliability);
            }
        }
        step
    }

    /// The same step drawing the moments' sampling covariance from `shared`.
    pub fn sharing(&self, shared: Arc<SharedAcov>) -> StructureStep {
        StructureStep { shared: Some(shared), ..self.clone() }
    }

    /// The same step with another significance level (sensitivity to alpha).
    pub fn with_alpha(&self, alpha: f64) -> StructureStep {
        let mut step = self.clone();
        step.params.alpha = alpha;
        step
    }

    fn knowledge(&self, names: &[String]) -> Result<Knowledge, StepError> {
        let idx = |n: &String| {
            names.iter().position(|x| x == n).ok_or_else(|| StepError::UnknownConstruct { construct: n.clone() })
        };
        let stats = |e: KnowledgeError| StepError::Stats { context: "background knowledge".into(), source: e.into() };
        let mut k = Knowledge::new(names.len());
        let tiers: Vec<Vec<usize>> = self
            .knowledge
            .tiers
            .iter()
            .map(|t| t.iter().map(idx).collect::<Result<_, _>>())
            .collect::<Result<_, _>>()?;
        k.set_tiers(&tiers).map_err(stats)?;
        for [a, b] in &self.knowledge.forbid {
            k.forbid(idx(a)?, idx(b)?).map_err(stats)?;
        }
        for [a, b] in &self.knowledge.require {
            k.require(idx(a)?, idx(b)?).map_err(stats)?;
        }
        Ok(k)
    }
}

fn reason(r: Option<Reason>) -> String {
    match r {
        None => "no orientation follows from the data or the knowledge".into(),
        Some(Reason::Collider) => "collider (unshielded, not in the separating set)".into(),
        Some(Reason::Meek(k)) => format!("Meek rule {k}"),
        Some(Reason::Tier) => "tier order".into(),
        Some(Reason::Required) => "required by the spec".into(),
        Some(Reason::ForbiddenImplied) => "the other direction is forbidden".into(),
    }
}

fn matrix(rows: &[Vec<f64>]) -> DMatrix<f64> {
    let (r, c) = (rows.len(), rows.first().map_or(0, Vec::len));
    DMatrix::from_fn(r, c, |i, j| rows[i][j])
}

impl Step for StructureStep {
    fn kind(&self) -> StepKind {
        StepKind::Structure
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({"alpha": self.params.alpha, "test": self.params.test, "search": self.params.search, "colliders": self.params.colliders, "knowledge": self.knowledge, "reliabilities": self.reliabilities, "impurities": self.impurities})
    }

    fn inputs(&self) -> Vec<StepKind> {
        vec![StepKind::Load, StepKind::Covariance, StepKind::Measure]
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let measure = inputs.measure()?;
        let cov = inputs.covariance()?;
        let err = |context: &'static str| move |source| StepError::Stats { context: context.into(), source };
        let names = measure.latent_covariance.names.clone();
        let c = matrix(&measure.latent_covariance.matrix);
        let test: Box<dyn CiTest> = match self.params.test {
            CiTestKind::Wald => {
                Box::new(WaldPartial::new(c, matrix(&measure.latent_covariance.acov)).map_err(err("the Wald tests"))?)
            }
            CiTestKind::Fisher => Box::new(FisherZ::new(c, measure.n as f64).map_err(err("the Fisher-z tests"))?),
        };
        let knowledge = self.knowledge(&names)?;
        // `search: fci | both`: FCI on the same tests (structure_fci.rs)
        let fci = match self.params.search {
            Search::Pc => None,
            Search::Fci => {
                let f = super::structure_fci::search(test.as_ref(), &knowledge, &names, self.params.alpha)?;
                return Ok(Artifact::Structure(Box::new(super::structure_fci::without_model(
                    &self.params,
                    measure.n,
                    f,
                ))));
            }
            Search::Both => Some(super::structure_fci::search(test.as_ref(), &knowledge, &names, self.params.alpha)?),
        };
        let colliders = collider_rule(self.params.colliders);
        let options = PcOptions { alpha: self.params.alpha, max_cond: None, colliders };
        let result = pc(test.as_ref(), &knowledge, &options).map_err(err("the PC search"))?;
        let conflicts = conflict_records(&result, &names);
        let edges = result
            .edges
            .iter()
            .map(|e| EdgeRecord {
                from: names[e.from].clone(),
                to: names[e.to].clone(),
                kind: e.kind(),
                reason: reason(e.reason),
                marks: None,
                meaning: None,
            })
            .collect();
        let removed = result
            .removed
            .iter()
            .map(|r| RemovedRecord {
                a: names[r.a].clone(),
                b: names[r.b].clone(),
                sepset: r.sepset.iter().flatten().map(|&i| names[i].clone()).collect(),
                p: r.test.as_ref().map(|t| t.p),
                by_knowledge: r.by_knowledge,
            })
            .collect();
        let class =
            enumerate_dags(&result.graph, &knowledge, MAX_MEMBERS).map_err(err("enumerating the equivalence class"))?;
        let constructs: Vec<(String, Vec<String>, Option<f64>)> = measure
            .constructs
            .iter()
            .map(|(n, items)| {
                (n.clone(), items.clone(), self.reliabilities.iter().find(|(c, _)| c == n).and_then(|(_, r)| *r))
            })
            .collect();
        // The structural fits follow the measurement model's estimator (its key covers the choice).
        let items: Vec<String> = constructs.iter().flat_map(|(_, items, _)| items.iter().cloned()).collect();
        let plan = Plan::of(&measure.estimation);
        let input = ModelInput::with_plan(inputs.load()?, cov, plan, &items, self.shared.as_deref())?;
        let mut estimation = None;
        let mut members = Vec::new();
        // The measurement model, refitted with this step's reliabilities: what the claims test compares with.
        let measured = fit_latents(
            &constructs,
            &input,
            measure.identification,
            Latents::Correlated,
            &self.impurities,
            "the measurement model",
        )?;
        let (measurement, measurement_correction) = (measured.fit, measured.correction);
        for dag in &class.dags {
            let paths: Vec<(usize, usize)> =
                dag.edges().iter().filter(|e| e.is_directed()).map(|e| (e.from, e.to)).collect();
            let fitted = fit_latents(
                &constructs,
                &input,
                measure.identification,
                Latents::Dag(&paths),
                &self.impurities,
                "the structural model",
            )?;
            let (fit, observed, correction) = (fitted.fit, fitted.observed, fitted.correction);
            let claims = claims_test((&fit, correction.as_ref()), (&measurement, measurement_correction.as_ref()));
            if estimation.is_none() {
                estimation = Some(EstimationRecord::new(
                    "structural model",
                    &input.plan,
                    &pair_methods(cov),
                    input.n,
                    correction,
                ));
            }
            let z = Z_975;
            let effects = fit
                .parameters
                .iter()
                .filter(|p| p.kind == ParameterKind::Path && p.matrix == Matrix::Beta && p.free.is_some())
                .map(|p| EffectRecord {
                    from: names[p.col].clone(),
                    to: names[p.row].clone(),
                    est: p.est,
                    se: p.se,
                    ci: [p.se.map(|se| p.est - z * se), p.se.map(|se| p.est + z * se)],
                    std: p.std,
                })
                .collect();
            let moments = fit.latent_moments();
            let r_squared: IndexMap<String, f64> = paths
                .iter()
                .map(|&(_, to)| to)
                .collect::<std::collections::BTreeSet<_>>()
                .into_iter()
                .map(|j| (names[j].clone(), 1.0 - fit.matrices.psi[(j, j)] / moments.covariance[(j, j)]))
                .collect();
            members.push(MemberFit {
                edges: paths.iter().map(|&(a, b)| [names[a].clone(), names[b].clone()]).collect(),
                converged: fit.converged,
                fit: fit.indices.clone(),
                effects,
                warnings: fit_warnings(&fit, &names, &observed, &r_squared),
                r_squared,
                claims_test: claims,
            });
        }
        let first = members.first();
        Ok(Artifact::Structure(Box::new(StructureOutput {
            test: self.params.test,
            alpha: self.params.alpha,
            n: measure.n,
            edges,
            removed,
            tests_run: result.tests_run,
            effects: first.map(|m| m.effects.clone()).unwrap_or_default(),
            fit: first.map(|m| m.fit.clone()),
            r_squared: first.map(|m| m.r_squared.clone()).unwrap_or_default(),
            class_size: class.dags.len(),
            class_complete: class.complete,
            claims_test: first.and_then(|m| m.claims_test.clone()),
            warnings: first.map(|m| m.warnings.clone()).unwrap_or_default(),
            members,
            estimation,
            search: self.params.search,
            fci,
            colliders: self.params.colliders,
            conflicts,
        })))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Structure(s) = artifact else { return String::new() };
        if s.search == Search::Fci {
            return super::structure_fci::describe(s);
        }
        let directed = s.edges.iter().filter(|e| e.kind.is_directed()).count();
        format!(
            "{} ({directed} directed) after {} tests; class of {}{}",
            crate::spec::diagnostic::plural(s.edges.len(), "edge"),
            s.tests_run,
            crate::spec::diagnostic::plural(s.class_size, "DAG"),
            if s.class_complete { "" } else { " or more" }
        )
    }
}
