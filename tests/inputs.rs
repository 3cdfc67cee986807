//! Hostile inputs (issue 13): published matrices, spec values and counts, repeated keys and
//! columns, damaged CSV and Parquet files, special files. Each is refused with exit 1, the file
//! and place named, before anything is computed; no case hangs.

use crate::harness::{Case, SMALL_COLUMNS, SMALL_SPEC, synthetic_csv};

// ---------------------------------------------------------------- published matrices (item 3)

pub const MATRIX: &str = ",a1,a2,a3,b1,b2,b3
a1,1,0.5,0.4,0.2,0.2,0.1
a2,0.5,1,0.45,0.2,0.15,0.1
a3,0.4,0.45,1,0.1,0.2,0.2
b1,0.2,0.2,0.1,1,0.5,0.4
b2,0.2,0.15,0.2,0.5,1,0.45
b3,0.1,0.1,0.2,0.4,0.45,1
";

pub const MATRIX_SPEC: &str = "construe: 1
title: Published
data:
  matrix: {file: m.csv, kind: correlation, n: 300}
constructs:
  alpha: {items: [a1, a2, a3]}
  beta: {items: [b1, b2, b3]}
analyses:
  covariance: {}
  measure: {}
";

fn matrix_case(matrix: &str, spec: &str) -> Case {
    Case::new().spec(spec).file("m.csv", matrix)
}

/// `check` fails with exactly `expected` (the whole diagnostic, caret and hint included), and
/// `run` refuses the same spec before computing anything.
fn refused(case: &Case, expected: &str) {
    let out = case.run(["check", "spec.yaml"]);
    out.failure(1);
    assert!(out.stderr.contains(expected), "expected\n{expected}\n--- got\n{}", out.stderr);
    case.run(["run", "spec.yaml"]).failure(1).stderr_lacks("computed").no_report();
}

#[test]
fn a_valid_published_matrix_runs() {
    matrix_case(MATRIX, MATRIX_SPEC).run(["run", "spec.yaml"]).success();
}

#[test]
fn matrix_diagonal_other_than_one_is_refused_at_check() {
    let case = matrix_case(&MATRIX.replace("a2,0.5,1,", "a2,0.5,0.9,"), MATRIX_SPEC);
    refused(
        &case,
        "error: summary matrix `m.csv` line 3 (row `a2`), column `a2`: the diagonal of a correlation matrix must be 1, found 0.9
  at spec.yaml:4:18
  4 |   matrix: {file: m.csv, kind: correlation, n: 300}
    |                  ^^^^^
",
    );
}

#[test]
fn matrix_row_labels_must_match_the_header() {
    let case = matrix_case(&MATRIX.replace("\nb2,", "\nb9,"), MATRIX_SPEC);
    refused(
        &case,
        "error: summary matrix `m.csv` line 6: row 5 is labelled `b9`, but column 5 of the header is `b2`; rows must name the header's items in the same order",
    );
    // Same names, another order.
    let swapped =
        MATRIX.replace("\nb2,0.2,0.15,0.2,0.5,1,0.45", "\nb9").replace("\nb1,", "\nb2,0.2,0.15,0.2,0.5,1,0.45\nb1,");
    let swapped = swapped.replace("\nb9", "");
    refused(&matrix_case(&swapped, MATRIX_SPEC), "line 5: row 4 is labelled `b2`, but column 4 of the header is `b1`");
}

#[test]
fn matrix_with_a_duplicated_name_is_refused() {
    let case = matrix_case(&MATRIX.replace(",a1,a2,a3,b1,b2,b3", ",a1,a2,a3,b1,a2,b3"), MATRIX_SPEC);
    refused(&case, "error: summary matrix `m.csv` line 1: `a2` names two columns (3 and 6); each item may appear once");
}

#[test]
fn matrix_that_is_not_symmetric_or_not_finite_is_refused() {
    let case = matrix_case(&MATRIX.replace("b3,0.1,0.1,0.2,0.4,0.45,1", "b3,0.1,0.1,0.2,0.4,0.54,1"), MATRIX_SPEC);
    refused(
        &case,
        "error: summary matrix `m.csv` line 7 (row `b3`), column `b2`: 0.54 differs from 0.45 at row `b2`, column `b3`; the matrix must be symmetric",
    );
    let case = matrix_case(&MATRIX.replace("a3,0.4,0.45,1,0.1", "a3,0.4,0.45,1,NaN"), MATRIX_SPEC);
    refused(&case, "error: summary matrix `m.csv` line 4 (row `a3`), column `b1`: `NaN` is not a finite number");
}

