//! The spec: reading, parsing, validation and lints, turned into diagnostics with positions.
//! Central type: `SpecFile` (the parsed spec with its source text and node positions).
//! This module reads only the spec file itself and the truth model it names (`TruthModel`,
//! read and parsed once, here); data headers come in from the caller.

pub mod diagnostic;
pub mod positions;
pub mod problem;
pub mod schema;
pub mod types;
pub mod validate;
pub mod validate_invariance;

use std::path::{Path, PathBuf};

pub use diagnostic::{Diagnostic, Report, Severity};
pub use problem::{Finding, SpecProblem};
pub use types::Spec;

use positions::{Position, Positions};

/// A spec read from disk, parsed and type-checked, with what is needed to point at its nodes.
#[derive(Debug, Clone)]
pub struct SpecFile {
    pub path: PathBuf,
    pub source: String,
    pub positions: Positions,
    pub spec: Spec,
    /// Problems found while parsing that did not stop it (unknown keys, which are removed
    /// before type checking so that the semantic checks can still report everything else; a
    /// truth model that cannot be read or is not a valid model).
    pub early: Vec<Finding>,
    /// The `report.truth_model`, read and parsed once, when the spec names one that is valid.
    pub truth: Option<TruthModel>,
}

/// A spec's truth model: the population values of the model the data were drawn from, and
/// the BLAKE3 of the file's bytes (part of the report settings in the manifest).
#[derive(Debug, Clone)]
pub struct TruthModel {
    pub hash: crate::pipeline::key::Key,
    pub truth: construe_stats::simulate::Truth,
}

impl SpecFile {
    /// Reads and parses `path`. Syntax errors, unknown keys (all of them) and type errors come
    /// back as a `Report` that points into the file.
    pub fn read(path: &Path) -> Result<SpecFile, Report> {
        // A FIFO or device named as the spec is refused before a byte is read (issue 13).
        let source = crate::fsguard::read_regular_text(path, crate::fsguard::MAX_TEXT_BYTES).map_err(|e| {
            let mut r = Report::default();
            r.push(
                Diagnostic::error(format!("cannot read spec file `{}`\n  caused by: {e}", path.display()))
                    .with_help_opt(crate::fsguard::hint(&e).map(str::to_string)),
            );
            r
        })?;
        Self::parse(path, source)
    }

    /// Parses spec text as if read from `path` (tests use this).
    pub fn parse(path: &Path, source: String) -> Result<SpecFile, Report> {
        // A leading byte-order mark (some editors write one) is not part of the first key.
        let source = match source.strip_prefix('\u{feff}') {
            Some(rest) => rest.to_string(),
            None => source,
        };
        let positions = match Positions::index(&source) {
            Ok(p) => p,
            Err(e) => {
                let mut r = Report::default();
                r.push(Diagnostic::error(SpecProblem::Syntax { message: e.message }.to_string()).at(
                    path,
                    &source,
                    Some(e.position),
                    1,
                ));
                return Err(r);
            }
        };
        let unknown = schema::unknown_keys(&positions);
        if unknown.is_empty()
            && let Ok(spec) = serde_yaml::from_str::<Spec>(&source)
        {
            return Ok(SpecFile::finish(path, source, positions, spec, Vec::new()));
        }
        // Unknown keys and type errors: each is set aside and the rest type-checked again, so
        // one misspelled value does not hide the problems after it.
        let (spec, findings) = type_check_all(&source, &positions, unknown);
        match spec {
            Some(spec) => Ok(SpecFile::finish(path, source, positions, spec, findings)),
            None if findings.is_empty() => Err(first_type_error(path, &source)),
            None => Err(diagnose(path, &source, &positions, findings)),
        }
    }

    /// A parsed spec, with its truth model read (a problem with it joins `early`).
    fn finish(path: &Path, source: String, positions: Positions, spec: Spec, mut early: Vec<Finding>) -> SpecFile {
        let mut file = SpecFile { path: path.to_path_buf(), source, positions, spec, early: Vec::new(), truth: None };
        if let Some(written) = file.spec.report.truth_model.clone() {
            match load_truth(&written, &file.resolve(&written)) {
                Ok(truth) => file.truth = Some(truth),
                Err(problem) => early.push(Finding::value(problem, "report.truth_model")),
            }
        }
        file.early = early;
        file
    }

