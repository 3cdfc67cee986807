//! Issue 13, items 1, 2 and 9: the audit trail holds after ordinary workflows and catches every
//! edit. A version made from cached inputs verifies; any edited, deleted or added published
//! file, and any edited manifest field, fails `verify`; damaged report folders never block a run.

use crate::harness::{Case, demo_case, small_case, walk};

const V2: &str = "reports/transit-rider-panel/v2";
const SPEC: &str = "pipelines/transit/spec.yaml";

/// The demo without resampling and with a short prior sweep: measure, structure and
/// sensitivity all consume cached floats on the second run.
fn demo() -> Case {
    demo_case(None)
}

#[test]
fn incremental_rerun_then_verify_passes() {
    let case = demo();
    case.run(["run", SPEC]).success().stderr_contains("wrote report v1");
    // Change one parameter: load and covariance come from the cache, purify onwards recompute.
    let spec = case.read(SPEC);
    assert!(spec.contains("alpha: 0.01, min_items"), "the demo spec changed shape");
    let case = case.file(SPEC, spec.replacen("alpha: 0.01, min_items", "alpha: 0.02, min_items", 1));
    let second = case.run(["run", SPEC]);
    second.success().stderr_contains("wrote report v2");
    assert!(second.stderr.contains("covariance   cached"), "{}", second.stderr);
    let out = case.run(["verify", V2]);
    out.success().stderr_contains("verified");
    assert!(!out.stdout.contains("MISMATCH"), "{}", out.stdout);
    // Every published file was rendered again and compared.
    for f in ["results.json", "report.html", "report.md"] {
        out.stdout_contains(&format!("file {f}"));
    }
}

#[test]
fn verify_passes_after_a_damaged_cache_entry_was_repaired() {
    let case = demo();
    case.run(["run", SPEC]).success();
    // Damage every cache entry; the second run repairs them, and its version must verify.
    let mut damaged = 0;
    for entry in walk(&case.path().join("cache")) {
        let mut bytes = std::fs::read(&entry).unwrap();
        let last = bytes.len() - 1;
        bytes[last] ^= 0x0f;
        std::fs::write(&entry, bytes).unwrap();
        damaged += 1;
    }
    assert!(damaged >= 5);
    let spec = case.read(SPEC);
    let case = case.file(SPEC, spec.replacen("alpha: 0.01, min_items", "alpha: 0.02, min_items", 1));
    case.run(["run", SPEC]).success().stderr_contains("damaged");
    case.run(["verify", V2]).success();
    // A third run takes everything from the repaired cache.
    let case = case.file(SPEC, spec.replacen("alpha: 0.01, min_items", "alpha: 0.03, min_items", 1));
    case.run(["run", SPEC]).success().stderr_contains("wrote report v3");
    case.run(["verify", "reports/transit-rider-panel/v3"]).success();
}

const SMALL_V1: &str = "reports/small-panel/v1";

fn small_run() -> Case {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    case.run(["verify", SMALL_V1]).success();
    case
}

#[test]
fn verify_fails_on_an_edited_published_file() {
    for (file, from, to) in [
        ("results.json", "\"covariance\"", "\"covariance\" "),
        ("report.html", "<h2", "<h2 data-x=\"1\""),
        ("report.md", "#", "##"),
    ] {
        let case = small_run();
        let path = format!("{SMALL_V1}/{file}");
        let text = case.read(&path);
        assert!(text.contains(from), "{file} lacks {from}");
        let case = case.file(&path, text.replacen(from, to, 1));
        let out = case.run(["verify", SMALL_V1]);
        out.failure(1).stdout_contains(&format!("MISMATCH  file {file}"));
    }
}

#[test]
fn verify_fails_when_a_report_file_is_deleted_or_added() {
    let case = small_run();
    std::fs::remove_file(case.path().join(SMALL_V1).join("report.md")).unwrap();
    case.run(["verify", SMALL_V1]).failure(1).stdout_contains("MISMATCH  file report.md").stdout_contains("missing");
}

