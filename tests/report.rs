//! The written report: self-contained HTML with everything from data or specs escaped, the
//! same tables in Markdown, results.json and manifest.json holding aggregates only.

use crate::harness::{Case, small_case, synthetic_csv};

#[test]
fn hostile_item_name_is_escaped_in_html() {
    let name = "<script>alert(1)</script>";
    let columns = ["a1", "a2", "a3", "b1", "b2", name, "x"];
    let csv = synthetic_csv(120, 5, &columns).replacen(name, &format!("\"{name}\""), 1);
    let spec = format!(
        "construe: 1\ntitle: Hostile names\ndata:\n  waves: [{{id: w1, file: w1.csv}}]\n  id_column: rid\nconstructs:\n  alpha: {{items: [a1, a2, a3]}}\n  beta: {{items: [b1, b2, \"{name}\", x]}}\nanalyses:\n  covariance: {{}}\n"
    );
    let case = Case::new().spec(&spec).file("w1.csv", csv);
    case.run(["run", "spec.yaml"]).success();
    let html = case.read("reports/hostile-names/v1/report.html");
    assert!(!html.contains(name), "raw script tag in report.html");
    assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    let md = case.read("reports/hostile-names/v1/report.md");
    assert!(!md.contains(name), "raw script tag in report.md");
}

#[test]
fn html_is_self_contained_and_has_every_section() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let html = case.read("reports/small-panel/v1/report.html");
    for forbidden in ["http://", "https://", "<script", "<link", "src="] {
        let hits: Vec<&str> = html.matches(forbidden).collect();
        // The SVG namespace URI is an identifier, not a fetch.
        let allowed = if forbidden == "http://" { html.matches("http://www.w3.org/2000/svg").count() } else { 0 };
        assert_eq!(hits.len(), allowed, "{forbidden} in report.html");
    }
    for section in [
        "id=\"data\"",
        "id=\"items\"",
        "id=\"covariance\"",
        "id=\"measurement\"",
        "id=\"structure\"",
        "id=\"fragility\"",
        "id=\"assumptions\"",
        "id=\"audit\"",
        "construe verify",
    ] {
        assert!(html.contains(section), "missing {section}");
    }
    assert!(html.contains("No unmeasured common causes"));
    let md = case.read("reports/small-panel/v1/report.md");
    assert!(md.contains("## 8. Assumptions and cautions"));
    assert!(md.contains("| a1 | alpha | ordinal | 200 |"), "{md}");
}

#[test]
fn results_and_manifest_hold_no_respondent_rows() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let results: serde_json::Value = serde_json::from_str(&case.read("reports/small-panel/v1/results.json")).unwrap();
    let manifest: serde_json::Value = serde_json::from_str(&case.read("reports/small-panel/v1/manifest.json")).unwrap();
    // 200 rows x 7 items: any array of length 200 would be respondent-level.
    fn longest_array(v: &serde_json::Value) -> usize {
        match v {
            serde_json::Value::Array(a) => a.iter().map(longest_array).max().unwrap_or(0).max(a.len()),
            serde_json::Value::Object(m) => m.values().map(longest_array).max().unwrap_or(0),
            _ => 0,
        }
    }
    assert!(longest_array(&results) < 200);
    assert!(longest_array(&manifest) < 200);
    let cov = &results["covariance"];
    assert_eq!(cov["items"].as_array().unwrap().len(), 7);
    assert_eq!(cov["kind"]["a1"], "ordinal");
    assert_eq!(cov["kind"]["x"], "continuous");
    assert_eq!(cov["smoothed"], false);
    assert!(cov["method"]["a1|a2"].is_string());
    assert_eq!(manifest["steps"].as_array().unwrap().len(), 2);
    assert_eq!(manifest["inputs"][0]["wave"], "w1");
    assert_eq!(manifest["inputs"][0]["blake3"].as_str().unwrap().len(), 64);
}
