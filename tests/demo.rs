//! The shipped demo: every spec under `pipelines/` passes `check`, and the transit demo runs
//! from a copy of its folder and writes `reports/<slug>/v1/report.html`.

use crate::harness::{Case, demo_case};

#[test]
fn every_pipeline_spec_checks() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines");
    let mut checked = 0;
    for entry in std::fs::read_dir(&root).unwrap().flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if !entry.path().join("spec.yaml").exists() {
            continue;
        }
        let case = Case::new().copy_dir(&format!("pipelines/{name}"), &format!("pipelines/{name}"));
        case.run(["check", &format!("pipelines/{name}/spec.yaml")]).success();
        checked += 1;
    }
    assert!(checked >= 1, "no pipeline specs found");
}

#[test]
fn transit_demo_writes_its_report() {
    let case = demo_case(Some(8));
    let out = case.run(["run", "pipelines/transit/spec.yaml"]);
    out.success().stderr_contains("wrote report v1");
    assert!(case.exists("reports/transit-rider-panel/v1/report.html"));
    // The path diagram as published is readable: type at least 11 px, no text over another
    // text, a box or an edge (geometry of the emitted SVG, `diagram::layout_problems`).
    let html = case.read("reports/transit-rider-panel/v1/report.html");
    let start = html.find("<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"diagram\"").expect("a path diagram");
    let end = start + html[start..].find("</svg>").unwrap() + 6;
    let problems = construe::report::diagram::layout_problems(&html[start..end]);
    assert!(problems.is_empty(), "{problems:#?}");
    assert!(case.exists("reports/transit-rider-panel/v1/report.md"));
    // Findings first, in both formats; every table of the HTML also in the Markdown.
    let md = case.read("reports/transit-rider-panel/v1/report.md");
    let findings = html.find("<h2>Findings</h2>").expect("a findings section");
    assert!(findings < html.find("id=\"data\"").unwrap(), "findings come before the evidence");
    assert!(md.find("## Findings").unwrap() < md.find("## 1. Data").unwrap());
    for text in [
        "**Constructs.** 5 constructs, measured by 19 of the 21 declared items",
        "**Fit.** The purified measurement model fits well",
        "**Structure.** The structure search finds 5 edges",
        "This is the first version of this report.",
    ] {
        assert!(md.contains(text), "report.md lacks {text:?}");
    }
    assert!(html.contains("<details>"), "long evidence is folded");
    for (what, html_mark, md_mark) in [
        ("latent correlations", "<h3>Latent correlations</h3>", "Latent correlations:"),
        ("bootstrap pairs", "how often, over", "how often, over"),
        (
            "standardized bootstrap intervals",
            "<th class=\"n\">standardized</th></tr>",
            "| effect | replicates | percentile 95% interval | standardized |",
        ),
        ("items kept per replicate", "Share of replicates keeping each item", "| item | kept in |"),
        ("sensitivity per kind", "Edges found", "Edges found: does it hold"),
        ("kept items per construct", "<th>kept items</th>", "| construct | kept items | dropped |"),
    ] {
        assert!(html.contains(html_mark), "report.html lacks the {what} table");
        assert!(md.contains(md_mark), "report.md lacks the {what} table");
    }
    // With 8 replicates some intervals rest on few of them: flagged in both formats.
    assert!(html.contains("(few: rough)") && md.contains("(few: rough)"));
    let results: serde_json::Value =
        serde_json::from_str(&case.read("reports/transit-rider-panel/v1/results.json")).unwrap();
    assert_eq!(results["data"]["waves"].as_array().unwrap().len(), 2);
    let ordinal = results["data"]["items"].as_array().unwrap().iter().filter(|i| i["kind"] == "ordinal").count();
    assert!(ordinal >= 15, "the demo is mostly five-point items, found {ordinal} ordinal");
    let again = case.run(["run", "pipelines/transit/spec.yaml"]);
    again.success().stderr_contains("nothing changed since v1");
}

