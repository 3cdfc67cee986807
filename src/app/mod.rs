//! What each command does, in library form so tests and benches call the same code as the CLI.
//! Central type: `AppError`, which knows its exit code. Nothing here parses arguments or
//! prints: progress goes through a caller-supplied `Log`.

pub mod check;
pub mod context;
pub mod diff;
pub mod findings;
pub mod findings_invariance;
pub mod lints;
pub mod pag_view;
pub mod plan;
pub mod power;
pub mod run;
pub mod schema;
pub mod shard;
pub mod simulate;
pub mod verify;

use thiserror::Error;

use crate::data::DataError;
use crate::pipeline::PipelineError;
use crate::report::ReportError;
use crate::spec::Report;
use crate::steps::StepError;

/// Exit codes, defined once (the README has the same table).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exit {
    Ok = 0,
    /// The command line, the spec or the data is invalid, or another run holds the lock
    /// (a bare `construe` is a usage error too: it prints the help and exits 1).
    Invalid = 1,
    /// The analysis failed at run time (I/O, a numerical failure).
    Failed = 2,
    /// A bug in construe.
    Bug = 3,
}

#[derive(Debug, Error)]
pub enum AppError {
    #[error("{0}")]
    Invalid(Report),
    #[error(transparent)]
    Pipeline(#[from] PipelineError),
    #[error(transparent)]
    Report(#[from] ReportError),
    #[error(transparent)]
    Simulate(#[from] simulate::SimulateError),
    #[error(transparent)]
    Power(#[from] power::PowerError),
}

impl AppError {
    pub fn exit(&self) -> Exit {
        match self {
            AppError::Invalid(_) => Exit::Invalid,
            AppError::Pipeline(PipelineError::Busy { .. }) => Exit::Invalid,
            AppError::Pipeline(PipelineError::Step(e)) if e.is_input_problem() => Exit::Invalid,
            AppError::Pipeline(PipelineError::Internal(_)) => Exit::Bug,
            AppError::Pipeline(_) | AppError::Report(_) => Exit::Failed,
            AppError::Simulate(e) => e.exit(),
            AppError::Power(e) => e.exit(),
        }
    }

    /// A hint line for the user, where one helps.
    pub fn hint(&self) -> Option<String> {
        match self {
            AppError::Pipeline(PipelineError::Step(StepError::Data(d))) => data_hint(d),
            AppError::Pipeline(PipelineError::Internal(_)) => {
                Some("this is a bug in construe; please report it".into())
            }
            AppError::Pipeline(PipelineError::Step(StepError::SamplingUnavailable { hint, .. })) => {
                Some((*hint).to_string())
            }
            AppError::Simulate(e) => e.hint(),
            AppError::Power(e) => e.hint(),
            _ => None,
        }
    }
}

fn data_hint(e: &DataError) -> Option<String> {
    match e {
        DataError::NonNumeric { .. } => {
            Some("fix the value, leave the cell empty, or list its code under `data.missing_codes`".into())
        }
        DataError::ConstantItem { .. } => {
            Some("remove the item from its construct; a constant answer cannot indicate anything".into())
        }
        DataError::OutsideReverseRange { .. } => {
            Some("check the `[lowest, highest]` range under `data.reverse`, or declare the code as missing".into())
        }
        DataError::Overflow { .. } => {
            Some("rescale the item in the data file (for example, divide it by a power of ten)".into())
        }
        DataError::NonFinite { .. } => Some("write a finite number, or leave the value missing".into()),
        DataError::NotUtf8 { .. } | DataError::HeaderNotUtf8 { .. } => Some("save the file as UTF-8 text".into()),
        DataError::FieldCount { .. } => {
            Some("check the separators and quotes on that line; a field with a comma must be in double quotes".into())
        }
        DataError::DuplicateColumn { .. } => Some("rename or remove one of the two columns".into()),
        DataError::Matrix { problem, .. } => problem.help(),
        _ => None,
    }
}

/// Where progress lines go (stderr in the CLI, a buffer in tests).
pub trait Log {
    fn line(&mut self, text: &str);
    fn warn(&mut self, text: &str);
    /// Where long steps report their progress (the CLI draws a bar on a terminal).
    fn progress(&self) -> Box<dyn crate::pipeline::chain::Progress> {
        Box::new(crate::pipeline::chain::NoProgress)
    }
}

/// A log that keeps lines in memory.
#[derive(Debug, Default)]
pub struct MemoryLog {
    pub lines: Vec<String>,
}

impl Log for MemoryLog {
    fn line(&mut self, text: &str) {
        self.lines.push(text.to_string());
    }
    fn warn(&mut self, text: &str) {
        self.lines.push(format!("warning: {text}"));
    }
}
