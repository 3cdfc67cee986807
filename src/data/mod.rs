//! Reading survey files (CSV, Parquet) and published summary matrices into plain numbers.
//! Central types: `RawSource` (one file's named columns as text or numbers) and `DataError`.
//! Only this module talks to polars; everything downstream sees `Vec<f64>` columns with NaN
//! for missing values. Errors name the file, the data row (and CSV line) and the column.

pub mod matrix;
pub mod parquet_footer;
pub mod table;

use std::path::{Path, PathBuf};

use polars::prelude::*;
use thiserror::Error;

pub use table::Table;

#[derive(Debug, Error)]
pub enum DataError {
    #[error("cannot read `{}`\n  caused by: {reason}", path.display())]
    Read { path: PathBuf, reason: String },
    #[error("data file `{}` has unsupported extension; use .csv or .parquet", path.display())]
    Unsupported { path: PathBuf },
    #[error("`{}` row {row}{}, column `{column}`: `{value}` is not a number", path.display(), line_note(*line))]
    NonNumeric { path: PathBuf, row: usize, line: Option<usize>, column: String, value: String },
    #[error("`{}` has no column `{column}`", path.display())]
    MissingColumn { path: PathBuf, column: String },
    #[error("item `{item}` is constant ({value} in every row with a value), so it carries no information")]
    ConstantItem { item: String, value: f64 },
    #[error("item `{item}` has no values at all")]
    EmptyItem { item: String },
    #[error("item `{item}` has value {value} outside its reverse range [{lo}, {hi}] (`{}` row {row})", path.display())]
    OutsideReverseRange { item: String, value: f64, lo: f64, hi: f64, path: PathBuf, row: usize },
    #[error("item `{item}` is listed as ordinal but has non-integer value {value}")]
    NonIntegerOrdinal { item: String, value: f64 },
    #[error("matrix file `{}`: {reason}", path.display())]
    BadMatrix { path: PathBuf, reason: String },
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

/// Runs a polars read, turning a panic inside polars (seen on damaged Parquet files) into a
/// `DataError`, so no input file can crash construe.
fn guarded<T>(path: &Path, read: impl FnOnce() -> Result<T, DataError>) -> Result<T, DataError> {
    std::panic::catch_unwind(std::panic::AssertUnwindSafe(read)).unwrap_or_else(|_| {
        Err(DataError::Read { path: path.to_path_buf(), reason: "the file is damaged or not a valid data file".into() })
    })
}

/// The column names of a data file, reading as little as possible.
pub fn column_names(path: &Path) -> Result<Vec<String>, DataError> {
    guarded(path, || column_names_unguarded(path))
}

fn column_names_unguarded(path: &Path) -> Result<Vec<String>, DataError> {
    let df = match FileKind::of(path) {
        Some(FileKind::Csv) => csv_frame(path, Some(0))?,
        Some(FileKind::Parquet) => {
            parquet_footer::check_footer(path).map_err(|e| read_error(path, e))?;
            let file = std::fs::File::open(path).map_err(|e| read_error(path, e))?;
            let schema = ParquetReader::new(file).schema().map_err(|e| read_error(path, e))?;
            return Ok(schema.iter_names().map(|n| n.to_string()).collect());
        }
        None => return Err(DataError::Unsupported { path: path.to_path_buf() }),
    };
    Ok(df.get_column_names().iter().map(|n| n.to_string()).collect())
}

/// CSV read with every column as text, so that this module, not schema inference, decides
/// what is a number and can name the exact cell that is not.
fn csv_frame(path: &Path, n_rows: Option<usize>) -> Result<DataFrame, DataError> {
    CsvReadOptions::default()
        .with_has_header(true)
        .with_infer_schema_length(Some(0))
        .with_n_rows(n_rows)
        .map_parse_options(|o| o.with_null_values(Some(NullValues::AllColumns(vec!["".into(), "NA".into()]))))
        .try_into_reader_with_file_path(Some(path.to_path_buf()))
        .and_then(|r| r.finish())
        .map_err(|e| read_error(path, e))
}

/// One file's requested columns as numbers (NaN = missing), in the order asked.
pub fn read_numeric_columns(path: &Path, wanted: &[String]) -> Result<Vec<Vec<f64>>, DataError> {
    guarded(path, || read_numeric_columns_unguarded(path, wanted))
}

fn read_numeric_columns_unguarded(path: &Path, wanted: &[String]) -> Result<Vec<Vec<f64>>, DataError> {
    let kind = FileKind::of(path).ok_or_else(|| DataError::Unsupported { path: path.to_path_buf() })?;
    if kind == FileKind::Parquet {
        return read_parquet_columns(path, wanted);
    }
    let df = csv_frame(path, None)?;
    wanted
        .iter()
        .map(|name| {
            let column = df
                .column(name)
                .map_err(|_| DataError::MissingColumn { path: path.to_path_buf(), column: name.clone() })?;
            numeric_values(path, kind, name, column.as_materialized_series())
        })
        .collect()
}

/// Parquet is columnar: reading one column at a time keeps at most one column in polars' form
/// beside the numbers already converted, so peak memory stays near the size of the items read.
fn read_parquet_columns(path: &Path, wanted: &[String]) -> Result<Vec<Vec<f64>>, DataError> {
    parquet_footer::check_footer(path).map_err(|e| read_error(path, e))?;
    let open = || std::fs::File::open(path).map_err(|e| read_error(path, e));
    let schema = ParquetReader::new(open()?).schema().map_err(|e| read_error(path, e))?;
    wanted
        .iter()
        .map(|name| {
            if !schema.iter_names().any(|n| n.as_str() == name.as_str()) {
                return Err(DataError::MissingColumn { path: path.to_path_buf(), column: name.clone() });
            }
            let df = ParquetReader::new(open()?)
                .with_columns(Some(vec![name.clone()]))
                .finish()
                .map_err(|e| read_error(path, e))?;
            let column = df
                .column(name)
                .map_err(|_| DataError::MissingColumn { path: path.to_path_buf(), column: name.clone() })?;
            numeric_values(path, FileKind::Parquet, name, column.as_materialized_series())
        })
        .collect()
}

fn numeric_values(path: &Path, kind: FileKind, name: &str, series: &Series) -> Result<Vec<f64>, DataError> {
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
                        line: (kind == FileKind::Csv).then_some(i + 2),
                        column: name.to_string(),
                        value: s.to_string(),
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
    if let Ok(values) = ca.cont_slice() {
        return Ok(values.to_vec());
    }
    Ok(ca.iter().map(|v| v.unwrap_or(f64::NAN)).collect())
}
