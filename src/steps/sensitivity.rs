//! `sensitivity`: how each structural conclusion depends on assumed measurement error. For each
//! single-indicator construct under `reliability`, the measurement and structural models are
//! refitted with its error variance fixed at (1 - r) x variance for every grid value r; with a
//! `prior`, reliabilities are drawn from independent beta distributions (seeded) and each
//! conclusion gets its probability under the prior; an `alpha` list sweeps the search level.
//! Central type: `SensitivityOutput`.

use std::collections::BTreeMap;

use indexmap::IndexMap;
use rand_distr::{Beta, Distribution};
use rayon::prelude::*;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use std::sync::Arc;

use super::constructs::SharedAcov;
use super::measure::MeasureStep;
use super::structure::{StructureOutput, StructureStep};
use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::pipeline::chain::{ChainError, Compute, NoProgress, run_chain};
use crate::spec::types::SensitivitySpec;
use construe_stats::bootstrap::replicate_rng;
use construe_stats::search::EdgeKind;

/// Bump when sensitivity results change for the same inputs and parameters.
/// v4: conclusions stored as typed `Statement`s (the artifact's bytes changed; results.json
/// did not). v5: refits use the measurement model's estimator (robust SEs, `load` an input).
/// v6: `leave_one_out` (conclusions' `holds_without` / `fails_without`); the structural refits
/// follow structure v5.
pub const VERSION: u32 = 6;

/// A statement about the structure that a refit either repeats or contradicts. Compared as a
/// value; `Display` gives its words (results.json and the report show those).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub enum Statement {
    /// The edge as the search found it: `from -> to`, or `from - to` when it is undirected.
    Edge { from: String, to: String, kind: EdgeKind },
    /// The search left `a` and `b` non-adjacent.
    NoEdge { a: String, b: String },
    /// The sign and significance of the effect `from -> to` (first member of the class).
    Effect { from: String, to: String, verdict: EffectVerdict },
}

/// An effect's sign and significance: its 95% interval excludes zero or not.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum EffectVerdict {
    PositiveSignificant,
    NegativeSignificant,
    NotSignificant,
}

impl EffectVerdict {
    /// The verdict on an estimate with its 95% interval (missing bounds: not significant).
    pub fn of(est: f64, ci: [Option<f64>; 2]) -> EffectVerdict {
        let significant = matches!(ci, [Some(lo), Some(hi)] if lo > 0.0 || hi < 0.0);
        match (significant, est > 0.0) {
            (true, true) => EffectVerdict::PositiveSignificant,
            (true, false) => EffectVerdict::NegativeSignificant,
            (false, _) => EffectVerdict::NotSignificant,
        }
    }
}

impl std::fmt::Display for EffectVerdict {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            EffectVerdict::PositiveSignificant => "positive and significant",
            EffectVerdict::NegativeSignificant => "negative and significant",
            EffectVerdict::NotSignificant => "not significant",
        })
    }
}

/// The words of results.json's `sensitivity.conclusions[].what` (scripts read them: keep them).
impl std::fmt::Display for Statement {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Statement::Edge { from, to, kind: EdgeKind::Directed } => write!(f, "edge {from} → {to}"),
            Statement::Edge { from, to, kind: EdgeKind::Undirected } => write!(f, "edge {from} — {to}"),
            // FCI's kinds (`structure.search: fci`)
            Statement::Edge { from, to, kind: EdgeKind::Bidirected } => write!(f, "edge {from} ↔ {to}"),
            Statement::Edge { from, to, kind: EdgeKind::PartiallyDirected } => write!(f, "edge {from} o→ {to}"),
            Statement::Edge { from, to, kind: EdgeKind::Nondirected } => write!(f, "edge {from} o–o {to}"),
            Statement::NoEdge { a, b } => write!(f, "no edge between {a} and {b}"),
            Statement::Effect { from, to, verdict } => write!(f, "effect {from} → {to} is {verdict}"),
        }
    }
}

/// A conclusion's statement in its two encodings: words in results.json (human-readable
/// serializers: serde_json), the typed value in the exact artifact encoding (postcard), so a
/// cached artifact reads back as the value it was, whatever the construct names contain.
mod words_in_results {
    use serde::de::Error;
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    use super::Statement;

