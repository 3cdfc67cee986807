//! `construe diff A B`: reads two version folders and prints their differences as Markdown.

use std::path::Path;

use serde_json::Value;

use super::AppError;
use crate::pipeline::PipelineError;
use crate::report::diff::{Changes, diff};

fn read_json(path: &Path) -> Result<Value, AppError> {
    // A FIFO or device in place of a version's file is refused, never waited on (issue 13).
    let text = crate::fsguard::read_regular_text(path, crate::fsguard::MAX_TEXT_BYTES).map_err(|source| {
        match crate::fsguard::hint(&source) {
            // Not an environment failure: the folder holds something that is not a report file.
            Some(hint) => {
                let mut r = crate::spec::Report::default();
                r.push(
                    crate::spec::Diagnostic::error(format!("cannot read `{}`\n  caused by: {source}", path.display()))
                        .with_help(hint),
                );
                AppError::Invalid(r)
            }
            None => AppError::from(PipelineError::Io { action: "read", path: path.to_path_buf(), source }),
        }
    })?;
    serde_json::from_str(&text).map_err(|e| {
        let mut r = crate::spec::Report::default();
        r.push(crate::spec::Diagnostic::error(format!("`{}` is not valid JSON: {e}", path.display())));
        AppError::Invalid(r)
    })
}

/// Compares two version folders.
pub fn diff_dirs(a: &Path, b: &Path) -> Result<Changes, AppError> {
    let (ra, ma) = (read_json(&a.join("results.json"))?, read_json(&a.join("manifest.json"))?);
    let (rb, mb) = (read_json(&b.join("results.json"))?, read_json(&b.join("manifest.json"))?);
    Ok(diff(&ra, &ma, &rb, &mb))
}
