//! `construe check`: parse and validate a spec against its data files' headers (a published
//! matrix is read whole: it is small), computing nothing. Central function: `check`, which
//! returns every diagnostic at once. Lints that need the respondents' values run after `load`
//! (`app::lints`), on the one loaded table.

use std::path::Path;

use crate::data::matrix::{check_positive_definite, read_matrix};
use crate::data::{DataError, FileKind, column_names};
use crate::spec::types::MatrixKind;
use crate::spec::validate::{ColumnsRead, SourceColumns, validate};
use crate::spec::{Report, SpecFile};

/// The parsed spec (when it parsed) and all diagnostics.
pub struct Checked {
    pub spec: Option<SpecFile>,
    pub report: Report,
}

pub fn check(path: &Path) -> Checked {
    let spec = match SpecFile::read(path) {
        Ok(s) => s,
        Err(report) => return Checked { spec: None, report },
    };
    let sources = source_columns(&spec);
    let mut findings = spec.early.clone();
    findings.extend(validate(&spec.spec, &sources));
    let report = spec.diagnose(findings);
    Checked { spec: Some(spec), report }
}

/// Reads the header of each data source named by the spec; a summary matrix is read whole
/// (it is small) and checked, so a bad matrix is refused here rather than after computing.
pub fn source_columns(spec: &SpecFile) -> Vec<SourceColumns> {
    let data = &spec.spec.data;
    let waves = data.waves.iter().enumerate().map(|(i, w)| (Some(w.id.clone()), i, &w.file));
    let matrix = data.matrix.iter().map(|m| (None, 0, &m.file));
    waves
        .chain(matrix)
        .map(|(wave, index, rel)| {
            let path = spec.resolve(rel);
            let columns = if !path.exists() {
                ColumnsRead::Missing
            } else if FileKind::of(&path).is_none() {
                ColumnsRead::Unsupported
            } else if let (None, Some(m)) = (&wave, &data.matrix) {
                matrix_columns(spec, &path, m.kind)
            } else {
                match column_names(&path) {
                    Ok(cols) => ColumnsRead::Columns(cols),
                    Err(e) => ColumnsRead::Unreadable(e.to_string()),
                }
            };
            SourceColumns { wave, index, path, columns }
        })
        .collect()
}

/// A summary matrix's item names, once the whole matrix and the part the spec uses pass
/// `read_matrix` and `check_positive_definite`.
fn matrix_columns(spec: &SpecFile, path: &Path, kind: MatrixKind) -> ColumnsRead {
    let m = match read_matrix(path, kind) {
        Ok(m) => m,
        Err(DataError::Matrix { problem, .. }) => return ColumnsRead::BadMatrix(problem),
        Err(e) => return ColumnsRead::Unreadable(e.to_string()),
    };
    let mut used: Vec<usize> = spec
        .spec
        .constructs
        .values()
        .flat_map(|c| c.items.iter())
        .filter_map(|i| m.names.iter().position(|n| n == i))
        .collect();
    used.sort_unstable();
    used.dedup();
    match check_positive_definite(&m, &used) {
        Ok(()) => ColumnsRead::Columns(m.names),
        Err(problem) => ColumnsRead::BadMatrix(problem),
    }
}
