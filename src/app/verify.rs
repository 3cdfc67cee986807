//! `construe verify REPORT_DIR`: recompute every step of a report version from its recorded
//! inputs with the cache off, rebuild the manifest it should have, render every published file
//! again, and compare all of it with what the folder holds. Central type: `Verification`.
//! Any changed input, step, manifest field or published file fails the check.

use std::path::{Path, PathBuf};

use serde_json::Value;

use super::AppError;
use super::context::report_context;
use super::run::{report_settings, seeds, spec_info};
use crate::fsguard::{MAX_TEXT_BYTES, read_regular, read_regular_text};
use crate::pipeline::PipelineError;
use crate::pipeline::cache::Cache;
use crate::pipeline::chain::NoProgress;
use crate::pipeline::executor::{Execution, execute};
use crate::pipeline::key::Key;
use crate::pipeline::manifest::{MANIFEST_FORMAT, Manifest};
use crate::pipeline::plan::Plan;
use crate::report::{Results, complete_context, read_results, render_files, versions};
use crate::spec::{Diagnostic, Report, SpecFile};

/// One line of the verification: a step, an input file, a manifest field or a published file,
/// and whether it matched.
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

fn check(checks: &mut Vec<Check>, what: impl Into<String>, ok: bool, detail: impl Into<String>) {
    checks.push(Check { what: what.into(), ok, detail: detail.into() });
}

/// Reads and parses the manifest of a version folder (exit 1 when the folder is not a version).
fn read_manifest(report_dir: &Path) -> Result<Manifest, AppError> {
    let hint = "hint: name a version folder such as `reports/<title>/v1`";
    match std::fs::metadata(report_dir) {
        Err(_) => return Err(invalid(format!("`{}` does not exist\n  {hint}", report_dir.display()))),
        Ok(m) if !m.is_dir() => {
            return Err(invalid(format!(
                "`{}` is a file, not a report version folder\n  {hint}",
                report_dir.display()
            )));
        }
        Ok(_) => {}
    }
    let path = report_dir.join("manifest.json");
    let text = read_regular_text(&path, MAX_TEXT_BYTES).map_err(|source| match source.kind() {
        std::io::ErrorKind::NotFound => invalid(format!(
            "`{}` has no manifest.json, so it is not a construe report version\n  {hint}",
            report_dir.display()
        )),
        std::io::ErrorKind::InvalidInput | std::io::ErrorKind::InvalidData => {
            invalid(format!("cannot read `{}`: {source}", path.display()))
        }
        _ => AppError::Pipeline(PipelineError::Io { action: "read manifest", path: path.clone(), source }),
    })?;
    let manifest: Manifest = serde_json::from_str(&text)
        .map_err(|e| invalid(format!("`{}` is not a construe manifest: {e}", path.display())))?;
    if manifest.manifest_format != MANIFEST_FORMAT {
        return Err(invalid(format!(
            "`{}` has manifest format {}, and this construe verifies format {MANIFEST_FORMAT}\n  hint: run `construe run` on the spec again to write a version that can be verified",
            path.display(),
            manifest.manifest_format
        )));
    }
    Ok(manifest)
}

