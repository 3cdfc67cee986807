//! Runs a plan: each step is taken from the cache when a sound entry exists under its key,
//! otherwise computed and stored. Central type: `Execution` (artifacts plus per-step outcome).
//! A damaged or undecodable entry is reported through the observer and recomputed.

use std::collections::BTreeMap;
use std::time::Instant;

use super::PipelineError;
use super::cache::{Cache, Lookup};
use super::key::Key;
use super::plan::Plan;
use crate::steps::{Artifact, Inputs, StepKind};

/// What happened to one step.
#[derive(Debug, Clone)]
pub struct Outcome {
    pub kind: StepKind,
    pub key: Key,
    pub cached: bool,
    pub seconds: f64,
    /// BLAKE3 of the artifact's bytes: what `verify` compares.
    pub artifact_hash: Key,
    pub description: String,
}

/// Things the executor tells the user about while it runs.
pub enum Event<'a> {
    Warning(String),
    Done(&'a Outcome),
}

pub struct Execution {
    pub outcomes: Vec<Outcome>,
    pub artifacts: BTreeMap<StepKind, Artifact>,
}

pub fn execute(plan: &Plan, cache: &Cache, mut observe: impl FnMut(Event<'_>)) -> Result<Execution, PipelineError> {
    let mut artifacts = BTreeMap::new();
    let mut outcomes = Vec::new();
    for planned in &plan.steps {
        let kind = planned.step.kind();
        let started = Instant::now();
        let cached = match cache.get(&planned.key) {
            Lookup::Hit(bytes) => match Artifact::decode(kind, &bytes) {
                // The bytes go out of scope here, before the next step runs.
                Some(a) => Some((a, Key::of_bytes(&bytes))),
                None => {
                    observe(Event::Warning(format!(
                        "cache entry for `{kind}` ({}) could not be decoded; recomputing",
                        planned.key.short()
                    )));
                    None
                }
            },
            Lookup::Miss => None,
            Lookup::Damaged { path, reason } => {
                observe(Event::Warning(format!(
                    "cache entry {} for `{kind}` is damaged ({reason}); recomputing",
                    path.display()
                )));
                None
            }
        };
        let was_cached = cached.is_some();
        let (artifact, artifact_hash) = match cached {
            Some(hit) => hit,
            None => {
                let artifact = planned.step.run(&Inputs { step: kind, artifacts: &artifacts })?;
                let hash =
                    cache.put_with(&planned.key, |w| artifact.write_to(w)).map_err(|source| PipelineError::Io {
                        action: "write cache entry",
                        path: cache.root().map(|p| p.to_path_buf()).unwrap_or_default(),
                        source,
                    })?;
                (artifact, hash)
            }
        };
        let outcome = Outcome {
            kind,
            key: planned.key,
            cached: was_cached,
            // Milliseconds: the manifest records this and the report shows it, and a short
            // decimal reads back exactly, so `verify` re-renders the same report.
            seconds: (started.elapsed().as_secs_f64() * 1000.0).round() / 1000.0,
            artifact_hash,
            description: planned.step.describe(&artifact),
        };
        observe(Event::Done(&outcome));
        outcomes.push(outcome);
        artifacts.insert(kind, artifact);
    }
    Ok(Execution { outcomes, artifacts })
}
