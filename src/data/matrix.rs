//! Published summary matrices (a correlation or covariance matrix with its n) read from CSV.
//! The header line names the columns; an optional first column (headed empty, `item` or
//! `name`) labels the rows and must repeat the header's names in the same order. Central
//! function: `read_matrix`, which refuses anything that is not a square, symmetric matrix of
//! finite numbers (with a unit diagonal for a correlation matrix), naming line, row and column;
//! `check_positive_definite` checks the items an analysis uses.

use std::path::Path;

use thiserror::Error;

use super::{DataError, FileKind, echo};
use crate::spec::types::MatrixKind;

/// Largest summary-matrix file read (bytes): a 2,000-item matrix at 15 characters a cell is
/// 60 MB.
pub const MAX_MATRIX_BYTES: u64 = crate::fsguard::MAX_TEXT_BYTES;

/// How far a correlation matrix's diagonal may stray from 1 (rounding in print).
pub const DIAGONAL_TOLERANCE: f64 = 1e-6;

/// What is wrong with a summary matrix file; `DataError::Matrix` adds the path.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum MatrixProblem {
    #[error("must be a .csv file")]
    NotCsv,
    #[error("is empty; it needs a header line naming the columns")]
    Empty,
    #[error("line {line}: {reason}")]
    Syntax { line: usize, reason: String },
    #[error("line 1, column {column}: the name is not UTF-8 text")]
    HeaderNotUtf8 { column: usize },
    #[error("line 1: `{name}` names two columns ({first} and {second}); each item may appear once")]
    DuplicateName { name: String, first: usize, second: usize },
    #[error("names no item columns")]
    NoItems,
    #[error("line {line} has {}, but the header has {expected}", crate::spec::diagnostic::plural(*found, "field"))]
    FieldCount { line: usize, found: usize, expected: usize },
    #[error("has {found} rows of values for {expected} named columns; a square matrix needs one row per column")]
    RowCount { found: usize, expected: usize },
    #[error(
        "line {line}: row {row} is labelled `{found}`, but column {row} of the header is `{expected}`; rows must name the header's items in the same order"
    )]
    RowLabel { line: usize, row: usize, found: String, expected: String },
    #[error("line {line} (row `{row}`), column `{column}`: the entry is missing")]
    Missing { line: usize, row: String, column: String },
    #[error("line {line} (row `{row}`), column `{column}`: `{value}` is not a finite number")]
    NotANumber { line: usize, row: String, column: String, value: String },
    #[error(
        "line {line} (row `{row}`), column `{column}`: {value} differs from {mirror} at row `{column}`, column `{row}`; the matrix must be symmetric"
    )]
    NotSymmetric { line: usize, row: String, column: String, value: f64, mirror: f64 },
    #[error(
        "line {line} (row `{item}`), column `{item}`: the diagonal of a correlation matrix must be 1, found {value}"
    )]
    Diagonal { line: usize, item: String, value: f64 },
    #[error("line {line} (row `{row}`), column `{column}`: a correlation must lie in [-1, 1], found {value}")]
    CorrelationRange { line: usize, row: String, column: String, value: f64 },
    #[error("line {line} (row `{item}`), column `{item}`: a variance must be positive, found {value}")]
    Variance { line: usize, item: String, value: f64 },
    #[error(
        "is not positive definite over the {} the spec uses: its smallest eigenvalue is {}",
        crate::spec::diagnostic::plural(*items, "item"),
        short_number(*smallest)
    )]
    NotPositiveDefinite { items: usize, smallest: f64 },
}

impl MatrixProblem {
    /// The hint shown under the problem, if any.
    pub fn help(&self) -> Option<String> {
        match self {
            MatrixProblem::NotPositiveDefinite { .. } => Some(
                "check the matrix against its source for typing errors; a matrix computed from pairwise-complete data need not be positive definite (see the publication's notes on missing data)"
                    .into(),
            ),
            MatrixProblem::RowLabel { .. } | MatrixProblem::RowCount { .. } => {
                Some("write the full square matrix, rows in the order of the header's columns".into())
            }
            _ => None,
        }
    }
}

/// Four decimals, or scientific notation for a value too small to show that way.
fn short_number(x: f64) -> String {
    if x == 0.0 || x.abs() >= 1e-3 { format!("{x:.4}") } else { format!("{x:.3e}") }
}

/// A named square matrix as read, row-major.
#[derive(Debug, Clone, PartialEq)]
pub struct NamedMatrix {
    pub names: Vec<String>,
    pub values: Vec<Vec<f64>>,
    /// The line of the file each row is on.
    pub lines: Vec<usize>,
}

/// Whether a header's first name marks a column of row labels rather than an item.
pub fn is_label_header(name: &str) -> bool {
    name.is_empty() || name == "item" || name == "name"
}