pub fn verify(report_dir: &Path) -> Result<Verification, AppError> {
    if let Some(study) = crate::report::power::read_study_manifest(report_dir) {
        return Ok(super::power::verify_study(report_dir, &study)?);
    }
    let manifest = read_manifest(report_dir)?;
    let spec_path = locate_spec(report_dir, &manifest)
        .ok_or_else(|| invalid(format!("cannot find the spec `{}` recorded in the manifest", manifest.spec.path)))?;
    let spec = SpecFile::read(&spec_path).map_err(AppError::Invalid)?;
    if !spec.early.is_empty() {
        return Err(AppError::Invalid(spec.diagnose(spec.early.clone())));
    }
    let mut checks = Vec::new();
    let tool = env!("CARGO_PKG_VERSION");
    check(
        &mut checks,
        "tool",
        manifest.tool.version == tool,
        if manifest.tool.version == tool {
            format!("construe {tool}")
        } else {
            format!("written by construe {}, verified with {tool}: results may differ by design", manifest.tool.version)
        },
    );
    let info = spec_info(&spec);
    let same_spec = info.content_hash == manifest.spec.content_hash;
    check(
        &mut checks,
        format!("spec {}", spec_path.display()),
        same_spec,
        if same_spec { "unchanged" } else { "changed since this version" },
    );
    let plan = Plan::new(&spec)?;
    for recorded in &manifest.inputs {
        let now = plan.files.iter().find(|f| f.wave == recorded.wave && f.shown == recorded.path);
        let (ok, detail) = match now {
            Some(f) if f.hash == recorded.blake3 && f.size == recorded.size => (true, "unchanged".to_string()),
            Some(f) if f.hash == recorded.blake3 => {
                (false, format!("{} bytes recorded, {} now", recorded.size, f.size))
            }
            Some(f) => {
                (false, format!("changed (BLAKE3 {} now, {} recorded)", f.hash.short(), recorded.blake3.short()))
            }
            None => (false, "no longer in the spec".to_string()),
        };
        check(&mut checks, format!("input {}", recorded.path), ok, detail);
    }
    for f in &plan.files {
        if !manifest.inputs.iter().any(|r| r.wave == f.wave && r.path == f.shown) {
            check(&mut checks, format!("input {}", f.shown), false, "in the spec but not in the manifest");
        }
    }
    let mut execution = execute(&plan, &Cache::disabled(), &NoProgress, |_| {})?;
    // The manifest this run should have written, but for times, cache hits and the files.
    let mut expected = Manifest::new(info, &plan, &execution.outcomes, seeds(&spec), report_settings(&spec));
    expected.tool.version = manifest.tool.version.clone();
    check_steps(&mut checks, &manifest, &expected);
    let fingerprint = crate::pipeline::manifest::fingerprint(&expected, &report_settings(&spec));
    check(
        &mut checks,
        "manifest fingerprint",
        manifest.fingerprint == fingerprint,
        if manifest.fingerprint == fingerprint {
            format!("{} recomputed", fingerprint.short())
        } else {
            format!("{} recomputed, {} recorded", fingerprint.short(), manifest.fingerprint.short())
        },
    );
    let seeds_ok = expected.seeds == manifest.seeds;
    check(&mut checks, "manifest seeds", seeds_ok, if seeds_ok { "as in the spec" } else { "differ from the spec" });
    let folder_version = report_dir
        .file_name()
        .and_then(|n| n.to_str())
        .and_then(|n| n.strip_prefix('v'))
        .and_then(|n| n.parse::<u32>().ok());
    let version_ok = folder_version.is_none_or(|v| v == manifest.report_version);
    check(
        &mut checks,
        "manifest version",
        version_ok,
        format!(
            "v{} recorded{}",
            manifest.report_version,
            if version_ok { "" } else { ", in another version's folder" }
        ),
    );
    // Re-render every published file from the recomputed results, with the recorded times and
    // cache hits (they appear in the report but cannot be recomputed).
    for o in &mut execution.outcomes {
        if let Some(r) = manifest.steps.iter().find(|s| s.kind == o.kind.name()) {
            o.cached = r.cached;
            o.seconds = r.seconds;
        }
    }
    check_files(&mut checks, report_dir, &manifest, &spec, &execution);
    Ok(Verification { checks })
}

