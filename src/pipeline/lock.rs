//! One run at a time per report folder: an advisory file lock held for the whole run, so two
//! concurrent runs of one spec cannot both number a version or interleave writes.
//! Central type: `RunLock` (released when dropped, also when the process dies).

use std::fs::{File, OpenOptions, TryLockError};
use std::path::{Path, PathBuf};

use super::PipelineError;

pub struct RunLock {
    _file: File,
}

impl RunLock {
    /// Takes the lock for `target` (a report folder) or fails at once if another run holds it.
    pub fn acquire(target: &Path) -> Result<RunLock, PipelineError> {
        let dir = std::env::temp_dir().join("construe-locks");
        std::fs::create_dir_all(&dir).map_err(|source| PipelineError::Io {
            action: "create lock folder",
            path: dir.clone(),
            source,
        })?;
        let absolute: PathBuf = std::path::absolute(target)
            .unwrap_or_else(|_| target.to_path_buf())
            .components()
            .filter(|c| !matches!(c, std::path::Component::CurDir))
            .collect();
        let path: PathBuf =
            dir.join(format!("{}.lock", &blake3::hash(absolute.to_string_lossy().as_bytes()).to_hex()[..24]));
        let file = OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|source| PipelineError::Io { action: "open lock file", path: path.clone(), source })?;
        match file.try_lock() {
            Ok(()) => Ok(RunLock { _file: file }),
            Err(TryLockError::WouldBlock) => Err(PipelineError::Busy { target: target.to_path_buf() }),
            Err(TryLockError::Error(source)) => Err(PipelineError::Io { action: "lock", path, source }),
        }
    }
}
