//! Reading survey files (CSV, Parquet) and published summary matrices into plain numbers.
//! Central type: `DataError`. CSV is streamed by `csv_file` (only the wanted columns are kept);
//! Parquet goes through polars, and only this module talks to polars. `load` receives
//! `table::Column`s (few-level items as one-byte codes, others as `f64` with NaN for missing);
//! `read_numeric_columns` gives plain `Vec<f64>` columns. Errors name the file, the 1-based data
//! row (and CSV line) and the column; data text they echo is cut to `ECHO_CHARS` characters.
//! Every file is opened through `fsguard` first, so a FIFO or device is refused, never read.

pub mod csv_file;
pub mod matrix;
pub mod parquet_footer;
pub mod scan;
pub mod table;
pub mod write;

use std::path::{Path, PathBuf};

use polars::prelude::*;

use crate::spec::diagnostic::plural;
use thiserror::Error;

pub use matrix::MatrixProblem;
pub use table::{Column, Table};

/// Most characters of a data value echoed in a message.
pub const ECHO_CHARS: usize = 40;

/// `text` as shown in a message: at most `ECHO_CHARS` characters, an ellipsis marking a cut.
pub fn echo(text: &str) -> String {
    match text.char_indices().nth(ECHO_CHARS) {
        Some((at, _)) => format!("{}…", &text[..at]),
        None => text.to_string(),
    }
}

#[derive(Debug, Error)]
pub enum DataError {
    #[error("cannot read `{}`\n  caused by: {reason}", path.display())]
    Read { path: PathBuf, reason: String },
    #[error("`{}`{}: {reason}", path.display(), line.map(|l| format!(" line {l}")).unwrap_or_default())]
    Csv { path: PathBuf, line: Option<usize>, reason: String },
    #[error("data file `{}` has unsupported extension; use .csv or .parquet", path.display())]
    Unsupported { path: PathBuf },
    #[error("`{}` is empty; it needs a header line naming the columns", path.display())]
    EmptyFile { path: PathBuf },
    #[error("`{}` has a header line but no data rows", path.display())]
    NoDataRows { path: PathBuf },
    #[error("`{}` line 1, column {column}: the column name is not UTF-8 text", path.display())]
    HeaderNotUtf8 { path: PathBuf, column: usize },
    #[error("`{}` names column `{column}` twice (columns {first} and {second})", path.display())]
    DuplicateColumn { path: PathBuf, column: String, first: usize, second: usize },
    #[error("`{}` row {row} (line {line}) has {}, but the header names {}", path.display(), plural(*found, "field"), plural(*expected, "column"))]
    FieldCount { path: PathBuf, row: usize, line: usize, found: usize, expected: usize },
    #[error("`{}` row {row} (line {line}), column `{column}`: the value is not UTF-8 text", path.display())]
    NotUtf8 { path: PathBuf, row: usize, line: usize, column: String },
    #[error("`{}` row {row}{}, column `{column}`: `{value}` is not a number", path.display(), line_note(*line))]
    NonNumeric { path: PathBuf, row: usize, line: Option<usize>, column: String, value: String },
    #[error("`{}` row {row}, column `{column}`: {value} is not a finite number", path.display())]
    NonFinite { path: PathBuf, row: usize, column: String, value: f64 },
    #[error("`{}` has no column `{column}`", path.display())]
    MissingColumn { path: PathBuf, column: String },
    #[error("item `{item}` is constant ({value} in every row with a value), so it carries no information")]
    ConstantItem { item: String, value: f64 },
    #[error(
        "item `{item}` has values so large in magnitude that its variance overflows (the square of a value beyond about 1.3e154 exceeds the largest floating-point number)"
    )]
    Overflow { item: String },
    #[error("item `{item}` has no values at all")]
    EmptyItem { item: String },
    #[error("item `{item}` has value {value} outside its reverse range [{lo}, {hi}] (`{}` row {row})", path.display())]
    OutsideReverseRange { item: String, value: f64, lo: f64, hi: f64, path: PathBuf, row: usize },
    #[error(
        "item `{item}` is listed as ordinal but has {levels} distinct values; an ordinal item can have at most {max} (list it as continuous instead)"
    )]
    TooManyLevels { item: String, levels: usize, max: usize },
    #[error("item `{item}` is listed as ordinal but has non-integer value {value}")]
    NonIntegerOrdinal { item: String, value: f64 },
    #[error("matrix file `{}` {problem}", path.display())]
    Matrix { path: PathBuf, problem: MatrixProblem },
}

