//! Declared impurities (`impurities:` in the spec) in the models of named constructs, and the
//! diagnosis of a fitted measurement model. `apply` adds to a `SemModel` the correlated errors,
//! cross-loadings and method factors whose items the model holds (purification may have dropped
//! some: their declarations go with them, and `DeclaredImpurity::note` says so); `start_from`
//! starts the fit from the model without them; `Fitted::diagnose` lists the largest residual
//! correlations and the modification indices of the parameters still fixed at zero
//! (`construe_stats::sem::modification`). No numerics of its own beyond that assembly.

use nalgebra::DMatrix;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use super::StepError;
use super::constructs::{Fitted, Method, ModelInput};
use crate::spec::types::Impurities;
use construe_stats::sem::modification::{Discrepancy, Judgement as StatsJudgement, candidates};
use construe_stats::sem::{FitOptions, Matrix, Param, SemFit, SemModel, Subset, modification_indices};

/// Suggestions and residuals listed at most.
pub const LISTED: usize = 10;

/// What kind of impurity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum ImpurityKind {
    /// Two items' errors covary.
    ErrorCovariance,
    /// An item also loads on a second construct.
    CrossLoading,
    /// A factor shared by several items, uncorrelated with the constructs.
    MethodFactor,
}

/// One estimated parameter of a declared impurity.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DeclaredEstimate {
    /// The parameter, in words.
    pub parameter: String,
    /// The estimate.
    pub est: f64,
    /// Its standard error (as the model's other SEs: robust where the plan asks).
    pub se: Option<f64>,
    /// The completely standardized estimate (an error covariance as an error correlation in
    /// the metric of the items' implied variances).
    pub std: Option<f64>,
}

/// A declared impurity and what the model made of it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DeclaredImpurity {
    /// What kind.
    pub kind: ImpurityKind,
    /// The items concerned, as declared.
    pub items: Vec<String>,
    /// The other construct (cross-loading) or the method factor's name.
    pub on: Option<String>,
    /// Whether the model estimates it.
    pub modelled: bool,
    /// Why not, or which items it lost to purification.
    pub note: Option<String>,
    /// The estimates with SEs (empty when not modelled).
    pub estimates: Vec<DeclaredEstimate>,
    /// The model entries behind `estimates`, in order (never published).
    #[serde(skip)]
    #[schemars(skip)]
    entries: Vec<(Matrix, usize, usize)>,
}

