//! The published JSON Schemas (`schemas/`, `construe schema`) checked by an independent
//! validator: the Python `jsonschema` package, through `tests/schema/validate.py`. Every spec
//! under `pipelines/` and `tests/` (YAML files, and the spec literals the tests write) passes
//! the spec schema, the demo's results.json passes the results schema, and a bad spec fails the
//! schema at the line and column `construe check` reports. Skipped, with a message, when
//! python3 with jsonschema and PyYAML is not installed. Also: the CSV tables beside
//! results.json, and the documented Python example (`docs/examples/read_results.py`).

use std::path::{Path, PathBuf};
use std::process::Command;

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, demo_case, synthetic_csv};

fn repo() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// Whether `python3` can import every module; prints why a test is skipped when not.
fn python_with(modules: &[&str], test: &str) -> bool {
    let ok = Command::new("python3")
        .args(["-c", &format!("import {}", modules.join(", "))])
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    if !ok {
        eprintln!("skipping {test}: needs python3 with {} (pip install {})", modules.join(", "), modules.join(" "));
    }
    ok
}

/// Runs the validator on `files` against a committed schema: (exit code, stdout).
fn validate(schema: &str, files: &[PathBuf]) -> (i32, String) {
    let out = Command::new("python3")
        .arg(repo().join("tests/schema/validate.py"))
        .arg(repo().join(schema))
        .args(files)
        .output()
        .expect("run python3");
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    (out.status.code().unwrap_or(-1), format!("{stdout}{}", String::from_utf8_lossy(&out.stderr)))
}

/// A YAML mapping with the keys every spec has (`construe` and `constructs`).
fn is_spec(text: &str) -> bool {
    serde_yaml::from_str::<serde_yaml::Value>(text)
        .ok()
        .and_then(|v| v.as_mapping().map(|m| m.contains_key("construe") && m.contains_key("constructs")))
        .unwrap_or(false)
}

/// Every `*.yaml` / `*.yml` file under `dir` that is a spec.
fn spec_files(dir: &Path) -> Vec<PathBuf> {
    crate::harness::walk(dir)
        .into_iter()
        .filter(|p| matches!(p.extension().and_then(|e| e.to_str()), Some("yaml" | "yml")))
        .filter(|p| std::fs::read_to_string(p).is_ok_and(|t| is_spec(&t)))
        .collect()
}

/// The spec literals in a test source: each Rust string literal that starts with
/// `construe: 1`, unescaped; in a `format!` string, `{{ }}` are unescaped and each `{name}`
/// placeholder becomes `1`. Fragments (not whole specs) are left out by `is_spec`.
fn spec_literals(source: &str) -> Vec<String> {
    let mut found = Vec::new();
    let mut rest = source;
    while let Some(start) = rest.find("\"construe: 1") {
        let before = rest[..start].trim_end();
        let is_format = before.ends_with("format!(");
        let body = &rest[start + 1..];
        let mut text = String::new();
        let mut chars = body.char_indices();
        let mut end = body.len();
        while let Some((i, c)) = chars.next() {
            match c {
                '"' => {
                    end = i;
                    break;
                }
                '\\' => match chars.next() {
                    Some((_, 'n')) => text.push('\n'),
                    Some((_, 't')) => text.push('\t'),
                    Some((_, '\n')) => {
                        // A line continuation skips the next line's leading whitespace.
                        let skipped: String = chars.clone().map(|(_, c)| c).take_while(|c| c.is_whitespace()).collect();
                        for _ in 0..skipped.chars().count() {
                            chars.next();
                        }
                    }
                    Some((_, other)) => text.push(other),
                    None => {}
                },
                other => text.push(other),
            }
        }
        if is_format {
            text = fill_placeholders(&text);
        }
        found.push(text);
        rest = &body[end.min(body.len())..];
    }
    found.into_iter().filter(|t| is_spec(t)).collect()
}

