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
        "{SMALL_SPEC}  measure: {{}}\nimpurities:\n  correlated_errors: [[a1, b1]]\n  cross_loadings: [{{item: a2, also: beta}}]\n  method_factors: {{wording: [a3, b2, b3]}}\n"
    );
    let case = with_spec(&spec);
    case.run(["run", "spec.yaml"]).success();
    let results: Value = serde_json::from_str(&case.read("reports/small-panel/v1/results.json")).unwrap();
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