/// Adds the declarations to `model` (constructs' latents first, in `constructs` order; each item
/// of `observed` once). A correlated error or cross-loading needs its item(s) in the model; a
/// method factor needs at least 2 of its items, and may not hold every item the model keeps of
/// one construct (`types::Impurities` on identification); with exactly 2 its loadings are held
/// equal. Returns the records (estimates to be filled by `fill`) and the method factors' names
/// in the order their latents were added.
pub fn apply(
    model: &mut SemModel,
    impurities: &Impurities,
    constructs: &[(String, Vec<String>, Option<f64>)],
    observed: &[String],
) -> (Vec<DeclaredImpurity>, Vec<String>) {
    let at = |item: &str| observed.iter().position(|o| o == item);
    let record = |kind, items: Vec<String>, on: Option<String>| DeclaredImpurity {
        kind,
        items,
        on,
        modelled: false,
        note: None,
        estimates: Vec::new(),
        entries: Vec::new(),
    };
    let dropped = |items: &[&String]| -> Option<String> {
        let gone: Vec<String> = items.iter().filter(|i| at(i).is_none()).map(|i| format!("`{i}`")).collect();
        (!gone.is_empty()).then(|| format!("not modelled: purification dropped {}", gone.join(" and ")))
    };
    let mut out = Vec::new();
    for [a, b] in &impurities.correlated_errors {
        let mut r = record(ImpurityKind::ErrorCovariance, vec![a.clone(), b.clone()], None);
        match (at(a), at(b)) {
            (Some(i), Some(j)) if i != j => {
                model.free_error_covariance(i.max(j), i.min(j));
                r.modelled = true;
                r.entries.push((Matrix::Theta, i.max(j), i.min(j)));
            }
            _ => r.note = dropped(&[a, b]),
        }
        out.push(r);
    }
    for c in &impurities.cross_loadings {
        let mut r = record(ImpurityKind::CrossLoading, vec![c.item.clone()], Some(c.also.clone()));
        let k = constructs.iter().position(|(n, _, _)| *n == c.also);
        match (at(&c.item), k) {
            (Some(i), Some(k)) if model.param(Matrix::Lambda, i, k).is_zero() => {
                model.set_loading(i, k, Param::free());
                r.modelled = true;
                r.entries.push((Matrix::Lambda, i, k));
            }
            (Some(_), Some(_)) => r.note = Some("not modelled: the item already loads on that construct".into()),
            (None, _) => r.note = dropped(&[&c.item]),
            (_, None) => r.note = Some(format!("not modelled: construct `{}` is not in the model", c.also)),
        }
        out.push(r);
    }
    let mut methods = Vec::new();
    for (name, items) in &impurities.method_factors {
        let mut r = record(ImpurityKind::MethodFactor, items.clone(), Some(name.clone()));
        let kept: Vec<usize> = items.iter().filter_map(|i| at(i)).collect();
        let lost = dropped(&items.iter().collect::<Vec<_>>());
        let covers = constructs.iter().find(|(_, citems, _)| {
            let held: Vec<&String> = citems.iter().filter(|i| at(i).is_some()).collect();
            held.len() > 1 && held.iter().all(|i| at(i).is_some_and(|x| kept.contains(&x)))
        });
        if kept.len() < 2 {
            r.note = Some(format!(
                "not modelled: fewer than 2 of its items are in the model{}",
                lost.map(|l| format!(" ({})", l.trim_start_matches("not modelled: "))).unwrap_or_default()
            ));
        } else if let Some((c, _, _)) = covers {
            r.note = Some(format!(
                "not modelled: it would hold every item the model keeps of `{c}`, so the two factors could not be told apart"
            ));
        } else {
            let k = model.add_latent(name);
            model.set_latent_covariance(k, k, Param::Fixed(1.0));
            let label = format!("method factor {name}");
            for &i in &kept {
                // Two loadings are identified only through their product: held equal.
                let param = if kept.len() == 2 { Param::labelled(&label) } else { Param::free() };
                model.set_loading(i, k, param);
                r.entries.push((Matrix::Lambda, i, k));
            }
            r.modelled = true;
            r.note = lost.map(|l| l.replace("not modelled: purification dropped", "modelled without"));
            methods.push(name.clone());
        }
        out.push(r);
    }
    (out, methods)
}

/// Fills each modelled declaration's estimates from the fit.
pub fn fill(declared: &mut [DeclaredImpurity], fit: &SemFit, observed: &[String], latents: &[String]) {
    for d in declared.iter_mut() {
        d.estimates = d
            .entries
            .iter()
            .filter_map(|&(matrix, row, col)| {
                let e = fit.entry(matrix, row, col)?;
                let parameter = match matrix {
                    Matrix::Theta => format!("error covariance of `{}` and `{}`", observed[col], observed[row]),
                    _ => format!("loading of `{}` on `{}`", observed[row], latents[col]),
                };
                Some(DeclaredEstimate { parameter, est: e.est, se: e.se, std: e.std })
            })
            .collect();
    }
}

/// Starting values for `model` (the constructs with their declarations) from the ML fit of
/// `pure` (the same constructs without them) to `s`: the shared parameters at that fit, error
/// covariances and cross-loadings at zero, method-factor loadings at 0.3 of the item's standard
/// deviation (at zero their gradient vanishes: the likelihood is flat along a factor with no
/// loadings). `None` (the default start) when the pure model does not converge.
pub fn start_from(pure: &SemModel, model: &SemModel, s: &DMatrix<f64>, n: usize) -> Option<Vec<f64>> {
    let fit = pure.fit(s, n.max(2), &FitOptions::default()).ok().filter(|f| f.converged)?;
    let layout = model.layout().ok()?;
    let constructs = pure.m();
    Some(
        layout
            .names
            .iter()
            .enumerate()
            .map(|(t, name)| {
                if let Some(v) = fit.value(name) {
                    return v;
                }
                match layout.entries.iter().find(|e| e.index == t) {
                    Some(e) if e.matrix == Matrix::Lambda && e.col >= constructs => 0.3 * s[(e.row, e.row)].sqrt(),
                    Some(e) if e.matrix == Matrix::Psi && e.row == e.col => 1.0,
                    _ => 0.0,
                }
            })
            .collect(),
    )
}

