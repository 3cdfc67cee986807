//! `construe check`: parse and validate a spec against its data files' headers (a published
//! matrix is read whole: it is small), computing nothing. Central function: `check`, which
//! returns every diagnostic at once. `check_with_data` (the `check` command) adds one streaming
//! pass over every wave (`data::scan`) that finds what `load` would refuse — cells that are not
//! numbers, values outside a reverse range, constant or empty items — all of them, not the
//! first. `run` and `plan` call `check` alone: `load` reads the values anyway. Lints that need
//! the respondents' values run after `load` (`app::lints`), on the one loaded table.

use std::path::Path;

use crate::data::matrix::{check_positive_definite, read_matrix};
use crate::data::scan::{Cell, Rules, Tally, scan};
use crate::data::table::MAX_CODED_LEVELS;
use crate::data::{DataError, FileKind, column_names};
use crate::spec::positions::{child, element};
use crate::spec::problem::{Finding, SpecProblem};
use crate::spec::types::{MatrixKind, OrdinalSpec};
use crate::spec::validate::{ColumnsRead, SourceColumns, validate};
use crate::spec::{Report, SpecFile};

/// The parsed spec (when it parsed) and all diagnostics.
pub struct Checked {
    pub spec: Option<SpecFile>,
    pub report: Report,
    /// Each data source's columns as read (empty when the spec did not parse).
    pub sources: Vec<SourceColumns>,
}

pub fn check(path: &Path) -> Checked {
    let spec = match SpecFile::read(path) {
        Ok(s) => s,
        Err(report) => return Checked { spec: None, report, sources: Vec::new() },
    };
    let sources = source_columns(&spec);
    let mut findings = spec.early.clone();
    // A value that failed to type-check was set aside (removed or replaced by a placeholder);
    // what validation says about that placeholder, or about the mapping that holds it (a
    // construct whose `items` were set aside "has no items"), is not the user's problem.
    let aside: Vec<String> =
        spec.early.iter().filter(|f| matches!(f.problem, SpecProblem::Type { .. })).map(|f| f.path.clone()).collect();
    let removed: Vec<String> = spec
        .early
        .iter()
        .filter(|f| matches!(f.problem, SpecProblem::UnknownKey { .. }))
        .map(|f| f.path.clone())
        .collect();
    let under = |path: &str, a: &str| path == a || path.starts_with(&format!("{a}."));
    let holds = |path: &str, a: &str| a.rsplit_once('.').is_some_and(|(parent, _)| parent == path);
    findings.extend(validate(&spec.spec, &sources).into_iter().filter(|f| {
        !removed.iter().any(|a| under(&f.path, a)) && !aside.iter().any(|a| under(&f.path, a) || holds(&f.path, a))
    }));
    let report = spec.diagnose(findings);
    Checked { spec: Some(spec), report, sources }
}

/// `check`, then one pass over the values of every wave whose header was read (also after
/// errors elsewhere in the spec: every problem is reported at once).
pub fn check_with_data(path: &Path) -> Checked {
    let mut checked = check(path);
    if let Some(spec) = &checked.spec {
        let findings = data_findings(spec, &checked.sources);
        let mut report = spec.diagnose(findings);
        report.extend(std::mem::take(&mut checked.report));
        report.sort();
        checked.report = report;
    }
    checked
}