    pub fn serialize<S: Serializer>(what: &Statement, s: S) -> Result<S::Ok, S::Error> {
        if s.is_human_readable() { s.collect_str(what) } else { what.serialize(s) }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Statement, D::Error> {
        if d.is_human_readable() {
            Err(D::Error::custom("a conclusion's words are not read back; decode the artifact instead"))
        } else {
            Statement::deserialize(d)
        }
    }
}

/// A statement with how it fares across the sensitivity analyses.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Conclusion {
    /// The conclusion, in words (for example `edge crowding → trust`).
    #[serde(with = "words_in_results")]
    #[schemars(with = "String")]
    pub what: Statement,
    /// Construct -> grid values at which the conclusion holds.
    pub holds_for: IndexMap<String, Vec<f64>>,
    /// Construct -> the largest grid value at which the conclusion's verdict differs from its
    /// verdict at the largest grid value (`null`: the same verdict everywhere on the grid).
    pub tipping: IndexMap<String, Option<f64>>,
    /// Share of the prior draws under which it holds; `null` without a prior.
    pub prior_probability: Option<f64>,
    /// Alpha values (from `sensitivity.alpha`) at which it holds.
    pub holds_for_alpha: Vec<f64>,
    /// With `leave_one_out`: the items whose omission (one at a time, refit and search again)
    /// leaves the conclusion standing.
    pub holds_without: Vec<String>,
    /// With `leave_one_out`: the items whose omission overturns it.
    pub fails_without: Vec<String>,
}

/// One effect's estimate along one construct's reliability grid, for the plot.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct EffectCurve {
    /// The construct whose reliability varies.
    pub construct: String,
    /// Cause.
    pub from: String,
    /// Effect.
    pub to: String,
    /// The grid of reliabilities.
    pub reliability: Vec<f64>,
    /// `None` where the refit has no such path (the edge vanished or turned).
    pub est: Vec<Option<f64>>,
    /// Lower 95% bound at each grid value.
    pub lo: Vec<Option<f64>>,
    /// Upper 95% bound at each grid value.
    pub hi: Vec<Option<f64>>,
    /// The tipping point (see `Conclusion.tipping`); `null` when none.
    pub tipping: Option<f64>,
}

/// How the conclusions depend on the reliability of single indicators and on alpha.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct SensitivityOutput {
    /// Each conclusion of the analysis and where it holds.
    pub conclusions: Vec<Conclusion>,
    /// Effect curves over each reliability grid.
    pub curves: Vec<EffectCurve>,
    /// Prior draws made.
    pub draws: usize,
    /// Seed of the draws.
    pub seed: u64,
    /// Refits that failed (counted, never dropped silently), and the first few reasons.
    pub failed: usize,
    /// The first few reasons.
    pub failures: Vec<String>,
    /// With `leave_one_out`: the items left out one at a time (kept items of constructs with at
    /// least 3 of them).
    pub left_out: Vec<String>,
}

pub struct SensitivityStep {
    params: SensitivitySpec,
    measure: MeasureStep,
    structure: StructureStep,
    purified: bool,
}

impl SensitivityStep {
    pub fn new(
        params: &SensitivitySpec,
        measure: MeasureStep,
        structure: StructureStep,
        purified: bool,
    ) -> SensitivityStep {
        SensitivityStep { params: params.clone(), measure, structure, purified }
    }

    /// Refits measure and structure with the given reliabilities (and alpha).
    fn refit(
        &self,
        inputs: &Inputs<'_>,
        reliabilities: &[(String, f64)],
        alpha: Option<f64>,
        shared: &Arc<SharedAcov>,
    ) -> Result<StructureOutput, StepError> {
        self.refit_with(self.measure.sharing(shared.clone()), inputs, reliabilities, alpha, shared)
    }

    /// `refit` from a given measurement step (leave-one-out passes one without an item).
    fn refit_with(
        &self,
        mut measure: MeasureStep,
        inputs: &Inputs<'_>,
        reliabilities: &[(String, f64)],
        alpha: Option<f64>,
        shared: &Arc<SharedAcov>,
    ) -> Result<StructureOutput, StepError> {
        let mut structure = self.structure.sharing(shared.clone());
        for (c, r) in reliabilities {
            measure = measure.with_reliability(c, *r);
            structure = structure.with_reliability(c, *r);
        }
        if let Some(a) = alpha {
            structure = structure.with_alpha(a);
        }
        let mut artifacts = BTreeMap::new();
        for kind in [StepKind::Load, StepKind::Covariance, StepKind::Purify] {
            if let Some(a) = inputs.artifacts.get(&kind) {
                artifacts.insert(kind, a.clone());
            }
        }
        let chain: [&dyn Step; 2] = [&measure, &structure];
        run_chain(chain, &mut artifacts, &mut Compute, &NoProgress).map_err(|e| match e {
            ChainError::Step { source, .. } => source,
            ChainError::Hook(_) => StepError::MissingInput { step: StepKind::Sensitivity, needs: StepKind::Structure },
        })?;
        match artifacts.remove(&StepKind::Structure) {
            Some(Artifact::Structure(s)) => Ok(*s),
            _ => Err(StepError::MissingInput { step: StepKind::Sensitivity, needs: StepKind::Structure }),
        }
    }
}