fn line_note(line: Option<usize>) -> String {
    line.map(|l| format!(" (line {l})")).unwrap_or_default()
}

/// The file kinds construe reads, by extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileKind {
    Csv,
    Parquet,
}

impl FileKind {
    pub fn of(path: &Path) -> Option<FileKind> {
        match path.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase).as_deref() {
            Some("csv") => Some(FileKind::Csv),
            Some("parquet" | "pq") => Some(FileKind::Parquet),
            _ => None,
        }
    }
}

fn read_error(path: &Path, e: impl std::fmt::Display) -> DataError {
    DataError::Read { path: path.to_path_buf(), reason: e.to_string() }
}

/// Opens a data file only if it is a regular file, so a FIFO or device is refused before
/// polars (which would block on a FIFO, or read /dev/zero without end) touches the path.
fn open_data(path: &Path) -> Result<std::fs::File, DataError> {
    crate::fsguard::open_regular(path).map_err(|e| read_error(path, e))
}

/// Runs a polars read, turning a panic inside polars (seen on damaged Parquet files) into a
/// `DataError`, so no input file can crash construe.
fn guarded<T>(path: &Path, read: impl FnOnce() -> Result<T, DataError>) -> Result<T, DataError> {
    std::panic::catch_unwind(std::panic::AssertUnwindSafe(read)).unwrap_or_else(|_| {
        Err(DataError::Read { path: path.to_path_buf(), reason: "the file is damaged or not a valid data file".into() })
    })
}

/// The column names of a data file, reading as little as possible (a CSV's header line, a
/// Parquet file's footer).
pub fn column_names(path: &Path) -> Result<Vec<String>, DataError> {
    guarded(path, || match FileKind::of(path) {
        Some(FileKind::Csv) => csv_file::header(path),
        Some(FileKind::Parquet) => {
            let file = open_data(path)?;
            parquet_footer::check_footer(path).map_err(|e| read_error(path, e))?;
            let schema = ParquetReader::new(file).schema().map_err(|e| read_error(path, e))?;
            Ok(schema.iter_names().map(|n| n.to_string()).collect())
        }
        None => Err(DataError::Unsupported { path: path.to_path_buf() }),
    })
}

/// One file's requested columns as numbers (NaN = missing), in the order asked.
pub fn read_numeric_columns(path: &Path, wanted: &[String]) -> Result<Vec<Vec<f64>>, DataError> {
    guarded(path, || match FileKind::of(path) {
        Some(FileKind::Csv) => csv_file::numeric_columns(path, wanted),
        Some(FileKind::Parquet) => read_parquet_columns(path, wanted, |v| v),
        None => Err(DataError::Unsupported { path: path.to_path_buf() }),
    })
}

/// One column of a data file as text labels (a grouping column, an id column), in row order;
/// empty cells, `NA` and nulls are `None`. Numbers are written as Parquet casts them to text
/// (`1`, `2.5`), CSV cells as they stand, trimmed.
pub fn read_labels(path: &Path, column: &str) -> Result<Vec<Option<String>>, DataError> {
    guarded(path, || match FileKind::of(path) {
        Some(FileKind::Csv) => csv_file::labels(path, column),
        Some(FileKind::Parquet) => {
            let file = open_data(path)?;
            parquet_footer::check_footer(path).map_err(|e| read_error(path, e))?;
            let schema = ParquetReader::new(file).schema().map_err(|e| read_error(path, e))?;
            if !schema.iter_names().any(|n| n.as_str() == column) {
                return Err(DataError::MissingColumn { path: path.to_path_buf(), column: column.to_string() });
            }
            let df = ParquetReader::new(open_data(path)?)
                .with_columns(Some(vec![column.to_string()]))
                .finish()
                .map_err(|e| read_error(path, e))?;
            let series = df
                .column(column)
                .map_err(|_| DataError::MissingColumn { path: path.to_path_buf(), column: column.to_string() })?
                .as_materialized_series()
                .cast(&DataType::String)
                .map_err(|e| read_error(path, e))?;
            let text = series.str().map_err(|e| read_error(path, e))?;
            Ok(text
                .iter()
                .map(|v| v.map(str::trim).filter(|t| !t.is_empty() && *t != "NA").map(str::to_string))
                .collect())
        }
        None => Err(DataError::Unsupported { path: path.to_path_buf() }),
    })
}

