//! Measurement invariance across waves and groups (issue 18): the ladder, the freed
//! parameters and the latent means in results.json and the report; grouping by a column;
//! 5-point items by the threshold model; refusals (shared respondents, one wave, an unknown column) with clear
//! messages; `diff` naming the change in means and verdicts.

use construe::stats::testkit;
use nalgebra::{DMatrix, DVector};

use crate::harness::Case;

const SPEC: &str = "construe: 1
title: Rider waves
data:
  waves:
    - {id: spring, file: spring.csv}
    - {id: autumn, file: autumn.csv}
  id_column: rid
  ordinal: none
constructs:
  comfort: {items: [a1, a2, a3, a4]}
  loyalty: {items: [b1, b2, b3, b4]}
analyses:
  invariance: {}
";

/// One wave: two constructs (correlation 0.4, loadings 0.7, item variances 1), construct means
/// `kappa`, item `shift_item`'s intercept raised by `shift`; ids from `first_id`; `region`
/// alternates `east` / `west` when `with_region`. `coded`: 5-point answers.
fn wave(
    n: usize,
    seed: u64,
    kappa: [f64; 2],
    shift: (usize, f64),
    first_id: usize,
    with_region: bool,
    coded: bool,
) -> String {
    let mut l = DMatrix::zeros(8, 2);
    for i in 0..8 {
        l[(i, i / 4)] = 0.7;
    }
    let phi = DMatrix::from_row_slice(2, 2, &[1.0, 0.4, 0.4, 1.0]);
    let theta = DMatrix::from_diagonal(&DVector::from_element(8, 0.51));
    let sigma = testkit::factor_cov(&l, &phi, &theta);
    let x = testkit::draw_normal(&sigma, n, &mut testkit::seeded(seed));
    let mu = &l * DVector::from_column_slice(&kappa);
    let mut out = String::from(if with_region {
        "rid,region,a1,a2,a3,a4,b1,b2,b3,b4\n"
    } else {
        "rid,a1,a2,a3,a4,b1,b2,b3,b4\n"
    });
    for r in 0..n {
        out.push_str(&(first_id + r).to_string());
        if with_region {
            out.push_str(if r % 2 == 0 { ",east" } else { ",west" });
        }
        for j in 0..8 {
            let v = x[(r, j)] + mu[j] + if j == shift.0 { shift.1 } else { 0.0 };
            if coded {
                out.push_str(&format!(",{}", 1 + [-1.2, -0.4, 0.4, 1.2].iter().filter(|&&c| v > c).count()));
            } else {
                out.push_str(&format!(",{v:.4}"));
            }
        }
        out.push('\n');
    }
    out
}

fn two_waves(autumn_first_id: usize, coded: bool) -> Case {
    Case::new()
        .spec(&SPEC.replace("ordinal: none", if coded { "ordinal: auto" } else { "ordinal: none" }))
        .file("spring.csv", wave(600, 1, [0.0, 0.0], (0, 0.0), 1, false, coded))
        .file("autumn.csv", wave(600, 2, [-0.4, 0.0], (5, 0.6), autumn_first_id, false, coded))
}

fn results(case: &Case) -> serde_json::Value {
    serde_json::from_str(&case.read("reports/rider-waves/v1/results.json")).unwrap()
}

// Autumn riders trust less (comfort mean -0.4 SD) and answer b2 higher regardless (an intercept
// shift of 0.6): the ladder frees b2's intercept, holds partial scalar invariance, and reports
// comfort's drop with an interval that covers -0.4; loyalty unchanged. The report shows the
// ladder, the freed parameter, the "what changed" table and the plot; `verify` reproduces it.
#[test]
fn waves_are_compared_and_the_shifted_intercept_is_freed() {
    let c = two_waves(1001, false);
    c.run(["run", "spec.yaml"]).success();
    let r = results(&c);
    let inv = &r["invariance"];
    assert_eq!(inv["across"], "wave");
    assert_eq!(inv["groups"], serde_json::json!(["spring", "autumn"]));
    assert_eq!(inv["reference"], "spring");
    let levels: Vec<&str> = inv["levels"].as_array().unwrap().iter().map(|l| l["level"].as_str().unwrap()).collect();
    assert_eq!(levels, ["configural", "metric", "scalar"]);
    for l in inv["levels"].as_array().unwrap() {
        assert!(l["chisq"].is_number() && l["df"].is_number() && l["cfi"].is_number() && l["rmsea"].is_number());
        assert_eq!(l["holds"], true, "{l}");
    }
    assert_eq!(inv["levels"][2]["partial"], true);
    assert_eq!(inv["highest"], "scalar");
    let freed = &inv["noninvariant"][0];
    assert_eq!((freed["item"].as_str(), freed["parameter"].as_str()), (Some("b2"), Some("intercept")), "{inv}");
    assert_eq!(freed["groups"], serde_json::json!(["autumn"]));
    assert_eq!(inv["noninvariant"].as_array().unwrap().len(), 1, "{inv}");
    let comfort = inv["latent_means"].as_array().unwrap().iter().find(|m| m["construct"] == "comfort").unwrap();
    let (lo, hi) = (comfort["ci"][0].as_f64().unwrap(), comfort["ci"][1].as_f64().unwrap());
    assert!(lo < -0.4 && -0.4 < hi && hi < 0.0, "{comfort}");
    assert_eq!(comfort["group"], "autumn");
    let md = c.read("reports/rider-waves/v1/report.md");
    assert!(md.contains("### Across waves: do the items work the same?"), "{md}");
    assert!(md.contains("What changed between waves"));
    assert!(md.contains("| comfort | autumn |"));
    let html = c.read("reports/rider-waves/v1/report.html");
    assert!(html.contains("class=\"means\""), "the latent mean plot");
    assert!(html.contains("<b>Across waves.</b>") || html.contains("Across waves"));
    assert!(html.contains("comfort is 0."), "the findings sentence names comfort's change");
    c.run(["verify", "reports/rider-waves/v1"]).success();
}

