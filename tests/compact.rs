//! The compact table (issue 13): few-level items are held as one byte per answer, an item that
//! outgrows 254 distinct values mid-file switches to numbers without changing any figure, and
//! an item listed as ordinal with more levels than a byte code can hold is refused by name.

use crate::harness::Case;

const ROWS: usize = 3000;

/// A deterministic panel: four five-point items (with missing answers and a missing code), `x`
/// with three values in its first 300 rows and thousands after, `y` with 20 half-point levels.
fn panel() -> (String, Vec<Option<f64>>, Vec<Option<f64>>) {
    let mut state: u64 = 0x5eed;
    let mut uniform = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    let mut out = String::from("rid,a1,a2,a3,a4,x,y\n");
    let (mut xs, mut ys) = (Vec::new(), Vec::new());
    for r in 0..ROWS {
        let f = uniform() * 2.0 - 1.0;
        let mut fields = vec![(r + 1).to_string()];
        for k in 0..4 {
            let v = (0.7 * f + 0.3 * (uniform() * 2.0 - 1.0)) * 2.49 + 3.0;
            let cell = match r % (11 + k) {
                0 => String::new(),
                5 => "-9".into(),
                _ => format!("{}", v.round()),
            };
            fields.push(cell);
        }
        let x = if r < 300 { (f * 1.49 + 2.0).round() + 0.5 } else { ((f + 0.2 * uniform()) * 1e4).round() / 1e4 };
        let x = (r % 17 != 3).then_some(x);
        let y = ((0.6 * f + 0.4 * uniform()) * 10.0).round() / 2.0;
        let y = (r % 13 != 7).then_some(y);
        fields.push(x.map(|v| v.to_string()).unwrap_or_default());
        fields.push(y.map(|v| format!(" {v} ")).unwrap_or_else(|| "NA".into()));
        xs.push(x);
        ys.push(y);
        out.push_str(&fields.join(","));
        out.push('\n');
    }
    (out, xs, ys)
}

const SPEC: &str = "construe: 1
title: Compact panel
data:
  waves:
    - {id: w1, file: w1.csv}
  id_column: rid
  missing_codes: [-9]
  reverse: {a2: [1, 5]}
constructs:
  answers: {items: [a1, a2, a3, a4]}
  scores: {items: [x, y]}
analyses:
  covariance: {missing: pairwise}
";

fn files_under(dir: &std::path::Path) -> Vec<std::path::PathBuf> {
    let mut out = Vec::new();
    for entry in std::fs::read_dir(dir).into_iter().flatten().flatten() {
        let p = entry.path();
        if p.is_dir() { out.extend(files_under(&p)) } else { out.push(p) }
    }
    out
}

#[test]
fn coded_and_switched_items_give_exact_moments_and_a_small_table() {
    let (csv, xs, ys) = panel();
    let case = Case::new().spec(SPEC).file("w1.csv", csv);
    case.run(["run", "spec.yaml"]).success();
    let results: serde_json::Value =
        serde_json::from_str(&case.read("reports/compact-panel/v1/results.json")).expect("results.json");
    let items = &results["data"]["items"];
    let count = |v: &[Option<f64>]| v.iter().flatten().count();
    assert_eq!(items[4]["n"].as_u64(), Some(count(&xs) as u64));
    assert_eq!(items[5]["n"].as_u64(), Some(count(&ys) as u64));
    assert_eq!(items[5]["kind"], "continuous");
    // The sample covariance of x and y on their complete rows, by the definition.
    let pairs: Vec<(f64, f64)> = xs.iter().zip(&ys).filter_map(|(a, b)| Some(((*a)?, (*b)?))).collect();
    let n = pairs.len() as f64;
    let (mx, my) = (pairs.iter().map(|p| p.0).sum::<f64>() / n, pairs.iter().map(|p| p.1).sum::<f64>() / n);
    let cov = pairs.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum::<f64>() / (n - 1.0);
    let xv: Vec<f64> = xs.iter().flatten().copied().collect();
    let m = xv.iter().sum::<f64>() / xv.len() as f64;
    let var = xv.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (xv.len() as f64 - 1.0);
    let got = &results["covariance"]["covariance"];
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-10 * b.abs().max(1.0);
    assert!(close(got[4][5].as_f64().unwrap(), cov), "{} vs {cov}", got[4][5]);
    assert!(close(got[4][4].as_f64().unwrap(), var), "{} vs {var}", got[4][4]);
    assert_eq!(results["covariance"]["method"]["a1|a2"], "polychoric");
    // The load artifact holds one byte per five-point answer and per `y` value: 4 bytes of wave
    // plus 5 codes plus 8 bytes of `x` a row, where all-f64 columns took 4 + 6 x 8 = 52.
    let largest = files_under(&case.path().join("cache")).iter().map(|p| p.metadata().unwrap().len()).max().unwrap();
    assert!(largest < (ROWS * 20) as u64, "largest cache entry {largest} bytes");
    // The cached table decodes to the same results.
    let again = Case::new().spec(SPEC).file("w1.csv", panel().0);
    std::fs::rename(case.path().join("cache"), again.path().join("cache")).unwrap();
    again.run(["run", "spec.yaml"]).success();
    assert_eq!(again.read("reports/compact-panel/v1/results.json"), case.read("reports/compact-panel/v1/results.json"));
}

#[test]
fn an_ordinal_item_with_more_levels_than_a_byte_holds_is_refused() {
    let mut csv = String::from("rid,a1,a2,a3,z\n");
    for r in 0..600 {
        csv.push_str(&format!("{},{},{},{},{}\n", r + 1, r % 5 + 1, (r / 3) % 5 + 1, (r / 7) % 5 + 1, r % 300));
    }
    let spec = "construe: 1
title: Wide panel
data:
  waves:
    - {id: w1, file: w1.csv}
  id_column: rid
  ordinal: [a1, a2, a3, z]
constructs:
  answers: {items: [a1, a2, a3, z]}
analyses:
  covariance: {}
";
    let case = Case::new().spec(spec).file("w1.csv", csv);
    case.run(["run", "spec.yaml"])
        .failure(1)
        .stderr_contains(
            "item `z` is listed as ordinal but has 300 distinct values; an ordinal item can have at most 254",
        )
        .no_report();
}
