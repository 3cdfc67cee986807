//! Streaming CSV reading: one record at a time, only the wanted columns converted to numbers.
//! Central functions: `header` and `columns`. Why not polars here: read as text it held
//! every column of the file (about 8x the file size); this reader keeps only the numbers asked
//! for, each item built adaptively (`table::ColumnBuilder`): one byte per answer while it has at
//! most 254 distinct values, `f64` from the first row that exceeds that. Records are read as bytes, so a non-UTF-8 cell fails only if it is a wanted value, and
//! each record knows the physical line it starts on, even after a multi-line quoted field.

use std::fs::File;
use std::path::Path;

use super::table::{Column, ColumnBuilder};
use super::{DataError, echo, read_error};

/// Bytes the reader buffers at a time.
const BUFFER: usize = 1 << 16;

/// A reader over a regular file (never a FIFO or device), rows of any width so that this
/// module, not the parser, reports a record with the wrong number of fields.
pub(super) fn open(path: &Path) -> Result<csv::Reader<File>, DataError> {
    let file = crate::fsguard::open_regular(path).map_err(|e| read_error(path, e))?;
    Ok(csv::ReaderBuilder::new().has_headers(true).flexible(true).buffer_capacity(BUFFER).from_reader(file))
}

pub(super) fn csv_error(path: &Path, e: csv::Error) -> DataError {
    match e.position() {
        Some(p) => DataError::Csv { path: path.to_path_buf(), line: Some(p.line() as usize), reason: e.to_string() },
        None => DataError::Csv { path: path.to_path_buf(), line: None, reason: e.to_string() },
    }
}

/// The header's column names, checked: UTF-8, not empty, no name twice.
pub(super) fn names(path: &Path, reader: &mut csv::Reader<File>) -> Result<Vec<String>, DataError> {
    let header = reader.byte_headers().map_err(|e| csv_error(path, e))?.clone();
    if header.is_empty() {
        return Err(DataError::EmptyFile { path: path.to_path_buf() });
    }
    let mut names: Vec<String> = Vec::with_capacity(header.len());
    for (k, field) in header.iter().enumerate() {
        let name = std::str::from_utf8(field)
            .map_err(|_| DataError::HeaderNotUtf8 { path: path.to_path_buf(), column: k + 1 })?
            .to_string();
        if let Some(first) = names.iter().position(|n| *n == name) {
            return Err(DataError::DuplicateColumn {
                path: path.to_path_buf(),
                column: echo(&name),
                first: first + 1,
                second: k + 1,
            });
        }
        names.push(name);
    }
    Ok(names)
}

/// The column names of a CSV file; reads the header line only.
pub fn header(path: &Path) -> Result<Vec<String>, DataError> {
    names(path, &mut open(path)?)
}

/// Why one cell is not a number.
pub(super) enum CellError {
    NotUtf8,
    NotANumber(String),
}

/// An empty field and `NA` are missing (NaN); anything else must be a finite number, with
/// surrounding spaces allowed. The same rules as the polars reader this replaced.
pub(super) fn cell(bytes: &[u8]) -> Result<f64, CellError> {
    if bytes.is_empty() || bytes == b"NA" {
        return Ok(f64::NAN);
    }
    let text = std::str::from_utf8(bytes).map_err(|_| CellError::NotUtf8)?;
    text.trim().parse::<f64>().ok().filter(|x| x.is_finite()).ok_or_else(|| CellError::NotANumber(echo(text)))
}

/// The wanted columns as numbers (NaN = missing), in the order asked.
pub fn numeric_columns(path: &Path, wanted: &[String]) -> Result<Vec<Vec<f64>>, DataError> {
    Ok(columns(path, wanted)?.into_iter().map(Column::into_values).collect())
}

/// The wanted columns in their compact form, in the order asked.
pub fn columns(path: &Path, wanted: &[String]) -> Result<Vec<Column>, DataError> {
    let mut reader = open(path)?;
    let names = names(path, &mut reader)?;
    let index: Vec<usize> = wanted
        .iter()
        .map(|w| {
            names
                .iter()
                .position(|n| n == w)
                .ok_or_else(|| DataError::MissingColumn { path: path.to_path_buf(), column: w.clone() })
        })
        .collect::<Result<_, _>>()?;
    let mut columns: Vec<ColumnBuilder> = wanted.iter().map(|_| ColumnBuilder::new()).collect();
    let mut record = csv::ByteRecord::new();
    let mut row = 0usize;
    while reader.read_byte_record(&mut record).map_err(|e| csv_error(path, e))? {
        row += 1;
        let line = record.position().map_or(0, |p| p.line() as usize);
        if record.len() != names.len() {
            return Err(DataError::FieldCount {
                path: path.to_path_buf(),
                row,
                line,
                found: record.len(),
                expected: names.len(),
            });
        }
        for (column, &j) in columns.iter_mut().zip(&index) {
            let value = cell(&record[j]).map_err(|e| match e {
                CellError::NotUtf8 => {
                    DataError::NotUtf8 { path: path.to_path_buf(), row, line, column: names[j].clone() }
                }
                CellError::NotANumber(value) => DataError::NonNumeric {
                    path: path.to_path_buf(),
                    row,
                    line: Some(line),
                    column: names[j].clone(),
                    value,
                },
            })?;
            column.push(value);
        }
    }
    if row == 0 {
        return Err(DataError::NoDataRows { path: path.to_path_buf() });
    }
    // `finish` gives back what growth by doubling left unused.
    Ok(columns.into_iter().map(ColumnBuilder::finish).collect())
}

