//! `construe plan`: list each step with its short key and whether the cache holds it,
//! computing nothing (data files are hashed, not parsed).

use std::path::Path;

use super::AppError;
use super::check::check;
use crate::pipeline::cache::Cache;
use crate::pipeline::plan::Plan;

/// One line of the plan listing.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlanLine {
    pub step: String,
    pub key: String,
    pub cached: bool,
}

pub fn plan(path: &Path, cache: &Cache) -> Result<(Vec<PlanLine>, crate::spec::Report), AppError> {
    let checked = check(path);
    let spec = match checked.spec {
        Some(s) if !checked.report.has_errors() => s,
        _ => return Err(AppError::Invalid(checked.report)),
    };
    let plan = Plan::new(&spec)?;
    let lines = plan
        .steps
        .iter()
        .map(|s| PlanLine {
            step: s.step.kind().name().to_string(),
            key: s.key.short(),
            cached: cache.contains(&s.key),
        })
        .collect();
    Ok((lines, checked.report))
}
