//! What `structure` records beside its graph and fits: the joint test of the search's claims
//! (the structural model of a DAG against the measurement model), the triples whose marks
//! conflict, and warnings about implausible estimates. Central types: `ClaimsTest`,
//! `ConflictRecord`, `StructureWarning`. Words only; the numbers come from `construe_stats`.

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use crate::spec::types::Colliders;
use construe_stats::search::{
    ColliderRule, PcResult, TripleConflict, TripleConflictKind, TripleKind, triple_conflicts,
};
use construe_stats::sem::{Correction, DifferenceMethod, Fitted, HeywoodKind, Matrix, SemFit, difference};

/// The spec's collider rule as the search's.
pub fn collider_rule(c: Colliders) -> ColliderRule {
    match c {
        Colliders::Conservative => ColliderRule::Conservative,
        Colliders::Majority => ColliderRule::Majority,
        Colliders::Standard => ColliderRule::Standard,
    }
}

/// How the difference statistic was formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum ClaimsMethod {
    /// The difference of the two normal-theory likelihood-ratio statistics.
    LikelihoodRatio,
    /// The scaled difference of Satorra & Bentler (2001), from both models' statistics and
    /// their corrections (robust estimation: ML with sandwich SEs, or DWLS).
    ScaledDifference,
    /// As `scaled_difference`, but the difference's scaling came out at or below zero (small
    /// samples; Satorra & Bentler 2010), so the structural model's own scaling was used.
    ScaledByStructural,
}

/// The joint test of the search's claims: every pair of constructs the search left
/// non-adjacent is a zero in the structural model of the DAG; the chi-square difference
/// between that model and the measurement model (all constructs correlated) tests them all at once.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ClaimsTest {
    /// The difference statistic.
    pub chisq: f64,
    /// Its degrees of freedom: the number of non-adjacent pairs (structural minus measurement df).
    pub df: usize,
    /// Upper chi-square tail; `null` when the search removed no adjacency (nothing to test).
    pub p: Option<f64>,
    /// How the statistic was formed.
    pub method: ClaimsMethod,
    /// Degrees of freedom of the measurement model.
    pub measurement_df: usize,
    /// Degrees of freedom of the structural model.
    pub structural_df: usize,
}

/// The claims test of a structural fit against the measurement fit (each with its correction,
/// or neither); `None` when the difference cannot be formed (the fits disagree on n).
pub fn claims_test(
    structural: (&SemFit, Option<&Correction>),
    measurement: (&SemFit, Option<&Correction>),
) -> Option<ClaimsTest> {
    let t = difference(
        Fitted { fit: structural.0, correction: structural.1 },
        Fitted { fit: measurement.0, correction: measurement.1 },
    )
    .ok()?;
    Some(ClaimsTest {
        chisq: t.chisq,
        df: t.df,
        p: t.p,
        method: match t.method {
            DifferenceMethod::LikelihoodRatio => ClaimsMethod::LikelihoodRatio,
            DifferenceMethod::ScaledDifference => ClaimsMethod::ScaledDifference,
            DifferenceMethod::ScaledByRestricted => ClaimsMethod::ScaledByStructural,
        },
        measurement_df: measurement.0.df,
        structural_df: structural.0.df,
    })
}

/// What conflicts about a triple.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum ConflictKind {
    /// Another collider wants the opposite arrowhead on one of its edges; that edge is left undirected.
    CollidersDisagree,
    /// The knowledge orients or forbids one of its arrowheads the other way.
    AgainstKnowledge,
    /// Judged a non-collider, yet both edges point into the middle construct (from other triples).
    NonColliderOriented,
    /// The separating sets of `a` and `b` disagree on whether `c` is among them.
    SepsetsDisagree,
}

/// An unshielded triple `a - c - b` whose marks conflict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ConflictRecord {
    /// One end.
    pub a: String,
    /// The middle construct.
    pub c: String,
    /// The other end.
    pub b: String,
    /// What conflicts.
    pub kind: ConflictKind,
    /// The triple's verdict under the search's rule (`collider`, `non_collider`, `ambiguous`).
    pub verdict: String,
    /// The contested edge(s), each `[from, to]` (for a refused arrowhead, the direction refused).
    pub edges: Vec<[String; 2]>,
    /// For `sepsets_disagree`: how many of the separating sets contain `c`, of how many.
    pub sepsets: Option<[usize; 2]>,
    /// In words, with how the rule resolved it.
    pub explanation: String,
}

/// Every conflicting triple of the search, in words.
pub fn conflict_records(result: &PcResult, names: &[String]) -> Vec<ConflictRecord> {
    triple_conflicts(result).iter().map(|t| conflict_record(t, names, result.colliders)).collect()
}

