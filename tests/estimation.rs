//! The estimation choice of `measure` and `structure` (issue 15): `auto` from the item types,
//! the spec's explicit choices, the combinations that cannot be done, and the one-sentence
//! statement in results.json and the report.

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, synthetic_csv};

fn case(spec: &str) -> Case {
    Case::new().spec(spec).file("w1.csv", synthetic_csv(300, 5, SMALL_COLUMNS))
}

fn results(case: &Case) -> serde_json::Value {
    serde_json::from_str(&case.read("reports/small-panel/v1/results.json")).unwrap()
}

// Five-point items (ordinal by `auto`) and one continuous item: DWLS on polychoric and
// polyserial correlations, sandwich SEs, the scaled-and-shifted statistic, said in the report.
#[test]
fn ordinal_items_get_dwls_and_the_adjusted_statistic() {
    let c = case(&(SMALL_SPEC.to_string() + "  measure: {}\n"));
    c.run(["run", "spec.yaml"]).success();
    let r = results(&c);
    let e = &r["measure"]["estimation"];
    assert_eq!(e["method"], "dwls");
    assert_eq!(e["standard_errors"], "sandwich");
    assert_eq!(e["statistic"], "scaled_shifted");
    assert_eq!(
        r["measure"]["fit"]["chisq"],
        e["correction"]["scale"].as_f64().unwrap() * e["correction"]["naive"].as_f64().unwrap()
            + e["correction"]["shift"].as_f64().unwrap()
    );
    let statement = e["statement"].as_str().unwrap();
    assert!(statement.starts_with(
        "Measurement model estimated by diagonally weighted least squares on polychoric and polyserial correlations (n = 300 respondents)"
    ), "{statement}");
    assert!(c.read("reports/small-panel/v1/report.md").contains("diagonally weighted least squares on polychoric"));
    assert!(c.read("reports/small-panel/v1/report.html").contains("diagonally weighted least squares on polychoric"));
}

// All items continuous: ML with sandwich SEs and the scaled statistic; asking for information
// SEs gives the normal-theory fit, with other SEs and the uncorrected statistic.
#[test]
fn continuous_items_get_ml_with_sandwich_errors_unless_asked_otherwise() {
    let spec = SMALL_SPEC.replace("  id_column: rid\n", "  id_column: rid\n  ordinal: none\n");
    let robust = case(&(spec.clone() + "  measure: {}\n"));
    robust.run(["run", "spec.yaml"]).success();
    let r = results(&robust);
    let e = &r["measure"]["estimation"];
    assert_eq!(
        (e["method"].as_str(), e["standard_errors"].as_str(), e["statistic"].as_str()),
        (Some("ml"), Some("sandwich"), Some("scaled"))
    );
    let normal = case(&(spec + "  measure: {estimation: {standard_errors: information}}\n"));
    normal.run(["run", "spec.yaml"]).success();
    let n = results(&normal);
    assert_eq!(n["measure"]["estimation"]["statistic"], "none");
    assert!(n["measure"]["estimation"]["correction"].is_null());
    let (a, b) = (&r["measure"]["loadings"]["alpha"]["a1"], &n["measure"]["loadings"]["alpha"]["a1"]);
    assert_eq!(a["est"], b["est"], "the same ML estimates");
    assert_ne!(a["se"], b["se"], "other standard errors");
    assert_eq!(n["measure"]["fit"]["chisq"], e["correction"]["naive"]);
}

// ML sandwich SEs need the covariances' distribution-free sampling covariance, which ordinal
// items do not have: a clear error with a hint, exit 1.
#[test]
fn sandwich_errors_for_ml_on_ordinal_items_are_refused() {
    let c = case(&(SMALL_SPEC.to_string() + "  measure: {estimation: {method: ml, standard_errors: sandwich}}\n"));
    c.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("sandwich standard errors for ML with ordinal items is not available for these data: use `method: dwls` (or `auto`), or `standard_errors: information`");
}
