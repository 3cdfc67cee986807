//! `construe simulate`: the same seed gives byte-identical CSV and Parquet; the written data
//! load back through a spec; model errors point into the model file.

use crate::harness::Case;

const MODEL: &str = "simulate: 1
n: 300
seed: 5
missing: 0.1
id: {name: rid}
constants:
  - {name: wave, value: one}
constructs:
  - {name: a, variance: 1}
  - {name: b, total_variance: 1}
paths:
  - {from: a, to: b, coefficient: 0.5}
items:
  - {name: a1, construct: a, loading: 0.8, error_variance: 0.36, thresholds: [-1, 0, 1]}
  - {name: a2, construct: a, loading: 0.7, error_variance: 0.51, thresholds: [-1, 0, 1]}
  - {name: a3, construct: a, loading: 0.6, error_variance: 0.64}
  - {name: b1, construct: b, loading: 0.8, error_variance: 0.36, thresholds: [-1, 0, 1]}
  - {name: b2, construct: b, loading: 0.7, error_variance: 0.51, thresholds: [-1, 0, 1]}
  - {name: b3, construct: b, loading: 0.6, error_variance: 0.64}
";

#[test]
fn same_seed_same_bytes_in_both_formats() {
    let case = Case::new().file("model.yaml", MODEL);
    for out in ["x.csv", "y.csv", "x.parquet", "y.parquet"] {
        case.run(["simulate", "model.yaml", "--out", out, "--set", "wave=two"])
            .success()
            .stderr_contains("wrote 300 rows");
    }
    assert_eq!(std::fs::read(case.path().join("x.csv")).unwrap(), std::fs::read(case.path().join("y.csv")).unwrap());
    assert_eq!(
        std::fs::read(case.path().join("x.parquet")).unwrap(),
        std::fs::read(case.path().join("y.parquet")).unwrap()
    );
    case.run(["simulate", "model.yaml", "--out", "z.csv", "--seed", "6"]).success();
    assert_ne!(case.read("x.csv"), case.read("z.csv"));
    assert!(case.read("x.csv").lines().nth(1).unwrap().starts_with("1,two,"));
}

#[test]
fn simulated_parquet_loads_through_a_spec() {
    let case = Case::new().file("model.yaml", MODEL);
    case.run(["simulate", "model.yaml", "--out", "w.parquet", "--n", "250"]).success();
    let spec = "construe: 1\ntitle: Sim\ndata:\n  waves: [{id: w, file: w.parquet}]\n  id_column: rid\nconstructs:\n  a: {items: [a1, a2, a3]}\n  b: {items: [b1, b2, b3]}\nanalyses:\n  measure: {}\n";
    let case = case.file("spec.yaml", spec);
    case.run(["run", "spec.yaml"]).success();
    let r: serde_json::Value = serde_json::from_str(&case.read("reports/sim/v1/results.json")).unwrap();
    assert_eq!(r["data"]["rows"], 250);
    assert_eq!(r["covariance"]["method"]["a1|a2"], "polychoric");
    assert_eq!(r["covariance"]["method"]["a1|a3"], "polyserial");
    assert_eq!(r["covariance"]["method"]["a3|b3"], "pearson");
    assert_eq!(r["measure"]["converged"], true);
}

#[test]
fn model_errors_are_reported() {
    let bad = MODEL.replace("coefficient: 0.5", "coefficient: 0.5, weight: 2");
    Case::new()
        .file("model.yaml", bad)
        .run(["simulate", "model.yaml", "--out", "x.csv"])
        .failure(1)
        .stderr_contains("unknown field `weight`")
        .stderr_contains("at model.yaml:");
    let cyclic = MODEL.replace(
        "  - {from: a, to: b, coefficient: 0.5}",
        "  - {from: a, to: b, coefficient: 0.5}\n  - {from: b, to: a, coefficient: 0.2}",
    );
    Case::new()
        .file("model.yaml", cyclic)
        .run(["simulate", "model.yaml", "--out", "x.csv"])
        .failure(1)
        .stderr_contains("cycle");
    Case::new()
        .file("model.yaml", MODEL)
        .run(["simulate", "model.yaml", "--out", "x.txt"])
        .failure(1)
        .stderr_contains("must end in .csv or .parquet");
}

#[test]
fn help_lists_every_command() {
    let out = Case::new().run(["--help"]);
    out.success();
    for command in ["run", "check", "plan", "verify", "simulate"] {
        assert!(
            out.stdout.lines().any(|l| l.trim_start().starts_with(command)),
            "{command} missing from --help:\n{}",
            out.stdout
        );
    }
}

