//! `construe simulate MODEL.yaml --out FILE`: draw survey data from a declared latent model
//! (format in docs/simulate.md) and write it as CSV or Parquet, atomically.
//! The numerics live in `stats::simulate`; this file parses, overrides and writes.

use std::path::{Path, PathBuf};

use polars::prelude::*;
use thiserror::Error;

use super::Exit;
use crate::data::FileKind;
use crate::spec::positions::Position;
use crate::spec::{Diagnostic, Report};
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
}

impl SimulateError {
    pub fn exit(&self) -> Exit {
        match self {
            SimulateError::Write { .. } => Exit::Failed,
            _ => Exit::Invalid,
        }
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
    let table = model.draw(req.n.unwrap_or(model.n), req.seed.unwrap_or(model.seed)).map_err(invalid)?;
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