/// Every step in the manifest against its recomputation: order, version, key, parameters,
/// inputs and artifact hash (the key alone would not show an edited parameter list, since
/// nothing else recomputes it from the manifest).
fn check_steps(checks: &mut Vec<Check>, manifest: &Manifest, expected: &Manifest) {
    for (i, recorded) in manifest.steps.iter().enumerate() {
        let now = expected.steps.iter().position(|o| o.kind == recorded.kind);
        let (ok, detail) = match now.map(|p| (p, &expected.steps[p])) {
            None => (false, "step no longer in the plan".to_string()),
            Some((p, _)) if p != i => (false, format!("recorded as step {}, planned as step {}", i + 1, p + 1)),
            Some((_, o)) if o.version != recorded.version => {
                (false, format!("algorithm version {} now, {} recorded", o.version, recorded.version))
            }
            Some((_, o)) if o.key != recorded.key => {
                (false, format!("key {} now, {} recorded", o.key.short(), recorded.key.short()))
            }
            Some((_, o)) if o.params != recorded.params => (false, "parameters differ from the spec's".to_string()),
            Some((_, o)) if o.inputs != recorded.inputs => (false, "input keys differ from the plan's".to_string()),
            Some((_, o)) if o.artifact != recorded.artifact => {
                (false, format!("artifact {} recomputed, {} recorded", o.artifact.short(), recorded.artifact.short()))
            }
            Some((_, o)) => (true, format!("artifact {} reproduced", o.artifact.short())),
        };
        check(checks, format!("step {}", recorded.kind), ok, detail);
    }
    for o in &expected.steps {
        if !manifest.steps.iter().any(|s| s.kind == o.kind) {
            check(checks, format!("step {}", o.kind), false, "in the plan but not in the manifest");
        }
    }
}

/// Every published file: results.json and each report format rendered again must equal the
/// folder's bytes; every file the manifest lists must be there with its hash.
fn check_files(
    checks: &mut Vec<Check>,
    report_dir: &Path,
    manifest: &Manifest,
    spec: &SpecFile,
    execution: &Execution,
) {
    let typed = Results::of(&execution.artifacts);
    let results = typed.to_value();
    let previous = match &manifest.previous {
        None => Ok(None),
        Some(p) => {
            let dir = report_dir.parent().unwrap_or(Path::new(".")).join(format!("v{}", p.version));
            match (versions::read_manifest(&dir), read_results(&dir)) {
                (Ok(m), Some(r)) if m.fingerprint == p.fingerprint => Ok(Some((p.version, r, m))),
                (Ok(_), Some(_)) => Err(format!("v{}, which this report compares itself with, has changed", p.version)),
                _ => Err(format!("v{}, which this report compares itself with, is missing or damaged", p.version)),
            }
        }
    };
    let rendered = previous.clone().and_then(|previous| {
        let mut context = report_context(spec, execution, &results);
        complete_context(&mut context, manifest, &results, previous.as_ref().map(|(n, r, m)| (*n, r, m)));
        render_files(&typed, &context, &spec.spec.report.formats).map_err(|e| e.to_string())
    });
    let mut names: Vec<&str> = vec!["results.json"];
    for name in manifest.files.keys() {
        if !names.contains(&name.as_str()) {
            names.push(name);
        }
    }
    if let Ok(files) = &rendered {
        for (name, _) in files {
            if !names.contains(name) {
                names.push(name);
            }
        }
    }
    for name in names {
        let path = report_dir.join(name);
        let on_disk = read_regular(&path, 1 << 30);
        let recorded = manifest.files.get(name);
        let (ok, detail) = match (&on_disk, recorded) {
            (Err(e), _) if e.kind() == std::io::ErrorKind::NotFound => (false, "missing".to_string()),
            (Err(e), _) => (false, format!("cannot be read: {e}")),
            (Ok(_), None) => (false, "not listed in the manifest".to_string()),
            (Ok(bytes), Some(hash)) if Key::of_bytes(bytes) != *hash => {
                (false, "edited since it was written (its hash differs from the manifest)".to_string())
            }
            (Ok(bytes), Some(_)) => match &rendered {
                Ok(files) => match files.iter().find(|(n, _)| *n == name) {
                    Some((_, text)) if text.as_bytes() == bytes.as_slice() => {
                        (true, "rendered again, identical".to_string())
                    }
                    Some(_) => (false, "differs from the file rendered from the recomputed results".to_string()),
                    None => (false, "the spec no longer asks for this file".to_string()),
                },
                Err(why) if name == "results.json" => {
                    if pretty_bytes(&results) == *bytes {
                        (true, "recomputed, identical".to_string())
                    } else {
                        (false, format!("differs from the recomputed results ({why})"))
                    }
                }
                Err(why) => (false, format!("cannot be rendered again: {why}")),
            },
        };
        check(checks, format!("file {name}"), ok, detail);
    }
}

fn pretty_bytes(v: &Value) -> Vec<u8> {
    crate::report::pretty(v).into_bytes()
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