fn conflict_record(t: &TripleConflict, names: &[String], rule: ColliderRule) -> ConflictRecord {
    let n = |i: usize| names[i].clone();
    let (a, c, b) = (n(t.a), n(t.c), n(t.b));
    let verdict = match t.verdict {
        TripleKind::Collider => "collider",
        TripleKind::NonCollider => "non_collider",
        TripleKind::Ambiguous => "ambiguous",
    };
    let (kind, sepsets, explanation) = match t.kind {
        TripleConflictKind::CollidersDisagree { from, to } => (
            ConflictKind::CollidersDisagree,
            None,
            format!(
                "{a} → {c} ← {b} is a collider, but another collider wants {} → {}; the edge is left undirected",
                n(to),
                n(from)
            ),
        ),
        TripleConflictKind::AgainstKnowledge { from, to } => (
            ConflictKind::AgainstKnowledge,
            None,
            format!(
                "{a} → {c} ← {b} is a collider, but the knowledge refuses {} → {}; the knowledge wins",
                n(from),
                n(to)
            ),
        ),
        TripleConflictKind::NonColliderOriented => (
            ConflictKind::NonColliderOriented,
            None,
            format!(
                "{c} separated {a} and {b}, so {a} – {c} – {b} is no collider, yet other triples point both edges into {c}"
            ),
        ),
        TripleConflictKind::SepsetsDisagree { with_c, total } => {
            let resolved = match (rule, t.verdict) {
                (ColliderRule::Majority, TripleKind::Collider) => "the majority rule makes it a collider",
                (ColliderRule::Majority, TripleKind::NonCollider) => "the majority rule makes it a non-collider",
                _ => "left unoriented",
            };
            (
                ConflictKind::SepsetsDisagree,
                Some([with_c, total]),
                format!("{with_c} of {total} sets separating {a} and {b} contain {c}, the rest do not; {resolved}"),
            )
        }
    };
    ConflictRecord {
        edges: t.edges().into_iter().map(|(x, y)| [n(x), n(y)]).collect(),
        a,
        c,
        b,
        kind,
        verdict: verdict.into(),
        sepsets,
        explanation,
    }
}

/// What is implausible about an estimate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum WarningKind {
    /// A standardized effect beyond ±1.
    StandardizedEffectBeyondOne,
    /// Variance explained above 1 or below 0.
    RSquaredOutOfRange,
    /// A variance estimated at or below zero (Heywood case).
    NegativeVariance,
    /// A standardized loading or error correlation beyond ±1.
    StandardizedBeyondOne,
    /// The implied covariance of the constructs is not positive definite.
    LatentCovarianceNotPositiveDefinite,
    /// A latent correlation beyond ±1.
    CorrelationBeyondOne,
    /// Two constructs correlated above 0.9: they may not be distinct (discriminant validity).
    ConstructsNotDistinct,
}

/// A warning about an implausible estimate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct StructureWarning {
    /// What is implausible.
    pub kind: WarningKind,
    /// The estimate, in words.
    pub what: String,
    /// Its value.
    pub value: f64,
    /// One sentence for the report.
    pub message: String,
}

/// The warnings of one structural fit: standardized effects beyond ±1, R² outside [0, 1], and
/// its Heywood cases. `names`: constructs; `observed`: items in model order.
pub fn fit_warnings(
    fit: &SemFit,
    names: &[String],
    observed: &[String],
    r_squared: &indexmap::IndexMap<String, f64>,
) -> Vec<StructureWarning> {
    let mut out = Vec::new();
    for p in &fit.parameters {
        if p.matrix == Matrix::Beta
            && p.free.is_some()
            && let Some(std) = p.std
            && std.abs() > 1.0
        {
            let what = format!("effect {} → {}", names[p.col], names[p.row]);
            out.push(StructureWarning {
                kind: WarningKind::StandardizedEffectBeyondOne,
                message: format!(
                    "the standardized {what} is {std:.2}, beyond ±1: a suppression or collinearity artefact, not a plausible effect"
                ),
                what,
                value: std,
            });
        }
    }
    for (name, r2) in r_squared {
        if !(0.0..=1.0).contains(r2) {
            out.push(StructureWarning {
                kind: WarningKind::RSquaredOutOfRange,
                what: format!("R² of {name}"),
                value: *r2,
                message: format!(
                    "the variance explained in {name} is {r2:.2}, outside 0 to 1: the solution is improper"
                ),
            });
        }
    }
    // Latents beyond the constructs are declared method factors (`impurities:`).
    let latent = |k: usize| names.get(k).map_or("a method factor", String::as_str);
    for h in &fit.heywood {
        let (kind, what) = match (h.kind, h.entry) {
            (HeywoodKind::NonPositiveErrorVariance, Some((_, r, _))) => {
                (WarningKind::NegativeVariance, format!("error variance of {}", observed[r]))
            }
            (HeywoodKind::NonPositiveLatentVariance, Some((_, r, _))) => {
                (WarningKind::NegativeVariance, format!("(residual) variance of {}", latent(r)))
            }
            (HeywoodKind::StandardizedLoadingAboveOne, Some((_, r, c))) => {
                (WarningKind::StandardizedBeyondOne, format!("loading of {} on {}", observed[r], latent(c)))
            }
            (HeywoodKind::ErrorCorrelationAboveOne, Some((_, r, c))) => (
                WarningKind::StandardizedBeyondOne,
                format!("error correlation of {} and {}", observed[r], observed[c]),
            ),
            _ => (WarningKind::LatentCovarianceNotPositiveDefinite, "covariance of the constructs".to_string()),
        };
        out.push(StructureWarning {
            kind,
            message: format!("improper estimate (Heywood case) in the structural model: {what} {:.3}", h.value),
            what,
            value: h.value,
        });
    }
    out
}

