//! Published summary matrices (a correlation or covariance matrix with its n) read from CSV.
//! The header line names the columns; an optional first text column names the rows and must
//! match the header. Central function: `read_matrix`.

use std::path::Path;

use super::{DataError, FileKind, column_names, read_numeric_columns};

/// A named square matrix as read, row-major.
#[derive(Debug, Clone, PartialEq)]
pub struct NamedMatrix {
    pub names: Vec<String>,
    pub values: Vec<Vec<f64>>,
}

pub fn read_matrix(path: &Path) -> Result<NamedMatrix, DataError> {
    if FileKind::of(path) != Some(FileKind::Csv) {
        return Err(DataError::BadMatrix {
            path: path.to_path_buf(),
            reason: "a summary matrix must be a .csv file".into(),
        });
    }
    let mut names = column_names(path)?;
    let bad = |reason: String| DataError::BadMatrix { path: path.to_path_buf(), reason };
    // A first column of row labels has an empty or conventional header; it is not numeric.
    let first_is_label = names.first().is_some_and(|n| n.is_empty() || n == "item" || n == "name");
    if first_is_label {
        names.remove(0);
    }
    let columns = read_numeric_columns(path, &names)?;
    let p = names.len();
    if columns.iter().any(|c| c.len() != p) {
        return Err(bad(format!("expected {p} rows to match the {p} named columns")));
    }
    let values: Vec<Vec<f64>> = (0..p).map(|r| (0..p).map(|c| columns[c][r]).collect()).collect();
    for r in 0..p {
        for c in 0..p {
            let (a, b) = (values[r][c], values[c][r]);
            if a.is_nan() {
                return Err(bad(format!("entry ({}, {}) is missing", names[r], names[c])));
            }
            if (a - b).abs() > 1e-8 * (1.0 + a.abs()) {
                return Err(bad(format!("not symmetric at ({}, {}): {a} vs {b}", names[r], names[c])));
            }
        }
    }
    Ok(NamedMatrix { names, values })
}