/// What `load` would refuse in the waves' values, every instance counted. Each finding blames
/// the spec entry to change: the wave's file, the reverse range, the item, the ordinal list.
fn data_findings(spec: &SpecFile, sources: &[SourceColumns]) -> Vec<Finding> {
    let data = &spec.spec.data;
    let items: Vec<(&String, &String, usize)> = spec
        .spec
        .constructs
        .iter()
        .flat_map(|(c, def)| def.items.iter().enumerate().map(move |(k, i)| (i, c, k)))
        .collect();
    let wanted: Vec<(String, Rules)> = items
        .iter()
        .map(|(i, _, _)| {
            ((*i).clone(), Rules { missing_codes: &data.missing_codes, reverse: data.reverse.get(*i).copied() })
        })
        .collect();
    let mut out = Vec::new();
    // Per item over all waves: values present, distinct values (bounded), a non-integer value,
    // values outside the reverse range (per file).
    let mut present = vec![0usize; items.len()];
    let mut seen = vec![false; items.len()];
    let mut distinct: Vec<Vec<f64>> = vec![Vec::new(); items.len()];
    let mut non_integer: Vec<Option<f64>> = vec![None; items.len()];
    let mut outside: Vec<Vec<(String, Tally)>> = vec![Vec::new(); items.len()];
    // Rows per wave and each item's present count per wave (for mostly-missing items), and
    // which pairs of items some respondent answered together (upper triangle, row-major).
    let mut rows_by_wave: Vec<(String, usize, Vec<usize>)> = Vec::new();
    let mut together = vec![false; items.len() * items.len()];
    for s in sources.iter().filter(|s| s.wave.is_some()) {
        if !matches!(s.columns, ColumnsRead::Columns(_)) {
            continue;
        }
        let file = element("data.waves", s.index) + ".file";
        let shown = data.waves[s.index].file.display().to_string();
        let scanned = match scan(&s.path, &wanted) {
            Ok(f) => f,
            Err(e) => {
                out.push(Finding::value(
                    SpecProblem::DataUnreadable { path: s.path.clone(), reason: e.to_string() },
                    file,
                ));
                continue;
            }
        };
        if scanned.bad_records > 0 {
            let examples = listing(
                scanned.bad_record_examples.iter().map(|b| format!("row {} (line {}) has {}", b.row, b.line, b.found)),
                scanned.bad_records,
            );
            out.push(Finding::value(
                SpecProblem::DataFieldCount {
                    path: s.path.clone(),
                    count: scanned.bad_records,
                    expected: scanned.expected_fields,
                    examples,
                },
                file.clone(),
            ));
        }
        let index: Vec<Option<usize>> =
            scanned.columns.iter().map(|col| items.iter().position(|(i, _, _)| **i == col.name)).collect();
        let mut wave_present = vec![0usize; items.len()];
        for (a, col_a) in scanned.columns.iter().enumerate() {
            let Some(ka) = index[a] else { continue };
            wave_present[ka] = col_a.present;
            for (b, col_b) in scanned.columns.iter().enumerate().skip(a + 1) {
                let Some(kb) = index[b] else { continue };
                if col_a.observed_with(col_b) {
                    together[ka.min(kb) * items.len() + ka.max(kb)] = true;
                }
            }
        }
        rows_by_wave.push((data.waves[s.index].id.clone(), scanned.rows, wave_present));
        for col in &scanned.columns {
            let Some(k) = items.iter().position(|(i, _, _)| **i == col.name) else { continue };
            seen[k] = true;
            if col.non_numeric.count > 0 {
                out.push(Finding::value(
                    SpecProblem::DataNotNumber {
                        path: s.path.clone(),
                        column: col.name.clone(),
                        count: col.non_numeric.count,
                        examples: cells(&col.non_numeric),
                    },
                    file.clone(),
                ));
            }
            if col.outside_reverse.count > 0 {
                outside[k].push((shown.clone(), col.outside_reverse.clone()));
            }
            present[k] += col.present;
            non_integer[k] = non_integer[k].or(col.non_integer);
            for v in &col.distinct {
                if let Err(at) = distinct[k].binary_search_by(|x| x.total_cmp(v))
                    && distinct[k].len() <= MAX_CODED_LEVELS
                {
                    distinct[k].insert(at, *v);
                }
            }
        }
    }
    let wave_rows: Vec<(String, usize)> = rows_by_wave.iter().map(|(w, r, _)| (w.clone(), *r)).collect();
    crate::spec::validate_invariance::check_group_rows(&spec.spec, &wave_rows, &mut out);
    let listed_ordinal = |item: &str| match &data.ordinal {
        OrdinalSpec::Items(list) => list.iter().position(|i| i == item),
        _ => None,
    };
    for (k, (item, construct, index)) in items.iter().enumerate() {
        if !seen[k] {
            continue;
        }
        let at = element(&child(&child("constructs", construct), "items"), *index);
        if !outside[k].is_empty()
            && let Some([lo, hi]) = data.reverse.get(*item).copied()
        {
            let count = outside[k].iter().map(|(_, t)| t.count).sum();
            let examples = listing(
                outside[k]
                    .iter()
                    .flat_map(|(f, t)| t.examples.iter().map(move |c| format!("{} in `{f}` row {}", c.value, c.row))),
                count,
            );
            out.push(Finding::value(
                SpecProblem::DataOutsideReverse { item: (*item).clone(), lo, hi, count, examples },
                child("data.reverse", item),
            ));
        }
        let rows: usize = rows_by_wave.iter().map(|(_, r, _)| r).sum();
        if present[k] > 0 && rows > 0 && 2 * present[k] < rows {
            let waves = rows_by_wave
                .iter()
                .filter(|(_, r, _)| *r > 0)
                .map(|(w, r, p)| format!("{w}: {}%", (100 * (r - p[k]) + r / 2) / r))
                .collect::<Vec<_>>()
                .join(", ");
            let percent = (100 * (rows - present[k]) + rows / 2) / rows;
            out.push(Finding::value(
                SpecProblem::DataMostlyMissing { item: (*item).clone(), percent, waves },
                at.clone(),
            ));
        }
        for (j, (other, _, _)) in items.iter().enumerate().take(k) {
            if seen[j] && present[j] > 0 && present[k] > 0 && !together[j * items.len() + k] {
                out.push(Finding::value(
                    SpecProblem::DataNeverTogether { first: (*other).clone(), second: (*item).clone() },
                    at.clone(),
                ));
            }
        }
        if present[k] == 0 {
            out.push(Finding::value(SpecProblem::DataEmpty { item: (*item).clone() }, at));
        } else if distinct[k].len() == 1 {
            out.push(Finding::value(SpecProblem::DataConstant { item: (*item).clone(), value: distinct[k][0] }, at));
        }
        if let Some(j) = listed_ordinal(item) {
            let place = element("data.ordinal", j);
            if let Some(value) = non_integer[k] {
                out.push(Finding::value(SpecProblem::DataOrdinalNonInteger { item: (*item).clone(), value }, place));
            } else if distinct[k].len() > MAX_CODED_LEVELS {
                out.push(Finding::value(
                    SpecProblem::DataOrdinalLevels { item: (*item).clone(), max: MAX_CODED_LEVELS },
                    place,
                ));
            }
        }
    }
    out
}

/// "row 4 (line 5): `often`", up to `MAX_EXAMPLES` of them, then "and N more".
fn cells(t: &Tally) -> String {
    let one = |c: &Cell| match c.line {
        Some(l) => format!("row {} (line {l}): `{}`", c.row, c.value),
        None => format!("row {}: `{}`", c.row, c.value),
    };
    listing(t.examples.iter().map(one), t.count)
}

/// Examples joined with "; ", with "and N more" when `total` exceeds them.
fn listing(examples: impl Iterator<Item = String>, total: usize) -> String {
    let shown: Vec<String> = examples.take(crate::data::scan::MAX_EXAMPLES).collect();
    let mut s = shown.join("; ");
    if total > shown.len() {
        s.push_str(&format!("; and {} more", total - shown.len()));
    }
    s
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