#[test]
fn verify_fails_on_an_edited_manifest_field() {
    type Edit = fn(&mut serde_json::Value);
    let edits: [(&str, Edit, &str); 6] = [
        ("params", |m| m["steps"][1]["params"]["missing"] = "listwise".into(), "MISMATCH  step covariance"),
        ("fingerprint", |m| m["fingerprint"] = "0".repeat(64).into(), "MISMATCH  manifest fingerprint"),
        (
            "step list",
            |m| {
                m["steps"].as_array_mut().unwrap().pop();
            },
            "MISMATCH  step covariance",
        ),
        ("step order", |m| m["steps"].as_array_mut().unwrap().swap(0, 1), "MISMATCH  step load"),
        ("seeds", |m| m["seeds"]["resample"] = 5.into(), "MISMATCH  manifest seeds"),
        ("input size", |m| m["inputs"][0]["size"] = 1.into(), "MISMATCH  input w1.csv"),
    ];
    for (what, edit, expect) in edits {
        let case = small_run();
        let path = format!("{SMALL_V1}/manifest.json");
        let mut m: serde_json::Value = serde_json::from_str(&case.read(&path)).unwrap();
        edit(&mut m);
        let case = case.file(&path, serde_json::to_string_pretty(&m).unwrap());
        let out = case.run(["verify", SMALL_V1]);
        assert_eq!(out.code, Some(1), "edit of {what} passed verify:\n{}", out.stdout);
        out.stdout_contains(expect);
    }
}

#[test]
fn verify_of_a_folder_without_manifest_is_exit_1_with_a_hint() {
    let case = small_run();
    case.run(["verify", "reports/small-panel"]).failure(1).stderr_contains("has no manifest.json");
    case.run(["verify", "spec.yaml"]).failure(1).stderr_contains("`spec.yaml` is a file, not a report version folder");
    case.run(["verify", "nowhere/v1"]).failure(1).stderr_contains("`nowhere/v1` does not exist");
}

/// Item 9: a damaged latest manifest, a stray `vN` file or folder, or `v1` replaced by a file
/// never blocks the next run; the run warns, numbers past every name and writes nothing half.
#[test]
fn damaged_report_folders_are_skipped_not_fatal() {
    let changed = crate::harness::SMALL_SPEC.replace("missing: pairwise", "missing: listwise");

    // The latest manifest is corrupt: the run skips v1 with a warning and writes v2.
    let case = small_run();
    let case = case.file(&format!("{SMALL_V1}/manifest.json"), "{ not json");
    let out = case.run(["run", "spec.yaml"]);
    out.success().stderr_contains("skipping").stderr_contains("wrote report v2");
    case.run(["verify", "reports/small-panel/v2"]).success();

    // v1 replaced by a file, and a stray empty v7 folder: the next version is v8.
    let case = small_run();
    std::fs::remove_dir_all(case.path().join(SMALL_V1)).unwrap();
    let case = case.file(SMALL_V1, "not a folder").spec(&changed);
    std::fs::create_dir_all(case.path().join("reports/small-panel/v7")).unwrap();
    let out = case.run(["run", "spec.yaml"]);
    out.success().stderr_contains("wrote report v8");
    let out = case.run(["run", "spec.yaml"]);
    out.success().stderr_contains("nothing changed since v8");

    // The manifest deleted from the only version: the rerun writes a new version.
    let case = small_run();
    std::fs::remove_file(case.path().join(SMALL_V1).join("manifest.json")).unwrap();
    case.run(["run", "spec.yaml"]).success().stderr_contains("wrote report v2");
    let leftovers: Vec<_> = std::fs::read_dir(case.path().join("reports/small-panel"))
        .unwrap()
        .flatten()
        .filter(|e| e.file_name().to_string_lossy().starts_with(".partial"))
        .collect();
    assert!(leftovers.is_empty(), "staging folders left behind");
}

/// A version that shows its changes since a previous one cannot be rendered again once that
/// version is gone; verify says so rather than passing what it could not check.
#[test]
fn verify_names_a_missing_previous_version() {
    let case = small_run();
    let changed = crate::harness::SMALL_SPEC.replace("missing: pairwise", "missing: listwise");
    let case = case.spec(&changed);
    case.run(["run", "spec.yaml"]).success().stderr_contains("wrote report v2");
    case.run(["verify", "reports/small-panel/v2"]).success();
    std::fs::remove_dir_all(case.path().join(SMALL_V1)).unwrap();
    case.run(["verify", "reports/small-panel/v2"])
        .failure(1)
        .stdout_contains("v1, which this report compares itself with");
}
