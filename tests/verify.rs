//! `construe verify`: recomputing a version from its manifest without the cache matches; a
//! changed data byte or an altered step hash fails, naming the file or the step.

use crate::harness::small_case;

#[test]
fn verify_passes_then_fails_on_changed_input_or_manifest() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let out = case.run(["verify", "reports/small-panel/v1"]);
    out.success().stdout_contains("match     step covariance").stderr_contains("verified");

    // Alter one step's artifact hash in the manifest.
    let manifest_path = "reports/small-panel/v1/manifest.json";
    let original = case.read(manifest_path);
    let mut m: serde_json::Value = serde_json::from_str(&original).unwrap();
    m["steps"][1]["artifact"] = serde_json::Value::String("0".repeat(64));
    let case = case.file(manifest_path, serde_json::to_string_pretty(&m).unwrap());
    case.run(["verify", "reports/small-panel/v1"]).failure(1).stdout_contains("MISMATCH  step covariance");

    // Restore it, then change one byte of the data file.
    let case = case.file(manifest_path, original);
    let csv = case.read("w1.csv");
    let changed = csv.replacen("\n1,", "\n9,", 1);
    assert_ne!(changed, csv);
    let case = case.file("w1.csv", changed);
    case.run(["verify", "reports/small-panel/v1"]).failure(1).stdout_contains("MISMATCH  input w1.csv");
}