#[test]
fn matrix_n_must_exceed_the_items_and_stay_sane() {
    let case = matrix_case(MATRIX, &MATRIX_SPEC.replace("n: 300", "n: 6"));
    refused(
        &case,
        "error: `n` = 6 is too small for a matrix of 6 items: the sample must be larger than the number of items (at least 7)
  at spec.yaml:4:47
",
    );
    let started = std::time::Instant::now();
    let case = matrix_case(MATRIX, &MATRIX_SPEC.replace("n: 300", "n: 1000000000000000"));
    refused(
        &case,
        "error: `n` = 1000000000000000 is more respondents than construe accepts for a summary matrix (at most 100000000)
  at spec.yaml:4:47
",
    );
    assert!(started.elapsed().as_secs() < 5, "n = 10^15 must be refused at once");
}

#[test]
fn matrix_that_is_not_positive_definite_is_refused_with_its_smallest_eigenvalue() {
    // b1-b2 and b2-b3 correlate 0.99 but b1-b3 -0.9: no three variables can do that.
    let bad = MATRIX
        .replace("b1,0.2,0.2,0.1,1,0.5,0.4", "b1,0.2,0.2,0.1,1,0.99,-0.9")
        .replace("b2,0.2,0.15,0.2,0.5,1,0.45", "b2,0.2,0.15,0.2,0.99,1,0.99")
        .replace("b3,0.1,0.1,0.2,0.4,0.45,1", "b3,0.1,0.1,0.2,-0.9,0.99,1");
    let case = matrix_case(&bad, MATRIX_SPEC);
    let out = case.run(["check", "spec.yaml"]);
    out.failure(1)
        .stderr_contains("error: summary matrix `m.csv` is not positive definite over the 6 items the spec uses: its smallest eigenvalue is -")
        .stderr_contains("hint: check the matrix against its source for typing errors; a matrix computed from pairwise-complete data need not be positive definite");
    case.run(["run", "spec.yaml"]).failure(1).no_report();
    // The analysed items alone are checked: without b2 the rest is a valid matrix.
    let spec = MATRIX_SPEC.replace("[b1, b2, b3]", "[b1, b3]");
    matrix_case(&bad, &spec).run(["check", "spec.yaml"]).success();
}

// ------------------------------------------------------ spec values and counts (items 4, 5)

fn small(spec: &str) -> Case {
    Case::new().spec(spec).file("w1.csv", synthetic_csv(120, 3, SMALL_COLUMNS))
}

/// SMALL_SPEC with a single-indicator construct `solo` (item `x`), a structure and the given
/// sensitivity block.
fn sensitivity_spec(sensitivity: &str) -> String {
    SMALL_SPEC.replace("[b1, b2, b3, x]}", "[b1, b2, b3]}\n  solo: {items: [x], reliability: 0.8}")
        + "  structure: {}\n"
        + sensitivity
}

