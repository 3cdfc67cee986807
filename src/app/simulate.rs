//! `construe simulate MODEL.yaml --out FILE`: draw survey data from a declared latent model
//! (format in docs/simulate.md) and write it as CSV or Parquet, atomically.
//! The file format is `model`, drawing `stats::simulate`, writing `data::write`; this file
//! applies the overrides and bounds the size.

use std::path::{Path, PathBuf};

use thiserror::Error;

use super::Exit;
use crate::data::FileKind;
use crate::data::write::{WriteError, write_table};
use crate::model::types::ConstantValue;
use crate::model::{ModelFile, ModelFileError};
use crate::spec::Report;
use construe_stats::simulate::ModelError;

#[derive(Debug, Error)]
pub enum SimulateError {
    #[error("cannot read model file `{}`\n  caused by: {source}", path.display())]
    Read { path: PathBuf, source: std::io::Error },
    #[error("{0}")]
    Model(Report),
    #[error("cannot draw from model `{}`: {source}", path.display())]
    Draw { path: PathBuf, source: ModelError },
    #[error("`--set {name}=…` names no constant column of the model (constants: {known})")]
    UnknownConstant { name: String, known: String },
    #[error("`--set` expects NAME=VALUE, found `{0}`")]
    BadSet(String),
    #[error("`--set {name}={value}`: the id column's first value must be a whole number")]
    BadIdStart { name: String, value: String },
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
    let mut file = ModelFile::read(req.model).map_err(|e| match e {
        ModelFileError::Read { path, source } => SimulateError::Read { path, source },
        ModelFileError::Invalid(report) => SimulateError::Model(report),
    })?;
    for pair in req.set {
        let (name, value) = pair.split_once('=').ok_or_else(|| SimulateError::BadSet(pair.clone()))?;
        // The id column's name sets its first value (e.g. a second wave of other respondents).
        if let Some(id) = file.model.id.as_mut().filter(|id| id.name == name) {
            id.start =
                value.parse().map_err(|_| SimulateError::BadIdStart { name: name.into(), value: value.into() })?;
            continue;
        }
        let known = file.model.constants.iter().map(|c| format!("`{}`", c.name)).collect::<Vec<_>>().join(", ");
        let constant = file
            .model
            .constants
            .iter_mut()
            .find(|c| c.name == name)
            .ok_or_else(|| SimulateError::UnknownConstant { name: name.into(), known })?;
        constant.value = match value.parse::<f64>() {
            Ok(v) if v.is_finite() => ConstantValue::Number(v),
            _ => ConstantValue::Text(value.to_string()),
        };
    }
    let model = file.check().map_err(SimulateError::Model)?;
    let (what, n) = match req.n {
        Some(n) => ("`--n`", n),
        None => ("the model's `n`", file.model.n),
    };
    check_size(what, n, file.model.column_count())?;
    if FileKind::of(req.out).is_none() {
        return Err(SimulateError::Unsupported { path: req.out.into() });
    }
    let table = model
        .draw(n, req.seed.unwrap_or(file.model.seed))
        .map_err(|source| SimulateError::Draw { path: req.model.into(), source })?;
    write_table(&table, req.out).map_err(|e| match e {
        WriteError::Unsupported { path } => SimulateError::Unsupported { path },
        WriteError::Write { path, reason } => SimulateError::Write { path, reason },
    })?;
    Ok(table.rows())
}
