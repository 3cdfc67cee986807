//! The tetrad test of `purify` and `discover` (issue 15): `auto` tests the fitted correlation
//! matrix by the delta method with its sampling covariance, distribution-free from the
//! respondents' answers (normal theory for a summary matrix); `wishart` is refused when an item
//! is ordinal; the report says which test ran and why.

use serde_json::Value;

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, synthetic_csv};

fn small(spec: &str) -> Case {
    Case::new().spec(spec).file("w1.csv", synthetic_csv(300, 5, SMALL_COLUMNS))
}

fn results(case: &Case, slug: &str) -> Value {
    serde_json::from_str(&case.read(&format!("reports/{slug}/v1/results.json"))).unwrap()
}

#[test]
fn wishart_on_items_declared_ordinal_fails_at_check() {
    let spec = SMALL_SPEC.replace("  id_column: rid\n", "  id_column: rid\n  ordinal: [a1, b2]\n")
        + "  purify: {test: wishart}\n  discover: {items: [a1, a2, a3, x], test: wishart}\n";
    let out = small(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    let expected = "error: `purify` with `test: wishart` assumes normally distributed answers, but these items are ordinal: a1, b2
  at spec.yaml:13:18
  13 |   purify: {test: wishart}
     |                  ^^^^^^^
  hint: drop `test: wishart` (the default, `auto`, tests the polychoric matrix by the delta method with its sampling covariance from the respondents' answers)
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
    out.stderr_contains("error: `discover` with `test: wishart` assumes normally distributed answers, but these items are ordinal: a1\n  at spec.yaml:14:44");
}

#[test]
fn wishart_on_items_the_data_show_ordinal_fails_at_run() {
    let spec = SMALL_SPEC.to_string() + "  purify: {test: wishart}\n";
    small(&spec)
        .run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains(
            "`purify` with `test: wishart` assumes normally distributed answers, but these items are ordinal: a1, a2, a3, b1, b2, b3; drop `test: wishart`",
        )
        .no_report();
}

#[test]
fn wishart_runs_on_continuous_items() {
    let spec =
        SMALL_SPEC.replace("  id_column: rid\n", "  id_column: rid\n  ordinal: none\n") + "  purify: {test: wishart}\n";
    let case = small(&spec);
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "small-panel");
    assert_eq!(r["purify"]["test"], "wishart");
    assert_eq!(r["purify"]["method"]["test"], "wishart");
    assert_eq!(r["purify"]["method"]["theory"], "normal");
    assert_eq!(r["purify"]["method"]["matrix"], "Pearson correlations");
}

#[test]
fn the_default_test_is_the_delta_method_on_the_fitted_matrix_and_says_why() {
    let spec = SMALL_SPEC.to_string() + "  purify: {}\n  discover: {}\n";
    let case = small(&spec);
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "small-panel");
    for step in ["purify", "discover"] {
        let m = &r[step]["method"];
        assert_eq!(r[step]["test"], "auto");
        assert_eq!(m["test"], "delta", "{step}");
        assert_eq!(m["theory"], "distribution_free");
        assert_eq!(m["matrix"], "polychoric and polyserial correlations");
        assert_eq!(m["reason"], "some items are ordinal");
    }
    // minijinja escapes the apostrophe in HTML as `&#x27;`.
    let sentence = "Tetrads tested by the delta method (Bollen and Ting 1993) on the polychoric and polyserial correlations with their sampling covariance from the respondents&#x27; answers (distribution-free), because some items are ordinal.";
    let html = case.read("reports/small-panel/v1/report.html");
    assert!(html.contains(sentence), "{html}");
    let md = case.read("reports/small-panel/v1/report.md");
    assert!(md.contains("sampling covariance from the respondents"), "{md}");
}

#[test]
fn a_summary_matrix_gets_the_normal_theory_delta_test() {
    let matrix = ",a1,a2,a3,b1,b2,b3
a1,1,0.5,0.4,0.2,0.2,0.1
a2,0.5,1,0.45,0.2,0.15,0.1
a3,0.4,0.45,1,0.1,0.2,0.2
b1,0.2,0.2,0.1,1,0.5,0.4
b2,0.2,0.15,0.2,0.5,1,0.45
b3,0.1,0.1,0.2,0.4,0.45,1
";
    let spec = "construe: 1
title: Published
data:
  matrix: {file: m.csv, kind: correlation, n: 300}
constructs:
  alpha: {items: [a1, a2, a3]}
  beta: {items: [b1, b2, b3]}
analyses:
  covariance: {}
  purify: {}
";
    let case = Case::new().spec(spec).file("m.csv", matrix);
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "published");
    let m = &r["purify"]["method"];
    assert_eq!(m["test"], "delta");
    assert_eq!(m["theory"], "normal");
    assert_eq!(m["matrix"], "summary correlation matrix");
    assert_eq!(r["purify"]["n"], 300);
    let html = case.read("reports/published/v1/report.html");
    assert!(html.contains("normal-theory sampling covariance of its correlations at n = 300"), "{html}");
}

