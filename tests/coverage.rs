//! Coverage of bootstrap percentile intervals (Efron 1979): over simulated datasets from a
//! known model, the 95% interval of the standardized structural coefficient should contain
//! the true value about 95% of the time (simulation check; target at least 90%).

use crate::harness::Case;

const MODEL: &str = "simulate: 1
constructs:
  - {name: a, variance: 1}
  - {name: b, total_variance: 1}
paths:
  - {from: a, to: b, coefficient: 0.4}
items:
  - {name: a1, construct: a, loading: 0.8, error_variance: 0.36}
  - {name: a2, construct: a, loading: 0.7, error_variance: 0.51}
  - {name: a3, construct: a, loading: 0.6, error_variance: 0.64}
  - {name: b1, construct: b, loading: 0.8, error_variance: 0.36}
  - {name: b2, construct: b, loading: 0.7, error_variance: 0.51}
  - {name: b3, construct: b, loading: 0.6, error_variance: 0.64}
";

/// True standardized a -> b coefficient of MODEL (both constructs have variance 1).
const TRUTH: f64 = 0.4;

fn covered(datasets: u64, replicates: usize, n: usize) -> (usize, usize) {
    let spec = format!(
        "construe: 1\ntitle: Coverage\ndata:\n  waves: [{{id: w, file: data.csv}}]\nconstructs:\n  a: {{items: [a1, a2, a3]}}\n  b: {{items: [b1, b2, b3]}}\nknowledge:\n  tiers: [[a], [b]]\n  require: [[a, b]]\nanalyses:\n  structure: {{}}\n  resample: {{replicates: {replicates}, seed: 3}}\n"
    );
    let mut hits = 0;
    for d in 0..datasets {
        let case = Case::new().file("model.yaml", MODEL).file("spec.yaml", &spec);
        let seed = (1000 + d).to_string();
        let n = n.to_string();
        case.run(["simulate", "model.yaml", "--out", "data.csv", "--n", &n, "--seed", &seed]).success();
        case.run(["run", "spec.yaml", "--no-cache"]).success();
        let r: serde_json::Value = serde_json::from_str(&case.read("reports/coverage/v1/results.json")).unwrap();
        let effect = r["resample"]["effects"]
            .as_array()
            .unwrap()
            .iter()
            .find(|e| e["from"] == "a" && e["to"] == "b")
            .unwrap()
            .clone();
        let (lo, hi) = (effect["std_ci"][0].as_f64().unwrap(), effect["std_ci"][1].as_f64().unwrap());
        if lo <= TRUTH && TRUTH <= hi {
            hits += 1;
        }
    }
    (hits, datasets as usize)
}

#[test]
fn bootstrap_intervals_cover_the_truth_short() {
    let (hits, total) = covered(8, 40, 500);
    println!("coverage {hits}/{total}");
    assert!(hits >= 6, "coverage {hits}/{total}");
}

/// The acceptance run: 200 datasets, 200 replicates each. Run with
/// `cargo test --release --test main -- --ignored --nocapture bootstrap_intervals_cover_the_truth_long`.
#[test]
#[ignore]
fn bootstrap_intervals_cover_the_truth_long() {
    let (hits, total) = covered(200, 200, 500);
    println!("coverage {hits}/{total} = {:.3}", hits as f64 / total as f64);
    assert!(hits as f64 >= 0.9 * total as f64, "coverage {hits}/{total}");
}
