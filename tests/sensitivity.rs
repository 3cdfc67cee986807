//! Sensitivity to assumed reliability against known truths: a common cause measured by one
//! noisy item (the effect it fakes vanishes at the true reliability), and the correction for
//! attenuation in the one-covariate case (Spearman 1904).

use crate::harness::Case;

/// Z -> X and Z -> Y, no X -> Y; Z seen through one item of true reliability 0.6.
const CONFOUNDED: &str = "simulate: 1
n: 5000
seed: 41
constructs:
  - {name: z, variance: 1}
  - {name: x, total_variance: 1}
  - {name: y, total_variance: 1}
paths:
  - {from: z, to: x, coefficient: 0.6}
  - {from: z, to: y, coefficient: 0.6}
items:
  - {name: x1, construct: x, loading: 0.8, error_variance: 0.36}
  - {name: x2, construct: x, loading: 0.8, error_variance: 0.36}
  - {name: x3, construct: x, loading: 0.7, error_variance: 0.51}
  - {name: y1, construct: y, loading: 0.8, error_variance: 0.36}
  - {name: y2, construct: y, loading: 0.8, error_variance: 0.36}
  - {name: y3, construct: y, loading: 0.7, error_variance: 0.51}
observed:
  - {name: z_obs, construct: z, reliability: 0.6}
";

const SPEC: &str = "construe: 1
title: Confounded
data:
  waves: [{id: w, file: data.csv}]
constructs:
  z: {items: [z_obs], reliability: 1.0}
  x: {items: [x1, x2, x3]}
  y: {items: [y1, y2, y3]}
knowledge:
  tiers: [[z], [x], [y]]
  require: [[x, y]]
analyses:
  structure: {alpha: 0.05}
  sensitivity:
    reliability: {z: [0.5, 0.6, 0.7, 0.8, 0.9, 1.0]}
";

fn results(case: &Case, title: &str) -> serde_json::Value {
    serde_json::from_str(&case.read(&format!("reports/{title}/v1/results.json"))).unwrap()
}

// Known truth (common practice): conditioning on an error-laden proxy of a common cause leaves
// a spurious effect, which disappears when the proxy's true reliability is assumed.
#[test]
fn spurious_effect_vanishes_at_the_true_reliability() {
    let case = Case::new().file("model.yaml", CONFOUNDED).file("spec.yaml", SPEC);
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "confounded");
    let curve = r["sensitivity"]["curves"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["from"] == "x" && c["to"] == "y")
        .unwrap()
        .clone();
    let grid: Vec<f64> = curve["reliability"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let at = |r: f64, key: &str| curve[key][grid.iter().position(|g| (g - r).abs() < 1e-9).unwrap()].as_f64().unwrap();
    assert!(at(1.0, "lo") > 0.0, "at r = 1 the x -> y effect should be significant: {curve}");
    assert!(at(0.6, "lo") < 0.0 && at(0.6, "hi") > 0.0, "at r = 0.6 it should not be: {curve}");
    assert!(at(0.6, "est").abs() < 0.05, "at r = 0.6 the estimate should be near zero: {curve}");
    let conclusion = r["sensitivity"]["conclusions"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["what"] == "effect x → y is positive and significant")
        .unwrap()
        .clone();
    let tipping = conclusion["tipping"]["z"].as_f64().unwrap();
    assert!((0.6..=0.9).contains(&tipping), "tipping point {tipping} outside [0.6, 0.9]");
}

/// One covariate: y = z + error, z seen through one item.
const ONE_COVARIATE: &str = "simulate: 1
n: 2000
seed: 43
constructs:
  - {name: z, variance: 1}
  - {name: y, total_variance: 1}
paths:
  - {from: z, to: y, coefficient: 0.5}
observed:
  - {name: z_obs, construct: z, reliability: 0.7}
  - {name: y_obs, construct: y, reliability: 1.0}
";

// Source: Spearman (1904) correction for attenuation, r_true = r_zy / sqrt(r_zz r_yy); here
// r_yy = 1, so the latent correlation at assumed reliability r is r_zy / sqrt(r).
#[test]
fn one_covariate_matches_the_correction_for_attenuation() {
    let spec = "construe: 1
title: Attenuation
data:
  waves: [{id: w, file: data.csv}]
constructs:
  z: {items: [z_obs], reliability: 0.7}
  y: {items: [y_obs], reliability: 1.0}
knowledge:
  tiers: [[z], [y]]
  require: [[z, y]]
analyses:
  structure: {}
  sensitivity:
    reliability: {z: [0.5, 0.6, 0.7, 0.8, 0.9, 1.0]}
";
    let case = Case::new().file("model.yaml", ONE_COVARIATE).file("spec.yaml", spec);
    case.run(["simulate", "model.yaml", "--out", "data.csv"]).success();
    case.run(["run", "spec.yaml"]).success();
    let r = results(&case, "attenuation");
    let r_zy = r["covariance"]["correlation"][0][1].as_f64().unwrap();
    let curve = &r["sensitivity"]["curves"][0];
    for (k, rel) in curve["reliability"].as_array().unwrap().iter().enumerate() {
        let rel = rel.as_f64().unwrap();
        // Unit latent variances: z's variance is 1 and y's residual variance is 1, so the
        // path b gives the latent correlation b / sqrt(1 + b^2).
        let b = curve["est"][k].as_f64().unwrap();
        let latent = b / (1.0 + b * b).sqrt();
        let spearman = r_zy / rel.sqrt();
        assert!((latent - spearman).abs() < 1e-6, "r = {rel}: model {latent}, formula {spearman}");
    }
}