/// A parameter fixed at zero that the diagnosis suggests considering.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Suggestion {
    /// An error covariance between two items, or a cross-loading of an item on a construct.
    pub kind: ImpurityKind,
    /// The items: two for an error covariance, one for a cross-loading.
    pub items: Vec<String>,
    /// For a cross-loading: the construct.
    pub construct: Option<String>,
    /// The modification index: the score test of freeing the parameter, chi-square on 1 df
    /// (Sörbom 1989; for DWLS the robust score test).
    pub mi: f64,
    /// The expected parameter change (Saris, Satorra & Sörbom 1987).
    pub epc: f64,
    /// The change completely standardized.
    pub std_epc: Option<f64>,
    /// The standardized size counted as material (0.1 for an error covariance, 0.2 for a
    /// cross-loading).
    pub delta: f64,
    /// Power of the index's test against a change of that size.
    pub power: f64,
    /// The index, the change and the power read together (Saris, Satorra & van der Veld 2009).
    pub judgement: Judgement,
}

/// What a modification index says with its power (Saris, Satorra & van der Veld 2009).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Judgement {
    /// A material misspecification is likely.
    Misspecified,
    /// Detected, but the expected change is below the material size.
    Negligible,
    /// No misspecification of the material size (the test had power to see it).
    NotMisspecified,
    /// The test had too little power to say.
    Inconclusive,
}

impl From<StatsJudgement> for Judgement {
    fn from(j: StatsJudgement) -> Self {
        match j {
            StatsJudgement::Misspecified => Judgement::Misspecified,
            StatsJudgement::Negligible => Judgement::Negligible,
            StatsJudgement::NotMisspecified => Judgement::NotMisspecified,
            StatsJudgement::Inconclusive => Judgement::Inconclusive,
        }
    }
}

/// A residual correlation of the measurement model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ResidualRecord {
    /// The two items.
    pub items: [String; 2],
    /// Observed minus implied correlation.
    pub residual: f64,
    /// The residual over its standard error under the model; `null` where not computed.
    pub z: Option<f64>,
}

/// The diagnosis of a fitted measurement model.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Diagnosis {
    pub suggestions: Vec<Suggestion>,
    pub residuals: Vec<ResidualRecord>,
}