/// The demo data were drawn from pipelines/transit/model.yaml, whose planted facts the
/// analysis should recover (simulation check; common practice: a method is trusted when it
/// recovers a known model): cr5 cross-loads on trust and tr6 shares error with in2; the true
/// paths are fare_burden -> crowding, fare_burden -> intent, crowding -> trust,
/// punctuality -> trust, trust -> intent, with no direct crowding -> intent path.
#[test]
fn transit_demo_recovers_the_planted_model() {
    let case = demo_case(None);
    case.run(["run", "pipelines/transit/spec.yaml"]).success();
    let r: serde_json::Value = serde_json::from_str(&case.read("reports/transit-rider-panel/v1/results.json")).unwrap();
    let dropped: Vec<String> = r["purify"]["constructs"]
        .as_object()
        .unwrap()
        .values()
        .flat_map(|c| c["dropped"].as_array().unwrap().iter().map(|d| d["item"].as_str().unwrap().to_string()))
        .collect();
    assert_eq!(dropped, ["cr5", "tr6"], "purification should drop exactly the planted impure items");
    assert_eq!(r["covariance"]["method"]["cr1|cr2"], "polychoric");
    assert_eq!(r["covariance"]["method"]["cr1|cr4"], "polyserial");
    assert_eq!(r["measure"]["converged"], true);
    assert!(r["measure"]["fit"]["rmsea"].as_f64().unwrap() < 0.06);
    let mut edges: Vec<(String, String, String)> = r["structure"]["edges"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            (e["from"].as_str().unwrap().into(), e["to"].as_str().unwrap().into(), e["kind"].as_str().unwrap().into())
        })
        .collect();
    edges.sort();
    let mut truth: Vec<(String, String, String)> = [
        ("crowding", "trust"),
        ("fare_burden", "crowding"),
        ("fare_burden", "intent"),
        ("punctuality", "trust"),
        ("trust", "intent"),
    ]
    .iter()
    .map(|(a, b)| (a.to_string(), b.to_string(), "directed".to_string()))
    .collect();
    truth.sort();
    assert_eq!(edges, truth);
    // True standardized path fare_burden -> intent is -0.40 (model.yaml); the interval of the
    // unstandardized estimate excludes zero.
    let effect = r["structure"]["effects"]
        .as_array()
        .unwrap()
        .iter()
        .find(|e| e["from"] == "fare_burden" && e["to"] == "intent")
        .unwrap();
    assert!(effect["ci"][1].as_f64().unwrap() < 0.0);
    // Mostly five-point items: DWLS on the polychoric/polyserial/Pearson correlations with
    // sandwich SEs and the scaled-and-shifted statistic, said in one sentence (issue 15).
    for analysis in ["measure", "structure"] {
        let e = &r[analysis]["estimation"];
        assert_eq!(e["method"], "dwls", "{analysis}");
        assert_eq!(e["standard_errors"], "sandwich");
        assert_eq!(e["statistic"], "scaled_shifted");
        let statement = e["statement"].as_str().unwrap();
        assert!(
            statement.contains("diagonally weighted least squares on polychoric, polyserial and Pearson correlations")
        );
        assert!(statement.contains("standard errors robust (sandwich)"));
        assert!(case.read("reports/transit-rider-panel/v1/report.md").contains("Asparouhov"));
    }
    assert!(r["measure"]["estimation"]["statement"].as_str().unwrap().starts_with("Measurement model estimated by"));
}

/// Bootstrap results do not depend on the thread count (each replicate has its own seeded
/// stream and results are gathered in replicate order).
#[test]
fn resampling_is_identical_across_thread_counts() {
    let one = demo_case(Some(6));
    one.run_env(["run", "pipelines/transit/spec.yaml"], &[("RAYON_NUM_THREADS", "1")]).success();
    let two = demo_case(Some(6));
    two.run_env(["run", "pipelines/transit/spec.yaml"], &[("RAYON_NUM_THREADS", "2")]).success();
    let a: serde_json::Value = serde_json::from_str(&one.read("reports/transit-rider-panel/v1/results.json")).unwrap();
    let b: serde_json::Value = serde_json::from_str(&two.read("reports/transit-rider-panel/v1/results.json")).unwrap();
    assert_eq!(a["resample"], b["resample"]);
    assert_eq!(a["resample"]["succeeded"], 6);
    assert_eq!(a["resample"]["items_kept"]["fare_share"], 1.0);
}