fn fill_placeholders(text: &str) -> String {
    let mut out = String::new();
    let mut chars = text.chars().peekable();
    while let Some(c) = chars.next() {
        match (c, chars.peek()) {
            ('{', Some('{')) | ('}', Some('}')) => {
                chars.next();
                out.push(c);
            }
            ('{', _) => {
                for c in chars.by_ref() {
                    if c == '}' {
                        break;
                    }
                }
                out.push('1');
            }
            _ => out.push(c),
        }
    }
    out
}

#[test]
fn spec_literals_are_found_and_unescaped() {
    let source = "let a = \"construe: 1\\ntitle: t\\nconstructs: {}\\n\";\nlet b = format!(\"construe: 1\\nconstructs: {{a: {{items: [{x}]}}}}\\n\");\nlet c = \"construe: 1\\ntitle: fragment\\n\";";
    assert_eq!(
        spec_literals(source),
        ["construe: 1\ntitle: t\nconstructs: {}\n", "construe: 1\nconstructs: {a: {items: [1]}}\n"]
    );
}

#[test]
fn every_spec_and_the_demo_results_pass_their_schemas() {
    if !python_with(&["jsonschema", "yaml"], "every_spec_and_the_demo_results_pass_their_schemas") {
        return;
    }
    let mut files = spec_files(&repo().join("pipelines"));
    files.extend(spec_files(&repo().join("tests")));
    assert!(files.iter().any(|p| p.ends_with("pipelines/transit/spec.yaml")), "{files:?}");
    // The specs the integration tests write, from their sources.
    let literals = Case::new();
    let mut count = 0;
    for source in std::fs::read_dir(repo().join("tests")).unwrap().flatten().map(|e| e.path()) {
        if source.extension().and_then(|e| e.to_str()) != Some("rs") || source.ends_with("schemas.rs") {
            continue;
        }
        let text = std::fs::read_to_string(&source).unwrap();
        for spec in spec_literals(&text) {
            count += 1;
            let name = format!("{}-{count}.yaml", source.file_stem().unwrap().to_string_lossy());
            std::fs::write(literals.path().join(&name), spec).unwrap();
            files.push(literals.path().join(name));
        }
    }
    assert!(count >= 8, "expected the tests' spec literals, found {count}");
    // The unit tests' spec with every key of the format (`src/spec/schema.rs`), less its
    // summary matrix (it also has waves, which `check` refuses with a matrix).
    let source = std::fs::read_to_string(repo().join("src/spec/schema.rs")).unwrap();
    let every_key = source.split("EVERY_KEY: &str = r#\"").nth(1).and_then(|s| s.split("\"#").next()).unwrap();
    let matrix = every_key.lines().find(|l| l.trim_start().starts_with("matrix:")).expect("a matrix line");
    std::fs::write(literals.path().join("every-key.yaml"), every_key.replace(&format!("{matrix}\n"), "")).unwrap();
    files.push(literals.path().join("every-key.yaml"));
    let (code, out) = validate("schemas/spec.schema.json", &files);
    assert_eq!(code, 0, "specs fail the spec schema:\n{out}");
    assert_eq!(out.matches(": ok").count(), files.len(), "{out}");

    let case = demo_case(Some(10));
    case.run(["run", "pipelines/transit/spec.yaml"]).success();
    let results = case.path().join("reports/transit-rider-panel/v1/results.json");
    let (code, out) = validate("schemas/results.schema.json", std::slice::from_ref(&results));
    assert_eq!(code, 0, "the demo's results.json fails the results schema:\n{out}");
    // A published matrix instead of rows: no means, no percentiles, no bootstrap.
    let matrix = Case::new().spec(crate::inputs::MATRIX_SPEC).file("m.csv", crate::inputs::MATRIX);
    matrix.run(["run", "spec.yaml"]).success();
    let (code, out) =
        validate("schemas/results.schema.json", &[matrix.path().join("reports/published/v1/results.json")]);
    assert_eq!(code, 0, "a summary matrix's results.json fails the results schema:\n{out}");
    // The validator is not a rubber stamp: a results.json missing its format version fails.
    let mut broken: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&results).unwrap()).unwrap();
    broken.as_object_mut().unwrap().remove("results_format");
    broken["measure"]["fit"]["cfi"] = "high".into();
    let path = case.path().join("broken.json");
    std::fs::write(&path, broken.to_string()).unwrap();
    let (code, out) = validate("schemas/results.schema.json", &[path]);
    assert_eq!(code, 1, "{out}");
    assert!(out.contains("'results_format' is a required property"), "{out}");
    assert!(out.contains("$.measure.fit.cfi"), "{out}");
}

