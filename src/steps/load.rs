//! `load`: read every wave (or the summary matrix), stack rows with their wave, apply missing
//! codes and reverse coding, decide each item's type, and summarise each item.
//! Central type: `LoadOutput`. Its table is the only place respondent rows live; `results`
//! exposes the summary alone, and the summary discloses no single respondent's answer
//! (issue 13): no minimum or maximum; rounded means, SDs and tail percentiles; response
//! levels only in groups of at least `MIN_GROUP` respondents.

use std::path::PathBuf;

use indexmap::IndexMap;
use rayon::prelude::*;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::{Artifact, Inputs, Step, StepError, StepKind};
use crate::data::matrix::{check_positive_definite, read_matrix};
use crate::data::table::{MAX_CODED_LEVELS, MISSING};
use crate::data::{Column, DataError, Table, read_columns};
use crate::spec::SpecFile;
use crate::spec::types::{AUTO_MAX_LEVELS, MatrixKind, OrdinalSpec};
use construe_stats::disclosure::{guarded_percentile, guarded_percentile_counted, round_significant};

/// Bump when the loaded table or summary changes for the same files and parameters.
/// 3: the summary drops each item's minimum and maximum for disclosure-safe aggregates.
/// 4: the table holds few-level items as one-byte codes (same values, new encoding).
pub const VERSION: u32 = 4;

/// Fewest respondents behind any published value of an item summary: a response level with
/// fewer is pooled with its neighbour, a percentile with fewer beyond it is not shown. Five
/// is the usual minimum cell size of statistical disclosure control for frequency tables.
pub const MIN_GROUP: usize = 5;

/// Significant digits of published means and standard deviations (the report templates
/// print them with `sig(3)`, and percentiles with `sig(2)`: keep them in step).
pub const MEAN_DIGITS: i32 = 3;

/// Significant digits of published percentiles: near the tails a value is close to a few
/// respondents' answers, so it is shown coarser than the mean.
pub const PERCENTILE_DIGITS: i32 = 2;

/// How an item is analysed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum ItemKind {
    /// Analysed on its own scale (Pearson or polyserial correlations).
    Continuous,
    /// Ordered categories (polychoric or polyserial correlations).
    Ordinal,
}

/// One item's distribution, with no single respondent's value (see the disclosure rule).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ItemSummary {
    /// The item (column) name.
    pub name: String,
    /// The construct that lists the item (empty when none does).
    pub construct: String,
    /// Whether the item is analysed as continuous or ordinal.
    pub kind: ItemKind,
    /// Respondents who answered the item.
    pub n: usize,
    /// Respondents without an answer (missing codes included).
    pub missing: usize,
    /// Number of distinct observed values.
    pub levels: usize,
    /// Ordinal items: every observed category, in order, for `covariance`'s contingency
    /// tables. Kept in the artifact (see `Envelope`), never in results: a rare category is a
    /// single respondent's answer.
    #[serde(skip)]
    pub categories: Option<Vec<f64>>,
    /// `None` for a summary matrix, which carries no means. Rounded to `MEAN_DIGITS`
    /// significant digits.
    pub mean: Option<f64>,
    /// Standard deviation, to 3 significant digits; `null` for a summary matrix.
    pub sd: Option<f64>,
    /// Continuous items: the 5th and 95th percentiles (linear interpolation between order
    /// statistics, Hyndman & Fan 1996 type 7), to `PERCENTILE_DIGITS` significant digits; `None`
    /// when fewer than `MIN_GROUP` answers lie at or beyond one of them.
    pub p5: Option<f64>,
    /// Continuous items: the 95th percentile (see `p5`).
    pub p95: Option<f64>,
    /// Ordinal items: response levels with their counts, pooled into groups of at least
    /// `MIN_GROUP` respondents.
    pub responses: Option<Vec<ResponseGroup>>,
    /// Whether the item was reverse-coded (`data.reverse`).
    pub reversed: bool,
}

/// Adjacent response levels of an ordinal item and how many answered one of them. An outer
/// group that pools several levels leaves its outer bound open (`None`): that bound would be
/// the smallest or largest answer, possibly a single respondent's.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ResponseGroup {
    /// Lowest level in the group; `None` for "this level or below".
    pub from: Option<f64>,
    /// Highest level in the group; `None` for "this level or above".
    pub to: Option<f64>,
    /// Respondents in the group (at least 5).
    pub count: usize,
    /// `3`, `2–3`, `≤ 2`, `≥ 4` (or `all` when every answer is in one group).
    pub label: String,
}