#[test]
fn wishart_is_judged_on_the_items_it_tests() {
    // b1 is ordinal, but discover's pool holds only continuous items: allowed, at check and run.
    let spec = SMALL_SPEC.replace("  id_column: rid\n", "  id_column: rid\n  ordinal: [b1]\n")
        + "  discover: {items: [a1, a2, a3, b2, x], test: wishart}\n";
    let case = small(&spec);
    case.run(["check", "spec.yaml"]).success();
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "small-panel");
    assert_eq!(r["discover"]["method"]["test"], "wishart");
    assert_eq!(r["discover"]["method"]["matrix"], "Pearson correlations");
}

#[test]
fn the_default_test_after_the_joint_ordinal_estimator_is_refused_with_a_hint() {
    // `ordinal: full` leaves no respondent contributions for the polychoric correlations.
    let spec = SMALL_SPEC.replace("covariance: {missing: pairwise}", "covariance: {missing: pairwise, ordinal: full}")
        + "  purify: {}\n";
    small(&spec)
        .run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: a distribution-free sampling covariance is not available")
        .stderr_contains("hint: set the covariance step's `ordinal: two_step` (the default)")
        .no_report();
}

// Issue 16: a facet must list items of its own construct, and a tolerance lies in [0, 0.5];
// both are positioned errors at `check`.
#[test]
fn facets_and_tolerances_are_checked() {
    let spec = SMALL_SPEC.replace(
        "  beta: {items: [b1, b2, b3, x]}\n",
        "  beta: {items: [b1, b2, b3, x], facets: {core: [b1, a1], empty: []}}\n",
    ) + "  purify: {tolerance: 0.7}\n  discover: {tolerance: -0.1}\n";
    let out = small(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    out.stderr_contains(
        "error: facet `core` of construct `beta` lists `a1`, which is not an item of `beta`\n  at spec.yaml:9:54",
    );
    out.stderr_contains("error: facet `empty` of construct `beta` has no items");
    out.stderr_contains("`purify.tolerance` must lie in [0, 0.5] (correlation units; 0 is the exact test), found 0.7");
    out.stderr_contains(
        "`discover.tolerance` must lie in [0, 0.5] (correlation units; 0 is the exact test), found -0.1",
    );
}

// Issue 16: the size criterion is the default; results.json records the rule, each
// construct's misfit, remaining tetrads and warnings, and the report explains the rule in one
// sentence and shows the largest remaining tetrad beside the kept items.
#[test]
fn the_size_criterion_is_reported() {
    let spec = SMALL_SPEC
        .replace("  beta: {items: [b1, b2, b3, x]}\n", "  beta: {items: [b1, b2, b3, x], facets: {core: [b1, b2]}}\n")
        + "  purify: {}\n  discover: {}\n";
    let case = small(&spec);
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "small-panel");
    let p = &r["purify"];
    assert_eq!(p["tolerance"], 0.02);
    assert_eq!(p["misfit_threshold"], 0.1);
    let beta = &p["constructs"]["beta"];
    assert_eq!(beta["misfit"].as_object().unwrap().len(), beta["kept"].as_array().unwrap().len());
    let remaining = beta["remaining"].as_array().unwrap();
    assert!(!remaining.is_empty() && remaining.len() <= 3, "{beta}");
    let sentence = remaining[0]["sentence"].as_str().unwrap();
    assert!(sentence.starts_with("largest remaining tetrad "), "{sentence}");
    assert!(remaining[0]["tetrad"]["se"].as_f64().unwrap() > 0.0);
    assert!(beta["warnings"].is_array());
    assert_eq!(r["discover"]["tolerance"], 0.02);
    assert!(r["discover"]["evidence"].as_str().unwrap().contains("significantly outside 0.02"));
    assert!(r["discover"]["withheld"].is_array());
    let md = case.read("reports/small-panel/v1/report.md");
    assert!(md.contains("significantly larger than 0.02 in absolute value"), "{md}");
    assert!(md.contains("largest remaining tetrad"), "{md}");
}