/// One file's requested columns in compact form, in the order asked. CSV is built compact row by
/// row; Parquet columns are read as numbers and compacted one at a time.
pub fn read_columns(path: &Path, wanted: &[String]) -> Result<Vec<Column>, DataError> {
    guarded(path, || match FileKind::of(path) {
        Some(FileKind::Csv) => csv_file::columns(path, wanted),
        Some(FileKind::Parquet) => read_parquet_columns(path, wanted, table::compact),
        None => Err(DataError::Unsupported { path: path.to_path_buf() }),
    })
}

/// Parquet is columnar: reading one column at a time keeps at most one column in polars' form
/// beside the numbers already converted, so peak memory stays near the size of the items read.
fn read_parquet_columns<C>(path: &Path, wanted: &[String], shape: impl Fn(Vec<f64>) -> C) -> Result<Vec<C>, DataError> {
    let file = open_data(path)?;
    parquet_footer::check_footer(path).map_err(|e| read_error(path, e))?;
    let schema = ParquetReader::new(file).schema().map_err(|e| read_error(path, e))?;
    let columns = wanted
        .iter()
        .map(|name| {
            if !schema.iter_names().any(|n| n.as_str() == name.as_str()) {
                return Err(DataError::MissingColumn { path: path.to_path_buf(), column: name.clone() });
            }
            let df = ParquetReader::new(open_data(path)?)
                .with_columns(Some(vec![name.clone()]))
                .finish()
                .map_err(|e| read_error(path, e))?;
            let column = df
                .column(name)
                .map_err(|_| DataError::MissingColumn { path: path.to_path_buf(), column: name.clone() })?;
            numeric_values(path, name, column.as_materialized_series()).map(|v| (v.is_empty(), shape(v)))
        })
        .collect::<Result<Vec<_>, _>>()?;
    if columns.first().is_some_and(|c| c.0) {
        return Err(DataError::NoDataRows { path: path.to_path_buf() });
    }
    Ok(columns.into_iter().map(|c| c.1).collect())
}

/// A Parquet column as numbers: text is parsed (empty and `NA` are missing), numbers are cast;
/// nulls and NaN are missing, infinities are refused with their 1-based row.
fn numeric_values(path: &Path, name: &str, series: &Series) -> Result<Vec<f64>, DataError> {
    if let Ok(text) = series.str() {
        return text
            .iter()
            .enumerate()
            .map(|(i, v)| match v {
                None => Ok(f64::NAN),
                Some(s) => {
                    s.trim().parse::<f64>().ok().filter(|x| x.is_finite()).ok_or_else(|| DataError::NonNumeric {
                        path: path.to_path_buf(),
                        row: i + 1,
                        line: None,
                        column: name.to_string(),
                        value: echo(s),
                    })
                }
            })
            .collect();
    }
    if !series.dtype().is_primitive_numeric() && !series.dtype().is_bool() {
        return Err(DataError::NonNumeric {
            path: path.to_path_buf(),
            row: 1,
            line: None,
            column: name.to_string(),
            value: format!("a value of type {}", series.dtype()),
        });
    }
    let floats = series.cast(&DataType::Float64).map_err(|e| read_error(path, e))?;
    let ca = floats.f64().map_err(|e| read_error(path, e))?;
    let values: Vec<f64> = match ca.cont_slice() {
        Ok(values) => values.to_vec(),
        Err(_) => ca.iter().map(|v| v.unwrap_or(f64::NAN)).collect(),
    };
    if let Some(i) = values.iter().position(|v| v.is_infinite()) {
        return Err(DataError::NonFinite {
            path: path.to_path_buf(),
            row: i + 1,
            column: name.to_string(),
            value: values[i],
        });
    }
    Ok(values)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn echo_cuts_long_values() {
        assert_eq!(echo("12"), "12");
        let long = "9".repeat(1_000_000);
        assert_eq!(echo(&long), format!("{}…", "9".repeat(ECHO_CHARS)));
        assert_eq!(echo(&"é".repeat(50)).chars().count(), ECHO_CHARS + 1);
    }

    #[cfg(unix)]
    #[test]
    fn special_files_are_refused_by_every_reader() {
        let dir = tempfile::tempdir().unwrap();
        for name in ["pipe.csv", "pipe.parquet"] {
            let fifo = dir.path().join(name);
            assert!(std::process::Command::new("mkfifo").arg(&fifo).status().unwrap().success());
            let e = column_names(&fifo).unwrap_err().to_string();
            assert!(e.contains("named pipe"), "{e}");
            let e = read_numeric_columns(&fifo, &["a".to_string()]).unwrap_err().to_string();
            assert!(e.contains("named pipe"), "{e}");
        }
    }
}
