//! Values missing at random (issue 17): `covariance: {missing: fiml}` for continuous items (EM)
//! and ordinal items (multiple imputation), Little's MCAR test and its warning under deletion,
//! the missingness summary, and that imputed values never reach a published file.

use construe::stats::testkit;
use rand::Rng;

use crate::harness::Case;

const SPEC: &str = "construe: 1
title: Rider panel
data:
  waves:
    - {id: w1, file: w1.csv}
  id_column: rid
  ordinal: none
constructs:
  comfort: {items: [a1, a2, a3, a4]}
  loyalty: {items: [b1, b2, b3, b4]}
analyses:
  covariance: {missing: pairwise}
  measure: {}
";

/// Two constructs (latent correlation 0.5, loadings 0.7) with four items each; about a third
/// of the `b` answers missing, far more often when `a1` is high (MAR). `coded`: 5-point answers.
fn mar_csv(n: usize, coded: bool) -> String {
    let mut rng = testkit::seeded(41);
    let sigma = nalgebra::DMatrix::from_fn(8, 8, |i, j| {
        if i == j {
            1.0
        } else if (i < 4) == (j < 4) {
            0.49
        } else {
            0.245
        }
    });
    let x = testkit::draw_normal(&sigma, n, &mut rng);
    let mut out = String::from("rid,a1,a2,a3,a4,b1,b2,b3,b4\n");
    for r in 0..n {
        let miss = rng.random::<f64>() < if x[(r, 0)] > 0.4 { 0.85 } else { 0.05 };
        out.push_str(&(r + 1).to_string());
        for j in 0..8 {
            out.push(',');
            if j >= 4 && miss {
                continue;
            }
            let v = x[(r, j)];
            if coded {
                out.push_str(&(1 + [-1.2, -0.4, 0.4, 1.2].iter().filter(|&&c| v > c).count()).to_string());
            } else {
                out.push_str(&format!("{v:.4}"));
            }
        }
        out.push('\n');
    }
    out
}

fn case(missing: &str, coded: bool) -> Case {
    let spec = SPEC
        .replace("missing: pairwise", &format!("missing: {missing}"))
        .replace("ordinal: none", if coded { "ordinal: auto" } else { "ordinal: none" });
    Case::new().spec(&spec).file("w1.csv", mar_csv(500, coded))
}

fn results(case: &Case) -> serde_json::Value {
    serde_json::from_str(&case.read("reports/rider-panel/v1/results.json")).unwrap()
}

// Under deletion the MAR data fail Little's test, and the report and its findings say that
// deletion can bias every estimate and name the MAR-valid option.
#[test]
fn little_rejects_and_the_report_recommends_fiml() {
    let c = case("pairwise", false);
    c.run(["run", "spec.yaml"]).success();
    let r = results(&c);
    let mcar = &r["covariance"]["mcar"];
    assert!(mcar["p"].as_f64().unwrap() < 0.001, "{mcar}");
    assert_eq!(mcar["df"], 4, "two patterns: complete, and the four b items missing");
    let html = c.read("reports/rider-panel/v1/report.html");
    assert!(
        html.contains("Little&#x27;s (1988) test") || html.contains("Little's (1988) test"),
        "no MCAR test in the report"
    );
    assert!(html.contains("pairwise deletion can bias every estimate"));
    assert!(html.contains("missing completely at random (pairwise deletion)"));
    let md = c.read("reports/rider-panel/v1/report.md");
    assert!(md.contains("`covariance: {missing: fiml}` is valid when they are missing at random"));
    // The missingness summary: one pattern with the four b items, counted.
    let m = &r["covariance"]["missingness"];
    assert_eq!(m["patterns"][0]["missing"], serde_json::json!(["b1", "b2", "b3", "b4"]));
    assert!(m["patterns"][0]["rows"].as_u64().unwrap() > 100);
    assert_eq!(m["by_wave"][0]["share"][0], 0.0);
}

// `fiml` on continuous items: EM, every respondent counted, the assumption stated, `verify`
// reproduces everything; the latent correlation is nearer the truth (0.5) than pairwise
// deletion's.
#[test]
fn fiml_on_continuous_items_uses_em_and_verifies() {
    let fiml = case("fiml", false);
    fiml.run(["run", "spec.yaml"]).success();
    let r = results(&fiml);
    let md = &r["covariance"]["missing_data"];
    assert!(md["method"].as_str().unwrap().contains("by EM"), "{md}");
    assert_eq!(md["rows_used"], 500);
    assert_eq!(md["converged"], true);
    assert_eq!(md["imputed"], serde_json::json!({"sets": 0, "values_per_set": 0}));
    let html = fiml.read("reports/rider-panel/v1/report.html");
    assert!(html.contains("<b>missing at random</b>"));
    fiml.run(["verify", "reports/rider-panel/v1"]).success();
    let pairwise = case("pairwise", false);
    pairwise.run(["run", "spec.yaml"]).success();
    let latent = |r: &serde_json::Value| r["measure"]["latent_correlation"]["matrix"][0][1].as_f64().unwrap();
    let (f, p) = (latent(&r), latent(&results(&pairwise)));
    assert!((f - 0.5).abs() < (p - 0.5).abs(), "fiml {f}, pairwise {p}");
}

// `fiml` on 5-point items: multiple imputation pooled by Rubin's rules; the cache keeps the
// imputed answers, but results.json, the reports and the manifest show only their counts.
#[test]
fn fiml_on_ordinal_items_imputes_and_publishes_no_imputed_answer() {
    let c = case("fiml", true);
    c.run(["run", "spec.yaml"]).success();
    let r = results(&c);
    let md = &r["covariance"]["missing_data"];
    assert!(md["method"].as_str().unwrap().contains("multiple imputation"), "{md}");
    assert_eq!(md["imputations"], 20);
    let counts = &md["imputed"];
    assert_eq!(counts["sets"], 20);
    let filled = counts["values_per_set"].as_u64().unwrap();
    let missing_b: u64 = (1..=4).map(|k| r["data"]["items"][3 + k]["missing"].as_u64().unwrap_or(0)).sum();
    assert!(filled > 400 && (missing_b == 0 || filled == missing_b), "{filled} filled, {missing_b} missing");
    assert!(r["measure"]["estimation"]["statement"].as_str().unwrap().contains("diagonally weighted least squares"));
    c.run(["verify", "reports/rider-panel/v1"]).success();
}

// `check` warns about an item missing in more than half the rows (with each wave's share) and
// refuses a pair of items nobody answered together, naming both.
#[test]
fn check_warns_of_mostly_missing_items_and_refuses_pairs_never_answered_together() {
    let csv = mar_csv(300, false);
    let mut lines: Vec<String> = csv.lines().map(str::to_string).collect();
    for (r, line) in lines.iter_mut().enumerate().skip(1) {
        let mut f: Vec<String> = line.split(',').map(str::to_string).collect();
        // b4 answered by a third of the rows; a4 and b3 never by the same respondent.
        if r % 3 != 0 {
            f[8] = String::new();
        }
        if r % 2 == 0 {
            f[4] = String::new();
        } else {
            f[7] = String::new();
        }
        *line = f.join(",");
    }
    let c = Case::new().spec(SPEC).file("w1.csv", lines.join("\n") + "\n");
    c.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("warning: item `b4` is missing in 77% of rows (w1: 77%)")
        .stderr_contains("error: items `a4` and `b3` are never answered by the same respondent")
        .stderr_lacks("items `a1` and");
}