/// The places `construe check` reports (`at spec.yaml:L:C`), sorted.
fn check_places(case: &Case) -> Vec<String> {
    let out = case.run(["check", "spec.yaml"]);
    out.failure(1);
    let mut places: Vec<String> = out
        .stderr
        .lines()
        .filter_map(|l| l.trim().strip_prefix("at "))
        .map(|p| p.trim_start_matches("./").to_string())
        .collect();
    places.sort();
    places
}

/// The places the schema validator reports (`spec.yaml:L:C`), sorted.
fn schema_places(case: &Case) -> Vec<String> {
    let (code, out) = validate("schemas/spec.schema.json", &[case.path().join("spec.yaml")]);
    assert_eq!(code, 1, "the schema accepts a bad spec:\n{out}");
    let prefix = format!("{}/", case.path().display());
    let mut places: Vec<String> = out
        .lines()
        .filter_map(|l| l.strip_prefix(&prefix))
        .filter_map(|l| {
            let mut parts = l.splitn(4, ':');
            Some(format!("{}:{}:{}", parts.next()?, parts.next()?, parts.next()?))
        })
        .collect();
    places.sort();
    places.dedup();
    places
}

#[test]
fn schema_and_check_point_at_the_same_place() {
    if !python_with(&["jsonschema", "yaml"], "schema_and_check_point_at_the_same_place") {
        return;
    }
    let analyses = "analyses:\n  covariance: {missing: pairwise}\n";
    let cases: &[(&str, &str, &str)] = &[
        ("unknown key", "covariance: {missing", "covariance: {mising"),
        ("unknown top-level key", "title: Small panel", "title: Small panel\nauthor: me"),
        ("unknown key in a wave", "{id: w1, file: w1.csv}", "{id: w1, file: w1.csv, weight: 2}"),
        ("wrong type: text for a number", analyses, "analyses:\n  structure: {alpha: high}\n"),
        ("wrong type: a list for text", "title: Small panel", "title: [Small, panel]"),
        ("wrong word", "missing: pairwise", "missing: pairswise"),
        ("wrong type: text for a list", "items: [a1, a2, a3]", "items: a1"),
        ("alpha out of range", analyses, "analyses:\n  purify: {alpha: 1.5}\n"),
        ("alpha at zero", analyses, "analyses:\n  structure: {alpha: 0}\n"),
        ("min_items below 3", analyses, "analyses:\n  purify: {min_items: 2}\n"),
        ("no replicates", analyses, "analyses:\n  resample: {replicates: 0}\n"),
        ("too many replicates", analyses, "analyses:\n  resample: {replicates: 100001}\n"),
        ("reliability above 1", "x]}", "x], reliability: 1.5}"),
        ("no report format", analyses, "report: {formats: []}\n"),
        ("wrong format version", "construe: 1", "construe: 2"),
    ];
    for (what, from, to) in cases {
        assert!(SMALL_SPEC.contains(from), "{what}: `{from}` not in the spec");
        let spec = SMALL_SPEC.replacen(from, to, 1);
        let case = Case::new().spec(&spec).file("w1.csv", synthetic_csv(120, 3, SMALL_COLUMNS));
        let check = check_places(&case);
        assert!(!check.is_empty(), "{what}: check reports no place");
        assert_eq!(schema_places(&case), check, "{what}: schema and check disagree\n{spec}");
    }
}

