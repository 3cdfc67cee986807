//! One streaming pass over a data file for `construe check`: every cell of the wanted columns
//! is classified as `load` would read it (missing, a number, not a number, outside its reverse
//! range), and every problem is counted instead of stopping at the first. Central type:
//! `FileScan`. Memory is bounded whatever the file's size: per column a few example cells
//! (`MAX_EXAMPLES`) and at most `MAX_CODED_LEVELS + 1` distinct values, never a row.

use std::path::Path;

use polars::prelude::*;

use super::csv_file::{CellError, cell, csv_error, names as read_header, open};
use super::table::MAX_CODED_LEVELS;
use super::{DataError, FileKind, echo, guarded, open_data, parquet_footer, read_error};

/// Example cells kept per problem and column.
pub const MAX_EXAMPLES: usize = 3;

/// One offending cell: its 1-based data row, its CSV line, and the text as echoed.
#[derive(Debug, Clone, PartialEq)]
pub struct Cell {
    pub row: usize,
    pub line: Option<usize>,
    pub value: String,
}

/// A count and its first few examples.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Tally {
    pub count: usize,
    pub examples: Vec<Cell>,
}

impl Tally {
    fn add(&mut self, row: usize, line: Option<usize>, value: impl FnOnce() -> String) {
        self.count += 1;
        if self.examples.len() < MAX_EXAMPLES {
            self.examples.push(Cell { row, line, value: value() });
        }
    }
}

/// How `load` treats a column's values: missing codes, and the reverse range if reversed.
#[derive(Debug, Clone, Default)]
pub struct Rules<'a> {
    pub missing_codes: &'a [f64],
    pub reverse: Option<[f64; 2]>,
}

/// What one column holds, after missing codes.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ColumnScan {
    pub name: String,
    /// Values present (not missing, numeric).
    pub present: usize,
    /// Cells that are neither missing nor a finite number (including text that is not UTF-8).
    pub non_numeric: Tally,
    /// Numbers outside the column's reverse range.
    pub outside_reverse: Tally,
    /// Distinct present values, sorted, at most `MAX_CODED_LEVELS + 1` of them (more are not
    /// kept: the count is then "more than `MAX_CODED_LEVELS`").
    pub distinct: Vec<f64>,
    /// A present value that is not an integer, if any.
    pub non_integer: Option<f64>,
    /// Which data rows (1-based row r at bit r - 1) hold a present value: one bit per row, so a
    /// pair of items never answered together is found without keeping any value.
    pub observed: Vec<u64>,
}

impl ColumnScan {
    /// Whether this column and `other` (of the same file) have a row where both are present.
    pub fn observed_with(&self, other: &ColumnScan) -> bool {
        self.observed.iter().zip(&other.observed).any(|(a, b)| a & b != 0)
    }
}

impl ColumnScan {
    fn new(name: &str) -> ColumnScan {
        ColumnScan { name: name.to_string(), ..ColumnScan::default() }
    }

    fn value(&mut self, v: f64, rules: &Rules, row: usize, line: Option<usize>) {
        if v.is_nan() || rules.missing_codes.contains(&v) {
            return;
        }
        if let Some([lo, hi]) = rules.reverse
            && (v < lo || v > hi)
        {
            self.outside_reverse.add(row, line, || v.to_string());
        }
        self.present += 1;
        if row > 0 {
            let (word, bit) = ((row - 1) / 64, (row - 1) % 64);
            if self.observed.len() <= word {
                self.observed.resize(word + 1, 0);
            }
            self.observed[word] |= 1 << bit;
        }
        if self.non_integer.is_none() && v.fract() != 0.0 {
            self.non_integer = Some(v);
        }
        let v = if v == 0.0 { 0.0 } else { v };
        if let Err(at) = self.distinct.binary_search_by(|x| x.total_cmp(&v))
            && self.distinct.len() <= MAX_CODED_LEVELS
        {
            self.distinct.insert(at, v);
        }
    }
}

/// A record whose field count differs from the header's.
#[derive(Debug, Clone, PartialEq)]
pub struct BadRecord {
    pub row: usize,
    pub line: usize,
    pub found: usize,
}

/// One file's scan.
#[derive(Debug, Clone, PartialEq)]
pub struct FileScan {
    pub rows: usize,
    /// Header width, and the records that do not match it (count and first few).
    pub expected_fields: usize,
    pub bad_records: usize,
    pub bad_record_examples: Vec<BadRecord>,
    /// In the order asked; a wanted name the file lacks is left out (the header check names it).
    pub columns: Vec<ColumnScan>,
}

/// Scans `wanted` columns of a CSV or Parquet file, each under its `rules`. Fails only when
/// the file cannot be read at all (then the header check has already said so).
pub fn scan(path: &Path, wanted: &[(String, Rules)]) -> Result<FileScan, DataError> {
    guarded(path, || match FileKind::of(path) {
        Some(FileKind::Csv) => scan_csv(path, wanted),
        Some(FileKind::Parquet) => scan_parquet(path, wanted),
        None => Err(DataError::Unsupported { path: path.to_path_buf() }),
    })
}

