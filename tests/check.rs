//! Bad specs and bad data: each gets a clear message naming the place, exit code 1, and no
//! report folder. Diagnostics are compared verbatim where their wording is the contract.

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, small_case, synthetic_csv};

fn with_spec(spec: &str) -> Case {
    Case::new().spec(spec).file("w1.csv", synthetic_csv(120, 3, SMALL_COLUMNS))
}

#[test]
fn valid_spec_checks_clean() {
    small_case()
        .run(["check", "spec.yaml"])
        .success()
        .stderr_contains("spec.yaml: ok (0 warnings)")
        .stderr_lacks("warning:");
}

#[test]
fn malformed_yaml_gives_line_and_column() {
    let spec = SMALL_SPEC.replace("  alpha: {items: [a1, a2, a3]}", "  alpha: {items: [a1, a2, a3}");
    let case = with_spec(&spec);
    let out = case.run(["run", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("error: the spec is not valid YAML")
        .stderr_contains("at spec.yaml:8:29")
        .no_report();
}

#[test]
fn unknown_key_is_shown_verbatim_with_a_suggestion() {
    let spec = SMALL_SPEC.replace("covariance: {missing", "covariance: {mising");
    let out = with_spec(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    let expected = "error: unknown key `mising` in `analyses.covariance`
  at spec.yaml:11:16
  11 |   covariance: {mising: pairwise}
     |                ^^^^^^
  hint: did you mean `missing`?
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
}

#[test]
fn all_unknown_keys_are_reported_at_once() {
    let spec = SMALL_SPEC.replace("title:", "titel:").replace("id_column", "id_colum");
    let out = with_spec(&spec).run(["check", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("unknown key `titel` in the spec's top level")
        .stderr_contains("did you mean `title`?")
        .stderr_contains("unknown key `id_colum` in `data`")
        .stderr_contains("did you mean `id_column`?")
        .stderr_contains("2 errors and 0 warnings");
}

#[test]
fn unknown_item_names_construct_and_suggests() {
    let spec = SMALL_SPEC.replace("[b1, b2, b3, x]", "[b1, b2, bb3, x]");
    let out = with_spec(&spec).run(["run", "spec.yaml"]);
    let expected = "error: item `bb3` of construct `beta` is not a column of any data file
  at spec.yaml:9:26
  9 |   beta: {items: [b1, b2, bb3, x]}
    |                          ^^^
  hint: did you mean `b3`?
";
    out.failure(1).no_report();
    assert!(out.stderr.contains(expected), "{}", out.stderr);
}

#[test]
fn missing_data_file() {
    let case = Case::new().spec(SMALL_SPEC);
    case.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("data file `w1.csv` of wave `w1` does not exist")
        .stderr_contains("at spec.yaml:5:")
        .stderr_contains("paths are relative to the folder of the spec file")
        .no_report();
}

#[test]
fn non_numeric_value_names_file_row_and_column() {
    let mut csv = synthetic_csv(50, 3, SMALL_COLUMNS);
    let lines: Vec<String> = csv.lines().map(str::to_string).collect();
    let mut fields: Vec<String> = lines[4].split(',').map(str::to_string).collect();
    fields[2] = "often".into();
    let mut lines = lines;
    lines[4] = fields.join(",");
    csv = lines.join("\n") + "\n";
    let case = Case::new().spec(SMALL_SPEC).file("w1.csv", csv);
    case.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: `w1.csv` row 4 (line 5), column `a2`: `often` is not a number")
        .stderr_contains("hint: fix the value")
        .no_report();
}

#[test]
fn column_missing_from_one_wave_names_the_wave() {
    let spec = SMALL_SPEC
        .replace("    - {id: w1, file: w1.csv}\n", "    - {id: w1, file: w1.csv}\n    - {id: w2, file: w2.csv}\n");
    let cols: Vec<&str> = SMALL_COLUMNS.iter().copied().filter(|c| *c != "b2").collect();
    let case = Case::new()
        .spec(&spec)
        .file("w1.csv", synthetic_csv(60, 3, SMALL_COLUMNS))
        .file("w2.csv", synthetic_csv(60, 4, &cols));
    case.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: wave `w2` has no column `b2` (file `w2.csv`)")
        .no_report();
}

#[test]
fn constant_item_is_refused() {
    let csv = synthetic_csv(40, 3, SMALL_COLUMNS);
    let csv: String = csv
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                return format!("{l}\n");
            }
            let mut f: Vec<&str> = l.split(',').collect();
            f[1] = "3";
            format!("{}\n", f.join(","))
        })
        .collect();
    Case::new()
        .spec(SMALL_SPEC)
        .file("w1.csv", csv)
        .run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("item `a1` is constant (3 in every row with a value)")
        .no_report();
}

#[test]
fn tier_naming_unknown_construct() {
    let spec = format!("{SMALL_SPEC}knowledge:\n  tiers: [[alpha], [betta]]\n");
    let out = with_spec(&spec).run(["run", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("error: tier 2 names `betta`, which is not a declared construct")
        .stderr_contains("at spec.yaml:13:21")
        .stderr_contains("did you mean `beta`?")
        .no_report();
}

#[test]
fn semantic_problems_are_all_reported_sorted() {
    let spec = SMALL_SPEC.replace("[b1, b2, b3, x]", "[b1, a2, b3, x]")
        + "knowledge:\n  tiers: [[beta], [alpha]]\n  require: [[alpha, beta]]\n  forbid: [[alpha, gamma]]\n";
    let out = with_spec(&spec).run(["check", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("item `a2` is in two constructs, `alpha` and `beta`")
        .stderr_contains("`knowledge.forbid` names `gamma`")
        .stderr_contains("required edge `alpha` -> `beta` goes from tier 2 back to tier 1")
        .stderr_contains("3 errors");
    let a = out.stderr.find("two constructs").unwrap();
    let b = out.stderr.find("gamma").unwrap();
    assert!(a < b, "sorted by line");
}

#[test]
fn ranges_are_checked() {
    let spec = SMALL_SPEC.replace("beta: {items: [b1, b2, b3, x]}", "beta: {items: [b1, b2, b3, x], reliability: 1.5}")
        + "  structure: {alpha: 0}\n";
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("reliability of `beta` must lie in (0, 1], found 1.5")
        .stderr_contains("`structure.alpha` must lie in (0, 1), found 0");
}

#[test]
fn type_errors_have_positions() {
    let spec = SMALL_SPEC.replace("construe: 1", "construe: one");
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("construe: invalid type")
        .stderr_contains("at spec.yaml:1:");
}

#[test]
fn sensitivity_needs_structure_and_a_single_indicator() {
    let spec = format!("{SMALL_SPEC}  sensitivity: {{reliability: {{beta: [0.8]}}}}\n");
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: analysis `sensitivity` needs `structure` in the spec")
        .stderr_contains("sensitivity to the reliability of `beta` needs a single-indicator construct; it has 4 items");
}

#[test]
fn unknown_keys_do_not_hide_other_problems() {
    let spec =
        SMALL_SPEC.replace("covariance: {missing", "covarience: {missing").replace("[a1, a2, a3]", "[a1, a2, a33]");
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("unknown key `covarience` in `analyses`")
        .stderr_contains("did you mean `covariance`?")
        .stderr_contains("item `a33` of construct `alpha` is not a column of any data file")
        .stderr_contains("2 errors and 0 warnings");
}

#[test]
fn unusual_alpha_is_a_warning() {
    let spec = format!("{SMALL_SPEC}  structure: {{alpha: 0.5}}\n");
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .success()
        .stderr_contains("warning: `structure.alpha` = 0.5 is unusual for a significance level")
        .stderr_contains("at spec.yaml:12:")
        .stderr_contains("ok (1 warning)");
}

#[test]
fn a_scale_score_entered_as_an_item_is_flagged() {
    // Column `x` replaced by the sum of a1..a3 (a score someone computed beforehand), with its
    // missing-value code -9 in every seventh row: the lint reads the table `load` made (codes
    // applied), so it sees the score; `check` reads only headers and says nothing.
    let csv = synthetic_csv(60, 3, SMALL_COLUMNS);
    let mut lines = csv.lines();
    let mut out = format!("{}\n", lines.next().unwrap());
    for (r, l) in lines.enumerate() {
        let f: Vec<f64> = l.split(',').map(|v| v.parse().unwrap()).collect();
        let score = if r % 7 == 0 { -9.0 } else { f[1] + f[2] + f[3] };
        out.push_str(&format!("{},{},{},{},{},{},{},{score}\n", f[0], f[1], f[2], f[3], f[4], f[5], f[6]));
    }
    let spec = SMALL_SPEC.replace("  id_column: rid\n", "  id_column: rid\n  missing_codes: [-9]\n");
    let case = Case::new().spec(&spec).file("w1.csv", out);
    case.run(["check", "spec.yaml"]).success().stderr_lacks("scale score");
    case.run(["run", "spec.yaml"])
        .success()
        .stderr_contains("warning: item `x` equals the sum of the items of `alpha` in every row: it is a scale score, not an indicator")
        .stderr_contains("at spec.yaml:10:30")
        .stderr_contains("does not screen off");
}

#[test]
fn a_coarse_single_indicator_between_constructs_is_flagged() {
    // `m` is a yes/no item, the only indicator of a construct in the middle tier.
    let csv = synthetic_csv(80, 3, SMALL_COLUMNS);
    let mut lines = csv.lines();
    let mut out = format!("{},m\n", lines.next().unwrap());
    for (r, l) in lines.enumerate() {
        out.push_str(&format!("{l},{}\n", r % 2));
    }
    let spec = SMALL_SPEC.replace(
        "  beta: {items: [b1, b2, b3, x]}\n",
        "  beta: {items: [b1, b2, b3, x]}\n  mid: {items: [m], reliability: 0.8}\n",
    ) + "knowledge:\n  tiers: [[alpha], [mid], [beta]]\n";
    Case::new()
        .spec(&spec)
        .file("w1.csv", out)
        .run(["run", "spec.yaml"])
        .success()
        .stderr_contains(
            "warning: construct `mid` sits between other constructs but its single indicator `m` has only 2 categories",
        )
        .stderr_contains("at spec.yaml:10:");
}

/// Sets column `column` of data row `row` (1-based) of a CSV to `value`.
fn set_cell(csv: &str, row: usize, column: &str, value: &str) -> String {
    let mut lines: Vec<String> = csv.lines().map(str::to_string).collect();
    let k = lines[0].split(',').position(|c| c == column).unwrap();
    let mut fields: Vec<String> = lines[row].split(',').map(str::to_string).collect();
    fields[k] = value.into();
    lines[row] = fields.join(",");
    lines.join("\n") + "\n"
}

/// `check` reads every value once and reports all that `run` would refuse, each counted, with
/// the spec entry to change: cells that are not numbers (two columns, one of them twice), a
/// reverse range the item's answers do not fit, and a constant item — even after a type error
/// elsewhere in the spec.
#[test]
fn check_finds_every_data_problem_run_would_refuse() {
    let mut csv = synthetic_csv(80, 3, SMALL_COLUMNS);
    csv = set_cell(&csv, 4, "a2", "often");
    csv = set_cell(&csv, 9, "a2", "n/a");
    csv = set_cell(&csv, 12, "b1", "5..");
    let lines: Vec<String> = csv.lines().map(str::to_string).collect();
    let constant: Vec<String> = lines.iter().skip(1).map(|_| "4".to_string()).collect();
    for (r, v) in constant.iter().enumerate() {
        csv = set_cell(&csv, r + 1, "b3", v);
    }
    let spec = SMALL_SPEC
        .replace("  id_column: rid\n", "  id_column: rid\n  reverse: {a1: [1, 4]}\n")
        .replace("covariance: {missing: pairwise}", "covariance: {missing: pairwize}");
    let out = Case::new().spec(&spec).file("w1.csv", csv.clone()).run(["check", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("analyses.covariance.missing: unknown variant `pairwize`")
        .stderr_contains(
            "error: `w1.csv` column `a2`: 2 values are not numbers (row 4 (line 5): `often`; row 9 (line 10): `n/a`)",
        )
        .stderr_contains("error: `w1.csv` column `b1`: 1 value is not a number (row 12 (line 13): `5..`)")
        .stderr_contains("error: item `a1` has ")
        .stderr_contains("outside its reverse range [1, 4] (5 in `w1.csv` row ")
        .stderr_contains("error: item `b3` is constant (4 in every row with a value)")
        .stderr_contains("5 errors and 0 warnings");
    let reverse = "error: item `a1` has ";
    let at = out.stderr.find(reverse).unwrap();
    assert!(out.stderr[at..].contains("at spec.yaml:7:17"), "{}", out.stderr);
    // `run` refuses the same data (at its first problem).
    let fixed = spec.replace("pairwize", "pairwise");
    Case::new().spec(&fixed).file("w1.csv", csv).run(["run", "spec.yaml"]).failure(1).no_report();
}

/// A clean file passes `check` whatever its size, and a problem past the first rows is found.
#[test]
fn check_reads_to_the_last_row() {
    let csv = synthetic_csv(3000, 5, SMALL_COLUMNS);
    let case = Case::new().spec(SMALL_SPEC).file("w1.csv", set_cell(&csv, 3000, "x", "--"));
    case.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("`w1.csv` column `x`: 1 value is not a number (row 3000 (line 3001): `--`)");
}

/// Several type errors in the spec are all reported, each at its own position.
#[test]
fn every_type_error_is_reported() {
    let spec = SMALL_SPEC
        .replace("covariance: {missing: pairwise}", "covariance: {missing: pairwize}")
        .replace("title: Small panel", "title: [Small, panel]");
    with_spec(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("title: invalid type")
        .stderr_contains("at spec.yaml:2:")
        .stderr_contains("unknown variant `pairwize`")
        .stderr_contains("at spec.yaml:11:")
        .stderr_contains("2 errors and 0 warnings");
}

#[test]
fn estimation_choices_without_meaning_are_positioned() {
    let spec = SMALL_SPEC.to_string() + "  measure: {estimation: {method: dwls, standard_errors: information}}\n";
    with_spec(&spec).run(["check", "spec.yaml"]).failure(1).stderr_contains(
        "error: `standard_errors: information` has no meaning for `method: dwls`
  at spec.yaml:12:57
  12 |   measure: {estimation: {method: dwls, standard_errors: information}}
     |                                                         ^^^^^^^^^^^
  hint: weighted least squares has no information matrix of its own; use `standard_errors: sandwich` (or `auto`)",
    );
    let spec = SMALL_SPEC.to_string() + "  measure: {estimation: {method: dwls, standard_errors: sandwiches}}\n";
    with_spec(&spec).run(["check", "spec.yaml"]).failure(1).stderr_contains("sandwiches");
}