#[test]
fn schema_command_prints_the_committed_schemas() {
    let case = Case::new();
    for which in ["spec", "results"] {
        let out = case.run(["schema", which]);
        out.success();
        let committed = std::fs::read_to_string(repo().join(format!("schemas/{which}.schema.json"))).unwrap();
        assert_eq!(
            out.stdout, committed,
            "schemas/{which}.schema.json is stale: construe schema {which} > schemas/{which}.schema.json"
        );
    }
    case.run(["schema", "report"]).failure(1);
}

#[test]
fn the_demo_spec_names_its_schema_for_editors() {
    let spec = std::fs::read_to_string(repo().join("pipelines/transit/spec.yaml")).unwrap();
    let first = spec.lines().next().unwrap();
    let target = first.strip_prefix("# yaml-language-server: $schema=").expect("the editor hint is the first line");
    assert!(repo().join("pipelines/transit").join(target).is_file(), "{target} does not exist");
}

/// The editor hint is a comment: the parsed spec, and so every step key, is the same without it.
#[test]
fn the_editor_hint_changes_no_key() {
    let case = demo_case(None);
    let with_hint = case.run(["plan", "pipelines/transit/spec.yaml"]);
    with_hint.success();
    let spec = case.read("pipelines/transit/spec.yaml");
    assert!(spec.starts_with("# yaml-language-server: $schema="));
    let without: String = spec.lines().skip(1).map(|l| format!("{l}\n")).collect();
    let case = case.file("pipelines/transit/spec.yaml", without);
    let without_hint = case.run(["plan", "pipelines/transit/spec.yaml"]);
    without_hint.success();
    assert_eq!(with_hint.stdout, without_hint.stdout);
    assert!(with_hint.stdout.lines().count() >= 7, "{}", with_hint.stdout);
}

/// The CSV tables hold results.json's aggregates (same numbers, parsed back), quoted so that
/// names with commas and quotes survive, and `verify` renders them again.
#[test]
fn tables_hold_the_results_and_quote_names() {
    let odd = "b,\"3\"";
    let columns = ["a1", "a2", "a3", "b1", "b2", odd, "x"];
    let csv = synthetic_csv(200, 7, &columns).replacen(odd, "\"b,\"\"3\"\"\"", 1);
    let spec = "construe: 1\ntitle: Odd names\ndata:\n  waves: [{id: w1, file: w1.csv}]\n  id_column: rid\nconstructs:\n  alpha: {items: [a1, a2, a3]}\n  \"be,ta\": {items: [b1, b2, 'b,\"3\"', x]}\nanalyses:\n  measure: {}\n  structure: {}\n";
    let case = Case::new().spec(spec).file("w1.csv", csv);
    case.run(["run", "spec.yaml"]).success();
    let dir = case.path().join("reports/odd-names/v1");
    let results_text = std::fs::read_to_string(dir.join("results.json")).unwrap();
    let results: serde_json::Value = serde_json::from_str(&results_text).unwrap();
    // serde_json reads decimals to within one unit in the last place; the digits are the same.
    let same = |text: &str, v: &serde_json::Value| {
        let (a, b) = (text.parse::<f64>().unwrap(), v.as_f64().unwrap());
        (a - b).abs() <= 4.0 * f64::EPSILON * b.abs() && results_text.contains(&format!(": {text}"))
    };
    let mut reader = csv::Reader::from_path(dir.join("tables/loadings.csv")).unwrap();
    assert_eq!(reader.headers().unwrap(), vec!["construct", "item", "loading", "se", "std"]);
    let mut rows = 0;
    for record in reader.records() {
        let r = record.unwrap();
        let expected = &results["measure"]["loadings"][&r[0]][&r[1]];
        assert!(expected.is_object(), "{r:?} is not a loading of results.json");
        assert!(same(&r[2], &expected["est"]) && same(&r[4], &expected["std"]), "{r:?} vs {expected}");
        rows += 1;
    }
    assert_eq!(rows, 7);
    let text = std::fs::read_to_string(dir.join("tables/loadings.csv")).unwrap();
    assert!(text.contains("\"be,ta\",\"b,\"\"3\"\"\""), "{text}");
    let fit = std::fs::read_to_string(dir.join("tables/fit.csv")).unwrap();
    let measure: Vec<&str> = fit.lines().nth(1).unwrap().split(',').collect();
    assert_eq!(measure[..3], ["measure", "true", "200"], "{fit}");
    assert!(same(measure[3], &results["measure"]["fit"]["chisq"]), "{fit}");
    assert!(dir.join("tables/edges.csv").is_file() && dir.join("tables/effects.csv").is_file());
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("manifest.json")).unwrap()).unwrap();
    for table in ["loadings", "fit", "edges", "effects"] {
        assert!(manifest["files"][format!("tables/{table}.csv")].is_string(), "{table} not in the manifest");
    }
    if python_with(&["jsonschema", "yaml"], "tables_hold_the_results_and_quote_names (schema part)") {
        let (code, out) = validate("schemas/results.schema.json", &[dir.join("results.json")]);
        assert_eq!(code, 0, "results.json without resample fails its schema:\n{out}");
    }
    let out = case.run(["verify", "reports/odd-names/v1"]);
    out.success().stdout_contains("file tables/loadings.csv");
    // An edited table is caught.
    std::fs::write(dir.join("tables/fit.csv"), fit.replace("measure,", "measured,")).unwrap();
    case.run(["verify", "reports/odd-names/v1"]).failure(1).stdout_contains("MISMATCH  file tables/fit.csv");
}

