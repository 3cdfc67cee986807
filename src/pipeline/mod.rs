//! The spine: spec -> plan (steps with content keys) -> cached execution -> manifest.
//! Knows no statistics: steps are opaque `Step` values; only keys, bytes and timings pass here.
//! Invariant: an artifact reaches the cache only whole (temp file + rename) and is trusted
//! only after its hash checks.

pub mod cache;
pub mod chain;
pub mod executor;
pub mod key;
pub mod lock;
pub mod manifest;
pub mod plan;

use std::path::PathBuf;

use thiserror::Error;

use crate::steps::StepError;

#[derive(Debug, Error)]
pub enum PipelineError {
    #[error("cannot {action} `{}`\n  caused by: {source}", path.display())]
    Io { action: &'static str, path: PathBuf, source: std::io::Error },
    #[error(transparent)]
    Step(#[from] StepError),
    #[error("another `construe run` is writing `{}` right now; wait for it to finish, then run again", target.display())]
    Busy { target: PathBuf },
    #[error("internal error: {0}")]
    Internal(String),
}
