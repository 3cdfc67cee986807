//! The shipped demo: every spec under `pipelines/` passes `check`, and the transit demo runs
//! from a copy of its folder and writes `reports/<slug>/v1/report.html`.

use crate::harness::Case;

#[test]
fn every_pipeline_spec_checks() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines");
    let mut checked = 0;
    for entry in std::fs::read_dir(&root).unwrap().flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if !entry.path().join("spec.yaml").exists() {
            continue;
        }
        let case = Case::new().copy_dir(&format!("pipelines/{name}"), &format!("pipelines/{name}"));
        case.run(["check", &format!("pipelines/{name}/spec.yaml")]).success();
        checked += 1;
    }
    assert!(checked >= 1, "no pipeline specs found");
}

#[test]
fn transit_demo_writes_its_report() {
    let case = Case::new().copy_dir("pipelines/transit", "pipelines/transit");
    let out = case.run(["run", "pipelines/transit/spec.yaml"]);
    out.success().stderr_contains("wrote report v1");
    assert!(case.exists("reports/transit-rider-panel/v1/report.html"));
    assert!(case.exists("reports/transit-rider-panel/v1/report.md"));
    let results: serde_json::Value =
        serde_json::from_str(&case.read("reports/transit-rider-panel/v1/results.json")).unwrap();
    assert_eq!(results["data"]["waves"].as_array().unwrap().len(), 2);
    let ordinal = results["data"]["items"].as_array().unwrap().iter().filter(|i| i["kind"] == "ordinal").count();
    assert!(ordinal >= 15, "the demo is mostly five-point items, found {ordinal} ordinal");
    let again = case.run(["run", "pipelines/transit/spec.yaml"]);
    again.success().stderr_contains("nothing changed since v1");
}