/// Reads and checks a summary matrix of `kind` (see the module doc).
pub fn read_matrix(path: &Path, kind: MatrixKind) -> Result<NamedMatrix, DataError> {
    let bad = |problem: MatrixProblem| DataError::Matrix { path: path.to_path_buf(), problem };
    if FileKind::of(path) != Some(FileKind::Csv) {
        return Err(bad(MatrixProblem::NotCsv));
    }
    let bytes = crate::fsguard::read_regular(path, MAX_MATRIX_BYTES)
        .map_err(|e| DataError::Read { path: path.to_path_buf(), reason: e.to_string() })?;
    parse(&bytes, kind).map_err(bad)
}

fn syntax(e: &csv::Error) -> MatrixProblem {
    MatrixProblem::Syntax { line: e.position().map_or(1, |p| p.line() as usize), reason: e.to_string() }
}

fn parse(bytes: &[u8], kind: MatrixKind) -> Result<NamedMatrix, MatrixProblem> {
    let mut reader = csv::ReaderBuilder::new().has_headers(true).flexible(true).from_reader(bytes);
    let header = reader.byte_headers().map_err(|e| syntax(&e))?.clone();
    if header.is_empty() {
        return Err(MatrixProblem::Empty);
    }
    let mut all: Vec<String> = Vec::with_capacity(header.len());
    for (k, field) in header.iter().enumerate() {
        let name = std::str::from_utf8(field).map_err(|_| MatrixProblem::HeaderNotUtf8 { column: k + 1 })?;
        if let Some(first) = all.iter().position(|n| n == name) {
            return Err(MatrixProblem::DuplicateName { name: echo(name), first: first + 1, second: k + 1 });
        }
        all.push(name.to_string());
    }
    let labelled = all.first().is_some_and(|n| is_label_header(n));
    let names: Vec<String> = all[usize::from(labelled)..].to_vec();
    let p = names.len();
    if p == 0 {
        return Err(MatrixProblem::NoItems);
    }
    let mut values: Vec<Vec<f64>> = Vec::with_capacity(p);
    let mut lines = Vec::with_capacity(p);
    let mut record = csv::ByteRecord::new();
    while reader.read_byte_record(&mut record).map_err(|e| syntax(&e))? {
        let line = record.position().map_or(0, |pos| pos.line() as usize);
        if record.len() != all.len() {
            return Err(MatrixProblem::FieldCount { line, found: record.len(), expected: all.len() });
        }
        let r = values.len();
        if r == p {
            return Err(MatrixProblem::RowCount { found: r + 1 + reader.byte_records().count(), expected: p });
        }
        if labelled {
            let label = String::from_utf8_lossy(&record[0]);
            if label.trim() != names[r] {
                return Err(MatrixProblem::RowLabel {
                    line,
                    row: r + 1,
                    found: echo(label.trim()),
                    expected: names[r].clone(),
                });
            }
        }
        let row = record
            .iter()
            .skip(usize::from(labelled))
            .enumerate()
            .map(|(c, field)| {
                let text = String::from_utf8_lossy(field);
                let text = text.trim();
                if text.is_empty() || text == "NA" {
                    return Err(MatrixProblem::Missing { line, row: names[r].clone(), column: names[c].clone() });
                }
                text.parse::<f64>().ok().filter(|v| v.is_finite()).ok_or_else(|| MatrixProblem::NotANumber {
                    line,
                    row: names[r].clone(),
                    column: names[c].clone(),
                    value: echo(text),
                })
            })
            .collect::<Result<Vec<f64>, _>>()?;
        values.push(row);
        lines.push(line);
    }
    if values.len() != p {
        return Err(MatrixProblem::RowCount { found: values.len(), expected: p });
    }
    let m = NamedMatrix { names, values, lines };
    check_entries(&m, kind)?;
    Ok(m)
}

/// Symmetry, then the diagonal and range a `kind` of matrix must have.
fn check_entries(m: &NamedMatrix, kind: MatrixKind) -> Result<(), MatrixProblem> {
    let (names, values) = (&m.names, &m.values);
    let p = names.len();
    for r in 0..p {
        for c in r + 1..p {
            let (a, b) = (values[r][c], values[c][r]);
            if (a - b).abs() > 1e-8 * (1.0 + a.abs().max(b.abs())) {
                return Err(MatrixProblem::NotSymmetric {
                    line: m.lines[c],
                    row: names[c].clone(),
                    column: names[r].clone(),
                    value: b,
                    mirror: a,
                });
            }
        }
    }
    for r in 0..p {
        let d = values[r][r];
        match kind {
            MatrixKind::Correlation if (d - 1.0).abs() > DIAGONAL_TOLERANCE => {
                return Err(MatrixProblem::Diagonal { line: m.lines[r], item: names[r].clone(), value: d });
            }
            MatrixKind::Covariance if d <= 0.0 => {
                return Err(MatrixProblem::Variance { line: m.lines[r], item: names[r].clone(), value: d });
            }
            _ => {}
        }
        if kind == MatrixKind::Correlation
            && let Some(c) = (0..p).find(|&c| values[r][c].abs() > 1.0 + DIAGONAL_TOLERANCE)
        {
            return Err(MatrixProblem::CorrelationRange {
                line: m.lines[r],
                row: names[r].clone(),
                column: names[c].clone(),
                value: values[r][c],
            });
        }
    }
    Ok(())
}

