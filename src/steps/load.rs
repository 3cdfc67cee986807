//! `load`: read every wave (or the summary matrix), stack rows with their wave, apply missing
//! codes and reverse coding, decide each item's type, and summarise each item.
//! Central type: `LoadOutput`. Its table is the only place respondent rows live; `results`
//! exposes the summary alone.

use std::path::PathBuf;

use indexmap::IndexMap;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::data::matrix::{check_positive_definite, read_matrix};
use crate::data::{DataError, Table, read_numeric_columns};
use crate::spec::SpecFile;
use crate::spec::types::{AUTO_MAX_LEVELS, MatrixKind, OrdinalSpec};

/// Bump when the loaded table or summary changes for the same files and parameters.
pub const VERSION: u32 = 2;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ItemKind {
    Continuous,
    Ordinal,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ItemSummary {
    pub name: String,
    pub construct: String,
    pub kind: ItemKind,
    pub n: usize,
    pub missing: usize,
    /// Distinct observed values (ordinal items: their categories, in order).
    pub levels: usize,
    pub categories: Option<Vec<f64>>,
    /// `None` for a summary matrix, which carries no means or ranges.
    pub mean: Option<f64>,
    pub sd: Option<f64>,
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub reversed: bool,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WaveSummary {
    pub id: String,
    pub file: String,
    pub rows: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SummaryMatrix {
    pub kind: MatrixKind,
    pub n: usize,
    /// In the order of `DataSummary::items`.
    pub values: Vec<Vec<f64>>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DataSummary {
    /// `waves` (respondent rows) or `matrix` (a published summary matrix).
    pub source: String,
    pub waves: Vec<WaveSummary>,
    pub rows: usize,
    pub items: Vec<ItemSummary>,
}

#[derive(Debug, Clone)]
pub struct LoadOutput {
    pub summary: DataSummary,
    pub table: Option<Table>,
    pub matrix: Option<SummaryMatrix>,
}

#[derive(Serialize, Deserialize)]
struct Envelope {
    summary: DataSummary,
    matrix: Option<SummaryMatrix>,
}

impl LoadOutput {
    /// `u64 length || JSON(summary, matrix) || table bytes`.
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        self.write_to(&mut out).unwrap_or_default();
        out
    }

    /// Writes `encode`'s bytes without building them in memory first.
    pub fn write_to(&self, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let head = serde_json::to_vec(&Envelope { summary: self.summary.clone(), matrix: self.matrix.clone() })
            .unwrap_or_default();
        out.write_all(&(head.len() as u64).to_le_bytes())?;
        out.write_all(&head)?;
        match &self.table {
            Some(t) => t.write_to(out),
            None => Ok(()),
        }
    }

    pub fn decode(bytes: &[u8]) -> Option<LoadOutput> {
        let (len, rest) = bytes.split_first_chunk::<8>()?;
        let len = usize::try_from(u64::from_le_bytes(*len)).ok()?;
        let env: Envelope = serde_json::from_slice(rest.get(..len)?).ok()?;
        let tail = rest.get(len..)?;
        let table = if tail.is_empty() { None } else { Some(Table::from_bytes(tail)?) };
        Some(LoadOutput { summary: env.summary, table, matrix: env.matrix })
    }

    pub fn item_kinds(&self) -> Vec<ItemKind> {
        self.summary.items.iter().map(|i| i.kind).collect()
    }
}

#[derive(Debug, Clone, Serialize)]
struct WaveFile {
    id: String,
    #[serde(skip)]
    path: PathBuf,
    #[serde(skip)]
    shown: String,
}

/// What `load` reads and how, resolved from the spec.
pub struct LoadStep {
    waves: Vec<WaveFile>,
    matrix: Option<(PathBuf, String, MatrixKind, usize)>,
    /// (item, construct) in spec order.
    items: Vec<(String, String)>,
    missing_codes: Vec<f64>,
    ordinal: OrdinalSpec,
    reverse: IndexMap<String, [f64; 2]>,
}

impl LoadStep {
    pub fn from_spec(file: &SpecFile) -> LoadStep {
        let data = &file.spec.data;
        let waves = data
            .waves
            .iter()
            .map(|w| WaveFile { id: w.id.clone(), path: file.resolve(&w.file), shown: w.file.display().to_string() })
            .collect();
        let matrix = data.matrix.as_ref().map(|m| (file.resolve(&m.file), m.file.display().to_string(), m.kind, m.n));
        let items = file
            .spec
            .constructs
            .iter()
            .flat_map(|(c, spec)| spec.items.iter().map(move |i| (i.clone(), c.clone())))
            .collect();
        LoadStep {
            waves,
            matrix,
            items,
            missing_codes: data.missing_codes.clone(),
            ordinal: data.ordinal.clone(),
            reverse: data.reverse.clone(),
        }
    }

    fn item_names(&self) -> Vec<String> {
        self.items.iter().map(|(i, _)| i.clone()).collect()
    }

    fn load_waves(&self) -> Result<LoadOutput, StepError> {
        let names = self.item_names();
        let mut columns: Vec<Vec<f64>> = vec![Vec::new(); names.len()];
        let mut wave_of_row = Vec::new();
        let mut waves = Vec::new();
        for (w, wave) in self.waves.iter().enumerate() {
            let mut cols = read_numeric_columns(&wave.path, &names)?;
            let rows = cols.first().map_or(0, Vec::len);
            // Items are independent: recode them in parallel, report the first failing item.
            let recoded: Vec<Result<(), DataError>> =
                cols.par_iter_mut().zip(&names).map(|(col, name)| self.recode(name, col, &wave.path)).collect();
            recoded.into_iter().collect::<Result<(), _>>()?;
            for (all, col) in columns.iter_mut().zip(cols) {
                if all.is_empty() {
                    *all = col;
                } else {
                    all.extend(col);
                }
            }
            wave_of_row.extend(std::iter::repeat_n(w as u32, rows));
            waves.push(WaveSummary { id: wave.id.clone(), file: wave.shown.clone(), rows });
        }
        let summaries: Vec<Result<ItemSummary, DataError>> = self
            .items
            .par_iter()
            .zip(&columns)
            .map(|((name, construct), col)| self.summarise(name, construct, col))
            .collect();
        let items = summaries.into_iter().collect::<Result<Vec<_>, _>>()?;
        let rows = wave_of_row.len();
        let table = Table { items: names, waves: waves.iter().map(|w| w.id.clone()).collect(), wave_of_row, columns };
        Ok(LoadOutput {
            summary: DataSummary { source: "waves".into(), waves, rows, items },
            table: Some(table),
            matrix: None,
        })
    }

    /// Missing codes become NaN; reversed items become lowest + highest - value.
    fn recode(&self, item: &str, col: &mut [f64], path: &std::path::Path) -> Result<(), DataError> {
        let reverse = self.reverse.get(item).copied();
        for (row, v) in col.iter_mut().enumerate() {
            if v.is_nan() {
                continue;
            }
            if self.missing_codes.iter().any(|c| c == v) {
                *v = f64::NAN;
                continue;
            }
            if let Some([lo, hi]) = reverse {
                if *v < lo || *v > hi {
                    return Err(DataError::OutsideReverseRange {
                        item: item.into(),
                        value: *v,
                        lo,
                        hi,
                        path: path.into(),
                        row: row + 1,
                    });
                }
                *v = lo + hi - *v;
            }
        }
        Ok(())
    }

    fn summarise(&self, name: &str, construct: &str, col: &[f64]) -> Result<ItemSummary, DataError> {
        let present: Vec<f64> = col.iter().copied().filter(|v| !v.is_nan()).collect();
        let n = present.len();
        if n == 0 {
            return Err(DataError::EmptyItem { item: name.into() });
        }
        let distinct = distinct_values(&present);
        if distinct.len() == 1 {
            return Err(DataError::ConstantItem { item: name.into(), value: distinct[0] });
        }
        let integer = distinct.iter().all(|v| v.fract() == 0.0);
        let kind = match &self.ordinal {
            OrdinalSpec::Auto if integer && distinct.len() <= AUTO_MAX_LEVELS => ItemKind::Ordinal,
            OrdinalSpec::Items(list) if list.iter().any(|i| i == name) => {
                if let Some(v) = distinct.iter().find(|v| v.fract() != 0.0) {
                    return Err(DataError::NonIntegerOrdinal { item: name.into(), value: *v });
                }
                ItemKind::Ordinal
            }
            _ => ItemKind::Continuous,
        };
        let mean = present.iter().sum::<f64>() / n as f64;
        let var = present.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n as f64 - 1.0).max(1.0);
        if !var.is_finite() {
            return Err(DataError::Overflow { item: name.into() });
        }
        Ok(ItemSummary {
            name: name.into(),
            construct: construct.into(),
            kind,
            n,
            missing: col.len() - n,
            levels: distinct.len(),
            categories: (kind == ItemKind::Ordinal).then(|| distinct.clone()),
            mean: Some(mean),
            sd: Some(var.sqrt()),
            min: Some(distinct[0]),
            max: Some(distinct[distinct.len() - 1]),
            reversed: self.reverse.contains_key(name),
        })
    }

    fn load_matrix(&self, path: &std::path::Path, kind: MatrixKind, n: usize) -> Result<LoadOutput, StepError> {
        let m = read_matrix(path, kind)?;
        let names = self.item_names();
        let index: Vec<usize> = names
            .iter()
            .map(|i| {
                m.names
                    .iter()
                    .position(|c| c == i)
                    .ok_or_else(|| DataError::MissingColumn { path: path.into(), column: i.clone() })
            })
            .collect::<Result<_, _>>()?;
        check_positive_definite(&m, &index).map_err(|problem| DataError::Matrix { path: path.into(), problem })?;
        let values: Vec<Vec<f64>> = index.iter().map(|&r| index.iter().map(|&c| m.values[r][c]).collect()).collect();
        let items = self
            .items
            .iter()
            .enumerate()
            .map(|(k, (name, construct))| {
                let var = values[k][k];
                ItemSummary {
                    name: name.clone(),
                    construct: construct.clone(),
                    kind: ItemKind::Continuous,
                    n,
                    missing: 0,
                    levels: 0,
                    categories: None,
                    mean: None,
                    sd: Some(if kind == MatrixKind::Covariance { var.sqrt() } else { 1.0 }),
                    min: None,
                    max: None,
                    reversed: false,
                }
            })
            .collect();
        Ok(LoadOutput {
            summary: DataSummary { source: "matrix".into(), waves: Vec::new(), rows: n, items },
            table: None,
            matrix: Some(SummaryMatrix { kind, n, values }),
        })
    }
}

impl Step for LoadStep {
    fn kind(&self) -> StepKind {
        StepKind::Load
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        json!({
            "waves": self.waves.iter().map(|w| &w.id).collect::<Vec<_>>(),
            "matrix": self.matrix.as_ref().map(|(_, _, kind, n)| json!({"kind": kind, "n": n})),
            "items": self.items,
            "missing_codes": self.missing_codes,
            "ordinal": self.ordinal,
            "reverse": self.reverse,
        })
    }

    fn inputs(&self) -> Vec<StepKind> {
        Vec::new()
    }

    fn files(&self) -> Vec<PathBuf> {
        let mut files: Vec<PathBuf> = self.waves.iter().map(|w| w.path.clone()).collect();
        files.extend(self.matrix.iter().map(|m| m.0.clone()));
        files
    }

    fn run(&self, _inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let out = match &self.matrix {
            Some((path, _, kind, n)) => self.load_matrix(path, *kind, *n)?,
            None => self.load_waves()?,
        };
        Ok(Artifact::Load(Box::new(out)))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Load(a) = artifact else { return String::new() };
        let s = &a.summary;
        let ordinal = s.items.iter().filter(|i| i.kind == ItemKind::Ordinal).count();
        if s.source == "matrix" {
            format!("{} from a summary matrix, n = {}", crate::spec::diagnostic::plural(s.items.len(), "item"), s.rows)
        } else {
            format!(
                "{} from {}, {} ({} ordinal)",
                crate::spec::diagnostic::plural(s.rows, "row"),
                crate::spec::diagnostic::plural(s.waves.len(), "wave"),
                crate::spec::diagnostic::plural(s.items.len(), "item"),
                ordinal
            )
        }
    }
}

/// Most distinct values kept in the one-pass set before `distinct_values` falls back to sorting.
const SMALL_SET_LIMIT: usize = 64;

/// The distinct values of `present` in ascending order (`f64::total_cmp`).
/// Why not just sort: survey items mostly have a handful of levels, and a small sorted set
/// grown in one pass (binary search, O(n log k) for k levels) avoids sorting all n answers;
/// an item with more than `SMALL_SET_LIMIT` levels (a continuous one) is sorted and deduplicated.
fn distinct_values(present: &[f64]) -> Vec<f64> {
    let mut set: Vec<f64> = Vec::new();
    for &v in present {
        let v = v + 0.0; // -0.0 and 0.0 are one answer; x + 0.0 turns -0.0 into 0.0
        if let Err(at) = set.binary_search_by(|x| x.total_cmp(&v)) {
            if set.len() == SMALL_SET_LIMIT {
                let mut all: Vec<f64> = present.iter().map(|v| v + 0.0).collect();
                // Unstable is safe: values that compare equal under total_cmp have the same bits.
                all.sort_unstable_by(f64::total_cmp);
                all.dedup();
                return all;
            }
            set.insert(at, v);
        }
    }
    set
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The definition: sort everything, drop repeats.
    fn sorted_unique(values: &[f64]) -> Vec<f64> {
        let mut all: Vec<f64> = values.iter().map(|v| v + 0.0).collect();
        all.sort_by(f64::total_cmp);
        all.dedup();
        all
    }

    #[test]
    fn distinct_values_agree_with_sorting_for_few_and_many_levels() {
        let few: Vec<f64> = (0..5000).map(|i| ((i * 7919) % 5 + 1) as f64).collect();
        assert_eq!(distinct_values(&few), vec![1.0, 2.0, 3.0, 4.0, 5.0]);
        let at_limit: Vec<f64> = (0..3000).map(|i| ((i * 31) % SMALL_SET_LIMIT) as f64).collect();
        assert_eq!(distinct_values(&at_limit).len(), SMALL_SET_LIMIT);
        assert_eq!(distinct_values(&at_limit), sorted_unique(&at_limit));
        let many: Vec<f64> = (0..3000).map(|i| (((i * 7919) % 1000) as f64 / 7.0).sin()).collect();
        assert_eq!(distinct_values(&many), sorted_unique(&many));
        assert_eq!(distinct_values(&[0.0, -0.0, 2.0]), vec![0.0, 2.0]);
    }
}
