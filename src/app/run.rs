//! `construe run`: check, plan, execute with the cache, and write a new report version unless
//! nothing changed. Central function: `run`. Holds the run lock from planning to publishing,
//! so a concurrent run of the same spec is refused instead of interleaving.

use std::collections::BTreeMap;
use std::path::Path;

use serde_json::Value;

use super::check::check;
use super::context::report_context;
use super::lints::data_lints;
use super::{AppError, Log};
use crate::pipeline::cache::Cache;
use crate::pipeline::executor::{Event, execute};
use crate::pipeline::key::Key;
use crate::pipeline::lock::RunLock;
use crate::pipeline::manifest::{Manifest, SpecInfo};
use crate::pipeline::plan::Plan;
use crate::report::{Results, WriteOutcome, slug, write_version};
use crate::spec::SpecFile;
use crate::steps::{Artifact, StepKind};

pub struct RunSummary {
    pub outcome: WriteOutcome,
    pub computed: usize,
    pub cached: usize,
}

pub fn run(path: &Path, cache: &Cache, log: &mut dyn Log) -> Result<RunSummary, AppError> {
    let checked = check(path);
    for d in checked.report.diagnostics.iter().filter(|d| !d.is_error()) {
        log.warn(d.to_string().trim_end().trim_start_matches("warning: "));
    }
    let spec = match checked.spec {
        Some(s) if !checked.report.has_errors() => s,
        _ => return Err(AppError::Invalid(checked.report)),
    };
    let root = spec.resolve(&spec.spec.report.dir).join(slug(&spec.spec.title));
    let _lock = RunLock::acquire(&root)?;
    let plan = Plan::new(&spec)?;
    let progress = log.progress();
    let execution = execute(&plan, cache, progress.as_ref(), |event| match event {
        Event::Warning(w) => log.warn(&w),
        Event::Done(o) => log.line(&format!(
            "{:<12} {:<9} {:>8.3}s  {}",
            o.kind.name(),
            if o.cached { "cached" } else { "computed" },
            o.seconds,
            o.description
        )),
    })?;
    if let Some(Artifact::Load(load)) = execution.artifacts.get(&StepKind::Load)
        && let Some(table) = &load.table
    {
        let findings = data_lints(&spec, &table.items, table.rows(), &|k, r| table.columns[k].get(r));
        for d in spec.diagnose(findings).diagnostics {
            log.warn(d.to_string().trim_end().trim_start_matches("warning: "));
        }
    }
    let typed = Results::of(&execution.artifacts);
    let results = typed.to_value();
    let mut manifest =
        Manifest::new(spec_info(&spec), &plan, &execution.outcomes, seeds(&spec), report_settings(&spec));
    // The version folder sits one level below `root`.
    manifest.spec.from_report =
        super::verify::relative_path(&root, &spec.path).map(|r| Path::new("..").join(r).display().to_string());
    let mut context = report_context(&spec, &execution, &results);
    let mut warnings = Vec::new();
    let outcome =
        write_version(&root, &mut manifest, &typed, &mut context, &spec.spec.report.formats, &mut |w| warnings.push(w));
    for w in &warnings {
        log.warn(w);
    }
    let outcome = outcome?;
    let cached = execution.outcomes.iter().filter(|o| o.cached).count();
    Ok(RunSummary { outcome, computed: execution.outcomes.len() - cached, cached })
}

pub(crate) fn spec_info(spec: &SpecFile) -> SpecInfo {
    let content = serde_json::to_value(&spec.spec).unwrap_or(Value::Null);
    SpecInfo {
        path: spec.path.display().to_string(),
        file_hash: Key::of_bytes(spec.source.as_bytes()),
        content_hash: Key::of_json(&content),
        from_report: None,
        content: Some(content),
    }
}

/// What besides the steps shapes the written report: the formats, and the truth model's bytes
/// (hashed when the spec was read; the file is not read again).
pub(crate) fn report_settings(spec: &SpecFile) -> Value {
    let truth = spec.truth.as_ref().map(|t| t.hash.hex());
    serde_json::json!({"formats": spec.spec.report.formats, "truth_model": truth})
}

pub(crate) fn seeds(spec: &SpecFile) -> BTreeMap<String, u64> {
    let a = &spec.spec.analyses;
    let mut seeds = BTreeMap::new();
    if let Some(s) = &a.sensitivity {
        seeds.insert("sensitivity".into(), s.seed);
    }
    if let Some(r) = &a.resample {
        seeds.insert("resample".into(), r.seed);
    }
    seeds
}
