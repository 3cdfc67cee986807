//! `construe check`: parse and validate a spec against its data files' headers, computing
//! nothing. Central function: `check`, which returns every diagnostic at once.

use std::path::Path;

use crate::data::{FileKind, column_names};
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
    let spec_dir = spec.resolve(std::path::Path::new(""));
    let mut findings = spec.early.clone();
    findings.extend(validate(&spec.spec, &spec_dir, &sources));
    let report = spec.diagnose(findings);
    Checked { spec: Some(spec), report }
}

/// Reads the header of each data source named by the spec.
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
            } else {
                match column_names(&path) {
                    Ok(mut cols) => {
                        // A summary matrix's row-label column is not an item.
                        if wave.is_none() && cols.first().is_some_and(|c| c.is_empty() || c == "item" || c == "name") {
                            cols.remove(0);
                        }
                        ColumnsRead::Columns(cols)
                    }
                    Err(e) => ColumnsRead::Unreadable(e.to_string()),
                }
            };
            SourceColumns { wave, index, path, columns }
        })
        .collect()
}