impl Fitted {
    /// The `LISTED` largest modification indices among every error covariance and every
    /// cross-loading on one of the first `constructs` latents still fixed at zero, and the
    /// `LISTED` largest residual correlations (by absolute value).
    pub fn diagnose(&self, input: &ModelInput, constructs: usize) -> Result<Diagnosis, StepError> {
        let stats = |source| StepError::Stats { context: "the diagnosis of the measurement model".into(), source };
        let subset = match (&input.acov, input.plan.method) {
            (Some(v), Method::Dwls) => Some(Subset::new(v.as_ref(), self.index.clone()).map_err(stats)?),
            _ => None,
        };
        let d = match &subset {
            Some(v) => Discrepancy::Dwls { r: &self.s, v },
            None => Discrepancy::Ml { s: &self.s, n: input.n },
        };
        let latents: Vec<usize> = (0..constructs).collect();
        let cands = candidates(&self.model, &latents);
        let mut mods = modification_indices(&self.model, &self.fit, d, &cands).map_err(stats)?;
        mods.sort_by(|a, b| b.mi.total_cmp(&a.mi));
        let names = self.model.latent_names();
        let obs = &self.observed;
        let suggestions = mods
            .iter()
            .take(LISTED)
            .map(|m| {
                let (kind, items, construct) = match m.matrix {
                    Matrix::Lambda => {
                        (ImpurityKind::CrossLoading, vec![obs[m.row].clone()], Some(names[m.col].clone()))
                    }
                    _ => (ImpurityKind::ErrorCovariance, vec![obs[m.col].clone(), obs[m.row].clone()], None),
                };
                Suggestion {
                    kind,
                    items,
                    construct,
                    mi: m.mi,
                    epc: m.epc,
                    std_epc: m.std_epc,
                    delta: m.delta,
                    power: m.power,
                    judgement: m.judgement.into(),
                }
            })
            .collect();
        let mut res = construe_stats::sem::standardized_residuals(&self.model, &self.fit, d).map_err(stats)?;
        res.sort_by(|a, b| b.residual.abs().total_cmp(&a.residual.abs()));
        let residuals = res
            .iter()
            .take(LISTED)
            .map(|r| ResidualRecord { items: [obs[r.col].clone(), obs[r.row].clone()], residual: r.residual, z: r.z })
            .collect();
        Ok(Diagnosis { suggestions, residuals })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spec::types::CrossLoadingSpec;
    use construe_stats::sem::Identification;

    type Constructs = Vec<(String, Vec<String>, Option<f64>)>;

    fn setup() -> (Constructs, SemModel) {
        let constructs = vec![
            ("f".to_string(), vec!["a".to_string(), "b".to_string(), "c".to_string()], None),
            ("g".to_string(), vec!["d".to_string(), "e".to_string(), "h".to_string()], None),
        ];
        let model = SemModel::cfa(&[vec![0, 1, 2], vec![3, 4, 5]], 6, Identification::UnitLatentVariance).unwrap();
        (constructs, model)
    }

    // What purification dropped takes its declarations with it, and each record says why.
    #[test]
    fn dropped_items_take_their_declarations_with_them() {
        let (mut constructs, _) = setup();
        constructs[0].1.retain(|i| i != "a"); // purification dropped `a`
        let observed: Vec<String> = constructs.iter().flat_map(|c| c.1.iter().cloned()).collect();
        let mut model = SemModel::cfa(&[vec![0, 1], vec![2, 3, 4]], 5, Identification::UnitLatentVariance).unwrap();
        let imp = Impurities {
            correlated_errors: vec![["a".into(), "d".into()], ["b".into(), "e".into()]],
            cross_loadings: vec![CrossLoadingSpec { item: "a".into(), also: "g".into() }],
            method_factors: [("m".to_string(), vec!["a".to_string(), "c".to_string()])].into_iter().collect(),
        };
        let (declared, methods) = apply(&mut model, &imp, &constructs, &observed);
        assert_eq!(declared.iter().map(|d| d.modelled).collect::<Vec<_>>(), [false, true, false, false]);
        assert_eq!(declared[0].note.as_deref(), Some("not modelled: purification dropped `a`"));
        assert_eq!(
            declared[3].note.as_deref(),
            Some("not modelled: fewer than 2 of its items are in the model (purification dropped `a`)")
        );
        assert!(methods.is_empty());
        assert!(model.param(Matrix::Theta, 3, 0).is_free(), "b (0) with e (3)");
        assert_eq!(model.m(), 2);
    }

    // A method factor adds a latent of unit variance, uncorrelated with the constructs.
    #[test]
    fn a_method_factor_is_an_uncorrelated_unit_variance_latent() {
        let (constructs, mut model) = setup();
        let observed: Vec<String> = constructs.iter().flat_map(|c| c.1.iter().cloned()).collect();
        let imp = Impurities {
            method_factors: [("m".to_string(), vec!["b".to_string(), "c".to_string(), "e".to_string()])]
                .into_iter()
                .collect(),
            ..Impurities::default()
        };
        let (declared, methods) = apply(&mut model, &imp, &constructs, &observed);
        assert!(declared[0].modelled);
        assert_eq!(methods, ["m"]);
        assert_eq!(model.m(), 3);
        assert_eq!(model.param(Matrix::Psi, 2, 2), &Param::Fixed(1.0));
        assert!(model.param(Matrix::Psi, 2, 0).is_zero() && model.param(Matrix::Psi, 2, 1).is_zero());
        assert!(model.param(Matrix::Psi, 1, 0).is_free(), "the constructs stay correlated");
        for i in [1, 2, 4] {
            assert!(model.param(Matrix::Lambda, i, 2).is_free());
        }
        assert!(model.param(Matrix::Lambda, 1, 0).is_free(), "own loadings kept");
    }
}
