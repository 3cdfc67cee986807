//! `construe check`: parse and validate a spec against its data files' headers, computing
//! nothing. Central function: `check`, which returns every diagnostic at once.

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
    let spec_dir = spec.resolve(std::path::Path::new(""));
    let mut findings = spec.early.clone();
    findings.extend(validate(&spec.spec, &spec_dir, &sources));
    if !findings.iter().any(|f| !f.problem.is_warning()) {
        findings.extend(scale_score_lints(&spec));
    }
    let report = spec.diagnose(findings);
    Checked { spec: Some(spec), report }
}

/// Fewest rows with all values present before two columns are compared.
const MIN_ROWS_FOR_LINT: usize = 10;

/// Items that equal the sum or mean of a construct's other items in every complete row: scale
/// scores entered as if they were indicators. Reads the item columns (not the whole analysis);
/// an unreadable file is left to `run` to report.
fn scale_score_lints(spec: &SpecFile) -> Vec<crate::spec::Finding> {
    use crate::spec::positions::{child, element};
    use crate::spec::problem::{Finding, SpecProblem};
    let items: Vec<(String, String, usize)> = spec
        .spec
        .constructs
        .iter()
        .flat_map(|(c, s)| s.items.iter().enumerate().map(move |(k, i)| (i.clone(), c.clone(), k)))
        .collect();
    let names: Vec<String> = items.iter().map(|(i, _, _)| i.clone()).collect();
    let mut columns: Vec<Vec<f64>> = vec![Vec::new(); names.len()];
    for w in &spec.spec.data.waves {
        let Ok(cols) = crate::data::read_numeric_columns(&spec.resolve(&w.file), &names) else { return Vec::new() };
        for (all, c) in columns.iter_mut().zip(cols) {
            all.extend(c);
        }
    }
    let rows = columns.first().map_or(0, Vec::len);
    let mut out = coarsened_single_indicators(spec, &names, &columns);
    for (x, (item, own, k)) in items.iter().enumerate() {
        for (construct, spec_c) in &spec.spec.constructs {
            let parts: Vec<usize> =
                spec_c.items.iter().filter(|i| *i != item).filter_map(|i| names.iter().position(|n| n == i)).collect();
            if parts.len() < 2 {
                continue;
            }
            for how in ["sum", "mean"] {
                let mut compared = 0;
                let equal = (0..rows).all(|r| {
                    let vals: Vec<f64> = parts.iter().map(|&p| columns[p][r]).collect();
                    if columns[x][r].is_nan() || vals.iter().any(|v| v.is_nan()) {
                        return true;
                    }
                    compared += 1;
                    let sum: f64 = vals.iter().sum();
                    let target = if how == "sum" { sum } else { sum / vals.len() as f64 };
                    (columns[x][r] - target).abs() <= 1e-6 * (1.0 + target.abs())
                });
                if equal && compared >= MIN_ROWS_FOR_LINT {
                    let path = element(&child(&child("constructs", own), "items"), *k);
                    out.push(Finding::value(
                        SpecProblem::ScaleScore { item: item.clone(), construct: construct.clone(), how: how.into() },
                        path,
                    ));
                    break;
                }
            }
        }
    }
    out
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

/// Most categories for a single indicator to count as coarsened.
const COARSE_LEVELS: usize = 3;

/// Single indicators with at most 3 integer categories of constructs that sit between others
/// (a tier with constructs both before and after it).
fn coarsened_single_indicators(spec: &SpecFile, names: &[String], columns: &[Vec<f64>]) -> Vec<crate::spec::Finding> {
    use crate::spec::positions::{child, element};
    use crate::spec::problem::{Finding, SpecProblem};
    let tiers = &spec.spec.knowledge.tiers;
    let mut out = Vec::new();
    for (construct, c) in &spec.spec.constructs {
        let [item] = c.items.as_slice() else { continue };
        let Some(t) = tiers.iter().position(|tier| tier.contains(construct)) else { continue };
        if t == 0 || t + 1 >= tiers.len() {
            continue;
        }
        let Some(k) = names.iter().position(|n| n == item) else { continue };
        let mut levels: Vec<f64> = columns[k].iter().copied().filter(|v| !v.is_nan()).collect();
        if levels.iter().any(|v| v.fract() != 0.0) {
            continue;
        }
        levels.sort_by(f64::total_cmp);
        levels.dedup();
        if levels.len() <= COARSE_LEVELS {
            let path = element(&child(&child("constructs", construct), "items"), 0);
            out.push(Finding::value(
                SpecProblem::CoarsenedSingleIndicator {
                    construct: construct.clone(),
                    item: item.clone(),
                    levels: levels.len(),
                },
                path,
            ));
        }
    }
    out
}
