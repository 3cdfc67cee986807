//! Issue 19: the structural model tests what the search claims (the claims test), collider
//! rules and conflicts in results.json, and sensitivity that leaves out one item at a time.

use crate::harness::Case;

/// a -> c <- b (two exogenous constructs and a collider), c -> d; three items each.
const COLLIDER: &str = "simulate: 1
n: 2000
seed: 1901
constructs:
  - {name: a, variance: 1}
  - {name: b, variance: 1}
  - {name: c, total_variance: 1}
  - {name: d, total_variance: 1}
paths:
  - {from: a, to: c, coefficient: 0.5}
  - {from: b, to: c, coefficient: 0.45}
  - {from: c, to: d, coefficient: 0.55}
items:
  - {name: a1, construct: a, loading: 0.8, error_variance: 0.36}
  - {name: a2, construct: a, loading: 0.75, error_variance: 0.44}
  - {name: a3, construct: a, loading: 0.7, error_variance: 0.51}
  - {name: b1, construct: b, loading: 0.8, error_variance: 0.36}
  - {name: b2, construct: b, loading: 0.75, error_variance: 0.44}
  - {name: b3, construct: b, loading: 0.7, error_variance: 0.51}
  - {name: c1, construct: c, loading: 0.8, error_variance: 0.36}
  - {name: c2, construct: c, loading: 0.75, error_variance: 0.44}
  - {name: c3, construct: c, loading: 0.7, error_variance: 0.51}
  - {name: d1, construct: d, loading: 0.8, error_variance: 0.36}
  - {name: d2, construct: d, loading: 0.75, error_variance: 0.44}
  - {name: d3, construct: d, loading: 0.7, error_variance: 0.51}
";

const SPEC: &str = "construe: 1
title: Collider
data:
  waves: [{id: w, file: data.csv}]
constructs:
  a: {items: [a1, a2, a3]}
  b: {items: [b1, b2, b3]}
  c: {items: [c1, c2, c3]}
  d: {items: [d1, d2, d3]}
analyses:
  structure: {alpha: 0.05}
  sensitivity: {leave_one_out: true}
";

// The structural df are the measurement df plus one per non-adjacent pair (a-b, a-d, b-d),
// the difference test is reported with them, the collider is found by the default
// (conservative) rule, and every conclusion is checked without each of the 12 items.
#[test]
fn claims_test_has_one_df_per_missing_edge_and_leave_one_out_runs() {
    let case = Case::new().file("model.yaml", COLLIDER).file("spec.yaml", SPEC);
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    case.run(["run", "spec.yaml"]).success();
    let r: serde_json::Value = serde_json::from_str(&case.read("reports/collider/v1/results.json")).unwrap();
    let st = &r["structure"];
    assert_eq!(st["colliders"], "conservative");
    let edges: Vec<(String, String, String)> = st["edges"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            (e["from"].as_str().unwrap().into(), e["to"].as_str().unwrap().into(), e["kind"].as_str().unwrap().into())
        })
        .collect();
    for want in [("a", "c"), ("b", "c"), ("c", "d")] {
        assert!(
            edges.iter().any(|e| (e.0.as_str(), e.1.as_str(), e.2.as_str()) == (want.0, want.1, "directed")),
            "{edges:?}"
        );
    }
    let ct = &st["claims_test"];
    let removed = st["removed"].as_array().unwrap().len() as u64;
    assert_eq!(removed, 3);
    assert_eq!(ct["df"].as_u64().unwrap(), removed);
    let (sdf, mdf) = (st["fit"]["df"].as_u64().unwrap(), r["measure"]["fit"]["df"].as_u64().unwrap());
    assert_eq!(sdf, mdf + removed, "structural df = measurement df + non-adjacent pairs");
    assert_eq!((ct["structural_df"].as_u64(), ct["measurement_df"].as_u64()), (Some(sdf), Some(mdf)));
    assert!(ct["p"].as_f64().unwrap() > 0.001, "the true graph's claims: {ct}");
    assert!(st["conflicts"].is_array() && st["warnings"].is_array());
    let s = &r["sensitivity"];
    assert_eq!(s["left_out"].as_array().unwrap().len(), 12);
    assert_eq!(s["failed"], 0, "{}", s["failures"]);
    for c in s["conclusions"].as_array().unwrap() {
        let n = c["holds_without"].as_array().unwrap().len() + c["fails_without"].as_array().unwrap().len();
        assert_eq!(n as u64 + s["failed"].as_u64().unwrap(), 12, "{c}");
    }
    let edge = s["conclusions"].as_array().unwrap().iter().find(|c| c["what"] == "edge c → d").unwrap();
    assert_eq!(edge["holds_without"].as_array().unwrap().len(), 12, "a strong edge survives every omission: {edge}");
    let report = case.read("reports/collider/v1/report.md");
    assert!(report.contains("Joint test of the search's claims"), "{report}");
    assert!(report.contains("does it survive leaving out each item (12 refits)"), "{report}");
}

// A `sensitivity` block with nothing to vary is an error at `check`, naming why, with a hint.
#[test]
fn sensitivity_with_nothing_to_vary_is_an_error() {
    let spec = SPEC.replace("sensitivity: {leave_one_out: true}", "sensitivity: {draws: 50}");
    let case = Case::new().file("model.yaml", COLLIDER).file("spec.yaml", &spec);
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    case.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: `sensitivity` has nothing to vary: no reliability grid or prior, no `alpha` list, and `leave_one_out` is off")
        .stderr_contains("at spec.yaml:12:3")
        .stderr_contains("add `leave_one_out: true`");
    let two = SPEC
        .replace("[a1, a2, a3]", "[a1, a2]")
        .replace("[b1, b2, b3]", "[b1, b2]")
        .replace("[c1, c2, c3]", "[c1, c2]")
        .replace("[d1, d2, d3]", "[d1, d2]");
    let case = Case::new().file("model.yaml", COLLIDER).file("spec.yaml", &two);
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    case.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("`leave_one_out` needs a construct with at least 3 items");
}