    /// A path from the spec, resolved relative to the spec's folder.
    pub fn resolve(&self, relative: &Path) -> PathBuf {
        match self.path.parent() {
            Some(p) if !p.as_os_str().is_empty() && !relative.is_absolute() => lexical_clean(&p.join(relative)),
            _ => relative.to_path_buf(),
        }
    }

    /// Turns findings into positioned diagnostics.
    pub fn diagnose(&self, findings: Vec<Finding>) -> Report {
        diagnose(&self.path, &self.source, &self.positions, findings)
    }
}

/// Reads the truth model at `path` (through `fsguard`: a FIFO or device is refused, never
/// waited on), checks it and computes its population values.
fn load_truth(written: &Path, path: &Path) -> Result<TruthModel, SpecProblem> {
    let bytes = crate::fsguard::read_regular(path, crate::fsguard::MAX_TEXT_BYTES).map_err(|e| {
        if e.kind() == std::io::ErrorKind::NotFound {
            SpecProblem::MissingTruthModel { path: written.to_path_buf() }
        } else {
            let hint = crate::fsguard::hint(&e).map(str::to_string);
            SpecProblem::UnreadableTruthModel { path: written.to_path_buf(), reason: e.to_string(), hint }
        }
    })?;
    let hash = crate::pipeline::key::Key::of_bytes(&bytes);
    let invalid = |report: Report| SpecProblem::InvalidTruthModel {
        path: written.to_path_buf(),
        first: report.diagnostics.first().map(|d| d.message.clone()).unwrap_or_default(),
        problems: report.error_count(),
    };
    let text = String::from_utf8(bytes).map_err(|_| SpecProblem::UnreadableTruthModel {
        path: written.to_path_buf(),
        reason: "the file is not UTF-8 text".into(),
        hint: None,
    })?;
    let file = crate::model::ModelFile::parse(path, text).map_err(invalid)?;
    let model = file.check().map_err(invalid)?;
    // `check` ran `truth` already, so this cannot fail; a failure is still reported, not unwrapped.
    let truth = model.truth().map_err(|e| SpecProblem::InvalidTruthModel {
        path: written.to_path_buf(),
        first: e.to_string(),
        problems: 1,
    })?;
    Ok(TruthModel { hash, truth })
}

/// Most type errors set aside before the rest is given up on.
const MAX_TYPE_ERRORS: usize = 50;