/// Above this latent correlation or HTMT two constructs may not be distinct (Henseler, Ringle
/// & Sarstedt 2015's limit for conceptually similar constructs).
pub const NOT_DISTINCT: f64 = 0.9;

/// The measurement model's warnings: latent correlations beyond ±1, and pairs of constructs
/// that may not be distinct (|correlation| above `NOT_DISTINCT`, or |HTMT| of their items'
/// correlations above it). `r`: the covariance step's item correlations over `items`.
pub fn measure_warnings(
    m: &super::measure::MeasureOutput,
    r: &nalgebra::DMatrix<f64>,
    items: &[String],
) -> Vec<StructureWarning> {
    correlation_warnings(&m.latent_correlation.names, &m.latent_correlation.matrix, &m.constructs, r, items)
}

/// `measure_warnings` from the latent correlations (`names`, `matrix`) and the constructs' items.
pub fn correlation_warnings(
    names: &[String],
    matrix: &[Vec<f64>],
    constructs: &indexmap::IndexMap<String, Vec<String>>,
    r: &nalgebra::DMatrix<f64>,
    items: &[String],
) -> Vec<StructureWarning> {
    let mut out = Vec::new();
    for (i, row) in matrix.iter().enumerate() {
        for (j, &c) in row.iter().enumerate().take(i) {
            let what = format!("correlation of {} and {}", names[j], names[i]);
            if c.abs() > 1.0 {
                out.push(StructureWarning {
                    kind: WarningKind::CorrelationBeyondOne,
                    message: format!("the latent {what} is {c:.2}, beyond ±1: the solution is improper"),
                    what,
                    value: c,
                });
            } else if c.abs() > NOT_DISTINCT {
                out.push(StructureWarning {
                    kind: WarningKind::ConstructsNotDistinct,
                    message: format!(
                        "the latent {what} is {c:.2}: the two may not be distinct constructs (discriminant validity)"
                    ),
                    what,
                    value: c,
                });
            }
        }
    }
    let groups: Vec<Vec<usize>> =
        constructs.values().map(|g| g.iter().filter_map(|i| items.iter().position(|a| a == i)).collect()).collect();
    if let Ok(h) = construe_stats::discriminant::htmt(r, &groups) {
        let keys: Vec<&String> = constructs.keys().collect();
        for i in 0..keys.len() {
            for j in 0..i {
                if let Some(v) = h[i][j].filter(|v| v.abs() > NOT_DISTINCT) {
                    let what = format!("HTMT of {} and {}", keys[j], keys[i]);
                    out.push(StructureWarning {
                        kind: WarningKind::ConstructsNotDistinct,
                        message: format!(
                            "the heterotrait-monotrait ratio of {} and {} is {v:.2}, above {NOT_DISTINCT:.2}: their items may not measure distinct constructs (Henseler, Ringle & Sarstedt 2015)",
                            keys[j], keys[i]
                        ),
                        what,
                        value: v,
                    });
                }
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use construe_stats::sem::{FitOptions, Identification, SemModel};
    use indexmap::IndexMap;
    use nalgebra::DMatrix;

    fn names(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    // Suppression: x and y correlate 0.8, z correlates 0.8 with x and 0.45 with y (one item per
    // construct, error variance fixed at a tenth, so the latent correlations are 0.89, 0.89 and
    // 0.5). The fit of x -> z <- y has a standardized effect of x beyond 1 and is flagged; a
    // plausible fit (z correlating 0.5 with x) is not.
    #[test]
    fn implausible_effects_and_r_squared_are_flagged() {
        let c = |rxz: f64, ryz: f64| DMatrix::from_row_slice(3, 3, &[1.0, 0.8, rxz, 0.8, 1.0, ryz, rxz, ryz, 1.0]);
        let fit_of = |s: &DMatrix<f64>| {
            let mut m =
                SemModel::sem(&[vec![0], vec![1], vec![2]], 3, Identification::UnitLatentVariance, &[(0, 2), (1, 2)])
                    .unwrap();
            for i in 0..3 {
                m.fix_error_variance(i, 0.1);
            }
            m.fit(s, 400, &FitOptions::default()).unwrap()
        };
        let (ns, obs) = (names(&["x", "y", "z"]), names(&["i1", "i2", "i3"]));
        let bad = fit_of(&c(0.8, 0.45));
        let w = fit_warnings(&bad, &ns, &obs, &IndexMap::new());
        assert!(
            w.iter().any(|w| w.kind == WarningKind::StandardizedEffectBeyondOne && w.what == "effect x → z"),
            "{w:?}"
        );
        let good = fit_of(&c(0.5, 0.45));
        assert!(fit_warnings(&good, &ns, &obs, &IndexMap::new()).is_empty());
        let r2: IndexMap<String, f64> = [("z".to_string(), 1.07)].into_iter().collect();
        let w = fit_warnings(&good, &ns, &obs, &r2);
        assert_eq!(w.len(), 1);
        assert_eq!(w[0].kind, WarningKind::RSquaredOutOfRange);
    }

    // A negative error variance: three indicators with r12 r13 / r23 = 0.8 x 0.7 / 0.5 = 1.12,
    // the squared loading of the first (exactly identified), so its error variance is -0.12.
    #[test]
    fn negative_variances_are_flagged() {
        let s = DMatrix::from_row_slice(3, 3, &[1.0, 0.8, 0.7, 0.8, 1.0, 0.5, 0.7, 0.5, 1.0]);
        let m = SemModel::cfa(&[vec![0, 1, 2]], 3, Identification::UnitLatentVariance).unwrap();
        let fit = m.fit(&s, 300, &FitOptions::default()).unwrap();
        let w = fit_warnings(&fit, &names(&["f"]), &names(&["a", "b", "c"]), &IndexMap::new());
        assert!(
            w.iter().any(|w| w.kind == WarningKind::NegativeVariance
                && w.what == "error variance of a"
                && (w.value + 0.12).abs() < 1e-3),
            "{w:?}"
        );
    }

    // Constructs correlated 0.95 with items whose HTMT is above 0.90 are flagged twice (latent
    // correlation and HTMT); a correlation beyond 1 is improper; distinct constructs pass.
    #[test]
    fn constructs_that_may_not_be_distinct_are_flagged() {
        let ns = names(&["f", "g"]);
        let constructs: IndexMap<String, Vec<String>> =
            [("f".to_string(), names(&["a", "b"])), ("g".to_string(), names(&["c", "d"]))].into_iter().collect();
        let items = names(&["a", "b", "c", "d"]);
        let r = |within: f64, between: f64| {
            DMatrix::from_fn(4, 4, |i, j| {
                if i == j {
                    1.0
                } else if i / 2 == j / 2 {
                    within
                } else {
                    between
                }
            })
        };
        let w = correlation_warnings(&ns, &[vec![1.0, 0.95], vec![0.95, 1.0]], &constructs, &r(0.5, 0.48), &items);
        let kinds: Vec<(WarningKind, &str)> = w.iter().map(|w| (w.kind, w.what.as_str())).collect();
        assert_eq!(
            kinds,
            vec![
                (WarningKind::ConstructsNotDistinct, "correlation of f and g"),
                (WarningKind::ConstructsNotDistinct, "HTMT of f and g")
            ]
        );
        assert!((w[1].value - 0.96).abs() < 1e-12);
        let w = correlation_warnings(&ns, &[vec![1.0, 1.02], vec![1.02, 1.0]], &constructs, &r(0.5, 0.2), &items);
        assert_eq!(w.len(), 1);
        assert_eq!(w[0].kind, WarningKind::CorrelationBeyondOne);
        assert!(
            correlation_warnings(&ns, &[vec![1.0, 0.6], vec![0.6, 1.0]], &constructs, &r(0.5, 0.2), &items).is_empty()
        );
    }
}