fn scan_csv(path: &Path, wanted: &[(String, Rules)]) -> Result<FileScan, DataError> {
    let mut reader = open(path)?;
    let names = read_header(path, &mut reader)?;
    let present: Vec<(usize, &Rules)> =
        wanted.iter().filter_map(|(w, r)| Some((names.iter().position(|n| n == w)?, r))).collect();
    let mut columns: Vec<ColumnScan> = present.iter().map(|(j, _)| ColumnScan::new(&names[*j])).collect();
    let mut out = FileScan {
        rows: 0,
        expected_fields: names.len(),
        bad_records: 0,
        bad_record_examples: Vec::new(),
        columns: Vec::new(),
    };
    let mut record = csv::ByteRecord::new();
    // A malformed record (an unclosed quote) ends the scan: the parser cannot resynchronise.
    while reader.read_byte_record(&mut record).map_err(|e| csv_error(path, e))? {
        out.rows += 1;
        let row = out.rows;
        let line = record.position().map_or(0, |p| p.line() as usize);
        if record.len() != names.len() {
            out.bad_records += 1;
            if out.bad_record_examples.len() < MAX_EXAMPLES {
                out.bad_record_examples.push(BadRecord { row, line, found: record.len() });
            }
            continue;
        }
        for (column, (j, rules)) in columns.iter_mut().zip(&present) {
            match cell(&record[*j]) {
                Ok(v) => column.value(v, rules, row, Some(line)),
                Err(CellError::NotUtf8) => column.non_numeric.add(row, Some(line), || "(not UTF-8 text)".into()),
                Err(CellError::NotANumber(text)) => column.non_numeric.add(row, Some(line), || text),
            }
        }
    }
    out.columns = columns;
    Ok(out)
}

fn scan_parquet(path: &Path, wanted: &[(String, Rules)]) -> Result<FileScan, DataError> {
    let file = open_data(path)?;
    parquet_footer::check_footer(path).map_err(|e| read_error(path, e))?;
    let schema = ParquetReader::new(file).schema().map_err(|e| read_error(path, e))?;
    let mut out = FileScan {
        rows: 0,
        expected_fields: schema.len(),
        bad_records: 0,
        bad_record_examples: Vec::new(),
        columns: Vec::new(),
    };
    for (name, rules) in wanted {
        if !schema.iter_names().any(|n| n.as_str() == name.as_str()) {
            continue;
        }
        // One column at a time, as `load` reads Parquet: peak memory is one column.
        let df = ParquetReader::new(open_data(path)?)
            .with_columns(Some(vec![name.clone()]))
            .finish()
            .map_err(|e| read_error(path, e))?;
        let series = df.column(name).map_err(|e| read_error(path, e))?.as_materialized_series().clone();
        out.rows = series.len();
        let mut column = ColumnScan::new(name);
        if let Ok(text) = series.str() {
            for (i, v) in text.iter().enumerate() {
                match v.map(str::trim) {
                    None | Some("" | "NA") => {}
                    Some(s) => match s.parse::<f64>().ok().filter(|x| x.is_finite()) {
                        Some(x) => column.value(x, rules, i + 1, None),
                        None => column.non_numeric.add(i + 1, None, || echo(s)),
                    },
                }
            }
        } else if series.dtype().is_primitive_numeric() || series.dtype().is_bool() {
            let floats = series.cast(&DataType::Float64).map_err(|e| read_error(path, e))?;
            for (i, v) in floats.f64().map_err(|e| read_error(path, e))?.iter().enumerate() {
                match v {
                    Some(x) if x.is_infinite() => column.non_numeric.add(i + 1, None, || x.to_string()),
                    Some(x) => column.value(x, rules, i + 1, None),
                    None => {}
                }
            }
        } else {
            let dtype = series.dtype().to_string();
            column.non_numeric.count = series.len();
            column.non_numeric.examples.push(Cell { row: 1, line: None, value: format!("a value of type {dtype}") });
        }
        out.columns.push(column);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn file(name: &str, text: &[u8]) -> (tempfile::TempDir, std::path::PathBuf) {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join(name);
        std::fs::write(&p, text).unwrap();
        (dir, p)
    }

    #[test]
    fn every_problem_is_counted_in_one_pass() {
        let (_d, p) = file("w.csv", b"a,b,c\n1,x,3\n2,2,9\n1,y\n-9,z,1\n3,4,3\n");
        let codes = [-9.0];
        let wanted = vec![
            ("a".to_string(), Rules { missing_codes: &codes, reverse: None }),
            ("b".to_string(), Rules::default()),
            ("c".to_string(), Rules { missing_codes: &codes, reverse: Some([1.0, 5.0]) }),
            ("nope".to_string(), Rules::default()),
        ];
        let s = scan(&p, &wanted).unwrap();
        assert_eq!(s.rows, 5);
        assert_eq!((s.bad_records, s.bad_record_examples[0].line, s.bad_record_examples[0].found), (1, 4, 2));
        assert_eq!(s.columns.len(), 3);
        let (a, b, c) = (&s.columns[0], &s.columns[1], &s.columns[2]);
        assert_eq!((a.present, a.distinct.clone()), (3, vec![1.0, 2.0, 3.0]));
        assert_eq!(b.non_numeric.count, 2);
        assert_eq!(b.non_numeric.examples[1], Cell { row: 4, line: Some(5), value: "z".into() });
        assert_eq!(c.outside_reverse.count, 1);
        assert_eq!(c.outside_reverse.examples[0].row, 2);
        assert_eq!(c.distinct, vec![1.0, 3.0, 9.0]);
    }

    #[test]
    fn distinct_values_stay_bounded() {
        let text: String = std::iter::once("a\n".to_string()).chain((0..2000).map(|i| format!("{i}.5\n"))).collect();
        let (_d, p) = file("w.csv", text.as_bytes());
        let s = scan(&p, &[("a".to_string(), Rules::default())]).unwrap();
        assert_eq!(s.columns[0].distinct.len(), MAX_CODED_LEVELS + 1);
        assert_eq!(s.columns[0].present, 2000);
        assert_eq!(s.columns[0].non_integer, Some(0.5));
    }
}