/// Type-checks `source` without its unknown keys, then, error by error, with each value that
/// fails to type-check (named by the key path that starts serde_yaml's message) set aside:
/// removed, or, where the spec needs the key, replaced by the first placeholder of another
/// type that lets the check move past it. Returns the spec that remains (if one does) and
/// every unknown key and type error found. Validation of the placeholders is not reported
/// (`check` drops findings under a set-aside path).
fn type_check_all(source: &str, positions: &Positions, unknown: Vec<Finding>) -> (Option<Spec>, Vec<Finding>) {
    use serde_yaml::Value;
    let Ok(mut value) = serde_yaml::from_str::<Value>(source) else { return (None, unknown) };
    for f in &unknown {
        remove_path(&mut value, &f.path);
    }
    let mut findings = unknown;
    let attempt = |value: &Value| -> Result<Spec, (Option<String>, String)> {
        // Re-serialising lets serde_yaml name the failing value's path in its message.
        let text = serde_yaml::to_string(value).map_err(|e| (None, e.to_string()))?;
        serde_yaml::from_str::<Spec>(&text).map_err(|e| {
            let message = strip_location(&e.to_string());
            let at = message.split_once(": ").map(|(p, _)| p.to_string()).filter(|p| positions.value(p).is_some());
            (at, message)
        })
    };
    let placeholders = [
        Value::String(String::new()),
        Value::Number(0.into()),
        Value::Bool(false),
        Value::Sequence(Vec::new()),
        Value::Mapping(serde_yaml::Mapping::new()),
    ];
    let mut current = attempt(&value);
    for _ in 0..MAX_TYPE_ERRORS {
        let (at, message) = match current {
            Ok(spec) => return (Some(spec), findings),
            Err(e) => e,
        };
        // A missing key after something was set aside is that removal's doing, not the user's.
        let set_aside = !findings.is_empty();
        if set_aside && message.contains("missing field") {
            break;
        }
        let Some(at) = at else {
            findings.push(Finding::value(SpecProblem::Type { message }, ""));
            break;
        };
        findings.push(Finding::value(SpecProblem::Type { message }, at.clone()));
        // The first replacement after which the error is elsewhere, and not a missing key
        // that only the removal caused.
        let parent = at.rsplit_once('.').map_or("", |(p, _)| p).to_string();
        let moved = |r: &Result<Spec, (Option<String>, String)>| match r {
            Ok(_) => true,
            Err((p, m)) => {
                let missing_here = m.contains("missing field") && p.as_deref().unwrap_or("") == parent;
                p.as_deref() != Some(at.as_str()) && !missing_here
            }
        };
        let mut next = None;
        let mut removed = value.clone();
        remove_path(&mut removed, &at);
        let candidate = attempt(&removed);
        if moved(&candidate) {
            next = Some((removed, candidate));
        } else {
            for p in &placeholders {
                let mut replaced = value.clone();
                set_path(&mut replaced, &at, p.clone());
                let candidate = attempt(&replaced);
                if moved(&candidate) {
                    next = Some((replaced, candidate));
                    break;
                }
            }
        }
        match next {
            Some((v, r)) => {
                value = v;
                current = r;
            }
            None => break,
        }
    }
    (None, findings)
}

/// serde_yaml's first error, positioned where serde_yaml puts it.
fn first_type_error(path: &Path, source: &str) -> Report {
    let mut r = Report::default();
    if let Err(e) = serde_yaml::from_str::<Spec>(source) {
        let position = e.location().map(|l| Position { line: l.line(), column: l.column() });
        r.push(Diagnostic::error(strip_location(&e.to_string())).at(path, source, position, 1));
    }
    r
}

fn diagnose(path: &Path, source: &str, positions: &Positions, findings: Vec<Finding>) -> Report {
    let mut report = Report::default();
    for f in findings {
        let position = if f.on_key { positions.key(&f.path) } else { positions.value(&f.path) };
        let width = if f.on_key {
            f.path.rsplit('.').next().map_or(1, |k| k.chars().count())
        } else {
            positions.width(&f.path).unwrap_or(1)
        };
        let base = if f.problem.is_warning() {
            Diagnostic::warning(f.problem.to_string())
        } else {
            Diagnostic::error(f.problem.to_string())
        };
        report.push(base.at(path, source, position, width).with_help_opt(f.problem.help()));
    }
    report.sort();
    report
}

/// Removes the mapping entry at a `positions` path such as `data.waves[0].idd`.
fn remove_path(value: &mut serde_yaml::Value, path: &str) {
    if let Some((map, last)) = parent_mapping(value, path) {
        map.remove(last);
    }
}

/// Replaces the mapping entry at a `positions` path.
fn set_path(value: &mut serde_yaml::Value, path: &str, with: serde_yaml::Value) {
    if let Some((map, last)) = parent_mapping(value, path)
        && let Some(slot) = map.get_mut(last)
    {
        *slot = with;
    }
}

/// The mapping that holds the last key of `path`, and that key.
fn parent_mapping<'a, 'p>(
    value: &'a mut serde_yaml::Value,
    path: &'p str,
) -> Option<(&'a mut serde_yaml::Mapping, &'p str)> {
    let mut segments: Vec<&str> = path.split('.').collect();
    let last = segments.pop()?;
    let mut node = value;
    for seg in segments {
        // `name[3]` is element 3 of `name`; anything else is a plain key (names may hold `[`).
        let indexed = seg
            .strip_suffix(']')
            .and_then(|s| s.rsplit_once('['))
            .and_then(|(k, i)| Some((k, i.parse::<usize>().ok()?)));
        let (key, index) = match indexed {
            Some((k, i)) => (k, Some(i)),
            None => (seg, None),
        };
        let next = node.get_mut(key)?;
        node = match index {
            Some(k) => next.get_mut(k)?,
            None => next,
        };
    }
    Some((node.as_mapping_mut()?, last))
}

