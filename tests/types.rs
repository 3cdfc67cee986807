//! Types instead of strings (issue 14): item pairs stay pairs whatever their names contain,
//! and a cached rerun reads every artifact back as the value it was.

use crate::harness::{Case, synthetic_csv};

/// Four items whose names hold the `|` that results.json writes between a pair's names:
/// the pairs (`x`, `y|z`) and (`x|y`, `z`) have the same text key.
const SPEC: &str = "construe: 1
title: Pipes
data:
  waves:
    - {id: w1, file: w1.csv}
  id_column: rid
constructs:
  c: {items: [x, \"y|z\", \"x|y\", z]}
analyses:
  covariance: {missing: pairwise}
";

/// The estimators counted for one item in report.md's item table, e.g. `polychoric (2), ...`.
fn pairs_counted(report: &str, cell: &str) -> usize {
    let row = report
        .lines()
        .skip_while(|l| !l.contains("estimators of its pairs"))
        .find(|l| l.starts_with(&format!("| {cell} |")))
        .unwrap_or_else(|| panic!("no row {cell}"));
    let methods = row.split(" | ").nth(2).unwrap();
    methods.split(", ").map(|m| m.rsplit_once(" (").unwrap().1.trim_end_matches(')').parse::<usize>().unwrap()).sum()
}

#[test]
fn every_item_counts_all_its_pairs_when_names_contain_the_key_separator() {
    let case = Case::new().spec(SPEC).file("w1.csv", synthetic_csv(200, 11, &["x", "y|z", "x|y", "z"]));
    case.run(["run", "spec.yaml"]).success();
    let report = case.read("reports/pipes/v1/report.md");
    // Three pairs each; splitting text keys gave `y|z` and `x|y` one pair each.
    for cell in ["x", "y\\|z", "x\\|y", "z"] {
        assert_eq!(pairs_counted(&report, cell), 3, "{cell} in\n{report}");
    }
    // A rerun decodes the cached covariances: nothing changed, so no new version.
    case.run(["run", "spec.yaml"]).success();
    assert!(!case.exists("reports/pipes/v2"));
    case.run(["verify", "reports/pipes/v1"]).success();
}
