//! `construe plan`: list each step with its short key and whether the cache holds it,
//! computing nothing (data files are hashed, not parsed). A step the cache lacks is told
//! apart by the latest report version's manifest: "not computed yet" (no version ran it),
//! "inputs changed" (with what: its parameters, its algorithm version, a data file, or an
//! upstream step), or "not in the cache" (the version's key, but the entry is gone).

use std::path::Path;

use super::AppError;
use super::check::check;
use crate::pipeline::cache::Cache;
use crate::pipeline::manifest::Manifest;
use crate::pipeline::plan::{Plan, PlannedStep};
use crate::report::diff::value_changes;
use crate::report::{slug, versions};

/// Where a step stands before a run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum StepStatus {
    Cached,
    /// No report version has run this step.
    NotComputed,
    /// The latest version ran it with other inputs; the reasons, one each.
    InputsChanged(Vec<String>),
    /// The latest version ran it with these very inputs, but the cache no longer has it.
    Evicted {
        version: u32,
    },
}

impl std::fmt::Display for StepStatus {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            StepStatus::Cached => write!(f, "cached"),
            StepStatus::NotComputed => write!(f, "not computed yet"),
            StepStatus::InputsChanged(why) => write!(f, "inputs changed: {}", why.join("; ")),
            StepStatus::Evicted { version } => write!(f, "not in the cache (computed for v{version})"),
        }
    }
}

/// One line of the plan listing.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlanLine {
    pub step: String,
    pub key: String,
    pub cached: bool,
    pub status: StepStatus,
}

pub fn plan(path: &Path, cache: &Cache) -> Result<(Vec<PlanLine>, crate::spec::Report), AppError> {
    let checked = check(path);
    let spec = match checked.spec {
        Some(s) if !checked.report.has_errors() => s,
        _ => return Err(AppError::Invalid(checked.report)),
    };
    let plan = Plan::new(&spec)?;
    let root = spec.resolve(&spec.spec.report.dir).join(slug(&spec.spec.title));
    let latest = versions::latest(&root);
    let lines = plan
        .steps
        .iter()
        .map(|s| {
            let cached = cache.contains(&s.key);
            let status = if cached {
                StepStatus::Cached
            } else {
                match &latest {
                    Some((version, manifest)) => status_against(s, &plan, *version, manifest),
                    None => StepStatus::NotComputed,
                }
            };
            PlanLine { step: s.step.kind().name().to_string(), key: s.key.short(), cached, status }
        })
        .collect();
    Ok((lines, checked.report))
}

/// Why an uncached step differs from the same step in version `version`.
fn status_against(s: &PlannedStep, plan: &Plan, version: u32, manifest: &Manifest) -> StepStatus {
    let kind = s.step.kind().name();
    let Some(before) = manifest.steps.iter().find(|m| m.kind == kind) else { return StepStatus::NotComputed };
    if before.key == s.key {
        return StepStatus::Evicted { version };
    }
    let mut why = Vec::new();
    if before.version != s.step.version() {
        why.push(format!("algorithm version {} → {}", before.version, s.step.version()));
    }
    why.extend(value_changes(&before.params, &s.params).into_iter().map(|c| format!("parameter {c}")));
    if !s.step.files().is_empty() {
        for f in &plan.files {
            match manifest.inputs.iter().find(|i| i.wave == f.wave && i.path == f.shown) {
                Some(i) if i.blake3 == f.hash => {}
                Some(_) => why.push(format!("data file {} changed", f.shown)),
                None => why.push(format!("data file {} added", f.shown)),
            }
        }
        for i in manifest.inputs.iter().filter(|i| !plan.files.iter().any(|f| f.wave == i.wave && f.shown == i.path)) {
            why.push(format!("data file {} removed", i.path));
        }
    }
    for (input, key) in &s.input_keys {
        if before.inputs.get(input.name()) != Some(key) {
            why.push(format!("upstream step {input} changed"));
        }
    }
    if why.is_empty() {
        // The key mixes in the cache format too; nothing else differs.
        why.push("the cache format changed".into());
    }
    StepStatus::InputsChanged(why)
}
