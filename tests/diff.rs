//! Wave-to-wave comparison: the demo on its first wave alone, then on both waves. The second
//! version's report and `construe diff` list the added wave and the new row count.

use crate::harness::demo_case;

#[test]
fn adding_a_wave_is_reported_as_a_change() {
    let case = demo_case(None);
    let both = case.read("pipelines/transit/spec.yaml");
    let autumn = "    - {id: autumn, file: data/riders-autumn.parquet}\n";
    assert!(both.contains(autumn));
    // One wave has nothing to compare across waves: the first version runs without `invariance`.
    let one = both.lines().filter(|l| !l.starts_with("  invariance:")).map(|l| format!("{l}\n")).collect::<String>();
    let case = case.file("pipelines/transit/spec.yaml", one.replace(autumn, ""));
    case.run(["run", "pipelines/transit/spec.yaml"]).success().stderr_contains("wrote report v1");
    let case = case.file("pipelines/transit/spec.yaml", both);
    let second = case.run(["run", "pipelines/transit/spec.yaml"]);
    second.success().stderr_contains("wrote report v2");
    // Only `load` and what follows recompute; nothing is cached from v1 because every step
    // depends on the data.
    assert!(second.stderr.contains("load         computed"));
    let md = case.read("reports/transit-rider-panel/v2/report.md");
    assert!(md.contains("## Changes since the previous version (v1)"), "{md}");
    assert!(md.contains("- added input data/riders-autumn.parquet (autumn)"), "{md}");
    assert!(md.contains("- rows: 600 → 1100"), "{md}");
    assert!(md.contains(": added ({id: autumn, file: data/riders-autumn.parquet})"), "{md}");
    let html = case.read("reports/transit-rider-panel/v2/report.html");
    assert!(html.contains("Changes since the previous version (v1)"));
    let v1 = case.read("reports/transit-rider-panel/v1/report.md");
    assert!(!v1.contains("Changes since the previous version"));
    let out = case.run(["diff", "reports/transit-rider-panel/v1", "reports/transit-rider-panel/v2"]);
    out.success()
        .stdout_contains("## Changes from reports/transit-rider-panel/v1 to reports/transit-rider-panel/v2")
        .stdout_contains("- added input data/riders-autumn.parquet (autumn)")
        .stdout_contains("- rows: 600 → 1100")
        .stdout_contains("- spec data.waves[1]: added ({id: autumn, file: data/riders-autumn.parquet})");
}

/// `diff` names each spec value that changed between two versions, old and new.
#[test]
fn diff_names_changed_spec_values() {
    let case = crate::harness::small_case();
    case.run(["run", "spec.yaml"]).success();
    let edited = crate::harness::SMALL_SPEC
        .replace("missing: pairwise", "missing: listwise")
        .replace("  id_column: rid\n", "  id_column: rid\n  missing_codes: [-9]\n");
    let case = case.file("spec.yaml", edited);
    case.run(["run", "spec.yaml"]).success();
    let out = case.run(["diff", "reports/small-panel/v1", "reports/small-panel/v2"]);
    out.success()
        .stdout_contains("- spec analyses.covariance.missing: pairwise → listwise\n")
        .stdout_contains("- spec data.missing_codes: [] → [-9]\n");
    assert!(!out.stdout.contains("the spec's content changed"), "{}", out.stdout);
}
