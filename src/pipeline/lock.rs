//! One run at a time per report folder: an advisory lock (flock(2) through `File::try_lock`) on
//! `<report folder>/.construe.lock`, held for the whole run. Central type: `RunLock`.
//! The lock file lives in the report folder itself, found through its canonical path, so every
//! spelling of the folder (relative, absolute, through a symbolic link) meets the same lock,
//! and it belongs to the user who runs the analysis: no shared temp folder for others to own or
//! fill (issue 13). The file is removed on release; the lock itself dies with the process.

use std::fs::{File, OpenOptions, TryLockError};
use std::path::{Path, PathBuf};

use super::PipelineError;

/// The lock file's name inside the report folder (`report::versions` ignores it: it is neither
/// a `v<N>` nor a `.partial-v*` folder).
pub const LOCK_FILE: &str = ".construe.lock";

/// How often to retry when the previous holder removed the file between our open and our lock.
const MAX_ATTEMPTS: usize = 8;

#[derive(Debug)]
pub struct RunLock {
    file: File,
    path: PathBuf,
    /// Folders `acquire` created (innermost first), removed on release if still empty, so a run
    /// that fails before publishing leaves no empty report folder behind.
    created: Vec<PathBuf>,
}

impl RunLock {
    /// Takes the lock for `target` (a report folder, created if missing) or fails at once if
    /// another run holds it.
    pub fn acquire(target: &Path) -> Result<RunLock, PipelineError> {
        let created: Vec<PathBuf> = target
            .ancestors()
            .take_while(|p| !p.as_os_str().is_empty() && !p.exists())
            .map(Path::to_path_buf)
            .collect();
        std::fs::create_dir_all(target).map_err(|source| PipelineError::Io {
            action: "create report folder",
            path: target.to_path_buf(),
            source,
        })?;
        let canonical = std::fs::canonicalize(target).map_err(|source| PipelineError::Io {
            action: "resolve report folder",
            path: target.to_path_buf(),
            source,
        })?;
        let path = canonical.join(LOCK_FILE);
        for _ in 0..MAX_ATTEMPTS {
            let file = open_lock_file(&path).map_err(|source| PipelineError::Io {
                action: "open lock file",
                path: path.clone(),
                source,
            })?;
            match file.try_lock() {
                Ok(()) => {}
                Err(TryLockError::WouldBlock) => {
                    return Err(PipelineError::Busy { target: canonical });
                }
                Err(TryLockError::Error(source)) => {
                    return Err(PipelineError::Io { action: "lock", path, source });
                }
            }
            // The previous holder removes the file while still holding it: if that happened
            // between our open and our lock, we hold a file nobody else can find; start over.
            if same_file(&file, &path) {
                return Ok(RunLock { file, path, created });
            }
        }
        Err(PipelineError::Busy { target: canonical })
    }

    /// The lock file (inside the report folder).
    pub fn path(&self) -> &Path {
        &self.path
    }
}

impl Drop for RunLock {
    fn drop(&mut self) {
        // Removed while still locked, so a run that opened this file before the removal sees
        // that it is gone and retries with a fresh one.
        let _ = std::fs::remove_file(&self.path);
        let _ = self.file.unlock();
        for dir in &self.created {
            // Fails, as it should, once the folder holds anything.
            if std::fs::remove_dir(dir).is_err() {
                break;
            }
        }
    }
}

/// Opens (creating) the lock file: never through a symbolic link, and without blocking should
/// something other than a regular file stand there (opening a FIFO for writing waits for a
/// reader; with `O_NONBLOCK` it fails at once).
fn open_lock_file(path: &Path) -> std::io::Result<File> {
    let mut options = OpenOptions::new();
    options.create(true).truncate(false).write(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        // Readable by others, so a file left by another user's killed run can still be
        // locked (flock needs only a read handle) instead of failing every later run.
        options.custom_flags(libc::O_NOFOLLOW | libc::O_NONBLOCK).mode(0o644);
    }
    let file = match options.open(path) {
        Err(e) if e.kind() == std::io::ErrorKind::PermissionDenied => {
            let mut read_only = OpenOptions::new();
            read_only.read(true);
            #[cfg(unix)]
            {
                use std::os::unix::fs::OpenOptionsExt;
                read_only.custom_flags(libc::O_NOFOLLOW | libc::O_NONBLOCK);
            }
            read_only.open(path)?
        }
        other => other?,
    };
    if !file.metadata()?.is_file() {
        return Err(std::io::Error::new(std::io::ErrorKind::InvalidInput, "it is not a regular file"));
    }
    Ok(file)
}

#[cfg(unix)]
fn same_file(file: &File, path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (file.metadata(), std::fs::symlink_metadata(path)) {
        (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
        _ => false,
    }
}

#[cfg(not(unix))]
fn same_file(_file: &File, path: &Path) -> bool {
    path.exists()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn busy(result: Result<RunLock, PipelineError>) -> bool {
        matches!(result, Err(PipelineError::Busy { .. }))
    }

    #[test]
    fn every_spelling_of_a_folder_meets_the_same_lock() {
        let dir = tempfile::tempdir().unwrap();
        let report = dir.path().join("reports").join("panel");
        std::fs::create_dir_all(dir.path().join("other")).unwrap();
        let held = RunLock::acquire(&report).unwrap();
        assert_eq!(held.path(), std::fs::canonicalize(&report).unwrap().join(LOCK_FILE));
        assert!(busy(RunLock::acquire(&dir.path().join("other/../reports/./panel"))));
        #[cfg(unix)]
        {
            let link = dir.path().join("link");
            std::os::unix::fs::symlink(dir.path().join("reports"), &link).unwrap();
            assert!(busy(RunLock::acquire(&link.join("panel"))));
        }
        drop(held);
        assert!(!report.join(LOCK_FILE).exists(), "released locks leave no file");
        let again = RunLock::acquire(&dir.path().join("other/../reports/panel")).unwrap();
        drop(again);
    }

    #[test]
    fn a_failed_run_leaves_no_empty_report_folder() {
        let dir = tempfile::tempdir().unwrap();
        let report = dir.path().join("reports").join("panel");
        drop(RunLock::acquire(&report).unwrap());
        assert!(!dir.path().join("reports").exists());
        // A folder with content stays.
        let lock = RunLock::acquire(&report).unwrap();
        std::fs::create_dir(report.join("v1")).unwrap();
        drop(lock);
        assert!(report.join("v1").is_dir());
        assert!(!report.join(LOCK_FILE).exists());
    }

    #[test]
    fn a_stale_lock_file_from_a_killed_run_is_reused() {
        let dir = tempfile::tempdir().unwrap();
        let report = dir.path().join("panel");
        std::fs::create_dir_all(&report).unwrap();
        // A file without a holder, as a killed run leaves it (the kernel released its lock).
        std::fs::write(report.join(LOCK_FILE), b"").unwrap();
        let lock = RunLock::acquire(&report).unwrap();
        drop(lock);
        assert!(!report.join(LOCK_FILE).exists());
    }

    #[cfg(unix)]
    #[test]
    fn a_fifo_in_place_of_the_lock_file_fails_without_blocking() {
        let dir = tempfile::tempdir().unwrap();
        let fifo = dir.path().join(LOCK_FILE);
        assert!(std::process::Command::new("mkfifo").arg(&fifo).status().unwrap().success());
        assert!(matches!(RunLock::acquire(dir.path()), Err(PipelineError::Io { action: "open lock file", .. })));
    }
}