/// One column as text labels, trimmed; empty cells and `NA` are `None` (see `super::read_labels`).
pub fn labels(path: &Path, column: &str) -> Result<Vec<Option<String>>, DataError> {
    let mut reader = open(path)?;
    let names = names(path, &mut reader)?;
    let j = names
        .iter()
        .position(|n| n == column)
        .ok_or_else(|| DataError::MissingColumn { path: path.to_path_buf(), column: column.to_string() })?;
    let mut out = Vec::new();
    let mut record = csv::ByteRecord::new();
    while reader.read_byte_record(&mut record).map_err(|e| csv_error(path, e))? {
        let row = out.len() + 1;
        let line = record.position().map_or(0, |p| p.line() as usize);
        if record.len() != names.len() {
            return Err(DataError::FieldCount {
                path: path.to_path_buf(),
                row,
                line,
                found: record.len(),
                expected: names.len(),
            });
        }
        let text = std::str::from_utf8(&record[j])
            .map_err(|_| DataError::NotUtf8 { path: path.to_path_buf(), row, line, column: column.to_string() })?
            .trim();
        out.push((!text.is_empty() && text != "NA").then(|| text.to_string()));
    }
    if out.is_empty() {
        return Err(DataError::NoDataRows { path: path.to_path_buf() });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn file(text: &[u8]) -> (tempfile::TempDir, std::path::PathBuf) {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("w.csv");
        std::fs::write(&p, text).unwrap();
        (dir, p)
    }

    fn wanted(names: &[&str]) -> Vec<String> {
        names.iter().map(|s| s.to_string()).collect()
    }

    #[test]
    fn missing_values_and_spaces_follow_the_rules() {
        let (_d, p) = file(b"a,b,c\n1, 2 ,x\n,NA,y\n\"3\",4e0,z\n");
        let cols = numeric_columns(&p, &wanted(&["b", "a"])).unwrap();
        assert_eq!(cols[0][0], 2.0);
        assert_eq!(cols[1][0], 1.0);
        assert!(cols[0][1].is_nan() && cols[1][1].is_nan());
        assert_eq!(cols[0][2], 4.0);
        assert_eq!(cols[1][2], 3.0);
    }

    #[test]
    fn a_record_after_a_multi_line_field_names_its_own_line() {
        let (_d, p) = file(b"a,note\n1,\"two\nlines\"\nzz,ok\n");
        let e = numeric_columns(&p, &wanted(&["a"])).unwrap_err().to_string();
        assert_eq!(
            e,
            "`".to_string() + &p.display().to_string() + "` row 2 (line 4), column `a`: `zz` is not a number"
        );
    }

    #[test]
    fn header_problems_are_named() {
        let (_d, p) = file(b"a,b,a\n1,2,3\n");
        let e = header(&p).unwrap_err().to_string();
        assert!(e.ends_with("names column `a` twice (columns 1 and 3)"), "{e}");
        let (_d, p) = file(b"a,b\n");
        let e = numeric_columns(&p, &wanted(&["a"])).unwrap_err().to_string();
        assert!(e.ends_with("has a header line but no data rows"), "{e}");
        let (_d, p) = file(b"\xef\xbb\xbfa,b\n1,2\n");
        assert_eq!(header(&p).unwrap(), ["a", "b"]);
    }

    #[test]
    fn blank_lines_are_skipped_and_short_records_named() {
        let (_d, p) = file(b"a,b\n1,2\n\n3,4\n");
        assert_eq!(numeric_columns(&p, &wanted(&["b"])).unwrap(), vec![vec![2.0, 4.0]]);
        let (_d, p) = file(b"a,b\n1,2\n3\n");
        let e = numeric_columns(&p, &wanted(&["b"])).unwrap_err().to_string();
        assert!(e.ends_with("row 2 (line 3) has 1 field, but the header names 2 columns"), "{e}");
    }

    #[test]
    fn bad_bytes_only_matter_in_wanted_columns() {
        let (_d, p) = file(b"a,b\n1,\xff\n2,3\n");
        assert_eq!(numeric_columns(&p, &wanted(&["a"])).unwrap(), vec![vec![1.0, 2.0]]);
        let e = numeric_columns(&p, &wanted(&["b"])).unwrap_err().to_string();
        assert!(e.ends_with("row 1 (line 2), column `b`: the value is not UTF-8 text"), "{e}");
    }
}
