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
