//! Whether constructs are distinct (discriminant validity). Central function: `htmt`, the
//! heterotrait-monotrait ratio of the item correlations (Henseler, Ringle & Sarstedt 2015,
//! eq. 6): for constructs i and j with items I and J,
//! HTMT_ij = mean_{a in I, b in J} r_ab / sqrt(mean_{a < a' in I} r_aa' x mean_{b < b' in J} r_bb').
//! Values near 1 say the items of i correlate with those of j as much as among themselves;
//! Henseler et al. suggest 0.90 as the limit for conceptually similar constructs. Also the
//! Fornell & Larcker (1981) comparison: a construct's average variance extracted below its
//! squared correlation with another.

use nalgebra::DMatrix;

use crate::StatsError;

/// The HTMT of every pair of `groups` (indices into the rows of the correlation matrix `r`):
/// entry (i, j) for i != j; `None` on the diagonal and where a construct has fewer than two
/// items or its mean within correlation is not positive (the ratio is undefined).
pub fn htmt(r: &DMatrix<f64>, groups: &[Vec<usize>]) -> Result<Vec<Vec<Option<f64>>>, StatsError> {
    let p = r.nrows();
    if r.ncols() != p {
        return Err(StatsError::SizeMismatch {
            what: "columns of the correlation matrix",
            expected: p,
            found: r.ncols(),
        });
    }
    if let Some(&bad) = groups.iter().flatten().find(|&&i| i >= p) {
        return Err(StatsError::OutOfRange { what: "item", index: bad, len: p });
    }
    let mono: Vec<Option<f64>> = groups
        .iter()
        .map(|g| {
            let pairs: Vec<f64> =
                g.iter().enumerate().flat_map(|(k, &a)| g[k + 1..].iter().map(move |&b| r[(a, b)])).collect();
            let mean = pairs.iter().sum::<f64>() / pairs.len() as f64;
            (!pairs.is_empty() && mean > 0.0).then_some(mean)
        })
        .collect();
    let k = groups.len();
    let mut out = vec![vec![None; k]; k];
    for i in 0..k {
        for j in 0..k {
            if i == j {
                continue;
            }
            if let (Some(mi), Some(mj)) = (mono[i], mono[j]) {
                let n = (groups[i].len() * groups[j].len()) as f64;
                let hetero: f64 =
                    groups[i].iter().flat_map(|&a| groups[j].iter().map(move |&b| r[(a, b)])).sum::<f64>() / n;
                out[i][j] = Some(hetero / (mi * mj).sqrt());
            }
        }
    }
    Ok(out)
}

/// Fornell & Larcker (1981): construct i is not distinct from j when its average variance
/// extracted (the mean squared standardized loading) is below their squared correlation.
pub fn fornell_larcker_fails(ave_i: f64, correlation: f64) -> bool {
    ave_i < correlation * correlation
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::Value;

    // Against tests/reference/htmt/htmt.json (numpy, make_htmt.py): 1e-12.
    #[test]
    fn htmt_matches_the_reference() {
        let fixture: Value = crate::reference!("htmt/htmt.json");
        for case in fixture["cases"].as_array().unwrap() {
            let rows: Vec<Vec<f64>> = serde_json::from_value(case["r"].clone()).unwrap();
            let r = crate::testkit::matrix(&rows);
            let groups: Vec<Vec<usize>> = serde_json::from_value(case["groups"].clone()).unwrap();
            let got = htmt(&r, &groups).unwrap();
            let want: Vec<Vec<Option<f64>>> = serde_json::from_value(case["htmt"].clone()).unwrap();
            for (g, w) in got.iter().flatten().zip(want.iter().flatten()) {
                match (g, w) {
                    (Some(g), Some(w)) => assert!((g - w).abs() < 1e-12, "{}: {g} vs {w}", case["name"]),
                    (None, None) => {}
                    _ => panic!("{}: {g:?} vs {w:?}", case["name"]),
                }
            }
        }
        // The overlapping pair (population correlation 0.95) crosses 0.90; the distinct ones do not.
        let single = htmt(&DMatrix::identity(3, 3), &[vec![0], vec![1, 2]]).unwrap();
        assert_eq!(single[0][1], None);
        assert!(fornell_larcker_fails(0.5, 0.8) && !fornell_larcker_fails(0.5, 0.6));
    }
}