/// Statements read off a structure: each edge as found, each absent pair, and each effect's
/// sign and significance (95% interval excluding zero). Read off the baseline they are the
/// conclusions; read off a refit, the verdicts the conclusions are looked up in.
fn statements(s: &StructureOutput) -> Vec<Statement> {
    let mut out: Vec<Statement> =
        s.edges.iter().map(|e| Statement::Edge { from: e.from.clone(), to: e.to.clone(), kind: e.kind }).collect();
    out.extend(s.removed.iter().map(|r| Statement::NoEdge { a: r.a.clone(), b: r.b.clone() }));
    out.extend(s.effects.iter().map(|f| Statement::Effect {
        from: f.from.clone(),
        to: f.to.clone(),
        verdict: EffectVerdict::of(f.est, f.ci),
    }));
    out
}

/// Whether `what` (a baseline statement) holds in `refit`.
fn holds(what: &Statement, refit: &[Statement]) -> bool {
    refit.contains(what)
}

impl Step for SensitivityStep {
    fn kind(&self) -> StepKind {
        StepKind::Sensitivity
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({
            "sensitivity": self.params,
            "measure": self.measure.params(),
            "structure": self.structure.params(),
        })
    }

    fn inputs(&self) -> Vec<StepKind> {
        // `load` for the moments' sampling covariance the refits' robust SEs need.
        let mut v = vec![StepKind::Load, StepKind::Covariance];
        if self.purified {
            v.push(StepKind::Purify);
        }
        v.extend([StepKind::Measure, StepKind::Structure]);
        v
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let base = match inputs.artifacts.get(&StepKind::Structure) {
            Some(Artifact::Structure(s)) => s.as_ref().clone(),
            _ => return Err(StepError::MissingInput { step: StepKind::Sensitivity, needs: StepKind::Structure }),
        };
        let baseline = statements(&base);
        // Every refit reads the same `load` and `covariance`: one sampling covariance for all.
        let shared = Arc::new(SharedAcov::default());
        let mut failed = 0;
        let failures = std::sync::Mutex::new(Vec::<String>::new());
        let note = |label: String, r: Result<StructureOutput, StepError>| -> Option<StructureOutput> {
            r.map_err(|e| {
                if let Ok(mut f) = failures.lock()
                    && f.len() < 5
                {
                    f.push(format!("{label}: {e}"));
                }
            })
            .ok()
        };
        let mut conclusions: Vec<Conclusion> = baseline
            .into_iter()
            .map(|what| Conclusion {
                what,
                holds_for: IndexMap::new(),
                tipping: IndexMap::new(),
                prior_probability: None,
                holds_for_alpha: Vec::new(),
                holds_without: Vec::new(),
                fails_without: Vec::new(),
            })
            .collect();
        let mut curves = Vec::new();
        for (construct, grid) in &self.params.reliability {
            let mut grid = grid.clone();
            grid.sort_by(f64::total_cmp);
            grid.dedup();
            let fits: Vec<Option<StructureOutput>> = grid
                .par_iter()
                .map(|&r| {
                    note(format!("{construct} = {r}"), self.refit(inputs, &[(construct.clone(), r)], None, &shared))
                })
                .collect();
            failed += fits.iter().filter(|f| f.is_none()).count();
            let verdicts: Vec<Option<Vec<Statement>>> = fits.iter().map(|f| f.as_ref().map(statements)).collect();
            for c in conclusions.iter_mut() {
                let status: Vec<Option<bool>> =
                    verdicts.iter().map(|v| v.as_ref().map(|v| holds(&c.what, v))).collect();
                c.holds_for.insert(
                    construct.clone(),
                    grid.iter().zip(&status).filter(|(_, s)| **s == Some(true)).map(|(r, _)| *r).collect(),
                );
                c.tipping.insert(construct.clone(), tipping(&grid, &status));
            }
            for f in &base.effects {
                let point = |fit: &Option<StructureOutput>| {
                    fit.as_ref().and_then(|s| s.effects.iter().find(|e| e.from == f.from && e.to == f.to).cloned())
                };
                let pts: Vec<_> = fits.iter().map(point).collect();
                let what = Statement::Effect {
                    from: f.from.clone(),
                    to: f.to.clone(),
                    verdict: EffectVerdict::of(f.est, f.ci),
                };
                let tip = conclusions
                    .iter()
                    .find(|c| c.what == what)
                    .and_then(|c| c.tipping.get(construct).copied().flatten());
                curves.push(EffectCurve {
                    construct: construct.clone(),
                    from: f.from.clone(),
                    to: f.to.clone(),
                    reliability: grid.clone(),
                    est: pts.iter().map(|p| p.as_ref().map(|e| e.est)).collect(),
                    lo: pts.iter().map(|p| p.as_ref().and_then(|e| e.ci[0])).collect(),
                    hi: pts.iter().map(|p| p.as_ref().and_then(|e| e.ci[1])).collect(),
                    tipping: tip,
                });
            }
        }
        if !self.params.alpha.is_empty() {
            let fits: Vec<Option<Vec<Statement>>> = self
                .params
                .alpha
                .par_iter()
                .map(|&a| {
                    note(format!("alpha = {a}"), self.refit(inputs, &[], Some(a), &shared)).map(|s| statements(&s))
                })
                .collect();
            failed += fits.iter().filter(|f| f.is_none()).count();
            for c in conclusions.iter_mut() {
                c.holds_for_alpha = self
                    .params
                    .alpha
                    .iter()
                    .zip(&fits)
                    .filter(|(_, v)| v.as_ref().is_some_and(|v| holds(&c.what, v)))
                    .map(|(a, _)| *a)
                    .collect();
            }
        }
        if !self.params.prior.is_empty() {
            let priors: Vec<(String, Beta<f64>)> = self
                .params
                .prior
                .iter()
                .filter_map(|(c, p)| Beta::new(p.beta[0], p.beta[1]).ok().map(|b| (c.clone(), b)))
                .collect();
            inputs.progress.start(StepKind::Sensitivity, self.params.draws);
            let draws: Vec<Option<Vec<Statement>>> = (0..self.params.draws)
                .into_par_iter()
                .map(|d| {
                    let mut rng = replicate_rng(self.params.seed, d);
                    inputs.progress.advance(StepKind::Sensitivity, 1);
                    // A reliability of exactly 0 would leave the single indicator pure error; one of exactly
                    // 1 (a draw rounding up) leaves it no error at all, which the CI tests cannot use.
                    let rs: Vec<(String, f64)> =
                        priors.iter().map(|(c, b)| (c.clone(), b.sample(&mut rng).clamp(1e-3, 0.999))).collect();
                    note(
                        format!(
                            "prior draw {} ({})",
                            d + 1,
                            rs.iter().map(|(c, r)| format!("{c} = {r:.3}")).collect::<Vec<_>>().join(", ")
                        ),
                        self.refit(inputs, &rs, None, &shared),
                    )
                    .map(|s| statements(&s))
                })
                .collect();
            inputs.progress.finish(StepKind::Sensitivity);
            let ok: Vec<&Vec<Statement>> = draws.iter().flatten().collect();
            failed += draws.len() - ok.len();
            for c in conclusions.iter_mut() {
                c.prior_probability =
                    (!ok.is_empty()).then(|| ok.iter().filter(|v| holds(&c.what, v)).count() as f64 / ok.len() as f64);
            }
        }
        let mut left_out = Vec::new();
        if self.params.leave_one_out {
            let Some(Artifact::Measure(m)) = inputs.artifacts.get(&StepKind::Measure) else {
                return Err(StepError::MissingInput { step: StepKind::Sensitivity, needs: StepKind::Measure });
            };
            left_out = m.constructs.values().filter(|items| items.len() >= 3).flatten().cloned().collect();
            let fits: Vec<Option<Vec<Statement>>> = left_out
                .par_iter()
                .map(|item| {
                    let measure = self.measure.sharing(shared.clone()).without_item(item);
                    note(format!("without {item}"), self.refit_with(measure, inputs, &[], None, &shared))
                        .map(|s| statements(&s))
                })
                .collect();
            failed += fits.iter().filter(|f| f.is_none()).count();
            for c in conclusions.iter_mut() {
                for (item, fit) in left_out.iter().zip(&fits) {
                    match fit {
                        Some(v) if holds(&c.what, v) => c.holds_without.push(item.clone()),
                        Some(_) => c.fails_without.push(item.clone()),
                        None => {}
                    }
                }
            }
        }
        let mut failures = failures.into_inner().unwrap_or_default();
        failures.sort();
        Ok(Artifact::Sensitivity(Box::new(SensitivityOutput {
            conclusions,
            curves,
            draws: self.params.draws,
            seed: self.params.seed,
            failed,
            failures,
            left_out,
        })))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Sensitivity(s) = artifact else { return String::new() };
        let fragile = s.conclusions.iter().filter(|c| c.tipping.values().any(Option::is_some)).count();
        format!(
            "{} tracked, {fragile} change within the grid, {} failed refits",
            crate::spec::diagnostic::plural(s.conclusions.len(), "conclusion"),
            s.failed
        )
    }
}