/// The matrix restricted to the rows and columns `used` must be positive definite: its
/// smallest eigenvalue above 1e-10 times its largest (a relative bound, so the check does not
/// depend on the units of a covariance matrix).
pub fn check_positive_definite(m: &NamedMatrix, used: &[usize]) -> Result<(), MatrixProblem> {
    let k = used.len();
    if k == 0 {
        return Ok(());
    }
    let sub = nalgebra::DMatrix::from_fn(k, k, |i, j| m.values[used[i]][used[j]]);
    let eigen = sub.symmetric_eigenvalues();
    let smallest = eigen.iter().copied().fold(f64::INFINITY, f64::min);
    let largest = eigen.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    // NaN (from a degenerate input) fails too: `is_some_and` is false for an unordered pair.
    let positive = smallest.partial_cmp(&(1e-10 * largest.abs())).is_some_and(|o| o.is_gt());
    if !positive {
        return Err(MatrixProblem::NotPositiveDefinite { items: k, smallest });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read(text: &str, kind: MatrixKind) -> Result<NamedMatrix, String> {
        parse(text.as_bytes(), kind).map_err(|e| e.to_string())
    }

    const GOOD: &str = ",a,b,c\na,1,0.5,0.3\nb,0.5,1,0.4\nc,0.3,0.4,1\n";

    #[test]
    fn a_good_matrix_reads_with_or_without_labels() {
        let m = read(GOOD, MatrixKind::Correlation).unwrap();
        assert_eq!(m.names, ["a", "b", "c"]);
        assert_eq!(m.values[2][1], 0.4);
        assert_eq!(m.lines, [2, 3, 4]);
        let bare = read("a,b\n1,0.2\n0.2,1\n", MatrixKind::Correlation).unwrap();
        assert_eq!(bare.names, ["a", "b"]);
        assert!(check_positive_definite(&m, &[0, 1, 2]).is_ok());
    }

    #[test]
    fn each_defect_names_its_place() {
        let cases = [
            (
                GOOD.replace("b,0.5,1,", "b,0.5,0.9,"),
                "line 3 (row `b`), column `b`: the diagonal of a correlation matrix must be 1, found 0.9",
            ),
            (
                GOOD.replace("\nc,0.3", "\nd,0.3"),
                "line 4: row 3 is labelled `d`, but column 3 of the header is `c`; rows must name the header's items in the same order",
            ),
            (GOOD.replace(",a,b,c", ",a,b,a"), "line 1: `a` names two columns (2 and 4); each item may appear once"),
            (
                GOOD.replace("c,0.3,0.4,1", "c,0.3,0.45,1"),
                "line 4 (row `c`), column `b`: 0.45 differs from 0.4 at row `b`, column `c`; the matrix must be symmetric",
            ),
            (GOOD.replace("a,1,0.5", "a,inf,0.5"), "line 2 (row `a`), column `a`: `inf` is not a finite number"),
            (GOOD.replace("b,0.5,1,0.4", "b,0.5,1,"), "line 3 (row `b`), column `c`: the entry is missing"),
            (
                GOOD.replace("c,0.3,0.4,1\n", ""),
                "has 2 rows of values for 3 named columns; a square matrix needs one row per column",
            ),
            (GOOD.replace("b,0.5,1,0.4", "b,0.5,1"), "line 3 has 3 fields, but the header has 4"),
        ];
        for (text, expected) in cases {
            assert_eq!(read(&text, MatrixKind::Correlation).unwrap_err(), expected, "{text}");
        }
        let cov = GOOD.replace("a,1,0.5", "a,-2,0.5");
        assert_eq!(
            read(&cov, MatrixKind::Covariance).unwrap_err(),
            "line 2 (row `a`), column `a`: a variance must be positive, found -2"
        );
    }

    #[test]
    fn positive_definiteness_is_checked_on_the_items_used() {
        // a and b correlate 0.99, b and c 0.99, a and c -0.9: no such three variables exist.
        let m = read(",a,b,c\na,1,0.99,-0.9\nb,0.99,1,0.99\nc,-0.9,0.99,1\n", MatrixKind::Correlation).unwrap();
        let e = check_positive_definite(&m, &[0, 1, 2]).unwrap_err();
        assert!(matches!(e, MatrixProblem::NotPositiveDefinite { items: 3, smallest } if smallest < 0.0), "{e}");
        assert!(
            e.to_string()
                .starts_with("is not positive definite over the 3 items the spec uses: its smallest eigenvalue is -")
        );
        assert!(check_positive_definite(&m, &[0, 1]).is_ok());
        assert_eq!(short_number(-0.92541), "-0.9254");
        assert_eq!(short_number(-6.505e-4), "-6.505e-4");
    }
}
