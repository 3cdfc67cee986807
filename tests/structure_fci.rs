//! `structure.search: fci | both` end to end: a hidden common cause planted between two
//! constructs (the hidden construct has no items) is reported as one; `both` keeps PC's result
//! as `search: pc` gives it; `sensitivity` with `search: fci` is refused at `check`.

use crate::harness::Case;

/// Hidden h causes a and b; c causes a, d causes b; no edge a - b. Four items per measured
/// construct; h has none. True PAG: c o-> a <-> b <-o d (Spirtes, Glymour & Scheines 2000, ch. 6).
const MODEL: &str = "simulate: 1
n: 2000
seed: 1919
constructs:
  - {name: c, variance: 1}
  - {name: d, variance: 1}
  - {name: h, variance: 1}
  - {name: a, total_variance: 1}
  - {name: b, total_variance: 1}
paths:
  - {from: c, to: a, coefficient: 0.5}
  - {from: h, to: a, coefficient: 0.5}
  - {from: h, to: b, coefficient: 0.5}
  - {from: d, to: b, coefficient: 0.5}
items:
  - {name: c1, construct: c, loading: 0.8, error_variance: 0.36}
  - {name: c2, construct: c, loading: 0.75, error_variance: 0.4375}
  - {name: c3, construct: c, loading: 0.7, error_variance: 0.51}
  - {name: a1, construct: a, loading: 0.8, error_variance: 0.36}
  - {name: a2, construct: a, loading: 0.75, error_variance: 0.4375}
  - {name: a3, construct: a, loading: 0.7, error_variance: 0.51}
  - {name: b1, construct: b, loading: 0.8, error_variance: 0.36}
  - {name: b2, construct: b, loading: 0.75, error_variance: 0.4375}
  - {name: b3, construct: b, loading: 0.7, error_variance: 0.51}
  - {name: d1, construct: d, loading: 0.8, error_variance: 0.36}
  - {name: d2, construct: d, loading: 0.75, error_variance: 0.4375}
  - {name: d3, construct: d, loading: 0.7, error_variance: 0.51}
";

fn spec(title: &str, search: &str, extra: &str) -> String {
    format!(
        "construe: 1
title: {title}
data:
  waves: [{{id: w, file: data.csv}}]
constructs:
  c: {{items: [c1, c2, c3]}}
  a: {{items: [a1, a2, a3]}}
  b: {{items: [b1, b2, b3]}}
  d: {{items: [d1, d2, d3]}}
analyses:
  structure: {{alpha: 0.05{search}}}
{extra}"
    )
}

fn results(case: &Case, title: &str) -> serde_json::Value {
    serde_json::from_str(&case.read(&format!("reports/{title}/v1/results.json"))).unwrap()
}

fn edge<'a>(edges: &'a serde_json::Value, x: &str, y: &str) -> Option<&'a serde_json::Value> {
    edges.as_array().unwrap().iter().find(|e| (e["from"] == x && e["to"] == y) || (e["from"] == y && e["to"] == x))
}

#[test]
fn fci_reports_the_planted_hidden_cause_and_both_keeps_pc() {
    let case = Case::new()
        .file("model.yaml", MODEL)
        .file("fci.yaml", spec("Hidden fci", ", search: fci", ""))
        .file("both.yaml", spec("Hidden both", ", search: both", ""))
        .file("pc.yaml", spec("Hidden pc", "", ""));
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    for s in ["fci.yaml", "both.yaml", "pc.yaml"] {
        case.run(["run", s]).success();
    }
    let fci = results(&case, "hidden-fci");
    let st = &fci["structure"];
    assert_eq!(st["search"], "fci");
    let ab = edge(&st["edges"], "a", "b").expect("a and b adjacent");
    assert_eq!(ab["kind"], "bidirected", "{st}");
    assert_eq!(ab["marks"], serde_json::json!(["arrow", "arrow"]));
    assert_eq!(ab["meaning"], "a and b share a hidden common cause, and neither causes the other");
    assert_eq!(edge(&st["edges"], "c", "a").unwrap()["kind"], "partially_directed");
    assert!(st["fci"]["hidden_causes"].as_array().unwrap().iter().any(|h| h["required"] == true));
    assert!(st["fit"].is_null() && st["effects"].as_array().unwrap().is_empty());
    let md = case.read("reports/hidden-fci/v1/report.md");
    assert!(
        md.contains("a ↔ b") && md.contains("A hidden common cause (and no causation either way): a and b"),
        "{md}"
    );
    let html = case.read("reports/hidden-fci/v1/report.html");
    assert!(html.contains("dg-head-start") && html.contains("no structural model is fitted"));

    // `both`: PC's part equals `search: pc`'s; FCI's graph beside it
    let both = results(&case, "hidden-both");
    let pc = results(&case, "hidden-pc");
    for key in ["edges", "removed", "effects", "fit"] {
        assert_eq!(both["structure"][key], pc["structure"][key], "{key}");
    }
    assert!(pc["structure"].get("fci").is_none());
    assert_eq!(edge(&both["structure"]["fci"]["edges"], "a", "b").unwrap()["kind"], "bidirected");
    let html = case.read("reports/hidden-both/v1/report.html");
    assert!(html.contains("FCI&#39;s graph, drawn") || html.contains("FCI's graph, drawn"));
}

#[test]
fn sensitivity_needs_a_fitted_model() {
    let extra = "  sensitivity:\n    reliability: {c: [0.8, 1.0]}\n";
    let case = Case::new().file("model.yaml", MODEL).file("spec.yaml", spec("S", ", search: fci", extra));
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    case.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("`sensitivity` refits the structural model, but `structure.search: fci` fits none")
        .stderr_contains("use `search: both`");
}
