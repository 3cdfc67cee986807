//! `construe simulate MODEL.yaml --out FILE`: draw survey data from a declared latent model
//! (format in docs/simulate.md) and write it as CSV or Parquet, atomically.
//! The numerics live in `stats::simulate`; this file parses, overrides and writes.

use std::path::{Path, PathBuf};

use polars::prelude::*;
use thiserror::Error;

use super::Exit;
use crate::data::FileKind;
use crate::spec::positions::{Position, Positions};
use crate::spec::{Diagnostic, Report, SpecProblem};
use construe_stats::StatsError;
use construe_stats::simulate::{ConstantValue, SimulatedTable, SimulationModel};

#[derive(Debug, Error)]
pub enum SimulateError {
    #[error("cannot read model file `{}`\n  caused by: {source}", path.display())]
    Read { path: PathBuf, source: std::io::Error },
    #[error("{0}")]
    Model(Report),
    #[error("model `{}` is not valid: {source}", path.display())]
    Invalid { path: PathBuf, source: StatsError },
    #[error("`--set {name}=…` names no constant column of the model (constants: {known})")]
    UnknownConstant { name: String, known: String },
    #[error("`--set` expects NAME=VALUE, found `{0}`")]
    BadSet(String),
    #[error("output `{}` must end in .csv or .parquet", path.display())]
    Unsupported { path: PathBuf },
    #[error("cannot write `{}`\n  caused by: {reason}", path.display())]
    Write { path: PathBuf, reason: String },
    #[error("{what} = {n} is more rows than construe simulates (at most {max})")]
    TooManyRows { what: &'static str, n: usize, max: usize },
    #[error(
        "{n} rows of {columns} columns need about {needed_mb} MB of memory, but only {available_mb} MB are available"
    )]
    NotEnoughMemory { n: usize, columns: usize, needed_mb: u64, available_mb: u64 },
}

impl SimulateError {
    pub fn exit(&self) -> Exit {
        match self {
            SimulateError::Write { .. } => Exit::Failed,
            _ => Exit::Invalid,
        }
    }

    /// A hint line for the user, where one helps.
    pub fn hint(&self) -> Option<String> {
        match self {
            SimulateError::TooManyRows { .. } | SimulateError::NotEnoughMemory { .. } => Some(
                "draw fewer rows, or draw several files with different `--seed` values and list them as waves".into(),
            ),
            _ => None,
        }
    }
}

/// Most rows one `simulate` call draws.
pub const MAX_ROWS: usize = 10_000_000;

/// Bytes held per drawn cell at the peak: the value (`Option<f64>`, 16), its text or Parquet
/// copy, and the latent draws behind it; measured within a factor of two.
const BYTES_PER_CELL: u64 = 48;

/// Memory the system can still give, from `/proc/meminfo` (`None` where it is not known).
fn available_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Refuses a draw above `MAX_ROWS` rows or one that would not fit in memory.
fn check_size(what: &'static str, n: usize, columns: usize) -> Result<(), SimulateError> {
    if n > MAX_ROWS {
        return Err(SimulateError::TooManyRows { what, n, max: MAX_ROWS });
    }
    let needed = (n as u64).saturating_mul(columns.max(1) as u64).saturating_mul(BYTES_PER_CELL);
    match available_memory() {
        Some(available) if needed > available => {
            Err(SimulateError::NotEnoughMemory { n, columns, needed_mb: needed >> 20, available_mb: available >> 20 })
        }
        _ => Ok(()),
    }
}

/// What to draw: overrides of the model file's defaults.
pub struct SimulateRequest<'a> {
    pub model: &'a Path,
    pub out: &'a Path,
    pub n: Option<usize>,
    pub seed: Option<u64>,
    /// `NAME=VALUE` pairs replacing constant columns' values (e.g. `wave=autumn`).
    pub set: &'a [String],
}

/// Draws and writes; returns the number of rows written.
pub fn simulate(req: &SimulateRequest<'_>) -> Result<usize, SimulateError> {
    let source = crate::fsguard::read_regular_text(req.model, crate::fsguard::MAX_TEXT_BYTES)
        .map_err(|source| SimulateError::Read { path: req.model.into(), source: crate::fsguard::hinted(source) })?;
    let source = source.strip_prefix('\u{feff}').map(str::to_string).unwrap_or(source);
    duplicate_keys(req.model, &source)?;
    let mut model: SimulationModel = serde_yaml::from_str(&source).map_err(|e| {
        let position = e.location().map(|l| Position { line: l.line(), column: l.column() });
        let message = e.to_string();
        let message = message.rfind(" at line ").map_or(message.clone(), |i| message[..i].to_string());
        let mut r = Report::default();
        r.push(Diagnostic::error(message).at(req.model, &source, position, 1));
        SimulateError::Model(r)
    })?;
    for pair in req.set {
        let (name, value) = pair.split_once('=').ok_or_else(|| SimulateError::BadSet(pair.clone()))?;
        let known = model.constants.iter().map(|c| format!("`{}`", c.name)).collect::<Vec<_>>().join(", ");
        let constant = model
            .constants
            .iter_mut()
            .find(|c| c.name == name)
            .ok_or_else(|| SimulateError::UnknownConstant { name: name.into(), known })?;
        constant.value = match value.parse::<f64>() {
            Ok(v) => ConstantValue::Number(v),
            Err(_) => ConstantValue::Text(value.to_string()),
        };
    }
    let invalid = |source| SimulateError::Invalid { path: req.model.into(), source };
    model.validate().map_err(invalid)?;
    let (what, n) = match req.n {
        Some(n) => ("`--n`", n),
        None => ("the model's `n`", model.n),
    };
    let columns = usize::from(model.id.is_some()) + model.constants.len() + model.items.len() + model.observed.len();
    check_size(what, n, columns)?;
    let table = model.draw(n, req.seed.unwrap_or(model.seed)).map_err(invalid)?;
    let bytes = match FileKind::of(req.out) {
        Some(FileKind::Csv) => table.csv_string().into_bytes(),
        Some(FileKind::Parquet) => {
            parquet_bytes(&table).map_err(|e| SimulateError::Write { path: req.out.into(), reason: e.to_string() })?
        }
        None => return Err(SimulateError::Unsupported { path: req.out.into() }),
    };
    write_atomically(req.out, &bytes)
        .map_err(|e| SimulateError::Write { path: req.out.into(), reason: e.to_string() })?;
    Ok(table.rows())
}

/// A key written twice in one mapping of the model file is an error at its second copy (serde
/// would silently keep one of them).
fn duplicate_keys(path: &Path, source: &str) -> Result<(), SimulateError> {
    let Ok(positions) = Positions::index(source) else { return Ok(()) }; // serde reports syntax
    let mut report = Report::default();
    for d in positions.duplicates() {
        let problem =
            SpecProblem::DuplicateKey { parent: d.parent.clone(), key: d.key.clone(), first_line: d.first.line };
        let help = problem.help();
        report.push(
            Diagnostic::error(problem.to_string())
                .at(path, source, Some(d.second), d.key.chars().count())
                .with_help_opt(help),
        );
    }
    if report.diagnostics.is_empty() { Ok(()) } else { Err(SimulateError::Model(report)) }
}

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
