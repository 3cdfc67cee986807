//! `construe verify REPORT_DIR`: recompute every step of a report version from its recorded
//! inputs with the cache off, and compare each key and artifact hash with the manifest.
//! Central type: `Verification`. Any changed input file or mismatching step fails the check.

use std::path::{Path, PathBuf};

use super::AppError;
use crate::pipeline::PipelineError;
use crate::pipeline::cache::Cache;
use crate::pipeline::executor::execute;
use crate::pipeline::key::Key;
use crate::pipeline::manifest::Manifest;
use crate::pipeline::plan::Plan;
use crate::spec::{Diagnostic, Report, SpecFile};

/// One line of the verification: a step or an input file, and whether it matched.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Check {
    pub what: String,
    pub ok: bool,
    pub detail: String,
}

pub struct Verification {
    pub checks: Vec<Check>,
}

impl Verification {
    pub fn passed(&self) -> bool {
        self.checks.iter().all(|c| c.ok)
    }
}

fn invalid(message: String) -> AppError {
    let mut r = Report::default();
    r.push(Diagnostic::error(message));
    AppError::Invalid(r)
}

/// Where the spec of a manifest is: first relative to the report folder, then as recorded.
fn locate_spec(report_dir: &Path, manifest: &Manifest) -> Option<PathBuf> {
    let candidates = [
        manifest.spec.from_report.as_ref().map(|r| crate::spec::lexical_clean(&report_dir.join(r))),
        Some(PathBuf::from(&manifest.spec.path)),
    ];
    candidates.into_iter().flatten().find(|p| p.exists())
}

pub fn verify(report_dir: &Path) -> Result<Verification, AppError> {
    let manifest_path = report_dir.join("manifest.json");
    let text = std::fs::read_to_string(&manifest_path).map_err(|source| PipelineError::Io {
        action: "read manifest",
        path: manifest_path.clone(),
        source,
    })?;
    let manifest: Manifest = serde_json::from_str(&text)
        .map_err(|e| invalid(format!("`{}` is not a construe manifest: {e}", manifest_path.display())))?;
    let spec_path = locate_spec(report_dir, &manifest)
        .ok_or_else(|| invalid(format!("cannot find the spec `{}` recorded in the manifest", manifest.spec.path)))?;
    let spec = SpecFile::read(&spec_path).map_err(AppError::Invalid)?;
    if !spec.early.is_empty() {
        return Err(AppError::Invalid(spec.diagnose(spec.early.clone())));
    }
    let mut checks = Vec::new();
    let content = Key::of_json(&serde_json::to_value(&spec.spec).unwrap_or_default());
    checks.push(Check {
        what: format!("spec {}", spec_path.display()),
        ok: content == manifest.spec.content_hash,
        detail: if content == manifest.spec.content_hash {
            "unchanged".into()
        } else {
            "changed since this version".into()
        },
    });
    let plan = Plan::new(&spec)?;
    for recorded in &manifest.inputs {
        let now = plan.files.iter().find(|f| f.wave == recorded.wave && f.shown == recorded.path);
        let (ok, detail) = match now {
            Some(f) if f.hash == recorded.blake3 => (true, "unchanged".to_string()),
            Some(f) => {
                (false, format!("changed (BLAKE3 {} now, {} recorded)", f.hash.short(), recorded.blake3.short()))
            }
            None => (false, "no longer in the spec".to_string()),
        };
        checks.push(Check { what: format!("input {}", recorded.path), ok, detail });
    }
    let execution = execute(&plan, &Cache::disabled(), |_| {})?;
    for recorded in &manifest.steps {
        let now = execution.outcomes.iter().find(|o| o.kind.name() == recorded.kind);
        let (ok, detail) = match now {
            Some(o) if o.key != recorded.key => {
                (false, format!("key {} now, {} recorded", o.key.short(), recorded.key.short()))
            }
            Some(o) if o.artifact_hash != recorded.artifact => (
                false,
                format!("artifact {} recomputed, {} recorded", o.artifact_hash.short(), recorded.artifact.short()),
            ),
            Some(o) => (true, format!("artifact {} reproduced", o.artifact_hash.short())),
            None => (false, "step no longer in the plan".to_string()),
        };
        checks.push(Check { what: format!("step {}", recorded.kind), ok, detail });
    }
    Ok(Verification { checks })
}

/// A path from `from_dir` to `to`, both made absolute (lexically: no symlink resolution).
pub fn relative_path(from_dir: &Path, to: &Path) -> Option<PathBuf> {
    use std::ffi::OsString;
    use std::path::Component;
    let norm = |p: &Path| -> Option<Vec<OsString>> {
        let mut out = Vec::new();
        for c in std::path::absolute(p).ok()?.components() {
            match c {
                Component::Normal(s) => out.push(s.to_os_string()),
                Component::ParentDir => {
                    out.pop();
                }
                Component::CurDir | Component::RootDir => {}
                Component::Prefix(_) => return None,
            }
        }
        Some(out)
    };
    let (a, b) = (norm(from_dir)?, norm(to)?);
    let common = a.iter().zip(&b).take_while(|(x, y)| x == y).count();
    let mut rel = PathBuf::new();
    for _ in common..a.len() {
        rel.push("..");
    }
    for c in &b[common..] {
        rel.push(c);
    }
    Some(rel)
}

#[cfg(test)]
mod tests {
    use super::relative_path;
    use std::path::{Path, PathBuf};

    #[test]
    fn relative_paths() {
        assert_eq!(relative_path(Path::new("/a/b/c"), Path::new("/a/x/s.yaml")), Some(PathBuf::from("../../x/s.yaml")));
        assert_eq!(relative_path(Path::new("/a"), Path::new("/a/s.yaml")), Some(PathBuf::from("s.yaml")));
    }
}