/// One wave as read.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct WaveSummary {
    /// The wave's id from the spec.
    pub id: String,
    /// The data file, as the spec names it.
    pub file: String,
    /// Rows read from the file.
    pub rows: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct SummaryMatrix {
    pub kind: MatrixKind,
    pub n: usize,
    /// In the order of `DataSummary::items`.
    pub values: Vec<Vec<f64>>,
}

/// What was read.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DataSummary {
    /// `waves` (respondent rows) or `matrix` (a published summary matrix).
    pub source: String,
    /// The waves read, in spec order (empty for a summary matrix).
    pub waves: Vec<WaveSummary>,
    /// Respondent rows over all waves (the matrix's `n` for a summary matrix).
    pub rows: usize,
    /// Each item's summary, in item order.
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
    /// Each item's `categories`, which the summary's serialisation leaves out.
    categories: Vec<Option<Vec<f64>>>,
}

impl LoadOutput {
    /// `u64 length || postcard(summary, matrix) || table bytes` (exact, see `steps::write_exact`).
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        self.write_to(&mut out).unwrap_or_default();
        out
    }

    /// Writes `encode`'s bytes without building them in memory first.
    pub fn write_to(&self, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut head = Vec::new();
        super::write_exact(
            &mut head,
            &Envelope {
                summary: self.summary.clone(),
                matrix: self.matrix.clone(),
                categories: self.summary.items.iter().map(|i| i.categories.clone()).collect(),
            },
        )?;
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
        let mut env: Envelope = super::read_exact(rest.get(..len)?)?;
        if env.categories.len() != env.summary.items.len() {
            return None;
        }
        for (item, categories) in env.summary.items.iter_mut().zip(env.categories) {
            item.categories = categories;
        }
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
        let mut columns: Vec<Column> = names.iter().map(|_| Column::Values(Vec::new())).collect();
        let mut wave_of_row = Vec::new();
        let mut waves = Vec::new();
        for (w, wave) in self.waves.iter().enumerate() {
            let mut cols = read_columns(&wave.path, &names)?;
            let rows = cols.first().map_or(0, Column::len);
            // Items are independent: recode them in parallel, report the first failing item.
            let recoded: Vec<Result<(), DataError>> =
                cols.par_iter_mut().zip(&names).map(|(col, name)| self.recode(name, col, &wave.path)).collect();
            recoded.into_iter().collect::<Result<(), _>>()?;
            for (all, col) in columns.iter_mut().zip(cols) {
                all.append(col);
            }
            wave_of_row.extend(std::iter::repeat_n(w as u32, rows));
            waves.push(WaveSummary { id: wave.id.clone(), file: wave.shown.clone(), rows });
        }
        self.assemble(names, columns, wave_of_row, waves)
    }

    /// What `load` would make of one wave of columns drawn in memory (`construe power`'s
    /// simulated replicates): the spec's missing codes and reverse coding, then the same item
    /// types and summaries as for a file. `columns` are in item order (`item_names`); `wave` and
    /// `label` (shown in errors in place of a file) name the drawn wave.
    pub fn load_drawn(&self, wave: &str, label: &str, mut columns: Vec<Column>) -> Result<LoadOutput, StepError> {
        let names = self.item_names();
        let path = std::path::Path::new(label);
        let recoded: Vec<Result<(), DataError>> =
            columns.par_iter_mut().zip(&names).map(|(col, name)| self.recode(name, col, path)).collect();
        recoded.into_iter().collect::<Result<(), _>>()?;
        let rows = columns.first().map_or(0, Column::len);
        let waves = vec![WaveSummary { id: wave.into(), file: label.into(), rows }];
        self.assemble(names, columns, vec![0; rows], waves)
    }

    /// The items' names, in item order (the order `load_drawn` expects its columns in).
    pub fn items(&self) -> Vec<String> {
        self.item_names()
    }

    /// Summarises recoded columns and builds the table.
    fn assemble(
        &self,
        names: Vec<String>,
        columns: Vec<Column>,
        wave_of_row: Vec<u32>,
        waves: Vec<WaveSummary>,
    ) -> Result<LoadOutput, StepError> {
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

    /// Missing codes become missing; reversed items become lowest + highest - value. A coded
    /// column is recoded through its levels, not row by row.
    fn recode(&self, item: &str, col: &mut Column, path: &std::path::Path) -> Result<(), DataError> {
        let reverse = self.reverse.get(item).copied();
        if self.missing_codes.is_empty() && reverse.is_none() {
            return Ok(());
        }
        col.map_values(|v| {
            if self.missing_codes.contains(&v) {
                return Ok(f64::NAN);
            }
            match reverse {
                Some([lo, hi]) if v < lo || v > hi => Err((v, lo, hi)),
                Some([lo, hi]) => Ok(lo + hi - v),
                None => Ok(v),
            }
        })
        .map_err(|(row, (value, lo, hi))| DataError::OutsideReverseRange {
            item: item.into(),
            value,
            lo,
            hi,
            path: path.into(),
            row: row + 1,
        })
    }

    fn summarise(&self, name: &str, construct: &str, col: &Column) -> Result<ItemSummary, DataError> {
        let shape = match col {
            Column::Values(v) => Shape::of_values(v),
            Column::Codes { levels, codes } => Shape::of_codes(levels, codes),
        };
        let n = shape.n;
        if n == 0 {
            return Err(DataError::EmptyItem { item: name.into() });
        }
        let distinct = &shape.distinct;
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
                if distinct.len() > MAX_CODED_LEVELS {
                    return Err(DataError::TooManyLevels {
                        item: name.into(),
                        levels: distinct.len(),
                        max: MAX_CODED_LEVELS,
                    });
                }
                ItemKind::Ordinal
            }
            _ => ItemKind::Continuous,
        };
        let (mean, var) = shape.moments;
        if !var.is_finite() {
            return Err(DataError::Overflow { item: name.into() });
        }
        let (p5, p95, responses) = match kind {
            ItemKind::Continuous => {
                let (p5, p95) = match col {
                    Column::Values(v) => {
                        let mut present: Vec<f64> = v.iter().copied().filter(|v| !v.is_nan()).collect();
                        (
                            guarded_percentile(&mut present, 0.05, MIN_GROUP),
                            guarded_percentile(&mut present, 0.95, MIN_GROUP),
                        )
                    }
                    Column::Codes { .. } => (
                        guarded_percentile_counted(distinct, &shape.counts, 0.05, MIN_GROUP),
                        guarded_percentile_counted(distinct, &shape.counts, 0.95, MIN_GROUP),
                    ),
                };
                (
                    p5.map(|v| round_significant(v, PERCENTILE_DIGITS)),
                    p95.map(|v| round_significant(v, PERCENTILE_DIGITS)),
                    None,
                )
            }
            ItemKind::Ordinal => (None, None, Some(pooled_groups(&shape.counts, distinct))),
        };
        Ok(ItemSummary {
            name: name.into(),
            construct: construct.into(),
            kind,
            n,
            missing: col.len() - n,
            levels: distinct.len(),
            categories: (kind == ItemKind::Ordinal).then(|| distinct.clone()),
            mean: Some(round_significant(mean, MEAN_DIGITS)),
            sd: Some(round_significant(var.sqrt(), MEAN_DIGITS)),
            p5,
            p95,
            responses,
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
                    sd: Some(round_significant(
                        if kind == MatrixKind::Covariance { var.sqrt() } else { 1.0 },
                        MEAN_DIGITS,
                    )),
                    p5: None,
                    p95: None,
                    responses: None,
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

/// What `summarise` needs of one item's present values.
struct Shape {
    /// Present values.
    n: usize,
    /// Distinct present values, ascending.
    distinct: Vec<f64>,
    /// Answers per distinct value (empty beyond `MAX_CODED_LEVELS` levels).
    counts: Vec<usize>,
    /// Mean and sample variance (divisor n - 1), summed in row order.
    moments: (f64, f64),
}

impl Shape {
    fn of_values(col: &[f64]) -> Shape {
        let present = || col.iter().copied().filter(|v| !v.is_nan());
        Shape::from_rows(present, distinct_values(&present().collect::<Vec<_>>()))
    }

    /// The same sums over the same values in the same row order as `of_values`, so the
    /// figures are bit-identical; levels no row holds are left out.
    fn of_codes(levels: &[f64], codes: &[u8]) -> Shape {
        let mut counts = vec![0usize; levels.len()];
        codes.iter().filter(|&&c| c != MISSING).for_each(|&c| counts[c as usize] += 1);
        let held: Vec<f64> = levels.iter().zip(&counts).filter(|(_, c)| **c > 0).map(|(l, _)| *l).collect();
        Shape::from_rows(|| codes.iter().filter(|&&c| c != MISSING).map(|&c| levels[c as usize]), held)
    }

    /// Level counts only for items with few levels (the only ones that can be ordinal): a
    /// continuous item's percentiles come from selection, not counts.
    fn from_rows<I: Iterator<Item = f64>>(present: impl Fn() -> I, distinct: Vec<f64>) -> Shape {
        let count = distinct.len() <= MAX_CODED_LEVELS;
        let mut counts = vec![0usize; if count { distinct.len() } else { 0 }];
        let mut n = 0;
        for v in present() {
            n += 1;
            if count {
                let v = v + 0.0;
                if let Ok(k) = distinct.binary_search_by(|x| x.total_cmp(&v)) {
                    counts[k] += 1;
                }
            }
        }
        let mean = present().sum::<f64>() / n as f64;
        let var = present().map(|v| (v - mean).powi(2)).sum::<f64>() / (n as f64 - 1.0).max(1.0);
        Shape { n, distinct, counts, moments: (mean, var) }
    }
}

/// Counts of each level in `distinct` (sorted) among `present`, pooled bottom-up into groups
/// of at least `MIN_GROUP` respondents; a short last group joins the one before it.
#[cfg(test)]
fn response_groups(present: &[f64], distinct: &[f64]) -> Vec<ResponseGroup> {
    let mut counts = vec![0usize; distinct.len()];
    for v in present {
        let v = v + 0.0;
        if let Ok(k) = distinct.binary_search_by(|x| x.total_cmp(&v)) {
            counts[k] += 1;
        }
    }
    pooled_groups(&counts, distinct)
}

/// `counts` of each level in `distinct` (sorted), pooled as `response_groups` describes.
fn pooled_groups(counts: &[usize], distinct: &[f64]) -> Vec<ResponseGroup> {
    // Groups as index ranges into `distinct`.
    let mut spans: Vec<(usize, usize, usize)> = Vec::new();
    let mut start = 0;
    let mut sum = 0;
    for (k, c) in counts.iter().enumerate() {
        sum += c;
        if sum >= MIN_GROUP {
            spans.push((start, k, sum));
            start = k + 1;
            sum = 0;
        }
    }
    if sum > 0 {
        match spans.last_mut() {
            Some(last) => {
                last.1 = distinct.len() - 1;
                last.2 += sum;
            }
            None => spans.push((0, distinct.len() - 1, sum)),
        }
    }
    let groups = spans.len();
    spans
        .into_iter()
        .enumerate()
        .map(|(g, (a, b, count))| {
            // An outer group pooling several levels keeps its outer bound to itself.
            let from = (g > 0 || a == b).then_some(distinct[a]);
            let to = (g + 1 < groups || a == b).then_some(distinct[b]);
            let label = match (from, to) {
                (Some(x), Some(y)) if x == y => format!("{x}"),
                (Some(x), Some(y)) => format!("{x}–{y}"),
                (None, Some(y)) => format!("≤ {y}"),
                (Some(x), None) => format!("≥ {x}"),
                (None, None) => "all".into(),
            };
            ResponseGroup { from, to, count, label }
        })
        .collect()
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
    fn rare_levels_are_pooled_and_outer_bounds_hidden() {
        let mut present = Vec::new();
        for (level, count) in [(1.0, 1), (2.0, 3), (3.0, 40), (4.0, 30), (5.0, 2), (7.0, 1)] {
            present.extend(std::iter::repeat_n(level, count));
        }
        let distinct = distinct_values(&present);
        let groups = response_groups(&present, &distinct);
        let shown: Vec<(&str, usize)> = groups.iter().map(|g| (g.label.as_str(), g.count)).collect();
        // 1, 2, 3 reach 44; 4 alone has 30; 5 and 7 (3 answers) join the group before them.
        assert_eq!(shown, vec![("≤ 3", 44), ("≥ 4", 33)]);
        assert_eq!(groups[0].from, None);
        assert_eq!(groups[1].to, None);
        // Every level common: one group each, bounds shown.
        let present: Vec<f64> = (0..50).map(|i| f64::from(i % 5 + 1)).collect();
        let groups = response_groups(&present, &distinct_values(&present));
        assert_eq!(groups.len(), 5);
        assert_eq!(
            (groups[0].from, groups[0].to, groups[0].count, groups[0].label.as_str()),
            (Some(1.0), Some(1.0), 10, "1")
        );
        // Fewer than MIN_GROUP answers in all: one group, no bounds.
        let groups = response_groups(&[1.0, 2.0, 2.0], &[1.0, 2.0]);
        assert_eq!(groups, vec![ResponseGroup { from: None, to: None, count: 3, label: "all".into() }]);
    }

    /// `ordinal: auto` and `ordinal: none` load different tables, so their keys must differ
    /// (both were once written as `null`, and the cache served one for the other).
    #[test]
    fn every_ordinal_setting_has_its_own_key() {
        let params: Vec<Value> = [OrdinalSpec::Auto, OrdinalSpec::None, OrdinalSpec::Items(vec!["r".into()])]
            .into_iter()
            .map(|o| step(o).params())
            .collect();
        assert_eq!(params[0]["ordinal"], "auto");
        assert_eq!(params[1]["ordinal"], "none");
        assert_eq!(params[2]["ordinal"], json!(["r"]));
        // The words read back as what they were written from.
        for (o, p) in [OrdinalSpec::Auto, OrdinalSpec::None].iter().zip(&params) {
            assert_eq!(&serde_json::from_value::<OrdinalSpec>(p["ordinal"].clone()).unwrap(), o);
        }
    }

    fn step(ordinal: OrdinalSpec) -> LoadStep {
        let mut reverse = IndexMap::new();
        reverse.insert("r".to_string(), [1.0, 7.0]);
        LoadStep { waves: Vec::new(), matrix: None, items: Vec::new(), missing_codes: vec![-9.0], ordinal, reverse }
    }

    /// Coded and plain columns of the same answers give bit-identical summaries after the same
    /// recoding (ordinal, continuous with percentiles, reversed, with missing codes).
    #[test]
    fn coded_and_plain_columns_summarise_identically() {
        let path = std::path::Path::new("w.csv");
        let data: [(&str, Vec<f64>); 3] = [
            ("o", (0..400).map(|i| if i % 9 == 0 { -9.0 } else { f64::from((i * 7) % 5 + 1) }).collect()),
            ("c", (0..400).map(|i| if i % 11 == 0 { f64::NAN } else { f64::from((i * 13) % 40) / 3.0 }).collect()),
            ("r", (0..400).map(|i| if i % 10 == 0 { -9.0 } else { f64::from((i * 3) % 7 + 1) }).collect()),
        ];
        for ordinal in [OrdinalSpec::Auto, OrdinalSpec::Items(vec!["o".into()])] {
            let load = step(ordinal);
            for (name, values) in &data {
                let mut plain = Column::Values(values.clone());
                let mut coded = crate::data::table::compact(values.clone());
                assert!(matches!(coded, Column::Codes { .. }));
                load.recode(name, &mut plain, path).unwrap();
                load.recode(name, &mut coded, path).unwrap();
                let a = load.summarise(name, "k", &plain).unwrap();
                let b = load.summarise(name, "k", &coded).unwrap();
                assert_eq!(a, b, "{name}");
                assert_eq!(a.categories, b.categories);
                assert_eq!(a.mean.map(f64::to_bits), b.mean.map(f64::to_bits));
            }
        }
        // Out of the reverse range: the same first row is named.
        let values = vec![2.0, 3.0, 9.0, 1.0, 8.0];
        let load = step(OrdinalSpec::Auto);
        let e1 = load.recode("r", &mut Column::Values(values.clone()), path).unwrap_err().to_string();
        let e2 = load.recode("r", &mut crate::data::table::compact(values), path).unwrap_err().to_string();
        assert_eq!(e1, e2);
        assert!(e1.contains("value 9 outside its reverse range [1, 7] (`w.csv` row 3)"), "{e1}");
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