// The same rider ids in both waves: a panel. The independent-groups comparison is refused,
// naming the id column and a pair of waves, with exit code 1 and no report.
#[test]
fn shared_respondents_are_refused() {
    let c = two_waves(101, false);
    c.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains(
            "500 values of id column `rid` appear in more than one group (for example in `spring` and `autumn`)",
        )
        .stderr_contains("needs the longitudinal model")
        .no_report();
}

// Groups from a text column: `across: region` in one wave, with the structure search per group.
#[test]
fn groups_from_a_column() {
    let spec = SPEC.replace("    - {id: autumn, file: autumn.csv}\n", "").replace(
        "invariance: {}",
        "invariance: {across: region, reference: west, strict: true}\n  structure: {alpha: 0.05}",
    );
    let c = Case::new().spec(&spec).file("spring.csv", wave(800, 7, [0.0, 0.0], (0, 0.0), 1, true, false));
    c.run(["run", "spec.yaml"]).success();
    let inv = &results(&c)["invariance"];
    assert_eq!(inv["across"], "region");
    assert_eq!(inv["groups"], serde_json::json!(["east", "west"]));
    assert_eq!(inv["reference"], "west");
    assert_eq!(inv["n"], serde_json::json!({"east": 400, "west": 400}));
    assert_eq!(inv["levels"].as_array().unwrap().len(), 4, "strict was asked for");
    // The structure search per group: comfort and loyalty (correlation 0.4) adjacent in both.
    let sg = &inv["structure_by_group"];
    assert_eq!(sg["same_skeleton"], true, "{sg}");
    assert_eq!(sg["pairs"][0]["links"], serde_json::json!({"east": "undirected", "west": "undirected"}));
    assert!(c.read("reports/rider-waves/v1/report.md").contains("The structure search in each group"));
}

// 5-point items: the threshold model (Wu & Estabrook 2016 identification) on each wave's
// thresholds and polychorics. b2's latent response is shifted by 0.6 in autumn, which the
// fixed category cut-offs turn into shifted thresholds: the ladder frees b2 and reports
// comfort's drop (-0.4 SD) with an interval that covers it.
#[test]
fn five_point_items_are_compared_by_their_thresholds() {
    let c = two_waves(1001, true);
    c.run(["run", "spec.yaml"]).success();
    let r = results(&c);
    let inv = &r["invariance"];
    assert!(inv["estimator"].as_str().unwrap().contains("thresholds"), "{inv}");
    assert_eq!(inv["items_left_out"], serde_json::json!([]));
    let flagged: Vec<&str> =
        inv["noninvariant"].as_array().unwrap().iter().map(|f| f["item"].as_str().unwrap()).collect();
    assert_eq!(flagged, ["b2"], "{inv}");
    let comfort = inv["latent_means"].as_array().unwrap().iter().find(|m| m["construct"] == "comfort").unwrap();
    let (lo, hi) = (comfort["ci"][0].as_f64().unwrap(), comfort["ci"][1].as_f64().unwrap());
    assert!(lo < -0.4 && -0.4 < hi && hi < 0.0, "{comfort}");
    let loyalty = inv["latent_means"].as_array().unwrap().iter().find(|m| m["construct"] == "loyalty").unwrap();
    let (lo, hi) = (loyalty["ci"][0].as_f64().unwrap(), loyalty["ci"][1].as_f64().unwrap());
    assert!(lo < 0.0 && 0.0 < hi, "{loyalty}");
    c.run(["verify", "reports/rider-waves/v1"]).success();
}

// `check`: one wave only, an unknown reference and an unknown grouping column, each positioned.
#[test]
fn check_positions_invariance_problems() {
    let spec = SPEC
        .replace("    - {id: autumn, file: autumn.csv}\n", "")
        .replace("invariance: {}", "invariance: {reference: autum}");
    let c = Case::new().spec(&spec).file("spring.csv", wave(100, 1, [0.0, 0.0], (0, 0.0), 1, false, false));
    let out = c.run(["check", "spec.yaml"]);
    out.failure(1);
    let expected = "error: `invariance` across waves needs at least two waves; the spec has 1
  at spec.yaml:12:3
  12 |   invariance: {reference: autum}
     |   ^^^^^^^^^^
  hint: add a wave, or compare groups within the data with `across: COLUMN` (for example a region column)
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
    assert!(
        out.stderr.contains("`invariance.reference` names `autum`, which is not one of the waves"),
        "{}",
        out.stderr
    );

    let spec = SPEC.replace("invariance: {}", "invariance: {across: regoin}");
    let c = Case::new()
        .spec(&spec)
        .file("spring.csv", wave(100, 1, [0.0, 0.0], (0, 0.0), 1, true, false))
        .file("autumn.csv", wave(100, 2, [0.0, 0.0], (0, 0.0), 1001, true, false));
    let out = c.run(["check", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("wave `spring` has no column `regoin`")
        .stderr_contains("at spec.yaml:13:24")
        .stderr_contains("did you mean `region`?");
}

// A wave with fewer rows than a group needs is refused by `check` (with data).
#[test]
fn check_refuses_a_small_wave() {
    let c = Case::new()
        .spec(SPEC)
        .file("spring.csv", wave(600, 1, [0.0, 0.0], (0, 0.0), 1, false, false))
        .file("autumn.csv", wave(30, 2, [0.0, 0.0], (0, 0.0), 1001, false, false));
    c.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("wave `autumn` has 30 rows; `invariance` needs at least 50 per group");
}