#[test]
fn beta_prior_with_nan_inf_zero_or_negative_is_a_positioned_error() {
    let spec = sensitivity_spec("  sensitivity:\n    prior: {solo: {beta: [.nan, 3]}}\n");
    let out = small(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    let expected = "error: beta prior parameter 1 for `solo` must be a finite number, found NaN
  at spec.yaml:15:27
  15 |     prior: {solo: {beta: [.nan, 3]}}
     |                           ^^^^
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
    for (value, shown) in [
        (".inf", "must be a finite number, found inf"),
        ("0", "must lie in (0, inf), found 0"),
        ("-2", "must lie in (0, inf), found -2"),
    ] {
        let spec = sensitivity_spec(&format!("  sensitivity:\n    prior: {{solo: {{beta: [7, {value}]}}}}\n"));
        small(&spec)
            .run(["run", "spec.yaml"])
            .failure(1)
            .stderr_contains(&format!("error: beta prior parameter 2 for `solo` {shown}"))
            .stderr_contains("at spec.yaml:15:30")
            .no_report();
    }
}

#[test]
fn other_spec_floats_are_checked_for_finiteness_and_range() {
    let spec = SMALL_SPEC
        .replace("  id_column: rid\n", "  id_column: rid\n  missing_codes: [-9, .inf]\n  reverse: {a1: [1, .nan]}\n")
        + "  purify: {alpha: .nan}\n";
    small(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: a missing code must be a finite number, found inf\n  at spec.yaml:7:23")
        .stderr_contains("error: the reverse range of `a1` must be a finite number, found NaN\n  at spec.yaml:8:21")
        .stderr_contains("error: `purify.alpha` must lie in (0, 1), found NaN");
}

#[test]
fn counts_have_upper_bounds() {
    let spec = sensitivity_spec("  sensitivity:\n    prior: {solo: {beta: [7, 3]}}\n    draws: 1000000000\n")
        + "  resample: {replicates: 1000000000}\n";
    let out = small(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    let expected = "error: `sensitivity.draws` is 1000000000; at most 100000 are allowed
  at spec.yaml:16:12
  16 |     draws: 1000000000
     |            ^^^^^^^^^^
  hint: the bound keeps a run within memory and a working day; split the work or lower the count
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
    out.stderr_contains("error: `resample.replicates` is 1000000000; at most 100000 are allowed\n  at spec.yaml:17:26");
    let grid: Vec<String> = (1..=1001).map(|i| format!("{}", i as f64 / 1001.0)).collect();
    let spec = sensitivity_spec(&format!("  sensitivity:\n    reliability: {{solo: [{}]}}\n", grid.join(", ")))
        + "  purify: {min_items: 5000}\n";
    small(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: the number of reliability values for `solo` is 1001; at most 1000 are allowed")
        .stderr_contains("error: `purify.min_items` is 5000; at most 1000 are allowed");
}

#[test]
fn simulate_refuses_too_many_rows_quickly() {
    let model = "simulate: 1\nconstructs:\n  - {name: a}\nitems:\n  - {name: a1, construct: a, loading: 0.8, error_variance: 0.36}\n";
    let case = Case::new().file("model.yaml", model);
    case.run(["simulate", "model.yaml", "--out", "x.csv", "--n", "1000000000000"])
        .failure(1)
        .stderr_contains("error: `--n` = 1000000000000 is more rows than construe simulates (at most 10000000)")
        .stderr_contains("hint: draw fewer rows, or draw several files");
    assert!(!case.exists("x.csv"));
    let case = Case::new().file("model.yaml", format!("{model}n: 20000000\n"));
    case.run(["simulate", "model.yaml", "--out", "x.csv"])
        .failure(1)
        .stderr_contains("error: the model's `n` = 20000000 is more rows than construe simulates");
}

#[test]
fn constructs_too_small_to_fit_fail_at_check() {
    let spec = SMALL_SPEC.replace("[b1, b2, b3, x]}", "[b1, b2, b3]}\n  solo: {items: [x]}") + "  measure: {}\n";
    let out = small(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    let expected =
        "error: construct `solo` has 1 item and no `reliability`, so the measurement model cannot identify it
  at spec.yaml:10:3
  10 |   solo: {items: [x]}
     |   ^^^^
  hint: add items (at least 3), or give the single indicator a `reliability`
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
    let spec = SMALL_SPEC.to_string() + "  purify: {min_items: 4}\n";
    small(&spec)
        .run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains(
            "error: construct `alpha` has 3 items but `purify.min_items` is 4, so purification cannot test it",
        )
        .stderr_lacks("computed")
        .no_report();
}

#[test]
fn a_title_over_255_characters_fails_at_check() {
    let spec = SMALL_SPEC.replace("title: Small panel", &format!("title: {}", "t".repeat(300)));
    small(&spec)
        .run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: the title is 300 characters long; at most 255 are allowed\n  at spec.yaml:2:8")
        .no_report();
}

#[test]
fn a_byte_order_mark_before_the_spec_is_accepted() {
    let spec = format!("\u{feff}{SMALL_SPEC}");
    small(&spec).run(["check", "spec.yaml"]).success().stderr_contains("ok (0 warnings)");
}

// ------------------------------------------------------------ repeated keys and columns (12)

#[test]
fn a_construct_declared_twice_is_an_error_at_its_second_copy() {
    let spec = SMALL_SPEC.replace(
        "  beta: {items: [b1, b2, b3, x]}\n",
        "  beta: {items: [b1, b2, b3, x]}\n  alpha: {items: [b1, b2, b3]}\n",
    );
    let out = small(&spec).run(["check", "spec.yaml"]);
    out.failure(1);
    let expected = "error: key `alpha` appears twice in `constructs` (first on line 8)
  at spec.yaml:10:3
  10 |   alpha: {items: [b1, b2, b3]}
     |   ^^^^^
  hint: keep one copy; YAML does not say which of two copies counts
";
    assert!(out.stderr.contains(expected), "{}", out.stderr);
}

#[test]
fn repeated_keys_at_other_levels_are_errors_too() {
    let spec = SMALL_SPEC
        .replace("title: Small panel\n", "title: Small panel\ntitle: Again\n")
        .replace("alpha: {items: [a1, a2, a3]}", "alpha: {items: [a1, a2, a3], items: [a1, a2]}")
        + "  covariance: {missing: listwise}\n";
    small(&spec)
        .run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains(
            "error: key `title` appears twice in the spec's top level (first on line 2)\n  at spec.yaml:3:1",
        )
        .stderr_contains(
            "error: key `items` appears twice in `constructs.alpha` (first on line 9)\n  at spec.yaml:9:32",
        )
        .stderr_contains("error: key `covariance` appears twice in `analyses` (first on line 12)\n  at spec.yaml:13:3");
}

#[test]
fn a_repeated_csv_header_names_both_columns() {
    let csv = synthetic_csv(50, 3, SMALL_COLUMNS).replacen("rid,a1,a2,a3,b1,b2,b3,x", "rid,a1,a2,a3,b1,b2,a2,x", 1);
    let spec = SMALL_SPEC.replace("b3, x", "x");
    let case = Case::new().spec(&spec).file("w1.csv", csv);
    case.run(["check", "spec.yaml"]).failure(1).stderr_contains(
        "error: cannot read the columns of `w1.csv`: `w1.csv` names column `a2` twice (columns 3 and 7)",
    );
}

#[test]
fn a_repeated_key_in_a_simulation_model_is_an_error() {
    let model = "simulate: 1\nconstructs:\n  - {name: a}\nitems:\n  - {name: a1, construct: a, loading: 0.8, loading: 0.5, error_variance: 0.36}\n";
    Case::new()
        .file("model.yaml", model)
        .run(["simulate", "model.yaml", "--out", "x.csv"])
        .failure(1)
        .stderr_contains("key `loading` appears twice in `items[0]` (first on line 5)")
        .stderr_contains("at model.yaml:5:44");
}

// ----------------------------------------------------------------- damaged data files (13)

/// The small case's CSV with rows transformed by `f(row number from 1, line)`.
fn edited_csv(rows: usize, f: impl Fn(usize, &str) -> String) -> String {
    let csv = synthetic_csv(rows, 3, SMALL_COLUMNS);
    let mut lines = csv.lines();
    let mut out = format!("{}\n", lines.next().unwrap());
    for (i, l) in lines.enumerate() {
        out.push_str(&f(i + 1, l));
        out.push('\n');
    }
    out
}

fn run_with_csv(csv: impl AsRef<[u8]>) -> crate::harness::Outcome {
    Case::new().spec(SMALL_SPEC).file("w1.csv", csv).run(["run", "spec.yaml"])
}

#[test]
fn a_value_whose_square_overflows_is_named_as_such() {
    // Row 7's `x` (the last column) becomes 1e308.
    let csv =
        edited_csv(60, |r, l| if r == 7 { format!("{},1e308", l.rsplit_once(',').unwrap().0) } else { l.to_string() });
    run_with_csv(csv)
        .failure(1)
        .stderr_contains("error: item `x` has values so large in magnitude that its variance overflows")
        .stderr_contains("hint: rescale the item in the data file")
        .stderr_lacks("constant")
        .no_report();
}

#[test]
fn parquet_infinities_name_the_one_based_row_with_exit_1() {
    use polars::prelude::*;
    let case = Case::new().spec(&SMALL_SPEC.replace("w1.csv", "w1.parquet"));
    let mut columns: Vec<Column> = vec![Column::new("rid".into(), (1..=30).map(f64::from).collect::<Vec<_>>())];
    for (k, name) in SMALL_COLUMNS.iter().enumerate() {
        let mut v: Vec<f64> = (0..30).map(|i| ((i * (k + 3)) % 5 + 1) as f64).collect();
        if *name == "b2" {
            v[4] = f64::INFINITY;
        }
        columns.push(Column::new((*name).into(), v));
    }
    let mut df = DataFrame::new(30, columns).unwrap();
    let file = std::fs::File::create(case.path().join("w1.parquet")).unwrap();
    ParquetWriter::new(file).finish(&mut df).unwrap();
    case.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: `w1.parquet` row 5, column `b2`: inf is not a finite number")
        .no_report();
}

#[test]
fn non_utf8_bytes_and_extra_fields_name_row_and_line() {
    // Row 9 (line 10): the value of `a1` becomes one invalid byte.
    let csv = edited_csv(40, |r, l| {
        if r == 9 {
            let mut f: Vec<&str> = l.split(',').collect();
            f[1] = "@";
            f.join(",")
        } else {
            l.to_string()
        }
    });
    let bytes: Vec<u8> = csv.into_bytes().into_iter().map(|b| if b == b'@' { 0xff } else { b }).collect();
    run_with_csv(&bytes)
        .failure(1)
        .stderr_contains("error: `w1.csv` row 9 (line 10), column `a1`: the value is not UTF-8 text")
        .stderr_contains("hint: save the file as UTF-8 text");
    let csv = edited_csv(40, |r, l| if r == 12 { format!("{l},5") } else { l.to_string() });
    run_with_csv(csv)
        .failure(1)
        .stderr_contains("error: `w1.csv` row 12 (line 13) has 9 fields, but the header names 8 columns")
        .no_report();
}

#[test]
fn a_record_after_a_multi_line_quoted_field_reports_its_own_line() {
    let csv = synthetic_csv(40, 3, SMALL_COLUMNS).replacen("rid,", "note,rid,", 1);
    let mut lines: Vec<String> = csv.lines().map(str::to_string).collect();
    for (i, l) in lines.iter_mut().enumerate().skip(1) {
        *l = if i == 2 { format!("\"two\nlines\",{l}") } else { format!(",{l}") };
    }
    // Row 5 sits on line 7 of the file: the quoted field of row 2 spans two lines.
    let fields: Vec<&str> = lines[5].split(',').collect();
    let mut fields: Vec<String> = fields.iter().map(|s| s.to_string()).collect();
    fields[3] = "often".into();
    lines[5] = fields.join(",");
    run_with_csv(lines.join("\n") + "\n")
        .failure(1)
        .stderr_contains("error: `w1.csv` row 5 (line 7), column `a2`: `often` is not a number");
}

#[test]
fn a_header_only_file_is_named() {
    let spec = SMALL_SPEC
        .replace("    - {id: w1, file: w1.csv}\n", "    - {id: w1, file: w1.csv}\n    - {id: w2, file: w2.csv}\n");
    Case::new()
        .spec(&spec)
        .file("w1.csv", synthetic_csv(40, 3, SMALL_COLUMNS))
        .file("w2.csv", format!("rid,{}\n", SMALL_COLUMNS.join(",")))
        .run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: `w2.csv` has a header line but no data rows")
        .no_report();
}

#[test]
fn a_million_digit_cell_is_echoed_cut_short() {
    let huge = "7".repeat(1_000_000) + "x";
    let csv = edited_csv(30, |r, l| {
        if r == 3 {
            let mut f: Vec<&str> = l.split(',').collect();
            f[1] = &huge;
            f.join(",")
        } else {
            l.to_string()
        }
    });
    let out = run_with_csv(csv);
    out.failure(1).stderr_contains(&format!(
        "error: `w1.csv` row 3 (line 4), column `a1`: `{}…` is not a number",
        "7".repeat(40)
    ));
    assert!(out.stderr.len() < 2_000, "the message echoes {} bytes", out.stderr.len());
}

// ------------------------------------------------------------ special files (item 6, data)

#[cfg(unix)]
#[test]
fn a_fifo_or_device_as_data_file_is_refused_at_check() {
    let case = Case::new().spec(SMALL_SPEC);
    let fifo = case.path().join("w1.csv");
    assert!(std::process::Command::new("mkfifo").arg(&fifo).status().unwrap().success());
    case.run(["check", "spec.yaml"])
        .failure(1)
        .stderr_contains("error: cannot read the columns of `w1.csv`: cannot read `w1.csv`")
        .stderr_contains("it is a named pipe (FIFO); construe reads only regular files");
    case.run(["run", "spec.yaml"]).failure(1).no_report();
    // /dev/zero through a link with a data file's name.
    let case = Case::new().spec(SMALL_SPEC);
    std::os::unix::fs::symlink("/dev/zero", case.path().join("w1.csv")).unwrap();
    case.run(["check", "spec.yaml"]).failure(1).stderr_contains("it is a device; construe reads only regular files");
    let case = Case::new().spec(MATRIX_SPEC);
    std::os::unix::fs::symlink("/dev/zero", case.path().join("m.csv")).unwrap();
    case.run(["check", "spec.yaml"]).failure(1).stderr_contains("it is a device; construe reads only regular files");
}
