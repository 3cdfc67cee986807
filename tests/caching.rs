//! The cache: identical reruns compute nothing and write no version; keys ignore comments;
//! a changed parameter recomputes its step and what follows only; a new wave file recomputes
//! `load`; a damaged entry is detected, recomputed and gives identical results.

use crate::harness::{SMALL_COLUMNS, SMALL_SPEC, small_case, synthetic_csv, walk};

fn statuses(stderr: &str) -> Vec<(String, String)> {
    stderr
        .lines()
        .filter_map(|l| {
            let mut parts = l.split_whitespace();
            let step = parts.next()?;
            let status = parts.next()?;
            (status == "cached" || status == "computed").then(|| (step.to_string(), status.to_string()))
        })
        .collect()
}

fn plan_lines(stdout: &str) -> Vec<(String, String, String)> {
    stdout
        .lines()
        .map(|l| {
            let (step, rest) = l.split_once(' ').unwrap();
            let rest = rest.trim_start();
            let (key, status) = rest.split_once("  ").unwrap();
            (step.to_string(), key.to_string(), status.to_string())
        })
        .collect()
}

#[test]
fn second_run_computes_nothing_and_writes_no_version() {
    let case = small_case();
    let first = case.run(["run", "spec.yaml"]);
    first.success().stderr_contains("wrote report v1").stdout_contains("reports/small-panel/v1");
    assert_eq!(statuses(&first.stderr), [("load".into(), "computed".into()), ("covariance".into(), "computed".into())]);
    let second = case.run(["run", "spec.yaml"]);
    second.success().stderr_contains("nothing changed since v1");
    assert_eq!(statuses(&second.stderr), [("load".into(), "cached".into()), ("covariance".into(), "cached".into())]);
    assert!(!case.exists("reports/small-panel/v2"));
}

#[test]
fn comments_and_key_order_change_no_key() {
    let case = small_case();
    let before = case.run(["plan", "spec.yaml"]);
    before.success();
    let edited = format!(
        "# reviewed 2026-11-30\n{}",
        SMALL_SPEC.replace("  id_column: rid\n", "  id_column: rid   # never analysed\n")
    )
    .replace("construe: 1\ntitle: Small panel\n", "title: Small panel\nconstrue: 1\n");
    let case = case.file("spec.yaml", edited);
    let after = case.run(["plan", "spec.yaml"]);
    after.success();
    assert_eq!(plan_lines(&before.stdout), plan_lines(&after.stdout));
}

#[test]
fn changing_missing_recomputes_covariance_not_load() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let case = case.file("spec.yaml", SMALL_SPEC.replace("missing: pairwise", "missing: listwise"));
    let plan = case.run(["plan", "spec.yaml"]);
    let lines = plan_lines(&plan.success().stdout);
    assert_eq!(lines[0].2, "cached");
    assert_eq!(lines[1].2, "inputs changed: parameter missing: pairwise → listwise");
    let out = case.run(["run", "spec.yaml"]);
    out.success().stderr_contains("wrote report v2");
    assert_eq!(statuses(&out.stderr), [("load".into(), "cached".into()), ("covariance".into(), "computed".into())]);
}

#[test]
fn replacing_a_wave_recomputes_load() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let case = case.file("w1.csv", synthetic_csv(200, 8, SMALL_COLUMNS));
    let out = case.run(["run", "spec.yaml"]);
    out.success();
    assert_eq!(statuses(&out.stderr), [("load".into(), "computed".into()), ("covariance".into(), "computed".into())]);
}

#[test]
fn corrupted_cache_entry_is_recomputed_with_identical_results() {
    let case = small_case();
    case.run(["run", "spec.yaml"]).success();
    let original = case.read("reports/small-panel/v1/results.json");
    // Flip one byte in the payload of every cache entry.
    let mut damaged = 0;
    for entry in walk(&case.path().join("cache")) {
        let mut bytes = std::fs::read(&entry).unwrap();
        let last = bytes.len() - 1;
        bytes[last] ^= 0x55;
        std::fs::write(&entry, bytes).unwrap();
        damaged += 1;
    }
    assert_eq!(damaged, 2);
    // A different cache-independent change would write v2; so compare with a fresh --no-cache
    // run instead of relying on versioning: remove v1 first.
    std::fs::remove_dir_all(case.path().join("reports")).unwrap();
    let out = case.run(["run", "spec.yaml"]);
    out.success().stderr_contains("is damaged (content does not match its hash); recomputing");
    assert_eq!(case.read("reports/small-panel/v1/results.json"), original);
}

#[test]
fn no_cache_writes_no_entries() {
    let case = small_case();
    case.run(["run", "spec.yaml", "--no-cache"]).success();
    assert!(walk(&case.path().join("cache")).is_empty());
}

#[test]
fn concurrent_run_of_the_same_spec_is_refused_cleanly() {
    let case = small_case();
    // Hold the run lock the way a live run does, from a child `construe` would be racy; the
    // lock file path is derived from the report folder, so take it through the library.
    let root = case.path().join("reports").join("small-panel");
    let _held = construe::pipeline::lock::RunLock::acquire(&root).unwrap();
    case.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("another `construe run` is writing")
        .stderr_contains("wait for it to finish")
        .no_report();
}

/// `plan` tells a step no version has run from one whose inputs changed since the last version.
#[test]
fn plan_says_not_computed_yet_before_the_first_run() {
    let case = small_case();
    let lines = plan_lines(&case.run(["plan", "spec.yaml"]).success().stdout.clone());
    assert_eq!(lines[0].2, "not computed yet");
    assert_eq!(lines[1].2, "not computed yet");
    case.run(["run", "spec.yaml"]).success();
    let case = case.file("w1.csv", synthetic_csv(200, 8, SMALL_COLUMNS));
    let lines = plan_lines(&case.run(["plan", "spec.yaml"]).success().stdout.clone());
    assert_eq!(lines[0].2, "inputs changed: data file w1.csv changed");
    assert_eq!(lines[1].2, "inputs changed: upstream step load changed");
}