/// docs/results-in-r-and-python.md: the committed Python example turns the demo's
/// results.json into data frames; its loadings table is the demo's.
#[test]
fn the_python_example_reads_the_demo_loadings() {
    if !python_with(&["pandas"], "the_python_example_reads_the_demo_loadings") {
        return;
    }
    let case = demo_case(Some(10));
    case.run(["run", "pipelines/transit/spec.yaml"]).success();
    let results = case.path().join("reports/transit-rider-panel/v1/results.json");
    let out = Command::new("python3")
        .arg(repo().join("docs/examples/read_results.py"))
        .arg(&results)
        .output()
        .expect("run python3");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{stdout}\n{}", String::from_utf8_lossy(&out.stderr));
    let r: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&results).unwrap()).unwrap();
    // The loadings table as the example prints it (`to_csv`): one row per kept item.
    let loadings: Vec<&str> = stdout
        .split("== loadings ==\n")
        .nth(1)
        .and_then(|s| s.split("\n== ").next())
        .expect("a loadings section")
        .lines()
        .collect();
    assert_eq!(loadings[0], "construct,item,est,se,std");
    let mut expected = Vec::new();
    for (construct, items) in r["measure"]["loadings"].as_object().unwrap() {
        for (item, e) in items.as_object().unwrap() {
            expected.push((construct.clone(), item.clone(), e["est"].as_f64().unwrap()));
        }
    }
    assert_eq!(loadings.len() - 1, expected.len());
    assert_eq!(expected.len(), 19, "the demo keeps 19 of 21 items");
    for (line, (construct, item, est)) in loadings[1..].iter().zip(&expected) {
        let fields: Vec<&str> = line.split(',').collect();
        assert_eq!((fields[0], fields[1]), (construct.as_str(), item.as_str()));
        assert!((fields[2].parse::<f64>().unwrap() - est).abs() < 1e-12, "{line} vs {est}");
    }
    for section in ["== fit ==", "== edges ==", "== effects =="] {
        assert!(stdout.contains(section), "{section} missing:\n{stdout}");
    }
    assert!(stdout.contains("boot_present"), "edges without bootstrap shares:\n{stdout}");
    assert!(stdout.contains("boot_ci_lower"), "effects without bootstrap intervals:\n{stdout}");
}