/// The largest grid value whose verdict differs from the verdict at the largest grid value.
fn tipping(grid: &[f64], status: &[Option<bool>]) -> Option<f64> {
    let top = (*status.last()?)?;
    grid.iter().zip(status).rev().find(|(_, s)| s.is_some_and(|s| s != top)).map(|(r, _)| *r)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::steps::{read_exact, write_exact};

    fn conclusion(what: Statement) -> Conclusion {
        Conclusion {
            what,
            holds_for: IndexMap::new(),
            tipping: IndexMap::new(),
            prior_probability: None,
            holds_for_alpha: Vec::new(),
            holds_without: Vec::new(),
            fails_without: Vec::new(),
        }
    }

    // results.json keeps the words scripts read; the artifact keeps the typed value.
    #[test]
    fn statements_read_as_before_in_results_and_exactly_from_the_artifact() {
        let cases = [
            (Statement::Edge { from: "a".into(), to: "b".into(), kind: EdgeKind::Directed }, "edge a → b"),
            (Statement::Edge { from: "a".into(), to: "b".into(), kind: EdgeKind::Undirected }, "edge a — b"),
            (Statement::NoEdge { a: "a".into(), b: "b".into() }, "no edge between a and b"),
            (
                Statement::Effect { from: "a".into(), to: "b".into(), verdict: EffectVerdict::PositiveSignificant },
                "effect a → b is positive and significant",
            ),
            (
                Statement::Effect { from: "a".into(), to: "b".into(), verdict: EffectVerdict::NegativeSignificant },
                "effect a → b is negative and significant",
            ),
            (
                Statement::Effect { from: "a".into(), to: "b".into(), verdict: EffectVerdict::NotSignificant },
                "effect a → b is not significant",
            ),
        ];
        for (what, words) in cases {
            let c = conclusion(what);
            assert_eq!(serde_json::to_value(&c).unwrap()["what"], words);
            let mut bytes = Vec::new();
            write_exact(&mut bytes, &c).unwrap();
            assert_eq!(read_exact::<Conclusion>(&bytes), Some(c));
        }
    }

    // As sentences, "no edge between p and q and r" was two different conclusions at once:
    // p / `q and r`, and `p and q` / r. As values they stay apart.
    #[test]
    fn conclusions_are_compared_as_values_not_sentences() {
        let one = Statement::NoEdge { a: "p".into(), b: "q and r".into() };
        let other = Statement::NoEdge { a: "p and q".into(), b: "r".into() };
        assert_eq!(one.to_string(), other.to_string());
        assert!(!holds(&one, std::slice::from_ref(&other)));
        assert!(holds(&one, &[other, one.clone()]));
        let arrow = Statement::Edge { from: "a → b".into(), to: "c".into(), kind: EdgeKind::Directed };
        let shifted = Statement::Edge { from: "a".into(), to: "b → c".into(), kind: EdgeKind::Directed };
        assert!(!holds(&arrow, &[shifted]));
    }

    #[test]
    fn verdicts_follow_the_interval() {
        assert_eq!(EffectVerdict::of(0.3, [Some(0.1), Some(0.5)]), EffectVerdict::PositiveSignificant);
        assert_eq!(EffectVerdict::of(-0.3, [Some(-0.5), Some(-0.1)]), EffectVerdict::NegativeSignificant);
        assert_eq!(EffectVerdict::of(0.3, [Some(-0.1), Some(0.5)]), EffectVerdict::NotSignificant);
        assert_eq!(EffectVerdict::of(0.3, [None, None]), EffectVerdict::NotSignificant);
    }

    #[test]
    fn tipping_is_the_largest_value_with_the_other_verdict() {
        let grid = [0.5, 0.6, 0.7, 0.8, 0.9, 1.0];
        let status = [Some(false), Some(false), Some(false), Some(true), Some(true), Some(true)];
        assert_eq!(tipping(&grid, &status), Some(0.7));
        assert_eq!(tipping(&grid, &[Some(true); 6]), None);
    }
}
