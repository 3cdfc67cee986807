//! `construe run SPEC --shard K/N`: compute share K of N of the spec's bootstrap replicates into
//! the cache and write no report (a cluster job array; see docs/power.md). Every replicate is
//! stored as soon as it is finished, so a killed shard is rerun without recomputing them, and
//! the unsharded `run` afterwards finds them all and writes the report, identical to a run
//! without shards. Shards take no run lock: they only add cache entries, which are written
//! whole and named by content.

use std::path::Path;

use super::check::check;
use super::power::{PowerError, Shard};
use super::{AppError, Log};
use crate::pipeline::cache::Cache;
use crate::pipeline::executor::{Event, ReplicateShard, execute_share};
use crate::pipeline::plan::Plan;
use crate::spec::{Diagnostic, Report};
use crate::steps::StepKind;

/// What a shard did.
pub struct ShareSummary {
    pub step: StepKind,
    pub computed: usize,
    pub reused: usize,
}

pub fn run_share(path: &Path, shard: &str, cache: &Cache, log: &mut dyn Log) -> Result<ShareSummary, AppError> {
    let shard = Shard::parse(shard).map_err(AppError::Power)?;
    let checked = check(path);
    for d in checked.report.diagnostics.iter().filter(|d| !d.is_error()) {
        log.warn(d.to_string().trim_end().trim_start_matches("warning: "));
    }
    let spec = match checked.spec {
        Some(s) if !checked.report.has_errors() => s,
        _ => return Err(AppError::Invalid(checked.report)),
    };
    if cache.root().is_none() {
        return Err(AppError::Power(PowerError::Shard {
            text: format!("{}/{}", shard.k, shard.of),
            reason: "a shard's only output is the cache, and `--no-cache` turns it off".into(),
        }));
    }
    let plan = Plan::new(&spec)?;
    let progress = log.progress();
    let share = ReplicateShard { k: shard.k, of: shard.of };
    let done = execute_share(&plan, cache, share, progress.as_ref(), |event| match event {
        Event::Warning(w) => log.warn(&w),
        Event::Done(o) => log.line(&format!(
            "{:<12} {:<9} {:>8.3}s  {}",
            o.kind.name(),
            if o.cached { "cached" } else { "computed" },
            o.seconds,
            o.description
        )),
    })?;
    match done {
        Some((step, computed, reused)) => Ok(ShareSummary { step, computed, reused }),
        None => {
            let mut r = Report::default();
            r.push(Diagnostic::error(format!(
                "`--shard`: spec `{}` has no `analyses.resample`, the only step with replicates to share out",
                path.display()
            )));
            Err(AppError::Invalid(r))
        }
    }
}
