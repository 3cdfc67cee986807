//! Writing a drawn table (`construe simulate`) as CSV or Parquet, atomically (temp file, sync,
//! rename). Central function: `write_table`. The bytes depend on the values only, so equal
//! tables always give equal files.

use std::path::{Path, PathBuf};

use polars::prelude::*;

use super::FileKind;
use construe_stats::simulate::SimulatedTable;

/// Why a table was not written.
#[derive(Debug, thiserror::Error)]
pub enum WriteError {
    #[error("output `{}` must end in .csv or .parquet", path.display())]
    Unsupported { path: PathBuf },
    #[error("cannot write `{}`\n  caused by: {reason}", path.display())]
    Write { path: PathBuf, reason: String },
}

/// Writes `table` to `path` in the format its extension names; nothing is left behind on failure.
pub fn write_table(table: &SimulatedTable, path: &Path) -> Result<(), WriteError> {
    let failed = |reason: String| WriteError::Write { path: path.into(), reason };
    let bytes = match FileKind::of(path) {
        Some(FileKind::Csv) => csv_string(table).into_bytes(),
        Some(FileKind::Parquet) => parquet_bytes(table).map_err(|e| failed(e.to_string()))?,
        None => return Err(WriteError::Unsupported { path: path.into() }),
    };
    write_atomically(path, &bytes).map_err(|e| failed(e.to_string()))
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) { format!("\"{}\"", s.replace('"', "\"\"")) } else { s.to_string() }
}

/// The table as CSV (RFC 4180 quoting): a header line, then one line per row, each ending
/// in `\n`. Integer columns print without decimals, other numbers with `{:.6}` (six digits
/// after the point, `-0.000000` written `0.000000`), missing values as empty fields.
pub fn csv_string(table: &SimulatedTable) -> String {
    let mut out = String::new();
    out.push_str(&table.columns.iter().map(|c| csv_field(c)).collect::<Vec<_>>().join(","));
    out.push('\n');
    let text: Vec<Option<String>> = table.text_labels.iter().map(|t| t.as_deref().map(csv_field)).collect();
    for row in 0..table.rows() {
        for (j, col) in table.values.iter().enumerate() {
            if j > 0 {
                out.push(',');
            }
            if let Some(Some(label)) = text.get(j) {
                out.push_str(label);
                continue;
            }
            let Some(v) = col[row] else { continue };
            if table.integer_columns.get(j).copied().unwrap_or(false) {
                out.push_str(&format!("{v:.0}"));
            } else {
                let s = format!("{v:.6}");
                out.push_str(if s == "-0.000000" { "0.000000" } else { &s });
            }
        }
        out.push('\n');
    }
    out
}

/// The table as a Parquet file: text constants as strings, whole-number columns as `i64`,
/// the rest as `f64`, missing values as nulls.
fn parquet_bytes(table: &SimulatedTable) -> PolarsResult<Vec<u8>> {
    let rows = table.rows();
    let columns: Vec<Column> = table
        .columns
        .iter()
        .enumerate()
        .map(|(j, name)| {
            let name = PlSmallStr::from(name.as_str());
            if let Some(label) = &table.text_labels[j] {
                Column::new(name, vec![label.as_str(); rows])
            } else if table.integer_columns[j] {
                let v: Vec<Option<i64>> = table.values[j].iter().map(|x| x.map(|x| x as i64)).collect();
                Column::new(name, v)
            } else {
                Column::new(name, table.values[j].clone())
            }
        })
        .collect();
    let mut df = DataFrame::new(rows, columns)?;
    let mut out = Vec::new();
    ParquetWriter::new(&mut out).finish(&mut df)?;
    Ok(out)
}

fn write_atomically(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    use std::io::Write;
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&dir)?;
    let mut tmp = tempfile::Builder::new().prefix(".partial-").tempfile_in(&dir)?;
    tmp.write_all(bytes)?;
    tmp.as_file().sync_all()?;
    // Temporary files are private (0600); data files are ordinary readable files.
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        tmp.as_file().set_permissions(std::fs::Permissions::from_mode(0o644))?;
    }
    tmp.persist(path).map_err(|e| e.error)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use construe_stats::simulate::{IdColumn, Item, LatentVariance, Model};

    fn small() -> Model {
        let mut m = Model { missing: 0.1, ..Model::default() }
            .construct("a", LatentVariance::Own(1.0))
            .item(Item { thresholds: Some(vec![-0.5, 0.5]), ..Item::new("a1", "a", 0.8, 0.36) })
            .item(Item::new("a2", "a", 0.7, 0.51));
        m.id = Some(IdColumn { name: "id".into(), start: 101 });
        m
    }

    #[test]
    fn csv_format() {
        let csv = csv_string(&small().draw(5, 3).unwrap());
        let lines: Vec<&str> = csv.lines().collect();
        assert_eq!(lines[0], "id,a1,a2");
        assert!(lines[1].starts_with("101,"));
        assert!(lines[5].starts_with("105,"));
        for line in &lines[1..] {
            let f: Vec<&str> = line.split(',').collect();
            assert_eq!(f.len(), 3);
            assert!(f[1].is_empty() || ["1", "2", "3"].contains(&f[1]));
            // `{:.6}`: six digits after the point, or an empty field.
            assert!(f[2].is_empty() || f[2].split('.').nth(1).is_some_and(|d| d.len() == 6), "{}", f[2]);
        }

        let hand = SimulatedTable {
            columns: vec!["x".into(), "label, quoted".into(), "k".into()],
            values: vec![vec![Some(-1e-9), None], vec![None, None], vec![Some(3.0), None]],
            integer_columns: vec![false, false, true],
            text_labels: vec![None, Some("say \"hi\"".into()), None],
            analysed_columns: vec![true, false, true],
        };
        assert_eq!(csv_string(&hand), "x,\"label, quoted\",k\n0.000000,\"say \"\"hi\"\"\",3\n,\"say \"\"hi\"\"\",\n");
    }

    #[test]
    fn unsupported_extension_writes_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("x.txt");
        let table = small().draw(3, 1).unwrap();
        assert!(matches!(write_table(&table, &path), Err(WriteError::Unsupported { .. })));
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
        write_table(&table, &dir.path().join("x.csv")).unwrap();
        assert_eq!(std::fs::read_to_string(dir.path().join("x.csv")).unwrap(), csv_string(&table));
    }
}
