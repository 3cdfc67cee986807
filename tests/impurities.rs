//! Declared impurities (`impurities:`): the spec's checks name the place, and a run models
//! what is declared (estimates with SEs under `measure.declared`) and lists the largest
//! modification indices and residual correlations (`measure.suggestions`, `measure.residuals`).

use serde_json::Value;

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, synthetic_csv};

fn with_spec(spec: &str) -> Case {
    Case::new().spec(spec).file("w1.csv", synthetic_csv(300, 3, SMALL_COLUMNS))
}

#[test]
fn bad_declarations_are_reported_at_their_place() {
    let spec = format!(
        "{SMALL_SPEC}impurities:\n  correlated_errors: [[a1, a1], [a2, zz], [a1, b1], [b1, a1]]\n  cross_loadings: [{{item: a3, also: alpha}}, {{item: b2, also: betta}}]\n  method_factors: {{alpha: [a1, b1], one: [a2], all: [a1, a2, a3]}}\n"
    );
    let out = with_spec(&spec).run(["check", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("a correlated error needs two different items, but both are `a1`")
        .stderr_contains("`zz` in `impurities.correlated_errors` is not an item of any construct")
        .stderr_contains("the correlated error of `b1` and `a1` is declared twice")
        .stderr_contains("item `a3` belongs to construct `alpha` already; `also` must name another construct")
        .stderr_contains("`impurities.cross_loadings` names `betta`, which is not a declared construct")
        .stderr_contains("did you mean `beta`?")
        .stderr_contains("method factor `alpha` has the name of a construct")
        .stderr_contains("method factor `one` has 1 item; it needs at least 2")
        .stderr_contains(
            "method factor `all` holds every item of construct `alpha`, so the two factors cannot be told apart",
        )
        .no_report();
    let expected = "error: `zz` in `impurities.correlated_errors` is not an item of any construct
  at spec.yaml:13:38
  13 |   correlated_errors: [[a1, a1], [a2, zz], [a1, b1], [b1, a1]]
     |                                      ^^
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
}

#[test]
fn unknown_keys_under_impurities_are_found() {
    let spec = format!("{SMALL_SPEC}impurities:\n  correlated_error: [[a1, a2]]\n");
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("unknown key `correlated_error` in `impurities`")
        .stderr_contains("did you mean `correlated_errors`?");
}

#[test]
fn declared_impurities_are_estimated_and_the_rest_diagnosed() {
    let spec = format!(
        "{SMALL_SPEC}  measure: {{}}\n  structure: {{}}\n  resample: {{replicates: 3, seed: 5}}\nimpurities:\n  correlated_errors: [[a1, b1]]\n  cross_loadings: [{{item: a2, also: beta}}]\n  method_factors: {{wording: [a3, b2, b3]}}\n"
    );
    let case = with_spec(&spec);
    case.run(["run", "spec.yaml"]).success();
    let results: Value = serde_json::from_str(&case.read("reports/small-panel/v1/results.json")).unwrap();
    // The structural model is fitted with the same declarations, and every bootstrap replicate too.
    assert_eq!(results["structure"]["members"][0]["converged"], true, "{}", results["structure"]);
    assert_eq!(results["resample"]["failed"], 0, "{}", results["resample"]);
    let m = &results["measure"];
    let declared = m["declared"].as_array().unwrap();
    assert_eq!(declared.len(), 3);
    for d in declared {
        assert_eq!(d["modelled"], true, "{d}");
        for e in d["estimates"].as_array().unwrap() {
            assert!(e["est"].as_f64().unwrap().is_finite(), "{e}");
            assert!(e["se"].as_f64().unwrap() > 0.0, "{e}");
        }
    }
    assert_eq!(declared[0]["kind"], "error_covariance");
    assert_eq!(declared[0]["estimates"][0]["parameter"], "error covariance of `a1` and `b1`");
    assert_eq!(declared[1]["estimates"][0]["parameter"], "loading of `a2` on `beta`");
    assert_eq!(declared[2]["estimates"].as_array().unwrap().len(), 3);
    // The cross-loading is not one of beta's own loadings, and the method factor is no construct.
    assert!(m["loadings"]["beta"].get("a2").is_none());
    assert_eq!(m["latent_covariance"]["names"], serde_json::json!(["alpha", "beta"]));
    let suggestions = m["suggestions"].as_array().unwrap();
    assert!(!suggestions.is_empty() && suggestions.len() <= 10);
    let mi: Vec<f64> = suggestions.iter().map(|s| s["mi"].as_f64().unwrap()).collect();
    assert!(mi.windows(2).all(|w| w[0] >= w[1]), "largest first: {mi:?}");
    // A declared parameter is free, so never suggested.
    assert!(!suggestions.iter().any(|s| s["items"] == serde_json::json!(["a1", "b1"])));
    assert_eq!(m["residuals"].as_array().unwrap().len(), 10);
    let report = case.read("reports/small-panel/v1/report.html");
    assert!(report.contains("Declared impurities"));
    assert!(report.contains("What the model leaves unexplained"));
    assert!(report.contains("exploratory"));
}

#[test]
fn a_two_item_method_factor_has_equal_loadings() {
    let spec = format!("{SMALL_SPEC}  measure: {{}}\nimpurities:\n  method_factors: {{wording: [a3, b2]}}\n");
    let case = with_spec(&spec);
    case.run(["run", "spec.yaml"]).success();
    let results: Value = serde_json::from_str(&case.read("reports/small-panel/v1/results.json")).unwrap();
    let e = results["measure"]["declared"][0]["estimates"].as_array().unwrap().clone();
    assert_eq!(e.len(), 2);
    assert_eq!(e[0]["est"], e[1]["est"], "only the product of two loadings is identified: held equal");
}

/// Z -> X, Z -> Y (X and Y independent given Z), three continuous items each, and a correlated
/// error of 0.3 between `x1` and `y1`.
const FORK_MODEL: &str = "simulate: 1
n: 3000
seed: 16
constructs:
  - {name: z, variance: 1}
  - {name: x, total_variance: 1}
  - {name: y, total_variance: 1}
paths:
  - {from: z, to: x, coefficient: 0.6}
  - {from: z, to: y, coefficient: 0.5}
items:
  - {name: z1, construct: z, loading: 0.8, error_variance: 0.36}
  - {name: z2, construct: z, loading: 0.7, error_variance: 0.51}
  - {name: z3, construct: z, loading: 0.6, error_variance: 0.64}
  - {name: x1, construct: x, loading: 0.8, error_variance: 0.36}
  - {name: x2, construct: x, loading: 0.7, error_variance: 0.51}
  - {name: x3, construct: x, loading: 0.6, error_variance: 0.64}
  - {name: y1, construct: y, loading: 0.8, error_variance: 0.36}
  - {name: y2, construct: y, loading: 0.7, error_variance: 0.51}
  - {name: y3, construct: y, loading: 0.6, error_variance: 0.64}
correlated_errors:
  - {items: [x1, y1], covariance: 0.3}
";

const FORK_SPEC: &str = "construe: 1
title: Fork
data:
  waves:
    - {id: w1, file: fork.csv}
constructs:
  z: {items: [z1, z2, z3]}
  x: {items: [x1, x2, x3]}
  y: {items: [y1, y2, y3]}
analyses:
  measure: {}
  structure: {alpha: 0.05}
";

fn skeleton(results: &Value) -> Vec<String> {
    let mut edges: Vec<String> = results["structure"]["edges"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            let (a, b) = (e["from"].as_str().unwrap(), e["to"].as_str().unwrap());
            if a < b { format!("{a}-{b}") } else { format!("{b}-{a}") }
        })
        .collect();
    edges.sort();
    edges
}

// The structural case of issue 16 end to end: undeclared, the correlated error between an item
// of X and one of Y leaks into the latent X - Y covariance and the search keeps a false X - Y
// edge; declared, it finds the true skeleton. (The same case over 300 seeded replicates:
// `construe-stats/tests/impurity_calibration.rs`.)
#[test]
fn a_declared_correlated_error_keeps_the_structure_true() {
    let case = Case::new().file("model.yaml", FORK_MODEL).spec(FORK_SPEC);
    case.run(["simulate", "model.yaml", "--out", "fork.csv"]).success();
    case.run(["run", "spec.yaml"]).success();
    let undeclared: Value = serde_json::from_str(&case.read("reports/fork/v1/results.json")).unwrap();
    assert_eq!(skeleton(&undeclared), ["x-y", "x-z", "y-z"], "{}", undeclared["structure"]);
    // The undeclared error is the measurement model's largest modification index.
    assert_eq!(undeclared["measure"]["suggestions"][0]["items"], serde_json::json!(["x1", "y1"]));
    let declared_spec = format!("{FORK_SPEC}impurities:\n  correlated_errors: [[x1, y1]]\n");
    let case2 = Case::new().file("model.yaml", FORK_MODEL).spec(&declared_spec);
    case2.run(["simulate", "model.yaml", "--out", "fork.csv"]).success();
    case2.run(["run", "spec.yaml"]).success();
    let declared: Value = serde_json::from_str(&case2.read("reports/fork/v1/results.json")).unwrap();
    assert_eq!(skeleton(&declared), ["x-z", "y-z"], "{}", declared["structure"]);
    let e = &declared["measure"]["declared"][0]["estimates"][0];
    let (est, se) = (e["est"].as_f64().unwrap(), e["se"].as_f64().unwrap());
    assert!((est - 0.3).abs() <= 2.0 * se, "declared error covariance {est} (SE {se}) against 0.3");
}

// Omega of a construct whose items share a method factor: the factor's variance is part of the
// sum's variance, not of the construct's, so omega is (sum of loadings)^2 over the implied
// variance of the sum, below the pure-model formula's value.
#[test]
fn omega_counts_declared_impurities_as_non_construct_variance() {
    let case = Case::new()
        .file("model.yaml", FORK_MODEL)
        .spec(&format!("{FORK_SPEC}impurities:\n  method_factors: {{wording: [x2, x3, y2]}}\n"));
    case.run(["simulate", "model.yaml", "--out", "fork.csv"]).success();
    case.run(["run", "spec.yaml"]).success();
    let r: Value = serde_json::from_str(&case.read("reports/fork/v1/results.json")).unwrap();
    let m = &r["measure"];
    let e: Vec<f64> = ["x1", "x2", "x3"].iter().map(|i| m["error_variances"][i]["est"].as_f64().unwrap()).collect();
    let omega = m["reliability"]["x"]["omega"].as_f64().unwrap();
    let method: Vec<f64> =
        m["declared"][0]["estimates"].as_array().unwrap().iter().map(|e| e["est"].as_f64().unwrap()).collect();
    // The construct's variance is 1 (unit-variance identification), so the loadings in the
    // items' metric are the unstandardized ones.
    let lu: Vec<f64> = ["x1", "x2", "x3"].iter().map(|i| m["loadings"]["x"][i]["est"].as_f64().unwrap()).collect();
    let common = lu.iter().sum::<f64>().powi(2);
    let pure = common / (common + e.iter().sum::<f64>());
    let with_method = common / (common + e.iter().sum::<f64>() + (method[0] + method[1]).powi(2));
    assert!((omega - with_method).abs() < 1e-9, "omega {omega} vs {with_method}");
    assert!(omega < pure, "{omega} < {pure}");
}