/// Removes `.` and folds `name/..` without touching the file system, so messages show
/// `reports/x` rather than `pipelines/demo/../../reports/x`. A leading `..` is kept.
pub fn lexical_clean(path: &Path) -> PathBuf {
    use std::path::Component;
    let mut out: Vec<Component<'_>> = Vec::new();
    for c in path.components() {
        match c {
            Component::CurDir => {}
            Component::ParentDir if matches!(out.last(), Some(Component::Normal(_))) => {
                out.pop();
            }
            other => out.push(other),
        }
    }
    if out.is_empty() { PathBuf::from(".") } else { out.iter().collect() }
}

/// serde_yaml appends " at line L column C" to messages; the diagnostic shows that itself.
fn strip_location(message: &str) -> String {
    match message.rfind(" at line ") {
        Some(i) => message[..i].to_string(),
        None => message.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::{SpecFile, SpecProblem, lexical_clean};
    use std::path::{Path, PathBuf};

    const SPEC: &str = "construe: 1\ntitle: t\ndata:\n  waves: [{id: w, file: w.csv}]\nconstructs:\n  a: {items: [x, y, z]}\nreport: {truth_model: model.yaml}\n";

    #[cfg(unix)]
    #[test]
    fn a_fifo_as_truth_model_is_a_spec_problem_not_waited_on() {
        let dir = tempfile::tempdir().unwrap();
        let fifo = dir.path().join("model.yaml");
        assert!(std::process::Command::new("mkfifo").arg(&fifo).status().unwrap().success());
        let spec = SpecFile::parse(&dir.path().join("spec.yaml"), SPEC.into()).unwrap();
        assert!(spec.truth.is_none());
        assert_eq!(spec.early.len(), 1);
        assert_eq!(spec.early[0].path, "report.truth_model");
        assert!(
            matches!(&spec.early[0].problem, SpecProblem::UnreadableTruthModel { reason, .. } if reason.contains("named pipe")),
            "{:?}",
            spec.early[0]
        );
    }

    #[test]
    fn the_truth_model_is_read_once_with_the_spec() {
        let dir = tempfile::tempdir().unwrap();
        let model =
            "simulate: 1\nconstructs: [{name: a}]\nitems: [{name: x, construct: a, loading: 1, error_variance: 1}]\n";
        std::fs::write(dir.path().join("model.yaml"), model).unwrap();
        let spec = SpecFile::parse(&dir.path().join("spec.yaml"), SPEC.into()).unwrap();
        assert!(spec.early.is_empty(), "{:?}", spec.early);
        let truth = spec.truth.as_ref().unwrap();
        assert_eq!(truth.hash, crate::pipeline::key::Key::of_bytes(model.as_bytes()));
        assert_eq!(truth.truth.variables, ["x"]);
        // Later changes to the file do not reach this run: nothing reads it again.
        std::fs::remove_file(dir.path().join("model.yaml")).unwrap();
        assert_eq!(crate::app::run::report_settings(&spec)["truth_model"], truth.hash.hex());

        let missing = SpecFile::parse(&dir.path().join("spec.yaml"), SPEC.into()).unwrap();
        assert!(matches!(missing.early[0].problem, SpecProblem::MissingTruthModel { .. }));
    }

    #[test]
    fn lexical_clean_folds_parent_steps() {
        assert_eq!(lexical_clean(Path::new("pipelines/transit/../../reports")), PathBuf::from("reports"));
        assert_eq!(lexical_clean(Path::new("./a/./b")), PathBuf::from("a/b"));
        assert_eq!(lexical_clean(Path::new("../x")), PathBuf::from("../x"));
        assert_eq!(lexical_clean(Path::new("a/..")), PathBuf::from("."));
    }
}
