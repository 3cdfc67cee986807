//! construe's covariances against numpy on the demo data (fixture from
//! tests/reference/demo-moments/make_fixture.py; numpy and pyarrow versions recorded inside).

use crate::harness::demo_case;

fn matrix(v: &serde_json::Value) -> Vec<Vec<f64>> {
    v.as_array().unwrap().iter().map(|r| r.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()).collect()
}

fn max_abs_diff(a: &[Vec<f64>], b: &[Vec<f64>]) -> f64 {
    a.iter().flatten().zip(b.iter().flatten()).map(|(x, y)| (x - y).abs()).fold(0.0, f64::max)
}

fn run_demo(missing: &str) -> serde_json::Value {
    let case = demo_case(None);
    let spec = case
        .read("pipelines/transit/spec.yaml")
        .replace("missing: pairwise", &format!("missing: {missing}"))
        // Every item continuous, so every pair is a product-moment correlation as in numpy.
        .replace("ordinal: auto", "ordinal: none");
    let case = case.file("pipelines/transit/spec.yaml", spec);
    case.run(["run", "pipelines/transit/spec.yaml"]).success();
    let results: serde_json::Value =
        serde_json::from_str(&case.read("reports/transit-rider-panel/v1/results.json")).unwrap();
    results["covariance"].clone()
}

fn fixture() -> serde_json::Value {
    serde_json::from_str(include_str!("reference/demo-moments/moments.json")).unwrap()
}

// Source: numpy.cov (ddof=1) and numpy.corrcoef per item pair, version in moments.json.
#[test]
fn pairwise_moments_match_numpy() {
    let ours = run_demo("pairwise");
    let reference = fixture();
    assert_eq!(ours["items"], reference["items"]);
    let tol = 1e-12;
    let d_cov = max_abs_diff(&matrix(&ours["covariance"]), &matrix(&reference["pairwise"]["covariance"]));
    assert!(d_cov < tol, "covariance differs from numpy by {d_cov}");
    let d_cor = max_abs_diff(&matrix(&ours["correlation"]), &matrix(&reference["pairwise"]["correlation"]));
    assert!(d_cor < tol, "correlation differs from numpy by {d_cor}");
    assert_eq!(ours["n"], reference["pairwise"]["n"]);
}

// Source: numpy.cov (ddof=1) and numpy.corrcoef on the complete rows, version in moments.json.
#[test]
fn listwise_moments_match_numpy() {
    let ours = run_demo("listwise");
    let reference = fixture();
    let d_cov = max_abs_diff(&matrix(&ours["covariance"]), &matrix(&reference["listwise"]["covariance"]));
    assert!(d_cov < 1e-12, "covariance differs from numpy by {d_cov}");
    let d_cor = max_abs_diff(&matrix(&ours["correlation"]), &matrix(&reference["listwise"]["correlation"]));
    assert!(d_cor < 1e-12, "correlation differs from numpy by {d_cor}");
    assert_eq!(ours["n"][0][1].as_u64(), reference["listwise"]["n"].as_u64());
}