#[test]
fn model_problems_are_shown_verbatim_with_a_caret_and_a_hint() {
    let bad = MODEL
        .replace("{name: b3, construct: b,", "{name: b3, construct: bb,")
        .replace("thresholds: [-1, 0, 1]}\n  - {name: a3", "thresholds: [-1, 1, 0]}\n  - {name: a3");
    let case = Case::new().file("model.yaml", bad);
    let out = case.run(["simulate", "model.yaml", "--out", "x.csv"]);
    out.failure(1);
    let expected = "error: item `a2`: thresholds must increase strictly, but 1 is followed by 0
  at model.yaml:15:86
  15 |   - {name: a2, construct: a, loading: 0.7, error_variance: 0.51, thresholds: [-1, 1, 0]}
     |                                                                                      ^
  hint: list the cut points from lowest to highest, each once

error: item `b3` names unknown construct `bb`
  at model.yaml:19:27
  19 |   - {name: b3, construct: bb, loading: 0.6, error_variance: 0.64}
     |                           ^^
  hint: did you mean `b`?

2 errors and 0 warnings";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
    assert!(!case.exists("x.csv"), "nothing written");
}

#[test]
fn a_cycle_is_shown_at_the_path_that_closes_it() {
    let cyclic = MODEL.replace(
        "  - {from: a, to: b, coefficient: 0.5}",
        "  - {from: a, to: b, coefficient: 0.5}\n  - {from: b, to: a, coefficient: 0.2}",
    );
    let out = Case::new().file("model.yaml", cyclic).run(["simulate", "model.yaml", "--out", "x.csv"]);
    out.failure(1);
    let expected = "error: structural paths form a cycle: `a` -> `b` -> `a`
  at model.yaml:12:5
  12 |   - {from: a, to: b, coefficient: 0.5}
     |     ^
  hint: causes must come before their effects: drop one path
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
}

/// `check` on `case`, failing the test instead of hanging if it blocks.
fn check_within_seconds(case: Case) -> crate::harness::Outcome {
    let (send, receive) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        let _ = send.send(case.run(["check", "spec.yaml"]));
    });
    receive.recv_timeout(std::time::Duration::from_secs(8)).expect("`construe check` blocks on the truth model")
}

fn with_truth_model() -> Case {
    crate::harness::small_case().spec(&format!("{}report: {{truth_model: model.yaml}}\n", crate::harness::SMALL_SPEC))
}

#[test]
fn a_missing_truth_model_fails_check_at_its_key() {
    let out = check_within_seconds(with_truth_model());
    out.failure(1);
    let expected = "error: truth model `model.yaml` does not exist
  at spec.yaml:12:23
  12 | report: {truth_model: model.yaml}
     |                       ^^^^^^^^^^
  hint: paths are relative to the folder of the spec file
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
}

#[cfg(unix)]
#[test]
fn a_fifo_or_folder_as_truth_model_fails_check_without_blocking() {
    let case = with_truth_model();
    let fifo = case.path().join("model.yaml");
    assert!(std::process::Command::new("mkfifo").arg(&fifo).status().unwrap().success());
    let out = check_within_seconds(case);
    out.failure(1);
    out.stderr_contains("error: cannot read truth model `model.yaml`: ")
        .stderr_contains("named pipe (FIFO)")
        .stderr_contains("at spec.yaml:12:23")
        .stderr_contains("hint: name the file itself");

    let case = with_truth_model();
    std::fs::create_dir(case.path().join("model.yaml")).unwrap();
    let out = check_within_seconds(case);
    out.failure(1);
    out.stderr_contains("error: cannot read truth model `model.yaml`: ").stderr_contains("at spec.yaml:12:23");
}

#[test]
fn an_invalid_truth_model_fails_check() {
    let case = with_truth_model().file("model.yaml", MODEL.replace("simulate: 1", "simulate: 3"));
    let out = check_within_seconds(case);
    out.failure(1);
    out.stderr_contains(
        "error: truth model `model.yaml` is not a valid model: model format version 3 is not supported (this build reads version 1)",
    )
    .stderr_contains("at spec.yaml:12:23")
    .stderr_contains("hint: `construe simulate model.yaml --out FILE` shows every problem with its position");
    let case = with_truth_model().file("model.yaml", MODEL);
    check_within_seconds(case).success();
}

/// Exit codes: help and version are success, a bare `construe` and any other usage error are
/// bad input (1), never the run-time failure code 2 (README, "Exit codes").
#[test]
fn usage_errors_exit_1_and_help_exits_0() {
    let bare = Case::new().run(Vec::<&str>::new());
    bare.failure(1).stderr_contains("Usage: construe");
    Case::new().run(["--version"]).success().stdout_contains("construe");
    Case::new().run(["run", "--help"]).success().stdout_contains("Usage: construe run");
    Case::new().run(["frobnicate"]).failure(1).stderr_contains("unrecognized subcommand");
    Case::new().run(["run"]).failure(1).stderr_contains("<SPEC>");
    Case::new().run(["run", "spec.yaml", "--bogus"]).failure(1).stderr_contains("--bogus");
    Case::new().run(["simulate", "m.yaml", "--out", "x.csv", "--n", "many"]).failure(1).stderr_contains("many");
}
